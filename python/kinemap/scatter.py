"""``scatter``: kinematic amplitudes and intensities of a model on a set of q-points.

The amplitude is

    A(q) = Σ_j o_j f_j(s) T_j(q) exp(+i q·r_j),   s = |q|/4π,

with occupancy o_j, scattering factor f_j from the probe and Debye–Waller factor
T_j = exp(−B_j s²) (or exp(−½ qᵀU_j q)). This module checks the arguments, chooses the path,
hands the work to the engine (:mod:`kinemap._engine`) and records what was done.
"""

from __future__ import annotations

import datetime as _dt
import warnings

import numpy as np

from . import _core
from ._engine import METHODS, amplitudes
from ._shared.memory import check_fits
from ._shared.progress import check_progress
from ._shared.validate import one_of, real_number, thread_count, whole_number
from .errors import InvalidInputError
from .model import AtomSource, Model
from .pattern import Pattern
from .probes import get_probe
from .qgrid import QGrid, RegularGrid

#: Atoms per chunk when streaming (about 100 MB of working arrays per chunk).
DEFAULT_CHUNK_ATOMS = 1 << 20


class KinematicApproximationWarning(UserWarning):
    """The kinematic (single-scattering) approximation may misrepresent this experiment."""


class OffLatticeWarning(UserWarning):
    """A regular grid does not lie on the reciprocal lattice of a periodic model's box."""


def as_source(model_or_source) -> AtomSource:
    """The argument as an atom source (a Model or anything following the protocol)."""
    if isinstance(model_or_source, (Model, AtomSource)):
        return model_or_source
    raise InvalidInputError(
        "`model` must be a kinemap.Model or an atom source (kinemap.open_model, a quasicrystal patch, "
        f"or an object with n_atoms, cell, box, species_labels, describe and iter_chunks), got "
        f"{type(model_or_source).__name__}")


def as_grid(grid) -> QGrid:
    if isinstance(grid, QGrid):
        return grid
    raise InvalidInputError(
        f"`grid` must be a kinemap.QGrid (QGrid.points/line/plane/volume/hkl), got {type(grid).__name__}")


def check_commensurate(source, grid: QGrid, *, stacklevel: int = 3) -> bool:
    """Warn (:class:`OffLatticeWarning`) when a regular grid is off the reciprocal lattice of a
    periodic model's box; returns whether it is on it."""
    box = getattr(source, "box", None)
    if box is None or not isinstance(grid, RegularGrid) or not grid.shape:
        return True
    if grid.is_commensurate(box):
        return True
    o, st = grid.box_coordinates(box)
    snapped = grid.snapped(box)
    warnings.warn(
        "the grid is off the reciprocal lattice of the model's periodic box (box·q/2π of the origin is "
        f"{np.round(o, 3).tolist()}, of the steps {np.round(st, 3).tolist()}; whole numbers are needed): the "
        "finite-box ripple of every Bragg peak will swamp the diffuse scattering there. The nearest grid on "
        f"the lattice, grid.snapped(box), has shape {snapped.shape} (command line: --snap).",
        OffLatticeWarning, stacklevel=stacklevel)
    return False


