"""The ``kinemap powder`` and ``kinemap pdf`` commands (registered by :mod:`kinemap.cli`).

``add_parsers(subparsers)`` adds both subcommands to the ``kinemap`` parser; their handlers
``run_powder(args)`` and ``run_pdf(args)`` return the exit code and raise the library's
exceptions, which :func:`kinemap.cli.main` turns into messages and exit codes.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import warnings
from pathlib import Path

import numpy as np

from .._shared.output import check_output
from ._args import EPILOG_CODES as _EPILOG_CODES
from ._args import EXIT_OK, UsageError
from ._args import add_common as _add_common
from ._args import add_model_options as _add_model_options
from ._args import add_overwrite as _add_overwrite
from ._args import open_options as _open_options
from ._args import print_cautions as _print_cautions
from ._args import probe_options as _probe_options
from ._args import say as _say

_POWDER_EPILOG = """Q grid: --q QMIN:QMAX:N (1/angstrom, both ends included) or --q-file FILE (one |Q| per
line, or a .npy array). Models with a box are periodic (pairs by the minimum image up to
--r-max, at most half the smallest box width); --particle treats them as finite particles
(all pairs unless --r-max is given)."""

_PDF_EPILOG = """r grid: --r RMIN:RMAX:N (angstrom, equally spaced). Direct route from the pair
histograms (default), or --q-range QMIN:QMAX for G(r) through the computed F(Q) over that
range, with the Lorch window and --q-damp, as a measurement gives it."""


def _linspace(text: str, option: str, unit: str) -> np.ndarray:
    parts = text.strip().split(":")
    if len(parts) != 3:
        raise UsageError(f"{option} {text!r} must be MIN:MAX:N, e.g. 0.5:20:2000 ({unit})")
    try:
        lo, hi, n = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError:
        raise UsageError(f"{option} {text!r} must be MIN:MAX:N with numbers and a whole N") from None
    if not (np.isfinite(lo) and np.isfinite(hi)) or n < 2 or hi <= lo:
        raise UsageError(f"{option} {text!r} needs MIN < MAX and N >= 2")
    return np.linspace(lo, hi, n)


def _pair(text: str, option: str) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in text.strip().split(":"))
    except ValueError:
        raise UsageError(f"{option} {text!r} must be MIN:MAX, e.g. 0.5:25") from None
    return lo, hi


def _q_values(args) -> np.ndarray:
    if args.measured is not None:
        from ..powder import read_profile

        q, _, _ = read_profile(args.measured, x="two_theta" if args.two_theta else "q", wavelength=args.wavelength)
        return q
    if args.q_file is not None:
        p = Path(args.q_file)
        if not p.exists():
            raise FileNotFoundError(f"--q-file: no such file: {args.q_file!r}")
        try:
            q = np.load(p, allow_pickle=False) if p.suffix.lower() == ".npy" else np.loadtxt(p, ndmin=1)
        except (ValueError, OSError) as exc:
            from ..errors import ModelFileError

            raise ModelFileError(f"--q-file {args.q_file!r}: cannot read |Q| values ({exc})") from None
        return np.asarray(q, dtype=np.float64).reshape(-1)
    return _linspace(args.q, "--q", "1/angstrom")


def _sources(args):
    from ..io import open_model

    source = open_model(args.model, **_open_options(args))
    return source, (None if args.frames is None else args.frames)


def _run(compute):
    """Compute with the cautions collected and printed (not raised as warnings)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = compute()
    _print_cautions(str(w.message) for w in caught
                    if w.category.__name__ in ("KinematicApproximationWarning", "PowderCautionWarning"))
    return result


def _provenance(args, source, frames) -> dict:
    from .. import __version__

    return {"provenance": {
        "input_file": str(Path(source.path).resolve()),
        "input_format": getattr(source, "format", ""),
        "frames": list(frames),
        "kinemap_version": __version__,
        "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "command": "kinemap " + " ".join(getattr(args, "argv_used", [])),
    }}


