"""Identification of boundary planes from their traces: the segment and candidate tables.

Owns the matching of each straight boundary segment against the candidate planes of its two
grains, the classes of a segment (:data:`IDENTIFICATION_CLASSES`), the misorientation and Σ
columns of the identification table, and the long table of every candidate
(:func:`match_planes`, :func:`identify`, :func:`candidates`). Every formula it applies comes
from :mod:`inclination.planes.predict` (prediction, tolerance, deviation, fit, chance) and
:mod:`inclination.planes.twins` (the Σ3 twin test); nothing is computed here that they own.

Traces never decide the sign of the dip direction (conventions §6): every azimuth is for the
frame as declared, in S (conventions §2, §5); the report converts to the user's axes.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .._validation import as_float_array, check_finite
from ..crystal.phases import Phase
from ..errors import InputError, SettingError
from ..grains import GrainMap
from ._tables import column
from .geometry import PlanePrediction
from .predict import (
    ToleranceSettings,
    chance_fit,
    pair_spread_deg,
    predict_planes,
    shared_plane,
    trace_fit,
    trace_tolerance_deg,
)
from .twins import coherent_twin_test

__all__ = ["IDENTIFICATION_CLASSES", "PlaneMatch", "candidates", "identify", "match_planes"]

IDENTIFICATION_CLASSES = ("coherent_twin", "identified", "ambiguous", "none")
_SEGMENT_KEYS = (
    "segment_id",
    "grain_a",
    "grain_b",
    "phase_a",
    "phase_b",
    "trace_angle_deg",
    "trace_sigma_deg",
)
# Segments are matched in blocks so that the (n, M_a, M_b) pair arrays stay small.
_BLOCK = 2048
# The misorientation axis is named by the nearest direction with indices up to this size.
_MAX_AXIS_INDEX = 3
_MISORIENTATION_KEYS = (
    "misorientation_deg",
    "axis_a",
    "axis_a_deviation_deg",
    "sigma",
    "sigma_deviation_deg",
)

#: What ``phases`` may be until :mod:`inclination.crystal` has its own collection of phases.
PhasesLike = Mapping[int, Phase] | Sequence[Phase]


def _phases_by_id(phases: PhasesLike) -> dict[int, Phase]:
    """The one entry point of ``phases`` into this module: phase id → Phase.

    When :mod:`inclination.crystal` has its typed collection of phases, this becomes a
    call to it.
    """
    if isinstance(phases, Mapping):
        items = list(phases.items())
    elif isinstance(phases, Sequence) and not isinstance(phases, str):
        items = [(None, phase) for phase in phases]
    else:
        raise TypeError(
            "Expected `phases` to be a sequence of Phase records or a mapping id → Phase, "
            f"got {type(phases).__name__}."
        )
    out = {}
    for key, phase in items:
        if not isinstance(phase, Phase):
            raise TypeError(f"Expected `phases` to hold Phase records, got {type(phase).__name__}.")
        if key is not None and key != phase.id:
            raise ValueError(
                f"Expected `phases` keys to be the phases' ids, got key {key!r} for phase "
                f"{phase.id}."
            )
        out[int(phase.id)] = phase
    return out


def _grain_rows(grain_ids: np.ndarray, wanted: np.ndarray, name: str) -> np.ndarray:
    """Row of ``grains`` for each wanted grain id; a missing id is an error."""
    order = np.argsort(grain_ids, kind="stable")
    ordered = grain_ids[order]
    if len(ordered):
        pos = np.minimum(np.searchsorted(ordered, wanted), len(ordered) - 1)
        found = ordered[pos] == wanted
    else:
        pos = np.zeros(len(wanted), dtype=np.int64)
        found = np.zeros(len(wanted), dtype=bool)
    if not np.all(found):
        row = int(np.flatnonzero(~found)[0])
        raise ValueError(
            f"Expected every `segments` {name} to be a grain_id of `grains`, "
            f"got {int(wanted[row])} at row {row}."
        )
    return order[pos]


def _low_index_directions(lattice) -> tuple[np.ndarray, list[str]]:
    """Directions [uvw] with no common factor and indices up to 3, low indices first."""
    from ..crystal.indices import format_indices, low_indices
    from ..crystal.lattice import direction_crystal

    grid = low_indices(_MAX_AXIS_INDEX, kind="direction")
    return direction_crystal(lattice, grid), [format_indices(g, "direction") for g in grid]


def _nearest_direction(axis_crystal: np.ndarray, lattice) -> tuple[np.ndarray, np.ndarray]:
    vectors, labels = _low_index_directions(lattice)
    cos = np.clip(axis_crystal @ vectors.T, -1.0, 1.0)
    best = np.argmax(cos, axis=1)
    angle = np.rad2deg(np.arccos(cos[np.arange(len(best)), best]))
    return np.array([labels[b] for b in best], dtype=object).astype(str), angle


def _classify_sigma(angle_deg, axis_crystal, criterion):
    from ..crystal.csl import classify_misorientation

    result = classify_misorientation(angle_deg, axis_crystal, criterion=criterion)
    labels = np.asarray(result.label, dtype=str)
    deviation = np.asarray(result.deviation_deg, dtype=float)
    return labels, deviation


def _misorientation_columns(qa, qb, phase, criterion):
    """Disorientation angle, nearest low-index axis and Σ class of same-phase pairs."""
    from ..crystal.symmetry import disorientation

    n = len(qa)
    sigma = np.full(n, "", dtype=object)
    sigma_dev = np.full(n, np.nan)
    if n == 0:
        return np.zeros(0), np.zeros(0, str), np.zeros(0), sigma.astype(str), sigma_dev
    dis = disorientation(qa, qb, phase.laue, setting=phase.setting)
    axis, axis_dev = _nearest_direction(np.asarray(dis.axis_crystal), phase.lattice)
    if phase.laue == "m-3m":
        labels, deviation = _classify_sigma(dis.angle_deg, dis.axis_crystal, criterion)
        sigma = labels
        sigma_dev = np.where(labels != "", deviation, np.nan)
    return np.asarray(dis.angle_deg, float), axis, axis_dev, np.asarray(sigma, str), sigma_dev


def _empty_row_table(n: int) -> dict:
    floats = (
        "misorientation_deg",
        "axis_a_deviation_deg",
        "sigma_deviation_deg",
        "trace_deviation_deg",
        "tolerance_deg",
        "normal_deviation_deg",
        "chance_fit",
        "predicted_trace_angle_deg",
        "predicted_dip_deg",
        "predicted_dip_azimuth_deg",
        "predicted_normal_x",
        "predicted_normal_y",
        "predicted_normal_z",
    )
    strings = ("axis_a", "sigma", "plane_a", "plane_b", "family_a", "family_b", "twin_test")
    out = {key: np.full(n, np.nan) for key in floats}
    out |= {key: np.full(n, "", dtype=object) for key in strings}
    out["candidates_within_tolerance"] = np.zeros(n, dtype=np.int64)
    out["common_planes_within_tolerance"] = np.zeros(n, dtype=np.int64)
    out["identification"] = np.full(n, "none", dtype=object)
    return out


def _side_fit(pred: PlanePrediction, theta, sigma_m, spread, settings: ToleranceSettings):
    """Fit of every plane of one grain to the segments' traces, shapes (n, M)."""
    return trace_fit(theta[:, None], sigma_m[:, None], pred, spread[:, None], **_options(settings))


