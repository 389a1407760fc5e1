"""Rotations, crystal orientations and the Ewald-sphere crossing of a rotating crystal.

Conventions (the lab frame of :mod:`kinemap.geometry`):

* Lab frame, right-handed: z along the beam, x along increasing detector column, y along
  increasing detector row of an untilted detector (the image seen from the sample).
* An orientation matrix R (3×3, proper rotation) turns sample coordinates into lab
  coordinates: ``q_lab = R q_sample`` and ``q_sample = Rᵀ q_lab``. The sample frame is the
  Cartesian frame of the model (the frame its cell's rows a, b, c are written in).
* A goniometer rotation by φ about a lab axis â (right-handed: positive φ turns counter-
  clockwise when â points at the viewer) turns the sample at orientation R0 into
  ``R(φ) = Rot(â, φ) · R0``. All angles in the public functions are in degrees.
* UB matrix (Busing & Levy 1967, docs/references.md): ``B`` is the upper-triangular matrix of
  the cell with a* along x and b* in the xy plane, so that ``B h`` has length 1/d (no 2π);
  ``U`` is a proper rotation; ``UB h`` is the reciprocal-lattice vector of h in the lab frame
  at goniometer zero, in Å⁻¹ without 2π. In kinemap's units ``q_lab = 2π UB h``.
"""

from __future__ import annotations

import numpy as np

from .._shared.validate import real_array, real_number
from ..errors import InvalidInputError
from ..model import as_cell, reciprocal_basis

#: Largest deviation of RᵀR from the identity accepted for a rotation matrix.
ORTHOGONALITY_TOL = 1e-6


def unit_vector(v, name: str) -> np.ndarray:
    """A finite, nonzero 3-vector scaled to length 1."""
    a = real_array(v, name, shape=(3,))
    n = float(np.linalg.norm(a))
    if n == 0.0:
        raise InvalidInputError(f"`{name}` must be a nonzero 3-vector, got {a.tolist()}")
    return a / n


def check_rotation(matrix, name: str = "orientation") -> np.ndarray:
    """`matrix` as a float64 proper rotation (RᵀR = 1, det R = +1) within ORTHOGONALITY_TOL.

    Raises
    ------
    InvalidInputError
        Naming `name`, for a wrong shape, non-finite entries, a matrix that is not orthogonal
        (with the size of the deviation) or a reflection (det = −1).
    """
    r = real_array(matrix, name, shape=(3, 3))
    dev = float(np.abs(r.T @ r - np.eye(3)).max())
    if dev > ORTHOGONALITY_TOL:
        raise InvalidInputError(
            f"`{name}` is not a rotation matrix: RᵀR differs from the identity by {dev:.3g} "
            f"(tolerance {ORTHOGONALITY_TOL:g}); give an orthonormal matrix, or use "
            "orientation_from_ub() for a UB matrix")
    if np.linalg.det(r) < 0:
        raise InvalidInputError(f"`{name}` has determinant −1: it is a reflection, not a rotation")
    return r


def rotation_matrix(axis, angle) -> np.ndarray:
    """Right-handed rotation(s) by `angle` degrees about `axis` (Rodrigues' formula).

    Parameters
    ----------
    axis : array_like, shape (3,)
        Rotation axis (any length; its direction and sense matter).
    angle : float or array_like
        Angle(s) in degrees.

    Returns
    -------
    ndarray, shape ``np.shape(angle) + (3, 3)``

    Notes
    -----
    ``Rot(â, φ) v = v cos φ + (â × v) sin φ + â (â·v)(1 − cos φ)``.

    Examples
    --------
    >>> np.round(rotation_matrix([0, 0, 1], 90.0) @ [1.0, 0.0, 0.0], 12)
    array([0., 1., 0.])
    """
    a = unit_vector(axis, "axis")
    phi = np.radians(real_array(angle, "angle"))
    c, s = np.cos(phi)[..., None, None], np.sin(phi)[..., None, None]
    k = np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])
    return c * np.eye(3) + s * k + (1.0 - c) * np.outer(a, a)


