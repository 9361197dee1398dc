"""The orientation map record, its grid geometry, and the map reader behind the job file.

An :class:`OrientationMap` holds orientations already converted into the sample
frame S (conventions §2–§3) on a square or hexagonal grid (§1); :func:`row_pitch_um`
is the one formula for the distance between its rows. Conversion from the user's
declared axes and data-frame rotation happens once, in :func:`read_map`; the
writers (:mod:`inclination.io.writers`) convert back, so a written file carries
Euler angles and coordinates in the declared frame, as it was read.

Float32 storage. Quaternion components are stored as float32 (relative error
≤ 6e-8), so an orientation read back differs from the float64 one by at most
about 1e-5°; text files written here carry coordinates to 1e-6 µm and Euler
angles to 1e-5°.
"""

from __future__ import annotations

import difflib
import hashlib
import os
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

import numpy as np

from ._validation import check_one_of
from .crystal.rotations import quat_as_euler_deg, quat_from_euler_deg
from .errors import InputError, SettingError
from .frames import (
    ROTATION_SENSES,
    DeclaredAxes,
    data_frame_quat,
    orientations_to_declared,
    orientations_to_sample,
)
from .io.arrays import read_npz_arrays, read_tiff_arrays
from .io.chunked import is_store_address
from .io.text import TABLE_DELIMITERS, place_on_grid, read_table

__all__ = [
    "GRIDS",
    "MAP_FORMATS",
    "OrientationMap",
    "read_map",
    "read_map_file",
    "row_pitch_um",
]

GRIDS = ("square", "hexagonal")
MAP_FORMATS = ("csv", "tsv", "text", "npz", "tiff", "hdf5", "zarr")
_ANGLE_UNITS = ("deg", "rad")
_ROLES = ("x_um", "y_um", "phi1", "Phi", "phi2", "phase")
# Names a quality channel may not take: they are the written files' own columns/arrays.
_RESERVED = frozenset(
    {"x_um", "y_um", "phi1_deg", "Phi_deg", "phi2_deg", "phase", "euler_deg", "euler_rad"}
    | {"phi1", "Phi", "phi2"}
)
_IDENTITY = (1.0, 0.0, 0.0, 0.0)
_SQRT3_2 = np.sqrt(3.0) / 2.0
# Above this many indexed points a table whose angles never exceed 2π cannot be in degrees.
_UNIT_CHECK_MIN_POINTS = 100
# Points converted per block (float64 temporaries of a block stay near 10 MB).
_BLOCK = 1 << 18


def row_pitch_um(grid: str, step_um: float) -> float:
    """Distance between neighbouring map rows (µm), the one grid-geometry formula (conventions §1).

    Parameters
    ----------
    grid : {'square', 'hexagonal'}
    step_um : float
        The step along Y_S on a square grid; the in-row neighbour distance on a
        hexagonal grid, whose rows are ``step·√3/2`` apart.

    Returns
    -------
    float

    Examples
    --------
    >>> row_pitch_um("square", 0.5), round(row_pitch_um("hexagonal", 2.0), 6)
    (0.5, 1.732051)
    """
    check_one_of(grid, "grid", GRIDS)
    return float(step_um * (_SQRT3_2 if grid == "hexagonal" else 1.0))


def _read_only(arr: np.ndarray) -> np.ndarray:
    arr.flags.writeable = False
    if isinstance(arr.base, np.ndarray) and arr.base.flags.owndata:
        arr.base.flags.writeable = False
    return arr


def _sealed(arr: np.ndarray) -> bool:
    """True when no writeable reference to ``arr``'s memory can exist (itself or its owner)."""
    if arr.flags.writeable:
        return False
    if arr.flags.owndata:
        return True
    base = arr.base
    return isinstance(base, np.ndarray) and base.flags.owndata and not base.flags.writeable


