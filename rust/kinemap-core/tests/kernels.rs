//! Cross-module checks of the exact kernels against analytic results.

use kinemap_core::dispatch::available_levels;
use kinemap_core::{
    grid_amplitudes, grid_amplitudes_at, point_amplitudes, point_amplitudes_at, AtomSet, Complex64,
    Error, Level,
};

fn rng(seed: u64) -> impl FnMut() -> f64 {
    let mut s = seed;
    move || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64
    }
}

fn random_atoms(n: usize, seed: u64, groups: u32) -> (Vec<[f64; 3]>, Vec<f64>, Vec<u32>) {
    let mut r = rng(seed);
    let pos = (0..n)
        .map(|_| [30.0 * r() - 5.0, 30.0 * r(), 20.0 * r()])
        .collect();
    let w = (0..n).map(|_| 0.2 + 0.8 * r()).collect();
    let g = (0..n).map(|j| (j as u32 * 7 + 3) % groups).collect();
    (pos, w, g)
}

/// Independent reference: the direct sum with the C library's sin/cos.
fn reference(
    pos: &[[f64; 3]],
    w: &[f64],
    g: &[u32],
    q: &[[f64; 3]],
    f: &[Complex64],
) -> Vec<Complex64> {
    let m = q.len();
    q.iter()
        .enumerate()
        .map(|(i, qv)| {
            let mut a = Complex64::new(0.0, 0.0);
            for j in 0..pos.len() {
                let ph = qv[0] * pos[j][0] + qv[1] * pos[j][1] + qv[2] * pos[j][2];
                let (s, c) = ph.sin_cos();
                a += f[g[j] as usize * m + i] * Complex64::new(w[j] * c, w[j] * s);
            }
            a
        })
        .collect()
}

fn max_rel(a: &[Complex64], b: &[Complex64]) -> f64 {
    let scale = b.iter().map(|z| z.norm()).fold(0.0, f64::max);
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).norm())
        .fold(0.0, f64::max)
        / scale
}

#[test]
fn single_atom_gives_its_factor() {
    // Analytic: one atom at r, A(q) = w F exp(i q·r), so |A| = w |F|.
    let atoms = AtomSet::new(&[[1.3, -0.4, 2.2]], &[0.75], &[0], 1).unwrap();
    let q = [[0.5, 1.0, -2.0], [3.0, 0.0, 0.1]];
    let f = [Complex64::new(2.0, 1.0), Complex64::new(-1.5, 0.0)];
    let a = point_amplitudes(&atoms, &q, &f, None).unwrap();
    for (i, z) in a.iter().enumerate() {
        assert!((z.norm() - 0.75 * f[i].norm()).abs() < 1e-14);
    }
}

#[test]
fn two_atoms_give_the_cosine_fringe() {
    // Analytic: atoms at ±d/2 along x, |A(q)|² = 4 cos²(q_x d/2).
    let d = 2.7;
    let atoms = AtomSet::new(
        &[[-d / 2.0, 0.0, 0.0], [d / 2.0, 0.0, 0.0]],
        &[1.0, 1.0],
        &[0, 0],
        1,
    )
    .unwrap();
    let n = 300;
    let f = vec![Complex64::new(1.0, 0.0); n];
    let a = grid_amplitudes(&atoms, &[[0.0, 0.3, 0.0]], [0.05, 0.0, 0.0], n, &f, None).unwrap();
    for (k, z) in a.iter().enumerate() {
        let qx = 0.05 * k as f64;
        let want = 4.0 * (qx * d / 2.0).cos().powi(2);
        assert!((z.norm_sqr() - want).abs() < 1e-12, "k = {k}");
    }
}

