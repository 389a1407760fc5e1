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

Patches of a scheme reach kinemap's engines through :meth:`CutProjectScheme.patch`, a
streaming atom source (:mod:`.patch`); approximants are built in :mod:`.approximants`.

q-vectors follow kinemap: q = 2πk (Å⁻¹). Physical positions are embedded in 3-D as (x, 0, 0)
for chains and (x, y, 0) for planar tilings; module vectors likewise.
"""

from __future__ import annotations

import numpy as np

from .._shared.memory import check_fits
from .._shared.validate import real_array, real_number, whole_number
from ..errors import InvalidInputError
from . import approximants as _approx
from ._enumerate import StripEnumerator
from .patch import Patch
from .points import STREAM_HINT, ModuleVectors, PointSet, as_indices, embed3
from .windows import BallWindow, BoxWindow, Window, canonical_window


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
        self.index_basis = (np.eye(big_d, dtype=np.int64) if index_basis is None
                            else np.asarray(index_basis, dtype=np.int64))
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
        self._enum: StripEnumerator | None = None
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

    def check_region(self, radius, center) -> tuple[float, np.ndarray]:
        """`radius` (Å, > 0) and `center` (d numbers in Å, default the origin) checked."""
        radius = real_number(radius, "radius", minimum=0.0, exclusive_minimum=True)
        if center is None:
            return radius, np.zeros(self.dim)
        return radius, real_array(np.atleast_1d(center), "center", shape=(self.dim,))

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
        radius, c = self.check_region(radius, center)
        chunk_points = whole_number(chunk_points, "chunk_points", minimum=1)
        for n, x, y in self._enumerator().iter_chunks(c, radius, chunk_points):
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
        radius, c = self.check_region(radius, center)
        cap = int(self.expected_count(radius) * 1.02) + 1024
        check_fits(24.0 * cap, f"a patch of about {cap:,} points (positions)", hint=STREAM_HINT)
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
        r = real_number(radius, "radius", minimum=0.0)
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
        radius, _ = self.check_region(radius, center)
        n = self.expected_count(radius)
        per = 24 + 8 * self.internal_dim + (8 * self.lattice_dim if with_indices else 0)
        check_fits(2.0 * per * n, f"a patch of about {int(n):,} points with internal coordinates",
                   hint=STREAM_HINT)
        return PointSet.concatenate(self.iter_points(radius, center, 1 << 22, with_indices), scheme=self)

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
        h = as_indices(indices, self.lattice_dim)
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
        # discrete internal directions (integer levels): the module is periodic with period 1
        # there; keep one representative in [−0.5, 0.5)
        dense = np.array(self.window.dense, dtype=bool)
        return BoxWindow(np.where(dense, -kperp_max, -0.5), np.where(dense, kperp_max, 0.5 - 1e-9))

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
        kperp_max = real_number(kperp_max, "kperp_max", minimum=0.0, exclusive_minimum=True)
        k_radius = real_number(k_radius, "k_radius", minimum=0.0, exclusive_minimum=True)
        kc = real_array(np.atleast_1d(k_center), "k_center", shape=(self.dim,))
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
        keep = np.linalg.norm(mv.k_perp[:, dense], axis=1) <= kperp_max
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
        q_max = real_number(q_max, "q_max", minimum=0.0, exclusive_minimum=True)
        min_intensity = real_number(min_intensity, "min_intensity", minimum=0.0)
        mv = self.search_module(np.zeros(self.dim), q_max / (2 * np.pi), kperp_max)
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
        power = whole_number(power, "power", minimum=1)
        lam = float(self.inflation_factor) ** power
        conj = (-1.0 / float(self.inflation_factor)) ** power
        d = self.dim
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
        for p in range(1, whole_number(max_power, "max_power", minimum=1) + 1):
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

    def with_shift(self, shift) -> CutProjectScheme:
        """The same scheme with the window moved to ``W₀ + shift`` (a phason shift)."""
        s = real_array(np.atleast_1d(shift), "shift", shape=(self.internal_dim,))
        base = self.window.translated(-self.shift)
        return self._replace(window=base.translated(s), shift=s)

    def _replace(self, **kw) -> CutProjectScheme:
        args = dict(name=self.name, parallel=self.parallel, internal=self.internal, window=self.window,
                    index_basis=self.index_basis, hypercube_offset=self.hypercube_offset,
                    window_kind=self.window_kind, shift=self.shift, inflation_factor=self.inflation_factor,
                    rational_form=self.rational_form, periods=self.periods, edge_length=self.edge_length)
        args.update(kw)
        return CutProjectScheme(args.pop("name"), args.pop("parallel"), args.pop("internal"),
                                args.pop("window"), **args)

    # ---------------------------------------------------------------- patches (atoms)
    def patch(self, radius=None, *, center=None, cells=None, species="A", occupancy=None, b_iso=None,
              pad: float = 1.0) -> Patch:
        """A patch of this set as a streaming atom source: the one way to make atoms of it.

        Parameters
        ----------
        radius : float, optional
            The points within `radius` Å of `center`: a finite, non-periodic patch
            (``box`` None).
        center : array_like (d,), optional
            Centre of the patch in Å (default the origin; with `radius` only).
        cells : int or sequence of int, optional
            Approximants only, instead of `radius`: this many period cells along each period
            (d whole numbers), a periodic crystal whose ``box`` is the block and whose
            ``cell`` is :meth:`cell3`.
        species : str or callable
            One label for every point, or a rule ``species(points) -> labels`` applied to
            every streamed :class:`~kinemap.quasi.points.PointSet` chunk (internal coordinates
            and lattice indices included), e.g.
            ``lambda p: quasi.species_by_perp(p, radii=[0.8], labels=["Mn", "Al"])``. The
            rule must decide each point from the point alone.
        occupancy, b_iso : float or dict, optional
            One value, or ``{label: value}``, as for :class:`kinemap.Model`.
        pad : float
            Length (Å) of the cell vectors along the directions that a chain or a planar set
            does not fill (approximants: see :meth:`cell3`).

        Returns
        -------
        Patch
            Follows :class:`kinemap.model.AtomSource`: pass it to :func:`kinemap.scatter`
            (atoms are generated chunk by chunk and never held together) or call
            ``.read()`` for one in-memory :class:`kinemap.Model`.

        Raises
        ------
        InvalidInputError
            Without exactly one of `radius` and `cells`, with `cells` on a scheme that is not
            periodic, or for bad values.

        Notes
        -----
        A round patch of radius R holds about density × ball volume points
        (:meth:`expected_count`; density = vol W / |det M| per Å^d).

        Examples
        --------
        >>> from kinemap import quasi
        >>> patch = quasi.octagonal(edge=2.5).patch(20.0, species="Al")
        >>> patch.n_atoms
        241
        >>> patch.read().species_labels()
        ['Al']
        """
        return Patch(self, radius, center=center, cells=cells, species=species, occupancy=occupancy,
                     b_iso=b_iso, pad=pad)

    # ---------------------------------------------------------------- approximants
    def approximant(self, ratio, name: str | None = None) -> CutProjectScheme:
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
            rows or a list with one per physical row. Floats are refused (not exact).
        name : str, optional

        Returns
        -------
        CutProjectScheme
            With ``periods`` set; see :meth:`cell`, :meth:`unit_cell` and
            ``patch(cells=...)``.
        """
        return _approx.make_approximant(self, ratio, name)

    @property
    def is_periodic(self) -> bool:
        """Whether the set is periodic (an approximant)."""
        return self.periods is not None

    def cell(self) -> np.ndarray:
        """Period vectors (rows, Å) of an approximant, as a (d, d) array."""
        return _approx.period_cell(self)

    def cell3(self, pad: float = 1.0) -> np.ndarray:
        """The 3x3 cell (rows a, b, c in Å) of an approximant; the directions a chain or a
        planar set does not fill get a vector of length `pad` Å along the unused axes."""
        return _approx.cell3(self, pad)

    def unit_cell(self, with_indices: bool = True) -> PointSet:
        """The points of one period cell of an approximant (fractional coordinates in
        [0, 1)^d), found by enumerating a covering ball."""
        return _approx.unit_cell(self, with_indices)

    def approximant_block(self, repeats) -> PointSet:
        """`repeats` (d whole numbers) copies of the unit cell of an approximant, with
        indices (the atoms of such a block: ``patch(cells=repeats)``)."""
        return _approx.approximant_block(self, repeats)


__all__ = ["CutProjectScheme"]