@dataclass(frozen=True, eq=False)
class OrientationMap:
    """An orientation map in the sample frame S (conventions §1–§3).

    Parameters
    ----------
    quat : array_like, shape (H, W, 4)
        Unit quaternions (scalar first, on the last axis as everywhere in the
        package) of the orientations ``g_S`` (S to crystal). Points that are not
        valid hold the identity. Stored as C-contiguous float32 planes (4, H, W):
        ``quat`` is the (H, W, 4) view of them, and ``np.moveaxis(omap.quat, -1, 0)``
        gives the contiguous planes back without a copy, for kernels that run
        component by component.
    phase : array_like of int, shape (H, W)
        Phase ids; 0 where not indexed. Stored as int32.
    valid : array_like of bool, shape (H, W), optional
        Indexed, finite and of a known phase. Default ``phase != 0``; must
        imply ``phase != 0``.
    quality : mapping of str to array_like (H, W), optional
        Named float32 channels (e.g. a confidence index), NaN where absent.
    grid : {'square', 'hexagonal'}
    step_x_um, step_y_um : float
        Steps along X_S and Y_S (µm). On a hexagonal grid both are the in-row
        neighbour distance ``s`` and rows are ``s·√3/2`` apart.
    axes : DeclaredAxes
        The declared axes the map was read from (with their origin), used to
        write angles and positions back in the user's frame.
    data_frame_rotation : array_like, shape (4,)
        Quaternion of the declared data-frame rotation (frames.data_frame_quat).
    rotation_sense : {'passive', 'active'}
        How the stored rotations were read (conventions §3); ``quat`` is in S either way.
    provenance : mapping
        Source path, SHA-256 of the file, reader and its settings.

    Every array is copied and set read-only; the record is immutable.

    Examples
    --------
    >>> q = np.zeros((2, 3, 4)); q[..., 0] = 1.0
    >>> omap = OrientationMap(q, np.ones((2, 3), int), grid="square", step_x_um=0.5,
    ...                       step_y_um=0.5)
    >>> omap.shape, omap.n_points, omap.quat.shape, omap.quat.flags.writeable
    ((2, 3), 6, (2, 3, 4), False)
    >>> np.moveaxis(omap.quat, -1, 0).flags.c_contiguous
    True
    >>> omap.positions_sample_um()[1, 2].tolist()
    [1.0, 0.5]
    """

    quat: np.ndarray
    phase: np.ndarray
    valid: np.ndarray | None = None
    quality: Mapping = field(default_factory=dict)
    grid: str = "square"
    step_x_um: float = 1.0
    step_y_um: float = 1.0
    axes: DeclaredAxes = field(default_factory=DeclaredAxes)
    data_frame_rotation: np.ndarray = _IDENTITY
    provenance: Mapping = field(default_factory=dict)
    rotation_sense: str = "passive"

    def __post_init__(self):
        # Planes (4, H, W) that own their memory, are float32, C-ordered and already
        # read-only (as the readers hand over, seen through the (H, W, 4) view) cannot
        # change under the record: they are kept, not copied, which spares a fresh
        # 16-bytes-per-point allocation on every map read.
        q_in = self.quat if isinstance(self.quat, np.ndarray) else np.asarray(self.quat)
        if q_in.ndim != 3 or q_in.shape[-1] != 4:
            raise SettingError(f"Expected `quat` to have shape (H, W, 4), got {q_in.shape}.")
        quat = np.moveaxis(q_in, -1, 0)
        adopted = quat.dtype == np.float32 and quat.flags.c_contiguous and _sealed(quat)
        if not adopted:
            quat = np.array(quat, dtype=np.float32, order="C", copy=True)
        shape = quat.shape[1:]
        phase = np.asarray(self.phase)
        if phase.ndim != 2 or phase.shape != shape:
            raise SettingError(f"Expected `phase` to have shape {shape}, got {phase.shape}.")
        if phase.dtype.kind not in "iu":
            raise TypeError(f"Expected `phase` to be integers, got dtype {phase.dtype}.")
        if phase.size and (phase.min() < 0 or phase.max() > np.iinfo(np.int32).max):
            raise SettingError("Expected `phase` to hold ids >= 0, got a negative id.")
        # Sealed int32 / bool arrays (as the readers hand over) are adopted like the
        # planes: nothing can write to them, so a copy would only cost 5 bytes per point.
        if not (phase.dtype == np.int32 and phase.flags.c_contiguous and _sealed(phase)):
            phase = np.array(phase, dtype=np.int32, order="C", copy=True)
        if self.valid is None:
            valid = phase != 0
        else:
            valid = np.asarray(self.valid)
            if not (valid.dtype == bool and valid.flags.c_contiguous and _sealed(valid)):
                valid = np.array(valid, order="C", copy=True)
            if valid.dtype != bool or valid.shape != shape:
                raise SettingError(
                    f"Expected `valid` to be bool of shape {shape}, "
                    f"got {valid.dtype} {valid.shape}."
                )
            if np.any(valid & (phase == 0)):
                raise SettingError("Expected `valid` to be False wherever `phase` is 0, got True.")
        # Identity at the points that are not valid first, then the checks run over the
        # whole array in blocks: no gather of the valid points, no full-size temporaries.
        if adopted:
            if not np.all(quat[:, ~valid] == np.asarray(_IDENTITY, dtype=np.float32)[:, None]):
                raise SettingError("Expected `quat` to hold the identity where not valid.")
        else:
            quat[:, ~valid] = np.asarray(_IDENTITY, dtype=np.float32)[:, None]
        flat = quat.reshape(4, -1)
        worst = 0.0
        for start in range(0, flat.shape[1], 1 << 20):
            block = flat[:, start : start + (1 << 20)]
            norm2 = np.einsum("kn,kn->n", block, block, dtype=np.float64)
            if norm2.size == 0:
                continue
            # |√x - 1| is largest at the smallest or the largest x, and a NaN or inf
            # anywhere shows in one of the two: two reductions, no per-point sqrt.
            lo, hi = float(norm2.min()), float(norm2.max())
            if not (np.isfinite(lo) and np.isfinite(hi)):
                raise SettingError("Expected `quat` to be finite at valid points, got NaN or inf.")
            worst = max(worst, abs(np.sqrt(lo) - 1.0), abs(np.sqrt(hi) - 1.0))
        if worst > 1e-3:
            raise SettingError(
                f"Expected `quat` to be unit at valid points, got a norm off by {worst:.6g}."
            )
        check_one_of(self.grid, "grid", GRIDS)
        for name in ("step_x_um", "step_y_um"):
            value = getattr(self, name)
            if not (np.isfinite(value) and value > 0):
                raise SettingError(f"Expected `{name}` to be a finite number > 0, got {value!r}.")
            object.__setattr__(self, name, float(value))
        if self.grid == "hexagonal" and self.step_x_um != self.step_y_um:
            raise SettingError(
                "Expected `step_x_um` == `step_y_um` on a hexagonal grid, "
                f"got {self.step_x_um} and {self.step_y_um}."
            )
        if not isinstance(self.axes, DeclaredAxes):
            raise TypeError(f"Expected `axes` to be DeclaredAxes, got {type(self.axes).__name__}.")
        quality = {}
        for name, arr in dict(self.quality).items():
            if not isinstance(name, str) or not name or name in _RESERVED:
                raise SettingError(
                    f"Expected quality names to be non-empty and not one of "
                    f"{tuple(sorted(_RESERVED))}, got {name!r}."
                )
            arr = np.array(arr, dtype=np.float32, order="C", copy=True)
            if arr.shape != shape:
                raise SettingError(
                    f"Expected quality channel {name!r} to have shape {shape}, got {arr.shape}."
                )
            quality[name] = _read_only(arr)
        dfr = np.array(self.data_frame_rotation, dtype=np.float64, copy=True)
        if dfr.shape != (4,) or abs(np.linalg.norm(dfr) - 1.0) > 1e-6:
            raise SettingError(
                f"Expected `data_frame_rotation` to be a unit quaternion (4,), got {dfr!r}."
            )
        object.__setattr__(self, "quat", np.moveaxis(_read_only(quat), 0, -1))
        object.__setattr__(self, "phase", _read_only(phase))
        object.__setattr__(self, "valid", _read_only(valid))
        object.__setattr__(self, "quality", MappingProxyType(quality))
        object.__setattr__(self, "data_frame_rotation", _read_only(dfr))
        if self.rotation_sense not in ROTATION_SENSES:
            raise SettingError(
                f"Expected `rotation_sense` to be one of {ROTATION_SENSES}, "
                f"got {self.rotation_sense!r}."
            )
        object.__setattr__(self, "provenance", MappingProxyType(dict(self.provenance)))

    @classmethod
    def from_euler_deg(
        cls,
        euler_deg,
        phase,
        *,
        grid: str,
        step_x_um: float,
        step_y_um: float | None = None,
        axes: DeclaredAxes | None = None,
        data_frame_rotation=None,
        quality=None,
        provenance=None,
    ) -> OrientationMap:
        """Build from Bunge Euler angles (degrees) referred to the data frame.

        Parameters
        ----------
        euler_deg : array_like, shape (H, W, 3)
            (φ1, Φ, φ2) of ``g_data`` (conventions §3), degrees; NaN where not indexed.
            With the default axes (x right, y down) and no data-frame rotation
            these are orientations in S.
        phase : array_like of int, shape (H, W)
            0 where not indexed. Points with non-finite angles become phase 0.
        grid, step_x_um, step_y_um
            As in the class; ``step_y_um`` defaults to ``step_x_um``. Steps are
            along X_S and Y_S.
        axes : DeclaredAxes, optional
            Default: S itself.
        data_frame_rotation : str, mapping or (4,) quaternion, optional
            A job-file spec (frames.data_frame_quat) or a quaternion.
        quality, provenance : mapping, optional

        Examples
        --------
        >>> e = np.zeros((1, 2, 3)); e[0, 1] = np.nan
        >>> omap = OrientationMap.from_euler_deg(e, [[1, 1]], grid="square", step_x_um=1.0)
        >>> omap.valid.tolist(), omap.phase.tolist()
        ([[True, False]], [[1, 0]])
        """
        e = np.asarray(euler_deg, dtype=np.float64)
        if e.ndim != 3 or e.shape[-1] != 3:
            raise SettingError(f"Expected `euler_deg` to have shape (H, W, 3), got {e.shape}.")
        ph = np.asarray(phase)
        if ph.shape != e.shape[:2]:
            raise SettingError(f"Expected `phase` to have shape {e.shape[:2]}, got {ph.shape}.")
        axes = DeclaredAxes() if axes is None else axes
        dfr = _as_dfr_quat(data_frame_rotation)
        valid = (ph != 0) & np.all(np.isfinite(e), axis=-1)
        quat = _quat_planes_sample(e, valid, axes, dfr)
        return cls(
            np.moveaxis(quat, 0, -1),
            np.where(valid, ph, 0).astype(np.int32),
            valid,
            quality={} if quality is None else quality,
            grid=grid,
            step_x_um=step_x_um,
            step_y_um=step_x_um if step_y_um is None else step_y_um,
            axes=axes,
            data_frame_rotation=dfr,
            provenance={} if provenance is None else provenance,
        )

    @property
    def shape(self) -> tuple:
        """(H, W)."""
        return self.phase.shape

    @property
    def n_points(self) -> int:
        """H·W, every grid point, indexed or not."""
        return int(self.phase.size)

    @property
    def row_pitch_um(self) -> float:
        """Distance between rows (µm): ``step_y_um``, or ``step·√3/2`` on a hexagonal grid."""
        return row_pitch_um(self.grid, self.step_y_um)

    def positions_sample_um(self) -> np.ndarray:
        """Positions of every grid point in S, shape (H, W, 2), µm (conventions §1).

        Point (i, j) sits at (j·step_x, i·step_y) on a square grid; on a
        hexagonal grid rows are step·√3/2 apart and odd rows shift by step/2.
        """
        h, w = self.shape
        # Written into place: a map export's positions are tens of MB.
        out = np.empty((h, w, 2))
        out[..., 0] = np.arange(w) * self.step_x_um
        if self.grid == "hexagonal":
            out[..., 0] += 0.5 * self.step_x_um * (np.arange(h) % 2)[:, None]
        out[..., 1] = (np.arange(h) * self.row_pitch_um)[:, None]
        return out

    def euler_deg_declared(self) -> np.ndarray:
        """Bunge angles (H, W, 3) of the orientations in the data frame, as read; NaN if invalid.

        Examples
        --------
        >>> e = np.array([[[30.0, 40.0, 50.0]]])
        >>> omap = OrientationMap.from_euler_deg(e, [[1]], grid="square", step_x_um=1.0,
        ...                                      axes=DeclaredAxes("left", "up"))
        >>> omap.euler_deg_declared().round(4).tolist()
        [[[30.0, 40.0, 50.0]]]
        """
        out = np.full((self.quat.shape[0] * self.quat.shape[1], 3), np.nan)
        quat = self.quat.reshape(-1, 4)
        valid = self.valid.reshape(-1)
        # In blocks of points, as on reading: the float64 temporaries stay small (about
        # three times faster on a 2000 x 2000 map than one pass); every point is converted
        # on its own, so the angles do not depend on the block.
        for start in range(0, len(valid), _BLOCK):
            part = slice(start, start + _BLOCK)
            rows = np.flatnonzero(valid[part]) + start
            q_data = orientations_to_declared(
                quat[rows].astype(np.float64),
                self.axes,
                self.data_frame_rotation,
                rotation_sense=self.rotation_sense,
            )
            out[rows] = quat_as_euler_deg(q_data)
        return out.reshape(self.shape + (3,))

    def positions_declared_um(self) -> np.ndarray:
        """Positions of every grid point in declared coordinates, shape (H, W, 2), µm."""
        return self.axes.points_to_declared(self.positions_sample_um())


