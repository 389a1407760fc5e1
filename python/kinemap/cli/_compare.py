"""``kinemap compare``: a measured map beside one model (or several, ranked).

Registered by :mod:`kinemap.cli` (``add_parsers(subparsers)``; the command runs
:func:`run`). Only parsing, calling :func:`kinemap.compare` and writing live here; errors
propagate to ``kinemap.cli.main``, which turns them into exit codes.
"""

from __future__ import annotations

import argparse
import json
import warnings
from pathlib import Path

import numpy as np

from .._shared.output import check_output
from . import _args as A
from ._args import EPILOG_CODES as _EPILOG_CODES
from ._args import EXIT_OK, UsageError
from ._args import add_common as _add_common
from ._args import add_compute_options as _add_compute_options
from ._args import add_grid_options as _add_grid_options
from ._args import cell as _cell
from ._args import print_cautions as _print_cautions
from ._args import probe_options as _probe_options
from ._args import say as _say
from ._args import slice_axis as _slice_axis

_DESCRIPTION = """Put a model beside a measured map: fit scale s and background b of
I_o = s*I_c + b(|q|) by weighted least squares, print R, R_b, wR, chi2_nu and R_exp overall and
per |q| shell, and (with -o) write measured, model, residual and the figures to a NeXus file.

MEASURED is a NeXus NXdata map (axes in 1/angstrom or in h, k, l with --cell), a plain HDF5
dataset (--signal with a grid option) or a .npy volume (with a grid option). CALC is a map
on the same grid, or a model file (computed on its box's reciprocal lattice and averaged into
the measured voxels, or snapped; a model without a periodic box at the measured points).
Several CALCs, or --frames of one model file, are ranked.

Definitions: R = sum|I_o - (s I_c + b)| / sum|I_o|; R_b the same over sum|I_o - b|;
wR = sqrt(sum w r^2 / sum w I_o^2); chi2_nu = sum w r^2 / (N - p); R_exp = sqrt(2/pi) sum sigma
/ sum|I_o|; w = 1/(sigma_o^2 + s^2 sigma_c^2)."""

_EXAMPLES = """examples:
  kinemap compare measured.h5 model.h5md --cell 5.64,5.64,5.64,90,90,90 -o cmp.h5 --png
  kinemap compare measured.h5 run.h5md --frames 0:20 --background linear
  kinemap compare measured.h5 map_a.h5 map_b.h5 --bragg-radius 0.08 --bragg-units r.l.u. --centring F
  kinemap compare volume.npy model.h5md --hkl --h -4:4:161 --k -4:4:161 --l -4:4:161 --cell 4,4,4,90,90,90"""


