//! Quick throughput probe of the exact kernels (atom–q pairs per second).
//! `cargo run --release -p kinemap-core --example rate -- [threads]`
use kinemap_core::{grid_amplitudes, point_amplitudes, AtomSet, Complex64};
use std::time::Instant;

fn main() {
    let threads: Option<usize> = std::env::args().nth(1).and_then(|s| s.parse().ok());
    let n = 100_000usize;
    let mut seed = 12345u64;
    let mut rnd = || {
        seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (seed >> 11) as f64 / (1u64 << 53) as f64
    };
    let pos: Vec<[f64; 3]> = (0..n)
        .map(|_| [60.0 * rnd(), 60.0 * rnd(), 60.0 * rnd()])
        .collect();
    let atoms = AtomSet::new(&pos, &vec![1.0; n], &vec![0; n], 1).unwrap();
    let (rows, len) = (64usize, 256usize);
    let origins: Vec<[f64; 3]> = (0..rows)
        .map(|r| [-3.0, -3.0 + 0.05 * r as f64, 0.37])
        .collect();
    let f = vec![Complex64::new(1.0, 0.0); rows * len];
    let t = Instant::now();
    let a = grid_amplitudes(&atoms, &origins, [0.02, 0.001, 0.0], len, &f, threads).unwrap();
    let dt = t.elapsed().as_secs_f64();
    println!(
        "grid : {:.3e} pairs/s ({:.3} s) {}",
        (n * rows * len) as f64 / dt,
        dt,
        a[7]
    );
    let q: Vec<[f64; 3]> = (0..rows * len)
        .map(|i| {
            [
                -3.0 + 0.02 * (i % len) as f64,
                -3.0 + 0.05 * (i / len) as f64,
                0.37,
            ]
        })
        .collect();
    let t = Instant::now();
    let b = point_amplitudes(&atoms, &q, &f, threads).unwrap();
    let dt = t.elapsed().as_secs_f64();
    println!(
        "point: {:.3e} pairs/s ({:.3} s) {}",
        (n * rows * len) as f64 / dt,
        dt,
        b[7]
    );
}
