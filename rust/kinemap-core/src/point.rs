//! Exact sum on arbitrary q-points: one vectorised sincos per atom–q pair.
//!
//! Work is split over blocks of q-points (each q is summed by one thread over all atoms in a
//! fixed order), so results are bit-identical for any thread count. Atoms are visited in tiles
//! that stay in cache while a whole q-block passes over them.

use crate::atoms::AtomSet;
use crate::error::{Error, Result};
use crate::sincos::{mul_add, sincos_lanes, LANES};
use num_complex::Complex64;
use rayon::prelude::*;

/// q-points handled together by one task.
const Q_BLOCK: usize = 16;
/// Atoms per cache tile (4 arrays × 8 bytes × 1024 = 32 KiB).
const TILE: usize = 1024;

/// Check that every vector is finite; `what` names them in the message ("q-point", "grid row").
pub(crate) fn check_vectors(v: &[[f64; 3]], what: &str) -> Result<()> {
    for (i, q) in v.iter().enumerate() {
        if !(q[0].is_finite() && q[1].is_finite() && q[2].is_finite()) {
            return Err(Error::NonFinite(format!(
                "{what} {i} is not finite: [{}, {}, {}]",
                q[0], q[1], q[2]
            )));
        }
    }
    Ok(())
}

/// Check the factor table: row-major `(n_groups, m)`, every value finite.
pub(crate) fn check_factors(factors: &[Complex64], n_groups: usize, m: usize) -> Result<()> {
    if factors.len() != n_groups * m {
        return Err(Error::Shape(format!(
            "factors must have shape (n_groups, n_points) = ({n_groups}, {m}), got {} values",
            factors.len()
        )));
    }
    for (i, f) in factors.iter().enumerate() {
        if !(f.re.is_finite() && f.im.is_finite()) {
            return Err(Error::NonFinite(format!(
                "factor of group {} at point {} is not finite: {f}",
                i / m,
                i % m
            )));
        }
    }
    Ok(())
}

/// Amplitudes `A(q_m) = Σ_g F[g, m] Σ_{j in g} w_j exp(i q_m·r_j)` at arbitrary q-points.
///
/// `factors` is row-major `(n_groups, q.len())`. Returns one amplitude per q-point.
pub fn point_amplitudes(
    atoms: &AtomSet,
    q: &[[f64; 3]],
    factors: &[Complex64],
    threads: Option<usize>,
) -> Result<Vec<Complex64>> {
    check_vectors(q, "q-point")?;
    check_factors(factors, atoms.n_groups(), q.len())?;
    let m = q.len();
    let mut out = vec![Complex64::new(0.0, 0.0); m];
    crate::pool::run(threads, || {
        out.par_chunks_mut(Q_BLOCK)
            .enumerate()
            .for_each(|(b, out_block)| {
                let q0 = b * Q_BLOCK;
                point_block(
                    atoms,
                    &q[q0..q0 + out_block.len()],
                    factors,
                    m,
                    q0,
                    out_block,
                );
            });
    })?;
    Ok(out)
}

fn point_block(
    atoms: &AtomSet,
    q: &[[f64; 3]],
    factors: &[Complex64],
    m: usize,
    q_first: usize,
    out: &mut [Complex64],
) {
    let nq = q.len();
    let mut acc_re = [[0.0f64; LANES]; Q_BLOCK];
    let mut acc_im = [[0.0f64; LANES]; Q_BLOCK];
    for g in 0..atoms.n_groups() {
        let range = atoms.range(g);
        if range.is_empty() {
            continue;
        }
        for a in acc_re.iter_mut().chain(acc_im.iter_mut()) {
            *a = [0.0; LANES];
        }
        let mut tile_start = range.start;
        while tile_start < range.end {
            let tile_end = (tile_start + TILE).min(range.end);
            let (xs, ys, zs, ws) = (
                &atoms.x[tile_start..tile_end],
                &atoms.y[tile_start..tile_end],
                &atoms.z[tile_start..tile_end],
                &atoms.w[tile_start..tile_end],
            );
            for (qi, qv) in q.iter().enumerate() {
                tile_sum(xs, ys, zs, ws, qv, &mut acc_re[qi], &mut acc_im[qi]);
            }
            tile_start = tile_end;
        }
        for qi in 0..nq {
            let sum = Complex64::new(lane_sum(&acc_re[qi]), lane_sum(&acc_im[qi]));
            out[qi] += factors[g * m + q_first + qi] * sum;
        }
    }
}

/// Add `w exp(i q·r)` of one tile of atoms to the lane accumulators of one q-point. The
/// accumulators are held in locals (registers) for the whole tile.
#[inline(never)]
fn tile_sum(
    xs: &[f64],
    ys: &[f64],
    zs: &[f64],
    ws: &[f64],
    qv: &[f64; 3],
    acc_re: &mut [f64; LANES],
    acc_im: &mut [f64; LANES],
) {
    let (qx, qy, qz) = (qv[0], qv[1], qv[2]);
    let (mut ar, mut ai) = (*acc_re, *acc_im);
    let (mut ph, mut s, mut c) = ([0.0; LANES], [0.0; LANES], [0.0; LANES]);
    for (((x, y), z), w) in xs
        .chunks_exact(LANES)
        .zip(ys.chunks_exact(LANES))
        .zip(zs.chunks_exact(LANES))
        .zip(ws.chunks_exact(LANES))
    {
        for l in 0..LANES {
            ph[l] = mul_add(qz, z[l], mul_add(qy, y[l], qx * x[l]));
        }
        sincos_lanes(&ph, &mut s, &mut c);
        for l in 0..LANES {
            ar[l] = mul_add(w[l], c[l], ar[l]);
            ai[l] = mul_add(w[l], s[l], ai[l]);
        }
    }
    *acc_re = ar;
    *acc_im = ai;
}

/// Sum of the lanes in a fixed pairwise order.
#[inline(always)]
pub(crate) fn lane_sum(v: &[f64; LANES]) -> f64 {
    ((v[0] + v[4]) + (v[2] + v[6])) + ((v[1] + v[5]) + (v[3] + v[7]))
}
