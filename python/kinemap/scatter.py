"""Orchestration of the structure-factor sums: atom chunks × q-chunks into the Rust core.

The amplitude is

    A(q) = Σ_j o_j f_j(s) T_j(q) exp(+i q·r_j),   s = |q|/4π,

with occupancy o_j, scattering factor f_j from the probe and Debye–Waller factor
T_j = exp(−B_j s²) (or exp(−½ qᵀU_j q)). Atoms that share species and displacement form a
group; the core sums o_j exp(i q·r_j) per group and combines the groups with f·T once per
q-point. Atoms stream in chunks (``chunk_atoms``) and q-points in blocks sized so that every
core call takes well under a second: Ctrl-C and progress reports happen between calls.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings

import numpy as np

from . import _core
from ._shared.memory import check_fits
from ._shared.validate import thread_count as resolve_threads
from .errors import InvalidInputError
from .model import Model
from .pattern import Pattern
from .probes import Probe, get_probe
from .qgrid import QGrid

#: Atoms per chunk when streaming (about 100 MB of working arrays per chunk).
DEFAULT_CHUNK_ATOMS = 1 << 20
# Atom–q pairs per core call: a few tenths of a second at the measured rates.
_PAIRS_PER_CALL_POINT = 1 << 28
_PAIRS_PER_CALL_GRID = 1 << 30
# Upper bound on the per-call factor table (groups × q-points × 16 bytes).
_FACTOR_BYTES = 64 << 20

METHODS = ("auto", "exact", "gridded")


class KinematicApproximationWarning(UserWarning):
    """The kinematic (single-scattering) approximation may misrepresent this experiment."""


def _as_source(model_or_source):
    if isinstance(model_or_source, Model):
        return model_or_source
    needed = ("iter_chunks", "species_labels", "describe")
    if all(hasattr(model_or_source, a) for a in needed):
        return model_or_source
    raise InvalidInputError(
        "`model` must be a kinemap.Model or an atom source from kinemap.open_model(), got "
        f"{type(model_or_source).__name__}"
    )


def _as_grid(grid) -> QGrid:
    if isinstance(grid, QGrid):
        return grid
    raise InvalidInputError(
        f"`grid` must be a kinemap.QGrid (QGrid.points/line/plane/volume/hkl), got {type(grid).__name__}"
    )


def group_factors(probe: Probe, groups, q: np.ndarray) -> np.ndarray:
    """Factor table F[g, m] = f_g(s_m) · T_g(q_m) for the groups of a chunk, complex128 (G, M)."""
    s = np.linalg.norm(q, axis=1) / (4.0 * np.pi)
    labels = sorted(set(groups.labels))
    f = probe.scattering_factors(labels, s)
    row = {lab: i for i, lab in enumerate(labels)}
    out = np.empty((groups.n_groups, len(q)), dtype=np.complex128)
    s2 = s * s
    for g, lab in enumerate(groups.labels):
        if groups.u_aniso is not None:
            u = groups.u_aniso[g]
            t = np.exp(-0.5 * np.einsum("mi,ij,mj->m", q, u, q))
        elif groups.b_iso[g] != 0.0:
            t = np.exp(-groups.b_iso[g] * s2)
        else:
            t = None
        out[g] = f[row[lab]] if t is None else f[row[lab]] * t
    return out


class _Progress:
    """Reports atom–q pairs done: a tqdm bar (progress=True) or a callable(done, total)."""

    def __init__(self, progress, total: int):
        self.total = total
        self.done = 0
        self.bar = None
        self.callback = None
        if progress is True:
            from tqdm.auto import tqdm

            self.bar = tqdm(total=total, unit="pair", unit_scale=True, desc="kinemap")
        elif callable(progress):
            self.callback = progress
        elif progress not in (False, None):
            raise InvalidInputError(f"`progress` must be True, False or a callable(done, total), got {progress!r}")

    def add(self, n: int) -> None:
        self.done += n
        if self.bar is not None:
            self.bar.update(n)
        if self.callback is not None:
            self.callback(self.done, self.total)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def _regular_layout(grid: QGrid):
    """Pick the longest axis as the stepping axis; the others enumerate rows."""
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


def _exact_chunk(atoms, groups, probe, grid: QGrid, out_flat: np.ndarray, threads, prog: _Progress):
    """Add the amplitudes of one atom chunk to `out_flat` (C-order over the grid shape, or the
    transposed layout for regular grids, see `_exact`)."""
    n_atoms = max(atoms.n_atoms, 1)
    g = max(groups.n_groups, 1)
    if grid.is_regular and grid.shape:
        fast, other, other_shape, n = _regular_layout(grid)
        n_rows = int(np.prod(other_shape, dtype=np.int64)) if other_shape else 1
        per_call = max(1, min(_PAIRS_PER_CALL_GRID // (n_atoms * n) or 1, _FACTOR_BYTES // (16 * g * n) or 1))
        step = np.ascontiguousarray(grid.steps[fast])
        for r0 in range(0, n_rows, per_call):
            r1 = min(n_rows, r0 + per_call)
            rows = _row_origins(grid, other, other_shape, r0, r1)
            q = (rows[:, None, :] + np.arange(n, dtype=np.float64)[None, :, None] * step).reshape(-1, 3)
            factors = group_factors(probe, groups, q)
            amp = _core.grid_amplitudes(atoms, rows, step, n, factors, threads=threads)
            out_flat[r0 * n:r1 * n] += amp
            prog.add(atoms.n_atoms * (r1 - r0) * n)
    else:
        m = grid.size
        per_call = max(64, min(_PAIRS_PER_CALL_POINT // n_atoms, _FACTOR_BYTES // (16 * g)))
        for q0 in range(0, m, per_call):
            q1 = min(m, q0 + per_call)
            q = np.ascontiguousarray(grid.q_vectors(q0, q1))
            factors = group_factors(probe, groups, q)
            out_flat[q0:q1] += _core.point_amplitudes(atoms, q, factors, threads=threads)
            prog.add(atoms.n_atoms * (q1 - q0))


def _exact(source, grid: QGrid, probe: Probe, threads, progress, chunk_atoms: int) -> np.ndarray:
    m = grid.size
    out_flat = np.zeros(m, dtype=np.complex128)
    n_total = getattr(source, "n_atoms", None)
    prog = _Progress(progress, int(n_total) * m if n_total is not None else 0)
    try:
        for chunk in source.iter_chunks(chunk_atoms):
            if chunk.n_atoms == 0:
                continue
            groups = chunk.groups()
            atoms = _core.AtomSet(chunk.positions, chunk.occupancy, groups.index, groups.n_groups)
            _exact_chunk(atoms, groups, probe, grid, out_flat, threads, prog)
    finally:
        prog.close()
    if grid.is_regular and grid.shape:
        fast, other, other_shape, n = _regular_layout(grid)
        arr = out_flat.reshape(other_shape + (n,))
        return np.ascontiguousarray(np.moveaxis(arr, -1, fast))
    return out_flat.reshape(grid.shape)


def choose_method(n_atoms: int | None, grid: QGrid, tol: float) -> str:
    """The engine `method="auto"` picks: documented in :func:`scatter`."""
    from . import gridded as _g  # noqa: F401  (fails when the fast path is not built)

    return _g.choose(n_atoms, grid, tol)


def scatter(model, grid, probe="xray", method: str = "auto", tol: float = 1e-6,
            threads: int | None = None, progress=False, chunk_atoms: int = DEFAULT_CHUNK_ATOMS,
            **probe_options) -> Pattern:
    """Kinematic scattering amplitudes and intensities of a model on a set of q-points.

    Parameters
    ----------
    model : Model or atom source
        The atoms: a :class:`kinemap.Model` in memory or a source from
        :func:`kinemap.open_model` that streams atom chunks from a file.
    grid : QGrid
        Where to evaluate: ``QGrid.points/line/plane/volume/hkl``; q in Å⁻¹.
    probe : str or Probe
        "xray" (electrons), "neutron" (fm), "electron" (Å), "unit" (point scatterers, f = 1)
        or a probe object; extra keyword arguments go to the probe (e.g. ``voltage_kv=200``).
    method : {"auto", "exact", "gridded"}
        "exact" is the direct sum (exact to rounding); "gridded" spreads atoms onto a fine
        grid and uses FFTs, to relative tolerance `tol`; "auto" picks the cheaper of the two
        by the cost model documented in :func:`kinemap.gridded.choose` (and "exact" whenever
        `tol` is below 1e-12 or a gridded plan would not fit in memory).
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
    source = _as_source(model)
    grid = _as_grid(grid)
    if method not in METHODS:
        raise InvalidInputError(f"`method` must be one of {METHODS}, got {method!r}")
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and 1e-15 <= tol < 1):
        raise InvalidInputError(f"`tol` must be a relative tolerance in [1e-15, 1), got {tol!r}")
    if isinstance(chunk_atoms, bool) or not isinstance(chunk_atoms, int) or chunk_atoms < 1:
        raise InvalidInputError(f"`chunk_atoms` must be a whole number >= 1, got {chunk_atoms!r}")
    threads = resolve_threads(threads)
    probe = get_probe(probe, **probe_options)
    labels = source.species_labels()
    probe.check_labels(labels)
    n_atoms = getattr(source, "n_atoms", None)
    if n_atoms == 0:
        raise InvalidInputError("the model has no atoms")
    # Output (complex amplitude + float intensity) plus the transposition copy.
    check_fits(grid.size * (16 + 16 + 8), f"a map of {grid.size} q-points (shape {grid.shape})")

    used = method
    if method == "auto":
        try:
            used = choose_method(n_atoms, grid, tol)
        except ImportError:
            used = "exact"
    if used == "gridded":
        from . import gridded

        amplitude = gridded.gridded_amplitudes(source, grid, probe, tol=tol, threads=threads,
                                               progress=progress, chunk_atoms=chunk_atoms)
    else:
        amplitude = _exact(source, grid, probe, threads, progress, chunk_atoms)
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
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "kinemap_version": _core.__version__,
        "conventions": "A(q) = sum_j o_j f_j(s) T_j exp(+i q.r_j); q in 1/angstrom; s = |q|/(4 pi)",
    }
    return Pattern(grid=grid, amplitude=amplitude, metadata=meta, units=probe.units)


__all__ = ["scatter", "group_factors", "choose_method", "KinematicApproximationWarning",
           "DEFAULT_CHUNK_ATOMS", "METHODS"]