def _as_dfr_quat(spec) -> np.ndarray:
    if spec is None or isinstance(spec, (str, Mapping)):
        return data_frame_quat(spec)
    q = np.asarray(spec, dtype=np.float64)
    if q.shape != (4,):
        raise SettingError(f"Expected `data_frame_rotation` to have shape (4,), got {q.shape}.")
    return q / np.linalg.norm(q)


def _start_conversion(pool, columns, valid_rows, axes, dfr, *, radians=False):
    """Queue the conversion of data-frame Euler angles to S quaternions on ``pool``.

    ``columns`` are the three angle columns (N,), in the file's unit; rows where
    ``valid_rows`` is False keep the identity. Returns ``(out, futures)``: ``out``
    (4, N) float32 is filled as the futures complete, each returning the largest
    |angle| of its block (for the unit check). Blocks keep the float64 temporaries
    small, and numpy's trigonometry releases the GIL, so the blocks run on two
    cores while the caller places points on the grid.
    """
    out = np.empty((4, valid_rows.size), dtype=np.float32)
    identity = np.array([1.0, 0.0, 0.0, 0.0])
    # Data already in S (declared axes = S, no data-frame turn): the conversion is the
    # identity, so it is skipped rather than multiplied out.
    same_frame = axes.is_sample_frame and (
        dfr is None or np.array_equal(np.asarray(dfr, float), identity)
    )

    def convert(start):
        # Contiguous blocks over every row (no gather of the valid rows): points that
        # are not valid are converted from zero angles, then set to the identity.
        stop = min(start + _BLOCK, valid_rows.size)
        v = valid_rows[start:stop]
        e = np.stack([c[start:stop] for c in columns], axis=-1).astype(np.float64)
        e[~v] = 0.0
        largest = float(np.max(np.abs(e))) if e.size else 0.0
        q = quat_from_euler_deg(np.rad2deg(e) if radians else e, dtype=np.float32)
        if not same_frame:
            q = orientations_to_sample(q, axes, dfr)
        q[~v] = identity
        out[:, start:stop] = q.T
        return largest

    futures = [pool.submit(convert, k) for k in range(0, valid_rows.size, _BLOCK)]
    return out, futures


