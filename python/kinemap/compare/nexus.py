"""Measured maps from files: any NeXus NXdata group, plain HDF5 datasets and .npy volumes.

NeXus NXdata (the NeXus standard's NXdata base class, 2014 attribute conventions):

* the group is found by the ``default`` chain (root ``default`` → NXentry ``default`` →
  NXdata), else as the only NXdata group of the file, else by the path given;
* its ``signal`` attribute names the intensity dataset (older files: the dataset with the
  attribute ``signal=1``); ``<signal>_errors`` (or ``errors``) holds standard uncertainties;
* its ``axes`` attribute names one axis dataset per dimension ("." for none), and
  ``<axis>_indices`` says which dimension an axis describes; axis datasets hold point
  coordinates (n values) or bin edges (n + 1 values, whose midpoints are used) and a
  ``units`` attribute.

Axes become a kinemap QGrid:

* axes in inverse length ("1/angstrom", "angstrom^-1", "1/nm", ...; nm⁻¹ are converted) →
  ``QGrid.line/plane/volume``, each axis along x, y, z in order, unless the axis is named
  qx/qy/qz, carries a ``vector`` attribute (its direction, as NeXus transformations state
  axes), or `directions` are given;
* axes in reciprocal-lattice units ("r.l.u.", or named h, k, l without units) →
  ``QGrid.hkl`` of the cell given, or of the cell in the file's NXsample
  (``unit_cell_abc`` and ``unit_cell_alphabetagamma``, or ``unit_cell``); the data are
  transposed to h, k, l order when the file stores them otherwise.

Axes must be evenly spaced (a regular grid). NaN marks unmeasured points. Large maps are
read by slabs (:meth:`MapSource.slabs`), never whole unless asked.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from .._shared.validate import file_name
from ..errors import InvalidInputError, ModelFileError
from ..model import as_cell, cell_from_parameters
from ..pattern import Pattern
from ..qgrid import QGrid
from .maps import MapSource

_RLU_UNITS = {"r.l.u.", "rlu", "r.l.u", "reciprocal lattice units", "reciprocal_lattice_units"}
_NO_UNITS = {"", "1", "dimensionless", "none", "."}
_INV_LENGTH = {
    "1/angstrom": 1.0, "1/ang": 1.0, "1/a": 1.0, "1/å": 1.0, "å^-1": 1.0, "å⁻¹": 1.0, "a^-1": 1.0,
    "angstrom^-1": 1.0, "angstrom-1": 1.0, "ang^-1": 1.0, "1/angstroms": 1.0,
    "1/nm": 0.1, "nm^-1": 0.1, "nm-1": 0.1, "1/nanometer": 0.1, "nanometer^-1": 0.1,
    "1/m": 1e-10, "m^-1": 1e-10, "1/pm": 100.0, "pm^-1": 100.0,
}
_QNAME = re.compile(r"^q_?([xyz])$", re.IGNORECASE)


def _text(v) -> str:
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace")
    if isinstance(v, np.ndarray) and v.shape == ():
        return _text(v[()])
    if isinstance(v, np.ndarray) and v.size == 1:
        return _text(v.reshape(-1)[0])
    return str(v)


def _texts(v) -> list[str]:
    if isinstance(v, (str, bytes)):
        t = _text(v)
        parts = re.split(r"[:,]", t) if (":" in t or "," in t) else [t]
        return [p.strip() for p in parts]
    return [_text(x).strip() for x in np.asarray(v).reshape(-1)]


def _nx_class(obj) -> str:
    return _text(obj.attrs.get("NX_class", ""))


# ---------------------------------------------------------------------------------------
# finding the NXdata group
# ---------------------------------------------------------------------------------------
def _follow_default(f):
    """The NXdata group the ``default`` attributes lead to, or None."""
    node = f
    for _ in range(4):
        name = node.attrs.get("default")
        if name is None:
            return None
        name = _text(name)
        target = node.get(name)
        import h5py

        if not isinstance(target, h5py.Group):
            return None
        if _nx_class(target) == "NXdata" or "signal" in target.attrs:
            return target
        node = target
    return None


def _find_nxdata(f, path: Path, group):
    import h5py

    if group is not None:
        g = f.get(group)
        if not isinstance(g, h5py.Group):
            raise ModelFileError(f"{str(path)!r} has no group {group!r}")
        return g
    g = _follow_default(f)
    if g is not None:
        return g
    found = []

    def visit(name, obj):
        if isinstance(obj, h5py.Group) and _nx_class(obj) == "NXdata":
            found.append(name)

    f.visititems(visit)
    if not found:
        raise ModelFileError(f"{str(path)!r} is not a kinemap map (dataset '/entry/data/intensity' with '/entry/grid' "
                             "is missing) and holds no NeXus NXdata group; for a plain HDF5 dataset use "
                             "kinemap.compare.open_map(path, signal=..., grid=...)")
    if len(found) > 1:
        raise ModelFileError(f"{str(path)!r} holds {len(found)} NXdata groups and no 'default' attribute chain "
                             f"picks one: {', '.join('/' + n for n in found[:8])}; give `group`")
    return f[found[0]]


def _signal_name(g, path: Path) -> str:
    import h5py

    name = g.attrs.get("signal")
    if name is not None:
        name = _text(name)
        if not isinstance(g.get(name), h5py.Dataset):
            raise ModelFileError(f"{str(path)!r}: NXdata '{g.name}' names signal {name!r}, which is not a dataset "
                                 "in it")
        return name
    for key, item in g.items():  # older convention: the dataset with attribute signal=1
        if isinstance(item, h5py.Dataset) and _text(item.attrs.get("signal", "")) == "1":
            return key
    raise ModelFileError(f"{str(path)!r}: NXdata '{g.name}' has no 'signal' attribute naming its intensity dataset")


def _axis_names(g, sig, nd: int, path: Path) -> list[str | None]:
    """The axis dataset name of every dimension (None where the file names none)."""
    raw = g.attrs.get("axes")
    if raw is None:
        raw = sig.attrs.get("axes")  # older convention: "x:y:z" on the signal
    names = _texts(raw) if raw is not None else []
    per_dim: list[str | None] = [None] * nd
    for pos, name in enumerate(names):
        if name in (".", ""):
            continue
        idx = g.attrs.get(f"{name}_indices")
        if idx is None:
            dims = [pos]
        else:
            dims = [int(x) for x in np.asarray(idx).reshape(-1)]
        if len(dims) != 1:
            raise ModelFileError(f"{str(path)!r}: axis '{name}' of '{g.name}' spans dimensions {dims}; kinemap needs "
                                 "one 1-D axis per dimension (a regular grid)")
        d = dims[0]
        if not 0 <= d < nd:
            raise ModelFileError(f"{str(path)!r}: '{name}_indices' = {d} is outside the {nd} dimensions of the signal")
        if per_dim[d] is None:
            per_dim[d] = name
    return per_dim


def _axis_values(g, name: str, n: int, path: Path) -> tuple[np.ndarray, str]:
    import h5py

    ds = g.get(name)
    if not isinstance(ds, h5py.Dataset):
        raise ModelFileError(f"{str(path)!r}: axis '{name}' of '{g.name}' is not a dataset in the group")
    v = np.asarray(ds[()], dtype=np.float64).reshape(-1)
    if len(v) == n + 1:
        v = 0.5 * (v[:-1] + v[1:])  # bin edges → centres
    if len(v) != n:
        raise ModelFileError(f"{str(path)!r}: axis '{name}' has {len(v)} values for a dimension of {n} points")
    if not np.isfinite(v).all():
        raise ModelFileError(f"{str(path)!r}: axis '{name}' has non-finite values")
    if n > 1:
        step = (v[-1] - v[0]) / (n - 1)
        dev = np.abs(np.diff(v) - step).max()
        if step == 0 or dev > 1e-4 * abs(step):
            raise ModelFileError(f"{str(path)!r}: axis '{name}' is not evenly spaced (steps vary by {dev:.3g}); "
                                 "kinemap maps live on regular grids")
    return v, _text(ds.attrs.get("units", "")).strip()


def _classify(name: str, units: str) -> tuple[str, float]:
    u = units.lower().replace(" ", "")
    if u in _RLU_UNITS or units.strip().lower() in _RLU_UNITS:
        return "rlu", 1.0
    if u in _INV_LENGTH:
        return "q", _INV_LENGTH[u]
    if u in _NO_UNITS and name.lower() in ("h", "k", "l"):
        return "rlu", 1.0
    return "?", 0.0


def _file_cell(g, f) -> np.ndarray | None:
    """A cell from an NXsample of the entry that holds `g` (or of the file)."""
    import h5py

    parts = g.name.strip("/").split("/")
    scopes = [f[parts[0]]] if parts and parts[0] in f else []
    scopes.append(f)
    for scope in scopes[:1]:  # kinemap's own layout (comparison files): <entry>/grid/cell, rows a, b, c
        if isinstance(scope.get("grid/cell"), h5py.Dataset):
            return as_cell(scope["grid/cell"][()])
    for scope in scopes:
        samples = []
        scope.visititems(lambda n, o: samples.append(o) if isinstance(o, h5py.Group) and _nx_class(o) == "NXsample"
                         else None)
        for s in samples:
            if "unit_cell_abc" in s and "unit_cell_alphabetagamma" in s:
                abc = np.asarray(s["unit_cell_abc"][()], dtype=np.float64).reshape(-1)[:3]
                ang = np.asarray(s["unit_cell_alphabetagamma"][()], dtype=np.float64).reshape(-1)[:3]
                return cell_from_parameters(*abc, *ang)
            if "unit_cell" in s:
                uc = np.asarray(s["unit_cell"][()], dtype=np.float64)
                if uc.size == 6:
                    return cell_from_parameters(*uc.reshape(-1))
                if uc.shape == (3, 3):
                    return as_cell(uc)
    return None


def _hkl_grid(g, f, path, names, values, cell, fixed):
    nd = len(names)
    idx: dict[int, str] = {}
    for d, name in enumerate(names):
        key = name.lower() if name.lower() in ("h", "k", "l") else None
        if key is None:
            key = "hkl"[d] if nd <= 3 else None
        if key in idx.values():
            key = None
        if key is None:
            raise ModelFileError(f"{str(path)!r}: cannot tell which of h, k, l the axis '{name}' is; name the axes "
                                 "h, k, l")
        idx[d] = key
    if cell is None:
        cell = _file_cell(g, f)
    if cell is None:
        raise InvalidInputError(f"{str(path)!r}: the axes are in reciprocal-lattice units, but no cell was given and "
                                "the file has none (NXsample unit_cell_abc/unit_cell_alphabetagamma); give `cell`")
    cell = as_cell(cell)
    spec: dict[str, float | tuple[float, float, int]] = {}
    for d, key in idx.items():
        v = values[d]
        spec[key] = (float(v[0]), float(v[-1]), len(v))
    fixed = dict(fixed or {})
    for key in "hkl":
        if key in spec:
            if key in fixed:
                raise InvalidInputError(f"`fixed` gives {key!r}, which is an axis of the map")
            continue
        if key in fixed:
            spec[key] = float(fixed[key])
        elif key in g and np.size(g[key]) == 1:
            spec[key] = float(np.asarray(g[key][()]).reshape(-1)[0])
        else:
            raise InvalidInputError(f"{str(path)!r}: the map has no '{key}' axis and the file does not say its value; "
                                    f"give fixed={{'{key}': value}}")
    grid = QGrid.hkl(cell, h=spec["h"], k=spec["k"], l=spec["l"])
    dims_in_hkl = sorted(idx, key=lambda d: "hkl".index(idx[d]))
    return grid, tuple(dims_in_hkl)


def _q_grid(g, path, names, values, factors, directions):
    nd = len(names)
    if nd > 3:
        raise ModelFileError(f"{str(path)!r}: a map of {nd} dimensions cannot be a q-grid")
    dirs = []
    if directions is not None:
        d = np.asarray(directions, dtype=np.float64)
        if d.shape != (nd, 3):
            raise InvalidInputError(f"`directions` must have shape ({nd}, 3) for this map, got {d.shape}")
        dirs = list(d)
    else:
        for dim, name in enumerate(names):
            vec = g[name].attrs.get("vector")
            m = _QNAME.match(name)
            if vec is not None:
                dirs.append(np.asarray(vec, dtype=np.float64).reshape(3))
            elif m:
                dirs.append(np.eye(3)["xyz".index(m.group(1).lower())])
            else:
                dirs.append(np.eye(3)[dim])
    dirs = [x / np.linalg.norm(x) if np.linalg.norm(x) > 0 else x for x in dirs]
    if np.linalg.matrix_rank(np.array(dirs)) < nd:
        raise ModelFileError(f"{str(path)!r}: the axis directions {np.round(dirs, 6).tolist()} are not independent")
    origin = sum(float(v[0]) * f * d for v, f, d in zip(values, factors, dirs))
    edges = [(float(v[-1]) - float(v[0])) * f * d for v, f, d in zip(values, factors, dirs)]
    shape = tuple(len(v) for v in values)
    if nd == 1:
        return QGrid.line(origin, origin + edges[0], shape[0])
    if nd == 2:
        return QGrid.plane(origin, edges[0], edges[1], shape)
    return QGrid.volume(origin, edges[0], edges[1], edges[2], shape)


def _check_signal(ds, path: Path, what: str):
    if ds.dtype.kind not in "biuf":
        raise ModelFileError(f"{str(path)!r}: {what} '{ds.name}' must hold real numbers, got dtype {ds.dtype}")


def open_map(path, group: str | None = None, *, cell=None, fixed: dict | None = None, directions=None,
             signal: str | None = None, errors: str | None = None, grid: QGrid | None = None) -> MapSource:
    """Open a measured (or any) map file for reading, whole or by slabs.

    Parameters
    ----------
    path : str or path-like
        A NeXus/HDF5 file, or a ``.npy`` volume (then `grid` is required).
    group : str, optional
        Path of the NXdata group (default: follow the ``default`` attributes, else the only
        NXdata group of the file).
    cell : array_like (3, 3), optional
        Rows a, b, c (Å) for axes in reciprocal-lattice units (default: the file's NXsample).
    fixed : dict, optional
        Values of h, k or l that are not axes of the map, e.g. ``{"l": 0}`` for an (h k 0)
        plane (default: a scalar dataset of that name in the NXdata group).
    directions : array_like (ndim, 3), optional
        Directions of Å⁻¹ axes (default: qx/qy/qz names, ``vector`` attributes, else x, y, z).
    signal, errors : str, optional
        Dataset paths of a plain HDF5 file (no NXdata needed; `grid` required), or the name
        of a different signal/errors dataset inside the NXdata group; for ``.npy`` input,
        `errors` may name a second ``.npy`` file of uncertainties.
    grid : QGrid, optional
        The grid of a plain dataset or ``.npy`` volume (its shape must match).

    Returns
    -------
    MapSource
        ``.grid``, ``.read()`` → Pattern, ``.slabs(rows)``.

    Raises
    ------
    FileNotFoundError
        A missing file.
    ModelFileError
        A file that is not HDF5, holds no usable NXdata, or whose axes are missing, uneven,
        mixed or of unknown units (the message names the dataset).
    InvalidInputError
        Shapes that do not match `grid`, axes in h, k, l without a cell.

    Examples
    --------
    >>> import kinemap as km
    >>> src = km.compare.open_map("measured.h5", cell=cell)          # doctest: +SKIP
    >>> meas = src.read()                                            # doctest: +SKIP
    """
    p = Path(file_name(path))
    if not p.exists():
        raise FileNotFoundError(f"no such map file: {str(p)!r}")
    if p.suffix.lower() == ".npy":
        return _open_npy(p, grid, errors)
    import h5py

    try:
        f = h5py.File(p, "r")
    except OSError as exc:
        raise ModelFileError(f"{str(p)!r} is not a readable HDF5 file: {exc}") from None
    with f:
        if grid is not None:
            return _open_plain(f, p, grid, signal, errors, group)
        if group is None and signal is None and all(k in f for k in _NATIVE):
            if cell is not None or fixed is not None or directions is not None:
                raise InvalidInputError(f"{str(p)!r} is a kinemap map, whose grid is stored in it; `cell`, `fixed` "
                                        "and `directions` apply to other NeXus maps")
            return _open_native(f, p)
        g = _find_nxdata(f, p, group)
        sname = signal if signal is not None else _signal_name(g, p)
        sig = g.get(sname)
        if not isinstance(sig, h5py.Dataset):
            raise ModelFileError(f"{str(p)!r}: '{g.name}/{sname}' is not a dataset")
        _check_signal(sig, p, "signal")
        nd = sig.ndim
        if nd == 0:
            raise ModelFileError(f"{str(p)!r}: the signal '{sig.name}' is a single number, not a map")
        ename = errors if errors is not None else (f"{sname}_errors" if f"{sname}_errors" in g else
                                                    ("errors" if "errors" in g else None))
        epath = None
        if ename is not None:
            e = g.get(ename)
            if not isinstance(e, h5py.Dataset) or e.shape != sig.shape:
                raise ModelFileError(f"{str(p)!r}: errors '{g.name}/{ename}' must be a dataset of shape {sig.shape}")
            _check_signal(e, p, "errors")
            epath = e.name
        found = _axis_names(g, sig, nd, p)
        missing = [d for d, n in enumerate(found) if n is None]
        if missing:
            raise ModelFileError(f"{str(p)!r}: dimension(s) {missing} of '{sig.name}' have no axis (the NXdata 'axes' "
                                 "attribute must name one axis dataset per dimension); a map without axes has no q: "
                                 "give `grid` to read it as a plain dataset")
        names = [n for n in found if n is not None]  # all of them (checked above)
        values, units, kinds, factors = [], [], [], []
        for d, name in enumerate(names):
            v, u = _axis_values(g, name, sig.shape[d], p)
            k, fac = _classify(name, u)
            if k == "?":
                raise ModelFileError(f"{str(p)!r}: axis '{name}' has units {u!r}; kinemap reads axes in 1/angstrom "
                                     "(or 1/nm) and in reciprocal-lattice units ('r.l.u.', or axes named h, k, l)")
            values.append(v)
            units.append(u)
            kinds.append(k)
            factors.append(fac)
        if len(set(kinds)) > 1:
            raise ModelFileError(f"{str(p)!r}: the axes mix reciprocal-lattice units and 1/length "
                                 f"({dict(zip(names, units))}); kinemap needs one kind")
        if kinds[0] == "rlu":
            qgrid, order = _hkl_grid(g, f, p, names, values, cell, fixed)
        else:
            if fixed:
                raise InvalidInputError("`fixed` applies to maps in reciprocal-lattice units")
            qgrid, order = _q_grid(g, p, names, values, factors, directions), None
        meta = {"source": "file", "file": str(p), "group": g.name, "signal": sig.name,
                "errors": epath or "", "axes": names, "axis_units": units,
                "signal_units": _text(sig.attrs.get("units", ""))}
        return MapSource(p, qgrid, sig.name, epath, order=order, metadata=meta)


_NATIVE = ("entry/data/intensity", "entry/grid/kind", "entry/grid/shape")


def _open_native(f, p: Path) -> MapSource:
    """A map written by kinemap: its grid from /entry/grid (the layout of kinemap.pattern)."""
    from ..pattern import _read_grid

    data = f["entry/data"]
    grid = _read_grid(f["entry/grid"], data, str(p))
    err = data["intensity_errors"].name if "intensity_errors" in data else None
    meta = {"source": "file", "file": str(p), "group": data.name, "signal": data["intensity"].name,
            "errors": err or ""}
    return MapSource(p, grid, data["intensity"].name, err, metadata=meta)


def _open_plain(f, p: Path, grid: QGrid, signal, errors, group) -> MapSource:
    import h5py

    if not isinstance(grid, QGrid):
        raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
    if signal is None:
        raise InvalidInputError("a plain HDF5 dataset needs `signal` (its path in the file) with `grid`")
    base = f[group] if group is not None and group in f else f
    ds = base.get(signal)
    if not isinstance(ds, h5py.Dataset):
        raise ModelFileError(f"{str(p)!r} has no dataset {signal!r}")
    _check_signal(ds, p, "signal")
    if tuple(ds.shape) != tuple(grid.shape):
        raise InvalidInputError(f"dataset '{ds.name}' has shape {ds.shape}, but `grid` has shape {tuple(grid.shape)}")
    epath = None
    if errors is not None:
        e = base.get(errors)
        if not isinstance(e, h5py.Dataset) or e.shape != ds.shape:
            raise ModelFileError(f"{str(p)!r}: errors {errors!r} must be a dataset of shape {ds.shape}")
        _check_signal(e, p, "errors")
        epath = e.name
    meta = {"source": "file", "file": str(p), "signal": ds.name, "errors": epath or "",
            "signal_units": _text(ds.attrs.get("units", ""))}
    return MapSource(p, grid, ds.name, epath, metadata=meta)


def _open_npy(p: Path, grid, errors) -> MapSource:
    if grid is None:
        raise InvalidInputError(f"{str(p)!r} is a .npy array: give its `grid` (a .npy file has no axes)")
    if not isinstance(grid, QGrid):
        raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
    try:
        a = np.load(p, mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError) as exc:
        raise ModelFileError(f"{str(p)!r} is not a readable .npy array: {exc}") from None
    if a.dtype.kind not in "biuf":
        raise ModelFileError(f"{str(p)!r} must hold real numbers, got dtype {a.dtype}")
    if tuple(a.shape) != tuple(grid.shape):
        raise InvalidInputError(f"{str(p)!r} has shape {a.shape}, but `grid` has shape {tuple(grid.shape)}")
    ef = None
    if errors is not None:
        ef = Path(file_name(errors, "errors"))
        e = np.load(ef, mmap_mode="r", allow_pickle=False)
        if e.shape != a.shape:
            raise InvalidInputError(f"errors {str(ef)!r} has shape {e.shape}, but the map has shape {a.shape}")
    meta = {"source": "file", "file": str(p), "errors": "" if ef is None else str(ef)}
    return MapSource(p, grid, p.name, None if ef is None else ef.name, kind="npy", metadata=meta, errors_file=ef)


def read_nxdata(path, group: str | None = None, **options) -> Pattern:
    """Read a NeXus NXdata map (or a plain dataset / .npy with `grid`) into a Pattern.

    Same arguments as :func:`open_map`; this is what :func:`kinemap.load_pattern` falls
    back to for files that kinemap did not write.
    """
    return open_map(path, group, **options).read()


__all__ = ["open_map", "read_nxdata", "MapSource"]
