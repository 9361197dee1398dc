"""The boundary network: chains of edge midpoints between grains (conventions §1–§2).

Boundaries lie on the edges between neighbouring points, not on points. Each edge
between two grains is a segment of the *dual* lattice: on a square grid a side of the
square cell round a point, with the cell corners as vertices; on a hexagonal grid a side
of the hexagonal cell, whose vertices each touch three cells. A vertex is a *junction*
when the cells round it hold three or more labels (the region outside the map and points
with no grain count as label 0), or, on a square grid, two labels set as a checkerboard.
Chains run between junctions (or round a loop that meets none).

Every grain-boundary segment is oriented with its lower-numbered grain on the same side.
At a vertex that is not a junction exactly two segments meet, of one grain pair, one
arriving and one leaving, so "next" is a lookup of the segment leaving the head vertex,
and the order along each chain comes from pointer jumping (list ranking in
⌈log₂ L⌉ vectorised steps), not from a walk in Python.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .errors import InputError, SettingError
from .links import (
    BLOCK,
    MapPlanes,
    PhaseInfo,
    disorientation_cos_half,
    forward_pair_mask,
    map_planes,
    neighbour_shifts,
    phase_infos,
    take_columns,
)

if TYPE_CHECKING:
    from .crystal.phases import Phase
    from .grains import GrainMap
    from .maps import OrientationMap

__all__ = [
    "BoundaryEdges",
    "BoundaryNetwork",
    "CHAIN_COLUMNS",
    "boundary_edges",
    "boundary_network",
    "chain_edges",
    "concat_edges",
]

#: Per-chain columns of :class:`BoundaryNetwork`.
CHAIN_COLUMNS = (
    "grain_a",
    "grain_b",
    "phase_a",
    "phase_b",
    "n_edges",
    "misorientation_deg",
    "misorientation_spread_deg",
    "is_phase_boundary",
    "closed",
)


@dataclass(frozen=True)
class BoundaryNetwork:
    """Ragged chains of edge midpoints, ordered along each chain.

    Attributes
    ----------
    offsets : ndarray of int64, shape (C + 1,)
        Chain c holds points ``offsets[c]:offsets[c + 1]``.
    points_um : ndarray, shape (P, 2)
        Edge midpoints (x, y) in S (§2), µm. A closed chain does not repeat its first point.
    pixel_pairs : ndarray of int64, shape (P, 2)
        Flat indices ``row·W + col`` of the two points of each edge; the first lies in
        ``grain_a``.
    grain_a, grain_b : ndarray of int64, shape (C,)
        Grain ids, ``grain_a < grain_b`` (equal for a low-angle boundary inside one grain).
    phase_a, phase_b : ndarray of int64, shape (C,)
    n_edges : ndarray of int64, shape (C,)
    misorientation_deg, misorientation_spread_deg : ndarray, shape (C,)
        Mean and standard deviation of the disorientation of the point pairs across the
        chain (degrees); NaN across a phase boundary (no single symmetry applies).
    is_phase_boundary, closed : ndarray of bool, shape (C,)
    kind : {'grain', 'low_angle'}
    low_angle : BoundaryNetwork or None
        The sub-grain boundaries when requested, as a network of their own.
    """

    offsets: np.ndarray
    points_um: np.ndarray
    pixel_pairs: np.ndarray
    grain_a: np.ndarray
    grain_b: np.ndarray
    phase_a: np.ndarray
    phase_b: np.ndarray
    n_edges: np.ndarray
    misorientation_deg: np.ndarray
    misorientation_spread_deg: np.ndarray
    is_phase_boundary: np.ndarray
    closed: np.ndarray
    kind: str = "grain"
    low_angle: BoundaryNetwork | None = None

    @property
    def n_chains(self) -> int:
        """Number of chains C."""
        return int(self.offsets.size - 1)


@dataclass(frozen=True)
class _LabelledMap:
    """The map's planes with its grain labels; per-grain arrays are indexed by grain id."""

    planes: MapPlanes
    labels: np.ndarray  # (H, W) grain ids, 0 = no grain
    grain_code: np.ndarray  # (G + 1,) phase code of each grain (links.PhaseInfo.code)
    grain_phase: np.ndarray  # (G + 1,) phase id of each grain
    infos: tuple[PhaseInfo, ...]
    valid: np.ndarray  # (N,) bool

    @property
    def labels_flat(self) -> np.ndarray:
        return self.labels.reshape(-1)


