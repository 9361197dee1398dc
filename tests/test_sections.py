"""Cross-sections, serial sections and stacks (conventions §5, §7, §8)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from inclination.errors import InputError, SettingError
from inclination.frames import DeclaredAxes
from inclination.grains import GrainMap
from inclination.io.schemas import load_schema
from inclination.planes.geometry import surface_geometry
from inclination.sections import (
    CrossSection,
    Registration,
    SerialLayer,
    apparent_dip_deg,
    depth_from_indent_um,
    face_angle_from_image_deg,
    fit_plane_through_traces,
    image_right_sample,
    match_grains,
    measure_cross_section,
    measure_serial_section,
    measure_stack,
    network_crossings,
    network_junctions_um,
    register_sections,
    section_depth,
    serial_dip_deg,
    true_dip_from_apparent_deg,
)

Z = np.array([0.0, 0.0, 1.0])
SAMPLE_AXES = DeclaredAxes("right", "down")
BOUNDS = (0.0, 0.0, 200.0, 100.0)


def _measure(section, segments, *, axes=SAMPLE_AXES, path=None, pointer="", **options):
    """The job entry made a record (as the pipeline does), then measured."""
    record = CrossSection.from_job_entry(section, axes=axes, path=path, pointer=pointer)
    return measure_cross_section(record, segments, path=path, pointer=pointer, **options)


def _plane_geometry(n):
    """Dip and dip azimuth of a normal straight from §5 (hand derivation)."""
    n = n / np.linalg.norm(n)
    dip = math.degrees(math.acos(abs(n[2])))
    d = -np.sign(n[2]) * n[:2]
    return dip, math.degrees(math.atan2(d[1], d[0])) % 360.0


def _face_view(n, line, viewer, tilt_deg, face_deg):
    """What a viewer records for plane n on the face: image angle and side (hand geometry).

    The face contains the line and goes down along w = cos φ V + sin φ Z; the boundary's
    line on the face is L = n × m, m the face normal; the beam shortens depths on it
    by cos(φ − T).
    """
    e = (line[1] - line[0]) / np.linalg.norm(line[1] - line[0])
    rel = viewer - line[0]
    v = rel - (rel @ e) * e
    v = np.array([*v / np.linalg.norm(v), 0.0])
    e3 = np.array([*e, 0.0])
    phi = math.radians(face_deg)
    w = math.cos(phi) * v + math.sin(phi) * Z
    big_l = np.cross(n, np.cross(e3, w))
    if big_l @ w < 0:
        big_l = -big_l
    alpha_face = math.atan2(abs(big_l @ w), abs(big_l @ e3))
    alpha_image = math.atan(math.tan(alpha_face) * math.cos(phi - math.radians(tilt_deg)))
    right = np.cross(v, Z)
    return math.degrees(alpha_image), ("right" if big_l @ right > 0 else "left")


def _segments_for(normals, line, along, half_length=20.0):
    """Segments table of traces of ``normals`` crossing ``line`` at ``along`` (S)."""
    e = (line[1] - line[0]) / np.linalg.norm(line[1] - line[0])
    rows = []
    for k, (n, s) in enumerate(zip(normals, along, strict=True)):
        t = np.cross(Z, n)[:2]
        t /= np.linalg.norm(t)
        p = line[0] + s * e
        a, b = p - half_length * t, p + half_length * t
        rows.append((k, *a, *b, math.degrees(math.atan2(t[1], t[0])) % 180.0))
    arr = np.array(rows)
    return {
        "segment_id": arr[:, 0].astype(int),
        "grain_a": np.arange(len(arr)) + 1,
        "grain_b": np.arange(len(arr)) + 100,
        "x0_um": arr[:, 1],
        "y0_um": arr[:, 2],
        "x1_um": arr[:, 3],
        "y1_um": arr[:, 4],
        "length_um": np.full(len(arr), 2 * half_length),
        "trace_angle_deg": arr[:, 5],
        "trace_sigma_deg": np.full(len(arr), 0.5),
    }


def _listed_section(normals, line, viewer, along, *, axes=SAMPLE_AXES, tilt_deg, face_deg):
    """The job entry of a face showing ``normals`` crossing ``line`` at ``along``.

    Traces within 15° of the line are ill-conditioned and left out (tested on their own);
    returns the entry and the indices of the normals it lists.
    """
    keep = []
    entries = []
    e = (line[1] - line[0]) / np.linalg.norm(line[1] - line[0])
    for k, n in enumerate(normals):
        alpha, side = _face_view(n, line, viewer, tilt_deg, face_deg)
        t = np.cross(Z, n)[:2]
        if abs(e[0] * t[1] - e[1] * t[0]) / np.linalg.norm(t) > math.sin(math.radians(15)):
            keep.append(k)
            entries.append({"along_um": along[k], "image_angle_deg": alpha, "descends": side})
    section = {
        "line_um": axes.points_to_declared(line).tolist(),
        "viewer_at_um": axes.points_to_declared(viewer).tolist(),
        "imaging_tilt_deg": tilt_deg,
        "face_inclination_deg": face_deg,
        "boundaries": entries,
    }
    return section, keep


def _random_normals(gen, n, min_dip=15.0, max_dip=80.0):
    dip = np.deg2rad(gen.uniform(min_dip, max_dip, n))
    az = gen.uniform(0, 2 * np.pi, n)
    # Normal of a plane with dip δ dipping toward az: n = (−sin δ cos az, −sin δ sin az, cos δ).
    return np.stack([-np.sin(dip) * np.cos(az), -np.sin(dip) * np.sin(az), np.cos(dip)], -1)


# --------------------------------------------------------------------------- geometry


@given(
    st.floats(0.0, 89.0),
    st.floats(1.0, 179.0),
)
def test_apparent_and_true_dip_are_inverse(dip_deg, beta_deg):
    back = true_dip_from_apparent_deg(apparent_dip_deg(dip_deg, beta_deg), beta_deg)
    assert_allclose(back, dip_deg, rtol=0, atol=1e-8)


def test_apparent_dip_never_exceeds_true_dip():
    beta = np.linspace(0, 180, 37)
    assert np.all(apparent_dip_deg(40.0, beta) <= 40.0 + 1e-12)
    assert_allclose(apparent_dip_deg(40.0, 90.0), 40.0, rtol=0, atol=1e-12)


def test_face_angle_refuses_a_beam_that_cannot_see_the_face():
    with pytest.raises(ValueError, match="Expected `tilt_deg` to let the beam see the face"):
        face_angle_from_image_deg(30.0, 0.0)


@pytest.mark.parametrize(
    ("line", "viewer", "match"),
    [
        ([[0, 0], [0, 0]], [1, 1], "two distinct points"),
        ([[0, 0], [10, 0]], [5, 0], "off the section line"),
    ],
)
def test_image_right_refuses_degenerate_geometry(line, viewer, match):
    with pytest.raises(ValueError, match=match):
        image_right_sample(line, viewer)


def test_image_right_shape_errors():
    with pytest.raises(ValueError, match=r"`line_sample` to have shape \(2, 2\)"):
        image_right_sample([0, 0, 1], [1, 1])
    with pytest.raises(ValueError, match=r"`viewer_sample` to have shape \(2,\)"):
        image_right_sample([[0, 0], [1, 0]], [1, 1, 1])


def test_indent_that_grows_is_refused():
    with pytest.raises(ValueError, match="the indent shrinks"):
        depth_from_indent_um(20.0, 21.0)


# --------------------------------------------------------------------------- cross-sections


def test_cross_section_matching_among_many_distant_segments():
    """20,000 traces away from the line leave the eight crossings' matches as they are.

    The entry/segment graph is built from the hits only; a dense one would hold
    (8 + 20,008)² links (400 MB as booleans, more once converted for the components).
    """
    gen = np.random.default_rng(11)
    normals = _random_normals(gen, 8)
    line = np.array([[20.0, 50.0], [180.0, 45.0]])
    viewer = np.array([100.0, 70.0])
    along = np.linspace(10.0, 150.0, 8)
    near = _segments_for(normals, line, along)
    m = 20_000
    x0 = gen.uniform(0.0, 200.0, m)
    y0 = gen.uniform(60.0, 99.0, m)  # all above the line (y <= 50 along it)
    far = {
        "segment_id": np.arange(m) + 100,
        "grain_a": np.arange(m) + 1000,
        "grain_b": np.arange(m) + 50_000,
        "x0_um": x0,
        "y0_um": y0,
        "x1_um": x0 + 0.5,
        "y1_um": y0 + 0.5,
        "length_um": np.full(m, math.sqrt(0.5)),
        "trace_angle_deg": np.full(m, 45.0),
        "trace_sigma_deg": np.full(m, 0.5),
    }
    segments = {key: np.concatenate([near[key], far[key]]) for key in near}
    section, keep = _listed_section(normals, line, viewer, along, tilt_deg=52.0, face_deg=90.0)
    out = _measure(section, segments, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["measured"] * len(keep)
    assert out["segment_id"].tolist() == keep


@pytest.mark.parametrize(
    ("axes", "tilt_deg", "face_deg"),
    [
        (SAMPLE_AXES, 52.0, 90.0),
        (DeclaredAxes("right", "up", origin_um=(0.0, 100.0)), 52.0, 90.0),
        (DeclaredAxes("down", "right"), 90.0, 90.0),
        (SAMPLE_AXES, 52.0, 70.0),
    ],
)
def test_cross_section_recovers_known_planes(axes, tilt_deg, face_deg):
    gen = np.random.default_rng(11)
    normals = _random_normals(gen, 8)
    line = np.array([[20.0, 50.0], [180.0, 45.0]])
    viewer = np.array([100.0, 70.0])
    along = np.linspace(10.0, 150.0, 8)
    segments = _segments_for(normals, line, along)
    section, keep = _listed_section(
        normals, line, viewer, along, axes=axes, tilt_deg=tilt_deg, face_deg=face_deg
    )
    out = _measure(section, segments, axes=axes, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["measured"] * len(keep)
    assert out["segment_id"].tolist() == keep
    truth = np.array([_plane_geometry(normals[k]) for k in keep])
    assert_allclose(out["measured_dip_deg"], truth[:, 0], rtol=0, atol=1e-6)
    diff = (out["dip_direction_azimuth_deg"] - truth[:, 1] + 180) % 360 - 180
    assert_allclose(diff, 0.0, rtol=0, atol=1e-6)
    got = np.stack([out["normal_x"], out["normal_y"], out["normal_z"]], -1)
    assert_allclose(np.abs(np.sum(got * normals[keep], axis=1)), 1.0, rtol=0, atol=1e-9)
    assert np.all(out["normal_z"] >= 0)
    assert set(out["dip_source"].tolist()) == {"cross-section"}


def test_descends_is_read_as_seen_in_the_image_on_an_inclined_face():
    # docs/conventions.md §7: on a 60° face "descends" is the side the boundary leans
    # toward in the image (L·(V × Z) with L down the face), not d·(V × Z); the two
    # differ for planes steeper than the face. Every plane is recovered either way.
    gen = np.random.default_rng(23)
    line = np.array([[20.0, 50.0], [180.0, 50.0]])
    viewer = np.array([100.0, 80.0])
    right = np.array([1.0, 0.0, 0.0])  # V = +Y, V × Z = +X (hand-computed)
    normals, entries, differ = [], [], 0
    while len(normals) < 12 or differ < 3:
        n = _random_normals(gen, 1, max_dip=88.0)[0]
        t = np.cross(Z, n)[:2] / np.linalg.norm(np.cross(Z, n)[:2])
        if abs(t[1]) < math.sin(math.radians(20)):
            continue  # near-parallel traces are tested on their own
        alpha, side = _face_view(n, line, viewer, 52.0, 60.0)
        d = _plane_geometry(n)[1]
        by_dip = (
            "right"
            if np.array([math.cos(math.radians(d)), math.sin(math.radians(d)), 0]) @ right > 0
            else "left"
        )
        differ += side != by_dip
        normals.append(n)
        entries.append({"image_angle_deg": alpha, "descends": side})
    # The sample holds planes the old wording (d·(V × Z)) would have put on the other side.
    along = np.linspace(10.0, 150.0, len(normals))
    for e, s in zip(entries, along, strict=True):
        e["along_um"] = float(s)
    section = {
        "line_um": line.tolist(),
        "viewer_at_um": viewer.tolist(),
        "imaging_tilt_deg": 52.0,
        "face_inclination_deg": 60.0,
        "boundaries": entries,
    }
    out = _measure(
        section,
        _segments_for(normals, line, along),
        axes=SAMPLE_AXES,
        step_um=0.5,
        bounds_um=BOUNDS,
    )
    truth = np.array([_plane_geometry(n) for n in normals])
    assert_allclose(out["measured_dip_deg"], truth[:, 0], rtol=0, atol=1e-6)
    diff = (out["dip_direction_azimuth_deg"] - truth[:, 1] + 180) % 360 - 180
    assert_allclose(diff, 0.0, rtol=0, atol=1e-6)


def _one_boundary_case(beta_deg, *, dip_deg=60.0, angle_sigma_deg=1.0):
    line = np.array([[0.0, 50.0], [200.0, 50.0]])
    viewer = np.array([100.0, 80.0])
    b = math.radians(beta_deg)
    # A plane with trace at β to the line, dipping to the +V side (+Y).
    t = np.array([math.cos(b), math.sin(b), 0.0])
    d = np.cross(Z, t)
    d = d if d[1] > 0 else -d
    delta = math.radians(dip_deg)
    n = np.cross(t, math.cos(delta) * d + math.sin(delta) * Z)
    alpha, side = _face_view(n, line, viewer, 52.0, 90.0)
    section = {
        "line_um": line.tolist(),
        "viewer_at_um": viewer.tolist(),
        "imaging_tilt_deg": 52.0,
        "boundaries": [
            {
                "along_um": 100.0,
                "image_angle_deg": alpha,
                "descends": side,
                "angle_sigma_deg": angle_sigma_deg,
            }
        ],
    }
    return section, _segments_for([n], line, [100.0])


def test_near_parallel_trace_is_flagged_with_its_sigma_not_hidden():
    sec, seg = _one_boundary_case(1.5)
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["ill_conditioned"]
    assert out["measured_dip_sigma_deg"][0] > 10.0
    assert_allclose(out["measured_dip_deg"], [60.0], rtol=0, atol=1e-6)
    sec, seg = _one_boundary_case(80.0)
    good = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert good["status"].tolist() == ["measured"]
    assert good["measured_dip_sigma_deg"][0] < 3.0


@pytest.mark.parametrize("beta_deg", [20.0, 45.0, 80.0])
def test_first_order_sigma_matches_monte_carlo(beta_deg):
    # Brute force: repeat the measurement with noisy image angle, trace and tilt.
    sec, seg = _one_boundary_case(beta_deg, angle_sigma_deg=1.0)
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS, tilt_sigma_deg=0.5)
    gen = np.random.default_rng(3)
    dips = []
    for _ in range(200):
        noisy = dict(sec)
        entry = dict(sec["boundaries"][0])
        entry["image_angle_deg"] = entry["image_angle_deg"] + gen.normal(0, 1.0)
        noisy["boundaries"] = [entry]
        noisy["imaging_tilt_deg"] = 52.0 + gen.normal(0, 0.5)
        s2 = dict(seg)
        s2["trace_angle_deg"] = seg["trace_angle_deg"] + gen.normal(0, 0.5)
        dips.append(
            _measure(noisy, s2, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)[
                "measured_dip_deg"
            ][0]
        )
    assert_allclose(out["measured_dip_sigma_deg"][0], np.std(dips), rtol=0.2, atol=0)


def test_unmatched_and_ambiguous_entries_are_reported_not_guessed():
    gen = np.random.default_rng(5)
    normals = _random_normals(gen, 3, 40, 70)
    line = np.array([[0.0, 50.0], [200.0, 50.0]])
    # Segments 1 and 2 cross the line 0.6 µm apart: an entry there matches both.
    seg = _segments_for(normals, line, [40.0, 120.0, 120.6])
    sec = {
        "line_um": line.tolist(),
        "viewer_at_um": [100.0, 80.0],
        "imaging_tilt_deg": 52.0,
        "boundaries": [
            {"along_um": 40.2, "image_angle_deg": 40.0, "descends": "left"},
            {"along_um": 80.0, "image_angle_deg": 40.0, "descends": "left"},
            {"along_um": 120.3, "image_angle_deg": 40.0, "descends": "left"},
        ],
    }
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["measured", "unmatched", "ambiguous"]
    assert out["segment_id"].tolist() == [0, -1, -1]
    assert out["candidate_segment_ids"].tolist() == ["0", "", "1;2"]
    assert np.isnan(out["measured_dip_deg"][1:]).all()
    # Two entries that claim the same single segment are both ambiguous.
    sec["boundaries"] = [
        {"along_um": 39.5, "image_angle_deg": 40.0, "descends": "left"},
        {"along_um": 40.5, "image_angle_deg": 40.0, "descends": "left"},
    ]
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["ambiguous", "ambiguous"]
    # A job tolerance narrower than the distance leaves the entry unmatched.
    sec["boundaries"] = [{"along_um": 41.5, "image_angle_deg": 40.0, "descends": "left"}]
    sec["match_tolerance_um"] = 1.0
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["unmatched"]


def test_crowded_entries_are_paired_in_their_order_along_the_line():
    gen = np.random.default_rng(6)
    normals = _random_normals(gen, 2, 40, 70)
    line = np.array([[0.0, 50.0], [200.0, 50.0]])
    seg = _segments_for(normals, line, [80.0, 80.7])
    entries = []
    for n, s in zip(normals, (80.1, 80.8), strict=True):
        alpha, side = _face_view(n, line, np.array([100.0, 80.0]), 52.0, 90.0)
        entries.append({"along_um": s, "image_angle_deg": alpha, "descends": side})
    sec = {
        "line_um": line.tolist(),
        "viewer_at_um": [100.0, 80.0],
        "imaging_tilt_deg": 52.0,
        "boundaries": entries,
    }
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["measured", "measured"]
    assert out["segment_id"].tolist() == [0, 1]
    truth = [_plane_geometry(n)[0] for n in normals]
    assert_allclose(out["measured_dip_deg"], truth, rtol=0, atol=1e-6)


def test_descending_side_sets_the_dip_direction():
    sec, seg = _one_boundary_case(60.0)
    right = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    flipped = dict(sec)
    entry = dict(sec["boundaries"][0])
    entry["descends"] = "left" if entry["descends"] == "right" else "right"
    flipped["boundaries"] = [entry]
    left = _measure(flipped, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    diff = (left["dip_direction_azimuth_deg"] - right["dip_direction_azimuth_deg"]) % 360
    assert_allclose(diff, 180.0, rtol=0, atol=1e-6)
    assert_allclose(left["measured_dip_deg"], right["measured_dip_deg"], rtol=0, atol=1e-9)


def test_empty_boundary_list_gives_empty_table():
    sec, seg = _one_boundary_case(60.0)
    sec["boundaries"] = []
    out = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    assert all(len(v) == 0 for v in out.values())


def _changed(change):
    """The one-boundary job entry with fields changed (entry fields or boundary fields)."""
    sec, seg = _one_boundary_case(60.0)
    entry = dict(sec["boundaries"][0])
    for key, value in change.items():
        if key in entry:
            entry[key] = value
        else:
            sec[key] = value
    sec["boundaries"] = [entry]
    return sec, seg


@pytest.mark.parametrize(
    ("change", "pointer", "match"),
    [
        ({"line_um": [[10, 50], [250, 50]]}, "/sections/0/line_um", "inside the map"),
        ({"line_um": [[10, 50], [10, 50]]}, "/sections/0/line_um", "two distinct points"),
        ({"viewer_at_um": [100, 50]}, "/sections/0/viewer_at_um", "off the section line"),
        (
            {"imaging_tilt_deg": 1.0, "face_inclination_deg": 179.0},
            "/sections/0/imaging_tilt_deg",
            "sees the face",
        ),
        ({"along_um": 250.0}, "/sections/0/boundaries/0/along_um", "within the section line"),
    ],
)
def test_bad_cross_section_entries_raise_input_error(change, pointer, match):
    # The checks the schema cannot express: made once, by the record or (off the map) the stage.
    sec, seg = _changed(change)
    with pytest.raises(InputError, match=match) as info:
        _measure(sec, seg, step_um=0.5, bounds_um=BOUNDS, path="job.json", pointer="/sections/0")
    assert info.value.pointer == pointer
    assert info.value.path == "job.json"


def _section_schema_errors(entry):
    """Errors of the job schema's section definition on one entry (jsonschema)."""
    from jsonschema import Draft202012Validator

    schema = load_schema("job.schema.json")
    validator = Draft202012Validator({"$defs": schema["$defs"], "$ref": "#/$defs/section"})
    return [list(e.absolute_path) for e in validator.iter_errors(entry)]


