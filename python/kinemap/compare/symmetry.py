"""Point-group averages of maps and peak lists; equivalent and allowed reflections.

``symmetrize(pattern, "m-3m")`` replaces every point of a map by the mean of its symmetry
images that exist on the map, reports the internal agreement R_int and the number of
independent points, and fills unmeasured (NaN) points from their measured images.

* hkl grids (``QGrid.hkl``) of any cell that supports the group: operations act on h, k, l as
  (W⁻¹)ᵀ; images must fall on grid points (within `tol` steps), exactly.
* Å⁻¹ grids (line, plane, volume) with ``cell=``: operations act on q in Cartesian form,
  R = Cᵀ W C⁻ᵀ; images must fall on grid points. Quasicrystal groups act on Cartesian q in
  the frame of :mod:`kinemap.quasi` and are read by multilinear interpolation, with an
  error estimate.
* Lists of points with integer indices (``indices=``: h, k, l, or the higher-dimensional
  indices of a :mod:`kinemap.quasi` scheme with ``scheme=``): exact.

Lines and planes use only the operations that map them onto themselves.
"""

from __future__ import annotations

import warnings

import numpy as np

from .._shared.progress import Progress
from .._shared.validate import flag, one_of, real_number
from ..errors import InvalidInputError
from ..pattern import Pattern
from ..qgrid import RegularGrid
from .pointgroups import PointGroup, describe_operation, point_group
from .sym_grid import accumulate, active_axes, check_memory, grid_actions, second_differences
from .sym_lists import accumulate_list, as_index_rows, list_actions
from .sym_quasi import index_kernel


class BijvoetAveragingWarning(UserWarning):
    """Averaging over a group with the inversion erases differences between Bijvoet pairs
    (I(h) ≠ I(−h) when f″ ≠ 0) that the map holds."""


#: Relative difference Σ|I(h) − I(−h)| / Σ|I| above which a map counts as non-centrosymmetric.
CENTROSYMMETRY_TOL = 1e-8

R_INT_DEFINITION = ("R_int = sum |I - <I>| / sum |I| over measured points with at least 2 distinct "
                    "measured images, <I> the mean over the point's distinct measured images")
SIGMA_DEFINITION = ("standard error of the mean of the m distinct measured images: sqrt(sum sigma^2) / m")


