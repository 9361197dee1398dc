"""Predicted surface geometry of crystal planes, and how well a trace fits a prediction.

Owns the formulas of trace matching: a plane's predicted trace, dip and dip direction in a
grain (:func:`predict_planes`, through the one §5 function
:func:`inclination.planes.geometry.surface_geometry`), the shared plane of two grains
(:func:`shared_plane`), the uncertainty of a predicted trace (:func:`trace_sigma_predicted_deg`),
the tolerance (:func:`trace_tolerance_deg`, settings in :class:`ToleranceSettings`), the
deviation (:func:`trace_deviation_deg`), the fit of a trace to predicted planes
(:func:`trace_fit`) and the chance that a random trace fits (:func:`chance_fit`). Identification
(:mod:`inclination.planes.identify`) and the twin test (:mod:`inclination.planes.twins`) call
these and nothing else for those quantities.

Every vector and angle is in S (X right, Y down, Z into the material; conventions §2, §5).
A plane is the same plane under n → −n; every normal returned here is signed so that
n_z >= 0. The dip direction d = −sign(n_z)·(n_x, n_y)/|(n_x, n_y)| (§5) does not depend on
that choice, and a trace never decides its sign (conventions §6).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array, check_finite, check_last_axis
from ..crystal.rotations import quat_as_matrix
from ..errors import SettingError
from .geometry import PlanePrediction, surface_geometry

__all__ = [
    "ToleranceSettings",
    "TraceFit",
    "chance_fit",
    "pair_spread_deg",
    "predict_planes",
    "shared_plane",
    "trace_deviation_deg",
    "trace_fit",
    "trace_sigma_predicted_deg",
    "trace_tolerance_deg",
]

# A first-order trace uncertainty cannot usefully exceed a right angle: the
# trace of a plane within a degree of the surface is unknown anyway.
_MAX_TRACE_SIGMA_DEG = 90.0


def predict_planes(quat: ArrayLike, normals_crystal: ArrayLike) -> PlanePrediction:
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
    return surface_geometry(normal_sample)


def trace_sigma_predicted_deg(spread_deg: ArrayLike, dip_deg: ArrayLike) -> np.ndarray:
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


@dataclass(frozen=True)
class ToleranceSettings:
    """Settings of the trace tolerance k·√(σ_1² + σ_2²), floored and capped.

    Checked once on construction: a bad value raises :class:`inclination.errors.SettingError`.

    Attributes
    ----------
    k : float
        Coverage factor, > 0.
    floor_deg : float
        Smallest tolerance, degrees, > 0.
    max_tolerance_deg : float
        Largest tolerance, degrees, in [floor_deg, 90] (no two lines differ by more than 90°).

    Examples
    --------
    >>> ToleranceSettings(k=2.0, floor_deg=1.0, max_tolerance_deg=5.0).k
    2.0
    >>> ToleranceSettings(k=-1.0)
    Traceback (most recent call last):
    ...
    inclination.errors.SettingError: Expected `k` to be a finite number > 0, got -1.0.
    """

    k: float = 2.0
    floor_deg: float = 1.0
    max_tolerance_deg: float = 5.0

    def __post_init__(self) -> None:
        for name in ("k", "floor_deg", "max_tolerance_deg"):
            value = getattr(self, name)
            try:
                ok = bool(np.isfinite(value) and value > 0)
            except TypeError:
                ok = False
            if not ok:
                raise SettingError(f"Expected `{name}` to be a finite number > 0, got {value!r}.")
            object.__setattr__(self, name, float(value))
        if self.floor_deg > self.max_tolerance_deg:
            raise SettingError(
                f"Expected `floor_deg` to be <= `max_tolerance_deg` ({self.max_tolerance_deg!r}), "
                f"got {self.floor_deg!r}."
            )
        if self.max_tolerance_deg > 90.0:
            raise SettingError(
                "Expected `max_tolerance_deg` to be <= 90 (two lines never differ by more), "
                f"got {self.max_tolerance_deg!r}."
            )


def trace_tolerance_deg(
    sigma_measured_deg: ArrayLike,
    sigma_predicted_deg: ArrayLike,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
) -> np.ndarray:
    """Trace tolerance k·√(σ_measured² + σ_predicted²), floored and capped.

    Parameters
    ----------
    sigma_measured_deg, sigma_predicted_deg : array_like
        Standard uncertainties of the measured and predicted trace angles,
        degrees, >= 0; broadcast together.
    k : float, default 2.0
        Coverage factor, > 0.
    floor_deg, max_tolerance_deg : float, default 1.0, 5.0
        Smallest and largest tolerance, degrees, 0 < floor_deg <= max_tolerance_deg <= 90
        (see :class:`ToleranceSettings`).

    Returns
    -------
    ndarray
        Tolerance in degrees, in [floor_deg, max_tolerance_deg].

    Examples
    --------
    >>> trace_tolerance_deg([0.1, 0.6, 3.0], 0.8).round(6).tolist()
    [1.612452, 2.0, 5.0]
    """
    settings = ToleranceSettings(k, floor_deg, max_tolerance_deg)
    sm = as_float_array(sigma_measured_deg, "sigma_measured_deg")
    sp = as_float_array(sigma_predicted_deg, "sigma_predicted_deg")
    for arr, name in ((sm, "sigma_measured_deg"), (sp, "sigma_predicted_deg")):
        check_finite(np.atleast_1d(arr), name)
        if np.any(arr < 0):
            raise ValueError(f"Expected `{name}` to be >= 0, got {float(np.min(arr))!r}.")
    return np.clip(settings.k * np.hypot(sm, sp), settings.floor_deg, settings.max_tolerance_deg)


def trace_deviation_deg(measured_deg: ArrayLike, predicted_deg: ArrayLike) -> np.ndarray:
    """Absolute angle between two trace directions (lines, period 180°), in [0, 90].

    Parameters
    ----------
    measured_deg, predicted_deg : array_like
        Trace angles, degrees, any range (a line's angle has period 180°); broadcast together.

    Returns
    -------
    ndarray
        Deviation in degrees, in [0, 90]. NaN in either input gives NaN (a plane with no
        trace has no deviation).

    Examples
    --------
    >>> trace_deviation_deg([1.0, 10.0, 170.0], [179.0, 100.0, np.nan]).round(6).tolist()
    [2.0, 90.0, nan]
    """
    m = as_float_array(measured_deg, "measured_deg")
    p = as_float_array(predicted_deg, "predicted_deg")
    return np.abs(np.mod(m - p + 90.0, 180.0) - 90.0)


def chance_fit(trace_angle_deg: ArrayLike, tolerance_deg: ArrayLike) -> float | np.ndarray:
    """Chance that a trace at a uniformly random angle fits at least one candidate.

    A trace fits candidate i when it lies within τ_i of the candidate's trace
    angle θ_i, so the chance is the length of the union of the windows
    [θ_i − τ_i, θ_i + τ_i] on the 180° circle of trace angles, divided by 180°:
    overlapping windows (two candidates with nearly the same trace, or one plane
    shared by both grains) count once. For disjoint windows this is Σ 2τ_i/180°.
    NaN entries (planes with no trace) are not candidates. The union runs over the
    last axis.

    Parameters
    ----------
    trace_angle_deg : array_like, shape (..., K)
        Trace angles of the K candidates, degrees (any real; taken modulo 180).
    tolerance_deg : array_like, shape (..., K)
        Their tolerances, degrees, in [0, 90].

    Returns
    -------
    float or ndarray, shape (...)
        Probability in [0, 1]; 0 when there are no candidates.

    Examples
    --------
    >>> round(float(chance_fit([10.0, 50.0, 100.0], [2.0, 2.0, 2.0])), 6)  # 12/180
    0.066667
    >>> round(float(chance_fit([10.0, 11.0], [2.0, 2.0])), 6)  # [8, 13]: 5/180
    0.027778
    >>> round(float(chance_fit([], [])), 6)
    0.0
    """
    t = as_float_array(tolerance_deg, "tolerance_deg")
    if t.ndim == 0:
        raise ValueError(f"Expected `tolerance_deg` to have shape (..., K), got {t.shape}.")
    if np.any((t < 0) | (t > 90)):
        raise ValueError("Expected `tolerance_deg` to lie in [0, 90], got a value outside.")
    theta = as_float_array(trace_angle_deg, "trace_angle_deg")
    if theta.shape != t.shape:
        raise ValueError(
            f"Expected `trace_angle_deg` to have the shape of `tolerance_deg` {t.shape}, "
            f"got {theta.shape}."
        )
    none = np.isnan(t) | np.isnan(theta)
    start = np.where(none, 0.0, np.mod(theta - t, 180.0))
    end = np.where(none, 0.0, start + 2.0 * t)
    # A window past 180° wraps: its piece beyond 180° starts again at 0°.
    wrap_end = np.where(end > 180.0, end - 180.0, 0.0)
    starts = np.concatenate([start, np.zeros_like(start)], axis=-1)
    ends = np.concatenate([np.minimum(end, 180.0), wrap_end], axis=-1)
    order = np.argsort(starts, axis=-1, kind="stable")
    starts = np.take_along_axis(starts, order, -1)
    ends = np.take_along_axis(ends, order, -1)
    # With the starts sorted, the covered length is Σ max(0, e_i − max(s_i, max_{j<i} e_j)).
    reach = np.maximum.accumulate(ends, axis=-1)
    before = np.concatenate([np.zeros_like(reach[..., :1]), reach[..., :-1]], axis=-1)
    covered = np.sum(np.maximum(0.0, ends - np.maximum(starts, before)), axis=-1)
    out = np.clip(covered / 180.0, 0.0, 1.0)
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class TraceFit:
    """How a measured trace compares with the traces of predicted planes.

    Attributes
    ----------
    trace_deviation_deg : ndarray
        :func:`trace_deviation_deg` of the measured and predicted traces, in [0, 90];
        NaN where the plane has no trace.
    tolerance_deg : ndarray
        :func:`trace_tolerance_deg` of the measured and predicted σ.
    fits : ndarray of bool
        The plane has a trace and its deviation is at most its tolerance.
    """

    trace_deviation_deg: np.ndarray
    tolerance_deg: np.ndarray
    fits: np.ndarray


def trace_fit(
    trace_angle_deg: ArrayLike,
    trace_sigma_deg: ArrayLike,
    planes: PlanePrediction,
    spread_deg: ArrayLike,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
) -> TraceFit:
    """Deviation, tolerance and fit of a measured trace against predicted planes.

    The one fit rule of identification and of the twin test: the predicted σ is
    :func:`trace_sigma_predicted_deg` of the grain's orientation spread and the plane's dip,
    the tolerance :func:`trace_tolerance_deg` of the measured and predicted σ, and a plane
    fits when it has a trace (§5) and :func:`trace_deviation_deg` is at most the tolerance.

    Parameters
    ----------
    trace_angle_deg, trace_sigma_deg : array_like
        Measured trace angle in S (degrees, [0, 180)) and its standard uncertainty (>= 0).
    planes : PlanePrediction
        Predicted planes, of a shape the measured arrays broadcast against
        (e.g. measured (N, 1) against planes (N, M)).
    spread_deg : array_like
        Orientation scatter of the grain that predicts each plane, degrees, >= 0.
    k, floor_deg, max_tolerance_deg : float, default 2.0, 1.0, 5.0
        Tolerance settings (:class:`ToleranceSettings`).

    Returns
    -------
    TraceFit
        Arrays of the broadcast shape.

    Examples
    --------
    >>> p = predict_planes([1.0, 0.0, 0.0, 0.0], [[1, 1, 1], [1, -1, 1]])  # cube orientation
    >>> f = trace_fit(136.5, 0.3, p, 0.2)
    >>> f.trace_deviation_deg.round(6).tolist(), f.tolerance_deg.round(6).tolist()
    ([1.5, 88.5], [1.0, 1.0])
    >>> f.fits.tolist()
    [False, False]
    >>> trace_fit(136.5, 0.3, p, 0.2, max_tolerance_deg=2.0, k=4.0).fits.tolist()
    [True, False]
    """
    deviation = trace_deviation_deg(trace_angle_deg, planes.trace_angle_deg)
    sigma_predicted = trace_sigma_predicted_deg(spread_deg, planes.dip_deg)
    tolerance = trace_tolerance_deg(
        trace_sigma_deg,
        sigma_predicted,
        k=k,
        floor_deg=floor_deg,
        max_tolerance_deg=max_tolerance_deg,
    )
    return TraceFit(deviation, tolerance, planes.has_trace & (deviation <= tolerance))


def shared_plane(normal_a_sample: ArrayLike, normal_b_sample: ArrayLike) -> PlanePrediction:
    """The plane shared by two grains whose normals (nearly) agree: their mean (§5).

    The two normals are taken with the same sign (n ≡ −n) before they are averaged, so the
    mean is the bisector of the acute angle between them.

    Parameters
    ----------
    normal_a_sample, normal_b_sample : array_like, shape (..., 3)
        Unit plane normals in S from grain a and grain b, either sign.

    Returns
    -------
    PlanePrediction
        :func:`inclination.planes.geometry.surface_geometry` of the mean normal.

    Examples
    --------
    >>> c = np.cos(np.deg2rad(1.0)); s = np.sin(np.deg2rad(1.0))
    >>> p = shared_plane([[s, 0.0, c]], [[s, 0.0, -c]])  # ±n: 2° apart as planes
    >>> p.normal_sample.round(6).tolist(), p.dip_deg.round(6).tolist()
    ([[0.0, 0.0, 1.0]], [0.0])
    """
    na = as_float_array(normal_a_sample, "normal_a_sample")
    nb = as_float_array(normal_b_sample, "normal_b_sample")
    check_last_axis(na, "normal_a_sample", 3)
    check_last_axis(nb, "normal_b_sample", 3)
    sign = np.where(np.einsum("...i,...i->...", na, nb) < 0, -1.0, 1.0)
    mean = na + sign[..., None] * nb
    return surface_geometry(mean / np.linalg.norm(mean, axis=-1, keepdims=True))


def pair_spread_deg(spread_a_deg: ArrayLike, spread_b_deg: ArrayLike) -> np.ndarray:
    """Orientation scatter credited to a plane shared by two grains: the RMS of their spreads.

    The mean of two independent estimates is known better than either (by 1/√2 for equal
    scatter); the RMS keeps the tolerance on the safe side.

    Parameters
    ----------
    spread_a_deg, spread_b_deg : array_like
        The two grains' orientation scatter, degrees, >= 0; broadcast together.

    Returns
    -------
    ndarray
        √((σ_a² + σ_b²) / 2), degrees.

    Examples
    --------
    >>> pair_spread_deg([0.2, 0.0], [0.2, 1.0]).round(6).tolist()
    [0.2, 0.707107]
    """
    sa = as_float_array(spread_a_deg, "spread_a_deg")
    sb = as_float_array(spread_b_deg, "spread_b_deg")
    return np.sqrt(0.5 * (sa**2 + sb**2))
