"""Unit tests of inclination.planes.predict: invariants of the §5 prediction, tolerances, fit."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from inclination.crystal.rotations import (
    quat_from_axis_angle_deg,
    quat_from_euler_deg,
    quat_multiply,
    random_quat,
)
from inclination.errors import SettingError
from inclination.planes import (
    ToleranceSettings,
    chance_fit,
    pair_spread_deg,
    predict_planes,
    shared_plane,
    surface_geometry,
    trace_deviation_deg,
    trace_fit,
    trace_sigma_predicted_deg,
    trace_tolerance_deg,
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
        ({"max_tolerance_deg": 95.0}, r"Expected `max_tolerance_deg` to be <= 90 .*got 95.0"),
        ({"k": "two"}, r"Expected `k` to be a finite number > 0, got 'two'"),
    ],
)
def test_tolerance_refuses_bad_settings(kwargs, match):
    with pytest.raises(SettingError, match=match):
        trace_tolerance_deg(0.5, 0.5, **kwargs)
    with pytest.raises(SettingError, match=match):
        ToleranceSettings(**kwargs)


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
    # Disjoint windows: Σ 2τ/180 (formula); the old product 1 − Π(1 − 2τ/180) is below it.
    centres = np.array([10.0, 50.0, 100.0, 150.0])
    tol = np.array([2.0, 3.0, 1.0, 4.0])
    assert chance_fit(centres, tol) == pytest.approx(2 * tol.sum() / 180, rel=1e-12, abs=0)
    assert chance_fit([np.nan, 20.0], [2.0, 2.0]) == pytest.approx(4 / 180, rel=1e-12, abs=0)
    assert chance_fit([20.0, 5.0], [np.nan, 2.0]) == pytest.approx(4 / 180, rel=1e-12, abs=0)
    # Monte Carlo against the definition (a random trace within τ_i of some θ_i), with
    # overlapping windows, one across 0°/180°, and a shared plane given twice.
    rng = np.random.default_rng(5)
    theta = rng.uniform(0, 180, 400000)
    for centres, tol in (
        (np.array([10.0, 50.0, 100.0, 150.0]), np.array([2.0, 3.0, 1.0, 4.0])),
        (np.array([10.0, 12.0, 13.0, 178.5, 1.0]), np.array([3.0, 2.0, 4.0, 2.5, 1.0])),
        (np.array([40.0, 40.2, 90.0]), np.array([3.0, 3.0, 5.0])),
    ):
        hit = (trace_deviation_deg(theta[:, None], centres) <= tol).any(axis=1).mean()
        assert chance_fit(centres, tol) == pytest.approx(hit, rel=0.02, abs=0)
    # Batched over leading axes.
    batch = chance_fit(np.array([[0.0, 90.0], [0.0, 1.0]]), np.full((2, 2), 5.0))
    assert_allclose(batch, [20 / 180, 11 / 180], rtol=1e-12)


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
        chance_fit(np.zeros(np.shape(tol)), tol)


# ---------------------------------------------------------------- fit and shared planes


@given(st.integers(0, 2**31 - 1))
def test_trace_fit_is_the_rule_on_every_plane(seed):
    # The fit rule written out from its definition (deviation <= k·√(σm² + σp²), floored and
    # capped, σp = spread / sin δ; a plane with no trace never fits), plane by plane.
    rng = np.random.default_rng(seed)
    q = random_quat(6, rng=rng)
    p = predict_planes(q, CUBIC_111)
    theta = rng.uniform(0.0, 180.0, 6)
    sigma = rng.uniform(0.1, 2.0, 6)
    spread = rng.uniform(0.0, 1.0, 6)
    fit = trace_fit(theta[:, None], sigma[:, None], p, spread[:, None], k=2.0, max_tolerance_deg=4)
    for n in range(6):
        for m in range(4):
            dip = np.deg2rad(p.dip_deg[n, m])
            sp = min(spread[n] / np.sin(dip), 90.0) if dip > 0 else 90.0
            tol = min(max(2.0 * np.hypot(sigma[n], sp), 1.0), 4.0)
            line = abs((theta[n] - p.trace_angle_deg[n, m] + 90.0) % 180.0 - 90.0)
            assert fit.tolerance_deg[n, m] == pytest.approx(tol, rel=1e-12, abs=1e-12)
            if p.has_trace[n, m]:
                assert fit.trace_deviation_deg[n, m] == pytest.approx(line, rel=0, abs=1e-9)
            assert fit.fits[n, m] == bool(p.has_trace[n, m] and line <= tol)


@given(st.integers(0, 2**31 - 1))
def test_shared_plane_is_the_bisector_whatever_the_signs(seed):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(20, 3))
    a /= np.linalg.norm(a, axis=1, keepdims=True)
    b = a + rng.normal(scale=0.05, size=(20, 3))
    b /= np.linalg.norm(b, axis=1, keepdims=True)
    flip = np.where(rng.random(20) < 0.5, -1.0, 1.0)[:, None]
    one = shared_plane(a, b)
    # n ≡ −n on either side, and the order of the grains, change nothing.
    for other in (shared_plane(-a, b), shared_plane(a, flip * b), shared_plane(b, a)):
        assert_allclose(other.normal_sample, one.normal_sample, rtol=0, atol=1e-12)
    # The mean of two unit vectors makes equal angles with both (bisector).
    n = one.normal_sample
    assert_allclose(np.abs(np.sum(n * a, 1)), np.abs(np.sum(n * b, 1)), rtol=0, atol=1e-12)
    # Two equal normals share exactly their own plane (§5 through surface_geometry).
    same = shared_plane(a, a)
    assert_allclose(same.normal_sample, surface_geometry(a).normal_sample, rtol=0, atol=1e-15)


def test_pair_spread_is_the_rms():
    # √((σa² + σb²)/2) by hand: (0.3, 0.4) → √0.125; (1, 1) → 1.
    assert_allclose(pair_spread_deg([0.3, 1.0], [0.4, 1.0]), [0.125**0.5, 1.0], rtol=1e-12, atol=0)
