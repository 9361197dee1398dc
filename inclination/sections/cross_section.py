"""Measured dips from a second view of the boundaries (conventions §5, §7, §8).

Two kinds of second view are handled:

- a **cross-section**: a planar face cut along a straight line on the surface and
  imaged at a tilt; each boundary seen on the face gives its apparent dip, and with
  the fitted surface trace the full plane (§7);
- a **serial section**: a second map of the same area after a layer of thickness h
  has been removed; the sideways offset of each trace gives the dip (§8). More than
  two sections (a stack) give a least-squares plane through every trace.

Every vector, point and angle inside is in the sample frame S (§2: X right, Y down,
Z into the material). Section coordinates from a job file are in the user's declared
axes and are converted at the public entry points through a ``DeclaredAxes``
object (``axes.points_to_sample(xy)``).

Plane normals are returned with ``n_z >= 0`` (a normal is defined up to sign; this
choice makes tables comparable row by row). Dip ``δ = arccos|n_z|`` and the dip
direction ``d = -sign(n_z) (n_x, n_y) / |(n_x, n_y)|`` follow §5.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter
from scipy.sparse.csgraph import connected_components

from .._validation import as_float_array, check_finite, check_one_of, check_positive
from ..crystal.symmetry import disorientation_angle_deg
from ..errors import InputError

__all__ = [
    "VICKERS_DEPTH_FACTOR",
    "CROSS_SECTION_STATUSES",
    "apparent_dip_deg",
    "true_dip_from_apparent_deg",
    "face_angle_from_image_deg",
    "image_right_sample",
    "depth_from_indent_um",
    "serial_dip_deg",
    "serial_dip_sigma_deg",
    "LayerDepth",
    "section_depth",
    "measure_cross_section",
    "Registration",
    "register_sections",
    "match_grains",
    "SerialSection",
    "measure_serial_section",
    "PlaneFit",
    "fit_plane_through_traces",
    "measure_stack",
]

#: Depth of a Vickers indent per unit of diagonal: 2·√2·tan 68° (136° pyramid, §8).
VICKERS_DEPTH_FACTOR = 2.0 * math.sqrt(2.0) * math.tan(math.radians(68.0))

#: Closed set of the ``status`` column of section tables.
CROSS_SECTION_STATUSES = ("measured", "ill_conditioned", "unmatched", "ambiguous")

_Z = np.array([0.0, 0.0, 1.0])
_Z.setflags(write=False)


# --------------------------------------------------------------------------- geometry


def apparent_dip_deg(true_dip_deg, beta_deg):
    """Apparent dip on a vertical face: ``tan α = tan δ · |sin β|`` (§7).

    Parameters
    ----------
    true_dip_deg : array_like
        True dip δ of the plane, degrees in [0, 90].
    beta_deg : array_like
        Angle β between the trace and the section line, degrees (broadcast).

    Returns
    -------
    ndarray
        Apparent dip α in degrees, [0, 90].

    Examples
    --------
    >>> apparent_dip_deg(60.0, [45.0, 30.0, 10.0]).round(3).tolist()
    [50.768, 40.893, 16.74]
    """
    delta = np.deg2rad(as_float_array(true_dip_deg, "true_dip_deg"))
    beta = np.deg2rad(as_float_array(beta_deg, "beta_deg"))
    return np.rad2deg(np.arctan(np.tan(delta) * np.abs(np.sin(beta))))


def true_dip_from_apparent_deg(apparent_dip_deg, beta_deg):
    """True dip from the apparent dip on a vertical face, inverse of :func:`apparent_dip_deg`.

    Parameters
    ----------
    apparent_dip_deg : array_like
        Apparent dip α in degrees, [0, 90].
    beta_deg : array_like
        Angle between trace and section line, degrees; ``sin β = 0`` gives 90°
        (the face then runs along the trace and any α > 0 means a vertical plane).

    Returns
    -------
    ndarray
        True dip δ in degrees, [0, 90].

    Examples
    --------
    >>> true_dip_from_apparent_deg(50.768, 45.0).round(3).tolist()
    60.0
    """
    alpha = np.deg2rad(as_float_array(apparent_dip_deg, "apparent_dip_deg"))
    beta = np.deg2rad(as_float_array(beta_deg, "beta_deg"))
    return np.rad2deg(np.arctan2(np.tan(alpha), np.abs(np.sin(beta))))


def face_angle_from_image_deg(image_angle_deg, tilt_deg, *, face_inclination_deg=90.0):
    """Correct an angle measured in a tilted image to the angle on the face (§7).

    Depths on the face appear shortened by ``cos(φ − θ)`` where θ is the imaging tilt
    (beam to surface normal) and φ the face inclination to the surface; for a face
    perpendicular to the surface this is ``sin θ`` and
    ``tan α_face = tan α_image / sin θ``. An inclined face is taken to lean toward the
    viewer with depth (the wall of a milled trench).

    Parameters
    ----------
    image_angle_deg : array_like
        Angle between the surface line and the boundary in the image, degrees [0, 90].
    tilt_deg : float or array_like
        Imaging tilt θ, degrees.
    face_inclination_deg : float, optional
        Inclination φ of the face to the surface, degrees (90 = perpendicular).

    Returns
    -------
    ndarray
        Angle on the face, degrees [0, 90].

    Examples
    --------
    >>> face_angle_from_image_deg(30.0, 52.0).round(3).tolist()
    36.229
    >>> round(1.0 / math.sin(math.radians(52.0)), 5)
    1.26902
    """
    alpha = np.deg2rad(as_float_array(image_angle_deg, "image_angle_deg"))
    theta = np.deg2rad(as_float_array(tilt_deg, "tilt_deg"))
    phi = np.deg2rad(as_float_array(face_inclination_deg, "face_inclination_deg"))
    shortening = np.cos(phi - theta)
    if np.any(shortening <= 1e-6):
        raise ValueError(
            "Expected `tilt_deg` to let the beam see the face (cos(face inclination − tilt)"
            f" > 0), got tilt {np.rad2deg(theta)!r} for a face at {np.rad2deg(phi)!r} deg."
        )
    return np.rad2deg(np.arctan2(np.tan(alpha), shortening))


def image_right_sample(line_sample, viewer_sample):
    """Unit vector of image-right for a section viewed from the viewer's side (§7).

    Image-right is ``V × Z_S`` with V the in-plane unit vector from the section line
    toward the viewer.

    Parameters
    ----------
    line_sample : array_like, shape (2, 2)
        First and second point of the section line, µm, in S.
    viewer_sample : array_like, shape (2,)
        Any point on the viewer's side, µm, in S.

    Returns
    -------
    ndarray, shape (3,)
        Image-right in S (it lies along the section line).

    Examples
    --------
    >>> image_right_sample([[0, 0], [10, 0]], [5, -3]).round(6).tolist()
    [-1.0, 0.0, 0.0]
    """
    line = as_float_array(line_sample, "line_sample")
    viewer = as_float_array(viewer_sample, "viewer_sample")
    if line.shape != (2, 2):
        raise ValueError(f"Expected `line_sample` to have shape (2, 2), got {line.shape}.")
    if viewer.shape != (2,):
        raise ValueError(f"Expected `viewer_sample` to have shape (2,), got {viewer.shape}.")
    along, toward_viewer, _ = _line_frame(line, viewer)
    if along is None:
        raise ValueError("Expected `line_sample` to have two distinct points, got one point.")
    if toward_viewer is None:
        raise ValueError("Expected `viewer_sample` to lie off the section line, got a point on it.")
    v3 = np.array([toward_viewer[0], toward_viewer[1], 0.0])
    return np.cross(v3, _Z) + 0.0


def _line_frame(line, viewer):
    """Unit direction of the line, unit vector toward the viewer, length (None if degenerate)."""
    delta = line[1] - line[0]
    length = float(np.hypot(*delta))
    if length <= 1e-9:
        return None, None, length
    along = delta / length
    rel = viewer - line[0]
    perp = rel - (rel @ along) * along
    dist = float(np.hypot(*perp))
    if dist <= 1e-6 * max(1.0, length):
        return along, None, length
    return along, perp / dist, length


def depth_from_indent_um(diagonal_before_um, diagonal_after_um):
    """Layer thickness from the shrinkage of a Vickers indent (§8).

    ``h = (d_before − d_after) / (2·√2·tan 68°)`` for the 136° square pyramid.

    Parameters
    ----------
    diagonal_before_um, diagonal_after_um : array_like
        Mean indent diagonal before and after removing the layer, µm.

    Returns
    -------
    ndarray
        Layer thickness h, µm.

    Examples
    --------
    >>> depth_from_indent_um(30.0, 23.0).round(5).tolist()
    0.99991
    """
    before = as_float_array(diagonal_before_um, "diagonal_before_um")
    after = as_float_array(diagonal_after_um, "diagonal_after_um")
    if np.any(after > before):
        raise ValueError(
            "Expected `diagonal_after_um` <= `diagonal_before_um` (the indent shrinks as "
            f"material is removed), got {after.tolist()!r} > {before.tolist()!r}."
        )
    return (before - after) / VICKERS_DEPTH_FACTOR


def serial_dip_deg(depth_um, offset_um):
    """Dip from a serial section: ``tan δ = h / Δ`` (§8).

    Parameters
    ----------
    depth_um : array_like
        Layer thickness h, µm.
    offset_um : array_like
        Perpendicular offset Δ of the trace, µm (its sign is ignored).

    Returns
    -------
    ndarray
        Dip in degrees, [0, 90].

    Examples
    --------
    >>> serial_dip_deg(1.0, 0.5774).round(2).tolist()
    60.0
    """
    h = as_float_array(depth_um, "depth_um")
    d = as_float_array(offset_um, "offset_um")
    return np.rad2deg(np.arctan2(h, np.abs(d)))


def serial_dip_sigma_deg(depth_um, offset_um, depth_sigma_um, offset_sigma_um):
    """First-order σ of the serial-section dip: ``√((Δσ_h)² + (hσ_Δ)²) / (h² + Δ²)``.

    Parameters
    ----------
    depth_um, offset_um, depth_sigma_um, offset_sigma_um : array_like
        h, Δ and their standard deviations, µm (broadcast).

    Returns
    -------
    ndarray
        σ of the dip in degrees.

    Examples
    --------
    >>> serial_dip_sigma_deg(5.0, 2.887, 0.2, 0.2).round(2).tolist()
    1.98
    """
    h = as_float_array(depth_um, "depth_um")
    d = np.abs(as_float_array(offset_um, "offset_um"))
    sh = as_float_array(depth_sigma_um, "depth_sigma_um")
    sd = as_float_array(offset_sigma_um, "offset_sigma_um")
    return np.rad2deg(np.hypot(d * sh, h * sd) / (h**2 + d**2))


def _planes_from_normals(normal):
    """Orient normals to n_z >= 0; dip, dip-direction azimuth (degrees, S) per row."""
    normal = normal / np.linalg.norm(normal, axis=-1, keepdims=True)
    normal = np.where(normal[..., 2:3] < 0, -normal, normal) + 0.0
    dip = np.rad2deg(np.arccos(np.clip(np.abs(normal[..., 2]), 0.0, 1.0)))
    # d = -sign(n_z) (n_x, n_y): with n_z >= 0 that is -(n_x, n_y).
    azimuth = np.rad2deg(np.arctan2(-normal[..., 1], -normal[..., 0])) % 360.0
    # A tiny negative angle wraps to 360.0 in floating point; [0, 360) is the range.
    azimuth = np.where(azimuth >= 360.0, 0.0, azimuth)
    return normal, dip, azimuth


def _angle_diff_deg(a, b):
    """Signed difference a − b wrapped to [-180, 180)."""
    return (a - b + 180.0) % 360.0 - 180.0


# --------------------------------------------------------------------------- depth records


@dataclass(frozen=True)
class LayerDepth:
    """Thickness of the layer removed between two sections.

    Attributes
    ----------
    depth_um : float
        Layer thickness h, µm.
    depth_sigma_um : float
        Its standard deviation, µm.
    source : str
        ``"given"`` or ``"indent"``.
    """

    depth_um: float
    depth_sigma_um: float
    source: str


def section_depth(section: Mapping, *, path=None, pointer: str = "") -> LayerDepth:
    """Layer thickness of a serial-section job entry (§8).

    The entry gives ``depth_um``, or ``indent``: the Vickers indent diagonals
    ``{"diagonal_before_um": ..., "diagonal_after_um": ...}``, with
    ``h = (d_before − d_after) / (2·√2·tan 68°)``. ``depth_sigma_um`` states the σ of
    h; when it is absent or null the depth is taken to be known to 10 % (common
    practice for polished layers; state it in the job to do better).

    Parameters
    ----------
    section : mapping
        One validated ``sections`` entry of kind ``serial``.
    path, pointer : optional
        File and JSON pointer of the entry, for error messages.

    Returns
    -------
    LayerDepth

    Examples
    --------
    >>> section_depth({"depth_um": 1.5, "depth_sigma_um": 0.1})
    LayerDepth(depth_um=1.5, depth_sigma_um=0.1, source='given')
    >>> d = section_depth({"indent": {"diagonal_before_um": 30.0, "diagonal_after_um": 23.0}})
    >>> round(d.depth_um, 5), round(d.depth_sigma_um, 5), d.source
    (0.99991, 0.09999, 'indent')
    """

    def number(value, field):
        try:
            out = float(value)
        except (TypeError, ValueError):
            out = float("nan")
        if not np.isfinite(out):
            raise InputError(
                f"Expected `{field.rsplit('/', 1)[-1]}` to be a finite number, got {value!r}.",
                path=path,
                pointer=f"{pointer}/{field}",
            )
        return out

    if section.get("depth_um") is not None:
        depth = number(section["depth_um"], "depth_um")
        if depth <= 0:
            raise InputError(
                f"Expected `depth_um` to be a finite number > 0, got {section['depth_um']!r}.",
                path=path,
                pointer=f"{pointer}/depth_um",
            )
        source = "given"
    elif isinstance(section.get("indent"), Mapping):
        indent = section["indent"]
        before = number(indent.get("diagonal_before_um"), "indent/diagonal_before_um")
        after = number(indent.get("diagonal_after_um"), "indent/diagonal_after_um")
        if after >= before or after <= 0:
            raise InputError(
                "Expected `diagonal_after_um` to be > 0 and smaller than "
                f"`diagonal_before_um` (the indent shrinks), got {after!r} and {before!r}.",
                path=path,
                pointer=f"{pointer}/indent/diagonal_after_um",
            )
        depth = (before - after) / VICKERS_DEPTH_FACTOR
        source = "indent"
    else:
        raise InputError(
            "Expected `depth_um` or `indent` with the diagonals before and after, got neither.",
            path=path,
            pointer=pointer,
        )
    if section.get("depth_sigma_um") is None:
        sigma = 0.1 * depth
    else:
        sigma = number(section["depth_sigma_um"], "depth_sigma_um")
        if sigma < 0:
            raise InputError(
                f"Expected `depth_sigma_um` to be a finite number >= 0, got {sigma!r}.",
                path=path,
                pointer=f"{pointer}/depth_sigma_um",
            )
    return LayerDepth(depth_um=depth, depth_sigma_um=sigma, source=source)


# --------------------------------------------------------------------------- cross-sections


def _assign_in_order(hit, along, s_cross):
    """Entry → segment assignment from the hit matrix (K, N), or none where it is not unique.

    Entries and segments that hit each other form clusters. A cluster of one entry and
    one segment is a match. A cluster of k entries and k segments is matched in order
    along the line when that pairing uses only hits: boundaries cross the surface line
    in one order, and the face shows them in that order at its top edge. Any other
    cluster (an entry near two traces, two entries on one trace) stays unassigned.
    """
    k, n = hit.shape
    first = np.zeros(k, dtype=np.int64)
    matched = np.zeros(k, dtype=bool)
    if k == 0 or n == 0:
        return first, matched
    graph = np.zeros((k + n, k + n), dtype=bool)
    graph[:k, k:] = hit
    _, comp = connected_components(graph | graph.T, directed=False)
    for c in np.unique(comp[:k]):
        entries = np.flatnonzero(comp[:k] == c)
        segs = np.flatnonzero(comp[k:] == c)
        if len(segs) == 0 or len(entries) != len(segs):
            continue
        e_sorted = entries[np.argsort(along[entries], kind="stable")]
        s_sorted = segs[np.argsort(s_cross[segs], kind="stable")]
        if np.all(hit[e_sorted, s_sorted]):
            first[e_sorted] = s_sorted
            matched[e_sorted] = True
    return first, matched


def _optional_float(value, default):
    """A job number; null or absent gives ``default``, anything else not a number NaN."""
    if value is None:
        return float(default)
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _cross_section_normals(alpha_img, trace, tilt, face, along, toward, descend_sign):
    """Plane normals (N, 3) from image angle, trace angle, tilt (radians) on one face."""
    alpha_face = np.arctan2(np.tan(alpha_img), np.cos(face - tilt))
    right = np.array([toward[1], -toward[0], 0.0])  # V × Z_S
    s_h = descend_sign[:, None] * right[None, :]
    down = np.sin(face)[..., None] * _Z + np.cos(face)[..., None] * np.array(
        [toward[0], toward[1], 0.0]
    )
    line_on_face = np.cos(alpha_face)[:, None] * s_h + np.sin(alpha_face)[:, None] * down
    t = np.stack([np.cos(trace), np.sin(trace), np.zeros_like(trace)], axis=-1)
    return np.cross(t, line_on_face)


def measure_cross_section(
    section: Mapping,
    segments: Mapping,
    *,
    axes,
    step_um: float,
    bounds_um,
    tilt_sigma_deg: float = 0.5,
    max_sigma_deg: float = 10.0,
    path=None,
    pointer: str = "",
) -> dict:
    """Measured planes of the boundaries seen on a cross-section face (§7).

    Each listed boundary is matched to the fitted surface segment that crosses the
    section line within the match tolerance of its ``along_um``; an entry with no such
    segment is ``unmatched``. Where entries and traces crowd together (near a triple
    junction), k entries hitting the same k traces are paired in their order along
    the line (the order the face shows at its top edge); any other crowd — an entry
    near two traces, two entries on one trace — is ``ambiguous``, never guessed.
    For a matched entry the image angle is corrected for the imaging tilt, the line
    on the face is
    ``l = cos α · s_h + sin α · w`` (``s_h`` along the section line pointed the way the
    boundary descends, ``w`` down the face) and the normal is ``n ∝ t × l`` with t the
    fitted trace. Uncertainties are first order (one-sided finite differences) in
    the image-angle σ, the trace σ and ``tilt_sigma_deg``. An entry whose dip σ
    exceeds ``max_sigma_deg`` (trace nearly parallel to the line) keeps its values and
    σ with status ``ill_conditioned``.

    Parameters
    ----------
    section : mapping
        A validated job entry of kind ``cross-section``: ``line_um`` (2, 2) and
        ``viewer_at_um`` (2,) in declared axes, ``imaging_tilt_deg``, optional
        ``face_inclination_deg`` (90), optional ``match_tolerance_um`` (2 steps), and
        ``boundaries``: entries with ``along_um``, ``image_angle_deg``, ``descends``
        (``left``/``right``) and optional ``angle_sigma_deg`` (1).
    segments : mapping
        Segments table (S): ``segment_id, x0_um, y0_um, x1_um, y1_um,
        trace_angle_deg, trace_sigma_deg`` (rows with ``too_short`` are skipped).
    axes : DeclaredAxes
        The map's declared axes; ``axes.points_to_sample`` converts the section points.
    step_um : float
        Map step, µm (the default match tolerance is two steps).
    bounds_um : array_like, shape (4,)
        ``(x_min, y_min, x_max, y_max)`` of the map in S, µm.
    tilt_sigma_deg : float, optional
        σ of the imaging tilt, degrees.
    max_sigma_deg : float, optional
        Dip σ above which an entry is ``ill_conditioned``.
    path, pointer : optional
        Job file and JSON pointer of the entry, for error messages.

    Returns
    -------
    dict of 1-D arrays, one row per listed boundary
        ``entry, segment_id`` (-1 if none), ``candidate_segment_ids`` (";"-joined),
        ``along_um, beta_deg, normal_x, normal_y, normal_z`` (S, n_z >= 0),
        ``measured_dip_deg, measured_dip_sigma_deg, dip_direction_azimuth_deg`` (S,
        [0, 360)), ``dip_direction_sigma_deg``, ``dip_source`` (``cross-section``),
        ``status`` (one of ``CROSS_SECTION_STATUSES``).

    Examples
    --------
    >>> class Axes:  # screen axes as in S: x right, y down
    ...     def points_to_sample(self, xy):
    ...         return np.asarray(xy, dtype=float)
    >>> seg = {"segment_id": np.array([0]), "x0_um": np.array([50.0]),
    ...        "y0_um": np.array([0.0]), "x1_um": np.array([50.0]),
    ...        "y1_um": np.array([100.0]), "trace_angle_deg": np.array([90.0]),
    ...        "trace_sigma_deg": np.array([0.5])}
    >>> sec = {"line_um": [[0, 40], [100, 40]], "viewer_at_um": [50, 60],
    ...        "imaging_tilt_deg": 90.0,
    ...        "boundaries": [{"along_um": 50.0, "image_angle_deg": 60.0,
    ...                        "descends": "right"}]}
    >>> out = measure_cross_section(sec, seg, axes=Axes(), step_um=1.0,
    ...                             bounds_um=(0, 0, 100, 100))
    >>> out["status"].tolist(), out["measured_dip_deg"].round(3).tolist()
    (['measured'], [60.0])
    >>> out["dip_direction_azimuth_deg"].round(3).tolist()
    [0.0]
    """
    check_positive(step_um, "step_um")
    check_positive(tilt_sigma_deg, "tilt_sigma_deg", allow_zero=True)
    check_positive(max_sigma_deg, "max_sigma_deg")
    bounds = as_float_array(bounds_um, "bounds_um")
    if bounds.shape != (4,):
        raise ValueError(f"Expected `bounds_um` to have shape (4,), got {bounds.shape}.")

    def fail(message, field):
        raise InputError(message, path=path, pointer=f"{pointer}/{field}" if field else pointer)

    line_decl = np.asarray(section.get("line_um"), dtype=float)
    if line_decl.shape != (2, 2) or not np.all(np.isfinite(line_decl)):
        fail(
            f"Expected `line_um` to be two points [[x, y], [x, y]], got {line_decl.tolist()}.",
            "line_um",
        )
    viewer_decl = np.asarray(section.get("viewer_at_um"), dtype=float)
    if viewer_decl.shape != (2,) or not np.all(np.isfinite(viewer_decl)):
        fail(
            f"Expected `viewer_at_um` to be one point [x, y], got {viewer_decl.tolist()}.",
            "viewer_at_um",
        )
    line = np.asarray(axes.points_to_sample(line_decl), dtype=float)
    viewer = np.asarray(axes.points_to_sample(viewer_decl[None, :]), dtype=float)[0]
    margin = 0.5 * step_um
    inside = (
        (line[:, 0] >= bounds[0] - margin)
        & (line[:, 0] <= bounds[2] + margin)
        & (line[:, 1] >= bounds[1] - margin)
        & (line[:, 1] <= bounds[3] + margin)
    )
    if not inside.all():
        fail(
            f"Expected `line_um` to lie inside the map, got point {line_decl[~inside][0].tolist()}"
            " outside it.",
            "line_um",
        )
    along_dir, toward, length = _line_frame(line, viewer)
    if along_dir is None:
        fail("Expected `line_um` to have two distinct points, got one point twice.", "line_um")
    if toward is None:
        fail(
            f"Expected `viewer_at_um` to lie on one side of the section line, got "
            f"{viewer_decl.tolist()} on the line itself.",
            "viewer_at_um",
        )
    tilt_deg = _optional_float(section.get("imaging_tilt_deg"), np.nan)
    face_deg = _optional_float(section.get("face_inclination_deg"), 90.0)
    if not (0.0 <= tilt_deg <= 90.0):
        fail(
            f"Expected `imaging_tilt_deg` in [0, 90], got {section.get('imaging_tilt_deg')!r}.",
            "imaging_tilt_deg",
        )
    if not (0.0 < face_deg < 180.0):
        fail(
            f"Expected `face_inclination_deg` in (0, 180), got {face_deg!r}.",
            "face_inclination_deg",
        )
    if math.cos(math.radians(face_deg - tilt_deg)) <= 1e-6:
        fail(
            f"Expected an imaging tilt that sees the face, got {tilt_deg!r} deg for a face "
            f"at {face_deg!r} deg.",
            "imaging_tilt_deg",
        )
    tolerance = _optional_float(section.get("match_tolerance_um"), 2.0 * step_um)
    if not (np.isfinite(tolerance) and tolerance > 0):
        fail(f"Expected `match_tolerance_um` > 0, got {tolerance!r}.", "match_tolerance_um")

    entries = list(section.get("boundaries", []))
    k = len(entries)
    along = np.empty(k)
    alpha = np.empty(k)
    alpha_sigma = np.empty(k)
    descend = np.empty(k)
    for i, entry in enumerate(entries):
        where = f"boundaries/{i}"
        along[i] = _optional_float(entry.get("along_um"), np.nan)
        if not (0.0 <= along[i] <= length):
            fail(
                f"Expected `along_um` within the section line (0 to {length:.6g} µm), got "
                f"{entry.get('along_um')!r}.",
                f"{where}/along_um",
            )
        alpha[i] = _optional_float(entry.get("image_angle_deg"), np.nan)
        if not (0.0 <= alpha[i] <= 90.0):
            fail(
                f"Expected `image_angle_deg` in [0, 90], got {entry.get('image_angle_deg')!r}.",
                f"{where}/image_angle_deg",
            )
        side = entry.get("descends")
        if side not in ("left", "right"):
            fail(
                f"Expected `descends` to be one of ('left', 'right'), got {side!r}.",
                f"{where}/descends",
            )
        descend[i] = 1.0 if side == "right" else -1.0
        alpha_sigma[i] = _optional_float(entry.get("angle_sigma_deg"), 1.0)
        if not (np.isfinite(alpha_sigma[i]) and alpha_sigma[i] >= 0):
            fail(
                f"Expected `angle_sigma_deg` >= 0, got {entry.get('angle_sigma_deg')!r}.",
                f"{where}/angle_sigma_deg",
            )

    seg_id = np.asarray(segments["segment_id"])
    keep = np.ones(seg_id.shape, bool)
    if "too_short" in segments:
        keep &= ~np.asarray(segments["too_short"], bool)
    a = np.stack([segments["x0_um"], segments["y0_um"]], axis=-1).astype(float)[keep]
    b = np.stack([segments["x1_um"], segments["y1_um"]], axis=-1).astype(float)[keep]
    trace_deg = np.asarray(segments["trace_angle_deg"], float)[keep]
    trace_sigma_deg = np.asarray(segments["trace_sigma_deg"], float)[keep]
    seg_id = seg_id[keep]

    # Crossing of each segment with the section line: P0 + s·e = A + u·D.
    d = b - a
    seg_len = np.hypot(d[:, 0], d[:, 1])
    r = a - line[0]
    denom = along_dir[0] * d[:, 1] - along_dir[1] * d[:, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        s_cross = (r[:, 0] * d[:, 1] - r[:, 1] * d[:, 0]) / denom
        u_cross = (r[:, 0] * along_dir[1] - r[:, 1] * along_dir[0]) / denom
        u_margin = tolerance / seg_len
    crosses = (
        (np.abs(denom) > 1e-12)
        & (u_cross >= -u_margin)
        & (u_cross <= 1.0 + u_margin)
        & (s_cross >= -tolerance)
        & (s_cross <= length + tolerance)
    )
    hit = crosses[None, :] & (np.abs(s_cross[None, :] - along[:, None]) <= tolerance)
    n_hits = hit.sum(axis=1)
    first, matched = _assign_in_order(hit, along, s_cross)

    status = np.where(n_hits == 0, "unmatched", "ambiguous").astype(object)
    candidates = np.array([";".join(str(int(s)) for s in seg_id[row]) for row in hit], object)
    out_id = np.full(k, -1, dtype=np.int64)
    normal = np.full((k, 3), np.nan)
    dip = np.full(k, np.nan)
    dip_sigma = np.full(k, np.nan)
    azimuth = np.full(k, np.nan)
    azimuth_sigma = np.full(k, np.nan)
    beta = np.full(k, np.nan)

    if matched.any():
        idx = first[matched]
        out_id[matched] = seg_id[idx]
        params = np.stack(
            [
                np.deg2rad(alpha[matched]),
                np.deg2rad(trace_deg[idx]),
                np.full(idx.shape, math.radians(tilt_deg)),
            ]
        )
        sigmas = np.deg2rad(
            np.stack(
                [alpha_sigma[matched], trace_sigma_deg[idx], np.full(idx.shape, tilt_sigma_deg)]
            )
        )
        face = np.full(idx.shape, math.radians(face_deg))
        sign = descend[matched]

        def evaluate(p):
            return _planes_from_normals(
                _cross_section_normals(p[0], p[1], p[2], face, along_dir, toward, sign)
            )

        n0, dip0, az0 = evaluate(params)
        var_dip = np.zeros(idx.shape)
        var_az = np.zeros(idx.shape)
        step = 1e-5
        for j in range(3):
            p_hi = params.copy()
            p_lo = params.copy()
            p_hi[j] += step
            p_lo[j] -= step
            _, dip_hi, az_hi = evaluate(p_hi)
            _, dip_lo, az_lo = evaluate(p_lo)
            # One-sided slopes: at a vertical plane arccos|n_z| has a kink, and a
            # central difference would report zero sensitivity there.
            slope_dip = np.maximum(np.abs(dip_hi - dip0), np.abs(dip0 - dip_lo)) / step
            slope_az = (
                np.maximum(np.abs(_angle_diff_deg(az_hi, az0)), np.abs(_angle_diff_deg(az0, az_lo)))
                / step
            )
            var_dip += (slope_dip * sigmas[j]) ** 2
            var_az += (slope_az * sigmas[j]) ** 2
        normal[matched] = n0
        dip[matched] = dip0
        azimuth[matched] = az0
        dip_sigma[matched] = np.sqrt(var_dip)
        # A dip direction flip at a vertical plane is not a small error; its σ
        # stays the trace σ and verticality is judged from the dip and its σ.
        azimuth_sigma[matched] = np.minimum(np.sqrt(var_az), 180.0)
        t_dir = np.stack([np.cos(np.deg2rad(trace_deg[idx])), np.sin(np.deg2rad(trace_deg[idx]))])
        cos_beta = np.abs(along_dir @ t_dir)
        beta[matched] = np.rad2deg(np.arccos(np.clip(cos_beta, 0.0, 1.0)))
        status[matched] = np.where(
            dip_sigma[matched] > max_sigma_deg, "ill_conditioned", "measured"
        )

    return {
        "entry": np.arange(k),
        "segment_id": out_id,
        "candidate_segment_ids": candidates if k else np.array([], object),
        "along_um": along,
        "beta_deg": beta,
        "normal_x": normal[:, 0],
        "normal_y": normal[:, 1],
        "normal_z": normal[:, 2],
        "measured_dip_deg": dip,
        "measured_dip_sigma_deg": dip_sigma,
        "dip_direction_azimuth_deg": azimuth,
        "dip_direction_sigma_deg": azimuth_sigma,
        "dip_source": np.full(k, "cross-section", dtype=object),
        "status": status.astype(str) if k else np.array([], dtype=str),
    }


# --------------------------------------------------------------------------- serial sections


@dataclass(frozen=True)
class Registration:
    """Placement of a deeper map on the surface map: ``p_surface = R(θ) p_deeper + shift``.

    Attributes
    ----------
    shift_x_um, shift_y_um : float
        Translation in S, µm.
    rotation_deg : float
        Rotation θ about Z_S, degrees (0 unless fitted).
    residual_um : float
        RMS misfit of the points the registration was refined on (matched grain
        centroids, or fiducials), µm.
    n_points : int
        How many points (grains or fiducials) it rests on.
    method : str
        ``"fiducials"``, ``"grain structure"``, ``"none"`` or any label of the
        caller's (e.g. ``"given"``).
    """

    shift_x_um: float
    shift_y_um: float
    rotation_deg: float
    residual_um: float
    n_points: int
    method: str

    @property
    def shift_sigma_um(self) -> float:
        """σ of the shift from the spread of the points: ``residual / √n``."""
        return self.residual_um / math.sqrt(max(self.n_points, 1))

    def apply(self, xy_um) -> np.ndarray:
        """Deeper-map positions (..., 2) to surface-map positions, µm.

        Examples
        --------
        >>> Registration(2.0, -1.0, 90.0, 0.0, 0, "given").apply([1.0, 0.0]).round(6).tolist()
        [2.0, 0.0]
        """
        xy = np.asarray(xy_um, dtype=float)
        c, s = math.cos(math.radians(self.rotation_deg)), math.sin(math.radians(self.rotation_deg))
        rot = np.array([[c, -s], [s, c]])
        return xy @ rot.T + np.array([self.shift_x_um, self.shift_y_um])


_GRIDS = ("square", "hexagonal")


def _row_pitch_um(step_um, grid):
    """Distance between map rows (§1): the step, or step·√3/2 on a hexagonal grid."""
    check_one_of(grid, "grid", _GRIDS)
    return step_um * (math.sqrt(3.0) / 2.0 if grid == "hexagonal" else 1.0)


def _grain_table(grains):
    return grains.grains


def _shift_labels(labels, shift_px, shape):
    """Deeper labels placed on the surface grid (nearest pixel); 0 where not covered."""
    di, dj = int(round(shift_px[0])), int(round(shift_px[1]))
    out = np.zeros(shape, dtype=labels.dtype)
    h, w = labels.shape
    rows = slice(max(0, di), min(shape[0], h + di))
    cols = slice(max(0, dj), min(shape[1], w + dj))
    src_rows = slice(rows.start - di, rows.stop - di)
    src_cols = slice(cols.start - dj, cols.stop - dj)
    if rows.stop > rows.start and cols.stop > cols.start:
        out[rows, cols] = labels[src_rows, src_cols]
    return out


def _disorientation_deg(qa, qb, phase):
    """Disorientation of one phase; ``phase`` is a Laue symbol or a Phase record."""
    if isinstance(phase, str):
        return disorientation_angle_deg(qa, qb, phase)
    return disorientation_angle_deg(qa, qb, phase.laue, setting=phase.setting)


def match_grains(
    surface_grains,
    deeper_grains,
    registration: Registration,
    *,
    step_um: float,
    laue_by_phase: Mapping,
    threshold_deg: float = 5.0,
    min_overlap: float = 0.2,
    grid: str = "square",
) -> dict:
    """Pair each grain of a deeper map with a grain of the surface map (§8).

    A pair must share its phase, be disoriented by less than ``threshold_deg`` and
    overlap: after registration, at least ``min_overlap`` of the deeper grain's
    pixels fall on the surface grain. Each deeper grain takes the surface grain it
    overlaps most among those that qualify; grains without one are left out.

    Parameters
    ----------
    surface_grains, deeper_grains : GrainMap
        Label images ``labels`` (H, W) and grain tables (``grain_id``, ``phase``,
        ``quat`` (G, 4), ``area_px``).
    registration : Registration
        Placement of the deeper map on the surface map (a translation; its rotation
        is ignored here, as it is small).
    step_um : float
        Map step, µm (square grid).
    laue_by_phase : mapping of int to str or Phase
        Laue class of each phase id, or the job's ``Phase`` records (whose lattice
        setting is then used too).
    threshold_deg : float, optional
        Largest disorientation of one grain seen on both sections, degrees.
    min_overlap : float, optional
        Least fraction of the deeper grain's pixels on the surface grain.
    grid : {"square", "hexagonal"}, optional
        The maps' grid (§1); a hexagonal map is moved by whole rows and columns, so a
        shift of an odd number of rows is placed to half a step.

    Returns
    -------
    dict of 1-D arrays
        ``surface_grain, deeper_grain, disorientation_deg, overlap_fraction``.

    Examples
    --------
    >>> from inclination.grains import GrainMap
    >>> def grains(edge):  # grain 1 left of column `edge`, grain 2 right of it, 1 µm step
    ...     labels = np.repeat(np.where(np.arange(20) < edge, 1, 2)[None, :], 20, 0)
    ...     table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...              "quat": np.array([[1.0, 0, 0, 0], [0.939693, 0, 0, 0.34202]]),
    ...              "area_px": np.array([20 * edge, 20 * (20 - edge)]),
    ...              "centroid_x_um": np.array([(edge - 1) / 2, (edge + 19) / 2]),
    ...              "centroid_y_um": np.array([9.5, 9.5]), "touches_edge": np.array([1, 1])}
    ...     return GrainMap(labels.astype(np.int32), table, {}, 5.0, 4)
    >>> pairs = match_grains(grains(10), grains(12), Registration(0, 0, 0, 0, 0, "given"),
    ...                      step_um=1.0, laue_by_phase={1: "m-3m"})
    >>> pairs["surface_grain"].tolist(), pairs["overlap_fraction"].round(3).tolist()
    ([1, 2], [0.833, 1.0])
    """
    check_positive(step_um, "step_um")
    check_positive(threshold_deg, "threshold_deg")
    s_labels = np.asarray(surface_grains.labels)
    d_labels = np.asarray(deeper_grains.labels)
    row_um = _row_pitch_um(step_um, grid)
    shift_px = (registration.shift_y_um / row_um, registration.shift_x_um / step_um)
    placed = _shift_labels(d_labels, shift_px, s_labels.shape)
    both = (placed > 0) & (s_labels > 0)
    s_tab, d_tab = _grain_table(surface_grains), _grain_table(deeper_grains)
    s_ids, d_ids = np.asarray(s_tab["grain_id"]), np.asarray(d_tab["grain_id"])
    empty = {
        "surface_grain": np.zeros(0, np.int64),
        "deeper_grain": np.zeros(0, np.int64),
        "disorientation_deg": np.zeros(0),
        "overlap_fraction": np.zeros(0),
    }
    if not both.any():
        return empty
    code = placed[both].astype(np.int64) * (int(s_labels.max()) + 1) + s_labels[both]
    pairs, counts = np.unique(code, return_counts=True)
    pair_d = pairs // (int(s_labels.max()) + 1)
    pair_s = pairs % (int(s_labels.max()) + 1)
    d_row = np.searchsorted(d_ids, pair_d)
    s_row = np.searchsorted(s_ids, pair_s)
    d_area = np.bincount(placed[placed > 0], minlength=int(d_ids.max()) + 1)[pair_d]
    fraction = counts / np.maximum(d_area, 1)
    s_phase = np.asarray(s_tab["phase"])[s_row]
    d_phase = np.asarray(d_tab["phase"])[d_row]
    ok = (s_phase == d_phase) & (fraction >= min_overlap)
    angle = np.full(len(pairs), np.inf)
    s_quat, d_quat = np.asarray(s_tab["quat"], float), np.asarray(d_tab["quat"], float)
    for phase_id in np.unique(s_phase[ok]):
        sel = ok & (s_phase == phase_id)
        angle[sel] = _disorientation_deg(
            s_quat[s_row[sel]], d_quat[d_row[sel]], laue_by_phase[int(phase_id)]
        )
    ok &= angle < threshold_deg
    if not ok.any():
        return empty
    pair_d, pair_s, fraction, angle = pair_d[ok], pair_s[ok], fraction[ok], angle[ok]
    # Best surface grain per deeper grain: sort by (deeper id, -fraction), keep first.
    order = np.lexsort((-fraction, pair_d))
    first = np.ones(len(order), bool)
    first[1:] = pair_d[order][1:] != pair_d[order][:-1]
    pick = order[first]
    return {
        "surface_grain": pair_s[pick].astype(np.int64),
        "deeper_grain": pair_d[pick].astype(np.int64),
        "disorientation_deg": angle[pick],
        "overlap_fraction": fraction[pick],
    }


def _fit_rigid(src, dst, weights, fit_rotation):
    """Weighted least-squares ``dst ≈ R src + t`` in 2D (Kabsch); returns θ rad, t, residuals."""
    w = weights / weights.sum()
    cs, cd = w @ src, w @ dst
    theta = 0.0
    if fit_rotation and len(src) >= 2:
        a, b = src - cs, dst - cd
        num = np.sum(w * (a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]))
        den = np.sum(w * (a[:, 0] * b[:, 0] + a[:, 1] * b[:, 1]))
        theta = math.atan2(num, den)
    c, s = math.cos(theta), math.sin(theta)
    rot = np.array([[c, -s], [s, c]])
    t = cd - rot @ cs
    resid = dst - (src @ rot.T + t)
    return theta, t, resid


def _orientation_votes(s_tab, d_tab, laue_by_phase, threshold_deg, max_grains):
    """Centroid offsets (surface − deeper) of every pair of like-oriented grains, and weights."""
    votes, weights = [], []
    for phase_id in np.unique(np.asarray(s_tab["phase"])):
        if int(phase_id) not in laue_by_phase:
            continue
        rows = []
        for tab in (s_tab, d_tab):
            sel = np.flatnonzero(np.asarray(tab["phase"]) == phase_id)
            # The largest grains carry the registration; small ones only add false pairs.
            sel = sel[np.argsort(-np.asarray(tab["area_px"])[sel], kind="stable")][:max_grains]
            rows.append(sel)
        si, di = rows
        if len(si) == 0 or len(di) == 0:
            continue
        qs = np.asarray(s_tab["quat"], float)[si]
        qd = np.asarray(d_tab["quat"], float)[di]
        angle = _disorientation_deg(qs[:, None, :], qd[None, :, :], laue_by_phase[int(phase_id)])
        a, b = np.nonzero(angle < threshold_deg)
        cs = np.stack([s_tab["centroid_x_um"], s_tab["centroid_y_um"]], -1)[si[a]]
        cd = np.stack([d_tab["centroid_x_um"], d_tab["centroid_y_um"]], -1)[di[b]]
        votes.append(cs - cd)
        area = np.minimum(np.asarray(s_tab["area_px"])[si[a]], np.asarray(d_tab["area_px"])[di[b]])
        weights.append(np.sqrt(area.astype(float)))
    if not votes:
        return np.zeros((0, 2)), np.zeros(0)
    return np.concatenate(votes), np.concatenate(weights)


def _densest_vote(votes, weights, radius):
    """Votes in the heaviest cluster, from a weighted histogram (memory O(area)).

    Cells are half the vote radius; the heaviest 5 × 5 block of cells (about a disc of
    the radius) holds the cluster. Returns a mask of its votes (never empty).
    """
    cell = radius / 2.0
    lo = votes.min(axis=0)
    idx = np.floor((votes - lo) / cell).astype(np.int64)
    hist = np.zeros(tuple(idx.max(axis=0) + 1))
    np.add.at(hist, (idx[:, 0], idx[:, 1]), weights)
    support = uniform_filter(hist, size=5, mode="constant")
    best = np.array(np.unravel_index(int(np.argmax(support)), support.shape))
    return np.all(np.abs(idx - best) <= 2, axis=1)


def _agreement(s_labels, placed_mapped, di, dj):
    """Fraction of the common area where the shifted, relabelled deeper map agrees."""
    shifted = _shift_labels(placed_mapped, (di, dj), s_labels.shape)
    both = (shifted > 0) & (s_labels > 0)
    n = both.sum()
    return float(np.sum(shifted[both] == s_labels[both]) / n) if n else 0.0


def _parabola_peak(f_minus, f_0, f_plus):
    """Sub-pixel offset of the peak of a parabola through three samples (in [-0.5, 0.5])."""
    den = f_minus - 2.0 * f_0 + f_plus
    if den >= 0:
        return 0.0
    return float(np.clip(0.5 * (f_minus - f_plus) / den, -0.5, 0.5))


def register_sections(
    surface_grains,
    deeper_grains,
    *,
    step_um: float,
    laue_by_phase: Mapping,
    fiducials_um=None,
    fit_rotation: bool = False,
    threshold_deg: float = 5.0,
    vote_radius_um: float | None = None,
    max_grains: int = 400,
    grid: str = "square",
) -> Registration:
    """Place a deeper map on the surface map from the grain structure itself (§8).

    Without fiducials the grains themselves are the landmarks:

    1. every pair of like-oriented grains (disorientation below ``threshold_deg``,
       one in each map) votes for the offset of their centroids; the densest cluster
       of votes (within ``vote_radius_um``) is the coarse shift, since a grain found
       on both sections votes for the true shift and chance look-alikes scatter;
    2. grains are matched at that shift (:func:`match_grains`) and the deeper map,
       relabelled with the matched surface grains, is moved pixel by pixel near it to
       where the two maps agree on the largest fraction of their common area, with a
       parabola through the peak for the sub-pixel part. Each boundary that moved
       with depth costs agreement in proportion to its movement, so the peak sits at
       a median of the movements — robust to the few boundaries that move far;
    3. the registration residual is the RMS of the matched grains' centroid offsets
       after registration (grain centroids move with depth as their inclined faces
       do, so this is a spread, not an error of the shift).

    With ``fit_rotation`` a small rotation about the map centre is fitted on the
    centroids. With fiducials — the same points located on both maps — the rigid
    fit through them is used and its RMS residual reported.

    Parameters
    ----------
    surface_grains, deeper_grains : GrainMap
        Label images ``labels`` (H, W) and grain tables with ``grain_id``, ``phase``,
        ``quat``, ``area_px``, ``centroid_x_um``, ``centroid_y_um``, ``touches_edge``.
    step_um : float
        Map step, µm (square grid; both maps alike).
    laue_by_phase : mapping of int to str or Phase
        Laue class of each phase id, or the job's ``Phase`` records.
    fiducials_um : array_like, shape (K, 2, 2), optional
        K fiducial points, each ``[[x, y] on the surface map, [x, y] on the deeper
        map]`` in S, µm.
    fit_rotation : bool, optional
        Also fit a rotation about Z_S.
    threshold_deg : float, optional
        Disorientation limit for one grain seen on both maps.
    vote_radius_um : float, optional
        Radius of a cluster of votes; default 6 steps.
    max_grains : int, optional
        Largest grains per phase and map that vote.
    grid : {"square", "hexagonal"}, optional
        The maps' grid (§1).

    Returns
    -------
    Registration
        ``method`` is ``"fiducials"``, ``"grain structure"``, or ``"none"`` (no grain
        found on both maps: zero shift, NaN residual).

    Examples
    --------
    >>> from inclination.grains import GrainMap
    >>> def grains(edge):  # grain 1 left of column `edge`, grain 2 right of it, 1 µm step
    ...     labels = np.repeat(np.where(np.arange(20) < edge, 1, 2)[None, :], 20, 0)
    ...     table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...              "quat": np.array([[1.0, 0, 0, 0], [0.939693, 0, 0, 0.34202]]),
    ...              "area_px": np.array([20 * edge, 20 * (20 - edge)]),
    ...              "centroid_x_um": np.array([(edge - 1) / 2, (edge + 19) / 2]),
    ...              "centroid_y_um": np.array([9.5, 9.5]), "touches_edge": np.array([1, 1])}
    ...     return GrainMap(labels.astype(np.int32), table, {}, 5.0, 4)
    >>> surface = grains(10)
    >>> marks = [[[12.0, 5.0], [10.0, 5.0]], [[32.0, 9.0], [30.0, 9.0]]]  # surface, deeper
    >>> reg = register_sections(surface, surface, step_um=1.0, laue_by_phase={1: "m-3m"},
    ...                         fiducials_um=marks)
    >>> reg.method, round(reg.shift_x_um, 6), round(reg.shift_y_um, 6), reg.residual_um
    ('fiducials', 2.0, 0.0, 0.0)
    """
    check_positive(step_um, "step_um")
    if fiducials_um is not None:
        fid = as_float_array(fiducials_um, "fiducials_um")
        if fid.ndim != 3 or fid.shape[1:] != (2, 2) or len(fid) == 0:
            raise ValueError(f"Expected `fiducials_um` to have shape (K, 2, 2), got {fid.shape}.")
        check_finite(fid.reshape(-1, 2), "fiducials_um")
        theta, t, resid = _fit_rigid(fid[:, 1], fid[:, 0], np.ones(len(fid)), fit_rotation)
        rms = float(np.sqrt(np.mean(np.sum(resid**2, axis=1))))
        return Registration(
            float(t[0]), float(t[1]), math.degrees(theta), rms, len(fid), "fiducials"
        )

    radius = 6.0 * step_um if vote_radius_um is None else float(vote_radius_um)
    check_positive(radius, "vote_radius_um")
    s_tab, d_tab = _grain_table(surface_grains), _grain_table(deeper_grains)
    votes, weights = _orientation_votes(s_tab, d_tab, laue_by_phase, threshold_deg, max_grains)
    if len(votes) == 0:
        return Registration(0.0, 0.0, 0.0, float("nan"), 0, "none")
    coarse = np.median(votes[_densest_vote(votes, weights, radius)], axis=0)

    s_labels = np.asarray(surface_grains.labels)
    d_labels = np.asarray(deeper_grains.labels)
    pairs = match_grains(
        surface_grains,
        deeper_grains,
        Registration(float(coarse[0]), float(coarse[1]), 0.0, 0.0, 0, "coarse"),
        step_um=step_um,
        laue_by_phase=laue_by_phase,
        threshold_deg=threshold_deg,
        grid=grid,
    )
    if len(pairs["deeper_grain"]) == 0:
        return Registration(
            float(coarse[0]), float(coarse[1]), 0.0, float("nan"), 0, "grain structure"
        )
    relabel = np.zeros(int(d_labels.max()) + 1, dtype=s_labels.dtype)
    relabel[pairs["deeper_grain"]] = pairs["surface_grain"]
    mapped = relabel[d_labels]
    row_um = _row_pitch_um(step_um, grid)
    i0, j0 = int(round(coarse[1] / row_um)), int(round(coarse[0] / step_um))
    reach = int(math.ceil(radius / row_um)) + 1
    offsets = range(-reach, reach + 1)
    score = np.array(
        [[_agreement(s_labels, mapped, i0 + di, j0 + dj) for dj in offsets] for di in offsets]
    )
    bi, bj = np.unravel_index(int(np.argmax(score)), score.shape)
    sub_i = (
        _parabola_peak(score[bi - 1, bj], score[bi, bj], score[bi + 1, bj])
        if (0 < bi < score.shape[0] - 1)
        else 0.0
    )
    sub_j = (
        _parabola_peak(score[bi, bj - 1], score[bi, bj], score[bi, bj + 1])
        if (0 < bj < score.shape[1] - 1)
        else 0.0
    )
    shift = np.array([(j0 + bj - reach + sub_j) * step_um, (i0 + bi - reach + sub_i) * row_um])

    s_row = np.searchsorted(np.asarray(s_tab["grain_id"]), pairs["surface_grain"])
    d_row = np.searchsorted(np.asarray(d_tab["grain_id"]), pairs["deeper_grain"])
    interior = ~(
        np.asarray(s_tab["touches_edge"], bool)[s_row]
        | np.asarray(d_tab["touches_edge"], bool)[d_row]
    )
    if interior.sum() < 3:
        interior = np.ones(len(s_row), bool)
    src = np.stack([d_tab["centroid_x_um"], d_tab["centroid_y_um"]], -1)[d_row[interior]]
    dst = np.stack([s_tab["centroid_x_um"], s_tab["centroid_y_um"]], -1)[s_row[interior]]
    w = np.asarray(d_tab["area_px"], float)[d_row[interior]]
    theta = 0.0
    if fit_rotation and len(src) >= 3:
        theta, _, _ = _fit_rigid(src, dst, w, True)
        # The translation found at the map centre stays; the turn is about that centre.
        centre_um = _map_centre_um(deeper_grains, step_um, row_um)
        c, s = math.cos(theta), math.sin(theta)
        shift = shift + centre_um - np.array([[c, -s], [s, c]]) @ centre_um
    c, s = math.cos(theta), math.sin(theta)
    resid = dst - (src @ np.array([[c, -s], [s, c]]).T + shift)
    rms = float(np.sqrt(np.sum(w * np.sum(resid**2, axis=1)) / np.sum(w)))
    return Registration(
        float(shift[0]),
        float(shift[1]),
        math.degrees(theta),
        rms,
        int(interior.sum()),
        "grain structure",
    )


def _map_centre_um(grains, step_um, row_um):
    h, w = np.asarray(grains.labels).shape
    return np.array([(w - 1) * step_um / 2.0, (h - 1) * row_um / 2.0])


@dataclass(frozen=True)
class SerialSection:
    """Result of :func:`measure_serial_section`.

    Attributes
    ----------
    boundaries : dict of 1-D arrays
        One row per surface segment (see :func:`measure_serial_section`).
    registration : Registration
        Placement of the deeper map on the surface map.
    grain_pairs : dict of 1-D arrays
        The grain matching (``surface_grain, deeper_grain, disorientation_deg,
        overlap_fraction``).
    depth_um, depth_sigma_um : float
        Layer thickness and its σ.
    """

    boundaries: dict
    registration: Registration
    grain_pairs: dict
    depth_um: float
    depth_sigma_um: float


def _take_or(values, index, fill):
    """``values[index]`` where index >= 0, else ``fill`` (works for empty ``values``)."""
    out = np.full(len(index), fill, dtype=np.asarray(values).dtype if len(values) else int)
    ok = index >= 0
    out[ok] = np.asarray(values)[index[ok]]
    return out


def _segment_arrays(segments):
    keep = np.ones(len(np.asarray(segments["segment_id"])), bool)
    if "too_short" in segments:
        keep &= ~np.asarray(segments["too_short"], bool)
    a = np.stack([segments["x0_um"], segments["y0_um"]], -1).astype(float)
    b = np.stack([segments["x1_um"], segments["y1_um"]], -1).astype(float)
    ga = np.asarray(segments["grain_a"], np.int64)
    gb = np.asarray(segments["grain_b"], np.int64)
    return keep, a, b, ga, gb


def _line_sigma_um(segments, step_um):
    """σ of a fitted line's perpendicular position at its middle, µm."""
    n = len(np.asarray(segments["segment_id"]))
    floor = step_um / math.sqrt(12.0)  # a pixel-staircase boundary
    resid = np.asarray(segments.get("residual_um", np.full(n, floor)), float)
    if "n_edges" in segments:
        count = np.asarray(segments["n_edges"], float)
    else:
        count = np.asarray(segments["length_um"], float) / step_um
    return np.maximum(resid, floor) / np.sqrt(np.maximum(count, 2.0))


