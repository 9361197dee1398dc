"""The sense of each boundary: its measured dip direction against the predicted one (§6).

Turning the data frame 180° about the surface normal leaves every trace where it is
and reverses every predicted dip direction (conventions §6). A measured dip direction
(from a cross-section or a serial section, :mod:`inclination.sections`) therefore
tells the two frames apart. This module owns the sense model — the one definition of
a boundary's likelihood ratio that the per-boundary column and the frame verdict
(:mod:`inclination.compare.verdict`) share: :func:`boundary_sense`,
:func:`reversal_probability`, :func:`sense_bound_log10`, the default
:data:`DEFAULT_BLUNDER_RATE` and the closed set :data:`SENSES`. Which predictions are
worth testing is decided in :mod:`inclination.compare.comparison`.

All azimuths are in the sample frame S (conventions §2), from +X toward +Y in [0, 360).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import ndtr

from .._validation import as_float_array
from ..errors import SettingError

__all__ = [
    "DEFAULT_BLUNDER_RATE",
    "SENSES",
    "boundary_sense",
    "reversal_probability",
    "sense_bound_log10",
]

#: Closed set of the per-boundary ``sense`` column.
SENSES = ("agrees", "opposite", "undecided")

#: Chance that one measured dip direction points the wrong way for a reason that has
#: nothing to do with the frame: an entry matched to the wrong boundary, a misread
#: image, a plane identified wrongly. One in twenty is common practice for a manual
#: record (it is also the rate at which the synthetic end-to-end tests' hand-made
#: blunders are injected); the job can state its own (``comparison.blunder_rate``).
DEFAULT_BLUNDER_RATE = 0.05

_LN10 = math.log(10.0)


def sense_bound_log10(blunder_rate: float) -> float:
    """Largest |log10 likelihood ratio| one boundary can carry: log10((1 − ε)/ε).

    A boundary whose call is wrong with probability ε (a blunder) can never be more
    than (1 − ε)/ε times likelier under one frame than under the other, however
    precise its measurement.

    Parameters
    ----------
    blunder_rate : float
        ε in (0, 0.5).

    Returns
    -------
    float

    Examples
    --------
    >>> round(sense_bound_log10(0.05), 4)
    1.2788
    """
    _check_blunder_rate(blunder_rate)
    return math.log10((1.0 - blunder_rate) / blunder_rate)


def reversal_probability(dip_deg: ArrayLike, dip_sigma_deg: ArrayLike) -> np.ndarray:
    """Chance that a plane measured at this dip truly dips the other way (§6).

    A dip δ in [0°, 90°] with a normal error σ: the plane's true dip lies beyond 90°
    — the same plane seen dipping the opposite way — with probability
    ``Φ((δ − 90°)/σ)``. Near-vertical planes therefore carry a reversal probability
    near 1/2, planes well away from vertical one near 0.

    Parameters
    ----------
    dip_deg, dip_sigma_deg : array_like
        Dip and its σ, degrees (broadcast). NaN gives NaN; σ = 0 gives 0 below 90°
        and 1/2 at 90°.

    Returns
    -------
    ndarray

    Examples
    --------
    >>> reversal_probability([60.0, 88.0, 90.0], 2.0).round(4).tolist()
    [0.0, 0.1587, 0.5]
    """
    dip = as_float_array(dip_deg, "dip_deg")
    sigma = as_float_array(dip_sigma_deg, "dip_sigma_deg")
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (dip - 90.0) / sigma
    z = np.where((sigma == 0) & (dip == 90.0), 0.0, z)
    return ndtr(z)


def _check_blunder_rate(blunder_rate):
    if not (isinstance(blunder_rate, int | float) and 0.0 < blunder_rate < 0.5):
        raise SettingError(f"Expected `blunder_rate` to be in (0, 0.5), got {blunder_rate!r}.")


def _xor(p, q):
    """Chance that exactly one of two independent flips happens."""
    return p * (1.0 - q) + q * (1.0 - p)


def boundary_sense(
    predicted_azimuth_deg: ArrayLike,
    predicted_dip_deg: ArrayLike,
    measured_azimuth_deg: ArrayLike,
    measured_sigma_deg: ArrayLike,
    *,
    measured_dip_deg: ArrayLike | None = None,
    measured_dip_sigma_deg: ArrayLike | None = None,
    measured_reversal_probability: ArrayLike | None = None,
    predicted_azimuth_sigma_deg: ArrayLike = 1.0,
    predicted_dip_sigma_deg: ArrayLike = 1.0,
    blunder_rate: float = DEFAULT_BLUNDER_RATE,
    n_sigma_vertical: float = 2.0,
    max_mismatch_deg: float = 30.0,
    max_dip_mismatch_deg: float = 10.0,
    min_log10_ratio: float = 1.0,
) -> dict[str, np.ndarray]:
    """Whether each measured dip direction agrees with the frame as declared (§6).

    The measured azimuth φ is modelled as von Mises about the predicted azimuth μ
    (frame as declared) or about μ + 180° (frame turned 180° about Z), with
    concentration κ = 1/σ², σ² = σ_measured² + σ_predicted² (radians); the precision
    part of the evidence is the ratio of the two, ``ℓ = 2κ cos(φ − μ)`` (natural
    log). The call is wrong with probability q — a blunder (ε = ``blunder_rate``),
    or a reversal of the measured or of the predicted direction (a plane that truly
    dips the other way: :func:`reversal_probability` of the dip and its σ, or the
    section's own ``measured_reversal_probability``, e.g. for a trace nearly
    parallel to a section line) — with q the chance that an odd number of these
    happen. The boundary's likelihood ratio is then

        LR = ((1 − q)·e^{ℓ/2} + q·e^{−ℓ/2}) / ((1 − q)·e^{−ℓ/2} + q·e^{ℓ/2}),

    bounded by (1 − q)/q <= (1 − ε)/ε (:func:`sense_bound_log10`): a precise but
    mismatched entry says at most that. A boundary is decided when
    ``|log10 LR| >= min_log10_ratio`` (default 1: odds of 10 to 1, "strong" on
    Jeffreys' scale, H. Jeffreys, *Theory of Probability*, 3rd ed., 1961, App. B;
    with ε = 0.05 one boundary reaches at most 10^1.28). It is ``undecided``,
    whatever the ratio, when either plane lies within ``n_sigma_vertical`` σ of
    vertical (a vertical plane has no dip direction), when the measurement is more
    than ``max_mismatch_deg`` from both directions, or its dip differs from the
    predicted dip by more than ``max_dip_mismatch_deg`` and three σ (a turn about Z
    keeps dips, so such a plane fits neither frame: it was probably identified
    wrongly), or when a value is missing.

    Parameters
    ----------
    predicted_azimuth_deg, predicted_dip_deg : array_like, shape (N,)
        Dip direction and dip of the identified candidate plane, degrees (S);
        NaN azimuth = no dip direction.
    measured_azimuth_deg, measured_sigma_deg : array_like, shape (N,)
        Measured dip-direction azimuth and its σ, degrees (S); NaN = not measured.
    measured_dip_deg, measured_dip_sigma_deg : array_like, shape (N,), optional
        Measured dip and its σ, for the verticality test and the reversal
        probability of the measurement.
    measured_reversal_probability : array_like, shape (N,), optional
        The section's own chance that the measured direction is reversed; NaN rows
        fall back on :func:`reversal_probability` of the measured dip.
    predicted_azimuth_sigma_deg, predicted_dip_sigma_deg : float or array_like, optional
        σ of the prediction (orientation spread), degrees.
    blunder_rate : float, optional
        ε in (0, 0.5) (:data:`DEFAULT_BLUNDER_RATE`).
    n_sigma_vertical, max_mismatch_deg, max_dip_mismatch_deg, min_log10_ratio : float
        The thresholds above (optional).

    Returns
    -------
    dict of 1-D arrays
        ``sense`` (one of ``SENSES``), ``log10_likelihood_ratio`` (declared over
        turned, the bounded LR above; NaN where not computed),
        ``reversal_probability`` (measured or predicted direction reversed),
        ``mismatch_deg`` (angle from the nearer of the two predicted directions),
        ``reason`` (why undecided; "" when decided).

    Examples
    --------
    >>> out = boundary_sense([30.0, 30.0, 30.0], [60.0, 60.0, 89.5],
    ...                      [32.0, 208.0, 30.0], [2.0, 2.0, 2.0])
    >>> out["sense"].tolist()
    ['agrees', 'opposite', 'undecided']
    >>> out["log10_likelihood_ratio"][:2].round(4).tolist()
    [1.2788, -1.2788]
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
    m_rev = _column(measured_reversal_probability, "measured_reversal_probability", n, fill=np.nan)
    psig = _column(predicted_azimuth_sigma_deg, "predicted_azimuth_sigma_deg", n)
    pdip_sig = _column(predicted_dip_sigma_deg, "predicted_dip_sigma_deg", n)
    _check_blunder_rate(blunder_rate)
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
        ell = 2.0 * kappa * np.cos(diff)
    # Reversals: the section's own figure where it gives one, else the dip's (§6).
    rev_m = np.where(
        np.isfinite(m_rev), m_rev, np.nan_to_num(reversal_probability(mdip, mdip_sig), nan=0.0)
    )
    rev_p = np.nan_to_num(reversal_probability(pdip, pdip_sig), nan=0.0)
    rev = _xor(np.clip(rev_m, 0.0, 0.5), np.clip(rev_p, 0.0, 0.5))
    q = np.clip(_xor(blunder_rate, rev), blunder_rate, 0.5)
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_keep, ln_flip = np.log1p(-q), np.log(q)
        ln_ratio = np.logaddexp(ln_keep + ell / 2, ln_flip - ell / 2) - np.logaddexp(
            ln_keep - ell / 2, ln_flip + ell / 2
        )
    log10_ratio = ln_ratio / _LN10
    folded = np.abs((phi - mu + 90.0) % 180.0 - 90.0)

    reason = np.full(n, "", dtype=object)
    missing_m = ~(np.isfinite(phi) & np.isfinite(msig))
    missing_p = ~(np.isfinite(mu) & np.isfinite(pdip))
    vertical_p = (90.0 - pdip) < n_sigma_vertical * np.nan_to_num(pdip_sig, nan=0.0)
    vertical_m = np.isfinite(mdip) & (
        (90.0 - mdip) < n_sigma_vertical * np.nan_to_num(mdip_sig, nan=0.0)
    )
    weak = ~(np.abs(log10_ratio) >= min_log10_ratio)
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
    missing = missing_m | missing_p
    return {
        "sense": sense.astype(str) if n else np.array([], str),
        "log10_likelihood_ratio": np.where(missing, np.nan, log10_ratio),
        "reversal_probability": np.where(missing, np.nan, rev),
        "mismatch_deg": np.where(missing, np.nan, folded),
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
