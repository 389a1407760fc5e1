"""CustomProbe: user Gaussian sums, sampled grids and constants.

References: periodictable's own Waasmaier–Kirfel evaluation (cromermann.fxrayatstol); the
analytic hydrogen 1s form factor f(s) = 1/(1 + (2π a0 s)²)²; the Fourier transform of a
Gaussian charge density integrated numerically with scipy.integrate.quad; the interpolation
error bound of linear interpolation and the exactness of cubic splines on cubics.
"""

from __future__ import annotations

import numpy as np
import pytest

from kinemap.errors import InvalidInputError
from kinemap.probes import CustomProbe, NeutronProbe, XRayProbe, get_probe

A0 = 0.529177210903  # Bohr radius, Å (CODATA 2018)


def hydrogen(s):
    return 1.0 / (1.0 + (2 * np.pi * A0 * s) ** 2) ** 2  # exact 1s form factor (analytic)


def test_gaussian_entry_reproduces_periodictable_wk():
    from periodictable import cromermann

    cmf = cromermann.getCMformula("Fe3+")
    p = CustomProbe(gaussians={"Fe_a": (cmf.a, cmf.b, cmf.c), "Fe_b": {"a": cmf.a, "b": cmf.b, "c": cmf.c}},
                    units="electrons", source="WK (1995) Fe3+")
    s = np.linspace(0, 2, 21)
    f = p.scattering_factors(["Fe_a", "Fe_b"], s)
    ref = cromermann.fxrayatstol("Fe3+", s)  # periodictable's own evaluation
    np.testing.assert_allclose(f.real, [ref, ref], rtol=1e-13)
    assert p.name == "custom" and p.units == "electrons"
    assert p.metadata()["table_source"] == "WK (1995) Fe3+"


def gaussian_density_form_factor(b: float, s: float) -> float:
    """Form factor of a unit charge spread as a 3-D Gaussian of variance σ² = b/(8π²) per
    axis, by numerical integration of f(q) = ∫ 4πr² ρ(r) sin(qr)/(qr) dr, q = 4πs."""
    from scipy.integrate import quad

    var = b / (8 * np.pi**2)
    q = 4 * np.pi * s

    def integrand(r):
        rho = (2 * np.pi * var) ** -1.5 * np.exp(-r * r / (2 * var))
        return 4 * np.pi * r * r * rho * np.sinc(q * r / np.pi)  # np.sinc(x) = sin(πx)/(πx)

    val, _ = quad(integrand, 0.0, 12 * np.sqrt(var), epsabs=1e-13, epsrel=1e-12)
    return val


def test_gaussian_without_constant_and_complex_amplitudes():
    # each term a·exp(−b s²) is the form factor of charge a in a Gaussian cloud of variance
    # b/(8π²) (the relation B = 8π²⟨u²⟩ of the Debye–Waller factor); complex a is linear
    p = CustomProbe(gaussians={"X": ([1.0 + 0.5j, 2.0], [1.0, 10.0])})
    s = np.array([0.0, 0.3, 0.7])
    f = p.scattering_factors(["X"], s)[0]
    expect = [(1.0 + 0.5j) * gaussian_density_form_factor(1.0, x) + 2.0 * gaussian_density_form_factor(10.0, x)
              for x in s]
    np.testing.assert_allclose(f, expect, rtol=1e-9)
    assert f[0] == pytest.approx(3.0 + 0.5j, rel=1e-15)  # f(0) = total charge Σ a_i


def test_grid_linear_and_cubic_interpolation_of_hydrogen():
    s_grid = np.linspace(0.0, 2.0, 81)
    lin = CustomProbe(grids={"H*": (s_grid, hydrogen(s_grid))})
    cub = CustomProbe(grids={"H*": (s_grid, hydrogen(s_grid))}, interpolation="cubic")
    s = np.linspace(0.0, 2.0, 1001)
    exact = hydrogen(s)
    err_lin = np.max(np.abs(lin.scattering_factors(["H*"], s)[0].real - exact))
    err_cub = np.max(np.abs(cub.scattering_factors(["H*"], s)[0].real - exact))
    # linear interpolation error <= h²/8 max|f''| (h = 0.025); for f = (1 + c s²)^-2,
    # c = (2π a0)², max|f''| = |f''(0)| = 4c
    c = (2 * np.pi * A0) ** 2
    assert err_lin <= 0.025**2 / 8 * 4 * c
    assert err_cub < err_lin / 10
    # at the nodes both reproduce the samples exactly
    np.testing.assert_allclose(lin.scattering_factors(["H*"], s_grid)[0].real, hydrogen(s_grid), rtol=1e-15)
    np.testing.assert_allclose(cub.scattering_factors(["H*"], s_grid)[0].real, hydrogen(s_grid), rtol=1e-14)


