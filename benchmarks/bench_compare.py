"""A measured volume beside a million-atom model, end to end: time and peak memory.

Setup (not timed): an fcc Fe–Ni alloy of 64×64×64 cells (1 048 576 atoms, a = 3.6 Å,
B = 0.4 Å²) is written as H5MD; its X-ray map on a 256³ hkl volume (h, k, l from −2 in steps
of 1/64 r.l.u., the box's reciprocal lattice) is computed once and turned into a synthetic
measurement, 0.02·I + 3 + Gaussian noise (σ = 1 % + 0.5), with a beamstop (|q| < 0.3 Å⁻¹) and
two detector gaps as NaN, written as NeXus NXdata with h5py (h, k, l axes, errors, NXsample
cell). The model's own map is saved too.

Each case then runs in a fresh child process (its peak resident memory is VmHWM from
/proc/self/status; ru_maxrss would keep the parent's peak across exec):

* model: ``km.compare(open_model(model.h5md), "measured.h5", exclude_bragg=F centring)`` and
  ``cmp.save(...)`` — reading the measurement, computing the model on the measured grid
  (the gridded path, tolerance 1e-6), the fit, the figures and the NeXus output;
* maps in memory: ``km.compare("model_map.h5", "measured.h5", stream=False)`` and save;
* maps streamed: the same with ``stream=True`` (slabs from both files).

Run:  python benchmarks/bench_compare.py                  (about 5 minutes on 2 cores, 1.4 GB of files)
      python benchmarks/bench_compare.py --cells 16 --points 64   (a smoke run)
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

A = 3.6


def setup(folder: Path, cells: int, points: int, seed: int = 0) -> dict:
    import h5py

    import kinemap as km
    from kinemap.compare import model_on_grid

    rng = np.random.default_rng(seed)
    n_atoms = 4 * cells**3
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    grid_cells = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 3)
    pos = ((grid_cells[:, None, :] + fcc[None]).reshape(-1, 3) * A).astype(np.float64)
    species = np.where(rng.random(n_atoms) < 0.4, "Ni", "Fe")
    # H5MD keeps one box per frame (read back as box and cell): the hkl grid uses the parent
    # cell, given to the measured file's NXsample
    model = km.Model(pos, species, b_iso=0.4, box=np.eye(3) * A * cells)
    km.write_h5md(folder / "model.h5md", model)
    cell = np.eye(3) * A
    step = 1.0 / cells  # the box's reciprocal lattice
    lo = -step * (points // 2)
    rng_hkl = (lo, lo + step * (points - 1), points)
    grid = km.QGrid.hkl(cell, h=rng_hkl, k=rng_hkl, l=rng_hkl)
    t0 = time.perf_counter()
    calc = model_on_grid(model, grid, method="gridded", tol=1e-6)
    t_model = time.perf_counter() - t0
    calc.save(folder / "model_map.h5", keep_amplitude=False)
    truth = calc.intensity
    sig = 0.01 * 0.02 * truth + 0.5
    meas = 0.02 * truth + 3.0 + rng.normal(size=truth.shape) * sig
    q = np.linalg.norm(grid.q_vectors(), axis=1).reshape(grid.shape)
    meas[q < 0.3] = np.nan
    meas[:, points // 3, :] = np.nan
    meas[2 * points // 3, :, :] = np.nan
    with h5py.File(folder / "measured.h5", "w") as f:
        f.attrs["default"] = "entry"
        e = f.create_group("entry")
        e.attrs["NX_class"] = "NXentry"
        e.attrs["default"] = "data"
        g = e.create_group("data")
        g.attrs["NX_class"] = "NXdata"
        g.attrs["signal"] = "intensity"
        g.attrs["axes"] = np.array(["h", "k", "l"], dtype=h5py.string_dtype())
        g.create_dataset("intensity", data=meas, chunks=(8, points, points))
        g.create_dataset("intensity_errors", data=sig, chunks=(8, points, points))
        for i, name in enumerate("hkl"):
            g[name] = grid.axis_values[i]
            g[name].attrs["units"] = "r.l.u."
            g.attrs[f"{name}_indices"] = i
        s = e.create_group("sample")
        s.attrs["NX_class"] = "NXsample"
        s["unit_cell_abc"] = [A, A, A]
        s["unit_cell_alphabetagamma"] = [90.0, 90.0, 90.0]
    return {"n_atoms": n_atoms, "grid": list(grid.shape), "setup_model_s": t_model}


CHILD = r"""
import json, sys, time
import kinemap as km


