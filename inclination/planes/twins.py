"""The Σ3 coherent-twin test, and how much of the Σ3 boundary passes it.

Owns the rule "the trace of a coherent Σ3 twin is the trace of the {111} plane the two grains
share" (:func:`coherent_twin_test`) and its summary over a map (:func:`twin_test_summary`,
:class:`TwinTestSummary`). The geometry and the fit come from
:mod:`inclination.planes.predict` (conventions §5); the classes of a boundary are decided in
:mod:`inclination.planes.identify`.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array, check_last_axis
from ..crystal.lattice import Lattice, plane_normals_crystal
from ._tables import column
from .geometry import PlanePrediction
from .predict import TraceFit, pair_spread_deg, predict_planes, shared_plane, trace_fit

__all__ = ["TwinTest", "TwinTestSummary", "coherent_twin_test", "twin_test_summary"]

_CUBIC_111 = np.array([[1, 1, 1], [-1, 1, 1], [1, -1, 1], [1, 1, -1]])


@dataclass(frozen=True)
class TwinTest:
    """Result of the coherent-twin trace test of N Σ3 segments.

    Attributes
    ----------
    common_111 : PlanePrediction, shape (N,)
        The common {111} of the two grains (conventions §5, n_z >= 0).
    fit : TraceFit, shape (N,)
        The measured trace against that plane's trace.
    passed : ndarray of bool, shape (N,)
        ``fit.fits``: the trace lies along the common {111} trace within its tolerance.
    """

    common_111: PlanePrediction
    fit: TraceFit

    @property
    def passed(self) -> np.ndarray:
        """Whether each segment passes (the common {111} has a trace that fits)."""
        return self.fit.fits


def coherent_twin_test(
    trace_angle_deg: ArrayLike,
    trace_sigma_deg: ArrayLike,
    quat_a: ArrayLike,
    quat_b: ArrayLike,
    spread_a_deg: ArrayLike,
    spread_b_deg: ArrayLike,
    lattice: Lattice,
    *,
    k: float = 2.0,
    floor_deg: float = 1.0,
    max_tolerance_deg: float = 5.0,
) -> TwinTest:
    """Coherent-twin trace test of Σ3 segments of a cubic phase.

    The common <111> of the two grains is the pair of <111> normals (one per grain) closest
    in S; its plane is their mean (:func:`inclination.planes.predict.shared_plane`). The trace
    passes when it fits that plane's trace (:func:`inclination.planes.predict.trace_fit`, σ
    from the RMS of the two spreads), which is the condition "trace ⟂ common <111>" carried
    over to trace angles: the angle of t from the perpendicular is asin(sin δ · sin Δ) for a
    trace deviation Δ. Failing proves a boundary is not a coherent twin; passing does not
    prove it is one.

    Parameters
    ----------
    trace_angle_deg, trace_sigma_deg : array_like, shape (N,)
        Measured trace angles in S (degrees, [0, 180)) and their standard uncertainties.
    quat_a, quat_b : array_like, shape (N, 4)
        Mean orientations of the two grains (sample to crystal, scalar first).
    spread_a_deg, spread_b_deg : array_like, shape (N,)
        The two grains' orientation scatter, degrees, >= 0.
    lattice : Lattice
        The cubic lattice of the phase.
    k, floor_deg, max_tolerance_deg : float, default 2.0, 1.0, 5.0
        Tolerance settings (:class:`inclination.planes.predict.ToleranceSettings`).

    Returns
    -------
    TwinTest
        Arrays of shape (N,); empty input gives empty arrays.

    Examples
    --------
    >>> from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply
    >>> from inclination.crystal.rotations import quat_from_euler_deg
    >>> cube = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> qa = quat_from_euler_deg([30.0, 50.0, 10.0])  # its (1 1 1) traces at 118.489°
    >>> qb = quat_multiply(quat_from_axis_angle_deg([1, 1, 1], 180.0), qa)  # the Σ3 twin
    >>> t = coherent_twin_test([118.8, 98.5], [0.3, 0.3], [qa, qa], [qb, qb],
    ...                        [0.2, 0.2], [0.2, 0.2], cube)
    >>> t.passed.tolist(), t.common_111.trace_angle_deg.round(3).tolist()
    ([True, False], [118.489, 118.489])
    """
    qa = as_float_array(quat_a, "quat_a")
    qb = as_float_array(quat_b, "quat_b")
    check_last_axis(qa, "quat_a", 4)
    check_last_axis(qb, "quat_b", 4)
    normals = plane_normals_crystal(lattice, _CUBIC_111)
    na = predict_planes(qa, normals).normal_sample
    nb = predict_planes(qb, normals).normal_sample
    n = len(na)
    cos = np.einsum("nai,nbi->nab", na, nb)
    flat = np.argmax(np.abs(cos).reshape(n, len(normals) ** 2), axis=1)
    i, j = np.divmod(flat, len(normals))
    r = np.arange(n)
    common = shared_plane(na[r, i], nb[r, j])
    fit = trace_fit(
        trace_angle_deg,
        trace_sigma_deg,
        common,
        pair_spread_deg(spread_a_deg, spread_b_deg),
        k=k,
        floor_deg=floor_deg,
        max_tolerance_deg=max_tolerance_deg,
    )
    return TwinTest(common, fit)


@dataclass(frozen=True)
class TwinTestSummary:
    """How much of the Σ3 boundary passes the coherent-twin trace test.

    Failing proves a boundary is not a coherent twin; passing does not prove
    it is one (any plane whose trace happens to lie along the {111} trace
    passes too).

    Attributes
    ----------
    n_sigma3, n_pass : int
        Σ3 segments tested, and those that pass.
    fraction_by_count : float
        n_pass / n_sigma3 (NaN when there are none).
    ci_low, ci_high : float
        95 % Wilson score interval of that fraction (scipy.stats.binomtest).
    length_sigma3_um, length_pass_um : float
        Total length of the Σ3 segments and of those that pass.
    fraction_by_length : float
        length_pass_um / length_sigma3_um (NaN when there are none).
    interval_method : str
        ``"wilson"``.
    """

    n_sigma3: int
    n_pass: int
    fraction_by_count: float
    ci_low: float
    ci_high: float
    length_sigma3_um: float
    length_pass_um: float
    fraction_by_length: float
    interval_method: str = "wilson"


def twin_test_summary(table: Mapping, segments: Mapping) -> TwinTestSummary:
    """Fraction of Σ3 boundaries that pass the twin test, by count and by length.

    Parameters
    ----------
    table : dict of 1-D arrays
        The table of :func:`identify` (``segment_id``, ``twin_test``).
    segments : dict of 1-D arrays
        The segments table (``segment_id``, ``length_um``), joined by ``segment_id``.

    Returns
    -------
    TwinTestSummary

    Examples
    --------
    >>> table = {"segment_id": np.array([1, 2, 3]), "twin_test": np.array(["pass", "fail", ""])}
    >>> segments = {"segment_id": np.array([3, 2, 1]), "length_um": np.array([5.0, 1.0, 3.0])}
    >>> s = twin_test_summary(table, segments)
    >>> s.n_sigma3, s.n_pass, s.fraction_by_count, s.fraction_by_length
    (2, 1, 0.5, 0.75)
    >>> round(s.ci_low, 4), round(s.ci_high, 4)
    (0.0945, 0.9055)
    """
    from scipy.stats import binomtest

    test = column(table, "twin_test", "table").astype(str)
    ids = column(table, "segment_id", "table")
    seg_ids = column(segments, "segment_id", "segments")
    length = as_float_array(column(segments, "length_um", "segments"), "length_um")
    order = np.argsort(seg_ids, kind="stable")
    pos = np.minimum(np.searchsorted(seg_ids[order], ids), max(len(order) - 1, 0))
    tested = np.isin(test, ("pass", "fail"))
    if tested.any() and not np.all(seg_ids[order][pos][tested] == ids[tested]):
        row = int(np.flatnonzero(tested & (seg_ids[order][pos] != ids))[0])
        raise ValueError(
            f"Expected every tested `table` segment_id to be in `segments`, "
            f"got {ids[row].item()!r} at row {row}."
        )
    passed = test == "pass"
    n_sigma3, n_pass = int(tested.sum()), int(passed.sum())
    seg_length = length[order][pos] if len(order) else np.zeros(len(ids))
    total = float(seg_length[tested].sum())
    passing = float(seg_length[passed].sum())
    if n_sigma3 == 0:
        return TwinTestSummary(0, 0, np.nan, np.nan, np.nan, 0.0, 0.0, np.nan)
    ci = binomtest(n_pass, n_sigma3).proportion_ci(confidence_level=0.95, method="wilson")
    return TwinTestSummary(
        n_sigma3,
        n_pass,
        n_pass / n_sigma3,
        float(ci.low),
        float(ci.high),
        total,
        passing,
        passing / total if total > 0 else np.nan,
    )
