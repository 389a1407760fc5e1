//! Timing of the gridded path's stages, a probe for tuning (not a test); run with
//! `cargo run --release -p kinemap-core --example gridded_stages -- [volume|points]`.
//! Sizes come from the environment: KM_N (atoms), KM_M (grid edge), KM_TOL, KM_SIGMA, KM_THREADS.

use kinemap_core::{PointPlan, RegularPlan};
use std::time::Instant;

fn env<T: std::str::FromStr>(k: &str, d: T) -> T {
    std::env::var(k)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(d)
}

fn atoms(n: usize, size: f64) -> (Vec<[f64; 3]>, Vec<f64>) {
    let mut s = 12345u64;
    let mut r = || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64
    };
    (
        (0..n)
            .map(|_| [size * r(), size * r(), size * r()])
            .collect(),
        vec![1.0; n],
    )
}

fn time_regular_volume() {
    let n = env("KM_N", 1_000_000usize);
    let m = env("KM_M", 128usize);
    let tol = env("KM_TOL", 1e-6f64);
    let sigma = env("KM_SIGMA", 2.0f64);
    let threads = env("KM_THREADS", 2usize);
    let dims: usize = env("KM_DIMS", 3usize);
    let (pos, w) = atoms(n, 100.0);
    let dq = 0.05;
    let steps = [[dq, 0.0, 0.0], [0.0, dq, 0.0], [0.0, 0.0, dq]];
    let shape = [m, m, m];
    let t0 = Instant::now();
    let mut plan = RegularPlan::new(
        [-1.0, -1.0, -1.0],
        &steps[..dims],
        &shape[..dims],
        tol,
        sigma,
    )
    .unwrap();
    let t1 = Instant::now();
    plan.add(&pos, &w, &vec![0; n], Some(threads)).unwrap();
    let t2 = Instant::now();
    if let Ok(r) = std::fs::read_to_string("/proc/self/smaps_rollup") {
        for l in r.lines().filter(|l| l.starts_with("AnonHuge")) {
            eprintln!("{l}");
        }
    }
    let out = plan.finish(0, Some(threads)).unwrap();
    let t3 = Instant::now();
    eprintln!(
        "N {n} M {m}^{dims} tol {tol:e} σ {sigma} w {} fine {:?}: plan {:.3}s spread {:.3}s fft+read {:.3}s total {:.3}s ({})",
        plan.width(),
        plan.fine_dims(),
        (t1 - t0).as_secs_f64(),
        (t2 - t1).as_secs_f64(),
        (t3 - t2).as_secs_f64(),
        (t3 - t0).as_secs_f64(),
        out.len()
    );
}

fn time_points() {
    let n = env("KM_N", 1_000_000usize);
    let m = env("KM_M", 1_000_000usize);
    let tol = env("KM_TOL", 1e-6f64);
    let sigma = env("KM_SIGMA", 2.0f64);
    let threads = env("KM_THREADS", 2usize);
    let (pos, w) = atoms(n, 100.0);
    let mut s = 777u64;
    let mut r = || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 11) as f64 / (1u64 << 53) as f64
    };
    let q: Vec<[f64; 3]> = (0..m)
        .map(|_| [4.0 * r() - 2.0, 4.0 * r() - 2.0, 4.0 * r() - 2.0])
        .collect();
    let t0 = Instant::now();
    let mut plan = PointPlan::new(&q, [0.0; 3], [100.0; 3], tol, sigma).unwrap();
    let t1 = Instant::now();
    plan.add(&pos, &w, &vec![0; n], Some(threads)).unwrap();
    let t2 = Instant::now();
    let out = plan.finish(0, Some(threads)).unwrap();
    let t3 = Instant::now();
    eprintln!(
        "points N {n} M {m} tol {tol:e} σ {sigma} w {} grids {:?}: plan {:.3}s spread {:.3}s finish {:.3}s total {:.3}s ({})",
        plan.width(),
        plan.fine_dims(),
        (t1 - t0).as_secs_f64(),
        (t2 - t1).as_secs_f64(),
        (t3 - t2).as_secs_f64(),
        (t3 - t0).as_secs_f64(),
        out.len()
    );
}

fn main() {
    match std::env::args().nth(1).as_deref() {
        Some("points") => time_points(),
        Some("volume") | None => time_regular_volume(),
        Some(other) => eprintln!("unknown case {other:?}: use `volume` or `points`"),
    }
}
