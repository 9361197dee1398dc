"""Stereograms of a plane distribution: MRD contours on the upper hemisphere of C.

The projection shows the hemisphere n_z >= 0 of the crystal frame C (conventions §4)
seen from +Z_C, X_C to the right and Y_C up; n and −n are one plane, so nothing is
lost. Stereographic (angle-true, ρ = tan(θ/2)) by default, equal-area (Lambert,
ρ = √2 · sin(θ/2), scaled to the unit circle) on request. The MRD field between bin
centres is a Gaussian-weighted mean of the bins (width half a bin), so contours do
not follow the bin edges. Plotting imports matplotlib inside the functions.
"""

from __future__ import annotations

import numpy as np

__all__ = ["PROJECTIONS", "project", "unproject", "plot_stereogram"]

PROJECTIONS = ("stereographic", "equal-area")


def project(normals_crystal, projection: str = "stereographic") -> np.ndarray:
    """Upper-hemisphere normals (either sign) to points of the unit disc, shape (N, 2).

    Examples
    --------
    >>> project([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, -1.0, 0.0]]).round(6).tolist()
    [[0.0, 0.0], [1.0, 0.0], [0.0, -1.0]]
    """
    if projection not in PROJECTIONS:
        raise ValueError(f"Expected `projection` to be one of {PROJECTIONS}, got {projection!r}.")
    n = np.atleast_2d(np.asarray(normals_crystal, dtype=float))
    n = n / np.linalg.norm(n, axis=1, keepdims=True)
    n = np.where(n[:, 2:3] < 0, -n, n)
    # In closed form, no angles: with θ the polar angle, stereographic ρ = tan(θ/2) and
    # equal-area ρ = √2·sin(θ/2) (scaled to the unit disc) give, along (x, y)/sin θ,
    # the points (x, y)/(1 + z) and (x, y)/√(1 + z).
    scale = 1.0 + n[:, 2]
    if projection != "stereographic":
        scale = np.sqrt(scale)
    return n[:, :2] / scale[:, None] + 0.0


def unproject(points, projection: str = "stereographic") -> np.ndarray:
    """Points of the unit disc back to upper-hemisphere unit normals, shape (N, 3).

    Examples
    --------
    >>> p = project([[1.0, 2.0, 2.0]], "equal-area")
    >>> (unproject(p, "equal-area") * 3).round(6).tolist()
    [[1.0, 2.0, 2.0]]
    """
    if projection not in PROJECTIONS:
        raise ValueError(f"Expected `projection` to be one of {PROJECTIONS}, got {projection!r}.")
    p = np.atleast_2d(np.asarray(points, dtype=float))
    rho = np.hypot(p[:, 0], p[:, 1])
    if projection == "stereographic":
        theta = 2.0 * np.arctan(rho)
    else:
        theta = 2.0 * np.arcsin(np.clip(rho / np.sqrt(2), 0.0, 1.0))
    phi = np.arctan2(p[:, 1], p[:, 0])
    s = np.sin(theta)
    return np.stack([s * np.cos(phi), s * np.sin(phi), np.cos(theta)], axis=1)


def _smoothed_field(dist, normals: np.ndarray) -> np.ndarray:
    centres = dist.grid.centres_crystal()
    width = np.deg2rad(dist.grid.resolution_deg) / 2.0
    out = np.empty(len(normals))
    for start in range(0, len(normals), 4096):
        cos = np.abs(normals[start : start + 4096] @ centres.T)
        ang = np.arccos(np.clip(cos, 0.0, 1.0))
        w = np.exp(-0.5 * (ang / width) ** 2)
        out[start : start + 4096] = (w @ dist.mrd) / np.maximum(w.sum(axis=1), 1e-300)
    return out


def _poles(phase):
    from ..crystal.families import expand_family
    from ..crystal.indices import format_indices, parse_indices
    from ..crystal.lattice import plane_normals_crystal

    out = []
    for family in phase.families:
        members = expand_family(
            phase.lattice, parse_indices(family).values, phase.laue, kind="plane"
        )
        normals = plane_normals_crystal(phase.lattice, members)
        for row, n in zip(members, normals, strict=True):
            # The upper-hemisphere image of each plane; one on the equator shows at ±n.
            signs = (1, -1) if abs(n[2]) <= 1e-9 else ((1,) if n[2] > 0 else (-1,))
            for sign in signs:
                out.append((format_indices(tuple(int(x) * sign for x in row), "plane"), sign * n))
    return out


