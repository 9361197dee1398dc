"""The comparator: sense of each boundary, the frame verdict, full planes (§6).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns.
"""

from __future__ import annotations

from .sense import (
    SENSES,
    VERDICTS,
    FrameVerdict,
    best_measurements,
    boundary_sense,
    frame_verdict,
    full_planes,
    low_index_planes,
)

__all__ = [
    "FrameVerdict",
    "SENSES",
    "VERDICTS",
    "best_measurements",
    "boundary_sense",
    "frame_verdict",
    "full_planes",
    "low_index_planes",
]
