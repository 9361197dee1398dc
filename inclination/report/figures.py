"""Figures for papers: the boundary map, the stereogram, the dip plot, section sketches.

The map is drawn in the sample frame S as the screen shows it (conventions §1–§2:
x to the right, y down, seen from outside the material); the user's declared axes
are drawn as arrows on a card below the map so a reader sees which way x and y
point in the tables. The grain image is downsampled to at most
:data:`MAX_IMAGE_PX` on its long side; boundaries, ids, section lines and dip
symbols are vectors on top, one merged path per class, so that PNG and SVG come
from one drawing and the SVG stays small. Cards (legend, axes, scale bar) sit
outside the map area and never cover data. Colours: Okabe & Ito (2008), safe for
the common colour-vision deficiencies. matplotlib is imported inside the
functions; nothing here calls ``show()``.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "IDENTIFICATION_COLOURS",
    "CLASS_LABELS",
    "MAX_IMAGE_PX",
    "downsample_labels",
    "plot_boundary_map",
    "plot_normals_stereogram",
    "plot_dip_comparison",
    "plot_section_sketch",
    "save_figure",
]

# Okabe & Ito (2008) colour-blind-safe hues, assigned here to the four identification
# classes; the grains underneath are pale grey so the segment colours carry the message.
IDENTIFICATION_COLOURS = {
    "coherent_twin": "#D55E00",
    "identified": "#009E73",
    "ambiguous": "#0072B2",
    "none": "#000000",
}
CLASS_LABELS = {
    "coherent_twin": "coherent twin",
    "identified": "identified plane",
    "ambiguous": "ambiguous",
    "none": "no plane fits",
}
_SECTION_COLOUR = "#CC79A7"
_SCREEN = {"right": (1.0, 0.0), "left": (-1.0, 0.0), "down": (0.0, 1.0), "up": (0.0, -1.0)}

#: Long side of the grain image drawn under the vectors (pixels).
MAX_IMAGE_PX = 2000
#: At most this many dip ticks carry their dip value (the longest boundaries).
MAX_DIP_LABELS = 300
#: Above this many points a scatter layer is drawn as an image inside the SVG (its axes,
#: text and lines stay vectors): 20,000 vector markers make a file of megabytes that is
#: slow to write and to open, and no reader can tell them apart.
MAX_VECTOR_POINTS = 2000


def downsample_labels(labels, *, max_px: int = MAX_IMAGE_PX) -> np.ndarray:
    """Every k-th label along both axes, so that the long side is at most ``max_px``.

    Examples
    --------
    >>> downsample_labels(np.zeros((4100, 30), int), max_px=2000).shape
    (1367, 10)
    """
    labels = np.asarray(labels)
    k = max(1, -(-max(labels.shape) // max_px))
    return labels[::k, ::k]


def _grey_levels(labels: np.ndarray, n_labels: int) -> np.ndarray:
    # Fixed pseudo-random greys (seeded: the same map looks the same every run).
    levels = np.random.default_rng(0).uniform(0.70, 0.95, n_labels)
    levels[0] = 1.0  # no grain (non-indexed): white
    return levels[labels]


def _nice_length(target: float) -> float:
    exponent = np.floor(np.log10(target))
    for m in (5, 2, 1):
        if m * 10**exponent <= target:
            return float(m * 10**exponent)
    return float(10**exponent)


def _merged_path(xy0, xy1):
    """One matplotlib Path of many straight pieces (one SVG ``<path>`` element)."""
    from matplotlib.path import Path

    n = len(xy0)
    verts = np.empty((2 * n, 2))
    verts[0::2], verts[1::2] = xy0, xy1
    codes = np.tile([Path.MOVETO, Path.LINETO], n)
    return Path(verts, codes)


def _boxes_overlap(a, b) -> bool:
    return not (a.x1 <= b.x0 or b.x1 <= a.x0 or a.y1 <= b.y0 or b.y1 <= a.y0)


def plot_boundary_map(
    labels,
    segments_sample,
    classes,
    *,
    step_x_um: float,
    step_y_um: float,
    axes_declared=("right", "down"),
    sections=(),
    dips=None,
    max_ids: int = 60,
    fig=None,
    title: str | None = None,
):
    """Draw grains in grey, boundaries by class, their ids, section lines and dip symbols.

    Parameters
    ----------
    labels : ndarray, shape (H, W)
        Grain labels (0 = no grain); drawn downsampled (:func:`downsample_labels`).
    segments_sample : mapping of arrays
        ``segment_id, x0_um, y0_um, x1_um, y1_um`` in S (µm), one entry per boundary.
    classes : sequence of str
        Identification class per boundary, keys of :data:`IDENTIFICATION_COLOURS`.
    step_x_um, step_y_um : float
        Grid spacing along x and between rows (µm).
    axes_declared : (str, str)
        Screen directions of the declared x and y axes, drawn as arrows on a card.
    sections : sequence of (str, ndarray (2, 2))
        Name and end points (µm, S) of each cross-section line.
    dips : mapping of arrays, optional
        ``dip_deg`` and ``dip_azimuth_deg`` (S, conventions §5) per boundary, NaN where
        no plane is fixed; a tick on the dip side, labelled with the dip, is drawn.
    max_ids : int
        At most this many boundary ids, longest boundaries first, none overlapping.
    fig : matplotlib Figure, optional

    Returns
    -------
    dict
        ``fig``, ``map_ax``, ``card_ax``, ``image``, ``paths`` (one patch per class),
        ``ids`` (text artists), ``sections``, ``dips``, ``legend``, ``scale_bar``.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> labels = np.repeat([[1, 1, 2, 2]], 4, axis=0)
    >>> seg = {"segment_id": [5], "x0_um": [1.5], "y0_um": [0.0], "x1_um": [1.5],
    ...        "y1_um": [3.0]}
    >>> art = plot_boundary_map(labels, seg, ["identified"], step_x_um=1.0, step_y_um=1.0)
    >>> sorted(art["paths"]), [t.get_text() for t in art["ids"]]
    (['identified'], ['5'])
    >>> import matplotlib.pyplot as plt; plt.close(art["fig"])
    """
    import matplotlib.pyplot as plt
    from matplotlib.patches import PathPatch

    labels = np.asarray(labels)
    h, w = labels.shape
    width_um, height_um = w * step_x_um, h * step_y_um
    if fig is None:
        fig = plt.figure(figsize=(8.0, 8.0 * height_um / max(width_um, 1e-9) + 1.6))
    fig_h = fig.get_size_inches()[1]
    card_h = 1.1 / fig_h  # the cards' strip, in figure fractions
    map_ax = fig.add_axes((0.02, card_h + 0.02, 0.96, 1 - card_h - (0.07 if title else 0.03)))
    card_ax = fig.add_axes((0.02, 0.0, 0.96, card_h))
    card_ax.set_axis_off()
    extent = (-0.5 * step_x_um, (w - 0.5) * step_x_um, (h - 0.5) * step_y_um, -0.5 * step_y_um)
    small = downsample_labels(labels)
    image = map_ax.imshow(
        _grey_levels(small, int(labels.max()) + 1 if labels.size else 1),
        cmap="gray",
        vmin=0,
        vmax=1,
        extent=extent,
        interpolation="nearest",
    )
    map_ax.set_xlim(extent[0], extent[1])
    map_ax.set_ylim(extent[2], extent[3])
    map_ax.set_aspect("equal")
    map_ax.set_xticks([])
    map_ax.set_yticks([])
    seg = {k: np.asarray(segments_sample[k], float) for k in ("x0_um", "y0_um", "x1_um", "y1_um")}
    ids = np.asarray(segments_sample.get("segment_id", np.arange(1, len(seg["x0_um"]) + 1)))
    xy0 = np.column_stack([seg["x0_um"], seg["y0_um"]])
    xy1 = np.column_stack([seg["x1_um"], seg["y1_um"]])
    classes = np.asarray(classes, dtype=object)
    paths, handles = {}, []
    for key, colour in IDENTIFICATION_COLOURS.items():
        pick = classes == key
        if not np.any(pick):
            continue
        patch = PathPatch(
            _merged_path(xy0[pick], xy1[pick]),
            facecolor="none",
            edgecolor=colour,
            linewidth=1.4,
            capstyle="round",
            zorder=2,
        )
        # add_artist, not add_patch: the limits are the map's extent, set above, and
        # add_patch would walk every vertex of the merged path to update them.
        map_ax.add_artist(patch)
        paths[key] = patch
        handles.append(
            plt.Line2D(
                [], [], color=colour, linewidth=2, label=f"{CLASS_LABELS[key]}: {pick.sum()}"
            )
        )
    section_artists = []
    for name, line in sections:
        line = np.asarray(line, float)
        (ln,) = map_ax.plot(
            line[:, 0],
            line[:, 1],
            color=_SECTION_COLOUR,
            linewidth=2.2,
            linestyle=(0, (5, 2)),
            zorder=3,
        )
        tx = map_ax.annotate(
            name,
            line[0],
            xytext=(4, 4),
            textcoords="offset points",
            fontsize=8,
            color=_SECTION_COLOUR,
            fontweight="bold",
            zorder=5,
        )
        section_artists += [ln, tx]
    if sections:
        handles.append(
            plt.Line2D(
                [],
                [],
                color=_SECTION_COLOUR,
                linewidth=2,
                linestyle=(0, (5, 2)),
                label="cross-section line",
            )
        )
    dip_artists = _dip_symbols(map_ax, xy0, xy1, dips, width_um, height_um)
    if dip_artists:
        handles.append(
            plt.Line2D(
                [],
                [],
                color="black",
                marker="|",
                linestyle="none",
                label="dip tick (dip side, dip in °)",
            )
        )
    id_artists = _id_labels(fig, map_ax, xy0, xy1, ids, max_ids)
    legend = card_ax.legend(
        handles=handles,
        loc="center left",
        bbox_to_anchor=(0.0, 0.5),
        fontsize=8,
        frameon=False,
        ncol=2,
    )
    scale_bar = _scale_and_axes(card_ax, width_um, axes_declared)
    if title:
        map_ax.set_title(title, fontsize=10)
    return {
        "fig": fig,
        "map_ax": map_ax,
        "card_ax": card_ax,
        "image": image,
        "paths": paths,
        "ids": id_artists,
        "sections": section_artists,
        "dips": dip_artists,
        "legend": legend,
        "scale_bar": scale_bar,
    }


def _dip_symbols(ax, xy0, xy1, dips, width_um, height_um):
    """A tick from each boundary's midpoint toward its dip direction, labelled with the dip."""
    if dips is None:
        return []
    dip = np.asarray(dips["dip_deg"], float)
    az = np.deg2rad(np.asarray(dips["dip_azimuth_deg"], float))
    keep = np.isfinite(dip) & np.isfinite(az)
    if not keep.any():
        return []
    tick = 0.018 * max(width_um, height_um)
    mid = 0.5 * (xy0 + xy1)[keep]
    # The azimuth is in S (conventions §5): from +X toward +Y, and S is drawn as the
    # screen shows it, so (cos, sin) is the screen direction of the dip.
    d = np.column_stack([np.cos(az[keep]), np.sin(az[keep])])
    ends = mid + tick * d
    from matplotlib.patches import PathPatch

    lc = PathPatch(
        _merged_path(mid, ends), facecolor="none", edgecolor="black", linewidth=1.0, zorder=4
    )
    ax.add_artist(lc)  # the limits are set: no walk over the vertices (add_patch)
    out = [lc]
    # Dip values label the longest boundaries only: a label per boundary on a large map
    # is unreadable and makes drawing slow (one text artist each).
    length = np.hypot(*(xy1 - xy0)[keep].T)
    top = np.sort(np.argsort(-length, kind="stable")[:MAX_DIP_LABELS])
    for (x, y), value in zip((mid + 2.2 * tick * d)[top], dip[keep][top], strict=True):
        out.append(
            ax.text(
                x, y, f"{value:.0f}", fontsize=5.5, ha="center", va="center", zorder=4, clip_on=True
            )
        )
    return out


