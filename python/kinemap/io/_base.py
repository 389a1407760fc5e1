"""Shared pieces of the model-file readers: atom sources, chunks, units, cells.

An *atom source* is what :func:`kinemap.open_model` returns: a lazy handle on one frame of a
model file. It knows the atom count, the species, the box, the cell and the frame, and yields
the atoms in consecutive chunks (:class:`kinemap.Model` objects) read as bounded pieces of the
file, so a model never has to fit in memory. :func:`kinemap.scatter` accepts a source wherever
it accepts a model.

Options that every reader takes (applied here, once, for all formats):

* ``species=``: labels the file lacks, or that replace the file's (see
  :mod:`kinemap.io._species`);
* ``cell=`` and ``supercell=``: the lattice that h, k, l refer to. The file's box stays
  ``source.box``; ``source.cell`` is the box (default), the given cell, or box = P·cell
  solved for the cell when only the supercell P is given — per frame, so the cell follows
  the box of a trajectory at constant pressure.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .._shared.validate import whole_number
from ..errors import InvalidInputError, ModelFileError
from ..model import AtomSourceBase, Groups, Model, as_cell, resolve_box_and_cell
from ._species import LABEL_SCAN_ATOMS, SPECIES_HINT, SpeciesSupply, SpeciesTable, parse_species_map
from ._units import length_scale

if TYPE_CHECKING:
    from typing_extensions import Self  # typing.Self from Python 3.11

#: Atoms per chunk when a reader is asked without a size (about 50 MB of arrays).
DEFAULT_READ_ATOMS = 1 << 20

#: Largest box edge component accepted from a file, in Å (one metre is 10¹⁰ Å).
MAX_EDGE = 1e12

#: Atoms whose species ``describe()`` reads at most (it stays quick on any file).
DESCRIBE_SCAN_ATOMS = 1 << 20

class ChunkModel(Model):
    """A piece of a streamed model. Same data as :class:`kinemap.Model`, built without
    re-validation (the reader has checked it) and with fast grouping from species indices."""

    _label_index: np.ndarray
    _labels: list

    @classmethod
    def build(cls, positions: np.ndarray, label_index: np.ndarray, labels: list[str],
              occupancy: np.ndarray | None, b_iso: np.ndarray | None, cell, box=None,
              u_aniso: np.ndarray | None = None) -> ChunkModel:
        """A chunk from checked arrays: `label_index` indexes `labels`; `u_aniso` (n, 3, 3)
        Cartesian U in Å² replaces B (then `b_iso` must be None)."""
        m = cls.__new__(cls)
        n = len(positions)
        m.cell = cell
        m.box = box
        m.positions = np.ascontiguousarray(positions, dtype=np.float64)
        m._label_index = np.ascontiguousarray(label_index, dtype=np.int64)
        m._labels = list(labels)
        m.species = np.asarray(labels, dtype=object)[m._label_index] if n else np.empty(0, dtype=object)
        m.occupancy = np.ones(n) if occupancy is None else np.ascontiguousarray(occupancy, dtype=np.float64)
        m.b_iso = np.zeros(n) if b_iso is None else np.ascontiguousarray(b_iso, dtype=np.float64)
        m.u_aniso = None if u_aniso is None else np.ascontiguousarray(u_aniso, dtype=np.float64)
        m._freeze()
        return m

    def groups(self) -> Groups:
        if self.u_aniso is not None:
            return super().groups()
        b = self.b_iso
        if len(b) and b.min() != b.max():
            return super().groups()
        b0 = float(b[0]) if len(b) else 0.0
        present = np.bincount(self._label_index, minlength=len(self._labels)) > 0
        remap = np.cumsum(present) - 1
        labels = [lab for lab, p in zip(self._labels, present) if p]
        return Groups(index=np.ascontiguousarray(remap[self._label_index], dtype=np.uint32),
                      labels=labels, b_iso=np.full(len(labels), b0), u_aniso=None)


def check_chunk(positions: np.ndarray, offset: int, where: str, frame: int | None) -> None:
    """Refuse non-finite coordinates, naming the atom index, frame and dataset."""
    if np.isfinite(positions).all():  # the whole-array test is fast; find the atom only when needed
        return
    ok = np.isfinite(positions).all(axis=1)
    if not ok.all():
        j = int(np.flatnonzero(~ok)[0])
        fr = "" if frame is None else f", frame {frame}"
        raise ModelFileError(f"{where}: atom {offset + j}{fr} has non-finite coordinates "
                             f"{positions[j].tolist()}")


def check_values(values: np.ndarray, name: str, lo: float, hi: float | None, offset: int, where: str) -> None:
    """Refuse occupancies/B values outside their range, naming the atom index and dataset."""
    bad = ~np.isfinite(values) | (values < lo)
    if hi is not None:
        bad |= values > hi
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        rng = f"[{lo}, {hi}]" if hi is not None else f">= {lo}"
        raise ModelFileError(f"{where}: {name} of atom {offset + j} is {float(values[j])!r}, outside {rng}")


def normalise_frame(frame, n_frames: int, where: str) -> int:
    """Turn `frame` (None = first, negative counts from the end) into an index."""
    if frame is None:
        return 0
    f = whole_number(frame, "frame")
    if f < 0:
        f += n_frames
    if not 0 <= f < n_frames:
        raise InvalidInputError(f"`frame` {frame} is out of range: {where} has {n_frames} frame(s) (0 to {n_frames - 1})")
    return f


def check_chunk_atoms(chunk_atoms) -> int:
    return whole_number(chunk_atoms, "chunk_atoms", minimum=1)


def check_u_aniso(u: np.ndarray, offset: int, where: str) -> None:
    """Refuse displacement tensors that are not finite, symmetric and positive
    semi-definite, naming the atom index and dataset."""
    n = len(u)
    if n == 0:
        return
    flat = u.reshape(n, 9)
    bad = ~np.isfinite(flat).all(axis=1)
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        raise ModelFileError(f"{where}: u_aniso of atom {offset + j} has non-finite entries {u[j].tolist()}")
    if np.abs(flat).max() > 1e6:
        j = int(np.flatnonzero(np.abs(flat).max(axis=1) > 1e6)[0])
        raise ModelFileError(f"{where}: u_aniso of atom {offset + j} has entries beyond 1e6 Å²: {u[j].tolist()}")
    scale = np.maximum(np.abs(flat).max(axis=1), 1e-300)
    asym = np.abs(u - u.transpose(0, 2, 1)).max(axis=(1, 2)) / scale
    if (asym > 1e-9).any():
        j = int(np.flatnonzero(asym > 1e-9)[0])
        raise ModelFileError(f"{where}: u_aniso of atom {offset + j} is not symmetric: {u[j].tolist()}")
    low = np.linalg.eigvalsh(u).min(axis=1)
    bad = low < -1e-9 * scale
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        raise ModelFileError(f"{where}: u_aniso of atom {offset + j} is not positive semi-definite "
                             f"(smallest eigenvalue {float(low[j]):.3g} Å²)")


@dataclass(frozen=True, eq=False)
class SourceOptions:
    """What the user added to a file when opening it (kept across frames)."""

    cell: np.ndarray | None = None
    supercell: np.ndarray | None = None
    species: SpeciesSupply | None = None

    @property
    def none(self) -> bool:
        """True when nothing was added."""
        return self.cell is None and self.supercell is None and self.species is None


class FileSource(AtomSourceBase):
    """Base class of the lazy model-file readers (one frame of one file); follows the
    :class:`kinemap.model.AtomSource` protocol.

    Attributes
    ----------
    path : pathlib.Path
        The file.
    format : str
        "h5md", "hdf5", "extxyz", "lammps-dump" or "ase".
    frame : int
        The frame this source reads (0-based).
    n_frames : int
        Frames in the file.
    n_atoms : int
        Atoms in this frame.
    box : ndarray (3, 3) or None
        The periodic box of this frame as rows a, b, c (Å), or None for an open model.
    cell : ndarray (3, 3) or None
        The lattice of h, k, l (default: the box; see ``cell=``/``supercell=`` of
        :func:`kinemap.open_model`).

    Notes
    -----
    A reader subclass sets the attributes above from the file and implements
    :meth:`_at_frame`, :meth:`iter_chunks` (taking each chunk's labels from
    :meth:`_chunk_labels`), :meth:`_scan_labels` and, when cheaper than the defaults,
    :meth:`_missing_species`, :meth:`_declared_labels` and :meth:`_labels_in_first`.
    """

    format = "?"

    path: Path
    frame: int
    n_frames: int
    n_atoms: int
    _opts: SourceOptions = SourceOptions()
    _label_cache: list[str] | None = None

    # -- options ------------------------------------------------------------------------
    def _setup(self, opts: SourceOptions) -> Self:
        """Apply the user's options (species, cell, supercell) to this frame."""
        self._opts = opts
        if opts.cell is not None or opts.supercell is not None:
            file_box = self.box
            ref = file_box if file_box is not None else self._cell
            try:
                box, cell = resolve_box_and_cell(ref, opts.cell, opts.supercell)
            except InvalidInputError as exc:
                raise InvalidInputError(f"{self.path}, frame {self.frame}: {exc}") from None
            # A file that says its edges are not periodic keeps box None.
            self.box = box if (file_box is not None or ref is None) else None
            self._cell = cell
        if opts.species is not None:
            opts.species.check_atoms(self.n_atoms, self.frame, str(self.path))
        return self

    def at_frame(self, frame: int) -> FileSource:
        """A source on another frame of the same file (cheap: shares the file's index and
        the options it was opened with)."""
        return self._at_frame(frame)._setup(self._opts)

    def _at_frame(self, frame: int) -> FileSource:
        raise NotImplementedError

    # -- species ------------------------------------------------------------------------
    def _chunk_labels(self, start: int, stop: int, f, from_file) -> tuple[np.ndarray, list[str]]:
        """(index into labels, labels) of atoms ``start .. stop-1``: from ``species=`` when
        given, else ``from_file()``; `f` is the reader's open HDF5 file or None."""
        sup = self._opts.species
        if sup is not None:
            return sup.chunk(f, self.frame, start, stop)
        miss = self._missing_species()
        if miss:
            raise ModelFileError(miss)
        return from_file()

    def _missing_species(self) -> str | None:
        """Why the file cannot give labels (and ``species=`` is needed), or None."""
        return None

    def _declared_labels(self) -> list[str] | None:
        """Labels the file declares (an enumeration, a species map) without reading atoms."""
        return None

    def _scan_labels(self) -> list[str]:
        """Sorted labels of all atoms of this frame (one streamed pass)."""
        present: set[str] = set()
        for chunk in self.iter_chunks(DEFAULT_READ_ATOMS):
            present.update(chunk.species_labels())
        return sorted(present)

    def _labels_in_first(self, n: int) -> list[str]:
        """Sorted labels among the first `n` atoms."""
        for chunk in self.iter_chunks(n):
            return chunk.species_labels()
        return []

    def species_labels(self) -> list[str]:
        """Sorted distinct labels of this frame's atoms.

        Exact (one streamed pass over the species, cached), except above
        ``LABEL_SCAN_ATOMS`` atoms with an enumeration or species map, where the labels it
        declares are given (some may belong to no atom).

        Raises
        ------
        ModelFileError
            When the file has no species and none were given (``species=``), or a code has
            no label.
        """
        sup = self._opts.species
        if sup is not None:
            return sup.labels(self.frame, self.n_atoms)
        miss = self._missing_species()
        if miss:
            raise ModelFileError(miss)
        if self._label_cache is None:
            declared = self._declared_labels()
            if declared is not None and self.n_atoms > LABEL_SCAN_ATOMS:
                self._label_cache = sorted(declared)
            else:
                self._label_cache = self._scan_labels()
        return list(self._label_cache)

    def species_counts(self) -> dict[str, int]:
        """Atoms per species label in this frame (reads every atom: one streamed pass)."""
        out: dict[str, int] = {}
        for chunk in self.iter_chunks(DEFAULT_READ_ATOMS):
            for lab, c in chunk.species_counts().items():
                out[lab] = out.get(lab, 0) + c
        return dict(sorted(out.items()))

    def _species_summary(self) -> tuple[list[str] | None, str | None, list[str], list[str]]:
        """(labels, note, missing, problems) for :meth:`describe`, reading at most
        ``DESCRIBE_SCAN_ATOMS`` atoms."""
        n = int(self.n_atoms)
        sup = self._opts.species
        try:
            if sup is not None:
                labels, note = sup.summary(self.frame, n, DESCRIBE_SCAN_ATOMS)
                return labels, note, [], []
            miss = self._missing_species()
            if miss:
                return None, None, [f"species: {miss}"], []
            if n <= DESCRIBE_SCAN_ATOMS:
                return self.species_labels(), None, [], []
            declared = self._declared_labels()
            if declared is not None:
                return sorted(declared), f"labels the file declares; atoms not counted ({n:,} atoms)", [], []
            return (self._labels_in_first(DESCRIBE_SCAN_ATOMS),
                    f"species counted over the first {DESCRIBE_SCAN_ATOMS:,} of {n:,} atoms", [], [])
        except ModelFileError as exc:
            return None, None, [], [str(exc)]

    # -- description --------------------------------------------------------------------
    def describe(self) -> dict:
        """What the file holds and what is missing, for output files and ``kinemap info``.

        Bounded in time on any file: species are read for at most ``DESCRIBE_SCAN_ATOMS``
        atoms (a note says so), and problems found are reported under ``"problems"`` instead
        of raised. Keys: file, format, frame, n_frames, n_atoms, species (None when the file
        has none), cell, box, format-specific details, and when present ``species_note``,
        ``cell_note``, ``missing``, ``problems``.
        """
        d: dict = {"file": str(self.path), "format": self.format, "frame": int(self.frame),
                   "n_frames": int(self.n_frames), "n_atoms": int(self.n_atoms)}
        labels, note, missing, problems = self._species_summary()
        d["species"] = labels
        if note:
            d["species_note"] = note
        d["cell"] = None if self.cell is None else np.asarray(self.cell).tolist()
        d["box"] = None if self.box is None else np.asarray(self.box).tolist()
        if self._opts.cell is not None and self._opts.supercell is not None:
            d["cell_note"] = "given (cell=...), box = supercell · cell"
        elif self._opts.cell is not None:
            d["cell_note"] = "given (cell=...)"
        elif self._opts.supercell is not None:
            d["cell_note"] = "box / supercell (supercell=...)"
        if self._opts.supercell is not None:
            d["supercell"] = np.asarray(self._opts.supercell).astype(int).tolist()
        try:
            d.update(self._extra_description())
        except ModelFileError as exc:
            problems.append(str(exc))
        if missing:
            d["missing"] = missing
        if problems:
            d["problems"] = problems
        return d

    def frames(self) -> list[int]:
        """All frame indices of the file."""
        return list(range(self.n_frames))

    def __len__(self) -> int:
        return int(self.n_atoms)

    def __repr__(self) -> str:
        return (f"{type(self).__name__}({str(self.path)!r}, frame={self.frame}, "
                f"n_frames={self.n_frames}, n_atoms={self.n_atoms})")