def tilt_matrix(tilt) -> np.ndarray:
    """The detector's tilt as a rotation matrix.

    Parameters
    ----------
    tilt : None, array_like (3,) or (3, 3)
        None: no tilt. Three angles ``(α, β, γ)`` in degrees: the detector is turned first by
        α about the lab x axis, then by β about the lab y axis, then by γ about the lab z
        axis (all right-handed, all about fixed lab axes), ``T = Rz(γ) Ry(β) Rx(α)``. Or a
        3×3 rotation matrix T itself. The detector's fast (column), slow (row) and normal
        directions are T x̂, T ŷ and T ẑ.

    Raises
    ------
    InvalidInputError
        For any other shape, non-finite angles or a matrix that is not a rotation.
    """
    if tilt is None:
        return np.eye(3)
    t = real_array(tilt, "tilt")
    if t.shape == (3, 3):
        return check_rotation(t, "tilt")
    if t.shape != (3,):
        raise InvalidInputError(f"`tilt` must be three angles (degrees) or a 3x3 rotation matrix, got shape {t.shape}")
    rx = rotation_matrix([1.0, 0.0, 0.0], t[0])
    ry = rotation_matrix([0.0, 1.0, 0.0], t[1])
    rz = rotation_matrix([0.0, 0.0, 1.0], t[2])
    return rz @ ry @ rx


def busing_levy_b(cell) -> np.ndarray:
    """The B matrix of a cell (Busing & Levy 1967): upper triangular, a* along x, b* in xy.

    Parameters
    ----------
    cell : array_like (3, 3)
        Rows a, b, c in Å (any Cartesian setting).

    Returns
    -------
    ndarray (3, 3)
        B with ``BᵀB = G*`` (the reciprocal metric, no 2π) and positive diagonal, so
        ``|B h| = 1/d_hkl`` in Å⁻¹. In the textbook form
        ``B = [[a*, b* cos γ*, c* cos β*], [0, b* sin γ*, −c* sin β* cos α], [0, 0, 1/c]]``.

    Notes
    -----
    Computed as the Cholesky factor of G* = A*A*ᵀ, where the rows of A* are a*, b*, c*.

    Examples
    --------
    >>> np.round(busing_levy_b(np.diag([2.0, 4.0, 5.0])), 6)
    array([[0.5 , 0.  , 0.  ],
           [0.  , 0.25, 0.  ],
           [0.  , 0.  , 0.2 ]])
    """
    recip = reciprocal_basis(as_cell(cell))
    g_star = recip @ recip.T
    return np.linalg.cholesky(g_star).T


def orientation_from_ub(ub, cell, *, tol: float = 1e-4) -> np.ndarray:
    """The orientation R (sample → lab) of a crystal whose UB matrix is `ub`.

    Parameters
    ----------
    ub : array_like (3, 3)
        UB in the Busing–Levy convention (Å⁻¹, no 2π): ``UB h`` is the lab-frame
        reciprocal-lattice vector of h at goniometer zero.
    cell : array_like (3, 3)
        The model's cell (rows a, b, c in Å) in the model's own Cartesian frame.
    tol : float
        Largest accepted relative mismatch between UB's lattice and the cell's.

    Returns
    -------
    ndarray (3, 3)
        R with ``R · q_sample(h) = 2π UB h`` for every h, i.e. ``R = UB · cell``.

    Raises
    ------
    InvalidInputError
        When UB's reciprocal metric (UB)ᵀUB does not match the cell's (different lattice
        parameters), so that no rotation maps one onto the other.

    Examples
    --------
    >>> u = rotation_matrix([0, 0, 1], 30.0)
    >>> np.allclose(orientation_from_ub(u / 4.0, np.eye(3) * 4.0), u)
    True
    """
    m = real_array(ub, "ub", shape=(3, 3))
    c = as_cell(cell)
    r = m @ c
    dev = float(np.abs(r.T @ r - np.eye(3)).max())
    if dev > tol:
        g_ub = m.T @ m
        g_cell = reciprocal_basis(c) @ reciprocal_basis(c).T
        raise InvalidInputError(
            f"`ub` does not belong to this cell: its reciprocal metric (UB)ᵀUB = {np.round(g_ub, 6).tolist()} "
            f"differs from the cell's {np.round(g_cell, 6).tolist()} (UB·cell deviates from a rotation by "
            f"{dev:.3g}); check the lattice parameters and that UB has no factor 2π")
    # Remove rounding: the nearest rotation (polar decomposition).
    u, _, vt = np.linalg.svd(r)
    return check_rotation(u @ vt, "orientation from ub")