def _options(settings: ToleranceSettings) -> dict:
    return {
        "k": settings.k,
        "floor_deg": settings.floor_deg,
        "max_tolerance_deg": settings.max_tolerance_deg,
    }


def _match_block(blk, planes_a, planes_b, phase, settings, want_table, want_long):
    """Candidates and identification of one block of segments of one phase pair."""
    theta, sigma_m, qa, qb, sa, sb = (
        blk[key] for key in ("theta", "sigma_m", "qa", "qb", "sa", "sb")
    )
    n = len(theta)
    options = _options(settings)
    out = _empty_row_table(n)
    pred_a = predict_planes(qa, planes_a.normal_crystal)
    pred_b = predict_planes(qb, planes_b.normal_crystal)
    side_a = _side_fit(pred_a, theta, sigma_m, sa, settings)
    side_b = _side_fit(pred_b, theta, sigma_m, sb, settings)
    dev_a, tol_a, fit_a = side_a.trace_deviation_deg, side_a.tolerance_deg, side_a.fits
    dev_b, tol_b, fit_b = side_b.trace_deviation_deg, side_b.tolerance_deg, side_b.fits

    # Common planes: a plane of A and one of B whose normals in S agree within the
    # tolerance that the two grains' orientation scatter allows (the trace tolerance rule
    # applied to the two spreads).
    cos = np.einsum("nai,nbi->nab", pred_a.normal_sample, pred_b.normal_sample)
    angle = np.rad2deg(np.arccos(np.clip(np.abs(cos), 0.0, 1.0)))
    tol_normal = trace_tolerance_deg(sa, sb, **options)
    s, i, j = np.nonzero(angle <= tol_normal[:, None, None])
    pair = shared_plane(pred_a.normal_sample[s, i], pred_b.normal_sample[s, j])
    pair_fit = trace_fit(theta[s], sigma_m[s], pair, pair_spread_deg(sa[s], sb[s]), **options)
    dev_p, tol_p, fit_p = pair_fit.trace_deviation_deg, pair_fit.tolerance_deg, pair_fit.fits
    n_common = np.bincount(s[fit_p], minlength=n)
    fitting = np.flatnonzero(fit_p)
    order = fitting[np.lexsort((angle[s, i, j][fitting], dev_p[fitting], s[fitting]))]
    seg_of, first = np.unique(s[order], return_index=True)
    best = order[first]

    # A plane the two grains share, fitting on both sides, is one candidate, not two.
    both = fit_a[s, i] & fit_b[s, j]
    out["candidates_within_tolerance"] = (
        fit_a.sum(axis=1) + fit_b.sum(axis=1) - np.bincount(s[both], minlength=n)
    )
    out["common_planes_within_tolerance"] = n_common
    has_trace = np.concatenate([pred_a.has_trace, pred_b.has_trace], axis=1)
    tol_all = np.concatenate([tol_a, tol_b], axis=1)
    angle_all = np.concatenate([pred_a.trace_angle_deg, pred_b.trace_angle_deg], axis=1)
    # A plane without a trace is no candidate: chance_fit skips NaN; a shared plane's
    # two windows overlap and count once in the union.
    out["chance_fit"] = chance_fit(angle_all, np.where(has_trace, tol_all, np.nan))

    def put(rows, geometry, index, dev, tol):
        out["trace_deviation_deg"][rows] = dev
        out["tolerance_deg"][rows] = tol
        out["predicted_trace_angle_deg"][rows] = geometry.trace_angle_deg[index]
        out["predicted_dip_deg"][rows] = geometry.dip_deg[index]
        out["predicted_dip_azimuth_deg"][rows] = geometry.dip_azimuth_deg[index]
        for c, axis in enumerate("xyz"):
            out[f"predicted_normal_{axis}"][rows] = geometry.normal_sample[index + (c,)]

    # Best common pair first; without one, the best single plane of either grain.
    put(seg_of, pair, (best,), dev_p[best], tol_p[best])
    out["normal_deviation_deg"][seg_of] = angle[s[best], i[best], j[best]]
    out["plane_a"][seg_of] = [planes_a.member[x] for x in i[best]]
    out["plane_b"][seg_of] = [planes_b.member[x] for x in j[best]]
    out["family_a"][seg_of] = [planes_a.family[x] for x in i[best]]
    out["family_b"][seg_of] = [planes_b.family[x] for x in j[best]]
    single = np.concatenate([np.where(fit_a, dev_a, np.inf), np.where(fit_b, dev_b, np.inf)], 1)
    lone = np.flatnonzero((n_common == 0) & np.isfinite(single).any(axis=1))
    pick = np.argmin(single[lone], axis=1)
    m_a = len(planes_a)
    for on_a, planes, pred, tol, side in (
        (True, planes_a, pred_a, tol_a, "a"),
        (False, planes_b, pred_b, tol_b, "b"),
    ):
        here = (pick < m_a) if on_a else (pick >= m_a)
        rows, col = lone[here], pick[here] - (0 if on_a else m_a)
        put(rows, pred, (rows, col), single[rows, pick[here]], tol[rows, col])
        out[f"plane_{side}"][rows] = [planes.member[x] for x in col]
        out[f"family_{side}"][rows] = [planes.family[x] for x in col]

    identification = out["identification"]
    identification[(fit_a.any(axis=1) | fit_b.any(axis=1)) | (n_common >= 2)] = "ambiguous"
    identification[n_common == 1] = "identified"

    # Σ is known only when the segment table is built (it carries the misorientation).
    if phase is not None and want_table:
        twins = np.flatnonzero(blk["sigma"] == "3")
        if len(twins):
            _coherent_twins(out, twins, blk, tol_normal, phase, settings)

    if not want_long:
        return out, []
    # One row per plane and grain for the long candidate table.
    shared_a = np.full(fit_a.shape, -1)
    shared_b = np.full(fit_b.shape, -1)
    shared_a[s, i] = j
    shared_b[s, j] = i
    long = []
    for side, planes, other, pred, dev, tol, fit, shared in (
        ("a", planes_a, planes_b, pred_a, dev_a, tol_a, fit_a, shared_a),
        ("b", planes_b, planes_a, pred_b, dev_b, tol_b, fit_b, shared_b),
    ):
        m = len(planes)
        row, col = np.divmod(np.arange(n * m), m)
        other_member = np.array(list(other.member) + [""], dtype=object)
        rr, cc, sh = np.arange(n)[:, None], np.arange(m)[None, :], np.maximum(shared, 0)
        pair_angle = angle[rr, cc, sh] if side == "a" else angle[rr, sh, cc]
        shared_angle = np.where(shared >= 0, pair_angle, np.nan)
        long.append(
            {
                "block_row": row,
                "side": np.full(n * m, side, dtype=object),
                "plane_index": col,
                "family": np.array(planes.family, dtype=object)[col],
                "plane": np.array(planes.member, dtype=object)[col],
                "normal_x": pred.normal_sample[..., 0].ravel(),
                "normal_y": pred.normal_sample[..., 1].ravel(),
                "normal_z": pred.normal_sample[..., 2].ravel(),
                "trace_angle_deg": pred.trace_angle_deg.ravel(),
                "trace_deviation_deg": dev.ravel(),
                "tolerance_deg": tol.ravel(),
                "dip_deg": pred.dip_deg.ravel(),
                "dip_azimuth_deg": pred.dip_azimuth_deg.ravel(),
                "has_trace": pred.has_trace.ravel(),
                "fits": fit.ravel(),
                "shared_with": other_member[shared.ravel()],
                "shared_normal_deviation_deg": shared_angle.ravel(),
            }
        )
    return out, long