#[test]
fn point_and_grid_paths_match_the_reference() {
    let (pos, w, g) = random_atoms(777, 3, 3);
    let atoms = AtomSet::new(&pos, &w, &g, 3).unwrap();
    let (rows, n) = (3usize, 700usize); // 700 steps: drift check over many anchors
    let origins: Vec<[f64; 3]> = (0..rows)
        .map(|r| [-4.0 + 0.1 * r as f64, 1.0, -0.5])
        .collect();
    let step = [0.011, 0.003, 0.007];
    let q: Vec<[f64; 3]> = (0..rows * n)
        .map(|i| {
            let (r, k) = (i / n, (i % n) as f64);
            [
                origins[r][0] + k * step[0],
                origins[r][1] + k * step[1],
                origins[r][2] + k * step[2],
            ]
        })
        .collect();
    let mut r = rng(9);
    let f: Vec<Complex64> = (0..3 * rows * n)
        .map(|_| Complex64::new(1.0 + r(), r() - 0.5))
        .collect();
    let want = reference(&pos, &w, &g, &q, &f);
    let grid = grid_amplitudes(&atoms, &origins, step, n, &f, None).unwrap();
    let point = point_amplitudes(&atoms, &q, &f, None).unwrap();
    assert!(
        max_rel(&point, &want) < 1e-12,
        "point {}",
        max_rel(&point, &want)
    );
    assert!(
        max_rel(&grid, &want) < 1e-12,
        "grid {}",
        max_rel(&grid, &want)
    );
    assert!(max_rel(&grid, &point) < 1e-12);
}

#[test]
fn results_do_not_depend_on_thread_count() {
    let (pos, w, g) = random_atoms(500, 5, 2);
    let atoms = AtomSet::new(&pos, &w, &g, 2).unwrap();
    let origins = [[0.1, 0.2, 0.3], [0.4, 0.5, 0.6]];
    let f = vec![Complex64::new(1.0, 0.25); 2 * 2 * 300];
    let a1 = grid_amplitudes(&atoms, &origins, [0.02, 0.0, 0.01], 300, &f, Some(1)).unwrap();
    let a2 = grid_amplitudes(&atoms, &origins, [0.02, 0.0, 0.01], 300, &f, Some(2)).unwrap();
    assert_eq!(a1, a2);
    let q: Vec<[f64; 3]> = (0..600).map(|i| [0.01 * i as f64, 0.3, -0.2]).collect();
    let p1 = point_amplitudes(&atoms, &q, &f, Some(1)).unwrap();
    let p2 = point_amplitudes(&atoms, &q, &f, Some(2)).unwrap();
    assert_eq!(p1, p2);
}

#[test]
fn friedel_and_translation() {
    // Real factors: A(−q) = conj A(q) (Friedel); |A|² is unchanged by a rigid translation.
    let (pos, w, g) = random_atoms(300, 11, 1);
    let atoms = AtomSet::new(&pos, &w, &g, 1).unwrap();
    let shifted: Vec<[f64; 3]> = pos
        .iter()
        .map(|p| [p[0] + 3.3, p[1] - 1.1, p[2] + 0.7])
        .collect();
    let moved = AtomSet::new(&shifted, &w, &g, 1).unwrap();
    let q: Vec<[f64; 3]> = (0..50).map(|i| [0.07 * i as f64, 0.5, 0.2]).collect();
    let qm: Vec<[f64; 3]> = q.iter().map(|v| [-v[0], -v[1], -v[2]]).collect();
    let f = vec![Complex64::new(2.0, 0.0); 50];
    let a = point_amplitudes(&atoms, &q, &f, None).unwrap();
    let b = point_amplitudes(&atoms, &qm, &f, None).unwrap();
    let c = point_amplitudes(&moved, &q, &f, None).unwrap();
    for i in 0..50 {
        assert!((a[i] - b[i].conj()).norm() < 1e-11 * a[i].norm().max(1.0));
        assert!((a[i].norm_sqr() - c[i].norm_sqr()).abs() < 1e-10 * a[i].norm_sqr().max(1.0));
    }
}

