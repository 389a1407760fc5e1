"""symmetrize on hkl grids and Å⁻¹ grids: symmetric maps unchanged, random maps equal to the
mean of their images found by explicit loops in this file, orbit counts, R_int, planes,
Bijvoet warnings and bad input.

Outside references: the operations written out by hand below (4/mmm, 2/m, 4mm) or built as
Cartesian rotations with Rodrigues' formula (hexagonal orientations); orders of the point
groups (ITA Vol. A, memory); the combinatorial count of orbits of m-3m on a cube of integer
points (h ≥ k ≥ l ≥ 0); multiplicity factors (Cullity & Stock, memory); E|e − ē| for Gaussian
noise; Friedel's law (I(h) = I(−h) for real form factors or centrosymmetric structures).
"""

import math
from itertools import product

import numpy as np
import pytest
from test_symmetry_groups import ORDERS, VARIANTS, closure, rodrigues, system_cell

import kinemap as km
from kinemap.compare import BijvoetAveragingWarning, allowed_reflections, point_group, symmetrize
from kinemap.errors import InvalidInputError
from kinemap.model import cell_from_parameters


# ----------------------------------------------------------------------------- references
def brute_force(grid, intensity, sigma, hkl_ops):
    """Mean over the distinct images of every grid point, by loops (hkl_ops act on rows)."""
    hv = grid.hkl_values().reshape(tuple(grid.shape) + (3,))
    where = {tuple(np.round(hv[i], 6)): i for i in np.ndindex(*grid.shape)}
    mean = np.full(grid.shape, np.nan)
    err = np.full(grid.shape, np.nan)
    distinct = np.zeros(grid.shape, dtype=int)
    for i in np.ndindex(*grid.shape):
        images = set()
        for op in hkl_ops:
            j = where.get(tuple(np.round(op(hv[i]), 6)))
            if j is not None and np.isfinite(intensity[j]):
                images.add(j)
        if images:
            mean[i] = np.mean([intensity[j] for j in images])
            if sigma is not None:
                err[i] = math.sqrt(sum(sigma[j] ** 2 for j in images)) / len(images)
        distinct[i] = len(images)
    meas = np.isfinite(intensity)
    multi = meas & (distinct >= 2)
    r_int = np.abs(intensity[multi] - mean[multi]).sum() / np.abs(intensity[multi]).sum()
    n_indep = sum(1.0 / distinct[i] for i in np.ndindex(*grid.shape) if meas[i])
    return mean, err, r_int, round(n_indep)


def signed_permutations(perms, signs):
    return [lambda h, p=p, s=s: np.array([s[0] * h[p[0]], s[1] * h[p[1]], s[2] * h[p[2]]])
            for p in perms for s in signs]


# 4/mmm in hkl (hand-written): h, k swapped or not, every sign.
OPS_4MMM = signed_permutations([(0, 1, 2), (1, 0, 2)], list(product([1, -1], repeat=3)))


def cartesian_hkl_ops(cart_ops, cell):
    recip = np.linalg.inv(cell).T
    return [lambda h, r=r: (r @ (h @ recip)) @ cell.T for r in cart_ops]


# ----------------------------------------------------------------------------- models
def rocksalt_cube(n=2, a=5.64):
    """A cube of rocksalt centred on an atom: m-3m-symmetric as a finite cluster."""
    idx = np.array(list(product(range(-n, n + 1), repeat=3)))
    species = np.where(idx.sum(axis=1) % 2 == 0, "Na", "Cl")
    return km.Model(idx * a / 2, list(species), cell=np.eye(3) * a)


def zincblende_cluster(n=2, a=5.41):
    """Zn on fcc sites and S on fcc + (1/4, 1/4, 1/4), both within a cube: -43m, not m-3m."""
    idx = np.array(list(product(range(-2 * n, 2 * n + 1), repeat=3)))
    fcc = idx[(idx.sum(axis=1) % 2 == 0)] / 2.0
    zn = fcc[np.abs(fcc).max(axis=1) <= n / 2]
    s = fcc + 0.25
    s = s[np.abs(s).max(axis=1) <= n / 2]
    pos = np.vstack([zn, s]) * a
    return km.Model(pos, ["Zn"] * len(zn) + ["S"] * len(s), cell=np.eye(3) * a)


