"""Computed maps and their files (NeXus NXdata in HDF5).

File layout (all lengths Å, q in Å⁻¹):

    /                       attrs default="entry", NX_class="NXroot", creator, file_name
    /entry                  NXentry, default="data"; program_name (attr version), start_time
    /entry/data             NXdata: signal="intensity", axes=[...], <axis>_indices
        intensity           float64, grid shape, units "<probe unit>^2"
        amplitude           complex128 (when kept), same shape
        <axis> ...          1-D coordinates of each regular axis (units attribute)
        q                   (..., 3) q-vectors of a points grid
    /entry/grid             NXcollection: kind, shape, origin, steps, cell, hkl origin/steps
    /entry/parameters       NXcollection: method, tolerance, probe metadata, model summary,
                            cautions, provenance (one scalar or string dataset each)

Files are written under a temporary name in the same folder and renamed when complete, so an
interrupted write never leaves a partial map under the requested name.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from pathlib import Path

import numpy as np

from .errors import InvalidInputError, ModelFileError
from .qgrid import QGrid


class Pattern:
    """A map on a QGrid: amplitude and/or intensity plus the metadata that produced it.

    Attributes
    ----------
    grid : QGrid
    amplitude : ndarray of complex128 or None
        A(q), shape ``grid.shape`` (None for frame-averaged totals, which have no amplitude).
    intensity : ndarray of float64
        |A(q)|² (or the average of |A|² over frames), shape ``grid.shape``.
    units : str
        Units of the amplitude ("electrons", "fm", "angstrom", "1"); intensity is its square.
    metadata : dict
    """

    def __init__(self, grid: QGrid, amplitude=None, intensity=None, metadata=None, units: str = "1"):
        if amplitude is None and intensity is None:
            raise InvalidInputError("a Pattern needs an amplitude or an intensity")
        self.grid = grid
        self.amplitude = None if amplitude is None else np.asarray(amplitude, dtype=np.complex128)
        if intensity is None:
            a = self.amplitude
            intensity = a.real * a.real + a.imag * a.imag
        self._intensity = np.asarray(intensity, dtype=np.float64)
        for name, arr in (("amplitude", self.amplitude), ("intensity", self._intensity)):
            if arr is not None and arr.shape != tuple(grid.shape):
                raise InvalidInputError(f"`{name}` has shape {arr.shape}, but the grid has shape {tuple(grid.shape)}")
        self.metadata = dict(metadata or {})
        self.units = units

    @property
    def intensity(self) -> np.ndarray:
        return self._intensity

    @property
    def shape(self) -> tuple:
        return tuple(self.grid.shape)

    def __repr__(self) -> str:
        return (f"Pattern(kind={self.grid.kind!r}, shape={self.shape}, units={self.units!r}, "
                f"method={self.metadata.get('method')!r})")

    def save(self, path, *, keep_amplitude: bool = True) -> Path:
        """Write the map to a NeXus/HDF5 file (atomically). Returns the path."""
        return save_pattern(self, path, keep_amplitude=keep_amplitude)


def _json_safe(obj):
    if isinstance(obj, dict):
        return {str(k): _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_safe(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    return obj


def _write_params(group, params: dict) -> None:
    for key, value in params.items():
        key = str(key).replace("/", "_")
        if isinstance(value, dict):
            _write_params(group.create_group(key), value)
        elif isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
            group.create_dataset(key, data=value)
        else:
            text = value if isinstance(value, str) else json.dumps(_json_safe(value))
            group.create_dataset(key, data=text)


def _read_params(group) -> dict:
    import h5py

    out = {}
    for key, item in group.items():
        if isinstance(item, h5py.Group):
            out[key] = _read_params(item)
            continue
        v = item[()]
        if isinstance(v, bytes):
            v = v.decode()
        if isinstance(v, str):
            try:
                v = json.loads(v)
            except ValueError:
                pass
        elif isinstance(v, np.generic):
            v = v.item()
        out[key] = v
    return out


def atomic_output(path) -> tuple[Path, Path]:
    """Check that `path` can be written and return (final path, temporary path beside it)."""
    p = Path(path)
    folder = p.parent if str(p.parent) else Path(".")
    if not folder.is_dir():
        raise OSError(f"cannot write {str(p)!r}: folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK):
        raise PermissionError(f"cannot write {str(p)!r}: folder {str(folder)!r} is not writable")
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=folder)
    os.close(fd)
    return p, Path(tmp)


@contextlib.contextmanager
def atomic_write(path):
    """Context manager giving a temporary path beside `path`; renamed to `path` when the block
    finishes, deleted when it raises (so no partial file is ever left under either name)."""
    final, tmp = atomic_output(path)
    try:
        yield tmp
        os.replace(tmp, final)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def save_pattern(pattern: Pattern, path, *, keep_amplitude: bool = True, extra: dict | None = None) -> Path:
    """Write `pattern` as NeXus NXdata (see the module notes); atomic: temp file then rename."""
    import h5py

    final = Path(path)
    with atomic_write(final) as tmp, h5py.File(tmp, "w") as f:
        f.attrs["NX_class"] = "NXroot"
        f.attrs["default"] = "entry"
        f.attrs["creator"] = "kinemap"
        f.attrs["file_name"] = final.name
        entry = f.create_group("entry")
        entry.attrs["NX_class"] = "NXentry"
        entry.attrs["default"] = "data"
        prog = entry.create_dataset("program_name", data="kinemap")
        prog.attrs["version"] = str(pattern.metadata.get("kinemap_version", ""))
        entry.create_dataset("start_time", data=str(pattern.metadata.get("created", "")))
        data = entry.create_group("data")
        data.attrs["NX_class"] = "NXdata"
        data.attrs["signal"] = "intensity"
        g = pattern.grid
        inten = data.create_dataset("intensity", data=pattern.intensity)
        inten.attrs["units"] = f"{pattern.units}^2" if pattern.units != "1" else "1"
        inten.attrs["long_name"] = f"intensity |A(q)|^2 ({pattern.units}^2)"
        if keep_amplitude and pattern.amplitude is not None:
            amp = data.create_dataset("amplitude", data=pattern.amplitude)
            amp.attrs["units"] = pattern.units
        if g.is_regular:
            axes = list(g.axis_names)
            for i, (name, values, unit) in enumerate(zip(g.axis_names, g.axis_values, g.axis_units)):
                ds = data.create_dataset(name, data=np.asarray(values, dtype=np.float64))
                ds.attrs["units"] = unit
                data.attrs[f"{name}_indices"] = i
            data.attrs["axes"] = np.array(axes if axes else ["."], dtype=h5py.string_dtype())
        else:
            qds = data.create_dataset("q", data=g.q.reshape(tuple(g.shape) + (3,)))
            qds.attrs["units"] = "1/angstrom"
            data.attrs["axes"] = np.array(["."] * max(len(g.shape), 1), dtype=h5py.string_dtype())
        gg = entry.create_group("grid")
        gg.attrs["NX_class"] = "NXcollection"
        gg.create_dataset("kind", data=g.kind)
        gg.create_dataset("shape", data=np.asarray(g.shape, dtype=np.int64))
        for name in ("origin", "steps", "cell", "hkl_origin", "hkl_steps"):
            val = getattr(g, name)
            if val is not None:
                d = gg.create_dataset(name, data=np.asarray(val, dtype=np.float64))
                d.attrs["units"] = {"cell": "angstrom", "hkl_origin": "r.l.u.", "hkl_steps": "r.l.u."}.get(name, "1/angstrom")
        gg.create_dataset("axis_names", data=np.array(g.axis_names or [""], dtype=h5py.string_dtype()))
        gg.create_dataset("axis_units", data=np.array(g.axis_units or [""], dtype=h5py.string_dtype()))
        for i, v in enumerate(g.axis_values):
            gg.create_dataset(f"axis_values_{i}", data=np.asarray(v, dtype=np.float64))
        params = entry.create_group("parameters")
        params.attrs["NX_class"] = "NXcollection"
        meta = dict(pattern.metadata)
        meta["units"] = pattern.units
        if extra:
            meta.update(extra)
        _write_params(params, meta)
    return final


def load_pattern(path) -> Pattern:
    """Read a map written by :meth:`Pattern.save`.

    Raises
    ------
    FileNotFoundError
        If the file does not exist.
    ModelFileError
        If it is not a kinemap map file (the message names the missing dataset path).
    """
    import h5py

    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"no such map file: {str(p)!r}")
    try:
        f = h5py.File(p, "r")
    except OSError as exc:
        raise ModelFileError(f"{str(p)!r} is not a readable HDF5 file: {exc}") from None
    with f:
        for need in ("entry/data/intensity", "entry/grid/kind", "entry/grid/shape"):
            if need not in f:
                raise ModelFileError(f"{str(p)!r} is not a kinemap map: dataset '/{need}' is missing")
        gg = f["entry/grid"]
        kind = gg["kind"][()].decode() if isinstance(gg["kind"][()], bytes) else str(gg["kind"][()])
        shape = tuple(int(x) for x in gg["shape"][()])
        get = lambda n: np.asarray(gg[n][()]) if n in gg else None  # noqa: E731
        names = [x.decode() if isinstance(x, bytes) else str(x) for x in gg["axis_names"][()]]
        units = [x.decode() if isinstance(x, bytes) else str(x) for x in gg["axis_units"][()]]
        names = [n for n in names if n]
        units = units[: len(names)]
        values = [np.asarray(gg[f"axis_values_{i}"][()]) for i in range(len(names))]
        data = f["entry/data"]
        q = None
        if kind == "points":
            q = np.asarray(data["q"][()]).reshape(-1, 3)
        grid = QGrid(kind=kind, shape=shape, origin=get("origin"), steps=get("steps"), q=q,
                     cell=get("cell"), axis_names=names, axis_values=values, axis_units=units,
                     hkl_origin=get("hkl_origin"), hkl_steps=get("hkl_steps"))
        amplitude = data["amplitude"][()] if "amplitude" in data else None
        intensity = data["intensity"][()]
        meta = _read_params(f["entry/parameters"]) if "entry/parameters" in f else {}
    units_amp = meta.pop("units", "1")
    return Pattern(grid=grid, amplitude=amplitude, intensity=intensity, metadata=meta, units=units_amp)


__all__ = ["Pattern", "save_pattern", "load_pattern", "atomic_output", "atomic_write"]
