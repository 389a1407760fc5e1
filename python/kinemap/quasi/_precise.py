"""Exact and extended-precision helpers for the quasicrystal code.

* High-precision constants (golden and metallic means, 1/2π) computed with :mod:`decimal`
  and split into double-double pairs ``(hi, lo)`` with ``hi + lo`` exact to ~32 digits.
* Vectorised double-double arithmetic (Dekker/Knuth error-free transformations) for phases
  ``q·ℓ`` with ℓ up to ~10¹³ Å, where a plain double product loses the phase entirely.
* Integer linear algebra on small matrices (exact, Python integers and fractions): the
  integer kernel of a matrix and the saturated lattice of a rational subspace, used to find
  the periods of approximants.
"""

from __future__ import annotations

import decimal
from fractions import Fraction

import numpy as np

_PREC = 50  # decimal digits for the constants


def _dec_pi() -> decimal.Decimal:
    """π to the current decimal precision (the series recipe of the Python `decimal` docs)."""
    decimal.getcontext().prec += 2
    three = decimal.Decimal(3)
    lasts, t, s = decimal.Decimal(0), three, three
    n, na, d, da = 1, 0, 0, 24
    while s != lasts:
        lasts = s
        n, na = n + na, na + 8
        d, da = d + da, da + 32
        t = (t * n) / d
        s += t
    decimal.getcontext().prec -= 2
    return +s


def split_decimal(x: decimal.Decimal) -> tuple[float, float]:
    """Split a high-precision number into doubles ``(hi, lo)`` with hi + lo ≈ x to ~1e-32."""
    hi = float(x)
    lo = float(x - decimal.Decimal(hi))
    return hi, lo


def metallic_mean_decimal(m: int) -> decimal.Decimal:
    """λ_m = (m + √(m² + 4)) / 2 as a high-precision Decimal (m = 1 is the golden mean τ)."""
    with decimal.localcontext() as ctx:
        ctx.prec = _PREC
        return (decimal.Decimal(m) + (decimal.Decimal(m * m + 4)).sqrt()) / 2


def metallic_mean(m: int) -> float:
    """λ_m = (m + √(m² + 4)) / 2 rounded to a double."""
    return float(metallic_mean_decimal(m))


def inv_two_pi_dd() -> tuple[float, float]:
    """1/(2π) as a double-double pair."""
    with decimal.localcontext() as ctx:
        ctx.prec = _PREC
        return split_decimal(1 / (2 * _dec_pi()))


# ----------------------------------------------------------------------------------------
# double-double arithmetic on numpy arrays (Dekker 1971; Knuth TAOCP vol. 2, §4.2.2)
# ----------------------------------------------------------------------------------------
_SPLITTER = 134217729.0  # 2**27 + 1


def _split(a: np.ndarray):
    c = _SPLITTER * a
    hi = c - (c - a)
    return hi, a - hi


