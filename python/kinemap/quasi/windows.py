"""Acceptance windows of cut-and-project sets and their Fourier transforms.

A window W lives in the internal (perpendicular) space. A lattice point whose internal
coordinate y lies in W is a point of the model set. The per-point amplitude of a model set at
a Fourier-module vector with internal component k⊥ (cycles/Å) tends, for a growing patch, to

    T_W(k⊥) = (1 / vol W) ∫_W exp(−2πi k⊥·y) dy

(Baake & Grimm, *Aperiodic Order* vol. 1, CUP 2013, ch. 9). The sign follows kinemap's
``exp(+i q·r)`` convention: for a module vector, k·x + k⊥·x⊥ is an integer, so
exp(2πi k·x) = exp(−2πi k⊥·x⊥).

Transforms are computed by splitting the window into simplices. For a d-simplex with
vertices v_0..v_d, ``∫ exp(z·y) dy = d!·vol·E[t_0, …, t_d]`` with t_i = z·v_i and E the
divided difference of exp. The divided differences are evaluated as the corner entry of the
exponential of a bidiagonal matrix (Opitz's theorem) by scaling and squaring, which stays
accurate when several t_i coincide: the symmetric peaks of icosahedral patterns, where the
textbook formula divides zero by zero (McCurdy, Ng & Parlett, Math. Comp. 43 (1984) 501 —
memory).

Membership is *regularised*: a point exactly on the boundary (which happens for lattice
points of special windows) is decided as if the window were moved by an infinitesimal
amount along a fixed generic direction. The resulting set is the limit of generic (regular)
model sets, so it is always a proper tiling vertex set.
"""

from __future__ import annotations

import math
from itertools import combinations

import numpy as np

from ..errors import InvalidInputError

#: Fixed generic direction for deciding boundary points (components of the plastic number
#: powers; any direction not parallel to a face works).
TIE_DIRECTION = np.array([0.7548776662466927, 0.5698402909980532, 0.3247179572447460])
#: Relative tolerance for "on the boundary".
BOUNDARY_TOL = 1e-9


def _sinc(x):
    """sin(x)/x with the limit 1 at 0."""
    x = np.asarray(x, dtype=np.float64)
    out = np.ones_like(x)
    nz = np.abs(x) > 1e-8
    out[nz] = np.sin(x[nz]) / x[nz]
    small = ~nz
    out[small] = 1.0 - x[small] ** 2 / 6.0
    return out


def exp_divided_differences(t) -> np.ndarray:
    """Divided differences E[t_0, …, t_n] of exp, computed stably.

    Parameters
    ----------
    t : array_like, shape (M, n+1), complex
        Nodes (n ≤ 5). Nodes may coincide.

    Returns
    -------
    ndarray, shape (M,), complex128

    Notes
    -----
    E[t_0..t_n] is the (0, n) entry of exp(J) for the bidiagonal J with the t_i on the
    diagonal and ones above it (Opitz). The nodes are first shifted by their mean μ
    (E[t] = e^μ E[t − μ]); exp(J/2^s) is then summed as a Taylor series and squared s times.
    For coincident nodes the result is e^t / n!.
    """
    t = np.asarray(t, dtype=np.complex128)
    if t.ndim != 2:
        raise InvalidInputError(f"`t` must have shape (M, n+1), got {t.shape}")
    m, k = t.shape
    if m == 0:
        return np.zeros(0, dtype=np.complex128)
    mu = t.mean(axis=1)
    s = t - mu[:, None]
    r = float(np.abs(s).max()) if s.size else 0.0
    nsq = max(0, int(math.ceil(math.log2(r / 0.25)))) if r > 0.25 else 0
    scale = 2.0 ** (-nsq)
    x = np.zeros((m, k, k), dtype=np.complex128)
    idx = np.arange(k)
    x[:, idx, idx] = s * scale
    if k > 1:
        x[:, idx[:-1], idx[1:]] = scale
    # Horner form of the Taylor series, 30 terms (‖X‖ ≤ 1.25 → truncation < 1e-28).
    eye = np.broadcast_to(np.eye(k, dtype=np.complex128), (m, k, k))
    e = eye.copy()
    for j in range(30, 0, -1):
        e = eye + np.matmul(x, e) / j
    for _ in range(nsq):
        e = np.matmul(e, e)
    return np.exp(mu) * e[:, 0, k - 1]