@pytest.mark.parametrize(
    ("change", "path"),
    [
        ({"line_um": [[10, 50]]}, ["line_um"]),
        ({"viewer_at_um": [1, 2, 3]}, ["viewer_at_um"]),
        ({"imaging_tilt_deg": 120}, ["imaging_tilt_deg"]),
        ({"imaging_tilt_deg": 0}, ["imaging_tilt_deg"]),
        ({"face_inclination_deg": 0}, ["face_inclination_deg"]),
        ({"match_tolerance_um": -1}, ["match_tolerance_um"]),
        ({"image_angle_deg": 95.0}, ["boundaries", 0, "image_angle_deg"]),
        ({"descends": "down"}, ["boundaries", 0, "descends"]),
        ({"angle_sigma_deg": -1.0}, ["boundaries", 0, "angle_sigma_deg"]),
    ],
)
def test_schema_checks_the_section_fields_it_can_express(change, path):
    sec, _ = _changed(change)
    assert path in _section_schema_errors({"kind": "cross-section", **sec})
    good, _ = _changed({})
    assert _section_schema_errors({"kind": "cross-section", **good}) == []


def test_cross_section_argument_errors():
    sec, seg = _one_boundary_case(60.0)
    with pytest.raises(SettingError, match=r"`bounds_um` to have shape \(4,\)"):
        _measure(sec, seg, step_um=0.5, bounds_um=(0, 1))
    with pytest.raises(SettingError, match="`step_um` to be a finite number > 0"):
        _measure(sec, seg, step_um=0.0, bounds_um=BOUNDS)
    record = CrossSection.from_job_entry(sec, axes=SAMPLE_AXES)
    with pytest.raises(ValueError, match=r"`line_sample` to have shape \(2, 2\)"):
        CrossSection(**{**record.__dict__, "line_sample": [1.0, 2.0]})
    with pytest.raises(ValueError, match="`descends` to hold only"):
        CrossSection(**{**record.__dict__, "descends": ["down"]})
    with pytest.raises(ValueError, match="`image_angle_deg` to have the shape of `along_um`"):
        CrossSection(**{**record.__dict__, "image_angle_deg": [1.0, 2.0]})


