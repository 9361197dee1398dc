"""zarr maps given by store address (inclination.io.chunked; docs/batch.md, docs/job-file.md).

fsspec's in-process ``memory://`` filesystem and ``file://`` URLs stand in for an object
store. The oracle is the same map as a local zarr folder, itself checked against the npz
read of the synthetic map in tests/test_tiles.py: the tables written from an address must
be byte for byte those written from the folder, through the tiled path (the surface map)
and the whole read (``maps.read_map``, a serial section's map).
"""

from __future__ import annotations

import csv
import importlib.util
import io
import json
import uuid

import numpy as np
import pytest
from numpy.testing import assert_array_equal

pytest.importorskip("zarr", reason="the optional extra 'tiles' (zarr) is not installed")
pytest.importorskip("dask", reason="the optional extra 'tiles' (dask, with fsspec) is not installed")
fsspec = pytest.importorskip("fsspec", reason="fsspec comes with dask in the extra 'tiles'")

from fsspec.implementations.memory import MemoryFileSystem  # noqa: E402

from inclination import synthetic  # noqa: E402
from inclination.cli import main  # noqa: E402
from inclination.crystal.phases import Phase  # noqa: E402
from inclination.errors import InputError  # noqa: E402
from inclination.io.chunked import (  # noqa: E402
    is_store_address,
    write_zarr_map,
    zarr_metadata_sha256,
)
from inclination.io.job import load_job  # noqa: E402
from inclination.io.writers import write_npz  # noqa: E402
from inclination.maps import read_map  # noqa: E402

STEP = 1.0
AUSTENITE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}"],
}
TABLES = ("grains.csv", "segments.csv", "boundaries.csv")


def _entry(path, fmt="zarr", **extra) -> dict:
    return {
        "path": str(path),
        "format": fmt,
        "angles": "deg",
        "step_um": STEP,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
        **extra,
    }


def _arrays(omap_path):
    with np.load(omap_path) as f:
        return f["euler_deg"], f["phase"]


@pytest.fixture(scope="module")
def maps(tmp_path_factory):
    """A twinned synthetic sample: surface and a serial section 3 µm down, as npz, as local
    zarr folders (chunks of 16 × 20 points) and as the same stores at memory:// addresses."""
    folder = tmp_path_factory.mktemp("store")
    micro = synthetic.make_microstructure(
        box_um=(60.0, 48.0, 10.0), n_grains=14, twins=4, rng=5, phases=[Phase.from_dict(AUSTENITE)]
    )
    root = f"memory://inclination-tests-{uuid.uuid4().hex[:8]}"
    out = {"folder": folder, "root": root}
    for name, depth in (("surface", 0.0), ("serial", 3.0)):
        sample = synthetic.sample_map(micro, step_um=STEP, rng=17, noise_deg=0.5, depth_um=depth)
        npz = write_npz(folder / f"{name}.npz", synthetic.as_orientation_map(sample))
        euler, phase = _arrays(npz)
        write_zarr_map(folder / f"{name}.zarr", euler, phase, chunks_px=(16, 20))
        write_zarr_map(f"{root}/{name}.zarr", euler, phase, chunks_px=(16, 20))
        out[name] = folder / f"{name}.zarr"
        out[f"{name}_address"] = f"{root}/{name}.zarr"
    yield out
    fsspec.filesystem("memory").rm(root.removeprefix("memory://"), recursive=True)


def _job(folder, name, surface, *, serial=None, **top):
    job = {"phases": [AUSTENITE], "map": surface, "traces": {"min_length_um": 5}, **top}
    if serial is not None:
        job["sections"] = [{"kind": "serial", "name": "3 µm down", "map": serial, "depth_um": 3.0}]
    path = folder / f"{name}.json"
    path.write_text(json.dumps(job), encoding="utf-8")
    return path


def _analyse(job, out):
    assert main(["analyse", str(job), "--out", str(out), "--quiet"]) == 0
    return {name: (out / name).read_bytes() for name in TABLES}


