"""The gridded fast path: structure-factor sums by spreading + FFT, to a stated tolerance.

An exact sum over N atoms and M q-points costs N·M atom–q pairs: 10⁷ atoms into a 256³
volume are 1.7·10¹⁴ pairs, hours even at the hardware limit. The non-uniform FFT family of
methods (Dutt & Rokhlin 1993; Greengard & Lee 2004; Barnett, Magland & af Klinteberg 2019)
spreads the weighted atoms onto an oversampled fine grid with a compact kernel, transforms it
with FFTs and divides out the kernel's transform, for about N·wᵈ + M log M operations. The
kernel width w (4 … 16 grid points) follows the requested relative tolerance.

How the q-sets map onto transforms:

* A regular grid (line, plane, volume in any orientation and origin, hkl grid of any cell)
  holds q = origin + Σ_a i_a·step_a. With the projected coordinates x_a = step_a·r and the
  grid centre q_c, exp(i q·r) = exp(i q_c·r)·Π_a exp(i k_a x_a), k_a = i_a − ⌊n_a/2⌋: a d-
  dimensional type-1 transform whose weights carry the phase of the centre.
* Arbitrary q-points (``QGrid.points``) use the type-3 transform: the atoms are spread at
  rescaled positions, the grid is transformed and interpolated at the rescaled q-points. Its
  cost grows with the product of the model's extent and the q-range (per axis), so for wide
  q-ranges on large models the exact sum can be cheaper; ``method="auto"`` weighs that.

Streaming: every atom chunk is spread into the same fine grids, one per scattering group
(species × Debye–Waller, keyed by (label, B) or (label, U)), so memory does not grow with the
atom count. At the end each group's sums S_g(q) = Σ_{j∈g} o_j exp(i q·r_j) are combined with
its factor f_g(s)·T_g(q):  A(q) = Σ_g f_g(s) T_g(q) S_g(q). The core does this while it
reads the sums out of the transformed grid, with f_g(s)·exp(−B s²) from a table in s checked
against the probe (``factors.group_table``), so no per-point q-vectors or factors are formed
in Python.

Accuracy: the relative l2 error of the amplitude map, ‖A − A_exact‖₂/‖A_exact‖₂, is at or
below `tol` for 1e-3 ≥ tol ≥ 1e-12 (tested against the exact sum; kernel widths are chosen
for tol/4 because the classical width rules give errors up to about 4·tol). Results do not
depend on the thread count (the spreading order is fixed) and depend on the chunk size only
through rounding.
"""

from __future__ import annotations

import functools
import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from .. import _core
from .._shared.memory import available_memory, check_fits, human_bytes
from .._shared.progress import Progress
from .._shared.validate import cores
from ..errors import InvalidInputError
from ..model import Groups
from ..qgrid import QGrid, RegularGrid
from .factors import FactorTables, group_table

#: Oversampling factors σ the planner considers for regular grids (fine grid = σ × output
#: grid per axis), largest first: larger σ needs a narrower kernel (cheaper spreading) but a
#: larger FFT. The core owns the list and which tolerances each σ reaches
#: (``_core.gridded_usable``).
UPSAMPLE_CHOICES = tuple(_core.gridded_upsample_choices(False))
#: The same for arbitrary q-points (two approximation stages).
UPSAMPLE_CHOICES_POINTS = tuple(_core.gridded_upsample_choices(True))
#: Tightest tolerance the gridded path accepts (rounding in the FFTs and deconvolutions puts a
#: floor near 1e-13 under the achieved error) and the widest kernel the core supports, both
#: from the core.
MIN_TOL, MAX_WIDTH = _core.gridded_limits()