def _coherent_twins(out, rows, blk, tol_normal, phase, settings):
    """The twin test of Σ3 rows (:func:`coherent_twin_test`), and the coherent_twin class."""
    test = coherent_twin_test(
        blk["theta"][rows],
        blk["sigma_m"][rows],
        blk["qa"][rows],
        blk["qb"][rows],
        blk["sa"][rows],
        blk["sb"][rows],
        phase.lattice,
        **_options(settings),
    )
    passed = test.passed
    out["twin_test"][rows] = np.where(passed, "pass", "fail")
    best = np.stack([out[f"predicted_normal_{a}"][rows] for a in "xyz"], axis=-1)
    with np.errstate(invalid="ignore"):
        to_best = np.rad2deg(
            np.arccos(
                np.clip(np.abs(np.einsum("ni,ni->n", best, test.common_111.normal_sample)), 0, 1)
            )
        )
    on_111 = (out["common_planes_within_tolerance"][rows] > 0) & (to_best <= tol_normal[rows])
    out["identification"][rows[passed & on_111]] = "coherent_twin"


def _check_criterion(sigma_criterion: str) -> None:
    from ..crystal.csl import CRITERIA

    if sigma_criterion not in CRITERIA:
        raise SettingError(
            f"Expected `sigma_criterion` to be one of {tuple(CRITERIA)}, got {sigma_criterion!r}."
        )


