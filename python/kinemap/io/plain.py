"""A plain HDF5 layout for users who write their own model files.

The layout (dataset paths are arguments of :func:`open_plain` with these defaults)::

    /positions    float, (N, 3) or (frames, N, 3)   Cartesian Å; attribute ``fractional`` = 1
                                                     marks fractional coordinates of /cell;
                                                     optional ``unit`` attribute ("nm", ...)
    /species      (N,) or (frames, N) strings ("Fe", "O2-", ...), or integers with labels in
                  /species_names (label of code 0, 1, 2, ...) or a species map argument;
                  optional when ``species=`` supplies the labels
    /occupancy    optional (N,) or (frames, N), values in [0, 1]
    /b_iso        optional (N,) or (frames, N), B in Å² (B = 8π²⟨u²⟩)
    /u_aniso      optional (N, 3, 3) or (frames, N, 3, 3), Cartesian U in Å² (instead of B)
    /cell         optional (3, 3) or (frames, 3, 3): rows are the lattice vectors a, b, c (Å,
                  or the ``unit`` attribute of /cell); the periodic box of the model

Writing one with h5py::

    with h5py.File("model.h5", "w") as f:
        f["positions"] = xyz                      # (N, 3) float, Å
        f["species"] = np.array(["Fe", "Ni", ...], dtype=h5py.string_dtype())
        f["cell"] = np.diag([10.0, 10.0, 10.0])

Atoms are read in bounded hyperslabs (``positions[start:stop]``), never the whole dataset;
a framed /cell is read for the frame asked for only. Datasets that live in other files are
refused unless ``allow_external=True``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.validate import file_name
from ..errors import InvalidInputError, KinemapError, ModelFileError
from ._base import (
    DEFAULT_READ_ATOMS,
    ChunkModel,
    FileSource,
    cell_from_edges,
    check_chunk,
    check_chunk_atoms,
    check_u_aniso,
    check_values,
    length_scale,
    normalise_frame,
)
from ._hdf5 import attr_numbers, attr_str, get_checked, h5py_module, open_h5, read_small, tree
from ._species import SPECIES_HINT, ColumnLabels, LabelColumn
from .h5md_layout import LAYOUT_ERRORS

#: Default dataset paths of the plain layout.
PLAIN_PATHS = {"positions": "positions", "species": "species", "occupancy": "occupancy",
               "b_iso": "b_iso", "u_aniso": "u_aniso", "cell": "cell", "species_names": "species_names"}


class _PlainIndex:
    def __init__(self, path, paths: dict, species_map, allow_external: bool):
        self.path = Path(file_name(path, "path"))
        self.where = str(self.path)
        self.paths = paths
        self.allow_external = bool(allow_external)
        with open_h5(self.path) as f:
            try:
                self._build(f, species_map)
            except KinemapError:
                raise
            except LAYOUT_ERRORS as exc:
                raise ModelFileError(f"{self.where}: cannot read the file's layout ({type(exc).__name__}: {exc})") from None

    def _get(self, f, key: str):
        return get_checked(f, self.paths[key], self.where, self.allow_external)

    def _build(self, f, species_map):
        h5py = h5py_module()
        where = self.where
        pp = self.paths["positions"]
        ds = self._get(f, "positions")
        if not isinstance(ds, h5py.Dataset):
            raise ModelFileError(f"{where}: dataset '/{pp}' (positions) is missing; the file has: {tree(f)}")
        if ds.ndim == 2:
            self.n_frames, (self.n_atoms, d) = 1, ds.shape
            self.framed = False
        elif ds.ndim == 3:
            self.n_frames, self.n_atoms, d = ds.shape
            self.framed = True
        else:
            raise ModelFileError(f"{where}: /{pp} must have shape (N, 3) or (frames, N, 3), got {list(ds.shape)}")
        if d != 3:
            raise ModelFileError(f"{where}: /{pp} must have 3 coordinates per atom, got shape {list(ds.shape)}")
        if self.n_frames == 0:
            raise ModelFileError(f"{where}: /{pp} holds no frames")
        if ds.dtype.kind not in "iuf":
            raise ModelFileError(f"{where}: /{pp} must hold real numbers, got type {ds.dtype}")
        frac = attr_numbers(ds.attrs.get("fractional", 0), f"{where}: /{pp} attribute 'fractional'", whole=True)
        if frac.size != 1 or frac[0] not in (0, 1):
            raise ModelFileError(f"{where}: /{pp} attribute 'fractional' must be 0 or 1, got {frac[:6].tolist()}")
        self.fractional = bool(frac[0])
        self.scale = length_scale(ds.attrs.get("unit"), f"{where}: /{pp} attribute 'unit'")
        # cell: checked now, read per frame
        self.cell_framed = None
        self.fixed_cell = None
        cp = self.paths["cell"]
        cds = self._get(f, "cell")
        if cds is not None:
            if not isinstance(cds, h5py.Dataset) or cds.dtype.kind not in "iuf":
                raise ModelFileError(f"{where}: /{cp} must be a dataset of numbers")
            self.cell_scale = length_scale(cds.attrs.get("unit"), f"{where}: /{cp} attribute 'unit'")
            if cds.shape == (3, 3):
                self.cell_framed = False
                with np.errstate(over="ignore", invalid="ignore"):
                    raw = read_small(cds, where).astype(np.float64) * self.cell_scale
                self.fixed_cell = cell_from_edges(raw, f"{where}: /{cp}")
            elif cds.ndim == 3 and cds.shape[1:] == (3, 3):
                if cds.shape[0] != self.n_frames:
                    raise ModelFileError(f"{where}: /{cp} has {cds.shape[0]} frames but /{pp} has {self.n_frames} "
                                         "(mismatched frame counts)")
                self.cell_framed = True
            else:
                raise ModelFileError(f"{where}: /{cp} must have shape (3, 3) or (frames, 3, 3), got {list(cds.shape)}")
        if self.fractional and self.cell_framed is None:
            raise ModelFileError(f"{where}: /{pp} is marked fractional but /{cp} is missing")
        # species
        sp = self.paths["species"]
        sds = self._get(f, "species")
        self.species_column: LabelColumn | None = None
        self.species_missing: str | None
        if sds is not None:
            if not isinstance(sds, h5py.Dataset):
                raise ModelFileError(f"{where}: /{sp} must be a dataset")
            framed = self._check_shape(sds, sp, where)
            names = None
            nds = self._get(f, "species_names")
            if nds is not None:
                if not isinstance(nds, h5py.Dataset):
                    raise ModelFileError(f"{where}: /{self.paths['species_names']} must be a dataset")
                labels = [attr_str(x) for x in read_small(nds, where).reshape(-1)]
                names = dict(enumerate(labels))
            self.species_column = LabelColumn(sds, framed, f"{where}: /{sp}", species_map=species_map, names=names,
                                              path=sp)
            if self.species_column.kind == "integer" and self.species_column.table is None:
                self.species_missing = (f"{where}: /{sp} holds integer codes but there is no "
                                        f"/{self.paths['species_names']}; add it or give a species map such as "
                                        "{0: 'Fe', 1: 'Ni'} (command line: --species-map 0=Fe,1=Ni)")
            else:
                self.species_missing = None
        else:
            self.species_missing = (f"{where}: dataset '/{sp}' (species) is missing (the file has: {tree(f)}); "
                                    + SPECIES_HINT)
        self.optional = {}
        for key in ("occupancy", "b_iso", "u_aniso"):
            obj = self._get(f, key)
            if obj is None:
                continue
            p = self.paths[key]
            if not isinstance(obj, h5py.Dataset) or obj.dtype.kind not in "iuf":
                raise ModelFileError(f"{where}: /{p} must be a dataset of real numbers")
            self.optional[key] = (p, self._check_shape(obj, p, where, (3, 3) if key == "u_aniso" else ()))
        if "b_iso" in self.optional and "u_aniso" in self.optional:
            raise ModelFileError(f"{where}: the file has both /{self.paths['b_iso']} and /{self.paths['u_aniso']}; "
                                 "keep one kind of displacement")
        self.b_scale = self.u_scale = 1.0
        if "b_iso" in self.optional:
            self.b_scale = length_scale(f[self.optional["b_iso"][0]].attrs.get("unit"),
                                        f"{where}: /{self.paths['b_iso']} attribute 'unit'", power=2)
        if "u_aniso" in self.optional:
            self.u_scale = length_scale(f[self.optional["u_aniso"][0]].attrs.get("unit"),
                                        f"{where}: /{self.paths['u_aniso']} attribute 'unit'", power=2)

    def _check_shape(self, ds, p, where, trailing=()) -> bool:
        if tuple(ds.shape) == (self.n_atoms,) + trailing:
            return False
        if tuple(ds.shape) == (self.n_frames, self.n_atoms) + trailing and self.framed:
            return True
        raise ModelFileError(f"{where}: /{p} has shape {list(ds.shape)}, which does not match /{self.paths['positions']} "
                             f"({self.n_frames} frame(s) of {self.n_atoms} atoms): mismatched shapes")

    def cell_for(self, frame: int) -> np.ndarray | None:
        if self.cell_framed is None:
            return None
        if not self.cell_framed:
            return self.fixed_cell
        cp = self.paths["cell"]
        with open_h5(self.path) as f:
            try:
                raw = np.asarray(f[cp][frame], dtype=np.float64)
            except LAYOUT_ERRORS as exc:
                raise ModelFileError(f"{self.where}: cannot read /{cp} of frame {frame}: {exc}") from None
        with np.errstate(over="ignore", invalid="ignore"):
            raw = raw * self.cell_scale
        return cell_from_edges(raw, f"{self.where}: /{cp} (frame {frame})")


class PlainSource(ColumnLabels, FileSource):
    """One frame of a file in the plain HDF5 layout (see the module notes)."""

    format = "hdf5"

    def __init__(self, index: _PlainIndex, frame=None):
        self._ix = index
        self.path = index.path
        self.n_frames = index.n_frames
        self.frame = normalise_frame(frame, self.n_frames, str(self.path))
        self.n_atoms = index.n_atoms
        self.box = index.cell_for(self.frame)
        self._file_box = self.box
        self._label_cache = None

    def _at_frame(self, frame: int) -> PlainSource:
        return PlainSource(self._ix, frame)

    def _read(self, f, p, framed, start, stop, trailing=()):
        try:
            ds = f[p]
            if framed:
                return np.asarray(ds[(self.frame, slice(start, stop)) + trailing])
            return np.asarray(ds[(slice(start, stop),) + trailing])
        except LAYOUT_ERRORS as exc:
            raise ModelFileError(f"{self.path}: cannot read /{p} for atoms {start}..{stop - 1} (frame {self.frame}); "
                                 f"the file may be truncated or corrupt: {exc}") from None

    # -- species -------------------------------------------------------------------
    def _missing_species(self) -> str | None:
        return self._ix.species_missing

    def _scan_labels(self) -> list[str]:
        with open_h5(self.path) as f:
            return self._column().scan(f, self._species_frame(), self.n_atoms)

    def _labels_in_first(self, n: int) -> list[str]:
        with open_h5(self.path) as f:
            idx, labels = self._column().chunk(f, self._species_frame(), 0, min(n, self.n_atoms))
        return [lab for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))) if c]

    def iter_range(self, start: int, stop: int, chunk_atoms: int):
        """The atoms ``start:stop`` as chunks, reading only those (hyperslabs)."""
        return self.iter_chunks(chunk_atoms, start=start, stop=stop)

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS, *, start: int = 0, stop: int | None = None):
        """Yield consecutive chunks of at most `chunk_atoms` atoms (hyperslab reads), of the
        atoms ``start:stop`` (default all)."""
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        ix = self._ix
        pp = ix.paths["positions"]
        # Overflow of huge finite values to inf is caught by the checks after each step.
        with open_h5(self.path) as f, np.errstate(over="ignore", invalid="ignore"):
            first, last = max(0, int(start)), self.n_atoms if stop is None else min(self.n_atoms, int(stop))
            for start in range(first, last, chunk_atoms):
                stop = min(last, start + chunk_atoms)
                p = self._read(f, pp, ix.framed, start, stop, (slice(None),)).astype(np.float64)
                check_chunk(p, start, f"{self.path}: /{pp}", self.frame)
                if ix.fractional:
                    p = p @ self._file_box
                elif ix.scale != 1.0:
                    p = p * ix.scale
                check_chunk(p, start, f"{self.path}: /{pp}", self.frame)
                idx, labels = self._chunk_labels(start, stop, f,
                                                 lambda: self._column().chunk(f, self._species_frame(), start, stop))
                occ = b = u = None
                if "occupancy" in ix.optional:
                    path, framed = ix.optional["occupancy"]
                    occ = self._read(f, path, framed, start, stop).astype(np.float64)
                    check_values(occ, "occupancy", 0.0, 1.0, start, f"{self.path}: /{path}")
                if "b_iso" in ix.optional:
                    path, framed = ix.optional["b_iso"]
                    b = self._read(f, path, framed, start, stop).astype(np.float64) * ix.b_scale
                    check_values(b, "b_iso", 0.0, None, start, f"{self.path}: /{path}")
                if "u_aniso" in ix.optional:
                    path, framed = ix.optional["u_aniso"]
                    u = self._read(f, path, framed, start, stop).astype(np.float64) * ix.u_scale
                    check_u_aniso(u, start, f"{self.path}: /{path}")
                yield ChunkModel.build(p, idx, labels, occ, b, self.cell, self.box, u_aniso=u)

    def _extra_description(self) -> dict:
        ix = self._ix
        col = ix.species_column
        return {"positions_path": "/" + ix.paths["positions"].lstrip("/"), "fractional": ix.fractional,
                "species_kind": None if col is None else col.kind, "optional": sorted(ix.optional)}


def open_plain(path, frame=None, species_map=None, *, species=None, cell=None, supercell=None,
               allow_external: bool = False, **paths) -> PlainSource:
    """Open one frame of a file in the plain HDF5 layout (see the module notes).

    Parameters
    ----------
    path : str or path-like
        The HDF5 file.
    frame : int, optional
        Frame index when /positions has a frame axis (default: the first).
    species_map : mapping of int to str or str, optional
        Labels of integer species codes (instead of /species_names).
    species, cell, supercell :
        As for :func:`kinemap.open_model`.
    allow_external : bool
        Follow external links and read datasets stored in other files (refused by default).
    **paths
        Dataset paths that differ from the defaults: ``positions``, ``species``,
        ``occupancy``, ``b_iso``, ``u_aniso``, ``cell``, ``species_names``.

    Returns
    -------
    PlainSource

    Raises
    ------
    ModelFileError
        Missing positions (the message lists what the file has), mismatched shapes, a corrupt
        or truncated file, datasets in other files (unless `allow_external`). Missing or
        unlabelled species are reported when atoms are read (give ``species=``).
    InvalidInputError
        Unknown dataset options or bad options.
    """
    from ._options import configure

    bad = set(paths) - set(PLAIN_PATHS)
    if bad:
        raise InvalidInputError(f"unknown dataset option(s) {sorted(bad)}; the plain layout has {sorted(PLAIN_PATHS)}")
    merged = dict(PLAIN_PATHS)
    merged.update({k: str(v).lstrip("/") for k, v in paths.items() if v is not None})
    src = PlainSource(_PlainIndex(path, merged, species_map, allow_external), frame)
    return configure(src, species=species, cell=cell, supercell=supercell, species_map=species_map,
                     allow_external=allow_external)


__all__ = ["PlainSource", "open_plain", "PLAIN_PATHS"]
