"""Runs on a Dask cluster and checkpointed runs.

Reference: the in-process exact engine (itself checked against NumPy direct sums in
test_scatter.py). With the same atom chunks, the distributed sums add the chunks of every
q-point in the same order, so the maps must agree bit for bit; the issue asks for 1e-12.
"""

import os
import signal
import sys
import threading
import time

import numpy as np
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError
from kinemap.frames import FewFramesWarning

distributed = pytest.importorskip("distributed", reason="the cluster extra (dask.distributed) is a test dependency")

CHUNK = 700


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0")
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def scale(client, n):
    client.cluster.scale(n)
    deadline = time.time() + 60
    while len(client.nthreads()) != n:
        assert time.time() < deadline, "workers did not start"
        time.sleep(0.1)


@pytest.fixture(scope="module")
def model():
    rng = np.random.default_rng(0)
    return km.Model(rng.uniform(0, 25, (3000, 3)), rng.choice(["Fe", "Ni"], 3000), b_iso={"Fe": 0.4, "Ni": 0.6})


GRID = km.QGrid.hkl(np.eye(3) * 3.5, h=(-2, 2, 33), k=(-2, 2, 17), l=(0, 1, 3))


@pytest.mark.parametrize("workers, block_points", [(1, 400), (2, 1000), (3, 5000)])
def test_in_memory_model_matches_the_engine(client, model, workers, block_points):
    scale(client, workers)
    ref = km.scatter(model, GRID, method="exact", chunk_atoms=CHUNK).amplitude
    got = km.scatter(model, GRID, cluster=client, chunk_atoms=CHUNK, block_points=block_points)
    np.testing.assert_array_equal(got.amplitude, ref)
    assert got.metadata["run"]["workers"] == workers
    assert got.metadata["run"]["chunks"] == 5 and got.metadata["method"] == "exact"
    # Other chunk sizes change only the rounding (≤ 1e-12 relative).
    other = km.scatter(model, GRID, cluster=client, chunk_atoms=1100, block_points=block_points).amplitude
    assert np.abs(other - ref).max() <= 1e-12 * np.abs(ref).max()


def test_streamed_file_and_frame_average(client, model, tmp_path):
    scale(client, 2)
    rng = np.random.default_rng(1)
    frames = [model.moved(model.positions + rng.normal(0, 0.05, model.positions.shape)) for _ in range(3)]
    path = km.write_h5md(tmp_path / "run.h5md", frames)
    src = km.open_model(path, frame=1)
    ref = km.scatter(src, GRID, method="exact", chunk_atoms=CHUNK).amplitude
    got = km.scatter(src, GRID, cluster=client, chunk_atoms=CHUNK, block_points=700).amplitude
    np.testing.assert_array_equal(got, ref)
    with pytest.warns(FewFramesWarning):
        a = km.average_frames(path, GRID, probe="xray", method="exact", chunk_atoms=CHUNK)
    with pytest.warns(FewFramesWarning):
        b = km.average_frames(path, GRID, probe="xray", cluster=client, chunk_atoms=CHUNK, block_points=900)
    np.testing.assert_array_equal(a.total.intensity, b.total.intensity)
    np.testing.assert_array_equal(a.diffuse.intensity, b.diffuse.intensity)


def test_a_killed_worker_does_not_change_the_map(client, model):
    scale(client, 2)
    ref = km.scatter(model, GRID, method="exact", chunk_atoms=300).amplitude
    pids = list(client.run(os.getpid).values())
    done = threading.Event()
    killed = []

    def progress(n_done, total):
        if n_done >= 3 and not killed:
            os.kill(pids[0], signal.SIGKILL)  # the nanny starts a new worker; Dask reruns its tasks
            killed.append(pids[0])
        if n_done == total:
            done.set()

    got = km.scatter(model, GRID, cluster=client, chunk_atoms=300, block_points=60, progress=progress)
    assert killed
    np.testing.assert_array_equal(got.amplitude, ref)


def test_checkpoint_resumes_a_stopped_run(client, model, tmp_path):
    scale(client, 2)
    ref = km.scatter(model, GRID, method="exact", chunk_atoms=CHUNK).amplitude
    ckpt = tmp_path / "ckpt"

    def stop_after_four(n_done, total):
        if n_done >= 4:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        km.scatter(model, GRID, cluster=client, chunk_atoms=CHUNK, block_points=200, checkpoint=ckpt,
                   progress=stop_after_four)
    finished = sorted(p.name for p in ckpt.glob("block_*.npy"))
    assert len(finished) >= 4
    again = km.scatter(model, GRID, cluster=client, chunk_atoms=CHUNK, block_points=200, checkpoint=ckpt)
    assert again.metadata["run"]["blocks_reused"] == len(finished)
    assert again.metadata["run"]["blocks"] > len(finished)
    np.testing.assert_array_equal(again.amplitude, ref)
    # The same checkpoint for other inputs is refused, naming what differs.
    with pytest.raises(InvalidInputError, match="probe"):
        km.scatter(model, GRID, probe="neutron", cluster=client, chunk_atoms=CHUNK, block_points=200,
                   checkpoint=ckpt)
    with pytest.raises(InvalidInputError, match="atoms_sha256"):
        km.scatter(model.translated([0.1, 0, 0]), GRID, chunk_atoms=CHUNK, block_points=200, checkpoint=ckpt)


def test_checkpoint_in_this_process(model, tmp_path):
    ref = km.scatter(model, GRID, method="exact", chunk_atoms=CHUNK).amplitude
    first = km.scatter(model, GRID, chunk_atoms=CHUNK, block_points=500, checkpoint=tmp_path / "c")
    second = km.scatter(model, GRID, chunk_atoms=CHUNK, block_points=500, checkpoint=tmp_path / "c")
    np.testing.assert_array_equal(first.amplitude, ref)
    np.testing.assert_array_equal(second.amplitude, ref)
    assert second.metadata["run"]["blocks_reused"] == second.metadata["run"]["blocks"]


def test_bad_cluster_arguments(model, monkeypatch):
    with pytest.raises(InvalidInputError, match="exact sum"):
        km.scatter(model, GRID, method="gridded", cluster="local")
    with pytest.raises(InvalidInputError, match="`cluster` must be"):
        km.scatter(model, GRID, cluster=3)
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if the extra were not installed
    with pytest.raises(ImportError, match=r"kinemap\[cluster\]"):
        km.scatter(model, GRID, cluster="local")


def test_command_line_checkpoint(tmp_path, model, capsys):
    from kinemap.cli import main

    boxed = km.Model(model.positions, model.species, b_iso=model.b_iso, box=np.eye(3) * 3.5)
    path = km.write_h5md(tmp_path / "m.h5md", boxed)
    args = ["map", str(path), "--hkl", "--h", "-2:2:33", "--k", "-2:2:17",
            "--l", "0:1:3", "--checkpoint", str(tmp_path / "ck"), "--block-points", "400", "--chunk-atoms",
            str(CHUNK), "--no-progress"]
    assert main(args + ["-o", str(tmp_path / "a.h5")]) == 0
    assert main(args + ["-o", str(tmp_path / "b.h5")]) == 0
    import re

    m = re.search(r"reused (\d+) of (\d+) finished q-blocks", capsys.readouterr().out)
    assert m and m.group(1) == m.group(2)
    ref = km.scatter(model, GRID, method="exact", chunk_atoms=CHUNK).amplitude
    np.testing.assert_array_equal(km.load_pattern(tmp_path / "b.h5").amplitude, ref)
