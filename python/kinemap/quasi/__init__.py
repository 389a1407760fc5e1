"""Quasicrystal models for kinemap: cut-and-project generators, analytic transforms,
the substitution recursion, and higher-dimensional peak indexing.

Generators (each a :class:`CutProjectScheme`; stream points with ``iter_points`` or
``iter_positions``, gather them with ``positions``/``points``, build a :class:`kinemap.Model`
with ``model`` or ``points(...).to_model``, or hand ``source(radius)`` to
:func:`kinemap.scatter` to stream a patch that is never held whole):

* :func:`fibonacci`, :func:`metallic_chain` — 1-D substitution chains (also by
  substitution: ``word``, ``substitution_points``; transform by recursion:
  :func:`chain_transform`);
* :func:`octagonal` (Ammann–Beenker, Z⁴), :func:`penrose` (rhombic, Z⁵),
  :func:`icosahedral` (Ammann–Kramer, Z⁶);
* ``scheme.approximant(p/q)`` — periodic approximants (τ → F_{n+1}/F_n, √2 → Pell ratios);
* :mod:`kinemap.quasi.decorate` — species by perpendicular-space position or vertex type,
  phonon and phason disorder, tile counting.

Analytic reference: ``scheme.module(h)`` (k, k⊥ and q = 2πk for integer indices h) and
``scheme.amplitude(h)`` (window transform, the limit of A/N).

Indexing: :func:`find_peaks`, :func:`index_peaks` (table, plot, verdict),
:func:`inflation_check`.

Conventions: lengths in Å; q = 2πk in Å⁻¹ with kinemap's exp(+i q·r); chains lie on x,
planar sets in the xy-plane.
"""

from .chains import ChainScheme, chain_transform, fibonacci, fibonacci_model, metallic_chain
from .decorate import (coordination, count_tiles, neighbour_signature, phason_debye_waller, phason_jitter_points,
                       phonon_displacements, species_by_coordination, species_by_perp, tile_volumes)
from .peaks import (IndexingResult, InflationCheck, Peaks, find_peaks, index_peaks, inflation_check, kperp_bound,
                    plot_indexed)
from .scheme import CutProjectScheme, ModuleVectors, PointSet, StreamingPatch
from .tilings import (SILVER, TAU, fibonacci_ratio, icosahedral, icosahedral_approximant, icosahedral_model,
                      octagonal, octagonal_model, pell_ratio, penrose, penrose_model)
from .windows import (IntervalWindow, PolygonWindow, PolyhedronWindow, SlicedWindow, Window,
                      exp_divided_differences)

__all__ = [
    "CutProjectScheme", "PointSet", "ModuleVectors", "StreamingPatch", "ChainScheme",
    "fibonacci", "metallic_chain", "fibonacci_model", "chain_transform",
    "octagonal", "penrose", "icosahedral", "octagonal_model", "penrose_model", "icosahedral_model",
    "icosahedral_approximant", "fibonacci_ratio", "pell_ratio", "TAU", "SILVER",
    "species_by_perp", "species_by_coordination", "coordination", "neighbour_signature", "count_tiles",
    "tile_volumes", "phonon_displacements", "phason_jitter_points", "phason_debye_waller",
    "Peaks", "find_peaks", "IndexingResult", "index_peaks", "InflationCheck", "inflation_check", "plot_indexed",
    "kperp_bound",
    "Window", "IntervalWindow", "PolygonWindow", "PolyhedronWindow", "SlicedWindow", "exp_divided_differences",
]
