"""Serial sections: the layer record and the planes measured from two maps (conventions §8).

Owns the serial-section stage: :class:`LayerDepth` and :func:`section_depth` (the
removed layer's thickness from a job entry, given or from a Vickers indent through
:func:`~inclination.sections.formulas.depth_from_indent_um`), :class:`SerialLayer`,
the typed record of one serial-section entry (depth and fiducials, the fiducials
converted from each map's declared axes into the sample frame S once, conventions
§2), and :func:`measure_serial_section`: register, match grains, pair each surface
trace with its deeper trace (:func:`match_segments`) and turn the sideways offset
into a plane (normal ``n ∝ t × (Δ·u + h·Z_S)``, whose dip and dip direction come from
:func:`inclination.planes.geometry.surface_geometry`, §5; its dip is ``tan δ = h / Δ`` of
:func:`~inclination.sections.formulas.serial_dip_deg`, §8, and its σ
:func:`~inclination.sections.formulas.serial_dip_sigma_deg`). The segment pairing is
public because the stack stage (:mod:`.stack`) uses it. When a job gives no depth,
:func:`estimate_depth_from_twins` measures it from the identified coherent twins, whose
planes are known: each twin's offset is ``Δ = h cot δ`` of its predicted dip δ
(:func:`~inclination.sections.formulas.serial_offset_um`), fitted robustly for h.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import ndtr

from ..errors import InputError
from ..frames import DeclaredAxes
from ..planes.geometry import surface_geometry
from ..run_tables import aligned_columns, rows_by_id
from ._settings import setting_positive
from .formulas import (
    depth_from_indent_um,
    serial_dip_sigma_deg,
    serial_offset_um,
)
from .registration import Registration, match_grains, register_sections

if TYPE_CHECKING:
    from ..grains import GrainMap

__all__ = [
    "LayerDepth",
    "SegmentMatch",
    "SerialLayer",
    "SerialSection",
    "TwinDepth",
    "check_section_phases",
    "estimate_depth_from_twins",
    "match_segments",
    "measure_serial_section",
    "section_depth",
    "segment_ends",
    "trace_position_sigma_um",
]

_Z = np.array([0.0, 0.0, 1.0])
_Z.setflags(write=False)

# A layer known to 10 % when the job states no σ (common practice for polished layers).
_DEFAULT_DEPTH_SIGMA = 0.1


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
        ``"given"``, ``"indent"`` or ``"coherent twins"`` (:func:`estimate_depth_from_twins`).
    """

    depth_um: float
    depth_sigma_um: float
    source: str


def section_depth(section: Mapping, *, path=None, pointer: str = "") -> LayerDepth | None:
    """Layer thickness of a serial-section job entry (§8).

    The entry gives ``depth_um``, or ``indent``: the Vickers indent diagonals
    ``{"diagonal_before_um": ..., "diagonal_after_um": ...}``, with the depth from
    :func:`~inclination.sections.formulas.depth_from_indent_um`. ``depth_sigma_um``
    states the σ of h; when it is absent or null the depth is taken to be known to
    10 % (common practice for polished layers; state it in the job to do better).

    An entry with neither gives None: the depth is then estimated from the identified
    coherent twins (:func:`estimate_depth_from_twins`), and a ``depth_sigma_um`` without a
    depth is refused.

    The entry has passed the job schema (numbers > 0, at most one of ``depth_um`` and
    ``indent``); the one check the schema cannot express, an indent that shrinks, is
    made here.

    Parameters
    ----------
    section : mapping
        One ``sections`` entry of kind ``serial``.
    path, pointer : optional
        File and JSON pointer of the entry, for error messages.

    Returns
    -------
    LayerDepth

    Raises
    ------
    InputError
        An indent whose diagonal does not shrink.

    Examples
    --------
    >>> section_depth({"depth_um": 1.5, "depth_sigma_um": 0.1})
    LayerDepth(depth_um=1.5, depth_sigma_um=0.1, source='given')
    >>> d = section_depth({"indent": {"diagonal_before_um": 30.0, "diagonal_after_um": 23.0}})
    >>> round(d.depth_um, 5), round(d.depth_sigma_um, 5), d.source
    (0.99991, 0.09999, 'indent')
    """
    if section.get("depth_um") is None and section.get("indent") is None:
        if section.get("depth_sigma_um") is not None:
            raise InputError(
                f"Expected depth_um or indent beside depth_sigma_um "
                f"({section['depth_sigma_um']:g}); without a depth the section's depth is "
                "estimated from the coherent twins, with its own σ.",
                path=path,
                pointer=f"{pointer}/depth_sigma_um",
            )
        return None
    if section.get("depth_um") is not None:
        depth = float(section["depth_um"])
        source = "given"
    else:
        before = float(section["indent"]["diagonal_before_um"])
        after = float(section["indent"]["diagonal_after_um"])
        if not after < before:
            raise InputError(
                "Expected the indent diagonal to shrink after removing a layer "
                f"(diagonal_after_um < diagonal_before_um), got {after:g} >= {before:g}.",
                path=path,
                pointer=f"{pointer}/indent",
            )
        depth = float(depth_from_indent_um(before, after))
        source = "indent"
    sigma = section.get("depth_sigma_um")
    sigma = _DEFAULT_DEPTH_SIGMA * depth if sigma is None else float(sigma)
    return LayerDepth(depth_um=depth, depth_sigma_um=sigma, source=source)