def _wait(futures, progress=None) -> float:
    largest = 0.0
    for done, f in enumerate(futures, start=1):
        largest = max(largest, f.result())
        if progress is not None:
            progress(done / len(futures))
    return largest


def _quat_planes_sample(euler, valid, axes, dfr):
    """(4, H, W) float32 quaternions in S from data-frame Euler angles in degrees."""
    columns = [euler[..., k].reshape(-1) for k in range(3)]  # strided views, no copies
    with ThreadPoolExecutor(max_workers=2) as pool:
        out, futures = _start_conversion(pool, columns, valid.ravel(), axes, dfr)
        _wait(futures)
    return out.reshape((4, *valid.shape))


# ----------------------------------------------------------------------------- reading


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 22), b""):
            digest.update(chunk)
    return digest.hexdigest()


_MAX_EULER_DEG = 720.0


def _check_units(largest, n_valid, angles, path):
    """Refuse angles whose size contradicts the declared unit (conventions §3)."""
    limit = 2.0 * np.pi * 1.001
    if angles == "rad" and largest > limit:
        raise InputError(
            f"Expected angles in radians as declared (|angle| <= 2π), got {largest:.6g}; "
            'if the file holds degrees, declare "angles": "deg".',
            path=path,
        )
    if angles == "deg" and largest > _MAX_EULER_DEG:
        # Exporters write 0..360° or -180..180°; far beyond is a broken cell, and past
        # ~1e16° the angle has no significant digits left.
        raise InputError(
            f"Expected Euler angles within ±{_MAX_EULER_DEG:g}°, got {largest:.6g}°.", path=path
        )
    if angles == "deg" and n_valid > _UNIT_CHECK_MIN_POINTS and largest < limit:
        raise InputError(
            f"Expected angles in degrees as declared, got {n_valid} indexed points whose angles "
            f"never exceed {largest:.4g} (below 2π): they look like radians; if so, "
            'declare "angles": "rad".',
            path=path,
        )


