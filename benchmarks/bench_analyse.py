"""Per-stage time and peak memory of the whole job, its numpy/scipy floor, and exponents.

Run by hand (not by CI):

    python benchmarks/bench_analyse.py --sizes 1024 2048 4096 --grains 16000

For each (size, grains) it builds a synthetic sample with ``inclination.synthetic``
(0.5 µm step, 1 % non-indexed points, mis-indexed clusters, a serial section 5 µm down
and two cross-sections across the map), writes the maps and a job, and runs the
command ``analyse`` once in a fresh process. Each stage's time is measured directly in
that one run: the child wraps the library functions of each stage in a timer that counts
exclusive time (time inside a nested wrapped call belongs to the inner one only), so the
stage times are disjoint parts of the run, never negative, and sum to its wall time.
Stages: ``read`` (Job.read_surface_map), ``grains`` (segment_grains, on every map the job
reads, the serial section's too), ``traces`` (boundary_network, fit_segments), ``planes``
(match_planes, twin_test_summary), ``write`` (write_outputs) and ``sections and rest``
(everything else: the sections, serial-map reading, start-up, glue). The peak is the
child's own high-water resident set size (``VmHWM`` of ``/proc/self/status``), not
``getrusage``'s ``ru_maxrss``: a child started by ``subprocess`` (vfork, then exec) carries
the parent's resident size into ``ru_maxrss``, so it reported the memory of building the
sample here, not of the run. A thread in the child samples the resident size every 2 ms
and keeps the largest seen during each stage (short spikes between samples can be missed;
the whole-run peak cannot). In the same run it times the plain
numpy/scipy floor of the same work (read both maps, orientations, links, labels, grain
statistics, boundary pairs, line fits, plane predictions, a CSV) and prints the ratio.
With several sizes (grains scaled as size²) or several grain counts at one size, it
fits the exponent of each stage: log time against log points, or log grains.
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
from scipy import ndimage

from inclination.crystal.phases import Phase
from inclination.synthetic import (
    as_orientation_map,
    make_microstructure,
    sample_map,
    simulate_cross_section,
)

STEP_UM = 0.5
#: Rows of one sampled strip of the synthetic maps (see write_strips).
STRIP = 1024
PHASE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}"],
}
STAGES = ("read", "grains", "traces", "planes", "write", "sections and rest")
#: (module, attribute, stage) of the wrapped functions; a class attribute as "Class.name".
TIMED = (
    ("inclination.io.job", "Job.read_surface_map", "read"),
    ("inclination.grains", "segment_grains", "grains"),
    ("inclination.network", "boundary_network", "traces"),
    ("inclination.traces", "fit_segments", "traces"),
    ("inclination.planes", "match_planes", "planes"),
    ("inclination.planes", "twin_test_summary", "planes"),
    ("inclination.pipeline", "write_outputs", "write"),
)


def _map_entry(path):
    return {
        "path": path,
        "format": "npz",
        "angles": "deg",
        "step_um": STEP_UM,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }


def write_strips(path: Path, micro, gen, size: int, *, depth_um: float, clusters: int) -> None:
    """Sample a size² map in strips of STRIP rows and write it as one npz.

    ``sample_map`` holds several float64 arrays and a k-d tree per point; sampled whole,
    an 8192² map would need tens of GiB here, so each strip is sampled on its own rows
    (``offset_um`` moves it down the microstructure) and placed into the full arrays.
    The maps are written as ``write_npz`` writes them (compressed, float64 ``euler_deg`` in the data
    frame, int32 ``phase``); the mis-indexed clusters all fall in the first strip.
    """
    euler = np.empty((size, size, 3))
    phase = np.empty((size, size), np.int32)
    options = {"step_um": STEP_UM, "noise_deg": 0.5, "nonindexed_fraction": 0.01}
    for r0 in range(0, size, STRIP):
        rows = min(STRIP, size - r0)
        strip = sample_map(
            micro,
            rng=gen,
            depth_um=depth_um,
            shape=(rows, size),
            offset_um=(0.0, r0 * STEP_UM),
            misindexed_clusters=clusters if r0 == 0 else 0,
            **options,
        )
        omap = as_orientation_map(strip)
        euler[r0 : r0 + rows] = omap.euler_deg_declared()
        phase[r0 : r0 + rows] = omap.phase
        del strip, omap
    np.savez_compressed(path, euler_deg=euler, phase=phase)


def build_sample(folder: Path, size: int, n_grains: int, seed: int) -> Path:
    """Write surface.npz, serial.npz and job.json for one sample; returns the job path."""
    gen = np.random.default_rng(seed)
    side_um = size * STEP_UM
    micro = make_microstructure(
        box_um=(side_um, side_um, 30.0),
        n_grains=n_grains,
        rng=gen,
        phases=[Phase.from_dict(PHASE)],
        twins=max(1, n_grains // 10),
    )
    write_strips(folder / "surface.npz", micro, gen, size, depth_um=0.0, clusters=3)
    write_strips(folder / "serial.npz", micro, gen, size, depth_um=5.0, clusters=0)
    sections = []
    for k, frac in enumerate((1 / 3, 2 / 3)):
        y = frac * side_um
        geometry = {
            "line_um": [[0.02 * side_um, y], [0.98 * side_um, y]],
            "viewer_at_um": [side_um / 2, y + 1.0],
            "imaging_tilt_deg": 52.0,
            "max_depth_um": 3.0,
        }
        found = simulate_cross_section(micro, rng=gen, angle_noise_deg=1.0, **geometry)
        sections.append(
            {
                "kind": "cross-section",
                "name": f"section {k + 1}",
                "line_um": geometry["line_um"],
                "viewer_at_um": geometry["viewer_at_um"],
                "imaging_tilt_deg": 52.0,
                "boundaries": [
                    {
                        "along_um": round(e["along_um"], 2),
                        "image_angle_deg": max(round(e["image_angle_deg"], 1), 0.1),
                        "descends": e["descends"],
                    }
                    for e in found
                ],
            }
        )
    sections.append(
        {"kind": "serial", "name": "5 µm", "map": _map_entry("serial.npz"), "depth_um": 5.0}
    )
    job = {
        "schema_version": 1,
        "description": f"benchmark {size}² with {n_grains} grains (synthetic)",
        "phases": [PHASE],
        "map": _map_entry("surface.npz"),
        "grains": {"threshold_deg": 5, "min_pixels": 8},
        "traces": {"min_length_um": 5, "tolerance_um": 0.75},
        "sections": sections,
    }
    path = folder / "job.json"
    path.write_text(json.dumps(job), encoding="utf-8")
    return path


CHILD = """
import functools, importlib, json, os, resource, sys, threading, time
t0 = time.perf_counter()
spent, stack, high = {}, [], {}
PAGE = os.sysconf("SC_PAGE_SIZE")

