"""Analytic transforms of quasicrystal models against kinemap's exact engine.

References (docs/references.md, section Quasicrystals): the per-point amplitude of a
model set at a Fourier-module vector tends to the window transform (Baake & Grimm,
"Aperiodic Order" vol. 1, CUP 2013); Fibonacci check values 0.701998, 0.335745, 0.878991,
(2,1) extinct; the substitution recursion G_{n+1} = G_n + e^{iqℓ_n} G_{n−1}; Debye–Waller
T = exp(−B s²), B = 8π²⟨u²⟩ (ITC Vol. C §8.1).

Patch-size tolerances: a sharp patch of radius R differs from the limit by its boundary
layer, a fraction ≈ d·a/R of the points (a = edge). We use half of that, d·a/(2R), which
the measured errors stay below by a factor of 2–10; Fibonacci chains cut at a Fibonacci
number converge exponentially, at other lengths within about 1/N (docs/references.md).
"""

from __future__ import annotations

import cmath
import decimal
import math
from decimal import Decimal

import numpy as np
import pytest

import kinemap as km
import kinemap.quasi as kq
from kinemap.quasi.windows import PolygonWindow, PolyhedronWindow, exp_divided_differences

TAU = (1 + math.sqrt(5)) / 2


def direct_sum(positions, q):
    """NumPy reference: A(q) = Σ_j exp(i q·r_j)."""
    return np.exp(1j * (np.asarray(q) @ np.asarray(positions).T)).sum(axis=1)


def engine(positions_or_model, q, occupancy=None):
    model = positions_or_model if isinstance(positions_or_model, km.Model) else km.Model(
        positions_or_model, "A", occupancy=occupancy)
    return km.scatter(model, km.QGrid.points(q), probe="unit").amplitude


# --------------------------------------------------------------------------- window maths
def test_fibonacci_check_values():
    # docs/references.md, Quasicrystals: |A| at (h, h') = (0,1), (1,0), (1,1); (2,1) is k = τ and extinct
    amp = np.abs(kq.fibonacci().amplitude([[0, 1], [1, 0], [1, 1], [2, 1]]))
    np.testing.assert_allclose(amp[:3], [0.701998, 0.335745, 0.878991], atol=5e-7)
    assert amp[3] < 1e-15
    mv = kq.fibonacci().module([[0, 1], [2, 1]])
    assert mv.k_par[0, 0] == pytest.approx(TAU / math.sqrt(5), rel=1e-14)  # k = (h + h'τ)/√5
    assert mv.k_perp[0, 0] == pytest.approx(1 / (TAU * math.sqrt(5)), rel=1e-14)  # k* = (h'/τ − h)/√5
    assert mv.k_par[1, 0] == pytest.approx(TAU, rel=1e-14)


def test_divided_differences_against_scipy_expm():
    from scipy.linalg import expm

    rng = np.random.default_rng(0)
    nodes = [rng.normal(size=4) * 3j, np.array([0.7j, 0.7j, 0.7j, -2j]), np.zeros(4, complex),
             np.array([5j, 5j + 1e-9j, -4j, 3j]), rng.normal(size=3) * 20j]
    for t in nodes:
        k = len(t)
        j = np.diag(t) + np.diag(np.ones(k - 1), 1)  # Opitz: E[t] = exp(J)[0, -1]
        ref = expm(j)[0, -1]
        got = exp_divided_differences(t[None, :])[0]
        assert abs(got - ref) <= 1e-12 * max(1.0, abs(ref))
    # coincident nodes: e^t / n!
    assert exp_divided_differences(np.full((1, 4), 0.3j))[0] == pytest.approx(np.exp(0.3j) / 6, abs=1e-15)


def test_polygon_and_polyhedron_transforms_against_analytic_boxes():
    rng = np.random.default_rng(1)
    k2 = np.vstack([rng.normal(size=(20, 2)), [[0, 0], [1e-9, 0], [1, 0], [0, 2]]])
    square = PolygonWindow([[0, 0], [2, 0], [2, 1], [0, 1]])  # [0,2]×[0,1]
    ref = (2 * np.sinc(2 * k2[:, 0]) * np.exp(-2j * np.pi * k2[:, 0])
           * np.sinc(k2[:, 1]) * np.exp(-1j * np.pi * k2[:, 1])) / 2
    np.testing.assert_allclose(square.transform(k2), ref, atol=1e-13)
    k3 = np.vstack([rng.normal(size=(20, 3)), [[0, 0, 0], [1, 1, 1], [0.5, 0, 0]]])
    cube = PolyhedronWindow.zonotope(np.eye(3))
    np.testing.assert_allclose(cube.transform(k3), np.prod(np.sinc(k3), axis=1), atol=1e-13)


