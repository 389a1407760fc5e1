"""Quasicrystal models for kinemap: cut-and-project generators, analytic transforms,
the substitution recursion, and higher-dimensional peak indexing.

Generators (each a :class:`CutProjectScheme`):

* :func:`fibonacci`, :func:`metallic_chain` — 1-D substitution chains (also by
  substitution: ``word``, ``substitution_points``; transform by recursion:
  :func:`chain_transform`);
* :func:`octagonal` (Ammann–Beenker, Z⁴), :func:`penrose` (rhombic, Z⁵),
  :func:`icosahedral` (Ammann–Kramer, Z⁶);
* ``scheme.approximant(p/q)`` — periodic approximants (τ → F_{n+1}/F_n, √2 → Pell ratios);
* :mod:`kinemap.quasi.decorate` — species by perpendicular-space position or vertex type,
  phonon and phason disorder, tile counting.

Atoms: ``scheme.patch(radius, species=...)`` is the one way to make atoms of a scheme: a
:class:`Patch` that follows :class:`kinemap.model.AtomSource` (hand it to
:func:`kinemap.scatter`, which streams it chunk by chunk, or call ``.read()`` for a
:class:`kinemap.Model`); ``approximant.patch(cells=(n1, n2))`` is a periodic block of an
approximant with its box. Points with their internal coordinates (for decoration and
analysis): ``scheme.points``, ``iter_points``, ``unit_cell``, ``approximant_block``.

Analytic reference: ``scheme.module(h)`` (k, k⊥ and q = 2πk for integer indices h) and
``scheme.amplitude(h)`` (window transform, the limit of A/N).

Indexing: :func:`find_peaks`, :func:`index_peaks` (table, plot, verdict),
:func:`inflation_check`.

Conventions: lengths in Å; q = 2πk in Å⁻¹ with kinemap's exp(+i q·r); chains lie on x,
planar sets in the xy-plane.

Modules: points, scheme, patch, approximants, chains, tilings, decorate (generators);
windows, polyhedron, _simplex, _window_base (windows and their transforms); _enumerate (the
strip search); _precise (extended precision); find, index, index_result, inflation,
drawing (peaks).
"""

from .chains import ChainScheme, chain_transform, fibonacci, metallic_chain
from .decorate import (
    coordination,
    count_tiles,
    neighbour_signature,
    phason_debye_waller,
    phason_jitter_points,
    phonon_displacements,
    species_by_coordination,
    species_by_perp,
    tile_volumes,
)
from .drawing import plot_indexed
from .find import Peaks, find_peaks
from .index import index_peaks, kperp_bound
from .index_result import IndexingResult
from .inflation import InflationCheck, inflation_check
from .patch import Patch
from .points import ModuleVectors, PointSet
from .scheme import CutProjectScheme
from .tilings import SILVER, TAU, fibonacci_ratio, icosahedral, icosahedral_approximant, octagonal, pell_ratio, penrose
from .windows import IntervalWindow, PolygonWindow, PolyhedronWindow, SlicedWindow, Window, exp_divided_differences

__all__ = [
    "CutProjectScheme", "PointSet", "ModuleVectors", "Patch", "ChainScheme",
    "fibonacci", "metallic_chain", "chain_transform",
    "octagonal", "penrose", "icosahedral",
    "icosahedral_approximant", "fibonacci_ratio", "pell_ratio", "TAU", "SILVER",
    "species_by_perp", "species_by_coordination", "coordination", "neighbour_signature", "count_tiles",
    "tile_volumes", "phonon_displacements", "phason_jitter_points", "phason_debye_waller",
    "Peaks", "find_peaks", "IndexingResult", "index_peaks", "InflationCheck", "inflation_check", "plot_indexed",
    "kperp_bound",
    "Window", "IntervalWindow", "PolygonWindow", "PolyhedronWindow", "SlicedWindow", "exp_divided_differences",
]
