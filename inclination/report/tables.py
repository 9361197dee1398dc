"""Tables to CSV, JSON, Markdown and LaTeX, written atomically.

A table is a dict of equal-length 1-D arrays keyed by column name; the column
definitions of :mod:`inclination.report.columns` fix the order, the number
format and what "absent" means: NaN for floats, a negative number for ids and
counts, an empty string for text. Absent values are written empty (CSV,
Markdown, LaTeX) or ``null`` (JSON), never as a made-up number.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from ..errors import InputError
from .atomic import json_ready, write_text_atomic
from .columns import Column

__all__ = [
    "format_cell",
    "table_rows",
    "write_csv",
    "write_table_json",
    "write_markdown",
    "write_latex",
    "latex_indices",
]


def _absent(value, kind: str) -> bool:
    if kind == "float":
        return value is None or not math.isfinite(float(value))
    if kind == "int":
        return value is None or int(value) < 0
    if kind == "str":
        return value is None or str(value) == ""
    return value is None


def format_cell(value: object, column: Column) -> str:
    """Text form of one value; absent values become the empty string.

    Examples
    --------
    >>> from inclination.report.columns import Column
    >>> format_cell(float("nan"), Column("x_um", "float", 3))
    ''
    >>> format_cell(1.23456, Column("x_um", "float", 2))
    '1.23'
    """
    if _absent(value, column.kind):
        return ""
    if column.kind == "float":
        text = f"{float(value):.{column.decimals}f}"
        # "-0.000" reads as a sign that is not there.
        return text[1:] if re.fullmatch(r"-0\.?0*", text) else text
    if column.kind == "int":
        return str(int(value))
    if column.kind == "bool":
        return "true" if bool(value) else "false"
    return str(value)


def _check_table(table, columns) -> int:
    missing = [c.name for c in columns if c.name not in table]
    if missing:
        raise InputError(f"Expected the table to have columns {missing}, got {sorted(table)}.")
    lengths = {c.name: len(table[c.name]) for c in columns}
    if len(set(lengths.values())) > 1:
        raise InputError(f"Expected columns of equal length, got {lengths}.")
    return next(iter(lengths.values()), 0)


def _json_column(values, column) -> list:
    """One column as JSON-ready Python values, absent ones as None (one pass per column)."""
    arr = np.asarray(values)
    if column.kind == "float":
        arr = np.round(arr.astype(float), column.decimals + 3)
        return [None if not math.isfinite(v) else v for v in arr.tolist()]
    if column.kind == "int":
        return [None if v < 0 else v for v in arr.astype(np.int64).tolist()]
    if column.kind == "bool":
        return arr.astype(bool).tolist()
    return [None if v is None or str(v) == "" else str(v) for v in arr.tolist()]


def table_rows(table: Mapping[str, ArrayLike], columns: Sequence[Column]) -> list[dict]:
    """Rows as JSON-ready dicts (absent values as None).

    Examples
    --------
    >>> from inclination.report.columns import Column
    >>> table_rows({"a": np.array([1.5, np.nan])}, [Column("a", "float", 1)])
    [{'a': 1.5}, {'a': None}]
    """
    _check_table(table, columns)
    names = [c.name for c in columns]
    values = [_json_column(table[c.name], c) for c in columns]
    return [dict(zip(names, row, strict=True)) for row in zip(*values, strict=True)]


def _text_column(values, column) -> list[str]:
    """One column as text cells, as :func:`format_cell` writes them, in one pass."""
    arr = np.asarray(values)
    if column.kind == "float":
        fmt = f"{{:.{column.decimals}f}}"
        negative_zero = fmt.format(-0.0)
        cells = [fmt.format(v) if math.isfinite(v) else "" for v in arr.astype(float).tolist()]
        return [c[1:] if c == negative_zero else c for c in cells]
    if column.kind == "int":
        return ["" if v < 0 else str(v) for v in arr.astype(np.int64).tolist()]
    if column.kind == "bool":
        return ["true" if v else "false" for v in arr.astype(bool).tolist()]
    return ["" if v is None else str(v) for v in arr.tolist()]


def write_csv(
    path: str | os.PathLike, table: Mapping[str, ArrayLike], columns: Sequence[Column]
) -> Path:
    """Write a table as CSV with a header row; returns the path."""
    _check_table(table, columns)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    writer.writerows(zip(*[_text_column(table[c.name], c) for c in columns], strict=True))
    return write_text_atomic(path, buf.getvalue())


def write_table_json(
    path: str | os.PathLike,
    table: Mapping[str, ArrayLike],
    columns: Sequence[Column],
    *,
    schema_version: str,
    meta: dict,
) -> Path:
    """Write ``{"schema_version", "meta", "columns", "rows"}``; returns the path."""
    head = json_ready(
        {
            "schema_version": schema_version,
            "meta": meta,
            "columns": [
                {"name": c.name, "kind": c.kind, "description": c.description} for c in columns
            ],
        }
    )
    # Rows are built JSON-ready column by column and written one per line: large tables
    # stay fast to write and still readable.
    rows = [json.dumps(r, ensure_ascii=False, allow_nan=False) for r in table_rows(table, columns)]
    text = json.dumps(head, indent=2, ensure_ascii=False, allow_nan=False)[:-2]
    body = ("\n    " + ",\n    ".join(rows) + "\n  ") if rows else ""
    return write_text_atomic(path, text + ',\n  "rows": [' + body + "]\n}\n")


def write_markdown(
    path: str | os.PathLike,
    table: Mapping[str, ArrayLike],
    columns: Sequence[Column],
    *,
    title: str,
    notes: str = "",
) -> Path:
    """Write a pipe table with a title and notes; returns the path."""
    n = _check_table(table, columns)
    lines = [f"# {title}", ""]
    if notes:
        lines += [notes, ""]
    lines.append("| " + " | ".join(c.name for c in columns) + " |")
    lines.append(
        "|" + "|".join("---:" if c.kind in ("int", "float") else "---" for c in columns) + "|"
    )
    for i in range(n):
        cells = [format_cell(table[c.name][i], c).replace("|", "\\|") for c in columns]
        lines.append("| " + " | ".join(cells) + " |")
    if n == 0:
        lines.append("")
        lines.append("(no rows)")
    return write_text_atomic(path, "\n".join(lines) + "\n")


def latex_indices(text: str) -> str:
    r"""Miller indices "(1 1 -1)" in LaTeX with overbars for negative indices.

    Examples
    --------
    >>> latex_indices("(1 -1 0)")
    '$(1\\,\\bar{1}\\,0)$'
    >>> latex_indices("")
    ''
    """
    if not text:
        return ""
    m = re.fullmatch(r"([\(\[\{<])\s*(.*?)\s*([\)\]\}>])", text.strip())
    if not m:
        return _latex_escape(text)
    open_, body, close = m.groups()
    parts = []
    for tok in body.split():
        parts.append(rf"\bar{{{tok[1:]}}}" if tok.startswith("-") else tok)
    brackets = {"{": r"\{", "}": r"\}", "<": r"\langle ", ">": r"\rangle"}
    return f"${brackets.get(open_, open_)}" + r"\,".join(parts) + f"{brackets.get(close, close)}$"


def _latex_escape(text: str) -> str:
    return (
        str(text)
        .replace("\\", r"\textbackslash{}")
        .replace("&", r"\&")
        .replace("%", r"\%")
        .replace("_", r"\_")
        .replace("#", r"\#")
    )


#: Above this many rows a table cannot sit on one page: it is written as a longtable.
LONG_TABLE_ROWS = 40


def write_latex(
    path: str | os.PathLike,
    table: Mapping[str, ArrayLike],
    columns: Sequence[Column],
    *,
    caption: str,
    label: str,
    sigma_of: dict | None = None,
) -> Path:
    """Write a booktabs table; returns the path.

    Up to :data:`LONG_TABLE_ROWS` rows it is a ``table`` float; longer tables are a
    ``longtable`` that breaks across pages with its header repeated (the file's first
    line names the packages it needs). ``sigma_of`` maps a value column to its
    uncertainty column; the pair is written as one cell ``v \\pm σ``. Columns whose
    values look like Miller indices are written with overbars.
    """
    sigma_of = dict(sigma_of or {})
    n = _check_table(table, columns)
    shown = [c for c in columns if c.name not in sigma_of.values()]
    by_name = {c.name: c for c in columns}
    head = " & ".join(_latex_escape(c.name) for c in shown) + r" \\"
    spec = "".join("r" if c.kind in ("int", "float") else "l" for c in shown)
    caption_line = r"\caption{" + _latex_escape(caption) + "}"
    if n > LONG_TABLE_ROWS:
        lines = [
            r"% Requires \usepackage{booktabs} and \usepackage{longtable}.",
            r"\begin{longtable}{" + spec + "}",
            caption_line + r"\label{" + label + r"} \\",
            r"\toprule",
            head,
            r"\midrule",
            r"\endfirsthead",
            r"\toprule",
            head,
            r"\midrule",
            r"\endhead",
            r"\bottomrule",
            r"\endfoot",
        ]
        closing = [r"\end{longtable}"]
    else:
        lines = [
            r"% Requires \usepackage{booktabs}.",
            r"\begin{table}",
            r"\centering",
            caption_line,
            r"\label{" + label + "}",
            r"\begin{tabular}{" + spec + "}",
            r"\toprule",
            head,
            r"\midrule",
        ]
        closing = [r"\bottomrule", r"\end{tabular}", r"\end{table}"]
    for i in range(n):
        cells = []
        for c in shown:
            text = format_cell(table[c.name][i], c)
            if c.name in sigma_of and text:
                s = format_cell(table[sigma_of[c.name]][i], by_name[sigma_of[c.name]])
                text = f"${text} \\pm {s}$" if s else text
            elif re.fullmatch(r"[\(\[\{<][-\d ]+[\)\]\}>]", text):
                text = latex_indices(text)
            else:
                text = _latex_escape(text)
            cells.append(text)
        lines.append(" & ".join(cells) + r" \\")
    return write_text_atomic(path, "\n".join(lines + closing) + "\n")
