"""Straight boundary segments (traces) and their uncertainty (conventions §1–§2).

A boundary chain is an ordered run of edge midpoints in the sample frame S (µm;
X right, Y down, §2). Each chain is split where it bends by a recursive split at
the farthest point (Ramer–Douglas–Peucker), and each piece is fitted by total
least squares (TLS) through its midpoints. Trace angles are measured in S from
+X toward +Y and lie in [0, 180).

The uncertainty model
---------------------
A boundary drawn on a grid of step ``s`` is a staircase: its edge midpoints sit
off the true line by a deterministic, grid-locked amount. Treating those
offsets as uniform noise of variance s²/12 on ``n ≈ L/s`` points spread over a
length ``L`` gives the TLS slope variance ``12·(s²/12)/(n·L²)``, that is the
quantisation term

    σ_q = c · (s / L)^1.5   rad.

The staircase is not noise, though. Close to a row direction of the grid (square:
0°, 45°, 90°, 135°; hexagonal: every 30°) a boundary that rises less than about
two row spacings ``h`` over its length has only one or two steps, and where they
fall decides the fitted angle: the error there scales as ``h/L``, not
``(s/L)^1.5``. So a fitted line with ``L·|sin(α − α_row)| < 2h`` for a row
direction α_row (spacing h: square s and s/√2, hexagonal s√3/2 and s/2) gets the
extra term ``σ_h = γ·h/L`` rad, and the model is

    σ_grid² = σ_q² + [near a row]·σ_h².

The constants were measured here on 30 000 random straight boundaries per grid
(random angle and offset, L/s log-uniform from 5 to 100; step = distance between
neighbouring points; ``benchmarks/bench_traces.py --calibrate``, checked by
``tests/test_traces.py``): c = 0.60 (square), 0.50 (hexagonal); γ = 0.35 on both.
Without the angle, the angle-averaged c = 0.90 (square) or 0.80 (hexagonal)
alone gives the same RMS. The hexagonal grid thus needs its own constants: its
staircases are finer for the same step. The errors stay heavier-tailed than a
normal law: 0.7–0.9 % of them fall beyond 3σ (0.27 % for a normal law), the
largest near 6σ.

Roughness beyond the staircase (misindexed pixels, a wavy boundary) shows up as
a residual larger than a staircase has. Its statistical contribution is the TLS
slope error computed from the *excess* residual only, so that a clean staircase
is not counted twice:

    σ_r² = 12 · max(r² − r_q², 0) / ((n − 2) · L²),

with ``r`` the RMS residual of the fit and ``r_q = k·s`` the largest RMS residual
a clean staircase shows (k = 0.32 square, 0.28 hexagonal, measured the same way).
The reported standard uncertainty is ``σ = sqrt(σ_grid² + σ_r²)``, in degrees.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ._validation import (
    as_float_array,
    check_finite,
    check_last_axis,
    check_one_of,
    check_positive,
)
from .errors import InputError

if TYPE_CHECKING:
    from .network import BoundaryNetwork

__all__ = [
    "GRIDS",
    "LineFit",
    "fit_line_tls",
    "split_polyline",
    "trace_sigma_model_deg",
    "fit_segments",
    "group_collinear",
    "SEGMENT_COLUMNS",
]

GRIDS = ("square", "hexagonal")

# Constants of the σ model, measured on random straight boundaries (module docstring).
_QUANT_COEFF = {"square": 0.60, "hexagonal": 0.50}
_QUANT_COEFF_ANY_ANGLE = {"square": 0.90, "hexagonal": 0.80}
_ROW_COEFF = 0.35
_ROW_REACH = 2.0
_STAIR_RESIDUAL = {"square": 0.32, "hexagonal": 0.28}
_BLOCK_POINTS = 1 << 20
# Two pieces closer than 5° to parallel have no well-placed corner between them.
_MIN_CORNER_SIN = float(np.sin(np.radians(5.0)))
# Row directions of each grid (deg, S) and the spacing of the rows along them (in steps).
_ROWS = {
    "square": (np.array([0.0, 45.0, 90.0, 135.0]), np.array([1.0, 0.5**0.5, 1.0, 0.5**0.5])),
    "hexagonal": (
        np.arange(0.0, 180.0, 30.0),
        np.tile([0.75**0.5, 0.5], 3),
    ),
}

SEGMENT_COLUMNS = (
    "segment_id",
    "chain_id",
    "grain_a",
    "grain_b",
    "phase_a",
    "phase_b",
    "x0_um",
    "y0_um",
    "x1_um",
    "y1_um",
    "length_um",
    "trace_angle_deg",
    "trace_sigma_deg",
    "residual_um",
    "n_edges",
    "too_short",
    "misorientation_deg",
    "is_phase_boundary",
)

_NETWORK_FIELDS = (
    "offsets",
    "points_um",
    "grain_a",
    "grain_b",
    "phase_a",
    "phase_b",
    "misorientation_deg",
    "is_phase_boundary",
    "closed",
)


@dataclass(frozen=True)
class LineFit:
    """A straight line fitted by total least squares, in the frame of the points.

    Attributes
    ----------
    centre_um : tuple of float
        (x, y) centroid of the points; the line passes through it.
    direction : tuple of float
        Unit vector along the line, chosen with angle in [0, 180).
    angle_deg : float
        Line direction from +X toward +Y, in [0, 180) (conventions §2 when the
        points are in S).
    residual_um : float
        RMS perpendicular distance of the points to the line.
    span_um : float
        Distance between the extreme projections of the points on the line.
    n : int
        Number of points.
    sigma_deg : float
        Statistical standard error of ``angle_deg`` from the scatter alone:
        ``sqrt(Σr²/(n-2) / Σt²)`` rad, ``r`` perpendicular and ``t`` along-line
        offsets from the centre (the slope error of least squares in the frame of
        the line). NaN for fewer than three points.
    """

    centre_um: tuple[float, float]
    direction: tuple[float, float]
    angle_deg: float
    residual_um: float
    span_um: float
    n: int
    sigma_deg: float


def _wrap_angle_deg(angle_deg: np.ndarray) -> np.ndarray:
    """Angles of undirected lines folded into [0, 180)."""
    wrapped = np.mod(angle_deg, 180.0)
    # np.mod of a tiny negative number rounds up to exactly 180.
    return np.where(wrapped >= 180.0, wrapped - 180.0, wrapped)


def _check_points(points, name: str) -> np.ndarray:
    pts = as_float_array(points, name)
    if pts.ndim != 2:
        raise InputError(f"Expected `{name}` to have shape (N, 2), got {pts.shape}.")
    check_last_axis(pts, name, 2)
    check_finite(pts, name)
    return pts


def fit_line_tls(points: ArrayLike) -> LineFit:
    """Fit a straight line by total least squares (orthogonal regression).

    Parameters
    ----------
    points : array_like, shape (N, 2)
        Point coordinates (µm), N >= 2, e.g. edge midpoints in the sample frame S.

    Returns
    -------
    LineFit
        Centre, direction, angle in [0, 180) from +X toward +Y, RMS residual,
        span and the statistical angle error.

    Raises
    ------
    InputError
        If ``points`` is not (N, 2) with N >= 2, holds a non-finite value, or all
        points coincide (no direction).

    Examples
    --------
    >>> fit = fit_line_tls([[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]])
    >>> round(fit.angle_deg, 6), round(fit.residual_um, 6)
    (45.0, 0.0)
    >>> np.round(fit.centre_um, 6).tolist()
    [1.0, 1.0]
    """
    pts = _check_points(points, "points")
    if pts.shape[0] < 2:
        raise InputError(f"Expected `points` to hold at least 2 points, got {pts.shape[0]}.")
    centre = pts.mean(axis=0)
    d = pts - centre
    sxx, syy, sxy = (d[:, 0] ** 2).sum(), (d[:, 1] ** 2).sum(), (d[:, 0] * d[:, 1]).sum()
    theta, lam_min, lam_max = _principal_axis(sxx, syy, sxy)
    if not lam_max > 0:
        raise InputError("Expected `points` to hold at least 2 distinct points, got all equal.")
    angle_deg = float(_wrap_angle_deg(np.degrees(theta)))
    direction = np.array([np.cos(np.radians(angle_deg)), np.sin(np.radians(angle_deg))])
    t = d @ direction
    n = pts.shape[0]
    sigma_deg = float(np.degrees(np.sqrt(lam_min / (n - 2) / lam_max))) if n > 2 else np.nan
    return LineFit(
        centre_um=(float(centre[0]), float(centre[1])),
        direction=(float(direction[0]), float(direction[1])),
        angle_deg=angle_deg,
        residual_um=float(np.sqrt(lam_min / n)),
        span_um=float(t.max() - t.min()),
        n=int(n),
        sigma_deg=sigma_deg,
    )


def _principal_axis(sxx, syy, sxy):
    """Major-axis angle (rad) and the two eigenvalues of [[sxx, sxy], [sxy, syy]]."""
    theta = 0.5 * np.arctan2(2.0 * sxy, sxx - syy)
    half_trace = 0.5 * (sxx + syy)
    radius = np.hypot(0.5 * (sxx - syy), sxy)
    # Clip: rounding can make the smaller eigenvalue of a perfect line slightly negative.
    return theta, np.maximum(half_trace - radius, 0.0), half_trace + radius


def trace_sigma_model_deg(
    length_um: ArrayLike,
    step_um: float,
    residual_um: ArrayLike,
    n: ArrayLike,
    *,
    angle_deg: ArrayLike | None = None,
    grid: str = "square",
) -> np.ndarray:
    """Standard uncertainty of a fitted trace angle: grid quantisation plus roughness.

    ``σ² = σ_q² + [near a row]·σ_h² + σ_r²`` (module docstring): ``σ_q =
    c·(s/L)^1.5``, ``σ_h = 0.35·h/L`` for a line within two row spacings h of a row
    direction of the grid over its length, ``σ_r² = 12·max(r² − (k·s)², 0)/((n −
    2)·L²)``; c = 0.60, k = 0.32 (square), c = 0.50, k = 0.28 (hexagonal).

    Parameters
    ----------
    length_um : array_like
        Fitted segment length L (µm).
    step_um : float
        Grid step s (µm), > 0.
    residual_um : array_like
        RMS perpendicular residual r of the fit (µm).
    n : array_like of int
        Number of edge midpoints in the fit.
    angle_deg : array_like, optional
        Fitted trace angle (deg, S, §2). Without it the row term is replaced by
        its average over angles (c = 0.90 square, 0.80 hexagonal, no σ_h).
    grid : {'square', 'hexagonal'}
        Grid of the map (conventions §1).

    Returns
    -------
    numpy.ndarray
        σ in degrees, broadcast shape of the inputs; NaN where L <= 0 or the
        angle is NaN. The roughness term is left out where n <= 2.

    Examples
    --------
    >>> trace_sigma_model_deg([10.0, 20.0, 50.0], 1.0, 0.0, [14, 28, 70]).round(6).tolist()
    [1.630666, 0.576528, 0.145851]
    >>> trace_sigma_model_deg(20.0, 1.0, 0.0, 28, angle_deg=[0.0, 30.0]).round(6).tolist()
    [1.073818, 0.384352]
    """
    check_one_of(grid, "grid", GRIDS)
    check_positive(step_um, "step_um")
    length = as_float_array(length_um, "length_um")
    resid = as_float_array(residual_um, "residual_um")
    count = as_float_array(n, "n")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(length > 0, step_um / length, np.nan)
        if angle_deg is None:
            sigma_grid2 = (_QUANT_COEFF_ANY_ANGLE[grid] * ratio**1.5) ** 2
        else:
            angle = as_float_array(angle_deg, "angle_deg")
            rows_deg, spacing = _ROWS[grid]
            off = np.radians(np.mod(angle[..., None] - rows_deg + 90.0, 180.0) - 90.0)
            rise = length[..., None] * np.abs(np.sin(off))
            near = rise < _ROW_REACH * spacing * step_um
            h_steps = np.where(near, spacing, 0.0).max(axis=-1)
            sigma_h = _ROW_COEFF * h_steps * ratio
            sigma_grid2 = (_QUANT_COEFF[grid] * ratio**1.5) ** 2 + sigma_h**2
            sigma_grid2 = np.where(np.isnan(angle), np.nan, sigma_grid2)
        excess = np.maximum(resid**2 - (_STAIR_RESIDUAL[grid] * step_um) ** 2, 0.0)
        sigma_r2 = np.where(count > 2, 12.0 * excess / ((count - 2) * length**2), 0.0)
    return np.degrees(np.sqrt(sigma_grid2 + sigma_r2))


def _distance_to_chord(rel, chord):
    """Distance of points (given relative to a chord's start) to the chord, a line segment.

    The segment, not its infinite line, as in GEOS's Douglas–Peucker simplifier: a
    point beyond an end (a chain that doubles back) counts by its distance to that
    end, and the chord of a loop, which starts and ends on one point, is that point.
    """
    length2 = chord[:, 0] ** 2 + chord[:, 1] ** 2
    along = np.einsum("ij,ij->i", rel, chord) / np.where(length2 > 0, length2, 1.0)
    off = rel - np.clip(along, 0.0, 1.0)[:, None] * chord
    return np.hypot(off[:, 0], off[:, 1])


def _farthest(points, s, e):
    """Largest distance to the chord, and where, for intervals s..e with inner points."""
    if not s.size:
        return np.zeros(0), np.zeros(0, dtype=np.int64)
    inner = e - s - 1
    group = np.repeat(np.arange(s.size), inner)
    first = np.cumsum(inner) - inner
    idx = np.arange(group.size) - first[group] + s[group] + 1
    start = points[s][group]
    dist = _distance_to_chord(points[idx] - start, points[e][group] - start)
    dmax = np.maximum.reduceat(dist, first)
    at_max = np.flatnonzero(dist == dmax[group])
    # The first point at the largest distance: ``group`` is sorted.
    first_at_max = at_max[np.r_[True, group[at_max][1:] != group[at_max][:-1]]]
    return dmax, idx[first_at_max]


def _max_chord_distance(points, s, e):
    """Largest distance of the inner points of intervals s..e to their chords (0 if none)."""
    out = np.zeros(s.size)
    has_inner = e - s > 1
    out[has_inner] = _farthest(points, s[has_inner], e[has_inner])[0]
    return out


def _ramer_douglas_peucker(points, starts, ends, tolerance):
    """Break indices of many polylines at once, by the recursive farthest-point split.

    ``points`` (M, 2); each polyline is ``points[starts[k]:ends[k] + 1]``. All
    intervals of one recursion level are handled in one vectorised pass, so the
    cost is (number of points) × (recursion depth). Returns a sorted array of
    the global indices kept as vertices (every start and end included).
    """
    kept = [starts, ends]
    s, e = starts, ends
    while s.size:
        has_inner = e - s > 1
        s, e = s[has_inner], e[has_inner]
        if not s.size:
            break
        dmax, split = _farthest(points, s, e)
        go = dmax > tolerance
        kept.append(split[go])
        s, e = np.concatenate([s[go], split[go]]), np.concatenate([split[go], e[go]])
    return np.unique(np.concatenate(kept))


def split_polyline(points: ArrayLike, tolerance_um: float, *, closed: bool = False) -> np.ndarray:
    """Indices where a polyline bends by more than a tolerance (Ramer–Douglas–Peucker).

    The polyline is split at the point farthest from the chord between its ends
    whenever that distance exceeds ``tolerance_um``, recursively.

    Parameters
    ----------
    points : array_like, shape (N, 2)
        Ordered vertices (µm).
    tolerance_um : float
        Largest allowed distance (µm) of a vertex from the chord of its piece, > 0.
    closed : bool
        Whether the last vertex joins the first (a loop). A loop is started at the
        vertex farthest from vertex 0 (a vertex of the convex hull, so a corner,
        wherever the list starts); that start is kept as a break only if the
        piece through it is not straight within the tolerance.

    Returns
    -------
    numpy.ndarray of int
        Sorted vertex indices. Open polyline: the pieces are
        ``points[b[k]:b[k+1] + 1]``, with ``b[0] = 0`` and ``b[-1] = N - 1``.
        Closed polyline: the pieces run from each break to the next, the last one
        wrapping round through the end to ``b[0]``. N < 2 gives ``arange(N)``.

    Examples
    --------
    >>> pts = [[0, 0], [1, 0], [2, 0], [2, 1], [2, 2]]
    >>> split_polyline(pts, 0.5).tolist()
    [0, 2, 4]
    >>> split_polyline([[0, 0], [2, 0], [2, 2], [0, 2]], 0.5, closed=True).tolist()
    [0, 1, 2, 3]
    """
    pts = _check_points(points, "points")
    check_positive(tolerance_um, "tolerance_um")
    n = pts.shape[0]
    if n < 2:
        return np.arange(n)
    order, start, end, _, _, _ = _chain_pieces(
        np.array([0, n]), pts, np.array([bool(closed)]), tolerance_um
    )
    if closed and n >= 3:
        return np.sort(order[start])
    return np.append(order[start], order[end[-1]])


def _check_network(network):
    missing = [f for f in _NETWORK_FIELDS if not hasattr(network, f)]
    if missing:
        raise TypeError(
            "Expected `network` to be a BoundaryNetwork (with "
            + ", ".join(_NETWORK_FIELDS)
            + f"), got {type(network).__name__} without {', '.join(missing)}."
        )
    offsets = np.asarray(network.offsets)
    if offsets.ndim != 1 or offsets.size < 1 or not np.issubdtype(offsets.dtype, np.integer):
        raise InputError(
            f"Expected `network.offsets` to be a 1-D integer array, got dtype {offsets.dtype} "
            f"and shape {offsets.shape}."
        )
    points = _check_points(network.points_um, "network.points_um")
    if offsets[0] != 0 or offsets[-1] != points.shape[0] or np.any(np.diff(offsets) < 0):
        raise InputError(
            "Expected `network.offsets` to rise from 0 to the number of points "
            f"({points.shape[0]}), got {offsets[0]}..{offsets[-1]}."
        )
    n_chains = offsets.size - 1
    for name in _NETWORK_FIELDS[2:]:
        column = np.asarray(getattr(network, name))
        if column.shape != (n_chains,):
            raise InputError(
                f"Expected `network.{name}` to have shape ({n_chains},), got {column.shape}."
            )
    return offsets.astype(np.int64), points


def _chain_pieces(offsets, points, closed, tolerance):
    """Pieces of every chain as intervals of a gathered point index.

    Returns ``(order, piece_start, piece_end, piece_chain, at_chain_end,
    next_piece)``.
    ``points[order]`` lists the chains one after another, each loop written twice
    and started at its vertex farthest from its listed first vertex (a vertex of
    the convex hull, so a corner wherever the list starts), so that every piece,
    even one that wraps round a loop, is the contiguous run
    ``order[piece_start[k]:piece_end[k] + 1]``; ``at_chain_end`` (K, 2) marks the
    piece ends that are chain ends (not breaks, not on a loop); ``next_piece``
    (K,) is the piece that follows across the break at each piece's end, or -1.
    """
    counts = np.diff(offsets)
    first_of = offsets[:-1]
    closed = np.asarray(closed, dtype=bool) & (counts >= 3)
    # A loop may list its first point again at the end; drop it, it is not an edge.
    repeat_last = np.zeros_like(closed)
    last_of = offsets[1:] - 1
    repeat_last[closed] = np.all(points[last_of[closed]] == points[first_of[closed]], axis=1)
    counts = counts - repeat_last
    closed &= counts >= 3

    loops = np.flatnonzero(closed)
    roll = np.zeros(counts.size, dtype=np.int64)
    if loops.size:
        owner = np.repeat(np.arange(loops.size), counts[loops])
        local = np.arange(owner.size) - (np.cumsum(counts[loops]) - counts[loops])[owner]
        far = np.hypot(*(points[first_of[loops][owner] + local] - points[first_of[loops][owner]]).T)
        at_far = np.flatnonzero(
            far == np.maximum.reduceat(far, np.cumsum(counts[loops]) - counts[loops])[owner]
        )
        _, first_far = np.unique(owner[at_far], return_index=True)
        roll[loops] = local[at_far[first_far]]

    # Gathered length: open chains once, loops twice.
    glen = np.where(closed, 2 * counts, counts)
    gstart = np.cumsum(glen) - glen
    chain_of = np.repeat(np.arange(counts.size), glen)
    pos = np.arange(chain_of.size) - gstart[chain_of]
    order = first_of[chain_of] + (pos + roll[chain_of]) % np.maximum(counts[chain_of], 1)
    gathered = points[order]

    ok = counts >= 1
    # A loop's first pass runs from its start round to the start again (a chord that
    # is a point, so the split is at the point farthest from the start).
    breaks = _ramer_douglas_peucker(
        gathered, gstart[ok], gstart[ok] + np.where(closed, counts, counts - 1)[ok], tolerance
    )
    # A loop's last break is the first point of its second copy, still the loop's own.
    owner = chain_of[breaks]
    same = owner[1:] == owner[:-1]
    piece_start, piece_end = breaks[:-1][same], breaks[1:][same]
    piece_chain = owner[:-1][same]
    single = ok & (counts == 1)
    piece_start = np.concatenate([piece_start, gstart[single]])
    piece_end = np.concatenate([piece_end, gstart[single]])
    piece_chain = np.concatenate([piece_chain, np.flatnonzero(single)])
    sort = np.lexsort((piece_start, piece_chain))
    piece_start, piece_end, piece_chain = piece_start[sort], piece_end[sort], piece_chain[sort]

    # A loop's start is kept as a break only when the piece through it is not straight.
    if loops.size:
        n_pieces = np.bincount(piece_chain, minlength=counts.size)
        first_piece = np.searchsorted(piece_chain, loops)
        last_piece = first_piece + n_pieces[loops] - 1
        test = n_pieces[loops] >= 3
        lo = piece_start[last_piece[test]]
        hi = piece_end[first_piece[test]] + counts[loops[test]]
        straight = _max_chord_distance(gathered, lo, hi) <= tolerance
        merge_first, merge_last = first_piece[test][straight], last_piece[test][straight]
        piece_end[merge_last] = piece_end[merge_first] + counts[piece_chain[merge_first]]
        keep = np.ones(piece_start.size, dtype=bool)
        keep[merge_first] = False
        piece_start, piece_end, piece_chain = piece_start[keep], piece_end[keep], piece_chain[keep]

    open_chain = ~closed[piece_chain]
    at_chain_end = np.stack(
        [
            open_chain & (piece_start == gstart[piece_chain]),
            open_chain & (piece_end == gstart[piece_chain] + counts[piece_chain] - 1),
        ],
        axis=1,
    )
    # The piece that follows each piece across a break: the next one of its chain, and
    # round a loop from the last to the first.
    next_piece = np.full(piece_chain.size, -1, dtype=np.int64)
    if piece_chain.size:
        follows = piece_chain[1:] == piece_chain[:-1]
        next_piece[:-1][follows] = np.flatnonzero(follows) + 1
        chain_first = np.r_[True, ~follows]
        chain_last = np.r_[~follows, True]
        round_loop = chain_last & closed[piece_chain] & ~chain_first
        next_piece[round_loop] = np.flatnonzero(chain_first & closed[piece_chain] & ~chain_last)
    return order, piece_start, piece_end, piece_chain, at_chain_end, next_piece


def _fit_pieces(pts, piece_start, piece_end, *, at_chain_end, next_piece, reach):
    """TLS fit of many pieces at once: the columns of the segments table that are geometry.

    ``at_chain_end`` (K, 2) says whether each end of a piece is an end of its chain
    (a junction or the map edge) rather than a break inside the chain;
    ``next_piece`` (K,) the piece across the break at its end (-1: none); ``reach``
    how far from the break vertex the two fitted lines may cross to mark the corner.
    """
    # A break vertex is the corner itself, or the first midpoint past it on the other
    # arm: it is left out of the fit of both pieces (while each keeps >= 2 points), and
    # only marks where the pieces end.
    size = piece_end - piece_start + 1
    drop = (~at_chain_end) & (size[:, None] >= 4)
    drop[:, 1] &= size - drop[:, 0] >= 3
    f_start, f_end = piece_start + drop[:, 0], piece_end - drop[:, 1]
    n = f_end - f_start + 1
    group = np.repeat(np.arange(n.size), n)
    first = np.cumsum(n) - n
    idx = np.arange(group.size) - first[group] + f_start[group]
    p = pts[idx]
    centre = np.stack([np.bincount(group, p[:, k], minlength=n.size) for k in (0, 1)], 1)
    centre = centre / np.maximum(n, 1)[:, None]
    d = p - centre[group]
    sxx = np.bincount(group, d[:, 0] ** 2, minlength=n.size)
    syy = np.bincount(group, d[:, 1] ** 2, minlength=n.size)
    sxy = np.bincount(group, d[:, 0] * d[:, 1], minlength=n.size)
    theta, lam_min, lam_max = _principal_axis(sxx, syy, sxy)
    angle_deg = _wrap_angle_deg(np.degrees(theta))
    direction = np.stack([np.cos(np.radians(angle_deg)), np.sin(np.radians(angle_deg))], 1)
    t0 = np.einsum("ij,ij->i", pts[piece_start] - centre, direction)
    t1 = np.einsum("ij,ij->i", pts[piece_end] - centre, direction)
    # At a junction or the map edge the last midpoint sits half an edge inside the
    # boundary's end: move that end out by half the mean midpoint spacing, so the length
    # counts every edge once, along the line, and never the staircase.
    spacing = np.einsum("ij,ij->i", pts[f_end] - pts[f_start], direction) / np.maximum(n - 1, 1)
    t0 = t0 - np.where(at_chain_end[:, 0], 0.5 * spacing, 0.0)
    t1 = t1 + np.where(at_chain_end[:, 1], 0.5 * spacing, 0.0)
    # At a bend the corner is where the two fitted lines cross (the break vertex is a
    # midpoint half an edge off it), unless they are near parallel or cross far away.
    k = np.flatnonzero(next_piece >= 0)
    j = next_piece[k]
    cross = direction[k, 0] * direction[j, 1] - direction[k, 1] * direction[j, 0]
    apart = (np.abs(cross) > _MIN_CORNER_SIN) & (lam_max[k] > 0) & (lam_max[j] > 0)
    k, j, cross = k[apart], j[apart], cross[apart]
    w = centre[j] - centre[k]
    a = (w[:, 0] * direction[j, 1] - w[:, 1] * direction[j, 0]) / cross
    b = (w[:, 0] * direction[k, 1] - w[:, 1] * direction[k, 0]) / cross
    corner = centre[k] + a[:, None] * direction[k]
    use = np.hypot(*(corner - pts[piece_end[k]]).T) <= reach
    t1[k[use]] = a[use]
    t0[j[use]] = b[use]
    # A piece whose ends do not reach as far as its points (a small loop, a hairpin
    # within the tolerance, a walk that comes back) spans its points instead.
    if n.size:
        t = np.einsum("ij,ij->i", d, direction[group])
        t_min, t_max = np.minimum.reduceat(t, first), np.maximum.reduceat(t, first)
        short = np.abs(t1 - t0) < t_max - t_min
        forward = t1 >= t0
        t0, t1 = (
            np.where(short, np.where(forward, t_min, t_max), t0),
            np.where(short, np.where(forward, t_max, t_min), t1),
        )
    end0 = centre + t0[:, None] * direction
    end1 = centre + t1[:, None] * direction
    angle_deg = np.where(lam_max > 0, angle_deg, np.nan)
    return {
        "end0": end0,
        "end1": end1,
        "length_um": np.abs(t1 - t0),
        "trace_angle_deg": angle_deg,
        "residual_um": np.sqrt(lam_min / n),
        "n": n,
    }


def fit_segments(
    network: BoundaryNetwork,
    *,
    step_um: float,
    tolerance_um: float | None = None,
    min_length_um: float | None = None,
    grid: str = "square",
) -> dict[str, np.ndarray]:
    """Split every boundary chain into straight segments and fit each one.

    Parameters
    ----------
    network : BoundaryNetwork
        Ragged chains of ordered edge midpoints in S (µm): ``offsets`` (C+1,),
        ``points_um`` (P, 2), and per chain ``grain_a``, ``grain_b``, ``phase_a``,
        ``phase_b``, ``misorientation_deg``, ``is_phase_boundary``, ``closed``.
    step_um : float
        Grid step s (µm), > 0.
    tolerance_um : float, optional
        Split tolerance of the farthest-point recursion (µm), > 0; default 1.5·s.
    min_length_um : float, optional
        Segments shorter than this (µm) are kept but flagged ``too_short``;
        default 10·s.
    grid : {'square', 'hexagonal'}
        Grid of the map: selects the constants of the σ model.

    Returns
    -------
    dict of str to numpy.ndarray
        The segments table, columns :data:`SEGMENT_COLUMNS`, one row per segment,
        ordered by chain then along the chain (``segment_id`` 0..K−1, ``chain_id``
        the chain's index). End points (S, µm) lie on the fitted line: at a chain
        end (a junction or the map edge) half a mean midpoint spacing beyond the
        last midpoint, where the last edge ends; at a bend inside a chain, where
        the fitted lines of the two pieces cross (if they cross within the split
        tolerance of the break vertex and are more than 5° apart; otherwise the
        break vertex projected on the line). ``length_um`` is the distance between
        the end points, never the staircase length; ``trace_angle_deg`` in [0, 180)
        from +X toward +Y (§2), NaN for a piece without direction (one edge);
        ``trace_sigma_deg`` from :func:`trace_sigma_model_deg` (NaN with the
        angle); ``residual_um`` the RMS distance of the fitted midpoints to the
        line; ``n_edges`` the number of midpoints fitted: a break vertex (the
        corner, or the first midpoint of the other arm) enters neither of its two
        pieces' fits, as long as each keeps two points. ``grain_*``, ``phase_*``,
        ``misorientation_deg`` and ``is_phase_boundary`` come from the chain. An
        empty network gives a table of empty columns.

    Raises
    ------
    TypeError
        If ``network`` lacks a field of the contract.
    SettingError
        If a setting is out of range or not one of its options.
    InputError
        If the offsets do not fit the points, a per-chain column has the wrong
        length, or a point is not finite.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> xs = np.arange(20.0)
    >>> net = SimpleNamespace(
    ...     offsets=np.array([0, 20]), points_um=np.stack([xs, 0.5 + 0 * xs], 1),
    ...     grain_a=np.array([1]), grain_b=np.array([2]), phase_a=np.array([1]),
    ...     phase_b=np.array([1]), misorientation_deg=np.array([40.0]),
    ...     is_phase_boundary=np.array([False]), closed=np.array([False]))
    >>> seg = fit_segments(net, step_um=1.0)
    >>> seg["trace_angle_deg"].round(6).tolist(), seg["length_um"].round(6).tolist()
    ([0.0], [20.0])
    >>> seg["x0_um"].round(6).tolist(), seg["x1_um"].round(6).tolist()
    ([-0.5], [19.5])
    """
    check_positive(step_um, "step_um")
    check_one_of(grid, "grid", GRIDS)
    tolerance = 1.5 * step_um if tolerance_um is None else tolerance_um
    min_length = 10.0 * step_um if min_length_um is None else min_length_um
    check_positive(tolerance, "tolerance_um")
    check_positive(min_length, "min_length_um", allow_zero=True)
    offsets, points = _check_network(network)

    closed = np.asarray(network.closed, dtype=bool)
    # Blocks of whole chains of about _BLOCK_POINTS points bound the temporaries
    # (~150 bytes per point) whatever the size of the network.
    cuts = np.unique(np.searchsorted(offsets, np.arange(0, offsets[-1], _BLOCK_POINTS)))
    cuts = np.unique(np.r_[0, cuts[cuts < offsets.size - 1], offsets.size - 1])
    parts = []
    for c0, c1 in zip(cuts[:-1], cuts[1:], strict=True):
        local = offsets[c0 : c1 + 1] - offsets[c0]
        block_points = points[offsets[c0] : offsets[c1]]
        order, p_start, p_end, p_chain, at_chain_end, next_piece = _chain_pieces(
            local, block_points, closed[c0:c1], tolerance
        )
        geo = _fit_pieces(
            block_points[order],
            p_start,
            p_end,
            at_chain_end=at_chain_end,
            next_piece=next_piece,
            reach=tolerance,
        )
        parts.append((geo, p_chain + c0))
    if not parts:
        none = np.zeros(0, dtype=np.int64)
        empty = _fit_pieces(
            points,
            none,
            none,
            at_chain_end=np.zeros((0, 2), bool),
            next_piece=none,
            reach=tolerance,
        )
        parts.append((empty, none))
    geo = {k: np.concatenate([g[k] for g, _ in parts]) for k in parts[0][0]}
    p_chain = np.concatenate([c for _, c in parts])
    sigma = trace_sigma_model_deg(
        geo["length_um"],
        step_um,
        geo["residual_um"],
        geo["n"],
        angle_deg=geo["trace_angle_deg"],
        grid=grid,
    )
    table = {
        "segment_id": np.arange(p_chain.size, dtype=np.int64),
        "chain_id": p_chain,
        "grain_a": np.asarray(network.grain_a)[p_chain],
        "grain_b": np.asarray(network.grain_b)[p_chain],
        "phase_a": np.asarray(network.phase_a)[p_chain],
        "phase_b": np.asarray(network.phase_b)[p_chain],
        "x0_um": geo["end0"][:, 0],
        "y0_um": geo["end0"][:, 1],
        "x1_um": geo["end1"][:, 0],
        "y1_um": geo["end1"][:, 1],
        "length_um": geo["length_um"],
        "trace_angle_deg": geo["trace_angle_deg"],
        "trace_sigma_deg": sigma,
        "residual_um": geo["residual_um"],
        "n_edges": geo["n"].astype(np.int64),
        "too_short": geo["length_um"] < min_length,
        "misorientation_deg": np.asarray(network.misorientation_deg, dtype=float)[p_chain],
        "is_phase_boundary": np.asarray(network.is_phase_boundary, dtype=bool)[p_chain],
    }
    return table


def group_collinear(
    segments: Mapping[str, np.ndarray], *, max_offset_um: float, n_sigma: float = 3.0
) -> np.ndarray:
    """Label segments that are collinear pieces of one straight boundary.

    A junction artefact (a stray pixel, a tiny grain) can break one straight
    boundary into pieces. Two segments belong together when they separate the same
    two grains, their angles agree within ``n_sigma`` combined standard
    uncertainties, ``|Δα| <= n_sigma·sqrt(σ1² + σ2²)``, and the middle of each lies
    within ``max_offset_um`` of the other's line. Groups are the connected
    components of that relation.

    Parameters
    ----------
    segments : dict of str to numpy.ndarray
        A segments table from :func:`fit_segments` (uses ``grain_a``, ``grain_b``,
        ``x0_um``, ``y0_um``, ``x1_um``, ``y1_um``, ``trace_angle_deg``,
        ``trace_sigma_deg``).
    max_offset_um : float
        Largest perpendicular offset (µm) between the lines of two pieces, > 0.
    n_sigma : float
        Angle tolerance in combined standard uncertainties, > 0.

    Returns
    -------
    numpy.ndarray of int, shape (N,)
        Group label per segment, 0..G−1 in order of first appearance; a segment
        with a NaN angle is a group of its own. Empty table: empty array.

    Raises
    ------
    SettingError
        If a setting is out of range.
    InputError
        If a needed column is missing.

    Examples
    --------
    >>> seg = {"grain_a": np.array([1, 1, 1]), "grain_b": np.array([2, 2, 3]),
    ...        "x0_um": np.array([0.0, 12.0, 0.0]), "y0_um": np.array([0.0, 0.1, 5.0]),
    ...        "x1_um": np.array([10.0, 30.0, 9.0]), "y1_um": np.array([0.0, 0.2, 5.0]),
    ...        "trace_angle_deg": np.array([0.0, 0.3, 0.0]),
    ...        "trace_sigma_deg": np.array([0.5, 0.3, 0.5])}
    >>> group_collinear(seg, max_offset_um=1.0).tolist()
    [0, 0, 1]
    """
    check_positive(max_offset_um, "max_offset_um")
    check_positive(n_sigma, "n_sigma")
    needed = (
        "grain_a",
        "grain_b",
        "x0_um",
        "y0_um",
        "x1_um",
        "y1_um",
        "trace_angle_deg",
        "trace_sigma_deg",
    )
    missing = [c for c in needed if c not in segments]
    if missing:
        raise InputError(
            f"Expected `segments` to have columns {needed}, got one without {missing}."
        )
    ga, gb = np.asarray(segments["grain_a"]), np.asarray(segments["grain_b"])
    n = ga.size
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    angle = np.asarray(segments["trace_angle_deg"], dtype=float)
    sigma = np.asarray(segments["trace_sigma_deg"], dtype=float)
    mid = 0.5 * np.stack(
        [
            np.asarray(segments["x0_um"], float) + np.asarray(segments["x1_um"], float),
            np.asarray(segments["y0_um"], float) + np.asarray(segments["y1_um"], float),
        ],
        axis=1,
    )
    # Every pair of segments of one grain pair, in either order of grains.
    lo, hi = np.minimum(ga, gb), np.maximum(ga, gb)
    order = np.lexsort((hi, lo))
    key_lo, key_hi = lo[order], hi[order]
    new_key = np.r_[True, (key_lo[1:] != key_lo[:-1]) | (key_hi[1:] != key_hi[:-1])]
    key_start = np.flatnonzero(new_key)
    key_end = np.r_[key_start[1:], n]
    end_of = np.repeat(key_end, key_end - key_start)
    partners = end_of - np.arange(n) - 1
    first = np.repeat(np.arange(n), partners)
    second = np.arange(first.size) - (np.cumsum(partners) - partners)[first] + first + 1
    i, j = order[first], order[second]
    d_angle = np.abs(np.mod(angle[i] - angle[j] + 90.0, 180.0) - 90.0)
    angle_ok = d_angle <= n_sigma * np.hypot(sigma[i], sigma[j])
    rad_i, rad_j = np.radians(angle[i]), np.radians(angle[j])
    normal_i = np.stack([-np.sin(rad_i), np.cos(rad_i)], 1)
    normal_j = np.stack([-np.sin(rad_j), np.cos(rad_j)], 1)
    gap = mid[j] - mid[i]
    offset = np.maximum(
        np.abs(np.einsum("ij,ij->i", gap, normal_i)), np.abs(np.einsum("ij,ij->i", gap, normal_j))
    )
    # NaN angles fail both comparisons, so such a segment stays alone.
    linked = angle_ok & (offset <= max_offset_um)
    graph = coo_matrix((np.ones(linked.sum()), (i[linked], j[linked])), shape=(n, n))
    _, labels = connected_components(graph, directed=False)
    # Relabel in order of first appearance, so the labels do not depend on scipy's order.
    _, first_seen, inverse = np.unique(labels, return_index=True, return_inverse=True)
    rank = np.empty_like(first_seen)
    rank[np.argsort(first_seen)] = np.arange(first_seen.size)
    return rank[inverse].astype(np.int64)
