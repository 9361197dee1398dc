"""Wall time of ``inclination batch`` against the same jobs run one after another. By hand:

    python benchmarks/bench_batch.py [--jobs 8] [--workers 2] [--side-um 50]

Builds ``--jobs`` small synthetic jobs (twinned austenite from inclination.synthetic,
``--side-um`` square-ish surface map at 1 µm with a serial section 3 µm down; not
timed), then times (1) ``pipeline.analyse`` of each job in turn in this process and
(2) ``batch.run_batch`` of all of them on a new local cluster of ``--workers`` processes,
the cluster's start and the batch outputs (batch.json, boundaries_all.csv, summary.md,
pooled stereology) included. Prints the machine's load average too: on a shared machine
the times say little without it.
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
import time
from pathlib import Path

from inclination import synthetic
from inclination.batch import run_batch
from inclination.crystal.phases import Phase
from inclination.io.writers import write_npz
from inclination.pipeline import analyse

AUSTENITE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}"],
}


def _entry(path: str) -> dict:
    return {
        "path": path,
        "format": "npz",
        "angles": "deg",
        "step_um": 1.0,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }


def make_job(folder: Path, seed: int, side_um: float) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    micro = synthetic.make_microstructure(
        box_um=(side_um, 0.8 * side_um, 10.0),
        n_grains=max(int(side_um**2 / 200), 4),
        twins=4,
        rng=seed,
        phases=[Phase.from_dict(AUSTENITE)],
    )
    for name, depth in (("surface.npz", 0.0), ("serial.npz", 3.0)):
        sample = synthetic.sample_map(
            micro, step_um=1.0, rng=seed + 100 + int(depth), noise_deg=0.5, depth_um=depth
        )
        write_npz(folder / name, synthetic.as_orientation_map(sample))
    job = {
        "schema_version": 1,
        "phases": [AUSTENITE],
        "map": _entry("surface.npz"),
        "traces": {"min_length_um": 5},
        "sections": [
            {"kind": "serial", "name": "3 µm", "map": _entry("serial.npz"), "depth_um": 3.0}
        ],
    }
    path = folder / f"sample{seed}.json"
    path.write_text(json.dumps(job), encoding="utf-8")
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--jobs", type=int, default=8)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--side-um", type=float, default=50.0)
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp())
    jobs = [make_job(root / f"s{i}", i, args.side_um) for i in range(args.jobs)]
    print(f"load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    t0 = time.perf_counter()
    for p in jobs:
        analyse(p, root / "sequential" / p.stem)
    sequential = time.perf_counter() - t0
    t0 = time.perf_counter()
    result = run_batch(jobs, root / "batch", workers=args.workers)
    batch = time.perf_counter() - t0
    assert result.exit_status == 0, result.messages
    print(f"{args.jobs} jobs one after another (analyse): {sequential:.1f} s")
    print(f"{args.jobs} jobs as a batch on {args.workers} local workers: {batch:.1f} s")
    print(f"load average after: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
