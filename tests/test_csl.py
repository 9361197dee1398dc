"""Unit and property tests of inclination.crystal.csl."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from inclination.crystal.csl import (
    CSLRelation,
    classify_hexagonal_misorientation,
    classify_misorientation,
    classify_misorientation_quat,
    cubic_csl_relations,
    hexagonal_twins,
    max_deviation_deg,
    relation_deviation_deg,
)
from inclination.crystal.rotations import (
    quat_as_matrix,
    quat_from_axis_angle_deg,
    quat_inverse,
    quat_multiply,
    random_quat,
)
from inclination.crystal.symmetry import disorientation, proper_rotations

RELATIONS_29 = {r.label: r for r in cubic_csl_relations(29)}


def _perturbed(quat, angle_deg, rng):
    """The relation followed by a rotation of angle_deg about a random axis."""
    axis = np.random.default_rng(rng).normal(size=3)
    return quat_multiply(quat_from_axis_angle_deg(axis, angle_deg), np.asarray(quat))


def _brute_force_deviation_deg(m, rel, laue="m-3m", setting="x_parallel_a"):
    """min over s_a, s_b and exchange of angle(M ⊗ (s_a ⊗ R ⊗ s_b)⁻¹), no coset shortcut."""
    sym = proper_rotations(laue, setting=setting)
    best = np.zeros(len(m))
    for r in (np.asarray(rel), quat_inverse(rel)):
        for sa in sym:
            for sb in sym:
                equiv = quat_multiply(quat_multiply(sa, r), sb)
                best = np.maximum(best, np.abs(m @ equiv))
    return np.rad2deg(2 * np.arccos(np.clip(best, 0, 1)))


# --- generated cubic relations ------------------------------------------------------------


def test_relations_are_sorted_lettered_and_in_disorientation_form():
    relations = cubic_csl_relations(49)
    assert all(isinstance(r, CSLRelation) for r in relations)
    labels = [r.label for r in relations]
    assert len(set(labels)) == len(labels)
    assert relations[0] == CSLRelation(1, "1", 0.0, (1, 0, 0), (1.0, 0.0, 0.0, 0.0))
    keys = [(r.sigma, r.angle_deg) for r in relations]
    assert keys == sorted(keys)
    for r in relations:
        assert r.sigma % 2 == 1
        h, k, low = r.axis
        assert h >= k >= low >= 0 and math.gcd(h, k, low) == 1
        q = np.array(r.quat)
        assert_allclose(q[0], math.cos(math.radians(r.angle_deg) / 2), rtol=0, atol=1e-12)
        if r.sigma > 1:
            unit = np.array(r.axis) / np.linalg.norm(r.axis)
            assert_allclose(q[1:] / np.linalg.norm(q[1:]), unit, rtol=0, atol=1e-9)
        # Already a disorientation: reducing it again changes nothing.
        d = disorientation([1.0, 0.0, 0.0, 0.0], q, "m-3m")
        assert_allclose(d.angle_deg, r.angle_deg, rtol=0, atol=1e-9)


def test_every_relation_is_a_coincidence_rotation_of_its_sigma():
    # A cubic CSL rotation matrix is an integer matrix divided by Σ, and by no
    # smaller odd number (Grimmer, Bollmann & Warrington 1974, Acta Cryst. A30, 197).
    for r in cubic_csl_relations(49):
        g = quat_as_matrix(np.array(r.quat))
        scaled = g * r.sigma
        assert_allclose(scaled, np.round(scaled), rtol=0, atol=1e-9)
        for d in range(1, r.sigma):
            if r.sigma % d == 0:
                assert not np.allclose(g * d, np.round(g * d), rtol=0, atol=1e-9)


def test_relations_of_one_sigma_are_distinct():
    relations = cubic_csl_relations(49)
    for i, a in enumerate(relations):
        for b in relations[i + 1 :]:
            if a.sigma == b.sigma:
                dev = relation_deviation_deg(np.array(a.quat), b.quat, "m-3m")
                assert dev > 0.1, (a.label, b.label)


def test_smaller_limit_gives_a_prefix_with_the_same_labels():
    big = cubic_csl_relations(49)
    small = cubic_csl_relations(25)
    assert small == tuple(r for r in big if r.sigma <= 25)


@pytest.mark.parametrize("bad", [0, 200, 3.0, True, "9"])
def test_max_sigma_errors(bad):
    with pytest.raises(
        ValueError, match=r"Expected `max_sigma` to be a whole number from 1 to 199"
    ):
        cubic_csl_relations(bad)


def test_max_deviation_criteria():
    # Brandon (1966) 15°/√Σ; Palumbo & Aust (1990) 15°/Σ^(5/6); hand-evaluated.
    assert_allclose(max_deviation_deg([1, 3, 29]), [15.0, 8.660254, 2.785430], rtol=0, atol=1e-6)
    assert_allclose(
        max_deviation_deg([1, 3, 29], criterion="palumbo-aust"),
        [15.0, 6.004685, 0.906622],
        rtol=0,
        atol=1e-6,
    )
    with pytest.raises(
        ValueError, match=r"Expected `criterion` to be one of \('brandon', 'palumbo-aust'\)"
    ):
        max_deviation_deg(3, criterion="brandon-1966")
    with pytest.raises(ValueError, match=r"Expected `sigma` to be >= 1 everywhere"):
        max_deviation_deg([0, 3])


# --- deviation from a relation ------------------------------------------------------------


@pytest.mark.parametrize("label", ["3", "9", "13b", "17b", "27b", "39b"])
def test_deviation_matches_brute_force_double_coset(label):
    # Σ39b (50.13° about <321>) is not equivalent to its inverse: no 2-fold axis is
    # normal to <321>, so grain exchange brings in a second double coset.
    rel = next(r for r in cubic_csl_relations(39) if r.label == label)
    m = random_quat(300, rng=3)
    assert_allclose(
        relation_deviation_deg(m, rel.quat, "m-3m"),
        _brute_force_deviation_deg(m, rel.quat),
        rtol=0,
        atol=1e-6,
    )


def test_deviation_for_a_hexagonal_twin_matches_brute_force():
    twin = hexagonal_twins(1.587)[1]
    m = random_quat(200, rng=4)
    assert_allclose(
        relation_deviation_deg(m, twin.quat, "6/mmm"),
        _brute_force_deviation_deg(m, twin.quat, "6/mmm"),
        rtol=0,
        atol=1e-6,
    )


unit_vectors = st.lists(st.floats(-1, 1), min_size=3, max_size=3).filter(
    lambda v: np.linalg.norm(v) > 0.2
)


@given(
    axis=unit_vectors,
    delta=st.floats(0.0, 5.0),
    i=st.integers(0, 23),
    j=st.integers(0, 23),
    label=st.sampled_from(["3", "5", "11", "13a", "29b"]),
    exchange=st.booleans(),
)
def test_deviation_is_invariant_under_symmetry_and_exchange(axis, delta, i, j, label, exchange):
    rel = RELATIONS_29[label]
    sym = proper_rotations("m-3m")
    m = quat_multiply(quat_from_axis_angle_deg(axis, delta), np.array(rel.quat))
    dev = relation_deviation_deg(m, rel.quat, "m-3m")
    # A misorientation turned by δ from a relation deviates from it by at most δ.
    assert dev <= delta + 1e-5
    moved = quat_multiply(quat_multiply(sym[i], m), sym[j])
    if exchange:
        moved = quat_inverse(moved)
    assert_allclose(relation_deviation_deg(moved, rel.quat, "m-3m"), dev, rtol=0, atol=1e-5)


def test_deviation_errors():
    q = np.array(cubic_csl_relations(3)[1].quat)
    with pytest.raises(
        ValueError, match=r"Expected `relation_quat` to have shape \(4,\), got \(1, 4\)"
    ):
        relation_deviation_deg(q, q[None, :], "m-3m")
    with pytest.raises(ValueError, match=r"Expected `misorientation` to be finite everywhere"):
        relation_deviation_deg([np.nan, 0, 0, 1], q, "m-3m")
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of"):
        relation_deviation_deg(q, q, "fcc")


# --- classification -----------------------------------------------------------------------


def test_exact_relations_classify_as_themselves():
    relations = cubic_csl_relations(29)
    m = np.array([r.quat for r in relations[1:]])
    match = classify_misorientation_quat(m)
    assert match.label.tolist() == [r.label for r in relations[1:]]
    assert match.sigma.tolist() == [r.sigma for r in relations[1:]]
    assert_allclose(match.deviation_deg, 0.0, rtol=0, atol=1e-5)


def test_symmetric_variants_classify_alike():
    rel = next(r for r in cubic_csl_relations(29) if r.label == "13b")
    sym = proper_rotations("m-3m")
    base = _perturbed(rel.quat, 1.0, 7)
    variants = np.array(
        [quat_multiply(quat_multiply(sym[i], base), sym[-1 - i]) for i in range(24)]
    )
    match = classify_misorientation_quat(np.vstack([variants, quat_inverse(variants)]))
    assert set(match.label.tolist()) == {"13b"}
    assert_allclose(match.deviation_deg, match.deviation_deg[0], rtol=0, atol=1e-6)


def test_criterion_decides_near_the_limit():
    sigma3 = cubic_csl_relations(3)[1]
    # 7° from Σ3 about [111] itself: inside Brandon (8.66°), outside Palumbo–Aust (6.00°).
    m = quat_from_axis_angle_deg([1, 1, 1], 67.0)
    assert classify_misorientation_quat(m).label == "3"
    assert_allclose(classify_misorientation_quat(m).deviation_deg, 7.0, rtol=0, atol=1e-6)
    strict = classify_misorientation_quat(m, criterion="palumbo-aust")
    assert strict.label != "3"
    assert_allclose(relation_deviation_deg(m, sigma3.quat, "m-3m"), 7.0, rtol=0, atol=1e-6)


def test_lowest_sigma_wins_and_none_is_empty():
    # 12.68° about <100> is Σ41a exactly, but within Brandon's 15° of Σ1.
    m = quat_from_axis_angle_deg([[1, 0, 0], [1, 2, 3]], [12.680383, 45.0])
    match = classify_misorientation_quat(m, max_sigma=49)
    assert match.label.tolist() == ["1", ""]
    assert match.sigma.tolist() == [1, -1]
    assert np.isnan(match.deviation_deg[1]) and np.isnan(match.max_deviation_deg[1])
    assert_allclose(match.max_deviation_deg[0], 15.0, rtol=0, atol=1e-12)
    empty = classify_misorientation_quat(np.zeros((0, 4)))
    assert empty.label.shape == (0,)


def test_angle_axis_form_equals_quaternion_form():
    m = random_quat(500, rng=9)
    d = disorientation([1.0, 0, 0, 0], m, "m-3m")
    by_quat = classify_misorientation_quat(m, max_sigma=49)
    by_angle = classify_misorientation(d.angle_deg, d.axis_crystal, max_sigma=49)
    assert by_angle.label.tolist() == by_quat.label.tolist()
    assert_allclose(by_angle.deviation_deg, by_quat.deviation_deg, rtol=0, atol=1e-6)
    scalar = classify_misorientation(60.0, [1, 1, 1])
    assert scalar.label.shape == () and str(scalar.label) == "3"


def test_classification_errors():
    with pytest.raises(
        ValueError, match=r"Expected `axis_crystal` to have shape \(2, 3\) to match"
    ):
        classify_misorientation([60.0, 30.0], [1, 1, 1])
    with pytest.raises(ValueError, match=r"Expected `axis_crystal` to be non-zero vectors"):
        classify_misorientation(60.0, [0, 0, 0])
    with pytest.raises(ValueError, match=r"Expected `angle_deg` to be finite everywhere"):
        classify_misorientation(np.nan, [1, 1, 1])
    with pytest.raises(ValueError, match=r"Expected `criterion` to be one of"):
        classify_misorientation_quat([1.0, 0, 0, 0], criterion="strict")
    with pytest.raises(ValueError, match=r"Expected `misorientation` to have shape \(\.\.\., 4\)"):
        classify_misorientation_quat([1.0, 0, 0])


# --- hexagonal twins ----------------------------------------------------------------------


@pytest.mark.parametrize("setting", ["x_parallel_a", "x_parallel_a_star"])
def test_hexagonal_twins_structure(setting):
    twins = hexagonal_twins(1.587, setting=setting)
    assert [t.name for t in twins] == ["{1 0 -1 2}", "{1 0 -1 1}", "{1 1 -2 2}", "{1 1 -2 1}"]
    assert [t.plane for t in twins] == [(1, 0, -1, 2), (1, 0, -1, 1), (1, 1, -2, 2), (1, 1, -2, 1)]
    for t in twins:
        u, v, tt, w = t.axis
        assert u + v + tt == 0 and w == 0
        assert t.setting == setting and t.max_deviation_deg == 5.0
        q = np.array(t.quat)
        assert_allclose(q[1:] / np.linalg.norm(q[1:]), t.axis_crystal, rtol=0, atol=1e-12)
    # Axes: <1 1 -2 0> type for the {10-1l} twins, <1 0 -1 0> type for {11-2l}.
    assert {tuple(sorted(map(abs, t.axis))) for t in twins[:2]} == {(0, 1, 1, 2)}
    assert {tuple(sorted(map(abs, t.axis))) for t in twins[2:]} == {(0, 0, 1, 1)}


def test_twin_angles_do_not_depend_on_the_setting():
    a = hexagonal_twins(1.624, setting="x_parallel_a")
    b = hexagonal_twins(1.624, setting="x_parallel_a_star")
    assert_allclose([t.angle_deg for t in a], [t.angle_deg for t in b], rtol=0, atol=1e-9)


def test_hexagonal_classification():
    twins = hexagonal_twins(1.587)
    sym = proper_rotations("6/mmm")
    exact = np.array([t.quat for t in twins])
    moved = np.array([quat_multiply(quat_multiply(sym[3], q), sym[7]) for q in exact])
    near = np.array([_perturbed(t.quat, 3.0, k) for k, t in enumerate(twins)])
    far = np.array([_perturbed(twins[0].quat, 20.0, 1)])
    match = classify_hexagonal_misorientation(np.vstack([exact, moved, near, far]), twins)
    names = [t.name for t in twins]
    assert match.label.tolist() == names * 3 + [""]
    assert_allclose(match.deviation_deg[:8], 0.0, rtol=0, atol=1e-5)
    assert np.all(match.deviation_deg[8:12] <= 3.0 + 1e-6)
    assert np.isnan(match.deviation_deg[12])


def test_hexagonal_errors():
    with pytest.raises(
        ValueError, match=r"Expected `c_over_a` to be a finite number > 0, got -1.0"
    ):
        hexagonal_twins(-1.0)
    with pytest.raises(ValueError, match=r"Expected `max_deviation_deg` to be between 0 and 90"):
        hexagonal_twins(1.587, max_deviation_deg=0.0)
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of"):
        hexagonal_twins(1.587, setting="a")
    twins = hexagonal_twins(1.587)
    with pytest.raises(
        TypeError, match=r"Expected `twins` to be a non-empty sequence of TwinRelation"
    ):
        classify_hexagonal_misorientation([1.0, 0, 0, 0], [])
    mixed = (twins[0], hexagonal_twins(1.587, setting="x_parallel_a_star")[1])
    with pytest.raises(ValueError, match=r"Expected `twins` to share one setting"):
        classify_hexagonal_misorientation([1.0, 0, 0, 0], mixed)


def test_deviation_setting_and_c_over_a_type_errors():
    q = np.array([1.0, 0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of"):
        relation_deviation_deg(q, q, "6/mmm", setting="x_parallel_c")
    with pytest.raises(TypeError, match=r"Expected `c_over_a` to be an array of numbers, got str"):
        hexagonal_twins("tall")
