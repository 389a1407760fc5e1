"""Powder patterns by the Debye equation (kinemap.powder).

References used here, each named beside its check:
* the Debye scattering equation written out as an O(N²) NumPy double sum over
  scipy.spatial.distance.pdist distances (Debye 1915; any diffraction text, e.g. Warren,
  "X-ray Diffraction", ch. 10 — memory);
* the orientation average of the exact 3-D engine over a product Gauss–Legendre × uniform-φ
  quadrature of the sphere (exact for spherical harmonics of the stated degree);
* analytic results: a single atom, an ideal gas in a periodic box (S(Q) = 1), fcc Bragg
  positions Q = 2π√(h²+k²+l²)/a.
"""

import numpy as np
import pytest
from numpy.polynomial.legendre import leggauss
from scipy.spatial.distance import pdist

import kinemap as km
from kinemap.errors import InvalidInputError


def cluster(kind: str, radius: float, rng, b_iso=None, partial=False) -> km.Model:
    """A spherical cut from an fcc (Al, a = 4.05 Å) or rocksalt (NaCl, a = 5.64 Å) crystal,
    slightly displaced at random so that distances do not sit on histogram nodes."""
    n = 4
    if kind == "fcc":
        a, basis, sp = 4.05, np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]]), ["Al"] * 4
    else:
        a = 5.64
        fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
        basis, sp = np.vstack([fcc, fcc + [.5, 0, 0]]), ["Na"] * 4 + ["Cl"] * 4
    cells = np.array([[i, j, k] for i in range(-n, n) for j in range(-n, n) for k in range(-n, n)])
    frac = (cells[:, None, :] + basis[None]).reshape(-1, 3)
    species = np.tile(sp, len(cells))
    pos = frac * a + rng.normal(0, 0.05, (len(frac), 3))
    keep = np.linalg.norm(pos, axis=1) < radius
    occ = None
    if partial:
        occ = np.where(rng.random(int(keep.sum())) < 0.3, 0.6, 1.0)
    return km.Model(pos[keep], list(species[keep]), occupancy=occ, b_iso=b_iso)


def exact_debye(model: km.Model, q: np.ndarray, probe) -> tuple[np.ndarray, np.ndarray]:
    """The Debye double sum written out in NumPy, and the bound (Q dr)²/24 Σ|w_ij| of the
    binned evaluation divided by dr² (multiply by dr² to get the bound)."""
    labels = sorted(set(model.species))
    s = q / (4 * np.pi)
    f = probe.scattering_factors(labels, s)
    row = {lab: i for i, lab in enumerate(labels)}
    fa = f[[row[x] for x in model.species]]  # (N, M)
    t = np.exp(-np.outer(model.b_iso, s * s))
    o = model.occupancy
    ft = o[:, None] * fa * t
    self_term = (o[:, None] * np.abs(fa) ** 2).sum(axis=0)
    i, j = np.triu_indices(model.n_atoms, 1)
    r = pdist(model.positions)
    out = self_term.copy()
    bound = np.zeros(len(q))
    for m, qq in enumerate(q):
        w = 2 * (ft[i, m] * np.conj(ft[j, m])).real
        x = qq * r
        out[m] += (w * np.sinc(x / np.pi)).sum()
        bound[m] = qq**2 / 24 * np.abs(w).sum()
    return out, bound


