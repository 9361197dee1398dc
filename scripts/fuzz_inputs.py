"""Fuzz the command line with hostile jobs, maps and run folders; print counts by class.

Run by hand (it takes minutes): ``python scripts/fuzz_inputs.py [--cases N] [--seed S]``.
Each case runs ``inclination.cli.main`` in a forked child with a time limit and is
classified as exit 0, exit 2 (one stderr line), exit 2 with more lines, exit 1 (an
internal fault), a hang (time limit) or a crash (a signal); inputs changed are counted
too. The bounded CI version of the same mutations is tests/test_fuzz.py.
"""

from __future__ import annotations

import argparse
import collections
import json
import os
import random
import shutil
import signal
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

import fuzz_cases as fc  # noqa: E402


def job_cases(rng):
    doc = fc.base_job()
    for pointer in fc.number_pointers(doc):
        for raw in fc.BAD_NUMBERS:
            yield "job-number", {"job.json": fc.replace_at(doc, pointer, raw)}, "planes"
    leaves = fc.value_pointers(doc)
    for _ in range(60):
        pointer = rng.choice(leaves)
        raw = rng.choice(
            [*fc.BAD_NUMBERS, '""', '"../../etc/passwd"', '"\\u0000"', '"' + "a" * 5000 + '"']
        )
        yield "job-value", {"job.json": fc.replace_at(doc, pointer, raw)}, "planes"
    for kind in fc.SPECIAL_FILES:
        yield "job-special", {"job.json": ("special", kind)}, "planes"
    yield "job-nesting", {"job.json": fc.deep_nesting()}, "planes"
    yield "job-nesting", {"job.json": '{"phases": ' + "[" * 70 + "]" * 70 + "}"}, "planes"
    settings = [
        (("planes", "floor_deg"), 10),
        (("map", "delimiter"), '"'),
        (("map", "delimiter"), "."),
        (("map", "delimiter"), "\n"),
        (("map", "delimiter"), ";"),
        (("map", "delimiter"), "e"),
        (("map", "delimiter"), "1"),
        (("map", "delimiter"), "-"),
        (("map", "columns"), {"phase": None}),
        (("map", "columns"), {"x_um": "phase"}),
        (("map", "columns"), {"phi1": "y_um"}),
        (("grains", "min_pixels"), 10**6),
        (("grains", "threshold_deg"), 1e-9),
        (("map", "step_um"), 1e-300),
        (("map", "step_um"), 1e300),
    ]
    for pointer, value in settings:
        yield "job-settings", {"job.json": json.dumps(fc.set_at(doc, pointer, value))}, "planes"


def map_cases(rng, base: Path):
    text = (base / "m.csv").read_text()
    for _ in range(80):
        cell = rng.choice(fc.BAD_CELLS)
        mutated = fc.table_text_mutation(text, rng.randrange(1024), rng.randrange(6), cell)
        yield "map-cell", {"m.csv": mutated}, "planes"
    for col in range(6):
        for factor in (1e300, -1e300, 1e-300, 1e20):
            yield "map-scale", {"m.csv": fc.scale_column(text, col, factor)}, "planes"
    for _ in range(20):
        yield "map-truncate", {"m.csv": text[: rng.randrange(len(text))]}, "planes"
    for kind in fc.SPECIAL_FILES:
        yield "map-special", {"m.csv": ("special", kind)}, "planes"
    for kind in fc.NPZ_KINDS:
        yield "map-npz", {"m.npz": ("npz", kind)}, ("planes", "job-npz.json")


def run_cases(rng, base: Path):
    for name in ("summary.json", "boundaries.json"):
        doc = json.loads((base / "run" / name).read_text())
        leaves = fc.value_pointers(doc)
        for _ in range(60):
            pointer = rng.choice(leaves)
            raw = rng.choice([*fc.BAD_NUMBERS, '"<script>x</script>"', '""', '"a"'])
            yield "run-value", {f"run/{name}": fc.replace_at(doc, pointer, raw)}, "report"
        for kind in fc.SPECIAL_FILES:
            yield "run-special", {f"run/{name}": ("special", kind)}, "report"
        yield "run-nesting", {f"run/{name}": fc.deep_nesting()}, "report"
        yield "run-value", {f"run/{name}": "[1, 2]"}, "report"
    yield "run-special", {"run/boundaries.png": ("special", "fifo")}, "report"