@dataclass(frozen=True)
class SerialLayer:
    """One serial-section entry of a job, in the sample frame S (§8).

    Attributes
    ----------
    depth : LayerDepth or None
        Thickness of the removed layer and its σ; None when the entry gives none (it is
        then estimated from the coherent twins).
    fiducials_um : ndarray, shape (K, 2, 2), or None
        K marks seen on both maps, each ``[[x, y] on the surface map, [x, y] on the
        deeper map]`` in S, µm; None when the entry lists none.
    """

    depth: LayerDepth | None
    fiducials_um: np.ndarray | None = None

    @classmethod
    def from_job_entry(
        cls,
        entry: Mapping,
        *,
        surface_axes: DeclaredAxes,
        section_axes: DeclaredAxes,
        path=None,
        pointer: str = "",
    ) -> SerialLayer:
        """The record of a ``serial`` job entry; fiducials converted into S (§2).

        Parameters
        ----------
        entry : mapping
            The job entry (``depth_um`` or ``indent``, ``depth_sigma_um``,
            ``fiducials``), past the schema.
        surface_axes, section_axes : DeclaredAxes
            Declared axes of the surface map and of the section's map; each
            fiducial's ``surface_um`` and ``section_um`` are in their own map's axes.
        path, pointer : optional
            Job file and JSON pointer of the entry, for error messages.

        Returns
        -------
        SerialLayer

        Examples
        --------
        >>> layer = SerialLayer.from_job_entry(
        ...     {"depth_um": 2.0, "fiducials": [{"surface_um": [1, 9], "section_um": [2, 8]}]},
        ...     surface_axes=DeclaredAxes("right", "up", origin_um=(0.0, 10.0)),
        ...     section_axes=DeclaredAxes("right", "down"))
        >>> layer.depth.depth_um, layer.fiducials_um.tolist()
        (2.0, [[[1.0, 1.0], [2.0, 8.0]]])
        """
        depth = section_depth(entry, path=path, pointer=pointer)
        marks = entry.get("fiducials") or []
        fiducials = None
        if marks:
            fiducials = np.array(
                [
                    [
                        surface_axes.points_to_sample(f["surface_um"]),
                        section_axes.points_to_sample(f["section_um"]),
                    ]
                    for f in marks
                ]
            )
            fiducials.setflags(write=False)
        return cls(depth, fiducials)


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


def segment_ends(segments: Mapping) -> tuple:
    """Usable rows, end points (N, 2) µm in S and grain ids of a segments table.

    Returns ``(usable, start_um, end_um, grain_a, grain_b)``; ``usable`` is False on
    the rows marked ``too_short``.
    """
    keep = np.ones(len(np.asarray(segments["segment_id"])), bool)
    if "too_short" in segments:
        keep &= ~np.asarray(segments["too_short"], bool)
    a = np.stack([segments["x0_um"], segments["y0_um"]], -1).astype(float)
    b = np.stack([segments["x1_um"], segments["y1_um"]], -1).astype(float)
    ga = np.asarray(segments["grain_a"], np.int64)
    gb = np.asarray(segments["grain_b"], np.int64)
    return keep, a, b, ga, gb


