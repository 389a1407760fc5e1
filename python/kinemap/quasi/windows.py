"""Acceptance windows of cut-and-project sets and their Fourier transforms.

A window W lives in the internal (perpendicular) space. A lattice point whose internal
coordinate y lies in W is a point of the model set. The per-point amplitude of a model set at
a Fourier-module vector with internal component k⊥ (cycles/Å) tends, for a growing patch, to

    T_W(k⊥) = (1 / vol W) ∫_W exp(−2πi k⊥·y) dy

(Baake & Grimm, *Aperiodic Order* vol. 1, CUP 2013, ch. 9). The sign follows kinemap's
``exp(+i q·r)`` convention: for a module vector, k·x + k⊥·x⊥ is an integer, so
exp(2πi k·x) = exp(−2πi k⊥·x⊥).

Transforms are computed by splitting the window into simplices (:mod:`._simplex`). The
window classes: :class:`IntervalWindow` (chains), :class:`PolygonWindow` (planar sets),
:class:`PolyhedronWindow` (icosahedral, in :mod:`.polyhedron`), :class:`SlicedWindow`
(polygons on integer levels: Penrose), and the search regions :class:`BallWindow` and
:class:`BoxWindow`. :func:`canonical_window` builds the window of a canonical tiling as the
internal projection of a hypercube. Membership is regularised (see :mod:`._window_base`).
"""

from __future__ import annotations

import math
from itertools import combinations

import numpy as np

from ..errors import InvalidInputError
from ._simplex import exp_divided_differences, simplex_transforms, sinc
from ._window_base import BOUNDARY_TOL, Window, convex_hull_2d, halfspace_contains, zonogon
from .polyhedron import PolyhedronWindow


class IntervalWindow(Window):
    """A segment [lo, hi) of the internal line (1-D cut-and-project sets).

    Parameters
    ----------
    lo, hi : float
        End points, lo < hi. `lo` belongs to the window, `hi` does not.
    """

    dim = 1
    dense = (True,)

    def __init__(self, lo: float, hi: float):
        lo, hi = float(lo), float(hi)
        if not (np.isfinite(lo) and np.isfinite(hi) and hi > lo):
            raise InvalidInputError(f"window needs finite end points with lo < hi, got [{lo}, {hi})")
        self.lo, self.hi = lo, hi

    def contains(self, y) -> np.ndarray:
        y = self._check_points(y)[:, 0]
        tol = BOUNDARY_TOL * max(abs(self.lo), abs(self.hi), self.hi - self.lo)
        return (y >= self.lo - tol) & (y < self.hi - tol)

    @property
    def measure(self) -> float:
        return self.hi - self.lo

    @property
    def boundary_measure(self) -> float:
        return 2.0

    def halfspaces(self) -> tuple[np.ndarray, np.ndarray]:
        """Outward normals (F, dim) and offsets (F,): the window is {y : n·y ≤ b}."""
        return np.array([[1.0], [-1.0]]), np.array([self.hi, -self.lo])

    def bounds(self):
        return np.array([self.lo]), np.array([self.hi])

    @property
    def vertices(self) -> np.ndarray:
        return np.array([[self.lo], [self.hi]])

    def integral(self, k_perp) -> np.ndarray:
        k = np.asarray(k_perp, dtype=np.float64)[:, 0]
        c = 0.5 * (self.lo + self.hi)
        w = self.hi - self.lo
        return w * np.exp(-2j * np.pi * k * c) * sinc(np.pi * k * w)

    def translated(self, shift) -> IntervalWindow:
        s = float(np.asarray(shift, dtype=np.float64).reshape(-1)[0])
        return IntervalWindow(self.lo + s, self.hi + s)

    def __repr__(self) -> str:
        return f"IntervalWindow([{self.lo:.6g}, {self.hi:.6g}))"


