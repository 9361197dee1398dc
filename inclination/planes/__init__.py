"""Candidate planes: predicted traces and dips, identification, the twin test (§5).

``geometry`` owns the one §5 function (normal → trace, dip, dip direction); ``predict`` the
prediction, tolerance, deviation, fit and chance formulas; ``identify`` the matching of
segments to planes and its tables; ``twins`` the Σ3 coherent-twin test. The public names of the
submodules are gathered here; each submodule's opening docstring says what it owns.
"""

from __future__ import annotations

from .geometry import (
    PlanePrediction,
    surface_geometry,
)
from .identify import (
    IDENTIFICATION_CLASSES,
    PhasesLike,
    PlaneMatch,
    candidates,
    identify,
    match_planes,
)
from .predict import (
    ToleranceSettings,
    TraceFit,
    chance_fit,
    pair_spread_deg,
    predict_planes,
    shared_plane,
    trace_deviation_deg,
    trace_fit,
    trace_sigma_predicted_deg,
    trace_tolerance_deg,
)
from .twins import (
    TwinTest,
    TwinTestSummary,
    coherent_twin_test,
    twin_test_summary,
)

__all__ = [
    "IDENTIFICATION_CLASSES",
    "PhasesLike",
    "PlaneMatch",
    "PlanePrediction",
    "ToleranceSettings",
    "TraceFit",
    "TwinTest",
    "TwinTestSummary",
    "candidates",
    "chance_fit",
    "coherent_twin_test",
    "identify",
    "match_planes",
    "pair_spread_deg",
    "predict_planes",
    "shared_plane",
    "surface_geometry",
    "trace_deviation_deg",
    "trace_fit",
    "trace_sigma_predicted_deg",
    "trace_tolerance_deg",
    "twin_test_summary",
]