def test_cross_section_record_converts_declared_axes():
    # Declared x right, y up with origin at S (0, 100): y_S = 100 − y (conventions §2).
    sec, _ = _one_boundary_case(60.0)
    axes = DeclaredAxes("right", "up", origin_um=(0.0, 100.0))
    declared = {
        **sec,
        "line_um": axes.points_to_declared(np.array(sec["line_um"])).tolist(),
        "viewer_at_um": axes.points_to_declared(np.array(sec["viewer_at_um"])).tolist(),
    }
    record = CrossSection.from_job_entry(declared, axes=axes)
    assert_allclose(record.line_sample, sec["line_um"], rtol=0, atol=1e-12)
    assert_allclose(record.viewer_sample, sec["viewer_at_um"], rtol=0, atol=1e-12)
    assert not record.line_sample.flags.writeable


def test_real_path_reproduces_the_outside_checked_formulas():
    # A synthetic vertical face: a plane of dip δ whose trace makes β with the line shows the
    # apparent dip α = apparent_dip_deg(δ, β) on the face (checked against Ragan's worked
    # values in tests/external/test_section_formulas.py), and a tilted image records
    # tan α_image = tan α · sin θ, the inverse of face_angle_from_image_deg. The measuring
    # path must give back δ and β, so the outside checks cover it.
    line = np.array([[0.0, 50.0], [200.0, 50.0]])
    viewer = np.array([100.0, 80.0])
    for dip_deg, beta_deg, tilt_deg in [(60.0, 45.0, 52.0), (60.0, 30.0, 52.0), (35.0, 70.0, 38.0)]:
        b = math.radians(beta_deg)
        t = np.array([math.cos(b), math.sin(b), 0.0])
        d = np.cross(Z, t)
        d = d if d[1] > 0 else -d
        delta = math.radians(dip_deg)
        n = np.cross(t, math.cos(delta) * d + math.sin(delta) * Z)
        apparent = float(apparent_dip_deg(dip_deg, beta_deg))
        image = math.degrees(
            math.atan(math.tan(math.radians(apparent)) * math.sin(math.radians(tilt_deg)))
        )
        assert_allclose(face_angle_from_image_deg(image, tilt_deg), apparent, rtol=0, atol=1e-9)
        _, side = _face_view(n, line, viewer, tilt_deg, 90.0)
        sec = {
            "line_um": line.tolist(),
            "viewer_at_um": viewer.tolist(),
            "imaging_tilt_deg": tilt_deg,
            "boundaries": [{"along_um": 100.0, "image_angle_deg": image, "descends": side}],
        }
        out = _measure(sec, _segments_for([n], line, [100.0]), step_um=0.5, bounds_um=BOUNDS)
        assert_allclose(out["measured_dip_deg"], [dip_deg], rtol=0, atol=1e-9)
        assert_allclose(out["beta_deg"], [beta_deg], rtol=0, atol=1e-9)


