"""A model's map on a measured grid, computed where the model is meaningful.

A periodic model (a box of M₁×M₂×M₃ cells) has a structure factor that is meaningful only on
its box's reciprocal lattice, q = 2π B⁻¹n with integer n (B the box, rows as vectors): in
between, every Bragg peak carries the interference ripple of the finite box, which swamps
the diffuse scattering. So a periodic model is never evaluated at off-lattice points:

* "average" (grids commensurate with the box lattice: every step and the origin are lattice
  vectors): the model is computed on all lattice points along the measured axes (a sub-grid
  with the primitive lattice steps d_a = step_a/g_a, g_a the greatest common divisor of the
  step's integer components) and averaged over each measured voxel (the box |i − i₀| ≤ ½ in
  each grid index; lattice points on a voxel face count half to each voxel, so every voxel
  averages g_a lattice points along axis a). This is what a measured voxel, which integrates
  the intensity over its volume, holds.
* "centres" (commensurate grids): the model at the voxel centres only (cheaper, noisier).
* "snap" (any regular grid): the model is computed on ``grid.snapped(box)``, the nearest
  commensurate grid, voxel-averaged there, and every measured point takes the value of the
  nearest snapped point; the largest distance moved (Å⁻¹) is reported. For arbitrary
  q-points, each point takes the model at its nearest lattice point.
* "points": a finite particle (no box) is computed at the measured points themselves.

"auto" picks "average" for commensurate grids, "snap" otherwise, and "points" for models
without a box. The choice and its numbers are recorded in the result's metadata.

Resolution: an isotropic Gaussian of standard deviation w (Å⁻¹) convolved with the model map
on its regular grid, exp(−|Δq|²/2w²) with Δq = Σ_a k_a step_a (non-orthogonal steps
included), normalised over the points that exist (so edges and holes do not darken the map).
On planes and lines the convolution acts within the plane or line only.
"""

from __future__ import annotations

import math

import numpy as np

from .._shared.memory import check_fits
from .._shared.progress import Progress
from ..errors import InvalidInputError
from ..model import as_cell
from ..pattern import Pattern
from ..qgrid import QGrid, RegularGrid

SAMPLINGS = ("auto", "average", "centres", "snap", "points")

#: Sub-grid points computed per slab of the voxel average (bounds the working memory).
SLAB_POINTS = 1 << 22


class _Forward:
    """Passes the (done, total) reports of one scatter call on to a running Progress."""

    def __init__(self, prog: Progress):
        self.prog = prog
        self.last = 0

    def __call__(self, done, total) -> None:
        self.prog.add(done - self.last)
        self.last = done


def _regular(origin, steps, shape) -> RegularGrid:
    """A line/plane/volume grid in Å⁻¹ with the given origin, steps and shape."""
    edges = [np.asarray(s, dtype=np.float64) * max(n - 1, 0) for s, n in zip(steps, shape)]
    if len(shape) == 1:
        return QGrid.line(origin, origin + edges[0], shape[0])
    if len(shape) == 2:
        return QGrid.plane(origin, edges[0], edges[1], shape)
    return QGrid.volume(origin, edges[0], edges[1], edges[2], shape)


