"""H5MD 1.1 (HDF5 for molecular data): a streaming reader and a writer.

What kinemap reads from an H5MD file (paths relative to ``/particles/<group>``)::

    position/value   [frame][N][D] float   positions (D = 2 or 3); ``unit`` attribute
    position/step    [frame] int           (or a scalar step interval), optional time
    position         [N][D]                a time-independent position is accepted too
    box              attributes ``dimension`` (D) and ``boundary`` ("periodic"/"none" × D);
                     data element ``edges``: [D] (cuboid, the diagonal) or [D][D] (rows are
                     the edge vectors), as a dataset, a time-dependent group
                     (``edges/value`` [frame][D] or [frame][D][D]) or an attribute
    species          [N] or value [frame][N]: an HDF5 enumeration (names → codes), integer
                     codes with a mapping given by the user, or strings
    image            [frame][N][D] int (optional; used with ``unwrap=True``)
    occupancy, b_iso [N] or value [frame][N] (kinemap additions, optional; B in Å²)

Lengths are converted to Å from the ``unit`` attribute ("nm", "0.1 nm", "angstrom"; no
attribute means Å). Atoms are read as bounded hyperslabs ``value[frame, start:stop, :]``,
never the whole dataset. Note that for a periodic box, re-wrapping atoms into the box changes
A(q) except at the box's reciprocal-lattice points.

The writer (:class:`H5MDWriter`, :func:`write_h5md`) produces the same layout with species as
an enumeration, positions in ``0.1 nm`` (= Å), and writes under a temporary name that is
renamed when the file is complete.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from ..errors import InvalidInputError, ModelFileError
from ..model import Model, as_cell
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


def _h5py():
    import h5py

    return h5py


def open_h5(path) -> "object":
    """Open an HDF5 file for reading, turning HDF5's errors into clear ones."""
    h5py = _h5py()
    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"no such file: {str(p)!r}")
    if p.is_dir():
        raise IsADirectoryError(f"{str(p)!r} is a folder, not a model file")
    try:
        return h5py.File(p, "r")
    except OSError as exc:
        msg = str(exc)
        hint = "truncated or corrupt" if ("truncat" in msg or "signature" in msg or "eof" in msg.lower()) else "not a readable HDF5 file"
        raise ModelFileError(f"{str(p)!r} is {hint}: {msg}") from None


def tree(f, limit: int = 40) -> str:
    """A short listing of an HDF5 file's datasets and groups (for error messages)."""
    h5py = _h5py()
    names: list[str] = []

    def visit(name, obj):
        if len(names) >= limit:
            return True
        if isinstance(obj, h5py.Dataset):
            names.append(f"/{name} {list(obj.shape)}")
        else:
            names.append(f"/{name}/")
        return None

    try:
        f.visititems(visit)
    except Exception:  # a broken file: list what we got
        pass
    if not names:
        return "nothing (the file is empty)"
    more = " ..." if len(names) >= limit else ""
    return ", ".join(names) + more