def test_exactly_vertical_plane_has_no_dip_direction():
    # An image angle of 90° on a perpendicular face: the boundary runs straight down, the
    # plane is vertical and, by the edge rule of conventions §5, has no dip direction.
    sec, seg = _changed({"image_angle_deg": 90.0})
    sec["imaging_tilt_deg"] = 90.0
    out = _measure(sec, seg, step_um=0.5, bounds_um=BOUNDS)
    assert out["status"].tolist() == ["measured"]
    assert_allclose(out["measured_dip_deg"], [90.0], rtol=0, atol=1e-9)
    assert np.isnan(out["dip_direction_azimuth_deg"]).all()


# --------------------------------------------------------------------------- depths


def test_section_depth_from_job_entries():
    d = section_depth({"depth_um": 2.0, "depth_sigma_um": 0.1})
    assert (d.depth_um, d.depth_sigma_um, d.source) == (2.0, 0.1, "given")
    # A null σ (the job's default) is 10 % of the depth.
    d = section_depth({"depth_um": 2.0, "depth_sigma_um": None})
    assert_allclose(d.depth_sigma_um, 0.2, rtol=1e-12, atol=0)
    d = section_depth(
        {"indent": {"diagonal_before_um": 30.0, "diagonal_after_um": 23.0}, "depth_sigma_um": 0.05}
    )
    assert d.source == "indent" and d.depth_sigma_um == 0.05
    # (30 − 23) / (2√2 tan 68°), Vickers geometry (ISO 6507-1), hand-computed.
    assert_allclose(d.depth_um, 0.99991, rtol=0, atol=5e-6)


def test_indent_that_does_not_shrink_raises_input_error():
    # The one depth check the schema cannot express (it checks each diagonal > 0).
    entry = {"indent": {"diagonal_before_um": 20.0, "diagonal_after_um": 21.0}}
    with pytest.raises(InputError, match="the indent diagonal to shrink") as info:
        section_depth(entry, path="job.json", pointer="/sections/1")
    assert info.value.pointer == "/sections/1/indent"


def test_serial_layer_converts_fiducials_from_each_maps_axes():
    # Surface declared (right, up) with origin (0, 10): y_S = 10 − y; section map in S.
    layer = SerialLayer.from_job_entry(
        {"depth_um": 2.0, "fiducials": [{"surface_um": [1.0, 9.0], "section_um": [2.0, 8.0]}]},
        surface_axes=DeclaredAxes("right", "up", origin_um=(0.0, 10.0)),
        section_axes=SAMPLE_AXES,
    )
    assert_allclose(layer.fiducials_um, [[[1.0, 1.0], [2.0, 8.0]]], rtol=0, atol=1e-12)
    assert layer.depth.source == "given"
    assert (
        SerialLayer.from_job_entry(
            {"depth_um": 2.0}, surface_axes=SAMPLE_AXES, section_axes=SAMPLE_AXES
        ).fiducials_um
        is None
    )


# --------------------------------------------------------------------------- serial sections
# A hand-built two-section sample: vertical strips of grains whose boundaries are
# planes x = c + z·cot(δ)·s, sampled at z = 0 and z = h (truth by construction).

STEP = 0.5
CUTS = [(17.0, 60.0, 1), (43.0, 45.0, -1), (66.0, 75.0, 1), (84.0, 88.0, 1)]


def _strip_labels(depth_um, shape=(120, 200), shift_px=(0, 0)):
    h, w = shape
    y, x = np.mgrid[0:h, 0:w] * STEP
    x = x + shift_px[1] * STEP
    y = y + shift_px[0] * STEP
    labels = np.ones(shape, np.int32)
    for c, dip, side in CUTS:
        # Plane through x = c at the surface, dipping toward +x (side 1) or −x.
        move = side * depth_um / math.tan(math.radians(dip)) if dip < 90 else 0.0
        # Slight slope in y keeps the boundaries from being axis-parallel.
        labels += (x >= c + move + 0.05 * (y - 30.0)).astype(np.int32)
    labels[y >= 55.0] += 10  # a horizontal boundary, vertical plane
    return labels


