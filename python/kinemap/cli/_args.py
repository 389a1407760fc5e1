"""Argument handling shared by the commands: option groups, value parsers, the grid, the
model source, and messages. No computation lives here."""

from __future__ import annotations

import argparse
import datetime as _dt
import re
import sys
import warnings
from pathlib import Path

import numpy as np

EXIT_OK, EXIT_INPUT, EXIT_USAGE, EXIT_FILE, EXIT_INTERRUPT = 0, 1, 2, 3, 130

EPILOG_CODES = """exit codes: 0 success, 1 bad input or failed computation, 2 usage error,
3 file problem (missing, unreadable, corrupt, unwritable, existing output), 130 interrupted.
Conventions: q in 1/angstrom, |q| = 4 pi sin(theta)/lambda; positions in angstrom;
reciprocal-lattice units q = 2 pi (h a* + k b* + l c*)."""

GRID_HELP = """grid (choose one):
  --hkl --h LO:HI:N --k LO:HI:N --l L    reciprocal-lattice units of the cell (--cell or
                                         --supercell, else the model's box); each of h, k, l a
                                         range or a number
  --plane ORIGIN U V --size NU,NV        points ORIGIN + i/(NU-1) U + j/(NV-1) V
  --volume ORIGIN U V W --size NU,NV,NW  the same in three dimensions
  --line START STOP --size N             N points from START to STOP, both included
  --points FILE                          q-vectors (1/angstrom) from a .npy file of shape
                                         (..., 3) or a text file with 3 columns
vectors are written with commas: 0,0,0  or  -4,0,0; they are in 1/angstrom, or in h, k, l
of the cell with --rlu (e.g. --line 0,0,0 3,3,0 --size 301 --rlu for the [h h 0] line).
On a periodic model, a grid off the box's reciprocal lattice shows the finite-box ripple of
every Bragg peak; --snap moves it to the nearest grid on that lattice."""

MODEL_FILES_HELP = """model files: H5MD (particles/<group>/position, species, box; units from the
'unit' attributes), the plain HDF5 layout (/positions, /species, optional /occupancy, /b_iso,
/cell), extended XYZ, LAMMPS dumps, and CIF/POSCAR/... with ASE installed. A file without
species takes --species (one label, a text or .npy file of labels, or a dataset path in the
file). See docs/model-files.md."""

_NUMERIC_ARG = re.compile(r"^-[\d.][\d.,:eE+-]*$")


class UsageError(Exception):
    """A command-line mistake found after parsing (exit code 2)."""


class Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit code 2
        raise UsageError(f"{message} (see {self.prog} --help)")


def fix_negative_numbers(argv: list[str]) -> list[str]:
    """argparse reads '-4,0,0' or '-4:4:161' as an option; a leading space keeps it a value."""
    return [" " + a if _NUMERIC_ARG.match(a) else a for a in argv]


# --------------------------------------------------------------------------------------
# value parsers
# --------------------------------------------------------------------------------------
def vector(text: str, name: str, n: int = 3) -> np.ndarray:
    try:
        vals = [float(x) for x in text.strip().replace(" ", "").split(",") if x != ""]
    except ValueError:
        raise UsageError(f"{name} {text.strip()!r} must be {n} numbers separated by commas, e.g. 0,0,0") from None
    if len(vals) != n or not np.all(np.isfinite(vals)):
        raise UsageError(f"{name} {text.strip()!r} must be {n} finite numbers separated by commas")
    return np.array(vals)


def sizes(text: str | None, n: int, option: str) -> tuple:
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


def hkl_range(text: str | None, name: str):
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


def cell(text: str) -> np.ndarray:
    """--cell a,b,c,alpha,beta,gamma (Å, degrees) or 9 numbers (rows a, b, c)."""
    from ..model import cell_from_parameters

    try:
        vals = [float(x) for x in text.replace(" ", "").split(",") if x]
    except ValueError:
        raise UsageError(f"--cell {text!r} must be 6 numbers a,b,c,alpha,beta,gamma (angstrom, degrees) "
                         "or 9 numbers (rows a, b, c)") from None
    if len(vals) == 9:
        return np.array(vals).reshape(3, 3)
    if len(vals) == 6:
        return cell_from_parameters(*vals)
    raise UsageError(f"--cell {text!r} must be 6 numbers a,b,c,alpha,beta,gamma or 9 numbers (rows a, b, c)")


