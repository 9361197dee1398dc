"""Speed and memory of grains + boundary network (docs/performance.md). Run by hand:

    /work/venv/bin/python benchmarks/bench_grains.py [--sizes 1024 2048 4096] [--repeat 3]

For each size: a synthetic cubic map (Voronoi grains, ~4200 points per grain, 0.5° noise,
5° threshold) is built by ``_maps.make_benchmark_map`` (not timed); then, in the same run,
a plain copy of the float32 quaternion planes (the yardstick), ``segment_grains`` and
``boundary_network`` are timed (best of ``--repeat``), and the peak memory they allocate
above the map is traced (tracemalloc sees numpy's buffers) in a separate, untimed pass.
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _maps import make_benchmark_map  # noqa: E402

from inclination.crystal import Lattice, Phase  # noqa: E402
from inclination.grains import segment_grains  # noqa: E402
from inclination.network import boundary_network  # noqa: E402

CUBIC = Phase(1, "fcc", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90), ("{1 1 1}",))


def best_of(repeat, fn, clock):
    times = []
    result = None
    for _ in range(repeat):
        gc.collect()
        t0 = clock()
        result = fn()
        times.append(clock() - t0)
    return min(times), result


def run(size: int, repeat: int, cpu: bool, grid: str = "square") -> dict:
    omap = make_benchmark_map(size, rng=size, grid=grid)
    n = size * size
    # Wall time is what a user waits; CPU time (process_time) is steadier on a shared
    # machine. The kernels are single-threaded numpy, so on an idle machine they agree.
    clock = time.process_time if cpu else time.perf_counter
    t_copy, _ = best_of(repeat, lambda: np.moveaxis(omap.quat, -1, 0).copy(), clock)
    t_grains, gm = best_of(repeat, lambda: segment_grains(omap, [CUBIC]), clock)
    t_net, net = best_of(repeat, lambda: boundary_network(omap, gm, [CUBIC]), clock)
    del net
    gc.collect()
    tracemalloc.start()
    gm2 = segment_grains(omap, [CUBIC])
    net2 = boundary_network(omap, gm2, [CUBIC])
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    truth = int(omap.truth_grain.max())
    total = t_grains + t_net
    return {
        "size": size,
        "points": n,
        "grains": gm.n_grains,
        "truth_grains": truth,
        "chains": net2.n_chains,
        "copy_s": t_copy,
        "grains_s": t_grains,
        "network_s": t_net,
        "total_s": total,
        "mpts_per_s": n / total / 1e6,
        "ns_per_point": total / n * 1e9,
        "ratio_to_copy": total / t_copy,
        "peak_bytes_per_point": peak / n,
    }


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--cpu", action="store_true", help="time with process_time")
    parser.add_argument("--grid", choices=("square", "hexagonal"), default="square")
    args = parser.parse_args(argv)
    rows = [run(s, args.repeat, args.cpu, args.grid) for s in args.sizes]
    clock = "process_time (CPU)" if args.cpu else "perf_counter (wall)"
    print(f"grid: {args.grid}; clock: {clock}")
    head = (
        f"{'size':>6} {'grains':>7} {'truth':>6} {'chains':>7} {'copy s':>7} {'grains s':>9} "
        f"{'net s':>7} {'total s':>8} {'Mpt/s':>7} {'ns/pt':>7} {'x copy':>7} {'B/pt':>6}"
    )
    print(head)
    for r in rows:
        print(
            f"{r['size']:>6} {r['grains']:>7} {r['truth_grains']:>6} {r['chains']:>7} "
            f"{r['copy_s']:>7.3f} {r['grains_s']:>9.3f} {r['network_s']:>7.3f} "
            f"{r['total_s']:>8.3f} {r['mpts_per_s']:>7.1f} {r['ns_per_point']:>7.1f} "
            f"{r['ratio_to_copy']:>7.1f} {r['peak_bytes_per_point']:>6.1f}"
        )
    if len(rows) > 1:
        growth = rows[-1]["ns_per_point"] / rows[0]["ns_per_point"]
        print(f"time per point, {rows[-1]['size']}² / {rows[0]['size']}²: {growth:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
