"""Streaming enumeration of lattice points in a strip: the cut-and-project search.

We want every n ∈ Z^D with parallel image x = P n inside a ball (centre c, radius ρ) of the
d-dimensional physical space and internal image y = Q n inside a window W (dimension
e = D − d). Both maps are linear and [P; Q] is invertible.

Split the lattice coordinates into a "free" part a (d of them) and a "window" part b (e of
them) such that Q_b is invertible. For fixed a, the window condition confines b to the small
convex set Q_b⁻¹(W − Q_a a), whose bounding box has a fixed size: only a handful of integer
candidates per a. Eliminating b, x = S a + T y with S = P_a − P_b Q_b⁻¹ Q_a and
T = P_b Q_b⁻¹, so the ball condition confines a to an ellipsoid |S a − c'| ≤ ρ', which is
enumerated row by row after a QR factorisation of S (Fincke–Pohst style). The split is chosen
to minimise the number of candidates per accepted point.

The outermost coordinate of a is walked slab by slab, so memory is bounded by one slab's
candidates regardless of the patch size: millions of points stream in chunks.
"""

from __future__ import annotations

import math
from itertools import combinations, product

import numpy as np

from ..errors import InvalidInputError

#: Candidate rows processed per vectorised step (bounds working memory).
_CANDIDATES_PER_STEP = 1 << 20