def test_octagon_transform_against_quadrature_and_divergence_theorem():
    from scipy import integrate

    w = kq.octagonal().window
    v = w.vertices
    k = np.array([[0.31, 0.17], [0.7, -0.2]])
    # scipy: integrate exp(−2πi k·y) over the octagon, as x-slices between its chains
    xs = np.sort(np.unique(np.round(v[:, 0], 12)))

    def y_range(x):
        ys = []
        for a, b in zip(v, np.roll(v, -1, axis=0)):
            if (a[0] - x) * (b[0] - x) <= 0 and a[0] != b[0]:
                ys.append(a[1] + (b[1] - a[1]) * (x - a[0]) / (b[0] - a[0]))
        return min(ys), max(ys)

    for kk in k:
        re = integrate.dblquad(lambda y, x: math.cos(2 * math.pi * (kk[0] * x + kk[1] * y)), xs[0], xs[-1],
                               lambda x: y_range(x)[0], lambda x: y_range(x)[1], epsabs=1e-11)[0]
        im = integrate.dblquad(lambda y, x: -math.sin(2 * math.pi * (kk[0] * x + kk[1] * y)), xs[0], xs[-1],
                               lambda x: y_range(x)[0], lambda x: y_range(x)[1], epsabs=1e-11)[0]
        assert w.integral(kk[None, :])[0] == pytest.approx(complex(re, im), abs=1e-8)
    # divergence theorem (sum over edges) gives the same numbers
    kr = np.random.default_rng(2).normal(size=(30, 2))
    np.testing.assert_allclose(w.integral(kr), w.integral_by_edges(kr), atol=1e-12)


def test_triacontahedron_transform_is_stable_at_symmetric_peaks():
    w = kq.icosahedral().window
    rng = np.random.default_rng(3)
    generic = rng.normal(size=(20, 3)) * 0.7
    # tetrahedra vs faces (divergence theorem): two independent decompositions
    np.testing.assert_allclose(w.integral(generic), w.integral_by_faces(generic), atol=1e-11)
    # along 5-, 3- and 2-fold axes many divided-difference nodes coincide; the transform is
    # continuous there: compare with a nearby generic point (first order in the offset)
    axes = np.array([[0, 1, TAU], [1, 1, 1], [1, 0, 0], [TAU, 1 / TAU, 1]], dtype=float)
    for ax in axes:
        for s in (0.1, 0.37, 1.3):
            kk = s * ax / np.linalg.norm(ax)
            t0 = w.transform(kk)
            t1 = w.transform(kk + 1e-7 * np.array([0.31, -0.52, 0.77]))
            assert np.isfinite(t0) and abs(t0 - t1) < 1e-6
            assert abs(t0.imag) < 1e-12  # centrally symmetric window: real transform
    assert w.transform(np.zeros(3)) == pytest.approx(1.0, abs=1e-14)


def test_phason_shift_multiplies_by_phase():
    sch = kq.octagonal()
    s = np.array([0.21, -0.13])
    h = sch.module_vectors(q_max=8.0, kperp_max=0.6).indices[:20]
    m = sch.module(h)
    np.testing.assert_allclose(sch.with_shift(s).amplitude(h),
                               sch.amplitude(h) * np.exp(-2j * np.pi * m.k_perp @ s), atol=1e-13)


# --------------------------------------------------------------------------- engine vs theory
def test_engine_agrees_with_numpy_reference_on_a_tiling():
    ps = kq.penrose(shift=(0.05, 0.1)).points(8.0)
    q = kq.penrose().module([[1, 0, 0, 0, 0], [1, 1, 0, 0, 0], [2, 0, -1, 0, 1]]).q
    np.testing.assert_allclose(engine(ps.positions, q), direct_sum(ps.positions, q), rtol=1e-12, atol=1e-10)


