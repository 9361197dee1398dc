"""Candidate boundary planes: predicted traces and dips, and identification.

Implements conventions §5 (plane normal, trace, dip and dip direction in the
sample frame S) and notes §6 (the 180° ambiguity): a surface trace never
decides the sign of the dip direction, so every azimuth here is for the frame
as declared. Every vector and angle is in S (X right, Y down, Z into the
material); the report converts to the user's declared axes.

Sign of a plane normal
    A plane is the same plane under n → −n. Every normal returned here is
    signed so that n_z >= 0 (it points into the material). The dip direction
    d = −sign(n_z)·(n_x, n_y)/|(n_x, n_y)| (§5) does not depend on that choice.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .._validation import (
    as_float_array,
    check_finite,
    check_last_axis,
    check_one_of,
    check_positive,
)
from ..crystal.rotations import quat_as_matrix
from .geometry import PlanePrediction, surface_geometry

__all__ = [
    "predict_planes",
    "trace_sigma_predicted_deg",
    "trace_tolerance_deg",
    "trace_deviation_deg",
    "chance_fit",
    "IDENTIFICATION_CLASSES",
    "identify",
    "candidates",
    "TwinTestSummary",
    "twin_test_summary",
]

# A first-order trace uncertainty cannot usefully exceed a right angle: the
# trace of a plane within a degree of the surface is unknown anyway.
_MAX_TRACE_SIGMA_DEG = 90.0


def predict_planes(quat, normals_crystal) -> PlanePrediction:
    """Predict the surface trace, dip and dip direction of crystal planes (§5).

    Parameters
    ----------
    quat : array_like, shape (N, 4) or (4,)
        Orientations ``g`` (sample to crystal, ``v_crystal = g @ v_sample``),
        unit quaternions, scalar first.
    normals_crystal : array_like, shape (M, 3)
        Plane normals in the crystal Cartesian frame C (any length, not zero);
        a normal and its negative give the same plane.

    Returns
    -------
    PlanePrediction
        Arrays of shape (N, M) (or (M,) for a single orientation); normals
        n_S = gᵀ n_C, signed n_z >= 0. Empty inputs give empty arrays.

    Examples
    --------
    >>> p = predict_planes([1.0, 0.0, 0.0, 0.0], [[1, 1, 1]])  # cube orientation, (111)
    >>> p.trace_angle_deg.round(6).tolist(), p.dip_deg.round(4).tolist()
    ([135.0], [54.7356])
    >>> p.dip_azimuth_deg.round(6).tolist(), p.has_trace.tolist()
    ([225.0], [True])
    """
    q = as_float_array(quat, "quat")
    check_last_axis(q, "quat", 4)
    if q.ndim > 2:
        raise ValueError(f"Expected `quat` to have shape (N, 4) or (4,), got {q.shape}.")
    check_finite(q, "quat")
    nc = as_float_array(normals_crystal, "normals_crystal")
    if nc.ndim != 2 or nc.shape[-1] != 3:
        raise ValueError(f"Expected `normals_crystal` to have shape (M, 3), got {nc.shape}.")
    check_finite(nc, "normals_crystal")
    length = np.linalg.norm(nc, axis=-1)
    if np.any(length == 0):
        row = int(np.flatnonzero(length == 0)[0])
        raise ValueError(
            f"Expected `normals_crystal` to be non-zero, got a zero vector at index ({row},)."
        )
    nc = nc / length[:, None]
    if q.size == 0:
        g = np.zeros(q.shape[:-1] + (3, 3))
    else:
        g = quat_as_matrix(q)
    # n_S = gᵀ n_C: the rows of g are the crystal axes written in S (§3).
    normal_sample = np.einsum("...ji,mj->...mi", g, nc)
    return surface_geometry(normal_sample)


def trace_sigma_predicted_deg(spread_deg, dip_deg) -> np.ndarray:
    """Standard uncertainty of a predicted trace angle from orientation scatter.

    First order: a small rotation ε about an axis perpendicular to the normal
    tilts the normal by ε; its component across the vertical plane through the
    normal turns the normal's horizontal projection, of length sin δ, by
    ε / sin δ. With σ_g the standard deviation of the orientation about one
    axis this gives σ_trace ≈ σ_g / sin δ, capped at 90° (a plane within a
    degree of the surface has no usable trace, §5). If ``spread_deg`` is the
    mean disorientation of a grain's points to its mean (which is about 1.6 σ_g
    for isotropic scatter), the result is conservative by that factor.

    Parameters
    ----------
    spread_deg : array_like
        Orientation scatter σ_g, degrees, >= 0.
    dip_deg : array_like
        Plane dip δ in [0, 90] degrees; broadcast against ``spread_deg``.

    Returns
    -------
    ndarray
        σ_trace in degrees, in [0, 90].

    Examples
    --------
    >>> trace_sigma_predicted_deg(0.5, [90.0, 30.0, 0.0]).round(6).tolist()
    [0.5, 1.0, 90.0]
    """
    s = as_float_array(spread_deg, "spread_deg")
    d = as_float_array(dip_deg, "dip_deg")
    check_finite(np.atleast_1d(s), "spread_deg")
    check_finite(np.atleast_1d(d), "dip_deg")
    if np.any(s < 0):
        raise ValueError(f"Expected `spread_deg` to be >= 0, got {float(np.min(s))!r}.")
    outside = (d < 0) | (d > 90)
    if np.any(outside):
        raise ValueError(f"Expected `dip_deg` to lie in [0, 90], got {float(d[outside][0])!r}.")
    sin_dip = np.sin(np.deg2rad(d))
    with np.errstate(divide="ignore", invalid="ignore"):
        sigma = np.where(sin_dip > 0, s / np.where(sin_dip > 0, sin_dip, 1.0), np.inf)
    sigma = np.where(s == 0, 0.0, sigma)
    return np.minimum(sigma, _MAX_TRACE_SIGMA_DEG)


def _check_settings(k: float, floor_deg: float, max_tolerance_deg: float) -> None:
    check_positive(k, "k")
    check_positive(floor_deg, "floor_deg")
    check_positive(max_tolerance_deg, "max_tolerance_deg")
    if floor_deg > max_tolerance_deg:
        raise ValueError(
            f"Expected `floor_deg` to be <= `max_tolerance_deg` ({max_tolerance_deg!r}), "
            f"got {floor_deg!r}."
        )


def trace_tolerance_deg(
    sigma_measured_deg, sigma_predicted_deg, *, k=2.0, floor_deg=1.0, max_tolerance_deg=5.0
) -> np.ndarray:
    """Trace tolerance k·√(σ_measured² + σ_predicted²), floored and capped.

    Parameters
    ----------
    sigma_measured_deg, sigma_predicted_deg : array_like
        Standard uncertainties of the measured and predicted trace angles,
        degrees, >= 0; broadcast together.
    k : float
        Coverage factor, > 0.
    floor_deg, max_tolerance_deg : float
        Smallest and largest tolerance, degrees, 0 < floor_deg <= max_tolerance_deg.

    Returns
    -------
    ndarray
        Tolerance in degrees, in [floor_deg, max_tolerance_deg].

    Examples
    --------
    >>> trace_tolerance_deg([0.1, 0.6, 3.0], 0.8).round(6).tolist()
    [1.612452, 2.0, 5.0]
    """
    _check_settings(k, floor_deg, max_tolerance_deg)
    sm = as_float_array(sigma_measured_deg, "sigma_measured_deg")
    sp = as_float_array(sigma_predicted_deg, "sigma_predicted_deg")
    for arr, name in ((sm, "sigma_measured_deg"), (sp, "sigma_predicted_deg")):
        check_finite(np.atleast_1d(arr), name)
        if np.any(arr < 0):
            raise ValueError(f"Expected `{name}` to be >= 0, got {float(np.min(arr))!r}.")
    return np.clip(k * np.hypot(sm, sp), floor_deg, max_tolerance_deg)


def trace_deviation_deg(measured_deg, predicted_deg) -> np.ndarray:
    """Absolute angle between two trace directions (lines, period 180°), in [0, 90].

    NaN in either input gives NaN (a plane with no trace has no deviation).

    Examples
    --------
    >>> trace_deviation_deg([1.0, 10.0, 170.0], [179.0, 100.0, np.nan]).round(6).tolist()
    [2.0, 90.0, nan]
    """
    m = as_float_array(measured_deg, "measured_deg")
    p = as_float_array(predicted_deg, "predicted_deg")
    return np.abs(np.mod(m - p + 90.0, 180.0) - 90.0)


def chance_fit(tolerance_deg) -> float | np.ndarray:
    """Chance that a trace at a uniformly random angle fits at least one candidate.

    For candidates with tolerances τ_i the chance is 1 − Π (1 − 2τ_i/180°);
    with k candidates at one tolerance τ this is 1 − (1 − 2τ/180°)^k. The
    candidates are treated as independent, which slightly overstates the
    chance when their traces lie closer than 2τ. NaN entries (planes with no
    trace) are not candidates. The product runs over the last axis.

    Parameters
    ----------
    tolerance_deg : array_like, shape (..., K)
        Tolerances of the K candidates, degrees, in [0, 90].

    Returns
    -------
    float or ndarray, shape (...)
        Probability in [0, 1]; 0 when there are no candidates.

    Examples
    --------
    >>> round(float(chance_fit([2.0, 2.0, 2.0])), 6)  # 1 − (1 − 4/180)³
    0.065196
    >>> round(float(chance_fit([])), 6)
    0.0
    """
    t = as_float_array(tolerance_deg, "tolerance_deg")
    if t.ndim == 0:
        raise ValueError(f"Expected `tolerance_deg` to have shape (..., K), got {t.shape}.")
    if np.any((t < 0) | (t > 90)):
        raise ValueError("Expected `tolerance_deg` to lie in [0, 90], got a value outside.")
    miss = np.where(np.isnan(t), 1.0, 1.0 - 2.0 * t / 180.0)
    out = 1.0 - np.prod(miss, axis=-1)
    return float(out) if out.ndim == 0 else out


# --------------------------------------------------------------------------- identification

IDENTIFICATION_CLASSES = ("coherent_twin", "identified", "ambiguous", "none")
SIDES = ("a", "b")
_SEGMENT_KEYS = (
    "segment_id",
    "grain_a",
    "grain_b",
    "phase_a",
    "phase_b",
    "trace_angle_deg",
    "trace_sigma_deg",
)
_GRAIN_KEYS = ("grain_id", "phase", "quat", "spread_mean_deg")
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
_CUBIC_111 = np.array([[1, 1, 1], [-1, 1, 1], [1, -1, 1], [1, 1, -1]], dtype=float)


def _column(table, key: str, name: str) -> np.ndarray:
    if key not in table:
        raise ValueError(
            f"Expected `{name}` to have the column {key!r}, got columns {tuple(table)}."
        )
    return np.asarray(table[key])


def _phase_lookup(phases) -> dict:
    items = phases.values() if isinstance(phases, Mapping) else phases
    try:
        items = list(items)
    except TypeError:
        raise TypeError(
            f"Expected `phases` to be a sequence of Phase records, got {type(phases).__name__}."
        ) from None
    out = {}
    for phase in items:
        if not all(hasattr(phase, a) for a in ("id", "laue", "lattice", "candidate_planes")):
            raise TypeError(f"Expected `phases` to hold Phase records, got {type(phase).__name__}.")
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


def _clip_tolerance(sigma_deg, settings) -> np.ndarray:
    k, floor_deg, cap_deg = settings
    return np.clip(k * sigma_deg, floor_deg, cap_deg)


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


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


def _side_fit(pred: PlanePrediction, theta, sigma_m, spread, settings):
    """Deviation, tolerance and fit of every plane of one grain, shapes (n, M)."""
    dev = trace_deviation_deg(theta[:, None], pred.trace_angle_deg)
    sigma_p = trace_sigma_predicted_deg(spread[:, None], pred.dip_deg)
    tol = _clip_tolerance(np.hypot(sigma_m[:, None], sigma_p), settings)
    return dev, tol, pred.has_trace & (dev <= tol)


def _pair_geometry(na, nb, sign):
    """The shared plane of two normals that agree: their mean, signed n_z >= 0."""
    return surface_geometry(_unit(na + sign[..., None] * nb))


def _match_block(blk, planes_a, planes_b, phase, settings, want_long):
    """Candidates and identification of one block of segments of one phase pair."""
    theta, sigma_m, qa, qb, sa, sb = (
        blk[key] for key in ("theta", "sigma_m", "qa", "qb", "sa", "sb")
    )
    n = len(theta)
    out = _empty_row_table(n)
    pred_a = predict_planes(qa, planes_a.normal_crystal)
    pred_b = predict_planes(qb, planes_b.normal_crystal)
    dev_a, tol_a, fit_a = _side_fit(pred_a, theta, sigma_m, sa, settings)
    dev_b, tol_b, fit_b = _side_fit(pred_b, theta, sigma_m, sb, settings)

    # Common planes: a plane of A and one of B whose normals in S agree within the
    # tolerance that the two grains' orientation scatter allows.
    cos = np.einsum("nai,nbi->nab", pred_a.normal_sample, pred_b.normal_sample)
    angle = np.rad2deg(np.arccos(np.clip(np.abs(cos), 0.0, 1.0)))
    tol_normal = _clip_tolerance(np.hypot(sa, sb), settings)
    s, i, j = np.nonzero(angle <= tol_normal[:, None, None])
    sign = np.where(cos[s, i, j] < 0, -1.0, 1.0)
    pair = _pair_geometry(pred_a.normal_sample[s, i], pred_b.normal_sample[s, j], sign)
    dev_p = trace_deviation_deg(theta[s], pair.trace_angle_deg)
    # The mean of two independent estimates is known better than either; the RMS of the
    # two spreads is used, which keeps the tolerance on the safe side.
    spread_p = np.sqrt(0.5 * (sa[s] ** 2 + sb[s] ** 2))
    tol_p = _clip_tolerance(
        np.hypot(sigma_m[s], trace_sigma_predicted_deg(spread_p, pair.dip_deg)), settings
    )
    fit_p = pair.has_trace & (dev_p <= tol_p)
    n_common = np.bincount(s[fit_p], minlength=n)
    fitting = np.flatnonzero(fit_p)
    order = fitting[np.lexsort((angle[s, i, j][fitting], dev_p[fitting], s[fitting]))]
    seg_of, first = np.unique(s[order], return_index=True)
    best = order[first]

    out["candidates_within_tolerance"] = fit_a.sum(axis=1) + fit_b.sum(axis=1)
    out["common_planes_within_tolerance"] = n_common
    has_trace = np.concatenate([pred_a.has_trace, pred_b.has_trace], axis=1)
    tol_all = np.concatenate([tol_a, tol_b], axis=1)
    out["chance_fit"] = 1.0 - np.prod(np.where(has_trace, 1.0 - tol_all / 90.0, 1.0), axis=1)

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

    # Σ is known only for identify (the long table carries no misorientation columns).
    if phase is not None and not want_long:
        twins = np.flatnonzero(blk["sigma"] == "3")
        if len(twins):
            _twin_test(out, twins, blk, tol_normal, phase, settings)

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


def _twin_test(out, rows, blk, tol_normal, phase, settings):
    """Coherent-twin trace test of Σ3 rows, and the coherent_twin class.

    The common <111> of the two grains is the pair of <111> normals (one per grain)
    closest in S. The trace passes when it lies within the tolerance of that plane's
    trace, which is the condition "trace ⟂ common <111>" carried over to trace angles:
    the angle of t from the perpendicular is asin(sin δ · sin Δ) for a trace deviation Δ.
    """
    from ..crystal.lattice import plane_normals_crystal

    normals = plane_normals_crystal(phase.lattice, _CUBIC_111.astype(int))
    na = predict_planes(blk["qa"][rows], normals).normal_sample
    nb = predict_planes(blk["qb"][rows], normals).normal_sample
    cos = np.einsum("nai,nbi->nab", na, nb)
    flat = np.argmax(np.abs(cos).reshape(len(rows), -1), axis=1)
    i, j = np.divmod(flat, 4)
    r = np.arange(len(rows))
    sign = np.where(cos[r, i, j] < 0, -1.0, 1.0)
    common = _pair_geometry(na[r, i], nb[r, j], sign)
    dev = trace_deviation_deg(blk["theta"][rows], common.trace_angle_deg)
    sa, sb = blk["sa"][rows], blk["sb"][rows]
    sigma_p = trace_sigma_predicted_deg(np.sqrt(0.5 * (sa**2 + sb**2)), common.dip_deg)
    tol = _clip_tolerance(np.hypot(blk["sigma_m"][rows], sigma_p), settings)
    passed = common.has_trace & (dev <= tol)
    out["twin_test"][rows] = np.where(passed, "pass", "fail")
    best = np.stack([out[f"predicted_normal_{a}"][rows] for a in "xyz"], axis=-1)
    with np.errstate(invalid="ignore"):
        to_best = np.rad2deg(
            np.arccos(np.clip(np.abs(np.einsum("ni,ni->n", best, common.normal_sample)), 0, 1))
        )
    on_111 = (out["common_planes_within_tolerance"][rows] > 0) & (to_best <= tol_normal[rows])
    out["identification"][rows[passed & on_111]] = "coherent_twin"


def _match(segments, grains, phases, k, floor_deg, max_tolerance_deg, sigma_criterion, want_long):
    """Shared work of :func:`identify` and :func:`candidates`."""
    _check_settings(k, floor_deg, max_tolerance_deg)
    _check_criterion(sigma_criterion)
    settings = (float(k), float(floor_deg), float(max_tolerance_deg))
    if not isinstance(segments, dict) or not isinstance(grains, dict):
        raise TypeError(
            "Expected `segments` and `grains` to be tables (dicts of 1-D arrays), "
            f"got {type(segments).__name__} and {type(grains).__name__}."
        )
    seg = {key: _column(segments, key, "segments") for key in _SEGMENT_KEYS}
    n = len(seg["segment_id"])
    for key, col in seg.items():
        if col.shape != (n,):
            raise ValueError(
                f"Expected `segments` column {key!r} to have shape ({n},), got {col.shape}."
            )
    too_short = np.asarray(segments.get("too_short", np.zeros(n, dtype=bool)), dtype=bool)
    gid = _column(grains, "grain_id", "grains").astype(np.int64)
    quat = as_float_array(_column(grains, "quat", "grains"), "grains['quat']")
    spread = as_float_array(_column(grains, "spread_mean_deg", "grains"), "spread_mean_deg")
    if quat.shape != (len(gid), 4):
        raise ValueError(
            f"Expected `grains` column 'quat' to have shape ({len(gid)}, 4), got {quat.shape}."
        )
    by_phase = _phase_lookup(phases)
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
            raise ValueError(
                f"Expected every `segments` {name} to be the id of a phase in `phases` "
                f"{tuple(sorted(by_phase))}, got {int(ids[row])} at row {row}."
            )

    table = _empty_row_table(n)
    if not want_long:
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
            out, long = _match_block(blk, planes_of[pa], planes_of[pb], same, settings, want_long)
            for key, values in out.items():
                if key not in _MISORIENTATION_KEYS:
                    table[key][r] = values
            for part, grain_ids, phase_id in zip(long, (grain_a, grain_b), (pa, pb), strict=False):
                part["row"] = r[part.pop("block_row")]
                part["grain_id"] = grain_ids[part["row"]]
                part["phase"] = np.full(len(part["row"]), phase_id)
                long_parts.append(part)

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


def _check_criterion(sigma_criterion) -> None:
    from ..crystal.csl import CRITERIA

    check_one_of(sigma_criterion, "sigma_criterion", CRITERIA)


def identify(
    segments,
    grains,
    phases,
    *,
    k=2.0,
    floor_deg=1.0,
    max_tolerance_deg=5.0,
    sigma_criterion="brandon",
) -> dict:
    """Identify the crystal plane of each straight boundary segment from its trace.

    For each segment, every candidate plane of both grains (the phase's
    families, ±n once; :meth:`inclination.crystal.lattice.Phase.candidate_planes`) is
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
    grains : dict of 1-D arrays
        The grains table: ``grain_id``, ``phase``, ``quat`` (G, 4) mean
        orientations (sample to crystal), ``spread_mean_deg``.
    phases : sequence of Phase, or dict id → Phase
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

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice, Phase
    >>> from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ...            ("{1 1 1}", "{1 1 0}"))
    >>> from inclination.crystal.rotations import quat_from_euler_deg
    >>> qa = quat_from_euler_deg([30.0, 50.0, 10.0])  # its (1 1 1) traces at 118.489°
    >>> qb = quat_multiply(quat_from_axis_angle_deg([1, 1, 1], 180.0), qa)  # the Σ3 twin
    >>> grains = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...           "quat": np.stack([qa, qb]), "spread_mean_deg": np.array([0.2, 0.2])}
    >>> segments = {"segment_id": np.array([1]), "grain_a": np.array([1]),
    ...             "grain_b": np.array([2]), "phase_a": np.array([1]), "phase_b": np.array([1]),
    ...             "trace_angle_deg": np.array([118.8]), "trace_sigma_deg": np.array([0.3])}
    >>> t = identify(segments, grains, [cu])
    >>> t["sigma"].tolist(), t["plane_a"].tolist(), t["identification"].tolist()
    (['3'], ['(1 1 1)'], ['coherent_twin'])
    >>> t["predicted_dip_deg"].round(3).tolist(), t["twin_test"].tolist()
    ([27.936], ['pass'])
    """
    args = (k, floor_deg, max_tolerance_deg, sigma_criterion)
    return _match(segments, grains, phases, *args, want_long=False)[0]


def candidates(
    segments,
    grains,
    phases,
    *,
    k=2.0,
    floor_deg=1.0,
    max_tolerance_deg=5.0,
    sigma_criterion="brandon",
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
    >>> from inclination.crystal.lattice import Lattice, Phase
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> grains = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...           "quat": np.array([[1.0, 0, 0, 0], [0.0, 0, 0, 1]]),
    ...           "spread_mean_deg": np.array([0.2, 0.2])}
    >>> segments = {"segment_id": np.array([7]), "grain_a": np.array([1]),
    ...             "grain_b": np.array([2]), "phase_a": np.array([1]), "phase_b": np.array([1]),
    ...             "trace_angle_deg": np.array([135.0]), "trace_sigma_deg": np.array([0.3])}
    >>> c = candidates(segments, grains, [cu])
    >>> c["plane"][:4].tolist(), c["fits"][:4].tolist()
    (['(1 1 1)', '(1 1 -1)', '(1 -1 1)', '(1 -1 -1)'], [True, True, False, False])
    """
    args = (k, floor_deg, max_tolerance_deg, sigma_criterion)
    return _match(segments, grains, phases, *args, want_long=True)[1]


