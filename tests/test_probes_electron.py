"""Electron probe: the Mott–Bethe table (default), the Peng et al. (1996) alternative, and γ.

Outside references (docs/references.md, section "Electron scattering factors"): the
Mott–Bethe formula f_e(s) = (Z − f_x(s)) / (8π² a0 s²), evaluated here literally with the
Waasmaier & Kirfel (1995) X-ray factors as periodictable itself evaluates them
(`cromermann.fxrayatstol`); the exact hydrogen 1s form factor f_x(s) = 1/(1 + (2π a0 s)²)²
(any quantum-mechanics text), whose Mott–Bethe transform is a0 (2 + u)/(2 (1 + u)²) with
u = (2π a0 s)²; Peng, Ren, Dudarev & Whelan, Acta Cryst. A52 (1996) 257-276 (= ITC Vol. C
Table 4.3.2.2; the shipped coefficients were typed from memory, the carbon row checked
against the values in docs/references.md); γ = 1 + eV/(m0c²) with CODATA 2018 constants.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import periodictable.cromermann as wk
import pytest

import kinemap as km
from kinemap.errors import InvalidInputError
from kinemap.probes import ElectronProbe, get_probe, parse_species
from kinemap.probes.electron import (
    BOHR_RADIUS,
    MOTT_BETHE_CONSTANT,
    electron_wavelength,
    mott_bethe_fe,
    peng_agreement,
    peng_fe,
    peng_table,
    relativistic_gamma,
)
from kinemap.probes.xray import wk_table

A0 = 0.529177  # Bohr radius, Å (docs/references.md)
DOCS = Path(__file__).resolve().parents[1] / "docs"


def literal_mott_bethe(key: str, s: np.ndarray) -> np.ndarray:
    """(Z − f_x(s)) / (8π² a0 s²) as written, with periodictable's own f_x (s > 0)."""
    z = parse_species(key).z
    return (z - wk.fxrayatstol(key, s)) / (8 * np.pi**2 * A0 * s**2)


def bare(table: str = "mott-bethe") -> ElectronProbe:
    return ElectronProbe(table=table, include_gamma=False)


# --------------------------------------------------------------------------------------
# the Mott–Bethe table (default)
# --------------------------------------------------------------------------------------
def test_constants():
    # docs/references.md: a0 = 0.529177 Å, 1/(8π² a0) = 0.0239337 Å⁻¹
    assert BOHR_RADIUS == pytest.approx(0.529177, abs=1e-6)
    assert MOTT_BETHE_CONSTANT == pytest.approx(0.0239337, abs=1e-7)


def test_default_table_is_mott_bethe():
    p = get_probe("electron")
    assert p.table == "mott-bethe" and p.s_max == 6.0
    m = p.metadata()
    assert m["table"] == "mott-bethe"
    assert "Mott" in m["table_source"] and "Waasmaier" in m["table_source"] and "A51" in m["table_source"]
    assert "periodictable" in m["table_library"] and "Coulomb" in m["ions"]


def test_hydrogen_matches_the_exact_1s_transform():
    # exact: f_x = 1/(1+u)², u = (2π a0 s)²  ⇒  (1 − f_x)/(8π² a0 s²) with 8π² a0 s² = 2u/a0
    # gives f_e = a0 (2 + u) / (2 (1 + u)²); f_e(0) = a0 (Z⟨r²⟩/(3a0) with ⟨r²⟩ = 3a0²).
    s = np.linspace(0.0, 6.0, 601)
    u = (2 * np.pi * A0 * s) ** 2
    exact = A0 * (2 + u) / (2 * (1 + u) ** 2)
    f = bare().scattering_factors(["H"], s)[0]
    assert np.all(f.imag == 0.0)
    # the WK hydrogen fit is within 5e-4 electrons of the exact f_x; measured worst 0.12 %
    np.testing.assert_allclose(f.real, exact, rtol=2e-3)
    assert f[0].real == pytest.approx(A0, rel=2e-3)


def test_every_entry_matches_the_literal_formula():
    # the analytic rearrangement replaces Z − charge by the fit's c + Σa (they differ by
    # < 0.04 electrons): measured worst gap 0.36 % (Mo) at s = 0.2, median 0.03 %
    s = np.linspace(0.2, 6.0, 59)
    keys = list(wk_table())
    assert len(keys) > 200  # the neutral atoms and the ions of Waasmaier & Kirfel (1995)
    got = bare().scattering_factors(keys, s).real
    worst = {}
    for i, key in enumerate(keys):
        ref = literal_mott_bethe(key, s)
        worst[key] = float(np.max(np.abs(got[i] / ref - 1.0)))
    assert max(worst.values()) < 5e-3, max(worst.items(), key=lambda kv: kv[1])
    assert np.median(list(worst.values())) < 1e-3


