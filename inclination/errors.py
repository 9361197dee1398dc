"""The exception tree: one root, a few narrow subclasses.

The command line turns every :class:`InclinationError` into one line on
stderr and exit status 2; anything else is an internal fault (exit 1).
"""

from __future__ import annotations

import os

__all__ = ["InclinationError", "InputError", "SettingError"]


class InclinationError(Exception):
    """Root of every error this package raises on purpose."""


class InputError(InclinationError, ValueError):
    """A file or a job field that cannot be used as given.

    Parameters
    ----------
    message : str
        What was expected and what came.
    path : str or os.PathLike, optional
        The file the bad value came from.
    pointer : str, optional
        JSON pointer (RFC 6901) or column/row locator inside that file.

    Examples
    --------
    >>> str(InputError("Expected 'step_um' > 0, got -1.", path="job.json", pointer="/map/step_um"))
    "job.json: /map/step_um: Expected 'step_um' > 0, got -1."
    """

    def __init__(
        self, message: str, *, path: str | os.PathLike | None = None, pointer: str | None = None
    ) -> None:
        self.message = message
        self.path = None if path is None else str(path)
        self.pointer = pointer
        super().__init__(self._render())

    def _render(self) -> str:
        parts = [p for p in (self.path, self.pointer) if p]
        parts.append(self.message)
        return ": ".join(parts)


class SettingError(InclinationError, ValueError):
    """A setting passed through the Python API that is out of its allowed range."""