def simplex_transforms(vertices: np.ndarray, k: np.ndarray) -> np.ndarray:
    """∫ exp(−2πi k·y) dy over each simplex, for each k.

    Parameters
    ----------
    vertices : ndarray, shape (S, d+1, d)
        Simplices (d = 1, 2, 3) in internal space.
    k : ndarray, shape (M, d)
        Wave vectors in cycles per unit length.

    Returns
    -------
    ndarray, shape (M,), complex: the sum over the simplices.
    """
    vertices = np.asarray(vertices, dtype=np.float64)
    k = np.asarray(k, dtype=np.float64)
    n_s, nv, d = vertices.shape
    edges = vertices[:, 1:, :] - vertices[:, :1, :]
    jac = np.abs(np.linalg.det(edges)) if d > 1 else np.abs(edges[:, 0, 0])
    out = np.zeros(len(k), dtype=np.complex128)
    # chunk over k to bound memory (M·S matrices of (d+1)²)
    per = max(1, 200_000 // max(n_s, 1))
    for a in range(0, len(k), per):
        kk = k[a:a + per]
        t = -2j * np.pi * np.einsum("md,svd->msv", kk, vertices)
        e = exp_divided_differences(t.reshape(-1, nv)).reshape(len(kk), n_s)
        out[a:a + per] = e @ jac
    return out


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

    def translated(self, shift) -> "Window":  # pragma: no cover - abstract
        raise NotImplementedError

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


def _halfspace_contains(y: np.ndarray, normals: np.ndarray, offsets: np.ndarray, scale: float) -> np.ndarray:
    """Regularised test of a·y ≤ b for every face (see module notes)."""
    g = TIE_DIRECTION[: normals.shape[1]]
    tol = BOUNDARY_TOL * max(scale, 1e-300)
    inside = np.ones(len(y), dtype=bool)
    for a, b in zip(normals, offsets):
        v = y @ a - b
        tie_in = float(a @ g) < 0.0  # moving by +εg keeps the point inside this face
        inside &= (v < -tol) | ((np.abs(v) <= tol) & tie_in)
    return inside


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
        return w * np.exp(-2j * np.pi * k * c) * _sinc(np.pi * k * w)

    def translated(self, shift) -> "IntervalWindow":
        s = float(np.asarray(shift, dtype=np.float64).reshape(-1)[0])
        return IntervalWindow(self.lo + s, self.hi + s)

    def __repr__(self) -> str:
        return f"IntervalWindow([{self.lo:.6g}, {self.hi:.6g}))"


def _unique_rows(p: np.ndarray, decimals: int = 9) -> np.ndarray:
    """Rows of `p` without near-duplicates (compared after rounding; originals returned)."""
    scale = max(1.0, float(np.abs(p).max())) if p.size else 1.0
    _, idx = np.unique(np.round(p / scale, decimals), axis=0, return_index=True)
    return p[np.sort(idx)]


def convex_hull_2d(points) -> np.ndarray:
    """Vertices of the convex hull of 2-D points, counter-clockwise (monotone chain)."""
    p = _unique_rows(np.asarray(points, dtype=np.float64))
    if len(p) < 3:
        raise InvalidInputError(f"a polygon needs at least 3 distinct points, got {len(p)}")
    order = np.lexsort((p[:, 1], p[:, 0]))
    p = p[order]

    def cross(o, a, b):
        return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])

    lower, upper = [], []
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
        return _halfspace_contains(self._check_points(y), self._normals, self._offsets, self._scale)

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
        edge = length * np.exp(-2j * np.pi * kk @ mid.T) * _sinc(np.pi * kk @ (q - p).T)
        out[~zero] = (cn * edge).sum(axis=1)
        return out

    def translated(self, shift) -> "PolygonWindow":
        return PolygonWindow(self._v + np.asarray(shift, dtype=np.float64).reshape(1, 2))

    def scaled(self, factor: float) -> "PolygonWindow":
        return PolygonWindow(self._v * float(factor))

    def __repr__(self) -> str:
        return f"PolygonWindow({len(self._v)} vertices, area {self.measure:.6g})"


