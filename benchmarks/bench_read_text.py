"""Speed and peak memory of the text-table map reader (run by hand, not by CI).

    python benchmarks/bench_read_text.py [--side 2000] [--repeat 3] [--keep DIR]

Writes a side × side square map (default 2000 × 2000 = 4 million points) as CSV
with the package's own writer (random orientations, 1 % non-indexed points written
as ``nan``, or as empty cells with --empty-cells, one quality column), then reads
it with ``inclination.maps.read_map`` in fresh subprocesses, so that each run's
peak resident memory (VmHWM) is the reader's own. Prints rows/s, CPU time, the
load average (other jobs on the machine slow the wall time) and peak bytes per
point.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_CHILD = r"""
import json, sys, time
from inclination.maps import read_map

def high_water_kib():
    # VmHWM belongs to this process image (ru_maxrss would carry the parent's over exec).
    with open("/proc/self/status") as fh:
        return int(next(line for line in fh if line.startswith("VmHWM")).split()[1])

base = high_water_kib()
t0, c0 = time.perf_counter(), time.process_time()
omap = read_map(json.loads(sys.argv[1]))
elapsed, cpu = time.perf_counter() - t0, time.process_time() - c0
print(json.dumps({"seconds": elapsed, "cpu_seconds": cpu, "peak_kib": high_water_kib(),
                  "base_kib": base, "points": omap.n_points, "valid": int(omap.valid.sum())}))
"""


def make_table(path: Path, side: int, *, rng=0) -> None:
    from inclination.io.writers import write_csv
    from inclination.maps import OrientationMap

    gen = np.random.default_rng(rng)
    euler = np.stack(
        [
            gen.uniform(0, 360, (side, side)),
            np.degrees(np.arccos(gen.uniform(-1, 1, (side, side)))),
            gen.uniform(0, 360, (side, side)),
        ],
        axis=-1,
    )
    phase = np.ones((side, side), dtype=np.int32)
    phase[gen.random((side, side)) < 0.01] = 0
    quality = {"ci": gen.uniform(0, 1, (side, side))}
    omap = OrientationMap.from_euler_deg(
        euler, phase, grid="square", step_x_um=0.25, quality=quality
    )
    write_csv(path, omap)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=2000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--keep", type=Path, default=None, help="folder to keep the table in")
    parser.add_argument(
        "--empty-cells",
        action="store_true",
        help="non-indexed points as empty cells instead of 'nan' (the reader's slower path)",
    )
    args = parser.parse_args(argv)
    folder = args.keep or Path(tempfile.mkdtemp(prefix="bench-read-"))
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"map_{args.side}.csv"
    if not path.exists():
        t0 = time.perf_counter()
        make_table(path, args.side)
        print(f"wrote {path} in {time.perf_counter() - t0:.1f} s")
    if args.empty_cells:
        empty = folder / f"map_{args.side}_empty.csv"
        if not empty.exists():
            empty.write_bytes(path.read_bytes().replace(b"nan", b""))
        path = empty
    size = path.stat().st_size
    spec = {
        "path": str(path),
        "format": "csv",
        "angles": "deg",
        "step_um": 0.25,
        "axes": {"x": "right", "y": "down"},
    }
    runs = []
    for _ in range(args.repeat):
        out = subprocess.run(
            [sys.executable, "-c", _CHILD, json.dumps(spec)],
            check=True,
            capture_output=True,
            text=True,
        )
        runs.append(json.loads(out.stdout))
    best = min(r["seconds"] for r in runs)
    cpu = min(r["cpu_seconds"] for r in runs)
    n = runs[0]["points"]
    peak = max(r["peak_kib"] for r in runs) * 1024
    base = min(r["base_kib"] for r in runs) * 1024
    print(f"table: {n} rows, {size / 1e6:.1f} MB")
    print(
        f"read_map: best {best:.2f} s of {args.repeat} -> {n / best:,.0f} rows/s "
        f"({size / best / 1e6:.0f} MB/s); CPU {cpu:.2f} s over two threads"
    )
    with open("/proc/loadavg") as fh:
        print(f"load average (other jobs slow the wall time): {fh.read().split()[0]} on 2 cores")
    print(
        f"peak resident memory {peak / 1e6:.0f} MB (interpreter and imports {base / 1e6:.0f} MB)"
        f" -> {(peak - base) / n:.0f} bytes per point above the baseline"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
