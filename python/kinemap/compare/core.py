"""Model beside measurement: :func:`compare` and :func:`rank_models`.

A comparison walks through the measured map and the model's map slab by slab (axis 0 of the
grid): masks, |q|, the normal equations of the fit and the figures are accumulated per slab,
so the same code serves maps in memory and maps read from files that do not fit in memory
(``stream=True``). See :mod:`kinemap.compare.agreement` for the fit and the definitions of the
figures, and :mod:`kinemap.compare.sampling` for how a model is computed on the measured grid.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from .._shared.memory import check_fits
from .._shared.progress import Progress
from .._shared.validate import real_number
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import QGrid
from .agreement import DEFINITIONS, Agreement, Block, ShellTable, check_background, fit_blocks
from .bragg import BraggExclusion, ExclusionTree
from .maps import ArrayMap, SlabMasks, SlabQ, as_map, is_map_file, rows_per_slab, same_grid, should_stream
from .nexus import MapSource
from .sampling import gaussian_resolution, model_on_grid

#: Counted reasons for leaving a point out, in the order they are checked.
EXCLUSION_REASONS = ("unmeasured", "bad_sigma", "no_model", "user_mask", "bragg")


def _q_ref(grid: QGrid) -> float:
    if grid.is_regular:
        from .bragg import _corners

        c = _corners(grid)
        return float(np.linalg.norm(c, axis=1).max())
    return float(np.linalg.norm(grid.q, axis=1).max())


def _symmetry_spec(symmetry) -> tuple[str, dict] | None:
    if symmetry is None:
        return None
    if isinstance(symmetry, str):
        return symmetry, {}
    if isinstance(symmetry, dict) and "group" in symmetry:
        opts = {k: v for k, v in symmetry.items() if k != "group"}
        return symmetry["group"], opts
    raise InvalidInputError("`symmetry` must be a point-group symbol (e.g. 'm-3m') or a dict with 'group' and "
                            f"options of kinemap.symmetrize, got {symmetry!r}")


def _symmetrize(pattern: Pattern, spec) -> Pattern:
    from .symmetry import symmetrize

    group, opts = spec
    return symmetrize(pattern, group, **opts)


class Measured:
    """A measured map prepared for comparisons: its slabs, the user's mask, the Bragg
    exclusion and the symmetry average (shared by every model compared with it)."""

    def __init__(self, meas, *, mask=None, exclude_bragg=None, symmetry=None, stream=None):
        src = as_map(meas, "meas")
        self.streamed = should_stream(src, stream)
        self.sym_spec = _symmetry_spec(symmetry)
        if self.streamed and self.sym_spec is not None:
            raise InvalidInputError("symmetry averaging needs the whole map in memory; it cannot be combined with "
                                    "stream=True")
        if not self.streamed and isinstance(src, MapSource):
            src = ArrayMap(src.read())
        self.grid = src.grid
        self.mask = self._user_mask(mask)
        self.exclusion = BraggExclusion.coerce(exclude_bragg)
        self.tree = ExclusionTree(self.grid, self.exclusion) if self.exclusion is not None else None
        self.independent_fraction = 1.0
        self.symmetry_info: dict = {}
        if isinstance(src, ArrayMap) and src.pattern.sigma is not None:
            from .agreement import check_sigma

            check_sigma(src.pattern.sigma, "sigma of the measured map")
        if self.sym_spec is not None:
            sym = _symmetrize(src.pattern, self.sym_spec)
            info = dict(sym.metadata.get("symmetry", {}))
            n_fin = int(np.isfinite(sym.intensity).sum())
            n_ind = info.get("n_independent")
            if n_ind is not None and n_fin > 0:
                self.independent_fraction = min(1.0, float(n_ind) / n_fin)
            self.symmetry_info = info
            src = ArrayMap(sym)
        self.src = src
        self.rows = rows_per_slab(self.grid)
        self.per_row = int(np.prod(self.grid.shape[1:], dtype=np.int64)) if len(self.grid.shape) > 1 else 1
        self.q_ref = _q_ref(self.grid)
        self._bragg = SlabMasks()
        self.slab_q = SlabQ(self.grid)

    @property
    def weighted(self) -> bool:
        return self.src.has_sigma

    def _user_mask(self, mask):
        if mask is None:
            return None
        m = np.asarray(mask)
        if m.size == 0:
            raise InvalidInputError(f"`mask` is empty (shape {m.shape}); give a boolean array of the map's shape "
                                    f"{tuple(self.grid.shape)} (True = leave out) or None")
        if m.dtype != bool:
            raise InvalidInputError(f"`mask` must be a boolean array (True = leave out), got dtype {m.dtype}")
        if m.shape != tuple(self.grid.shape):
            raise InvalidInputError(f"`mask` has shape {m.shape}, but the measured map has shape {tuple(self.grid.shape)}")
        return m

    def bragg_slab(self, a: int, q: np.ndarray) -> np.ndarray | None:
        if self.tree is None:
            return None
        if a not in self._bragg:
            self._bragg.put(a, self.tree.excluded(q))
        return self._bragg.get(a)

    def source_description(self) -> dict:
        md = self.src.metadata if hasattr(self.src, "metadata") else {}
        return {k: md[k] for k in ("file", "group", "signal", "errors", "source") if k in md}


def walk(meas: Measured, calc_src, counts: dict | None = None, progress: Progress | None = None):
    """Yield per slab: (a, b, I_o, σ_o, I_c, σ_c, |q|, keep), flattened (σ None when absent)."""
    rows = meas.rows
    for (a, b, io, so), (a2, b2, ic, sc) in zip(meas.src.slabs(rows), calc_src.slabs(rows)):
        fa, fb = a * meas.per_row, b * meas.per_row
        io = np.ravel(io)
        ic = np.ravel(ic)
        so = None if so is None else np.ravel(so)
        sc = None if (sc is None or so is None) else np.ravel(sc)
        if so is not None:
            neg = so < 0
            if neg.any():
                j = np.unravel_index(fa + int(np.flatnonzero(neg)[0]), tuple(meas.grid.shape))
                raise InvalidInputError(f"the measured map's sigma is negative at index {tuple(int(i) for i in j)}: "
                                        f"{float(so[neg][0])!r}; uncertainties are >= 0 (mark unmeasured points "
                                        "with NaN intensity)")
        qv = meas.slab_q.get(a, b, meas.per_row)
        q = np.sqrt(np.einsum("ij,ij->i", qv, qv))
        keep = np.isfinite(io)
        if counts is not None:
            counts["unmeasured"] += int((~keep).sum())
        if so is not None:
            ok = np.isfinite(so) & (so > 0)
            if counts is not None:
                counts["bad_sigma"] += int((keep & ~ok).sum())
            keep &= ok
        ok = np.isfinite(ic) & (np.isfinite(sc) if sc is not None else True)
        if counts is not None:
            counts["no_model"] += int((keep & ~ok).sum())
        keep &= ok
        if meas.mask is not None:
            um = ~np.ravel(meas.mask[a:b])
            if counts is not None:
                counts["user_mask"] += int((keep & ~um).sum())
            keep &= um
        bm = meas.bragg_slab(a, qv)
        if bm is not None:
            if counts is not None:
                counts["bragg"] += int((keep & bm).sum())
            keep &= ~bm
        if progress is not None:
            progress.add(1)
        yield a, b, io, so, ic, sc, q, keep


def _blocks(meas: Measured, calc_src, counts: dict, progress):
    state = {"first": True}

    def gen():
        c = counts if state["first"] else None
        state["first"] = False
        for _a, _b, io, so, ic, sc, q, keep in walk(meas, calc_src, c, progress):
            yield Block(io[keep], ic[keep], None if so is None else so[keep], None if sc is None else sc[keep], q[keep])

    return gen


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
        self._residual = None

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


# ---------------------------------------------------------------------------------------
def _is_model(value) -> bool:
    return all(hasattr(value, a) for a in ("iter_chunks", "species_labels", "describe"))


def _calc_source(calc, meas: Measured, *, sampling, scatter_options, progress):
    """The model's map on the measured grid, as a slab map, and how it was made."""
    if isinstance(calc, (str, Path)) and not is_map_file(calc):
        from ..io import open_model

        calc = open_model(calc)
    if _is_model(calc):
        if meas.streamed:
            raise InvalidInputError("a model cannot be compared with a streamed map: compute its map on the measured "
                                    "grid first (kinemap.compare.model_on_grid, then save) and compare the two files")
        pat = model_on_grid(calc, meas.grid, sampling=sampling, progress=progress, **scatter_options)
        info = {"model": calc.describe(), "model_sampling": pat.metadata.get("model_sampling", {})}
        src = ArrayMap(pat)
    else:
        src = as_map(calc, "calc")
        same_grid(meas.grid, src.grid, "the model map and the measured map")
        if not meas.streamed and isinstance(src, MapSource):
            src = ArrayMap(src.read())
        info = {"model_sampling": {"mode": "map", "description": "a map on the measured grid, used as given"}}
        if isinstance(src, ArrayMap) and src.pattern.sigma is not None:
            from .agreement import check_sigma

            check_sigma(src.pattern.sigma, "sigma of the model map")
    if meas.sym_spec is not None:
        src = ArrayMap(_symmetrize(src.read(), meas.sym_spec))
    return src, info