@pytest.mark.parametrize("n", [6765, 10946, 5000, 12345])
def test_fibonacci_chain_amplitudes(n):
    ch = kq.fibonacci()
    h = [[0, 1], [1, 0], [1, 1], [1, 2], [2, 3], [-1, 1], [2, 1], [4, 2]]
    ps = ch.chain_points(0, n)
    a = engine(ps.positions, ch.module(h).q) / n
    t = ch.amplitude(h)
    # docs/references.md: an arbitrary length converges within about 1/N ...
    np.testing.assert_allclose(a, t, rtol=0, atol=3.0 / n)
    if n in (6765, 10946):
        # ... a chain cut at a Fibonacci number (F_20, F_21) exponentially (magnitudes; the
        # phase keeps an O(1/N) offset from where the cut starts)
        np.testing.assert_allclose(np.abs(a), np.abs(t), rtol=0, atol=1e-6)
    # (2,1) and (4,2) are extinct (window transform zero)
    assert np.abs(a[-2:]).max() < (1e-6 if n in (6765, 10946) else 3.0 / n)


@pytest.mark.parametrize("m", [2, 3])
def test_metallic_chain_amplitudes_and_extinctions(m):
    ch = kq.metallic_chain(m)
    hh = np.array([(h, hp) for h in range(-8, 9) for hp in range(-3, 4)])
    t_all = ch.amplitude(hh)
    ext = hh[np.abs(t_all) < 1e-12]
    ext = ext[np.abs(ch.module(ext).q[:, 0]) > 0]
    assert len(ext) >= 2
    # zeros of sinc(π(1 + 1/λ) k⊥): (1 + 1/λ)k⊥ an integer ≠ 0
    lam = ch.lam
    kp = ch.module(ext).k_perp[:, 0]
    np.testing.assert_allclose((1 + 1 / lam) * kp, np.round((1 + 1 / lam) * kp), atol=1e-12)
    strong = hh[np.argsort(-np.abs(t_all))[1:8]]
    n = ch.n_tiles(8 if m == 2 else 6)
    ps = ch.substitution_points(8 if m == 2 else 6)
    assert len(ps) == n
    hh = np.vstack([strong, ext[:2]])
    a = engine(ps.positions, ch.module(hh).q) / n
    t = ch.amplitude(hh)
    np.testing.assert_allclose(a, t, rtol=0, atol=3.0 / n)  # about 1/N, as for Fibonacci
    # substitution words converge much faster in magnitude
    np.testing.assert_allclose(np.abs(a[:-2]), np.abs(t[:-2]), rtol=0, atol=3e-3 / n)
    assert np.abs(a[-2:]).max() < 3e-2 / n


@pytest.mark.parametrize("make, radius", [
    (lambda: kq.octagonal(), 40.0),
    (lambda: kq.penrose(shift=(0.1, 0.05)), 40.0),
    (lambda: kq.icosahedral(), 13.0),
])
def test_engine_amplitudes_match_window_transforms(make, radius):
    sch = make()
    mv = sch.module_vectors(q_max=4 * np.pi, kperp_max=1.0, min_intensity=0.01)
    h = mv.indices[:40]
    m = sch.module(h)
    ps = sch.points(radius)
    n = len(ps)
    a = engine(ps.to_model(), m.q) / n
    # exact identity for any patch: exp(2πi k·x) = exp(−2πi k⊥·y) (k·x + k⊥·y ∈ Z),
    # which checks the module vectors, their perpendicular parts and the level phases
    ident = np.exp(-2j * np.pi * ps.perp @ m.k_perp.T).sum(axis=0) / n
    np.testing.assert_allclose(a, ident, rtol=0, atol=1e-11)
    # the limit: window transform, within the boundary-layer tolerance d·a/(2R)
    tol = sch.dim * sch.edge_length / (2 * radius)
    np.testing.assert_allclose(a, sch.amplitude(h), rtol=0, atol=tol)
    # and not trivially: the strongest peaks carry amplitudes far above the tolerance
    assert np.abs(sch.amplitude(h[1:10])).min() > 3 * tol


