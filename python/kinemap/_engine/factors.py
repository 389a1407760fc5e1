"""Scattering-factor tables F[g, m] = f_g(s_m)·T_g(q_m) for blocks of q-points.

The core sums Σ_{j∈g} o_j exp(i q·r_j) per group g (species × displacement) and combines the
groups with this table. The form factor of a label depends only on s = |q|/4π, so it is
computed once per q-block and kept for the following atom chunks of a streamed model (within
a memory budget); the Debye–Waller factor of a group is a cheap exp on top. Only groups with
an anisotropic U need the q-vectors themselves (T = exp(−½ qᵀUq)).
"""

from __future__ import annotations

from collections.abc import Callable, Hashable

import numpy as np

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


def row_s(rows: np.ndarray, step: np.ndarray, n: int) -> np.ndarray:
    """s = |q|/4π of the points rows[r] + k·step (k < n), row-major, without forming q."""
    k = np.arange(n, dtype=np.float64)
    a = np.einsum("ri,ri->r", rows, rows)[:, None]
    b = 2.0 * (rows @ step)[:, None]
    c = float(step @ step)
    q2 = a + k * (b + k * c)
    np.maximum(q2, 0.0, out=q2)  # rounding can make |q|² of q = 0 slightly negative
    return (np.sqrt(q2) / (4.0 * np.pi)).reshape(-1)


__all__ = ["FactorTables", "row_s", "CACHE_BYTES"]
