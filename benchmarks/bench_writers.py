"""Throughput of the table writers: boundaries.csv/.json, segments.csv, candidates.jsonl, map.csv.

Run by hand (not by CI): python benchmarks/bench_writers.py [--rows 1000000] [--map-side 2000]
[--only tables|map]

Each writer gets a synthetic table with the columns of its output (BOUNDARY_COLUMNS,
CANDIDATE_COLUMNS): floats spread over the ranges the tool writes (angles 0-180°,
positions up to 10⁴ µm, unit-vector components), a few per cent absent (NaN, -1 ids,
empty strings), strings drawn from the closed sets and plane indices the tables hold,
some with commas; segments.csv adds its WKT column, a distinct string with commas in
every row (quoted in every row). MB/s is output bytes over wall time (the file written, atomically,
into a temporary folder); ``peak MB`` is the growth of the process's maximum resident
size during the write (an upper bound of what the writer holds, 0 when the write stays
under an earlier peak); ``cpu MB/s`` is output bytes over the process's CPU time, less
sensitive to other jobs on the machine than the wall time, split into user and system
seconds (the system part, mostly the kernel caching the file's pages, is the noisier).
``map.csv`` is the orientation map's text export (``io.writers.write_csv``) of a
square map of ``--map-side``² points (random orientations, 5 % not indexed, quality
channels ``ci`` 0-1, ``iq`` 0-5000 and ``fit_deg`` 0-3), timed from the map record to the
file, the conversion of the orientations to declared Euler angles included. The first
line times ``np.arange(10**7) * 3`` (about 0.02 s on a quiet core) to record how loaded
the machine was.
"""

from __future__ import annotations

import argparse
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

from inclination.io.writers import write_csv as write_map_csv
from inclination.maps import OrientationMap
from inclination.report.candidates import CANDIDATE_COLUMNS, write_candidates
from inclination.report.columns import BOUNDARY_COLUMNS, SEGMENT_COLUMNS
from inclination.report.tables import write_csv, write_table_json

_PLANES = np.array(["(1 1 1)", "(1 -1 1)", "(1 1 -1)", "(-1 1 1)", "(0 0 1)", "(1 -1 0 2)", ""])
_WORDS = np.array(["identified", "ambiguous", "none", "coherent_twin", "a (1 1 1)", "3", "13b"])


def _column(c, n: int, rng) -> np.ndarray:
    if c.kind == "float":
        scale = 1.0 if c.name.startswith("normal") else 180.0 if "deg" in c.name else 1e4
        x = rng.uniform(-scale, scale, n)
        x[rng.random(n) < 0.05] = np.nan
        return x
    if c.kind == "int":
        x = rng.integers(1, 200_000, n)
        x[rng.random(n) < 0.02] = -1
        return x
    if c.kind == "bool":
        return rng.random(n) < 0.3
    words = _PLANES if "plane" in c.name or c.name == "shared_with" else _WORDS
    out = rng.choice(words, n).astype(object)
    out[rng.random(n) < 0.001] = "a, b"  # a comma: quoted in CSV
    return out.astype(str)


def _table(columns, n: int, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    return {c.name: _column(c, n, rng) for c in columns}


def _map(side: int, seed: int = 4) -> OrientationMap:
    rng = np.random.default_rng(seed)
    shape = (side, side)
    e = np.stack(
        [rng.uniform(0, 360, shape), rng.uniform(0, 180, shape), rng.uniform(0, 360, shape)],
        axis=-1,
    )
    phase = rng.integers(1, 3, shape)
    phase[rng.random(shape) < 0.05] = 0
    quality = {
        "ci": rng.uniform(0, 1, shape),
        "iq": rng.uniform(0, 5000, shape),
        "fit_deg": rng.uniform(0, 3, shape),
    }
    return OrientationMap.from_euler_deg(e, phase, grid="square", step_x_um=0.25, quality=quality)


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _time(label: str, write) -> None:
    before = _peak_mb()
    usage = resource.getrusage(resource.RUSAGE_SELF)
    start, cpu = time.perf_counter(), time.process_time()
    path = write()
    dt, dt_cpu = time.perf_counter() - start, time.process_time() - cpu
    after = resource.getrusage(resource.RUSAGE_SELF)
    size = path.stat().st_size
    # The system part is mostly the kernel taking the file's pages into its cache; it
    # varies with what the machine's other jobs hold there, the user part much less.
    print(
        f"{label:<28} {size / 1e6:8.1f} MB {dt:7.2f} s {size / dt / 1e6:8.1f} MB/s "
        f"cpu {size / dt_cpu / 1e6:6.1f} MB/s (user {after.ru_utime - usage.ru_utime:5.2f} s, "
        f"sys {after.ru_stime - usage.ru_stime:5.2f} s) peak +{_peak_mb() - before:6.0f} MB"
    )


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--map-side", type=int, default=2000)
    parser.add_argument("--only", choices=["tables", "map"], default=None)
    args = parser.parse_args(argv)
    if args.only != "tables":
        omap = _map(args.map_side)
    if args.only == "map":
        args.rows = 0
    boundaries = _table(BOUNDARY_COLUMNS, args.rows)
    candidates = _table(CANDIDATE_COLUMNS, args.rows, seed=1)
    segments = _table(SEGMENT_COLUMNS, args.rows, seed=2)
    xy = np.round(np.random.default_rng(3).uniform(0, 1e4, (args.rows, 4)), 3).tolist()
    segments["wkt"] = np.array([f"LINESTRING ({a} {b}, {c} {d})" for a, b, c, d in xy])
    start = time.perf_counter()
    _ = np.arange(10**7) * 3
    print(
        f"rows: {args.rows}; load probe np.arange(10**7) * 3: {time.perf_counter() - start:.3f} s"
    )
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if args.only != "tables":
            _time(f"map.csv ({args.map_side}²)", lambda: write_map_csv(folder / "m.csv", omap))
            # The part of it that is not text: quaternions to declared Euler angles (maps).
            start, cpu = time.perf_counter(), time.process_time()
            omap.euler_deg_declared()
            print(
                f"{'  of which Euler angles':<28} {time.perf_counter() - start:7.2f} s wall "
                f"{time.process_time() - cpu:7.2f} s cpu"
            )
        if args.only == "map":
            return 0
        _time("boundaries.csv", lambda: write_csv(folder / "b.csv", boundaries, BOUNDARY_COLUMNS))
        _time(
            "boundaries.json",
            lambda: write_table_json(
                folder / "b.json", boundaries, BOUNDARY_COLUMNS, schema_version="1", meta={}
            ),
        )
        _time("segments.csv", lambda: write_csv(folder / "s.csv", segments, SEGMENT_COLUMNS))
        _time(
            "candidates.jsonl (all rows)",
            lambda: write_candidates(folder / "c.jsonl", candidates, meta={}, rows="all"),
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