def trace_position_sigma_um(segments: Mapping, *, step_um: float) -> np.ndarray:
    """σ of each fitted trace's perpendicular position at its middle, µm, shape (N,).

    The fit residual (at least the pixel staircase, step/√12) over √(number of edges).
    """
    n = len(np.asarray(segments["segment_id"]))
    floor = step_um / math.sqrt(12.0)  # a pixel-staircase boundary
    resid = np.asarray(segments.get("residual_um", np.full(n, floor)), float)
    if "n_edges" in segments:
        count = np.asarray(segments["n_edges"], float)
    else:
        count = np.asarray(segments["length_um"], float) / step_um
    return np.maximum(resid, floor) / np.sqrt(np.maximum(count, 2.0))


def check_section_phases(
    surface_grains: GrainMap,
    deeper_grains: GrainMap,
    laue_by_phase: Mapping,
    *,
    path=None,
    pointer: str = "",
) -> None:
    """InputError unless the deeper map holds known phases shared with the surface map."""
    s_phases = set(np.unique(np.asarray(surface_grains.grains["phase"])).tolist())
    d_phases = set(np.unique(np.asarray(deeper_grains.grains["phase"])).tolist())
    known = {int(k) for k in laue_by_phase}
    unknown = sorted(d_phases - known)
    if unknown or not (d_phases & s_phases):
        raise InputError(
            f"Expected the serial-section map to hold the phases of the surface map "
            f"{sorted(s_phases)}, got phases {sorted(d_phases)}.",
            path=path,
            pointer=f"{pointer}/map",
        )


@dataclass(frozen=True)
class SegmentMatch:
    """Each surface segment's deeper trace, from :func:`match_segments`.

    Attributes
    ----------
    deeper_row : ndarray of int, shape (N,)
        Row of the matched deeper segment, -1 where none.
    offset_um : ndarray, shape (N,)
        Signed perpendicular offset Δ along u = Z_S × t, µm (NaN where none).
    direction_sample : ndarray, shape (N, 2)
        Length-weighted mean unit trace direction t of the pair, in S.
    ambiguous : ndarray of bool, shape (N,)
        True where two deeper traces at different offsets fit equally well.
    usable : ndarray of bool, shape (N,)
        False on surface rows marked ``too_short``.
    deeper_start_um, deeper_end_um : ndarray, shape (M, 2)
        The deeper segments' end points registered onto the surface map, µm, in S.
    """

    deeper_row: np.ndarray
    offset_um: np.ndarray
    direction_sample: np.ndarray
    ambiguous: np.ndarray
    usable: np.ndarray
    deeper_start_um: np.ndarray
    deeper_end_um: np.ndarray


