"""Inflation symmetry of indexed peaks.

:func:`inflation_check` finds pairs of indexed peaks related by the inflation symmetry
h ↦ S h of the Fourier module (positions scale by λ^p) and compares their intensity ratios
with the window transform's.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._shared.validate import whole_number
from ..errors import InvalidInputError
from .index_result import IndexingResult


@dataclass
class InflationCheck:
    """Pairs of observed peaks related by the inflation symmetry h ↦ S h.

    Attributes
    ----------
    factor : float            λ^p
    power : int               p
    pairs : list of tuple     (i, j) row numbers of the peaks h and S h
    position_ratio : ndarray  |q_j| / |q_i| (should equal λ^p)
    intensity_ratio : ndarray I_j / I_i observed
    predicted_ratio : ndarray |T(k⊥_j)|² / |T(k⊥_i)|²
    """

    factor: float
    power: int
    pairs: list
    position_ratio: np.ndarray
    intensity_ratio: np.ndarray
    predicted_ratio: np.ndarray

    def table(self) -> str:
        lines = [f"# inflation λ^{self.power} = {self.factor:.6f}",
                 f"{'pair':>12}  {'|q| ratio':>10}  {'I ratio obs':>12}  {'I ratio pred':>12}"]
        for (i, j), pr, io, ip in zip(self.pairs, self.position_ratio, self.intensity_ratio, self.predicted_ratio):
            lines.append(f"{i:>5} ->{j:>4}  {pr:10.6f}  {io:12.4e}  {ip:12.4e}")
        return "\n".join(lines)


def inflation_check(result: IndexingResult, power: int | None = None) -> InflationCheck:
    """Find indexed peaks related by the inflation symmetry and compare with theory.

    Parameters
    ----------
    result : IndexingResult
    power : int, optional
        Power p of the inflation factor (default: the smallest with an integer matrix,
        e.g. τ³ for the primitive icosahedral module).

    Returns
    -------
    InflationCheck
    """
    if not isinstance(result, IndexingResult):
        raise InvalidInputError(f"`result` must be an IndexingResult from index_peaks, got {type(result).__name__}")
    sch = result.scheme
    if power is None:
        p, lam, s_mat, _ = sch.inflation()
    else:
        p = whole_number(power, "power", minimum=1)
        r = sch.inflation_matrix(p)
        if r is None:
            raise InvalidInputError(f"the module of {sch.name!r} is not invariant under λ^{p}")
        lam, s_mat = float(sch.inflation_factor) ** p, r[0]
    ok = np.flatnonzero(result.indexed & (np.linalg.norm(result.q_obs, axis=1) > 0))
    if len(ok) == 0:
        return InflationCheck(lam, p, [], np.zeros(0), np.zeros(0), np.zeros(0))
    kpar = sch.module(result.indices[ok]).k_par
    pairs, pr, ir, pp = [], [], [], []
    for i in ok:
        target = sch.module((s_mat @ result.indices[i])[None, :]).k_par[0]
        dist = np.linalg.norm(kpar - target, axis=1)
        b = int(np.argmin(dist))
        if dist[b] < 1e-9 * max(1.0, float(np.linalg.norm(target))):
            j = ok[b]
            pairs.append((int(i), int(j)))
            pr.append(np.linalg.norm(result.q_obs[j]) / np.linalg.norm(result.q_obs[i]))
            ir.append(result.intensity_obs[j] / result.intensity_obs[i] if result.intensity_obs[i] > 0 else np.nan)
            pp.append(result.predicted[j] / result.predicted[i] if result.predicted[i] > 0 else np.nan)
    return InflationCheck(lam, p, pairs, np.array(pr), np.array(ir), np.array(pp))


__all__ = ["InflationCheck", "inflation_check"]
