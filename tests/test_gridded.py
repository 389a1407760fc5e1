"""The gridded fast path against exact sums: numpy's direct evaluation of the defining sum
(an outside reference) and kinemap's exact engine (method="exact"), as the issue asks."""

import numpy as np
import pytest

import kinemap as km
from kinemap._engine import gridded
from kinemap.errors import InvalidInputError

TOLS = [1e-3, 1e-6, 1e-9, 1e-12]


def rel_l2(a, b):
    return float(np.linalg.norm(a - b) / np.linalg.norm(b))


def numpy_amplitude(pos, occ, b_iso, q):
    """Reference: A(q) = Σ_j o_j exp(−B_j s²) exp(i q·r_j) with f = 1 (probe "unit"), s = |q|/4π,
    evaluated directly with numpy."""
    s2 = (np.linalg.norm(q, axis=1) / (4 * np.pi)) ** 2
    return (occ[None, :] * np.exp(-b_iso[None, :] * s2[:, None]) * np.exp(1j * q @ pos.T)).sum(axis=1)


@pytest.fixture(scope="module")
def unit_model():
    rng = np.random.default_rng(0)
    n = 1500
    pos = rng.uniform(-12, 18, (n, 3)) * [1.0, 0.8, 1.2]
    occ = rng.uniform(0.3, 1.0, n)
    b = rng.choice([0.0, 0.5, 1.2], n)
    return km.Model(pos, "X", occupancy=occ, b_iso=b), pos, occ, b


def grids():
    rng = np.random.default_rng(1)
    cell = np.array([[4.1, 0.0, 0.0], [0.9, 3.8, 0.0], [0.4, -0.6, 5.2]])  # triclinic
    return {
        # a plane not aligned with any axis, off-origin
        "tilted-plane": km.QGrid.plane([0.31, -0.7, 0.45], [2.2, 1.1, -0.9], [-0.6, 1.7, 1.3], (41, 29)),
        "volume": km.QGrid.volume([-1.5, -1.0, 0.2], [3.0, 0.3, 0.0], [0.2, 2.4, 0.3], [0.0, -0.2, 1.8],
                                  (17, 15, 13)),
        "line": km.QGrid.line([0.1, 0.2, -1.0], [1.5, -0.4, 2.0], 301),
        "hkl": km.QGrid.hkl(cell, h=(-3, 3, 31), k=(-2, 2, 21), l=0.5),
        "hkl-volume": km.QGrid.hkl(cell, h=(-2, 2, 11), k=(-2, 2, 11), l=(-1, 1, 7)),
        "points": km.QGrid.points(rng.uniform(-2.0, 2.0, (700, 3))),
    }


GRIDS = grids()


@pytest.mark.parametrize("name", list(GRIDS))
@pytest.mark.parametrize("tol", TOLS)
def test_error_against_numpy_sum_is_within_tol(unit_model, name, tol):
    model, pos, occ, b = unit_model
    grid = GRIDS[name]
    want = numpy_amplitude(pos, occ, b, grid.q_vectors()).reshape(grid.shape)
    got = km.scatter(model, grid, probe="unit", method="gridded", tol=tol).amplitude
    assert got.shape == grid.shape and got.dtype == np.complex128
    assert rel_l2(got, want) <= tol, (name, tol, rel_l2(got, want))


@pytest.fixture(scope="module")
def xray_model():
    rng = np.random.default_rng(2)
    n = 2000
    pos = rng.uniform(0, 25, (n, 3))
    species = rng.choice(["Fe", "Ni", "O"], n)
    b = rng.choice([0.3, 0.9], n)
    return km.Model(pos, species, occupancy=rng.uniform(0.5, 1, n), b_iso=b)


@pytest.mark.parametrize("name", ["tilted-plane", "hkl", "points"])
@pytest.mark.parametrize("tol", TOLS)
def test_error_against_exact_engine_with_species_and_debye_waller(xray_model, name, tol):
    grid = GRIDS[name]
    exact = km.scatter(xray_model, grid, probe="xray", method="exact").amplitude
    got = km.scatter(xray_model, grid, probe="xray", method="gridded", tol=tol)
    assert got.metadata["method"] == "gridded" and got.metadata["tolerance"] == tol
    assert rel_l2(got.amplitude, exact) <= tol


