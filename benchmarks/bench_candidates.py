"""Throughput of the candidates writer: candidates.jsonl against the earlier indented JSON.

Run by hand (not by CI): python benchmarks/bench_candidates.py [--rows 1000000]

Both writers get the same synthetic table (the columns of CANDIDATE_COLUMNS) in the
same run: the streamed JSON-lines encoder (every row, ``rows="all"``) and the earlier
path, ``json.dumps(indent=2)`` of the per-element cleaned ``tolist()`` columns. MB/s is
output bytes over wall time.
"""

from __future__ import annotations

import argparse
import json
import math
import tempfile
import time
from pathlib import Path

import numpy as np

from inclination.report.candidates import CANDIDATE_COLUMNS, write_candidates


def _table(n: int, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    t = {}
    for c in CANDIDATE_COLUMNS:
        if c.kind == "float":
            t[c.name] = (
                rng.uniform(-1, 1, n) if c.name.startswith("normal") else rng.uniform(0, 90, n)
            )
        elif c.kind == "int":
            t[c.name] = rng.integers(1, 20000, n)
        elif c.kind == "bool":
            t[c.name] = rng.random(n) < 0.03
        else:
            t[c.name] = rng.choice(["(1 1 1)", "(1 -1 1)", "(1 1 -1)", "(-1 1 1)"], n)
    t["side"] = rng.choice(["a", "b"], n)
    t["family"] = np.full(n, "{1 1 1}")
    t["shared_with"] = np.where(rng.random(n) < 0.01, "(1 1 1)", "")
    return t


def _clean(value):
    if isinstance(value, list):
        return [_clean(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    args = parser.parse_args(argv)
    t = _table(args.rows)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        start = time.perf_counter()
        path = write_candidates(folder / "c.jsonl", t, meta={}, rows="all")
        dt_new = time.perf_counter() - start
        size_new = path.stat().st_size
        start = time.perf_counter()
        doc = {"table": {k: _clean(np.asarray(v).tolist()) for k, v in t.items()}}
        (folder / "c.json").write_text(json.dumps(doc, indent=2) + "\n")
        dt_old = time.perf_counter() - start
        size_old = (folder / "c.json").stat().st_size
        start = time.perf_counter()
        kept = write_candidates(folder / "k.jsonl", t, meta={})
        dt_kept = time.perf_counter() - start
        size_kept = kept.stat().st_size
    print(f"rows: {args.rows}")
    print(
        f"indented JSON (before): {size_old / 1e6:.1f} MB in {dt_old:.2f} s = "
        f"{size_old / dt_old / 1e6:.1f} MB/s"
    )
    print(
        f"candidates.jsonl, all:  {size_new / 1e6:.1f} MB in {dt_new:.2f} s = "
        f"{size_new / dt_new / 1e6:.1f} MB/s"
    )
    print(f"candidates.jsonl, fit_or_shared (default): {size_kept / 1e6:.2f} MB in {dt_kept:.2f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
