"""The exact engine against outside references.

References: an independent NumPy direct sum (the definition of the kinematic amplitude);
Waasmaier & Kirfel (1995) form factors as carried by `periodictable.cromermann`; textbook
structure-factor rules (Warren, "X-ray Diffraction", ch. 4 — memory) and the check values of
docs/references.md (Crystals); the Fibonacci model-set transform (Baake & Grimm, Aperiodic Order Vol. 1 —
memory) with the check values of docs/references.md (Quasicrystals); Friedel's law.
"""

import threading
import time

import numpy as np
import periodictable.cromermann as wk
import pytest
from conftest import numpy_amplitude

import kinemap as km
from kinemap import InvalidInputError

TAU = (1 + 5**0.5) / 2


def wk_f0(symbol, s):
    """Waasmaier–Kirfel f0(s) from periodictable (outside reference for the X-ray factors)."""
    return wk.fxrayatstol(symbol, np.asarray(s))


def random_model(rng, n=400):
    pos = rng.uniform(-8.0, 12.0, size=(n, 3))
    species = rng.choice(["Fe", "Ni", "O"], size=n)
    occ = rng.uniform(0.3, 1.0, size=n)
    b = rng.choice([0.0, 0.45, 1.2], size=n)
    return km.Model(pos, species, occupancy=occ, b_iso=b), pos, species, occ, b


def reference_amplitude(pos, species, occ, b, q):
    s = np.linalg.norm(q, axis=1) / (4 * np.pi)
    w = np.empty((len(q), len(pos)))
    for sym in np.unique(species):
        sel = species == sym
        w[:, sel] = wk_f0(sym, s)[:, None] * occ[sel] * np.exp(-np.outer(s * s, b[sel]))
    return numpy_amplitude(pos, q, w)


def rel_err(a, b):
    return np.max(np.abs(a - b)) / np.max(np.abs(b))


GRIDS = {
    "points": lambda: km.QGrid.points(np.random.default_rng(5).uniform(-4, 4, size=(7, 9, 3))),
    "line": lambda: km.QGrid.line([-3.0, 0.2, 0.1], [4.0, -1.0, 2.0], 257),
    "plane": lambda: km.QGrid.plane([-2.0, -2.5, 0.3], [4.0, 0.5, -0.2], [0.3, 5.0, 0.4], (23, 31)),
    "volume": lambda: km.QGrid.volume([-1.0, -1.0, -1.0], [2.0, 0, 0.1], [0, 2.5, 0], [0.2, 0, 3.0], (7, 9, 11)),
    "hkl": lambda: km.QGrid.hkl([[4.1, 0, 0], [0.6, 3.9, 0], [0.2, 0.3, 5.2]], h=(-2, 2, 17), k=(-1, 3, 13), l=0.5),
}


@pytest.mark.parametrize("kind", sorted(GRIDS))
def test_amplitudes_match_numpy_direct_sum(kind, rng):
    # Reference: NumPy direct sum with WK f0 (periodictable), occupancy and exp(-B s²).
    model, pos, species, occ, b = random_model(rng)
    grid = GRIDS[kind]()
    pat = km.scatter(model, grid, probe="xray", method="exact")
    q = grid.q_vectors()
    want = reference_amplitude(pos, species, occ, b, q).reshape(grid.shape)
    assert pat.amplitude.shape == grid.shape == pat.intensity.shape
    assert rel_err(pat.amplitude, want) <= 1e-10
    np.testing.assert_allclose(pat.intensity, np.abs(want) ** 2, rtol=1e-9, atol=1e-9 * np.abs(want).max() ** 2)


def test_grid_path_equals_point_path_over_long_rows(rng):
    # Drift check of phase stepping: 400 steps along the row axis (reference: the point path,
    # one fresh sincos per pair).
    model, *_ = random_model(rng, 300)
    grid = km.QGrid.plane([-6.0, 0.3, 0.2], [12.0, 0.7, 0.1], [0.0, 0.5, 0.4], (400, 3))
    a = km.scatter(model, grid, method="exact").amplitude
    b = km.scatter(model, km.QGrid.points(grid.q_vectors()), method="exact").amplitude.reshape(grid.shape)
    assert rel_err(a, b) <= 1e-11


