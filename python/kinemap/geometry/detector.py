"""A flat area detector: pixels ↔ lab positions ↔ q, solid angles and polarisation.

Lab frame, right-handed: z along the beam, x along increasing column index, y along
increasing row index of an untilted detector, image seen from the sample; an integer pixel
index is the pixel's centre. Internally a detector is an origin (the centre of pixel (0, 0))
and unit fast (column) and slow (row) axis vectors; pixel (i, j) sits at
``origin + j·s_x·fast + i·s_y·slow``. Lengths in mm, pixel coordinates in pixels, the
wavelength in Å, angles in degrees.
"""

from __future__ import annotations

import numpy as np

from .._shared.validate import real_array, real_number, whole_number
from ..errors import InvalidInputError
from .orientation import check_rotation, tilt_matrix, unit_vector

_Z = np.array([0.0, 0.0, 1.0])


def _pair(value, name: str, *, positive: bool) -> tuple[float, float]:
    """A number (used twice) or a pair of numbers, each finite (and > 0 when `positive`)."""
    a = real_array(value, name)
    if a.shape == ():
        a = np.array([float(a), float(a)])
    if a.shape != (2,):
        raise InvalidInputError(f"`{name}` must be one number or a pair (rows, columns), got shape {a.shape}")
    if positive and not (a > 0).all():
        raise InvalidInputError(f"`{name}` must be positive, got {a.tolist()}")
    return float(a[0]), float(a[1])