def _id_labels(fig, ax, xy0, xy1, ids, max_ids):
    """Ids at the midpoints of the longest boundaries; a label that would overlap is left out."""
    length = np.hypot(*(xy1 - xy0).T)
    order = np.argsort(-length, kind="stable")
    renderer = fig.canvas.get_renderer()
    axes_box = ax.get_window_extent(renderer)
    placed, boxes = [], []
    for i in order.tolist():
        if len(placed) >= max_ids:
            break
        mid = 0.5 * (xy0[i] + xy1[i])
        text = ax.annotate(
            str(int(ids[i])),
            mid,
            xytext=(2, 2),
            textcoords="offset points",
            fontsize=6.5,
            color="#222222",
            zorder=6,
            bbox={
                "boxstyle": "square,pad=0.1",
                "facecolor": "white",
                "edgecolor": "none",
                "alpha": 0.75,
            },
        )
        box = text.get_window_extent(renderer)
        inside = axes_box.x0 <= box.x0 and box.x1 <= axes_box.x1 and axes_box.y0 <= box.y0
        if not inside or box.y1 > axes_box.y1 or any(_boxes_overlap(box, b) for b in boxes):
            text.remove()
            continue
        placed.append(text)
        boxes.append(box)
    return placed


def _scale_and_axes(card_ax, width_um, axes_declared):
    """Scale bar and declared-axes arrows on the card strip (axes fractions of the card)."""
    bar_um = _nice_length(width_um / 5)
    frac = bar_um / width_um  # the card spans the map's width
    x0 = 0.98 - frac - 0.16
    (bar,) = card_ax.plot(
        [x0, x0 + frac],
        [0.35, 0.35],
        color="black",
        linewidth=4,
        solid_capstyle="butt",
        transform=card_ax.transAxes,
    )
    card_ax.text(
        x0 + frac / 2,
        0.5,
        f"{bar_um:g} µm",
        ha="center",
        va="bottom",
        fontsize=8,
        transform=card_ax.transAxes,
    )
    origin = np.array([0.93, 0.5])
    for name, direction in zip(("x", "y"), axes_declared, strict=True):
        # Axes fractions of a wide, low card: about equal lengths on paper; screen "down"
        # is negative in the card's fractions.
        d = np.array(_SCREEN[direction]) * np.array([0.035, -0.3])
        card_ax.annotate(
            "",
            xy=origin + d,
            xytext=origin,
            xycoords="axes fraction",
            arrowprops={"arrowstyle": "->", "color": "black", "linewidth": 1.2},
        )
        card_ax.text(
            *(origin + 1.35 * d),
            name,
            ha="center",
            va="center",
            fontsize=9,
            transform=card_ax.transAxes,
        )
    return bar


