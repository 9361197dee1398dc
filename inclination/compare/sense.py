"""The comparator: measured against predicted dip directions, and the frame verdict (§6).

Turning the data frame 180° about the surface normal leaves every trace where it is
and reverses every predicted dip direction (conventions §6). A measured dip direction
(from a cross-section or a serial section, :mod:`inclination.sections`) therefore
tells the two frames apart. Per boundary, :func:`boundary_sense` weighs the measured
azimuth against the predicted one in the frame as declared and in the turned frame;
:func:`frame_verdict` combines the boundaries of a map into one call; and
:func:`full_planes` writes each measured plane in both grains' crystal frames.

All vectors and azimuths are in the sample frame S (§2); azimuths run from +X toward
+Y in [0, 360).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy.stats import binom

from .._validation import as_float_array, check_positive
from ..crystal.indices import format_indices, low_indices
from ..crystal.lattice import plane_normals_crystal
from ..crystal.rotations import quat_apply, quat_as_matrix

__all__ = [
    "SENSES",
    "VERDICTS",
    "boundary_sense",
    "FrameVerdict",
    "frame_verdict",
    "best_measurements",
    "low_index_planes",
    "full_planes",
]

#: Closed set of the per-boundary ``sense`` column.
SENSES = ("agrees", "opposite", "undecided")
#: Closed set of the map's ``frame_verdict``.
VERDICTS = ("as_declared", "turned_180_about_normal", "undecided", "inconsistent")

_LN10 = math.log(10.0)


def boundary_sense(
    predicted_azimuth_deg,
    predicted_dip_deg,
    measured_azimuth_deg,
    measured_sigma_deg,
    *,
    measured_dip_deg=None,
    measured_dip_sigma_deg=None,
    predicted_azimuth_sigma_deg=1.0,
    predicted_dip_sigma_deg=1.0,
    n_sigma_vertical: float = 2.0,
    max_mismatch_deg: float = 30.0,
    max_dip_mismatch_deg: float = 10.0,
    min_log10_ratio: float = 2.0,
) -> dict:
    """Whether each measured dip direction agrees with the frame as declared (§6).

    The measured azimuth φ is modelled as von Mises about the predicted azimuth μ
    (frame as declared) or about μ + 180° (frame turned 180° about Z), with
    concentration κ = 1/σ², σ² = σ_measured² + σ_predicted² (radians). The likelihood
    ratio of the two is ``exp(2κ cos(φ − μ))``. A boundary is decided when
    ``|log10 ratio| >= min_log10_ratio`` (default 2: odds of 100 to 1, "decisive" on
    Jeffreys' scale, H. Jeffreys, *Theory of Probability*, 3rd ed., 1961, App. B).
    It is ``undecided``, whatever the ratio, when either plane lies within
    ``n_sigma_vertical`` σ of vertical (a vertical plane has no dip direction), when
    the measurement is more than ``max_mismatch_deg`` from both directions, or its
    dip differs from the predicted dip by more than ``max_dip_mismatch_deg`` and three
    σ (a turn about Z keeps dips, so such a plane fits neither frame: it was probably
    identified wrongly), or when a value is missing.

    Parameters
    ----------
    predicted_azimuth_deg, predicted_dip_deg : array_like, shape (N,)
        Dip direction and dip of the identified candidate plane, degrees (S);
        NaN azimuth = no dip direction.
    measured_azimuth_deg, measured_sigma_deg : array_like, shape (N,)
        Measured dip-direction azimuth and its σ, degrees (S); NaN = not measured.
    measured_dip_deg, measured_dip_sigma_deg : array_like, shape (N,), optional
        Measured dip and its σ, for the verticality test of the measurement.
    predicted_azimuth_sigma_deg, predicted_dip_sigma_deg : float or array_like, optional
        σ of the prediction (orientation spread), degrees.
    n_sigma_vertical, max_mismatch_deg, max_dip_mismatch_deg, min_log10_ratio : float
        The thresholds above (optional).

    Returns
    -------
    dict of 1-D arrays
        ``sense`` (one of ``SENSES``), ``log10_likelihood_ratio`` (declared over
        turned; NaN where not computed), ``mismatch_deg`` (angle from the nearer of
        the two predicted directions), ``reason`` (why undecided; "" when decided).

    Examples
    --------
    >>> out = boundary_sense([30.0, 30.0, 30.0], [60.0, 60.0, 89.5],
    ...                      [32.0, 208.0, 30.0], [2.0, 2.0, 2.0])
    >>> out["sense"].tolist()
    ['agrees', 'opposite', 'undecided']
    >>> out["reason"].tolist()
    ['', '', 'predicted plane near vertical']
    """
    mu = as_float_array(predicted_azimuth_deg, "predicted_azimuth_deg").ravel()
    n = len(mu)
    pdip = _column(predicted_dip_deg, "predicted_dip_deg", n)
    phi = _column(measured_azimuth_deg, "measured_azimuth_deg", n)
    msig = _column(measured_sigma_deg, "measured_sigma_deg", n)
    mdip = _column(measured_dip_deg, "measured_dip_deg", n, fill=np.nan)
    mdip_sig = _column(measured_dip_sigma_deg, "measured_dip_sigma_deg", n, fill=np.nan)
    psig = _column(predicted_azimuth_sigma_deg, "predicted_azimuth_sigma_deg", n)
    pdip_sig = _column(predicted_dip_sigma_deg, "predicted_dip_sigma_deg", n)
    for value, name in (
        (n_sigma_vertical, "n_sigma_vertical"),
        (max_mismatch_deg, "max_mismatch_deg"),
        (max_dip_mismatch_deg, "max_dip_mismatch_deg"),
        (min_log10_ratio, "min_log10_ratio"),
    ):
        check_positive(value, name)
    if np.any(msig[np.isfinite(msig)] < 0) or np.any(psig[np.isfinite(psig)] < 0):
        raise ValueError("Expected `measured_sigma_deg` and σ of the prediction >= 0, got < 0.")

    sigma = np.deg2rad(np.hypot(msig, psig))
    diff = np.deg2rad(phi - mu)
    with np.errstate(divide="ignore", invalid="ignore"):
        kappa = 1.0 / np.maximum(sigma, 1e-6) ** 2
        log10_ratio = 2.0 * kappa * np.cos(diff) / _LN10
    folded = np.abs((phi - mu + 90.0) % 180.0 - 90.0)

    reason = np.full(n, "", dtype=object)
    missing_m = ~(np.isfinite(phi) & np.isfinite(msig))
    missing_p = ~(np.isfinite(mu) & np.isfinite(pdip))
    vertical_p = (90.0 - pdip) < n_sigma_vertical * np.nan_to_num(pdip_sig, nan=0.0)
    vertical_m = np.isfinite(mdip) & (
        (90.0 - mdip) < n_sigma_vertical * np.nan_to_num(mdip_sig, nan=0.0)
    )
    weak = np.abs(log10_ratio) < min_log10_ratio
    dip_sigma = np.hypot(np.nan_to_num(mdip_sig, nan=0.0), np.nan_to_num(pdip_sig, nan=0.0))
    dip_off = np.isfinite(mdip) & (
        np.abs(mdip - pdip) > np.maximum(max_dip_mismatch_deg, 3.0 * dip_sigma)
    )
    # Later assignments win: the most basic reason is the one reported.
    reason[weak] = "weak evidence"
    reason[folded > max_mismatch_deg] = "fits neither direction"
    reason[dip_off] = "dip differs from the predicted plane"
    reason[vertical_m] = "measured plane near vertical"
    reason[vertical_p] = "predicted plane near vertical"
    reason[missing_p] = "no predicted dip direction"
    reason[missing_m] = "no measurement"
    decided = reason == ""
    sense = np.full(n, "undecided", dtype=object)
    sense[decided & (log10_ratio > 0)] = "agrees"
    sense[decided & (log10_ratio < 0)] = "opposite"
    log10_ratio = np.where(missing_m | missing_p, np.nan, log10_ratio)
    return {
        "sense": sense.astype(str) if n else np.array([], str),
        "log10_likelihood_ratio": log10_ratio,
        "mismatch_deg": np.where(missing_m | missing_p, np.nan, folded),
        "reason": reason.astype(str) if n else np.array([], str),
    }


def _column(value, name, n, *, fill=None):
    if value is None:
        return np.full(n, fill if fill is not None else np.nan)
    arr = as_float_array(value, name)
    if arr.ndim == 0:
        return np.full(n, float(arr))
    arr = arr.ravel()
    if len(arr) != n:
        raise ValueError(f"Expected `{name}` to have length {n}, got {len(arr)}.")
    return arr


@dataclass(frozen=True)
class FrameVerdict:
    """The frame verdict of one map, with its evidence (§6).

    Attributes
    ----------
    verdict : str
        One of ``VERDICTS``.
    n_agree, n_opposite, n_undecided : int
        Boundary counts by sense.
    log10_likelihood_ratio : float
        Combined log10 odds of the frame as declared against the turned frame, each
        boundary's odds bounded by the chance ``error_rate`` that its own call is
        wrong (0 when no boundary is decided).
    p_value_split : float
        Chance of a minority at least this large if each decided call were wrong
        only with probability ``error_rate`` (small: the split is beyond chance).
    p_value_sign : float
        Chance of a majority at least this large if the calls carried no
        information (binomial, p = 1/2).
    error_rate : float
    sentence : str
        The verdict in plain language, for the report.
    """

    verdict: str
    n_agree: int
    n_opposite: int
    n_undecided: int
    log10_likelihood_ratio: float
    p_value_split: float
    p_value_sign: float
    error_rate: float
    sentence: str

    def as_dict(self) -> dict:
        """JSON-ready mapping (``summary.json`` key ``frame_verdict``)."""
        return {
            "verdict": self.verdict,
            "n_agree": self.n_agree,
            "n_opposite": self.n_opposite,
            "n_undecided": self.n_undecided,
            "log10_likelihood_ratio": self.log10_likelihood_ratio,
            "p_value_split": self.p_value_split,
            "p_value_sign": self.p_value_sign,
            "error_rate": self.error_rate,
            "sentence": self.sentence,
        }


def frame_verdict(
    senses: Mapping,
    *,
    error_rate: float = 0.05,
    alpha: float = 0.01,
    min_log10_ratio: float = 2.0,
) -> FrameVerdict:
    """Combine the boundaries of one map into one frame verdict (§6).

    A split — a minority of calls larger than ``error_rate`` explains at
    significance ``alpha`` (binomial) — is ``inconsistent``: mixed data, never
    averaged. Otherwise the per-boundary odds are combined as independent
    evidence, each bounded by ``(1 − ε)/ε`` with ε = ``error_rate`` (the chance that
    one call is wrong for a reason that has nothing to do with the frame, such as a
    misidentified plane), so that no single boundary decides the map; the map is
    decided when the combined odds reach ``10**min_log10_ratio``.

    Parameters
    ----------
    senses : mapping
        The table of :func:`boundary_sense` (``sense``, ``log10_likelihood_ratio``).
    error_rate : float, optional
        ε in (0, 0.5): the chance that one call is wrong whatever the frame
        (0.05 is common practice for a 1-in-20 slip).
    alpha : float, optional
        Significance of the split test.
    min_log10_ratio : float, optional
        Combined odds needed for a decision.

    Returns
    -------
    FrameVerdict

    Examples
    --------
    >>> v = frame_verdict({"sense": np.array(["agrees"] * 5 + ["undecided"]),
    ...                    "log10_likelihood_ratio": np.array([40.0] * 5 + [0.5])})
    >>> v.verdict, v.n_agree, v.n_undecided, round(v.log10_likelihood_ratio, 3)
    ('as_declared', 5, 1, 6.394)
    """
    if not (0.0 < error_rate < 0.5):
        raise ValueError(f"Expected `error_rate` to be in (0, 0.5), got {error_rate!r}.")
    if not (0.0 < alpha < 1.0):
        raise ValueError(f"Expected `alpha` to be in (0, 1), got {alpha!r}.")
    check_positive(min_log10_ratio, "min_log10_ratio")
    sense = np.asarray(senses["sense"]).astype(str)
    bad = ~np.isin(sense, SENSES)
    if bad.any():
        raise ValueError(
            f"Expected `sense` to be one of {SENSES}, got {sense[bad][0]!r} at index "
            f"({int(np.flatnonzero(bad)[0])},)."
        )
    ratio = np.asarray(senses["log10_likelihood_ratio"], float)
    agree = int(np.sum(sense == "agrees"))
    oppose = int(np.sum(sense == "opposite"))
    undecided = int(np.sum(sense == "undecided"))
    n = agree + oppose
    minority = min(agree, oppose)

    decided = sense != "undecided"
    ln_r = ratio[decided] * _LN10
    ln_eps, ln_keep = math.log(error_rate), math.log1p(-error_rate)
    # Each boundary: P(data | declared) ∝ (1−ε)·e^{ℓ/2} + ε·e^{−ℓ/2}, and the reverse.
    robust = np.logaddexp(ln_keep + ln_r / 2, ln_eps - ln_r / 2) - np.logaddexp(
        ln_keep - ln_r / 2, ln_eps + ln_r / 2
    )
    combined = float(np.sum(robust) / _LN10) if n else 0.0
    p_split = float(binom.sf(minority - 1, n, error_rate)) if n else 1.0
    p_sign = float(binom.sf(max(agree, oppose) - 1, n, 0.5)) if n else 1.0

    if n == 0:
        verdict = "undecided"
    elif minority > 0 and p_split < alpha:
        verdict = "inconsistent"
    elif abs(combined) < min_log10_ratio:
        verdict = "undecided"
    else:
        verdict = "as_declared" if combined > 0 else "turned_180_about_normal"
    sentence = _verdict_sentence(verdict, agree, oppose, undecided, combined, p_split)
    return FrameVerdict(
        verdict, agree, oppose, undecided, combined, p_split, p_sign, float(error_rate), sentence
    )


def _count(n: int, noun: str = "boundary") -> str:
    plural = "boundaries" if noun == "boundary" else noun + "s"
    return f"{n} {noun if n == 1 else plural}"


def _verdict_sentence(verdict, agree, oppose, undecided, combined, p_split) -> str:
    total = agree + oppose + undecided
    tally = (
        f"Of {_count(total)} with a measured dip direction, {agree} agree with the frame as "
        f"declared, {oppose} point the opposite way and {undecided} cannot tell"
    )
    if verdict == "as_declared":
        return (
            f"{tally}: the frame is as declared (combined odds 10^{combined:.1f} to 1 "
            "against a frame turned 180° about the surface normal)."
        )
    if verdict == "turned_180_about_normal":
        return (
            f"{tally}: the data's frame is turned 180° about the surface normal (combined "
            f"odds 10^{-combined:.1f} to 1); every dip direction predicted in the declared "
            "frame points the wrong way."
        )
    if verdict == "inconsistent":
        return (
            f"{tally}: the boundaries disagree beyond chance (p = {p_split:.2g}); the "
            "data are inconsistent — check the plane identifications, the section "
            "records and the viewing side before trusting either frame."
        )
    if agree + oppose == 0:
        return f"{tally}: no boundary decides, so the frame cannot be checked."
    return (
        f"{tally}: the evidence (combined odds 10^{abs(combined):.1f} to 1) is too weak "
        "to decide the frame."
    )


def best_measurements(*tables: Mapping) -> dict:
    """One measured plane per segment: the one with the smallest dip σ among the tables.

    Parameters
    ----------
    *tables : mapping
        Tables of :mod:`inclination.sections` (``segment_id, normal_x, normal_y,
        normal_z, measured_dip_deg, measured_dip_sigma_deg, dip_direction_azimuth_deg,
        dip_direction_sigma_deg, dip_source, status``). Rows without a segment, or
        whose status is ``unmatched`` or ``ambiguous``, are left out.

    Returns
    -------
    dict of 1-D arrays
        The same columns, one row per segment, sorted by ``segment_id``.

    Examples
    --------
    >>> a = {"segment_id": np.array([1, 2]), "measured_dip_deg": np.array([50.0, 60.0]),
    ...      "measured_dip_sigma_deg": np.array([3.0, 1.0]), "status": np.array(["measured"] * 2)}
    >>> b = {"segment_id": np.array([1]), "measured_dip_deg": np.array([52.0]),
    ...      "measured_dip_sigma_deg": np.array([1.0]), "status": np.array(["measured"])}
    >>> best_measurements(a, b)["measured_dip_deg"].tolist()
    [52.0, 60.0]
    """
    keys = [k for k in _MEASUREMENT_COLUMNS if all(k in t for t in tables)] if tables else []
    rows = {k: [] for k in keys}
    for t in tables:
        ok = (np.asarray(t["segment_id"]) >= 0) & np.isin(
            np.asarray(t["status"]).astype(str), ("measured", "ill_conditioned")
        )
        for k in keys:
            rows[k].append(np.asarray(t[k])[ok])
    if not keys:
        return {}
    cat = {k: np.concatenate(v) for k, v in rows.items()}
    order = np.lexsort((cat["measured_dip_sigma_deg"], cat["segment_id"]))
    seg = cat["segment_id"][order]
    first = np.ones(len(seg), bool)
    first[1:] = seg[1:] != seg[:-1]
    return {k: v[order][first] for k, v in cat.items()}


_MEASUREMENT_COLUMNS = (
    "segment_id",
    "normal_x",
    "normal_y",
    "normal_z",
    "measured_dip_deg",
    "measured_dip_sigma_deg",
    "dip_direction_azimuth_deg",
    "dip_direction_sigma_deg",
    "dip_source",
    "status",
)


# --------------------------------------------------------------------------- full planes


def low_index_planes(lattice, *, max_index: int = 3):
    """Every plane (hkl) with indices up to ``max_index``, once per ± pair.

    Parameters
    ----------
    lattice : Lattice
    max_index : int, optional
        Largest |h|, |k|, |l|.

    Returns
    -------
    hkl : ndarray of int, shape (M, 3)
        Primitive indices (no common factor), first non-zero index positive.
    normals_crystal : ndarray, shape (M, 3)
        Unit normals in C (§4).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> hkl, _ = low_index_planes(Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...                           max_index=1)
    >>> len(hkl)
    13
    """
    rows = low_indices(max_index, kind="plane")
    return rows, plane_normals_crystal(lattice, rows)


def _format_plane(hkl, lattice) -> str:
    h, k, l_ = (int(v) for v in hkl)
    if lattice.crystal_system in ("hexagonal", "trigonal"):
        return format_indices((h, k, -(h + k), l_), "plane")
    return format_indices((h, k, l_), "plane")


def full_planes(
    measured: Mapping,
    boundaries: Mapping,
    grains: Mapping,
    phases: Mapping,
    *,
    max_index: int = 3,
    coherent_tolerance_deg: float = 5.0,
) -> dict:
    """Each measured plane in both grains' crystal frames, with its nearest low-index plane.

    For every row of ``measured`` with a normal: ``n_C = g · n_S`` in grain a and in
    grain b (§5), the nearest plane (hkl) with indices up to ``max_index`` in each
    grain and the angle to it; for Σ3 boundaries between two grains of one cubic
    phase, the {111} plane the two grains share and whether the measured plane lies
    within ``coherent_tolerance_deg`` of it (a coherent twin).

    Parameters
    ----------
    measured : mapping
        Measured planes by ``segment_id`` (e.g. :func:`best_measurements`), normals in S.
    boundaries : mapping
        Segments or identification table with ``segment_id, grain_a, grain_b`` and
        optionally ``sigma`` (CSL label such as ``"3"``, ``""`` when none; integers
        are read alike).
    grains : mapping
        Grain table: ``grain_id, phase, quat`` (G, 4) (sample to crystal, §3).
    phases : mapping of int to Phase
        The job's phases by id (``.lattice``, ``.laue``).
    max_index : int, optional
        Largest Miller index searched.
    coherent_tolerance_deg : float, optional
        Largest angle from the common {111} of a coherent Σ3 twin (5° is common
        practice for measured planes).

    Returns
    -------
    dict of 1-D arrays, one row per measured segment
        ``segment_id, normal_x, normal_y, normal_z`` (S); ``normal_a_x/y/z``,
        ``normal_b_x/y/z`` (crystal frames of grains a and b); ``plane_a_measured,
        plane_b_measured`` (e.g. ``(1 1 -1)``), ``plane_a_deviation_deg,
        plane_b_deviation_deg``; ``twin_plane_deviation_deg`` (NaN unless Σ3) and
        ``coherent_twin`` (``yes``/``no``/"").

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice, Phase
    >>> cu = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> out = full_planes(
    ...     {"segment_id": np.array([0]), "normal_x": np.array([0.0]),
    ...      "normal_y": np.array([0.6]), "normal_z": np.array([0.8])},
    ...     {"segment_id": np.array([0]), "grain_a": np.array([1]), "grain_b": np.array([2])},
    ...     {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...      "quat": np.array([[1.0, 0, 0, 0], [0.0, 1, 0, 0]])},
    ...     {1: cu})
    >>> out["plane_a_measured"].tolist(), out["plane_a_deviation_deg"].round(3).tolist()
    (['(0 2 3)'], [3.18])
    """
    check_positive(coherent_tolerance_deg, "coherent_tolerance_deg")
    seg = np.asarray(measured["segment_id"])
    normal_s = np.stack(
        [np.asarray(measured[k], float) for k in ("normal_x", "normal_y", "normal_z")], -1
    )
    has = (seg >= 0) & np.all(np.isfinite(normal_s), axis=1)
    seg, normal_s = seg[has], normal_s[has]
    normal_s = normal_s / np.linalg.norm(normal_s, axis=1, keepdims=True)
    m = len(seg)

    b_ids = np.asarray(boundaries["segment_id"])
    order = np.argsort(b_ids)
    found = np.minimum(np.searchsorted(b_ids, seg, sorter=order), max(len(b_ids) - 1, 0))
    pos = order[found] if m and len(b_ids) else np.zeros(m, int)
    if m and (len(b_ids) == 0 or np.any(b_ids[pos] != seg)):
        missing = seg[b_ids[pos] != seg][0] if len(b_ids) else seg[0]
        raise ValueError(f"Expected every measured segment in `boundaries`, got {missing!r}.")
    grain_ab = [np.asarray(boundaries[k])[pos] for k in ("grain_a", "grain_b")]
    # Σ comes as a CSL label ("3", "13b", "") or as an integer; both name Σ3 alike.
    sigma = (
        np.char.strip(np.asarray(boundaries["sigma"]).astype(str))[pos]
        if "sigma" in boundaries
        else np.full(m, "")
    )
    g_ids = np.asarray(grains["grain_id"])
    g_order = np.argsort(g_ids)
    quat = np.asarray(grains["quat"], float)
    g_phase = np.asarray(grains["phase"])

    out = {"segment_id": seg}
    for axis, k in zip("xyz", range(3), strict=True):
        out[f"normal_{axis}"] = normal_s[:, k]
    common_s = {}
    for side, ids in zip("ab", grain_ab, strict=True):
        idx = np.minimum(np.searchsorted(g_ids, ids, sorter=g_order), len(g_ids) - 1)
        row = g_order[idx]
        if m and np.any(g_ids[row] != ids):
            bad = ids[g_ids[row] != ids][0]
            raise ValueError(f"Expected every grain of `boundaries` in `grains`, got {bad!r}.")
        q = quat[row]
        n_c = quat_apply(q, normal_s) if m else np.zeros((0, 3))
        for axis, k in zip("xyz", range(3), strict=True):
            out[f"normal_{side}_{axis}"] = n_c[:, k]
        names = np.full(m, "", dtype=object)
        dev = np.full(m, np.nan)
        for phase_id in np.unique(g_phase[row]):
            sel = g_phase[row] == phase_id
            phase = phases[int(phase_id)]
            hkl, nc = low_index_planes(phase.lattice, max_index=max_index)
            cos = np.abs(n_c[sel] @ nc.T)
            best = np.argmax(cos, axis=1)
            dev[sel] = np.rad2deg(np.arccos(np.clip(cos[np.arange(sel.sum()), best], 0, 1)))
            names[sel] = [_format_plane(hkl[b], phase.lattice) for b in best]
            if phase.laue in ("m-3m", "m-3"):
                n111 = plane_normals_crystal(
                    phase.lattice, [[1, 1, 1], [1, 1, -1], [1, -1, 1], [-1, 1, 1]]
                )
                # The {111} normals of each grain written in S: n_S = gᵀ n_C.
                common_s.setdefault(side, np.full((m, 4, 3), np.nan))
                common_s[side][sel] = np.einsum("nji,kj->nki", quat_as_matrix(q[sel]), n111)
        out[f"plane_{side}_measured"] = names.astype(str) if m else np.array([], str)
        out[f"plane_{side}_deviation_deg"] = dev

    twin_dev = np.full(m, np.nan)
    is_twin = (sigma == "3") & (grain_ab[0] >= 0)
    if "a" in common_s and "b" in common_s:
        sel = (
            is_twin
            & np.all(np.isfinite(common_s["a"][:, 0]), axis=1)
            & np.all(np.isfinite(common_s["b"][:, 0]), axis=1)
        )
        if sel.any():
            na, nb = common_s["a"][sel], common_s["b"][sel]
            cos_ab = np.abs(np.einsum("nki,nli->nkl", na, nb)).reshape(len(na), -1)
            best = np.argmax(cos_ab, axis=1)
            shared = na[np.arange(len(na)), best // 4]
            cos_m = np.abs(np.sum(shared * normal_s[sel], axis=1))
            twin_dev[sel] = np.rad2deg(np.arccos(np.clip(cos_m, 0.0, 1.0)))
    coherent = np.where(
        np.isnan(twin_dev), "", np.where(twin_dev <= coherent_tolerance_deg, "yes", "no")
    )
    out["twin_plane_deviation_deg"] = twin_dev
    out["coherent_twin"] = coherent.astype(str)
    return out
