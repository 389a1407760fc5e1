"""Quasicrystal point groups: exact on indexed peak lists of kinemap.quasi schemes, and by
interpolation on Å⁻¹ grids.

Outside references: Cartesian rotations built in this file (Rodrigues' formula) and matched
to the listed q-vectors with a k-d tree — independent of the integer index matrices; the
orbit sizes of the icosahedral group (12 five-fold vertices, 20 three-fold face centres,
30 two-fold edge midpoints, 120 general; textbook geometry of the icosahedron, memory) and
of the dihedral groups (2n general, n on a mirror line); the analytic smooth test functions
built here; the leading-order error of linear interpolation, ½ t(1 − t) h² f''.
"""

import functools
import math

import numpy as np
import pytest
from scipy.spatial import cKDTree
from test_symmetry_groups import closure, rodrigues

import kinemap as km
from kinemap import quasi
from kinemap.compare import equivalent_reflections, point_group, symmetrize
from kinemap.errors import InvalidInputError

TAU = (1 + 5 ** 0.5) / 2


@functools.cache
def icosahedral_ops():
    ops = closure([rodrigues([0, 0, 1], math.pi), rodrigues([1, 1, 1], 2 * math.pi / 3),
                   rodrigues([0, 1, TAU], 2 * math.pi / 5), -np.eye(3)])
    assert len(ops) == 120
    return ops


def dihedral_ops(n):
    """8mm, 10mm, … in the plane: rotations by 2π/n about z and the mirror y -> -y."""
    ops = closure([rodrigues([0, 0, 1], 2 * math.pi / n), np.diag([1.0, -1.0, 1.0])])
    assert len(ops) == 2 * n
    return ops


def cartesian_means(q, values, ops):
    """Mean of each listed value over the distinct listed points its rotated q lands on."""
    tree = cKDTree(q)
    scale = max(1.0, float(np.abs(q).max()))
    out = np.empty(len(q))
    sizes = np.empty(len(q), dtype=int)
    for i, qi in enumerate(q):
        found = set()
        for r in ops:
            d, j = tree.query(r @ qi)
            if d < 1e-7 * scale:
                found.add(int(j))
        out[i] = np.mean([values[j] for j in found])
        sizes[i] = len(found)
    return out, sizes


@pytest.fixture(scope="module")
def ico():
    return quasi.icosahedral()


@pytest.fixture(scope="module")
def ico_peaks(ico):
    return ico.module_vectors(q_max=2 * np.pi * 1.2, kperp_max=0.6)


def test_icosahedral_model_peaks_are_unchanged_by_m35(ico, ico_peaks):
    # an icosahedral patch from kinemap.quasi, keeping the points whose 120 images are all in
    # the patch (points on the window boundary are decided by a rule that breaks the symmetry)
    pos = ico.positions(6.0)
    tree = cKDTree(pos)
    keep = np.ones(len(pos), dtype=bool)
    for r in icosahedral_ops():
        keep &= tree.query(pos @ r.T)[0] < 1e-9
    model = km.Model(pos[keep], "A")
    pat = km.scatter(model, km.QGrid.points(ico_peaks.q), probe="unit")
    sym = symmetrize(pat, "m-3-5", indices=ico_peaks.indices, scheme=ico)
    assert np.abs(sym.intensity - pat.intensity).max() <= 1e-10 * pat.intensity.max()
    info = sym.metadata["symmetry"]
    assert info["r_int"] < 1e-12 and info["n_operations_used"] == 120
    assert info["operation_basis"].startswith("higher-dimensional indices")
    assert np.array(info["operations"]).shape == (120, 6, 6)


def test_random_peak_list_equals_the_mean_over_rotated_q(ico, ico_peaks, rng):
    vals = rng.random(len(ico_peaks))
    sym = symmetrize(km.Pattern.from_array(vals, km.QGrid.points(ico_peaks.q)), "m-3-5",
                     indices=ico_peaks.indices, scheme=ico)
    want, sizes = cartesian_means(ico_peaks.q, vals, icosahedral_ops())
    assert np.allclose(sym.intensity, want, rtol=1e-13)
    assert sym.metadata["symmetry"]["n_independent"] == round(np.sum(1.0 / sizes))


