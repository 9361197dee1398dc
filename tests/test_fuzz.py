"""Bounded fuzz of the command line: mutated jobs, maps and run folders.

Whatever the mutation, a run ends with exit 0 or exit 2 (never 1, an internal
fault), says what was wrong in one stderr line on exit 2, and leaves its inputs'
bytes unchanged. The mutations are those of tests/fuzz_cases.py; the long run by
hand is scripts/fuzz_inputs.py. Special files (FIFOs, devices) are in
tests/test_limits.py, where a hang cannot stall this loop.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path

import fuzz_cases as fc
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from inclination.cli import main


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return fc.make_case(tmp_path_factory.mktemp("fuzz-base"))


def _check(base: Path, changes: dict, argv_of, capsys) -> int:
    with tempfile.TemporaryDirectory() as tmp:
        case = Path(tmp) / "case"
        shutil.copytree(base, case, symlinks=True)
        for rel, text in changes.items():
            if isinstance(text, tuple):
                fc.forged_npz(case / rel, text[1])
            else:
                (case / rel).write_text(text)
        before = fc.snapshot(case)
        capsys.readouterr()
        status = main(argv_of(case))
        err = capsys.readouterr().err
        assert status in (0, 2), err
        if status == 2:
            assert len([ln for ln in err.splitlines() if ln.strip()]) == 1, err
        after = fc.snapshot(case)
        changed = [
            k
            for k in before
            if not k.startswith(("out", str(Path("run") / "report"))) and after.get(k) != before[k]
        ]
        assert changed == []
        return status


def _planes(job="job.json"):
    return lambda case: ["planes", str(case / job), "--out", str(case / "out"), "--quiet"]


_DOC = fc.base_job()
# capsys is read out at the start of every example, so sharing it across them is safe.
_CAPSYS = [HealthCheck.function_scoped_fixture]


@settings(max_examples=15, suppress_health_check=_CAPSYS)
@given(
    pointer=st.sampled_from(fc.value_pointers(_DOC)),
    raw=st.sampled_from([*fc.BAD_NUMBERS, '""', '"x"', '"\\u0000"']),
)
def test_job_mutations(base, capsys, pointer, raw):
    _check(base, {"job.json": fc.replace_at(_DOC, pointer, raw)}, _planes(), capsys)


@settings(max_examples=12, suppress_health_check=_CAPSYS)
@given(
    row=st.integers(0, 1023),
    col=st.integers(0, 5),
    cell=st.sampled_from(fc.BAD_CELLS),
    scale=st.sampled_from([None, 1e300, -1e300, 1e-300, 1e20]),
)
def test_map_mutations(base, capsys, row, col, cell, scale):
    text = (base / "m.csv").read_text()
    text = fc.table_text_mutation(text, row, col, cell)
    if scale is not None:
        text = fc.scale_column(text, col, scale)
    _check(base, {"m.csv": text}, _planes(), capsys)


@settings(max_examples=7, suppress_health_check=_CAPSYS)
@given(kind=st.sampled_from(fc.NPZ_KINDS))
def test_npz_mutations(base, capsys, kind):
    _check(base, {"m.npz": ("npz", kind)}, _planes("job-npz.json"), capsys)


@settings(max_examples=15, suppress_health_check=_CAPSYS)
@given(
    name=st.sampled_from(["summary.json", "boundaries.json"]),
    index=st.integers(0, 10**6),
    raw=st.sampled_from([*fc.BAD_NUMBERS, '"<b>x</b>"', '""', '"a"']),
)
def test_run_folder_mutations(base, capsys, name, index, raw):
    doc = json.loads((base / "run" / name).read_text())
    pointers = fc.value_pointers(doc)
    pointer = pointers[index % len(pointers)]
    changes = {f"run/{name}": fc.replace_at(doc, pointer, raw)}
    _check(base, changes, lambda case: ["report", str(case / "run")], capsys)
