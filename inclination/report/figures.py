"""Figures for papers: the map with its fitted boundary segments.

Drawn in the sample frame S as the screen shows it (conventions §1–§2: x to
the right, y down, seen from outside the material); the user's declared axes
are drawn as arrows so a reader sees which way x and y point in the tables.
matplotlib is imported inside the functions; nothing here calls ``show()``.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["IDENTIFICATION_COLOURS", "plot_boundaries", "save_figure"]

# Okabe & Ito (2008) colour-blind-safe hues, assigned here to the four identification
# classes; the grains underneath are grey so the segment colours carry the message.
IDENTIFICATION_COLOURS = {
    "coherent_twin": "#D55E00",
    "identified": "#009E73",
    "ambiguous": "#56B4E9",
    "none": "#000000",
}
_LABELS = {
    "coherent_twin": "coherent twin plane",
    "identified": "other identified plane",
    "ambiguous": "ambiguous (several planes fit)",
    "none": "no candidate fits",
}
_SCREEN = {"right": (1.0, 0.0), "left": (-1.0, 0.0), "down": (0.0, 1.0), "up": (0.0, -1.0)}


def _grey_levels(labels: np.ndarray, rng_seed: int = 0) -> np.ndarray:
    n = int(labels.max()) + 1 if labels.size else 1
    levels = np.random.default_rng(rng_seed).uniform(0.62, 0.94, n)
    levels[0] = 1.0  # no grain (non-indexed): white
    return levels[labels]


def _nice_length(target: float) -> float:
    exponent = np.floor(np.log10(target))
    for m in (5, 2, 1):
        if m * 10**exponent <= target:
            return float(m * 10**exponent)
    return float(10**exponent)


def plot_boundaries(
    labels: ArrayLike,
    segments_sample: ArrayLike,
    classes: ArrayLike,
    *,
    step_x_um: float,
    step_y_um: float,
    axes_declared: tuple[str, str] = ("right", "down"),
    ax: Axes | None = None,
    title: str | None = None,
) -> dict:
    """Draw the grain map in grey and every fitted segment coloured by its class.

    Parameters
    ----------
    labels : ndarray, shape (H, W)
        Grain labels (0 = no grain).
    segments_sample : mapping of arrays
        ``x0_um, y0_um, x1_um, y1_um`` in S (µm), one entry per segment.
    classes : sequence of str
        Identification class per segment, keys of :data:`IDENTIFICATION_COLOURS`.
    step_x_um, step_y_um : float
        Grid spacing along x and between rows (µm).
    axes_declared : (str, str)
        Screen directions of the declared x and y axes, drawn as arrows.
    ax : matplotlib Axes, optional

    Returns
    -------
    dict
        The artists: ``image``, ``lines`` (one LineCollection per class),
        ``scale_bar``, ``arrows``.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> labels = np.repeat([[1, 1, 2, 2]], 4, axis=0)
    >>> seg = {"x0_um": [1.5], "y0_um": [0.0], "x1_um": [1.5], "y1_um": [3.0]}
    >>> art = plot_boundaries(labels, seg, ["identified"], step_x_um=1.0, step_y_um=1.0)
    >>> sorted(art)
    ['arrows', 'image', 'lines', 'scale_bar']
    """
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection
    from matplotlib.patches import Rectangle

    labels = np.asarray(labels)
    if ax is None:
        _, ax = plt.subplots(figsize=(7, 7 * labels.shape[0] / max(labels.shape[1], 1) + 0.8))
    h, w = labels.shape
    extent = (-0.5 * step_x_um, (w - 0.5) * step_x_um, (h - 0.5) * step_y_um, -0.5 * step_y_um)
    image = ax.imshow(
        _grey_levels(labels), cmap="gray", vmin=0, vmax=1, extent=extent, interpolation="nearest"
    )
    classes = np.asarray(classes, dtype=object)
    lines = {}
    for key, colour in IDENTIFICATION_COLOURS.items():
        pick = classes == key
        if not np.any(pick):
            continue
        xy = np.stack(
            [
                np.column_stack(
                    [
                        np.asarray(segments_sample["x0_um"])[pick],
                        np.asarray(segments_sample["y0_um"])[pick],
                    ]
                ),
                np.column_stack(
                    [
                        np.asarray(segments_sample["x1_um"])[pick],
                        np.asarray(segments_sample["y1_um"])[pick],
                    ]
                ),
            ],
            axis=1,
        )
        lc = LineCollection(
            xy, colors=colour, linewidths=1.6, label=f"{_LABELS[key]} ({pick.sum()})"
        )
        ax.add_collection(lc)
        lines[key] = lc
    width_um = w * step_x_um
    height_um = h * step_y_um
    bar = _nice_length(width_um / 5)
    x0 = extent[0] + 0.04 * width_um
    y0 = extent[2] - 0.05 * height_um
    (scale_bar,) = ax.plot(
        [x0, x0 + bar], [y0, y0], color="black", linewidth=4, solid_capstyle="butt", zorder=3
    )
    ax.text(
        x0 + bar / 2,
        y0 - 0.015 * height_um,
        f"{bar:g} µm",
        ha="center",
        va="bottom",
        fontsize=9,
        zorder=3,
    )
    # Declared axes as arrows from the top-right corner, in screen directions, on a white
    # card so that segments underneath do not read as part of the arrows.
    arrows = []
    origin = np.array([extent[1] - 0.14 * width_um, extent[3] + 0.14 * height_um])
    length = 0.09 * min(width_um, height_um)
    ends = [origin] + [origin + 1.5 * np.array(_SCREEN[d]) * length for d in axes_declared]
    lo = np.min(ends, axis=0) - 0.3 * length
    hi = np.max(ends, axis=0) + 0.3 * length
    ax.add_patch(
        Rectangle(lo, *(hi - lo), facecolor="white", edgecolor="0.6", linewidth=0.6, zorder=2.5)
    )
    ax.add_patch(
        Rectangle(
            (x0 - 0.02 * width_um, y0 - 0.06 * height_um),
            bar + 0.04 * width_um,
            0.085 * height_um,
            facecolor="white",
            edgecolor="0.6",
            linewidth=0.6,
            zorder=2.5,
        )
    )
    for name, direction in zip(("x", "y"), axes_declared, strict=True):
        d = np.array(_SCREEN[direction]) * length
        arrows.append(
            ax.annotate(
                "",
                xy=origin + d,
                xytext=origin,
                arrowprops={"arrowstyle": "->", "color": "black", "linewidth": 1.4},
                zorder=3,
            )
        )
        ax.text(*(origin + 1.35 * d), name, ha="center", va="center", fontsize=10, zorder=3)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    if lines:
        ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.01), ncol=2, fontsize=8, frameon=False)
    if title:
        ax.set_title(title, fontsize=10)
    return {"image": image, "lines": lines, "scale_bar": scale_bar, "arrows": arrows}


def save_figure(fig: Figure, path_stem: str | os.PathLike) -> list[Path]:
    """Save a figure as PNG (200 dpi) and SVG beside each other, atomically; returns the paths."""
    import io

    import matplotlib

    from .atomic import write_bytes_atomic

    paths = []
    # Identical runs give identical bytes: no date in the metadata, and SVG ids from a
    # fixed salt instead of a random one.
    with matplotlib.rc_context({"svg.hashsalt": "inclination"}):
        for ext, kwargs in (("png", {"dpi": 200}), ("svg", {})):
            buf = io.BytesIO()
            fig.savefig(buf, format=ext, bbox_inches="tight", metadata={"Date": None}, **kwargs)
            paths.append(write_bytes_atomic(Path(f"{path_stem}.{ext}"), buf.getvalue()))
    return paths
