"""Exact kernels against the hand-written C loops, side by side in one run.

Measures atom–q pairs per second of

* the C reference loops (``poly``: a vectorised polynomial sincos per pair; ``recur``: phase
  stepping along the line, re-anchored every 64 steps), compiled once with the flags of the
  anchors' ``run.sh`` (directory from ``--anchors DIR`` or the environment variable
  ``KINEMAP_ANCHORS_DIR``);
* kinemap through the public API: ``km.scatter(model, QGrid.line(...), method="exact",
  probe="unit")`` (grid path, phase stepping) and the same q-points as ``QGrid.points``
  (point path, one sincos per pair);
* the raw ``kinemap._core`` kernels on the same atoms and q-points (no Python around them);

on the anchors' geometry: N random atoms (weight 1) in a 100 Å box and a line of M q-points
from the origin along (1, 0.7, 0.4) up to |q| = 8 Å⁻¹ (default N = 2·10⁵, M = 8192), with 1
and 2 threads. Each kinemap figure is the median of ``--repeats`` runs; each C figure the
median of the C program's 3 runs. C and kinemap run back to back in each of ``--rounds``
rounds, so both see the same machine load; the ratio printed is the median of the per-round
ratios (with their range), the rates the medians over rounds; then the best run of each
(kinemap's fastest repeat against the C program's fastest), the least disturbed figure on a
busy machine.

``--native`` also builds a second copy of the extension with ``RUSTFLAGS=-Ctarget-cpu=native``
into a temporary directory (a few minutes) and times the raw kernels of both builds in
alternating subprocesses: the portable build (the one installed) against the native one.

Run:  python benchmarks/bench_kernels.py --anchors PATH/TO/anchors [--native] [--repeats 5]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent

# The raw-kernel timing, run in this process or in a subprocess against another build.
KERNEL_TIMER = r"""
import json, statistics, sys, time
import numpy as np
from kinemap import _core
n, m, repeats, threads = (int(a) for a in sys.argv[1:5])
rng = np.random.default_rng(12345)
pos = rng.uniform(0.0, 100.0, (n, 3))
atoms = _core.AtomSet(pos, np.ones(n), np.zeros(n, np.uint32), 1)
u = np.array([1.0, 0.7, 0.4]) / np.sqrt(1.65)
step = 8.0 / m * u
q = np.arange(m)[:, None] * step
f = np.ones((1, m), np.complex128)
mp = m // 4  # the point path is ~8x slower: a quarter of the points
def times(fn, r):
    ts = []
    for _ in range(r):
        t0 = time.perf_counter(); fn(); ts.append(time.perf_counter() - t0)
    return ts
tg = times(lambda: _core.grid_amplitudes(atoms, np.zeros((1, 3)), step, m, f, threads=threads), repeats)
tp = times(lambda: _core.point_amplitudes(atoms, q[:mp], f[:, :mp], threads=threads), repeats)
print(json.dumps({"level": _core.kernel_level(),
                  "grid": n * m / statistics.median(tg), "point": n * mp / statistics.median(tp),
                  "grid best": n * m / min(tg), "point best": n * mp / min(tp)}))
"""


def cpu_model() -> str:
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True, check=True).stdout
        for line in out.splitlines():
            if line.startswith("Model name:"):
                return line.split(":", 1)[1].strip()
    except (OSError, subprocess.CalledProcessError):
        pass
    return "unknown"


def build_anchors(anchors: Path, tmp: Path) -> Path:
    """Compile the C loops once, with the compiler flags of the anchors' run.sh."""
    f = ["-O3", "-march=native", "-mprefer-vector-width=512"]
    src = anchors / "pair_kernel.c"
    subprocess.run(["gcc", *f, "-DKNAME=pairs_libm", "-c", str(src), "-o", str(tmp / "l.o")], check=True)
    subprocess.run(["gcc", *f, "-ffast-math", "-fopenmp-simd", "-fno-builtin-sin", "-fno-builtin-cos",
                    "-DKNAME=pairs_libmvec", "-c", str(src), "-o", str(tmp / "v.o")], check=True)
    exe = tmp / "direct_sum"
    subprocess.run(["gcc", *f, "-fopenmp", "-DU=8", str(anchors / "direct_sum.c"), str(tmp / "l.o"),
                    str(tmp / "v.o"), "-o", str(exe), "-lmvec", "-lm"], check=True)
    return exe