class MemorySource(FileSource):
    """Frames held in memory as :class:`Model` objects (small files read through ASE)."""

    def __init__(self, path, models: list[Model], fmt: str, frame=None, info: dict | None = None):
        if not models:
            raise ModelFileError(f"{path}: the file holds no frames")
        self.path = Path(path)
        self.format = fmt
        self._models = models
        self.n_frames = len(models)
        self.frame = normalise_frame(frame, self.n_frames, str(path))
        m = models[self.frame]
        self.n_atoms = m.n_atoms
        self.box = m.box
        self.cell = m.cell
        self._info = dict(info or {})

    def _scan_labels(self) -> list[str]:
        return self._models[self.frame].species_labels()

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS) -> Iterator[Model]:
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        m = self._models[self.frame]
        plain = self._opts.none
        for start in range(0, m.n_atoms, chunk_atoms):
            sub = m.subset(slice(start, start + chunk_atoms))
            if plain:
                yield sub
                continue
            stop = start + sub.n_atoms

            def own(sub=sub):
                labels, idx = np.unique(sub.species.astype(str), return_inverse=True)
                return idx.reshape(-1), [str(x) for x in labels]

            idx, labels = self._chunk_labels(start, stop, None, own)
            aniso = sub.u_aniso is not None
            yield ChunkModel.build(sub.positions, idx, labels, sub.occupancy, None if aniso else sub.b_iso,
                                   self.cell, self.box, u_aniso=sub.u_aniso)

    def _at_frame(self, frame: int) -> MemorySource:
        return MemorySource(self.path, self._models, self.format, frame, self._info)

    def read(self, max_atoms: int = 50_000_000) -> Model:
        if self._opts.none:
            return self._models[self.frame]
        return super().read(max_atoms)

    def _extra_description(self) -> dict:
        return dict(self._info)


