"""Array map files: npz archives and TIFF stacks with their JSON sidecar.

Owns the reading of maps stored as arrays in grid order (conventions §1): :func:`read_npz_arrays`
(``euler_deg`` or ``euler_rad``, ``phase`` and quality arrays), :func:`read_sidecar` (the
channel names of a TIFF, schemas/tiff-sidecar.schema.json) and :func:`read_tiff_arrays`. They
return plain arrays; :func:`inclination.maps.read_map` turns them into an
:class:`~inclination.maps.OrientationMap` and converts frames. Every failure is an
:class:`~inclination.errors.InputError` naming the file and the array or field.
"""

from __future__ import annotations

import math
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError
from .schemas import load_schema

__all__ = ["read_npz_arrays", "read_sidecar", "read_tiff_arrays"]


def _check_npz_members(path) -> None:
    """Refuse a file that is not a zip of .npy arrays, or whose headers promise more than it holds.

    A header is read before its array: a forged shape would otherwise make NumPy try to
    allocate whatever it promises (hundreds of GiB) before finding the data missing.
    """
    import zipfile

    from .limits import check_regular_file

    check_regular_file(path, kind="map")
    if not zipfile.is_zipfile(path):
        raise InputError(
            "Expected a NumPy .npz archive (a zip of .npy arrays), got a file that is not a zip "
            "(a single .npy, or a text table declared as npz?).",
            path=path,
        )
    try:
        with zipfile.ZipFile(path) as zf:
            for info in zf.infolist():
                with zf.open(info) as fh:
                    version = np.lib.format.read_magic(fh)
                    read_header = (
                        np.lib.format.read_array_header_1_0
                        if version == (1, 0)
                        else np.lib.format.read_array_header_2_0
                    )
                    shape, _fortran, dtype = read_header(fh)
                    header_bytes = fh.tell()
                if dtype.hasobject:
                    raise InputError(
                        f"Expected arrays of numbers, got objects in {info.filename!r}.",
                        path=path,
                        pointer=info.filename.removesuffix(".npy"),
                    )
                promised = math.prod(shape) * dtype.itemsize
                if promised > info.file_size - header_bytes:
                    raise InputError(
                        f"Expected array {info.filename.removesuffix('.npy')!r} to hold the "
                        f"{promised} bytes its header promises, got "
                        f"{max(info.file_size - header_bytes, 0)}.",
                        path=path,
                        pointer=info.filename.removesuffix(".npy"),
                    )
    except InputError:
        raise
    except (OSError, ValueError, EOFError, zipfile.BadZipFile, KeyError) as exc:
        raise InputError(
            f"Expected a NumPy .npz archive, got an unreadable one ({type(exc).__name__}).",
            path=path,
        ) from None


def _load_npz(path):
    _check_npz_members(path)
    try:
        with np.load(path, allow_pickle=False) as npz:
            return {k: npz[k] for k in npz.files}
    except (OSError, ValueError, EOFError) as exc:
        raise InputError(
            f"Expected a NumPy .npz archive, got an unreadable one ({type(exc).__name__}).",
            path=path,
        ) from None


