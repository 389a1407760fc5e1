"""Frames and rotation series: the q of every pixel, and a model's expected counts on them.

A rotation series is a set of frames taken while the sample turns about a goniometer axis:
frame n is exposed while φ runs over ``[φ_n − Δφ/2, φ_n + Δφ/2]``, and the sample's
orientation at angle φ is ``R(φ) = Rot(â, φ)·R0`` (axis in the lab frame, right-handed,
degrees). The expected counts of pixel (i, j) of frame n are, up to the incident flux,

    C = (1/Δφ) ∫ dφ ∫_pixel dΩ P(p̂) I(q_sample(p̂, φ)),

evaluated by the midpoint rule on ``pixel_subsamples²`` points of the pixel's area and
``angle_subsamples`` points of the frame's width. ΔΩ and P are the per-sub-pixel solid angle
and polarisation factor (each can be switched off). The rotation integral already holds the
Lorentz factor of a Bragg reflection, so none is applied.
"""

from __future__ import annotations

import datetime as _dt
import warnings

import numpy as np

from .._shared.memory import check_fits
from .._shared.progress import Progress
from .._shared.validate import flag, real_array, real_number, whole_number
from ..errors import InvalidInputError
from ..qgrid import QGrid
from .detector import Detector, _polarization, _q_of_positions, _solid_angle
from .orientation import check_rotation, rotation_matrix, unit_vector

#: q-points per call of the intensity (bounds the working memory to about 100 bytes each).
DEFAULT_BLOCK_POINTS = 1 << 20


def _as_detector(det) -> Detector:
    if not isinstance(det, Detector):
        raise InvalidInputError(f"`det` must be a kinemap.Detector, got {type(det).__name__}")
    return det


def _angles(angles) -> np.ndarray:
    a = real_array(angles, "angles")
    if a.ndim == 0:
        a = a.reshape(1)
    if a.ndim != 1 or a.size == 0:
        raise InvalidInputError(f"`angles` must be a 1-D list of frame angles (degrees), got shape {a.shape}")
    return a


def frame_width(angles: np.ndarray, width) -> float:
    """The rotation width Δφ (degrees) of each frame: `width`, or the spacing of `angles`."""
    if width is not None:
        return real_number(width, "width", minimum=0.0)
    if angles.size < 2:
        raise InvalidInputError("a single frame needs `width` (its rotation range in degrees; 0 for a still)")
    steps = np.diff(angles)
    w = float(np.median(np.abs(steps)))
    if w == 0.0 or not np.allclose(np.abs(steps), w, rtol=1e-6, atol=1e-9):
        raise InvalidInputError(f"`angles` are not evenly spaced (steps {np.unique(np.round(steps, 9))[:5].tolist()}...); "
                                "give each frame's rotation range as `width`")
    return w


def _points_grid(q: np.ndarray, shape: tuple, names, values, units) -> QGrid:
    flat = np.ascontiguousarray(q.reshape(-1, 3))
    if not np.isfinite(flat).all():
        raise InvalidInputError("some pixels have non-finite q; check the detector geometry")
    return QGrid.points(flat.reshape(tuple(int(s) for s in shape) + (3,)),
                        axes=list(zip(names, values, units)))


def detector_grid(det, *, orientation=None) -> QGrid:
    """q (sample frame, Å⁻¹) of every pixel centre of one frame: a points grid of shape
    (ny, nx) with axes "row" and "column" in pixels. See :meth:`kinemap.QGrid.detector`."""
    det = _as_detector(det)
    q = det.q_vectors(orientation=orientation)
    ny, nx = det.shape
    return _points_grid(q, (ny, nx), ["row", "column"], [np.arange(ny, dtype=float), np.arange(nx, dtype=float)],
                        ["pixel", "pixel"])


