"""The output-folder protocol (report/atomic.py) through the command line.

Every case here once lost data or failed with an internal error: two runs into
one folder, a file put into the folder during a run, ``--out`` holding the
inputs, a run killed while it computed or between the renames of the swap, and
output locations that cannot be written (full disk, read-only, a file in the
way, a name too long, a dangling symbolic link). Expected behaviour: exit 0 or
exit 2 with one line on stderr, and no file of the user's ever deleted.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
import uuid
from pathlib import Path

import numpy as np
import pytest

from inclination.cli import main
from inclination.io.writers import write_npz
from inclination.maps import OrientationMap

_JOB = {
    "phases": [
        {
            "id": 1,
            "name": "Cu",
            "laue": "m-3m",
            "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
        }
    ],
    "map": {
        "path": "m.npz",
        "format": "npz",
        "step_um": 1,
        "grid": "square",
        "angles": "deg",
        "axes": {"x": "right", "y": "down"},
    },
}

# A child process that runs the command line with one step of the protocol replaced:
# "pause" waits in the middle of writing until a flag file appears, "kill-compute"
# dies there, "kill-between-renames" forces the two-rename swap and dies between them.
_CHILD = textwrap.dedent(
    """
    import os, signal, sys, time
    from pathlib import Path
    mode, flag = sys.argv[1], Path(sys.argv[2])
    import inclination.pipeline as pipeline
    import inclination.report.atomic as io_
    real_write = pipeline.write_outputs

    def write(analysis, out_dir, **options):
        result = real_write(analysis, out_dir, **options)
        if mode == "pause":
            flag.with_suffix(".started").write_text("")
            while not flag.exists():
                time.sleep(0.02)
        elif mode == "kill-compute":
            os.kill(os.getpid(), signal.SIGKILL)
        return result

    pipeline.write_outputs = write
    if mode == "kill-between-renames":
        def no_exchange(a, b):
            raise OSError(38, "not supported here")

        io_._exchange = no_exchange
        real_rename = os.rename
        calls = []

        def rename(a, b):
            calls.append(a)
            if len(calls) == 2 and str(a).endswith(".partial"):
                os.kill(os.getpid(), signal.SIGKILL)
            return real_rename(a, b)

        io_.os.rename = rename
    from inclination.cli import main
    sys.exit(main(sys.argv[3:]))
    """
)


@pytest.fixture
def job(tmp_path):
    """A job of two grains in its own folder; returns the job file's path."""
    folder = tmp_path / "inputs"
    folder.mkdir()
    euler = np.zeros((20, 20, 3))
    euler[:, 10:, 0] = 40.0
    write_npz(
        folder / "m.npz",
        OrientationMap.from_euler_deg(euler, np.ones((20, 20), int), grid="square", step_x_um=1.0),
    )
    (folder / "job.json").write_text(json.dumps(_JOB))
    return folder / "job.json"


