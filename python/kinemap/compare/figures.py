"""Results of a fit of scale and background: the figures, per shell, and their definitions."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .._shared.validate import whole_number
from ..errors import InvalidInputError

#: Fine |q| bins accumulated for the shells; 5040 = 2⁴·3²·5·7 is divisible by every shell
#: count from 1 to 10 and by 12, 14, 15, 16, 18, 20, 21, 24, 28, 30, ...
N_FINE_BINS = 5040

#: The definitions of the figures, stored beside them in output files.
DEFINITIONS = {
    "model": "I_o is compared with s*I_c + b(|q|): s the scale, b the background (none, a constant, "
             "or a polynomial in |q| in 1/angstrom)",
    "weights": "w = 1/(sigma_o^2 + s^2 sigma_c^2), sigma_o the uncertainty of I_o, sigma_c the model map's "
               "own noise; w = 1 when I_o has no sigma",
    "fit": "s and b minimise sum w (I_o - s I_c - b)^2 (weighted linear least squares, reweighted until s "
           "is stable when sigma_c is given)",
    "r_factor": "R = sum|I_o - (s I_c + b)| / sum|I_o|",
    "r_factor_bg": "R_b = sum|I_o - (s I_c + b)| / sum|I_o - b| (NaN when no background is fitted)",
    "wr_factor": "wR = sqrt(sum w (I_o - s I_c - b)^2 / sum w I_o^2)",
    "chi2": "chi2_nu = sum w (I_o - s I_c - b)^2 / (N - p), p the number of fitted parameters; after "
            "symmetry averaging (N_ind/N) sum w r^2 / (N_ind - p); NaN when I_o has no sigma",
    "r_exp": "R_exp = sqrt(2/pi) sum sigma / sum|I_o|, sigma = sqrt(sigma_o^2 + s^2 sigma_c^2): the R of "
             "noise alone; NaN when I_o has no sigma",
    "points": "sums run over points with finite I_o and I_c, sigma_o > 0 (when given), not masked by the "
              "user and outside excluded Bragg neighbourhoods",
}


@dataclass
class ShellTable:
    """Figures per |q| shell (shells of equal width between the smallest and largest |q| used).

    Attributes
    ----------
    q_lo, q_hi : ndarray
        Shell edges (Å⁻¹); multiples of the fine-bin width (range / 5040).
    n_points : ndarray of int
    r_factor, r_factor_bg, wr_factor, chi2, r_exp : ndarray
        As defined in :data:`DEFINITIONS`, with the overall scale and background; a shell's
        χ²_ν divides by its share of N − p. NaN in empty shells.
    """

    q_lo: np.ndarray
    q_hi: np.ndarray
    n_points: np.ndarray
    r_factor: np.ndarray
    r_factor_bg: np.ndarray
    wr_factor: np.ndarray
    chi2: np.ndarray
    r_exp: np.ndarray

    def as_dict(self) -> dict:
        return {k: np.asarray(v).tolist() for k, v in self.__dict__.items()}

    def __len__(self) -> int:
        return len(self.q_lo)

    def __str__(self) -> str:
        head = f"{'|q| from':>9} {'to':>8} {'points':>10} {'R':>8} {'R_b':>8} {'wR':>8} {'chi2_nu':>9} {'R_exp':>8}"
        lines = [head]
        for i in range(len(self)):
            lines.append(f"{self.q_lo[i]:9.4f} {self.q_hi[i]:8.4f} {int(self.n_points[i]):10d} "
                         f"{self.r_factor[i]:8.4f} {self.r_factor_bg[i]:8.4f} {self.wr_factor[i]:8.4f} "
                         f"{self.chi2[i]:9.3f} {self.r_exp[i]:8.4f}")
        return "\n".join(lines)


@dataclass
class Agreement:
    """Fitted scale and background and the figures of merit (see the module notes).

    Attributes
    ----------
    scale : float
        s (fitted, or the fixed value given).
    background : ndarray
        Coefficients b_k of b(|q|) = Σ_k b_k |q|^k (|q| in Å⁻¹), constant first; empty for
        ``background="none"``.
    background_kind : str
    r_factor, r_factor_bg, wr_factor, chi2, r_exp : float
    n_points : int
        N, the points used.
    n_independent : int
        Independent points among them (N unless the maps were symmetry-averaged).
    n_params : int
        p, the fitted parameters (scale, background coefficients and any extra).
    weighted : bool
        Whether the observation had σ (w = 1 otherwise).
    iterations : int
        Rounds of the reweighted fit.
    q_range : (float, float) or None
        Smallest and largest |q| used (Å⁻¹).
    """

    scale: float
    background: np.ndarray
    background_kind: str
    scale_fitted: bool
    r_factor: float
    r_factor_bg: float
    wr_factor: float
    chi2: float
    r_exp: float
    n_points: int
    n_independent: int
    n_params: int
    weighted: bool
    iterations: int
    q_range: tuple | None
    independent_fraction: float = 1.0
    weighted_sum: float = math.nan
    _bins: dict = field(default_factory=dict, repr=False)

    @property
    def background_fitted(self) -> bool:
        return self.background_kind != "none"

    def background_at(self, q) -> np.ndarray:
        """b(|q|) at the given |q| (Å⁻¹)."""
        q = np.asarray(q, dtype=np.float64)
        out = np.zeros_like(q)
        for k, c in enumerate(self.background):
            out = out + c * q**k
        return out

    def fitted(self, i_calc, q=None) -> np.ndarray:
        """s·I_c + b(|q|) for a calculated map (|q| needed for a background above flat)."""
        if len(self.background) > 1 and q is None:
            raise InvalidInputError("a polynomial background needs |q| of every point (`q`)")
        b = self.background_at(q if q is not None else 0.0) if len(self.background) else 0.0
        return self.scale * np.asarray(i_calc, dtype=np.float64) + b

    def figures(self) -> dict:
        """The figures as a plain dict (numbers only)."""
        return {"scale": self.scale, "background": self.background.tolist(),
                "background_kind": self.background_kind, "r_factor": self.r_factor,
                "r_factor_bg": self.r_factor_bg, "wr_factor": self.wr_factor, "chi2": self.chi2,
                "r_exp": self.r_exp, "n_points": self.n_points, "n_independent": self.n_independent,
                "n_params": self.n_params, "weighted": self.weighted, "iterations": self.iterations}

    def shells(self, n: int = 10) -> ShellTable:
        """The same figures in `n` shells of equal width in |q| (overall s and b).

        Raises
        ------
        InvalidInputError
            When no |q| was given, or `n` is not between 1 and 5040.
        """
        n = whole_number(n, "n (number of shells)", minimum=1, maximum=N_FINE_BINS)
        if self.q_range is None or not self._bins:
            raise InvalidInputError("figures per shell need |q| of every point; none was given")
        lo, hi = self.q_range
        edges = np.round(np.linspace(0, N_FINE_BINS, int(n) + 1)).astype(int)
        width = (hi - lo) / N_FINE_BINS
        cum = {k: np.concatenate([[0.0], np.cumsum(v)]) for k, v in self._bins.items()}
        tot = {k: cum[k][edges[1:]] - cum[k][edges[:-1]] for k in cum}
        return ShellTable(q_lo=lo + edges[:-1] * width, q_hi=lo + edges[1:] * width,
                          n_points=tot["n"].astype(np.int64), **_figures(tot, self))

    def summary(self) -> str:
        """A few lines for people."""
        bg = ", ".join(f"{c:.6g}" for c in self.background) if len(self.background) else "none"
        lines = [f"scale s = {self.scale:.6g}{'' if self.scale_fitted else ' (fixed)'}; "
                 f"background ({self.background_kind}) = {bg}",
                 f"R = {self.r_factor:.4f}" + (f"   R_b = {self.r_factor_bg:.4f}" if self.background_fitted else "")
                 + f"   wR = {self.wr_factor:.4f}",
                 f"chi2_nu = {self.chi2:.4g}   R_exp = {self.r_exp:.4f}" if self.weighted else
                 "chi2_nu and R_exp: not available (the measurement has no sigma; unweighted fit)",
                 f"N = {self.n_points} points ({self.n_independent} independent), p = {self.n_params}"]
        return "\n".join(lines)


def _figures(s: dict, a: Agreement) -> dict:
    """Figures from summed bins (arrays or scalars)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        r = s["abs_res"] / s["abs_obs"]
        rb = s["abs_res"] / s["abs_obs_bg"] if a.background_fitted else np.full_like(r, np.nan)
        wr = np.sqrt(s["w_res2"] / s["w_obs2"])
        f = a.independent_fraction
        share = f * s["n"] - a.n_params * (s["n"] / max(a.n_points, 1))
        chi2 = f * s["w_res2"] / share if a.weighted else np.full_like(r, np.nan)
        rexp = math.sqrt(2.0 / math.pi) * s["sigma"] / s["abs_obs"] if a.weighted else np.full_like(r, np.nan)
    empty = s["n"] == 0
    out = {"r_factor": r, "r_factor_bg": rb, "wr_factor": wr, "chi2": chi2, "r_exp": rexp}
    return {k: np.where(empty, np.nan, v) for k, v in out.items()}


__all__ = ["Agreement", "ShellTable", "DEFINITIONS", "N_FINE_BINS"]