def _with_resolution(src: ArrayMap, grid: QGrid, width: float) -> ArrayMap:
    p = src.pattern
    return ArrayMap(Pattern(grid, intensity=gaussian_resolution(p.intensity, grid, width), units=p.units,
                            sigma=p.sigma, metadata=p.metadata))


def _fit(meas, src, scale, background, extra, counts, prog):
    return fit_blocks(_blocks(meas, src, counts, prog), scale=scale, background=background, q_ref=meas.q_ref,
                      weighted=meas.weighted, with_sigma_calc=meas.weighted and src.has_sigma,
                      extra_params=extra, independent_fraction=meas.independent_fraction)


def _compare_one(meas: Measured, calc, *, scale, background, resolution, resolution_max, sampling,
                 scatter_options, progress) -> Comparison:
    check_background(background)
    t0 = time.perf_counter()
    src, info = _calc_source(calc, meas, sampling=sampling, scatter_options=scatter_options, progress=progress)
    t1 = time.perf_counter()
    prog = Progress(progress, 0, unit="slab", desc="comparing")
    counts = dict.fromkeys(EXCLUSION_REASONS, 0)
    width, fitted_w = None, False
    try:
        if resolution is None:
            ag = _fit(meas, src, scale, background, 0, counts, prog)
        else:
            if meas.streamed or not isinstance(src, ArrayMap):
                raise InvalidInputError("a resolution convolution needs the maps in memory (not stream=True)")
            if isinstance(resolution, str):
                if resolution != "fit":
                    raise InvalidInputError(f"`resolution` must be None, a width in 1/angstrom or 'fit', got {resolution!r}")
                width, ag, counts = _fit_resolution(meas, src, scale, background, resolution_max, prog)
                fitted_w = True
            else:
                width = real_number(resolution, "resolution", minimum=0.0)
                ag = _fit(meas, _with_resolution(src, meas.grid, width), scale, background, 0, counts, prog)
            src = _with_resolution(src, meas.grid, width)
    finally:
        prog.close()
    md = dict(info)
    md["timings"] = {"model_s": t1 - t0, "fit_s": time.perf_counter() - t1}
    md.update({"measured": meas.source_description(), "symmetry": meas.symmetry_info,
               "exclude_bragg": meas.exclusion.describe() if meas.exclusion else {},
               "resolution_fitted": fitted_w, "streamed": meas.streamed,
               "settings": {"scale": scale if isinstance(scale, str) else float(scale), "background": background,
                            "sampling": sampling, "resolution": resolution if resolution is None or
                            isinstance(resolution, str) else float(resolution)}})
    return Comparison(meas, src, ag, excluded=counts, resolution=width, metadata=md)


