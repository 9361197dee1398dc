"""Candidate boundary planes: predicted traces and dips, and identification.

Implements conventions §5 (plane normal, trace, dip and dip direction in the
sample frame S) and notes §6 (the 180° ambiguity): a surface trace never
decides the sign of the dip direction, so every azimuth here is for the frame
as declared. Every vector and angle is in S (X right, Y down, Z into the
material); the report converts to the user's declared axes.

Sign of a plane normal
    A plane is the same plane under n → −n. Every normal returned here is
    signed so that n_z >= 0 (it points into the material). The dip direction
    d = −sign(n_z)·(n_x, n_y)/|(n_x, n_y)| (§5) does not depend on that choice.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._validation import as_float_array, check_finite, check_last_axis, check_positive
from .rotations import quat_as_matrix

__all__ = [
    "PlanePrediction",
    "predict_planes",
    "trace_sigma_predicted_deg",
    "trace_tolerance_deg",
    "trace_deviation_deg",
    "chance_fit",
]

# |n_z| above cos 1°: the plane lies within 1° of the surface; its trace is
# undefined for any practical purpose (§5), so it is never matched.
_NO_TRACE_NZ = np.cos(np.deg2rad(1.0))
# |n_z| below this is round-off from the rotation of an exactly vertical plane
# (about 6e-8 degrees); such a plane has no dip direction.
_VERTICAL_NZ = 1e-9
# A first-order trace uncertainty cannot usefully exceed a right angle: the
# trace of a plane within a degree of the surface is unknown anyway.
_MAX_TRACE_SIGMA_DEG = 90.0


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


def _surface_geometry(normal_sample: np.ndarray) -> PlanePrediction:
    """Trace, dip and dip direction of unit normals in S (any sign), §5."""
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


def predict_planes(quat, normals_crystal) -> PlanePrediction:
    """Predict the surface trace, dip and dip direction of crystal planes (§5).

    Parameters
    ----------
    quat : array_like, shape (N, 4) or (4,)
        Orientations ``g`` (sample to crystal, ``v_crystal = g @ v_sample``),
        unit quaternions, scalar first.
    normals_crystal : array_like, shape (M, 3)
        Plane normals in the crystal Cartesian frame C (any length, not zero);
        a normal and its negative give the same plane.

    Returns
    -------
    PlanePrediction
        Arrays of shape (N, M) (or (M,) for a single orientation); normals
        n_S = gᵀ n_C, signed n_z >= 0. Empty inputs give empty arrays.

    Examples
    --------
    >>> p = predict_planes([1.0, 0.0, 0.0, 0.0], [[1, 1, 1]])  # cube orientation, (111)
    >>> p.trace_angle_deg.round(6).tolist(), p.dip_deg.round(4).tolist()
    ([135.0], [54.7356])
    >>> p.dip_azimuth_deg.round(6).tolist(), p.has_trace.tolist()
    ([225.0], [True])
    """
    q = as_float_array(quat, "quat")
    check_last_axis(q, "quat", 4)
    if q.ndim > 2:
        raise ValueError(f"Expected `quat` to have shape (N, 4) or (4,), got {q.shape}.")
    check_finite(q, "quat")
    nc = as_float_array(normals_crystal, "normals_crystal")
    if nc.ndim != 2 or nc.shape[-1] != 3:
        raise ValueError(f"Expected `normals_crystal` to have shape (M, 3), got {nc.shape}.")
    check_finite(nc, "normals_crystal")
    length = np.linalg.norm(nc, axis=-1)
    if np.any(length == 0):
        row = int(np.flatnonzero(length == 0)[0])
        raise ValueError(
            f"Expected `normals_crystal` to be non-zero, got a zero vector at index ({row},)."
        )
    nc = nc / length[:, None]
    if q.size == 0:
        g = np.zeros(q.shape[:-1] + (3, 3))
    else:
        g = quat_as_matrix(q)
    # n_S = gᵀ n_C: the rows of g are the crystal axes written in S (§3).
    normal_sample = np.einsum("...ji,mj->...mi", g, nc)
    return _surface_geometry(normal_sample)


def trace_sigma_predicted_deg(spread_deg, dip_deg) -> np.ndarray:
    """Standard uncertainty of a predicted trace angle from orientation scatter.

    First order: a small rotation ε about an axis perpendicular to the normal
    tilts the normal by ε; its component across the vertical plane through the
    normal turns the normal's horizontal projection, of length sin δ, by
    ε / sin δ. With σ_g the standard deviation of the orientation about one
    axis this gives σ_trace ≈ σ_g / sin δ, capped at 90° (a plane within a
    degree of the surface has no usable trace, §5). If ``spread_deg`` is the
    mean disorientation of a grain's points to its mean (which is about 1.6 σ_g
    for isotropic scatter), the result is conservative by that factor.

    Parameters
    ----------
    spread_deg : array_like
        Orientation scatter σ_g, degrees, >= 0.
    dip_deg : array_like
        Plane dip δ in [0, 90] degrees; broadcast against ``spread_deg``.

    Returns
    -------
    ndarray
        σ_trace in degrees, in [0, 90].

    Examples
    --------
    >>> trace_sigma_predicted_deg(0.5, [90.0, 30.0, 0.0]).round(6).tolist()
    [0.5, 1.0, 90.0]
    """
    s = as_float_array(spread_deg, "spread_deg")
    d = as_float_array(dip_deg, "dip_deg")
    check_finite(np.atleast_1d(s), "spread_deg")
    check_finite(np.atleast_1d(d), "dip_deg")
    if np.any(s < 0):
        raise ValueError(f"Expected `spread_deg` to be >= 0, got {float(np.min(s))!r}.")
    outside = (d < 0) | (d > 90)
    if np.any(outside):
        raise ValueError(f"Expected `dip_deg` to lie in [0, 90], got {float(d[outside][0])!r}.")
    sin_dip = np.sin(np.deg2rad(d))
    with np.errstate(divide="ignore", invalid="ignore"):
        sigma = np.where(sin_dip > 0, s / np.where(sin_dip > 0, sin_dip, 1.0), np.inf)
    sigma = np.where(s == 0, 0.0, sigma)
    return np.minimum(sigma, _MAX_TRACE_SIGMA_DEG)


def _check_settings(k: float, floor_deg: float, max_tolerance_deg: float) -> None:
    check_positive(k, "k")
    check_positive(floor_deg, "floor_deg")
    check_positive(max_tolerance_deg, "max_tolerance_deg")
    if floor_deg > max_tolerance_deg:
        raise ValueError(
            f"Expected `floor_deg` to be <= `max_tolerance_deg` ({max_tolerance_deg!r}), "
            f"got {floor_deg!r}."
        )


def trace_tolerance_deg(
    sigma_measured_deg, sigma_predicted_deg, *, k=2.0, floor_deg=1.0, max_tolerance_deg=5.0
) -> np.ndarray:
    """Trace tolerance k·√(σ_measured² + σ_predicted²), floored and capped.

    Parameters
    ----------
    sigma_measured_deg, sigma_predicted_deg : array_like
        Standard uncertainties of the measured and predicted trace angles,
        degrees, >= 0; broadcast together.
    k : float
        Coverage factor, > 0.
    floor_deg, max_tolerance_deg : float
        Smallest and largest tolerance, degrees, 0 < floor_deg <= max_tolerance_deg.

    Returns
    -------
    ndarray
        Tolerance in degrees, in [floor_deg, max_tolerance_deg].

    Examples
    --------
    >>> trace_tolerance_deg([0.1, 0.6, 3.0], 0.8).round(6).tolist()
    [1.612452, 2.0, 5.0]
    """
    _check_settings(k, floor_deg, max_tolerance_deg)
    sm = as_float_array(sigma_measured_deg, "sigma_measured_deg")
    sp = as_float_array(sigma_predicted_deg, "sigma_predicted_deg")
    for arr, name in ((sm, "sigma_measured_deg"), (sp, "sigma_predicted_deg")):
        check_finite(np.atleast_1d(arr), name)
        if np.any(arr < 0):
            raise ValueError(f"Expected `{name}` to be >= 0, got {float(np.min(arr))!r}.")
    return np.clip(k * np.hypot(sm, sp), floor_deg, max_tolerance_deg)


def trace_deviation_deg(measured_deg, predicted_deg) -> np.ndarray:
    """Absolute angle between two trace directions (lines, period 180°), in [0, 90].

    NaN in either input gives NaN (a plane with no trace has no deviation).

    Examples
    --------
    >>> trace_deviation_deg([1.0, 10.0, 170.0], [179.0, 100.0, np.nan]).round(6).tolist()
    [2.0, 90.0, nan]
    """
    m = as_float_array(measured_deg, "measured_deg")
    p = as_float_array(predicted_deg, "predicted_deg")
    return np.abs(np.mod(m - p + 90.0, 180.0) - 90.0)


def chance_fit(tolerance_deg) -> float | np.ndarray:
    """Chance that a trace at a uniformly random angle fits at least one candidate.

    For candidates with tolerances τ_i the chance is 1 − Π (1 − 2τ_i/180°);
    with k candidates at one tolerance τ this is 1 − (1 − 2τ/180°)^k. The
    candidates are treated as independent, which slightly overstates the
    chance when their traces lie closer than 2τ. NaN entries (planes with no
    trace) are not candidates. The product runs over the last axis.

    Parameters
    ----------
    tolerance_deg : array_like, shape (..., K)
        Tolerances of the K candidates, degrees, in [0, 90].

    Returns
    -------
    float or ndarray, shape (...)
        Probability in [0, 1]; 0 when there are no candidates.

    Examples
    --------
    >>> round(float(chance_fit([2.0, 2.0, 2.0])), 6)  # 1 − (1 − 4/180)³
    0.065196
    >>> round(float(chance_fit([])), 6)
    0.0
    """
    t = as_float_array(tolerance_deg, "tolerance_deg")
    if t.ndim == 0:
        raise ValueError(f"Expected `tolerance_deg` to have shape (..., K), got {t.shape}.")
    if np.any((t < 0) | (t > 90)):
        raise ValueError("Expected `tolerance_deg` to lie in [0, 90], got a value outside.")
    miss = np.where(np.isnan(t), 1.0, 1.0 - 2.0 * t / 180.0)
    out = 1.0 - np.prod(miss, axis=-1)
    return float(out) if out.ndim == 0 else out