# Cost model (seconds per unit on one core of the reference machine, Zen 5 with AVX-512,
# fitted to timings of benchmarks/bench_gridded.py: 10⁵–10⁶ atoms into 64³–128³ at 1e-6 and
# 1e-12, σ = 1.25 … 2.25, within ~20 %). Spreading is cheap per kernel point but the fine grid
# costs per point (first touch, cache misses, FFT), which favours small σ on large grids.
_T_EXACT_GRID = 1.0 / 4.0e9    # per atom–q pair, phase stepping on regular grids
_T_EXACT_POINT = 1.0 / 6.0e8   # per atom–q pair, one sincos per pair
_T_SPREAD = 0.27e-9            # per kernel point written or read (atoms × wᵈ)
_T_ATOM = 50e-9                # per atom: projection, phase, sort
_T_GRID = 18.5e-9              # per fine-grid point: allocation, first touch, FFT
_T_POINT = 15e-9               # per output point: deconvolution, factor table, combination
_T_TARGET = 100e-9             # per arbitrary q-point: kernel transform, sorting (type 3)
#: Estimated exact-sum time below which ``method="auto"`` keeps the exact sum (seconds).
EXACT_IS_FINE = 0.2
_BIG_GRID = 64e6               # fine-grid points beyond which spreading slows down (see _big_grid)
#: Atomic number density (Å⁻³) assumed to estimate a model's extent when only its atom count
#: is known (arbitrary q-points; typical of condensed matter).
ASSUMED_DENSITY = 0.1

_BLOCK_Q = 1 << 18  # q-points per block when combining group sums with form factors


def _width(tol: float, sigma: float, points: bool = False) -> int | None:
    """Kernel width for `tol` at `sigma`, or None when the core says the gridded path does not
    reach `tol` there (tolerance floor, kernel width, σ < 2 limits)."""
    if not _core.gridded_usable(float(tol), float(sigma), points=points):
        return None
    return int(_core.gridded_kernel_width(float(tol), float(sigma), points=points))


def _regular_axes(grid: QGrid) -> list[int]:
    return [n for n in grid.shape if n > 1]


def _big_grid(v: float) -> float:
    """Slow-down of spreading on fine grids far beyond the caches and the TLB's reach
    (measured: 10⁷ atoms onto 576³ took 1.4× as long as onto 540³ with fewer kernel points)."""
    return 1.0 + max(0.0, v - _BIG_GRID) / _BIG_GRID


def regular_estimate(n_atoms: int, grid: QGrid, tol: float, sigma: float):
    """Estimated (seconds, bytes per group grid) of the gridded path on a regular grid, or
    None when the kernel for `tol` at `sigma` is too wide."""
    w = _width(tol, sigma)
    if w is None:
        return None
    axes = _regular_axes(grid)
    dims = [_core.gridded_fine_size(int(n), float(sigma), w) for n in axes]
    d = len(axes)
    v = float(np.prod(dims)) if dims else 1.0
    t = n_atoms * (w**d * _T_SPREAD * _big_grid(v) + _T_ATOM) + v * _T_GRID + grid.size * _T_POINT
    return t, 16 * int(np.prod(dims, dtype=np.int64))


def point_estimate(n_atoms: int, n_points: int, extent, qrange, tol: float, sigma: float):
    """Estimated (seconds, bytes per group grid, bytes of the interpolation grid) of the type-3
    path for atoms spanning `extent` (Å, per axis) and q-points spanning `qrange` (Å⁻¹), or
    None when the kernel is too wide."""
    w = _width(tol, sigma, points=True)  # spreading and interpolation share the budget
    if w is None:
        return None
    try:
        d1, d2 = _core.gridded_point_dims(float(sigma), w, [float(x) for x in extent],
                                          [float(s) for s in qrange])
    except InvalidInputError:  # a fine grid beyond the core's limits: not an option
        return None
    d = len(d1)
    v1 = float(np.prod(d1)) if d1 else 1.0
    v2 = float(np.prod(d2)) if d2 else 1.0
    t = (n_atoms * (w**d * _T_SPREAD * _big_grid(v1) + _T_ATOM)
         + n_points * (w**d * _T_SPREAD * _big_grid(v2) + _T_TARGET) + (v1 + v2) * _T_GRID)
    return t, 16 * v1, 16 * v2


