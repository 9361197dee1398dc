"""inclination.report.faces: the overlay's strips and the report's face-image block."""

from __future__ import annotations

import numpy as np

from inclination.report.faces import (
    face_images_section_html,
    face_images_section_markdown,
    plot_face_overlay,
)


def _summary(flagged):
    return {
        "face_images": [
            {
                "name": "trench A",
                "overlay": "sections/trench_A_overlay.png",
                "entries": "sections/trench_A_entries.json",
                "lines_found": 25,
                "lines_used": 6,
                "matched": 6,
                "grey_flagged": flagged,
            }
        ]
    }


def test_report_block_says_why_the_grey_check_flags():
    reason = "lines at 1.00 and 2.00 µm bound one grey region of the face, but <map>"
    html = "".join(face_images_section_html(_summary([reason])))
    assert "Grey check flags: lines at 1.00 and 2.00 µm" in html and "&lt;map&gt;" in html
    md = "\n".join(face_images_section_markdown(_summary([reason])))
    assert f"grey check flags: {reason}" in md
    assert "Grey check" not in "".join(face_images_section_html(_summary([])))


def test_overlay_labels_only_used_lines_and_skips_low_contrast():
    import matplotlib

    matplotlib.use("Agg")
    from inclination.sections import measure_face_image

    # Cap over two grains split by a 45° line (by construction, as in test_face_image),
    # plus a step of two noise SDs at col 30: kept apart by the region merging (over its
    # 1.5 SD floor), under the 3 SD asked of a sure line here, so a low-contrast line.
    img = np.full((60, 120), 0.3)
    img[:12] = 0.95
    cols, rows = np.meshgrid(np.arange(120), np.arange(60))
    img[(rows >= 12) & (cols > 60 + (rows - 12))] = 0.7
    img[(rows >= 12) & (cols < 30)] = 0.34
    img = img + np.random.default_rng(0).normal(0, 0.02, img.shape)
    m = measure_face_image(
        img,
        pixel_um=0.1,
        line_start_px=(10.0, 11.5),
        line_length_um=10.0,
        right_along_line=True,
        tilt_deg=90.0,
        window_um=(0.3, 3.0),
        min_contrast=3.0,
    )
    assert "low_contrast" in m.lines["status"].tolist()
    artists = plot_face_overlay(img, m)
    texts = [a.get_text() for a in artists if hasattr(a, "get_text")]
    # One label per used line, numbered as in the entries list.
    assert texts == [str(k + 1) for k in range(int(np.sum(m.lines["status"] == "used")))]
    drawn = [a for a in artists if hasattr(a, "get_xdata")]
    # The surface edge, each used line, and each short or curved line; never a
    # low-contrast one.
    shown = np.isin(m.lines["status"], ["used", "short", "curved"]).sum()
    assert len(drawn) == 1 + shown


def test_report_block_embeds_the_overlay_so_the_page_stands_alone():
    png = b"\x89PNG\r\n\x1a\n-not-a-real-image"
    html = "".join(
        face_images_section_html(_summary([]), overlays={"sections/trench_A_overlay.png": png})
    )
    # base64 of the bytes above (Python's base64 module, RFC 4648).
    assert 'src="data:image/png;base64,iVBORw0KGgotbm90LWEtcmVhbC1pbWFnZQ=="' in html
    # Without the bytes the overlay is linked by its path in the run folder.
    assert 'src="sections/trench_A_overlay.png"' in "".join(face_images_section_html(_summary([])))
