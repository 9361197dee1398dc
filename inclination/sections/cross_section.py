"""Cross-sections: the face record and the planes measured on it (conventions §5, §7).

Owns the cross-section stage: :class:`CrossSection`, the typed record of one face
(section line, viewer side, imaging tilt, face inclination and the boundaries seen
on it, all in the sample frame S), built once from a job entry by
:meth:`CrossSection.from_job_entry`, where the declared axes are converted
(conventions §2) and every check the job schema cannot express is made; and
:func:`measure_cross_section`, which matches each listed boundary to a fitted
surface trace and turns image angle and trace into a plane normal (§7).

The formulas come from :mod:`.formulas` (tilt correction, image-right) and the
normal's dip and dip direction from :func:`inclination.planes.geometry.surface_geometry`
(§5: normals with ``n_z >= 0``, no dip direction for a vertical plane).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import shapely
from numpy.typing import ArrayLike
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree
from scipy.special import ndtr

from .._validation import as_float_array
from ..compare.sense import reversal_probability
from ..errors import InputError, SettingError
from ..frames import DeclaredAxes
from ..planes.geometry import surface_geometry
from ._settings import setting_positive
from .formulas import face_angle_from_image_deg, image_right_sample, section_line_frame

__all__ = [
    "CROSS_SECTION_STATUSES",
    "CrossSection",
    "measure_cross_section",
    "network_crossings",
    "network_junctions_um",
]

#: Closed set of the ``status`` column of section tables.
CROSS_SECTION_STATUSES = ("measured", "ill_conditioned", "unmatched", "ambiguous", "near_junction")

_Z = np.array([0.0, 0.0, 1.0])
_Z.setflags(write=False)

#: Sides of the image a boundary may descend toward (as the viewer sees it, §7).
_DESCENDS = ("left", "right")

# A plane within this of the surface (degrees) is parallel to it to round-off: no
# dip direction.
_HORIZONTAL_DIP_DEG = 1e-6


def _frozen(values, dtype=float) -> np.ndarray:
    out = np.array(values, dtype=dtype)
    out.setflags(write=False)
    return out


@dataclass(frozen=True)
class CrossSection:
    """One cross-section face and the boundaries seen on it, in the sample frame S (§7).

    Build it from a job entry with :meth:`from_job_entry` (which converts the declared
    axes and checks the entry), or directly from values already in S.

    Attributes
    ----------
    line_sample : ndarray, shape (2, 2)
        First and second point of the section line on the surface, µm, in S.
    viewer_sample : ndarray, shape (2,)
        A point on the side of the line the face is viewed from, µm, in S.
    tilt_deg : float
        Imaging tilt: angle between the beam and the surface normal, degrees.
    along_um : ndarray, shape (K,)
        Each boundary's distance along the line from its first point, µm.
    image_angle_deg : ndarray, shape (K,)
        Angle between the surface line and the boundary in the image, degrees.
    descends : ndarray of str, shape (K,)
        ``"left"`` or ``"right"``: the side of the image the boundary descends toward.
    angle_sigma_deg : ndarray, shape (K,)
        σ of each image angle, degrees.
    face_inclination_deg : float
        Angle between the face and the surface, degrees (90: perpendicular).
    match_tolerance_um : float or None
        Largest distance along the line between an entry and a trace, µm; None
        leaves it to :func:`measure_cross_section` (two map steps).
    axes : DeclaredAxes
        The axes the entry was written in; error messages quote points in them.
    """

    line_sample: np.ndarray
    viewer_sample: np.ndarray
    tilt_deg: float
    along_um: np.ndarray
    image_angle_deg: np.ndarray
    descends: np.ndarray
    angle_sigma_deg: np.ndarray
    face_inclination_deg: float = 90.0
    match_tolerance_um: float | None = None
    axes: DeclaredAxes = DeclaredAxes()

    def __post_init__(self):
        for name in ("line_sample", "viewer_sample", "along_um", "image_angle_deg"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))
        object.__setattr__(self, "angle_sigma_deg", _frozen(self.angle_sigma_deg))
        object.__setattr__(self, "descends", _frozen(self.descends, dtype=str))
        shapes = {
            "line_sample": (self.line_sample.shape, (2, 2)),
            "viewer_sample": (self.viewer_sample.shape, (2,)),
        }
        for name, (got, want) in shapes.items():
            if got != want:
                raise ValueError(f"Expected `{name}` to have shape {want}, got {got}.")
        bad = ~np.isin(self.descends, _DESCENDS)
        if bad.any():
            raise ValueError(
                f"Expected `descends` to hold only {_DESCENDS}, got {self.descends[bad][0]!r}."
            )
        k = self.along_um.shape
        for name in ("image_angle_deg", "descends", "angle_sigma_deg"):
            if getattr(self, name).shape != k:
                raise ValueError(
                    f"Expected `{name}` to have the shape of `along_um` {k}, "
                    f"got {getattr(self, name).shape}."
                )

    @classmethod
    def from_job_entry(
        cls,
        entry: Mapping,
        *,
        axes: DeclaredAxes,
        path=None,
        pointer: str = "",
    ) -> CrossSection:
        """The record of a ``cross-section`` job entry, points converted into S (§2, §7).

        The entry has passed the job schema (types and ranges); this constructor makes
        the checks the schema cannot express, once: two distinct points on the line, a
        viewer off it, every ``along_um`` within the line, and an imaging tilt that sees
        the face. Absent optional fields take the schema's defaults (face 90°, angle
        σ 1°, match tolerance left to the stage).

        Parameters
        ----------
        entry : mapping
            The job entry: ``line_um`` (2, 2) and ``viewer_at_um`` (2,) in declared
            axes, ``imaging_tilt_deg``, ``face_inclination_deg``,
            ``match_tolerance_um``, ``boundaries`` (``along_um``, ``image_angle_deg``,
            ``descends``, ``angle_sigma_deg``).
        axes : DeclaredAxes
            The map's declared axes; ``axes.points_to_sample`` converts the points.
        path, pointer : optional
            Job file and JSON pointer of the entry, for error messages.

        Returns
        -------
        CrossSection

        Raises
        ------
        InputError
            A geometry the schema cannot rule out, naming the field's JSON pointer.

        Examples
        --------
        >>> sec = CrossSection.from_job_entry(
        ...     {"line_um": [[0, 60], [100, 60]], "viewer_at_um": [50, 40],
        ...      "imaging_tilt_deg": 52.0,
        ...      "boundaries": [{"along_um": 50.0, "image_angle_deg": 30.0,
        ...                      "descends": "left"}]},
        ...     axes=DeclaredAxes("right", "up", origin_um=(0.0, 100.0)))
        >>> sec.line_sample.tolist(), sec.viewer_sample.tolist()
        ([[0.0, 40.0], [100.0, 40.0]], [50.0, 60.0])
        >>> sec.descends.tolist(), sec.angle_sigma_deg.tolist(), sec.face_inclination_deg
        (['left'], [1.0], 90.0)
        """

        def fail(message, field):
            raise InputError(message, path=path, pointer=f"{pointer}/{field}")

        line = axes.points_to_sample(np.asarray(entry["line_um"], dtype=float))
        viewer = axes.points_to_sample(np.asarray(entry["viewer_at_um"], dtype=float))
        frame = section_line_frame(line, viewer)
        if frame.is_point:
            fail(
                f"Expected two distinct points on the section line, got {entry['line_um']}.",
                "line_um",
            )
        if frame.viewer_on_line:
            fail(
                "Expected the viewer point off the section line (it tells which side the "
                f"face is seen from), got {entry['viewer_at_um']} on the line.",
                "viewer_at_um",
            )
        tilt = float(entry["imaging_tilt_deg"])
        face = float(_or_default(entry.get("face_inclination_deg"), 90.0))
        if math.cos(math.radians(face - tilt)) <= 1e-6:
            fail(
                f"Expected an imaging tilt that sees the face, got {tilt!r} deg for a face "
                f"at {face!r} deg.",
                "imaging_tilt_deg",
            )
        boundaries = list(entry.get("boundaries", []))
        along = np.array([float(b["along_um"]) for b in boundaries])
        for i in np.flatnonzero(along > frame.length_um * (1 + 1e-9)):
            fail(
                f"Expected along_um within the section line's length {frame.length_um:.6g} "
                f"µm, got {boundaries[i]['along_um']}.",
                f"boundaries/{i}/along_um",
            )
        tolerance = entry.get("match_tolerance_um")
        return cls(
            line_sample=line,
            viewer_sample=viewer,
            tilt_deg=tilt,
            along_um=along,
            image_angle_deg=[float(b["image_angle_deg"]) for b in boundaries],
            descends=[str(b["descends"]) for b in boundaries],
            angle_sigma_deg=[float(_or_default(b.get("angle_sigma_deg"), 1.0)) for b in boundaries],
            face_inclination_deg=face,
            match_tolerance_um=None if tolerance is None else float(tolerance),
            axes=axes,
        )


def _or_default(value, default):
    """A job number; null or absent gives the schema's default."""
    return default if value is None else value


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
    # The graph is built from the hits only (sparse): a dense (k + n)² matrix made this
    # step quadratic in the segments, gigabytes on a map of 10⁴ grains.
    rows, cols = np.nonzero(hit)
    graph = coo_matrix(
        (np.ones(rows.size, dtype=np.int8), (rows, k + cols)), shape=(k + n, k + n)
    ).tocsr()
    _, comp = connected_components(graph, directed=False)
    seg_comp = comp[k:]
    for c in np.unique(comp[:k]):
        entries = np.flatnonzero(comp[:k] == c)
        segs = np.flatnonzero(seg_comp == c)
        if len(segs) == 0 or len(entries) != len(segs):
            continue
        e_sorted = entries[np.argsort(along[entries], kind="stable")]
        s_sorted = segs[np.argsort(s_cross[segs], kind="stable")]
        if np.all(hit[e_sorted, s_sorted]):
            first[e_sorted] = s_sorted
            matched[e_sorted] = True
    return first, matched


