"""End to end on synthetic samples: map → grains → traces → planes → sections → compare.

The oracle is inclination.synthetic: Voronoi grains with {111} annealing-twin lamellae whose
planes are known exactly, sectioned by cross-sections (image angles with 1° noise, imaged at
52° tilt) and by a serial section 5 µm deep (step 0.5 µm, 0.5° orientation noise). The same
sample recorded in a data frame turned 180° about the surface normal must give the opposite
sense on every decided boundary (conventions §6).
"""

from __future__ import annotations

import numpy as np
import pytest

from inclination import synthetic
from inclination.compare import frame_verdict, measured_senses
from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.frames import DeclaredAxes
from inclination.grains import segment_grains
from inclination.network import boundary_network
from inclination.planes import identify
from inclination.sections import (
    CrossSection,
    Registration,
    estimate_depth_from_twins,
    measure_cross_section,
    measure_serial_section,
    measure_stack,
    network_crossings,
    network_junctions_um,
    register_sections,
)
from inclination.traces import fit_segments

STEP_UM = 0.5
CU = Phase(
    1,
    "Cu",
    "m-3m",
    Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ("{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}"),
)
XS_SEEDS = (1, 2)
LINES_Y_UM = (15.0, 35.0, 55.0, 75.0, 90.0)
SHIFT_UM = (1.5, -1.0)


def _chain(sampled):
    return _chain_and_network(sampled)[:3]


def _chain_and_network(sampled):
    omap = synthetic.as_orientation_map(sampled)
    grains = segment_grains(omap, [CU])
    network = boundary_network(omap, grains, [CU])
    segments = fit_segments(network, step_um=STEP_UM)
    return grains, segments, identify(segments, grains, [CU]), network


def _region_of(labels, truth, n_regions):
    """The true region holding most of each detected grain, and its share of the grain."""
    keep = labels > 0
    key = labels[keep].astype(np.int64) * (n_regions + 1) + truth[keep]
    pairs, counts = np.unique(key, return_counts=True)
    label, region = np.divmod(pairs, n_regions + 1)
    order = np.lexsort((counts, label))
    out = np.zeros(int(labels.max()) + 1, dtype=np.int64)
    out[label[order]] = region[order]
    share = np.zeros(len(out))
    share[label[order]] = counts[order]
    return out, share / np.maximum(np.bincount(labels[keep], minlength=len(out)), 1)


def _senses(measured, identification):
    """The senses of the measured planes, by the function the pipeline calls."""
    return measured_senses(measured, identification)


def _cross_sections(micro, sampled, segments, network):
    """Five cross-sections across the map; measured rows with the truth beside them.

    Matched as the pipeline does: from where the network crosses each line, with the
    entries at triple junctions flagged (``near_junction``, counted in ``n_near_junction``).
    """
    bounds = (0.0, 0.0, (sampled.shape[1] - 1) * STEP_UM, (sampled.shape[0] - 1) * STEP_UM)
    junctions = network_junctions_um(network, bounds, step_um=STEP_UM)
    parts = []
    n_near_junction = 0
    for k, y in enumerate(LINES_Y_UM):
        line = ((3.0, y), (116.0, y + 3.0))
        viewer = (60.0, y - 10.0)
        geometry = {"line_um": line, "viewer_at_um": viewer, "imaging_tilt_deg": 52.0}
        entries = synthetic.simulate_cross_section(
            micro, **geometry, max_depth_um=3.0, rng=100 + k, angle_noise_deg=1.0
        )
        truth = synthetic.cross_section_crossings(micro, **geometry, max_depth_um=3.0)
        section = {**geometry, "boundaries": entries}
        record = CrossSection.from_job_entry(section, axes=DeclaredAxes("right", "down"))
        out = measure_cross_section(
            record,
            segments,
            step_um=STEP_UM,
            bounds_um=bounds,
            crossings=network_crossings(network, record.line_sample),
            junctions_um=junctions,
        )
        ok = out["status"] == "measured"
        n_near_junction += int(np.sum(out["status"] == "near_junction"))
        parts.append(
            {
                **{key: np.asarray(v)[ok] for key, v in out.items()},
                "true_dip_deg": truth["dip_deg"][ok],
                "beta_deg_true": truth["beta_deg"][ok],
                "is_twin": truth["is_twin"][ok],
            }
        )
    out = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
    out["n_near_junction"] = n_near_junction
    return out


