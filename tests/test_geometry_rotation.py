"""Rotation series: goniometer rotations, Ewald crossings, UB matrices, Lorentz factor, and a
model's expected counts on frames.

References: scipy.spatial.transform.Rotation (independent rotation matrices); hand
computations of Bragg's law for a simple cubic crystal (written out in the test); the
Busing & Levy (1967) B matrix written out from its published form; the textbook Lorentz
factors 1/sin 2θ (equatorial) and 1/√(sin²2θ − ζ²) (axis perpendicular to the beam; from
memory) and an independent numerical integral of a Gaussian peak over the rotation and the
detector; a NumPy direct sum for the model's intensity at pixel q.
"""

import numpy as np
import pytest
from conftest import numpy_amplitude
from scipy.spatial.transform import Rotation

import kinemap as km
from kinemap.errors import InvalidInputError
from kinemap.geometry import (
    busing_levy_b,
    crossing_angles,
    lorentz_factor,
    orientation_from_ub,
    predict_reflections,
    rotation_matrix,
    ub_from_orientation,
)
from kinemap.model import cell_from_parameters


def _scipy_rot(axis, deg):
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    return Rotation.from_rotvec(np.radians(deg) * a).as_matrix()


@pytest.mark.parametrize("axis", [[0, 1, 0], [1, 0, 0], [0.3, -0.4, 0.8]])
@pytest.mark.parametrize("deg", [0.0, 17.5, -120.0, 180.0])
def test_rotation_matrix_matches_scipy(axis, deg):
    np.testing.assert_allclose(rotation_matrix(axis, deg), _scipy_rot(axis, deg), atol=1e-14)


def test_crossing_angles_put_q_on_the_sphere_and_count_crossings(rng):
    lam = 1.2
    k = 2 * np.pi / lam
    axis = np.array([0.1, 1.0, 0.2])
    r0 = Rotation.from_rotvec([0.4, 0.1, -0.7]).as_matrix()
    q = rng.normal(size=(300, 3)) * 3.0
    ang = crossing_angles(q, wavelength=lam, axis=axis, orientation=r0)
    assert ang.shape == (300, 2)
    # brute force: sign changes of |R q + kz|² − k² on a fine scan of φ (independent of the
    # analytic solution), with scipy's rotations
    phis = np.linspace(-180, 180, 7201)
    rots = Rotation.from_rotvec(np.radians(phis)[:, None] * (axis / np.linalg.norm(axis))).as_matrix() @ r0
    ql = np.einsum("pij,mj->mpi", rots, q)
    g = np.linalg.norm(ql + [0, 0, k], axis=-1) ** 2 - k**2
    changes = (np.sign(g[:, 1:]) != np.sign(g[:, :-1])).sum(axis=1)
    found = np.isfinite(ang).sum(axis=1)
    assert (changes == found).all()
    assert set(found) == {0, 2}          # random q: none or two
    for m, col in zip(*np.nonzero(np.isfinite(ang)), strict=True):
        rl = _scipy_rot(axis, ang[m, col]) @ r0 @ q[m]
        assert np.linalg.norm(rl + [0, 0, k]) == pytest.approx(k, rel=1e-10)
    # beyond the limiting sphere |q| > 2k: never
    assert np.isnan(crossing_angles([2.01 * k, 0, 0], wavelength=lam, axis=[0, 1, 0])).all()
    # grazing: q = 2k along x with the axis along y touches the sphere once, at φ = 90°
    # (Rot_y(90°) x̂ = −ẑ: backscattering)
    one = crossing_angles([2 * k, 0, 0], wavelength=lam, axis=[0, 1, 0])
    assert one[0] == pytest.approx(90.0, abs=1e-6) and np.isnan(one[1])
    # on the axis: does not move, no crossing angle
    assert np.isnan(crossing_angles([0, 1.0, 0], wavelength=lam, axis=[0, 1, 0])).all()