def choose(n_atoms: int | None, grid: QGrid, tol: float) -> str:
    """The engine ``method="auto"`` uses: "exact" or "gridded", whichever is estimated cheaper.

    Parameters
    ----------
    n_atoms : int or None
        Atoms in the model (None when a source cannot tell; then 10⁵ is assumed).
    grid : QGrid
        The q-points.
    tol : float
        Requested relative tolerance of the gridded path.

    Returns
    -------
    str
        "exact" or "gridded".

    Notes
    -----
    The exact sum costs N·M pairs at about 4·10⁹ pairs/s per core on regular grids (phase
    stepping) and 6·10⁸ on arbitrary points (one sincos per pair). The gridded path costs about
    N·(0.27 ns·wᵈ + 50 ns) for spreading, 18.5 ns per point of the fine grid of V points
    (first touch, FFT; V ≈ σᵈ·M for regular grids, σ from ``UPSAMPLE_CHOICES``, the cheapest
    estimate wins) and 15 ns per q-point; w grows with log(1/tol). Arbitrary q-points add
    0.27 ns·wᵈ + 100 ns per point for interpolation. For
    arbitrary q-points the fine grid follows the product of the model's extent and the q-range
    per axis; the extent is estimated from the atom count assuming a compact model of density
    0.1 atoms/Å³. A gridded plan that would not fit in memory, a tolerance below
    ``MIN_TOL`` (1e-12), or an exact sum estimated to take less than ``EXACT_IS_FINE`` (0.2 s:
    nothing worth trading exactness for), selects "exact".
    """
    n = 100_000 if n_atoms is None else int(n_atoms)
    m = grid.size
    if m <= 1 or n == 0:
        return "exact"
    avail = available_memory()
    exact = n * m * (_T_EXACT_GRID if isinstance(grid, RegularGrid) else _T_EXACT_POINT)
    if exact < EXACT_IS_FINE:
        return "exact"
    if isinstance(grid, RegularGrid):
        ests = [regular_estimate(n, grid, tol, s) for s in UPSAMPLE_CHOICES]
        ests = [e for e in ests if e is not None and e[1] < 0.5 * avail]
    else:
        side = (n / ASSUMED_DENSITY) ** (1.0 / 3.0)
        q = grid.q_vectors()
        qrange = q.max(axis=0) - q.min(axis=0)
        ests = [point_estimate(n, m, (side,) * 3, qrange, tol, s) for s in UPSAMPLE_CHOICES_POINTS]
        ests = [e for e in ests if e is not None and e[1] + e[2] < 0.5 * avail]
    if not ests:
        return "exact"
    return "gridded" if min(e[0] for e in ests) < exact else "exact"


def _group_key(groups: Groups, g: int):
    if groups.u_aniso is not None:
        return (groups.labels[g], "U", tuple(np.round(groups.u_aniso[g].ravel(), 15).tolist()))
    return (groups.labels[g], "B", float(groups.b_iso[g]))


def _one_group(key) -> Groups:
    label, kind, value = key
    if kind == "U":
        return Groups(index=np.zeros(0, np.uint32), labels=[label], b_iso=np.zeros(1),
                      u_aniso=np.asarray(value, dtype=np.float64).reshape(1, 3, 3))
    return Groups(index=np.zeros(0, np.uint32), labels=[label], b_iso=np.array([value]), u_aniso=None)


def _bounds(source, chunk_atoms: int):
    """Bounding box of all atom positions (one extra pass over a streamed source)."""
    pos = getattr(source, "positions", None)
    if isinstance(pos, np.ndarray) and pos.ndim == 2 and len(pos):
        return pos.min(axis=0), pos.max(axis=0)
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for chunk in source.iter_chunks(chunk_atoms):
        if chunk.n_atoms:
            lo = np.minimum(lo, chunk.positions.min(axis=0))
            hi = np.maximum(hi, chunk.positions.max(axis=0))
    if not np.isfinite(lo).all():
        raise InvalidInputError("the model has no atoms")
    return lo, hi