def _lattice_steps(grid: RegularGrid, box) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Integer origin and steps of a commensurate grid in box-lattice units, and g per axis."""
    o, st = grid.box_coordinates(box)
    o_int = np.round(o)
    steps, gs = [], []
    for m, n in zip(np.round(st).astype(np.int64), grid.shape):
        if n == 1 or not np.any(m):
            steps.append(np.zeros(3, dtype=np.int64))
            gs.append(1)
            continue
        g = int(np.gcd.reduce(np.abs(m[m != 0])))
        steps.append(m // g)
        gs.append(g)
    return o_int, np.array(steps), gs


def _voxel_weights(g: int) -> np.ndarray:
    """Weights of the lattice points across one voxel of g lattice steps (faces count half)."""
    h = g // 2
    w = np.ones(2 * h + 1)
    if g % 2 == 0:
        w[0] = w[-1] = 0.5
    return w


def _reduce_axis(a: np.ndarray, axis: int, g: int, n_out: int) -> np.ndarray:
    """Σ_j w_j a[g·i + j] along `axis` (j over the voxel's lattice points) / Σ w."""
    w = _voxel_weights(g)
    out = None
    for j, wj in enumerate(w):
        sl = [slice(None)] * a.ndim
        sl[axis] = slice(j, j + g * (n_out - 1) + 1, g)
        term = wj * a[tuple(sl)]
        out = term if out is None else out + term
    return out / w.sum()


def _scatter_kwargs(options: dict) -> dict:
    return {k: v for k, v in options.items() if v is not None}


def voxel_average(model, grid: QGrid, *, progress=None, **scatter_options) -> tuple[np.ndarray, dict]:
    """The model's intensity averaged over the lattice points of each voxel of a grid that
    is commensurate with the model's box (see the module notes)."""
    from ..scatter import scatter

    if not isinstance(grid, RegularGrid):
        raise InvalidInputError("a voxel average needs a regular grid; this map is on arbitrary q-points")
    box = as_cell(model.box, "model box")
    o_int, d, gs = _lattice_steps(grid, box)
    to_q = 2.0 * np.pi * np.linalg.inv(box)  # q = to_q @ n
    nd = len(grid.shape)
    halves = [g // 2 for g in gs]
    sub_shape = [g * (n - 1) + 2 * h + 1 for g, n, h in zip(gs, grid.shape, halves)]
    per_row = int(np.prod(sub_shape[1:], dtype=np.int64)) if nd > 1 else 1
    total_sub = int(np.prod(sub_shape, dtype=np.int64))
    check_fits(min(total_sub, SLAB_POINTS + 2 * per_row * (gs[0] + 1)) * 48,
               f"the model on {total_sub:,} lattice points ({'×'.join(map(str, sub_shape))})")
    n_atoms = getattr(model, "n_atoms", None) or 0
    prog = Progress(progress, int(n_atoms) * total_sub, desc="model on the box lattice")
    out = np.empty(grid.shape, dtype=np.float64)
    # voxel rows of axis 0 per slab
    rows_per = max(1, SLAB_POINTS // max(per_row * gs[0], 1))
    meta_first = None
    n0 = grid.shape[0]
    try:
        for a in range(0, n0, rows_per):
            b = min(n0, a + rows_per)
            start_sub = gs[0] * a  # sub index of the first needed lattice point (offset −h₀ included)
            n_sub0 = gs[0] * (b - 1 - a) + 2 * halves[0] + 1
            origin_n = o_int - sum(h * dd for h, dd in zip(halves, d)) + start_sub * d[0]
            shape = [n_sub0] + sub_shape[1:]
            sub = _regular(to_q @ origin_n, [to_q @ dd for dd in d], shape)
            pat = scatter(model, sub, progress=_Forward(prog) if progress else False, **scatter_options)
            if meta_first is None:
                meta_first = pat.metadata
            v = pat.intensity
            for ax in range(nd):
                n_out = (b - a) if ax == 0 else grid.shape[ax]
                v = _reduce_axis(v, ax, gs[ax], n_out)
            out[a:b] = v
    finally:
        prog.close()
    info = {"mode": "average", "lattice_points_per_voxel": float(np.prod(gs)),
            "lattice_steps_per_voxel": list(gs), "lattice_points_computed": total_sub,
            "description": ("computed on the box's reciprocal lattice and averaged over each measured voxel "
                            f"({'×'.join(map(str, gs))} lattice steps per voxel; points on voxel faces count half)")
            if max(gs) > 1 else ("computed on the box's reciprocal lattice, whose points are the measured voxels' "
                                 "centres (one lattice point per voxel)")}
    return out, {"scatter": meta_first or {}, "sampling": info}


def _nearest_lattice(model, grid: QGrid, scatter_options, progress):
    """Arbitrary q-points: the model at each point's nearest box-lattice point."""
    from ..scatter import scatter

    box = as_cell(model.box, "model box")
    q = grid.q_vectors()
    n = np.round(q @ box.T / (2.0 * np.pi))
    qs = n @ (2.0 * np.pi * np.linalg.inv(box)).T
    shift = float(np.linalg.norm(q - qs, axis=1).max()) if len(q) else 0.0
    pat = scatter(model, QGrid.points(qs.reshape(tuple(grid.shape) + (3,))), progress=progress, **scatter_options)
    info = {"mode": "snap", "max_shift": shift,
            "description": ("each q-point took the model at its nearest box-lattice point (moved up to "
                            f"{shift:.3g} 1/angstrom)")}
    return pat.intensity, {"scatter": pat.metadata, "sampling": info}


def _snap(model, grid: RegularGrid, scatter_options, progress):
    box = as_cell(model.box, "model box")
    snapped = grid.snapped(box)
    inten, meta = voxel_average(model, snapped, progress=progress, **scatter_options)
    # nearest snapped point of every measured point
    st = np.asarray(snapped.steps, dtype=np.float64).reshape(len(snapped.shape), 3)
    pinv = np.linalg.pinv(st.T)  # (nd, 3): index coordinates of a q offset
    out = np.empty(grid.size)
    shift = 0.0
    used = np.zeros(snapped.size, dtype=bool)
    blk = 1 << 20
    flat = inten.reshape(-1)
    sshape = np.array(snapped.shape)
    for i in range(0, grid.size, blk):
        q = grid.q_vectors(i, i + blk)
        t = (q - snapped.origin) @ pinv.T
        k = np.clip(np.round(t).astype(np.int64), 0, sshape - 1)
        qs = snapped.origin + k @ st
        shift = max(shift, float(np.linalg.norm(q - qs, axis=1).max()))
        j = np.ravel_multi_index(tuple(k.T), tuple(sshape))
        used[j] = True
        out[i:i + blk] = flat[j]
    share = grid.size / max(int(used.sum()), 1)
    info = dict(meta["sampling"])
    info.update({"mode": "snap", "max_shift": shift, "snapped_shape": list(snapped.shape),
                 "measured_points_per_model_point": share,
                 "description": ("the grid is not on the box's reciprocal lattice: the model was computed on the "
                                 "nearest commensurate grid, averaged over its voxels, and each measured point took "
                                 f"its nearest snapped point (moved up to {shift:.3g} 1/angstrom; "
                                 f"{share:.3g} measured points per model point)")})
    return out.reshape(grid.shape), {"scatter": meta["scatter"], "sampling": info}


def model_on_grid(model, grid: QGrid, *, sampling: str = "auto", progress=False, **scatter_options) -> Pattern:
    """Compute a model's intensity for comparison with a map on `grid` (module notes).

    Parameters
    ----------
    model : Model or atom source
    grid : QGrid
        The measured grid.
    sampling : {"auto", "average", "centres", "snap", "points"}
    progress : bool or callable
    **scatter_options
        probe, method, tol, threads, chunk_atoms and probe options for :func:`kinemap.scatter`.

    Returns
    -------
    Pattern
        Intensity on `grid`; ``metadata["model_sampling"]`` says how it was computed.

    Raises
    ------
    InvalidInputError
        A sampling that does not apply (e.g. "average" on a grid off the box lattice, or
        "points" for a periodic model).
    """
    from ..scatter import scatter

    if sampling not in SAMPLINGS:
        raise InvalidInputError(f"`sampling` must be one of {', '.join(map(repr, SAMPLINGS))}, got {sampling!r}")
    opts = _scatter_kwargs(scatter_options)
    box = getattr(model, "box", None)
    if box is None:
        if sampling not in ("auto", "points"):
            raise InvalidInputError(f"`sampling`={sampling!r} needs a periodic model (a box); this model is a finite "
                                    "particle, computed at the measured points")
        pat = scatter(model, grid, progress=progress, **opts)
        info = {"mode": "points", "description": "finite particle (no periodic box): computed at the measured points"}
        return _result(grid, pat.intensity, {"scatter": pat.metadata, "sampling": info})
    if sampling == "points":
        raise InvalidInputError("`sampling`='points' would evaluate a periodic model off its box's reciprocal lattice, "
                                "where the finite-box ripple dominates; use 'average', 'centres' or 'snap'")
    if not isinstance(grid, RegularGrid):
        if sampling not in ("auto", "snap"):
            raise InvalidInputError(f"`sampling`={sampling!r} needs a regular grid; arbitrary q-points take the "
                                    "nearest box-lattice point ('snap')")
        return _result(grid, *_nearest_lattice(model, grid, opts, progress))
    commensurate = grid.is_commensurate(box)
    if sampling == "auto":
        sampling = "average" if commensurate else "snap"
    if sampling in ("average", "centres") and not commensurate:
        raise InvalidInputError(f"`sampling`={sampling!r} needs a grid on the box's reciprocal lattice (origin and "
                                "steps integer in box·q/2π); this grid is not: use 'snap' or build the grid with "
                                "grid.snapped(model.box)")
    if sampling == "centres":
        pat = scatter(model, grid, progress=progress, **opts)
        info = {"mode": "centres",
                "description": "computed at the voxel centres, which lie on the box's reciprocal lattice"}
        return _result(grid, pat.intensity, {"scatter": pat.metadata, "sampling": info})
    if sampling == "average":
        return _result(grid, *voxel_average(model, grid, progress=progress, **opts))
    return _result(grid, *_snap(model, grid, opts, progress))


def _result(grid, intensity, meta) -> Pattern:
    sm = meta.get("scatter", {})
    units = sm.get("probe", {}).get("units", "1") if isinstance(sm.get("probe"), dict) else "1"
    md = {k: v for k, v in sm.items() if k not in ("grid",)}
    md["model_sampling"] = meta["sampling"]
    return Pattern(grid, intensity=intensity, metadata=md, units=units)


# ---------------------------------------------------------------------------------------
# resolution
# ---------------------------------------------------------------------------------------
def _convolve_same(a: np.ndarray, kern: np.ndarray) -> np.ndarray:
    """Linear convolution of `a` with an odd-sized, centred kernel, cropped to a's shape
    (zero outside a), by real FFTs padded to fast sizes."""
    from scipy import fft

    full = [n + k - 1 for n, k in zip(a.shape, kern.shape)]
    size = [fft.next_fast_len(n, real=True) for n in full]
    axes = list(range(a.ndim))
    prod = fft.rfftn(a, size, axes=axes) * fft.rfftn(kern, size, axes=axes)
    out = fft.irfftn(prod, size, axes=axes)
    sl = tuple(slice(k // 2, k // 2 + n) for n, k in zip(a.shape, kern.shape))
    return out[sl]


def gaussian_resolution(values: np.ndarray, grid: QGrid, width: float) -> np.ndarray:
    """Convolve a map on a regular grid with an isotropic Gaussian of standard deviation
    `width` (Å⁻¹), normalised over the finite points (NaN points stay NaN).

    Raises
    ------
    InvalidInputError
        For arbitrary q-points (no grid to convolve on) or a negative width.
    """
    if not isinstance(grid, RegularGrid):
        raise InvalidInputError("a resolution convolution needs a regular grid; this map is on arbitrary q-points")
    if not (math.isfinite(width) and width >= 0):
        raise InvalidInputError(f"the resolution width must be >= 0 (1/angstrom), got {width!r}")
    if width == 0:
        return values.copy()
    nd = len(grid.shape)
    st = np.asarray(grid.steps, dtype=np.float64).reshape(nd, 3)
    lens = np.linalg.norm(st, axis=1)
    active = [a for a in range(nd) if grid.shape[a] > 1 and lens[a] > 0]
    if not active:
        return values.copy()
    sa = st[active]
    # index extent of the 4σ sphere along each active axis: |k_a| ≤ 4w·‖(Sᵀ)⁺ row a‖
    pinv = np.linalg.pinv(sa.T)  # (n_active, 3)
    reach = [int(math.ceil(4.0 * width * np.linalg.norm(pinv[i]))) for i in range(len(active))]
    reach = [min(r, grid.shape[a] - 1) for r, a in zip(reach, active)]
    if all(r == 0 for r in reach):
        return values.copy()
    ks = np.meshgrid(*[np.arange(-r, r + 1) for r in reach], indexing="ij")
    dq = sum(k[..., None] * sa[i] for i, k in enumerate(ks))
    kern = np.exp(-0.5 * (dq * dq).sum(-1) / (width * width))
    shape = [1] * nd
    for i, a in enumerate(active):
        shape[a] = 2 * reach[i] + 1
    kern = kern.reshape(shape)
    ok = np.isfinite(values)
    v = np.where(ok, values, 0.0)
    num = _convolve_same(v, kern)
    den = _convolve_same(ok.astype(np.float64), kern)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~ok] = np.nan
    return out


__all__ = ["model_on_grid", "voxel_average", "gaussian_resolution", "SAMPLINGS"]
