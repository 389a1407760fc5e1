"""kinemap: kinematic X-ray, neutron and electron diffraction from atomistic models.

Conventions: lengths in Å, Cartesian positions; q in Å⁻¹ with |q| = 4π sinθ/λ; form factors
take s = sinθ/λ = |q|/4π; A(q) = Σ_j o_j f_j(s) T_j exp(+i q·r_j); I = |A|².

>>> import kinemap as km
>>> model = km.Model([[0, 0, 0]], "Fe")
>>> pattern = km.scatter(model, km.QGrid.line([0, 0, 0], [4, 0, 0], 5))
>>> pattern.intensity.shape
(5,)
"""

from ._core import __version__
from .compare import BraggExclusion, compare, delta_pdf, open_map, rank_models, symmetrize
from .errors import InvalidInputError, KinemapError, ModelFileError
from .frames import FrameAverages, average_frames
from .geometry import Detector, bin_frames, expected_counts, read_frames
from .io import open_model, write_h5md
from .model import AtomSource, Model
from .pattern import Pattern, load_pattern
from .powder import (
    PairDistribution,
    PowderCautionWarning,
    PowderPattern,
    compare_pdf,
    compare_powder,
    pair_distribution,
    powder,
)
from .probes import get_probe
from .qgrid import QGrid
from .scatter import KinematicApproximationWarning, OffLatticeWarning, scatter

__all__ = [
    "__version__",
    "Model",
    "AtomSource",
    "QGrid",
    "Pattern",
    "scatter",
    "load_pattern",
    "get_probe",
    "KinemapError",
    "InvalidInputError",
    "ModelFileError",
    "KinematicApproximationWarning",
    "OffLatticeWarning",
    "open_model",
    "write_h5md",
    "average_frames",
    "FrameAverages",
    "Detector",
    "expected_counts",
    "bin_frames",
    "read_frames",
    "compare",
    "rank_models",
    "open_map",
    "delta_pdf",
    "BraggExclusion",
    "symmetrize",
    "powder",
    "pair_distribution",
    "PowderPattern",
    "PairDistribution",
    "PowderCautionWarning",
    "compare_powder",
    "compare_pdf",
]

# Sub-packages with heavier imports (matplotlib, scipy) load on first use: km.plot, km.quasi.
_LAZY = ("plot", "quasi", "io", "geometry", "frames")


def __getattr__(name):
    if name in _LAZY:
        import importlib

        return importlib.import_module(f".{name}", __name__)
    raise AttributeError(f"module 'kinemap' has no attribute {name!r}")
