"""Point groups: orders, settings, symbols, cells and reflection orbits.

Outside references (see docs/references.md):
* orders of the 32 crystallographic point groups and which 11 are centrosymmetric:
  International Tables for Crystallography Vol. A, point-group tables (memory; the orders
  are the textbook facts |m-3m| = 48, |6/mmm| = 24, |4/mmm| = 16, ...);
* multiplicity factors of powder lines: Cullity & Stock, Elements of X-Ray Diffraction,
  3rd ed., appendix of multiplicity factors (memory);
* the symmetry directions of each position of a symbol (ITA Vol. A, memory), checked here by
  Cartesian rotations built in this file with Rodrigues' formula;
* the definition of a symmetry operation: it preserves h·x (phase) and the metric.
"""

import math

import numpy as np
import pytest

from kinemap.compare import LAUE_CLASSES, POINT_GROUPS, equivalent_reflections, point_group
from kinemap.errors import InvalidInputError
from kinemap.model import cell_from_parameters

# Textbook orders of the 32 point groups (ITA Vol. A; memory).
ORDERS = {
    "1": 1, "-1": 2, "2": 2, "m": 2, "2/m": 4, "222": 4, "mm2": 4, "mmm": 8,
    "4": 4, "-4": 4, "4/m": 8, "422": 8, "4mm": 8, "-42m": 8, "4/mmm": 16,
    "3": 3, "-3": 6, "321": 6, "3m1": 6, "-3m1": 12,
    "6": 6, "-6": 6, "6/m": 12, "622": 12, "6mm": 12, "-6m2": 12, "6/mmm": 24,
    "23": 12, "m-3": 24, "432": 24, "-43m": 24, "m-3m": 48,
}
# Other settings and orientations with their orders.
VARIANTS = {"2/m:c": 4, "2/m:a": 4, "1 1 2/m": 4, "2mm": 4, "m2m": 4, "-4m2": 8, "312": 6, "31m": 6,
            "-31m": 12, "-62m": 12, "3:R": 3, "-3:R": 6, "32:R": 6, "3m:R": 6, "-3m:R": 12}
# Proper rotation groups (textbook: the 11 groups without improper operations).
PROPER = {"1", "2", "222", "4", "422", "3", "321", "6", "622", "23", "432"}


def system_cell(g):
    """A cell of the group's crystal system with lengths and angles as free as the system allows."""
    system, setting = g.system, g.setting
    if system == "triclinic":
        return cell_from_parameters(3.1, 4.3, 5.7, 81.0, 97.0, 104.0)
    if system == "monoclinic":
        ang = {"a": (103.0, 90, 90), "b": (90, 103.0, 90), "c": (90, 90, 103.0)}[setting]
        return cell_from_parameters(3.1, 4.3, 5.7, *ang)
    if system == "orthorhombic":
        return np.diag([3.1, 4.3, 5.7])
    if system == "tetragonal":
        return np.diag([4.3, 4.3, 5.7])
    if system in ("hexagonal", "trigonal") and setting != "R":
        return cell_from_parameters(3.3, 3.3, 5.2, 90, 90, 120)
    if system == "trigonal":
        return cell_from_parameters(4.1, 4.1, 4.1, 77.0, 77.0, 77.0)
    return np.eye(3) * 4.2


@pytest.mark.parametrize("symbol,order", list(ORDERS.items()) + list(VARIANTS.items()))
def test_order_is_the_textbook_value_and_the_set_is_a_group(symbol, order):
    g = point_group(symbol)
    assert g.order == order  # ITA Vol. A (memory)
    ops = [np.asarray(w) for w in g.operations]
    keys = {w.tobytes() for w in ops}
    assert len(keys) == order
    # group axioms checked here, independently of the closure in the code
    for a in ops:
        assert abs(round(np.linalg.det(a))) == 1
        for b in ops:
            assert (a @ b).astype(np.int64).tobytes() in keys
    assert np.array_equal(ops[0], np.eye(3))


def test_the_eleven_centrosymmetric_groups_are_the_laue_classes():
    centro = {s for s in POINT_GROUPS if point_group(s).has_inversion}
    assert centro == set(LAUE_CLASSES) and len(centro) == 11  # textbook: 11 Laue classes
    assert len(POINT_GROUPS) == 32


