"""Type stub of the compiled core (rust/kinemap-py)."""

import numpy as np
import numpy.typing as npt

__version__: str

class AtomSet:
    """Atoms grouped by scattering factor, structure of arrays (positions Å, weights, groups)."""

    def __init__(
        self,
        positions: npt.NDArray[np.float64],
        weights: npt.NDArray[np.float64],
        groups: npt.NDArray[np.uint32],
        n_groups: int,
    ) -> None: ...
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
) -> npt.NDArray[np.complex128]: ...
def grid_amplitudes(
    atoms: AtomSet,
    rows: npt.NDArray[np.float64],
    step: npt.NDArray[np.float64],
    n: int,
    factors: npt.NDArray[np.complex128],
    *,
    threads: int | None = None,
) -> npt.NDArray[np.complex128]: ...
