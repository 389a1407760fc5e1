"""A computed powder pattern or G(r) beside a measured one.

References: synthetic measurements made here from the Debye sum written in NumPy (the same
double sum test_powder.py checks the engine against): measured = s·I + b + Gaussian noise of
known σ; a weighted least-squares fit must recover s and b within a few standard errors
(covariance (AᵀWA)⁻¹, any statistics text) and χ²_ν near 1. Bragg's law for the 2θ axis:
Q = 4π sin θ/λ.
"""

import h5py
import numpy as np
import pytest
from scipy.spatial.distance import pdist

import kinemap as km
from kinemap.errors import InvalidInputError, ModelFileError
from kinemap.powder import read_profile

FCC = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])


@pytest.fixture(scope="module")
def cluster():
    rng = np.random.default_rng(4)
    m = km.Model(FCC, "C", cell=np.eye(3) * 3.6, fractional=True).tiled((2, 2, 2))
    return km.Model(m.positions + rng.normal(0, 0.03, m.positions.shape), "C")


def debye_numpy(model, q):
    """I(Q) = N + Σ_{i≠j} sin(Q r)/(Q r) for unit scatterers (the Debye equation)."""
    d = pdist(model.positions)
    x = np.outer(q, d)
    return model.n_atoms + 2.0 * (np.sin(x) / x).sum(axis=1)


def test_fit_recovers_scale_and_background(cluster, tmp_path):
    rng = np.random.default_rng(5)
    q = np.linspace(1.0, 9.0, 400)
    truth = debye_numpy(cluster, q)
    sigma = 0.01 * truth.mean()
    meas = 3.0 * truth + 40.0 + rng.normal(0, sigma, q.size)
    path = tmp_path / "meas.xye"
    np.savetxt(path, np.column_stack([q, meas, np.full(q.size, sigma)]), header="Q I sigma")
    cmp = km.compare_powder(cluster, path, probe="unit", bin_tol=1e-6)
    a = np.column_stack([truth, np.ones_like(truth)]) / sigma
    cov = np.linalg.inv(a.T @ a)  # (AᵀWA)⁻¹ of the weighted linear fit
    assert abs(cmp.scale - 3.0) < 4 * np.sqrt(cov[0, 0])
    assert abs(cmp.background - 40.0) < 4 * np.sqrt(cov[1, 1])
    assert cmp.chi2 == pytest.approx(1.0, abs=4 * np.sqrt(2 / 398))
    cmp.save(tmp_path / "cmp.h5")
    cmp.plot(tmp_path / "cmp.png")
    assert (tmp_path / "cmp.png").stat().st_size > 1000


def test_two_theta_and_nexus_input(cluster, tmp_path):
    lam = 0.7
    q = np.linspace(1.0, 8.0, 120)
    tth = 2 * np.degrees(np.arcsin(q * lam / (4 * np.pi)))  # Bragg's law
    truth = debye_numpy(cluster, q)
    got_q, got_y, _ = read_profile((tth, truth), x="two_theta", wavelength=lam)
    np.testing.assert_allclose(got_q, q, rtol=1e-12)
    path = tmp_path / "meas.h5"
    with h5py.File(path, "w") as f:  # NeXus written with h5py alone
        f.attrs["default"] = "entry"
        e = f.create_group("entry")
        e.attrs["NX_class"], e.attrs["default"] = "NXentry", "data"
        d = e.create_group("data")
        d.attrs["NX_class"], d.attrs["signal"], d.attrs["axes"] = "NXdata", "I", ["Q"]
        d["I"] = 2 * truth
        d["Q"] = q
        d["Q"].attrs["units"] = "1/angstrom"
    cmp = km.compare_powder(cluster, path, probe="unit", background="none", bin_tol=1e-6)
    assert cmp.scale == pytest.approx(2.0, rel=1e-4)
    assert cmp.r_factor < 1e-4


def test_pdf_comparison(cluster):
    r = np.linspace(0.5, 6.0, 300)
    calc = km.pair_distribution(cluster, r, density=0.12)
    fit, r_back, g_calc = km.compare_pdf(calc, (r, 1.7 * calc.G))
    assert fit.scale == pytest.approx(1.7, rel=1e-10) and fit.r_factor < 1e-10
    np.testing.assert_array_equal(g_calc, calc.G)


def test_bad_measured_patterns(cluster, tmp_path):
    bad = tmp_path / "bad.txt"
    bad.write_text("1 2\n3 4 5\n")
    with pytest.raises(ModelFileError, match="different numbers of columns"):
        read_profile(bad)
    with pytest.raises(InvalidInputError, match="wavelength"):
        read_profile((np.array([10.0, 20.0]), np.ones(2)), x="two_theta")
    with pytest.raises(InvalidInputError, match="negative sigma"):
        read_profile((np.array([1.0, 2.0]), np.ones(2), np.array([1.0, -1.0])))
    pattern = km.powder(cluster, [1.0, 2.0], probe="unit")
    with pytest.raises(InvalidInputError, match="not at the measured Q"):
        km.compare_powder(pattern, (np.array([1.0, 2.5]), np.ones(2)))


def test_powder_command_with_a_measured_pattern(cluster, tmp_path, capsys):
    from kinemap.cli import main

    q = np.linspace(1.0, 8.0, 150)
    meas = tmp_path / "m.txt"
    np.savetxt(meas, np.column_stack([q, 5 * debye_numpy(cluster, q) + 7, np.ones_like(q)]))
    model = km.write_h5md(tmp_path / "c.h5md", cluster)
    assert main(["powder", str(model), "--probe", "unit", "--measured", str(meas), "--bin-tol", "1e-6",
                 "-o", str(tmp_path / "p.h5"), "--no-progress"]) == 0
    out = capsys.readouterr().out
    import re

    scale = float(re.search(r"scale s = ([0-9.eE+-]+)", out).group(1))
    assert scale == pytest.approx(5.0, rel=1e-3) and (tmp_path / "p_compare.h5").exists()
    back = km.load_pattern(tmp_path / "p.h5")
    np.testing.assert_allclose(back.grid.q_vectors()[:, 0], q)
