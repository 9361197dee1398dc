"""Input limits (io/limits.py) and odd but valid maps, through the command line.

Each hostile input must give exit 2 and one line on stderr naming the file and
what was expected, at once (no hang, no unbounded memory), and leave the inputs
unchanged. Odd but valid maps (one point wide) must give their grains.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import fuzz_cases as fc
import numpy as np
import pytest

from inclination.cli import main
from inclination.io.writers import write_npz
from inclination.maps import OrientationMap


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return fc.make_case(tmp_path_factory.mktemp("base"))


@pytest.fixture
def case(base, tmp_path):
    import shutil

    shutil.copytree(base, tmp_path / "case", symlinks=True)
    return tmp_path / "case"


def _run(argv, capsys) -> tuple[int, str]:
    status = main(argv)
    return status, capsys.readouterr().err


def _planes(case, capsys, job="job.json"):
    return _run(["planes", str(case / job), "--out", str(case / "out"), "--quiet"], capsys)


def _one_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    return lines[0]


@pytest.mark.parametrize("kind", ["fifo", "/dev/zero", "/dev/urandom", "folder"])
def test_a_special_file_as_job_is_refused_at_once(case, kind, capsys):
    fc.make_special(case / "job.json", kind)
    status, err = _planes(case, capsys)
    assert status == 2
    assert "Expected a regular file" in _one_line(err)


def test_a_fifo_in_a_run_folder_is_refused(case, capsys):
    fc.make_special(case / "run" / "summary.json", "fifo")
    status, err = _run(["report", str(case / "run")], capsys)
    assert status == 2
    assert "summary.json: Expected a regular file, got a FIFO" in _one_line(err)


@pytest.mark.parametrize(
    ("raw", "expected"),
    [
        ("NaN", "non-standard literal NaN"),
        ("Infinity", "non-standard literal Infinity"),
        ("1" + "0" * 400, "an integer of 401 digits"),
        ("9" * 5000, "an integer of 5000 digits"),  # beyond Python's own digit limit
        ("1e400", "Expected a finite number, got '1e400'"),
    ],
)
def test_json_numbers_outside_the_standard_or_a_float_are_refused(case, raw, expected, capsys):
    doc = fc.base_job()
    (case / "job.json").write_text(fc.replace_at(doc, ("grains", "min_pixels"), raw))
    status, err = _planes(case, capsys)
    assert status == 2
    assert expected in _one_line(err)


@pytest.mark.parametrize("depth", [70, 100_000])
def test_deep_nesting_is_refused(case, depth, capsys):
    (case / "job.json").write_text('{"phases": ' + "[" * depth + "]" * depth + "}")
    status, err = _planes(case, capsys)
    assert status == 2
    assert "nested at most 64 levels" in _one_line(err)


@pytest.mark.parametrize(
    ("kind", "expected"),
    [
        ("npy", "got a file that is not a zip"),
        ("csv", "got a file that is not a zip"),
        ("truncated", "npz"),
        ("huge-header", "bytes its header promises"),
    ],
)
def test_broken_npz_maps_are_refused_without_numpy_advice(case, kind, expected, capsys):
    fc.forged_npz(case / "m.npz", kind)
    status, err = _planes(case, capsys, job="job-npz.json")
    assert status == 2
    line = _one_line(err)
    assert expected in line
    assert "allow_pickle" not in line and "pickle" not in line


def test_the_run_folder_with_wrong_types_is_refused(case, capsys):
    doc = json.loads((case / "run" / "boundaries.json").read_text())
    doc["rows"][0]["length_um"] = "long"
    (case / "run" / "boundaries.json").write_text(json.dumps(doc))
    status, err = _run(["report", str(case / "run")], capsys)
    assert status == 2
    assert "/rows/0/length_um: Expected 'length_um' to be float or null, got str" in _one_line(err)


def test_the_markdown_report_escapes_raw_html_from_an_edited_run_folder(case, capsys):
    doc = json.loads((case / "run" / "summary.json").read_text())
    doc["title"] = "<script>alert(1)</script>"
    (case / "run" / "summary.json").write_text(json.dumps(doc))
    status, _ = _run(["report", str(case / "run")], capsys)
    assert status == 0
    md = (case / "run" / "report.md").read_text()
    assert "<script>" not in md and "&lt;script&gt;" in md


def test_zero_grains_names_the_settings_not_a_section(case, capsys):
    doc = fc.set_at(fc.base_job(), ("grains", "min_pixels"), 10**6)
    (case / "job.json").write_text(json.dumps(doc))
    status, err = _planes(case, capsys)
    assert status == 2
    line = _one_line(err)
    assert "/grains: Expected the surface map to give at least one grain" in line
    assert "min_pixels = 1000000" in line


@pytest.mark.parametrize("shape", [(30, 1), (1, 30)])
def test_a_map_one_point_wide_gives_its_grains(tmp_path, shape, capsys):
    # Two grains 40° apart about Z: one boundary across the strip, whichever way it runs.
    euler = np.zeros((*shape, 3))
    if shape[1] == 1:
        euler[15:, 0, 0] = 40.0
    else:
        euler[0, 15:, 0] = 40.0
    write_npz(
        tmp_path / "m.npz",
        OrientationMap.from_euler_deg(euler, np.ones(shape, int), grid="square", step_x_um=1.0),
    )
    (tmp_path / "job.json").write_text(json.dumps(fc.base_job("m.npz", "npz")))
    status = main(["grains", str(tmp_path / "job.json"), "--out", str(tmp_path / "out")])
    assert status == 0
    assert json.loads((tmp_path / "out" / "summary.json").read_text())["counts"]["grains"] == 2


def test_two_demo_runs_give_identical_bytes(tmp_path, monkeypatch):
    # Same output name both times: provenance names the folder, so it must match.
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "0")
    digests = []
    for name in ("a", "b"):
        folder = tmp_path / "demo"
        assert main(["demo", "--out", str(folder), "--quiet"]) == 0
        digests.append(
            {
                str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
                for p in sorted(folder.rglob("*"))
                if p.is_file()
            }
        )
        folder.rename(tmp_path / name)
    assert digests[0].keys() == digests[1].keys()
    assert [k for k in digests[0] if digests[0][k] != digests[1][k]] == []
    svg = (tmp_path / "a" / "results" / "boundaries.svg").read_text()
    assert "<dc:date>" not in svg


def test_input_bytes_never_change(case, capsys):
    before = fc.snapshot(case)
    fc.forged_npz(case / "m.npz", "extra-role")
    before = fc.snapshot(case)
    _planes(case, capsys, job="job-npz.json")
    after = {k: v for k, v in fc.snapshot(case).items() if not k.startswith("out" + os.sep)}
    assert after == before
    assert Path(case / "m.npz").exists()