def hexagonal_cluster(rng, cell):
    """Seeds closed under the 24 Cartesian operations of 6/mmm (built here, Rodrigues)."""
    ops = closure([rodrigues([0, 0, 1], math.pi / 3), rodrigues(cell[0], math.pi), -np.eye(3)])
    assert len(ops) == 24
    seeds = rng.random((3, 3)) * [4.0, 4.0, 3.0]
    pos = np.unique(np.round(np.vstack([seeds @ r.T for r in ops]), 10), axis=0)
    return km.Model(pos, "Zn")


# ----------------------------------------------------------------------------- symmetric maps
def test_cubic_map_is_unchanged_by_m3m():
    model = rocksalt_cube()
    grid = km.QGrid.hkl(model.cell, h=(-1.5, 1.5, 13), k=(-1.5, 1.5, 13), l=(-1.5, 1.5, 13))
    pat = km.scatter(model, grid, probe="xray")
    sym = symmetrize(pat, "m-3m")
    scale = pat.intensity.max()
    assert np.abs(sym.intensity - pat.intensity).max() <= 1e-11 * scale
    info = sym.metadata["symmetry"]
    assert info["r_int"] < 1e-12 and info["group"] == "m-3m" and info["n_operations_used"] == 48
    assert sym.amplitude is None and sym.metadata["probe"] == pat.metadata["probe"]
    # orbits of m-3m on a cube of 2N+1 points per axis: h >= k >= l >= 0, C(N+3, 3)
    assert info["n_independent"] == math.comb(6 + 3, 3)


def test_hexagonal_map_is_unchanged_by_6mmm(rng):
    cell = cell_from_parameters(3.2, 3.2, 5.1, 90, 90, 120)
    model = hexagonal_cluster(rng, cell)
    grid = km.QGrid.hkl(cell, h=(-2, 2, 9), k=(-2, 2, 9), l=(-1, 1, 5))
    pat = km.scatter(model, grid, probe="xray")
    sym = symmetrize(pat, "6/mmm")
    assert np.abs(sym.intensity - pat.intensity).max() <= 1e-11 * pat.intensity.max()
    assert sym.metadata["symmetry"]["r_int"] < 1e-9     # the map's own rounding (phase stepping)


# ----------------------------------------------------------------------------- random maps
def test_random_map_equals_the_mean_of_its_images_4mmm(rng):
    cell = np.diag([4.0, 4.0, 6.0])
    grid = km.QGrid.hkl(cell, h=(-2, 2, 9), k=(-2, 2, 9), l=(-1.5, 1.0, 6))   # l range not symmetric
    inten = rng.random(grid.shape)
    inten[rng.random(grid.shape) < 0.15] = np.nan
    sigma = rng.random(grid.shape) * 0.1
    pat = km.Pattern.from_array(inten, grid, sigma=sigma)
    sym = symmetrize(pat, "4/mmm")
    mean, err, r_int, n_indep = brute_force(grid, inten, sigma, OPS_4MMM)
    assert np.array_equal(np.isnan(sym.intensity), np.isnan(mean))
    assert np.allclose(sym.intensity, mean, equal_nan=True, rtol=1e-13, atol=1e-15)
    assert np.allclose(sym.sigma, err, equal_nan=True, rtol=1e-12, atol=1e-15)
    info = sym.metadata["symmetry"]
    assert info["r_int"] == pytest.approx(r_int, rel=1e-12)
    assert info["n_independent"] == n_indep
    assert info["n_points_filled"] == int(np.sum(np.isnan(inten) & np.isfinite(mean)))