def _check_depth(depth_um, depth_sigma_um, path, pointer):
    if not (np.isfinite(depth_um) and depth_um > 0):
        raise InputError(
            f"Expected `depth_um` to be a finite number > 0, got {depth_um!r}.",
            path=path,
            pointer=f"{pointer}/depth_um",
        )
    if not (np.isfinite(depth_sigma_um) and depth_sigma_um >= 0):
        raise InputError(
            f"Expected `depth_sigma_um` to be a finite number >= 0, got {depth_sigma_um!r}.",
            path=path,
            pointer=f"{pointer}/depth_sigma_um",
        )


def _check_phase_sets(surface_grains, deeper_grains, laue_by_phase, path, pointer):
    s_phases = set(np.unique(np.asarray(_grain_table(surface_grains)["phase"])).tolist())
    d_phases = set(np.unique(np.asarray(_grain_table(deeper_grains)["phase"])).tolist())
    known = {int(k) for k in laue_by_phase}
    unknown = sorted(d_phases - known)
    if unknown or not (d_phases & s_phases):
        raise InputError(
            f"Expected the serial-section map to hold the phases of the surface map "
            f"{sorted(s_phases)}, got phases {sorted(d_phases)}.",
            path=path,
            pointer=f"{pointer}/map",
        )


def _match_serial(
    surface_segments,
    deeper_segments,
    grain_pairs,
    registration,
    *,
    depth_um,
    step_um,
    max_angle_deg,
    max_offset_um,
):
    """Match segments by grain pair and proximity; offsets and registered deeper lines."""
    keep_s, a_s, b_s, ga_s, gb_s = _segment_arrays(surface_segments)
    keep_d, a_d, b_d, ga_d, gb_d = _segment_arrays(deeper_segments)
    n_s = len(a_s)
    a_d, b_d = registration.apply(a_d), registration.apply(b_d)
    top = int(max(ga_d.max(initial=0), gb_d.max(initial=0))) + 1
    to_surface = np.full(top, -1, np.int64)
    sel = grain_pairs["deeper_grain"] < top
    to_surface[grain_pairs["deeper_grain"][sel]] = grain_pairs["surface_grain"][sel]
    ma, mb = to_surface[ga_d], to_surface[gb_d]
    valid_d = keep_d & (ma >= 0) & (mb >= 0) & (ma != mb)
    lo, hi = np.minimum(ma, mb), np.maximum(ma, mb)
    by_pair: dict = {}
    for j in np.flatnonzero(valid_d):
        by_pair.setdefault((int(lo[j]), int(hi[j])), []).append(j)

    match = np.full(n_s, -1, np.int64)
    offset = np.full(n_s, np.nan)
    t_mean = np.full((n_s, 2), np.nan)
    ambiguous = np.zeros(n_s, bool)
    cos_max = math.cos(math.radians(max_angle_deg))
    for i in np.flatnonzero(keep_s):
        key = (int(min(ga_s[i], gb_s[i])), int(max(ga_s[i], gb_s[i])))
        cand = by_pair.get(key)
        if not cand:
            continue
        cand = np.asarray(cand)
        len_i = float(np.hypot(*(b_s[i] - a_s[i])))
        if len_i <= 0:
            continue
        t_i = (b_s[i] - a_s[i]) / len_i
        u_i = np.array([-t_i[1], t_i[0]])
        d_vec = b_d[cand] - a_d[cand]
        len_j = np.hypot(d_vec[:, 0], d_vec[:, 1])
        t_j = d_vec / np.maximum(len_j, 1e-12)[:, None]
        flip = t_j @ t_i < 0
        t_j[flip] *= -1.0
        cos_ij = t_j @ t_i
        p0 = (a_d[cand] - a_s[i]) @ t_i
        p1 = (b_d[cand] - a_s[i]) @ t_i
        start = np.maximum(0.0, np.minimum(p0, p1))
        stop = np.minimum(len_i, np.maximum(p0, p1))
        overlap = stop - start
        mid = 0.5 * (start + stop)
        lam = (mid - p0) / np.maximum(cos_ij, 1e-12)
        q = a_d[cand] + lam[:, None] * t_j
        delta = (q - a_s[i]) @ u_i
        ok = (cos_ij >= cos_max) & (overlap >= step_um) & (np.abs(delta) <= max_offset_um)
        if not ok.any():
            continue
        order = np.argsort(-np.where(ok, overlap, -np.inf))
        best = order[0]
        if ok.sum() > 1:
            second = order[1]
            # Collinear pieces of one boundary are one answer; two offsets are two.
            ambiguous[i] = (overlap[second] >= 0.5 * overlap[best]) and (
                abs(delta[second] - delta[best]) > 2.0 * step_um
            )
        match[i] = cand[best]
        offset[i] = delta[best]
        t_sum = len_i * t_i + len_j[best] * t_j[best]
        t_mean[i] = t_sum / np.hypot(*t_sum)
    return match, offset, t_mean, ambiguous, keep_s, (a_d, b_d)