def run_powder(args) -> int:
    """``kinemap powder``: I(Q) by the Debye equation, written as NeXus (and a PNG)."""
    from ..powder import powder

    out = check_output(args.output, overwrite=args.overwrite, inputs=(args.model,))
    png = check_output(out.with_suffix(".png"), overwrite=args.overwrite, what="picture") if args.png else None
    q = _q_values(args)
    source, frames = _sources(args)
    probe_opts = _probe_options(args)
    _say(args, f"model: {source.path} ({source.n_frames} frame(s), {source.n_atoms} atoms); "
               f"{len(q)} |Q| values {q.min():g}..{q.max():g} 1/angstrom; probe {args.probe}")
    pat = _run(lambda: powder(
        source, q, probe=args.probe, box=None if args.particle else "model", r_max=args.r_max, dr=args.dr,
        bin_tol=args.bin_tol, window=args.window, resolution=args.resolution, incoherent=args.incoherent,
        frames=frames, threads=args.threads, chunk_atoms=args.chunk_atoms, progress=not args.no_progress,
        **probe_opts))
    pat.metadata.update(_provenance(args, source, pat.metadata.get("frames", [])))
    pat.save(out, overwrite=args.overwrite)
    md = pat.metadata
    _say(args, f"powder pattern written: {out}  ({md['pairs_binned']} pairs, dr {md['dr_angstrom']:.4g} angstrom, "
               f"max I {float(pat.intensity.max()):.6g} {pat.units}^2)")
    if args.measured is not None:
        from ..powder import compare_powder

        cmp = compare_powder(pat, args.measured, x="two_theta" if args.two_theta else "q",
                             wavelength=args.wavelength, background=args.background)
        _say(args, cmp.summary())
        cmp_out = out.with_name(out.stem + "_compare.h5")
        cmp.save(cmp_out, overwrite=args.overwrite)
        _say(args, f"comparison with {args.measured} written: {cmp_out}")
        if png is not None:
            cmp.plot(cmp_out.with_suffix(".png"), overwrite=args.overwrite)
            _say(args, f"picture written: {cmp_out.with_suffix('.png')}")
    if png is not None:
        from ..powder._results import save_plot

        quantity = {"intensity": "intensity", "total": "total", "structure-factor": "structure_factor",
                    "reduced": "reduced"}[args.plot]
        save_plot(pat, png, quantity=quantity, title=f"{Path(args.model).name} — {args.probe}")
        _say(args, f"picture written: {png}")
    return EXIT_OK


def run_pdf(args) -> int:
    """``kinemap pdf``: G(r), g(r) and the partials, written as NeXus (and a PNG)."""
    from ..powder import pair_distribution

    out = check_output(args.output, overwrite=args.overwrite, inputs=(args.model,))
    png = check_output(out.with_suffix(".png"), overwrite=args.overwrite, what="picture") if args.png else None
    r = _linspace(args.r, "--r", "angstrom")
    source, frames = _sources(args)
    if args.probe is None:
        given = [o for o in ("energy", "wavelength", "voltage", "alias") if getattr(args, o) is not None]
        if given:
            raise UsageError(f"--{given[0]} needs --probe (without one g(r) is weighted by atom numbers)")
        probe_opts = {}
    else:
        probe_opts = _probe_options(args)
    q_range = None if args.q_range is None else _pair(args.q_range, "--q-range")
    _say(args, f"model: {source.path} ({source.n_frames} frame(s), {source.n_atoms} atoms); "
               f"r {r[0]:g}..{r[-1]:g} angstrom in {len(r)} points")
    pdf = _run(lambda: pair_distribution(
        source, r, box=None if args.particle else "model", density=args.density, probe=args.probe,
        thermal=not args.no_thermal, q_range=q_range, q_damp=args.q_damp, lorch=not args.no_lorch, dq=args.dq,
        frames=frames, threads=args.threads, chunk_atoms=args.chunk_atoms, progress=not args.no_progress,
        **probe_opts))
    pdf.metadata.update(_provenance(args, source, pdf.metadata.get("frames", [])))
    pdf.save(out, overwrite=args.overwrite)
    _say(args, f"pair distribution written: {out}  (route: {pdf.metadata['route']}, rho0 {pdf.rho0:.6g} /angstrom^3)")
    if png is not None:
        from ..powder._results import save_plot

        save_plot(pdf, png, quantity=args.plot, title=f"{Path(args.model).name}")
        _say(args, f"picture written: {png}")
    return EXIT_OK


def _probe_group(p, default):
    g = p.add_argument_group("probe")
    g.add_argument("--probe", default=default,
                   help="xray, neutron, electron or unit" + ("" if default else " (default: number weighting)"))
    g.add_argument("--energy", type=float, metavar="KEV", help="X-ray energy in keV (adds f', f'')")
    g.add_argument("--wavelength", type=float, metavar="ANGSTROM", help="X-ray or neutron wavelength in angstrom")
    g.add_argument("--voltage", type=float, metavar="KV", help="electron accelerating voltage in kV")
    g.add_argument("--alias", metavar="MAP", help="site labels to species, e.g. Fe_a=Fe3+,Ow=O")


def _pairs_group(p):
    g = p.add_argument_group("pairs")
    g.add_argument("--frames", default=None, metavar="SEL",
                   help="frames to average: all, START:STOP:STEP like 0:50:5, or a list 0,3,7 (default: the first)")
    g.add_argument("--particle", action="store_true", help="treat the model as a finite particle (ignore its box)")
    g.add_argument("--chunk-atoms", type=int, default=1 << 21, metavar="N",
                   help="atoms per streamed chunk (bounds memory, about 100 bytes per atom; default 2097152)")
    return g


