"""The command line: a thin layer over the library, one call per subcommand."""

from __future__ import annotations

import argparse
import sys

from . import __version__
from .errors import InclinationError

__all__ = ["main"]


def _build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="inclination",
        description="Boundary planes from orientation maps and sections.",
    )
    parser.add_argument("--version", action="version", version=f"inclination {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    demo = sub.add_parser("demo", help="build the demo scenario and run the whole job on it")
    demo.add_argument(
        "--out", default="inclination-demo", help="output folder (default: %(default)s)"
    )
    demo.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    demo.add_argument("--quiet", action="store_true", help="no progress bars")
    return parser


def _run_demo(args) -> int:
    print(
        "inclination demo: the crystallography core is in place; map reading, grains, "
        "traces, planes and sections land in later releases."
    )
    return 0


def main(argv=None) -> int:
    """Run the command line; return the exit status (0 ok, 2 bad input, 1 internal fault)."""
    parser = _build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    try:
        if args.command == "demo":
            return _run_demo(args)
    except InclinationError as exc:
        print(f"inclination: error: {exc}", file=sys.stderr)
        return 2
    return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
