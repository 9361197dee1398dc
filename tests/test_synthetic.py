"""The synthetic microstructure against geometry, crystallography and scipy (the oracle's oracle).

Frames and signs: conventions §1–§8. References are named beside each check.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from inclination.crystal import symmetry
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import (
    quat_apply,
    quat_as_matrix,
    quat_from_euler_deg,
    quat_inverse,
    quat_multiply,
)
from inclination.errors import InputError, SettingError
from inclination.planes.geometry import surface_geometry
from inclination.synthetic import (
    SampledMap,
    TwinSpec,
    boundary_normals_sample,
    cross_section_crossings,
    grid_positions_um,
    ground_truth,
    make_microstructure,
    recorded_in_frame,
    region_at,
    sample_map,
    simulate_cross_section,
    twin_planes_crystal,
)

FCC = Phase.from_dict(
    {
        "id": 1,
        "name": "fcc",
        "laue": "m-3m",
        "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
    }
)
# An invented hexagonal alloy: a = 3.10 Å, c = 5.0 Å (c/a = 1.613, invented for the tests).
HEX = Phase.from_dict(
    {
        "id": 2,
        "name": "hexagonal alloy",
        "laue": "6/mmm",
        "lattice": {"a": 3.10, "b": 3.10, "c": 5.0, "alpha": 90, "beta": 90, "gamma": 120},
        "setting": "x_parallel_a",
        "families": ["{10-12}"],
    }
)

TETRAGONAL = Phase.from_dict(
    {
        "id": 1,
        "name": "tetragonal",
        "laue": "4/mmm",
        "lattice": {"a": 3.0, "b": 3.0, "c": 4.0, "alpha": 90, "beta": 90, "gamma": 90},
    }
)


def oracle_surface_geometry(normals_sample):
    """The oracle's independent copy of the §5 formulas, written out plainly, row by row.

    Kept with the tests on purpose: the package computes trace, dip and dip direction in
    one function only (``inclination.planes.geometry.surface_geometry``), and this copy,
    taken straight from the text of docs/conventions.md §5 without the package's code,
    is what that function is checked against. Edge rules of §5: no trace when
    |n_z| > cos 1°; no dip direction for a vertical plane (|n_z| below 1e-9, the
    round-off of a rotated vertical normal) or a horizontal one; trace angles in
    [0, 180), dip azimuths in [0, 360), both from +X toward +Y.
    """
    rows = np.atleast_2d(np.asarray(normals_sample, dtype=float))
    out = {"trace_angle_deg": [], "dip_deg": [], "dip_azimuth_deg": []}
    for nx, ny, nz in rows:
        length = math.sqrt(nx * nx + ny * ny + nz * nz)
        nx, ny, nz = nx / length, ny / length, nz / length
        # Trace direction t = Z_S × n = (-n_y, n_x, 0).
        if abs(nz) > math.cos(math.radians(1.0)):
            trace = math.nan
        else:
            trace = math.degrees(math.atan2(nx, -ny)) % 180.0
            trace = 0.0 if trace >= 180.0 else trace
        dip = math.degrees(math.acos(min(abs(nz), 1.0)))
        horizontal_length = math.hypot(nx, ny)
        if abs(nz) < 1e-9 or horizontal_length < 1e-9:
            azimuth = math.nan
        else:
            # d = -sign(n_z) (n_x, n_y) / |(n_x, n_y)|.
            sign = -1.0 if nz > 0 else 1.0
            azimuth = math.degrees(math.atan2(sign * ny, sign * nx)) % 360.0
            azimuth = 0.0 if azimuth >= 360.0 else azimuth
        out["trace_angle_deg"].append(trace)
        out["dip_deg"].append(dip)
        out["dip_azimuth_deg"].append(azimuth)
    return {k: np.array(v, dtype=float) for k, v in out.items()}


@pytest.fixture(scope="module")
def micro():
    return make_microstructure(box_um=(60, 50, 30), n_grains=25, rng=7, phases=[FCC], twins=4)


@pytest.fixture(scope="module")
def surface(micro):
    return sample_map(micro, step_um=0.25, rng=1, noise_deg=0.0)


def _disorientation_angle_deg(qa, qb, group):
    """Smallest rotation angle of qb ⊗ qa⁻¹ ⊗ s over the proper rotations s (scipy group)."""
    dq = Rotation.from_matrix(quat_as_matrix(qb) @ quat_as_matrix(qa).T)
    return float(np.rad2deg(np.min((dq * group).magnitude())))


# --------------------------------------------------------------------------- Voronoi


def test_voronoi_faces_lie_on_the_bisector_planes(micro, surface):
    # A Voronoi face between seeds a and b is the perpendicular bisector plane
    # {x : |x - s_a| = |x - s_b|} (Voronoi diagram definition, e.g. Okabe et al.,
    # Spatial Tessellations). f = |x - s_a| - |x - s_b| has |grad f| <= 2, so at the
    # midpoint of two neighbouring points on either side of the face |f| <= step.
    ids = surface.grain_id
    parent = micro.region_parent[ids - 1]
    x, y = surface.x_um, surface.y_um
    for axis in (0, 1):
        pa = parent[:, :-1] if axis == 0 else parent[:-1, :]
        pb = parent[:, 1:] if axis == 0 else parent[1:, :]
        xa, xb = (x[:, :-1], x[:, 1:]) if axis == 0 else (x[:-1, :], x[1:, :])
        ya, yb = (y[:, :-1], y[:, 1:]) if axis == 0 else (y[:-1, :], y[1:, :])
        change = pa != pb
        assert change.sum() > 100
        mid = np.stack([(xa + xb)[change] / 2, (ya + yb)[change] / 2, np.zeros(change.sum())], 1)
        da = np.linalg.norm(mid - micro.seeds_um[pa[change] - 1], axis=1)
        db = np.linalg.norm(mid - micro.seeds_um[pb[change] - 1], axis=1)
        assert np.max(np.abs(da - db)) <= surface.step_um + 1e-12


def test_every_pair_seen_in_a_map_shares_a_face_in_the_box(micro, surface):
    # grain_pairs comes from scipy's Voronoi (Qhull) on the seeds mirrored in the box faces;
    # every pair of grains that meets on the surface map must be one of them.
    parent = micro.region_parent[surface.grain_id - 1]
    seen = set()
    for pa, pb in ((parent[:, :-1], parent[:, 1:]), (parent[:-1, :], parent[1:, :])):
        change = pa != pb
        seen |= {tuple(sorted(p)) for p in zip(pa[change], pb[change], strict=True)}
    faces = {tuple(p) for p in micro.grain_pairs.tolist()}
    assert seen and seen <= faces


def test_boundary_normal_is_the_seed_to_seed_direction(micro):
    # Hand derivation: |x - s_a|² = |x - s_b|² is linear in x with normal s_b - s_a.
    a, b = micro.grain_pairs[:, 0], micro.grain_pairs[:, 1]
    n = boundary_normals_sample(micro, a, b)
    d = micro.seeds_um[b - 1] - micro.seeds_um[a - 1]
    assert_allclose(n, d / np.linalg.norm(d, axis=1, keepdims=True), rtol=0, atol=1e-12)
    assert np.all(np.isnan(boundary_normals_sample(micro, [3], [3])))


# --------------------------------------------------------------------------- twins


def test_fcc_twin_is_sigma3_60_deg_about_111(micro):
    # Σ3 = 60° about <111> (Grimmer, Bollmann & Warrington 1974, Acta Cryst. A30, 197);
    # the 24 proper rotations of m-3m are scipy's Rotation.create_group("O").
    group = Rotation.create_group("O")
    assert len(micro.lamellae) == 4
    for lam in micro.lamellae:
        q_parent = micro.region_quat[lam.parent - 1]
        angle = _disorientation_angle_deg(q_parent, np.array(lam.quat), group)
        assert_allclose(angle, 60.0, rtol=0, atol=1e-6)
        # The misorientation (crystal frame) is the half turn about the plane normal n_C.
        dq = quat_as_matrix(np.array(lam.quat)) @ quat_as_matrix(q_parent).T
        rotvec = Rotation.from_matrix(dq).as_rotvec()
        assert_allclose(np.abs(rotvec @ lam.normal_crystal), np.pi, rtol=0, atol=1e-9)


def test_fcc_twin_disorientation_with_the_symmetry_module(micro):
    # Σ3 definition: Grimmer, Bollmann & Warrington (1974): 60.000° about <111>.
    for lam in micro.lamellae:
        q_parent = micro.region_quat[lam.parent - 1]
        result = symmetry.disorientation(q_parent, np.array(lam.quat), "m-3m")
        assert_allclose(result.angle_deg, 60.0, rtol=0, atol=1e-6)
        axis = np.abs(np.asarray(result.axis_crystal, dtype=float))
        assert_allclose(axis, np.full(3, 3**-0.5), rtol=0, atol=1e-9)


def test_twin_plane_is_the_same_plane_in_both_crystals(micro):
    # A coherent twin plane: n_S = gᵀ n_C of the parent (§5) maps to ±n_C in the twin too.
    for lam in micro.lamellae:
        n_in_twin = quat_apply(np.array(lam.quat), np.array(lam.normal_sample))
        assert_allclose(np.abs(n_in_twin @ np.array(lam.normal_crystal)), 1.0, rtol=0, atol=1e-12)
        q_parent = micro.region_quat[lam.parent - 1]
        n_back = quat_apply(quat_inverse(q_parent), np.array(lam.normal_crystal))
        assert_allclose(n_back, lam.normal_sample, rtol=0, atol=1e-12)


def test_hexagonal_10_12_twin_angle():
    # The {10-12} twin (180° about the plane normal) is equivalent to a rotation of
    # 2·arctan(c / (√3 a)) about <11-20> (hand derivation: two half turns about axes at
    # angle φ, the normal and c, compose to 2φ; tan φ = c/(√3 a) from the hexagonal
    # reciprocal metric). For c/a = 1.624 this gives 86.3° (Yoo 1981, Metall. Trans. A 12,
    # 409, value from memory). Proper rotations of 6/mmm: scipy's create_group("D6").
    micro = make_microstructure(
        box_um=(40, 40, 20),
        n_grains=8,
        rng=3,
        phases=[HEX],
        twins=[TwinSpec(grain=g, plane=g - 1, thickness_um=2.0) for g in range(1, 7)],
    )
    c_over_a = 5.0 / 3.10
    expected = 2 * np.rad2deg(np.arctan(c_over_a / np.sqrt(3)))
    group = Rotation.create_group("D6", axis="Z")
    for lam in micro.lamellae:
        angle = _disorientation_angle_deg(
            micro.region_quat[lam.parent - 1], np.array(lam.quat), group
        )
        assert_allclose(angle, expected, rtol=0, atol=1e-6)
        result = symmetry.disorientation(
            micro.region_quat[lam.parent - 1], np.array(lam.quat), "6/mmm"
        )
        assert_allclose(result.angle_deg, expected, rtol=0, atol=1e-6)
        # The axis is perpendicular to c: a <11-20>-type direction (a-axis family).
        assert_allclose(np.asarray(result.axis_crystal)[..., 2], 0.0, rtol=0, atol=1e-9)
    assert_allclose(2 * np.rad2deg(np.arctan(1.624 / np.sqrt(3))), 86.3, rtol=0, atol=0.05)
    assert [lam.indices for lam in micro.lamellae][:2] == ["(1 0 -1 2)", "(0 1 -1 2)"]


def test_lamella_points_lie_in_the_slab(micro, surface):
    for lam in micro.lamellae:
        inside = surface.grain_id == lam.region
        assert inside.sum() > 20  # the random lamellae are placed to show on the surface
        d = (
            surface.x_um[inside] * lam.normal_sample[0]
            + surface.y_um[inside] * lam.normal_sample[1]
        )
        assert np.all((d >= lam.lower_um) & (d <= lam.upper_um))
        parent = micro.region_parent[surface.grain_id - 1] == lam.parent
        outside = parent & ~inside
        d_out = (
            surface.x_um[outside] * lam.normal_sample[0]
            + surface.y_um[outside] * lam.normal_sample[1]
        )
        assert not np.any((d_out >= lam.lower_um) & (d_out <= lam.upper_um))


def test_twin_planes_of_the_phases():
    # {111}: the four body diagonals (cubic cell, a* ∥ a); {10-12} normals of the invented
    # hexagonal alloy make tan φ = c / (√3 a) with [0001] (hexagonal reciprocal metric).
    normals, labels = twin_planes_crystal(FCC)
    assert_allclose(np.abs(normals), np.full((4, 3), 3**-0.5), rtol=0, atol=1e-15)
    assert labels == ("(1 1 1)", "(-1 1 1)", "(1 -1 1)", "(1 1 -1)")
    normals, labels = twin_planes_crystal(HEX)
    phi = np.arctan2(np.hypot(normals[:, 0], normals[:, 1]), normals[:, 2])
    assert_allclose(np.tan(phi), 5.0 / 3.10 / np.sqrt(3), rtol=1e-12, atol=0)
    assert len(set(labels)) == 6


# --------------------------------------------------------------------------- maps


def test_hexagonal_grid_positions():
    # §1: rows s·√3/2 apart, odd rows shifted by s/2; every interior point then has six
    # nearest neighbours at distance s (the triangular lattice).
    x, y = grid_positions_um((6, 7), 0.5, grid="hexagonal")
    assert_allclose(y[:, 0], np.arange(6) * 0.5 * np.sqrt(3) / 2, rtol=0, atol=1e-12)
    assert_allclose(x[1] - x[0], 0.25, rtol=0, atol=1e-12)
    assert_allclose(x[2], x[0], rtol=0, atol=1e-12)
    pts = np.stack([x.ravel(), y.ravel()], 1)
    dist, _ = cKDTree(pts).query(pts[[3 * 7 + 3]], k=7)
    assert_allclose(dist[0, 1:], 0.5, rtol=0, atol=1e-12)
    xs, ys = grid_positions_um((2, 3), 2.0)
    assert xs.tolist() == [[0, 2, 4], [0, 2, 4]] and ys.tolist() == [[0, 0, 0], [2, 2, 2]]


def test_hexagonal_map_regions_match_point_lookup(micro):
    m = sample_map(micro, step_um=1.0, rng=0, grid="hexagonal", noise_deg=0.0)
    pts = np.stack([m.x_um.ravel(), m.y_um.ravel(), np.zeros(m.x_um.size)], 1)
    assert_array_equal(m.grain_id.ravel(), region_at(micro, pts))
    assert m.y_um.max() <= micro.box_um[1] and m.x_um.max() <= micro.box_um[0]


def test_map_orientations_are_the_regions_orientations(micro, surface):
    # With no noise, every point carries its region's orientation, and the Euler angles
    # (Bunge, §3) convert back to the same rotation (compared as matrices, sign-free).
    q_true = micro.region_quat[surface.grain_id - 1]
    assert_allclose(np.abs(np.sum(surface.quat * q_true, axis=-1)), 1.0, rtol=0, atol=1e-12)
    back = quat_from_euler_deg(surface.euler_deg[::37, ::41].reshape(-1, 3))
    assert_allclose(
        quat_as_matrix(back),
        quat_as_matrix(q_true[::37, ::41].reshape(-1, 4)),
        rtol=0,
        atol=1e-9,
    )


def test_noise_nonindexed_and_misindexed_points(micro):
    m = sample_map(
        micro, step_um=0.5, rng=4, noise_deg=0.5, nonindexed_fraction=0.01, misindexed_clusters=6
    )
    assert int((m.phase == 0).sum()) == round(0.01 * m.phase.size)
    assert np.all(np.isnan(m.euler_deg[m.phase == 0]))
    assert np.all(np.isfinite(m.euler_deg[m.phase != 0]))
    clean = (m.phase != 0) & ~m.misindexed
    q_true = micro.region_quat[m.grain_id - 1][clean]
    dot = np.clip(np.abs(np.sum(m.quat[clean] * q_true, axis=-1)), 0, 1)
    angle = np.rad2deg(2 * np.arccos(dot))
    # RMS angle of the added rotation is noise_deg by construction (3 normal components of
    # SD noise/√3); the sample RMS over ~10⁴ points is within a few percent.
    assert_allclose(np.sqrt(np.mean(angle**2)), 0.5, rtol=0.03, atol=0)
    assert 6 <= m.misindexed.sum() <= 6 * 13 + 1
    wrong = m.misindexed & (m.phase != 0)
    q_wrong = micro.region_quat[m.grain_id - 1][wrong]
    wrong_angle = np.rad2deg(
        2 * np.arccos(np.clip(np.abs(np.sum(m.quat[wrong] * q_wrong, -1)), 0, 1))
    )
    assert np.median(wrong_angle) > 5.0


def test_same_seed_same_sample_and_other_seed_differs():
    def build(seed):
        micro = make_microstructure(
            box_um=(40, 30, 20), n_grains=15, rng=seed, phases=[FCC], twins=2
        )
        m = sample_map(
            micro, step_um=0.5, rng=seed, nonindexed_fraction=0.02, misindexed_clusters=2
        )
        xs = simulate_cross_section(
            micro,
            line_um=((2, 15), (38, 15)),
            viewer_at_um=(20, 20),
            imaging_tilt_deg=52,
            max_depth_um=2,
            rng=seed,
        )
        return micro, m, xs

    a, b, c = build(11), build(11), build(12)
    assert_array_equal(a[0].seeds_um, b[0].seeds_um)
    assert_array_equal(a[1].euler_deg, b[1].euler_deg)
    assert_array_equal(a[1].phase, b[1].phase)
    assert a[2] == b[2]
    assert not np.array_equal(a[0].seeds_um, c[0].seeds_um)


def test_serial_section_moves_each_trace_along_the_dip_direction(micro):
    # §5: removing a layer h moves the trace by h / tan δ along d. A point on a face at the
    # surface, moved so, must again be equidistant from the two seeds at depth h.
    a, b = micro.grain_pairs[:, 0], micro.grain_pairs[:, 1]
    n = boundary_normals_sample(micro, a, b)
    geo = oracle_surface_geometry(n)
    keep = np.isfinite(geo["dip_azimuth_deg"]) & (geo["dip_deg"] > 10)
    sa, sb = micro.seeds_um[a - 1][keep], micro.seeds_um[b - 1][keep]
    nk = n[keep]
    mid = (sa + sb) / 2
    # A surface point on the plane: the foot of the perpendicular from the midpoint, in z = 0.
    horizontal = nk.copy()
    horizontal[:, 2] = 0
    h_unit = horizontal / np.linalg.norm(horizontal, axis=1, keepdims=True)
    start = mid.copy()
    start[:, 2] = 0
    start += (np.sum(nk * (mid - start), 1) / np.sum(nk * h_unit, 1))[:, None] * h_unit
    h = 5.0
    az = np.deg2rad(geo["dip_azimuth_deg"][keep])
    shift = h / np.tan(np.deg2rad(geo["dip_deg"][keep]))
    moved = start + np.stack([shift * np.cos(az), shift * np.sin(az), np.full(len(az), h)], 1)
    for p in (start, moved):
        assert_allclose(
            np.linalg.norm(p - sa, axis=1), np.linalg.norm(p - sb, axis=1), rtol=0, atol=1e-9
        )


def test_offset_map_is_a_shifted_window(micro):
    # offset_um: the map's point (0, 0) sits at (dx, dy), so grain ids are the unshifted
    # map's, shifted by the offset in whole steps.
    full = sample_map(micro, step_um=0.5, rng=0, noise_deg=0.0, depth_um=5.0)
    moved = sample_map(
        micro, step_um=0.5, rng=0, noise_deg=0.0, depth_um=5.0, shape=(40, 60), offset_um=(3.0, 2.0)
    )
    assert_array_equal(moved.grain_id, full.grain_id[4:44, 6:66])
    assert moved.offset_um == (3.0, 2.0) and moved.depth_um == 5.0


def test_oracle_geometry_hand_worked():
    # §5 by hand: n = (1, 0, 1)/√2 → t = Z × n ∥ (0, 1, 0): trace 90°; δ = 45°;
    # d = -sign(n_z)(n_x, n_y) = (-1, 0): azimuth 180°. n = (0, -1, -1): same plane family
    # sign-flipped gives d = (0, -1): 270°. A vertical plane has no dip direction; a plane
    # within 1° of the surface has no trace.
    g = oracle_surface_geometry([[1, 0, 1], [0, -1, -1], [1, 1, 0], [0.001, 0, 1]])
    assert_allclose(g["trace_angle_deg"][:3], [90, 0, 135], rtol=0, atol=1e-12)
    assert np.isnan(g["trace_angle_deg"][3])
    assert_allclose(g["dip_deg"][:3], [45, 45, 90], rtol=0, atol=1e-12)
    assert_allclose(g["dip_azimuth_deg"][[0, 1, 3]], [180, 270, 180], rtol=0, atol=1e-9)
    assert np.isnan(g["dip_azimuth_deg"][2])
    flipped = oracle_surface_geometry([[-1, 0, -1]])
    assert_allclose(flipped["dip_azimuth_deg"], [180], rtol=0, atol=1e-12)


def _edge_case_normals(gen):
    """Normals at every edge of §5: vertical, horizontal, near 1°, n_z < 0, near the wraps."""
    tilt = np.deg2rad([0.0, 0.5, 1.0 - 1e-6, 1.0 + 1e-6, 1.5, 89.9, 90.0 - 1e-7, 90.0])
    phi = gen.uniform(0.0, 2.0 * np.pi, len(tilt))
    cones = np.stack([np.sin(tilt) * np.cos(phi), np.sin(tilt) * np.sin(phi), np.cos(tilt)], 1)
    fixed = np.array(
        [
            [0.0, 0.0, 1.0],  # horizontal plane: no trace, no dip direction
            [0.0, 0.0, -1.0],
            [1.0, 0.0, 0.0],  # vertical planes: no dip direction
            [0.0, -1.0, 0.0],
            [0.6, 0.8, 0.0],
            [1.0, 0.0, 1e-12],  # vertical to round-off
            [1e-13, 1.0, 1.0],  # t = (-1, 1e-13): trace 180° - 6e-12°, kept below 180
            [1e-13, -1.0, 1.0],  # t = (1, 1e-13): trace just above 0°
            [-1.0, -1e-13, 1.0],  # d = (1, 1e-13): dip azimuth just above 0°
            [-1.0, 1e-13, 1.0],  # d = (1, -1e-13): dip azimuth 360° - 6e-12°, kept below 360
            [1.0, -1e-13, -1.0],  # the same plane, normal pointing out of the material
            [3.0, -4.0, -12.0],  # n_z < 0, any length
        ]
    )
    return np.concatenate([cones, -cones, fixed])


def _circular_diff(a, b, period):
    return (np.asarray(a) - np.asarray(b) + period / 2) % period - period / 2


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_surface_geometry_agrees_with_the_oracle(seed):
    # The package's one §5 function against the oracle's own copy of the §5 formulas
    # (docs/conventions.md §5): random normals of either sign and any length, and every
    # edge case; NaN exactly where the oracle says the quantity is undefined.
    gen = np.random.default_rng(seed)
    normals = np.concatenate([gen.normal(size=(500, 3)) * gen.uniform(0.1, 10, (500, 1))])
    normals = np.concatenate([normals, _edge_case_normals(gen)])
    got = surface_geometry(normals)
    want = oracle_surface_geometry(normals)
    for name, period in (("trace_angle_deg", 180.0), ("dip_deg", None), ("dip_azimuth_deg", 360.0)):
        g, w = getattr(got, name), want[name]
        assert_array_equal(np.isnan(g), np.isnan(w), err_msg=name)
        ok = ~np.isnan(w)
        diff = g[ok] - w[ok] if period is None else _circular_diff(g[ok], w[ok], period)
        assert_allclose(diff, 0.0, rtol=0, atol=1e-9, err_msg=name)
        if period is not None:
            assert np.all((g[ok] >= 0) & (g[ok] < period)), name
    assert_array_equal(got.has_trace, ~np.isnan(want["trace_angle_deg"]))
    # The unit normal, into the material (n_z >= 0), is the input up to sign and length.
    unit = normals / np.linalg.norm(normals, axis=1, keepdims=True)
    assert np.all(got.normal_sample[:, 2] >= 0)
    assert_allclose(np.abs(np.sum(got.normal_sample * unit, 1)), 1.0, rtol=0, atol=1e-12)


def test_surface_geometry_edge_rules_by_hand():
    # §5: no trace within 1° of the surface (|n_z| > cos 1°), no dip direction for a
    # vertical or a horizontal plane; n and -n are the same plane.
    just_in = [np.sin(np.deg2rad(1.0 + 1e-6)), 0.0, np.cos(np.deg2rad(1.0 + 1e-6))]
    just_out = [np.sin(np.deg2rad(1.0 - 1e-6)), 0.0, np.cos(np.deg2rad(1.0 - 1e-6))]
    g = surface_geometry([just_in, just_out, [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    assert g.has_trace.tolist() == [True, False, True, False]
    assert np.isnan(g.dip_azimuth_deg[[2, 3]]).all() and np.isfinite(g.dip_azimuth_deg[:2]).all()
    assert_allclose(g.dip_deg, [1.0 + 1e-6, 1.0 - 1e-6, 90.0, 0.0], rtol=0, atol=1e-9)
    up, down = surface_geometry([[-1.0, -1e-13, 1.0]]), surface_geometry([[1.0, 1e-13, -1.0]])
    # d = -(n_x, n_y) = (1, 1e-13): azimuth 5.7e-12°, not wrapped to 360 - ε.
    assert_allclose(up.dip_azimuth_deg, [np.rad2deg(1e-13)], rtol=1e-6, atol=0)
    assert_array_equal(up.dip_azimuth_deg, down.dip_azimuth_deg)
    assert_array_equal(up.trace_angle_deg, down.trace_angle_deg)
    # Angles a hair below the end of their range stay there (one wrap rule: only an angle
    # that rounds to exactly 180 or 360 becomes 0).
    near = surface_geometry([[-1.0, 1e-13, 1.0], [1e-13, 1.0, 1.0]])
    assert_allclose(near.dip_azimuth_deg[0], 360.0 - np.rad2deg(1e-13), rtol=0, atol=1e-13)
    assert_allclose(near.trace_angle_deg[1], 180.0 - np.rad2deg(1e-13), rtol=0, atol=1e-13)


# --------------------------------------------------------------------------- frames


def test_recorded_in_z180_frame_reverses_dip_directions(micro, surface):
    # §6: a data frame turned 180° about Z_S sends (n_x, n_y, n_z) to (-n_x, -n_y, n_z).
    # Reference for the turned frame: scipy's Rotation of 180° about z composed with gᵀ.
    turned = recorded_in_frame(surface, rotation="z180")
    i, j = np.nonzero(surface.grain_id == micro.lamellae[0].region)
    q_rec = turned.quat[i[0], j[0]]
    n_c = np.array(micro.lamellae[0].normal_crystal)
    n_read = quat_apply(quat_inverse(q_rec), n_c)
    n_true = np.array(micro.lamellae[0].normal_sample)
    twin_plane_true = quat_apply(quat_inverse(np.array(micro.lamellae[0].quat)), n_c)
    assert_allclose(twin_plane_true, n_true * np.sign(twin_plane_true @ n_true), rtol=0, atol=1e-12)
    # The recorded orientation is g Rᵀ (derivation in recorded_in_frame).
    r = Rotation.from_rotvec([0, 0, np.pi]).as_matrix()
    assert_allclose(
        quat_as_matrix(q_rec), quat_as_matrix(micro.lamellae[0].quat) @ r.T, rtol=0, atol=1e-12
    )
    assert_allclose(np.abs(n_read @ (n_true * [-1, -1, 1])), 1.0, rtol=0, atol=1e-12)
    geo_true, geo_read = oracle_surface_geometry([n_true]), oracle_surface_geometry([n_read])
    assert_allclose(geo_read["trace_angle_deg"], geo_true["trace_angle_deg"], rtol=0, atol=1e-9)
    assert_allclose(
        (geo_read["dip_azimuth_deg"] - geo_true["dip_azimuth_deg"]) % 360, 180, rtol=0, atol=1e-9
    )
    assert turned.frame_rotation == (0.0, 0.0, 0.0, 1.0)
    assert_array_equal(turned.phase, surface.phase)


def test_recorded_in_frame_round_trip(micro):
    m = sample_map(micro, step_um=1.0, rng=0, nonindexed_fraction=0.05)
    r = Rotation.from_rotvec([0.3, -0.2, 0.5]).as_quat(scalar_first=True)
    there = recorded_in_frame(m, rotation=r)
    back = recorded_in_frame(there, rotation=quat_inverse(r))
    ok = m.phase != 0
    assert_allclose(np.abs(np.sum(back.quat[ok] * m.quat[ok], -1)), 1.0, rtol=0, atol=1e-12)
    assert np.all(np.isnan(back.quat[~ok]))
    assert_allclose(np.abs(back.frame_rotation[0]), 1.0, rtol=0, atol=1e-12)
    x180 = recorded_in_frame(m, rotation="x180")
    q = m.quat[ok][:5]
    assert_allclose(
        quat_as_matrix(x180.quat[ok][:5]),
        quat_as_matrix(q) @ np.diag([1.0, -1.0, -1.0]),
        rtol=0,
        atol=1e-12,
    )


# --------------------------------------------------------------------------- cross-sections


def _two_grains():
    # Seeds chosen by hand: the face 2x + z = 55 between (10, 10, 10) and (30, 10, 20).
    micro = make_microstructure(
        box_um=(40, 20, 30), n_grains=2, rng=0, phases=[FCC], texture=[[1, 0, 0, 0], [0, 1, 0, 0]]
    )
    seeds = np.array([[10.0, 10.0, 10.0], [30.0, 10.0, 20.0]])
    return type(micro)(
        box_um=micro.box_um,
        seeds_um=seeds,
        region_quat=micro.region_quat,
        region_phase=micro.region_phase,
        region_parent=micro.region_parent,
        lamellae=(),
        phases=micro.phases,
        grain_pairs=np.array([[1, 2]]),
    )


def test_cross_section_sign_rules_hand_worked():
    # Hand-worked case (§5, §7): the face 2x + z = 55, n ∝ (2, 0, 1), dips toward -X
    # (d = -(2, 0)/2 = (-1, 0)), δ = arccos(1/√5) = 63.435°, meets y = 10 at x = 27.5.
    # Line along +X at y = 10, viewed from the -Y side: V = (0, -1, 0), image-right =
    # V × Z = (-1, 0, 0) = -X, so d · right = 1 > 0: descends right. From +Y: left.
    # β = 90° (trace along Y), so α = δ and tan α_image = 2 · sin 52°.
    micro = _two_grains()
    line = ((0.0, 10.0), (40.0, 10.0))
    minus_y = cross_section_crossings(
        micro, line_um=line, viewer_at_um=(20, 5), imaging_tilt_deg=52, max_depth_um=5
    )
    plus_y = cross_section_crossings(
        micro, line_um=line, viewer_at_um=(20, 15), imaging_tilt_deg=52, max_depth_um=5
    )
    assert minus_y["descends"].tolist() == ["right"] and plus_y["descends"].tolist() == ["left"]
    assert_allclose(minus_y["along_um"], [27.5], rtol=0, atol=1e-9)
    assert_allclose(minus_y["dip_deg"], [np.rad2deg(np.arccos(5**-0.5))], rtol=0, atol=1e-9)
    assert_allclose(minus_y["beta_deg"], [90.0], rtol=0, atol=1e-9)
    expected = np.rad2deg(np.arctan(2 * np.sin(np.deg2rad(52))))
    assert_allclose(minus_y["image_angle_deg"], [expected], rtol=0, atol=1e-9)
    # The line reversed: along is measured from the new first point; still the same sides.
    back = cross_section_crossings(
        micro, line_um=line[::-1], viewer_at_um=(20, 5), imaging_tilt_deg=52, max_depth_um=5
    )
    assert_allclose(back["along_um"], [12.5], rtol=0, atol=1e-9)
    assert back["descends"].tolist() == ["right"]
    job = simulate_cross_section(
        micro,
        line_um=line,
        viewer_at_um=(20, 5),
        imaging_tilt_deg=52,
        max_depth_um=5,
        rng=0,
        angle_noise_deg=0.0,
    )
    assert job == [
        {
            "along_um": pytest.approx(27.5, abs=1e-9),
            "image_angle_deg": pytest.approx(expected, abs=1e-9),
            "descends": "right",
        }
    ]


@pytest.mark.parametrize(("tilt_deg", "listed"), [(0.5, False), (1.5, True)])
def test_cross_section_leaves_out_planes_without_a_trace(tilt_deg, listed):
    # §5: a plane within 1° of the surface has no trace, so no angle β to the section line;
    # one tilted 1.5° has both. Two seeds chosen by hand: the bisector plane has normal
    # (sin t, 0, cos t) and meets the line y = 10 on the surface (hand derivation).
    base = make_microstructure(
        box_um=(40, 20, 30), n_grains=2, rng=0, phases=[FCC], texture=[[1, 0, 0, 0], [0, 1, 0, 0]]
    )
    t = np.deg2rad(tilt_deg)
    sa = np.array([10.0, 10.0, -0.9])
    micro = type(base)(
        box_um=base.box_um,
        seeds_um=np.array([sa, sa + 2 * np.array([np.sin(t), 0.0, np.cos(t)])]),
        region_quat=base.region_quat,
        region_phase=base.region_phase,
        region_parent=base.region_parent,
        lamellae=(),
        phases=base.phases,
        grain_pairs=np.array([[1, 2]]),
    )
    table = cross_section_crossings(
        micro,
        line_um=((1, 10), (39, 10)),
        viewer_at_um=(20, 15),
        imaging_tilt_deg=52,
        max_depth_um=0.05,
    )
    assert len(table["along_um"]) == int(listed)
    if listed:
        assert_allclose(table["dip_deg"], [tilt_deg], rtol=0, atol=1e-9)
        assert_allclose(table["beta_deg"], [90.0], rtol=0, atol=1e-9)


@pytest.fixture(scope="module")
def crossings(micro):
    lines = [((1, 12), (59, 12)), ((30, 1), (30, 49)), ((2, 3), (57, 46))]
    tables = [
        cross_section_crossings(
            micro, line_um=line, viewer_at_um=(5, 48), imaging_tilt_deg=52, max_depth_um=3
        )
        for line in lines
    ]
    return lines, tables


def test_cross_section_reproduces_the_apparent_dip_relation(crossings):
    # Apparent dip on a vertical face: tan α = tan δ |sin β| (Ragan, Structural Geology:
    # an Introduction to Geometrical Techniques, apparent-dip chapter); the image shortens
    # depths by sin(tilt): tan α_image = tan α · sin(tilt) (conventions §7).
    lines, tables = crossings
    total = 0
    for table in tables:
        total += len(table["along_um"])
        delta, beta = np.deg2rad(table["dip_deg"]), np.deg2rad(table["beta_deg"])
        alpha = np.arctan(np.tan(delta) * np.abs(np.sin(beta)))
        assert_allclose(np.deg2rad(table["face_angle_deg"]), alpha, rtol=0, atol=1e-9)
        image = np.arctan(np.tan(alpha) * np.sin(np.deg2rad(52)))
        assert_allclose(np.deg2rad(table["image_angle_deg"]), image, rtol=0, atol=1e-9)
    assert total >= 8


def test_cross_section_descends_follows_the_dip_direction(micro, crossings):
    # §7 on a vertical face: descends right ⇔ d · (V × Z_S) > 0, d the dip direction (§5).
    lines, tables = crossings
    for line, table in zip(lines, tables, strict=True):
        p0, p1 = np.array(line[0], float), np.array(line[1], float)
        u = (p1 - p0) / np.linalg.norm(p1 - p0)
        v = np.array([5.0, 48.0]) - p0
        v -= (v @ u) * u
        v /= np.linalg.norm(v)
        right = np.array([v[1], -v[0]])  # (V × Z_S) restricted to the plane z = 0
        az = np.deg2rad(
            oracle_surface_geometry(
                np.stack([table["normal_x"], table["normal_y"], table["normal_z"]], 1)
            )["dip_azimuth_deg"]
        )
        d = np.stack([np.cos(az), np.sin(az)], 1)
        expected = np.where(d @ right > 0, "right", "left")
        assert_array_equal(table["descends"], expected)
        # The crossing lies on the plane between the two regions it separates.
        n = boundary_normals_sample(micro, table["region_a"], table["region_b"])
        assert_allclose(n[:, 0], table["normal_x"], rtol=0, atol=1e-12)
        pts = np.stack([table["x_um"], table["y_um"], np.zeros(len(table["x_um"]))], 1)
        assert_array_equal(region_at(micro, pts - 0.01 * np.append(u, 0)), table["region_a"])
        assert_array_equal(region_at(micro, pts + 0.01 * np.append(u, 0)), table["region_b"])


def test_inclined_face_and_noise(micro):
    # A face at θ to the surface leaning toward the viewer, beam tilted T from the normal:
    # depths shorten by cos(θ - T) (projection of the down-face direction on the image
    # plane, hand derivation); with θ = 90° this is sin T.
    line = ((1, 25), (59, 25))
    kwargs = dict(line_um=line, viewer_at_um=(30, 40), max_depth_um=2)
    face = cross_section_crossings(micro, imaging_tilt_deg=30, face_inclination_deg=70, **kwargs)
    expected = np.arctan(np.tan(np.deg2rad(face["face_angle_deg"])) * np.cos(np.deg2rad(40)))
    assert_allclose(np.deg2rad(face["image_angle_deg"]), expected, rtol=0, atol=1e-9)
    noisy = simulate_cross_section(micro, imaging_tilt_deg=52, rng=5, angle_noise_deg=1.0, **kwargs)
    clean = cross_section_crossings(micro, imaging_tilt_deg=52, **kwargs)
    got = np.array([e["image_angle_deg"] for e in noisy])
    assert len(got) == len(clean["along_um"]) >= 2
    assert np.all((got > 0) & (got <= 90))
    assert np.max(np.abs(got - clean["image_angle_deg"])) < 5.0  # 5 SD of 1° noise


# --------------------------------------------------------------------------- truth


def test_ground_truth_is_json_and_complete(micro, surface):
    truth = ground_truth(micro, maps={"surface": surface})
    text = json.dumps(truth, allow_nan=False)
    back = json.loads(text)
    assert len(back["grains"]) == micro.n_regions
    twins = [b for b in back["boundaries"] if b["kind"] == "twin"]
    assert len(twins) == len(micro.lamellae)
    assert all(b["twin_plane"] in ("(1 1 1)", "(-1 1 1)", "(1 -1 1)", "(1 1 -1)") for b in twins)
    by_pair = {tuple(b["grains"]): b for b in back["boundaries"]}
    seen = back["maps"]["surface"]["boundaries"]
    assert seen and all(tuple(s["grains"]) in by_pair for s in seen)
    for b in back["boundaries"][:20]:
        geo = oracle_surface_geometry([b["normal_sample"]])
        assert_allclose(b["dip_deg"], geo["dip_deg"][0], rtol=0, atol=1e-12)
        for key in ("trace_angle_deg", "dip_azimuth_deg"):
            want = geo[key][0]
            assert (b[key] is None) == bool(np.isnan(want))
            if b[key] is not None:
                assert_allclose(b[key], want, rtol=0, atol=1e-9)
    q = np.array([g["quat"] for g in back["grains"]])
    e = np.array([g["euler_deg"] for g in back["grains"]])
    assert_allclose(np.abs(np.sum(quat_from_euler_deg(e) * q, 1)), 1.0, rtol=0, atol=1e-9)


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"box_um": (10, 10)}, SettingError, "Expected `box_um` to be three finite lengths"),
        ({"box_um": (10, -1, 10)}, SettingError, "Expected `box_um`"),
        ({"n_grains": 0}, SettingError, "Expected `n_grains` to be a whole number >= 1"),
        ({"n_grains": 2.5}, SettingError, "Expected `n_grains`"),
        ({"phases": []}, SettingError, "Expected `phases` to hold at least one phase"),
        ({"phases": [FCC, FCC]}, SettingError, "Expected `phases` to have distinct ids"),
        ({"phase_fractions": [0.5, 0.5]}, SettingError, "Expected `phase_fractions`"),
        ({"twins": -1}, SettingError, "Expected `twins` to be >= 0"),
        ({"twins": 1000}, SettingError, r"Expected `twins` to be at most \d+"),
        ({"twins": "3"}, TypeError, "Expected `twins` to be an int or a sequence"),
        ({"twins": 1, "twin_thickness_um": (3, 1)}, SettingError, "Expected `twin_thickness_um`"),
        ({"twins": [(1, 0, 2.0)]}, TypeError, r"Expected `twins\[0\]` to be a TwinSpec"),
        ({"twins": [TwinSpec(99, 0, 1.0)]}, SettingError, r"twins\[0\]\.grain` to be a grain id"),
        (
            {"twins": [TwinSpec(1, 0, 1.0), TwinSpec(1, 1, 1.0)]},
            SettingError,
            "to name each grain at most once",
        ),
        ({"twins": [TwinSpec(1, 7, 1.0)]}, SettingError, r"twins\[0\]\.plane` to be in 0\.\.3"),
        ({"twins": [TwinSpec(1, 0, 0.0)]}, SettingError, r"twins\[0\]\.thickness_um"),
        ({"texture": [1, 0, 0]}, SettingError, r"Expected `texture` to have shape \(4,\)"),
        ({"texture_spread_deg": -1}, SettingError, "Expected `texture_spread_deg`"),
        (
            {"phases": [TETRAGONAL], "twins": 1},
            SettingError,
            r"Expected `twins` to be at most 0 \(grains of a twinning phase",
        ),
        (
            {"phases": [TETRAGONAL], "twins": [TwinSpec(1, 0, 1.0)]},
            SettingError,
            "Expected `phase.laue` to be one of",
        ),
    ],
)
def test_make_microstructure_refuses_bad_input(kwargs, error, match):
    args = {"box_um": (30, 30, 20), "n_grains": 10, "rng": 0, "phases": [FCC]} | kwargs
    with pytest.raises(error, match=match):
        make_microstructure(**args)


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"step_um": 0}, SettingError, "Expected `step_um` to be a finite number > 0"),
        ({"grid": "hex"}, SettingError, r"Expected `grid` to be one of \('square', 'hexagonal'\)"),
        ({"noise_deg": -0.1}, SettingError, "Expected `noise_deg`"),
        ({"depth_um": 31}, SettingError, r"Expected `depth_um` to be in \[0, 30"),
        (
            {"nonindexed_fraction": 1.0},
            SettingError,
            r"Expected `nonindexed_fraction` to be in \[0, 1\)",
        ),
        ({"misindexed_clusters": 1.5}, TypeError, "Expected `misindexed_clusters` to be a whole"),
        ({"misindexed_clusters": -1}, SettingError, "Expected `misindexed_clusters` to be >= 0"),
        ({"misindexed_clusters": 1, "cluster_radius_um": 0}, SettingError, "cluster_radius_um"),
        ({"offset_um": (1, 2, 3)}, SettingError, r"Expected `offset_um` to be \(dx, dy\)"),
        ({"extent_um": (0, 5)}, SettingError, r"Expected `extent_um` to be \(width, height\)"),
        ({"shape": (0, 5)}, SettingError, r"Expected `shape` to be \(H, W\)"),
        ({"offset_um": (-1, 0)}, SettingError, "Expected the sampled area to lie inside the box"),
        ({"shape": (10, 500)}, SettingError, "Expected the sampled area to lie inside the box"),
    ],
)
def test_sample_map_refuses_bad_input(micro, kwargs, error, match):
    args = {"step_um": 1.0, "rng": 0} | kwargs
    with pytest.raises(error, match=match):
        sample_map(micro, **args)


def test_other_functions_refuse_bad_input(micro, surface):
    with pytest.raises(SettingError, match=r"Expected `rotation` to be one of \('x180'"):
        recorded_in_frame(surface, rotation="z90")
    with pytest.raises(SettingError, match=r"Expected `rotation` to have shape \(4,\)"):
        recorded_in_frame(surface, rotation=[0, 0, 1])
    with pytest.raises(InputError, match=r"Expected `points_um` to have shape \(N, 3\)"):
        region_at(micro, [[1.0, 2.0]])
    with pytest.raises(InputError, match="Expected `points_um` to be finite"):
        region_at(micro, [[1.0, np.nan, 0.0]])
    with pytest.raises(TypeError, match="Expected `region_a` to hold integer region ids"):
        boundary_normals_sample(micro, [1.5], [2])
    with pytest.raises(InputError, match=r"Expected `region_b` to hold region ids in 1\.\."):
        boundary_normals_sample(micro, [1], [999])
    with pytest.raises(InputError, match="Expected `region_a` and `region_b` to be 1-D of one"):
        boundary_normals_sample(micro, [1, 2], [2])
    with pytest.raises(TypeError, match=r"Expected `maps\['x'\]` to be a SampledMap"):
        ground_truth(micro, maps={"x": np.zeros(3)})
    with pytest.raises(SettingError, match=r"Expected `grid` to be one of"):
        grid_positions_um((2, 2), 1.0, grid="hexa")
    assert isinstance(surface, SampledMap)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"line_um": ((0, 0), (1, 1), (2, 2))}, r"Expected `line_um` to be \(\(x0, y0\)"),
        ({"line_um": ((0, 0), (0, 0))}, "Expected `line_um` to join two distinct points"),
        ({"line_um": ((0, 0), (100, 0))}, "Expected `line_um` to lie inside the box"),
        ({"viewer_at_um": (1, 2, 3)}, r"Expected `viewer_at_um` to be \(x, y\)"),
        ({"viewer_at_um": (20, 10)}, "Expected `viewer_at_um` to lie off the section line"),
        ({"imaging_tilt_deg": 0}, r"Expected `imaging_tilt_deg` to be in \(0, 90\]"),
        ({"face_inclination_deg": 100}, r"Expected `face_inclination_deg` to be in \(0, 90\]"),
        ({"max_depth_um": 0}, "Expected `max_depth_um` to be a finite number > 0"),
        ({"max_depth_um": 50}, "Expected `max_depth_um` to be at most the box depth 30"),
        ({"angle_noise_deg": -1}, "Expected `angle_noise_deg`"),
    ],
)
def test_cross_section_refuses_bad_input(micro, kwargs, match):
    args = {
        "line_um": ((1, 10), (50, 10)),
        "viewer_at_um": (20, 20),
        "imaging_tilt_deg": 52,
        "max_depth_um": 2,
        "rng": 0,
    } | kwargs
    with pytest.raises(SettingError, match=match):
        simulate_cross_section(micro, **args)


def test_quaternion_product_order_used_for_twins():
    # §3: quat_multiply(a, b) is g_a @ g_b; the twin is s ⊗ q_parent = S g_parent, so twin
    # crystal coordinates are the parent's turned by S (checked against scipy's matrices).
    q = quat_from_euler_deg([10.0, 20.0, 30.0])
    s = np.array([0.0, 1.0, 1.0, 1.0]) / np.sqrt(3)
    lhs = quat_as_matrix(quat_multiply(s, q))
    s_matrix = Rotation.from_rotvec(np.pi * np.ones(3) / np.sqrt(3)).as_matrix()
    assert_allclose(lhs, s_matrix @ quat_as_matrix(q), rtol=0, atol=1e-12)


# --------------------------------------------------------------------------- demo


def test_demo_scenario_files(tmp_path):
    # The job files must satisfy the project's job schema (jsonschema, Draft 2020-12) and
    # the maps the npz reader; the z180 case holds the same orientations turned (§6).
    import jsonschema

    from inclination.demo import write_demo_scenario
    from inclination.io.arrays import read_npz_arrays
    from inclination.io.schemas import load_schema

    paths = write_demo_scenario(tmp_path, seed=3)
    schema = load_schema("job.schema.json")
    jobs = {k: json.loads(paths[k].read_text()) for k in ("job", "job_z180")}
    for job in jobs.values():
        jsonschema.validate(job, schema)
    assert jobs["job"]["sections"] == [
        s if s["kind"] != "serial" else s | {"map": s["map"] | {"path": "serial_5um.npz"}}
        for s in jobs["job_z180"]["sections"]
    ]
    euler, phase, quality = read_npz_arrays(paths["surface"], angles="deg")
    assert euler.shape == (300, 400, 3) and quality == {}
    assert_allclose((phase == 0).mean(), 0.01, rtol=0, atol=1e-4)
    turned, _, _ = read_npz_arrays(paths["surface_z180"], angles="deg")
    ok = phase != 0
    g = quat_as_matrix(quat_from_euler_deg(euler[ok][:50]))
    g_turned = quat_as_matrix(quat_from_euler_deg(turned[ok][:50]))
    assert_allclose(g_turned, g @ np.diag([-1.0, -1.0, 1.0]), rtol=0, atol=1e-9)
    truth = json.loads(paths["truth"].read_text())
    grains = 60 <= sum(g["kind"] == "grain" for g in truth["grains"]) <= 150
    assert grains and len(truth["lamellae"]) >= 5
    crossings = [c for s in truth["scenario"]["cross_sections"] for c in s["crossings"]]
    assert len(crossings) >= 6 and any(c["is_twin"] for c in crossings)
    # The cross-sections come as face images for the tool to measure, never as typed
    # boundary lists (conventions §7); each image reads back as a greyscale face.
    from inclination.sections import read_face_image

    faces = [s for s in jobs["job"]["sections"] if s["kind"] == "cross-section"]
    assert len(faces) == len(truth["scenario"]["cross_sections"]) == 2
    for section, known in zip(faces, truth["scenario"]["cross_sections"], strict=True):
        assert "boundaries" not in section and section["image"]["path"] == known["image"]
        image = read_face_image(tmp_path / section["image"]["path"])
        col, row = section["image"]["line_start_px"]
        assert 0 <= col < image.shape[1] and 0 <= row < image.shape[0]
        # The bright cap above the surface edge, the darker face below it.
        assert image[: int(row) - 2].mean() > image[int(row) + 3 :].mean() + 0.2
    again = write_demo_scenario(tmp_path / "again", seed=3)
    assert again["job"].read_text() == paths["job"].read_text()


def test_demo_refuses_a_seed_that_is_not_an_integer(tmp_path):
    from inclination.demo import write_demo_scenario

    with pytest.raises(TypeError, match="Expected `seed` to be an integer, got str"):
        write_demo_scenario(tmp_path, seed="7")


@pytest.mark.parametrize(
    ("turn", "declared"),
    [
        ("z180", "z180"),
        ("x180", "x180"),
        (Rotation.from_rotvec(np.deg2rad(40) * np.array([1, 2, 3]) / np.sqrt(14)), None),
    ],
)
def test_recorded_frame_reads_back_with_the_same_declared_rotation(micro, tmp_path, turn, declared):
    # The map module's reader is an independent implementation of §3's data-frame
    # rotation: a map recorded in the frame turned by Q and read back declaring Q gives
    # the orientations in S again (float32 storage: 1e-6).
    from inclination.io.writers import write_npz
    from inclination.maps import OrientationMap, read_map

    if declared is None:
        q_turn = turn.as_quat(scalar_first=True)
        declared = {"axis": [1, 2, 3], "angle_deg": 40.0}
    else:
        q_turn = turn
    m = sample_map(micro, step_um=1.0, rng=0, nonindexed_fraction=0.05)
    rec = recorded_in_frame(m, rotation=q_turn)
    omap = OrientationMap.from_euler_deg(rec.euler_deg, rec.phase, grid="square", step_x_um=1.0)
    path = write_npz(tmp_path / "m.npz", omap)
    spec = {"path": str(path), "format": "npz", "angles": "deg", "step_um": 1.0}
    spec |= {"grid": "square", "axes": {"x": "right", "y": "down"}}
    back = read_map(spec | {"data_frame_rotation": declared})
    ok = m.phase != 0
    q_back = np.asarray(back.quat, dtype=float)[ok]
    assert_allclose(np.abs(np.sum(q_back * m.quat[ok], -1)), 1.0, rtol=0, atol=1e-6)
    assert_array_equal(back.phase, m.phase)


def test_as_orientation_map(micro, surface):
    from inclination.synthetic import as_orientation_map

    omap = as_orientation_map(recorded_in_frame(surface, rotation="z180"))
    assert omap.shape == surface.shape and omap.grid == "square"
    q = np.asarray(omap.quat, dtype=float)
    expected = quat_multiply(surface.quat, [0.0, 0.0, 0.0, 1.0])
    assert_allclose(np.abs(np.sum(q * expected, -1)), 1.0, rtol=0, atol=1e-6)
    with pytest.raises(TypeError, match="Expected `sample` to be a SampledMap, got dict"):
        as_orientation_map({})


def test_example_script_runs(tmp_path):
    # examples/make_sample.py is a thin layer over the library; it must keep running.
    import runpy
    from pathlib import Path

    script = Path(__file__).resolve().parent.parent / "examples" / "make_sample.py"
    namespace = runpy.run_path(str(script), run_name="example")
    truth = namespace["main"](tmp_path)
    assert (tmp_path / "truth.json").is_file() and len(truth["lamellae"]) == 6


def test_two_phase_sample_twins_each_phase_by_its_own_law():
    # m-3m: Σ3 60° (Grimmer et al. 1974); 6/mmm: 2·arctan(c/(√3 a)) (see the hexagonal test).
    micro = make_microstructure(
        box_um=(80, 60, 30),
        n_grains=30,
        rng=5,
        phases=[FCC, HEX],
        phase_fractions=[0.6, 0.4],
        twins=8,
    )
    assert set(micro.region_phase[: micro.n_grains].tolist()) == {1, 2}
    m = sample_map(micro, step_um=1.0, rng=0, nonindexed_fraction=0.02)
    assert set(np.unique(m.phase).tolist()) == {0, 1, 2}
    assert {int(micro.region_phase[lam.parent - 1]) for lam in micro.lamellae} == {1, 2}
    expected = {1: 60.0, 2: 2 * np.rad2deg(np.arctan(5.0 / 3.10 / np.sqrt(3)))}
    for lam in micro.lamellae:
        phase = int(micro.region_phase[lam.parent - 1])
        laue = {1: "m-3m", 2: "6/mmm"}[phase]
        d = symmetry.disorientation(micro.region_quat[lam.parent - 1], np.array(lam.quat), laue)
        assert_allclose(d.angle_deg, expected[phase], rtol=0, atol=1e-6)
        assert micro.region_phase[lam.region - 1] == phase