def rotation_grid(det, axis, angles, *, orientation=None) -> QGrid:
    """q (sample frame, Å⁻¹) of every pixel centre of a rotation series at the frames'
    central angles: a points grid of shape (n_frames, ny, nx) with axes "angle" (degrees),
    "row", "column". See :meth:`kinemap.QGrid.rotation`."""
    det = _as_detector(det)
    a = unit_vector(axis, "axis")
    phis = _angles(angles)
    r0 = np.eye(3) if orientation is None else check_rotation(orientation)
    ny, nx = det.shape
    check_fits(phis.size * ny * nx * 3 * 8 * 2, f"the q-vectors of {phis.size} frames of {ny}×{nx} pixels",
               hint="use fewer frames per grid (e.g. one QGrid.detector per frame)")
    q_lab = det.q_lab()
    rots = rotation_matrix(a, phis) @ r0
    q = np.einsum("ijc,ncd->nijd", q_lab, rots)  # q_sample = R(φ)ᵀ q_lab
    return _points_grid(q, (phis.size, ny, nx), ["angle", "row", "column"],
                        [phis, np.arange(ny, dtype=float), np.arange(nx, dtype=float)], ["degree", "pixel", "pixel"])


def _intensity_function(model, probe, probe_options, threads, chunk_atoms, caught: list):
    """A function q (M, 3) → I (M,): the user's callable, or km.scatter on a points grid."""
    if callable(model) and not hasattr(model, "iter_chunks"):
        if probe_options:
            raise InvalidInputError(f"probe options {sorted(probe_options)} do not apply to an intensity function")

        def from_callable(q):
            val = np.asarray(model(q))
            if val.dtype.kind not in "biuf" or val.shape != (len(q),):
                raise InvalidInputError(f"the intensity function must return {len(q)} real values, got "
                                        f"dtype {val.dtype}, shape {val.shape}")
            val = val.astype(np.float64)
            if not np.isfinite(val).all():
                raise InvalidInputError("the intensity function returned non-finite values")
            return val

        return from_callable, "1", {"intensity": "user function I(q)"}

    from ..probes import get_probe
    from ..scatter import DEFAULT_CHUNK_ATOMS, scatter

    probe_obj = get_probe(probe, **probe_options)
    first: dict = {}

    def from_model(q):
        with warnings.catch_warnings(record=True) as rec:
            warnings.simplefilter("always")
            pat = scatter(model, QGrid.points(q), probe=probe_obj, method="exact", threads=threads,
                          chunk_atoms=chunk_atoms if chunk_atoms is not None else DEFAULT_CHUNK_ATOMS)
        caught.extend(rec)
        if not first:
            first.update({k: pat.metadata[k] for k in ("probe", "model") if k in pat.metadata})
        return pat.intensity

    return from_model, probe_obj.units, first


