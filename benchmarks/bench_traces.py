"""Speed of the straight-segment stage, and the calibration of its σ model.

Run by hand (never by the test suite):

    python benchmarks/bench_traces.py                 # 10^5 chains: time and peak memory
    python benchmarks/bench_traces.py --chains 300000
    python benchmarks/bench_traces.py --calibrate     # constants of the σ model, both grids

The chains are staircases of straight boundaries (random angle, offset and length),
a fifth of them bent once (an L) and one in fifty closed (a square loop), so that
the split, the loops and the fit all take part.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
from types import SimpleNamespace

import numpy as np

from inclination.traces import _ROW_REACH, _ROWS, fit_segments

SQ3 = np.sqrt(3.0)


def _staircase(angle_deg, length, offset, grid):
    """Ordered edge midpoints of a straight boundary (step 1), from a small patch."""
    theta = np.radians(angle_deg)
    t = np.array([np.cos(theta), np.sin(theta)])
    normal = np.array([-t[1], t[0]])
    half = length / 2 + 3
    row = 1.0 if grid == "square" else SQ3 / 2
    i0 = int(np.floor((offset[1] - half) / row)) - 2
    i0 -= i0 % 2
    j0 = int(np.floor(offset[0] - half)) - 2
    i, j = np.mgrid[i0 : i0 + int(2 * half / row) + 6, j0 : j0 + int(2 * half) + 6]
    x = j + (0.0 if grid == "square" else (i % 2) / 2)
    y = i * row
    side = (x - offset[0]) * normal[0] + (y - offset[1]) * normal[1] > 0
    pairs = [((slice(None), slice(None, -1)), (slice(None), slice(1, None)))]
    if grid == "square":
        pairs.append(((slice(None, -1), slice(None)), (slice(1, None), slice(None))))
    mids = []
    for a, b in pairs:
        cut = side[a] != side[b]
        mids.append(np.stack([(x[a] + x[b])[cut] / 2, (y[a] + y[b])[cut] / 2], 1))
    if grid == "hexagonal":
        for shift in (0, 1):
            ai, aj = i[:-1] - i0, j[:-1] - j0
            bj = aj + (i[:-1] % 2) - 1 + shift
            ok = (bj >= 0) & (bj < i.shape[1])
            sa, sb = side[ai[ok], aj[ok]], side[ai[ok] + 1, bj[ok]]
            cut = sa != sb
            xa, ya = x[ai[ok], aj[ok]][cut], y[ai[ok], aj[ok]][cut]
            xb, yb = x[ai[ok] + 1, bj[ok]][cut], y[ai[ok] + 1, bj[ok]][cut]
            mids.append(np.stack([(xa + xb) / 2, (ya + yb) / 2], 1))
    m = np.concatenate(mids)
    along = (m - offset) @ t
    keep = np.abs(along) <= length / 2
    return m[keep][np.argsort(along[keep], kind="stable")]


def _network(chains, closed):
    n = len(chains)
    counts = np.array([len(c) for c in chains])
    return SimpleNamespace(
        offsets=np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
        points_um=np.concatenate(chains),
        grain_a=np.arange(n),
        grain_b=np.arange(n) + 1,
        phase_a=np.ones(n, dtype=np.int64),
        phase_b=np.ones(n, dtype=np.int64),
        n_edges=counts,
        misorientation_deg=np.full(n, 40.0),
        misorientation_spread_deg=np.full(n, 0.5),
        is_phase_boundary=np.zeros(n, dtype=bool),
        closed=np.asarray(closed, dtype=bool),
    )


def build_chains(n_chains, rng):
    """A mixed network: straight, bent and closed chains, translated apart."""
    gen = np.random.default_rng(rng)
    # A pool of distinct shapes, reused with offsets: building 10^5 staircases one by one
    # would time the builder, not the stage.
    pool, pool_closed = [], []
    for k in range(500):
        length = float(np.exp(gen.uniform(np.log(3), np.log(60))))
        line = _staircase(gen.uniform(0, 180), length, gen.uniform(0, 5, 2), "square")
        if k % 5 == 0 and len(line) > 6:
            # An L: the second half turned by 90° about the middle point.
            mid = len(line) // 2
            turn = (line[mid:] - line[mid]) @ np.array([[0, 1], [-1, 0]]) + line[mid]
            line = np.concatenate([line[:mid], turn])
        closed = k % 50 == 0
        if closed:
            side = np.arange(float(gen.integers(4, 30)))
            zero = 0 * side
            line = np.concatenate(
                [
                    np.stack([side, zero], 1),
                    np.stack([zero + side.size, side], 1),
                    np.stack([side.size - side, zero + side.size], 1),
                    np.stack([zero, side.size - side], 1),
                ]
            )
        if len(line) == 0:
            line = np.zeros((1, 2))
        pool.append(line)
        pool_closed.append(closed)
    pick = gen.integers(0, len(pool), n_chains)
    shift = gen.uniform(0, 4000, (n_chains, 2))
    chains = [pool[p] + s for p, s in zip(pick, shift, strict=True)]
    return _network(chains, np.array(pool_closed)[pick])


def bench(n_chains, repeats):
    net = build_chains(n_chains, 1)
    n_points = net.points_um.shape[0]
    times, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        seg = fit_segments(net, step_um=1.0)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    tracemalloc.start()
    fit_segments(net, step_um=1.0)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    best = min(times)
    print(f"chains {n_chains}, points {n_points}, loops {int(net.closed.sum())}")
    print(f"segments {len(seg['segment_id'])}")
    print(f"fit_segments best of {repeats}: {best:.3f} s ({n_points / best / 1e6:.2f} M points/s)")
    # CPU time as well: on a shared machine the wall time measures the neighbours.
    print(f"fit_segments CPU time, best of {repeats}: {min(cpu):.3f} s")
    print(f"peak traced memory {peak / 1e6:.1f} MB ({peak / n_points:.0f} bytes per point)")


def calibrate(n_lines, rng):
    """Measure the σ-model constants on random straight boundaries (module docstring)."""
    gen = np.random.default_rng(rng)
    for grid in ("square", "hexagonal"):
        angles = gen.uniform(0, 180, n_lines)
        lengths = np.exp(gen.uniform(np.log(5), np.log(100), n_lines))
        chains = [
            _staircase(a, length, gen.uniform(0, 10, 2), grid)
            for a, length in zip(angles, lengths, strict=True)
        ]
        seg = fit_segments(_network(chains, np.zeros(n_lines, bool)), step_um=1.0, grid=grid)
        err = np.radians(np.mod(seg["trace_angle_deg"] - angles + 90, 180) - 90)
        length = seg["length_um"]
        rows_deg, spacing = _ROWS[grid]
        off = np.radians(np.mod(seg["trace_angle_deg"][:, None] - rows_deg + 90, 180) - 90)
        near = length[:, None] * np.abs(np.sin(off)) < _ROW_REACH * spacing
        h = np.where(near, spacing, 0.0).max(axis=1)
        q = length**-1.5
        c_any = np.sqrt(np.mean((err / q) ** 2))
        far = h == 0
        c = np.sqrt(np.mean((err[far] / q[far]) ** 2))
        gamma = np.sqrt(
            np.mean(
                (err[~far] * length[~far] / h[~far]) ** 2
                - (c * q[~far] * length[~far] / h[~far]) ** 2
            )
        )
        k = np.max(seg["residual_um"])
        print(
            f"{grid}: c(any angle) {c_any:.3f}, c {c:.3f}, gamma {gamma:.3f}, "
            f"near a row {np.mean(~far):.3f}, largest staircase residual {k:.3f} steps, "
            f"beyond 3 sigma {np.mean(np.abs(np.degrees(err)) > 3 * seg['trace_sigma_deg']):.4f}"
        )
    for ratio in (10, 20, 50):
        angles = gen.uniform(0, 180, 1000)
        chains = [_staircase(a, float(ratio), gen.uniform(0, 10, 2), "square") for a in angles]
        seg = fit_segments(_network(chains, np.zeros(1000, bool)), step_um=1.0)
        err = np.mod(seg["trace_angle_deg"] - angles + 90, 180) - 90
        rms_sigma = np.sqrt(np.mean(seg["trace_sigma_deg"] ** 2))
        print(
            f"square L/s = {ratio}: RMS error {np.sqrt(np.mean(err**2)):.3f} deg, "
            f"RMS model sigma {rms_sigma:.3f} deg"
        )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--chains", type=int, default=100_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--calibrate", action="store_true")
    parser.add_argument("--lines", type=int, default=6000)
    args = parser.parse_args()
    if args.calibrate:
        calibrate(args.lines, 5)
    else:
        bench(args.chains, args.repeats)


if __name__ == "__main__":
    main()
