"""km.compare with models: synthetic measurements made here from a known model
(measured = s·I + b + noise, with a beamstop and a detector gap as NaN).

Outside references: the least-squares covariance (AᵀWA)⁻¹ for the spread of the fitted s and
b; χ²_ν of Gaussian noise (mean 1, standard deviation sqrt(2/ν)); the voxel average and the
nearest-lattice-point rule written out here with NumPy loops; scipy.ndimage.gaussian_filter
for the resolution convolution; structure factors of the fcc cell (kinemap's exact sum at
integer h, k, l; F = 4f for unmixed, 0 for mixed indices, Warren ch. 4 — from memory) for
which reflections the F centring allows.
"""

import math

import h5py
import numpy as np
import pytest

import kinemap as km
from kinemap.compare import BraggExclusion, bragg_mask, gaussian_resolution, model_on_grid
from kinemap.errors import InvalidInputError

A = 3.6
L = 4
CELL = np.eye(3) * A
FCC = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])


def alloy(positions_shift=None, occupancy=None, seed=0):
    """Fe–Ni on an fcc lattice, 4×4×4 cells in a periodic box (256 atoms)."""
    rng = np.random.default_rng(seed)
    cells = np.stack(np.meshgrid(*[np.arange(L)] * 3, indexing="ij"), -1).reshape(-1, 3)
    frac = (cells[:, None, :] + FCC[None]).reshape(-1, 3)
    species = np.where(rng.random(len(frac)) < 0.4, "Ni", "Fe")
    pos = frac * A
    if positions_shift is not None:
        pos = pos + positions_shift
    return km.Model(pos, species, occupancy=occupancy, b_iso=0.4, box=CELL * L, cell=CELL)


GRID = km.QGrid.hkl(CELL, h=(-3, 3, 13), k=(-3, 3, 13), l=(0, 1.5, 4))  # steps of 2 lattice steps
S_TRUE, B_TRUE = 0.02, 3.0
EXCLUDE = BraggExclusion(0.2, "r.l.u.", centring="F")


@pytest.fixture(scope="module")
def truth():
    return model_on_grid(alloy(), GRID).intensity


@pytest.fixture(scope="module")
def measured(truth):
    rng = np.random.default_rng(7)
    sig = 0.01 * S_TRUE * truth + 0.5
    meas = S_TRUE * truth + B_TRUE + rng.normal(size=truth.shape) * sig
    q = np.linalg.norm(GRID.q_vectors(), axis=1).reshape(GRID.shape)
    meas[q < 1.0] = np.nan           # beamstop
    meas[:, 4, :] = np.nan           # detector gap
    return km.Pattern.from_array(meas, GRID, sigma=sig)


def test_voxel_average_on_the_box_lattice():
    # The box has 4 cells per edge, so its reciprocal lattice has steps of 1/4 r.l.u. and
    # each voxel of 1/2 r.l.u. holds the lattice points at offsets −1/4, 0, +1/4 per axis,
    # the outer ones shared with the neighbour (weight ½). Written out here with loops.
    model = alloy()
    sub = km.QGrid.hkl(CELL, h=(-3.25, 3.25, 27), k=(-3.25, 3.25, 27), l=(-0.25, 1.75, 9))
    fine = km.scatter(model, sub).intensity
    w = np.array([0.5, 1.0, 0.5])
    want = np.zeros(GRID.shape)
    for i in range(13):
        for j in range(13):
            for k in range(4):
                block = fine[2 * i:2 * i + 3, 2 * j:2 * j + 3, 2 * k:2 * k + 3]
                want[i, j, k] = np.einsum("abc,a,b,c->", block, w, w, w) / 8.0
    got = model_on_grid(model, GRID)
    assert got.metadata["model_sampling"]["mode"] == "average"
    assert got.metadata["model_sampling"]["lattice_steps_per_voxel"] == [2, 2, 2]
    np.testing.assert_allclose(got.intensity, want, rtol=1e-10)
    centres = model_on_grid(model, GRID, sampling="centres")
    np.testing.assert_allclose(centres.intensity, km.scatter(model, GRID).intensity, rtol=1e-12)


def test_voxel_average_refuses_arbitrary_points():
    # A voxel needs a regular grid around it (this used to fail with an AttributeError).
    from kinemap.compare.sampling import voxel_average

    with pytest.raises(InvalidInputError, match="needs a regular grid"):
        voxel_average(alloy(), km.QGrid.points([[0.0, 0.0, 2 * np.pi / A]]))