def _fit_resolution(meas, src, scale, background, resolution_max, prog):
    """Width of the Gaussian that minimises Σ w r² after the linear fit (bounded search)."""
    from scipy.optimize import minimize_scalar

    grid = meas.grid
    if not grid.is_regular:
        raise InvalidInputError("a fitted resolution needs a regular grid")
    steps = np.linalg.norm(np.asarray(grid.steps).reshape(len(grid.shape), 3), axis=1)
    wmax = 5.0 * float(steps.max()) if resolution_max is None else real_number(
        resolution_max, "resolution_max", minimum=0.0, exclusive_minimum=True)
    cache = {}

    def run(w):
        counts = dict.fromkeys(EXCLUSION_REASONS, 0)
        ag = _fit(meas, _with_resolution(src, grid, w), scale, background, 1, counts, prog)
        cache[w] = (ag, counts)
        return ag.weighted_sum

    best = minimize_scalar(run, bounds=(0.0, wmax), method="bounded", options={"xatol": 1e-3 * wmax})
    w = float(best.x)
    if run(0.0) < cache[w][0].weighted_sum:
        w = 0.0
    ag, counts = cache[w]
    return w, ag, counts


def compare(calc, meas, *, scale="fit", background="flat", mask=None, symmetry=None, exclude_bragg=None,
            resolution=None, resolution_max=None, sampling: str = "auto", stream=None, probe="xray",
            method: str = "auto", tol: float = 1e-6, threads: int | None = None, chunk_atoms: int | None = None,
            progress=False, names=None, by=None, **probe_options):
    """Put a model beside a measured map: fit scale and background, compute the agreement
    factors and the residual.

    Parameters
    ----------
    calc : Pattern, MapSource, Model, atom source, path, or a list of them
        A map on the same grid as `meas`, or a model (computed on the measured grid as
        :func:`kinemap.compare.model_on_grid` describes: on its box's reciprocal lattice and
        averaged into the measured voxels, or snapped; a finite particle at the measured
        points). A list ranks several models (see :func:`rank_models`).
    meas : Pattern, MapSource or path
        The measured map (NaN = not measured; ``sigma`` = standard uncertainties).
    scale : "fit" or float
        Fit s or fix it.
    background : {"none", "flat", "linear", "quadratic", "cubic"}
        b = 0, a constant or a polynomial in |q|.
    mask : array_like of bool, optional
        True where a point must be left out (grid shape).
    symmetry : str or dict, optional
        Point group (Hermann–Mauguin symbol) whose average is taken of both maps before the
        comparison (``kinemap.symmetrize``); χ²_ν then counts independent points.
    exclude_bragg : BraggExclusion or dict, optional
        Leave out neighbourhoods of the allowed reflections (radius with units, and a
        centring letter, an hkl list or a q list).
    resolution : None, float or "fit"
        Gaussian resolution (standard deviation in Å⁻¹) applied to the model map; "fit"
        finds the width in [0, `resolution_max`] (default 5 grid steps) that minimises
        Σ w r², and counts it as a parameter.
    sampling : {"auto", "average", "centres", "snap", "points"}
        How a model is computed on the measured grid (see model_on_grid).
    stream : bool or None
        Walk through maps read from files by slabs without holding them (None: when they
        would not fit comfortably in memory). Symmetry, resolution and models need the maps
        in memory.
    probe, method, tol, threads, chunk_atoms, **probe_options
        Passed to :func:`kinemap.scatter` when `calc` is a model.
    progress : bool or callable
        Progress of the model computation and of the comparison passes.
    names, by
        For a list of models: their names and the figure to rank by (see rank_models).

    Returns
    -------
    Comparison
        (a :class:`Ranking` for a list of models)

    Raises
    ------
    InvalidInputError
        Grids that do not match, an empty or misshapen mask, no point left, negative σ,
        fewer points than parameters, options that do not apply.
    ModelFileError
        Unreadable map files (e.g. a map without axes).

    Notes
    -----
    Weighted linear least squares with w = 1/(σ_o² + s²σ_c²); R = Σ|I_o − (sI_c + b)|/Σ|I_o|,
    R_b with Σ|I_o − b| below, wR = sqrt(Σw r²/Σw I_o²), χ²_ν = Σw r²/(N − p) (NaN without
    σ), R_exp = sqrt(2/π)Σσ/Σ|I_o|; overall and per |q| shell (:meth:`Comparison.shells`).

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> grid = km.QGrid.line([0.1, 0, 0], [2, 0, 0], 50)
    >>> calc = km.scatter(km.Model([[0, 0, 0], [1.2, 0, 0]], "C"), grid)
    >>> meas = km.Pattern.from_array(3 * calc.intensity + 2, grid)
    >>> cmp = km.compare(calc, meas)
    >>> round(cmp.scale, 9), round(cmp.background, 9), cmp.r_factor < 1e-12
    (3.0, 2.0, True)
    """
    scatter_options = dict(probe=probe, method=method, tol=tol, threads=threads, chunk_atoms=chunk_atoms,
                           **probe_options)
    options = dict(scale=scale, background=background, resolution=resolution, resolution_max=resolution_max,
                   sampling=sampling, scatter_options=scatter_options, progress=progress)
    if isinstance(calc, (list, tuple)):
        return _rank(calc, meas, names=names, by=by, mask=mask, symmetry=symmetry, exclude_bragg=exclude_bragg,
                     stream=stream, keep="best", **options)
    if names is not None or by is not None:
        raise InvalidInputError("`names` and `by` apply when `calc` is a list of models")
    m = Measured(meas, mask=mask, exclude_bragg=exclude_bragg, symmetry=symmetry, stream=stream)
    return _compare_one(m, calc, **options)


