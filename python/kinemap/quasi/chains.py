"""One-dimensional quasiperiodic chains: Fibonacci and the metallic-mean family.

The metallic mean λ_m = (m + √(m² + 4))/2 (m = 1: golden mean τ, m = 2: silver mean 1+√2)
is the inflation factor of the substitution L → L^m S, S → L. Its fixed point, with long
tile L = λ_m·S, is the cut-and-project set of Z² with

* lattice step "S" ↦ physical S, internal S;   step "L" ↦ physical L, internal −S/λ_m;
* window [−S, S/λ_m) + shift (docs/references.md, Fibonacci: [−1, τ−1) for S = 1);
* positions x_n = (n − b_n) S + b_n L with b_n = ⌊(n − c + 1) λ/(λ+1)⌋, c = shift/S
  (for m = 1, c = 0: x_n = nS + (L − S)⌊(n+1)/τ⌋, docs/references.md);
* Fourier module k = (h + h′λ)/(√(m²+4)·S), k⊥ = (h′/λ − h)/(√(m²+4)·S) for L = λS, with
  the window transform |T| = |sinc(π(1 + 1/λ)S k⊥)|; for Fibonacci (0,1): 0.701998,
  (1,0): 0.335745, (1,1): 0.878991, (2,1): extinct.

Words grow as w_{n+1} = w_n^m w_{n−1} (w_{−1} = S, w_0 = L), so the transform of the points
of w_n (left tile ends, first at 0) obeys the exact recursion

    G_{n+1}(q) = Σ_{r<m} e^{i q r ℓ_n} G_n(q) + e^{i q m ℓ_n} G_{n−1}(q),

with ℓ_n the length of w_n (for m = 1: G_{n+1} = G_n + e^{iqℓ_n} G_{n−1}, G_0 = 1,
G_1 = 1 + e^{iqL}). :func:`chain_transform` evaluates it in O(n) per q. The phases q·ℓ_n
(ℓ_60 ≈ 10¹² Å) are reduced modulo 2π in double-double arithmetic, treating q, S and L as
exact binary numbers, so the result is as accurate as the inputs allow.
"""

from __future__ import annotations

import decimal
import math

import numpy as np

from .._shared.memory import check_fits
from .._shared.validate import real_array, real_number, whole_number
from ..errors import InvalidInputError
from ._precise import dd_floor, dd_frac, dd_mul, inv_two_pi_dd, metallic_mean_decimal, split_decimal, two_prod, two_sum
from .points import STREAM_HINT, PointSet, embed3
from .scheme import CutProjectScheme
from .windows import IntervalWindow

#: Largest generation whose tile counts stay exact in float64 arithmetic (< 2**53).
_MAX_COUNT = 2 ** 53


def _length(value, name: str) -> float:
    return real_number(value, name, minimum=0.0, exclusive_minimum=True)


