"""Generating large icosahedral patches: time and peak memory, side by side.

Cases (each runs in a fresh subprocess so that its peak resident set size is its own):

* ``stream``   — kinemap.quasi strip search, points streamed in chunks and counted only:
                 memory stays at one chunk however large the patch.
* ``arrays``   — the same, positions gathered into one preallocated (N, 3) float64 array
                 (``scheme.positions``): 24 bytes per point plus a chunk.
* ``patch``    — the atom source ``scheme.patch(radius)`` that kinemap.scatter streams: the
                 same search, each chunk wrapped in a kinemap.Model (species, occupancy, B).
* ``box``      — the straightforward search a user would write: every Z⁶ point of the
                 bounding box of the strip, projected and tested (vectorised NumPy, in
                 slices of the first coordinate). Run at a smaller size for the ratio.

Wall times depend on what else runs on the machine; the CPU time of the case's own process
is printed too. The strip search is single-threaded NumPy.

Run:  python benchmarks/bench_quasi.py            (10⁷ points; under a minute on 2 cores)
      python benchmarks/bench_quasi.py --quick    (10⁶ points, a smoke run)
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

CASE_CODE = r"""
import json, math, resource, sys, time
import numpy as np
import kinemap.quasi as kq

case, n_target, chunk = sys.argv[1], float(sys.argv[2]), int(sys.argv[3])
sch = kq.icosahedral()
radius = (3 * n_target / (4 * math.pi * sch.density)) ** (1 / 3)
t0 = time.perf_counter()
c0 = time.process_time()
if case == "stream":
    n = 0
    for ps in sch.iter_points(radius, chunk_points=chunk):
        n += len(ps)
elif case == "arrays":
    pos = sch.positions(radius, chunk_points=chunk)
    n = len(pos)
elif case == "patch":
    n = 0
    for model in sch.patch(radius).iter_chunks(chunk):
        n += model.n_atoms
elif case == "box":
    m = np.vstack([sch.parallel, sch.internal])
    minv = np.linalg.inv(m)
    lo_w, hi_w = sch.window.bounds()
    reach = np.abs(minv[:, :3]).sum(axis=1) * radius + np.abs(minv[:, 3:]) @ np.maximum(abs(lo_w), abs(hi_w))
    b = np.ceil(reach).astype(int)
    n = 0
    rest = [np.arange(-bj, bj + 1) for bj in b[1:]]
    grid = np.array(np.meshgrid(*rest, indexing="ij")).reshape(5, -1).T.astype(np.float64)
    for n0 in range(-b[0], b[0] + 1):
        cand = np.column_stack([np.full(len(grid), float(n0)), grid])
        y = cand @ sch.internal.T
        ok = sch.window.contains(y)
        x = cand[ok] @ sch.parallel.T
        n += int((np.einsum("ij,ij->i", x, x) <= radius * radius).sum())
else:
    raise SystemExit(f"unknown case {case}")
dt = time.perf_counter() - t0
cpu = time.process_time() - c0
rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
print(json.dumps({"case": case, "n": int(n), "radius": radius, "seconds": dt, "cpu_seconds": cpu, "peak_rss_mb": rss}))
"""


def run_case(case: str, n_target: float, chunk: int) -> dict:
    out = subprocess.run([sys.executable, "-c", CASE_CODE, case, str(n_target), str(chunk)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10^6 points instead of 10^7")
    ap.add_argument("--chunk", type=int, default=1 << 18, help="points per streamed chunk")
    args = ap.parse_args(argv)
    n_big = 1e6 if args.quick else 1e7
    n_small = 1e4  # the box search grows like R⁶: keep it small
    t0 = time.perf_counter()
    rows = []
    base = run_case("stream", 1.0, args.chunk)  # interpreter + numpy baseline
    for case, n in (("stream", n_big), ("arrays", n_big), ("patch", n_big), ("stream", n_small), ("box", n_small)):
        r = run_case(case, n, args.chunk)
        rows.append(r)
        print(f"{r['case']:>7}  N = {r['n']:>11,d}  R = {r['radius']:7.2f} Å  {r['seconds']:8.2f} s "
              f"(CPU {r['cpu_seconds']:7.2f} s)  "
              f"{r['n'] / r['seconds'] / 1e6:6.2f} M points/s  peak RSS {r['peak_rss_mb']:8.1f} MB", flush=True)
    s_small = next(r for r in rows if r["case"] == "stream" and r["n"] < n_big / 2)
    box = next(r for r in rows if r["case"] == "box")
    print(f"baseline process (import + 1 point): peak RSS {base['peak_rss_mb']:.1f} MB")
    print(f"strip search vs box search at N = {s_small['n']:,}: {box['seconds'] / s_small['seconds']:.1f}x faster "
          f"(same count: {s_small['n'] == box['n']})")
    big = [r for r in rows if r["n"] >= n_big / 2]
    stream = next(r for r in big if r["case"] == "stream")
    patch = next(r for r in big if r["case"] == "patch")
    print(f"patch (Model chunks) vs plain stream at N = {patch['n']:,}: "
          f"{patch['cpu_seconds'] / stream['cpu_seconds']:.2f}x the CPU time, "
          f"peak RSS {patch['peak_rss_mb']:.0f} vs {stream['peak_rss_mb']:.0f} MB")
    for r in big:
        print(f"{r['case']}: {r['seconds'] / r['n'] * 1e9:.0f} ns per point, "
              f"{(r['peak_rss_mb'] - base['peak_rss_mb']) * 2**20 / r['n']:.1f} bytes per point above baseline")
    print(f"total {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