def _make_plan(source, grid: QGrid, tol: float,
               chunk_atoms: int) -> tuple[_core.RegularPlan | _core.PointPlan, int, int]:
    """Build the cheapest plan (over the oversampling choices) that fits in memory."""
    n = source.n_atoms
    n = 100_000 if n is None else int(n)
    avail = available_memory()
    if isinstance(grid, RegularGrid):
        ests = [(regular_estimate(n, grid, tol, s), s) for s in UPSAMPLE_CHOICES]
        ests = [(e, s) for e, s in ests if e is not None]
        if not ests:
            raise InvalidInputError(
                f"`tol` = {tol:g} is below what the gridded path reaches ({MIN_TOL:g}); use method='exact'")
        fitting = [(e, s) for e, s in ests if e[1] + 48 * grid.size < 0.8 * avail] or ests
        (_, _), sigma = min(fitting, key=lambda es: es[0][0])
        steps = np.ascontiguousarray(np.asarray(grid.steps, dtype=np.float64).reshape(-1, 3))
        plan = _core.RegularPlan(np.ascontiguousarray(grid.origin, dtype=np.float64), steps,
                                 [int(s) for s in grid.shape], float(tol), float(sigma))
        return plan, 16 * plan.fine_len, 0
    q = np.ascontiguousarray(grid.q_vectors(), dtype=np.float64)
    lo, hi = _bounds(source, chunk_atoms)
    extent, qrange = hi - lo, q.max(axis=0) - q.min(axis=0)
    ests = [(point_estimate(n, len(q), extent, qrange, tol, s), s) for s in UPSAMPLE_CHOICES_POINTS]
    ests = [(e, s) for e, s in ests if e is not None]
    if not ests:
        raise InvalidInputError(
            f"`tol` = {tol:g} is below what the gridded path reaches ({MIN_TOL:g}); use method='exact'")
    fitting = [(e, s) for e, s in ests if e[1] + e[2] + 72 * len(q) < 0.8 * avail] or ests
    est, sigma = min(fitting, key=lambda es: es[0][0])
    check_fits(est[2] + 72 * len(q),
               f"the gridded path's interpolation grid for {len(q)} q-points spanning "
               f"{np.round(qrange, 3).tolist()} 1/Å over atoms spanning {np.round(extent, 1).tolist()} Å "
               "(use method='exact' or a narrower q-range)")
    point_plan = _core.PointPlan(q, np.ascontiguousarray(lo, dtype=np.float64),
                                 np.ascontiguousarray(hi, dtype=np.float64), float(tol), float(sigma))
    fine1, fine2 = point_plan.fine_lens
    return point_plan, 16 * fine1, 16 * fine2


def _combine_per_point(plan, groups, grid: QGrid, probe, out: np.ndarray, threads) -> None:
    """Add the sums of the `groups` (``(Groups, slot)`` pairs) with their factors evaluated
    at every q-point by the probe: for factors no table follows (see ``group_table``)."""
    m = grid.size
    tables = FactorTables(probe)
    # s = |q|/4π once for the whole grid (8 bytes a point), shared by every group's factors.
    s_all = grid.q_norms() / (4.0 * np.pi)
    blocks = [(q0, min(m, q0 + _BLOCK_Q)) for q0 in range(0, m, _BLOCK_Q)]
    workers = min(len(blocks), threads or cores())
    with ThreadPoolExecutor(max_workers=max(workers, 1)) as pool:
        for one, slot in groups:
            sums = plan.finish(slot, threads=threads)

            def combine(block, one=one, sums=sums):
                # NumPy releases the GIL in these array operations, so blocks run in parallel;
                # each block writes its own part of `out`, so the result does not depend on
                # the number of threads.
                q0, q1 = block
                factor = tables.table(one, ("flat", q0, q1), s_all[q0:q1],
                                      functools.partial(grid.q_vectors, q0, q1))[0]
                part = sums[q0:q1]
                part *= factor
                out[q0:q1] += part

            list(pool.map(combine, blocks))
            del sums


