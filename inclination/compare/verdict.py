"""The frame verdict of one map: its boundaries' senses combined into one call (§6).

Owns :class:`FrameVerdict`, :func:`frame_verdict`, the closed set :data:`VERDICTS`
and the plain-language sentence the report prints. The per-row senses and their
bounded likelihood ratios come from :func:`inclination.compare.sense.boundary_sense`
— the one sense model; this module only decides what counts as one independent
witness (a boundary, not a segment) and tests each section's entries as a group.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.stats import binom

from ..errors import SettingError
from .sense import DEFAULT_BLUNDER_RATE, SENSES, sense_bound_log10

__all__ = ["VERDICTS", "FrameVerdict", "frame_verdict"]

#: Closed set of the map's ``frame_verdict``.
VERDICTS = ("as_declared", "turned_180_about_normal", "undecided", "inconsistent")


@dataclass(frozen=True)
class FrameVerdict:
    """The frame verdict of one map, with its evidence (§6).

    Attributes
    ----------
    verdict : str
        One of ``VERDICTS``.
    n_agree, n_opposite, n_undecided : int
        Boundary (witness) counts by sense, sections left out excluded.
    log10_likelihood_ratio : float
        Combined log10 odds of the frame as declared against the turned frame: the
        sum over boundaries of each boundary's mean bounded log10 ratio
        (:func:`inclination.compare.boundary_sense`); 0 when none is decided.
    p_value_split : float
        Chance of a minority at least this large if each boundary's call were wrong
        only with probability ``blunder_rate`` (small: the split is beyond chance).
    p_value_sign : float
        Chance of a majority at least this large if the calls carried no
        information (binomial, p = 1/2).
    blunder_rate : float
    suspect_sections : tuple of str
        Sections whose entries all point opposite to the other sections' verdict;
        left out of the verdict (their viewer side or tilt is likely recorded wrongly).
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
    blunder_rate: float
    suspect_sections: tuple[str, ...]
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
            "blunder_rate": self.blunder_rate,
            "suspect_sections": list(self.suspect_sections),
            "sentence": self.sentence,
        }


@dataclass(frozen=True)
class _Tally:
    agree: int
    oppose: int
    undecided: int
    combined: float


def _tally(witness, decided, ratio, mask, threshold) -> _Tally:
    """Witnesses of the rows in ``mask``: each the mean of its decided rows' ratios."""
    keys = np.unique(witness[mask])
    use = mask & decided
    if use.any():
        _, inverse = np.unique(witness[use], return_inverse=True)
        mean = np.bincount(inverse, weights=ratio[use]) / np.bincount(inverse)
    else:
        mean = np.zeros(0)
    agree = int(np.sum(mean >= threshold))
    oppose = int(np.sum(mean <= -threshold))
    return _Tally(agree, oppose, len(keys) - agree - oppose, float(np.sum(mean)))


