"""Grid conventions of DESIGN.md: linspace-like lines, corner + full edges for planes and
volumes, q = 2π(h a* + k b* + l c*) with a*·a = 1 for hkl grids (International Tables Vol. B,
reciprocal lattice — memory)."""

import numpy as np
import pytest

import kinemap as km
from kinemap import InvalidInputError


def test_line_is_like_linspace():
    g = km.QGrid.line([0, 1, 2], [3, 1, -2], 7)
    want = np.linspace([0, 1, 2], [3, 1, -2], 7)  # numpy.linspace: both ends included
    np.testing.assert_allclose(g.q_vectors(), want, atol=1e-15)
    assert g.shape == (7,)


def test_plane_and_volume_use_corner_and_full_edges():
    u, v, w = np.array([2.0, 0, 0]), np.array([0, 3.0, 0.5]), np.array([0.1, 0, 1.0])
    g = km.QGrid.plane([1, 1, 1], u, v, (3, 4))
    q = g.q_vectors().reshape(3, 4, 3)
    np.testing.assert_allclose(q[-1, -1], [1, 1, 1] + u + v, atol=1e-14)
    np.testing.assert_allclose(q[1, 2], [1, 1, 1] + u / 2 + 2 * v / 3, atol=1e-14)
    g3 = km.QGrid.volume([0, 0, 0], u, v, w, (2, 3, 5))
    q3 = g3.q_vectors().reshape(2, 3, 5, 3)
    np.testing.assert_allclose(q3[1, 2, 4], u + v + w, atol=1e-14)


def test_hkl_grid_reciprocal_lattice():
    cell = np.array([[4.0, 0, 0], [1.0, 5.0, 0], [0.5, 0.3, 6.0]])
    g = km.QGrid.hkl(cell, h=(-1, 1, 3), k=2, l=(0, 2, 5))
    assert g.shape == (3, 5) and g.axis_names == ["h", "l"]
    q = g.q_vectors().reshape(3, 5, 3)
    # q·a = 2πh, q·b = 2πk, q·c = 2πl (definition of the reciprocal basis, a*·a = 1)
    hkl = q @ cell.T / (2 * np.pi)
    np.testing.assert_allclose(hkl[0, 4], [-1, 2, 2], atol=1e-12)
    np.testing.assert_allclose(hkl[2, 1], [1, 2, 0.5], atol=1e-12)
    np.testing.assert_allclose(g.hkl_values()[7], hkl.reshape(-1, 3)[7], atol=1e-12)


def test_silicon_111_position():
    # docs/references.md, Crystals: Si (111), a = 5.431020511 Å: d = 3.135601 Å, q = 2.003822 Å⁻¹.
    a = 5.431020511
    g = km.QGrid.hkl(np.eye(3) * a, h=1, k=1, l=1)
    q = np.linalg.norm(g.q_vectors()[0])
    assert abs(q - 2.003822) < 1e-6 and abs(2 * np.pi / q - 3.135601) < 1e-6


@pytest.mark.parametrize(
    "make, match",
    [
        (lambda: km.QGrid.line([0, 0], [1, 0, 0], 3), "start"),
        (lambda: km.QGrid.line([0, 0, 0], [1, 0, 0], 0), ">= 1"),
        (lambda: km.QGrid.line([0, 0, 0], [1, 0, 0], 2.5), "whole number"),
        (lambda: km.QGrid.hkl(np.eye(3), h=(0, 1)), "lo, hi, n"),
        (lambda: km.QGrid.hkl(np.zeros((3, 3)), h=1), "singular"),
        (lambda: km.QGrid.points(np.zeros((4, 2))), r"\(\.\.\., 3\)"),
    ],
)
def test_bad_grids(make, match):
    with pytest.raises(InvalidInputError, match=match):
        make()
