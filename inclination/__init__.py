"""inclination: boundary planes from orientation maps.

Straight boundary traces from a map of crystal orientations, the candidate
crystal planes that could make each trace, and dips measured on cross-sections
or serial sections, combined into full boundary planes and a verdict on the
180° ambiguity of the data frame. See docs/architecture.md for the stages.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

from .errors import InclinationError, InputError, SettingError

try:
    __version__ = version("inclination")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

__all__ = ["InclinationError", "InputError", "SettingError", "__version__"]
