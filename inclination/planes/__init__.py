"""Candidate planes: predicted traces and dips, identification, the twin test (§5).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns.
"""

from __future__ import annotations

from .geometry import (
    PlanePrediction,
    surface_geometry,
)
from .identify import (
    IDENTIFICATION_CLASSES,
    TwinTestSummary,
    candidates,
    chance_fit,
    identify,
    predict_planes,
    trace_deviation_deg,
    trace_sigma_predicted_deg,
    trace_tolerance_deg,
    twin_test_summary,
)

__all__ = [
    "IDENTIFICATION_CLASSES",
    "PlanePrediction",
    "TwinTestSummary",
    "candidates",
    "chance_fit",
    "identify",
    "predict_planes",
    "surface_geometry",
    "trace_deviation_deg",
    "trace_sigma_predicted_deg",
    "trace_tolerance_deg",
    "twin_test_summary",
]