def test_simple_cubic_reflection_lands_on_the_predicted_pixel_and_frame():
    # Simple cubic, a = 4 Å, λ = 1 Å, (1 0 0): d = 4 Å, sin θ = λ/2d = 1/8.
    # Axis +y, R0 = 1: q(φ) = |q|(cos φ, 0, −sin φ) meets the sphere when sin φ = sin θ,
    # i.e. φ = θ (and 180° − θ); there k_f = k(sin 2θ, 0, cos 2θ): the spot is at
    # x = D tan 2θ to the right of the beam centre, on the beam centre's row.
    a, lam, dist, pix = 4.0, 1.0, 100.0, 0.5
    theta = np.degrees(np.arcsin(lam / (2 * a)))
    x_mm = dist * np.tan(np.radians(2 * theta))
    col_pred, row_pred = 10, 10
    x0 = col_pred - x_mm / pix                      # beam centre off the detector (offset detector)
    det = km.Detector(shape=(21, 21), pixel_size=pix, distance=dist, beam_center=(row_pred, x0), wavelength=lam)
    # the analytic crossing angles
    ang = crossing_angles([2 * np.pi / a, 0, 0], wavelength=lam, axis=[0, 1, 0])
    np.testing.assert_allclose(ang, [theta, 180 - theta], atol=1e-10)
    # the pixel at that angle
    rr, cc = det.pixel_of([2 * np.pi / a, 0, 0], orientation=_scipy_rot([0, 1, 0], theta))
    assert rr == pytest.approx(row_pred, abs=1e-9) and cc == pytest.approx(col_pred, abs=1e-9)
    # a model of 30³ atoms: its peak is on that pixel in the frame centred at θ
    n = 30
    pos = np.stack(np.meshgrid(*[np.arange(n)] * 3, indexing="ij"), -1).reshape(-1, 3) * a
    model = km.Model(pos, "Fe", cell=np.eye(3) * a)
    angles = theta + 0.5 * np.arange(-3, 4)
    pat = km.expected_counts(model, det, axis=[0, 1, 0], angles=angles, width=0.5, probe="unit",
                             pixel_subsamples=1, angle_subsamples=1, solid_angle=False, polarization=False)
    assert pat.intensity.shape == (7, 21, 21)
    assert np.unravel_index(np.argmax(pat.intensity), pat.intensity.shape) == (3, row_pred, col_pred)
    # at the exact Bragg condition every atom scatters in phase: |A|² = N²
    assert pat.intensity[3, row_pred, col_pred] == pytest.approx(n**6, rel=1e-9)
    # and the prediction of the library lists it there
    pred = predict_reflections(model.cell, det, axis=[0, 1, 0], angles=angles, width=0.5)
    assert pred["hkl"].tolist() == [[1, 0, 0]]
    assert pred["frame"].tolist() == [3]
    assert pred["row"][0] == pytest.approx(row_pred, abs=1e-9) and pred["col"][0] == pytest.approx(col_pred, abs=1e-9)
    assert pred["lorentz"][0] == pytest.approx(1 / np.sin(np.radians(2 * theta)), rel=1e-9)


def test_busing_levy_b_matches_the_published_form():
    a, b, c, al, be, ga = 5.1, 6.3, 7.7, 81.0, 97.0, 112.0
    cell = cell_from_parameters(a, b, c, al, be, ga)
    # reciprocal parameters from the direct ones (standard trigonometric relations)
    alr, ber, gar = np.radians([al, be, ga])
    vol = a * b * c * np.sqrt(1 - np.cos(alr) ** 2 - np.cos(ber) ** 2 - np.cos(gar) ** 2
                              + 2 * np.cos(alr) * np.cos(ber) * np.cos(gar))
    astar, bstar, cstar = b * c * np.sin(alr) / vol, a * c * np.sin(ber) / vol, a * b * np.sin(gar) / vol
    cos_bs = (np.cos(alr) * np.cos(gar) - np.cos(ber)) / (np.sin(alr) * np.sin(gar))
    cos_gs = (np.cos(alr) * np.cos(ber) - np.cos(gar)) / (np.sin(alr) * np.sin(ber))
    sin_bs, sin_gs = np.sqrt(1 - cos_bs**2), np.sqrt(1 - cos_gs**2)
    # Busing & Levy (1967), eq. 3
    b_pub = np.array([[astar, bstar * cos_gs, cstar * cos_bs],
                      [0.0, bstar * sin_gs, -cstar * sin_bs * np.cos(alr)],
                      [0.0, 0.0, 1.0 / c]])
    np.testing.assert_allclose(busing_levy_b(cell), b_pub, rtol=1e-12, atol=1e-14)