def _grain_map(labels):
    ids = np.unique(labels)
    ys, xs = np.indices(labels.shape) * STEP
    gen = np.random.default_rng(0)
    quats = gen.normal(size=(ids.max() + 1, 4))
    quats /= np.linalg.norm(quats, axis=1, keepdims=True)
    quats[:, 0] = np.abs(quats[:, 0])
    table = {
        "grain_id": ids,
        "phase": np.ones(len(ids), int),
        "quat": quats[ids],
        "area_px": np.array([np.sum(labels == i) for i in ids]),
        "centroid_x_um": np.array([xs[labels == i].mean() for i in ids]),
        "centroid_y_um": np.array([ys[labels == i].mean() for i in ids]),
        "touches_edge": np.zeros(len(ids), bool),
    }
    return GrainMap(labels, table, {}, 5.0, 4)


def _strip_segments(depth_um):
    """Traces of the strip boundaries at depth h: upper half (ids 0-3), lower half (10-13)."""
    rows = []
    for k, (c, dip, side) in enumerate(CUTS):
        move = side * depth_um / math.tan(math.radians(dip))
        for first, (ya, yb), grains in (
            (0, (2.0, 50.0), (k + 1, k + 2)),
            (10, (58.0, 88.0), (k + 11, k + 12)),
        ):
            xa = c + move + 0.05 * (ya - 30.0)
            xb = c + move + 0.05 * (yb - 30.0)
            rows.append((first + k, *grains, xa, ya, xb, yb))
    arr = np.array(rows, float)
    angle = np.degrees(np.arctan2(arr[:, 6] - arr[:, 4], arr[:, 5] - arr[:, 3])) % 180
    n = len(arr)
    return {
        "segment_id": arr[:, 0].astype(int),
        "grain_a": arr[:, 1].astype(int),
        "grain_b": arr[:, 2].astype(int),
        "x0_um": arr[:, 3],
        "y0_um": arr[:, 4],
        "x1_um": arr[:, 5],
        "y1_um": arr[:, 6],
        "length_um": np.hypot(arr[:, 5] - arr[:, 3], arr[:, 6] - arr[:, 4]),
        "trace_angle_deg": angle,
        "trace_sigma_deg": np.full(n, 0.3),
        "residual_um": np.full(n, 0.1),
        "n_edges": np.full(n, 80),
    }


def _truth_dip_azimuth(dip, side):
    # Trace direction (0.05, 1) normalised; the dip direction is ±x-ish, perpendicular.
    t = np.array([0.05, 1.0]) / math.hypot(0.05, 1.0)
    u = np.array([t[1], -t[0]]) * side
    return dip, math.degrees(math.atan2(u[1], u[0])) % 360.0


def test_serial_section_recovers_strip_dips():
    h = 5.0
    surface = _grain_map(_strip_labels(0.0))
    deeper = _grain_map(_strip_labels(h))
    out = measure_serial_section(
        _strip_segments(0.0),
        surface,
        _strip_segments(h),
        deeper,
        depth_um=h,
        depth_sigma_um=0.1,
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        registration=Registration(0.0, 0.0, 0.0, 0.2, 20, "given"),
    )
    b = out.boundaries
    upper = b["segment_id"] < 10
    assert b["status"][upper].tolist() == ["measured"] * 4
    for row, (_c, dip, side) in zip(np.flatnonzero(upper), CUTS, strict=True):
        want_dip, want_az = _truth_dip_azimuth(dip, side)
        # The 0.05 slope in y tilts the plane slightly off the ideal strip dip.
        assert_allclose(b["measured_dip_deg"][row], want_dip, rtol=0, atol=0.5)
        diff = (b["dip_direction_azimuth_deg"][row] - want_az + 180) % 360 - 180
        assert abs(diff) < 0.5
        assert b["dip_source"][row] == "serial-section"
    assert out.registration.method == "given"
    assert out.depth_um == h
    # σ_δ from the formula of §8 with σ_Δ from two line fits and the registration.
    row = 0
    line = max(0.1, STEP / math.sqrt(12)) / math.sqrt(80)  # residual floored at the pixel
    sigma_d = math.sqrt(2 * line**2 + (0.2 / math.sqrt(20)) ** 2)
    assert_allclose(b["offset_sigma_um"][row], sigma_d, rtol=1e-9, atol=0)
    d = b["offset_um"][row]
    want = math.degrees(math.hypot(d * 0.1, h * sigma_d) / (h**2 + d**2))
    assert_allclose(b["measured_dip_sigma_deg"][row], want, rtol=1e-9, atol=0)


def _truth_grain_map(micro, sampled):
    """GrainMap built from a synthetic map's true regions (no segmentation involved)."""
    labels = sampled.grain_id.astype(np.int32)
    ids = np.unique(labels)
    flat = labels.ravel()
    area = np.bincount(flat)[ids]
    xs, ys = sampled.x_um, sampled.y_um
    edge = np.zeros(labels.max() + 1, bool)
    edge[np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))] = True
    table = {
        "grain_id": ids,
        "phase": micro.region_phase[ids - 1],
        "quat": micro.region_quat[ids - 1],
        "area_px": area,
        "centroid_x_um": np.bincount(flat, xs.ravel())[ids] / area,
        "centroid_y_um": np.bincount(flat, ys.ravel())[ids] / area,
        "touches_edge": edge[ids],
    }
    return GrainMap(labels, table, {}, 5.0, 4)


@pytest.fixture(scope="module")
def voronoi():
    from types import SimpleNamespace

    from inclination.synthetic import make_microstructure

    fcc = SimpleNamespace(id=1, name="fcc", laue="m-3m")
    return make_microstructure(box_um=(100, 80, 20), n_grains=60, rng=1, phases=[fcc], twins=4)


@pytest.mark.parametrize("shift_um", [(1.5, -1.0), (-4.0, 4.5), (3.25, 0.75)])
def test_registration_recovers_an_imposed_shift(voronoi, shift_um):
    from inclination.synthetic import sample_map

    kw = {"step_um": STEP, "rng": 0, "extent_um": (90, 70), "noise_deg": 0.0}
    surface = _truth_grain_map(voronoi, sample_map(voronoi, offset_um=(5, 5), **kw))
    moved = sample_map(voronoi, offset_um=(5 + shift_um[0], 5 + shift_um[1]), **kw)
    reg = register_sections(
        surface, _truth_grain_map(voronoi, moved), step_um=STEP, laue_by_phase={1: "m-3m"}
    )
    # A feature at deeper-map p sits at p + shift on the surface map; the same plane
    # shifted is recovered to half a step.
    assert abs(reg.shift_x_um - shift_um[0]) <= STEP / 2
    assert abs(reg.shift_y_um - shift_um[1]) <= STEP / 2
    assert reg.method == "grain structure"
    assert reg.n_points > 5 and reg.residual_um < STEP


@pytest.mark.parametrize("shift_um", [(0.0, 0.0), (-4.0, 4.5), (2.0, 1.25)])
def test_registration_at_depth(voronoi, shift_um):
    # At depth h every boundary has moved by h·cot δ; the shift found carries the net
    # movement of the boundaries in view, of order h/√N (N boundaries), here about a
    # step for h = 5 µm and some 60 boundaries. A broken registration is off by grains.
    from inclination.synthetic import sample_map

    kw = {"step_um": STEP, "rng": 0, "extent_um": (90, 70), "noise_deg": 0.0}
    surface = _truth_grain_map(voronoi, sample_map(voronoi, offset_um=(5, 5), **kw))
    deeper = sample_map(voronoi, offset_um=(5 + shift_um[0], 5 + shift_um[1]), depth_um=5.0, **kw)
    reg = register_sections(
        surface, _truth_grain_map(voronoi, deeper), step_um=STEP, laue_by_phase={1: "m-3m"}
    )
    assert math.hypot(reg.shift_x_um - shift_um[0], reg.shift_y_um - shift_um[1]) < 2 * STEP


