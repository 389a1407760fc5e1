"""Pair distribution functions (kinemap.pair_distribution).

References named beside each check: textbook coordination shells of fcc and bcc and their
distances (any crystallography text, e.g. Kittel, "Introduction to Solid State Physics",
ch. 1 — memory); G(r) = −4πρ₀r where g = 0 (definition); the Gaussian variance of a
thermally broadened shell, 2U = 2B/(8π²); an independent NumPy sine transform of the exact
Debye F(Q) for the Fourier route.
"""

import numpy as np
import pytest
from scipy.integrate import trapezoid
from scipy.spatial.distance import pdist

import kinemap as km
from kinemap.errors import InvalidInputError

FCC = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
BCC = np.array([[0, 0, 0], [.5, .5, .5]])


def crystal(basis, a, n, species="Al", **kw) -> km.Model:
    cells = np.array([[i, j, k] for i in range(n) for j in range(n) for k in range(n)])
    frac = (cells[:, None] + basis[None]).reshape(-1, 3) / n
    if not isinstance(species, str):
        species = list(species) * len(cells)
    return km.Model(frac, species, box=np.eye(3) * n * a, fractional=True, **kw)


def shell_integral(pdf, rho0, lo, hi):
    """∫ 4πr²ρ₀ g(r) dr over [lo, hi], with the test's own ρ₀ and the trapezoid rule."""
    sel = (pdf.r >= lo) & (pdf.r <= hi)
    return trapezoid(4 * np.pi * pdf.r[sel] ** 2 * rho0 * pdf.g[sel], pdf.r[sel])


@pytest.mark.parametrize("name, basis, a, shells", [
    # (distance, coordination number): fcc a/√2 12, a 6, a√(3/2) 24, a√2 12;
    # bcc a√3/2 8, a 6, a√2 12 (textbook shells — memory)
    ("fcc", FCC, 4.05, [(1 / np.sqrt(2), 12), (1.0, 6), (np.sqrt(1.5), 24), (np.sqrt(2), 12)]),
    ("bcc", BCC, 3.30, [(np.sqrt(3) / 2, 8), (1.0, 6), (np.sqrt(2), 12)]),
])
def test_coordination_shells(name, basis, a, shells):
    model = crystal(basis, a, 5)
    rho0 = len(basis) / a**3
    r = np.linspace(0, 6.5, 1301)
    pdf = km.pair_distribution(model, r)
    assert pdf.rho0 == pytest.approx(rho0, rel=1e-12)
    first = shells[0][0] * a
    below = r < first - 0.05
    # g = 0 below the first shell, so G(r) = −4πρ₀r there exactly
    np.testing.assert_allclose(pdf.G[below], -4 * np.pi * rho0 * r[below], rtol=1e-12, atol=1e-12)
    for d, z in shells:
        d *= a
        near = np.abs(r - d) < 0.1
        assert abs(r[near][np.argmax(pdf.G[near])] - d) <= 0.005 + 1e-9, (name, d)
        assert shell_integral(pdf, rho0, d - 0.1, d + 0.1) == pytest.approx(z, rel=1e-4)
        assert pdf.coordination(d - 0.1, d + 0.1) == pytest.approx(z, rel=1e-4)


def test_thermal_broadening_is_a_gaussian_of_the_summed_displacements():
    # Two atoms of B: the shell at a/√2 becomes a Gaussian of variance 2B/(8π²) (= 2U), with
    # the same area (12 neighbours).
    a, b = 4.05, 0.8
    model = crystal(FCC, a, 5, b_iso=b)
    r = np.linspace(0, 4.0, 2001)
    pdf = km.pair_distribution(model, r)
    d = a / np.sqrt(2)
    sel = np.abs(r - d) < 0.7
    rad = pdf.radial[sel]
    area = trapezoid(rad, r[sel])
    mean = trapezoid(rad * r[sel], r[sel]) / area
    var = trapezoid(rad * (r[sel] - mean) ** 2, r[sel]) / area
    assert area == pytest.approx(12, rel=2e-3)
    assert mean == pytest.approx(d, abs=0.01)
    # plus the variance of two-node binning, dr²/6 (negligible here)
    assert var == pytest.approx(2 * b / (8 * np.pi**2) + (r[1] - r[0]) ** 2 / 6, rel=0.05)
    flat = km.pair_distribution(model, r, thermal=False)
    assert flat.G.max() > 3 * pdf.G.max()