def match_segments(
    surface_segments: Mapping,
    deeper_segments: Mapping,
    grain_pairs: Mapping,
    registration: Registration,
    *,
    step_um: float,
    max_angle_deg: float,
    max_offset_um: float,
) -> SegmentMatch:
    """Pair each surface segment with a deeper segment of the same grain pair (§8).

    A candidate runs within ``max_angle_deg`` of the surface trace, overlaps it by at
    least a step along its length and lies within ``max_offset_um``; the one that
    overlaps most is taken, and two candidates at offsets more than two steps apart
    that overlap comparably make the pair ambiguous.

    Parameters
    ----------
    surface_segments, deeper_segments : mapping
        Segments tables (S) with ``segment_id, grain_a, grain_b, x0_um, y0_um,
        x1_um, y1_um`` (optionally ``too_short``).
    grain_pairs : mapping
        :func:`~inclination.sections.registration.match_grains` output.
    registration : Registration
        Placement of the deeper map on the surface map.
    step_um, max_angle_deg, max_offset_um : float
        Map step, largest angle between the two traces, largest offset.

    Returns
    -------
    SegmentMatch
    """
    keep_s, a_s, b_s, ga_s, gb_s = segment_ends(surface_segments)
    keep_d, a_d, b_d, ga_d, gb_d = segment_ends(deeper_segments)
    n_s = len(a_s)
    a_d, b_d = registration.apply(a_d), registration.apply(b_d)
    top = int(max(ga_d.max(initial=0), gb_d.max(initial=0))) + 1
    to_surface = np.full(top, -1, np.int64)
    sel = grain_pairs["deeper_grain"] < top
    to_surface[grain_pairs["deeper_grain"][sel]] = grain_pairs["surface_grain"][sel]
    ma, mb = to_surface[ga_d], to_surface[gb_d]
    valid_d = keep_d & (ma >= 0) & (mb >= 0) & (ma != mb)
    lo, hi = np.minimum(ma, mb), np.maximum(ma, mb)

    match = np.full(n_s, -1, np.int64)
    offset = np.full(n_s, np.nan)
    t_mean = np.full((n_s, 2), np.nan)
    ambiguous = np.zeros(n_s, bool)
    cos_max = math.cos(math.radians(max_angle_deg))
    # Every (surface, deeper) candidate pair of one grain pair, as flat arrays: the deeper
    # segments sorted by grain-pair key (stable, so each key's run keeps segment order).
    width = int(max(top, ga_s.max(initial=0) + 1, gb_s.max(initial=0) + 1))
    cand_d = np.flatnonzero(valid_d)
    key_d = lo[cand_d] * width + hi[cand_d]
    by_key = np.argsort(key_d, kind="stable")
    cand_d, key_d = cand_d[by_key], key_d[by_key]
    len_s = np.hypot(*(b_s - a_s).T) if n_s else np.zeros(0)
    rows_s = np.flatnonzero(keep_s & (len_s > 0))
    key_s = np.minimum(ga_s, gb_s)[rows_s] * width + np.maximum(ga_s, gb_s)[rows_s]
    first = np.searchsorted(key_d, key_s, "left")
    count = np.searchsorted(key_d, key_s, "right") - first
    pi = np.repeat(rows_s, count)
    rank = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)
    pj = cand_d[np.repeat(first, count) + rank]
    len_i = len_s[pi]
    t_i = (b_s[pi] - a_s[pi]) / len_i[:, None]
    u_i = np.stack([-t_i[:, 1], t_i[:, 0]], -1)
    d_vec = b_d[pj] - a_d[pj]
    len_j = np.hypot(d_vec[:, 0], d_vec[:, 1])
    t_j = d_vec / np.maximum(len_j, 1e-12)[:, None]

    def dot(x, y):
        return x[:, 0] * y[:, 0] + x[:, 1] * y[:, 1]

    t_j[dot(t_j, t_i) < 0] *= -1.0
    cos_ij = dot(t_j, t_i)
    p0 = dot(a_d[pj] - a_s[pi], t_i)
    p1 = dot(b_d[pj] - a_s[pi], t_i)
    start = np.maximum(0.0, np.minimum(p0, p1))
    stop = np.minimum(len_i, np.maximum(p0, p1))
    overlap = stop - start
    lam = (0.5 * (start + stop) - p0) / np.maximum(cos_ij, 1e-12)
    q = a_d[pj] + lam[:, None] * t_j
    delta = dot(q - a_s[pi], u_i)
    ok = np.flatnonzero(
        (cos_ij >= cos_max) & (overlap >= step_um) & (np.abs(delta) <= max_offset_um)
    )
    # Per surface segment, its candidates by overlap (largest first, ties in segment order):
    # the first is the match, the second makes it ambiguous when it overlaps comparably at
    # an offset more than two steps away (collinear pieces of one boundary are one answer).
    ok = ok[np.lexsort((rank[ok], -overlap[ok], pi[ok]))]
    lead = np.ones(ok.size, bool)
    lead[1:] = pi[ok][1:] != pi[ok][:-1]
    best = ok[lead]
    has_second = np.zeros(best.size, bool)
    at = np.flatnonzero(lead)
    has_second[:] = (at + 1 < ok.size) & ~np.append(lead, True)[at + 1]
    second = ok[np.minimum(at + 1, max(ok.size - 1, 0))]
    rows = pi[best]
    ambiguous[rows] = (
        has_second
        & (overlap[second] >= 0.5 * overlap[best])
        & (np.abs(delta[second] - delta[best]) > 2.0 * step_um)
    )
    match[rows] = pj[best]
    offset[rows] = delta[best]
    t_sum = len_i[best, None] * t_i[best] + len_j[best, None] * t_j[best]
    t_mean[rows] = t_sum / np.hypot(t_sum[:, 0], t_sum[:, 1])[:, None]
    return SegmentMatch(match, offset, t_mean, ambiguous, keep_s, a_d, b_d)


