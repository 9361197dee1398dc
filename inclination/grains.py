"""Grain segmentation, clean-up and per-grain statistics (conventions §1–§2).

Neighbouring indexed points of the same phase are *linked* when their disorientation
(crystal symmetry applied) is below ``threshold_deg``; grains are the connected
components of the links. Square grids use 4-connectivity; hexagonal grids (odd rows
shifted right by s/2, §1) use 6-connectivity.

The link test never computes an angle: a pair is linked when the largest
``|scalar(dq ⊗ s)|`` over the proper rotations ``s`` exceeds ``cos(θ/2)``. The plain
``|q_a · q_b|`` is a lower bound of that maximum (it is the term of ``s = 1``), so a pair
that passes it is linked whatever the symmetry; only the rest (the boundaries) go through
:func:`inclination.crystal.symmetry.max_scalar_part`. Labels are built on row runs: points of a
row joined by horizontal links form a run, and a graph with one node per run and one
edge per linked pair of runs (a few per point row instead of one per point) goes to
``scipy.sparse.csgraph.connected_components``.

Work arrays are flat views of the (4, H, W) float32 planes taken in blocks of
:data:`BLOCK` points, so that memory above the map stays a few bytes per point.
"""

from __future__ import annotations

import numbers
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ._validation import check_one_of
from .crystal import symmetry
from .crystal.rotations import quat_multiply
from .errors import InputError, SettingError
from .links import (
    BLOCK,
    MapPlanes,
    PhaseInfo,
    disorientation_cos_half,
    map_planes,
    neighbour_shifts,
    phase_infos,
    point_xy_um,
    take_columns,
)

if TYPE_CHECKING:
    from .crystal.phases import Phase
    from .maps import OrientationMap

__all__ = [
    "BLOCK",
    "GrainMap",
    "GRAIN_COLUMNS",
    "SMALL_GRAIN_MODES",
    "check_grain_options",
    "nearest_equivalent",
    "nearest_operation",
    "segment_grains",
    "strongest_neighbours",
]

#: What to do with grains under ``min_pixels``.
SMALL_GRAIN_MODES = ("merge", "unindex")

#: Columns of :attr:`GrainMap.grains`.
GRAIN_COLUMNS = (
    "grain_id",
    "phase",
    "quat",
    "area_px",
    "area_um2",
    "centroid_x_um",
    "centroid_y_um",
    "spread_mean_deg",
    "spread_max_deg",
    "touches_edge",
)

# Below this angle to a grain's reference the identity is the nearest symmetric
# equivalent for every Laue class: the smallest non-identity proper rotation of any
# class turns 60° (the 6-fold axis), and ω(s⊗q, r) >= ω(s) - ω(q, r).
_IDENTITY_SAFE_RAD = np.deg2rad(30.0)


@dataclass(frozen=True)
class GrainMap:
    """Grains of one orientation map.

    Attributes
    ----------
    labels : ndarray of int32, shape (H, W)
        Grain id of each point, 1..G; 0 = no grain (not indexed, undeclared, dissolved).
    grains : dict of str to ndarray
        One row per grain, ids 1..G in row order (the order of each grain's first
        point in the raster). Columns :data:`GRAIN_COLUMNS`: ``grain_id`` int,
        ``phase`` int (phase id), ``quat`` (G, 4) mean orientation (sample to crystal,
        scalar part >= 0), ``area_px`` int, ``area_um2``, ``centroid_x_um``,
        ``centroid_y_um`` (S, §2), ``spread_mean_deg``, ``spread_max_deg``
        (disorientation of the member points to the mean), ``touches_edge`` bool.
    cleanup : dict of str to int
        ``grains_dissolved``, ``points_merged``, ``points_unindexed``, ``points_filled``.
    threshold_deg : float
        The link threshold used.
    connectivity : int
        4 (square grid) or 6 (hexagonal grid).
    """

    labels: np.ndarray
    grains: dict
    cleanup: dict
    threshold_deg: float
    connectivity: int

    @property
    def n_grains(self) -> int:
        """Number of grains G."""
        return int(self.grains["grain_id"].size)


# ----------------------------------------------------------------------------- phases


def _phase_codes(omap, infos: tuple[PhaseInfo, ...]) -> np.ndarray:
    """Flat uint8 code per point: 1 + index of its phase in ``infos``; 0 = not usable."""
    phase = np.asarray(omap.phase).reshape(-1)
    valid = np.asarray(omap.valid, dtype=bool).reshape(-1)
    code = np.zeros(phase.size, dtype=np.uint8)
    for p in infos:
        code[phase == p.id] = p.code
    code[~valid] = 0
    indexed = valid & (phase != 0)
    undeclared = indexed & (code == 0)
    if undeclared.any():
        k = int(np.flatnonzero(undeclared)[0])
        w = omap.phase.shape[1]
        raise InputError(
            f"Expected every indexed phase id of the map to be declared in `phases` "
            f"(ids {[p.id for p in infos]}), got id {int(phase[k])} at point "
            f"(row {k // w}, col {k % w})."
        )
    return code


# ----------------------------------------------------------------------------- kernels


