"""Model beside measurement: measured maps, point-group symmetrisation, scale and background,
agreement factors, residual maps, rankings of models and the 3D-ΔPDF.

* :func:`symmetrize` averages a map over a point group (Hermann–Mauguin symbol with an
  explicit setting; the 32 point groups, the 11 Laue classes and the quasicrystal groups
  m-3-5, 8/mmm, 10/mmm, 12/mmm) on hkl grids, Å⁻¹ grids and indexed peak lists, with R_int;
  :func:`point_group`, :func:`equivalent_reflections`, :func:`allowed_reflections`.
* :func:`open_map` / :func:`read_nxdata` read measured maps (any NeXus NXdata group, plain
  HDF5 datasets, .npy volumes); :func:`kinemap.load_pattern` falls back to them.
* :func:`compare` fits s and b of I_o ≈ s·I_c + b(|q|) by weighted linear least squares and
  reports R, R_b, wR, χ²_ν and R_exp overall and per |q| shell, with a residual map;
  :func:`rank_models` does it for several models; :func:`agreement` is the same on plain
  arrays of any shape (powder patterns, reflection lists).
* :func:`model_on_grid` computes a model where it is meaningful for a measured grid (on its
  box's reciprocal lattice, averaged into the measured voxels, or snapped).
* :class:`BraggExclusion` / :func:`bragg_mask` leave out the allowed reflections only.
* :func:`delta_pdf` gives the 3D-ΔPDF (Weber & Simonov 2012) of a map.
"""

from .agreement import BACKGROUNDS, FitWarning, agreement
from .bragg import CENTRINGS, BraggExclusion, allowed_by_centring, bragg_mask
from .comparison import Comparison
from .core import compare
from .dpdf import DeltaPDF, delta_pdf
from .figures import DEFINITIONS, Agreement, ShellTable
from .maps import MapSource
from .nexus import open_map, read_nxdata
from .output import comparison_figure, plot_comparison, save_comparison
from .pointgroups import LAUE_CLASSES, POINT_GROUPS, QUASICRYSTAL_GROUPS, PointGroup, point_group
from .ranking import Ranking, rank_models
from .sampling import SAMPLINGS, gaussian_resolution, model_on_grid
from .sym_reflections import CENTRING_CONDITIONS, allowed_reflections, equivalent_reflections
from .symmetry import BijvoetAveragingWarning, symmetrize

__all__ = [
    "compare", "rank_models", "Comparison", "Ranking",
    "agreement", "Agreement", "ShellTable", "FitWarning", "BACKGROUNDS", "DEFINITIONS",
    "BraggExclusion", "bragg_mask", "allowed_by_centring", "CENTRINGS",
    "delta_pdf", "DeltaPDF",
    "open_map", "read_nxdata", "MapSource",
    "save_comparison", "plot_comparison", "comparison_figure",
    "model_on_grid", "gaussian_resolution", "SAMPLINGS",
    "symmetrize", "point_group", "PointGroup", "equivalent_reflections", "allowed_reflections",
    "BijvoetAveragingWarning", "POINT_GROUPS", "LAUE_CLASSES", "QUASICRYSTAL_GROUPS", "CENTRING_CONDITIONS",
]