def wk_rocksalt(h, k, l, a=5.6402):
    s = np.sqrt(h * h + k * k + l * l) / (2 * a)
    return wk_f0("Na", [s])[0], wk_f0("Cl", [s])[0]


def rocksalt(a=5.6402, reps=(1, 1, 1)):
    fcc = np.array([[0, 0, 0], [0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]])
    frac, species = [], []
    for i in range(reps[0]):
        for j in range(reps[1]):
            for k in range(reps[2]):
                for t in fcc:
                    frac += [t + (i, j, k), t + (0.5, 0, 0) + (i, j, k)]
                    species += ["Na", "Cl"]
    cell = np.diag([a * reps[0], a * reps[1], a * reps[2]])
    frac = np.array(frac) / np.array(reps)
    return km.Model(frac, species, cell=cell, fractional=True)


def test_rocksalt_rules_and_reference_values():
    # Warren ch. 4 (memory): F = 4(fA+fB) all even, 4(fA−fB) all odd, 0 mixed. Check values
    # F(111) = −18.0160, F(200) = 85.3961 from docs/references.md, Crystals (a = 5.6402 Å, WK f0, no B).
    model = rocksalt()
    hkls = np.array([[1, 1, 1], [2, 0, 0], [2, 2, 0], [3, 1, 1], [1, 0, 0], [2, 1, 0], [1, 1, 0], [3, 2, 1]])
    grid = km.QGrid.points(2 * np.pi * hkls / 5.6402)
    F = km.scatter(model, grid, probe="xray").amplitude
    for (h, k, l), f in zip(hkls, F):
        fa, fb = wk_rocksalt(h, k, l)
        if h % 2 == k % 2 == l % 2:
            want = 4 * (fa + fb) if h % 2 == 0 else 4 * (fa - fb)
            assert abs(f - want) < 1e-9 * abs(want)
        else:
            assert abs(f) < 1e-10
    assert abs(F[0] - (-18.0160)) < 5e-5 and abs(F[0].imag) < 1e-10
    assert abs(F[1] - 85.3961) < 5e-5