@pytest.mark.parametrize("key", ["C", "O", "Si", "Fe", "Pb", "Dy", "U"])
def test_limit_at_zero_is_the_numerical_limit(key):
    # s → 0: (f_x(0) − f_x(s))/(8π² a0 s²) at s = 1e-3 from periodictable's evaluation
    # (cancellation costs 6 of 16 digits; the O(b s²) remainder is < 1e-4 relative)
    s = 1e-3
    lim = (wk.fxrayatstol(key, 0.0) - wk.fxrayatstol(key, s)) / (8 * np.pi**2 * A0 * s * s)
    f0 = bare().scattering_factors([key], [0.0, 1e-9])[0].real
    assert f0[0] == pytest.approx(lim, rel=2e-4)
    assert f0[1] == pytest.approx(f0[0], rel=1e-12)  # no 0/0 noise next to s = 0


@pytest.mark.parametrize("symbol", ["C", "O", "Si", "Fe", "Pb"])
def test_agrees_with_peng_within_2_percent_for_common_elements(symbol):
    # docs/references.md: Peng (1996) and Mott–Bethe agree within 2 % on 0.2 <= s <= 1.5 Å⁻¹
    # for C, O, Si, Fe, Pb (the Peng values typed from memory; C checked for typos)
    s = np.linspace(0.2, 1.5, 131)
    f = bare().scattering_factors([symbol], s)[0].real
    assert np.max(np.abs(peng_fe(symbol, s) / f - 1.0)) < 0.02


@pytest.mark.parametrize("ion, neutral, sign", [("O2-", "O", -1), ("Fe3+", "Fe", +1), ("Na1+", "Na", +1)])
def test_ions_keep_their_coulomb_term(ion, neutral, sign):
    # Z − f_x(s) → charge as s → 0, so f_e(ion) − f_e(atom) ≈ charge/(8π² a0 s²) at small s
    # (the valence-shell difference stays finite): checked at s = 0.01, where the Coulomb
    # term is ~ 240·|charge| Å and the finite part a few Å
    p = bare()
    s = np.array([0.01])
    diff = (p.scattering_factors([ion], s) - p.scattering_factors([neutral], s))[0, 0].real
    charge = parse_species(ion).charge
    coulomb = charge / (8 * np.pi**2 * A0 * s[0] ** 2)
    assert np.sign(diff) == sign
    assert diff == pytest.approx(coulomb, rel=0.03)


def test_ion_at_s_zero_raises_naming_it():
    p = get_probe("electron")
    with pytest.raises(InvalidInputError, match=r"'O2-'.*Coulomb term -2/\(8π² a0 s²\).*s = 0.*flat index 1.*aliases"):
        p.scattering_factors(["O", "O2-"], [0.3, 0.0])
    with pytest.raises(InvalidInputError, match=r"'Ob'.*Coulomb.*aliases=\{'Ob': 'O'\}"):
        ElectronProbe(aliases={"Ob": "O2-"}).scattering_factors(["Ob"], [0.0])
    # through scatter: a grid through q = 0 is refused, the same grid off the origin works
    m = km.Model([[0, 0, 0], [1.2, 0, 0]], ["Mg2+", "O2-"])
    with pytest.raises(InvalidInputError, match=r"'Mg2\+'.*Coulomb"):
        km.scatter(m, km.QGrid.line([0, 0, 0], [2, 0, 0], 5), probe="electron", method="exact")
    with pytest.warns(km.KinematicApproximationWarning):
        pat = km.scatter(m, km.QGrid.line([0.5, 0, 0], [2, 0, 0], 4), probe="electron", method="exact")
    assert np.all(np.isfinite(pat.intensity))


def test_s_range_of_mott_bethe():
    p = get_probe("electron")
    p.scattering_factors(["O"], [6.0])  # the WK fits' range, 0 <= s <= 6
    with pytest.raises(InvalidInputError, match=r"6.5 Å⁻¹.*Mott-Bethe.*0 <= s <= 6 Å⁻¹"):
        p.scattering_factors(["O"], [0.5, 6.5])


# --------------------------------------------------------------------------------------
# the Peng et al. (1996) alternative
# --------------------------------------------------------------------------------------
def test_peng_table_covers_h_to_cf_in_order():
    table = peng_table()
    zs = [z for z, _, _ in table.values()]
    assert zs == list(range(1, 99))  # Peng et al. (1996): all neutral atoms Z = 1-98
    for sym, (z, a, b) in table.items():
        assert parse_species(sym).z == z  # IUPAC atomic numbers
        assert a.shape == (5,) and b.shape == (5,) and np.all(b > 0)


