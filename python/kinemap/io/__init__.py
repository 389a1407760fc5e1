"""Model files: streaming readers, an H5MD writer and a converter.

=================  =====================================  ==================================
format             files                                  reader
=================  =====================================  ==================================
``"h5md"``         H5MD 1.1 (``/h5md``, ``/particles``)   :func:`kinemap.io.h5md.open_h5md`
``"hdf5"``         the plain layout (``/positions``,      :func:`kinemap.io.plain.open_plain`
                   ``/species``, ...)
``"extxyz"``       ``.xyz``, ``.extxyz``                  :func:`kinemap.io.text.open_extxyz`
``"lammps-dump"``  ``.lammpstrj``, ``.dump``              :func:`kinemap.io.text.open_lammps_dump`
``"ase"``          CIF, POSCAR, PDB, ... (needs ASE)      :func:`kinemap.io.ase_files.open_with_ase`
=================  =====================================  ==================================

:func:`open_model` picks the reader from the file name and contents and returns an *atom
source*: a lazy handle on one frame that :func:`kinemap.scatter` streams in bounded chunks.
"""

from __future__ import annotations

from pathlib import Path

from .._shared.validate import file_name
from ..errors import InvalidInputError, ModelFileError
from ._base import FileSource, MemorySource, length_scale, parse_species_map
from .convert import convert, select_frames
from .h5md_read import H5MDSource, open_h5md
from .h5md_write import H5MDWriter, write_h5md
from .plain import PLAIN_PATHS, PlainSource, open_plain
from .text import TextSource, open_extxyz, open_lammps_dump

FORMATS = ("h5md", "hdf5", "extxyz", "lammps-dump", "ase")
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
_ASE_SUFFIXES = {".cif", ".vasp", ".pdb", ".xsf", ".traj", ".res", ".gen", ".cell", ".in", ".poscar", ".xyzv"}


def detect_format(path) -> str:
    """The format of a model file, from its name and first bytes (see :data:`FORMATS`).

    Raises
    ------
    InvalidInputError
        A file name that is not valid UTF-8.
    FileNotFoundError
        When the file does not exist.
    ModelFileError
        When the format cannot be told.
    """
    p = Path(file_name(path, "path"))
    if not p.exists():
        raise FileNotFoundError(f"no such file: {str(p)!r}")
    if p.is_dir():
        raise IsADirectoryError(f"{str(p)!r} is a folder, not a model file")
    with open(p, "rb") as fh:
        head = fh.read(4096)
    if head.startswith(_HDF5_SIGNATURE) or p.suffix.lower() in (".h5", ".hdf5", ".h5md", ".hdf", ".nxs"):
        if not head.startswith(_HDF5_SIGNATURE) and len(head) < 8:
            raise ModelFileError(f"{str(p)!r} is empty or truncated: not an HDF5 file")
        from ._hdf5 import open_h5

        with open_h5(p) as f:  # link names only: nothing is opened through them
            try:
                names = set(f.keys())
            except Exception as exc:
                raise ModelFileError(f"{str(p)!r}: cannot list the file's root group: {exc}") from None
            return "h5md" if ("particles" in names or "h5md" in names) else "hdf5"
    name = p.name.lower()
    suffix = p.suffix.lower()
    if suffix in (".xyz", ".extxyz"):
        return "extxyz"
    if suffix in (".lammpstrj", ".dump", ".lammpsdump") or "dump" in name:
        return "lammps-dump"
    if suffix in _ASE_SUFFIXES or name.startswith(("poscar", "contcar")):
        return "ase"
    text = head.lstrip()
    if text.startswith(b"ITEM:"):
        return "lammps-dump"
    first = text.split(b"\n", 1)[0].split()
    if first and first[0].isdigit():
        return "extxyz"
    raise ModelFileError(
        f"cannot tell the format of {str(p)!r}; give it with format=... (command line: --format), one of "
        f"{', '.join(FORMATS)}"
    )


