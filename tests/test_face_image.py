"""inclination.sections.face_image: reading and measuring face images (conventions §7)."""

from __future__ import annotations

import json

import jsonschema
import numpy as np
import pytest
import tifffile
from skimage import io

from inclination.errors import InputError, SettingError
from inclination.io.schemas import schema_path
from inclination.sections import (
    CrossSection,
    face_depth_scale,
    measure_cross_section,
    measure_face_image,
    predicted_image_direction,
    read_face_image,
)


def _wedge(noise_sd=0.0, rng=0, shape=(60, 120)):
    """Cap over two grains split by a 45° line; the truth is known by construction."""
    img = np.full(shape, 0.3)
    img[:12] = 0.95
    cols, rows = np.meshgrid(np.arange(shape[1]), np.arange(shape[0]))
    img[(rows >= 12) & (cols > 60 + (rows - 12))] = 0.7
    return img + np.random.default_rng(rng).normal(0, noise_sd, shape)


def _measure(img, **options):
    defaults = {
        "pixel_um": 0.1,
        "line_start_px": (10.0, 11.5),
        "line_length_um": 10.0,
        "right_along_line": True,
        "tilt_deg": 90.0,
        "window_um": (0.3, 3.0),
    }
    return measure_face_image(img, **{**defaults, **options})


def test_wedge_with_noise_is_measured():
    m = _measure(_wedge(noise_sd=0.02))
    used = m.lines["status"] == "used"
    assert used.sum() == 1
    # By construction: the line leaves the surface (row 11.5) at col 59.5 + 0.5 = 60,
    # 50 px = 5.0 µm from the start, at 45°, descending to image-right.
    np.testing.assert_allclose(m.lines["along_um"][used], [5.0], rtol=0, atol=0.05)
    np.testing.assert_allclose(m.lines["image_angle_deg"][used], [45.0], rtol=0, atol=1.0)
    assert m.lines["descends"][used].tolist() == ["right"]
    np.testing.assert_allclose(m.noise_sd, 0.02, rtol=0.15, atol=0)


def test_image_left_along_line_counts_from_the_right():
    # With image-right pointing back along the line, along_um grows to image-left.
    m = _measure(_wedge(), line_start_px=(110.0, 11.5), right_along_line=False)
    np.testing.assert_allclose(m.lines["along_um"], [5.0], rtol=0, atol=0.05)


def test_noise_alone_gives_no_line():
    img = np.full((60, 120), 0.4)
    img[:12] = 0.95
    img = img + np.random.default_rng(5).normal(0, 0.03, img.shape)
    m = _measure(img)
    # Noise may leave a faint region edge; it is listed as unsure, never used.
    assert set(m.lines["status"].tolist()) <= {"low_contrast"}
    assert m.entries() == []


def test_declared_rotation_and_surface_row_are_used():
    m = _measure(_wedge(), rotation_deg=0.0, surface_row=11.5)
    assert not m.rotation_found
    assert m.rotation_deg == 0.0
    np.testing.assert_allclose(m.lines["along_um"], [5.0], rtol=0, atol=0.05)


def test_tilt_changes_only_the_face_window():
    # The image angle is what the image shows; the tilt enters the depth window only
    # (a 52° view shows 1 µm of face as sin 52° µm, conventions §7).
    np.testing.assert_allclose(face_depth_scale(52.0), np.sin(np.radians(52.0)), rtol=1e-12, atol=0)
    m = _measure(_wedge(), tilt_deg=52.0, window_um=(0.3, 3.0))
    np.testing.assert_allclose(m.lines["image_angle_deg"], [45.0], rtol=0, atol=1.0)


def test_entries_are_valid_job_boundaries():
    m = _measure(_wedge(noise_sd=0.02))
    schema = json.loads(schema_path("job.schema.json").read_text())
    entry = {
        "kind": "cross-section",
        "line_um": [[0, 0], [10, 0]],
        "viewer_at_um": [5, 3],
        "imaging_tilt_deg": 52,
        "boundaries": m.entries(),
    }
    jsonschema.validate(entry, {"$defs": schema["$defs"], "$ref": "#/$defs/cross_section"})


