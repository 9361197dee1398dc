"""Registration of a deeper section on the surface map, and grain matching (conventions §8).

Owns the placement of a second map of the same area on the first:
:class:`Registration` (``p_surface = R(θ) p_deeper + shift`` in the sample frame S),
:func:`register_sections` (from fiducials, or from the grain structure itself) and
:func:`match_grains` (the same grain seen on both sections, by orientation and
overlap). The serial-section and stack stages (:mod:`.serial`, :mod:`.stack`) build
on these.

Positions are in S (conventions §2), µm; map rows are ``step`` or ``step·√3/2``
apart (§1).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike
from scipy.ndimage import uniform_filter
from scipy.spatial import cKDTree

from .._validation import as_float_array, check_finite
from ..crystal.symmetry import disorientation_angle_deg
from ..errors import SettingError
from ..maps import row_pitch_um
from ._settings import setting_one_of, setting_positive

if TYPE_CHECKING:
    from ..grains import GrainMap

__all__ = ["GRIDS", "Registration", "match_grains", "register_sections"]


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

    def apply(self, xy_um: ArrayLike) -> np.ndarray:
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


#: Map grids a registration moves along (conventions §1).
GRIDS = ("square", "hexagonal")


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


def _pair_disorientations_deg(qa, qb, phase_ids, use, laue_by_phase):
    """Disorientation (degrees) of each pair ``qa[k]``, ``qb[k]`` of one phase ``phase_ids[k]``,
    for the pairs marked by ``use``; inf for the others."""
    angle = np.full(len(phase_ids), np.inf)
    for phase_id in np.unique(phase_ids[use]):
        sel = use & (phase_ids == phase_id)
        angle[sel] = _disorientation_deg(qa[sel], qb[sel], laue_by_phase[int(phase_id)])
    return angle


def _distinct_counts(code: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(code, return_counts=True)`` for codes that come in runs (a raster's).

    Two label images laid over each other give a pair code that is constant along a
    row between two boundaries: the runs are sorted, not the points (a 16-million-point
    map has about a million runs).
    """
    if code.size == 0:
        return code, np.zeros(0, np.int64)
    start = np.flatnonzero(np.r_[True, code[1:] != code[:-1]])
    length = np.diff(np.r_[start, code.size])
    pairs, inverse = np.unique(code[start], return_inverse=True)
    return pairs, np.bincount(inverse, weights=length, minlength=len(pairs)).astype(np.int64)


