"""Convex polyhedral windows in a 3-D internal space (the rhombic triacontahedron of the
icosahedral set and other projected hypercubes)."""

from __future__ import annotations

from itertools import combinations

import numpy as np

from ..errors import InvalidInputError
from ._simplex import exp_divided_differences, simplex_transforms
from ._window_base import Window, halfspace_contains, unique_rows, zonogon


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
        self._v = unique_rows(allv)
        self._c = c
        self._scale = float(np.abs(self._v).max() + np.ptp(self._v, axis=0).max())

    @classmethod
    def zonotope(cls, generators, center=(0.0, 0.0, 0.0)) -> PolyhedronWindow:
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
        norms: list[np.ndarray] = []
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
                poly = zonogon(g[inplane], np.array([u, w]))
                faces.append(poly + fc + ctr)
        return cls(faces)

    @property
    def vertices(self) -> np.ndarray:
        return self._v.copy()

    @property
    def faces(self) -> list:
        return [f.copy() for f in self._faces]

    def contains(self, y) -> np.ndarray:
        return halfspace_contains(self._check_points(y), self._normals, self._offsets, self._scale)

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
        tri_list, owner_list = [], []
        for fi, f in enumerate(self._faces):
            fc = f.mean(axis=0)
            for a, b in zip(f, np.roll(f, -1, axis=0)):
                tri_list.append([fc, a, b])
                owner_list.append(fi)
        tris = np.array(tri_list)
        owner = np.array(owner_list)
        area2 = np.linalg.norm(np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0]), axis=1)
        t = -2j * np.pi * np.einsum("md,svd->msv", k, tris)
        e = exp_divided_differences(t.reshape(-1, 3)).reshape(len(k), len(tris)) * area2
        c = 1j * k / (2 * np.pi * np.where(k2 == 0, 1.0, k2))[:, None]
        cn = c @ self._normals[owner].T
        out = (cn * e).sum(axis=1)
        out[k2 == 0] = self.measure
        return out

    def translated(self, shift) -> PolyhedronWindow:
        s = np.asarray(shift, dtype=np.float64).reshape(1, 3)
        return PolyhedronWindow([f + s for f in self._faces])

    def __repr__(self) -> str:
        return f"PolyhedronWindow({len(self._faces)} faces, volume {self.measure:.6g})"


__all__ = ["PolyhedronWindow"]
