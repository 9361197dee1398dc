"""Build a small synthetic coupon, section it, and print what the sections show.

A short tour of inclination.synthetic: a box of Voronoi grains with {111} twin
lamellae, its surface map and a serial section 3 µm deeper, one milled cross-section,
and the ground truth the analysis should recover. Run it with

    python examples/make_sample.py [OUT_DIR]

to also write the truth as JSON. Everything is in the sample frame S (conventions §2:
x right, y down, z into the material), µm and degrees.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from inclination.planes import surface_geometry
from inclination.synthetic import (
    ground_truth,
    make_microstructure,
    recorded_in_frame,
    sample_map,
    simulate_cross_section,
)


def main(out_dir=None) -> dict:
    # A 100 × 80 µm coupon, 30 µm deep, of 40 FCC grains (the default phase); six of
    # them hold a twin lamella 2-4 µm thick.
    micro = make_microstructure(
        box_um=(100, 80, 30), n_grains=40, rng=2026, twins=6, twin_thickness_um=(2, 4)
    )
    surface = sample_map(micro, step_um=0.5, rng=1, nonindexed_fraction=0.01)
    deeper = sample_map(micro, step_um=0.5, rng=2, depth_um=3.0)
    turned = recorded_in_frame(surface, rotation="z180")  # a map exported in a wrong frame
    trench = simulate_cross_section(
        micro,
        line_um=((5, 40), (95, 40)),
        viewer_at_um=(50, 45),
        imaging_tilt_deg=52,
        max_depth_um=3,
        rng=3,
    )
    truth = ground_truth(micro, maps={"surface": surface, "serial_3um": deeper})

    print(f"{micro.n_grains} grains, {len(micro.lamellae)} twin lamellae")
    print(f"surface map {surface.shape}, {int((surface.phase == 0).sum())} points not indexed")
    for lam in micro.lamellae:
        geo = surface_geometry(lam.normal_sample)  # trace, dip, dip direction (§5)
        print(
            f"  twin in grain {lam.parent:3d} on {lam.indices}: trace "
            f"{geo.trace_angle_deg:6.1f}°, dip {geo.dip_deg:5.1f}° toward "
            f"{geo.dip_azimuth_deg:6.1f}°"
        )
    print(f"cross-section: {len(trench)} boundaries, e.g. {trench[0]}")
    print(f"wrong-frame copy recorded with frame turn {turned.frame_rotation}")
    if out_dir is not None:
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        (out / "truth.json").write_text(json.dumps(truth, indent=2, allow_nan=False))
        (out / "cross_section.json").write_text(json.dumps(trench, indent=2))
        print(f"wrote {out / 'truth.json'} and {out / 'cross_section.json'}")
    return truth


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