def _attr_str(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.size == 1:
        return _attr_str(value.reshape(-1)[0])
    return str(value)


def _attr_strs(value) -> list[str]:
    if isinstance(value, (str, bytes)):
        return [_attr_str(value)]
    return [_attr_str(v) for v in np.asarray(value).reshape(-1)]


class _Element:
    """An H5MD data element: time-independent dataset or time-dependent group with value."""

    def __init__(self, obj, path: str):
        h5py = _h5py()
        self.path = path
        if isinstance(obj, h5py.Group):
            if "value" not in obj:
                raise ModelFileError(f"{path} is a group without 'value' (it has: {', '.join(obj.keys()) or 'nothing'})")
            self.value_path = path + "/value"
            self.time_dependent = True
            ds = obj["value"]
        else:
            self.value_path = path
            self.time_dependent = False
            ds = obj
        self.shape = tuple(ds.shape)
        self.dtype = ds.dtype
        self.unit = ds.attrs.get("unit")
        self.n_frames = self.shape[0] if self.time_dependent else None
        self.step = self.time = None
        if self.time_dependent:
            for name in ("step", "time"):
                if name in obj:
                    arr = np.asarray(obj[name][()])
                    if arr.ndim == 1 and len(arr) != self.n_frames:
                        raise ModelFileError(
                            f"{path}/{name} has {len(arr)} entries but {self.value_path} has "
                            f"{self.n_frames} frames (mismatched frame counts)"
                        )
                    if arr.ndim == 0:  # fixed interval, H5MD 1.1 (offset attribute optional)
                        off = obj[name].attrs.get("offset", 0)
                        arr = off + arr * np.arange(self.n_frames)
                    setattr(self, name, arr)


class _H5MDIndex:
    """What the reader learned from the file once; shared by the sources of all frames."""

    def __init__(self, path, group, species_map, unwrap: bool):
        self.path = Path(path)
        where = str(self.path)
        with open_h5(path) as f:
            if "particles" not in f:
                raise ModelFileError(f"{where}: no '/particles' group, so not an H5MD model; the file has: {tree(f)}")
            particles = f["particles"]
            names = list(particles.keys())
            if group is None:
                if len(names) == 1:
                    group = names[0]
                elif "all" in names:
                    group = "all"
                else:
                    raise ModelFileError(f"{where}: /particles has {len(names)} groups ({', '.join(names) or 'none'}); "
                                         "choose one with group=... (command line: --group)")
            if group not in particles:
                raise ModelFileError(f"{where}: no particle group '/particles/{group}' (it has: {', '.join(names) or 'none'})")
            self.group = group
            gpath = f"/particles/{group}"
            g = particles[group]
            self.h5md_version = None
            if "h5md" in f and "version" in f["h5md"].attrs:
                self.h5md_version = [int(x) for x in np.asarray(f["h5md"].attrs["version"]).reshape(-1)]
            self.creator = None
            if "h5md/creator" in f:
                self.creator = _attr_str(f["h5md/creator"].attrs.get("name", "")) or None
            if "position" not in g:
                raise ModelFileError(f"{where}: dataset '{gpath}/position' is missing; {gpath} has: "
                                     f"{', '.join(g.keys()) or 'nothing'}")
            pos = _Element(g["position"], f"{gpath}/position")
            self.position = pos
            if pos.time_dependent:
                if len(pos.shape) != 3:
                    raise ModelFileError(f"{where}: {pos.value_path} must have shape [frame][N][D], got {list(pos.shape)}")
                self.n_frames, self.n_atoms, self.dim = pos.shape
            else:
                if len(pos.shape) != 2:
                    raise ModelFileError(f"{where}: {pos.value_path} must have shape [N][D], got {list(pos.shape)}")
                self.n_frames = 1
                self.n_atoms, self.dim = pos.shape
            if self.dim not in (2, 3):
                raise ModelFileError(f"{where}: {pos.value_path} has D = {self.dim} coordinates per atom; kinemap reads D = 2 or 3")
            if self.n_frames == 0:
                raise ModelFileError(f"{where}: {pos.value_path} holds no frames")
            if not np.issubdtype(pos.dtype, np.number):
                raise ModelFileError(f"{where}: {pos.value_path} must hold numbers, got type {pos.dtype}")
            self.scale = length_scale(pos.unit, f"{where}: {pos.value_path} attribute 'unit'")
            self.unit_note = "angstrom (no unit attribute)" if pos.unit is None else _attr_str(pos.unit)
            self.step = pos.step
            self.time = pos.time
            self._read_box(g, gpath, where)
            self._read_species(g, gpath, where, species_map)
            self.occupancy = self._optional(g, gpath, "occupancy", where)
            self.b_iso = self._optional(g, gpath, "b_iso", where)
            self.b_scale = 1.0
            if self.b_iso is not None:
                self.b_scale = length_scale(self.b_iso.unit, f"{where}: {self.b_iso.value_path} attribute 'unit'", power=2)
            self.image = None
            if unwrap:
                if "image" not in g:
                    raise ModelFileError(f"{where}: unwrap=True needs '{gpath}/image', which is missing")
                self.image = self._optional(g, gpath, "image", where, per_atom_dims=(self.dim,))
                if self.cells is None:
                    raise ModelFileError(f"{where}: unwrap=True needs box edges in '{gpath}/box'")
            self.unwrap = bool(unwrap)

    # ------------------------------------------------------------------------------
    def _optional(self, g, gpath, name, where, per_atom_dims=()):
        if name not in g:
            return None
        el = _Element(g[name], f"{gpath}/{name}")
        want = (self.n_atoms,) + tuple(per_atom_dims)
        shape = el.shape[1:] if el.time_dependent else el.shape
        if tuple(shape) != want:
            raise ModelFileError(f"{where}: {el.value_path} has shape {list(el.shape)}, which does not match "
                                 f"{self.n_atoms} atoms in {self.position.value_path} (mismatched shapes)")
        if el.time_dependent and el.n_frames != self.n_frames:
            raise ModelFileError(f"{where}: {el.value_path} has {el.n_frames} frames but "
                                 f"{self.position.value_path} has {self.n_frames} (mismatched frame counts)")
        return el

    def _read_box(self, g, gpath, where):
        h5py = _h5py()
        self.boundary = None
        self.cells = None  # (F, 3, 3) or (1, 3, 3)
        self.box_note = ""
        if "box" not in g:
            self.box_note = "no box: open boundaries"
            return
        box = g["box"]
        bpath = f"{gpath}/box"
        dim = box.attrs.get("dimension")
        if dim is not None and int(np.asarray(dim).reshape(-1)[0]) != self.dim:
            raise ModelFileError(f"{where}: {bpath} attribute 'dimension' is {int(np.asarray(dim).reshape(-1)[0])} "
                                 f"but {self.position.value_path} has D = {self.dim}")
        if "boundary" in box.attrs:
            self.boundary = _attr_strs(box.attrs["boundary"])
            if len(self.boundary) != self.dim or any(b not in ("periodic", "none") for b in self.boundary):
                raise ModelFileError(f"{where}: {bpath} attribute 'boundary' must be {self.dim} of "
                                     f"'periodic'/'none', got {self.boundary}")
        edges = None
        epath = f"{bpath}/edges"
        if "edges" in box:
            obj = box["edges"]
            el = _Element(obj, epath)
            raw = np.asarray((obj["value"] if isinstance(obj, h5py.Group) else obj)[()], dtype=np.float64)
            scale = length_scale(el.unit, f"{where}: {el.value_path} attribute 'unit'")
            if el.time_dependent:
                if el.n_frames != self.n_frames and self.n_frames > 1:
                    raise ModelFileError(f"{where}: {el.value_path} has {el.n_frames} frames but "
                                         f"{self.position.value_path} has {self.n_frames} (mismatched frame counts)")
                edges = [raw[i] * scale for i in range(len(raw))]
            else:
                edges = [raw * scale]
            where_e = f"{where}: {el.value_path}"
        elif "edges" in box.attrs:
            edges = [np.asarray(box.attrs["edges"], dtype=np.float64) * self.scale]
            where_e = f"{where}: {bpath} attribute 'edges'"
        if edges is None:
            if self.boundary and "periodic" in self.boundary:
                raise ModelFileError(f"{where}: {bpath} says the boundary is periodic but has no 'edges'")
            self.box_note = "box without edges: open boundaries"
            return
        cells = []
        for e in edges:
            if e.shape not in ((self.dim,), (self.dim, self.dim)):
                raise ModelFileError(f"{where_e} has shape {list(e.shape)}; expected [{self.dim}] or [{self.dim}][{self.dim}]")
            cells.append(cell_from_edges(e, where_e))
        self.cells = np.array(cells)
        self.box_note = ("triclinic" if np.asarray(edges[0]).ndim == 2 else "cuboid") + (
            ", time-dependent" if len(cells) > 1 else "")
        if self.dim == 2:
            self.box_note += "; 2-D box, c = (0, 0, 1) angstrom added"

    def _read_species(self, g, gpath, where, species_map):
        h5py = _h5py()
        self.species_kind = None
        self.species_table = None
        self.species_strings = False
        if "species" not in g:
            raise ModelFileError(f"{where}: dataset '{gpath}/species' is missing (kinemap needs to know what "
                                 f"scatters); {gpath} has: {', '.join(g.keys())}")
        el = _Element(g["species"], f"{gpath}/species")
        self.species = self._optional(g, gpath, "species", where)
        enum = h5py.check_enum_dtype(el.dtype)
        user = parse_species_map(species_map)
        if enum is not None:
            self.species_kind = "enumeration"
            mapping = {int(v): str(k) for k, v in enum.items()}
            if user:
                mapping.update(user)
            self.species_table = SpeciesTable(list(mapping), list(mapping.values()), f"{where}: {el.value_path}")
        elif h5py.check_string_dtype(el.dtype) is not None:
            self.species_kind = "strings"
            self.species_strings = True
        elif np.issubdtype(el.dtype, np.integer):
            self.species_kind = "integer"
            if user:
                self.species_table = SpeciesTable(list(user), list(user.values()), f"{where}: {el.value_path}")
            else:
                mapping = self._mapping_in_file(g, el)
                if mapping:
                    self.species_table = SpeciesTable(list(mapping), list(mapping.values()), f"{where}: {el.value_path}")
        else:
            raise ModelFileError(f"{where}: {el.value_path} must be an enumeration, integers or strings, got type {el.dtype}")

    @staticmethod
    def _mapping_in_file(g, el) -> dict[int, str] | None:
        """A code→label mapping stored beside integer species: attributes ``names``
        (label of code 0, 1, ...) or ``codes``+``names``."""
        obj = g["species"]
        names = obj.attrs.get("names")
        if names is None:
            return None
        labels = _attr_strs(names)
        codes = obj.attrs.get("codes")
        codes = list(range(len(labels))) if codes is None else [int(c) for c in np.asarray(codes).reshape(-1)]
        if len(codes) != len(labels):
            raise ModelFileError(f"{el.path}: attributes 'codes' and 'names' have different lengths")
        return dict(zip(codes, labels))


class H5MDSource(FileSource):
    """One frame of an H5MD file, read in bounded hyperslabs. Build with :func:`open_h5md`
    or :func:`kinemap.open_model`."""

    format = "h5md"

    def __init__(self, index: _H5MDIndex, frame=None):
        self._ix = index
        self.path = index.path
        self.n_frames = index.n_frames
        self.frame = normalise_frame(frame, self.n_frames, str(self.path))
        self.n_atoms = index.n_atoms
        cells = index.cells
        edges = None if cells is None else cells[self.frame if len(cells) > 1 else 0]
        self.boundary = index.boundary
        periodic = self.boundary is None or "periodic" in self.boundary
        self.box = edges if periodic else None
        self.cell = edges
        self._edges = edges
        self._labels: list[str] | None = None

    @property
    def group(self) -> str:
        return self._ix.group

    def at_frame(self, frame: int) -> "H5MDSource":
        return H5MDSource(self._ix, frame)

    # -- species -------------------------------------------------------------------
    def _species_codes(self, f, start: int, stop: int):
        el = self._ix.species
        ds = f[el.value_path]
        return ds[self.frame, start:stop] if el.time_dependent else ds[start:stop]

    def _label_chunk(self, raw, start) -> tuple[np.ndarray, list[str]]:
        ix = self._ix
        if ix.species_strings:
            labs = np.asarray([x.decode() if isinstance(x, bytes) else str(x) for x in raw], dtype=object)
            for j, lab in enumerate(labs):
                if not lab:
                    raise ModelFileError(f"{self.path}: {ix.species.value_path}: atom {start + j} has an empty species label")
            uniq, inv = np.unique(labs.astype(str), return_inverse=True)
            return inv.reshape(-1), [str(u) for u in uniq]
        if ix.species_table is None:
            codes = np.unique(np.asarray(raw)).tolist()
            raise ModelFileError(
                f"{self.path}: {ix.species.value_path} holds integer species codes (e.g. {codes[:8]}) without "
                "names; give a species map such as {1: 'Fe', 2: 'Ni'} (command line: --species-map 1=Fe,2=Ni)"
            )
        return ix.species_table.label_index(raw, start, self.frame), ix.species_table.distinct

    def species_labels(self) -> list[str]:
        """Sorted distinct labels of the species present (one streamed pass, cached; shared
        by all frames when the species do not depend on time)."""
        static = not self._ix.species.time_dependent
        if self._labels is None and static and getattr(self._ix, "static_labels", None) is not None:
            self._labels = list(self._ix.static_labels)
        if self._labels is None:
            present: set[str] = set()
            with self._open() as f:
                for start in range(0, self.n_atoms, 1 << 22):
                    stop = min(self.n_atoms, start + (1 << 22))
                    raw = self._read(f, self._ix.species, lambda: self._species_codes(f, start, stop), start, stop)
                    idx, labels = self._label_chunk(raw, start)
                    counts = np.bincount(idx, minlength=len(labels))
                    present.update(lab for lab, c in zip(labels, counts) if c)
            self._labels = sorted(present)
            if static:
                self._ix.static_labels = list(self._labels)
        return list(self._labels)

    def species_counts(self) -> dict[str, int]:
        """Atoms per species label in this frame (one streamed pass)."""
        out: dict[str, int] = {}
        with self._open() as f:
            for start in range(0, self.n_atoms, 1 << 22):
                stop = min(self.n_atoms, start + (1 << 22))
                raw = self._read(f, self._ix.species, lambda: self._species_codes(f, start, stop), start, stop)
                idx, labels = self._label_chunk(raw, start)
                for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))):
                    if c:
                        out[lab] = out.get(lab, 0) + int(c)
        return dict(sorted(out.items()))

    # -- reading ---------------------------------------------------------------------
    def _open(self):
        return open_h5(self.path)

    def _read(self, f, el, fn, start, stop):
        try:
            return fn()
        except (OSError, RuntimeError, KeyError) as exc:
            raise ModelFileError(f"{self.path}: cannot read {el.value_path} for atoms {start}..{stop - 1} "
                                 f"(frame {self.frame}); the file may be truncated or corrupt: {exc}") from None

    def _per_atom(self, f, el, start, stop):
        if el is None:
            return None
        ds = f[el.value_path]
        fn = (lambda: ds[self.frame, start:stop]) if el.time_dependent else (lambda: ds[start:stop])
        return np.asarray(self._read(f, el, fn, start, stop))

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS):
        """Yield consecutive chunks of at most `chunk_atoms` atoms (hyperslab reads).

        Raises
        ------
        ModelFileError
            Non-finite coordinates, unknown species codes or out-of-range occupancies (naming
            the atom index, frame and dataset), or a read failure (truncated file).
        """
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        ix = self._ix
        pos_el = ix.position
        with self._open() as f:
            ds = f[pos_el.value_path]
            for start in range(0, self.n_atoms, chunk_atoms):
                stop = min(self.n_atoms, start + chunk_atoms)
                if pos_el.time_dependent:
                    raw = self._read(f, pos_el, lambda: ds[self.frame, start:stop, :], start, stop)
                else:
                    raw = self._read(f, pos_el, lambda: ds[start:stop, :], start, stop)
                p = np.empty((stop - start, 3), dtype=np.float64)
                p[:, : ix.dim] = raw
                if ix.dim == 2:
                    p[:, 2] = 0.0
                if ix.scale != 1.0:
                    p[:, : ix.dim] *= ix.scale
                check_chunk(p, start, f"{self.path}: {pos_el.value_path}", self.frame)
                if ix.image is not None:
                    img = self._per_atom(f, ix.image, start, stop).astype(np.float64)
                    full = np.zeros((stop - start, 3))
                    full[:, : ix.dim] = img
                    p += full @ self._edges
                raw_sp = self._read(f, ix.species, lambda: self._species_codes(f, start, stop), start, stop)
                lab_idx, labels = self._label_chunk(raw_sp, start)
                occ = self._per_atom(f, ix.occupancy, start, stop)
                if occ is not None:
                    occ = occ.astype(np.float64)
                    check_values(occ, "occupancy", 0.0, 1.0, start, f"{self.path}: {ix.occupancy.value_path}")
                b = self._per_atom(f, ix.b_iso, start, stop)
                if b is not None:
                    b = b.astype(np.float64) * ix.b_scale
                    check_values(b, "b_iso", 0.0, None, start, f"{self.path}: {ix.b_iso.value_path}")
                yield ChunkModel.build(p, lab_idx, labels, occ, b, self.cell, self.box)

    def _extra_description(self) -> dict:
        ix = self._ix
        d = {
            "group": ix.group,
            "h5md_version": ix.h5md_version,
            "position_path": ix.position.value_path,
            "position_unit": ix.unit_note,
            "dimension": ix.dim,
            "boundary": ix.boundary,
            "box": ix.box_note,
            "species_kind": ix.species_kind,
        }
        if ix.step is not None:
            d["step"] = int(np.asarray(ix.step)[self.frame])
        if ix.time is not None:
            d["time"] = float(np.asarray(ix.time)[self.frame])
        if ix.creator:
            d["creator"] = ix.creator
        if ix.unwrap:
            d["unwrapped"] = True
        return d


