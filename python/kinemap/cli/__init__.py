"""The ``kinemap`` command line.

Only parsing, calling the library and writing results live here. ``main(argv)`` returns the
exit code: 0 success, 1 bad input or a failed computation, 2 a command-line usage error,
3 a file problem (missing, unreadable, corrupt, unwritable, an existing output), 130
interrupted.
"""

from __future__ import annotations

import argparse
import sys

from ._args import (
    EPILOG_CODES,
    EXIT_FILE,
    EXIT_INPUT,
    EXIT_INTERRUPT,
    EXIT_OK,
    EXIT_USAGE,
    Parser,
    UsageError,
    fix_negative_numbers,
    one_line,
)


def build_parser() -> argparse.ArgumentParser:
    from .. import __version__
    from ._commands import add_parsers
    from ._compare import add_parsers as add_compare_parsers
    from ._frames import add_parsers as add_frames_parsers
    from ._powder import add_parsers as add_powder_parsers

    fmt = argparse.RawDescriptionHelpFormatter
    parser = Parser(
        prog="kinemap",
        description=("Kinematic X-ray, neutron and electron diffraction maps from atomistic models.\n\n"
                     "Start with:  kinemap demo            (builds a model, computes and plots its maps)\n"
                     "Then:        kinemap info MODEL      (what a model or map file holds)\n"
                     "             kinemap map MODEL --supercell 20,20,20 --hkl --h -1:5:121 --k -1:5:121 --l 0 "
                     "-o map.h5 --png\n"
                     "             kinemap average MODEL --frames 0:50 --hkl --h 0:4:81 --k 0:4:81 --l 0 -o run\n"
                     "             kinemap render map.h5 -o map.png\n"
                     "             kinemap powder MODEL -o powder.h5 --png   |   kinemap pdf MODEL -o pdf.h5 --png"),
        epilog=EPILOG_CODES, formatter_class=fmt)
    parser.add_argument("--version", action="version", version=f"kinemap {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    add_parsers(sub, fmt)
    add_frames_parsers(sub)
    add_compare_parsers(sub)
    add_powder_parsers(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the ``kinemap`` command line; returns the exit code (see the module notes)."""
    from ..errors import InvalidInputError, KinemapError

    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        try:
            args = parser.parse_args(fix_negative_numbers(argv))
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
        print(f"kinemap: error: {one_line(exc)}", file=sys.stderr)
        return EXIT_FILE
    except (InvalidInputError, KinemapError, ValueError) as exc:
        print(f"kinemap: error: {one_line(exc)}", file=sys.stderr)
        return EXIT_INPUT
    except MemoryError:
        print("kinemap: error: out of memory; use a smaller grid or a smaller --chunk-atoms", file=sys.stderr)
        return EXIT_INPUT


__all__ = ["main", "build_parser", "EXIT_OK", "EXIT_INPUT", "EXIT_USAGE", "EXIT_FILE", "EXIT_INTERRUPT"]