def match_grains(
    surface_grains: GrainMap,
    deeper_grains: GrainMap,
    registration: Registration,
    *,
    step_um: float,
    laue_by_phase: Mapping,
    threshold_deg: float = 5.0,
    min_overlap: float = 0.2,
    max_shift_um: float = 0.0,
    grid: str = "square",
) -> dict:
    """Pair each grain of a deeper map with a grain of the surface map (§8).

    A pair must share its phase, be disoriented by less than ``threshold_deg`` and
    overlap: after registration, at least ``min_overlap`` of the deeper grain's
    pixels fall on the surface grain. Each deeper grain takes the surface grain it
    overlaps most among those that qualify. A deeper grain with none (a thin twin
    lamella moves sideways by h·cot δ between the sections, often by more than its
    width) takes the like-oriented surface grain whose centroid lies nearest its
    registered centroid, if within ``max_shift_um``; grains without either are left out.

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
    max_shift_um : float, optional
        Farthest a deeper grain's registered centroid may lie from the centroid of a
        like-oriented surface grain it barely overlaps, µm; 0 (the default) pairs on
        overlap alone. The serial-section measurement passes ``h·cot 10°``.
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
    setting_positive(step_um, "step_um")
    setting_positive(threshold_deg, "threshold_deg")
    setting_positive(max_shift_um, "max_shift_um", allow_zero=True)
    s_labels = np.asarray(surface_grains.labels)
    d_labels = np.asarray(deeper_grains.labels)
    setting_one_of(grid, "grid", GRIDS)
    row_um = row_pitch_um(grid, step_um)
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
    pairs, counts = _distinct_counts(code)
    pair_d = pairs // (int(s_labels.max()) + 1)
    pair_s = pairs % (int(s_labels.max()) + 1)
    d_row = np.searchsorted(d_ids, pair_d)
    s_row = np.searchsorted(s_ids, pair_s)
    d_area = np.bincount(placed[placed > 0], minlength=int(d_ids.max()) + 1)[pair_d]
    fraction = counts / np.maximum(d_area, 1)
    s_phase = np.asarray(s_tab["phase"])[s_row]
    d_phase = np.asarray(d_tab["phase"])[d_row]
    ok = (s_phase == d_phase) & (fraction >= min_overlap)
    s_quat, d_quat = np.asarray(s_tab["quat"], float), np.asarray(d_tab["quat"], float)
    angle = _pair_disorientations_deg(s_quat[s_row], d_quat[d_row], s_phase, ok, laue_by_phase)
    ok &= angle < threshold_deg
    all_fraction = fraction
    pair_d, pair_s, fraction, angle = pair_d[ok], pair_s[ok], fraction[ok], angle[ok]
    if max_shift_um > 0:
        near_d, near_s, near_angle = _nearest_like_grains(
            s_tab,
            d_tab,
            np.setdiff1d(d_ids, pair_d),
            registration,
            laue_by_phase,
            threshold_deg=threshold_deg,
            max_shift_um=max_shift_um,
        )
        # Their overlap, where they have one; 0 where the lamella moved clear of itself.
        near_code = near_d * (int(s_labels.max()) + 1) + near_s
        at = np.minimum(np.searchsorted(pairs, near_code), len(pairs) - 1)
        near_fraction = np.where(pairs[at] == near_code, all_fraction[at], 0.0)
        pair_d = np.concatenate([pair_d, near_d])
        pair_s = np.concatenate([pair_s, near_s])
        fraction = np.concatenate([fraction, near_fraction])
        angle = np.concatenate([angle, near_angle])
    if len(pair_d) == 0:
        return empty
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


def _nearest_like_grains(
    s_tab, d_tab, d_want, registration, laue_by_phase, *, threshold_deg, max_shift_um
):
    """For deeper grains ``d_want``: the nearest like-oriented surface grain by centroid.

    Returns ``(deeper_id, surface_id, disorientation_deg)`` of the pairs found within
    ``max_shift_um`` (after ``registration``) and ``threshold_deg``.
    """
    none = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))
    d_ids, s_ids = np.asarray(d_tab["grain_id"]), np.asarray(s_tab["grain_id"])
    d_row = np.searchsorted(d_ids, d_want)
    if len(d_row) == 0 or len(s_ids) == 0:
        return none
    d_xy = registration.apply(
        np.stack(
            [
                np.asarray(d_tab["centroid_x_um"], float)[d_row],
                np.asarray(d_tab["centroid_y_um"], float)[d_row],
            ],
            -1,
        )
    )
    s_xy = np.stack(
        [np.asarray(s_tab["centroid_x_um"], float), np.asarray(s_tab["centroid_y_um"], float)], -1
    )
    # Candidate pairs from a k-d tree of the surface centroids: no (wanted × all) matrix.
    near = cKDTree(s_xy).query_ball_point(d_xy, r=max_shift_um)
    a = np.repeat(np.arange(len(near)), [len(n) for n in near])
    b = np.concatenate([np.asarray(n, dtype=np.int64) for n in near]) if len(a) else a
    d_phase = np.asarray(d_tab["phase"])[d_row]
    s_phase = np.asarray(s_tab["phase"])
    same = d_phase[a] == s_phase[b]
    a, b = a[same], b[same]
    if len(a) == 0:
        return none
    s_quat, d_quat = np.asarray(s_tab["quat"], float), np.asarray(d_tab["quat"], float)
    angle = _pair_disorientations_deg(
        s_quat[b], d_quat[d_row[a]], s_phase[b], np.ones(len(a), bool), laue_by_phase
    )
    like = angle < threshold_deg
    a, b, angle = a[like], b[like], angle[like]
    dist = np.hypot(*(d_xy[a] - s_xy[b]).T)
    # The nearest per deeper grain: sort by (deeper row, distance), keep first.
    order = np.lexsort((dist, a))
    first = np.ones(len(order), bool)
    first[1:] = a[order][1:] != a[order][:-1]
    pick = order[first]
    return d_want[a[pick]].astype(np.int64), s_ids[b[pick]].astype(np.int64), angle[pick]


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


def _overlap_views(s_labels, mapped, di, dj, stride):
    """The surface and deeper views that fall on each other at shift (di, dj), every
    ``stride``-th row and column: slices of the inputs, no shifted copy."""
    h_s, w_s = s_labels.shape
    h_d, w_d = mapped.shape
    r0, r1 = max(0, di), min(h_s, h_d + di)
    c0, c1 = max(0, dj), min(w_s, w_d + dj)
    if r1 <= r0 or c1 <= c0:
        return None
    a = s_labels[r0:r1:stride, c0:c1:stride]
    b = mapped[r0 - di : r1 - di : stride, c0 - dj : c1 - dj : stride]
    return a, b


def _agreement(s_labels, mapped, di, dj, stride=1):
    """Fraction of the common area where the shifted, relabelled deeper map agrees.

    With ``stride`` > 1 the common area is sampled on every ``stride``-th row and
    column: the same quantity estimated from 1/stride² of the points.
    """
    views = _overlap_views(s_labels, mapped, di, dj, stride)
    if views is None:
        return 0.0
    a, b = views
    covered = b > 0
    n = np.count_nonzero(covered & (a > 0))
    # b > 0 and a == b imply a > 0: agreement needs no second mask.
    return float(np.count_nonzero(covered & (a == b)) / n) if n else 0.0


#: Points of the overlap sampled per shift in the coarse pass of the registration.
_COARSE_POINTS = 1 << 18


def _best_shift(s_labels, mapped, i0, j0, reach):
    """Shift (row, col offsets in [-reach, reach]) where the maps agree best, and the
    full-resolution score at it and its four neighbours (None outside the range).

    Coarse to fine: every shift of the range is scored on a strided sample of the
    overlap (about ``_COARSE_POINTS`` points), then the full-resolution score climbs
    from the best coarse shift to a local maximum over 3 × 3 windows. Each score
    compares two slices of the inputs, so no shifted copy of a map is made.
    """
    stride = max(1, int(math.sqrt(s_labels.size / _COARSE_POINTS)))
    offsets = np.arange(-reach, reach + 1)
    if stride > 1:
        coarse = np.array(
            [
                [_agreement(s_labels, mapped, i0 + di, j0 + dj, stride) for dj in offsets]
                for di in offsets
            ]
        )
        bi, bj = (int(v) - reach for v in np.unravel_index(int(np.argmax(coarse)), coarse.shape))
    else:
        bi = bj = 0
    fine = {}

    def score(di, dj):
        if abs(di) > reach or abs(dj) > reach:
            return None
        if (di, dj) not in fine:
            fine[di, dj] = _agreement(s_labels, mapped, i0 + di, j0 + dj)
        return fine[di, dj]

    if stride == 1:
        for di in offsets:
            for dj in offsets:
                score(int(di), int(dj))
        bi, bj = max(fine, key=lambda k: (fine[k], -k[0], -k[1]))
    while True:
        window = [
            (bi + a, bj + b)
            for a in (-1, 0, 1)
            for b in (-1, 0, 1)
            if score(bi + a, bj + b) is not None
        ]
        # Ties go to the first shift in row-major order, as an exhaustive argmax would.
        best = max(window, key=lambda k: (fine[k], -k[0], -k[1]))
        if best == (bi, bj):
            break
        bi, bj = best
    near = [score(bi - 1, bj), score(bi + 1, bj), score(bi, bj - 1), score(bi, bj + 1)]
    return bi, bj, fine[bi, bj], near


def _parabola_peak(f_minus, f_0, f_plus):
    """Sub-pixel offset of the peak of a parabola through three samples (in [-0.5, 0.5])."""
    den = f_minus - 2.0 * f_0 + f_plus
    if den >= 0:
        return 0.0
    return float(np.clip(0.5 * (f_minus - f_plus) / den, -0.5, 0.5))


def register_sections(
    surface_grains: GrainMap,
    deeper_grains: GrainMap,
    *,
    step_um: float,
    laue_by_phase: Mapping,
    fiducials_um: ArrayLike | None = None,
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
    setting_positive(step_um, "step_um")
    if fiducials_um is not None:
        fid = as_float_array(fiducials_um, "fiducials_um")
        if fid.ndim != 3 or fid.shape[1:] != (2, 2) or len(fid) == 0:
            raise SettingError(f"Expected `fiducials_um` to have shape (K, 2, 2), got {fid.shape}.")
        check_finite(fid.reshape(-1, 2), "fiducials_um")
        theta, t, resid = _fit_rigid(fid[:, 1], fid[:, 0], np.ones(len(fid)), fit_rotation)
        rms = float(np.sqrt(np.mean(np.sum(resid**2, axis=1))))
        return Registration(
            float(t[0]), float(t[1]), math.degrees(theta), rms, len(fid), "fiducials"
        )

    radius = 6.0 * step_um if vote_radius_um is None else float(vote_radius_um)
    setting_positive(radius, "vote_radius_um")
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
    setting_one_of(grid, "grid", GRIDS)
    row_um = row_pitch_um(grid, step_um)
    i0, j0 = int(round(coarse[1] / row_um)), int(round(coarse[0] / step_um))
    reach = int(math.ceil(radius / row_um)) + 1
    bi, bj, peak, (up, down, left, right) = _best_shift(s_labels, mapped, i0, j0, reach)
    sub_i = _parabola_peak(up, peak, down) if up is not None and down is not None else 0.0
    sub_j = _parabola_peak(left, peak, right) if left is not None and right is not None else 0.0
    shift = np.array([(j0 + bj + sub_j) * step_um, (i0 + bi + sub_i) * row_um])

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