def add_parsers(subparsers) -> argparse.ArgumentParser:
    """Add the ``compare`` command to the ``kinemap`` sub-command parsers."""
    fmt = argparse.RawDescriptionHelpFormatter
    p = subparsers.add_parser("compare",
                              help="compare a measured map with models: scale, background, R factors, residual",
                              description=_DESCRIPTION, epilog=_EXAMPLES + "\n\n" + _EPILOG_CODES,
                              formatter_class=fmt)
    p.add_argument("measured", help="measured map: NeXus NXdata (HDF5), plain HDF5 with --signal, or .npy")
    p.add_argument("calc", nargs="+", help="model map(s) on the same grid, or model file(s)")
    g = p.add_argument_group("measured map")
    g.add_argument("--group", metavar="PATH", help="NXdata group in the file (default: follow 'default' attributes)")
    g.add_argument("--signal", metavar="DATASET",
                   help="plain HDF5: the intensity dataset (give the grid with the grid options)")
    g.add_argument("--errors", metavar="DATASET", help="dataset (or .npy file) of standard uncertainties")
    g.add_argument("--fixed", metavar="X=V", help="value of h, k or l that is not an axis of the map, e.g. l=0")
    g.add_argument("--mask", metavar="FILE.npy", help="boolean .npy of the map's shape, True = leave out")
    _add_grid_options(p)
    c = p.add_argument_group("cell")
    c.add_argument("--cell", metavar="CELL",
                   help="cell a,b,c,alpha,beta,gamma or 9 numbers (rows a, b, c): for a measured map in h, k, l "
                        "without a cell in the file, for --hkl, for the Bragg exclusion and for model files")
    c.add_argument("--supercell", metavar="N1,N2,N3", help="model files: their box holds N1 x N2 x N3 parent cells")
    f = p.add_argument_group("fit")
    f.add_argument("--scale", default="fit", metavar="fit|S", help="fit the scale (default) or fix it at S")
    f.add_argument("--background", default="flat", choices=["none", "flat", "linear", "quadratic", "cubic"],
                   help="background: none, flat (default) or a polynomial in |q|")
    f.add_argument("--symmetry", metavar="GROUP", help="average both maps over this point group first, e.g. m-3m")
    f.add_argument("--bragg-radius", type=float, metavar="R", help="leave out points within R of allowed reflections")
    f.add_argument("--bragg-units", choices=["r.l.u.", "rlu", "1/angstrom"],
                   help="units of --bragg-radius (required with it)")
    f.add_argument("--centring", choices=["P", "A", "B", "C", "I", "F", "R"],
                   help="allowed reflections from the lattice centring")
    f.add_argument("--reflections", metavar="FILE", help="allowed reflections h k l (text, 3 columns, or .npy)")
    f.add_argument("--peaks", metavar="FILE", help="peak positions in 1/angstrom (text, 3 columns, or .npy)")
    f.add_argument("--resolution", metavar="W|fit",
                   help="Gaussian resolution of the model (sigma, 1/angstrom) or 'fit'")
    f.add_argument("--resolution-max", type=float, metavar="W", help="largest width tried by --resolution fit")
    f.add_argument("--sampling", default="auto", choices=["auto", "average", "centres", "snap", "points"],
                   help="how a model is computed on the measured grid (default auto)")
    f.add_argument("--stream", action="store_true", help="walk through file maps by slabs (maps larger than memory)")
    m = p.add_argument_group("model files")
    m.add_argument("--frame", type=int, metavar="I", help="frame of a model file (default the first)")
    m.add_argument("--frames", metavar="SEL", help="rank these frames of the (one) model file: all, 0:50:5, 0,3,7")
    m.add_argument("--format", choices=["h5md", "hdf5", "extxyz", "lammps-dump", "ase"], help="model file format")
    m.add_argument("--species-map", metavar="MAP", help="labels of integer species codes, e.g. 1=Fe,2=Ni")
    _add_compute_options(p)
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", metavar="OUT.h5", help="write the comparison (the best one when ranking)")
    o.add_argument("--png", action="store_true", help="also draw measured | model | residual into OUT.png")
    o.add_argument("--overwrite", action="store_true", help="replace existing output files")
    o.add_argument("--shells", type=int, default=10, metavar="N", help="|q| shells in the printed table (default 10)")
    o.add_argument("--by", choices=["chi2", "wr_factor", "r_factor", "r_factor_bg"],
                   help="figure to rank several models by (default chi2 with sigma, else wr_factor)")
    o.add_argument("--linear", action="store_true", help="linear colour scale in the PNG (default log)")
    o.add_argument("--slice-axis", metavar="AXIS", help="volumes: axis to cut for the PNG (default the last)")
    o.add_argument("--slice-index", type=int, metavar="I", help="volumes: index along that axis (default the middle)")
    o.add_argument("--profile", metavar="X0,Y0:X1,Y1", help="line of the profiles in the PNG's axis coordinates")
    o.add_argument("--json", action="store_true", help="print the figures as JSON")
    _add_common(p)
    p.set_defaults(func=run)
    return p


