"""The comparator: sense of each boundary, the frame verdict, full planes (§6).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns: :mod:`.sense` (one boundary's measured against
predicted dip direction), :mod:`.verdict` (the map's frame verdict),
:mod:`.measured` (measured planes, best per segment, in both crystals) and
:mod:`.comparison` (which predictions are trusted, and the whole comparison of a map).
"""

from __future__ import annotations

from .comparison import (
    TRUSTED_IDENTIFICATIONS,
    Comparison,
    PredictedDirections,
    compare_map,
    measured_senses,
    predicted_directions,
)
from .measured import (
    COHERENT_TWIN_ANSWERS,
    best_measurements,
    coherent_twin_test,
    full_planes,
    low_index_planes,
)
from .sense import (
    DEFAULT_BLUNDER_RATE,
    SENSES,
    boundary_sense,
    reversal_probability,
    sense_bound_log10,
)
from .verdict import VERDICTS, FrameVerdict, frame_verdict

__all__ = [
    "COHERENT_TWIN_ANSWERS",
    "DEFAULT_BLUNDER_RATE",
    "Comparison",
    "FrameVerdict",
    "PredictedDirections",
    "SENSES",
    "TRUSTED_IDENTIFICATIONS",
    "VERDICTS",
    "best_measurements",
    "boundary_sense",
    "coherent_twin_test",
    "compare_map",
    "frame_verdict",
    "full_planes",
    "low_index_planes",
    "measured_senses",
    "predicted_directions",
    "reversal_probability",
    "sense_bound_log10",
]