# ---------------------------------------------------------------------------------------
RANK_BY = ("chi2", "wr_factor", "r_factor", "r_factor_bg")


class Ranking:
    """Figures of several models against one measurement, best first.

    Attributes
    ----------
    rows : list of dict
        name, rank and the figures of each model, sorted by `by` (ascending).
    by : str
        The figure ranked by.
    best : Comparison
        The comparison of the best model.
    comparisons : list of Comparison
        All comparisons in rank order (``keep="all"``), else only the best.
    """

    def __init__(self, rows, by, comparisons):
        self.rows = rows
        self.by = by
        self.comparisons = comparisons
        self.best = comparisons[0]

    @property
    def names(self) -> list[str]:
        return [r["name"] for r in self.rows]

    def __len__(self) -> int:
        return len(self.rows)

    def __str__(self) -> str:
        w = max(8, max(len(r["name"]) for r in self.rows))
        head = f"{'rank':>4}  {'model':<{w}} {'R':>8} {'R_b':>8} {'wR':>8} {'chi2_nu':>10} {'scale':>12} {'points':>10}"
        lines = [head]
        for r in self.rows:
            lines.append(f"{r['rank']:>4}  {r['name']:<{w}} {r['r_factor']:8.4f} {r['r_factor_bg']:8.4f} "
                         f"{r['wr_factor']:8.4f} {r['chi2']:10.4g} {r['scale']:12.5g} {r['n_points']:10d}")
        lines.append(f"(ranked by {self.by}, best first)")
        return "\n".join(lines)


