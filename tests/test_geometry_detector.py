"""Detector geometry: pixels → q, q → pixels, solid angles, polarisation, bad input.

References: plane trigonometry of a flat detector (tan 2θ = ρ/D, |q| = 4π sin θ/λ, written
out in each test), the exact solid angle of a rectangle seen from a point on the normal
through one of its corners, Ω = arctan(xy / (D √(D² + x² + y²))) (e.g. the standard result
for a rectangular plate; from memory, checked here against scipy's dblquad), and the
textbook polarisation factors (1 + cos²2θ)/2 (unpolarised) and cos²2θ / 1 for a fully
polarised beam in / perpendicular to the scattering plane (Warren, "X-ray Diffraction",
ch. 1; from memory).
"""

import numpy as np
import pytest
from scipy import integrate
from scipy.spatial.transform import Rotation

import kinemap as km
from kinemap.errors import InvalidInputError

LAM = 0.8


def _det(**kw):
    args = dict(shape=(40, 50), pixel_size=(0.3, 0.2), distance=80.0, beam_center=(12.3, 31.7), wavelength=LAM)
    args.update(kw)
    return km.Detector(**args)


def test_beam_centre_pixel_has_q_zero():
    # Beam centre on an integer pixel: that pixel's centre is where the direct beam hits.
    det = _det(beam_center=(12.0, 31.0))
    q = det.q_vectors()
    assert np.abs(q[12, 31]).max() < 1e-12
    # and for a tilted detector (the beam centre is defined on the detector plane)
    det_t = _det(beam_center=(12.0, 31.0), tilt=(10.0, -20.0, 5.0))
    assert np.abs(det_t.q_vectors()[12, 31]).max() < 1e-12


