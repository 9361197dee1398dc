"""Grains of a tiled map: one pass over the tiles, joins on their edge strips (§1).

Owns :func:`segment_grains_tiled`, the second step of :mod:`inclination.tiles` (see there
for the method): the same :class:`~inclination.grains.GrainMap` the whole map gives.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..crystal import symmetry
from ..crystal.rotations import quat_multiply
from ..errors import InputError
from ..grains import (
    GrainMap,
    check_grain_options,
    isolated_points,
    link_labels,
    nearest_equivalent,
    nearest_operation,
    strongest_neighbours,
)
from ..links import (
    disorientation_cos_half,
    forward_pair_mask,
    map_planes,
    neighbour_shifts,
    phase_infos,
)
from ..maps import OrientationMap
from .reading import TiledMap, on_tiles

if TYPE_CHECKING:
    from ..crystal.phases import Phase

__all__ = ["segment_grains_tiled"]

# Below this angle to a grain's reference the identity is the nearest symmetric
# equivalent for every Laue class (the smallest non-identity proper rotation turns 60°);
# the same bound as the whole-map statistics.
_IDENTITY_SAFE_RAD = np.deg2rad(30.0)


@dataclass(frozen=True)
class _Strip:
    """One edge of a tile, kept for the joins across tile borders (a few rows or columns)."""

    quat: np.ndarray  # (4, a, b) float32 planes
    phase: np.ndarray  # (a, b) int32
    valid: np.ndarray  # (a, b) bool
    labels: np.ndarray  # (a, b) int64, the tile's own labels (0 = none)


@dataclass(frozen=True)
class _TilePass:
    """What the one pass over a tile leaves besides its labels (written into the image).

    Row k of every array is the tile's label k + 1. Sums of row and column indices are
    whole numbers held in float64 (exact below 2^53).
    """

    n_labels: int
    first: np.ndarray  # (n,) int64 flat index (of the map) of the label's first point
    code: np.ndarray  # (n,) uint8 phase code there
    ref: np.ndarray  # (n, 4) float32 quaternion there: the label's reference
    area: np.ndarray  # (n,) int64 points
    sum_i: np.ndarray  # (n,) float64 sum of the points' map rows
    sum_j: np.ndarray  # (n,) float64 sum of their map columns
    sum_odd: np.ndarray  # (n,) float64 points on odd rows (the hexagonal shift, §1)
    touches: np.ndarray  # (n,) bool a point on the map's edge
    quat_sum: np.ndarray  # (n, 4) float64 sum of the points aligned to ``ref``
    min_dot: np.ndarray  # (n,) float64 smallest dot product of an aligned point with ``ref``
    strips: dict  # "top", "bottom" (two rows), "left", "right" -> _Strip


@dataclass(frozen=True)
class _Runs:
    """Runs of equal labels along the rows of a flat (H·W,) label image."""

    start: np.ndarray  # (R,) int64 flat index of the run's first point
    length: np.ndarray  # (R,) int64
    label: np.ndarray  # (R,) int64


def _label_runs(flat: np.ndarray, w: int) -> _Runs:
    """Runs of equal values of ``flat`` (an image W wide), none across a row's end.

    The statistics are then sums over runs (a few per grain and row), as the whole map
    takes them (:mod:`inclination.grains`), rather than per point.
    """
    n = flat.size
    begins = np.empty(n, bool)
    if n:
        begins[0] = True
        np.not_equal(flat[1:], flat[:-1], out=begins[1:])
        begins[::w] = True
    start = np.flatnonzero(begins)
    length = np.diff(np.r_[start, n])
    return _Runs(start, length, flat[start].astype(np.int64))


def _dot_columns(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Dot products of the columns of two (4, n) float32 arrays, in float32."""
    out = a[0] * b[0]
    tmp = np.empty_like(out)
    for c in (1, 2, 3):
        np.multiply(a[c], b[c], out=tmp)
        out += tmp
    return out


