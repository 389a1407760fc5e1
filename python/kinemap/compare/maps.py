"""Maps as slabs: one interface for maps held in memory and maps read from files, so that
every sum of a comparison runs the same way whether the map fits in memory or not."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._shared.memory import available_memory, check_fits
from ..errors import InvalidInputError, ModelFileError
from ..pattern import Pattern
from ..qgrid import QGrid, RegularGrid

#: Points per slab when a comparison walks through its maps.
SLAB_POINTS = 1 << 21


class MapSource:
    """A map in a file: its grid, and its values read whole or in slabs.

    Attributes
    ----------
    path : Path
    grid : QGrid
        The grid of the map (axis 0 of the grid is the slab axis).
    signal, errors : str
        Dataset paths in the file (errors may be None); for .npy files the file names.
    shape : tuple
        ``grid.shape``.
    metadata : dict
        Where the map came from (file, group, dataset and axis names, units).
    """

    def __init__(self, path: Path, grid: QGrid, signal: str, errors: str | None, *, order=None,
                 kind: str = "hdf5", metadata: dict | None = None, errors_file: Path | None = None):
        self.path = Path(path)
        self.grid = grid
        self.signal = signal
        self.errors = errors
        self.kind = kind
        self.errors_file = errors_file
        nd = len(grid.shape)
        self.order = tuple(range(nd)) if order is None else tuple(int(i) for i in order)
        self.metadata = dict(metadata or {})

    @property
    def shape(self) -> tuple:
        return tuple(self.grid.shape)

    @property
    def has_sigma(self) -> bool:
        return self.errors is not None

    def __repr__(self) -> str:
        return f"MapSource({str(self.path)!r}, signal={self.signal!r}, shape={self.shape}, grid={self.grid.kind!r})"

    # -- reading ---------------------------------------------------------------------
    def _file_selection(self, start: int, stop: int) -> tuple:
        nd = len(self.order)
        sel = [slice(None)] * nd
        if nd:
            sel[self.order[0]] = slice(start, stop)
        return tuple(sel)

    def _to_grid_order(self, a: np.ndarray) -> np.ndarray:
        if self.order != tuple(range(len(self.order))):
            a = np.transpose(a, self.order)
        return np.ascontiguousarray(a, dtype=np.float64)

    def _read(self, start: int, stop: int):
        sel = self._file_selection(start, stop)
        if self.kind == "npy":
            data = np.load(self.path, mmap_mode="r", allow_pickle=False)
            inten = self._to_grid_order(np.asarray(data[sel]))
            sig = None
            if self.errors_file is not None:
                err = np.load(self.errors_file, mmap_mode="r", allow_pickle=False)
                sig = self._to_grid_order(np.asarray(err[sel]))
            return inten, sig
        import h5py

        try:
            with h5py.File(self.path, "r") as f:
                inten = self._to_grid_order(f[self.signal][sel])
                sig = None if self.errors is None else self._to_grid_order(f[self.errors][sel])
        except OSError as exc:
            raise ModelFileError(f"{str(self.path)!r}: cannot read '{self.signal}': {exc}") from None
        return inten, sig

    def read(self) -> Pattern:
        """The whole map as a Pattern (refused, with the estimate, when it cannot fit in memory)."""
        n = self.grid.size
        check_fits(n * 8 * (3 if self.has_sigma else 2), f"the map {str(self.path)!r} ({self.shape})",
                   hint="compare it by slabs: pass the MapSource to kinemap.compare with stream=True")
        rows = self.shape[0] if self.shape else 1
        inten, sig = self._read(0, rows)
        return map_pattern(self.grid, inten.reshape(self.shape), None if sig is None else sig.reshape(self.shape),
                        self.metadata)

    def slabs(self, rows: int):
        """Yield ``(start, stop, intensity, sigma)`` for slabs of `rows` rows of grid axis 0
        (intensity and sigma in grid order; sigma None without errors)."""
        total = self.shape[0] if self.shape else 1
        rows = max(1, int(rows))
        for a in range(0, total, rows):
            b = min(total, a + rows)
            inten, sig = self._read(a, b)
            yield a, b, inten, sig


def map_pattern(grid, inten, sig, meta) -> Pattern:
    if sig is not None:
        neg = sig < 0
        if neg.any():
            j = np.unravel_index(int(np.flatnonzero(neg)[0]), sig.shape)
            raise InvalidInputError(f"the uncertainties of {meta.get('file', 'the map')!r} are negative at index "
                                    f"{tuple(int(i) for i in j)}: {float(sig[j])!r}")
    m = dict(meta)
    return Pattern(grid, intensity=inten, sigma=sig, metadata=m, units="1")


class ArrayMap:
    """A Pattern seen as slabs along grid axis 0 (the interface of :class:`MapSource`)."""

    def __init__(self, pattern: Pattern):
        self.pattern = pattern
        self.grid = pattern.grid
        self.metadata = pattern.metadata

    @property
    def shape(self) -> tuple:
        return tuple(self.grid.shape)

    @property
    def has_sigma(self) -> bool:
        return self.pattern.sigma is not None

    def slabs(self, rows: int):
        total = self.shape[0]
        for a in range(0, total, max(1, int(rows))):
            b = min(total, a + rows)
            sig = None if self.pattern.sigma is None else self.pattern.sigma[a:b]
            yield a, b, self.pattern.intensity[a:b], sig

    def read(self) -> Pattern:
        return self.pattern


def rows_per_slab(grid: QGrid) -> int:
    """Rows of grid axis 0 per slab (about SLAB_POINTS points)."""
    per_row = int(np.prod(grid.shape[1:], dtype=np.int64)) if len(grid.shape) > 1 else 1
    return max(1, SLAB_POINTS // max(per_row, 1))


def as_map(value, name: str, **open_options):
    """A Pattern, MapSource or map-file path as a slab map (ArrayMap or MapSource)."""
    m: ArrayMap | MapSource
    if isinstance(value, Pattern):
        m = ArrayMap(value)
    elif isinstance(value, MapSource):
        m = value
    elif isinstance(value, (str, Path)):
        from .nexus import open_map

        m = open_map(value, **open_options)
    else:
        raise InvalidInputError(f"`{name}` must be a kinemap.Pattern, a MapSource or a map file path, "
                                f"got {type(value).__name__}")
    if len(m.shape) == 0:
        raise InvalidInputError(f"`{name}` is a single point; a comparison needs a map")
    return m


def is_map_file(path) -> bool:
    """True for an HDF5 file holding a map (kinemap's own or a NeXus NXdata group), or .npy."""
    p = Path(path)
    if p.suffix.lower() == ".npy":
        return True
    if not p.is_file():
        return False
    with open(p, "rb") as fh:
        if fh.read(8) != b"\x89HDF\r\n\x1a\n":
            return False
    import h5py

    try:
        with h5py.File(p, "r") as f:
            if "entry/data/intensity" in f:
                return True
            found = []

            def visit(name, obj):
                cls = obj.attrs.get("NX_class", "") if isinstance(obj, h5py.Group) else ""
                if (cls.decode() if isinstance(cls, bytes) else str(cls)) == "NXdata":
                    found.append(name)

            f.visititems(visit)
            return bool(found)
    except OSError:
        return False


def should_stream(meas, stream) -> bool:
    """Stream when asked, or (stream=None) when a file map would take over a quarter of the
    available memory once held with its model, residual and masks (~6 arrays of float64)."""
    if stream is not None and not isinstance(stream, bool):
        raise InvalidInputError(f"`stream` must be True, False or None (decide by size), got {stream!r}")
    if isinstance(meas, ArrayMap):
        if stream:
            raise InvalidInputError("`stream=True` applies to maps read from files (a path or MapSource); this "
                                    "measured map is already in memory")
        return False
    if stream is not None:
        return stream
    need = meas.grid.size * 8 * 6
    return need > available_memory() // 4


def same_grid(a: QGrid, b: QGrid, what: str) -> None:
    """Refuse two grids that do not hold the same q-points (naming the difference)."""
    if tuple(a.shape) != tuple(b.shape):
        raise InvalidInputError(f"{what}: the grids do not match: shape {tuple(a.shape)} vs {tuple(b.shape)}")
    if isinstance(a, RegularGrid) != isinstance(b, RegularGrid):
        raise InvalidInputError(f"{what}: the grids do not match: one is regular ({a.kind}), the other arbitrary "
                                f"q-points ({b.kind})")
    if isinstance(a, RegularGrid) and isinstance(b, RegularGrid):
        sa = np.asarray(a.steps, dtype=np.float64).reshape(len(a.shape), 3)
        sb = np.asarray(b.steps, dtype=np.float64).reshape(len(b.shape), 3)
        scale = max(1.0, float(np.abs(a.origin).max()), float(np.abs(sa).max(initial=0.0)) * max(a.shape))
        tol = 1e-9 * scale
        d = float(np.abs(a.origin - b.origin).max())
        if d > tol:
            raise InvalidInputError(f"{what}: the grids do not match: origins {np.round(a.origin, 6).tolist()} and "
                                    f"{np.round(b.origin, 6).tolist()} (1/angstrom) differ by {d:.3g}")
        for i in range(len(a.shape)):
            d = float(np.abs(sa[i] - sb[i]).max()) * max(a.shape[i] - 1, 1)
            if d > tol:
                raise InvalidInputError(f"{what}: the grids do not match: step {i} is {np.round(sa[i], 8).tolist()} "
                                        f"vs {np.round(sb[i], 8).tolist()} (1/angstrom)")
    else:
        qa, qb = a.q_vectors(), b.q_vectors()
        d = float(np.abs(qa - qb).max()) if qa.size else 0.0
        if d > 1e-9 * max(1.0, float(np.abs(qa).max())):
            raise InvalidInputError(f"{what}: the grids do not match: the q-points differ by up to {d:.3g} 1/angstrom")


class SlabQ:
    """q-vectors of slabs of grid rows, fast for regular grids (the points of one row-block
    are the same offsets from each row's start)."""

    def __init__(self, grid: QGrid):
        self.grid = grid
        self._rest: np.ndarray | None = None
        self._regular: RegularGrid | None = None
        if isinstance(grid, RegularGrid) and len(grid.shape) > 1:
            self._regular = grid
            tail = tuple(grid.shape[1:])
            st = np.asarray(grid.steps, dtype=np.float64).reshape(len(grid.shape), 3)[1:]
            idx = np.indices(tail).reshape(len(tail), -1).T.astype(np.float64)
            self._rest = idx @ st  # (rows' points, 3)

    def get(self, a: int, b: int, per_row: int) -> np.ndarray:
        g = self._regular
        if g is None or self._rest is None:
            return self.grid.q_vectors(a * per_row, b * per_row)
        st0 = np.asarray(g.steps, dtype=np.float64).reshape(len(g.shape), 3)[0]
        starts = g.origin + np.arange(a, b, dtype=np.float64)[:, None] * st0
        return (starts[:, None, :] + self._rest[None, :, :]).reshape(-1, 3)


class SlabMasks:
    """Boolean masks of the slabs of a grid, kept as bits (1 bit per point) between passes."""

    def __init__(self):
        self._bits: dict[int, tuple[np.ndarray, tuple]] = {}

    def __contains__(self, start: int) -> bool:
        return start in self._bits

    def put(self, start: int, mask: np.ndarray) -> None:
        self._bits[start] = (np.packbits(np.ravel(mask)), mask.shape)

    def get(self, start: int) -> np.ndarray:
        bits, shape = self._bits[start]
        return np.unpackbits(bits, count=int(np.prod(shape, dtype=np.int64))).astype(bool).reshape(shape)


__all__ = ["MapSource", "map_pattern", "ArrayMap", "as_map", "is_map_file", "should_stream", "same_grid",
           "rows_per_slab", "SlabMasks", "SlabQ",
           "SLAB_POINTS"]
