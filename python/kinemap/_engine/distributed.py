"""Runs beyond one process: the exact sum as tasks of (atom chunk × q-block) on a Dask
cluster, with checkpoints of finished q-blocks.

How a run is cut and put together:

* The q-points are cut into blocks of whole core units (rows of the stepping axis, or
  points) of about ``block_points`` points; the atoms into the source's chunks of
  ``chunk_atoms``. A task computes the amplitudes of one chunk on one block.
* Each task reads its own atom chunk: a model file is opened by the task itself (the source
  object that travels to the worker is a small description: path, frame, options), so no
  worker holds the whole model and the client never ships atoms. A shared file system is
  assumed (the same path must reach the file on every worker). An in-memory model is sent
  to the workers once.
* A block's partial sums are added in chunk order, starting from zero, exactly as the
  in-process engine adds chunks; every q-point is summed by one thread inside a task. So the
  map is the same, bit for bit, as the in-process one, for any number of workers.
* Lost workers: Dask reruns their tasks; the result does not change.
* ``checkpoint=path`` keeps every finished block in a folder (one ``.npy`` file per block,
  each written atomically, and ``inputs.json`` describing the run). A rerun with the same
  inputs reuses the finished blocks and computes the rest; a checkpoint of other inputs is
  refused, naming what differs.

Only the exact path runs this way (the gridded path's FFTs do not cut into q-blocks).
"""

from __future__ import annotations

import hashlib
import json
import os
import uuid
from collections import OrderedDict
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .._shared.output import atomic_write
from .._shared.progress import Progress
from ..errors import InvalidInputError
from ..model import Model
from ..qgrid import PointGrid, QGrid
from .exact import Layout
from .factors import FactorTables

if TYPE_CHECKING:
    import distributed

#: q-points per block of a checkpointed run in this process when none is given.
DEFAULT_BLOCK_POINTS = 1 << 16
#: Largest automatic block on a cluster (a task's result is 16 bytes a point).
MAX_AUTO_BLOCK_POINTS = 1 << 20
_EXTRA = "kinemap[cluster]"


# --------------------------------------------------------------------------------------
# reading one chunk
# --------------------------------------------------------------------------------------
def read_chunk(source, index: int, chunk_atoms: int):
    """Atom chunk number `index` (atoms ``index·chunk_atoms`` on) of a source: a slice of an
    in-memory model, a bounded read of a file (``iter_range`` when the reader has it)."""
    start = index * chunk_atoms
    if isinstance(source, Model):
        return source.subset(slice(start, start + chunk_atoms))
    ranged = getattr(source, "iter_range", None)
    chunks = ranged(start, start + chunk_atoms, chunk_atoms) if ranged is not None else \
        (c for k, c in enumerate(source.iter_chunks(chunk_atoms)) if k == index)
    for chunk in chunks:
        return chunk
    raise InvalidInputError(f"the source has no atom chunk {index} of {chunk_atoms} atoms")


#: Prepared atom chunks kept by each worker process for the next blocks of the same run
#: (reading and grouping a chunk costs about as much as a small block's sums).
_PREPARED: OrderedDict = OrderedDict()
_PREPARED_KEEP = 2


def _prepared(source, token: str, index: int, chunk_atoms: int):
    key = (token, index, chunk_atoms)
    hit = _PREPARED.get(key)
    if hit is not None:
        _PREPARED.move_to_end(key)
        return hit
    chunk = read_chunk(source, index, chunk_atoms)
    entry = (chunk, Layout.prepare(chunk) if chunk.n_atoms else None)
    _PREPARED[key] = entry
    while len(_PREPARED) > _PREPARED_KEEP:
        _PREPARED.popitem(last=False)
    return entry


def chunk_task(source, token: str, index: int, chunk_atoms: int, grid: QGrid, probe, u0: int, u1: int,
               threads: int | None) -> np.ndarray:
    """One task: the amplitudes of atom chunk `index` on the units ``u0:u1`` of `grid` (`token`
    names the run, so that a worker reuses a chunk it prepared for an earlier block)."""
    if threads is None:
        threads = _worker_threads()
    layout = Layout(grid)
    out = np.zeros((u1 - u0) * layout.row_length, dtype=np.complex128)
    chunk, prepared = _prepared(source, token, index, chunk_atoms)
    if prepared is not None:
        layout.add_chunk(chunk, FactorTables(probe), out, u0, u1, threads, prepared=prepared)
    return out