def open_model(path, frame=None, *, format: str | None = None, group: str | None = None,
               species=None, species_map=None, cell=None, supercell=None, unwrap: bool = False,
               allow_external: bool = False, **datasets) -> FileSource:
    """Open one frame of a model file as a lazy atom source that streams in bounded chunks.

    Parameters
    ----------
    path : str or path-like
        H5MD, plain-layout HDF5, extended XYZ, LAMMPS dump, or (with ASE installed) a crystal
        file such as CIF or POSCAR (docs/model-files.md describes the layouts).
    frame : int, optional
        Frame index, 0-based; negative counts from the end. Default: the first frame. Other
        frames of the same file: ``source.at_frame(i)`` (same options).
    format : str, optional
        One of ``"h5md"``, ``"hdf5"``, ``"extxyz"``, ``"lammps-dump"``, ``"ase"`` when the
        name and contents do not tell it.
    group : str, optional
        H5MD particle group (default: the only one, else ``all``).
    species : str, sequence of str, or path, optional
        Labels the file lacks, or that replace the file's: one label for all atoms
        (``"Ar"``); one label per atom (a sequence); a file of labels (text, whitespace
        separated, or ``.npy``; a name containing ``/`` or ending in ``.txt``, ``.dat``,
        ``.csv``, ``.lst``, ``.list``, ``.labels`` or ``.npy``); or, for HDF5 files, the path
        of a dataset in the file (``"/particles/all/type"``: strings, an enumeration, or
        integer codes labelled by `species_map`). Counts must match the atoms of each frame.
    species_map : mapping of int to str, or str, optional
        Labels of integer species codes, e.g. ``{1: "Fe", 2: "Ni"}`` or ``"1=Fe,2=Ni"``
        (LAMMPS types, integer H5MD species, plain-layout codes, integer `species`).
    cell : array_like (3, 3), six numbers, three numbers or str, optional
        The lattice that h, k, l refer to: rows a, b, c (Å), or ``a, b, c, alpha, beta,
        gamma`` (Å, degrees), or ``a, b, c`` (right angles), or text ``"3.6,3.6,3.6,90,90,90"``.
        Default: the box.
    supercell : (n1, n2, n3), integer 3x3 array or str, optional
        box = P·cell. With only `supercell`, the cell is solved from each frame's box (so it
        follows a box that changes at constant pressure); with `cell` too, each frame's box
        must equal P·cell; without a box in the file, the box becomes P·cell. A non-integer P
        is refused.
    unwrap : bool
        H5MD only: add ``image`` × box edges to the positions.
    allow_external : bool
        HDF5 only: follow external links and read datasets kept in other files (external
        raw storage, virtual datasets with sources elsewhere). Refused by default, so that a
        model file cannot make kinemap read, and print, another file.
    **datasets
        Plain layout only: dataset paths that differ from the defaults (``positions``,
        ``species``, ``occupancy``, ``b_iso``, ``u_aniso``, ``cell``, ``species_names``).

    Returns
    -------
    FileSource
        With ``n_atoms``, ``n_frames``, ``frame``, ``box`` (the file's periodic box, 3x3 rows
        in Å, or None), ``cell`` (the lattice of h, k, l), ``species_labels()``,
        ``describe()`` (bounded in time; says what is missing), ``iter_chunks(chunk_atoms)``,
        ``at_frame(i)`` and ``read()``.

    Raises
    ------
    FileNotFoundError
        When the file (or a file of labels) does not exist.
    ModelFileError
        When the file is corrupt, truncated, lacks positions (the message lists what it has),
        its datasets disagree in shape, a unit is not a positive length, or it points into
        other files (unless `allow_external`). A file without species opens; reading atoms
        then asks for ``species=``.
    InvalidInputError
        For a bad option (unknown format, frame out of range, malformed species map, a label
        count that differs from the atom count, a non-integer supercell), or a file name that
        is not valid UTF-8.

    Examples
    --------
    >>> import kinemap as km                                      # doctest: +SKIP
    >>> src = km.open_model("run.h5md", frame=-1, species="Ar", supercell=(8, 8, 8))  # doctest: +SKIP
    >>> src.describe()["cell"]                                    # doctest: +SKIP
    >>> pat = km.scatter(src, km.QGrid.hkl(src.cell, h=(-4, 4, 161), k=(-4, 4, 161)))  # doctest: +SKIP
    """
    path = file_name(path, "path")
    if format is None:
        fmt = detect_format(path)
    else:
        fmt = str(format).lower()
        if fmt not in FORMATS:
            raise InvalidInputError(f"unknown `format` {format!r}; kinemap reads {', '.join(FORMATS)}")
    if datasets and fmt != "hdf5":
        raise InvalidInputError(f"dataset options {sorted(datasets)} apply to the plain HDF5 layout only, "
                                f"but {str(path)!r} is read as {fmt}")
    if unwrap and fmt != "h5md":
        raise InvalidInputError(f"`unwrap` applies to H5MD files only, but {str(path)!r} is read as {fmt}")
    if group is not None and fmt != "h5md":
        raise InvalidInputError(f"`group` applies to H5MD files only, but {str(path)!r} is read as {fmt}")
    opts = dict(species=species, cell=cell, supercell=supercell)
    if fmt == "h5md":
        return open_h5md(path, frame, group=group, species_map=species_map, unwrap=unwrap,
                         allow_external=allow_external, **opts)
    if fmt == "hdf5":
        return open_plain(path, frame, species_map=species_map, allow_external=allow_external, **opts, **datasets)
    if fmt == "extxyz":
        return open_extxyz(path, frame, species_map=species_map, **opts)
    if fmt == "lammps-dump":
        return open_lammps_dump(path, frame, species_map=species_map, **opts)
    from .ase_files import open_with_ase

    if species_map is not None:
        raise InvalidInputError("`species_map` does not apply to files read through ASE (they carry element symbols)")
    return open_with_ase(path, frame, **opts)


__all__ = [
    "open_model",
    "detect_format",
    "convert",
    "select_frames",
    "write_h5md",
    "H5MDWriter",
    "open_h5md",
    "open_plain",
    "open_extxyz",
    "open_lammps_dump",
    "FileSource",
    "H5MDSource",
    "PlainSource",
    "TextSource",
    "MemorySource",
    "FORMATS",
    "PLAIN_PATHS",
    "length_scale",
    "parse_species_map",
]
