"""H5MD 1.1 writer: frame by frame and chunk by chunk, atomically, and safe on a full disk.

The file has the layout the reader (:mod:`kinemap.io.h5md_read`) documents: positions in Å
(unit string ``"0.1 nm"``), species as an enumeration, the box as ``edges`` (one cell, or
``edges/value`` per frame), and the kinemap additions ``occupancy``, ``b_iso`` (Å², unit
``"0.01 nm+2"``) and ``u_aniso`` ([N][3][3] Cartesian U in Å², unit ``"0.01 nm+2"``).

Failures while writing
    HDF5 writes through :class:`kinemap.io._guarded.GuardedFile`, which keeps I/O errors
    from the HDF5 library (it crashes on a write error inside its own close). After a
    failure the writer stops, lets HDF5 close cleanly, removes the temporary file and raises
    the recorded error (e.g. ``OSError`` ENOSPC); the same holds for Ctrl-C arriving while
    HDF5 writes. Nothing is left under the final name or the temporary one.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np

from .._shared.output import AtomicFile, HeldSignals
from .._shared.validate import whole_number
from ..errors import InvalidInputError
from ..model import Model, as_cell
from ._guarded import GuardedFile

#: h5py objects of files whose close failed anyway: kept alive, because freeing them would
#: call into a broken HDF5 file.
_QUARANTINE: list = []


class H5MDWriter:
    """Write an H5MD 1.1 file frame by frame and chunk by chunk (atomically).

    Parameters
    ----------
    path : str or path-like
        Output file; written as a temporary file beside it and renamed by :meth:`close`.
    n_atoms : int
        Atoms per frame (the same in every frame, as H5MD requires).
    species : sequence of str
        Distinct species labels; atoms refer to them by code 0, 1, ... (an enumeration).
    group : str
        Particle group name under ``/particles``.
    boundary : str or sequence of str
        "periodic" or "none" per axis (one value for all three axes).
    time_dependent_box : bool
        Store one cell per frame (``box/edges/value``) instead of one for the file.
    position_dtype : numpy dtype
        float64 (default) or float32 to halve the file size.
    author : str
        Name recorded in ``/h5md/author``.
    chunk_atoms : int
        Atoms per HDF5 chunk of the position dataset.
    overwrite : bool
        Replace an existing file (default: refuse).
    inputs : sequence of paths
        Files being read; `path` may not be one of them.

    Raises
    ------
    InvalidInputError
        Bad arguments, or an output that is one of `inputs` or has a name that is not UTF-8.
    FileExistsError
        An existing output without ``overwrite=True``.
    OSError
        When writing fails (full disk, file-size limit): the writer stops at once, removes
        its temporary file and raises the system's error.

    Notes
    -----
    Positions are stored in Å with the H5MD unit string ``"0.1 nm"``; edges are rows a, b, c.
    Use as a context manager: an exception inside the ``with`` block removes the temporary
    file, so no partial file is left under `path`.
    """

    def __init__(self, path, n_atoms: int, species: Sequence[str], *, group: str = "all",
                 boundary="periodic", time_dependent_box: bool = False,
                 position_dtype=np.float64, author: str = "kinemap user",
                 chunk_atoms: int = 1 << 16, overwrite: bool = False, inputs=()):
        import h5py

        from .. import __version__

        n_atoms = whole_number(n_atoms, "n_atoms", minimum=0)
        labels = [str(s) for s in species]
        if not labels or any(not s for s in labels) or len(set(labels)) != len(labels):
            raise InvalidInputError(f"`species` must be distinct non-empty labels, got {labels!r}")
        if isinstance(boundary, str):
            boundary = [boundary] * 3
        boundary = [str(b) for b in boundary]
        if len(boundary) != 3 or any(b not in ("periodic", "none") for b in boundary):
            raise InvalidInputError(f"`boundary` must be 'periodic'/'none' or three of them, got {boundary!r}")
        if np.dtype(position_dtype) not in (np.dtype(np.float64), np.dtype(np.float32)):
            raise InvalidInputError(f"`position_dtype` must be float64 or float32, got {position_dtype!r}")
        self._closed = False
        self._close_tried = False
        self.f = None
        self._out = AtomicFile(path, overwrite=overwrite, inputs=inputs, what="model file")
        self.final, self.tmp = self._out.final, self._out.tmp
        self.n_atoms = int(n_atoms)
        self.labels = labels
        self.code = {lab: i for i, lab in enumerate(labels)}
        self.n_frames = 0
        self.time_dependent_box = bool(time_dependent_box)
        self._cell_written = False
        base = np.int8 if len(labels) < 127 else (np.int16 if len(labels) < 32000 else np.int32)
        try:
            self._sink = GuardedFile(self.tmp)
            self.f = h5py.File(self._sink, "w")
            f = self.f
            h = f.create_group("h5md")
            h.attrs["version"] = np.array([1, 1], dtype=np.int32)
            h.create_group("author").attrs["name"] = author
            cr = h.create_group("creator")
            cr.attrs["name"] = "kinemap"
            cr.attrs["version"] = str(__version__)
            g = f.create_group(f"particles/{group}")
            self.group = g
            box = g.create_group("box")
            box.attrs["dimension"] = np.int32(3)
            box.attrs["boundary"] = np.array(boundary, dtype=h5py.string_dtype())
            self.box = box
            n = max(self.n_atoms, 1)
            ch = (1, min(n, int(chunk_atoms)), 3)
            pos = g.create_group("position")
            self.value = pos.create_dataset("value", shape=(0, self.n_atoms, 3), maxshape=(None, self.n_atoms, 3),
                                            dtype=position_dtype, chunks=ch)
            self.value.attrs["unit"] = "0.1 nm"
            self.step = pos.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64, chunks=(1024,))
            self.time = pos.create_dataset("time", shape=(0,), maxshape=(None,), dtype=np.float64, chunks=(1024,))
            self.species = g.create_dataset(
                "species", shape=(self.n_atoms,),
                dtype=h5py.enum_dtype(self.code, basetype=base),
                chunks=(min(n, 1 << 20),) if self.n_atoms else None)
            if time_dependent_box:
                e = box.create_group("edges")
                self.edges = e.create_dataset("value", shape=(0, 3, 3), maxshape=(None, 3, 3), dtype=np.float64)
                self.edges.attrs["unit"] = "0.1 nm"
                e["step"] = self.step  # hard link: the same steps as the positions
                e["time"] = self.time
            self._check()
        except BaseException:
            self._abort()
            raise

    def _check(self) -> None:
        """Raise the I/O error (or Ctrl-C) that the file object recorded, if any."""
        exc = self._sink.failure
        if exc is None:
            return
        if isinstance(exc, OSError):
            raise OSError(exc.errno, f"writing the model file {str(self.final)!r} failed ({exc.strerror or exc}); "
                                     "nothing was left behind") from None
        raise exc

    # -- per-atom, time-independent ----------------------------------------------------
    def write_species(self, labels, start: int = 0) -> None:
        """Species of atoms ``start ... start+len(labels)-1`` (labels from `species`)."""
        lab = np.asarray(labels, dtype=object).reshape(-1)
        try:
            codes = np.fromiter((self.code[x] for x in lab), dtype=np.int64, count=len(lab))
        except KeyError as exc:
            raise InvalidInputError(f"species label {exc.args[0]!r} (atoms from {start}) is not one of {self.labels}") from None
        self.write_species_codes(codes, start)

    def write_species_codes(self, codes, start: int = 0) -> None:
        """Species codes (indices into `species`) of atoms ``start ...``."""
        c = np.asarray(codes, dtype=np.int64).reshape(-1)
        if len(c) and (c.min() < 0 or c.max() >= len(self.labels)):
            j = int(np.flatnonzero((c < 0) | (c >= len(self.labels)))[0])
            raise InvalidInputError(f"species code {int(c[j])} of atom {start + j} is not in 0..{len(self.labels) - 1}")
        self._check_range(start, len(c))
        self.species[start:start + len(c)] = c.astype(self.species.dtype)
        self._check()

    def _per_atom_ds(self, name, unit=None, trailing=(), fill=0.0):
        ds = self.group.get(name)
        if ds is None:
            n = max(self.n_atoms, 1)
            ds = self.group.create_dataset(name, shape=(self.n_atoms,) + trailing, dtype=np.float64,
                                           chunks=(min(n, 1 << 20 if not trailing else 1 << 16),) + trailing
                                           if self.n_atoms else None,
                                           fillvalue=fill)
            if unit:
                ds.attrs["unit"] = unit
        return ds

    def write_occupancy(self, values, start: int = 0) -> None:
        """Occupancies in [0, 1] of atoms ``start ...`` (kinemap addition, time-independent)."""
        v = np.asarray(values, dtype=np.float64).reshape(-1)
        self._check_range(start, len(v))
        self._per_atom_ds("occupancy", fill=1.0)[start:start + len(v)] = v
        self._check()

    def write_b_iso(self, values, start: int = 0) -> None:
        """B (Å²) of atoms ``start ...`` (kinemap addition, time-independent)."""
        if "u_aniso" in self.group:
            raise InvalidInputError("this file already has u_aniso; a model has one kind of displacement")
        v = np.asarray(values, dtype=np.float64).reshape(-1)
        self._check_range(start, len(v))
        self._per_atom_ds("b_iso", unit="0.01 nm+2")[start:start + len(v)] = v
        self._check()

    def write_u_aniso(self, values, start: int = 0) -> None:
        """Anisotropic displacement tensors U (Å², Cartesian, (n, 3, 3)) of atoms ``start ...``
        (kinemap addition ``u_aniso``, time-independent, unit ``"0.01 nm+2"``)."""
        if "b_iso" in self.group:
            raise InvalidInputError("this file already has b_iso; a model has one kind of displacement")
        u = np.asarray(values, dtype=np.float64)
        if u.ndim != 3 or u.shape[1:] != (3, 3):
            raise InvalidInputError(f"`u_aniso` must be an (n, 3, 3) array, got {u.shape}")
        self._check_range(start, len(u))
        self._per_atom_ds("u_aniso", unit="0.01 nm+2", trailing=(3, 3))[start:start + len(u)] = u
        self._check()

    def _check_range(self, start, n):
        if start < 0 or start + n > self.n_atoms:
            raise InvalidInputError(f"atoms {start}..{start + n - 1} are outside 0..{self.n_atoms - 1}")

    # -- frames ---------------------------------------------------------------------------
    def add_frame(self, positions=None, *, cell=None, step: int | None = None, time: float | None = None) -> int:
        """Start a new frame; give all `positions` (N, 3) Å now or later with :meth:`write_positions`.

        Returns the frame index.
        """
        i = self.n_frames
        self.value.resize(i + 1, axis=0)
        self.step.resize(i + 1, axis=0)
        self.time.resize(i + 1, axis=0)
        self.step[i] = i if step is None else int(step)
        self.time[i] = float(i if time is None else time)
        self.n_frames = i + 1
        if cell is not None:
            c = as_cell(cell)
            if self.time_dependent_box:
                self.edges.resize(i + 1, axis=0)
                self.edges[i] = c
            elif not self._cell_written:
                ds = self.box.create_dataset("edges", data=c)
                ds.attrs["unit"] = "0.1 nm"
                self._cell_written = True
            elif not np.allclose(self.box["edges"][()], c, rtol=0, atol=1e-12):
                raise InvalidInputError(f"frame {i} has a different cell; open the writer with time_dependent_box=True")
        elif self.time_dependent_box:
            raise InvalidInputError(f"frame {i} needs a `cell` (the box is time-dependent)")
        self._check()
        if positions is not None:
            self.write_positions(positions, 0, frame=i)
        return i

    def write_positions(self, positions, start: int = 0, frame: int | None = None) -> None:
        """Positions (Å) of atoms ``start ...`` in `frame` (default: the last added)."""
        frame = self.n_frames - 1 if frame is None else frame
        if not 0 <= frame < self.n_frames:
            raise InvalidInputError(f"frame {frame} has not been added (frames 0..{self.n_frames - 1})")
        p = np.asarray(positions, dtype=np.float64)
        if p.ndim != 2 or p.shape[1] != 3:
            raise InvalidInputError(f"`positions` must be an (n, 3) array, got {p.shape}")
        self._check_range(start, len(p))
        if not np.isfinite(p).all():  # the whole-array test is fast; find the atom only when needed
            j = int(np.flatnonzero(~np.isfinite(p).all(axis=1))[0])
            raise InvalidInputError(f"atom {start + j} of frame {frame} has non-finite coordinates {p[j].tolist()}")
        self.value[frame, start:start + len(p), :] = p
        self._check()

    # -- closing --------------------------------------------------------------------------
    def close(self) -> Path:
        """Finish the file and rename it to its final name. Returns the path.

        Raises
        ------
        OSError
            When the last writes fail (full disk): the temporary file is removed.
        """
        if self._closed:
            return self.final
        if self.n_frames == 0:
            self._abort()
            raise InvalidInputError(f"no frame was written to {str(self.final)!r}")
        with HeldSignals() as held:
            try:
                self._close_h5()
                self._check()
            except BaseException:
                self._abort()
                raise
            if held.received:
                self._abort()
            else:
                try:
                    self._out.commit()
                except BaseException:  # the rename failed: keep nothing
                    self._abort()
                    raise
                self._closed = True
        held.deliver()
        return self.final

    def _close_h5(self) -> None:
        """Close the HDF5 file once (a second close of a file whose close failed crashes
        HDF5), then the file object."""
        if self.f is not None and not self._close_tried:
            self._close_tried = True
            try:
                self.f.close()
            except BaseException:
                _QUARANTINE.append(self.__dict__.copy())  # never free a broken file's objects
                raise
            finally:
                sink = getattr(self, "_sink", None)
                if sink is not None:
                    sink.close()
        elif getattr(self, "_sink", None) is not None and not self._sink.closed:
            self._sink.close()

    def _abort(self) -> None:
        """Close what is open and remove the temporary file. Raises only a Ctrl-C or SIGTERM
        held while it ran."""
        with HeldSignals() as held:
            try:
                self._close_h5()
            except BaseException:
                pass
            if getattr(self, "_out", None) is not None:
                self._out.abort()
            self._closed = True
        held.deliver()

    def __enter__(self) -> H5MDWriter:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self._abort()


def _same_per_atom(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return bool(np.array_equal(a, b))


def write_h5md(path, frames: Model | Iterable[Model], *, steps=None, times=None, group: str = "all",
               boundary=None, position_dtype=np.float64, author: str = "kinemap user",
               overwrite: bool = False, inputs=()) -> Path:
    """Write in-memory models (one per frame, same atoms in the same order) as H5MD 1.1.

    Parameters
    ----------
    path : str or path-like
        Output file (written atomically: a temporary name, renamed when complete).
    frames : Model or iterable of Model
        The frames. H5MD stores species, occupancy and displacements once, so they must be
        the same in every frame; positions and boxes come from every frame.
    steps, times : sequence, optional
        Integration step and time of each frame (default 0, 1, 2, ...).
    group : str
        Particle group under ``/particles``.
    boundary : str or sequence of str, optional
        Default "periodic" when the first frame has a cell, else "none".
    position_dtype : dtype
        float64 (default) or float32.
    author : str
        Recorded in ``/h5md/author``.
    overwrite : bool
        Replace an existing file (default: refuse, keeping it).
    inputs : sequence of paths
        Files the frames were read from; `path` may not be one of them.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InvalidInputError
        When frames differ in atom count, species, occupancy or displacements, no frame is
        given, or the output is one of `inputs`.
    FileExistsError
        An existing output without ``overwrite=True``.
    OSError
        When the disk is full or the file cannot be written (nothing is left behind).

    Notes
    -----
    What is written: positions (Å, unit "0.1 nm"), the box (rows a, b, c; per frame when it
    changes), species (an enumeration), and when they differ from the defaults occupancy,
    ``b_iso`` (B in Å²) or ``u_aniso`` (Cartesian U in Å², (N, 3, 3)); :func:`kinemap.open_model`
    reads all of them back.

    Examples
    --------
    >>> import numpy as np, kinemap as km                                   # doctest: +SKIP
    >>> m = km.Model(np.random.default_rng(0).uniform(0, 10, (100, 3)), "Fe", cell=np.eye(3) * 10)  # doctest: +SKIP
    >>> km.write_h5md("fe.h5md", m)                                         # doctest: +SKIP
    """
    if isinstance(frames, Model):
        frames = [frames]
    it = iter(frames)
    try:
        first = next(it)
    except StopIteration:
        raise InvalidInputError("`frames` is empty: nothing to write") from None
    labels = first.species_labels()
    cells = first.box if first.box is not None else first.cell
    has_cell = cells is not None
    if boundary is None:
        boundary = "periodic" if has_cell else "none"
    models = [first] + list(it)

    def box_of(m):
        return m.box if m.box is not None else m.cell

    td_box = cells is not None and any(box_of(m) is None or not np.allclose(box_of(m), cells) for m in models)
    for i, m in enumerate(models[1:], start=1):
        if m.n_atoms != first.n_atoms:
            raise InvalidInputError(f"frame {i} has {m.n_atoms} atoms but frame 0 has {first.n_atoms}; "
                                    "H5MD needs the same atoms in every frame")
        if not np.array_equal(m.species, first.species):
            j = int(np.flatnonzero(m.species != first.species)[0])
            raise InvalidInputError(f"frame {i}: species of atom {j} is {m.species[j]!r} but {first.species[j]!r} in frame 0")
        for name in ("occupancy", "b_iso", "u_aniso"):
            if not _same_per_atom(getattr(m, name), getattr(first, name)):
                raise InvalidInputError(f"frame {i} has other {name} values than frame 0; H5MD stores them once, "
                                        "so every frame must share them")
    with H5MDWriter(path, first.n_atoms, labels, group=group, boundary=boundary, time_dependent_box=td_box,
                    position_dtype=position_dtype, author=author, overwrite=overwrite, inputs=inputs) as w:
        w.write_species(first.species)
        if np.any(first.occupancy != 1.0):
            w.write_occupancy(first.occupancy)
        if first.u_aniso is not None:
            w.write_u_aniso(first.u_aniso)
        elif np.any(first.b_iso != 0.0):
            w.write_b_iso(first.b_iso)
        for i, m in enumerate(models):
            w.add_frame(m.positions, cell=box_of(m) if has_cell else None,
                        step=None if steps is None else steps[i], time=None if times is None else times[i])
    return w.final


__all__ = ["H5MDWriter", "write_h5md"]
