"""The window base class and the plane geometry that several windows share.

Membership is *regularised*: a point exactly on the boundary (which happens for lattice
points of special windows) is decided as if the window were moved by an infinitesimal
amount along a fixed generic direction. The resulting set is the limit of generic (regular)
model sets, so it is always a proper tiling vertex set.
"""

from __future__ import annotations

import numpy as np

from ..errors import InvalidInputError

#: Fixed generic direction for deciding boundary points (components of the plastic number
#: powers; any direction not parallel to a face works).
TIE_DIRECTION = np.array([0.7548776662466927, 0.5698402909980532, 0.3247179572447460])
#: Relative tolerance for "on the boundary".
BOUNDARY_TOL = 1e-9


class Window:
    """Base class of acceptance windows (internal space of dimension `dim`)."""

    dim: int
    #: which internal coordinates the lattice fills densely (False: discrete levels)
    dense: tuple

    # --- interface ------------------------------------------------------------------
    def contains(self, y) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def measure(self) -> float:  # pragma: no cover - abstract
        raise NotImplementedError

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def boundary_measure(self) -> float:  # pragma: no cover - abstract
        """Size of the boundary (points, perimeter or surface area); with the divergence
        theorem it bounds the transform: |T_W(k)| ≤ boundary / (2π|k| vol W)."""
        raise NotImplementedError

    @property
    def vertices(self) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    def integral(self, k_perp) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    def translated(self, shift) -> Window:  # pragma: no cover - abstract
        raise NotImplementedError

    def halfspaces(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Outward unit normals (F, dim) and offsets (F,) with W = {y : n·y ≤ b}, or None
        for windows that are not one convex polytope (the strip search then bounds the
        window by its box)."""
        return None

    # --- shared -----------------------------------------------------------------------
    def transform(self, k_perp) -> np.ndarray:
        """Normalised transform T_W(k⊥) = (1/vol W) ∫_W exp(−2πi k⊥·y) dy.

        Parameters
        ----------
        k_perp : array_like, shape (M, dim) or (dim,)
            Internal components of module vectors (cycles per Å of internal space).

        Returns
        -------
        ndarray, complex128, shape (M,) (or a scalar for one vector).
        """
        k = np.asarray(k_perp, dtype=np.float64)
        one = k.ndim == 1
        k = np.atleast_2d(k)
        if k.shape[1] != self.dim:
            raise InvalidInputError(f"`k_perp` must have {self.dim} components, got shape {k.shape}")
        out = self.integral(k) / self.measure
        return out[0] if one else out

    def _check_points(self, y) -> np.ndarray:
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1 and self.dim == 1:
            y = y[:, None]
        if y.ndim != 2 or y.shape[1] != self.dim:
            raise InvalidInputError(f"internal coordinates must have shape (N, {self.dim}), got {y.shape}")
        return y

    @property
    def center(self) -> np.ndarray:
        lo, hi = self.bounds()
        return 0.5 * (lo + hi)


def halfspace_contains(y: np.ndarray, normals: np.ndarray, offsets: np.ndarray, scale: float) -> np.ndarray:
    """Regularised test of a·y ≤ b for every face (see module notes)."""
    g = TIE_DIRECTION[: normals.shape[1]]
    tol = BOUNDARY_TOL * max(scale, 1e-300)
    inside = np.ones(len(y), dtype=bool)
    for a, b in zip(normals, offsets):
        v = y @ a - b
        tie_in = float(a @ g) < 0.0  # moving by +εg keeps the point inside this face
        inside &= (v < -tol) | ((np.abs(v) <= tol) & tie_in)
    return inside


def unique_rows(p: np.ndarray, decimals: int = 9) -> np.ndarray:
    """Rows of `p` without near-duplicates (compared after rounding; originals returned)."""
    scale = max(1.0, float(np.abs(p).max())) if p.size else 1.0
    _, idx = np.unique(np.round(p / scale, decimals), axis=0, return_index=True)
    return p[np.sort(idx)]


def convex_hull_2d(points) -> np.ndarray:
    """Vertices of the convex hull of 2-D points, counter-clockwise (monotone chain)."""
    p = unique_rows(np.asarray(points, dtype=np.float64))
    if len(p) < 3:
        raise InvalidInputError(f"a polygon needs at least 3 distinct points, got {len(p)}")
    order = np.lexsort((p[:, 1], p[:, 0]))
    p = p[order]

    def cross(o, a, b):
        return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])

    lower: list[np.ndarray] = []
    upper: list[np.ndarray] = []
    for pt in p:
        while len(lower) >= 2 and cross(lower[-2], lower[-1], pt) <= 1e-12:
            lower.pop()
        lower.append(pt)
    for pt in p[::-1]:
        while len(upper) >= 2 and cross(upper[-2], upper[-1], pt) <= 1e-12:
            upper.pop()
        upper.append(pt)
    hull = np.array(lower[:-1] + upper[:-1])
    if len(hull) < 3:
        raise InvalidInputError("the polygon's points are collinear (zero area)")
    return hull


def zonogon(generators: np.ndarray, basis: np.ndarray) -> np.ndarray:
    """Vertices (ordered, counter-clockwise in the given 2-D in-plane basis) of the planar
    zonotope Σ[−½, ½] g_j, returned in the full coordinates."""
    g2 = generators @ basis.T  # in-plane coordinates
    # make every generator point into the upper half-plane, sort by angle
    flip = (g2[:, 1] < 0) | ((g2[:, 1] == 0) & (g2[:, 0] < 0))
    g2 = np.where(flip[:, None], -g2, g2)
    ang = np.arctan2(g2[:, 1], g2[:, 0])
    g2 = g2[np.argsort(ang)]
    start = -0.5 * g2.sum(axis=0)
    pts = [start]
    for v in np.concatenate([g2, -g2]):
        pts.append(pts[-1] + v)
    poly2 = np.array(pts[:-1])
    return poly2 @ basis


__all__ = ["Window", "halfspace_contains", "unique_rows", "convex_hull_2d", "zonogon", "TIE_DIRECTION",
           "BOUNDARY_TOL"]
