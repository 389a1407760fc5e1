"""Scaling and agreement with the analytic transform: a Fibonacci chain of N atoms.

The first N points of the Fibonacci chain (S = 1 Å, L = τ Å, cut-and-project with window
[−1, τ−1)) for N = 10³ … 10⁷ (10⁸ with ``--big``; above 10⁷ the chain is streamed in chunks,
never held whole), computed by the exact and the gridded path (tol 1e-12) at the three main
peaks (h, h′) = (1, 0), (0, 1), (1, 1), k = (h + h′τ)/√5, q = 2πk (Å⁻¹). Each peak is the
centre of a short line of q-points along the chain (``--line`` points, default 33), so both
paths work on a regular grid; M = 3 lines × points.

Printed per N: the error of |A|/N at each peak against the analytic window transform
|A(k)|/N → |sin(πτk*)/(πτk*)|, k* = (h′/τ − h)/√5 (docs/references.md; Baake & Grimm 2013),
which for a chain cut at an arbitrary length is bounded by about 1/N (it fluctuates below
that bound with N's place between Fibonacci numbers); the time of each path with 1
and 2 threads; pairs/s (N·M/t) of the exact path, atoms/s of the gridded one. A log-log PNG
of error and time against N is written (``--png``).

Run:  python benchmarks/bench_fibonacci.py [--big] [--png fibonacci_scaling.png]
      (default N ≤ 10⁷: a few minutes on 2 cores; --big adds N = 10⁸)
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

import kinemap as km
from kinemap import quasi
from kinemap.model import AtomSourceBase

TAU = (1.0 + math.sqrt(5.0)) / 2.0
PEAKS = [(1, 0), (0, 1), (1, 1)]
STREAM_ABOVE = 10_000_000
CHUNK = 1 << 22


class ChainSource(AtomSourceBase):
    """The first `n` points of a chain as an atom source (generated chunk by chunk)."""

    def __init__(self, chain, n: int):
        self.chain, self.n_atoms = chain, int(n)

    def iter_chunks(self, chunk_atoms: int):
        for ps in self.chain.iter_chain(self.n_atoms, chunk_points=min(int(chunk_atoms), CHUNK)):
            yield km.Model(ps.positions, "A")

    def species_labels(self) -> list[str]:
        return ["A"]

    def _extra_description(self) -> dict:
        return {"generator": "fibonacci chain"}


def analytic(h: int, hp: int) -> tuple[float, float]:
    """(k, |A|/N in the limit) of peak (h, h′): k = (h + h′τ)/√5, k* = (h′/τ − h)/√5."""
    k = (h + hp * TAU) / math.sqrt(5.0)
    ks = (hp / TAU - h) / math.sqrt(5.0)
    x = math.pi * TAU * ks
    return k, abs(math.sin(x) / x) if x else 1.0


def peak_lines(n_line: int, width: float) -> list[km.QGrid]:
    """One line of `n_line` q-points (odd) per peak, centred on it, along the chain (x)."""
    lines = []
    for h, hp in PEAKS:
        q = 2.0 * math.pi * analytic(h, hp)[0]
        lines.append(km.QGrid.line([q - width, 0.0, 0.0], [q + width, 0.0, 0.0], n_line))
    return lines


def run(source, lines, method: str, threads: int) -> tuple[float, list[float]]:
    """Seconds and |A| at the centre of each line."""
    t0 = time.perf_counter()
    centre = []
    for grid in lines:
        a = km.scatter(source, grid, probe="unit", method=method, tol=1e-12, threads=threads,
                       chunk_atoms=CHUNK)
        centre.append(abs(a.amplitude[len(a.amplitude) // 2]))
    return time.perf_counter() - t0, centre


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--big", action="store_true", help="add N = 10^8 (streamed)")
    ap.add_argument("--line", type=int, default=33, help="q-points per peak line (odd)")
    ap.add_argument("--png", default="fibonacci_scaling.png", help="where to draw the plot")
    ap.add_argument("--max-exp", type=int, default=None, help="largest N as a power of 10 (default 7, 8 with --big)")
    args = ap.parse_args()
    n_line = args.line | 1
    top = args.max_exp if args.max_exp is not None else (8 if args.big else 7)
    sizes = [10 ** e for e in range(3, top + 1)]
    chain = quasi.fibonacci()
    m = 3 * n_line
    # Lines span ±5·10⁻⁴ Å⁻¹ in k around each peak (the peaks are ~1/(1.38·N) wide).
    lines = peak_lines(n_line, 2 * math.pi * 0.5e-3)
    want = [analytic(h, hp)[1] for h, hp in PEAKS]
    rows = []
    print(f"# Fibonacci chain, S = 1 Å, L = τ Å; peaks (h,h') = {PEAKS}, analytic |A|/N = "
          + ", ".join(f"{w:.6f}" for w in want) + f"; M = {m} q-points")
    print(f"{'N':>10} {'path':>8} {'thr':>3} {'time_s':>9} {'t/(N·M) ns':>11} {'rate':>10} "
          + " ".join(f"{'err' + str(p):>13}" for p in PEAKS) + f" {'N·max err':>10}")
    for n in sizes:
        source = ChainSource(chain, n) if n > STREAM_ABOVE else km.Model(chain.chain_points(0, n).positions, "A")
        for method in ("exact", "gridded"):
            for threads in (1, 2):
                t, got = run(source, lines, method, threads)
                err = [abs(g / n - w) for g, w in zip(got, want)]
                rate = n * m / t if method == "exact" else n * len(lines) / t
                rows.append((n, method, threads, t, err))
                print(f"{n:>10} {method:>8} {threads:>3} {t:>9.3f} {1e9 * t / (n * m):>11.3f} "
                      f"{rate:>10.3e} " + " ".join(f"{e:>13.3e}" for e in err)
                      + f" {n * max(err):>10.3f}", flush=True)
    print("(rate: atom–q pairs/s for the exact path, atoms/s per line for the gridded path; "
          "N·max err stays of order 1 or below when the error is bounded by ~1/N)")
    for method in ("exact", "gridded"):
        e = [(n, max(r[4])) for r in rows for n in [r[0]] if r[1] == method and r[2] == 1]
        if len(e) >= 2:
            slope = np.polyfit(np.log10([x for x, _ in e]), np.log10([y for _, y in e]), 1)[0]
            print(f"# {method}: log-log slope of the largest peak error against N: {slope:.2f} "
                  "(1/N gives −1)")
    plot(rows, args.png)
    print(f"# plot written to {args.png}")


def plot(rows, path: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    for method, mk in (("exact", "o"), ("gridded", "s")):
        sel = [r for r in rows if r[1] == method and r[2] == 1]
        ns = np.array([r[0] for r in sel], dtype=float)
        for i, p in enumerate(PEAKS):
            ax1.loglog(ns, [r[4][i] for r in sel], mk + "-", ms=4, label=f"{method} {p}")
        for thr, ls in ((1, "-"), (2, "--")):
            s2 = [r for r in rows if r[1] == method and r[2] == thr]
            ax2.loglog([r[0] for r in s2], [r[3] for r in s2], mk + ls, ms=4,
                       label=f"{method}, {thr} thread{'s' * (thr > 1)}")
    ns = np.array(sorted({r[0] for r in rows}), dtype=float)
    ax1.loglog(ns, 1.0 / ns, "k:", label="1/N")
    t_last = min(r[3] for r in rows if r[0] == ns[-1])
    ax2.loglog(ns, t_last * ns / ns[-1], "k:", label="∝ N")
    ax1.set(xlabel="atoms N", ylabel="| |A|/N − analytic |", title="Agreement at the main peaks")
    ax2.set(xlabel="atoms N", ylabel="seconds (3 peak lines)", title="Time")
    ax1.legend(fontsize=7)
    ax2.legend(fontsize=7)
    fig.savefig(path, dpi=110)


if __name__ == "__main__":
    main()