def frame_verdict(
    senses: Mapping[str, ArrayLike],
    *,
    blunder_rate: float = DEFAULT_BLUNDER_RATE,
    alpha: float = 0.01,
    min_log10_ratio: float = 2.0,
    min_boundary_log10_ratio: float = 1.0,
    section_names: Sequence[str] | None = None,
) -> FrameVerdict:
    """Combine the boundaries of one map into one frame verdict (§6).

    Independent witnesses are boundaries, not rows: rows with one ``witness`` label
    (one grain pair: collinear pieces of a boundary and both faces of one twin
    lamella separate the same two grains) count once, with the mean of their
    decided rows' bounded log10 ratios; a witness is ``agrees``/``opposite`` when
    that mean reaches ±``min_boundary_log10_ratio``. The entries of one section
    share that section's declared viewer side and tilt, so they are also tested as
    a group: a section with at least two decided witnesses, all pointing against
    the decisive and unanimous verdict of more witnesses in the other sections, is
    left out and named in
    ``suspect_sections`` (check its viewer side and tilt) rather than read as a
    turned frame. A split — a minority of witnesses larger than ``blunder_rate``
    explains at significance ``alpha`` (binomial) — is ``inconsistent``: mixed
    data, never averaged. Otherwise the witnesses' odds are summed as independent
    evidence, and the map is decided when they reach ``10**min_log10_ratio``.

    Parameters
    ----------
    senses : mapping
        The table of :func:`inclination.compare.boundary_sense` (``sense``,
        ``log10_likelihood_ratio``), optionally with ``witness`` (a label per row;
        default: every row its own) and ``section`` (index into ``section_names``;
        default: one section).
    blunder_rate : float, optional
        ε in (0, 0.5), the chance that one boundary's call is wrong whatever the
        frame (:data:`inclination.compare.DEFAULT_BLUNDER_RATE`).
    alpha : float, optional
        Significance of the split test.
    min_log10_ratio : float, optional
        Combined odds needed for a decision.
    min_boundary_log10_ratio : float, optional
        Mean odds a witness needs to count as agreeing or opposite.
    section_names : sequence of str, optional
        Names of the sections, by ``section`` index (default "section 1", …).

    Returns
    -------
    FrameVerdict

    Examples
    --------
    >>> v = frame_verdict({"sense": np.array(["agrees"] * 5 + ["undecided"]),
    ...                    "log10_likelihood_ratio": np.array([1.2788] * 5 + [0.5])})
    >>> v.verdict, v.n_agree, v.n_undecided, round(v.log10_likelihood_ratio, 3)
    ('as_declared', 5, 1, 6.394)
    """
    sense_bound_log10(blunder_rate)  # validates ε
    if not (0.0 < alpha < 1.0):
        raise SettingError(f"Expected `alpha` to be in (0, 1), got {alpha!r}.")
    for value, name in (
        (min_log10_ratio, "min_log10_ratio"),
        (min_boundary_log10_ratio, "min_boundary_log10_ratio"),
    ):
        if not (np.isfinite(value) and value > 0):
            raise SettingError(f"Expected `{name}` to be a finite number > 0, got {value!r}.")
    sense = np.asarray(senses["sense"]).astype(str)
    bad = ~np.isin(sense, SENSES)
    if bad.any():
        raise ValueError(
            f"Expected `sense` to be one of {SENSES}, got {sense[bad][0]!r} at index "
            f"({int(np.flatnonzero(bad)[0])},)."
        )
    n_rows = len(sense)
    ratio = np.nan_to_num(np.asarray(senses["log10_likelihood_ratio"], float), nan=0.0)
    witness = np.asarray(senses.get("witness", np.arange(n_rows))).astype(str)
    section = np.asarray(senses.get("section", np.zeros(n_rows, int))).astype(int)
    decided = sense != "undecided"

    def name_of(s: int) -> str:
        if section_names is not None and 0 <= s < len(section_names):
            return str(section_names[s])
        return f"section {s + 1}"

    # Each section's entries as a group against the rest (they share its viewer side).
    voting = np.unique(section[decided])
    suspects = []
    if len(voting) >= 2:
        for s in voting:
            own = section == s
            mine = _tally(witness, decided, ratio, own, min_boundary_log10_ratio)
            rest = _tally(witness, decided, ratio, ~own, min_boundary_log10_ratio)
            against = mine.oppose if rest.combined > 0 else mine.agree
            with_rest = mine.agree if rest.combined > 0 else mine.oppose
            if (
                abs(rest.combined) >= min_log10_ratio
                and against >= 2
                and with_rest == 0
                and rest.agree + rest.oppose > against
                and min(rest.agree, rest.oppose) == 0
            ):
                suspects.append(int(s))
    if len(suspects) == len(voting):
        suspects = []
    keep = ~np.isin(section, suspects)
    t = _tally(witness, decided, ratio, keep, min_boundary_log10_ratio)
    n = t.agree + t.oppose
    minority = min(t.agree, t.oppose)
    p_split = float(binom.sf(minority - 1, n, blunder_rate)) if n else 1.0
    p_sign = float(binom.sf(max(t.agree, t.oppose) - 1, n, 0.5)) if n else 1.0

    if n == 0:
        verdict = "undecided"
    elif minority > 0 and p_split < alpha:
        verdict = "inconsistent"
    elif abs(t.combined) < min_log10_ratio:
        verdict = "undecided"
    else:
        verdict = "as_declared" if t.combined > 0 else "turned_180_about_normal"
    names = tuple(name_of(s) for s in suspects)
    sentence = _verdict_sentence(verdict, t, p_split, names, multi=len(voting) >= 2)
    return FrameVerdict(
        verdict,
        t.agree,
        t.oppose,
        t.undecided,
        t.combined,
        p_split,
        p_sign,
        float(blunder_rate),
        names,
        sentence,
    )


def _count(n: int, noun: str = "boundary") -> str:
    plural = "boundaries" if noun == "boundary" else noun + "s"
    return f"{n} {noun if n == 1 else plural}"


def _verdict_sentence(
    verdict: str, t: _Tally, p_split: float, suspects: tuple[str, ...], *, multi: bool
) -> str:
    total = t.agree + t.oppose + t.undecided
    tally = (
        f"Of {_count(total)} with a measured dip direction, {t.agree} agree with the frame "
        f"as declared, {t.oppose} point the opposite way and {t.undecided} cannot tell"
    )
    if suspects:
        which = ", ".join(suspects)
        whose = "this section's" if len(suspects) == 1 else "these sections'"
        left_out = (
            f" Every entry of {which} points against the other sections: check {whose} "
            "viewer side and tilt (left out of the verdict)."
        )
    else:
        left_out = ""
    if verdict == "as_declared":
        text = (
            f"{tally}: the frame is as declared (combined odds 10^{t.combined:.1f} to 1 "
            "against a frame turned 180° about the surface normal)."
        )
    elif verdict == "turned_180_about_normal":
        sides = (
            "every section's viewer side and tilt"
            if multi
            else "the section's viewer side and tilt"
        )
        text = (
            f"{tally}: the data's frame is turned 180° about the surface normal (combined "
            f"odds 10^{-t.combined:.1f} to 1); every dip direction predicted in the declared "
            f"frame points the wrong way — unless {sides} are recorded wrongly, which "
            "reverses the measured directions alike: check them before turning the frame."
        )
    elif verdict == "inconsistent":
        text = (
            f"{tally}: the boundaries disagree beyond chance (p = {p_split:.2g}); the "
            "data are inconsistent — check the plane identifications, the section "
            "records and each section's viewer side and tilt before trusting either frame."
        )
    elif t.agree + t.oppose == 0:
        text = f"{tally}: no boundary decides, so the frame cannot be checked."
    else:
        text = (
            f"{tally}: the evidence (combined odds 10^{abs(t.combined):.1f} to 1) is too "
            "weak to decide the frame."
        )
    return text + left_out