def scatter(model, grid, *, probe="xray", method: str = "auto", tol: float = 1e-6,
            threads: int | None = None, progress=False, chunk_atoms: int = DEFAULT_CHUNK_ATOMS,
            cluster=None, checkpoint=None, block_points: int | None = None, **probe_options) -> Pattern:
    """Kinematic scattering amplitudes and intensities of a model on a set of q-points.

    Parameters
    ----------
    model : Model or atom source
        The atoms: a :class:`kinemap.Model` in memory or a source from
        :func:`kinemap.open_model` (or a quasicrystal patch) that streams atom chunks.
    grid : QGrid
        Where to evaluate: ``QGrid.points/line/plane/volume/hkl``; q in Å⁻¹.
    probe : str or Probe
        "xray" (electrons), "neutron" (fm), "electron" (Å), "unit" (point scatterers, f = 1)
        or a probe object; extra keyword arguments go to the probe (e.g. ``voltage_kv=200``).
    method : {"auto", "exact", "gridded"}
        "exact" is the direct sum (exact to rounding); "gridded" spreads atoms onto a fine
        grid and uses FFTs, to relative tolerance `tol`; "auto" picks the cheaper of the two
        by the cost model documented in :func:`kinemap._engine.gridded.choose` (and "exact"
        whenever `tol` is below what the gridded path reaches or its plan would not fit in
        memory).
    tol : float
        Requested relative l2 accuracy of the gridded path, 1e-3 … 1e-12 (ignored by the
        exact sum). ``pattern.metadata["method"]`` records which path ran.
    threads : int, optional
        Worker threads (default: ``KINEMAP_NUM_THREADS`` or all cores). Results do not depend
        on it.
    progress : bool or callable
        True shows a progress bar; a callable receives ``(pairs_done, pairs_total)``.
    chunk_atoms : int
        Atoms per streamed chunk; bounds working memory, does not change results beyond
        rounding.
    cluster : None, "local", str or dask.distributed.Client
        Where to run: None (this process), "local" (a Dask cluster of worker processes on this
        machine), the address of a running Dask scheduler, or a Client. Needs the extra
        ``kinemap[cluster]``; runs the exact sum as (atom chunk × q-block) tasks whose sums
        equal the in-process ones (see :mod:`kinemap._engine.distributed`). Model files must
        be reachable under the same path from every worker (a shared file system).
    checkpoint : str or path-like, optional
        A folder that keeps finished q-blocks: a stopped run started again with the same
        inputs reuses them (``metadata["run"]["blocks_reused"]``); other inputs are refused.
    block_points : int, optional
        q-points per block of a cluster or checkpointed run (default: 65536 in this process; on
        a cluster, blocks that give about 8 tasks, at most 2²⁰ points).

    Returns
    -------
    Pattern
        ``amplitude`` (complex128, shape ``grid.shape``), ``intensity`` = |amplitude|², and
        metadata (probe, tables, units, method, grid, version, date).

    Raises
    ------
    InvalidInputError
        Bad arguments, unknown species (named), or an output that cannot fit in memory
        (refused before allocating, with the estimate).

    Warns
    -----
    OffLatticeWarning
        A regular grid off the reciprocal lattice of a periodic model's box.
    KinematicApproximationWarning
        The probe's cautions (e.g. dynamical scattering of electrons).

    Notes
    -----
    A(q) = Σ_j o_j f_j(s) T_j exp(+i q·r_j), s = sinθ/λ = |q|/4π, T_j = exp(−B_j s²).
    The kinematic approximation ignores multiple scattering: it understates dynamical effects
    in electron diffraction of all but very thin specimens, and overstates strong Bragg
    intensities of large perfect crystals, where extinction reduces them.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> m = km.Model([[0, 0, 0], [1.5, 0, 0]], "C")
    >>> p = km.scatter(m, km.QGrid.points([[0.0, 0.0, 0.0]]), probe="unit")
    >>> float(p.intensity[0])
    4.0
    """
    source = as_source(model)
    grid = as_grid(grid)
    one_of(method, "method", METHODS)
    tol = real_number(tol, "tol", minimum=1e-15, maximum=1.0, exclusive_maximum=True)
    chunk_atoms = whole_number(chunk_atoms, "chunk_atoms", minimum=1)
    threads = thread_count(threads)
    check_progress(progress)
    probe = get_probe(probe, **probe_options)
    probe.check_labels(source.species_labels())
    if source.n_atoms == 0:
        raise InvalidInputError("the model has no atoms")
    # Output (complex amplitude + float intensity) plus the transposition copy.
    check_fits(grid.size * (16 + 16 + 8), f"a map of {grid.size:,} q-points (shape {grid.shape})",
               hint="use a smaller grid (fewer points) or split it into pieces")
    check_commensurate(source, grid)
    run: dict = {}
    if cluster is not None or checkpoint is not None:
        if method == "gridded":
            raise InvalidInputError("cluster and checkpointed runs use the exact sum; give method='exact' or 'auto'")
        if block_points is not None:
            block_points = whole_number(block_points, "block_points", minimum=1)

    amplitude, used = amplitudes(source, grid, probe, method=method, tol=tol, threads=threads,
                                 progress=progress, chunk_atoms=chunk_atoms, cluster=cluster,
                                 checkpoint=checkpoint, block_points=block_points, run=run)
    if not np.isfinite(amplitude).all():  # never hand back a NaN map silently
        raise InvalidInputError("the computed map has non-finite values; check the probe tables and inputs")

    cautions = list(probe.cautions())
    for text in cautions:
        warnings.warn(text, KinematicApproximationWarning, stacklevel=2)
    meta = {
        "method": used,
        "method_requested": method,
        "tolerance": float(tol) if used == "gridded" else 0.0,
        "probe": probe.metadata(),
        "cautions": cautions,
        "model": source.describe(),
        "grid": grid.describe(),
        "threads": threads if threads is not None else 0,
        "run": run or {"cluster": "this process"},
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "kinemap_version": _core.__version__,
        "kernel_level": _core.kernel_level(),
        "conventions": "A(q) = sum_j o_j f_j(s) T_j exp(+i q.r_j); q in 1/angstrom; s = |q|/(4 pi)",
    }
    return Pattern(grid=grid, amplitude=amplitude, metadata=meta, units=probe.units)


__all__ = ["scatter", "KinematicApproximationWarning", "OffLatticeWarning", "check_commensurate",
           "DEFAULT_CHUNK_ATOMS", "METHODS", "as_source", "as_grid"]