def ub_from_orientation(orientation, cell) -> np.ndarray:
    """The UB matrix (Busing–Levy, Å⁻¹, no 2π) of a crystal of `cell` at `orientation`.

    ``UB = R · A*ᵀ``, where the columns of A*ᵀ are a*, b*, c* in the sample frame; its
    U factor is ``UB · B⁻¹`` (see :func:`busing_levy_b`).
    """
    r = check_rotation(orientation)
    return r @ reciprocal_basis(as_cell(cell)).T


def crossing_angles(q, *, wavelength: float, axis, orientation=None) -> np.ndarray:
    """Goniometer angles at which q-points cross the Ewald sphere.

    Parameters
    ----------
    q : array_like (..., 3)
        q-vectors in the sample frame, Å⁻¹.
    wavelength : float
        Å (k = 2π/λ).
    axis : array_like (3,)
        The goniometer's rotation axis in the lab frame (its sense fixes the sign of φ).
    orientation : array_like (3, 3), optional
        R0, the sample orientation at φ = 0 (default identity).

    Returns
    -------
    ndarray (..., 2)
        Angles in degrees in (−180°, 180°], smaller first. Two crossings: both columns;
        one (the q-point grazes the sphere): the second column NaN; none (|q| > 2k, or its
        circle of rotation misses the sphere): both NaN. Points on the rotation axis
        (including q = 0) do not move and have no crossing angle: NaN in both columns.

    Notes
    -----
    With v = R0 q, Rot(â, φ)v = v∥ + v⊥ cos φ + (â × v) sin φ. The Ewald condition
    |q_lab + k ẑ| = k is ẑ·q_lab = −|q|²/2k, i.e. ``A cos φ + B sin φ = C`` with
    A = ẑ·v⊥, B = ẑ·(â × v), C = −|q|²/2k − ẑ·v∥, so ``φ = atan2(B, A) ± arccos(C/√(A²+B²))``.

    Raises
    ------
    InvalidInputError
        For λ ≤ 0, a zero axis, a q array not of shape (..., 3), a bad orientation.

    Examples
    --------
    >>> # (1 0 0) of a 4 Å cubic cell at λ = 1 Å about +y: θ = arcsin(1/8) and 180° − θ
    >>> np.round(crossing_angles([2 * np.pi / 4.0, 0, 0], wavelength=1.0, axis=[0, 1, 0]), 4)
    array([  7.1808, 172.8192])
    """
    lam = real_number(wavelength, "wavelength", minimum=0.0, exclusive_minimum=True)
    k = 2.0 * np.pi / lam
    a = unit_vector(axis, "axis")
    r0 = np.eye(3) if orientation is None else check_rotation(orientation)
    qa = real_array(q, "q")
    if qa.ndim < 1 or qa.shape[-1] != 3:
        raise InvalidInputError(f"`q` must have shape (..., 3), got {qa.shape}")
    v = qa @ r0.T
    v_par = (v @ a)[..., None] * a
    v_perp = v - v_par
    big_a = v_perp[..., 2]
    big_b = np.cross(a, v)[..., 2]
    q2 = np.einsum("...i,...i->...", qa, qa)
    big_c = -q2 / (2.0 * k) - v_par[..., 2]
    rho = np.hypot(big_a, big_b)
    scale = np.maximum(np.sqrt(q2), 1e-300)
    out = np.full(qa.shape[:-1] + (2,), np.nan)
    ok = rho > 1e-12 * scale
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(ok, big_c / np.where(ok, rho, 1.0), np.inf)
    reach = ok & (np.abs(ratio) <= 1.0 + 1e-12)
    base = np.arctan2(big_b, big_a)
    half = np.arccos(np.clip(ratio, -1.0, 1.0))
    # Grazing within rounding: one crossing, at cos(φ − base) = ±1 exactly.
    graze = reach & (np.abs(ratio) >= 1.0 - 1e-12)
    p0 = _wrap_deg(np.degrees(base + np.arccos(np.sign(ratio))))
    p1 = _wrap_deg(np.degrees(base - half))
    p2 = _wrap_deg(np.degrees(base + half))
    lo, hi = np.minimum(p1, p2), np.maximum(p1, p2)
    out[..., 0] = np.where(reach, np.where(graze, p0, lo), np.nan)
    out[..., 1] = np.where(reach & ~graze, hi, np.nan)
    return out


