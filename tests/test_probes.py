"""Tests of kinemap.probes: interface, species labels, X-ray and unit probes.

Every numerical check names its outside reference beside it. Values marked (memory) were
recalled, not read from the source.
"""

from __future__ import annotations

import numpy as np
import pytest

from kinemap.errors import InvalidInputError
from kinemap.probes import Probe, UnitProbe, XRayProbe, get_probe, parse_species
from kinemap.probes.xray import wk_table

A0 = 0.529177210903  # Bohr radius in Å (CODATA 2018)


# --------------------------------------------------------------------------------------
# interface
# --------------------------------------------------------------------------------------
def test_get_probe_by_name_and_pass_through():
    p = get_probe("xray")
    assert isinstance(p, XRayProbe) and p.name == "xray" and p.units == "electrons"
    assert get_probe(p) is p
    assert isinstance(get_probe("UNIT"), UnitProbe)
    with pytest.raises(InvalidInputError, match="unknown probe 'gamma'.*xray"):
        get_probe("gamma")
    with pytest.raises(InvalidInputError, match="keyword arguments"):
        get_probe(p, energy_kev=8.0)
    with pytest.raises(InvalidInputError, match="probe 'xray'"):
        get_probe("xray", voltage_kv=200)
    with pytest.raises(InvalidInputError, match="Probe instance"):
        get_probe(3)


def test_scattering_factors_shape_dtype_and_flattening():
    p = get_probe("xray")
    s = np.linspace(0, 1, 12).reshape(3, 4)
    f = p.scattering_factors(["Fe", "O"], s)
    assert f.dtype == np.complex128 and f.shape == (2, 12)
    # flattened in C order, same values as the 1-D call
    np.testing.assert_array_equal(f, p.scattering_factors(("Fe", "O"), s.ravel()))
    empty = p.scattering_factors(["Fe"], np.zeros((0,)))
    assert empty.shape == (1, 0) and empty.dtype == np.complex128


@pytest.mark.parametrize("bad, match", [
    ([-0.1], "must be >= 0"),
    ([np.nan], "non-finite"),
    ([np.inf], "non-finite"),
    ([6.5], r"6.5 Å⁻¹.*0 <= s <= 6"),
])
def test_bad_s_raises(bad, match):
    with pytest.raises(InvalidInputError, match=match):
        get_probe("xray").scattering_factors(["Fe"], np.array(bad))


def test_labels_must_be_a_sequence_of_str():
    p = get_probe("xray")
    with pytest.raises(InvalidInputError, match=r"single string 'Fe'"):
        p.scattering_factors("Fe", [0.1])
    with pytest.raises(InvalidInputError, match=r"`labels`\[1\] = 26"):
        p.check_labels(["Fe", 26])


def test_unit_probe_is_one_everywhere():
    p = get_probe("unit")
    f = p.scattering_factors(["vertex_a", "vertex_b", "anything"], np.linspace(0, 50, 7))
    # analytic: point scatterers have f = 1 at every s
    np.testing.assert_array_equal(f, np.ones((3, 7), dtype=np.complex128))
    assert p.units == "1" and p.name == "unit"
    p.check_labels(["any label at all"])
    assert p.metadata()["probe"] == "unit"
    assert p.cautions() == []


# --------------------------------------------------------------------------------------
# species labels
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("label, symbol, z, charge, mass", [
    ("Fe", "Fe", 26, 0, None),
    ("Fe3+", "Fe", 26, 3, None),
    ("Fe+3", "Fe", 26, 3, None),
    ("O2-", "O", 8, -2, None),
    ("Na+", "Na", 11, 1, None),
    ("Cl1-", "Cl", 17, -1, None),
    ("D", "H", 1, 0, 2),
    ("T", "H", 1, 0, 3),
    ("2H", "H", 1, 0, 2),
    ("58Ni", "Ni", 28, 0, 58),
    ("58-Ni", "Ni", 28, 0, 58),
    ("Ni-58", "Ni", 28, 0, 58),
    ("7Li", "Li", 3, 0, 7),
    ("H-2", "H", 1, 0, 2),
    ("O-2", "O", 8, -2, None),
])
def test_parse_species(label, symbol, z, charge, mass):
    sp = parse_species(label)  # atomic numbers: IUPAC periodic table
    assert (sp.symbol, sp.z, sp.charge, sp.mass_number) == (symbol, z, charge, mass)


@pytest.mark.parametrize("label, match", [
    ("Fe_a", r"'Fe_a'.*aliases"),
    ("fe", r"'fe'"),
    ("Xx3+", r"'Xx' is not an element"),
    ("1Ni", r"mass number 1 is smaller than the atomic number 28"),
    ("Fe0+", r"charge 0"),
])
def test_parse_species_errors(label, match):
    with pytest.raises(InvalidInputError, match=match):
        parse_species(label)