class StripEnumerator:
    """Enumerate {n ∈ Z^D : |P n − c| ≤ ρ, Q n ∈ W} in chunks.

    Parameters
    ----------
    parallel : ndarray (d, D)
        Physical-space images of the unit vectors (Å).
    internal : ndarray (e, D)
        Internal-space images of the unit vectors.
    window : Window
        Acceptance region in internal space (its ``bounds``, ``vertices``, ``contains`` and,
        for convex polytopes, ``halfspaces`` are used).
    """

    def __init__(self, parallel, internal, window):
        p = np.atleast_2d(np.asarray(parallel, dtype=np.float64))
        q = np.atleast_2d(np.asarray(internal, dtype=np.float64))
        d, big_d = p.shape
        e = q.shape[0]
        if q.shape[1] != big_d or d + e != big_d:
            raise InvalidInputError(
                f"parallel ({p.shape}) and internal ({q.shape}) maps must together be square (D x D)")
        m = np.vstack([p, q])
        if abs(np.linalg.det(m)) < 1e-12:
            raise InvalidInputError("the embedding [parallel; internal] is singular")
        self.p, self.q, self.d, self.e, self.D = p, q, d, e, big_d
        self.window = window
        lo, hi = window.bounds()
        self.w_lo, self.w_hi = np.asarray(lo, float), np.asarray(hi, float)
        self.w_center = 0.5 * (self.w_lo + self.w_hi)
        verts = np.asarray(window.vertices, dtype=np.float64).reshape(-1, e)
        best = None
        for b in combinations(range(big_d), e):
            a = [j for j in range(big_d) if j not in b]
            qb = q[:, list(b)]
            det_qb = np.linalg.det(qb) if e > 0 else 1.0
            if abs(det_qb) < 1e-9:
                continue
            qb_inv = np.linalg.inv(qb)
            s = p[:, a] - p[:, list(b)] @ qb_inv @ q[:, a]
            det_s = abs(np.linalg.det(s))
            if det_s < 1e-12:
                continue
            vb = verts @ qb_inv.T
            width = vb.max(axis=0) - vb.min(axis=0)
            per_a = float(np.prod(np.floor(width + 1e-9) + 1))
            cost = per_a / det_s
            if best is None or cost < best[0]:
                best = (cost, a, list(b), qb_inv, s, vb.min(axis=0), vb.max(axis=0))
        if best is None:
            raise InvalidInputError("no usable coordinate split: the internal map is degenerate")
        _, self.a_idx, self.b_idx, self.qb_inv, self.s, self.bmin, self.bmax = best
        self.count_b = (np.floor(self.bmax - self.bmin + 1e-9) + 1).astype(np.int64)
        self.t = p[:, self.b_idx] @ self.qb_inv
        self.t_reach = float(np.max(np.linalg.norm((verts - self.w_center) @ self.t.T, axis=1)))
        qq, rr = np.linalg.qr(self.s)
        self.qr_q, self.qr_r = qq, rr
        self.offsets_b = np.array(list(product(*[range(int(c)) for c in self.count_b])), dtype=np.int64)
        self.offsets_b = self.offsets_b.reshape(-1, e)
        # Polytope windows: the last window coordinate gets its exact integer range from the
        # half-spaces, instead of a box, which cuts the candidates to about one per point.
        self.faces = None
        halfspaces = window.halfspaces() if e >= 1 else None
        if halfspaces is not None:
            normals, offsets = halfspaces
            normals = np.asarray(normals, float)
            offsets = np.asarray(offsets, float)
            coef = normals @ q[:, self.b_idx[-1]]
            # n·y ≤ b with n·y = n·y_head + coef·t gives, per face, t ≤ (b − n·y_head)/coef
            # (coef > 0) or t ≥ … (coef < 0): precompute the scaled normals so that one
            # matrix product per block gives every bound. Faces parallel to the last
            # direction (coef = 0) only decide whether a head row is feasible at all.
            nz = np.abs(coef) > 1e-9 * np.abs(coef).max()
            self.faces = (normals[nz] / coef[nz, None], offsets[nz] / coef[nz], coef[nz] > 0,
                          normals[~nz], offsets[~nz])
            if e > 1:
                self.offsets_head = np.array(list(product(*[range(int(c)) for c in self.count_b[:-1]])),
                                             dtype=np.int64).reshape(-1, e - 1)
            else:
                self.offsets_head = np.zeros((1, 0), dtype=np.int64)

    # -------------------------------------------------------------------------------------
    def candidates_per_point(self, density: float) -> float:
        """Expected candidate rows per accepted point with the box search (a diagnostic)."""
        return float(len(self.offsets_b) / (abs(np.linalg.det(self.s)) * density))

    def _window_candidates(self, blk: np.ndarray, ya: np.ndarray, bmin: np.ndarray, off: np.ndarray):
        """Candidate (a, b) rows for a block of a-points: (n, y) with y = Q n."""
        e = self.e
        if self.faces is None:
            start = np.ceil(bmin - ya @ self.qb_inv.T - 1e-9).astype(np.int64)
            mb = (start[:, None, :] + self.offsets_b[None, :, :]).reshape(-1, e)
            ma = np.repeat(blk, len(self.offsets_b), axis=0)
        else:
            scaled, bounds, pos, flat_n, flat_b = self.faces
            bounds = bounds + scaled @ off
            flat_b = flat_b + flat_n @ off
            qb = self.q[:, self.b_idx]
            start = np.ceil(bmin[:-1] - ya @ self.qb_inv[:-1].T - 1e-9).astype(np.int64)
            nh = len(self.offsets_head)
            head = (start[:, None, :] + self.offsets_head[None, :, :]).reshape(len(start) * nh, e - 1)
            yp = np.repeat(ya, nh, axis=0) + head @ qb[:, :-1].T
            tb = bounds[None, :] - yp @ scaled.T  # t ≤ tb (coef > 0) or t ≥ tb (coef < 0)
            t_hi = tb[:, pos].min(axis=1) if pos.any() else np.full(len(yp), np.inf)
            t_lo = tb[:, ~pos].max(axis=1) if (~pos).any() else np.full(len(yp), -np.inf)
            lo = np.ceil(t_lo - 1e-9)
            hi = np.floor(t_hi + 1e-9)
            cnt = np.maximum(hi - lo + 1, 0).astype(np.int64)
            if len(flat_b):
                slack = flat_b[None, :] - yp @ flat_n.T
                cnt[(slack < -1e-9).any(axis=1)] = 0
                # rows lying on a flat face need the regularised test below
                on_flat = (np.abs(slack) <= 1e-9).any(axis=1)
            else:
                on_flat = np.zeros(len(yp), dtype=bool)
            total = int(cnt.sum())
            rep = np.repeat(np.arange(len(yp)), cnt)
            offs = np.arange(total, dtype=np.int64) - np.repeat(np.cumsum(cnt) - cnt, cnt)
            last = lo.astype(np.int64)[rep] + offs
            mb = np.column_stack([head[rep], last])
            ma = np.repeat(blk, nh, axis=0)[rep]
            n = np.empty((len(mb), self.D), dtype=np.int64)
            n[:, self.a_idx] = ma
            n[:, self.b_idx] = mb
            # internal coordinates without a general matrix product
            y = yp[rep] + last[:, None].astype(np.float64) * self.q[:, self.b_idx[-1]]
            # rows well inside the t-range are inside the window; only rows within rounding
            # of a face need the (regularised) membership test
            lastf = last.astype(np.float64)
            near = ((lastf - t_lo[rep]) < 1e-7) | ((t_hi[rep] - lastf) < 1e-7) | on_flat[rep]
            return n, y, near
        n = np.empty((len(mb), self.D), dtype=np.int64)
        n[:, self.a_idx] = ma
        n[:, self.b_idx] = mb
        return n, n.astype(np.float64) @ self.q.T, None

    def _outer_range(self, z: np.ndarray, rho: float):
        r = self.qr_r
        i = self.d - 1
        c = z[i] / r[i, i]
        hw = rho / abs(r[i, i])
        return int(math.ceil(c - hw - 1e-9)), int(math.floor(c + hw + 1e-9))

    def _expand(self, outer_vals: np.ndarray, z: np.ndarray, rho: float) -> np.ndarray:
        """All integer a (in QR row order) with |R a − z| ≤ rho and a[d−1] in outer_vals."""
        r = self.qr_r
        d = self.d
        i = d - 1
        vals = outer_vals.astype(np.int64)
        res = r[i, i] * vals - z[i]
        budget = rho * rho - res * res
        keep = budget >= -1e-9 * rho * rho
        cols = [vals[keep]]
        budget = np.maximum(budget[keep], 0.0)
        for i in range(d - 2, -1, -1):
            partial = -z[i] + sum(r[i, j] * cols[j - i - 1] for j in range(i + 1, d))
            c = -partial / r[i, i]
            hw = np.sqrt(budget) / abs(r[i, i])
            lo = np.ceil(c - hw - 1e-9).astype(np.int64)
            hi = np.floor(c + hw + 1e-9).astype(np.int64)
            cnt = np.maximum(hi - lo + 1, 0)
            total = int(cnt.sum())
            rep = np.repeat(np.arange(len(lo)), cnt)
            offs = np.arange(total, dtype=np.int64) - np.repeat(np.cumsum(cnt) - cnt, cnt)
            new = lo[rep] + offs
            res_i = r[i, i] * new + partial[rep]
            budget = np.maximum(budget[rep] - res_i * res_i, 0.0)
            cols = [new] + [cc[rep] for cc in cols]
        return np.column_stack(cols) if cols[0].size else np.zeros((0, d), dtype=np.int64)

    def iter_chunks(self, center, radius: float, chunk_points: int = 1 << 18, accept=None, window_offset=None):
        """Yield ``(n, x, y)`` chunks: integer indices (K, D), parallel (K, d) and internal
        (K, e) coordinates of the accepted points, in a deterministic order.

        Parameters
        ----------
        center : array_like (d,)
        radius : float
            Ball radius in physical space (Å); points with |x − center| ≤ radius.
        chunk_points : int
            Soft target for points per yielded chunk.
        accept : callable, optional
            ``accept(n, x, y) -> bool mask`` applied after the window test (used for phason
            disorder, where the window passed at construction only bounds the search).
        window_offset : array_like (e,), optional
            Use the window translated by this vector (saves rebuilding the enumerator).
        """
        c = np.asarray(center, dtype=np.float64).reshape(self.d)
        rho = float(radius)
        if not (np.isfinite(rho) and rho >= 0):
            raise InvalidInputError(f"`radius` must be a finite number >= 0, got {radius!r}")
        off = np.zeros(self.e) if window_offset is None else np.asarray(window_offset, dtype=np.float64).reshape(self.e)
        bmin = self.bmin + self.qb_inv @ off
        c_prime = c - self.t @ (self.w_center + off)
        rho_prime = rho + self.t_reach + 1e-9 * max(1.0, rho)
        z = self.qr_q.T @ c_prime
        lo, hi = self._outer_range(z, rho_prime)
        # slab size: estimate the number of a-points per outer value
        r = self.qr_r
        inner = 1.0
        for i in range(self.d - 1):
            inner *= 2 * rho_prime / abs(r[i, i]) + 1
        per_outer = max(1.0, inner * len(self.offsets_b))
        step = max(1, int(_CANDIDATES_PER_STEP // per_outer))
        buf_n, buf_x, buf_y, held = [], [], [], 0
        qa = self.q[:, self.a_idx]
        for v0 in range(lo, hi + 1, step):
            outer = np.arange(v0, min(hi, v0 + step - 1) + 1)
            a_pts = self._expand(outer, z, rho_prime)
            if len(a_pts) == 0:
                continue
            if self.faces is None:
                per_block = max(1, _CANDIDATES_PER_STEP // len(self.offsets_b))
            else:
                per_block = max(1, (_CANDIDATES_PER_STEP // 8) // len(self.offsets_head))
            for s0 in range(0, len(a_pts), per_block):
                blk = a_pts[s0:s0 + per_block]
                ya = blk @ qa.T
                n, y, near = self._window_candidates(blk, ya, bmin, off)
                if near is None:
                    ok = self.window.contains(y - off)
                else:
                    ok = np.ones(len(n), dtype=bool)
                    if near.any():
                        ok[near] = self.window.contains(y[near] - off)
                n, y = n[ok], y[ok]
                x = n.astype(np.float64) @ self.p.T
                ok = np.einsum("ij,ij->i", x - c, x - c) <= rho * rho * (1 + 1e-12)
                n, x, y = n[ok], x[ok], y[ok]
                if accept is not None and len(n):
                    ok = accept(n, x, y)
                    n, x, y = n[ok], x[ok], y[ok]
                if len(n):
                    buf_n.append(n)
                    buf_x.append(x)
                    buf_y.append(y)
                    held += len(n)
                if held >= chunk_points:
                    an, ax, ay = np.concatenate(buf_n), np.concatenate(buf_x), np.concatenate(buf_y)
                    while len(an) >= chunk_points:
                        yield an[:chunk_points], ax[:chunk_points], ay[:chunk_points]
                        an, ax, ay = an[chunk_points:], ax[chunk_points:], ay[chunk_points:]
                    buf_n, buf_x, buf_y, held = [an], [ax], [ay], len(an)
        if held:
            yield np.concatenate(buf_n), np.concatenate(buf_x), np.concatenate(buf_y)
