"""What the user sees of each cross-section given as a face image (conventions §7).

Owns the overlay figure of a measured face (:func:`plot_face_overlay`: the image, the
surface edge, each line found with its number and the trace it matched, and beside
it the line the identified plane would cut), the per-face files written into
``sections/`` (:func:`write_face_outputs`: ``<name>_entries.json``, a ``boundaries``
list to copy into the job and edit, with the unsure lines listed apart, and
``<name>_overlay.png``), and the report's block about them
(:func:`face_images_section_html`, :func:`face_images_section_markdown`), which
reads only ``summary.json``. matplotlib is imported inside the functions.
"""

from __future__ import annotations

import base64
import html
import re

import numpy as np

from .._validation import as_float_array
from ..compare.comparison import TRUSTED_IDENTIFICATIONS

__all__ = [
    "face_images_section_html",
    "face_images_section_markdown",
    "plot_face_overlay",
    "write_face_outputs",
]

# Okabe & Ito (2008) colour-blind-safe hues: measured lines, predicted lines, unsure
# lines and the surface edge.
_MEASURED = "#E69F00"
_PREDICTED = "#0072B2"
_UNSURE = "#CC79A7"
_SURFACE = "#009E73"


def _file_stem(name: str) -> str:
    """A file name from a section name: letters, digits, '-' and '_' only."""
    return re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_") or "section"


def plot_face_overlay(
    image,
    measurement,
    *,
    labels=None,
    predicted_uv=None,
    ax=None,
):
    """Draw a face image with its surface edge and measured lines.

    The used lines are drawn solid with their labels, the identified plane's line
    dashed beside each; short and curved lines faintly, unlabelled; low-contrast lines
    not at all (they are listed in the entries file).

    Parameters
    ----------
    image : array_like, shape (H, W)
        Grey levels of the face.
    measurement : FaceMeasurement
        From :func:`inclination.sections.measure_face_image`.
    labels : sequence of str, optional
        Text beside each line of ``measurement.lines`` (an empty string: none).
        Default: each used line's number in the entries list, 1 upwards.
    predicted_uv : array_like, shape (K, 2), optional
        Image direction ``(du, dv)`` of the identified plane's line for each line
        (NaN rows are not drawn), from
        :func:`inclination.sections.predicted_image_direction`.
    ax : matplotlib Axes, optional

    Returns
    -------
    list
        The artists drawn.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> from inclination.sections import measure_face_image
    >>> img = np.full((40, 60), 0.3); img[:10] = 0.95
    >>> cols, rows = np.meshgrid(np.arange(60), np.arange(40))
    >>> img[(rows >= 10) & (cols > 30 + (rows - 10))] = 0.7
    >>> m = measure_face_image(img, pixel_um=0.1, line_start_px=(5, 9.5),
    ...     line_length_um=5.0, right_along_line=True, tilt_deg=90.0, smooth_px=1.0)
    >>> len(plot_face_overlay(img, m)) > 2
    True
    """
    import matplotlib.pyplot as plt

    img = as_float_array(image, "image")
    if ax is None:
        _, ax = plt.subplots()
    artists = [ax.imshow(img, cmap="gray", vmin=0.0, vmax=1.0, interpolation="nearest")]
    s = measurement.surface_px
    artists += ax.plot(s[:, 0], s[:, 1], color=_SURFACE, lw=0.8)
    t = measurement.lines
    n = len(t["status"])
    used = t["status"] == "used"
    if labels is None:
        # The used lines by their place in the entries list (FaceMeasurement.entries).
        labels = [""] * n
        for k, i in enumerate(np.flatnonzero(used)):
            labels[i] = str(k + 1)
    names = list(labels)
    pred = None if predicted_uv is None else np.asarray(predicted_uv, float)
    rho = np.deg2rad(measurement.rotation_deg)
    e_u = np.array([np.cos(rho), -np.sin(rho)])
    e_v = np.array([np.sin(rho), np.cos(rho)])
    for i in np.flatnonzero(~used):
        # Unsure lines stay in the entries file's list; low-contrast ones (mostly the
        # noise splitting one grain) are not drawn, the short and curved ones faintly,
        # so that the measured lines stay readable.
        if t["status"][i] == "low_contrast":
            continue
        x = [t["col0_px"][i], t["col1_px"][i]]
        y = [t["row0_px"][i], t["row1_px"][i]]
        artists += ax.plot(x, y, color=_UNSURE, lw=0.8, ls=":", alpha=0.7)
    for k, i in enumerate(np.flatnonzero(used)):
        x = [t["col0_px"][i], t["col1_px"][i]]
        y = [t["row0_px"][i], t["row1_px"][i]]
        artists += ax.plot(x, y, color=_MEASURED, lw=1.2, ls="-")
        if pred is not None and np.all(np.isfinite(pred[i])):
            depth = np.hypot(x[1] - x[0], y[1] - y[0])
            d = pred[i, 0] * e_u + pred[i, 1] * e_v
            # From the same point on the surface edge, drawn over the measured line and
            # half as far again below it: where the plane is right the two coincide, and
            # the dashes and the end beyond show both.
            end = np.array([x[0], y[0]]) + d * 1.5 * depth
            artists += ax.plot(
                [x[0], end[0]], [y[0], end[1]], color=_PREDICTED, lw=1.2, ls=(0, (3, 2))
            )
        if names[i]:
            # Neighbouring lines a few pixels apart: their labels alternate in height.
            # A dark box keeps the orange label legible on the bright cap.
            artists.append(
                ax.text(
                    x[0],
                    y[0] - 2 - 8 * (k % 2),
                    names[i],
                    color=_MEASURED,
                    fontsize=7,
                    ha="center",
                    va="bottom",
                    clip_on=True,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "black", "ec": "none", "alpha": 0.7},
                )
            )
    ax.set_axis_off()
    return artists


