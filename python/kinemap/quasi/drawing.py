"""Pictures of indexed peaks: :func:`plot_indexed` (also ``IndexingResult.plot``).

Matplotlib is imported when a picture is drawn; the file is written under a temporary name
and renamed when complete (:func:`kinemap._shared.output.atomic_write`).
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .._shared.output import atomic_write
from .._shared.validate import file_name, flag, whole_number
from ..errors import InvalidInputError
from ..pattern import Pattern

if TYPE_CHECKING:  # pragma: no cover
    from .index_result import IndexingResult


def _relative(values: np.ndarray) -> np.ndarray:
    top = float(np.max(values)) if values.size else 0.0
    return values / top if top > 0 else np.zeros_like(values, dtype=np.float64)


def _draw_line(ax, result: IndexingResult, rel: np.ndarray, pattern: Pattern | None, annotate: int,
               log: bool) -> None:
    """A 1-D picture: the map (grey), the peaks' relative intensities and their indices."""
    if pattern is not None:
        qq = pattern.grid.q_vectors()[:, 0]
        y = _relative(pattern.intensity.reshape(-1))
        ax.plot(qq, np.log10(np.maximum(y, 1e-12)) if log else y, lw=0.6, color="0.5")
    x = result.q_obs[:, 0]
    yv = np.log10(np.maximum(rel, 1e-12)) if log else rel
    ax.plot(x[result.indexed], yv[result.indexed], "o", ms=4, color="tab:blue", label="indexed")
    ax.plot(x[~result.indexed], yv[~result.indexed], "x", ms=5, color="tab:red", label="unindexed")
    ax.set_xlabel("q (1/Å)")
    ax.set_ylabel("log10 I/I_max" if log else "I/I_max")
    shown = 0
    for i in np.argsort(-rel):
        if shown >= annotate:
            break
        if result.indexed[i]:
            ax.annotate("(" + ",".join(str(int(v)) for v in result.indices[i]) + ")", (x[i], yv[i]),
                        fontsize=6, rotation=60, xytext=(0, 4), textcoords="offset points")
            shown += 1


def _draw_plane(ax, result: IndexingResult, rel: np.ndarray, pattern: Pattern | None, annotate: int,
                log: bool) -> None:
    """A 2-D picture in the (q_x, q_y) plane: the map (grey), circles sized by intensity, indices."""
    if pattern is not None and pattern.grid.kind in ("plane", "hkl") and pattern.intensity.ndim == 2:
        qv = pattern.grid.q_vectors().reshape(pattern.intensity.shape + (3,))
        img = _relative(pattern.intensity)
        img = np.log10(np.maximum(img, 1e-8)) if log else img
        ax.pcolormesh(qv[..., 0], qv[..., 1], img, shading="auto", cmap="Greys")
    x, y = result.q_obs[:, 0], result.q_obs[:, 1]
    size = 4 + 60 * np.sqrt(rel)
    ax.scatter(x[result.indexed], y[result.indexed], s=size[result.indexed], facecolors="none",
               edgecolors="tab:blue", label="indexed")
    ax.scatter(x[~result.indexed], y[~result.indexed], s=20, marker="x", color="tab:red", label="unindexed")
    shown = 0
    for i in np.argsort(-rel):
        if shown >= annotate:
            break
        if result.indexed[i] and np.linalg.norm(result.q_obs[i]) > 0:
            ax.annotate("".join(f"{int(v):d} " for v in result.indices[i]).strip(), (x[i], y[i]),
                        fontsize=5, xytext=(3, 3), textcoords="offset points", color="tab:blue")
            shown += 1
    ax.set_aspect("equal")
    ax.set_xlabel("q_x (1/Å)")
    ax.set_ylabel("q_y (1/Å)")


def plot_indexed(result: IndexingResult, path, *, pattern: Pattern | None = None, annotate: int = 30,
                 log: bool = True, overwrite: bool = False) -> Path:
    """Write a PNG of the indexed peaks with their indices.

    Parameters
    ----------
    result : IndexingResult
        From :func:`kinemap.quasi.index_peaks`.
    path : str or path-like
        Output file; must end in ``.png``.
    pattern : kinemap.Pattern, optional
        A line map (1-D schemes) or a plane/hkl map (2-D, 3-D schemes) drawn underneath.
    annotate : int
        Label the strongest this many indexed peaks.
    log : bool
        Logarithmic intensity scale.
    overwrite : bool
        Replace an existing file (otherwise it is kept and an error raised).

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    InvalidInputError
        For a path not ending in .png, an existing file without `overwrite`, or bad options.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    path = Path(file_name(path))
    if path.suffix.lower() != ".png":
        raise InvalidInputError(f"`path` must end in .png, got {str(path)!r}")
    if pattern is not None and not isinstance(pattern, Pattern):
        raise InvalidInputError(f"`pattern` must be a kinemap.Pattern, got {type(pattern).__name__}")
    annotate = whole_number(annotate, "annotate", minimum=0)
    log = flag(log, "log")
    d = result.scheme.dim
    fig = Figure(figsize=(7, 6) if d >= 2 else (9, 4))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    inten = result.intensity_obs
    rel = _relative(inten) if np.isfinite(inten).all() and len(inten) and inten.max() > 0 else np.ones(len(result))
    (_draw_line if d == 1 else _draw_plane)(ax, result, rel, pattern, annotate, log)
    ok, why = result.verdict()
    ax.set_title(f"{result.scheme.name}: {result.fraction_indexed:.0%} indexed, "
                 f"scale {result.scale:.4f}\n{'quasiperiodic' if ok else 'not quasiperiodic'}: {why}", fontsize=8)
    ax.legend(fontsize=7, loc="best")
    fig.tight_layout()
    with atomic_write(path, overwrite=overwrite, what="picture") as tmp:
        fig.savefig(tmp, dpi=150, format="png")
    return path


__all__ = ["plot_indexed"]