def sample():
    # Resident size now, kept as the largest seen in the stage running now.
    with open("/proc/self/statm") as f:
        rss = int(f.read().split()[1]) * PAGE
    stage = stack[-1][0] if stack else "sections and rest"
    high[stage] = max(high.get(stage, 0), rss)

def sampler():
    while True:
        sample()
        time.sleep(0.002)

def hwm():
    # This process's own high-water mark; ru_maxrss would include the parent's (vfork).
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024

threading.Thread(target=sampler, daemon=True).start()

def timed(fn, stage):
    @functools.wraps(fn)
    def inner(*args, **kwargs):
        # Exclusive time: the outer wrapped call pauses while an inner one runs.
        now = time.perf_counter()
        if stack:
            outer, since = stack[-1]
            spent[outer] = spent.get(outer, 0.0) + now - since
        stack.append([stage, now])
        try:
            return fn(*args, **kwargs)
        finally:
            sample()
            end = time.perf_counter()
            spent[stage] = spent.get(stage, 0.0) + end - stack.pop()[1]
            if stack:
                stack[-1][1] = end
    return inner

for module, name, stage in TIMED:
    owner = importlib.import_module(module)
    *cls, attr = name.split(".")
    if cls:
        owner = getattr(owner, cls[0])
    setattr(owner, attr, timed(getattr(owner, attr), stage))