def _zonogon(generators: np.ndarray, basis: np.ndarray) -> np.ndarray:
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


class PolyhedronWindow(Window):
    """A convex polyhedron in a 3-D internal space, given by its faces.

    Parameters
    ----------
    faces : list of array_like (F_i, 3)
        Each face's corner points in order (either orientation; orientation is fixed
        outward from the centroid).

    Notes
    -----
    Use :meth:`zonotope` for the rhombic triacontahedron and other projected hypercubes.
    """

    dim = 3
    dense = (True, True, True)

    def __init__(self, faces):
        fs = [np.asarray(f, dtype=np.float64) for f in faces]
        if len(fs) < 4 or any(f.ndim != 2 or f.shape[1] != 3 or len(f) < 3 for f in fs):
            raise InvalidInputError("a polyhedron needs at least 4 faces, each a (F, 3) array of ≥ 3 corners")
        allv = np.concatenate(fs)
        c = allv.mean(axis=0)
        normals, offsets, out_faces = [], [], []
        for f in fs:
            n = np.cross(f[1] - f[0], f[2] - f[0])
            # a robust normal from the face's polygon area vector
            area_vec = 0.5 * np.sum(np.cross(f, np.roll(f, -1, axis=0)), axis=0)
            if np.linalg.norm(area_vec) > 0:
                n = area_vec
            n = n / np.linalg.norm(n)
            if np.dot(n, f.mean(axis=0) - c) < 0:
                n = -n
                f = f[::-1]
            normals.append(n)
            offsets.append(float(n @ f[0]))
            out_faces.append(f)
        self._faces = out_faces
        self._normals = np.array(normals)
        self._offsets = np.array(offsets)
        self._v = _unique_rows(allv)
        self._c = c
        self._scale = float(np.abs(self._v).max() + np.ptp(self._v, axis=0).max())

    @classmethod
    def zonotope(cls, generators, center=(0.0, 0.0, 0.0)) -> "PolyhedronWindow":
        """The zonotope ``center + Σ_j [−½, ½] g_j`` (projection of a centred hypercube).

        Parameters
        ----------
        generators : array_like, shape (n, 3)
            Generator vectors; at least three independent.
        center : array_like, shape (3,)
        """
        g = np.asarray(generators, dtype=np.float64)
        if g.ndim != 2 or g.shape[1] != 3 or np.linalg.matrix_rank(g) < 3:
            raise InvalidInputError("a 3-D zonotope needs (n, 3) generators spanning space")
        ctr = np.asarray(center, dtype=np.float64)
        norms = []
        for i, j in combinations(range(len(g)), 2):
            n = np.cross(g[i], g[j])
            ln = np.linalg.norm(n)
            if ln < 1e-12 * np.linalg.norm(g[i]) * np.linalg.norm(g[j]):
                continue
            n = n / ln
            if not any(abs(abs(n @ m) - 1.0) < 1e-10 for m in norms):
                norms.append(n)
        faces = []
        for n in norms:
            for sgn in (1.0, -1.0):
                nn = sgn * n
                dots = g @ nn
                inplane = np.abs(dots) < 1e-10 * np.linalg.norm(g, axis=1)
                fc = 0.5 * (np.sign(dots[~inplane])[:, None] * g[~inplane]).sum(axis=0)
                # in-plane orthonormal basis
                u = g[inplane][0] / np.linalg.norm(g[inplane][0])
                w = np.cross(nn, u)
                poly = _zonogon(g[inplane], np.array([u, w]))
                faces.append(poly + fc + ctr)
        return cls(faces)

    @property
    def vertices(self) -> np.ndarray:
        return self._v.copy()

    @property
    def faces(self) -> list:
        return [f.copy() for f in self._faces]

    def contains(self, y) -> np.ndarray:
        return _halfspace_contains(self._check_points(y), self._normals, self._offsets, self._scale)

    def simplices(self) -> np.ndarray:
        """Tetrahedra (centroid + fan triangles of every face), shape (T, 4, 3)."""
        tets = []
        for f in self._faces:
            fc = f.mean(axis=0)
            for a, b in zip(f, np.roll(f, -1, axis=0)):
                tets.append([self._c, fc, a, b])
        return np.array(tets)

    @property
    def measure(self) -> float:
        t = self.simplices()
        return float(np.abs(np.linalg.det(t[:, 1:] - t[:, :1])).sum() / 6.0)

    def bounds(self):
        return self._v.min(axis=0), self._v.max(axis=0)

    @property
    def boundary_measure(self) -> float:
        return float(sum(0.5 * np.linalg.norm(np.sum(np.cross(f, np.roll(f, -1, axis=0)), axis=0))
                         for f in self._faces))

    def halfspaces(self) -> tuple[np.ndarray, np.ndarray]:
        """Outward unit normals (F, 3) and offsets (F,): the window is {y : n·y ≤ b}."""
        return self._normals.copy(), self._offsets.copy()

    def integral(self, k_perp) -> np.ndarray:
        return simplex_transforms(self.simplices(), np.asarray(k_perp, dtype=np.float64))

    def integral_by_faces(self, k_perp) -> np.ndarray:
        """∫_W exp(−2πi k·y) dy by the divergence theorem (a sum over faces, each face's
        integral by triangles). Independent of the tetrahedral split; inaccurate near k = 0."""
        k = np.atleast_2d(np.asarray(k_perp, dtype=np.float64))
        k2 = np.einsum("md,md->m", k, k)
        out = np.zeros(len(k), dtype=np.complex128)
        tris, owner = [], []
        for fi, f in enumerate(self._faces):
            fc = f.mean(axis=0)
            for a, b in zip(f, np.roll(f, -1, axis=0)):
                tris.append([fc, a, b])
                owner.append(fi)
        tris = np.array(tris)
        owner = np.array(owner)
        area2 = np.linalg.norm(np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0]), axis=1)
        t = -2j * np.pi * np.einsum("md,svd->msv", k, tris)
        e = exp_divided_differences(t.reshape(-1, 3)).reshape(len(k), len(tris)) * area2
        c = 1j * k / (2 * np.pi * np.where(k2 == 0, 1.0, k2))[:, None]
        cn = c @ self._normals[owner].T
        out = (cn * e).sum(axis=1)
        out[k2 == 0] = self.measure
        return out

    def translated(self, shift) -> "PolyhedronWindow":
        s = np.asarray(shift, dtype=np.float64).reshape(1, 3)
        return PolyhedronWindow([f + s for f in self._faces])

    def __repr__(self) -> str:
        return f"PolyhedronWindow({len(self._faces)} faces, volume {self.measure:.6g})"


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

    def translated(self, shift) -> "SlicedWindow":
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

    def translated(self, shift) -> "BallWindow":
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

    def translated(self, shift) -> "BoxWindow":
        s = np.asarray(shift, dtype=np.float64)
        return BoxWindow(self.lo + s, self.hi + s)


__all__ = [
    "Window",
    "IntervalWindow",
    "PolygonWindow",
    "PolyhedronWindow",
    "SlicedWindow",
    "BallWindow",
    "BoxWindow",
    "exp_divided_differences",
    "simplex_transforms",
    "convex_hull_2d",
]
