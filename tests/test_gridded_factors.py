"""The gridded path's group factors, evaluated by the core from a table in s = |q|/4π.

References: the probes' own per-point values (Waasmaier–Kirfel X-ray factors, Mott–Bethe
electron factors, neutron lengths, whose sources docs/references.md lists) and kinemap's
exact engine, which evaluates every factor at every q-point.
"""

import numpy as np
import pytest

import kinemap as km
from kinemap import _core
from kinemap._engine import factors
from kinemap.errors import InvalidInputError
from kinemap.model import Groups
from kinemap.qgrid import RegularGrid


def rel_l2(a, b):
    return float(np.linalg.norm(a - b) / np.linalg.norm(b))


def one_group(label, b=0.0):
    return Groups(index=np.zeros(0, np.uint32), labels=[label], b_iso=np.array([b]), u_aniso=None)


@pytest.mark.parametrize("probe,label,b", [("xray", "Fe", 0.7), ("xray", "O", 0.0), ("electron", "Ni", 0.4),
                                           ("neutron", "Ni", 0.4), ("xray", "H", 2.0)])
@pytest.mark.parametrize("tol", [1e-4, 1e-9, 1e-12])
def test_table_follows_the_probe_within_its_share_of_the_tolerance(probe, label, b, tol):
    p = km.get_probe(probe)
    s_lo, s_hi = 0.0, 1.6
    values, s0, h = factors.group_table(p, one_group(label, b), 0, s_lo, s_hi, tol)
    s = np.random.default_rng(0).uniform(s_lo, s_hi, 20000)
    want = p.scattering_factors([label], s)[0] * np.exp(-b * s * s)
    got = _core.factor_table_eval(values, s0, h, s)
    bound = max(factors.TABLE_SHARE * tol, factors.TABLE_FLOOR)
    scale = np.maximum(np.abs(want), 1e-3 * np.abs(want).max())
    # The check points are inside every interval; allow 2× for points between them.
    assert np.all(np.abs(got - want) <= 2 * bound * scale)
    assert len(values) <= factors.TABLE_MAX_NODES


def test_a_factor_with_kinks_is_left_to_per_point_evaluation():
    # Linear interpolation between a few samples has kinks that no cubic table follows to
    # 1e-10: group_table says so, and the gridded path evaluates that group per point.
    s_samples = np.linspace(0.0, 2.0, 9)
    probe = km.probes.CustomProbe(grids={"X": (s_samples, 5.0 / (1.0 + s_samples**2))}, constants={"Y": 2.5})
    assert factors.group_table(probe, one_group("X"), 0, 0.0, 1.5, 1e-10) is None
    assert factors.group_table(probe, one_group("Y"), 0, 0.0, 1.5, 1e-10) is not None
    rng = np.random.default_rng(3)
    model = km.Model(rng.uniform(0, 15, (600, 3)), rng.choice(["X", "Y"], 600))
    grid = km.QGrid.plane([0.2, -0.5, 0.3], [2.5, 0.4, -0.3], [-0.2, 2.1, 0.6], (31, 27))
    exact = km.scatter(model, grid, probe=probe, method="exact").amplitude
    got = km.scatter(model, grid, probe=probe, method="gridded", tol=1e-10).amplitude
    assert rel_l2(got, exact) <= 1e-10


@pytest.mark.filterwarnings("ignore::kinemap.KinematicApproximationWarning")
@pytest.mark.parametrize("probe", ["xray", "electron", "neutron"])
def test_grid_through_the_origin_matches_the_exact_engine(probe):
    # q = 0 lies on this hkl grid: the electron factor's s → 0 limit comes from the table.
    rng = np.random.default_rng(4)
    model = km.Model(rng.uniform(0, 18, (800, 3)), rng.choice(["Fe", "Al", "O"], 800),
                     b_iso={"Fe": 0.5, "Al": 0.8, "O": 1.1})
    grid = km.QGrid.hkl(np.diag([3.0, 3.0, 3.0]), h=(-4, 4, 33), k=(-4, 4, 33), l=0)
    exact = km.scatter(model, grid, probe=probe, method="exact").amplitude
    got = km.scatter(model, grid, probe=probe, method="gridded", tol=1e-11).amplitude
    assert rel_l2(got, exact) <= 1e-11


def test_one_modulus_for_all_points():
    # Two points q and −q: one |q|, a constant table.
    rng = np.random.default_rng(6)
    model = km.Model(rng.uniform(0, 10, (300, 3)), "Fe", b_iso=0.3)
    grid = km.QGrid.line([-1.0, 0.5, 0.2], [1.0, -0.5, -0.2], 2)
    exact = km.scatter(model, grid, method="exact").amplitude
    got = km.scatter(model, grid, method="gridded", tol=1e-9).amplitude
    assert rel_l2(got, exact) <= 1e-9


def test_regular_grids_never_form_their_q_vectors_in_python(monkeypatch):
    def refuse(*_a, **_k):
        raise AssertionError("q-vectors or |q| were formed in Python")

    monkeypatch.setattr(RegularGrid, "q_vectors", refuse)
    monkeypatch.setattr(RegularGrid, "q_norms", refuse)
    rng = np.random.default_rng(7)
    u = {"Fe": [[0.01, 0.002, 0], [0.002, 0.02, 0], [0, 0, 0.015]], "O": np.eye(3) * 0.02}
    model = km.Model(rng.uniform(0, 12, (400, 3)), rng.choice(["Fe", "O"], 400), u_aniso=u)
    grid = km.QGrid.volume([-1.0, -1.1, 0.3], [2.0, 0.1, 0.0], [0.0, 2.1, 0.2], [0.1, 0.0, 1.9], (9, 10, 11))
    pat = km.scatter(model, grid, method="gridded", tol=1e-8)
    monkeypatch.undo()
    exact = km.scatter(model, grid, method="exact").amplitude
    assert rel_l2(pat.amplitude, exact) <= 1e-8


def test_bad_tables_are_refused_with_the_node():
    with pytest.raises(InvalidInputError, match="node 1"):
        _core.factor_table_eval(np.array([1, np.nan, 2, 3], dtype=complex), 0.0, 0.1, np.array([0.05]))
    with pytest.raises(InvalidInputError, match="at least 4"):
        _core.factor_table_eval(np.ones(3, dtype=complex), 0.0, 0.1, np.array([0.05]))
    plan = _core.RegularPlan(np.zeros(3), np.eye(3)[:1].copy(), [8], 1e-6, 2.0)
    plan.add(np.zeros((1, 3)), np.ones(1), np.zeros(1, np.uint32))
    with pytest.raises(InvalidInputError, match="one value per grid point"):
        plan.finish_into(0, np.zeros(7, complex), np.ones(4, complex), 0.0, 0.1)
    with pytest.raises(InvalidInputError, match="`u`"):
        plan.finish_into(0, np.zeros(8, complex), np.ones(4, complex), 0.0, 0.1, u=np.eye(2))


def test_q_beyond_the_probe_table_is_refused_naming_the_grid_range():
    model = km.Model(np.random.default_rng(0).uniform(0, 10, (3000, 3)), "Fe")
    grid = km.QGrid.line([0, 0, 0], [90, 0, 0], 4001)
    with pytest.raises(InvalidInputError, match=r"q-points reach s = sinθ/λ = 7.16.*'Fe'.*s <= 6"):
        km.scatter(model, grid, method="gridded")