def open_h5md(path, frame=None, group: str | None = None, species_map=None, unwrap: bool = False) -> H5MDSource:
    """Open one frame of an H5MD file as a streaming atom source.

    Parameters
    ----------
    path : str or path-like
        The H5MD file.
    frame : int, optional
        Frame index (0-based; negative counts from the end). Default: the first frame.
    group : str, optional
        Particle group under ``/particles`` (default: the only one, else ``all``).
    species_map : mapping of int to str or str, optional
        Labels of integer species codes, e.g. ``{1: "Fe", 2: "Ni"}`` or ``"1=Fe,2=Ni"``;
        overrides names of an enumeration.
    unwrap : bool
        Add ``image`` × box edges to the positions (needs ``image`` and box edges).

    Returns
    -------
    H5MDSource

    Raises
    ------
    FileNotFoundError
        When the file does not exist.
    ModelFileError
        When it is not HDF5, is truncated, or lacks a needed dataset (the message lists what
        the file has), or when shapes or frame counts of its datasets disagree.
    InvalidInputError
        For a frame index out of range or a malformed species map.
    """
    return H5MDSource(_H5MDIndex(path, group, species_map, unwrap), frame)


# ======================================================================================
# writer
# ======================================================================================
class H5MDWriter:
    """Write an H5MD 1.1 file frame by frame and chunk by chunk (atomically).

    Parameters
    ----------
    path : str or path-like
        Output file; written as a temporary file beside it and renamed by :meth:`close`.
    n_atoms : int
        Atoms per frame (the same in every frame, as H5MD requires).
    species : sequence of str
        Distinct species labels; atoms refer to them by code 0, 1, ... (an enumeration).
    group : str
        Particle group name under ``/particles``.
    boundary : str or sequence of str
        "periodic" or "none" per axis (one value for all three axes).
    time_dependent_box : bool
        Store one cell per frame (``box/edges/value``) instead of one for the file.
    position_dtype : numpy dtype
        float64 (default) or float32 to halve the file size.
    author : str
        Name recorded in ``/h5md/author``.

    Notes
    -----
    Positions are stored in Å with the H5MD unit string ``"0.1 nm"``; edges are rows a, b, c.
    Use as a context manager: an exception inside the ``with`` block removes the temporary
    file, so no partial file is left under `path`.
    """

    def __init__(self, path, n_atoms: int, species: Sequence[str], *, group: str = "all",
                 boundary="periodic", time_dependent_box: bool = False,
                 position_dtype=np.float64, author: str = "kinemap user",
                 chunk_atoms: int = 1 << 16, overwrite: bool = False, inputs=()):
        from .. import __version__
        from .._shared.output import AtomicFile

        h5py = _h5py()
        if isinstance(n_atoms, bool) or not isinstance(n_atoms, (int, np.integer)) or n_atoms < 0:
            raise InvalidInputError(f"`n_atoms` must be a whole number >= 0, got {n_atoms!r}")
        labels = [str(s) for s in species]
        if not labels or any(not s for s in labels) or len(set(labels)) != len(labels):
            raise InvalidInputError(f"`species` must be distinct non-empty labels, got {labels!r}")
        if isinstance(boundary, str):
            boundary = [boundary] * 3
        boundary = [str(b) for b in boundary]
        if len(boundary) != 3 or any(b not in ("periodic", "none") for b in boundary):
            raise InvalidInputError(f"`boundary` must be 'periodic'/'none' or three of them, got {boundary!r}")
        self._out = AtomicFile(path, overwrite=overwrite, inputs=inputs, what="model file")
        self.final, self.tmp = self._out.final, self._out.tmp
        self.n_atoms = int(n_atoms)
        self.labels = labels
        self.code = {lab: i for i, lab in enumerate(labels)}
        self.n_frames = 0
        self._closed = False
        self.time_dependent_box = bool(time_dependent_box)
        self._cell_written = False
        base = np.int8 if len(labels) < 127 else (np.int16 if len(labels) < 32000 else np.int32)
        try:
            self.f = h5py.File(self.tmp, "w")
            f = self.f
            h = f.create_group("h5md")
            h.attrs["version"] = np.array([1, 1], dtype=np.int32)
            h.create_group("author").attrs["name"] = author
            cr = h.create_group("creator")
            cr.attrs["name"] = "kinemap"
            cr.attrs["version"] = str(__version__)
            g = f.create_group(f"particles/{group}")
            self.group = g
            box = g.create_group("box")
            box.attrs["dimension"] = np.int32(3)
            box.attrs["boundary"] = np.array(boundary, dtype=h5py.string_dtype())
            self.box = box
            n = max(self.n_atoms, 1)
            ch = (1, min(n, int(chunk_atoms)), 3)
            pos = g.create_group("position")
            self.value = pos.create_dataset("value", shape=(0, self.n_atoms, 3), maxshape=(None, self.n_atoms, 3),
                                            dtype=position_dtype, chunks=ch)
            self.value.attrs["unit"] = "0.1 nm"
            self.step = pos.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64, chunks=(1024,))
            self.time = pos.create_dataset("time", shape=(0,), maxshape=(None,), dtype=np.float64, chunks=(1024,))
            self.species = g.create_dataset(
                "species", shape=(self.n_atoms,),
                dtype=h5py.enum_dtype(self.code, basetype=base),
                chunks=(min(n, 1 << 20),) if self.n_atoms else None)
            self._occ = self._b = None
            if time_dependent_box:
                e = box.create_group("edges")
                self.edges = e.create_dataset("value", shape=(0, 3, 3), maxshape=(None, 3, 3), dtype=np.float64)
                self.edges.attrs["unit"] = "0.1 nm"
                e["step"] = self.step  # hard link: the same steps as the positions
                e["time"] = self.time
        except BaseException:
            self._abort()
            raise

    # -- per-atom, time-independent ----------------------------------------------------
    def write_species(self, labels, start: int = 0) -> None:
        """Species of atoms ``start ... start+len(labels)-1`` (labels from `species`)."""
        lab = np.asarray(labels, dtype=object).reshape(-1)
        try:
            codes = np.fromiter((self.code[x] for x in lab), dtype=np.int64, count=len(lab))
        except KeyError as exc:
            raise InvalidInputError(f"species label {exc.args[0]!r} (atoms from {start}) is not one of {self.labels}") from None
        self.write_species_codes(codes, start)

    def write_species_codes(self, codes, start: int = 0) -> None:
        """Species codes (indices into `species`) of atoms ``start ...``."""
        c = np.asarray(codes, dtype=np.int64).reshape(-1)
        if len(c) and (c.min() < 0 or c.max() >= len(self.labels)):
            j = int(np.flatnonzero((c < 0) | (c >= len(self.labels)))[0])
            raise InvalidInputError(f"species code {int(c[j])} of atom {start + j} is not in 0..{len(self.labels) - 1}")
        self._check_range(start, len(c))
        self.species[start:start + len(c)] = c.astype(self.species.dtype)

    def _per_atom_ds(self, name, unit=None):
        ds = self.group.get(name)
        if ds is None:
            n = max(self.n_atoms, 1)
            ds = self.group.create_dataset(name, shape=(self.n_atoms,), dtype=np.float64,
                                           chunks=(min(n, 1 << 20),) if self.n_atoms else None,
                                           fillvalue=1.0 if name == "occupancy" else 0.0)
            if unit:
                ds.attrs["unit"] = unit
        return ds

    def write_occupancy(self, values, start: int = 0) -> None:
        """Occupancies in [0, 1] of atoms ``start ...`` (kinemap addition, time-independent)."""
        v = np.asarray(values, dtype=np.float64).reshape(-1)
        self._check_range(start, len(v))
        self._per_atom_ds("occupancy")[start:start + len(v)] = v

    def write_b_iso(self, values, start: int = 0) -> None:
        """B (Å²) of atoms ``start ...`` (kinemap addition, time-independent)."""
        v = np.asarray(values, dtype=np.float64).reshape(-1)
        self._check_range(start, len(v))
        self._per_atom_ds("b_iso", unit="0.01 nm+2")[start:start + len(v)] = v

    def _check_range(self, start, n):
        if start < 0 or start + n > self.n_atoms:
            raise InvalidInputError(f"atoms {start}..{start + n - 1} are outside 0..{self.n_atoms - 1}")

    # -- frames ---------------------------------------------------------------------------
    def add_frame(self, positions=None, *, cell=None, step: int | None = None, time: float | None = None) -> int:
        """Start a new frame; give all `positions` (N, 3) Å now or later with :meth:`write_positions`.

        Returns the frame index.
        """
        i = self.n_frames
        self.value.resize(i + 1, axis=0)
        self.step.resize(i + 1, axis=0)
        self.time.resize(i + 1, axis=0)
        self.step[i] = i if step is None else int(step)
        self.time[i] = float(i if time is None else time)
        self.n_frames = i + 1
        if cell is not None:
            c = as_cell(cell)
            if self.time_dependent_box:
                self.edges.resize(i + 1, axis=0)
                self.edges[i] = c
            elif not self._cell_written:
                ds = self.box.create_dataset("edges", data=c)
                ds.attrs["unit"] = "0.1 nm"
                self._cell_written = True
            elif not np.allclose(self.box["edges"][()], c, rtol=0, atol=1e-12):
                raise InvalidInputError(f"frame {i} has a different cell; open the writer with time_dependent_box=True")
        elif self.time_dependent_box:
            raise InvalidInputError(f"frame {i} needs a `cell` (the box is time-dependent)")
        if positions is not None:
            self.write_positions(positions, 0, frame=i)
        return i

    def write_positions(self, positions, start: int = 0, frame: int | None = None) -> None:
        """Positions (Å) of atoms ``start ...`` in `frame` (default: the last added)."""
        frame = self.n_frames - 1 if frame is None else frame
        if not 0 <= frame < self.n_frames:
            raise InvalidInputError(f"frame {frame} has not been added (frames 0..{self.n_frames - 1})")
        p = np.asarray(positions, dtype=np.float64)
        if p.ndim != 2 or p.shape[1] != 3:
            raise InvalidInputError(f"`positions` must be an (n, 3) array, got {p.shape}")
        self._check_range(start, len(p))
        ok = np.isfinite(p).all(axis=1)
        if not ok.all():
            j = int(np.flatnonzero(~ok)[0])
            raise InvalidInputError(f"atom {start + j} of frame {frame} has non-finite coordinates {p[j].tolist()}")
        self.value[frame, start:start + len(p), :] = p

    # -- closing --------------------------------------------------------------------------
    def close(self) -> Path:
        """Finish the file and rename it to its final name. Returns the path."""
        if self._closed:
            return self.final
        if self.n_frames == 0:
            self._abort()
            raise InvalidInputError(f"no frame was written to {str(self.final)!r}")
        try:
            self.f.close()
        except BaseException:
            self._abort()
            raise
        self._out.commit()
        self._closed = True
        return self.final

    def _abort(self) -> None:
        f = getattr(self, "f", None)
        if f is not None:
            try:
                f.close()
            except Exception:
                pass
        self._out.abort()
        self._closed = True

    def __enter__(self) -> "H5MDWriter":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self._abort()