def _snapshot(folder: Path) -> dict:
    return {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def _child(tmp_path, mode, args):
    script = tmp_path / "child.py"
    script.write_text(_CHILD)
    flag = tmp_path / f"flag-{uuid.uuid4().hex}"
    env = {**os.environ, "MPLBACKEND": "Agg"}
    proc = subprocess.Popen(
        [sys.executable, str(script), mode, str(flag), *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=env,
    )
    return proc, flag


def _finish(proc):
    out, err = proc.communicate(timeout=120)
    return proc.returncode, out.decode(), err.decode()


def _wait_for(path: Path, proc, timeout_s=120.0):
    t0 = time.monotonic()
    while not path.exists():
        assert proc.poll() is None, _finish(proc)
        assert time.monotonic() - t0 < timeout_s
        time.sleep(0.02)


def _one_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    return lines[0]


def test_second_run_into_the_same_new_folder_stops_and_the_first_keeps_its_results(
    job, tmp_path, capsys
):
    out = tmp_path / "out"
    proc, flag = _child(tmp_path, "pause", ["grains", str(job), "--out", str(out)])
    _wait_for(flag.with_suffix(".started"), proc)
    assert main(["grains", str(job), "--out", str(out)]) == 2
    assert "no other run writing" in _one_line(capsys.readouterr().err)
    flag.write_text("")
    assert _finish(proc)[0] == 0
    assert (out / "grains.csv").is_file() and (out / "summary.json").is_file()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_a_file_put_into_a_new_output_folder_during_the_run_is_kept(job, tmp_path):
    out = tmp_path / "out"
    proc, flag = _child(tmp_path, "pause", ["grains", str(job), "--out", str(out)])
    _wait_for(flag.with_suffix(".started"), proc)
    (out / "mine.txt").write_text("my notes")
    flag.write_text("")
    rc, _, err = _finish(proc)
    assert rc == 2
    assert (out / "mine.txt").read_text() == "my notes"
    line = _one_line(err)
    kept = Path(line.split("the new results are at ")[1].split("'")[1])
    assert (kept / "grains.csv").is_file()


def test_a_file_put_into_the_replaced_folder_during_the_run_is_kept(job, tmp_path):
    out = tmp_path / "out"
    assert main(["grains", str(job), "--out", str(out)]) == 0
    proc, flag = _child(tmp_path, "pause", ["grains", str(job), "--out", str(out), "--overwrite"])
    _wait_for(flag.with_suffix(".started"), proc)
    (out / "mine.txt").write_text("my notes")
    flag.write_text("")
    rc, stdout, _ = _finish(proc)
    assert rc == 0
    kept = [p for p in tmp_path.iterdir() if p.name.startswith("out.replaced-")]
    assert len(kept) == 1 and (kept[0] / "mine.txt").read_text() == "my notes"
    assert "mine.txt" in stdout
    assert (out / "grains.csv").is_file()


@pytest.mark.parametrize("where", ["job folder", "its parent"])
def test_an_output_folder_that_holds_the_inputs_is_refused(job, where, capsys):
    folder = job.parent if where == "job folder" else job.parent.parent
    before = _snapshot(job.parent)
    assert main(["grains", str(job), "--out", str(folder), "--overwrite"]) == 2
    assert "outside the inputs' folders" in _one_line(capsys.readouterr().err)
    assert _snapshot(job.parent) == before


def test_a_run_killed_while_writing_leaves_nothing_the_next_run_cannot_clean(job, tmp_path):
    out = tmp_path / "out"
    proc, _ = _child(tmp_path, "kill-compute", ["grains", str(job), "--out", str(out)])
    assert _finish(proc)[0] == -signal.SIGKILL
    assert any(p.name.endswith(".partial") for p in tmp_path.iterdir())
    run = subprocess.run(
        [sys.executable, "-m", "inclination.cli", "grains", str(job), "--out", str(out)],
        capture_output=True,
        text=True,
        env={**os.environ, "MPLBACKEND": "Agg"},
    )
    assert run.returncode == 0, run.stderr
    assert "unfinished staging folder" in run.stdout
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []
    assert (out / "grains.csv").is_file()


def test_a_run_killed_between_the_renames_is_completed_by_the_next_run(job, tmp_path):
    out = tmp_path / "out"
    assert main(["grains", str(job), "--out", str(out)]) == 0
    (out / "grains.csv").write_text("old results\n")
    args = ["grains", str(job), "--out", str(out), "--overwrite"]
    proc, _ = _child(tmp_path, "kill-between-renames", args)
    assert _finish(proc)[0] == -signal.SIGKILL
    assert not out.exists()  # the moment the two-rename swap cannot avoid
    run = subprocess.run(
        [sys.executable, "-m", "inclination.cli", *args],
        capture_output=True,
        text=True,
        env={**os.environ, "MPLBACKEND": "Agg"},
    )
    assert run.returncode == 0, run.stderr
    assert "completed the replacement" in run.stdout
    assert (out / "grains.csv").read_text() != "old results\n"
    # The replaced results are kept and named, never deleted unasked.
    old = [p for p in tmp_path.iterdir() if ".old-" in p.name]
    assert len(old) == 1 and (old[0] / "grains.csv").read_text() == "old results\n"
    assert old[0].name in run.stdout


def test_an_existing_folder_is_replaced_in_one_step(job, tmp_path):
    out = tmp_path / "out"
    assert main(["grains", str(job), "--out", str(out)]) == 0
    (out / "grains.csv").write_text("old results\n")
    assert main(["grains", str(job), "--out", str(out)]) == 2
    assert (out / "grains.csv").read_text() == "old results\n"
    assert main(["grains", str(job), "--out", str(out), "--overwrite"]) == 0
    assert (out / "grains.csv").read_text() != "old results\n"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_the_output_folder_follows_the_umask_like_its_files(job, tmp_path):
    out = tmp_path / "out"
    old = os.umask(0o022)
    try:
        assert main(["grains", str(job), "--out", str(out)]) == 0
    finally:
        os.umask(old)
    assert out.stat().st_mode & 0o777 == 0o755
    assert (out / "grains.csv").stat().st_mode & 0o777 == 0o644


def _bad_out(kind: str, tmp_path: Path) -> Path:
    if kind == "file in the way":
        (tmp_path / "afile").write_text("x")
        return tmp_path / "afile" / "out"
    if kind == "name too long":
        return tmp_path / ("n" * 300)
    if kind == "dangling symlink":
        (tmp_path / "link").symlink_to(tmp_path / "nowhere")
        return tmp_path / "link"
    raise AssertionError(kind)


@pytest.mark.parametrize("kind", ["file in the way", "name too long", "dangling symlink"])
def test_an_output_location_that_cannot_be_used_gives_one_line(job, tmp_path, kind, capsys):
    out = _bad_out(kind, tmp_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    assert main(["grains", str(job), "--out", str(out)]) == 2
    assert "--out" in _one_line(capsys.readouterr().err) or "output" in str(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def _mount_tmpfs(where: Path, options: str):
    """Mount a small tmpfs, or skip: the test needs root and a kernel that allows it."""
    if shutil.which("mount") is None or os.geteuid() != 0:
        pytest.skip("needs root and mount(8) to make a small file system")
    where.mkdir()
    run = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)], capture_output=True
    )
    if run.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {run.stderr.decode().strip()}")


@pytest.fixture
def small_fs(tmp_path):
    where = tmp_path / "fs"
    _mount_tmpfs(where, "size=64k")
    yield where
    subprocess.run(["umount", str(where)], check=False)


@pytest.fixture
def read_only_fs(tmp_path):
    where = tmp_path / "ro"
    _mount_tmpfs(where, "size=64k,ro")
    yield where
    subprocess.run(["umount", str(where)], check=False)


# numpy before 1.25 (the oldest version CI tests, .ci/oldest.txt) leaves the ZipFile of
# np.savez open when a write fails; its finaliser later seeks the closed file, which pytest
# reports as an unraisable exception. The run's own outcome is what this test checks.
@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")
def test_a_full_disk_gives_one_line_and_leaves_nothing(small_fs, capsys):
    # The demo writes megabytes; 64 KiB fill up on the way.
    assert main(["demo", "--out", str(small_fs / "demo")]) == 2
    line = _one_line(capsys.readouterr().err)
    assert "No space left on device" in line
    assert list(small_fs.iterdir()) == []


def test_a_read_only_location_gives_one_line(job, read_only_fs, capsys):
    assert main(["grains", str(job), "--out", str(read_only_fs / "out")]) == 2
    assert "Read-only file system" in _one_line(capsys.readouterr().err)
