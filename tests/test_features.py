"""Traces inside grains (inclination.features) and their output (inclination.report.features)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.crystal.phases import Phase
from inclination.crystal.rotations import quat_from_euler_deg
from inclination.crystal.slip import slip_systems
from inclination.errors import InputError
from inclination.features import (
    feature_candidate_planes,
    frame_state,
    identify_features,
    read_feature_traces,
    read_loading_direction,
    read_slip_systems,
)
from inclination.frames import DeclaredAxes
from inclination.planes import predict_planes

ROOT = Path(__file__).resolve().parents[1]
CELL = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
ENTRY = {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": CELL}
CU = Phase.from_dict(ENTRY)
FCC = slip_systems(CU, ["fcc"])


def _grain(euler_deg, spread=0.2):
    return {
        "grain_id": np.array([4]),
        "phase": np.array([1]),
        "quat": quat_from_euler_deg(euler_deg)[None],
        "spread_mean_deg": np.array([spread]),
    }


def _traces(angles, sigma=0.5):
    n = len(angles)
    return {
        "feature_id": np.arange(1, n + 1),
        "kind": np.array(["slip"] * n),
        "trace_angle_deg": np.asarray(angles, float),
        "trace_sigma_deg": np.full(n, sigma),
    }


def test_identifies_the_one_fitting_plane_with_its_predicted_geometry():
    grains = _grain([30.0, 50.0, 10.0])
    pred = predict_planes(grains["quat"][0], FCC.normal_crystal)
    planes = feature_candidate_planes(CU, FCC)
    truth = predict_planes(grains["quat"][0], planes.normal_crystal)
    deviation = np.abs(
        ((truth.trace_angle_deg[:, None] - truth.trace_angle_deg[None]) + 90) % 180 - 90
    )
    np.fill_diagonal(deviation, 180)
    k = int(np.argmax(deviation.min(axis=1)))  # the plane whose trace stands most apart
    out = identify_features(
        _traces([truth.trace_angle_deg[k] + 0.2]),
        [4],
        grains,
        [CU],
        slip={1: FCC},
        loading_direction_sample=[1.0, 0.0, 0.0],
    )
    assert out["identification"].tolist() == ["identified"]
    assert out["plane"][0] == planes.member[k]
    assert_allclose(out["predicted_dip_deg"][0], truth.dip_deg[k], rtol=0, atol=1e-12)
    assert_allclose(
        out["predicted_dip_azimuth_if_turned_deg"][0],
        (truth.dip_azimuth_deg[k] + 180) % 360,
        rtol=0,
        atol=1e-9,
    )
    assert out["frame"][0] == "unsettled"
    # Schmid factors: the largest of the plane's three systems, and the rank among all 12.
    from inclination.crystal.rotations import quat_apply
    from inclination.crystal.slip import schmid_factor

    m = schmid_factor(
        quat_apply(grains["quat"][0], [1.0, 0.0, 0.0]), FCC.normal_crystal, FCC.direction_crystal
    )
    on = np.abs(FCC.normal_crystal @ planes.normal_crystal[k]) > 1 - 1e-9
    assert on.sum() == 3 and pred.dip_deg.shape == (12,)
    assert_allclose(out["schmid_factor"][0], m[on].max(), rtol=0, atol=1e-12)
    assert out["schmid_rank"][0] == 1 + int(np.sum(m > m[on].max() + 1e-9))
    assert_allclose(out["schmid_factor_grain_max"][0], m.max(), rtol=0, atol=1e-12)
    assert len(out["schmid_factors"][0].split(";")) == 3


def test_frame_settled_gives_one_azimuth_and_turned_reverses_it():
    grains = _grain([30.0, 50.0, 10.0])
    planes = feature_candidate_planes(CU, FCC)
    truth = predict_planes(grains["quat"][0], planes.normal_crystal)
    angle = [truth.trace_angle_deg[0]]
    common = {"slip": {1: FCC}, "loading_direction_sample": [0.6, 0.0, 0.8]}
    out = {
        f: identify_features(_traces(angle, 0.1), [4], grains, [CU], frame=f, **common)
        for f in ("unsettled", "as_declared", "turned_180_about_normal")
    }
    if out["unsettled"]["identification"][0] != "identified":
        pytest.skip("this orientation puts two traces together")  # pragma: no cover
    az = out["unsettled"]["predicted_dip_azimuth_deg"][0]
    assert np.isnan(out["as_declared"]["predicted_dip_azimuth_if_turned_deg"][0])
    assert_allclose(out["as_declared"]["predicted_dip_azimuth_deg"][0], az, rtol=0, atol=1e-12)
    turned = out["turned_180_about_normal"]
    assert_allclose(turned["predicted_dip_azimuth_deg"][0], (az + 180) % 360, rtol=0, atol=1e-9)
    # §6: the turned frame reverses (n_x, n_y) and keeps n_z.
    for c, sign in (("x", -1), ("y", -1), ("z", 1)):
        assert_allclose(
            turned[f"predicted_normal_{c}"][0],
            sign * out["unsettled"][f"predicted_normal_{c}"][0],
            rtol=0,
            atol=1e-12,
        )
    with pytest.raises(ValueError, match="Expected `frame` to be one of"):
        identify_features(_traces(angle), [4], grains, [CU], frame="settled")


def test_ambiguous_lists_all_and_none_when_nothing_fits():
    # Cube orientation: (1 1 1) and (1 1 -1) both trace at 135° (§5 worked in the
    # predict_planes example), so a trace at 135° fits two planes; one at 20° none.
    grains = _grain([0.0, 0.0, 0.0])
    out = identify_features(_traces([135.0, 20.0]), [4, 4], grains, [CU], slip={1: FCC})
    assert out["identification"].tolist() == ["ambiguous", "none"]
    assert sorted(out["candidates"][0].split(";")) == ["(1 1 -1)", "(1 1 1)"]
    assert out["plane"].tolist() == ["", ""]
    assert np.isnan(out["schmid_factor"]).all() and (out["schmid_rank"] == -1).all()


def test_candidate_planes_precedence():
    assert len(feature_candidate_planes(CU)) == 25  # the phase's own families
    assert feature_candidate_planes(CU, FCC).family == ("{1 1 1}",) * 4
    assert feature_candidate_planes(CU, FCC, ["{1 0 0}"]).family == ("{1 0 0}",) * 3


def test_read_traces_converts_declared_axes_to_sample_frame():
    axes = DeclaredAxes("left", "up", origin_um=(10.0, 20.0))
    spec = {
        "angle_sigma_deg": 0.7,
        "traces": [
            {"at_um": [4.0, 5.0], "trace_angle_deg": 30.0},
            {"line_um": [[0.0, 0.0], [3.0, 4.0]], "angle_sigma_deg": 0.2, "kind": "twin"},
        ],
    }
    t = read_feature_traces(spec, axes=axes)
    # Round trip through the declared axes (conventions §2).
    assert_allclose(
        axes.angle_to_declared_deg(t["trace_angle_deg"]), [30.0, 53.130102], atol=1e-6, rtol=0
    )
    xy = axes.points_to_declared(np.stack([t["x_um"], t["y_um"]], axis=1))
    assert_allclose(xy, [[4.0, 5.0], [1.5, 2.0]], rtol=0, atol=1e-12)
    assert t["trace_sigma_deg"].tolist() == [0.7, 0.2]
    assert t["given"].tolist() == ["point", "line"]


@pytest.mark.parametrize(
    ("trace", "pointer", "match"),
    [
        ({"trace_angle_deg": 3.0}, "/features/traces/0", "exactly one of"),
        ({"at_um": [1, 2]}, "/features/traces/0/trace_angle_deg", "trace_angle_deg"),
        ({"line_um": [[1, 2], [1, 2]]}, "/features/traces/0/line_um", "two distinct points"),
        ({"at_um": [1, 2], "trace_angle_deg": 3, "angle_sigma_deg": 0}, "angle_sigma_deg", "> 0"),
    ],
)
def test_bad_traces(trace, pointer, match):
    with pytest.raises(InputError, match=match) as err:
        read_feature_traces({"traces": [trace]}, axes=DeclaredAxes())
    assert pointer in str(err.value)


def test_loading_direction():
    axes = DeclaredAxes("right", "up")
    assert read_loading_direction({}, axes=axes) is None
    assert_allclose(read_loading_direction({"loading_direction": [0, 0, 3]}, axes=axes), [0, 0, -1])
    with pytest.raises(InputError, match="non-zero loading direction"):
        read_loading_direction({"loading_direction": [0, 0, 0]}, axes=axes)
    with pytest.raises(InputError, match="three numbers"):
        read_loading_direction({"loading_direction": [1, 0]}, axes=axes)


def test_read_slip_systems_names_the_bad_entry():
    got = read_slip_systems([{**ENTRY, "slip_systems": ["fcc"]}], [CU])
    assert len(got[1]) == 12
    with pytest.raises(InputError, match="presets") as err:
        read_slip_systems([{**ENTRY, "slip_systems": ["fcc", "{1 1 1}"]}], [CU], path="j.json")
    assert "/phases/0/slip_systems/1" in str(err.value)
    with pytest.raises(InputError, match="non-empty list"):
        read_slip_systems([{**ENTRY, "slip_systems": []}], [CU])
    assert read_slip_systems([ENTRY], [CU]) == {}


def test_frame_state_from_verdict():
    class V:
        verdict = "turned_180_about_normal"

    assert frame_state(V()) == "turned_180_about_normal"
    V.verdict = "inconsistent"
    assert frame_state(V()) == "unsettled"


def test_committed_schema_is_the_rendering():
    from inclination.report.features import render_schema

    committed = (ROOT / "schemas" / "features.schema.json").read_text(encoding="utf-8")
    assert committed == render_schema(), "schemas/features.schema.json is stale"
    schema = json.loads(committed)
    assert schema["properties"]["rows"]["items"]["required"][:4] == [
        "feature_id",
        "kind",
        "grain_id",
        "trace_angle_deg",
    ]


def test_cross_section_through_a_slip_band_gives_its_dip():
    # The measure_cross_section worked case (a vertical trace at x = 50, the face along
    # y = 40 seen from +y, image angle 60°, descending to the right: dip 60°, azimuth 0°),
    # with the trace a feature beside an unrelated boundary segment.
    from inclination.features import measure_features_on_cross_sections

    feature = {
        "feature_id": np.array([1]),
        "x0_um": np.array([50.0]),
        "y0_um": np.array([10.0]),
        "x1_um": np.array([50.0]),
        "y1_um": np.array([90.0]),
        "trace_angle_deg": np.array([90.0]),
        "trace_sigma_deg": np.array([0.5]),
    }
    boundary = {
        "segment_id": np.array([0]),
        "x0_um": np.array([20.0]),
        "y0_um": np.array([0.0]),
        "x1_um": np.array([20.0]),
        "y1_um": np.array([100.0]),
        "trace_angle_deg": np.array([90.0]),
        "trace_sigma_deg": np.array([0.5]),
        "too_short": np.array([False]),
    }
    section = {
        "kind": "cross-section",
        "line_um": [[0, 40], [100, 40]],
        "viewer_at_um": [50, 60],
        "imaging_tilt_deg": 90.0,
        "boundaries": [
            {"along_um": 50.0, "image_angle_deg": 60.0, "descends": "right"},
            {"along_um": 20.0, "image_angle_deg": 45.0, "descends": "left"},
        ],
    }
    got = measure_features_on_cross_sections(
        [section], feature, boundary, axes=DeclaredAxes(), step_um=1.0, bounds_um=(0, 0, 100, 100)
    )
    assert got["feature_id"].tolist() == [1]
    assert_allclose(got["measured_dip_deg"], [60.0], rtol=0, atol=1e-9)
    assert_allclose(got["dip_direction_azimuth_deg"], [0.0], rtol=0, atol=1e-9)


def test_point_trace_extends_across_its_grain_for_sections():
    from types import SimpleNamespace

    from inclination.features import feature_segments

    labels = np.zeros((10, 20), np.int32)
    labels[:, 5:15] = 3
    omap = SimpleNamespace(
        shape=labels.shape, step_x_um=1.0, row_pitch_um=1.0, grid="square", step_y_um=1.0
    )
    traces = {
        "feature_id": np.array([1]),
        "given": np.array(["point"]),
        "x_um": np.array([8.0]),
        "y_um": np.array([4.0]),
        "x0_um": np.array([np.nan]),
        "y0_um": np.array([np.nan]),
        "x1_um": np.array([np.nan]),
        "y1_um": np.array([np.nan]),
        "trace_angle_deg": np.array([0.0]),
        "trace_sigma_deg": np.array([0.5]),
    }
    seg = feature_segments(traces, np.array([3]), SimpleNamespace(labels=labels), omap)
    # Grain 3 holds columns 5..14: the chord runs from x ≈ 4.5 to x ≈ 14.5 (nearest points).
    assert 4.4 <= seg["x0_um"][0] <= 5.0 and 14.0 <= seg["x1_um"][0] <= 14.6
    assert_allclose([seg["y0_um"][0], seg["y1_um"][0]], [4.0, 4.0], rtol=0, atol=1e-12)