def test_supercell_laue_function():
    # Laue function: an M1×M2×M3 supercell gives M1M2M3·F at the cell's reciprocal points and
    # zero at the supercell's other reciprocal points (docs/references.md, Crystals).
    reps = (2, 3, 2)
    big = rocksalt(reps=reps)
    grid = km.QGrid.hkl(big.cell, h=(0, 4, 5), k=(0, 6, 7), l=(2, 2, 1))  # supercell indices
    F = km.scatter(big, grid).amplitude
    cell_hkl = km.QGrid.hkl(np.diag([5.6402] * 3), h=(0, 2, 3), k=(0, 2, 3), l=1.0)
    F1 = km.scatter(rocksalt(), cell_hkl).amplitude
    for i in range(5):
        for j in range(7):
            if i % 2 == 0 and j % 3 == 0:
                assert abs(F[i, j] - 12 * F1[i // 2, j // 3]) < 1e-9 * max(1.0, abs(F1[i // 2, j // 3]) * 12)
            else:
                assert abs(F[i, j]) < 1e-9


def fibonacci_positions(n):
    k = np.arange(n)
    return k + (TAU - 1) * np.floor((k + 1) / TAU)


@pytest.mark.parametrize("hh, want", [((0, 1), 0.701998), ((1, 0), 0.335745), ((1, 1), 0.878991), ((2, 1), 0.0)])
def test_fibonacci_chain_matches_window_transform(hh, want):
    # Model-set theory (Baake & Grimm; check values of docs/references.md): per-point amplitude at
    # k = (h + h'τ)/√5 tends to |sin(πτk*)/(πτk*)|; an arbitrary length N within about 1/N.
    n = 5000
    x = fibonacci_positions(n)
    model = km.Model(np.column_stack([x, np.zeros(n), np.zeros(n)]), "X")
    h, hp = hh
    k = (h + hp * TAU) / 5**0.5
    grid = km.QGrid.points([[2 * np.pi * k, 0.0, 0.0]])
    a = abs(km.scatter(model, grid, probe="unit").amplitude[0]) / n
    kperp = (hp / TAU - h) / 5**0.5
    analytic = abs(np.sinc(TAU * kperp))  # numpy sinc(x) = sin(πx)/(πx)
    assert abs(analytic - want) < 1e-6
    assert abs(a - analytic) <= 2.0 / n


def test_friedel_and_translation(rng):
    # Friedel's law for real form factors: |A(q)| = |A(−q)|; |A|² invariant under translation.
    model, *_ = random_model(rng, 200)
    q = rng.uniform(-3, 3, size=(50, 3))
    a = km.scatter(model, km.QGrid.points(q)).amplitude
    b = km.scatter(model, km.QGrid.points(-q)).amplitude
    np.testing.assert_allclose(a, np.conj(b), rtol=1e-11, atol=1e-11 * np.abs(a).max())
    moved = model.translated([3.7, -11.2, 0.4])
    c = km.scatter(moved, km.QGrid.points(q)).amplitude
    np.testing.assert_allclose(np.abs(c) ** 2, np.abs(a) ** 2, rtol=1e-10, atol=1e-10 * np.abs(a).max() ** 2)


@pytest.mark.parametrize("kind", ["points", "plane"])
def test_threads_and_chunks_do_not_change_results(kind, rng):
    model, *_ = random_model(rng, 1500)
    grid = GRIDS[kind]()
    one = km.scatter(model, grid, threads=1).amplitude
    two = km.scatter(model, grid, threads=2).amplitude
    assert np.array_equal(one, two)  # each q is summed by one thread in a fixed order
    chunked = km.scatter(model, grid, threads=2, chunk_atoms=97).amplitude
    assert rel_err(chunked, one) <= 1e-12


def test_env_thread_setting(monkeypatch, rng):
    model, *_ = random_model(rng, 50)
    monkeypatch.setenv("KINEMAP_NUM_THREADS", "zero")
    with pytest.raises(InvalidInputError, match="KINEMAP_NUM_THREADS"):
        km.scatter(model, GRIDS["line"]())
    monkeypatch.setenv("KINEMAP_NUM_THREADS", "1")
    km.scatter(model, GRIDS["line"]())


def test_progress_callback_reports_all_pairs(rng):
    model, *_ = random_model(rng, 300)
    grid = GRIDS["plane"]()
    calls = []
    km.scatter(model, grid, progress=lambda done, total: calls.append((done, total)), chunk_atoms=100)
    assert calls and calls[-1][0] == calls[-1][1] == 300 * grid.size
    assert all(b[0] >= a[0] for a, b in zip(calls, calls[1:]))


@pytest.mark.parametrize(
    "make, match",
    [
        (lambda: km.Model([[0, 0, 0], [1, np.nan, 0]], "Fe"), "atom 1"),
        (lambda: km.Model([[0, 0], [1, 1]], "Fe"), r"\(N, 3\)"),
        (lambda: km.Model([[0, 0, 0]], ["Fe", "O"]), "one per atom"),
        (lambda: km.Model([[0, 0, 0], [1, 1, 1]], "Fe", occupancy=[1.0, 1.2]), "occupancy.*atom 1"),
        (lambda: km.Model([[0, 0, 0], [1, 1, 1]], "Fe", occupancy=[-0.1, 1]), "occupancy.*atom 0"),
        (lambda: km.Model([[0, 0, 0], [1, 1, 1]], "Fe", b_iso=[0.3, -1]), "b_iso.*atom 1"),
        (lambda: km.Model([[0, 0, 0]], "Fe", b_iso=1, u_iso=0.01), "not both"),
        (lambda: km.Model([[0, 0, 0]], "Fe", fractional=True), "cell"),
    ],
)
def test_bad_models_raise_clear_errors(make, match):
    with pytest.raises(InvalidInputError, match=match):
        make()


def test_bad_scatter_arguments():
    m = km.Model([[0, 0, 0]], "Fe")
    g = km.QGrid.line([0, 0, 0], [1, 0, 0], 3)
    with pytest.raises(InvalidInputError, match="Qq"):
        km.scatter(km.Model([[0, 0, 0]], "Qq"), g)
    with pytest.raises(InvalidInputError, match="no atoms"):
        km.scatter(km.Model(np.zeros((0, 3)), []), g)
    with pytest.raises(InvalidInputError, match="method"):
        km.scatter(m, g, method="fastest")
    with pytest.raises(InvalidInputError, match="threads"):
        km.scatter(m, g, threads=0)
    with pytest.raises(InvalidInputError, match="grid"):
        km.scatter(m, [[0, 0, 0]])
    with pytest.raises(InvalidInputError, match="q-point 1"):
        km.QGrid.points([[0, 0, 0], [np.inf, 0, 0]])
    with pytest.raises(InvalidInputError, match="shape"):
        km.QGrid.plane([0, 0, 0], [1, 0, 0], [0, 1, 0], (3,))


def test_oversized_grid_is_refused_before_allocating():
    m = km.Model([[0, 0, 0]], "Fe")
    g = km.QGrid.volume([0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1], (100_000, 100_000, 1000))
    with pytest.raises(InvalidInputError, match=r"would need about .*(TiB|PiB|EiB).*may only allocate"):
        km.scatter(m, g)


def test_core_rejects_non_contiguous_and_wrong_shapes():
    from kinemap import _core

    with pytest.raises(InvalidInputError, match="positions"):
        _core.AtomSet(np.zeros((4, 2)), np.ones(4), np.zeros(4, np.uint32), 1)
    with pytest.raises(InvalidInputError, match="weights"):
        _core.AtomSet(np.zeros((4, 3)), np.ones(3), np.zeros(4, np.uint32), 1)
    atoms = _core.AtomSet(np.zeros((4, 3)), np.ones(4), np.zeros(4, np.uint32), 1)
    with pytest.raises(InvalidInputError, match="contiguous"):
        _core.point_amplitudes(atoms, np.zeros((6, 3))[::2], np.ones((1, 3), complex))
    with pytest.raises(InvalidInputError, match="factors"):
        _core.point_amplitudes(atoms, np.zeros((3, 3)), np.ones((2, 3), complex))


def test_gil_is_released_during_a_kernel_call():
    # Another Python thread must make progress while one long core call runs.
    from kinemap import _core

    rng = np.random.default_rng(1)
    n, m = 100_000, 4096
    atoms = _core.AtomSet(rng.uniform(0, 50, (n, 3)), np.ones(n), np.zeros(n, np.uint32), 1)
    q = rng.uniform(-2, 2, (m, 3))
    f = np.ones((1, m), complex)
    window = {}

    def work():
        window["start"] = time.perf_counter()
        _core.point_amplitudes(atoms, q, f, threads=1)
        window["end"] = time.perf_counter()

    t = threading.Thread(target=work)
    stamps = []
    t.start()
    while t.is_alive():
        stamps.append(time.perf_counter())
    t.join()
    inside = [s for s in stamps if window["start"] < s < window["end"]]
    # Were the GIL held for the call (~0.3 s of work), this loop could not run at all inside it
    # (at most one iteration at each end). Ten iterations prove overlap even on a busy machine,
    # where the loop may get far fewer turns than on an idle one.
    assert len(inside) > 10, f"only {len(inside)} iterations ran during the call"
