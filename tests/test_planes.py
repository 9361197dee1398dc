"""Unit tests of inclination.planes: invariants of the §5 geometry, tolerances, identification."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from inclination.crystal.lattice import Lattice, Phase
from inclination.crystal.rotations import (
    quat_from_axis_angle_deg,
    quat_from_euler_deg,
    quat_multiply,
    random_quat,
)
from inclination.planes import (
    IDENTIFICATION_CLASSES,
    candidates,
    chance_fit,
    identify,
    predict_planes,
    trace_deviation_deg,
    trace_sigma_predicted_deg,
    trace_tolerance_deg,
    twin_test_summary,
)

CUBIC_111 = np.array([[1, 1, 1], [-1, 1, 1], [1, -1, 1], [1, 1, -1]], dtype=float)


# ---------------------------------------------------------------- predict_planes


def test_shapes_broadcast_orientations_against_normals():
    p = predict_planes(random_quat(5, rng=1), CUBIC_111[:3])
    assert p.normal_sample.shape == (5, 3, 3)
    for arr in (p.trace_angle_deg, p.dip_deg, p.dip_azimuth_deg, p.has_trace):
        assert arr.shape == (5, 3)


def test_empty_inputs_give_empty_arrays():
    p = predict_planes(np.zeros((0, 4)), CUBIC_111)
    assert p.trace_angle_deg.shape == (0, 4)
    p = predict_planes(random_quat(2, rng=0), np.zeros((0, 3)))
    assert p.dip_deg.shape == (2, 0)


def test_inputs_not_modified_and_outputs_read_only():
    q = random_quat(3, rng=2)
    n = CUBIC_111.copy()
    q0, n0 = q.copy(), n.copy()
    p = predict_planes(q, n)
    assert (q == q0).all() and (n == n0).all()
    with pytest.raises(ValueError, match="read-only"):
        p.dip_deg[0, 0] = 1.0


@given(st.integers(0, 2**31 - 1))
def test_plane_sign_and_length_do_not_matter(seed):
    # n ≡ −n: a plane is the same plane whichever way its normal points, at any length.
    q = random_quat(4, rng=seed)
    a = predict_planes(q, CUBIC_111)
    b = predict_planes(q, -3.0 * CUBIC_111)
    assert_allclose(a.normal_sample, b.normal_sample, rtol=0, atol=1e-12)
    assert_allclose(a.dip_azimuth_deg, b.dip_azimuth_deg, rtol=0, atol=1e-9)
    assert (a.normal_sample[..., 2] >= 0).all()


@given(st.integers(0, 2**31 - 1))
def test_ranges(seed):
    p = predict_planes(random_quat(20, rng=seed), CUBIC_111)
    t = p.trace_angle_deg[p.has_trace]
    assert ((t >= 0) & (t < 180)).all()
    assert ((p.dip_deg >= 0) & (p.dip_deg <= 90)).all()
    az = p.dip_azimuth_deg[~np.isnan(p.dip_azimuth_deg)]
    assert ((az >= 0) & (az < 360)).all()


@given(st.integers(0, 2**31 - 1))
def test_trace_is_on_the_plane_and_dip_direction_moves_the_trace_at_depth(seed):
    # §5: removing a layer of depth h moves the trace by h / tan δ along d.
    p = predict_planes(random_quat(10, rng=seed), CUBIC_111)
    n = p.normal_sample
    theta = np.deg2rad(p.trace_angle_deg)
    t = np.stack([np.cos(theta), np.sin(theta), np.zeros_like(theta)], axis=-1)
    ok = p.has_trace
    assert_allclose(np.einsum("...i,...i", t, n)[ok], 0.0, rtol=0, atol=1e-12)
    az = np.deg2rad(p.dip_azimuth_deg)
    d = np.stack([np.cos(az), np.sin(az), np.zeros_like(az)], axis=-1)
    h = 2.0
    shift = h / np.tan(np.deg2rad(p.dip_deg))
    # A point of the plane through the origin, at depth h, displaced from the origin by the
    # shift along d: n · (shift·d + h·Z) = 0.
    point = shift[..., None] * d
    point[..., 2] = h
    good = ok & ~np.isnan(az)
    assert_allclose(np.einsum("...i,...i", point, n)[good], 0.0, rtol=0, atol=1e-9)


def test_frame_turned_180_about_z_keeps_traces_and_reverses_dip_directions():
    # §6: S' turned 180° about Z: g' = g · Rz(180°), i.e. q' = q ⊗ r with r the half turn.
    q = random_quat(30, rng=3)
    half_turn = quat_from_axis_angle_deg([0, 0, 1], 180.0)
    a = predict_planes(q, CUBIC_111)
    b = predict_planes(quat_multiply(q, half_turn), CUBIC_111)
    ok = a.has_trace
    assert_allclose(
        trace_deviation_deg(a.trace_angle_deg[ok], b.trace_angle_deg[ok]), 0.0, rtol=0, atol=1e-9
    )
    assert_allclose(a.dip_deg, b.dip_deg, rtol=0, atol=1e-9)
    assert_allclose(np.mod(a.dip_azimuth_deg - b.dip_azimuth_deg, 360.0), 180.0, rtol=0, atol=1e-9)


def test_crystal_symmetry_permutes_the_family():
    # Applying a cubic symmetry operation to the orientation permutes the {111} planes in S.
    q = random_quat(1, rng=4)
    s = quat_from_axis_angle_deg([0, 0, 1], 90.0)  # a 4-fold about [001], crystal frame
    a = predict_planes(q, CUBIC_111)
    b = predict_planes(quat_multiply(s, q), CUBIC_111)
    assert_allclose(np.sort(a.dip_deg, axis=-1), np.sort(b.dip_deg, axis=-1), rtol=0, atol=1e-9)


def test_cube_orientation_vertical_and_parallel_planes():
    p = predict_planes(quat_from_euler_deg([0.0, 0.0, 0.0]), [[1, 0, 0], [0, 1, 0], [0, 0, 1]])
    # (100): normal along X, vertical, trace along Y (90°), no dip direction.
    # (010): normal along Y, vertical, trace along X (0°). (001): parallel to the surface.
    assert_allclose(p.trace_angle_deg[:2], [90.0, 0.0], rtol=0, atol=1e-12)
    assert np.isnan(p.trace_angle_deg[2])
    assert p.has_trace.tolist() == [True, True, False]
    assert_allclose(p.dip_deg, [90.0, 90.0, 0.0], rtol=0, atol=1e-12)
    assert np.isnan(p.dip_azimuth_deg).all()


def test_no_trace_threshold_is_one_degree():
    # Planes tilted 0.9° and 1.1° from the surface, about X.
    n = [
        [0.0, np.sin(np.deg2rad(0.9)), np.cos(np.deg2rad(0.9))],
        [0.0, np.sin(np.deg2rad(1.1)), np.cos(np.deg2rad(1.1))],
    ]
    p = predict_planes([1.0, 0.0, 0.0, 0.0], n)
    assert p.has_trace.tolist() == [False, True]


@pytest.mark.parametrize(
    ("quat", "normals", "match"),
    [
        (np.zeros((2, 3)), CUBIC_111, r"`quat` to have shape \(\.\.\., 4\)"),
        (np.zeros((2, 2, 4)), CUBIC_111, r"`quat` to have shape \(N, 4\) or \(4,\)"),
        ([[np.nan, 0, 0, 1]], CUBIC_111, r"`quat` to be finite everywhere, got .* \(0,\)"),
        ([1, 0, 0, 0], [1, 1, 1], r"`normals_crystal` to have shape \(M, 3\), got \(3,\)"),
        ([1, 0, 0, 0], [[1, 1, 1], [0, 0, 0]], r"`normals_crystal` to be non-zero, .* \(1,\)"),
        ([1, 0, 0, 0], [[1, np.inf, 1]], r"`normals_crystal` to be finite"),
        ("abc", CUBIC_111, r"`quat` to be an array of numbers, got str"),
    ],
)
def test_predict_planes_refuses_bad_input(quat, normals, match):
    with pytest.raises((ValueError, TypeError), match=match):
        predict_planes(quat, normals)


# ---------------------------------------------------------------- uncertainty and tolerance


def test_trace_sigma_first_order_against_monte_carlo():
    # Independent check of σ_trace ≈ σ_g / sin δ: scatter an orientation by random rotation
    # vectors with standard deviation σ_g per axis and measure the spread of the trace angle.
    rng = np.random.default_rng(11)
    sigma_g = 0.3
    base = quat_from_euler_deg([30.0, 50.0, 10.0])
    vec = rng.normal(0.0, sigma_g, size=(20000, 3))
    angle = np.linalg.norm(vec, axis=1)
    scatter = quat_from_axis_angle_deg(vec, angle)
    p0 = predict_planes(base, CUBIC_111)
    p = predict_planes(quat_multiply(scatter, base), CUBIC_111)
    dev = np.mod(p.trace_angle_deg - p0.trace_angle_deg + 90.0, 180.0) - 90.0
    measured = dev.std(axis=0)
    predicted = trace_sigma_predicted_deg(sigma_g, p0.dip_deg)
    assert_allclose(measured, predicted, rtol=0.05, atol=0)


def test_trace_sigma_cap_and_zero_spread():
    assert_allclose(trace_sigma_predicted_deg([0.0, 1.0], [0.0, 0.0]), [0.0, 90.0], rtol=0, atol=0)


@pytest.mark.parametrize(
    ("spread", "dip", "match"),
    [
        (-0.1, 30.0, r"`spread_deg` to be >= 0, got -0.1"),
        (0.1, 91.0, r"`dip_deg` to lie in \[0, 90\], got 91.0"),
        (np.nan, 30.0, r"`spread_deg` to be finite"),
        (0.1, np.nan, r"`dip_deg` to be finite"),
    ],
)
def test_trace_sigma_refuses_bad_input(spread, dip, match):
    with pytest.raises(ValueError, match=match):
        trace_sigma_predicted_deg(spread, dip)


def test_tolerance_floor_formula_and_cap():
    got = trace_tolerance_deg(
        [0.0, 0.3, 0.9, 4.0], [0.1, 0.4, 1.2, 0.0], k=2.0, floor_deg=1.0, max_tolerance_deg=5.0
    )
    # 2·√(0.09 + 0.16) = 1.0; 2·√(0.81 + 1.44) = 3.0; 2·0.1 floored to 1; 8 capped to 5.
    assert_allclose(got, [1.0, 1.0, 3.0, 5.0], rtol=0, atol=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"k": 0.0}, r"Expected `k` to be a finite number > 0, got 0.0"),
        ({"k": -1.0}, r"Expected `k` to be a finite number > 0, got -1.0"),
        ({"k": np.nan}, r"Expected `k` to be a finite number > 0, got nan"),
        ({"floor_deg": 0.0}, r"Expected `floor_deg` to be a finite number > 0"),
        ({"floor_deg": -1.0}, r"Expected `floor_deg` to be a finite number > 0"),
        ({"max_tolerance_deg": np.nan}, r"Expected `max_tolerance_deg` to be a finite number"),
        ({"max_tolerance_deg": -5.0}, r"Expected `max_tolerance_deg` to be a finite number"),
        ({"floor_deg": 6.0}, r"Expected `floor_deg` to be <= `max_tolerance_deg` \(5.0\)"),
    ],
)
def test_tolerance_refuses_bad_settings(kwargs, match):
    with pytest.raises(ValueError, match=match):
        trace_tolerance_deg(0.5, 0.5, **kwargs)


@pytest.mark.parametrize(
    ("sm", "sp", "match"),
    [
        (-0.5, 0.5, r"`sigma_measured_deg` to be >= 0"),
        (0.5, -0.5, r"`sigma_predicted_deg` to be >= 0"),
        (np.nan, 0.5, r"`sigma_measured_deg` to be finite"),
    ],
)
def test_tolerance_refuses_bad_sigmas(sm, sp, match):
    with pytest.raises(ValueError, match=match):
        trace_tolerance_deg(sm, sp)


def test_trace_deviation_wraps_at_180():
    got = trace_deviation_deg([0.5, 179.5, 45.0, 0.0], [179.5, 0.5, 135.0, 90.0])
    assert_allclose(got, [1.0, 1.0, 90.0, 90.0], rtol=0, atol=1e-12)


def test_chance_fit_formula_and_monte_carlo():
    # 1 − (1 − 2τ/180)^k for k equal tolerances.
    assert chance_fit([3.0] * 5) == pytest.approx(1 - (1 - 6 / 180) ** 5, rel=1e-12, abs=0)
    # Monte Carlo with traces whose fit windows do not overlap: exact for disjoint windows.
    rng = np.random.default_rng(5)
    centres = np.array([10.0, 50.0, 100.0, 150.0])
    tol = np.array([2.0, 3.0, 1.0, 4.0])
    theta = rng.uniform(0, 180, 200000)
    hit = (trace_deviation_deg(theta[:, None], centres) <= tol).any(axis=1).mean()
    assert hit == pytest.approx(2 * tol.sum() / 180, rel=0.02, abs=0)
    assert chance_fit(tol) == pytest.approx(1 - np.prod(1 - 2 * tol / 180), rel=1e-12, abs=0)
    assert chance_fit([np.nan, 2.0]) == pytest.approx(4 / 180, rel=1e-12, abs=0)


@pytest.mark.parametrize(
    ("tol", "match"),
    [
        (2.0, r"`tolerance_deg` to have shape \(\.\.\., K\), got \(\)"),
        ([-1.0], r"`tolerance_deg` to lie in \[0, 90\]"),
        ([95.0], r"`tolerance_deg` to lie in \[0, 90\]"),
    ],
)
def test_chance_fit_refuses_bad_input(tol, match):
    with pytest.raises(ValueError, match=match):
        chance_fit(tol)


# ---------------------------------------------------------------- identification


CU = Phase(
    1,
    "Cu",
    "m-3m",
    Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ("{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}"),
)
TI = Phase(
    2,
    "Ti",
    "6/mmm",
    Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a"),
    ("(0 0 0 1)", "{1 0 -1 0}", "{1 0 -1 2}"),
)
PARENT = quat_from_euler_deg([30.0, 50.0, 10.0])
HALF_TURN_111 = quat_from_axis_angle_deg([1, 1, 1], 180.0)  # crystal frame
TWIN = quat_multiply(HALF_TURN_111, PARENT)


def _tables(quats, pairs, traces, *, sigma=0.3, spread=0.2, phases=None, too_short=None):
    quats = np.asarray(quats, dtype=float)
    g = len(quats)
    phase_of = np.ones(g, dtype=int) if phases is None else np.asarray(phases)
    grains = {
        "grain_id": np.arange(1, g + 1),
        "phase": phase_of,
        "quat": quats,
        "spread_mean_deg": np.full(g, spread),
    }
    pairs = np.asarray(pairs)
    n = len(pairs)
    segments = {
        "segment_id": np.arange(1, n + 1),
        "grain_a": pairs[:, 0] if n else np.zeros(0, int),
        "grain_b": pairs[:, 1] if n else np.zeros(0, int),
        "phase_a": phase_of[pairs[:, 0] - 1] if n else np.zeros(0, int),
        "phase_b": phase_of[pairs[:, 1] - 1] if n else np.zeros(0, int),
        "trace_angle_deg": np.asarray(traces, dtype=float),
        "trace_sigma_deg": np.full(n, sigma),
        "length_um": np.arange(1, n + 1) * 10.0,
        "too_short": np.zeros(n, bool) if too_short is None else np.asarray(too_short),
    }
    return segments, grains


def test_coherent_twin_found_and_classified():
    # Parent (30°, 50°, 10°): (1 1 1) trace 118.489°, dip 27.936°, azimuth 208.489° (the
    # worked values); its twin shares that plane exactly.
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    t = identify(segments, grains, [CU])
    assert t["sigma"].tolist() == ["3"]
    assert_allclose(t["misorientation_deg"], [60.0], rtol=0, atol=1e-6)
    assert t["axis_a"].tolist() == ["[1 1 1]"]
    assert t["family_a"].tolist() == ["{1 1 1}"] and t["family_b"].tolist() == ["{1 1 1}"]
    assert t["plane_a"].tolist() == ["(1 1 1)"]
    assert t["twin_test"].tolist() == ["pass"]
    assert t["identification"].tolist() == ["coherent_twin"]
    assert_allclose(t["trace_deviation_deg"], [118.7 - 118.489], rtol=0, atol=1e-3)
    assert_allclose(t["predicted_dip_deg"], [27.936], rtol=0, atol=1e-3)
    assert_allclose(t["predicted_dip_azimuth_deg"], [208.489], rtol=0, atol=1e-3)
    n = np.stack([t[f"predicted_normal_{a}"] for a in "xyz"], axis=-1)
    assert_allclose(np.linalg.norm(n, axis=1), 1.0, rtol=0, atol=1e-12)
    assert t["normal_deviation_deg"][0] < 1e-6


def test_twin_test_fails_when_the_trace_is_not_the_111_trace():
    # The same Σ3 pair with a trace 20° away from the (1 1 1) trace cannot be coherent.
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [98.5])
    t = identify(segments, grains, [CU])
    assert t["sigma"].tolist() == ["3"]
    assert t["twin_test"].tolist() == ["fail"]
    assert t["identification"][0] != "coherent_twin"


def test_incoherent_twin_plane_of_the_111_zone_is_a_common_plane():
    # A 180° turn about [111] maps every plane of the [111] zone onto itself, so a {1 1 2}
    # of that zone is shared by both crystals (the incoherent twin plane).
    pred = predict_planes(PARENT, [[1, 1, -2]])
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], pred.trace_angle_deg)
    t = identify(segments, grains, [CU])
    assert t["twin_test"].tolist() == ["fail"]
    assert t["family_a"].tolist() == ["{1 1 2}"] and t["family_b"].tolist() == ["{1 1 2}"]
    assert t["identification"][0] in ("identified", "ambiguous")
    assert t["common_planes_within_tolerance"][0] >= 1
    assert_allclose(t["predicted_dip_deg"], pred.dip_deg, rtol=0, atol=1e-9)


def test_single_grain_fit_without_common_plane_is_ambiguous():
    q = random_quat(2, rng=21)
    pred = predict_planes(q[0], CU.candidate_planes().normal_crystal)
    k = int(np.flatnonzero(pred.has_trace)[0])
    segments, grains = _tables(q, [[1, 2]], [pred.trace_angle_deg[k]])
    t = identify(segments, grains, [CU])
    assert t["common_planes_within_tolerance"].tolist() == [0]
    assert t["plane_a"][0] != "" or t["plane_b"][0] != ""
    assert t["identification"].tolist() == ["ambiguous"]
    assert t["candidates_within_tolerance"][0] >= 1
    assert t["trace_deviation_deg"][0] <= t["tolerance_deg"][0]


def test_no_fit_gives_none_and_empty_plane_columns():
    # With only {1 0 0} and a 1° tolerance, pick a trace far from all six predicted traces.
    cube_only = Phase(1, "Cu", "m-3m", CU.lattice, ("{1 0 0}",))
    q = random_quat(2, rng=5)
    traces = np.concatenate(
        [
            predict_planes(qq, cube_only.candidate_planes().normal_crystal).trace_angle_deg
            for qq in q
        ]
    )
    grid = np.arange(0.0, 180.0, 0.5)
    gap = grid[np.argmax(np.min(trace_deviation_deg(grid[:, None], traces[None, :]), axis=1))]
    segments, grains = _tables(q, [[1, 2]], [gap])
    t = identify(segments, grains, [cube_only], max_tolerance_deg=1.0)
    assert t["identification"].tolist() == ["none"]
    assert t["plane_a"].tolist() == [""] and t["plane_b"].tolist() == [""]
    assert np.isnan(t["predicted_dip_deg"]).all() and np.isnan(t["tolerance_deg"]).all()
    assert t["candidates_within_tolerance"].tolist() == [0]


def test_too_short_segments_are_not_matched():
    segments, grains = _tables(
        [PARENT, TWIN], [[1, 2], [1, 2]], [118.5, 118.5], too_short=[True, False]
    )
    t = identify(segments, grains, [CU])
    assert t["identification"].tolist() == ["none", "coherent_twin"]
    assert t["plane_a"][0] == "" and t["twin_test"][0] == ""
    # Σ belongs to the grain pair: a short segment still gets it.
    assert t["sigma"].tolist() == ["3", "3"]
    c = candidates(segments, grains, [CU])
    assert set(c["segment_id"].tolist()) == {2}


def test_swapping_the_grains_swaps_the_planes_and_keeps_the_geometry():
    q = random_quat(2, rng=8)
    pred = predict_planes(q[1], CU.candidate_planes().normal_crystal)
    trace = pred.trace_angle_deg[np.flatnonzero(pred.has_trace)[2]]
    s1, g = _tables(q, [[1, 2]], [trace])
    s2, _ = _tables(q, [[2, 1]], [trace])
    a, b = identify(s1, g, [CU]), identify(s2, g, [CU])
    assert (a["plane_a"].tolist(), a["plane_b"].tolist()) == (
        b["plane_b"].tolist(),
        b["plane_a"].tolist(),
    )
    assert_allclose(a["misorientation_deg"], b["misorientation_deg"], rtol=0, atol=1e-9)
    assert_allclose(a["predicted_dip_deg"], b["predicted_dip_deg"], rtol=0, atol=1e-9)
    assert a["candidates_within_tolerance"].tolist() == b["candidates_within_tolerance"].tolist()
    assert_allclose(a["chance_fit"], b["chance_fit"], rtol=1e-12, atol=0)


def test_symmetric_equivalents_of_either_grain_change_nothing_physical():
    s = quat_from_axis_angle_deg([[0, 0, 1], [1, 1, 1]], [90.0, 120.0])  # cubic rotations
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    a = identify(segments, grains, [CU])
    grains2 = dict(grains, quat=np.stack([quat_multiply(s[0], PARENT), quat_multiply(s[1], TWIN)]))
    b = identify(segments, grains2, [CU])
    for key in (
        "misorientation_deg",
        "trace_deviation_deg",
        "predicted_dip_deg",
        "predicted_dip_azimuth_deg",
        "predicted_normal_z",
        "chance_fit",
    ):
        assert_allclose(a[key], b[key], rtol=0, atol=1e-9)
    for key in ("sigma", "family_a", "identification", "twin_test", "axis_a"):
        assert a[key].tolist() == b[key].tolist()


def test_frame_turned_180_about_z_reverses_only_the_dip_direction():
    # §6: traces alone cannot tell the frame from the one turned 180° about Z.
    half = quat_from_axis_angle_deg([0, 0, 1], 180.0)
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    a = identify(segments, grains, [CU])
    turned = dict(grains, quat=quat_multiply(grains["quat"], half))
    b = identify(segments, turned, [CU])
    assert a["plane_a"].tolist() == b["plane_a"].tolist()
    assert b["identification"].tolist() == ["coherent_twin"]
    assert_allclose(
        np.mod(b["predicted_dip_azimuth_deg"] - a["predicted_dip_azimuth_deg"], 360),
        [180.0],
        rtol=0,
        atol=1e-9,
    )


def test_counts_and_chance_agree_with_the_candidate_table():
    q = random_quat(6, rng=13)
    segments, grains = _tables(
        q, [[1, 2], [3, 4], [5, 6], [1, 6]], [10.0, 70.0, 120.0, 175.0], sigma=0.8
    )
    t = identify(segments, grains, [CU])
    c = candidates(segments, grains, [CU])
    assert len(c["segment_id"]) == 4 * 2 * 25
    for row, sid in enumerate(t["segment_id"]):
        mine = c["segment_id"] == sid
        assert t["candidates_within_tolerance"][row] == c["fits"][mine].sum()
        tol = c["tolerance_deg"][mine & c["has_trace"]]
        assert t["chance_fit"][row] == pytest.approx(
            1 - np.prod(1 - 2 * tol / 180), rel=1e-12, abs=1e-15
        )
    # Fits are exactly the planes within their tolerance, and never a plane with no trace.
    fits = c["has_trace"] & (c["trace_deviation_deg"] <= c["tolerance_deg"])
    assert (c["fits"] == fits).all()
    assert set(t["identification"].tolist()) <= set(IDENTIFICATION_CLASSES)


def test_candidate_table_marks_the_shared_twin_plane():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    c = candidates(segments, grains, [CU])
    row = (c["side"] == "a") & (c["plane"] == "(1 1 1)")
    assert c["fits"][row].tolist() == [True]
    assert c["shared_with"][row][0] != ""
    assert c["shared_normal_deviation_deg"][row][0] < 1e-6
    assert_allclose(c["dip_deg"][row], [27.936], rtol=0, atol=1e-3)


def test_phase_boundary_has_no_misorientation_or_sigma():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7], phases=[1, 2])
    t = identify(segments, grains, [CU, TI])
    assert np.isnan(t["misorientation_deg"]).all()
    assert t["sigma"].tolist() == [""] and t["axis_a"].tolist() == [""]
    assert t["twin_test"].tolist() == [""]
    c = candidates(segments, grains, {1: CU, 2: TI})
    assert (c["side"] == "b").sum() == len(TI.candidate_planes())


def test_hexagonal_same_phase_axis_but_no_sigma():
    q = random_quat(2, rng=4)
    segments, grains = _tables(q, [[1, 2]], [33.0], phases=[2, 2])
    t = identify(segments, grains, [TI])
    assert t["sigma"].tolist() == [""]
    assert t["axis_a"][0].startswith("[") and np.isfinite(t["misorientation_deg"]).all()


def test_empty_segments_give_empty_tables():
    segments, grains = _tables([PARENT], np.zeros((0, 2), int), [])
    t = identify(segments, grains, [CU])
    assert all(len(v) == 0 for v in t.values())
    c = candidates(segments, grains, [CU])
    assert all(len(v) == 0 for v in c.values())


def test_larger_tolerance_never_loses_a_fit():
    q = random_quat(8, rng=17)
    segments, grains = _tables(q, [[1, 2], [3, 4], [5, 6], [7, 8]], [5.0, 50.0, 95.0, 140.0])
    narrow = identify(segments, grains, [CU], k=1.0, max_tolerance_deg=2.0)
    wide = identify(segments, grains, [CU], k=3.0, max_tolerance_deg=5.0)
    assert (wide["candidates_within_tolerance"] >= narrow["candidates_within_tolerance"]).all()
    assert (wide["chance_fit"] >= narrow["chance_fit"]).all()


def test_inputs_are_not_modified():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    before = {k: v.copy() for k, v in (segments | grains).items()}
    identify(segments, grains, [CU])
    for key, value in (segments | grains).items():
        assert (value == before[key]).all()


@pytest.mark.parametrize(
    ("change", "match"),
    [
        (lambda s, g: s.pop("trace_sigma_deg"), r"`segments` to have the column 'trace_sigma_deg'"),
        (lambda s, g: g.pop("quat"), r"`grains` to have the column 'quat'"),
        (
            lambda s, g: s.__setitem__("grain_b", np.array([9])),
            r"`segments` grain_b to be a grain_id of `grains`, got 9 at row 0",
        ),
        (
            lambda s, g: s.__setitem__("phase_a", np.array([5])),
            r"`segments` phase_a to be the id of a phase in `phases` \(1,\), got 5 at row 0",
        ),
        (
            lambda s, g: s.__setitem__("trace_sigma_deg", np.array([np.nan])),
            r"'trace_sigma_deg' to be finite and >= 0 where not too_short, got nan at row 0",
        ),
        (
            lambda s, g: s.__setitem__("trace_angle_deg", np.array([-3.0])),
            r"'trace_angle_deg' to be finite and >= 0",
        ),
        (
            lambda s, g: g.__setitem__("spread_mean_deg", np.array([0.2, np.nan])),
            r"'spread_mean_deg' to be finite and >= 0, got nan at row 1",
        ),
        (
            lambda s, g: g.__setitem__("quat", np.array([[1.0, 0, 0, 0], [np.nan, 0, 0, 0]])),
            r"`grains\['quat'\]` to be finite everywhere, got a non-finite value at index \(1,\)",
        ),
        (
            lambda s, g: g.__setitem__("quat", np.zeros((2, 3))),
            r"'quat' to have shape \(2, 4\), got \(2, 3\)",
        ),
        (
            lambda s, g: s.__setitem__("grain_a", np.array([1, 1])),
            r"column 'grain_a' to have shape \(1,\), got \(2,\)",
        ),
    ],
)
def test_identify_refuses_bad_tables(change, match):
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    change(segments, grains)
    with pytest.raises(ValueError, match=match):
        identify(segments, grains, [CU])


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"k": -2.0}, r"Expected `k` to be a finite number > 0, got -2.0"),
        ({"floor_deg": 0.0}, r"Expected `floor_deg` to be a finite number > 0, got 0.0"),
        ({"max_tolerance_deg": np.nan}, r"Expected `max_tolerance_deg` to be a finite number > 0"),
        ({"sigma_criterion": "loose"}, r"Expected `sigma_criterion` to be one of .*brandon"),
    ],
)
def test_identify_refuses_bad_settings(kwargs, match):
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    with pytest.raises(ValueError, match=match):
        identify(segments, grains, [CU], **kwargs)


@pytest.mark.parametrize(
    ("phases", "match"),
    [
        (3, r"Expected `phases` to be a sequence of Phase records, got int"),
        (["m-3m"], r"Expected `phases` to hold Phase records, got str"),
    ],
)
def test_identify_refuses_bad_phases(phases, match):
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    with pytest.raises(TypeError, match=match):
        identify(segments, grains, phases)


def test_identify_refuses_non_tables():
    with pytest.raises(TypeError, match=r"`segments` and `grains` to be tables"):
        identify([1, 2], {}, [CU])


# ---------------------------------------------------------------- twin-test summary


def _wilson(k, n, z=1.959963984540054):
    # Wilson (1927) score interval, written out as an independent check of scipy's.
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return centre - half, centre + half


def test_twin_test_summary_counts_lengths_and_wilson_interval():
    table = {
        "segment_id": np.array([4, 1, 2, 3, 5]),
        "twin_test": np.array(["pass", "pass", "fail", "", "pass"]),
    }
    segments = {
        "segment_id": np.array([1, 2, 3, 4, 5]),
        "length_um": np.array([10.0, 30.0, 5.0, 20.0, 40.0]),
    }
    s = twin_test_summary(table, segments)
    assert (s.n_sigma3, s.n_pass) == (4, 3)
    assert s.fraction_by_count == pytest.approx(0.75, rel=1e-12, abs=0)
    assert s.fraction_by_length == pytest.approx(70.0 / 100.0, rel=1e-12, abs=0)
    assert (s.length_sigma3_um, s.length_pass_um) == (100.0, 70.0)
    assert_allclose((s.ci_low, s.ci_high), _wilson(3, 4), rtol=1e-9, atol=0)
    assert s.interval_method == "wilson"


def test_twin_test_summary_without_sigma3():
    s = twin_test_summary(
        {"segment_id": np.array([1]), "twin_test": np.array([""])},
        {"segment_id": np.array([1]), "length_um": np.array([3.0])},
    )
    assert s.n_sigma3 == 0 and np.isnan(s.fraction_by_count) and np.isnan(s.ci_low)


def test_twin_test_summary_refuses_unknown_segments():
    with pytest.raises(ValueError, match=r"tested `table` segment_id to be in `segments`, got 8"):
        twin_test_summary(
            {"segment_id": np.array([8]), "twin_test": np.array(["pass"])},
            {"segment_id": np.array([1]), "length_um": np.array([3.0])},
        )
    with pytest.raises(ValueError, match=r"`segments` to have the column 'length_um'"):
        twin_test_summary(
            {"segment_id": np.array([1]), "twin_test": np.array(["pass"])},
            {"segment_id": np.array([1])},
        )
