"""The command line: a thin layer over the library, one call per subcommand.

Exit status 0 on success, 2 on bad input (one line on stderr naming the file,
the field and what was expected; no traceback), 1 on an internal fault.

Output levels: by default progress bars (on a terminal, every stage including
writing) and a few summary lines ending with the results folder; ``--quiet``
drops the progress bars only; ``--silent`` drops everything but errors.
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


#: The field reference (generated from schemas/job.schema.json by scripts/make_job_doc.py).
_JOB_DOC = "docs/job-file.md"


def _add_common(p: argparse.ArgumentParser, *, default_out: str) -> None:
    p.add_argument("--out", default=default_out, help="output folder (default: %(default)s)")
    p.add_argument(
        "--overwrite", action="store_true", help="replace an existing output folder when done"
    )
    _add_output_level(p)


def _add_output_level(p: argparse.ArgumentParser) -> None:
    level = p.add_mutually_exclusive_group()
    level.add_argument(
        "--quiet", action="store_true", help="no progress bars; the summary lines stay"
    )
    level.add_argument(
        "--silent", action="store_true", help="print nothing but errors (no bars, no summary)"
    )


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
    init = sub.add_parser(
        "init",
        help="write a first job file from a map: columns, unit, grid, step and phases recognised",
        description="Read a map's header or arrays and write a job file with every recognised "
        "field filled, every guess listed in its notes, and placeholders (FILL-IN) for what "
        f"you must decide: the axes, the data frame and the phases. Fields: {_JOB_DOC}",
    )
    init.add_argument("map", help="the map: csv, tsv, text table, .npz, .tif (+ sidecar), .h5")
    init.add_argument("--out", default="job.json", help="job file to write (default: %(default)s)")
    init.add_argument(
        "--phase",
        action="append",
        default=[],
        metavar="ID=PRESET",
        help="fill phase ID from a preset: fcc, bcc or hcp (lattice parameters from memory)",
    )
    init.add_argument("--force", action="store_true", help="replace an existing job file")
    analyse = sub.add_parser(
        "analyse",
        help="the whole job, driven by a job file",
        description=f"The whole job, driven by a job file. Every field: {_JOB_DOC}",
    )
    analyse.add_argument("job", help=f"job file (JSON; fields in {_JOB_DOC})")
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
    _add_output_level(report)
    stereology = sub.add_parser(
        "stereology", help="grains and traces, then the plane distribution by stereology"
    )
    stereology.add_argument("job", help="job file (JSON)")
    _add_common(stereology, default_out="inclination-stereology")
    batch = sub.add_parser(
        "batch",
        help="many jobs at once on a dask cluster (local unless --scheduler), one folder each",
        description="Run each job as one task into OUT/<job name>/ (the files of analyse), "
        "skip jobs finished before with unchanged inputs and settings, and write batch.json, "
        "boundaries_all.csv, summary.md and the pooled stereology/. Needs the extra "
        "inclination[cluster]. See docs/batch.md.",
    )
    batch.add_argument("jobs", nargs="+", metavar="JOB", help="job files (JSON)")
    batch.add_argument("--out", required=True, help="the batch folder")
    batch.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="a running dask scheduler (tcp://host:8786); default: a local cluster",
    )
    batch.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="worker processes of the local cluster; with --scheduler, workers to wait for",
    )
    _add_output_level(batch)
    return parser


def _progress(quiet: bool):
    """A progress factory for the library, or None when silent.

    Bars appear only on a terminal: a log file or a pipe stays clean.
    """
    if quiet or not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    def factory(total, desc):
        # Library stages report fractions on a 0–100 scale; writing counts file groups.
        return tqdm(total=total, desc=desc, unit="%" if total == 100 else " step", leave=False)

    return factory


def _dispatch(args) -> int:
    from . import pipeline

    if args.command == "init":
        return _init(args)
    silent = getattr(args, "silent", False)
    progress = _progress(getattr(args, "quiet", False) or silent)
    if args.command == "batch":
        return _batch(args, progress, silent)
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
    if not silent:
        for line in result.messages:
            print(line)
        print(f"results: {result.out_dir}")
    # A frame warning goes to stderr even with --silent: it says the results may be wrong.
    for line in result.warnings:
        print(line, file=sys.stderr)
    return 0


def _batch(args, progress, silent: bool) -> int:
    from .batch import run_batch

    say = (lambda _line: None) if silent else (lambda line: print(line, flush=True))
    result = run_batch(
        args.jobs,
        args.out,
        scheduler=args.scheduler,
        workers=args.workers,
        progress=progress,
        notify=say,
    )
    for line in result.messages:
        # A failed job's line is an error, as analyse's would be: stderr, even with --silent.
        if ": inclination:" in line:
            print(line, file=sys.stderr)
        elif not silent:
            print(line)
    return result.exit_status


def _init(args) -> int:
    from pathlib import Path

    from .errors import SettingError
    from .io.init import propose_job, write_job

    presets = {}
    for item in args.phase:
        pid, sep, name = item.partition("=")
        if not sep or not pid.strip().isdigit():
            raise SettingError(f"Expected --phase ID=PRESET such as 1=fcc, got {item!r}.")
        presets[int(pid)] = name.strip()
    out = Path(args.out)
    proposal = propose_job(args.map, job_dir=out.parent, phases=presets)
    write_job(proposal, out, force=args.force)
    print(f"wrote {out}")
    print("recognised (listed in the job's notes; check each):")
    for line in proposal.recognised:
        print(f"  - {line}")
    print("still to decide (replace every FILL-IN value):")
    for line in proposal.to_decide:
        print(f"  - {line}")
    print(f"every field is described in {_JOB_DOC}")
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
