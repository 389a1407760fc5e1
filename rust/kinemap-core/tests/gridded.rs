//! The gridded path against the defining sum `S(q) = Σ_j w_j exp(i q·r_j)`, evaluated
//! directly with the standard library's `sin_cos` (the reference), on random models.

use kinemap_core::{Complex64, PointPlan, RegularPlan};

struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

fn model(n: usize, size: f64, seed: u64) -> (Vec<[f64; 3]>, Vec<f64>) {
    let mut r = Rng(seed);
    let pos = (0..n)
        .map(|_| {
            [
                size * r.next() - 3.0,
                size * r.next(),
                0.7 * size * r.next() + 5.0,
            ]
        })
        .collect();
    let w = (0..n).map(|_| 0.25 + 0.75 * r.next()).collect();
    (pos, w)
}

fn direct(pos: &[[f64; 3]], w: &[f64], q: &[[f64; 3]]) -> Vec<Complex64> {
    q.iter()
        .map(|qv| {
            let mut s = Complex64::new(0.0, 0.0);
            for (r, wj) in pos.iter().zip(w) {
                let (sn, cs) = (qv[0] * r[0] + qv[1] * r[1] + qv[2] * r[2]).sin_cos();
                s += Complex64::new(wj * cs, wj * sn);
            }
            s
        })
        .collect()
}

fn rel_l2(got: &[Complex64], want: &[Complex64]) -> f64 {
    let num: f64 = got.iter().zip(want).map(|(a, b)| (a - b).norm_sqr()).sum();
    let den: f64 = want.iter().map(|b| b.norm_sqr()).sum();
    (num / den).sqrt()
}

fn grid_points(origin: [f64; 3], steps: &[[f64; 3]], shape: &[usize]) -> Vec<[f64; 3]> {
    let m: usize = shape.iter().product();
    (0..m)
        .map(|mut f| {
            let mut q = origin;
            for a in (0..shape.len()).rev() {
                let i = (f % shape[a]) as f64;
                f /= shape[a];
                for d in 0..3 {
                    q[d] += i * steps[a][d];
                }
            }
            q
        })
        .collect()
}

/// Origin, step vectors and shape of a regular grid.
type GridCase = ([f64; 3], Vec<[f64; 3]>, Vec<usize>);

const TOLS: [f64; 4] = [1e-3, 1e-6, 1e-9, 1e-12];

#[test]
fn regular_grids_meet_the_tolerance() {
    let (pos, w) = model(400, 30.0, 1);
    // A volume with skewed axes, a plane not aligned with any axis, a line, and a grid with a
    // length-1 axis (which drops out).
    let cases: Vec<GridCase> = vec![
        (
            [-1.0, 0.3, 0.2],
            vec![[0.11, 0.01, 0.0], [0.02, 0.09, 0.03], [0.0, -0.01, 0.13]],
            vec![11, 8, 9],
        ),
        (
            [0.4, -2.0, 1.1],
            vec![[0.05, 0.08, -0.03], [-0.07, 0.02, 0.06]],
            vec![23, 17],
        ),
        ([2.0, 1.0, -3.0], vec![[-0.02, 0.03, 0.05]], vec![101]),
        (
            [0.0, 0.5, 0.0],
            vec![[0.1, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.12]],
            vec![12, 1, 14],
        ),
    ];
    for (origin, steps, shape) in &cases {
        let q = grid_points(*origin, steps, shape);
        let want = direct(&pos, &w, &q);
        for &tol in &TOLS {
            for &sigma in &[2.25, 2.0, 1.5, 1.25] {
                if kinemap_core::gridded::width_for(tol, sigma) > kinemap_core::gridded::MAX_WIDTH {
                    continue;
                }
                let mut plan = RegularPlan::new(*origin, steps, shape, tol, sigma).unwrap();
                plan.add(&pos, &w, &vec![0; pos.len()], None).unwrap();
                let got = plan.finish(0, None).unwrap();
                let e = rel_l2(&got, &want);
                assert!(
                    e <= tol,
                    "shape {shape:?} tol {tol:e} σ {sigma}: error {e:e}"
                );
            }
        }
    }
}

#[test]
fn arbitrary_points_meet_the_tolerance() {
    let (pos, w) = model(300, 25.0, 2);
    let mut r = Rng(9);
    let q: Vec<[f64; 3]> = (0..700)
        .map(|_| {
            [
                3.0 * r.next() - 1.0,
                2.0 * r.next() - 1.0,
                2.5 * r.next() - 0.5,
            ]
        })
        .collect();
    let want = direct(&pos, &w, &q);
    let (lo, hi) = bounds(&pos);
    for &tol in &TOLS {
        let mut plan = PointPlan::new(&q, lo, hi, tol, 2.0).unwrap();
        plan.add(&pos, &w, &vec![0; pos.len()], None).unwrap();
        let got = plan.finish(0, None).unwrap();
        let e = rel_l2(&got, &want);
        assert!(e <= tol, "tol {tol:e}: error {e:e}");
    }
    // q-points in a plane (one coordinate fixed): that axis drops out.
    let qp: Vec<[f64; 3]> = q.iter().map(|v| [v[0], v[1], 0.8]).collect();
    let want = direct(&pos, &w, &qp);
    let mut plan = PointPlan::new(&qp, lo, hi, 1e-9, 2.0).unwrap();
    plan.add(&pos, &w, &vec![0; pos.len()], None).unwrap();
    let e = rel_l2(&plan.finish(0, None).unwrap(), &want);
    assert!(e <= 1e-9, "plane of points: error {e:e}");
}