@pytest.mark.parametrize("kind, radius, probe, b_iso, partial", [
    ("fcc", 7.0, "xray", None, False),
    ("fcc", 8.5, "xray", {"Al": 0.8}, True),
    ("nacl", 9.5, "xray", {"Na": 1.2, "Cl": 0.9}, False),
    ("nacl", 9.5, "neutron", {"Na": 1.2, "Cl": 0.9}, True),
])
def test_matches_the_exact_debye_sum_within_the_binning_bound(kind, radius, probe, b_iso, partial, rng):
    model = cluster(kind, radius, rng, b_iso=b_iso, partial=partial)
    assert 50 <= model.n_atoms <= 500
    q = np.linspace(0.0, 20.0, 161)
    pat = km.powder(model, q, probe=probe)
    want, bound_per_dr2 = exact_debye(model, q, km.get_probe(probe))
    dr = pat.metadata["dr_angstrom"]
    bound = bound_per_dr2 * dr**2
    err = np.abs(pat.intensity - want)
    # Stated bound: per pair (Q dr)²/24 (two-node binning of sin(Qr)/(Qr), |d²/dr²| ≤ Q²/3).
    assert np.all(err <= bound + 1e-9 * np.abs(want).max()), np.max(err - bound)
    assert np.allclose(pat.error_bound, bound, rtol=1e-9, atol=1e-12)
    # The default bin_tol (1e-4 per pair at 20 1/Å) makes the pattern accurate to ~1e-4 of its scale.
    assert err.max() < 1e-4 * np.abs(want).max()
    # the bin-width rule: dr = sqrt(24 · 1e-4)/Q_max
    assert dr == pytest.approx(np.sqrt(24e-4) / 20.0)


def test_error_shrinks_as_dr_squared(rng):
    # Two-node binning is second order: halving dr quarters the error (well within 2.5×–6×).
    model = cluster("fcc", 7.0, rng)
    q = np.linspace(1.0, 20.0, 96)
    want, _ = exact_debye(model, q, km.get_probe("unit"))
    e1 = np.abs(km.powder(model, q, probe="unit", dr=0.04).intensity - want).max()
    e2 = np.abs(km.powder(model, q, probe="unit", dr=0.02).intensity - want).max()
    assert 2.5 < e1 / e2 < 6.0


def sphere_rule(degree: int):
    """Directions and weights (sum 1) of a product Gauss–Legendre (cos θ) × uniform-φ rule,
    exact for spherical harmonics up to `degree`."""
    n_t = degree // 2 + 1
    x, w = leggauss(n_t)
    n_p = degree + 1
    phi = 2 * np.pi * np.arange(n_p) / n_p
    st = np.sqrt(1 - x**2)
    dirs = np.stack([np.outer(st, np.cos(phi)), np.outer(st, np.sin(phi)),
                     np.outer(x, np.ones(n_p))], axis=-1).reshape(-1, 3)
    weights = np.outer(w / 2, np.full(n_p, 1.0 / n_p)).reshape(-1)
    return dirs, weights


@pytest.mark.parametrize("probe, b_iso", [("xray", {"Na": 1.5, "Cl": 0.7}), ("neutron", {"Na": 0.5, "Cl": 2.0})])
def test_orientation_average_of_the_3d_engine(probe, b_iso, rng):
    # The spherical average of |A(q)|² from km.scatter equals the Debye I(Q) after the
    # self-term difference Σ|f|²(1 − T²) (full occupancy).
    model = cluster("nacl", 6.5, rng, b_iso=b_iso)
    d_max = pdist(model.positions).max()
    q_mags = np.array([0.3, 1.1, 2.7, 5.0, 8.3, 12.0])
    degree = int(np.ceil(q_mags.max() * d_max)) + 10  # Q_max·d_max + 10
    dirs, weights = sphere_rule(degree)
    pts = q_mags[:, None, None] * dirs[None]
    pat3d = km.scatter(model, km.QGrid.points(pts), probe=probe, method="exact")
    avg = pat3d.intensity @ weights
    pat = km.powder(model, q_mags, probe=probe, bin_tol=1e-7)
    pr = km.get_probe(probe)
    labels = sorted(set(model.species))
    f = pr.scattering_factors(labels, q_mags / (4 * np.pi))
    row = {lab: i for i, lab in enumerate(labels)}
    s2 = (q_mags / (4 * np.pi)) ** 2
    diff = sum(np.abs(f[row[sp]]) ** 2 * (1 - np.exp(-2 * b * s2)) for sp, b in zip(model.species, model.b_iso))
    scale = pat.self_scattering
    np.testing.assert_allclose(pat.intensity - diff, avg, rtol=0, atol=2e-6 * scale.max())


