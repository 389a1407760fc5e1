"""Scale, background and agreement factors on plain arrays (kinemap.compare.agreement).

References: the definitions of DESIGN.md ("Measured maps and the comparison with a model"),
worked by hand on small examples; weighted least squares checked against
numpy.linalg.lstsq on the explicitly weighted system; statistics of Gaussian noise
(E|x| = sqrt(2/π)σ, χ²_ν → 1 with standard deviation sqrt(2/ν)).
"""

import importlib
import math

import numpy as np
import pytest

from kinemap.compare import agreement
from kinemap.errors import InvalidInputError

OBS = np.array([2.0, 4.0, 6.0, 8.0, 11.0])
CALC = np.array([1.0, 2.0, 3.0, 4.0, 5.0])


def test_five_points_by_hand_unweighted():
    # s = Σ o c / Σ c² = 115/55 = 23/11 (least squares through the origin, no background);
    # residuals o − 23c/11 = (−1, −2, −3, −4, 6)/11, so Σ|r| = 16/11 and, by hand,
    # R = 16/(11·31) = 16/341 and wR = sqrt((66/121)/241).
    a = agreement(OBS, CALC, background="none")
    assert a.scale == pytest.approx(23 / 11, rel=1e-14)
    assert a.r_factor == pytest.approx(16 / 341, rel=1e-13)
    assert a.wr_factor == pytest.approx(math.sqrt(66 / 121 / 241), rel=1e-13)
    assert math.isnan(a.chi2) and math.isnan(a.r_exp)  # no σ: NaN, as DESIGN.md requires
    assert math.isnan(a.r_factor_bg)  # no background fitted
    assert a.n_points == 5 and a.n_params == 1


def test_five_points_by_hand_weighted():
    # σ = (1, 1, 1, 1, 2) → w = (1, 1, 1, 1, 1/4): s = Σ w o c / Σ w c² = 73.75/36.25 = 59/29;
    # residuals (−1, −2, −3, −4, 24)/29; χ²_ν = (1+4+9+16 + 576/4)/841/(5 − 1) = 174/3364;
    # R_exp = sqrt(2/π)·Σσ/Σ|o| = sqrt(2/π)·6/31.
    sig = np.array([1.0, 1, 1, 1, 2])
    a = agreement(OBS, CALC, sig, background="none")
    assert a.scale == pytest.approx(59 / 29, rel=1e-14)
    assert a.chi2 == pytest.approx(174 / 3364, rel=1e-13)
    assert a.r_exp == pytest.approx(math.sqrt(2 / math.pi) * 6 / 31, rel=1e-13)
    assert a.r_factor == pytest.approx(34 / 29 / 31, rel=1e-13)  # Σ|r| = 34/29
    # by hand: Σ w r² = 174/841, Σ w o² = 4+16+36+64+121/4 = 150.25
    assert a.wr_factor == pytest.approx(math.sqrt(174 / 841 / 150.25), rel=1e-13)


def test_fixed_scale_and_flat_background_by_hand():
    # s fixed at 2: o − 2c = (0, 0, 0, 0, 1); the flat background is their mean 0.2;
    # residuals (−.2, −.2, −.2, −.2, .8): R = 1.6/31, R_b = 1.6/Σ|o − 0.2| = 1.6/30.
    a = agreement(OBS, CALC, scale=2.0, background="flat")
    assert a.background[0] == pytest.approx(0.2, rel=1e-14)
    assert a.r_factor == pytest.approx(1.6 / 31, rel=1e-13)
    assert a.r_factor_bg == pytest.approx(1.6 / 30, rel=1e-13)
    assert a.n_params == 1 and not a.scale_fitted


@pytest.mark.parametrize("background, order", [("none", -1), ("flat", 0), ("linear", 1), ("quadratic", 2),
                                               ("cubic", 3)])
def test_weighted_fit_matches_numpy_lstsq(rng, background, order):
    # numpy.linalg.lstsq on the weighted system sqrt(w)·A x = sqrt(w)·y, A = [I_c, 1, q, q², ...]
    n = 400
    q = rng.uniform(0.5, 6.0, n)
    calc = rng.uniform(1, 100, n) * np.exp(-0.1 * q)
    sig = rng.uniform(0.5, 3.0, n)
    obs = 3.2 * calc + 5 - 0.7 * q + 0.05 * q**2 + rng.normal(size=n) * sig
    a = agreement(obs, calc, sig, background=background, q=q)
    cols = [calc] + [q**k for k in range(order + 1)]
    A = np.column_stack(cols)
    sw = 1 / sig
    x, *_ = np.linalg.lstsq(A * sw[:, None], obs * sw, rcond=None)
    assert a.scale == pytest.approx(x[0], rel=1e-9)
    np.testing.assert_allclose(a.background, x[1:], rtol=1e-8, atol=1e-9 * np.abs(x[1:]).max(initial=1))
    r = obs - A @ x
    assert a.chi2 == pytest.approx(np.sum((r / sig) ** 2) / (n - len(x)), rel=1e-9)


