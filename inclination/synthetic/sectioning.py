"""Second views of a microstructure: milled cross-sections, and serial sections at depth.

Owns the sectioning of a :class:`~.microstructure.Microstructure` other than the surface
map: :func:`cross_section_crossings` finds every boundary a milled face along a section
line meets, with its true geometry (§5, §7), and :func:`simulate_cross_section` lists
them with image-angle noise as a job file does. A serial section (§8) is the orientation
map of the plane at the depth h of the removed layer: :func:`.sampling.sample_map` with
``depth_um=h`` (and an ``offset_um`` for a shifted field of view) makes it.

The face geometry here is worked out with vectors, on its own, so that it checks the
section formulas of :mod:`inclination.sections`; the plane's trace and dip come from the
package's one §5 function, :func:`inclination.planes.geometry.surface_geometry`.
Sample frame S of conventions §2, micrometres and degrees. Every argument is a setting
(:class:`~inclination.errors.SettingError` when out of range).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array, check_positive
from ..errors import SettingError
from ..planes.geometry import surface_geometry
from ._shared import Seed, checked
from .microstructure import Microstructure, region_at

__all__ = ["cross_section_crossings", "simulate_cross_section"]


def _section_line(micro: Microstructure, line_um, viewer_at_um):
    line = as_float_array(line_um, "line_um")
    if line.shape != (2, 2) or not np.all(np.isfinite(line)):
        raise SettingError(f"Expected `line_um` to be ((x0, y0), (x1, y1)), got {line_um!r}.")
    viewer = as_float_array(viewer_at_um, "viewer_at_um")
    if viewer.shape != (2,) or not np.all(np.isfinite(viewer)):
        raise SettingError(f"Expected `viewer_at_um` to be (x, y), got {viewer_at_um!r}.")
    lx, ly, _ = micro.box_um
    if line.min() < 0 or line[:, 0].max() > lx or line[:, 1].max() > ly:
        raise SettingError(
            f"Expected `line_um` to lie inside the box [0, {lx}] × [0, {ly}] µm, "
            f"got {line.tolist()}."
        )
    p0 = np.array([line[0, 0], line[0, 1], 0.0])
    along = np.array([line[1, 0] - line[0, 0], line[1, 1] - line[0, 1], 0.0])
    length = float(np.linalg.norm(along))
    if length == 0:
        raise SettingError(f"Expected `line_um` to join two distinct points, got {line.tolist()}.")
    u = along / length
    v = np.array([viewer[0] - p0[0], viewer[1] - p0[1], 0.0])
    v = v - (v @ u) * u
    if np.linalg.norm(v) < 1e-9 * length:
        raise SettingError(
            f"Expected `viewer_at_um` to lie off the section line, got {viewer.tolist()} "
            "on the line."
        )
    return p0, u, length, v / np.linalg.norm(v)


def _pair_plane(micro: Microstructure, a: int, b: int):
    """Normal and the offsets c (n·x = c) of the planes on which regions a and b can meet."""
    pa, pb = int(micro.region_parent[a - 1]), int(micro.region_parent[b - 1])
    if pa != pb:
        sa, sb = micro.seeds_um[pa - 1], micro.seeds_um[pb - 1]
        n = (sb - sa) / np.linalg.norm(sb - sa)
        return n, (float(n @ (sa + sb)) / 2.0,), False
    lam = micro.lamellae[max(a, b) - micro.n_grains - 1]
    return np.asarray(lam.normal_sample), (lam.lower_um, lam.upper_um), True


def cross_section_crossings(
    micro: Microstructure,
    *,
    line_um: ArrayLike,
    viewer_at_um: ArrayLike,
    imaging_tilt_deg: float,
    max_depth_um: float,
    face_inclination_deg: float = 90.0,
    resolution_um: float = 0.01,
) -> dict[str, np.ndarray]:
    """Every boundary a milled face along a section line meets, with its true geometry (§7).

    The face contains the section line (on the surface, z = 0) and goes down from it
    along ``w = cos θ·V + sin θ·Z_S``, θ = ``face_inclination_deg`` (90: vertical) and V
    the in-plane unit vector from the line toward the viewer, so a face that is not
    vertical slopes down toward the viewer's (trench) side. The viewer sees the face
    with the surface at the top; image-right is ``V × Z_S``.

    A crossing is listed when the two regions on either side of it at the surface stay
    on either side of the same plane down to ``max_depth_um`` (a boundary that ends
    sooner would not be measured as a straight line). A boundary seen exactly vertical
    in the image (no side to descend to), running level in the face or lying within 1° of
    the surface (no trace, §5) is left out.

    The angle in the image comes from the vector geometry: the boundary's line in the
    face is L = n × m (m the face normal); on the face ``tan α = |L·w| / |L·u|``, and an
    imaging beam tilted by T from the surface normal toward the face shortens the
    in-face depth direction by ``|cos(θ - T)|`` (``sin T`` for a vertical face). For a
    vertical face this is the apparent-dip relation ``tan α = tan δ |sin β|``. The
    boundary descends toward image-right when ``L·(V × Z_S) > 0`` with L pointing down
    the face; on a vertical face that is ``d·(V × Z_S) > 0``, d the dip direction (§5).

    Parameters
    ----------
    micro : Microstructure
    line_um : ((x0, y0), (x1, y1))
        The section line on the surface, in S (µm).
    viewer_at_um : (x, y)
        Any point on the viewer's side of the line, in S.
    imaging_tilt_deg : float
        Angle between the imaging beam and the surface normal, in (0, 90].
    max_depth_um : float
        Depth over which each listed boundary stays between the same two regions.
    face_inclination_deg : float
        Angle between the face and the surface on the viewer's side, in (0, 90].
    resolution_um : float
        Spacing of the probes along the line that find the crossings.

    Returns
    -------
    dict of ndarray, each shape (N,)
        ``along_um`` (from the first point), ``x_um``, ``y_um`` (S), ``region_a`` (the
        region before the crossing), ``region_b``, ``is_twin``, ``normal_x``,
        ``normal_y``, ``normal_z`` (S), ``dip_deg``, ``trace_angle_deg``, ``beta_deg``
        (angle between trace and line, [0, 90]), ``face_angle_deg`` (apparent dip on the
        face), ``image_angle_deg`` (as imaged, no noise), ``descends``
        ('left'/'right').

    Raises
    ------
    SettingError
        A line, viewer point, tilt, face inclination, depth or resolution out of range.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(60, 40, 20), n_grains=10, rng=3)
    >>> c = cross_section_crossings(micro, line_um=((5, 20), (55, 20)), viewer_at_um=(30, 25),
    ...                             imaging_tilt_deg=52, max_depth_um=2)
    >>> c["along_um"].round(2).tolist(), c["descends"].tolist()
    ([14.07, 23.75, 43.99], ['left', 'right', 'left'])

    On a vertical face the angle on the face is the apparent dip of the plane,
    ``tan α = tan δ |sin β|``:

    >>> import numpy as np
    >>> delta, beta = np.deg2rad(c["dip_deg"]), np.deg2rad(c["beta_deg"])
    >>> alpha = np.rad2deg(np.arctan(np.tan(delta) * np.abs(np.sin(beta))))
    >>> bool(np.allclose(alpha, c["face_angle_deg"], rtol=0, atol=1e-9))
    True
    """
    p0, u, length, view = _section_line(micro, line_um, viewer_at_um)
    for name, value in (
        ("imaging_tilt_deg", imaging_tilt_deg),
        ("face_inclination_deg", face_inclination_deg),
    ):
        if not (np.isfinite(value) and 0.0 < value <= 90.0):
            raise SettingError(f"Expected `{name}` to be in (0, 90], got {value!r}.")
    checked(SettingError, check_positive, resolution_um, "resolution_um")
    checked(SettingError, check_positive, max_depth_um, "max_depth_um")
    if max_depth_um > micro.box_um[2]:
        raise SettingError(
            f"Expected `max_depth_um` to be at most the box depth {micro.box_um[2]}, "
            f"got {max_depth_um!r}."
        )
    z = np.array([0.0, 0.0, 1.0])
    right = np.cross(view, z)
    theta = np.deg2rad(face_inclination_deg)
    down = np.cos(theta) * view + np.sin(theta) * z
    face_normal = np.cross(u, down)
    shortening = abs(np.cos(theta - np.deg2rad(imaging_tilt_deg)))

    t = np.linspace(0.0, length, int(np.ceil(length / resolution_um)) + 1)
    labels = region_at(micro, p0 + t[:, None] * u)
    rows = []
    probe_um = min(0.1, 0.25 * max_depth_um)
    depths = np.linspace(0.0, max_depth_um, 6)
    for k in np.flatnonzero(labels[:-1] != labels[1:]):
        a, b = int(labels[k]), int(labels[k + 1])
        n, offsets, is_twin = _pair_plane(micro, a, b)
        nu = float(n @ u)
        # A plane within 1° of the surface has no trace (§5), hence no angle β to the line.
        if abs(nu) < 1e-12 or not surface_geometry(n).has_trace:
            continue
        hits = [(c - float(n @ p0)) / nu for c in offsets]
        hits = [h for h in hits if t[k] - 1e-9 <= h <= t[k + 1] + 1e-9]
        if not hits:
            continue
        crossing = p0 + hits[0] * u
        line_dir = np.cross(n, face_normal)
        line_dir /= np.linalg.norm(line_dir)
        if line_dir @ down < 0:
            line_dir = -line_dir
        a_u, a_w = float(line_dir @ u), float(line_dir @ down)
        if abs(a_u) < 1e-9 or line_dir[2] < 1e-9:
            continue
        # Probes just either side of the boundary line in the face, at several depths.
        side = np.cross(face_normal, line_dir)
        side *= np.sign(side @ u)
        centres = crossing + (depths / line_dir[2])[:, None] * line_dir
        before = region_at(micro, centres - probe_um * side)
        after = region_at(micro, centres + probe_um * side)
        if np.any(before != a) or np.any(after != b):
            continue
        rows.append(
            (
                hits[0],
                crossing,
                a,
                b,
                is_twin,
                n,
                np.rad2deg(np.arctan2(abs(a_w), abs(a_u))),
                np.rad2deg(np.arctan2(abs(a_w) * shortening, abs(a_u))),
                "right" if line_dir @ right > 0 else "left",
            )
        )
    normals = np.array([r[5] for r in rows]).reshape(-1, 3)
    geometry = surface_geometry(normals)
    trace_rad = np.deg2rad(geometry.trace_angle_deg)
    cos_beta = np.abs(np.cos(trace_rad) * u[0] + np.sin(trace_rad) * u[1])
    beta = np.rad2deg(np.arccos(np.clip(cos_beta, 0.0, 1.0)))
    return {
        "along_um": np.array([r[0] for r in rows], dtype=float),
        "x_um": np.array([r[1][0] for r in rows], dtype=float),
        "y_um": np.array([r[1][1] for r in rows], dtype=float),
        "region_a": np.array([r[2] for r in rows], dtype=np.int64),
        "region_b": np.array([r[3] for r in rows], dtype=np.int64),
        "is_twin": np.array([r[4] for r in rows], dtype=bool),
        "normal_x": normals[:, 0].copy(),
        "normal_y": normals[:, 1].copy(),
        "normal_z": normals[:, 2].copy(),
        "dip_deg": geometry.dip_deg.copy(),
        "trace_angle_deg": geometry.trace_angle_deg.copy(),
        "beta_deg": beta,
        "face_angle_deg": np.array([r[6] for r in rows], dtype=float),
        "image_angle_deg": np.array([r[7] for r in rows], dtype=float),
        "descends": np.array([r[8] for r in rows], dtype="<U5"),
    }


def simulate_cross_section(
    micro: Microstructure,
    *,
    line_um: ArrayLike,
    viewer_at_um: ArrayLike,
    imaging_tilt_deg: float,
    max_depth_um: float,
    rng: Seed,
    face_inclination_deg: float = 90.0,
    angle_noise_deg: float = 1.0,
) -> list[dict]:
    """The boundaries a cross-section meets, as the job file lists them (conventions §7).

    The truth comes from :func:`cross_section_crossings` (same arguments; its table says
    which boundary each entry is); normal noise of SD ``angle_noise_deg`` is added to
    each image angle, which is then folded into (0, 90] (a shallow boundary stays
    shallow). Coordinates are in S: a job that declares axes x right, y down can use
    them as they are.

    Parameters
    ----------
    micro : Microstructure
    line_um, viewer_at_um, imaging_tilt_deg, max_depth_um, face_inclination_deg
        As in :func:`cross_section_crossings`.
    rng : None, int or numpy.random.Generator
        Seed of the angle noise.
    angle_noise_deg : float
        Standard deviation of the noise added to each image angle.

    Returns
    -------
    list of dict
        ``{"along_um": float, "image_angle_deg": float, "descends": "left" | "right"}``,
        in order along the line.

    Raises
    ------
    SettingError
        As :func:`cross_section_crossings`, or a negative ``angle_noise_deg``.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(60, 40, 20), n_grains=10, rng=3)
    >>> found = simulate_cross_section(micro, line_um=((5, 20), (55, 20)),
    ...     viewer_at_um=(30, 25), imaging_tilt_deg=52, max_depth_um=2, rng=0)
    >>> sorted(found[0])
    ['along_um', 'descends', 'image_angle_deg']
    """
    checked(SettingError, check_positive, angle_noise_deg, "angle_noise_deg", allow_zero=True)
    table = cross_section_crossings(
        micro,
        line_um=line_um,
        viewer_at_um=viewer_at_um,
        imaging_tilt_deg=imaging_tilt_deg,
        max_depth_um=max_depth_um,
        face_inclination_deg=face_inclination_deg,
    )
    gen = np.random.default_rng(rng)
    angle = table["image_angle_deg"] + gen.normal(0.0, angle_noise_deg, len(table["along_um"]))
    # The job file takes angles in (0, 90]: a noisy angle below zero is read as a shallow one.
    angle = np.clip(np.abs(angle), 1e-3, 90.0)
    return [
        {"along_um": float(s), "image_angle_deg": float(a), "descends": str(d)}
        for s, a, d in zip(table["along_um"], angle, table["descends"], strict=True)
    ]