def test_orientation_from_ub():
    # cubic: B = 1/a, so UB = U/a and the orientation is U itself
    a = 3.9
    u = _scipy_rot([0.2, 0.3, 1.0], 33.0)
    np.testing.assert_allclose(orientation_from_ub(u / a, np.eye(3) * a), u, atol=1e-12)
    # triclinic with U = 1: Busing–Levy's frame has a* along x and b* in the xy plane, so
    # the orientation must turn the model's a* onto x̂ and b* into the xy plane
    cell = cell_from_parameters(5.1, 6.3, 7.7, 81.0, 97.0, 112.0)
    r = orientation_from_ub(busing_levy_b(cell), cell)
    recip = np.linalg.inv(cell).T
    a_star_lab, b_star_lab = r @ recip[0], r @ recip[1]
    np.testing.assert_allclose(a_star_lab / np.linalg.norm(a_star_lab), [1, 0, 0], atol=1e-12)
    assert abs(b_star_lab[2]) < 1e-12 and b_star_lab[1] > 0
    # UB back again, and a UB of another lattice is refused
    np.testing.assert_allclose(ub_from_orientation(r, cell), busing_levy_b(cell), atol=1e-12)
    with pytest.raises(InvalidInputError, match="does not belong to this cell"):
        orientation_from_ub(u / 4.2, np.eye(3) * a)
    with pytest.raises(InvalidInputError, match="does not belong to this cell"):
        orientation_from_ub(2 * np.pi * u / a, np.eye(3) * a)     # a 2π too many


def test_lorentz_factor_textbook():
    lam = 0.9
    k = 2 * np.pi / lam
    # equatorial: q ⊥ axis at its crossing: 1/sin 2θ
    for tt in (10.0, 40.0, 120.0):
        kf = k * np.array([np.sin(np.radians(tt)), 0, np.cos(np.radians(tt))])
        q = kf - [0, 0, k]
        assert lorentz_factor(q, wavelength=lam, axis=[0, 1, 0]) == pytest.approx(1 / np.sin(np.radians(tt)), rel=1e-12)
    # inclined (axis y ⊥ beam): 1/√(sin²2θ − ζ²), ζ = q_y/k
    tt, psi = np.radians(50.0), np.radians(35.0)
    kf = k * np.array([np.sin(tt) * np.cos(psi), np.sin(tt) * np.sin(psi), np.cos(tt)])
    q = kf - [0, 0, k]
    zeta = q[1] / k
    expected = 1 / np.sqrt(np.sin(tt) ** 2 - zeta**2)
    assert lorentz_factor(q, wavelength=lam, axis=[0, 1, 0]) == pytest.approx(expected, rel=1e-12)
    with pytest.raises(InvalidInputError, match="not on the Ewald sphere"):
        lorentz_factor([1.0, 0, 0], wavelength=lam, axis=[0, 1, 0])


def test_rotation_integral_of_a_narrow_peak_is_its_lorentz_factor():
    # Σ_frames Σ_pixels C·Δφ = ∫dφ∫dΩ I(q). For a Gaussian peak of integral (2πσ²)^{3/2} at
    # a reciprocal-lattice point G that crosses the sphere, ∫dφ∫dΩ δ³(q − G) = L/k³
    # (the time the point spends crossing the sphere). The sum is done here by the
    # sub-sampled expected counts; the reference is the Lorentz formula 1/√(sin²2θ − ζ²).
    lam = 1.0
    k = 2 * np.pi / lam
    sigma = 0.02
    g_sample = np.array([1.6, 0.5, 0.0])
    axis = [0, 1, 0]
    phi_c = crossing_angles(g_sample, wavelength=lam, axis=axis)[0]
    g_lab = _scipy_rot(axis, phi_c) @ g_sample
    tt = np.arccos((g_lab + [0, 0, k])[2] / k)
    zeta = g_lab[1] / k
    lorentz = 1 / np.sqrt(np.sin(tt) ** 2 - zeta**2)
    det0 = km.Detector(shape=(1, 1), pixel_size=0.1, distance=60.0, beam_center=(0, 0), wavelength=lam)
    row, col = det0.pixel_of(g_lab)
    half = 16
    det = km.Detector(shape=(2 * half + 1, 2 * half + 1), pixel_size=0.1, distance=60.0,
                      beam_center=(half - row, half - col), wavelength=lam)

    def peak(q):
        d2 = ((q - g_sample) ** 2).sum(axis=1)
        return np.exp(-d2 / (2 * sigma**2))

    step = 0.1
    angles = phi_c + step * np.arange(-25, 26)
    pat = km.expected_counts(peak, det, axis=axis, angles=angles, pixel_subsamples=2, angle_subsamples=2,
                             polarization=False)
    total = np.nansum(pat.intensity) * np.radians(step)
    expected = (2 * np.pi * sigma**2) ** 1.5 * lorentz / k**3
    assert total == pytest.approx(expected, rel=3e-3)
    assert pat.metadata["corrections"]["lorentz"].startswith("not applied")


