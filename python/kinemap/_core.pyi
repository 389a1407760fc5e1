"""Type stub of the compiled core (rust/kinemap-py).

PyO3 classes are built by ``__new__`` (they have no ``__init__``) and cannot be subclassed
(``@final``). Parameter names and kinds follow the ``#[pyo3(signature = ...)]`` of each
binding; arrays must already be C-contiguous with the dtype shown (the Python wrappers convert
them). Checked against the built module by ``python -m mypy.stubtest kinemap._core``.
"""

from collections.abc import Sequence
from typing import final

import numpy as np
import numpy.typing as npt
from typing_extensions import Self

__all__ = [
    "factor_table_eval",
    "grid_amplitudes",
    "gridded_fine_size",
    "gridded_limits",
    "gridded_point_dims",
    "gridded_upsample_choices",
    "gridded_usable",
    "gridded_kernel_width",
    "PointPlan",
    "RegularPlan",
    "debye_sums",
    "pair_index",
    "PairHistogram",
    "AtomSet",
    "kernel_level",
    "kernel_levels",
    "point_amplitudes",
    "__version__",
]

__version__: str

@final
class AtomSet:
    """Atoms grouped by scattering factor, structure of arrays (positions Å, weights, groups)."""

    def __new__(
        cls,
        positions: npt.NDArray[np.float64],
        weights: npt.NDArray[np.float64],
        groups: npt.NDArray[np.uint32],
        n_groups: int,
    ) -> Self: ...
    @property
    def n_atoms(self) -> int: ...
    @property
    def n_groups(self) -> int: ...

def point_amplitudes(
    atoms: AtomSet,
    q: npt.NDArray[np.float64],
    factors: npt.NDArray[np.complex128],
    *,
    threads: int | None = None,
    kernel: str | None = None,
) -> npt.NDArray[np.complex128]: ...
def grid_amplitudes(
    atoms: AtomSet,
    rows: npt.NDArray[np.float64],
    step: npt.NDArray[np.float64],
    n: int,
    factors: npt.NDArray[np.complex128],
    *,
    threads: int | None = None,
    kernel: str | None = None,
) -> npt.NDArray[np.complex128]: ...
def kernel_level() -> str:
    """The kernel level in use: "avx512", "avx2" or "baseline" (KINEMAP_KERNEL or the CPU's best)."""
def kernel_levels() -> list[str]:
    """The kernel levels this CPU can run, best first."""

@final
class RegularPlan:
    """Gridded (spreading + FFT) plan for a regular grid; one fine grid per slot (group)."""

    def __new__(
        cls,
        origin: npt.NDArray[np.float64],
        steps: npt.NDArray[np.float64],
        shape: Sequence[int],
        tol: float,
        upsample: float,
    ) -> Self: ...
    @property
    def fine_len(self) -> int: ...
    @property
    def fine_dims(self) -> tuple[int, int, int]: ...
    @property
    def width(self) -> int: ...
    def add(
        self,
        positions: npt.NDArray[np.float64],
        weights: npt.NDArray[np.float64],
        slots: npt.NDArray[np.uint32],
        *,
        threads: int | None = None,
    ) -> None: ...
    def finish(self, slot: int, *, threads: int | None = None) -> npt.NDArray[np.complex128]: ...
    def finish_into(
        self,
        slot: int,
        out: npt.NDArray[np.complex128],
        table: npt.NDArray[np.complex128],
        s0: float,
        h: float,
        *,
        u: npt.NDArray[np.float64] | None = None,
        threads: int | None = None,
    ) -> None:
        """Add F(q)·S(q) of the slot to `out`, F = table(|q|/4π)·exp(−½ qᵀUq) (cubic interpolation)."""
    def s_range(self, *, threads: int | None = None) -> tuple[float, float]:
        """Smallest and largest s = |q|/4π over the points (Å⁻¹)."""