def _name_of(calc, i: int) -> str:
    if isinstance(calc, (str, Path)):
        return Path(calc).name
    if isinstance(calc, Pattern):
        f = calc.metadata.get("file") or (calc.metadata.get("provenance") or {}).get("input_file", "")
        return Path(f).name if f else f"map {i}"
    if isinstance(calc, MapSource):
        return calc.path.name
    d = calc.describe() if _is_model(calc) else {}
    if d.get("file"):
        return f"{Path(d['file']).name}[{d.get('frame', 0)}]"
    return f"model {i}"


def _rank(calcs, meas, *, names, by, mask, symmetry, exclude_bragg, stream, keep, **options) -> Ranking:
    calcs = list(calcs)
    if not calcs:
        raise InvalidInputError("no models to rank: `calcs` is empty")
    if names is None:
        names = [_name_of(c, i) for i, c in enumerate(calcs)]
    names = [str(n) for n in names]
    if len(names) != len(calcs):
        raise InvalidInputError(f"`names` has {len(names)} entries for {len(calcs)} models")
    if keep not in ("best", "all"):
        raise InvalidInputError(f"`keep` must be 'best' or 'all', got {keep!r}")
    m = Measured(meas, mask=mask, exclude_bragg=exclude_bragg, symmetry=symmetry, stream=stream)
    if by is None:
        by = "chi2" if m.weighted else "wr_factor"
    if by not in RANK_BY:
        raise InvalidInputError(f"`by` must be one of {', '.join(RANK_BY)}, got {by!r}")
    if by == "chi2" and not m.weighted:
        raise InvalidInputError("cannot rank by chi2: the measured map has no sigma; use by='wr_factor'")
    entries = []
    best, best_key = None, math.inf
    for i, (name, calc) in enumerate(zip(names, calcs)):
        c = _compare_one(m, calc, **options)
        key = getattr(c, by)
        key = key if math.isfinite(key) else math.inf
        row = {"name": name, **{k: getattr(c, k) for k in ("r_factor", "r_factor_bg", "wr_factor", "chi2", "r_exp",
                                                           "scale", "background", "n_points")}}
        row["model_sampling"] = c.metadata.get("model_sampling", {}).get("mode", "")
        entries.append((key, i, row, c if keep == "all" else None))
        if best is None or key < best_key:
            best, best_key = c, key
    entries.sort(key=lambda e: (e[0], e[1]))
    rows = []
    for rank, (_k, _i, row, _c) in enumerate(entries, start=1):
        row["rank"] = rank
        rows.append(row)
    comps = [e[3] for e in entries] if keep == "all" else [best]
    return Ranking(rows, by, comps)


