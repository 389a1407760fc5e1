"""Overhead of Dask-distributed runs against the in-process engine, and worker memory.

    python benchmarks/bench_cluster.py                 # 10⁶ atoms in memory, ~1 min of work
    python benchmarks/bench_cluster.py --stream 2e7    # also a 2·10⁷-atom H5MD file, streamed

Cases, each timed end to end in this process (the cluster is started before the clock runs
and its start-up is reported separately):
* in-process exact sum (``km.scatter(..., method="exact")``);
* the same job on a LocalCluster: worker processes with one thread each, as many as cores
  (each process holds its own copy of the atoms, so the cores share the memory bandwidth
  less well than threads of one process do), and one worker process using all cores (the
  cost of the task machinery alone);
* a streamed H5MD model: tasks read their own atom chunks from the file.
Prints wall times, the overhead ratio (cluster / in-process − 1), the peak resident memory of
each worker process (ru_maxrss) and of this process, and checks that the maps agree.
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np


def cpu_name() -> str:
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True).stdout
        for line in out.splitlines():
            if line.startswith("Model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown CPU"


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--atoms", type=float, default=1e6)
    ap.add_argument("--points", type=int, default=96 * 96 * 64, help="q-points of the in-memory job")
    ap.add_argument("--stream", type=float, default=0.0, help="atoms of a streamed H5MD job (0: skip)")
    ap.add_argument("--stream-points", type=int, default=64 * 64)
    ap.add_argument("--chunk-atoms", type=int, default=1 << 20)
    ap.add_argument("--block-points", type=int, default=None, help="q-points per task block (default: kinemap's)")
    args = ap.parse_args()

    import distributed

    import kinemap as km

    print(f"machine: {cpu_name()}, {os.cpu_count()} CPUs; kinemap {km.__version__}")
    rng = np.random.default_rng(0)
    n = int(args.atoms)
    side = round(args.points ** (1 / 3))
    nz = max(1, args.points // (side * side))
    model = km.Model(rng.uniform(0, 200, (n, 3)), rng.choice(["Fe", "Ni", "Al"], n))
    grid = km.QGrid.volume([-2.1, -1.9, -0.7], [4.2, 0.3, 0.1], [0.2, 3.8, -0.3], [0.1, 0.2, 1.4], (side, side, nz))
    print(f"job: {n:,} atoms x {grid.size:,} q-points = {n * grid.size:.3g} pairs (exact, X-ray)")

    t0 = time.perf_counter()
    ref = km.scatter(model, grid, method="exact", chunk_atoms=args.chunk_atoms).amplitude
    t_local = time.perf_counter() - t0
    print(f"in-process: {t_local:8.2f} s   ({n * grid.size / t_local:.3g} pairs/s)")

    ncpu = os.cpu_count() or 1
    for n_workers, per_worker in ((1, ncpu), (ncpu, 1)):
        cl = distributed.LocalCluster(n_workers=n_workers, threads_per_worker=per_worker, processes=True,
                                      dashboard_address=":0")
        cli = distributed.Client(cl)
        try:
            t0 = time.perf_counter()
            got = km.scatter(model, grid, cluster=cli, chunk_atoms=args.chunk_atoms,
                             block_points=args.block_points).amplitude
            t_cluster = time.perf_counter() - t0
            run = km.scatter(model, km.QGrid.points([[0.1, 0, 0]]), cluster=cli).metadata["run"]
            rss = cli.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0)
            print(f"cluster {n_workers} worker(s) x {per_worker} thread(s): {t_cluster:8.2f} s  overhead "
                  f"{t_cluster / t_local - 1:+.1%}  identical map: {np.array_equal(got, ref)}; worker peak RSS (MB): "
                  + ", ".join(f"{v:.0f}" for v in rss.values()) + f" (a second small run: {run['blocks']} block)")
        finally:
            cli.close()
            cl.close()

    cluster = distributed.LocalCluster(n_workers=ncpu, threads_per_worker=1, processes=True, dashboard_address=":0")
    client = distributed.Client(cluster)
    try:

        if args.stream:
            ns = int(args.stream)
            with tempfile.TemporaryDirectory(dir=".") as tmp:
                path = Path(tmp) / "big.h5md"
                t0 = time.perf_counter()
                with km.io.H5MDWriter(path, ns, ["Fe", "Ni"], boundary="none") as w:
                    w.add_frame(None)
                    for s in range(0, ns, 1 << 22):
                        e = min(ns, s + (1 << 22))
                        w.write_positions(rng.uniform(0, 600, (e - s, 3)), s)
                        w.write_species_codes(rng.integers(0, 2, e - s), s)
                print(f"streamed job: wrote {ns:,} atoms ({path.stat().st_size / 2**20:.0f} MiB) in "
                      f"{time.perf_counter() - t0:.1f} s")
                src = km.open_model(path)
                plane = km.QGrid.plane([-1.3, -1.1, 0.2], [2.6, 0.1, 0], [0.1, 2.4, 0.05],
                                       (int(np.sqrt(args.stream_points)),) * 2)
                t0 = time.perf_counter()
                a = km.scatter(src, plane, method="exact", chunk_atoms=args.chunk_atoms).amplitude
                t_s_local = time.perf_counter() - t0
                client.restart()
                t0 = time.perf_counter()
                b = km.scatter(src, plane, cluster=client, chunk_atoms=args.chunk_atoms,
                               block_points=args.block_points).amplitude
                t_s_cluster = time.perf_counter() - t0
                rss = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0)
                print(f"  in-process {t_s_local:.2f} s, cluster {t_s_cluster:.2f} s (overhead "
                      f"{t_s_cluster / t_s_local - 1:+.1%}), identical: {np.array_equal(a, b)}")
                print("  worker peak RSS (MB): " + ", ".join(f"{v:.0f}" for v in rss.values()))
    finally:
        client.close()
        cluster.close()
    print(f"this process peak RSS: {peak_rss_mb():.0f} MB")


if __name__ == "__main__":
    main()
