"""The 3D-ΔPDF (Weber & Simonov 2012) of binary alloys with one known pair correlation.

Reference: for a lattice gas with site factors f_j in a periodic box of N sites, the Fourier
transform over one Brillouin zone of the intensity without its Bragg part is the
autocorrelation Σ_j (f_j − f̄)(f_{j+R} − f̄) = N c(1−c) Δf² α(R) (Warren–Cowley short-range
order parameter α; Warren, "X-ray Diffraction", ch. 12 — from memory). The autocorrelation is
computed here directly from the configuration with numpy.roll. A Markov chain along x with
P(B|B) = c + λ(1 − c), P(B|A) = c(1 − λ) has stationary concentration c and α(n a) = λⁿ along
x, and no correlation between chains (along y, z).
"""

import numpy as np
import pytest

import kinemap as km
from kinemap.compare import BraggExclusion, delta_pdf
from kinemap.errors import InvalidInputError
from kinemap.probes.custom import CustomProbe

A = 3.0


def chains(n: int, c: float, lam: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    occ = np.zeros((n, n, n), dtype=bool)
    occ[0] = rng.random((n, n)) < c
    for i in range(1, n):
        p_b = np.where(occ[i - 1], c + lam * (1 - c), c * (1 - lam))
        occ[i] = rng.random((n, n)) < p_b
    return occ


def zone_map(occ: np.ndarray, fa: float, fb: float):
    """Intensity on the box lattice over one zone (h, k, l from −½ in steps of 1/n)."""
    n = occ.shape[0]
    sites = np.argwhere(np.ones(occ.shape, bool)) * A
    model = km.Model(sites, np.where(occ.reshape(-1), "B", "A"), box=np.eye(3) * A * n, cell=np.eye(3) * A)
    h = (-0.5, 0.5 - 1 / n, n)
    grid = km.QGrid.hkl(model.cell, h=h, k=h, l=h)
    return km.scatter(model, grid, probe=CustomProbe(constants={"A": fa, "B": fb}))


def autocorrelation(occ, fa, fb, r):
    f = np.where(occ, fb, fa)
    d = f - f.mean()
    return float((d * np.roll(d, tuple(-x for x in r), axis=(0, 1, 2))).sum())


PUNCH = BraggExclusion(1.0 / 16, "r.l.u.", centring="P")


@pytest.mark.parametrize("c, lam", [(0.5, -0.4), (0.3, 0.35)])
def test_peak_of_the_right_sign_at_plus_and_minus_u(c, lam):
    occ = chains(16, c, lam, seed=1)
    d = delta_pdf(zone_map(occ, 1.0, 3.0), PUNCH, apodize=False)
    peak = autocorrelation(occ, 1.0, 3.0, (1, 0, 0))
    assert np.sign(peak) == np.sign(lam)
    for u in ([1, 0, 0], [-1, 0, 0]):
        assert d.value_at(u) == pytest.approx(peak, rel=0.02)
    # uncorrelated directions and farther neighbours follow the configuration too
    for r in ([0, 1, 0], [0, 0, -1], [2, 0, 0], [1, 1, 0]):
        assert abs(d.value_at(r) - autocorrelation(occ, 1.0, 3.0, r)) < 0.02 * abs(peak)
    assert d.metadata["imaginary_fraction"] < 1e-9
    assert d.axis_names == ["u", "v", "w"]


def test_symmetry_averages_the_pair_correlations_over_the_group():
    # Averaging I(h) over m-3m averages P(u) over the images of u (the Fourier transform is
    # linear and the operations are orthogonal on this cubic cell): the images of [1 0 0] are
    # ±x, ±y, ±z, so P(1, 0, 0) becomes the mean of the autocorrelations along x, y and z.
    # (symmetry= used to fail with an ImportError.)
    occ = chains(16, 0.5, -0.4, seed=1)
    d = delta_pdf(zone_map(occ, 1.0, 3.0), PUNCH, apodize=False, symmetry="m-3m")
    axes = [autocorrelation(occ, 1.0, 3.0, r) for r in ((1, 0, 0), (0, 1, 0), (0, 0, 1))]
    want = float(np.mean(axes))
    for u in ([1, 0, 0], [0, -1, 0], [0, 0, 1]):
        assert d.value_at(u) == pytest.approx(want, rel=0.02)
    assert abs(want) < 0.5 * abs(axes[0])  # the averaging is visible: x alone is much stronger


def test_amplitude_scales_with_c_one_minus_c_delta_f_squared():
    n = 20
    lam = 0.3
    ratios = []
    for c, (fa, fb) in [(0.5, (1.0, 2.0)), (0.5, (1.0, 4.0)), (0.2, (1.0, 2.0)), (0.2, (2.0, 5.0))]:
        occ = chains(n, c, lam, seed=5)
        punch = BraggExclusion(1.0 / n, "r.l.u.", centring="P")
        d = delta_pdf(zone_map(occ, fa, fb), punch, apodize=False)
        ratios.append(d.value_at([1, 0, 0]) / (n**3 * c * (1 - c) * (fb - fa) ** 2))
    # P(a, 0, 0)/(N c(1−c)Δf²) = α(a) ≈ λ for every concentration and contrast (sampling
    # error of α over 8000 sites ≈ 0.02)
    for r in ratios:
        assert r == pytest.approx(lam, abs=0.06)
    # the same configuration with another contrast: exactly the ratio of Δf²
    assert ratios[1] == pytest.approx(ratios[0], rel=1e-3)


def test_an_ordered_crystal_gives_about_zero():
    # Rocksalt-type order on the simple cubic sites (a B site wherever i+j+k is odd) is the
    # average structure of the cell 2a with F centring: only Bragg peaks, no diffuse.
    n = 16
    idx = np.indices((n, n, n)).sum(0)
    occ = idx % 2 == 1
    sites = np.argwhere(np.ones(occ.shape, bool)) * A
    big = np.eye(3) * 2 * A
    model = km.Model(sites, np.where(occ.reshape(-1), "B", "A"), box=np.eye(3) * A * n, cell=big)
    h = (-1, 1 - 2 / n, n)  # one zone of the cell 2a, on the box lattice
    grid = km.QGrid.hkl(big, h=h, k=h, l=h)
    pat = km.scatter(model, grid, probe=CustomProbe(constants={"A": 1.0, "B": 3.0}))
    d = delta_pdf(pat, BraggExclusion(2.0 / n, "r.l.u.", centring="F"), apodize=False)
    disordered = delta_pdf(zone_map(chains(n, 0.5, -0.4, seed=2), 1.0, 3.0), PUNCH, apodize=False)
    assert np.abs(d.values).max() < 1e-6 * abs(disordered.value_at([1, 0, 0]))


def test_filled_holes_leave_no_lattice_of_negative_peaks():
    # Holes left at zero bring the punched Bragg peaks back as a negative lattice in the
    # ΔPDF. A random alloy (α = 0 away from the origin) with the 123 points within three
    # steps of (000) punched: each missing diffuse point takes ⟨I_d⟩Δh³ = c(1−c)Δf² = 1 from
    # every lattice vector (times cos 2πh·R), so a zero fill shifts them by up to −123, while a fill from the
    # surrounding shell only errs by the speckle of the 123 points, about ±sqrt(123) ≈ ±11.
    occ = np.random.default_rng(4).random((16, 16, 16)) < 0.5
    pat = zone_map(occ, 1.0, 3.0)
    punch = BraggExclusion(3.0 / 16, "r.l.u.", centring="P")
    d = delta_pdf(pat, punch, apodize=False)
    assert d.metadata["punched_points"] == 123
    zero_filled = pat.intensity.copy()
    n = np.indices((16, 16, 16)) - 8
    zero_filled[(n**2).sum(0) <= 9] = 0.0  # the punched sphere, left empty
    # P(R) = Δh³ Σ I(h) exp(−2πi h·R) with h = −½ + n/16: a DFT times exp(iπ ΣR) = (−1)^ΣR
    z = np.fft.fftshift(np.fft.fftn(zero_filled)).real / 16**3
    hole = n[:, (n**2).sum(0) <= 9].T / 16.0  # h of the punched points
    for r in [(1, 0, 0), (0, 1, 1), (1, 1, 1), (0, 0, 2)]:
        expected = autocorrelation(occ, 1.0, 3.0, r)
        shift = -np.cos(2 * np.pi * hole @ np.array(r)).sum()  # what the zero fill takes away
        assert shift < -60
        assert (-1) ** sum(r) * z[tuple(8 + np.array(r))] < expected + 0.5 * shift
        assert abs(d.value_at(r) - expected) < 35  # the default fill: the mean of the shell


def test_apodisation_and_coordinates():
    # Four zones per axis (h from −2 to 2 − 1/8 on the lattice of a box of 8 cells): the
    # window toward q_max broadens every peak the same way, so ratios of peak heights stay.
    occ = chains(8, 0.5, -0.4, seed=1)
    sites = np.argwhere(np.ones(occ.shape, bool)) * A
    model = km.Model(sites, np.where(occ.reshape(-1), "B", "A"), box=np.eye(3) * A * 8, cell=np.eye(3) * A)
    h = (-2, 2 - 1 / 8, 32)
    pat = km.scatter(model, km.QGrid.hkl(model.cell, h=h, k=h, l=h), probe=CustomProbe(constants={"A": 1.0, "B": 3.0}))
    d = delta_pdf(pat, BraggExclusion(1 / 8, "r.l.u.", centring="P"), taper=0.5)
    # h, k, l run from −2 to 2 − 1/8: the nearest faces are 15/8 r.l.u. = (15/8)·2π/a away
    assert d.metadata["q_max"] == pytest.approx(15 / 8 * 2 * np.pi / A, rel=1e-12)
    np.testing.assert_allclose(d.axes[0], np.arange(-16, 16) / 4)  # u_m = m/(N Δh) = m/4
    assert d.index_of([0, 0, 0]) == (16, 16, 16)
    ref = autocorrelation(occ, 1.0, 3.0, (1, 0, 0)) / autocorrelation(occ, 1.0, 3.0, (0, 0, 0))
    assert d.value_at([1, 0, 0]) < 0 < d.value_at([0, 0, 0])
    assert d.value_at([1, 0, 0]) / d.value_at([0, 0, 0]) == pytest.approx(ref, rel=0.1)


def test_a_plane_gives_a_projection(tmp_path):
    occ = chains(16, 0.5, -0.4, seed=1)
    n = 16
    sites = np.argwhere(np.ones(occ.shape, bool)) * A
    model = km.Model(sites, np.where(occ.reshape(-1), "B", "A"), box=np.eye(3) * A * n, cell=np.eye(3) * A)
    h = (-0.5, 0.5 - 1 / n, n)
    probe = CustomProbe(constants={"A": 1.0, "B": 3.0})
    pat = km.scatter(model, km.QGrid.hkl(model.cell, h=h, k=h, l=0.0), probe=probe)
    d = delta_pdf(pat, PUNCH, apodize=False)
    assert d.axis_names == ["u", "v"] and d.metadata["projection"] == "along w"
    # the l = 0 plane transforms to Σ_w of the 3-D autocorrelation (the projection along c)
    want = sum(autocorrelation(occ, 1.0, 3.0, (1, 0, w)) for w in range(n))
    assert d.value_at([1, 0]) == pytest.approx(want, rel=0.05)
    path = d.save(tmp_path / "dpdf.h5")
    import h5py

    with h5py.File(path) as f:
        np.testing.assert_array_equal(f["entry/delta_pdf/delta_pdf"][()], d.values)


@pytest.mark.parametrize("kwargs, message", [
    (dict(bragg=BraggExclusion(0.01, "r.l.u.", centring="P")), "below one grid step"),
    (dict(bragg=None), "which reflections"),
    (dict(bragg=PUNCH, fill="zero"), "`fill` must be one of"),
    (dict(bragg=PUNCH, taper=1.5), "`taper`"),
])
def test_bad_options(kwargs, message):
    pat = zone_map(chains(16, 0.5, 0.0, seed=0), 1.0, 2.0)
    with pytest.raises(InvalidInputError, match=message):
        delta_pdf(pat, **kwargs)


def test_needs_an_hkl_grid():
    grid = km.QGrid.volume([-1, -1, -1], [2, 0, 0], [0, 2, 0], [0, 0, 2], (8, 8, 8))
    with pytest.raises(InvalidInputError, match="hkl grid"):
        delta_pdf(km.Pattern(grid, intensity=np.ones(grid.shape)), PUNCH)
    # kind "hkl" without a cell has no h, k, l: refused where the grid is made
    with pytest.raises(InvalidInputError, match="needs the `cell`"):
        km.QGrid.regular([0, 0, 0], np.eye(3) * 0.1, (8, 8, 8), kind="hkl")


def test_model_and_measurement_are_processed_identically():
    # A measurement made from the model itself (s·I + b) with a beamstop: the two ΔPDFs of
    # Comparison.delta_pdf agree (the model's map gets the measurement's holes), while the
    # measured ΔPDF alone shows the alloy's correlation.
    occ = chains(16, 0.5, -0.4, seed=1)
    pat = zone_map(occ, 1.0, 3.0)
    meas = 0.5 * pat.intensity + 7.0
    n = np.indices(meas.shape) - 8
    meas[(np.abs(n) <= 1).all(0) & ((n**2).sum(0) > 0)] = np.nan  # beamstop around (000)
    cmp = km.compare(km.Pattern(pat.grid, intensity=pat.intensity), km.Pattern.from_array(meas, pat.grid))
    dm, dc, diff = cmp.delta_pdf(PUNCH, apodize=False)
    peak = dm.value_at([1, 0, 0])
    assert peak == pytest.approx(0.5 * autocorrelation(occ, 1.0, 3.0, (1, 0, 0)), rel=0.05)
    assert np.abs(diff.values).max() < 1e-6 * abs(peak)
    np.testing.assert_allclose(diff.values, dm.values - dc.values)
