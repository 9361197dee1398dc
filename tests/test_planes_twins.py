"""Unit tests of inclination.planes.twins: the Σ3 coherent-twin test and its summary."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.crystal.lattice import Lattice, plane_normals_crystal
from inclination.crystal.rotations import (
    quat_from_axis_angle_deg,
    quat_from_euler_deg,
    quat_multiply,
    random_quat,
)
from inclination.planes import coherent_twin_test, predict_planes, twin_test_summary

CUBE = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90)
PARENT = quat_from_euler_deg([30.0, 50.0, 10.0])
HALF_TURN_111 = quat_from_axis_angle_deg([1, 1, 1], 180.0)  # crystal frame
TWIN = quat_multiply(HALF_TURN_111, PARENT)


# ---------------------------------------------------------------- the coherent-twin test


def test_twin_of_a_random_parent_passes_on_its_twin_plane_only():
    # A Σ3 twin is the parent turned 180° about a <111> (Grimmer, Bollmann & Warrington 1974):
    # that (1 1 1) is shared, so its trace passes and a trace 10° off fails.
    parents = random_quat(20, rng=31)
    twins = quat_multiply(HALF_TURN_111, parents)
    plane = predict_planes(parents, plane_normals_crystal(CUBE, [[1, 1, 1]]))
    ok = plane.has_trace[:, 0]
    on = plane.trace_angle_deg[ok, 0]
    n = int(ok.sum())
    ones = np.full(n, 0.3)
    args = (parents[ok], twins[ok], ones, ones, CUBE)
    passed = coherent_twin_test(on, ones, *args)
    assert passed.passed.all()
    # The common {111} found is the (1 1 1) of the parent, up to sign (n ≡ −n).
    dot = np.abs(np.sum(passed.common_111.normal_sample * plane.normal_sample[ok, 0], axis=1))
    assert_allclose(dot, 1.0, rtol=0, atol=1e-12)
    assert not coherent_twin_test(np.mod(on + 10.0, 180.0), ones, *args).passed.any()


def test_twin_test_does_not_depend_on_the_symmetric_equivalent_or_the_order():
    s = quat_from_axis_angle_deg([[0, 0, 1], [1, 1, 1]], [90.0, 120.0])  # cubic rotations
    one = coherent_twin_test([118.8], [0.3], [PARENT], [TWIN], [0.2], [0.2], CUBE)
    qa, qb = quat_multiply(s[0], PARENT), quat_multiply(s[1], TWIN)
    for other in (
        coherent_twin_test([118.8], [0.3], [qa], [qb], [0.2], [0.2], CUBE),
        coherent_twin_test([118.8], [0.3], [TWIN], [PARENT], [0.2], [0.2], CUBE),
    ):
        assert other.passed.tolist() == one.passed.tolist() == [True]
        assert_allclose(
            other.fit.trace_deviation_deg, one.fit.trace_deviation_deg, rtol=0, atol=1e-9
        )


def test_twin_test_of_no_segments_is_empty():
    t = coherent_twin_test(
        np.zeros(0), np.zeros(0), np.zeros((0, 4)), np.zeros((0, 4)), np.zeros(0), np.zeros(0), CUBE
    )
    assert t.passed.shape == (0,) and t.common_111.normal_sample.shape == (0, 3)


def test_twin_test_refuses_bad_orientations():
    with pytest.raises(ValueError, match=r"`quat_b` to have shape \(\.\.\., 4\), got \(1, 3\)"):
        coherent_twin_test([1.0], [0.3], [PARENT], [[1.0, 0, 0]], [0.2], [0.2], CUBE)


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
