"""Maps stored in chunks: a zarr group read lazily as dask arrays (format "zarr").

Owns :func:`open_zarr_arrays`, :func:`write_zarr_map`, and the store addresses: a zarr map
may be a local folder or an address fsspec reads (``s3://bucket/survey.zarr``, ``gs://…``,
``https://…``, ``file:///abs/m.zarr``, ``memory://maps/m.zarr``), told apart by
:func:`is_store_address`, checked by :func:`check_store_address` and, for the batch's rerun
rule, hashed by its metadata documents (:func:`zarr_metadata_sha256`). An address stays the
string it was given, end to end: it is never joined to a folder or made a ``Path``.

The group holds the arrays the npz reader knows
(:func:`inclination.io.arrays.read_npz_arrays`): ``euler_deg`` or ``euler_rad``
(H, W, 3) in the declared unit and ``phase`` (H, W), in grid order (conventions §1), each
stored in chunks of rows × columns; the chunks of ``phase`` are the tiles of
:mod:`inclination.tiles` unless the job names a tile size. Nothing is read here but the
arrays' metadata: the values are read tile by tile by :mod:`inclination.tiles`. zarr, dask
and fsspec (which comes with dask) are the optional extra ``tiles``, imported only in this
module and in :mod:`inclination.tiles`; the fsspec backends of the object stores (s3fs,
gcsfs, adlfs, aiohttp) are the user's own install.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = [
    "ChunkedArrays",
    "check_store_address",
    "is_store_address",
    "open_zarr_arrays",
    "write_zarr_map",
    "zarr_metadata_sha256",
]

# RFC 3986 §3.1: a scheme is a letter, then letters, digits, '+', '-' or '.'.
_ADDRESS = re.compile(r"^([A-Za-z][A-Za-z0-9+.\-]*)://")

# The documents that describe a group and the arrays a map reads, zarr v3 and v2: what the
# batch hashes of a zarr map (the chunks are not read).
_METADATA_DOCS = ("zarr.json", ".zgroup", ".zattrs", ".zmetadata") + tuple(
    f"{name}/{doc}"
    for name in ("euler_deg", "euler_rad", "phase")
    for doc in ("zarr.json", ".zarray", ".zattrs")
)


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


def is_store_address(text) -> bool:
    """Whether a map's ``path`` is a store address (``scheme://…``) rather than a local path.

    Any ``scheme://`` prefix counts, known to fsspec or not, so a mistyped scheme is refused
    by :func:`check_store_address` with its name instead of being looked for as a local
    folder called ``s4:``. A local path (relative, absolute, Windows ``C:/…``) has no
    ``://`` after its first letters, and a ``PathLike`` is never an address.

    Examples
    --------
    >>> [is_store_address(t) for t in ("s3://b/m.zarr", "memory://m.zarr", "maps/m.zarr",
    ...                                 "/abs/m.zarr", "C:/maps/m.zarr", "foo://x")]
    [True, True, False, False, False, True]
    """
    return isinstance(text, str) and _ADDRESS.match(text) is not None


def _fsspec(address, path, pointer):
    try:
        import fsspec
    except ImportError:
        raise InputError(
            f"Expected fsspec (installed with dask) to read the store address {address!r}, "
            "got it not installed; install the extra: pip install 'inclination[tiles]'.",
            path=path,
            pointer=pointer,
        ) from None
    return fsspec


def check_store_address(address: str, *, path=None, pointer=None) -> None:
    """Refuse a store address whose scheme fsspec does not know.

    Whether the backend (s3fs for ``s3://``, gcsfs for ``gs://``, …) is installed and the
    store exists is found when the group is opened (:func:`open_zarr_arrays`).

    Parameters
    ----------
    address : str
        A string for which :func:`is_store_address` holds.
    path, pointer : optional
        The job file and the JSON pointer of the field, named in the error.

    Raises
    ------
    InputError
        The scheme is not one of fsspec's, or fsspec is not installed.

    Examples
    --------
    >>> import pytest
    >>> _ = pytest.importorskip("fsspec", reason="fsspec comes with the optional extra 'tiles'")
    >>> check_store_address("memory://maps/m.zarr")
    >>> try:
    ...     check_store_address("s4://bucket/m.zarr", path="job.json", pointer="/map/path")
    ... except InputError as e:
    ...     print(str(e)[:68])
    job.json: /map/path: Expected a store address with a scheme fsspec k
    """
    fsspec = _fsspec(address, path, pointer)
    scheme = _ADDRESS.match(address).group(1).lower()
    # The built-in names and any registered since (fsspec.register_implementation).
    known = set(fsspec.available_protocols()) | set(fsspec.registry)
    if scheme not in known:
        raise InputError(
            f"Expected a store address with a scheme fsspec knows (s3, gs, az, https, file, "
            f"memory, …), got {scheme!r} in {address!r}.",
            path=path,
            pointer=pointer,
        )


def _store_error(exc: BaseException, address, path, pointer) -> InputError:
    """One line for a store that cannot be opened: the backend, the group, the network."""
    import zarr.errors

    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    if isinstance(exc, ImportError):
        scheme = _ADDRESS.match(address).group(1)
        message = (
            f"Expected the fsspec backend for {scheme}:// addresses to read {address!r}, got "
            f"it not installed ({first}); install it (s3fs for s3://, gcsfs for gs://, adlfs "
            "for az://, aiohttp for https://)."
        )
    elif isinstance(exc, (zarr.errors.NodeNotFoundError, FileNotFoundError)):
        message = f"Expected a zarr group at {address!r}, got no group there."
    else:
        message = (
            f"Expected a readable zarr group at {address!r}, got {type(exc).__name__}: {first}."
        )
    return InputError(message, path=path, pointer=pointer)


def zarr_metadata_sha256(
    address: str | PathLike, *, storage_options=None, path_for_errors=None, pointer=None
) -> str:
    """SHA-256 of a zarr map's metadata documents, read through fsspec; chunks are not read.

    The documents of the group and of the arrays a map reads (``zarr.json`` for zarr v3;
    ``.zgroup``, ``.zarray``, ``.zattrs``, ``.zmetadata`` for v2), each hashed with its
    name and length. It changes when an array is added, removed, reshaped, rechunked or
    retyped, or the attributes change; values rewritten in place into the same arrays
    leave it as it was (docs/batch.md, "The rerun rule").

    Parameters
    ----------
    address : str or Path
        A local zarr folder or a store address.
    storage_options : mapping, optional
        Passed to the fsspec backend (the map entry's ``storage_options``).
    path_for_errors, pointer : optional
        The job file and the JSON pointer of the map's ``path``, named in errors.

    Raises
    ------
    InputError
        No backend, no store or no group there, or the store cannot be read.

    Examples
    --------
    >>> import pytest
    >>> _ = pytest.importorskip("zarr", reason="needs the optional extra 'tiles'")
    >>> _ = pytest.importorskip("dask", reason="needs the optional extra 'tiles'")
    >>> write_zarr_map("memory://doc/m.zarr", np.zeros((2, 2, 3)), np.ones((2, 2), np.int32),
    ...                chunks_px=(1, 2))
    >>> a = zarr_metadata_sha256("memory://doc/m.zarr")
    >>> write_zarr_map("memory://doc/m.zarr", np.ones((2, 2, 3)), np.ones((2, 2), np.int32),
    ...                chunks_px=(1, 2))  # new values, the same arrays
    >>> b = zarr_metadata_sha256("memory://doc/m.zarr")
    >>> write_zarr_map("memory://doc/m.zarr", np.ones((2, 2, 3)), np.ones((2, 2), np.int32),
    ...                chunks_px=(2, 2))  # rechunked
    >>> len(a), a == b, a == zarr_metadata_sha256("memory://doc/m.zarr")
    (64, True, False)
    """
    text = str(address)
    fsspec = _fsspec(text, path_for_errors, pointer)
    try:
        fs, root = fsspec.core.url_to_fs(text, **dict(storage_options or {}))
        h = hashlib.sha256()
        found = 0
        for name in _METADATA_DOCS:
            try:
                data = fs.cat_file(f"{root.rstrip('/')}/{name}")
            except FileNotFoundError:
                continue
            found += 1
            h.update(f"{name}\0{len(data)}\0".encode() + data)
    except InputError:
        raise
    except (ImportError, OSError, ValueError) as exc:
        raise _store_error(exc, text, path_for_errors, pointer) from None
    if not found:
        raise InputError(
            f"Expected a zarr group at {text!r}, got no group there.",
            path=path_for_errors,
            pointer=pointer,
        )
    return h.hexdigest()


def open_zarr_arrays(
    path: str | PathLike,
    *,
    angles: str,
    storage_options=None,
    path_for_errors=None,
    pointer=None,
) -> ChunkedArrays:
    """Open the arrays of a zarr map as dask arrays, one dask chunk per stored chunk.

    Parameters
    ----------
    path : str or Path
        A zarr group with ``euler_deg`` or ``euler_rad`` and ``phase``: a local folder,
        or a store address (:func:`is_store_address`), opened as given through fsspec.
    angles : {'deg', 'rad'}
        Which Euler array is expected.
    storage_options : mapping, optional
        For an address only: passed to the fsspec backend (``{"anon": True}`` for a
        public S3 bucket). Credentials come from the backend's usual environment
        variables and configuration files.
    path_for_errors, pointer : optional
        The job file and the JSON pointer of the map's ``path``: an address that cannot
        be opened is named with them (a local folder is named itself, as the file).

    Returns
    -------
    ChunkedArrays

    Raises
    ------
    InputError
        zarr or dask missing, no group at ``path``, an address with an unknown scheme,
        no backend for it or a store that cannot be read, an array missing, or a wrong
        shape or dtype (the message names the array).

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

    if is_store_address(path):
        group = _open_address(zarr, path, storage_options, path_for_errors, pointer)
    else:
        group = _open_folder(zarr, path)
    return _map_arrays(da, group, path, angles)


def _open_address(zarr, address, storage_options, path_for_errors, pointer):
    field = None if pointer is None else f"{pointer}/path"
    where = path_for_errors if path_for_errors is not None else address
    check_store_address(address, path=where, pointer=field)
    try:
        return zarr.open_group(address, mode="r", storage_options=storage_options)
    except Exception as exc:  # the backends raise their own kinds (network, auth, missing)
        raise _store_error(exc, address, where, field) from None


def _open_folder(zarr, path):
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
    return group


def _map_arrays(da, group, path, angles) -> ChunkedArrays:
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