def _predicted_directions(analysis, record, table, first):
    """Image direction of the identified plane of each image entry's matched trace."""
    from ..sections import predicted_image_direction

    k = len(table["status"]) - first
    out = np.full((k, 2), np.nan)
    ident = analysis.identification
    if ident is None or "predicted_normal_x" not in ident:
        return out
    row_of = {int(s): i for i, s in enumerate(np.asarray(ident["segment_id"]))}
    for j in range(k):
        seg = int(table["segment_id"][first + j])
        i = row_of.get(seg)
        # Only a plane the identification settled on has one line to show.
        if i is None or str(ident["identification"][i]) not in TRUSTED_IDENTIFICATIONS:
            continue
        n = np.array([ident[f"predicted_normal_{c}"][i] for c in "xyz"], float)
        if np.all(np.isfinite(n)):
            out[j] = predicted_image_direction(
                n[None, :],
                line_sample=record.line_sample,
                viewer_sample=record.viewer_sample,
                tilt_deg=record.tilt_deg,
                face_inclination_deg=record.face_inclination_deg,
            )[0]
    return out


def _strip_starts(width, chunk, label_cols, *, clear_px=30):
    """First column of each strip of a wide face, no break within ``clear_px`` of a label.

    A strip ends at most ``chunk`` columns after its start, earlier where a used line's
    label would be cut by the break.
    """
    cols = np.asarray(label_cols, dtype=float)
    starts = [0]
    while starts[-1] + chunk < width:
        end = starts[-1] + chunk
        # Walk the break back from the strip's end until no label is near it.
        while end > starts[-1] + chunk // 2 and np.any(np.abs(cols - end) < clear_px):
            end -= 5
        starts.append(int(end))
    return starts


