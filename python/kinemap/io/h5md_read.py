"""H5MD 1.1 (HDF5 for molecular data): a streaming reader.

What kinemap reads from an H5MD file (paths relative to ``/particles/<group>``)::

    position/value   [frame][N][D] float   positions (D = 2 or 3); ``unit`` attribute
    position/step    [frame] int           (or a scalar step interval), optional time
    position         [N][D]                a time-independent position is accepted too
    box              attributes ``dimension`` (D) and ``boundary`` ("periodic"/"none" × D);
                     data element ``edges``: [D] (cuboid, the diagonal) or [D][D] (rows are
                     the edge vectors), as a dataset, a time-dependent group
                     (``edges/value`` [frame][D] or [frame][D][D]) or an attribute
    species          [N] or value [frame][N] (optional): an HDF5 enumeration (names →
                     codes), integer codes with a mapping given by the user or stored as
                     attributes ``names`` (and ``codes``), or strings
    image            [frame][N][D] int (optional; used with ``unwrap=True``)
    occupancy, b_iso [N] or value [frame][N] (kinemap additions, optional; B in Å²)
    u_aniso          [N][3][3] or value [frame][N][3][3] (kinemap addition, optional):
                     Cartesian U in Å² (unit attribute "0.01 nm+2"), T = exp(−½ qᵀUq)

Lengths are converted to Å from the ``unit`` attribute ("nm", "0.1 nm", "Angstrom", "Å";
no attribute means Å; box edges without a unit take the positions' unit). Files without
species (general-purpose MD tools keep the topology elsewhere) open and describe themselves;
atoms need ``species=`` then. Other elements (velocity, force, mass, charge, ...) and the
``observables``, ``connectivity`` and ``parameters`` groups are listed by ``describe()`` and
otherwise ignored. Atoms are read as bounded hyperslabs ``value[frame, start:stop, :]``; per
frame data (box edges, step, time) are read for the frame asked for only. Datasets that live
in other files (external links, external storage, virtual sources) are refused unless
``allow_external=True``. Note that for a periodic box, re-wrapping atoms into the box changes
A(q) except at the box's reciprocal-lattice points.
"""

from __future__ import annotations

import numpy as np

from ..errors import ModelFileError
from ._base import (
    DEFAULT_READ_ATOMS,
    ChunkModel,
    FileSource,
    check_chunk,
    check_chunk_atoms,
    check_u_aniso,
    check_values,
    normalise_frame,
)
from ._hdf5 import open_h5
from ._species import ColumnLabels
from .h5md_layout import LAYOUT_ERRORS, H5MDIndex


