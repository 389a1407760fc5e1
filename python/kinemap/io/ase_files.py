"""Crystal and structure files read through ASE (an optional extra: ``pip install ase``).

ASE (the Atomic Simulation Environment) reads many small structure formats: CIF, VASP
POSCAR/CONTCAR, PDB, XSF, its own trajectories and more. Such files hold small models, so
they are read into memory whole (one :class:`kinemap.Model` per frame); convert them to H5MD
(:func:`kinemap.io.convert`) to stream them like large trajectories.

What is taken from each ASE ``Atoms``: Cartesian positions (Å), chemical symbols, the cell
(rows a, b, c, when it is non-zero) and per-atom occupancies from an ``occupancy`` array
when the reader provides one.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.validate import file_name
from ..errors import KinemapError, ModelFileError
from ..model import Model
from ._base import MemorySource


def open_with_ase(path, frame=None, ase_format: str | None = None, *, species=None, cell=None,
                  supercell=None) -> MemorySource:
    """Read a structure file with ASE into an in-memory atom source.

    Parameters
    ----------
    path : str or path-like
        The file (any format ``ase.io.read`` knows).
    frame : int, optional
        Frame of a multi-frame file (default: the first).
    ase_format : str, optional
        ASE's format name when the extension does not tell it (e.g. "vasp", "cif").
    species, cell, supercell :
        As for :func:`kinemap.open_model`.

    Returns
    -------
    MemorySource

    Raises
    ------
    KinemapError
        When ASE is not installed (``pip install ase``).
    FileNotFoundError, ModelFileError
        Missing file, or one ASE cannot read (with ASE's reason).
    """
    p = Path(file_name(path, "path"))
    if not p.exists():
        raise FileNotFoundError(f"no such file: {str(p)!r}")
    try:
        import ase.io
    except ImportError:
        raise KinemapError(f"reading {p.name!r} needs the optional package ASE: pip install ase "
                           "(or convert the file to extended XYZ or H5MD)") from None
    try:
        images = ase.io.read(str(p), index=":", format=ase_format)
    except Exception as exc:  # ASE raises many kinds; report its reason with the file
        raise ModelFileError(f"{str(p)!r}: ASE could not read it ({type(exc).__name__}: {exc})") from None
    if not isinstance(images, list):
        images = [images]
    models = []
    for i, atoms in enumerate(images):
        cell = np.asarray(atoms.cell[:], dtype=np.float64)
        has_cell = abs(np.linalg.det(cell)) > 1e-9
        occ = None
        if "occupancy" in atoms.arrays:
            occ = np.asarray(atoms.arrays["occupancy"], dtype=np.float64)
        try:
            periodic = has_cell and bool(np.any(atoms.pbc))
            models.append(Model(atoms.get_positions(), list(atoms.get_chemical_symbols()), occupancy=occ,
                                box=cell if periodic else None, cell=cell if has_cell else None))
        except ValueError as exc:
            raise ModelFileError(f"{str(p)!r}, frame {i}: {exc}") from None
    import ase

    from ._options import configure

    src = MemorySource(p, models, "ase", frame, info={"reader": f"ase {ase.__version__}"})
    return configure(src, species=species, cell=cell, supercell=supercell)


__all__ = ["open_with_ase"]
