"""Grain segmentation: hand-built cases, scikit-image and scipy references, every raise."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation
from skimage.measure import label as sk_label

from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply, random_quat
from inclination.crystal.symmetry import disorientation_angle_deg, proper_rotations
from inclination.errors import InputError, SettingError
from inclination.grains import GRAIN_COLUMNS, GrainMap, segment_grains
from inclination.links import misorientation_columns, neighbour_shifts, point_xy_um
from inclination.maps import OrientationMap

CUBIC = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90), ("{1 1 1}",))
HEXAGONAL = Phase(
    2,
    "titanium",
    "6/mmm",
    Lattice.from_parameters(2.95, 2.95, 4.68, 90, 90, 120, setting="x_parallel_a"),
    ("{0 0 0 1}",),
)

Z45 = quat_from_axis_angle_deg([0, 0, 1], 45.0)  # 45° about [001]: far above any threshold
X30 = quat_from_axis_angle_deg([1, 0, 0], 30.0)
Y20 = quat_from_axis_angle_deg([0, 1, 0], 20.0)
IDENTITY = np.array([1.0, 0.0, 0.0, 0.0])


def make_map(quat_hw4, *, phase=None, valid=None, grid="square", step_um=1.0):
    """An OrientationMap from an (H, W, 4) array of quaternions."""
    q = np.asarray(quat_hw4, dtype=np.float64)
    h, w = q.shape[:2]
    phase = np.ones((h, w), int) if phase is None else np.asarray(phase)
    if valid is not None:
        phase = np.where(valid, phase, 0)
    return OrientationMap(
        q,
        phase,
        valid=None if valid is None else np.asarray(valid, bool),
        grid=grid,
        step_x_um=step_um,
        step_y_um=step_um,
    )


def region_map(regions, orientations, **kw):
    """Map whose region r (an int image) carries orientations[r]."""
    regions = np.asarray(regions)
    return make_map(np.asarray(orientations)[regions], **kw)


# ----------------------------------------------------------------------------- hand cases


def test_bicrystal_two_grains_with_hand_areas_and_centroids():
    # Hand derivation: columns 0-2 one crystal, 3-5 another (45° about [001]).
    regions = np.zeros((4, 6), int)
    regions[:, 3:] = 1
    gm = segment_grains(region_map(regions, [IDENTITY, Z45], step_um=0.5), [CUBIC], min_pixels=1)
    assert isinstance(gm, GrainMap)
    assert_array_equal(gm.labels, regions + 1)
    assert gm.connectivity == 4 and gm.threshold_deg == 5.0
    assert set(gm.grains) == set(GRAIN_COLUMNS)
    assert_array_equal(gm.grains["grain_id"], [1, 2])
    assert_array_equal(gm.grains["area_px"], [12, 12])
    assert_allclose(gm.grains["area_um2"], [3.0, 3.0], rtol=0, atol=1e-12)
    # Centroid of columns 0..2 at 0.5 µm steps: x = 0.5, y = 0.75 (rows 0..3).
    assert_allclose(gm.grains["centroid_x_um"], [0.5, 2.0], rtol=0, atol=1e-12)
    assert_allclose(gm.grains["centroid_y_um"], [0.75, 0.75], rtol=0, atol=1e-12)
    assert_allclose(gm.grains["quat"], [IDENTITY, Z45], rtol=0, atol=1e-6)
    assert_allclose(gm.grains["spread_max_deg"], [0.0, 0.0], rtol=0, atol=0.05)
    assert gm.grains["touches_edge"].tolist() == [True, True]
    assert gm.cleanup == {
        "grains_dissolved": 0,
        "points_merged": 0,
        "points_unindexed": 0,
        "points_filled": 0,
    }


def test_symmetric_equivalents_join_one_grain():
    # The same crystal written as s ⊗ q for random cubic rotations s: one grain, and the
    # mean is the crystal itself (only the symmetry kernel can link these pairs).
    rng = np.random.default_rng(1)
    ops = proper_rotations("m-3m")
    base = quat_from_axis_angle_deg([1, 2, 3], 37.0)
    pick = rng.integers(0, 24, (5, 5))
    q = quat_multiply(ops[pick], base)
    gm = segment_grains(make_map(q), [CUBIC], min_pixels=1)
    assert gm.n_grains == 1
    assert_allclose(
        disorientation_angle_deg(gm.grains["quat"][0], base, "m-3m"), 0.0, rtol=0, atol=0.05
    )
    assert_allclose(gm.grains["spread_max_deg"], [0.0], rtol=0, atol=0.05)


def test_small_grain_dissolved_into_neighbour_or_unindexed():
    # A 3-point grain (below min_pixels=8) inside a 6 × 6 grain.
    regions = np.zeros((6, 6), int)
    regions[2, 2:5] = 1
    omap = region_map(regions, [IDENTITY, Z45])
    merged = segment_grains(omap, [CUBIC], min_pixels=8)
    assert merged.n_grains == 1
    assert_array_equal(merged.labels, np.ones((6, 6)))
    assert merged.cleanup["grains_dissolved"] == 1
    assert merged.cleanup["points_merged"] == 3
    assert merged.grains["area_px"].tolist() == [36]
    # Merged points take the label, not the statistics: the mean stays the host's.
    assert_allclose(merged.grains["quat"][0], IDENTITY, rtol=0, atol=1e-6)
    assert_allclose(merged.grains["spread_max_deg"], [0.0], rtol=0, atol=0.05)
    gone = segment_grains(omap, [CUBIC], min_pixels=8, small_grains="unindex")
    assert_array_equal(gone.labels, np.where(regions == 1, 0, 1))
    assert gone.cleanup["points_unindexed"] == 3 and gone.cleanup["points_merged"] == 0
    kept = segment_grains(omap, [CUBIC], min_pixels=3)
    assert kept.n_grains == 2


def test_small_grain_merges_into_the_neighbour_sharing_most_edges():
    # A column of 3 points (region 1) at the left edge of the right grain (region 2):
    # it shares 3 edges with the left grain and 3 + 2 = 5 with the right one (hand count).
    regions = np.zeros((6, 8), int)
    regions[:, 4:] = 2
    regions[1:4, 4] = 1
    gm = segment_grains(region_map(regions, [IDENTITY, X30, Z45]), [CUBIC], min_pixels=8)
    expected = np.where(regions == 0, 1, 2)
    assert_array_equal(gm.labels, expected)


def test_non_indexed_points_never_join_grains():
    # One orientation everywhere, split by a column of non-indexed points: two grains.
    valid = np.ones((4, 7), bool)
    valid[:, 3] = False
    gm = segment_grains(make_map(np.tile(IDENTITY, (4, 7, 1)), valid=valid), [CUBIC])
    assert gm.n_grains == 2
    assert_array_equal(gm.labels[:, 3], 0)
    assert set(np.unique(gm.labels[:, :3])) == {1} and set(np.unique(gm.labels[:, 4:])) == {2}


def test_fill_isolated_only_when_asked_and_counted():
    valid = np.ones((5, 5), bool)
    valid[2, 2] = False
    valid[0, 0] = False  # on the map edge: not surrounded, never filled
    omap = make_map(np.tile(IDENTITY, (5, 5, 1)), valid=valid)
    plain = segment_grains(omap, [CUBIC])
    assert plain.labels[2, 2] == 0 and plain.cleanup["points_filled"] == 0
    filled = segment_grains(omap, [CUBIC], fill_isolated=True)
    assert filled.labels[2, 2] == 1 and filled.labels[0, 0] == 0
    assert filled.cleanup["points_filled"] == 1
    assert filled.grains["area_px"].tolist() == [24]


def test_one_grain_and_grain_ids_in_row_order():
    gm = segment_grains(make_map(np.tile(Y20, (3, 3, 1))), [CUBIC], min_pixels=1)
    assert gm.n_grains == 1 and gm.labels.min() == 1
    regions = np.array([[2, 2, 0], [1, 1, 0]])
    gm = segment_grains(region_map(regions, [IDENTITY, X30, Z45]), [CUBIC], min_pixels=1)
    assert_array_equal(gm.labels, [[1, 1, 2], [3, 3, 2]])


def test_phases_never_join_and_table_carries_phase_ids():
    regions = np.zeros((3, 4), int)
    phase = np.ones((3, 4), int)
    phase[:, 2:] = 2
    gm = segment_grains(
        region_map(regions, [IDENTITY], phase=phase), [CUBIC, HEXAGONAL], min_pixels=1
    )
    assert gm.n_grains == 2
    assert gm.grains["phase"].tolist() == [1, 2]


def test_hexagonal_grid_uses_six_neighbours():
    # Odd rows shifted right (§1): point (0, 1) touches (1, 0) on a hexagonal grid (its
    # lower-left neighbour) but not on a square grid; (0, 0) and (1, 1) touch on neither.
    regions = np.array([[1, 0, 2], [0, 3, 4]])
    q = [IDENTITY, Z45, X30, Y20, quat_from_axis_angle_deg([1, 1, 0], 50.0)]
    hexa = segment_grains(region_map(regions, q, grid="hexagonal"), [CUBIC], min_pixels=1)
    square = segment_grains(region_map(regions, q), [CUBIC], min_pixels=1)
    assert hexa.connectivity == 6 and square.connectivity == 4
    assert hexa.labels[0, 1] == hexa.labels[1, 0]
    assert square.labels[0, 1] != square.labels[1, 0]
    assert hexa.n_grains == 5 and square.n_grains == 6
    # Hexagonal cell area s²·√3/2 and the half-step shift of odd rows in the centroid.
    assert_allclose(hexa.grains["area_um2"][0], np.sqrt(3) / 2, rtol=1e-12, atol=0)
    joined = hexa.labels[0, 1] - 1
    assert_allclose(
        [hexa.grains["centroid_x_um"][joined], hexa.grains["centroid_y_um"][joined]],
        [(1.0 + 0.5) / 2, np.sqrt(3) / 4],
        rtol=0,
        atol=1e-12,
    )


def test_neighbour_geometry_helpers():
    assert neighbour_shifts("square", 7) == ((1, -1), (7, -1))
    x, y = point_xy_um(make_map(np.tile(IDENTITY, (2, 3, 1)), grid="hexagonal"), [4])
    assert_allclose([x[0], y[0]], [1.5, np.sqrt(3) / 2], rtol=0, atol=1e-12)


def test_progress_reports_rising_fractions_up_to_one():
    seen = []
    segment_grains(make_map(np.tile(IDENTITY, (4, 4, 1))), [CUBIC], progress=seen.append)
    assert seen and seen[-1] == 1.0
    assert all(0.0 <= f <= 1.0 for f in seen) and np.all(np.diff(seen) >= 0)


# ----------------------------------------------------------------------------- references


def voronoi_map(shape, n_seeds, rng, *, min_angle_deg=15.0, noise_deg=0.0):
    """Voronoi grains, one orientation each (at least min_angle_deg from every other)."""
    rng = np.random.default_rng(rng)
    h, w = shape
    seeds = rng.random((n_seeds, 2)) * [w, h]
    yy, xx = np.mgrid[0:h, 0:w]
    _, region = cKDTree(seeds).query(np.column_stack([xx.ravel(), yy.ravel()]))
    region = region.reshape(h, w)
    quats = []
    while len(quats) < n_seeds:
        cand = random_quat(1, rng=rng)[0]
        if (
            not quats
            or disorientation_angle_deg(np.array(quats), cand, "m-3m").min() > min_angle_deg
        ):
            quats.append(cand)
    q = np.asarray(quats)[region]
    if noise_deg:
        axes = rng.normal(size=region.shape + (3,))
        q = quat_multiply(q, quat_from_axis_angle_deg(axes, rng.normal(0, noise_deg, region.shape)))
    return make_map(q), region


def test_labels_equal_skimage_label_on_well_separated_grains():
    # Reference: skimage.measure.label(connectivity=1) on the region image (4-connected
    # components, numbered in raster order like ours). Voronoi cells are convex, hence
    # connected, so every region is one grain.
    omap, region = voronoi_map((40, 50), 12, 3)
    gm = segment_grains(omap, [CUBIC], min_pixels=1)
    reference = sk_label(region + 1, connectivity=1, background=0)
    assert_array_equal(gm.labels, reference)


def test_mean_orientation_matches_scipy_rotation_mean_on_a_tight_cluster():
    # Reference: scipy's Rotation.mean (the eigenvector mean of Markley et al. 2007) of
    # the same points, before half of them are written as other cubic equivalents.
    rng = np.random.default_rng(7)
    base = quat_from_axis_angle_deg([3, -1, 2], 33.0)
    axes = rng.normal(size=(6, 6, 3))
    noise = quat_from_axis_angle_deg(axes, rng.normal(0, 1.0, (6, 6)))
    q = quat_multiply(base, noise)
    ops = proper_rotations("m-3m")
    shuffled = quat_multiply(ops[rng.integers(0, 24, (6, 6))], q)
    gm = segment_grains(make_map(shuffled), [CUBIC], min_pixels=1)
    assert gm.n_grains == 1
    ref = Rotation.from_quat(np.roll(q.reshape(-1, 4), -1, axis=1)).mean().as_quat()
    ref = np.roll(ref, 1)
    got = gm.grains["quat"][0]
    # Compared up to symmetry: the disorientation between the two means.
    assert_allclose(disorientation_angle_deg(got, ref, "m-3m"), 0.0, rtol=0, atol=1e-3)
    # Spread: disorientation of each point to the mean, by the symmetry module.
    # The map stores float32 quaternions (resolution ~1e-4° at these angles), hence atol.
    angles = disorientation_angle_deg(ref, q.reshape(-1, 4), "m-3m")
    assert_allclose(gm.grains["spread_mean_deg"][0], angles.mean(), rtol=0, atol=2e-3)
    assert_allclose(gm.grains["spread_max_deg"][0], angles.max(), rtol=0, atol=2e-3)


def test_threshold_decides_links_as_the_disorientation_does():
    # Two crystals 4° apart join at 5°, split at 3° (disorientation by the symmetry module).
    regions = np.zeros((3, 6), int)
    regions[:, 3:] = 1
    tilt = quat_from_axis_angle_deg([1, 1, 1], 4.0)
    omap = region_map(regions, [IDENTITY, tilt])
    assert segment_grains(omap, [CUBIC], min_pixels=1).n_grains == 1
    assert segment_grains(omap, [CUBIC], threshold_deg=3.0, min_pixels=1).n_grains == 2


# ----------------------------------------------------------------------------- raises


@pytest.mark.parametrize("threshold", [0.0, -1.0, 62.9, 90.0, float("nan")])
def test_threshold_out_of_range_raises(threshold):
    omap = make_map(np.tile(IDENTITY, (2, 2, 1)))
    with pytest.raises(SettingError, match="Expected `threshold_deg`"):
        segment_grains(omap, [CUBIC], threshold_deg=threshold)


def test_threshold_of_wrong_type_raises():
    with pytest.raises(TypeError, match="Expected `threshold_deg` to be a number"):
        segment_grains(make_map(np.tile(IDENTITY, (2, 2, 1))), [CUBIC], threshold_deg="5")


def test_map_with_no_valid_point_raises():
    omap = make_map(np.tile(IDENTITY, (2, 2, 1)), valid=np.zeros((2, 2), bool))
    with pytest.raises(InputError, match="at least one valid indexed point"):
        segment_grains(omap, [CUBIC])


def test_undeclared_phase_raises():
    omap = make_map(np.tile(IDENTITY, (2, 2, 1)), phase=np.full((2, 2), 3))
    with pytest.raises(
        InputError, match=r"declared in `phases`.*got id 3 at point \(row 0, col 0\)"
    ):
        segment_grains(omap, [CUBIC])


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"min_pixels": 0}, SettingError, "Expected `min_pixels` to be an integer >= 1"),
        ({"min_pixels": 2.5}, TypeError, "Expected `min_pixels` to be an integer"),
        ({"small_grains": "drop"}, SettingError, r"Expected `small_grains` to be one of \('merge'"),
        ({"progress": 3}, TypeError, "Expected `progress` to be callable"),
    ],
)
def test_bad_options_raise(kwargs, error, match):
    with pytest.raises(error, match=match):
        segment_grains(make_map(np.tile(IDENTITY, (2, 2, 1))), [CUBIC], **kwargs)


def test_bad_phases_raise():
    omap = make_map(np.tile(IDENTITY, (2, 2, 1)))
    with pytest.raises(SettingError, match="Expected `phases` to hold at least one Phase"):
        segment_grains(omap, [])
    with pytest.raises(TypeError, match=r"Expected `phases\[0\]` to be a Phase"):
        segment_grains(omap, ["copper"])
    with pytest.raises(TypeError, match="Expected `phases` to be a sequence or mapping"):
        segment_grains(omap, 5)
    with pytest.raises(SettingError, match="Expected the phase ids in `phases` to be unique"):
        segment_grains(omap, [CUBIC, CUBIC])


def test_bad_map_raises():
    with pytest.raises(TypeError, match="Expected `omap` to be an OrientationMap"):
        segment_grains(np.zeros((4, 2, 2)), [CUBIC])


def test_block_boundaries_change_nothing(monkeypatch):
    # The kernels work in blocks of BLOCK points (16·BLOCK for runs); with tiny blocks every
    # run, link and statistic crosses many block ends and must give the same result.
    from inclination import grains

    omap, region = voronoi_map((30, 47), 9, 21, noise_deg=0.3)
    whole = segment_grains(omap, [CUBIC], min_pixels=1)
    monkeypatch.setattr(grains, "BLOCK", 37)
    pieces = segment_grains(omap, [CUBIC], min_pixels=1)
    assert_array_equal(pieces.labels, whole.labels)
    assert_array_equal(pieces.labels, sk_label(region + 1, connectivity=1, background=0))
    for name in GRAIN_COLUMNS:
        assert_allclose(pieces.grains[name], whole.grains[name], rtol=1e-6, atol=1e-6)


def test_small_grain_with_no_neighbour_of_its_phase_is_unindexed_when_merging():
    # Merging never joins phases: a 2-point grain of phase 2 inside phase 1 has nowhere to go.
    regions = np.zeros((5, 5), int)
    phase = np.ones((5, 5), int)
    phase[2, 2:4] = 2
    gm = segment_grains(
        region_map(regions, [IDENTITY], phase=phase), [CUBIC, HEXAGONAL], min_pixels=3
    )
    assert gm.n_grains == 1
    assert gm.labels[2, 2] == 0 and gm.labels[2, 3] == 0
    assert gm.cleanup["grains_dissolved"] == 1 and gm.cleanup["points_unindexed"] == 2


def test_touches_edge_is_false_for_an_inner_grain():
    regions = np.zeros((6, 6), int)
    regions[2:4, 2:4] = 1
    gm = segment_grains(region_map(regions, [IDENTITY, Z45]), [CUBIC], min_pixels=1)
    assert gm.grains["touches_edge"].tolist() == [True, False]
    assert_allclose(gm.grains["centroid_x_um"][1], 2.5, rtol=0, atol=1e-12)


def test_every_grain_dissolved_gives_empty_table_not_error():
    gm = segment_grains(make_map(np.tile(IDENTITY, (2, 2, 1))), [CUBIC], min_pixels=8)
    assert gm.n_grains == 0 and not gm.labels.any()
    assert gm.cleanup["points_unindexed"] == 4
    for name in GRAIN_COLUMNS:
        assert len(gm.grains[name]) == 0
    assert gm.grains["quat"].shape == (0, 4)


def test_misorientation_rows_match_scipy_matrices():
    # Reference: scipy's Rotation matrices. Passive orientations (§3): the misorientation
    # from a to b is g_b · g_aᵀ; scipy takes scalar-last quaternions of the same matrices.
    rng = np.random.default_rng(4)
    qa, qb = random_quat(5, rng=rng), random_quat(5, rng=rng)
    dq = misorientation_columns(qa.T.copy(), qb.T.copy())
    ga = Rotation.from_quat(np.roll(qa, -1, axis=1)).as_matrix()
    gb = Rotation.from_quat(np.roll(qb, -1, axis=1)).as_matrix()
    expected = gb @ np.transpose(ga, (0, 2, 1))
    got = Rotation.from_quat(np.roll(dq, -1, axis=1)).as_matrix()
    assert_allclose(got, expected, rtol=0, atol=1e-12)


def test_quaternion_sign_does_not_matter():
    # q and -q are one orientation: flipping the sign of some points changes nothing.
    rng = np.random.default_rng(9)
    base = quat_from_axis_angle_deg([2, 1, -1], 71.0)
    axes = rng.normal(size=(5, 6, 3))
    q = quat_multiply(base, quat_from_axis_angle_deg(axes, rng.normal(0, 0.5, (5, 6))))
    flipped = np.where(rng.random((5, 6, 1)) < 0.1, -q, q)
    a = segment_grains(make_map(q), [CUBIC], min_pixels=1)
    b = segment_grains(make_map(flipped), [CUBIC], min_pixels=1)
    assert a.n_grains == b.n_grains == 1
    assert_allclose(
        disorientation_angle_deg(a.grains["quat"][0], b.grains["quat"][0], "m-3m"),
        0.0,
        rtol=0,
        atol=1e-3,
    )
    assert_allclose(b.grains["spread_max_deg"], a.grains["spread_max_deg"], rtol=0, atol=1e-3)