def _phase_values(raw, phase_ids, path, line_of):
    """Integer phase ids from a float or integer column; NaN is 0. InputError for bad ids."""
    if raw.dtype.kind in "iu":
        # Integer arrays (npz, TIFF) need neither the NaN nor the whole-number test.
        finite = None
        bad = np.flatnonzero(raw < 0) if raw.dtype.kind == "i" else np.empty(0, int)
    else:
        finite = np.isfinite(raw)
        # NaN is "not indexed"; an infinite or huge id is a broken cell.
        bad = np.flatnonzero(
            np.isinf(raw) | (finite & ((raw < 0) | (raw != np.rint(raw)) | (raw >= 2**31)))
        )
    if bad.size:
        k = int(bad[0])
        raise InputError(
            f"Expected phase ids to be whole numbers >= 0 and < 2^31, got {raw[k]!r}.",
            path=path,
            pointer=line_of(k),
        )
    if finite is None:
        phase = raw.astype(np.int32, copy=False) if raw.max(initial=0) < 2**31 else raw
    else:
        phase = np.where(finite, raw, 0.0).astype(np.int64)
    if phase_ids is not None:
        known = np.asarray(sorted(set(int(p) for p in phase_ids)), dtype=np.int64)
        # A job names a handful of phases: one comparison per phase beats a sort or a
        # lookup table over millions of points.
        accepted = phase == 0
        for k in known.tolist():
            accepted |= phase == k
        unknown = np.flatnonzero(~accepted) if not accepted.all() else np.empty(0, int)
        if unknown.size:
            k = int(unknown[0])
            raise InputError(
                f"Expected phase ids among the job's phases {tuple(known.tolist())} "
                f"(or 0 for not indexed), got {int(phase[k])}.",
                path=path,
                pointer=line_of(k),
            )
    return phase


def _steps_sample(spec, axes, grid, job_path, pointer):
    """Declared steps → (step along X_S, step along Y_S), either may be None."""
    has_one = "step_um" in spec
    has_xy = "step_x_um" in spec or "step_y_um" in spec
    if has_one and has_xy:
        raise InputError(
            "Expected either 'step_um' or 'step_x_um' with 'step_y_um', got both.",
            path=job_path,
            pointer=pointer,
        )
    if has_xy and not ("step_x_um" in spec and "step_y_um" in spec):
        raise InputError(
            "Expected 'step_x_um' and 'step_y_um' together, got one of them.",
            path=job_path,
            pointer=pointer,
        )
    for key in ("step_um", "step_x_um", "step_y_um"):
        if key in spec:
            value = spec[key]
            ok = isinstance(value, (int, float)) and not isinstance(value, bool)
            if not ok or not np.isfinite(value) or value <= 0:
                raise InputError(
                    f"Expected a step > 0 µm, got {value!r}.",
                    path=job_path,
                    pointer=f"{pointer}/{key}",
                )
    if has_one:
        return float(spec["step_um"]), float(spec["step_um"])
    if not has_xy:
        return None, None
    if grid == "hexagonal":
        raise InputError(
            "Expected a single 'step_um' on a hexagonal grid, got 'step_x_um'/'step_y_um'.",
            path=job_path,
            pointer=pointer,
        )
    sx, sy = float(spec["step_x_um"]), float(spec["step_y_um"])
    # Declared x lies along X_S when it points right or left, else along Y_S.
    return (sx, sy) if axes.x in ("right", "left") else (sy, sx)


def _spec_choice(spec, key, allowed, job_path, pointer, default=None):
    value = spec.get(key, default)
    if value not in allowed:
        raise InputError(
            f"Expected one of {allowed}, got {value!r}.", path=job_path, pointer=f"{pointer}/{key}"
        )
    return value


