"""Bragg and diffuse scattering: averages over frames and over the cells of a supercell.

Two ways to split the scattering of a model into a Bragg part (the average structure) and a
diffuse part (what the deviations from it add), ``average_frames(..., split=...)``:

``split="frames"`` (a trajectory; frames t = 1 ... n with amplitudes A_t(q))::

    total    T = ⟨|A|²⟩ = (1/n) Σ_t |A_t(q)|²
    diffuse  D = n/(n−1) · (⟨|A|²⟩ − |⟨A⟩|²)        (the unbiased variance over frames)
    Bragg    B = T − D = |⟨A⟩|² − D/n

The centre of the atoms is held fixed (its drift relative to the first frame is removed
before summing, by the minimum image in periodic boxes), since a rigid drift would otherwise
move scattering from Bragg into diffuse. With one frame this split puts everything in
"Bragg": use ``split="cells"``.

``split="cells"`` (works for one snapshot of a supercell; box = P·cell)::

    F̄(q)     structure factor of the average unit cell: every atom folded into the parent
             cell, summed, divided by the number of cells N_c, averaged over frames
    A_avg(q) = F̄(q)·L_box(q),  L_box = Σ_{cells R in the box} exp(i q·R)
    Bragg    |A_avg|²
    diffuse  ⟨|A − A_avg|²⟩ ≥ 0  (= total − Bragg on grids commensurate with the box)

At integer h, k, l of the parent cell A = A_avg in every snapshot, so the static diffuse
scattering there cannot be told from one snapshot: the diffuse map is NaN at those points.

References: the average-structure decomposition of diffuse scattering (Warren, "X-ray
Diffraction", 1969, the chapter on order–disorder; Welberry, "Diffuse X-ray Scattering and
Models of Disorder", 2004 — both from memory); see docs/references.md.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import _core
from ._engine import amplitudes
from ._shared.output import check_output
from ._shared.progress import Progress, check_progress
from ._shared.validate import flag, one_of, real_number, thread_count, whole_number
from .errors import InvalidInputError
from .model import AtomSource, AtomSourceBase, Model, as_cell, supercell_matrix
from .pattern import Pattern, save_pattern
from .probes import get_probe
from .qgrid import QGrid, RegularGrid
from .scatter import DEFAULT_CHUNK_ATOMS, METHODS, KinematicApproximationWarning, as_grid, check_commensurate

SPLITS = ("frames", "cells")
#: Fewer frames than this get a caution with the frames split.
FEW_FRAMES = 10


class FewFramesWarning(UserWarning):
    """A Bragg/diffuse split over frames that uses few frames (large statistical error)."""


@dataclass
class FrameAverages:
    """Result of :func:`average_frames`.

    Attributes
    ----------
    total : Pattern
        ⟨|A|²⟩ (intensity only).
    bragg : Pattern
        The Bragg part, with ``amplitude`` the average amplitude (⟨A⟩ or A_avg).
    diffuse : Pattern
        The diffuse part (intensity only; NaN where it cannot be told, see the module notes).
    frames : list of int
        Frame indices used (also in every pattern's ``metadata["frames"]``).
    split : str
        "frames" or "cells".
    """

    total: Pattern
    bragg: Pattern
    diffuse: Pattern
    frames: list
    split: str = "frames"
    cautions: list = field(default_factory=list)

    def parts(self) -> dict[str, Pattern]:
        """The three patterns by name: ``{"total": ..., "bragg": ..., "diffuse": ...}``."""
        return {"total": self.total, "bragg": self.bragg, "diffuse": self.diffuse}

    def save(self, prefix, extra: dict | None = None, *, overwrite: bool = False, inputs=()) -> dict[str, Path]:
        """Write ``<prefix>_total.h5``, ``<prefix>_bragg.h5`` and ``<prefix>_diffuse.h5``."""
        return save_parts(self.parts(), prefix, extra=extra, overwrite=overwrite, inputs=inputs)


def save_parts(parts: dict[str, Pattern], prefix, extra: dict | None = None, suffix: str = ".h5",
               *, overwrite: bool = False, inputs=()) -> dict[str, Path]:
    """Write several patterns as ``<prefix>_<name><suffix>``, all or none: every name is
    checked before anything is written, and each file appears only when complete."""
    prefix = Path(prefix)
    finals = {name: prefix.parent / f"{prefix.name}_{name}{suffix}" for name in parts}
    for path in finals.values():
        check_output(path, overwrite=overwrite, inputs=inputs, what="map file")
    written: list[Path] = []
    try:
        for name, pat in parts.items():
            written.append(save_pattern(pat, finals[name], keep_amplitude=pat.amplitude is not None, extra=extra,
                                        overwrite=overwrite, inputs=inputs))
    except BaseException:
        if not overwrite:  # files this call created are removed; replaced ones cannot be restored
            for path in written:
                path.unlink(missing_ok=True)
        raise
    return finals


# --------------------------------------------------------------------------------------
# sources derived from another source
# --------------------------------------------------------------------------------------
class _Mapped(AtomSourceBase):
    """Another source's atoms with positions changed chunk by chunk (picklable, so that the
    tasks of a cluster run can read it themselves)."""

    note = ""

    def __init__(self, source):
        self._src = source
        self.n_atoms = source.n_atoms
        self.box = source.box
        self.cell = source.cell

    def _move(self, p: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def species_labels(self) -> list[str]:
        return self._src.species_labels()

    def iter_chunks(self, chunk_atoms: int):
        for chunk in self._src.iter_chunks(chunk_atoms):
            yield chunk.moved(self._move(chunk.positions)) if chunk.n_atoms else chunk

    def describe(self) -> dict:
        d = dict(self._src.describe())
        d["positions"] = self.note
        return d


class _Folded(_Mapped):
    """The atoms folded into the parent cell (fractional coordinates reduced into [0, 1))."""

    note = "folded into the parent cell"

    def __init__(self, source, cell: np.ndarray):
        super().__init__(source)
        self._fold_cell = np.asarray(cell, dtype=np.float64)
        self._inv = np.linalg.inv(self._fold_cell)

    def _move(self, p):
        f = p @ self._inv
        f -= np.floor(f)
        return f @ self._fold_cell


class _Shifted(_Mapped):
    """The atoms shifted by −`shift` (drift removal)."""

    def __init__(self, source, shift: np.ndarray):
        super().__init__(source)
        self._shift = np.asarray(shift, dtype=np.float64)
        self.note = f"shifted by {np.round(-self._shift, 6).tolist()} angstrom"

    def _move(self, p):
        return p - self._shift


def _min_image(d: np.ndarray, box: np.ndarray | None) -> np.ndarray:
    if box is None:
        return d
    f = d @ np.linalg.inv(box)
    f -= np.round(f)
    return f @ box


def _drift(ref, src, chunk_atoms: int) -> np.ndarray:
    """Mean displacement of the atoms of `src` relative to `ref` (same atoms, same order),
    by the minimum image in a periodic box; read chunk by chunk."""
    total = np.zeros(3)
    n = 0
    box = src.box
    for a, b in zip(ref.iter_chunks(chunk_atoms), src.iter_chunks(chunk_atoms)):
        if a.n_atoms != b.n_atoms:
            raise InvalidInputError("frames hold different numbers of atoms; the drift of the centre cannot be "
                                    "removed (remove_drift=False)")
        total += _min_image(b.positions - a.positions, box).sum(axis=0)
        n += b.n_atoms
    if n != (src.n_atoms or n):
        raise InvalidInputError("frames hold different numbers of atoms; use remove_drift=False")
    return total / max(n, 1)


# --------------------------------------------------------------------------------------
# frames
# --------------------------------------------------------------------------------------
def _frame_sources(model, frames, open_options):
    """(frame indices, sources) from a path, a trajectory source or a sequence of models."""
    from .io import FileSource, open_model, select_frames

    if isinstance(model, (str, os.PathLike)):
        base = open_model(model, **(open_options or {}))
    elif isinstance(model, FileSource):
        if open_options:
            raise InvalidInputError("`open_options` apply when `model` is a file path")
        base = model
    elif isinstance(model, (Model, AtomSource)):
        if frames is not None and frames not in ([0], 0):
            raise InvalidInputError("a single model has one frame; give a list of models or a trajectory file")
        return [0], [model]
    else:
        try:
            items = list(model)
        except TypeError:
            raise InvalidInputError(
                "`model` must be a trajectory file, an atom source from kinemap.open_model or a list of "
                f"models, got {type(model).__name__}") from None
        if not items:
            raise InvalidInputError("`model` holds no frames")
        for i, it in enumerate(items):
            if not isinstance(it, (Model, AtomSource)):
                raise InvalidInputError(f"frame {i} of `model` is a {type(it).__name__}, not a kinemap.Model")
        idx = select_frames(frames, len(items), "the list of models")
        return idx, [items[i] for i in idx]
    idx = select_frames(frames, base.n_frames, str(base.path))
    return idx, [base if i == base.frame else base.at_frame(i) for i in idx]


def _frame_grid(grid: QGrid, source) -> QGrid:
    """The grid for one frame: an hkl grid follows the frame's own cell (constant-pressure
    trajectories), other grids are used as given."""
    cell = source.cell
    if grid.kind != "hkl" or not isinstance(grid, RegularGrid) or cell is None:
        return grid
    h_origin, h_steps = grid.hkl_origin, grid.hkl_steps
    if grid.cell is None or h_origin is None or h_steps is None or np.allclose(cell, grid.cell, rtol=1e-12, atol=0):
        return grid  # (an hkl grid without a cell has no h, k, l to follow)
    to_q = 2.0 * np.pi * np.linalg.inv(as_cell(cell)).T
    return QGrid.regular(h_origin @ to_q, h_steps @ to_q, grid.shape, cell=cell, kind="hkl")


def _cell_translations(box: np.ndarray, cell: np.ndarray) -> np.ndarray:
    """Cartesian translations R of the N_c = |det P| parent cells in the box (box = P·cell)."""
    p = supercell_matrix(box @ np.linalg.inv(cell), "box/cell ratio")
    corners = np.array([[i, j, k] for i in (0, 1) for j in (0, 1) for k in (0, 1)], dtype=float) @ p
    lo, hi = np.floor(corners.min(axis=0)).astype(int), np.ceil(corners.max(axis=0)).astype(int)
    m = np.stack(np.meshgrid(*[np.arange(a, b + 1) for a, b in zip(lo, hi)], indexing="ij"), -1).reshape(-1, 3)
    f = m @ np.linalg.inv(p)
    inside = np.all((f > -1e-9) & (f < 1 - 1e-9), axis=1)
    n_c = int(round(abs(np.linalg.det(p))))
    r = m[inside].astype(float) @ cell
    if len(r) != n_c:  # pragma: no cover - guards the enumeration
        raise InvalidInputError(f"found {len(r)} cells in the box but |det P| = {n_c}")
    return r


def _integer_hkl(grid: QGrid, cell: np.ndarray, tol: float = 1e-6) -> np.ndarray:
    """True at the grid points whose h, k, l (of `cell`) are all whole numbers."""
    out = np.zeros(grid.size, dtype=bool)
    block = 1 << 20
    for q0 in range(0, grid.size, block):
        hkl = grid.q_vectors(q0, q0 + block) @ cell.T / (2.0 * np.pi)
        out[q0:q0 + block] = np.all(np.abs(hkl - np.round(hkl)) < tol, axis=1)
    return out.reshape(grid.shape)


def average_frames(model, grid: QGrid, *, frames=None, split: str = "frames", probe="xray", method: str = "auto",
                   tol: float = 1e-6, threads: int | None = None, progress=False,
                   chunk_atoms: int = DEFAULT_CHUNK_ATOMS, remove_drift: bool = True,
                   open_options: dict | None = None, cluster=None, checkpoint=None,
                   block_points: int | None = None, **probe_options) -> FrameAverages:
    """Total, Bragg and diffuse scattering of a model, split over frames or over cells.

    Parameters
    ----------
    model : str, path-like, atom source or sequence of Model
        A trajectory file (opened with :func:`kinemap.open_model`), a source from it (its
        other frames are reached with ``at_frame``), one model, or in-memory frames.
    grid : QGrid
        Where to evaluate (q in Å⁻¹). hkl grids follow each frame's own cell.
    frames : selection, optional
        Frames to use: None (all), an int, a slice, a list of ints, or text such as
        ``"0:50:5"`` (see :func:`kinemap.io.select_frames`).
    split : {"frames", "cells"}
        How the average structure is defined (see the module notes): over frames, or over the
        parent cells of a supercell (works for one snapshot; needs the model's `cell` and its
        periodic `box`, e.g. ``open_model(path, supercell=(n1, n2, n3))``).
    probe, method, tol, threads, chunk_atoms, **probe_options
        As in :func:`kinemap.scatter`; the same for every frame.
    progress : bool or callable
        True shows one progress bar over all frames; a callable receives
        ``(frames_done, n_frames)`` after each frame.
    remove_drift : bool
        Remove the drift of the centre of the atoms relative to the first frame.
    open_options : dict, optional
        Keyword arguments for :func:`kinemap.open_model` when `model` is a path.
    cluster, checkpoint, block_points
        As in :func:`kinemap.scatter`: every frame runs as (atom chunk × q-block) tasks on the
        cluster; the checkpoint folder keeps one sub-folder per frame (and part).

    Returns
    -------
    FrameAverages
        ``total``, ``bragg`` (amplitude: the average amplitude) and ``diffuse`` patterns whose
        metadata state the split, its formulas, the frames and the drift removed.

    Raises
    ------
    InvalidInputError
        Bad selections or arguments; ``split="cells"`` without a parent cell and a box that
        holds several cells.

    Warns
    -----
    FewFramesWarning
        The frames split with fewer than 10 frames.
    """
    grid = as_grid(grid)
    one_of(split, "split", SPLITS)
    one_of(method, "method", METHODS)
    tol = real_number(tol, "tol", minimum=1e-15, maximum=1.0, exclusive_maximum=True)
    chunk_atoms = whole_number(chunk_atoms, "chunk_atoms", minimum=1)
    threads = thread_count(threads)
    remove_drift = flag(remove_drift, "remove_drift")
    check_progress(progress)
    idx, sources = _frame_sources(model, frames, open_options)
    probe_obj = get_probe(probe, **probe_options)
    n = len(sources)
    cautions = list(probe_obj.cautions())
    unit = get_probe("unit")

    translations = None
    if split == "cells":
        src0 = sources[0]
        if src0.box is None or src0.cell is None:
            raise InvalidInputError("split='cells' needs a periodic model with a box and its parent cell "
                                    "(e.g. open_model(path, supercell=(n1, n2, n3)) or Model(..., cell=..., box=...))")
        translations = _cell_translations(np.asarray(src0.box), np.asarray(src0.cell))
        if len(translations) < 2:
            raise InvalidInputError("split='cells': the model's box holds one parent cell, so the average cell is "
                                    "the model itself; give the parent cell (cell=... or supercell=...)")
    elif n < FEW_FRAMES:
        text = (f"the Bragg/diffuse split over frames uses only {n} frame(s); its diffuse part has a relative "
                f"statistical error of about 1/sqrt({n})" +
                (" and is zero with one frame: use split='cells' for a single snapshot" if n == 1 else ""))
        warnings.warn(text, FewFramesWarning, stacklevel=2)
        cautions.append(text)

    check_commensurate(sources[0], grid)
    if (cluster is not None or checkpoint is not None) and method == "gridded":
        raise InvalidInputError("cluster and checkpointed runs use the exact sum; give method='exact' or 'auto'")
    from ._engine.distributed import connect

    sum_a = np.zeros(grid.shape, dtype=np.complex128)
    sum_i = np.zeros(grid.shape, dtype=np.float64)
    sum_f = np.zeros(grid.shape, dtype=np.complex128) if split == "cells" else None
    descriptions, drifts, methods = [], [], []
    per_frame = 2 if split == "cells" else 1
    bar = Progress(progress if progress is True else False, 0, desc=f"frame 1/{n}")
    callback = progress if callable(progress) and progress is not True else None
    with connect(cluster) as client, bar:
        for k, src in enumerate(sources):
            probe_obj.check_labels(src.species_labels())
            if src.n_atoms == 0:
                raise InvalidInputError(f"frame {idx[k]} has no atoms")
            shift = np.zeros(3)
            if remove_drift and k > 0 and src.n_atoms != sources[0].n_atoms:
                cautions.append(f"frame {idx[k]} holds {src.n_atoms} atoms, frame {idx[0]} {sources[0].n_atoms}: "
                                "its drift was not removed")
            elif remove_drift and k > 0:
                shift = _drift(sources[0], src, chunk_atoms)
                if np.any(shift):
                    src = _Shifted(src, shift)
            drifts.append(shift.tolist())
            g_t = _frame_grid(grid, src)
            bar.describe(f"frame {k + 1}/{n}")

            def inner(done, total, k=k):
                if bar.bar is not None:
                    if not bar.bar.total and total:
                        bar.bar.total = total * n * per_frame
                    bar.bar.n = (k * per_frame) * total + done
                    bar.bar.refresh()

            def run_opts(k, part, inner=inner):
                where = None if checkpoint is None else Path(checkpoint) / f"frame_{idx[k]}_{part}"
                return dict(method=method, tol=tol, threads=threads, progress=inner, chunk_atoms=chunk_atoms,
                            cluster=client, checkpoint=where, block_points=block_points)

            a, used = amplitudes(src, g_t, probe_obj, **run_opts(k, "atoms"))
            methods.append(used)
            sum_a += a
            sum_i += a.real * a.real + a.imag * a.imag
            if split == "cells":
                assert sum_f is not None and translations is not None  # both made for split="cells"
                f_bar, _ = amplitudes(_Folded(src, np.asarray(src.cell)), g_t, probe_obj, **run_opts(k, "folded"))
                sum_f += f_bar / len(translations)
            descriptions.append(src.describe())
            if callback is not None:
                callback(k + 1, n)

    total = sum_i / n
    mean_a = sum_a / n
    if split == "frames":
        bragg_amp = mean_a
        raw_bragg = mean_a.real ** 2 + mean_a.imag ** 2
        diffuse = (total - raw_bragg) * (n / (n - 1)) if n > 1 else np.zeros_like(total)
        bragg = total - diffuse
        formulas = {"total": "<|A|^2> over frames",
                    "bragg": "|<A>|^2 - D/n over frames (= total - diffuse); amplitude = <A>",
                    "diffuse": "D = n/(n-1) (<|A|^2> - |<A>|^2) over frames (unbiased)"}
    else:
        assert sum_f is not None and translations is not None  # both made for split="cells"
        lattice = Model(translations, "X", cell=sources[0].cell, box=sources[0].box)
        l_box, _ = amplitudes(lattice, grid, unit, method="exact", tol=tol, threads=threads, progress=False,
                              chunk_atoms=chunk_atoms)
        bragg_amp = (sum_f / n) * l_box
        bragg = bragg_amp.real ** 2 + bragg_amp.imag ** 2
        diffuse = total - 2.0 * (np.conj(bragg_amp) * mean_a).real + bragg
        scale = np.maximum(total, bragg)
        rounding = diffuse < 0
        if np.any(diffuse < -1e-9 * scale - 1e-300):  # pragma: no cover - would be a bug, not rounding
            raise InvalidInputError("internal: the diffuse part came out negative beyond rounding")
        diffuse[rounding] = 0.0
        on_lattice = _integer_hkl(grid, np.asarray(sources[0].cell))
        diffuse[on_lattice] = np.nan
        formulas = {"total": "<|A|^2> over frames",
                    "bragg": "|A_avg|^2, A_avg = F_avg(q) L_box(q): average parent cell times the lattice sum of "
                             f"the {len(translations)} cells in the box; amplitude = A_avg",
                    "diffuse": "<|A - A_avg|^2> (NaN at integer h, k, l of the parent cell, where one snapshot "
                               "cannot tell it)"}
    for text in probe_obj.cautions():
        warnings.warn(text, KinematicApproximationWarning, stacklevel=2)

    model_desc = dict(descriptions[0])
    model_desc["frame"] = idx[0] if len(idx) == 1 else None
    model_desc["frames"] = list(idx)
    for key in ("step", "time"):
        vals = [d.get(key) for d in descriptions]
        if all(v is not None for v in vals):
            model_desc[key + "s"] = vals
            model_desc.pop(key, None)
    base_meta = {
        "method": methods[0] if len(set(methods)) == 1 else methods,
        "tolerance": float(tol) if "gridded" in methods else 0.0,
        "probe": probe_obj.metadata(),
        "cautions": cautions,
        "model": model_desc,
        "grid": grid.describe(),
        "frames": list(idx),
        "n_frames_averaged": n,
        "split": split,
        "drift_removed": drifts if remove_drift else "not removed",
        "kernel_level": _core.kernel_level(),
    }
    if model_desc.get("file"):
        base_meta["input_file"] = model_desc["file"]

    def meta(kind):
        m = dict(base_meta)
        m["average"] = kind
        m["average_formula"] = formulas[kind]
        return m

    units = probe_obj.units
    total_p = Pattern(grid, intensity=total, metadata=meta("total"), units=units)
    bragg_p = Pattern(grid, amplitude=bragg_amp, intensity=bragg, metadata=meta("bragg"), units=units)
    diffuse_p = Pattern(grid, intensity=diffuse, metadata=meta("diffuse"), units=units)
    return FrameAverages(total=total_p, bragg=bragg_p, diffuse=diffuse_p, frames=list(idx), split=split,
                         cautions=cautions)


__all__ = ["average_frames", "FrameAverages", "FewFramesWarning", "save_parts", "SPLITS"]
