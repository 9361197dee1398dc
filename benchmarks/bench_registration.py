"""Speed of the grain-structure registration of a deeper section (docs/performance.md).
Run by hand:

    /work/venv/bin/python benchmarks/bench_registration.py [--sizes 2048 4096] [--repeat 2]

For each size a label image of Voronoi grains (about 4,000 points per grain, random
orientations) is built, not timed; the deeper map is the same structure moved by a known
shift (3.5, -2.0) steps and cropped to the surface map's size. ``register_sections`` is
timed (best of ``--repeat``) and the recovered shift printed next to the imposed one.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from inclination.grains import GrainMap
from inclination.sections import register_sections

STEP_UM = 0.5
SHIFT_PX = (-2, 3)  # rows, columns: the deeper map's point (i, j) is the surface's (i-2, j+3)


def grain_map(labels, quat, step_um):
    ids = np.arange(1, len(quat) + 1)
    flat = labels.ravel()
    area = np.bincount(flat, minlength=len(ids) + 1)[ids]
    rows, cols = np.indices(labels.shape)
    keep = area > 0
    ids, area = ids[keep], area[keep]
    edge = np.zeros(len(quat) + 1, bool)
    edge[np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))] = True
    table = {
        "grain_id": ids,
        "phase": np.ones(len(ids), np.int64),
        "quat": quat[ids - 1],
        "area_px": area,
        "centroid_x_um": np.bincount(flat, cols.ravel() * step_um)[ids] / area,
        "centroid_y_um": np.bincount(flat, rows.ravel() * step_um)[ids] / area,
        "touches_edge": edge[ids],
    }
    return GrainMap(labels, table, {}, 5.0, 4)


def make_pair(size, rng=0):
    rng = np.random.default_rng(rng)
    pad = 8
    big = size + 2 * pad
    n = max(10, big * big // 4000)
    seeds = rng.uniform(0, big, size=(n, 2))
    rows, cols = np.indices((big, big))
    _, nearest = cKDTree(seeds).query(np.stack([rows.ravel(), cols.ravel()], -1))
    labels = (nearest.reshape(big, big) + 1).astype(np.int32)
    quat = Rotation.random(n, random_state=rng.integers(1 << 31)).as_quat()[:, [3, 0, 1, 2]]
    surface = labels[pad : pad + size, pad : pad + size]
    di, dj = SHIFT_PX
    deeper = labels[pad + di : pad + di + size, pad + dj : pad + dj + size]
    return grain_map(surface.copy(), quat, STEP_UM), grain_map(deeper.copy(), quat, STEP_UM)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[2048, 4096])
    parser.add_argument("--repeat", type=int, default=2)
    args = parser.parse_args()
    print("size   grains  seconds  shift_x_um (imposed)  shift_y_um (imposed)")
    for size in args.sizes:
        surface, deeper = make_pair(size)
        best, reg = float("inf"), None
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            reg = register_sections(surface, deeper, step_um=STEP_UM, laue_by_phase={1: "m-3m"})
            best = min(best, time.perf_counter() - t0)
        print(
            f"{size:5d} {len(surface.grains['grain_id']):7d} {best:8.2f}"
            f"  {reg.shift_x_um:8.3f} ({SHIFT_PX[1] * STEP_UM:6.3f})"
            f"      {reg.shift_y_um:8.3f} ({SHIFT_PX[0] * STEP_UM:6.3f})"
        )


if __name__ == "__main__":
    main()