def expected_counts(model, det, *, orientation=None, axis=None, angles=None, width=None, probe="xray",
                    pixel_subsamples: int = 2, angle_subsamples: int = 3, solid_angle: bool = True,
                    polarization: bool = True, block_points: int = DEFAULT_BLOCK_POINTS, threads=None,
                    progress=False, chunk_atoms: int | None = None, **probe_options):
    """A model's expected counts on a detector frame or a rotation series.

    Parameters
    ----------
    model : Model, atom source or callable
        The atoms (computed with :func:`kinemap.scatter` on the sub-sampled q-points), or a
        function ``I(q)`` of an (M, 3) array of sample-frame q (Å⁻¹) returning M intensities.
    det : Detector
    orientation : (3, 3), optional
        R0, sample → lab at goniometer zero (default identity).
    axis : (3,), optional
        Lab rotation axis of a series; with `angles`. Without both: one still frame.
    angles : array_like, optional
        Central angle of each frame, degrees.
    width : float, optional
        Rotation range Δφ of each frame in degrees (default: the spacing of `angles`; 0 for
        stills at those angles).
    probe : str or Probe
        As in :func:`kinemap.scatter`; extra keyword arguments go to the probe.
    pixel_subsamples, angle_subsamples : int
        Points per pixel edge (s: s² points per pixel) and per frame width (m). Choose them
        so that the q-step between sub-samples (``metadata["subsample_q_step"]``) is below
        the width of the model's narrowest peak, about 2π/L for a crystal of size L.
    solid_angle, polarization : bool
        Multiply by each sub-pixel's solid angle (sr) and by the detector's polarisation
        factor. With the solid angle off, the pixel's average is taken instead.
    block_points : int
        q-points per intensity call (bounds memory); results do not depend on it.
    threads, progress, chunk_atoms
        As in :func:`kinemap.scatter`; progress counts frame rows.

    Returns
    -------
    Pattern
        ``intensity`` of shape (ny, nx) (still) or (n_frames, ny, nx) on a points grid of
        the pixel centres (:meth:`QGrid.detector` / :meth:`QGrid.rotation`), in probe-units²
        × sr with the solid angle on; NaN on masked pixels. ``metadata["corrections"]`` says
        which factors were applied.

    Raises
    ------
    InvalidInputError
        Bad geometry, uneven angles without `width`, an output too large for memory.

    Notes
    -----
    ``C = Σ_sub Σ_m ΔΩ_sub P_sub I(q_sample(sub, φ_m)) / m`` with
    ``ΔΩ_sub = (s_x s_y / s²)(n̂·p̂)/r²``, ``φ_m = φ_n + ((m' + ½)/m − ½)Δφ`` and
    ``q_sample = R(φ)ᵀ k(p̂ − ẑ)``. No Lorentz factor: the rotation is integrated.
    A model held in a file is streamed once per block of `block_points` q-points; the sums
    use the exact engine.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> cell = np.eye(3) * 4.0
    >>> xtal = km.Model(np.indices((8, 8, 8)).reshape(3, -1).T * 4.0, "Fe", cell=cell)
    >>> det = km.Detector(shape=(32, 32), pixel_size=0.5, distance=100.0,
    ...                   beam_center=(16.0, -35.2), wavelength=1.0)
    >>> pat = km.expected_counts(xtal, det, axis=[0, 1, 0], angles=[6.7, 7.2, 7.7],
    ...                          probe="unit")
    >>> pat.intensity.shape
    (3, 32, 32)
    """
    det = _as_detector(det)
    s = whole_number(pixel_subsamples, "pixel_subsamples", minimum=1, maximum=64)
    m_sub = whole_number(angle_subsamples, "angle_subsamples", minimum=1, maximum=256)
    use_sa = flag(solid_angle, "solid_angle")
    use_pol = flag(polarization, "polarization")
    block = whole_number(block_points, "block_points", minimum=1)
    r0 = np.eye(3) if orientation is None else check_rotation(orientation)
    if (axis is None) != (angles is None):
        raise InvalidInputError("give both `axis` and `angles` for a rotation series, or neither for a still frame")
    series = axis is not None
    if series:
        a = unit_vector(axis, "axis")
        phis = _angles(angles)
        dphi = frame_width(phis, width)
    else:
        if width is not None:
            raise InvalidInputError("`width` applies to a rotation series (give `axis` and `angles`)")
        a, phis, dphi = np.array([0.0, 0.0, 1.0]), np.zeros(1), 0.0
        m_sub = 1
    ny, nx = det.shape
    n_frames = phis.size
    check_fits(n_frames * ny * nx * 8 * 2, f"expected counts of {n_frames} frame(s) of {ny}×{nx} pixels",
               hint="compute fewer frames per call")
    caught: list = []
    intensity, units, origin_meta = _intensity_function(model, probe, probe_options, threads, chunk_atoms, caught)

    sy, sx = det.pixel_size
    offs = (np.arange(s) + 0.5) / s - 0.5
    dv, du = (x.ravel() for x in np.meshgrid(offs, offs, indexing="ij"))
    sub_phi = ((np.arange(m_sub) + 0.5) / m_sub - 0.5) * dphi
    per_row = nx * s * s * m_sub
    rows_per_block = max(1, block // per_row)
    out = np.empty((n_frames, ny, nx))
    prog = Progress(progress, n_frames * ny, unit="row", desc="frames")
    try:
        for r0_ in range(0, ny, rows_per_block):
            r1_ = min(ny, r0_ + rows_per_block)
            rr = np.arange(r0_, r1_, dtype=np.float64)[:, None, None] + dv
            cc = np.arange(nx, dtype=np.float64)[None, :, None] + du
            p = det.positions(*np.broadcast_arrays(rr, cc))          # (nr, nx, s², 3)
            q_lab = _q_of_positions(p, det.k)
            w = (_solid_angle(p, (sy / s, sx / s), det.perpendicular_distance) if use_sa
         else np.full(p.shape[:-1], 1.0 / (s * s)))
            if use_pol:
                w = w * _polarization(p, det.polarization_fraction, det.polarization_direction)
            for n, phi in enumerate(phis):
                rots = rotation_matrix(a, phi + sub_phi) @ r0        # (m, 3, 3)
                q = np.einsum("rcsj,mjd->mrcsd", q_lab, rots).reshape(-1, 3)
                vals = np.concatenate([intensity(q[i:i + block]) for i in range(0, len(q), block)])
                vals = vals.reshape((m_sub,) + w.shape)
                out[n, r0_:r1_] = (vals * w).sum(axis=(0, 3)) / m_sub
                prog.add(r1_ - r0_)
    finally:
        prog.close()
    out[:, det.mask] = np.nan
    seen = set()
    for rec in caught:
        key = (rec.category, str(rec.message))
        if key not in seen:
            seen.add(key)
            warnings.warn(rec.message, rec.category, stacklevel=2)

    grid = rotation_grid(det, a, phis, orientation=r0) if series else detector_grid(det, orientation=r0)
    if not series:
        out = out[0]
    k = det.k
    q_max = det.q_range()[1]
    pix_step = k * max(sy, sx) / s / det.perpendicular_distance
    ang_step = q_max * np.radians(dphi) / m_sub if series else 0.0
    meta = {
        "quantity": "expected counts per unit incident flux: sum over sub-pixels and sub-angles of "
                    "dOmega * P * I(q) / angle_subsamples" + ("" if use_sa else " (solid angle off: pixel average)"),
        "corrections": {
            "solid_angle": "applied: dOmega = s_x s_y (n.p)/r^2 per sub-pixel (sr)" if use_sa else "not applied",
            "polarization": (f"applied: P = f[1-(p.e)^2] + (1-f)[1-(p.(z x e))^2], f = {det.polarization_fraction}, "
                             f"e = {det.polarization_direction.tolist()}") if use_pol else "not applied",
            "lorentz": "not applied: the rotation through each frame is integrated explicitly",
            "masked_pixels": "set to NaN",
        },
        "pixel_subsamples": s, "angle_subsamples": m_sub,
        "subsample_q_step": {"pixel": float(pix_step), "angle_at_q_max": float(ang_step), "units": "1/angstrom"},
        "detector": det.describe(),
        "orientation": r0.tolist(),
        "rotation": {"axis": a.tolist(), "angles_deg": phis.tolist(), "width_deg": dphi} if series else None,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "conventions": ("lab frame: z along the beam, x along columns, y along rows; q_lab = k(p - z); "
                        "q_sample = R^T q_lab; R(phi) = Rot(axis, phi) R0; angles in degrees"),
    }
    meta.update(origin_meta)
    meta = {k_: v for k_, v in meta.items() if v is not None}
    from ..pattern import Pattern

    return Pattern(grid=grid, intensity=out, metadata=meta, units=units)


def predict_reflections(cell, det, *, axis, angles, width=None, orientation=None, d_min: float | None = None):
    """Bragg reflections of a cell that a rotation series records: frame, angle and pixel.

    Parameters
    ----------
    cell : (3, 3)
        Rows a, b, c in Å (sample frame).
    det : Detector
    axis, angles, width, orientation
        The rotation series, as in :func:`expected_counts`.
    d_min : float, optional
        Smallest d-spacing (Å) to consider (default: what the detector reaches, ≥ λ/2).

    Returns
    -------
    dict of arrays, one entry per crossing that lands on a pixel inside a frame's range
        ``hkl`` (N, 3) int, ``angle`` (degrees), ``frame`` (index), ``row``, ``col``
        (fractional pixels), ``q_lab`` (N, 3) Å⁻¹, ``d`` (Å), ``lorentz`` (1/sin 2θ-like
        factor of :func:`lorentz_factor`), sorted by frame and angle.

    Raises
    ------
    InvalidInputError
        Bad cell or geometry, or more candidate reflections than memory allows.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> det = km.Detector(shape=(21, 21), pixel_size=0.5, distance=100.0,
    ...                   beam_center=(10.0, -41.2), wavelength=1.0)
    >>> pred = predict_reflections(np.eye(3) * 4.0, det, axis=[0, 1, 0], angles=[7.0], width=1.0)
    >>> pred["hkl"].tolist(), pred["frame"].tolist()
    ([[1, 0, 0]], [0])
    """
    from ..model import as_cell, reciprocal_basis
    from .orientation import crossing_angles, lorentz_factor

    det = _as_detector(det)
    c = as_cell(cell)
    a = unit_vector(axis, "axis")
    phis = _angles(angles)
    dphi = frame_width(phis, width)
    r0 = np.eye(3) if orientation is None else check_rotation(orientation)
    k = det.k
    q_lim = min(2.0 * k, det.q_range()[1] * (1.0 + 1e-9))
    if d_min is not None:
        q_lim = min(q_lim, 2.0 * np.pi / real_number(d_min, "d_min", minimum=0.0, exclusive_minimum=True))
    recip = reciprocal_basis(c)
    hmax = np.floor(q_lim * np.linalg.norm(c, axis=1) / (2.0 * np.pi)).astype(int)
    n_hkl = int(np.prod(2 * hmax + 1, dtype=np.int64))
    check_fits(n_hkl * 8 * 12, f"{n_hkl} candidate reflections", hint="give a larger `d_min`")
    hkl = np.stack(np.meshgrid(*[np.arange(-h, h + 1) for h in hmax], indexing="ij"), axis=-1).reshape(-1, 3)
    q = 2.0 * np.pi * hkl @ recip
    qn = np.linalg.norm(q, axis=1)
    keep = (qn > 0) & (qn <= q_lim)
    hkl, q = hkl[keep], q[keep]
    ang = crossing_angles(q, wavelength=det.wavelength, axis=a, orientation=r0)   # (N, 2)
    out: dict[str, list] = {"hkl": [], "angle": [], "frame": [], "row": [], "col": [], "q_lab": []}
    lo, hi = phis - dphi / 2.0, phis + dphi / 2.0
    for col_i in range(2):
        phi = ang[:, col_i]
        has = np.isfinite(phi)
        for shift in (-360.0, 0.0, 360.0):   # series may run past ±180°
            p = phi + shift
            inside = has[:, None] & (p[:, None] >= lo[None, :]) & (p[:, None] < hi[None, :])
            idx, frame = np.nonzero(inside)
            if idx.size == 0:
                continue
            rots = rotation_matrix(a, p[idx]) @ r0
            ql = np.einsum("nij,nj->ni", rots, q[idx])
            rows, cols = det.pixel_of(ql)   # lab q: identity orientation
            on = det.on_detector(rows, cols)
            for key, val in (("hkl", hkl[idx]), ("angle", p[idx]), ("frame", frame), ("row", rows), ("col", cols),
                             ("q_lab", ql)):
                out[key].append(val[on])
    res = {key: (np.concatenate(v) if v else np.empty((0, 3) if key in ("hkl", "q_lab") else (0,)))
           for key, v in out.items()}
    res["hkl"] = res["hkl"].astype(int)
    res["frame"] = res["frame"].astype(int)
    order = np.lexsort((res["angle"], res["frame"]))
    res = {key: v[order] for key, v in res.items()}
    res["d"] = 2.0 * np.pi / np.linalg.norm(res["q_lab"], axis=1) if len(res["q_lab"]) else np.empty(0)
    res["lorentz"] = (lorentz_factor(res["q_lab"], wavelength=det.wavelength, axis=a, tol=1e-6)
                      if len(res["q_lab"]) else np.empty(0))
    return res


__all__ = ["expected_counts", "detector_grid", "rotation_grid", "predict_reflections", "frame_width",
           "DEFAULT_BLOCK_POINTS"]