def two_prod(a, b):
    """Error-free product: ``p + e == a*b`` exactly (for |a|, |b| < 1e290)."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    p = a * b
    ah, al = _split(a)
    bh, bl = _split(b)
    e = ((ah * bh - p) + ah * bl + al * bh) + al * bl
    return p, e


def two_sum(a, b):
    """Error-free sum: ``s + e == a + b`` exactly."""
    s = a + b
    bb = s - a
    e = (a - (s - bb)) + (b - bb)
    return s, e


def dd_mul(ahi, alo, bhi, blo):
    """Double-double product (relative error ~1e-32)."""
    p, e = two_prod(ahi, bhi)
    e = e + (ahi * blo + alo * bhi)
    return two_sum(p, e)


def dd_frac(hi, lo):
    """Fractional part in [-0.5, 0.5) of a double-double number, as a double.

    ``hi - round(hi)`` is exact for |hi| < 2**52, so only the small parts carry rounding.
    """
    r = np.round(hi)
    f = (hi - r) + lo
    return f - np.round(f)


def dd_floor(hi, lo):
    """floor(hi + lo) for double-double numbers, exact (as float64 integers)."""
    f = np.floor(hi)
    rest = (hi - f) + lo  # hi - f is exact; rest lies in about [-1e-16, 1 + 1e-16)
    return f + np.floor(rest)


# ----------------------------------------------------------------------------------------
# exact integer linear algebra (small matrices)
# ----------------------------------------------------------------------------------------
def rational_nullspace(rows) -> list[list[Fraction]]:
    """Basis of {x : A x = 0} over the rationals, A given as rows of numbers (exact)."""
    a = [[Fraction(v) for v in r] for r in rows]
    m = len(a)
    n = len(a[0]) if m else 0
    pivots = []
    r = 0
    for c in range(n):
        piv = next((i for i in range(r, m) if a[i][c] != 0), None)
        if piv is None:
            continue
        a[r], a[piv] = a[piv], a[r]
        inv = 1 / a[r][c]
        a[r] = [v * inv for v in a[r]]
        for i in range(m):
            if i != r and a[i][c] != 0:
                f = a[i][c]
                a[i] = [vi - f * vr for vi, vr in zip(a[i], a[r])]
        pivots.append(c)
        r += 1
        if r == m:
            break
    free = [c for c in range(n) if c not in pivots]
    basis = []
    for fc in free:
        x = [Fraction(0)] * n
        x[fc] = Fraction(1)
        for i, pc in enumerate(pivots):
            x[pc] = -a[i][fc]
        basis.append(x)
    return basis


def integer_rows(rows) -> list[list[int]]:
    """Scale each rational row by the lcm of its denominators to integers (same row space)."""
    out = []
    for r in rows:
        fr = [Fraction(v) for v in r]
        den = 1
        for v in fr:
            den = den * v.denominator // _gcd(den, v.denominator)
        out.append([int(v * den) for v in fr])
    return out


def _gcd(a: int, b: int) -> int:
    while b:
        a, b = b, a % b
    return abs(a)


def integer_kernel(rows) -> list[list[int]]:
    """A basis of the lattice {x ∈ Zⁿ : A x = 0} for an integer matrix A (given as rows).

    Unimodular column operations (extended Euclid) bring A to column echelon form while the
    same operations act on the identity; the columns whose A-part vanishes form the basis.
    """
    a = [[int(v) for v in r] for r in rows]
    m = len(a)
    n = len(a[0]) if m else 0
    cols = [[a[i][j] for i in range(m)] + [1 if k == j else 0 for k in range(n)] for j in range(n)]
    piv = 0
    for i in range(m):
        if piv >= n:
            break
        while True:
            nz = [j for j in range(piv, n) if cols[j][i] != 0]
            if not nz:
                break
            jmin = min(nz, key=lambda j: abs(cols[j][i]))
            cols[piv], cols[jmin] = cols[jmin], cols[piv]
            clean = True
            for j in range(piv + 1, n):
                if cols[j][i] != 0:
                    f = cols[j][i] // cols[piv][i]
                    cols[j] = [x - f * y for x, y in zip(cols[j], cols[piv])]
                    if cols[j][i] != 0:
                        clean = False
            if clean:
                break
        if any(cols[j][i] != 0 for j in range(piv, n)):
            piv += 1
    basis = [c[m:] for c in cols[piv:] if all(v == 0 for v in c[:m])]
    return basis


def saturated_lattice(rows) -> list[list[int]]:
    """Basis of Zⁿ ∩ span(rows) for rational row vectors (the lattice points of a rational
    subspace); used for the periods of an approximant."""
    null = rational_nullspace(rows)  # complement: x with rows·x = 0
    if not null:
        n = len(rows[0])
        return [[1 if k == j else 0 for k in range(n)] for j in range(n)]
    # t lies in span(rows) iff t is orthogonal to every null-space vector
    return integer_kernel(integer_rows(null))