@pytest.mark.parametrize("shift_um", [(1.5, -1.3), (-2.0, 0.866)])
def test_registration_on_a_hexagonal_grid(voronoi, shift_um):
    from inclination.synthetic import sample_map

    kw = {"step_um": STEP, "rng": 0, "extent_um": (90, 70), "noise_deg": 0.0, "grid": "hexagonal"}
    surface = _truth_grain_map(voronoi, sample_map(voronoi, offset_um=(5, 5), **kw))
    moved = sample_map(voronoi, offset_um=(5 + shift_um[0], 5 + shift_um[1]), **kw)
    reg = register_sections(
        surface,
        _truth_grain_map(voronoi, moved),
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        grid="hexagonal",
    )
    assert abs(reg.shift_x_um - shift_um[0]) <= STEP / 2
    assert abs(reg.shift_y_um - shift_um[1]) <= STEP / 2
    with pytest.raises(ValueError, match="`grid` to be one of"):
        register_sections(
            surface, surface, step_um=STEP, laue_by_phase={1: "m-3m"}, grid="triangular"
        )


def test_registration_without_common_grains(voronoi):
    from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply
    from inclination.synthetic import sample_map

    surface = _truth_grain_map(voronoi, sample_map(voronoi, step_um=1.0, rng=0, noise_deg=0.0))
    turned = dict(surface.grains)
    turned["quat"] = quat_multiply(surface.grains["quat"], quat_from_axis_angle_deg([0, 0, 1], 20))
    other = GrainMap(surface.labels, turned, {}, 5.0, 4)
    reg = register_sections(surface, other, step_um=1.0, laue_by_phase={1: "m-3m"})
    assert reg.method == "none" and reg.n_points == 0 and np.isnan(reg.residual_um)


def test_registration_from_fiducials():
    fid = np.array(
        [[[10.0, 10.0], [8.0, 11.0]], [[50.0, 20.0], [48.0, 21.0]], [[30.0, 40.0], [28.1, 41.0]]]
    )
    surface = _grain_map(_strip_labels(0.0))
    reg = register_sections(
        surface, surface, step_um=STEP, laue_by_phase={1: "m-3m"}, fiducials_um=fid
    )
    assert reg.method == "fiducials"
    assert_allclose([reg.shift_x_um, reg.shift_y_um], [1.9667, -1.0], rtol=0, atol=1e-3)
    assert 0 < reg.residual_um < 0.1
    assert_allclose(reg.apply([[8.0, 11.0]]), [[9.9667, 10.0]], rtol=0, atol=1e-3)
    with pytest.raises(ValueError, match=r"`fiducials_um` to have shape \(K, 2, 2\)"):
        register_sections(
            surface, surface, step_um=STEP, laue_by_phase={1: "m-3m"}, fiducials_um=[[1.0, 2.0]]
        )


def test_fitted_rotation_recovers_a_small_turn():
    theta = math.radians(1.0)
    rot = np.array([[math.cos(theta), -math.sin(theta)], [math.sin(theta), math.cos(theta)]])
    deeper = np.array([[0.0, 0.0], [40.0, 0.0], [0.0, 30.0], [40.0, 30.0]])
    surface = deeper @ rot.T + [2.0, -1.0]
    reg = register_sections(
        _grain_map(_strip_labels(0.0)),
        _grain_map(_strip_labels(0.0)),
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        fiducials_um=np.stack([surface, deeper], 1),
        fit_rotation=True,
    )
    assert_allclose(reg.rotation_deg, 1.0, rtol=0, atol=1e-9)
    assert_allclose(reg.apply(deeper), surface, rtol=0, atol=1e-9)


def test_grain_matching_uses_orientation_and_overlap():
    surface = _grain_map(_strip_labels(0.0))
    deeper = _grain_map(_strip_labels(0.0))
    pairs = match_grains(
        surface,
        deeper,
        Registration(0, 0, 0, 0, 0, "given"),
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
    )
    assert_allclose(pairs["surface_grain"], pairs["deeper_grain"], rtol=0, atol=0)
    assert_allclose(pairs["disorientation_deg"], 0.0, rtol=0, atol=1e-4)
    # Turn every deeper grain by 20°: no grain is the same grain any more.
    from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply

    turned = dict(deeper.grains)
    turned["quat"] = quat_multiply(deeper.grains["quat"], quat_from_axis_angle_deg([0, 0, 1], 20))
    other = GrainMap(deeper.labels, turned, {}, 5.0, 4)
    pairs = match_grains(
        surface,
        other,
        Registration(0, 0, 0, 0, 0, "given"),
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
    )
    assert len(pairs["surface_grain"]) == 0


def test_serial_real_path_reproduces_serial_dip_deg():
    # The stage's dip (from the §5 function on its normal) is tan δ = h / |Δ| of
    # serial_dip_deg, checked against hand-worked values in tests/external.
    h = 2.5
    out = measure_serial_section(
        _strip_segments(0.0),
        _grain_map(_strip_labels(0.0)),
        _strip_segments(h),
        _grain_map(_strip_labels(h)),
        depth_um=h,
        depth_sigma_um=0.1,
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        registration=Registration(0, 0, 0, 0.2, 10, "given"),
    ).boundaries
    found = out["deeper_segment_id"] >= 0
    assert found.sum() >= 4
    assert_allclose(
        out["measured_dip_deg"][found],
        serial_dip_deg(h, out["offset_um"][found]),
        rtol=0,
        atol=1e-9,
    )
    normals = np.stack([out["normal_x"], out["normal_y"], out["normal_z"]], -1)[found]
    assert_allclose(
        surface_geometry(normals).dip_deg, out["measured_dip_deg"][found], rtol=0, atol=1e-9
    )


def test_thin_layer_warns_and_flags():
    h = 0.05
    surface = _grain_map(_strip_labels(0.0))
    with pytest.warns(UserWarning, match="too thin for a useful dip"):
        out = measure_serial_section(
            _strip_segments(0.0),
            surface,
            _strip_segments(h),
            _grain_map(_strip_labels(h)),
            depth_um=h,
            depth_sigma_um=0.02,
            step_um=STEP,
            laue_by_phase={1: "m-3m"},
            registration=Registration(0, 0, 0, 0.2, 10, "given"),
        )
    assert "ill_conditioned" in out.boundaries["status"].tolist()


def test_serial_section_bad_input():
    surface = _grain_map(_strip_labels(0.0))
    segs = _strip_segments(0.0)
    # Depths reach the stage from a checked job record; here they are settings.
    with pytest.raises(SettingError, match="`depth_um` to be a finite number > 0"):
        measure_serial_section(
            segs,
            surface,
            segs,
            surface,
            depth_um=-1.0,
            depth_sigma_um=0.1,
            step_um=STEP,
            laue_by_phase={1: "m-3m"},
        )
    with pytest.raises(SettingError, match="`depth_sigma_um`"):
        measure_serial_section(
            segs,
            surface,
            segs,
            surface,
            depth_um=1.0,
            depth_sigma_um=-0.1,
            step_um=STEP,
            laue_by_phase={1: "m-3m"},
        )
    other = dict(surface.grains)
    other["phase"] = np.full(len(other["phase"]), 2)
    alien = GrainMap(surface.labels, other, {}, 5.0, 4)
    with pytest.raises(InputError, match="hold the phases of the surface map") as info:
        measure_serial_section(
            segs,
            surface,
            segs,
            alien,
            depth_um=1.0,
            depth_sigma_um=0.1,
            step_um=STEP,
            laue_by_phase={1: "m-3m", 2: "6/mmm"},
            pointer="/sections/1",
        )
    assert info.value.pointer == "/sections/1/map"