def read_map(
    spec: Mapping,
    *,
    base_dir=None,
    phase_ids=None,
    path_for_errors=None,
    pointer: str = "/map",
    progress=None,
) -> OrientationMap:
    """Read an orientation map as the job file describes it, converting into S.

    Parameters
    ----------
    spec : mapping
        The job's map entry (schemas/job.schema.json ``$defs/map``): ``path``,
        ``format`` ('csv', 'tsv', 'text', 'npz', 'tiff', 'hdf5', 'zarr'), ``angles`` ('deg',
        'rad'), ``axes`` ({"x": ..., "y": ...}), optional ``step_um`` (or
        ``step_x_um`` and ``step_y_um``, along the declared axes), ``grid``,
        ``data_frame_rotation``, ``columns``, ``delimiter``, ``sidecar``.
    base_dir : str or Path, optional
        Folder that relative paths are relative to (the job file's folder).
    phase_ids : iterable of int, optional
        The job's phase ids; a point with another non-zero id is refused.
    path_for_errors : str or Path, optional
        The job file, named in errors about the spec's fields.
    pointer : str
        JSON pointer of ``spec`` in the job file.
    progress : callable, optional
        Called with the fraction of the orientation conversion done, a float in
        [0, 1]; silent when omitted.

    Returns
    -------
    OrientationMap
        Its ``axes.origin_um`` holds the declared coordinates of grid point (0, 0).

    Raises
    ------
    InputError
        For every bad field or file content (module docs of inclination.io.readers).

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> _ = (d / "m.csv").write_text(
    ...     "x_um,y_um,phi1_deg,Phi_deg,phi2_deg,phase\\n"
    ...     "0,0,10,20,30,1\\n1,0,10,20,30,1\\n0,1,,,,0\\n1,1,40,20,30,1\\n")
    >>> omap = read_map({"path": "m.csv", "format": "csv", "angles": "deg",
    ...                  "axes": {"x": "right", "y": "down"}}, base_dir=d)
    >>> omap.shape, omap.valid.tolist(), omap.step_x_um
    ((2, 2), [[True, True], [False, True]], 1.0)
    """
    if not isinstance(spec, Mapping):
        raise InputError(
            f"Expected an object, got {spec!r}.", path=path_for_errors, pointer=pointer
        )
    job_path = path_for_errors
    if "path" not in spec or not isinstance(spec["path"], (str, os.PathLike)):
        raise InputError("Expected a 'path' to the map file.", path=job_path, pointer=pointer)
    fmt = _spec_choice(spec, "format", MAP_FORMATS, job_path, pointer)
    angles = _spec_choice(spec, "angles", _ANGLE_UNITS, job_path, pointer)
    grid = spec.get("grid")
    if grid is not None:
        _spec_choice(spec, "grid", GRIDS, job_path, pointer)
    axes = DeclaredAxes.from_dict(spec.get("axes"), path=job_path, pointer=f"{pointer}/axes")
    dfr = data_frame_quat(
        spec.get("data_frame_rotation"), path=job_path, pointer=f"{pointer}/data_frame_rotation"
    )
    sense = spec.get("rotation_sense", "passive")
    if sense not in ROTATION_SENSES:
        raise InputError(
            f"Expected one of {ROTATION_SENSES}, got {sense!r}.",
            path=job_path,
            pointer=f"{pointer}/rotation_sense",
        )
    step_x, step_y = _steps_sample(spec, axes, grid, job_path, pointer)
    address = is_store_address(spec["path"])
    if address and fmt != "zarr":
        raise InputError(
            f"Expected a local file path for a {fmt} map (only zarr maps may be given as a "
            f"store address), got {spec['path']!r}.",
            path=job_path,
            pointer=f"{pointer}/path",
        )
    # A store address stays the string given (inclination.io.chunked), never a Path.
    path = spec["path"] if address else Path(spec["path"])
    if not address and base_dir is not None and not path.is_absolute():
        path = Path(base_dir) / path
    # A zarr map is a folder of chunks (inclination.io.chunked), not a file; a store
    # address is looked for when the group is opened.
    if fmt == "zarr" and not address and not path.is_dir():
        raise InputError(
            f"Expected an existing zarr map (a folder), got no folder at {str(path)!r}.",
            path=job_path,
            pointer=f"{pointer}/path",
        )
    if fmt != "zarr" and not path.is_file():
        raise InputError(
            f"Expected an existing map file, got no file at {str(path)!r}.",
            path=job_path,
            pointer=f"{pointer}/path",
        )
    settings = {
        "format": fmt,
        "angles": angles,
        "axes": axes.as_dict(),
        "data_frame_rotation": spec.get("data_frame_rotation", "identity"),
    }
    if sense != "passive":
        settings["rotation_sense"] = sense
    if fmt in TABLE_DELIMITERS:
        omap_args = _read_table_map(
            spec,
            path,
            fmt,
            angles,
            axes,
            dfr,
            step_x,
            step_y,
            grid,
            phase_ids,
            job_path,
            pointer,
            progress,
        )
    else:
        if grid is None or step_x is None:
            missing = "grid" if grid is None else "step_um"
            raise InputError(
                f"Expected {missing!r} for a {fmt} map (arrays carry no coordinates).",
                path=job_path,
                pointer=f"{pointer}/{missing}",
            )
        if fmt == "npz":
            euler, phase_raw, quality = read_npz_arrays(path, angles=angles)
            reader = "npz arrays"
        elif fmt == "zarr":
            # Read whole here (a section map, or a surface map within the memory budget);
            # inclination.tiles reads the same store tile by tile.
            from .io.chunked import open_zarr_arrays

            chunked = open_zarr_arrays(
                path,
                angles=angles,
                storage_options=spec.get("storage_options"),
                path_for_errors=job_path,
                pointer=pointer,
            )
            try:
                euler, phase_raw = np.asarray(chunked.euler), np.asarray(chunked.phase)
            except OSError as exc:
                # A store lost mid-read (network, credentials expired): one line.
                raise InputError(
                    f"Expected to read the chunks of {str(path)!r}, got "
                    f"{type(exc).__name__}: {exc}.",
                    path=job_path,
                    pointer=f"{pointer}/path",
                ) from None
            quality = {}
            settings["chunks_px"] = list(chunked.chunks_px)
            reader = "zarr arrays"
        elif fmt == "hdf5":
            from .io.hdf5 import read_hdf5_arrays

            if not isinstance(spec.get("datasets"), Mapping):
                raise InputError(
                    "Expected 'datasets' naming the euler and phase dataset paths for an "
                    "hdf5 map, got none.",
                    path=job_path,
                    pointer=f"{pointer}/datasets",
                )
            euler, phase_raw, quality, coords = read_hdf5_arrays(path, datasets=spec["datasets"])
            if coords:
                _check_grid_coords(coords, axes, grid, step_x, step_y, path)
            settings["datasets"] = dict(spec["datasets"])
            reader = "hdf5 datasets"
        else:
            sidecar = Path(spec.get("sidecar", str(spec["path"]) + ".json"))
            if base_dir is not None and not sidecar.is_absolute():
                sidecar = Path(base_dir) / sidecar
            euler, phase_raw, quality = read_tiff_arrays(path, sidecar_path=sidecar, angles=angles)
            settings["sidecar"] = str(sidecar)
            reader = "tiff stack"
        omap_args = _arrays_to_map_args(
            euler,
            phase_raw,
            quality,
            angles,
            axes,
            dfr,
            grid,
            step_x,
            step_y,
            phase_ids,
            path,
            progress=progress,
        )
        # The file's arrays (float64 angles: 24 bytes per point) are dropped before the
        # map record is built, so they are never alive beside its planes and checks.
        del euler, phase_raw, quality
        omap_args["provenance_reader"] = reader
    settings.update(omap_args.pop("settings", {}))
    reader = omap_args.pop("provenance_reader")
    provenance = {
        "source_path": path if address else str(path.resolve()),
        "sha256": omap_args.pop("sha256", None) or (None if fmt == "zarr" else _sha256(path)),
        "reader": reader,
        "settings": settings,
    }
    if sense == "active":
        omap_args["quat"] = _active_to_sample(omap_args["quat"], omap_args["valid"], axes, dfr)
    return OrientationMap(
        data_frame_rotation=dfr, provenance=provenance, rotation_sense=sense, **omap_args
    )


