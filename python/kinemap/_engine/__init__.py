"""The engine: drivers of the Rust core's exact and gridded sums.

``amplitudes(source, grid, probe, ...)`` streams the atom chunks of any atom source (see
:class:`kinemap.model.AtomSource`) through the chosen path and returns A(q) on the grid.
Nothing here validates user input (``kinemap.scatter`` does) or knows about files or plots.
"""

from __future__ import annotations

import numpy as np

from ..qgrid import QGrid
from .exact import exact_amplitudes
from .gridded import choose, gridded_amplitudes

METHODS = ("auto", "exact", "gridded")


def choose_method(n_atoms: int | None, grid: QGrid, tol: float) -> str:
    """The path ``method="auto"`` takes: "exact" or "gridded" (see :func:`kinemap._engine.gridded.choose`)."""
    return choose(n_atoms, grid, tol)


def amplitudes(source, grid: QGrid, probe, *, method: str, tol: float, threads, progress,
               chunk_atoms: int, cluster=None, checkpoint=None, block_points=None,
               run: dict | None = None) -> tuple[np.ndarray, str]:
    """A(q) on `grid` (complex128, shape ``grid.shape``) and the path that computed it.

    With a `cluster` or a `checkpoint` the exact sum runs as (atom chunk × q-block) tasks
    (:mod:`kinemap._engine.distributed`); `run` receives a summary of that run.
    """
    if cluster is not None or checkpoint is not None:
        from .distributed import blocked_amplitudes

        amp, summary = blocked_amplitudes(source, grid, probe, cluster=cluster, checkpoint=checkpoint,
                                          threads=threads, progress=progress, chunk_atoms=chunk_atoms,
                                          block_points=block_points)
        if run is not None:
            run.update(summary)
        return amp, "exact"
    used = choose_method(source.n_atoms, grid, tol) if method == "auto" else method
    if used == "gridded":
        amp = gridded_amplitudes(source, grid, probe, tol=tol, threads=threads, progress=progress,
                                 chunk_atoms=chunk_atoms)
    else:
        amp = exact_amplitudes(source, grid, probe, threads=threads, progress=progress, chunk_atoms=chunk_atoms)
    return amp, used


__all__ = ["amplitudes", "choose_method", "METHODS"]
