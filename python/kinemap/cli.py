"""The ``kinemap`` command line: maps, frame averages, conversion, pictures, summaries, demo.

Only parsing, calling the library and writing results live here. ``main(argv)`` returns the
exit code: 0 success, 1 bad input or a failed computation, 2 a command-line usage error,
3 a file problem (missing, unreadable, corrupt, unwritable), 130 interrupted.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import re
import sys
import warnings
from pathlib import Path

import numpy as np

EXIT_OK, EXIT_INPUT, EXIT_USAGE, EXIT_FILE, EXIT_INTERRUPT = 0, 1, 2, 3, 130

_EPILOG_CODES = """exit codes: 0 success, 1 bad input or failed computation, 2 usage error,
3 file problem (missing, unreadable, corrupt, unwritable), 130 interrupted.
Conventions: q in 1/angstrom, |q| = 4 pi sin(theta)/lambda; positions in angstrom;
reciprocal-lattice units q = 2 pi (h a* + k b* + l c*)."""

_GRID_HELP = """grid (choose one):
  --plane ORIGIN U V --size NU,NV        points ORIGIN + i/(NU-1) U + j/(NV-1) V (1/angstrom)
  --volume ORIGIN U V W --size NU,NV,NW  the same in three dimensions
  --line START STOP --size N             N points from START to STOP, both included
  --hkl --h LO:HI:N --k LO:HI:N --l L    reciprocal-lattice units of the model's cell
                                         (or --cell); each of h, k, l a range or a number
  --points FILE                          q-vectors (1/angstrom) from a .npy file of shape
                                         (..., 3) or a text file with 3 columns
vectors are written with commas: 0,0,0  or  -4,0,0"""

_NUMERIC_ARG = re.compile(r"^-[\d.][\d.,:eE+-]*$")


class UsageError(Exception):
    """A command-line mistake found after parsing (exit code 2)."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit code 2
        raise UsageError(f"{message} (see {self.prog} --help)")


# --------------------------------------------------------------------------------------
# parsing helpers
# --------------------------------------------------------------------------------------
def _vector(text: str, name: str, n: int = 3) -> np.ndarray:
    try:
        vals = [float(x) for x in text.strip().replace(" ", "").split(",") if x != ""]
    except ValueError:
        raise UsageError(f"{name} {text.strip()!r} must be {n} numbers separated by commas, e.g. 0,0,0") from None
    if len(vals) != n or not np.all(np.isfinite(vals)):
        raise UsageError(f"{name} {text.strip()!r} must be {n} finite numbers separated by commas")
    return np.array(vals)


def _sizes(text: str | None, n: int, option: str) -> tuple:
    if text is None:
        raise UsageError(f"{option} needs --size with {n} count(s), e.g. --size {','.join(['128'] * n)}")
    parts = re.split(r"[,x×]", text.strip().lower())
    try:
        vals = tuple(int(p) for p in parts if p)
    except ValueError:
        raise UsageError(f"--size {text!r} must be {n} whole number(s) separated by commas") from None
    if len(vals) != n or any(v < 1 for v in vals):
        raise UsageError(f"--size {text!r} must be {n} whole number(s) >= 1 for {option}")
    return vals


def _range(text: str | None, name: str):
    if text is None:
        return 0.0
    t = text.strip()
    if ":" in t:
        parts = t.split(":")
        if len(parts) != 3:
            raise UsageError(f"--{name} {t!r} must be LO:HI:N (e.g. -4:4:161) or one number")
        try:
            return (float(parts[0]), float(parts[1]), int(parts[2]))
        except ValueError:
            raise UsageError(f"--{name} {t!r} must be LO:HI:N with numbers and a whole N") from None
    try:
        return float(t)
    except ValueError:
        raise UsageError(f"--{name} {t!r} must be LO:HI:N or one number") from None


