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
from .errors import InvalidInputError, KinemapError, ModelFileError
from .model import Model
from .pattern import Pattern, load_pattern
from .probes import get_probe
from .qgrid import QGrid
from .scatter import KinematicApproximationWarning, scatter
from .io import open_model, write_h5md
from .frames import FrameAverages, average_frames
from .powder import PairDistribution, PowderCautionWarning, PowderPattern, pair_distribution, powder

__all__ = [
    "__version__",
    "Model",
    "QGrid",
    "Pattern",
    "scatter",
    "load_pattern",
    "get_probe",
    "KinemapError",
    "InvalidInputError",
    "ModelFileError",
    "KinematicApproximationWarning",
    "open_model",
    "write_h5md",
    "average_frames",
    "FrameAverages",
    "powder",
    "pair_distribution",
    "PowderPattern",
    "PairDistribution",
    "PowderCautionWarning",
]