def measure_serial_section(
    surface_segments: Mapping,
    surface_grains,
    deeper_segments: Mapping,
    deeper_grains,
    *,
    depth_um: float,
    depth_sigma_um: float,
    step_um: float,
    laue_by_phase: Mapping,
    registration: Registration | None = None,
    fiducials_um=None,
    fit_rotation: bool = False,
    threshold_deg: float = 5.0,
    max_angle_deg: float = 15.0,
    max_offset_um: float | None = None,
    max_sigma_deg: float = 10.0,
    grid: str = "square",
    path=None,
    pointer: str = "",
) -> SerialSection:
    """Measured planes from the shift of each trace between two sections (§8).

    The deeper map is registered on the surface map (:func:`register_sections`,
    unless ``registration`` is given), its grains matched by orientation and overlap
    (:func:`match_grains`) and each surface segment paired with a deeper segment of
    the same grain pair that runs within ``max_angle_deg`` of it, overlaps it along
    its length and lies within ``max_offset_um``. Its perpendicular offset Δ, signed
    along u = Z_S × t, gives ``tan δ = h / |Δ|``, the dip direction ``sign(Δ)·u`` and
    the normal ``n ∝ t × (Δ·u + h·Z_S)``. σ_Δ combines the two line fits and the
    registration; σ_δ = √((Δσ_h)² + (hσ_Δ)²) / (h² + Δ²) (first order).

    Parameters
    ----------
    surface_segments, deeper_segments : mapping
        Segments tables (S) of the two maps (``segment_id, grain_a, grain_b, x0_um,
        y0_um, x1_um, y1_um, length_um, trace_sigma_deg``, optionally
        ``residual_um, n_edges, too_short``).
    surface_grains, deeper_grains : GrainMap
        The grain maps the segments came from.
    depth_um, depth_sigma_um : float
        Layer thickness h between the sections and its σ, µm.
    step_um : float
        Map step, µm.
    laue_by_phase : mapping of int to str or Phase
        Laue class of every phase id of the job.
    registration : Registration, optional
        A known placement of the deeper map; skips the estimate.
    fiducials_um : array_like, shape (K, 2, 2), optional
        Fiducial pairs in S for :func:`register_sections`.
    fit_rotation, threshold_deg : optional
        Passed to :func:`register_sections` and :func:`match_grains`.
    max_angle_deg : float, optional
        Largest angle between the two traces of one boundary, degrees.
    max_offset_um : float, optional
        Largest offset; default ``h / tan 5° + 2 steps`` (dips down to 5°).
    max_sigma_deg : float, optional
        Dip σ above which a boundary is ``ill_conditioned``; a warning says how many.
    grid : {"square", "hexagonal"}, optional
        The maps' grid (§1).
    path, pointer : optional
        Job file and JSON pointer of the section entry, for error messages.

    Returns
    -------
    SerialSection
        ``boundaries`` has one row per surface segment: ``segment_id,
        deeper_segment_id`` (-1 if none), ``offset_um`` (|Δ|), ``offset_sigma_um,
        normal_x, normal_y, normal_z`` (S, n_z >= 0), ``measured_dip_deg,
        measured_dip_sigma_deg, dip_direction_azimuth_deg`` (S), ``dip_direction_sigma_deg,
        dip_source`` (``serial-section``), ``status`` (one of ``CROSS_SECTION_STATUSES``).

    Warns
    -----
    UserWarning
        When a matched boundary's dip σ exceeds ``max_sigma_deg`` (layer too thin).

    Examples
    --------
    A boundary that moves 2 µm toward +X when 2 µm are removed dips 45° toward +X:

    >>> from inclination.grains import GrainMap
    >>> def grains(edge):  # grain 1 left of column `edge`, grain 2 right of it, 1 µm step
    ...     labels = np.repeat(np.where(np.arange(20) < edge, 1, 2)[None, :], 20, 0)
    ...     table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...              "quat": np.array([[1.0, 0, 0, 0], [0.939693, 0, 0, 0.34202]]),
    ...              "area_px": np.array([20 * edge, 20 * (20 - edge)]),
    ...              "centroid_x_um": np.array([(edge - 1) / 2, (edge + 19) / 2]),
    ...              "centroid_y_um": np.array([9.5, 9.5]), "touches_edge": np.array([1, 1])}
    ...     return GrainMap(labels.astype(np.int32), table, {}, 5.0, 4)
    >>> def trace(x):  # the boundary's trace at x, along +Y
    ...     one = lambda v: np.array([v])
    ...     return {"segment_id": one(0), "grain_a": one(1), "grain_b": one(2),
    ...             "x0_um": one(x), "y0_um": one(0.0), "x1_um": one(x), "y1_um": one(19.0),
    ...             "length_um": one(19.0), "trace_angle_deg": one(90.0),
    ...             "trace_sigma_deg": one(0.5)}
    >>> out = measure_serial_section(trace(9.5), grains(10), trace(11.5), grains(12),
    ...     depth_um=2.0, depth_sigma_um=0.1, step_um=1.0, laue_by_phase={1: "m-3m"},
    ...     registration=Registration(0.0, 0.0, 0.0, 0.0, 1, "given")).boundaries
    >>> out["status"].tolist(), out["measured_dip_deg"].round(6).tolist()
    (['measured'], [45.0])
    >>> out["dip_direction_azimuth_deg"].round(6).tolist(), out["offset_um"].round(6).tolist()
    ([0.0], [2.0])
    """
    _check_depth(depth_um, depth_sigma_um, path, pointer)
    check_positive(step_um, "step_um")
    _check_phase_sets(surface_grains, deeper_grains, laue_by_phase, path, pointer)
    if registration is None:
        registration = register_sections(
            surface_grains,
            deeper_grains,
            step_um=step_um,
            laue_by_phase=laue_by_phase,
            fiducials_um=fiducials_um,
            fit_rotation=fit_rotation,
            threshold_deg=threshold_deg,
            grid=grid,
        )
    if max_offset_um is None:
        max_offset_um = depth_um / math.tan(math.radians(5.0)) + 2.0 * step_um
    grain_pairs = match_grains(
        surface_grains,
        deeper_grains,
        registration,
        step_um=step_um,
        laue_by_phase=laue_by_phase,
        threshold_deg=threshold_deg,
        grid=grid,
    )
    match, delta, t_mean, ambiguous, keep, _ = _match_serial(
        surface_segments,
        deeper_segments,
        grain_pairs,
        registration,
        depth_um=depth_um,
        step_um=step_um,
        max_angle_deg=max_angle_deg,
        max_offset_um=max_offset_um,
    )
    n = len(match)
    seg_id = np.asarray(surface_segments["segment_id"])
    deeper_id = np.asarray(deeper_segments["segment_id"])
    found = match >= 0
    sigma_line_s = _line_sigma_um(surface_segments, step_um)
    sigma_line_d = _line_sigma_um(deeper_segments, step_um)
    sigma_reg = registration.shift_sigma_um
    if registration.method == "grain structure" and found.sum() >= 2:
        # A registration on the grain structure rests on the boundaries themselves, and
        # each has moved with depth: its error is of the order of a median of N such
        # movements, √(π/2)·RMS(Δ)/√N, which the centroid spread can understate.
        spread = math.sqrt(math.pi / 2) * float(np.sqrt(np.mean(delta[found] ** 2)))
        sigma_reg = max(sigma_reg, spread / math.sqrt(found.sum()))
    offset_sigma = np.full(n, np.nan)
    offset_sigma[found] = np.sqrt(
        sigma_line_s[found] ** 2 + sigma_line_d[match[found]] ** 2 + sigma_reg**2
    )
    t3 = np.concatenate([t_mean, np.zeros((n, 1))], axis=1)
    u3 = np.cross(_Z, t3)
    normal = np.cross(t3, delta[:, None] * u3 + depth_um * _Z)
    normal_out = np.full((n, 3), np.nan)
    dip = np.full(n, np.nan)
    azimuth = np.full(n, np.nan)
    if found.any():
        normal_out[found], dip[found], azimuth[found] = _planes_from_normals(normal[found])
    dip_sigma = serial_dip_sigma_deg(depth_um, np.abs(delta), depth_sigma_um, offset_sigma)
    trace_sigma_s = np.asarray(surface_segments["trace_sigma_deg"], float)
    trace_sigma_d = np.asarray(deeper_segments["trace_sigma_deg"], float)
    az_sigma = np.full(n, np.nan)
    az_sigma[found] = np.hypot(trace_sigma_s[found], trace_sigma_d[match[found]]) / 2.0

    status = np.full(n, "unmatched", dtype=object)
    status[found] = np.where(dip_sigma[found] > max_sigma_deg, "ill_conditioned", "measured")
    status[found & ambiguous] = "ambiguous"
    n_thin = int(np.sum(found & (dip_sigma > max_sigma_deg)))
    if n_thin:
        warnings.warn(
            f"{n_thin} of {int(found.sum())} matched boundaries have a dip σ above "
            f"{max_sigma_deg:g}°: a layer of {depth_um:g} µm is too thin for a useful dip "
            "on them.",
            stacklevel=2,
        )
    boundaries = {
        "segment_id": seg_id,
        "deeper_segment_id": _take_or(deeper_id, match, -1).astype(np.int64),
        "offset_um": np.abs(delta),
        "offset_sigma_um": offset_sigma,
        "normal_x": normal_out[:, 0],
        "normal_y": normal_out[:, 1],
        "normal_z": normal_out[:, 2],
        "measured_dip_deg": dip,
        "measured_dip_sigma_deg": np.where(found, dip_sigma, np.nan),
        "dip_direction_azimuth_deg": azimuth,
        "dip_direction_sigma_deg": az_sigma,
        "dip_source": np.where(found, "serial-section", "").astype(object),
        "status": status.astype(str),
    }
    return SerialSection(
        boundaries, registration, grain_pairs, float(depth_um), float(depth_sigma_um)
    )