def rank_models(calcs: Sequence, meas, *, names=None, by: str | None = None, keep: str = "best", mask=None,
                symmetry=None, exclude_bragg=None, stream=None, scale="fit", background="flat", resolution=None,
                resolution_max=None, sampling: str = "auto", probe="xray", method: str = "auto", tol: float = 1e-6,
                threads: int | None = None, chunk_atoms: int | None = None, progress=False,
                **probe_options) -> Ranking:
    """Compare several models (or frames, or maps) with one measurement; best first.

    Parameters
    ----------
    calcs : sequence
        Models, atom sources (e.g. ``[src.at_frame(i) for i in range(src.n_frames)]``),
        Patterns or map files, each as `calc` of :func:`compare`.
    meas
        The measured map (prepared once: masks, Bragg exclusion and symmetry are shared).
    names : sequence of str, optional
        Row names (default: file names and frames, else "model i").
    by : {"chi2", "wr_factor", "r_factor", "r_factor_bg"}, optional
        Figure to rank by, lower is better (default χ²_ν when the measurement has σ, else wR).
    keep : {"best", "all"}
        Keep the full comparison (maps) of the best model only, or of all.
    **options
        As for :func:`compare`.

    Returns
    -------
    Ranking
        ``rows`` (name, rank, figures), ``best`` (Comparison), ``str(ranking)`` a table.

    Raises
    ------
    InvalidInputError
        No models, names that do not match, an unknown figure, chi2 without σ; and what
        :func:`compare` raises.
    """
    scatter_options = dict(probe=probe, method=method, tol=tol, threads=threads, chunk_atoms=chunk_atoms,
                           **probe_options)
    return _rank(calcs, meas, names=names, by=by, mask=mask, symmetry=symmetry, exclude_bragg=exclude_bragg,
                 stream=stream, keep=keep, scale=scale, background=background, resolution=resolution,
                 resolution_max=resolution_max, sampling=sampling, scatter_options=scatter_options,
                 progress=progress)


__all__ = ["compare", "rank_models", "Comparison", "Ranking", "Measured", "EXCLUSION_REASONS", "RANK_BY"]