def _worker_threads() -> int:
    """Core threads of one task on a worker: ``KINEMAP_NUM_THREADS`` when the worker's
    environment sets it, else 1 — a worker runs as many tasks at once as it has Dask threads,
    so more core threads per task would oversubscribe its cores."""
    from .._shared.validate import thread_count

    return thread_count(None) or 1


# --------------------------------------------------------------------------------------
# checkpoints
# --------------------------------------------------------------------------------------
def _file_identity(desc: dict) -> dict:
    path = desc.get("file")
    if not path:
        return {}
    try:
        st = os.stat(path)
    except OSError:
        return {}
    return {"file_size": st.st_size, "file_mtime_ns": st.st_mtime_ns}


def _model_digest(source, chunk_atoms: int) -> str:
    """A digest of an in-memory model's atoms (files are identified by path, size and time)."""
    h = hashlib.sha256()
    for chunk in source.iter_chunks(chunk_atoms):
        for arr in (chunk.positions, chunk.occupancy, chunk.b_iso):
            h.update(np.ascontiguousarray(arr).tobytes())
        h.update("\0".join(map(str, chunk.species)).encode())
        if chunk.u_aniso is not None:
            h.update(np.ascontiguousarray(chunk.u_aniso).tobytes())
    return h.hexdigest()


def run_inputs(source, grid: QGrid, probe, *, chunk_atoms: int, block_points: int) -> dict:
    """What identifies a run, for checkpoints (JSON-safe)."""
    from .. import __version__
    from ..pattern import _json_safe

    desc = dict(source.describe())
    model = {"description": desc, **_file_identity(desc)}
    if not desc.get("file"):
        model["atoms_sha256"] = _model_digest(source, chunk_atoms)
    grid_desc = grid.describe()
    if isinstance(grid, PointGrid):
        grid_desc["q_sha256"] = hashlib.sha256(np.ascontiguousarray(grid.q).tobytes()).hexdigest()
    return _json_safe({"model": model, "grid": grid_desc, "probe": probe.metadata(), "method": "exact",
                       "chunk_atoms": chunk_atoms, "block_points": block_points, "kinemap_version": __version__})


def _differences(a, b, prefix="") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for k in sorted(set(a) | set(b)):
            out += _differences(a.get(k), b.get(k), f"{prefix}{k}.")
        return out
    return [] if a == b else [prefix.rstrip(".")]


class Checkpoint:
    """A folder of finished q-blocks of one run."""

    def __init__(self, path, inputs: dict):
        self.path = Path(path)
        if self.path.exists() and not self.path.is_dir():
            raise InvalidInputError(f"`checkpoint` {str(self.path)!r} exists and is not a folder")
        self.path.mkdir(parents=True, exist_ok=True)
        manifest = self.path / "inputs.json"
        if manifest.exists():
            try:
                old = json.loads(manifest.read_text())
            except (OSError, ValueError) as exc:
                raise InvalidInputError(f"checkpoint {str(self.path)!r}: unreadable inputs.json ({exc})") from None
            diff = _differences(old, inputs)
            if diff:
                raise InvalidInputError(
                    f"checkpoint {str(self.path)!r} belongs to a run with other inputs (differing: "
                    f"{', '.join(diff[:8])}{' ...' if len(diff) > 8 else ''}); use another folder or remove it")
        else:
            with atomic_write(manifest, overwrite=True, what="checkpoint inputs") as tmp:
                Path(tmp).write_text(json.dumps(inputs, indent=1, sort_keys=True))

    def _file(self, b: int) -> Path:
        return self.path / f"block_{b:06d}.npy"

    def load(self, b: int, size: int) -> np.ndarray | None:
        f = self._file(b)
        if not f.exists():
            return None
        try:
            arr = np.load(f, allow_pickle=False)
        except (OSError, ValueError):
            return None  # a damaged block is computed again
        return arr if arr.shape == (size,) and arr.dtype == np.complex128 else None

    def save(self, b: int, values: np.ndarray) -> None:
        with atomic_write(self._file(b), overwrite=True, what="checkpoint block") as tmp:
            with open(tmp, "wb") as fh:
                np.save(fh, values, allow_pickle=False)


