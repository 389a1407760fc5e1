"""Run-time kernel levels of the core, its refusals, and the gridded sizing rules it exports.

References: the NumPy direct sum (``conftest.numpy_amplitude``) for the amplitudes; the
levels are compared with each other to 1e-13 relative (they differ only in rounding: fused
or separate multiply–add); the sizing rules with values worked out by hand from their
documented definition.
"""

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from conftest import numpy_amplitude

import kinemap as km
from kinemap import _core
from kinemap.errors import InvalidInputError

LEVELS = _core.kernel_levels()


def _rel(a, b):
    return np.linalg.norm(a - b) / np.linalg.norm(b)


@pytest.fixture
def problem(rng):
    pos = rng.uniform(0, 40, (700, 3))
    w = rng.uniform(0.5, 1.5, 700)
    atoms = _core.AtomSet(pos, w, np.zeros(700, np.uint32), 1)
    step = np.array([0.011, 0.004, -0.003])
    rows = np.array([[-3.0, 0.5, 0.2], [1.0, -2.0, 0.7]])
    n = 300
    q = (rows[:, None, :] + np.arange(n)[None, :, None] * step).reshape(-1, 3)
    return pos, w, atoms, rows, step, n, q


def test_levels_are_reported_and_the_baseline_is_always_there():
    assert LEVELS[-1] == "baseline"
    assert set(LEVELS) <= {"avx512", "avx2", "baseline"}
    assert _core.kernel_level() in LEVELS


@pytest.mark.parametrize("level", LEVELS)
def test_every_level_matches_numpy_and_the_baseline(problem, level):
    pos, w, atoms, rows, step, n, q = problem
    f = np.ones((1, len(q)), np.complex128)
    want = numpy_amplitude(pos, q, np.broadcast_to(w, (len(q), len(w))))
    grid = _core.grid_amplitudes(atoms, rows, step, n, f, kernel=level)
    point = _core.point_amplitudes(atoms, q, f, kernel=level)
    assert _rel(grid, want) < 1e-12
    assert _rel(point, want) < 1e-12
    base_g = _core.grid_amplitudes(atoms, rows, step, n, f, kernel="baseline")
    base_p = _core.point_amplitudes(atoms, q, f, kernel="baseline")
    assert _rel(grid, base_g) < 1e-13
    assert _rel(point, base_p) < 1e-13
    # One thread or two: bit-identical at every level.
    g2 = _core.grid_amplitudes(atoms, rows, step, n, f, threads=2, kernel=level)
    g1 = _core.grid_amplitudes(atoms, rows, step, n, f, threads=1, kernel=level)
    assert np.array_equal(g1, g2)


def test_unknown_levels_are_refused(problem):
    _, _, atoms, rows, step, n, q = problem
    f = np.ones((1, len(q)), np.complex128)
    with pytest.raises(InvalidInputError, match="avx512, avx2, baseline"):
        _core.point_amplitudes(atoms, q, f, kernel="sse9")


def _run(code: str, env: dict, limit_bytes: int | None = None):
    def limit():
        if limit_bytes is not None:
            import resource
            resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    full = dict(os.environ, **env)
    full["PYTHONPATH"] = os.pathsep.join(p for p in [os.path.dirname(os.path.dirname(km.__file__)),
                                                     full.get("PYTHONPATH", "")] if p)
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], env=full,
                          capture_output=True, text=True, timeout=120, preexec_fn=limit)


@pytest.mark.parametrize("level", LEVELS)
def test_the_environment_variable_forces_a_level(level):
    r = _run("from kinemap import _core; print(_core.kernel_level())", {"KINEMAP_KERNEL": level})
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == level


def test_an_unknown_level_in_the_environment_is_a_clear_error():
    code = """
        import numpy as np, kinemap as km
        from kinemap.errors import InvalidInputError
        try:
            km.scatter(km.Model(np.zeros((1, 3)), ["C"]), km.QGrid.line([0, 0, 0], [1, 0, 0], 5),
                       probe="unit", method="exact")
        except InvalidInputError as e:
            print("refused:", e)
    """
    r = _run(code, {"KINEMAP_KERNEL": "avx9000"})
    assert r.returncode == 0, r.stderr
    assert "refused:" in r.stdout and "KINEMAP_KERNEL" in r.stdout and "avx9000" in r.stdout


def test_positions_beyond_the_sincos_range_are_refused():
    # Issue 9: positions of 1e18 Å gave intensities of 1e39 instead of 1; now refused.
    model = km.Model(np.array([[1e18, 0.0, 0.0], [0.0, 0.0, 0.0]]), ["C", "C"])
    grid = km.QGrid.line([0.1, 0, 0], [2.0, 0, 0], 16)
    with pytest.raises(InvalidInputError, match="1e11 rad"):
        km.scatter(model, grid, probe="unit", method="exact")
    with pytest.raises(InvalidInputError, match="1e11 rad"):
        km.scatter(model, km.QGrid.points(grid.q_vectors(0, 16)), probe="unit", method="exact")


def test_an_impossible_fine_grid_is_a_memory_error_not_an_abort():
    # Issue 9: this plan's 600000² fine grid (5.4 TiB) aborted the process when allocated.
    plan = _core.RegularPlan(np.zeros(3), np.eye(3)[:2] * 1e-6, [300000, 300000], 1e-6, 2.0)
    with pytest.raises(MemoryError, match="fine grid"):
        plan.add(np.zeros((1, 3)), np.ones(1), np.zeros(1, np.uint32))