#[test]
fn bad_inputs_are_errors_not_panics() {
    let atoms = AtomSet::new(&[[0.0; 3]], &[1.0], &[0], 1).unwrap();
    let f = [Complex64::new(1.0, 0.0)];
    let e = point_amplitudes(&atoms, &[[f64::NAN, 0.0, 0.0]], &f, None).unwrap_err();
    assert!(matches!(e, Error::NonFinite(_)) && e.to_string().contains("q-point 0"));
    let e = point_amplitudes(&atoms, &[[0.0; 3]], &[], None).unwrap_err();
    assert!(matches!(e, Error::Shape(_)));
    let e = grid_amplitudes(&atoms, &[[0.0; 3]], [0.1, 0.0, 0.0], 0, &[], None).unwrap_err();
    assert!(matches!(e, Error::Range(_)));
    let e = point_amplitudes(&atoms, &[[0.0; 3]], &f, Some(0)).unwrap_err();
    assert!(matches!(e, Error::Range(_)));
}

/// Relative l2 error ‖a − b‖ / ‖b‖.
fn rel_l2(a: &[Complex64], b: &[Complex64]) -> f64 {
    let num: f64 = a.iter().zip(b).map(|(x, y)| (x - y).norm_sqr()).sum();
    let den: f64 = b.iter().map(|y| y.norm_sqr()).sum();
    (num / den).sqrt()
}

/// 300 atoms in a 100 Å box and a row of 8192 points from the origin to |q| = 8 Å⁻¹ along
/// (1, 0.7, 0.4): phases up to ~1.2·10³ rad, 128 anchors of the recurrence per row.
struct LongRow {
    pos: Vec<[f64; 3]>,
    w: Vec<f64>,
    atoms: AtomSet,
    step: [f64; 3],
    q: Vec<[f64; 3]>,
    f: Vec<Complex64>,
}

fn long_row() -> LongRow {
    let mut r = rng(21);
    let pos: Vec<[f64; 3]> = (0..300)
        .map(|_| [100.0 * r(), 100.0 * r(), 100.0 * r()])
        .collect();
    let w: Vec<f64> = (0..300).map(|_| 0.5 + r()).collect();
    let atoms = AtomSet::new(&pos, &w, &[0; 300], 1).unwrap();
    let d = 8.0 / 8192.0 / (1.0f64 + 0.49 + 0.16).sqrt();
    let step = [d, 0.7 * d, 0.4 * d];
    let q = (0..8192)
        .map(|k| [k as f64 * step[0], k as f64 * step[1], k as f64 * step[2]])
        .collect();
    let f = vec![Complex64::new(1.0, 0.0); 8192];
    LongRow {
        pos,
        w,
        atoms,
        step,
        q,
        f,
    }
}

#[test]
fn phase_stepping_drift_stays_below_1e_12_at_every_level() {
    // Reference: the direct sum with the C library's sin/cos (no recurrence).
    let t = long_row();
    let want = reference(&t.pos, &t.w, &[0; 300], &t.q, &t.f);
    for level in available_levels() {
        let grid =
            grid_amplitudes_at(level, &t.atoms, &[[0.0; 3]], t.step, 8192, &t.f, None).unwrap();
        let point = point_amplitudes_at(level, &t.atoms, &t.q, &t.f, None).unwrap();
        let (eg, ep) = (rel_l2(&grid, &want), rel_l2(&point, &want));
        assert!(eg < 1e-12, "{}: grid drift {eg:e}", level.name());
        assert!(ep < 1e-12, "{}: point error {ep:e}", level.name());
        // The worst single point, on the scale of the largest possible |A| (Σ w).
        let sw: f64 = t.w.iter().sum();
        let worst = grid
            .iter()
            .zip(&want)
            .map(|(a, b)| (a - b).norm())
            .fold(0.0, f64::max);
        assert!(worst / sw < 1e-13, "{}: {worst:e}", level.name());
    }
}