@pytest.mark.parametrize("make, radius, h_weak", [
    # weakest window-transform values among small module vectors (found by search)
    (lambda: kq.penrose(shift=(0.1, 0.05)), 40.0, [-1, -1, 1, -2, 1]),
    (lambda: kq.icosahedral(), 18.0, [-1, 1, -1, -1, 2, 0]),
    (lambda: kq.octagonal(), 40.0, [1, 2, 0, -4]),
])
def test_near_extinctions_in_two_and_three_dimensions(make, radius, h_weak):
    sch = make()
    t = abs(sch.amplitude([h_weak])[0])
    assert t < 2e-4  # the window transform nearly vanishes here
    ps = sch.points(radius)
    r = np.linalg.norm(ps.positions, axis=1)
    # a smoothly tapered patch (Hann weights as occupancies) removes most of the sharp
    # boundary's leakage, so the extinction shows well below the sharp-patch tolerance
    w = np.cos(np.pi * r / (2 * radius)) ** 2
    q = sch.module([h_weak]).q
    a = engine(km.Model(ps.positions, "A", occupancy=w), q)[0] / w.sum()
    assert abs(a) < 2e-3
    a_sharp = engine(ps.positions, q)[0] / len(ps)
    assert abs(a_sharp) < sch.dim / (2 * radius)


def test_approximant_amplitudes_converge_to_quasicrystal():
    ch = kq.fibonacci()
    h = [[0, 1], [1, 0], [1, 1]]
    errs = []
    for p, q in [(3, 2), (8, 5), (21, 13)]:
        ap = ch.approximant((p, q))
        uc = ap.unit_cell()
        a = engine(uc.positions, ap.module(h).q) / len(uc)
        errs.append(np.abs(np.abs(a) - [0.701998, 0.335745, 0.878991]).max())  # docs/references.md
    assert errs[0] > errs[1] > errs[2] and errs[2] < 1e-3
    # an approximant is periodic: a block of M cells gives M × the cell's amplitude at its
    # reciprocal-lattice points (Laue condition, docs/references.md, Crystals)
    ap = kq.octagonal().approximant((3, 2))
    uc = ap.unit_cell()
    block = ap.approximant_block([3, 2])
    recip = np.linalg.inv(ap.cell()).T
    g = np.array([[1, 0], [1, 1], [2, -1]]) @ recip * 2 * np.pi
    qg = np.column_stack([g, np.zeros(3)])
    np.testing.assert_allclose(engine(block.positions, qg), 6 * engine(uc.positions, qg), rtol=1e-10, atol=1e-8)


# --------------------------------------------------------------------------- disorder
def test_phonon_disorder_gives_debye_waller_factor():
    sch = kq.octagonal()
    h = sch.module_vectors(q_max=10.0, kperp_max=0.6, min_intensity=0.05).indices[1:25]
    m = sch.module(h)
    ps = sch.points(60.0)
    n = len(ps)
    a0 = engine(ps.positions, m.q) / n
    u = 0.1
    a = engine(kq.phonon_displacements(ps, u, seed=3), m.q) / n
    # ITC Vol. C §8.1: T = exp(−B s²), B = 8π²⟨u²⟩, s = |q|/4π  →  exp(−q²⟨u²⟩/2)
    s = np.linalg.norm(m.q, axis=1) / (4 * np.pi)
    dw = np.exp(-8 * np.pi ** 2 * u * u * s * s)
    tol = 3 / np.sqrt(n)  # random part of a sum of n unit phasors
    np.testing.assert_allclose(a, a0 * dw, rtol=0, atol=tol)
    assert np.abs(a - a0).max() > 4 * tol  # the reduction is clearly seen


def test_phason_disorder_gives_perpendicular_debye_waller_factor():
    sch = kq.octagonal()
    h = sch.module_vectors(q_max=10.0, kperp_max=0.6, min_intensity=0.05).indices[1:25]
    m = sch.module(h)
    sigma = 0.4
    ps = kq.phason_jitter_points(sch, 60.0, sigma, seed=5)
    n = len(ps)
    a = engine(ps.positions, m.q) / n
    dw = kq.phason_debye_waller(m.k_perp, sigma)  # exp(−2π²σ²|k⊥|²): window ⊛ Gaussian
    tol = 3 / np.sqrt(n) + 2 / (2 * 60.0)
    np.testing.assert_allclose(a, sch.amplitude(h) * dw, rtol=0, atol=tol)
    assert np.abs(a - sch.amplitude(h)).max() > 2 * tol
    # tiles flip but the density is kept on average
    assert len(ps) == pytest.approx(sch.density * math.pi * 60.0 ** 2, rel=0.02)


