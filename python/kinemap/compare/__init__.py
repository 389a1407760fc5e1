"""Comparing computed maps with measured ones: point-group symmetrisation (this part),
measured maps, agreement factors and real-space comparison.

* :func:`symmetrize` — average a map over a point group (Hermann–Mauguin symbol with an
  explicit setting) on hkl grids, Å⁻¹ grids and indexed peak lists, with R_int;
* :func:`point_group`, :class:`PointGroup` — the 32 crystallographic point groups, the 11 Laue
  classes and the quasicrystal groups m-3-5, 8/mmm, 10/mmm, 12/mmm;
* :func:`equivalent_reflections` — the orbit of a reflection;
* :func:`allowed_reflections` — the reflections a lattice centring allows.
"""

from .pointgroups import LAUE_CLASSES, POINT_GROUPS, QUASICRYSTAL_GROUPS, PointGroup, point_group
from .sym_reflections import CENTRING_CONDITIONS, allowed_reflections, equivalent_reflections
from .symmetry import BijvoetAveragingWarning, symmetrize

__all__ = ["symmetrize", "point_group", "PointGroup", "equivalent_reflections", "allowed_reflections",
           "BijvoetAveragingWarning", "POINT_GROUPS", "LAUE_CLASSES", "QUASICRYSTAL_GROUPS",
           "CENTRING_CONDITIONS"]