class ChainScheme(CutProjectScheme):
    """A metallic-mean chain as a cut-and-project scheme (D = 2, d = 1).

    Use :func:`fibonacci` or :func:`metallic_chain` to make one. Module indices are
    (h, h′) with k = (h + h′λ)/(√(m²+4)·S) when L = λS (docs/references.md convention).
    """

    def __init__(self, m: int, short: float, long: float, shift: float):
        self.m = m
        with_dec = metallic_mean_decimal(m)
        lam = float(with_dec)
        self.lam = lam
        self.short, self.long = short, long
        self.shift_value = shift
        par = np.array([[short, long]])
        perp = np.array([[short, -short / lam]])
        window = IntervalWindow(-short + shift, short / lam + shift)
        # indices (h, h') -> dual coordinates (h_S, h_L) = (h', h + m h')
        basis = np.array([[0, 1], [1, m]], dtype=np.int64)
        name = "Fibonacci chain" if m == 1 else f"metallic-mean chain (m={m})"
        super().__init__(name, par, perp, window, index_basis=basis, hypercube_offset=np.array([-1.0, -1.0]),
                         window_kind="zonotope", shift=[shift], inflation_factor=lam,
                         rational_form=([[1, 0]], [[0, 1]], [short], long / short), edge_length=short)
        with decimal.localcontext() as ctx:
            ctx.prec = 50
            with_one = with_dec / (with_dec + 1)
        self._alpha = split_decimal(with_one)  # λ/(λ+1) as double-double

    def _replace(self, **kw):
        # approximants and shifted copies become plain cut-and-project schemes, except for a
        # pure shift, which keeps the closed form
        if set(kw) == {"window", "shift"}:
            return ChainScheme(self.m, self.short, self.long, float(np.asarray(kw["shift"]).reshape(-1)[0]))
        return CutProjectScheme._replace(self, **kw)

    # ------------------------------------------------------------------ closed form
    def long_counts(self, n) -> np.ndarray:
        """b_n = ⌊(n − c + 1)·λ/(λ+1)⌋: the number of long steps among the first n steps, so
        that point n is x_n = (n − b_n) S + b_n L (c = shift/S).

        Computed with a double-double product and floor, exact for |n| < 2**52."""
        n = np.asarray(n, dtype=np.int64)
        if np.abs(n).max(initial=0) >= 2 ** 52:
            raise InvalidInputError("tile index too large for exact evaluation (|n| must be < 2**52)")
        c = self.shift_value / self.short
        hi, lo = two_sum(n.astype(np.float64) + 1.0, -c)
        phi, plo = dd_mul(hi, lo, self._alpha[0], self._alpha[1])
        return dd_floor(phi, plo).astype(np.int64)

    def chain_points(self, start: int, stop: int) -> PointSet:
        """Points n = start … stop−1 of the chain (closed form; no search).

        Returns
        -------
        PointSet with positions (x, 0, 0) in Å, internal coordinates and lattice
        coordinates (number of short steps, number of long steps).
        """
        start = whole_number(start, "start")
        stop = whole_number(stop, "stop", minimum=start)
        check_fits(80.0 * (stop - start), f"a chain of {stop - start:,} points", hint=STREAM_HINT)
        n = np.arange(start, stop, dtype=np.int64)
        b = self.long_counts(n)
        a = n - b
        x = a * self.short + b * self.long
        y = self.short * (a - b / self.lam)
        idx = np.column_stack([a, b])
        return PointSet(embed3(x[:, None]), y[:, None], idx, self)

    def iter_chain(self, n_points: int, start: int = 0, chunk_points: int = 1 << 22):
        """Stream `n_points` consecutive points from index `start` in chunks (PointSet)."""
        n_points = whole_number(n_points, "n_points", minimum=0)
        chunk_points = whole_number(chunk_points, "chunk_points", minimum=1)
        start = whole_number(start, "start")
        for s in range(start, start + n_points, chunk_points):
            yield self.chain_points(s, min(start + n_points, s + chunk_points))

    def iter_points(self, radius, center=None, chunk_points: int = 1 << 18, with_indices: bool = False):
        """Points with |x − center| ≤ radius, streamed by the closed form."""
        radius, c = self.check_region(radius, center)
        chunk_points = whole_number(chunk_points, "chunk_points", minimum=1)
        lo, hi = c[0] - radius, c[0] + radius
        # x_n ≈ n · mean tile length; bracket the index range generously and filter
        mean = 1.0 / self.density
        n0 = int(math.floor(lo / mean)) - 4
        n1 = int(math.ceil(hi / mean)) + 4
        for s in range(n0, n1 + 1, chunk_points):
            ps = self.chain_points(s, min(n1 + 1, s + chunk_points))
            keep = np.abs(ps.positions[:, 0] - c[0]) <= radius * (1 + 1e-12)
            ps = ps.subset(keep, with_indices=with_indices)
            if len(ps):
                yield ps

    # ------------------------------------------------------------------ substitution
    def word(self, generation: int) -> np.ndarray:
        """Substitution word w_n as a uint8 array (1 = long L, 0 = short S).

        w_{−1} = S, w_0 = L, w_{n+1} = w_n^m w_{n−1} (for Fibonacci: L, LS, LSL, LSLLS, …).
        """
        g = _generation(generation, self.m, limit=2 ** 31)
        prev, cur = np.array([0], dtype=np.uint8), np.array([1], dtype=np.uint8)
        for _ in range(g):
            prev, cur = cur, np.concatenate([cur] * self.m + [prev])
        return cur if g >= 0 else prev

    def substitution_points(self, generation: int) -> PointSet:
        """Points (left tile ends, the first at 0) of the word w_n built by substitution."""
        w = self.word(generation).astype(np.int64)
        b = np.concatenate([[0], np.cumsum(w)])[:-1]
        n = np.arange(len(w), dtype=np.int64)
        a = n - b
        x = a * self.short + b * self.long
        y = self.short * (a - b / self.lam)
        return PointSet(embed3(x[:, None]), y[:, None], np.column_stack([a, b]), self)

    def tile_counts(self, generation: int) -> tuple[int, int]:
        """(number of S, number of L) in w_n (exact Python integers)."""
        g = _generation(generation, self.m, limit=None)
        s_prev, l_prev, s_cur, l_cur = 1, 0, 0, 1
        for _ in range(g):
            s_prev, l_prev, s_cur, l_cur = s_cur, l_cur, self.m * s_cur + s_prev, self.m * l_cur + l_prev
        return (s_cur, l_cur) if g >= 0 else (s_prev, l_prev)

    def n_tiles(self, generation: int) -> int:
        """Number of tiles (= points) of w_n."""
        s, l_ = self.tile_counts(generation)
        return s + l_

    def transform(self, q, generation: int) -> np.ndarray:
        """G_n(q) = Σ_{points x of w_n} exp(i q x), by the exact recursion (O(n) per q).

        See :func:`chain_transform`.
        """
        return chain_transform(self, q, generation)