@pytest.mark.parametrize("symbol", POINT_GROUPS)
def test_proper_groups_have_only_rotations(symbol):
    dets = {round(float(np.linalg.det(w))) for w in point_group(symbol).operations}
    assert (dets == {1}) == (symbol in PROPER)


@pytest.mark.parametrize("spellings", [
    ["m-3m", "m -3 m", "m3\u0304m", "4/m -3 2/m", "m3m", "m \u22123 m"],
    ["-43m", "\u22124 3 m", "4\u03053m"],
    ["4/mmm", "4/m m m", "4/m 2/m 2/m"],
    ["6/mmm", "6/m 2/m 2/m"],
    ["2/m:c", "1 1 2/m", "112/m"],
    ["-3m1", "-3 2/m 1"],
])
def test_spellings_name_the_same_group(spellings):
    sets = [{w.tobytes() for w in point_group(s).operations} for s in spellings]
    assert all(s == sets[0] for s in sets)


def test_setting_keyword_equals_the_suffix():
    a = point_group("2/m", setting="c")
    b = point_group("2/m:c")
    assert np.array_equal(a.operations, b.operations) and a.setting == b.setting == "c"
    assert point_group("2/m").setting == "b"  # unique axis b by default
    assert point_group("-3m", setting="R").order == 12


def test_monoclinic_unique_axis_b_versus_c():
    # 2-fold along b: (x, y, z) -> (-x, y, -z); reflections transform the same way for
    # orthogonal axes (hand-written from the definition of the operations)
    want_b = {(1, 2, 3), (-1, 2, -3), (1, -2, 3), (-1, -2, -3)}
    want_c = {(1, 2, 3), (-1, -2, 3), (1, 2, -3), (-1, -2, -3)}
    got_b = {tuple(r) for r in equivalent_reflections([1, 2, 3], "2/m").tolist()}
    got_c = {tuple(r) for r in equivalent_reflections([1, 2, 3], "2/m:c").tolist()}
    assert got_b == want_b and got_c == want_c


def rodrigues(axis, angle):
    u = np.asarray(axis, dtype=float)
    u = u / np.linalg.norm(u)
    k = np.array([[0, -u[2], u[1]], [u[2], 0, -u[0]], [-u[1], u[0], 0]])
    return np.eye(3) + math.sin(angle) * k + (1 - math.cos(angle)) * k @ k


def closure(gens):
    """All products of the generators (matrices compared after rounding to 1e-9)."""
    def key(m):
        return (np.round(m, 9) + 0.0).tobytes()
    ops = {key(np.eye(3)): np.eye(3)}
    frontier = [np.eye(3)]
    while frontier:
        new = []
        for a in frontier:
            for g in gens:
                p = a @ g
                if key(p) not in ops:
                    ops[key(p)] = p
                    new.append(p)
        frontier = new
    return list(ops.values())


def cartesian_orbit(hkl, cart_ops, cell):
    """Orbit of a reflection by rotating q = 2π B h in Cartesian space and reading h back."""
    recip = np.linalg.inv(cell).T          # rows a*, b*, c*
    q = np.asarray(hkl, float) @ recip
    out = set()
    for r in cart_ops:
        h = (r @ q) @ cell.T
        assert np.allclose(h, np.round(h), atol=1e-9)
        out.add(tuple(int(v) for v in np.round(h)))
    return out


def test_trigonal_orientations_differ_as_the_geometry_says():
    cell = cell_from_parameters(3.0, 3.0, 5.0, 90, 90, 120)   # a along x, b at 120°
    a, b = cell[0], cell[1]
    three = rodrigues([0, 0, 1], 2 * math.pi / 3)
    # -3m1: 2-fold axes along a ([100]); -31m: along a - b ([1-10]) (ITA symmetry directions)
    ops_m1 = closure([three, rodrigues(a, math.pi), -np.eye(3)])
    ops_1m = closure([three, rodrigues(a - b, math.pi), -np.eye(3)])
    assert len(ops_m1) == len(ops_1m) == 12
    for hkl in ([1, 0, 1], [2, 1, 3], [1, 1, 2]):
        want_m1 = cartesian_orbit(hkl, ops_m1, cell)
        want_1m = cartesian_orbit(hkl, ops_1m, cell)
        got_m1 = {tuple(r) for r in equivalent_reflections(hkl, "-3m1", cell).tolist()}
        got_1m = {tuple(r) for r in equivalent_reflections(hkl, "-31m", cell).tolist()}
        assert got_m1 == want_m1 and got_1m == want_1m
    assert cartesian_orbit([1, 0, 1], ops_m1, cell) != cartesian_orbit([1, 0, 1], ops_1m, cell)