def _tile_pass(tmap, rows, cols, labels, *, phases, threshold_deg, code_of, ops, cos_safe):
    """Read one tile once: its components (written into ``labels``) and their sums.

    The components come from :func:`inclination.grains.link_labels` on the tile alone;
    the links across its borders are tested afterwards on the strips kept here
    (:func:`_join_tiles`). Each component's quaternions are summed aligned to its first
    point (the symmetric equivalent nearest it, as the whole map aligns a grain's points
    to the grain's first point), to be turned onto the grain's first point once the
    components are joined (:func:`_grain_sums`).
    """
    h, w = tmap.shape
    sub = tmap.read(rows, cols)
    lab = link_labels(sub, phases, threshold_deg=threshold_deg)
    labels[rows, cols] = lab
    th, tw = lab.shape
    flat = lab.reshape(-1)
    n = int(flat.max()) if flat.size else 0
    m = n + 1
    # link_labels numbers the components in raster order of their first point: component
    # k first appears where the labels exceed every earlier one.
    seen = np.maximum.accumulate(flat)
    idx = np.flatnonzero(flat > np.r_[np.int32(0), seen[:-1]])
    q = map_planes(sub).quat
    phase = np.asarray(sub.phase)
    valid = np.asarray(sub.valid)
    i0, j0 = np.divmod(idx, tw)
    ref = np.zeros((4, m), np.float32)
    ref[:, 1:] = q[:, idx]
    runs = _label_runs(flat, tw)
    run_i = runs.start // tw + rows.start
    run_j = runs.start % tw + cols.start
    length = runs.length

    def per_label(weights):
        return np.bincount(runs.label, weights=weights, minlength=m)

    area = per_label(length).astype(np.int64)
    sum_i = per_label(length * run_i)
    # Columns j0 .. j0 + len - 1 of a run: len·j0 + len·(len - 1)/2.
    sum_j = per_label(length * run_j + 0.5 * length * (length - 1))
    sum_odd = per_label(length * (run_i % 2)) if tmap.grid == "hexagonal" else np.zeros(m)
    on_edge = (run_i == 0) | (run_i == h - 1) | (run_j == 0) | (run_j + length - 1 == w - 1)
    touches = per_label(on_edge) > 0
    # Aligned to each component's reference: the whole map's rule (sign toward the
    # reference; the full symmetry search beyond 30°).
    rg = np.repeat(ref[:, runs.label], length, axis=1)
    d = _dot_columns(q, rg)
    inside = flat > 0
    sign = np.copysign(np.float32(1.0), d)
    sign *= inside
    aligned = q * sign
    # The aligned points' dot products with the reference: |d|, or the nearest
    # equivalent's beyond 30°.
    dots = np.abs(d)
    far = np.flatnonzero((dots < cos_safe) & inside)
    if far.size:
        code_pad = np.r_[np.uint8(0), code_of[phase.reshape(-1)[idx]]]
        turned = _aligned(q[:, far].T, rg[:, far].T, flat[far], code_pad, ops, cos_safe)
        aligned[:, far] = turned.T
        dots[far] = np.einsum("nc,nc->n", turned, rg[:, far].T)
    # Row by row: a float64 reduceat along axis 1 of the (4, n) block is twice as slow.
    quat_sum = np.stack(
        [per_label(np.add.reduceat(a, runs.start, dtype=np.float64)) for a in aligned], axis=1
    )
    min_dot = np.ones(m)
    np.minimum.at(min_dot, runs.label, np.minimum.reduceat(dots, runs.start))
    planes = q.reshape(4, th, tw)

    def strip(r, c):
        return _Strip(
            np.ascontiguousarray(planes[:, r, c]),
            np.ascontiguousarray(phase[r, c], dtype=np.int32),
            valid[r, c].copy(),
            lab[r, c].astype(np.int64),
        )

    everything = slice(0, None)
    return _TilePass(
        n_labels=n,
        first=((rows.start + i0) * w + cols.start + j0).astype(np.int64),
        code=code_of[phase.reshape(-1)[idx]],
        ref=np.ascontiguousarray(ref[:, 1:].T),
        area=area[1:].astype(np.int64),
        sum_i=sum_i[1:],
        sum_j=sum_j[1:],
        sum_odd=sum_odd[1:],
        touches=touches[1:],
        quat_sum=quat_sum[1:],
        min_dot=min_dot[1:],
        strips={
            "top": strip(slice(0, 1), everything),
            "bottom": strip(slice(max(th - 2, 0), th), everything),
            "left": strip(everything, slice(0, 1)),
            "right": strip(everything, slice(tw - 1, tw)),
        },
    )


