"""inclination batch (inclination.batch, inclination.batch_outputs; docs/batch.md).

The jobs are small synthetic samples (inclination.synthetic) with a serial section, so
each has a frame verdict, a frame audit and Σ3 twins. The oracles: the same jobs run one
after another by ``analyse`` (byte for byte), scipy's Wilson interval on the summed
counts, and the per-job stereology trace counts.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from inclination import synthetic
from inclination.cli import main
from inclination.crystal.phases import Phase
from inclination.io.writers import write_npz
from inclination.pipeline import analyse

ROOT = Path(__file__).resolve().parents[1]
NEEDS_DASK = "inclination batch needs the optional extra inclination[cluster] (dask.distributed)"

AUSTENITE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}"],
}


def _map_entry(path: str) -> dict:
    return {
        "path": path,
        "format": "npz",
        "angles": "deg",
        "step_um": 1.0,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }


def _write_maps(folder: Path, seed: int) -> None:
    micro = synthetic.make_microstructure(
        box_um=(50.0, 40.0, 10.0),
        n_grains=12,
        twins=4,
        rng=seed,
        phases=[Phase.from_dict(AUSTENITE)],
    )
    surface = synthetic.sample_map(micro, step_um=1.0, rng=seed + 100, noise_deg=0.5)
    serial = synthetic.sample_map(micro, step_um=1.0, rng=seed + 200, noise_deg=0.5, depth_um=3.0)
    write_npz(folder / "surface.npz", synthetic.as_orientation_map(surface))
    write_npz(folder / "serial.npz", synthetic.as_orientation_map(serial))


def _write_job(folder: Path, seed: int, **edits) -> Path:
    """A demo-like job (surface map, serial section 3 µm down) in its own folder."""
    folder.mkdir(parents=True, exist_ok=True)
    _write_maps(folder, seed)
    job = {
        "schema_version": 1,
        "description": f"synthetic twinned austenite, seed {seed}",
        "phases": [AUSTENITE],
        "map": _map_entry("surface.npz"),
        "grains": {"threshold_deg": 5, "min_pixels": 8},
        "traces": {"min_length_um": 5},
        "sections": [
            {
                "kind": "serial",
                "name": "3 µm down",
                "map": _map_entry("serial.npz"),
                "depth_um": 3.0,
            }
        ],
        # Too few traces per map for a distribution (no stereograms per job, which keeps
        # the jobs quick), enough once the batch pools them.
        "stereology": {
            "classes": ["all"],
            "min_traces": 150,
            "bootstrap": 4,
            "resolution_deg": 15,
            "seed": 1,
        },
        **edits,
    }
    path = folder / f"sample{seed}.json"
    path.write_text(json.dumps(job, indent=1), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def jobs(tmp_path_factory):
    root = tmp_path_factory.mktemp("jobs")
    return [_write_job(root / f"s{seed}", seed) for seed in range(8)]


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed", reason=NEEDS_DASK)
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    )
    with distributed.Client(cluster) as c:
        yield c
    cluster.close()


def _files(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def _validate(batch_json: Path) -> dict:
    from jsonschema import Draft202012Validator

    from inclination.io.schemas import load_schema

    doc = json.loads(batch_json.read_text(encoding="utf-8"))
    # The schema the package ships (inside the wheel when installed).
    Draft202012Validator(load_schema("batch.schema.json")).validate(doc)
    return doc


def test_eight_jobs_on_two_workers_equal_eight_analyse_runs(jobs, tmp_path, capsys):
    pytest.importorskip("distributed", reason=NEEDS_DASK)
    from scipy.stats import binomtest

    out = tmp_path / "batch"
    names = [p.stem for p in jobs]
    # The sequential runs go to the very paths the batch will use, then move aside: the
    # run record (summary.json) holds the output paths, and no clock time at all (its
    # "tool" block is the versions), so no field needs to be left out of the comparison.
    for path, name in zip(jobs, names, strict=True):
        analyse(path, out / name)
    shutil.move(out, tmp_path / "sequential")

    status = main(["batch", *map(str, jobs), "--out", str(out), "--workers", "2", "--quiet"])
    printed = capsys.readouterr().out
    assert status == 0
    assert "dashboard http://" in printed

    for name in names:
        got, want = _files(out / name), _files(tmp_path / "sequential" / name)
        assert sorted(got) == sorted(want), name
        for file_name, data in want.items():
            assert got[file_name] == data, f"{name}/{file_name} differs"

    doc = _validate(out / "batch.json")
    assert [j["name"] for j in doc["jobs"]] == names
    assert {j["status"] for j in doc["jobs"]} == {"ran"}
    summaries = [json.loads((out / n / "summary.json").read_text()) for n in names]
    for job, summary in zip(doc["jobs"], summaries, strict=True):
        assert job["counts"] == summary["counts"]
        assert job["frame_verdict"] == summary["frame_verdict"]["verdict"]
        assert job["audit"]["declared_is_best"] is True  # maps recorded in S as declared
        assert job["inputs"][0]["sha256"] == _sha256(Path(job["job_file"]))

    # Across jobs: the summed Σ3 counts and scipy's own Wilson interval of them.
    n = sum(s["twin_test"]["n_sigma3"] for s in summaries)
    k = sum(s["twin_test"]["passed"] for s in summaries)
    twin = doc["pooled"]["twin_test"]
    assert (twin["n_sigma3"], twin["passed"], twin["interval"]) == (n, k, "wilson")
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    np.testing.assert_allclose(
        twin["fraction_by_count_95ci"], [ci.low, ci.high], rtol=0, atol=1e-12
    )
    assert "Wilson score interval" in (out / "summary.md").read_text(encoding="utf-8")

    # boundaries_all.csv: every job's rows in job order behind a leading job column.
    lines = (out / "boundaries_all.csv").read_text(encoding="utf-8").splitlines()
    header = (out / names[0] / "boundaries.csv").read_text(encoding="utf-8").splitlines()[0]
    assert lines[0] == "job," + header
    expected = []
    for name in names:
        rows = (out / name / "boundaries.csv").read_text(encoding="utf-8").splitlines()[1:]
        expected += [f"{name},{row}" for row in rows]
    assert lines[1:] == expected

    # Pooled stereology: each map alone is below min_traces (a note, no distribution);
    # the pool holds every map's traces and has one.
    per_job = [json.loads((out / n / "plane_distribution.json").read_text()) for n in names]
    assert all(d["distributions"][0]["mrd"] is None for d in per_job)
    pooled = json.loads((out / "stereology" / "plane_distribution.json").read_text())
    (dist,) = pooled["distributions"]
    assert dist["n_traces"] == sum(d["distributions"][0]["n_traces"] for d in per_job)
    assert dist["mrd"] is not None
    assert doc["pooled"]["stereology"]["jobs"] == names


def _sha256(path: Path) -> str:
    import hashlib

    return hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib, not the package's helper


def test_a_bad_job_fails_alone_with_status_2(jobs, tmp_path, client):
    from inclination.batch import run_batch

    bad = _write_job(tmp_path / "bad", 50)
    spec = json.loads(bad.read_text())
    spec["map"]["path"] = "missing.npz"
    bad.write_text(json.dumps(spec))
    out = tmp_path / "batch"
    result = run_batch([jobs[0], bad, tmp_path / "absent.json", jobs[1]], out, client=client)
    assert result.exit_status == 2
    doc = _validate(out / "batch.json")
    by_name = {j["name"]: j for j in doc["jobs"]}
    absent = by_name["absent"]
    assert (absent["status"], absent["exit_status"], absent["inputs"]) == ("failed", 2, [])
    assert "absent.json" in absent["error"]
    failed = by_name["sample50"]
    assert (failed["status"], failed["exit_status"]) == ("failed", 2)
    assert "\n" not in failed["error"]
    assert "missing.npz" in failed["error"] and failed["error"].startswith("inclination: error:")
    assert not (out / "sample50").exists()
    for name in ("sample0", "sample1"):
        assert by_name[name]["status"] == "ran"
        assert (out / name / "summary.json").is_file()
    assert doc["exit_status"] == 2
    assert doc["pooled"]["jobs"] == ["sample0", "sample1"]


def test_a_worker_killed_mid_job_leaves_no_half_folder_and_a_rerun_completes(
    jobs, tmp_path, client
):
    from inclination.batch import run_batch

    out = tmp_path / "batch"
    out.mkdir()
    killed = {}

    def kill_the_first_job_seen():
        # A job's stage folder is .NAME.PID.partial (report.atomic): PID is the worker
        # process running it, mid-job.
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and not killed:
            for p in out.glob(".*.partial"):
                name, pid = p.name[1:].rsplit(".", 2)[:2]
                killed[name] = int(pid)
                os.kill(int(pid), signal.SIGKILL)
                return
            time.sleep(0.01)

    scheduler = client.cluster.scheduler
    allowed = scheduler.allowed_failures
    # No retry on another worker: the killed job must be left for the rerun.
    scheduler.allowed_failures = 0
    watcher = threading.Thread(target=kill_the_first_job_seen)
    watcher.start()
    try:
        first = run_batch(jobs[:4], out, client=client)
    finally:
        watcher.join()
        scheduler.allowed_failures = allowed
    client.wait_for_workers(2, timeout=120)
    (name,) = killed
    records = {r["name"]: r for r in first.jobs}
    assert records[name]["status"] == "lost"
    assert first.exit_status == 1
    for r in first.jobs:
        folder = out / r["name"]
        if r["status"] == "ran":
            assert (folder / "summary.json").is_file()
        else:
            # Claimed (created empty) or never started: no file of the run in it.
            assert not folder.exists() or not any(folder.iterdir()), r["name"]
    _validate(out / "batch.json")

    second = run_batch(jobs[:4], out, client=client)
    assert second.exit_status == 0
    statuses = {r["name"]: r["status"] for r in second.jobs}
    for r in first.jobs:
        assert statuses[r["name"]] == ("skipped" if r["status"] == "ran" else "ran")
    assert not list(out.glob(".*.partial")) and not list(out.glob(".*.lock"))
    reference = sorted(p.name for p in (out / jobs[0].stem).iterdir())
    assert sorted(p.name for p in (out / name).iterdir()) == reference


def test_a_rerun_skips_unchanged_jobs_and_reruns_changed_ones(jobs, tmp_path, client):
    from inclination.batch import run_batch

    # Copies, since inputs are edited below.
    paths = []
    for p in jobs[:3]:
        shutil.copytree(p.parent, tmp_path / p.parent.name)
        paths.append(tmp_path / p.parent.name / p.name)
    out = tmp_path / "batch"
    assert {r["status"] for r in run_batch(paths, out, client=client).jobs} == {"ran"}
    before = (out / "sample0" / "summary.json").stat().st_mtime_ns
    bars = []

    class Bar:  # the command line's tqdm bar, as far as the batch uses it
        def __init__(self, total, desc):
            self.total, self.desc, self.n, self.closed = total, desc, 0, False
            bars.append(self)

        def update(self, n):
            self.n += n

        def close(self):
            self.closed = True

    second = run_batch(paths, out, client=client, progress=Bar)
    assert {r["status"] for r in second.jobs} == {"skipped"}
    # One bar for the batch as a whole, the skipped jobs counted at once.
    assert [(b.total, b.desc, b.n, b.closed) for b in bars] == [(3, "batch", 3, True)]
    assert (out / "sample0" / "summary.json").stat().st_mtime_ns == before

    # A changed map (input hash) and a changed setting (job file and settings hash).
    _write_maps(paths[1].parent, 77)
    spec = json.loads(paths[2].read_text())
    spec["grains"]["threshold_deg"] = 4
    paths[2].write_text(json.dumps(spec))
    third = run_batch(paths, out, client=client)
    assert [r["status"] for r in third.jobs] == ["skipped", "ran", "ran"]
    doc = _validate(out / "batch.json")
    surface = next(i for i in doc["jobs"][1]["inputs"] if i["path"].endswith("surface.npz"))
    assert surface["sha256"] == _sha256(paths[1].parent / "surface.npz")
    summary = json.loads((out / "sample2" / "summary.json").read_text())
    assert summary["grains"]["threshold_deg"] == 4


def test_without_the_extra_batch_says_what_to_install(jobs, tmp_path, monkeypatch, capsys):
    import sys

    # An entry of None in sys.modules makes `import distributed` raise ImportError.
    monkeypatch.setitem(sys.modules, "distributed", None)
    status = main(["batch", str(jobs[0]), "--out", str(tmp_path / "b")])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and "pip install 'inclination[cluster]'" in err[0]


def test_job_names_and_their_refusals(tmp_path):
    from inclination.batch import job_names
    from inclination.errors import InputError

    assert job_names(["x/a.json", "y/a.json", "z/b.json"]) == ("x-a", "y-a", "b")
    with pytest.raises(InputError, match="second job named 'x-a'"):
        job_names(["x/a.json", "x/a.json"])
    with pytest.raises(InputError, match="a job name other than 'stereology'"):
        job_names(["stereology.json"])


def test_committed_schema_is_the_rendering():
    from inclination.batch_outputs import render_schema

    committed = (ROOT / "schemas" / "batch.schema.json").read_text(encoding="utf-8")
    assert committed == render_schema(), "schemas/batch.schema.json is stale"


def test_workers_must_be_a_positive_whole_number(jobs, tmp_path, capsys):
    pytest.importorskip("distributed", reason=NEEDS_DASK)
    status = main(["batch", str(jobs[0]), "--out", str(tmp_path / "b"), "--workers", "0"])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert err == ["inclination: error: Expected --workers to be a whole number >= 1, got 0."]


def test_the_hashed_inputs_include_section_maps_and_face_images(tmp_path):
    from types import SimpleNamespace

    from inclination.batch import input_hashes

    files = {}
    for name in ("job.json", "m.npz", "m.json", "serial.npz", "face.png"):
        files[name] = tmp_path / name
        files[name].write_bytes(name.encode())
    job = SimpleNamespace(
        source_path=str(files["job.json"]),
        map={"path": str(files["m.npz"]), "sidecar": str(files["m.json"])},
        sections=(
            {"kind": "serial", "map": {"path": str(files["serial.npz"])}},
            {"kind": "cross-section", "image": {"path": str(files["face.png"])}},
            {"kind": "cross-section", "boundaries": []},
        ),
    )
    got = input_hashes(job)
    assert [Path(h["path"]).name for h in got] == list(files)
    assert [h["sha256"] for h in got] == [_sha256(p) for p in files.values()]


def test_a_running_scheduler_by_its_address(tmp_path, client):
    from inclination.batch import run_batch

    # The path of `--scheduler ADDRESS --workers N`: connect, wait for N workers, submit.
    address = client.scheduler.address
    result = run_batch([tmp_path / "absent.json"], tmp_path / "b", scheduler=address, workers=2)
    assert [(r["status"], r["exit_status"]) for r in result.jobs] == [("failed", 2)]
    assert client.scheduler_info()["workers"], "the batch must not close the cluster it found"