@dataclass(frozen=True)
class _Chains:
    """Chain of each node, its position along it, and per chain its length and closure."""

    chain: np.ndarray
    position: np.ndarray
    length: np.ndarray
    closed: np.ndarray


# ----------------------------------------------------------------------------- geometry


def _label_at(labels: np.ndarray, r, c) -> np.ndarray:
    """Label of cells (r, c), 0 outside the map."""
    h, w = labels.shape
    inside = (r >= 0) & (r < h) & (c >= 0) & (c < w)
    out = labels.reshape(-1).take(np.where(inside, r * w + c, 0))
    out *= inside
    return out


def _square_vertices(shift, i, j, w):
    """Base (tail, head) corner ids of the dual segment of pairs (i, j)–(i, j+1) or (i+1, j).

    Corner (r, c) is the top-left corner of cell (r, c), id r·(W+1) + c. The base
    direction puts cell (i, j) on the same side of every segment: the right side of a
    cell runs downwards, its bottom side leftwards.
    """
    stride = w + 1
    right = (shift == 1) & (w > 1)  # one point wide: shift 1 is the down neighbour
    tail = np.where(right, i * stride + j + 1, (i + 1) * stride + j + 1)
    head = np.where(right, (i + 1) * stride + j + 1, (i + 1) * stride + j)
    return tail, head


def _edge_midpoints_um(omap, i, j, shift, w):
    """Midpoints (x, y) in S (µm) of the pairs (i, j)–(i, j) + shift (§1), without divmod."""
    step_x = float(omap.step_x_um)
    pitch = float(omap.row_pitch_um)
    right = (shift == 1) & (w > 1)  # one point wide: shift 1 is the down neighbour
    down = ~right
    dj = np.where(right, 1, 0) + np.where(shift == w - 1, -1, 0) + np.where(shift == w + 1, 1, 0)
    x = (j + 0.5 * dj) * step_x
    if omap.grid == "hexagonal":
        odd = i % 2
        x = x + 0.25 * step_x * (odd + np.where(down, 1 - odd, odd))
    y = (i + 0.5 * down) * pitch
    return x, y


def _hex_vid(kind, r, c, w):
    return ((r + 1) * (w + 2) + (c + 1)) * 2 + kind


def _hex_vertices(shift, i, j, w):
    """Base (tail, head) vertex ids for hexagonal pairs; U = top vertex, D = bottom (§1).

    Each cell owns its top vertex U and bottom vertex D; its upper-right vertex is D of the
    upper-right neighbour, its lower-right vertex U of the lower-right neighbour, and so on.
    """
    odd = i % 2
    if shift == 1 and w > 1:  # east neighbour: the right side, from upper-right to lower-right
        return _hex_vid(1, i - 1, j + odd, w), _hex_vid(0, i + 1, j + odd, w)
    lower_right = (shift == w and odd == 0) | (shift == w + 1)
    lr_tail = _hex_vid(0, i + 1, j + odd, w)
    lr_head = _hex_vid(1, i, j, w)
    ll_tail = _hex_vid(1, i, j, w)
    ll_head = _hex_vid(0, i + 1, j - 1 + odd, w)
    return np.where(lower_right, lr_tail, ll_tail), np.where(lower_right, lr_head, ll_head)


def _dual_segments(grid, shift, i, j, w):
    """Base (tail, head) vertex ids of the dual segments of pairs (i, j)–(i, j) + shift."""
    if grid == "square":
        return _square_vertices(shift, i, j, w)
    tail = np.empty(i.size, np.int64)
    head = np.empty(i.size, np.int64)
    for sh in np.unique(shift):
        sel = shift == sh
        tail[sel], head[sel] = _hex_vertices(int(sh), i[sel], j[sel], w)
    return tail, head


def _vertex_cells(grid, vid, w):
    """(r, c) arrays of the cells round each vertex: 4 for square, 3 for hexagonal."""
    if grid == "square":
        r, c = np.divmod(vid, w + 1)
        return [(r - 1, c - 1), (r - 1, c), (r, c - 1), (r, c)]
    cell, kind = np.divmod(vid, 2)
    r, c = np.divmod(cell, w + 2)
    r, c = r - 1, c - 1
    odd = r % 2
    up = kind == 0
    # U: the cell and its two upper neighbours; D: the cell and its two lower neighbours.
    rr = np.where(up, r - 1, r + 1)
    return [(r, c), (rr, c - 1 + odd), (rr, c + odd)]