# Multiplicity factors (Cullity & Stock, appendix; memory).
@pytest.mark.parametrize("group,cell,table", [
    ("m-3m", np.eye(3) * 4.0, {(1, 0, 0): 6, (1, 1, 0): 12, (1, 1, 1): 8, (2, 1, 0): 24, (2, 1, 1): 24,
                               (3, 2, 1): 48}),
    ("4/mmm", np.diag([4.0, 4.0, 6.0]), {(0, 0, 1): 2, (1, 0, 0): 4, (1, 1, 0): 4, (2, 1, 0): 8,
                                         (1, 0, 1): 8, (1, 1, 1): 8, (2, 1, 1): 16}),
    ("6/mmm", cell_from_parameters(3.0, 3.0, 5.0, 90, 90, 120),
     {(0, 0, 1): 2, (1, 0, 0): 6, (1, 1, 0): 6, (2, 1, 0): 12, (1, 0, 1): 12, (1, 1, 1): 12, (2, 1, 1): 24}),
])
def test_multiplicities_match_the_textbook_table(group, cell, table):
    for hkl, mult in table.items():
        orbit = equivalent_reflections(hkl, group, cell)
        assert len(orbit) == mult, hkl
        assert list(hkl) in orbit.tolist()


@pytest.mark.parametrize("symbol", list(ORDERS) + list(VARIANTS))
def test_a_general_reflection_has_as_many_equivalents_as_the_group_order(symbol):
    order = {**ORDERS, **VARIANTS}[symbol]
    assert len(equivalent_reflections([1, 3, 5], symbol)) == order  # general position: |G| images


@pytest.mark.parametrize("symbol", list(ORDERS) + list(VARIANTS))
def test_operations_keep_phases_and_the_metric(symbol, rng):
    g = point_group(symbol)
    cell = system_cell(g)
    g.check_cell(cell)
    x = rng.random((5, 3))
    h = rng.integers(-4, 5, size=(5, 3))
    recip = 2 * np.pi * np.linalg.inv(cell).T
    for w, t, r in zip(g.operations, g.hkl_operations, g.cartesian_operations(cell)):
        # a symmetry operation keeps the phase h·x: (T h)·(W x) = h·x
        assert np.allclose(((h @ t.T) * (x @ w.T)).sum(axis=1), (h * x).sum(axis=1), atol=1e-12)
        # in Cartesian form it is orthogonal and maps q(h) to q(T h)
        assert np.allclose(r.T @ r, np.eye(3), atol=1e-12)
        assert np.allclose((h @ t.T) @ recip, (h @ recip) @ r.T, atol=1e-12)


@pytest.mark.parametrize("symbol,cell,needs", [
    ("m-3m", np.diag([4.0, 4.0, 6.0]), "a = b = c"),
    ("432", cell_from_parameters(4, 4, 4, 90, 90, 91), "a = b = c"),
    ("6/mmm", np.eye(3) * 4.0, "gamma = 120"),
    ("4/mmm", np.diag([4.0, 4.1, 6.0]), "a = b"),
    ("2/m:c", cell_from_parameters(3, 4, 5, 90, 100, 90), "alpha = beta = 90"),
    ("-3m:R", cell_from_parameters(3, 3, 5, 90, 90, 120), "a = b = c"),
    ("mmm", cell_from_parameters(3, 4, 5, 90, 100, 90), "90"),
])
def test_a_cell_without_the_symmetry_is_refused(symbol, cell, needs):
    with pytest.raises(InvalidInputError, match=needs) as info:
        point_group(symbol).check_cell(cell)
    assert "does not have the symmetry of point group" in str(info.value)


