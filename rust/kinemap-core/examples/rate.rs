//! Quick throughput probe of the exact kernels (atom–q pairs per second), on the geometry of
//! benchmarks/bench_kernels.py: N random atoms in a 100 Å box (weight 1, one group) and a
//! line of M q-points from the origin along (1, 0.7, 0.4) up to |q| = 8 Å⁻¹.
//!
//! `cargo run --release -p kinemap-core --example rate -- [threads] [N] [M] [repeats]`
//! Prints the median pairs/s of the grid (phase stepping) and point (one sincos per pair)
//! kernels at every kernel level this CPU offers.
use kinemap_core::{dispatch, grid_amplitudes_at, point_amplitudes_at, AtomSet, Complex64};
use std::time::Instant;

fn main() {
    let arg = |i: usize, d: usize| -> usize {
        std::env::args()
            .nth(i)
            .and_then(|s| s.parse().ok())
            .unwrap_or(d)
    };
    let threads = Some(arg(1, 1));
    let (n, m, reps) = (arg(2, 200_000), arg(3, 8192), arg(4, 5));
    let mut seed = 12345u64;
    let mut rnd = || {
        seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (seed >> 11) as f64 / (1u64 << 53) as f64
    };
    let pos: Vec<[f64; 3]> = (0..n)
        .map(|_| [100.0 * rnd(), 100.0 * rnd(), 100.0 * rnd()])
        .collect();
    let atoms = AtomSet::new(&pos, &vec![1.0; n], &vec![0; n], 1).unwrap();
    let norm = (1.0f64 + 0.49 + 0.16).sqrt();
    let d = 8.0 / m as f64;
    let step = [d / norm, 0.7 * d / norm, 0.4 * d / norm];
    let f = vec![Complex64::new(1.0, 0.0); m];
    let q: Vec<[f64; 3]> = (0..m)
        .map(|k| [k as f64 * step[0], k as f64 * step[1], k as f64 * step[2]])
        .collect();
    let pairs = (n * m) as f64;
    let median = |mut t: Vec<f64>| {
        t.sort_by(f64::total_cmp);
        t[t.len() / 2]
    };
    for level in dispatch::available_levels() {
        let t: Vec<f64> = (0..reps)
            .map(|_| {
                let t0 = Instant::now();
                grid_amplitudes_at(level, &atoms, &[[0.0; 3]], step, m, &f, threads).unwrap();
                t0.elapsed().as_secs_f64()
            })
            .collect();
        println!(
            "{:<9} grid  {:.3e} pairs/s",
            level.name(),
            pairs / median(t)
        );
        // The point path is ~8x slower: time a quarter of the q-points.
        let mq = m / 4;
        let t: Vec<f64> = (0..reps.min(3))
            .map(|_| {
                let t0 = Instant::now();
                point_amplitudes_at(level, &atoms, &q[..mq], &f[..mq], threads).unwrap();
                t0.elapsed().as_secs_f64()
            })
            .collect();
        println!(
            "{:<9} point {:.3e} pairs/s",
            level.name(),
            (n * mq) as f64 / median(t)
        );
    }
}