def _link_kernel(
    planes: MapPlanes, code, usable, infos, *, cos_half, shift, parity, out, progress, horizontal
):
    """Fill ``out[k]`` (bool, N) with the link between k and its neighbour k + shift.

    ``horizontal`` marks the (0, +1) shift: in a map one point wide the down shift is
    also 1, so the value alone cannot tell them apart.
    """
    q, h, w = planes.quat, planes.height, planes.width
    n_points = q.shape[1]
    stop_all = max(n_points - shift, 0)
    out[stop_all:] = False
    dot = np.empty(BLOCK, np.float32)
    tmp = np.empty(BLOCK, np.float32)
    same = np.empty(BLOCK, bool)
    rest_mask = np.empty(BLOCK, bool)
    # One phase and every point usable (the common case): no per-pair phase test.
    uniform = len(infos) == 1 and bool(usable.all())
    c32 = np.float32(cos_half)
    for s in range(0, stop_all, BLOCK):
        e = min(s + BLOCK, stop_all)
        n = e - s
        d, t, sm, rm = dot[:n], tmp[:n], same[:n], rest_mask[:n]
        lk = out[s:e]
        np.multiply(q[0, s:e], q[0, s + shift : e + shift], out=d)
        for c in (1, 2, 3):
            np.multiply(q[c, s:e], q[c, s + shift : e + shift], out=t)
            d += t
        np.abs(d, out=d)
        np.greater(d, c32, out=lk)
        # Pairs of one phase that fail the identity test: boundaries, or one crystal
        # written as two symmetric equivalents.
        if uniform:
            np.logical_not(lk, out=rm)
        else:
            np.equal(code[s:e], code[s + shift : e + shift], out=sm)
            sm &= usable[s:e]
            lk &= sm
            np.greater(sm, lk, out=rm)
        rest = np.flatnonzero(rm)
        if rest.size:
            phases_here = code[s:e][rest]
            for info in infos:
                sel = rest if len(infos) == 1 else rest[phases_here == info.code]
                if sel.size == 0:
                    continue
                m = disorientation_cos_half(
                    take_columns(q, s + sel), take_columns(q, s + shift + sel), info
                )
                lk[sel] = m > cos_half
        if progress is not None:
            progress(e / n_points)
    # Pairs that wrap round a row end, or hexagonal diagonals of the wrong row parity.
    grid2 = out.reshape(h, w)
    if horizontal:
        grid2[:, w - 1] = False
    elif parity == 0:
        grid2[1::2] = False
        grid2[:, 0] = False
    elif parity == 1:
        grid2[0::2] = False
        grid2[:, w - 1] = False


# ----------------------------------------------------------------------------- runs


@dataclass(frozen=True)
class _RowRuns:
    """Where the row runs lie: index 0 is a dummy run of no points (run ids index these)."""

    pos: np.ndarray  # (R + 1,) int64, flat index of each run's first point
    length: np.ndarray  # (R + 1,) int64, points in each run


def _runs(ok: np.ndarray, h_link: np.ndarray) -> tuple[np.ndarray, _RowRuns]:
    """Row runs: run id per point (int32, 1..R; 0 where not usable), start and length.

    Built block by block so that no full-size temporary is made besides the run ids.
    """
    n = ok.size
    run_id = np.empty(n, np.int32)
    starts, ends = [np.zeros(1, np.int64)], [np.full(1, -1, np.int64)]
    carry = np.int32(0)
    step = 16 * BLOCK
    for s in range(0, n, step):
        e = min(s + step, n)
        okb = ok[s:e]
        start = okb.copy()
        if s:
            start[0] &= not h_link[s - 1]
        start[1:] &= ~h_link[s : e - 1]
        ids = run_id[s:e]
        np.cumsum(start, dtype=np.int32, out=ids)
        ids += carry
        carry = ids[-1]
        ids *= okb
        starts.append(np.flatnonzero(start) + s)
        ends.append(np.flatnonzero(okb & ~h_link[s:e]) + s)
    # Index 0 is a dummy run of no points, so that run ids index these arrays directly.
    run_pos = np.concatenate(starts)
    run_end = np.concatenate(ends)
    return run_id, _RowRuns(run_pos, (run_end - run_pos + 1).astype(np.int64))


def _run_edges(run_id, h_link, v_link, shift):
    """Pairs of runs joined by the links ``v_link`` (k to k + shift), duplicates mostly gone."""
    n = run_id.size
    m = n - shift
    ks = []
    step = 16 * BLOCK
    for s in range(0, m, step):
        e = min(s + step, m)
        keep = v_link[s:e].copy()
        # A link whose left neighbours are linked the same way, with both rows' runs
        # continuing, joins the same two runs again.
        lo = max(s - 1, 0)
        same_as_left = v_link[lo : e - 1] & h_link[lo : e - 1] & h_link[lo + shift : e - 1 + shift]
        if s:
            keep &= ~same_as_left
        else:
            keep[1:] &= ~same_as_left
        ks.append(np.flatnonzero(keep) + s)
    k = np.concatenate(ks) if ks else np.zeros(0, np.int64)
    return run_id[k], run_id[k + shift]


def _components(n_runs: int, edges_a: list, edges_b: list) -> np.ndarray:
    """Component of each run id 0..R (0 is a dummy of its own)."""
    a = np.concatenate(edges_a) if edges_a else np.zeros(0, np.int32)
    b = np.concatenate(edges_b) if edges_b else np.zeros(0, np.int32)
    graph = coo_matrix((np.ones(a.size, np.int32), (a, b)), shape=(n_runs + 1, n_runs + 1)).tocsr()
    _, comp = connected_components(graph, directed=True, connection="weak")
    return comp


