"""Peak finding and higher-dimensional indexing of quasicrystal patterns.

References: the Fourier modules and window transforms of docs/references.md
(quasicrystal section; Baake & Grimm 2013, Elser 1985); peak shapes are Gaussians, for which
a parabola through the logarithm of three samples is exact (analytic). Peaks placed at known
module vectors must come back with their indices; periodic crystals must be rejected.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import kinemap as km
import kinemap.quasi as kq
from kinemap.errors import InvalidInputError

TAU = (1 + math.sqrt(5)) / 2


def _same_module_vectors(scheme, h1, h2):
    """Indices can differ by a null vector (Penrose: (1,1,1,1,1)); compare k instead."""
    return np.allclose(scheme.module(h1).k_par, scheme.module(h2).k_par, rtol=0, atol=1e-9)


def _gaussian_map(centres, heights, grid, width):
    q = grid.q_vectors().reshape(grid.shape + (3,))
    out = np.zeros(grid.shape)
    for c, h in zip(centres, heights):
        out += h * np.exp(-np.sum((q - c) ** 2, axis=-1) / (2 * width ** 2))
    return out


# --------------------------------------------------------------------------- peak finding
@pytest.mark.parametrize("ndim", [1, 2, 3])
def test_find_peaks_recovers_gaussian_centres(ndim):
    rng = np.random.default_rng(ndim)
    if ndim == 1:
        grid = km.QGrid.line([-5, 0, 0], [5, 0, 0], 401)
    elif ndim == 2:
        grid = km.QGrid.plane([-5, -5, 0], [10, 0, 0], [0, 10, 0], (101, 121))
    else:
        grid = km.QGrid.volume([-3, -3, -3], [6, 0, 0], [0, 6, 0], [0, 0, 6], (41, 45, 43))
    n = 5
    centres = np.zeros((n, 3))
    lim = 4.0 if ndim < 3 else 2.3
    centres[:, :ndim] = rng.uniform(-lim, lim, size=(n, ndim))
    # keep them apart
    centres[:, 0] = np.linspace(-lim, lim, n) + rng.uniform(-0.1, 0.1, n)
    heights = rng.uniform(1, 10, n)
    width = 0.15
    img = _gaussian_map(centres, heights, grid, width)
    pk = kq.find_peaks(img, grid=grid, threshold=0.01)
    assert len(pk) == n
    order = np.argsort(-heights)
    # the log-parabola is exact for a Gaussian sampled on a grid (separable exponent);
    # only the tails of the other peaks perturb it (< 1e-6 here)
    np.testing.assert_allclose(pk.q, centres[order], atol=1e-6)
    np.testing.assert_allclose(pk.intensity, heights[order], rtol=1e-6)
    # the same with explicit q-vectors instead of a grid (multilinear interpolation)
    pk2 = kq.find_peaks(img, q=grid.q_vectors().reshape(grid.shape + (3,)), threshold=0.01)
    np.testing.assert_allclose(pk2.q, pk.q, atol=1e-12)


def test_find_peaks_on_a_pattern_and_options():
    sch = kq.fibonacci()
    ps = sch.chain_points(0, 600)
    x = ps.positions[:, 0]
    grid = km.QGrid.line([0.5, 0, 0], [12.5, 0, 0], 6001)
    pat = km.scatter(km.Model(ps.positions, "A", occupancy=np.sin(np.pi * x / x.max()) ** 2), grid, probe="unit")
    pk = kq.find_peaks(pat, threshold=0.01, max_peaks=5)
    assert len(pk) == 5 and np.all(np.diff(pk.intensity) <= 0)
    # the strongest peak in (0.5, 12.5) 1/Å is (1,2) at q = 2π(1 + 2τ)/√5 (docs/references.md module)
    assert pk.q[0, 0] == pytest.approx(2 * np.pi * (1 + 2 * TAU) / math.sqrt(5), rel=2e-5)
    assert len(kq.find_peaks(pat, threshold=0.01, min_q=5.0)) < len(kq.find_peaks(pat, threshold=0.01))


def test_find_peaks_ignores_the_map_border_and_forward_beam():
    grid = km.QGrid.plane([-5, -5, 0], [10, 0, 0], [0, 10, 0], (101, 101))
    centres = np.array([[5.3, 1.0, 0.0], [0.0, 0.0, 0.0], [2.0, -2.0, 0.0]])  # first one off the map
    img = _gaussian_map(centres, [5.0, 100.0, 1.0], grid, width=0.2)
    pk = kq.find_peaks(img, grid=grid, threshold=0.05, min_q=0.5)
    # the forward peak is dropped and does not set the threshold; the border maximum is not a peak
    assert len(pk) == 1
    np.testing.assert_allclose(pk.q[0], centres[2], atol=1e-6)
    assert len(kq.find_peaks(img, grid=grid, threshold=0.05, min_q=0.5, exclude_border=False)) == 2


def test_find_peaks_counts_a_plateau_once():
    # two equal neighbouring maxima (a flat top two pixels wide) are one peak, found at its
    # first pixel in C order and refined to the vertex of the parabola through (0, 2, 2):
    # half a pixel further; a lower maximum elsewhere is another
    img = np.zeros((9, 9))
    img[4, 3] = img[4, 4] = 2.0
    img[1, 7] = 1.0
    q = np.zeros((9, 9, 3))
    q[..., 0], q[..., 1] = np.meshgrid(np.arange(9.0), np.arange(9.0), indexing="ij")
    pk = kq.find_peaks(img, q=q, threshold=0.1, exclude_border=False)
    np.testing.assert_allclose(pk.pixel, [[4, 3.5], [1, 7]], atol=1e-15)
    # a larger neighbourhood lets the higher peak swallow the lower one
    assert len(kq.find_peaks(img, q=q, threshold=0.1, neighbourhood=3, exclude_border=False)) == 1


def test_rank_correlation_against_a_hand_computation():
    from kinemap.quasi.index_result import rank_correlation

    # Spearman's ρ = 1 − 6 Σd²/(n(n² − 1)) without ties: ranks (1 2 3 4 5) and (2 1 4 3 5) give
    # Σd² = 4, ρ = 1 − 24/120 = 0.8 (textbook formula)
    assert rank_correlation([1.0, 2.0, 3.0, 4.0, 5.0], [20.0, 10.0, 40.0, 30.0, 50.0]) == pytest.approx(0.8)
    # ties get average ranks: (1, 2.5, 2.5, 4) against (1, 2, 3, 4): Pearson of the ranks is
    # 4.5/√(4.5·5) = √0.9
    assert rank_correlation([1.0, 5.0, 5.0, 9.0], [1.0, 2.0, 3.0, 4.0]) == pytest.approx(math.sqrt(0.9))
    assert rank_correlation([1.0, 1.0, 1.0], [1.0, 2.0, 3.0]) == 0.0  # constant: no evidence


# --------------------------------------------------------------------------- indexing
@pytest.mark.parametrize("make", [kq.fibonacci, kq.octagonal, kq.penrose, kq.icosahedral])
@pytest.mark.parametrize("with_intensity", [True, False])
def test_indexing_recovers_placed_indices(make, with_intensity):
    sch = make()
    rng = np.random.default_rng(11)
    mv = sch.module_vectors(q_max=12.0, kperp_max=0.8, min_intensity=0.01)
    h = mv.indices[1:41]
    inten = np.abs(sch.amplitude(h)) ** 2
    q = sch.module(h).q
    true_scale = 1.02  # a 2 % wrong edge length
    noise = rng.normal(0, 5e-4, q.shape) * np.linalg.norm(q, axis=1)[:, None]
    noise[:, sch.dim:] = 0
    q_obs = q * true_scale + noise
    i_obs = inten * np.exp(rng.normal(0, 0.1, len(inten)))  # 10 % intensity noise
    res = kq.index_peaks(sch, q_obs, i_obs if with_intensity else None, scale=1.0)
    assert res.indexed.all()
    assert _same_module_vectors(sch, res.indices, h)
    # least squares over M peaks with 5e-4 relative position noise: σ ≈ 5e-4/√M
    tol = 4 * 5e-4 / math.sqrt(len(h))
    assert res.scale == pytest.approx(true_scale, rel=tol)
    assert res.edge_length == pytest.approx(1 / true_scale, rel=tol)
    assert np.nanmax(res.residual / res.tolerance) < 1.0
    ok, why = res.verdict()
    assert ok, why
    if sch.dim == 1:
        # predicted intensities are |T|² of the window transform: for Fibonacci
        # |sin(πτk*)/(πτk*)|², k* = (h'/τ − h)/√5 (docs/references.md)
        k_star = (res.indices[:, 1] / TAU - res.indices[:, 0]) / math.sqrt(5)
        np.testing.assert_allclose(res.predicted, np.sinc(TAU * k_star) ** 2, rtol=1e-9, atol=1e-15)


def test_full_pipeline_on_a_synthetic_octagonal_map():
    sch = kq.octagonal()
    rng = np.random.default_rng(5)
    mv = sch.module_vectors(q_max=9.0, kperp_max=0.9, min_intensity=0.01)
    h = mv.indices[1:]
    inten = np.abs(sch.amplitude(h)) ** 2
    centres = sch.module(h).q * 0.985  # 1.5 % scale error
    grid = km.QGrid.plane([-9.5, -9.5, 0], [19, 0, 0], [0, 19, 0], (381, 381))
    img = _gaussian_map(centres, inten, grid, width=0.05)
    img += rng.normal(0, 1e-4, img.shape) ** 2  # weak positive background noise
    pk = kq.find_peaks(img, grid=grid, threshold=5e-3)
    res = kq.index_peaks(sch, pk)
    found = res.indexed & (np.linalg.norm(res.q_obs, axis=1) > 0)
    assert found.sum() == len(h)  # every placed peak found and indexed
    placed = {tuple(np.round(sch.module([x]).k_par[0], 9)) for x in h}
    got = {tuple(np.round(sch.module([x]).k_par[0], 9)) for x in res.indices[found]}
    assert got == placed
    assert res.scale == pytest.approx(0.985, rel=1e-4)


def test_engine_patterns_are_indexed_and_inflation_symmetric():
    # Fibonacci chain, tapered (Hann weights) to suppress the finite-size side lobes
    ch = kq.fibonacci()
    ps = ch.chain_points(0, 600)
    x = ps.positions[:, 0]
    grid = km.QGrid.line([0.3, 0, 0], [25.0, 0, 0], 12001)
    pat = km.scatter(km.Model(ps.positions, "A", occupancy=np.sin(np.pi * x / x.max()) ** 2), grid, probe="unit")
    pk = kq.find_peaks(pat, threshold=5e-3)
    res = kq.index_peaks(ch, pk)
    ok, why = res.verdict()
    assert ok, why
    assert res.fraction_indexed == 1.0
    assert res.rank_correlation > 0.9
    # inflation: τ k(h) = k(S h) (docs/references.md module (h + h'τ)/√5 → (h' + (h+h')τ)/√5)
    chk = kq.inflation_check(res)
    assert chk.power == 1 and chk.factor == pytest.approx(TAU)
    assert len(chk.pairs) >= 8
    np.testing.assert_allclose(chk.position_ratio, TAU, rtol=2e-4)
    strong = [k for k, (i, j) in enumerate(chk.pairs) if min(res.predicted[i], res.predicted[j]) > 0.05]
    assert len(strong) >= 5
    # intensities of inflation partners follow the window transform's ratio
    np.testing.assert_allclose(chk.intensity_ratio[strong], chk.predicted_ratio[strong], rtol=0.15)
    assert "inflation" in chk.table()

    # Penrose patch, 2-D plane
    pen = kq.penrose(shift=(0.1, 0.05))
    pps = pen.points(20.0)
    r = np.linalg.norm(pps.positions, axis=1)
    g2 = km.QGrid.plane([-8, -8, 0], [16, 0, 0], [0, 16, 0], (241, 241))
    pat2 = km.scatter(km.Model(pps.positions, "A", occupancy=np.cos(np.pi * r / 40) ** 2), g2, probe="unit")
    pk2 = kq.find_peaks(pat2, threshold=1e-2, min_q=0.5)
    res2 = kq.index_peaks(pen, pk2)
    ok2, why2 = res2.verdict()
    assert ok2, why2
    assert res2.fraction_indexed == 1.0 and res2.index_rank == 4  # Z[ζ₅] has rank 4
    assert res2.scale == pytest.approx(1.0, abs=1e-3)
    # inflation by τ in the plane; positions are pixel-limited (0.067 1/Å pixels)
    chk2 = kq.inflation_check(res2)
    assert len(chk2.pairs) >= 10
    np.testing.assert_allclose(chk2.position_ratio, TAU, rtol=0.01)
    np.testing.assert_allclose(chk2.intensity_ratio, chk2.predicted_ratio, rtol=0.12)

    # Ammann–Beenker: inflation by the silver mean 1 + √2
    oc = kq.octagonal()
    ops = oc.points(20.0)
    r = np.linalg.norm(ops.positions, axis=1)
    g3 = km.QGrid.plane([-12, -12, 0], [24, 0, 0], [0, 24, 0], (361, 361))
    pat3 = km.scatter(km.Model(ops.positions, "A", occupancy=np.cos(np.pi * r / 40) ** 2), g3, probe="unit")
    res3 = kq.index_peaks(oc, kq.find_peaks(pat3, threshold=1e-2, min_q=0.5))
    assert res3.is_quasiperiodic
    chk3 = kq.inflation_check(res3)
    assert chk3.factor == pytest.approx(1 + math.sqrt(2)) and len(chk3.pairs) >= 8
    np.testing.assert_allclose(chk3.position_ratio, 1 + math.sqrt(2), rtol=0.01)
    np.testing.assert_allclose(chk3.intensity_ratio, chk3.predicted_ratio, rtol=0.05)


def test_plane_section_of_an_icosahedral_pattern_is_indexed(tmp_path):
    # the 2-fold plane q_z = 0 of an icosahedral patch (engine): its peaks form a rank-4
    # submodule (Z[τ]² in the plane), more than the section's 2 dimensions
    sch = kq.icosahedral()
    radius = 13.0
    ps = sch.points(radius)
    r = np.linalg.norm(ps.positions, axis=1)
    model = km.Model(ps.positions, "A", occupancy=np.cos(np.pi * r / (2 * radius)) ** 2)
    grid = km.QGrid.plane([-9, -9, 0], [18, 0, 0], [0, 18, 0], (181, 181))
    pat = km.scatter(model, grid, probe="unit")
    pk = kq.find_peaks(pat, threshold=4e-3, min_q=0.5)
    assert len(pk) >= 30
    res = kq.index_peaks(sch, pk)
    ok, why = res.verdict()
    assert ok, why
    assert res.fraction_indexed == 1.0 and res.rank_correlation > 0.9
    assert res.data_dim == 2 and res.index_rank == 4
    assert np.all(np.abs(res.q_model[res.indexed, 2]) < 1e-12)  # module vectors in the plane
    assert res.plot(tmp_path / "ico.png", pattern=pat).exists()


def _lattice_peaks(a, dim, q_max):
    r = int(q_max * a / (2 * np.pi)) + 1
    g = np.array(np.meshgrid(*[np.arange(-r, r + 1)] * dim, indexing="ij")).reshape(dim, -1).T
    q = 2 * np.pi * g / a
    q = q[(np.linalg.norm(q, axis=1) <= q_max) & (np.linalg.norm(q, axis=1) > 0)]
    out = np.zeros((len(q), 3))
    out[:, :dim] = q
    return out


@pytest.mark.parametrize("make, a", [
    (kq.fibonacci, 1.38), (kq.fibonacci, 0.9), (kq.octagonal, 2.0), (kq.octagonal, 1.0),
    (kq.penrose, 1.7), (kq.icosahedral, 2.5), (kq.icosahedral, 1.2),
])
def test_periodic_crystal_is_rejected(make, a):
    sch = make()
    q = _lattice_peaks(a, sch.dim, 14.0)
    rng = np.random.default_rng(0)
    inten = 1 + 0.02 * rng.normal(size=len(q))  # Bragg peaks of point scatterers: all equal
    for i_obs in (inten, None):
        res = kq.index_peaks(sch, q, i_obs)
        ok, why = res.verdict()
        assert not ok, why


def test_engine_pattern_of_a_periodic_crystal_is_rejected():
    # a square lattice computed with the engine, indexed as octagonal: rejected
    g = km.QGrid.plane([-8, -8, 0], [16, 0, 0], [0, 16, 0], (241, 241))
    x = np.arange(-20, 21) * 1.37
    p = np.array(np.meshgrid(x, x)).reshape(2, -1).T
    p = p[np.linalg.norm(p, axis=1) < 20]
    r = np.linalg.norm(p, axis=1)
    pat = km.scatter(km.Model(np.column_stack([p, np.zeros(len(p))]), "A", occupancy=np.cos(np.pi * r / 40) ** 2),
                     g, probe="unit")
    res = kq.index_peaks(kq.octagonal(), kq.find_peaks(pat, threshold=5e-3, min_q=0.5))
    assert not res.is_quasiperiodic
    # a periodic chain indexed as Fibonacci: rejected
    xp = np.arange(600) * 1.3
    gl = km.QGrid.line([0.3, 0, 0], [25.0, 0, 0], 12001)
    pl = km.scatter(km.Model(np.column_stack([xp, 0 * xp, 0 * xp]), "A",
                             occupancy=np.sin(np.pi * xp / xp.max()) ** 2), gl, probe="unit")
    res1 = kq.index_peaks(kq.fibonacci(), kq.find_peaks(pl, threshold=5e-3))
    assert not res1.is_quasiperiodic


# --------------------------------------------------------------------------- output
def test_table_and_plots(tmp_path):
    sch = kq.octagonal()
    h = sch.module_vectors(q_max=8.0, kperp_max=0.8, min_intensity=0.02).indices
    q = sch.module(h).q
    inten = np.abs(sch.amplitude(h)) ** 2
    res = kq.index_peaks(sch, q, inten)
    text = res.table()
    lines = text.splitlines()
    assert len(lines) == len(h) + 3 and "verdict: quasiperiodic" in lines[-1]
    assert "indices" in lines[1] and "residual" in lines[1]
    rows = res.rows()
    assert len(rows) == len(h) and rows[1]["indices"] is not None
    path = res.plot(tmp_path / "octagonal.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and path.stat().st_size > 5000
    # 1-D plot with the map underneath
    ch = kq.fibonacci()
    ps = ch.chain_points(0, 300)
    grid = km.QGrid.line([0.3, 0, 0], [12.0, 0, 0], 3001)
    pat = km.scatter(km.Model(ps.positions, "A"), grid, probe="unit")
    r1 = kq.index_peaks(ch, kq.find_peaks(pat, threshold=0.02))
    p1 = kq.plot_indexed(r1, tmp_path / "chain.png", pattern=pat)
    assert p1.read_bytes()[:4] == b"\x89PNG"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["chain.png", "octagonal.png"]  # no leftovers
    with pytest.raises(InvalidInputError, match="png"):
        res.plot(tmp_path / "x.jpg")
    # an existing picture is kept unless overwrite=True
    before = path.read_bytes()
    with pytest.raises(FileExistsError, match="overwrite"):
        res.plot(path, annotate=0)
    assert path.read_bytes() == before
    assert res.plot(path, annotate=0, overwrite=True).read_bytes() != before


@pytest.mark.parametrize("call, match", [
    (lambda: kq.index_peaks(kq.octagonal(), np.zeros((3, 2))), "peak positions"),
    (lambda: kq.index_peaks(kq.octagonal(), np.ones((3, 3)), [1, 2]), "intensity"),
    (lambda: kq.index_peaks(kq.octagonal(), np.ones((3, 3)), [1, -2, 1]), "intensity"),
    (lambda: kq.index_peaks(kq.octagonal(), np.ones((3, 3)), scale=0), "scale"),
    (lambda: kq.index_peaks(kq.octagonal(), np.ones((3, 3)), kperp_max=-1), "kperp_max"),
    (lambda: kq.index_peaks(kq.octagonal(), np.ones((3, 3)), intensity_factor=1.0), "intensity_factor"),
    (lambda: kq.find_peaks(np.ones((4, 4))), "grid"),
    (lambda: kq.find_peaks(np.ones((4, 4)), q=np.zeros((4, 3, 3))), "shape"),
    (lambda: kq.find_peaks(np.ones((4, 4)), q=np.zeros((4, 4, 3)), neighbourhood=0), "neighbourhood"),
    (lambda: kq.find_peaks(np.full((4, 4), np.nan), q=np.zeros((4, 4, 3))), "non-finite"),
    (lambda: kq.find_peaks(np.ones((2, 2, 2, 2)), q=np.zeros((2, 2, 2, 2, 3))), "dimensions"),
])
def test_bad_input(call, match):
    with pytest.raises(InvalidInputError, match=match):
        call()
