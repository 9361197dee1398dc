"""The frame audit: how a map's orientation frame relates to its declared axes.

Owns the hypotheses (:data:`RELATIONS`, the rotation sense, the Cartesian setting of each
hexagonal or trigonal phase), their evidence from the traces of twin boundaries
(:func:`turn_fit`, :func:`audit_frame`), the verdict and the job patch
(:class:`FrameAudit`). Conventions §3 (data-frame rotation, rotation sense), §4 (settings),
§5 (the shared plane's trace, :func:`inclination.planes.predict.shared_plane`) and §6
(traces cannot tell a frame from the same frame turned 180° about Z).

Every hypothesis is a transformation of the grain mean orientations and of the twin
relations; the map is never segmented again. A common turn of the data frame (the eight
in-plane relations and the small fitted turn) leaves every misorientation unchanged, so the
twin boundaries are classified once per rotation sense and setting, the only hypotheses
that change them.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from .crystal.csl import (
    TWIN_MAX_DEVIATION_DEG,
    cubic_csl_relations,
    half_turn_disorientations,
    hexagonal_twins,
    max_deviation_deg,
)
from .crystal.families import expand_family
from .crystal.lattice import plane_normals_crystal
from .crystal.phases import Phase
from .crystal.rotations import quat_as_axis_angle_deg, quat_from_axis_angle_deg, quat_multiply
from .crystal.symmetry import misorientation_quat
from .errors import SettingError
from .frames import ROTATION_SENSES, DeclaredAxes, orientations_to_declared, orientations_to_sample
from .planes.geometry import surface_geometry
from .planes.predict import (
    pair_spread_deg,
    predict_planes,
    shared_plane,
    trace_sigma_predicted_deg,
)

__all__ = [
    "AUDIT_VERSION",
    "RELATIONS",
    "SETTING_LAUE",
    "Hypothesis",
    "FrameAudit",
    "TurnFit",
    "relation_quat",
    "turn_fit",
    "audit_frame",
    "apply_job_patch",
]

#: Version of the audit.json layout (schemas/audit.schema.json).
AUDIT_VERSION = "1.0"

#: The eight in-plane relations of a square, as the job's ``data_frame_rotation`` writes
#: them (conventions §3): four turns about Z and, for a mirror of the positions, the four
#: half turns about in-plane axes (a mirror composed with the inversion every Laue class
#: holds is a proper rotation). Each is paired with its 180° partner about Z (§6).
RELATIONS = {
    "identity": ("identity", "z180"),
    "z90": ("z90", "z270"),
    "z180": ("z180", "identity"),
    "z270": ("z270", "z90"),
    "x180": ("x180", "y180"),
    "y180": ("y180", "x180"),
    "diagonal180": ({"axis": [1, 1, 0], "angle_deg": 180}, "antidiagonal180"),
    "antidiagonal180": ({"axis": [1, -1, 0], "angle_deg": 180}, "diagonal180"),
}

#: Laue classes whose two Cartesian settings differ by a turn about c (conventions §4).
SETTING_LAUE = ("6/mmm", "6/m", "-3m", "-3")
_OTHER_SETTING = {"x_parallel_a": "x_parallel_a_star", "x_parallel_a_star": "x_parallel_a"}

# Outlier term of the trace mixture: the share of twin-classified segments that are
# incoherent twin facets or misfits, whose traces then lie at any angle (common practice
# for robust voting; the fitted turn's σ is a sandwich estimate, right whatever the share).
_OUTLIER_FRACTION = 0.3
# A trace σ below this is not credible for a fitted straight segment (pixel staircase).
_SIGMA_FLOOR_DEG = 0.25


def relation_quat(name: str) -> np.ndarray:
    """Quaternion Q (declared → data axes, ``v_D = Q v_A``) of one of :data:`RELATIONS`.

    Examples
    --------
    >>> relation_quat("z90").round(6).tolist()
    [0.707107, 0.0, 0.0, 0.707107]
    >>> relation_quat("diagonal180").round(6).tolist()
    [0.0, 0.707107, 0.707107, 0.0]
    """
    from .frames import data_frame_quat

    if name not in RELATIONS:
        raise SettingError(f"Expected a relation in {tuple(RELATIONS)}, got {name!r}.")
    return data_frame_quat(RELATIONS[name][0])


@dataclass(frozen=True)
class TurnFit:
    """The small turn about Z that best aligns the twin traces with their shared planes.

    Attributes
    ----------
    turn_deg, turn_sigma_deg : float
        Fitted turn of the data frame about declared z and its standard uncertainty
        (sandwich estimate); NaN without voters.
    log_likelihood : float
        Sum over voters of log[(1 − ε)·180°·φ(d; σ) + ε], the log-likelihood of the
        deviations against traces at random angles (nats; 0 without voters).
    n_voters : int
    """

    turn_deg: float
    turn_sigma_deg: float
    log_likelihood: float
    n_voters: int


def _terms(deviation_deg, sigma_deg, outlier_fraction):
    d = np.mod(deviation_deg + 90.0, 180.0) - 90.0
    phi = np.exp(-0.5 * (d / sigma_deg) ** 2) / (np.sqrt(2 * np.pi) * sigma_deg)
    return np.log((1.0 - outlier_fraction) * 180.0 * phi + outlier_fraction)


def turn_fit(
    deviation_deg,
    sigma_deg,
    *,
    max_turn_deg: float = 10.0,
    outlier_fraction: float = _OUTLIER_FRACTION,
) -> TurnFit:
    """Fit the common turn δ of signed trace deviations d (measured − predicted).

    Each voter's deviation after a turn δ is d − δ (period 180°); it is a mixture of
    a normal of σ (the trace's σ) and, with weight ε, a uniform over 180°, so that
    outliers (incoherent twin segments) cannot pull δ. δ maximises the summed
    log-likelihood on a 0.5° grid over ±``max_turn_deg``, refined by a bounded
    scalar search; its σ is the sandwich Σψ² / (Σψ')² of the per-voter scores ψ.

    Parameters
    ----------
    deviation_deg, sigma_deg : array_like, shape (N,)
        Signed deviations and their σ (> 0), degrees.
    max_turn_deg : float, default 10.0
    outlier_fraction : float, default 0.3

    Returns
    -------
    TurnFit
        Empty input: NaN turn, log-likelihood 0, no voters.

    Examples
    --------
    >>> f = turn_fit([2.9, 3.1, 3.0, 60.0], [0.5, 0.5, 0.5, 0.5])
    >>> round(f.turn_deg, 2), f.n_voters, f.log_likelihood > 0
    (3.0, 4, True)
    """
    from scipy.optimize import minimize_scalar

    d = np.asarray(deviation_deg, dtype=float).ravel()
    s = np.maximum(np.asarray(sigma_deg, dtype=float).ravel(), _SIGMA_FLOOR_DEG)
    if d.size == 0:
        return TurnFit(float("nan"), float("nan"), 0.0, 0)

    def total(delta):
        return float(np.sum(_terms(d - delta, s, outlier_fraction)))

    grid = np.arange(-max_turn_deg, max_turn_deg + 1e-9, 0.5)
    # The coarse search only places the start of the refinement: about 500 voters,
    # evenly thinned, place it as well as all of them would.
    thin = slice(None, None, max(1, d.size // 500))
    values = _terms(d[None, thin] - grid[:, None], s[None, thin], outlier_fraction).sum(axis=1)
    start = float(grid[int(np.argmax(values))])
    lo, hi = max(start - 0.5, -max_turn_deg), min(start + 0.5, max_turn_deg)
    best = minimize_scalar(
        lambda x: -total(x), bounds=(lo, hi), method="bounded", options={"xatol": 1e-5}
    )
    delta = float(best.x)
    h = 1e-3
    plus = _terms(d - delta - h, s, outlier_fraction)
    minus = _terms(d - delta + h, s, outlier_fraction)
    mid = _terms(d - delta, s, outlier_fraction)
    score = (plus - minus) / (2 * h)
    curvature = (plus - 2 * mid + minus) / h**2
    info = -float(np.sum(curvature))
    sigma = float(np.sqrt(np.sum(score**2)) / info) if info > 0 else float("inf")
    return TurnFit(delta, sigma, float(np.sum(mid)), int(d.size))


@dataclass(frozen=True)
class Hypothesis:
    """One hypothesis on the frame, with its evidence.

    Attributes
    ----------
    relation : str
        One of :data:`RELATIONS` (relative to the declared data-frame rotation).
    rotation_sense : str
        ``'passive'`` or ``'active'``.
    settings : tuple of (int, str)
        (phase id, Cartesian setting) of each hexagonal or trigonal phase.
    fit : TurnFit
    partner : str
        The relation turned 180° about Z, which the traces cannot tell from this one.
    """

    relation: str
    rotation_sense: str
    settings: tuple
    fit: TurnFit
    partner: str

    def describe(self) -> str:
        """The hypothesis in plain words."""
        words = [f"data frame {self.relation}" if self.relation != "identity" else "axes as given"]
        words.append(f"{self.rotation_sense} rotations")
        words += [f"phase {pid} {setting}" for pid, setting in self.settings]
        return ", ".join(words)


@dataclass(frozen=True)
class FrameAudit:
    """The audit of one map: ranked hypotheses, the verdict and the job patch.

    Attributes
    ----------
    hypotheses : tuple of Hypothesis
        Ranked, best first (by log-likelihood; ties keep the declared first).
    best : int
        Index of the best hypothesis in ``hypotheses`` (after the sections settled its
        180° partner, when they could).
    declared_is_best : bool or str
        True, False, or ``'undecided'``.
    reason : str
        Why, in one sentence.
    turn_deg, turn_sigma_deg : float
        The best hypothesis's fitted turn about declared z and its σ.
    turn_applied : bool
        Whether the turn is large enough (beyond 3σ and 0.5°) to go into the patch.
    settled_by : str
        ``'sections'`` when a comparison with measured dips chose between the best relation
        and its 180° partner, else ``'traces only'``.
    job_patch : dict
        ``{"map": {...}, "phases": {"id": {...}}, "targets": [JSON pointers]}``; empty
        ``map`` and ``phases`` when the job is right.
    """

    hypotheses: tuple
    best: int
    declared_is_best: object
    reason: str
    turn_deg: float
    turn_sigma_deg: float
    turn_applied: bool
    settled_by: str
    job_patch: dict

    @property
    def best_hypothesis(self) -> Hypothesis:
        """The hypothesis at ``best``."""
        return self.hypotheses[self.best]

    @property
    def patch_is_empty(self) -> bool:
        """True when the patch changes nothing."""
        return not self.job_patch["map"] and not self.job_patch["phases"]

    def patch_line(self) -> str:
        """The patch as one line (for stderr)."""
        import json

        parts = {k: v for k, v in self.job_patch.items() if k != "targets" and v}
        return json.dumps(parts, sort_keys=True)

    def sentence(self) -> str:
        """The finding in plain words, for reports."""
        best = self.best_hypothesis
        if self.declared_is_best == "undecided":
            return f"Frame audit undecided: {self.reason}"
        if self.declared_is_best:
            return f"Frame audit: the declared frame is the best hypothesis ({self.reason})."
        text = (
            f"Frame audit: the declared frame is NOT the best hypothesis; best is {best.describe()}"
        )
        if self.turn_applied:
            text += f", turned {self.turn_deg:.2f}° ± {self.turn_sigma_deg:.2f}° about z"
        text += f" ({self.reason}). Job patch: {self.patch_line()}"
        if self.settled_by != "sections" and best.relation not in ("identity", "z180"):
            text += (
                f". Traces alone cannot tell {best.relation} from {best.partner} "
                "(the same relation turned 180° about z); a cross-section or serial "
                "section would settle it"
            )
        return text + "."

    def as_dict(self) -> dict:
        """The audit.json document (schemas/audit.schema.json)."""

        def num(x):
            return None if not np.isfinite(x) else float(x)

        return {
            "schema_version": AUDIT_VERSION,
            "declared_is_best": self.declared_is_best,
            "reason": self.reason,
            "sentence": self.sentence(),
            "best": self.best,
            "turn_deg": num(self.turn_deg),
            "turn_sigma_deg": num(self.turn_sigma_deg),
            "turn_applied": self.turn_applied,
            "settled_by": self.settled_by,
            "note": (
                "Traces alone cannot tell a relation from the same relation turned 180° "
                "about z (conventions §6); sections settle it."
            ),
            "hypotheses": [
                {
                    "rank": i,
                    "relation": h.relation,
                    "partner": h.partner,
                    "rotation_sense": h.rotation_sense,
                    "settings": {str(pid): s for pid, s in h.settings},
                    "description": h.describe(),
                    "log_likelihood": float(h.fit.log_likelihood),
                    "n_voters": h.fit.n_voters,
                    "turn_deg": num(h.fit.turn_deg),
                    "turn_sigma_deg": num(h.fit.turn_sigma_deg),
                }
                for i, h in enumerate(self.hypotheses)
            ],
            "job_patch": self.job_patch,
        }


# ----------------------------------------------------------------------------- evidence


@dataclass(frozen=True)
class _Relation:
    quat: np.ndarray
    max_deviation_deg: float
    normals_crystal: np.ndarray


def _twin_relations(phase: Phase, criterion: str) -> list[_Relation]:
    """Σ3 for cubic phases, the twins the families imply for hexagonal and trigonal ones."""
    if phase.laue == "m-3m":
        sigma3 = next(r for r in cubic_csl_relations(3) if r.sigma == 3)
        normals = plane_normals_crystal(
            phase.lattice, expand_family(phase.lattice, (1, 1, 1), "m-3m")
        )
        limit = float(max_deviation_deg(3, criterion=criterion))
        return [_Relation(np.asarray(sigma3.quat, float), limit, normals)]
    if phase.laue == "6/mmm":
        a, _, c = phase.lattice.parameters[:3]
        out = []
        for twin in hexagonal_twins(c / a, setting=phase.setting):
            rows = expand_family(phase.lattice, twin.plane, "6/mmm")
            out.append(
                _Relation(
                    np.asarray(twin.quat, float),
                    twin.max_deviation_deg,
                    plane_normals_crystal(phase.lattice, rows),
                )
            )
        return out
    if phase.laue in ("-3m", "-3"):
        return _trigonal_twins(phase)
    return []


def _trigonal_twins(phase: Phase) -> list[_Relation]:
    """One twin per declared plane family of a trigonal phase: the half turn about its normal.

    The 180° rotation about the normal of the plane K1 (the reflection twin on K1 composed
    with the inversion every Laue class holds; from memory), reduced by the disorientation
    under the phase's Laue class and setting, as :func:`hexagonal_twins` builds the
    hexagonal ones (conventions §4). A half turn that reduces to about 0° is a symmetry of
    the class, not a twin, and is dropped; so is a family whose half turn repeats one kept.
    """
    from .crystal.indices import parse_indices

    planes = [parse_indices(text) for text in phase.families]
    planes = [p.values for p in planes if p.kind == "plane"]
    if not planes:
        return []
    dis = half_turn_disorientations(phase.lattice, planes, phase.laue)
    out, seen = [], []
    for plane, angle, quat in zip(
        planes, np.atleast_1d(dis.angle_deg), np.reshape(dis.quat, (-1, 4)), strict=True
    ):
        if float(angle) < 0.5:
            continue
        q = np.asarray(quat, float)
        if any(abs(float(np.dot(q, k))) > 1 - 1e-9 for k in seen):
            continue
        seen.append(q)
        rows = expand_family(phase.lattice, plane, phase.laue)
        normals = plane_normals_crystal(phase.lattice, rows)
        out.append(_Relation(q, TWIN_MAX_DEVIATION_DEG, normals))
    return out


def _with_setting(phase: Phase, setting: str) -> Phase:
    if phase.setting == setting:
        return phase
    return dataclasses.replace(phase, lattice=dataclasses.replace(phase.lattice, setting=setting))


def _voters(g_data, ia, ib, phase_ids, phases, criterion):
    """Rows whose grain pair is a twin relation of its phase, with each row's twin normals.

    Returns (rows, normals list per row group) as a list of (rows, normals_crystal).
    """
    from .crystal.csl import relation_deviation_deg

    groups = []
    for pid, phase in phases.items():
        rows = np.flatnonzero(phase_ids == pid)
        relations = _twin_relations(phase, criterion)
        if not rows.size or not relations:
            continue
        m = misorientation_quat(g_data[ia[rows]], g_data[ib[rows]])
        best = np.full(rows.size, -1)
        best_dev = np.full(rows.size, np.inf)
        for k, rel in enumerate(relations):
            dev = relation_deviation_deg(m, rel.quat, phase.laue, setting=phase.setting)
            take = (dev <= rel.max_deviation_deg) & (dev < best_dev)
            best[take], best_dev[take] = k, dev[take]
        for k, rel in enumerate(relations):
            sel = rows[best == k]
            if sel.size:
                groups.append((sel, rel.normals_crystal))
    return groups


def _shared_normals(q_sample, ia, ib, groups, spread):
    """Normal in S and predicted trace σ of the shared twin plane of each voter (§5).

    The pair of twin-plane normals (one per grain) closest in S is the same under any
    common turn of the two orientations, so this runs once per rotation sense and setting;
    each in-plane relation then only turns the normals.
    """
    rows, normals_s, sigma = [], [], []
    for sel, normals in groups:
        pa = predict_planes(q_sample[ia[sel]], normals).normal_sample
        pb = predict_planes(q_sample[ib[sel]], normals).normal_sample
        dots = np.abs(np.einsum("nki,nli->nkl", pa, pb)).reshape(len(sel), -1)
        pick = np.argmax(dots, axis=1)
        k, m = np.divmod(pick, normals.shape[0])
        n = np.arange(len(sel))
        plane = shared_plane(pa[n, k], pb[n, m])
        ok = plane.has_trace
        # The dip, and so the predicted σ, is the same under every relation (|n_z| kept).
        sp = trace_sigma_predicted_deg(
            pair_spread_deg(spread[ia[sel]], spread[ib[sel]]), plane.dip_deg
        )
        rows.append(sel[ok])
        normals_s.append(plane.normal_sample[ok])
        sigma.append(sp[ok])
    if not rows:
        return np.zeros(0, int), np.zeros((0, 3)), np.zeros(0)
    return np.concatenate(rows), np.concatenate(normals_s), np.concatenate(sigma)


def _frame_matrix(axes, q_rel):
    """(3, 3) R with g_S = g_data · R for the data-frame rotation ``q_rel`` (§3)."""
    from .crystal.rotations import quat_as_matrix

    return quat_as_matrix(orientations_to_sample(np.array([1.0, 0.0, 0.0, 0.0]), axes, q_rel))


def audit_frame(
    segments: Mapping,
    grains: Mapping,
    phases: Mapping[int, Phase],
    *,
    axes: DeclaredAxes,
    data_frame_rotation=None,
    rotation_sense: str = "passive",
    sigma_criterion: str = "brandon",
    settle: Callable | None = None,
    min_voters: int = 5,
    min_margin_nats: float = float(np.log(100.0)),
    outlier_fraction: float = _OUTLIER_FRACTION,
    max_turn_deg: float = 10.0,
    map_pointers: tuple = ("/map",),
) -> FrameAudit:
    """Rank the frame hypotheses of a map by how well its twin traces fit (conventions §3–§6).

    Parameters
    ----------
    segments : table
        Straight segments (inclination.traces.fit_segments): ``grain_a``, ``grain_b``,
        ``phase_a``, ``phase_b``, ``trace_angle_deg`` and ``trace_sigma_deg`` in S,
        optional ``too_short``.
    grains : table
        The grain table (GrainMap.grains): ``grain_id``, ``quat`` (in S as declared),
        ``spread_mean_deg``.
    phases : mapping of int to Phase
    axes, data_frame_rotation, rotation_sense
        The map's declaration (conventions §2–§3), used to recover the stored rotations.
    sigma_criterion : str
        The Σ criterion for the Σ3 window (Brandon by default).
    settle : callable, optional
        ``settle(grain_quat_sample, phases) -> verdict``: compares the map with measured
        dips (inclination.compare) under a hypothesis; ``'as_declared'`` keeps the
        relation, ``'turned_180_about_normal'`` takes its partner.
    min_voters : int, default 5
        Fewer voting twin segments than this: undecided.
    min_margin_nats : float, default log(100)
        The best must beat the next hypothesis (other than its 180° partner) by this.
    outlier_fraction : float, default 0.3
        Share ε of voters taken to be outliers in the trace mixture (:func:`turn_fit`).
    max_turn_deg : float, default 10.0
        Range of the fitted turn.
    map_pointers : tuple of str
        JSON pointers of the map entries the patch applies to.

    Returns
    -------
    FrameAudit
    """
    sense0 = rotation_sense
    if sense0 not in ROTATION_SENSES:
        raise SettingError(
            f"Expected `rotation_sense` to be one of {ROTATION_SENSES}, got {sense0!r}."
        )
    dfr0 = (
        np.array([1.0, 0, 0, 0])
        if data_frame_rotation is None
        else np.asarray(data_frame_rotation, float)
    )
    gid = np.asarray(grains["grain_id"], dtype=np.int64)
    quat = np.asarray(grains["quat"], dtype=float).reshape(-1, 4)
    spread = np.nan_to_num(np.asarray(grains["spread_mean_deg"], dtype=float), nan=0.0)
    order = np.argsort(gid)
    ga = np.asarray(segments["grain_a"], dtype=np.int64)
    gb = np.asarray(segments["grain_b"], dtype=np.int64)
    pa = np.asarray(segments["phase_a"], dtype=np.int64)
    pb = np.asarray(segments["phase_b"], dtype=np.int64)
    theta_m = np.asarray(segments["trace_angle_deg"], dtype=float)
    sigma_m = np.asarray(segments["trace_sigma_deg"], dtype=float)
    short = np.asarray(segments.get("too_short", np.zeros(ga.size, bool)), dtype=bool)
    keep = (~short) & (pa == pb) & np.isfinite(theta_m) & np.isfinite(sigma_m)
    keep &= np.isin(ga, gid) & np.isin(gb, gid)
    ia = order[np.searchsorted(gid[order], ga[keep])] if keep.any() else np.zeros(0, int)
    ib = order[np.searchsorted(gid[order], gb[keep])] if keep.any() else np.zeros(0, int)
    phase_ids, theta_m, sigma_m = pa[keep], theta_m[keep], sigma_m[keep]
    ok_quat = np.all(np.isfinite(quat), axis=1)
    good = ok_quat[ia] & ok_quat[ib]
    ia, ib, phase_ids, theta_m, sigma_m = (
        ia[good],
        ib[good],
        phase_ids[good],
        theta_m[good],
        sigma_m[good],
    )
    quat = np.where(ok_quat[:, None], quat, np.array([1.0, 0, 0, 0]))
    # The rotations as stored in the file, recovered from the grain means (§3).
    stored = orientations_to_declared(quat, axes, dfr0, rotation_sense=sense0)

    switchable = [pid for pid, p in phases.items() if p.laue in SETTING_LAUE]
    setting_choices = [()]
    for pid in switchable:
        here = phases[pid].setting
        setting_choices = [
            c + ((pid, s),) for c in setting_choices for s in (here, _OTHER_SETTING[here])
        ]
    declared_settings = tuple((pid, phases[pid].setting) for pid in switchable)
    turn_1deg = quat_from_axis_angle_deg([0.0, 0.0, 1.0], 1.0)

    hypotheses = []
    for sense in ROTATION_SENSES:
        for settings in setting_choices:
            phases_h = {
                pid: _with_setting(p, dict(settings).get(pid, p.setting))
                for pid, p in phases.items()
            }
            g_data = stored if sense == "passive" else stored * np.array([1.0, -1, -1, -1])
            groups = _voters(g_data, ia, ib, phase_ids, phases_h, sigma_criterion)
            r0 = _frame_matrix(axes, dfr0)
            rows, n0, sigma_p = _shared_normals(
                orientations_to_sample(g_data, axes, dfr0), ia, ib, groups, spread
            )
            fitted = {}
            for name, (_, partner) in RELATIONS.items():
                if partner in fitted:
                    # A relation and its 180° partner give the same traces (§6): one fit.
                    hypotheses.append(Hypothesis(name, sense, settings, fitted[partner], partner))
                    continue
                q_rel = quat_multiply(dfr0, relation_quat(name))
                # n_S = gᵀ n_C with g = g_data · R: the normals of relation h are
                # R_hᵀ R_0 n_0 (conventions §3, §5).
                turn_h = _frame_matrix(axes, q_rel).T @ r0
                theta_p = surface_geometry(n0 @ turn_h.T).trace_angle_deg
                # Direction in which a turn of the data frame about declared z moves the
                # predicted traces in S (±1 by the handedness of the relation and axes).
                turn_1 = _frame_matrix(axes, quat_multiply(q_rel, turn_1deg)).T @ r0
                head = n0[:64]
                theta_1 = surface_geometry(head @ turn_1.T).trace_angle_deg
                if rows.size:
                    step = np.mod(theta_1 - theta_p[:64] + 90.0, 180.0) - 90.0
                    sign = 1.0 if np.median(step) > 0 else -1.0
                else:
                    sign = 1.0
                deviation = theta_m[rows] - theta_p
                fit = turn_fit(
                    sign * deviation,
                    np.hypot(sigma_m[rows], sigma_p),
                    max_turn_deg=max_turn_deg,
                    outlier_fraction=outlier_fraction,
                )
                fitted[name] = fit
                hypotheses.append(Hypothesis(name, sense, settings, fit, partner))

    declared_key = ("identity", sense0, declared_settings)

    def rank_key(h):
        is_declared = (h.relation, h.rotation_sense, h.settings) == declared_key
        return (-round(h.fit.log_likelihood, 6), not is_declared, list(RELATIONS).index(h.relation))

    ranked = sorted(hypotheses, key=rank_key)
    top = ranked[0]
    # The runner-up: the best hypothesis that is not the top one's 180° partner.
    rival = next(
        (
            h
            for h in ranked[1:]
            if not (
                h.relation in (top.relation, top.partner)
                and h.rotation_sense == top.rotation_sense
                and h.settings == top.settings
            )
        ),
        None,
    )
    best_i = 0
    settled_by = "traces only"
    n = top.fit.n_voters
    margin = top.fit.log_likelihood - (rival.fit.log_likelihood if rival else -np.inf)
    if n < min_voters:
        decision = "undecided"
        reason = (
            f"only {n} segment(s) within the twin window voted (Σ3 by "
            f"{sigma_criterion}); at least {min_voters} are needed"
        )
    elif top.fit.log_likelihood <= 0:
        decision = "undecided"
        reason = "no hypothesis fits the twin traces better than traces at random angles"
    elif margin < min_margin_nats:
        decision = "undecided"
        reason = (
            f"tie: '{top.describe()}' and '{rival.describe()}' differ by "
            f"{margin:.2f} nats in log-likelihood (less than {min_margin_nats:.2f})"
        )
    else:
        decision = "decided"
        reason = (
            f"{n} twin segments voted; log-likelihood {top.fit.log_likelihood:.1f} against "
            f"{rival.fit.log_likelihood:.1f} for the next hypothesis"
            if rival
            else f"{n} twin segments voted"
        )
    # Choose between the top relation and its 180° partner.
    partner_i = next(
        i
        for i, h in enumerate(ranked)
        if h.relation == top.partner
        and h.rotation_sense == top.rotation_sense
        and h.settings == top.settings
    )
    pick = 0
    if decision == "decided" and settle is not None:
        h = ranked[0]
        phases_h = {
            pid: _with_setting(p, dict(h.settings).get(pid, p.setting)) for pid, p in phases.items()
        }
        g_data = stored if h.rotation_sense == "passive" else stored * np.array([1.0, -1, -1, -1])
        q_rel = quat_multiply(dfr0, relation_quat(h.relation))
        turn = h.fit.turn_deg if np.isfinite(h.fit.turn_deg) else 0.0
        q_rel = quat_multiply(q_rel, quat_from_axis_angle_deg([0.0, 0.0, 1.0], turn))
        verdict = settle(orientations_to_sample(g_data, axes, q_rel), phases_h)
        if verdict in ("as_declared", "turned_180_about_normal"):
            settled_by = "sections"
            pick = 0 if verdict == "as_declared" else partner_i
    elif top.relation == "z180" and ranked[partner_i].relation == "identity":
        # Without sections the declared relation stands against its partner (§6).
        pick = partner_i
    if pick:
        ranked.insert(0, ranked.pop(pick))
    best = ranked[best_i]
    turn = best.fit.turn_deg
    sigma = best.fit.turn_sigma_deg
    turn_applied = bool(
        decision == "decided" and np.isfinite(turn) and abs(turn) > max(3 * sigma, 0.5)
    )
    if decision == "undecided":
        declared_is_best = "undecided"
    else:
        declared_is_best = bool(
            (best.relation, best.rotation_sense, best.settings) == declared_key and not turn_applied
        )
    patch = {"map": {}, "phases": {}, "targets": list(map_pointers)}
    if declared_is_best is False:
        if best.relation != "identity" or turn_applied:
            q = quat_multiply(dfr0, relation_quat(best.relation))
            if turn_applied:
                q = quat_multiply(q, quat_from_axis_angle_deg([0.0, 0.0, 1.0], turn))
            patch["map"]["data_frame_rotation"] = _rotation_spec(q)
        if best.rotation_sense != sense0:
            patch["map"]["rotation_sense"] = best.rotation_sense
        for pid, setting in best.settings:
            if setting != phases[pid].setting:
                patch["phases"][str(pid)] = {"setting": setting}
    return FrameAudit(
        tuple(ranked),
        best_i,
        declared_is_best,
        reason,
        float(turn),
        float(sigma),
        turn_applied,
        settled_by,
        patch,
    )


def _rotation_spec(q) -> object:
    """A data_frame_rotation as the job writes it: a named turn when it is one (§3)."""
    from .frames import NAMED_TURNS, data_frame_quat

    q = np.asarray(q, float)
    named = [*NAMED_TURNS, *(spec for spec, _ in RELATIONS.values() if not isinstance(spec, str))]
    for spec in named:
        if abs(abs(float(np.dot(data_frame_quat(spec), q))) - 1.0) < 1e-9:
            return spec if isinstance(spec, str) else {**spec, "axis": list(spec["axis"])}
    axis, angle = quat_as_axis_angle_deg(q)
    axis = np.asarray(axis, float).ravel()
    return {
        "axis": [round(float(v), 9) + 0.0 for v in axis],
        "angle_deg": round(float(np.asarray(angle).ravel()[0]), 6),
    }


def apply_job_patch(job: Mapping, patch: Mapping) -> dict:
    """A new job dict with an audit's ``job_patch`` applied (the input is not modified).

    ``patch["map"]`` is set on every map entry its ``targets`` point to, and
    ``patch["phases"]`` on the phases of those ids.

    Examples
    --------
    >>> job = {"map": {"path": "m.npz"}, "phases": [{"id": 1, "name": "Ti"}]}
    >>> patch = {"map": {"rotation_sense": "active"}, "phases": {"1": {"setting": "x_parallel_a"}},
    ...          "targets": ["/map"]}
    >>> new = apply_job_patch(job, patch)
    >>> new["map"], new["phases"][0]["setting"], "rotation_sense" in job["map"]
    ({'path': 'm.npz', 'rotation_sense': 'active'}, 'x_parallel_a', False)
    """
    import copy

    out = copy.deepcopy(dict(job))
    for pointer in patch.get("targets", ["/map"]):
        entry = out
        for key in pointer.strip("/").split("/"):
            entry = entry[int(key)] if isinstance(entry, list) else entry[key]
        entry.update(copy.deepcopy(patch.get("map", {})))
    for phase in out.get("phases", []):
        phase.update(copy.deepcopy(patch.get("phases", {}).get(str(phase.get("id")), {})))
    return out