def write_face_outputs(analysis, out_dir) -> tuple[list, list[dict]]:
    """Write ``sections/<name>_entries.json`` and ``<name>_overlay.png`` for each face image.

    Parameters
    ----------
    analysis : Analysis
        A run whose ``faces`` hold the measured face images.
    out_dir : Path
        The run's output folder.

    Returns
    -------
    (list of Path, list of dict)
        The files written, and one summary entry per face (name, file names, lines
        found and used, rotation, along-line offset of the matched traces).
    """
    from pathlib import Path

    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .atomic import write_bytes_atomic, write_json_atomic

    folder = Path(out_dir) / "sections"
    files, notes = [], []
    for face in analysis.faces:
        m = face["measurement"]
        table, first = face["table"], face["first_image_entry"]
        stem = _file_stem(face["name"])
        folder.mkdir(exist_ok=True)
        used = np.flatnonzero(m.lines["status"] == "used")
        # Entries go in in the order of the used lines (FaceMeasurement.entries).
        seg_of_line = np.full(len(m.lines["status"]), -1, dtype=np.int64)
        seg_of_line[used] = np.asarray(table["segment_id"])[first:]
        pred = np.full((len(m.lines["status"]), 2), np.nan)
        pred[used] = _predicted_directions(analysis, face["record"], table, first)
        unsure = [
            {
                **e,
                "status": str(m.lines["status"][i]),
                "contrast": round(float(m.lines["contrast"][i]), 2),
                "residual_px": round(float(m.lines["residual_px"][i]), 3),
            }
            for i, e in zip(
                np.flatnonzero(m.lines["status"] != "used"),
                [m.entries(all_lines=True)[j] for j in np.flatnonzero(m.lines["status"] != "used")],
                strict=True,
            )
        ]
        doc = {
            "section": face["name"],
            "job_pointer": f"/sections/{face['index']}/boundaries",
            "note": "Copy 'boundaries' into the job's section (and remove 'image') to "
            "correct a measurement by hand; 'unsure' lines were not used.",
            "boundaries": m.entries(),
            # The image's grey regions against the matched traces' grains, per entry
            # (a second check of the match; inclination.sections.neighbour_check).
            "grey_check": [str(c) for c in face.get("grey_check", [])],
            # Why each flagged pair of entries is flagged (entry numbers from 1).
            "grey_check_notes": [
                {**n, "entries": [i + 1 for i in n["lines"]]}
                for n in face.get("grey_check_notes", [])
            ],
            "unsure": unsure,
            "surface": {
                "rotation_deg": round(m.rotation_deg, 4),
                "rotation_found": m.rotation_found,
                "origin_px": [round(v, 2) for v in m.origin_px],
            },
        }
        files.append(write_json_atomic(folder / f"{stem}_entries.json", doc))
        # Each used line by its place in 'boundaries', with the trace it matched.
        labels = [""] * len(seg_of_line)
        flagged = np.asarray(face.get("grey_check", []), dtype=str) == "inconsistent"
        for k, i in enumerate(used):
            labels[i] = f"{k + 1}" + (f"→{seg_of_line[i]}" if seg_of_line[i] >= 0 else "")
            # The grey check's doubt shows on the figure; its reason is in the entries file.
            if k < len(flagged) and flagged[k]:
                labels[i] += " ?"
        height, width = face["image"].shape
        # A face is far wider than deep: show it in strips of at most six heights.
        chunk = max(200, 6 * height)
        starts = _strip_starts(width, chunk, m.lines["col0_px"][used])
        ends = [*starts[1:], width]
        fig, axes = plt.subplots(
            len(starts), 1, figsize=(9.0, 0.3 + 9.0 * height / chunk * len(starts)), squeeze=False
        )
        for ax, c0, c1 in zip(axes[:, 0], starts, ends, strict=True):
            plot_face_overlay(face["image"], m, labels=labels, predicted_uv=pred, ax=ax)
            ax.set_xlim(c0 - 0.5, c0 + chunk - 0.5)
            ax.set_ylim(height - 0.5, -0.5)
            # Past the strip's end the next strip shows the face; leave it blank here.
            if c1 < width:
                ax.axvspan(c1 - 0.5, c0 + chunk - 0.5, color="white", zorder=5)
        axes[0, 0].set_title(
            f"{face['name']}: entry→trace id; measured solid, identified plane dashed, "
            f"unsure faint; ? grey check flag (why: {stem}_entries.json)",
            fontsize=7,
        )
        import io

        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=110, bbox_inches="tight", metadata={"Software": None})
        plt.close(fig)
        files.append(write_bytes_atomic(folder / f"{stem}_overlay.png", buf.getvalue()))
        notes.append(
            {
                "name": face["name"],
                "overlay": f"sections/{stem}_overlay.png",
                "entries": f"sections/{stem}_entries.json",
                "lines_found": int(len(m.lines["status"])),
                "lines_used": int(len(used)),
                "matched": int(np.sum(seg_of_line >= 0)),
                "grey_flagged": [n["reason"] for n in face.get("grey_check_notes", [])],
            }
        )
    return files, notes


def face_images_section_html(summary: dict, *, overlays=None) -> list:
    """HTML lines of the report's face-image block (empty without face images).

    ``overlays`` maps an overlay's file name (as the summary gives it) to its PNG
    bytes, embedded as data so the page stands alone; one not given is linked.
    """
    faces = summary.get("face_images") or []
    if not faces:
        return []
    esc = html.escape
    parts = ["<h2>Cross-sections measured on face images</h2>"]
    for f in faces:
        parts.append(
            f"<p>{esc(f['name'])}: {f['lines_used']} of {f['lines_found']} lines used, "
            f"{f['matched']} matched to traces; entries to copy into the job: "
            f'<a href="{esc(f["entries"])}">{esc(f["entries"])}</a>.</p>'
            + "".join(f"<p>Grey check flags: {esc(r)}.</p>" for r in f.get("grey_flagged", []))
            + f'<p><img alt="face image of {esc(f["name"])} with measured lines" '
            f'style="max-width:100%" src="{_image_src(f["overlay"], overlays)}"></p>'
        )
    return parts


def _image_src(name, overlays):
    """An overlay's PNG as data when its bytes are given (a page that stands alone)."""
    data = (overlays or {}).get(name)
    if data is None:
        return html.escape(name)
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def face_images_section_markdown(summary: dict) -> list:
    """Markdown lines of the report's face-image block (empty without face images)."""
    faces = summary.get("face_images") or []
    if not faces:
        return []
    lines = ["", "## Cross-sections measured on face images", ""]
    for f in faces:
        lines += [
            f"- {f['name']}: {f['lines_used']} of {f['lines_found']} lines used, "
            f"{f['matched']} matched; entries: `{f['entries']}`",
            *(f"  - grey check flags: {r}" for r in f.get("grey_flagged", [])),
            f"  ![{f['name']}]({f['overlay']})",
        ]
    return lines
