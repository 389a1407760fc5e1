//! Debye sums over binned pair histograms: `S_p(Q) = Σ_k H_p[k] sin(Q r_k)/(Q r_k)` with
//! `r_k = k·dr`.
//!
//! For node `k ≥ 1`, `sin(Q k dr)/(Q k dr) = (H_p[k]/k)·sin(kθ)/θ` with `θ = Q·dr`, so the sum
//! is `H_p[0] + (1/θ) Σ_k (H_p[k]/k) sin(kθ)`, and `sin(kθ)` follows from `sin((k−1)θ)` by one
//! rotation (phase stepping). The rotation is re-anchored with a fresh sincos of `k·θ` every
//! [`ANCHOR`] nodes, which keeps the drift near `ANCHOR·2⁻⁵³` relative. Eight Q values are
//! stepped together (one vector), and all group pairs share the sines. Every Q is summed by
//! one thread over the nodes in order, so results do not depend on the thread count.

use crate::error::{Error, Result};
use crate::sincos::{mul_add, sincos_lanes, LANES};
use rayon::prelude::*;

/// Nodes between fresh sincos anchors.
pub const ANCHOR: usize = 32;

/// `out[p * q.len() + m] = Σ_k hist[p * n_nodes + k] · sin(q_m k dr)/(q_m k dr)` (the term
/// of node 0, and every term at `q = 0`, is `hist[..]` itself).
///
/// `hist` is row-major `(n_pairs, n_nodes)` (any real weights: binned pair counts, or
/// differences from a uniform density, windowed); `q` in Å⁻¹ (≥ 0), `dr` in Å.
pub fn debye_sums(
    hist: &[f64],
    n_nodes: usize,
    dr: f64,
    q: &[f64],
    threads: Option<usize>,
) -> Result<Vec<f64>> {
    if n_nodes == 0 || !hist.len().is_multiple_of(n_nodes) {
        return Err(Error::Shape(format!(
            "histogram of {} values is not a whole number of rows of {n_nodes} nodes",
            hist.len()
        )));
    }
    if !(dr.is_finite() && dr > 0.0) {
        return Err(Error::Range(format!(
            "node spacing dr must be a positive number of Å, got {dr}"
        )));
    }
    if let Some(i) = hist.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFinite(format!(
            "histogram value {} (pair {}, node {}) is not finite",
            hist[i],
            i / n_nodes,
            i % n_nodes
        )));
    }
    if let Some(m) = q.iter().position(|v| !(v.is_finite() && *v >= 0.0)) {
        return Err(Error::Range(format!(
            "|Q| of point {m} must be finite and >= 0, got {}",
            q[m]
        )));
    }
    let n_p = hist.len() / n_nodes;
    let m = q.len();
    // Node-major copy of H[k]/k so that all pairs are updated from one sine.
    let mut scaled = vec![0.0; n_nodes * n_p];
    let mut h0 = vec![0.0; n_p];
    let mut total = vec![0.0; n_p];
    for p in 0..n_p {
        let row = &hist[p * n_nodes..(p + 1) * n_nodes];
        h0[p] = row[0];
        total[p] = row.iter().sum();
        for k in 1..n_nodes {
            scaled[k * n_p + p] = row[k] / k as f64;
        }
    }
    let blocks: Vec<usize> = (0..m.div_ceil(LANES)).collect();
    let parts: Vec<Vec<[f64; LANES]>> = crate::pool::run(threads, || {
        blocks
            .into_par_iter()
            .map(|b| {
                let mut theta = [0.0; LANES];
                for l in 0..LANES {
                    if let Some(&qv) = q.get(b * LANES + l) {
                        theta[l] = qv * dr;
                    }
                }
                lane_sums(&scaled, n_p, n_nodes, &theta)
            })
            .collect()
    })?;
    let mut out = vec![0.0; n_p * m];
    for (b, acc) in parts.iter().enumerate() {
        for l in 0..LANES {
            let mi = b * LANES + l;
            if mi >= m {
                break;
            }
            let th = q[mi] * dr;
            for p in 0..n_p {
                out[p * m + mi] = if th > 0.0 {
                    h0[p] + acc[p][l] / th
                } else {
                    total[p]
                };
            }
        }
    }
    Ok(out)
}