# ----------------------------------------------------------------------------- public API
def symmetrize(pattern: Pattern, group, *, setting: str | None = None, cell=None, indices=None, scheme=None,
               method: str = "auto", tol: float = 1e-6, cell_tol: float = 1e-4, anomalous_check: bool = True,
               progress=False) -> Pattern:
    """Average a map over a point group.

    Every point gets the mean of the values at its images under the group's operations that
    exist: an image is left out when it does not fall on a grid point (within `tol` grid
    steps), lies outside the grid, or lands on an unmeasured (NaN) point. A point's own value
    counts as one of its images; unmeasured points with measured images are filled.

    Parameters
    ----------
    pattern : Pattern
        The map. Its grid is an hkl grid (``QGrid.hkl``), a regular Å⁻¹ grid (line, plane,
        volume; needs `cell` for a crystallographic group), or a list of points with
        `indices`. NaN marks unmeasured points; ``pattern.sigma`` (if present) propagates.
    group : str or PointGroup
        Hermann–Mauguin symbol with an optional setting: ``"m-3m"``, ``"6/mmm"``, ``"-3m1"``,
        ``"-31m"``, ``"2/m:c"``, ``"-3m:R"``, … or a quasicrystal group ``"m-3-5"``,
        ``"8/mmm"``, ``"10/mmm"``, ``"12/mmm"`` (see :func:`kinemap.compare.point_group`).
    setting : str, optional
        The setting instead of a colon suffix: ``"a"``/``"b"``/``"c"`` (monoclinic unique
        axis, default b), ``"H"``/``"R"`` (trigonal axes, default H).
    cell : array_like (3, 3), optional
        Rows a, b, c in Å: needed for crystallographic groups on Å⁻¹ grids; for an hkl grid
        it must equal the grid's cell.
    indices : array_like (M, D) of int, optional
        Integer indices of the points of a point-list map (M = number of points): h, k, l
        for crystallographic groups, higher-dimensional indices with `scheme`.
    scheme : kinemap.quasi.CutProjectScheme, optional
        The scheme whose indices `indices` are (for quasicrystal groups on peak lists).
    method : {"auto", "exact", "interpolate"}
        "exact" uses images on grid points only; "interpolate" reads off-grid images by
        multilinear interpolation. "auto": exact, except quasicrystal groups on Å⁻¹ grids.
    tol : float
        How far (in grid steps) an image may be from a grid point and a line or plane from
        its image, 0 < tol < 0.5.
    cell_tol : float
        Relative tolerance of the check that the cell supports the group (its metric tensor
        G = cell·cellᵀ is preserved: max|WᵀGW − G| ≤ cell_tol·max|G|).
    anomalous_check : bool
        Warn (:class:`BijvoetAveragingWarning`) when the map has f″ ≠ 0 (X-ray with an energy
        and anomalous terms, from ``pattern.metadata["probe"]``), the group contains the
        inversion and the map is not centrosymmetric.
    progress : bool or callable
        A progress bar over the operations (True) or a callable(done, total).

    Returns
    -------
    Pattern
        Intensities averaged (no amplitude: phases do not average), sigma propagated, and
        ``metadata["symmetry"]`` with the group, setting, the operations used (matrices
        on h, k, l, on Cartesian q or on higher-dimensional indices), R_int, the number of
        independent points and, for interpolation, the error estimate.

    Raises
    ------
    InvalidInputError
        For an unknown symbol or setting, a cell that does not support the group (e.g. a
        cubic group on a tetragonal cell), a quasicrystal group on an hkl grid, a Å⁻¹ grid
        of a crystallographic group without `cell`, a point list without `indices`, bad
        `indices`, or a map too large for the memory left.

    Notes
    -----
    With n the number of available images of a point counted over the distinct operations
    and m the number of distinct ones among them (n = m·|stabiliser|):
    ⟨I⟩ = mean over distinct images; σ⟨I⟩ = sqrt(Σσ²)/m;
    R_int = Σ|I − ⟨I⟩| / Σ|I| over measured points with m ≥ 2;
    n_independent = Σ 1/m over measured points (the number of orbits with a measured member).
    Operations on h, k, l are (W⁻¹)ᵀ for direct-lattice matrices W; in Cartesian form
    R = Cᵀ W C⁻ᵀ. Interpolated images carry the estimate ½ Σ_d t_d(1 − t_d)|Δ²_d I| of the
    multilinear-interpolation error (t_d the fractional position, Δ²_d I the second
    difference along axis d); ``metadata["symmetry"]["interpolation"]`` gives its rms and
    maximum over the averaged points (the mean of the images' estimates at each point).

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1, 1, 3), k=(-1, 1, 3), l=0)
    >>> pat = km.Pattern.from_array(np.arange(9.0).reshape(3, 3), grid)
    >>> sym = km.symmetrize(pat, "4/mmm")
    >>> float(sym.intensity[0, 0]), float(sym.intensity[1, 1])
    (4.0, 4.0)
    """
    if not isinstance(pattern, Pattern):
        raise InvalidInputError(f"`pattern` must be a kinemap.Pattern, got {type(pattern).__name__}")
    g = point_group(group, setting=setting)
    method = one_of(method, "method", ("auto", "exact", "interpolate"))
    tol = real_number(tol, "tol", minimum=0.0, maximum=0.5, exclusive_minimum=True, exclusive_maximum=True)
    cell_tol = real_number(cell_tol, "cell_tol", minimum=0.0, exclusive_minimum=True)
    anomalous_check = flag(anomalous_check, "anomalous_check")
    grid = pattern.grid
    intensity = np.asarray(pattern.intensity, dtype=np.float64)
    sigma = None if pattern.sigma is None else np.asarray(pattern.sigma, dtype=np.float64)

    if grid.kind == "points":
        if indices is None:
            raise InvalidInputError(
                "a map on a list of points needs `indices` (one integer row per point: h, k, l, or the "
                "higher-dimensional indices of a quasicrystal scheme given as `scheme`) to find images exactly")
        return _symmetrize_list(pattern, g, intensity, sigma, indices, scheme, cell, cell_tol, anomalous_check,
                                progress, group)
    assert isinstance(grid, RegularGrid)  # every other kind of grid is regular
    if indices is not None or scheme is not None:
        raise InvalidInputError("`indices` and `scheme` apply to maps on lists of points; this map is on a "
                                f"regular {grid.kind} grid")

    if grid.kind == "hkl":
        if not g.is_crystallographic:
            raise InvalidInputError(
                f"the quasicrystal group {g.name!r} does not act on h, k, l of a lattice; symmetrise "
                "a map on a Å⁻¹ grid (QGrid.plane/volume) in the kinemap.quasi frame, or an indexed peak "
                "list (indices=, scheme=)")
        if grid.cell is None or grid.hkl_origin is None or grid.hkl_steps is None:
            raise InvalidInputError("the hkl grid has no cell (or no h, k, l origin and steps); rebuild it with "
                                    "QGrid.hkl(cell, ...)")
        gcell = np.asarray(grid.cell, dtype=np.float64)
        if cell is not None:
            from ..model import as_cell

            c = as_cell(cell)
            if not np.allclose(c, gcell, rtol=1e-9, atol=1e-12):
                raise InvalidInputError("`cell` differs from the cell of the hkl grid; leave `cell` out for hkl grids")
        g.check_cell(gcell, tol=cell_tol, name="the grid's cell")
        ops = g.hkl_operations.astype(np.float64)
        origin = np.asarray(grid.hkl_origin, dtype=np.float64)
        steps = np.asarray(grid.hkl_steps, dtype=np.float64).reshape(-1, 3)
        basis = "hkl (reciprocal-lattice units)"
        op_names = [describe_operation(w) for w in g.operations]
        interpolate = method == "interpolate"
    else:
        if g.is_crystallographic:
            if cell is None:
                raise InvalidInputError(
                    f"a {grid.kind} grid in Å⁻¹ needs `cell=` (rows a, b, c in Å) to place the operations of "
                    f"the crystallographic group {g.name!r}; or build the map on QGrid.hkl")
            c = g.check_cell(cell, tol=cell_tol)
            ops = g.cartesian_operations(c)
            op_names = [describe_operation(w) for w in g.operations]
            interpolate = method == "interpolate"
        else:
            if cell is not None:
                raise InvalidInputError(f"the quasicrystal group {g.name!r} takes no `cell`: it acts on Cartesian q "
                                        "in the kinemap.quasi frame")
            ops = g.cartesian
            op_names = [describe_operation(w, lattice=False) for w in g.cartesian]
            interpolate = method != "exact"
        origin = np.asarray(grid.origin, dtype=np.float64)
        steps = np.asarray(grid.steps, dtype=np.float64).reshape(-1, 3)
        basis = "cartesian q (1/angstrom)"

    if steps.shape[0] != len(grid.shape):
        raise InvalidInputError(f"the grid has {len(grid.shape)} axes but {steps.shape[0]} step vectors")
    actions, excluded = grid_actions(ops, origin, steps, grid.shape, tol=tol, interpolate=interpolate)
    act = active_axes(grid.shape, steps)
    n_pts = int(np.prod(grid.shape, dtype=np.int64))
    check_memory(n_pts, with_sigma=sigma is not None, interpolate=interpolate, ndim=len(act))

    shape_a = tuple(grid.shape[a] for a in act)
    values = intensity.reshape(shape_a)
    sig = None if sigma is None else sigma.reshape(shape_a)
    avail_b = np.isfinite(values)
    if sig is not None:
        avail_b &= np.isfinite(sig)
    values0 = np.where(avail_b, values, 0.0)
    avail = avail_b.astype(np.uint8)
    var0 = None if sig is None else np.where(avail_b, sig * sig, 0.0)
    del avail_b

    used = [k for a in actions for k in a.ops]
    warn = None
    if anomalous_check and _has_inversion(ops, used) and _anomalous_terms(pattern.metadata):
        inv_action = next(a for a in actions if any(np.allclose(ops[k], -np.eye(3)) for k in a.ops))
        check = accumulate(values0, avail, None, [inv_action], tol=tol)
        warn = _friedel_difference(values0, avail, check.total, check.count)

    d2 = second_differences(values0, avail) if interpolate and any(a.mode == "interp" for a in actions) else None
    with Progress(progress, len(actions), unit="operation", desc="symmetrising") as prog:
        sums = accumulate(values0, avail, var0, actions, tol=tol, second_diff=d2, progress=prog.add)
    del d2
    mean, sig_out, stats = _finish(values0, avail, sums)
    meta_ops = ops[used]
    info = {
        "group": g.symbol,
        "setting": g.setting if g.setting else "none",
        "system": g.system,
        "symbol_given": group if isinstance(group, str) else g.name,
        "group_order": g.order,
        "method": "interpolation" if interpolate else "exact",
        "operation_basis": basis,
        "operations": [np.round(m, 12).tolist() for m in meta_ops],
        "operation_names": [op_names[k] for k in used],
        "n_operations_used": len(used),
        "n_distinct_actions": len(actions),
        "operations_not_mapping_grid": [op_names[k] for k in excluded],
        "operations_without_grid_images": [op_names[k] for a in actions if a.mode == "none" for k in a.ops],
        "tolerance_steps": tol,
    }
    info.update(stats)
    if interpolate and sums.err is not None:
        info["interpolation"] = _interp_summary(sums, mean)
    if warn is not None:
        _warn_bijvoet(g, warn, pattern.metadata)
    return _result(pattern, mean.reshape(grid.shape), None if sig_out is None else sig_out.reshape(grid.shape), info)


