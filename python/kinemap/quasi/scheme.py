"""Cut-and-project schemes: lattice, physical and internal maps, window, Fourier module.

A :class:`CutProjectScheme` holds the integer lattice Z^D, the linear maps that send a
lattice point n to its physical (parallel) coordinate x = P n (Å) and its internal
(perpendicular) coordinate y = Q n, and an acceptance window W. The model set is
{P n : Q n ∈ W}. Its Fourier module is the projection of the dual lattice: for integer
indices h the dual vector is g = M⁻ᵀ C h with M = [P; Q] and C an integer index basis
(identity unless a conventional indexing is wanted), split into k (physical, cycles/Å) and
k⊥ (internal). Since k·x + k⊥·y is an integer for every lattice point,
exp(2πi k·x) = exp(−2πi k⊥·y), and the per-point amplitude of a large patch at k tends to
the window transform T_W(k⊥) (see :mod:`kinemap.quasi.windows`).

q-vectors follow kinemap: q = 2πk (Å⁻¹). Physical positions are embedded in 3-D as (x, 0, 0)
for chains and (x, y, 0) for planar tilings; module vectors likewise.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations, product

import numpy as np

from .._shared.memory import available_memory, human_bytes
from ..errors import InvalidInputError
from ._enumerate import StripEnumerator
from ._precise import saturated_lattice
from .windows import (BallWindow, BoxWindow, IntervalWindow, PolygonWindow, PolyhedronWindow, SlicedWindow,
                      Window, _zonogon, convex_hull_2d)


def check_fits(n_bytes: float, what: str) -> None:
    """Refuse, before allocating, a patch that cannot fit in the available memory."""
    avail = available_memory()
    if n_bytes > 0.8 * avail:
        raise InvalidInputError(
            f"{what} would need about {human_bytes(n_bytes)}, but only {human_bytes(avail)} of memory is "
            "available; stream it in chunks (iter_points / iter_positions / source) or use a smaller radius")


def embed3(x: np.ndarray) -> np.ndarray:
    """Pad (N, d) coordinates with zeros to (N, 3)."""
    x = np.asarray(x, dtype=np.float64)
    out = np.zeros((len(x), 3))
    out[:, : x.shape[1]] = x
    return out


@dataclass
class PointSet:
    """Points of a cut-and-project set.

    Attributes
    ----------
    positions : ndarray (N, 3)
        Cartesian positions in Å (chains on x, planar sets in the xy-plane).
    perp : ndarray (N, e)
        Internal (perpendicular-space) coordinates.
    indices : ndarray (N, D) of int64, or None
        Lattice coordinates n (kept when asked for; 8·D bytes per point).
    scheme : CutProjectScheme
        The scheme that produced the points.
    """

    positions: np.ndarray
    perp: np.ndarray
    indices: np.ndarray | None
    scheme: "CutProjectScheme"
    info: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.positions)

    @property
    def n_points(self) -> int:
        return len(self.positions)

    def subset(self, index) -> "PointSet":
        """Points selected by a mask, slice or index array."""
        return PointSet(self.positions[index], self.perp[index],
                        None if self.indices is None else self.indices[index], self.scheme, dict(self.info))

    @classmethod
    def concatenate(cls, parts, scheme=None) -> "PointSet":
        parts = list(parts)
        if not parts:
            if scheme is None:
                raise InvalidInputError("no point chunks to concatenate")
            return cls(np.zeros((0, 3)), np.zeros((0, scheme.internal_dim)),
                       np.zeros((0, scheme.lattice_dim), dtype=np.int64), scheme)
        idx = None if any(p.indices is None for p in parts) else np.concatenate([p.indices for p in parts])
        return cls(np.concatenate([p.positions for p in parts]), np.concatenate([p.perp for p in parts]),
                   idx, parts[0].scheme, dict(parts[0].info))

    def to_model(self, species="A", occupancy=None, b_iso=None, cell=None):
        """A :class:`kinemap.Model` of these points.

        Parameters
        ----------
        species : str or sequence of str
            One label for all points or one per point (see :mod:`kinemap.quasi.decorate`).
        occupancy, b_iso : optional
            Passed to :class:`kinemap.Model`.
        cell : array_like (3, 3), optional
            Lattice vectors (rows, Å) for periodic approximants.

        Returns
        -------
        kinemap.Model
        """
        from ..model import Model  # lazy: the generators themselves need only numpy

        return Model(self.positions, species, occupancy=occupancy, b_iso=b_iso, cell=cell)


@dataclass
class ModuleVectors:
    """Fourier-module vectors with integer indices.

    Attributes
    ----------
    indices : ndarray (M, D) int64
    k_par : ndarray (M, d)
        Physical components in cycles/Å.
    k_perp : ndarray (M, e)
        Internal components (cycles per internal Å).
    q : ndarray (M, 3)
        q = 2π k embedded in 3-D (Å⁻¹), ready for ``kinemap.QGrid.points``.
    """

    indices: np.ndarray
    k_par: np.ndarray
    k_perp: np.ndarray
    q: np.ndarray

    def __len__(self) -> int:
        return len(self.indices)


def _as_indices(indices, big_d: int) -> np.ndarray:
    h = np.asarray(indices)
    if h.ndim == 1:
        h = h[None, :]
    if h.ndim != 2 or h.shape[1] != big_d:
        raise InvalidInputError(f"`indices` must have shape (M, {big_d}), got {np.shape(indices)}")
    if not np.issubdtype(h.dtype, np.integer):
        hr = np.rint(np.asarray(h, dtype=np.float64))
        if not np.allclose(hr, h):
            raise InvalidInputError("`indices` must be integers")
        h = hr
    return h.astype(np.int64)


class CutProjectScheme:
    """A cut-and-project scheme (lattice Z^D, physical and internal maps, window).

    Parameters
    ----------
    name : str
    parallel : array_like (d, D)
        Column j is the physical image e_j∥ of the j-th unit vector (Å).
    internal : array_like (e, D)
        Column j is the internal image e_j⊥ (e = D − d).
    window : Window
        Acceptance window (already shifted).
    index_basis : array_like (D, D) of int, optional
        Module indices h stand for the dual-lattice coordinates C h (default identity).
    hypercube_offset : array_like (D,), optional
        The window is the internal projection of ``offset + [0, 1]^D`` (canonical
        windows); needed to rebuild the window for approximants.
    window_kind : {"zonotope", "sliced", None}
        How the canonical window is rebuilt from an internal map.
    shift : array_like (e,), optional
        Phason shift already applied to the window (recorded).
    inflation_factor : float, optional
        The scheme's inflation (τ, 1+√2, …) used by :meth:`inflation_matrix`.
    rational_form : tuple, optional
        ``(U, V, row_scale, xi)`` with parallel = diag(row_scale)(U + ξV): how the
        irrational ξ enters, for approximants.
    periods : array_like (d, D) of int, optional
        Lattice vectors along which the set is periodic (approximants).
    """

    def __init__(self, name, parallel, internal, window: Window, *, index_basis=None,
                 hypercube_offset=None, window_kind=None, shift=None, inflation_factor=None,
                 rational_form=None, periods=None, edge_length: float = 1.0):
        self.name = str(name)
        self.parallel = np.atleast_2d(np.asarray(parallel, dtype=np.float64))
        self.internal = np.atleast_2d(np.asarray(internal, dtype=np.float64))
        d, big_d = self.parallel.shape
        if self.internal.shape != (big_d - d, big_d):
            raise InvalidInputError(
                f"`internal` must have shape ({big_d - d}, {big_d}), got {self.internal.shape}")
        if window.dim != big_d - d:
            raise InvalidInputError(f"window dimension {window.dim} != internal dimension {big_d - d}")
        self.window = window
        self.index_basis = np.eye(big_d, dtype=np.int64) if index_basis is None else np.asarray(index_basis, dtype=np.int64)
        self.hypercube_offset = None if hypercube_offset is None else np.asarray(hypercube_offset, dtype=np.float64)
        self.window_kind = window_kind
        self.shift = np.zeros(big_d - d) if shift is None else np.asarray(shift, dtype=np.float64).reshape(big_d - d)
        self.inflation_factor = inflation_factor
        self.rational_form = rational_form
        self.periods = None if periods is None else np.asarray(periods, dtype=np.int64)
        self.edge_length = float(edge_length)
        m = self.embedding
        if abs(np.linalg.det(m)) < 1e-12:
            raise InvalidInputError("the embedding [parallel; internal] is singular")
        self._dual = np.linalg.inv(m).T @ self.index_basis
        self._enum = None
        self._search_cache: dict = {}

    # ---------------------------------------------------------------- basic properties
    @property
    def dim(self) -> int:
        """Physical dimension d."""
        return self.parallel.shape[0]

    @property
    def internal_dim(self) -> int:
        return self.internal.shape[0]

    @property
    def lattice_dim(self) -> int:
        return self.parallel.shape[1]

    @property
    def embedding(self) -> np.ndarray:
        """M = [parallel; internal], (D, D)."""
        return np.vstack([self.parallel, self.internal])

    @property
    def density(self) -> float:
        """Points per Å^d: vol(W) / |det M| (Baake & Grimm, Aperiodic Order 1, Thm 7.2 — memory).

        For sliced windows vol(W) is the total slice area (the lattice meets integer levels).
        """
        return self.window.measure / abs(np.linalg.det(self.embedding))

    def __repr__(self) -> str:
        return (f"CutProjectScheme({self.name!r}, d={self.dim}, D={self.lattice_dim}, "
                f"window={self.window!r}, density={self.density:.6g}/Å^{self.dim})")

    # ---------------------------------------------------------------- point generation
    def _enumerator(self) -> StripEnumerator:
        if self._enum is None:
            self._enum = StripEnumerator(self.parallel, self.internal, self.window)
        return self._enum

    def _check_region(self, radius, center):
        try:
            radius = float(radius)
        except (TypeError, ValueError):
            raise InvalidInputError(f"`radius` must be a number (Å), got {radius!r}") from None
        if not (np.isfinite(radius) and radius > 0):
            raise InvalidInputError(f"`radius` must be a finite number > 0 (Å), got {radius!r}")
        c = np.zeros(self.dim) if center is None else np.asarray(center, dtype=np.float64).reshape(-1)
        if c.shape != (self.dim,) or not np.isfinite(c).all():
            raise InvalidInputError(f"`center` must be {self.dim} finite numbers (Å), got {center!r}")
        return radius, c

    def iter_points(self, radius, center=None, chunk_points: int = 1 << 18, with_indices: bool = False):
        """Stream the points within `radius` of `center` in chunks.

        Parameters
        ----------
        radius : float
            Patch radius in Å (a ball in physical space).
        center : array_like (d,), optional
            Patch centre in Å (default the origin).
        chunk_points : int
            Approximate number of points per chunk; memory stays O(chunk).
        with_indices : bool
            Keep the lattice coordinates n (D int64 per point).

        Yields
        ------
        PointSet
        """
        radius, c = self._check_region(radius, center)
        if isinstance(chunk_points, bool) or not isinstance(chunk_points, (int, np.integer)) or chunk_points < 1:
            raise InvalidInputError(f"`chunk_points` must be a whole number >= 1, got {chunk_points!r}")
        for n, x, y in self._enumerator().iter_chunks(c, radius, int(chunk_points)):
            yield PointSet(embed3(x), y, n if with_indices else None, self)

    def iter_positions(self, radius, center=None, chunk_points: int = 1 << 18):
        """Stream plain position arrays (N, 3) in Å: the lightest form for huge patches."""
        for ps in self.iter_points(radius, center, chunk_points):
            yield ps.positions

    def positions(self, radius, center=None, chunk_points: int = 1 << 18) -> np.ndarray:
        """All positions within `radius` (Å) of `center` as one (N, 3) float64 array.

        The array is preallocated from the expected count (density × volume) and filled
        chunk by chunk, so the peak memory is the result plus one chunk.
        """
        radius, c = self._check_region(radius, center)
        cap = int(self.expected_count(radius) * 1.02) + 1024
        check_fits(24.0 * cap, f"a patch of about {cap:,} points (positions)")
        out = np.empty((cap, 3))
        n = 0
        for chunk in self.iter_positions(radius, c, chunk_points):
            k = len(chunk)
            if n + k > len(out):
                grown = np.empty((max(2 * len(out), n + k), 3))
                grown[:n] = out[:n]
                out = grown
            out[n:n + k] = chunk
            n += k
        return out[:n].copy() if n < 0.9 * len(out) else out[:n]

    def expected_count(self, radius) -> float:
        """Expected number of points in a patch of `radius` Å: density × ball volume."""
        r = float(radius)
        vol = {1: 2 * r, 2: np.pi * r ** 2, 3: 4 / 3 * np.pi * r ** 3}[self.dim]
        return self.density * vol

    def points(self, radius, center=None, with_indices: bool = True) -> PointSet:
        """All points within `radius` (Å) of `center`: see :meth:`iter_points`.

        Raises
        ------
        InvalidInputError
            When the patch (positions, internal coordinates and indices, twice while they
            are joined) would not fit in the available memory; the message gives the
            estimate. Use :meth:`iter_points` or :meth:`positions` for huge patches.
        """
        radius, _ = self._check_region(radius, center)
        n = self.expected_count(radius)
        per = 24 + 8 * self.internal_dim + (8 * self.lattice_dim if with_indices else 0)
        check_fits(2.0 * per * n, f"a patch of about {int(n):,} points with internal coordinates")
        return PointSet.concatenate(self.iter_points(radius, center, 1 << 22, with_indices), scheme=self)

    def model(self, radius, center=None, species="A", **model_options):
        """A :class:`kinemap.Model` of the patch (species: one label, see also
        :mod:`kinemap.quasi.decorate`)."""
        from ..model import Model  # lazy: the generators themselves need only numpy

        return Model(self.positions(radius, center), species, **model_options)

    def source(self, radius, center=None, species: str = "A"):
        """An atom source that streams the patch into :func:`kinemap.scatter` without ever
        holding all points (see :class:`StreamingPatch`)."""
        return StreamingPatch(self, radius, center, species)

    def lift(self, indices) -> tuple[np.ndarray, np.ndarray]:
        """Physical (N, 3) and internal (N, e) coordinates of lattice points n."""
        n = np.asarray(indices, dtype=np.float64).reshape(-1, self.lattice_dim)
        return embed3(n @ self.parallel.T), n @ self.internal.T

    # ---------------------------------------------------------------- Fourier module
    def module(self, indices) -> ModuleVectors:
        """Fourier-module vectors of integer indices.

        Parameters
        ----------
        indices : array_like (M, D) of int

        Returns
        -------
        ModuleVectors
            k (cycles/Å), k⊥ and q = 2πk (Å⁻¹, embedded in 3-D).
        """
        h = _as_indices(indices, self.lattice_dim)
        g = h.astype(np.float64) @ self._dual.T
        k = g[:, : self.dim]
        kp = g[:, self.dim:]
        return ModuleVectors(h, k, kp, embed3(2 * np.pi * k))

    def amplitude(self, indices) -> np.ndarray:
        """Predicted per-point amplitude A/N at module vectors: the window transform T_W(k⊥).

        Parameters
        ----------
        indices : array_like (M, D) of int

        Returns
        -------
        ndarray (M,), complex128
            lim A(q)/N for q = 2πk(h), with kinemap's exp(+i q·r) sign convention.
        """
        mv = self.module(indices)
        return self.window.transform(mv.k_perp)

    def _search_window(self, kperp_max: float) -> Window:
        lo, hi = [], []
        for dense in self.window.dense:
            if dense:
                lo.append(-kperp_max)
                hi.append(kperp_max)
            else:
                # discrete internal directions (integer levels): the module is periodic
                # with period 1 there; keep one representative in [−0.5, 0.5)
                lo.append(-0.5)
                hi.append(0.5 - 1e-9)
        return BoxWindow(lo, hi)

    def _dense_norm(self, k_perp: np.ndarray) -> np.ndarray:
        mask = np.array(self.window.dense, dtype=bool)
        return np.linalg.norm(k_perp[:, mask], axis=1)

    def search_module(self, k_center, k_radius: float, kperp_max: float) -> ModuleVectors:
        """Module vectors with |k − k_center| ≤ k_radius (cycles/Å) and |k⊥| ≤ kperp_max.

        Parameters
        ----------
        k_center : array_like (d,)
            Centre of the search ball in cycles/Å (physical components only).
        k_radius : float
        kperp_max : float
            Bound on the dense internal components. Discrete (level) components are
            reduced to one representative in [−0.5, 0.5).

        Notes
        -----
        The dual lattice is searched in a strip, like the points themselves; when the
        internal ball is the larger of the two, the roles of the spaces are swapped (the
        small physical ball acts as the window), which keeps the work proportional to the
        number of candidates.
        """
        if not (np.isfinite(kperp_max) and kperp_max > 0):
            raise InvalidInputError(f"`kperp_max` must be > 0, got {kperp_max!r}")
        if not (np.isfinite(k_radius) and k_radius > 0):
            raise InvalidInputError(f"`k_radius` must be > 0, got {k_radius!r}")
        kc = np.asarray(k_center, dtype=np.float64).reshape(self.dim)
        par = self._dual[: self.dim]
        perp = self._dual[self.dim:]
        dense = np.array(self.window.dense, dtype=bool)
        if kperp_max >= k_radius:
            key = ("swap", float(k_radius))
            enum = self._search_cache.get(key)
            if enum is None:
                enum = StripEnumerator(perp, par, BallWindow(np.zeros(self.dim), float(k_radius)))
                if len(self._search_cache) > 64:
                    self._search_cache.clear()
                self._search_cache[key] = enum
            r_int = float(np.sqrt(kperp_max ** 2 + 0.25 * (~dense).sum()))
            gen = enum.iter_chunks(np.zeros(self.internal_dim), r_int, 1 << 22, window_offset=kc)
        else:
            key = ("direct", float(kperp_max))
            enum = self._search_cache.get(key)
            if enum is None:
                enum = StripEnumerator(par, perp, self._search_window(kperp_max))
                self._search_cache[key] = enum
            gen = enum.iter_chunks(kc, float(k_radius), 1 << 22)
        parts = [n for n, _, _ in gen]
        h = np.concatenate(parts) if parts else np.zeros((0, self.lattice_dim), dtype=np.int64)
        mv = self.module(h)
        keep = self._dense_norm(mv.k_perp) <= kperp_max
        if (~dense).any():
            z = mv.k_perp[:, ~dense]
            keep &= ((z >= -0.5 - 1e-9) & (z < 0.5 - 1e-9)).all(axis=1)
        keep &= np.linalg.norm(mv.k_par - kc, axis=1) <= k_radius
        return self.module(h[keep])

    def module_vectors(self, q_max: float, kperp_max: float, min_intensity: float = 0.0) -> ModuleVectors:
        """All module vectors with |q| ≤ q_max (Å⁻¹) and |k⊥| ≤ kperp_max, strongest first.

        Parameters
        ----------
        q_max : float
            Largest |q| = 2π|k| in Å⁻¹.
        kperp_max : float
            Largest |k⊥| (dense internal components).
        min_intensity : float
            Drop vectors whose predicted |T_W(k⊥)|² is below this.

        Returns
        -------
        ModuleVectors sorted by decreasing predicted intensity, then |q|.
        """
        mv = self.search_module(np.zeros(self.dim), float(q_max) / (2 * np.pi), kperp_max)
        inten = np.abs(self.window.transform(mv.k_perp)) ** 2 if len(mv) else np.zeros(0)
        keep = inten >= min_intensity
        order = np.lexsort((np.linalg.norm(mv.q[keep], axis=1), -inten[keep]))
        return self.module(mv.indices[keep][order])

    # ---------------------------------------------------------------- inflation
    def inflation_matrix(self, power: int = 1):
        """The integer matrix S with k(S h) = λ^power k(h) on the Fourier module, if any.

        The physical components scale by λ^power (λ = ``inflation_factor``); the dense
        internal ones by a factor c (tried: ±λ′^power with λ′ = −1/λ the Galois conjugate)
        and discrete level components by a small integer. Returns ``(S, c)`` or None when
        the module is not invariant under that power.
        """
        if self.inflation_factor is None:
            raise InvalidInputError(f"scheme {self.name!r} has no inflation factor")
        lam = float(self.inflation_factor) ** power
        conj = (-1.0 / float(self.inflation_factor)) ** power
        big_d, d = self.lattice_dim, self.dim
        g = self._dual
        g_inv = np.linalg.inv(g)
        dense = np.array(self.window.dense, dtype=bool)
        for c in (conj, -conj):
            for lev in (1, -1, 2, -2, 3, -3):
                diag = np.concatenate([np.full(d, lam), np.where(dense, c, float(lev))])
                s = g_inv @ np.diag(diag) @ g
                sr = np.rint(s)
                if np.abs(s - sr).max() < 1e-8:
                    return sr.astype(np.int64), c
        return None

    def inflation(self, max_power: int = 6):
        """Smallest power p ≥ 1 with an integer inflation matrix: ``(p, λ^p, S, c)``."""
        for p in range(1, max_power + 1):
            r = self.inflation_matrix(p)
            if r is not None:
                return p, float(self.inflation_factor) ** p, r[0], r[1]
        raise InvalidInputError(f"no inflation symmetry up to power {max_power} for {self.name!r}")

    # ---------------------------------------------------------------- shifts, approximants
    def canonical_window(self, internal=None) -> Window:
        """The window rebuilt as the projection of ``offset + [0, 1]^D`` (unshifted)."""
        if self.hypercube_offset is None or self.window_kind is None:
            raise InvalidInputError(f"scheme {self.name!r} has no canonical window description")
        return canonical_window(self.internal if internal is None else internal,
                                self.hypercube_offset, self.window_kind)

    def with_shift(self, shift) -> "CutProjectScheme":
        """The same scheme with the window moved to ``W₀ + shift`` (a phason shift)."""
        s = np.asarray(shift, dtype=np.float64).reshape(-1)
        if s.shape != (self.internal_dim,) or not np.isfinite(s).all():
            raise InvalidInputError(f"`shift` must be {self.internal_dim} finite numbers, got {shift!r}")
        base = self.window.translated(-self.shift)
        return self._replace(window=base.translated(s), shift=s)

    def _replace(self, **kw) -> "CutProjectScheme":
        args = dict(name=self.name, parallel=self.parallel, internal=self.internal, window=self.window,
                    index_basis=self.index_basis, hypercube_offset=self.hypercube_offset,
                    window_kind=self.window_kind, shift=self.shift, inflation_factor=self.inflation_factor,
                    rational_form=self.rational_form, periods=self.periods, edge_length=self.edge_length)
        args.update(kw)
        return CutProjectScheme(args.pop("name"), args.pop("parallel"), args.pop("internal"),
                                args.pop("window"), **args)

    def approximant(self, ratio, name=None) -> "CutProjectScheme":
        """A periodic approximant: the irrational ξ of the physical space replaced by a
        rational `ratio` (e.g. τ → F_{n+1}/F_n, 1+√2 → ratio of Pell numbers).

        The tiles keep their shapes (positions are still P n). The internal map is sheared
        (a linear phason strain) so that it vanishes on the lattice vectors of the rational
        physical space, which become the periods; the window is the canonical projection of
        the hypercube under the new map.

        Parameters
        ----------
        ratio : fractions.Fraction, int, str or (p, q)
            Rational replacement of ξ (e.g. ``(3, 2)`` or ``"3/2"``); one value for all
            rows or a sequence with one per physical row.

        Returns
        -------
        CutProjectScheme with ``periods`` set; see :meth:`cell` and :meth:`unit_cell`.
        """
        from fractions import Fraction

        if self.rational_form is None:
            raise InvalidInputError(f"scheme {self.name!r} has no rational form: it cannot make approximants")
        u, v, row_scale, xi = self.rational_form

        def as_frac(r):
            if isinstance(r, tuple) and len(r) == 2:
                return Fraction(int(r[0]), int(r[1]))
            return Fraction(r)

        try:
            if isinstance(ratio, (list,)) or (isinstance(ratio, tuple) and len(ratio) != 2):
                rs = [as_frac(r) for r in ratio]
            else:
                rs = [as_frac(ratio)] * self.dim
        except (TypeError, ValueError, ZeroDivisionError) as exc:
            raise InvalidInputError(f"`ratio` must be a rational number like (3, 2) or '3/2': {exc}") from None
        if len(rs) != self.dim:
            raise InvalidInputError(f"`ratio` needs one value or {self.dim} values, got {len(rs)}")
        rows = []
        for i in range(self.dim):
            rows.append([Fraction(u[i][j]) + rs[i] * Fraction(v[i][j]) for j in range(self.lattice_dim)])
        basis = saturated_lattice(rows)
        if len(basis) != self.dim:
            raise InvalidInputError(f"the rational physical space has {len(basis)} lattice periods, expected {self.dim}")
        periods = reduce_periods(np.array(basis, dtype=np.int64), self.parallel)
        px = self.parallel @ periods.T  # (d, d): columns are period vectors in Å
        py = self.internal @ periods.T
        shear = py @ np.linalg.inv(px)
        dense = np.array(self.window.dense, dtype=bool)
        shear[~dense] = 0.0
        internal = self.internal - shear @ self.parallel
        if np.abs(internal @ periods.T).max() > 1e-9:
            raise InvalidInputError("internal map does not vanish on the periods (not an approximant)")
        window = canonical_window(internal, self.hypercube_offset, self.window_kind).translated(self.shift)
        label = name or f"{self.name} approximant {'/'.join(str(r) for r in rs[:1])}"
        return self._replace(name=label, internal=internal, window=window, periods=periods,
                             rational_form=None)

    def cell(self) -> np.ndarray:
        """Period vectors (rows, Å) of an approximant, as a (d, d) array."""
        if self.periods is None:
            raise InvalidInputError(f"scheme {self.name!r} is not periodic (no periods)")
        return (self.parallel @ self.periods.T).T

    def cell3(self, pad: float = 1.0) -> np.ndarray:
        """The 3x3 cell (rows a, b, c in Å) of an approximant; missing directions of chains
        and planar sets get a vector of length `pad` along the unused axes."""
        c = np.eye(3) * pad
        c[: self.dim, : self.dim] = self.cell()
        return c

    def unit_cell(self, with_indices: bool = True) -> PointSet:
        """The points of one period cell of an approximant (fractional coordinates in
        [0, 1)^d), found by enumerating a covering ball and reducing modulo the periods."""
        cell = self.cell()
        corners = np.array(list(product([0.0, 1.0], repeat=self.dim))) @ cell
        center = 0.5 * cell.sum(axis=0)
        radius = float(np.linalg.norm(corners - center, axis=1).max()) * (1 + 1e-9) + 1e-6
        ps = self.points(radius, center, with_indices=True)
        frac = ps.positions[:, : self.dim] @ np.linalg.inv(cell)
        eps = 1e-9
        inside = ((frac >= -eps) & (frac < 1 - eps)).all(axis=1)
        out = ps.subset(inside)
        if not with_indices:
            out.indices = None
        return out

    def approximant_block(self, repeats) -> PointSet:
        """`repeats` (d integers) copies of the unit cell, with indices."""
        reps = np.asarray(repeats, dtype=np.int64).reshape(-1)
        if reps.shape != (self.dim,) or (reps < 1).any():
            raise InvalidInputError(f"`repeats` must be {self.dim} positive integers, got {repeats!r}")
        uc = self.unit_cell()
        parts = []
        for shift in product(*[range(int(r)) for r in reps]):
            t = np.asarray(shift, dtype=np.int64) @ self.periods
            n = uc.indices + t
            x, y = self.lift(n)
            parts.append(PointSet(x, y, n, self))
        return PointSet.concatenate(parts)


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
        order = np.argsort(lengths)
        b = b[order]
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
    order = np.argsort(lens)
    chosen = []
    for i in order:
        if lens[i] < 1e-12:
            continue
        trial = chosen + [cands[i]]
        if np.linalg.matrix_rank(np.array(trial, dtype=float)) == len(trial):
            chosen = trial
            if len(chosen) == d:
                det = abs(round(np.linalg.det(np.asarray(np.array(chosen) @ np.array(chosen).T, dtype=float)) ** 0.5))
                if det == det0:
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


def canonical_window(internal: np.ndarray, offset: np.ndarray, kind: str) -> Window:
    """Internal projection of the hypercube ``offset + [0, 1]^D``.

    Parameters
    ----------
    internal : ndarray (e, D)
    offset : ndarray (D,)
    kind : {"zonotope", "sliced"}
        "sliced": the last internal row holds integer levels (Penrose); the window is the
        polygon conv{Σ_{j∈S} e_j⊥ : |S| = ι} (a hypersimplex projection) on each inner level.
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
            return PolygonWindow(_zonogon(q.T, np.eye(2)) + center)
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
            pts = [q[:2, list(s)].sum(axis=1) + base[:2] for s in combinations(range(big_d), iota)]
            pts = np.array(pts)
            try:
                hull = convex_hull_2d(pts)
            except InvalidInputError:
                continue
            levels.append(lev0 + iota * float(lev_row[0]))
            polys.append(PolygonWindow(hull))
        return SlicedWindow(levels, polys)
    raise InvalidInputError(f"unknown window kind {kind!r}")


