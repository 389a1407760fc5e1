"""The exact sums: atom chunks × q-blocks into the Rust core's direct-sum kernels.

Regular grids step the phase along their longest axis (rows of that axis are the core's unit
of work, one complex multiply per atom–q pair); arbitrary points take one sincos per pair.
Every q-point is summed by one thread over a chunk's atoms in a fixed order and chunks are
added in order, so results do not depend on the thread count. Blocks are sized so that one
core call takes well under a second: Ctrl-C and progress happen between calls.
"""

from __future__ import annotations

import numpy as np

from .. import _core
from .._shared.progress import Progress
from ..qgrid import QGrid
from .factors import FactorTables, row_s

# Atom–q pairs per core call: a few tenths of a second at the measured rates.
PAIRS_PER_CALL_POINT = 1 << 28
PAIRS_PER_CALL_GRID = 1 << 30
# Upper bound on the per-call factor table (groups × q-points × 16 bytes).
FACTOR_BYTES = 64 << 20


def regular_layout(grid: QGrid):
    """The stepping axis (the longest), the other axes, their shape and the row length."""
    shape = grid.shape
    fast = int(np.argmax(shape))
    other = [a for a in range(len(shape)) if a != fast]
    other_shape = tuple(shape[a] for a in other)
    return fast, other, other_shape, shape[fast]


def _row_origins(grid: QGrid, other, other_shape, r0: int, r1: int) -> np.ndarray:
    rows = np.broadcast_to(grid.origin, (r1 - r0, 3)).copy()
    if other_shape:
        idx = np.unravel_index(np.arange(r0, r1), other_shape)
        for ax, ix in zip(other, idx):
            rows += ix[:, None].astype(np.float64) * grid.steps[ax]
    return rows


def _regular_chunk(atoms, groups, tables: FactorTables, grid: QGrid, out_flat, threads, prog: Progress):
    fast, other, other_shape, n = regular_layout(grid)
    n_rows = int(np.prod(other_shape, dtype=np.int64)) if other_shape else 1
    n_atoms = max(atoms.n_atoms, 1)
    g = max(groups.n_groups, 1)
    per_call = max(1, min(PAIRS_PER_CALL_GRID // (n_atoms * n) or 1, FACTOR_BYTES // (16 * g * n) or 1))
    step = np.ascontiguousarray(grid.steps[fast], dtype=np.float64)
    for r0 in range(0, n_rows, per_call):
        r1 = min(n_rows, r0 + per_call)
        rows = _row_origins(grid, other, other_shape, r0, r1)

        def q_vectors(rows=rows):
            return (rows[:, None, :] + np.arange(n, dtype=np.float64)[None, :, None] * step).reshape(-1, 3)

        factors = tables.table(groups, ("rows", r0, r1), row_s(rows, step, n), q_vectors)
        out_flat[r0 * n:r1 * n] += _core.grid_amplitudes(atoms, rows, step, n, factors, threads=threads)
        prog.add(atoms.n_atoms * (r1 - r0) * n)


def _points_chunk(atoms, groups, tables: FactorTables, grid: QGrid, out_flat, threads, prog: Progress):
    m = grid.size
    n_atoms = max(atoms.n_atoms, 1)
    g = max(groups.n_groups, 1)
    per_call = max(64, min(PAIRS_PER_CALL_POINT // n_atoms, FACTOR_BYTES // (16 * g)))
    for q0 in range(0, m, per_call):
        q1 = min(m, q0 + per_call)
        q = np.ascontiguousarray(grid.q_vectors(q0, q1))
        s = np.sqrt(np.einsum("mi,mi->m", q, q)) / (4.0 * np.pi)
        factors = tables.table(groups, ("points", q0, q1), s, lambda q=q: q)
        out_flat[q0:q1] += _core.point_amplitudes(atoms, q, factors, threads=threads)
        prog.add(atoms.n_atoms * (q1 - q0))


def exact_amplitudes(source, grid: QGrid, probe, *, threads, progress, chunk_atoms: int) -> np.ndarray:
    """A(q) on `grid` by the exact sum, streaming the source's atom chunks (complex128,
    shape ``grid.shape``)."""
    m = grid.size
    out_flat = np.zeros(m, dtype=np.complex128)
    n_total = source.n_atoms
    tables = FactorTables(probe)
    regular = grid.is_regular and bool(grid.shape)
    with Progress(progress, int(n_total) * m if n_total is not None else 0) as prog:
        for chunk in source.iter_chunks(chunk_atoms):
            if chunk.n_atoms == 0:
                continue
            groups = chunk.groups()
            atoms = _core.AtomSet(chunk.positions, chunk.occupancy, groups.index, groups.n_groups)
            step = _regular_chunk if regular else _points_chunk
            step(atoms, groups, tables, grid, out_flat, threads, prog)
    if regular:
        fast, _other, other_shape, n = regular_layout(grid)
        arr = out_flat.reshape(other_shape + (n,))
        return np.ascontiguousarray(np.moveaxis(arr, -1, fast))
    return out_flat.reshape(grid.shape)


__all__ = ["exact_amplitudes", "regular_layout"]