@final
class PointPlan:
    """Gridded type-3 plan for arbitrary q-points inside the box [lo, hi] of positions."""

    def __new__(
        cls,
        q: npt.NDArray[np.float64],
        lo: npt.NDArray[np.float64],
        hi: npt.NDArray[np.float64],
        tol: float,
        upsample: float,
    ) -> Self: ...
    @property
    def fine_lens(self) -> tuple[int, int]: ...
    @property
    def fine_dims(self) -> tuple[tuple[int, int, int], tuple[int, int, int]]: ...
    @property
    def width(self) -> int: ...
    def add(
        self,
        positions: npt.NDArray[np.float64],
        weights: npt.NDArray[np.float64],
        slots: npt.NDArray[np.uint32],
        *,
        threads: int | None = None,
    ) -> None: ...
    def finish(self, slot: int, *, threads: int | None = None) -> npt.NDArray[np.complex128]: ...
    def finish_into(
        self,
        slot: int,
        out: npt.NDArray[np.complex128],
        table: npt.NDArray[np.complex128],
        s0: float,
        h: float,
        *,
        u: npt.NDArray[np.float64] | None = None,
        threads: int | None = None,
    ) -> None:
        """Add F(q)·S(q) of the slot to `out`, F = table(|q|/4π)·exp(−½ qᵀUq) (cubic interpolation)."""
    def s_range(self, *, threads: int | None = None) -> tuple[float, float]:
        """Smallest and largest s = |q|/4π over the points (Å⁻¹)."""

def factor_table_eval(
    table: npt.NDArray[np.complex128], s0: float, h: float, s: npt.NDArray[np.float64]
) -> npt.NDArray[np.complex128]:
    """The factor table (values at s0 + k·h) interpolated at `s` as the gridded read-out does."""
def gridded_kernel_width(tol: float, upsample: float, *, points: bool = False) -> int: ...
def gridded_limits() -> tuple[float, int]:
    """(min_tol, max_width): the tightest tolerance and widest kernel of the gridded path."""
def gridded_upsample_choices(points: bool = False) -> list[float]: ...
def gridded_usable(tol: float, upsample: float, *, points: bool = False) -> bool: ...
def gridded_fine_size(n: int, upsample: float, width: int) -> int: ...
def gridded_point_dims(
    upsample: float,
    width: int,
    extent: Sequence[float],
    qrange: Sequence[float],
) -> tuple[list[int], list[int]]: ...

@final
class PairHistogram:
    """Weighted pair-distance histograms per unordered group pair on nodes k·dr (Å)."""

    def __new__(
        cls,
        n_groups: int,
        n_nodes: int,
        dr: float,
        cutoff: float | None = None,
        box: npt.NDArray[np.float64] | None = None,
    ) -> Self: ...
    @property
    def n_groups(self) -> int: ...
    @property
    def n_pairs(self) -> int: ...
    @property
    def n_nodes(self) -> int: ...
    @property
    def dr(self) -> float: ...
    @property
    def pairs_counted(self) -> int: ...
    def add_within(
        self,
        positions: npt.NDArray[np.float64],
        groups: npt.NDArray[np.uint32],
        weights: npt.NDArray[np.float64],
        *,
        threads: int | None = None,
    ) -> None: ...
    def add_between(
        self,
        positions_a: npt.NDArray[np.float64],
        groups_a: npt.NDArray[np.uint32],
        weights_a: npt.NDArray[np.float64],
        positions_b: npt.NDArray[np.float64],
        groups_b: npt.NDArray[np.uint32],
        weights_b: npt.NDArray[np.float64],
        *,
        threads: int | None = None,
    ) -> None: ...
    def values(self) -> npt.NDArray[np.float64]: ...

def debye_sums(
    hist: npt.NDArray[np.float64],
    dr: float,
    q: npt.NDArray[np.float64],
    *,
    threads: int | None = None,
) -> npt.NDArray[np.float64]: ...
def pair_index(g: int, h: int, n_groups: int) -> int: ...
