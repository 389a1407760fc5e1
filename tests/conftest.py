"""Shared helpers of the test suite."""

import numpy as np
import pytest


def numpy_amplitude(positions, q, weights):
    """Independent NumPy direct sum A(q_m) = Σ_j w_jm exp(i q_m·r_j).

    `weights` is (M, N): the full per-pair weight o_j f_j(s_m) T_j(s_m). This is the textbook
    formula evaluated with NumPy's complex exponential, the reference of the engine tests.
    """
    phase = np.asarray(q) @ np.asarray(positions).T
    return (np.asarray(weights) * np.exp(1j * phase)).sum(axis=1)


@pytest.fixture
def rng():
    return np.random.default_rng(0)
