"""The one way the section stages refuse a setting: :class:`SettingError`.

Job fields are checked where the job is read (the schema, then the records'
``from_job_entry`` constructors) and raise :class:`~inclination.errors.InputError`;
arguments of the Python API that are out of range are settings and raise
:class:`~inclination.errors.SettingError` with the package's message template.
"""

from __future__ import annotations

from collections.abc import Iterable

from .._validation import check_one_of, check_positive
from ..errors import SettingError

__all__ = ["setting_one_of", "setting_positive"]


def setting_positive(value: float, name: str, *, allow_zero: bool = False) -> None:
    """SettingError unless ``value`` is a finite number > 0 (>= 0 with ``allow_zero``).

    Examples
    --------
    >>> setting_positive(-1.0, "step_um")
    Traceback (most recent call last):
    ...
    inclination.errors.SettingError: Expected `step_um` to be a finite number > 0, got -1.0.
    """
    try:
        check_positive(value, name, allow_zero=allow_zero)
    except ValueError as exc:
        raise SettingError(str(exc)) from None


def setting_one_of(value: object, name: str, allowed: Iterable) -> None:
    """SettingError unless ``value`` is one of a closed set of options.

    Examples
    --------
    >>> setting_one_of("round", "grid", ("square",))
    Traceback (most recent call last):
    ...
    inclination.errors.SettingError: Expected `grid` to be one of ('square',), got 'round'.
    """
    try:
        check_one_of(value, name, allowed)
    except ValueError as exc:
        raise SettingError(str(exc)) from None
