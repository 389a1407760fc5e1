"""Pair histograms and Debye powder patterns of a million atoms, against a SciPy/NumPy baseline.

Model: N atoms (default 10⁶) uniformly random in a periodic cubic box at 0.085 atoms/Å³
(metal density; 227 Å for 10⁶), two species (Fe, Ni), pairs within r_max = 30 Å. Timed in one
run, in this order:

1. kinemap's core histogram (``_core.PairHistogram.add_within``, minimum image, cells, two-node
   binning, dr = 0.01 Å) on all threads and on one;
2. kinemap's Debye sums over those histograms for M = 2000 |Q| values (``_core.debye_sums``);
3. ``km.powder`` end to end (X-ray factors, ρ₀ subtraction, window, S(Q));
4. the baseline: ``scipy.spatial.cKDTree.count_neighbors`` with ``boxsize`` (periodic) and
   ``cumulative=False`` on the same bin edges, one call per species pair (nearest-bin counts,
   no weights: less work than two-node binning), on a subset of `--baseline-atoms` atoms at
   the same density (pairs per second do not depend on N at fixed density and r_max);
5. the baseline Debye step: NumPy ``np.sinc(np.outer(q, r)) @ H`` per species pair.

Prints a side-by-side table with pairs per second (wall clock) and ratios, and the CPU time of
the process during each step (all threads added up): on a machine shared with other work the
wall-clock rates drop while the rate per CPU second stays comparable. Memory: the peak
resident set of the process (``ru_maxrss``).

Run:  python benchmarks/bench_powder.py                 (about 2–4 minutes on 2 cores)
      python benchmarks/bench_powder.py --atoms 200000  (a smoke run)
"""

from __future__ import annotations

import argparse
import os
import resource
import time

import numpy as np


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--atoms", type=float, default=1e6)
    ap.add_argument("--r-max", type=float, default=30.0)
    ap.add_argument("--dr", type=float, default=0.01)
    ap.add_argument("--nq", type=int, default=2000)
    ap.add_argument("--q-max", type=float, default=20.0)
    ap.add_argument("--baseline-atoms", type=float, default=1e5)
    ap.add_argument("--skip-single-thread", action="store_true")
    args = ap.parse_args()

    from scipy.spatial import cKDTree

    import kinemap as km
    from kinemap import _core

    n = int(args.atoms)
    density = 0.085
    side = (n / density) ** (1 / 3)
    rng = np.random.default_rng(0)
    pos = rng.uniform(0, side, (n, 3))
    species = rng.integers(0, 2, n).astype(np.uint32)
    w = np.ones(n)
    box = np.eye(3) * side
    n_nodes = int(args.r_max / args.dr) + 2
    print(f"{n} atoms in a periodic {side:.1f} Å cube (0.085 /Å³), 2 species, r_max {args.r_max} Å, "
          f"dr {args.dr} Å ({n_nodes} nodes); threads available: {os.cpu_count()}")

    rows = []
    cpu = {}

    class timed:
        """Wall and process CPU time of a block."""

        def __init__(self, name):
            self.name = name

        def __enter__(self):
            self.t0, self.c0 = time.perf_counter(), time.process_time()
            return self

        def __exit__(self, *exc):
            self.wall = time.perf_counter() - self.t0
            cpu[self.name] = time.process_time() - self.c0

    def hist(threads, name):
        h = _core.PairHistogram(2, n_nodes, args.dr, args.r_max, box)
        with timed(name) as t:
            h.add_within(pos, species, w, threads=threads)
        return t.wall, h

    name = "kinemap histogram (all threads)"
    t_all, h = hist(None, name)
    pairs = int(h.pairs_counted)
    rows.append((name, t_all, pairs / t_all, pairs))
    if not args.skip_single_thread:
        name = "kinemap histogram (1 thread)"
        t_one, h1 = hist(1, name)
        assert np.array_equal(h1.values(), h.values()), "1 thread and all threads differ"
        rows.append((name, t_one, pairs / t_one, pairs))
    print(f"pairs within r_max: {pairs:.4e} ({pairs / n:.0f} per atom)")

    q = np.linspace(0.0, args.q_max, args.nq)
    values = h.values()
    name = "kinemap Debye sums (3 pairs × nodes × Q)"
    with timed(name) as t:
        sums = _core.debye_sums(values, args.dr, q)
    node_q = values.shape[0] * n_nodes * len(q)
    rows.append((name, t.wall, node_q / t.wall, node_q))

    model = km.Model(pos, np.where(species == 0, "Fe", "Ni"), box=box)
    name = "km.powder end to end (X-ray)"
    with timed(name) as t:
        pat = km.powder(model, np.linspace(2 * np.pi / args.r_max, args.q_max, args.nq), r_max=args.r_max,
                        dr=args.dr)
    rows.append((name, t.wall, pat.metadata["pairs_binned"] / t.wall, pat.metadata["pairs_binned"]))

    # Baseline on a subset at the same density.
    nb = int(min(args.baseline_atoms, n))
    side_b = (nb / density) ** (1 / 3)
    pb = rng.uniform(0, side_b, (nb, 3))
    sb = rng.integers(0, 2, nb)
    edges = np.arange(0, args.r_max + args.dr / 2, args.dr)
    name = f"SciPy cKDTree.count_neighbors ({nb} atoms)"
    with timed(name) as t:
        trees = [cKDTree(pb[sb == k], boxsize=side_b) for k in (0, 1)]
        counts = {}
        for a, b in ((0, 0), (0, 1), (1, 1)):
            counts[(a, b)] = trees[a].count_neighbors(trees[b], edges, cumulative=False)
    t_base = t.wall
    ordered = sum(c.sum() for (a, b), c in counts.items() if a == b) - nb + 2 * counts[(0, 1)].sum()
    base_pairs = ordered / 2  # unordered pairs, self pairs removed
    rows.append((name, t_base, base_pairs / t_base, base_pairs))

    centres = 0.5 * (edges[1:] + edges[:-1])
    hb = np.stack([counts[k][1:].astype(float) for k in counts])
    name = "NumPy Debye sums (np.sinc matrix)"
    with timed(name) as t:
        qq = q[:, None] * centres[None, :]
        base_sums = np.sinc(qq / np.pi) @ hb.T
    t_np = t.wall
    rows.append((name, t_np, hb.size * len(q) / t_np, hb.size * len(q)))
    del base_sums, sums

    print()
    print("| step | wall (s) | CPU (s) | rate (wall) | × baseline | rate per CPU s | × baseline |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    base = {"pairs": (base_pairs / t_base, base_pairs / cpu[rows[-2][0]]),
            "sums": (hb.size * len(q) / t_np, hb.size * len(q) / cpu[rows[-1][0]])}
    for name, t, rate, work in rows:
        kind = "sums" if "Debye sums" in name else "pairs"
        unit = "node·Q/s" if kind == "sums" else "pairs/s"
        per_cpu = work / cpu[name]
        print(f"| {name} | {t:.3f} | {cpu[name]:.3f} | {rate:.3e} {unit} | {rate / base[kind][0]:.1f} | "
              f"{per_cpu:.3e} | {per_cpu / base[kind][1]:.1f} |")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\npeak resident memory of the process: {peak:.0f} MiB")


if __name__ == "__main__":
    main()