def test_peng_carbon_coefficients_typo_check():
    # docs/references.md ("Electron scattering factors"): Peng (1996) carbon, a and b
    _, a, b = peng_table()["C"]
    np.testing.assert_array_equal(a, [0.0893, 0.2563, 0.7570, 1.0487, 0.3575])
    np.testing.assert_array_equal(b, [0.2465, 1.7100, 6.4094, 18.6113, 50.2523])


def test_peng_carbon_through_the_probe():
    # f_e(0) = Σ a_i = 2.5088 Å for the carbon row of docs/references.md (summed by hand),
    # and the probe's carbon row is within 1 % of the literal Mott–Bethe formula
    p = bare("peng1996")
    assert p.scattering_factors(["C"], [0.0])[0, 0].real == pytest.approx(2.5088, abs=1e-12)
    s = np.linspace(0.2, 1.5, 14)
    f = p.scattering_factors(["C"], s)[0].real
    np.testing.assert_allclose(f, literal_mott_bethe("C", s), rtol=0.01)


def test_peng_hydrogen_at_zero_is_a0():
    # exact 1s: f_e(0) = a0 = 0.529177 Å; Peng's H row (typed from memory) sums to 0.5288
    f0 = bare("peng1996").scattering_factors(["H"], [0.0])[0, 0].real
    assert f0 == pytest.approx(A0, rel=2e-3)


def test_peng_within_8_percent_of_mott_bethe_for_every_element():
    # the typo check of the typed table: every row against the literal Mott–Bethe formula
    # (periodictable's f_x); measured worst Rb 7.5 %, Cs 7.5 %, Ar 4.1 %; median 0.7 %
    s = np.linspace(0.2, 1.5, 131)
    worst = {sym: float(np.max(np.abs(peng_fe(sym, s) / literal_mott_bethe(sym, s) - 1.0)))
             for sym in peng_table()}
    bad = {k: v for k, v in worst.items() if v >= 0.08}
    assert not bad, bad
    assert np.median(list(worst.values())) < 0.01


def test_peng_and_mott_bethe_at_zero():
    # s → 0: Peng's Σa_i against the Mott–Bethe limit. The fits extrapolate differently to
    # s = 0 (different atomic calculations): measured worst 7.3 % (Mo), median 2.3 %
    syms = list(peng_table())
    mb = bare().scattering_factors(syms, [0.0])[:, 0].real
    pg = bare("peng1996").scattering_factors(syms, [0.0])[:, 0].real
    gaps = np.abs(pg / mb - 1.0)
    assert gaps.max() < 0.08 and np.median(gaps) < 0.03


def test_agreement_table_in_the_docs_matches_the_code():
    # docs/electron_factors.md lists, per element, max |f_Peng/f_MB − 1| on 0.2..1.5 Å⁻¹;
    # the numbers must be those of peng_agreement(), and those within 0.5 percentage points
    # of the literal formula (whose Z differs from the fit's electron count)
    text = (DOCS / "electron_factors.md").read_text(encoding="utf-8")
    rows = re.findall(r"\|\s*(\d+)\s*\|\s*([A-Z][a-z]?)\s*\|\s*([\d.]+)\s*\|\s*([\d.]+)\s*", text)
    listed = {sym: (float(dev), float(at)) for _, sym, dev, at in rows}
    assert len(listed) == 98
    computed = peng_agreement()
    s = np.linspace(0.2, 1.5, 131)
    for sym, (dev, at) in computed.items():
        assert listed[sym][0] == pytest.approx(100 * dev, abs=0.006), sym
        assert listed[sym][1] == pytest.approx(at, abs=0.006), sym
        lit = float(np.max(np.abs(peng_fe(sym, s) / literal_mott_bethe(sym, s) - 1.0)))
        assert 100 * dev == pytest.approx(100 * lit, abs=0.5), sym


def test_peng_metadata_keeps_the_memory_mark_and_ships_the_file():
    m = bare("peng1996").metadata()
    assert m["table"] == "peng1996"
    assert "Peng" in m["table_source"] and "A52" in m["table_source"] and "4.3.2.2" in m["table_source"]
    assert "typed from memory" in m["table_source"]
    from importlib import resources

    text = resources.files("kinemap.probes").joinpath("data").joinpath("peng1996_elastic_s2.txt").read_text()
    assert "Acta Cryst. A52 (1996)" in text.splitlines()[3]
    assert "from memory" in text
    assert all(isinstance(v, (str, int, float)) for v in m.values())


def test_peng_s_range():
    p = get_probe("electron", table="peng1996")
    p.scattering_factors(["O"], [2.0])  # the end of the range is allowed
    with pytest.raises(InvalidInputError, match=r"2.1 Å⁻¹.*Peng.*0 <= s <= 2 Å⁻¹"):
        p.scattering_factors(["O"], [0.5, 2.1])