#[test]
fn every_kernel_level_gives_the_same_amplitudes_to_1e_13() {
    // Reference for the comparison: the baseline level (no FMA, no vector registers beyond
    // the architecture's baseline); every other level must agree with it to 1e-13 relative,
    // and each level must be independent of the thread count.
    let t = long_row();
    let (pos, w, g) = random_atoms(1000, 13, 3);
    let atoms = AtomSet::new(&pos, &w, &g, 3).unwrap();
    let rows = [[-2.0, 0.5, 0.1], [1.0, -0.3, 2.2]];
    let step = [0.013, 0.002, -0.004];
    let fg: Vec<Complex64> = (0..3 * 2 * 500)
        .map(|i| Complex64::new(1.0 + (i % 7) as f64, -0.5))
        .collect();
    let qp: Vec<[f64; 3]> = (0..500).map(|i| [0.02 * i as f64, -1.0, 0.5]).collect();
    let fp = &fg[..3 * 500];
    let base = Level::Baseline;
    let g0 = grid_amplitudes_at(base, &atoms, &rows, step, 500, &fg, Some(1)).unwrap();
    let p0 = point_amplitudes_at(base, &atoms, &qp, fp, Some(1)).unwrap();
    let l0 = grid_amplitudes_at(base, &t.atoms, &[[0.0; 3]], t.step, 8192, &t.f, None).unwrap();
    for level in available_levels() {
        for threads in [1, 2] {
            let g =
                grid_amplitudes_at(level, &atoms, &rows, step, 500, &fg, Some(threads)).unwrap();
            let p = point_amplitudes_at(level, &atoms, &qp, fp, Some(threads)).unwrap();
            let l = grid_amplitudes_at(
                level,
                &t.atoms,
                &[[0.0; 3]],
                t.step,
                8192,
                &t.f,
                Some(threads),
            )
            .unwrap();
            let name = level.name();
            assert!(rel_l2(&g, &g0) < 1e-13, "{name} grid {:e}", rel_l2(&g, &g0));
            assert!(
                rel_l2(&p, &p0) < 1e-13,
                "{name} point {:e}",
                rel_l2(&p, &p0)
            );
            assert!(rel_l2(&l, &l0) < 1e-13, "{name} row {:e}", rel_l2(&l, &l0));
            if threads == 2 {
                let g1 = grid_amplitudes_at(level, &atoms, &rows, step, 500, &fg, Some(1)).unwrap();
                let p1 = point_amplitudes_at(level, &atoms, &qp, fp, Some(1)).unwrap();
                assert_eq!(g, g1, "{name}: grid depends on the thread count");
                assert_eq!(p, p1, "{name}: point depends on the thread count");
            }
        }
    }
}

#[test]
fn phases_beyond_the_sincos_range_are_refused() {
    // Positions of 1e18 Å (issue 9: they gave intensities of 1e39): refused, naming the bound.
    let atoms = AtomSet::new(
        &[[1e18, 0.0, 0.0], [0.0, 0.0, 0.0]],
        &[1.0, 1.0],
        &[0, 0],
        1,
    )
    .unwrap();
    let f = [Complex64::new(1.0, 0.0); 4];
    let e = point_amplitudes(&atoms, &[[1.0, 0.0, 0.0]], &f[..1], None).unwrap_err();
    assert!(matches!(e, Error::Range(_)), "{e}");
    assert!(e.to_string().contains("1e11 rad"), "{e}");
    let e = grid_amplitudes(&atoms, &[[0.0; 3]], [0.5, 0.0, 0.0], 4, &f, None).unwrap_err();
    assert!(e.to_string().contains("1e11 rad"), "{e}");
    // Just inside the bound: 1e10 Å at |q| ≤ 5 Å⁻¹ (5e10 rad) is accepted, and a single atom
    // has |A| = w exactly there (analytic).
    let far = AtomSet::new(&[[1e10, 0.0, 0.0]], &[1.0], &[0], 1).unwrap();
    let a = grid_amplitudes(&far, &[[0.0; 3]], [1.25, 0.0, 0.0], 4, &f, None).unwrap();
    for z in a {
        assert!((z.norm() - 1.0).abs() < 1e-12, "{z}");
    }
}

#[test]
fn absurd_thread_counts_are_refused() {
    let atoms = AtomSet::new(&[[0.0; 3]], &[1.0], &[0], 1).unwrap();
    let f = [Complex64::new(1.0, 0.0)];
    let e = point_amplitudes(&atoms, &[[0.0; 3]], &f, Some(1 << 40)).unwrap_err();
    assert!(e.to_string().contains("use fewer threads"), "{e}");
}
