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

import json
from pathlib import Path

import numpy as np

from ._shared.nexus import nexus_entry
from ._shared.output import atomic_write
from .errors import InvalidInputError, ModelFileError
from .qgrid import QGrid, RegularGrid


class Pattern:
    """A map on a QGrid: amplitude and/or intensity plus the metadata that produced it.

    Attributes
    ----------
    grid : QGrid
    amplitude : ndarray of complex128 or None
        A(q), shape ``grid.shape`` (None for frame-averaged totals, which have no amplitude).
    intensity : ndarray of float64
        |A(q)|² (or the average of |A|² over frames), shape ``grid.shape``. In a measured map
        NaN marks points that were not measured.
    sigma : ndarray of float64 or None
        Standard uncertainty of each intensity (measured maps), same shape.
    units : str
        Units of the amplitude ("electrons", "fm", "angstrom", "1"); intensity is its square.
    metadata : dict
    """

    def __init__(self, grid: QGrid, amplitude=None, intensity=None, metadata=None, units: str = "1",
                 sigma=None):
        if amplitude is None and intensity is None:
            raise InvalidInputError("a Pattern needs an amplitude or an intensity")
        if not isinstance(grid, QGrid):
            raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
        self.grid = grid
        self.amplitude = None if amplitude is None else np.asarray(amplitude, dtype=np.complex128)
        # |A|² is formed on first use (a pass over the map that many callers never need).
        self._intensity: np.ndarray | None = None
        if intensity is not None:
            intensity = np.asarray(intensity)
            if intensity.dtype.kind == "c":
                raise InvalidInputError("`intensity` must be real, got a complex array (pass amplitudes as `amplitude`)")
            self._intensity = np.asarray(intensity, dtype=np.float64)
        self.sigma = None if sigma is None else np.asarray(sigma, dtype=np.float64)
        for name, arr in (("amplitude", self.amplitude), ("intensity", self._intensity), ("sigma", self.sigma)):
            if arr is not None and arr.shape != tuple(grid.shape):
                raise InvalidInputError(f"`{name}` has shape {arr.shape}, but the grid has shape {tuple(grid.shape)}")
        self.metadata = dict(metadata or {})
        self.units = units

    @classmethod
    def from_array(cls, intensity, grid: QGrid, sigma=None, mask=None, *, units: str = "1",
                   metadata: dict | None = None) -> Pattern:
        """A map from arrays, e.g. a measured volume: intensities on `grid` with optional
        standard uncertainties and a mask.

        Parameters
        ----------
        intensity : array_like
            Shape ``grid.shape``; NaN marks points that were not measured.
        grid : QGrid
            Where the values are (Å⁻¹, or h, k, l of a cell for ``QGrid.hkl``).
        sigma : array_like, optional
            Standard uncertainties (same shape); points with σ ≤ 0 or non-finite σ are
            treated as not measured by the comparison.
        mask : array_like of bool, optional
            True where a point must be ignored (detector gaps, beamstop); those intensities
            become NaN.
        units : str
            Units whose square the intensities are in ("1" for arbitrary units).

        Raises
        ------
        InvalidInputError
            When shapes disagree with the grid or values are complex.
        """
        if not isinstance(grid, QGrid):
            raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
        inten = np.array(intensity)
        if inten.dtype.kind == "c" or inten.dtype.kind not in "biuf":
            raise InvalidInputError(f"`intensity` must hold real numbers, got dtype {inten.dtype}")
        inten = inten.astype(np.float64)
        if inten.shape != tuple(grid.shape):
            raise InvalidInputError(f"`intensity` has shape {inten.shape}, but the grid has shape {tuple(grid.shape)}")
        sig = None
        if sigma is not None:
            sig = np.asarray(sigma)
            if sig.dtype.kind not in "biuf":
                raise InvalidInputError(f"`sigma` must hold real numbers, got dtype {sig.dtype}")
            sig = sig.astype(np.float64)
            if sig.shape != inten.shape:
                raise InvalidInputError(f"`sigma` has shape {sig.shape}, but `intensity` has shape {inten.shape}")
            if (sig < 0).any():
                j = np.unravel_index(int(np.flatnonzero(sig < 0)[0]), sig.shape)
                raise InvalidInputError(f"`sigma` is negative at index {tuple(int(i) for i in j)}: "
                                        f"{float(sig[j])!r}; uncertainties are >= 0")
        if mask is not None:
            m = np.asarray(mask)
            if m.dtype != bool:
                raise InvalidInputError(f"`mask` must be a boolean array (True = ignore), got dtype {m.dtype}")
            if m.shape != inten.shape:
                raise InvalidInputError(f"`mask` has shape {m.shape}, but `intensity` has shape {inten.shape}")
            inten[m] = np.nan
        meta = dict(metadata or {})
        meta.setdefault("source", "array")
        return cls(grid, intensity=inten, sigma=sig, metadata=meta, units=units)

    @property
    def intensity(self) -> np.ndarray:
        if self._intensity is None:
            a = self.amplitude
            assert a is not None  # a Pattern is refused without amplitude or intensity
            self._intensity = a.real * a.real + a.imag * a.imag
        return self._intensity

    @property
    def shape(self) -> tuple:
        return tuple(self.grid.shape)

    def __repr__(self) -> str:
        return (f"Pattern(kind={self.grid.kind!r}, shape={self.shape}, units={self.units!r}, "
                f"method={self.metadata.get('method')!r})")

    def to_xarray(self, quantity: str = "intensity"):
        """The map as an ``xarray.DataArray`` with named coordinates and units (needs xarray:
        ``pip install kinemap[xarray]``).

        Regular grids get one dimension coordinate per axis (h, k, l in r.l.u. on hkl grids,
        the coordinate along each edge through q = 0 in Å⁻¹ otherwise) plus ``qx, qy, qz``
        as coordinates over all dimensions; arbitrary points get ``qx, qy, qz`` over index
        dimensions. `quantity` is "intensity", "amplitude" or "sigma".

        Raises
        ------
        ImportError
            Without xarray, naming the extra to install.
        InvalidInputError
            For a quantity the map does not have.
        """
        try:
            import xarray as xr
        except ImportError:
            raise ImportError("Pattern.to_xarray needs xarray: pip install kinemap[xarray]") from None
        data = {"intensity": self.intensity, "amplitude": self.amplitude, "sigma": self.sigma}.get(quantity, "?")
        if isinstance(data, str):
            raise InvalidInputError(f"`quantity` must be 'intensity', 'amplitude' or 'sigma', got {quantity!r}")
        if data is None:
            raise InvalidInputError(f"this map has no {quantity}")
        g = self.grid
        if g.axis_names:
            dims = list(g.axis_names)
            coords = {n: (n, np.asarray(v), {"units": u, "long_name": lab})
                      for n, v, u, lab in zip(g.axis_names, g.axis_values, g.axis_units, g.axis_labels)}
        else:
            dims = [f"index_{i}" for i in range(g.ndim)]
            coords = {}
        q = g.q_vectors().reshape(tuple(g.shape) + (3,))
        for i, name in enumerate(("qx", "qy", "qz")):
            coords[name] = (dims, q[..., i], {"units": "1/angstrom"})
        sq = f"{self.units}^2" if self.units not in ("1", "") else "1"
        units = {"intensity": sq, "sigma": sq, "amplitude": self.units}[quantity]
        attrs = {"units": units, "long_name": quantity}
        for key in ("method", "average", "split"):
            if key in self.metadata:
                attrs[key] = str(self.metadata[key])
        return xr.DataArray(data, dims=dims, coords=coords, name=quantity, attrs=attrs)

    def save(self, path, *, keep_amplitude: bool = True, overwrite: bool = False) -> Path:
        """Write the map to a NeXus/HDF5 file (atomically). Returns the path.

        Raises
        ------
        FileExistsError
            When `path` exists and `overwrite` is False.
        """
        return save_pattern(self, path, keep_amplitude=keep_amplitude, overwrite=overwrite)


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