def test_partials_of_rocksalt():
    # NaCl (a = 5.64 Å): around Na, 6 Cl at a/2 and 12 Na at a/√2 (textbook — memory); the
    # partial g_NaCl integrates with ρ_Cl = c_Cl ρ₀.
    a = 5.64
    basis = np.vstack([FCC, FCC + [.5, 0, 0]])
    model = crystal(basis, a, 4, species=["Na"] * 4 + ["Cl"] * 4)
    r = np.linspace(0, 5.0, 1001)
    pdf = km.pair_distribution(model, r)
    rho = 8 / a**3
    sel = np.abs(r - a / 2) < 0.1
    n_cl = trapezoid(4 * np.pi * r[sel] ** 2 * 0.5 * rho * pdf.partials["Cl-Na"][sel], r[sel])
    assert n_cl == pytest.approx(6, rel=1e-4)
    sel = np.abs(r - a / np.sqrt(2)) < 0.1
    n_na = trapezoid(4 * np.pi * r[sel] ** 2 * 0.5 * rho * pdf.partials["Na-Na"][sel], r[sel])
    assert n_na == pytest.approx(12, rel=1e-4)
    # number weights: c_a c_b for like pairs, 2 c_a c_b for unlike ones, summing to 1
    assert pdf.weights == pytest.approx({"Cl-Cl": 0.25, "Cl-Na": 0.5, "Na-Na": 0.25})
    # neutron weights: c_a c_b b_a b_b/<b>² with b from the probe at Q = 0
    bn = km.get_probe("neutron").scattering_factors(["Cl", "Na"], [0.0]).real[:, 0]
    pn = km.pair_distribution(model, r, probe="neutron")
    assert pn.weights["Cl-Na"] == pytest.approx(2 * 0.25 * bn[0] * bn[1] / (0.5 * bn.sum()) ** 2)


def test_chunks_threads_and_frames():
    model = crystal(BCC, 3.3, 4, b_iso=0.4)
    r = np.linspace(0, 6.0, 601)
    ref = km.pair_distribution(model, r, threads=1)
    other = km.pair_distribution(model, r, threads=2, chunk_atoms=19)
    assert np.array_equal(ref.G, other.G)
    both = km.pair_distribution([model, model], r)
    np.testing.assert_allclose(both.G, ref.G, rtol=1e-12, atol=1e-12)


def test_particle_needs_a_density_and_uses_it():
    rng = np.random.default_rng(0)
    pos = rng.normal(0, 4.0, (300, 3))
    model = km.Model(pos, "C")
    r = np.linspace(0, 5, 51)
    with pytest.raises(InvalidInputError, match="density"):
        km.pair_distribution(model, r)
    pdf = km.pair_distribution(model, r, density=0.1)
    # number of pairs closer than 5 Å, counted independently with pdist
    n_pairs = (pdist(pos) <= 5.0).sum()
    assert trapezoid(pdf.radial, r) * 300 / 2 == pytest.approx(n_pairs, rel=0.02)


def test_fourier_route_matches_a_numpy_sine_transform():
    # Independent: the exact Debye I(Q) of unit scatterers in NumPy, S = I/N, F = Q(S − 1),
    # G = (2/π) ∫ F(Q) M(Q) sin(Qr) dQ with the Lorch M and damping exp(−(q_d r)²/2).
    rng = np.random.default_rng(1)
    pos = np.vstack([np.array([[i, j, k] for i in range(4) for j in range(4) for k in range(4)]) * 2.5])
    pos = pos + rng.normal(0, 0.05, pos.shape)
    model = km.Model(pos, "X")
    q = np.linspace(1.0, 18.0, 1701)
    rd = pdist(pos)
    s = 1 + np.array([2 * np.sinc(qq * rd / np.pi).sum() for qq in q]) / len(pos)
    f = q * (s - 1)
    m = np.sinc(q / q[-1])
    r = np.linspace(0.5, 8, 151)
    qd = 0.05
    want = 2 / np.pi * trapezoid(f[None] * m[None] * np.sin(np.outer(r, q)), q, axis=1) * np.exp(-0.5 * (qd * r) ** 2)
    pdf = km.pair_distribution(model, r, q_range=(1.0, 18.0), dq=0.01, q_damp=qd, probe="unit")
    np.testing.assert_allclose(pdf.G, want, atol=2e-3 * np.abs(want).max())
    assert pdf.g is None and pdf.metadata["route"].startswith("Fourier")
    # and G has its first peak at the lattice spacing 2.5 Å (simple cubic)
    first = np.abs(r - 2.5) < 0.4
    assert abs(r[first][np.argmax(pdf.G[first])] - 2.5) < 0.1


