"""The frame verdict of one map: its boundaries' senses combined into one call (§6).

Owns :class:`FrameVerdict`, :func:`frame_verdict`, the closed set :data:`VERDICTS`
and the plain-language sentence the report prints. The per-boundary senses it
combines come from :func:`inclination.compare.sense.boundary_sense`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.stats import binom

from ..errors import SettingError
from .sense import SENSES

__all__ = ["VERDICTS", "FrameVerdict", "frame_verdict"]

#: Closed set of the map's ``frame_verdict``.
VERDICTS = ("as_declared", "turned_180_about_normal", "undecided", "inconsistent")

_LN10 = math.log(10.0)


@dataclass(frozen=True)
class FrameVerdict:
    """The frame verdict of one map, with its evidence (§6).

    Attributes
    ----------
    verdict : str
        One of ``VERDICTS``.
    n_agree, n_opposite, n_undecided : int
        Boundary counts by sense.
    log10_likelihood_ratio : float
        Combined log10 odds of the frame as declared against the turned frame, each
        boundary's odds bounded by the chance ``error_rate`` that its own call is
        wrong (0 when no boundary is decided).
    p_value_split : float
        Chance of a minority at least this large if each decided call were wrong
        only with probability ``error_rate`` (small: the split is beyond chance).
    p_value_sign : float
        Chance of a majority at least this large if the calls carried no
        information (binomial, p = 1/2).
    error_rate : float
    sentence : str
        The verdict in plain language, for the report.
    """

    verdict: str
    n_agree: int
    n_opposite: int
    n_undecided: int
    log10_likelihood_ratio: float
    p_value_split: float
    p_value_sign: float
    error_rate: float
    sentence: str

    def as_dict(self) -> dict:
        """JSON-ready mapping (``summary.json`` key ``frame_verdict``)."""
        return {
            "verdict": self.verdict,
            "n_agree": self.n_agree,
            "n_opposite": self.n_opposite,
            "n_undecided": self.n_undecided,
            "log10_likelihood_ratio": self.log10_likelihood_ratio,
            "p_value_split": self.p_value_split,
            "p_value_sign": self.p_value_sign,
            "error_rate": self.error_rate,
            "sentence": self.sentence,
        }


def frame_verdict(
    senses: Mapping[str, ArrayLike],
    *,
    error_rate: float = 0.05,
    alpha: float = 0.01,
    min_log10_ratio: float = 2.0,
) -> FrameVerdict:
    """Combine the boundaries of one map into one frame verdict (§6).

    A split — a minority of calls larger than ``error_rate`` explains at
    significance ``alpha`` (binomial) — is ``inconsistent``: mixed data, never
    averaged. Otherwise the per-boundary odds are combined as independent
    evidence, each bounded by ``(1 − ε)/ε`` with ε = ``error_rate`` (the chance that
    one call is wrong for a reason that has nothing to do with the frame, such as a
    misidentified plane), so that no single boundary decides the map; the map is
    decided when the combined odds reach ``10**min_log10_ratio``.

    Parameters
    ----------
    senses : mapping
        The table of :func:`boundary_sense` (``sense``, ``log10_likelihood_ratio``).
    error_rate : float, optional
        ε in (0, 0.5): the chance that one call is wrong whatever the frame
        (0.05 is common practice for a 1-in-20 slip).
    alpha : float, optional
        Significance of the split test.
    min_log10_ratio : float, optional
        Combined odds needed for a decision.

    Returns
    -------
    FrameVerdict

    Examples
    --------
    >>> v = frame_verdict({"sense": np.array(["agrees"] * 5 + ["undecided"]),
    ...                    "log10_likelihood_ratio": np.array([40.0] * 5 + [0.5])})
    >>> v.verdict, v.n_agree, v.n_undecided, round(v.log10_likelihood_ratio, 3)
    ('as_declared', 5, 1, 6.394)
    """
    if not (0.0 < error_rate < 0.5):
        raise SettingError(f"Expected `error_rate` to be in (0, 0.5), got {error_rate!r}.")
    if not (0.0 < alpha < 1.0):
        raise SettingError(f"Expected `alpha` to be in (0, 1), got {alpha!r}.")
    if not (np.isfinite(min_log10_ratio) and min_log10_ratio > 0):
        raise SettingError(
            f"Expected `min_log10_ratio` to be a finite number > 0, got {min_log10_ratio!r}."
        )
    sense = np.asarray(senses["sense"]).astype(str)
    bad = ~np.isin(sense, SENSES)
    if bad.any():
        raise ValueError(
            f"Expected `sense` to be one of {SENSES}, got {sense[bad][0]!r} at index "
            f"({int(np.flatnonzero(bad)[0])},)."
        )
    ratio = np.asarray(senses["log10_likelihood_ratio"], float)
    agree = int(np.sum(sense == "agrees"))
    oppose = int(np.sum(sense == "opposite"))
    undecided = int(np.sum(sense == "undecided"))
    n = agree + oppose
    minority = min(agree, oppose)

    decided = sense != "undecided"
    ln_r = ratio[decided] * _LN10
    ln_eps, ln_keep = math.log(error_rate), math.log1p(-error_rate)
    # Each boundary: P(data | declared) ∝ (1−ε)·e^{ℓ/2} + ε·e^{−ℓ/2}, and the reverse.
    robust = np.logaddexp(ln_keep + ln_r / 2, ln_eps - ln_r / 2) - np.logaddexp(
        ln_keep - ln_r / 2, ln_eps + ln_r / 2
    )
    combined = float(np.sum(robust) / _LN10) if n else 0.0
    p_split = float(binom.sf(minority - 1, n, error_rate)) if n else 1.0
    p_sign = float(binom.sf(max(agree, oppose) - 1, n, 0.5)) if n else 1.0

    if n == 0:
        verdict = "undecided"
    elif minority > 0 and p_split < alpha:
        verdict = "inconsistent"
    elif abs(combined) < min_log10_ratio:
        verdict = "undecided"
    else:
        verdict = "as_declared" if combined > 0 else "turned_180_about_normal"
    sentence = _verdict_sentence(verdict, agree, oppose, undecided, combined, p_split)
    return FrameVerdict(
        verdict, agree, oppose, undecided, combined, p_split, p_sign, float(error_rate), sentence
    )


def _count(n: int, noun: str = "boundary") -> str:
    plural = "boundaries" if noun == "boundary" else noun + "s"
    return f"{n} {noun if n == 1 else plural}"


def _verdict_sentence(
    verdict: str, agree: int, oppose: int, undecided: int, combined: float, p_split: float
) -> str:
    total = agree + oppose + undecided
    tally = (
        f"Of {_count(total)} with a measured dip direction, {agree} agree with the frame as "
        f"declared, {oppose} point the opposite way and {undecided} cannot tell"
    )
    if verdict == "as_declared":
        return (
            f"{tally}: the frame is as declared (combined odds 10^{combined:.1f} to 1 "
            "against a frame turned 180° about the surface normal)."
        )
    if verdict == "turned_180_about_normal":
        return (
            f"{tally}: the data's frame is turned 180° about the surface normal (combined "
            f"odds 10^{-combined:.1f} to 1); every dip direction predicted in the declared "
            "frame points the wrong way."
        )
    if verdict == "inconsistent":
        return (
            f"{tally}: the boundaries disagree beyond chance (p = {p_split:.2g}); the "
            "data are inconsistent — check the plane identifications, the section "
            "records and the viewing side before trusting either frame."
        )
    if agree + oppose == 0:
        return f"{tally}: no boundary decides, so the frame cannot be checked."
    return (
        f"{tally}: the evidence (combined odds 10^{abs(combined):.1f} to 1) is too weak "
        "to decide the frame."
    )
