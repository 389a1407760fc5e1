"""Exact engine throughput: atom–q pairs per second, side by side in one run.

Prints, for the point path (one sincos per pair) and the grid path (phase stepping), the rate
with 1 and 2 threads next to a straightforward chunked NumPy direct sum, and the ratios. Then
computes a one-million-atom model's exact 256×256 plane through the public API and reports
its wall time and peak memory (resident set size).

Run:  python benchmarks/bench_exact.py            (about two minutes on 2 cores)
      python benchmarks/bench_exact.py --quick    (smaller sizes, a smoke run)
"""

from __future__ import annotations

import argparse
import resource
import statistics
import time

import numpy as np

import kinemap as km


def numpy_direct(pos: np.ndarray, q: np.ndarray, chunk: int = 256) -> np.ndarray:
    """The reference a user would write: chunks of q-points, full complex exponentials."""
    out = np.empty(len(q), dtype=np.complex128)
    for i in range(0, len(q), chunk):
        out[i:i + chunk] = np.exp(1j * (q[i:i + chunk] @ pos.T)).sum(axis=1)
    return out


def timed(fn, repeats: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), result


def peak_rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true", help="smaller problem sizes")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    n_atoms = 20_000 if args.quick else 200_000
    pos = rng.uniform(0.0, 60.0, size=(n_atoms, 3))
    model = km.Model(pos, "Fe")
    plane = km.QGrid.plane([-3.0, -3.0, 0.37], [6.0, 0.4, 0.0], [0.3, 6.0, 0.5],
                           (64, 256) if args.quick else (128, 256))
    q_pts = plane.q_vectors()
    points = km.QGrid.points(q_pts)
    m = len(q_pts)

    rows = []
    t_np, ref = timed(lambda: numpy_direct(pos[: n_atoms // 20], q_pts[:2048]), 1)
    np_rate = (n_atoms // 20) * 2048 / t_np
    rows.append(("numpy chunked direct sum", 1, np_rate))
    for path, grid in (("point path (sincos per pair)", points), ("grid path (phase stepping)", plane)):
        for threads in (1, 2):
            t, _ = timed(lambda: km.scatter(model, grid, probe="unit", method="exact", threads=threads), args.repeats)
            rows.append((path, threads, n_atoms * m / t))
    print(f"atoms {n_atoms}, q-points {m}; median of {args.repeats} runs; NumPy on a 1/20 × 2048 subset")
    print(f"{'engine':34s} {'threads':>7s} {'pairs/s':>12s} {'× numpy':>9s}")
    for name, threads, rate in rows:
        print(f"{name:34s} {threads:7d} {rate:12.3e} {rate / np_rate:9.1f}")

    # One million atoms, exact 256×256 plane, through the public API.
    n_big = 100_000 if args.quick else 1_000_000
    big = km.Model(rng.uniform(0.0, 150.0, size=(n_big, 3)), rng.choice(["Fe", "Ni", "Al"], n_big))
    grid = km.QGrid.plane([-4.0, -4.0, 0.25], [8.0, 0.0, 0.0], [0.0, 8.0, 0.0], (256, 256))
    t0 = time.perf_counter()
    pat = km.scatter(big, grid, probe="xray", method="exact")
    wall = time.perf_counter() - t0
    print(f"\n{n_big} atoms (Fe/Ni/Al, X-ray form factors) -> exact 256x256 plane: "
          f"{wall:.2f} s wall, {n_big * 65536 / wall:.3e} pairs/s, peak RSS {peak_rss_mib():.0f} MiB, "
          f"max I = {pat.intensity.max():.4g}")


if __name__ == "__main__":
    main()
