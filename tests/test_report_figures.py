"""Figures: ids without overlaps, cards clear of the data, merged SVG paths, downsampling."""

from __future__ import annotations

import re

import matplotlib
import numpy as np
import pytest

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from inclination.report.figures import (  # noqa: E402
    MAX_IMAGE_PX,
    MAX_VECTOR_POINTS,
    downsample_labels,
    plot_boundary_map,
    plot_dip_comparison,
    plot_normals_stereogram,
    save_figure,
)


def _random_map(n_segments=400, size=300, rng=0):
    g = np.random.default_rng(rng)
    labels = (np.arange(size)[:, None] // 30 * 10 + np.arange(size)[None, :] // 30) + 1
    x0, y0 = g.uniform(0, size, (2, n_segments))
    angle = g.uniform(0, np.pi, n_segments)
    length = g.uniform(2, 40, n_segments)
    x1 = np.clip(x0 + length * np.cos(angle), 0, size - 1)
    y1 = np.clip(y0 + length * np.sin(angle), 0, size - 1)
    seg = {
        "segment_id": np.arange(1, n_segments + 1),
        "x0_um": x0,
        "y0_um": y0,
        "x1_um": x1,
        "y1_um": y1,
    }
    classes = g.choice(["coherent_twin", "identified", "ambiguous", "none"], n_segments)
    dips = {
        "dip_deg": g.uniform(0, 90, n_segments),
        "dip_azimuth_deg": g.uniform(0, 360, n_segments),
    }
    return labels, seg, classes, dips


@pytest.fixture
def drawn():
    labels, seg, classes, dips = _random_map()
    art = plot_boundary_map(
        labels,
        seg,
        classes,
        step_x_um=1.0,
        step_y_um=1.0,
        dips=dips,
        sections=[("A", np.array([[10.0, 150.0], [290.0, 150.0]]))],
        title="t",
    )
    art["fig"].canvas.draw()
    yield art, seg
    plt.close(art["fig"])


def test_id_labels_do_not_overlap(drawn):
    art, _ = drawn
    renderer = art["fig"].canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in art["ids"]]
    assert len(boxes) > 10
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            assert a.x1 <= b.x0 or b.x1 <= a.x0 or a.y1 <= b.y0 or b.y1 <= a.y0


def test_ids_go_to_the_longest_segments(drawn):
    art, seg = drawn
    length = np.hypot(seg["x1_um"] - seg["x0_um"], seg["y1_um"] - seg["y0_um"])
    shown = {int(t.get_text()) for t in art["ids"]}
    longest = int(seg["segment_id"][np.argmax(length)])
    assert longest in shown


def test_cards_do_not_cover_any_segment(drawn):
    art, seg = drawn
    fig = art["fig"]
    renderer = fig.canvas.get_renderer()
    to_px = art["map_ax"].transData.transform
    p0 = to_px(np.column_stack([seg["x0_um"], seg["y0_um"]]))
    p1 = to_px(np.column_stack([seg["x1_um"], seg["y1_um"]]))
    cards = [art["legend"].get_window_extent(renderer), art["card_ax"].get_window_extent(renderer)]
    for box in cards:
        # A segment meets a box only if it passes through it; sample each segment finely.
        t = np.linspace(0, 1, 50)[None, :, None]
        pts = p0[:, None, :] + t * (p1 - p0)[:, None, :]
        inside = (
            (pts[..., 0] > box.x0)
            & (pts[..., 0] < box.x1)
            & (pts[..., 1] > box.y0)
            & (pts[..., 1] < box.y1)
        )
        assert not inside.any()


def test_svg_has_one_path_per_class(tmp_path, drawn):
    art, _ = drawn
    _, svg = save_figure(art["fig"], tmp_path / "m", dpi=50)
    text = svg.read_text()
    # 400 segments in four classes: two <path> elements per class colour (the map's one
    # merged path and its legend key), not 100 each.
    for colour in ("#d55e00", "#009e73", "#0072b2"):
        assert len(re.findall(rf"<path [^>]*stroke: {colour}", text, flags=re.S)) == 2, colour
    # Ticks merged too: all paths together far fewer than the 400 segments plus 400 ticks.
    assert len(re.findall(r"<path ", text)) < 200
    assert len(art["paths"]) == 4


def test_downsampled_image_is_at_most_the_limit():
    small = downsample_labels(np.zeros((5000, 3001), int))
    assert max(small.shape) <= MAX_IMAGE_PX
    assert small.shape == (1667, 1001)  # every 3rd point: ceil(5000 / 2000) = 3


def test_stereogram_marks_poles_in_the_upper_hemisphere():
    art = plot_normals_stereogram(
        [[0.0, 0.0, -1.0], [1.0, 1.0, 1.0]],
        ["identified", "coherent_twin"],
        [("(1 1 1)", np.array([1.0, 1.0, 1.0]) / np.sqrt(3))],
    )
    pts = np.array(art["points"])
    assert np.all(np.hypot(*pts.T) <= 1.0 + 1e-12)
    # (1 1 1) is 54.7356° from [001]: stereographic radius tan(θ/2) (hand formula).
    np.testing.assert_allclose(
        sorted(np.hypot(*pts.T)),
        [0.0, np.tan(np.arccos(1 / np.sqrt(3)) / 2)],
        rtol=0,
        atol=1e-12,
    )
    plt.close(art["ax"].figure)


def test_saved_box_is_matplotlibs_tight_box(tmp_path, drawn):
    # save_figure finds the tight box once for both files; matplotlib's own
    # bbox_inches="tight" (the reference) gives the same PNG size to a pixel.
    import io
    import struct

    def size(data):  # width and height from the PNG's IHDR chunk (PNG specification)
        return struct.unpack(">II", data[16:24])

    art, _ = drawn
    png, _ = save_figure(art["fig"], tmp_path / "m", dpi=80)
    buf = io.BytesIO()
    art["fig"].savefig(buf, format="png", dpi=80, bbox_inches="tight")
    ours, reference = size(png.read_bytes()), size(buf.getvalue())
    assert np.all(np.abs(np.subtract(ours, reference)) <= 1), (ours, reference)


@pytest.mark.parametrize("n", [50, MAX_VECTOR_POINTS + 500])
def test_dense_point_layers_are_one_image_in_the_svg(tmp_path, n):
    g = np.random.default_rng(3)
    normals = g.normal(size=(n, 3))
    normals[:, 2] = np.abs(normals[:, 2])
    classes = g.choice(["coherent_twin", "identified"], n)
    fig, (ax_s, ax_d) = plt.subplots(1, 2)
    plot_normals_stereogram(normals, classes, ax=ax_s)
    dips = g.uniform(0, 90, n)
    plot_dip_comparison(dips, dips + g.normal(0, 2, n), np.full(n, 1.0), classes, ax=ax_d)
    _, svg = save_figure(fig, tmp_path / "p", dpi=50)
    plt.close(fig)
    text = svg.read_text()
    # A marker is a <use> of a marker definition (ids "m..."; glyphs are "DejaVuSans-...").
    markers = len(re.findall(r'<use xlink:href="#m', text))
    if n <= MAX_VECTOR_POINTS:
        # Every point a vector marker: n per panel, and two caps per error bar.
        assert markers >= 2 * n and "<image" not in text
    else:
        # The points drawn as images (one per layer); the legend keys stay vectors.
        assert markers < 50 and text.count("<image") >= 2