def test_fit_recovers_scale_and_background_within_the_noise(measured, truth):
    cmp = km.compare(alloy(), measured, exclude_bragg=EXCLUDE)
    used = cmp.used
    sig = measured.sigma[used]
    a = np.column_stack([truth[used], np.ones(used.sum())])
    cov = np.linalg.inv((a / sig[:, None] ** 2).T @ a)  # (AᵀWA)⁻¹: the spread of (s, b)
    assert abs(cmp.scale - S_TRUE) < 4 * math.sqrt(cov[0, 0])
    assert abs(cmp.background - B_TRUE) < 4 * math.sqrt(cov[1, 1])
    # the right model reaches the noise floor: χ²_ν ≈ 1 (sd sqrt(2/ν)), R ≈ R_exp
    assert abs(cmp.chi2 - 1) < 4 * math.sqrt(2 / (cmp.n_points - 2))
    assert cmp.r_factor == pytest.approx(cmp.r_exp, rel=0.2)
    # what was left out, counted here independently
    nan = ~np.isfinite(measured.intensity)
    assert cmp.excluded["unmeasured"] == nan.sum()
    assert cmp.n_points == used.sum() == GRID.size - nan.sum() - cmp.excluded["bragg"]
    # residual: I_o − (s I_c + b) where used, NaN elsewhere
    res = cmp.residual.intensity
    np.testing.assert_allclose(res[used], measured.intensity[used] - (cmp.scale * truth[used] + cmp.background),
                               rtol=1e-9, atol=1e-9)
    assert np.isnan(res[~used]).all()
    assert "averaged over each measured voxel" in cmp.metadata["model_sampling"]["description"]


@pytest.mark.parametrize("wrong", ["shifted atom", "wrong occupancy"])
def test_a_perturbed_model_fits_worse(measured, wrong):
    right = km.compare(alloy(), measured, exclude_bragg=EXCLUDE)
    if wrong == "shifted atom":
        shift = np.zeros((256, 3))
        shift[5] = [0.2, 0.0, 0.0]  # one atom of 256 moved by 0.2 Å
        model = alloy(positions_shift=shift)
    else:
        model = alloy(occupancy={"Ni": 0.9})
    bad = km.compare(model, measured, exclude_bragg=EXCLUDE)
    assert bad.chi2 > 2.0 * right.chi2
    assert bad.r_factor > 1.5 * right.r_factor
    assert bad.wr_factor > 1.5 * right.wr_factor


def test_ranking_puts_the_right_model_first(measured):
    shift = np.zeros((256, 3))
    shift[5] = [0.2, 0.0, 0.0]
    models = [alloy(positions_shift=shift), alloy(), alloy(occupancy={"Ni": 0.9})]
    ranking = km.rank_models(models, measured, names=["shifted", "right", "occupancy"], exclude_bragg=EXCLUDE,
                             keep="all")
    assert ranking.names[0] == "right" and ranking.by == "chi2"
    chis = [r["chi2"] for r in ranking.rows]
    assert chis == sorted(chis)
    assert [c.chi2 for c in ranking.comparisons] == chis
    assert ranking.best.chi2 == chis[0]
    text = str(ranking)
    assert "right" in text and "ranked by chi2" in text
    also = km.compare(models, measured, names=["shifted", "right", "occupancy"], exclude_bragg=EXCLUDE)
    assert also.names == ranking.names and len(also.comparisons) == 1


def test_results_do_not_depend_on_the_thread_count(measured):
    one = km.compare(alloy(), measured, exclude_bragg=EXCLUDE, threads=1)
    two = km.compare(alloy(), measured, exclude_bragg=EXCLUDE, threads=2)
    for k in ("scale", "background", "r_factor", "chi2"):
        assert getattr(one, k) == pytest.approx(getattr(two, k), rel=1e-12)