class PolygonWindow(Window):
    """A convex polygon in a 2-D internal space.

    Parameters
    ----------
    vertices : array_like, shape (V, 2)
        Corner points (any order; the convex hull is taken).
    """

    dim = 2
    dense = (True, True)

    def __init__(self, vertices):
        v = np.asarray(vertices, dtype=np.float64)
        if v.ndim != 2 or v.shape[1] != 2 or not np.isfinite(v).all():
            raise InvalidInputError(f"polygon vertices must be a finite (V, 2) array, got shape {v.shape}")
        self._v = convex_hull_2d(v)
        nxt = np.roll(self._v, -1, axis=0)
        e = nxt - self._v
        n = np.column_stack([e[:, 1], -e[:, 0]])
        n /= np.linalg.norm(n, axis=1)[:, None]
        self._normals = n
        self._offsets = np.einsum("ij,ij->i", n, self._v)
        self._scale = float(np.abs(self._v).max() + np.ptp(self._v, axis=0).max())

    @property
    def vertices(self) -> np.ndarray:
        return self._v.copy()

    def contains(self, y) -> np.ndarray:
        return halfspace_contains(self._check_points(y), self._normals, self._offsets, self._scale)

    @property
    def measure(self) -> float:
        x, y = self._v[:, 0], self._v[:, 1]
        return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))

    def bounds(self):
        return self._v.min(axis=0), self._v.max(axis=0)

    @property
    def boundary_measure(self) -> float:
        return float(np.linalg.norm(np.roll(self._v, -1, axis=0) - self._v, axis=1).sum())

    def halfspaces(self) -> tuple[np.ndarray, np.ndarray]:
        """Outward unit normals (F, 2) and offsets (F,): the window is {y : n·y ≤ b}."""
        return self._normals.copy(), self._offsets.copy()

    def simplices(self) -> np.ndarray:
        """Triangles (fan from the vertex centroid), shape (V, 3, 2)."""
        c = self._v.mean(axis=0)
        nxt = np.roll(self._v, -1, axis=0)
        return np.stack([np.broadcast_to(c, self._v.shape), self._v, nxt], axis=1)

    def integral(self, k_perp) -> np.ndarray:
        return simplex_transforms(self.simplices(), np.asarray(k_perp, dtype=np.float64))

    def integral_by_edges(self, k_perp) -> np.ndarray:
        """∫_W exp(−2πi k·y) dy by the divergence theorem (a sum over edges).

        An independent formula used to cross-check the simplex sums; it loses accuracy as
        |k| → 0 (relative error ~1e-16/|k|) and returns the area at k = 0.
        """
        k = np.atleast_2d(np.asarray(k_perp, dtype=np.float64))
        p = self._v
        q = np.roll(p, -1, axis=0)
        mid = 0.5 * (p + q)
        length = np.linalg.norm(q - p, axis=1)
        k2 = np.einsum("md,md->m", k, k)
        out = np.empty(len(k), dtype=np.complex128)
        zero = k2 == 0
        out[zero] = self.measure
        kk = k[~zero]
        c = 1j * kk / (2 * np.pi * k2[~zero])[:, None]  # ∇·(c F) = F for F = exp(−2πi k·y)
        cn = c @ self._normals.T  # (M, E)
        edge = length * np.exp(-2j * np.pi * kk @ mid.T) * sinc(np.pi * kk @ (q - p).T)
        out[~zero] = (cn * edge).sum(axis=1)
        return out

    def translated(self, shift) -> PolygonWindow:
        return PolygonWindow(self._v + np.asarray(shift, dtype=np.float64).reshape(1, 2))

    def scaled(self, factor: float) -> PolygonWindow:
        return PolygonWindow(self._v * float(factor))

    def __repr__(self) -> str:
        return f"PolygonWindow({len(self._v)} vertices, area {self.measure:.6g})"


