"""End to end on synthetic samples: map → grains → network → straight segments.

The oracle is inclination.synthetic: Voronoi grains whose faces are the bisector planes
of their seeds, with annealing-twin lamellae on known {111} planes. A plane meets the
section in a straight trace whose angle comes from the plane's normal (conventions §5);
its extent on the map comes from the true region of every point (``grain_id``).

Check: every true planar boundary longer than 20 steps is found as one
segment or as collinear pieces, with its angle within 3σ. The σ model's errors are
heavier-tailed than a normal law (measured on clean staircases, see
inclination.traces: 0.8 % beyond 3σ, the largest near 6σ), so the 3σ condition is
asked of 95 % of the boundaries and 6σ of all of them.
"""

from __future__ import annotations

import numpy as np
import pytest

from inclination import grains, network
from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.maps import OrientationMap
from inclination.planes import surface_geometry
from inclination.synthetic import (
    as_orientation_map,
    boundary_normals_sample,
    make_microstructure,
    sample_map,
)
from inclination.traces import fit_segments, group_collinear

STEP_UM = 0.5
LONG_STEPS = 20
CU = Phase(
    1,
    "Cu",
    "m-3m",
    Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ("{1 1 1}",),
)


def _true_edges(smap):
    """Midpoints and true region pairs (low, high) of the edges between true regions."""
    region, x, y = smap.grain_id, smap.x_um, smap.y_um
    h, w = region.shape
    i, j = np.mgrid[0:h, 0:w]
    # Neighbours of conventions §1: right and down on squares; right and the two
    # below on hexagons (odd rows shifted right by half a step).
    links = [(i[:, :-1], j[:, :-1], i[:, 1:], j[:, 1:])]
    if smap.grid == "square":
        links.append((i[:-1], j[:-1], i[1:], j[1:]))
    else:
        for shift in (0, 1):
            bj = j[:-1] + i[:-1] % 2 - 1 + shift
            ok = (bj >= 0) & (bj < w)
            links.append((i[:-1][ok], j[:-1][ok], i[:-1][ok] + 1, bj[ok]))
    mids, low, high = [], [], []
    for ai, aj, bi, bj in links:
        ra, rb = region[ai, aj], region[bi, bj]
        cut = ra != rb
        mids.append(
            np.stack([(x[ai, aj] + x[bi, bj])[cut] / 2, (y[ai, aj] + y[bi, bj])[cut] / 2], 1)
        )
        low.append(np.minimum(ra, rb)[cut])
        high.append(np.maximum(ra, rb)[cut])
    return np.concatenate(mids), np.concatenate(low), np.concatenate(high)


def _runs(values, gap):
    """Labels of the runs of sorted-apart values separated by more than ``gap``."""
    order = np.argsort(values)
    breaks = np.r_[0, np.diff(values[order]) > gap].cumsum()
    labels = np.empty(values.size, dtype=np.int64)
    labels[order] = breaks
    return labels


def true_boundaries(micro, smap):
    """Every straight true trace on the map: region pair, angle, line offset, extent.

    The edges of one region pair lie on one plane; they split into separate traces
    where they sit on parallel lines (the two faces of a lamella) or leave a gap
    along the line (a boundary cut by a lamella).
    """
    mids, low, high = _true_edges(smap)
    out = []
    for a, b in sorted(set(zip(low.tolist(), high.tolist(), strict=True))):
        pts = mids[(low == a) & (high == b)]
        normal = boundary_normals_sample(micro, [a], [b])
        angle = float(surface_geometry(normal).trace_angle_deg[0])
        if np.isnan(angle):
            continue
        t = np.array([np.cos(np.radians(angle)), np.sin(np.radians(angle))])
        n = np.array([-t[1], t[0]])
        for line in np.unique(off_label := _runs(pts @ n, 3 * STEP_UM)):
            on_line = pts[off_label == line]
            along_label = _runs(on_line @ t, 3 * STEP_UM)
            for run in np.unique(along_label):
                piece = on_line[along_label == run]
                along = piece @ t
                out.append(
                    {
                        "regions": (a, b),
                        "angle_deg": angle,
                        "offset_um": float(np.median(piece @ n)),
                        "along_um": (float(along.min()), float(along.max())),
                        "length_um": float(along.max() - along.min() + STEP_UM),
                    }
                )
    return out


def run_pipeline(grid, seed, nonindexed_fraction):
    micro = make_microstructure(box_um=(60, 50, 30), n_grains=14, rng=seed, phases=[CU], twins=3)
    smap = sample_map(
        micro, step_um=STEP_UM, rng=seed, grid=grid, nonindexed_fraction=nonindexed_fraction
    )
    omap = as_orientation_map(smap)
    grain_map = grains.segment_grains(omap, [CU])
    net = network.boundary_network(omap, grain_map, [CU])
    seg = fit_segments(net, step_um=STEP_UM, grid=grid)
    return micro, smap, grain_map, seg