def _is_junction(grid, labels, vid, w):
    """Vertices where three or more labels meet, or a square checkerboard."""
    cells = [_label_at(labels, r, c) for r, c in _vertex_cells(grid, vid, w)]
    if grid == "hexagonal":
        a, b, c = cells
        return (a != b) & (b != c) & (a != c)
    p00, p01, p10, p11 = cells
    # Equal pairs among four labels: 6 (one label), 3 or 2 (two), 1 (three), 0 (four).
    equal = (
        (p00 == p01).view(np.int8)
        + (p00 == p10).view(np.int8)
        + (p00 == p11).view(np.int8)
        + (p01 == p10).view(np.int8)
        + (p01 == p11).view(np.int8)
        + (p10 == p11).view(np.int8)
    )
    checkerboard = (p00 == p11) & (p01 == p10) & (p00 != p01)
    return (equal <= 1) | checkerboard


# ----------------------------------------------------------------------------- edges


def _grain_edges(labels_flat, shifts, h, w):
    """Flat index k, shift and direction index of every edge between two different grains."""
    ks, ss, ms = [], [], []
    n = labels_flat.size
    for m, (shift, parity) in enumerate(shifts):
        stop = max(n - shift, 0)
        for s in range(0, stop, 4 * BLOCK):
            e = min(s + 4 * BLOCK, stop)
            la = labels_flat[s:e]
            lb = labels_flat[s + shift : e + shift]
            k = np.flatnonzero((la != lb) & (la > 0) & (lb > 0)) + s
            k = k[forward_pair_mask(k, shift, parity, (h, w), horizontal=m == 0)]
            ks.append(k)
            ss.append(np.full(k.size, shift, np.int64))
            ms.append(np.full(k.size, m, np.int64))
    if not ks:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(ks), np.concatenate(ss), np.concatenate(ms)


def _low_angle_edges(lm: _LabelledMap, shifts, *, low_deg, high_deg):
    """Edges inside one grain whose disorientation is in [low_deg, high_deg)."""
    q, labels_flat, grain_code, infos = lm.planes.quat, lm.labels_flat, lm.grain_code, lm.infos
    h, w = lm.labels.shape
    cos_low = np.float32(np.cos(np.deg2rad(low_deg) / 2))
    ks, ss, cs = [], [], []
    n = labels_flat.size
    for m_shift, (shift, parity) in enumerate(shifts):
        stop = max(n - shift, 0)
        for s in range(0, stop, BLOCK):
            e = min(s + BLOCK, stop)
            la = labels_flat[s:e]
            lb = labels_flat[s + shift : e + shift]
            d = np.abs(np.einsum("cn,cn->n", q[:, s:e], q[:, s + shift : e + shift]))
            # Pairs within low_deg without symmetry are within it with symmetry too.
            k = np.flatnonzero((la == lb) & (la > 0) & (d <= cos_low)) + s
            k = k[forward_pair_mask(k, shift, parity, (h, w), horizontal=m_shift == 0)]
            if k.size == 0:
                continue
            m = _pair_cos_half(q, k, k + shift, grain_code[labels_flat[k]], infos)
            angle = np.rad2deg(2 * np.arccos(np.minimum(m, 1.0)))
            keep = (angle >= low_deg) & (angle < high_deg)
            ks.append(k[keep])
            ss.append(np.full(int(keep.sum()), shift, np.int64))
            cs.append(angle[keep])
    if not ks:
        z = np.zeros(0, np.int64)
        return z, z, np.zeros(0)
    return np.concatenate(ks), np.concatenate(ss), np.concatenate(cs)


def _pair_cos_half(q, a, b, codes, infos):
    """cos(ω/2) of the disorientation of point pairs (a, b) of one phase each (code)."""
    if len(infos) == 1:
        # In blocks, so that the gathered pairs and their products stay in cache.
        out = np.empty(a.size, q.dtype)
        for s in range(0, a.size, BLOCK):
            e = min(s + BLOCK, a.size)
            out[s:e] = disorientation_cos_half(
                take_columns(q, a[s:e]), take_columns(q, b[s:e]), infos[0]
            )
        return out
    out = np.full(a.size, np.nan, np.float32)
    for info in infos:
        sel = np.flatnonzero(codes == info.code)
        if sel.size:
            out[sel] = disorientation_cos_half(
                take_columns(q, a[sel]), take_columns(q, b[sel]), info
            )
    return out


# ----------------------------------------------------------------------------- chains