class SlicedWindow(Window):
    """Polygons on discrete levels of a 3-D internal space (x, y, level).

    Used for the Penrose vertex set from Z⁵: the internal space is the 2-D perpendicular
    plane plus the diagonal direction, on which lattice points take integer levels
    ι = Σ n_j; the window is a polygon on each level.

    Parameters
    ----------
    levels : sequence of float
        Level coordinates (third internal coordinate) of the slices.
    polygons : sequence of PolygonWindow
        The window on each level.
    """

    dim = 3
    dense = (True, True, False)

    def __init__(self, levels, polygons):
        self.levels = np.asarray(levels, dtype=np.float64).reshape(-1)
        self.polygons = list(polygons)
        if len(self.levels) != len(self.polygons) or not self.polygons:
            raise InvalidInputError("`levels` and `polygons` must be non-empty and of equal length")

    def contains(self, y) -> np.ndarray:
        y = self._check_points(y)
        out = np.zeros(len(y), dtype=bool)
        for z, p in zip(self.levels, self.polygons):
            on = np.abs(y[:, 2] - z) < 1e-6
            if on.any():
                out[on] = p.contains(y[on, :2])
        return out

    @property
    def measure(self) -> float:
        """Total area of the slices (the lattice projects onto integer levels)."""
        return float(sum(p.measure for p in self.polygons))

    @property
    def boundary_measure(self) -> float:
        return float(sum(p.boundary_measure for p in self.polygons))

    def bounds(self):
        lo = np.min([p.bounds()[0] for p in self.polygons], axis=0)
        hi = np.max([p.bounds()[1] for p in self.polygons], axis=0)
        return np.array([lo[0], lo[1], self.levels.min()]), np.array([hi[0], hi[1], self.levels.max()])

    @property
    def vertices(self) -> np.ndarray:
        return np.concatenate([np.column_stack([p.vertices, np.full(len(p.vertices), z)])
                               for z, p in zip(self.levels, self.polygons)])

    def integral(self, k_perp) -> np.ndarray:
        k = np.asarray(k_perp, dtype=np.float64)
        out = np.zeros(len(k), dtype=np.complex128)
        for z, p in zip(self.levels, self.polygons):
            out += np.exp(-2j * np.pi * k[:, 2] * z) * p.integral(k[:, :2])
        return out

    def translated(self, shift) -> SlicedWindow:
        s = np.asarray(shift, dtype=np.float64).reshape(-1)
        if len(s) == 3 and s[2] != 0:
            raise InvalidInputError("a sliced window can only be shifted within its planes (shift[2] must be 0)")
        return SlicedWindow(self.levels, [p.translated(s[:2]) for p in self.polygons])

    def __repr__(self) -> str:
        return f"SlicedWindow(levels {self.levels.tolist()}, total area {self.measure:.6g})"


class BallWindow(Window):
    """A closed ball |y − center| ≤ radius (used when searching module vectors)."""

    def __init__(self, center, radius: float):
        self._c = np.atleast_1d(np.asarray(center, dtype=np.float64))
        self.dim = len(self._c)
        self.dense = (True,) * self.dim
        self.radius = float(radius)
        if not self.radius > 0:
            raise InvalidInputError(f"ball radius must be > 0, got {radius}")

    def contains(self, y) -> np.ndarray:
        y = self._check_points(y)
        return np.linalg.norm(y - self._c, axis=1) <= self.radius * (1 + 1e-12)

    @property
    def measure(self) -> float:
        return math.pi ** (self.dim / 2) / math.gamma(self.dim / 2 + 1) * self.radius ** self.dim

    def bounds(self):
        return self._c - self.radius, self._c + self.radius

    @property
    def vertices(self) -> np.ndarray:
        lo, hi = self.bounds()
        corners = np.array(np.meshgrid(*[[a, b] for a, b in zip(lo, hi)], indexing="ij"))
        return corners.reshape(self.dim, -1).T

    def integral(self, k_perp):  # pragma: no cover - not needed
        raise NotImplementedError("BallWindow is a search region, not an acceptance window")

    def translated(self, shift) -> BallWindow:
        return BallWindow(self._c + np.asarray(shift, dtype=np.float64), self.radius)