def _grain_table(grains: GrainMap) -> Mapping:
    if not isinstance(grains, GrainMap):
        raise TypeError(
            "Expected `grains` to be a GrainMap (inclination.grains.segment_grains), "
            f"got {type(grains).__name__}."
        )
    return grains.grains


def _match(segments, grains, phases, options, *, want_table, want_long):
    """Shared work of :func:`match_planes`, :func:`identify` and :func:`candidates`."""
    k, floor_deg, max_tolerance_deg, sigma_criterion = options
    settings = ToleranceSettings(k, floor_deg, max_tolerance_deg)
    _check_criterion(sigma_criterion)
    if not isinstance(segments, Mapping):
        raise TypeError(
            "Expected `segments` to be a table (a dict of 1-D arrays), "
            f"got {type(segments).__name__}."
        )
    grain_table = _grain_table(grains)
    by_phase = _phases_by_id(phases)
    seg = {key: column(segments, key, "segments") for key in _SEGMENT_KEYS}
    n = len(seg["segment_id"])
    for key, col in seg.items():
        if col.shape != (n,):
            raise ValueError(
                f"Expected `segments` column {key!r} to have shape ({n},), got {col.shape}."
            )
    too_short = np.asarray(segments.get("too_short", np.zeros(n, dtype=bool)), dtype=bool)
    gid = column(grain_table, "grain_id", "grains").astype(np.int64)
    quat = as_float_array(column(grain_table, "quat", "grains"), "grains['quat']")
    spread = as_float_array(column(grain_table, "spread_mean_deg", "grains"), "spread_mean_deg")
    if quat.shape != (len(gid), 4):
        raise ValueError(
            f"Expected `grains` column 'quat' to have shape ({len(gid)}, 4), got {quat.shape}."
        )
    grain_a = seg["grain_a"].astype(np.int64)
    grain_b = seg["grain_b"].astype(np.int64)
    ia = _grain_rows(gid, grain_a, "grain_a")
    ib = _grain_rows(gid, grain_b, "grain_b")
    phase_a = seg["phase_a"].astype(np.int64)
    phase_b = seg["phase_b"].astype(np.int64)
    theta = as_float_array(seg["trace_angle_deg"], "trace_angle_deg")
    sigma_m = as_float_array(seg["trace_sigma_deg"], "trace_sigma_deg")
    active = ~too_short
    for name, values in (("trace_angle_deg", theta), ("trace_sigma_deg", sigma_m)):
        bad = active & ~(np.isfinite(values) & (values >= 0))
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise ValueError(
                f"Expected `segments` {name!r} to be finite and >= 0 where not too_short, "
                f"got {float(values[row])!r} at row {row}."
            )
    used = np.unique(np.concatenate([ia[active], ib[active]]))
    bad = used[~(np.isfinite(spread[used]) & (spread[used] >= 0))]
    if len(bad):
        raise ValueError(
            f"Expected `grains` 'spread_mean_deg' to be finite and >= 0, "
            f"got {float(spread[bad[0]])!r} at row {int(bad[0])}."
        )
    check_finite(quat[np.unique(np.concatenate([ia, ib]))], "grains['quat']")
    for name, ids in (("phase_a", phase_a), ("phase_b", phase_b)):
        missing = active & ~np.isin(ids, list(by_phase))
        if missing.any():
            row = int(np.flatnonzero(missing)[0])
            # The map holds a phase the job does not declare.
            raise InputError(
                f"Expected every `segments` {name} to be the id of a phase in `phases` "
                f"{tuple(sorted(by_phase))}, got {int(ids[row])} at row {row}."
            )

    table = _empty_row_table(n)
    if want_table:
        # Σ and the misorientation belong to the grain pair, so too_short rows get them too.
        for pid in np.unique(phase_a[phase_a == phase_b]).tolist():
            rows = np.flatnonzero((phase_a == pid) & (phase_b == pid))
            if pid not in by_phase or not len(rows):
                continue
            columns = _misorientation_columns(
                quat[ia[rows]], quat[ib[rows]], by_phase[pid], sigma_criterion
            )
            for key, values in zip(_MISORIENTATION_KEYS, columns, strict=True):
                table[key][rows] = values
    long_parts = []
    planes_of = {}
    pairs = np.unique(np.stack([phase_a[active], phase_b[active]], axis=1), axis=0)
    for pa, pb in pairs.tolist():
        for pid in (pa, pb):
            if pid not in planes_of:
                planes_of[pid] = by_phase[pid].candidate_planes()
        same = by_phase[pa] if pa == pb else None
        rows = np.flatnonzero(active & (phase_a == pa) & (phase_b == pb))
        for start in range(0, len(rows), _BLOCK):
            r = rows[start : start + _BLOCK]
            blk = {
                "theta": theta[r],
                "sigma_m": sigma_m[r],
                "qa": quat[ia[r]],
                "qb": quat[ib[r]],
                "sa": spread[ia[r]],
                "sb": spread[ib[r]],
                "sigma": table["sigma"][r],
            }
            out, long = _match_block(
                blk, planes_of[pa], planes_of[pb], same, settings, want_table, want_long
            )
            for key, values in out.items():
                if key not in _MISORIENTATION_KEYS:
                    table[key][r] = values
            for part, grain_ids, phase_id in zip(long, (grain_a, grain_b), (pa, pb), strict=False):
                part["row"] = r[part.pop("block_row")]
                part["grain_id"] = grain_ids[part["row"]]
                part["phase"] = np.full(len(part["row"]), phase_id)
                long_parts.append(part)

    rows_table = None
    if want_table:
        head = {
            "segment_id": seg["segment_id"].copy(),
            "grain_a": grain_a,
            "grain_b": grain_b,
            "phase_a": phase_a,
            "phase_b": phase_b,
            "trace_angle_deg": theta.copy(),
            "trace_sigma_deg": sigma_m.copy(),
        }
        if "length_um" in segments:
            head["length_um"] = as_float_array(segments["length_um"], "length_um").copy()
        rows_table = head | {
            key: (values.astype(str) if values.dtype == object else values)
            for key, values in table.items()
        }
    return rows_table, (_long_table(long_parts, seg["segment_id"]) if want_long else None)