def measure_serial_section(
    surface_segments: Mapping,
    surface_grains: GrainMap,
    deeper_segments: Mapping,
    deeper_grains: GrainMap,
    *,
    depth_um: float,
    depth_sigma_um: float,
    step_um: float,
    laue_by_phase: Mapping,
    registration: Registration | None = None,
    fiducials_um: ArrayLike | None = None,
    fit_rotation: bool = False,
    threshold_deg: float = 5.0,
    max_angle_deg: float = 15.0,
    max_offset_um: float | None = None,
    max_shift_um: float | None = None,
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
    max_shift_um : float, optional
        Largest sideways move of a lamella paired by its centroid
        (:func:`~inclination.sections.registration.match_grains`); default ``h / tan 10°``.
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
    setting_positive(depth_um, "depth_um")
    setting_positive(depth_sigma_um, "depth_sigma_um", allow_zero=True)
    setting_positive(step_um, "step_um")
    check_section_phases(surface_grains, deeper_grains, laue_by_phase, path=path, pointer=pointer)
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
        max_offset_um = float(serial_offset_um(depth_um, 5.0)) + 2.0 * step_um
    grain_pairs = match_grains(
        surface_grains,
        deeper_grains,
        registration,
        step_um=step_um,
        laue_by_phase=laue_by_phase,
        threshold_deg=threshold_deg,
        # A boundary dipping δ moves h·cot δ between the sections (§8); a lamella moved
        # by more than its width is found by its centroid down to δ = 10°.
        max_shift_um=float(serial_offset_um(depth_um, 10.0))
        if max_shift_um is None
        else float(max_shift_um),
        grid=grid,
    )
    paired = match_segments(
        surface_segments,
        deeper_segments,
        grain_pairs,
        registration,
        step_um=step_um,
        max_angle_deg=max_angle_deg,
        max_offset_um=max_offset_um,
    )
    match, delta, t_mean, ambiguous = (
        paired.deeper_row,
        paired.offset_um,
        paired.direction_sample,
        paired.ambiguous,
    )
    n = len(match)
    seg_id = np.asarray(surface_segments["segment_id"])
    deeper_id = np.asarray(deeper_segments["segment_id"])
    found = match >= 0
    sigma_line_s = trace_position_sigma_um(surface_segments, step_um=step_um)
    sigma_line_d = trace_position_sigma_um(deeper_segments, step_um=step_um)
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
        # Dip and dip direction are §5 quantities of the normal, so they come from the one
        # §5 function; its dip is tan δ = h / |Δ| (serial_dip_deg, §8) to round-off, which
        # tests/test_sections.py checks on this path.
        planes = surface_geometry(normal[found])
        normal_out[found], dip[found] = planes.normal_sample, planes.dip_deg
        azimuth[found] = planes.dip_azimuth_deg
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
        # The dip direction is the sign of the offset Δ (§8): reversed when the true
        # offset has the other sign, Φ(−|Δ|/σ_Δ) (normal error of Δ).
        "reversal_probability": np.where(found, ndtr(-np.abs(delta) / offset_sigma), np.nan),
        "dip_source": np.where(found, "serial-section", "").astype(object),
        "status": status.astype(str),
    }
    return SerialSection(
        boundaries, registration, grain_pairs, float(depth_um), float(depth_sigma_um)
    )


@dataclass(frozen=True)
class TwinDepth:
    """A layer thickness measured from coherent twins (:func:`estimate_depth_from_twins`).

    Attributes
    ----------
    depth : LayerDepth
        The thickness and its σ, ``source="coherent twins"``.
    n_used, n_rejected : int
        Twins in the average, and twins set aside as outliers (a mismatched trace, a
        twin that is not coherent after all).
    scatter_ratio : float
        √(χ²/(n − 1)) of the used twins about the mean: near 1 when they scatter as their
        σ say; σ of the depth is scaled up by it when above 1.
    segment_ids : ndarray of int
        The surface segments used. Their measured dips agree with their predicted dips by
        construction, so they are no evidence for those planes; their dip directions (the
        sense, §6) are unaffected, being the sign of Δ.
    registration : Registration
        The placement of the deeper map used (reused by the measurement at this depth).
    """

    depth: LayerDepth
    n_used: int
    n_rejected: int
    scatter_ratio: float
    segment_ids: np.ndarray
    registration: Registration