def test_aliases_map_site_labels():
    p = XRayProbe(aliases={"Fe_a": "Fe3+", "Fe_b": "Fe2+", "Ow": "O"})
    s = np.array([0.0, 0.3])
    f = p.scattering_factors(["Fe_a", "Fe_b", "Ow"], s)
    g = p.scattering_factors(["Fe3+", "Fe2+", "O"], s)
    np.testing.assert_array_equal(f, g)
    assert "Fe_a->Fe3+" in p.metadata()["aliases"]
    with pytest.raises(InvalidInputError, match=r"'Mn_x'.*no ion 'Mn7\+'.*Mn2\+, Mn3\+, Mn4\+"):
        XRayProbe(aliases={"Mn_x": "Mn7+"}).check_labels(["Mn_x"])
    with pytest.raises(InvalidInputError, match=r"aliases.*'Q'"):
        XRayProbe(aliases={"site": "Q"})
    with pytest.raises(InvalidInputError, match="must map str to str"):
        XRayProbe(aliases={"site": 26})


# --------------------------------------------------------------------------------------
# X-ray: Waasmaier & Kirfel (1995)
# --------------------------------------------------------------------------------------
# Check values of docs/references.md ("X-ray form factors"): WK f0 computed with periodictable
# and xraydb, identical to 6 decimals.
@pytest.mark.parametrize("label, s, f0", [
    ("Fe", 0.0, 25.994603),
    ("Fe", 0.25, 18.359445),
    ("Fe", 0.5, 11.508485),
    ("C", 0.0, 5.997198),
    ("C", 0.25, 2.949479),
    ("C", 0.5, 1.682759),
    ("O", 0.25, 4.808135),
])
def test_xray_wk_check_values(label, s, f0):
    f = get_probe("xray").scattering_factors([label], [s])
    assert f[0, 0].imag == 0.0
    assert f[0, 0].real == pytest.approx(f0, abs=2e-6)  # Waasmaier & Kirfel (1995), docs/references.md


def test_xray_f0_at_zero_is_z_for_every_neutral_atom():
    table = wk_table()
    neutral = [k for k in table if k.isalpha()]
    assert len(neutral) == 98  # WK (1995) covers H..Cf
    p = get_probe("xray")
    f = p.scattering_factors(neutral, [0.0])[:, 0].real
    z = np.array([parse_species(k).z for k in neutral])
    # WK (1995): fits reproduce the Hartree-Fock f0(0) = Z of the free atom
    assert np.max(np.abs(f - z)) < 0.05


def test_xray_f0_at_zero_is_z_minus_charge_for_ions():
    table = wk_table()
    ions = [k for k in table if not k.isalpha()]
    assert len(ions) > 100 and {"O2-", "Fe3+", "Na1+", "Cl1-", "H1-"} <= set(ions)
    p = get_probe("xray")
    f = p.scattering_factors(ions, [0.0])[:, 0].real
    zc = np.array([parse_species(k).z - parse_species(k).charge for k in ions])
    # WK (1995): ion fits tend to the electron count Z - charge at s = 0
    assert np.max(np.abs(f - zc)) < 0.05


def test_xray_hydrogen_matches_exact_1s_form_factor():
    # docs/references.md ("X-ray form factors"): the exact hydrogen 1s form factor
    # f(s) = 1/(1 + (2π a0 s)²)², a0 = 0.529177 Å, has f(0.25) = 0.349738, and the WK
    # hydrogen fit agrees with it to < 1e-4 there
    p = get_probe("xray")
    assert p.scattering_factors(["H"], [0.25])[0, 0].real == pytest.approx(0.349738, abs=1e-4)
    # over the whole fit range 0 <= s <= 6 against the analytic form (any QM text); the
    # worst gap is 3.8e-4 (measured)
    s = np.linspace(0.0, 6.0, 601)
    exact = 1.0 / (1.0 + (2 * np.pi * A0 * s) ** 2) ** 2
    f = p.scattering_factors(["H"], s)[0].real
    assert np.max(np.abs(f - exact)) < 5e-4


def test_xray_isotopes_scatter_like_their_element():
    p = get_probe("xray")
    s = np.array([0.0, 0.2, 0.7])
    # X-rays see electrons: a deuteron has hydrogen's electron cloud (physics, by definition)
    np.testing.assert_array_equal(p.scattering_factors(["D", "2H"], s),
                                  p.scattering_factors(["H", "H"], s))
    np.testing.assert_array_equal(p.scattering_factors(["58Ni"], s), p.scattering_factors(["Ni"], s))


@pytest.mark.parametrize("labels, match", [
    (["Fe", "Fe4+"], r"'Fe4\+'.*ions of Fe in the table: Fe2\+, Fe3\+"),
    (["Es"], r"'Es'.*Z = 99.*not in the Waasmaier-Kirfel"),
    (["Fe_a"], r"'Fe_a'"),
])
def test_xray_unknown_species_raise_naming_them(labels, match):
    p = get_probe("xray")
    with pytest.raises(InvalidInputError, match=match):
        p.check_labels(labels)
    with pytest.raises(InvalidInputError, match=match):
        p.scattering_factors(labels, [0.1])


