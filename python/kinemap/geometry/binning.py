"""Frames into a map: the pixels of a rotation series binned onto a regular grid.

Every pixel of frame n is put at the q of its centre (or of ``pixel_subsamples²`` points of
its area, each carrying an equal share) at the frame's central angle, and added to the
nearest grid point: per voxel, Σ counts and Σ (monitor_n · ΔΩ · P · efficiency). The map is
their ratio, counts per unit monitor per steradian, with the Poisson standard uncertainty
√(Σ counts) / Σ norm. Voxels no pixel reached are NaN. Frames are read and binned one at a
time, so memory holds one frame and the two accumulators.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np

from .._shared.memory import check_fits
from .._shared.progress import Progress
from .._shared.validate import flag, real_array, real_number, whole_number
from ..errors import InvalidInputError
from ..qgrid import QGrid, RegularGrid
from .detector import Detector, _polarization, _q_of_positions, _solid_angle
from .orientation import check_rotation, rotation_matrix, unit_vector


class _GridIndexer:
    """Nearest grid point of q-vectors on a regular grid (with a slab thickness for the
    directions a grid of fewer than three axes does not span)."""

    def __init__(self, grid: QGrid, thickness):
        if not isinstance(grid, QGrid):
            raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
        if not isinstance(grid, RegularGrid) or not grid.shape:
            raise InvalidInputError("binning needs a regular grid with at least one axis (QGrid.hkl, .volume, .plane, "
                                    f".line), got kind {grid.kind!r} with shape {tuple(grid.shape)}")
        # In h, k, l when the grid has a cell; a grid without one (even of kind "hkl", from
        # QGrid.regular) has its axes in Å⁻¹ and is binned in Å⁻¹.
        self.cell = grid.cell if grid.kind == "hkl" else None
        if self.cell is not None and grid.hkl_origin is not None and grid.hkl_steps is not None:
            origin, steps = np.asarray(grid.hkl_origin, np.float64), np.asarray(grid.hkl_steps, np.float64).reshape(-1, 3)
        else:
            origin, steps = np.asarray(grid.origin, np.float64), np.asarray(grid.steps, np.float64).reshape(-1, 3)
        d = steps.shape[0]
        if np.linalg.matrix_rank(steps) < d:
            raise InvalidInputError("the grid has an axis with zero step (or dependent axes); give every ranged axis "
                                    "at least 2 points")
        self.shape = tuple(int(x) for x in grid.shape)
        unit = "r.l.u." if self.cell is not None else "1/angstrom"
        self.half: float | None
        if d < 3:
            if thickness is None:
                raise InvalidInputError(f"a grid with {d} axis(es) needs `thickness` ({unit}): how far from its "
                                        f"{'plane' if d == 2 else 'line'} a pixel may lie and still be binned")
            self.half = real_number(thickness, "thickness", minimum=0.0, exclusive_minimum=True) / 2.0
            # Orthonormal directions completing the grid's span.
            _, _, vt = np.linalg.svd(steps)
            normals = vt[d:]
        else:
            if thickness is not None:
                raise InvalidInputError("`thickness` applies to grids of one or two axes, not to a volume")
            self.half = None
            normals = np.zeros((0, 3))
        self.origin = origin
        self.inv = np.linalg.inv(np.vstack([steps, normals]))
        self.d = d
        self.unit = unit

    def __call__(self, q: np.ndarray) -> np.ndarray:
        """Flat voxel index of each q (..., 3), −1 where it misses the grid."""
        c = q @ self.cell.T / (2.0 * np.pi) if self.cell is not None else q
        coef = (c - self.origin) @ self.inv
        idx = np.rint(coef[..., :self.d]).astype(np.int64)
        ok = np.ones(q.shape[:-1], dtype=bool)
        for ax, n in enumerate(self.shape):
            ok &= (idx[..., ax] >= 0) & (idx[..., ax] < n)
        if self.half is not None:
            ok &= (np.abs(coef[..., self.d:]) <= self.half).all(axis=-1)
        flat = np.ravel_multi_index(tuple(np.where(ok, idx[..., ax], 0) for ax in range(self.d)), self.shape)
        return np.where(ok, flat, -1)


def bin_frames(frames, det, *, grid, axis, angles=None, orientation=None, monitor=None, efficiency=None,
               solid_angle: bool = True, polarization: bool = True, thickness=None, pixel_subsamples: int = 1,
               progress=False):
    """Bin the pixels of a rotation series into a regular hkl (or Å⁻¹) grid.

    Parameters
    ----------
    frames : array (n, ny, nx), FrameStack or iterable of (ny, nx) frames
        Counts. NaN and negative values (detector flags) are left out like masked pixels.
    det : Detector
        Its mask is applied.
    grid : QGrid
        A regular grid: ``QGrid.hkl`` (binned in h, k, l of its cell) or
        ``QGrid.volume/plane/line`` (binned in Å⁻¹). Grids of one or two axes need
        `thickness`.
    axis : (3,)
        Lab rotation axis.
    angles : array_like, optional
        Central angle of each frame in degrees (default: ``frames.angles`` of a FrameStack).
        The count must match the frames.
    orientation : (3, 3), optional
        R0, sample → lab at φ = 0.
    monitor : array_like (n,), optional
        Incident-flux monitor of each frame (default 1).
    efficiency : array_like (ny, nx), optional
        Relative detection efficiency of each pixel (default 1).
    solid_angle, polarization : bool
        Include ΔΩ (sr) and the detector's polarisation factor in the normalisation.
    thickness : float, optional
        Slab thickness around a plane or line grid, r.l.u. (hkl) or Å⁻¹.
    pixel_subsamples : int
        s: each pixel is split into s² equal parts binned separately (fills voxels finer
        than a pixel's q footprint).
    progress : bool or callable
        Progress over frames.

    Returns
    -------
    Pattern
        ``intensity`` = Σ counts / Σ norm per voxel, ``sigma`` = √(Σ counts)/Σ norm (a voxel
        with zero counts gets the σ of one count, 1/Σ norm), NaN where no pixel landed;
        metadata lists the corrections, the voxels covered and the pixels left out.

    Raises
    ------
    InvalidInputError
        Frames of the wrong shape, an angle count that does not match the frames, a grid
        that is not regular, a 2-D grid without thickness.

    Examples
    --------
    >>> import numpy as np, kinemap as km
    >>> det = km.Detector(shape=(64, 64), pixel_size=1.0, distance=60.0,
    ...                   beam_center=(32, 32), wavelength=1.0)
    >>> frames = np.ones((10, 64, 64))
    >>> grid = km.QGrid.hkl(np.eye(3) * 5.0, h=(-1, 1, 11), k=(-1, 1, 11), l=(-1, 1, 11))
    >>> pat = km.bin_frames(frames, det, grid=grid, axis=[0, 1, 0], angles=np.arange(10.0))
    >>> pat.intensity.shape, pat.sigma.shape
    ((11, 11, 11), (11, 11, 11))
    """
    if not isinstance(det, Detector):
        raise InvalidInputError(f"`det` must be a kinemap.Detector, got {type(det).__name__}")
    indexer = _GridIndexer(grid, thickness)
    a = unit_vector(axis, "axis")
    r0 = np.eye(3) if orientation is None else check_rotation(orientation)
    use_sa = flag(solid_angle, "solid_angle")
    use_pol = flag(polarization, "polarization")
    s = whole_number(pixel_subsamples, "pixel_subsamples", minimum=1, maximum=16)
    if angles is None:
        angles = getattr(frames, "angles", None)
        if angles is None:
            raise InvalidInputError("give `angles` (the central angle of each frame, degrees); these frames carry none")
    phis = real_array(angles, "angles")
    if phis.ndim != 1:
        raise InvalidInputError(f"`angles` must be 1-D, got shape {phis.shape}")
    n_known = _frame_count(frames)
    if n_known is not None and n_known != phis.size:
        raise InvalidInputError(f"the frame stack has {n_known} frames but {phis.size} angles were given; "
                                "give one angle per frame")
    ny, nx = det.shape
    mon = np.ones(phis.size) if monitor is None else real_array(monitor, "monitor", shape=(phis.size,))
    if (mon <= 0).any():
        raise InvalidInputError(f"`monitor` must be positive, got {float(mon.min())!r} at frame {int(np.argmin(mon))}")
    eff = np.ones((ny, nx)) if efficiency is None else real_array(efficiency, "efficiency", shape=(ny, nx))
    if (eff < 0).any():
        raise InvalidInputError("`efficiency` must be >= 0 everywhere")
    check_fits(grid.size * 8 * 3, f"the accumulators of a grid of {grid.size} points")

    # Per-pixel geometry, fixed for the series: sub-pixel q_lab and weights ΔΩ·P·eff / s².
    check_fits(ny * nx * s * s * 8 * 12, f"the pixel geometry of {ny}×{nx} pixels with {s}² sub-pixels",
               hint="use fewer `pixel_subsamples`")
    offs = (np.arange(s) + 0.5) / s - 0.5
    dv, du = (x.ravel() for x in np.meshgrid(offs, offs, indexing="ij"))
    rr = np.arange(ny, dtype=np.float64)[:, None, None] + dv
    cc = np.arange(nx, dtype=np.float64)[None, :, None] + du
    p = det.positions(*np.broadcast_arrays(rr, cc))                      # (ny, nx, s², 3)
    q_lab = _q_of_positions(p, det.k)
    sy, sx = det.pixel_size
    w = (_solid_angle(p, (sy / s, sx / s), det.perpendicular_distance) if use_sa
         else np.full(p.shape[:-1], 1.0 / (s * s)))
    if use_pol:
        w = w * _polarization(p, det.polarization_fraction, det.polarization_direction)
    w = w * eff[..., None]
    del p

    sum_counts = np.zeros(grid.size)
    sum_norm = np.zeros(grid.size)
    left_out = 0
    n_seen = 0
    prog = Progress(progress, phis.size, unit="frame", desc="binning")
    try:
        for n, frame in enumerate(frames):
            if n >= phis.size:
                raise InvalidInputError(f"the frames outnumber the {phis.size} angles given; give one angle per frame")
            f = np.asarray(frame)
            if f.shape != (ny, nx):
                raise InvalidInputError(f"frame {n} has shape {f.shape}, but the detector has shape {(ny, nx)}")
            if f.dtype.kind not in "biuf":
                raise InvalidInputError(f"frame {n} must hold real counts, got dtype {f.dtype}")
            f = f.astype(np.float64)
            with np.errstate(invalid="ignore"):
                good = ~det.mask & np.isfinite(f) & (f >= 0)
            left_out += int((~good & ~det.mask).sum())
            rot = rotation_matrix(a, phis[n]) @ r0
            idx = indexer(q_lab[good] @ rot)                             # (n_good, s²)
            cnt = np.repeat(f[good][:, None] / (s * s), s * s, axis=1)
            nrm = mon[n] * w[good]
            hit = idx >= 0
            sum_counts += np.bincount(idx[hit], weights=cnt[hit], minlength=grid.size)
            sum_norm += np.bincount(idx[hit], weights=nrm[hit], minlength=grid.size)
            n_seen += 1
            prog.add(1)
    finally:
        prog.close()
    if n_seen != phis.size:
        raise InvalidInputError(f"the frame stack has {n_seen} frames but {phis.size} angles were given; "
                                "give one angle per frame")
    covered = sum_norm > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        inten = np.where(covered, sum_counts / np.where(covered, sum_norm, 1.0), np.nan)
        sigma = np.where(covered, np.sqrt(np.maximum(sum_counts, 1.0)) / np.where(covered, sum_norm, 1.0), np.nan)
    meta = {
        "source": "binned detector frames",
        "quantity": "sum(counts) / sum(monitor * dOmega * P * efficiency) per voxel" if use_sa else
                    "sum(counts) / sum(monitor * P * efficiency) per voxel (solid angle off)",
        "sigma": "Poisson: sqrt(sum counts) / sum norm (one count for empty voxels)",
        "corrections": {"solid_angle": "applied" if use_sa else "not applied",
                        "polarization": (f"applied: f = {det.polarization_fraction}, e = "
                                         f"{det.polarization_direction.tolist()}") if use_pol else "not applied",
                        "efficiency": "given" if efficiency is not None else "1",
                        "monitor": "given" if monitor is not None else "1",
                        "lorentz": "not applied (pixels are binned, not integrated reflections)"},
        "frames": int(n_seen), "pixel_subsamples": s,
        "voxels_covered": int(covered.sum()), "voxels": int(grid.size),
        "pixels_left_out": {"mask": int(det.mask.sum()) * int(n_seen), "nan_or_negative": left_out},
        "thickness": None if thickness is None else float(thickness),
        "thickness_units": indexer.unit,
        "detector": det.describe(), "orientation": r0.tolist(),
        "rotation": {"axis": a.tolist(), "angles_deg": [float(phis[0]), float(phis[-1])], "frames": int(phis.size)},
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
    }
    meta = {k: v for k, v in meta.items() if v is not None}
    from ..pattern import Pattern

    shape = tuple(grid.shape)
    return Pattern(grid=grid, intensity=inten.reshape(shape), sigma=sigma.reshape(shape), metadata=meta)


def _frame_count(frames) -> int | None:
    n = getattr(frames, "n_frames", None)
    if n is not None:
        return int(n)
    if isinstance(frames, np.ndarray):
        if frames.ndim != 3:
            raise InvalidInputError(f"`frames` must be a stack of shape (n, ny, nx), got shape {frames.shape}")
        return frames.shape[0]
    if hasattr(frames, "__len__") and not isinstance(frames, (str, bytes)):
        return len(frames)
    return None


__all__ = ["bin_frames"]