def peak_mb():
    # VmHWM: this process's own high-water mark (ru_maxrss keeps the parent's across exec)
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    return float("nan")



folder, case = sys.argv[1], sys.argv[2]
ex = {"radius": 0.05, "units": "r.l.u.", "centring": "F"}
t0 = time.perf_counter()
if case == "model":
    cmp = km.compare(km.open_model(folder + "/model.h5md"), folder + "/measured.h5", exclude_bragg=ex,
                     method="gridded", tol=1e-6)
else:
    cmp = km.compare(folder + "/model_map.h5", folder + "/measured.h5", exclude_bragg=ex,
                     stream=(case == "streamed"))
t1 = time.perf_counter()
cmp.save(folder + f"/cmp_{case}.h5", overwrite=True)
t2 = time.perf_counter()
print(json.dumps({"case": case, "compare_s": t1 - t0, "save_s": t2 - t1, "wall_s": t2 - t0,
                  "timings": cmp.metadata.get("timings", {}), "chi2": cmp.chi2, "scale": cmp.scale,
                  "background": cmp.background, "n_points": cmp.n_points,
                  "sampling": cmp.metadata.get("model_sampling", {}).get("mode", ""),
                  "peak_rss_mb": peak_mb()}))
"""


def run_case(folder: Path, case: str) -> dict:
    env = dict(os.environ)
    out = subprocess.run([sys.executable, "-c", CHILD, str(folder), case], capture_output=True, text=True, env=env)
    if out.returncode != 0:
        raise RuntimeError(f"case {case} failed:\n{out.stderr}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cells", type=int, default=64, help="fcc cells per edge (atoms = 4 cells³; default 64)")
    ap.add_argument("--points", type=int, default=256, help="points per edge of the measured volume (default 256)")
    ap.add_argument("--keep", metavar="DIR", help="work in DIR and keep the files")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(args.keep or tmp)
        folder.mkdir(parents=True, exist_ok=True)
        t0 = time.perf_counter()
        info = setup(folder, args.cells, args.points)
        print(f"setup: {info['n_atoms']:,} atoms, grid {info['grid']}, model map {info['setup_model_s']:.1f} s, "
              f"total setup {time.perf_counter() - t0:.1f} s (parent peak RSS "
              f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB)")
        sizes = {p.name: p.stat().st_size / 2**20 for p in folder.iterdir()}
        print("files: " + ", ".join(f"{k} {v:.0f} MB" for k, v in sorted(sizes.items())))
        rows = [run_case(folder, c) for c in ("model", "maps", "streamed")]
        base = rows[0]["wall_s"]
        print(f"\n{'case':<10} {'wall s':>8} {'compare s':>10} {'model s':>8} {'fit s':>7} {'save s':>7} "
              f"{'peak MB':>8} {'x model':>8}  sampling   chi2_nu   scale")
        for r in rows:
            t = r["timings"]
            print(f"{r['case']:<10} {r['wall_s']:8.1f} {r['compare_s']:10.1f} {t.get('model_s', 0):8.1f} "
                  f"{t.get('fit_s', 0):7.1f} {r['save_s']:7.1f} {r['peak_rss_mb']:8.0f} {r['wall_s'] / base:8.2f}  "
                  f"{r['sampling']:<9} {r['chi2']:8.4f} {r['scale']:.6f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