# --------------------------------------------------------------------------------------
# the beam: γ and λ
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("kv, gamma, wavelength", [
    # γ = 1 + eV/(m0c²), m0c² = 510.99895 keV (CODATA 2018); 200 kV from docs/references.md.
    # λ = hc / sqrt(eV (2 m0c² + eV)); 2.508 pm at 200 kV, 1.969 pm at 300 kV (memory)
    (100.0, 1.195695, 0.0370144),
    (200.0, 1.391390, 0.0250793),
    (300.0, 1.587085, 0.0196875),
])
def test_gamma_and_wavelength(kv, gamma, wavelength):
    assert relativistic_gamma(kv) == pytest.approx(gamma, abs=1e-6)
    assert electron_wavelength(kv) == pytest.approx(wavelength, abs=2e-6)
    p = get_probe("electron", voltage_kv=kv)
    assert p.gamma == pytest.approx(gamma, abs=1e-6)
    m = p.metadata()
    assert m["voltage_kv"] == kv and m["gamma"] == pytest.approx(gamma, abs=1e-6)
    assert m["wavelength_angstrom"] == pytest.approx(wavelength, abs=2e-6)


@pytest.mark.parametrize("table", ["mott-bethe", "peng1996"])
def test_factors_include_gamma_by_default(table):
    s = np.array([0.0, 0.3, 1.0])
    p = get_probe("electron", voltage_kv=300, table=table)
    raw = ElectronProbe(voltage_kv=300, table=table, include_gamma=False)
    f = p.scattering_factors(["Si", "O"], s)
    g = raw.scattering_factors(["Si", "O"], s)
    np.testing.assert_allclose(f, 1.587085 * g, rtol=1e-6)  # γ(300 kV), CODATA 2018
    assert p.metadata()["gamma_applied"].startswith("yes")
    assert raw.metadata()["gamma_applied"].startswith("no")
    assert p.units == "angstrom" and p.name == "electron"


# --------------------------------------------------------------------------------------
# species, cautions, arguments
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("table", ["mott-bethe", "peng1996"])
def test_isotopes_scatter_like_their_element(table):
    # electrons see the electron cloud and the nuclear charge, not the mass
    p = get_probe("electron", table=table)
    np.testing.assert_array_equal(p.scattering_factors(["D"], [0.4]), p.scattering_factors(["H"], [0.4]))


def test_dynamical_caution():
    c = get_probe("electron").cautions()
    assert len(c) == 1 and "kinematic" in c[0] and "dynamical" in c[0]


@pytest.mark.parametrize("table, labels, match", [
    ("mott-bethe", ["Fe", "Fe4+"], r"'Fe4\+'.*no ion 'Fe4\+'.*Fe2\+, Fe3\+"),
    ("mott-bethe", ["Es"], r"'Es'.*Z = 99.*Mott-Bethe.*Z = 1-98"),
    ("peng1996", ["O2-"], r"'O2-'.*neutral atoms only.*ion O2-.*mott-bethe.*aliases=\{'O2-': 'O'\}"),
    ("peng1996", ["Fe", "Fe3+"], r"'Fe3\+'.*neutral atoms only"),
    ("peng1996", ["Es"], r"'Es'.*Es \(Z = 99\) is not in the Peng.*Z = 1-98"),
    ("mott-bethe", ["Si_t"], r"'Si_t'.*aliases"),
])
def test_unknown_species_and_ions_raise(table, labels, match):
    p = get_probe("electron", table=table)
    with pytest.raises(InvalidInputError, match=match):
        p.check_labels(labels)
    with pytest.raises(InvalidInputError, match=match):
        p.scattering_factors(labels, [0.2])


@pytest.mark.parametrize("kwargs, match", [
    ({"voltage_kv": 0.0}, "voltage_kv"),
    ({"voltage_kv": -200.0}, "voltage_kv"),
    ({"voltage_kv": float("nan")}, "voltage_kv"),
    ({"voltage_kv": "high"}, "voltage_kv"),
    ({"table": "peng"}, r"`table` must be one of 'mott-bethe', 'peng1996', got 'peng'"),
    ({"table": None}, "`table`"),
])
def test_bad_arguments(kwargs, match):
    with pytest.raises(InvalidInputError, match=match):
        ElectronProbe(**kwargs)


def test_aliases():
    p = ElectronProbe(aliases={"O_ion": "O", "Si_t": "Si"})
    np.testing.assert_array_equal(
        p.scattering_factors(["O_ion", "Si_t"], [0.3]), p.scattering_factors(["O", "Si"], [0.3])
    )


def test_mott_bethe_function_names_a_missing_key():
    with pytest.raises(InvalidInputError, match="'Xx' is not in the Waasmaier-Kirfel"):
        mott_bethe_fe("Xx", np.array([0.1]))
