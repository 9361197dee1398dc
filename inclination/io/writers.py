"""Map writers: an :class:`~inclination.maps.OrientationMap` as npz, TIFF + sidecar, or text.

Owns the files a map is written to. Each writer converts orientations and positions
back from S into the map's declared axes and data frame (conventions §2–§3), so that
:func:`inclination.maps.read_map` with the same declarations reads the same map. Every
file is written atomically (a temporary in the same folder, then a rename).

Float precision. Text files carry coordinates to 1e-6 µm and Euler angles to 1e-5°, the
float32 storage's own precision.
"""

from __future__ import annotations

import io
import os
import secrets
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO

import numpy as np

from ..errors import SettingError
from ..maps import OrientationMap
from ..report.columns import Column
from ..report.streams import encode_rows

__all__ = ["write_npz", "write_tiff", "write_csv"]

# The text table's cells as Python's % writes them: %.6f coordinates, %.5f angles, %d
# phase (the quality channels follow as %.7g), encoded column-wise by report.streams.
_MAP_FORMATS = [("float", 6)] * 2 + [("float", 5)] * 3 + [("int", 0)]


def _atomic(path: str | os.PathLike, write: Callable[[BinaryIO], object]) -> Path:
    """Write through a temporary file in the same folder, then rename over ``path``.

    The temporary is created with mode 0o666 less the umask, as an ordinary file
    would be (mkstemp's 0o600 would survive the rename).
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def _check_map(omap):
    if not isinstance(omap, OrientationMap):
        raise SettingError(f"Expected `omap` to be an OrientationMap, got {type(omap).__name__}.")


def write_npz(path: str | os.PathLike, omap: OrientationMap, *, compress: bool = True) -> Path:
    """Write a map as ``.npz``: ``euler_deg`` (H, W, 3) in the data frame, ``phase``, quality.

    Angles are converted back from S into the map's declared axes and data
    frame, so that :func:`read_map` with the same declarations reads the same
    map. Non-indexed points have NaN angles and phase 0. Written atomically.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile
    >>> e = np.array([[[10.0, 20.0, 30.0], [40.0, 50.0, 60.0]]])
    >>> omap = OrientationMap.from_euler_deg(e, [[1, 1]], grid="square", step_x_um=0.5)
    >>> p = write_npz(Path(tempfile.mkdtemp()) / "m.npz", omap)
    >>> from inclination.maps import read_map
    >>> back = read_map({"path": str(p), "format": "npz", "angles": "deg", "step_um": 0.5,
    ...                  "grid": "square", "axes": {"x": "right", "y": "down"}})
    >>> bool(np.allclose(back.quat, omap.quat, rtol=0, atol=1e-6))
    True
    """
    _check_map(omap)
    arrays = {"euler_deg": omap.euler_deg_declared(), "phase": np.asarray(omap.phase)}
    arrays.update({k: np.asarray(v) for k, v in omap.quality.items()})
    saver = np.savez_compressed if compress else np.savez
    return _atomic(path, lambda fh: saver(fh, **arrays))


def write_tiff(
    path: str | os.PathLike, omap: OrientationMap, *, sidecar_path: str | os.PathLike | None = None
) -> tuple[Path, Path]:
    """Write a map as a float32 TIFF stack (φ1, Φ, φ2, phase, quality...) and its JSON sidecar.

    One page per channel; the sidecar (schemas/tiff-sidecar.schema.json) names
    the channels in order. Angles in degrees in the map's data frame. Both
    files are written atomically; the sidecar defaults to ``path + '.json'``.

    Returns
    -------
    (Path, Path)
        The TIFF and the sidecar.

    Examples
    --------
    >>> import tempfile
    >>> e = np.array([[[10.0, 20.0, 30.0], [40.0, 50.0, 60.0]]])
    >>> omap = OrientationMap.from_euler_deg(e, [[1, 1]], grid="square", step_x_um=0.5)
    >>> tif, side = write_tiff(Path(tempfile.mkdtemp()) / "m.tif", omap)
    >>> from inclination.maps import read_map
    >>> back = read_map({"path": str(tif), "format": "tiff", "angles": "deg", "step_um": 0.5,
    ...                  "grid": "square", "axes": {"x": "right", "y": "down"}})
    >>> bool(np.allclose(back.quat, omap.quat, rtol=0, atol=1e-5))
    True
    """
    import json

    import tifffile

    _check_map(omap)
    path = Path(path)
    side = Path(str(path) + ".json") if sidecar_path is None else Path(sidecar_path)
    euler = omap.euler_deg_declared()
    names = ["phi1", "Phi", "phi2", "phase", *omap.quality]
    planes = [euler[..., 0], euler[..., 1], euler[..., 2], omap.phase, *omap.quality.values()]
    stack = np.stack([np.asarray(p, dtype=np.float32) for p in planes])
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, stack, photometric="minisblack")
    _atomic(path, lambda fh: fh.write(buffer.getbuffer()))
    doc = {"schema_version": 1, "channels": names, "angles": "deg"}
    text = (json.dumps(doc, indent=2) + "\n").encode("utf-8")
    _atomic(side, lambda fh: fh.write(text))
    return path, side


def write_csv(path: str | os.PathLike, omap: OrientationMap, *, delimiter: str = ",") -> Path:
    """Write a map as a text table in the declared frame (the reader's default columns).

    Columns ``x_um, y_um, phi1_deg, Phi_deg, phi2_deg, phase`` and then the
    quality channels. Coordinates are the declared coordinates of each grid
    point (``omap.axes``, with its origin), to 1e-6 µm; angles are Bunge, in
    degrees, in the map's data frame, to 1e-5° (the float32 storage's own
    precision); quality channels to 7 significant digits (``%.7g``). Every grid
    point is written; non-indexed points have ``nan`` angles and phase 0. The
    rows are encoded a block at a time, column by column
    (:func:`inclination.report.streams.encode_rows`, style ``printf``: the bytes of
    Python's ``%`` operator), and streamed into the file. Written atomically.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile
    >>> e = np.array([[[10.0, 20.0, 30.0], [40.0, 50.0, 60.0]]])
    >>> omap = OrientationMap.from_euler_deg(e, [[1, 1]], grid="square", step_x_um=0.5)
    >>> p = write_csv(Path(tempfile.mkdtemp()) / "m.csv", omap)
    >>> p.read_text().splitlines()[2]
    '0.500000,0.000000,40.00000,50.00000,60.00000,1'
    """
    _check_map(omap)
    if len(delimiter) != 1 or delimiter in "\n\r\"'.-+0123456789en":
        raise SettingError(
            f"Expected `delimiter` to be one separator character, got {delimiter!r}."
        )
    xy = omap.positions_declared_um().reshape(-1, 2)
    euler = omap.euler_deg_declared().reshape(-1, 3)
    table = {
        "x_um": xy[:, 0],
        "y_um": xy[:, 1],
        "phi1_deg": euler[:, 0],
        "Phi_deg": euler[:, 1],
        "phi2_deg": euler[:, 2],
        "phase": np.asarray(omap.phase).ravel(),
    }
    # Quality channels by position: a channel may be named like a fixed column.
    columns = [Column(f"#{k}", kind, d) for k, (kind, d) in enumerate(_MAP_FORMATS)]
    cells = dict(zip((c.name for c in columns), table.values(), strict=True))
    for k, q in enumerate(omap.quality.values()):
        columns.append(Column(f"#q{k}", "general", 7))
        cells[f"#q{k}"] = np.asarray(q, dtype=np.float64).ravel()
    header = [*table, *omap.quality]

    def write(fh):
        fh.write((delimiter.join(header) + "\n").encode("utf-8"))
        # The tables' 16,384 rows a block (about 2 MB of words): with 65,536 the block's
        # buffers (8 MB) went back to the system and were faulted in again each block,
        # half a second of system time on a 2000 x 2000 map (docs/performance.md).
        for block in encode_rows(cells, columns, style="printf", delimiter=delimiter):
            fh.write(block)

    return _atomic(path, write)