def test_random_map_equals_the_mean_of_its_images_m3m(rng):
    cell = np.eye(3) * 4.0
    # offsets chosen so that some images fall outside the grid and others between points
    grid = km.QGrid.hkl(cell, h=(-1.0, 1.5, 6), k=(-1.5, 1.0, 6), l=(-1.0, 1.0, 5))
    inten = rng.random(grid.shape)
    inten[0, 0, 0] = np.nan
    pat = km.Pattern.from_array(inten, grid)
    sym = symmetrize(pat, "m-3m")
    perms = [(0, 1, 2), (1, 2, 0), (2, 0, 1), (1, 0, 2), (0, 2, 1), (2, 1, 0)]
    ops = signed_permutations(perms, list(product([1, -1], repeat=3)))   # 48 ops of m-3m
    mean, _, r_int, n_indep = brute_force(grid, inten, None, ops)
    assert np.allclose(sym.intensity, mean, equal_nan=True, rtol=1e-13, atol=1e-15)
    assert sym.metadata["symmetry"]["r_int"] == pytest.approx(r_int, rel=1e-12)
    assert sym.metadata["symmetry"]["n_independent"] == n_indep


def test_random_cube_with_gaps_and_sigma_m3m(rng):
    # equal axes: all sign patterns of a permutation are summed as a product of flips;
    # the grid is not centred, so the flips are truncated at one end
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1.0, 1.5, 11), k=(-1.0, 1.5, 11), l=(-1.0, 1.5, 11))
    inten = rng.random(grid.shape)
    inten[rng.random(grid.shape) < 0.1] = np.nan
    sigma = 0.05 + 0.1 * rng.random(grid.shape)
    perms = [(0, 1, 2), (1, 2, 0), (2, 0, 1), (1, 0, 2), (0, 2, 1), (2, 1, 0)]
    ops = signed_permutations(perms, list(product([1, -1], repeat=3)))
    mean, err, r_int, n_indep = brute_force(grid, inten, sigma, ops)
    sym = symmetrize(km.Pattern.from_array(inten, grid, sigma=sigma), "m-3m")
    assert np.allclose(sym.intensity, mean, equal_nan=True, rtol=1e-13, atol=1e-15)
    assert np.allclose(sym.sigma, err, equal_nan=True, rtol=1e-12, atol=1e-15)
    assert sym.metadata["symmetry"]["r_int"] == pytest.approx(r_int, rel=1e-12)
    assert sym.metadata["symmetry"]["n_independent"] == n_indep


@pytest.mark.parametrize("symbol,axis", [("-3m1", "a"), ("-31m", "a-b")])
def test_trigonal_orientations_on_a_hexagonal_map(rng, symbol, axis):
    cell = cell_from_parameters(3.0, 3.0, 5.0, 90, 90, 120)
    grid = km.QGrid.hkl(cell, h=(-2, 2, 5), k=(-2, 2, 5), l=(-1, 1, 3))
    inten = rng.random(grid.shape)
    pat = km.Pattern.from_array(inten, grid)
    two = cell[0] if axis == "a" else cell[0] - cell[1]
    cart = closure([rodrigues([0, 0, 1], 2 * math.pi / 3), rodrigues(two, math.pi), -np.eye(3)])
    mean = brute_force(grid, inten, None, cartesian_hkl_ops(cart, cell))[0]
    sym = symmetrize(pat, symbol)
    assert np.allclose(sym.intensity, mean, rtol=1e-13)
    other = symmetrize(pat, "-31m" if symbol == "-3m1" else "-3m1")
    assert np.abs(other.intensity - sym.intensity).max() > 0.05     # the orientations differ


