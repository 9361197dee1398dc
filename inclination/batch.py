"""Batches of jobs on dask.distributed: one task per job, each into its own folder.

Owns running many job files as one batch (docs/batch.md): their names, the hashes that
tell a finished job from a changed one, the task that runs one job, and the scheduling.
Each task calls :func:`inclination.pipeline.analyse`, so a job's folder gets the same
files through the same output-folder protocol (report.atomic ``staged_output_dir``): a
worker killed mid-job leaves the earlier folder or an empty one, never a half-written
one. What the batch writes across jobs (``batch.json``, ``boundaries_all.csv``, the
summary, the pooled stereology) belongs to :mod:`inclination.batch_outputs`.

dask and distributed are the optional extra ``cluster``, imported only inside
:func:`run_batch`.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import os
import threading
import uuid
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InclinationError, InputError

__all__ = [
    "RECORDS_DIR",
    "BatchResult",
    "job_names",
    "file_sha256",
    "input_hashes",
    "settings_sha256",
    "run_job",
    "run_batch",
]

#: Beside the job folders: one record (JSON) and one pool of traces (npz) per job,
#: written by the job's task after its folder is in place; the record is what a rerun
#: compares (docs/batch.md, "The rerun rule").
RECORDS_DIR = ".batch"

# Names the batch writes into its own folder; a job may not take them.
_RESERVED = ("stereology", "batch.json", "boundaries_all.csv", "summary.md")

# One job at a time per worker process: the figures go through pyplot, whose state is
# per process, so two threads of one worker must not draw at once. A worker started
# with several threads then runs its jobs one after another (docs/batch.md).
_ONE_JOB_PER_PROCESS = threading.Lock()


@dataclass(frozen=True)
class BatchResult:
    """The outcome of a batch.

    Attributes
    ----------
    out_dir : Path
    jobs : tuple of dict
        One record per job, in the order given, as ``batch.json`` holds them.
    exit_status : int
        0 when every job is done, else the highest per-job exit status (2 bad input,
        1 a lost worker or an internal fault).
    messages : tuple of str
        The lines the command line prints.
    """

    out_dir: Path
    jobs: tuple
    exit_status: int
    messages: tuple[str, ...] = ()


def job_names(job_paths: Sequence[str | os.PathLike]) -> tuple[str, ...]:
    """The folder name of each job: its file's stem, or ``parent-stem`` where stems repeat.

    Raises
    ------
    InputError
        Two jobs would share a folder, or a name is one the batch writes itself.

    Examples
    --------
    >>> job_names(["a/job.json", "b/job.json", "c/other.json"])
    ('a-job', 'b-job', 'other')
    """
    paths = [Path(p) for p in job_paths]
    stems = [p.stem for p in paths]
    names = [
        f"{p.parent.name}-{s}" if stems.count(s) > 1 and p.parent.name else s
        for p, s in zip(paths, stems, strict=True)
    ]
    seen: dict = {}
    for p, n in zip(paths, names, strict=True):
        if n in seen:
            raise InputError(
                f"Expected job files whose names (or folder-name) differ, got a second job "
                f"named {n!r} (the first is {seen[n]}); rename one.",
                path=p,
            )
        if n.startswith(".") or n in _RESERVED:
            raise InputError(
                f"Expected a job name other than {n!r} (names the batch uses: "
                f"{', '.join(_RESERVED)}, or a leading dot); rename the file.",
                path=p,
            )
        seen[n] = p
    return tuple(names)


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read a block at a time (hex digest).

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "x"; _ = p.write_bytes(b"abc")
    >>> file_sha256(p)[:16]  # FIPS 180-2, appendix B.1: SHA-256("abc")
    'ba7816bf8f01cfea'
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def input_hashes(job) -> list[dict]:
    """``{"path", "sha256", "content"}`` of every input of a loaded job, the job file first.

    The inputs are those of :func:`inclination.pipeline.input_files` (job file, maps,
    sidecars, section maps, face images). A file is hashed whole (``content`` "file"). A
    zarr map, a local folder or a store address kept as given (``s3://…``), is hashed by
    its metadata documents read through fsspec (``content`` "zarr metadata",
    :func:`inclination.io.chunked.zarr_metadata_sha256`): its chunks are not read, so
    values rewritten in place into the same arrays do not rerun the job (docs/batch.md,
    "The rerun rule").

    Raises
    ------
    InputError
        A file cannot be read.

    Examples
    --------
    >>> import json, tempfile
    >>> from inclination.io.job import load_job
    >>> from inclination.io.writers import write_npz
    >>> from inclination.maps import OrientationMap
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> _ = (folder / "job.json").write_text(json.dumps(spec))
    >>> [(Path(h["path"]).name, h["content"]) for h in input_hashes(load_job(folder / "job.json"))]
    [('job.json', 'file'), ('m.npz', 'file')]
    """
    from .io.chunked import zarr_metadata_sha256
    from .pipeline import input_files

    zarr_maps = {}
    specs = [("/map", job.map)] + [
        (f"/sections/{i}/map", s["map"]) for i, s in enumerate(job.sections) if "map" in s
    ]
    for pointer, spec in specs:
        if isinstance(spec, dict) and spec.get("format") == "zarr":
            zarr_maps[str(spec["path"])] = (pointer, spec.get("storage_options"))
    out = []
    for f in input_files(job):
        if str(f) in zarr_maps:
            pointer, options = zarr_maps[str(f)]
            digest = zarr_metadata_sha256(
                str(f),
                storage_options=options,
                path_for_errors=job.source_path,
                pointer=f"{pointer}/path",
            )
            out.append({"path": str(f), "sha256": digest, "content": "zarr metadata"})
            continue
        try:
            out.append({"path": str(f), "sha256": file_sha256(f), "content": "file"})
        except OSError as exc:
            raise InputError(
                f"Expected a readable input file, got {exc.strerror}.", path=f
            ) from None
    return out


def settings_sha256(job) -> str:
    """SHA-256 of the job's settings as loaded (defaults filled) and the package version.

    A new release may change a default or a result, so its runs count as changed.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> a = settings_sha256(SimpleNamespace(raw={"grains": {"threshold_deg": 5}}))
    >>> a == settings_sha256(SimpleNamespace(raw={"grains": {"threshold_deg": 6}}))
    False
    """
    text = json.dumps({"job": job.raw, "inclination": __version__}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _record_paths(out: Path, name: str) -> tuple[Path, Path]:
    return out / RECORDS_DIR / f"{name}.json", out / RECORDS_DIR / f"{name}.npz"


def _pool_arrays(analysis) -> dict:
    """What the batch pools from one run: the traces and grains in S, the twin test."""
    seg, grains = analysis.segments, analysis.grain_map.grains
    arrays = {
        "grain_id": np.asarray(grains["grain_id"], np.int64),
        "grain_phase": np.asarray(grains["phase"], np.int64),
        "grain_quat": np.asarray(grains["quat"], float),
    }
    for key in ("segment_id", "grain_a", "grain_b", "trace_angle_deg", "length_um"):
        arrays[key] = np.asarray(seg[key])
    arrays["is_phase_boundary"] = np.asarray(seg["is_phase_boundary"], bool)
    ident = analysis.identification
    arrays["twin_segment_id"] = np.asarray(ident["segment_id"], np.int64)
    arrays["twin_test"] = np.asarray(ident["twin_test"]).astype(str)
    return arrays


def _job_record(name: str, job_path: str, out: Path) -> dict:
    return {
        "name": name,
        "job_file": job_path,
        "output_folder": str(out / name),
        "status": "failed",
        "exit_status": 2,
        "error": None,
        "inputs": [],
        "settings_sha256": None,
        "inclination": __version__,
        "frame_verdict": None,
        "audit": None,
        "counts": None,
        "identified": None,
        "twin_test": None,
    }


def run_job(job_path: str, name: str, out_dir: str) -> dict:
    """The task of one job: analyse it into ``out_dir/name`` and record the outcome.

    Bad input is not raised: the record gets its one line and exit status 2, as
    ``inclination analyse`` would print and return. After the job's folder is in
    place, the task writes its pool of traces and then its record into
    ``out_dir/.batch/`` (each atomically), so a record names only finished folders.

    Returns
    -------
    dict
        The job's record (see schemas/batch.schema.json, ``jobs`` items).

    Examples
    --------
    >>> import json, tempfile
    >>> from inclination.io.job import load_job
    >>> from inclination.io.writers import write_npz
    >>> from inclination.maps import OrientationMap
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> _ = (folder / "job.json").write_text(json.dumps(spec))
    >>> rec = run_job(str(folder / "job.json"), "job", str(folder / "batch"))
    >>> rec["status"], rec["exit_status"], rec["counts"]["grains"]
    ('ran', 0, 2)
    >>> sorted(p.name for p in (folder / "batch" / ".batch").iterdir())
    ['job.json', 'job.npz']
    >>> run_job(str(folder / "none.json"), "none", str(folder / "batch"))["exit_status"]
    2
    """
    from .io.job import load_job
    from .pipeline import analyse
    from .report.atomic import json_ready, write_bytes_atomic, write_json_atomic

    out = Path(out_dir)
    record_path, pool_path = _record_paths(out, name)
    record_path.parent.mkdir(parents=True, exist_ok=True)
    rec = _job_record(name, job_path, out)
    with _ONE_JOB_PER_PROCESS:
        try:
            job = load_job(job_path)
            rec["inputs"] = input_hashes(job)
            rec["settings_sha256"] = settings_sha256(job)
            with _threads_inside():
                result = analyse(job_path, out / name, overwrite=True)
        except InclinationError as exc:
            rec["error"] = f"inclination: error: {exc}"
            if not rec["inputs"]:
                try:
                    rec["inputs"] = [
                        {"path": job_path, "sha256": file_sha256(job_path), "content": "file"}
                    ]
                except OSError:
                    pass
            write_json_atomic(record_path, rec)
            return json_ready(rec)
        buf = io.BytesIO()
        np.savez(buf, **_pool_arrays(result.analysis))
        write_bytes_atomic(pool_path, buf.getvalue())
    summary = result.summary
    audit = result.analysis.audit
    verdict = summary.get("frame_verdict")
    twin = summary.get("twin_test")
    rec.update(
        status="ran",
        exit_status=0,
        frame_verdict=None if verdict is None else verdict["verdict"],
        audit=None
        if audit is None
        else {"declared_is_best": audit.declared_is_best, "sentence": audit.sentence()},
        counts=dict(summary["counts"]),
        identified=dict(summary.get("identified", {})),
        twin_test=None
        if twin is None
        else {
            k: twin[k]
            for k in ("n_sigma3", "passed", "fraction_by_count", "fraction_by_count_95ci")
        },
    )
    write_json_atomic(record_path, rec)
    # NaN (no Σ3 boundary: no fraction) as null, as the stored record and batch.json hold it.
    return json_ready(rec)


def _threads_inside():
    """Within the task, dask's threaded scheduler for the job's own dask work.

    A zarr map's arrays are dask arrays (inclination.io.chunked). On a worker, dask's
    default scheduler is the worker's client: a job computing on it from its one thread
    would wait on tasks queued behind itself. The job runs as ``analyse`` does alone.
    """
    import contextlib

    try:
        import dask
    except ImportError:
        return contextlib.nullcontext()
    return dask.config.set(scheduler="threads")


def _finished(out: Path, name: str, job_path: str) -> dict | None:
    """The stored record of a job that needs no rerun, else None (docs/batch.md)."""
    from .io.job import load_job
    from .io.limits import read_json

    record_path, pool_path = _record_paths(out, name)
    if not (record_path.is_file() and pool_path.is_file()):
        return None
    if not (out / name / "summary.json").is_file():
        return None
    try:
        rec = read_json(record_path, kind="run")
        job = load_job(job_path)
        same = (
            isinstance(rec, dict)
            and rec.get("status") == "ran"
            and rec.get("job_file") == job_path
            and rec.get("settings_sha256") == settings_sha256(job)
            and rec.get("inputs") == input_hashes(job)
        )
    except InclinationError:
        # An unreadable record or a job that no longer loads: run it, and let the task
        # record why it fails.
        return None
    return {**rec, "status": "skipped"} if same else None


def _connect(distributed, scheduler, workers, notify):
    """(client, cluster or None): a local cluster unless a scheduler is named."""
    if scheduler is None:
        cluster = distributed.LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            # Any free port: a second batch (or another user's) may hold the default.
            dashboard_address=":0",
        )
        notify(f"local cluster: {len(cluster.workers)} workers; dashboard {cluster.dashboard_link}")
        return distributed.Client(cluster), cluster
    try:
        client = distributed.Client(scheduler, timeout="30s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            f"Expected a dask scheduler at {scheduler!r}, got no answer ({type(exc).__name__})."
        ) from None
    if workers:
        try:
            client.wait_for_workers(workers, timeout=120)
        except TimeoutError:
            n = len(client.scheduler_info()["workers"])
            client.close()
            raise InputError(
                f"Expected {workers} workers at the scheduler {scheduler!r} within 120 s, got {n}."
            ) from None
    return client, None


class _QuietLogs:
    """A logger held at ERROR until ``restore()``."""

    def __init__(self, name: str):
        self._logger = logging.getLogger(name)
        self._level = self._logger.level
        self._logger.setLevel(logging.ERROR)

    def restore(self) -> None:
        self._logger.setLevel(self._level)


def _lost(name: str, job_path: str, out: Path, exc: BaseException) -> dict:
    rec = _job_record(name, job_path, out)
    kind = type(exc).__name__
    if kind == "KilledWorker":
        line = "the worker running this job died (killed or out of memory); run the batch again"
        rec.update(status="lost", exit_status=1, error=f"inclination: {line}")
    else:
        text = str(exc).splitlines()[0] if str(exc) else ""
        rec.update(
            status="failed", exit_status=1, error=f"inclination: internal error: {kind}: {text}"
        )
    return rec


def run_batch(
    job_paths: Sequence[str | os.PathLike],
    out_dir: str | os.PathLike,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Callable | None = None,
    notify: Callable[[str], object] | None = None,
    client=None,
) -> BatchResult:
    """Run every job as one dask task into ``out_dir/<job name>/``; skip finished ones.

    A job is skipped when its record says it ran, its folder holds ``summary.json``,
    and the SHA-256 of every input file and of its settings are unchanged; any other
    job runs. A failed job records its one-line error (exit status 2 for bad input)
    and does not stop the others. Then ``batch.json``, ``boundaries_all.csv``,
    ``summary.md`` and ``stereology/`` are written across the finished jobs
    (:mod:`inclination.batch_outputs`).

    Parameters
    ----------
    job_paths : sequence of path
        Job files; every worker must see them, and their maps, at the same paths.
    out_dir : path
        The batch folder (created if needed).
    scheduler : str, optional
        Address of a running dask scheduler (``tcp://host:8786``); without it a local
        cluster of ``workers`` processes runs the batch.
    workers : int, optional
        Worker processes of the local cluster (dask's default without it); with a
        scheduler, the number of workers to wait for before submitting.
    progress : callable, optional
        A progress factory ``(total, desc) -> bar`` (the command line's tqdm bars).
    notify : callable, optional
        Receives lines at once (the local cluster's dashboard address).
    client : distributed.Client, optional
        Run on this client instead (``scheduler`` and ``workers`` are then unused).

    Returns
    -------
    BatchResult

    Notes
    -----
    No doctest: it needs the optional extra ``cluster``, which the oldest-versions CI
    step leaves out; tests/test_batch.py runs it on a local cluster.

    Raises
    ------
    InputError
        dask.distributed is not installed, two jobs share a name, the batch folder
        cannot be written, or the scheduler cannot be reached. A bad job file is not
        raised: its record says why it failed.
    """
    try:
        import distributed
    except ImportError:
        raise InputError(
            "Expected dask.distributed for `inclination batch`, got none installed; "
            "install the extra: pip install 'inclination[cluster]'."
        ) from None
    from .batch_outputs import write_batch_outputs

    notify = notify or (lambda _line: None)
    if workers is not None and (
        isinstance(workers, bool) or int(workers) != workers or workers < 1
    ):
        raise InputError(f"Expected --workers to be a whole number >= 1, got {workers!r}.")
    if not job_paths:
        raise InputError("Expected at least one job file, got none.")
    # A missing or unreadable job file fails as its task (recorded, exit status 2), as
    # any other bad input does, without stopping the others.
    paths = [str(Path(p).resolve()) for p in job_paths]
    names = job_names(paths)
    out = Path(os.path.abspath(out_dir))
    if out.exists() and not out.is_dir():
        raise InputError("Expected a folder for the batch, got a file.", path=out)
    try:
        (out / RECORDS_DIR).mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(
            f"Expected a writable batch folder, got {exc.strerror}.", path=out
        ) from None

    records: dict = {}
    todo = []
    for p, n in zip(paths, names, strict=True):
        rec = _finished(out, n, p)
        if rec is None:
            todo.append((p, n))
        else:
            records[n] = rec
    bar = None if progress is None else progress(len(paths), "batch")
    if bar is not None and records:
        bar.update(len(records))
    cluster = None
    if todo:
        own = client is None
        # The local cluster's nannies log in this process; their notes on shutting down
        # slow worker processes ("still alive after 4.0 seconds, killing") are not the
        # user's concern. Errors still show.
        quiet = _QuietLogs("distributed") if own and scheduler is None else None
        if own:
            client, cluster = _connect(distributed, scheduler, workers, notify)
        # A key of its own per batch: a client that ran this job before may still hold it.
        token = uuid.uuid4().hex[:8]
        try:
            futures = {
                client.submit(
                    run_job, p, n, str(out), key=f"inclination-job-{n}-{token}", pure=False
                ): (
                    p,
                    n,
                )
                for p, n in todo
            }
            for fut in distributed.as_completed(list(futures)):
                p, n = futures[fut]
                try:
                    records[n] = fut.result()
                except Exception as exc:  # a lost worker or an internal fault: this job only
                    records[n] = _lost(n, p, out, exc)
                finally:
                    fut.release()
                if bar is not None:
                    bar.update(1)
        finally:
            if own:
                client.close()
                if cluster is not None:
                    cluster.close()
            if quiet is not None:
                quiet.restore()
    if bar is not None:
        bar.close()
    ordered = tuple(records[n] for n in names)
    status = max(r["exit_status"] for r in ordered)
    messages = write_batch_outputs(out, ordered, exit_status=status)
    return BatchResult(out, ordered, status, tuple(messages))
