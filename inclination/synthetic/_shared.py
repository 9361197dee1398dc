"""Small helpers the synthetic submodules share: frozen arrays, orientation scatter, errors.

Private to :mod:`inclination.synthetic`; its names carry no underscore so that the
submodules can import them without reaching into another module's private names.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..crystal.rotations import quat_from_axis_angle_deg, quat_multiply, quat_reduce
from ..errors import InputError, SettingError

__all__ = ["Seed", "checked", "frozen", "scatter_quat"]

#: What every ``rng=`` argument accepts (``numpy.random.default_rng``'s argument).
Seed = int | np.random.Generator | None


def frozen(arr: np.ndarray) -> np.ndarray:
    """A contiguous read-only array (records never change after they are built)."""
    arr = np.ascontiguousarray(arr)
    arr.setflags(write=False)
    return arr


def scatter_quat(quat: np.ndarray, spread_deg: float, gen: np.random.Generator) -> np.ndarray:
    """Orientations ``dq ⊗ q``, one random turn dq per row, RMS angle ``spread_deg``.

    The rotation vector of each dq has three normal components of SD spread/√3, so the
    RMS turn angle is ``spread_deg``. With no spread or no rows nothing is drawn from
    ``gen`` (the random stream of the caller does not move).
    """
    if spread_deg == 0 or len(quat) == 0:
        return quat
    rotvec = gen.normal(0.0, np.deg2rad(spread_deg) / np.sqrt(3.0), (len(quat), 3))
    angle = np.rad2deg(np.linalg.norm(rotvec, axis=1))
    return quat_reduce(quat_multiply(quat_from_axis_angle_deg(rotvec, angle), quat))


def checked(
    error: type[SettingError] | type[InputError], check: Callable[..., None], /, *args, **kwargs
) -> None:
    """Run one of the package's shared checks, raising its ValueError as ``error``.

    The shared checks (``inclination._validation``) raise ValueError; in this package a
    bad setting is a :class:`~inclination.errors.SettingError` and bad data an
    :class:`~inclination.errors.InputError` (both ValueErrors), with the same message.
    """
    try:
        check(*args, **kwargs)
    except ValueError as exc:
        if isinstance(exc, error):
            raise
        raise error(str(exc)) from None