def test_hexagonal_map_with_gaps_and_sigma_equals_the_mean_of_its_images(rng):
    cell = cell_from_parameters(3.0, 3.0, 5.0, 90, 90, 120)
    # ranges not centred, so that many images of h' = h - k fall outside
    grid = km.QGrid.hkl(cell, h=(-2, 3, 11), k=(-3, 2, 11), l=(-1, 1.5, 6))
    inten = rng.random(grid.shape)
    inten[rng.random(grid.shape) < 0.2] = np.nan
    sigma = 0.05 + rng.random(grid.shape) * 0.1
    cart = closure([rodrigues([0, 0, 1], math.pi / 3), rodrigues(cell[0], math.pi), -np.eye(3)])
    mean, err, r_int, n_indep = brute_force(grid, inten, sigma, cartesian_hkl_ops(cart, cell))
    sym = symmetrize(km.Pattern.from_array(inten, grid, sigma=sigma), "6/mmm")
    assert np.allclose(sym.intensity, mean, equal_nan=True, rtol=1e-13, atol=1e-15)
    assert np.allclose(sym.sigma, err, equal_nan=True, rtol=1e-12, atol=1e-15)
    assert sym.metadata["symmetry"]["r_int"] == pytest.approx(r_int, rel=1e-12)
    assert sym.metadata["symmetry"]["n_independent"] == n_indep


def test_monoclinic_unique_axis_b_versus_c_on_a_map(rng):
    cell = cell_from_parameters(3.0, 4.0, 5.0, 90, 90, 90)   # supports both settings
    grid = km.QGrid.hkl(cell, h=(-1, 1, 3), k=(-1, 1, 3), l=(-1, 1, 3))
    inten = rng.random(grid.shape)
    pat = km.Pattern.from_array(inten, grid)
    ops_b = [lambda h, s=s: h * s for s in ([1, 1, 1], [-1, 1, -1], [1, -1, 1], [-1, -1, -1])]
    ops_c = [lambda h, s=s: h * s for s in ([1, 1, 1], [-1, -1, 1], [1, 1, -1], [-1, -1, -1])]
    sym_b, sym_c = symmetrize(pat, "2/m"), symmetrize(pat, "2/m:c")
    assert np.allclose(sym_b.intensity, brute_force(grid, inten, None, ops_b)[0], rtol=1e-13)
    assert np.allclose(sym_c.intensity, brute_force(grid, inten, None, ops_c)[0], rtol=1e-13)
    assert sym_b.metadata["symmetry"]["setting"] == "b" and sym_c.metadata["symmetry"]["setting"] == "c"
    # a cell with beta != 90 supports unique axis b only
    mono = cell_from_parameters(3.0, 4.0, 5.0, 90, 101, 90)
    pm = km.Pattern.from_array(inten, km.QGrid.hkl(mono, h=(-1, 1, 3), k=(-1, 1, 3), l=(-1, 1, 3)))
    symmetrize(pm, "2/m")
    with pytest.raises(InvalidInputError, match="unique axis c needs alpha = beta = 90"):
        symmetrize(pm, "2/m:c")


def system_cell_for(symbol):
    return system_cell(point_group(symbol))


@pytest.mark.parametrize("symbol", list(ORDERS) + list(VARIANTS))
def test_a_single_general_point_spreads_over_its_orbit(symbol):
    # a map that is 1 at the general reflection (1 3 5) and 0 elsewhere averages to
    # 1/|G| on the |G| members of its orbit (orders from ITA Vol. A, memory)
    order = {**ORDERS, **VARIANTS}[symbol]
    grid = km.QGrid.hkl(system_cell_for(symbol), h=(-9, 9, 19), k=(-9, 9, 19), l=(-9, 9, 19))
    inten = np.zeros(grid.shape)
    inten[1 + 9, 3 + 9, 5 + 9] = 1.0
    sym = symmetrize(km.Pattern.from_array(inten, grid), symbol)
    nonzero = sym.intensity[sym.intensity > 0]
    assert len(nonzero) == order
    assert np.allclose(nonzero, 1.0 / order, rtol=1e-13)