def test_untilted_nonsquare_offcentre_two_theta_and_q():
    det = _det()
    ny, nx = det.shape
    sy, sx = 0.3, 0.2
    y0, x0 = 12.3, 31.7
    i, j = np.meshgrid(np.arange(ny), np.arange(nx), indexing="ij")
    x = (j - x0) * sx      # mm, by hand from the pixel pitch
    y = (i - y0) * sy
    two_theta = np.arctan(np.sqrt(x**2 + y**2) / 80.0)       # tan 2θ = √(x² + y²)/D
    q_expected = 4 * np.pi * np.sin(two_theta / 2) / LAM     # |q| = 4π sin θ / λ
    q = det.q_vectors()
    np.testing.assert_allclose(np.linalg.norm(q, axis=-1), q_expected, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(np.radians(det.two_theta()), two_theta, rtol=1e-12, atol=1e-14)
    # direction: the in-plane part of q points from the beam centre towards the pixel
    azimuth = np.arctan2(q[..., 1], q[..., 0])
    far = np.hypot(x, y) > 1.0
    np.testing.assert_allclose(np.cos(azimuth[far] - np.arctan2(y, x)[far]), 1.0, atol=1e-12)


def test_tilted_detector_positions_by_hand():
    # Tilt by α about lab x: the slow (row) axis turns from ŷ to (0, cos α, sin α); the beam
    # centre stays at (0, 0, D). Written out from the rotation about x.
    alpha = np.radians(25.0)
    det = _det(tilt=(25.0, 0.0, 0.0))
    p = det.positions(np.array([12.3 + 10.0]), np.array([31.7]))[0]
    np.testing.assert_allclose(p, [0.0, 10 * 0.3 * np.cos(alpha), 80.0 + 10 * 0.3 * np.sin(alpha)], atol=1e-12)
    assert det.perpendicular_distance == pytest.approx(80.0 * np.cos(alpha), rel=1e-12)
    # angles and a matrix are the same tilt: T = Rz(γ) Ry(β) Rx(α), built here with scipy
    t = Rotation.from_euler("xyz", [10.0, -20.0, 5.0], degrees=True).as_matrix()  # extrinsic x, y, z
    a, b = _det(tilt=(10.0, -20.0, 5.0)), _det(tilt=t)
    np.testing.assert_allclose(a.positions(), b.positions(), atol=1e-12)


@pytest.mark.parametrize("tilt", [None, (0.0, 0.0, 0.0), (12.0, -7.0, 30.0), (-35.0, 20.0, 0.0)])
@pytest.mark.parametrize("orient", [False, True])
def test_pixel_q_pixel_round_trip(tilt, orient, rng):
    det = _det(tilt=tilt)
    r = Rotation.from_rotvec([0.3, -1.1, 0.4]).as_matrix() if orient else None
    rows = rng.uniform(-0.5, 39.5, 200)
    cols = rng.uniform(-0.5, 49.5, 200)
    q = det.q_vectors(orientation=r, rows=rows, cols=cols)
    rr, cc = det.pixel_of(q, orientation=r)
    np.testing.assert_allclose(rr, rows, atol=1e-9)
    np.testing.assert_allclose(cc, cols, atol=1e-9)
    # every pixel centre too
    rr, cc = det.pixel_of(det.q_vectors(orientation=r), orientation=r)
    np.testing.assert_allclose(rr, np.arange(40)[:, None] + 0 * cc, atol=1e-9)
    np.testing.assert_allclose(cc, np.arange(50)[None, :] + 0 * rr, atol=1e-9)


@pytest.mark.parametrize("tilt", [None, (15.0, 5.0, -40.0)])
def test_every_q_of_a_frame_lies_on_the_ewald_sphere(tilt):
    det = _det(tilt=tilt)
    k = 2 * np.pi / LAM
    r = Rotation.from_rotvec([0.2, 0.5, -0.3]).as_matrix()
    grid = km.QGrid.detector(det, orientation=r)
    assert grid.kind == "points" and grid.shape == (40, 50)
    q_lab = grid.q @ r.T
    np.testing.assert_allclose(np.linalg.norm(q_lab + [0, 0, k], axis=1), k, rtol=1e-13)
    series = km.QGrid.rotation(det, [0, 1, 0], [0.0, 10.0, 20.0], orientation=r)
    assert series.shape == (3, 40, 50)
    q = series.q.reshape(3, 40, 50, 3)
    for n, phi in enumerate([0.0, 10.0, 20.0]):
        rn = Rotation.from_rotvec(np.radians(phi) * np.array([0, 1, 0])).as_matrix() @ r
        ql = q[n] @ rn.T
        np.testing.assert_allclose(np.linalg.norm(ql + [0, 0, k], axis=-1), k, rtol=1e-13)


def test_pixel_of_refuses_what_cannot_land():
    det = _det()
    k = 2 * np.pi / LAM
    rr, cc = det.pixel_of([[0.5, 0.0, 0.0]])              # off the Ewald sphere
    assert np.isnan(rr).all() and np.isnan(cc).all()
    back = k * (np.array([0.0, 0.6, -0.8]) - [0, 0, 1])   # on the sphere, p̂ pointing backwards
    rr, cc = det.pixel_of(back)
    assert np.isnan(rr) and np.isnan(cc)
    # a q that lands on the plane outside the pixels: finite, but not on_detector
    far = k * (np.array([0.6, 0.0, 0.8]) - [0, 0, 1])
    rr, cc = det.pixel_of(far)
    assert np.isfinite(rr) and not det.on_detector(rr, cc)
    assert cc == pytest.approx(31.7 + 80.0 * 0.75 / 0.2, rel=1e-12)   # x = D tan 2θ = D·0.6/0.8


def _rect_solid_angle(x0, x1, y0, y1, d):
    """Exact solid angle of the rectangle [x0,x1]×[y0,y1] at distance d on the normal through
    the origin: Σ over corners of ±arctan(xy/(d√(d² + x² + y²)))."""
    f = lambda x, y: np.arctan(x * y / (d * np.sqrt(d * d + x * x + y * y)))  # noqa: E731
    return f(x1, y1) - f(x0, y1) - f(x1, y0) + f(x0, y0)


@pytest.mark.parametrize("pixel,dist", [((0.3, 0.2), 80.0), ((2.0, 3.0), 40.0)])
def test_solid_angles_sum_to_the_rectangle(pixel, dist):
    det = _det(pixel_size=pixel, distance=dist)
    sy, sx = pixel
    ny, nx = det.shape
    y0, x0 = det.beam_center
    xs = ((-0.5 - x0) * sx, (nx - 0.5 - x0) * sx)
    ys = ((-0.5 - y0) * sy, (ny - 0.5 - y0) * sy)
    exact = _rect_solid_angle(*xs, *ys, dist)
    # the corner formula itself against a direct numerical integral of D/r³
    numeric = integrate.dblquad(lambda y, x: dist / (dist**2 + x**2 + y**2) ** 1.5, *xs, *ys, epsabs=1e-13)[0]
    assert exact == pytest.approx(numeric, rel=1e-9)
    total = det.solid_angle().sum()
    # centre-point rule per pixel: relative error of order (s/D)²
    assert total == pytest.approx(exact, rel=0.5 * (max(pixel) / dist) ** 2)


def test_polarisation_textbook():
    det = _det()
    tt = np.radians(det.two_theta())
    p = det.positions()
    # unpolarised: (1 + cos² 2θ)/2 everywhere
    np.testing.assert_allclose(det.polarization(0.5, [1, 0, 0]), (1 + np.cos(tt) ** 2) / 2, rtol=1e-12)
    np.testing.assert_allclose(det.polarization(0.5, [0, 1, 0]), (1 + np.cos(tt) ** 2) / 2, rtol=1e-12)
    # fully polarised along x: cos² 2θ in the scattering plane that contains x (the row of
    # the beam centre), 1 in the plane perpendicular to it (column of the beam centre).
    det2 = _det(beam_center=(12.0, 31.0))
    tt2 = np.radians(det2.two_theta())
    pol = det2.polarization(1.0, [1, 0, 0])
    np.testing.assert_allclose(pol[12, :], np.cos(tt2[12, :]) ** 2, rtol=1e-12)
    np.testing.assert_allclose(pol[:, 31], 1.0, rtol=1e-12)
    # general pixel, fully polarised: 1 − sin²2θ cos²ψ, ψ the azimuth from ê (Warren)
    psi = np.arctan2(p[..., 1], p[..., 0])
    np.testing.assert_allclose(det.polarization(1.0, [1, 0, 0]), 1 - np.sin(tt) ** 2 * np.cos(psi) ** 2, rtol=1e-12)
    # the detector's own setting is the default
    det3 = _det(polarization_fraction=0.9, polarization_direction=[0, 2, 0])
    np.testing.assert_allclose(det3.polarization(), 0.9 * (1 - np.sin(tt) ** 2 * np.sin(psi) ** 2)
                               + 0.1 * (1 - np.sin(tt) ** 2 * np.cos(psi) ** 2), rtol=1e-12)


def test_q_range_offset_detector():
    # beam centre far to the left of the detector: nearest edge point has the smallest |q|
    det = _det(beam_center=(20.0, -100.0))
    k = 2 * np.pi / LAM
    q_lo, q_hi = det.q_range()
    x_near = (-0.5 + 100.0) * 0.2
    assert q_lo == pytest.approx(2 * k * np.sin(np.arctan(x_near / 80.0) / 2), rel=1e-12)
    x_far, y_far = (49.5 + 100.0) * 0.2, 20.5 * 0.3
    assert q_hi == pytest.approx(2 * k * np.sin(np.arctan(np.hypot(x_far, y_far) / 80.0) / 2), rel=1e-12)
    assert _det().q_range()[0] == 0.0


def test_mask_is_kept_and_checked():
    m = np.zeros((40, 50), dtype=bool)
    m[:, 20:22] = True
    det = _det(mask=m)
    assert det.mask.sum() == 80 and not det.mask.flags.writeable
    with pytest.raises(InvalidInputError, match="mask.*shape"):
        _det(mask=np.zeros((4, 5), dtype=bool))
    with pytest.raises(InvalidInputError, match="mask.*boolean"):
        _det(mask=np.zeros((40, 50)))


@pytest.mark.parametrize("kw,match", [
    (dict(distance=0.0), "distance"),
    (dict(distance=-5.0), "distance"),
    (dict(pixel_size=(0.0, 0.1)), "pixel_size.*positive"),
    (dict(pixel_size=-0.1), "pixel_size.*positive"),
    (dict(wavelength=0.0), "wavelength"),
    (dict(wavelength=-1.0), "wavelength"),
    (dict(wavelength=float("nan")), "wavelength"),
    (dict(shape=(0, 5)), "shape"),
    (dict(shape=(5,)), "shape"),
    (dict(beam_center=(1.0, float("inf"))), "beam_center"),
    (dict(tilt=(95.0, 0.0, 0.0)), "tilt"),
    (dict(tilt=np.diag([1.0, 1.0, 1.1])), "tilt.*not a rotation"),
    (dict(tilt=(1.0, 2.0)), "tilt"),
    (dict(polarization_fraction=1.5), "polarization_fraction"),
    (dict(polarization_direction=(0, 0, 1)), "perpendicular to the beam"),
])
def test_bad_detector_input(kw, match):
    with pytest.raises(InvalidInputError, match=match):
        _det(**kw)


def test_non_orthogonal_orientation_is_refused():
    det = _det()
    shear = np.eye(3)
    shear[0, 1] = 0.1
    with pytest.raises(InvalidInputError, match="`orientation` is not a rotation matrix"):
        km.QGrid.detector(det, orientation=shear)
    with pytest.raises(InvalidInputError, match="reflection"):
        det.pixel_of([0, 0, 0], orientation=np.diag([1.0, 1.0, -1.0]))
    with pytest.raises(InvalidInputError, match="`orientation` is not a rotation matrix"):
        km.QGrid.rotation(det, [0, 1, 0], [0, 1], orientation=2 * np.eye(3))
    with pytest.raises(InvalidInputError, match="`det` must be a kinemap.Detector"):
        km.QGrid.detector("detector")