fn bounds(pos: &[[f64; 3]]) -> ([f64; 3], [f64; 3]) {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for p in pos {
        for a in 0..3 {
            lo[a] = lo[a].min(p[a]);
            hi[a] = hi[a].max(p[a]);
        }
    }
    (lo, hi)
}

#[test]
fn chunks_and_slots_accumulate() {
    // Two slots, atoms fed in three uneven chunks, against one call per slot.
    let (pos, w) = model(900, 20.0, 3);
    let slots: Vec<u32> = (0..pos.len()).map(|j| (j % 3 == 0) as u32).collect();
    let origin = [0.1, 0.2, 0.3];
    let steps = [[0.07, 0.0, 0.01], [0.0, 0.06, 0.0]];
    let shape = [20, 15];
    let mut a = RegularPlan::new(origin, &steps, &shape, 1e-10, 2.0).unwrap();
    for (s, e) in [(0, 100), (100, 650), (650, 900)] {
        a.add(&pos[s..e], &w[s..e], &slots[s..e], Some(2)).unwrap();
    }
    let q = grid_points(origin, &steps, &shape);
    for slot in 0..2u32 {
        let (p, ww): (Vec<[f64; 3]>, Vec<f64>) = pos
            .iter()
            .zip(&w)
            .zip(&slots)
            .filter(|(_, &s)| s == slot)
            .map(|((p, w), _)| (*p, *w))
            .unzip();
        let e = rel_l2(
            &a.finish(slot as usize, None).unwrap(),
            &direct(&p, &ww, &q),
        );
        assert!(e <= 1e-10, "slot {slot}: {e:e}");
    }
    // A slot that never got atoms gives zeros.
    assert!(a.finish(7, None).unwrap().iter().all(|v| v.norm() == 0.0));
}

#[test]
fn one_and_two_threads_agree_exactly() {
    let (pos, w) = model(5000, 40.0, 4);
    let run = |t: usize| {
        let mut p = RegularPlan::new(
            [0.0; 3],
            &[[0.05, 0.0, 0.0], [0.0, 0.05, 0.01], [0.0, 0.0, 0.05]],
            &[24, 20, 22],
            1e-6,
            2.0,
        )
        .unwrap();
        p.add(&pos, &w, &vec![0; pos.len()], Some(t)).unwrap();
        p.finish(0, Some(t)).unwrap()
    };
    assert_eq!(run(1), run(2));
}

#[test]
fn bad_input_is_refused() {
    let e = RegularPlan::new([0.0; 3], &[[0.1, 0.0, 0.0]], &[0], 1e-6, 2.0).unwrap_err();
    assert!(e.to_string().contains("no points"), "{e}");
    let mut p = RegularPlan::new([0.0; 3], &[[0.1, 0.0, 0.0]], &[10], 1e-6, 2.0).unwrap();
    let e = p
        .add(&[[0.0, f64::NAN, 0.0]], &[1.0], &[0], None)
        .unwrap_err();
    assert!(e.to_string().contains("atom 0"), "{e}");
    let mut p = PointPlan::new(&[[0.1, 0.2, 0.3]], [0.0; 3], [1.0; 3], 1e-6, 2.0).unwrap();
    let e = p.add(&[[0.5, 0.5, 2.0]], &[1.0], &[0], None).unwrap_err();
    assert!(e.to_string().contains("outside the bounds"), "{e}");
}

#[test]
fn impossible_fine_grids_are_errors_not_aborts() {
    // Issue 9: a 300000 × 300000 plane needs a 600000² fine grid (5.2 TiB); its allocation
    // must fail as an error naming the grid, not abort the process.
    let mut plan = RegularPlan::new(
        [0.0; 3],
        &[[1e-6, 0.0, 0.0], [0.0, 1e-6, 0.0]],
        &[300_000, 300_000],
        1e-6,
        2.0,
    )
    .unwrap();
    let e = plan
        .add(&[[1.0, 2.0, 3.0]], &[1.0], &[0], None)
        .unwrap_err();
    assert!(matches!(e, kinemap_core::Error::Memory(_)), "{e}");
    assert!(e.to_string().contains("fine grid"), "{e}");
    // Axes beyond the per-axis limit are refused when planning.
    let e = RegularPlan::new([0.0; 3], &[[1e-9, 0.0, 0.0]], &[1 << 62], 1e-6, 2.0).unwrap_err();
    assert!(e.to_string().contains("points per axis"), "{e}");
}

