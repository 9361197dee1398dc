"""Maps stored in chunks: a zarr group read lazily as dask arrays (format "zarr").

Owns :func:`open_zarr_arrays` and :func:`write_zarr_map`. The group holds the arrays the npz
reader knows (:func:`inclination.io.arrays.read_npz_arrays`): ``euler_deg`` or ``euler_rad``
(H, W, 3) in the declared unit and ``phase`` (H, W), in grid order (conventions §1), each
stored in chunks of rows × columns; the chunks of ``phase`` are the tiles of
:mod:`inclination.tiles` unless the job names a tile size. Nothing is read here but the
arrays' metadata: the values are read tile by tile by :mod:`inclination.tiles`. zarr and dask
are the optional extra ``tiles``, imported only in this module and in :mod:`inclination.tiles`.
"""

from __future__ import annotations

from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["ChunkedArrays", "open_zarr_arrays", "write_zarr_map"]


@dataclass(frozen=True)
class ChunkedArrays:
    """The arrays of a chunked map, not yet read.

    Attributes
    ----------
    euler : dask.array.Array, shape (H, W, 3)
        Euler angles in the declared unit, float as stored.
    phase : dask.array.Array, shape (H, W)
        Phase ids as stored (integer, or float with NaN for not indexed).
    chunks_px : tuple of int
        (rows, columns) of the stored chunks of ``phase``.
    """

    euler: object
    phase: object
    chunks_px: tuple


def _zarr(path):
    try:
        import dask.array  # noqa: F401
        import zarr
    except ImportError:
        raise InputError(
            "Expected zarr and dask to read a zarr map, got them not installed; "
            "install the extra: pip install 'inclination[tiles]'.",
            path=path,
        ) from None
    return zarr


def open_zarr_arrays(path: str | PathLike, *, angles: str) -> ChunkedArrays:
    """Open the arrays of a zarr map as dask arrays, one dask chunk per stored chunk.

    Parameters
    ----------
    path : str or Path
        A zarr group (a folder) with ``euler_deg`` or ``euler_rad`` and ``phase``.
    angles : {'deg', 'rad'}
        Which Euler array is expected.

    Returns
    -------
    ChunkedArrays

    Raises
    ------
    InputError
        zarr or dask missing, no group at ``path``, an array missing, or a wrong shape
        or dtype (the message names the array).

    Examples
    --------
    >>> import tempfile, os, pytest
    >>> _ = pytest.importorskip("zarr", reason="needs the optional extra 'tiles'")
    >>> _ = pytest.importorskip("dask", reason="needs the optional extra 'tiles'")
    >>> p = os.path.join(tempfile.mkdtemp(), "m.zarr")
    >>> write_zarr_map(p, np.zeros((4, 6, 3)), np.ones((4, 6), np.int32), chunks_px=(2, 3))
    >>> a = open_zarr_arrays(p, angles="deg")
    >>> a.euler.shape, a.phase.dtype.kind, a.chunks_px
    ((4, 6, 3), 'i', (2, 3))
    """
    zarr = _zarr(path)
    import dask.array as da

    p = Path(path)
    if not p.is_dir():
        raise InputError(
            "Expected a zarr group (a folder of chunked arrays), got no folder at this path.",
            path=path,
        )
    try:
        group = zarr.open_group(str(p), mode="r")
    except Exception as exc:  # zarr raises several kinds for a folder that is not a group
        raise InputError(
            f"Expected a zarr group, got a folder zarr cannot open ({type(exc).__name__}).",
            path=path,
        ) from None
    names = sorted(group.array_keys())
    key = f"euler_{angles}"
    for needed in (key, "phase"):
        if needed not in names:
            raise InputError(
                f"Expected an array named {needed!r} (angles declared {angles!r}), "
                f"got arrays {names}.",
                path=path,
                pointer=needed,
            )
    euler, phase = group[key], group["phase"]
    for name, arr in ((key, euler), ("phase", phase)):
        if np.dtype(arr.dtype).kind not in "iuf":
            raise InputError(
                f"Expected {name!r} to hold numbers, got dtype {arr.dtype}.",
                path=path,
                pointer=name,
            )
    if len(euler.shape) != 3 or euler.shape[-1] != 3:
        raise InputError(
            f"Expected {key!r} to have shape (H, W, 3), got {tuple(euler.shape)}.",
            path=path,
            pointer=key,
        )
    if tuple(phase.shape) != tuple(euler.shape[:2]) or 0 in phase.shape:
        raise InputError(
            f"Expected 'phase' to have shape {tuple(euler.shape[:2])} (non-empty), "
            f"got {tuple(phase.shape)}.",
            path=path,
            pointer="phase",
        )
    chunks = tuple(int(c) for c in phase.chunks)
    # The Euler array read in the chunks of the phase array, whatever its own chunking.
    euler_da = da.from_zarr(euler).rechunk((chunks[0], chunks[1], 3))
    return ChunkedArrays(euler_da, da.from_zarr(phase), chunks)


def write_zarr_map(
    path: str | PathLike,
    euler: np.ndarray,
    phase: np.ndarray,
    *,
    chunks_px: tuple[int, int],
    angles: str = "deg",
) -> None:
    """Write Euler angles (H, W, 3) and phase ids (H, W) as a zarr map in chunks.

    A test and benchmark helper (the reader's counterpart); arrays of a dask array are
    written chunk by chunk, so a map larger than memory can be made.

    Examples
    --------
    >>> import tempfile, os, pytest
    >>> _ = pytest.importorskip("zarr", reason="needs the optional extra 'tiles'")
    >>> _ = pytest.importorskip("dask", reason="needs the optional extra 'tiles'")
    >>> p = os.path.join(tempfile.mkdtemp(), "m.zarr")
    >>> write_zarr_map(p, np.zeros((2, 2, 3)), np.ones((2, 2), np.int32), chunks_px=(1, 2))
    >>> sorted(os.listdir(p))[:1]
    ['euler_deg']
    """
    zarr = _zarr(path)
    import dask.array as da

    rows, cols = (int(c) for c in chunks_px)
    group = zarr.open_group(str(path), mode="w")
    e = group.create_array(
        f"euler_{angles}", shape=euler.shape, chunks=(rows, cols, 3), dtype=euler.dtype
    )
    ph = group.create_array("phase", shape=phase.shape, chunks=(rows, cols), dtype=phase.dtype)
    for target, source in ((e, euler), (ph, phase)):
        if isinstance(source, da.Array):
            da.to_zarr(source.rechunk(target.chunks), target)
        else:
            target[...] = np.asarray(source)