class H5MDSource(ColumnLabels, FileSource):
    """One frame of an H5MD file, read in bounded hyperslabs. Build with :func:`open_h5md`
    or :func:`kinemap.open_model`."""

    format = "h5md"

    def __init__(self, index: H5MDIndex, frame=None):
        self._ix = index
        self.path = index.path
        self.n_frames = index.n_frames
        self.frame = normalise_frame(frame, self.n_frames, str(self.path))
        self.n_atoms = index.n_atoms
        edges = index.edges_for(self.frame)
        self.boundary = index.boundary
        periodic = self.boundary is None or "periodic" in self.boundary
        self.box = edges if periodic else None
        self.cell = edges
        self._edges = edges
        self._label_cache = None

    @property
    def group(self) -> str:
        return self._ix.group

    def _at_frame(self, frame: int) -> H5MDSource:
        return H5MDSource(self._ix, frame)

    # -- species -------------------------------------------------------------------
    def _missing_species(self) -> str | None:
        return self._ix.missing_species()

    def _scan_labels(self) -> list[str]:
        ix = self._ix
        static = not self._column().framed
        if static and ix.static_labels is not None:
            return list(ix.static_labels)
        with self._open() as f:
            labels = self._column().scan(f, self._species_frame(), self.n_atoms)
        if static:
            ix.static_labels = list(labels)
        return labels

    def _labels_in_first(self, n: int) -> list[str]:
        with self._open() as f:
            idx, labels = self._column().chunk(f, self._species_frame(), 0, min(n, self.n_atoms))
        return [lab for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))) if c]

    # -- reading ---------------------------------------------------------------------
    def _open(self):
        return open_h5(self.path)

    def _read(self, el, fn, start, stop):
        try:
            return fn()
        except LAYOUT_ERRORS as exc:
            raise ModelFileError(f"{self.path}: cannot read {el.value_path} for atoms {start}..{stop - 1} "
                                 f"(frame {self.frame}); the file may be truncated or corrupt: {exc}") from None

    def _per_atom(self, f, el, start, stop):
        if el is None:
            return None
        ds = f[el.value_path]
        fn = (lambda: ds[self.frame, start:stop]) if el.time_dependent else (lambda: ds[start:stop])
        return np.asarray(self._read(el, fn, start, stop))

    def iter_range(self, start: int, stop: int, chunk_atoms: int):
        """The atoms ``start:stop`` as chunks, reading only those (hyperslabs)."""
        return self.iter_chunks(chunk_atoms, start=start, stop=stop)

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS, *, start: int = 0, stop: int | None = None):
        """Yield consecutive chunks of at most `chunk_atoms` atoms (hyperslab reads), of the
        atoms ``start:stop`` (default all).

        Raises
        ------
        ModelFileError
            Non-finite coordinates, unknown species codes, out-of-range occupancies or
            displacements (naming the atom index, frame and dataset), missing species (give
            ``species=``), or a read failure (truncated file).
        """
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        ix = self._ix
        pos_el = ix.position
        where = str(self.path)
        # Overflow of huge finite values to inf is caught by the checks after each step.
        with self._open() as f, np.errstate(over="ignore", invalid="ignore"):
            ds = f[pos_el.value_path]
            first, last = max(0, int(start)), self.n_atoms if stop is None else min(self.n_atoms, int(stop))
            for start in range(first, last, chunk_atoms):
                stop = min(last, start + chunk_atoms)
                if pos_el.time_dependent:
                    raw = self._read(pos_el, lambda: ds[self.frame, start:stop, :], start, stop)
                else:
                    raw = self._read(pos_el, lambda: ds[start:stop, :], start, stop)
                p = np.empty((stop - start, 3), dtype=np.float64)
                p[:, : ix.dim] = raw
                if ix.dim == 2:
                    p[:, 2] = 0.0
                check_chunk(p, start, f"{where}: {pos_el.value_path}", self.frame)
                if ix.scale != 1.0:
                    p[:, : ix.dim] *= ix.scale
                    check_chunk(p, start, f"{where}: {pos_el.value_path} (in angstrom)", self.frame)
                if ix.image is not None:
                    assert self._edges is not None  # the index refuses unwrap=True without box edges
                    img = self._per_atom(f, ix.image, start, stop).astype(np.float64)
                    if not np.isfinite(img).all():
                        j = int(np.flatnonzero(~np.isfinite(img).all(axis=1))[0])
                        raise ModelFileError(f"{where}: {ix.image.value_path}: atom {start + j}, frame {self.frame} "
                                             f"has non-finite image counts {img[j].tolist()}")
                    full = np.zeros((stop - start, 3))
                    full[:, : ix.dim] = img
                    p += full @ self._edges
                    check_chunk(p, start, f"{where}: {pos_el.value_path} + {ix.image.value_path}", self.frame)
                lab_idx, labels = self._chunk_labels(
                    start, stop, f, lambda: self._column().chunk(f, self._species_frame(), start, stop))
                occ = self._per_atom(f, ix.occupancy, start, stop)
                if occ is not None:
                    occ = occ.astype(np.float64)
                    check_values(occ, "occupancy", 0.0, 1.0, start, f"{where}: {ix.occupancy.value_path}")
                b = self._per_atom(f, ix.b_iso, start, stop)
                if b is not None:
                    b = b.astype(np.float64) * ix.b_scale
                    check_values(b, "b_iso", 0.0, None, start, f"{where}: {ix.b_iso.value_path}")
                u = self._per_atom(f, ix.u_aniso, start, stop)
                if u is not None:
                    u = u.astype(np.float64) * ix.u_scale
                    check_u_aniso(u, start, f"{where}: {ix.u_aniso.value_path}")
                yield ChunkModel.build(p, lab_idx, labels, occ, b, self.cell, self.box, u_aniso=u)

    def _extra_description(self) -> dict:
        ix = self._ix
        d = {
            "group": ix.group,
            "h5md_version": ix.h5md_version,
            "position_path": ix.position.value_path,
            "position_unit": ix.unit_note,
            "dimension": ix.dim,
            "boundary": ix.boundary,
            "box_kind": ix.box_note,
            "species_kind": None if ix.species_column is None else ix.species_column.kind,
            "elements": ix.elements,
        }
        if ix.other:
            d["other_groups"] = ix.other
        try:
            with self._open() as f:
                for name in ("step", "time"):
                    v = ix.position.at(f, name, self.frame) if ix.position.time_dependent else None
                    if v is not None:
                        d[name] = v
        except LAYOUT_ERRORS as exc:
            raise ModelFileError(f"{self.path}: cannot read the step/time of frame {self.frame}: {exc}") from None
        if ix.creator:
            d["creator"] = ix.creator
        if ix.unwrap:
            d["unwrapped"] = True
        if ix.u_aniso is not None:
            d["displacements"] = "anisotropic (u_aniso)"
        elif ix.b_iso is not None:
            d["displacements"] = "isotropic (b_iso)"
        return d


def open_h5md(path, frame=None, group: str | None = None, species_map=None, unwrap: bool = False, *,
              species=None, cell=None, supercell=None, allow_external: bool = False) -> H5MDSource:
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
    species, cell, supercell :
        As for :func:`kinemap.open_model`.
    allow_external : bool
        Follow external links and read datasets stored in other files (refused by default).

    Returns
    -------
    H5MDSource

    Raises
    ------
    FileNotFoundError
        When the file does not exist.
    ModelFileError
        When it is not HDF5, is truncated, lacks a needed dataset (the message lists what
        the file has), when shapes or frame counts of its datasets disagree, or when it
        points into other files (unless `allow_external`).
    InvalidInputError
        For a frame index out of range, a malformed species map or bad options.
    """
    from ._options import configure

    src = H5MDSource(H5MDIndex(path, group, species_map, unwrap, allow_external), frame)
    return configure(src, species=species, cell=cell, supercell=supercell, species_map=species_map,
                     allow_external=allow_external)


__all__ = ["H5MDSource", "open_h5md"]