# --------------------------------------------------------------------------- stacks


def test_plane_through_traces_of_a_known_plane():
    gen = np.random.default_rng(2)
    n = _random_normals(gen, 1, 30, 70)[0]
    t = np.cross(Z, n)
    t /= np.linalg.norm(t)
    d = -np.sign(n[2]) * n[:2] / np.linalg.norm(n[:2])
    dip, az = _plane_geometry(n)
    depths = np.array([0.0, 2.0, 4.0, 6.0])
    shift = depths / math.tan(math.radians(dip))
    p = np.array([30.0, 40.0]) + shift[:, None] * d
    a, b = p - 10 * t[:2], p + 10 * t[:2]
    fit = fit_plane_through_traces(a[:, 0], a[:, 1], b[:, 0], b[:, 1], depths)
    assert_allclose(fit.dip_deg, dip, rtol=0, atol=1e-8)
    assert_allclose((fit.dip_direction_azimuth_deg - az + 180) % 360 - 180, 0, rtol=0, atol=1e-8)
    assert_allclose(fit.residual_um, 0.0, rtol=0, atol=1e-9)
    with pytest.raises(ValueError, match="at least 2 traces"):
        fit_plane_through_traces([0.0], [0.0], [1.0], [1.0], [0.0])


def test_stack_of_three_sections():
    surface = _grain_map(_strip_labels(0.0))
    levels = [(_strip_segments(h), _grain_map(_strip_labels(h))) for h in (2.5, 5.0)]
    given = [Registration(0.0, 0.0, 0.0, 0.2, 20, "given")] * 2
    out = measure_stack(
        _strip_segments(0.0),
        surface,
        levels,
        depths_um=[2.5, 5.0],
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        registrations=given,
    )
    upper = out["segment_id"] < 10
    assert out["n_sections"][upper].tolist() == [3] * 4
    want = [dip for _, dip, _ in CUTS]
    assert_allclose(out["measured_dip_deg"][upper], want, rtol=0, atol=0.5)
    assert np.all(out["fit_residual_um"][upper] < 0.2)
    with pytest.raises(ValueError, match="one depth per deeper section"):
        measure_stack(
            _strip_segments(0.0),
            surface,
            levels,
            depths_um=[2.5],
            step_um=STEP,
            laue_by_phase={1: "m-3m"},
        )
    with pytest.raises(ValueError, match="one entry per deeper section"):
        measure_stack(
            _strip_segments(0.0),
            surface,
            levels,
            depths_um=[2.5, 5.0],
            step_um=STEP,
            laue_by_phase={1: "m-3m"},
            registrations=given[:1],
        )


def test_null_job_defaults_are_the_documented_defaults():
    sec, seg = _one_boundary_case(60.0)
    plain = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    sec["match_tolerance_um"] = None
    sec["face_inclination_deg"] = None
    sec["boundaries"] = [{**sec["boundaries"][0], "angle_sigma_deg": None}]
    nulls = _measure(sec, seg, axes=SAMPLE_AXES, step_um=0.5, bounds_um=BOUNDS)
    for key in ("measured_dip_deg", "measured_dip_sigma_deg", "dip_direction_azimuth_deg"):
        assert_allclose(nulls[key], plain[key], rtol=0, atol=0)


def test_overhanging_face_recovers_the_plane():
    # A face past vertical (φ = 110°) leans away from the viewer with depth.
    gen = np.random.default_rng(21)
    normals = _random_normals(gen, 4, 30, 70)
    line = np.array([[20.0, 50.0], [180.0, 50.0]])
    viewer = np.array([100.0, 70.0])
    along = [20.0, 60.0, 100.0, 140.0]
    entries = []
    for n, s in zip(normals, along, strict=True):
        alpha, side = _face_view(n, line, viewer, 90.0, 110.0)
        entries.append({"along_um": s, "image_angle_deg": alpha, "descends": side})
    section = {
        "line_um": line.tolist(),
        "viewer_at_um": viewer.tolist(),
        "imaging_tilt_deg": 90.0,
        "face_inclination_deg": 110.0,
        "boundaries": entries,
    }
    out = _measure(
        section,
        _segments_for(normals, line, along),
        axes=SAMPLE_AXES,
        step_um=0.5,
        bounds_um=BOUNDS,
    )
    got = np.stack([out["normal_x"], out["normal_y"], out["normal_z"]], -1)
    assert_allclose(np.abs(np.sum(got * normals, axis=1)), 1.0, rtol=0, atol=1e-9)


def test_plane_fit_sigma_matches_the_scatter_of_repeated_fits():
    # Brute force: the normal's spread over many noisy stacks against the first-order σ.
    gen = np.random.default_rng(12)
    n = np.array([-math.sin(math.radians(50)), 0.0, math.cos(math.radians(50))])
    t = np.array([0.0, 1.0])
    depths = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    shift = depths / math.tan(math.radians(50))
    angles, sigmas = [], []
    for _ in range(300):
        p = np.stack([shift, np.zeros(5)], -1) + gen.normal(0, 0.1, (5, 2))
        a, b = p - 10 * t + gen.normal(0, 0.1, (5, 2)), p + 10 * t
        fit = fit_plane_through_traces(a[:, 0], a[:, 1], b[:, 0], b[:, 1], depths)
        angles.append(math.degrees(math.acos(min(1.0, abs(np.dot(fit.normal_sample, n))))))
        sigmas.append(fit.normal_sigma_deg)
    # The angle from the truth is the length of a 2-D error: its RMS is about √2 σ at
    # most (σ is that of the less constrained direction).
    rms = math.sqrt(np.mean(np.square(angles)))
    assert 0.5 < rms / np.median(sigmas) < 2.0
    with pytest.raises(ValueError, match="`position_sigma_um` to be a finite number >= 0"):
        fit_plane_through_traces([0, 1], [0, 0], [0, 1], [1, 1], [0, 1], position_sigma_um=-1)


def test_stack_table_carries_sigmas_for_the_comparator():
    surface = _grain_map(_strip_labels(0.0))
    levels = [(_strip_segments(h), _grain_map(_strip_labels(h))) for h in (2.5, 5.0)]
    given = [Registration(0.0, 0.0, 0.0, 0.2, 20, "given")] * 2
    out = measure_stack(
        _strip_segments(0.0),
        surface,
        levels,
        depths_um=[2.5, 5.0],
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        registrations=given,
    )
    upper = out["segment_id"] < 10
    assert np.all(np.isfinite(out["measured_dip_sigma_deg"][upper]))
    assert np.all(
        (out["measured_dip_sigma_deg"][upper] > 0) & (out["measured_dip_sigma_deg"][upper] < 5)
    )
    assert np.all(out["dip_direction_sigma_deg"][upper] >= out["measured_dip_sigma_deg"][upper])


