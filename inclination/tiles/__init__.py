"""Maps larger than memory: grains and boundary segments tile by tile (conventions §1–§2).

Three modules along the data flow, their public names re-exported here:
:mod:`~inclination.tiles.reading` (:class:`TiledMap`, a map read a tile at a time from a
zarr store through dask.array or from an :class:`~inclination.maps.OrientationMap` in
memory; :func:`read_zarr_map`; :func:`cache_tiles`, each tile converted once and kept on
disk; :func:`needs_tiles`, the job's ``tiles`` block; :func:`on_tiles`),
:mod:`~inclination.tiles.grains` (:func:`segment_grains_tiled`) and
:mod:`~inclination.tiles.boundaries` (:func:`boundary_network_tiled`). No scheduler of our
own: dask.array reads the chunks and dask's threaded scheduler runs the tiles, a few at a
time.

Grains. Each tile is read once for its labels and sums. Its components come from the
project's own link kernels on the tile alone (:func:`inclination.grains.link_labels`); the
tile keeps its edge strips (top row, bottom two rows, first and last columns). Every
neighbour link that crosses a tile border lies in a strip of three full-width rows round a
border between rows of tiles (starting on an even row, which keeps the grid's row parity,
§1) or of two columns round a border between two tiles of a row; each strip is labelled by
the same link test, and a strip component joins the provisional labels of its points, by
union-find (``scipy.sparse.csgraph.connected_components`` over the pairs). This is the
approach of chunked connected-component labelling (dask-image's ``ndmeasure.label`` labels
each block, pairs the labels of the two slices that meet at every block face and relabels
the blocks by the components of those pairs), with the link test of orientations in place
of a foreground mask, hence the strips instead of the faces alone. The components are then
numbered in raster order of their first point, as :func:`inclination.grains.segment_grains`
numbers them; the clean-up of small grains runs on the grain adjacency (counts of neighbour
pairs between grains). The same pass sums, per component and over runs of points along the
rows, the area, the coordinates, the edge contact and the quaternions aligned to the
component's first point; a component's sum is turned onto its grain's first point by the
symmetry operation that takes the component's first point there, which is the whole map's
per-point alignment while every point ends within 29° of the grain's first point (the
bound is checked per component; a grain past it has its sum taken from its points, one
more read of its tiles). The spread about the mean is one more read of every tile. The
result is the same :class:`~inclination.grains.GrainMap` the whole map gives (same
partition, same ids, statistics to float rounding).

Boundaries. The edges between grains are found in full-width bands of rows with a halo of
two rows (:func:`inclination.network.boundary_edges`), two bands at a time on the threaded
scheduler, and the chains are assembled from the edge table of the whole map
(:func:`inclination.network.chain_edges`), which holds a few records per boundary edge, not
per point. The straight segments are fitted on those chains by
:func:`inclination.traces.fit_segments`: the farthest-point split of a chain depends on
where the chain ends, so fitting per tile and merging segments across tile borders could not
give the whole map's segments; fitting the merged chains does, exactly.

Memory: the label image is held whole (4 bytes per point; the report and the sections need
it); orientations only a few tiles or two bands at a time, plus the tiles' edge strips.
"""

from .boundaries import boundary_network_tiled
from .grains import segment_grains_tiled
from .reading import (
    BYTES_PER_POINT,
    DEFAULT_TILE_PX,
    TiledMap,
    cache_tiles,
    needs_tiles,
    on_tiles,
    read_zarr_map,
)

__all__ = [
    "BYTES_PER_POINT",
    "DEFAULT_TILE_PX",
    "TiledMap",
    "boundary_network_tiled",
    "cache_tiles",
    "needs_tiles",
    "on_tiles",
    "read_zarr_map",
    "segment_grains_tiled",
]
