"""The sign convention: q = k_f − k_i, A(q) = Σ f exp(+i q·r), f = f0 + f′ + i f″ with f″ ≥ 0.

This pair is the usual crystallographic one (docs/references.md, "Sign convention"); flipping
either the sign of the exponent or of f″ swaps Bijvoet pairs. Two atoms pin it: A at the
origin and B at x_B. With φ = q·x_B and factors that depend on |q| only,

    A(±q) = f_A + f_B exp(±iφ)
    I(±q) = |f_A|² + |f_B|² + 2 Re(f_A* f_B exp(±iφ))
    I(q) − I(−q) = 2 Re(f_A* f_B (e^{iφ} − e^{−iφ})) = 2 Re(2i sin φ · f_A* f_B)
                 = −4 sin φ · Im(f_A* f_B),

and with f_A real (f″_A = 0), Im(f_A* f_B) = f_A f″_B:

    I(q) − I(−q) = −4 f_A f″_B sin(q·x_B).

With the opposite exponent, or with f″ < 0, the right-hand side changes sign. The engine's
I(±q) is computed on the exact paths (points and a regular line grid) and the gridded path.
"""

from __future__ import annotations

import numpy as np
import pytest

import kinemap as km
from kinemap.probes import CustomProbe, NeutronProbe, XRayProbe

X_B = np.array([1.3, 0.4, -0.2])  # Å
F_A = 10.0  # electrons, real
F_B = 4.0 + 3.0j  # f′ = 4, f″ = 3 > 0


def two_atoms(a: str = "A", b: str = "B") -> km.Model:
    return km.Model([[0.0, 0.0, 0.0], X_B], [a, b])


def q_directions(n: int = 7) -> np.ndarray:
    rng = np.random.default_rng(0)
    q = rng.normal(size=(n, 3))
    q *= (rng.uniform(0.5, 4.0, size=n) / np.linalg.norm(q, axis=1))[:, None]
    # and one q with q·x_B = π/2 exactly, where I(q) < I(−q) by 4 f_A f″_B
    q[0] = X_B * (np.pi / 2) / np.dot(X_B, X_B)
    return q


def intensities_pm(model, probe, method, kind, q):
    """Engine I(q) and I(−q) for the rows of q, on points or on a line through the origin."""
    kw = dict(probe=probe, method=method, tol=1e-10)
    if kind == "points":
        pat = km.scatter(model, km.QGrid.points(np.vstack([q, -q])), **kw)
        assert pat.metadata["method"] == method
        return pat.intensity[: len(q)], pat.intensity[len(q):]
    # a line from −q to +q with an odd number of points: point k and point n−1−k are ±q_k
    plus, minus = [], []
    for qk in q:
        n = 41
        pat = km.scatter(model, km.QGrid.line(-qk, qk, n), **kw)
        assert pat.metadata["method"] == method
        plus.append(pat.intensity[-1])
        minus.append(pat.intensity[0])
    return np.array(plus), np.array(minus)


PATHS = [("exact", "points"), ("exact", "line"), ("gridded", "points"), ("gridded", "line")]


@pytest.mark.parametrize("method, kind", PATHS)
def test_custom_complex_factor(method, kind):
    probe = CustomProbe(constants={"A": F_A, "B": F_B}, units="electrons", source="sign test")
    q = q_directions()
    i_plus, i_minus = intensities_pm(two_atoms(), probe, method, kind, q)
    expect = -4.0 * F_A * F_B.imag * np.sin(q @ X_B)  # the algebra of the module notes
    tol = 1e-9 if method == "exact" else 1e-5
    np.testing.assert_allclose(i_plus - i_minus, expect, rtol=0, atol=tol * (abs(F_A) + abs(F_B)) ** 2)
    # q·x_B = π/2: I(q) = |f_A + i f_B|² = (f_A − f″_B)² + f′_B², I(−q) = (f_A + f″_B)² + f′_B²
    assert i_plus[0] == pytest.approx((F_A - F_B.imag) ** 2 + F_B.real**2, rel=1e-6)
    assert i_minus[0] == pytest.approx((F_A + F_B.imag) ** 2 + F_B.real**2, rel=1e-6)
    # the amplitude itself at q·x_B = π/2: f_A + f_B e^{iπ/2} = f_A + i f_B
    if method == "exact" and kind == "points":
        a = km.scatter(two_atoms(), km.QGrid.points(q[:1]), probe=probe, method="exact").amplitude[0]
        assert a == pytest.approx(F_A + 1j * F_B, rel=1e-12)


@pytest.mark.parametrize("method, kind", PATHS)
def test_xray_anomalous_iron(method, kind):
    # Fe at 8.048 keV is above its K edge (7.112 keV): f″ ≈ 3.2 (Henke, via periodictable);
    # O has f″ ≈ 0.03, so the general form −4 sin φ Im(f_A* f_B) is used
    import periodictable

    energy = 8.048
    probe = XRayProbe(energy_kev=energy)
    q = q_directions()
    s = np.linalg.norm(q, axis=1) / (4 * np.pi)
    f = probe.scattering_factors(["O", "Fe"], s)
    f_o, f_fe = f[0], f[1]
    # the tabulated convention: f″ = f2 of the Henke table, positive
    _, f2 = periodictable.Fe.xray.scattering_factors(energy=energy)
    assert f_fe.imag == pytest.approx(np.full(len(q), float(f2)), rel=1e-12) and f2 > 3.0
    i_plus, i_minus = intensities_pm(two_atoms("O", "Fe"), probe, method, kind, q)
    expect = -4.0 * np.sin(q @ X_B) * np.imag(np.conj(f_o) * f_fe)
    scale = float(np.max(np.abs(f_o) + np.abs(f_fe))) ** 2
    tol = 1e-9 if method == "exact" else 1e-5
    np.testing.assert_allclose(i_plus - i_minus, expect, rtol=0, atol=tol * scale)
    assert i_plus[0] < i_minus[0]  # q·x_B = π/2 with f″_Fe > 0


def test_neutron_absorption_follows_the_same_convention():
    # Tables print b = b′ − i b″ (b″ > 0 for absorption: 10B b″ = 1.066 fm, Sears 1992,
    # memory); the sum uses exp(+i q·r), so the factor is b′ + i b″, like f0 + f′ + i f″
    import periodictable

    b_table = complex(periodictable.elements.isotope("10-B").neutron.b_c_complex)
    assert -b_table.imag == pytest.approx(1.066, abs=0.01)
    b_ni = float(periodictable.Ni.neutron.b_c)  # real (no significant absorption term used)
    probe = NeutronProbe(lengths={"Ni": b_ni})
    q = q_directions()
    i_plus, i_minus = intensities_pm(two_atoms("Ni", "10B"), probe, "exact", "points", q)
    expect = -4.0 * b_ni * (-b_table.imag) * np.sin(q @ X_B)  # f″_B = b″ = −Im(b_table)
    np.testing.assert_allclose(i_plus - i_minus, expect, rtol=0, atol=1e-9 * 200)
    assert i_plus[0] < i_minus[0]


def test_real_factors_obey_friedel():
    # with f″ = 0 everywhere the difference vanishes: I(q) = I(−q) (Friedel's law)
    probe = CustomProbe(constants={"A": F_A, "B": F_B.real}, units="electrons")
    q = q_directions()
    for method, kind in PATHS:
        i_plus, i_minus = intensities_pm(two_atoms(), probe, method, kind, q)
        np.testing.assert_allclose(i_plus, i_minus, rtol=1e-5 if method == "gridded" else 1e-12)
