"""The commands map, average, convert, render, info and demo: read the options, call the
library, write the results, say where they went."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .._shared.output import check_output
from . import _args as A
from ._args import EXIT_OK, UsageError


def _open(args, **extra):
    from ..io import open_model

    return open_model(args.model, **extra, **A.open_options(args))


def cmd_map(args) -> int:
    from ..pattern import save_pattern
    from ..scatter import scatter

    inputs = (args.model,)
    out = check_output(args.output, overwrite=args.overwrite, inputs=inputs, what="map file")
    png = check_output(out.with_suffix(".png"), overwrite=args.overwrite, what="picture") if args.png else None
    source = _open(args, frame=args.frame)
    grid, notes = A.build_grid(args, source)
    A.check_png(args, grid)
    probe_opts = A.probe_options(args)
    for text in notes:
        A.note(text)
    A.say(args, f"model: {source.path} (frame {source.frame} of {source.n_frames}, {source.n_atoms} atoms)")
    A.say(args, f"grid: {grid.kind} {tuple(grid.shape)} = {grid.size} q-points; probe {args.probe}")
    with A.Cautions():
        pat = scatter(source, grid, probe=args.probe, method=args.method, tol=args.tol, threads=args.threads,
                      progress=not args.no_progress, chunk_atoms=args.chunk_atoms, **A.run_options(args),
                      **probe_opts)
    run = pat.metadata.get("run", {})
    if run.get("blocks_reused"):
        A.say(args, f"checkpoint: reused {run['blocks_reused']} of {run['blocks']} finished q-blocks")
    extra = A.provenance(args, pat, pat.metadata.get("model", {}), [source.frame])
    save_pattern(pat, out, keep_amplitude=not args.no_amplitude, extra=extra, overwrite=args.overwrite,
                 inputs=inputs)
    A.say(args, f"map written: {out}  (method {pat.metadata.get('method')}, max intensity "
                f"{float(pat.intensity.max()):.6g})")
    if png is not None:
        from ..plot import render

        render(pat, png, scale=args.scale, overwrite=args.overwrite)
        A.say(args, f"picture written: {png}")
    return EXIT_OK


def cmd_average(args) -> int:
    from ..frames import average_frames

    inputs = (args.model,)
    prefix = Path(args.output)
    for part in ("total", "bragg", "diffuse"):
        check_output(prefix.parent / f"{prefix.name}_{part}.h5", overwrite=args.overwrite, inputs=inputs,
                     what="map file")
        if args.png:
            check_output(prefix.parent / f"{prefix.name}_{part}.png", overwrite=args.overwrite, what="picture")
    source = _open(args)
    grid, notes = A.build_grid(args, source)
    A.check_png(args, grid)
    probe_opts = A.probe_options(args)
    for text in notes:
        A.note(text)
    A.say(args, f"model: {source.path} ({source.n_frames} frames, {source.n_atoms} atoms in frame 0); "
                f"Bragg/diffuse split over {args.split}")
    with A.Cautions():
        avg = average_frames(source, grid, frames=args.frames, split=args.split, probe=args.probe,
                             method=args.method, tol=args.tol, threads=args.threads,
                             progress=not args.no_progress, chunk_atoms=args.chunk_atoms,
                             remove_drift=not args.keep_drift, **A.run_options(args), **probe_opts)
    extra = A.provenance(args, avg.total, avg.total.metadata.get("model", {}), avg.frames)
    paths = avg.save(prefix, extra=extra, overwrite=args.overwrite, inputs=inputs)
    shown = avg.frames if len(avg.frames) <= 12 else str(avg.frames[:12])[:-1] + ", ...]"
    A.say(args, f"averaged {len(avg.frames)} frame(s): {shown}")
    for name, path in paths.items():
        A.say(args, f"{name:8s} map written: {path}")
    if args.png:
        from ..plot import render

        for name, pat in avg.parts().items():
            png = render(pat, paths[name].with_suffix(".png"), scale=args.scale, overwrite=args.overwrite)
            A.say(args, f"{name:8s} picture written: {png}")
    return EXIT_OK


def cmd_convert(args) -> int:
    from ..io import convert, open_model

    out = check_output(args.output, overwrite=args.overwrite, inputs=(args.model,), what="model file")
    opts = A.open_options(args)
    for name in ("cell", "supercell"):
        if name in opts:
            raise UsageError(f"--{name} describes how to index a model, not its file; give it when you use the "
                             "converted file")
    convert(args.model, out, frames=args.frames, position_dtype=np.float32 if args.float32 else np.float64,
            progress=not args.no_progress, overwrite=args.overwrite, **opts)
    src = open_model(out)
    A.say(args, f"H5MD written: {out}  ({src.n_frames} frame(s) of {src.n_atoms} atoms, species "
                f"{src.species_labels()})")
    return EXIT_OK


def cmd_render(args) -> int:
    from ..pattern import load_pattern
    from ..plot import render

    out = check_output(args.output if args.output else Path(args.map).with_suffix(".png"),
                       overwrite=args.overwrite, inputs=(args.map,), what="picture")
    pat = load_pattern(args.map)
    size = A.sizes_float(args.size)
    render(pat, out, scale=args.scale, axis_units=args.axis_units, quantity=args.quantity,
           slice_axis=A.slice_axis(args.slice_axis), slice_index=args.slice_index,
           cmap=args.cmap, vmin=args.vmin, vmax=args.vmax, dpi=args.dpi, size=size, overwrite=args.overwrite)
    A.say(args, f"picture written: {out}")
    return EXIT_OK


def _is_map_file(path) -> bool:
    """A map (kinemap's or any NeXus NXdata map) rather than a model file."""
    from ..compare.maps import is_map_file

    return Path(path).suffix.lower() != ".npy" and is_map_file(path)


def _map_info(path: Path) -> dict:
    from ..pattern import load_pattern

    pat = load_pattern(path)
    g = pat.grid
    inten = pat.intensity
    finite = inten[np.isfinite(inten)]
    sq = f"{pat.units}^2" if pat.units not in ("1", "") else "arbitrary units"
    info = {
        "file": str(path), "content": "map",
        "grid": g.kind, "shape": list(g.shape),
        "axes": {(n if lab == n else f"{n} ({lab})"): [float(v[0]), float(v[-1]), u]
                 for n, lab, v, u in zip(g.axis_names, g.axis_labels, g.axis_values, g.axis_units)},
        "intensity_units": sq, "amplitude_units": pat.units if pat.amplitude is not None else None,
        "has_sigma": pat.sigma is not None,
        "intensity_min": float(finite.min()) if finite.size else None,
        "intensity_max": float(finite.max()) if finite.size else None,
        "intensity_sum": float(finite.sum()) if finite.size else None,
        "unmeasured_points": int(inten.size - finite.size),
    }
    md = pat.metadata
    for key in ("average", "split", "method", "tolerance", "frames", "created", "kinemap_version", "cautions"):
        if key in md:
            info[key] = md[key]
    if isinstance(md.get("probe"), dict):
        info["probe"] = md["probe"].get("probe")
    if isinstance(md.get("provenance"), dict):
        info["input_file"] = md["provenance"].get("input_file")
    return info


def cmd_info(args) -> int:
    path = Path(args.file)
    if not path.exists():
        raise FileNotFoundError(f"no such file: {str(path)!r}")
    if _is_map_file(path):
        info = _map_info(path)
    else:
        from ..io import open_model

        src = open_model(path, frame=args.frame, **A.open_options(args))
        info = {"content": "model"}
        info.update(src.describe())
        if args.count:
            counts: dict[str, int] = {}
            for chunk in src.iter_chunks(1 << 20):
                for lab, c in chunk.species_counts().items():
                    counts[lab] = counts.get(lab, 0) + c
            info["species_counts"] = counts
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


def cmd_demo(args) -> int:
    from ..demo import run_demo

    run_demo(args.output, threads=args.threads, progress=not args.no_progress, quiet=args.quiet)
    return EXIT_OK


def add_parsers(sub, fmt) -> None:
    """The core commands of the ``kinemap`` program."""
    p = sub.add_parser("map", help="compute a map (intensity and amplitude) of one frame of a model file",
                       description="Compute |A(q)|^2 and A(q) of one frame on a grid and write a NeXus/HDF5 map.",
                       epilog=A.GRID_HELP + "\n\n" + A.MODEL_FILES_HELP + "\n\n" + A.EPILOG_CODES,
                       formatter_class=fmt)
    A.add_model_options(p, "one")
    A.add_grid_options(p)
    A.add_compute_options(p)
    A.add_run_options(p)
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="MAP.h5", help="map file to write (NeXus NXdata in HDF5)")
    o.add_argument("--no-amplitude", action="store_true", help="store the intensity only (half the file size)")
    o.add_argument("--png", action="store_true", help="also draw the map into a PNG beside the map file")
    o.add_argument("--scale", default="log", choices=["log", "linear"], help="colour scale of the PNG (default log)")
    A.add_overwrite(o)
    A.add_common(p)
    p.set_defaults(func=cmd_map)

    p = sub.add_parser("average", help="Bragg and diffuse maps: total, average structure and its deviations",
                       description=("Split the scattering into Bragg and diffuse parts, over the frames of a "
                                    "trajectory (--split frames) or over the parent cells of a supercell (--split "
                                    "cells, works for one snapshot). Writes PREFIX_total.h5, PREFIX_bragg.h5 and "
                                    "PREFIX_diffuse.h5."),
                       epilog=A.GRID_HELP + "\n\n" + A.MODEL_FILES_HELP + "\n\n" + A.EPILOG_CODES,
                       formatter_class=fmt)
    A.add_model_options(p, "many")
    A.add_grid_options(p)
    A.add_compute_options(p)
    A.add_run_options(p)
    s = p.add_argument_group("split")
    s.add_argument("--split", default="frames", choices=["frames", "cells"],
                   help="average structure over frames (default) or over the parent cells of the box (needs "
                        "--supercell or --cell)")
    s.add_argument("--keep-drift", action="store_true",
                   help="do not remove the drift of the centre of the atoms between frames")
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="PREFIX",
                   help="output prefix, e.g. out/run -> out/run_total.h5 ...")
    o.add_argument("--png", action="store_true", help="also draw each map into a PNG")
    o.add_argument("--scale", default="log", choices=["log", "linear"], help="colour scale of the PNGs (default log)")
    A.add_overwrite(o)
    A.add_common(p)
    p.set_defaults(func=cmd_average)

    p = sub.add_parser("convert", help="convert a model file to H5MD (streaming)",
                       description="Write any model file kinemap reads as H5MD 1.1, chunk by chunk.",
                       epilog=A.MODEL_FILES_HELP + "\n\n" + A.EPILOG_CODES, formatter_class=fmt)
    g = p.add_argument_group("model file")
    g.add_argument("model", help="model file to convert")
    g.add_argument("--frames", default=None, metavar="SEL", help="frames to convert (default all)")
    A.add_file_options(g)
    p.add_argument("-o", "--output", required=True, metavar="OUT.h5md", help="H5MD file to write")
    p.add_argument("--float32", action="store_true", help="store positions as float32 (half the size)")
    A.add_overwrite(p)
    A.add_common(p)
    p.set_defaults(func=cmd_convert, cell=None, supercell=None)

    p = sub.add_parser("render", help="draw a saved map as a PNG",
                       description="Draw a map file: 2-D maps with a colour bar, 1-D profiles, slices of volumes.",
                       epilog=A.EPILOG_CODES, formatter_class=fmt)
    p.add_argument("map", help="map file written by kinemap (NeXus/HDF5)")
    p.add_argument("-o", "--output", metavar="OUT.png", help="picture to write (default: the map's name with .png)")
    p.add_argument("--scale", default="log", choices=["log", "linear"], help="colour/value scale (default log)")
    p.add_argument("--axis-units", default="auto", choices=["auto", "rlu", "inv-angstrom"],
                   help="axes in reciprocal-lattice units (hkl maps) or 1/angstrom; auto picks r.l.u. for hkl maps")
    p.add_argument("--quantity", default="intensity",
                   choices=["intensity", "amplitude-abs", "amplitude-real", "amplitude-imag", "phase"])
    p.add_argument("--slice-axis", metavar="AXIS", help="volumes: axis to cut (0, 1, 2 or its name; default the last)")
    p.add_argument("--slice-index", type=int, metavar="I",
                   help="volumes: index along that axis (default: through 0, else the middle)")
    p.add_argument("--cmap", default="viridis", help="matplotlib colour map (default viridis)")
    p.add_argument("--vmin", type=float, help="lower colour limit")
    p.add_argument("--vmax", type=float, help="upper colour limit")
    p.add_argument("--dpi", type=int, default=100, help="dots per inch (default 100)")
    p.add_argument("--size", default="6.4,5.2", metavar="W,H", help="picture size in inches (default 6.4,5.2)")
    A.add_overwrite(p)
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=cmd_render)

    p = sub.add_parser("info", help="summarise a model file or a map file",
                       description="Print what a model file (atoms, frames, species, box, what is missing) or a map "
                                   "file holds.",
                       epilog=A.MODEL_FILES_HELP + "\n\n" + A.EPILOG_CODES, formatter_class=fmt)
    p.add_argument("file", help="model or map file")
    p.add_argument("--frame", type=int, default=None, help="model files: frame to describe (default the first)")
    A.add_file_options(p)
    A.add_cell_options(p)
    p.add_argument("--count", action="store_true", help="count the atoms of each species (reads the whole frame)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_info)

    p = sub.add_parser("demo", help="build a demonstration model, compute its Bragg and diffuse maps, plot them",
                       description=("Builds a layer of an invented two-element alloy on an octagonal "
                                    "(Ammann-Beenker) tiling with a few frames of thermal jitter, writes it as H5MD, "
                                    "computes Bragg and diffuse maps of the (q_x, q_y) plane, draws PNGs and says "
                                    "where everything went."),
                       epilog=A.EPILOG_CODES, formatter_class=fmt)
    p.add_argument("-o", "--output", default="kinemap-demo-output", metavar="DIR",
                   help="output folder (default ./kinemap-demo-output)")
    A.add_common(p)
    p.set_defaults(func=cmd_demo)