# --------------------------------------------------------------------------- stacks


@dataclass(frozen=True)
class PlaneFit:
    """A least-squares plane through traces at several depths.

    Attributes
    ----------
    normal_sample : tuple of 3 floats
        Unit normal in S, n_z >= 0.
    dip_deg, dip_direction_azimuth_deg : float
        Dip and dip-direction azimuth (S, [0, 360)), §5.
    residual_um : float
        RMS distance of the trace end points from the plane, µm.
    normal_sigma_deg : float
        First-order σ of the normal's direction: the point scatter (from the residual,
        or ``position_sigma_um`` if larger) over the plane's extent along its
        narrower in-plane direction, degrees.
    """

    normal_sample: tuple[float, float, float]
    dip_deg: float
    dip_direction_azimuth_deg: float
    residual_um: float
    normal_sigma_deg: float


def fit_plane_through_traces(
    x0_um, y0_um, x1_um, y1_um, depth_um, *, position_sigma_um: float = 0.0
) -> PlaneFit:
    """Total-least-squares plane through the traces of one boundary at several depths.

    Parameters
    ----------
    x0_um, y0_um, x1_um, y1_um : array_like, shape (K,)
        End points of the boundary's trace on each section, registered into the
        surface map's coordinates (S), µm.
    depth_um : array_like, shape (K,)
        Depth of each section below the surface, µm.
    position_sigma_um : float, optional
        Least σ of a trace's position (line fit and registration), µm.

    Returns
    -------
    PlaneFit

    Examples
    --------
    >>> # A plane dipping 45° toward +X: the trace moves by the depth.
    >>> fit = fit_plane_through_traces([0, 1, 2], [0, 0, 0], [0, 1, 2], [10, 10, 10],
    ...                                [0, 1, 2])
    >>> round(fit.dip_deg, 6), round(fit.dip_direction_azimuth_deg, 6), round(fit.residual_um, 6)
    (45.0, 0.0, 0.0)
    """
    cols = [
        as_float_array(v, name).ravel()
        for v, name in (
            (x0_um, "x0_um"),
            (y0_um, "y0_um"),
            (x1_um, "x1_um"),
            (y1_um, "y1_um"),
            (depth_um, "depth_um"),
        )
    ]
    k = len(cols[0])
    if any(len(c) != k for c in cols) or k < 2:
        raise ValueError(
            "Expected `x0_um`, `y0_um`, `x1_um`, `y1_um` and `depth_um` to be equal-length "
            f"arrays of at least 2 traces, got lengths {[len(c) for c in cols]}."
        )
    x0, y0, x1, y1, z = cols
    points = np.concatenate([np.stack([x0, y0, z], -1), np.stack([x1, y1, z], -1)], axis=0)
    check_finite(points, "traces")
    check_positive(position_sigma_um, "position_sigma_um", allow_zero=True)
    centred = points - points.mean(axis=0)
    _, sv, vt = np.linalg.svd(centred, full_matrices=False)
    normal, dip, azimuth = _planes_from_normals(vt[-1][None, :])
    residual = float(np.sqrt(np.mean((centred @ normal[0]) ** 2)))
    # A fitted plane's normal tilts by (point scatter) / (extent) about each in-plane
    # axis; the narrower extent (singular value sv[1]) sets the larger σ.
    scatter = max(float(sv[2]) / math.sqrt(max(len(points) - 3, 1)), float(position_sigma_um))
    sigma = math.degrees(scatter / sv[1]) if sv[1] > 0 else 90.0
    return PlaneFit(
        tuple(float(v) for v in normal[0]),
        float(dip[0]),
        float(azimuth[0]),
        residual,
        min(sigma, 90.0),
    )