def _jump(nxt: np.ndarray):
    """Pointer jumping on a successor list (each node has at most one predecessor).

    Returns ``(terminal, dist, looping)``: the last node of each node's list, the steps to
    it, and the nodes still unresolved after ⌈log₂ n⌉ + 1 rounds — those on loops.
    """
    n = nxt.size
    ptr = np.where(nxt >= 0, nxt, np.arange(n))
    dist = (nxt >= 0).astype(np.int64)
    active = np.flatnonzero(nxt >= 0)
    for _ in range(int(np.ceil(np.log2(max(n, 2)))) + 1):
        if active.size == 0:
            break
        p = ptr[active]
        dist[active] += dist[p]
        ptr[active] = ptr[p]
        active = active[ptr[ptr[active]] != ptr[active]]
    return ptr, dist, active


def _order_chains(nxt: np.ndarray) -> _Chains:
    """Chain id, position along the chain, chain lengths and closed flags of a successor list.

    ``nxt[e]`` is the successor of node e or -1; every node has at most one
    predecessor. A loop is cut before its lowest node, which becomes its first.
    """
    n = nxt.size
    terminal, dist, looping = _jump(nxt)
    if looping.size:
        # The lowest node of each loop, by doubling the minimum along it.
        local = np.full(n, -1, np.int64)
        local[looping] = np.arange(looping.size)
        step = local[nxt[looping]]
        low = looping.copy()
        for _ in range(int(np.ceil(np.log2(max(looping.size, 2)))) + 1):
            low = np.minimum(low, low[step])
            step = step[step]
        cut = nxt[looping] == low
        sub = local[nxt[looping]]
        sub[cut] = -1
        t_loop, d_loop, _ = _jump(sub)
        terminal[looping] = looping[t_loop]
        dist[looping] = d_loop
    is_end = terminal == np.arange(n)
    chain_of_end = np.cumsum(is_end) - 1
    chain = chain_of_end[terminal]
    length = np.bincount(chain, minlength=int(is_end.sum()))
    position = length[chain] - 1 - dist
    closed = np.zeros(length.size, bool)
    closed[chain[looping]] = True
    return _Chains(chain, position, length, closed)


def _assemble(edge_a, edge_b, chains: _Chains, *, grain_a, grain_b, mid, angle):
    """Gather per-edge arrays into the ragged chains, ordered by grain pair then raster."""
    chain, position, length, closed = chains.chain, chains.position, chains.length, chains.closed
    n_comp = length.size
    ga_e = grain_a
    gb_e = grain_b
    start_edge = np.zeros(n_comp, np.int64)
    start_edge[chain[position == 0]] = np.flatnonzero(position == 0)
    ga = ga_e[start_edge]
    gb = gb_e[start_edge]
    key_pos = np.minimum(edge_a, edge_b)[start_edge]
    order = np.lexsort((key_pos, gb, ga))
    rank = np.empty(n_comp, np.int64)
    rank[order] = np.arange(n_comp)
    lens_sorted = length[order]
    offsets = np.zeros(n_comp + 1, np.int64)
    np.cumsum(lens_sorted, out=offsets[1:])
    slot = offsets[rank[chain]] + position
    pa = np.empty(edge_a.size, np.int64)
    pb = np.empty(edge_a.size, np.int64)
    pa[slot] = edge_a
    pb[slot] = edge_b
    points = np.empty((edge_a.size, 2))
    points[slot, 0] = mid[0]
    points[slot, 1] = mid[1]
    chain_sorted = np.repeat(np.arange(n_comp), lens_sorted)
    ang = np.empty(edge_a.size)
    ang[slot] = angle
    fin = np.isfinite(ang)
    cnt = np.bincount(chain_sorted[fin], minlength=n_comp)
    s1 = np.bincount(chain_sorted[fin], weights=ang[fin], minlength=n_comp)
    s2 = np.bincount(chain_sorted[fin], weights=ang[fin] ** 2, minlength=n_comp)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, s1 / np.maximum(cnt, 1), np.nan)
        spread = np.where(
            cnt > 0, np.sqrt(np.maximum(s2 / np.maximum(cnt, 1) - mean**2, 0.0)), np.nan
        )
    return dict(
        offsets=offsets,
        points_um=points,
        pixel_pairs=np.column_stack([pa, pb]),
        grain_a=ga[order].astype(np.int64),
        grain_b=gb[order].astype(np.int64),
        n_edges=lens_sorted.astype(np.int64),
        misorientation_deg=mean,
        misorientation_spread_deg=spread,
        closed=closed[order],
    )