#[test]
fn phases_beyond_the_sincos_range_are_refused() {
    let mut plan =
        RegularPlan::new([1.0, 0.0, 0.0], &[[0.01, 0.0, 0.0]], &[64], 1e-6, 2.0).unwrap();
    let e = plan
        .add(&[[1e18, 0.0, 0.0]], &[1.0], &[0], None)
        .unwrap_err();
    assert!(e.to_string().contains("1e11 rad"), "{e}");
    let e = PointPlan::new(
        &[[1.0, 0.0, 0.0], [2.0, 0.0, 0.0]],
        [0.0; 3],
        [1e18, 0.0, 0.0],
        1e-6,
        2.0,
    )
    .unwrap_err();
    assert!(e.to_string().contains("1e11 rad"), "{e}");
}

/// `finish_into` adds `F(q)·S(q)` with `F` read from a table in `s = |q|/4π` (and
/// `exp(−½ qᵀUq)`): checked against the defining sum times `F` evaluated directly, with a
/// Gaussian `f(s) = 3 exp(−2 s²)` whose table is fine enough to be exact to rounding.
#[test]
fn finish_into_applies_the_group_factor_at_every_point() {
    use kinemap_core::gridded::{FactorTable, GroupFactor};
    use std::f64::consts::PI;
    let (pos, w) = model(300, 20.0, 4);
    let f = |s: f64| 3.0 * (-2.0 * s * s).exp();
    let u = [[0.02, 0.004, 0.0], [0.004, 0.01, 0.0], [0.0, 0.0, 0.03]];
    let factor_at = |q: [f64; 3], aniso: bool| {
        let s = (q[0] * q[0] + q[1] * q[1] + q[2] * q[2]).sqrt() / (4.0 * PI);
        let mut quq = 0.0;
        for i in 0..3 {
            for j in 0..3 {
                quq += q[i] * u[i][j] * q[j];
            }
        }
        f(s) * if aniso { (-0.5 * quq).exp() } else { 1.0 }
    };
    let (origin, steps, shape) = (
        [-1.3, 0.4, 0.9],
        vec![[0.21, 0.02, 0.0], [0.01, 0.19, -0.03]],
        vec![15usize, 12],
    );
    let q = grid_points(origin, &steps, &shape);
    let sums = direct(&pos, &w, &q);
    let n = 4001;
    for aniso in [false, true] {
        let mut plan = RegularPlan::new(origin, &steps, &shape, 1e-10, 2.0).unwrap();
        plan.add(&pos, &w, &vec![0; pos.len()], None).unwrap();
        let (lo, hi) = plan.s_range(None).unwrap();
        let s_all: Vec<f64> = q
            .iter()
            .map(|v| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt() / (4.0 * PI))
            .collect();
        let want_lo = s_all.iter().cloned().fold(f64::INFINITY, f64::min);
        let want_hi = s_all.iter().cloned().fold(0.0, f64::max);
        assert!((lo - want_lo).abs() < 1e-14 && (hi - want_hi).abs() < 1e-14);
        let h = (hi - lo) / (n - 1) as f64;
        let table = (0..n)
            .map(|k| Complex64::new(f(lo + k as f64 * h), 0.0))
            .collect();
        let gf =
            GroupFactor::new(FactorTable::new(lo, h, table).unwrap(), aniso.then_some(u)).unwrap();
        // Start from ones: finish_into adds.
        let mut out = vec![Complex64::new(1.0, 0.0); q.len()];
        plan.finish_into(0, &gf, &mut out, None).unwrap();
        let want: Vec<Complex64> = sums
            .iter()
            .zip(&q)
            .map(|(s, v)| s * factor_at(*v, aniso) + 1.0)
            .collect();
        let e = rel_l2(&out, &want);
        assert!(e <= 1e-10, "aniso {aniso}: error {e:e}");
        // The slot is gone: a second read-out adds nothing, and a wrong length is an error.
        let before = out.clone();
        plan.finish_into(0, &gf, &mut out, None).unwrap();
        assert_eq!(out, before);
        assert!(plan.finish_into(0, &gf, &mut out[1..], None).is_err());
    }
    // The same for arbitrary points.
    let (lo_r, hi_r) = bounds(&pos);
    let mut plan = PointPlan::new(&q, lo_r, hi_r, 1e-10, 2.0).unwrap();
    plan.add(&pos, &w, &vec![0; pos.len()], None).unwrap();
    let (lo, hi) = plan.s_range(Some(1)).unwrap();
    let h = (hi - lo) / (n - 1) as f64;
    let table = (0..n)
        .map(|k| Complex64::new(f(lo + k as f64 * h), 0.0))
        .collect();
    let gf = GroupFactor::new(FactorTable::new(lo, h, table).unwrap(), Some(u)).unwrap();
    let mut out = vec![Complex64::new(0.0, 0.0); q.len()];
    plan.finish_into(0, &gf, &mut out, None).unwrap();
    let want: Vec<Complex64> = sums
        .iter()
        .zip(&q)
        .map(|(s, v)| s * factor_at(*v, true))
        .collect();
    assert!(rel_l2(&out, &want) <= 1e-10);
}