def gridded_amplitudes(source, grid: QGrid, probe, *, tol: float, threads=None, progress=False,
                       chunk_atoms: int = 1 << 20) -> np.ndarray:
    """Amplitudes on `grid` by the gridded path, to relative tolerance `tol`.

    Parameters
    ----------
    source : Model or atom source
        Anything with ``n_atoms``, ``species_labels()`` and ``iter_chunks(chunk_atoms)``
        yielding :class:`kinemap.Model` chunks (positions in Å).
    grid : QGrid
        Regular grid (type-1 transform) or arbitrary points (type-3 transform); q in Å⁻¹.
    probe : Probe
        Supplies the scattering factors f(s), s = |q|/4π.
    tol : float
        Relative l2 tolerance of the amplitude map, 1e-3 … 1e-12 (looser values work too;
        tighter ones are refused).
    threads : int, optional
        Worker threads (None: all cores). Results do not depend on it.
    progress : bool or callable
        True for a progress bar, or ``callable(pairs_done, pairs_total)`` called after each
        chunk (pairs = atoms × q-points, as for the exact path).
    chunk_atoms : int
        Atoms per streamed chunk; changes results only through rounding.

    Returns
    -------
    ndarray of complex128, shape ``grid.shape``
        A(q) = Σ_j o_j f_j(s) T_j(q) exp(+i q·r_j).

    Raises
    ------
    InvalidInputError
        A tolerance the kernel cannot reach, or fine grids that would not fit in memory
        (refused before allocating, with the estimate).
    """
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and 0 < tol < 1):
        raise InvalidInputError(f"`tol` must be a relative tolerance in (0, 1), got {tol!r}")
    plan, grid_bytes, interp_bytes = _make_plan(source, grid, float(tol), chunk_atoms)
    m = grid.size
    n_total = source.n_atoms
    prog = Progress(progress, int(n_total) * m if n_total is not None else 0)
    slots: dict = {}
    try:
        for chunk in source.iter_chunks(chunk_atoms):
            if chunk.n_atoms == 0:
                continue
            groups = chunk.groups()
            slot_of_group = np.empty(groups.n_groups, dtype=np.uint32)
            for g in range(groups.n_groups):
                key = _group_key(groups, g)
                if key not in slots:
                    check_fits(grid_bytes + interp_bytes + 48 * m,
                               f"one more fine grid for scattering group {key[0]!r} of the gridded path "
                               f"({human_bytes(grid_bytes)} each, {len(slots)} already held)")
                    slots[key] = len(slots)
                slot_of_group[g] = slots[key]
            atom_slots = np.ascontiguousarray(slot_of_group[groups.index])
            plan.add(np.ascontiguousarray(chunk.positions, dtype=np.float64),
                     np.ascontiguousarray(chunk.occupancy, dtype=np.float64), atom_slots, threads=threads)
            prog.add(chunk.n_atoms * m)
    finally:
        prog.close()
    out = np.zeros(m, dtype=np.complex128)
    s_lo, s_hi = plan.s_range(threads=threads)
    per_point = []
    for key, slot in slots.items():
        one = _one_group(key)
        table = group_table(probe, one, 0, s_lo, s_hi, float(tol))
        if table is None:
            per_point.append((one, slot))
            continue
        values, s0, h = table
        u = None if one.u_aniso is None else np.ascontiguousarray(one.u_aniso[0], dtype=np.float64)
        plan.finish_into(slot, out, values, s0, h, u=u, threads=threads)
    if per_point:
        _combine_per_point(plan, per_point, grid, probe, out, threads)
    return out.reshape(grid.shape)


__all__ = ["choose", "gridded_amplitudes", "regular_estimate", "point_estimate", "UPSAMPLE_CHOICES",
           "UPSAMPLE_CHOICES_POINTS", "MAX_WIDTH", "MIN_TOL", "ASSUMED_DENSITY"]