def _cross_section_normals(alpha_image_deg, trace_deg, tilt_deg, face_deg, frame, descend_sign):
    """Plane normals (N, 3) in S from image angle, trace angle and tilt on one face (§7).

    ``right`` is image-right from :func:`image_right_sample`, V = Z_S × right the unit
    vector toward the viewer, ``down`` the direction down the face.
    """
    alpha_face = np.deg2rad(
        face_angle_from_image_deg(alpha_image_deg, tilt_deg, face_inclination_deg=face_deg)
    )
    right, toward = frame
    face = np.deg2rad(face_deg)
    trace = np.deg2rad(trace_deg)
    s_h = descend_sign[:, None] * right[None, :]
    down = np.sin(face)[..., None] * _Z + np.cos(face)[..., None] * toward
    line_on_face = np.cos(alpha_face)[:, None] * s_h + np.sin(alpha_face)[:, None] * down
    t = np.stack([np.cos(trace), np.sin(trace), np.zeros_like(trace)], axis=-1)
    return np.cross(t, line_on_face)


def _pair_crosses_near(crossings, segments, keep, along, tolerance):
    """(K, N) mask: a crossing of segment j's grain pair lies within tolerance of entry i."""
    ga = np.asarray(segments["grain_a"], np.int64)[keep]
    gb = np.asarray(segments["grain_b"], np.int64)[keep]
    lo, hi = np.minimum(ga, gb), np.maximum(ga, gb)
    ca = np.asarray(crossings["grain_a"], np.int64)
    cb = np.asarray(crossings["grain_b"], np.int64)
    c_lo, c_hi = np.minimum(ca, cb), np.maximum(ca, cb)
    c_along = np.asarray(crossings["along_um"], float)
    out = np.zeros((len(along), len(ga)), dtype=bool)
    if c_along.size == 0:
        return out
    # Only the crossings within tolerance of some entry matter: few, so a dense check.
    near_entry = np.abs(c_along[:, None] - along[None, :]) <= tolerance  # (C, K)
    useful = np.flatnonzero(near_entry.any(axis=1))
    for c in useful:
        same = (lo == c_lo[c]) & (hi == c_hi[c])
        out[np.ix_(near_entry[c], same)] = True
    return out