def _empty_network(kind):
    z = np.zeros(0, np.int64)
    return BoundaryNetwork(
        offsets=np.zeros(1, np.int64),
        points_um=np.zeros((0, 2)),
        pixel_pairs=np.zeros((0, 2), np.int64),
        grain_a=z,
        grain_b=z.copy(),
        phase_a=z.copy(),
        phase_b=z.copy(),
        n_edges=z.copy(),
        misorientation_deg=np.zeros(0),
        misorientation_spread_deg=np.zeros(0),
        is_phase_boundary=np.zeros(0, bool),
        closed=np.zeros(0, bool),
        kind=kind,
    )


def _finish(parts, grain_phase, kind, low_angle=None):
    pa = grain_phase[parts["grain_a"]]
    pb = grain_phase[parts["grain_b"]]
    return BoundaryNetwork(
        phase_a=pa,
        phase_b=pb,
        is_phase_boundary=pa != pb,
        kind=kind,
        low_angle=low_angle,
        **parts,
    )


# ----------------------------------------------------------------------------- public


def boundary_network(
    omap: OrientationMap,
    grain_map: GrainMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
    *,
    low_angle_deg: float | None = None,
) -> BoundaryNetwork:
    """Chains of boundary-edge midpoints between grains, broken at junctions (§1–§2).

    Parameters
    ----------
    omap : OrientationMap
        The map the grains came from (quaternions, grid, steps).
    grain_map : GrainMap
        From :func:`inclination.grains.segment_grains` on ``omap``.
    phases : sequence or mapping of Phase
        The phases given to the segmentation.
    low_angle_deg : float, optional
        When given, the edges inside one grain whose disorientation lies in
        [low_angle_deg, grain_map.threshold_deg) form a second network,
        ``result.low_angle`` (sub-grain boundaries); its chains break where they
        meet a grain boundary, the map edge, a point with no grain or each other.

    Returns
    -------
    BoundaryNetwork
        Chains ordered by (grain_a, grain_b, first edge in the raster); an empty
        network (zero chains) when the map holds one grain.

    Raises
    ------
    InputError
        If the label image does not fit the map.
    SettingError
        If ``low_angle_deg`` is not in (0, threshold_deg).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> from inclination.grains import segment_grains
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((3, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> omap = OrientationMap(quat, np.ones((3, 4), int))
    >>> net = boundary_network(omap, segment_grains(omap, [cu], min_pixels=1), [cu])
    >>> net.offsets.tolist(), net.points_um.round(6).tolist()
    ([0, 3], [[1.5, 0.0], [1.5, 1.0], [1.5, 2.0]])
    >>> net.misorientation_deg.round(3).tolist()
    [45.0]
    """
    planes = map_planes(omap)
    h, w, grid = planes.height, planes.width, planes.grid
    infos = phase_infos(phases)
    labels = np.asarray(grain_map.labels)
    if labels.shape != (h, w):
        raise InputError(
            f"Expected `grain_map.labels` to have the map's shape {(h, w)}, got {labels.shape}."
        )
    threshold = float(grain_map.threshold_deg)
    if low_angle_deg is not None:
        low = float(low_angle_deg)
        if not (np.isfinite(low) and 0 < low < threshold):
            raise SettingError(
                f"Expected `low_angle_deg` to lie between 0 and the segmentation threshold "
                f"({threshold}°), got {low_angle_deg!r}."
            )
    lm = _labelled_map(omap, labels, grain_map, infos)
    shifts = neighbour_shifts(grid, w)

    low_net = None
    if low_angle_deg is not None:
        low_net = _low_angle_network(omap, lm, shifts, low_deg=low, high_deg=threshold)

    edges = _edges_of(omap, lm, shifts, own_rows=(0, h), row_offset=0)
    net = _chains_of(edges, lm.grain_phase)
    return net if low_net is None else _with_low(net, low_net)