def _long_table(parts, segment_id) -> dict:
    keys = (
        "segment_id",
        "side",
        "grain_id",
        "phase",
        "family",
        "plane",
        "normal_x",
        "normal_y",
        "normal_z",
        "trace_angle_deg",
        "trace_deviation_deg",
        "tolerance_deg",
        "dip_deg",
        "dip_azimuth_deg",
        "has_trace",
        "fits",
        "shared_with",
        "shared_normal_deviation_deg",
    )
    if not parts:
        empty = {key: np.zeros(0) for key in keys}
        for key in ("segment_id", "grain_id", "phase"):
            empty[key] = np.zeros(0, dtype=np.int64)
        for key in ("side", "family", "plane", "shared_with"):
            empty[key] = np.zeros(0, dtype=str)
        for key in ("has_trace", "fits"):
            empty[key] = np.zeros(0, dtype=bool)
        return empty
    joined = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
    order = np.lexsort((joined["plane_index"], joined["side"] == "b", joined["row"]))
    joined["segment_id"] = np.asarray(segment_id)[joined["row"]]
    out = {}
    for key in keys:
        values = joined[key][order]
        out[key] = values.astype(str) if values.dtype == object else values
    return out


@dataclass(frozen=True)
class PlaneMatch:
    """The two tables of one matching pass (:func:`match_planes`).

    Attributes
    ----------
    identification : dict of 1-D arrays
        One row per segment: the table of :func:`identify`.
    candidates : dict of 1-D arrays
        One row per (segment, grain side, plane): the table of :func:`candidates`.
    """

    identification: dict
    candidates: dict