def test_snapped_grid_and_points():
    # 0.45 r.l.u. steps are not on the box lattice (0.25 r.l.u.): the model is computed on the
    # snapped grid and each measured point takes its nearest snapped point (found here from
    # the h, k, l of both grids).
    model = alloy()
    grid = km.QGrid.hkl(CELL, h=(-2.63, 2.77, 13), k=(0.1, 1.0, 3), l=0.5)  # no point midway between two
    assert not grid.is_commensurate(model.box)
    got = model_on_grid(model, grid)
    info = got.metadata["model_sampling"]
    assert info["mode"] == "snap"
    snapped = grid.snapped(model.box)
    ref = model_on_grid(model, snapped, sampling="average").intensity
    hkl = grid.hkl_values().reshape(13, 3, 3)
    shkl = snapped.hkl_values().reshape(tuple(snapped.shape) + (3,))
    flat = shkl.reshape(-1, 3)
    want = np.empty(grid.shape)
    shift = 0.0
    for i in range(13):
        for j in range(3):
            d = np.linalg.norm((flat - hkl[i, j]) @ np.linalg.inv(CELL).T * 2 * np.pi, axis=1)
            n = int(np.argmin(d))
            want[i, j] = ref.reshape(-1)[n]
            shift = max(shift, d[n])
    np.testing.assert_allclose(got.intensity, want, rtol=1e-12)
    assert info["max_shift"] == pytest.approx(shift, rel=1e-9)
    # arbitrary q-points: the nearest box-lattice point
    q = np.random.default_rng(3).uniform(-3, 3, (20, 3))
    pts = model_on_grid(model, km.QGrid.points(q))
    n = np.round(q @ model.box.T / (2 * np.pi))
    qs = n @ (2 * np.pi * np.linalg.inv(model.box)).T
    np.testing.assert_allclose(pts.intensity, km.scatter(model, km.QGrid.points(qs)).intensity, rtol=1e-12)


def test_finite_particle_is_computed_at_the_measured_points():
    particle = km.Model([[0, 0, 0], [1.4, 0.3, 0], [0, 1.5, 0.7]], ["C", "O", "O"])
    grid = km.QGrid.plane([0.3, -1, 0], [2, 0, 0], [0, 2, 0.1], (9, 7))
    got = model_on_grid(particle, grid)
    assert got.metadata["model_sampling"]["mode"] == "points"
    np.testing.assert_array_equal(got.intensity, km.scatter(particle, grid).intensity)


@pytest.mark.parametrize("sampling, grid, message", [
    ("average", km.QGrid.hkl(CELL, h=(-2.7, 2.7, 13), k=0.1, l=0.5), "needs a grid on the box's reciprocal lattice"),
    ("points", GRID, "off its box's reciprocal lattice"),
    ("average", km.QGrid.points([[1.0, 0, 0]]), "needs a regular grid"),
    ("nearest", GRID, "`sampling` must be one of"),
])
def test_samplings_that_do_not_apply(sampling, grid, message):
    with pytest.raises(InvalidInputError, match=message):
        model_on_grid(alloy(), grid, sampling=sampling)


def test_resolution_is_an_isotropic_gaussian(rng):
    # against scipy.ndimage.gaussian_filter, normalised over the points that exist
    from scipy.ndimage import gaussian_filter

    grid = km.QGrid.volume([-1, -1, 0], [2, 0, 0], [0, 2.4, 0], [0, 0, 1.2], (21, 25, 13))  # steps 0.1 1/Å
    values = rng.random(grid.shape) * 100
    width = 0.15  # 1.5 steps: both truncate at 6 steps (4σ)
    got = gaussian_resolution(values, grid, width)
    num = gaussian_filter(values, 1.5, mode="constant", cval=0.0)
    den = gaussian_filter(np.ones(grid.shape), 1.5, mode="constant", cval=0.0)
    np.testing.assert_allclose(got, num / den, rtol=1e-10)


def test_resolution_width_is_fitted(rng):
    from scipy.ndimage import gaussian_filter

    grid = km.QGrid.plane([-2, -2, 0], [4, 0, 0], [0, 4, 0], (81, 81))  # steps 0.05 1/Å
    calc = np.zeros(grid.shape)
    calc[rng.integers(5, 76, 40), rng.integers(5, 76, 40)] = 1000.0  # sharp peaks
    calc += 10.0
    w0 = 0.1  # 2 steps
    smooth = gaussian_filter(calc, 2.0, mode="constant") / gaussian_filter(np.ones(grid.shape), 2.0, mode="constant")
    sig = 0.01 * smooth + 0.1
    meas = 3.0 * smooth + 5 + rng.normal(size=grid.shape) * sig
    cmp = km.compare(km.Pattern(grid, intensity=calc), km.Pattern.from_array(meas, grid, sigma=sig),
                     resolution="fit", resolution_max=0.3)
    assert cmp.resolution == pytest.approx(w0, rel=0.03)
    assert cmp.n_params == 3 and cmp.metadata["resolution_fitted"]
    assert abs(cmp.chi2 - 1) < 0.1 and cmp.scale == pytest.approx(3.0, rel=0.01)
    fixed = km.compare(km.Pattern(grid, intensity=calc), km.Pattern.from_array(meas, grid, sigma=sig), resolution=w0)
    assert fixed.n_params == 2 and fixed.chi2 < 1.1