def test_empty_tables_give_empty_or_unmatched_rows():
    segs = _strip_segments(0.0)
    empty = {k: v[:0] for k, v in segs.items()}
    grains = _grain_map(_strip_labels(0.0))
    given = Registration(0.0, 0.0, 0.0, 0.0, 1, "given")
    kw = {
        "depth_um": 1.0,
        "depth_sigma_um": 0.1,
        "step_um": STEP,
        "laue_by_phase": {1: "m-3m"},
        "registration": given,
    }
    assert len(measure_serial_section(empty, grains, segs, grains, **kw).boundaries["status"]) == 0
    out = measure_serial_section(segs, grains, empty, grains, **kw).boundaries
    assert set(out["status"].tolist()) == {"unmatched"}
    assert np.all(out["deeper_segment_id"] == -1)
    stack = measure_stack(
        empty,
        grains,
        [(segs, grains)],
        depths_um=[1.0],
        step_um=STEP,
        laue_by_phase={1: "m-3m"},
        registrations=[given],
    )
    assert len(stack["status"]) == 0


@pytest.mark.parametrize(
    ("shift_um", "depth_um", "radius_steps"),
    [
        ((1.5, -1.0), 0.0, 6.0),
        ((-4.0, 4.5), 5.0, 6.0),
        ((3.25, 0.75), 5.0, 1.0),
        ((2.0, 1.25), 8.0, 0.5),
    ],
)
def test_registration_coarse_to_fine_equals_the_exhaustive_search(
    voronoi, monkeypatch, shift_um, depth_um, radius_steps
):
    # The coarse pass only picks where the full-resolution climb starts; the shift must
    # be the one an exhaustive full-resolution search over the whole range finds. Small
    # vote radii put the peak on the edge of the search range (reach = radius + 1 step).
    from inclination.sections import registration as reg_module
    from inclination.synthetic import sample_map

    kw = {"step_um": STEP, "rng": 0, "extent_um": (90, 70), "noise_deg": 0.0}
    surface = _truth_grain_map(voronoi, sample_map(voronoi, offset_um=(5, 5), **kw))
    deeper = _truth_grain_map(
        voronoi,
        sample_map(voronoi, offset_um=(5 + shift_um[0], 5 + shift_um[1]), depth_um=depth_um, **kw),
    )
    args = {"step_um": STEP, "laue_by_phase": {1: "m-3m"}, "vote_radius_um": radius_steps * STEP}
    monkeypatch.setattr(reg_module, "_COARSE_POINTS", 10**12)  # stride 1: every shift in full
    exhaustive = register_sections(surface, deeper, **args)
    monkeypatch.setattr(reg_module, "_COARSE_POINTS", 64)  # strides of several pixels
    coarse_to_fine = register_sections(surface, deeper, **args)
    assert coarse_to_fine == exhaustive


def test_an_entry_matches_the_boundary_that_crosses_not_a_segment_that_stops_short():
    """A fitted segment ending 0.7 µm short of the line is not the boundary seen there.

    Constructed case: boundary A (grains 1|2) stops 0.7 µm before the line at a triple
    junction; boundary B (grains 3|4) runs on and crosses it 0.6 µm further along. With
    the match tolerance of two 0.5 µm steps both fitted segments reach the entry, but only
    B's boundary meets the line (derived from the geometry of the case).
    """
    from types import SimpleNamespace

    def seg(ids, pairs, x0, y0, x1, y1):
        n = len(ids)
        return {
            "segment_id": np.array(ids),
            "grain_a": np.array([p[0] for p in pairs]),
            "grain_b": np.array([p[1] for p in pairs]),
            "x0_um": np.array(x0, float),
            "y0_um": np.array(y0, float),
            "x1_um": np.array(x1, float),
            "y1_um": np.array(y1, float),
            "trace_angle_deg": np.full(n, 90.0),
            "trace_sigma_deg": np.full(n, 0.5),
        }

    network = SimpleNamespace(
        offsets=np.array([0, 3, 6]),
        closed=np.array([False, False]),
        points_um=np.array(
            [[40.0, 80.0], [40.0, 60.0], [40.0, 50.7], [40.6, 20.0], [40.6, 40.0], [40.6, 50.7]]
        ),
        grain_a=np.array([1, 3]),
        grain_b=np.array([2, 4]),
    )
    record = CrossSection(
        line_sample=[[0.0, 50.0], [100.0, 50.0]],
        viewer_sample=[50.0, 30.0],
        tilt_deg=90.0,
        along_um=[40.5],
        image_angle_deg=[60.0],
        descends=["right"],
        angle_sigma_deg=[1.0],
    )
    both = seg([0, 1], [(1, 2), (3, 4)], [40.0, 40.6], [80.0, 20.0], [40.0, 40.6], [50.7, 50.6])
    crossings = network_crossings(network, record.line_sample)
    assert crossings["along_um"].tolist() == pytest.approx([40.6])
    options = {"step_um": 0.5, "bounds_um": (0.0, 0.0, 100.0, 100.0)}

    alone = measure_cross_section(record, both, **options)
    assert alone["status"].tolist() == ["ambiguous"]  # both segments reach the entry
    matched = measure_cross_section(record, both, crossings=crossings, **options)
    assert matched["status"].tolist() == ["measured"]
    assert matched["segment_id"].tolist() == [1]
    # The two boundaries meet 0.7 µm from the entry: a triple junction, flagged.
    junctions = network_junctions_um(network, options["bounds_um"], step_um=0.5)
    flagged = measure_cross_section(
        record, both, crossings=crossings, junctions_um=junctions, **options
    )
    assert flagged["status"].tolist() == ["near_junction"]

    # Only the short segment fitted: it used to be taken; now nothing is.
    short_only = seg([0], [(1, 2)], [40.0], [80.0], [40.0], [50.7])
    assert measure_cross_section(record, short_only, **options)["segment_id"].tolist() == [0]
    none = measure_cross_section(record, short_only, crossings=crossings, **options)
    assert none["status"].tolist() == ["unmatched"]


def test_a_lamella_moved_clear_of_itself_is_paired_by_its_centroid():
    # A 3-px lamella (grain 2, turned 60° about [111] as a Σ3 twin, from memory) in a
    # parent (grain 1); on the deeper map it sits 6 px aside: no pixel overlaps, so the
    # overlap floor alone leaves it out, and the centroid rule pairs it within the bound.
    from inclination.crystal.rotations import quat_from_axis_angle_deg

    def lamella(first_col):
        labels = np.ones((20, 40), np.int32)
        labels[:, first_col : first_col + 3] = 2
        cols = np.arange(first_col, first_col + 3)
        table = {
            "grain_id": np.array([1, 2]),
            "phase": np.array([1, 1]),
            "quat": np.stack([np.array([1.0, 0, 0, 0]), quat_from_axis_angle_deg([1, 1, 1], 60.0)]),
            "area_px": np.array([20 * 37, 20 * 3]),
            "centroid_x_um": np.array([19.5, cols.mean()]) * 1.0,
            "centroid_y_um": np.array([9.5, 9.5]),
            "touches_edge": np.array([1, 1]),
        }
        return GrainMap(labels, table, {}, 5.0, 4)

    given = Registration(0, 0, 0, 0, 0, "given")
    kw = {"step_um": 1.0, "laue_by_phase": {1: "m-3m"}}
    alone = match_grains(lamella(10), lamella(16), given, **kw)
    assert alone["deeper_grain"].tolist() == [1]
    both = match_grains(lamella(10), lamella(16), given, max_shift_um=8.0, **kw)
    assert both["deeper_grain"].tolist() == [1, 2]
    assert both["surface_grain"].tolist() == [1, 2]
    assert both["overlap_fraction"][1] == 0.0
    # Beyond the bound it stays unpaired.
    assert match_grains(lamella(10), lamella(16), given, max_shift_um=5.0, **kw)[
        "deeper_grain"
    ].tolist() == [1]