def _angle_diff_deg(a, b):
    """Signed difference a − b wrapped to [-180, 180)."""
    return (a - b + 180.0) % 360.0 - 180.0


def _section_crossings(line, along_dir, length, a, b, tolerance):
    """Where each segment crosses the section line: position s along it, and whether it does.

    Both the line and each segment are lengthened by ``tolerance`` at their ends, so a
    trace that stops just short of the line (a fitted segment ends where the boundary
    bends) still counts. Solves ``P0 + s·e = A + u·D`` per segment.
    """
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
    return s_cross, crosses


def network_crossings(network, line_um: ArrayLike) -> dict[str, np.ndarray]:
    """Where the boundary network itself crosses a straight section line (S, §2).

    Each chain of edge midpoints becomes a shapely line (a closed chain closed); an
    ``STRtree`` gives the chains the section line meets, and their intersections are
    projected on the line. A fitted segment may end short of the line (it ends where the
    boundary bends) while another boundary is the one that truly crosses there; these
    crossings tell which grain pairs reach the line, and where.

    Parameters
    ----------
    network : BoundaryNetwork
        The map's boundary network (:func:`inclination.network.boundary_network`).
    line_um : array_like, shape (2, 2)
        Section line end points in S, µm.

    Returns
    -------
    dict of 1-D arrays
        ``along_um`` (distance from the line's first point), ``grain_a``, ``grain_b``,
        sorted by ``along_um``; one row per crossing.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> net = SimpleNamespace(offsets=np.array([0, 3]), closed=np.array([False]),
    ...     points_um=np.array([[5.0, 0.0], [5.0, 5.0], [5.0, 10.0]]),
    ...     grain_a=np.array([1]), grain_b=np.array([2]))
    >>> network_crossings(net, [[0.0, 4.0], [10.0, 4.0]])["along_um"].tolist()
    [5.0]
    """
    line = np.asarray(line_um, dtype=float)
    offsets = np.asarray(network.offsets, dtype=np.int64)
    points = np.asarray(network.points_um, dtype=float)
    n_chain = len(offsets) - 1
    empty = {
        "along_um": np.zeros(0),
        "grain_a": np.zeros(0, np.int64),
        "grain_b": np.zeros(0, np.int64),
    }
    counts = np.diff(offsets)
    closed = np.asarray(network.closed, dtype=bool)
    usable = np.flatnonzero(counts >= 2)
    if n_chain == 0 or usable.size == 0:
        return empty
    # A closed chain repeats its first point so that its last edge is part of the line.
    extra = closed[usable] & (counts[usable] >= 3)
    take = [np.arange(offsets[c], offsets[c + 1]) for c in usable]
    index = np.concatenate(
        [np.append(t, t[0]) if e else t for t, e in zip(take, extra, strict=True)]
    )
    owner = np.repeat(np.arange(usable.size), counts[usable] + extra)
    lines = shapely.linestrings(points[index], indices=owner)
    section = shapely.linestrings(line)
    hit = shapely.STRtree(lines).query(section, predicate="intersects")
    if hit.size == 0:
        return empty
    where = shapely.intersection(lines[hit], section)
    coords, which = shapely.get_coordinates(where, return_index=True)
    e = (line[1] - line[0]) / np.hypot(*(line[1] - line[0]))
    along = (coords - line[0]) @ e
    chain = usable[hit[which]]
    order = np.argsort(along, kind="stable")
    return {
        "along_um": along[order],
        "grain_a": np.asarray(network.grain_a, np.int64)[chain][order],
        "grain_b": np.asarray(network.grain_b, np.int64)[chain][order],
    }


