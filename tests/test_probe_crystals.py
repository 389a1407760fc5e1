"""Rocksalt with neutrons (fm) and electrons (Å): the textbook rules with the right numbers.

References: Warren, "X-ray Diffraction", ch. 4 (memory): F = 4(f_A + f_B) all even,
4(f_A − f_B) all odd, 0 mixed; Sears, Neutron News 3(3) (1992) 26–37: b_c(Na) = 3.63 fm,
b_c(Cl) = 9.577 fm (REFERENCES.md); Mott–Bethe formula f_e(s) = (Z − f_x(s))/(8π² a0 s²)
with Waasmaier–Kirfel f_x (periodictable), agreement within 8 % for all elements
(REFERENCES.md); relativistic γ = 1 + eV/(m0c²) = 1.391390 at 200 kV (REFERENCES.md).
"""

import numpy as np
import periodictable.cromermann as wk
import pytest

import kinemap as km

A = 5.6402


def rocksalt():
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    return km.Model(np.vstack([fcc, fcc + [.5, 0, 0]]), ["Na"] * 4 + ["Cl"] * 4,
                    cell=np.eye(3) * A, fractional=True)


def structure_factors(probe, hkl, **kw):
    grid = km.QGrid.points(2 * np.pi * np.asarray(hkl, float) / A)
    return km.scatter(rocksalt(), grid, probe=probe, **kw)


def test_neutron_rocksalt_in_fm():
    # Sears (1992): Na 3.63 fm, Cl 9.577 fm. periodictable's Cl (9.5792) is a later value:
    # tolerance 0.02 fm per site (4 sites → 0.08 fm on F).
    pat = structure_factors("neutron", [[2, 0, 0], [1, 1, 1], [1, 0, 0], [4, 4, 2]])
    F = pat.amplitude
    assert pat.units == "fm"
    assert abs(F[0].real - 4 * (3.63 + 9.577)) < 0.08      # 52.83 fm
    assert abs(F[1].real - 4 * (3.63 - 9.577)) < 0.08      # −23.79 fm
    assert abs(F[2]) < 1e-9
    # Neutron lengths do not fall off with q: F(442) = F(200) exactly.
    assert abs(F[3] - F[0]) < 1e-9 * abs(F[0])


def mott_bethe(symbol, z, s):
    a0 = 0.529177
    return (z - wk.fxrayatstol(symbol, s)) / (8 * np.pi**2 * a0 * s * s)


def test_electron_rocksalt_in_angstrom():
    hkl = np.array([[2, 2, 0], [4, 0, 0], [3, 3, 1], [2, 1, 0]])
    with pytest.warns(km.KinematicApproximationWarning, match="dynamical"):
        pat = structure_factors("electron", hkl, voltage_kv=200)
    assert pat.units == "angstrom"
    gamma = pat.metadata["probe"]["gamma"]
    assert abs(gamma - 1.391390) < 1e-6
    F = pat.amplitude
    s = np.linalg.norm(hkl, axis=1) / (2 * A)
    fna, fcl = mott_bethe("Na", 11, s), mott_bethe("Cl", 17, s)
    # Mott–Bethe (8 % for all elements); the probe returns γ·f_e (its metadata says so).
    np.testing.assert_allclose(F[:2].real, gamma * 4 * (fna[:2] + fcl[:2]), rtol=0.08)
    np.testing.assert_allclose(F[2].real, gamma * 4 * (fna[2] - fcl[2]), rtol=0.08)
    assert abs(F[3]) < 1e-9
    assert any("dynamical" in c for c in pat.metadata["cautions"])
