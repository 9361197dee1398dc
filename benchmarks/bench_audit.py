"""What the frame audit adds to `analyse`: the demo job and large twinned synthetic maps.

Run by hand (not by CI): python benchmarks/bench_audit.py [--sizes 1024 2048 4096]

For the demo's main job and for square synthetic maps of each size (annealed FCC grains
with twin lamellae, inclination.synthetic, step 0.5 µm, about 60 µm² per grain), it runs the
job through the planes stage (the demo through its sections) and times the frame audit on
the result alone (the same call the pipeline makes), reporting it as a share of the rest of
the run. The audit works on grain means and segments, so its share falls as maps grow.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

from inclination import pipeline, synthetic
from inclination.audit import audit_frame
from inclination.crystal.phases import Phase
from inclination.demo import write_demo_scenario
from inclination.io.job import job_from_dict
from inclination.io.writers import write_npz

_CU = {
    "id": 1,
    "name": "Cu",
    "laue": "m-3m",
    "lattice": {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90},
}


def _time(job, stage):
    t0 = time.perf_counter()
    analysis = pipeline.run(job, stage=stage)
    total = time.perf_counter() - t0
    t1 = time.perf_counter()
    # The pipeline's call without the sections' settling, which for a declared frame that
    # is the best reuses the run's own verdict.
    audit_frame(
        analysis.segments,
        analysis.grain_map.grains,
        job.phases,
        axes=analysis.omap.axes,
        data_frame_rotation=analysis.omap.data_frame_rotation,
        sigma_criterion=job.planes["sigma_criterion"],
    )
    audit = time.perf_counter() - t1
    return total, audit, analysis


def _synthetic_job(folder: Path, size: int, seed: int = 1):
    side = size * 0.5
    n = max(int(side * side / 60.0), 10)
    micro = synthetic.make_microstructure(
        box_um=(side, side, 20.0),
        n_grains=n,
        rng=seed,
        phases=[Phase.from_dict(_CU)],
        twins=max(n // 5, 1),
    )
    sample = synthetic.sample_map(micro, step_um=0.5, rng=seed + 1, noise_deg=0.5)
    write_npz(folder / "m.npz", synthetic.as_orientation_map(sample))
    raw = {
        "phases": [_CU],
        "map": {
            "path": "m.npz",
            "format": "npz",
            "step_um": 0.5,
            "grid": "square",
            "angles": "deg",
            "axes": {"x": "right", "y": "down"},
        },
    }
    return job_from_dict(raw, base_dir=folder)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--sizes", type=int, nargs="*", default=[1024, 2048])
    args = parser.parse_args(argv)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        paths = write_demo_scenario(Path(tmp) / "demo")
        raw = json.loads(paths["job"].read_text())
        job = job_from_dict(raw, base_dir=paths["job"].parent)
        total, audit, a = _time(job, "sections")
        rows.append(
            ("demo (sections)", a.omap.shape, total, audit, a.audit.best_hypothesis.fit.n_voters)
        )
        for size in args.sizes:
            folder = Path(tmp) / f"s{size}"
            folder.mkdir()
            job = _synthetic_job(folder, size)
            total, audit, a = _time(job, "planes")
            rows.append(
                (
                    f"{size}² (planes)",
                    a.omap.shape,
                    total,
                    audit,
                    a.audit.best_hypothesis.fit.n_voters,
                )
            )
    print("| case | map | run s (with audit) | audit s | audit / rest of run | voters |")
    print("|---|---|---|---|---|---|")
    for name, shape, total, audit, voters in rows:
        share = audit / max(total - audit, 1e-9)
        cells = [name, f"{shape[0]}×{shape[1]}", f"{total:.2f}", f"{audit:.3f}"]
        cells += [f"{100 * share:.1f} %", str(voters)]
        print("| " + " | ".join(cells) + " |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
