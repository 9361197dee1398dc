"""inclination: boundary planes from orientation maps.

Straight boundary traces from a map of crystal orientations, the candidate
crystal planes that could make each trace, and dips measured on cross-sections
or serial sections, combined into full boundary planes and a verdict on the
180° ambiguity of the data frame. See docs/architecture.md for the stages.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

# Set before the submodules load: pipeline and cli read it at import time.
try:
    __version__ = version("inclination")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

from .crystal.indices import format_indices, parse_indices
from .crystal.lattice import Lattice
from .crystal.phases import Phase
from .errors import InclinationError, InputError, SettingError
from .frames import DeclaredAxes
from .io.job import Job, job_from_dict, load_job
from .maps import OrientationMap, read_map
from .pipeline import Analysis, analyse, run

__all__ = [
    "Analysis",
    "DeclaredAxes",
    "InclinationError",
    "InputError",
    "Job",
    "Lattice",
    "OrientationMap",
    "Phase",
    "SettingError",
    "__version__",
    "analyse",
    "format_indices",
    "job_from_dict",
    "load_job",
    "parse_indices",
    "read_map",
    "run",
]