def save_pattern(pattern: Pattern, path, *, keep_amplitude: bool = True, extra: dict | None = None,
                 overwrite: bool = False, inputs=()) -> Path:
    """Write `pattern` as NeXus NXdata (see the module notes); atomic: temp file then rename."""
    import h5py

    final = Path(path)
    with atomic_write(final, overwrite=overwrite, inputs=inputs, what="map file") as tmp, h5py.File(tmp, "w") as f:
        entry = nexus_entry(f, final.name, version=str(pattern.metadata.get("kinemap_version", "")),
                            start_time=str(pattern.metadata.get("created", "")))
        data = entry.create_group("data")
        data.attrs["NX_class"] = "NXdata"
        data.attrs["signal"] = "intensity"
        g = pattern.grid
        inten = data.create_dataset("intensity", data=pattern.intensity)
        inten.attrs["units"] = f"{pattern.units}^2" if pattern.units != "1" else "1"
        inten.attrs["long_name"] = f"intensity |A(q)|^2 ({pattern.units}^2)"
        if pattern.sigma is not None:
            err = data.create_dataset("intensity_errors", data=pattern.sigma)
            err.attrs["units"] = inten.attrs["units"]
        if keep_amplitude and pattern.amplitude is not None:
            amp = data.create_dataset("amplitude", data=pattern.amplitude)
            amp.attrs["units"] = pattern.units
        if isinstance(g, RegularGrid):
            for i, (name, values, unit, label) in enumerate(zip(g.axis_names, g.axis_values, g.axis_units,
                                                                g.axis_labels)):
                ds = data.create_dataset(name, data=np.asarray(values, dtype=np.float64))
                ds.attrs["units"] = unit
                ds.attrs["long_name"] = f"{label} ({unit})"
                data.attrs[f"{name}_indices"] = i
            axes = list(g.axis_names)
            data.attrs["axes"] = np.array(axes if axes else ["."], dtype=h5py.string_dtype())
        else:
            qds = data.create_dataset("q", data=g.q_vectors().reshape(tuple(g.shape) + (3,)))
            qds.attrs["units"] = "1/angstrom"
            data.attrs["axes"] = np.array(["."] * max(len(g.shape), 1), dtype=h5py.string_dtype())
        # The exact description of the grid (corner and step vectors), beside the axes.
        gg = entry.create_group("grid")
        gg.attrs["NX_class"] = "NXcollection"
        gg.create_dataset("kind", data=g.kind)
        gg.create_dataset("shape", data=np.asarray(g.shape, dtype=np.int64))
        for name, unit in (("origin", "1/angstrom"), ("steps", "1/angstrom"), ("cell", "angstrom"),
                           ("hkl_origin", "r.l.u."), ("hkl_steps", "r.l.u.")):
            val = getattr(g, name, None)
            if val is not None:
                d = gg.create_dataset(name, data=np.asarray(val, dtype=np.float64))
                d.attrs["units"] = unit
        params = entry.create_group("parameters")
        params.attrs["NX_class"] = "NXcollection"
        meta = dict(pattern.metadata)
        meta["units"] = pattern.units
        if extra:
            meta.update(extra)
        _write_params(params, meta)
    return final


