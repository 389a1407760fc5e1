//! Cross-module checks of the pair histograms and Debye sums against analytic results:
//! coordination shells of fcc and bcc crystals (textbook values, e.g. Kittel, "Introduction
//! to Solid State Physics", ch. 1 — memory), and the Debye double sum of a small cluster
//! written out with the C library's sin.

use kinemap_core::pairs::pair_index;
use kinemap_core::{debye_sums, PairHistogram};

/// A crystal case: basis (fractional), lattice constant (Å), shells (distance / a, count).
type Case<'a> = (&'a [[f64; 3]], f64, Vec<(f64, f64)>);

fn crystal(basis: &[[f64; 3]], a: f64, n: usize) -> (Vec<[f64; 3]>, [[f64; 3]; 3]) {
    let mut pos = Vec::new();
    for i in 0..n {
        for j in 0..n {
            for k in 0..n {
                for b in basis {
                    pos.push([
                        (i as f64 + b[0]) * a,
                        (j as f64 + b[1]) * a,
                        (k as f64 + b[2]) * a,
                    ]);
                }
            }
        }
    }
    let l = a * n as f64;
    (pos, [[l, 0.0, 0.0], [0.0, l, 0.0], [0.0, 0.0, l]])
}

/// Neighbours per atom in the shell `lo..hi` (Å): twice the binned pair weight over N.
fn neighbours(values: &[f64], dr: f64, lo: f64, hi: f64, n_atoms: usize) -> f64 {
    let sum: f64 = values
        .iter()
        .enumerate()
        .filter(|(k, _)| (*k as f64 * dr) >= lo && (*k as f64 * dr) <= hi)
        .map(|(_, v)| v)
        .sum();
    2.0 * sum / n_atoms as f64
}

#[test]
fn fcc_and_bcc_coordination_shells() {
    let fcc = [
        [0.0, 0.0, 0.0],
        [0.0, 0.5, 0.5],
        [0.5, 0.0, 0.5],
        [0.5, 0.5, 0.0],
    ];
    let bcc = [[0.0, 0.0, 0.0], [0.5, 0.5, 0.5]];
    let s2 = 2f64.sqrt();
    let cases: [Case<'_>; 2] = [
        (
            &fcc,
            4.05,
            vec![
                (1.0 / s2, 12.0),
                (1.0, 6.0),
                (1.5f64.sqrt(), 24.0),
                (s2, 12.0),
            ],
        ),
        (
            &bcc,
            3.30,
            vec![(3f64.sqrt() / 2.0, 8.0), (1.0, 6.0), (s2, 12.0)],
        ),
    ];
    for (basis, a, shells) in cases {
        let (pos, cell) = crystal(basis, a, 5);
        let dr = 0.01;
        let cutoff = 0.5 * 5.0 * a;
        let n_nodes = (cutoff / dr) as usize + 2;
        let mut h = PairHistogram::new(1, n_nodes, dr, Some(cutoff), Some(cell)).unwrap();
        h.add_within(&pos, &vec![0; pos.len()], &vec![1.0; pos.len()], None)
            .unwrap();
        let v = h.values();
        for (d, z) in shells {
            let got = neighbours(&v, dr, d * a - 0.05, d * a + 0.05, pos.len());
            assert!((got - z).abs() < 1e-9, "a = {a}, shell {d}: {got} vs {z}");
        }
        // nothing closer than the first shell
        let first = neighbours(&v, dr, 0.0, 0.6 * a, pos.len());
        assert_eq!(first, 0.0);
    }
}

#[test]
fn cluster_debye_sum_matches_the_double_sum() {
    // Unit scatterers: I(Q) = N + Σ_{i≠j} sin(Q r_ij)/(Q r_ij). The binned sum differs by at
    // most (Q dr)²/24 per pair (two-node binning).
    let mut pos = Vec::new();
    let mut s = 12345u64;
    for _ in 0..120 {
        let mut c = [0.0; 3];
        for v in c.iter_mut() {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            *v = 12.0 * ((s >> 11) as f64 / (1u64 << 53) as f64);
        }
        pos.push(c);
    }
    let groups: Vec<u32> = (0..pos.len()).map(|i| (i % 2) as u32).collect();
    let dr = 0.005;
    let n_nodes = (12.0 * 3f64.sqrt() / dr) as usize + 2;
    let mut h = PairHistogram::new(2, n_nodes, dr, None, None).unwrap();
    h.add_within(&pos, &groups, &vec![1.0; pos.len()], Some(2))
        .unwrap();
    let q: Vec<f64> = (0..50).map(|i| 0.4 * i as f64).collect();
    let sums = debye_sums(&h.values(), n_nodes, dr, &q, None).unwrap();
    let n_pairs = pos.len() * (pos.len() - 1) / 2;
    for (m, &qv) in q.iter().enumerate() {
        let mut want = pos.len() as f64;
        for i in 0..pos.len() {
            for j in 0..i {
                let r: f64 = (0..3)
                    .map(|k| (pos[i][k] - pos[j][k]).powi(2))
                    .sum::<f64>()
                    .sqrt();
                let x = qv * r;
                want += 2.0 * if x == 0.0 { 1.0 } else { x.sin() / x };
            }
        }
        let got: f64 = pos.len() as f64 + 2.0 * (0..3).map(|p| sums[p * q.len() + m]).sum::<f64>();
        let bound = 2.0 * n_pairs as f64 * (qv * dr).powi(2) / 24.0 + 1e-9;
        assert!((got - want).abs() <= bound, "Q = {qv}: {got} vs {want}");
    }
    assert_eq!(pair_index(1, 0, 2), 1);
}