def _cell(text: str) -> np.ndarray:
    try:
        vals = [float(x) for x in text.replace(" ", "").split(",") if x]
    except ValueError:
        raise UsageError(f"--cell {text!r} must be 6 numbers a,b,c,alpha,beta,gamma (angstrom, degrees) or 9 numbers (rows a, b, c)") from None
    if len(vals) == 9:
        return np.array(vals).reshape(3, 3)
    if len(vals) == 6:
        a, b, c, al, be, ga = vals
        al, be, ga = np.radians([al, be, ga])
        cx = c * np.cos(be)
        cy = c * (np.cos(al) - np.cos(be) * np.cos(ga)) / np.sin(ga)
        cz2 = c * c - cx * cx - cy * cy
        if cz2 <= 0:
            raise UsageError(f"--cell {text!r}: these angles do not make a cell")
        return np.array([[a, 0, 0], [b * np.cos(ga), b * np.sin(ga), 0], [cx, cy, np.sqrt(cz2)]])
    raise UsageError(f"--cell {text!r} must be 6 numbers a,b,c,alpha,beta,gamma or 9 numbers (rows a, b, c)")


def _load_points(path: str) -> np.ndarray:
    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"--points: no such file: {path!r}")
    try:
        if p.suffix.lower() == ".npy":
            q = np.load(p, allow_pickle=False)
        else:
            q = np.loadtxt(p, ndmin=2)
    except (ValueError, OSError) as exc:
        from .errors import ModelFileError

        raise ModelFileError(f"--points {path!r}: cannot read q-vectors ({exc})") from None
    return q


def _build_grid(args, source=None):
    from .qgrid import QGrid

    chosen = [k for k in ("points", "line", "plane", "volume", "hkl") if getattr(args, k)]
    if not chosen:
        raise UsageError("choose a grid: --plane, --volume, --line, --hkl or --points (see --help)")
    if len(chosen) > 1:
        raise UsageError(f"choose one grid, got {', '.join('--' + c for c in chosen)}")
    kind = chosen[0]
    if kind != "hkl" and any(getattr(args, x) is not None for x in ("h", "k", "l")):
        raise UsageError("--h/--k/--l go with --hkl")
    if kind in ("points", "hkl") and args.size is not None:
        raise UsageError(f"--size does not apply to --{kind}")
    if kind == "points":
        return QGrid.points(_load_points(args.points))
    if kind == "line":
        a, b = (_vector(v, "--line") for v in args.line)
        (n,) = _sizes(args.size, 1, "--line")
        return QGrid.line(a, b, n)
    if kind == "plane":
        o, u, v = (_vector(x, "--plane") for x in args.plane)
        return QGrid.plane(o, u, v, _sizes(args.size, 2, "--plane"))
    if kind == "volume":
        o, u, v, w = (_vector(x, "--volume") for x in args.volume)
        return QGrid.volume(o, u, v, w, _sizes(args.size, 3, "--volume"))
    if args.cell is not None:
        cell = _cell(args.cell)
    elif source is not None and getattr(source, "cell", None) is not None:
        cell = source.cell
    else:
        raise UsageError("--hkl needs a cell: the model file has no box, so give --cell a,b,c,alpha,beta,gamma")
    return QGrid.hkl(cell, h=_range(args.h, "h"), k=_range(args.k, "k"), l=_range(args.l, "l"))


def _probe_options(args) -> dict:
    opts = {}
    probe = args.probe.lower()
    if args.energy is not None:
        if probe not in ("xray", "x-ray"):
            raise UsageError("--energy (keV) applies to --probe xray")
        opts["energy_kev"] = args.energy
    if args.wavelength is not None:
        if probe not in ("xray", "x-ray", "neutron"):
            raise UsageError("--wavelength applies to --probe xray or neutron")
        opts["wavelength"] = args.wavelength
    if args.voltage is not None:
        if probe != "electron":
            raise UsageError("--voltage (kV) applies to --probe electron")
        opts["voltage_kv"] = args.voltage
    if args.alias:
        if probe == "unit":
            raise UsageError("--alias does not apply to --probe unit")
        aliases = {}
        for part in args.alias.split(","):
            if "=" not in part:
                raise UsageError(f"--alias entry {part!r} must look like LABEL=SPECIES, e.g. Fe_a=Fe3+")
            k, v = part.split("=", 1)
            aliases[k.strip()] = v.strip()
        opts["aliases"] = aliases
    return opts


def _open_options(args) -> dict:
    opts = {}
    if getattr(args, "format", None):
        opts["format"] = args.format
    if getattr(args, "group", None):
        opts["group"] = args.group
    if getattr(args, "species_map", None):
        opts["species_map"] = args.species_map
    if getattr(args, "unwrap", False):
        opts["unwrap"] = True
    return opts