def _active_to_sample(quat, valid, axes, dfr):
    """Quaternions (H, W, 4) read as passive, re-read as active (conventions §3).

    The readers convert the stored rotation r as if it were g_data; an active map's
    g_data is rᵀ, so r is recovered and converted again, in blocks (one extra pass,
    paid only by maps declared active).
    """
    out = np.array(quat, dtype=np.float32)
    flat = out.reshape(-1, 4)
    rows = np.flatnonzero(np.asarray(valid).ravel())
    for start in range(0, rows.size, _BLOCK):
        r = rows[start : start + _BLOCK]
        stored = orientations_to_declared(flat[r].astype(np.float64), axes, dfr)
        flat[r] = orientations_to_sample(stored, axes, dfr, rotation_sense="active")
    return out


def _check_grid_coords(coords, axes, grid, step_x, step_y, path):
    """Coordinates stored beside arrays must put every point at its own grid index (§1)."""
    x_s, y_s = _columns_to_sample(coords[0].ravel(), coords[1].ravel(), axes)
    placement = place_on_grid(x_s, y_s, step_x_um=step_x, step_y_um=step_y, grid=grid, path=path)
    h, w = coords[0].shape
    rows, cols = np.indices((h, w)).reshape(2, -1)
    off = np.flatnonzero((placement.row != rows) | (placement.col != cols))
    if placement.shape != (h, w) or off.size:
        k = int(off[0]) if off.size else 0
        raise InputError(
            f"Expected the x and y datasets to place each point at its own array index on a "
            f"{grid} grid in the declared axes, got row {k // w}, column {k % w} elsewhere; "
            "check 'axes' against the coordinates.",
            path=path,
            pointer="datasets/x",
        )


def _no_indexed_point(path):
    return InputError(
        "Expected at least one indexed point (phase id > 0 and finite angles), got none.",
        path=path,
    )


def _assemble(
    columns,
    phase_rows,
    quality_rows,
    linear,
    shape,
    angles,
    axes,
    dfr,
    path,
    *,
    while_converting,
    progress=None,
):
    """Validity, conversion into S, unit check and placement shared by every reader.

    ``columns`` (three angle columns), ``phase_rows`` and ``quality_rows`` are per
    point in file order; ``linear`` is each point's flat grid index. The
    conversion runs on two worker threads while ``while_converting()`` (the grid
    placement, for tables) runs here; its result is returned with the arrays.
    """
    valid_rows = phase_rows != 0
    for c in columns:
        valid_rows &= np.isfinite(c)
    if not valid_rows.any():
        raise _no_indexed_point(path)
    with ThreadPoolExecutor(max_workers=2) as pool:
        q_rows, futures = _start_conversion(
            pool, columns, valid_rows, axes, dfr, radians=angles == "rad"
        )
        try:
            extra = while_converting()
        except BaseException:
            for f in futures:
                f.cancel()
            raise
        largest = _wait(futures, progress)
    _check_units(largest, int(np.count_nonzero(valid_rows)), angles, path)
    if callable(linear):
        linear, shape = linear(extra)
    n = shape[0] * shape[1]
    if linear is None:
        # Arrays already in grid order (npz, TIFF): no scatter, no second full-size copy.
        quat = q_rows
        valid = valid_rows
        # One int32 array (np.where of int32 ids is int32 already: no second copy).
        phase = np.where(valid_rows, phase_rows, 0).astype(np.int32, copy=False)
        quality = {name: np.asarray(rows).reshape(shape) for name, rows in quality_rows.items()}
    else:
        quat = np.zeros((4, n), dtype=np.float32)
        quat[0] = 1.0
        quat[:, linear] = q_rows
        del q_rows
        valid = np.zeros(n, dtype=bool)
        valid[linear] = valid_rows
        phase = np.zeros(n, dtype=np.int32)
        phase[linear] = np.where(valid_rows, phase_rows, 0)
        quality = {}
        for name, rows in quality_rows.items():
            plane = np.full(n, np.nan, dtype=np.float32)
            plane[linear] = rows
            quality[name] = plane.reshape(shape)
    # Sealed (read-only, owning their memory): OrientationMap adopts them without a copy.
    args = dict(
        quat=np.moveaxis(_read_only(quat.reshape((4, *shape))), 0, -1),
        phase=_read_only(phase.reshape(shape)),
        valid=_read_only(valid.reshape(shape)),
        quality=quality,
    )
    return args, extra


def _arrays_to_map_args(
    euler, phase_raw, quality, angles, axes, dfr, grid, sx, sy, ids, path, *, progress=None
):
    h, w = phase_raw.shape
    flat = phase_raw.ravel()
    width = w

    def line_of(k):
        return f"row {k // width}, column {k % width}"

    phase = _phase_values(flat, ids, path, line_of)
    # reshape(-1) keeps strided views of the (H, W, 3) array: no column copies.
    columns = [euler[..., k].reshape(-1) for k in range(3)]
    quality_rows = {name: q.ravel() for name, q in quality.items()}
    args, _ = _assemble(
        columns,
        phase,
        quality_rows,
        None,
        (h, w),
        angles,
        axes,
        dfr,
        path,
        while_converting=lambda: None,
        progress=progress,
    )
    # Declared coordinates start at 0 on both axes over the map's bounding box.
    pitch = row_pitch_um(grid, sy)
    x_max = (w - 1) * sx + (0.5 * sx if grid == "hexagonal" and h > 1 else 0.0)
    corners = np.array([[0.0, 0.0], [x_max, 0.0], [0.0, (h - 1) * pitch], [x_max, (h - 1) * pitch]])
    declared = DeclaredAxes(axes.x, axes.y).points_to_declared(corners)
    args.update(
        grid=grid,
        step_x_um=sx,
        step_y_um=sy,
        axes=axes.with_origin(-declared.min(axis=0) + 0.0),
    )
    return args


