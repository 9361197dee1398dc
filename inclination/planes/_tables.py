"""Column access of the planes stage's input tables (dicts of equal-length 1-D arrays)."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

__all__ = ["column"]


def column(table: Mapping, key: str, name: str) -> np.ndarray:
    """Column ``key`` of the table called ``name``; ValueError naming the columns if absent."""
    if key not in table:
        raise ValueError(
            f"Expected `{name}` to have the column {key!r}, got columns {tuple(table)}."
        )
    return np.asarray(table[key])
