"""The sense of each boundary: its measured dip direction against the predicted one (§6).

Turning the data frame 180° about the surface normal leaves every trace where it is
and reverses every predicted dip direction (conventions §6). A measured dip direction
(from a cross-section or a serial section, :mod:`inclination.sections`) therefore
tells the two frames apart. This module owns the per-boundary call:
:func:`boundary_sense` weighs the measured azimuth against the predicted one in the
frame as declared and in the turned frame, and :data:`SENSES` is the closed set of
its answers. Which predictions are worth testing is decided in
:mod:`inclination.compare.comparison`; the map's verdict in
:mod:`inclination.compare.verdict`.

All azimuths are in the sample frame S (conventions §2), from +X toward +Y in [0, 360).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array
from ..errors import SettingError

__all__ = ["SENSES", "boundary_sense"]

#: Closed set of the per-boundary ``sense`` column.
SENSES = ("agrees", "opposite", "undecided")

_LN10 = math.log(10.0)


def boundary_sense(
    predicted_azimuth_deg: ArrayLike,
    predicted_dip_deg: ArrayLike,
    measured_azimuth_deg: ArrayLike,
    measured_sigma_deg: ArrayLike,
    *,
    measured_dip_deg: ArrayLike | None = None,
    measured_dip_sigma_deg: ArrayLike | None = None,
    predicted_azimuth_sigma_deg: ArrayLike = 1.0,
    predicted_dip_sigma_deg: ArrayLike = 1.0,
    n_sigma_vertical: float = 2.0,
    max_mismatch_deg: float = 30.0,
    max_dip_mismatch_deg: float = 10.0,
    min_log10_ratio: float = 2.0,
) -> dict[str, np.ndarray]:
    """Whether each measured dip direction agrees with the frame as declared (§6).

    The measured azimuth φ is modelled as von Mises about the predicted azimuth μ
    (frame as declared) or about μ + 180° (frame turned 180° about Z), with
    concentration κ = 1/σ², σ² = σ_measured² + σ_predicted² (radians). The likelihood
    ratio of the two is ``exp(2κ cos(φ − μ))``. A boundary is decided when
    ``|log10 ratio| >= min_log10_ratio`` (default 2: odds of 100 to 1, "decisive" on
    Jeffreys' scale, H. Jeffreys, *Theory of Probability*, 3rd ed., 1961, App. B).
    It is ``undecided``, whatever the ratio, when either plane lies within
    ``n_sigma_vertical`` σ of vertical (a vertical plane has no dip direction), when
    the measurement is more than ``max_mismatch_deg`` from both directions, or its
    dip differs from the predicted dip by more than ``max_dip_mismatch_deg`` and three
    σ (a turn about Z keeps dips, so such a plane fits neither frame: it was probably
    identified wrongly), or when a value is missing.

    Parameters
    ----------
    predicted_azimuth_deg, predicted_dip_deg : array_like, shape (N,)
        Dip direction and dip of the identified candidate plane, degrees (S);
        NaN azimuth = no dip direction.
    measured_azimuth_deg, measured_sigma_deg : array_like, shape (N,)
        Measured dip-direction azimuth and its σ, degrees (S); NaN = not measured.
    measured_dip_deg, measured_dip_sigma_deg : array_like, shape (N,), optional
        Measured dip and its σ, for the verticality test of the measurement.
    predicted_azimuth_sigma_deg, predicted_dip_sigma_deg : float or array_like, optional
        σ of the prediction (orientation spread), degrees.
    n_sigma_vertical, max_mismatch_deg, max_dip_mismatch_deg, min_log10_ratio : float
        The thresholds above (optional).

    Returns
    -------
    dict of 1-D arrays
        ``sense`` (one of ``SENSES``), ``log10_likelihood_ratio`` (declared over
        turned; NaN where not computed), ``mismatch_deg`` (angle from the nearer of
        the two predicted directions), ``reason`` (why undecided; "" when decided).

    Examples
    --------
    >>> out = boundary_sense([30.0, 30.0, 30.0], [60.0, 60.0, 89.5],
    ...                      [32.0, 208.0, 30.0], [2.0, 2.0, 2.0])
    >>> out["sense"].tolist()
    ['agrees', 'opposite', 'undecided']
    >>> out["reason"].tolist()
    ['', '', 'predicted plane near vertical']
    """
    mu = as_float_array(predicted_azimuth_deg, "predicted_azimuth_deg").ravel()
    n = len(mu)
    pdip = _column(predicted_dip_deg, "predicted_dip_deg", n)
    phi = _column(measured_azimuth_deg, "measured_azimuth_deg", n)
    msig = _column(measured_sigma_deg, "measured_sigma_deg", n)
    mdip = _column(measured_dip_deg, "measured_dip_deg", n, fill=np.nan)
    mdip_sig = _column(measured_dip_sigma_deg, "measured_dip_sigma_deg", n, fill=np.nan)
    psig = _column(predicted_azimuth_sigma_deg, "predicted_azimuth_sigma_deg", n)
    pdip_sig = _column(predicted_dip_sigma_deg, "predicted_dip_sigma_deg", n)
    for value, name in (
        (n_sigma_vertical, "n_sigma_vertical"),
        (max_mismatch_deg, "max_mismatch_deg"),
        (max_dip_mismatch_deg, "max_dip_mismatch_deg"),
        (min_log10_ratio, "min_log10_ratio"),
    ):
        if not (np.isfinite(value) and value > 0):
            raise SettingError(f"Expected `{name}` to be a finite number > 0, got {value!r}.")
    if np.any(msig[np.isfinite(msig)] < 0) or np.any(psig[np.isfinite(psig)] < 0):
        raise ValueError("Expected `measured_sigma_deg` and σ of the prediction >= 0, got < 0.")

    sigma = np.deg2rad(np.hypot(msig, psig))
    diff = np.deg2rad(phi - mu)
    with np.errstate(divide="ignore", invalid="ignore"):
        kappa = 1.0 / np.maximum(sigma, 1e-6) ** 2
        log10_ratio = 2.0 * kappa * np.cos(diff) / _LN10
    folded = np.abs((phi - mu + 90.0) % 180.0 - 90.0)

    reason = np.full(n, "", dtype=object)
    missing_m = ~(np.isfinite(phi) & np.isfinite(msig))
    missing_p = ~(np.isfinite(mu) & np.isfinite(pdip))
    vertical_p = (90.0 - pdip) < n_sigma_vertical * np.nan_to_num(pdip_sig, nan=0.0)
    vertical_m = np.isfinite(mdip) & (
        (90.0 - mdip) < n_sigma_vertical * np.nan_to_num(mdip_sig, nan=0.0)
    )
    weak = np.abs(log10_ratio) < min_log10_ratio
    dip_sigma = np.hypot(np.nan_to_num(mdip_sig, nan=0.0), np.nan_to_num(pdip_sig, nan=0.0))
    dip_off = np.isfinite(mdip) & (
        np.abs(mdip - pdip) > np.maximum(max_dip_mismatch_deg, 3.0 * dip_sigma)
    )
    # Later assignments win: the most basic reason is the one reported.
    reason[weak] = "weak evidence"
    reason[folded > max_mismatch_deg] = "fits neither direction"
    reason[dip_off] = "dip differs from the predicted plane"
    reason[vertical_m] = "measured plane near vertical"
    reason[vertical_p] = "predicted plane near vertical"
    reason[missing_p] = "no predicted dip direction"
    reason[missing_m] = "no measurement"
    decided = reason == ""
    sense = np.full(n, "undecided", dtype=object)
    sense[decided & (log10_ratio > 0)] = "agrees"
    sense[decided & (log10_ratio < 0)] = "opposite"
    log10_ratio = np.where(missing_m | missing_p, np.nan, log10_ratio)
    return {
        "sense": sense.astype(str) if n else np.array([], str),
        "log10_likelihood_ratio": log10_ratio,
        "mismatch_deg": np.where(missing_m | missing_p, np.nan, folded),
        "reason": reason.astype(str) if n else np.array([], str),
    }


def _column(value, name, n, *, fill=None):
    if value is None:
        return np.full(n, fill if fill is not None else np.nan)
    arr = as_float_array(value, name)
    if arr.ndim == 0:
        return np.full(n, float(arr))
    arr = arr.ravel()
    if len(arr) != n:
        raise ValueError(f"Expected `{name}` to have length {n}, got {len(arr)}.")
    return arr