@pytest.fixture(scope="module")
def cross_runs():
    runs = {}
    for seed in XS_SEEDS:
        micro = synthetic.make_microstructure(
            box_um=(120.0, 100.0, 30.0), n_grains=50, rng=seed, phases=[CU], twins=12
        )
        sampled = synthetic.sample_map(micro, step_um=STEP_UM, rng=seed + 10, noise_deg=0.5)
        for frame, recorded in (
            ("declared", sampled),
            ("turned", synthetic.recorded_in_frame(sampled, rotation="z180")),
        ):
            _, segments, identification, network = _chain_and_network(recorded)
            measured = _cross_sections(micro, sampled, segments, network)
            runs[(seed, frame)] = (measured, _senses(measured, identification))
    return runs


def test_every_decided_twin_boundary_agrees(cross_runs):
    decided_twins = 0
    for seed in XS_SEEDS:
        measured, senses = cross_runs[(seed, "declared")]
        decided = senses["sense"] != "undecided"
        twins = measured["is_twin"] & decided
        assert senses["sense"][twins].tolist() == ["agrees"] * int(twins.sum())
        # Decided general boundaries (an identified shared plane) must agree as well.
        assert set(senses["sense"][decided].tolist()) <= {"agrees"}
        decided_twins += int(twins.sum())
        assert frame_verdict(senses).verdict == "as_declared"
    assert decided_twins >= 20, "too few decided twin boundaries to judge"
    # The lines pass triple junctions: those entries were flagged, not decided.
    assert sum(cross_runs[(seed, "declared")][0]["n_near_junction"] for seed in XS_SEEDS) > 0


def test_turned_frame_gives_opposite_on_every_decided_boundary(cross_runs):
    for seed in XS_SEEDS:
        _, senses = cross_runs[(seed, "turned")]
        decided = senses["sense"] != "undecided"
        assert decided.sum() >= 10
        assert set(senses["sense"][decided].tolist()) == {"opposite"}
        verdict = frame_verdict(senses)
        assert verdict.verdict == "turned_180_about_normal"
        assert "turned 180°" in verdict.sentence
        # The turn changes nothing but the sign of each call.
        _, declared = cross_runs[(seed, "declared")]
        assert np.array_equal(declared["sense"] == "undecided", senses["sense"] == "undecided")


def test_cross_section_dips_against_truth(cross_runs):
    rows = [cross_runs[(seed, "declared")][0] for seed in XS_SEEDS]
    err = np.concatenate([np.abs(r["measured_dip_deg"] - r["true_dip_deg"]) for r in rows])
    sigma = np.concatenate([r["measured_dip_sigma_deg"] for r in rows])
    beta = np.concatenate([r["beta_deg_true"] for r in rows])
    steep_enough = beta > 30.0
    assert steep_enough.sum() >= 50
    # Measured 2026-12 (76 boundaries): median 0.64°, 95th percentile 1.7°, largest 1.85°.
    assert np.all(err[steep_enough] <= 2.0)
    assert np.median(err[steep_enough]) < 1.0
    assert np.all(err < 4.0 * sigma + 0.5)
    # The first-order σ is calibrated: errors over σ have an RMS near 1.
    z = err / sigma
    assert 0.7 < np.sqrt(np.mean(z**2)) < 1.4


@pytest.fixture(scope="module")
def serial_run():
    # 160 µm square, ~120 grains in view: enough boundaries to register on the grains.
    micro = synthetic.make_microstructure(
        box_um=(160.0, 160.0, 30.0), n_grains=200, rng=1, phases=[CU], twins=12
    )
    kw = {"step_um": STEP_UM, "noise_deg": 0.5, "extent_um": (145.0, 145.0)}
    surface = synthetic.sample_map(micro, rng=11, offset_um=(5.0, 5.0), **kw)
    deeper = synthetic.sample_map(
        micro, rng=21, offset_um=(5.0 + SHIFT_UM[0], 5.0 + SHIFT_UM[1]), depth_um=5.0, **kw
    )
    rescan = synthetic.sample_map(
        micro, rng=31, offset_um=(5.0 + SHIFT_UM[0], 5.0 + SHIFT_UM[1]), **kw
    )
    return micro, surface, _chain(surface), _chain(deeper), _chain(rescan)