def test_orbit_count_of_4mmm_on_an_integer_cube():
    n = 3
    grid = km.QGrid.hkl(np.diag([4.0, 4.0, 5.0]), h=(-n, n, 2 * n + 1), k=(-n, n, 2 * n + 1), l=(-n, n, 2 * n + 1))
    sym = symmetrize(km.Pattern.from_array(np.ones(grid.shape), grid), "4/mmm")
    # orbits: h >= k >= 0 and l >= 0 (combinatorics)
    assert sym.metadata["symmetry"]["n_independent"] == (n + 1) * (n + 2) // 2 * (n + 1)


# ----------------------------------------------------------------------------- R_int
def test_r_int_of_noise_matches_the_gaussian_expectation(rng):
    n, c, s = 6, 100.0, 1.0
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-n, n, 2 * n + 1), k=(-n, n, 2 * n + 1), l=(-n, n, 2 * n + 1))
    noisy = c + s * rng.standard_normal(grid.shape)
    sym = symmetrize(km.Pattern.from_array(noisy, grid), "m-3m")
    # multiplicity of each point from its index pattern (Cullity & Stock, memory)
    hv = np.abs(np.rint(grid.hkl_values()).astype(int))
    mult = []
    for h in hv:
        nz = np.count_nonzero(h)
        distinct = len(set(h[h > 0].tolist()))
        if nz == 0:
            mult.append(1)
        elif nz == 1:
            mult.append(6)
        elif nz == 2:
            mult.append(12 if distinct == 1 else 24)
        else:
            mult.append({1: 8, 2: 24, 3: 48}[distinct])
    m = np.array(mult)
    used = m >= 2
    # E|e − ē| = s·sqrt(2/π)·sqrt(1 − 1/m) for m independent Gaussian errors
    want = np.sum(s * math.sqrt(2 / math.pi) * np.sqrt(1 - 1 / m[used])) / (c * used.sum())
    got = sym.metadata["symmetry"]["r_int"]
    assert got == pytest.approx(want, rel=0.05)
    assert symmetrize(km.Pattern.from_array(np.full(grid.shape, c), grid), "m-3m").metadata["symmetry"]["r_int"] == 0


# ----------------------------------------------------------------------------- planes and lines
def test_plane_uses_only_the_operations_that_map_it_onto_itself(rng):
    cell = np.eye(3) * 4.0
    grid0 = km.QGrid.hkl(cell, h=(-2, 2, 9), k=(-2, 2, 9), l=0)
    inten = rng.random(grid0.shape)
    sym0 = symmetrize(km.Pattern.from_array(inten, grid0), "m-3m")
    info = sym0.metadata["symmetry"]
    # l = 0 is kept by the 16 operations with l -> ±l; they act on the plane as 4mm (8)
    assert info["n_operations_used"] == 16 and info["n_distinct_actions"] == 8
    hand = [lambda h, p=p, s=s: np.array([s[0] * h[p[0]], s[1] * h[p[1]], 0.0])
            for p in [(0, 1), (1, 0)] for s in product([1, -1], repeat=2)]
    assert np.allclose(sym0.intensity, brute_force(grid0, inten, None, hand)[0], rtol=1e-13)
    # l = 1/2 is kept only by the 8 operations with l -> l
    grid1 = km.QGrid.hkl(cell, h=(-2, 2, 9), k=(-2, 2, 9), l=0.5)
    sym1 = symmetrize(km.Pattern.from_array(inten, grid1), "m-3m")
    assert sym1.metadata["symmetry"]["n_operations_used"] == 8
    assert np.allclose(sym1.intensity, sym0.intensity, rtol=1e-13)
    # a line along [100] through the origin: h -> ±h
    line = km.QGrid.hkl(cell, h=(-2, 2, 9), k=0, l=0)
    vals = rng.random(9)
    symline = symmetrize(km.Pattern.from_array(vals, line), "m-3m")
    assert np.allclose(symline.intensity, (vals + vals[::-1]) / 2, rtol=1e-13)


