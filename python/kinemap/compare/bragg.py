"""Neighbourhoods of the allowed Bragg reflections, to leave out of a comparison or to punch
out of a map before a 3D-ΔPDF.

Only the reflections the average structure allows are removed: a lattice centring (the
integer h, k, l that its condition lets through), a list of h, k, l given by the user (any
reflection list, including fractional satellite positions), or a list of peak positions in
Å⁻¹ (e.g. the indexed peaks of a quasicrystal). Removing every integer h, k, l instead would
delete the short-range-order peaks that sit at positions the centring forbids.

Reflection conditions of the centrings (International Tables for Crystallography Vol. A,
the general conditions of the centred lattices; from memory):

    P  none            A  k + l = 2n      B  h + l = 2n      C  h + k = 2n
    I  h + k + l = 2n  F  h, k, l all even or all odd
    R  −h + k + l = 3n (obverse setting, hexagonal axes)

Distances are Euclidean in h, k, l ("r.l.u.", as the grid's axes read) or in q ("1/angstrom").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._shared.validate import real_number
from ..errors import InvalidInputError
from ..model import as_cell
from ..qgrid import QGrid, RegularGrid

CENTRINGS = ("P", "A", "B", "C", "I", "F", "R")
_RLU = {"r.l.u.", "rlu", "r.l.u", "hkl", "reciprocal lattice units"}
_INV_A = {"1/angstrom", "1/a", "1/å", "å⁻¹", "a^-1", "angstrom^-1", "inv-angstrom", "1/ang"}


def allowed_by_centring(hkl: np.ndarray, centring: str) -> np.ndarray:
    """True for the integer (h, k, l) rows that the lattice centring allows (see the notes)."""
    h, k, l = (np.asarray(hkl)[..., i] for i in range(3))
    if centring == "P":
        return np.ones(h.shape, dtype=bool)
    if centring == "A":
        return (k + l) % 2 == 0
    if centring == "B":
        return (h + l) % 2 == 0
    if centring == "C":
        return (h + k) % 2 == 0
    if centring == "I":
        return (h + k + l) % 2 == 0
    if centring == "F":
        return ((h + k) % 2 == 0) & ((h + l) % 2 == 0)
    if centring == "R":
        return (-h + k + l) % 3 == 0
    raise InvalidInputError(f"`centring` must be one of {', '.join(CENTRINGS)}, got {centring!r}")


def _units(text) -> str:
    if not isinstance(text, str):
        raise InvalidInputError("`units` of the Bragg radius must be stated: 'r.l.u.' (h, k, l) or '1/angstrom'")
    t = text.strip().lower()
    if t in _RLU:
        return "r.l.u."
    if t in _INV_A:
        return "1/angstrom"
    raise InvalidInputError(f"`units` of the Bragg radius must be 'r.l.u.' or '1/angstrom', got {text!r}")


@dataclass(frozen=True)
class BraggExclusion:
    """Which reflections to leave out, and how far around them.

    Parameters
    ----------
    radius : float
        Radius of each neighbourhood (> 0), in `units`.
    units : str
        "r.l.u." (distance in h, k, l) or "1/angstrom" (distance in q); there is no default.
    centring : str, optional
        Lattice centring letter (P, A, B, C, I, F, R): every integer h, k, l its condition
        allows, over the whole grid.
    hkl : array_like (N, 3), optional
        Reflections given by h, k, l (may be fractional: satellites, or a list from a space
        group's conditions).
    q : array_like (N, 3), optional
        Peak positions in Å⁻¹ (e.g. indexed quasicrystal peaks).
    cell : array_like (3, 3), optional
        Lattice of h, k, l (rows a, b, c in Å) when the grid has none.

    Raises
    ------
    InvalidInputError
        Without units, with a radius ≤ 0, with no reflections given, with an unknown
        centring, or malformed lists.
    """

    radius: float
    units: str
    centring: str | None = None
    hkl: np.ndarray | None = None
    q: np.ndarray | None = None
    cell: np.ndarray | None = None

    def __post_init__(self):
        object.__setattr__(self, "radius", real_number(self.radius, "radius", minimum=0.0, exclusive_minimum=True))
        object.__setattr__(self, "units", _units(self.units))
        if self.centring is not None:
            c = str(self.centring).strip().upper()
            if c not in CENTRINGS:
                raise InvalidInputError(f"`centring` must be one of {', '.join(CENTRINGS)}, got {self.centring!r}")
            object.__setattr__(self, "centring", c)
        for name in ("hkl", "q"):
            v = getattr(self, name)
            if v is not None:
                try:
                    raw = np.asarray(v, dtype=np.float64)
                except (TypeError, ValueError):
                    raise InvalidInputError(f"`{name}` must be an (N, 3) array of numbers") from None
                if raw.size and raw.shape[-1:] != (3,):
                    raise InvalidInputError(f"`{name}` must be an (N, 3) array, got shape {raw.shape}")
                a = raw.reshape(-1, 3).copy()
                if not np.isfinite(a).all():
                    raise InvalidInputError(f"`{name}` has non-finite entries")
                a.flags.writeable = False
                object.__setattr__(self, name, a)
        if self.cell is not None:
            object.__setattr__(self, "cell", as_cell(self.cell))
        if self.centring is None and self.hkl is None and self.q is None:
            raise InvalidInputError("`exclude_bragg` needs the reflections to leave out: a `centring` letter, "
                                    "an `hkl` list or a `q` list of peak positions")

    @classmethod
    def coerce(cls, value) -> BraggExclusion | None:
        """A BraggExclusion from itself, a dict of its fields, or None."""
        if value is None or isinstance(value, BraggExclusion):
            return value
        if isinstance(value, dict):
            unknown = set(value) - {"radius", "units", "centring", "hkl", "q", "cell"}
            if unknown:
                raise InvalidInputError(f"`exclude_bragg` has unknown keys {sorted(unknown)}; use radius, units, "
                                        "centring, hkl, q, cell")
            if "radius" not in value or "units" not in value:
                raise InvalidInputError("`exclude_bragg` needs a `radius` and its `units` ('r.l.u.' or '1/angstrom')")
            return cls(**value)
        raise InvalidInputError("`exclude_bragg` must be a kinemap.compare.BraggExclusion or a dict with radius, "
                                f"units and centring/hkl/q, got {type(value).__name__}")

    def describe(self) -> dict:
        return {"radius": self.radius, "units": self.units, "centring": self.centring or "",
                "n_hkl": 0 if self.hkl is None else len(self.hkl), "n_q": 0 if self.q is None else len(self.q)}


def _cell_of(grid: QGrid, ex: BraggExclusion) -> np.ndarray | None:
    return ex.cell if ex.cell is not None else grid.cell


def _corners(grid: QGrid) -> np.ndarray:
    """q of the corners of a regular grid (or all points of a small point set)."""
    if not isinstance(grid, RegularGrid):
        return grid.q_vectors()
    shape = grid.shape
    idx = np.array(np.meshgrid(*[[0, n - 1] for n in shape], indexing="ij")).reshape(len(shape), -1).T
    return grid.origin + idx @ np.asarray(grid.steps).reshape(len(shape), 3) if len(shape) else grid.origin[None]


class ExclusionTree:
    """The reflections of a :class:`BraggExclusion` near a grid, ready for distance queries."""

    def __init__(self, grid: QGrid, ex: BraggExclusion):
        from scipy.spatial import cKDTree

        self.grid = grid
        self.ex = ex
        cell = _cell_of(grid, ex)
        needs_cell = ex.units == "r.l.u." or ex.centring is not None or ex.hkl is not None
        if ex.units == "r.l.u." and ex.q is not None and cell is None:
            needs_cell = True
        if needs_cell and cell is None:
            raise InvalidInputError("the Bragg exclusion is in h, k, l but the grid has no cell; give `cell` in the "
                                    "exclusion (or build the grid with QGrid.hkl)")
        self.cell = cell
        # Centring reflections within less than half a reciprocal-lattice unit: the only
        # candidate for a point is its nearest integer h, k, l (rounding), no tree needed.
        self.by_rounding = ex.centring is not None and ex.units == "r.l.u." and ex.radius < 0.5
        peaks = []  # in q (Å⁻¹)
        if ex.centring is not None and not self.by_rounding:
            peaks.append(self._centring_peaks(self._lattice(), ex.centring))
        if ex.hkl is not None:
            peaks.append(self._to_q(ex.hkl))
        if ex.q is not None:
            peaks.append(ex.q)
        q = np.concatenate(peaks) if peaks else np.zeros((0, 3))
        self.n_peaks = len(q)  # (reflections found by rounding are not counted)
        pts = self._metric(q)
        self.tree = cKDTree(pts) if len(pts) else None

    def _lattice(self) -> np.ndarray:
        """The cell (rows a, b, c in Å), present whenever h, k, l are used (checked in __init__)."""
        assert self.cell is not None
        return self.cell

    def _to_q(self, hkl: np.ndarray) -> np.ndarray:
        return 2.0 * np.pi * hkl @ np.linalg.inv(self._lattice()).T

    def _metric(self, q: np.ndarray) -> np.ndarray:
        """Coordinates in which the exclusion distance is Euclidean."""
        if self.ex.units == "r.l.u.":
            return np.einsum("ij,kj->ik", q, self._lattice() / (2.0 * np.pi))
        return q

    def _centring_peaks(self, cell: np.ndarray, centring: str) -> np.ndarray:
        hkl_c = _corners(self.grid) @ cell.T / (2.0 * np.pi)
        # the neighbourhood reaches `radius` beyond the grid: widen the box by it (in h, k, l)
        if self.ex.units == "r.l.u.":
            pad = np.full(3, self.ex.radius)
        else:
            pad = self.ex.radius * np.linalg.norm(cell, axis=1) / (2.0 * np.pi)
        lo = np.floor(hkl_c.min(axis=0) - pad).astype(np.int64)
        hi = np.ceil(hkl_c.max(axis=0) + pad).astype(np.int64)
        count = int(np.prod(hi - lo + 1))
        if count > 50_000_000:
            raise InvalidInputError(f"the grid spans {count:,} integer h, k, l: too many reflections to exclude by "
                                    "centring; give the `hkl` list of the reflections instead")
        axes = [np.arange(a, b + 1) for a, b in zip(lo, hi)]
        hkl = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
        hkl = hkl[allowed_by_centring(hkl, centring)]
        return self._to_q(hkl.astype(np.float64))

    def excluded(self, q: np.ndarray) -> np.ndarray:
        """True for q-points (M, 3) within the radius of a reflection."""
        out = np.zeros(len(q), dtype=bool)
        if len(q) == 0:
            return out
        r = self.ex.radius * (1 + 1e-12)
        centring = self.ex.centring
        if self.by_rounding and centring is not None:  # (rounding is chosen for centrings only)
            # einsum rather than BLAS: no thread pool for a (M, 3)·(3, 3) product
            hkl = np.einsum("ij,kj->ik", q, self._lattice() / (2.0 * np.pi))
            n = np.rint(hkl)
            hkl -= n
            near = np.einsum("ij,ij->i", hkl, hkl) <= r * r
            idx = np.flatnonzero(near)
            out[idx] = allowed_by_centring(n[idx].astype(np.int64), centring)
        if self.tree is not None:
            d, _ = self.tree.query(self._metric(q), k=1, distance_upper_bound=r)
            out |= np.isfinite(d)
        return out


def bragg_mask(grid: QGrid, exclusion) -> np.ndarray:
    """True at the points of `grid` within the radius of an allowed reflection.

    Parameters
    ----------
    grid : QGrid
    exclusion : BraggExclusion or dict
        The reflections and the radius (with its units).

    Returns
    -------
    ndarray of bool, shape ``grid.shape``

    Raises
    ------
    InvalidInputError
        A bad exclusion, or h, k, l without a cell.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> from kinemap.compare import BraggExclusion, bragg_mask
    >>> g = km.QGrid.hkl(np.eye(3) * 4, h=(0, 2, 5), k=0, l=0)
    >>> bragg_mask(g, BraggExclusion(0.1, "r.l.u.", centring="F")).tolist()   # h00: F allows h even
    [True, False, False, False, True]
    """
    ex = BraggExclusion.coerce(exclusion)
    if ex is None:
        raise InvalidInputError("`exclusion` is missing: give a BraggExclusion or a dict with radius, units and "
                                "centring/hkl/q")
    tree = ExclusionTree(grid, ex)
    out = np.empty(grid.size, dtype=bool)
    step = 1 << 20
    for i in range(0, grid.size, step):
        out[i:i + step] = tree.excluded(grid.q_vectors(i, i + step))
    return out.reshape(grid.shape)


__all__ = ["BraggExclusion", "bragg_mask", "allowed_by_centring", "ExclusionTree", "CENTRINGS"]
