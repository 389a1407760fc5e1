"""Model beside measurement: :func:`compare` and :func:`rank_models`.

A comparison walks through the measured map and the model's map slab by slab (axis 0 of the
grid): masks, |q|, the normal equations of the fit and the figures are accumulated per slab,
so the same code serves maps in memory and maps read from files that do not fit in memory
(``stream=True``). See :mod:`kinemap.compare.agreement` for the fit and the definitions of the
figures, and :mod:`kinemap.compare.sampling` for how a model is computed on the measured grid.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from .._shared.progress import Progress
from .._shared.validate import real_number
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import QGrid
from .agreement import Block, check_background, fit_blocks
from .comparison import Comparison
from .maps import ArrayMap, MapSource, as_map, is_map_file, same_grid
from .measured import EXCLUSION_REASONS, Measured, _symmetrize, walk
from .sampling import gaussian_resolution, model_on_grid


def _blocks(meas: Measured, calc_src, counts: dict, progress):
    state = {"first": True}

    def gen():
        c = counts if state["first"] else None
        state["first"] = False
        for _a, _b, io, so, ic, sc, q, keep in walk(meas, calc_src, c, progress):
            yield Block(io[keep], ic[keep], None if so is None else so[keep], None if sc is None else sc[keep], q[keep])

    return gen


# ---------------------------------------------------------------------------------------
def _is_model(value) -> bool:
    return all(hasattr(value, a) for a in ("iter_chunks", "species_labels", "describe"))


def needs_memory(calcs, symmetry, resolution) -> bool:
    """Whether a comparison needs the maps whole: a model to compute on the measured grid,
    a symmetry average or a resolution convolution."""
    if symmetry is not None or resolution is not None:
        return True
    return any(_is_model(c) or (isinstance(c, (str, Path)) and not is_map_file(c)) for c in calcs)


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
                    raise InvalidInputError("`resolution` must be None, a width in 1/angstrom or 'fit', "
                                            f"got {resolution!r}")
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
        from .ranking import _rank

        return _rank(calc, meas, names=names, by=by, mask=mask, symmetry=symmetry, exclude_bragg=exclude_bragg,
                     stream=stream, keep="best", **options)
    if names is not None or by is not None:
        raise InvalidInputError("`names` and `by` apply when `calc` is a list of models")
    m = Measured(meas, mask=mask, exclude_bragg=exclude_bragg, symmetry=symmetry, stream=stream,
                 needs_memory=needs_memory([calc], symmetry, resolution))
    return _compare_one(m, calc, **options)


__all__ = ["compare"]