def test_points_with_huge_sigma_do_not_move_the_fit(rng):
    # Outliers with σ = 10⁶ and values off by 10⁴ must not move s and b (weights 10⁻¹²),
    # while an unweighted fit is dragged far away.
    n = 300
    calc = rng.uniform(10, 200, n)
    sig = np.full(n, 2.0)
    obs = 1.7 * calc + 40 + rng.normal(size=n) * sig
    bad = rng.choice(n, 12, replace=False)
    obs_bad = obs.copy()
    obs_bad[bad] += 1e4
    sig_bad = sig.copy()
    sig_bad[bad] = 1e6
    keep = np.ones(n, bool)
    keep[bad] = False
    clean = agreement(obs[keep], calc[keep], sig[keep])
    weighted = agreement(obs_bad, calc, sig_bad)
    unweighted = agreement(obs_bad, calc)
    assert weighted.scale == pytest.approx(clean.scale, rel=1e-7)
    assert weighted.background[0] == pytest.approx(clean.background[0], rel=1e-6)
    assert abs(unweighted.background[0] - clean.background[0]) > 100  # dragged by the outliers
    assert abs(weighted.scale - 1.7) < 0.02 and abs(weighted.background[0] - 40) < 3


def test_model_noise_enters_the_weights_at_the_fitted_scale(rng):
    # With σ_c the weights are w = 1/(σ_o² + s²σ_c²) at the final s: solving the weighted
    # system with those weights (numpy lstsq) must give the same s back (the fixed point).
    n = 500
    calc = rng.uniform(10, 300, n)
    sig_c = 0.1 * calc * rng.uniform(0.2, 2.0, n)  # speckle-like, uneven
    sig_o = np.full(n, 3.0)
    obs = 2.5 * (calc + rng.normal(size=n) * sig_c) + 7 + rng.normal(size=n) * sig_o
    a = agreement(obs, calc, sig_o, sig_c)
    w = 1 / (sig_o**2 + a.scale**2 * sig_c**2)
    A = np.column_stack([calc, np.ones(n)])
    x, *_ = np.linalg.lstsq(A * np.sqrt(w)[:, None], obs * np.sqrt(w), rcond=None)
    assert a.scale == pytest.approx(x[0], rel=1e-8)
    assert a.background[0] == pytest.approx(x[1], rel=1e-6)
    assert a.iterations > 1
    plain = agreement(obs, calc, sig_o)
    assert abs(plain.chi2 - a.chi2) > 1.0  # ignoring σ_c misjudges the fit
    # with σ_c, χ²_ν is consistent with 1 (noise of both maps accounted for)
    assert abs(a.chi2 - 1) < 4 * math.sqrt(2 / n)


def test_noise_floor_statistics(rng):
    # Pure Gaussian noise: R tends to R_exp = sqrt(2/π)Σσ/Σ|I_o| and χ²_ν to 1.
    n = 200_000
    calc = rng.uniform(50, 150, n)
    sig = rng.uniform(1, 5, n)
    obs = 0.8 * calc + 3 + rng.normal(size=n) * sig
    a = agreement(obs, calc, sig)
    assert a.r_factor / a.r_exp == pytest.approx(1.0, abs=0.01)
    assert abs(a.chi2 - 1) < 4 * math.sqrt(2 / n)


def test_shells_follow_the_definitions(rng):
    n = 5000
    q = rng.uniform(0.3, 5.0, n)
    calc = rng.uniform(1, 50, n)
    sig = rng.uniform(0.5, 2, n)
    obs = 2 * calc + 1 + 0.3 * q + rng.normal(size=n) * sig
    a = agreement(obs, calc, sig, q=q, background="flat")
    sh = a.shells(4)
    lo, hi = q.min(), q.max()
    edges = lo + (hi - lo) * np.arange(5) / 4
    np.testing.assert_allclose(sh.q_lo, edges[:-1], rtol=1e-12)
    np.testing.assert_allclose(sh.q_hi, edges[1:], rtol=1e-12)
    fit = a.scale * calc + a.background[0]
    for i in range(4):
        sel = (q >= edges[i]) & ((q < edges[i + 1]) if i < 3 else (q <= edges[i + 1]))
        r = obs[sel] - fit[sel]
        assert sh.n_points[i] == sel.sum()
        assert sh.r_factor[i] == pytest.approx(np.abs(r).sum() / np.abs(obs[sel]).sum(), rel=1e-10)
        w = 1 / sig[sel] ** 2
        assert sh.wr_factor[i] == pytest.approx(math.sqrt((w * r * r).sum() / (w * obs[sel] ** 2).sum()), rel=1e-10)
        share = sel.sum() - a.n_params * sel.sum() / n
        assert sh.chi2[i] == pytest.approx((w * r * r).sum() / share, rel=1e-10)
    assert sh.n_points.sum() == n
    assert "chi2_nu" in str(sh)