@dataclass(frozen=True)
class BoundaryEdges:
    """The edges between grains of a map or of a band of its rows, before chaining.

    One row per edge, in the order the whole map lists them (by neighbour direction, then
    by first point in the raster); indices are of the whole map.

    Attributes
    ----------
    direction, first : ndarray of int64, shape (E,)
        Index of the neighbour direction (:func:`inclination.links.neighbour_shifts`) and
        flat index of the pair's first point (before the lower grain is put first).
    edge_a, edge_b : ndarray of int64, shape (E,)
        Flat indices of the two points, the lower grain first.
    grain_a, grain_b : ndarray of int64, shape (E,)
    tail, head : ndarray of int64, shape (E,)
        Vertex ids of the dual segment, oriented with grain_a on its one side.
    through : ndarray of bool, shape (E,)
        The head vertex is not a junction: the chain goes on there.
    x_um, y_um : ndarray, shape (E,)
        Edge midpoints in S (§2).
    misorientation_deg : ndarray, shape (E,)
        Disorientation of the pair; NaN across phases.
    """

    direction: np.ndarray
    first: np.ndarray
    edge_a: np.ndarray
    edge_b: np.ndarray
    grain_a: np.ndarray
    grain_b: np.ndarray
    tail: np.ndarray
    head: np.ndarray
    through: np.ndarray
    x_um: np.ndarray
    y_um: np.ndarray
    misorientation_deg: np.ndarray


def _labelled_map(omap, labels, grain_map, phases):
    planes = map_planes(omap)
    infos = (
        phases
        if isinstance(phases, tuple) and all(isinstance(p, PhaseInfo) for p in phases)
        else phase_infos(phases)
    )
    phase_of = np.asarray(grain_map.grains["phase"])
    grain_phase = np.r_[0, phase_of].astype(np.int64)
    code_of_id = {p.id: p.code for p in infos}
    grain_code = np.array([0] + [code_of_id.get(int(p), 0) for p in phase_of], np.int64)
    valid = np.asarray(omap.valid, dtype=bool).reshape(-1)
    return _LabelledMap(planes, np.asarray(labels), grain_code, grain_phase, infos, valid)


def boundary_edges(
    omap: OrientationMap,
    labels: np.ndarray,
    grain_map: GrainMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
    *,
    own_rows: tuple[int, int],
    row_offset: int = 0,
) -> BoundaryEdges:
    """The edges between grains whose first point lies in rows ``own_rows`` of a band.

    For maps read a band of rows at a time (:mod:`inclination.tiles`): ``omap`` and
    ``labels`` are rows ``row_offset ...`` of the whole map, full width, holding at least
    one row above and below ``own_rows`` where the map has them (the cells round an edge's
    vertices). :func:`concat_edges` then :func:`chain_edges` give
    :func:`boundary_network`'s chains.

    Parameters
    ----------
    omap : OrientationMap
        The band (its row 0 is map row ``row_offset``, an even row on a hexagonal grid).
    labels : ndarray of int, shape of the band
        The whole map's grain labels on the band's rows.
    grain_map : GrainMap
        The whole map's grains (their phases).
    phases : sequence or mapping of Phase
    own_rows : (int, int)
        Band rows [r0, r1) whose edges are returned.
    row_offset : int
        Map row of the band's first row.

    Returns
    -------
    BoundaryEdges

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> from inclination.grains import segment_grains
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((3, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> omap = OrientationMap(quat, np.ones((3, 4), int))
    >>> gm = segment_grains(omap, [cu], min_pixels=1)
    >>> e = boundary_edges(omap, gm.labels, gm, [cu], own_rows=(1, 2))
    >>> e.edge_a.tolist(), e.y_um.tolist()
    ([5], [1.0])
    """
    h, w = np.shape(labels)
    if np.shape(omap.phase) != (h, w):
        raise InputError(
            f"Expected `labels` to have the band's shape {np.shape(omap.phase)}, got {(h, w)}."
        )
    lm = _labelled_map(omap, labels, grain_map, phases)
    shifts = neighbour_shifts(omap.grid, w)
    return _edges_of(omap, lm, shifts, own_rows=own_rows, row_offset=int(row_offset))