def apply(case_dir: Path, changes: dict) -> None:
    for rel, content in changes.items():
        path = case_dir / rel
        if isinstance(content, tuple) and content[0] == "special":
            fc.make_special(path, content[1])
        elif isinstance(content, tuple) and content[0] == "npz":
            fc.forged_npz(path, content[1])
        else:
            path.write_text(content)


def argv_for(case_dir: Path, command) -> list:
    if command == "report":
        return ["report", str(case_dir / "run")]
    job = "job.json"
    if isinstance(command, tuple):
        command, job = command
    return [command, str(case_dir / job), "--out", str(case_dir / "out"), "--quiet"]


def run_one(argv, case_dir: Path, timeout_s: float):
    out_path, err_path = case_dir / ".stdout", case_dir / ".stderr"
    pid = os.fork()
    if pid == 0:  # child
        try:
            fd_out = os.open(out_path, os.O_WRONLY | os.O_CREAT, 0o644)
            fd_err = os.open(err_path, os.O_WRONLY | os.O_CREAT, 0o644)
            os.dup2(fd_out, 1)
            os.dup2(fd_err, 2)
            from inclination.cli import main

            code = main(argv)
            sys.stdout.flush()
            sys.stderr.flush()
        except BaseException:  # noqa: BLE001 - report any escape as exit 1
            code = 1
        os._exit(code)
    t0 = time.monotonic()
    while True:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done:
            break
        if time.monotonic() - t0 > timeout_s:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
            return "hang", ""
        time.sleep(0.01)
    err = err_path.read_text(errors="replace")
    if os.WIFSIGNALED(status):
        return f"signal {os.WTERMSIG(status)}", err
    code = os.WEXITSTATUS(status)
    if code == 2:
        lines = [ln for ln in err.splitlines() if ln.strip()]
        return ("exit 2" if len(lines) == 1 else "exit 2, several lines"), err
    return f"exit {code}", err


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--timeout", type=float, default=30.0)
    parser.add_argument("--show", type=int, default=3, help="examples shown per bad class")
    args = parser.parse_args(argv)
    os.environ.setdefault("MPLBACKEND", "Agg")
    rng = random.Random(args.seed)
    work = Path(tempfile.mkdtemp(prefix="inclination-fuzz-"))
    base = fc.make_case(work / "base")
    cases = [*job_cases(rng), *map_cases(rng, base), *run_cases(rng, base)]
    counts = collections.Counter()
    examples = collections.defaultdict(list)
    t0 = time.monotonic()
    for i, (cls, changes, command) in enumerate(cases):
        case_dir = work / f"c{i}"
        shutil.copytree(base, case_dir, symlinks=True)
        apply(case_dir, changes)
        before = fc.snapshot(case_dir)
        result, err = run_one(argv_for(case_dir, command), case_dir, args.timeout)
        after = fc.snapshot(case_dir)
        changed = [
            k
            for k in before
            if not k.startswith((".std", "out/", "run/report")) and after.get(k) != before[k]
        ]
        counts[(cls, result)] += 1
        if changed:
            counts[(cls, "inputs changed")] += 1
        if result not in ("exit 0", "exit 2") and len(examples[(cls, result)]) < args.show:
            examples[(cls, result)].append((changes, err.strip().splitlines()[-3:]))
        shutil.rmtree(case_dir, ignore_errors=True)
    print(f"{len(cases)} cases in {time.monotonic() - t0:.0f} s")
    for cls in sorted({c for c, _ in counts}):
        row = {r: n for (c, r), n in counts.items() if c == cls}
        print(f"{cls:14s} " + ", ".join(f"{r}: {n}" for r, n in sorted(row.items())))
    bad = sum(n for (c, r), n in counts.items() if r not in ("exit 0", "exit 2"))
    print(f"not exit 0 or one-line exit 2: {bad}")
    for key, items in examples.items():
        for changes, tail in items:
            short = {k: (v if isinstance(v, tuple) else v[:80]) for k, v in changes.items()}
            print(f"  {key}: {short} -> {tail}")
    shutil.rmtree(work, ignore_errors=True)
    return 0 if bad == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
