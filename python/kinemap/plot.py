"""Pictures of maps (matplotlib, Agg backend): 2-D maps, 1-D profiles, slices of volumes.

* 2-D maps (plane grids, hkl grids with two ranged axes, or a slice of a volume) are drawn
  with a log or linear colour scale and a labelled colour bar. Axes are in Å⁻¹ (true
  geometry: points are placed at their in-plane q coordinates, so skewed planes look skewed)
  or, for hkl grids, in reciprocal-lattice units (h, k, l as plotted numbers).
* 1-D grids (lines, one ranged hkl axis) are drawn as line profiles.

Files are written under a temporary name and renamed when complete.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._shared.output import atomic_write, check_output
from ._shared.validate import whole_number
from .errors import InvalidInputError
from .pattern import Pattern
from .qgrid import QGrid, RegularGrid

SCALES = ("log", "linear")
AXIS_UNITS = ("auto", "rlu", "inv-angstrom")
QUANTITIES = ("intensity", "amplitude-abs", "amplitude-real", "amplitude-imag", "phase")


def _plt():
    """pyplot, for figures made when the caller gives no axes (the user's backend)."""
    import matplotlib.pyplot as plt

    return plt


def new_figure(width: float, height: float, dpi: int = 100):
    """A figure drawn by the Agg renderer, independent of pyplot and its backend (files only)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save_figure(fig, path, dpi: int | None = None, *, overwrite: bool = True) -> Path:
    """Write `fig` as PNG under a temporary name, renamed when complete."""
    with atomic_write(path, overwrite=overwrite, what="picture") as tmp:
        fig.savefig(tmp, format="png", dpi=dpi if dpi is not None else fig.dpi)
    return Path(path)


def _values(pattern: Pattern, quantity: str) -> tuple[np.ndarray, str]:
    u = pattern.units
    sq = f"{u}²" if u not in ("1", "") else "arb. units"
    if quantity == "intensity":
        kind = pattern.metadata.get("average")
        names = {"total": "total ⟨|A|²⟩", "bragg": "Bragg |⟨A⟩|²", "diffuse": "diffuse ⟨|A|²⟩ − |⟨A⟩|²"}
        name = names.get(kind or "", "intensity |A|²")
        return pattern.intensity, f"{name} ({sq})"
    if pattern.amplitude is None:
        raise InvalidInputError(f"`quantity`={quantity!r} needs an amplitude, but this map has only an intensity "
                                "(frame-averaged total or diffuse map)")
    a = pattern.amplitude
    ua = u if u not in ("1", "") else "arb. units"
    return {
        "amplitude-abs": (np.abs(a), f"|A| ({ua})"),
        "amplitude-real": (a.real, f"Re A ({ua})"),
        "amplitude-imag": (a.imag, f"Im A ({ua})"),
        "phase": (np.angle(a), "phase of A (rad)"),
    }[quantity]


def _check(name, value, allowed):
    if value not in allowed:
        raise InvalidInputError(f"`{name}` must be one of {allowed}, got {value!r}")


#: Fraction of the positive values drawn below the lower end of an automatic log scale.
LOG_FLOOR_QUANTILE = 0.005
#: An automatic log scale never reaches below this fraction of the maximum: values there are
#: rounding noise of float64 sums (e.g. between the Bragg peaks of a perfect crystal), while
#: real diffuse scattering of even 10⁸ atoms lies above it.
LOG_FLOOR_RELATIVE = 1e-12


def _norm(values: np.ndarray, scale: str, vmin, vmax):
    """Colour limits from the data's own dynamic range: a log scale runs from the 0.5 %
    quantile of the positive values (but not below 1e-12 of the maximum, where float64
    rounding lives) to the maximum, so weak diffuse scattering beside strong Bragg peaks keeps
    its colours; a linear scale spans the finite values."""
    from matplotlib.colors import LogNorm, Normalize

    finite = values[np.isfinite(values)]
    if finite.size == 0:
        raise InvalidInputError("the map has no finite values to draw (all NaN or infinite)")
    if scale == "log":
        pos = finite[finite > 0]
        if pos.size == 0:
            raise InvalidInputError("a log scale needs positive values, but the map has none; use scale='linear'")
        hi = float(pos.max()) if vmax is None else float(vmax)
        lo = max(float(np.quantile(pos, LOG_FLOOR_QUANTILE)), LOG_FLOOR_RELATIVE * hi) if vmin is None \
            else float(vmin)
        if vmin is None and lo >= hi:
            lo = hi / 10.0
        if not (0 < lo < hi):
            raise InvalidInputError(f"log scale limits must satisfy 0 < vmin < vmax, got {lo}, {hi}")
        return LogNorm(vmin=lo, vmax=hi)
    lo = float(finite.min()) if vmin is None else float(vmin)
    hi = float(finite.max()) if vmax is None else float(vmax)
    if hi <= lo:
        hi = lo + 1.0
    return Normalize(vmin=lo, vmax=hi)


def _slice_2d(g: QGrid, slice_axis, slice_index) -> tuple[tuple[slice | int, ...], list[int], str]:
    """Return (values-selector, kept axes, description) for a 2-D view of a map on grid `g`."""
    nd = len(g.shape)
    if nd == 2:
        if slice_axis is not None:
            raise InvalidInputError("`slice_axis` applies to 3-D maps only; this map is 2-D")
        return (slice(None), slice(None)), [0, 1], ""
    if nd != 3:
        raise InvalidInputError(f"a 2-D picture needs a 2-D or 3-D map, this one has shape {g.shape}")
    if slice_axis is None:
        slice_axis = 2
    if isinstance(slice_axis, str):
        if slice_axis not in g.axis_names:
            raise InvalidInputError(f"`slice_axis` {slice_axis!r} is not an axis of this map ({g.axis_names})")
        slice_axis = g.axis_names.index(slice_axis)
    if not 0 <= int(slice_axis) < 3:
        raise InvalidInputError(f"`slice_axis` must be 0, 1 or 2 (or an axis name), got {slice_axis!r}")
    ax = int(slice_axis)
    n = g.shape[ax]
    idx = _middle(np.asarray(g.axis_values[ax])) if slice_index is None else int(slice_index)
    if idx < 0:
        idx += n
    if not 0 <= idx < n:
        raise InvalidInputError(f"`slice_index` {slice_index} is outside 0..{n - 1} along axis {g.axis_names[ax]!r}")
    sel: list[slice | int] = [slice(None)] * 3
    sel[ax] = idx
    keep = [i for i in range(3) if i != ax]
    val = float(g.axis_values[ax][idx])
    unit = "r.l.u." if g.axis_units[ax] == "r.l.u." else "Å⁻¹"
    desc = f"{g.axis_labels[ax]} = {val:.4g} {unit} (slice {idx} of {n})"
    return tuple(sel), keep, desc


def _middle(values: np.ndarray) -> int:
    """The default slice: the one through q = 0 (or h, k, l = 0) when the axis crosses it,
    otherwise the one nearest the middle of the axis."""
    if values.min() <= 0 <= values.max():
        return int(np.argmin(np.abs(values)))
    return int(np.argmin(np.abs(values - 0.5 * (values.min() + values.max()))))


def _display_dilation(shape, axis_pixels: float) -> int:
    """Width (grid points) of the maximum filter that keeps single-point peaks at least three
    screen pixels wide when a map has more points than the picture has pixels."""
    return max(1, int(np.ceil(3.0 * max(shape) / max(axis_pixels, 1.0))))


def _plane_coords(g: RegularGrid, keep) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """In-plane Cartesian coordinates (Å⁻¹) of the points of grid `g`, for true-geometry plots."""
    s0, s1 = g.steps[keep[0]], g.steps[keep[1]]
    n0, n1 = g.shape[keep[0]], g.shape[keep[1]]
    e1 = s0 / np.linalg.norm(s0) if np.linalg.norm(s0) > 0 else np.array([1.0, 0, 0])
    v = s1 - (s1 @ e1) * e1
    s1_len = float(np.linalg.norm(s1))
    e2 = v / np.linalg.norm(v) if np.linalg.norm(v) > 1e-15 * max(s1_len, 1e-300) else np.cross(e1, [0, 0, 1.0])
    i = np.arange(n0)[:, None]
    j = np.arange(n1)[None, :]
    x = i * (s0 @ e1) + j * (s1 @ e1)
    y = i * (s0 @ e2) + j * (s1 @ e2)
    # origin of the plane, written in the in-plane basis, so axes read as q components
    o = g.origin
    return x + o @ e1, y + o @ e2, e1, e2


def _fmt_vec(v) -> str:
    parts = []
    for x in v:
        r = round(float(x), 3)
        parts.append("0" if r == 0 else f"{r:g}")
    return "[" + " ".join(parts) + "]"


def plot_map(pattern: Pattern, ax=None, *, scale: str = "log", axis_units: str = "auto",
             quantity: str = "intensity", slice_axis=None, slice_index=None, cmap: str = "viridis",
             vmin=None, vmax=None, title: str | None = None):
    """Draw a 2-D map (or a slice of a volume) with a colour bar.

    Parameters
    ----------
    pattern : Pattern
        A map on a plane, a 2-D hkl grid or a volume.
    ax : matplotlib Axes, optional
        Where to draw (a new figure when None).
    scale : {"log", "linear"}
        Colour scale; log shows values down to 1e-8 of the maximum (non-positive values
        blank).
    axis_units : {"auto", "rlu", "inv-angstrom"}
        Reciprocal-lattice units (hkl grids only; "auto" picks them there) or Å⁻¹ with the
        true in-plane geometry.
    quantity : str
        "intensity" or a view of the amplitude ("amplitude-abs", "amplitude-real",
        "amplitude-imag", "phase").
    slice_axis, slice_index : int or str, int
        For a volume: which axis to cut (index or name, default the last) and where
        (default the middle).
    cmap, vmin, vmax, title
        Colour map, colour limits, title.

    Returns
    -------
    matplotlib.figure.Figure
    """
    _check("scale", scale, SCALES)
    _check("axis_units", axis_units, AXIS_UNITS)
    _check("quantity", quantity, QUANTITIES)
    g = pattern.grid
    if not isinstance(g, RegularGrid):
        raise InvalidInputError("maps on arbitrary q-points have no 2-D layout to draw; use a plane, hkl or volume grid")
    sel, keep, cut = _slice_2d(g, slice_axis, slice_index)
    values, label = _values(pattern, quantity)
    z = np.asarray(values[sel], dtype=np.float64)
    if ax is None:
        fig, ax = _plt().subplots(figsize=(6.4, 5.2), layout="constrained")
    else:
        fig = ax.figure
    norm = _norm(z, scale if quantity != "phase" else "linear", vmin, vmax)
    width = _display_dilation(z.shape, 0.75 * fig.get_figwidth() * fig.dpi)
    note = ""
    if width > 1 and quantity != "phase" and np.isfinite(z).any():
        from scipy.ndimage import maximum_filter

        # Display only: narrow peaks would vanish when the picture has fewer pixels than the
        # map has points (the data are unchanged).
        filled = np.where(np.isfinite(z), z, -np.inf)
        z = np.where(np.isfinite(z), maximum_filter(filled, size=width, mode="nearest"), z)
        note = f"peaks widened to {width} points for display"
    if scale == "log" and quantity != "phase":
        z = np.where(z > 0, z, np.nan)
    use_rlu = axis_units == "rlu" or (axis_units == "auto" and g.kind == "hkl")
    if use_rlu:
        if g.kind != "hkl":
            raise InvalidInputError("reciprocal-lattice units need an hkl grid (QGrid.hkl); use axis_units='inv-angstrom'")
        xs, ys = g.axis_values[keep[0]], g.axis_values[keep[1]]
        mesh = ax.pcolormesh(xs, ys, z.T, norm=norm, cmap=cmap, shading="nearest")
        ax.set_xlabel(f"{g.axis_labels[keep[0]]} (r.l.u.)")
        ax.set_ylabel(f"{g.axis_labels[keep[1]]} (r.l.u.)")
        ax.set_aspect("auto")
    else:
        x, y, e1, e2 = _plane_coords(g, keep)
        mesh = ax.pcolormesh(x, y, z, norm=norm, cmap=cmap, shading="nearest")
        ax.set_xlabel(f"q along {_fmt_vec(e1)} (Å⁻¹)")
        ax.set_ylabel(f"q along {_fmt_vec(e2)} (Å⁻¹)")
        ax.set_aspect("equal")
    if note:
        ax.text(0.99, 0.01, note, transform=ax.transAxes, ha="right", va="bottom", fontsize=7, color="0.6")
    cb = fig.colorbar(mesh, ax=ax)
    cb.set_label(label)
    if title is None:
        title = _default_title(pattern)
    if cut:
        title = f"{title}\n{cut}" if title else cut
    if title:
        ax.set_title(title, fontsize=10)
    return fig


_PARTS = {"total": "total", "bragg": "Bragg part", "diffuse": "diffuse part"}


def _grid_phrase(g: QGrid) -> str:
    """"(h k 0) plane", "[h 0 0] line", "volume", "plane through q0 = [..] Å⁻¹" ..."""
    if g.kind == "hkl" and isinstance(g, RegularGrid):
        ranged = [lab for lab, n in zip(g.axis_labels, g.shape)]
        fixed = g.hkl_origin
        if fixed is not None and all(len(lab) == 1 for lab in ranged):
            comps = [lab if lab in ranged else f"{fixed[i]:g}" for i, lab in enumerate("hkl")]
            kind = {1: "line", 2: "plane", 3: "volume"}.get(len(ranged), "point")
            return f"({' '.join(comps)}) {kind}"
        return f"{' × '.join(ranged)} (r.l.u.)"
    if isinstance(g, RegularGrid):
        return f"{g.kind} from q₀ = {_fmt_vec(g.origin)} Å⁻¹"
    return f"{g.size} q-points"


def _default_title(pattern: Pattern) -> str:
    """What is shown: file, probe, grid, frames and part."""
    md = pattern.metadata
    first = []
    model = md.get("model") or {}
    if isinstance(model, dict) and model.get("file"):
        first.append(Path(str(model["file"])).name)
    probe = md.get("probe")
    if isinstance(probe, dict) and probe.get("probe"):
        first.append(str(probe["probe"]))
    first.append(_grid_phrase(pattern.grid))
    second = []
    part = md.get("average")
    if part in _PARTS:
        split = md.get("split", "frames")
        second.append(f"{_PARTS[part]} (split over {split})" if part != "total" else "total ⟨|A|²⟩")
    frames = md.get("frames")
    if isinstance(frames, list) and frames:
        second.append(f"{len(frames)} frame{'s' if len(frames) != 1 else ''}")
    elif isinstance(model, dict) and model.get("frame") is not None:
        second.append(f"frame {model['frame']}")
    return ", ".join(first) + ("\n" + ", ".join(second) if second else "")


def plot_profile(pattern: Pattern, ax=None, *, scale: str = "log", axis_units: str = "auto",
                 quantity: str = "intensity", title: str | None = None, label: str | None = None):
    """Draw a 1-D map (line grid or one ranged hkl axis) as a profile.

    Parameters
    ----------
    pattern : Pattern
        A map with one axis.
    ax : matplotlib Axes, optional
    scale : {"log", "linear"}
        Scale of the value axis.
    axis_units : {"auto", "rlu", "inv-angstrom"}
        The abscissa: the hkl coordinate (r.l.u.) or the distance along the line in Å⁻¹.
    quantity, title, label
        What to draw, title, legend label.

    Returns
    -------
    matplotlib.figure.Figure
    """
    _check("scale", scale, SCALES)
    _check("axis_units", axis_units, AXIS_UNITS)
    _check("quantity", quantity, QUANTITIES)
    g = pattern.grid
    if len(g.shape) != 1 or not isinstance(g, RegularGrid):
        raise InvalidInputError(f"a profile needs a 1-D line or hkl grid; this map has shape {g.shape} ({g.kind})")
    values, vlabel = _values(pattern, quantity)
    if ax is None:
        fig, ax = _plt().subplots(figsize=(6.4, 4.0), layout="constrained")
    else:
        fig = ax.figure
    use_rlu = axis_units == "rlu" or (axis_units == "auto" and g.kind == "hkl")
    if use_rlu:
        if g.kind != "hkl":
            raise InvalidInputError("reciprocal-lattice units need an hkl grid; use axis_units='inv-angstrom'")
        x = g.axis_values[0]
        ax.set_xlabel(f"{g.axis_labels[0]} (r.l.u.)")
    else:
        st = g.steps[0]
        length = float(np.linalg.norm(st))
        direction = st / length if length > 0 else np.zeros(3)
        x = float(g.origin @ direction) + np.arange(g.shape[0]) * length
        ax.set_xlabel(f"q along {_fmt_vec(direction)} (Å⁻¹)")
    y = np.asarray(values, dtype=np.float64)
    if scale == "log" and quantity != "phase":
        if not np.any(y > 0):
            raise InvalidInputError("a log scale needs positive values, but the profile has none; use scale='linear'")
        y = np.where(y > 0, y, np.nan)
        ax.set_yscale("log")
    ax.plot(x, y, lw=1.2, label=label)
    ax.set_ylabel(vlabel)
    if label:
        ax.legend()
    ax.set_title(_default_title(pattern) if title is None else title, fontsize=10)
    ax.grid(alpha=0.3)
    return fig


def plot_slice(pattern: Pattern, slice_axis=2, slice_index=None, ax=None, **options):
    """Draw one slice of a 3-D map (see :func:`plot_map`); `slice_axis` is an index or name."""
    if len(pattern.grid.shape) != 3:
        raise InvalidInputError(f"`plot_slice` needs a 3-D map, this one has shape {pattern.grid.shape}")
    return plot_map(pattern, ax, slice_axis=slice_axis, slice_index=slice_index, **options)


def render(pattern: Pattern, path, *, dpi: int = 100, size=(6.4, 5.2), overwrite: bool = False, **options) -> Path:
    """Draw `pattern` (a profile for 1-D maps, a map for 2-D, a slice for 3-D) into a PNG.

    Parameters
    ----------
    pattern : Pattern
    path : str or path-like
        Output PNG (written under a temporary name and renamed when complete).
    dpi : int
        Dots per inch; the image is ``size × dpi`` pixels.
    size : (float, float)
        Figure width and height in inches.
    **options
        Passed to :func:`plot_map` or :func:`plot_profile`.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InvalidInputError
        Bad options, or a map that cannot be drawn (arbitrary q-points, no positive values on
        a log scale).
    OSError
        An unwritable output path.
    """
    dpi = whole_number(dpi, "dpi", minimum=10, maximum=1200)
    try:
        w, h = (float(s) for s in size)
    except (TypeError, ValueError):
        raise InvalidInputError(f"`size` must be (width, height) in inches, got {size!r}") from None
    if not (0.5 <= w <= 50 and 0.5 <= h <= 50):
        raise InvalidInputError(f"`size` must be between 0.5 and 50 inches each way, got {size!r}")
    check_output(path, overwrite=overwrite, what="picture")  # fail early on an unwritable path
    fig = new_figure(w, h, dpi)
    ax = fig.add_subplot()
    if len(pattern.grid.shape) == 1:
        for key in ("slice_axis", "slice_index", "cmap", "vmin", "vmax"):
            options.pop(key, None)
        plot_profile(pattern, ax, **options)
    else:
        plot_map(pattern, ax, **options)
    final = save_figure(fig, path, dpi, overwrite=overwrite)
    return final


__all__ = ["plot_map", "plot_profile", "plot_slice", "render", "new_figure", "save_figure", "SCALES", "AXIS_UNITS", "QUANTITIES"]