@pytest.mark.parametrize("h,size", [
    ((1, 0, 0, 0, 0, 0), 12),      # along a vertex: 5-fold axis
    ((1, 0, 1, 0, 1, 0), 20),      # e0 + e2 + e4 ∝ (1, 1, 1): 3-fold axis
    ((0, 0, 1, 1, 0, 0), 30),      # e2 + e3 ∝ (0, 0, 1): 2-fold axis
    ((2, 1, 0, -1, 0, 3), 120),    # general
])
def test_icosahedral_orbit_sizes(ico, h, size):
    orbit = equivalent_reflections(h, "m-3-5", scheme=ico)
    assert len(orbit) == size
    # the orbit is the set of rotated k-vectors (independent Cartesian check)
    k = ico.module(orbit).q
    k0 = ico.module([h]).q[0]
    rotated = np.array([r @ k0 for r in icosahedral_ops()])
    assert np.allclose(np.unique(np.round(rotated, 9), axis=0), np.unique(np.round(k, 9), axis=0))


@pytest.mark.parametrize("scheme_name,group,n", [("octagonal", "8/mmm", 8), ("penrose", "10/mmm", 10)])
def test_planar_schemes(scheme_name, group, n, rng):
    scheme = getattr(quasi, scheme_name)()
    peaks = scheme.module_vectors(q_max=2 * np.pi * 1.5, kperp_max=0.8)
    vals = rng.random(len(peaks))
    sym = symmetrize(km.Pattern.from_array(vals, km.QGrid.points(peaks.q)), group, indices=peaks.indices,
                     scheme=scheme)
    want, _ = cartesian_means(peaks.q, vals, dihedral_ops(n))
    assert np.allclose(sym.intensity, want, rtol=1e-13)
    info = sym.metadata["symmetry"]
    # the mirror normal to the plane acts as the identity on in-plane indices: 2n actions
    assert info["n_operations_used"] == 4 * n and info["n_distinct_actions"] == 2 * n
    d = scheme.lattice_dim
    e0 = [1] + [0] * (d - 1)
    assert len(equivalent_reflections(e0, group, scheme=scheme)) == n       # on a mirror line: n
    general = [3, 1] + [0] * (d - 2)
    assert len(equivalent_reflections(general, group, scheme=scheme)) == 2 * n


def test_penrose_indices_that_differ_by_ones_are_one_peak(rng):
    scheme = quasi.penrose()
    peaks = scheme.module_vectors(q_max=2 * np.pi * 1.0, kperp_max=0.8)
    shifted = peaks.indices + np.where(rng.random(len(peaks)) < 0.5, 1, -2)[:, None]   # h + j(1,1,1,1,1)
    vals = rng.random(len(peaks))
    pat = km.Pattern.from_array(vals, km.QGrid.points(peaks.q))
    a = symmetrize(pat, "10/mmm", indices=peaks.indices, scheme=scheme)
    b = symmetrize(pat, "10/mmm", indices=shifted, scheme=scheme)
    assert np.allclose(a.intensity, b.intensity, rtol=1e-14)


def test_groups_that_are_not_symmetries_of_the_scheme_are_refused(ico):
    oct_scheme = quasi.octagonal()
    peaks = oct_scheme.module_vectors(q_max=2 * np.pi, kperp_max=0.8)
    pat = km.Pattern.from_array(np.ones(len(peaks)), km.QGrid.points(peaks.q))
    with pytest.raises(InvalidInputError, match="not a symmetry of the scheme"):
        symmetrize(pat, "12/mmm", indices=peaks.indices, scheme=oct_scheme)
    with pytest.raises(InvalidInputError, match="onto itself"):
        symmetrize(pat, "m-3-5", indices=peaks.indices, scheme=oct_scheme)
    with pytest.raises(InvalidInputError, match="needs `scheme=`"):
        symmetrize(pat, "8/mmm", indices=peaks.indices)
    with pytest.raises(InvalidInputError, match="not a symmetry"):
        point_group("8/mmm").index_operations(ico)


# ----------------------------------------------------------------------------- Å⁻¹ grids
def vertex_gaussians(q, width=0.35):
    """Σ over the 12 icosahedron vertices (0, ±1, ±τ)/|…| and cyclic permutations of a
    Gaussian: exactly invariant under m-3-5 (built here from the definition)."""
    v = np.array([[0, a, b * TAU] for a in (1, -1) for b in (1, -1)], dtype=float)
    v = np.vstack([v, v[:, [2, 0, 1]], v[:, [1, 2, 0]]])
    v /= np.linalg.norm(v, axis=1)[:, None]
    return sum(np.exp(-np.sum((q - u) ** 2, axis=-1) / (2 * width ** 2)) for u in v)