def _read_grid(gg, data, where: str) -> QGrid:
    """Rebuild the grid from /entry/grid (kind, shape, origin, steps, cell) or /entry/data/q."""
    def text(name):
        v = gg[name][()]
        return v.decode() if isinstance(v, bytes) else str(v)

    def need(group, name, path):
        if name not in group:
            raise ModelFileError(f"{where} is not a complete kinemap map: dataset '{path}/{name}' is missing")
        return np.asarray(group[name][()])

    kind = text("kind")
    shape = tuple(int(x) for x in np.asarray(gg["shape"][()]).reshape(-1))
    try:
        if kind == "points":
            q = need(data, "q", "/entry/data")
            return QGrid.points(q.reshape(shape + (3,)))
        origin = need(gg, "origin", "/entry/grid")
        steps = need(gg, "steps", "/entry/grid").reshape(-1, 3)
        cell = np.asarray(gg["cell"][()]) if "cell" in gg else None
        return QGrid.regular(origin, steps, shape, cell=cell, kind=kind)
    except InvalidInputError as exc:
        raise ModelFileError(f"{where}: /entry/grid does not describe a valid grid: {exc}") from None


def load_pattern(path, **options) -> Pattern:
    """Read a map written by :meth:`Pattern.save`, or any NeXus NXdata map (a measured one:
    see :func:`kinemap.compare.open_map` for the `options`, e.g. ``cell=`` for axes in h, k, l).

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
        native = all(need in f for need in ("entry/data/intensity", "entry/grid/kind", "entry/grid/shape"))
        if native and options:
            raise InvalidInputError(f"{str(p)!r} is a kinemap map; options {sorted(options)} apply to other NeXus maps")
    if not native:  # not written by kinemap: the generic NeXus NXdata reader
        from .compare.nexus import read_nxdata

        return read_nxdata(p, **options)
    with h5py.File(p, "r") as f:
        data = f["entry/data"]
        grid = _read_grid(f["entry/grid"], data, str(p))
        amplitude = data["amplitude"][()] if "amplitude" in data else None
        intensity = data["intensity"][()]
        sigma = data["intensity_errors"][()] if "intensity_errors" in data else None
        meta = _read_params(f["entry/parameters"]) if "entry/parameters" in f else {}
        for name, arr in (("intensity", intensity), ("amplitude", amplitude), ("intensity_errors", sigma)):
            if arr is not None and np.shape(arr) != tuple(grid.shape):
                raise ModelFileError(f"{str(p)!r}: /entry/data/{name} has shape {np.shape(arr)}, but "
                                     f"/entry/grid/shape says {tuple(grid.shape)}")
    units_amp = meta.pop("units", "1")
    return Pattern(grid=grid, amplitude=amplitude, intensity=intensity, metadata=meta, units=units_amp, sigma=sigma)


__all__ = ["Pattern", "save_pattern", "load_pattern"]
