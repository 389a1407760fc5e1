"""The result of indexing: per-peak indices, the fit, a verdict, a table and a plot.

:class:`IndexingResult` is what :func:`kinemap.quasi.index_peaks` returns. Its verdict decides
whether a set of peaks is consistent with a quasiperiodic scheme: enough of the intensity
indexed with small k⊥, a Z-module of rank larger than the data's dimension, and intensities
that follow the window transform (Spearman rank correlation, :func:`scipy.stats.spearmanr`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from .drawing import plot_indexed
from .scheme import CutProjectScheme


def rank_correlation(a, b) -> float:
    """Spearman rank correlation of `a` and `b` (ties get average ranks), by
    :func:`scipy.stats.spearmanr`; 0 when either is constant (no evidence of agreement)."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        return 0.0
    return float(stats.spearmanr(a, b)[0])


@dataclass
class IndexingResult:
    """Indexed peaks and the fit (see :func:`index_peaks`).

    Per-peak arrays (M = number of peaks; unindexed peaks have ``indexed == False`` and
    zero indices):

    Attributes
    ----------
    q_obs : ndarray (M, 3)         observed q (Å⁻¹)
    intensity_obs : ndarray (M,)   observed intensity (NaN when none given)
    indices : ndarray (M, D)       integer indices h
    indexed : ndarray (M,) bool
    q_model : ndarray (M, 3)       scale × 2πk(h) (Å⁻¹)
    k_perp : ndarray (M, e)        perpendicular components of the module vectors
    residual : ndarray (M,)        |q_obs − q_model| (Å⁻¹)
    predicted : ndarray (M,)       predicted relative intensity |T_W(k⊥)|² (1 at q = 0)
    scale : float                  fitted isotropic reciprocal scale (observed/model)
    intensity_scale : float        fitted factor c in I_obs ≈ c·predicted (median of ratios)
    """

    scheme: CutProjectScheme
    q_obs: np.ndarray
    intensity_obs: np.ndarray
    indices: np.ndarray
    indexed: np.ndarray
    q_model: np.ndarray
    k_perp: np.ndarray
    residual: np.ndarray
    predicted: np.ndarray
    scale: float
    intensity_scale: float
    tolerance: np.ndarray
    kperp_max: float
    info: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.q_obs)

    @property
    def fraction_indexed(self) -> float:
        return float(self.indexed.mean()) if len(self) else 0.0

    @property
    def intensity_fraction(self) -> float:
        """Share of the observed intensity (peaks with q ≠ 0) carried by indexed peaks."""
        ok = np.linalg.norm(self.q_obs, axis=1) > 0
        io = self.intensity_obs[ok]
        if not np.isfinite(io).all() or io.sum() <= 0:
            return float("nan")
        return float(io[self.indexed[ok]].sum() / io.sum())

    @property
    def edge_length(self) -> float:
        """Edge length (Å) implied by the fitted scale: scheme edge / scale."""
        return self.scheme.edge_length / self.scale

    @property
    def agreement(self) -> float:
        """R = Σ|I_obs − c·I_pred| / Σ I_obs over indexed peaks (NaN without intensities)."""
        ok = self.indexed & np.isfinite(self.intensity_obs)
        if not ok.any():
            return float("nan")
        io = self.intensity_obs[ok]
        return float(np.abs(io - self.intensity_scale * self.predicted[ok]).sum() / io.sum())

    @property
    def rank_correlation(self) -> float:
        """Spearman rank correlation of observed and predicted intensities (indexed peaks)."""
        ok = self.indexed & np.isfinite(self.intensity_obs)
        if ok.sum() < 3:
            return float("nan")
        return rank_correlation(self.intensity_obs[ok], self.predicted[ok])

    @property
    def index_rank(self) -> int:
        """Rank of the Z-module spanned by the indexed peaks' module vectors.

        Computed as the real rank of the lifted vectors (k, k⊥) over the dense internal
        directions, which the module embeds into as a lattice (for Penrose indices h and
        h + (1,1,1,1,1) count once).
        """
        ok = self.indexed & (np.linalg.norm(self.q_obs, axis=1) > 0)
        if not ok.any():
            return 0
        mv = self.scheme.module(self.indices[ok])
        dense = np.array(self.scheme.window.dense, dtype=bool)
        lifted = np.hstack([mv.k_par, mv.k_perp[:, dense]])
        return int(np.linalg.matrix_rank(lifted, tol=1e-8 * max(1.0, np.abs(lifted).max())))

    @property
    def data_dim(self) -> int:
        """Dimension of the space spanned by the indexed peak positions (1 for a line scan,
        2 for a plane section, up to 3)."""
        ok = self.indexed & (np.linalg.norm(self.q_obs, axis=1) > 0)
        if not ok.any():
            return 0
        q = self.q_obs[ok]
        return int(np.linalg.matrix_rank(q, tol=1e-3 * np.abs(q).max()))

    @property
    def is_quasiperiodic(self) -> bool:
        """Whether the pattern is consistent with the scheme (see ``verdict``)."""
        return self.verdict()[0]

    @property
    def chance_matches(self) -> float:
        """Mean expected number of module vectors (|k⊥| ≤ kperp_max) inside a peak's
        tolerance ball by chance; indexing by position alone means little when it nears 1."""
        return float(self.info.get("chance_matches", float("nan")))

    def verdict(self, min_fraction: float = 0.8, min_correlation: float = 0.5,
                max_chance: float = 0.5) -> tuple[bool, str]:
        """Decide whether the peaks are those of a quasiperiodic pattern of this scheme.

        Conditions: at least `min_fraction` of the observed intensity (without intensities:
        of the peaks) indexed within tolerance with |k⊥| ≤ kperp_max and, with intensities,
        matching intensities — weak maxima from noise or finite-size ripples then matter
        little; the indexed module
        vectors span a Z-module of rank larger than the dimension of the data (the
        definition of quasiperiodicity: a periodic crystal's peaks, or any section of them,
        have rank equal to their dimension); with intensities, a rank
        correlation ≥ `min_correlation` between observed and predicted intensities; without
        intensities, fewer than `max_chance` chance matches per peak (λ = 0.5 lets a
        random pattern index about 1 − e^−λ ≈ 40 % of its peaks, well below
        `min_fraction`).

        Returns
        -------
        (bool, str): the decision and the reason.
        """
        with_i = bool(np.isfinite(self.intensity_obs).all()) and np.isfinite(self.intensity_fraction)
        if not with_i and self.chance_matches > max_chance:
            return False, (f"undecided from positions alone: {self.chance_matches:.2g} module vectors fall "
                           f"within the tolerance of a peak by chance (give intensities or lower kperp_max)")
        if with_i:
            frac = self.intensity_fraction
            if frac < min_fraction:
                return False, (f"indexed peaks carry only {frac:.0%} of the intensity "
                               f"(|k⊥| ≤ {self.kperp_max:.3g}, intensities within the allowed factor)")
        else:
            frac = self.fraction_indexed
            if frac < min_fraction:
                return False, f"only {frac:.0%} of the peaks index with |k⊥| ≤ {self.kperp_max:.3g}"
        rank, dim = self.index_rank, self.data_dim
        if rank <= dim:
            return False, (f"the indexed peaks span a module of rank {rank}, no more than the data's "
                           f"dimension ({dim}): a periodic pattern")
        rho = self.rank_correlation
        if np.isfinite(rho) and rho < min_correlation:
            return False, (f"intensities do not follow the window transform (rank correlation "
                           f"{rho:.2f} < {min_correlation})")
        extra = "" if not np.isfinite(rho) else f", intensity rank correlation {rho:.2f}"
        what = "of the intensity indexed" if with_i else "of the peaks indexed"
        return True, f"{frac:.0%} {what} ({self.fraction_indexed:.0%} of the peaks), index rank {rank}{extra}"

    def rows(self) -> list[dict]:
        """One dict per peak (indices, q_obs, |q|, q_perp, residual, intensities)."""
        out = []
        for i in range(len(self)):
            out.append({
                "indices": tuple(int(v) for v in self.indices[i]) if self.indexed[i] else None,
                "q_obs": self.q_obs[i].tolist(),
                "q_abs": float(np.linalg.norm(self.q_obs[i])),
                "k_perp": self.k_perp[i].tolist() if self.indexed[i] else None,
                "k_perp_abs": float(np.linalg.norm(self.k_perp[i])) if self.indexed[i] else float("nan"),
                "residual": float(self.residual[i]),
                "intensity_obs": float(self.intensity_obs[i]),
                "predicted": float(self.predicted[i]),
            })
        return out

    def table(self, max_rows: int | None = None) -> str:
        """A fixed-width text table of the indexed peaks."""
        d = self.scheme.lattice_dim
        top = np.nanmax(self.intensity_obs) if np.isfinite(self.intensity_obs).any() else 1.0
        head = (f"{'indices':>{4 * d + 2}}  {'|q| obs':>9}  {'|q| model':>9}  {'|k_perp|':>8}  "
                f"{'residual':>9}  {'I obs/max':>9}  {'I pred':>9}")
        lines = [f"# {self.scheme.name}: scale {self.scale:.6f} (edge {self.edge_length:.5f} Å), "
                 f"{self.fraction_indexed:.0%} indexed; q in 1/Å, k_perp in cycles per internal Å", head]
        n = len(self) if max_rows is None else min(len(self), max_rows)
        for i in range(n):
            if self.indexed[i]:
                idx = "(" + " ".join(f"{int(v):3d}" for v in self.indices[i]) + ")"
                kp = f"{np.linalg.norm(self.k_perp[i]):8.4f}"
                qm = f"{np.linalg.norm(self.q_model[i]):9.5f}"
                res = f"{self.residual[i]:9.2e}"
                pr = f"{self.predicted[i]:9.3e}"
            else:
                idx, kp, qm, res, pr = "unindexed", "-", "-", "-", "-"
            io = self.intensity_obs[i] / top if np.isfinite(self.intensity_obs[i]) else float("nan")
            lines.append(f"{idx:>{4 * d + 2}}  {np.linalg.norm(self.q_obs[i]):9.5f}  {qm:>9}  {kp:>8}  "
                         f"{res:>9}  {io:9.3e}  {pr:>9}")
        ok, why = self.verdict()
        lines.append(f"# verdict: {'quasiperiodic' if ok else 'NOT consistent with this quasiperiodic scheme'} ({why})")
        return "\n".join(lines)

    def plot(self, path, *, pattern=None, annotate: int = 30, log: bool = True, overwrite: bool = False):
        """Write a PNG: the peaks (and the map, if given) with indices annotated.

        Parameters
        ----------
        path : str or Path
            Output PNG file.
        pattern : kinemap.Pattern, optional
            A 1-D or 2-D map to draw underneath (plane or line grids).
        annotate : int
            Label the strongest this many indexed peaks.
        log : bool
            Logarithmic intensity scale.
        overwrite : bool
            Replace an existing file (otherwise it is kept and an error raised).

        Returns
        -------
        pathlib.Path of the written file (see :func:`plot_indexed`).
        """
        return plot_indexed(self, path, pattern=pattern, annotate=annotate, log=log, overwrite=overwrite)


__all__ = ["IndexingResult", "rank_correlation"]