def _weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    order = np.argsort(values)
    cum = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cum, 0.5 * cum[-1])])


def _robust_fit(design: np.ndarray, y: np.ndarray, sigma: np.ndarray):
    """Weighted least squares of ``y ≈ design @ coef`` with 3σ clipping of outliers.

    The first clip is about the weighted median of ``y / design[:, 0]`` (the first
    coefficient alone); the clip is 3 times the larger of 1 and the normalised residuals'
    robust spread (1.4826·MAD, the normal consistency factor), so stated σ that are too
    small widen the clip instead of rejecting good rows. Returns ``(coef, cov, used,
    scatter_ratio)``; ``cov`` is scaled by the squared scatter ratio when it exceeds 1.
    """
    w = 1.0 / sigma**2
    first = y / design[:, 0]
    centre = _weighted_median(first, w * design[:, 0] ** 2)
    coef = np.zeros(design.shape[1])
    coef[0] = centre
    used = np.zeros(len(y), bool)
    for _ in range(20):
        r = (y - design @ coef) / sigma
        spread = max(1.0, 1.4826 * float(np.median(np.abs(r[used] if used.any() else r))))
        now = np.abs(r) <= 3.0 * spread
        if now.sum() < design.shape[1] or np.array_equal(now, used):
            break
        used = now
        a = design[used] * np.sqrt(w[used])[:, None]
        coef = np.linalg.lstsq(a, y[used] * np.sqrt(w[used]), rcond=None)[0]
    a = design[used] * np.sqrt(w[used])[:, None]
    cov = np.linalg.pinv(a.T @ a)
    r = (y[used] - design[used] @ coef) / sigma[used]
    dof = int(used.sum()) - design.shape[1]
    ratio = math.sqrt(float(r @ r) / dof) if dof > 0 else 1.0
    return coef, cov * max(1.0, ratio) ** 2, used, ratio