def match_boundaries(micro, smap, grain_map, seg):
    """For each long true boundary: its matched segments and the error of the longest."""
    # A detected grain stands for the true region most of its points lie in.
    labels, region = grain_map.labels.ravel(), smap.grain_id.ravel()
    votes = np.zeros((labels.max() + 1, region.max() + 1), dtype=np.int64)
    np.add.at(votes, (labels, region), 1)
    region_of = votes.argmax(axis=1)
    ra, rb = region_of[seg["grain_a"]], region_of[seg["grain_b"]]
    pair_low, pair_high = np.minimum(ra, rb), np.maximum(ra, rb)
    middle = np.stack([seg["x0_um"] + seg["x1_um"], seg["y0_um"] + seg["y1_um"]], 1) / 2
    groups = group_collinear(seg, max_offset_um=2 * STEP_UM)
    results = []
    for truth in true_boundaries(micro, smap):
        if truth["length_um"] < LONG_STEPS * STEP_UM:
            continue
        theta = np.radians(truth["angle_deg"])
        t = np.array([np.cos(theta), np.sin(theta)])
        n = np.array([-t[1], t[0]])
        lo, hi = truth["along_um"]
        # Segments of that region pair whose middle lies on the true trace.
        on_trace = (
            (pair_low == truth["regions"][0])
            & (pair_high == truth["regions"][1])
            & (np.abs(middle @ n - truth["offset_um"]) < 2 * STEP_UM)
            & (middle @ t > lo - STEP_UM)
            & (middle @ t < hi + STEP_UM)
        )
        # Pieces too short for trace analysis (a few edges at a junction artefact) are
        # flagged, not counted.
        pieces = np.flatnonzero(on_trace & ~seg["too_short"])
        longest = pieces[np.argmax(seg["length_um"][pieces])] if pieces.size else None
        error = (
            np.nan
            if longest is None
            else np.mod(seg["trace_angle_deg"][longest] - truth["angle_deg"] + 90, 180) - 90
        )
        results.append(
            {
                "truth": truth,
                "n_pieces": pieces.size,
                "n_groups": np.unique(groups[pieces]).size,
                "covered": seg["length_um"][on_trace].sum() / truth["length_um"],
                "z": error / seg["trace_sigma_deg"][longest] if longest is not None else np.nan,
            }
        )
    return results


@pytest.mark.parametrize("nonindexed_fraction", [0.0, 0.01])
@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_every_long_true_boundary_is_found_at_its_angle(grid, nonindexed_fraction):
    results = []
    for seed in (1, 2, 3):
        results += match_boundaries(*run_pipeline(grid, seed, nonindexed_fraction))
    assert len(results) >= 30  # enough boundaries for the 95 % below to mean something
    for r in results:
        # Found: one segment, or collinear pieces that group_collinear puts together
        # (short pieces at junction artefacts aside), covering the trace.
        assert r["n_pieces"] >= 1, r["truth"]
        assert r["n_groups"] == 1, r["truth"]
        assert 0.8 <= r["covered"] <= 1.1, r
    z = np.abs([r["z"] for r in results])
    assert np.mean(z <= 3) >= 0.95
    assert np.all(z <= 6)


def test_fitted_length_matches_true_extent():
    # The true extent of each straight trace on the map, from the true regions of its
    # points: the fitted length of a single-piece boundary must match it, whereas the
    # staircase (edges × step) is ~27 % longer on a square grid (Bobrowski 2020).
    micro, smap, grain_map, seg = run_pipeline("square", 4, 0.0)
    results = match_boundaries(micro, smap, grain_map, seg)
    single = [r for r in results if r["n_pieces"] == 1]
    # Includes the short end pieces, if any.
    assert len(single) >= 8
    covered = np.array([r["covered"] for r in single])
    assert_close = np.abs(covered - 1)
    assert np.median(assert_close) < 0.03 and np.all(assert_close < 0.1)


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_grain_inside_a_grain_gives_its_four_sides(grid):
    # Hand-built: a block of 20 rows x 30 columns turned 45° about Z inside a grain of
    # the identity orientation. The network hands over one closed chain; its sides are
    # 30 steps wide and 20 row pitches high (s, or s·√3/2 on hexagons, conventions §1),
    # their corners where the fitted sides cross.
    quat = np.zeros((60, 60, 4), np.float32)
    quat[..., 0] = 1.0
    block = np.zeros((60, 60), bool)
    block[20:40, 15:45] = True
    quat[block] = np.array([np.cos(np.pi / 8), 0, 0, np.sin(np.pi / 8)], np.float32)
    pitch = STEP_UM if grid == "square" else STEP_UM * np.sqrt(3) / 2
    # On a hexagonal grid both steps are the in-row spacing.
    omap = OrientationMap(
        quat, np.ones((60, 60), int), grid=grid, step_x_um=STEP_UM, step_y_um=STEP_UM
    )
    grain_map = grains.segment_grains(omap, [CU])
    net = network.boundary_network(omap, grain_map, [CU])
    assert net.closed.tolist() == [True]
    seg = fit_segments(net, step_um=STEP_UM, grid=grid)
    # Folded to [-1, 179) so that a side at 179.99° compares with 0°.
    folded = np.mod(seg["trace_angle_deg"] + 1, 180) - 1
    order = np.argsort(folded)
    angles = folded[order]
    np.testing.assert_allclose(angles, [0, 0, 90, 90], rtol=0, atol=0.01)
    np.testing.assert_allclose(
        seg["length_um"][order], [30 * STEP_UM] * 2 + [20 * pitch] * 2, rtol=0, atol=0.01
    )
