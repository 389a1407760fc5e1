"""Files and pictures of a comparison.

File layout (NeXus in HDF5; written by slabs under a temporary name, renamed when complete):

    /                      NXroot, default="entry"
    /entry                 NXentry, default="measured"
    /entry/measured        NXdata: intensity (+ intensity_errors), axes as in kinemap maps
    /entry/model           NXdata: intensity = s I_c + b (the model on the measured scale),
                           unscaled = I_c (+ unscaled_errors = σ_c)
    /entry/residual        NXdata: intensity = I_o − (s I_c + b), NaN where a point was not
                           used; used = 1 where it was
    /entry/figures         NXcollection: scale, background coefficients, R, R_b, wR, χ²_ν,
                           R_exp, N, N_ind, p, points left out per reason; every dataset has
                           a "definition" attribute, and definitions/ holds them all
    /entry/shells          NXdata: the figures per |q| shell against the shell centre
    /entry/grid            NXcollection: kind, shape, origin, steps, cell (as in kinemap maps)
    /entry/sample          NXsample: unit_cell_abc, unit_cell_alphabetagamma (hkl grids)
    /entry/parameters      NXcollection: how the model was computed, symmetry, settings

The picture: measured | model | residual (the first two on one shared colour scale, the
residual on a diverging scale centred on zero) and line profiles of measured and model along
a chosen line.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.nexus import nexus_entry
from .._shared.output import atomic_write, check_output
from ..errors import InvalidInputError
from ..qgrid import RegularGrid
from .agreement import DEFINITIONS


def _axes(group, grid) -> None:
    import h5py

    if grid.is_regular:
        for i, (name, values, unit) in enumerate(zip(grid.axis_names, grid.axis_values, grid.axis_units)):
            ds = group.create_dataset(name, data=np.asarray(values, dtype=np.float64))
            ds.attrs["units"] = unit
            group.attrs[f"{name}_indices"] = i
        group.attrs["axes"] = np.array(list(grid.axis_names) or ["."], dtype=h5py.string_dtype())
    else:
        q = group.create_dataset("q", data=grid.q.reshape(tuple(grid.shape) + (3,)))
        q.attrs["units"] = "1/angstrom"
        group.attrs["axes"] = np.array(["."] * len(grid.shape), dtype=h5py.string_dtype())


def _nxdata(entry, name: str, grid, long_name: str):
    g = entry.create_group(name)
    g.attrs["NX_class"] = "NXdata"
    g.attrs["signal"] = "intensity"
    _axes(g, grid)
    g.attrs["long_name"] = long_name
    return g


def _dataset(g, name, grid, chunk_rows, long_name=None):
    shape = tuple(grid.shape)
    chunks = (max(1, min(shape[0], chunk_rows)),) + shape[1:] if shape else None
    ds = g.create_dataset(name, shape=shape, dtype=np.float64, chunks=chunks if grid.size > 1 << 16 else None)
    if long_name:
        ds.attrs["long_name"] = long_name
    return ds


def _grid_group(entry, grid) -> None:
    import h5py

    gg = entry.create_group("grid")
    gg.attrs["NX_class"] = "NXcollection"
    gg.create_dataset("kind", data=grid.kind)
    gg.create_dataset("shape", data=np.asarray(grid.shape, dtype=np.int64))
    for name in ("origin", "steps", "cell", "hkl_origin", "hkl_steps"):
        val = getattr(grid, name, None)
        if val is not None:
            d = gg.create_dataset(name, data=np.asarray(val, dtype=np.float64))
            units = {"cell": "angstrom", "hkl_origin": "r.l.u.", "hkl_steps": "r.l.u."}
            d.attrs["units"] = units.get(name, "1/angstrom")
    gg.create_dataset("axis_names", data=np.array(grid.axis_names or [""], dtype=h5py.string_dtype()))
    if grid.cell is not None:
        c = np.asarray(grid.cell)
        s = entry.create_group("sample")
        s.attrs["NX_class"] = "NXsample"
        lengths = np.linalg.norm(c, axis=1)
        ang = [np.degrees(np.arccos(np.clip(c[j] @ c[k] / (lengths[j] * lengths[k]), -1, 1)))
               for j, k in ((1, 2), (0, 2), (0, 1))]
        s.create_dataset("unit_cell_abc", data=lengths).attrs["units"] = "angstrom"
        s.create_dataset("unit_cell_alphabetagamma", data=np.array(ang)).attrs["units"] = "degree"


def _figures_group(entry, cmp, n_shells: int) -> None:
    import h5py

    from ..pattern import _write_params

    fg = entry.create_group("figures")
    fg.attrs["NX_class"] = "NXcollection"
    defs = cmp.definitions
    ag = cmp.agreement
    items = {
        "scale": (ag.scale, "s, fitted by weighted linear least squares" if ag.scale_fitted else "s, fixed"),
        "background": (ag.background, "coefficients b_k of b(|q|) = sum_k b_k |q|^k, |q| in 1/angstrom, "
                                      f"constant first ({ag.background_kind})"),
        "r_factor": (ag.r_factor, defs["r_factor"]),
        "r_factor_bg": (ag.r_factor_bg, defs["r_factor_bg"]),
        "wr_factor": (ag.wr_factor, defs["wr_factor"]),
        "chi2": (ag.chi2, defs["chi2"]),
        "r_exp": (ag.r_exp, defs["r_exp"]),
        "n_points": (ag.n_points, "N, points used: " + defs["points"]),
        "n_independent": (ag.n_independent, "independent points among them (after symmetry averaging)"),
        "n_params": (ag.n_params, "p, fitted parameters (scale, background coefficients, resolution width)"),
    }
    for k, (v, text) in items.items():
        d = fg.create_dataset(k, data=np.asarray(v, dtype=np.float64) if k not in ("n_points", "n_independent",
                                                                                      "n_params") else int(v))
        d.attrs["definition"] = text
    if cmp.resolution is not None:
        d = fg.create_dataset("resolution", data=float(cmp.resolution))
        d.attrs["units"] = "1/angstrom"
        d.attrs["definition"] = defs.get("resolution", "")
    ex = fg.create_group("excluded")
    for k, v in cmp.excluded.items():
        ex.create_dataset(k, data=int(v))
    dg = fg.create_group("definitions")
    for k, v in defs.items():
        dg.create_dataset(k, data=str(v), dtype=h5py.string_dtype())
    if ag.q_range is not None:
        sh = ag.shells(n_shells)
        s = entry.create_group("shells")
        s.attrs["NX_class"] = "NXdata"
        s.attrs["signal"] = "r_factor"
        s.attrs["axes"] = np.array(["q"], dtype=h5py.string_dtype())
        s.attrs["q_indices"] = 0
        q = s.create_dataset("q", data=0.5 * (sh.q_lo + sh.q_hi))
        q.attrs["units"] = "1/angstrom"
        for k in ("q_lo", "q_hi"):
            s.create_dataset(k, data=getattr(sh, k)).attrs["units"] = "1/angstrom"
        s.create_dataset("n_points", data=sh.n_points)
        for k in ("r_factor", "r_factor_bg", "wr_factor", "chi2", "r_exp"):
            s.create_dataset(k, data=getattr(sh, k)).attrs["definition"] = defs[k]
    p = entry.create_group("parameters")
    p.attrs["NX_class"] = "NXcollection"
    _write_params(p, cmp.metadata)


def save_comparison(cmp, path, *, overwrite: bool = False, shells: int = 10) -> Path:
    """Write a :class:`~kinemap.compare.Comparison` to a NeXus file (module notes).

    Parameters
    ----------
    cmp : Comparison
    path : str or path-like
    overwrite : bool
        Replace an existing file (default: refuse).
    shells : int
        Number of |q| shells in /entry/shells.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    FileExistsError
        An existing file without ``overwrite=True``.
    OSError
        An unwritable place; nothing is left behind on any error.
    """
    import h5py

    grid = cmp.grid
    meas_file = cmp.metadata.get("measured", {}).get("file")
    inputs = [meas_file] if meas_file else []
    final = check_output(path, overwrite=overwrite, inputs=inputs, what="comparison file")
    rows = cmp._meas.rows
    has_so = cmp._meas.weighted
    has_sc = cmp._calc.has_sigma
    with atomic_write(final, overwrite=overwrite, inputs=inputs, what="comparison file") as tmp, \
            h5py.File(tmp, "w") as f:
        entry = nexus_entry(f, final.name, default="measured", program="kinemap compare")
        gm = _nxdata(entry, "measured", grid, "measured intensity I_o" +
                     (" (symmetry-averaged)" if cmp._meas.symmetry_info else ""))
        gc = _nxdata(entry, "model", grid, "model on the measured scale, s I_c + b")
        gr = _nxdata(entry, "residual", grid, "residual I_o - (s I_c + b); NaN where not used")
        dm = _dataset(gm, "intensity", grid, rows)
        dme = _dataset(gm, "intensity_errors", grid, rows) if has_so else None
        dc = _dataset(gc, "intensity", grid, rows, "s I_c + b")
        dcu = _dataset(gc, "unscaled", grid, rows, "I_c, the model's map before scale and background")
        dce = _dataset(gc, "unscaled_errors", grid, rows) if has_sc else None
        dr = _dataset(gr, "intensity", grid, rows)
        du = gr.create_dataset("used", shape=tuple(grid.shape), dtype=np.uint8)
        du.attrs["long_name"] = "1 where the point took part in the sums"
        tail = tuple(grid.shape[1:])
        for a, b, io, so, ic, sc, q, keep in cmp.walk():
            shp = (b - a,) + tail
            fit = cmp.fitted_values(ic, q)
            res = np.where(keep, io - fit, np.nan)
            dm[a:b] = io.reshape(shp)
            if dme is not None:
                dme[a:b] = so.reshape(shp)
            dc[a:b] = fit.reshape(shp)
            dcu[a:b] = ic.reshape(shp)
            if dce is not None and sc is not None:
                dce[a:b] = sc.reshape(shp)
            dr[a:b] = res.reshape(shp)
            du[a:b] = keep.reshape(shp).astype(np.uint8)
        _grid_group(entry, grid)
        _figures_group(entry, cmp, shells)
    return final


# ---------------------------------------------------------------------------------------
# picture
# ---------------------------------------------------------------------------------------
def _section(cmp, sel, keep_axes):
    """2-D (or 1-D) sections of measured, fitted model and residual, walking the slabs."""
    grid = cmp.grid
    shape = tuple(grid.shape)
    out_shape = tuple(shape[a] for a in keep_axes)
    meas, fit, res = (np.full(out_shape, np.nan) for _ in range(3))
    tail = shape[1:]
    for a, b, io, _so, ic, _sc, q, keep in cmp.walk():
        shp = (b - a,) + tail
        f = cmp.fitted_values(ic, q)
        r = np.where(keep, io - f, np.nan)
        s0 = sel[0]
        if isinstance(s0, (int, np.integer)):
            if not a <= s0 < b:
                continue
            local = (s0 - a,) + tuple(sel[1:])
            dest = (slice(None),) * len(out_shape)
        else:
            local = (slice(None),) + tuple(sel[1:])
            dest = (slice(a, b),) + (slice(None),) * (len(out_shape) - 1)
        meas[dest] = io.reshape(shp)[local]
        fit[dest] = f.reshape(shp)[local]
        res[dest] = r.reshape(shp)[local]
    return meas, fit, res


def _profile(values_2d, start, stop, n=400):
    from scipy.ndimage import map_coordinates

    t = np.linspace(0.0, 1.0, n)
    coords = np.outer(np.asarray(start), 1 - t) + np.outer(np.asarray(stop), t)
    return map_coordinates(values_2d, coords, order=1, cval=np.nan, mode="constant", prefilter=False)


def _to_index(grid, axis: int, value: float) -> float:
    v = np.asarray(grid.axis_values[axis], dtype=np.float64)
    if len(v) == 1:
        return 0.0
    return (value - v[0]) / (v[1] - v[0])


def comparison_figure(cmp, *, slice_axis=None, slice_index=None, profile=None, scale: str = "log",
                      dpi: int = 100, cmap: str = "viridis"):
    """The figure of :func:`plot_comparison` (matplotlib Agg, no pyplot state), not saved."""
    from matplotlib.colors import Normalize

    from ..plot import _norm, _plane_coords, _slice_2d, new_figure

    if scale not in ("log", "linear"):
        raise InvalidInputError(f"`scale` must be 'log' or 'linear', got {scale!r}")
    grid = cmp.grid
    if not grid.is_regular and not (grid.ndim == 1 and grid.axis_values):  # 1-D: e.g. a powder pattern
        raise InvalidInputError("a map on arbitrary q-points has no layout to draw")
    nd = len(grid.shape)
    sel: tuple[slice | int, ...]
    if nd == 1:
        if slice_axis is not None or profile is not None:
            raise InvalidInputError("`slice_axis` and `profile` apply to 2-D and 3-D maps; this map is a line")
        sel, keep_axes, cut = (slice(None),), [0], ""
    else:
        if nd == 2 and slice_axis is not None:
            raise InvalidInputError("`slice_axis` applies to 3-D maps only; this map is 2-D")
        sel, keep_axes, cut = _slice_2d(grid, slice_axis, slice_index)
    meas, fit, res = _section(cmp, sel, keep_axes)
    both = np.concatenate([meas[np.isfinite(meas)], fit[np.isfinite(fit)]])
    if both.size == 0:
        raise InvalidInputError("nothing to draw: the section has no finite values")
    labels = [f"{grid.axis_names[a]} ({'r.l.u.' if grid.kind == 'hkl' else '1/Å'})" for a in keep_axes]
    if nd == 1:
        fig = new_figure(9.0, 6.0, dpi)
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[2, 1])
        x = np.asarray(grid.axis_values[0])
        top.plot(x, meas, lw=1.0, label="measured I_o")
        top.plot(x, fit, lw=1.0, label="model s·I_c + b")
        if scale == "log" and np.any(both > 0):
            top.set_yscale("log")
        top.legend()
        top.set_ylabel("intensity")
        bottom.plot(x, res, lw=0.9, color="0.3")
        bottom.axhline(0.0, color="0.6", lw=0.6)
        bottom.set_ylabel("residual")
        bottom.set_xlabel(labels[0])
        fig.suptitle(_title(cmp), fontsize=10)
        return fig
    fig = new_figure(13.0, 8.0, dpi)
    axd = fig.subplot_mosaic([["m", "c", "r"], ["p", "p", "p"]], height_ratios=[1.3, 1.0])
    norm = _norm(both, scale, None, None)
    finite_res = np.abs(res[np.isfinite(res)])
    lim = float(np.percentile(finite_res, 99.5)) if finite_res.size else 1.0
    lim = lim if lim > 0 else 1.0
    rnorm = Normalize(vmin=-lim, vmax=lim)
    if grid.kind == "hkl":
        xs, ys = grid.axis_values[keep_axes[0]], grid.axis_values[keep_axes[1]]
        coords = lambda z: (xs, ys, z.T)  # noqa: E731
    else:
        assert isinstance(grid, RegularGrid)  # other grids pass the check above only as 1-D profiles (drawn above)
        x, y, _e1, _e2 = _plane_coords(grid, keep_axes)
        coords = lambda z: (x, y, z)  # noqa: E731
    panels = (("m", meas, "measured I_o", norm, cmap), ("c", fit, "model s·I_c + b", norm, cmap),
              ("r", res, "residual I_o − (s·I_c + b)", rnorm, "RdBu_r"))
    for key, z, title, nrm, cm in panels:
        ax = axd[key]
        zz = np.where(z > 0, z, np.nan) if (scale == "log" and key != "r") else z
        mesh = ax.pcolormesh(*coords(zz), norm=nrm, cmap=cm, shading="nearest")
        fig.colorbar(mesh, ax=ax, shrink=0.85)
        ax.set_title(title, fontsize=10)
        ax.set_xlabel(labels[0])
        ax.set_ylabel(labels[1])
    # the profile line, in index coordinates of the section
    n0, n1 = meas.shape
    if profile is None:
        i_start, i_stop = (0.0, (n1 - 1) / 2.0), (n0 - 1.0, (n1 - 1) / 2.0)
    else:
        try:
            (x0, y0), (x1, y1) = profile
            x0, y0, x1, y1 = (float(v) for v in (x0, y0, x1, y1))
        except (TypeError, ValueError):
            raise InvalidInputError(f"`profile` must be ((x0, y0), (x1, y1)) in the picture's axis coordinates, "
                                    f"got {profile!r}") from None
        i_start = (_to_index(grid, keep_axes[0], x0), _to_index(grid, keep_axes[1], y0))
        i_stop = (_to_index(grid, keep_axes[0], x1), _to_index(grid, keep_axes[1], y1))
    pm, pc = _profile(meas, i_start, i_stop), _profile(fit, i_start, i_stop)
    vals = [np.asarray(grid.axis_values[a]) for a in keep_axes]

    def to_axis(i, k):
        return vals[k][0] + i * ((vals[k][1] - vals[k][0]) if len(vals[k]) > 1 else 0.0)

    p0 = (round(float(to_axis(i_start[0], 0)), 10) + 0.0, round(float(to_axis(i_start[1], 1)), 10) + 0.0)
    p1 = (round(float(to_axis(i_stop[0], 0)), 10) + 0.0, round(float(to_axis(i_stop[1], 1)), 10) + 0.0)
    if grid.kind == "hkl":
        for key in ("m", "c", "r"):
            axd[key].plot([p0[0], p1[0]], [p0[1], p1[1]], color="w" if key != "r" else "k", lw=0.8, ls="--")
    t = np.linspace(0.0, 1.0, len(pm))
    if grid.kind == "hkl":
        dist = t * float(np.hypot(p1[0] - p0[0], p1[1] - p0[1]))
        unit = "r.l.u."
    else:  # true length in q of the line
        st = np.asarray(grid.steps).reshape(nd, 3)
        dq = (i_stop[0] - i_start[0]) * st[keep_axes[0]] + (i_stop[1] - i_start[1]) * st[keep_axes[1]]
        dist = t * float(np.linalg.norm(dq))
        unit = "1/Å"
    ax = axd["p"]
    ax.plot(dist, pm, lw=1.1, label="measured I_o")
    ax.plot(dist, pc, lw=1.1, label="model s·I_c + b")
    if scale == "log" and np.nanmax(np.concatenate([pm, pc, [-np.inf]])) > 0:
        ax.set_yscale("log")
    ax.set_xlabel(f"distance along the line from ({p0[0]:.3g}, {p0[1]:.3g}) to ({p1[0]:.3g}, {p1[1]:.3g}) ({unit})")
    ax.set_ylabel("intensity")
    ax.legend()
    ax.grid(alpha=0.3)
    fig.suptitle(_title(cmp) + (f"\n{cut}" if cut else ""), fontsize=10)
    return fig


def plot_comparison(cmp, path, *, slice_axis=None, slice_index=None, profile=None, scale: str = "log",
                    dpi: int = 100, overwrite: bool = False, cmap: str = "viridis") -> Path:
    """Draw measured | model | residual and line profiles of measured and model into a PNG.

    Parameters
    ----------
    cmp : Comparison
    path : str or path-like
        PNG to write (temporary name, renamed when complete).
    slice_axis, slice_index : int or str, int
        For volumes: the axis to cut (index or name; default the last) and where (default
        the middle).
    profile : ((x0, y0), (x1, y1)), optional
        The line of the profiles, in the picture's axis coordinates (h, k, l values for hkl
        grids, distances along the edges in Å⁻¹ otherwise); default: along the first axis
        through the middle. A 1-D map is drawn as profiles with the residual below.
    scale : {"log", "linear"}
        Colour scale shared by measured and model (the residual: linear, centred on 0,
        limits ± the 99.5th percentile of |residual|).
    dpi : int
    overwrite : bool
    cmap : str
        Colour map of measured and model (the residual uses "RdBu_r").

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InvalidInputError
        Arbitrary q-points (no layout), bad options, no finite values to draw.
    """
    from ..plot import save_figure

    check_output(path, overwrite=overwrite, what="picture")
    fig = comparison_figure(cmp, slice_axis=slice_axis, slice_index=slice_index, profile=profile, scale=scale,
                            dpi=dpi, cmap=cmap)
    return save_figure(fig, path, dpi, overwrite=overwrite)


def _title(cmp) -> str:
    chi = f", χ²_ν = {cmp.chi2:.3g}" if np.isfinite(cmp.chi2) else ""
    return f"R = {cmp.r_factor:.4f}, wR = {cmp.wr_factor:.4f}{chi}, s = {cmp.scale:.4g}, b = {cmp.background:.4g}"


__all__ = ["save_comparison", "plot_comparison", "comparison_figure", "DEFINITIONS"]
