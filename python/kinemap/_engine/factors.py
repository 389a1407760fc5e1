"""Scattering-factor tables F[g, m] = f_g(s_m)·T_g(q_m) for blocks of q-points.

The core sums Σ_{j∈g} o_j exp(i q·r_j) per group g (species × displacement) and combines the
groups with this table. The form factor of a label depends only on s = |q|/4π, so it is
computed once per q-block and kept for the following atom chunks of a streamed model (within
a memory budget); the Debye–Waller factor of a group is a cheap exp on top. Only groups with
an anisotropic U need the q-vectors themselves (T = exp(−½ qᵀUq)).

The gridded path does not evaluate factors per q-point in Python: :func:`group_table`
tabulates a group's f(s)·exp(−B s²) on uniform nodes over the grid's range of s, checks the
core's cubic interpolation of the table against the probe itself at three points inside
every interval, and refines until the interpolation error is far below the requested
tolerance; the core then evaluates the table (and exp(−½ qᵀUq)) while it reads out the group
sums. A factor the table cannot follow (a probe with kinks, such as a custom table with
linear interpolation) returns None and is evaluated per point as before.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable

import numpy as np

from .. import _core
from ..errors import InvalidInputError

#: Bytes of cached form factors kept across atom chunks.
CACHE_BYTES = 256 << 20


class FactorTables:
    """Factor tables of one probe, with per-label form factors cached per q-block.

    Parameters
    ----------
    probe : Probe
        Supplies f(s) per label (``probe.scattering_factors(labels, s)``).
    """

    def __init__(self, probe, cache_bytes: int = CACHE_BYTES):
        self.probe = probe
        self.cache_bytes = cache_bytes
        self._cache: dict[tuple[Hashable, str], np.ndarray] = {}
        self._used = 0

    def _form_factors(self, labels: list[str], key: Hashable, s: np.ndarray) -> dict[str, np.ndarray]:
        missing = [lab for lab in labels if (key, lab) not in self._cache]
        out = {lab: self._cache[(key, lab)] for lab in labels if (key, lab) in self._cache}
        if missing:
            f = self.probe.scattering_factors(missing, s)
            for lab, row in zip(missing, f):
                out[lab] = row
                if self._used + row.nbytes <= self.cache_bytes:
                    self._cache[(key, lab)] = row
                    self._used += row.nbytes
        return out

    def table(self, groups, key: Hashable, s: np.ndarray, q: Callable[[], np.ndarray]) -> np.ndarray:
        """F[g, m] for the groups of a chunk at the points of block `key`.

        Parameters
        ----------
        groups : Groups
            Labels and displacement parameters of the chunk's groups.
        key : hashable
            Identifies the q-block (the same key must always mean the same points).
        s : ndarray
            sinθ/λ of the block's points (flat, the order of the core's output).
        q : callable
            Returns the block's q-vectors (M, 3) in the same order; called only for
            anisotropic displacements.
        """
        f = self._form_factors(sorted(set(groups.labels)), key, s)
        out = np.empty((groups.n_groups, len(s)), dtype=np.complex128)
        s2 = None
        qv = None
        for g, lab in enumerate(groups.labels):
            if groups.u_aniso is not None:
                if qv is None:
                    qv = q()
                t = np.exp(-0.5 * np.einsum("mi,ij,mj->m", qv, groups.u_aniso[g], qv))
                np.multiply(f[lab], t, out=out[g])
            elif groups.b_iso[g] != 0.0:
                if s2 is None:
                    s2 = s * s
                np.multiply(f[lab], np.exp(-groups.b_iso[g] * s2), out=out[g])
            else:
                out[g] = f[lab]
        return out


#: Interpolation error allowed per point, as a fraction of the requested relative tolerance.
TABLE_SHARE = 1e-2
#: Floor of the allowed relative interpolation error (rounding of the probe's own values).
TABLE_FLOOR = 2e-15
#: Most nodes of one group's table (16 bytes each).
TABLE_MAX_NODES = (1 << 16) + 1
#: Where inside each interval the table is checked (fractions of the step).
_CHECK_AT = (0.25, 0.5, 0.75)


def group_table(probe, groups, g: int, s_lo: float, s_hi: float,
                tol: float) -> tuple[np.ndarray, float, float] | None:
    """A checked table of group `g`'s factor f(s)·exp(−B s²) for s in [s_lo, s_hi].

    Parameters
    ----------
    probe : Probe
        Supplies f(s) (``probe.scattering_factors``).
    groups : Groups
        The group's label and displacement (B only: an anisotropic U is applied by the core).
    g : int
        The group.
    s_lo, s_hi : float
        Range of s = |q|/4π of the points (Å⁻¹).
    tol : float
        The gridded path's relative tolerance.

    Returns
    -------
    (values, s0, h) or None
        The factor at s0 + k·h, k < len(values), whose cubic interpolation by the core is
        within max(``TABLE_SHARE``·tol, ``TABLE_FLOOR``) of the probe's value (relative to
        max(|f(s)|, 10⁻³·max|f|)) at 3 points inside every interval; None when no table of up
        to ``TABLE_MAX_NODES`` nodes is.
    """
    label = groups.labels[g]
    b = 0.0 if groups.u_aniso is not None else float(groups.b_iso[g])
    s_max = getattr(probe, "s_max", None)
    if s_max is not None and s_hi > s_max * (1.0 + 1e-12):
        # Said of the grid here: the probe's own message would name a node of the table.
        raise InvalidInputError(
            f"the q-points reach s = sinθ/λ = {s_hi:.6g} Å⁻¹ (|q| = {4 * np.pi * s_hi:.6g} Å⁻¹), beyond "
            f"the probe's table for {label!r}, valid for s <= {s_max:g} Å⁻¹ (|q| <= {4 * np.pi * s_max:.4g} Å⁻¹)")

    def factor(s: np.ndarray) -> np.ndarray:
        f = probe.scattering_factors([label], s)[0]
        return f * np.exp(-b * s * s) if b != 0.0 else f

    span = s_hi - s_lo
    if span <= 1e-12 * max(1.0, s_hi):  # one |q| for all points: a constant table
        return np.repeat(factor(np.array([s_lo])), 4), float(s_lo), 1.0
    target = max(TABLE_SHARE * tol, TABLE_FLOOR)
    n = 33
    while n <= TABLE_MAX_NODES:
        h = span / (n - 1)
        k = np.arange(n - 1, dtype=np.float64)
        checks = np.concatenate([s_lo + (k + a) * h for a in _CHECK_AT])
        values = factor(np.concatenate([s_lo + np.arange(n) * h, checks]))
        nodes, exact = values[:n], values[n:]
        err = np.abs(_core.factor_table_eval(nodes, s_lo, h, checks) - exact)
        scale = np.maximum(np.abs(exact), 1e-3 * np.abs(nodes).max())
        if np.all(err <= target * scale):
            return nodes, float(s_lo), float(h)
        n = 2 * (n - 1) + 1
    return None


def row_s(rows: np.ndarray, step: np.ndarray, n: int) -> np.ndarray:
    """s = |q|/4π of the points rows[r] + k·step (k < n), row-major, without forming q."""
    k = np.arange(n, dtype=np.float64)
    a = np.einsum("ri,ri->r", rows, rows)[:, None]
    b = 2.0 * (rows @ step)[:, None]
    c = float(step @ step)
    q2 = a + k * (b + k * c)
    np.maximum(q2, 0.0, out=q2)  # rounding can make |q|² of q = 0 slightly negative
    return (np.sqrt(q2) / (4.0 * np.pi)).reshape(-1)


__all__ = ["FactorTables", "group_table", "row_s", "CACHE_BYTES", "TABLE_SHARE", "TABLE_FLOOR", "TABLE_MAX_NODES"]
