"""The comparator, the frame verdict and full planes (conventions §5, §6)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.stats import binomtest

from inclination.compare import (
    COHERENT_TWIN_ANSWERS,
    SENSES,
    TRUSTED_IDENTIFICATIONS,
    VERDICTS,
    best_measurements,
    boundary_sense,
    coherent_twin_test,
    compare_map,
    frame_verdict,
    full_planes,
    low_index_planes,
    measured_senses,
    predicted_directions,
    reversal_probability,
)
from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import (
    quat_apply,
    quat_from_axis_angle_deg,
    quat_inverse,
    random_quat,
)
from inclination.errors import SettingError

CU = Phase(
    1, "copper", "m-3m", Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90), ("{1 1 1}",)
)


# --------------------------------------------------------------------------- boundary_sense


@given(st.floats(0, 360), st.floats(10, 80), st.floats(-20, 20), st.floats(0.5, 10))
def test_turning_the_measurement_by_180_swaps_the_call(mu, dip, err, sigma):
    a = boundary_sense([mu], [dip], [mu + err], [sigma])
    b = boundary_sense([mu], [dip], [mu + err + 180.0], [sigma])
    assert_allclose(a["log10_likelihood_ratio"], -b["log10_likelihood_ratio"], rtol=1e-9, atol=1e-9)
    swap = {"agrees": "opposite", "opposite": "agrees", "undecided": "undecided"}
    assert b["sense"][0] == swap[a["sense"][0]]
    assert a["sense"][0] in SENSES


def test_sense_calls_and_reasons():
    out = boundary_sense(
        predicted_azimuth_deg=[10, 10, 10, 10, 10, np.nan, 10, 10, 10],
        predicted_dip_deg=[50, 50, 50, 89, 50, 50, 50, 50, 50],
        measured_azimuth_deg=[12, 195, 100, 10, 10, 10, np.nan, 10, 10],
        measured_sigma_deg=[3, 3, 3, 3, 150, 3, 3, 3, 3],
        measured_dip_deg=[50, 50, 50, 50, 50, 50, 50, 88, 75],
        measured_dip_sigma_deg=[1, 1, 1, 1, 1, 1, 1, 2, 1],
    )
    assert out["sense"].tolist() == ["agrees", "opposite"] + ["undecided"] * 7
    assert out["reason"].tolist() == [
        "",
        "",
        "fits neither direction",
        "predicted plane near vertical",
        "weak evidence",
        "no predicted dip direction",
        "no measurement",
        "measured plane near vertical",
        "dip differs from the predicted plane",
    ]
    assert np.isnan(out["log10_likelihood_ratio"][[5, 6]]).all()
    assert_allclose(out["mismatch_deg"][:3], [2.0, 5.0, 90.0], rtol=0, atol=1e-9)


def test_likelihood_ratio_is_the_blunder_mixture_of_the_von_mises_ratio():
    out = boundary_sense(
        [0.0] * 3,
        [45.0] * 3,
        [5.0] * 3,
        [80.0, 60.0, 40.0],
        predicted_azimuth_sigma_deg=0.0,
        min_log10_ratio=0.1,
    )
    assert np.all(np.diff(out["log10_likelihood_ratio"]) > 0)
    # Von Mises ratio ℓ = 2κ cos(φ − μ), κ = 1/σ², mixed with a flip of chance
    # ε = 0.05: ((1−ε)e^{ℓ/2} + εe^{−ℓ/2}) / ((1−ε)e^{−ℓ/2} + εe^{ℓ/2}) (formula).
    ell = 2 / math.radians(60.0) ** 2 * math.cos(math.radians(5.0))
    lr = (0.95 * math.exp(ell / 2) + 0.05 * math.exp(-ell / 2)) / (
        0.95 * math.exp(-ell / 2) + 0.05 * math.exp(ell / 2)
    )
    assert_allclose(out["log10_likelihood_ratio"][1], math.log10(lr), rtol=1e-12, atol=0)


@given(
    st.floats(0, 360),
    st.floats(0, 89),
    st.floats(-180, 180),
    st.floats(0.01, 30),
    st.sampled_from([0.01, 0.05, 0.2]),
)
def test_no_boundary_exceeds_the_bound_of_the_blunder_rate(mu, dip, err, sigma, eps):
    out = boundary_sense([mu], [dip], [mu + err], [sigma], blunder_rate=eps)
    # log10((1 − ε)/ε): the odds of a call that is wrong with probability ε (formula).
    assert abs(out["log10_likelihood_ratio"][0]) <= math.log10((1 - eps) / eps) + 1e-12


def test_a_precise_blunder_says_at_most_the_bound():
    # A mismatched entry: measured exactly opposite with σ = 0.1° (old model: 10^-4).
    out = boundary_sense([30.0], [50.0], [210.0], [0.1], predicted_azimuth_sigma_deg=0.05)
    assert out["sense"][0] == "opposite"
    assert_allclose(out["log10_likelihood_ratio"][0], -math.log10(19.0), rtol=1e-9, atol=0)


def test_steep_planes_carry_their_reversal_probability():
    # Φ((δ − 90°)/σ) (normal distribution, scipy.stats.norm.cdf).
    from scipy.stats import norm

    dips = np.array([40.0, 80.0, 86.0])
    p = reversal_probability(dips, 3.0)
    assert_allclose(p, norm.cdf((dips - 90.0) / 3.0), rtol=1e-12, atol=0)
    out = boundary_sense(
        [0.0] * 3,
        dips,
        [0.0] * 3,
        [1.0] * 3,
        measured_dip_deg=dips,
        measured_dip_sigma_deg=[3.0] * 3,
        n_sigma_vertical=1.0,
        predicted_dip_sigma_deg=1e-3,
    )
    # The flip chance is ε ⊕ r = ε(1 − r) + r(1 − ε); the bound is (1 − q)/q.
    q = 0.05 * (1 - p) + p * 0.95
    assert_allclose(out["log10_likelihood_ratio"], np.log10((1 - q) / q), rtol=1e-9)
    assert_allclose(out["reversal_probability"], p, rtol=1e-9, atol=1e-15)
    assert out["sense"].tolist() == ["agrees", "agrees", "undecided"]
    # The section's own figure (a trace nearly along the line) wins over the dip's.
    own = boundary_sense(
        [0.0],
        [50.0],
        [0.0],
        [1.0],
        measured_dip_deg=[40.0],
        measured_dip_sigma_deg=[3.0],
        measured_reversal_probability=[0.3],
    )
    assert_allclose(own["reversal_probability"], [0.3], rtol=1e-12)
    assert own["sense"][0] == "undecided"


def test_sense_argument_errors():
    with pytest.raises(ValueError, match="`predicted_dip_deg` to have length 2"):
        boundary_sense([1.0, 2.0], [1.0], [1.0, 2.0], [1.0, 1.0])
    with pytest.raises(SettingError, match="`n_sigma_vertical` to be a finite number > 0"):
        boundary_sense([1.0], [1.0], [1.0], [1.0], n_sigma_vertical=0)
    with pytest.raises(ValueError, match="σ of the prediction >= 0"):
        boundary_sense([1.0], [1.0], [1.0], [-1.0])


# --------------------------------------------------------------------------- frame_verdict


B = math.log10(19.0)  # log10((1 − ε)/ε) at ε = 0.05 (formula)


def _senses(n_agree, n_oppose, n_undecided=0, strength=B, **columns):
    return {
        "sense": np.array(
            ["agrees"] * n_agree + ["opposite"] * n_oppose + ["undecided"] * n_undecided
        ),
        "log10_likelihood_ratio": np.array(
            [strength] * n_agree + [-strength] * n_oppose + [0.3] * n_undecided
        ),
        **columns,
    }


@pytest.mark.parametrize(
    ("counts", "verdict"),
    [
        ((12, 0, 3), "as_declared"),
        ((0, 9, 1), "turned_180_about_normal"),
        ((11, 1, 0), "as_declared"),  # one slip in twelve is within the blunder rate
        ((10, 1, 0), "as_declared"),  # ten agreeing boundaries and one blunder
        ((6, 6, 0), "inconsistent"),
        ((8, 4, 0), "inconsistent"),
        ((1, 0, 4), "undecided"),  # one boundary alone never decides a map
        ((0, 0, 5), "undecided"),
        ((0, 0, 0), "undecided"),
    ],
)
def test_frame_verdicts(counts, verdict):
    v = frame_verdict(_senses(*counts))
    assert v.verdict == verdict
    assert v.verdict in VERDICTS
    assert (v.n_agree, v.n_opposite, v.n_undecided) == counts
    assert v.sentence.startswith(f"Of {sum(counts)} ")
    assert v.as_dict()["verdict"] == verdict


def test_ten_agreeing_boundaries_outweigh_a_simulated_blunder():
    # The blunder is a real row of the sense model: a precise, opposite entry.
    rows = boundary_sense(
        [30.0] * 11,
        [50.0] * 11,
        [31.0] * 10 + [210.0],
        [0.5] * 11,
        predicted_azimuth_sigma_deg=0.2,
    )
    assert rows["sense"].tolist() == ["agrees"] * 10 + ["opposite"]
    v = frame_verdict(rows)
    assert v.verdict == "as_declared"
    assert_allclose(v.log10_likelihood_ratio, 9 * B, rtol=1e-9, atol=0)


def test_segments_of_one_boundary_count_once():
    # Six segments of two grain pairs (collinear pieces, both faces of a lamella).
    v = frame_verdict(_senses(6, 0, witness=np.array(["1-2"] * 4 + ["1-3"] * 2)))
    assert (v.n_agree, v.n_opposite, v.n_undecided) == (2, 0, 0)
    assert_allclose(v.log10_likelihood_ratio, 2 * B, rtol=1e-12, atol=0)
    assert v.sentence.startswith("Of 2 boundaries")
    # Six pieces of one lamella are one witness: 10^1.28 does not decide a map.
    one = frame_verdict(_senses(6, 0, witness=np.array(["1-2"] * 6)))
    assert (one.n_agree, one.verdict) == (1, "undecided")
    assert frame_verdict(_senses(6, 0)).verdict == "as_declared"
    # A boundary whose pieces disagree says nothing.
    w = frame_verdict(_senses(1, 1, witness=np.array(["1-2", "1-2"])))
    assert (w.n_agree, w.n_opposite, w.n_undecided) == (0, 0, 1)


def test_a_section_turned_against_the_others_is_named_not_read_as_a_turned_frame():
    section = np.array([0] * 6 + [1] * 4)
    v = frame_verdict(
        {
            "sense": np.array(["agrees"] * 6 + ["opposite"] * 4),
            "log10_likelihood_ratio": np.array([B] * 6 + [-B] * 4),
            "section": section,
        },
        section_names=["north face", "south face"],
    )
    assert v.verdict == "as_declared"
    assert v.suspect_sections == ("south face",)
    assert (v.n_agree, v.n_opposite) == (6, 0)
    assert "check this section's viewer side and tilt" in v.sentence
    assert "south face" in v.sentence
    # One section alone turned the other way names the section too, when no other
    # section contradicts it the frame itself is the explanation, with the caveat.
    t = frame_verdict(_senses(0, 8, section=np.zeros(8, int)))
    assert t.verdict == "turned_180_about_normal" and t.suspect_sections == ()
    assert "viewer side and tilt" in t.sentence


def test_verdict_p_values_match_scipy_binomial_tests():
    v = frame_verdict(_senses(10, 2))
    # Sign test of the majority (scipy.stats.binomtest, one-sided, p = 1/2).
    assert_allclose(
        v.p_value_sign, binomtest(10, 12, 0.5, alternative="greater").pvalue, rtol=1e-12, atol=0
    )
    # Split test of the minority against the blunder rate ε = 0.05.
    assert_allclose(
        v.p_value_split, binomtest(2, 12, 0.05, alternative="greater").pvalue, rtol=1e-12, atol=0
    )


def test_frame_verdict_errors():
    with pytest.raises(SettingError, match=r"`blunder_rate` to be in \(0, 0.5\)"):
        frame_verdict(_senses(1, 0), blunder_rate=0.5)
    with pytest.raises(SettingError, match=r"`alpha` to be in \(0, 1\)"):
        frame_verdict(_senses(1, 0), alpha=0.0)
    with pytest.raises(SettingError, match="`min_log10_ratio` to be a finite number > 0"):
        frame_verdict(_senses(1, 0), min_log10_ratio=float("nan"))
    with pytest.raises(ValueError, match="`sense` to be one of"):
        frame_verdict({"sense": np.array(["yes"]), "log10_likelihood_ratio": np.array([1.0])})


# --------------------------------------------------------------------------- measurements


def test_best_measurement_per_segment():
    a = {
        "segment_id": np.array([3, 1, -1]),
        "measured_dip_deg": np.array([50.0, 60.0, 1.0]),
        "measured_dip_sigma_deg": np.array([3.0, 1.0, 0.1]),
        "status": np.array(["measured", "ill_conditioned", "unmatched"]),
    }
    b = {
        "segment_id": np.array([3, 1]),
        "measured_dip_deg": np.array([52.0, 1.0]),
        "measured_dip_sigma_deg": np.array([1.0, 0.5]),
        "status": np.array(["measured", "ambiguous"]),
    }
    out = best_measurements(a, b)
    assert out["segment_id"].tolist() == [1, 3]
    assert out["measured_dip_deg"].tolist() == [60.0, 52.0]
    assert best_measurements() == {}


# --------------------------------------------------------------------------- full planes


def test_low_index_planes_count():
    # Primitive (hkl) with |h|,|k|,|l| <= 3, one of each ± pair: (7³ − 1)/2 = 171 minus
    # the 13·... non-primitive ones; counted by brute force with math.gcd.
    count = (
        sum(
            1
            for h in range(-3, 4)
            for k in range(-3, 4)
            for m in range(-3, 4)
            if (h, k, m) != (0, 0, 0) and math.gcd(math.gcd(abs(h), abs(k)), abs(m)) == 1
        )
        // 2
    )
    hkl, normals = low_index_planes(CU.lattice, max_index=3)
    assert len(hkl) == count
    assert_allclose(np.linalg.norm(normals, axis=1), 1.0, rtol=0, atol=1e-12)
    with pytest.raises(SettingError, match="`max_index` to be an integer >= 1"):
        low_index_planes(CU.lattice, max_index=0)


def _twin_pair(gen):
    qa = random_quat(1, rng=gen)[0]
    # Σ3: 60° about a <111> (passive: q_b = r ⊗ q_a with r the crystal rotation).
    r = quat_from_axis_angle_deg(np.array([1.0, 1.0, 1.0]) / math.sqrt(3), 60.0)
    from inclination.crystal.rotations import quat_multiply

    qb = quat_multiply(r, qa)
    return qa, qb


def test_coherent_twin_test_is_calibrated_and_has_three_answers():
    # True coherent twins measured with σ per direction (normal errors): the angle is
    # Rayleigh (scipy.stats.rayleigh), so "no" comes at most at the rate α = 0.01 when
    # the plane's own tolerance is small against σ.
    from scipy.stats import rayleigh

    rng = np.random.default_rng(3)
    sigma = 3.0
    d = np.hypot(*rng.normal(0.0, sigma, (2, 200000)))
    answer = coherent_twin_test(d, sigma, 1e-9)
    assert abs((answer == "no").mean() - rayleigh.sf(3.0349 * sigma, scale=sigma)) < 0.002
    assert abs((answer == "no").mean() - 0.01) < 0.002
    # With a tolerance t the rejection moves out to t + c: fewer "no" still.
    assert (coherent_twin_test(d, sigma, 5.0) == "no").mean() < 0.01
    # The demo's case (5–7° off at σ ≈ 3.3°): not "no", but a plane 10° off would
    # fit as well (c = 3.03σ = 10° > t), so it cannot tell; at σ = 1.5° it is a twin.
    assert coherent_twin_test([5.0, 7.0], 3.3, 5.0).tolist() == ["cannot_tell"] * 2
    assert coherent_twin_test([5.0, 7.0], 1.5, 5.0).tolist() == ["yes", "yes"]
    # 10° off a precise measurement: no; a very uncertain one cannot tell.
    assert coherent_twin_test([10.0, 10.0], [0.5, 6.0], 5.0).tolist() == ["no", "cannot_tell"]
    assert set(COHERENT_TWIN_ANSWERS) == {"yes", "no", "cannot_tell"}


def test_full_planes_of_a_coherent_twin_and_a_tilted_one():
    gen = np.random.default_rng(8)
    qa, qb = _twin_pair(gen)
    # The (1 1 1) plane of grain a in S: n_S = gᵀ n_C.
    n111 = quat_apply(quat_inverse(qa), np.array([1.0, 1.0, 1.0]) / math.sqrt(3))
    tilt = quat_apply(quat_from_axis_angle_deg(np.cross(n111, [0, 0, 1.0]), 10.0), n111)
    measured = {
        "segment_id": np.array([5, 6]),
        "normal_x": np.array([n111[0], tilt[0]]),
        "normal_y": np.array([n111[1], tilt[1]]),
        "normal_z": np.array([n111[2], tilt[2]]),
    }
    boundaries = {
        "segment_id": np.array([6, 5]),
        "grain_a": np.array([1, 1]),
        "grain_b": np.array([2, 2]),
        "sigma": np.array([3, 3]),
    }
    grains = {"grain_id": np.array([2, 1]), "phase": np.array([1, 1]), "quat": np.stack([qb, qa])}
    out = full_planes(measured, boundaries, grains, {1: CU})
    assert out["plane_a_measured"][0] == "(1 1 1)"
    assert_allclose(out["plane_a_deviation_deg"][0], 0.0, rtol=0, atol=1e-6)
    # The twin plane is (1 1 1) in grain b as well (it is the rotation axis).
    assert out["plane_b_measured"][0] == "(1 1 1)"
    assert_allclose(out["twin_plane_deviation_deg"], [0.0, 10.0], rtol=0, atol=1e-6)
    assert out["coherent_twin"].tolist() == ["yes", "no"]
    # Σ given as an integer reads the same.
    again = full_planes(measured, {**boundaries, "sigma": np.array([3, 3])}, grains, {1: CU})
    assert again["coherent_twin"].tolist() == ["yes", "no"]
    na = np.stack([out["normal_a_x"], out["normal_a_y"], out["normal_a_z"]], -1)
    assert_allclose(np.linalg.norm(na, axis=1), 1.0, rtol=0, atol=1e-12)


def test_full_planes_of_a_general_boundary_has_no_twin_columns():
    measured = {
        "segment_id": np.array([0]),
        "normal_x": np.array([0.0]),
        "normal_y": np.array([0.0]),
        "normal_z": np.array([1.0]),
    }
    boundaries = {
        "segment_id": np.array([0]),
        "grain_a": np.array([1]),
        "grain_b": np.array([2]),
        "sigma": np.array([-1]),
    }
    grains = {
        "grain_id": np.array([1, 2]),
        "phase": np.array([1, 1]),
        "quat": np.array([[1.0, 0, 0, 0], [math.cos(0.2), 0, 0, math.sin(0.2)]]),
    }
    out = full_planes(measured, boundaries, grains, {1: CU})
    assert out["plane_a_measured"].tolist() == ["(0 0 1)"]
    assert out["coherent_twin"].tolist() == [""]
    assert np.isnan(out["twin_plane_deviation_deg"]).all()
    with pytest.raises(ValueError, match="every measured segment in `boundaries`"):
        full_planes({**measured, "segment_id": np.array([9])}, boundaries, grains, {1: CU})
    with pytest.raises(ValueError, match="every grain of `boundaries` in `grains`"):
        full_planes(measured, {**boundaries, "grain_b": np.array([7])}, grains, {1: CU})
    with pytest.raises(SettingError, match="`coherent_tolerance_deg` to be a finite number > 0"):
        full_planes(measured, boundaries, grains, {1: CU}, coherent_tolerance_deg=0.0)


def test_hexagonal_planes_are_written_with_four_indices():
    ti = Phase(
        2,
        "titanium",
        "6/mmm",
        Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a"),
        ("{1 0 -1 0}",),
    )
    measured = {
        "segment_id": np.array([0]),
        "normal_x": np.array([0.0]),
        "normal_y": np.array([0.0]),
        "normal_z": np.array([1.0]),
    }
    boundaries = {"segment_id": np.array([0]), "grain_a": np.array([1]), "grain_b": np.array([2])}
    grains = {
        "grain_id": np.array([1, 2]),
        "phase": np.array([2, 2]),
        "quat": np.array([[1.0, 0, 0, 0], [0.0, 1.0, 0, 0]]),
    }
    out = full_planes(measured, boundaries, grains, {2: ti})
    assert out["plane_a_measured"].tolist() == ["(0 0 0 1)"]
    assert_allclose(out["plane_a_deviation_deg"], [0.0], rtol=0, atol=1e-9)


# --------------------------------------------------------------------------- trust rules


def _identification():
    classes = ["coherent_twin", "identified", "ambiguous", "none"]
    return {
        "segment_id": np.array([10, 11, 12, 13]),
        "identification": np.array(classes),
        "predicted_dip_azimuth_deg": np.array([40.0, 100.0, 200.0, 300.0]),
        "predicted_dip_deg": np.array([50.0, 60.0, 70.0, 45.0]),
        "tolerance_deg": np.array([1.0, 2.0, 3.0, 5.0]),
        "grain_a": np.array([1, 1, 1, 1]),
        "grain_b": np.array([2, 2, 2, 2]),
        "sigma": np.array(["3", "", "", ""]),
    }


def test_only_pinned_down_planes_keep_their_dip_direction():
    p = predicted_directions(_identification(), [13, 12, 11, 10])
    assert p.segment_id.tolist() == [13, 12, 11, 10]
    assert p.trusted.tolist() == [False, False, True, True]
    assert set(TRUSTED_IDENTIFICATIONS) == {"coherent_twin", "identified"}
    assert_allclose(p.dip_azimuth_deg, [np.nan, np.nan, 100.0, 40.0], rtol=0, atol=0)
    # A turn about Z keeps dips: every row keeps its predicted dip.
    assert_allclose(p.dip_deg, [45.0, 70.0, 60.0, 50.0], rtol=0, atol=0)
    # One σ of a tolerance with coverage factor 2: σ = τ/2.
    assert_allclose(p.azimuth_sigma_deg, [2.5, 1.5, 1.0, 0.5], rtol=0, atol=0)
    assert_allclose(p.dip_sigma_deg, p.azimuth_sigma_deg, rtol=0, atol=0)
    with pytest.raises(ValueError, match=r"`identification`, got segment_id 14 at index \(1,\)"):
        predicted_directions(_identification(), [10, 14])


def _measured(segment_id, azimuth_deg):
    n = len(segment_id)
    return {
        "segment_id": np.asarray(segment_id),
        "normal_x": np.zeros(n),
        "normal_y": np.full(n, 0.6),
        "normal_z": np.full(n, 0.8),
        "dip_direction_azimuth_deg": np.asarray(azimuth_deg, float),
        "dip_direction_sigma_deg": np.full(n, 2.0),
        "measured_dip_deg": np.asarray([50.0, 60.0, 70.0, 45.0, 50.0][:n]),
        "measured_dip_sigma_deg": np.full(n, 1.0),
    }


def test_measured_senses_follow_the_trust_rules():
    # Trusted rows decide (the turned one is "opposite"); the ambiguous and the
    # unidentified rows cannot, however well their measurement fits.
    senses = measured_senses(
        _measured([10, 11, 12, 13], [41.0, 281.0, 200.0, 300.0]), _identification()
    )
    assert senses["segment_id"].tolist() == [10, 11, 12, 13]
    assert senses["sense"].tolist() == ["agrees", "opposite", "undecided", "undecided"]
    assert senses["reason"].tolist()[2:] == ["no predicted dip direction"] * 2
    # The σ passed on is the combination of the measured σ and τ/2 (von Mises odds,
    # 2κ cos Δ / ln 10 with 1/κ = σ_m² + (τ/2)², hand-derived as in boundary_sense).
    # Mixed with the blunder rate ε = 0.05 (the bounded ratio of boundary_sense).
    kappa = 1.0 / (math.radians(2.0) ** 2 + math.radians(0.5) ** 2)
    ell = 2.0 * kappa * math.cos(math.radians(1.0))
    expected = np.logaddexp(math.log(0.95) + ell / 2, math.log(0.05) - ell / 2) - np.logaddexp(
        math.log(0.95) - ell / 2, math.log(0.05) + ell / 2
    )
    assert_allclose(
        senses["log10_likelihood_ratio"][0], expected / math.log(10.0), rtol=1e-12, atol=0
    )
    # Each row's witness is its unordered grain pair.
    assert all("-" in w for w in senses["witness"])


def test_compare_map_leaves_out_unidentified_segments():
    grains = {
        "grain_id": np.array([1, 2]),
        "phase": np.array([1, 1]),
        "quat": np.array([[1.0, 0, 0, 0], [0.0, 1, 0, 0]]),
    }
    measured = _measured([10, 99, 11], [41.0, 41.0, 101.0])
    c = compare_map(measured, _identification(), grains, {1: CU}, coherent_tolerance_deg=4.0)
    assert c.measured["segment_id"].tolist() == [10, 11]
    assert c.senses["segment_id"].tolist() == [10, 11]
    assert c.planes_full["segment_id"].tolist() == [10, 11]
    assert c.senses["sense"].tolist() == ["agrees", "agrees"]
    assert c.verdict == frame_verdict(c.senses)
    # Σ3 comes from the identification: the coherent-twin test runs on segment 10 only.
    assert c.planes_full["coherent_twin"][1] == ""
    assert c.planes_full["coherent_twin"][0] in ("yes", "no")


def test_reversal_probability_is_calibrated_by_monte_carlo():
    # Planes near vertical: true signed dip δ_t uniform over 84–96° (beyond 90°: the
    # plane dips the other way), measured with a normal error σ and folded into
    # [0, 90]. The stated chance of reversal must match the observed rate of
    # reversed directions within a factor of 1.5, bin by bin.
    rng = np.random.default_rng(11)
    sigma = 1.5
    true = rng.uniform(84.0, 96.0, 400000)
    seen = true + rng.normal(0.0, sigma, true.size)
    folded = 90.0 - np.abs(90.0 - seen)
    reversed_ = (true > 90.0) != (seen > 90.0)
    stated = reversal_probability(folded, sigma)
    edges = np.array([0.02, 0.05, 0.1, 0.2, 0.35, 0.5])
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        sel = (stated >= lo) & (stated < hi)
        assert sel.sum() > 1000
        ratio = reversed_[sel].mean() / stated[sel].mean()
        assert 1 / 1.5 < ratio < 1.5, (lo, hi, ratio)