def test_xray_metadata_names_tables():
    m = get_probe("xray").metadata()
    assert m["probe"] == "xray" and m["units"] == "electrons"
    assert "Waasmaier" in m["table_source"] and "A51" in m["table_source"]
    assert m["table"] == "waasmaier-kirfel-1995"
    assert all(isinstance(v, (str, int, float)) for v in m.values())


def test_probe_base_is_exported():
    assert issubclass(XRayProbe, Probe) and issubclass(UnitProbe, Probe)


# --------------------------------------------------------------------------------------
# X-ray anomalous terms: Henke, Gullikson & Davis (1993) via periodictable
# --------------------------------------------------------------------------------------
def test_xray_wavelength_energy_conversion():
    # Cu Kα1: λ = 1.540593 Å (docs/references.md, "Crystals") and E = 8.0478227 keV
    # (Deslattes et al., Rev. Mod. Phys. 75 (2003) 35 — memory); the two agree through
    # E = hc/λ within the last digit of λ (1e-6 relative)
    p = XRayProbe(wavelength=1.540593)
    assert p.energy_kev == pytest.approx(8.0478227, rel=1e-6)
    q = XRayProbe(energy_kev=8.0478227)
    assert q.wavelength == pytest.approx(1.540593, rel=1e-6)
    m = p.metadata()
    assert m["wavelength_angstrom"] == pytest.approx(1.540593)
    assert "Henke" in m["anomalous_source"] and "f1(E) - Z" in m["anomalous_convention"]


def test_xray_anomalous_iron_at_cu_kalpha():
    s = np.array([0.0, 0.25, 0.5])
    f0 = get_probe("xray").scattering_factors(["Fe"], s)[0]
    f = XRayProbe(wavelength=1.540593).scattering_factors(["Fe"], s)[0]
    fp, fpp = f.real - f0.real, f.imag
    # f′, f″ do not depend on s (dispersion is a core-electron effect)
    assert np.ptp(fp) < 1e-12 and np.ptp(fpp) < 1e-12
    # Fe at Cu Kα (8.05 keV, above the Fe K edge at 7.112 keV): Henke tables give
    # f′ ≈ -1.13, f″ ≈ 3.20 (memory; Cromer-Liberman values in ITC Vol. C Table 4.2.6.8 are
    # about -1.18, 3.20; the tables differ by a few hundredths)
    assert fp[0] == pytest.approx(-1.13, abs=0.08)
    assert fpp[0] == pytest.approx(3.20, abs=0.05)


def test_xray_anomalous_forward_factor_is_henke_total():
    import periodictable

    e = 17.4793  # Mo Kα1 energy, keV (memory)
    p = XRayProbe(energy_kev=e)
    for sym in ["C", "O", "Si", "Fe", "Cu", "Mo", "Pb", "U"]:
        f = p.scattering_factors([sym], [0.0])[0, 0]
        el = getattr(periodictable, sym)
        f1, f2 = el.xray.scattering_factors(energy=e)  # Henke table (periodictable)
        z = el.number
        # f(0, E) = f0(0) + f1 - Z = f1 + (f0(0) - Z); WK f0(0) is within 0.05 of Z
        assert f.real == pytest.approx(f1, abs=0.05)
        assert f.imag == pytest.approx(f2, rel=1e-12)
        # far above the K edges of C and O, f = f0 + f′ stays within 0.02 of Z
        # (Henke et al. 1993: f1 -> Z* = Z - (Z/82.5)^2.37 at high energy)
        if z <= 8:
            assert abs(f.real - z) < 0.02 and f.imag < 0.01


def test_xray_ions_get_neutral_atom_anomalous_terms():
    p = XRayProbe(energy_kev=8.0)
    f = p.scattering_factors(["Fe3+", "Fe"], [0.3])[:, 0]
    g = get_probe("xray").scattering_factors(["Fe3+", "Fe"], [0.3])[:, 0]
    assert (f - g)[0] == pytest.approx((f - g)[1], abs=1e-12)


@pytest.mark.parametrize("kwargs, label, match", [
    ({"energy_kev": 60.0}, "Fe", r"60 keV.*outside the Henke.*Fe.*30 keV"),
    ({"energy_kev": 0.01}, "O", r"0.01 keV.*outside the Henke.*O"),
    ({"energy_kev": 8.0}, "Pu", r"no Henke.*Pu.*Z = 1-92"),
])
def test_xray_energy_outside_table_raises(kwargs, label, match):
    p = XRayProbe(**kwargs)
    with pytest.raises(InvalidInputError, match=match):
        p.check_labels([label])
    # without anomalous terms the same energy is only recorded
    q = XRayProbe(anomalous=False, **kwargs)
    q.check_labels([label])
    assert q.metadata()["energy_kev"] == kwargs["energy_kev"]


@pytest.mark.parametrize("kwargs, match", [
    ({"energy_kev": -1.0}, "energy_kev"),
    ({"energy_kev": "hot"}, "energy_kev"),
    ({"wavelength": 0.0}, "wavelength"),
    ({"energy_kev": 8.0, "wavelength": 1.5}, "not both"),
])
def test_xray_bad_energy_arguments(kwargs, match):
    with pytest.raises(InvalidInputError, match=match):
        XRayProbe(**kwargs)