def network_junctions_um(network, bounds_um: ArrayLike, *, step_um: float) -> np.ndarray:
    """Triple junctions of the network: ends of open chains away from the map's edge (S).

    An open chain of the network runs between two points where three or more grains
    meet, or to the map's edge; the ends within one step of the edge are left out.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> net = SimpleNamespace(offsets=np.array([0, 3]), closed=np.array([False]),
    ...     points_um=np.array([[5.0, 0.0], [5.0, 5.0], [5.0, 8.0]]))
    >>> network_junctions_um(net, (0, 0, 10, 10), step_um=1.0).tolist()
    [[5.0, 8.0]]
    """
    offsets = np.asarray(network.offsets, dtype=np.int64)
    points = np.asarray(network.points_um, dtype=float)
    is_open = ~np.asarray(network.closed, dtype=bool) & (np.diff(offsets) > 0)
    ends = np.concatenate(
        [points[offsets[:-1][is_open]], points[offsets[1:][is_open] - 1]]
    ).reshape(-1, 2)
    b = np.asarray(bounds_um, dtype=float)
    inner = (
        (ends[:, 0] > b[0] + step_um)
        & (ends[:, 0] < b[2] - step_um)
        & (ends[:, 1] > b[1] + step_um)
        & (ends[:, 1] < b[3] - step_um)
    )
    return ends[inner]


