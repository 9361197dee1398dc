"""Maps by tiles against the whole map: time per point and peak memory (docs/performance.md).

Run by hand (each measured run is a fresh child process, so its peak resident memory is
its own):

    python benchmarks/bench_tiles.py [--sizes 2048 8192] [--chunk 2048] [--budget-mib 6144]
                                     [--whole-up-to 4096] [--repeat 2] [--folder /tmp/bench_tiles]

For each size a zarr map is synthesised chunk by chunk (Voronoi grains of ~4200 points, as
``_maps.make_benchmark_map``, 0.5° noise; the nearest seed per chunk from a cKDTree of all
seeds; never the whole map in memory; not timed). Then, each in its own process:

- ``tiled``: ``tiles.read_zarr_map`` → ``cache_tiles`` (each tile's angles converted once,
  when the grains first read it, as the pipeline does) → ``segment_grains_tiled``
  → ``boundary_network_tiled`` → ``traces.fit_segments``, tiles = the stored chunks;
- ``whole`` (sizes up to ``--whole-up-to``): ``maps.read_map`` of the same store (read whole)
  → ``segment_grains`` → ``boundary_network`` → ``fit_segments``.

Both include reading and converting the angles. With ``--repeat n`` the two paths run
alternately n times (tiled, whole, tiled, whole, ...), so that a shared machine's load
falls on both alike; the ratio is of the medians. Reported: wall time, ns per point, peak
RSS (``ru_maxrss``, the interpreter and libraries included) and whether it stayed within the
budget; grains and segments of the two paths are checked equal where both ran.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

CUBIC_LATTICE = (3.6, 3.6, 3.6, 90, 90, 90)


def synthesise(path: Path, size: int, chunk: int, *, rng: int = 0) -> int:
    """Write a size × size zarr map chunk by chunk; returns the number of seeds."""
    import zarr
    from scipy.spatial import cKDTree

    from inclination.crystal.rotations import quat_as_euler_deg, quat_multiply, random_quat

    gen = np.random.default_rng(rng)
    n = max(2, round(size * size / 4200))
    seeds = gen.random((n, 2)) * size
    tree = cKDTree(seeds)
    grain_q = random_quat(n, rng=gen)
    group = zarr.open_group(str(path), mode="w")
    euler = group.create_array(
        "euler_deg", shape=(size, size, 3), chunks=(chunk, chunk, 3), dtype="f4"
    )
    phase = group.create_array("phase", shape=(size, size), chunks=(chunk, chunk), dtype="i1")
    sigma = np.deg2rad(0.5) / np.sqrt(3.0)
    for r0 in range(0, size, chunk):
        for c0 in range(0, size, chunk):
            r1, c1 = min(r0 + chunk, size), min(c0 + chunk, size)
            yy, xx = np.mgrid[r0:r1, c0:c1]
            _, idx = tree.query(np.column_stack([xx.ravel(), yy.ravel()]), workers=1)
            rv = gen.normal(0.0, sigma, (idx.size, 3))
            angle = np.linalg.norm(rv, axis=1)
            noise = np.column_stack(
                [np.cos(angle / 2), rv * (np.sinc(angle / 2 / np.pi) / 2)[:, None]]
            )
            q = quat_multiply(grain_q[idx], noise)
            euler[r0:r1, c0:c1] = quat_as_euler_deg(q).reshape(r1 - r0, c1 - c0, 3)
            phase[r0:r1, c0:c1] = 1
    return n


def _spec(path: Path) -> dict:
    return {
        "path": str(path),
        "format": "zarr",
        "angles": "deg",
        "step_um": 1.0,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }


def measure(mode: str, path: Path, out: Path) -> None:
    """One measured run (in a child process): writes its numbers and results to ``out``."""
    from inclination.crystal import Lattice, Phase
    from inclination.traces import fit_segments

    cu = Phase(1, "fcc", "m-3m", Lattice.from_parameters(*CUBIC_LATTICE), ("{1 1 1}",))
    t0 = time.perf_counter()
    if mode == "tiled":
        import tempfile

        from inclination.tiles import (
            boundary_network_tiled,
            cache_tiles,
            read_zarr_map,
            segment_grains_tiled,
        )

        # As the pipeline does: each tile converted once, when first read, and kept.
        folder = tempfile.TemporaryDirectory(prefix="bench-tiles-", dir=path.parent)
        tmap = cache_tiles(read_zarr_map(_spec(path), phase_ids=(1,)), folder.name)
        gm = segment_grains_tiled(tmap, [cu])
        t1 = time.perf_counter()
        net = boundary_network_tiled(tmap, gm, [cu])
        shape, grid = tmap.shape, tmap.grid
    else:
        from inclination.grains import segment_grains
        from inclination.maps import read_map
        from inclination.network import boundary_network

        omap = read_map(_spec(path))
        gm = segment_grains(omap, [cu])
        t1 = time.perf_counter()
        net = boundary_network(omap, gm, [cu])
        shape, grid = omap.shape, omap.grid
    t2 = time.perf_counter()
    seg = fit_segments(net, step_um=1.0, grid=grid)
    t3 = time.perf_counter()
    peak_mib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    np.savez(
        out.with_suffix(".npz"),
        labels_hash=np.frombuffer(
            __import__("hashlib").sha256(np.ascontiguousarray(gm.labels)).digest(), np.uint8
        ),
        x0=seg["x0_um"],
        angle=seg["trace_angle_deg"],
    )
    out.write_text(
        json.dumps(
            {
                "mode": mode,
                "points": int(shape[0] * shape[1]),
                "grains": gm.n_grains,
                "segments": int(seg["segment_id"].size),
                "grains_s": t1 - t0,
                "network_s": t2 - t1,
                "segments_s": t3 - t2,
                "total_s": t3 - t0,
                "peak_mib": peak_mib,
            }
        )
    )


def _child(mode: str, path: Path, out: Path) -> dict:
    subprocess.run(
        [sys.executable, __file__, "--measure", mode, "--store", str(path), "--out", str(out)],
        check=True,
    )
    return json.loads(out.read_text())


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[2048])
    parser.add_argument("--chunk", type=int, default=1024)
    parser.add_argument("--budget-mib", type=float, default=6144.0)
    parser.add_argument("--whole-up-to", type=int, default=4096)
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--folder", default="/tmp/bench_tiles")
    parser.add_argument("--measure", choices=("tiled", "whole"), help=argparse.SUPPRESS)
    parser.add_argument("--store", help=argparse.SUPPRESS)
    parser.add_argument("--out", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.measure:
        measure(args.measure, Path(args.store), Path(args.out))
        return 0
    folder = Path(args.folder)
    folder.mkdir(parents=True, exist_ok=True)
    print(f"chunks {args.chunk}²; budget {args.budget_mib:.0f} MiB; wall clock")
    print(
        f"{'map':>7} {'path':>6} {'grains':>7} {'segments':>9} {'grains s':>9} {'net s':>7} "
        f"{'seg s':>6} {'total s':>8} {'ns/pt':>6} {'peak MiB':>9} {'in budget':>9}"
    )
    for size in args.sizes:
        store = folder / f"map_{size}.zarr"
        t0 = time.perf_counter()
        synthesise(store, size, args.chunk, rng=size)
        made = time.perf_counter() - t0
        modes = ["tiled"] + (["whole"] if size <= args.whole_up_to else [])
        results = {}
        for mode in modes * max(args.repeat, 1):
            r = _child(mode, store, folder / f"{mode}_{size}.json")
            results.setdefault(mode, []).append(r)
            print(
                f"{size:>6}² {mode:>6} {r['grains']:>7} {r['segments']:>9} {r['grains_s']:>9.2f} "
                f"{r['network_s']:>7.2f} {r['segments_s']:>6.2f} {r['total_s']:>8.2f} "
                f"{r['total_s'] / r['points'] * 1e9:>6.0f} {r['peak_mib']:>9.0f} "
                f"{'yes' if r['peak_mib'] <= args.budget_mib else 'NO':>9}"
            )
        if len(results) == 2:
            a = np.load(folder / f"tiled_{size}.npz")
            b = np.load(folder / f"whole_{size}.npz")
            same = bool(np.array_equal(a["labels_hash"], b["labels_hash"])) and bool(
                a["x0"].shape == b["x0"].shape and np.allclose(a["x0"], b["x0"], atol=0.5)
            )
            tiled_s, whole_s = (
                float(np.median([r["total_s"] for r in results[m]])) for m in ("tiled", "whole")
            )
            ratio = tiled_s / whole_s
            print(
                f"{size:>6}² tiled / whole time {ratio:.2f} (medians {tiled_s:.2f} s, "
                f"{whole_s:.2f} s); same grains and segments: {same}"
            )
        print(f"{size:>6}² (map synthesised in {made:.1f} s, not timed above)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