def test_anisotropic_displacements(xray_model):
    # Reference: kinemap's exact engine with T(q) = exp(−½ qᵀUq).
    u = {"Fe": [[0.01, 0.002, 0], [0.002, 0.02, 0], [0, 0, 0.015]], "Ni": np.eye(3) * 0.01,
         "O": np.eye(3) * 0.03}
    m = km.Model(xray_model.positions, xray_model.species, u_aniso=u)
    grid = GRIDS["volume"]
    exact = km.scatter(m, grid, method="exact").amplitude
    assert rel_l2(km.scatter(m, grid, method="gridded", tol=1e-8).amplitude, exact) <= 1e-8


@pytest.mark.parametrize("name", ["volume", "points"])
def test_one_and_two_threads_give_identical_maps(xray_model, name):
    grid = GRIDS[name]
    a = km.scatter(xray_model, grid, method="gridded", tol=1e-6, threads=1).amplitude
    b = km.scatter(xray_model, grid, method="gridded", tol=1e-6, threads=2).amplitude
    np.testing.assert_array_equal(a, b)  # fixed spreading order: bit-identical


@pytest.mark.parametrize("name", ["tilted-plane", "points"])
def test_chunk_size_changes_only_rounding(xray_model, name):
    grid = GRIDS[name]
    whole = km.scatter(xray_model, grid, method="gridded", tol=1e-9).amplitude
    chunked = km.scatter(xray_model, grid, method="gridded", tol=1e-9, chunk_atoms=333).amplitude
    assert rel_l2(chunked, whole) <= 1e-12


class ChunkedSource:
    """A streaming atom source whose chunks carry different subsets of the groups."""

    def __init__(self, model, sizes):
        self.model, self.sizes = model, sizes
        self.n_atoms = model.n_atoms
        self.cell = self.box = None

    def species_labels(self):
        return self.model.species_labels()

    def describe(self):
        return self.model.describe()

    def iter_chunks(self, chunk_atoms):
        start = 0
        for n in self.sizes:
            yield self.model.subset(slice(start, start + n))
            start += n


def test_streamed_chunks_with_changing_groups_accumulate():
    # Chunk 1 holds only Fe (B 0.5), chunk 2 only Ni and O, chunk 3 Fe with another B.
    rng = np.random.default_rng(5)
    pos = rng.uniform(0, 20, (900, 3))
    species = np.array(["Fe"] * 300 + ["Ni", "O"] * 150 + ["Fe"] * 300)
    b = np.r_[np.full(300, 0.5), np.full(300, 0.2), np.full(300, 1.1)]
    model = km.Model(pos, species, b_iso=b)
    grid = GRIDS["tilted-plane"]
    exact = km.scatter(model, grid, method="exact").amplitude
    got = km.scatter(ChunkedSource(model, [300, 300, 300]), grid, method="gridded", tol=1e-10).amplitude
    assert rel_l2(got, exact) <= 1e-10


def test_progress_reports_every_chunk(xray_model):
    calls = []
    km.scatter(xray_model, GRIDS["line"], method="gridded", tol=1e-6, chunk_atoms=500,
               progress=lambda done, total: calls.append((done, total)))
    m = GRIDS["line"].size
    assert [c[0] for c in calls] == [500 * m, 1000 * m, 1500 * m, 2000 * m]
    assert all(c[1] == 2000 * m for c in calls)


def test_single_point_grid(xray_model):
    # A single reflection (all of h, k, l fixed): the sum itself.
    grid = km.QGrid.hkl(np.eye(3) * 5.0, h=1, k=2, l=0)
    exact = km.scatter(xray_model, grid, method="exact").amplitude
    got = km.scatter(xray_model, grid, method="gridded", tol=1e-9).amplitude
    assert got.shape == () and rel_l2(got, exact) <= 1e-9