@dataclass(frozen=True)
class TwinTestSummary:
    """How much of the Σ3 boundary passes the coherent-twin trace test.

    Failing proves a boundary is not a coherent twin; passing does not prove
    it is one (any plane whose trace happens to lie along the {111} trace
    passes too).

    Attributes
    ----------
    n_sigma3, n_pass : int
        Σ3 segments tested, and those that pass.
    fraction_by_count : float
        n_pass / n_sigma3 (NaN when there are none).
    ci_low, ci_high : float
        95 % Wilson score interval of that fraction (scipy.stats.binomtest).
    length_sigma3_um, length_pass_um : float
        Total length of the Σ3 segments and of those that pass.
    fraction_by_length : float
        length_pass_um / length_sigma3_um (NaN when there are none).
    interval_method : str
        ``"wilson"``.
    """

    n_sigma3: int
    n_pass: int
    fraction_by_count: float
    ci_low: float
    ci_high: float
    length_sigma3_um: float
    length_pass_um: float
    fraction_by_length: float
    interval_method: str = "wilson"


def twin_test_summary(table, segments) -> TwinTestSummary:
    """Fraction of Σ3 boundaries that pass the twin test, by count and by length.

    Parameters
    ----------
    table : dict of 1-D arrays
        The table of :func:`identify` (``segment_id``, ``twin_test``).
    segments : dict of 1-D arrays
        The segments table (``segment_id``, ``length_um``), joined by ``segment_id``.

    Returns
    -------
    TwinTestSummary

    Examples
    --------
    >>> table = {"segment_id": np.array([1, 2, 3]), "twin_test": np.array(["pass", "fail", ""])}
    >>> segments = {"segment_id": np.array([3, 2, 1]), "length_um": np.array([5.0, 1.0, 3.0])}
    >>> s = twin_test_summary(table, segments)
    >>> s.n_sigma3, s.n_pass, s.fraction_by_count, s.fraction_by_length
    (2, 1, 0.5, 0.75)
    >>> round(s.ci_low, 4), round(s.ci_high, 4)
    (0.0945, 0.9055)
    """
    from scipy.stats import binomtest

    test = _column(table, "twin_test", "table").astype(str)
    ids = _column(table, "segment_id", "table")
    seg_ids = _column(segments, "segment_id", "segments")
    length = as_float_array(_column(segments, "length_um", "segments"), "length_um")
    order = np.argsort(seg_ids, kind="stable")
    pos = np.minimum(np.searchsorted(seg_ids[order], ids), max(len(order) - 1, 0))
    tested = np.isin(test, ("pass", "fail"))
    if tested.any() and not np.all(seg_ids[order][pos][tested] == ids[tested]):
        row = int(np.flatnonzero(tested & (seg_ids[order][pos] != ids))[0])
        raise ValueError(
            f"Expected every tested `table` segment_id to be in `segments`, "
            f"got {ids[row].item()!r} at row {row}."
        )
    passed = test == "pass"
    n_sigma3, n_pass = int(tested.sum()), int(passed.sum())
    seg_length = length[order][pos] if len(order) else np.zeros(len(ids))
    total = float(seg_length[tested].sum())
    passing = float(seg_length[passed].sum())
    if n_sigma3 == 0:
        return TwinTestSummary(0, 0, np.nan, np.nan, np.nan, 0.0, 0.0, np.nan)
    ci = binomtest(n_pass, n_sigma3).proportion_ci(confidence_level=0.95, method="wilson")
    return TwinTestSummary(
        n_sigma3,
        n_pass,
        n_pass / n_sigma3,
        float(ci.low),
        float(ci.high),
        total,
        passing,
        passing / total if total > 0 else np.nan,
    )