def match_planes(
    segments: Mapping,
    grains: GrainMap,
    phases: PhasesLike,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
    sigma_criterion: str = "brandon",
) -> PlaneMatch:
    """Identification and candidate tables from one matching pass.

    The same tables as :func:`identify` and :func:`candidates` called with the same
    arguments, at the cost of one of them: the pipeline's call.

    Parameters
    ----------
    segments, grains, phases, k, floor_deg, max_tolerance_deg, sigma_criterion
        As for :func:`identify`.

    Returns
    -------
    PlaneMatch

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.grains import GrainMap
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...          "quat": np.array([[1.0, 0, 0, 0], [0.0, 0, 0, 1]]),
    ...          "spread_mean_deg": np.array([0.2, 0.2])}
    >>> grains = GrainMap(np.array([[1, 2]], np.int32), table, {}, 5.0, 4)
    >>> segments = {"segment_id": np.array([7]), "grain_a": np.array([1]),
    ...             "grain_b": np.array([2]), "phase_a": np.array([1]), "phase_b": np.array([1]),
    ...             "trace_angle_deg": np.array([135.0]), "trace_sigma_deg": np.array([0.3])}
    >>> m = match_planes(segments, grains, [cu])
    >>> m.identification["identification"].tolist(), int(m.candidates["fits"].sum())
    (['ambiguous'], 4)
    """
    options = (k, floor_deg, max_tolerance_deg, sigma_criterion)
    table, long = _match(segments, grains, phases, options, want_table=True, want_long=True)
    return PlaneMatch(table, long)