def _generation(generation, m, limit) -> int:
    g = whole_number(generation, "generation", minimum=-1)
    # estimate the word length λ^g; refuse words that cannot be held
    lam = float(metallic_mean_decimal(m))
    if limit is not None and g > 0 and g * math.log(lam) > math.log(limit):
        raise InvalidInputError(f"generation {g} has about {lam ** g:.3g} tiles, too many to build "
                                "(chain_transform gives its transform without building it)")
    return g


def fibonacci(short: float = 1.0, long: float | None = None, shift: float = 0.0) -> ChainScheme:
    """The Fibonacci chain (L → LS, S → L) as a cut-and-project scheme.

    Parameters
    ----------
    short : float
        Short tile length S in Å.
    long : float, optional
        Long tile length L in Å (default τS; other values give a deformed chain with the
        same tile sequence, still a model set).
    shift : float
        Phason shift of the window [−S, S/τ) in internal-space Å. Shift 0 reproduces the
        substitution fixed point.

    Returns
    -------
    ChainScheme
        Density 1/(mean tile length); τ/√5 = 0.723607 per Å for S = 1, L = τ.
    """
    return metallic_chain(1, short, long, shift)


def metallic_chain(m: int = 1, short: float = 1.0, long: float | None = None, shift: float = 0.0) -> ChainScheme:
    """Metallic-mean chain L → L^m S, S → L (m = 1 Fibonacci, m = 2 silver/octonacci, …).

    Parameters
    ----------
    m : int
        Metallic-mean index (λ_m = (m + √(m²+4))/2).
    short, long : float
        Tile lengths in Å (long defaults to λ_m·short).
    shift : float
        Phason shift of the window (internal-space Å).

    Returns
    -------
    ChainScheme
    """
    m = whole_number(m, "m (the metallic-mean index)", minimum=1)
    s = _length(short, "short")
    lam = float(metallic_mean_decimal(m))
    ln = lam * s if long is None else _length(long, "long")
    return ChainScheme(m, s, ln, real_number(shift, "shift"))