def measure_stack(
    surface_segments: Mapping,
    surface_grains,
    deeper_sections: Sequence,
    *,
    depths_um,
    step_um: float,
    laue_by_phase: Mapping,
    registrations: Sequence | None = None,
    threshold_deg: float = 5.0,
    max_angle_deg: float = 15.0,
    grid: str = "square",
) -> dict:
    """Per boundary, a least-squares plane through its traces on every section of a stack.

    Each deeper section is registered on the surface map and matched to it as in
    :func:`measure_serial_section`; a surface segment found on at least one deeper
    section gets the plane of :func:`fit_plane_through_traces` through all its traces.

    Parameters
    ----------
    surface_segments : mapping
        Segments table of the surface map (S).
    surface_grains : GrainMap
    deeper_sections : sequence of (segments table, GrainMap)
        The deeper sections, in any order.
    depths_um : array_like, shape (K,)
        Depth of each deeper section below the surface, µm (> 0).
    step_um : float
    laue_by_phase : mapping of int to str or Phase
    registrations : sequence of Registration or None, optional
        Known placements of the deeper sections (None entries are estimated).
    threshold_deg, max_angle_deg, grid : optional
        As in :func:`measure_serial_section`.

    Returns
    -------
    dict of 1-D arrays, one row per surface segment
        ``segment_id, n_sections`` (traces used, surface included), ``normal_x,
        normal_y, normal_z`` (S), ``measured_dip_deg, measured_dip_sigma_deg`` (the
        normal's first-order σ, :class:`PlaneFit`), ``dip_direction_azimuth_deg,
        dip_direction_sigma_deg, fit_residual_um, dip_source`` (``serial-stack``),
        ``status`` (``measured``/``unmatched``).

    Examples
    --------
    >>> from inclination.grains import GrainMap
    >>> def grains(edge):  # grain 1 left of column `edge`, grain 2 right of it, 1 µm step
    ...     labels = np.repeat(np.where(np.arange(20) < edge, 1, 2)[None, :], 20, 0)
    ...     table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...              "quat": np.array([[1.0, 0, 0, 0], [0.939693, 0, 0, 0.34202]]),
    ...              "area_px": np.array([20 * edge, 20 * (20 - edge)]),
    ...              "centroid_x_um": np.array([(edge - 1) / 2, (edge + 19) / 2]),
    ...              "centroid_y_um": np.array([9.5, 9.5]), "touches_edge": np.array([1, 1])}
    ...     return GrainMap(labels.astype(np.int32), table, {}, 5.0, 4)
    >>> def trace(x):  # the boundary's trace at x, along +Y
    ...     one = lambda v: np.array([v])
    ...     return {"segment_id": one(0), "grain_a": one(1), "grain_b": one(2),
    ...             "x0_um": one(x), "y0_um": one(0.0), "x1_um": one(x), "y1_um": one(19.0),
    ...             "length_um": one(19.0), "trace_angle_deg": one(90.0),
    ...             "trace_sigma_deg": one(0.5)}
    >>> placed = Registration(0.0, 0.0, 0.0, 0.0, 1, "given")
    >>> out = measure_stack(trace(9.5), grains(10),
    ...     [(trace(11.5), grains(12)), (trace(13.5), grains(14))], depths_um=[2.0, 4.0],
    ...     step_um=1.0, laue_by_phase={1: "m-3m"}, registrations=[placed, placed])
    >>> out["n_sections"].tolist(), out["measured_dip_deg"].round(6).tolist()
    ([3], [45.0])
    """
    depths = as_float_array(depths_um, "depths_um").ravel()
    if len(depths) != len(deeper_sections):
        raise ValueError(
            f"Expected `depths_um` to have one depth per deeper section "
            f"({len(deeper_sections)}), got {len(depths)}."
        )
    for h in depths:
        _check_depth(float(h), 0.0, None, "")
    keep, a_s, b_s, _, _ = _segment_arrays(surface_segments)
    n = len(a_s)
    traces = [[(a_s[i], b_s[i], 0.0, 0.0)] for i in range(n)]
    if registrations is None:
        registrations = [None] * len(deeper_sections)
    elif len(registrations) != len(deeper_sections):
        raise ValueError(
            f"Expected `registrations` to have one entry per deeper section "
            f"({len(deeper_sections)}), got {len(registrations)}."
        )
    for (segs, grains), h, reg in zip(deeper_sections, depths, registrations, strict=True):
        _check_phase_sets(surface_grains, grains, laue_by_phase, None, "")
        if reg is None:
            reg = register_sections(
                surface_grains,
                grains,
                step_um=step_um,
                laue_by_phase=laue_by_phase,
                threshold_deg=threshold_deg,
                grid=grid,
            )
        pairs = match_grains(
            surface_grains,
            grains,
            reg,
            step_um=step_um,
            laue_by_phase=laue_by_phase,
            threshold_deg=threshold_deg,
            grid=grid,
        )
        max_offset = float(h) / math.tan(math.radians(5.0)) + 2.0 * step_um
        match, _, _, ambiguous, _, (a_d, b_d) = _match_serial(
            surface_segments,
            segs,
            pairs,
            reg,
            depth_um=float(h),
            step_um=step_um,
            max_angle_deg=max_angle_deg,
            max_offset_um=max_offset,
        )
        for i in np.flatnonzero((match >= 0) & ~ambiguous):
            traces[i].append((a_d[match[i]], b_d[match[i]], float(h), reg.shift_sigma_um))
    normal = np.full((n, 3), np.nan)
    dip = np.full(n, np.nan)
    azimuth = np.full(n, np.nan)
    residual = np.full(n, np.nan)
    sigma = np.full(n, np.nan)
    line_sigma = _line_sigma_um(surface_segments, step_um)
    count = np.array([len(t) for t in traces])
    for i in np.flatnonzero(keep & (count >= 2)):
        p0 = np.array([t[0] for t in traces[i]])
        p1 = np.array([t[1] for t in traces[i]])
        z = np.array([t[2] for t in traces[i]])
        floor = math.hypot(line_sigma[i], max(t[3] for t in traces[i]))
        fit = fit_plane_through_traces(
            p0[:, 0], p0[:, 1], p1[:, 0], p1[:, 1], z, position_sigma_um=floor
        )
        normal[i] = fit.normal_sample
        dip[i], azimuth[i] = fit.dip_deg, fit.dip_direction_azimuth_deg
        residual[i], sigma[i] = fit.residual_um, fit.normal_sigma_deg
    found = keep & (count >= 2)
    # The horizontal part of the normal has length sin δ: its azimuth σ is σ_n / sin δ.
    with np.errstate(divide="ignore", invalid="ignore"):
        az_sigma = np.minimum(sigma / np.sin(np.deg2rad(dip)), 180.0)
    return {
        "segment_id": np.asarray(surface_segments["segment_id"]),
        "n_sections": np.where(keep, count, 0),
        "normal_x": normal[:, 0],
        "normal_y": normal[:, 1],
        "normal_z": normal[:, 2],
        "measured_dip_deg": dip,
        "measured_dip_sigma_deg": sigma,
        "dip_direction_azimuth_deg": azimuth,
        "dip_direction_sigma_deg": az_sigma,
        "fit_residual_um": residual,
        "dip_source": np.where(found, "serial-stack", "").astype(object),
        "status": np.where(found, "measured", "unmatched").astype(str),
    }