class BoxWindow(Window):
    """An axis-aligned box [lo, hi] used as an enumeration bound (e.g. a dilated window)."""

    def __init__(self, lo, hi):
        self.lo = np.atleast_1d(np.asarray(lo, dtype=np.float64))
        self.hi = np.atleast_1d(np.asarray(hi, dtype=np.float64))
        self.dim = len(self.lo)
        self.dense = (True,) * self.dim

    def contains(self, y) -> np.ndarray:
        y = self._check_points(y)
        return ((y >= self.lo) & (y <= self.hi)).all(axis=1)

    @property
    def measure(self) -> float:
        return float(np.prod(self.hi - self.lo))

    def bounds(self):
        return self.lo.copy(), self.hi.copy()

    @property
    def vertices(self) -> np.ndarray:
        corners = np.array(np.meshgrid(*[[a, b] for a, b in zip(self.lo, self.hi)], indexing="ij"))
        return corners.reshape(self.dim, -1).T

    def integral(self, k_perp):  # pragma: no cover - not needed
        raise NotImplementedError("BoxWindow is a search region, not an acceptance window")

    def translated(self, shift) -> BoxWindow:
        s = np.asarray(shift, dtype=np.float64)
        return BoxWindow(self.lo + s, self.hi + s)


def canonical_window(internal, offset, kind: str) -> Window:
    """Internal projection of the hypercube ``offset + [0, 1]^D``.

    Parameters
    ----------
    internal : array_like (e, D)
        Internal images of the unit vectors (columns).
    offset : array_like (D,)
    kind : {"zonotope", "sliced"}
        "zonotope": the projection itself (an interval, a zonogon or a zonohedron).
        "sliced": the last internal row holds integer levels (Penrose); the window is the
        polygon conv{Σ_{j∈S} e_j⊥ : |S| = ι} (a hypersimplex projection) on each inner level.

    Returns
    -------
    Window

    Raises
    ------
    InvalidInputError
        For internal dimensions other than 1–3, a non-integer level row, or an unknown kind.
    """
    q = np.asarray(internal, dtype=np.float64)
    e, big_d = q.shape
    base = q @ np.asarray(offset, dtype=np.float64)
    if kind == "zonotope":
        if e == 1:
            lo = base[0] + np.minimum(q[0], 0).sum()
            hi = base[0] + np.maximum(q[0], 0).sum()
            return IntervalWindow(lo, hi)
        center = base + 0.5 * q.sum(axis=1)
        if e == 2:
            return PolygonWindow(zonogon(q.T, np.eye(2)) + center)
        if e == 3:
            return PolyhedronWindow.zonotope(q.T, center)
        raise InvalidInputError(f"zonotope windows need internal dimension 1–3, got {e}")
    if kind == "sliced":
        if e != 3:
            raise InvalidInputError("sliced windows need a 3-D internal space (plane + level)")
        levels, polys = [], []
        lev_row = q[2]
        if not np.allclose(lev_row, np.rint(lev_row)):
            raise InvalidInputError("the level row of a sliced window must be integer")
        lev0 = base[2]
        for iota in range(1, big_d):
            pts = np.array([q[:2, list(s)].sum(axis=1) + base[:2] for s in combinations(range(big_d), iota)])
            try:
                hull = convex_hull_2d(pts)
            except InvalidInputError:
                continue
            levels.append(lev0 + iota * float(lev_row[0]))
            polys.append(PolygonWindow(hull))
        return SlicedWindow(levels, polys)
    raise InvalidInputError(f"unknown window kind {kind!r}")


__all__ = ["Window", "IntervalWindow", "PolygonWindow", "PolyhedronWindow", "SlicedWindow", "BallWindow",
           "BoxWindow", "canonical_window", "exp_divided_differences", "simplex_transforms", "convex_hull_2d"]