def read_npz_arrays(
    path: str | PathLike, *, angles: str
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Arrays of an ``.npz`` map: ``euler_deg`` (or ``euler_rad``), ``phase``, quality.

    Parameters
    ----------
    path : str or Path
    angles : {'deg', 'rad'}
        Which Euler array is expected: ``euler_deg`` or ``euler_rad``.

    Returns
    -------
    euler : ndarray, shape (H, W, 3) float32 or float64, in the declared unit
    phase : ndarray, shape (H, W), integer as stored, or float64 (NaN allowed; checked
        by the caller)
    quality : dict of name -> ndarray (H, W) float64
        Every other array of shape (H, W).

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "m.npz")
    >>> np.savez(p, euler_deg=np.zeros((2, 3, 3)), phase=np.ones((2, 3)), ci=np.ones((2, 3)))
    >>> e, ph, q = read_npz_arrays(p, angles="deg")
    >>> e.shape, ph.shape, sorted(q)
    ((2, 3, 3), (2, 3), ['ci'])
    """
    arrays = _load_npz(path)
    key = f"euler_{angles}"
    for needed in (key, "phase"):
        if needed not in arrays:
            raise InputError(
                f"Expected an array named {needed!r} (angles declared {angles!r}), "
                f"got arrays {sorted(arrays)}.",
                path=path,
                pointer=needed,
            )
    euler = arrays.pop(key)
    phase = arrays.pop("phase")
    if euler.ndim != 3 or euler.shape[-1] != 3:
        raise InputError(
            f"Expected {key!r} to have shape (H, W, 3), got {euler.shape}.", path=path, pointer=key
        )
    if phase.shape != euler.shape[:2]:
        raise InputError(
            f"Expected 'phase' to have shape {euler.shape[:2]}, got {phase.shape}.",
            path=path,
            pointer="phase",
        )
    quality = {}
    for name, arr in arrays.items():
        if name in ("euler_deg", "euler_rad"):
            raise InputError(
                f"Expected only {key!r} (angles declared {angles!r}), got {name!r} too.",
                path=path,
                pointer=name,
            )
        if arr.shape != phase.shape or arr.dtype.kind not in "biuf":
            raise InputError(
                f"Expected quality array {name!r} to be numbers of shape {phase.shape}, "
                f"got {arr.dtype} {arr.shape}.",
                path=path,
                pointer=name,
            )
        quality[name] = arr.astype(np.float64)
    for name, arr in (("euler", euler), ("phase", phase)):
        if arr.dtype.kind not in "biuf":
            raise InputError(f"Expected numbers, got dtype {arr.dtype}.", path=path, pointer=name)
    # Floating angles and integer phase ids are handed over as stored: a float64 copy of a
    # 16-million-point map costs more than the whole grain stage, and the conversion
    # works in float64 block by block anyway.
    if euler.dtype.kind != "f":
        euler = euler.astype(np.float64)
    if phase.dtype.kind not in "iuf" or phase.dtype.kind == "b":
        phase = phase.astype(np.float64)
    return euler, phase, quality


def read_sidecar(path: str | PathLike) -> dict:
    """Read and validate a TIFF sidecar (schemas/tiff-sidecar.schema.json)."""
    from .limits import read_json, schema_validator

    if not Path(path).exists():
        raise InputError(
            "Expected the TIFF's JSON sidecar naming its channels, got no file at this path.",
            path=path,
        )
    doc = read_json(path, kind="sidecar")
    validator = schema_validator(load_schema("tiff-sidecar.schema.json"))
    errors = sorted(validator.iter_errors(doc), key=lambda e: list(e.absolute_path))
    if errors:
        err = errors[0]
        pointer = "/" + "/".join(str(p) for p in err.absolute_path)
        raise InputError(f"Expected a valid sidecar: {err.message}.", path=path, pointer=pointer)
    return doc


def read_tiff_arrays(
    path: str | PathLike, *, sidecar_path: str | PathLike, angles: str
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Channels of a TIFF stack named by its sidecar.

    Parameters
    ----------
    path : str or Path
        TIFF with C pages (or one (C, H, W) page series) of H × W float images.
    sidecar_path : str or Path
        JSON naming the channels in page order.
    angles : {'deg', 'rad'}
        The job's unit; must agree with the sidecar's ``angles`` when present.

    Returns
    -------
    euler : ndarray, shape (H, W, 3) float64
    phase : ndarray, shape (H, W) float64
    quality : dict of name -> ndarray (H, W) float64

    Examples
    --------
    >>> import tempfile, os, json, tifffile
    >>> d = tempfile.mkdtemp(); p = os.path.join(d, "m.tif")
    >>> tifffile.imwrite(p, np.zeros((5, 2, 3), np.float32), photometric="minisblack")
    >>> _ = Path(p + ".json").write_text(json.dumps(
    ...     {"schema_version": 1, "channels": ["phi1", "Phi", "phi2", "phase", "ci"]}))
    >>> e, ph, q = read_tiff_arrays(p, sidecar_path=p + ".json", angles="deg")
    >>> e.shape, sorted(q)
    ((2, 3, 3), ['ci'])
    """
    import tifffile

    side = read_sidecar(sidecar_path)
    if "angles" in side and side["angles"] != angles:
        raise InputError(
            f"Expected the sidecar's angles to agree with the job's {angles!r}, "
            f"got {side['angles']!r}.",
            path=sidecar_path,
            pointer="/angles",
        )
    try:
        stack = tifffile.imread(path)
    except FileNotFoundError:
        raise InputError("Expected an existing file, got none at this path.", path=path) from None
    except Exception as exc:  # tifffile raises several types for a bad file
        raise InputError(
            f"Expected a TIFF file, got an unreadable one ({exc}).", path=path
        ) from None
    channels = side["channels"]
    if stack.ndim == 2:
        stack = stack[None]
    if stack.ndim != 3 or stack.shape[0] != len(channels):
        found = stack.shape[0] if stack.ndim == 3 else stack.ndim
        raise InputError(
            f"Expected {len(channels)} channels as the sidecar names ({', '.join(channels)}), "
            f"got {found} (stack shape {stack.shape}).",
            path=path,
        )
    if stack.dtype.kind not in "biuf":
        raise InputError(f"Expected numeric channels, got dtype {stack.dtype}.", path=path)
    planes = {name: stack[c].astype(np.float64) for c, name in enumerate(channels)}
    euler = np.stack([planes.pop("phi1"), planes.pop("Phi"), planes.pop("phi2")], axis=-1)
    phase = planes.pop("phase")
    return euler, phase, planes