def test_predicted_direction_round_trips_through_the_measurement():
    # A normal measured from an image line must give back that line (same formulas, §7).
    seg = {
        "segment_id": np.array([0, 1]),
        "x0_um": np.array([50.0, 20.0]),
        "y0_um": np.array([0.0, 0.0]),
        "x1_um": np.array([60.0, 40.0]),
        "y1_um": np.array([100.0, 100.0]),
        "trace_angle_deg": np.degrees(np.arctan2([100.0, 100.0], [10.0, 20.0])),
        "trace_sigma_deg": np.array([0.5, 0.5]),
    }
    for viewer in ([50.0, 60.0], [50.0, 20.0]):
        sec = CrossSection(
            line_sample=[[0, 40], [100, 40]],
            viewer_sample=viewer,
            tilt_deg=52.0,
            along_um=[54.0, 28.0],
            image_angle_deg=[35.0, 70.0],
            descends=["right", "left"],
            angle_sigma_deg=[1.0, 1.0],
        )
        out = measure_cross_section(sec, seg, step_um=1.0, bounds_um=(0, 0, 100, 100))
        normal = np.stack([out["normal_x"], out["normal_y"], out["normal_z"]], axis=-1)
        d = predicted_image_direction(
            normal, line_sample=sec.line_sample, viewer_sample=sec.viewer_sample, tilt_deg=52.0
        )
        angle = np.degrees(np.arctan2(d[:, 1], np.abs(d[:, 0])))
        np.testing.assert_allclose(angle, [35.0, 70.0], rtol=0, atol=1e-9)
        assert np.where(d[:, 0] >= 0, "right", "left").tolist() == ["right", "left"]


def test_read_grey_png_and_tiff(tmp_path):
    grey = (np.arange(200).reshape(10, 20) % 256).astype(np.uint8)
    io.imsave(tmp_path / "g.png", grey, check_contrast=False)
    np.testing.assert_allclose(read_face_image(tmp_path / "g.png"), grey / 255.0, rtol=0, atol=1e-6)
    rgb = np.repeat(grey[..., None], 3, axis=-1)
    io.imsave(tmp_path / "rgb.png", rgb, check_contrast=False)
    np.testing.assert_allclose(
        read_face_image(tmp_path / "rgb.png"), grey / 255.0, rtol=0, atol=1e-6
    )
    tifffile.imwrite(tmp_path / "f.tif", np.full((9, 9), 0.25, np.float32))
    np.testing.assert_allclose(read_face_image(tmp_path / "f.tif"), 0.25, rtol=0, atol=1e-7)


def test_read_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_face_image(tmp_path / "none.tif")
    rgb = np.zeros((10, 10, 3), np.uint8)
    rgb[..., 1] = 90
    io.imsave(tmp_path / "c.png", rgb, check_contrast=False)
    with pytest.raises(InputError, match="colour image"):
        read_face_image(tmp_path / "c.png", pointer="/sections/0/image")
    tifffile.imwrite(tmp_path / "small.tif", np.zeros((4, 40), np.uint8))
    with pytest.raises(InputError, match="at least 8"):
        read_face_image(tmp_path / "small.tif")
    (tmp_path / "junk.png").write_bytes(b"not an image")
    with pytest.raises(InputError, match="readable"):
        read_face_image(tmp_path / "junk.png")
    tifffile.imwrite(tmp_path / "stack.tif", np.zeros((2, 10, 10), np.uint8))
    with pytest.raises(InputError, match="2-D"):
        read_face_image(tmp_path / "stack.tif")
    tifffile.imwrite(tmp_path / "nan.tif", np.full((10, 10), np.nan, np.float32))
    with pytest.raises(InputError, match="finite"):
        read_face_image(tmp_path / "nan.tif")


