"""Pairs per second of the disorientation-angle kernels (run by hand, not by CI).

    python benchmarks/bench_disorientation.py [--pairs 4000000] [--repeat 3] [--classes=m-3m,-3m]

Two figures per class and dtype: ``max_scalar_part`` on precomputed misorientations
(the kernel grain segmentation calls) and ``disorientation_angle_deg`` from two
orientation arrays (misorientation product, kernel and arccos). Then the Σ3 test
(``relation_deviation_deg``) and the full Σ <= 29 classification on 10⁵
misorientations. The best of ``--repeat`` runs is reported.
"""

from __future__ import annotations

import argparse
import os
import platform
import time

import numpy as np

from inclination.crystal.csl import (
    classify_misorientation_quat,
    cubic_csl_relations,
    relation_deviation_deg,
)
from inclination.crystal.rotations import random_quat
from inclination.crystal.symmetry import (
    disorientation_angle_deg,
    max_scalar_part,
    misorientation_quat,
)


def _best_rate(func, n_pairs: int, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return n_pairs / best / 1e6


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pairs", type=int, default=4_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    # Comma-separated: argparse would read "-3m" after a space as an option.
    parser.add_argument("--classes", default="m-3m,6/mmm,-3m,mmm")
    args = parser.parse_args(argv)

    qa64 = random_quat(args.pairs, rng=1)
    qb64 = random_quat(args.pairs, rng=2)
    dq64 = misorientation_quat(qa64, qb64)
    print(
        f"{args.pairs:,} pairs, numpy {np.__version__}, {platform.machine()}, "
        f"{os.cpu_count()} cores, OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '')}"
    )
    print(
        f"{'class':>6} {'dtype':>8} {'max_scalar_part':>18} {'angle from qa, qb':>18}  (M pairs/s)"
    )
    for laue in args.classes.split(","):
        for dtype in (np.float32, np.float64):
            qa, qb, dq = (x.astype(dtype) for x in (qa64, qb64, dq64))
            out = np.empty(args.pairs, dtype)
            kernel = _best_rate(
                lambda dq=dq, laue=laue, out=out: max_scalar_part(dq, laue, out=out),
                args.pairs,
                args.repeat,
            )
            angle = _best_rate(
                lambda qa=qa, qb=qb, laue=laue: disorientation_angle_deg(qa, qb, laue),
                args.pairs,
                args.repeat,
            )
            print(f"{laue:>6} {np.dtype(dtype).name:>8} {kernel:18.1f} {angle:18.1f}")
    boundaries = dq64[:100_000]
    sigma3 = cubic_csl_relations(3)[1].quat
    rate3 = _best_rate(
        lambda: relation_deviation_deg(boundaries, sigma3, "m-3m"), len(boundaries), args.repeat
    )
    rate29 = _best_rate(
        lambda: classify_misorientation_quat(boundaries, max_sigma=29), len(boundaries), args.repeat
    )
    print(f"Σ3 deviation: {rate3:.2f} M boundaries/s; Σ <= 29 classification: {rate29:.3f} M/s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