def run_anchors(exe: Path, n: int, m: int) -> dict:
    """One run of the C loops on the line (the 3-D grid geometry is cut to one 64-point
    line); returns {(variant, threads): pairs/s}, each the median of the program's 3 runs."""
    env = dict(os.environ, OMP_PROC_BIND="spread", OMP_PLACES="cores", OMP_NUM_THREADS="2")
    out = subprocess.run([str(exe), str(n), "1", "1", "64", str(m), "4.0", "2", "0.5", "poly,recur"],
                         env=env, capture_output=True, text=True, check=True).stdout
    rates = {}
    for line in out.splitlines():
        f = line.split()
        if len(f) >= 9 and f[1] == "line1d" and f[0] in ("poly", "recur"):
            rates[(f[0], int(f[2]))] = float(f[8]) * 1e9
            rates[(f[0] + " best", int(f[2]))] = float(f[3]) / float(f[6])
    if not rates:
        raise RuntimeError(f"no line1d rows in the C program's output:\n{out}")
    return rates


def run_times(fn, repeats: int) -> list[float]:
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return ts


def kinemap_rates(n: int, m: int, threads: int, repeats: int) -> dict:
    """Pairs/s of the public API (grid and point paths) and of the raw kernels."""
    import kinemap as km

    rng = np.random.default_rng(12345)
    model = km.Model(rng.uniform(0.0, 100.0, (n, 3)), "C")
    u = np.array([1.0, 0.7, 0.4]) / np.sqrt(1.65)
    line = km.QGrid.line([0.0, 0.0, 0.0], (m - 1) * 8.0 / m * u, m)
    points = km.QGrid.points(line.q_vectors(0, m))
    run = dict(probe="unit", method="exact", threads=threads)
    tg = run_times(lambda: km.scatter(model, line, **run), repeats)
    tp = run_times(lambda: km.scatter(model, points, **run), max(2, repeats // 2))
    raw = subprocess.run([sys.executable, "-c", KERNEL_TIMER, str(n), str(m), str(repeats),
                          str(threads)], capture_output=True, text=True, check=True)
    r = json.loads(raw.stdout)
    return {"api grid": n * m / statistics.median(tg), "api point": n * m / statistics.median(tp),
            "api grid best": n * m / min(tg), "api point best": n * m / min(tp),
            "raw grid": r["grid"], "raw point": r["point"], "raw grid best": r["grid best"],
            "raw point best": r["point best"], "level": r["level"]}


def build_native(tmp: Path) -> Path:
    """Build the extension with -Ctarget-cpu=native and lay out a package copy that uses it."""
    env = dict(os.environ, RUSTFLAGS="-Ctarget-cpu=native", PYO3_BUILD_EXTENSION_MODULE="1",
               CARGO_TARGET_DIR=str(tmp / "target"))
    subprocess.run(["cargo", "build", "--release", "-p", "kinemap-py"], cwd=ROOT, env=env,
                   check=True, capture_output=True)
    pkg = tmp / "native" / "kinemap"
    shutil.copytree(ROOT / "python" / "kinemap", pkg,
                    ignore=shutil.ignore_patterns("*.so", "__pycache__"))
    shutil.copy(tmp / "target" / "release" / "libkinemap_py.so", pkg / "_core.abi3.so")
    return pkg.parent


def raw_in(path: Path | None, n: int, m: int, repeats: int, threads: int) -> dict:
    env = dict(os.environ)
    if path is not None:
        env["PYTHONPATH"] = str(path)
    out = subprocess.run([sys.executable, "-c", KERNEL_TIMER, str(n), str(m), str(repeats),
                          str(threads)], env=env, capture_output=True, text=True, check=True)
    return json.loads(out.stdout)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--anchors", default=os.environ.get("KINEMAP_ANCHORS_DIR"),
                    help="directory of the C reference loops (run.sh); default $KINEMAP_ANCHORS_DIR")
    ap.add_argument("--atoms", type=int, default=200_000)
    ap.add_argument("--points", type=int, default=8192)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--rounds", type=int, default=5, help="interleaved rounds of C and kinemap runs")
    ap.add_argument("--native", action="store_true", help="also compare with a native build")
    args = ap.parse_args()
    n, m = args.atoms, args.points
    from kinemap import _core

    print(f"# CPU: {cpu_model()}; kernel level {_core.kernel_level()} (available: "
          f"{', '.join(_core.kernel_levels())}); N = {n} atoms, M = {m} q-points on a line")
    c_runs: list[dict] = []
    k_runs: dict[int, list[dict]] = {1: [], 2: []}
    with tempfile.TemporaryDirectory(prefix="km-anchors-") as tmp:
        exe = build_anchors(Path(args.anchors), Path(tmp)) if args.anchors else None
        for r in range(args.rounds):
            if exe is not None:
                c_runs.append(run_anchors(exe, n, m))
            for t in (1, 2):
                k_runs[t].append(kinemap_rates(n, m, t, args.repeats))
            print(f"# round {r + 1}/{args.rounds} done", flush=True)

    def med(rows, key):
        return statistics.median(row[key] for row in rows)

    print(f"\n{'kernel':<32}{'thr':>4}{'pairs/s':>11}{'C pairs/s':>11}{'ratio':>7}{'range':>12}")
    pairs = [("api grid", "recur", "km.scatter line (grid path)"),
             ("raw grid", "recur", "_core.grid_amplitudes"),
             ("api point", "poly", "km.scatter points (point path)"),
             ("raw point", "poly", "_core.point_amplitudes")]
    for key, cvar, label in pairs:
        for t in (1, 2):
            k = med(k_runs[t], key)
            if c_runs:
                # Ratios per round (C and kinemap measured back to back), then their median.
                ratios = sorted(kr[key] / cr[(cvar, t)] for kr, cr in zip(k_runs[t], c_runs))
                c = statistics.median(run[(cvar, t)] for run in c_runs)
                print(f"{label:<32}{t:>4}{k:>11.3e}{c:>11.3e}{statistics.median(ratios):>7.2f}"
                      f"{ratios[0]:>6.2f}-{ratios[-1]:<5.2f}")
            else:
                print(f"{label:<32}{t:>4}{k:>11.3e}{'-':>11}{'-':>7}")
    if c_runs:
        # On a busy machine the fastest run of each is the least disturbed one: best of all
        # rounds, kinemap against C.
        print(f"\n{'best of all runs':<32}{'thr':>4}{'pairs/s':>11}{'C pairs/s':>11}{'ratio':>7}")
        for key, cvar, label in pairs:
            for t in (1, 2):
                k = max(kr[key + " best"] for kr in k_runs[t])
                c = max(cr[(cvar + " best", t)] for cr in c_runs)
                print(f"{label:<32}{t:>4}{k:>11.3e}{c:>11.3e}{k / c:>7.2f}")
    if not c_runs:
        print("(no --anchors / KINEMAP_ANCHORS_DIR: C loops not run)")

    if args.native:
        with tempfile.TemporaryDirectory(prefix="km-native-") as tmp:
            print("\n# building the native extension (RUSTFLAGS=-Ctarget-cpu=native) ...", flush=True)
            native = build_native(Path(tmp))
            print(f"\n{'build (best)':<12}{'thr':>4}{'level':>10}{'grid pairs/s':>15}{'point pairs/s':>15}")
            for t in (1, 2):
                port, nat = [], []
                for _ in range(args.rounds):
                    port.append(raw_in(None, n, m, args.repeats, t))
                    nat.append(raw_in(native, n, m, args.repeats, t))
                best = {name: {k: max(r[k + " best"] for r in rows) for k in ("grid", "point")}
                        for name, rows in (("portable", port), ("native", nat))}
                for name, rows in (("portable", port), ("native", nat)):
                    print(f"{name:<12}{t:>4}{rows[0]['level']:>10}{best[name]['grid']:>15.3e}"
                          f"{best[name]['point']:>15.3e}")
                print(f"{'ratio':<12}{t:>4}{'':>10}"
                      f"{best['portable']['grid'] / best['native']['grid']:>15.2f}"
                      f"{best['portable']['point'] / best['native']['point']:>15.2f}")


if __name__ == "__main__":
    main()