# ----------------------------------------------------------------------------- clean-up


def _run_neighbours(rows: _RowRuns, runs, run_id, planes: MapPlanes):
    """(run, neighbouring run id) for every point of ``runs`` and each of its neighbours."""
    grid, h, w = planes.grid, planes.height, planes.width
    lens = rows.length[runs]
    owner = np.repeat(runs, lens)
    offs = np.arange(owner.size) - np.repeat(np.cumsum(lens) - lens, lens)
    k = rows.pos[owner] + offs
    i, j = np.divmod(k, w)
    if grid == "square":
        steps = ((0, -1), (0, 1), (-1, 0), (1, 0))
    else:
        steps = ((0, -1), (0, 1), (-1, 0), (1, 0), (-1, None), (1, None))
    own, other = [], []
    for di, dj in steps:
        if dj is None:
            # The diagonal neighbour: left on even rows, right on odd rows (§1).
            dj_arr = np.where(i % 2 == 0, -1, 1)
        else:
            dj_arr = dj
        ii, jj = i + di, j + dj_arr
        inside = (ii >= 0) & (ii < h) & (jj >= 0) & (jj < w)
        own.append(owner[inside])
        other.append(run_id[ii[inside] * w + jj[inside]])
    return np.concatenate(own), np.concatenate(other)


def _dissolve_small(
    run_grain, rows: _RowRuns, run_id, planes: MapPlanes, *, grain_code, min_pixels, mode
):
    """Reassign the runs of grains under ``min_pixels``; returns new run_grain and counts."""
    run_len = rows.length
    run_grain = run_grain.copy()
    n_grains = grain_code.size - 1
    area = np.bincount(run_grain, weights=run_len, minlength=n_grains + 1).astype(np.int64)
    small = area < min_pixels
    small[0] = False
    dissolved = int(small.sum())
    merged = 0
    if mode == "merge":
        while True:
            runs = np.flatnonzero(small[run_grain] & (run_grain > 0))
            if runs.size == 0:
                break
            own, other_run = _run_neighbours(rows, runs, run_id, planes)
            g_own = run_grain[own]
            g_other = run_grain[other_run]
            ok = (
                (other_run > 0)
                & (g_other > 0)
                & ~small[g_other]
                & (grain_code[g_other] == grain_code[g_own])
            )
            if not ok.any():
                break
            # One shared edge per (small run, neighbouring run) pair.
            ga, gb = strongest_neighbours(g_own[ok], g_other[ok], None, n_grains + 1)
            target = np.arange(n_grains + 1)
            target[ga] = gb
            moving = small[run_grain] & (target[run_grain] != run_grain)
            merged += int(run_len[moving].sum())
            run_grain[moving] = target[run_grain[moving]]
            small[ga] = False
    left = small[run_grain] & (run_grain > 0)
    unindexed = int(run_len[left].sum())
    run_grain[left] = 0
    return run_grain, dissolved, merged, unindexed


def strongest_neighbours(own, other, weight, n: int) -> tuple[np.ndarray, np.ndarray]:
    """For each grain in ``own``, the grain of ``other`` it shares the most with.

    The small-grain clean-up's rule (:func:`segment_grains`): the neighbour with the
    largest summed ``weight`` over the pairs ``(own[k], other[k])`` wins, ties to the lower
    id. ``weight=None`` counts each pair once. Ids are below ``n``.

    Returns
    -------
    grain, neighbour : ndarray of int64
        One row per distinct grain of ``own``, in increasing order.

    Examples
    --------
    >>> g, nb = strongest_neighbours(np.array([5, 5, 5, 2, 2]), np.array([7, 3, 7, 9, 4]),
    ...                              None, 10)
    >>> g.tolist(), nb.tolist()  # 5 shares two with 7; 2 shares one each: 4 is lower
    ([2, 5], [4, 7])
    """
    key = np.asarray(own, np.int64) * n + np.asarray(other, np.int64)
    pairs, inverse = np.unique(key, return_inverse=True)
    shared = np.bincount(inverse, weights=weight, minlength=pairs.size)
    ga, gb = np.divmod(pairs, n)
    order = np.lexsort((gb, -shared, ga))
    ga, gb = ga[order], gb[order]
    first = np.r_[True, ga[1:] != ga[:-1]]
    return ga[first], gb[first]


def _fill_isolated(labels, grid):
    """Label non-grain points whose every neighbour lies in one grain; returns their indices."""
    h, w = labels.shape
    flat = labels.reshape(-1)
    k = np.flatnonzero(flat == 0)
    i, j = np.divmod(k, w)
    interior = (i > 0) & (i < h - 1) & (j > 0) & (j < w - 1)
    k, i, j = k[interior], i[interior], j[interior]
    if grid == "square":
        nb = [k - 1, k + 1, k - w, k + w]
    else:
        side = np.where(i % 2 == 0, -1, 1)
        nb = [k - 1, k + 1, k - w, k + w, k - w + side, k + w + side]
    first = flat[nb[0]]
    same = first > 0
    for other in nb[1:]:
        same &= flat[other] == first
    return k[same], first[same]


# ----------------------------------------------------------------------------- statistics


