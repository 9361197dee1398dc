"""Writers at the far end of the data flow: tables, figures and the report."""

from __future__ import annotations

from .columns import BOUNDARY_COLUMNS, GRAIN_COLUMNS, SEGMENT_COLUMNS, Column
from .tables import write_csv, write_latex, write_markdown, write_table_json

__all__ = [
    "BOUNDARY_COLUMNS",
    "GRAIN_COLUMNS",
    "SEGMENT_COLUMNS",
    "Column",
    "write_csv",
    "write_latex",
    "write_markdown",
    "write_table_json",
]
