"""Unit tests of inclination.planes.identify: classes, tables, invariants, refusals."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import (
    quat_from_axis_angle_deg,
    quat_from_euler_deg,
    quat_multiply,
    random_quat,
)
from inclination.errors import InputError, SettingError
from inclination.grains import GrainMap
from inclination.planes import (
    IDENTIFICATION_CLASSES,
    candidates,
    chance_fit,
    identify,
    match_planes,
    predict_planes,
    trace_deviation_deg,
)

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


def _grain_map(table):
    # Identification reads only the grain table of a GrainMap; one point per grain suffices.
    labels = np.arange(1, len(table["grain_id"]) + 1, dtype=np.int32)[None, :]
    return GrainMap(labels, table, {}, 5.0, 4)


def _tables(quats, pairs, traces, *, sigma=0.3, spread=0.2, phases=None, too_short=None):
    quats = np.asarray(quats, dtype=float)
    g = len(quats)
    phase_of = np.ones(g, dtype=int) if phases is None else np.asarray(phases)
    table = {
        "grain_id": np.arange(1, g + 1),
        "phase": phase_of,
        "quat": quats,
        "spread_mean_deg": np.full(g, spread),
    }
    grains = _grain_map(table)
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
    quat2 = np.stack([quat_multiply(s[0], PARENT), quat_multiply(s[1], TWIN)])
    grains2 = _grain_map(dict(grains.grains, quat=quat2))
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
    turned = _grain_map(dict(grains.grains, quat=quat_multiply(grains.grains["quat"], half)))
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
        # A plane shared by both grains and fitting on both sides counts once.
        side_a = mine & (c["side"] == "a") & c["fits"]
        fits_b = set(c["plane"][mine & (c["side"] == "b") & c["fits"]].tolist())
        shared = sum(p in fits_b for p in c["shared_with"][side_a].tolist() if p)
        assert t["candidates_within_tolerance"][row] == c["fits"][mine].sum() - shared
        # Chance of a random trace: the covered fraction of a fine grid of angles
        # (the definition, not the formula).
        use = mine & c["has_trace"]
        grid = (np.arange(180000) + 0.5) / 1000.0
        cover = (
            trace_deviation_deg(grid[:, None], c["trace_angle_deg"][use]) <= c["tolerance_deg"][use]
        )
        assert t["chance_fit"][row] == pytest.approx(cover.any(axis=1).mean(), abs=2e-5)
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
    before = {k: v.copy() for k, v in (segments | grains.grains).items()}
    identify(segments, grains, [CU])
    for key, value in (segments | grains.grains).items():
        assert (value == before[key]).all()


@pytest.mark.parametrize(
    ("change", "match"),
    [
        (lambda s, g: s.pop("trace_sigma_deg"), r"`segments` to have the column 'trace_sigma_deg'"),
        (lambda s, g: g.grains.pop("quat"), r"`grains` to have the column 'quat'"),
        (
            lambda s, g: s.__setitem__("grain_b", np.array([9])),
            r"`segments` grain_b to be a grain_id of `grains`, got 9 at row 0",
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
            lambda s, g: g.grains.__setitem__("spread_mean_deg", np.array([0.2, np.nan])),
            r"'spread_mean_deg' to be finite and >= 0, got nan at row 1",
        ),
        (
            lambda s, g: g.grains.__setitem__(
                "quat", np.array([[1.0, 0, 0, 0], [np.nan, 0, 0, 0]])
            ),
            r"`grains\['quat'\]` to be finite everywhere, got a non-finite value at index \(1,\)",
        ),
        (
            lambda s, g: g.grains.__setitem__("quat", np.zeros((2, 3))),
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


def test_identify_refuses_a_phase_the_job_does_not_declare():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    segments["phase_a"] = np.array([5])
    match = r"`segments` phase_a to be the id of a phase in `phases` \(1,\), got 5 at row 0"
    with pytest.raises(InputError, match=match):
        identify(segments, grains, [CU])


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"k": -2.0}, r"Expected `k` to be a finite number > 0, got -2.0"),
        ({"floor_deg": 0.0}, r"Expected `floor_deg` to be a finite number > 0, got 0.0"),
        ({"max_tolerance_deg": np.nan}, r"Expected `max_tolerance_deg` to be a finite number > 0"),
        ({"max_tolerance_deg": 120.0}, r"Expected `max_tolerance_deg` to be <= 90"),
        ({"sigma_criterion": "loose"}, r"Expected `sigma_criterion` to be one of .*brandon"),
    ],
)
@pytest.mark.parametrize("stage", [identify, candidates, match_planes])
def test_identify_refuses_bad_settings(kwargs, match, stage):
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    with pytest.raises(SettingError, match=match):
        stage(segments, grains, [CU], **kwargs)


@pytest.mark.parametrize(
    ("phases", "error", "match"),
    [
        (3, TypeError, r"`phases` to be a sequence of Phase records or a mapping id → Phase"),
        ("m-3m", TypeError, r"`phases` to be a sequence .*, got str"),
        (["m-3m"], TypeError, r"Expected `phases` to hold Phase records, got str"),
        ({1: "m-3m"}, TypeError, r"Expected `phases` to hold Phase records, got str"),
        (
            {2: CU},
            ValueError,
            r"Expected `phases` keys to be the phases' ids, got key 2 for phase 1",
        ),
    ],
)
def test_identify_refuses_bad_phases(phases, error, match):
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    with pytest.raises(error, match=match):
        identify(segments, grains, phases)


def test_phases_as_sequence_tuple_or_mapping_give_the_same_tables():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7], phases=[1, 2])
    a = identify(segments, grains, [CU, TI])
    for phases in ((TI, CU), {1: CU, 2: TI}):
        b = identify(segments, grains, phases)
        assert all(np.array_equal(a[k], b[k], equal_nan=a[k].dtype.kind == "f") for k in a)


def test_identify_refuses_non_tables():
    segments, grains = _tables([PARENT, TWIN], [[1, 2]], [118.7])
    with pytest.raises(TypeError, match=r"Expected `segments` to be a table .*got list"):
        identify([1, 2], grains, [CU])
    with pytest.raises(TypeError, match=r"Expected `grains` to be a GrainMap .*got dict"):
        identify(segments, grains.grains, [CU])


def _same_table(a, b):
    assert list(a) == list(b)
    for key in a:
        assert a[key].dtype == b[key].dtype
        assert np.array_equal(a[key], b[key], equal_nan=a[key].dtype.kind == "f"), key


def test_one_pass_gives_both_tables_unchanged():
    # match_planes (the pipeline's call) must give exactly what the two separate calls give.
    q = random_quat(6, rng=13)
    segments, grains = _tables(
        np.concatenate([[PARENT, TWIN], q]),
        [[1, 2], [3, 4], [5, 6], [7, 8], [1, 2]],
        [118.7, 10.0, 70.0, 120.0, 98.5],
        too_short=[False, False, True, False, False],
        sigma=0.8,
    )
    both = match_planes(segments, grains, [CU], k=2.5, max_tolerance_deg=4.0)
    _same_table(both.identification, identify(segments, grains, [CU], k=2.5, max_tolerance_deg=4.0))
    _same_table(both.candidates, candidates(segments, grains, [CU], k=2.5, max_tolerance_deg=4.0))
    assert "coherent_twin" in both.identification["identification"].tolist()


def test_chance_fit_column_is_the_public_chance_fit():
    # The identification's chance_fit is chance_fit of the candidates' tolerances (planes
    # with a trace only), whose formula tests/test_planes_predict.py checks by Monte Carlo.
    q = random_quat(8, rng=29)
    segments, grains = _tables(q, [[1, 2], [3, 4], [5, 6], [7, 8]], [5.0, 50.0, 95.0, 140.0])
    m = match_planes(segments, grains, [CU])
    c = m.candidates
    for row, sid in enumerate(m.identification["segment_id"]):
        mine = c["segment_id"] == sid
        tol = np.where(c["has_trace"][mine], c["tolerance_deg"][mine], np.nan)
        angle = c["trace_angle_deg"][mine]
        assert m.identification["chance_fit"][row] == chance_fit(angle, tol)