def _serial_errors(micro, surface, surface_chain, result):
    grains, segments, _ = surface_chain
    region_of, purity = _region_of(grains.labels, surface.grain_id, micro.n_regions)
    b = result.boundaries
    ra, rb = region_of[segments["grain_a"]], region_of[segments["grain_b"]]
    pure = (purity[segments["grain_a"]] > 0.95) & (purity[segments["grain_b"]] > 0.95)
    truth = synthetic.boundary_normals_sample(micro, ra, rb)
    ok = (b["status"] == "measured") & pure & np.all(np.isfinite(truth), axis=1)
    normal = np.stack([b["normal_x"], b["normal_y"], b["normal_z"]], -1)
    normal_err = np.degrees(np.arccos(np.clip(np.abs(np.sum(normal * truth, 1)), 0.0, 1.0)))
    dip_err = np.abs(b["measured_dip_deg"] - np.degrees(np.arccos(np.abs(truth[:, 2]))))
    parent = micro.region_parent
    twin = (parent[np.maximum(ra, 1) - 1] == parent[np.maximum(rb, 1) - 1]) & (ra != rb)
    return ok, dip_err, normal_err, twin


def test_registration_recovers_an_imposed_shift(serial_run):
    _, _, (grains, _, _), (deeper, _, _), (rescan, _, _) = serial_run
    laue = {1: CU}
    # A re-scan of the same plane, moved by a known stage shift: recovered to half a step.
    reg = register_sections(grains, rescan, step_um=STEP_UM, laue_by_phase=laue)
    assert abs(reg.shift_x_um - SHIFT_UM[0]) <= STEP_UM / 2
    assert abs(reg.shift_y_um - SHIFT_UM[1]) <= STEP_UM / 2
    # 5 µm deeper every boundary has moved by h·cot δ; the shift found carries their net
    # movement (of order h/√N). Measured 2026-12: off by (−0.34, 0.20) µm.
    reg = register_sections(grains, deeper, step_um=STEP_UM, laue_by_phase=laue)
    assert np.hypot(reg.shift_x_um - SHIFT_UM[0], reg.shift_y_um - SHIFT_UM[1]) <= STEP_UM


def test_serial_section_dips_with_fiducials(serial_run):
    micro, surface, surface_chain, deeper_chain, _ = serial_run
    grains, segments, identification = surface_chain
    points = np.array([[10.0, 10.0], [140.0, 12.0], [80.0, 140.0]])
    # A fiducial at p (sample box) is at p − offset on each map.
    fiducials = np.stack([points - 5.0, points - (5.0 + np.array(SHIFT_UM))], axis=1)
    result = measure_serial_section(
        segments,
        grains,
        deeper_chain[1],
        deeper_chain[0],
        depth_um=5.0,
        depth_sigma_um=0.1,
        step_um=STEP_UM,
        laue_by_phase={1: CU},
        fiducials_um=fiducials,
    )
    ok, dip_err, normal_err, twin = _serial_errors(micro, surface, surface_chain, result)
    assert ok.sum() >= 100
    # Measured 2026-12: dips 0.13° (median), general normals 0.24° (median).
    assert np.median(dip_err[ok]) < 3.0
    assert np.median(normal_err[ok & ~twin]) < 5.0
    # A twin lamella moves sideways by h·cot δ between the sections, often by more than
    # its width, yet is still paired (by its centroid) and measured. Measured 2026-12:
    # 22 of the 24 pure twin segments of 5 µm or more (16 on overlap alone), 0.09° median.
    region_of, purity = _region_of(grains.labels, surface.grain_id, micro.n_regions)
    pure = (purity[segments["grain_a"]] > 0.95) & (purity[segments["grain_b"]] > 0.95)
    length_um = np.hypot(
        np.asarray(segments["x1_um"]) - segments["x0_um"],
        np.asarray(segments["y1_um"]) - segments["y0_um"],
    )
    long_twin = twin & pure & (length_um >= 5.0)
    assert long_twin.sum() >= 20
    assert np.mean(ok[long_twin]) >= 0.8
    assert np.median(dip_err[ok & long_twin]) < 3.0
    measured = {k: np.asarray(v)[ok] for k, v in result.boundaries.items()}
    senses = _senses(measured, identification)
    decided = senses["sense"] != "undecided"
    assert decided.sum() >= 5
    assert set(senses["sense"][decided].tolist()) == {"agrees"}