@pytest.mark.parametrize("s0, poly, exact", [
    # a cubic spline with the end conditions used (f′(0) = 0 at a grid that starts at s = 0,
    # not-a-knot elsewhere) reproduces every cubic that satisfies them exactly (spline theory)
    (0.0, [1.0, 0.0, 2.0, -0.7], True),     # p′(0) = 0
    (0.1, [1.0, -1.0, 0.0, 3.0], True),     # grid off s = 0: not-a-knot at both ends
    # …and cannot follow one with p′(0) ≠ 0 from s = 0: the even-in-s condition is imposed
    (0.0, [1.0, 1.0, 0.0, 0.0], False),
])
def test_cubic_interpolation_end_conditions(s0, poly, exact):
    s_grid = np.linspace(s0, 2.0, 9)
    p = np.polynomial.Polynomial(poly)
    probe = CustomProbe(grids={"P": (s_grid, p(s_grid))}, interpolation="cubic")
    s = np.linspace(s0, 2.0, 201)
    err = np.max(np.abs(probe.scattering_factors(["P"], s)[0].real - p(s)))
    if exact:
        assert err < 1e-12
    else:
        assert err > 1e-3


def test_grid_complex_values_and_range():
    p = CustomProbe(grids={"A": ([0.0, 1.0], [2.0 + 1.0j, 0.0 + 3.0j])})
    f = p.scattering_factors(["A"], [0.5])[0, 0]
    assert f == pytest.approx(1.0 + 2.0j)  # linear interpolation by hand
    with pytest.raises(InvalidInputError, match=r"1.2 Å⁻¹ is outside the sampled range.*'A'.*0 <= s <= 1"):
        p.scattering_factors(["A"], [0.2, 1.2])


def test_constants_and_fallback():
    xr = XRayProbe()
    p = CustomProbe(constants={"Vac": 0.0, "M": 12.5}, fallback=xr)
    s = np.array([0.0, 0.4])
    f = p.scattering_factors(["Fe", "Vac", "O2-", "M"], s)
    np.testing.assert_array_equal(f[[0, 2]], xr.scattering_factors(["Fe", "O2-"], s))
    np.testing.assert_array_equal(f[1], [0, 0])
    np.testing.assert_array_equal(f[3], [12.5, 12.5])
    assert p.units == "electrons"
    m = p.metadata()
    assert m["custom_labels"] == "M, Vac" and "Waasmaier" in m["fallback_table_source"]
    e = CustomProbe(constants={"Vac": 0.0}, fallback=get_probe("electron"))
    assert e.cautions() == get_probe("electron").cautions()


def test_unknown_label_names_available():
    p = CustomProbe(constants={"A": 1.0, "B": 2.0})
    with pytest.raises(InvalidInputError, match=r"'C' has no entry in the custom table; labels available: A, B"):
        p.check_labels(["A", "C"])
    with pytest.raises(InvalidInputError, match=r"'C'"):
        p.scattering_factors(["C"], [0.0])
    q = CustomProbe(constants={"A": 1.0}, fallback=NeutronProbe())
    with pytest.raises(InvalidInputError, match=r"'Po'"):
        q.check_labels(["A", "Po"])


@pytest.mark.parametrize("kwargs, match", [
    ({}, "at least one table entry"),
    ({"gaussians": {"A": ([1, 2], [1])}}, r"`gaussians`\['A'\].*same nonzero length"),
    ({"gaussians": {"A": ([1], [1], 0, 9)}}, r"`gaussians`\['A'\].*4 items"),
    ({"gaussians": {"A": {"a": [1]}}}, r"keys 'a' and 'b'"),
    ({"gaussians": {"A": ([1], [-5.0])}}, r"b\[0\] = -5.0"),
    ({"grids": {"A": ([0, 1, 1], [1, 2, 3])}}, "strictly increasing"),
    ({"grids": {"A": ([0, 1], [1])}}, "same length"),
    ({"grids": {"A": 3}}, "pair"),
    ({"constants": {"A": "x"}}, r"`constants`\['A'\]"),
    ({"constants": {"A": np.nan}}, "not finite"),
    ({"constants": {"A": 1}, "gaussians": {"A": ([1], [1])}}, "both"),
    ({"constants": {"A": 1}, "fallback": "xray"}, "Probe instance"),
    ({"constants": {"A": 1}, "fallback": XRayProbe(), "units": "fm"}, "differs from the fallback"),
    ({"constants": {"A": 1}, "interpolation": "spline"}, "interpolation"),
    ({"constants": {3: 1}}, "keys must be labels"),
])
def test_bad_tables_raise(kwargs, match):
    with pytest.raises(InvalidInputError, match=match):
        CustomProbe(**kwargs)