def _wrap_deg(x: np.ndarray) -> np.ndarray:
    """Angles into (−180, 180]."""
    y = np.mod(x + 180.0, 360.0) - 180.0
    return np.where(y == -180.0, 180.0, y)


def lorentz_factor(q_lab, *, wavelength: float, axis, tol: float = 1e-6) -> np.ndarray:
    """Lorentz factor of a rotation: integrated Bragg intensities only.

    Parameters
    ----------
    q_lab : array_like (..., 3)
        Lab-frame q of reflections at their crossing of the Ewald sphere (Å⁻¹).
    wavelength : float
        Å.
    axis : array_like (3,)
        Lab rotation axis.
    tol : float
        Largest accepted relative distance from the sphere, | |q + kẑ| − k | / k.

    Returns
    -------
    ndarray (...)
        ``L = k / |(â × q_lab)·k̂_f|``, k̂_f the unit scattered direction: the time a
        reciprocal-lattice point takes to cross the sphere, scaled so that a reflection in
        the equatorial plane has the textbook ``L = 1/sin 2θ``; for an axis perpendicular to
        the beam ``L = 1/√(sin²2θ − ζ²)``, ζ = (q·â)/k. Infinite for a reflection moving
        along the sphere (blind region).

    Notes
    -----
    The integrated intensity of a rotation through a reflection of |F|² is
    ``∫∫ I dΩ dφ = |F|² L / k³`` per unit reciprocal-space volume of the peak: the
    expected-counts functions integrate the rotation explicitly and never apply L to a
    continuous I(q).

    Raises
    ------
    InvalidInputError
        For a q-point farther than `tol` from the Ewald sphere (index named).

    Examples
    --------
    >>> k = 2 * np.pi
    >>> q = k * np.array([np.sin(0.5), 0.0, np.cos(0.5) - 1.0])   # 2θ = 0.5 rad, equatorial
    >>> round(float(lorentz_factor(q, wavelength=1.0, axis=[0, 1, 0]) * np.sin(0.5)), 12)
    1.0
    """
    lam = real_number(wavelength, "wavelength", minimum=0.0, exclusive_minimum=True)
    k = 2.0 * np.pi / lam
    a = unit_vector(axis, "axis")
    q = real_array(q_lab, "q_lab")
    if q.ndim < 1 or q.shape[-1] != 3:
        raise InvalidInputError(f"`q_lab` must have shape (..., 3), got {q.shape}")
    kf = q + np.array([0.0, 0.0, k])
    nkf = np.linalg.norm(kf, axis=-1)
    off = np.abs(nkf - k) > tol * k
    if off.any():
        i = np.unravel_index(int(np.flatnonzero(off)[0]), off.shape)
        raise InvalidInputError(f"`q_lab` point {tuple(int(x) for x in i)} is not on the Ewald sphere "
                                f"(| |q + k z| − k | = {float(np.abs(nkf - k)[i]):.3g} Å⁻¹); "
                                "give lab q at the crossing angle")
    rate = np.abs(np.einsum("...i,...i->...", np.cross(a, q), kf)) / k
    with np.errstate(divide="ignore"):
        return np.where(rate > 0, k / np.where(rate > 0, rate, 1.0), np.inf)


__all__ = ["rotation_matrix", "tilt_matrix", "check_rotation", "busing_levy_b", "orientation_from_ub",
           "ub_from_orientation", "crossing_angles", "lorentz_factor", "unit_vector", "ORTHOGONALITY_TOL"]
