"""Powder patterns (Debye equation) and pair distribution functions of atomistic models.

* :func:`powder` — I(Q), S(Q), F(Q) on a |Q| axis from binned pair-distance histograms
  computed in the Rust core (parallel, streamed, identical for any thread count).
* :func:`pair_distribution` — G(r), g(r) and the partial g_αβ(r), directly from the
  histograms or through a computed F(Q) over a chosen Q range.
* :func:`compare_powder`, :func:`compare_pdf` — a computed pattern or G(r) beside a measured
  one (:func:`read_profile`: text columns, .npy or NeXus), with the agreement factors of the
  map comparison.
"""

from ._pairs import DEFAULT_CHUNK_ATOMS
from ._results import PairDistribution, PowderPattern
from .debye import PowderCautionWarning, powder
from .measured import compare_pdf, compare_powder, read_profile
from .pdf import pair_distribution

__all__ = ["powder", "pair_distribution", "PowderPattern", "PairDistribution", "PowderCautionWarning",
           "DEFAULT_CHUNK_ATOMS", "compare_powder", "compare_pdf", "read_profile"]