# ----------------------------------------------------------------------------- internals
def _symmetrize_list(pattern, g: PointGroup, intensity, sigma, indices, scheme, cell, cell_tol, anomalous_check,
                     progress, given) -> Pattern:
    m = intensity.size
    if scheme is not None:
        if cell is not None:
            raise InvalidInputError("give `scheme` (higher-dimensional indices) or `cell` (h, k, l), not both")
        ops = g.index_operations(scheme)
        kernel = index_kernel(scheme)
        basis = f"higher-dimensional indices of the scheme {getattr(scheme, 'name', '')!r}"
        names = [describe_operation(r, lattice=False) for r in g.cartesian]
    else:
        if not g.is_crystallographic:
            raise InvalidInputError(
                f"the quasicrystal group {g.name!r} on a peak list needs `scheme=` (the kinemap.quasi scheme whose "
                "higher-dimensional indices `indices` are)")
        if cell is not None:
            g.check_cell(cell, tol=cell_tol)
        ops = g.hkl_operations
        kernel = None
        basis = "hkl (reciprocal-lattice units)"
        names = [describe_operation(w) for w in g.operations]
    rows = as_index_rows(indices, m, ops.shape[1])
    values = intensity.reshape(-1)
    sig = None if sigma is None else sigma.reshape(-1)
    avail_b = np.isfinite(values)
    if sig is not None:
        avail_b &= np.isfinite(sig)
    values0 = np.where(avail_b, values, 0.0)
    avail = avail_b.astype(np.uint8)
    var0 = None if sig is None else np.where(avail_b, sig * sig, 0.0)
    with Progress(progress, len(ops), unit="operation", desc="symmetrising") as prog:
        positions, members = list_actions(ops, rows, kernel)
        prog.add(len(ops))
    used = [k for mem in members for k in mem]
    warn = None
    if anomalous_check and _has_inversion(ops, used) and _anomalous_terms(pattern.metadata):
        j = next(i for i, mem in enumerate(members) if any(np.array_equal(ops[k], -np.eye(len(ops[k]))) for k in mem))
        chk = accumulate_list(values0, avail, None, [positions[j]])
        warn = _friedel_difference(values0, avail, chk.total, chk.count)
    sums = accumulate_list(values0, avail, var0, positions)
    mean, sig_out, stats = _finish(values0, avail, sums)
    info = {
        "group": g.symbol,
        "setting": g.setting if g.setting else "none",
        "system": g.system,
        "symbol_given": given if isinstance(given, str) else g.name,
        "group_order": g.order,
        "method": "exact (indexed list)",
        "operation_basis": basis,
        "operations": [np.asarray(ops[mem[0]]).tolist() for mem in members],
        "operation_names": [names[mem[0]] for mem in members],
        "n_operations_used": len(used),
        "n_distinct_actions": len(members),
    }
    info.update(stats)
    if warn is not None:
        _warn_bijvoet(g, warn, pattern.metadata)
    return _result(pattern, mean.reshape(pattern.grid.shape),
                   None if sig_out is None else sig_out.reshape(pattern.grid.shape), info)