def add_parsers(subparsers) -> None:
    """Add the ``powder`` and ``pdf`` subcommands to the ``kinemap`` parser's subparsers."""
    fmt = argparse.RawDescriptionHelpFormatter
    p = subparsers.add_parser(
        "powder", help="powder pattern I(Q) by the Debye equation (NeXus, optional PNG)",
        description=("Compute the powder pattern I(Q) = sum_i o_i|f_i|^2 + sum_{i!=j} o_i o_j f_i f_j* T_i T_j "
                     "sin(Q r_ij)/(Q r_ij) of a model from binned pair-distance histograms, with S(Q) and F(Q)."),
        epilog=_POWDER_EPILOG + "\n\n" + _EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, None)
    g = p.add_argument_group("Q values (1/angstrom; choose one)")
    g.add_argument("--q", default="0.5:20:2000", metavar="MIN:MAX:N", help="equally spaced |Q| (default 0.5:20:2000)")
    g.add_argument("--q-file", metavar="FILE", help="|Q| values from a text file (one per line) or a .npy array")
    g.add_argument("--measured", metavar="FILE",
                   help="a measured pattern (columns Q I [sigma], .npy, or 1-D NeXus): compute at its Q, fit scale "
                        "and background, print R, wR, chi2 and write OUT_compare.h5")
    g.add_argument("--two-theta", action="store_true",
                   help="the measured pattern's first column is 2theta in degrees (give --wavelength)")
    g.add_argument("--background", default="flat", choices=["none", "flat", "linear", "quadratic", "cubic"],
                   help="background fitted with --measured (default flat)")
    _probe_group(p, "xray")
    g = _pairs_group(p)
    g.add_argument("--r-max", type=float, metavar="ANGSTROM",
                   help="largest pair distance (default: half the box, or all pairs of a particle)")
    g.add_argument("--dr", type=float, metavar="ANGSTROM", help="histogram node spacing (default from --bin-tol)")
    g.add_argument("--bin-tol", type=float, default=1e-4,
                   help="per-pair binning error bound (Q_max dr)^2/24 that sets dr (default 1e-4)")
    g.add_argument("--window", default="lorch", choices=["lorch", "none"], help="window on rho0[g(r)-1] (periodic)")
    g.add_argument("--resolution", type=float, metavar="FWHM", help="Gaussian Q resolution, FWHM in 1/angstrom")
    g.add_argument("--incoherent", action="store_true", help="also compute the Compton (X-ray) or incoherent (neutron) term")
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="OUT.h5", help="NeXus file to write")
    o.add_argument("--png", action="store_true", help="also draw a PNG beside the output file")
    o.add_argument("--plot", default="intensity", choices=["intensity", "total", "structure-factor", "reduced"],
                   help="what the PNG shows (default intensity)")
    _add_overwrite(o)
    _add_common(p)
    p.set_defaults(func=run_powder)

    p = subparsers.add_parser(
        "pdf", help="pair distribution function G(r), g(r) and partials (NeXus, optional PNG)",
        description="Compute G(r) = 4 pi r rho0 [g(r) - 1], g(r) and the partial g_ab(r) of a model.",
        epilog=_PDF_EPILOG + "\n\n" + _EPILOG_CODES, formatter_class=fmt)
    _add_model_options(p, None)
    g = p.add_argument_group("r values (angstrom)")
    g.add_argument("--r", default="0:20:2001", metavar="MIN:MAX:N", help="equally spaced r (default 0:20:2001)")
    _probe_group(p, None)
    g = _pairs_group(p)
    g.add_argument("--density", type=float, metavar="RHO0", help="number density (atoms/angstrom^3), needed for a particle")
    g.add_argument("--no-thermal", action="store_true", help="do not broaden pairs by their B factors")
    g.add_argument("--q-range", metavar="QMIN:QMAX", help="G(r) through F(Q) over this Q range (1/angstrom)")
    g.add_argument("--q-damp", type=float, default=0.0, help="Q damping of G(r), exp(-(q_damp r)^2/2) (default 0)")
    g.add_argument("--no-lorch", action="store_true", help="no Lorch window on F(Q)")
    g.add_argument("--dq", type=float, help="Q step of the transform (default min(0.01, pi/(20 r_max)))")
    o = p.add_argument_group("output")
    o.add_argument("-o", "--output", required=True, metavar="OUT.h5", help="NeXus file to write")
    o.add_argument("--png", action="store_true", help="also draw a PNG beside the output file")
    o.add_argument("--plot", default="G", choices=["G", "g", "radial"], help="what the PNG shows (default G)")
    _add_overwrite(o)
    _add_common(p)
    p.set_defaults(func=run_pdf)


__all__ = ["add_parsers", "run_powder", "run_pdf"]
