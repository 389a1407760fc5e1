"""Shared pieces of the model-file readers: atom sources, chunks, units and species tables.

An *atom source* is what :func:`kinemap.open_model` returns: a lazy handle on one frame of a
model file. It knows the atom count, the species, the cell and the frame, and yields the atoms
in consecutive chunks (:class:`kinemap.Model` objects) read as bounded pieces of the file, so
a model never has to fit in memory. :func:`kinemap.scatter` accepts a source wherever it
accepts a model.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np

from ..errors import InvalidInputError, ModelFileError
from ..model import AtomSourceBase, Groups, Model, as_cell

#: Atoms per chunk when a reader is asked without a size (about 50 MB of arrays).
DEFAULT_READ_ATOMS = 1 << 20

# Length units understood in `unit` attributes, in Å per unit.
_LENGTH_UNITS = {
    "angstrom": 1.0, "angstroms": 1.0, "ang": 1.0, "a": 1.0, "aa": 1.0, "å": 1.0, "Å": 1.0,
    "nm": 10.0, "pm": 0.01, "um": 1.0e4, "µm": 1.0e4, "mm": 1.0e7, "m": 1.0e10,
    "bohr": 0.529177210903, "a0": 0.529177210903,
}
_UNIT_RE = re.compile(r"^\s*([-+0-9.eE]+)?\s*([^\s0-9+-][^\s]*?)(\+?(\d+))?\s*$")


def length_scale(unit, where: str, power: int = 1) -> float:
    """Factor that turns values in `unit` into Å (``power=1``) or Å² (``power=2``).

    Accepts H5MD-style unit strings such as ``"nm"``, ``"0.1 nm"``, ``"angstrom"``,
    ``"0.01 nm+2"`` (for Å²). None or an empty string means Å.

    Raises
    ------
    ModelFileError
        For a unit kinemap does not know, naming `where`.
    """
    if unit is None:
        return 1.0
    if isinstance(unit, bytes):
        unit = unit.decode("utf-8", "replace")
    if isinstance(unit, np.ndarray):
        unit = unit.item() if unit.size == 1 else str(unit)
        if isinstance(unit, bytes):
            unit = unit.decode("utf-8", "replace")
    text = str(unit).strip()
    if text == "":
        return 1.0
    whole = _LENGTH_UNITS.get(text, _LENGTH_UNITS.get(text.lower()))
    if whole is not None and power == 1:
        return whole
    m = _UNIT_RE.match(text)
    if not m:
        raise ModelFileError(f"{where}: unit {text!r} is not a length unit kinemap understands "
                             "(use e.g. 'angstrom', 'nm', '0.1 nm')")
    factor = float(m.group(1)) if m.group(1) else 1.0
    sym = m.group(2)
    exponent = int(m.group(4)) if m.group(4) else 1
    per = _LENGTH_UNITS.get(sym, _LENGTH_UNITS.get(sym.lower()))
    if per is None or exponent != power:
        want = "length" if power == 1 else f"length^{power}"
        raise ModelFileError(f"{where}: unit {text!r} is not a {want} unit kinemap understands "
                             "(use e.g. 'angstrom', 'nm', '0.1 nm'" + (", '0.01 nm+2'" if power == 2 else "") + ")")
    return factor * per**power


class SpeciesTable:
    """Integer species codes and their labels (an enumeration, or a user mapping).

    Parameters
    ----------
    codes : sequence of int
        The codes that may appear.
    labels : sequence of str
        The label of each code.
    where : str
        Dataset path or file used in error messages.
    """

    def __init__(self, codes: Sequence[int], labels: Sequence[str], where: str):
        codes = np.asarray(list(codes), dtype=np.int64)
        order = np.argsort(codes, kind="stable")
        self.codes = codes[order]
        self.labels = [str(labels[i]) for i in order]
        self.where = where
        if len(np.unique(self.codes)) != len(self.codes):
            raise ModelFileError(f"{where}: species codes are not unique: {self.codes.tolist()}")
        for code, lab in zip(self.codes, self.labels):
            if not lab:
                raise ModelFileError(f"{where}: species code {int(code)} has an empty label")
        distinct = sorted(set(self.labels))
        self.distinct = distinct
        pos = {lab: i for i, lab in enumerate(distinct)}
        #: index into `distinct` for each sorted code
        self.code_to_label_index = np.array([pos[lab] for lab in self.labels], dtype=np.int64)
        self.label_objects = np.array(distinct, dtype=object)

    def label_index(self, values: np.ndarray, offset: int, frame: int | None = None) -> np.ndarray:
        """Map a chunk of codes (atoms ``offset ...``) to indices into :attr:`distinct`.

        Raises
        ------
        ModelFileError
            For a code without label, naming the atom index and the dataset.
        """
        v = np.asarray(values).astype(np.int64, copy=False)
        if len(self.codes) == 0:
            pos = np.zeros(len(v), dtype=np.int64)
            bad = np.ones(len(v), dtype=bool)
        else:
            pos = np.searchsorted(self.codes, v)
            pos_c = np.minimum(pos, len(self.codes) - 1)
            bad = self.codes[pos_c] != v
            pos = pos_c
        if bad.any():
            j = int(np.flatnonzero(bad)[0])
            fr = "" if frame is None else f" (frame {frame})"
            raise ModelFileError(
                f"{self.where}: atom {offset + j}{fr} has species code {int(v[j])}, which has no "
                f"label (known codes: {dict(zip(self.codes.tolist(), self.labels))}); "
                "give a species map such as {1: 'Fe', 2: 'Ni'} (command line: --species-map 1=Fe,2=Ni)"
            )
        return self.code_to_label_index[pos]


def parse_species_map(text_or_map) -> dict[int, str] | None:
    """Turn ``"1=Fe,2=Ni"`` or ``{1: "Fe"}`` into ``{1: "Fe", 2: "Ni"}`` (None passes through).

    Raises
    ------
    InvalidInputError
        For entries that are not ``code=label`` with an integer code and a non-empty label.
    """
    if text_or_map is None:
        return None
    if isinstance(text_or_map, str):
        items = []
        for part in text_or_map.split(","):
            part = part.strip()
            if not part:
                continue
            if "=" not in part:
                raise InvalidInputError(f"species map entry {part!r} must look like CODE=LABEL, e.g. 1=Fe")
            k, v = part.split("=", 1)
            items.append((k.strip(), v.strip()))
    else:
        try:
            items = list(dict(text_or_map).items())
        except (TypeError, ValueError):
            raise InvalidInputError(f"`species_map` must be a mapping {{code: label}}, got {text_or_map!r}") from None
    out: dict[int, str] = {}
    for k, v in items:
        try:
            code = int(k)
        except (TypeError, ValueError):
            raise InvalidInputError(f"species map code {k!r} is not a whole number") from None
        if not isinstance(v, str) or not v:
            raise InvalidInputError(f"species map label for code {code} must be a non-empty string, got {v!r}")
        out[code] = v
    if not out:
        raise InvalidInputError("the species map is empty; write it as 1=Fe,2=Ni")
    return out


class ChunkModel(Model):
    """A piece of a streamed model. Same data as :class:`kinemap.Model`, built without
    re-validation (the reader has checked it) and with fast grouping from species indices."""

    _label_index: np.ndarray
    _labels: list

    @classmethod
    def build(cls, positions: np.ndarray, label_index: np.ndarray, labels: list[str],
              occupancy: np.ndarray | None, b_iso: np.ndarray | None, cell, box=None) -> "ChunkModel":
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
        m.u_aniso = None
        m._freeze()
        return m

    def groups(self) -> Groups:
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
    if isinstance(frame, bool) or not isinstance(frame, (int, np.integer)):
        raise InvalidInputError(f"`frame` must be a whole number, got {frame!r}")
    f = int(frame)
    if f < 0:
        f += n_frames
    if not 0 <= f < n_frames:
        raise InvalidInputError(f"`frame` {frame} is out of range: {where} has {n_frames} frame(s) (0 to {n_frames - 1})")
    return f


def check_chunk_atoms(chunk_atoms) -> int:
    if isinstance(chunk_atoms, bool) or not isinstance(chunk_atoms, (int, np.integer)) or chunk_atoms < 1:
        raise InvalidInputError(f"`chunk_atoms` must be a whole number >= 1, got {chunk_atoms!r}")
    return int(chunk_atoms)


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
        The lattice of h, k, l (default: the box).
    """

    format = "?"

    path: Path
    frame: int
    n_frames: int
    n_atoms: int

    def at_frame(self, frame: int) -> "FileSource":
        """A source on another frame of the same file (cheap: shares the file's index)."""
        raise NotImplementedError

    def describe(self) -> dict:
        """Summary for output files and ``kinemap info``: file, format, frame, atoms, cell, box."""
        d = {"file": str(self.path), "format": self.format, "frame": int(self.frame),
             "n_frames": int(self.n_frames)}
        d.update(super().describe())
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

    def species_labels(self) -> list[str]:
        return self._models[self.frame].species_labels()

    def iter_chunks(self, chunk_atoms: int = DEFAULT_READ_ATOMS):
        chunk_atoms = check_chunk_atoms(chunk_atoms)
        m = self._models[self.frame]
        for start in range(0, m.n_atoms, chunk_atoms):
            yield m.subset(slice(start, start + chunk_atoms))

    def at_frame(self, frame: int) -> "MemorySource":
        return MemorySource(self.path, self._models, self.format, frame, self._info)

    def read(self, max_atoms: int = 50_000_000) -> Model:
        return self._models[self.frame]

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
    try:
        return as_cell(mat, name=where)
    except InvalidInputError as exc:
        raise ModelFileError(str(exc)) from None
