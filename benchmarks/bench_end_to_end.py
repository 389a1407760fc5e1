"""End to end through ``km.scatter``: the share of time spent outside the Rust core, and the
gridded path against finufft on the same problem.

    python benchmarks/bench_end_to_end.py            # 10⁶ atoms: 128³ gridded, 256² exact
    python benchmarks/bench_end_to_end.py --atoms 1e7

Cases (X-ray probe, three species with different B, so the grouping and the form-factor
tables are real work):
* gridded: 10⁶ atoms into a tilted 128³ volume at tol 1e-6 with ``km.scatter`` (model
  grouping, plans, spreading, FFTs, factor tables, combination), against finufft's
  ``nufft3d1`` on the same problem: one transform per scattering group (the atoms of that
  species), as kinemap needs, at the same tolerance. finufft is timed for its calls alone,
  with the projected coordinates and phased weights prepared beforehand and without the
  form factors and their combination, i.e. less work than kinemap's whole ``km.scatter``.
* exact: the same atoms into a 256 × 256 plane with ``km.scatter(method="exact")``.
The time inside the core is measured by wrapping the core's entry points; "outside" is the
rest of the ``km.scatter`` call (Python: validation, grouping, factor tables, reshaping).
kinemap and finufft run back to back in each of ``--repeats`` repeats (after one warm-up of
each); the ratios are taken per repeat and their median and range printed, so both see the
same machine load.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import time

import numpy as np

import kinemap as km
from kinemap import _core
from kinemap._engine import exact as exact_mod
from kinemap._engine import gridded as gridded_mod


def cpu_name() -> str:
    out = subprocess.run(["lscpu"], capture_output=True, text=True).stdout
    return next((ln.split(":", 1)[1].strip() for ln in out.splitlines() if ln.startswith("Model name")), "?")


class CoreClock:
    """Accumulates the wall time spent inside the core's entry points."""

    def __init__(self):
        self.seconds = 0.0

    def wrap(self, fn):
        def timed(*args, **kwargs):
            t0 = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                self.seconds += time.perf_counter() - t0

        return timed


class TimedPlan:
    """A RegularPlan whose calls into the core (add, finish, finish_into, s_range) are timed."""

    def __init__(self, clock, plan):
        self._plan, self._clock = plan, clock

    def add(self, *a, **k):
        return self._clock.wrap(self._plan.add)(*a, **k)

    def finish(self, *a, **k):
        return self._clock.wrap(self._plan.finish)(*a, **k)

    def finish_into(self, *a, **k):
        return self._clock.wrap(self._plan.finish_into)(*a, **k)

    def s_range(self, *a, **k):
        return self._clock.wrap(self._plan.s_range)(*a, **k)

    def __getattr__(self, name):
        return getattr(self._plan, name)


def measure(model, grid, method, repeats, tol=1e-6):
    """Per-repeat (total, core) seconds of ``km.scatter`` and the last pattern."""
    clock = CoreClock()
    real_plan = _core.RegularPlan
    real_grid = _core.grid_amplitudes
    gridded_mod._core.RegularPlan = lambda *a, **k: TimedPlan(clock, clock.wrap(real_plan)(*a, **k))
    exact_mod._core.grid_amplitudes = clock.wrap(real_grid)
    totals, cores = [], []
    try:
        for _ in range(repeats):
            clock.seconds = 0.0
            t0 = time.perf_counter()
            pat = km.scatter(model, grid, method=method, tol=tol)
            totals.append(time.perf_counter() - t0)
            cores.append(clock.seconds)
    finally:
        gridded_mod._core.RegularPlan = real_plan
        exact_mod._core.grid_amplitudes = real_grid
    return totals, cores, pat


