"""The comparison of one map: which predictions are tested, and what the measurements say.

Owns the comparator's trust rules — which identified planes carry a predicted dip
direction worth testing, and with what σ (:func:`predicted_directions`) — and the one
call from a map's measured planes and its identification to senses, frame verdict and
full planes (:func:`compare_map`, conventions §6). The pipeline calls
:func:`compare_map`; the synthetic end-to-end tests call :func:`measured_senses`, the
same path without the full planes.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ..crystal.phases import Phase
from .measured import full_planes
from .sense import DEFAULT_BLUNDER_RATE, boundary_sense
from .verdict import FrameVerdict, frame_verdict

__all__ = [
    "TRUSTED_IDENTIFICATIONS",
    "Comparison",
    "PredictedDirections",
    "compare_map",
    "measured_senses",
    "predicted_directions",
]

#: Identification classes whose predicted dip direction the comparator tests: the
#: trace pins the plane down (the shared twin plane, or the one plane both grains
#: share). An ``ambiguous`` trace fits several planes, hence several directions.
TRUSTED_IDENTIFICATIONS = ("coherent_twin", "identified")


@dataclass(frozen=True)
class PredictedDirections:
    """The predictions the comparator tests, one row per requested segment (§5, §6).

    Attributes
    ----------
    segment_id : ndarray of int, shape (N,)
    trusted : ndarray of bool, shape (N,)
        The identification is one of :data:`TRUSTED_IDENTIFICATIONS`.
    dip_azimuth_deg : ndarray, shape (N,)
        Predicted dip direction in S, [0, 360); NaN where not trusted or undefined.
    dip_deg : ndarray, shape (N,)
        Predicted dip, degrees (kept for every row: a turn about Z keeps dips).
    azimuth_sigma_deg, dip_sigma_deg : ndarray, shape (N,)
        σ of the prediction, degrees: half the identification's trace tolerance τ.
    """

    segment_id: np.ndarray
    trusted: np.ndarray
    dip_azimuth_deg: np.ndarray
    dip_deg: np.ndarray
    azimuth_sigma_deg: np.ndarray
    dip_sigma_deg: np.ndarray


def _identification_rows(identification: Mapping[str, ArrayLike], segment_id) -> np.ndarray:
    """Row of ``identification`` for each segment id; -1 where it has none."""
    row_of = {int(s): i for i, s in enumerate(np.asarray(identification["segment_id"]))}
    return np.array([row_of.get(int(s), -1) for s in np.asarray(segment_id)], dtype=int)


def predicted_directions(
    identification: Mapping[str, ArrayLike], segment_id: ArrayLike
) -> PredictedDirections:
    """The trusted predicted dip directions of the given segments, and their σ (§6).

    Only identifications in :data:`TRUSTED_IDENTIFICATIONS` keep their predicted dip
    direction; every other row gets NaN, which :func:`boundary_sense` reports as "no
    predicted dip direction". The σ of the prediction, for the azimuth and for the
    dip alike, is τ/2 with τ the row's ``tolerance_deg``. The identification accepts a
    trace within τ = k·√(σ_trace² + σ_predicted²) of the predicted one, floored and
    capped (:func:`inclination.planes.trace_tolerance_deg`), with the coverage factor
    k = 2 by default: τ/2 is then one σ of the whole trace mismatch the
    identification allowed, of which the error of the prediction is only a part. It is
    therefore an upper bound on the σ of the prediction, and meant as one: a too large
    σ only weakens each boundary's odds, a too small one would make them
    overconfident. One σ serves azimuth and dip: the tolerance is the only
    uncertainty of the plane the identification carries. The divisor stays 2 whatever
    the job's k (with k < 2, τ/2 falls below one σ of the mismatch). On synthetic
    samples every trusted prediction lies well within τ/2 of the true dip and dip
    direction, and the untrusted (ambiguous) ones mostly miss the true plane
    (tests/end_to_end/test_compare_synthetic.py).

    Parameters
    ----------
    identification : mapping
        Table of :func:`inclination.planes.identify` (``segment_id, identification,
        predicted_dip_azimuth_deg, predicted_dip_deg, tolerance_deg``).
    segment_id : array_like of int, shape (N,)
        The segments to predict for; each must be in ``identification``.

    Returns
    -------
    PredictedDirections

    Examples
    --------
    >>> ident = {"segment_id": np.array([4, 7]),
    ...          "identification": np.array(["coherent_twin", "ambiguous"]),
    ...          "predicted_dip_azimuth_deg": np.array([30.0, 120.0]),
    ...          "predicted_dip_deg": np.array([55.0, 70.0]),
    ...          "tolerance_deg": np.array([2.0, 3.0])}
    >>> p = predicted_directions(ident, [7, 4])
    >>> p.dip_azimuth_deg.tolist(), p.dip_deg.tolist(), p.azimuth_sigma_deg.tolist()
    ([nan, 30.0], [70.0, 55.0], [1.5, 1.0])
    """
    seg = np.asarray(segment_id).ravel()
    rows = _identification_rows(identification, seg)
    if np.any(rows < 0):
        missing = seg[rows < 0][0]
        raise ValueError(
            f"Expected every segment in `identification`, got segment_id {int(missing)} "
            f"at index ({int(np.flatnonzero(rows < 0)[0])},)."
        )

    def column(name: str) -> np.ndarray:
        return np.asarray(identification[name])[rows]

    trusted = np.isin(column("identification").astype(str), TRUSTED_IDENTIFICATIONS)
    sigma = column("tolerance_deg").astype(float) / 2.0
    return PredictedDirections(
        segment_id=seg,
        trusted=trusted,
        dip_azimuth_deg=np.where(trusted, column("predicted_dip_azimuth_deg"), np.nan),
        dip_deg=column("predicted_dip_deg").astype(float),
        azimuth_sigma_deg=sigma,
        dip_sigma_deg=sigma,
    )


def measured_senses(
    measured: Mapping[str, ArrayLike],
    identification: Mapping[str, ArrayLike],
    *,
    blunder_rate: float = DEFAULT_BLUNDER_RATE,
) -> dict[str, np.ndarray]:
    """The sense of every measured plane against its trusted prediction (§6).

    Each row also carries its ``witness`` — the unordered grain pair of its
    segment (``"a-b"`` with a < b), so that collinear pieces of one boundary and
    both faces of one twin lamella count once in :func:`frame_verdict` — and its
    ``section`` (from ``measured``, 0 when absent).

    Parameters
    ----------
    measured : mapping
        Measured planes (e.g. :func:`inclination.compare.best_measurements`):
        ``segment_id, dip_direction_azimuth_deg, dip_direction_sigma_deg,
        measured_dip_deg, measured_dip_sigma_deg``; every segment must be in
        ``identification``.
    identification : mapping
        Table of :func:`inclination.planes.identify` (``grain_a, grain_b`` give the
        witness; without them every segment is its own).
    blunder_rate : float, optional
        Passed to :func:`boundary_sense`.

    Returns
    -------
    dict of 1-D arrays
        ``segment_id``, the columns of :func:`boundary_sense`, ``witness`` and
        ``section``, one row per measured plane, in the order of ``measured``.

    Examples
    --------
    >>> ident = {"segment_id": np.array([4]), "identification": np.array(["identified"]),
    ...          "predicted_dip_azimuth_deg": np.array([30.0]),
    ...          "predicted_dip_deg": np.array([55.0]), "tolerance_deg": np.array([2.0])}
    >>> m = {"segment_id": np.array([4]), "dip_direction_azimuth_deg": np.array([211.0]),
    ...      "dip_direction_sigma_deg": np.array([2.0]),
    ...      "measured_dip_deg": np.array([56.0]), "measured_dip_sigma_deg": np.array([1.0])}
    >>> measured_senses(m, ident)["sense"].tolist()
    ['opposite']
    """
    predicted = predicted_directions(identification, measured["segment_id"])
    senses = boundary_sense(
        predicted.dip_azimuth_deg,
        predicted.dip_deg,
        measured["dip_direction_azimuth_deg"],
        measured["dip_direction_sigma_deg"],
        measured_dip_deg=measured["measured_dip_deg"],
        measured_dip_sigma_deg=measured["measured_dip_sigma_deg"],
        measured_reversal_probability=measured.get("reversal_probability"),
        predicted_azimuth_sigma_deg=predicted.azimuth_sigma_deg,
        predicted_dip_sigma_deg=predicted.dip_sigma_deg,
        blunder_rate=blunder_rate,
    )
    seg = predicted.segment_id
    if "grain_a" in identification and "grain_b" in identification:
        rows = _identification_rows(identification, seg)
        ga = np.asarray(identification["grain_a"])[rows]
        gb = np.asarray(identification["grain_b"])[rows]
        witness = np.array(
            [f"{min(a, b)}-{max(a, b)}" for a, b in zip(ga.tolist(), gb.tolist(), strict=True)],
            dtype=str,
        )
    else:
        witness = np.array([f"segment {s}" for s in seg.tolist()], dtype=str)
    section = np.asarray(measured.get("section", np.zeros(len(seg), int))).astype(int)
    return {"segment_id": seg, **senses, "witness": witness, "section": section}


@dataclass(frozen=True)
class Comparison:
    """What the comparison of one map found (§6).

    Attributes
    ----------
    measured : dict of 1-D arrays
        The measured planes that have an identification (the others are left out).
    senses : dict of 1-D arrays
        :func:`measured_senses` of those planes.
    verdict : FrameVerdict
    planes_full : dict of 1-D arrays
        :func:`inclination.compare.full_planes` of those planes.
    """

    measured: dict[str, np.ndarray]
    senses: dict[str, np.ndarray]
    verdict: FrameVerdict
    planes_full: dict[str, np.ndarray]


def compare_map(
    measured: Mapping[str, ArrayLike],
    identification: Mapping[str, ArrayLike],
    grains: Mapping[str, ArrayLike],
    phases: Mapping[int, Phase],
    *,
    coherent_tolerance_deg: float = 5.0,
    blunder_rate: float = DEFAULT_BLUNDER_RATE,
    section_names: Sequence[str] | None = None,
) -> Comparison:
    """Senses, frame verdict and full planes of one map's measured planes (§6).

    Measured planes of segments without an identification row are left out (they
    have no prediction to test); the rest go through :func:`measured_senses`,
    :func:`inclination.compare.frame_verdict` and
    :func:`inclination.compare.full_planes`.

    Parameters
    ----------
    measured : mapping
        Measured planes, one per segment (:func:`inclination.compare.best_measurements`).
    identification : mapping
        Table of :func:`inclination.planes.identify` (also ``grain_a, grain_b, sigma``).
    grains : mapping
        Grain table (``GrainMap.grains``): ``grain_id, phase, quat`` (G, 4).
    phases : mapping of int to Phase
        The job's phases by id.
    coherent_tolerance_deg : float, optional
        Passed to :func:`inclination.compare.full_planes`.
    blunder_rate : float, optional
        The job's ``comparison.blunder_rate``, passed to :func:`measured_senses` and
        :func:`inclination.compare.frame_verdict`.
    section_names : sequence of str, optional
        Names of the section tables by index (``measured["section"]``), for the
        verdict's sentence.

    Returns
    -------
    Comparison

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cu = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> ident = {"segment_id": np.array([0]), "identification": np.array(["identified"]),
    ...          "predicted_dip_azimuth_deg": np.array([270.0]),
    ...          "predicted_dip_deg": np.array([36.87]), "tolerance_deg": np.array([2.0]),
    ...          "grain_a": np.array([1]), "grain_b": np.array([2]), "sigma": np.array([""])}
    >>> m = {"segment_id": np.array([0, 9]), "normal_x": np.array([0.0, 0.0]),
    ...      "normal_y": np.array([0.6, 0.6]), "normal_z": np.array([0.8, 0.8]),
    ...      "dip_direction_azimuth_deg": np.array([271.0, 271.0]),
    ...      "dip_direction_sigma_deg": np.array([1.0, 1.0]),
    ...      "measured_dip_deg": np.array([37.0, 37.0]),
    ...      "measured_dip_sigma_deg": np.array([1.0, 1.0])}
    >>> grains = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...           "quat": np.array([[1.0, 0, 0, 0], [0.0, 1, 0, 0]])}
    >>> c = compare_map(m, ident, grains, {1: cu})
    >>> c.senses["segment_id"].tolist(), c.senses["sense"].tolist(), c.verdict.verdict
    ([0], ['agrees'], 'undecided')
    """
    rows = _identification_rows(identification, measured["segment_id"])
    keep = rows >= 0
    measured = {k: np.asarray(v)[keep] for k, v in measured.items()}
    rows = rows[keep]
    senses = measured_senses(measured, identification, blunder_rate=blunder_rate)
    verdict = frame_verdict(senses, blunder_rate=blunder_rate, section_names=section_names)
    boundaries = {
        "segment_id": np.asarray(measured["segment_id"]),
        **{k: np.asarray(identification[k])[rows] for k in ("grain_a", "grain_b", "sigma")},
    }
    planes_full = full_planes(
        measured, boundaries, grains, phases, coherent_tolerance_deg=coherent_tolerance_deg
    )
    return Comparison(measured, senses, verdict, planes_full)
