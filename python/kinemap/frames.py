"""Averages over the frames of a trajectory: total, Bragg and diffuse scattering.

For frames t = 1 ... F with amplitudes A_t(q) (each computed by :func:`kinemap.scatter`):

    total    ⟨|A|²⟩  = (1/F) Σ_t |A_t(q)|²
    Bragg    |⟨A⟩|²  = |(1/F) Σ_t A_t(q)|²
    diffuse  ⟨|A|²⟩ − |⟨A⟩|²   (≥ 0 up to rounding)

The Bragg part is the scattering of the average structure; the diffuse part is what the
fluctuations about it add. For independent Gaussian displacements with mean-square ⟨u_q²⟩
along q, the Bragg part is damped by exp(−q²⟨u_q²⟩) and the diffuse part per atom tends to
f²(1 − exp(−q²⟨u_q²⟩)). With a finite number of frames the diffuse estimate is biased low by
the factor (1 − 1/F) (as a sample variance with divisor F).
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InvalidInputError
from ._shared.output import check_output
from .pattern import Pattern, save_pattern
from .probes import get_probe
from .qgrid import QGrid
from .scatter import DEFAULT_CHUNK_ATOMS, KinematicApproximationWarning, scatter


@dataclass
class FrameAverages:
    """Result of :func:`average_frames`.

    Attributes
    ----------
    total : Pattern
        ⟨|A|²⟩ (intensity only).
    bragg : Pattern
        |⟨A⟩|², with ``amplitude`` = ⟨A⟩.
    diffuse : Pattern
        ⟨|A|²⟩ − |⟨A⟩|² (intensity only).
    frames : list of int
        Frame indices used (also in every pattern's ``metadata["frames"]``).
    """

    total: Pattern
    bragg: Pattern
    diffuse: Pattern
    frames: list

    def parts(self) -> dict[str, Pattern]:
        """The three patterns by name: ``{"total": ..., "bragg": ..., "diffuse": ...}``."""
        return {"total": self.total, "bragg": self.bragg, "diffuse": self.diffuse}

    def save(self, prefix, extra: dict | None = None) -> dict[str, Path]:
        """Write ``<prefix>_total.h5``, ``<prefix>_bragg.h5`` and ``<prefix>_diffuse.h5``.

        The three files appear together: they are written into a temporary folder beside
        them and renamed only when all three are complete.
        """
        return save_parts(self.parts(), prefix, extra=extra)


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


def _frame_sources(model, frames, open_options):
    """(list of frame labels, list of sources/models) from a path, a source or a sequence."""
    from .io import FileSource, open_model, select_frames
    from .model import Model

    if isinstance(model, (str, os.PathLike)):
        base = open_model(model, **(open_options or {}))
    elif isinstance(model, FileSource):
        if open_options:
            raise InvalidInputError("`open_options` apply when `model` is a file path")
        base = model
    elif isinstance(model, Model):
        if frames is not None and frames not in ([0], 0):
            raise InvalidInputError("a single Model has one frame; give a list of models or a trajectory file")
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
        idx = select_frames(frames, len(items), "the list of models")
        return idx, [items[i] for i in idx]
    idx = select_frames(frames, base.n_frames, str(base.path))
    return idx, [base if i == base.frame else base.at_frame(i) for i in idx]


def average_frames(model, grid: QGrid, frames=None, probe="xray", method: str = "auto", tol: float = 1e-6,
                   threads: int | None = None, progress=False, chunk_atoms: int = DEFAULT_CHUNK_ATOMS,
                   open_options: dict | None = None, **probe_options) -> FrameAverages:
    """Total, Bragg and diffuse scattering averaged over the frames of a trajectory.

    Parameters
    ----------
    model : str, path-like, atom source or sequence of Model
        A trajectory file (opened with :func:`kinemap.open_model`), a source from it (its
        other frames are reached with ``at_frame``), or in-memory frames.
    grid : QGrid
        Where to evaluate (q in Å⁻¹).
    frames : selection, optional
        Frames to use: None (all), an int, a slice, a list of ints, or text such as
        ``"0:50:5"`` (see :func:`kinemap.io.select_frames`).
    probe, method, tol, threads, chunk_atoms, **probe_options
        As in :func:`kinemap.scatter`; the same for every frame.
    progress : bool or callable
        True shows one progress bar over all frames (atom–q pairs, with the frame count in
        its label); a callable receives ``(frames_done, n_frames)`` after each frame.
    open_options : dict, optional
        Keyword arguments for :func:`kinemap.open_model` when `model` is a path
        (``species_map``, ``group``, ``format``, ...).

    Returns
    -------
    FrameAverages
        ``total`` ⟨|A|²⟩, ``bragg`` |⟨A⟩|² (amplitude ⟨A⟩), ``diffuse`` = total − Bragg, each
        a :class:`Pattern` whose metadata lists the frames used.

    Raises
    ------
    InvalidInputError
        Bad selections or arguments (as in :func:`kinemap.scatter`).
    ModelFileError
        Unreadable frames (naming file, dataset, frame).

    Notes
    -----
    ⟨|A|²⟩ = (1/F) Σ_t |A_t|², |⟨A⟩|² = |(1/F) Σ_t A_t|², A_t(q) = Σ_j o_j f_j T_j exp(+i q·r_j(t)),
    units of the probe squared. The probe's cautions are issued once as
    :class:`kinemap.KinematicApproximationWarning`.
    """
    if not isinstance(grid, QGrid):
        raise InvalidInputError(f"`grid` must be a kinemap.QGrid, got {type(grid).__name__}")
    idx, sources = _frame_sources(model, frames, open_options)
    probe_obj = get_probe(probe, **probe_options)
    n = len(sources)
    sum_a = np.zeros(grid.shape, dtype=np.complex128)
    sum_i = np.zeros(grid.shape, dtype=np.float64)
    bar = None
    callback = None
    if progress is True:
        from tqdm.auto import tqdm

        bar = tqdm(total=None, unit="pair", unit_scale=True, desc=f"frame 1/{n}")
    elif callable(progress):
        callback = progress
    elif progress not in (False, None):
        raise InvalidInputError(f"`progress` must be True, False or a callable(done, total), got {progress!r}")
    first_meta = None
    descriptions = []
    try:
        for k, src in enumerate(sources):
            inner = False
            if bar is not None:
                bar.set_description(f"frame {k + 1}/{n}")

                def inner(done, total, k=k):
                    if bar.total is None and total:
                        bar.total = total * n
                    bar.n = k * total + done
                    bar.refresh()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", KinematicApproximationWarning)
                pat = scatter(src, grid, probe=probe_obj, method=method, tol=tol, threads=threads,
                              progress=inner, chunk_atoms=chunk_atoms)
            a = pat.amplitude
            sum_a += a
            sum_i += a.real * a.real + a.imag * a.imag
            if first_meta is None:
                first_meta = pat.metadata
            descriptions.append(pat.metadata.get("model", {}))
            if callback is not None:
                callback(k + 1, n)
    finally:
        if bar is not None:
            bar.close()
    mean_a = sum_a / n
    total = sum_i / n
    bragg = mean_a.real * mean_a.real + mean_a.imag * mean_a.imag
    diffuse = total - bragg
    model_desc = dict(descriptions[0]) if descriptions else {}
    model_desc["frame"] = idx[0] if len(idx) == 1 else None
    model_desc["frames"] = list(idx)
    for key in ("step", "time"):
        vals = [d.get(key) for d in descriptions]
        if all(v is not None for v in vals):
            model_desc[key + "s"] = vals
            model_desc.pop(key, None)
    base_meta = dict(first_meta)
    base_meta["model"] = model_desc
    base_meta["frames"] = list(idx)
    base_meta["n_frames_averaged"] = n
    if model_desc.get("file"):
        base_meta["input_file"] = model_desc["file"]
    cautions = list(probe_obj.cautions())
    for text in cautions:
        warnings.warn(text, KinematicApproximationWarning, stacklevel=2)

    def meta(kind, formula):
        m = dict(base_meta)
        m["average"] = kind
        m["average_formula"] = formula
        return m

    units = first_meta.get("probe", {}).get("units", probe_obj.units) if first_meta else probe_obj.units
    total_p = Pattern(grid, intensity=total, metadata=meta("total", "<|A|^2> over frames"), units=units)
    bragg_p = Pattern(grid, amplitude=mean_a, metadata=meta("bragg", "|<A>|^2 over frames; amplitude = <A>"), units=units)
    diffuse_p = Pattern(grid, intensity=diffuse, metadata=meta("diffuse", "<|A|^2> - |<A>|^2 over frames"), units=units)
    return FrameAverages(total=total_p, bragg=bragg_p, diffuse=diffuse_p, frames=list(idx))


__all__ = ["average_frames", "FrameAverages", "save_parts"]
