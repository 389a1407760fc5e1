"""Cost of writing H5MD through kinemap's guarded temporary file (h5py's file-object
driver, which keeps I/O errors away from the HDF5 library) against the same writer handing
HDF5 the file name (HDF5's own POSIX driver, which crashes the process on a full disk).

    python benchmarks/bench_h5md_write.py [n_atoms] [n_frames]

Prints the median of 3 runs of each and their ratio. The file is written to a temporary
folder (the page cache dominates: this measures the extra work per write, not the disk).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import kinemap.io.h5md_write as h5md_write
from kinemap.io import H5MDWriter


class _FileName(str):
    """The temporary file's name, standing in for the guarded file (no protection)."""

    failure = None
    closed = False

    def __new__(cls, path):
        return super().__new__(cls, str(path))

    def close(self) -> None:
        self.closed = True


def write(path: Path, frames: np.ndarray) -> None:
    n = frames.shape[1]
    with H5MDWriter(path, n, ["Fe"], overwrite=True) as w:
        w.write_species_codes(np.zeros(n, dtype=np.int64))
        for p in frames:
            w.add_frame(p, cell=np.eye(3) * 100.0)


def guarded(path: Path, frames: np.ndarray) -> None:
    write(path, frames)


def by_name(path: Path, frames: np.ndarray) -> None:
    keep = h5md_write.GuardedFile
    h5md_write.GuardedFile = _FileName
    try:
        write(path, frames)
    finally:
        h5md_write.GuardedFile = keep


def best(fn, path, frames, repeats=3) -> float:
    times = []
    for _ in range(repeats):
        path.unlink(missing_ok=True)
        t = time.perf_counter()
        fn(path, frames)
        times.append(time.perf_counter() - t)
    return float(np.median(times))


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 2_000_000
    n_frames = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    frames = np.random.default_rng(0).uniform(0, 100, (n_frames, n, 3))
    mb = frames.nbytes / 2**20
    with tempfile.TemporaryDirectory() as tmp:
        t_direct = best(by_name, Path(tmp) / "by_name.h5md", frames)
        t_guard = best(guarded, Path(tmp) / "guarded.h5md", frames)
    print(f"{n:,} atoms x {n_frames} frames = {mb:.0f} MiB of positions")
    print(f"H5MDWriter, HDF5 given the file name : {t_direct:.3f} s  ({mb / t_direct:.0f} MiB/s)")
    print(f"H5MDWriter, guarded file (the default): {t_guard:.3f} s  ({mb / t_guard:.0f} MiB/s)")
    print(f"ratio guarded / file name             : {t_guard / t_direct:.2f}")


if __name__ == "__main__":
    main()