def _tile_grid(tmap: TiledMap) -> tuple[int, int]:
    """(rows, columns) of tiles, in the order of :meth:`TiledMap.tiles`."""
    (h, w), (tr, tc) = tmap.shape, tmap.tile_px
    return -(-h // tr), -(-w // tc)


def _join_tiles(tmap, results, offsets, *, phases, threshold_deg) -> np.ndarray:
    """Component of every provisional label (0 a dummy of its own), across tile borders.

    Every neighbour link that crosses a tile border lies in one of two kinds of strip:
    three full-width rows round a border between rows of tiles (the two rows above it,
    so that the strip starts on an even row and keeps the grid's row parity, §1; and
    the row below), and two columns round a border between tiles of one row of tiles
    (the tiles start on even rows). Each strip is labelled by the same link test
    (:func:`inclination.grains.link_labels`); a strip's component joins the provisional
    labels of its points, by connected components over the (label, strip component)
    pairs, as a union-find would.
    """
    n_rows, n_cols = _tile_grid(tmap)
    grid = [results[r * n_cols : (r + 1) * n_cols] for r in range(n_rows)]
    offs = [offsets[r * n_cols : (r + 1) * n_cols] for r in range(n_rows)]

    def provisional(strip, offset):
        lab = strip.labels
        return np.where(lab > 0, lab + offset, 0)

    def pairs(strips, offsets_, axis):
        quat = np.concatenate([s.quat for s in strips], axis=axis + 1)
        omap = OrientationMap(
            np.moveaxis(quat, 0, -1),
            np.concatenate([s.phase for s in strips], axis=axis),
            valid=np.concatenate([s.valid for s in strips], axis=axis),
            grid=tmap.grid,
        )
        prov = np.concatenate(
            [provisional(s, o) for s, o in zip(strips, offsets_, strict=True)], axis=axis
        )
        comp = link_labels(omap, phases, threshold_deg=threshold_deg)
        on = comp > 0
        return prov[on], comp[on]

    n_prov = int(offsets[-1])
    a_parts, b_parts = [], []
    node = n_prov + 1
    # The strips of one kind go to the link test together, side by side, each followed by
    # a row or column of points without data, across which nothing links (every call
    # builds a map record: one per row of tiles, not one per border).
    if n_rows > 1:
        horizontal = []
        for r in range(1, n_rows):
            # The strips of one row of tiles concatenate along the columns, then the rows
            # above and below the border along the rows; four rows a border keep every
            # strip on an even first row.
            horizontal.append(
                _concat_strips([t.strips["bottom"] for t in grid[r - 1]], offs[r - 1], axis=1)
            )
            horizontal.append(_concat_strips([t.strips["top"] for t in grid[r]], offs[r], axis=1))
            horizontal.append(_gap((1, tmap.shape[1])))
        a, b = pairs(horizontal, [0] * len(horizontal), axis=0)
        a_parts.append(a)
        b_parts.append(b + (node - 1))
        node += int(b.max()) if b.size else 0
    for r in range(n_rows):
        if n_cols < 2:
            break
        vertical, vertical_offsets = [], []
        for c in range(1, n_cols):
            left, right = grid[r][c - 1].strips["right"], grid[r][c].strips["left"]
            vertical += [left, right, _gap((left.labels.shape[0], 1))]
            vertical_offsets += [offs[r][c - 1], offs[r][c], 0]
        a, b = pairs(vertical, vertical_offsets, axis=1)
        a_parts.append(a)
        b_parts.append(b + (node - 1))
        node += int(b.max()) if b.size else 0
    a = np.concatenate(a_parts) if a_parts else np.zeros(0, np.int64)
    b = np.concatenate(b_parts) if b_parts else np.zeros(0, np.int64)
    graph = coo_matrix((np.ones(a.size, np.int8), (a, b)), shape=(node, node)).tocsr()
    _, comp = connected_components(graph, directed=False)
    return comp[: n_prov + 1]


def _gap(shape) -> _Strip:
    """A strip of points without data (identity, phase 0): no link crosses it."""
    quat = np.zeros((4, *shape), np.float32)
    quat[0] = 1.0
    return _Strip(quat, np.zeros(shape, np.int32), np.zeros(shape, bool), np.zeros(shape, np.int64))


def _concat_strips(strips, offsets, *, axis) -> _Strip:
    """Strips of tiles side by side as one, their labels made provisional (tile offsets)."""
    return _Strip(
        np.concatenate([s.quat for s in strips], axis=axis + 1),
        np.concatenate([s.phase for s in strips], axis=axis),
        np.concatenate([s.valid for s in strips], axis=axis),
        np.concatenate(
            [np.where(s.labels > 0, s.labels + o, 0) for s, o in zip(strips, offsets, strict=True)],
            axis=axis,
        ),
    )


def _first_per_group(group: np.ndarray, first: np.ndarray, n_groups: int) -> np.ndarray:
    """Smallest ``first`` (>= 0) in each group; -1 for a group with none."""
    big = np.iinfo(np.int64).max
    out = np.full(n_groups, big, np.int64)
    ok = first >= 0
    np.minimum.at(out, group[ok], first[ok])
    out[out == big] = -1
    return out


def _relabel(labels: np.ndarray, lut: np.ndarray) -> None:
    """``labels[:] = lut[labels]`` in blocks of rows (no second full-size array)."""
    lut = lut.astype(np.int32)
    step = max(1, (1 << 22) // max(labels.shape[1], 1))
    for r in range(0, labels.shape[0], step):
        block = labels[r : r + step]
        block[:] = lut[block]


def _row_bands(h: int, w: int) -> Iterator[tuple[int, int]]:
    """[r0, r1) bands of about 4 M points, an even number of rows each."""
    rows = max(2, ((1 << 22) // max(w, 1)) & ~1)
    for r0 in range(0, h, rows):
        yield r0, min(r0 + rows, h)


def _grain_adjacency(labels: np.ndarray, grid: str):
    """Neighbour pairs between different grains: (a, b, count), a < b, undirected."""
    h, w = labels.shape
    keys = []
    n = np.int64(labels.max()) + 1
    for r0, r1 in _row_bands(h, w):
        # The band and the row below it: every forward pair from the band's rows.
        block = labels[r0 : min(r1 + 1, h)]
        flat = block.reshape(-1)
        bh = block.shape[0]
        for m, (shift, parity) in enumerate(neighbour_shifts(grid, w)):
            stop = min((r1 - r0) * w, flat.size - shift)
            if stop <= 0:
                continue
            la, lb = flat[:stop], flat[shift : stop + shift]
            k = np.flatnonzero((la != lb) & (la > 0) & (lb > 0))
            # Parity of the band's rows is the map's: bands start on even rows.
            k = k[forward_pair_mask(k, shift, parity, (bh, w), horizontal=m == 0)]
            lo = np.minimum(la[k], lb[k]).astype(np.int64)
            hi = np.maximum(la[k], lb[k]).astype(np.int64)
            u, c = np.unique(lo * n + hi, return_counts=True)
            keys.append((u, c))
    if not keys:
        z = np.zeros(0, np.int64)
        return z, z, z
    u = np.concatenate([k for k, _ in keys])
    c = np.concatenate([c for _, c in keys])
    uu, inv = np.unique(u, return_inverse=True)
    counts = np.bincount(inv, weights=c).astype(np.int64)
    a, b = np.divmod(uu, n)
    return a, b, counts


def _dissolve_small(area, code, adjacency, *, min_pixels, mode):
    """Grain-level clean-up: the rule of :func:`inclination.grains.segment_grains`.

    A small grain joins the neighbouring grain of its phase, not small itself, with which
    it shares the most neighbour pairs (ties to the lower id), in rounds until none can
    move; the rest lose their grain. Returns ``(target, dissolved, merged, unindexed)``:
    ``target[g]`` is the grain g's points end in (0 = none).
    """
    n = area.size
    target = np.arange(n)
    small = area < min_pixels
    small[0] = False
    dissolved = int(small.sum())
    merged = 0
    a, b, c = adjacency
    # Both directions of every pair: "own" is the small side.
    own = np.r_[a, b]
    other = np.r_[b, a]
    count = np.r_[c, c]
    if mode == "merge":
        while True:
            sel = small[own]
            g_own, g_other = own[sel], target[other[sel]]
            ok = (g_other > 0) & ~small[g_other] & (code[g_other] == code[g_own])
            if not ok.any():
                break
            ga, gb = strongest_neighbours(g_own[ok], g_other[ok], count[sel][ok], n)
            target[ga] = gb
            merged += int(area[ga].sum())
            small[ga] = False
    left = small
    unindexed = int(area[left].sum())
    target[left] = 0
    return target, dissolved, merged, unindexed


def segment_grains_tiled(
    tmap: TiledMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
    *,
    threshold_deg: float = 5.0,
    min_pixels: int = 8,
    small_grains: str = "merge",
    fill_isolated: bool = False,
    progress: Callable[[float], None] | None = None,
) -> GrainMap:
    """Segment a tiled map into grains: :func:`inclination.grains.segment_grains`, by tiles.

    Parameters
    ----------
    tmap : TiledMap
    phases, threshold_deg, min_pixels, small_grains, fill_isolated, progress
        As :func:`inclination.grains.segment_grains`.

    Returns
    -------
    GrainMap
        The grains the whole map gives: the same label image and ids (raster order of each
        grain's first point), the same clean-up counts, and statistics equal to float
        rounding (sums taken tile by tile).

    Raises
    ------
    SettingError, InputError, TypeError
        As :func:`inclination.grains.segment_grains`.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((4, 6, 4)); quat[..., 0] = 1.0
    >>> quat[1:3, 1:5] = [0.92388, 0.0, 0.0, 0.382683]  # a 45° grain across four tiles
    >>> t = TiledMap.from_orientation_map(OrientationMap(quat, np.ones((4, 6), int)),
    ...                                   tile_px=2)
    >>> gm = segment_grains_tiled(t, [cu], min_pixels=1)
    >>> gm.labels.tolist(), gm.grains["area_px"].tolist()
    ([[1, 1, 1, 1, 1, 1], [1, 2, 2, 2, 2, 1], [1, 2, 2, 2, 2, 1], [1, 1, 1, 1, 1, 1]], [16, 8])
    """
    infos = phase_infos(phases)
    check_grain_options(min_pixels, small_grains, progress)
    if not isinstance(tmap, TiledMap):
        raise TypeError(f"Expected `tmap` to be a TiledMap, got {type(tmap).__name__}.")
    h, w = tmap.shape
    tiles = list(tmap.tiles())
    labels = np.zeros((h, w), np.int32)
    code_of = np.zeros(max(p.id for p in infos) + 1, np.uint8)
    for p in infos:
        code_of[p.id] = p.code
    ops = {p.code: symmetry.proper_rotations(p.laue, setting=p.setting) for p in infos}
    cos_safe = np.float32(np.cos(_IDENTITY_SAFE_RAD / 2))
    # One read of each tile: its labels, the sums of its components, the strips of its
    # edges; dask's threaded scheduler runs the tiles on the machine's cores (numpy's
    # trigonometry and the link kernels release the GIL), a few tiles in memory at a time.
    results = on_tiles(
        lambda r, c: _tile_pass(
            tmap,
            r,
            c,
            labels,
            phases=phases,
            threshold_deg=threshold_deg,
            code_of=code_of,
            ops=ops,
            cos_safe=cos_safe,
        ),
        tiles,
        progress=None if progress is None else (lambda f: progress(0.6 * f)),
    )
    offsets = np.r_[0, np.cumsum([r.n_labels for r in results])].astype(np.int64)
    prov = _provisional_records(results)
    comp = _join_tiles(tmap, results, offsets, phases=phases, threshold_deg=threshold_deg)
    del results
    # The components that hold points, numbered in raster order of their first point.
    n_comp = int(comp.max()) + 1
    comp_first = _first_per_group(comp, prov.first, n_comp)
    alive = np.flatnonzero(comp_first >= 0)
    if alive.size == 0:
        raise InputError("Expected the map to hold at least one valid indexed point, got none.")
    order = alive[np.argsort(comp_first[alive], kind="stable")]
    grain_of_comp = np.zeros(n_comp, np.int64)
    grain_of_comp[order] = np.arange(1, order.size + 1)
    lut = grain_of_comp[comp]
    lut[0] = 0
    # Tile labels to grain ids, tile by tile (each tile's labels are its own 1..n).
    for t, (rows, cols) in enumerate(tiles):
        tile_lut = np.r_[0, lut[offsets[t] + 1 : offsets[t + 1] + 1]].astype(np.int32)
        block = labels[rows, cols]
        block[:] = tile_lut[block]
    n_grains = int(order.size)
    # The record of each grain's first point: the provisional label that holds it.
    holder = np.zeros(n_grains + 1, np.int64)
    at_first = np.flatnonzero((prov.first >= 0) & (prov.first == comp_first[comp]))
    holder[lut[at_first]] = at_first
    code = prov.code[holder]
    code[0] = 0
    first = np.full(n_grains + 1, -1, np.int64)
    first[1:] = prov.first[holder[1:]]

    area = np.bincount(lut, weights=prov.area, minlength=n_grains + 1).astype(np.int64)
    dissolved = merged = unindexed = 0
    target = np.arange(n_grains + 1)
    if min_pixels > 1:
        target, dissolved, merged, unindexed = _dissolve_small(
            area,
            code,
            _grain_adjacency(labels, tmap.grid),
            min_pixels=min_pixels,
            mode=small_grains,
        )
    # Survivors renumbered in raster order of their first point (merged points count).
    survivors = np.unique(target[target > 0])
    first_new = _first_per_group(target, first, n_grains + 1)
    renum = np.zeros(n_grains + 1, np.int64)
    renum[survivors[np.argsort(first_new[survivors], kind="stable")]] = np.arange(
        1, survivors.size + 1
    )
    final = renum[target]
    # A grain keeps the statistics of the one original grain that was not merged into it.
    own_of = np.zeros(survivors.size + 1, np.int64)
    kept = np.flatnonzero((target == np.arange(n_grains + 1)) & (final > 0))
    own_of[final[kept]] = kept
    # Per point "own" = its original grain was not merged: encode it in the label image as
    # the sign, then turn the image into the final labels.
    point_own = (target == np.arange(n_grains + 1)) & (target > 0)
    n_final = int(survivors.size)
    own_labels = np.where(point_own, final, -final).astype(np.int64)
    _relabel(labels, own_labels)

    filled_k = np.zeros(0, np.int64)
    filled_g = np.zeros(0, np.int64)
    if fill_isolated:
        filled_k, filled_g = _isolated_in_bands(labels, tmap.grid)
    sums, unsafe = _grain_sums(prov, lut, holder, code, ops, cos_safe)
    final_of_prov = final[lut]
    final_of_prov[0] = 0
    table = _grain_table(
        tmap,
        labels,
        prov=prov,
        final_of_prov=final_of_prov,
        sums=sums[own_of],
        unsafe=unsafe[own_of] & (own_of > 0),
        ref=prov.ref[holder[own_of]],
        phases=infos,
        grain_code=code[own_of],
        n_grains=n_final,
        filled=(filled_k, filled_g),
        progress=progress,
    )
    np.abs(labels, out=labels)
    if filled_k.size:
        labels.reshape(-1)[filled_k] = filled_g
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
        threshold_deg=float(threshold_deg),
        connectivity=4 if tmap.grid == "square" else 6,
    )


@dataclass(frozen=True)
class _Provisional:
    """The tiles' records of every provisional label, index 0 a dummy (see _TilePass)."""

    tile: np.ndarray  # (n + 1,) int64 tile of the label (-1 for the dummy)
    first: np.ndarray  # (n + 1,) int64; -1 for the dummy
    code: np.ndarray
    ref: np.ndarray  # (n + 1, 4) float32
    area: np.ndarray
    sum_i: np.ndarray
    sum_j: np.ndarray
    sum_odd: np.ndarray
    touches: np.ndarray
    quat_sum: np.ndarray  # (n + 1, 4) float64
    min_dot: np.ndarray


def _provisional_records(results) -> _Provisional:
    def cat(name, dummy):
        return np.concatenate([dummy] + [getattr(r, name) for r in results])

    return _Provisional(
        tile=np.r_[-1, np.repeat(np.arange(len(results)), [r.n_labels for r in results])],
        first=cat("first", np.full(1, -1, np.int64)),
        code=cat("code", np.zeros(1, np.uint8)),
        ref=cat("ref", np.zeros((1, 4), np.float32)),
        area=cat("area", np.zeros(1, np.int64)),
        sum_i=cat("sum_i", np.zeros(1)),
        sum_j=cat("sum_j", np.zeros(1)),
        sum_odd=cat("sum_odd", np.zeros(1)),
        touches=cat("touches", np.zeros(1, bool)),
        quat_sum=cat("quat_sum", np.zeros((1, 4))),
        min_dot=cat("min_dot", np.ones(1)),
    )


#: A component's sum turned onto its grain's reference is the grain's per-point sum when
#: every point ends within this angle of the reference: below 30° the nearest symmetric
#: equivalent is the only one there (the smallest non-identity proper rotation turns 60°);
#: 1° of margin for float rounding.
_TURNED_SUM_SAFE_RAD = np.deg2rad(29.0)


def _nearest_ops(q, ref, codes, ops, cos_safe) -> np.ndarray:
    """The signed symmetry operations s (n, 4) with s ⊗ q the equivalent nearest ``ref``.

    ``q`` and ``ref`` (n, 4); the rule of :func:`_aligned`, as the operation it applies.
    """
    q64 = np.asarray(q, np.float64)
    r64 = np.asarray(ref, np.float64)
    d = np.einsum("nc,nc->n", q64, r64)
    out = np.zeros((q64.shape[0], 4))
    out[:, 0] = np.where(d < 0, -1.0, 1.0)
    far = np.flatnonzero(np.abs(d) < cos_safe)
    for c, op in ops.items():
        sel = far[codes[far] == c]
        if sel.size == 0:
            continue
        out[sel] = nearest_operation(q64[sel], r64[sel], op)
    return out


def _grain_sums(prov: _Provisional, lut, holder, code, ops, cos_safe):
    """Aligned quaternion sums of each grain (before clean-up), from its components' sums.

    A component's points were aligned to its own first point; the symmetry operation that
    takes that point nearest the grain's first point takes them all there, if each ends
    within 30° of it (bounded by the component's spread about its point plus that point's
    angle to the grain's). Returns ``(sums (G + 1, 4), unsafe (G + 1,) bool)``: a grain
    with a component past that bound gets its sum from its points instead
    (:func:`_grain_table`).
    """
    m = holder.size
    p = np.flatnonzero(lut > 0)
    g = lut[p]
    ref_g = prov.ref[holder[g]]
    op = _nearest_ops(prov.ref[p], ref_g, code[g], ops, cos_safe)
    turned = quat_multiply(op, prov.quat_sum[p])
    sums = np.stack([np.bincount(g, weights=turned[:, c], minlength=m) for c in range(4)], axis=1)
    ref_turned = quat_multiply(op, prov.ref[p].astype(np.float64))
    phi = 2.0 * np.arccos(np.clip(np.einsum("nc,nc->n", ref_turned, ref_g), -1.0, 1.0))
    theta = 2.0 * np.arccos(np.clip(prov.min_dot[p], -1.0, 1.0))
    beyond = (theta + phi >= _TURNED_SUM_SAFE_RAD) & (p != holder[g])
    unsafe = np.bincount(g[beyond], minlength=m) > 0
    return sums, unsafe


def _isolated_in_bands(labels: np.ndarray, grid: str):
    """:func:`inclination.grains.isolated_points` band by band (a halo row each side)."""
    h, w = labels.shape
    ks, gs = [], []
    for r0, r1 in _row_bands(h, w):
        lo, hi = max(r0 - 2, 0), min(r1 + 1, h)
        # Even first row: the band's row parity is the map's (§1).
        k, g = isolated_points(np.abs(labels[lo:hi]), grid)
        i = k // w + lo
        keep = (i >= r0) & (i < r1) & (i > 0) & (i < h - 1)
        ks.append(k[keep] + lo * w)
        gs.append(g[keep].astype(np.int64))
    return np.concatenate(ks), np.concatenate(gs)


def _grain_table(
    tmap,
    labels,
    *,
    prov,
    final_of_prov,
    sums,
    unsafe,
    ref,
    phases,
    grain_code,
    n_grains,
    filled,
    progress,
):
    """The grain table (:data:`inclination.grains.GRAIN_COLUMNS`) from sums over tiles.

    Area, centroid and edge contact are the sums of the provisional labels each final
    grain took (``final_of_prov``) plus the filled points; ``sums`` (G + 1, 4) the aligned
    quaternion sums of each grain's own points, recomputed from the points for the
    ``unsafe`` grains (:func:`_grain_sums`). ``labels`` holds +g at points that count in
    g's orientation statistics and -g at points merged into g; ``ref`` (G + 1, 4) each
    grain's first own point's quaternion. The spread about the mean is one more read of
    each tile.
    """
    import threading

    h, w = tmap.shape
    m = n_grains + 1
    infos = phases
    ops = {p.code: symmetry.proper_rotations(p.laue, setting=p.setting) for p in infos}
    info_of = {p.code: p for p in infos}
    step_x, pitch = float(tmap.step_x_um), float(tmap.row_pitch_um)
    cos_safe = np.float32(np.cos(_IDENTITY_SAFE_RAD / 2))
    tiles = list(tmap.tiles())

    def per_grain(values):
        return np.bincount(final_of_prov, weights=values, minlength=m)

    area = per_grain(prov.area)
    sum_i, sum_j, sum_odd = per_grain(prov.sum_i), per_grain(prov.sum_j), per_grain(prov.sum_odd)
    touches = per_grain(prov.touches) > 0
    filled_k, filled_g = filled
    if filled_k.size:
        fi, fj = np.divmod(filled_k, w)
        area += np.bincount(filled_g, minlength=m)
        sum_i += np.bincount(filled_g, weights=fi, minlength=m)
        sum_j += np.bincount(filled_g, weights=fj, minlength=m)
        sum_odd += np.bincount(filled_g, weights=fi % 2, minlength=m)
    sum_x = sum_j * step_x
    if tmap.grid == "hexagonal":
        sum_x += sum_odd * (0.5 * step_x)
    sum_y = sum_i * pitch
    ref32 = np.asarray(ref, np.float32)
    if unsafe.any():
        # The points of the grains whose components could not be turned as a whole.
        sums = np.array(sums, copy=True)
        sums[unsafe] = 0.0
        hit = np.unique(prov.tile[(final_of_prov > 0) & unsafe[final_of_prov]])
        for t in hit.tolist():
            rows, cols = tiles[t]
            lab = labels[rows, cols].reshape(-1)
            sel = np.flatnonzero(lab > 0)
            sel = sel[unsafe[lab[sel]]]
            g = lab[sel].astype(np.int64)
            q = map_planes(tmap.read(rows, cols)).quat[:, sel].T
            aligned = _aligned(q, ref32[g], g, grain_code, ops, cos_safe)
            for c in range(4):
                sums[:, c] += np.bincount(g, weights=aligned[:, c], minlength=m)
    norm = np.linalg.norm(sums, axis=1)
    mean = np.zeros_like(sums)
    mean[:, 0] = 1.0
    ok = norm > 0
    mean[ok] = sums[ok] / norm[ok, None]
    mean[mean[:, 0] < 0] *= -1
    mean32 = np.ascontiguousarray(mean.T, dtype=np.float32)
    # The spread about the mean (the whole-map formula: 4·asin(|q - m| / 2) in the
    # mean's hemisphere, the full symmetry test beyond 30°), one more read of each tile.
    spread_sum = np.zeros(m)
    spread_max = np.zeros(m)
    n_own = np.zeros(m)
    far_chord2 = np.float32(4 * np.sin(_IDENTITY_SAFE_RAD / 4) ** 2)
    lock = threading.Lock()

    def spread(rows, cols):
        lab = labels[rows, cols].reshape(-1)
        runs = _label_runs(lab, cols.stop - cols.start)
        g_run = np.where(runs.label > 0, runs.label, 0)
        if not g_run.any():
            return
        q = map_planes(tmap.read(rows, cols)).quat
        diff = np.repeat(mean32[:, g_run], runs.length, axis=1)
        np.subtract(q, diff, out=diff)
        dn = _dot_columns(diff, diff)
        np.minimum(dn, 4.0 - dn, out=dn)
        np.maximum(dn, np.float32(0.0), out=dn)
        inside = np.repeat(g_run > 0, runs.length)
        far = np.flatnonzero(inside & (dn > far_chord2))
        angle = 4.0 * np.arcsin(np.minimum(np.sqrt(dn) * np.float32(0.5), np.float32(1.0)))
        if far.size:
            gf = g_run[np.searchsorted(runs.start, far, side="right") - 1]
            for c, info in info_of.items():
                pick = grain_code[gf] == c
                sel = far[pick]
                if sel.size:
                    cos_half = disorientation_cos_half(mean[gf[pick]].T, q[:, sel], info)
                    angle[sel] = 2.0 * np.arccos(np.minimum(cos_half, 1.0))
        angle *= inside
        part_sum = np.bincount(
            g_run, weights=np.add.reduceat(angle, runs.start, dtype=np.float64), minlength=m
        )
        part_n = np.bincount(g_run, weights=runs.length * (g_run > 0), minlength=m)
        part_max = np.zeros(m)
        np.maximum.at(part_max, g_run, np.maximum.reduceat(angle, runs.start))
        with lock:
            np.add(spread_sum, part_sum, out=spread_sum)
            np.add(n_own, part_n, out=n_own)
            np.maximum(spread_max, part_max, out=spread_max)

    on_tiles(
        spread, tiles, progress=None if progress is None else (lambda f: progress(0.75 + 0.25 * f))
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        spread_mean = np.where(n_own > 0, spread_sum / np.maximum(n_own, 1), np.nan)
    spread_max = np.where(n_own > 0, spread_max, np.nan)
    mean[n_own == 0] = np.nan
    ids = np.array([p.id for p in infos])
    phase_ids = ids[grain_code[1:].astype(np.int64) - 1] if n_grains else np.zeros(0, int)
    return {
        "grain_id": np.arange(1, m),
        "phase": phase_ids.astype(np.int64),
        "quat": mean[1:],
        "area_px": area[1:].astype(np.int64),
        "area_um2": area[1:] * (step_x * pitch),
        "centroid_x_um": sum_x[1:] / np.maximum(area[1:], 1),
        "centroid_y_um": sum_y[1:] / np.maximum(area[1:], 1),
        "spread_mean_deg": np.rad2deg(spread_mean[1:]),
        "spread_max_deg": np.rad2deg(spread_max[1:]),
        "touches_edge": touches[1:],
    }


def _aligned(q, ref, g, grain_code, ops, cos_safe):
    """Each quaternion (n, 4) as its symmetric equivalent nearest its grain's reference."""
    d = np.einsum("nc,nc->n", q, ref)
    sign = np.copysign(np.float32(1.0), d).astype(np.float32)
    out = (q * sign[:, None]).astype(np.float64)
    far = np.flatnonzero(np.abs(d) < cos_safe)
    if far.size:
        codes = grain_code[g[far]]
        for c, op in ops.items():
            sel = far[codes == c]
            if sel.size == 0:
                continue
            out[sel] = nearest_equivalent(
                q[sel].astype(np.float64), ref[sel].astype(np.float64), op
            )
    return out
