"""Point-group averaging of reciprocal-space volumes: time and peak memory of
``kinemap.symmetrize`` against a plain NumPy gather written here.

Cases: m-3m on hkl volumes of a cubic cell (signed permutations of the axes: slices), 6/mmm
on a hexagonal cell (integer index arithmetic in slabs) and m-3-5 on a Å⁻¹ volume
(multilinear interpolation). The reference builds the image index of every point for every
operation with NumPy (``np.indices``, one gather per operation): the straightforward
vectorised way.

Run: ``python benchmarks/bench_symmetry.py [--big 256]``. Times are the best of 3 calls
(the reference: 1 call). Peak memory is the largest
amount allocated through NumPy during a call (tracemalloc, in a second call), the input
map excluded.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

import kinemap as km
from kinemap.compare import point_group
from kinemap.model import cell_from_parameters


def hkl_volume(cell, n, step=0.05):
    lo, hi = -step * (n // 2), step * (n // 2 - 1)
    return km.QGrid.hkl(cell, h=(lo, hi, n), k=(lo, hi, n), l=(lo, hi, n))


def reference_average(inten: np.ndarray, grid, group: str) -> np.ndarray:
    """Mean over the images that land on the grid, one full index gather per operation."""
    ops = point_group(group).hkl_operations.astype(np.float64)
    o, s = grid.hkl_origin, grid.hkl_steps
    n = np.array(grid.shape)
    s_inv = np.linalg.inv(s)
    idx = np.indices(grid.shape).reshape(3, -1).T.astype(np.float64)
    hkl = o + sum(idx[:, [a]] * s[a] for a in range(3))
    total = np.zeros(inten.size)
    count = np.zeros(inten.size)
    flat = inten.reshape(-1)
    for t in ops:
        # column arithmetic instead of matmul: a (N, 3) @ (3, 3) product goes to
        # multithreaded BLAS, which crawls on a busy machine
        moved = [sum(hkl[:, e] * t[d, e] for e in range(3)) - o[d] for d in range(3)]
        img = np.stack([np.rint(sum(moved[d] * s_inv[d, f] for d in range(3))) for f in range(3)],
                       axis=1).astype(np.int64)
        ok = ((img >= 0) & (img < n)).all(axis=1)
        lin = np.ravel_multi_index(img[ok].T, grid.shape)
        total[ok] += flat[lin]
        count[ok] += 1
    return (total / count).reshape(grid.shape)


def measure(fn, repeat: int = 3):
    """Best wall time of `repeat` calls (the machine is shared: the minimum is the least
    disturbed run), and the peak NumPy allocation of one more call traced with tracemalloc
    (tracing slows the many small allocations of the slab loops, so the two are measured
    apart)."""
    dt = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        dt = min(dt, time.perf_counter() - t0)
        del out
    tracemalloc.start()
    out = fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return out, dt, peak


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--big", type=int, default=256, help="edge of the large hkl volume (default 256)")
    ap.add_argument("--small", type=int, default=128, help="edge of the volume compared with the reference")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(0)
    cubic = np.eye(3) * 4.0
    hexa = cell_from_parameters(3.0, 3.0, 5.0, 90, 90, 120)

    print(f"{'case':44s} {'kinemap s':>10s} {'peak MiB':>9s} {'NumPy ref s':>12s} {'peak MiB':>9s} {'ratio':>6s}")
    for group, cell, label in (("m-3m", cubic, "cubic"), ("6/mmm", hexa, "hexagonal")):
        grid = hkl_volume(cell, args.small)
        pat = km.Pattern.from_array(rng.random(grid.shape), grid)
        sym, t_k, m_k = measure(lambda p=pat, g=group: km.symmetrize(p, g))
        ref, t_r, m_r = measure(lambda p=pat, gr=grid, g=group: reference_average(p.intensity, gr, g), repeat=1)
        assert np.allclose(sym.intensity, ref, rtol=1e-12)
        print(f"{f'{group} on a {args.small}^3 hkl volume ({label})':44s} {t_k:10.2f} {m_k / 2**20:9.0f} "
              f"{t_r:12.2f} {m_r / 2**20:9.0f} {t_r / t_k:6.1f}")

    for group, cell, label in (("m-3m", cubic, "cubic"), ("6/mmm", hexa, "hexagonal")):
        grid = hkl_volume(cell, args.big)
        pat = km.Pattern.from_array(rng.random(grid.shape), grid)
        _, t_k, m_k = measure(lambda p=pat, g=group: km.symmetrize(p, g))
        print(f"{f'{group} on a {args.big}^3 hkl volume ({label})':44s} {t_k:10.2f} {m_k / 2**20:9.0f} "
              f"{'-':>12s} {'-':>9s} {'-':>6s}")
        del pat

    n = 64
    grid = km.QGrid.volume([-1.5] * 3, [3, 0, 0], [0, 3, 0], [0, 0, 3], (n, n, n))
    pat = km.Pattern.from_array(rng.random(grid.shape), grid)
    sym, t_k, m_k = measure(lambda: km.symmetrize(pat, "m-3-5"))
    print(f"{f'm-3-5 on a {n}^3 1/angstrom volume (interp.)':44s} {t_k:10.2f} {m_k / 2**20:9.0f} "
          f"{'-':>12s} {'-':>9s} {'-':>6s}")


if __name__ == "__main__":
    main()
