"""Tiled maps: reading a tile at a time, keeping converted tiles, running tiles on threads.

Owns :class:`TiledMap`, :func:`read_zarr_map`, :func:`cache_tiles`, :func:`needs_tiles` and
:func:`on_tiles` (the tiles or bands of a stage on dask's threaded scheduler), the first
step of :mod:`inclination.tiles` (conventions §1–§3).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from .._validation import check_one_of
from ..crystal.rotations import quat_from_euler_deg
from ..errors import InputError, SettingError
from ..frames import DeclaredAxes, orientations_to_declared, orientations_to_sample
from ..maps import OrientationMap, row_pitch_um

if TYPE_CHECKING:
    pass

__all__ = [
    "BYTES_PER_POINT",
    "DEFAULT_TILE_PX",
    "TiledMap",
    "cache_tiles",
    "needs_tiles",
    "on_tiles",
    "read_zarr_map",
]

#: Tile size (points a side) of a map tiled for the memory budget without a ``tile_px``.
DEFAULT_TILE_PX = 2048

#: Memory of the whole-map path per map point (bytes), for the job's memory budget: the
#: float32 quaternion planes (16), phase and validity (5), labels and row runs (8), the
#: link masks (2 to 4) and the statistics' blocks.
BYTES_PER_POINT = 40

_IDENTITY32 = np.array([1.0, 0.0, 0.0, 0.0], np.float32)
# Points per block of the Euler-angle conversion (its float64 temporaries: ~1.5 MB).
_CONVERT_BLOCK = 1 << 16


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

    from ..frames import data_frame_quat
    from ..io.chunked import is_store_address, open_zarr_arrays
    from ..maps import GRIDS

    # A store address stays the string given (inclination.io.chunked), never a Path.
    address = is_store_address(spec["path"])
    path = spec["path"] if address else Path(spec["path"])
    if not address and base_dir is not None and not path.is_absolute():
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
    arrays = open_zarr_arrays(
        path,
        angles=angles,
        storage_options=spec.get("storage_options"),
        path_for_errors=path_for_errors,
        pointer=pointer,
    )
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
        try:
            raw_phase = np.asarray(arrays.phase[rows, cols])
            euler = np.asarray(arrays.euler[rows, cols])
        except OSError as exc:
            # A store lost mid-run (network, credentials expired): one line, not a trace.
            raise InputError(
                f"Expected to read the chunks of rows {rows.start}-{rows.stop}, columns "
                f"{cols.start}-{cols.stop} of {str(path)!r}, got {type(exc).__name__}: {exc}.",
                path=path_for_errors,
                pointer=f"{pointer}/path",
            ) from None
        phase = _phase_ids_checked(raw_phase, known, path, rows.start or 0, cols.start or 0)
        valid = (phase != 0) & np.isfinite(euler).all(axis=-1)
        planes = np.empty((4, valid.size), np.float32)
        e_rows, v_rows = euler.reshape(-1, 3), valid.reshape(-1)
        for s in range(0, v_rows.size, _CONVERT_BLOCK):
            v = v_rows[s : s + _CONVERT_BLOCK]
            # The readers' conversion (inclination.maps): float64 angles, float32
            # quaternions; blocks keep the float64 temporaries in the processor's cache.
            e = e_rows[s : s + _CONVERT_BLOCK].astype(np.float64)
            e[~v] = 0.0
            q = quat_from_euler_deg(np.rad2deg(e) if angles == "rad" else e, dtype=np.float32)
            if not same_frame:
                q = orientations_to_sample(q, axes, dfr)
            if sense == "active":
                stored = orientations_to_declared(q[v].astype(np.float64), axes, dfr)
                q = np.array(q, np.float32)
                q[v] = orientations_to_sample(stored, axes, dfr, rotation_sense="active")
            q[~v] = _IDENTITY32
            planes[:, s : s + _CONVERT_BLOCK] = q.T
        # Contiguous planes (4, h, w), sealed with the phase and validity: OrientationMap
        # adopts them as they are (no second copy of the tile).
        planes = planes.reshape(4, *valid.shape)
        phase = np.where(valid, phase, 0).astype(np.int32)
        for a in (planes, phase, valid):
            a.setflags(write=False)
        return OrientationMap(
            np.moveaxis(planes, 0, -1),
            phase,
            valid=valid,
            grid=grid,
            step_x_um=sx,
            step_y_um=sy,
            axes=axes,
            data_frame_rotation=dfr,
            rotation_sense=sense,
        )

    provenance = {
        "source_path": path if address else str(path.resolve()),
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


def cache_tiles(tmap: TiledMap, folder) -> TiledMap:
    """The map with each tile converted once, when first read, and kept in ``folder``.

    The grain and boundary stages read each tile more than once (the labels and sums, the
    spread about the grain means, the boundary bands); converting the Euler angles costs
    several times reading float32 quaternion planes, so each tile of a zarr map is
    converted the first time it is read (the grains' one pass over the tiles), written as
    raw ``.npy`` files (21 bytes per point: quaternion planes, phase, validity; never the
    whole map in memory) and read back from there, through a memory map, afterwards.

    Parameters
    ----------
    tmap : TiledMap
    folder : str or Path
        An existing folder (a temporary one: the files live as long as the caller keeps it).

    Returns
    -------
    TiledMap
        The same map (same tiles, metadata and values). A read of exactly one tile not yet
        kept converts and keeps it; any other read first keeps the tiles it covers. Safe
        from several threads (a lock per tile).

    Examples
    --------
    >>> import tempfile
    >>> q = np.zeros((4, 6, 4)); q[..., 0] = 1.0; q[:, 3:] = [0.0, 0.0, 0.0, 1.0]
    >>> t = TiledMap.from_orientation_map(OrientationMap(q, np.ones((4, 6), int)), tile_px=2)
    >>> c = cache_tiles(t, tempfile.mkdtemp())
    >>> everything = (slice(0, 4), slice(0, 6))
    >>> c.read(*everything).quat.tobytes() == t.read(*everything).quat.tobytes()
    True
    """
    import threading
    from pathlib import Path

    h, w = tmap.shape
    tr, tc = tmap.tile_px
    base = Path(folder)
    n_rows, n_cols = -(-h // tr), -(-w // tc)
    kept = np.zeros((n_rows, n_cols), bool)
    locks = [[threading.Lock() for _ in range(n_cols)] for _ in range(n_rows)]

    def tile_slices(ti, tj):
        return slice(ti * tr, min((ti + 1) * tr, h)), slice(tj * tc, min((tj + 1) * tc, w))

    def files(ti, tj):
        return [base / f"{name}_{ti}_{tj}.npy" for name in ("quat", "phase", "valid")]

    def keep(ti, tj):
        sub = tmap.read(*tile_slices(ti, tj))
        arrays = (np.moveaxis(np.asarray(sub.quat), -1, 0), sub.phase, sub.valid)
        for f, a in zip(files(ti, tj), arrays, strict=True):
            np.save(f, np.ascontiguousarray(a))
        kept[ti, tj] = True
        return sub

    def reader(r, c):
        r0, r1, _ = r.indices(h)
        c0, c1, _ = c.indices(w)
        span_r = range(r0 // tr, max(r1 - 1, r0) // tr + 1)
        span_c = range(c0 // tc, max(c1 - 1, c0) // tc + 1)
        if len(span_r) == 1 and len(span_c) == 1:
            ti, tj = span_r[0], span_c[0]
            if (slice(r0, r1), slice(c0, c1)) == tile_slices(ti, tj):
                with locks[ti][tj]:
                    if not kept[ti, tj]:
                        return keep(ti, tj)
        planes = np.empty((4, r1 - r0, c1 - c0), np.float32)
        phase = np.empty((r1 - r0, c1 - c0), np.int32)
        valid = np.empty((r1 - r0, c1 - c0), bool)
        for ti in span_r:
            for tj in span_c:
                with locks[ti][tj]:
                    if not kept[ti, tj]:
                        keep(ti, tj)
                rows, cols = tile_slices(ti, tj)
                lo_r, hi_r = max(r0, rows.start), min(r1, rows.stop)
                lo_c, hi_c = max(c0, cols.start), min(c1, cols.stop)
                src = (
                    slice(lo_r - rows.start, hi_r - rows.start),
                    slice(lo_c - cols.start, hi_c - cols.start),
                )
                dst = (slice(lo_r - r0, hi_r - r0), slice(lo_c - c0, hi_c - c0))
                # Through a memory map: only the pages of the rows asked for are read.
                fq, fp, fv = (np.load(f, mmap_mode="r") for f in files(ti, tj))
                planes[(slice(None), *dst)] = fq[(slice(None), *src)]
                phase[dst] = fp[src]
                valid[dst] = fv[src]
                del fq, fp, fv
        for a in (planes, phase, valid):
            # Fresh arrays nothing else holds: sealed, OrientationMap adopts them.
            a.setflags(write=False)
        return OrientationMap(
            np.moveaxis(planes, 0, -1),
            phase,
            valid=valid,
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


def on_tiles(fn, tiles, *, progress=None, batch: int = 8) -> list:
    """``[fn(rows, cols) for rows, cols in tiles]`` on dask's threaded scheduler.

    A batch of tiles at a time (the memory of a few tiles, a progress report per batch).
    Every task of a batch finishes before an error is raised, so that no task still
    writes into a store its caller is about to remove; the first error is raised as it
    came (an InputError naming the map point stays one). Without dask (a map in memory
    tiled on request, the extra not installed) the tiles run one after another.

    Examples
    --------
    >>> on_tiles(lambda r, c: (r.start, c.start), [(slice(0, 2), slice(0, 2)),
    ...                                            (slice(0, 2), slice(2, 4))])
    [(0, 0), (0, 2)]
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
        # Threads named here: a distributed Client made default in this process (a
        # notebook's, or `inclination batch` run on in-process workers) would otherwise
        # take the tiles, whose closures over the map do not travel.
        done = dask.compute(
            *[dask.delayed(guarded)(r, c) for r, c in tiles[t : t + batch]], scheduler="threads"
        )
        for _, exc in done:
            if exc is not None:
                raise exc
        out.extend(value for value, _ in done)
        if progress is not None:
            progress(min(t + batch, len(tiles)) / len(tiles))
    return out
