"""What a batch writes across its jobs: batch.json, boundaries_all.csv, summary.md, stereology/.

Owns the batch document (``schemas/batch.schema.json``, generated from
:func:`batch_schema` by scripts/make_schemas.py), the combined boundary table streamed a
block of rows at a time, the twin statistics pooled over the jobs, and the plane
distribution pooled over every map of one phase (docs/batch.md). Reads only what the
jobs' tasks left: their folders and their pools in ``.batch/``
(:mod:`inclination.batch`).
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InclinationError, InputError

__all__ = [
    "SCHEMA_VERSION",
    "JOB_STATUSES",
    "batch_schema",
    "render_schema",
    "combined_boundary_chunks",
    "pooled_twin_test",
    "pooled_stereology",
    "write_batch_outputs",
]

SCHEMA_VERSION = "1.0"

#: ran (this batch), skipped (finished before, unchanged), failed (bad input: exit 2;
#: an internal fault: exit 1), lost (its worker died: exit 1).
JOB_STATUSES = ("ran", "skipped", "failed", "lost")

_DONE = ("ran", "skipped")
_ROWS_PER_BLOCK = 2000


def _nullable(kind):
    return {"type": [kind, "null"]}


def batch_schema() -> dict:
    """The JSON Schema of ``batch.json``.

    Examples
    --------
    >>> batch_schema()["properties"]["jobs"]["items"]["properties"]["status"]["enum"]
    ['ran', 'skipped', 'failed', 'lost']
    """
    count = {"type": "integer", "minimum": 0}
    fraction = {"type": ["number", "null"], "minimum": 0, "maximum": 1}
    interval = {
        "description": "95 % Wilson score interval of the fraction by count "
        "(scipy.stats.binomtest); null without Σ3 boundaries.",
        "type": "array",
        "items": fraction,
        "minItems": 2,
        "maxItems": 2,
    }
    job_twin = {
        "type": ["object", "null"],
        "required": ["n_sigma3", "passed", "fraction_by_count", "fraction_by_count_95ci"],
        "properties": {
            "n_sigma3": count,
            "passed": count,
            "fraction_by_count": fraction,
            "fraction_by_count_95ci": interval,
        },
    }
    job = {
        "type": "object",
        "required": [
            "name",
            "job_file",
            "output_folder",
            "status",
            "exit_status",
            "error",
            "inputs",
            "settings_sha256",
            "inclination",
            "frame_verdict",
            "audit",
            "counts",
            "identified",
            "twin_test",
        ],
        "additionalProperties": False,
        "properties": {
            "name": {"description": "The job's folder name in the batch folder.", "type": "string"},
            "job_file": {"description": "The job file (absolute path).", "type": "string"},
            "output_folder": {"description": "The job's output folder.", "type": "string"},
            "status": {
                "description": "ran: in this batch; skipped: finished before with the same "
                "inputs and settings; failed: bad input (exit status 2) or an internal fault "
                "(1); lost: the worker running it died (1).",
                "enum": list(JOB_STATUSES),
            },
            "exit_status": {
                "description": "What `inclination analyse` would have returned.",
                "enum": [0, 1, 2],
            },
            "error": {
                "description": "The one-line error of a failed or lost job; null otherwise.",
                **_nullable("string"),
            },
            "inputs": {
                "description": "SHA-256 of every input (job file first, then maps, "
                "sidecars, section maps, face images) as hashed when the job last ran.",
                "type": "array",
                "items": {
                    "type": "object",
                    "required": ["path", "sha256", "content"],
                    "additionalProperties": False,
                    "properties": {
                        "path": {
                            "description": "The file, folder or store address as the job "
                            "names it (an address such as s3://… as given).",
                            "type": "string",
                        },
                        "sha256": {"type": "string", "pattern": "^[0-9a-f]{64}$"},
                        "content": {
                            "description": "What sha256 covers: file (every byte), or zarr "
                            "metadata (a zarr map's group and array metadata documents; its "
                            "chunks are not read, so values rewritten in place into the same "
                            "arrays do not rerun the job).",
                            "enum": ["file", "zarr metadata"],
                        },
                    },
                },
            },
            "settings_sha256": {
                "description": "SHA-256 of the loaded job (defaults filled) and the "
                "inclination version.",
                "type": ["string", "null"],
                "pattern": "^[0-9a-f]{64}$",
            },
            "inclination": {"description": "Version that ran the job.", "type": "string"},
            "frame_verdict": {
                "description": "summary.json's frame_verdict.verdict; null without sections.",
                **_nullable("string"),
            },
            "audit": {
                "description": "The frame audit: is the declared frame the best hypothesis "
                "(true, false or 'undecided'), and its sentence.",
                "type": ["object", "null"],
                "required": ["declared_is_best", "sentence"],
                "properties": {
                    "declared_is_best": {"type": ["boolean", "string"]},
                    "sentence": {"type": "string"},
                },
            },
            "counts": {
                "description": "summary.json's counts (map points, grains, segments).",
                "type": ["object", "null"],
                "additionalProperties": count,
            },
            "identified": {
                "description": "summary.json's identified: boundaries by identification.",
                "type": ["object", "null"],
                "additionalProperties": count,
            },
            "twin_test": {
                "description": "summary.json's coherent-twin test, in short.",
                **job_twin,
            },
        },
    }
    pooled_twin = {
        "description": "The coherent-twin test pooled over every finished job's Σ3 segments.",
        "type": "object",
        "required": [
            "n_sigma3",
            "passed",
            "fraction_by_count",
            "fraction_by_count_95ci",
            "interval",
            "length_sigma3_um",
            "length_passed_um",
            "fraction_by_length",
            "per_job_fraction_range",
        ],
        "properties": {
            "n_sigma3": count,
            "passed": count,
            "fraction_by_count": fraction,
            "fraction_by_count_95ci": interval,
            "interval": {"enum": ["wilson"]},
            "length_sigma3_um": {"type": "number", "minimum": 0},
            "length_passed_um": {"type": "number", "minimum": 0},
            "fraction_by_length": fraction,
            "per_job_fraction_range": {
                "description": "Lowest and highest fraction by count among the jobs with "
                "Σ3 segments: the spread between maps, which the pooled interval ignores.",
                "type": ["array", "null"],
                "items": fraction,
            },
        },
    }
    stereology = {
        "description": "The plane distribution pooled over the maps (stereology/).",
        "type": "object",
        "required": ["folder", "settings_from", "jobs", "left_out", "n_traces"],
        "properties": {
            "folder": _nullable("string"),
            "settings_from": {
                "description": "The job whose stereology block (or, without one, the "
                "defaults) the pooled distribution uses.",
                **_nullable("string"),
            },
            "jobs": {"type": "array", "items": {"type": "string"}},
            "left_out": {
                "type": "array",
                "items": {
                    "type": "object",
                    "required": ["job", "phase", "reason"],
                    "properties": {
                        "job": {"type": "string"},
                        "phase": {"type": "integer"},
                        "reason": {"type": "string"},
                    },
                },
            },
            "n_traces": {
                "description": "Traces pooled per phase id.",
                "type": "object",
                "additionalProperties": count,
            },
        },
    }
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": "Batch of jobs (inclination batch)",
        "description": "batch.json: one record per job, in the order given, and what is "
        "pooled over the finished jobs (docs/batch.md).",
        "type": "object",
        "required": ["schema_version", "tool", "out_dir", "exit_status", "status_counts", "jobs"],
        "additionalProperties": False,
        "properties": {
            "schema_version": {"const": SCHEMA_VERSION},
            "tool": {
                "type": "object",
                "required": ["name", "version"],
                "properties": {"name": {"const": "inclination"}, "version": {"type": "string"}},
            },
            "out_dir": {"type": "string"},
            "exit_status": {
                "description": "0 when every job is done, else the highest job exit status.",
                "enum": [0, 1, 2],
            },
            "status_counts": {
                "type": "object",
                "required": list(JOB_STATUSES),
                "properties": {s: count for s in JOB_STATUSES},
            },
            "jobs": {"type": "array", "items": job},
            "pooled": {
                "type": "object",
                "required": ["jobs", "counts", "identified", "twin_test", "stereology"],
                "properties": {
                    "jobs": {"type": "array", "items": {"type": "string"}},
                    "counts": {"type": "object", "additionalProperties": count},
                    "identified": {"type": "object", "additionalProperties": count},
                    "twin_test": pooled_twin,
                    "stereology": stereology,
                },
            },
        },
    }


def render_schema() -> str:
    """schemas/batch.schema.json as text (a test checks the committed file against it).

    Examples
    --------
    >>> json.loads(render_schema())["title"]
    'Batch of jobs (inclination batch)'
    """
    return json.dumps(batch_schema(), indent=2, ensure_ascii=False) + "\n"


def combined_boundary_chunks(out_dir, names):
    """boundaries_all.csv as encoded blocks: a leading ``job`` column, then each job's rows.

    Each job's ``boundaries.csv`` is read a block of rows at a time, so the combined
    table is never held in memory whole.

    Parameters
    ----------
    out_dir : path
        The batch folder.
    names : sequence of str
        The finished jobs, in the order their rows are wanted.

    Yields
    ------
    bytes
        UTF-8 CSV text.

    Raises
    ------
    InputError
        A job's table has another header than the first job's.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> for n, v in (("a", "1"), ("b", "2")):
    ...     (d / n).mkdir(); _ = (d / n / "boundaries.csv").write_text(f"id,x\\n{v},{v}.5\\n")
    >>> print(b"".join(combined_boundary_chunks(d, ["a", "b"])).decode(), end="")
    job,id,x
    a,1,1.5
    b,2,2.5
    """
    header = None
    for name in names:
        path = Path(out_dir) / name / "boundaries.csv"
        with path.open(newline="", encoding="utf-8") as fh:
            reader = csv.reader(fh)
            first = next(reader, None)
            if first is None:
                continue
            if header is None:
                header = first
                yield _csv_text([["job", *header]])
            elif first != header:
                raise InputError(
                    f"Expected the columns of the first job's boundaries.csv, got "
                    f"{len(first)} other columns.",
                    path=path,
                )
            block = []
            for row in reader:
                block.append([name, *row])
                if len(block) == _ROWS_PER_BLOCK:
                    yield _csv_text(block)
                    block = []
            if block:
                yield _csv_text(block)


def _csv_text(rows) -> bytes:
    buf = io.StringIO()
    # The line ending of the jobs' own tables (report.tables.write_csv).
    csv.writer(buf, lineterminator="\n").writerows(rows)
    return buf.getvalue().encode("utf-8")


def _pool(out_dir, name) -> dict:
    from .batch import RECORDS_DIR

    with np.load(Path(out_dir) / RECORDS_DIR / f"{name}.npz", allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


def pooled_twin_test(pools, per_job) -> dict:
    """The coherent-twin test over the Σ3 segments of every job at once.

    The fraction and its 95 % Wilson score interval come from
    :func:`inclination.planes.twins.twin_test_summary` on all jobs' segments together,
    which treats every segment as independent; ``per_job_fraction_range`` shows how far
    the maps differ.

    Parameters
    ----------
    pools : sequence of dict
        Per job ``twin_segment_id``, ``twin_test``, ``segment_id`` and ``length_um``.
    per_job : sequence of dict or None
        The jobs' own ``twin_test`` records, for the spread between maps.

    Examples
    --------
    >>> a = {"twin_segment_id": np.array([1, 2]), "twin_test": np.array(["pass", "fail"]),
    ...      "segment_id": np.array([1, 2]), "length_um": np.array([3.0, 1.0])}
    >>> b = {"twin_segment_id": np.array([1]), "twin_test": np.array(["pass"]),
    ...      "segment_id": np.array([1]), "length_um": np.array([4.0])}
    >>> t = pooled_twin_test([a, b], [])
    >>> t["n_sigma3"], t["passed"], t["fraction_by_length"]
    (3, 2, 0.875)
    """
    from .planes.twins import twin_test_summary

    ids, tests, seg_ids, lengths = [], [], [], []
    offset = 0
    for p in pools:
        # Segment ids restart in every job: shift them so the join stays within one job.
        seg = np.asarray(p["segment_id"], np.int64)
        ids.append(np.asarray(p["twin_segment_id"], np.int64) + offset)
        tests.append(np.asarray(p["twin_test"]).astype(str))
        seg_ids.append(seg + offset)
        lengths.append(np.asarray(p["length_um"], float))
        offset += int(seg.max(initial=0)) + 1

    def cat(xs, dt):
        return np.concatenate(xs) if xs else np.zeros(0, dt)

    s = twin_test_summary(
        {"segment_id": cat(ids, np.int64), "twin_test": cat(tests, str)},
        {"segment_id": cat(seg_ids, np.int64), "length_um": cat(lengths, float)},
    )
    fractions = [
        t["fraction_by_count"]
        for t in per_job
        if t and t["n_sigma3"] > 0 and t["fraction_by_count"] is not None
    ]
    return {
        "n_sigma3": s.n_sigma3,
        "passed": s.n_pass,
        "fraction_by_count": s.fraction_by_count,
        "fraction_by_count_95ci": [s.ci_low, s.ci_high],
        "interval": s.interval_method,
        "length_sigma3_um": s.length_sigma3_um,
        "length_passed_um": s.length_pass_um,
        "fraction_by_length": s.fraction_by_length,
        "per_job_fraction_range": [min(fractions), max(fractions)] if fractions else None,
    }


def _phase_key(phase):
    # What the distribution depends on: the symmetry and the cell (conventions §4).
    return (phase.laue, phase.lattice, phase.setting)


def pooled_stereology(out_dir, names, jobs, pools) -> dict:
    """The plane distribution of every phase from the traces of all maps together.

    Grains and traces of each finished job are stacked (grain ids shifted per job) and
    passed to the project's stereology (:func:`inclination.stereology.outputs.run_from_job`
    and ``write_stereology``) with the settings of the first job that has a
    ``stereology`` block, or the defaults. A job's phase that differs from the first
    definition of that phase id (Laue class, lattice, setting) is left out and named.
    Written into ``out_dir/stereology/`` through the output-folder protocol.

    Returns
    -------
    dict
        ``batch.json``'s ``pooled.stereology``.
    """
    from .io.job import job_from_dict
    from .report.atomic import staged_output_dir
    from .stereology.outputs import run_from_job, write_stereology

    info = {"folder": None, "settings_from": None, "jobs": [], "left_out": [], "n_traces": {}}
    if not names:
        return info
    ref_name = next((n for n in names if "stereology" in jobs[n].raw), names[0])
    ref = jobs[ref_name]
    if "stereology" not in ref.raw:
        ref = job_from_dict(
            {**ref.raw, "stereology": {}}, base_dir=ref.base_dir, path_for_errors=ref.source_path
        )
    wanted = {pid: _phase_key(ph) for pid, ph in ref.phases.items()}
    grains = {"grain_id": [], "phase": [], "quat": []}
    segs = {k: [] for k in ("grain_a", "grain_b", "trace_angle_deg", "length_um")}
    segs["is_phase_boundary"] = []
    offset = 0
    for n in names:
        p = pools[n]
        keep_phase = []
        for pid, ph in jobs[n].phases.items():
            if wanted.get(pid) == _phase_key(ph):
                keep_phase.append(pid)
            else:
                info["left_out"].append(
                    {
                        "job": n,
                        "phase": int(pid),
                        "reason": "not in the first job's phases"
                        if pid not in wanted
                        else "another Laue class, lattice or setting than the first job's",
                    }
                )
        gid = np.asarray(p["grain_id"], np.int64)
        gphase = np.asarray(p["grain_phase"], np.int64)
        kept = np.isin(gphase, keep_phase)
        grains["grain_id"].append(gid[kept] + offset)
        grains["phase"].append(gphase[kept])
        grains["quat"].append(np.asarray(p["grain_quat"], float)[kept])
        # Traces of a left-out grain point at no grain of the pool: the estimate drops them.
        present = np.zeros(int(gid.max(initial=0)) + 1, bool)
        present[gid[kept]] = True
        a, b = np.asarray(p["grain_a"], np.int64), np.asarray(p["grain_b"], np.int64)
        ok = present[np.clip(a, 0, len(present) - 1)] & present[np.clip(b, 0, len(present) - 1)]
        ok &= (a > 0) & (b > 0) & (a < len(present)) & (b < len(present))
        segs["grain_a"].append(a[ok] + offset)
        segs["grain_b"].append(b[ok] + offset)
        for k in ("trace_angle_deg", "length_um", "is_phase_boundary"):
            segs[k].append(np.asarray(p[k])[ok])
        offset += int(gid.max(initial=0)) + 1
        if keep_phase:
            info["jobs"].append(n)
    grains_all = {k: np.concatenate(v) for k, v in grains.items()}
    grains_all["quat"] = grains_all["quat"].reshape(-1, 4)
    segs_all = {k: np.concatenate(v) for k, v in segs.items()}
    results, settings = run_from_job(ref, segs_all, grains_all)
    folder = Path(out_dir) / "stereology"
    with staged_output_dir(folder, overwrite=True) as stage:
        write_stereology(results, ref.phases, stage, settings=settings, standalone=True)
    info.update(
        folder=str(folder),
        settings_from=ref_name,
        n_traces={str(d.phase): int(d.n_traces) for d in results if d.misorientation == "all"},
    )
    return info


def _sum_counts(records, key) -> dict:
    total: dict = {}
    for r in records:
        for k, v in (r.get(key) or {}).items():
            total[k] = total.get(k, 0) + int(v)
    return total


def _fmt(v, spec=".2f"):
    return "–" if v is None or (isinstance(v, float) and not np.isfinite(v)) else format(v, spec)


def _markdown(doc) -> str:
    lines = [
        "# Batch summary",
        "",
        f"{len(doc['jobs'])} jobs: "
        + ", ".join(f"{k} {v}" for k, v in doc["status_counts"].items())
        + f"; exit status {doc['exit_status']}.",
        "",
        "| job | status | frame verdict | frame audit | grains | segments | coherent twin "
        "| Σ3 passing / tested | error |",
        "|---|---|---|---|---:|---:|---:|---:|---|",
    ]
    for r in doc["jobs"]:
        c, i, t, a = r["counts"] or {}, r["identified"] or {}, r["twin_test"] or {}, r["audit"]
        audit = "–" if a is None else f"declared best: {a['declared_is_best']}"
        twin = f"{t['passed']} / {t['n_sigma3']}" if t else "–"
        error = (r["error"] or "").replace("|", "\\|")
        lines.append(
            f"| {r['name']} | {r['status']} | {r['frame_verdict'] or '–'} | {audit} "
            f"| {c.get('grains', '–')} | {c.get('segments', '–')} "
            f"| {i.get('coherent_twin', '–')} | {twin} | {error} |"
        )
    pooled = doc.get("pooled")
    if pooled:
        t = pooled["twin_test"]
        lo, hi = t["fraction_by_count_95ci"]
        lines += [
            "",
            f"## Across the {len(pooled['jobs'])} finished jobs",
            "",
            f"- Coherent-twin trace test: {t['passed']} of {t['n_sigma3']} Σ3 segments pass, "
            f"fraction {_fmt(t['fraction_by_count'], '.3f')} (95 % Wilson score interval "
            f"{_fmt(lo, '.3f')}–{_fmt(hi, '.3f')}, every segment counted as independent); by "
            f"length {_fmt(t['fraction_by_length'], '.3f')}.",
        ]
        if t["per_job_fraction_range"]:
            lo, hi = t["per_job_fraction_range"]
            lines.append(f"- Fraction by count between maps: {lo:.3f} to {hi:.3f}.")
        lines.append(
            "- Totals: " + ", ".join(f"{k} {v}" for k, v in pooled["counts"].items()) + "."
        )
        s = pooled["stereology"]
        if s["folder"]:
            lines.append(
                f"- Plane distribution from the traces of {len(s['jobs'])} maps "
                f"(settings of {s['settings_from']}): stereology/stereology.md; traces per "
                "phase: " + ", ".join(f"phase {k} {v}" for k, v in s["n_traces"].items()) + "."
            )
        for left in s["left_out"]:
            lines.append(
                f"- Left out of the distribution: {left['job']} phase "
                f"{left['phase']} ({left['reason']})."
            )
    return "\n".join(lines) + "\n"


def write_batch_outputs(out_dir, records, *, exit_status: int) -> list[str]:
    """Write batch.json, boundaries_all.csv, summary.md and stereology/ of a batch.

    Parameters
    ----------
    out_dir : path
        The batch folder.
    records : sequence of dict
        One record per job (``batch.json``'s ``jobs``), in the order given.
    exit_status : int

    Returns
    -------
    list of str
        Lines for the command line.

    Examples
    --------
    >>> import tempfile
    >>> out = Path(tempfile.mkdtemp())
    >>> rec = {"name": "a", "job_file": "/x/a.json", "output_folder": str(out / "a"),
    ...        "status": "failed", "exit_status": 2, "error": "inclination: error: bad",
    ...        "inputs": [], "settings_sha256": None, "inclination": "0", "frame_verdict": None,
    ...        "audit": None, "counts": None, "identified": None, "twin_test": None}
    >>> write_batch_outputs(out, [rec], exit_status=2)[0]
    'a: inclination: error: bad'
    >>> json.loads((out / "batch.json").read_text())["status_counts"]
    {'ran': 0, 'skipped': 0, 'failed': 1, 'lost': 0}
    """
    from jsonschema import Draft202012Validator

    from .io.job import load_job
    from .io.schemas import load_schema
    from .report.atomic import json_ready, write_chunks_atomic, write_json_atomic, write_text_atomic

    out = Path(out_dir)
    done = [r["name"] for r in records if r["status"] in _DONE]
    jobs, pools, messages = {}, {}, []
    for n in done:
        rec = next(r for r in records if r["name"] == n)
        try:
            jobs[n] = load_job(rec["job_file"])
        except InclinationError as exc:
            messages.append(f"{n}: left out of the pooled stereology: {exc}")
            continue
        pools[n] = _pool(out, n)
    pooled_names = [n for n in done if n in jobs]
    write_chunks_atomic(out / "boundaries_all.csv", combined_boundary_chunks(out, done))
    doc = {
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "inclination", "version": __version__},
        "out_dir": str(out),
        "exit_status": int(exit_status),
        "status_counts": {s: sum(r["status"] == s for r in records) for s in JOB_STATUSES},
        "jobs": list(records),
        "pooled": {
            "jobs": done,
            "counts": _sum_counts([r for r in records if r["status"] in _DONE], "counts"),
            "identified": _sum_counts([r for r in records if r["status"] in _DONE], "identified"),
            "twin_test": pooled_twin_test(
                [pools[n] for n in pooled_names],
                [r["twin_test"] for r in records if r["name"] in pooled_names],
            ),
            "stereology": pooled_stereology(out, pooled_names, jobs, pools),
        },
    }
    doc = json_ready(doc)
    Draft202012Validator(load_schema("batch.schema.json")).validate(doc)
    write_json_atomic(out / "batch.json", doc)
    write_text_atomic(out / "summary.md", _markdown(doc))
    for r in records:
        if r["error"]:
            messages.append(f"{r['name']}: {r['error']}")
    counts = ", ".join(f"{k} {v}" for k, v in doc["status_counts"].items() if v)
    messages.append(f"{out}: {len(records)} jobs ({counts})")
    messages.append(f"per job and pooled: {out / 'batch.json'}, {out / 'summary.md'}")
    return messages