def test_serial_section_dips_registered_on_the_grains(serial_run):
    micro, surface, surface_chain, deeper_chain, _ = serial_run
    grains, segments, _ = surface_chain
    result = measure_serial_section(
        segments,
        grains,
        deeper_chain[1],
        deeper_chain[0],
        depth_um=5.0,
        depth_sigma_um=0.1,
        step_um=STEP_UM,
        laue_by_phase={1: CU},
    )
    assert result.registration.method == "grain structure"
    ok, dip_err, normal_err, twin = _serial_errors(micro, surface, surface_chain, result)
    assert ok.sum() >= 100
    # Measured 2026-12: dips 2.8° and general normals 2.8° (medians), limited by the
    # registration (a 0.1 µm shift error moves a 60° dip by about 1° at h = 5 µm).
    assert np.median(dip_err[ok]) < 3.5
    assert np.median(normal_err[ok & ~twin]) < 5.0
    # The registration's share of σ keeps the reported σ honest.
    z = dip_err[ok] / result.boundaries["measured_dip_sigma_deg"][ok]
    assert np.sqrt(np.mean(z**2)) < 1.6
    # Measured 2026-12-02: 153 of 154 dips (99.4 %) within 2.5σ of the truth, RMS z 1.21.
    assert np.mean(np.abs(z) <= 2.5) >= 0.9


def test_stack_of_three_sections_fits_each_plane():
    micro = synthetic.make_microstructure(
        box_um=(120.0, 100.0, 30.0), n_grains=50, rng=4, phases=[CU], twins=12
    )
    depths = (0.0, 2.5, 5.0)
    chains = [
        _chain(synthetic.sample_map(micro, step_um=STEP_UM, rng=40 + i, noise_deg=0.5, depth_um=h))
        for i, h in enumerate(depths)
    ]
    surface = synthetic.sample_map(micro, step_um=STEP_UM, rng=40, noise_deg=0.5)
    grains, segments, _ = chains[0]
    # The sections are known to lie one above the other (as with fiducials).
    placed = Registration(0.0, 0.0, 0.0, 0.0, 1, "given")
    out = measure_stack(
        segments,
        grains,
        [(c[1], c[0]) for c in chains[1:]],
        depths_um=depths[1:],
        step_um=STEP_UM,
        laue_by_phase={1: CU},
        registrations=[placed, placed],
    )
    region_of, purity = _region_of(grains.labels, surface.grain_id, micro.n_regions)
    ra, rb = region_of[segments["grain_a"]], region_of[segments["grain_b"]]
    truth = synthetic.boundary_normals_sample(micro, ra, rb)
    pure = (purity[segments["grain_a"]] > 0.95) & (purity[segments["grain_b"]] > 0.95)
    ok = (out["n_sections"] == 3) & pure & np.all(np.isfinite(truth), axis=1)
    assert ok.sum() >= 40
    normal = np.stack([out["normal_x"], out["normal_y"], out["normal_z"]], -1)
    err = np.degrees(np.arccos(np.clip(np.abs(np.sum(normal * truth, 1)), 0.0, 1.0)))
    # Measured 2026-12: 0.15° median, 0.5° at the 90th percentile; residual 0.013 µm.
    assert np.median(err[ok]) < 2.0
    assert np.median(out["fit_residual_um"][ok]) < STEP_UM / 2


# ----------------------------------------------------------------- depth from the twins

DEPTH_SEEDS = tuple(range(1, 11))


@pytest.fixture(scope="module")
def depth_runs():
    # Ten samples, layers of 2, 3, 5 and 8 µm, each registered on the grain structure and
    # by three fiducial marks; the oracle's layer thickness is the truth.
    runs = []
    marks = np.array([[10.0, 10.0], [95.0, 12.0], [50.0, 95.0]])
    for seed in DEPTH_SEEDS:
        depth = (2.0, 3.0, 5.0, 8.0)[seed % 4]
        micro = synthetic.make_microstructure(
            box_um=(110.0, 110.0, 20.0), n_grains=100, rng=seed, phases=[CU], twins=12
        )
        kw = {"step_um": STEP_UM, "noise_deg": 0.5, "extent_um": (100.0, 100.0)}
        surface = _chain(synthetic.sample_map(micro, rng=100 + seed, offset_um=(5.0, 5.0), **kw))
        deeper = _chain(
            synthetic.sample_map(micro, rng=200 + seed, offset_um=(6.0, 4.0), depth_um=depth, **kw)
        )
        for fiducials in (None, np.stack([marks - 5.0, marks - np.array([6.0, 4.0])], 1)):
            estimate = estimate_depth_from_twins(
                surface[1],
                surface[0],
                deeper[1],
                deeper[0],
                surface[2],
                step_um=STEP_UM,
                laue_by_phase={1: CU},
                fiducials_um=fiducials,
            )
            runs.append((depth, estimate))
    return runs