# ----------------------------------------------------------------------------- Å⁻¹ grids
def test_volume_in_inverse_angstrom_matches_the_hkl_grid(rng):
    a = 4.0
    cell = np.eye(3) * a
    hkl_grid = km.QGrid.hkl(cell, h=(-1, 1, 9), k=(-1, 1, 9), l=(-1, 1, 9))
    step = 2 * np.pi / a * 2.0
    qgrid = km.QGrid.volume([-step / 2] * 3, [step, 0, 0], [0, step, 0], [0, 0, step], (9, 9, 9))
    assert np.allclose(qgrid.q_vectors(), hkl_grid.q_vectors())
    inten = rng.random(hkl_grid.shape)
    a_sym = symmetrize(km.Pattern.from_array(inten, hkl_grid), "m-3m")
    q_sym = symmetrize(km.Pattern.from_array(inten, qgrid), "m-3m", cell=cell)
    assert np.allclose(a_sym.intensity, q_sym.intensity, rtol=1e-13)
    assert q_sym.metadata["symmetry"]["operation_basis"].startswith("cartesian")


def test_inverse_angstrom_grid_needs_a_cell():
    grid = km.QGrid.plane([-1, -1, 0], [2, 0, 0], [0, 2, 0], (5, 5))
    pat = km.Pattern.from_array(np.ones(grid.shape), grid)
    with pytest.raises(InvalidInputError, match="needs `cell=`"):
        symmetrize(pat, "m-3m")


# ----------------------------------------------------------------------------- Bijvoet pairs
def test_anomalous_map_warns_for_laue_averaging_only():
    model = zincblende_cluster()
    grid = km.QGrid.hkl(model.cell, h=(-1, 1, 5), k=(-1, 1, 5), l=(-1, 1, 5))
    pat = km.scatter(model, grid, probe="xray", energy_kev=9.5)   # just below the Zn K edge
    mates = pat.intensity[::-1, ::-1, ::-1]
    assert np.abs(pat.intensity - mates).max() > 1e-6 * pat.intensity.max()   # Bijvoet pairs differ
    with pytest.warns(BijvoetAveragingWarning, match=r"432, -43m"):
        symmetrize(pat, "m-3m")
    kept = symmetrize(pat, "-43m")                 # the cluster's own group: no inversion, no warning
    assert np.abs(kept.intensity - pat.intensity).max() <= 1e-11 * pat.intensity.max()
    symmetrize(pat, "m-3m", anomalous_check=False)
    # without anomalous terms Friedel's law holds: no warning
    plain = km.scatter(model, grid, probe="xray")
    symmetrize(plain, "m-3m")
    # a centrosymmetric structure keeps I(h) = I(-h) even with f'': no warning
    nacl = rocksalt_cube(1)
    symmetrize(km.scatter(nacl, km.QGrid.hkl(nacl.cell, h=(-1, 1, 5), k=(-1, 1, 5), l=0), probe="xray",
                          energy_kev=9.5), "m-3m")


# ----------------------------------------------------------------------------- allowed reflections
CENTRING_VECTORS = {
    "P": [],
    "I": [(0.5, 0.5, 0.5)],
    "F": [(0, 0.5, 0.5), (0.5, 0, 0.5), (0.5, 0.5, 0)],
    "A": [(0, 0.5, 0.5)],
    "B": [(0.5, 0, 0.5)],
    "C": [(0.5, 0.5, 0)],
    "R": [(2 / 3, 1 / 3, 1 / 3), (1 / 3, 2 / 3, 2 / 3)],
}


@pytest.mark.parametrize("centring", list(CENTRING_VECTORS))
def test_allowed_reflections_are_where_the_centring_lattice_sum_is_nonzero(centring):
    cell = cell_from_parameters(3.0, 3.0, 7.0, 90, 90, 120) if centring == "R" else np.diag([3.0, 4.0, 5.0])
    got = {tuple(r) for r in allowed_reflections(cell, 3, centring=centring).tolist()}
    vecs = np.array([(0, 0, 0)] + CENTRING_VECTORS[centring], dtype=float)
    want = set()
    for h in product(range(-3, 4), repeat=3):
        # sum over the centring translations t of exp(2πi h·t): |…| = number of t, or 0
        if abs(np.exp(2j * np.pi * vecs @ np.array(h)).sum()) > 0.5:
            want.add(h)
    assert got == want


