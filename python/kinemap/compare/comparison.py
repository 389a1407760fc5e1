"""The result of :func:`kinemap.compare`: figures, maps on demand, files and pictures."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.memory import check_fits
from ..pattern import Pattern
from .agreement import DEFINITIONS, Agreement, ShellTable
from .measured import Measured, walk


class Comparison:
    """A measured map beside a model's: fitted scale and background, figures, residual.

    Attributes
    ----------
    scale : float
        Fitted (or fixed) s.
    background : float
        The constant term b₀ of the background (the whole background for "flat").
    background_coefficients : ndarray
        b_k of b(|q|) = Σ_k b_k |q|^k (Å⁻¹), constant first.
    r_factor, r_factor_bg, wr_factor, chi2, r_exp : float
        Definitions in :attr:`definitions` (and :data:`kinemap.compare.DEFINITIONS`).
    n_points, n_independent, n_params : int
    agreement : Agreement
        The same, with :meth:`Agreement.shells`.
    measured : Pattern
        The measured map (symmetry-averaged when asked); loaded on access for streamed maps.
    model : Pattern
        The model's map on the measured grid, unscaled (after sampling, symmetry and resolution).
    excluded : dict
        Points left out per reason: unmeasured, bad_sigma, no_model, user_mask, bragg.
    resolution : float or None
        Gaussian resolution width (Å⁻¹) applied to the model (fitted or given).
    metadata : dict
        How the model was computed (``model_sampling``), the symmetry average, the source
        files, the settings.
    """

    def __init__(self, meas: Measured, calc_src, agreement: Agreement, *, excluded: dict, resolution, metadata):
        self._meas = meas
        self._calc = calc_src
        self.agreement = agreement
        self.excluded = dict(excluded)
        self.resolution = resolution
        self.metadata = metadata
        self.grid = meas.grid
        self._residual: Pattern | None = None

    # figures --------------------------------------------------------------------------
    scale = property(lambda self: self.agreement.scale)
    background = property(lambda self: float(self.agreement.background[0]) if len(self.agreement.background) else 0.0)
    background_coefficients = property(lambda self: self.agreement.background.copy())
    r_factor = property(lambda self: self.agreement.r_factor)
    r_factor_bg = property(lambda self: self.agreement.r_factor_bg)
    wr_factor = property(lambda self: self.agreement.wr_factor)
    chi2 = property(lambda self: self.agreement.chi2)
    r_exp = property(lambda self: self.agreement.r_exp)
    n_points = property(lambda self: self.agreement.n_points)
    n_independent = property(lambda self: self.agreement.n_independent)
    n_params = property(lambda self: self.agreement.n_params)

    @property
    def definitions(self) -> dict:
        d = dict(DEFINITIONS)
        d["model_sampling"] = self.metadata.get("model_sampling", {}).get("description", "")
        if self.resolution is not None:
            d["resolution"] = ("the model map was convolved with an isotropic Gaussian of standard deviation "
                               f"{self.resolution:.6g} 1/angstrom" + (" (fitted)" if self.metadata.get(
                                   "resolution_fitted") else ""))
        return d

    def shells(self, n: int = 10) -> ShellTable:
        """Figures in `n` shells of equal width in |q| (overall scale and background)."""
        return self.agreement.shells(n)

    def figures(self) -> dict:
        f = self.agreement.figures()
        f["resolution"] = self.resolution
        f["excluded"] = dict(self.excluded)
        f["model_sampling"] = self.metadata.get("model_sampling", {}).get("mode", "")
        return f

    # maps ------------------------------------------------------------------------------
    def walk(self):
        """Per slab (a, b, I_o, σ_o, I_c, σ_c, |q|, keep), flattened: for writers and plots."""
        return walk(self._meas, self._calc)

    def fitted_values(self, ic: np.ndarray, q: np.ndarray) -> np.ndarray:
        return self.agreement.scale * ic + self.agreement.background_at(q)

    def _full(self, what: str) -> np.ndarray:
        check_fits(self.grid.size * 8 * 2, f"the {what} map ({tuple(self.grid.shape)})",
                   hint="write the comparison with save(), which works by slabs")
        out = np.empty(self.grid.size)
        for a, b, io, _so, ic, _sc, q, keep in self.walk():
            fa, fb = a * self._meas.per_row, b * self._meas.per_row
            if what == "residual":
                v = io - self.fitted_values(ic, q)
                v[~keep] = np.nan
            elif what == "fitted":
                v = self.fitted_values(ic, q)
            elif what == "used":
                v = keep
            out[fa:fb] = v
        return out.reshape(self.grid.shape)

    @property
    def residual(self) -> Pattern:
        """I_o − (s I_c + b) where a point was used, NaN elsewhere."""
        if self._residual is None:
            self._residual = Pattern(self.grid, intensity=self._full("residual"), units="1",
                                     metadata={"content": "residual I_o - (s I_c + b)", "figures": self.figures()})
        return self._residual

    @property
    def fitted(self) -> Pattern:
        """The model on the measured scale, s I_c + b, at every point."""
        return Pattern(self.grid, intensity=self._full("fitted"), units="1",
                       metadata={"content": "model s I_c + b", "scale": self.scale})

    @property
    def used(self) -> np.ndarray:
        """True at the points that took part in the sums."""
        return self._full("used").astype(bool)

    @property
    def measured(self) -> Pattern:
        return self._meas.src.read()

    @property
    def model(self) -> Pattern:
        return self._calc.read()

    # outputs ---------------------------------------------------------------------------
    def save(self, path, *, overwrite: bool = False, shells: int = 10) -> Path:
        """Write measured, model (s I_c + b), residual and the figures with their definitions
        to a NeXus file (by slabs; atomic). See :func:`kinemap.compare.save_comparison`."""
        from .output import save_comparison

        return save_comparison(self, path, overwrite=overwrite, shells=shells)

    def plot(self, path, **options) -> Path:
        """Measured | model | residual and line profiles into a PNG
        (:func:`kinemap.compare.plot_comparison`)."""
        from .output import plot_comparison

        return plot_comparison(self, path, **options)

    def delta_pdf(self, bragg, **options):
        """The 3D-ΔPDF of the measured map and of the fitted model, processed identically
        (the model's map gets the measured map's holes): returns (measured, model,
        difference) :class:`~kinemap.compare.DeltaPDF` maps."""
        from .dpdf import delta_pdf

        meas = self.measured
        holes = ~np.isfinite(meas.intensity)
        if self._meas.mask is not None:
            holes |= self._meas.mask
        fit = self._full("fitted")
        fit[holes] = np.nan
        inten = meas.intensity.copy()
        inten[holes] = np.nan
        dm = delta_pdf(Pattern(self.grid, intensity=inten, units="1", metadata=meas.metadata), bragg, **options)
        dc = delta_pdf(Pattern(self.grid, intensity=fit, units="1"), bragg, **options)
        return dm, dc, dm.minus(dc)

    def summary(self) -> str:
        lines = [self.agreement.summary()]
        ex = ", ".join(f"{k} {v}" for k, v in self.excluded.items() if v)
        lines.append(f"left out: {ex}" if ex else "left out: nothing")
        ms = self.metadata.get("model_sampling")
        if ms:
            lines.append(f"model: {ms.get('description', '')}")
        if self.resolution is not None:
            lines.append(f"resolution: Gaussian sigma {self.resolution:.4g} 1/angstrom"
                         + (" (fitted)" if self.metadata.get("resolution_fitted") else ""))
        if self._meas.symmetry_info:
            s = self._meas.symmetry_info
            lines.append(f"symmetry: {s.get('group', '')} average, R_int = {s.get('r_int', float('nan')):.4f}")
        return "\n".join(lines)

    def __repr__(self) -> str:
        return (f"Comparison(scale={self.scale:.6g}, background={self.background:.6g}, R={self.r_factor:.4f}, "
                f"wR={self.wr_factor:.4f}, chi2={self.chi2:.4g}, n_points={self.n_points})")


__all__ = ["Comparison"]
