"""Boundaries of a tiled map: edges by bands of rows, chains over the whole map (§1–§2).

Owns :func:`boundary_network_tiled`, the last step of :mod:`inclination.tiles`.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from ..grains import GrainMap
from .reading import TiledMap, on_tiles

if TYPE_CHECKING:
    from ..crystal.phases import Phase
    from ..network import BoundaryNetwork

__all__ = ["boundary_network_tiled"]


def boundary_network_tiled(
    tmap: TiledMap,
    grain_map: GrainMap,
    phases: Iterable[Phase] | Mapping[int, Phase],
) -> BoundaryNetwork:
    """The boundary network of a tiled map: edges by bands of rows, chains over the map.

    Parameters
    ----------
    tmap : TiledMap
    grain_map : GrainMap
        From :func:`segment_grains_tiled` on ``tmap`` (its labels are held whole).
    phases : sequence or mapping of Phase

    Returns
    -------
    BoundaryNetwork
        The network :func:`inclination.network.boundary_network` gives on the whole map
        (same chains in the same order; chain misorientations to float rounding). No
        sub-grain network on this path.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> from inclination.maps import OrientationMap
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((3, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> t = TiledMap.from_orientation_map(OrientationMap(quat, np.ones((3, 4), int)),
    ...                                   tile_px=2)
    >>> from inclination.tiles import segment_grains_tiled
    >>> net = boundary_network_tiled(t, segment_grains_tiled(t, [cu], min_pixels=1), [cu])
    >>> net.offsets.tolist(), net.points_um.round(6).tolist()
    ([0, 3], [[1.5, 0.0], [1.5, 1.0], [1.5, 2.0]])
    """
    from ..network import boundary_edges, chain_edges, concat_edges

    h, w = tmap.shape
    labels = np.asarray(grain_map.labels)
    if labels.shape != (h, w):
        raise InputError(
            f"Expected `grain_map.labels` to have the map's shape {(h, w)}, got {labels.shape}."
        )
    band = max(2, (int(tmap.tile_px[0]) + 1) & ~1)

    def edges_of_band(r0, r1):
        # Two rows of halo above (an even first row keeps the grid's row parity, §1) and
        # one below: every vertex of an edge from rows [r0, r1) touches rows r0 - 1 .. r1.
        lo, hi = max(r0 - 2, 0), min(r1 + 1, h)
        sub = tmap.read(slice(lo, hi), slice(0, w))
        return boundary_edges(
            sub,
            labels[lo:hi],
            grain_map,
            phases,
            own_rows=(r0 - lo, r1 - lo),
            row_offset=lo,
        )

    # The bands on dask's threaded scheduler, as the tiles (two in flight on two cores).
    bands = [(r0, min(r0 + band, h)) for r0 in range(0, h, band)]
    parts = on_tiles(edges_of_band, bands)
    edges = concat_edges(parts)
    # The bands' tables go before the chains are built: the edge table is the largest
    # array of this stage after the labels.
    del parts
    return chain_edges(edges, grain_map)