def test_auto_picks_by_cost():
    # Extremes where the choice does not hang on the cost model's constants: 100 atoms × 64
    # points is 6400 pairs (microseconds exactly, while any FFT plan costs more); 10⁷ atoms ×
    # 2·10⁶ points is 2·10¹³ pairs (over half an hour even at 10¹⁰ pairs/s) against about
    # 10⁷·w³ kernel points for spreading plus FFTs of ~10⁷ points (seconds).
    small = km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (8, 8))
    big = km.QGrid.volume([0, 0, 0], [4, 0, 0], [0, 4, 0], [0, 0, 4], (128, 128, 128))
    assert gridded.choose(100, small, 1e-6) == "exact"
    assert gridded.choose(10**7, big, 1e-6) == "gridded"
    assert gridded.choose(10**6, big, 1e-12) == "gridded"
    assert gridded.choose(10**6, big, 1e-15) == "exact"  # below the kernel's reach
    # Arbitrary points: a narrow q-cloud favours the gridded path, few points the exact one.
    rng = np.random.default_rng(0)
    many = km.QGrid.points(rng.uniform(-1, 1, (10**6, 3)))
    assert gridded.choose(10**6, many, 1e-6) == "gridded"
    assert gridded.choose(10**6, km.QGrid.points(rng.uniform(-1, 1, (50, 3))), 1e-6) == "exact"


def test_auto_method_is_recorded_and_accurate(xray_model):
    # Whichever path auto takes, the result meets the tolerance against the exact sum.
    p = km.scatter(xray_model, GRIDS["line"], method="auto", tol=1e-8)
    exact = km.scatter(xray_model, GRIDS["line"], method="exact").amplitude
    assert rel_l2(p.amplitude, exact) <= 1e-8
    assert p.metadata["method_requested"] == "auto"
    assert p.metadata["tolerance"] == (1e-8 if p.metadata["method"] == "gridded" else 0.0)


def test_unreachable_tolerance_is_refused(xray_model):
    with pytest.raises(InvalidInputError, match="tol"):
        km.scatter(xray_model, GRIDS["line"], method="gridded", tol=1e-15)


def test_fine_grids_that_do_not_fit_are_refused(xray_model, monkeypatch):
    import kinemap._shared.memory as res

    monkeypatch.setattr(res, "available_memory", lambda: 50 << 20)
    monkeypatch.setattr(gridded, "available_memory", lambda: 50 << 20)
    grid = km.QGrid.volume([0, 0, 0], [3, 0, 0], [0, 3, 0], [0, 0, 3], (160, 160, 160))
    with pytest.raises(InvalidInputError, match="would need about"):
        gridded.gridded_amplitudes(xray_model, grid, km.get_probe("xray"), tol=1e-6)


@pytest.mark.parametrize("q", [
    [[0.3, -0.2, 0.9]],                                      # one point: every axis drops out
    [[t, 0.5, -0.4] for t in np.linspace(-2, 2, 57)],        # points on a line along x
    [[0.2 * t, -0.1 * t, 0.7] for t in np.linspace(-9, 9, 41)],  # a tilted line in a plane
])
def test_degenerate_point_sets(unit_model, q):
    model, pos, occ, b = unit_model
    q = np.asarray(q, dtype=float)
    want = numpy_amplitude(pos, occ, b, q)
    got = km.scatter(model, km.QGrid.points(q), probe="unit", method="gridded", tol=1e-9).amplitude
    assert rel_l2(got, want) <= 1e-9


def test_atoms_in_a_plane_and_on_one_site():
    # Atoms with one coordinate shared (a monolayer), and all atoms on one site: axes of zero
    # extent drop out of the arbitrary-point transform. Reference: numpy's direct sum.
    rng = np.random.default_rng(9)
    q = rng.uniform(-1.5, 1.5, (300, 3))
    for pos in (np.c_[rng.uniform(0, 30, (400, 2)), np.full(400, 2.5)], np.tile([1.0, 2.0, 3.0], (50, 1))):
        occ = np.ones(len(pos))
        want = numpy_amplitude(pos, occ, np.zeros(len(pos)), q)
        got = km.scatter(km.Model(pos, "X"), km.QGrid.points(q), probe="unit", method="gridded",
                         tol=1e-9).amplitude
        assert rel_l2(got, want) <= 1e-9
