"""Periodic approximants of cut-and-project schemes.

An approximant replaces the irrational ξ of the physical space (τ, √2, …) by a rational
p/q. The tiles keep their shapes (positions are still P n). The internal map is sheared (a
linear phason strain) so that it vanishes on the lattice vectors of the rational physical
space, which become the periods; the window is the canonical projection of the hypercube
under the new map. The functions here are reached through the methods of
:class:`~kinemap.quasi.scheme.CutProjectScheme` (``approximant``, ``cell``, ``cell3``,
``unit_cell``, ``approximant_block``).
"""

from __future__ import annotations

from collections.abc import Iterator
from fractions import Fraction
from itertools import product
from typing import TYPE_CHECKING

import numpy as np

from .._shared.validate import real_number, whole_number
from ..errors import InvalidInputError
from ._precise import saturated_lattice
from .points import PointSet
from .windows import canonical_window

if TYPE_CHECKING:  # pragma: no cover
    from .scheme import CutProjectScheme


def _as_fraction(r) -> Fraction:
    if isinstance(r, tuple) and len(r) == 2:
        return Fraction(whole_number(r[0], "ratio numerator"), whole_number(r[1], "ratio denominator"))
    if isinstance(r, (bool, np.bool_, float, np.floating)):
        raise TypeError(f"{r!r} is not an exact rational")
    return Fraction(r)


def make_approximant(scheme: CutProjectScheme, ratio, name: str | None = None) -> CutProjectScheme:
    """The approximant of `scheme` with ξ replaced by `ratio` (see
    :meth:`CutProjectScheme.approximant`)."""
    if scheme.rational_form is None:
        raise InvalidInputError(f"scheme {scheme.name!r} has no rational form: it cannot make approximants")
    u, v, _row_scale, _xi = scheme.rational_form
    try:
        if isinstance(ratio, list) or (isinstance(ratio, tuple) and len(ratio) != 2):
            rs = [_as_fraction(r) for r in ratio]
        else:
            rs = [_as_fraction(ratio)] * scheme.dim
    except (TypeError, ValueError, ZeroDivisionError, InvalidInputError) as exc:
        raise InvalidInputError(f"`ratio` must be a rational number like (3, 2) or '3/2': {exc}") from None
    if len(rs) != scheme.dim:
        raise InvalidInputError(f"`ratio` needs one value or {scheme.dim} values, got {len(rs)}")
    rows = [[Fraction(u[i][j]) + rs[i] * Fraction(v[i][j]) for j in range(scheme.lattice_dim)]
            for i in range(scheme.dim)]
    basis = saturated_lattice(rows)
    if len(basis) != scheme.dim:
        raise InvalidInputError(f"the rational physical space has {len(basis)} lattice periods, expected {scheme.dim}")
    periods = reduce_periods(np.array(basis, dtype=np.int64), scheme.parallel)
    px = scheme.parallel @ periods.T  # (d, d): columns are period vectors in Å
    py = scheme.internal @ periods.T
    shear = py @ np.linalg.inv(px)
    dense = np.array(scheme.window.dense, dtype=bool)
    shear[~dense] = 0.0
    internal = scheme.internal - shear @ scheme.parallel
    if np.abs(internal @ periods.T).max() > 1e-9:
        raise InvalidInputError("internal map does not vanish on the periods (not an approximant)")
    if scheme.hypercube_offset is None or scheme.window_kind is None:
        raise InvalidInputError(f"scheme {scheme.name!r} has no canonical window description")
    window = canonical_window(internal, scheme.hypercube_offset, scheme.window_kind).translated(scheme.shift)
    label = name or f"{scheme.name} approximant {'/'.join(str(r) for r in rs[:1])}"
    return scheme._replace(name=label, internal=internal, window=window, periods=periods, rational_form=None)


def period_cell(scheme: CutProjectScheme) -> np.ndarray:
    """Period vectors (rows, Å) of an approximant, as a (d, d) array."""
    if scheme.periods is None:
        raise InvalidInputError(f"scheme {scheme.name!r} is not periodic (no periods): make an approximant first")
    return (scheme.parallel @ scheme.periods.T).T


def cell3(scheme: CutProjectScheme, pad: float = 1.0) -> np.ndarray:
    """The 3x3 cell (rows a, b, c in Å) of an approximant; the directions a chain or a planar
    set does not fill get a vector of length `pad` (Å) along the unused axes."""
    pad = real_number(pad, "pad", minimum=0.0, exclusive_minimum=True)
    c = np.eye(3) * pad
    c[: scheme.dim, : scheme.dim] = period_cell(scheme)
    return c


def unit_cell(scheme: CutProjectScheme, with_indices: bool = True) -> PointSet:
    """The points of one period cell (fractional coordinates in [0, 1)^d), found by
    enumerating a covering ball and keeping the points inside the cell."""
    cell = period_cell(scheme)
    corners = np.array(list(product([0.0, 1.0], repeat=scheme.dim))) @ cell
    center = 0.5 * cell.sum(axis=0)
    radius = float(np.linalg.norm(corners - center, axis=1).max()) * (1 + 1e-9) + 1e-6
    ps = scheme.points(radius, center, with_indices=True)
    frac = ps.positions[:, : scheme.dim] @ np.linalg.inv(cell)
    eps = 1e-9
    inside = ((frac >= -eps) & (frac < 1 - eps)).all(axis=1)
    return ps.subset(inside, with_indices=with_indices)