def supercell(text: str) -> np.ndarray:
    """--supercell n1,n2,n3 or 9 whole numbers (rows of P, box = P·cell)."""
    try:
        vals = [float(x) for x in text.replace(" ", "").split(",") if x]
    except ValueError:
        raise UsageError(f"--supercell {text!r} must be three whole numbers n1,n2,n3 or nine (rows of P)") from None
    if len(vals) == 3:
        return np.array(vals)
    if len(vals) == 9:
        return np.array(vals).reshape(3, 3)
    raise UsageError(f"--supercell {text!r} must be three whole numbers n1,n2,n3 or nine (rows of P)")


def load_points(path: str) -> np.ndarray:
    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"--points: no such file: {path!r}")
    try:
        if p.suffix.lower() == ".npy":
            q = np.load(p, allow_pickle=False)
        else:
            q = np.loadtxt(p, ndmin=2)
    except (ValueError, OSError) as exc:
        from ..errors import ModelFileError

        raise ModelFileError(f"--points {path!r}: cannot read q-vectors ({exc})") from None
    return q


def slice_axis(text):
    if text is None:
        return None
    text = text.strip()
    return int(text) if text.lstrip("-").isdigit() else text


def sizes_float(text: str):
    parts = re.split(r"[,x×]", text.strip().lower())
    try:
        w, h = (float(p) for p in parts)
    except ValueError:
        raise UsageError(f"--size {text!r} must be WIDTH,HEIGHT in inches, e.g. 6.4,5.2") from None
    return (w, h)


# --------------------------------------------------------------------------------------
# option groups
# --------------------------------------------------------------------------------------
def add_model_options(p, frame: str | None):
    g = p.add_argument_group("model file")
    g.add_argument("model", help="model file: H5MD, plain HDF5 layout, extended XYZ, LAMMPS dump, "
                                 "or CIF/POSCAR/... when ASE is installed")
    if frame == "one":
        g.add_argument("--frame", type=int, default=None, metavar="I",
                       help="frame to use, 0-based; negative counts from the end (default: the first)")
    elif frame == "many":
        g.add_argument("--frames", default=None, metavar="SEL",
                       help="frames to use: all (default), START:STOP:STEP like 0:50:5 or -10:, or a list 0,3,7")
    add_file_options(g)
    add_cell_options(g)


def add_file_options(g):
    g.add_argument("--format", choices=["h5md", "hdf5", "extxyz", "lammps-dump", "ase"],
                   help="input format when the file name does not tell it")
    g.add_argument("--group", help="H5MD particle group under /particles (default: the only one, or 'all')")
    g.add_argument("--species", metavar="LABELS",
                   help="species the file lacks (or to override it): one label for all atoms (Fe), a text or .npy "
                        "file with one label per atom, or a dataset path in the file (/particles/all/type)")
    g.add_argument("--species-map", metavar="MAP",
                   help="labels of integer species codes, e.g. 1=Fe,2=Ni (LAMMPS types, integer H5MD species)")
    g.add_argument("--unwrap", action="store_true", help="H5MD: add image flags x box edges to the positions")
    g.add_argument("--allow-external", action="store_true",
                   help="follow HDF5 external links and external raw storage (refused by default: a file "
                        "could otherwise make kinemap read other files)")


def add_cell_options(g):
    g.add_argument("--cell", metavar="CELL",
                   help="the parent cell that h, k, l refer to: a,b,c,alpha,beta,gamma (angstrom, degrees) or 9 "
                        "numbers (rows a, b, c); default: the model's box")
    g.add_argument("--supercell", metavar="N1,N2,N3",
                   help="the model's box holds N1 x N2 x N3 parent cells (or 9 whole numbers: box = P cell); "
                        "gives the parent cell without typing it")