def _edges_of(omap, lm: _LabelledMap, shifts, *, own_rows, row_offset):
    grid = lm.planes.grid
    h, w = lm.labels.shape
    labels, labels_flat = lm.labels, lm.labels_flat
    k, shift, m = _grain_edges(labels_flat, shifts, h, w)
    keep = (k >= own_rows[0] * w) & (k < own_rows[1] * w)
    k, shift, m = k[keep], shift[keep], m[keep]
    a, b = k, k + shift
    la, lb = labels_flat[a], labels_flat[b]
    flip = la > lb
    i, j = np.divmod(a, w)
    tail, head = _dual_segments(grid, shift, i, j, w)
    tail, head = np.where(flip, head, tail), np.where(flip, tail, head)
    # The lower grain first in each pair.
    edge_a, edge_b = np.where(flip, b, a), np.where(flip, a, b)
    through = ~_is_junction(grid, labels, head, w)
    angle = _edge_angles(lm, edge_a, edge_b)
    x, y = _edge_midpoints_um(omap, i + row_offset, j, shift, w)
    # Band-local ids to the whole map's: points, and vertices (rows of W + 1 corners, or
    # of W + 2 hexagonal cells with two vertices each).
    point_off = row_offset * w
    vertex_off = row_offset * (w + 1) if grid == "square" else row_offset * (w + 2) * 2
    return BoundaryEdges(
        direction=np.asarray(m, np.int64),
        first=k + point_off,
        edge_a=edge_a + point_off,
        edge_b=edge_b + point_off,
        grain_a=labels_flat[edge_a].astype(np.int64),
        grain_b=labels_flat[edge_b].astype(np.int64),
        tail=tail + vertex_off,
        head=head + vertex_off,
        through=through,
        x_um=np.broadcast_to(x, k.shape).astype(np.float64),
        y_um=np.broadcast_to(y, k.shape).astype(np.float64),
        misorientation_deg=angle,
    )


def concat_edges(parts: Iterable[BoundaryEdges]) -> BoundaryEdges:
    """The edges of several bands as one table, in the order of the whole map.

    Examples
    --------
    >>> z = np.zeros(0, np.int64)
    >>> e = BoundaryEdges(*([z] * 8), np.zeros(0, bool), *([np.zeros(0)] * 3))
    >>> concat_edges([e, e]).edge_a.size
    0
    """
    parts = list(parts)
    names = list(BoundaryEdges.__dataclass_fields__)
    first = np.concatenate([p.first for p in parts])
    direction = np.concatenate([p.direction for p in parts])
    order = np.lexsort((first, direction))
    # Column by column, so that one column's copies are alive at a time, not the table's.
    cols = {"first": first[order], "direction": direction[order]}
    del first, direction
    for n in names:
        if n not in cols:
            cols[n] = np.concatenate([getattr(p, n) for p in parts])[order]
    return BoundaryEdges(**cols)


def chain_edges(edges: BoundaryEdges, grain_map: GrainMap) -> BoundaryNetwork:
    """Chains of the edges of a whole map (:func:`boundary_network`'s grain network).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> from inclination.grains import segment_grains
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((3, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> omap = OrientationMap(quat, np.ones((3, 4), int))
    >>> gm = segment_grains(omap, [cu], min_pixels=1)
    >>> bands = [boundary_edges(omap, gm.labels, gm, [cu], own_rows=(r, r + 1))
    ...          for r in range(3)]
    >>> chain_edges(concat_edges(bands), gm).n_edges.tolist()
    [3]
    """
    grain_phase = np.r_[0, np.asarray(grain_map.grains["phase"])].astype(np.int64)
    return _chains_of(edges, grain_phase)


def _chains_of(edges: BoundaryEdges, grain_phase) -> BoundaryNetwork:
    tail, head = edges.tail, edges.head
    if tail.size == 0:
        return _empty_network("grain")
    order = np.argsort(tail, kind="stable")
    tail_sorted = tail[order]
    nxt = np.full(tail.size, -1, np.int64)
    idx = np.flatnonzero(edges.through)
    pos = np.searchsorted(tail_sorted, head[idx])
    pos = np.minimum(pos, tail_sorted.size - 1)
    found = tail_sorted[pos] == head[idx]
    nxt[idx[found]] = order[pos[found]]
    parts = _assemble(
        edges.edge_a,
        edges.edge_b,
        _order_chains(nxt),
        grain_a=edges.grain_a,
        grain_b=edges.grain_b,
        mid=(edges.x_um, edges.y_um),
        angle=edges.misorientation_deg,
    )
    return _finish(parts, grain_phase, "grain")


def _with_low(net, low_net):
    fields = {f: getattr(net, f) for f in net.__dataclass_fields__}
    fields["low_angle"] = low_net
    return BoundaryNetwork(**fields)