def check_repeats(scheme: CutProjectScheme, repeats, name: str = "repeats") -> tuple[int, ...]:
    """`repeats` as d whole numbers ≥ 1 (one per period)."""
    if isinstance(repeats, (str, bytes)) or np.ndim(repeats) > 1:
        reps: list = [repeats]
    else:
        reps = np.atleast_1d(np.asarray(repeats, dtype=object)).tolist()
    if len(reps) != scheme.dim:
        raise InvalidInputError(f"`{name}` must be {scheme.dim} whole numbers >= 1, got {repeats!r}")
    return tuple(whole_number(r, name, minimum=1) for r in reps)


def iter_cells(scheme: CutProjectScheme, repeats, cell_points: PointSet | None = None) -> Iterator[PointSet]:
    """The translates of the unit cell by n_1 t_1 + … + n_d t_d, 0 ≤ n_i < repeats[i], one
    :class:`PointSet` (with indices) per cell."""
    reps = check_repeats(scheme, repeats)
    uc = unit_cell(scheme) if cell_points is None else cell_points
    assert uc.indices is not None and scheme.periods is not None
    for shift in product(*[range(r) for r in reps]):
        n = uc.indices + np.asarray(shift, dtype=np.int64) @ scheme.periods
        x, y = scheme.lift(n)
        yield PointSet(x, y, n, scheme)


def approximant_block(scheme: CutProjectScheme, repeats) -> PointSet:
    """`repeats` (d whole numbers) copies of the unit cell, with indices."""
    return PointSet.concatenate(iter_cells(scheme, repeats), scheme=scheme)


def reduce_periods(basis: np.ndarray, parallel: np.ndarray) -> np.ndarray:
    """A short, nearly orthogonal basis of the period lattice (by physical length):
    search small combinations of the given basis and keep the shortest independent ones
    that still generate the same lattice."""
    b = np.asarray(basis, dtype=np.int64)
    d = len(b)
    det0 = abs(round(np.linalg.det(np.asarray(b @ b.T, dtype=float)) ** 0.5))
    # LLL-lite: repeated pairwise size reduction in the physical metric
    for _ in range(50):
        changed = False
        lengths = np.linalg.norm(b @ parallel.T, axis=1)
        b = b[np.argsort(lengths)]
        for i in range(d):
            for j in range(d):
                if i == j:
                    continue
                vi = parallel @ b[i]
                vj = parallel @ b[j]
                mu = round(float(vi @ vj) / float(vj @ vj))
                if mu != 0:
                    cand = b[i] - mu * b[j]
                    if np.linalg.norm(parallel @ cand) < np.linalg.norm(vi) - 1e-12:
                        b[i] = cand
                        changed = True
        if not changed:
            break
    coeffs = np.array(list(product(range(-2, 3), repeat=d)))
    cands = coeffs @ b
    lens = np.linalg.norm(cands @ parallel.T, axis=1)
    chosen: list = []
    for i in np.argsort(lens):
        if lens[i] < 1e-12:
            continue
        trial = chosen + [cands[i]]
        if np.linalg.matrix_rank(np.array(trial, dtype=float)) == len(trial):
            chosen = trial
            if len(chosen) == d:
                gram = np.array(chosen) @ np.array(chosen).T
                if abs(round(np.linalg.det(np.asarray(gram, dtype=float)) ** 0.5)) == det0:
                    break
                chosen = chosen[:-1]
    if len(chosen) != d:
        return _orient_periods(b, parallel)
    return _orient_periods(np.array(chosen, dtype=np.int64), parallel)


def _orient_periods(periods: np.ndarray, parallel: np.ndarray) -> np.ndarray:
    """Order and sign period vectors: each along +(its dominant Cartesian axis) when the
    dominant axes differ, else the largest component positive; right-handed for d ≥ 2."""
    out = periods.copy()
    d = len(out)
    vec = out @ parallel.T
    axis = []
    for i in range(d):
        a = np.abs(vec[i])
        j = int(np.flatnonzero(a >= a.max() * (1 - 1e-9))[0])
        # a clear winner only (ties like (1, 1) directions have none)
        second = np.sort(a)[-2] if len(a) > 1 else 0.0
        axis.append(j if a[j] > second * (1 + 1e-6) else -1)
        if vec[i, j] < 0:
            out[i] = -out[i]
    if -1 not in axis and len(set(axis)) == d:
        out = out[np.argsort(axis)]
    if d >= 2 and np.linalg.det(out @ parallel.T) < 0:
        out[-1] = -out[-1]
    return out


__all__ = ["make_approximant", "period_cell", "cell3", "unit_cell", "iter_cells", "approximant_block",
           "check_repeats", "reduce_periods"]