def test_only_allowed_reflections_are_excluded():
    # F centring: the fcc cell's structure factor is nonzero only for unmixed h, k, l.
    cell_model = km.Model(FCC * A, "Ni", cell=CELL, box=CELL)
    grid = km.QGrid.hkl(CELL, h=(-3, 3, 13), k=(-3, 3, 13), l=(0, 2, 5))  # integer and half-integer points
    hkl = grid.hkl_values()
    integer = np.all(np.abs(hkl - np.round(hkl)) < 1e-9, axis=1)
    f2 = km.scatter(cell_model, km.QGrid.points(hkl[integer] @ np.linalg.inv(CELL).T * 2 * np.pi)).intensity
    allowed = np.zeros(grid.size, bool)
    allowed[np.flatnonzero(integer)[f2 > 1e-6 * f2.max()]] = True
    got = bragg_mask(grid, BraggExclusion(0.1, "r.l.u.", centring="F")).reshape(-1)
    np.testing.assert_array_equal(got, allowed)
    assert integer.sum() > allowed.sum() + 100  # forbidden positions such as (1 0 0) are kept


def test_exclusion_in_inverse_angstrom_around_a_peak_list(rng):
    q = rng.uniform(-2, 2, (500, 3))
    peaks = rng.uniform(-2, 2, (30, 3))
    r = 0.3
    got = bragg_mask(km.QGrid.points(q), BraggExclusion(r, "1/angstrom", q=peaks))
    want = (np.linalg.norm(q[:, None, :] - peaks[None], axis=2) <= r).any(axis=1)  # brute force
    np.testing.assert_array_equal(got, want)
    # a radius in 1/angstrom around centring reflections, with the cell given in the exclusion
    grid = km.QGrid.volume([-2, -2, -2], [4, 0, 0], [0, 4, 0], [0, 0, 4], (17, 17, 17))
    got = bragg_mask(grid, BraggExclusion(0.2, "1/angstrom", centring="I", cell=np.eye(3) * 3.0)).reshape(-1)
    g = np.stack(np.meshgrid(*[np.arange(-2, 3)] * 3, indexing="ij"), -1).reshape(-1, 3)
    g = g[g.sum(1) % 2 == 0] * (2 * np.pi / 3.0)  # I: h + k + l even (ITA, from memory)
    pts = grid.q_vectors()
    want = (np.linalg.norm(pts[:, None, :] - g[None], axis=2) <= 0.2).any(axis=1)
    np.testing.assert_array_equal(got, want)


def test_bragg_mask_needs_an_exclusion():
    # None used to end in an AttributeError inside the exclusion tree.
    with pytest.raises(InvalidInputError, match="`exclusion` is missing"):
        bragg_mask(GRID, None)