def measure_cross_section(
    section: CrossSection,
    segments: Mapping,
    *,
    step_um: float,
    bounds_um: ArrayLike,
    tilt_sigma_deg: float = 0.5,
    max_sigma_deg: float = 10.0,
    crossings: Mapping | None = None,
    junctions_um: ArrayLike | None = None,
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
    For a matched entry the image angle is corrected for the imaging tilt
    (:func:`~inclination.sections.formulas.face_angle_from_image_deg`), the line on
    the face is ``l = cos α · s_h + sin α · w`` (``s_h`` along image-right,
    :func:`~inclination.sections.formulas.image_right_sample`, pointed the way the
    boundary descends, ``w`` down the face) and the normal is ``n ∝ t × l`` with t the
    fitted trace; dip and dip direction follow from
    :func:`inclination.planes.geometry.surface_geometry` (§5). Uncertainties are first
    order (one-sided finite differences) in the image-angle σ, the trace σ and
    ``tilt_sigma_deg``. An entry whose dip σ exceeds ``max_sigma_deg`` (trace nearly
    parallel to the line) keeps its values and σ with status ``ill_conditioned``.

    Parameters
    ----------
    section : CrossSection
        The face and its boundaries, in S (:meth:`CrossSection.from_job_entry`).
    segments : mapping
        Segments table (S): ``segment_id, x0_um, y0_um, x1_um, y1_um,
        trace_angle_deg, trace_sigma_deg`` (rows with ``too_short`` are skipped).
    step_um : float
        Map step, µm (the default match tolerance is two steps).
    bounds_um : array_like, shape (4,)
        ``(x_min, y_min, x_max, y_max)`` of the map in S, µm.
    tilt_sigma_deg : float, optional
        σ of the imaging tilt, degrees.
    max_sigma_deg : float, optional
        Dip σ above which an entry is ``ill_conditioned``.
    crossings : mapping, optional
        Where the boundary network crosses the line (:func:`network_crossings`). When
        given, an entry matches a segment only if a boundary of that segment's grain pair
        crosses the line within the tolerance of the entry: a fitted segment whose
        extension meets the line is not enough.
    junctions_um : array_like, shape (J, 2), optional
        Triple junctions (:func:`network_junctions_um`). A matched entry within the
        match tolerance of one keeps its values with status ``near_junction``: which of
        the boundaries meeting there the face shows cannot be told, so it decides nothing.
    path, pointer : optional
        Job file and JSON pointer of the entry, for the error of a line off the map.

    Returns
    -------
    dict of 1-D arrays, one row per listed boundary
        ``entry, segment_id`` (-1 if none), ``candidate_segment_ids`` (";"-joined),
        ``along_um, beta_deg, normal_x, normal_y, normal_z`` (S, n_z >= 0),
        ``measured_dip_deg, measured_dip_sigma_deg, dip_direction_azimuth_deg`` (S,
        [0, 360); NaN for a vertical plane), ``dip_direction_sigma_deg``,
        ``dip_source`` (``cross-section``), ``status`` (one of
        ``CROSS_SECTION_STATUSES``).

    Raises
    ------
    InputError
        When the section line leaves the map.
    SettingError
        For a step, σ or bounds out of range.

    Examples
    --------
    >>> seg = {"segment_id": np.array([0]), "x0_um": np.array([50.0]),
    ...        "y0_um": np.array([0.0]), "x1_um": np.array([50.0]),
    ...        "y1_um": np.array([100.0]), "trace_angle_deg": np.array([90.0]),
    ...        "trace_sigma_deg": np.array([0.5])}
    >>> sec = CrossSection(line_sample=[[0, 40], [100, 40]], viewer_sample=[50, 60],
    ...                    tilt_deg=90.0, along_um=[50.0], image_angle_deg=[60.0],
    ...                    descends=["right"], angle_sigma_deg=[1.0])
    >>> out = measure_cross_section(sec, seg, step_um=1.0, bounds_um=(0, 0, 100, 100))
    >>> out["status"].tolist(), out["measured_dip_deg"].round(3).tolist()
    (['measured'], [60.0])
    >>> out["dip_direction_azimuth_deg"].round(3).tolist()
    [0.0]
    """
    setting_positive(step_um, "step_um")
    setting_positive(tilt_sigma_deg, "tilt_sigma_deg", allow_zero=True)
    setting_positive(max_sigma_deg, "max_sigma_deg")
    bounds = as_float_array(bounds_um, "bounds_um")
    if bounds.shape != (4,):
        raise SettingError(f"Expected `bounds_um` to have shape (4,), got {bounds.shape}.")

    line = section.line_sample
    margin = 0.5 * step_um
    inside = (
        (line[:, 0] >= bounds[0] - margin)
        & (line[:, 0] <= bounds[2] + margin)
        & (line[:, 1] >= bounds[1] - margin)
        & (line[:, 1] <= bounds[3] + margin)
    )
    if not inside.all():
        outside = section.axes.points_to_declared(line[~inside][0])
        raise InputError(
            f"Expected `line_um` to lie inside the map, got point {outside.tolist()} outside it.",
            path=path,
            pointer=f"{pointer}/line_um",
        )
    frame = section_line_frame(line, section.viewer_sample)
    along_dir, length = frame.along_sample, frame.length_um
    right = image_right_sample(line, section.viewer_sample)
    # V from image-right: right = V × Z_S, so V = Z_S × right (§7).
    toward = np.cross(_Z, right) + 0.0
    tolerance = 2.0 * step_um if section.match_tolerance_um is None else section.match_tolerance_um

    along = section.along_um
    alpha = section.image_angle_deg
    alpha_sigma = section.angle_sigma_deg
    descend = np.where(section.descends == "right", 1.0, -1.0)
    k = len(along)

    seg_id = np.asarray(segments["segment_id"])
    keep = np.ones(seg_id.shape, bool)
    if "too_short" in segments:
        keep &= ~np.asarray(segments["too_short"], bool)
    a = np.stack([segments["x0_um"], segments["y0_um"]], axis=-1).astype(float)[keep]
    b = np.stack([segments["x1_um"], segments["y1_um"]], axis=-1).astype(float)[keep]
    trace_deg = np.asarray(segments["trace_angle_deg"], float)[keep]
    trace_sigma_deg = np.asarray(segments["trace_sigma_deg"], float)[keep]
    seg_id = seg_id[keep]

    s_cross, crosses = _section_crossings(line, along_dir, length, a, b, tolerance)
    hit = crosses[None, :] & (np.abs(s_cross[None, :] - along[:, None]) <= tolerance)
    if crossings is not None and hit.any():
        hit &= _pair_crosses_near(crossings, segments, keep, along, tolerance)
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
            [alpha[matched], trace_deg[idx], np.full(idx.shape, float(section.tilt_deg))]
        )
        sigmas = np.stack(
            [alpha_sigma[matched], trace_sigma_deg[idx], np.full(idx.shape, tilt_sigma_deg)]
        )
        face = np.full(idx.shape, float(section.face_inclination_deg))
        sign = descend[matched]

        def evaluate(p):
            g = surface_geometry(
                _cross_section_normals(p[0], p[1], p[2], face, (right, toward), sign)
            )
            return g.normal_sample, g.dip_deg, g.dip_azimuth_deg

        n0, dip0, az0 = evaluate(params)
        var_dip = np.zeros(idx.shape)
        var_az = np.zeros(idx.shape)
        step = math.degrees(1e-5)
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
        if junctions_um is not None:
            junctions = np.asarray(junctions_um, dtype=float).reshape(-1, 2)
            at = line[0] + along[:, None] * along_dir[None, :]
            near = np.zeros(k, dtype=bool)
            if len(junctions):
                # A k-d tree: a map of 10⁴ grains has tens of thousands of junctions.
                bound = np.nextafter(tolerance, np.inf)  # the query's bound is strict
                near = cKDTree(junctions).query(at, distance_upper_bound=bound)[0] <= tolerance
            status[matched & near] = "near_junction"

    # Reversed dip direction (§6): a steep plane whose true dip lies beyond 90°, or a
    # trace so near the line that the azimuth error passes 90° (normal, both tails).
    # A horizontal plane, or an azimuth σ at its 180° cap, has no dip direction.
    steep = np.nan_to_num(reversal_probability(dip, dip_sigma), nan=0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        along_line = np.nan_to_num(2.0 * ndtr(-90.0 / azimuth_sigma), nan=0.0)
    reversal = steep * (1 - along_line) + along_line * (1 - steep)
    undefined = (dip <= _HORIZONTAL_DIP_DEG) | (azimuth_sigma >= 180.0)
    reversal = np.where(np.isfinite(dip) & ~undefined, np.minimum(reversal, 0.5), np.nan)
    return {
        "entry": np.arange(k),
        "segment_id": out_id,
        "candidate_segment_ids": candidates if k else np.array([], object),
        "along_um": np.array(along),
        "beta_deg": beta,
        "normal_x": normal[:, 0],
        "normal_y": normal[:, 1],
        "normal_z": normal[:, 2],
        "measured_dip_deg": dip,
        "measured_dip_sigma_deg": dip_sigma,
        "dip_direction_azimuth_deg": np.where(undefined, np.nan, azimuth),
        "dip_direction_sigma_deg": np.where(undefined, np.nan, azimuth_sigma),
        "reversal_probability": reversal,
        "dip_source": np.full(k, "cross-section", dtype=object),
        "status": status.astype(str) if k else np.array([], dtype=str),
    }