# --------------------------------------------------------------------------------------
# the run
# --------------------------------------------------------------------------------------
def auto_block_points(m: int, n_chunks: int, task_target: int = 8) -> int:
    """q-points per block on a cluster: as few blocks as give about `task_target` tasks (every
    task reads and prepares its atom chunk, so fewer blocks read the model fewer times), at
    most ``MAX_AUTO_BLOCK_POINTS``."""
    n_blocks = max(1, -(-task_target // n_chunks))
    return max(1, min(MAX_AUTO_BLOCK_POINTS, -(-m // n_blocks)))


def blocks_of(layout: Layout, block_points: int) -> list[tuple[int, int]]:
    units = max(1, block_points // layout.row_length)
    return [(u, min(layout.n_units, u + units)) for u in range(0, layout.n_units, units)]


class connect:
    """``with connect(cluster) as c:`` — a Client for "local", an address or a Client (None
    stays None); a cluster started here is closed at the end of the block."""

    def __init__(self, cluster):
        self.cluster = cluster
        self.client: distributed.Client | None
        self.owned: bool
        self.client, self.owned = (None, False) if cluster is None else _client(cluster)

    def __enter__(self):
        return self.client

    def __exit__(self, *exc):
        if self.owned:
            _close(self.client)
        return False


def _close(client) -> None:
    cl = client.cluster
    client.close()
    if cl is not None:
        cl.close()


def _client(cluster) -> tuple[distributed.Client, bool]:
    """(client, owned) for "local"/an address/a Client."""
    try:
        import distributed
    except ImportError:
        raise ImportError(f"`cluster` needs Dask's distributed scheduler: pip install {_EXTRA}") from None
    if isinstance(cluster, distributed.Client):
        return cluster, False
    if cluster == "local":
        from .._shared.validate import cores

        lc = distributed.LocalCluster(n_workers=cores(), threads_per_worker=1, processes=True,
                                      dashboard_address=":0")
        return distributed.Client(lc), True
    if isinstance(cluster, str):
        try:
            return distributed.Client(cluster, timeout="30s"), False
        except OSError as exc:
            raise OSError(f"cannot reach the Dask scheduler at {cluster!r}: {exc}") from None
    raise InvalidInputError(f"`cluster` must be None, 'local', a scheduler address or a dask.distributed.Client, "
                            f"got {type(cluster).__name__}")


def blocked_amplitudes(source, grid: QGrid, probe, *, cluster=None, checkpoint=None, threads=None,
                       progress=False, chunk_atoms: int, block_points: int | None = None) -> tuple[np.ndarray, dict]:
    """A(q) by the exact sum cut into (atom chunk × q-block) tasks, on a Dask cluster or in this
    process, with optional checkpoints. Returns the map and a summary of the run."""
    layout = Layout(grid)
    n_atoms = source.n_atoms
    if n_atoms is None:
        n_atoms = sum(c.n_atoms for c in source.iter_chunks(chunk_atoms))
    n_chunks = max(1, -(-int(n_atoms) // chunk_atoms))
    if block_points is None:
        block_points = DEFAULT_BLOCK_POINTS if cluster is None else auto_block_points(grid.size, n_chunks)
    block_points = int(block_points)
    blocks = blocks_of(layout, block_points)
    store = None
    if checkpoint is not None:
        store = Checkpoint(checkpoint, run_inputs(source, grid, probe, chunk_atoms=chunk_atoms,
                                                  block_points=block_points))
    out = np.zeros(grid.size, dtype=np.complex128)
    n = layout.row_length
    todo = []
    reused = 0
    for b, (u0, u1) in enumerate(blocks):
        done = store.load(b, (u1 - u0) * n) if store is not None else None
        if done is None:
            todo.append(b)
        else:
            out[u0 * n:u1 * n] = done
            reused += 1
    summary = {"blocks": len(blocks), "blocks_reused": reused, "chunks": n_chunks, "block_points": block_points,
               "cluster": _describe_cluster(cluster)}
    with Progress(progress, len(blocks), unit="block", desc="kinemap blocks") as prog:
        prog.add(reused)

        def finish(b, parts):
            u0, u1 = blocks[b]
            total = np.zeros((u1 - u0) * n, dtype=np.complex128)
            for part in parts:  # chunk order, as in this process
                total += part
            out[u0 * n:u1 * n] = total
            if store is not None:
                store.save(b, total)
            prog.add(1)

        if cluster is None:
            token = uuid.uuid4().hex
            try:
                for b in todo:
                    u0, u1 = blocks[b]
                    finish(b, [chunk_task(source, token, c, chunk_atoms, grid, probe, u0, u1, threads)
                               for c in range(n_chunks)])
            finally:
                _PREPARED.clear()  # this process keeps no atoms after the run
        else:
            _run_on_cluster(cluster, source, grid, probe, blocks, todo, n_chunks, chunk_atoms, threads, finish,
                            summary)
    return layout.to_grid(out), summary


def _describe_cluster(cluster) -> str:
    if cluster is None:
        return "this process"
    if isinstance(cluster, str):
        return cluster
    return type(cluster).__name__


def _run_on_cluster(cluster, source, grid, probe, blocks, todo, n_chunks, chunk_atoms, threads, finish, summary):
    client, owned = _client(cluster)
    from distributed import as_completed

    futures = []
    try:
        workers = client.nthreads()  # asks the scheduler now (scheduler_info() may be cached)
        summary["workers"] = len(workers)
        check_workers(client)
        # The model (when in memory), grid and probe go to the cluster once, as the results of
        # tasks: the scheduler can recompute them when the workers holding them are lost
        # (scattered data could not be), and every worker fetches them once.
        src = _held(client, source) if isinstance(source, Model) else source
        grid_f = _held(client, grid)
        probe_f = _held(client, probe)
        parts: dict[int, dict[int, np.ndarray]] = {}
        owner = {}
        token = uuid.uuid4().hex
        # A bounded number of blocks in flight keeps the results held on the client small.
        window = max(2, 2 * max(len(workers), 1))
        pending = list(todo)

        def submit(b):
            u0, u1 = blocks[b]
            parts[b] = {}
            for c in range(n_chunks):
                f = client.submit(chunk_task, src, token, c, chunk_atoms, grid_f, probe_f, u0, u1, threads,
                                  key=f"kinemap-{token}-{b}-{c}", pure=False)
                owner[f.key] = (b, c)
                futures.append(f)
                yield f

        queue = as_completed()
        for _ in range(min(window, len(pending))):
            for f in submit(pending.pop(0)):
                queue.add(f)
        for f in queue:
            b, c = owner.pop(f.key)
            parts[b][c] = f.result()
            f.release()
            if len(parts[b]) == n_chunks:
                finish(b, [parts[b][k] for k in range(n_chunks)])
                del parts[b]
                if pending:
                    for g in submit(pending.pop(0)):
                        queue.add(g)
    except KeyboardInterrupt:
        client.cancel(futures)
        raise
    finally:
        if owned:
            _close(client)


def _identity(obj):
    return obj


def _held(client, obj):
    return client.submit(_identity, obj, pure=False)


def check_workers(client) -> None:
    """Refuse to start when a worker cannot run this build of kinemap (e.g. a CPU without the
    instructions the extension was compiled for), with a message instead of a crash."""
    def probe():
        import numpy

        import kinemap

        # A tiny exact sum runs the compiled kernels: a CPU they cannot run on fails here.
        kinemap.scatter(kinemap.Model(numpy.zeros((1, 3)), "X"), kinemap.QGrid.points([[0.5, 0.0, 0.0]]),
                        probe="unit", method="exact", threads=1)
        return kinemap.__version__

    try:
        versions = client.run(probe)
    except Exception as exc:
        raise InvalidInputError(
            f"a Dask worker cannot run kinemap ({type(exc).__name__}: {exc}); install the same kinemap on every "
            "worker, built for (or portable to) the workers' CPUs") from None
    from .. import __version__

    odd = {w: v for w, v in versions.items() if v != __version__}
    if odd:
        raise InvalidInputError(f"Dask workers run other kinemap versions than this client ({__version__}): {odd}")


__all__ = ["blocked_amplitudes", "chunk_task", "read_chunk", "Checkpoint", "DEFAULT_BLOCK_POINTS"]
