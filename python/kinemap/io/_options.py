"""The options every reader takes: ``species=``, ``cell=``, ``supercell=`` (see
:mod:`kinemap.io._base` and :mod:`kinemap.io._species`)."""

from __future__ import annotations

import re
from typing import TypeVar

import numpy as np

from ..errors import InvalidInputError
from ..model import as_cell, cell_from_parameters, supercell_matrix
from ._base import FileSource, SourceOptions
from ._species import species_supply

_Source = TypeVar("_Source", bound=FileSource)


def _numbers(text: str, name: str) -> list[float]:
    parts = [p for p in re.split(r"[,\s]+", text.strip()) if p]
    try:
        return [float(p) for p in parts]
    except ValueError:
        raise InvalidInputError(f"`{name}` {text!r} must be numbers separated by commas") from None


def parse_cell(cell) -> np.ndarray | None:
    """A cell from a 3x3 array of rows a, b, c (Å), six lattice parameters
    (a, b, c in Å, alpha, beta, gamma in degrees), three lengths (a rectangular cell), or
    text of such numbers, e.g. ``"3.6,3.6,3.6,90,90,90"``.

    Raises
    ------
    InvalidInputError
        Anything else, or numbers that do not make a cell.
    """
    if cell is None:
        return None
    if isinstance(cell, str):
        cell = _numbers(cell, "cell")
    try:
        arr = np.asarray(cell, dtype=np.float64)
    except (TypeError, ValueError):
        raise InvalidInputError(f"`cell` must be a 3x3 array, six lattice parameters or three lengths, got {cell!r}") from None
    if arr.shape == (6,):
        return cell_from_parameters(*arr.tolist())
    if arr.shape == (3,):
        a, b, c = arr.tolist()
        cell_from_parameters(a, b, c, 90.0, 90.0, 90.0)  # refuses lengths that are not positive
        return np.diag(arr)  # exact zeros off the diagonal
    if arr.shape == (3, 3):
        return as_cell(arr, "cell")
    raise InvalidInputError(f"`cell` must be a 3x3 array (rows a, b, c), six lattice parameters a,b,c,alpha,beta,gamma "
                            f"or three lengths, got shape {arr.shape}")


def parse_supercell(supercell) -> np.ndarray | None:
    """The integer matrix P (box = P·cell) from (n1, n2, n3), a 3x3 integer array, or text
    such as ``"4,4,4"`` (nine numbers for a matrix, row by row).

    Raises
    ------
    InvalidInputError
        Non-integer or singular P.
    """
    if supercell is None:
        return None
    if isinstance(supercell, str):
        nums = _numbers(supercell, "supercell")
        if len(nums) == 9:
            supercell = np.array(nums).reshape(3, 3)
        elif len(nums) == 1:
            supercell = nums * 3
        else:
            supercell = nums
    return supercell_matrix(supercell)


def configure(source: _Source, *, species=None, cell=None, supercell=None, species_map=None,
              allow_external: bool = False) -> _Source:
    """Attach the user's ``species``, ``cell`` and ``supercell`` to a freshly opened source."""
    opts = SourceOptions(
        cell=parse_cell(cell),
        supercell=parse_supercell(supercell),
        species=species_supply(species, path=source.path, fmt=source.format, n_frames=source.n_frames,
                               species_map=species_map, allow_external=allow_external),
    )
    if opts.none:
        return source
    return source._setup(opts)


__all__ = ["configure", "parse_cell", "parse_supercell"]
