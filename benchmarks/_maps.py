"""Large synthetic orientation maps for the benchmarks, built fast and directly as planes.

Grains are the Voronoi cells of random seeds (nearest seed by scipy's cKDTree, queried
row block by row block), each with one random orientation, and every point carries an
independent small rotation of RMS angle ``noise_deg``. Invented data, for timing only:
the accuracy oracle is ``inclination.synthetic``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from inclination.crystal.rotations import random_quat

__all__ = ["BenchmarkMap", "make_benchmark_map"]


@dataclass(frozen=True)
class BenchmarkMap:
    """The fields of an orientation map that the grain stage reads (conventions §1–§2)."""

    quat: np.ndarray
    phase: np.ndarray
    valid: np.ndarray
    grid: str
    step_x_um: float
    step_y_um: float
    truth_grain: np.ndarray


def make_benchmark_map(
    size: int,
    *,
    n_grains: int | None = None,
    noise_deg: float = 0.5,
    grid: str = "square",
    step_um: float = 1.0,
    rng=0,
) -> BenchmarkMap:
    """A ``size`` × ``size`` single-phase map (phase id 1) of Voronoi grains.

    ``n_grains`` defaults to size² / 4200 (about 4000 grains at 4096², mean diameter ~70
    points). ``quat`` is float32 (H, W, 4), the view of C-contiguous (4, H, W) planes
    as in OrientationMap; ``truth_grain`` int32 (H, W)
    holds the seed index + 1 of each point.
    """
    rng = np.random.default_rng(rng)
    n = int(n_grains if n_grains is not None else max(2, round(size * size / 4200)))
    height = size * (np.sqrt(3.0) / 2 if grid == "hexagonal" else 1.0)
    seeds = rng.random((n, 2)) * np.array([size, height])
    tree = cKDTree(seeds)
    grain_q = random_quat(n, rng=rng).astype(np.float32)  # (n, 4)
    quat = np.empty((4, size, size), dtype=np.float32)
    truth = np.empty((size, size), dtype=np.int32)
    sigma = np.deg2rad(noise_deg) / np.sqrt(3.0)  # per component: RMS angle = noise_deg
    cols = np.arange(size, dtype=np.float64)
    rows_per_block = max(1, 262144 // size)
    for r0 in range(0, size, rows_per_block):
        r1 = min(size, r0 + rows_per_block)
        yy, xx = np.meshgrid(np.arange(r0, r1, dtype=np.float64), cols, indexing="ij")
        if grid == "hexagonal":
            # Conventions §1: rows √3/2 steps apart, odd rows shifted right by half a step.
            xx = xx + 0.5 * (yy % 2)
            yy = yy * (np.sqrt(3.0) / 2)
        _, idx = tree.query(np.column_stack([xx.ravel(), yy.ravel()]), workers=-1)
        truth[r0:r1] = (idx + 1).reshape(r1 - r0, size)
        g = grain_q[idx]  # (m, 4)
        rv = rng.normal(0.0, sigma, (len(idx), 3)).astype(np.float32)
        half = 0.5 * np.sqrt((rv * rv).sum(axis=1))
        sinc = np.where(half > 0, np.sin(half) / np.where(half > 0, 2 * half, 1), 0.5)
        e = np.column_stack([np.cos(half), rv * sinc[:, None]]).astype(np.float32)
        # Hamilton product g ⊗ e, written straight into the planes.
        a0, a1, a2, a3 = g.T
        b0, b1, b2, b3 = e.T
        block = quat[:, r0:r1].reshape(4, -1)
        block[0] = a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3
        block[1] = a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2
        block[2] = a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1
        block[3] = a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0
    # A hexagonal map keeps step_y = step_x (the in-row step), as maps.OrientationMap does.
    step_y = step_um
    return BenchmarkMap(
        quat=np.moveaxis(quat, 0, -1),
        phase=np.ones((size, size), dtype=np.int32),
        valid=np.ones((size, size), dtype=bool),
        grid=grid,
        step_x_um=float(step_um),
        step_y_um=float(step_y),
        truth_grain=truth,
    )