def estimate_depth_from_twins(
    surface_segments: Mapping,
    surface_grains: GrainMap,
    deeper_segments: Mapping,
    deeper_grains: GrainMap,
    identification: Mapping,
    *,
    step_um: float,
    laue_by_phase: Mapping,
    registration: Registration | None = None,
    fiducials_um: ArrayLike | None = None,
    threshold_deg: float = 5.0,
    search_um: float | None = None,
    dip_sigma_deg: float = 0.5,
    min_twins: int = 3,
    grid: str = "square",
    path=None,
    pointer: str = "",
) -> TwinDepth:
    """The removed layer's thickness from the identified coherent twins (§8).

    A coherent twin's plane is known from the grains' orientations, so its trace moves
    ``Δ = h cot δ`` along its predicted dip direction between the sections
    (:func:`~inclination.sections.formulas.serial_offset_um`, §8). The traces are paired
    as in :func:`measure_serial_section`, with search bounds that do not need h (the
    larger of the grains' median equivalent diameter and 20 steps); twins with a
    predicted dip outside 5°–85° are left out (near 90° the offset carries no depth).
    h is the weighted least-squares slope of the signed offsets on cot δ, after clipping
    outliers (a mismatched trace, a twin that is not coherent after all) at 3σ about a
    weighted median. Each twin's σ is its two line fits' and its predicted dip's
    (``h csc²δ σ_δ``). The registration's error is common to all the twins: with a
    registration on the grain structure a shift ``e`` is fitted beside h (``Δ = h cot δ
    + e·d``, d the dip direction); with fiducials their σ is propagated into σ_h once.
    σ_h is scaled up by the twins' scatter when that exceeds their stated σ.

    On ten synthetic samples (layers of 2–8 µm, both registrations; the end-to-end
    section tests) h is recovered to 1 % or better, and σ_h is conservative (RMS z 0.37):
    the 0.5° allowance for a predicted dip covers calibration errors of real maps that
    the simulation lacks.

    Parameters
    ----------
    surface_segments, surface_grains, deeper_segments, deeper_grains
        As for :func:`measure_serial_section`.
    identification : mapping of 1-D arrays
        The surface segments' identification table (``segment_id``, ``identification``,
        ``predicted_dip_deg``, ``predicted_dip_azimuth_deg``), from
        :func:`inclination.planes.match_planes`.
    step_um, laue_by_phase, registration, fiducials_um, threshold_deg, grid
        As for :func:`measure_serial_section`.
    search_um : float, optional
        Largest offset and lamella move searched, µm (default above).
    dip_sigma_deg : float, optional
        σ of a twin's predicted dip, degrees: the grain-mean orientations' precision
        (0.5°, common practice for indexed maps).
    min_twins : int, optional
        Fewest twins the estimate needs.
    path, pointer : optional
        Job file and JSON pointer of the section entry, for error messages.

    Returns
    -------
    TwinDepth

    Raises
    ------
    InputError
        Fewer than ``min_twins`` coherent twins were paired on both maps.

    Examples
    --------
    Three twins predicted to dip 45° toward +X, whose traces moved 2 µm toward +X: h = 2 µm.

    >>> from inclination.grains import GrainMap
    >>> def grains(edges):  # vertical strips, 1 µm step, alternating twin orientations
    ...     col = np.searchsorted(np.asarray(edges), np.arange(40), side="right") + 1
    ...     labels = np.repeat(col[None, :], 20, 0).astype(np.int32)
    ...     ids = np.arange(1, len(edges) + 2)
    ...     quat = np.where((ids % 2)[:, None] == 1, [[1.0, 0, 0, 0]], [[0.5, 0.5, 0.5, 0.5]])
    ...     area = np.bincount(labels.ravel())[1:]
    ...     cx = np.array([np.mean(np.nonzero(col == i)[0]) for i in ids])
    ...     table = {"grain_id": ids, "phase": np.ones_like(ids), "quat": quat,
    ...              "area_px": area, "area_um2": area.astype(float), "centroid_x_um": cx,
    ...              "centroid_y_um": np.full(len(ids), 9.5), "touches_edge": np.ones_like(ids)}
    ...     return GrainMap(labels, table, {}, 5.0, 4)
    >>> def traces(xs):
    ...     n = len(xs)
    ...     return {"segment_id": np.arange(n), "grain_a": np.arange(1, n + 1),
    ...             "grain_b": np.arange(2, n + 2), "x0_um": np.asarray(xs, float) - 0.5,
    ...             "y0_um": np.zeros(n), "x1_um": np.asarray(xs, float) - 0.5,
    ...             "y1_um": np.full(n, 19.0), "length_um": np.full(n, 19.0),
    ...             "trace_sigma_deg": np.full(n, 0.5)}
    >>> ident = {"segment_id": np.arange(3), "identification": np.array(["coherent_twin"] * 3),
    ...          "predicted_dip_deg": np.full(3, 45.0),
    ...          "predicted_dip_azimuth_deg": np.zeros(3)}
    >>> est = estimate_depth_from_twins(traces([10, 20, 30]), grains([10, 20, 30]),
    ...     traces([12, 22, 32]), grains([12, 22, 32]), ident, step_um=1.0,
    ...     laue_by_phase={1: "m-3m"}, registration=Registration(0.0, 0.0, 0.0, 0.0, 1, "given"))
    >>> round(est.depth.depth_um, 6), est.depth.source, est.n_used
    (2.0, 'coherent twins', 3)
    """
    setting_positive(step_um, "step_um")
    if search_um is None:
        area = np.asarray(surface_grains.grains["area_um2"], float)
        diameter = 2.0 * math.sqrt(float(np.median(area)) / math.pi) if len(area) else 0.0
        search_um = max(diameter, 20.0 * step_um)
    setting_positive(search_um, "search_um")
    with warnings.catch_warnings():
        # The placeholder depth only sets the search bounds; its dips are not used.
        warnings.simplefilter("ignore")
        first = measure_serial_section(
            surface_segments,
            surface_grains,
            deeper_segments,
            deeper_grains,
            depth_um=float(search_um * math.tan(math.radians(10.0))),
            depth_sigma_um=0.0,
            step_um=step_um,
            laue_by_phase=laue_by_phase,
            registration=registration,
            fiducials_um=fiducials_um,
            threshold_deg=threshold_deg,
            max_offset_um=float(search_um),
            max_shift_um=float(search_um),
            grid=grid,
            path=path,
            pointer=pointer,
        )
    b = first.boundaries
    seg_id = np.asarray(b["segment_id"], np.int64)
    column = aligned_columns(identification, seg_id)
    kind = column("identification", "")
    dip = column("predicted_dip_deg", np.nan)
    azimuth = column("predicted_dip_azimuth_deg", np.nan)
    # The grain-structure registration rests on the boundaries that moved, so its error is
    # common to every twin: fitted as a shift e beside h. Fiducials fix it independently.
    free_shift = first.registration.method == "grain structure"
    needed = min_twins + (2 if free_shift else 0)
    use = (
        (kind == "coherent_twin")
        & np.isin(b["status"], ("measured", "ill_conditioned"))
        & (dip >= 5.0)
        & (dip <= 85.0)
        & np.isfinite(azimuth)
        & np.isfinite(b["offset_sigma_um"])
    )
    n_twins = int(use.sum())
    if n_twins < needed:
        raise InputError(
            f"Expected depth_um or indent, or at least {needed} identified coherent twins "
            f"paired on both maps to estimate the depth from, got {n_twins}.",
            path=path,
            pointer=pointer,
        )
    dip_rad, az_rad = np.deg2rad(dip[use]), np.deg2rad(azimuth[use])
    # The trace's offset, signed along the twin's predicted dip direction: the measured
    # dip direction is the offset's sign (§8).
    measured_az = np.deg2rad(np.asarray(b["dip_direction_azimuth_deg"], float)[use])
    y = np.where(np.cos(measured_az - az_rad) >= 0.0, 1.0, -1.0) * b["offset_um"][use]
    # Δ = h·cot δ (serial_offset_um, §8), plus e·d for a registration error e.
    x = serial_offset_um(1.0, dip[use])
    design = x[:, None]
    if free_shift:
        design = np.column_stack([x, np.cos(az_rad), np.sin(az_rad)])
    # The two line fits' σ only: the registration's error is common to all the twins, so
    # it is fitted (grain structure) or propagated once (fiducials), not counted per twin.
    deeper_row = rows_by_id(b["deeper_segment_id"][use], deeper_segments["segment_id"])
    line_sigma = np.hypot(
        trace_position_sigma_um(surface_segments, step_um=step_um)[use],
        trace_position_sigma_um(deeper_segments, step_um=step_um)[deeper_row],
    )
    h = _weighted_median(y / x, x**2 / line_sigma**2)
    for _ in range(2):
        # σ of the offset, and of the predicted dip through dΔ/dδ = h·csc²δ.
        sigma = np.hypot(line_sigma, h * np.deg2rad(dip_sigma_deg) / np.sin(dip_rad) ** 2)
        sigma = np.maximum(sigma, 1e-6 * step_um)
        coef, cov, used, ratio = _robust_fit(design, y, sigma)
        h = float(coef[0])
    variance = float(cov[0, 0])
    if not free_shift:
        # ĥ = Σ w x y / Σ w x², and y moves by e·d under a registration error e.
        w = (x**2 / sigma**2)[used] / x[used]
        gain = np.array([np.sum(w * np.cos(az_rad[used])), np.sum(w * np.sin(az_rad[used]))])
        gain /= float(np.sum(x[used] ** 2 / sigma[used] ** 2))
        variance += first.registration.shift_sigma_um**2 * float(gain @ gain)
    registration = first.registration
    if free_shift:
        # The fitted e is the placement's error along the offsets (Δ grows by e·u when the
        # deeper map is placed e too far, p_surface = R p_deeper + shift): take it off.
        fit = design[used] @ coef - y[used]
        registration = Registration(
            registration.shift_x_um - float(coef[1]),
            registration.shift_y_um - float(coef[2]),
            registration.rotation_deg,
            float(np.sqrt(np.mean(fit**2))),
            int(used.sum()),
            "grain structure and coherent twins",
        )
    return TwinDepth(
        depth=LayerDepth(
            depth_um=abs(h), depth_sigma_um=math.sqrt(variance), source="coherent twins"
        ),
        n_used=int(used.sum()),
        n_rejected=int(n_twins - used.sum()),
        scatter_ratio=float(ratio),
        segment_ids=seg_id[use][used],
        registration=registration,
    )
