"""The command line: a thin layer over the library, one call per subcommand.

Exit status 0 on success, 2 on bad input (one line on stderr naming the file,
the field and what was expected; no traceback), 1 on an internal fault.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
import traceback
from collections.abc import Sequence

from . import __version__
from .errors import InclinationError

__all__ = ["main"]

_STAGES = {
    "grains": "read the map and segment it into grains",
    "traces": "grains, the boundary network and straight segments",
    "planes": "traces plus candidate planes: the per-boundary table without sections",
    "sections": "planes plus the sections' measured dips and the frame verdict",
}


def _add_common(p: argparse.ArgumentParser, *, default_out: str) -> None:
    p.add_argument("--out", default=default_out, help="output folder (default: %(default)s)")
    p.add_argument(
        "--overwrite", action="store_true", help="replace an existing output folder when done"
    )
    p.add_argument("--quiet", action="store_true", help="no progress bars")


def _add_candidates(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--all-candidates",
        action="store_true",
        help="write every candidate plane to candidates.jsonl, not only those that fit or are "
        "shared (job setting planes.candidate_rows)",
    )


def _build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="inclination",
        description="Boundary planes from orientation maps and sections.",
    )
    parser.add_argument("--version", action="version", version=f"inclination {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    demo = sub.add_parser(
        "demo", help="write the demo scenario (synthetic sample) and run the whole job on it"
    )
    _add_common(demo, default_out="inclination-demo")
    demo.add_argument("--seed", type=int, default=7, help="seed of the synthetic sample")
    analyse = sub.add_parser("analyse", help="the whole job, driven by a job file")
    analyse.add_argument("job", help="job file (JSON)")
    _add_common(analyse, default_out="inclination-out")
    _add_candidates(analyse)
    for name, text in _STAGES.items():
        p = sub.add_parser(name, help=text)
        p.add_argument("job", help="job file (JSON)")
        _add_common(p, default_out=f"inclination-{name}")
        if name in ("planes", "sections"):
            _add_candidates(p)
    audit = sub.add_parser(
        "audit", help="the frame audit alone: which frame the twin traces support (audit.json)"
    )
    audit.add_argument("job", help="job file (JSON)")
    _add_common(audit, default_out="inclination-audit")
    report = sub.add_parser(
        "report", help="write report.html and report.md again from a finished run's folder"
    )
    report.add_argument("run", help="output folder of an earlier analyse run")
    stereology = sub.add_parser(
        "stereology", help="grains and traces, then the plane distribution by stereology"
    )
    stereology.add_argument("job", help="job file (JSON)")
    _add_common(stereology, default_out="inclination-stereology")
    return parser


def _progress(quiet: bool):
    """A progress factory for the library, or None when silent.

    Bars appear only on a terminal: a log file or a pipe stays clean.
    """
    if quiet or not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    def factory(total, desc):
        return tqdm(total=total, desc=desc, unit="%", leave=False)

    return factory


def _dispatch(args) -> int:
    from . import pipeline

    progress = _progress(getattr(args, "quiet", True))
    if args.command == "demo":
        result = pipeline.demo(
            args.out, seed=args.seed, overwrite=args.overwrite, progress=progress
        )
    elif args.command == "report":
        result = pipeline.rebuild_report(args.run)
    elif args.command == "audit":
        result = pipeline.audit(args.job, args.out, overwrite=args.overwrite, progress=progress)
    elif args.command == "stereology":
        result = pipeline.stereology(
            args.job, args.out, overwrite=args.overwrite, progress=progress
        )
    else:
        stage = "sections" if args.command == "analyse" else args.command
        result = pipeline.analyse(
            args.job,
            args.out,
            stage=stage,
            overwrite=args.overwrite,
            progress=progress,
            all_candidates=getattr(args, "all_candidates", False),
        )
    if not getattr(args, "quiet", False):
        for line in result.messages:
            print(line)
    for line in result.warnings:
        print(line, file=sys.stderr)
    return 0


class _Held:
    """Warnings and library log records kept back until the run's outcome is known."""

    def __init__(self):
        self.warnings: list = []
        self.records: list = []

    def release(self) -> None:
        import warnings

        for w in self.warnings:
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
        for r in self.records:
            print(f"{r.name}: {r.getMessage()}", file=sys.stderr)


@contextlib.contextmanager
def _held_diagnostics():
    import logging
    import warnings

    held = _Held()

    class _Keep(logging.Handler):
        def emit(self, record):
            held.records.append(record)

    logger = logging.getLogger("tifffile")
    handler, propagate = _Keep(), logger.propagate
    logger.addHandler(handler)
    logger.propagate = False
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            yield held
            held.warnings = list(caught)
    finally:
        logger.removeHandler(handler)
        logger.propagate = propagate


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (0 ok, 2 bad input, 1 internal fault)."""
    parser = _build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse has printed its one-line usage error
        return int(exc.code or 0) and 2
    if args.command is None:
        parser.print_help()
        return 2
    try:
        with _held_diagnostics() as held:
            status = _dispatch(args)
        held.release()
        return status
    except InclinationError as exc:
        # One line means one line: library warnings and log records that led up to the
        # refusal (numpy's invalid-value warnings, tifffile's complaints) are dropped.
        print(f"inclination: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("inclination: interrupted; no output folder was replaced.", file=sys.stderr)
        return 1
    except Exception:  # an internal fault: say so plainly, with the trace for a bug report
        traceback.print_exc()
        print(
            "inclination: internal error (a bug, not bad input); please report it with the "
            "trace above.",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