/// `Σ_{k ≥ 1} scaled[k, p] · sin(k θ_l)` for eight θ at once.
fn lane_sums(
    scaled: &[f64],
    n_p: usize,
    n_nodes: usize,
    theta: &[f64; LANES],
) -> Vec<[f64; LANES]> {
    let mut acc = vec![[0.0; LANES]; n_p];
    let (mut ss, mut cs) = ([0.0; LANES], [0.0; LANES]);
    sincos_lanes(theta, &mut ss, &mut cs);
    let (mut s, mut c) = ([0.0; LANES], [0.0; LANES]);
    let mut x = [0.0; LANES];
    let mut k = 1;
    while k < n_nodes {
        // Anchor at node k, then rotate for the next ANCHOR − 1 nodes.
        for l in 0..LANES {
            x[l] = k as f64 * theta[l];
        }
        sincos_lanes(&x, &mut s, &mut c);
        let end = (k + ANCHOR).min(n_nodes);
        for kk in k..end {
            let w = &scaled[kk * n_p..(kk + 1) * n_p];
            for p in 0..n_p {
                for l in 0..LANES {
                    acc[p][l] = mul_add(w[p], s[l], acc[p][l]);
                }
            }
            for l in 0..LANES {
                let sn = mul_add(s[l], cs[l], c[l] * ss[l]);
                let cn = mul_add(c[l], cs[l], -(s[l] * ss[l]));
                s[l] = sn;
                c[l] = cn;
            }
        }
        k = end;
    }
    acc
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_direct_sinc_sums() {
        // Reference: the sum written out with the C library's sin.
        let n_nodes = 1000;
        let dr = 0.01;
        let hist: Vec<f64> = (0..2 * n_nodes)
            .map(|i| ((i * 7919) % 101) as f64 / 10.0)
            .collect();
        let q: Vec<f64> = (0..37).map(|i| i as f64 * 0.61).collect();
        let got = debye_sums(&hist, n_nodes, dr, &q, Some(2)).unwrap();
        for p in 0..2 {
            for (mi, &qv) in q.iter().enumerate() {
                let want: f64 = (0..n_nodes)
                    .map(|k| {
                        let x = qv * k as f64 * dr;
                        let sinc = if x == 0.0 { 1.0 } else { x.sin() / x };
                        hist[p * n_nodes + k] * sinc
                    })
                    .sum();
                let scale: f64 = hist[p * n_nodes..(p + 1) * n_nodes].iter().sum();
                let err = (got[p * q.len() + mi] - want).abs() / scale;
                assert!(
                    err < 1e-13,
                    "pair {p}, Q = {qv}: {} vs {want}",
                    got[p * q.len() + mi]
                );
            }
        }
    }

    #[test]
    fn thread_count_does_not_change_results() {
        let hist: Vec<f64> = (0..3000).map(|i| (i % 17) as f64).collect();
        let q: Vec<f64> = (0..100).map(|i| i as f64 * 0.2).collect();
        let a = debye_sums(&hist, 1000, 0.02, &q, Some(1)).unwrap();
        let b = debye_sums(&hist, 1000, 0.02, &q, Some(2)).unwrap();
        assert_eq!(a, b);
    }

    #[test]
    fn bad_input_is_refused() {
        assert!(debye_sums(&[1.0; 10], 3, 0.1, &[1.0], None).is_err());
        assert!(debye_sums(&[1.0; 9], 3, 0.0, &[1.0], None).is_err());
        let e = debye_sums(&[1.0; 9], 3, 0.1, &[1.0, -1.0], None).unwrap_err();
        assert!(e.to_string().contains("point 1"), "{e}");
        let mut h = [1.0; 9];
        h[4] = f64::NAN;
        let e = debye_sums(&h, 3, 0.1, &[1.0], None).unwrap_err();
        assert!(e.to_string().contains("pair 1, node 1"), "{e}");
    }
}
