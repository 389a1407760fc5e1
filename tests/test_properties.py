"""Invariants of the kinematic sum, checked on random models with hypothesis.

Outside references (the definition A(q) = Σ_j f_j exp(+i q·r_j), any diffraction text, e.g.
Warren, "X-ray Diffraction", ch. 4 — from memory):
* translation r → r + d multiplies A by exp(i q·d), so |A|² does not change;
* for real scattering factors, A(−q) = conj A(q) (Friedel's law), so I(q) = I(−q);
* the sum does not depend on the order of the atoms;
* splitting the atoms into chunks, or the work over threads, changes nothing but rounding
  (the engine promises bit-identical results over thread counts).
"""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import kinemap as km

SETTINGS = settings(max_examples=25, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow])  # seeded: the same cases on every run

coords = st.floats(-30, 30, allow_nan=False, allow_infinity=False)
positions = st.integers(1, 40).flatmap(lambda n: arrays(np.float64, (n, 3), elements=coords))
qs = arrays(np.float64, (6, 3), elements=st.floats(-4, 4, allow_nan=False, allow_infinity=False))
species = st.sampled_from(["C", "Fe", "O"])


def model_of(pos, labels, b=None):
    n = len(pos)
    sp = [labels[i % len(labels)] for i in range(n)]
    return km.Model(pos, sp, b_iso=None if b is None else np.full(n, b))


def scale(a):
    return max(float(np.abs(a).max()), 1e-300)


@SETTINGS
@given(pos=positions, q=qs, shift=arrays(np.float64, 3, elements=coords), labels=st.lists(species, min_size=1,
                                                                                            max_size=3))
def test_translation_changes_only_the_phase(pos, q, shift, labels):
    m = model_of(pos, labels)
    grid = km.QGrid.points(q)
    a = km.scatter(m, grid, method="exact").amplitude
    b = km.scatter(m.translated(shift), grid, method="exact").amplitude
    np.testing.assert_allclose(b, a * np.exp(1j * (q @ shift)), rtol=0, atol=1e-11 * scale(a))
    np.testing.assert_allclose(np.abs(b) ** 2, np.abs(a) ** 2, rtol=0, atol=1e-10 * scale(a) ** 2)


@SETTINGS
@given(pos=positions, q=qs, labels=st.lists(species, min_size=1, max_size=3), b=st.floats(0, 3))
def test_friedel_law_for_real_factors(pos, q, labels, b):
    m = model_of(pos, labels, b)
    a = km.scatter(m, km.QGrid.points(q), method="exact").amplitude
    a_minus = km.scatter(m, km.QGrid.points(-q), method="exact").amplitude
    np.testing.assert_allclose(a_minus, np.conj(a), rtol=0, atol=1e-11 * scale(a))


@SETTINGS
@given(pos=positions, q=qs, labels=st.lists(species, min_size=1, max_size=3), seed=st.integers(0, 2**32 - 1))
def test_order_of_atoms_does_not_matter(pos, q, labels, seed):
    m = model_of(pos, labels)
    perm = np.random.default_rng(seed).permutation(len(pos))
    grid = km.QGrid.points(q)
    a = km.scatter(m, grid, method="exact").amplitude
    b = km.scatter(m.subset(perm), grid, method="exact").amplitude
    np.testing.assert_allclose(b, a, rtol=0, atol=1e-12 * scale(a) * len(pos))


@SETTINGS
@given(pos=positions, chunk=st.integers(1, 17), labels=st.lists(species, min_size=1, max_size=3))
def test_threads_and_chunks(pos, chunk, labels):
    m = model_of(pos, labels, 0.5)
    line = km.QGrid.line([-3, 0.2, 0.1], [3, -0.4, 0.9], 37)
    pts = km.QGrid.points(line.q_vectors())
    for grid in (line, pts):
        one = km.scatter(m, grid, method="exact", threads=1).amplitude
        two = km.scatter(m, grid, method="exact", threads=2).amplitude
        np.testing.assert_array_equal(one, two)  # each q summed by one thread, in a fixed order
        chunked = km.scatter(m, grid, method="exact", chunk_atoms=chunk).amplitude
        np.testing.assert_allclose(chunked, one, rtol=0, atol=1e-12 * scale(one) * len(pos))