def test_single_atom_and_forward_scattering():
    # One atom: I = o|f|² (self term only). Two atoms at Q = 0: |Σ o f|² (all phases equal).
    q = np.array([0.0, 1.0, 4.0])
    p1 = km.powder(km.Model([[1.0, 2.0, 3.0]], "Fe", occupancy=0.5), q)
    f = km.get_probe("xray").scattering_factors(["Fe"], q / (4 * np.pi))[0].real
    np.testing.assert_allclose(p1.intensity, 0.5 * f**2, rtol=1e-13)
    p2 = km.powder(km.Model([[0, 0, 0], [2.3, 0.4, 0]], ["Fe", "O"]), [0.0])
    fe, o = km.get_probe("xray").scattering_factors(["Fe", "O"], [0.0]).real[:, 0]
    assert p2.intensity[0] == pytest.approx((fe + o) ** 2, rel=1e-12)


def test_threads_and_chunks_give_identical_patterns(rng, tmp_path):
    model = cluster("nacl", 9.0, rng, b_iso={"Na": 1.0, "Cl": 0.5}, partial=True)
    q = np.linspace(0.1, 15, 50)
    ref = km.powder(model, q, threads=1)
    for threads, chunk in [(2, 1 << 20), (1, 37), (2, 101)]:
        other = km.powder(model, q, threads=threads, chunk_atoms=chunk)
        assert np.array_equal(ref.intensity, other.intensity), (threads, chunk)
    path = km.write_h5md(tmp_path / "c.h5md", model, boundary="none")
    src = km.open_model(path)
    streamed = km.powder(src, q, chunk_atoms=64, threads=2)
    assert np.array_equal(ref.intensity, streamed.intensity)


def test_periodic_ideal_gas_has_flat_structure_factor():
    # Analytic: an ideal gas has S(Q) = 1. Without subtracting ρ₀ the truncated pair sum would
    # add 4πρ₀[sin x − x cos x]/Q³ (x = Q r_max), about −5 at Q = 1 here; with the
    # subtraction only the random fluctuations remain (a few 1e-3).
    rng = np.random.default_rng(0)
    box = np.diag([40.0, 42.0, 44.0])
    model = km.Model(rng.uniform(0, 1, (4000, 3)), "Ar", box=box, fractional=True)
    q = np.linspace(0.2, 10, 50)
    with pytest.warns(km.PowderCautionWarning, match="not meaningful"):
        pat = km.powder(model, q, probe="unit")
    # fluctuations of a random sample grow towards low Q (about 1/Q): judge from Q = 1 on
    ok = q > 1.0
    assert np.abs(pat.structure_factor[ok] - 1).max() < 0.05
    truncation = 4 * np.pi * (4000 / np.prod(np.diag(box))) * (np.sin(q * 20) - q * 20 * np.cos(q * 20)) / q**3
    assert np.abs(truncation[ok]).max() > 0.5  # what the subtraction removed is large


def test_periodic_fcc_has_bragg_peaks_at_the_textbook_positions():
    # fcc a = 4.05 Å: reflections 111, 200, 220, 311 at Q = 2π√(h²+k²+l²)/a; 100 and 110 are
    # absent (mixed indices).
    a = 4.05
    n = 10
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    cells = np.array([[i, j, k] for i in range(n) for j in range(n) for k in range(n)])
    model = km.Model((cells[:, None] + fcc[None]).reshape(-1, 3) / n, "Al",
                     box=np.eye(3) * n * a, fractional=True, b_iso=0.5)
    q = np.linspace(1.0, 6.0, 501)
    pat = km.powder(model, q)
    s = pat.structure_factor
    for hkl in [(1, 1, 1), (2, 0, 0), (2, 2, 0), (3, 1, 1)]:
        qb = 2 * np.pi * np.linalg.norm(hkl) / a
        near = np.abs(q - qb) < 0.15
        assert abs(q[near][np.argmax(s[near])] - qb) < 0.02, hkl
        assert s[near].max() > 2  # peaks; the absent reflections stay below 0.5
    for hkl in [(1, 0, 0), (1, 1, 0)]:
        qb = 2 * np.pi * np.linalg.norm(hkl) / a
        assert abs(s[np.argmin(np.abs(q - qb))]) < 0.5, hkl