def test_gridded_volume_under_an_address_space_limit_fails_cleanly():
    # Issue 9: a gridded 256³ volume of a 2-atom model under `ulimit -v 1200000` (KiB)
    # aborted with "memory allocation of 268435456 bytes failed". It must raise instead.
    code = """
        import numpy as np, kinemap as km
        model = km.Model(np.array([[0.0, 0, 0], [1.5, 0, 0]]), ["C", "C"])
        grid = km.QGrid.volume([-4, -4, -4], [8, 0, 0], [0, 8, 0], [0, 0, 8], (256, 256, 256))
        try:
            km.scatter(model, grid, probe="unit", method="gridded", threads=1)
            print("computed")
        except (MemoryError, km.InvalidInputError) as e:  # refused up front, or by the core's allocation
            print("refused:", type(e).__name__, e)
    """
    r = _run(code, {}, limit_bytes=1_200_000 * 1024)
    assert r.returncode == 0, (r.returncode, r.stderr[-2000:])
    assert "refused:" in r.stdout or "computed" in r.stdout, r.stdout


@pytest.mark.parametrize("n, sigma, width, want", [
    (100, 2.0, 7, 200),   # 200 = 2³·5²
    (128, 2.25, 7, 288),  # 288 = 2⁵·3²
    (128, 2.0, 7, 270),   # 256 is a multiple of 64 above 128, skipped: 270 = 2·3³·5
    (3, 2.0, 7, 16),      # 2w = 14 = 2·7 is not 5-smooth
    (257, 1.25, 9, 324),  # ⌈321.25⌉ = 322 = 2·7·23 → 324 = 2²·3⁴
])
def test_fine_sizes_follow_the_documented_rule(n, sigma, width, want):
    assert _core.gridded_fine_size(n, sigma, width) == want


def test_point_dims_follow_the_margin_rule():
    # nf ≥ 2σ(S/2)(X/2)/π + w + 1 (Barnett, Magland & af Klinteberg 2019), rounded up to an even
    # 2,3,5-smooth size; by hand for σ = 2, w = 8, X = 100 Å, S = 8 Å⁻¹: 254.6 + 9 = 263.6
    # → 264 = 2³·3·11 no, 270 = 2·3³·5; second grid 2·270 = 540 = 2²·3³·5.
    d1, d2 = _core.gridded_point_dims(2.0, 8, [100.0, 100.0, 0.0], [8.0, 8.0, 8.0])
    assert d1 == [270, 270] and d2 == [540, 540]


def test_the_tolerance_range_is_the_cores():
    from kinemap._engine import gridded
    min_tol, max_width = _core.gridded_limits()
    assert (gridded.MIN_TOL, gridded.MAX_WIDTH) == (min_tol, max_width)
    assert min_tol == 1e-12 and max_width == 16  # documented in the gridded module notes
    assert not _core.gridded_usable(0.5 * min_tol, 2.0)
    model = km.Model(np.zeros((1, 3)), ["C"])
    with pytest.raises(InvalidInputError, match="below what the gridded path reaches"):
        km.scatter(model, km.QGrid.line([0, 0, 0], [1, 0, 0], 8), probe="unit",
                   method="gridded", tol=0.5 * min_tol)


def test_gridded_path_agrees_across_levels(rng):
    # The gridded spreading and interpolation run per level too; levels differ only in
    # rounding, far below the tolerance. Reference: the exact sum in this process.
    code = """
        import numpy as np, kinemap as km
        rng = np.random.default_rng(3)
        model = km.Model(rng.uniform(0, 30, (2000, 3)), ["Fe"] * 2000)
        grid = km.QGrid.plane([-2, -2, 0.3], [4, 0, 0], [0, 4, 0], (24, 20))
        a = km.scatter(model, grid, probe="unit", method="gridded", tol=1e-9).amplitude
        pts = km.QGrid.points(grid.q_vectors(0, 7 * 17))
        b = km.scatter(model, pts, probe="unit", method="gridded", tol=1e-9).amplitude
        import sys
        sys.stdout.buffer.write(np.concatenate([a.ravel(), b.ravel()]).astype(np.complex128).tobytes())
    """
    model = km.Model(np.random.default_rng(3).uniform(0, 30, (2000, 3)), ["Fe"] * 2000)
    grid = km.QGrid.plane([-2, -2, 0.3], [4, 0, 0], [0, 4, 0], (24, 20))
    exact = km.scatter(model, grid, probe="unit", method="exact").amplitude.ravel()
    exact_pts = exact[: 7 * 17]
    outs = {}
    for level in LEVELS:
        full = dict(os.environ, KINEMAP_KERNEL=level,
                    PYTHONPATH=os.path.dirname(os.path.dirname(km.__file__)))
        r = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], env=full,
                           capture_output=True, timeout=120)
        assert r.returncode == 0, r.stderr.decode()[-2000:]
        outs[level] = np.frombuffer(r.stdout, dtype=np.complex128)
        a, b = outs[level][: exact.size], outs[level][exact.size:]
        assert _rel(a, exact) < 1e-9
        assert _rel(b, exact_pts) < 1e-9
    for level in LEVELS:
        assert _rel(outs[level], outs["baseline"]) < 1e-12
