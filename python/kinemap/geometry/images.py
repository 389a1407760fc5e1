"""Measured frames in, computed frames out.

* HDF5 image stacks: any dataset of shape (n, ny, nx) (or one (ny, nx) frame), with the
  frame angles from a dataset of the same file or from the caller;
* NumPy ``.npy`` stacks (memory-mapped, so frames are read one at a time);
* every other detector image format (CBF, EDF, TIFF, ...) through the general-purpose fabio
  library, the optional extra ``pip install kinemap[images]``: one file or a list of files.

Frames are read lazily, one at a time. Computed frames are written as a NeXus NXdata stack
(``/entry/data/counts``, ``/entry/data/angle`` in degrees) that :func:`read_frames` reads
back.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from .._shared.nexus import nexus_entry
from .._shared.output import atomic_write
from .._shared.validate import file_name, real_array
from ..errors import InvalidInputError, ModelFileError

HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".nxs", ".nx5", ".cxi")
FORMATS = ("hdf5", "npy", "fabio")


class FrameStack:
    """A stack of detector frames read one at a time.

    Attributes
    ----------
    n_frames : int
    shape : (ny, nx)
    angles : ndarray (n_frames,) or None
        Central angle of each frame in degrees, when known.
    source : str
        Where the frames come from (file and dataset).
    """

    def __init__(self, n_frames: int, shape, reader, angles, source: str):
        self.n_frames = int(n_frames)
        self.shape = (int(shape[0]), int(shape[1]))
        self._reader = reader
        self.source = source
        self.angles = None
        if angles is not None:
            a = real_array(angles, "angles")
            if a.ndim == 0:
                a = a.reshape(1)
            if a.shape != (self.n_frames,):
                raise InvalidInputError(f"{source}: the stack has {self.n_frames} frames but {a.size} angles were "
                                        "given; give one angle per frame")
            self.angles = a

    def __len__(self) -> int:
        return self.n_frames

    def frame(self, i: int) -> np.ndarray:
        """Frame `i` (0-based; negative counts from the end) as float64 (ny, nx)."""
        if not -self.n_frames <= i < self.n_frames:
            raise InvalidInputError(f"frame {i} is outside 0..{self.n_frames - 1} of {self.source}")
        return np.asarray(self._reader(i % self.n_frames), dtype=np.float64)

    __getitem__ = frame

    def __iter__(self):
        for i in range(self.n_frames):
            yield self.frame(i)

    def describe(self) -> dict:
        return {"source": self.source, "n_frames": self.n_frames, "shape": list(self.shape),
                "angles": None if self.angles is None else [float(self.angles[0]), float(self.angles[-1])]}

    def __repr__(self) -> str:
        return f"FrameStack({self.source!r}, n_frames={self.n_frames}, shape={self.shape})"


def read_frames(path, *, dataset: str | None = None, angles=None, angles_dataset: str | None = None,
                format: str | None = None) -> FrameStack:
    """Open a stack of detector frames.

    Parameters
    ----------
    path : path or list of paths
        An HDF5 file, a ``.npy`` file, or (through fabio) any detector image file or a list
        of them in frame order.
    dataset : str, optional
        HDF5: the path of the image dataset, (n, ny, nx) or (ny, nx). Default: the file's
        only 3-D numeric dataset (or only 2-D one).
    angles : array_like, optional
        Central angle of each frame in degrees.
    angles_dataset : str, optional
        HDF5: the path of a dataset holding the angles (degrees). For files written by
        kinemap, ``/entry/data/angle`` is used when neither is given.
    format : {"hdf5", "npy", "fabio"}, optional
        Default: from the file name (HDF5 suffixes, ``.npy``; fabio for the rest).

    Returns
    -------
    FrameStack

    Raises
    ------
    FileNotFoundError
        A missing file.
    ModelFileError
        A file that cannot be read, a dataset path that does not exist (named), no unique
        image dataset.
    InvalidInputError
        An angle count that does not match the frames, angles given twice.
    ImportError
        A fabio format without fabio installed (``pip install kinemap[images]``).

    Examples
    --------
    >>> stack = read_frames("scan.h5", dataset="/entry/data/images",        # doctest: +SKIP
    ...                     angles_dataset="/entry/data/omega")
    >>> stack.n_frames, stack.shape, stack[0].dtype                          # doctest: +SKIP
    (900, (1679, 1475), dtype('float64'))
    """
    if angles is not None and angles_dataset is not None:
        raise InvalidInputError("give the angles either as `angles` or as `angles_dataset`, not both")
    if isinstance(path, (list, tuple)):
        if format not in (None, "fabio"):
            raise InvalidInputError("a list of files is read with fabio (format='fabio')")
        return _read_fabio([file_name(p) for p in path], angles)
    p = Path(file_name(path))
    if not p.exists():
        raise FileNotFoundError(f"no such image file: {str(p)!r}")
    fmt = format or ("hdf5" if p.suffix.lower() in HDF5_SUFFIXES or _is_hdf5(p) else
                     "npy" if p.suffix.lower() == ".npy" else "fabio")
    if fmt not in FORMATS:
        raise InvalidInputError(f"`format` must be one of {FORMATS}, got {format!r}")
    if fmt != "hdf5" and (dataset is not None or angles_dataset is not None):
        raise InvalidInputError("`dataset` and `angles_dataset` apply to HDF5 files")
    if fmt == "hdf5":
        return _read_hdf5(p, dataset, angles, angles_dataset)
    if fmt == "npy":
        return _read_npy(p, angles)
    return _read_fabio([str(p)], angles)


def _is_hdf5(p: Path) -> bool:
    try:
        with open(p, "rb") as fh:
            return fh.read(8) == b"\x89HDF\r\n\x1a\n"
    except OSError:
        return False


def _read_npy(p: Path, angles) -> FrameStack:
    try:
        arr = np.load(p, mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError) as exc:
        raise ModelFileError(f"{str(p)!r} is not a readable .npy array: {exc}") from None
    if arr.dtype.kind not in "biuf":
        raise ModelFileError(f"{str(p)!r} holds {arr.dtype} values, not counts")
    if arr.ndim == 2:
        arr = arr[None]
    if arr.ndim != 3:
        raise ModelFileError(f"{str(p)!r} has shape {arr.shape}; frames are (n, ny, nx) or (ny, nx)")
    return FrameStack(arr.shape[0], arr.shape[1:], lambda i: np.array(arr[i]), angles, str(p))


def _image_datasets(f) -> list:
    import h5py

    found = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset) and obj.ndim in (2, 3) and obj.dtype.kind in "biuf":
            found.append((name, obj.ndim))

    f.visititems(visit)
    return found


def _read_hdf5(p: Path, dataset, angles, angles_dataset) -> FrameStack:
    import h5py

    try:
        f = h5py.File(p, "r")
    except OSError as exc:
        raise ModelFileError(f"{str(p)!r} is not a readable HDF5 file: {exc}") from None
    with f:
        if dataset is None:
            found = _image_datasets(f)
            three = [n for n, d in found if d == 3]
            two = [n for n, d in found if d == 2]
            pick = three if three else two
            if len(pick) != 1:
                listed = ", ".join("/" + n for n, _ in found[:10]) or "none"
                raise ModelFileError(f"{str(p)!r}: cannot tell which dataset holds the frames (image datasets: "
                                     f"{listed}); give `dataset`")
            dataset = "/" + pick[0]
        if dataset not in f or not isinstance(f[dataset], h5py.Dataset):
            raise ModelFileError(f"{str(p)!r} has no dataset '{dataset}'")
        ds = f[dataset]
        if ds.ndim not in (2, 3) or ds.dtype.kind not in "biuf":
            raise ModelFileError(f"{str(p)!r} dataset '{dataset}' has shape {ds.shape} and dtype {ds.dtype}; "
                                 "frames are real (n, ny, nx) or (ny, nx)")
        single = ds.ndim == 2
        n = 1 if single else ds.shape[0]
        shape = ds.shape[-2:]
        if angles is None and angles_dataset is None and f.attrs.get("creator") in ("kinemap", b"kinemap") \
                and "entry/data/angle" in f:
            angles_dataset = "/entry/data/angle"
        if angles_dataset is not None:
            if angles_dataset not in f or not isinstance(f[angles_dataset], h5py.Dataset):
                raise ModelFileError(f"{str(p)!r} has no dataset '{angles_dataset}' (angles)")
            angles = np.asarray(f[angles_dataset][()], dtype=np.float64).reshape(-1)
            if angles.size != n:
                raise InvalidInputError(f"{str(p)!r}: '{dataset}' has {n} frames but '{angles_dataset}' holds "
                                        f"{angles.size} angles; they must match")
    path = str(p)

    def reader(i):
        with h5py.File(path, "r") as fh:
            d = fh[dataset]
            return d[()] if single else d[i]

    return FrameStack(n, shape, reader, angles, f"{path}:{dataset}")


def _read_fabio(paths: list, angles) -> FrameStack:
    try:
        import fabio
    except ImportError:
        raise ImportError("reading detector images other than HDF5 and .npy needs the optional fabio library: "
                          "pip install kinemap[images]") from None
    if not paths:
        raise InvalidInputError("the list of image files is empty")
    index: list[tuple[str, int]] = []  # (file, frame in file)
    shape = None
    for name in paths:
        if not os.path.exists(name):
            raise FileNotFoundError(f"no such image file: {name!r}")
        try:
            img = fabio.open(name)
        except Exception as exc:  # fabio raises many kinds for unreadable files
            raise ModelFileError(f"{name!r} is not an image file fabio can read: {exc}") from None
        with img:
            nfr = int(getattr(img, "nframes", 1) or 1)
            shp = tuple(img.data.shape)
        if len(shp) != 2:
            raise ModelFileError(f"{name!r} holds an image of shape {shp}, not a 2-D frame")
        if shape is None:
            shape = shp
        elif shp != shape:
            raise ModelFileError(f"{name!r} has frames of shape {shp}, but the first file's are {shape}")
        index.extend((name, j) for j in range(nfr))

    def reader(i):
        name, j = index[i]
        with fabio.open(name) as img:
            data = img.data if j == 0 else img.getframe(j).data
            return np.array(data)

    src = paths[0] if len(paths) == 1 else f"{paths[0]} … {paths[-1]} ({len(paths)} files)"
    return FrameStack(len(index), shape, reader, angles, src)


def write_frames(path, counts, angles, *, detector=None, metadata: dict | None = None, overwrite: bool = False,
                 inputs=()) -> Path:
    """Write a stack of frames as NeXus NXdata in HDF5 (atomically).

    Layout: ``/entry/data/counts`` (n, ny, nx) with ``/entry/data/angle`` (degrees) as the
    first axis; ``/entry/instrument/detector`` with the geometry (mm, pixels, Å) and the
    mask; ``/entry/parameters`` with `metadata`. :func:`read_frames` reads it back with its
    angles.
    """
    import h5py

    from ..pattern import _write_params

    c = np.asarray(counts, dtype=np.float64)
    if c.ndim == 2:
        c = c[None]
    a = real_array(angles, "angles").reshape(-1)
    if c.ndim != 3 or a.size != c.shape[0]:
        raise InvalidInputError(f"`counts` {c.shape} and `angles` ({a.size}) do not describe the same frames")
    final = Path(path)
    with atomic_write(final, overwrite=overwrite, inputs=inputs, what="frames file") as tmp, h5py.File(tmp, "w") as f:
        entry = nexus_entry(f, final.name)
        data = entry.create_group("data")
        data.attrs["NX_class"] = "NXdata"
        data.attrs["signal"] = "counts"
        data.attrs["axes"] = np.array(["angle", ".", "."], dtype=h5py.string_dtype())
        data.attrs["angle_indices"] = 0
        ds = data.create_dataset("counts", data=c, chunks=(1,) + c.shape[1:], compression="gzip", compression_opts=4)
        ds.attrs["long_name"] = "expected counts per unit incident flux"
        ang = data.create_dataset("angle", data=a)
        ang.attrs["units"] = "degree"
        if detector is not None:
            inst = entry.create_group("instrument")
            inst.attrs["NX_class"] = "NXinstrument"
            dg = inst.create_group("detector")
            dg.attrs["NX_class"] = "NXdetector"
            d = detector.describe()
            for key, unit in (("distance_mm", "mm"), ("pixel_size_mm", "mm"), ("beam_center_px", "pixel"),
                              ("wavelength_angstrom", "angstrom"), ("origin_mm", "mm"), ("fast_axis", ""),
                              ("slow_axis", ""), ("tilt_matrix", "")):
                x = dg.create_dataset(key, data=np.asarray(d[key], dtype=np.float64))
                if unit:
                    x.attrs["units"] = unit
            dg.create_dataset("pixel_mask", data=detector.mask.astype(np.uint8))
        if metadata:
            params = entry.create_group("parameters")
            params.attrs["NX_class"] = "NXcollection"
            _write_params(params, metadata)
    return final


__all__ = ["FrameStack", "read_frames", "write_frames", "FORMATS"]