def test_save_writes_nexus(tmp_path):
    import h5py

    pdf = km.pair_distribution(crystal(FCC, 4.05, 3), np.linspace(0, 5, 101))
    path = pdf.save(tmp_path / "pdf.h5")
    with h5py.File(path) as f:
        np.testing.assert_array_equal(f["entry/data/G"][()], pdf.G)
        np.testing.assert_array_equal(f["entry/data/r"][()], pdf.r)
        assert f["entry/data"].attrs["signal"] in ("G", b"G")
        assert "g_Al-Al" in f["entry/data"]
    assert not list(tmp_path.glob("*.tmp"))


@pytest.mark.parametrize("kwargs, match", [
    ({"r": [0.0]}, "at least 2"),
    ({"r": [0.0, 1.0, 3.0]}, "equally spaced"),
    ({"r": [-1.0, 0.0]}, r"`r`\[0\]"),
    ({"r": np.linspace(0, 9, 10)}, "half the smallest"),
    ({"density": -1.0}, "density"),
    ({"q_range": (5.0, 1.0)}, "q_range"),
    ({"q_range": (0.5, 10.0), "q_damp": -1.0}, "q_damp"),
    ({"q_range": (0.5, 10.0), "dq": 0.0}, "dq"),
    ({"energy_kev": 8.0}, "need a `probe`"),
])
def test_bad_arguments_are_named(kwargs, match):
    model = crystal(FCC, 4.05, 3)  # box 12.15 Å: r up to 6.075 Å
    args = {"r": np.linspace(0, 5, 51)} | kwargs
    r = args.pop("r")
    with pytest.raises(InvalidInputError, match=match):
        km.pair_distribution(model, r, **args)


def test_far_apart_chunks_are_skipped_without_changing_results(monkeypatch):
    # A long periodic bcc rod (12 × 3 × 3 cells) read in x-layers: most chunk pairs are farther
    # apart than r_max and are not paired (chunks of two layers); the histogram is the same as in one piece (the
    # integers of the core are exact). Same for a particle with a cut-off.
    from kinemap.powder import _pairs

    a = 3.3
    cells = np.array([[i, j, k] for i in range(12) for j in range(3) for k in range(3)])
    frac = (cells[:, None] + BCC[None]).reshape(-1, 3)
    model = km.Model(frac * a, "Fe", box=np.diag([12 * a, 3 * a, 3 * a]))
    calls = {"n": 0}
    real = _pairs._far_apart

    def counting(*args):
        out = real(*args)
        calls["n"] += bool(out)
        return out

    monkeypatch.setattr(_pairs, "_far_apart", counting)
    r = np.linspace(0, 4.5, 451)
    one = km.pair_distribution(model, r, thermal=False)
    layered = km.pair_distribution(model, r, thermal=False, chunk_atoms=36)
    assert calls["n"] > 5
    assert np.array_equal(one.G, layered.G)
    # coordination of bcc (8 at a√3/2) survives the skipping
    assert layered.coordination(2.7, 3.0) == pytest.approx(8, rel=1e-4)
    calls["n"] = 0
    particle = km.Model(frac * a, "Fe")
    with pytest.warns(km.PowderCautionWarning, match="truncated"):
        p1 = km.powder(particle, np.linspace(1, 10, 10), r_max=4.0)
    with pytest.warns(km.PowderCautionWarning, match="truncated"):
        p2 = km.powder(particle, np.linspace(1, 10, 10), r_max=4.0, chunk_atoms=36)
    assert calls["n"] > 5
    assert np.array_equal(p1.intensity, p2.intensity)