def identify(
    segments: Mapping,
    grains: GrainMap,
    phases: PhasesLike,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
    sigma_criterion: str = "brandon",
) -> dict:
    """Identify the crystal plane of each straight boundary segment from its trace.

    For each segment, every candidate plane of both grains (the phase's
    families, ±n once; :meth:`inclination.crystal.phases.Phase.candidate_planes`) is
    predicted in S with :func:`predict_planes` and compared with the measured
    trace. A plane *fits* when its trace deviation is at most its tolerance
    τ = k·√(σ_measured² + σ_predicted²), floored at ``floor_deg`` and capped at
    ``max_tolerance_deg``, with σ_predicted from the grain's ``spread_mean_deg``
    (:func:`trace_sigma_predicted_deg`). Planes within 1° of the surface have
    no trace and never fit.

    Common planes come first: a plane p of grain a and q of grain b whose
    normals in S agree within clip(k·√(σ_a² + σ_b²)) (σ the two grains'
    spreads, same floor and cap) form a candidate shared plane, whose normal is
    the mean of the two; it fits when its trace does (σ_predicted from the RMS
    of the two spreads). Fitting pairs are ranked by trace deviation, then by
    the angle between their normals. For a Σ3 boundary this finds the coherent
    {111} twin plane.

    Traces alone never decide the sign of the dip direction (conventions §6):
    the azimuth reported is for the frame as declared.

    Classes (``identification``), checked in this order:

    - ``coherent_twin``: a Σ3 boundary that passes the twin test and whose best
      common pair is the common {111} (its normal within the pair tolerance of
      the common <111>).
    - ``identified``: exactly one common plane pair fits.
    - ``ambiguous``: two or more common pairs fit; or none does but at least one
      plane of either grain fits on its own (the trace is consistent with a
      plane of one crystal that the other crystal does not share).
    - ``none``: no plane fits, or the segment is ``too_short`` (not matched).

    Parameters
    ----------
    segments : dict of 1-D arrays
        The segments table (:func:`inclination.traces.fit_segments`): at least
        ``segment_id, grain_a, grain_b, phase_a, phase_b, trace_angle_deg``
        (S, [0, 180)), ``trace_sigma_deg``; optional ``too_short`` (such rows
        are not matched to planes, but get their misorientation and Σ) and
        ``length_um`` (copied).
    grains : GrainMap
        The grains (:func:`inclination.grains.segment_grains`); its table gives
        ``grain_id``, ``quat`` (G, 4) mean orientations (sample to crystal) and
        ``spread_mean_deg``.
    phases : sequence of Phase, or mapping id → Phase
        The job's phases; every phase id of a matched segment must be among them.
    k : float, default 2.0
        Coverage factor of the tolerance, > 0.
    floor_deg, max_tolerance_deg : float, default 1.0, 5.0
        Smallest and largest tolerance, degrees.
    sigma_criterion : str, default "brandon"
        CSL acceptance criterion, one of ``inclination.crystal.csl.CRITERIA``.

    Returns
    -------
    dict of 1-D arrays, one row per segment in input order
        ``segment_id, grain_a, grain_b, phase_a, phase_b, trace_angle_deg,
        trace_sigma_deg`` (copied; ``length_um`` too when given);
        ``misorientation_deg`` (disorientation of the grains' mean orientations;
        NaN for phase boundaries); ``axis_a`` — the disorientation axis in grain
        a's crystal frame, reduced to the standard triangle, named by the
        nearest direction ``"[u v w]"`` with indices up to 3, and
        ``axis_a_deviation_deg``, the angle from the true axis to it; ``sigma``
        (CSL label such as ``"3"`` or ``"13b"``, ``""`` when none; m-3m phases
        only) and ``sigma_deviation_deg``; ``plane_a``, ``plane_b``,
        ``family_a``, ``family_b`` (the best common pair; without one, the best
        single plane on its own side and ``""`` on the other); ``trace_deviation_deg``,
        ``tolerance_deg`` (of that plane), ``normal_deviation_deg`` (angle
        between the pair's normals); ``candidates_within_tolerance`` (fitting
        planes of grain a plus those of grain b), ``common_planes_within_tolerance``;
        ``chance_fit`` (:func:`chance_fit` over every plane of both grains that
        has a trace, at its own tolerance); ``predicted_trace_angle_deg``,
        ``predicted_dip_deg``, ``predicted_dip_azimuth_deg`` and
        ``predicted_normal_x/y/z`` (S, n_z >= 0) of the reported plane;
        ``identification``; ``twin_test`` (``"pass"``/``"fail"`` for Σ3,
        ``""`` otherwise). Absent values are NaN or ``""``.

    Raises
    ------
    SettingError
        If a tolerance setting or ``sigma_criterion`` is out of its range.
    InputError
        If a segment's phase is not among ``phases``.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ...            ("{1 1 1}", "{1 1 0}"))
    >>> from inclination.crystal.rotations import quat_from_euler_deg
    >>> qa = quat_from_euler_deg([30.0, 50.0, 10.0])  # its (1 1 1) traces at 118.489°
    >>> qb = quat_multiply(quat_from_axis_angle_deg([1, 1, 1], 180.0), qa)  # the Σ3 twin
    >>> from inclination.grains import GrainMap
    >>> table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...          "quat": np.stack([qa, qb]), "spread_mean_deg": np.array([0.2, 0.2])}
    >>> grains = GrainMap(np.array([[1, 2]], np.int32), table, {}, 5.0, 4)
    >>> segments = {"segment_id": np.array([1]), "grain_a": np.array([1]),
    ...             "grain_b": np.array([2]), "phase_a": np.array([1]), "phase_b": np.array([1]),
    ...             "trace_angle_deg": np.array([118.8]), "trace_sigma_deg": np.array([0.3])}
    >>> t = identify(segments, grains, [cu])
    >>> t["sigma"].tolist(), t["plane_a"].tolist(), t["identification"].tolist()
    (['3'], ['(1 1 1)'], ['coherent_twin'])
    >>> t["predicted_dip_deg"].round(3).tolist(), t["twin_test"].tolist()
    ([27.936], ['pass'])
    """
    options = (k, floor_deg, max_tolerance_deg, sigma_criterion)
    return _match(segments, grains, phases, options, want_table=True, want_long=False)[0]