def cell_from_edges(edges: np.ndarray, where: str) -> np.ndarray:
    """A 3x3 cell from H5MD-style edges: a [D] diagonal (cuboid) or a [D][D] matrix of rows;
    two-dimensional boxes get c = (0, 0, 1) Å so that hkl grids with l = 0 work."""
    e = np.asarray(edges, dtype=np.float64)
    if e.ndim == 1:
        d = len(e)
        if d not in (2, 3):
            raise ModelFileError(f"{where}: box edges must have 2 or 3 entries, got {e.shape}")
        mat = np.diag(np.concatenate([e, np.ones(3 - d)]))
    elif e.ndim == 2 and e.shape[0] == e.shape[1] and e.shape[0] in (2, 3):
        d = e.shape[0]
        mat = np.eye(3)
        mat[:d, :d] = e
    else:
        raise ModelFileError(f"{where}: box edges must have shape [D] or [D][D] with D = 2 or 3, got {e.shape}")
    if not np.isfinite(mat).all():
        raise ModelFileError(f"{where}: box edges have non-finite entries {mat.tolist()}")
    big = float(np.abs(mat).max())
    if big > MAX_EDGE:
        raise ModelFileError(f"{where}: box edges reach {big:.3g} angstrom (more than {MAX_EDGE:.0e}); an atomistic "
                             "model's box is far smaller: check the values and the unit")
    try:
        return as_cell(mat, name=where)
    except InvalidInputError as exc:
        raise ModelFileError(str(exc)) from None


__all__ = ["DEFAULT_READ_ATOMS", "DESCRIBE_SCAN_ATOMS", "length_scale", "ChunkModel", "check_chunk", "check_values",
           "check_u_aniso", "normalise_frame", "check_chunk_atoms", "SourceOptions", "FileSource", "MemorySource",
           "cell_from_edges", "SpeciesTable", "parse_species_map", "SPECIES_HINT"]