def test_the_comparison_file(measured, tmp_path):
    cmp = km.compare(alloy(), measured, exclude_bragg=EXCLUDE)
    path = cmp.save(tmp_path / "cmp.h5")
    with h5py.File(path) as f:
        e = f["entry"]
        assert f.attrs["default"] == "entry" and e.attrs["default"] == "measured"
        meas = e["measured/intensity"][()]
        fit = e["model/intensity"][()]
        res = e["residual/intensity"][()]
        used = e["residual/used"][()].astype(bool)
        np.testing.assert_array_equal(meas, measured.intensity)
        np.testing.assert_allclose(res[used], (meas - fit)[used], rtol=1e-12, atol=1e-12)
        assert np.isnan(res[~used]).all()
        assert e["figures/r_factor"][()] == pytest.approx(cmp.r_factor, rel=1e-15)
        assert "sum|I_o - (s I_c + b)|" in e["figures/r_factor"].attrs["definition"]
        assert "N - p" in e["figures/chi2"].attrs["definition"]
        assert e["figures/excluded/bragg"][()] == cmp.excluded["bragg"]
        assert len(e["shells/r_factor"]) == 10
        assert "averaged over each measured voxel" in e["figures/definitions/model_sampling"][()].decode()
    back = km.load_pattern(path)  # the default chain leads to the measured map
    np.testing.assert_array_equal(back.intensity, measured.intensity)
    np.testing.assert_allclose(back.grid.q_vectors(), GRID.q_vectors(), atol=1e-12)
    with pytest.raises(FileExistsError):
        cmp.save(path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cmp.h5"]


def test_the_picture_shares_one_scale_for_measured_and_model(measured, tmp_path):
    from kinemap.compare import comparison_figure

    cmp = km.compare(alloy(), measured, exclude_bragg=EXCLUDE)
    fig = comparison_figure(cmp, slice_axis="l", slice_index=1, profile=((-3, 0.5), (3, 0.5)))
    meshes = [ax.collections[0] for ax in fig.axes if ax.collections and hasattr(ax.collections[0], "norm")
              and ax.get_title()]
    titles = [m.axes.get_title() for m in meshes]
    assert titles[:3] == ["measured I_o", "model s·I_c + b", "residual I_o − (s·I_c + b)"]
    n_m, n_c, n_r = (m.norm for m in meshes[:3])
    assert (n_m.vmin, n_m.vmax) == (n_c.vmin, n_c.vmax)
    assert n_r.vmin == -n_r.vmax and meshes[2].get_cmap().name == "RdBu_r"
    path = cmp.plot(tmp_path / "cmp.png", dpi=30)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    with pytest.raises(InvalidInputError, match="profile"):
        cmp.plot(tmp_path / "x.png", profile="h")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cmp.png"]


@pytest.mark.parametrize("case, message", [
    ("grids", "the grids do not match"),
    ("empty_mask", "`mask` is empty"),
    ("mask_shape", "`mask` has shape"),
    ("all_masked", "no points are left"),
    ("negative_sigma", r"sigma of the measured map` is negative at index \(0, 0, 0\)"),
    ("bragg_units", "units"),
    ("bragg_nothing", "needs the reflections"),
    ("background", "`background` must be one of"),
    ("resolution", "`resolution` must be None"),
])
def test_bad_input_is_refused_and_nothing_is_written(measured, truth, tmp_path, case, message):
    calc = km.Pattern(GRID, intensity=truth)
    kw = {}
    meas = measured
    if case == "grids":
        calc = km.Pattern(km.QGrid.hkl(CELL, h=(-3, 3, 13), k=(-3, 3, 13), l=(0.5, 2, 4)), intensity=truth)
    elif case == "empty_mask":
        kw["mask"] = np.zeros(0, bool)
    elif case == "mask_shape":
        kw["mask"] = np.zeros((13, 13), bool)
    elif case == "all_masked":
        kw["mask"] = np.ones(GRID.shape, bool)
    elif case == "negative_sigma":
        sig = measured.sigma.copy()
        sig[0, 0, 0] = -1.0
        meas = km.Pattern(GRID, intensity=measured.intensity, sigma=sig)
    elif case == "bragg_units":
        kw["exclude_bragg"] = {"radius": 0.1, "units": "mm", "centring": "F"}
    elif case == "bragg_nothing":
        kw["exclude_bragg"] = {"radius": 0.1, "units": "r.l.u."}
    elif case == "background":
        kw["background"] = "exponential"
    elif case == "resolution":
        kw["resolution"] = "wide"
    with pytest.raises(InvalidInputError, match=message):
        km.compare(calc, meas, **kw).save(tmp_path / "out.h5")
    assert list(tmp_path.iterdir()) == []


def test_symmetry_average_before_the_fit(measured, truth):
    # The mirror m (unique axis b: k → −k), which this grid (k from −3 to 3) maps onto itself;
    # kinemap.symmetrize is checked on its own against hand-written operations
    # (tests/test_symmetry.py). Here: the comparison fits the symmetrised maps and counts
    # independent points.
    symmetrize = km.symmetrize
    cmp = km.compare(km.Pattern(GRID, intensity=truth), measured, symmetry="m", exclude_bragg=EXCLUDE)
    sym_meas = symmetrize(measured, "m")
    np.testing.assert_allclose(cmp.measured.intensity, sym_meas.intensity, equal_nan=True)
    np.testing.assert_allclose(cmp.model.intensity, symmetrize(km.Pattern(GRID, intensity=truth), "m").intensity)
    used = cmp.used
    frac = sym_meas.metadata["symmetry"]["n_independent"] / np.isfinite(sym_meas.intensity).sum()
    n_ind = frac * used.sum()
    r = cmp.residual.intensity[used]
    w = 1 / sym_meas.sigma[used] ** 2
    assert cmp.n_independent == round(n_ind)
    assert cmp.chi2 == pytest.approx(frac * np.sum(w * r * r) / (n_ind - 2), rel=1e-10)
    assert cmp.metadata["symmetry"]["group"] == "m"