def plot_stereogram(
    dist, phase, *, projection: str = "stereographic", ax=None, n_pixels: int = 201
):
    """Draw one distribution: filled MRD contours, contour lines and the phase's poles.

    Parameters
    ----------
    dist : inclination.stereology.PlaneDistribution
        With ``mrd`` (not None).
    phase : inclination.crystal.phases.Phase
        Its ``families`` are marked as poles.
    projection : {'stereographic', 'equal-area'}
    ax : matplotlib Axes, optional
    n_pixels : int
        Pixels across the disc for the contoured field.

    Returns
    -------
    dict
        ``filled``, ``lines`` (contour sets), ``poles`` (scatter), ``labels`` (texts),
        ``colorbar``.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.stereology import plane_distribution
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}", "{1 0 0}"))
    >>> grains = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...           "quat": np.array([[1.0, 0, 0, 0], [0.5, 0.5, 0.5, 0.5]])}
    >>> seg = {"grain_a": np.array([1]), "grain_b": np.array([2]),
    ...        "trace_angle_deg": np.array([30.0]), "length_um": np.array([5.0]),
    ...        "is_phase_boundary": np.array([False])}
    >>> (d,) = plane_distribution(seg, grains, [cu], min_traces=1, n_bootstrap=4, rng=0)
    >>> artists = plot_stereogram(d, cu, n_pixels=41)
    >>> len(artists["labels"])  # 4 {111}, (0 0 1) and 4 {100} on the equator
    9
    """
    import matplotlib.pyplot as plt

    if projection not in PROJECTIONS:
        raise ValueError(f"Expected `projection` to be one of {PROJECTIONS}, got {projection!r}.")
    if dist.mrd is None:
        raise ValueError(
            "Expected a distribution with MRD values, got one without (too few traces)."
        )
    if ax is None:
        _, ax = plt.subplots(figsize=(5.2, 4.6))
    u = np.linspace(-1.0, 1.0, n_pixels)
    xx, yy = np.meshgrid(u, u)
    inside = xx**2 + yy**2 <= 1.0
    field = np.full(xx.shape, np.nan)
    field[inside] = _smoothed_field(
        dist, unproject(np.stack([xx[inside], yy[inside]], 1), projection)
    )
    top = max(float(np.nanmax(field)), 1.5)
    levels = np.unique(
        np.r_[np.linspace(min(0.0, float(np.nanmin(field))), 1.0, 3), np.geomspace(1.0, top, 8)]
    )
    filled = ax.contourf(xx, yy, field, levels=levels, cmap="cividis", extend="neither")
    lines = ax.contour(xx, yy, field, levels=levels, colors="k", linewidths=0.4)
    ax.add_patch(plt.Circle((0, 0), 1.0, fill=False, color="k", linewidth=1.0))
    poles = _poles(phase)
    xy = project(np.array([v for _, v in poles]), projection) if poles else np.zeros((0, 2))
    scatter = ax.scatter(
        xy[:, 0], xy[:, 1], s=14, marker="s", facecolor="white", edgecolor="k", zorder=3
    )
    labels = [
        ax.annotate(label, (x, y), xytext=(4, 4), textcoords="offset points", fontsize=6, zorder=4)
        for (label, _), (x, y) in zip(poles, xy, strict=True)
    ]
    ax.set_xlim(-1.08, 1.08)
    ax.set_ylim(-1.08, 1.08)
    ax.set_aspect("equal")
    ax.axis("off")
    colorbar = ax.figure.colorbar(filled, ax=ax, shrink=0.8, label="MRD")
    ax.set_title(
        f"{dist.misorientation}: {dist.n_traces} traces, peak {dist.peak_mrd:.1f} ± "
        f"{dist.peak_mrd_sigma:.1f} MRD\n{projection}, upper hemisphere of C seen from +Z_C "
        "(X_C right, Y_C up)",
        fontsize=8,
    )
    return {
        "filled": filled,
        "lines": lines,
        "poles": scatter,
        "labels": labels,
        "colorbar": colorbar,
    }
