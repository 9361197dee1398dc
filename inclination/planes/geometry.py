"""The surface geometry of a plane: trace, dip and dip direction from its normal (§5).

Owns docs/conventions.md §5 for the whole package; nothing else computes these quantities.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array, check_last_axis

__all__ = ["PlanePrediction", "surface_geometry"]

# |n_z| above cos 1°: the plane lies within 1° of the surface; its trace is
# undefined for any practical purpose (§5), so it is never matched.
_NO_TRACE_NZ = np.cos(np.deg2rad(1.0))
# |n_z| below this is round-off from the rotation of an exactly vertical plane
# (about 6e-8 degrees); such a plane has no dip direction.
_VERTICAL_NZ = 1e-9


@dataclass(frozen=True)
class PlanePrediction:
    """Surface geometry of planes in grains, conventions §5.

    Attributes
    ----------
    normal_sample : ndarray, shape (..., M, 3)
        Unit plane normals in S, signed so that n_z >= 0 (into the material).
    trace_angle_deg : ndarray, shape (..., M)
        Angle of the trace direction t = Z × n from +X toward +Y, in [0, 180);
        NaN where ``has_trace`` is False.
    dip_deg : ndarray, shape (..., M)
        arccos |n_z|: 0 for a plane parallel to the surface, 90 for a vertical one.
    dip_azimuth_deg : ndarray, shape (..., M)
        Angle of the dip direction d from +X toward +Y, in [0, 360); NaN for a
        vertical plane or one exactly parallel to the surface (no dip direction).
    has_trace : ndarray of bool, shape (..., M)
        False when the plane lies within 1° of the surface (|n_z| > cos 1°).
    """

    normal_sample: np.ndarray
    trace_angle_deg: np.ndarray
    dip_deg: np.ndarray
    dip_azimuth_deg: np.ndarray
    has_trace: np.ndarray


def surface_geometry(normal_sample: ArrayLike) -> PlanePrediction:
    """Trace, dip and dip direction of planes from their normals in S (conventions §5).

    The one implementation of §5 in the package: every stage that turns a normal into a
    trace, a dip or a dip direction calls this function, with the edge rules of §5 (no
    trace within 1° of the surface, no dip direction for a vertical or a horizontal plane).

    Parameters
    ----------
    normal_sample : array_like, shape (..., 3)
        Plane normals in S, either sign, any non-zero length.

    Returns
    -------
    PlanePrediction
        Arrays of the input's leading shape; the normals unit length with n_z >= 0.
        Empty input gives empty arrays.

    Examples
    --------
    >>> g = surface_geometry([[1.0, 0.0, 1.0], [0.0, 0.0, 1.0]])
    >>> g.trace_angle_deg.round(6).tolist(), g.dip_deg.round(6).tolist()
    ([90.0, nan], [45.0, 0.0])
    >>> g.dip_azimuth_deg.round(6).tolist(), g.has_trace.tolist()
    ([180.0, nan], [True, False])
    """
    normal_sample = as_float_array(normal_sample, "normal_sample")
    check_last_axis(normal_sample, "normal_sample", 3)
    length = np.linalg.norm(normal_sample, axis=-1, keepdims=True)
    if np.any(length == 0):
        raise ValueError("Expected `normal_sample` to hold non-zero vectors, got a zero vector.")
    # Normals already unit to round-off are kept bit for bit: dividing again by a length of
    # 1 ± 1e-16 would move the last digit and make results depend on how often a caller
    # normalised.
    rescale = np.abs(length - 1.0) > 4.0 * np.finfo(np.float64).eps
    normal_sample = np.where(rescale, normal_sample / length, normal_sample)
    n = np.where(normal_sample[..., 2:3] < 0, -normal_sample, normal_sample)
    nx, ny, nz = n[..., 0], n[..., 1], n[..., 2]
    has_trace = nz <= _NO_TRACE_NZ
    # t = Z × n = (−n_y, n_x, 0); its angle mod 180 does not depend on the sign of n.
    trace = np.mod(np.rad2deg(np.arctan2(nx, -ny)), 180.0)
    trace = np.where(trace >= 180.0, 0.0, trace)
    trace = np.where(has_trace, trace, np.nan)
    dip = np.rad2deg(np.arccos(np.clip(nz, 0.0, 1.0)))
    # With n_z >= 0, d = −(n_x, n_y) up to its length.
    azimuth = np.mod(np.rad2deg(np.arctan2(-ny, -nx)), 360.0)
    azimuth = np.where(azimuth >= 360.0, 0.0, azimuth)
    # Neither a vertical plane nor one exactly parallel to the surface has a dip direction.
    undefined = (nz < _VERTICAL_NZ) | (np.hypot(nx, ny) < _VERTICAL_NZ)
    azimuth = np.where(undefined, np.nan, azimuth)
    for arr in (n, trace, dip, azimuth, has_trace):
        arr.setflags(write=False)
    return PlanePrediction(n + 0.0, trace, dip, azimuth, has_trace)