def _load_points(path: str, what: str) -> np.ndarray:
    from ..errors import ModelFileError

    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"{what}: no such file: {path!r}")
    try:
        a = np.load(p, allow_pickle=False) if p.suffix.lower() == ".npy" else np.loadtxt(p, ndmin=2)
    except (ValueError, OSError) as exc:
        raise ModelFileError(f"{what} {path!r}: cannot read an (N, 3) table ({exc})") from None
    return a


def _load_mask(path: str) -> np.ndarray:
    from ..errors import ModelFileError

    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"--mask: no such file: {path!r}")
    try:
        m = np.load(p, allow_pickle=False)
    except (ValueError, OSError) as exc:
        raise ModelFileError(f"--mask {path!r} must be a .npy array of booleans ({exc})") from None
    return m


def _exclusion(args):
    given = [x for x in (args.centring, args.reflections, args.peaks) if x]
    if args.bragg_radius is None:
        if given:
            raise UsageError("--centring/--reflections/--peaks need --bragg-radius and --bragg-units")
        return None
    if args.bragg_units is None:
        raise UsageError("--bragg-radius needs --bragg-units (r.l.u. or 1/angstrom)")
    if not given:
        raise UsageError("--bragg-radius needs the reflections: --centring, --reflections or --peaks")
    ex = {"radius": args.bragg_radius, "units": args.bragg_units}
    if args.centring:
        ex["centring"] = args.centring
    if args.reflections:
        ex["hkl"] = _load_points(args.reflections, "--reflections")
    if args.peaks:
        ex["q"] = _load_points(args.peaks, "--peaks")
    if args.cell:
        ex["cell"] = _cell(args.cell)
    return ex


def _fixed(text):
    if text is None:
        return None
    out = {}
    for part in text.split(","):
        if "=" not in part:
            raise UsageError(f"--fixed entry {part!r} must look like l=0")
        k, v = part.split("=", 1)
        k = k.strip().lower()
        if k not in ("h", "k", "l"):
            raise UsageError(f"--fixed names {k!r}; use h, k or l")
        try:
            out[k] = float(v)
        except ValueError:
            raise UsageError(f"--fixed value {v!r} must be a number") from None
    return out


def _measured(args):
    from ..compare import open_map

    has_grid = any(getattr(args, k) for k in ("points", "line", "plane", "volume", "hkl"))
    if has_grid:
        grid, notes = A.build_grid(args)
        for text in notes:
            A.note(text)
        if args.signal is None and not str(args.measured).lower().endswith(".npy"):
            raise UsageError("a grid option describes a plain dataset: give --signal (or a .npy measured map)")
        return open_map(args.measured, args.group, signal=args.signal, errors=args.errors, grid=grid)
    if args.signal is not None:
        raise UsageError("--signal (a plain dataset) needs the grid: --hkl/--volume/--plane/--line/--points")
    cell = _cell(args.cell) if args.cell else None
    return open_map(args.measured, args.group, cell=cell, fixed=_fixed(args.fixed), errors=args.errors)


def _calcs(args):
    """The models or maps to compare, with their names."""
    from ..compare.maps import is_map_file
    from ..io import open_model, select_frames

    opts = {}
    if args.format:
        opts["format"] = args.format
    if args.species_map:
        opts["species_map"] = args.species_map
    if args.frames is not None and len(args.calc) != 1:
        raise UsageError("--frames ranks the frames of one model file; give one CALC")
    calcs, names = [], []
    for path in args.calc:
        if not Path(path).exists():
            raise FileNotFoundError(f"no such file: {path!r}")
        if is_map_file(path):
            if args.frames is not None or args.frame is not None:
                raise UsageError(f"--frame/--frames apply to model files; {path!r} is a map")
            calcs.append(path)
            names.append(Path(path).name)
            continue
        src = open_model(path, frame=args.frame, **opts)
        if args.frames is not None:
            for i in select_frames(args.frames, src.n_frames, str(src.path)):
                calcs.append(src if i == src.frame else src.at_frame(i))
                names.append(f"{Path(path).name}[{i}]")
        else:
            calcs.append(src)
            names.append(f"{Path(path).name}[{src.frame}]")
    return calcs, names