def test_measure_errors():
    img = _wedge()
    with pytest.raises(ValueError, match="line_start_px"):
        _measure(img, line_start_px=(500.0, 3.0))
    with pytest.raises(ValueError, match="2 dimensions"):
        _measure(img[None])
    with pytest.raises(SettingError, match="window_um"):
        _measure(img, window_um=(2.0, 1.0))
    with pytest.raises(SettingError, match="pixel_um"):
        _measure(img, pixel_um=0.0)
    with pytest.raises(ValueError, match="bright cap"):
        _measure(np.zeros((40, 40)))
    with pytest.raises(ValueError, match="fewer than 16"):
        _measure(img, line_length_um=0.5)


def _pinched_wedge(*, wedge=True, noise_sd=0.02, rng=0, shape=(60, 120)):
    """Grain | lamella | wedge | grain, the wedge pinching out 0.8 µm below the surface.

    By construction (90° tilt, 0.1 µm pixels): the lamella's left boundary leaves the
    surface at col 40 and runs down at 63° (slope 0.5 px per row); the boundary between
    the lamella and the right grain leaves the surface at col 75 (along 6.5 µm from the
    start col 10), but with ``wedge`` a grain between them from col 65 to col 75 at the
    surface closes 8 rows down, so that boundary only begins there.
    """
    img = np.full(shape, 0.3)
    cols, rows = np.meshgrid(np.arange(shape[1]), np.arange(shape[0]))
    d = rows - 12
    img[(d >= 0) & (cols > 75 - 0.5 * d)] = 0.45
    img[(d >= 0) & (cols > 40 + 0.5 * d) & (cols <= 75 - 0.5 * d)] = 0.75
    if wedge:
        img[(d >= 0) & (cols > 65 + 0.75 * d) & (cols <= 75 - 0.5 * d)] = 0.6
    img[:12] = 0.95
    return img + np.random.default_rng(rng).normal(0, noise_sd, shape)


def test_line_under_a_grain_pinching_out_is_not_used():
    # The boundary under the wedge does not meet the surface where its line would: its
    # points start 8 px down, not at the top of the window (a line the grey check flags
    # when used, matched to the wedge's trace), so it is short, not used.
    m = _measure(_pinched_wedge())
    used = m.lines["status"] == "used"
    assert not np.any(np.abs(m.lines["along_um"][used] - 6.5) < 0.5), m.lines["along_um"][used]
    np.testing.assert_allclose(m.lines["along_um"][used], [3.0], rtol=0, atol=0.1)
    # Without the wedge the same boundary meets the surface and is measured.
    plain = _measure(_pinched_wedge(wedge=False))
    used = plain.lines["status"] == "used"
    np.testing.assert_allclose(plain.lines["along_um"][used], [3.0, 6.5], rtol=0, atol=0.1)


def test_neighbour_check_notes_say_why():
    # Two lines bound one grey region (2) but their traces share no grain: the map shows
    # boundary 43|44 between them, a grain (44) the face hides.
    from inclination.sections import neighbour_check, neighbour_check_notes

    crossings = {
        "along_um": np.array([10.0, 12.5, 14.0, 30.0]),
        "grain_a": np.array([40, 43, 44, 31]),
        "grain_b": np.array([43, 44, 31, 50]),
    }
    args = ([1, 2, 3], [2, 3, 4], [40, 31, 31], [43, 44, 50])
    assert neighbour_check(*args).tolist() == ["inconsistent", "inconsistent", "consistent"]
    notes = neighbour_check_notes([10.0, 13.8, 30.0], *args, crossings=crossings)
    assert len(notes) == 1 and notes[0]["lines"] == [0, 1]
    assert notes[0]["between"] == [{"along_um": 12.5, "grains": [43, 44]}]
    assert "43|44 at 12.50 µm" in notes[0]["reason"] and "pinches out" in notes[0]["reason"]
    # Without a boundary between them on the map, one of the lines is matched wrongly.
    bare = {k: v[[0, 2, 3]] for k, v in crossings.items()}
    notes = neighbour_check_notes([10.0, 13.8, 30.0], *args, crossings=bare)
    assert notes[0]["between"] == [] and "matched to the wrong trace" in notes[0]["reason"]