class Finufft:
    """finufft on the same problem: one type-1 transform per group (the group's atoms only),
    and the whole pipeline a user would run around it: the transforms plus the same X-ray form
    factors and Debye–Waller factors (kinemap's probe tables) combined in NumPy. The inputs
    (projected coordinates, phased weights, |q|) are prepared once and not timed."""

    def __init__(self, pos, groups, grid, tol):
        centre = grid.origin + (np.array(grid.shape) // 2) @ grid.steps
        self.inputs = []
        for g in range(groups.n_groups):
            p = pos[groups.index == g]
            x = [np.ascontiguousarray(np.remainder(p @ s + np.pi, 2 * np.pi) - np.pi) for s in grid.steps]
            self.inputs.append((x, np.exp(1j * (p @ centre))))
        self.s = np.linalg.norm(grid.q_vectors(), axis=1).reshape(grid.shape) / (4 * np.pi)
        self.groups, self.shape, self.tol = groups, grid.shape, tol
        self.probe = km.get_probe("xray")

    def run(self) -> tuple[float, float]:
        """Seconds of (the transforms, the whole pipeline)."""
        import finufft

        t0 = time.perf_counter()
        sums = [finufft.nufft3d1(x[0], x[1], x[2], c, self.shape, eps=self.tol, isign=1) for x, c in self.inputs]
        t1 = time.perf_counter()
        out = np.zeros(self.shape, dtype=np.complex128)
        s = self.s
        for g, sg in enumerate(sums):
            f = self.probe.scattering_factors([self.groups.labels[g]], s)[0].reshape(self.shape)
            out += f * np.exp(-self.groups.b_iso[g] * s * s) * sg
        return t1 - t0, time.perf_counter() - t0


def med_range(values) -> str:
    return f"{statistics.median(values):.2f} ({min(values):.2f}–{max(values):.2f})"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--atoms", type=float, default=1e6)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    n = int(args.atoms)
    side = (n / 0.1) ** (1 / 3)
    pos = rng.uniform(0, side, (n, 3))
    species = rng.choice(["Fe", "Ni", "Al"], n)
    model = km.Model(pos, species, b_iso={"Fe": 0.4, "Ni": 0.5, "Al": 0.7})
    print(f"machine: {cpu_name()}; kernel level {_core.kernel_level()}; {n:,} atoms, X-ray, 3 species")

    vol = km.QGrid.volume([-4.1, -3.9, -4.05], [8.0, 0.3, 0.1], [-0.2, 7.9, 0.3], [0.1, -0.3, 8.1], (128, 128, 128))
    fi = Finufft(pos, model.groups(), vol, 1e-6)
    measure(model, vol, "gridded", 1)  # warm-up of both (first-touch, plans, imports)
    fi.run()
    # kinemap and finufft back to back in every repeat; ratios per repeat.
    rows = []
    for _ in range(args.repeats):
        (total,), (core,), _ = measure(model, vol, "gridded", 1)
        t_fi, t_pipe = fi.run()
        rows.append((total, core, t_fi, t_pipe))
    tot, cor, tfi, tpipe = (statistics.median(c) for c in zip(*rows))
    print(f"gridded 128³ tol 1e-6: km.scatter {tot:.3f} s (core {cor:.3f} s, outside {tot - cor:.3f} s = "
          f"{(tot - cor) / cor:.0%} of the core); medians of {args.repeats} interleaved repeats")
    print(f"  finufft nufft3d1 x {model.groups().n_groups} groups: transforms {tfi:.3f} s, with the factors "
          f"combined in NumPy {tpipe:.3f} s")
    print("  per-repeat ratios, median (range): km.scatter / transforms = "
          + med_range([r[0] / r[2] for r in rows]) + ", km.scatter / pipeline = "
          + med_range([r[0] / r[3] for r in rows]) + ", core / transforms = "
          + med_range([r[1] / r[2] for r in rows]) + ", outside / core = "
          + med_range([(r[0] - r[1]) / r[1] for r in rows]))

    plane = km.QGrid.plane([-3.0, -2.9, 0.4], [6.0, 0.2, 0.0], [-0.1, 5.8, 0.3], (256, 256))
    totals, cores, _ = measure(model, plane, "exact", max(1, args.repeats - 1))
    total, core = statistics.median(totals), statistics.median(cores)
    pairs = n * plane.size
    print(f"exact 256²: km.scatter {total:.3f} s ({pairs / total:.3g} pairs/s), core {core:.3f} s, outside "
          f"{total - core:.3f} s = {(total - core) / core:.1%} of the core")


if __name__ == "__main__":
    main()