def test_counts_of_a_constant_intensity_are_solid_angle_times_polarisation():
    # I = 1: the counts of a pixel are its solid angle (exact rectangle formula, corner sum)
    # times the polarisation factor (≈ constant over a pixel); with both off, exactly 1.
    det = km.Detector(shape=(6, 7), pixel_size=(1.0, 1.5), distance=30.0, beam_center=(1.0, -2.0), wavelength=1.0,
                      polarization_fraction=0.9)
    ones = lambda q: np.ones(len(q))  # noqa: E731
    plain = km.expected_counts(ones, det, solid_angle=False, polarization=False)
    np.testing.assert_allclose(plain.intensity, 1.0, rtol=1e-14)

    def rect(x0, x1, y0, y1, d):
        f = lambda x, y: np.arctan(x * y / (d * np.sqrt(d * d + x * x + y * y)))  # noqa: E731
        return f(x1, y1) - f(x0, y1) - f(x1, y0) + f(x0, y0)

    i, j = np.meshgrid(np.arange(6), np.arange(7), indexing="ij")
    xl, xh = (j - 0.5 + 2.0) * 1.5, (j + 0.5 + 2.0) * 1.5
    yl, yh = (i - 0.5 - 1.0) * 1.0, (i + 0.5 - 1.0) * 1.0
    exact = rect(xl, xh, yl, yh, 30.0)
    sa = km.expected_counts(ones, det, pixel_subsamples=8, polarization=False)
    np.testing.assert_allclose(sa.intensity, exact, rtol=2e-5)
    both = km.expected_counts(ones, det, pixel_subsamples=8)
    np.testing.assert_allclose(both.intensity, exact * det.polarization(), rtol=2e-3)
    assert "not applied" in plain.metadata["corrections"]["solid_angle"]
    assert both.metadata["corrections"]["polarization"].startswith("applied")


def test_model_counts_match_a_numpy_sum_and_do_not_depend_on_blocks_or_threads(rng):
    pos = rng.uniform(0, 12, (40, 3))
    model = km.Model(pos, "C")
    mask = np.zeros((9, 11), dtype=bool)
    mask[4, :] = True                                         # a module gap
    det = km.Detector(shape=(9, 11), pixel_size=0.8, distance=40.0, beam_center=(4.0, 5.0), wavelength=1.0, mask=mask)
    r0 = _scipy_rot([1, 1, 0], 20.0)
    still = km.expected_counts(model, det, orientation=r0, probe="unit", pixel_subsamples=1,
                               solid_angle=False, polarization=False)
    q = det.q_vectors(orientation=r0)
    ref = np.abs(numpy_amplitude(pos, q.reshape(-1, 3), np.ones((99, 40)))) ** 2
    ref = ref.reshape(9, 11)
    ok = ~mask
    np.testing.assert_allclose(still.intensity[ok], ref[ok], rtol=1e-9)
    assert np.isnan(still.intensity[4]).all()
    kw = dict(axis=[0, 1, 0], angles=[0.0, 1.0, 2.0], orientation=r0, probe="unit", pixel_subsamples=2,
              angle_subsamples=3)
    a = km.expected_counts(model, det, block_points=1 << 20, threads=1, **kw)
    b = km.expected_counts(model, det, block_points=37, threads=2, **kw)
    np.testing.assert_allclose(a.intensity, b.intensity, rtol=1e-12, equal_nan=True)
    assert a.grid.shape == (3, 9, 11) and a.metadata["rotation"]["width_deg"] == 1.0


def test_expected_counts_bad_input():
    det = km.Detector(shape=(4, 4), pixel_size=1.0, distance=10.0, beam_center=(2, 2), wavelength=1.0)
    ones = lambda q: np.ones(len(q))  # noqa: E731
    with pytest.raises(InvalidInputError, match="both `axis` and `angles`"):
        km.expected_counts(ones, det, axis=[0, 1, 0])
    with pytest.raises(InvalidInputError, match="needs `width`"):
        km.expected_counts(ones, det, axis=[0, 1, 0], angles=[3.0])
    with pytest.raises(InvalidInputError, match="not evenly spaced"):
        km.expected_counts(ones, det, axis=[0, 1, 0], angles=[0.0, 1.0, 3.0])
    with pytest.raises(InvalidInputError, match="axis"):
        km.expected_counts(ones, det, axis=[0, 0, 0], angles=[0.0, 1.0])
    with pytest.raises(InvalidInputError, match="pixel_subsamples"):
        km.expected_counts(ones, det, pixel_subsamples=0)
    with pytest.raises(InvalidInputError, match="intensity function"):
        km.expected_counts(lambda q: np.ones(3), det)
    with pytest.raises(InvalidInputError, match="not a rotation matrix"):
        km.expected_counts(ones, det, orientation=np.ones((3, 3)))