def test_depth_from_coherent_twins_against_truth(depth_runs):
    depth = np.array([d for d, _ in depth_runs])
    found = np.array([e.depth.depth_um for _, e in depth_runs])
    sigma = np.array([e.depth.depth_sigma_um for _, e in depth_runs])
    methods = {e.registration.method for _, e in depth_runs}
    assert methods == {"grain structure and coherent twins", "fiducials"}
    assert all(e.depth.source == "coherent twins" and e.n_used >= 5 for _, e in depth_runs)
    # Measured 2026-12-02: 0.25 % median and 1.0 % largest error of h; the fitted
    # registration shift removes the bias (up to −16 %) that a grain-structure
    # registration puts into a plain average of |Δ| tan δ.
    error = np.abs(found - depth) / depth
    assert np.median(error) < 0.01 and error.max() < 0.03
    # σ_h is calibrated or conservative, never understated by more than a factor 1.5:
    # measured RMS z 0.37, largest |z| 0.72 (the 0.5° allowance on the predicted dips
    # covers map calibration errors that the simulation does not make).
    z = (found - depth) / sigma
    assert np.sqrt(np.mean(z**2)) <= 1.5 and np.abs(z).max() <= 3.0


def test_depth_from_twins_survives_mismatched_traces(serial_run):
    # A trace matched to the wrong deeper boundary is a blunder: three of the twins used
    # get their deeper traces moved 3 µm sideways; h stays within 3σ of the truth (5 µm).
    micro, surface, (grains, segments, ident), (deeper_grains, deeper, _), _ = serial_run
    kw = {"step_um": STEP_UM, "laue_by_phase": {1: CU}}
    clean = estimate_depth_from_twins(segments, grains, deeper, deeper_grains, ident, **kw)
    assert abs(clean.depth.depth_um - 5.0) <= 3.0 * clean.depth.depth_sigma_um
    rows = np.flatnonzero(np.isin(segments["segment_id"], clean.segment_ids[:3]))
    measured = measure_serial_section(
        segments,
        grains,
        deeper,
        deeper_grains,
        depth_um=5.0,
        depth_sigma_um=0.1,
        registration=clean.registration,
        **kw,
    ).boundaries
    moved = dict(deeper)
    hit = np.isin(deeper["segment_id"], measured["deeper_segment_id"][rows])
    for key in ("x0_um", "x1_um"):
        moved[key] = np.where(hit, np.asarray(deeper[key]) + 3.0, deeper[key])
    blunder = estimate_depth_from_twins(
        segments, grains, moved, deeper_grains, ident, registration=clean.registration, **kw
    )
    assert hit.sum() == 3
    assert abs(blunder.depth.depth_um - 5.0) <= 3.0 * blunder.depth.depth_sigma_um
    assert blunder.n_rejected >= clean.n_rejected + 1 or blunder.n_used < clean.n_used


def test_coherent_twins_refine_a_registration_on_the_grain_structure(serial_run):
    # The grain-structure registration carries the boundaries' net move (−0.34, 0.20) µm
    # off the imposed shift; the twins' offsets measure it. Measured 2026-12-02: the refined
    # shift within 0.003 µm of the truth, serial dips 0.13° (median) against 2.8° before,
    # as good as with fiducials (0.13°).
    micro, surface, surface_chain, (deeper_grains, deeper, _), _ = serial_run
    grains, segments, ident = surface_chain
    kw = {"step_um": STEP_UM, "laue_by_phase": {1: CU}}
    refined = estimate_depth_from_twins(segments, grains, deeper, deeper_grains, ident, **kw)
    reg = refined.registration
    assert reg.method == "grain structure and coherent twins"
    assert np.hypot(reg.shift_x_um - SHIFT_UM[0], reg.shift_y_um - SHIFT_UM[1]) < 0.05
    result = measure_serial_section(
        segments,
        grains,
        deeper,
        deeper_grains,
        depth_um=5.0,
        depth_sigma_um=0.1,
        registration=reg,
        **kw,
    )
    ok, dip_err, _, _ = _serial_errors(micro, surface, surface_chain, result)
    assert ok.sum() >= 100 and np.median(dip_err[ok]) < 0.5
    z = dip_err[ok] / result.boundaries["measured_dip_sigma_deg"][ok]
    assert np.mean(np.abs(z) <= 2.5) >= 0.9