from inclination.cli import main
rc = main(["analyse", JOB, "--out", OUT, "--quiet"])
total = time.perf_counter() - t0
spent["sections and rest"] = total - sum(spent.values())
peak = hwm()
print(json.dumps({"stages": spent, "total": total, "peak": peak, "high": high}))
sys.exit(rc)
"""


def run_analyse(job: Path, out: Path) -> tuple[dict, float, float, dict]:
    """Per-stage exclusive times (s), wall time (s), peak RSS and per-stage peak RSS (bytes)."""
    code = f"TIMED = {TIMED!r}\nJOB = {str(job)!r}\nOUT = {str(out)!r}\n" + CHILD
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"analyse failed: {done.stderr.strip()[-500:]}")
    found = json.loads(done.stdout.strip().splitlines()[-1])
    return found["stages"], found["total"], found["peak"], found["high"]


def floor_seconds(folder: Path) -> float:
    """The plain numpy/scipy version of the same work, timed in this process."""
    t0 = time.perf_counter()
    maps = [np.load(folder / name) for name in ("surface.npz", "serial.npz")]
    for m in maps:
        euler = np.deg2rad(np.asarray(m["euler_deg"], np.float32))
        phase = np.asarray(m["phase"])
        h, w = phase.shape
        # Orientations: Bunge Euler to quaternions (formula, Rowenhorst et al. 2015).
        c, s = np.cos(euler / 2), np.sin(euler / 2)
        sigma, delta = euler[..., 0] + euler[..., 2], euler[..., 0] - euler[..., 2]
        q = np.stack(
            [
                c[..., 1] * np.cos(sigma / 2),
                s[..., 1] * np.cos(delta / 2),
                s[..., 1] * np.sin(delta / 2),
                c[..., 1] * np.sin(sigma / 2),
            ]
        ).astype(np.float32)
        # Links: |q·q'| to the right and below (no symmetry: a floor, not the method).
        right = np.abs(np.einsum("chw,chw->hw", q[:, :, :-1], q[:, :, 1:])) > 0.999
        down = np.abs(np.einsum("chw,chw->hw", q[:, :-1], q[:, 1:])) > 0.999
        ok = phase > 0
        labels, n = ndimage.label(ok)
        del right, down
        # Grain statistics: sizes and mean quaternions.
        flat = labels.ravel()
        np.bincount(flat, minlength=n + 1)
        for k in range(4):
            np.bincount(flat, weights=q[k].ravel(), minlength=n + 1)
        # Boundary pairs and per-pair line-fit moments.
        a, b = labels[:, :-1].ravel(), labels[:, 1:].ravel()
        cut = a != b
        pair = a[cut].astype(np.int64) * (n + 1) + b[cut]
        uniq, inv = np.unique(pair, return_inverse=True)
        cols = np.nonzero(cut)[0] % (w - 1)
        for v in (cols, cols * cols):
            np.bincount(inv, weights=v.astype(float), minlength=uniq.size)
    # Plane predictions: four {111} normals per pair rotated into S, then a CSV.
    g = np.random.default_rng(0).normal(size=(uniq.size, 3, 3))
    normals = np.einsum("nij,kj->nki", g, np.ones((4, 3)))
    buf = "\n".join(",".join(f"{x:.4f}" for x in row) for row in normals[:, 0, :])
    (folder / "floor.csv").write_text(buf)
    return time.perf_counter() - t0


def fit_exponent(x, y) -> float:
    """Slope of log y against log x (least squares)."""
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[4096])
    parser.add_argument("--grains", type=int, nargs="+", default=[16000])
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)
    cases = []
    if len(args.sizes) > 1:  # grains scaled with the area: same grain size
        g0, s0 = args.grains[0], args.sizes[-1]
        cases = [(s, max(10, round(g0 * (s / s0) ** 2))) for s in args.sizes]
    else:
        cases = [(args.sizes[0], g) for g in args.grains]
    print("| size | grains | stage | time s | peak GiB | bytes/point |")
    print("|---|---|---|---|---|---|")
    results = []
    for size, n_grains in cases:
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            job = build_sample(folder, size, n_grains, args.seed)
            spent, total, rss, high = run_analyse(job, folder / "out")
            stages = {name: spent.get(name, 0.0) for name in STAGES}
            for name in STAGES:
                top = high.get(name, 0)
                print(
                    f"| {size}² | {n_grains} | {name} | {stages[name]:.2f} | "
                    f"{top / 2**30:.2f} | {top / size**2:.0f} |"
                )
            print(
                f"| {size}² | {n_grains} | analyse (total) | {total:.2f} | "
                f"{rss / 2**30:.2f} | {rss / size**2:.0f} |"
            )
            floor = floor_seconds(folder)
            print(
                f"| {size}² | {n_grains} | floor (numpy/scipy) | {floor:.2f} | | |\n"
                f"| {size}² | {n_grains} | analyse / floor | {total / floor:.1f}× | | |"
            )
            results.append((size, n_grains, stages, total, floor))
    if len(results) > 1:
        x = [r[0] ** 2 for r in results] if len(args.sizes) > 1 else [r[1] for r in results]
        what = "points" if len(args.sizes) > 1 else "grains"
        print(f"\nexponents against {what}:")
        for name in STAGES:
            y = [max(r[2][name], 1e-3) for r in results]
            print(f"  {name}: {fit_exponent(x, y):.2f}")
        print(f"  analyse total: {fit_exponent(x, [r[3] for r in results]):.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