def test_allowed_reflections_within_q_max():
    cell = np.eye(3) * 4.0
    q_max = 2 * np.pi / 4.0 * math.sqrt(8.5)
    got = allowed_reflections(cell, q_max=q_max, centring="F")
    q = 2 * np.pi * np.linalg.norm(got, axis=1) / 4.0
    assert (q <= q_max + 1e-12).all() and np.all(np.diff(q) >= -1e-12)
    # fcc reflections with h² + k² + l² <= 8: 000, {111} (8), {200} (6), {220} (12)
    assert len(got) == 1 + 8 + 6 + 12
    with pytest.raises(InvalidInputError, match="centring"):
        allowed_reflections(cell, 2, centring="X")
    with pytest.raises(InvalidInputError, match="hkl_max"):
        allowed_reflections(cell)


# ----------------------------------------------------------------------------- files and input
def test_symmetrised_map_saves_and_loads(tmp_path, rng):
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1, 1, 3), k=(-1, 1, 3), l=(-1, 1, 3))
    sym = symmetrize(km.Pattern.from_array(rng.random(grid.shape), grid, sigma=np.full(grid.shape, 0.1)), "m-3m")
    back = km.load_pattern(sym.save(tmp_path / "sym.h5"))
    assert back.metadata["symmetry"]["group"] == "m-3m"
    assert back.metadata["symmetry"]["r_int"] == pytest.approx(sym.metadata["symmetry"]["r_int"])
    assert np.allclose(back.metadata["symmetry"]["operations"][1], sym.metadata["symmetry"]["operations"][1])
    assert np.allclose(back.sigma, sym.sigma)


def test_bad_input_is_refused_clearly():
    cell = np.diag([4.0, 4.0, 6.0])
    grid = km.QGrid.hkl(cell, h=(-1, 1, 3), k=(-1, 1, 3), l=0)
    pat = km.Pattern.from_array(np.ones(grid.shape), grid)
    with pytest.raises(InvalidInputError, match="cannot read point-group symbol 'm-3q'"):
        symmetrize(pat, "m-3q")
    with pytest.raises(InvalidInputError, match="does not have the symmetry of point group 'm-3m'.*a = b = c"):
        symmetrize(pat, "m-3m")
    with pytest.raises(InvalidInputError, match="does not act on h, k, l"):
        symmetrize(pat, "m-3-5")
    with pytest.raises(InvalidInputError, match="`pattern` must be a kinemap.Pattern"):
        symmetrize(np.ones((3, 3)), "4/mmm")
    with pytest.raises(InvalidInputError, match="`tol`"):
        symmetrize(pat, "4/mmm", tol=0.7)
    with pytest.raises(InvalidInputError, match="`method`"):
        symmetrize(pat, "4/mmm", method="nearest")
    with pytest.raises(InvalidInputError, match="differs from the cell of the hkl grid"):
        symmetrize(pat, "4/mmm", cell=np.eye(3) * 4.0)
    with pytest.raises(InvalidInputError, match="apply to maps on lists of points"):
        symmetrize(pat, "4/mmm", indices=[[0, 0, 0]])
    points = km.Pattern.from_array(np.ones(3), km.QGrid.points(np.zeros((3, 3)) + [[0, 0, 1]]))
    with pytest.raises(InvalidInputError, match="needs `indices`"):
        symmetrize(points, "m-3m")
    with pytest.raises(InvalidInputError, match="shape"):
        symmetrize(points, "m-3m", indices=[[1, 0, 0]])
    with pytest.raises(InvalidInputError, match="name the same reflection"):
        symmetrize(points, "m-3m", indices=[[1, 0, 0], [0, 1, 0], [1, 0, 0]])
    with pytest.raises(InvalidInputError, match="whole numbers"):
        symmetrize(points, "m-3m", indices=[[1, 0, 0], [0, 1, 0], [0.5, 0, 0]])