class StreamingPatch:
    """An atom source for :func:`kinemap.scatter` that generates a patch chunk by chunk.

    Parameters
    ----------
    scheme : CutProjectScheme
    radius : float
        Patch radius (Å).
    center : array_like, optional
    species : str
        One label for every point.

    Notes
    -----
    Each call to :meth:`iter_chunks` regenerates the points; nothing is kept, so the memory
    use is one chunk however large the patch.
    """

    cell = None  #: no lattice: a patch of a quasicrystal
    box = None  #: not periodic

    def __init__(self, scheme: CutProjectScheme, radius, center=None, species: str = "A"):
        self.scheme = scheme
        self.radius, self.center = scheme._check_region(radius, center)
        if not isinstance(species, str) or not species:
            raise InvalidInputError(f"`species` must be one non-empty label, got {species!r}")
        self.species = species
        self._count = None

    def iter_chunks(self, chunk_atoms: int):
        """Yield the patch as :class:`kinemap.Model` pieces of at most `chunk_atoms` atoms."""
        from ..model import Model

        for pos in self.scheme.iter_positions(self.radius, self.center, chunk_points=int(chunk_atoms)):
            yield Model(pos, self.species)

    @property
    def n_atoms(self) -> int:
        """Number of points (counted once by a generation pass, then cached)."""
        if self._count is None:
            self._count = sum(len(p) for p in self.scheme.iter_positions(self.radius, self.center))
        return self._count

    def species_labels(self) -> list[str]:
        return [self.species]

    def describe(self) -> dict:
        return {"generator": self.scheme.name, "radius": self.radius, "center": self.center.tolist(),
                "species": self.species, "density": self.scheme.density}


__all__ = ["CutProjectScheme", "PointSet", "ModuleVectors", "StreamingPatch", "canonical_window",
           "embed3", "reduce_periods"]
