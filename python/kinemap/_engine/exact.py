"""The exact sums: atom chunks × q-blocks into the Rust core's direct-sum kernels.

Regular grids step the phase along their longest axis (rows of that axis are the core's unit
of work, one complex multiply per atom–q pair); arbitrary points take one sincos per pair.
Every q-point is summed by one thread over a chunk's atoms in a fixed order and chunks are
added in order, so results do not depend on the thread count, and not on how the q-points
are cut into blocks (the distributed runs rely on that). Calls are sized so that one core
call takes well under a second: Ctrl-C and progress happen between calls.
"""

from __future__ import annotations

import numpy as np

from .. import _core
from .._shared.progress import Progress
from ..qgrid import QGrid, RegularGrid
from .factors import FactorTables, row_s

# Atom–q pairs per core call: a few tenths of a second at the measured rates.
PAIRS_PER_CALL_POINT = 1 << 28
PAIRS_PER_CALL_GRID = 1 << 30
# Upper bound on the per-call factor table (groups × q-points × 16 bytes).
FACTOR_BYTES = 64 << 20


def _aligned(a: np.ndarray) -> np.ndarray:
    """float64, C-contiguous and aligned, as the core borrows it (arrays rebuilt from pickled
    buffers on a cluster's workers can be unaligned views)."""
    return np.require(a, dtype=np.float64, requirements=["C", "A"])


class Layout:
    """How the core walks a grid: *units* are rows of the longest axis of a regular grid (each
    ``row_length`` points, stepped by phase recurrence) or single arbitrary points. The core's
    output order is unit after unit; :meth:`to_grid` puts it into the grid's shape."""

    def __init__(self, grid: QGrid):
        self.grid = grid
        self.regular = isinstance(grid, RegularGrid) and bool(grid.shape)
        if isinstance(grid, RegularGrid) and self.regular:
            shape = grid.shape
            self.fast = int(np.argmax(shape))
            self.other = [a for a in range(len(shape)) if a != self.fast]
            self.other_shape = tuple(shape[a] for a in self.other)
            self.row_length = shape[self.fast]
            self.n_units = int(np.prod(self.other_shape, dtype=np.int64)) if self.other_shape else 1
            self.step = np.ascontiguousarray(grid.steps[self.fast], dtype=np.float64)
        else:
            self.row_length = 1
            self.n_units = grid.size

    def units_per_call(self, n_atoms: int, n_groups: int) -> int:
        n_atoms, g = max(n_atoms, 1), max(n_groups, 1)
        if self.regular:
            n = self.row_length
            return max(1, min(PAIRS_PER_CALL_GRID // (n_atoms * n) or 1, FACTOR_BYTES // (16 * g * n) or 1))
        return max(64, min(PAIRS_PER_CALL_POINT // n_atoms, FACTOR_BYTES // (16 * g)))

    def _rows(self, u0: int, u1: int) -> np.ndarray:
        g = self.grid
        assert isinstance(g, RegularGrid)  # rows exist on regular grids only (self.regular)
        rows = np.broadcast_to(g.origin, (u1 - u0, 3)).copy()
        if self.other_shape:
            idx = np.unravel_index(np.arange(u0, u1), self.other_shape)
            for ax, ix in zip(self.other, idx):
                rows += ix[:, None].astype(np.float64) * g.steps[ax]
        return rows

    def amplitudes(self, atoms, groups, tables: FactorTables, u0: int, u1: int, threads) -> np.ndarray:
        """Amplitudes of one prepared atom set at units ``u0:u1`` (one core call)."""
        if self.regular:
            rows = self._rows(u0, u1)
            n, step = self.row_length, self.step

            def q_vectors(rows=rows):
                return (rows[:, None, :] + np.arange(n, dtype=np.float64)[None, :, None] * step).reshape(-1, 3)

            factors = tables.table(groups, ("rows", u0, u1), row_s(rows, step, n), q_vectors)
            return _core.grid_amplitudes(atoms, rows, step, n, factors, threads=threads)
        q = _aligned(self.grid.q_vectors(u0, u1))
        s = np.sqrt(np.einsum("mi,mi->m", q, q)) / (4.0 * np.pi)
        factors = tables.table(groups, ("points", u0, u1), s, lambda: q)
        return _core.point_amplitudes(atoms, q, factors, threads=threads)

    @staticmethod
    def prepare(chunk):
        """(groups, AtomSet) of an atom chunk: what the core needs, reusable across q-blocks
        (kept by the model, see ``Model.core_atoms``)."""
        return chunk.core_atoms()

    def add_chunk(self, chunk, tables: FactorTables, out: np.ndarray, u0: int, u1: int, threads,
                  prog: Progress | None = None, prepared=None) -> None:
        """Add the amplitudes of one atom chunk at units ``u0:u1`` to ``out`` (which holds
        exactly those units), call by call (`prepared`: the chunk's :meth:`prepare`)."""
        groups, atoms = prepared if prepared is not None else self.prepare(chunk)
        per_call = self.units_per_call(atoms.n_atoms, groups.n_groups)
        n = self.row_length
        for a in range(u0, u1, per_call):
            b = min(u1, a + per_call)
            out[(a - u0) * n:(b - u0) * n] += self.amplitudes(atoms, groups, tables, a, b, threads)
            if prog is not None:
                prog.add(chunk.n_atoms * (b - a) * n)

    def to_grid(self, flat: np.ndarray) -> np.ndarray:
        """The core's unit-after-unit output in the grid's shape."""
        if self.regular:
            arr = flat.reshape(self.other_shape + (self.row_length,))
            return np.ascontiguousarray(np.moveaxis(arr, -1, self.fast))
        return flat.reshape(self.grid.shape)


def exact_amplitudes(source, grid: QGrid, probe, *, threads, progress, chunk_atoms: int) -> np.ndarray:
    """A(q) on `grid` by the exact sum, streaming the source's atom chunks (complex128,
    shape ``grid.shape``)."""
    layout = Layout(grid)
    out_flat = np.zeros(grid.size, dtype=np.complex128)
    n_total = source.n_atoms
    tables = FactorTables(probe)
    with Progress(progress, int(n_total) * grid.size if n_total is not None else 0) as prog:
        for chunk in source.iter_chunks(chunk_atoms):
            if chunk.n_atoms:
                layout.add_chunk(chunk, tables, out_flat, 0, layout.n_units, threads, prog)
    return layout.to_grid(out_flat)


__all__ = ["exact_amplitudes", "Layout"]
