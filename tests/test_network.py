"""The boundary network: hand-built chains, the scikit-image label reference, every raise."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from skimage.measure import label as sk_label
from test_grains import (
    CUBIC,
    HEXAGONAL,
    IDENTITY,
    X30,
    Y20,
    Z45,
    make_map,
    region_map,
    voronoi_map,
)

from inclination.crystal.rotations import quat_from_axis_angle_deg
from inclination.errors import InputError, SettingError
from inclination.grains import segment_grains
from inclination.network import CHAIN_COLUMNS, BoundaryNetwork, boundary_network

Q4 = quat_from_axis_angle_deg([1, 1, 0], 50.0)


def network_of(regions, orientations, *, phases=(CUBIC,), low_angle_deg=None, **kw):
    omap = region_map(regions, orientations, **kw)
    gm = segment_grains(omap, list(phases), min_pixels=1)
    return omap, gm, boundary_network(omap, gm, list(phases), low_angle_deg=low_angle_deg)


def chain_points(net, c):
    return net.points_um[net.offsets[c] : net.offsets[c + 1]]


def assert_contiguous(net, step):
    """Consecutive midpoints of a chain are neighbouring edges: at most one step apart."""
    for c in range(net.n_chains):
        p = chain_points(net, c)
        if len(p) > 1:
            gaps = np.hypot(*np.diff(p, axis=0).T)
            assert gaps.max() <= step * (1 + 1e-9), (c, gaps.max())
            assert gaps.min() > 0


def test_bicrystal_gives_one_ordered_chain():
    # Hand case: a vertical boundary between columns 2 and 3 of a 5 × 6 map, step 2 µm.
    regions = np.zeros((5, 6), int)
    regions[:, 3:] = 1
    _, _, net = network_of(regions, [IDENTITY, Z45], step_um=2.0)
    assert isinstance(net, BoundaryNetwork) and net.kind == "grain"
    assert net.n_chains == 1 and net.offsets.tolist() == [0, 5]
    y = chain_points(net, 0)[:, 1]
    assert_allclose(chain_points(net, 0)[:, 0], np.full(5, 5.0), rtol=0, atol=1e-12)
    assert np.all(np.diff(y) == 2.0) or np.all(np.diff(y) == -2.0)
    assert net.grain_a.tolist() == [1] and net.grain_b.tolist() == [2]
    assert net.n_edges.tolist() == [5] and net.closed.tolist() == [False]
    assert net.is_phase_boundary.tolist() == [False]
    # 45° about [001] is its own disorientation in m-3m (below the 62.8° Mackenzie limit).
    assert_allclose(net.misorientation_deg, [45.0], rtol=0, atol=1e-3)
    assert_allclose(net.misorientation_spread_deg, [0.0], rtol=0, atol=1e-2)
    # Each edge's first point lies in grain_a, its second in grain_b, one column apart.
    assert_array_equal(np.diff(net.pixel_pairs, axis=1).ravel(), np.ones(5))
    for name in CHAIN_COLUMNS:
        assert getattr(net, name).shape == (1,)


def test_tricrystal_gives_three_chains_meeting_at_one_junction():
    # Hand case: a T junction at corner (row 4, col 4) of an 8 × 8 map.
    regions = np.zeros((8, 8), int)
    regions[4:, :4] = 1
    regions[4:, 4:] = 2
    _, _, net = network_of(regions, [IDENTITY, Z45, X30])
    assert net.n_chains == 3
    pairs = sorted(zip(net.grain_a.tolist(), net.grain_b.tolist(), strict=True))
    assert pairs == [(1, 2), (1, 3), (2, 3)]
    assert sorted(net.n_edges.tolist()) == [4, 4, 4]
    junction = np.array([3.5, 3.5])  # the corner shared by the three grains, in µm
    for c in range(3):
        p = chain_points(net, c)
        ends = np.array([p[0], p[-1]])
        # The edge that ends at the junction has its midpoint half a step from it.
        assert np.min(np.hypot(*(ends - junction).T)) == pytest.approx(0.5, abs=1e-12)
    assert_contiguous(net, 1.0)


def test_l_shaped_boundary_is_one_chain_that_bends():
    # Grain 2 fills the lower-right quadrant: its boundary with grain 1 runs from the right
    # map edge along row 3½ to column 3½, then down to the bottom edge: 4 + 4 edges.
    regions = np.zeros((8, 8), int)
    regions[4:, 4:] = 1
    _, _, net = network_of(regions, [IDENTITY, Z45])
    assert net.n_chains == 1 and net.n_edges.tolist() == [8]
    p = chain_points(net, 0)
    assert_contiguous(net, 1.0)
    ends = {tuple(p[0]), tuple(p[-1])}
    assert ends == {(7.0, 3.5), (3.5, 7.0)}


def test_island_grain_gives_one_closed_chain():
    regions = np.zeros((7, 7), int)
    regions[2:5, 2:4] = 1
    _, _, net = network_of(regions, [IDENTITY, Z45])
    assert net.n_chains == 1 and net.closed.tolist() == [True]
    assert net.n_edges.tolist() == [10]  # perimeter of a 3 × 2 block
    p = chain_points(net, 0)
    assert_contiguous(net, 1.0)
    assert np.hypot(*(p[0] - p[-1])) <= 1.0
    assert len({tuple(x) for x in p}) == 10


def test_one_grain_map_has_an_empty_network():
    _, _, net = network_of(np.zeros((4, 5), int), [Y20])
    assert net.n_chains == 0 and net.offsets.tolist() == [0]
    assert net.points_um.shape == (0, 2) and net.pixel_pairs.shape == (0, 2)
    for name in CHAIN_COLUMNS:
        assert getattr(net, name).shape == (0,)


def test_phase_boundary_is_marked_and_has_no_single_symmetry_misorientation():
    regions = np.zeros((3, 4), int)
    phase = np.ones((3, 4), int)
    phase[:, 2:] = 2
    _, _, net = network_of(regions, [IDENTITY], phase=phase, phases=(CUBIC, HEXAGONAL))
    assert net.n_chains == 1
    assert net.is_phase_boundary.tolist() == [True]
    assert net.phase_a.tolist() == [1] and net.phase_b.tolist() == [2]
    assert np.isnan(net.misorientation_deg[0])


def test_network_edges_equal_label_changes_of_the_skimage_label_image():
    # Reference: the label image of skimage.measure.label(connectivity=1); its label
    # changes between 4-neighbours are exactly the boundary edges.
    omap, region = voronoi_map((36, 44), 15, 11)
    gm = segment_grains(omap, [CUBIC], min_pixels=1)
    net = boundary_network(omap, gm, [CUBIC])
    ref = sk_label(region + 1, connectivity=1, background=0)
    h, w = ref.shape
    flat = ref.ravel()
    k = np.arange(h * w)
    expected = set()
    for shift, ok in ((1, (k % w) < w - 1), (w, k < (h - 1) * w)):
        kk = k[ok]
        change = flat[kk] != flat[kk + shift]
        expected |= set(zip(kk[change].tolist(), (kk[change] + shift).tolist(), strict=True))
    got = {tuple(sorted(p)) for p in net.pixel_pairs.tolist()}
    assert got == expected
    # Each chain joins one pair of grains, whose labels sit on either side of every edge.
    chain_of = np.repeat(np.arange(net.n_chains), np.diff(net.offsets))
    lab = gm.labels.ravel()
    assert_array_equal(lab[net.pixel_pairs[:, 0]], net.grain_a[chain_of])
    assert_array_equal(lab[net.pixel_pairs[:, 1]], net.grain_b[chain_of])
    assert np.all(net.grain_a < net.grain_b)
    assert_contiguous(net, 1.0)
    # Midpoints are the means of the two point positions.
    pos = omap.positions_sample_um().reshape(-1, 2)
    mid = (pos[net.pixel_pairs[:, 0]] + pos[net.pixel_pairs[:, 1]]) / 2
    assert_allclose(net.points_um, mid, rtol=0, atol=1e-12)


def _edge_corners(mid):
    """The two pixel corners (x, y) of the edge with midpoint ``mid`` (step 1 µm)."""
    x, y = mid
    if x % 1 == 0.5:  # between two points of a row: a vertical edge
        return [(x, y - 0.5), (x, y + 0.5)]
    return [(x - 0.5, y), (x + 0.5, y)]


def _is_junction(pad, corner):
    x, y = corner
    c, r = int(round(x + 1.5)), int(round(y + 1.5))  # padded index of the lower-right cell
    p00, p01, p10, p11 = pad[r - 1, c - 1], pad[r - 1, c], pad[r, c - 1], pad[r, c]
    checker = p00 == p11 and p01 == p10 and p00 != p01
    return len({p00, p01, p10, p11}) >= 3 or checker


def test_chains_end_only_at_junctions_or_map_edge():
    # An open chain leaves its end edge through a corner where three labels meet (0 for
    # outside the map), and every corner inside a chain is one where only two meet.
    omap, _ = voronoi_map((30, 30), 10, 5)
    gm = segment_grains(omap, [CUBIC], min_pixels=1)
    net = boundary_network(omap, gm, [CUBIC])
    pad = np.pad(gm.labels, 1)
    for c in range(net.n_chains):
        p = chain_points(net, c)
        corners = [set(_edge_corners(m)) for m in p]
        shared = [a & b for a, b in zip(corners[:-1], corners[1:], strict=True)]
        for link in shared:
            assert len(link) == 1 and not _is_junction(pad, next(iter(link)))
        if net.closed[c]:
            continue
        first_free = corners[0] - (shared[0] if shared else set())
        last_free = corners[-1] - (shared[-1] if shared else set())
        if len(p) == 1:
            first_free = last_free = corners[0]
        assert all(_is_junction(pad, v) for v in first_free | last_free) or len(p) == 1
        assert any(_is_junction(pad, v) for v in first_free)
        assert any(_is_junction(pad, v) for v in last_free)


def test_hexagonal_bicrystal_and_tricrystal():
    # A boundary between columns 2 and 3 on a hexagonal grid zigzags down the rows: one chain.
    regions = np.zeros((6, 6), int)
    regions[:, 3:] = 1
    omap, gm, net = network_of(regions, [IDENTITY, Z45], grid="hexagonal")
    assert gm.connectivity == 6
    assert net.n_chains == 1
    # Edges: one east pair per row (6) and the diagonals between rows (5 × 1 each, hand count).
    assert net.n_edges.tolist() == [6 + 5]
    p = chain_points(net, 0)
    gaps = np.hypot(*np.diff(p, axis=0).T)
    # Neighbouring sides of a hexagon of in-row step 1 have midpoints √3/2 apart... or 1/2.
    assert np.all(gaps <= 1.0 + 1e-9)
    regions = np.zeros((6, 6), int)
    regions[3:, :3] = 1
    regions[3:, 3:] = 2
    _, _, net = network_of(regions, [IDENTITY, Z45, X30], grid="hexagonal")
    assert net.n_chains == 3
    assert sorted(zip(net.grain_a.tolist(), net.grain_b.tolist(), strict=True)) == [
        (1, 2),
        (1, 3),
        (2, 3),
    ]


def test_low_angle_network_is_separate_from_grain_boundaries():
    # Two halves 3° apart form one grain at the 5° threshold; the 3° sub-boundary appears
    # only in the low-angle network (between 2° and the threshold).
    regions = np.zeros((6, 8), int)
    regions[:, 4:] = 1
    tilt = quat_from_axis_angle_deg([0, 0, 1], 3.0)
    _, gm, net = network_of(regions, [IDENTITY, tilt], low_angle_deg=2.0)
    assert gm.n_grains == 1
    assert net.n_chains == 0
    low = net.low_angle
    assert isinstance(low, BoundaryNetwork) and low.kind == "low_angle"
    assert low.n_chains == 1 and low.n_edges.tolist() == [6]
    assert low.grain_a.tolist() == [1] and low.grain_b.tolist() == [1]
    assert_allclose(low.misorientation_deg, [3.0], rtol=0, atol=2e-2)
    assert_contiguous(low, 1.0)
    _, _, without = network_of(regions, [IDENTITY, tilt])
    assert without.low_angle is None


def test_low_angle_chains_bend_and_close():
    # An L-shaped 3° sub-boundary and a closed 3° loop inside one grain.
    regions = np.zeros((12, 12), int)
    regions[6:, 6:] = 1
    regions[1:4, 1:3] = 1
    tilt = quat_from_axis_angle_deg([1, 0, 0], 3.0)
    _, gm, net = network_of(regions, [IDENTITY, tilt], low_angle_deg=2.0)
    assert gm.n_grains == 1
    low = net.low_angle
    assert low.n_chains == 2
    assert sorted(low.n_edges.tolist()) == [10, 12]
    assert sorted(low.closed.tolist()) == [False, True]
    assert_contiguous(low, 1.0)


def test_grain_pairs_split_at_a_four_grain_checkerboard_corner():
    regions = np.array([[0, 0, 1, 1], [0, 0, 1, 1], [2, 2, 3, 3], [2, 2, 3, 3]])
    regions = np.where(regions == 3, 0, regions)  # diagonal cells share one crystal
    _, gm, net = network_of(regions, [IDENTITY, Z45, X30, Q4])
    # Grains: top-left 1, top-right 2, bottom-left 3, bottom-right 4 (same orientation as 1).
    assert gm.n_grains == 4
    assert net.n_chains == 4 and np.all(net.n_edges == 2)


def test_bad_inputs_raise():
    regions = np.zeros((3, 4), int)
    regions[:, 2:] = 1
    omap = region_map(regions, [IDENTITY, Z45])
    gm = segment_grains(omap, [CUBIC], min_pixels=1)
    with pytest.raises(SettingError, match="Expected `low_angle_deg` to lie between 0"):
        boundary_network(omap, gm, [CUBIC], low_angle_deg=5.0)
    with pytest.raises(SettingError, match="Expected `low_angle_deg` to lie between 0"):
        boundary_network(omap, gm, [CUBIC], low_angle_deg=0.0)
    other = segment_grains(region_map(np.zeros((2, 2), int), [IDENTITY]), [CUBIC])
    with pytest.raises(InputError, match="Expected `grain_map.labels` to have the map's shape"):
        boundary_network(omap, other, [CUBIC])


def test_low_angle_network_on_a_hexagonal_grid():
    regions = np.zeros((6, 8), int)
    regions[:, 4:] = 1
    tilt = quat_from_axis_angle_deg([0, 0, 1], 3.0)
    _, gm, net = network_of(regions, [IDENTITY, tilt], low_angle_deg=2.0, grid="hexagonal")
    assert gm.n_grains == 1 and net.n_chains == 0
    low = net.low_angle
    # Same edges as the hexagonal bicrystal: 6 east pairs and 5 diagonals (hand count).
    assert low.n_chains == 1 and low.n_edges.tolist() == [11]
    assert_allclose(low.misorientation_deg, [3.0], rtol=0, atol=2e-2)


def test_hexagonal_network_on_voronoi_grains():
    # Independent reference: the label changes between hexagonal neighbours, enumerated
    # here from conventions §1 (odd rows shifted right: below an even row the neighbours
    # are columns j-1 and j, below an odd row j and j+1).
    square_map, region = voronoi_map((24, 30), 8, 13)
    quats = np.asarray(square_map.quat, dtype=np.float64)
    omap = make_map(quats, grid="hexagonal")
    gm = segment_grains(omap, [CUBIC], min_pixels=1)
    net = boundary_network(omap, gm, [CUBIC])
    h, w = region.shape
    lab = gm.labels
    expected = set()
    for i in range(h):
        for j in range(w):
            nbrs = [(i, j + 1)]
            if i + 1 < h:
                nbrs += [(i + 1, j - 1), (i + 1, j)] if i % 2 == 0 else [(i + 1, j), (i + 1, j + 1)]
            for r, c in nbrs:
                if 0 <= c < w and r < h and lab[i, j] != lab[r, c]:
                    expected.add(tuple(sorted((i * w + j, r * w + c))))
    got = {tuple(sorted(p)) for p in net.pixel_pairs.tolist()}
    assert got == expected
    pos = omap.positions_sample_um().reshape(-1, 2)
    mid = (pos[net.pixel_pairs[:, 0]] + pos[net.pixel_pairs[:, 1]]) / 2
    assert_allclose(net.points_um, mid, rtol=0, atol=1e-12)
    # Neighbouring sides of hexagonal cells (in-row step s) have midpoints s/2 apart.
    for c in range(net.n_chains):
        p = chain_points(net, c)
        if len(p) > 1:
            assert_allclose(np.hypot(*np.diff(p, axis=0).T), 0.5, rtol=0, atol=1e-9)
