"""Streaming a large H5MD frame into a plane: peak memory and the share of time spent reading.

Writes one frame of N atoms (default 20 million, two species, float64 positions in a cubic
box at metal density) with kinemap's H5MD writer, then, in a fresh child process so that the
writer's memory is not counted, opens it with ``kinemap.open_model`` and computes the exact
X-ray map of a 128×128 plane. Reported:

* peak resident memory of the child (``ru_maxrss``),
* wall time of the map, and the part of it spent reading: HDF5 hyperslab reads plus turning
  them into Model chunks (validation, species labels), including the streamed species scan,
* a read-only pass over the same file for comparison.

The issue's targets: peak memory under 1.5 GB; reading under 10 % of the total time.

Run:  python benchmarks/bench_stream.py                  (about 2 minutes on 2 cores; 480 MB file)
      python benchmarks/bench_stream.py --atoms 2000000  (a smoke run)
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


def write_frame(path: Path, n_atoms: int, seed: int = 0) -> float:
    from kinemap.io import H5MDWriter

    rng = np.random.default_rng(seed)
    box = (n_atoms / 0.085) ** (1.0 / 3.0)  # about 0.085 atoms/Å³
    t0 = time.perf_counter()
    chunk = 1 << 20
    with H5MDWriter(path, n_atoms, ["Fe", "Ni"], position_dtype=np.float64) as w:
        w.add_frame(None, cell=np.eye(3) * box)
        for start in range(0, n_atoms, chunk):
            n = min(chunk, n_atoms - start)
            w.write_positions(rng.uniform(0.0, box, (n, 3)), start)
            w.write_species_codes(rng.integers(0, 2, n), start)
    return time.perf_counter() - t0


class TimedSource:
    """Wraps an atom source and adds up the time spent producing chunks (reading)."""

    def __init__(self, src):
        self.src = src
        self.read_s = 0.0
        self.n_atoms = src.n_atoms
        self.cell = src.cell
        self.box = src.box

    def species_labels(self):
        t0 = time.perf_counter()
        out = self.src.species_labels()
        self.read_s += time.perf_counter() - t0
        return out

    def describe(self):
        return self.src.describe()

    def iter_chunks(self, chunk_atoms):
        it = self.src.iter_chunks(chunk_atoms)
        while True:
            t0 = time.perf_counter()
            try:
                chunk = next(it)
            except StopIteration:
                self.read_s += time.perf_counter() - t0
                return
            self.read_s += time.perf_counter() - t0
            yield chunk


def child(path: str, size: int, mode: str, chunk_atoms: int) -> None:
    import kinemap as km

    t0 = time.perf_counter()
    src = TimedSource(km.open_model(path))
    out = {"n_atoms": src.n_atoms}
    if mode == "read":
        src.species_labels()
        n = 0
        for c in src.iter_chunks(chunk_atoms):
            n += c.n_atoms
        out["atoms_read"] = n
    else:
        grid = km.QGrid.plane([-4.0, -4.0, 0.05], [8.0, 0.0, 0.0], [0.0, 8.0, 0.0], (size, size))
        pat = km.scatter(src, grid, probe="xray", method="exact", chunk_atoms=chunk_atoms)
        out["max_intensity"] = float(pat.intensity.max())
    out["wall_s"] = time.perf_counter() - t0
    out["read_s"] = src.read_s
    out["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps(out))


def run_child(path: Path, size: int, mode: str, chunk_atoms: int) -> dict:
    res = subprocess.run([sys.executable, __file__, "--child", str(path), "--size", str(size), "--mode", mode,
                          "--chunk-atoms", str(chunk_atoms)], capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--atoms", type=int, default=20_000_000)
    ap.add_argument("--size", type=int, default=128)
    ap.add_argument("--chunk-atoms", type=int, default=1 << 20)
    ap.add_argument("--dir", default=None, help="folder for the H5MD file (default: a temporary folder)")
    ap.add_argument("--keep", action="store_true", help="keep the H5MD file")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--mode", default="map", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child, args.size, args.mode, args.chunk_atoms)
        return
    folder = Path(args.dir or tempfile.mkdtemp(prefix="kinemap-bench-"))
    path = folder / f"stream_{args.atoms}.h5md"
    try:
        if not path.exists():
            dt = write_frame(path, args.atoms)
            print(f"wrote {args.atoms:,} atoms ({path.stat().st_size / 2**20:.0f} MiB) in {dt:.1f} s: {path}")
        read = run_child(path, args.size, "read", args.chunk_atoms)
        mp = run_child(path, args.size, "map", args.chunk_atoms)
        pairs = args.atoms * args.size * args.size
        print(f"read-only pass : {read['wall_s']:7.2f} s wall, reading {read['read_s']:.2f} s, "
              f"peak RSS {read['peak_rss_mb']:.0f} MB")
        print(f"{args.size}x{args.size} plane : {mp['wall_s']:7.2f} s wall, reading {mp['read_s']:.2f} s "
              f"({100 * mp['read_s'] / mp['wall_s']:.1f} % of the total), peak RSS {mp['peak_rss_mb']:.0f} MB, "
              f"{pairs / mp['wall_s'] / 1e9:.2f}e9 atom-q pairs/s")
        print(f"targets: peak RSS < 1500 MB -> {'met' if mp['peak_rss_mb'] < 1500 else 'MISSED'}; "
              f"reading < 10 % -> {'met' if mp['read_s'] < 0.1 * mp['wall_s'] else 'MISSED'}")
    finally:
        if not args.keep and path.exists():
            os.unlink(path)
            if args.dir is None:
                try:
                    folder.rmdir()
                except OSError:
                    pass


if __name__ == "__main__":
    main()