def candidates(
    segments: Mapping,
    grains: GrainMap,
    phases: PhasesLike,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
    sigma_criterion: str = "brandon",
) -> dict:
    """Every candidate plane of both grains of every segment, as a long table.

    Same inputs and settings as :func:`identify`; ``too_short`` segments are
    left out.

    Returns
    -------
    dict of 1-D arrays, one row per (segment, grain side, plane)
        ``segment_id``, ``side`` (``"a"``/``"b"``), ``grain_id``, ``phase``,
        ``family``, ``plane``, ``normal_x/y/z`` (S, n_z >= 0),
        ``trace_angle_deg`` (NaN without a trace), ``trace_deviation_deg``,
        ``tolerance_deg``, ``dip_deg``, ``dip_azimuth_deg``, ``has_trace``,
        ``fits``, ``shared_with`` (the plane of the other grain whose normal
        agrees within the pair tolerance, ``""`` if none) and
        ``shared_normal_deviation_deg``. Ordered by segment, side, then the
        phase's plane order.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> from inclination.grains import GrainMap
    >>> table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...          "quat": np.array([[1.0, 0, 0, 0], [0.0, 0, 0, 1]]),
    ...          "spread_mean_deg": np.array([0.2, 0.2])}
    >>> grains = GrainMap(np.array([[1, 2]], np.int32), table, {}, 5.0, 4)
    >>> segments = {"segment_id": np.array([7]), "grain_a": np.array([1]),
    ...             "grain_b": np.array([2]), "phase_a": np.array([1]), "phase_b": np.array([1]),
    ...             "trace_angle_deg": np.array([135.0]), "trace_sigma_deg": np.array([0.3])}
    >>> c = candidates(segments, grains, [cu])
    >>> c["plane"][:4].tolist(), c["fits"][:4].tolist()
    (['(1 1 1)', '(1 1 -1)', '(1 -1 1)', '(1 -1 -1)'], [True, True, False, False])
    """
    options = (k, floor_deg, max_tolerance_deg, sigma_criterion)
    return _match(segments, grains, phases, options, want_table=False, want_long=True)[1]