def _read_table_map(
    spec,
    path,
    fmt,
    angles,
    axes,
    dfr,
    step_x,
    step_y,
    grid,
    phase_ids,
    job_path,
    pointer,
    progress=None,
):
    delimiter = spec.get("delimiter", TABLE_DELIMITERS[fmt])
    table = read_table(path, delimiter=delimiter, whitespace=delimiter is None)
    columns = spec.get("columns", {}) or {}
    unit = "deg" if angles == "deg" else "rad"
    names = {
        "x_um": "x_um",
        "y_um": "y_um",
        "phi1": f"phi1_{unit}",
        "Phi": f"Phi_{unit}",
        "phi2": f"phi2_{unit}",
        "phase": "phase",
    }
    for role, name in columns.items():
        if role not in names:
            raise InputError(
                f"Expected column roles among {_ROLES}, got {role!r}.",
                path=job_path,
                pointer=f"{pointer}/columns/{role}",
            )
        names[role] = name
    index = {}
    for role, name in names.items():
        if name is None and role == "phase":
            continue
        if name not in table.header:
            from .io.init import column_role

            near = [h for h in table.header if column_role(h) == role]
            near = near or difflib.get_close_matches(name, table.header, n=1, cutoff=0.5)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise InputError(
                f"Expected a column {name!r} for {role!r}, got columns {list(table.header)}"
                f"{hint}. Name the file's columns in the job's map.columns under the keys "
                f'{_ROLES}, e.g. "columns": {{"{role}": "{near[0] if near else "name"}"}}.',
                path=path,
                pointer="header",
            )
        index[role] = table.header.index(name)
    v = table.values

    def line_of(k):
        return f"line {table.line_of(k)}"

    x_declared, y_declared = v[:, index["x_um"]], v[:, index["y_um"]]
    finite = np.isfinite(x_declared) & np.isfinite(y_declared)
    if not finite.all():
        k = int(np.flatnonzero(~finite)[0])
        raise InputError(
            f"Expected finite coordinates on every row, got x = {x_declared[k]}, "
            f"y = {y_declared[k]}.",
            path=path,
            pointer=line_of(k),
        )
    x_s, y_s = _columns_to_sample(x_declared, y_declared, axes)
    if "phase" in index:
        phase_rows = _phase_values(v[:, index["phase"]], phase_ids, path, line_of)
    else:
        ids = sorted(set(phase_ids)) if phase_ids is not None else [1]
        if len(ids) != 1:
            raise InputError(
                f"Expected a phase column when the job has several phases {tuple(ids)}, "
                'got "phase": null.',
                path=job_path,
                pointer=f"{pointer}/columns/phase",
            )
        phase_rows = np.full(len(v), ids[0], dtype=np.int64)
    columns = [v[:, index[role]] for role in ("phi1", "Phi", "phi2")]
    used = set(index.values())
    quality_rows = {name: v[:, k] for k, name in enumerate(table.header) if k not in used}

    def place():
        return place_on_grid(
            x_s,
            y_s,
            step_x_um=step_x,
            step_y_um=step_y,
            grid=grid,
            path=path,
            line_of=table.line_of,
        )

    def linear(placement):
        return placement.row * placement.shape[1] + placement.col, placement.shape

    args, placement = _assemble(
        columns,
        phase_rows,
        quality_rows,
        linear,
        None,
        angles,
        axes,
        dfr,
        path,
        while_converting=place,
        progress=progress,
    )
    origin_declared = DeclaredAxes(axes.x, axes.y).points_to_declared(
        np.asarray(placement.origin_sample_um)
    )
    args.update(
        grid=placement.grid,
        step_x_um=placement.step_x_um,
        step_y_um=placement.step_y_um,
        axes=axes.with_origin(origin_declared + 0.0),
        provenance_reader="text table",
        sha256=table.sha256,
        settings={
            "delimiter": delimiter,
            "columns": names,
            "grid": placement.grid,
            "rows_read": int(len(v)),
        },
    )
    return args


def _columns_to_sample(x_declared, y_declared, axes):
    """Declared coordinate columns (origin 0) to X_S and Y_S columns (conventions §2).

    The in-plane part of the declared axes is a signed permutation, so each S
    column is one declared column, negated or not: views where no sign flips.
    """
    a = axes.matrix_to_sample[:2, :2]
    cols = (x_declared, y_declared)
    out = []
    for r in range(2):
        c = int(np.flatnonzero(a[r])[0])
        out.append(cols[c] if a[r, c] > 0 else -cols[c])
    return out[0], out[1]


def read_map_file(path, *, format: str, angles: str, axes=None, **options) -> OrientationMap:
    """Read a map file directly (no job file): ``read_map`` with the spec as keywords.

    Parameters
    ----------
    path : str or Path
    format : {'csv', 'tsv', 'text', 'npz', 'tiff'}
    angles : {'deg', 'rad'}
    axes : mapping or DeclaredAxes, optional
        Default: x right, y down (S).
    **options
        ``step_um``, ``grid``, ``columns``, ``data_frame_rotation``, ... as in the job.

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "m.txt"
    >>> _ = p.write_text("x_um y_um phi1_deg Phi_deg phi2_deg phase\\n0 0 1 2 3 1\\n2 0 1 2 3 1\\n")
    >>> read_map_file(p, format="text", angles="deg").step_x_um
    2.0
    """
    if isinstance(axes, DeclaredAxes):
        axes = axes.as_dict()
    spec = {
        "path": str(path),
        "format": format,
        "angles": angles,
        "axes": axes or {"x": "right", "y": "down"},
        **options,
    }
    return read_map(spec, pointer="")
