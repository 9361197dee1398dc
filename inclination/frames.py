"""Declared axes and the data-frame rotation: the edge between a user's frame and S.

Inside the library every vector, point and orientation is in the sample frame S
(conventions §2: X_S screen right, Y_S screen down, Z_S = X_S × Y_S into the
material). A map's user declares which screen directions their x and y axes
point along (8 perpendicular pairs; z follows by the right-hand rule, so it
points into or out of the material) and, optionally, a known rotation between
the frame their orientation data refer to and those declared axes
(conventions §3). This module turns both into matrices and converts points,
vectors, in-plane angles and orientations between the declared frame and S.

Frames used below:

- **S**: the sample frame of conventions §2.
- **declared** (D): the user's axes. ``v_S = M @ v_D`` with ``M`` =
  :attr:`DeclaredAxes.matrix_to_sample` (columns: the declared axes written in S).
- **data** (A): the frame the orientation data refer to, the declared axes
  turned by the data-frame rotation: ``v_D = Q @ v_A``, the columns of ``Q``
  being the data axes written in declared components.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ._validation import as_float_array, check_finite, check_last_axis, check_one_of
from .crystal.rotations import (
    quat_from_axis_angle_deg,
    quat_from_matrix,
    quat_inverse,
    quat_multiply,
)
from .errors import InputError

__all__ = [
    "SCREEN_DIRECTIONS",
    "NAMED_TURNS",
    "DeclaredAxes",
    "ROTATION_SENSES",
    "data_frame_quat",
    "orientations_to_sample",
    "orientations_to_declared",
]

#: Screen directions a declared axis may point along (conventions §2).
SCREEN_DIRECTIONS = ("right", "left", "up", "down")

# The screen direction as a unit vector in S (X_S right, Y_S down), and its angle in S
# measured from +X_S toward +Y_S (conventions §2), in degrees.
_SCREEN_VECTOR = {"right": (1, 0), "left": (-1, 0), "down": (0, 1), "up": (0, -1)}
_SCREEN_ANGLE_DEG = {"right": 0.0, "down": 90.0, "left": 180.0, "up": 270.0}

#: Named right-handed turns about a declared axis: ``"z180"`` is 180° about declared z.
NAMED_TURNS = ("identity",) + tuple(f"{axis}{angle}" for axis in "xyz" for angle in (90, 180, 270))

_TRACE_KINDS = ("trace", "azimuth")

#: How a map's stored rotations are read (conventions §3): ``"passive"`` (the stored
#: rotation is g_data, data frame to crystal) or ``"active"`` (it is g_dataᵀ).
ROTATION_SENSES = ("passive", "active")

_CONJUGATE = np.array([1.0, -1.0, -1.0, -1.0])


@dataclass(frozen=True)
class DeclaredAxes:
    """The screen directions of a map's declared x and y axes (conventions §2).

    Parameters
    ----------
    x, y : {'right', 'left', 'up', 'down'}
        Screen directions of the declared x and y axes; they must be
        perpendicular. The declared z axis is x × y: into the material when
        (x, y) is a quarter turn clockwise on screen, as S is, else out of it.
    origin_um : tuple of float, default (0, 0)
        Declared coordinates (µm) of the origin of S, which is the map's grid
        point (row 0, column 0) (conventions §1). Readers set it from the data:
        a text table's coordinates, or, for arrays, so that the map's declared
        coordinates start at 0 on both axes. Positions convert as
        ``xy_S = A @ (xy_declared - origin_um)`` with ``A`` the in-plane part of
        :attr:`matrix_to_sample`.

    Examples
    --------
    >>> axes = DeclaredAxes("right", "up")
    >>> axes.z, axes.matrix_to_sample.round(6).tolist()
    ('out', [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]])
    >>> axes.angle_to_declared_deg(30.0, kind="trace").round(6).tolist()
    150.0
    """

    x: str = "right"
    y: str = "down"
    origin_um: tuple[float, float] = (0.0, 0.0)

    def __post_init__(self):
        check_one_of(self.x, "x", SCREEN_DIRECTIONS)
        check_one_of(self.y, "y", SCREEN_DIRECTIONS)
        if np.dot(_SCREEN_VECTOR[self.x], _SCREEN_VECTOR[self.y]) != 0:
            raise ValueError(
                "Expected `x` and `y` to be perpendicular screen directions, "
                f"got x={self.x!r}, y={self.y!r}."
            )
        origin = tuple(float(v) for v in np.asarray(self.origin_um, dtype=float).ravel())
        if len(origin) != 2 or not np.all(np.isfinite(origin)):
            raise ValueError(
                f"Expected `origin_um` to be two finite numbers, got {self.origin_um!r}."
            )
        object.__setattr__(self, "origin_um", origin)

    @classmethod
    def from_dict(cls, d, *, path=None, pointer: str = "/map/axes") -> DeclaredAxes:
        """Build from a job entry such as ``{"x": "right", "y": "up"}``; InputError if bad.

        Examples
        --------
        >>> DeclaredAxes.from_dict({"x": "down", "y": "right"}).z
        'out'
        """
        if not isinstance(d, Mapping) or set(d) != {"x", "y"}:
            raise InputError(
                f"Expected an object with exactly the keys 'x' and 'y', got {d!r}.",
                path=path,
                pointer=pointer,
            )
        for key in ("x", "y"):
            if d[key] not in SCREEN_DIRECTIONS:
                raise InputError(
                    f"Expected one of {SCREEN_DIRECTIONS}, got {d[key]!r}.",
                    path=path,
                    pointer=f"{pointer}/{key}",
                )
        try:
            return cls(d["x"], d["y"])
        except ValueError as exc:
            raise InputError(str(exc), path=path, pointer=pointer) from None

    def as_dict(self) -> dict:
        """The job-file form ``{"x": ..., "y": ...}``."""
        return {"x": self.x, "y": self.y}

    def with_origin(self, origin_um) -> DeclaredAxes:
        """The same axes with another origin (declared coordinates of grid point (0, 0))."""
        return DeclaredAxes(self.x, self.y, tuple(origin_um))

    @property
    def matrix_to_sample(self) -> np.ndarray:
        """(3, 3) float: ``v_S = M @ v_declared``; columns are the declared axes in S."""
        ex = np.array([*_SCREEN_VECTOR[self.x], 0.0])
        ey = np.array([*_SCREEN_VECTOR[self.y], 0.0])
        m = np.column_stack([ex, ey, np.cross(ex, ey)]) + 0.0
        m.flags.writeable = False
        return m

    @property
    def z(self) -> str:
        """``'into'`` or ``'out'``: where the declared z axis points (right-hand rule)."""
        return "into" if self.matrix_to_sample[2, 2] > 0 else "out"

    @property
    def is_sample_frame(self) -> bool:
        """True when the declared axes are S itself (x right, y down)."""
        return self.x == "right" and self.y == "down"

    def _handedness(self) -> float:
        # +1 when declared angles turn the same way on screen as angles in S (z into).
        return 1.0 if self.z == "into" else -1.0

    def angle_to_declared_deg(self, angle_sample_deg, *, kind: str = "trace") -> np.ndarray:
        """In-plane angles measured in S to angles in the declared frame (conventions §2).

        Parameters
        ----------
        angle_sample_deg : array_like, shape (...)
            Angles in S, degrees, from +X_S toward +Y_S. NaN passes through.
        kind : {'trace', 'azimuth'}
            A trace (an undirected line) is returned in [0, 180); an azimuth
            (a direction) in [0, 360).

        Returns
        -------
        ndarray, shape (...)
            Angles from declared +x toward declared +y.

        Examples
        --------
        >>> axes = DeclaredAxes("left", "down")
        >>> axes.angle_to_declared_deg([10.0, 100.0], kind="azimuth").tolist()
        [170.0, 80.0]
        """
        check_one_of(kind, "kind", _TRACE_KINDS)
        theta = as_float_array(angle_sample_deg, "angle_sample_deg")
        # The declared x axis sits at angle a_x in S and declared angles turn with
        # handedness h, so theta_S = a_x + h * theta_D. The offsets are multiples of
        # 90°, which keeps the conversion exact (no trigonometry, no rounding).
        out = self._handedness() * (theta - _SCREEN_ANGLE_DEG[self.x])
        return _wrap(out, 180.0 if kind == "trace" else 360.0)

    def angle_to_sample_deg(self, angle_declared_deg, *, kind: str = "trace") -> np.ndarray:
        """In-plane angles in the declared frame to angles in S; inverse of the above.

        Examples
        --------
        >>> DeclaredAxes("right", "up").angle_to_sample_deg(150.0).round(6).tolist()
        30.0
        """
        check_one_of(kind, "kind", _TRACE_KINDS)
        theta = as_float_array(angle_declared_deg, "angle_declared_deg")
        out = _SCREEN_ANGLE_DEG[self.x] + self._handedness() * theta
        return _wrap(out, 180.0 if kind == "trace" else 360.0)

    def points_to_declared(self, xy_sample_um) -> np.ndarray:
        """Positions in S (µm, shape (..., 2)) to declared coordinates of the same points.

        Examples
        --------
        >>> axes = DeclaredAxes("left", "down", origin_um=(100.0, 0.0))
        >>> axes.points_to_declared([[0.0, 0.0], [10.0, 5.0]]).tolist()
        [[100.0, 0.0], [90.0, 5.0]]
        """
        xy = as_float_array(xy_sample_um, "xy_sample_um")
        check_last_axis(xy, "xy_sample_um", 2)
        out = _signed_permutation(self.matrix_to_sample[:2, :2].T, xy)
        out += np.asarray(self.origin_um)
        return out

    def points_to_sample(self, xy_declared_um) -> np.ndarray:
        """Declared coordinates (µm, shape (..., 2)) to positions in S; inverse of the above.

        Examples
        --------
        >>> axes = DeclaredAxes("left", "down", origin_um=(100.0, 0.0))
        >>> axes.points_to_sample([[90.0, 5.0]]).tolist()
        [[10.0, 5.0]]
        """
        xy = as_float_array(xy_declared_um, "xy_declared_um")
        check_last_axis(xy, "xy_declared_um", 2)
        return _signed_permutation(self.matrix_to_sample[:2, :2], xy - np.asarray(self.origin_um))

    def vectors_to_declared(self, v_sample) -> np.ndarray:
        """Vectors (e.g. plane normals) in S, shape (..., 3), to declared components.

        Examples
        --------
        >>> DeclaredAxes("right", "up").vectors_to_declared([0.0, 0.6, 0.8]).tolist()
        [0.0, -0.6, -0.8]
        """
        v = as_float_array(v_sample, "v_sample")
        check_last_axis(v, "v_sample", 3)
        return v @ self.matrix_to_sample

    def vectors_to_sample(self, v_declared) -> np.ndarray:
        """Declared components, shape (..., 3), to vectors in S; inverse of the above.

        Examples
        --------
        >>> DeclaredAxes("right", "up").vectors_to_sample([0.0, -0.6, -0.8]).tolist()
        [0.0, 0.6, 0.8]
        """
        v = as_float_array(v_declared, "v_declared")
        check_last_axis(v, "v_declared", 3)
        return v @ self.matrix_to_sample.T


def _signed_permutation(a: np.ndarray, v: np.ndarray) -> np.ndarray:
    """``v @ a.T`` for a 2×2 signed permutation ``a``: exact, and no matmul on (N, 2) rows."""
    out = np.empty(v.shape, dtype=np.float64)
    for r in range(2):
        c = int(np.flatnonzero(a[r])[0])
        np.multiply(v[..., c], a[r, c], out=out[..., r])
    out += 0.0
    return out


def _wrap(angle_deg: np.ndarray, period: float) -> np.ndarray:
    out = np.mod(angle_deg, period)
    # np.mod of a tiny negative number can return the period itself.
    out = np.where(out >= period, 0.0, out)
    return out + 0.0


def data_frame_quat(spec=None, *, path=None, pointer: str = "/map/data_frame_rotation"):
    """The data-frame rotation of a map as a unit quaternion (conventions §3).

    The data frame is the declared frame turned, right-handedly, by ``angle_deg``
    about ``axis`` (declared components). The returned quaternion ``q`` has
    ``quat_as_matrix(q) == Q`` with ``v_declared = Q @ v_data``: the columns of
    ``Q`` are the data axes in declared components.

    Parameters
    ----------
    spec : None, str or mapping
        ``None`` or ``"identity"``; one of :data:`NAMED_TURNS` (``"z180"`` is
        180° about declared z); or ``{"axis": [x, y, z], "angle_deg": a}``.
    path, pointer : optional
        Where the spec came from, for the InputError raised when it is bad.

    Returns
    -------
    ndarray, shape (4,)
        Scalar first, scalar part >= 0.

    Examples
    --------
    >>> data_frame_quat("z180").round(6).tolist()
    [0.0, 0.0, 0.0, 1.0]
    >>> data_frame_quat({"axis": [0, 0, 1], "angle_deg": 90}).round(6).tolist()
    [0.707107, 0.0, 0.0, 0.707107]
    """
    if spec is None or spec == "identity":
        return np.array([1.0, 0.0, 0.0, 0.0])
    if isinstance(spec, str):
        if spec not in NAMED_TURNS:
            raise InputError(
                f"Expected one of {NAMED_TURNS} or {{'axis': [x, y, z], 'angle_deg': a}}, "
                f"got {spec!r}.",
                path=path,
                pointer=pointer,
            )
        axis = np.eye(3)["xyz".index(spec[0])]
        angle = float(spec[1:])
    elif isinstance(spec, Mapping) and set(spec) == {"axis", "angle_deg"}:
        try:
            axis = np.asarray(spec["axis"], dtype=float)
            angle = float(spec["angle_deg"])
        except (TypeError, ValueError):
            axis, angle = np.zeros(0), np.nan
        if axis.shape != (3,) or not np.all(np.isfinite(axis)) or not np.isfinite(angle):
            raise InputError(
                f"Expected 'axis' to be 3 finite numbers and 'angle_deg' a finite number, "
                f"got {dict(spec)!r}.",
                path=path,
                pointer=pointer,
            )
        if not np.any(axis):
            raise InputError(
                f"Expected a non-zero 'axis', got {spec['axis']!r}.",
                path=path,
                pointer=f"{pointer}/axis",
            )
    else:
        raise InputError(
            f"Expected one of {NAMED_TURNS} or {{'axis': [x, y, z], 'angle_deg': a}}, "
            f"got {spec!r}.",
            path=path,
            pointer=pointer,
        )
    # (cos a/2, n sin a/2) has matrix Q = the right-handed turn of the axes by a about n
    # (rotations.py, P = +1), whose columns are the turned axes: exactly v_D = Q v_A.
    q = quat_from_axis_angle_deg(axis, angle)
    # Named quarter and half turns have exact components; remove float dust.
    return np.where(np.abs(q) < 1e-15, 0.0, q) + 0.0


def _sample_to_data_quat(axes: DeclaredAxes, data_frame_rotation) -> np.ndarray:
    """Quaternion of R (S to data frame): ``v_data = R @ v_S`` with ``R = Qᵀ Mᵀ``."""
    q_dfr = np.asarray(data_frame_rotation, dtype=float)
    # quat_as_matrix(q_dfr) = Q, so its inverse is Qᵀ; M is a proper rotation (det +1),
    # its quaternion is exact for these signed permutations.
    q_m = quat_from_matrix(axes.matrix_to_sample)
    return quat_multiply(quat_inverse(q_dfr), quat_inverse(q_m))


def orientations_to_sample(
    quat_data, axes: DeclaredAxes, data_frame_rotation=None, *, rotation_sense: str = "passive"
):
    """Orientations referred to the data frame to orientations in S (conventions §2–§3).

    Derivation. The data's orientation maps data-frame vectors to crystal:
    ``v_C = g_data @ v_A``. A vector's components convert as ``v_S = M @ v_D``
    and ``v_D = Q @ v_A`` (module docstring), so ``v_A = Qᵀ Mᵀ v_S =: R v_S``
    and ``v_C = g_data @ R @ v_S``: the orientation in S is ``g_S = g_data · R``,
    in quaternions ``q_S = q_data ⊗ q_R`` (rotations.quat_multiply(a, b) is
    ``g_a @ g_b``).

    Parameters
    ----------
    quat_data : array_like, shape (..., 4)
        Unit quaternions of ``g_data`` (data frame to crystal).
    axes : DeclaredAxes
    data_frame_rotation : array_like, shape (4,), optional
        From :func:`data_frame_quat`; identity if omitted.
    rotation_sense : {'passive', 'active'}
        ``'active'``: the stored rotation r maps crystal to data frame, so
        ``g_data = rᵀ`` (the quaternion's conjugate) before the conversion:
        ``g_S = rᵀ · R`` (conventions §3).

    Returns
    -------
    ndarray, shape (..., 4)
        Unit quaternions in S (S to crystal), scalar part >= 0, float64.

    Examples
    --------
    >>> from inclination.crystal.rotations import quat_as_matrix
    >>> q = orientations_to_sample([1.0, 0.0, 0.0, 0.0], DeclaredAxes("left", "up"))
    >>> quat_as_matrix(q).round(6).tolist()  # declared axes: S turned 180° about Z_S
    [[-1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, 1.0]]
    """
    check_one_of(rotation_sense, "rotation_sense", ROTATION_SENSES)
    dfr = np.array([1.0, 0.0, 0.0, 0.0]) if data_frame_rotation is None else data_frame_rotation
    if rotation_sense == "active":
        quat_data = np.asarray(quat_data) * _CONJUGATE.astype(np.asarray(quat_data).dtype)
    q = quat_multiply(quat_data, _sample_to_data_quat(axes, dfr))
    return np.where(q[..., :1] < 0, -q, q) + 0.0


def orientations_to_declared(
    quat_sample, axes: DeclaredAxes, data_frame_rotation=None, *, rotation_sense: str = "passive"
):
    """Orientations in S back to the stored rotations: ``g_data = g_S · Rᵀ`` (inverse of the above).

    With ``rotation_sense='active'`` the result is the stored rotation ``r = g_dataᵀ``.

    Examples
    --------
    >>> q = orientations_to_declared([0.0, 0.0, 0.0, 1.0], DeclaredAxes("left", "up"))
    >>> q.round(6).tolist()
    [1.0, 0.0, 0.0, 0.0]
    >>> q = orientations_to_declared([0.6, 0.8, 0.0, 0.0], DeclaredAxes(), rotation_sense="active")
    >>> q.round(6).tolist()
    [0.6, -0.8, 0.0, 0.0]
    """
    check_one_of(rotation_sense, "rotation_sense", ROTATION_SENSES)
    dfr = np.array([1.0, 0.0, 0.0, 0.0]) if data_frame_rotation is None else data_frame_rotation
    if axes.is_sample_frame and np.array_equal(np.asarray(dfr, float), [1.0, 0.0, 0.0, 0.0]):
        # R is the identity: each component of q ⊗ (1, -0, -0, -0) is that of q plus
        # signed zeros, the same bits but for the sign of a zero, which the + 0.0 below
        # makes +0.0 either way; so the product is skipped.
        q = as_float_array(quat_sample, "quat_sample")
        check_last_axis(q, "quat_sample", 4)
        check_finite(q, "quat_sample")
    else:
        q = quat_multiply(quat_sample, quat_inverse(_sample_to_data_quat(axes, dfr)))
    if rotation_sense == "active":
        q = q * _CONJUGATE
    return np.where(q[..., :1] < 0, -q, q) + 0.0
