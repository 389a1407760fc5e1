"""A plain HDF5 layout for users who write their own model files.

The layout (dataset paths are arguments of :func:`open_plain` with these defaults)::

    /positions    float, (N, 3) or (frames, N, 3)   Cartesian Å; attribute ``fractional`` = 1
                                                     marks fractional coordinates of /cell;
                                                     optional ``unit`` attribute ("nm", ...)
    /species      (N,) or (frames, N) strings ("Fe", "O2-", ...), or integers with labels in
                  /species_names (label of code 0, 1, 2, ...) or a species map argument
    /occupancy    optional (N,) or (frames, N), values in [0, 1]
    /b_iso        optional (N,) or (frames, N), B in Å² (B = 8π²⟨u²⟩)
    /cell         optional (3, 3) or (frames, 3, 3): rows are the lattice vectors a, b, c (Å,
                  or the ``unit`` attribute of /cell)

Writing one with h5py::

    with h5py.File("model.h5", "w") as f:
        f["positions"] = xyz                      # (N, 3) float, Å
        f["species"] = np.array(["Fe", "Ni", ...], dtype=h5py.string_dtype())
        f["cell"] = np.diag([10.0, 10.0, 10.0])

Atoms are read in bounded hyperslabs (``positions[start:stop]``), never the whole dataset.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import ModelFileError
from ._base import (
    DEFAULT_READ_ATOMS,
    FileSource,
    ChunkModel,
    SpeciesTable,
    cell_from_edges,
    check_chunk,
    check_chunk_atoms,
    check_values,
    length_scale,
    normalise_frame,
    parse_species_map,
)
from .h5md import _attr_str, open_h5, tree

#: Default dataset paths of the plain layout.
PLAIN_PATHS = {"positions": "positions", "species": "species", "occupancy": "occupancy",
               "b_iso": "b_iso", "cell": "cell", "species_names": "species_names"}


class _PlainIndex:
    def __init__(self, path, paths: dict, species_map):
        self.path = Path(path)
        where = str(self.path)
        h5py = __import__("h5py")
        self.paths = paths
        with open_h5(path) as f:
            pp = paths["positions"]
            if pp not in f or not isinstance(f[pp], h5py.Dataset):
                raise ModelFileError(f"{where}: dataset '/{pp.lstrip('/')}' (positions) is missing; the file has: {tree(f)}")
            ds = f[pp]
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
            if not np.issubdtype(ds.dtype, np.number):
                raise ModelFileError(f"{where}: /{pp} must hold numbers, got type {ds.dtype}")
            self.fractional = bool(np.asarray(ds.attrs.get("fractional", 0)).reshape(-1)[0])
            self.scale = length_scale(ds.attrs.get("unit"), f"{where}: /{pp} attribute 'unit'")
            # cell
            self.cells = None
            cp = paths["cell"]
            if cp in f:
                raw = np.asarray(f[cp][()], dtype=np.float64)
                if raw.shape == (3, 3):
                    cells = [raw]
                elif raw.ndim == 3 and raw.shape[1:] == (3, 3):
                    if raw.shape[0] != self.n_frames:
                        raise ModelFileError(f"{where}: /{cp} has {raw.shape[0]} frames but /{pp} has {self.n_frames} (mismatched frame counts)")
                    cells = list(raw)
                else:
                    raise ModelFileError(f"{where}: /{cp} must have shape (3, 3) or (frames, 3, 3), got {list(raw.shape)}")
                cscale = length_scale(f[cp].attrs.get("unit"), f"{where}: /{cp} attribute 'unit'")
                self.cells = np.array([cell_from_edges(c * cscale, f"{where}: /{cp}") for c in cells])
            if self.fractional and self.cells is None:
                raise ModelFileError(f"{where}: /{pp} is marked fractional but /{cp} is missing")
            # species
            sp = paths["species"]
            if sp not in f:
                raise ModelFileError(f"{where}: dataset '/{sp}' (species) is missing; the file has: {tree(f)}")
            sds = f[sp]
            self.species_framed = self._check_shape(sds, sp, where)
            self.species_strings = h5py.check_string_dtype(sds.dtype) is not None or sds.dtype.kind in "SU"
            self.table = None
            if not self.species_strings:
                if not np.issubdtype(sds.dtype, np.integer):
                    raise ModelFileError(f"{where}: /{sp} must hold strings or integer codes, got type {sds.dtype}")
                user = parse_species_map(species_map)
                names_path = paths["species_names"]
                if user:
                    self.table = SpeciesTable(list(user), list(user.values()), f"{where}: /{sp}")
                elif names_path in f:
                    names = [_attr_str(x) for x in np.asarray(f[names_path][()]).reshape(-1)]
                    self.table = SpeciesTable(list(range(len(names))), names, f"{where}: /{sp}")
                else:
                    raise ModelFileError(f"{where}: /{sp} holds integer codes but there is no /{names_path}; add it "
                                         "or give a species map such as {0: 'Fe', 1: 'Ni'} (command line: --species-map 0=Fe,1=Ni)")
            self.optional = {}
            for key in ("occupancy", "b_iso"):
                p = paths[key]
                if p in f:
                    self.optional[key] = (p, self._check_shape(f[p], p, where))
            self.b_scale = 1.0
            if "b_iso" in self.optional:
                self.b_scale = length_scale(f[paths["b_iso"]].attrs.get("unit"), f"{where}: /{paths['b_iso']} attribute 'unit'", power=2)

    def _check_shape(self, ds, p, where) -> bool:
        if tuple(ds.shape) == (self.n_atoms,):
            return False
        if tuple(ds.shape) == (self.n_frames, self.n_atoms) and self.framed:
            return True
        raise ModelFileError(f"{where}: /{p} has shape {list(ds.shape)}, which does not match /{self.paths['positions']} "
                             f"({self.n_frames} frame(s) of {self.n_atoms} atoms): mismatched shapes")


class PlainSource(FileSource):
    """One frame of a file in the plain HDF5 layout (see the module notes)."""

    format = "hdf5"

    def __init__(self, index: _PlainIndex, frame=None):
        self._ix = index
        self.path = index.path
        self.n_frames = index.n_frames
        self.frame = normalise_frame(frame, self.n_frames, str(self.path))
        self.n_atoms = index.n_atoms
        cells = index.cells
        self.box = None if cells is None else cells[self.frame if len(cells) > 1 else 0]
        self._labels = None

    def at_frame(self, frame: int) -> "PlainSource":
        return PlainSource(self._ix, frame)

    def _read(self, f, p, framed, start, stop, trailing=()):
        try:
            ds = f[p]
            if framed:
                return np.asarray(ds[(self.frame, slice(start, stop)) + trailing])
            return np.asarray(ds[(slice(start, stop),) + trailing])
        except (OSError, RuntimeError) as exc:
            raise ModelFileError(f"{self.path}: cannot read /{p} for atoms {start}..{stop - 1} (frame {self.frame}); "
                                 f"the file may be truncated or corrupt: {exc}") from None

    def _labels_of(self, raw, start):
        ix = self._ix
        if ix.species_strings:
            labs = np.array([x.decode() if isinstance(x, bytes) else str(x) for x in raw], dtype=object)
            empty = labs == ""
            if empty.any():
                j = int(np.flatnonzero(empty)[0])
                raise ModelFileError(f"{self.path}: /{ix.paths['species']}: atom {start + j} has an empty species label")
            uniq, inv = np.unique(labs.astype(str), return_inverse=True)
            return inv.reshape(-1), [str(u) for u in uniq]
        return ix.table.label_index(raw, start, self.frame), ix.table.distinct

    def species_labels(self) -> list[str]:
        if self._labels is None:
            present: set[str] = set()
            ix = self._ix
            with open_h5(self.path) as f:
                for start in range(0, self.n_atoms, 1 << 22):
                    stop = min(self.n_atoms, start + (1 << 22))
                    idx, labels = self._labels_of(self._read(f, ix.paths["species"], ix.species_framed, start, stop), start)
                    present.update(lab for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))) if c)
            self._labels = sorted(present)
        return list(self._labels)

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS):
        """Yield consecutive chunks of at most `chunk_atoms` atoms (hyperslab reads)."""
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        ix = self._ix
        pp = ix.paths["positions"]
        with open_h5(self.path) as f:
            for start in range(0, self.n_atoms, chunk_atoms):
                stop = min(self.n_atoms, start + chunk_atoms)
                p = self._read(f, pp, ix.framed, start, stop, (slice(None),)).astype(np.float64)
                if ix.fractional:
                    p = p @ self.box
                elif ix.scale != 1.0:
                    p = p * ix.scale
                check_chunk(p, start, f"{self.path}: /{pp}", self.frame)
                idx, labels = self._labels_of(self._read(f, ix.paths["species"], ix.species_framed, start, stop), start)
                occ = b = None
                if "occupancy" in ix.optional:
                    path, framed = ix.optional["occupancy"]
                    occ = self._read(f, path, framed, start, stop).astype(np.float64)
                    check_values(occ, "occupancy", 0.0, 1.0, start, f"{self.path}: /{path}")
                if "b_iso" in ix.optional:
                    path, framed = ix.optional["b_iso"]
                    b = self._read(f, path, framed, start, stop).astype(np.float64) * ix.b_scale
                    check_values(b, "b_iso", 0.0, None, start, f"{self.path}: /{path}")
                yield ChunkModel.build(p, idx, labels, occ, b, self.cell, self.box)

    def _extra_description(self) -> dict:
        ix = self._ix
        return {"positions_path": "/" + ix.paths["positions"].lstrip("/"), "fractional": ix.fractional,
                "optional": sorted(ix.optional)}


def open_plain(path, frame=None, species_map=None, **paths) -> PlainSource:
    """Open one frame of a file in the plain HDF5 layout (see the module notes).

    Parameters
    ----------
    path : str or path-like
        The HDF5 file.
    frame : int, optional
        Frame index when /positions has a frame axis (default: the first).
    species_map : mapping of int to str or str, optional
        Labels of integer species codes (instead of /species_names).
    **paths
        Dataset paths that differ from the defaults: ``positions``, ``species``,
        ``occupancy``, ``b_iso``, ``cell``, ``species_names``.

    Returns
    -------
    PlainSource

    Raises
    ------
    ModelFileError
        Missing datasets (the message lists what the file has), mismatched shapes, integer
        species without names, a corrupt or truncated file.
    """
    bad = set(paths) - set(PLAIN_PATHS)
    if bad:
        from ..errors import InvalidInputError

        raise InvalidInputError(f"unknown dataset option(s) {sorted(bad)}; the plain layout has {sorted(PLAIN_PATHS)}")
    merged = dict(PLAIN_PATHS)
    merged.update({k: str(v).lstrip("/") for k, v in paths.items() if v is not None})
    return PlainSource(_PlainIndex(path, merged, species_map), frame)


__all__ = ["PlainSource", "open_plain", "PLAIN_PATHS"]