# --------------------------------------------------------------------------- recursion
def test_recursion_against_direct_sum_generation_25():
    ch = kq.fibonacci()
    g = 25
    ps = ch.substitution_points(g)
    n = len(ps)
    assert n == ch.n_tiles(g) == 196418  # F_27
    q = np.array([0.3, 1.7, 2 * np.pi * TAU / math.sqrt(5), 5.123, 11.9])
    rec = ch.transform(q, g)
    q3 = np.column_stack([q, np.zeros((len(q), 2))])
    ref = engine(ps.positions, q3)
    ref_np = direct_sum(ps.positions, q3)
    # the direct sums round q·x (up to ~2e6 rad) to ~2e-10 rad per term
    bound = n * np.abs(q).max() * ps.positions[:, 0].max() * 2.3e-16 * 4
    assert np.abs(rec - ref).max() < bound
    assert np.abs(rec - ref_np).max() < bound
    # generation −1 … 2 by hand: G_0 = 1, G_1 = 1 + e^{iqL} (docs/references.md)
    np.testing.assert_allclose(ch.transform(q, 1), 1 + np.exp(1j * q * TAU), atol=1e-15)
    np.testing.assert_allclose(ch.transform(q, 2), 1 + np.exp(1j * q * TAU) + np.exp(1j * q * (TAU + 1)), atol=1e-14)


@pytest.mark.parametrize("m", [2, 3])
def test_metallic_recursion_against_direct_sum(m):
    ch = kq.metallic_chain(m, short=1.3)
    g = 7 if m == 2 else 5
    ps = ch.substitution_points(g)
    q = np.array([0.2, 1.1, 2.9, 7.7])
    np.testing.assert_allclose(ch.transform(q, g), direct_sum(ps.positions[:, :1], q[:, None]), rtol=0,
                               atol=1e-9 * len(ps))


def _pi_decimal():
    # π by the series recipe of the Python decimal documentation (independent of the package)
    decimal.getcontext().prec += 2
    three = Decimal(3)
    lasts, t, s, n, na, d, da = 0, three, 3, 1, 0, 0, 24
    while s != lasts:
        lasts = s
        n, na = n + na, na + 8
        d, da = d + da, da + 32
        t = (t * n) / d
        s += t
    decimal.getcontext().prec -= 2
    return +s


def test_generation_60_without_building_the_chain():
    """G_60 (4·10¹² tiles) near the (0,1), (1,0), (1,1) peaks against theory.

    For q = 2π(k₀ + δ) near a module vector k₀, G_n/N → A(k₀)·(e^{2πiθ} − 1)/(2πiθ) with
    θ = δ·ℓ_n (the finite chain's peak profile; the error is of order log N/N). δ is the
    exact offset of the double-precision q from k₀, computed with 50-digit decimals, for
    the chain as built (L is the double nearest τ).
    """
    ch = kq.fibonacci()
    with decimal.localcontext() as ctx:
        ctx.prec = 50
        pi = _pi_decimal()
        tau = (1 + Decimal(5).sqrt()) / 2
        big_l = Decimal(ch.long)
        n_s, n_l = ch.tile_counts(60)
        n = n_s + n_l
        assert n > 4e12
        ell = n_s + n_l * big_l
        for h, hp in [(0, 1), (1, 0), (1, 1)]:
            h_s, h_l = hp, h + hp  # lattice steps S, L (docs/references.md indices (h, h'))
            den = big_l + 1 / tau
            k0 = (h_s / tau + h_l) / den
            kp = (h_s * big_l - h_l) / den
            for frac in ("0", "0.3", "-0.45"):
                q = float(2 * pi * (k0 + Decimal(frac) / ell))
                theta = float((Decimal(q) / (2 * pi) - k0) * ell)
                width = 1 + 1 / tau
                center = (1 / tau - 1) / 2
                x = float(pi * kp * width)
                a0 = cmath.exp(-2j * float(pi) * float(kp * center)) * math.sin(x) / x
                prof = (cmath.exp(2j * math.pi * theta) - 1) / (2j * math.pi * theta) if theta else 1.0
                got = ch.transform(np.array([q]), 60)[0] / n
                assert abs(got - a0 * prof) < 1e-9