def plot_normals_stereogram(normals_crystal, classes, poles=(), *, ax=None):
    """Measured plane normals in their grain's crystal frame on the upper hemisphere.

    Stereographic projection of the hemisphere n_z >= 0 of C (conventions §4) seen
    from +Z_C, X_C to the right (n and −n are one plane), by
    :func:`inclination.stereology.stereogram.project`.

    Parameters
    ----------
    normals_crystal : array_like, shape (N, 3)
    classes : sequence of str, length N
    poles : sequence of (str, array (3,))
        Labelled low-index poles to mark.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> art = plot_normals_stereogram([[0, 0, 1.0]], ["identified"], [("(0 0 1)", [0, 0, 1])])
    >>> len(art["points"]), len(art["poles"])
    (1, 1)
    >>> import matplotlib.pyplot as plt; plt.close(art["ax"].figure)
    """
    import matplotlib.pyplot as plt

    from ..stereology.stereogram import project

    if ax is None:
        _, ax = plt.subplots(figsize=(4.6, 4.6))
    ax.add_patch(plt.Circle((0, 0), 1.0, fill=False, color="black", linewidth=1))
    ax.plot([-1, 1], [0, 0], color="0.85", linewidth=0.6, zorder=0)
    ax.plot([0, 0], [-1, 1], color="0.85", linewidth=0.6, zorder=0)
    pole_artists = []
    for label, n in poles:
        ((px, py),) = project([n])
        pole_artists.append(ax.plot(px, py, marker="s", color="0.35", markersize=3.5)[0])
        ax.annotate(
            label, (px, py), xytext=(3, 3), textcoords="offset points", fontsize=6, color="0.35"
        )
    points = []
    normals = np.asarray(normals_crystal, float).reshape(-1, 3)
    classes = np.asarray(classes, dtype=object)
    for key, colour in IDENTIFICATION_COLOURS.items():
        pick = classes == key
        if pick.any():
            xy = project(normals[pick])
            points += list(xy)
            ax.scatter(
                xy[:, 0],
                xy[:, 1],
                s=14,
                color=colour,
                edgecolor="white",
                linewidth=0.4,
                label=CLASS_LABELS[key],
                zorder=3,
                rasterized=len(normals) > MAX_VECTOR_POINTS,
            )
    ax.set_xlim(-1.08, 1.08)
    ax.set_ylim(-1.08, 1.08)
    ax.set_aspect("equal")
    ax.set_axis_off()
    ax.text(1.02, 0.0, "X_C", fontsize=7, va="center")
    ax.text(0.0, 1.03, "Y_C", fontsize=7, ha="center")
    ax.set_title(
        "Measured plane normals, crystal frame of grain a\n"
        "stereographic, upper hemisphere (n_z ≥ 0)",
        fontsize=8,
    )
    if points:
        ax.legend(loc="lower left", bbox_to_anchor=(0.82, -0.02), fontsize=6, frameon=False)
    return {"ax": ax, "points": points, "poles": pole_artists}