def write_h5md(path, frames: Model | Iterable[Model], *, steps=None, times=None, group: str = "all",
               boundary=None, position_dtype=np.float64, author: str = "kinemap user", overwrite: bool = False) -> Path:
    """Write in-memory models (one per frame, same atoms in the same order) as H5MD 1.1.

    Parameters
    ----------
    path : str or path-like
        Output file (written atomically).
    frames : Model or iterable of Model
        The frames. Species, occupancy and B come from the first frame (H5MD stores them
        once); positions and cells from every frame.
    steps, times : sequence, optional
        Integration step and time of each frame (default 0, 1, 2, ...).
    boundary : str or sequence of str, optional
        Default "periodic" when the first frame has a cell, else "none".

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InvalidInputError
        When frames differ in atom count or species, or no frame is given.
    """
    if isinstance(frames, Model):
        frames = [frames]
    it = iter(frames)
    try:
        first = next(it)
    except StopIteration:
        raise InvalidInputError("`frames` is empty: nothing to write") from None
    labels = first.species_labels()
    cells = first.cell is not None
    if boundary is None:
        boundary = "periodic" if cells else "none"
    td_box = False
    models = [first] + list(it)
    if cells:
        td_box = any(m.cell is None or not np.allclose(m.cell, first.cell) for m in models)
    with H5MDWriter(path, first.n_atoms, labels, group=group, boundary=boundary, time_dependent_box=td_box,
                    overwrite=overwrite,
                    position_dtype=position_dtype, author=author) as w:
        w.write_species(first.species)
        if np.any(first.occupancy != 1.0):
            w.write_occupancy(first.occupancy)
        if np.any(first.b_iso != 0.0):
            w.write_b_iso(first.b_iso)
        for i, m in enumerate(models):
            if m.n_atoms != first.n_atoms:
                raise InvalidInputError(f"frame {i} has {m.n_atoms} atoms but frame 0 has {first.n_atoms}; "
                                        "H5MD needs the same atoms in every frame")
            if i and not np.array_equal(m.species, first.species):
                j = int(np.flatnonzero(m.species != first.species)[0])
                raise InvalidInputError(f"frame {i}: species of atom {j} is {m.species[j]!r} but {first.species[j]!r} in frame 0")
            w.add_frame(m.positions, cell=m.cell if cells else None,
                        step=None if steps is None else steps[i], time=None if times is None else times[i])
    return w.final


__all__ = ["H5MDSource", "H5MDWriter", "open_h5md", "write_h5md", "open_h5", "tree"]
