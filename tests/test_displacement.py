"""Occupancy and Debye–Waller factors (ITC Vol. C §8.1 — memory; docs/references.md,
"Debye–Waller factor": T = exp(−B s²), B = 8π²⟨u²⟩; ⟨u²⟩ = 0.01 Å² gives B = 0.789568 Å²,
T(0.5) = 0.820869)."""

import numpy as np
import pytest

import kinemap as km
from kinemap import InvalidInputError

A = 5.6402  # rocksalt cell edge (Å), docs/references.md ("Crystals")


def rocksalt(**kw):
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    return km.Model(np.vstack([fcc, fcc + [.5, 0, 0]]), ["Na"] * 4 + ["Cl"] * 4,
                    cell=np.eye(3) * A, fractional=True, **kw)


HKL = np.array([[1, 1, 1], [2, 0, 0], [2, 2, 0], [4, 2, 0], [6, 0, 0]])


def bragg(model, probe="xray"):
    grid = km.QGrid.points(2 * np.pi * HKL / A)
    return km.scatter(model, grid, probe=probe).intensity


def test_reference_values_of_the_convention():
    # B = 8π²⟨u²⟩ and T(s) = exp(−B s²): check values of docs/references.md.
    m = km.Model([[0, 0, 0]], "Fe", u_iso=0.01)
    assert abs(m.b_iso[0] - 0.789568) < 1e-6
    q = 4 * np.pi * 0.5
    a = km.scatter(m, km.QGrid.points([[q, 0, 0]]), probe="unit").amplitude[0]
    assert abs(abs(a) - 0.820869) < 1e-6


def test_bragg_intensities_fall_by_exp_minus_2bs2():
    # Same B on every atom: I_B(hkl) = I_0(hkl) exp(−2 B s²), s = |hkl|/(2a).
    b = 1.3
    i0, ib = bragg(rocksalt()), bragg(rocksalt(b_iso=b))
    s = np.linalg.norm(HKL, axis=1) / (2 * A)
    np.testing.assert_allclose(ib / i0, np.exp(-2 * b * s * s), rtol=1e-12)


def test_per_species_b_changes_each_sublattice():
    # F = 4(f_Na T_Na ± f_Cl T_Cl) for unmixed hkl (Warren ch. 4 — memory).
    import periodictable.cromermann as wk

    m = rocksalt(b_iso={"Na": 1.5, "Cl": 0.6})
    F = km.scatter(m, km.QGrid.points(2 * np.pi * HKL / A)).amplitude
    s = np.linalg.norm(HKL, axis=1) / (2 * A)
    fna = wk.fxrayatstol("Na", s) * np.exp(-1.5 * s * s)
    fcl = wk.fxrayatstol("Cl", s) * np.exp(-0.6 * s * s)
    sign = np.where(HKL[:, 0] % 2 == 1, -1.0, 1.0)
    np.testing.assert_allclose(F.real, 4 * (fna + sign * fcl), rtol=1e-11)


def test_anisotropic_u_reduces_to_isotropic():
    # exp(−½ qᵀ(U_iso·I)q) = exp(−8π² U_iso s²) = exp(−B s²).
    u = 0.012
    iso = bragg(rocksalt(u_iso=u))
    aniso = bragg(rocksalt(u_aniso=np.eye(3) * u))
    np.testing.assert_allclose(aniso, iso, rtol=1e-12)


def test_anisotropic_u_is_directional():
    # U with a single component u_xx: only q_x is damped, T = exp(−½ q_x² u_xx).
    u = np.diag([0.02, 0.0, 0.0])
    m = km.Model([[0, 0, 0]], "X", u_aniso=u)
    q = np.array([[3.0, 0, 0], [0, 3.0, 0], [0, 0, 3.0]])
    a = km.scatter(m, km.QGrid.points(q), probe="unit").amplitude
    np.testing.assert_allclose(np.abs(a), [np.exp(-0.5 * 9 * 0.02), 1, 1], rtol=1e-13)


def test_occupancy_scales_amplitudes():
    # A site at half occupancy scatters half the amplitude (definition of o_j).
    m1 = km.Model([[0, 0, 0], [1.7, 0.3, 0]], ["Fe", "Ni"], occupancy={"Ni": 0.5})
    m2 = km.Model([[0, 0, 0], [1.7, 0.3, 0]], ["Fe", "Ni"])
    q = km.QGrid.points([[1.0, 0.5, 0.0], [2.5, 0, 0]])
    a1 = km.scatter(m1, q).amplitude
    fe = km.scatter(km.Model([[0, 0, 0]], "Fe"), q).amplitude
    a2 = km.scatter(m2, q).amplitude
    np.testing.assert_allclose(a1 - fe, 0.5 * (a2 - fe), rtol=1e-12)


@pytest.mark.parametrize("kw, match", [
    ({"u_aniso": np.array([[0.01, 0.002, 0], [0, 0.01, 0], [0, 0, 0.01]])}, "not symmetric"),
    ({"u_aniso": np.diag([0.01, -0.02, 0.01])}, "positive semi-definite"),
    ({"u_aniso": np.eye(2)}, "shape"),
    ({"b_iso": {"Qq": 1.0}}, "Qq"),
    ({"u_iso": -0.01}, "u_iso"),
])
def test_bad_displacements(kw, match):
    with pytest.raises(InvalidInputError, match=match):
        km.Model([[0, 0, 0]], "Fe", **kw)


def test_too_many_distinct_displacements_are_refused():
    n = 5000
    m = km.Model(np.zeros((n, 3)), "Fe", b_iso=np.linspace(0, 1, n))
    with pytest.raises(InvalidInputError, match="distinct .*round"):
        km.scatter(m, km.QGrid.points([[1.0, 0, 0]]))
