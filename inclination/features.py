"""Traces inside grains: slip bands, deformation twins and crack facets (§2, §5, §6).

Owns the ``features`` block of a job — straight traces that are not grain boundaries,
each given at a point with its angle or as a drawn line — and what is found for each:
the grain under it, the candidate planes of that grain whose predicted trace lies within
tolerance (the same tolerance function as for boundaries,
:func:`inclination.planes.trace_tolerance_deg`), the identified plane with its predicted
dip and dip direction, and, with a loading direction, the Schmid factors of the slip
systems on that plane (:func:`inclination.crystal.slip.schmid_factor`).

Frames. Job coordinates, angles and the loading direction are in the map's declared axes;
they are converted into the sample frame S once, in :func:`read_feature_traces`
(conventions §2), and every table here is in S. The report converts back.

The 180° ambiguity (conventions §6). A trace never tells the sign of the dip direction:
while the frame is unsettled both azimuths are given (the frame as declared, and turned
180° about the surface normal). Once the frame verdict of the boundaries' sections settles
it, only the settled azimuth is given, and Schmid factors use the settled frame.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np

from ._validation import check_one_of
from .errors import InputError

__all__ = [
    "FEATURE_IDENTIFICATION",
    "FRAME_STATES",
    "features_of_analysis",
    "frame_state",
    "feature_candidate_planes",
    "feature_segments",
    "identify_features",
    "locate_features",
    "measure_features_on_cross_sections",
    "read_feature_traces",
    "read_loading_direction",
    "read_slip_systems",
]

#: Identification classes of a feature trace.
FEATURE_IDENTIFICATION = ("identified", "ambiguous", "none")
#: States of the frame for dip directions (conventions §6).
FRAME_STATES = ("unsettled", "as_declared", "turned_180_about_normal")
_DEFAULT_SIGMA_DEG = 0.5
# Schmid factors closer than this are ties when ranking (symmetric loads give exact ties
# that round-off would otherwise split).
_RANK_TIE = 1e-9
# Lines are sampled at a quarter step: fine enough that no map point the line passes over
# is skipped between two samples.
_SAMPLES_PER_STEP = 4
# A point chord (for cross-sections) runs through at most this many consecutive
# non-indexed samples before it is taken to have left the grain.
_MAX_UNINDEXED_RUN = 8


def _fail(message, path, pointer):
    raise InputError(message, path=path, pointer=pointer)


# ----------------------------------------------------------------------------- job block


def _point(value, path, pointer):
    arr = np.asarray(value, dtype=float)
    if arr.shape != (2,) or not np.all(np.isfinite(arr)):
        _fail(f"Expected a point [x, y] in µm, got {value!r}.", path, pointer)
    return arr


def read_feature_traces(spec, *, axes, path=None, pointer: str = "/features") -> dict:
    """The traces of a job's ``features`` block as a table in S (conventions §2).

    Parameters
    ----------
    spec : mapping
        The block: ``traces`` (each with ``at_um`` and ``trace_angle_deg``, or
        ``line_um``; optional ``kind``, ``angle_sigma_deg``) and optional
        ``angle_sigma_deg`` (default for every trace, 0.5°). Positions and angles in
        the map's declared axes.
    axes : inclination.frames.DeclaredAxes
        The map's declared axes.
    path, pointer : optional
        Job file and JSON pointer of the block, for error messages.

    Returns
    -------
    dict of 1-D arrays, one row per trace in job order
        ``feature_id`` (1, 2, ...), ``kind``, ``given`` (``"point"`` or ``"line"``),
        ``x_um, y_um`` (the point, or the line's midpoint), ``x0_um, y0_um, x1_um,
        y1_um`` (the line's ends; NaN for a point), ``trace_angle_deg`` (S, [0, 180)),
        ``trace_sigma_deg``; all in S.

    Raises
    ------
    InputError
        A trace with both or neither of ``at_um`` and ``line_um``, a point without an
        angle, a line of zero length, a non-positive σ.

    Examples
    --------
    >>> from inclination.frames import DeclaredAxes
    >>> spec = {"traces": [{"at_um": [3, 4], "trace_angle_deg": 30, "kind": "slip"},
    ...                    {"line_um": [[0, 0], [2, 2]]}]}
    >>> t = read_feature_traces(spec, axes=DeclaredAxes("right", "up"))
    >>> t["trace_angle_deg"].round(6).tolist(), t["y_um"].tolist(), t["kind"].tolist()
    ([150.0, 135.0], [-4.0, -1.0], ['slip', ''])
    """
    traces = spec.get("traces") if hasattr(spec, "get") else None
    if not isinstance(traces, list):
        _fail(f"Expected `traces` to be a list, got {traces!r}.", path, f"{pointer}/traces")
    default_sigma = spec.get("angle_sigma_deg", _DEFAULT_SIGMA_DEG)
    n = len(traces)
    out = {
        "feature_id": np.arange(1, n + 1, dtype=np.int64),
        "kind": np.full(n, "", dtype=object),
        "given": np.full(n, "", dtype=object),
        "trace_angle_deg": np.full(n, np.nan),
        "trace_sigma_deg": np.full(n, np.nan),
    }
    anchor = np.full((n, 2), np.nan)
    ends = np.full((n, 2, 2), np.nan)
    for i, t in enumerate(traces):
        where = f"{pointer}/traces/{i}"
        if not isinstance(t, dict) or (("at_um" in t) == ("line_um" in t)):
            _fail(
                "Expected exactly one of 'at_um' and 'line_um', got both or neither.", path, where
            )
        out["kind"][i] = str(t.get("kind", ""))
        sigma = t.get("angle_sigma_deg", default_sigma)
        if isinstance(sigma, bool) or not isinstance(sigma, int | float) or not sigma > 0:
            _fail(
                f"Expected `angle_sigma_deg` > 0, got {sigma!r}.", path, f"{where}/angle_sigma_deg"
            )
        out["trace_sigma_deg"][i] = float(sigma)
        if "at_um" in t:
            out["given"][i] = "point"
            anchor[i] = axes.points_to_sample(_point(t["at_um"], path, f"{where}/at_um"))
            angle = t.get("trace_angle_deg")
            if isinstance(angle, bool) or not isinstance(angle, int | float):
                _fail(
                    f"Expected `trace_angle_deg` (a number, declared axes) with `at_um`, "
                    f"got {angle!r}.",
                    path,
                    f"{where}/trace_angle_deg",
                )
            out["trace_angle_deg"][i] = axes.angle_to_sample_deg(float(angle), kind="trace")
        else:
            out["given"][i] = "line"
            line = t["line_um"]
            if not isinstance(line, list) or len(line) != 2:
                _fail(
                    f"Expected two points [[x, y], [x, y]], got {line!r}.", path, f"{where}/line_um"
                )
            pts = np.stack([_point(p, path, f"{where}/line_um") for p in line])
            pts = axes.points_to_sample(pts)
            d = pts[1] - pts[0]
            if np.hypot(*d) == 0:
                _fail(f"Expected two distinct points, got {line!r}.", path, f"{where}/line_um")
            ends[i] = pts
            anchor[i] = pts.mean(axis=0)
            # The angle in S from the line itself: the same §2 angle as a fitted trace.
            out["trace_angle_deg"][i] = np.mod(np.rad2deg(np.arctan2(d[1], d[0])), 180.0)
    out["x_um"], out["y_um"] = anchor[:, 0], anchor[:, 1]
    out["x0_um"], out["y0_um"] = ends[:, 0, 0], ends[:, 0, 1]
    out["x1_um"], out["y1_um"] = ends[:, 1, 0], ends[:, 1, 1]
    out["kind"] = out["kind"].astype(str)
    out["given"] = out["given"].astype(str)
    return out


def read_loading_direction(spec, *, axes, path=None, pointer: str = "/features"):
    """The block's ``loading_direction`` (declared axes) as a unit vector in S, or None.

    Examples
    --------
    >>> from inclination.frames import DeclaredAxes
    >>> read_loading_direction({"loading_direction": [0, 2, 0]},
    ...                        axes=DeclaredAxes("right", "up")).tolist()
    [0.0, -1.0, 0.0]
    """
    value = spec.get("loading_direction")
    if value is None:
        return None
    arr = np.asarray(value, dtype=float) if isinstance(value, list) else np.zeros(0)
    where = f"{pointer}/loading_direction"
    if arr.shape != (3,) or not np.all(np.isfinite(arr)):
        _fail(f"Expected three numbers [x, y, z] (declared axes), got {value!r}.", path, where)
    length = float(np.linalg.norm(arr))
    if length == 0:
        _fail(f"Expected a non-zero loading direction, got {value!r}.", path, where)
    return axes.vectors_to_sample(arr / length)


def read_slip_systems(phase_entries, phases, *, path=None) -> dict:
    """Each phase's ``slip_systems`` from the job's phase entries, expanded.

    Parameters
    ----------
    phase_entries : sequence of mapping
        The job's ``phases`` entries as written (``slip_systems`` optional).
    phases : sequence of Phase
        The phases built from them, in the same order.

    Returns
    -------
    dict of int to SlipSystems
        Phase id → its systems, for the phases that list some.

    Raises
    ------
    InputError
        An unknown slip-system string or preset, naming ``/phases/i/slip_systems/j``.

    Examples
    --------
    >>> from inclination.crystal.phases import Phase
    >>> entry = {"id": 1, "name": "Cu", "laue": "m-3m",
    ...          "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}
    >>> cu = Phase.from_dict(entry)
    >>> len(read_slip_systems([{**entry, "slip_systems": ["fcc"]}], [cu])[1])
    12
    """
    from .crystal.slip import slip_systems

    # A Phases collection iterates over its ids (a mapping); the records are its values.
    records = list(phases.values()) if isinstance(phases, Mapping) else list(phases)
    out = {}
    for i, (entry, phase) in enumerate(zip(phase_entries, records, strict=True)):
        listed = entry.get("slip_systems")
        if listed is None:
            continue
        pointer = f"/phases/{i}/slip_systems"
        if not isinstance(listed, list) or not listed:
            _fail(f"Expected a non-empty list of slip systems, got {listed!r}.", path, pointer)
        for j, text in enumerate(listed):
            try:
                slip_systems(phase, [text])
            except (TypeError, ValueError) as exc:
                _fail(str(exc), path, f"{pointer}/{j}")
        try:
            out[phase.id] = slip_systems(phase, list(listed))
        except ValueError as exc:
            _fail(str(exc), path, pointer)
    return out


def feature_candidate_planes(phase, slip=None, families=None):
    """The candidate planes of features in one phase.

    The job's ``features.families`` when given; else the planes of the phase's slip
    systems; else the phase's own candidate families (those of the boundaries).

    Returns
    -------
    inclination.crystal.phases.CandidatePlanes

    Examples
    --------
    >>> from inclination.crystal.phases import Phase
    >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m",
    ...     "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}})
    >>> len(feature_candidate_planes(cu)), len(feature_candidate_planes(cu, families=["{111}"]))
    (25, 4)
    """
    if families:
        return replace(phase, families=tuple(families)).candidate_planes()
    if slip is not None:
        return replace(phase, families=slip.plane_families).candidate_planes()
    return phase.candidate_planes()


# ----------------------------------------------------------------------------- the map


def _nearest_points(omap, xy_sample):
    """Row, column of the grid point nearest each position in S, and whether it is on the map.

    The grid of conventions §1: rows ``row_pitch_um`` apart, odd hexagonal rows shifted
    by half a step. A position more than half a step beyond the outermost points is off
    the map.
    """
    xy = np.asarray(xy_sample, dtype=float).reshape(-1, 2)
    h, w = omap.shape
    pitch = float(omap.row_pitch_um)
    step = float(omap.step_x_um)
    row = np.rint(xy[:, 1] / pitch).astype(np.int64)
    shift = np.where((omap.grid == "hexagonal") & (row % 2 == 1), 0.5 * step, 0.0)
    col = np.rint((xy[:, 0] - shift) / step).astype(np.int64)
    on_map = (row >= 0) & (row < h) & (col >= 0) & (col < w)
    return np.clip(row, 0, h - 1), np.clip(col, 0, w - 1), on_map


def _line_samples(p0, p1, step_um):
    n = int(np.ceil(np.hypot(*(p1 - p0)) * _SAMPLES_PER_STEP / step_um)) + 1
    f = np.linspace(0.0, 1.0, max(n, 2))[:, None]
    return p0[None, :] * (1.0 - f) + p1[None, :] * f


def locate_features(
    traces, grain_map, omap, *, path=None, pointer: str = "/features"
) -> np.ndarray:
    """The grain under each trace: at its point, or under its whole line.

    Parameters
    ----------
    traces : dict of 1-D arrays
        :func:`read_feature_traces` (S).
    grain_map : inclination.grains.GrainMap
    omap : inclination.maps.OrientationMap
        The map the grains came from (grid, steps, declared axes for messages).

    Returns
    -------
    ndarray of int, shape (N,)
        Grain id of each trace.

    Raises
    ------
    InputError
        A point or line end off the map, a point on a non-indexed point (no grain),
        a line that meets more than one grain (it crosses a boundary) or none.

    Examples
    --------
    >>> from inclination.maps import OrientationMap
    >>> from inclination.grains import GrainMap
    >>> omap = OrientationMap.from_euler_deg(np.zeros((4, 6, 3)), np.ones((4, 6), int),
    ...                                      grid="square", step_x_um=1.0)
    >>> labels = np.repeat([[1, 1, 1, 2, 2, 2]], 4, axis=0).astype(np.int32)
    >>> gm = GrainMap(labels, {}, {}, 5.0, 4)
    >>> t = {"given": np.array(["point", "line"]), "x_um": np.array([4.0, 1.0]),
    ...      "y_um": np.array([1.0, 1.5]), "x0_um": np.array([np.nan, 0.0]),
    ...      "y0_um": np.array([np.nan, 0.0]), "x1_um": np.array([np.nan, 2.0]),
    ...      "y1_um": np.array([np.nan, 3.0])}
    >>> locate_features(t, gm, omap).tolist()
    [2, 1]
    """
    labels = np.asarray(grain_map.labels)
    step = float(min(omap.step_x_um, omap.row_pitch_um))
    out = np.zeros(len(traces["given"]), dtype=np.int64)

    def shown(xy):
        return np.round(omap.axes.points_to_declared(np.asarray(xy, float)), 3).tolist()

    for i, given in enumerate(np.asarray(traces["given"]).tolist()):
        where = f"{pointer}/traces/{i}"
        if given == "point":
            xy = np.array([traces["x_um"][i], traces["y_um"][i]], float)
            row, col, on_map = _nearest_points(omap, xy)
            if not on_map[0]:
                _fail(
                    f"Expected a point inside the map, got {shown(xy)} outside it.",
                    path,
                    f"{where}/at_um",
                )
            grain = int(labels[row[0], col[0]])
            if grain == 0:
                _fail(
                    f"Expected a point on an indexed grain, got {shown(xy)} on a non-indexed "
                    "point (no grain).",
                    path,
                    f"{where}/at_um",
                )
            out[i] = grain
            continue
        ends = np.array(
            [[traces["x0_um"][i], traces["y0_um"][i]], [traces["x1_um"][i], traces["y1_um"][i]]]
        )
        _, _, ends_on = _nearest_points(omap, ends)
        if not ends_on.all():
            _fail(
                f"Expected the line inside the map, got the end {shown(ends[~ends_on][0])} "
                "outside it.",
                path,
                f"{where}/line_um",
            )
        samples = _line_samples(ends[0], ends[1], step)
        row, col, _ = _nearest_points(omap, samples)
        met = labels[row, col]
        grains = np.unique(met[met > 0])
        if len(grains) == 0:
            _fail(
                "Expected the line to lie on an indexed grain, got only non-indexed points.",
                path,
                f"{where}/line_um",
            )
        if len(grains) > 1:
            mid = labels[_nearest_points(omap, ends.mean(axis=0))[:2]][0]
            own = int(mid) if mid > 0 else int(met[met > 0][0])
            other = met[(met > 0) & (met != own)]
            first = samples[np.flatnonzero(met == other[0])[0]]
            _fail(
                f"Expected the line to stay inside one grain, got a line that crosses from grain "
                f"{own} into grain {int(other[0])} near {shown(first)}.",
                path,
                f"{where}/line_um",
            )
        out[i] = int(grains[0])
    return out


def feature_segments(traces, grain_ids, grain_map, omap) -> dict:
    """Each trace as a straight segment in S, for the cross-section stage (§7).

    A drawn line is its own segment. A trace given at a point is extended along its angle
    both ways until it leaves its grain (another grain, the map's edge, or a run of
    non-indexed points): a slip band crosses its grain.

    Returns
    -------
    dict of 1-D arrays
        ``feature_id, x0_um, y0_um, x1_um, y1_um, trace_angle_deg, trace_sigma_deg``.
    """
    labels = np.asarray(grain_map.labels)
    step = float(min(omap.step_x_um, omap.row_pitch_um))
    ends = np.stack(
        [
            np.stack([traces["x0_um"], traces["y0_um"]], axis=-1),
            np.stack([traces["x1_um"], traces["y1_um"]], axis=-1),
        ],
        axis=1,
    ).astype(float)
    for i in np.flatnonzero(np.asarray(traces["given"]) == "point"):
        theta = np.deg2rad(traces["trace_angle_deg"][i])
        u = np.array([np.cos(theta), np.sin(theta)])
        p = np.array([traces["x_um"][i], traces["y_um"][i]], float)
        reach = float(np.hypot(*omap.shape) * max(omap.step_x_um, omap.row_pitch_um))
        s = np.arange(0.0, reach, step / _SAMPLES_PER_STEP)
        for end, sign in ((0, -1.0), (1, 1.0)):
            pts = p[None, :] + sign * s[:, None] * u[None, :]
            row, col, on_map = _nearest_points(omap, pts)
            lab = np.where(on_map, labels[row, col], -1)
            unindexed = lab == 0
            run = np.zeros(len(lab), dtype=np.int64)
            for k in range(1, len(lab)):
                run[k] = run[k - 1] + 1 if unindexed[k] else 0
            stop = (lab != grain_ids[i]) & ~unindexed | (run > _MAX_UNINDEXED_RUN)
            first_stop = int(np.argmax(stop)) if stop.any() else len(s)
            # The chord ends on the last sample still in the grain, not in a gap after it.
            inside = np.flatnonzero(lab[:first_stop] == grain_ids[i])
            ends[i, end] = pts[inside[-1] if len(inside) else 0]
    return {
        "feature_id": np.asarray(traces["feature_id"]),
        "x0_um": ends[:, 0, 0],
        "y0_um": ends[:, 0, 1],
        "x1_um": ends[:, 1, 0],
        "y1_um": ends[:, 1, 1],
        "trace_angle_deg": np.asarray(traces["trace_angle_deg"], float),
        "trace_sigma_deg": np.asarray(traces["trace_sigma_deg"], float),
    }


def measure_features_on_cross_sections(
    sections, feature_segs, segments, *, axes, step_um, bounds_um, path=None
) -> dict:
    """Measured dips of feature traces on the job's cross-sections, as for boundaries (§7).

    Each cross-section is measured by :func:`inclination.sections.measure_cross_section`
    with the boundary segments and the feature segments together, so that an entry near
    both a boundary and a feature is ambiguous, as it would be for two boundaries. The
    rows matched to a feature are kept; the best per feature (smallest dip σ,
    :func:`inclination.compare.best_measurements`).

    Returns
    -------
    dict of 1-D arrays
        The measurement columns of the sections, with ``feature_id`` in place of
        ``segment_id``; one row per measured feature.
    """
    from .compare import best_measurements
    from .sections import CrossSection, measure_cross_section

    seg_ids = np.asarray(segments["segment_id"]) if segments is not None else np.zeros(0, int)
    base = int(seg_ids.max()) + 1 if len(seg_ids) else 0
    keys = ("x0_um", "y0_um", "x1_um", "y1_um", "trace_angle_deg", "trace_sigma_deg")
    boundary = {k: np.zeros(0) for k in keys}
    if segments is not None:
        keep = ~np.asarray(segments.get("too_short", np.zeros(len(seg_ids), bool)), bool)
        boundary = {k: np.asarray(segments[k], float)[keep] for k in keys}
        seg_ids = seg_ids[keep]
    combined = {k: np.concatenate([boundary[k], np.asarray(feature_segs[k], float)]) for k in keys}
    feature_ids = np.asarray(feature_segs["feature_id"], dtype=np.int64)
    combined["segment_id"] = np.concatenate([seg_ids, base + feature_ids]).astype(np.int64)
    tables = []
    for index, section in enumerate(sections):
        if section.get("kind") != "cross-section":
            continue
        # The job entry becomes a typed record in S, as the sections stage does (§2).
        record = CrossSection.from_job_entry(
            section, axes=axes, path=path, pointer=f"/sections/{index}"
        )
        table = measure_cross_section(
            record,
            combined,
            step_um=step_um,
            bounds_um=bounds_um,
            path=path,
            pointer=f"/sections/{index}",
        )
        ids = np.asarray(table["segment_id"])
        mine = ids >= base + 1 if len(feature_ids) else np.zeros(len(ids), bool)
        part = {k: np.asarray(v)[mine] for k, v in table.items()}
        part["segment_id"] = part["segment_id"] - base
        tables.append(part)
    best = best_measurements(*tables) if tables else {}
    if not best:
        return {"feature_id": np.zeros(0, dtype=np.int64)}
    best["feature_id"] = best.pop("segment_id")
    return best


# ----------------------------------------------------------------------------- identification


def _joined(values) -> str:
    return ";".join(values)


def identify_features(
    traces,
    grain_ids,
    grains,
    phases,
    *,
    slip=None,
    families=None,
    loading_direction_sample=None,
    frame: str = "unsettled",
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
) -> dict:
    """Identify the plane of each feature trace and its Schmid factors (§5, §6).

    Every candidate plane of the trace's grain (:func:`feature_candidate_planes`) is
    predicted with :func:`inclination.planes.predict_planes` from the grain's mean
    orientation; it fits when its trace deviation is at most
    :func:`inclination.planes.trace_tolerance_deg` of the trace's σ and the predicted σ
    (:func:`inclination.planes.trace_sigma_predicted_deg` of the grain's spread and the
    plane's dip) — the boundaries' rule, with their settings. One fitting plane is
    ``identified``, several ``ambiguous`` (all listed, none chosen), none ``none``.

    Parameters
    ----------
    traces : dict of 1-D arrays
        :func:`read_feature_traces` (S).
    grain_ids : array_like of int, shape (N,)
        :func:`locate_features`.
    grains : dict of 1-D arrays
        Grains table: ``grain_id``, ``phase``, ``quat`` (G, 4) (sample to crystal),
        ``spread_mean_deg``.
    phases : sequence of Phase
    slip : dict of int to SlipSystems, optional
        Slip systems by phase id (:func:`read_slip_systems`).
    families : sequence of str, optional
        Candidate families for every phase, in place of the slip planes.
    loading_direction_sample : array_like, shape (3,), optional
        Uniaxial load axis in S; without it the Schmid columns are absent (NaN, -1).
    frame : {'unsettled', 'as_declared', 'turned_180_about_normal'}
        What the frame verdict says (conventions §6). Unsettled: both dip azimuths are
        given. Turned: normals, azimuths and Schmid factors are those of the data turned
        back by 180° about Z_S.
    k, floor_deg, max_tolerance_deg : float
        Tolerance settings, as for boundaries.

    Returns
    -------
    dict of 1-D arrays, one row per trace in input order (S)
        The trace columns, and ``grain_id``, ``phase``, ``identification``, ``plane``,
        ``family``, ``trace_deviation_deg``, ``tolerance_deg``,
        ``candidates_within_tolerance``, ``candidates`` and
        ``candidate_deviations_deg`` (";"-joined, best first),
        ``predicted_trace_angle_deg``, ``predicted_dip_deg``,
        ``predicted_dip_azimuth_deg`` (the settled frame, or as declared while
        unsettled), ``predicted_dip_azimuth_if_turned_deg`` (the other sense while
        unsettled, else NaN), ``frame``, ``predicted_normal_x/y/z`` (n_z >= 0),
        ``schmid_factor`` (largest on the plane), ``slip_direction`` (its system's
        direction), ``schmid_factors`` (";"-joined ``direction m`` of every system on the
        plane), ``schmid_rank`` (1 = the plane carries the grain's largest factor; ties
        share a rank), ``schmid_factor_grain_max``, ``candidate_schmid_factors``.

    Examples
    --------
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.crystal.slip import slip_systems
    >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m",
    ...     "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}})
    >>> grains = {"grain_id": np.array([1]), "phase": np.array([1]),
    ...           "quat": np.array([[1.0, 0, 0, 0]]), "spread_mean_deg": np.array([0.2])}
    >>> traces = {"feature_id": np.array([1]), "kind": np.array(["slip"]),
    ...           "trace_angle_deg": np.array([135.3]), "trace_sigma_deg": np.array([0.5])}
    >>> out = identify_features(traces, [1], grains, [cu], slip={1: slip_systems(cu, ["fcc"])},
    ...                         loading_direction_sample=[1.0, 0.0, 0.0])
    >>> out["identification"].tolist(), out["candidates"].tolist()
    (['ambiguous'], ['(1 1 1);(1 1 -1)'])
    >>> out["candidate_schmid_factors"].tolist()
    ['0.408;0.408']
    """
    from .crystal.rotations import quat_apply
    from .planes import (
        predict_planes,
        trace_deviation_deg,
        trace_sigma_predicted_deg,
        trace_tolerance_deg,
    )

    check_one_of(frame, "frame", FRAME_STATES)
    slip = dict(slip or {})
    theta = np.asarray(traces["trace_angle_deg"], float)
    sigma_m = np.asarray(traces["trace_sigma_deg"], float)
    grain_ids = np.asarray(grain_ids, dtype=np.int64)
    n = len(theta)
    by_id = {int(g): r for r, g in enumerate(np.asarray(grains["grain_id"]).tolist())}
    missing = [int(g) for g in grain_ids if int(g) not in by_id]
    if missing:
        raise ValueError(f"Expected every grain id in `grains`, got {missing[0]}.")
    rows = np.array([by_id[int(g)] for g in grain_ids], dtype=np.int64)
    quat = np.asarray(grains["quat"], float).reshape(-1, 4)[rows] if n else np.zeros((0, 4))
    spread = np.asarray(grains["spread_mean_deg"], float)[rows] if n else np.zeros(0)
    phase_of = np.asarray(grains["phase"])[rows] if n else np.zeros(0, int)
    records = phases.values() if isinstance(phases, Mapping) else phases
    phase_by_id = {p.id: p for p in records}
    load = None
    if loading_direction_sample is not None:
        load = np.asarray(loading_direction_sample, float)
        load = load / np.linalg.norm(load)
    # A data frame turned 180° about Z_S (conventions §6): true vectors in S are the
    # computed ones turned back, R = diag(-1, -1, 1). For the load it is the same turn.
    turn = np.diag([-1.0, -1.0, 1.0]) if frame == "turned_180_about_normal" else np.eye(3)

    floats = (
        "trace_deviation_deg",
        "tolerance_deg",
        "predicted_trace_angle_deg",
        "predicted_dip_deg",
        "predicted_dip_azimuth_deg",
        "predicted_dip_azimuth_if_turned_deg",
        "predicted_normal_x",
        "predicted_normal_y",
        "predicted_normal_z",
        "schmid_factor",
        "schmid_factor_grain_max",
    )
    strings = (
        "identification",
        "plane",
        "family",
        "candidates",
        "candidate_deviations_deg",
        "slip_direction",
        "schmid_factors",
        "candidate_schmid_factors",
    )
    out = {key: np.full(n, np.nan) for key in floats}
    out |= {key: np.full(n, "", dtype=object) for key in strings}
    out["candidates_within_tolerance"] = np.zeros(n, dtype=np.int64)
    out["schmid_rank"] = np.full(n, -1, dtype=np.int64)
    out["identification"][:] = "none"

    for pid in np.unique(phase_of).tolist():
        phase = phase_by_id[int(pid)]
        systems = slip.get(int(pid))
        planes = feature_candidate_planes(phase, systems, families)
        here = np.flatnonzero(phase_of == pid)
        pred = predict_planes(quat[here], planes.normal_crystal)
        sigma_p = trace_sigma_predicted_deg(spread[here, None], pred.dip_deg)
        tol = trace_tolerance_deg(
            sigma_m[here, None],
            sigma_p,
            k=k,
            floor_deg=floor_deg,
            max_tolerance_deg=max_tolerance_deg,
        )
        dev = trace_deviation_deg(theta[here, None], pred.trace_angle_deg)
        fits = pred.has_trace & (dev <= tol)
        schmid_all = plane_max = None
        if systems is not None and load is not None:
            from .crystal.slip import schmid_factor

            load_crystal = quat_apply(quat[here], (turn @ load)[None, :])
            schmid_all = schmid_factor(
                load_crystal[:, None, :],
                systems.normal_crystal[None],
                systems.direction_crystal[None],
            )
            # Systems on each candidate plane: the same plane up to sign, in C.
            on_plane = np.abs(planes.normal_crystal @ systems.normal_crystal.T) > 1.0 - 1e-9
            plane_max = np.where(on_plane[None], schmid_all[:, None, :], -1.0).max(axis=2)
        for r, i in enumerate(here):
            fit = np.flatnonzero(fits[r])
            fit = fit[np.argsort(dev[r, fit], kind="stable")]
            out["candidates_within_tolerance"][i] = len(fit)
            out["candidates"][i] = _joined(planes.member[j] for j in fit)
            out["candidate_deviations_deg"][i] = _joined(f"{dev[r, j]:.2f}" for j in fit)
            if plane_max is not None:
                out["schmid_factor_grain_max"][i] = float(schmid_all[r].max())
                out["candidate_schmid_factors"][i] = _joined(
                    f"{plane_max[r, j]:.3f}" if plane_max[r, j] >= 0 else "" for j in fit
                )
            if len(fit) != 1:
                out["identification"][i] = "ambiguous" if len(fit) > 1 else "none"
                continue
            j = int(fit[0])
            out["identification"][i] = "identified"
            out["plane"][i] = planes.member[j]
            out["family"][i] = planes.family[j]
            out["trace_deviation_deg"][i] = dev[r, j]
            out["tolerance_deg"][i] = tol[r, j]
            out["predicted_trace_angle_deg"][i] = pred.trace_angle_deg[r, j]
            out["predicted_dip_deg"][i] = pred.dip_deg[r, j]
            azimuth = pred.dip_azimuth_deg[r, j]
            normal = pred.normal_sample[r, j]
            if frame == "turned_180_about_normal":
                azimuth = np.mod(azimuth + 180.0, 360.0)
                normal = turn @ normal
            elif frame == "unsettled":
                out["predicted_dip_azimuth_if_turned_deg"][i] = np.mod(azimuth + 180.0, 360.0)
            out["predicted_dip_azimuth_deg"][i] = azimuth
            for c, axis in enumerate("xyz"):
                out[f"predicted_normal_{axis}"][i] = normal[c]
            if plane_max is None or plane_max[r, j] < 0:
                continue
            on = np.flatnonzero(on_plane[j])
            on = on[np.argsort(-schmid_all[r, on], kind="stable")]
            out["schmid_factor"][i] = schmid_all[r, on[0]]
            out["slip_direction"][i] = systems.direction[on[0]]
            out["schmid_factors"][i] = _joined(
                f"{systems.direction[s]} {schmid_all[r, s]:.3f}" for s in on
            )
            higher = schmid_all[r] > schmid_all[r, on[0]] + _RANK_TIE
            out["schmid_rank"][i] = 1 + int(np.count_nonzero(higher))

    head = {key: np.asarray(traces[key]) for key in traces}
    tail = {key: (v.astype(str) if v.dtype == object else v) for key, v in out.items()}
    tail["frame"] = np.full(n, frame).astype(str)
    return head | {"grain_id": grain_ids, "phase": np.asarray(phase_of, dtype=np.int64)} | tail


# ----------------------------------------------------------------------------- the run


def frame_state(verdict) -> str:
    """The frame state for dip directions from a frame verdict (or None): one of FRAME_STATES.

    Examples
    --------
    >>> frame_state(None)
    'unsettled'
    """
    name = getattr(verdict, "verdict", None)
    return name if name in FRAME_STATES[1:] else "unsettled"


def features_of_analysis(analysis) -> dict:
    """The features table of one run (S): read, located, identified, measured on sections.

    Takes what the run computed (:class:`inclination.pipeline.Analysis`: the job, the map,
    the grains, the segments, the sections' frame verdict) and returns the table of
    :func:`identify_features` with the measured columns of
    :func:`measure_features_on_cross_sections` (``measured_dip_deg``,
    ``measured_dip_sigma_deg``, ``measured_dip_azimuth_deg``, NaN where no section
    crosses the trace) and ``sense`` (:func:`inclination.compare.boundary_sense` of an
    identified trace with a measured dip direction, else ``""``).
    """
    job, omap, grain_map = analysis.job, analysis.omap, analysis.grain_map
    path = job.source_path
    spec = job.raw["features"]
    traces = read_feature_traces(spec, axes=omap.axes, path=path)
    load = read_loading_direction(spec, axes=omap.axes, path=path)
    slip = read_slip_systems(job.raw["phases"], job.phases, path=path)
    grain_ids = locate_features(traces, grain_map, omap, path=path)
    p = job.planes
    table = identify_features(
        traces,
        grain_ids,
        grain_map.grains,
        job.phases,
        slip=slip,
        families=spec.get("families"),
        loading_direction_sample=load,
        frame=frame_state(analysis.verdict),
        k=p["k"],
        floor_deg=p["floor_deg"],
        max_tolerance_deg=p["max_tolerance_deg"],
    )
    n = len(traces["feature_id"])
    measured = {"feature_id": np.zeros(0, dtype=np.int64)}
    if analysis.stage == "sections" and job.sections:
        xy = omap.positions_sample_um()
        bounds = (
            float(xy[..., 0].min()),
            float(xy[..., 1].min()),
            float(xy[..., 0].max()),
            float(xy[..., 1].max()),
        )
        measured = measure_features_on_cross_sections(
            job.sections,
            feature_segments(traces, grain_ids, grain_map, omap),
            analysis.segments,
            axes=omap.axes,
            step_um=float(min(omap.step_x_um, omap.step_y_um)),
            bounds_um=bounds,
            path=path,
        )
    row = {int(f): i for i, f in enumerate(np.asarray(measured["feature_id"]).tolist())}
    take = np.array([row.get(int(f), -1) for f in traces["feature_id"]], dtype=np.int64)
    found = take >= 0
    for name, source in (
        ("measured_dip_deg", "measured_dip_deg"),
        ("measured_dip_sigma_deg", "measured_dip_sigma_deg"),
        ("measured_dip_azimuth_deg", "dip_direction_azimuth_deg"),
        ("measured_dip_azimuth_sigma_deg", "dip_direction_sigma_deg"),
    ):
        column = np.full(n, np.nan)
        if found.any():
            column[found] = np.asarray(measured[source], float)[take[found]]
        table[name] = column
    table["sense"] = np.full(n, "", dtype=object)
    decided = found & (table["identification"] == "identified")
    decided &= np.isfinite(table["measured_dip_azimuth_deg"])
    if decided.any():
        from .compare import boundary_sense

        # The sense is judged against the frame as declared, as for boundaries (§6).
        azimuth = table["predicted_dip_azimuth_deg"][decided]
        if table["frame"][0] == "turned_180_about_normal":
            azimuth = np.mod(azimuth + 180.0, 360.0)
        senses = boundary_sense(
            azimuth,
            table["predicted_dip_deg"][decided],
            table["measured_dip_azimuth_deg"][decided],
            table["measured_dip_azimuth_sigma_deg"][decided],
            measured_dip_deg=table["measured_dip_deg"][decided],
            measured_dip_sigma_deg=table["measured_dip_sigma_deg"][decided],
            predicted_azimuth_sigma_deg=table["tolerance_deg"][decided] / 2.0,
            predicted_dip_sigma_deg=table["tolerance_deg"][decided] / 2.0,
        )
        table["sense"][decided] = np.asarray(senses["sense"], dtype=object)
    table["sense"] = table["sense"].astype(str)
    return table
