"""Maps larger than memory: grains and boundary segments tile by tile (conventions §1–§2).

Owns :class:`TiledMap` (a map read a tile at a time, from a zarr store through dask.array or
from an :class:`~inclination.maps.OrientationMap` in memory), :func:`segment_grains_tiled`,
:func:`boundary_network_tiled` and :func:`needs_tiles` (the job's ``tiles`` block). No
scheduler of our own: dask.array reads the chunks, the tiles run one after another.

Grains. Each tile is read with a halo of one point below and to the right (and to the left on
a hexagonal grid, whose diagonals reach the lower-left neighbour), so that every neighbour
link of the map lies inside at least one extended tile; the tile's components come from the
project's own link kernels (:func:`inclination.grains.link_labels`). A halo point is also a
point of the neighbouring tile: its two provisional labels are joined by union-find
(``scipy.sparse.csgraph.connected_components`` over the halo pairs), the approach of chunked
connected-component labelling: dask-image's ``ndmeasure.label`` labels each block, pairs the
labels of the two slices that meet at every block face, and relabels the blocks by the
connected components of those pairs. Here whether two points across a face join is the
link test of their orientations, not a foreground mask, so each tile is labelled with its
halo and the halo points' labels are paired with their own tile's. The components are then
numbered in raster order of their first point, as :func:`inclination.grains.segment_grains`
numbers them; the clean-up of small grains runs on the grain adjacency (counts of neighbour
pairs between grains, summed over the tiles), and the statistics are cross-tile sums: area,
centroid, edge contact, the quaternion sum of each grain's points aligned to its first
point, then the spread about the mean. The result is the same
:class:`~inclination.grains.GrainMap` the whole map gives (same partition, same ids,
statistics to float rounding).

Boundaries. The edges between grains are found in full-width bands of rows with a halo of
two rows (:func:`inclination.network.boundary_edges`), and the chains are assembled from the
edge table of the whole map (:func:`inclination.network.chain_edges`), which holds a few
records per boundary edge, not per point. The straight segments are fitted on those chains
by :func:`inclination.traces.fit_segments`: the farthest-point split of a chain depends on
where the chain ends, so fitting per tile and merging segments across tile borders could not
give the whole map's segments; fitting the merged chains does, exactly.

Memory: the label image is held whole (4 bytes per point; the report and the sections need
it); orientations only a tile or a band at a time.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ._validation import check_one_of
from .crystal import symmetry
from .crystal.rotations import quat_from_euler_deg, quat_multiply
from .errors import InputError, SettingError
from .frames import DeclaredAxes, orientations_to_declared, orientations_to_sample
from .grains import GrainMap, check_grain_options, isolated_points, link_labels
from .links import (
    disorientation_cos_half,
    forward_pair_mask,
    neighbour_shifts,
    phase_infos,
)
from .maps import OrientationMap, row_pitch_um

if TYPE_CHECKING:
    from .crystal.phases import Phase
    from .network import BoundaryNetwork

__all__ = [
    "BYTES_PER_POINT",
    "DEFAULT_TILE_PX",
    "TiledMap",
    "boundary_network_tiled",
    "cache_tiles",
    "needs_tiles",
    "segment_grains_tiled",
]

#: Tile size (points a side) of a map tiled for the memory budget without a ``tile_px``.
DEFAULT_TILE_PX = 2048

#: Memory of the whole-map path per map point (bytes), for the job's memory budget: the
#: float32 quaternion planes (16), phase and validity (5), labels and row runs (8), the
#: link masks (2 to 4) and the statistics' blocks.
BYTES_PER_POINT = 40

_IDENTITY32 = np.array([1.0, 0.0, 0.0, 0.0], np.float32)
# Below this angle to a grain's reference the identity is the nearest symmetric
# equivalent for every Laue class (the smallest non-identity proper rotation turns 60°);
# the same bound as the whole-map statistics.
_IDENTITY_SAFE_RAD = np.deg2rad(30.0)


# ----------------------------------------------------------------------------- the map


@dataclass(frozen=True)
class TiledMap:
    """An orientation map read one rectangle at a time, in S (conventions §1–§3).

    Build with :meth:`from_orientation_map` or :func:`read_zarr_map`; every rectangle comes
    back as an :class:`~inclination.maps.OrientationMap` of its own (its point (0, 0) is the
    rectangle's first point). Carries what the later stages read of a map besides its
    orientations: grid, steps, declared axes, data-frame rotation, rotation sense, provenance.

    Attributes
    ----------
    shape : tuple of int
        (H, W).
    tile_px : tuple of int
        (rows, columns) of a tile; on a hexagonal grid the rows are even, so that every tile
        starts on an even row (odd rows are the shifted ones, §1).
    grid, step_x_um, step_y_um, axes, data_frame_rotation, rotation_sense, provenance
        As :class:`~inclination.maps.OrientationMap`.
    reader : callable
        ``reader(rows, cols)`` → OrientationMap of that rectangle (use :meth:`read`).
    valid : array_like of bool, shape (H, W)
        Indexed points; a lazy dask expression for a zarr map (counted only when asked).
    """

    shape: tuple
    tile_px: tuple
    grid: str
    step_x_um: float
    step_y_um: float
    axes: DeclaredAxes
    data_frame_rotation: np.ndarray
    rotation_sense: str
    provenance: Mapping
    reader: Callable[[slice, slice], OrientationMap] = field(repr=False)
    valid: object = field(default=None, repr=False)

    @classmethod
    def from_orientation_map(cls, omap: OrientationMap, *, tile_px) -> TiledMap:
        """Tiles of a map already in memory (the job asked for ``tiles``).

        Examples
        --------
        >>> q = np.zeros((4, 6, 4)); q[..., 0] = 1.0
        >>> t = TiledMap.from_orientation_map(OrientationMap(q, np.ones((4, 6), int)),
        ...                                   tile_px=(2, 4))
        >>> t.shape, t.tile_px, t.read(slice(2, 4), slice(4, 6)).shape
        ((4, 6), (2, 4), (2, 2))
        """

        def reader(rows, cols):
            return OrientationMap(
                omap.quat[rows, cols],
                omap.phase[rows, cols],
                valid=omap.valid[rows, cols],
                grid=omap.grid,
                step_x_um=omap.step_x_um,
                step_y_um=omap.step_y_um,
                axes=omap.axes,
                data_frame_rotation=omap.data_frame_rotation,
                rotation_sense=omap.rotation_sense,
            )

        return cls(
            shape=tuple(omap.shape),
            tile_px=_tile_px(tile_px, omap.shape, omap.grid),
            grid=omap.grid,
            step_x_um=float(omap.step_x_um),
            step_y_um=float(omap.step_y_um),
            axes=omap.axes,
            data_frame_rotation=np.asarray(omap.data_frame_rotation),
            rotation_sense=omap.rotation_sense,
            provenance=dict(omap.provenance),
            reader=reader,
            valid=omap.valid,
        )

    @property
    def n_points(self) -> int:
        """Number of grid points H·W."""
        return int(self.shape[0] * self.shape[1])

    @property
    def row_pitch_um(self) -> float:
        """Distance between rows (µm), :func:`inclination.maps.row_pitch_um`."""
        return row_pitch_um(self.grid, self.step_y_um)

    def positions_sample_um(self) -> np.ndarray:
        """Positions of every grid point in S, shape (H, W, 2), µm (§1); a full-size array."""
        h, w = self.shape
        x = np.broadcast_to(np.arange(w) * self.step_x_um, (h, w)).astype(np.float64)
        if self.grid == "hexagonal":
            x = x + 0.5 * self.step_x_um * (np.arange(h) % 2)[:, None]
        y = np.broadcast_to((np.arange(h) * self.row_pitch_um)[:, None], (h, w))
        return np.stack([x, y], axis=-1)

    @property
    def quality(self) -> Mapping:
        """Quality channels: none on the tiled path (segmentation does not read them)."""
        return {}

    def read(self, rows: slice, cols: slice) -> OrientationMap:
        """The rectangle ``[rows, cols]`` as an OrientationMap in S."""
        return self.reader(rows, cols)

    def tiles(self) -> Iterator[tuple[slice, slice]]:
        """(rows, cols) slices of the tiles, row of tiles by row of tiles."""
        h, w = self.shape
        tr, tc = self.tile_px
        for r0 in range(0, h, tr):
            for c0 in range(0, w, tc):
                yield slice(r0, min(r0 + tr, h)), slice(c0, min(c0 + tc, w))


def _tile_px(tile_px, shape, grid) -> tuple:
    if isinstance(tile_px, int | np.integer) and not isinstance(tile_px, bool):
        tile_px = (int(tile_px), int(tile_px))
    rows, cols = (int(v) for v in tile_px)
    if rows < 2 or cols < 2:
        raise SettingError(f"Expected `tile_px` to be at least 2 points, got {(rows, cols)}.")
    if grid == "hexagonal" and rows % 2:
        # Tiles start on even rows, so that a tile's row parity is the map's (§1).
        rows += 1
    return (min(rows, max(int(shape[0]), 2)), min(cols, max(int(shape[1]), 2)))


def _phase_ids_checked(raw: np.ndarray, known: np.ndarray, path, r0: int, c0: int) -> np.ndarray:
    """Integer phase ids of one tile; InputError naming the map point of a bad id."""
    if raw.dtype.kind == "f":
        finite = np.isfinite(raw)
        bad = np.isinf(raw) | (finite & ((raw < 0) | (raw != np.rint(raw)) | (raw >= 2**31)))
        phase = np.where(finite & ~bad, raw, 0.0).astype(np.int64)
    else:
        bad = raw < 0
        phase = raw.astype(np.int64)
    accepted = phase == 0
    for k in known.tolist():
        accepted |= phase == k
    bad |= ~accepted
    if bad.any():
        i, j = (int(v[0]) for v in np.nonzero(bad))
        raise InputError(
            f"Expected phase ids among the job's phases {tuple(known.tolist())} "
            f"(or 0 for not indexed), whole numbers < 2^31, got {raw[i, j]!r}.",
            path=path,
            pointer=f"row {r0 + i}, column {c0 + j}",
        )
    return phase


def read_zarr_map(
    spec: Mapping,
    *,
    base_dir=None,
    phase_ids,
    path_for_errors=None,
    pointer: str = "/map",
    tile_px=None,
) -> TiledMap:
    """A zarr map (format ``"zarr"``) as a :class:`TiledMap`, read chunk by chunk.

    Parameters
    ----------
    spec : mapping
        The job's map entry: ``path`` (a zarr group with ``euler_deg`` or ``euler_rad``
        (H, W, 3) and ``phase`` (H, W), see :mod:`inclination.io.chunked`), ``angles``,
        ``axes``, ``step_um`` (or ``step_x_um`` and ``step_y_um``), ``grid``, optional
        ``data_frame_rotation`` and ``rotation_sense``.
    base_dir : str or Path, optional
        Folder that a relative ``path`` is relative to.
    phase_ids : iterable of int
        The job's phase ids; a tile with another non-zero id is refused when read.
    path_for_errors, pointer
        The job file and the map's JSON pointer, named in errors about the spec.
    tile_px : int or (int, int), optional
        Tile size; default the stored chunks.

    Returns
    -------
    TiledMap
        Angles are converted to S tile by tile exactly as :func:`inclination.maps.read_map`
        converts a whole map (the same float64 formulas, stored as float32).

    Raises
    ------
    InputError
        For a missing store, array, a wrong shape or dtype, or a bad field of ``spec``.

    Examples
    --------
    >>> import tempfile, os, pytest
    >>> _ = pytest.importorskip("zarr", reason="needs the optional extra 'tiles'")
    >>> _ = pytest.importorskip("dask", reason="needs the optional extra 'tiles'")
    >>> from inclination.io.chunked import write_zarr_map
    >>> d = tempfile.mkdtemp()
    >>> e = np.zeros((4, 4, 3)); e[:, 2:, 0] = 40.0
    >>> write_zarr_map(os.path.join(d, "m.zarr"), e, np.ones((4, 4), np.int32), chunks_px=(2, 2))
    >>> t = read_zarr_map({"path": "m.zarr", "format": "zarr", "angles": "deg", "grid": "square",
    ...                    "step_um": 1.0, "axes": {"x": "right", "y": "down"}},
    ...                   base_dir=d, phase_ids=(1,))
    >>> q = t.read(slice(0, 1), slice(1, 3)).quat  # 40° about Z in the second column
    >>> t.tile_px, q[0, :, 3].astype(float).round(6).tolist()
    ((2, 2), [0.0, -0.34202])
    """
    from pathlib import Path

    from .frames import data_frame_quat
    from .io.chunked import open_zarr_arrays
    from .maps import GRIDS

    path = Path(spec["path"])
    if base_dir is not None and not path.is_absolute():
        path = Path(base_dir) / path
    angles = spec.get("angles", "deg")
    check_one_of(angles, "angles", ("deg", "rad"))
    grid = spec.get("grid")
    if grid not in GRIDS:
        raise InputError(
            f"Expected 'grid' to be one of {GRIDS} for a zarr map, got {grid!r}.",
            path=path_for_errors,
            pointer=f"{pointer}/grid",
        )
    axes = DeclaredAxes.from_dict(spec.get("axes"), path=path_for_errors, pointer=f"{pointer}/axes")
    steps = _steps_sample(spec, axes, grid, path_for_errors, pointer)
    dfr = data_frame_quat(
        spec.get("data_frame_rotation"),
        path=path_for_errors,
        pointer=f"{pointer}/data_frame_rotation",
    )
    sense = spec.get("rotation_sense", "passive")
    arrays = open_zarr_arrays(path, angles=angles)
    h, w = (int(v) for v in arrays.phase.shape)
    known = np.asarray(sorted({int(p) for p in phase_ids}), np.int64)
    same_frame = axes.is_sample_frame and np.array_equal(np.asarray(dfr, float), _IDENTITY32)
    sx, sy = steps
    # Declared coordinates start at 0 on both axes over the map's bounding box, as for the
    # array formats of inclination.maps.read_map.
    pitch = row_pitch_um(grid, sy)
    x_max = (w - 1) * sx + (0.5 * sx if grid == "hexagonal" and h > 1 else 0.0)
    corners = np.array([[0.0, 0.0], [x_max, 0.0], [0.0, (h - 1) * pitch], [x_max, (h - 1) * pitch]])
    declared = DeclaredAxes(axes.x, axes.y).points_to_declared(corners)
    axes = axes.with_origin(-declared.min(axis=0) + 0.0)

    def reader(rows, cols):
        raw_phase = np.asarray(arrays.phase[rows, cols])
        euler = np.asarray(arrays.euler[rows, cols], dtype=np.float64)
        phase = _phase_ids_checked(raw_phase, known, path, rows.start or 0, cols.start or 0)
        valid = (phase != 0) & np.isfinite(euler).all(axis=-1)
        euler[~valid] = 0.0
        # The readers' conversion (inclination.maps): float64 angles, float32 quaternions.
        q = quat_from_euler_deg(np.rad2deg(euler) if angles == "rad" else euler, dtype=np.float32)
        if not same_frame:
            q = orientations_to_sample(q, axes, dfr)
        if sense == "active":
            stored = orientations_to_declared(q[valid].astype(np.float64), axes, dfr)
            q = np.array(q, np.float32)
            q[valid] = orientations_to_sample(stored, axes, dfr, rotation_sense="active")
        q = np.array(q, np.float32)
        q[~valid] = _IDENTITY32
        return OrientationMap(
            q,
            np.where(valid, phase, 0).astype(np.int32),
            valid=valid,
            grid=grid,
            step_x_um=sx,
            step_y_um=sy,
            axes=axes,
            data_frame_rotation=dfr,
            rotation_sense=sense,
        )

    provenance = {
        "source_path": str(path.resolve()),
        "sha256": None,
        "reader": "zarr arrays",
        "settings": {
            "format": "zarr",
            "angles": angles,
            "axes": axes.as_dict(),
            "data_frame_rotation": spec.get("data_frame_rotation", "identity"),
            "chunks_px": list(arrays.chunks_px),
        },
    }
    return TiledMap(
        shape=(h, w),
        tile_px=_tile_px(arrays.chunks_px if tile_px is None else tile_px, (h, w), grid),
        grid=grid,
        step_x_um=float(sx),
        step_y_um=float(sy),
        axes=axes,
        data_frame_rotation=np.asarray(dfr),
        rotation_sense=sense,
        provenance=provenance,
        reader=reader,
        # Counted only when asked (the run summary): a dask expression, not an array.
        valid=(arrays.phase != 0) & np.isfinite(arrays.euler).all(axis=-1),
    )


def cache_tiles(tmap: TiledMap, folder, *, progress=None) -> TiledMap:
    """The map converted once into an uncompressed zarr store in ``folder``, read from there.

    Every later stage reads each tile several times (labels, two statistics passes, the
    boundary bands); converting the Euler angles costs about ten times reading float32
    quaternions, so a zarr map is converted once, tile by tile, and kept on disk
    (21 bytes per point: quaternions, phase, validity), never whole in memory.

    Parameters
    ----------
    tmap : TiledMap
    folder : str or Path
        An existing folder (a temporary one: the store lives as long as the caller keeps it).
    progress : callable, optional
        Called with the fraction of tiles done.

    Returns
    -------
    TiledMap
        The same map (same tiles, metadata and values), read from the store.

    Examples
    --------
    >>> import tempfile, pytest
    >>> _ = pytest.importorskip("zarr", reason="needs the optional extra 'tiles'")
    >>> q = np.zeros((4, 6, 4)); q[..., 0] = 1.0; q[:, 3:] = [0.0, 0.0, 0.0, 1.0]
    >>> t = TiledMap.from_orientation_map(OrientationMap(q, np.ones((4, 6), int)), tile_px=2)
    >>> c = cache_tiles(t, tempfile.mkdtemp())
    >>> everything = (slice(0, 4), slice(0, 6))
    >>> c.read(*everything).quat.tobytes() == t.read(*everything).quat.tobytes()
    True
    """
    import zarr

    h, w = tmap.shape
    tr, tc = tmap.tile_px
    group = zarr.open_group(str(folder), mode="w")
    quat = group.create_array(
        "quat", shape=(h, w, 4), chunks=(tr, tc, 4), dtype="f4", compressors=None
    )
    phase = group.create_array("phase", shape=(h, w), chunks=(tr, tc), dtype="i4", compressors=None)
    valid = group.create_array("valid", shape=(h, w), chunks=(tr, tc), dtype=bool, compressors=None)
    tiles = list(tmap.tiles())

    def convert(rows, cols):
        # Each tile is whole chunks of the store: tiles written at once never share one.
        sub = tmap.read(rows, cols)
        quat[rows, cols] = np.asarray(sub.quat)
        phase[rows, cols] = np.asarray(sub.phase)
        valid[rows, cols] = np.asarray(sub.valid)

    # dask's threaded scheduler runs the tiles on the machine's cores (numpy's trigonometry
    # releases the GIL), a few tiles in memory at a time.
    _on_tiles(convert, tiles, progress=progress)

    def reader(r, c):
        return OrientationMap(
            quat[r, c],
            phase[r, c],
            valid=valid[r, c],
            grid=tmap.grid,
            step_x_um=tmap.step_x_um,
            step_y_um=tmap.step_y_um,
            axes=tmap.axes,
            data_frame_rotation=tmap.data_frame_rotation,
            rotation_sense=tmap.rotation_sense,
        )

    fields = {f: getattr(tmap, f) for f in tmap.__dataclass_fields__}
    fields["reader"] = reader
    return TiledMap(**fields)


def _steps_sample(spec, axes, grid, path, pointer):
    """(step_x_um, step_y_um) along S from the declared steps (an array map's rule)."""
    if "step_um" in spec:
        s = float(spec["step_um"])
        return s, s
    if "step_x_um" in spec and "step_y_um" in spec and grid == "square":
        sx, sy = float(spec["step_x_um"]), float(spec["step_y_um"])
        # A declared x axis that runs along S's Y swaps the two steps (conventions §2).
        if axes.x in ("up", "down"):
            sx, sy = sy, sx
        return sx, sy
    raise InputError(
        "Expected 'step_um' (or 'step_x_um' and 'step_y_um' on a square grid) for a zarr map.",
        path=path,
        pointer=f"{pointer}/step_um",
    )


def needs_tiles(shape, *, format: str, tile_px=None, memory_mib=None) -> bool:
    """Whether a map goes the tiled path: zarr maps, a job's ``tile_px``, or over budget.

    Parameters
    ----------
    shape : (int, int)
        (H, W) of the map.
    format : str
        The map's format.
    tile_px : int, optional
        The job's tile size; any value asks for tiles.
    memory_mib : float, optional
        The job's memory budget (MiB); a map whose whole-map path needs more
        (:data:`BYTES_PER_POINT` per point) is tiled.

    Examples
    --------
    >>> needs_tiles((100, 100), format="npz"), needs_tiles((100, 100), format="zarr")
    (False, True)
    >>> needs_tiles((16384, 16384), format="npz", memory_mib=6144)
    True
    """
    if format == "zarr" or tile_px is not None:
        return True
    if memory_mib is None:
        return False
    return shape[0] * shape[1] * BYTES_PER_POINT > float(memory_mib) * 2**20


# ----------------------------------------------------------------------------- grains


@dataclass(frozen=True)
class _Provisional:
    """Per provisional label (index 0 a dummy): first point, its phase code and quaternion."""

    first: np.ndarray  # (n + 1,) int64 flat index of the label's first own point; -1 none
    code: np.ndarray  # (n + 1,) uint8 phase code there
    quat: np.ndarray  # (n + 1, 4) float32 quaternion there


def _halo_region(rows: slice, cols: slice, shape, grid) -> tuple[slice, slice]:
    """The tile with one point more below and right (and left on a hexagonal grid)."""
    h, w = shape
    c0 = max(cols.start - 1, 0) if grid == "hexagonal" else cols.start
    return slice(rows.start, min(rows.stop + 1, h)), slice(c0, min(cols.stop + 1, w))


@dataclass(frozen=True)
class _TileLabels:
    """What labelling one tile leaves besides its labels (written into the label image)."""

    n_labels: int  # labels 1..n of the extended tile
    first: np.ndarray  # (n,) first own point (flat index of the map) of each label, -1 none
    code: np.ndarray  # (n,) uint8 phase code there
    quat: np.ndarray  # (n, 4) float32 quaternion there
    halo_flat: np.ndarray  # flat indices of the halo points that have a label
    halo_label: np.ndarray  # their labels in this tile


def _label_one_tile(tmap, rows, cols, labels, code_of, phases, threshold_deg) -> _TileLabels:
    """Components of one tile with its halo; own points' labels written into ``labels``."""
    w = tmap.shape[1]
    er, ec = _halo_region(rows, cols, tmap.shape, tmap.grid)
    sub = tmap.read(er, ec)
    ext = link_labels(sub, phases, threshold_deg=threshold_deg)
    n_ext = int(ext.max())
    r_own = slice(0, rows.stop - rows.start)
    c_own = slice(cols.start - ec.start, cols.stop - ec.start)
    own = ext[r_own, c_own]
    labels[rows, cols] = own
    # Each label's first own point in the tile's raster order, which within one tile is
    # the map's raster order.
    uniq, idx = np.unique(own.reshape(-1), return_index=True)
    keep = uniq > 0
    uniq, idx = uniq[keep] - 1, idx[keep]
    first = np.full(n_ext, -1, np.int64)
    code = np.zeros(n_ext, np.uint8)
    quat = np.zeros((n_ext, 4), np.float32)
    i, j = np.divmod(idx, own.shape[1])
    first[uniq] = (rows.start + i) * w + cols.start + j
    code[uniq] = code_of[np.asarray(sub.phase)[r_own, c_own][i, j]]
    quat[uniq] = np.asarray(sub.quat)[r_own, c_own][i, j]
    # Halo points: points of the neighbouring tiles, labelled here too.
    halo = ext > 0
    halo[r_own, c_own] = False
    hi, hj = np.nonzero(halo)
    halo_flat = (er.start + hi).astype(np.int64) * w + ec.start + hj
    return _TileLabels(n_ext, first, code, quat, halo_flat, ext[hi, hj])


def _on_tiles(fn, tiles, *, progress=None, batch: int = 8) -> list:
    """``[fn(rows, cols) for rows, cols in tiles]`` on dask's threaded scheduler.

    A batch of tiles at a time (the memory of a few tiles, a progress report per batch).
    Every task of a batch finishes before an error is raised, so that no task still
    writes into a store its caller is about to remove; the first error is raised as it
    came (an InputError naming the map point stays one). Without dask (a map in memory
    tiled on request, the extra not installed) the tiles run one after another.
    """
    try:
        import dask
    except ImportError:
        out = []
        for t, (rows, cols) in enumerate(tiles):
            out.append(fn(rows, cols))
            if progress is not None:
                progress((t + 1) / len(tiles))
        return out

    def guarded(rows, cols):
        try:
            return fn(rows, cols), None
        except Exception as exc:  # re-raised below, once the batch is done
            return None, exc

    out = []
    for t in range(0, len(tiles), batch):
        done = dask.compute(*[dask.delayed(guarded)(r, c) for r, c in tiles[t : t + batch]])
        for _, exc in done:
            if exc is not None:
                raise exc
        out.extend(value for value, _ in done)
        if progress is not None:
            progress(min(t + batch, len(tiles)) / len(tiles))
    return out


def _label_tiles(tmap: TiledMap, infos, phases, threshold_deg, progress):
    """Provisional labels (int32 (H, W)) joined across tiles, and the per-label records.

    The tiles are labelled on dask's threaded scheduler, a batch at a time (each task
    writes its own tile of the label image); the labels are then made distinct by adding
    each tile's offset, and joined by union-find over the halo points.
    """
    h, w = tmap.shape
    labels = np.zeros((h, w), np.int32)
    code_of = np.zeros(max(p.id for p in infos) + 1, np.uint8)
    for p in infos:
        code_of[p.id] = p.code
    tiles = list(tmap.tiles())
    results = _on_tiles(
        lambda r, c: _label_one_tile(tmap, r, c, labels, code_of, phases, threshold_deg),
        tiles,
        progress=None if progress is None else (lambda f: progress(0.5 * f)),
    )
    offset = 0
    halo_k, halo_lab = [], []
    for (rows, cols), res in zip(tiles, results, strict=True):
        block = labels[rows, cols]
        block[block > 0] += offset
        halo_k.append(res.halo_flat)
        halo_lab.append(res.halo_label + offset)
        offset += res.n_labels
    records = _Provisional(
        np.concatenate([np.full(1, -1, np.int64)] + [r.first for r in results]),
        np.concatenate([np.zeros(1, np.uint8)] + [r.code for r in results]),
        np.concatenate([np.zeros((1, 4), np.float32)] + [r.quat for r in results]),
    )
    hk = np.concatenate(halo_k)
    hl = np.concatenate(halo_lab)
    # Union-find over the halo pairs: a halo point's label here and in its own tile.
    a = labels.reshape(-1)[hk]
    graph = coo_matrix((np.ones(a.size, np.int8), (a, hl)), shape=(offset + 1, offset + 1)).tocsr()
    _, comp = connected_components(graph, directed=False)
    return labels, comp, records


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
            key = g_own[ok] * n + g_other[ok]
            pairs, inverse = np.unique(key, return_inverse=True)
            shared = np.bincount(inverse, weights=count[sel][ok]).astype(np.int64)
            ga, gb = np.divmod(pairs, n)
            order = np.lexsort((gb, -shared, ga))
            ga, gb = ga[order], gb[order]
            first = np.r_[True, ga[1:] != ga[:-1]]
            target[ga[first]] = gb[first]
            merged += int(area[ga[first]].sum())
            small[ga[first]] = False
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
    labels, comp, prov = _label_tiles(tmap, infos, phases, threshold_deg, progress)
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
    _relabel(labels, lut)
    n_grains = int(order.size)
    # The record of each grain's first point: the provisional label that holds it.
    holder = np.zeros(n_grains + 1, np.int64)
    at_first = np.flatnonzero((prov.first >= 0) & (prov.first == comp_first[comp]))
    holder[lut[at_first]] = at_first
    first = np.full(n_grains + 1, -1, np.int64)
    first[1:] = prov.first[holder[1:]]
    code = prov.code[holder]
    code[0] = 0

    area = _bincount_labels(labels, n_grains + 1)
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
    table = _grain_table(
        tmap,
        labels,
        phases=infos,
        ref=prov.quat[holder[own_of]],
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


def _bincount_labels(labels: np.ndarray, m: int) -> np.ndarray:
    out = np.zeros(m, np.int64)
    for r0, r1 in _row_bands(*labels.shape):
        out += np.bincount(np.abs(labels[r0:r1]).reshape(-1), minlength=m)
    return out


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


def _grain_table(tmap, labels, *, phases, ref, grain_code, n_grains, filled, progress):
    """The grain table (:data:`inclination.grains.GRAIN_COLUMNS`) from sums over tiles.

    ``labels`` holds +g at points that count in g's orientation statistics and -g at
    points merged into g; ``ref`` (G + 1, 4) each grain's first own point's quaternion.
    """
    h, w = tmap.shape
    m = n_grains + 1
    infos = phases
    ops = {p.code: symmetry.proper_rotations(p.laue, setting=p.setting) for p in infos}
    info_of = {p.code: p for p in infos}
    step_x, pitch = float(tmap.step_x_um), float(tmap.row_pitch_um)
    area = np.zeros(m)
    sum_x = np.zeros(m)
    sum_y = np.zeros(m)
    touches = np.zeros(m, bool)
    sums = np.zeros((m, 4))
    ref32 = np.asarray(ref, np.float32)
    cos_safe = np.float32(np.cos(_IDENTITY_SAFE_RAD / 2))
    filled_k, filled_g = filled
    tiles = list(tmap.tiles())
    # Pass 1: areas, centroids, edge contact, and the aligned quaternion sums.
    for t, (rows, cols) in enumerate(tiles):
        lab = labels[rows, cols]
        g_all = np.abs(lab).reshape(-1)
        i, j = np.indices(lab.shape)
        i = (i + rows.start).reshape(-1)
        j = (j + cols.start).reshape(-1)
        x = j * step_x
        if tmap.grid == "hexagonal":
            x = x + 0.5 * step_x * (i % 2)
        area += np.bincount(g_all, minlength=m)
        sum_x += np.bincount(g_all, weights=x, minlength=m)
        sum_y += np.bincount(g_all, weights=i * pitch, minlength=m)
        edge = (i == 0) | (i == h - 1) | (j == 0) | (j == w - 1)
        touches |= np.bincount(g_all[edge], minlength=m) > 0
        own = np.flatnonzero(lab.reshape(-1) > 0)
        if own.size == 0:
            continue
        q = np.asarray(tmap.read(rows, cols).quat).reshape(-1, 4)[own]
        g = g_all[own]
        aligned = _aligned(q, ref32[g], g, grain_code, ops, cos_safe)
        for c in range(4):
            sums[:, c] += np.bincount(g, weights=aligned[:, c], minlength=m)
        if progress is not None:
            progress(0.5 + 0.25 * (t + 1) / len(tiles))
    if filled_k.size:
        fi, fj = np.divmod(filled_k, w)
        fx = fj * step_x + (0.5 * step_x * (fi % 2) if tmap.grid == "hexagonal" else 0.0)
        area += np.bincount(filled_g, minlength=m)
        sum_x += np.bincount(filled_g, weights=fx, minlength=m)
        sum_y += np.bincount(filled_g, weights=fi * pitch, minlength=m)
    norm = np.linalg.norm(sums, axis=1)
    mean = np.zeros_like(sums)
    mean[:, 0] = 1.0
    ok = norm > 0
    mean[ok] = sums[ok] / norm[ok, None]
    mean[mean[:, 0] < 0] *= -1
    mean32 = mean.astype(np.float32)
    # Pass 2: the spread about the mean (the whole-map formula: 4·asin(|q - m| / 2) in the
    # mean's hemisphere, the full symmetry test beyond 30°).
    spread_sum = np.zeros(m)
    spread_max = np.zeros(m)
    n_own = np.zeros(m)
    far_chord2 = np.float32(4 * np.sin(_IDENTITY_SAFE_RAD / 4) ** 2)
    for t, (rows, cols) in enumerate(tiles):
        lab = labels[rows, cols].reshape(-1)
        own = np.flatnonzero(lab > 0)
        if own.size == 0:
            continue
        g = lab[own].astype(np.int64)
        q = np.asarray(tmap.read(rows, cols).quat).reshape(-1, 4)[own]
        d = q - mean32[g]
        dn = np.einsum("nc,nc->n", d, d)
        np.minimum(dn, 4.0 - dn, out=dn)
        np.maximum(dn, np.float32(0.0), out=dn)
        far = np.flatnonzero(dn > far_chord2)
        angle = 4.0 * np.arcsin(np.minimum(np.sqrt(dn) * np.float32(0.5), np.float32(1.0)))
        if far.size:
            gf = g[far]
            for c, info in info_of.items():
                sel = far[grain_code[gf] == c]
                if sel.size:
                    cos_half = disorientation_cos_half(mean[g[sel]].T, q[sel].T, info)
                    angle[sel] = 2.0 * np.arccos(np.minimum(cos_half, 1.0))
        spread_sum += np.bincount(g, weights=angle, minlength=m)
        n_own += np.bincount(g, minlength=m)
        # Per-grain maximum by sorting (ufunc.at is slow on a few hundred thousand points).
        o = np.argsort(g, kind="stable")
        gs = g[o]
        starts = np.flatnonzero(np.r_[True, gs[1:] != gs[:-1]])
        top = np.maximum.reduceat(angle[o], starts)
        spread_max[gs[starts]] = np.maximum(spread_max[gs[starts]], top)
        if progress is not None:
            progress(0.75 + 0.25 * (t + 1) / len(tiles))
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
            cand = quat_multiply(op[None, :, :], q[sel][:, None, :].astype(np.float64))
            dots = np.einsum("nkc,nc->nk", cand, ref[sel].astype(np.float64))
            best = np.argmax(np.abs(dots), axis=1)
            rows = np.arange(sel.size)
            pick = cand[rows, best]
            out[sel] = pick * np.where(dots[rows, best] < 0, -1.0, 1.0)[:, None]
    return out


# ----------------------------------------------------------------------------- network


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
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(1, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> quat = np.zeros((3, 4, 4)); quat[..., 0] = 1.0
    >>> quat[:, 2:] = [0.92388, 0.0, 0.0, 0.382683]  # 45°
    >>> t = TiledMap.from_orientation_map(OrientationMap(quat, np.ones((3, 4), int)),
    ...                                   tile_px=2)
    >>> net = boundary_network_tiled(t, segment_grains_tiled(t, [cu], min_pixels=1), [cu])
    >>> net.offsets.tolist(), net.points_um.round(6).tolist()
    ([0, 3], [[1.5, 0.0], [1.5, 1.0], [1.5, 2.0]])
    """
    from .network import boundary_edges, chain_edges, concat_edges

    h, w = tmap.shape
    labels = np.asarray(grain_map.labels)
    if labels.shape != (h, w):
        raise InputError(
            f"Expected `grain_map.labels` to have the map's shape {(h, w)}, got {labels.shape}."
        )
    parts = []
    band = max(2, (int(tmap.tile_px[0]) + 1) & ~1)
    for r0 in range(0, h, band):
        r1 = min(r0 + band, h)
        # Two rows of halo above (an even first row keeps the grid's row parity, §1) and
        # one below: every vertex of an edge from rows [r0, r1) touches rows r0 - 1 .. r1.
        lo, hi = max(r0 - 2, 0), min(r1 + 1, h)
        sub = tmap.read(slice(lo, hi), slice(0, w))
        parts.append(
            boundary_edges(
                sub,
                labels[lo:hi],
                grain_map,
                phases,
                own_rows=(r0 - lo, r1 - lo),
                row_offset=lo,
            )
        )
    edges = concat_edges(parts)
    # The bands' tables go before the chains are built: the edge table is the largest
    # array of this stage after the labels.
    del parts
    return chain_edges(edges, grain_map)