def _finish(values0, avail, sums):
    """Means, propagated σ and the statistics, with few full-size temporaries."""
    count, stab = sums.count, np.maximum(sums.stab, 1)
    has = count > 0
    all_have = bool(has.all())
    mean = sums.total                      # reused in place: the sums are not needed after
    np.divide(mean, count, out=mean, where=has)
    if not all_have:
        mean[~has] = np.nan
    sig_out = None
    if sums.var is not None:
        sig_out = sums.var
        sig_out *= stab
        np.sqrt(sig_out, out=sig_out)
        np.divide(sig_out, count, out=sig_out, where=has)
        if not all_have:
            sig_out[~has] = np.nan
    # m = distinct measured images: n = m·|stabiliser| exactly for exact maps (integer
    # division); interpolated images are rounded
    if sums.err is None:
        distinct = count // stab
    else:
        distinct = np.rint(count / stab).astype(count.dtype)
    distinct *= avail
    per = np.bincount(distinct.reshape(-1))
    n_indep = float(sum(c / m for m, c in enumerate(per) if m > 0))
    num = den = 0.0
    flat_d, flat_v, flat_m = distinct.reshape(-1), values0.reshape(-1), mean.reshape(-1)
    step = 1 << 20
    for a in range(0, flat_v.size, step):
        multi = flat_d[a:a + step] >= 2
        v = flat_v[a:a + step]
        num += float(np.abs(v - flat_m[a:a + step], where=multi, out=np.zeros(len(v))).sum())
        den += float(np.abs(v).sum(where=multi))
    r_int = num / den if den > 0 else float("nan")
    n_meas = int(np.count_nonzero(avail))
    n_have = int(np.count_nonzero(has))
    stats = {
        "r_int": r_int,
        "r_int_definition": R_INT_DEFINITION,
        "n_independent": int(round(n_indep)),
        "n_points": int(values0.size),
        "n_points_measured": n_meas,
        "n_points_filled": n_have - n_meas,
        "n_points_without_value": int(values0.size) - n_have,
        "n_points_in_r_int": int(per[2:].sum()),
    }
    if sums.var is not None:
        stats["sigma_definition"] = SIGMA_DEFINITION
    return mean, sig_out, stats


