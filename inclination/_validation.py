"""Checks at the public boundary, one message template for all of them.

"Expected `name` to have shape (..., 4), got (5, 3)." Internal helpers trust
their callers; only public functions call these.

One error per kind (docs/architecture.md): a bad array (shape, non-finite values) is an
:class:`~inclination.errors.InputError`, a setting out of its range or closed set a
:class:`~inclination.errors.SettingError` (both are ValueErrors); a value of the wrong
Python type is a TypeError.

Private to the package: every module of ``inclination`` may import these checks
(``tests/test_style.py`` allows a private module to the package that holds it).
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from numpy.typing import ArrayLike, DTypeLike

from .errors import InputError, SettingError

__all__ = [
    "as_float_array",
    "check_last_axis",
    "check_one_of",
    "check_positive",
    "check_finite",
]


def as_float_array(value: ArrayLike, name: str, *, dtype: DTypeLike = np.float64) -> np.ndarray:
    """Return ``value`` as a float array (a copy only when needed); TypeError for non-numbers."""
    try:
        arr = np.asarray(value, dtype=dtype)
    except (TypeError, ValueError) as exc:
        raise TypeError(
            f"Expected `{name}` to be an array of numbers, got {type(value).__name__}."
        ) from exc
    return arr


def check_last_axis(arr: np.ndarray, name: str, size: int) -> None:
    """Raise InputError unless ``arr`` has shape (..., size)."""
    if arr.ndim == 0 or arr.shape[-1] != size:
        raise InputError(f"Expected `{name}` to have shape (..., {size}), got {arr.shape}.")


def check_one_of(value: object, name: str, allowed: Iterable) -> None:
    """Raise SettingError unless ``value`` is one of a closed set of options."""
    allowed = tuple(allowed)
    if value not in allowed:
        raise SettingError(f"Expected `{name}` to be one of {allowed}, got {value!r}.")


def check_positive(value: float, name: str, *, allow_zero: bool = False) -> None:
    """Raise SettingError unless ``value`` is a finite number > 0 (or >= 0)."""
    ok = np.isfinite(value) and (value >= 0 if allow_zero else value > 0)
    if not ok:
        bound = ">= 0" if allow_zero else "> 0"
        raise SettingError(f"Expected `{name}` to be a finite number {bound}, got {value!r}.")


def check_finite(arr: np.ndarray, name: str) -> None:
    """Raise InputError naming the first row that holds a NaN or infinity."""
    bad = ~np.isfinite(arr)
    if bad.any():
        first = np.argwhere(bad)[0]
        index = tuple(int(i) for i in first[:-1]) if arr.ndim > 1 else (int(first[0]),)
        raise InputError(
            f"Expected `{name}` to be finite everywhere, got a non-finite value at index {index}."
        )