def test_reflection_list_with_hkl_indices(rng):
    hkl = np.array(list(product(range(-1, 2), repeat=3)))
    cell = np.eye(3) * 4.0
    q = 2 * np.pi * hkl / 4.0
    inten = rng.random(len(hkl))
    sym = symmetrize(km.Pattern.from_array(inten, km.QGrid.points(q)), "m-3m", indices=hkl, cell=cell)
    # classes of |h| patterns in a 3x3x3 cube: 000, {100}, {110}, {111}
    kind = (hkl != 0).sum(axis=1)
    for k in range(4):
        assert np.allclose(sym.intensity[kind == k], inten[kind == k].mean(), rtol=1e-13)
    assert sym.metadata["symmetry"]["n_independent"] == 4


def test_single_reflection_keeps_its_site_symmetry():
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=1, k=1, l=0)
    sym = symmetrize(km.Pattern.from_array(np.array(3.0), grid), "m-3m")
    # the operations that fix (1 1 0): 48 / multiplicity 12 = 4 (Cullity & Stock; memory)
    assert sym.metadata["symmetry"]["n_operations_used"] == 4 and float(sym.intensity) == 3.0


def test_progress_reports_every_operation():
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1, 1, 3), k=(-1, 1, 3), l=(-1, 1, 3))
    seen = []
    symmetrize(km.Pattern.from_array(np.ones(grid.shape), grid), "m-3m", progress=lambda d, t: seen.append((d, t)))
    assert seen[-1] == (48, 48) and len(seen) == 48


def test_a_map_too_large_for_the_memory_left_is_refused(monkeypatch):
    from kinemap._shared import memory

    monkeypatch.setattr(memory, "available_memory", lambda: 1 << 20)
    grid = km.QGrid.hkl(np.eye(3) * 4.0, h=(-2, 2, 41), k=(-2, 2, 41), l=(-2, 2, 41))
    with pytest.raises(InvalidInputError, match="symmetrising a map of 68,921 points would need about"):
        symmetrize(km.Pattern.from_array(np.ones(grid.shape), grid), "m-3m")


def test_hkl_grid_without_a_cell_is_refused():
    import dataclasses

    full = km.QGrid.hkl(np.eye(3) * 4.0, h=(-1, 1, 3), k=(-1, 1, 3), l=0)
    grid = dataclasses.replace(full, cell=None)    # e.g. a map read from a file that lacks the cell
    with pytest.raises(InvalidInputError, match="hkl grid has no cell"):
        symmetrize(km.Pattern.from_array(np.ones(grid.shape), grid), "4/mmm")


def test_unequal_steps_and_offset_grids_keep_only_images_on_grid_points(rng):
    cell = np.diag([4.0, 4.0, 6.0])
    # h step 0.25, k step 0.5: the 4-fold maps only every other h onto a k grid point
    grid = km.QGrid.hkl(cell, h=(-1, 1, 9), k=(-1, 1, 5), l=(-1, 1, 3))
    inten = rng.random(grid.shape)
    sym = symmetrize(km.Pattern.from_array(inten, grid), "4/mmm")
    assert np.allclose(sym.intensity, brute_force(grid, inten, None, OPS_4MMM)[0], rtol=1e-13)
    # h from 0.1: h -> -h never lands on the grid
    shifted = km.QGrid.hkl(cell, h=(0.1, 1.1, 5), k=(-1, 1, 5), l=0)
    vals = rng.random(shifted.shape)
    sym2 = symmetrize(km.Pattern.from_array(vals, shifted), "4/mmm")
    assert "m normal to [100]" in sym2.metadata["symmetry"]["operations_without_grid_images"]
    assert np.allclose(sym2.intensity, brute_force(shifted, vals, None, OPS_4MMM)[0], rtol=1e-13)