# ----------------------------------------------------------------------------- the predicate


def test_is_store_address_tells_addresses_from_local_paths(tmp_path):
    for text in ("s3://bucket/survey.zarr", "gs://b/m.zarr", "https://host/m.zarr",
                 "file:///abs/m.zarr", "memory://maps/m.zarr", "S3://upper/m.zarr", "s4://typo"):
        assert is_store_address(text), text
    # Local paths, relative or absolute, a drive letter, a colon in a name, a Path.
    for text in ("m.zarr", "maps/m.zarr", "/abs/m.zarr", "C:/maps/m.zarr", "a:b.zarr",
                 "./s3:/bucket", "", tmp_path / "m.zarr", None):
        assert not is_store_address(text), text


# ----------------------------------------------------------------------------- the same tables


@pytest.mark.parametrize("tiles", [None, {"tile_px": 24}])
def test_analyse_of_a_memory_address_writes_the_folders_tables(maps, tmp_path, tiles):
    # The surface map goes the tiled path: its stored chunks, or 24-point tiles.
    extra = {} if tiles is None else {"tiles": tiles}
    local = _job(tmp_path, "local", _entry(maps["surface"]), **extra)
    remote = _job(tmp_path, "remote", _entry(maps["surface_address"]), **extra)
    a = _analyse(local, tmp_path / "out_local")
    b = _analyse(remote, tmp_path / "out_remote")
    assert b == a
    assert a["boundaries.csv"].count(b"\n") > 20  # a map with boundaries, not an empty table
    summary = json.loads((tmp_path / "out_remote" / "summary.json").read_text())
    # Provenance and the job as given: the address itself, not a path made of it.
    assert summary["provenance"]["map"]["source_path"] == maps["surface_address"]
    assert summary["job"]["map"]["path"] == maps["surface_address"]
    assert maps["surface_address"] in (tmp_path / "out_remote" / "report.md").read_text()


def test_a_file_url_reads_the_folder_it_names(maps, tmp_path):
    url = maps["surface"].resolve().as_uri()  # file:///…/surface.zarr
    assert url.startswith("file:///")
    local = _job(tmp_path, "local", _entry(maps["surface"]))
    remote = _job(tmp_path, "url", _entry(url))
    assert _analyse(remote, tmp_path / "out_url") == _analyse(local, tmp_path / "out_local")


def test_whole_read_of_an_address_is_the_folders_map(maps):
    a = read_map(_entry(maps["serial"]), phase_ids=(1,))
    b = read_map(_entry(maps["serial_address"]), phase_ids=(1,))
    assert_array_equal(b.quat, a.quat)
    assert_array_equal(b.phase, a.phase)
    assert_array_equal(b.valid, a.valid)
    assert b.provenance["source_path"] == maps["serial_address"]
    assert b.provenance["settings"] == a.provenance["settings"]


def test_a_serial_section_map_by_address(maps, tmp_path):
    surface = _entry(maps["surface"])
    local = _job(tmp_path, "local", surface, serial=_entry(maps["serial"]))
    remote = _job(tmp_path, "remote", surface, serial=_entry(maps["serial_address"]))
    job = load_job(remote)
    assert job.sections[0]["map"]["path"] == maps["serial_address"]  # as given, not joined
    a = _analyse(local, tmp_path / "out_local")
    b = _analyse(remote, tmp_path / "out_remote")
    assert b == a
    # The section measured dips (the serial map was read and used, not skipped).
    rows = list(csv.DictReader(io.StringIO(a["boundaries.csv"].decode())))
    assert sum(r["dip_source"] == "serial-section" for r in rows) > 5


# ----------------------------------------------------------------------------- bad addresses


def _one_line_exit_2(job_path, capsys):
    status = main(["grains", str(job_path), "--out", str(job_path.parent / "out")])
    err = capsys.readouterr().err.strip()
    assert status == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    return err