def add_grid_options(p):
    g = p.add_argument_group("grid (choose one; see the notes below)")
    g.add_argument("--hkl", action="store_true", help="grid in reciprocal-lattice units of the cell (give --h, --k, --l)")
    g.add_argument("--h", metavar="LO:HI:N|H", help="h range or value (with --hkl; default 0)")
    g.add_argument("--k", metavar="LO:HI:N|K", help="k range or value (with --hkl; default 0)")
    g.add_argument("--l", metavar="LO:HI:N|L", help="l range or value (with --hkl; default 0)")
    g.add_argument("--plane", nargs=3, metavar=("ORIGIN", "U", "V"),
                   help="plane with corner ORIGIN and full edges U, V; needs --size NU,NV")
    g.add_argument("--volume", nargs=4, metavar=("ORIGIN", "U", "V", "W"),
                   help="volume with corner ORIGIN and edges U, V, W; needs --size NU,NV,NW")
    g.add_argument("--line", nargs=2, metavar=("START", "STOP"), help="straight line, both ends included; needs --size N")
    g.add_argument("--size", metavar="N[,N...]", help="points along each edge of --plane/--volume/--line")
    g.add_argument("--rlu", action="store_true",
                   help="vectors of --plane/--volume/--line are h, k, l of the cell instead of 1/angstrom")
    g.add_argument("--points", metavar="FILE", help="q-vectors from a .npy (..., 3) or 3-column text file")
    g.add_argument("--snap", action="store_true",
                   help="move a regular grid onto the reciprocal lattice of the model's periodic box")


def add_compute_options(p):
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


def add_run_options(p):
    g = p.add_argument_group("running beyond one process")
    g.add_argument("--cluster", metavar="local|ADDRESS",
                   help="run the exact sum as tasks on a Dask cluster: 'local' (worker processes on this machine) or "
                        "a scheduler address such as tcp://host:8786 (needs pip install kinemap[cluster]; model files "
                        "must be reachable under the same path from every worker)")
    g.add_argument("--checkpoint", metavar="FOLDER",
                   help="keep finished q-blocks in FOLDER; the same command run again resumes from them")
    g.add_argument("--block-points", type=int, metavar="N", help="q-points per task block (default 65536)")


def run_options(args) -> dict:
    return {"cluster": args.cluster, "checkpoint": args.checkpoint, "block_points": args.block_points}


def add_common(p):
    p.add_argument("--threads", type=int, default=None, metavar="N",
                   help="worker threads (default: KINEMAP_NUM_THREADS or all cores)")
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors and cautions")


def add_overwrite(g):
    g.add_argument("--overwrite", action="store_true", help="replace existing output files (default: keep them)")


# --------------------------------------------------------------------------------------
# turning options into objects
# --------------------------------------------------------------------------------------
def open_options(args) -> dict:
    """Keyword arguments of kinemap.open_model from the model-file options."""
    opts: dict = {}
    for name in ("format", "group", "species_map"):
        if getattr(args, name, None):
            opts[name] = getattr(args, name)
    if getattr(args, "unwrap", False):
        opts["unwrap"] = True
    if getattr(args, "allow_external", False):
        opts["allow_external"] = True
    if getattr(args, "species", None):
        opts["species"] = args.species
    if getattr(args, "cell", None):
        opts["cell"] = cell(args.cell)
    if getattr(args, "supercell", None):
        opts["supercell"] = supercell(args.supercell)
    return opts


def probe_options(args) -> dict:
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


def grid_cell(args, source):
    """The cell for h, k, l (--cell, else the model's), and a note when it is the model's whole
    box because no cell was given."""
    if getattr(args, "cell", None):
        return cell(args.cell), None
    if source is not None and source.cell is not None:
        c = np.asarray(source.cell)
        given = bool(getattr(args, "cell", None) or getattr(args, "supercell", None))
        note = None
        if not given and source.box is not None and np.allclose(c, source.box):
            lengths = np.linalg.norm(c, axis=1)
            note = ("h, k, l refer to the model's whole box (|a|, |b|, |c| = "
                    f"{', '.join(f'{x:.4g}' for x in lengths)} angstrom), not to a unit cell: give the parent cell "
                    "with --cell or --supercell N1,N2,N3")
            if lengths.min() > 15:
                note += "; a box this large probably holds many unit cells"
        return c, note
    raise UsageError("h, k, l need a cell: the model has none, so give --cell a,b,c,alpha,beta,gamma")