def test_structure_factor_normalisation_of_a_dimer():
    # Analytic: two unit scatterers 2 Å apart: I = 2 + 2 sinc(2Q), N = 2, <|f|²> = <f>² = 1,
    # S = 1 + sinc(2Q), F = Q sinc(2Q) = sin(2Q)/2.
    q = np.linspace(0.5, 10, 20)
    pat = km.powder(km.Model([[0, 0, 0], [0, 0, 2.0]], "X"), q, probe="unit", dr=0.01)
    np.testing.assert_allclose(pat.structure_factor, 1 + np.sin(2 * q) / (2 * q), atol=1e-12)
    np.testing.assert_allclose(pat.reduced, np.sin(2 * q) / 2, atol=1e-12)


def test_gaussian_resolution_conserves_area_and_broadens():
    # A Gaussian of FWHM w convolved into the pattern: the integral over Q is kept (away from
    # the ends) and a narrow oscillation is damped by exp(−σ²r²/2) (r = 10 Å: the sinc
    # oscillation of a dimer), the transform of the Gaussian.
    q = np.linspace(5.0, 15.0, 401)
    model = km.Model([[0, 0, 0], [0, 0, 10.0]], "X")
    sharp = km.powder(model, q, probe="unit", dr=0.005)
    fwhm = 0.2
    blurred = km.powder(model, q, probe="unit", dr=0.005, resolution=fwhm)
    sigma = fwhm / (2 * np.sqrt(2 * np.log(2)))
    # distinct term Q·I_d = 2 sin(10Q)/10 → damped by exp(−σ²·100/2) after convolution
    amp_sharp = np.abs(q * sharp.distinct).max()
    amp_blur = np.abs(q * blurred.distinct).max()
    assert amp_blur / amp_sharp == pytest.approx(np.exp(-0.5 * sigma**2 * 100), rel=0.03)


def test_incoherent_terms():
    # Neutron: Σ o σ_inc/(4π); vanadium σ_inc = 5.08 barn (Sears 1992 — memory), so
    # 5.08 · 100 / (4π) = 40.4 fm² per atom.
    m = km.Model([[0, 0, 0], [3, 0, 0]], "V")
    pat = km.powder(m, [1.0, 5.0], probe="neutron", incoherent=True)
    assert pat.incoherent[0] / 2 == pytest.approx(5.08 * 100 / (4 * np.pi), rel=0.01)
    np.testing.assert_allclose(pat.total, pat.intensity + pat.incoherent)
    # X-ray Compton of hydrogen: one electron, S(s) = 1 − f(s)², with the exact 1s form factor
    # f = 1/(1 + (2π a0 s)²)² (REFERENCES.md: f(0.25) = 0.349738).
    q = np.array([4 * np.pi * 0.25])
    ph = km.powder(km.Model([[0, 0, 0]], "H"), q, incoherent=True)
    assert ph.incoherent[0] == pytest.approx(1 - 0.349738**2, abs=2e-4)
    # and it tends to Z electrons at high s (Fe: 26 at s = 5, where f0 is small)
    pf = km.powder(km.Model([[0, 0, 0]], "Fe"), [4 * np.pi * 5.0], incoherent=True)
    assert pf.incoherent[0] == pytest.approx(26, rel=0.01)


def test_frames_average_patterns(rng):
    # The average over frames of the patterns equals the mean of the single-frame patterns.
    frames = [cluster("fcc", 7.0, np.random.default_rng(i)) for i in range(3)]
    frames = [f for f in frames if f.n_atoms == frames[0].n_atoms][:2]
    q = np.linspace(0.5, 10, 30)
    avg = km.powder(frames, q, probe="unit")
    mean = np.mean([km.powder(f, q, probe="unit").intensity for f in frames], axis=0)
    np.testing.assert_allclose(avg.intensity, mean, rtol=1e-12)
    assert avg.metadata["n_frames"] == len(frames)