def test_an_unknown_scheme_exits_2_naming_the_field(tmp_path, capsys):
    err = _one_line_exit_2(_job(tmp_path, "j", _entry("s4://bucket/m.zarr")), capsys)
    assert "/map/path" in err and "'s4'" in err and "s4://bucket/m.zarr" in err
    assert "fsspec" in err


def test_a_missing_group_exits_2_naming_the_address(tmp_path, capsys):
    address = f"memory://inclination-tests-{uuid.uuid4().hex[:8]}/none.zarr"
    err = _one_line_exit_2(_job(tmp_path, "j", _entry(address)), capsys)
    assert "/map/path" in err and address in err and "no group" in err
    url = (tmp_path / "absent.zarr").as_uri()
    err = _one_line_exit_2(_job(tmp_path, "k", _entry(url)), capsys)
    assert url in err and "no group" in err


def test_a_missing_serial_group_names_the_sections_field(maps, tmp_path, capsys):
    address = f"memory://inclination-tests-{uuid.uuid4().hex[:8]}/none.zarr"
    job = _job(tmp_path, "j", _entry(maps["surface"]), serial=_entry(address))
    status = main(["analyse", str(job), "--out", str(tmp_path / "out"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert status == 2 and len(err.splitlines()) == 1
    assert "/sections/0/map/path" in err and address in err and "no group" in err


def test_an_address_for_another_format_exits_2(tmp_path, capsys):
    err = _one_line_exit_2(_job(tmp_path, "j", _entry("s3://bucket/m.npz", "npz")), capsys)
    assert "/map/path" in err and "npz" in err and "only zarr maps" in err


def test_storage_options_beside_a_local_path_exits_2(maps, tmp_path, capsys):
    job = _job(tmp_path, "j", _entry(maps["surface"], storage_options={"anon": True}))
    err = _one_line_exit_2(job, capsys)
    assert "/map/storage_options" in err and "store address" in err


@pytest.mark.skipif(
    importlib.util.find_spec("s3fs") is not None,
    reason="s3fs is installed: the message for a missing backend cannot be shown here",
)
def test_an_address_without_its_backend_says_what_to_install(tmp_path, capsys):
    job = _job(tmp_path, "j", _entry("s3://bucket/survey.zarr", storage_options={"anon": True}))
    err = _one_line_exit_2(job, capsys)
    assert "/map/path" in err and "s3://bucket/survey.zarr" in err and "s3fs" in err


class _GuardedMemory(MemoryFileSystem):
    """The memory filesystem behind a key: refuses to start without ``key="open"``."""

    protocol = "inclination-guarded"

    @classmethod
    def _strip_protocol(cls, path):
        return super()._strip_protocol(path.replace(f"{cls.protocol}://", "memory://", 1))

    def __init__(self, *args, key=None, **kwargs):
        if key != "open":
            raise PermissionError(f"key {key!r} refused")
        super().__init__(*args, **kwargs)


def test_storage_options_reach_the_backend(maps):
    fsspec.register_implementation(_GuardedMemory.protocol, _GuardedMemory, clobber=True)
    # The memory store is shared by the subclass: the same group behind another scheme.
    address = maps["surface_address"].replace("memory://", "inclination-guarded://")
    spec = _entry(address, storage_options={"key": "open"})
    a = read_map(_entry(maps["surface"]), phase_ids=(1,))
    b = read_map(spec, phase_ids=(1,), path_for_errors="job.json")
    assert_array_equal(b.quat, a.quat)
    with pytest.raises(InputError, match=r"job.json: /map/path: Expected a readable zarr group "
                       r"at 'inclination-guarded://.*PermissionError: key 'shut' refused"):
        read_map({**spec, "storage_options": {"key": "shut"}}, path_for_errors="job.json")


# ----------------------------------------------------------------------------- batch reruns


def test_metadata_hash_follows_the_arrays_not_the_values(tmp_path):
    root = f"memory://inclination-tests-{uuid.uuid4().hex[:8]}"
    try:
        address = f"{root}/m.zarr"
        e, p = np.zeros((6, 6, 3)), np.ones((6, 6), np.int32)
        write_zarr_map(address, e, p, chunks_px=(3, 3))
        first = zarr_metadata_sha256(address)
        write_zarr_map(address, e + 1.0, p, chunks_px=(3, 3))
        assert zarr_metadata_sha256(address) == first  # values only: chunks are not read
        write_zarr_map(address, e, p, chunks_px=(2, 3))
        assert zarr_metadata_sha256(address) != first
        # A local folder is hashed the same way as its file:// URL.
        write_zarr_map(tmp_path / "m.zarr", e, p, chunks_px=(3, 3))
        assert zarr_metadata_sha256(tmp_path / "m.zarr") == first
        assert zarr_metadata_sha256((tmp_path / "m.zarr").as_uri()) == first
        with pytest.raises(InputError, match="no group there"):
            zarr_metadata_sha256(f"{root}/none.zarr", path_for_errors="j.json", pointer="/map/path")
    finally:
        fsspec.filesystem("memory").rm(root.removeprefix("memory://"), recursive=True)


def test_a_batch_reruns_an_address_job_when_its_metadata_changes(tmp_path):
    distributed = pytest.importorskip(
        "distributed", reason="inclination batch needs the optional extra inclination[cluster]"
    )
    from jsonschema import Draft202012Validator

    from inclination.batch import run_batch
    from inclination.io.schemas import load_schema

    micro = synthetic.make_microstructure(
        box_um=(40.0, 32.0, 10.0), n_grains=8, twins=2, rng=9, phases=[Phase.from_dict(AUSTENITE)]
    )
    sample = synthetic.sample_map(micro, step_um=STEP, rng=3, noise_deg=0.5)
    euler, phase = _arrays(write_npz(tmp_path / "m.npz", synthetic.as_orientation_map(sample)))
    # The workers are other processes: a file:// address reaches them, memory:// would not.
    write_zarr_map(tmp_path / "survey.zarr", euler, phase, chunks_px=(16, 20))
    write_zarr_map(tmp_path / "local.zarr", euler, phase, chunks_px=(16, 20))
    address = (tmp_path / "survey.zarr").as_uri()
    jobs = [
        _job(tmp_path, "remote", _entry(address)),
        _job(tmp_path, "local", _entry(tmp_path / "local.zarr")),
    ]
    out = tmp_path / "batch"
    cluster = distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0"
    )
    try:
        with distributed.Client(cluster) as client:

            def statuses():
                return [r["status"] for r in run_batch(jobs, out, client=client).jobs]

            assert statuses() == ["ran", "ran"]
            doc = json.loads((out / "batch.json").read_text(encoding="utf-8"))
            Draft202012Validator(load_schema("batch.schema.json")).validate(doc)
            inputs = doc["jobs"][0]["inputs"]
            assert [(i["path"], i["content"]) for i in inputs][1:] == [(address, "zarr metadata")]
            assert inputs[0]["content"] == "file"
            assert inputs[1]["sha256"] == zarr_metadata_sha256(address)
            # A local zarr folder is hashed the same way (a folder is no file to hash whole).
            assert doc["jobs"][1]["inputs"][1]["content"] == "zarr metadata"
            summary = json.loads((out / "remote" / "summary.json").read_text(encoding="utf-8"))
            assert summary["provenance"]["map"]["source_path"] == address

            assert statuses() == ["skipped", "skipped"]
            # Values rewritten into the same arrays: the metadata, all that is hashed, holds.
            write_zarr_map(tmp_path / "survey.zarr", euler + 1.0, phase, chunks_px=(16, 20))
            assert statuses() == ["skipped", "skipped"]
            # Rechunked: the metadata changed, the job runs again.
            write_zarr_map(tmp_path / "survey.zarr", euler, phase, chunks_px=(8, 20))
            assert statuses() == ["ran", "skipped"]
    finally:
        cluster.close()
