"""HDF5 access shared by the H5MD and plain-layout readers: opening, links, storage, listings.

A model file is read only from itself unless the user allows more. HDF5 can make a file
show data that lives elsewhere: *external links* (a name in this file that opens an object in
another file), datasets with *external storage* (their bytes are kept in raw files named in
the dataset's header) and *virtual datasets* whose sources are other files. Followed
silently, any of them lets a hostile model file make ``kinemap info`` print another file's
contents. :func:`get_checked` walks a path one link at a time, follows soft links (which stay
inside the file) and refuses the three ways out of the file unless ``allow_external=True``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .._shared.validate import file_name
from ..errors import ModelFileError

if TYPE_CHECKING:
    import h5py

#: Entries read whole from small datasets (names, cells of one frame): refuse more.
SMALL_DATASET_LIMIT = 1 << 20

#: Soft links followed in a row before a path is refused as a loop.
_MAX_SOFT_LINKS = 32

ALLOW_HINT = "allow_external=True (command line --allow-external)"


def h5py_module():
    import h5py

    return h5py


def open_h5(path) -> h5py.File:
    """Open an HDF5 file for reading, turning HDF5's errors into clear ones.

    Raises
    ------
    InvalidInputError
        A file name that is not valid UTF-8.
    FileNotFoundError, IsADirectoryError
        A missing file or a folder.
    ModelFileError
        A file HDF5 cannot open (truncated, corrupt, not HDF5).
    """
    h5py = h5py_module()
    p = Path(file_name(path, "path"))
    if not p.exists():
        raise FileNotFoundError(f"no such file: {str(p)!r}")
    if p.is_dir():
        raise IsADirectoryError(f"{str(p)!r} is a folder, not a model file")
    try:
        return h5py.File(p, "r")
    except OSError as exc:
        msg = str(exc)
        damaged = "truncat" in msg or "signature" in msg or "eof" in msg.lower()
        hint = "truncated or corrupt" if damaged else "not a readable HDF5 file"
        raise ModelFileError(f"{str(p)!r} is {hint}: {msg}") from None


def tree(f, limit: int = 40) -> str:
    """A short listing of an HDF5 file's datasets and groups (for error messages).

    Only objects reachable by hard links are listed (HDF5's object visit does not follow
    soft or external links), so the listing never opens another file.
    """
    h5py = h5py_module()
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


def attr_str(value) -> str:
    """An attribute value as text (bytes decoded as UTF-8, one-element arrays unwrapped)."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.size == 1:
        return attr_str(value.reshape(-1)[0])
    return str(value)


def attr_strs(value) -> list[str]:
    """An attribute holding one or several strings, as a list of text."""
    if isinstance(value, (str, bytes)):
        return [attr_str(value)]
    return [attr_str(v) for v in np.asarray(value).reshape(-1)]


def attr_numbers(value, where: str, *, whole: bool = False) -> np.ndarray:
    """An attribute of numbers as a flat float64 (or int64 with `whole`) array; anything else
    (strings, complex numbers, compound values) is refused naming `where`."""
    arr = np.asarray(value)
    kinds = "biu" if whole else "biuf"
    if arr.dtype.kind not in kinds or arr.size > SMALL_DATASET_LIMIT:
        want = "whole numbers" if whole else "real numbers"
        raise ModelFileError(f"{where} must hold {want}, got {arr.dtype} {arr.reshape(-1)[:6].tolist()}")
    out = arr.astype(np.int64 if whole else np.float64).reshape(-1)
    return out


def _refuse(where: str, what: str) -> ModelFileError:
    return ModelFileError(f"{where}: {what}; kinemap reads a model only from the file itself unless "
                          f"allowed: {ALLOW_HINT}")


def check_storage(ds, where: str, allow_external: bool, depth: int = 0) -> None:
    """Refuse a dataset whose bytes live outside the file (external raw files, virtual
    sources in other files), unless allowed."""
    if allow_external:
        return
    try:
        external = ds.external
    except Exception:
        external = None
    if external:
        files = sorted({str(e[0]) for e in external})
        raise _refuse(where, f"dataset {ds.name} keeps its data in external raw file(s) {files}")
    try:
        virtual = ds.is_virtual
    except Exception:
        virtual = False
    if virtual:
        sources = ds.virtual_sources()
        others = sorted({s.file_name for s in sources if s.file_name != "."})
        if others:
            raise _refuse(where, f"dataset {ds.name} is a virtual dataset with sources in other file(s) {others}")
        if depth < _MAX_SOFT_LINKS:
            for s in sources:  # sources inside this file: check their own paths and storage
                get_checked(ds.file, s.dset_name, where, allow_external, _depth=depth + 1)


def get_checked(f, path: str, where: str, allow_external: bool = False, *, _depth: int = 0):
    """The object at `path` in the open file `f`, or None when nothing is there.

    Walks the path one name at a time: hard links are followed, soft links are resolved
    (inside the file; loops are refused), external links are refused unless allowed, and a
    dataset found at the end is checked for external or virtual storage.

    Raises
    ------
    ModelFileError
        An external link, external storage or a virtual dataset in another file (unless
        `allow_external`), a loop of soft links, or an object HDF5 cannot open.
    """
    h5py = h5py_module()
    parts = [p for p in str(path).split("/") if p and p != "."]
    cur = f["/"]
    walked = ""
    hops = _depth
    for k, name in enumerate(parts):
        if not isinstance(cur, h5py.Group):
            return None
        try:
            link = cur.get(name, getlink=True)
        except Exception as exc:
            raise ModelFileError(f"{where}: cannot read the link {walked}/{name}: {exc}") from None
        walked = f"{walked}/{name}"
        if link is None:
            return None
        if isinstance(link, h5py.ExternalLink):
            if not allow_external:
                raise _refuse(where, f"{walked} is an external link to {link.path!r} in file {link.filename!r}")
        elif isinstance(link, h5py.SoftLink):
            hops += 1
            if hops > _MAX_SOFT_LINKS:
                raise ModelFileError(f"{where}: {walked} is a soft link in a loop (more than {_MAX_SOFT_LINKS} in a row)")
            target = link.path if link.path.startswith("/") else f"{walked.rsplit('/', 1)[0]}/{link.path}"
            rest = "/".join(parts[k + 1:])
            return get_checked(f, f"{target}/{rest}" if rest else target, where, allow_external, _depth=hops)
        try:
            cur = cur[name]
        except KeyError:
            return None  # a dangling link
        except Exception as exc:
            raise ModelFileError(f"{where}: cannot open {walked}: {exc}") from None
    if isinstance(cur, h5py.Dataset):
        check_storage(cur, where, allow_external, _depth)
    return cur


def read_small(ds, where: str, limit: int = SMALL_DATASET_LIMIT) -> np.ndarray:
    """Read a whole dataset that ought to be small (names, a cell), refusing huge ones
    before allocating."""
    size = int(np.prod(ds.shape, dtype=np.float64)) if ds.shape else 1
    if size > limit:
        raise ModelFileError(f"{where}: {ds.name} has {size:,} entries (shape {list(ds.shape)}); kinemap reads "
                             f"at most {limit:,} from such a dataset")
    try:
        return np.asarray(ds[()])
    except Exception as exc:
        raise ModelFileError(f"{where}: cannot read {ds.name}: {exc}") from None


__all__ = ["open_h5", "tree", "attr_str", "attr_strs", "attr_numbers", "get_checked", "check_storage", "read_small",
           "ALLOW_HINT", "SMALL_DATASET_LIMIT"]