def test_volume_by_interpolation_within_the_stated_error(rng):
    n = 25
    grid = km.QGrid.volume([-1.5] * 3, [3, 0, 0], [0, 3, 0], [0, 0, 3], (n, n, n))
    q = grid.q_vectors().reshape(n, n, n, 3)
    exact = vertex_gaussians(q)
    sym = symmetrize(km.Pattern.from_array(exact, grid), "m-3-5")
    info = sym.metadata["symmetry"]
    assert info["method"] == "interpolation"
    est = info["interpolation"]
    err = sym.intensity - exact
    # the leading-order estimate bounds the error found against the exact function ...
    assert np.abs(err).max() <= 1.2 * est["error_max"]
    assert np.sqrt(np.mean(err ** 2)) <= 1.2 * est["error_rms"]
    # ... without being loose by more than a small factor
    assert np.sqrt(np.mean(err ** 2)) >= 0.3 * est["error_rms"]
    # noise averages down over the images (up to 120 per point)
    sigma = 0.05
    noisy = exact + sigma * rng.standard_normal(exact.shape)
    sym_noisy = symmetrize(km.Pattern.from_array(noisy, grid), "m-3-5")
    assert np.sqrt(np.mean((sym_noisy.intensity - exact) ** 2)) < 0.3 * sigma


def test_octagonal_plane_by_interpolation():
    n = 41
    z = 0.3    # a plane off the origin: the operations that flip z are not used
    grid = km.QGrid.plane([-2, -2, z], [4, 0, 0], [0, 4, 0], (n, n))
    q = grid.q_vectors().reshape(n, n, 3)
    centres = np.array([[math.cos(math.pi * j / 4 + 0.2), math.sin(math.pi * j / 4 + 0.2), 0] for j in range(8)])
    centres = np.vstack([centres, centres * [1, -1, 1]])        # 8mm-invariant set of 16 points
    exact = sum(np.exp(-np.sum((q[..., :2] - c[:2]) ** 2, axis=-1) / 0.18) for c in centres)
    sym = symmetrize(km.Pattern.from_array(exact, grid), "8/mmm")
    info = sym.metadata["symmetry"]
    assert info["n_operations_used"] == 16 and len(info["operations_not_mapping_grid"]) == 16
    inner = np.linalg.norm(q[..., :2], axis=-1) < 1.9       # images of the corners leave the grid
    err = np.abs(sym.intensity - exact)[inner]
    assert err.max() <= 1.2 * info["interpolation"]["error_max"]


def test_quasicrystal_groups_refuse_cells_and_hkl_grids():
    vol = km.QGrid.volume([-1] * 3, [2, 0, 0], [0, 2, 0], [0, 0, 2], (5, 5, 5))
    pat = km.Pattern.from_array(np.ones(vol.shape), vol)
    with pytest.raises(InvalidInputError, match="takes no `cell`"):
        symmetrize(pat, "m-3-5", cell=np.eye(3) * 4)
    hkl = km.QGrid.hkl(np.eye(3) * 4, h=(-1, 1, 3), k=(-1, 1, 3), l=0)
    with pytest.raises(InvalidInputError, match="does not act on h, k, l"):
        symmetrize(km.Pattern.from_array(np.ones(hkl.shape), hkl), "10/mmm")


def test_line_along_a_threefold_axis():
    # the operations of m-3-5 that map the [111] line onto itself form -3m (order 12;
    # textbook site symmetry of a 3-fold axis of the icosahedron); on the line they act as
    # the identity or the reversal
    line = km.QGrid.line([-1, -1, -1], [1, 1, 1], 7)
    vals = np.arange(7.0) ** 2
    sym = symmetrize(km.Pattern.from_array(vals, line), "m-3-5")
    assert np.allclose(sym.intensity, (vals + vals[::-1]) / 2, rtol=1e-13)
    info = sym.metadata["symmetry"]
    assert info["n_operations_used"] == 12 and info["n_distinct_actions"] == 2


def test_interpolation_fills_unmeasured_points():
    n = 21
    grid = km.QGrid.volume([-1.5] * 3, [3, 0, 0], [0, 3, 0], [0, 0, 3], (n, n, n))
    q = grid.q_vectors().reshape(n, n, n, 3)
    exact = vertex_gaussians(q)
    gap = (np.abs(q[..., 0] - 0.6) < 0.2) & (np.abs(q[..., 1]) < 0.3)     # a detector-gap-like slab
    measured = np.where(gap, np.nan, exact)
    sym = symmetrize(km.Pattern.from_array(measured, grid), "m-3-5")
    info = sym.metadata["symmetry"]
    assert info["n_points_filled"] == int(gap.sum())
    filled = sym.intensity[gap]
    assert np.isfinite(filled).all()
    # filled from images that avoid the gap: as close to the exact function as the estimate says
    assert np.abs(filled - exact[gap]).max() <= 1.2 * info["interpolation"]["error_max"]