def chain_transform(chain: ChainScheme, q, generation: int) -> np.ndarray:
    """Transform of the word w_n of a substitution chain by the exact recursion.

    Parameters
    ----------
    chain : ChainScheme
        From :func:`fibonacci` or :func:`metallic_chain` (its tile lengths are used).
    q : array_like, shape (M,) or (M, 3)
        Wave numbers along the chain in Å⁻¹ (only the x component of 3-vectors is used:
        the chain lies on the x axis).
    generation : int
        n ≥ −1; w_n has ``chain.n_tiles(n)`` points (about λ^n; generation 60 of the
        Fibonacci chain holds 4·10¹² tiles).

    Returns
    -------
    ndarray (M,), complex128
        G_n(q) = Σ_j exp(i q x_j) over the left ends of the tiles of w_n (first at 0).

    Raises
    ------
    InvalidInputError
        For generations whose tile counts exceed 2**53 (about generation 74 for m = 1).

    Notes
    -----
    G_{n+1} = Σ_{r<m} e^{iqrℓ_n} G_n + e^{iqmℓ_n} G_{n−1} with ℓ_n = a_n S + b_n L the
    length of w_n (a_n, b_n tile counts). Phases are reduced mod 2π in double-double
    arithmetic (q·S/2π and q·L/2π to ~32 digits, times the exact counts), so the only error
    is the rounding of the recursion itself, ~n·1e-16 relative.
    """
    if not isinstance(chain, ChainScheme):
        raise InvalidInputError(f"`chain` must be a ChainScheme (fibonacci()/metallic_chain()), "
                                f"got {type(chain).__name__}")
    qa = real_array(q, "q")
    if qa.ndim == 2 and qa.shape[1] == 3:
        qa = qa[:, 0]
    elif qa.ndim == 0:
        qa = qa.reshape(1)
    if qa.ndim != 1:
        raise InvalidInputError(f"`q` must have shape (M,) or (M, 3), got {np.shape(q)}")
    g = _generation(generation, chain.m, limit=None)
    inv_hi, inv_lo = inv_two_pi_dd()

    def turns_of(length):
        p, e = two_prod(qa, length)
        return dd_mul(p, e, inv_hi, inv_lo)  # q·length/2π in double-double

    ts = turns_of(chain.short)
    tl = turns_of(chain.long)

    def frac_turns(count_s, count_l):
        if count_s >= _MAX_COUNT or count_l >= _MAX_COUNT:
            raise InvalidInputError("generation too large: tile counts exceed 2**53")
        out = np.zeros_like(qa)
        for cnt, (hi, lo) in ((count_s, ts), (count_l, tl)):
            if cnt == 0:
                continue
            p, e = two_prod(float(cnt), hi)
            out = out + dd_frac(p, e + float(cnt) * lo)
        return out - np.round(out)

    m = chain.m
    g_prev = np.ones_like(qa, dtype=np.complex128)  # w_{-1} = S: one point at 0
    g_cur = np.ones_like(qa, dtype=np.complex128)   # w_0 = L
    if g == -1:
        return g_prev
    s_prev, l_prev, s_cur, l_cur = 1, 0, 0, 1
    for _ in range(g):
        f = frac_turns(s_cur, l_cur)  # ℓ_n·q/2π mod 1
        acc = np.zeros_like(g_cur)
        for r in range(m):
            acc += np.exp(2j * np.pi * ((r * f) % 1.0)) * g_cur
        g_new = acc + np.exp(2j * np.pi * ((m * f) % 1.0)) * g_prev
        g_prev, g_cur = g_cur, g_new
        s_prev, l_prev, s_cur, l_cur = s_cur, l_cur, m * s_cur + s_prev, m * l_cur + l_prev
    return g_cur


__all__ = ["ChainScheme", "fibonacci", "metallic_chain", "chain_transform"]