def _scale(text: str):
    if text == "fit":
        return "fit"
    try:
        return float(text)
    except ValueError:
        raise UsageError(f"--scale {text!r} must be 'fit' or a number") from None


def _resolution(text):
    if text is None or text == "fit":
        return text
    try:
        return float(text)
    except ValueError:
        raise UsageError(f"--resolution {text!r} must be a width in 1/angstrom or 'fit'") from None


def _profile(text):
    if text is None:
        return None
    try:
        a, b = text.split(":")
        p0 = tuple(float(x) for x in a.split(","))
        p1 = tuple(float(x) for x in b.split(","))
    except ValueError:
        raise UsageError(f"--profile {text!r} must look like X0,Y0:X1,Y1") from None
    if len(p0) != 2 or len(p1) != 2:
        raise UsageError(f"--profile {text!r} must look like X0,Y0:X1,Y1")
    return (p0, p1)


def run(args) -> int:
    """Run ``kinemap compare`` with parsed arguments; returns the exit code (errors raise)."""
    from ..compare import compare, rank_models

    inputs = [args.measured, *args.calc]
    out = check_output(args.output, overwrite=args.overwrite, inputs=inputs, what="comparison file") \
        if args.output else None
    if args.png and out is None:
        raise UsageError("--png draws beside the comparison file: give -o OUT.h5")
    png = check_output(out.with_suffix(".png"), overwrite=args.overwrite, inputs=inputs, what="picture") \
        if args.png and out is not None else None
    mask = _load_mask(args.mask) if args.mask else None
    meas = _measured(args)
    calcs, names = _calcs(args)
    options = dict(scale=_scale(args.scale), background=args.background, mask=mask, symmetry=args.symmetry,
                   exclude_bragg=_exclusion(args), resolution=_resolution(args.resolution),
                   resolution_max=args.resolution_max, sampling=args.sampling,
                   stream=True if args.stream else None, probe=args.probe, method=args.method, tol=args.tol,
                   threads=args.threads, chunk_atoms=args.chunk_atoms, progress=not args.no_progress,
                   **_probe_options(args))
    if not args.json:
        _say(args, f"measured: {meas.path} {meas.grid.kind} {tuple(meas.grid.shape)}"
                   + (" with sigma" if meas.has_sigma else " (no sigma: unweighted fit, no chi2)"))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if len(calcs) == 1:
            cmp, ranking = compare(calcs[0], meas, **options), None
        else:
            ranking = rank_models(calcs, meas, names=names, by=args.by, **options)
            cmp = ranking.best
    _print_cautions(str(w.message) for w in caught)
    if args.json:
        data = {"figures": cmp.figures(), "definitions": cmp.definitions,
                "model_sampling": cmp.metadata.get("model_sampling", {})}
        if cmp.agreement.q_range is not None:
            data["shells"] = cmp.shells(args.shells).as_dict()
        if ranking is not None:
            data["ranking"] = ranking.rows
        print(json.dumps(data, indent=2, default=lambda x: x.tolist() if hasattr(x, "tolist") else str(x)))
    else:
        if ranking is not None:
            _say(args, str(ranking))
            _say(args, f"\nbest: {ranking.rows[0]['name']}")
        _say(args, cmp.summary())
        if cmp.agreement.q_range is not None:
            _say(args, str(cmp.shells(args.shells)))
    if out is not None:
        cmp.save(out, overwrite=args.overwrite, shells=args.shells)
        _say(args, f"comparison written: {out}")
    if png is not None:
        cmp.plot(png, overwrite=args.overwrite, scale="linear" if args.linear else "log",
                 slice_axis=_slice_axis(args.slice_axis), slice_index=args.slice_index, profile=_profile(args.profile))
        _say(args, f"picture written: {png}")
    return EXIT_OK


__all__ = ["add_parsers", "run"]
