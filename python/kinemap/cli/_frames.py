"""``kinemap frames``: a model's expected counts on detector frames, from a geometry file.

The geometry file is TOML with keys of kinemap's own (units in the names)::

    [detector]
    shape = [256, 256]                  # rows, columns
    pixel_size_mm = 0.172               # or [rows, columns]
    distance_mm = 150.0                 # sample to where the direct beam meets the detector
    beam_center_px = [128.0, 128.0]     # row, column (may lie off the detector)
    wavelength_angstrom = 0.7
    tilt_deg = [0.0, 0.0, 0.0]          # optional: about lab x, then y, then z
    polarization_fraction = 0.5         # optional: 0.5 unpolarised, ~0.98 synchrotron
    polarization_direction = [1, 0, 0]  # optional, lab vector perpendicular to the beam
    mask_file = "mask.npy"              # optional: (rows, columns), nonzero = leave out

    [sample]                            # optional
    orientation = [[1, 0, 0], [0, 1, 0], [0, 0, 1]]   # sample -> lab; or:
    ub_matrix_per_angstrom = [[...]]    # Busing-Levy UB (no 2 pi), with the model's cell
    cell_angstrom = [a, b, c, alpha, beta, gamma]      # for hkl labels when the model has none

    [rotation]                          # optional: without it, one still frame
    axis = [0, 1, 0]                    # lab vector, right-handed
    start_deg = 0.0                     # centre of the first frame
    step_deg = 0.5
    frames = 20
    width_deg = 0.5                     # optional, default step_deg

    [computation]                       # optional
    pixel_subsamples = 2
    angle_subsamples = 3
    solid_angle = true
    polarization = true

Lab frame: z along the beam, x along increasing column, y along increasing row; angles in
degrees. Registered in :mod:`kinemap.cli` through :func:`add_parsers` and :func:`run`.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np

from ._args import EPILOG_CODES as _EPILOG_CODES
from ._args import EXIT_OK, UsageError
from ._args import add_common as _add_common
from ._args import add_model_options as _add_model_options
from ._args import open_options as _open_options
from ._args import print_cautions as _print_cautions
from ._args import probe_options as _probe_options
from ._args import say as _say
from ._args import vector as _vector

_KEYS = {
    "detector": {"shape", "pixel_size_mm", "distance_mm", "beam_center_px", "wavelength_angstrom", "tilt_deg",
                 "tilt_matrix", "polarization_fraction", "polarization_direction", "mask_file"},
    "sample": {"orientation", "ub_matrix_per_angstrom", "cell_angstrom"},
    "rotation": {"axis", "start_deg", "step_deg", "frames", "width_deg"},
    "computation": {"pixel_subsamples", "angle_subsamples", "solid_angle", "polarization"},
}
_REQUIRED = ("shape", "pixel_size_mm", "distance_mm", "beam_center_px", "wavelength_angstrom")


def _toml_load(path: Path) -> dict:
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # Python 3.10
        import tomli as tomllib
    from ..errors import ModelFileError

    if not path.exists():
        raise FileNotFoundError(f"no such geometry file: {str(path)!r}")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise ModelFileError(f"geometry file {str(path)!r} is not valid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise ModelFileError(f"geometry file {str(path)!r} is not UTF-8 text") from None


def load_geometry(path) -> dict:
    """Read a geometry file (module notes) into Detector, orientation and rotation settings.

    Returns
    -------
    dict
        ``detector`` (Detector), ``orientation`` (3×3 or None), ``ub`` (3×3 or None),
        ``cell`` (3×3 or None), ``rotation`` (dict axis, angles, width, or None),
        ``computation`` (keyword arguments of :func:`kinemap.expected_counts`), ``text``.

    Raises
    ------
    FileNotFoundError, ModelFileError
        A missing file, or one that is not TOML.
    InvalidInputError
        Unknown sections or keys, missing keys, or values the geometry refuses; the message
        names the file, the section and the key.
    """
    from .._shared.validate import flag, whole_number
    from ..errors import InvalidInputError
    from ..geometry import Detector
    from ..geometry.orientation import unit_vector
    from ..model import cell_from_parameters

    p = Path(path)
    raw = _toml_load(p)
    where = f"geometry file {str(p)!r}"
    for sec, body in raw.items():
        if sec not in _KEYS:
            raise InvalidInputError(f"{where}: unknown section [{sec}] (known: {', '.join(sorted(_KEYS))})")
        if not isinstance(body, dict):
            raise InvalidInputError(f"{where}: [{sec}] must be a table of keys")
        unknown = sorted(set(body) - _KEYS[sec])
        if unknown:
            raise InvalidInputError(f"{where}: unknown key(s) {unknown} in [{sec}] (known: {sorted(_KEYS[sec])})")
    d = raw.get("detector")
    if d is None:
        raise InvalidInputError(f"{where}: the [detector] section is missing")
    missing = [k for k in _REQUIRED if k not in d]
    if missing:
        raise InvalidInputError(f"{where}: [detector] lacks {missing}")

    def arg(sec: str, key: str, fn, *a, **kw):
        try:
            return fn(*a, **kw)
        except InvalidInputError as exc:
            raise InvalidInputError(f"{where}: [{sec}] {key}: {exc}") from None

    if "tilt_deg" in d and "tilt_matrix" in d:
        raise InvalidInputError(f"{where}: [detector] give tilt_deg or tilt_matrix, not both")
    mask = None
    if "mask_file" in d:
        mpath = Path(str(d["mask_file"]))
        mpath = mpath if mpath.is_absolute() else p.parent / mpath
        if not mpath.exists():
            raise FileNotFoundError(f"{where}: [detector] mask_file {str(mpath)!r} does not exist")
        try:
            mask = np.asarray(np.load(mpath, allow_pickle=False)) != 0
        except (ValueError, OSError) as exc:
            from ..errors import ModelFileError

            raise ModelFileError(f"{where}: [detector] mask_file {str(mpath)!r} is not a readable .npy array: "
                                 f"{exc}") from None
    det = arg("detector", "(geometry)", Detector, shape=d["shape"], pixel_size=d["pixel_size_mm"],
              distance=d["distance_mm"], beam_center=d["beam_center_px"], wavelength=d["wavelength_angstrom"],
              tilt=d.get("tilt_deg", d.get("tilt_matrix")), polarization_fraction=d.get("polarization_fraction", 0.5),
              polarization_direction=d.get("polarization_direction", (1.0, 0.0, 0.0)), mask=mask)
    s = raw.get("sample", {})
    if "orientation" in s and "ub_matrix_per_angstrom" in s:
        raise InvalidInputError(f"{where}: [sample] give orientation or ub_matrix_per_angstrom, not both")
    cell = None
    if "cell_angstrom" in s:
        vals = s["cell_angstrom"]
        if not (isinstance(vals, list) and len(vals) == 6):
            raise InvalidInputError(f"{where}: [sample] cell_angstrom must be [a, b, c, alpha, beta, gamma]")
        cell = arg("sample", "cell_angstrom", cell_from_parameters, *vals)
    rot = None
    if "rotation" in raw:
        r = raw["rotation"]
        miss = [k for k in ("axis", "start_deg", "step_deg", "frames") if k not in r]
        if miss:
            raise InvalidInputError(f"{where}: [rotation] lacks {miss}")
        n = r["frames"]
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise InvalidInputError(f"{where}: [rotation] frames must be a whole number >= 1, got {n!r}")
        try:
            start, step = float(r["start_deg"]), float(r["step_deg"])
            width = float(r.get("width_deg", step))
        except (TypeError, ValueError):
            raise InvalidInputError(f"{where}: [rotation] start_deg, step_deg and width_deg must be numbers") from None
        axis = arg("rotation", "axis", unit_vector, r["axis"], "axis")
        rot = {"axis": axis, "angles": start + step * np.arange(n), "width": abs(width)}
    comp = {}
    for key, val in raw.get("computation", {}).items():
        check = flag if key in ("solid_angle", "polarization") else whole_number
        comp[key] = arg("computation", key, check, val, key, **({} if check is flag else {"minimum": 1}))
    return {"detector": det, "orientation": s.get("orientation"), "ub": s.get("ub_matrix_per_angstrom"),
            "cell": cell, "rotation": rot, "computation": comp, "text": p.read_text(encoding="utf-8")}


def _orientation(geo: dict, cell):
    from ..geometry import check_rotation, orientation_from_ub

    if geo["ub"] is not None:
        if cell is None:
            raise UsageError("[sample] ub_matrix_per_angstrom needs a cell: the model file has none, so add "
                             "cell_angstrom to [sample]")
        return orientation_from_ub(geo["ub"], cell)
    if geo["orientation"] is not None:
        return check_rotation(geo["orientation"], "[sample] orientation")
    return np.eye(3)


def _reflections(args, geo: dict, cell, orientation) -> tuple[list, list, list]:
    """Locate --reflection requests: lines to print, cautions, and marks (frame, row, col, label)."""
    from ..geometry import crossing_angles, rotation_matrix

    det = geo["detector"]
    lines: list[str] = []
    cautions: list[str] = []
    marks: list[tuple[int, float, float, str]] = []
    if not args.reflection:
        return lines, cautions, marks
    if cell is None:
        raise UsageError("--reflection needs a cell: the model file has none; add cell_angstrom to [sample]")
    recip = np.linalg.inv(cell).T
    q_lo, q_hi = det.q_range()
    rot = geo["rotation"]
    for text in args.reflection:
        hkl = _vector(text, "--reflection")
        label = "(" + " ".join(f"{x:g}" for x in hkl) + ")"
        q = 2.0 * np.pi * hkl @ recip
        qn = float(np.linalg.norm(q))
        if qn > 2.0 * det.k:
            cautions.append(f"reflection {label}: |q| = {qn:.4g} 1/angstrom lies beyond 4 pi/lambda = "
                            f"{2 * det.k:.4g}; no geometry records it at this wavelength")
            continue
        if qn > q_hi or qn < q_lo:
            cautions.append(f"reflection {label}: |q| = {qn:.4g} 1/angstrom lies beyond the detector's reach "
                            f"({q_lo:.4g} to {q_hi:.4g} 1/angstrom) for this geometry")
            continue
        if rot is None:
            rr, cc = det.pixel_of(q, orientation=orientation, tol=1e-3)
            if np.isnan(rr) or not det.on_detector(rr, cc):
                lines.append(f"reflection {label}: not in diffraction condition on this still frame")
            else:
                lines.append(f"reflection {label}: pixel (row {float(rr):.2f}, column {float(cc):.2f})")
                marks.append((0, float(rr), float(cc), label))
            continue
        phis, width = rot["angles"], rot["width"]
        found = False
        for phi in crossing_angles(q, wavelength=det.wavelength, axis=rot["axis"], orientation=orientation):
            if not np.isfinite(phi):
                continue
            for shift in (-360.0, 0.0, 360.0):
                ph = phi + shift
                inside = np.flatnonzero((ph >= phis - width / 2) & (ph < phis + width / 2))
                if inside.size == 0:
                    continue
                r = rotation_matrix(rot["axis"], ph) @ orientation
                rr, cc = det.pixel_of(q, orientation=r)
                where = "on the detector" if det.on_detector(rr, cc) else "off the detector (beyond its reach)"
                lines.append(f"reflection {label}: angle {ph:.3f} deg (frame {int(inside[0])}), "
                             f"pixel (row {float(rr):.2f}, column {float(cc):.2f}), {where}")
                if det.on_detector(rr, cc):
                    marks.append((int(inside[0]), float(rr), float(cc), label))
                    found = True
                else:
                    cautions.append(f"reflection {label} crosses the Ewald sphere at {ph:.3f} deg but lands off the "
                                    "detector: beyond its reach for this geometry")
        if not found and not any(label in line for line in lines):
            cautions.append(f"reflection {label} does not cross the Ewald sphere within the rotation range "
                            f"{phis[0] - width / 2:.3f} to {phis[-1] + width / 2:.3f} deg")
    return lines, cautions, marks


def _fmt(v) -> str:
    return "(" + ", ".join(f"{float(x):.4g}" for x in v) + ")"


def _peaks(frame: np.ndarray, n: int) -> list[tuple[int, int, float]]:
    """The `n` strongest local maxima of a frame (3×3 neighbourhood), strongest first."""
    from scipy.ndimage import maximum_filter

    z = np.where(np.isfinite(frame), frame, -np.inf)
    is_max = (z == maximum_filter(z, size=3, mode="nearest")) & np.isfinite(frame) & (frame > 0)
    rows, cols = np.nonzero(is_max)
    order = np.argsort(-frame[rows, cols], kind="stable")[:n]
    return [(int(rows[i]), int(cols[i]), float(frame[rows[i], cols[i]])) for i in order]


def _hkl_label(q: np.ndarray, cell) -> str:
    if cell is None:
        return f"|q|={np.linalg.norm(q):.3g}"
    h = q @ cell.T / (2.0 * np.pi)
    hr = np.rint(h)
    if np.abs(h - hr).max() <= 0.1:
        return "(" + " ".join(f"{int(x)}" for x in hr) + ")"
    return "(" + " ".join(f"{x:.2f}" for x in h) + ")"


def _draw(png: Path, frame: np.ndarray, title: str, peaks, marks, overwrite: bool) -> None:
    from matplotlib import colormaps
    from matplotlib.colors import LogNorm, Normalize

    from ..plot import new_figure, save_figure

    fig = new_figure(6.4, 5.6)
    ax = fig.add_subplot()
    pos = frame[np.isfinite(frame) & (frame > 0)]
    cmap = colormaps["viridis"].with_extremes(bad="0.85")
    norm: Normalize
    if pos.size:
        hi = float(pos.max())
        norm = LogNorm(vmin=max(float(pos.min()), hi * 1e-6), vmax=hi)
        shown = np.where(frame > 0, frame, np.nan)
    else:
        norm, shown = Normalize(), frame
    im = ax.imshow(shown, origin="upper", cmap=cmap, norm=norm, interpolation="nearest")
    fig.colorbar(im, ax=ax, label="expected counts (per unit flux)")
    for r, c, label in peaks:
        ax.plot(c, r, "o", ms=12, mfc="none", mec="red", mew=1.2)
        if "." in label:  # only reflections near integer hkl get a label on the picture
            continue
        ax.annotate(label, (c, r), xytext=(6, 6), textcoords="offset points", color="red", fontsize=7)
    for r, c, label in marks:
        ax.plot(c, r, "+", ms=14, color="white", mew=1.5)
        ax.annotate(label, (c, r), xytext=(6, -10), textcoords="offset points", color="white", fontsize=7)
    ax.set_xlabel("column (pixel)")
    ax.set_ylabel("row (pixel)")
    ax.set_title(title, fontsize=9)
    save_figure(fig, png, overwrite=overwrite)


def run(args) -> int:
    """Handler of ``kinemap frames``: read the geometry, compute, write frames and a PNG."""
    from .._shared.output import check_output
    from ..geometry import expected_counts, write_frames
    from ..io import open_model
    from ..scatter import KinematicApproximationWarning

    inputs = [args.model, args.geometry]
    out = check_output(args.output, overwrite=args.overwrite, inputs=inputs, what="frames file")
    png = (check_output(out.with_suffix(".png"), overwrite=args.overwrite, inputs=inputs,
                        what="picture") if args.png else None)
    if args.peaks < 0:
        raise UsageError("--peaks must be >= 0")
    geo = load_geometry(args.geometry)
    det = geo["detector"]
    source = open_model(args.model, frame=args.frame, **_open_options(args))
    cell = geo["cell"] if geo["cell"] is not None else getattr(source, "cell", None)
    orientation = _orientation(geo, cell)
    rot = geo["rotation"]
    q_lo, q_hi = det.q_range()
    _say(args, f"model: {source.path} (frame {source.frame}, {source.n_atoms} atoms)")
    _say(args, f"detector: {det.shape[0]}x{det.shape[1]} pixels, |q| {q_lo:.4g} to {q_hi:.4g} 1/angstrom "
               f"(4 pi/lambda = {2 * det.k:.4g}); " + (f"{rot['angles'].size} frame(s) about axis {_fmt(rot['axis'])}"
                                                       if rot else "one still frame"))
    lines, cautions, marks = _reflections(args, geo, cell, orientation)
    for line in lines:
        _say(args, line)
    _print_cautions(cautions)
    opts = _probe_options(args)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pat = expected_counts(source, det, orientation=orientation, axis=None if rot is None else rot["axis"],
                              angles=None if rot is None else rot["angles"], width=None if rot is None else rot["width"],
                              probe=args.probe, threads=args.threads, progress=not args.no_progress,
                              chunk_atoms=args.chunk_atoms, **geo["computation"], **opts)
    _print_cautions(str(w.message) for w in caught if issubclass(w.category, KinematicApproximationWarning))
    counts = pat.intensity if rot is not None else pat.intensity[None]
    angles = rot["angles"] if rot is not None else np.zeros(1)
    meta = dict(pat.metadata)
    meta["geometry_file"] = geo["text"]
    meta["command"] = "kinemap " + " ".join(getattr(args, "argv_used", []) or [])
    write_frames(out, counts, angles, detector=det, metadata=meta, overwrite=args.overwrite, inputs=inputs)
    step = meta["subsample_q_step"]
    _say(args, f"frames written: {out}  ({counts.shape[0]} x {counts.shape[1]} x {counts.shape[2]}; "
               f"sub-sample q-step {step['pixel']:.3g} (pixel), {step['angle_at_q_max']:.3g} (rotation) 1/angstrom)")
    if png is not None:
        n = args.png_frame
        if n is None:
            with np.errstate(invalid="ignore"):
                n = int(np.nanargmax(np.nanmax(counts.reshape(counts.shape[0], -1), axis=1)))
        if not -counts.shape[0] <= n < counts.shape[0]:
            raise UsageError(f"--png-frame {n} is outside 0..{counts.shape[0] - 1}")
        n %= counts.shape[0]
        frame = counts[n]
        grid_q = pat.grid.q.reshape(counts.shape + (3,))[n]
        peaks = [(r, c, _hkl_label(grid_q[r, c], cell)) for r, c, _ in _peaks(frame, args.peaks)]
        title = f"frame {n}" + (f", angle {angles[n]:.3f} deg" if rot is not None else " (still)") + \
                f"; {len(peaks)} strongest peaks circled"
        _draw(png, frame, title, peaks, [(r, c, lab) for f, r, c, lab in marks if f == n], args.overwrite)
        _say(args, f"picture written: {png}")
        for r, c, lab in peaks[:10]:
            _say(args, f"  peak {lab}: row {r}, column {c}, counts {frame[r, c]:.4g}")
    return EXIT_OK


def add_parsers(subparsers) -> None:
    """Add the ``frames`` subcommand to the ``kinemap`` command line."""
    fmt = argparse.RawDescriptionHelpFormatter

    p = subparsers.add_parser(
        "frames", help="compute a model's expected counts on detector frames from a geometry file",
        description=("Compute a model's expected counts on a still detector frame or a rotation series described by "
                     "a TOML geometry file (detector, sample orientation, rotation); writes the frames as NeXus/HDF5 "
                     "and, with --png, a picture of one frame with the strongest peaks circled.\n\n"
                     "geometry file keys (units in the names):\n"
                     "  [detector] shape, pixel_size_mm, distance_mm, beam_center_px (row, column), wavelength_angstrom,\n"
                     "             tilt_deg (about lab x, y, z), polarization_fraction, polarization_direction, mask_file\n"
                     "  [sample] orientation (sample -> lab) or ub_matrix_per_angstrom (Busing-Levy), cell_angstrom\n"
                     "  [rotation] axis, start_deg, step_deg, frames, width_deg\n"
                     "  [computation] pixel_subsamples, angle_subsamples, solid_angle, polarization\n"
                     "lab frame: z along the beam, x along columns, y along rows; angles in degrees"),
        epilog=_EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, "one")
    p.add_argument("geometry", help="geometry file (TOML)")
    g = p.add_argument_group("computation")
    g.add_argument("--probe", default="xray", help="xray (default), neutron, electron or unit (point scatterers)")
    g.add_argument("--energy", type=float, metavar="KEV", help="X-ray energy in keV (adds the anomalous terms f', f'')")
    g.add_argument("--voltage", type=float, metavar="KV", help="electron accelerating voltage in kV")
    g.add_argument("--alias", metavar="MAP", help="site labels to species, e.g. Fe_a=Fe3+,Ow=O")
    g.add_argument("--chunk-atoms", type=int, default=1 << 20, metavar="N", help="atoms per streamed chunk")
    g.add_argument("--reflection", action="append", metavar="H,K,L",
                   help="report where this reflection lands (repeatable); cautions when it is out of reach")
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="FRAMES.h5", help="frames file to write (NeXus/HDF5)")
    o.add_argument("--png", action="store_true", help="also draw one frame into a PNG beside the frames file")
    o.add_argument("--png-frame", type=int, default=None, metavar="I",
                   help="frame to draw (default: the one holding the strongest pixel)")
    o.add_argument("--peaks", type=int, default=10, metavar="N", help="strongest peaks to circle (default 10)")
    o.add_argument("--overwrite", action="store_true", help="replace existing output files")
    _add_common(p)
    p.set_defaults(func=run, wavelength=None)


__all__ = ["add_parsers", "run", "load_geometry"]