def _edge_angles(lm: _LabelledMap, a, b):
    """Disorientation (degrees) of each edge's point pair; NaN across phases or no data."""
    q, labels_flat, grain_code, grain_phase = (
        lm.planes.quat,
        lm.labels_flat,
        lm.grain_code,
        lm.grain_phase,
    )
    infos, valid = lm.infos, lm.valid
    ga, gb = labels_flat[a], labels_flat[b]
    same = (grain_phase[ga] == grain_phase[gb]) & valid[a] & valid[b]
    if same.all():
        m = _pair_cos_half(q, a, b, grain_code[ga], infos).astype(np.float64)
        return np.rad2deg(2 * np.arccos(np.minimum(m, 1.0)))
    angle = np.full(a.size, np.nan)
    sel = np.flatnonzero(same)
    if sel.size:
        m = _pair_cos_half(q, a[sel], b[sel], grain_code[ga[sel]], infos)
        angle[sel] = np.rad2deg(2 * np.arccos(np.minimum(m, 1.0)))
    return angle


def _low_angle_network(omap, lm: _LabelledMap, shifts, *, low_deg, high_deg):
    """The sub-grain boundaries: chains of edges inside one grain, [low_deg, high_deg)."""
    labels, labels_flat, valid = lm.labels, lm.labels_flat, lm.valid
    w = labels.shape[1]
    k, shift, angle = _low_angle_edges(lm, shifts, low_deg=low_deg, high_deg=high_deg)
    keep = valid[k] & valid[k + shift]
    k, shift, angle = k[keep], shift[keep], angle[keep]
    if k.size == 0:
        return _empty_network("low_angle")
    a, b = k, k + shift
    i, j = np.divmod(a, w)
    tail, head = _dual_segments(omap.grid, shift, i, j, w)
    nxt_state = _undirected_successors(omap.grid, labels, tail, head, w)
    mid = _edge_midpoints_um(omap, i, j, shift, w)
    parts = _assemble(
        a,
        b,
        _pick_direction(nxt_state, a.size),
        grain_a=labels_flat[a],
        grain_b=labels_flat[b],
        mid=mid,
        angle=angle,
    )
    return _finish(parts, lm.grain_phase, "low_angle")


def _undirected_successors(grid, labels, tail, head, w):
    """Successor of each state (segment e, entered at end x) = 2e + x, or -1.

    Low-angle segments have the same grain on both sides, so no side rule orients them;
    the walk is set up in both directions and one is chosen afterwards.
    """
    n = tail.size
    vert = np.r_[tail, head]
    order = np.argsort(vert, kind="stable")
    vs = vert[order]
    new = np.r_[True, vs[1:] != vs[:-1]]
    group = np.cumsum(new) - 1
    size = np.bincount(group)
    first = np.flatnonzero(new)
    # A vertex continues a chain when exactly two low-angle segments meet there and the
    # cells round it all lie in one grain (no grain boundary, edge or gap touches it).
    cells = [_label_at(labels, r, c) for r, c in _vertex_cells(grid, vs[first], w)]
    one_grain = np.all([c == cells[0] for c in cells], axis=0) & (cells[0] > 0)
    through = (size == 2) & one_grain
    mate = np.full(2 * n, -1, np.int64)  # half-edge h = e + n·x  (x = 0 tail, 1 head)
    g2 = np.flatnonzero(through)
    h1, h2 = order[first[g2]], order[first[g2] + 1]
    mate[h1], mate[h2] = h2, h1
    seg = np.arange(n)
    # State 2e + x: in segment e, entered through end x, so leaving through end 1 - x.
    nxt = np.full(2 * n, -1, np.int64)
    for x in (0, 1):
        out_half = seg + n * (1 - x)
        m = mate[out_half]
        ok = m >= 0
        y, f = np.divmod(m[ok], n)
        nxt[2 * seg[ok] + x] = 2 * f + y
    return nxt


def _pick_direction(nxt_state, n) -> _Chains:
    """Chains of segments from the two-way state lists: keep one direction per chain."""
    both = _order_chains(nxt_state)
    chain_s, pos_s, len_s, closed_s = both.chain, both.position, both.length, both.closed
    n_chains = len_s.size
    first_state = np.zeros(n_chains, np.int64)
    starts = np.flatnonzero(pos_s == 0)
    first_state[chain_s[starts]] = starts
    # The two states of a segment lie in the two directions of its chain; keep the
    # direction whose first state has the lower index.
    s0 = 2 * np.arange(n)
    c0, c1 = chain_s[s0], chain_s[s0 + 1]
    use0 = first_state[c0] < first_state[c1]
    state = np.where(use0, s0, s0 + 1)
    kept = np.unique(chain_s[state])
    renum = np.full(n_chains, -1, np.int64)
    renum[kept] = np.arange(kept.size)
    return _Chains(renum[chain_s[state]], pos_s[state], len_s[kept], closed_s[kept])