def test_independent_points_after_symmetry_averaging():
    # After averaging over a group, N_ind of N points are independent:
    # χ²_ν = (N_ind/N)·Σ w r² / (N_ind − p). 5-point example, N_ind = 3 (fraction 0.6).
    sig = np.array([1.0, 1, 1, 1, 2])
    a = agreement(OBS, CALC, sig, background="none", independent_fraction=0.6)
    assert a.n_independent == 3
    assert a.chi2 == pytest.approx(0.6 * (174 / 841) / (3 - 1), rel=1e-13)


def test_result_does_not_depend_on_block_size(rng, monkeypatch):
    n = 3001
    q = rng.uniform(0.3, 5.0, n)
    calc = rng.uniform(1, 50, n)
    sig = rng.uniform(0.5, 2, n)
    obs = 2 * calc + 1 + rng.normal(size=n) * sig
    a = agreement(obs, calc, sig, sigma_calc=0.05 * calc, q=q, background="linear")
    # (kinemap.compare is the function km.compare; the module is reached through importlib)
    monkeypatch.setattr(importlib.import_module("kinemap.compare.agreement"), "BLOCK_POINTS", 97)
    b = agreement(obs, calc, sig, sigma_calc=0.05 * calc, q=q, background="linear")
    for k in ("scale", "r_factor", "wr_factor", "chi2", "r_exp"):
        assert getattr(a, k) == pytest.approx(getattr(b, k), rel=1e-11)


def test_masks_and_unmeasured_points_are_left_out():
    obs = np.array([2.0, np.nan, 4.0, 6.0, 8.0, 11.0, 99.0, 50.0])
    calc = np.array([1.0, 1.0, 2.0, 3.0, 4.0, 5.0, 1.0, 1.0])
    sig = np.array([1.0, 1, 1, 1, 1, 2, 1, 0.0])  # σ = 0 marks a point as unusable
    mask = np.zeros(8, bool)
    mask[6] = True
    a = agreement(obs, calc, sig, background="none", mask=mask)
    assert a.n_points == 5
    assert a.scale == pytest.approx(59 / 29, rel=1e-14)  # the weighted 5-point example


@pytest.mark.parametrize("kwargs, message", [
    (dict(i_obs=OBS, i_calc=CALC[:4]), "shape"),
    (dict(i_obs=OBS, i_calc=CALC + 0j), "complex"),
    (dict(i_obs=OBS, i_calc=CALC, sigma_obs=np.array([1, 1, -1.0, 1, 1])), r"negative at index \(2,\)"),
    (dict(i_obs=OBS, i_calc=CALC, mask=np.ones(5, bool)), "no points are left"),
    (dict(i_obs=OBS, i_calc=CALC, mask=np.ones(5)), "boolean"),
    (dict(i_obs=OBS, i_calc=CALC, mask=np.zeros(4, bool)), "shape"),
    (dict(i_obs=OBS[:2], i_calc=CALC[:2], background="linear", q=np.array([1.0, 2])), "too few"),
    (dict(i_obs=OBS, i_calc=np.full(5, 3.0)), "cannot be told apart"),
    (dict(i_obs=OBS, i_calc=np.zeros(5)), "zero at every point"),
    (dict(i_obs=OBS, i_calc=CALC, background="sloped"), "`background` must be one of"),
    (dict(i_obs=OBS, i_calc=CALC, scale="auto"), "`scale` must be 'fit' or a number"),
    (dict(i_obs=OBS, i_calc=CALC, background="linear"), "needs |q|"),
    (dict(i_obs=np.zeros(5), i_calc=CALC), "all zero"),
])
def test_bad_input_is_refused(kwargs, message):
    with pytest.raises(InvalidInputError, match=message.replace("|", r"\|") if "|q|" in message else message):
        agreement(**kwargs)


def test_shells_need_q():
    a = agreement(OBS, CALC)
    with pytest.raises(InvalidInputError, match="need |q|".replace("|", r"\|")):
        a.shells(3)