class Detector:
    """A flat pixel detector at a distance from the sample, in a monochromatic beam.

    Parameters
    ----------
    shape : (int, int)
        ``(ny, nx)``: rows and columns.
    pixel_size : float or (float, float)
        ``(s_y, s_x)`` in mm: the pitch along rows (slow direction) and along columns
        (fast direction); one number for square pixels.
    distance : float
        D in mm: the distance from the sample to the point where the direct beam meets the
        detector (for an untilted detector, the perpendicular distance).
    beam_center : (float, float)
        ``(y0, x0)``: the pixel coordinates (row, column; fractional, may lie off the
        detector) of the point where the direct beam meets the detector.
    wavelength : float
        λ in Å (k = 2π/λ).
    tilt : None, (3,) or (3, 3), keyword-only
        Detector tilt about the beam-centre point: angles (α, β, γ) in degrees about the lab
        x, y, z axes applied in that order, ``T = Rz(γ)Ry(β)Rx(α)``, or the 3×3 rotation T
        itself. Fast, slow and normal directions are T x̂, T ŷ, T ẑ.
    polarization_fraction : float, keyword-only
        f, the fraction of the incident intensity polarised along `polarization_direction`
        (0.5: unpolarised, e.g. a laboratory tube without monochromator; about 0.95–0.99 for a
        synchrotron, horizontal).
    polarization_direction : (3,), keyword-only
        ê, the lab direction of the main polarisation (perpendicular to the beam; default x).
    mask : (ny, nx) bool array, keyword-only
        True for pixels to leave out (dead pixels, module gaps, beamstop).

    Raises
    ------
    InvalidInputError
        Non-positive distance or pixel size, wavelength ≤ 0, a tilt that is not a rotation
        or that turns the detector away from the sample, a polarisation direction along the
        beam, a mask of the wrong shape or dtype.

    Notes
    -----
    Untilted, pixel (i, j) is at ``((j − x0)s_x, (i − y0)s_y, D)``. With p̂ the unit vector
    to a pixel, ``q_lab = k(p̂ − ẑ)``, |q| = 4π sin θ/λ (2θ the angle between p̂ and ẑ),
    and ``q_sample = Rᵀ q_lab`` for a sample at orientation R.

    Examples
    --------
    >>> det = Detector(shape=(100, 120), pixel_size=0.1, distance=50.0, beam_center=(50, 60),
    ...                wavelength=1.0)
    >>> float(np.abs(det.q_vectors()[50, 60]).max())
    0.0
    """

    def __init__(self, shape, pixel_size, distance, beam_center, wavelength, *, tilt=None,
                 polarization_fraction: float = 0.5, polarization_direction=(1.0, 0.0, 0.0), mask=None):
        try:
            ny, nx = shape
        except (TypeError, ValueError):
            raise InvalidInputError(f"`shape` must be (rows, columns), got {shape!r}") from None
        self._shape = (whole_number(ny, "shape[0] (rows)", minimum=1), whole_number(nx, "shape[1] (columns)", minimum=1))
        self._pixel = _pair(pixel_size, "pixel_size", positive=True)
        self._distance = real_number(distance, "distance", minimum=0.0, exclusive_minimum=True)
        self._center = _pair(beam_center, "beam_center", positive=False)
        self._wavelength = real_number(wavelength, "wavelength", minimum=0.0, exclusive_minimum=True)
        t = tilt_matrix(tilt)
        self._tilt_given = None if tilt is None else np.asarray(tilt, dtype=np.float64).tolist()
        self._fast, self._slow, self._normal = t[:, 0].copy(), t[:, 1].copy(), t[:, 2].copy()
        beam_point = self._distance * _Z
        self._perp = float(self._normal @ beam_point)
        if self._perp <= 1e-9 * self._distance:
            raise InvalidInputError(f"`tilt` turns the detector edge-on or away from the sample (normal "
                                    f"{self._normal.round(6).tolist()}); tilts must stay below 90° from the beam")
        sy, sx = self._pixel
        y0, x0 = self._center
        self._origin = beam_point - x0 * sx * self._fast - y0 * sy * self._slow
        self._pol_fraction = real_number(polarization_fraction, "polarization_fraction", minimum=0.0, maximum=1.0)
        self._pol_direction = _polarization_direction(polarization_direction)
        if mask is None:
            self._mask = np.zeros(self._shape, dtype=bool)
        else:
            m = np.asarray(mask)
            if m.dtype != bool:
                raise InvalidInputError(f"`mask` must be a boolean array (True = leave the pixel out), got dtype {m.dtype}")
            if m.shape != self._shape:
                raise InvalidInputError(f"`mask` has shape {m.shape}, but the detector has shape {self._shape}")
            self._mask = m.copy()
        self._mask.setflags(write=False)
        for a in (self._fast, self._slow, self._normal, self._origin):
            a.setflags(write=False)

    # ----- read-only description ------------------------------------------------------
    shape = property(lambda self: self._shape, doc="(ny, nx)")
    pixel_size = property(lambda self: self._pixel, doc="(s_y, s_x) in mm")
    distance = property(lambda self: self._distance, doc="D in mm (sample to beam-centre point)")
    beam_center = property(lambda self: self._center, doc="(y0, x0) in pixels")
    wavelength = property(lambda self: self._wavelength, doc="λ in Å")
    k = property(lambda self: 2.0 * np.pi / self._wavelength, doc="k = 2π/λ in Å⁻¹")
    origin = property(lambda self: self._origin, doc="lab position of pixel (0, 0)'s centre, mm")
    fast_axis = property(lambda self: self._fast, doc="unit lab vector of increasing column")
    slow_axis = property(lambda self: self._slow, doc="unit lab vector of increasing row")
    normal = property(lambda self: self._normal, doc="unit normal, pointing away from the sample")
    perpendicular_distance = property(lambda self: self._perp, doc="distance of the detector plane from the sample, mm")
    mask = property(lambda self: self._mask, doc="(ny, nx) bool, True = left out")
    polarization_fraction = property(lambda self: self._pol_fraction)
    polarization_direction = property(lambda self: self._pol_direction)

    @property
    def tilt(self) -> np.ndarray:
        """The tilt rotation T (fast, slow, normal are its columns)."""
        return np.column_stack([self._fast, self._slow, self._normal])

    def describe(self) -> dict:
        """The geometry as plain numbers (for output files)."""
        return {
            "shape": list(self._shape), "pixel_size_mm": list(self._pixel), "distance_mm": self._distance,
            "beam_center_px": list(self._center), "wavelength_angstrom": self._wavelength,
            "tilt": self._tilt_given, "tilt_matrix": self.tilt.tolist(), "origin_mm": self._origin.tolist(),
            "fast_axis": self._fast.tolist(), "slow_axis": self._slow.tolist(),
            "polarization_fraction": self._pol_fraction, "polarization_direction": self._pol_direction.tolist(),
            "masked_pixels": int(self._mask.sum()),
            "frame": "lab: z along the beam, x along columns, y along rows (untilted); pixel index = centre",
        }

    def __repr__(self) -> str:
        return (f"Detector(shape={self._shape}, pixel_size={self._pixel}, distance={self._distance}, "
                f"beam_center={self._center}, wavelength={self._wavelength})")

    # ----- geometry -------------------------------------------------------------------
    def _coords(self, rows, cols):
        if rows is None and cols is None:
            ny, nx = self._shape
            return np.meshgrid(np.arange(ny, dtype=np.float64), np.arange(nx, dtype=np.float64), indexing="ij")
        if rows is None or cols is None:
            raise InvalidInputError("give both `rows` and `cols`, or neither (all pixel centres)")
        r = real_array(rows, "rows")
        c = real_array(cols, "cols")
        try:
            return np.broadcast_arrays(r, c)
        except ValueError:
            raise InvalidInputError(f"`rows` {r.shape} and `cols` {c.shape} do not broadcast") from None

    def positions(self, rows=None, cols=None) -> np.ndarray:
        """Lab positions (mm) of pixel coordinates (fractional allowed), shape (..., 3);
        all pixel centres (ny, nx, 3) when no coordinates are given."""
        r, c = self._coords(rows, cols)
        sy, sx = self._pixel
        return self._origin + (c * sx)[..., None] * self._fast + (r * sy)[..., None] * self._slow

    def q_lab(self, rows=None, cols=None) -> np.ndarray:
        """Lab-frame q (Å⁻¹) at pixel coordinates: ``k(p̂ − ẑ)``; all pixel centres by default."""
        return _q_of_positions(self.positions(rows, cols), self.k)

    def q_vectors(self, *, orientation=None, rows=None, cols=None) -> np.ndarray:
        """Sample-frame q (Å⁻¹) of pixel centres (ny, nx, 3), or of given pixel coordinates:
        ``q_sample = Rᵀ q_lab``."""
        q = self.q_lab(rows, cols)
        if orientation is None:
            return q
        r = check_rotation(orientation)
        return q @ r

    def two_theta(self) -> np.ndarray:
        """Scattering angle 2θ (degrees) of every pixel centre, (ny, nx)."""
        p = self.positions()
        return np.degrees(np.arctan2(np.hypot(p[..., 0], p[..., 1]), p[..., 2]))

    def solid_angle(self) -> np.ndarray:
        """Solid angle (sr) of every pixel, (ny, nx): ``ΔΩ = s_x s_y (n̂·p̂)/r²``.

        Evaluated at the pixel centre (r the distance to it); untilted this is
        ``s_x s_y D / r³``. The relative error against the exact solid angle of the pixel
        rectangle is of order (s/D)²."""
        return _solid_angle(self.positions(), self._pixel, self._perp)

    def polarization(self, fraction: float | None = None, direction=None) -> np.ndarray:
        """X-ray polarisation factor of every pixel, (ny, nx).

        Parameters
        ----------
        fraction : float, optional
            f, the fraction of the intensity polarised along ê (default: the detector's).
        direction : (3,), optional
            ê, perpendicular to the beam (default: the detector's).

        Returns
        -------
        ndarray (ny, nx)
            ``P = f[1 − (p̂·ê)²] + (1 − f)[1 − (p̂·(ẑ × ê))²]``; f = ½ gives (1 + cos²2θ)/2.
        """
        f = self._pol_fraction if fraction is None else real_number(fraction, "fraction", minimum=0.0, maximum=1.0)
        e = self._pol_direction if direction is None else _polarization_direction(direction, "direction")
        return _polarization(self.positions(), f, e)

    def pixel_of(self, q, *, orientation=None, tol: float = 1e-6) -> tuple[np.ndarray, np.ndarray]:
        """Where q-points land on the detector: fractional (row, column) coordinates.

        Parameters
        ----------
        q : array_like (..., 3)
            q in the sample frame, Å⁻¹.
        orientation : (3, 3), optional
            R, sample → lab (default identity).
        tol : float
            Largest accepted relative distance from the Ewald sphere,
            | |q_lab + kẑ| − k | ≤ tol·k.

        Returns
        -------
        rows, cols : ndarray (...)
            Coordinates on the detector's (unbounded) plane; NaN where q is off the Ewald
            sphere or its scattered ray ``q_lab + kẑ`` does not reach the plane. Use
            :meth:`on_detector` to keep those on the pixels.
        """
        r = np.eye(3) if orientation is None else check_rotation(orientation)
        qa = real_array(q, "q")
        if qa.ndim < 1 or qa.shape[-1] != 3:
            raise InvalidInputError(f"`q` must have shape (..., 3), got {qa.shape}")
        tol = real_number(tol, "tol", minimum=0.0)
        k = self.k
        kf = qa @ r.T + k * _Z
        nkf = np.linalg.norm(kf, axis=-1)
        ok = np.abs(nkf - k) <= tol * k
        d = kf / np.where(nkf > 0, nkf, 1.0)[..., None]
        den = d @ self._normal
        ok &= den > 1e-12
        t = self._perp / np.where(ok, den, 1.0)
        rel = t[..., None] * d - self._origin
        sy, sx = self._pixel
        rows = np.where(ok, rel @ self._slow / sy, np.nan)
        cols = np.where(ok, rel @ self._fast / sx, np.nan)
        return rows, cols

    def on_detector(self, rows, cols) -> np.ndarray:
        """True where (row, column) coordinates fall on a pixel (NaN: False)."""
        r, c = self._coords(rows, cols)
        ny, nx = self._shape
        with np.errstate(invalid="ignore"):
            return (r >= -0.5) & (r < ny - 0.5) & (c >= -0.5) & (c < nx - 0.5)

    def q_range(self) -> tuple[float, float]:
        """Smallest and largest |q| (Å⁻¹) the detector's surface reaches (edges included)."""
        ny, nx = self._shape
        r = np.concatenate([np.full(nx + 1, -0.5), np.full(nx + 1, ny - 0.5), np.linspace(-0.5, ny - 0.5, ny + 1),
                            np.linspace(-0.5, ny - 0.5, ny + 1)])
        c = np.concatenate([np.linspace(-0.5, nx - 0.5, nx + 1), np.linspace(-0.5, nx - 0.5, nx + 1),
                            np.full(ny + 1, -0.5), np.full(ny + 1, nx - 0.5)])
        qmag = np.linalg.norm(self.q_lab(r, c), axis=-1)
        y0, x0 = self._center
        inside = (-0.5 <= y0 <= ny - 0.5) and (-0.5 <= x0 <= nx - 0.5)
        if inside:
            return 0.0, float(qmag.max())
        # Off the detector the smallest |q| lies on an edge. Along a straight edge 2θ is
        # unimodal (points within a cone of half-angle 2θ about ẑ form a convex set), so a
        # bounded scalar minimisation per edge finds it.
        from scipy.optimize import minimize_scalar

        lo, hi_r, hi_c = -0.5, ny - 0.5, nx - 0.5
        edges = [((lo, lo), (lo, hi_c)), ((hi_r, lo), (hi_r, hi_c)), ((lo, lo), (hi_r, lo)), ((lo, hi_c), (hi_r, hi_c))]
        best = float(qmag.min())
        for (ra, ca), (rb, cb) in edges:
            def fun(t, ra=ra, ca=ca, rb=rb, cb=cb):
                return float(np.linalg.norm(self.q_lab(np.array(ra + t * (rb - ra)), np.array(ca + t * (cb - ca)))))

            res = minimize_scalar(fun, bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-10})
            best = min(best, float(res.fun))
        return best, float(qmag.max())


def _polarization_direction(direction, name: str = "polarization_direction") -> np.ndarray:
    e = unit_vector(direction, name)
    if abs(e[2]) > 1e-6:
        raise InvalidInputError(f"`{name}` must be perpendicular to the beam (z component 0), got {np.round(e, 6).tolist()}")
    e = np.array([e[0], e[1], 0.0])
    e /= np.linalg.norm(e)
    e.setflags(write=False)
    return e


def _q_of_positions(p: np.ndarray, k: float) -> np.ndarray:
    r = np.linalg.norm(p, axis=-1, keepdims=True)
    return k * (p / r - _Z)


def _solid_angle(p: np.ndarray, pixel, perp: float) -> np.ndarray:
    sy, sx = pixel
    r = np.linalg.norm(p, axis=-1)
    return sx * sy * perp / r**3


def _polarization(p: np.ndarray, fraction: float, e: np.ndarray) -> np.ndarray:
    u = p / np.linalg.norm(p, axis=-1, keepdims=True)
    e2 = np.cross(_Z, e)
    return fraction * (1.0 - (u @ e) ** 2) + (1.0 - fraction) * (1.0 - (u @ e2) ** 2)


__all__ = ["Detector"]