def build_grid(args, source=None):
    """The grid the options describe (with --snap applied), and the notes to print."""
    from ..qgrid import QGrid, RegularGrid

    chosen = [k for k in ("points", "line", "plane", "volume", "hkl") if getattr(args, k)]
    if not chosen:
        raise UsageError("choose a grid: --hkl, --plane, --volume, --line or --points (see --help)")
    if len(chosen) > 1:
        raise UsageError(f"choose one grid, got {', '.join('--' + c for c in chosen)}")
    kind = chosen[0]
    notes: list[str] = []
    if kind != "hkl" and any(getattr(args, x) is not None for x in ("h", "k", "l")):
        raise UsageError("--h/--k/--l go with --hkl")
    if kind in ("points", "hkl") and args.size is not None:
        raise UsageError(f"--size does not apply to --{kind}")
    if args.rlu and kind in ("points", "hkl"):
        raise UsageError(f"--rlu applies to --line, --plane and --volume, not --{kind}")
    c = None
    if kind == "hkl" or args.rlu:
        c, note = grid_cell(args, source)
        if note:
            notes.append(note)
    grid: QGrid
    if kind == "points":
        grid = QGrid.points(load_points(args.points))
    elif kind == "line":
        a, b = (vector(v, "--line") for v in args.line)
        (n,) = sizes(args.size, 1, "--line")
        grid = QGrid.line(a, b, n, cell=c)
    elif kind == "plane":
        o, u, v = (vector(x, "--plane") for x in args.plane)
        grid = QGrid.plane(o, u, v, sizes(args.size, 2, "--plane"), cell=c)
    elif kind == "volume":
        o, u, v, w = (vector(x, "--volume") for x in args.volume)
        grid = QGrid.volume(o, u, v, w, sizes(args.size, 3, "--volume"), cell=c)
    else:
        grid = QGrid.hkl(c, h=hkl_range(args.h, "h"), k=hkl_range(args.k, "k"), l=hkl_range(args.l, "l"))
    if getattr(args, "snap", False):
        box = None if source is None else source.box
        if box is None:
            raise UsageError("--snap needs a periodic model: this one has no box")
        if not isinstance(grid, RegularGrid):
            raise UsageError("--snap applies to regular grids, not --points")
        if not grid.is_commensurate(box):
            old = grid.shape
            grid = grid.snapped(box)
            notes.append(f"grid snapped onto the box's reciprocal lattice: shape {old} -> {grid.shape}")
    return grid, notes


def check_png(args, grid) -> None:
    if args.png and not grid.is_regular:
        raise UsageError("--png needs a regular grid (plane, volume, line or hkl); a --points map has no layout to draw")


def say(args, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text)


def note(text: str) -> None:
    print(f"kinemap: note: {text}", file=sys.stderr)


def print_cautions(cautions) -> None:
    seen = set()
    for c in cautions:
        if c not in seen:
            seen.add(c)
            print(f"kinemap: caution: {c}", file=sys.stderr)


class Cautions(warnings.catch_warnings):
    """Collects the library's warnings (kinematic approximation, off-lattice grids, few
    frames) during a command and prints each once as a caution."""

    def __init__(self):
        super().__init__(record=True)

    def __enter__(self):
        caught = super().__enter__()
        assert caught is not None  # (record=True)
        self.caught = caught
        warnings.simplefilter("always")
        return self

    def __exit__(self, *exc):
        super().__exit__(*exc)
        print_cautions(str(w.message) for w in self.caught if issubclass(w.category, UserWarning))
        return False


def provenance(args, pattern, source_desc: dict, frames) -> dict:
    from .. import __version__

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


def one_line(exc: BaseException) -> str:
    text = str(exc)
    if isinstance(exc, OSError) and exc.filename and exc.strerror and str(exc.filename) not in text:
        text = f"{exc.strerror}: {exc.filename!r}"
    elif isinstance(exc, OSError) and exc.strerror and exc.filename:
        text = f"{exc.strerror}: {str(exc.filename)!r}"
    return " ".join(text.split()) or type(exc).__name__
