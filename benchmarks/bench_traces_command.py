"""Time and memory of the whole `inclination traces` command on large synthetic maps.

Run by hand (not by CI): python benchmarks/bench_traces_command.py [--sizes 1024 2048 4096]

For each size it writes a single-phase cubic npz map (Voronoi grains, ~4000 grains at
4096², 0.5° noise) and a job file, then runs `inclination traces JOB --out DIR --quiet` in
a fresh process, so the figure includes interpreter start-up, imports, reading the map,
grains, the boundary network, straight segments and writing grains.csv, segments.csv and
segments.json. In the same run it times a plain copy of the float32 quaternion planes,
the yardstick the targets are stated against. Peak memory is the child's maximum
resident set size, reported per map point above the map itself (16 bytes per point for
the float32 quaternion planes).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _maps import make_benchmark_map  # noqa: E402

from inclination.crystal.rotations import quat_as_euler_deg  # noqa: E402

JOB = {
    "phases": [
        {
            "id": 1,
            "name": "matrix",
            "laue": "m-3m",
            "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
        }
    ],
    "map": {
        "path": "map.npz",
        "format": "npz",
        "step_um": 1.0,
        "grid": "square",
        "angles": "deg",
        "axes": {"x": "right", "y": "down"},
    },
    "grains": {"threshold_deg": 5, "min_pixels": 8},
}


def _write_map(folder: Path, size: int) -> None:
    m = make_benchmark_map(size)
    q = m.quat.reshape(-1, 4)
    euler = np.empty((q.shape[0], 3), np.float32)
    block = 1 << 20
    for s in range(0, len(q), block):
        euler[s : s + block] = quat_as_euler_deg(q[s : s + block].astype(np.float64))
    np.savez(folder / "map.npz", euler_deg=euler.reshape(size, size, 3), phase=m.phase)
    (folder / "job.json").write_text(json.dumps(JOB))
    return m


def _plain_copy_s(quat: np.ndarray, repeats: int = 5) -> float:
    best = np.inf
    for _ in range(repeats):
        t = time.perf_counter()
        quat.copy()
        best = min(best, time.perf_counter() - t)
    return best


def _run(folder: Path) -> tuple[float, int]:
    out = folder / "out"
    cmd = [
        sys.executable,
        "-m",
        "inclination.cli",
        "traces",
        str(folder / "job.json"),
        "--out",
        str(out),
        "--quiet",
        "--overwrite",
    ]
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t = time.perf_counter()
    subprocess.run(cmd, check=True, env={**os.environ, "MPLBACKEND": "Agg"})
    elapsed = time.perf_counter() - t
    peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return elapsed, max(peak_kib, before) * 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096])
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()
    print(
        f"{'size':>6} {'points':>10} {'command s':>10} {'Mpt/s':>7} {'copy ms':>8} "
        f"{'ratio':>6} {'ns/pt':>7} {'peak MB':>8} {'B/pt above map':>15}"
    )
    for size in args.sizes:
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            m = _write_map(folder, size)
            copy_s = _plain_copy_s(np.moveaxis(m.quat, -1, 0))
            del m
            times = []
            peak = 0
            for _ in range(args.repeats):
                elapsed, peak = _run(folder)
                times.append(elapsed)
            best = min(times)
            n = size * size
            above = (peak - 16 * n) / n
            print(
                f"{size:>6} {n:>10} {best:>10.2f} {n / best / 1e6:>7.2f} {copy_s * 1e3:>8.1f} "
                f"{best / copy_s:>6.0f} {best / n * 1e9:>7.1f} {peak / 1e6:>8.0f} {above:>15.1f}"
            )


if __name__ == "__main__":
    main()