def test_save_and_load(tmp_path, rng):
    model = cluster("fcc", 6.0, rng)
    q = np.linspace(0.5, 8.0, 31)
    pat = km.powder(model, q)
    path = pat.save(tmp_path / "powder.h5")
    back = km.load_pattern(path)
    np.testing.assert_array_equal(back.intensity, pat.intensity)
    np.testing.assert_allclose(back.grid.q_vectors()[:, 0], q)
    with __import__("h5py").File(path) as f:  # a NeXus reader sees |Q| as the axis
        assert list(f["entry/data"].attrs["axes"]) == ["q_magnitude"]
        np.testing.assert_allclose(f["entry/data/q_magnitude"][()], q)
    import h5py

    with h5py.File(path) as f:
        np.testing.assert_array_equal(f["entry/data/structure_factor"][()], pat.structure_factor)
        assert list(f["entry/data"].attrs["axes"]) == ["q_magnitude"]  # a NeXus reader plots I over |Q|
        np.testing.assert_allclose(f["entry/data/q_magnitude"][()], q)
    assert not list(tmp_path.glob("*.tmp"))


@pytest.mark.parametrize("kwargs, match", [
    ({"q": [-1.0, 2.0]}, r"`q`\[0\]"),
    ({"q": [[1.0, 2.0]]}, "1-D"),
    ({"q": [1.0, np.nan]}, r"`q`\[1\]"),
    ({"q": []}, "non-empty"),
    ({"window": "hann"}, "window"),
    ({"bin_tol": 0.0}, "bin_tol"),
    ({"dr": -0.1}, "dr"),
    ({"r_max": -3.0}, "r_max"),
    ({"resolution": -0.1}, "resolution"),
    ({"chunk_atoms": 0}, "chunk_atoms"),
    ({"threads": 0}, "threads"),
    ({"probe": "unit", "incoherent": True}, "incoherent"),
    ({"frames": [0, 1]}, "frames"),
    ({"box": "periodic"}, "box"),
])
def test_bad_arguments_are_named(kwargs, match):
    model = km.Model([[0, 0, 0], [2, 0, 0]], "Fe")
    args = {"q": [1.0, 2.0]} | kwargs
    q = args.pop("q")
    with pytest.raises(InvalidInputError, match=match):
        km.powder(model, q, **args)


def test_bad_models_are_refused():
    with pytest.raises(InvalidInputError, match="Xx"):
        km.powder(km.Model([[0, 0, 0]], "Xx"), [1.0])
    with pytest.raises(InvalidInputError, match="no atoms"):
        km.powder(km.Model(np.zeros((0, 3)), []), [1.0])
    with pytest.raises(InvalidInputError, match="occupancy 0"):
        km.powder(km.Model([[0, 0, 0], [1, 0, 0]], "Fe", occupancy=0.0), [1.0])
    with pytest.raises(InvalidInputError, match="`model`"):
        km.powder(np.zeros((3, 3)), [1.0])
    box = km.Model([[0, 0, 0], [1, 1, 1]], "Fe", box=np.eye(3) * 6.0)
    with pytest.raises(InvalidInputError, match="half the smallest face-to-face width"):
        km.powder(box, [1.0], r_max=3.5)


def test_particle_with_r_max_and_anisotropic_displacements_warn():
    m = km.Model([[0, 0, 0], [2, 0, 0], [9, 0, 0]], "Fe")
    with pytest.warns(km.PowderCautionWarning, match="truncated"):
        km.powder(m, [1.0], r_max=5.0)
    ma = km.Model([[0, 0, 0], [2, 0, 0]], "Fe", u_aniso=np.diag([0.01, 0.02, 0.03]))
    with pytest.warns(km.PowderCautionWarning, match="isotropic equivalent"):
        p = km.powder(ma, [3.0])
    # B = 8π²·0.02 (the mean of the diagonal): the pair term carries exp(−2B s²)
    iso = km.powder(km.Model([[0, 0, 0], [2, 0, 0]], "Fe", u_iso=0.02), [3.0])
    assert p.intensity[0] == pytest.approx(iso.intensity[0], rel=1e-10)
