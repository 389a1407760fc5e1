"""Species labels: integer codes with names, columns of labels in HDF5 files, and labels the
user supplies (``species=`` of :func:`kinemap.open_model`).

A file may store species as an HDF5 enumeration (names → codes), as integer codes whose
names come from elsewhere (a species map, a ``names`` attribute, a names dataset), as strings,
or not at all (general-purpose MD tools keep the topology in another file). ``species=``
supplies labels a file lacks or overrides the file's own:

* one label for all atoms: ``species="Ar"``;
* one label per atom: a sequence, e.g. ``["Fe", "Ni", ...]`` (or integer codes with a
  species map);
* a file of labels: a text file of whitespace-separated labels (``#`` starts a comment) or a
  ``.npy`` array of strings or of integer codes (with a species map). A string is taken as a
  file name when it contains ``/`` or ends in ``.txt``, ``.dat``, ``.csv``, ``.lst``,
  ``.list``, ``.labels`` or ``.npy`` (write ``./name`` for other names);
* a dataset of the model file itself (HDF5 files only), e.g. ``"/particles/all/type"``:
  strings, an enumeration, or integer codes with a species map.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._shared.memory import check_fits
from .._shared.validate import file_name
from ..errors import InvalidInputError, ModelFileError
from ._hdf5 import attr_numbers, attr_strs, get_checked, h5py_module, open_h5, tree

#: Suffixes that make a ``species=`` string a file of labels rather than one label.
LABEL_FILE_SUFFIXES = (".txt", ".dat", ".csv", ".lst", ".list", ".labels", ".npy")

#: Atoms whose species an exact label scan reads; beyond it, sources with a declared set of
#: labels (an enumeration or a species map) report that set without reading every atom.
LABEL_SCAN_ATOMS = 1 << 24

SPECIES_HINT = "give species=... (command line --species): one label, one label per atom, a file of labels or a dataset path"


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
        code_array = np.asarray(list(codes), dtype=np.int64)
        order = np.argsort(code_array, kind="stable")
        self.codes = code_array[order]
        self.labels = [str(labels[int(i)]) for i in order]
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
            pos = np.minimum(np.searchsorted(self.codes, v), len(self.codes) - 1)
            bad = self.codes[pos] != v
        if bad.any():
            j = int(np.flatnonzero(bad)[0])
            fr = "" if frame is None else f" (frame {frame})"
            known = dict(zip(self.codes.tolist()[:20], self.labels[:20]))
            raise ModelFileError(
                f"{self.where}: atom {offset + j}{fr} has species code {int(v[j])}, which has no "
                f"label (known codes: {known}); give a species map such as {{1: 'Fe', 2: 'Ni'}} "
                "(command line: --species-map 1=Fe,2=Ni)"
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
        except (TypeError, ValueError, OverflowError):
            raise InvalidInputError(f"species map code {k!r} is not a whole number") from None
        if not isinstance(v, str) or not v:
            raise InvalidInputError(f"species map label for code {code} must be a non-empty string, got {v!r}")
        out[code] = v
    if not out:
        raise InvalidInputError("the species map is empty; write it as 1=Fe,2=Ni")
    return out


def _decode_labels(raw, where: str, offset: int) -> tuple[np.ndarray, list[str]]:
    """Strings (bytes or text) → (index into sorted distinct labels, those labels)."""
    labs = np.array([x.decode("utf-8", "replace") if isinstance(x, bytes) else str(x) for x in np.asarray(raw).reshape(-1)],
                    dtype=object)
    empty = labs == ""
    if empty.any():
        j = int(np.flatnonzero(empty)[0])
        raise ModelFileError(f"{where}: atom {offset + j} has an empty species label")
    uniq, inv = np.unique(labs.astype(str), return_inverse=True)
    return inv.reshape(-1), [str(u) for u in uniq]


class LabelColumn:
    """Species stored in an HDF5 dataset: an enumeration, strings, or integer codes with
    names from a species map, a ``names`` attribute or a names dataset.

    Parameters
    ----------
    ds : h5py.Dataset
        The dataset: ``[N]`` (time-independent) or ``[frame][N]`` when `framed`.
    framed : bool
        Whether the first axis is the frame.
    where : str
        ``"file: /path"`` for messages.
    species_map : dict, optional
        Labels of integer codes (overrides an enumeration's names).
    names : dict, optional
        Labels of integer codes found in the file (used when no species map is given).
    path : str, optional
        The path by which the reader found the dataset in the model file (default: its
        name; differs when it was reached through a link).
    """

    def __init__(self, ds, framed: bool, where: str, species_map=None, names: dict | None = None,
                 path: str | None = None):
        h5py = h5py_module()
        self.path = path or ds.name
        self.framed = bool(framed)
        self.where = where
        self.shape = tuple(ds.shape)
        self.table: SpeciesTable | None = None
        dtype = ds.dtype
        enum = h5py.check_enum_dtype(dtype)
        user = parse_species_map(species_map)
        if enum is not None:
            self.kind = "enumeration"
            mapping = {int(v): str(k) for k, v in enum.items()}
            if user:
                mapping.update(user)
            self.table = SpeciesTable(list(mapping), list(mapping.values()), where)
        elif h5py.check_string_dtype(dtype) is not None or dtype.kind in "SU":
            self.kind = "strings"
        elif dtype.kind in "iu":
            self.kind = "integer"
            named = user or names
            if named:
                self.table = SpeciesTable(list(named), list(named.values()), where)
        else:
            raise ModelFileError(f"{where} must hold an enumeration, integer codes or strings, got type {dtype}")

    def missing(self) -> str | None:
        """Why labels cannot be had (integer codes without names), or None."""
        if self.kind == "integer" and self.table is None:
            return (f"{self.where} holds integer species codes without names; give a species map such as "
                    "{1: 'Fe', 2: 'Ni'} (command line: --species-map 1=Fe,2=Ni), or " + SPECIES_HINT)
        return None

    def declared(self) -> list[str] | None:
        """The labels the codes can take (enumeration or map), without reading atoms."""
        return None if self.table is None else list(self.table.distinct)

    def read(self, f, frame: int, start: int, stop: int) -> np.ndarray:
        ds = f[self.path]
        try:
            return np.asarray(ds[frame, start:stop] if self.framed else ds[start:stop])
        except Exception as exc:
            raise ModelFileError(f"{self.where}: cannot read species of atoms {start}..{stop - 1} (frame {frame}); "
                                 f"the file may be truncated or corrupt: {exc}") from None

    def labels_of(self, raw, start: int, frame: int | None) -> tuple[np.ndarray, list[str]]:
        """(index into labels, labels) of a chunk of raw values."""
        if self.kind == "strings":
            return _decode_labels(raw, self.where, start)
        miss = self.missing()
        if miss:
            raise ModelFileError(miss)
        assert self.table is not None  # enumerations and named integer codes have one (else `miss`)
        return self.table.label_index(raw, start, frame), self.table.distinct

    def chunk(self, f, frame: int, start: int, stop: int) -> tuple[np.ndarray, list[str]]:
        return self.labels_of(self.read(f, frame, start, stop), start, frame)

    def scan(self, f, frame: int, n_atoms: int, block: int = 1 << 22) -> list[str]:
        """Sorted labels present among atoms 0 .. n_atoms-1 (one streamed pass)."""
        present: set[str] = set()
        for start in range(0, n_atoms, block):
            stop = min(n_atoms, start + block)
            idx, labels = self.chunk(f, frame, start, stop)
            counts = np.bincount(idx, minlength=len(labels))
            present.update(lab for lab, c in zip(labels, counts) if c)
        return sorted(present)


def file_names_attribute(obj, where: str) -> dict[int, str] | None:
    """A code→label mapping stored as attributes ``names`` (label of code 0, 1, ...) or
    ``codes`` + ``names`` of a species dataset or group."""
    names = obj.attrs.get("names")
    if names is None:
        return None
    labels = attr_strs(names)
    codes = obj.attrs.get("codes")
    codes = (list(range(len(labels))) if codes is None
             else attr_numbers(codes, f"{where}: attribute 'codes'", whole=True).tolist())
    if len(codes) != len(labels):
        raise ModelFileError(f"{where}: attributes 'codes' and 'names' have different lengths")
    return dict(zip(codes, labels))


# --------------------------------------------------------------------------------------
# labels supplied by the user
# --------------------------------------------------------------------------------------
class SpeciesSupply:
    """Labels given with ``species=``: one label, one per atom, or a dataset of the file."""

    def __init__(self, kind: str, source: str, *, label: str | None = None, codes: np.ndarray | None = None,
                 labels: list[str] | None = None, column: LabelColumn | None = None, path: Path | None = None,
                 n_frames: int = 1):
        self.kind = kind  # "one", "per-atom", "dataset"
        self.source = source
        self.label = label
        self.codes = codes
        self.distinct = labels
        self.column = column
        self.path = path
        self.n_frames = n_frames
        self._scanned: dict[int, list[str]] = {}

    # -- what each kind holds (set by species_supply) ---------------------------------
    def _one(self) -> str:
        assert self.label is not None  # kind "one"
        return self.label

    def _per_atom(self) -> tuple[np.ndarray, list[str]]:
        assert self.codes is not None and self.distinct is not None  # kind "per-atom"
        return self.codes, self.distinct

    def _dataset(self) -> tuple[LabelColumn, Path]:
        assert self.column is not None and self.path is not None  # kind "dataset"
        return self.column, self.path

    # -- checks when applied to a frame ------------------------------------------------
    def check_atoms(self, n_atoms: int, frame: int, where: str) -> None:
        if self.kind == "per-atom":
            codes, _ = self._per_atom()
            if len(codes) != n_atoms:
                raise InvalidInputError(f"`species` gives {len(codes):,} labels ({self.source}) but {where} has "
                                        f"{n_atoms:,} atoms in frame {frame}; give one label per atom")
        if self.kind == "dataset":
            column, _ = self._dataset()
            n = column.shape[-1] if column.shape else 0
            if n != n_atoms:
                raise ModelFileError(f"`species` dataset {column.path} has {n:,} labels per frame but {where} "
                                     f"has {n_atoms:,} atoms in frame {frame}")

    def _frame(self, frame: int) -> int:
        return frame if (self.column is not None and self.column.framed) else 0

    def chunk(self, f, frame: int, start: int, stop: int) -> tuple[np.ndarray, list[str]]:
        """(index into labels, labels) of atoms ``start .. stop-1``; `f` is the open HDF5
        model file (or None)."""
        if self.kind == "one":
            return np.zeros(stop - start, dtype=np.int64), [self._one()]
        if self.kind == "per-atom":
            codes, distinct = self._per_atom()
            return codes[start:stop].astype(np.int64), distinct
        column, path = self._dataset()
        if f is None:
            with open_h5(path) as g:
                return column.chunk(g, self._frame(frame), start, stop)
        return column.chunk(f, self._frame(frame), start, stop)

    def labels(self, frame: int, n_atoms: int) -> list[str]:
        """Sorted labels present (exact; a dataset is read once per frame, or its declared
        labels are used beyond :data:`LABEL_SCAN_ATOMS` atoms)."""
        if self.kind == "one":
            return [self._one()]
        if self.kind == "per-atom":
            return list(self._per_atom()[1])
        column, path = self._dataset()
        fr = self._frame(frame)
        if fr not in self._scanned:
            miss = column.missing()
            if miss:
                raise ModelFileError(miss)
            declared = column.declared()
            if declared is not None and n_atoms > LABEL_SCAN_ATOMS:
                self._scanned[fr] = sorted(declared)
            else:
                with open_h5(path) as g:
                    self._scanned[fr] = column.scan(g, fr, n_atoms)
        return list(self._scanned[fr])

    def summary(self, frame: int, n_atoms: int, scan_limit: int) -> tuple[list[str] | None, str | None]:
        """(labels, note) for ``describe()``, reading at most `scan_limit` atoms."""
        if self.kind != "dataset" or n_atoms <= scan_limit:
            return self.labels(frame, n_atoms), f"from {self.source}"
        column, path = self._dataset()
        declared = column.declared()
        if declared is not None:
            return sorted(declared), f"from {self.source}: labels it declares (atoms not counted)"
        with open_h5(path) as g:
            idx, labels = column.chunk(g, self._frame(frame), 0, scan_limit)
        present = [lab for lab, c in zip(labels, np.bincount(idx, minlength=len(labels))) if c]
        return sorted(present), f"from {self.source}: species counted over the first {scan_limit:,} of {n_atoms:,} atoms"


def _labels_from_array(arr, source: str, species_map) -> tuple[np.ndarray, list[str]]:
    a = np.asarray(arr)
    if a.ndim != 1:
        raise InvalidInputError(f"`species` ({source}) must be one label per atom (a 1-D list), got shape {a.shape}")
    if a.dtype.kind in "iu":
        user = parse_species_map(species_map)
        if not user:
            raise InvalidInputError(f"`species` ({source}) holds integer codes; give their labels with "
                                    "species_map={1: 'Fe', 2: 'Ni'} (command line --species-map 1=Fe,2=Ni)")
        table = SpeciesTable(list(user), list(user.values()), f"`species` ({source})")
        try:
            idx = table.label_index(a, 0)
        except ModelFileError as exc:
            raise InvalidInputError(str(exc)) from None
        return idx.astype(np.int32), list(table.distinct)
    if a.dtype.kind not in "SUO":
        raise InvalidInputError(f"`species` ({source}) must hold labels (strings), got type {a.dtype}")
    for j, lab in enumerate(a if a.dtype.kind == "O" else ()):
        if not isinstance(lab, (str, bytes)) or not lab:
            raise InvalidInputError(f"`species` ({source}): label of atom {j} must be a non-empty string, got {lab!r}")
    try:
        idx, labels = _decode_labels(a, f"`species` ({source})", 0)
    except ModelFileError as exc:
        raise InvalidInputError(str(exc)) from None
    return idx.astype(np.int32), labels


def _read_label_file(path: Path, species_map) -> tuple[np.ndarray, list[str]]:
    if not path.exists():
        raise FileNotFoundError(f"`species` file {str(path)!r} does not exist")
    if path.is_dir():
        raise IsADirectoryError(f"`species` file {str(path)!r} is a folder")
    size = path.stat().st_size
    if path.suffix.lower() == ".npy":
        try:
            arr = np.load(path, mmap_mode="r", allow_pickle=False)
        except (ValueError, OSError) as exc:
            raise InvalidInputError(f"`species` file {str(path)!r} is not a readable .npy array of labels: {exc}") from None
        check_fits(arr.size * (arr.itemsize + 16), f"the species labels of {str(path)!r}")
        return _labels_from_array(np.asarray(arr), str(path), species_map)
    # Each label takes at least two bytes of text (a character and a separator).
    check_fits(size * 40, f"the species labels of {str(path)!r} ({size:,} bytes of text)")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise InvalidInputError(f"`species` file {str(path)!r} is not UTF-8 text: {exc}") from None
    words = [w for line in text.splitlines() for w in line.split("#", 1)[0].split()]
    if not words:
        raise InvalidInputError(f"`species` file {str(path)!r} holds no labels")
    if species_map is not None and all(w.lstrip("-").isdigit() for w in words):
        return _labels_from_array(np.array([int(w) for w in words]), str(path), species_map)
    return _labels_from_array(np.array(words, dtype=object), str(path), None)


def _is_label_file_name(text: str) -> bool:
    return "/" in text or os.sep in text or Path(text).suffix.lower() in LABEL_FILE_SUFFIXES


def species_supply(species, *, path, fmt: str, n_frames: int, species_map=None,
                   allow_external: bool = False) -> SpeciesSupply | None:
    """Interpret the ``species=`` argument of :func:`kinemap.open_model` (see the module
    notes). Returns None when `species` is None.

    Raises
    ------
    InvalidInputError
        Labels that are empty or not strings, integer codes without a species map, a dataset
        path for a text file.
    FileNotFoundError
        A file of labels that does not exist.
    ModelFileError
        A dataset of the model file that cannot hold labels.
    """
    if species is None:
        return None
    if isinstance(species, os.PathLike) or (isinstance(species, bytes)):
        p = Path(file_name(species, "species"))
        codes, labels = _read_label_file(p, species_map)
        return SpeciesSupply("per-atom", f"file {str(p)!r}", codes=codes, labels=labels)
    if isinstance(species, str):
        text = species.strip()
        if not text:
            raise InvalidInputError("`species` is empty; give a label such as 'Fe', a file of labels or a dataset path")
        if text.startswith("/") and fmt in ("h5md", "hdf5"):
            with open_h5(path) as f:
                where = f"{path}: {text}"
                obj = get_checked(f, text, str(path), allow_external)
                if obj is not None:
                    return _dataset_supply(obj, text, where, path, n_frames, species_map)
                listing = tree(f)
            if Path(text).is_file():
                codes, labels = _read_label_file(Path(text), species_map)
                return SpeciesSupply("per-atom", f"file {text!r}", codes=codes, labels=labels)
            raise ModelFileError(f"`species` {text!r} is neither a dataset of {str(path)!r} (it has: {listing}) "
                                 "nor a file of labels")
        if _is_label_file_name(text):
            p = Path(file_name(text, "species"))
            codes, labels = _read_label_file(p, species_map)
            return SpeciesSupply("per-atom", f"file {text!r}", codes=codes, labels=labels)
        if any(c.isspace() for c in text) or "," in text:
            raise InvalidInputError(f"`species` {text!r} is not one label; give a list of labels (one per atom), "
                                    "a file of labels (e.g. labels.txt) or a dataset path")
        return SpeciesSupply("one", f"species={text!r} (one label for all atoms)", label=text)
    if isinstance(species, np.ndarray) or isinstance(species, (list, tuple)):
        arr = np.asarray(species) if isinstance(species, np.ndarray) else np.array(list(species), dtype=object)
        if arr.dtype == object and len(arr) and all(isinstance(x, (int, np.integer)) and not isinstance(x, bool)
                                                     for x in arr):
            arr = arr.astype(np.int64)
        check_fits(arr.size * 24, "the species labels given")
        codes, labels = _labels_from_array(arr, "the list given", species_map)
        return SpeciesSupply("per-atom", f"a list of {len(codes):,} labels", codes=codes, labels=labels)
    raise InvalidInputError(f"`species` must be a label, a sequence of labels, a file of labels or a dataset "
                            f"path, got {type(species).__name__}")


def _dataset_supply(obj, text, where, path, n_frames, species_map) -> SpeciesSupply:
    h5py = h5py_module()
    names = file_names_attribute(obj, where)
    if isinstance(obj, h5py.Group):  # an H5MD time-dependent element: value [frame][N]
        if "value" not in obj or not isinstance(obj["value"], h5py.Dataset):
            raise ModelFileError(f"{where} is a group without a 'value' dataset, so it holds no labels")
        ds = obj["value"]
        framed = True
        ds_path = text.rstrip("/") + "/value"
    else:
        ds = obj
        framed = ds.ndim == 2
        ds_path = text
    if ds.ndim != (2 if framed else 1):
        raise ModelFileError(f"{where} must have shape [N] or [frame][N] to give one label per atom, got {list(ds.shape)}")
    if framed and ds.shape[0] != n_frames:
        raise ModelFileError(f"{where} has {ds.shape[0]} frames but the model has {n_frames}")
    column = LabelColumn(ds, framed, where, species_map=species_map, names=names, path=ds_path)
    return SpeciesSupply("dataset", f"dataset {text}", column=column, path=Path(path), n_frames=n_frames)


__all__ = ["SpeciesTable", "parse_species_map", "LabelColumn", "SpeciesSupply", "species_supply",
           "file_names_attribute", "LABEL_SCAN_ATOMS", "SPECIES_HINT"]


class ColumnLabels:
    """Species read from a label column of an HDF5 file (the H5MD and the plain readers, whose
    index ``self._ix`` has a ``species_column``)."""

    _ix: Any
    frame: int

    def _declared_labels(self) -> list[str] | None:
        col = self._ix.species_column
        return None if col is None else col.declared()

    def _column(self) -> LabelColumn:
        """The species column: present whenever labels are read from the file (without it,
        ``_missing_species`` says why and nothing is read)."""
        col = self._ix.species_column
        assert col is not None
        return col

    def _species_frame(self) -> int:
        col = self._ix.species_column
        return self.frame if (col is not None and col.framed) else 0