def _row_blocks(n_points: int, w: int):
    """Blocks [s, e) of whole rows, about BLOCK points each (runs never cross them)."""
    rows = max(1, BLOCK // w)
    for s in range(0, n_points, rows * w):
        yield s, min(s + rows * w, n_points)


def _block_layout(s, e, pos, length, grain):
    """Interval counts and grains that tile [s, e): gap, run, gap, run, ..., gap."""
    m = pos.size
    starts = pos - s
    ends = starts + length
    counts = np.empty(2 * m + 1, np.int64)
    gaps = counts[0:-1:2]
    gaps[:] = starts
    gaps[1:] -= ends[:-1]
    counts[1::2] = length
    counts[-1] = (e - s) - (ends[-1] if m else 0)
    vals = np.zeros(2 * m + 1, np.int64)
    vals[1::2] = grain
    return counts, vals, starts


@dataclass(frozen=True)
class _GrainRuns:
    """Runs, each with the grain it counts for (statistics or area)."""

    pos: np.ndarray  # (n,) int64, flat index of the run's first point, raster order
    length: np.ndarray  # (n,) int64
    grain: np.ndarray  # (n,) int64, grain id 1..G (0 = none)


@dataclass(frozen=True)
class _GrainPhases:
    """Phase of each grain and the proper rotations of each phase."""

    code: np.ndarray  # (G + 1,) uint8 phase code of each grain id (links.PhaseInfo.code)
    infos: tuple[PhaseInfo, ...]
    ops: dict  # phase code -> (K, 4) proper rotations


def _grain_orientations(
    planes: MapPlanes, own: _GrainRuns, grain_info: _GrainPhases, *, n_grains, progress
):
    """Mean orientation and spread of each grain over the points of its own runs.

    The mean is the normalised sum of each point's symmetric equivalent nearest the
    grain's first point, signed into one hemisphere: the quaternion (chordal) mean,
    which for a grain of spread σ differs from the eigenvector mean of Markley et al.
    (2007) by O(σ³) (tests compare both with scipy's ``Rotation.mean``). The alignment
    pass runs in float32 (sums in float64); the spread pass in float64, since
    2·arccos of a float32 cosine resolves small angles only to ~0.002°.
    """
    q, w = planes.quat, planes.width
    own_pos, own_len, own_grain = own.pos, own.length, own.grain
    n_points = q.shape[1]
    m = n_grains + 1
    first_run = np.full(m, -1, np.int64)
    first_run[own_grain[::-1]] = np.arange(own_grain.size)[::-1]
    ref = np.zeros((4, m), np.float32)
    has = first_run >= 0
    has[0] = False
    ref[:, has] = take_columns(q, own_pos[first_run[has]])
    cos_safe = np.cos(_IDENTITY_SAFE_RAD / 2)
    blocks = []
    for s, e in _row_blocks(n_points, w):
        lo, hi = np.searchsorted(own_pos, [s, e])
        if hi > lo:
            blocks.append((s, e, lo, hi))
    size = max((e - s for s, e, _, _ in blocks), default=0)
    rep = np.empty((4, size), np.float32)
    qs = np.empty((4, size), np.float32)
    # Per-run partial results, summed per grain once at the end (one bincount per
    # column instead of an unbuffered ufunc.at per block).
    run_sums = np.zeros((4, own_grain.size))
    for b, (s, e, lo, hi) in enumerate(blocks):
        n = e - s
        counts, vals, starts = _block_layout(s, e, own_pos[lo:hi], own_len[lo:hi], own_grain[lo:hi])
        rn, qn = rep[:, :n], qs[:, :n]
        rn[:] = np.repeat(ref[:, vals], counts, axis=1)
        d = np.einsum("cn,cn->n", q[:, s:e], rn)
        # Sign of each point toward its grain's reference; 0 outside the grain's own runs.
        sg = np.repeat((vals > 0).astype(np.float32), counts)
        np.copysign(sg, d, out=sg)
        np.multiply(q[:, s:e], sg, out=qn)
        far = np.flatnonzero((np.abs(d) < cos_safe) & (sg != 0))
        if far.size:
            g = np.repeat(vals, counts)[far]
            qn[:, far] = _nearest_equivalents(
                take_columns(q, s + far), ref[:, g].T, g, grain_info
            ).T
        run_sums[:, lo:hi] = np.add.reduceat(qn, starts, axis=1, dtype=np.float64)
        if progress is not None:
            progress(0.5 * (b + 1) / len(blocks))
    sums = np.stack(
        [np.bincount(own_grain, weights=r, minlength=m).astype(float) for r in run_sums], axis=1
    )
    norm = np.linalg.norm(sums, axis=1)
    mean = np.zeros_like(sums)
    mean[:, 0] = 1.0
    ok = norm > 0
    mean[ok] = sums[ok] / norm[ok, None]
    mean[mean[:, 0] < 0] *= -1
    mean32 = np.ascontiguousarray(mean.T, dtype=np.float32)
    run_angle_sum = np.zeros(own_grain.size)
    run_angle_max = np.zeros(own_grain.size, np.float32)
    for b, (s, e, lo, hi) in enumerate(blocks):
        n = e - s
        counts, vals, starts = _block_layout(s, e, own_pos[lo:hi], own_len[lo:hi], own_grain[lo:hi])
        rn = rep[:, :n]
        # |q - m|² = 4 sin²(θ/4) for unit q, m in one hemisphere: unlike 2·arccos(q·m) it
        # keeps float32 precision at small θ; min(x, 4 - x) picks the hemisphere.
        rn[:] = np.repeat(mean32[:, vals], counts, axis=1)
        np.subtract(q[:, s:e], rn, out=rn)
        dn = np.einsum("cn,cn->n", rn, rn)
        np.minimum(dn, 4.0 - dn, out=dn)
        # float32 unit quaternions have norms 1 ± 1e-7, so a point nearly antipodal to
        # its mean can give |q - m|² a little above 4 and 4 - x a little below 0.
        np.maximum(dn, np.float32(0.0), out=dn)
        inside = np.repeat(vals > 0, counts)
        # Beyond 30° the identity may not be the nearest equivalent: full symmetry test.
        far = np.flatnonzero(inside & (dn > np.float32(4 * np.sin(_IDENTITY_SAFE_RAD / 4) ** 2)))
        np.sqrt(dn, out=dn)
        dn *= np.float32(0.5)
        np.minimum(dn, np.float32(1.0), out=dn)
        angle = np.arcsin(dn, out=dn)
        angle *= np.float32(4.0)
        if far.size:
            g = np.repeat(vals, counts)[far]
            cos_half = _max_scalar_to(take_columns(q, s + far), mean[g], g, grain_info)
            angle[far] = 2.0 * np.arccos(np.minimum(cos_half, 1.0))
        angle *= inside
        run_angle_sum[lo:hi] = np.add.reduceat(angle, starts, dtype=np.float64)
        run_angle_max[lo:hi] = np.maximum.reduceat(angle, starts)
        if progress is not None:
            progress(0.5 + 0.5 * (b + 1) / len(blocks))
    spread_sum = np.bincount(own_grain, weights=run_angle_sum, minlength=m).astype(float)
    spread_max = np.zeros(m)
    np.maximum.at(spread_max, own_grain, run_angle_max)
    return mean, spread_sum, spread_max


def _by_phase(g, grain_info: _GrainPhases) -> Iterator[tuple[PhaseInfo, np.ndarray]]:
    """(info, selection) for each phase among the grains ``g``."""
    codes = grain_info.code[g]
    for info in grain_info.infos:
        sel = np.flatnonzero(codes == info.code)
        if sel.size:
            yield info, sel


def _nearest_equivalents(qs, refs, g, grain_info):
    """Equivalents ``s ⊗ q`` nearest each point's reference, as (n, 4), signed toward it."""
    out = np.empty((qs.shape[1], 4))
    for info, sel in _by_phase(g, grain_info):
        out[sel] = nearest_equivalent(qs[:, sel].T, refs[sel], grain_info.ops[info.code])
    return out


def nearest_operation(q, ref, ops) -> np.ndarray:
    """For each quaternion, the symmetry operation s that takes it nearest its reference.

    Parameters
    ----------
    q, ref : ndarray, shape (n, 4)
        Orientations and the references they are brought next to (conventions §3).
    ops : ndarray, shape (K, 4)
        The phase's proper symmetry operations s (crystal frame, left factor).

    Returns
    -------
    ndarray, shape (n, 4)
        The s with the largest ``|s ⊗ q · ref|``, times the sign of that dot product
        (q and −q are one orientation), so that ``s ⊗ q`` points toward ``ref``.

    Examples
    --------
    >>> ops = np.array([[1.0, 0, 0, 0], [0.0, 0, 0, 1]])  # identity, 180° about Z
    >>> nearest_operation(np.array([[0.0, 0, 0, 1]]), np.array([[-1.0, 0, 0, 0]]), ops)
    array([[0., 0., 0., 1.]])
    """
    cand = quat_multiply(ops[None, :, :], q[:, None, :])  # (n, K, 4)
    dots = np.einsum("nkc,nc->nk", cand, ref)
    rows = np.arange(len(q))
    best = np.argmax(np.abs(dots), axis=1)
    return ops[best] * np.where(dots[rows, best] < 0, -1.0, 1.0)[:, None]


def nearest_equivalent(q, ref, ops) -> np.ndarray:
    """Each quaternion's symmetric equivalent ``s ⊗ q`` nearest its reference, signed toward it.

    ``s`` from :func:`nearest_operation`; the product is the candidate's own, bit for bit
    (a sign flip is exact).

    Examples
    --------
    >>> ops = np.array([[1.0, 0, 0, 0], [0.0, 0, 0, 1]])  # identity, 180° about Z
    >>> nearest_equivalent(np.array([[0.0, 0, 0, 1]]), np.array([[1.0, 0, 0, 0]]), ops)
    array([[1., 0., 0., 0.]])
    """
    return quat_multiply(nearest_operation(q, ref, ops), q)


def _max_scalar_to(qs, means, g, grain_info):
    """cos(ω/2) of the disorientation between points (4, n) and their grain means (n, 4)."""
    out = np.empty(qs.shape[1])
    for info, sel in _by_phase(g, grain_info):
        out[sel] = disorientation_cos_half(means[sel].T, qs[:, sel], info)
    return out


# ----------------------------------------------------------------------------- public


def _check_threshold(threshold_deg, infos):
    if isinstance(threshold_deg, bool) or not isinstance(threshold_deg, numbers.Real):
        raise TypeError(
            f"Expected `threshold_deg` to be a number, got {type(threshold_deg).__name__}."
        )
    value = float(threshold_deg)
    if not np.isfinite(value) or value <= 0:
        raise SettingError(
            f"Expected `threshold_deg` to be a finite angle > 0 degrees, got {threshold_deg!r}."
        )
    for info in infos:
        limit = float(symmetry.max_disorientation_deg(info.laue))
        if value >= limit:
            raise SettingError(
                f"Expected `threshold_deg` to be below the largest disorientation of phase "
                f"{info.id} (Laue class {info.laue}: {limit:.2f}°), got {value!r}; every "
                f"neighbour pair would join."
            )
    return value


def check_grain_options(min_pixels, small_grains: str, progress) -> None:
    """The clean-up and progress options of :func:`segment_grains` (and its tiled twin).

    Raises
    ------
    TypeError
        ``min_pixels`` not an integer, or ``progress`` not callable.
    SettingError
        ``min_pixels`` < 1 or ``small_grains`` not one of :data:`SMALL_GRAIN_MODES`.

    Examples
    --------
    >>> check_grain_options(8, "merge", None)
    >>> check_grain_options(0, "merge", None)
    Traceback (most recent call last):
    ...
    inclination.errors.SettingError: Expected `min_pixels` to be an integer >= 1, got 0.
    """
    if isinstance(min_pixels, bool) or not isinstance(min_pixels, int | np.integer):
        raise TypeError(f"Expected `min_pixels` to be an integer, got {min_pixels!r}.")
    if min_pixels < 1:
        raise SettingError(f"Expected `min_pixels` to be an integer >= 1, got {min_pixels}.")
    check_one_of(small_grains, "small_grains", SMALL_GRAIN_MODES)
    if progress is not None and not callable(progress):
        raise TypeError(f"Expected `progress` to be callable, got {type(progress).__name__}.")


def _linked_runs(planes, code, infos, threshold, progress=None):
    """Runs of linked points along the rows and the components joining them (§1).

    The link test of every neighbour direction (:func:`_link_kernel`), runs of points
    linked along a row, the run pairs linked across rows, and their connected
    components. Returns ``(run_id, rows, comp)``; ``progress`` sees the link tests as the
    first 60 % of the segmentation.
    """
    n = planes.height * planes.width
    cos_half = float(np.cos(np.deg2rad(threshold) / 2))
    shifts = neighbour_shifts(planes.grid, planes.width)
    usable = code > 0
    links = []
    for m, (shift, parity) in enumerate(shifts):
        out = np.empty(n, bool)
        prog = None
        if progress is not None:

            def prog(f, m=m):
                progress(0.6 * (m + f) / len(shifts))

        _link_kernel(
            planes,
            code,
            usable,
            infos,
            cos_half=cos_half,
            shift=shift,
            parity=parity,
            out=out,
            progress=prog,
            horizontal=m == 0,
        )
        links.append(out)
    h_link = links[0]
    run_id, rows = _runs(usable, h_link)
    n_runs = rows.pos.size - 1
    ea, eb = [], []
    for (shift, _parity), link in zip(shifts[1:], links[1:], strict=True):
        a, b = _run_edges(run_id, h_link, link, shift)
        ea.append(a)
        eb.append(b)
    del links, h_link
    return run_id, rows, _components(n_runs, ea, eb)


def segment_grains(
    omap: OrientationMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
    *,
    threshold_deg: float = 5.0,
    min_pixels: int = 8,
    small_grains: str = "merge",
    fill_isolated: bool = False,
    progress: Callable[[float], None] | None = None,
) -> GrainMap:
    """Segment an orientation map into grains (conventions §1–§2).

    Parameters
    ----------
    omap : OrientationMap
        ``quat`` float32 (H, W, 4) unit quaternions in S; ``phase`` int (H, W), 0 = not
        indexed; ``valid`` bool (H, W); ``grid`` 'square' or 'hexagonal'; ``step_x_um``,
        ``step_y_um``.
    phases : sequence or mapping of Phase
        Every phase id found at a valid point must be declared.
    threshold_deg : float
        Neighbours join when their disorientation is below this angle (degrees);
        0 < threshold < the largest disorientation of every phase's Laue class.
    min_pixels : int
        Grains with fewer points are dissolved (>= 1; 1 keeps every grain).
    small_grains : {'merge', 'unindex'}
        'merge': a small grain joins the neighbouring grain of its phase with which it
        shares the most edges (ties to the lower id; small grains with no such neighbour,
        after repeated rounds, become non-indexed); 'unindex': its points lose their grain.
        Merged points take the label but not the statistics of their new grain.
    fill_isolated : bool
        Give a lone point with no grain, whose every neighbour lies in one grain, that
        grain's label (off by default: never invent data unless asked). Filled points
        count in area and centroid, not in orientation statistics.
    progress : callable, optional
        Called now and then with the fraction of the work done, a float in [0, 1].
        Silent when omitted.

    Returns
    -------
    GrainMap
        A map with no grain gives an empty table (not an error).

    Raises
    ------
    SettingError
        If ``threshold_deg`` is <= 0 or >= the largest disorientation of a phase,
        ``min_pixels`` < 1, ``small_grains`` not one of its options, or ``phases``
        empty or with repeated ids.
    InputError
        If the map has no valid point, or a valid point has an undeclared phase id.
    TypeError
        For options of the wrong type.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((2, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.0, 0.0, 0.0, 1.0]  # 180° about Z
    >>> omap = OrientationMap(quat, np.ones((2, 4), int), step_x_um=0.5, step_y_um=0.5)
    >>> segment_grains(omap, [cu], min_pixels=1).labels.tolist()  # a symmetry operation
    [[1, 1, 1, 1], [1, 1, 1, 1]]
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> omap = OrientationMap(quat, np.ones((2, 4), int), step_x_um=0.5, step_y_um=0.5)
    >>> gm = segment_grains(omap, [cu], min_pixels=1)
    >>> gm.labels.tolist(), gm.grains["area_um2"].tolist()
    ([[1, 1, 2, 2], [1, 1, 2, 2]], [1.0, 1.0])
    """
    planes = map_planes(omap)
    h, w, grid = planes.height, planes.width, planes.grid
    infos = phase_infos(phases)
    threshold = _check_threshold(threshold_deg, infos)
    check_grain_options(min_pixels, small_grains, progress)
    code = _phase_codes(omap, infos)
    if not code.any():
        raise InputError("Expected the map to hold at least one valid indexed point, got none.")
    n = h * w
    run_id, rows, comp = _linked_runs(planes, code, infos, threshold, progress)
    n_runs = rows.pos.size - 1
    run_comp = comp[1:]
    # Grains numbered in the order of their first run (runs are in raster order).
    uniq, first = np.unique(run_comp, return_index=True)
    order = np.argsort(first, kind="stable")
    grain_of_comp = np.zeros(comp.max() + 1, np.int64)
    grain_of_comp[uniq[order]] = np.arange(1, uniq.size + 1)
    run_grain = np.zeros(n_runs + 1, np.int64)
    run_grain[1:] = grain_of_comp[run_comp]
    n_grains = int(uniq.size)
    grain_code = np.zeros(n_grains + 1, np.uint8)
    grain_code[run_grain[1:]] = code[rows.pos[1:]]

    dissolved = merged = unindexed = 0
    if min_pixels > 1:
        run_grain, dissolved, merged, unindexed = _dissolve_small(
            run_grain,
            rows,
            run_id,
            planes,
            grain_code=grain_code,
            min_pixels=min_pixels,
            mode=small_grains,
        )
    # Which runs keep their statistics: those whose grain is still their own.
    own = np.zeros(n_runs + 1, bool)
    own[1:] = (grain_of_comp[run_comp] == run_grain[1:]) & (run_grain[1:] > 0)
    # Renumber the surviving grains in raster order of their first run.
    alive = run_grain[1:] > 0
    uniq2, first2 = np.unique(run_grain[1:][alive], return_index=True)
    remap = np.zeros(n_grains + 1, np.int64)
    remap[uniq2[np.argsort(first2, kind="stable")]] = np.arange(1, uniq2.size + 1)
    grain_code_new = np.zeros(uniq2.size + 1, np.uint8)
    grain_code_new[remap[uniq2]] = grain_code[uniq2]
    run_grain = remap[run_grain]
    n_grains = int(uniq2.size)
    grain_code = grain_code_new

    # The run-id image becomes the label image in place: one full-size int32 array only.
    lut = run_grain.astype(np.int32)
    for s in range(0, n, 16 * BLOCK):
        block = run_id[s : s + 16 * BLOCK]
        block[:] = lut[block]
    labels = run_id.reshape(h, w)
    del run_id

    filled_k = np.zeros(0, np.int64)
    filled_g = np.zeros(0, np.int64)
    if fill_isolated:
        filled_k, filled_g = _fill_isolated(labels, grid)
        labels.reshape(-1)[filled_k] = filled_g

    table = _grain_table(
        omap,
        planes,
        own=_GrainRuns(rows.pos[own], rows.length[own], run_grain[own]),
        every=_GrainRuns(rows.pos, rows.length, run_grain),
        filled=(filled_k, filled_g),
        grain_code=grain_code,
        infos=infos,
        n_grains=n_grains,
        progress=progress,
    )
    cleanup = {
        "grains_dissolved": dissolved,
        "points_merged": merged,
        "points_unindexed": unindexed,
        "points_filled": int(filled_k.size),
    }
    if progress is not None:
        progress(1.0)
    return GrainMap(
        labels=labels,
        grains=table,
        cleanup=cleanup,
        threshold_deg=threshold,
        connectivity=4 if grid == "square" else 6,
    )


def _grain_table(
    omap,
    planes: MapPlanes,
    *,
    own: _GrainRuns,
    every: _GrainRuns,
    filled: tuple[np.ndarray, np.ndarray],
    grain_code: np.ndarray,
    infos: tuple[PhaseInfo, ...],
    n_grains: int,
    progress: Callable[[float], None] | None,
) -> dict:
    """The grain table (:data:`GRAIN_COLUMNS`).

    Area and centroid count every run of a grain (``every``) and the filled points
    ``filled`` = (flat index, grain); orientation statistics only its ``own`` runs.
    """
    h, w = planes.height, planes.width
    run_pos, run_len, run_grain = every.pos, every.length, every.grain
    filled_k, filled_g = filled
    gidx = np.arange(1, n_grains + 1)
    m = n_grains + 1
    area = np.bincount(run_grain, weights=run_len, minlength=m)
    area += np.bincount(filled_g, minlength=m)
    i, j0 = np.divmod(run_pos, w)
    step_x = float(omap.step_x_um)
    pitch = float(omap.row_pitch_um)
    # Sum of x over a run starting at column j0: len·j0 + len·(len-1)/2 steps.
    sx = run_len * j0 + 0.5 * run_len * (run_len - 1)
    sum_x = np.bincount(run_grain, weights=sx, minlength=m) * step_x
    if omap.grid == "hexagonal":
        sum_x += np.bincount(run_grain, weights=run_len * (i % 2), minlength=m) * 0.5 * step_x
    sum_y = np.bincount(run_grain, weights=run_len * i, minlength=m) * pitch
    if filled_k.size:
        fx, fy = point_xy_um(omap, filled_k)
        sum_x += np.bincount(filled_g, weights=fx, minlength=m)
        sum_y += np.bincount(filled_g, weights=fy, minlength=m)
    edge = (i == 0) | (i == h - 1) | (j0 == 0) | (j0 + run_len - 1 == w - 1)
    touches = np.bincount(run_grain, weights=edge, minlength=m) > 0
    # The proper rotations of each phase, built once per call (not cached across calls).
    ops = {p.code: symmetry.proper_rotations(p.laue, setting=p.setting) for p in infos}
    mean, spread_sum, spread_max = _grain_orientations(
        planes,
        own,
        _GrainPhases(grain_code, infos, ops),
        n_grains=n_grains,
        progress=None if progress is None else (lambda f: progress(0.8 + 0.2 * f)),
    )
    n_own = np.bincount(own.grain, weights=own.length, minlength=m)
    with np.errstate(invalid="ignore", divide="ignore"):
        spread_mean = np.where(n_own > 0, spread_sum / np.maximum(n_own, 1), np.nan)
    spread_max = np.where(n_own > 0, spread_max, np.nan)
    mean[n_own == 0] = np.nan
    cell_um2 = step_x * pitch
    ids = np.array([p.id for p in infos])
    phase_ids = ids[grain_code[1:].astype(np.int64) - 1] if n_grains else np.zeros(0, int)
    return {
        "grain_id": gidx,
        "phase": phase_ids.astype(np.int64),
        "quat": mean[1:],
        "area_px": area[1:].astype(np.int64),
        "area_um2": area[1:] * cell_um2,
        "centroid_x_um": sum_x[1:] / np.maximum(area[1:], 1),
        "centroid_y_um": sum_y[1:] / np.maximum(area[1:], 1),
        "spread_mean_deg": np.rad2deg(spread_mean[1:]),
        "spread_max_deg": np.rad2deg(spread_max[1:]),
        "touches_edge": touches[1:],
    }


# ----------------------------------------------------------------------------- tiles


def link_labels(
    omap: OrientationMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
    *,
    threshold_deg: float = 5.0,
) -> np.ndarray:
    """Connected components of the neighbour links, before any clean-up (§1).

    The first stage of :func:`segment_grains` (same link test, same kernels), for
    callers that join the components of several pieces of a map themselves
    (:mod:`inclination.tiles`).

    Parameters
    ----------
    omap : OrientationMap
    phases : sequence or mapping of Phase
    threshold_deg : float
        The link threshold (degrees), as in :func:`segment_grains`.

    Returns
    -------
    ndarray of int32, shape (H, W)
        Component 1..n of each usable point, numbered in raster order of each
        component's first point; 0 where a point is not valid or not indexed. A map
        with no usable point gives all zeros (not an error).

    Raises
    ------
    SettingError, InputError, TypeError
        As :func:`segment_grains` for the threshold and the phases.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((2, 3, 4)); quat[..., 0] = 1.0
    >>> quat[:, 1:] = [0.92388, 0.0, 0.0, 0.382683]  # 45° about Z
    >>> phase = np.ones((2, 3), int); phase[0, 2] = 0
    >>> link_labels(OrientationMap(quat, phase), [cu]).tolist()
    [[1, 2, 0], [1, 2, 2]]
    """
    planes = map_planes(omap)
    infos = phase_infos(phases)
    threshold = _check_threshold(threshold_deg, infos)
    code = _phase_codes(omap, infos)
    run_id, rows, comp = _linked_runs(planes, code, infos, threshold)
    n_runs = rows.pos.size - 1
    run_comp = comp[1:]
    # Components numbered in the order of their first run (runs are in raster order).
    uniq, first = np.unique(run_comp, return_index=True)
    lut = np.zeros(n_runs + 1, np.int32)
    if uniq.size:
        number = np.zeros(uniq.max() + 1, np.int32)
        number[uniq[np.argsort(first, kind="stable")]] = np.arange(1, uniq.size + 1)
        lut[1:] = number[run_comp]
    return lut[run_id].reshape(planes.height, planes.width)


def isolated_points(labels: np.ndarray, grid: str) -> tuple[np.ndarray, np.ndarray]:
    """Points with no grain whose every neighbour lies in one grain (``fill_isolated``).

    Parameters
    ----------
    labels : ndarray of int, shape (H, W)
        Grain labels, 0 = no grain.
    grid : {'square', 'hexagonal'}

    Returns
    -------
    flat : ndarray of int64, shape (n,)
        Flat indices ``row·W + col`` of the points (never on the map's edge).
    grain : ndarray, shape (n,)
        The grain of their neighbours.

    Examples
    --------
    >>> labels = np.ones((3, 3), np.int32); labels[1, 1] = 0
    >>> [a.tolist() for a in isolated_points(labels, "square")]
    [[4], [1]]
    """
    return _fill_isolated(np.asarray(labels), grid)