def _check_writable(path, what: str = "output") -> Path:
    """Fail before any work when `path` cannot be written."""
    p = Path(path)
    if p.is_dir():
        raise IsADirectoryError(f"{what} {str(p)!r} is a folder; give a file name")
    folder = p.parent if str(p.parent) else Path(".")
    if not folder.is_dir():
        raise FileNotFoundError(f"cannot write {what} {str(p)!r}: folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK):
        raise PermissionError(f"cannot write {what} {str(p)!r}: folder {str(folder)!r} is not writable")
    if p.exists() and not os.access(p, os.W_OK):
        raise PermissionError(f"cannot write {what} {str(p)!r}: the existing file is read-only")
    return p


def _check_png(args, grid) -> None:
    if args.png and not grid.is_regular:
        raise UsageError("--png needs a regular grid (plane, volume, line or hkl); a --points map has no layout to draw")


def _say(args, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text)


def _print_cautions(cautions) -> None:
    seen = set()
    for c in cautions:
        if c not in seen:
            seen.add(c)
            print(f"kinemap: caution: {c}", file=sys.stderr)


def _provenance(args, pattern, source_desc: dict, frames) -> dict:
    from . import __version__

    md = pattern.metadata
    return {"provenance": {
        "input_file": str(Path(source_desc.get("file", "")).resolve()) if source_desc.get("file") else "",
        "input_format": source_desc.get("format", ""),
        "frames": list(frames),
        "probe": md.get("probe", {}).get("probe", "") if isinstance(md.get("probe"), dict) else str(md.get("probe")),
        "grid": pattern.grid.describe(),
        "method": md.get("method", ""),
        "tolerance": md.get("tolerance", 0.0),
        "kinemap_version": __version__,
        "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "command": "kinemap " + " ".join(args.argv_used),
    }}


# --------------------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------------------
def _cmd_map(args) -> int:
    from .io import open_model
    from .pattern import save_pattern
    from .scatter import scatter

    out = _check_writable(args.output)
    png = _check_writable(out.with_suffix(".png"), "picture") if args.png else None
    source = open_model(args.model, frame=args.frame, **_open_options(args))
    grid = _build_grid(args, source)
    _check_png(args, grid)
    probe_opts = _probe_options(args)
    _say(args, f"model: {source.path} (frame {source.frame} of {source.n_frames}, {source.n_atoms} atoms)")
    _say(args, f"grid: {grid.kind} {tuple(grid.shape)} = {grid.size} q-points; probe {args.probe}")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pat = scatter(source, grid, probe=args.probe, method=args.method, tol=args.tol, threads=args.threads,
                      progress=not args.no_progress, chunk_atoms=args.chunk_atoms, **probe_opts)
    _print_cautions(str(w.message) for w in caught if w.category.__name__ == "KinematicApproximationWarning")
    extra = _provenance(args, pat, pat.metadata.get("model", {}), [source.frame])
    save_pattern(pat, out, keep_amplitude=not args.no_amplitude, extra=extra)
    _say(args, f"map written: {out}  (method {pat.metadata.get('method')}, max intensity {float(pat.intensity.max()):.6g})")
    if png is not None:
        from .plot import render

        render(pat, png, scale=args.scale)
        _say(args, f"picture written: {png}")
    return EXIT_OK


def _cmd_average(args) -> int:
    from .frames import average_frames
    from .io import open_model

    prefix = Path(args.output)
    for part in ("total", "bragg", "diffuse"):
        _check_writable(prefix.parent / f"{prefix.name}_{part}.h5")
    source = open_model(args.model, **_open_options(args))
    grid = _build_grid(args, source)
    _check_png(args, grid)
    probe_opts = _probe_options(args)
    _say(args, f"model: {source.path} ({source.n_frames} frames, {source.n_atoms} atoms in frame 0)")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        avg = average_frames(source, grid, frames=args.frames, probe=args.probe, method=args.method, tol=args.tol,
                             threads=args.threads, progress=not args.no_progress, chunk_atoms=args.chunk_atoms,
                             **probe_opts)
    _print_cautions(str(w.message) for w in caught if w.category.__name__ == "KinematicApproximationWarning")
    extra = _provenance(args, avg.total, avg.total.metadata.get("model", {}), avg.frames)
    paths = avg.save(prefix, extra=extra)
    _say(args, f"averaged {len(avg.frames)} frame(s): {avg.frames if len(avg.frames) <= 12 else str(avg.frames[:12])[:-1] + ', ...]'}")
    for name, path in paths.items():
        _say(args, f"{name:8s} map written: {path}")
    if args.png:
        from .plot import render

        for name, pat in avg.parts().items():
            png = render(pat, paths[name].with_suffix(".png"), scale=args.scale)
            _say(args, f"{name:8s} picture written: {png}")
    return EXIT_OK


def _cmd_convert(args) -> int:
    from .io import convert

    out = _check_writable(args.output)
    convert(args.model, out, frames=args.frames, position_dtype=np.float32 if args.float32 else np.float64,
            progress=not args.no_progress, **_open_options(args))
    from .io import open_model

    src = open_model(out)
    _say(args, f"H5MD written: {out}  ({src.n_frames} frame(s) of {src.n_atoms} atoms, species {src.species_labels()})")
    return EXIT_OK


def _cmd_render(args) -> int:
    from .pattern import load_pattern
    from .plot import render

    out = _check_writable(args.output if args.output else Path(args.map).with_suffix(".png"), "picture")
    pat = load_pattern(args.map)
    size = _sizes_float(args.size)
    render(pat, out, scale=args.scale, axis_units=args.axis_units, quantity=args.quantity,
           slice_axis=_slice_axis(args.slice_axis), slice_index=args.slice_index,
           cmap=args.cmap, vmin=args.vmin, vmax=args.vmax, dpi=args.dpi, size=size)
    _say(args, f"picture written: {out}")
    return EXIT_OK


def _slice_axis(text):
    if text is None:
        return None
    text = text.strip()
    return int(text) if text.lstrip("-").isdigit() else text


def _sizes_float(text: str):
    parts = re.split(r"[,x×]", text.strip().lower())
    try:
        w, h = (float(p) for p in parts)
    except ValueError:
        raise UsageError(f"--size {text!r} must be WIDTH,HEIGHT in inches, e.g. 6.4,5.2") from None
    return (w, h)


def _is_map_file(path) -> bool:
    p = Path(path)
    if not p.is_file():
        return False
    with open(p, "rb") as fh:
        if fh.read(8) != b"\x89HDF\r\n\x1a\n":
            return False
    from .io.h5md import open_h5

    with open_h5(p) as f:
        return "entry/data/intensity" in f


def _cmd_info(args) -> int:
    path = Path(args.file)
    if not path.exists():
        raise FileNotFoundError(f"no such file: {str(path)!r}")
    if _is_map_file(path):
        from .pattern import load_pattern

        pat = load_pattern(path)
        g = pat.grid
        inten = pat.intensity
        info = {
            "file": str(path), "content": "map",
            "grid": g.kind, "shape": list(g.shape),
            "axes": {n: [float(v[0]), float(v[-1]), u] for n, v, u in zip(g.axis_names, g.axis_values, g.axis_units)},
            "units": pat.units, "has_amplitude": pat.amplitude is not None,
            "intensity_min": float(np.min(inten)), "intensity_max": float(np.max(inten)),
            "intensity_sum": float(np.sum(inten)),
        }
        md = pat.metadata
        for key in ("average", "method", "tolerance", "frames", "created", "kinemap_version", "cautions"):
            if key in md:
                info[key] = md[key]
        if isinstance(md.get("probe"), dict):
            info["probe"] = md["probe"].get("probe")
        if isinstance(md.get("provenance"), dict):
            info["input_file"] = md["provenance"].get("input_file")
    else:
        from .io import open_model

        src = open_model(path, frame=args.frame, **_open_options(args))
        info = {"content": "model"}
        info.update(src.describe())
        if args.count and hasattr(src, "species_counts"):
            info["species_counts"] = src.species_counts()
        elif args.count:
            labels, counts = {}, {}
            for chunk in src.iter_chunks():
                for lab, c in chunk.describe()["species"].items():
                    counts[lab] = counts.get(lab, 0) + c
            info["species_counts"] = counts
            del labels
    if args.json:
        print(json.dumps(info, indent=2, default=str))
    else:
        width = max(len(k) for k in info)
        for k, v in info.items():
            if isinstance(v, (list, dict)):
                v = json.dumps(v, default=str)
                if len(v) > 200:
                    v = v[:197] + "..."
            print(f"{k:<{width}}  {v}")
    return EXIT_OK


def _cmd_demo(args) -> int:
    from .demo import run_demo

    run_demo(args.output, threads=args.threads, progress=not args.no_progress, quiet=args.quiet)
    return EXIT_OK


# --------------------------------------------------------------------------------------
# parser
# --------------------------------------------------------------------------------------
def _add_model_options(p, frame: str | None):
    g = p.add_argument_group("model file")
    g.add_argument("model", help="model file: H5MD, plain HDF5 layout, extended XYZ, LAMMPS dump, "
                                 "or CIF/POSCAR/... when ASE is installed")
    if frame == "one":
        g.add_argument("--frame", type=int, default=None, metavar="I",
                       help="frame to use, 0-based; negative counts from the end (default: the first)")
    elif frame == "many":
        g.add_argument("--frames", default=None, metavar="SEL",
                       help="frames to use: all (default), START:STOP:STEP like 0:50:5 or -10:, or a list 0,3,7")
    g.add_argument("--format", choices=["h5md", "hdf5", "extxyz", "lammps-dump", "ase"],
                   help="input format when the file name does not tell it")
    g.add_argument("--group", help="H5MD particle group under /particles (default: the only one, or 'all')")
    g.add_argument("--species-map", metavar="MAP",
                   help="labels of integer species codes, e.g. 1=Fe,2=Ni (LAMMPS types, integer H5MD species)")
    g.add_argument("--unwrap", action="store_true", help="H5MD: add image flags x box edges to the positions")


def _add_grid_options(p):
    g = p.add_argument_group("grid (q in 1/angstrom; choose one)")
    g.add_argument("--plane", nargs=3, metavar=("ORIGIN", "U", "V"),
                   help="plane with corner ORIGIN and full edges U, V; needs --size NU,NV")
    g.add_argument("--volume", nargs=4, metavar=("ORIGIN", "U", "V", "W"),
                   help="volume with corner ORIGIN and edges U, V, W; needs --size NU,NV,NW")
    g.add_argument("--line", nargs=2, metavar=("START", "STOP"), help="straight line, both ends included; needs --size N")
    g.add_argument("--size", metavar="N[,N...]", help="points along each edge of --plane/--volume/--line")
    g.add_argument("--hkl", action="store_true", help="grid in reciprocal-lattice units of the cell (give --h, --k, --l)")
    g.add_argument("--h", metavar="LO:HI:N|H", help="h range or value (with --hkl; default 0)")
    g.add_argument("--k", metavar="LO:HI:N|K", help="k range or value (with --hkl; default 0)")
    g.add_argument("--l", metavar="LO:HI:N|L", help="l range or value (with --hkl; default 0)")
    g.add_argument("--cell", metavar="CELL", help="cell for --hkl: a,b,c,alpha,beta,gamma or 9 numbers (rows a, b, c); "
                                                  "default: the model file's box")
    g.add_argument("--points", metavar="FILE", help="q-vectors from a .npy (..., 3) or 3-column text file")


def _add_compute_options(p):
    g = p.add_argument_group("computation")
    g.add_argument("--probe", default="xray", help="xray (default), neutron, electron or unit (point scatterers)")
    g.add_argument("--energy", type=float, metavar="KEV", help="X-ray energy in keV (adds the anomalous terms f', f'')")
    g.add_argument("--wavelength", type=float, metavar="ANGSTROM", help="X-ray or neutron wavelength in angstrom")
    g.add_argument("--voltage", type=float, metavar="KV", help="electron accelerating voltage in kV (default 200)")
    g.add_argument("--alias", metavar="MAP", help="site labels to species, e.g. Fe_a=Fe3+,Ow=O")
    g.add_argument("--method", default="auto", choices=["auto", "exact", "gridded"],
                   help="exact direct sum, gridded FFT path to --tol, or auto (default)")
    g.add_argument("--tol", type=float, default=1e-6, help="relative tolerance of the gridded path (default 1e-6)")
    g.add_argument("--chunk-atoms", type=int, default=1 << 20, metavar="N",
                   help="atoms read and summed per chunk (bounds memory; default 1048576)")


def _add_common(p):
    p.add_argument("--threads", type=int, default=None, metavar="N",
                   help="worker threads (default: KINEMAP_NUM_THREADS or all cores)")
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors and cautions")


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    fmt = argparse.RawDescriptionHelpFormatter
    parser = _Parser(
        prog="kinemap",
        description=("Kinematic X-ray, neutron and electron diffraction maps from atomistic models.\n\n"
                     "Start with:  kinemap demo            (builds a model, computes and plots its maps)\n"
                     "Then:        kinemap info MODEL      (what a model or map file holds)\n"
                     "             kinemap map MODEL --hkl --h -4:4:201 --k -4:4:201 --l 0 -o map.h5 --png\n"
                     "             kinemap average MODEL --frames 0:50 --plane 0,0,0 8,0,0 0,8,0 --size 256,256 -o run\n"
                     "             kinemap render map.h5 -o map.png"),
        epilog=_EPILOG_CODES, formatter_class=fmt)
    parser.add_argument("--version", action="version", version=f"kinemap {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("map", help="compute a map (intensity and amplitude) of one frame of a model file",
                       description="Compute |A(q)|^2 and A(q) of one frame on a grid and write a NeXus/HDF5 map.",
                       epilog=_GRID_HELP + "\n\n" + _EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, "one")
    _add_grid_options(p)
    _add_compute_options(p)
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="MAP.h5", help="map file to write (NeXus NXdata in HDF5)")
    o.add_argument("--no-amplitude", action="store_true", help="store the intensity only (half the file size)")
    o.add_argument("--png", action="store_true", help="also draw the map into a PNG beside the map file")
    o.add_argument("--scale", default="log", choices=["log", "linear"], help="colour scale of the PNG (default log)")
    _add_common(p)
    p.set_defaults(func=_cmd_map)

    p = sub.add_parser("average", help="average frames: total <|A|^2>, Bragg |<A>|^2 and diffuse maps",
                       description=("Average over the frames of a trajectory. Writes PREFIX_total.h5 (<|A|^2>), "
                                    "PREFIX_bragg.h5 (|<A>|^2) and PREFIX_diffuse.h5 (their difference)."),
                       epilog=_GRID_HELP + "\n\n" + _EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, "many")
    _add_grid_options(p)
    _add_compute_options(p)
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="PREFIX", help="output prefix, e.g. out/run -> out/run_total.h5 ...")
    o.add_argument("--png", action="store_true", help="also draw each map into a PNG")
    o.add_argument("--scale", default="log", choices=["log", "linear"], help="colour scale of the PNGs (default log)")
    _add_common(p)
    p.set_defaults(func=_cmd_average)

    p = sub.add_parser("convert", help="convert a model file to H5MD (streaming)",
                       description="Write any model file kinemap reads as H5MD 1.1, chunk by chunk.",
                       epilog=_EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, "many")
    p.add_argument("-o", "--output", required=True, metavar="OUT.h5md", help="H5MD file to write")
    p.add_argument("--float32", action="store_true", help="store positions as float32 (half the size)")
    _add_common(p)
    p.set_defaults(func=_cmd_convert)

    p = sub.add_parser("render", help="draw a saved map as a PNG",
                       description="Draw a map file: 2-D maps with a colour bar, 1-D profiles, slices of volumes.",
                       epilog=_EPILOG_CODES, formatter_class=fmt)
    p.add_argument("map", help="map file written by kinemap (NeXus/HDF5)")
    p.add_argument("-o", "--output", metavar="OUT.png", help="picture to write (default: the map's name with .png)")
    p.add_argument("--scale", default="log", choices=["log", "linear"], help="colour/value scale (default log)")
    p.add_argument("--axis-units", default="auto", choices=["auto", "rlu", "inv-angstrom"],
                   help="axes in reciprocal-lattice units (hkl maps) or 1/angstrom; auto picks r.l.u. for hkl maps")
    p.add_argument("--quantity", default="intensity",
                   choices=["intensity", "amplitude-abs", "amplitude-real", "amplitude-imag", "phase"])
    p.add_argument("--slice-axis", metavar="AXIS", help="volumes: axis to cut (0, 1, 2 or its name; default the last)")
    p.add_argument("--slice-index", type=int, metavar="I", help="volumes: index along that axis (default the middle)")
    p.add_argument("--cmap", default="viridis", help="matplotlib colour map (default viridis)")
    p.add_argument("--vmin", type=float, help="lower colour limit")
    p.add_argument("--vmax", type=float, help="upper colour limit")
    p.add_argument("--dpi", type=int, default=100, help="dots per inch (default 100)")
    p.add_argument("--size", default="6.4,5.2", metavar="W,H", help="picture size in inches (default 6.4,5.2)")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=_cmd_render)

    p = sub.add_parser("info", help="summarise a model file or a map file",
                       description="Print what a model file (atoms, frames, species, box) or a map file holds.",
                       epilog=_EPILOG_CODES, formatter_class=fmt)
    p.add_argument("file", help="model or map file")
    p.add_argument("--frame", type=int, default=None, help="model files: frame to describe (default the first)")
    p.add_argument("--format", choices=["h5md", "hdf5", "extxyz", "lammps-dump", "ase"], help="model file format")
    p.add_argument("--group", help="H5MD particle group")
    p.add_argument("--species-map", metavar="MAP", help="labels of integer species codes, e.g. 1=Fe,2=Ni")
    p.add_argument("--count", action="store_true", help="count the atoms of each species (reads the whole frame)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=_cmd_info)

    p = sub.add_parser("demo", help="build a demonstration model, compute its Bragg and diffuse maps, plot them",
                       description=("Builds a layer of an invented two-element alloy on an octagonal "
                                    "(Ammann-Beenker) tiling with a few frames of thermal jitter, writes it as H5MD, "
                                    "computes Bragg and diffuse maps of the (q_x, q_y) plane, draws PNGs and says "
                                    "where everything went."),
                       epilog=_EPILOG_CODES, formatter_class=fmt)
    p.add_argument("-o", "--output", default="kinemap-demo-output", metavar="DIR",
                   help="output folder (default ./kinemap-demo-output)")
    _add_common(p)
    p.set_defaults(func=_cmd_demo)
    return parser


def _fix_negative_numbers(argv: list[str]) -> list[str]:
    """argparse reads '-4,0,0' or '-4:4:161' as an option; a leading space keeps it a value."""
    return [" " + a if _NUMERIC_ARG.match(a) else a for a in argv]


def main(argv: list[str] | None = None) -> int:
    """Run the ``kinemap`` command line; returns the exit code (see the module notes)."""
    from .errors import InvalidInputError, KinemapError

    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        try:
            args = parser.parse_args(_fix_negative_numbers(argv))
        except SystemExit as exc:  # --help / --version
            return int(exc.code or 0)
        if not getattr(args, "command", None):
            parser.print_help()
            return EXIT_USAGE
        args.argv_used = argv
        return int(args.func(args))
    except UsageError as exc:
        print(f"kinemap: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("kinemap: interrupted; no partial output was left", file=sys.stderr)
        return EXIT_INTERRUPT
    except (OSError, ImportError) as exc:
        print(f"kinemap: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_FILE
    except (InvalidInputError, KinemapError, ValueError) as exc:
        print(f"kinemap: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_INPUT
    except MemoryError:
        print("kinemap: error: out of memory; use a smaller grid or a smaller --chunk-atoms", file=sys.stderr)
        return EXIT_INPUT


def _one_line(exc: BaseException) -> str:
    text = str(exc)
    if isinstance(exc, OSError) and exc.filename and exc.strerror and str(exc.filename) not in text:
        text = f"{exc.strerror}: {exc.filename!r}"
    elif isinstance(exc, OSError) and exc.strerror and exc.filename:
        text = f"{exc.strerror}: {str(exc.filename)!r}"
    return " ".join(text.split()) or type(exc).__name__


__all__ = ["main", "build_parser", "EXIT_OK", "EXIT_INPUT", "EXIT_USAGE", "EXIT_FILE", "EXIT_INTERRUPT"]