def plot_dip_comparison(predicted_deg, measured_deg, measured_sigma_deg, classes, *, ax=None):
    """Predicted against measured dip, one point per boundary, error bars ±1σ.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> art = plot_dip_comparison([50.0], [52.0], [2.0], ["coherent_twin"])
    >>> art["n_points"]
    1
    >>> import matplotlib.pyplot as plt; plt.close(art["ax"].figure)
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(4.6, 4.6))
    p = np.asarray(predicted_deg, float)
    m = np.asarray(measured_deg, float)
    s = np.asarray(measured_sigma_deg, float)
    classes = np.asarray(classes, dtype=object)
    ok = np.isfinite(p) & np.isfinite(m)
    dense = int(ok.sum()) > MAX_VECTOR_POINTS
    ax.plot([0, 90], [0, 90], color="0.6", linewidth=0.8, zorder=0, label="measured = predicted")
    for key, colour in IDENTIFICATION_COLOURS.items():
        pick = ok & (classes == key)
        if pick.any():
            drawn = ax.errorbar(
                p[pick],
                m[pick],
                yerr=np.where(np.isfinite(s[pick]), s[pick], 0),
                fmt="o",
                markersize=3.5,
                color=colour,
                elinewidth=0.8,
                capsize=1.5,
                label=CLASS_LABELS[key],
            )
            if dense:
                for artist in drawn.get_children():
                    artist.set_rasterized(True)
    ax.set_xlim(0, 90)
    ax.set_ylim(0, 90)
    ax.set_aspect("equal")
    ax.set_xlabel("predicted dip (°)")
    ax.set_ylabel("measured dip ± σ (°)")
    ax.legend(fontsize=7, frameon=False, loc="lower right")
    ax.set_title("Predicted against measured dip", fontsize=9)
    return {"ax": ax, "n_points": int(ok.sum())}


def plot_section_sketch(along_um, measured_deg, predicted_deg, ids, *, length_um, name, ax=None):
    """A sketch of a cross-section's face: the surface line and each matched boundary.

    The face is seen from the viewer's side, the line's start on the left, the
    surface at the top. Each boundary is drawn from where it meets the surface at
    its measured apparent angle on the face (solid) and at the angle its predicted
    plane would show (dashed). Angles are signed: positive descends to the right.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> art = plot_section_sketch([10.0], [60.0], [-55.0], [3], length_um=40.0, name="A")
    >>> len(art["measured"]), len(art["predicted"])
    (1, 1)
    >>> import matplotlib.pyplot as plt; plt.close(art["ax"].figure)
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(7, 2.6))
    depth = 0.25 * length_um
    ax.plot([0, length_um], [0, 0], color="black", linewidth=1.5)
    ax.fill_between([0, length_um], [0, 0], [-depth * 1.15] * 2, color="0.93", zorder=0)
    measured, predicted = [], []
    for x, a_m, a_p, i in zip(along_um, measured_deg, predicted_deg, ids, strict=True):
        for angle, style, store in ((a_m, "-", measured), (a_p, "--", predicted)):
            if not np.isfinite(angle):
                continue
            r = np.deg2rad(abs(angle))
            run = depth / max(np.tan(r), 1e-6)
            run = min(run, 0.2 * length_um) * np.sign(angle)
            dy = -min(depth, abs(run) * np.tan(r)) if run else -depth
            store.append(
                ax.plot(
                    [x, x + run],
                    [0, dy],
                    style,
                    color="#0072B2" if style == "-" else "#E69F00",
                    linewidth=1.2,
                )[0]
            )
        ax.text(x, 0.02 * length_um, str(int(i)), fontsize=6.5, ha="center", va="bottom")
    ax.plot([], [], "-", color="#0072B2", label="measured")
    ax.plot([], [], "--", color="#E69F00", label="predicted plane")
    ax.set_xlim(-0.02 * length_um, 1.02 * length_um)
    ax.set_ylim(-depth * 1.15, 0.12 * length_um)
    ax.set_aspect("equal")
    ax.set_xlabel("along the section line (µm)")
    ax.set_yticks([])
    ax.legend(fontsize=7, frameon=False, loc="upper right", bbox_to_anchor=(1.0, -0.35), ncol=2)
    ax.set_title(f"Cross-section {name}: face sketch (surface at the top)", fontsize=9)
    return {"ax": ax, "measured": measured, "predicted": predicted}


def save_figure(fig, path_stem, *, dpi: int = 200) -> list:
    """Save a figure as PNG and SVG beside each other, atomically; returns the paths."""
    import io
    from pathlib import Path

    import matplotlib

    from .atomic import write_bytes_atomic

    paths = []
    # Identical runs give identical bytes: no date in the metadata, and SVG ids from a
    # fixed salt instead of a random one.
    with matplotlib.rc_context({"svg.hashsalt": "inclination"}):
        # The tight box, found once: ``bbox_inches="tight"`` would lay the figure out again
        # for each file (a pass over every artist, the map image resampled each time).
        fig.draw_without_rendering()
        box = fig.get_tightbbox().padded(matplotlib.rcParams["savefig.pad_inches"])
        for ext, kwargs in (("png", {"dpi": dpi}), ("svg", {})):
            buf = io.BytesIO()
            fig.savefig(buf, format=ext, bbox_inches=box, metadata={"Date": None}, **kwargs)
            paths.append(write_bytes_atomic(Path(f"{path_stem}.{ext}"), buf.getvalue()))
    return paths