def test_supported_cells_pass():
    point_group("2/m").check_cell(cell_from_parameters(3, 4, 5, 90, 100, 90))
    point_group("-3m:R").check_cell(cell_from_parameters(4, 4, 4, 70, 70, 70))
    point_group("6/mmm").check_cell(cell_from_parameters(3, 3, 5, 90, 90, 120))


@pytest.mark.parametrize("bad,match", [
    ("m-3mm", "too many positions"),
    ("7", "not made of the elements"),
    ("4/mmmm", "too many positions"),
    ("-3m", "ambiguous on hexagonal axes"),
    ("32", "ambiguous"),
    ("2/m:R", "does not apply"),
    ("-3m1:R", "one orientation"),
    ("3/m", "written -6"),
    ("", "empty"),
    ("m-3m:c", "takes no setting"),
    ("2/m:x", "unknown setting"),
    ("44", "not a point-group symbol"),
])
def test_bad_symbols_are_refused_clearly(bad, match):
    with pytest.raises(InvalidInputError, match=match):
        point_group(bad)


def test_non_text_group_is_refused():
    with pytest.raises(InvalidInputError, match="Hermann"):
        point_group(48)
    with pytest.raises(InvalidInputError, match="setting"):
        point_group(point_group("m-3m"), setting="b")


def test_equivalent_reflections_refuses_fractions_and_bad_cells():
    with pytest.raises(InvalidInputError, match="whole numbers"):
        equivalent_reflections([0.5, 0, 0], "m-3m")
    with pytest.raises(InvalidInputError, match="shape"):
        equivalent_reflections([1, 0], "m-3m")
    with pytest.raises(InvalidInputError, match="does not have the symmetry"):
        equivalent_reflections([1, 0, 0], "m-3m", np.diag([4.0, 4.0, 5.0]))


def test_acentric_groups_of_each_laue_class():
    # the non-centrosymmetric groups of a Laue class (ITA Vol. A; memory)
    assert set(point_group("m-3m").acentric_groups()) == {"432", "-43m"}
    assert set(point_group("m-3").acentric_groups()) == {"23"}
    assert set(point_group("6/mmm").acentric_groups()) == {"622", "6mm", "-6m2", "-62m"}
    assert set(point_group("4/mmm").acentric_groups()) == {"422", "4mm", "-42m", "-4m2"}
    assert set(point_group("mmm").acentric_groups()) == {"222", "mm2", "2mm", "m2m"}
    assert set(point_group("-3m1").acentric_groups()) == {"321", "3m1"}
    assert set(point_group("2/m:c").acentric_groups()) == {"2", "m"}


@pytest.mark.parametrize("symbol,order", [("m-3-5", 120), ("235", 60), ("8/mmm", 32), ("10/mmm", 40),
                                          ("12/mmm", 48), ("m35", 120), ("532", 60)])
def test_quasicrystal_group_orders(symbol, order):
    # |I_h| = 120, |I| = 60, |D_nh| = 4n (textbook)
    g = point_group(symbol)
    assert g.order == order
    for r in g.cartesian:
        assert np.allclose(r @ r.T, np.eye(3), atol=1e-12)
    assert not g.is_crystallographic
    with pytest.raises(InvalidInputError, match="crystallographic"):
        _ = g.hkl_operations


def test_icosahedral_axes_lie_where_kinemap_quasi_puts_them():
    g = point_group("m-3-5")
    tau = (1 + 5 ** 0.5) / 2
    five = rodrigues([0, 1, tau], 2 * math.pi / 5)
    assert any(np.allclose(r, five, atol=1e-9) for r in g.cartesian)
    for axis in np.eye(3):  # 2-fold axes along x, y, z
        assert any(np.allclose(r, rodrigues(axis, math.pi), atol=1e-9) for r in g.cartesian)


def test_index_lists_of_every_general_hkl_are_integers():
    for s in ORDERS:
        for t in point_group(s).hkl_operations:
            assert t.dtype == np.int64 and abs(round(np.linalg.det(t))) == 1


def test_groups_compare_by_their_operations():
    assert point_group("m-3m") == point_group("m3m") == point_group("4/m -3 2/m")
    assert point_group("-3m1") != point_group("-31m")
    assert point_group("2/m") != point_group("2/m:c")
    assert len({point_group("m-3m"), point_group("m -3 m"), point_group("432")}) == 2