def _interp_summary(sums, mean) -> dict:
    has = sums.count > 0
    est = np.zeros(mean.shape)
    np.divide(sums.err, sums.count.astype(np.float64), out=est, where=has)
    e = est[has]
    scale = float(np.sqrt(np.mean(mean[has] ** 2))) if has.any() else float("nan")
    rms = float(np.sqrt(np.mean(e ** 2))) if e.size else float("nan")
    return {
        "order": 1,
        "scheme": "multilinear (the 2^d neighbouring grid points)",
        "error_estimate": "1/2 sum_d t_d (1 - t_d) |second difference of I along axis d| per image, "
                          "averaged over the point's images",
        "error_rms": rms,
        "error_max": float(e.max()) if e.size else float("nan"),
        "relative_error_rms": rms / scale if scale > 0 else float("nan"),
    }


def _result(pattern: Pattern, mean, sig_out, info) -> Pattern:
    meta = dict(pattern.metadata)
    meta["symmetry"] = info
    return Pattern(pattern.grid, intensity=mean, metadata=meta, units=pattern.units, sigma=sig_out)


def _has_inversion(ops, used) -> bool:
    return any(np.array_equal(np.rint(ops[k]), -np.eye(len(ops[k]))) and np.allclose(ops[k], -np.eye(len(ops[k])))
               for k in used)


def _anomalous_terms(meta) -> dict | None:
    """The probe record when it says f″ ≠ 0 (X-ray with an energy and anomalous terms)."""
    probe = meta.get("probe") if isinstance(meta, dict) else None
    if not isinstance(probe, dict) or probe.get("probe") != "xray":
        return None
    if probe.get("energy_kev") in (None, "") or str(probe.get("anomalous_source", "none")).startswith("none"):
        return None
    return probe


def _friedel_difference(values0, avail, mate_total, mate_count) -> float | None:
    both = avail.astype(bool) & (mate_count > 0)
    den = float(np.abs(values0[both]).sum())
    if den == 0:
        return None
    diff = float(np.abs(values0[both] - mate_total[both]).sum()) / den
    return diff if diff > CENTROSYMMETRY_TOL else None


def _warn_bijvoet(g: PointGroup, diff: float, meta) -> None:
    probe = _anomalous_terms(meta) or {}
    energy = probe.get("energy_kev")
    alt = g.acentric_groups()
    where = f"X-ray at {float(energy):.6g} keV" if isinstance(energy, (int, float)) else "X-ray with anomalous terms"
    warnings.warn(BijvoetAveragingWarning(
        f"the map has anomalous scattering (f'' != 0: {where}) and its Bijvoet pairs differ "
        f"(sum|I(h) - I(-h)| / sum|I| = {diff:.3g}); averaging over {g.name}, which contains the inversion, "
        f"erases those differences. To keep them, average over a point group without the inversion"
        + (f": {', '.join(alt)} (the acentric groups of Laue class {g.laue_class().name})" if alt else "")
        + "; pass anomalous_check=False to silence this warning"), stacklevel=3)


__all__ = ["symmetrize", "BijvoetAveragingWarning", "CENTROSYMMETRY_TOL"]
