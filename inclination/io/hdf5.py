"""HDF5 map files: datasets at the paths the job names (format "hdf5").

Owns :func:`read_hdf5_arrays` and :func:`list_hdf5_datasets`. No particular
program's layout is assumed: the job's ``map.datasets`` names the Euler angles
(H, W, 3), the phase ids (H, W) and, optionally, x and y coordinates and quality
channels. The arrays come back in grid order (conventions §1) like the npz
reader's, and :func:`inclination.maps.read_map` applies the same unit and frame
checks to them. h5py is the optional extra ``hdf5``, imported only in this module.
"""

from __future__ import annotations

from os import PathLike

import numpy as np

from ..errors import InputError

__all__ = ["read_hdf5_arrays", "list_hdf5_datasets"]


def _h5py(path):
    try:
        import h5py
    except ImportError:
        raise InputError(
            "Expected h5py to read an hdf5 map, got no h5py installed; "
            "install the extra: pip install 'inclination[hdf5]'.",
            path=path,
        ) from None
    return h5py


def _open(path):
    h5py = _h5py(path)
    try:
        return h5py.File(path, "r")
    except FileNotFoundError:
        raise InputError("Expected an existing file, got none at this path.", path=path) from None
    except OSError as exc:
        raise InputError(
            f"Expected an HDF5 file, got an unreadable one ({exc}).", path=path
        ) from None


def list_hdf5_datasets(path: str | PathLike) -> dict[str, tuple]:
    """Every numeric dataset of an HDF5 file: path -> (shape, dtype kind).

    Examples
    --------
    >>> import tempfile, os, pytest
    >>> h5py = pytest.importorskip("h5py", reason="needs the optional extra 'hdf5'")
    >>> p = os.path.join(tempfile.mkdtemp(), "m.h5")
    >>> with h5py.File(p, "w") as f:
    ...     _ = f.create_dataset("scan/euler", data=np.zeros((2, 3, 3)))
    >>> list_hdf5_datasets(p)
    {'scan/euler': ((2, 3, 3), 'f')}
    """
    h5py = _h5py(path)
    found = {}
    with _open(path) as f:

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset) and obj.dtype.kind in "biuf":
                found[name] = (tuple(obj.shape), obj.dtype.kind)

        f.visititems(visit)
    return found


def _dataset(f, key, name, path, available):
    h5py = _h5py(path)
    obj = f.get(name)
    if not isinstance(obj, h5py.Dataset):
        import difflib

        near = difflib.get_close_matches(name, available, n=1)
        hint = f" (did you mean {near[0]!r}?)" if near else ""
        raise InputError(
            f"Expected a dataset at {name!r} for {key}{hint}, got none; "
            f"numeric datasets in the file: {sorted(available)}.",
            path=path,
            pointer=f"datasets/{key}",
        )
    arr = obj[()]
    if arr.dtype.kind not in "biuf":
        raise InputError(
            f"Expected numbers in dataset {name!r} ({key}), got dtype {arr.dtype}.",
            path=path,
            pointer=f"datasets/{key}",
        )
    return arr


def read_hdf5_arrays(
    path: str | PathLike, *, datasets: dict
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray], tuple]:
    """Arrays of an HDF5 map at the named dataset paths.

    Parameters
    ----------
    path : str or Path
    datasets : dict
        ``euler`` (H, W, 3), ``phase`` (H, W), optional ``x`` and ``y`` (H, W) in µm
        along the declared axes, optional ``quality`` {name: dataset path}.

    Returns
    -------
    euler : ndarray, shape (H, W, 3), float as stored, in the job's declared unit
    phase : ndarray, shape (H, W), integer as stored or float64
    quality : dict of name -> ndarray (H, W) float64
    coords : tuple
        ``(x, y)`` float64 arrays (H, W), or ``()`` when the job names none.

    Raises
    ------
    InputError
        h5py missing, a path that is not a dataset (the file's datasets listed),
        a wrong shape or dtype.

    Examples
    --------
    >>> import tempfile, os, pytest
    >>> h5py = pytest.importorskip("h5py", reason="needs the optional extra 'hdf5'")
    >>> p = os.path.join(tempfile.mkdtemp(), "m.h5")
    >>> with h5py.File(p, "w") as f:
    ...     _ = f.create_dataset("e", data=np.zeros((2, 3, 3)))
    ...     _ = f.create_dataset("p", data=np.ones((2, 3), np.int8))
    >>> e, ph, q, xy = read_hdf5_arrays(p, datasets={"euler": "e", "phase": "p"})
    >>> e.shape, ph.dtype.kind, q, xy
    ((2, 3, 3), 'i', {}, ())
    """
    available = list(list_hdf5_datasets(path))
    with _open(path) as f:
        euler = _dataset(f, "euler", datasets["euler"], path, available)
        phase = _dataset(f, "phase", datasets["phase"], path, available)
        if euler.ndim != 3 or euler.shape[-1] != 3:
            raise InputError(
                f"Expected dataset {datasets['euler']!r} (euler) to have shape (H, W, 3), "
                f"got {euler.shape}.",
                path=path,
                pointer="datasets/euler",
            )
        shape = euler.shape[:2]
        extra = {f"quality/{k}": v for k, v in (datasets.get("quality") or {}).items()}
        extra.update({k: datasets[k] for k in ("x", "y") if k in datasets})
        arrays = {"phase": phase}
        names = {"phase": datasets["phase"], **extra}
        for key, name in extra.items():
            arrays[key] = _dataset(f, key, name, path, available)
    for key, arr in arrays.items():
        if arr.shape != shape:
            raise InputError(
                f"Expected dataset {names[key]!r} ({key}) to have shape {shape} "
                f"like the Euler angles, got {arr.shape}.",
                path=path,
                pointer=f"datasets/{key}",
            )
    if euler.dtype.kind != "f":
        euler = euler.astype(np.float64)
    if phase.dtype.kind == "b":
        phase = phase.astype(np.float64)
    quality = {
        k.split("/", 1)[1]: v.astype(np.float64) for k, v in arrays.items() if "/" in k
    }
    coords = ()
    if "x" in arrays or "y" in arrays:
        if not ("x" in arrays and "y" in arrays):
            raise InputError(
                "Expected both x and y datasets or neither, got one of them.",
                path=path,
                pointer="datasets",
            )
        coords = (arrays["x"].astype(np.float64), arrays["y"].astype(np.float64))
    return euler, phase, quality, coords
