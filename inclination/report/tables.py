"""Tables to CSV, JSON, Markdown and LaTeX, and the paper table, written atomically.

A table is a dict of equal-length 1-D arrays keyed by column name; the column
definitions of :mod:`inclination.report.columns` fix the order, the number
format and what "absent" means: NaN for floats, a negative number for ids and
counts, an empty string for text. Absent values are written empty (CSV,
Markdown, LaTeX) or ``null`` (JSON), never as a made-up number.

CSV and JSON keep full precision; the paper table (:func:`paper_table`) rounds
every value to its uncertainty (:func:`round_to_uncertainty`) and is rendered
as Markdown, LaTeX (:func:`paper_latex`, fits ``\\textwidth`` by construction)
and HTML (:func:`paper_html`) from the one column list
:data:`inclination.report.columns.PAPER_COLUMNS`.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal

import numpy as np

from ..compare.comparison import TRUSTED_IDENTIFICATIONS
from ..errors import InputError
from .atomic import json_ready, write_chunks_atomic, write_text_atomic
from .columns import CLASS_DESCRIPTIONS, CLASS_SYMBOLS, PAPER_COLUMNS, SOURCE_SYMBOLS, header_text
from .streams import encode_rows

__all__ = [
    "format_cell",
    "json_int_array",
    "json_number_array",
    "table_rows",
    "write_csv",
    "write_table_json",
    "write_markdown",
    "write_latex",
    "latex_indices",
    "round_to_uncertainty",
    "PaperTable",
    "PAPER_MAX_ROWS",
    "paper_table",
    "paper_markdown",
    "paper_latex",
    "paper_html",
    "paper_legend",
    "latex_fits",
    "glossary_entries",
]


def _absent(value, kind: str) -> bool:
    if kind == "float":
        return value is None or not math.isfinite(float(value))
    if kind == "int":
        return value is None or int(value) < 0
    if kind == "str":
        return value is None or str(value) == ""
    return value is None


def format_cell(value, column) -> str:
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


def table_rows(table, columns) -> list[dict]:
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


def write_csv(path, table, columns):
    """Write a table as CSV with a header row, streamed a block of rows at a time.

    The cells are those of :func:`format_cell`, quoted as :func:`csv.writer` quotes
    them (:mod:`inclination.report.streams`, style ``fixed_csv``); returns the path.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> from inclination.report.columns import Column
    >>> p = write_csv(Path(tempfile.mkdtemp()) / "t.csv",
    ...               {"a": np.array([1.5, np.nan]), "b": np.array(["x, y", ""])},
    ...               [Column("a", "float", 2), Column("b", "str")])
    >>> p.read_text()
    'a,b\\n1.50,"x, y"\\n,\\n'
    """
    _check_table(table, columns)
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow([c.name for c in columns])
    header = buf.getvalue().encode("utf-8")

    def chunks():
        yield header
        yield from encode_rows(table, columns, style="fixed_csv")

    return write_chunks_atomic(path, chunks())


def json_int_array(values) -> str:
    """An integer column as the text of a JSON array, encoded in bulk (``%d`` cells).

    Examples
    --------
    >>> json_int_array(np.array([7, -1, 0]))
    '[7, -1, 0]'
    >>> json_int_array(np.zeros(0, int))
    '[]'
    """
    from .columns import Column

    values = np.asarray(values).ravel()
    if values.dtype.kind == "u" and values.size and int(values.max()) >= 2**63:
        return json.dumps(values.tolist())  # past int64, which the cells are written in
    text = b"".join(encode_rows({"value": values}, [Column("value", "int")], style="printf"))
    return "[" + text[:-1].replace(b"\n", b", ").decode("ascii") + "]"


def json_number_array(values, decimals: int, *, significant: bool = False) -> str:
    """A float column as the text of a JSON array, rounded, encoded in bulk.

    ``decimals`` decimals, as :mod:`inclination.report.streams`' ``jsonl`` style writes
    them (the value :func:`numpy.round` gives, trailing zeros dropped, never ``-0``), or with
    ``significant`` that many significant digits as ``%.{decimals}g`` writes them (for
    values such as probabilities that span many decades); NaN and ±inf as ``null``.
    About 200 MB/s, against Python's float ``repr`` at about 30.

    Examples
    --------
    >>> json_number_array(np.array([90.25, np.nan, -1e-9, 1 / 3]), 4)
    '[90.25, null, 0, 0.3333]'
    >>> json_number_array(np.array([1e-30, 0.5, np.inf, 2 / 3]), 6, significant=True)
    '[1e-30, 0.5, null, 0.666667]'
    >>> json_number_array(np.zeros(0), 2)
    '[]'
    """
    from .columns import Column

    column = Column("value", "general" if significant else "float", int(decimals))
    table = {"value": np.asarray(values, float).ravel()}
    if significant:
        # printf cells, a row per line; "nan", "inf" and "-inf" are the only cells with
        # letters other than the exponent's "e", so a bytes replace makes them null.
        text = b"".join(encode_rows(table, [column], style="printf"))[:-1]
        for word in (b"-inf", b"inf", b"nan"):
            text = text.replace(word, b"null")
        text = text.replace(b"\n", b", ")
        return "[" + text.decode("ascii") + "]"
    # Each row of the jsonl style is "[number]\n" and a number never holds "]": the rows
    # are joined into one array by a bytes replace per block.
    blocks = [
        block[1:-2].replace(b"]\n[", b", ")
        for block in encode_rows(table, [column], style="jsonl")
    ]
    return "[" + b", ".join(blocks).decode("ascii") + "]"


def write_table_json(path, table, columns, *, schema_version: str, meta: dict):
    """Write ``{"schema_version", "meta", "columns", "rows"}``, streamed; returns the path.

    Each row is the :func:`json.dumps` of its :func:`table_rows` dict, one per line
    (encoded a block at a time by :mod:`inclination.report.streams`, style ``json_rows``).

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> from inclination.report.columns import Column
    >>> p = write_table_json(Path(tempfile.mkdtemp()) / "t.json", {"a": np.array([1.5, np.nan])},
    ...                      [Column("a", "float", 1)], schema_version="1", meta={})
    >>> json.loads(p.read_text())["rows"]
    [{'a': 1.5}, {'a': None}]
    """
    _check_table(table, columns)
    head = json_ready(
        {
            "schema_version": schema_version,
            "meta": meta,
            "columns": [
                {"name": c.name, "kind": c.kind, "description": c.description} for c in columns
            ],
        }
    )
    text = json.dumps(head, indent=2, ensure_ascii=False, allow_nan=False)[:-2]

    def chunks():
        yield (text + ',\n  "rows": [').encode("utf-8")
        # A JSON row never holds a raw line break (json.dumps escapes it), so every one in a
        # block ends a row: the rows become ",\n    "-separated in one bytes pass.
        lead = b"\n    "
        wrote = False
        for block in encode_rows(table, columns, style="json_rows"):
            yield lead + block[:-1].replace(b"\n", b",\n    ")
            lead, wrote = b",\n    ", True
        yield b"\n  ]\n}\n" if wrote else b"]\n}\n"

    return write_chunks_atomic(path, chunks())


def write_markdown(path, table, columns, *, title: str, notes: str = ""):
    """Write a pipe table with a title and notes; returns the path."""
    n = _check_table(table, columns)
    lines = [f"# {title}", ""]
    if notes:
        lines += [notes, ""]
    lines.append("| " + " | ".join(header_text(c) for c in columns) + " |")
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


def write_latex(path, table, columns, *, caption: str, label: str, sigma_of: dict | None = None):
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
    head = " & ".join(_latex_text(header_text(c)) for c in shown) + r" \\"
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


# ----------------------------------------------------------------------------- paper table

_LATEX_SYMBOLS = {
    "±": r"$\pm$",
    "°": r"$^\circ$",
    "Σ": r"$\Sigma$",
    "σ": r"$\sigma$",
    "–": "--",
    "µ": r"$\mu$",
    "₀": r"$_0$",
    "₁": r"$_1$",
    "₂": r"$_2$",
    "φ": r"$\varphi$",
    "Φ": r"$\Phi$",
}


def _latex_text(text: str) -> str:
    """Escape text for LaTeX and spell the few non-ASCII symbols of the headers in math."""
    out = _latex_escape(text)
    for char, spelled in _LATEX_SYMBOLS.items():
        out = out.replace(char, spelled)
    return out


def round_to_uncertainty(value: float, sigma: float, *, digits: int = 2) -> tuple[str, str]:
    """A value and its standard uncertainty as text, rounded to the uncertainty.

    The uncertainty keeps ``digits`` significant digits (two: common practice, and
    the ISO/IEC Guide 98-3 §7.2.6 advice); the value is rounded to the same last
    decimal place. Halves round away from zero. An absent value gives ``('', '')``;
    an absent or non-positive uncertainty gives ``('', '')`` too (the caller falls
    back to the column's fixed decimals).

    Examples
    --------
    >>> round_to_uncertainty(63.132, 3.381)
    ('63.1', '3.4')
    >>> round_to_uncertainty(15.491, 0.5)
    ('15.49', '0.50')
    >>> round_to_uncertainty(1234.5, 230.0)
    ('1230', '230')
    """
    if not (math.isfinite(value) and math.isfinite(sigma)) or sigma <= 0:
        return "", ""
    decimals = digits - 1 - math.floor(math.log10(sigma))
    # 0.996 rounds to 1.00: three digits; the rounded σ sets the place again.
    rounded = float(_quantize(sigma, decimals))
    decimals = digits - 1 - math.floor(math.log10(rounded))
    return _decimal_text(value, decimals), _decimal_text(sigma, decimals)


def _quantize(value: float, decimals: int) -> Decimal:
    return Decimal(repr(float(value))).quantize(Decimal(1).scaleb(-decimals), ROUND_HALF_UP)


def _decimal_text(value: float, decimals: int) -> str:
    q = _quantize(value, decimals)
    text = f"{q:.{decimals}f}" if decimals > 0 else f"{int(q)}"
    # "-0.0" reads as a sign that is not there.
    return text[1:] if re.fullmatch(r"-0\.?0*", text) else text


def _fixed(value, decimals: int = 0) -> str:
    value = float(value)
    return _decimal_text(value, decimals) if math.isfinite(value) else ""


def _with_sigma(value, sigma, decimals: int = 0) -> str:
    v, s = round_to_uncertainty(float(value), float(sigma))
    if v:
        return f"{v} ± {s}"
    return _fixed(value, decimals)


#: The paper table lists at most this many boundaries (the full table is in CSV/JSON).
PAPER_MAX_ROWS = 30


@dataclass(frozen=True)
class PaperTable:
    """The paper table: rounded text cells and how the rows were chosen.

    Attributes
    ----------
    cells : dict of str to tuple of str
        One entry per :data:`~inclination.report.columns.PAPER_COLUMNS` name.
    n_rows, n_total : int
        Rows shown, boundaries in the full table.
    rule : str
        The selection rule in one sentence (caption and report).
    """

    cells: dict
    n_rows: int
    n_total: int
    rule: str


def _paper_selection(boundaries, max_rows: int) -> tuple[np.ndarray, str]:
    ident = np.asarray(boundaries["identification"], dtype=object)
    measured = np.isfinite(np.asarray(boundaries["measured_dip_deg"], float))
    unique = np.isin(ident, TRUSTED_IDENTIFICATIONS)
    pick = np.flatnonzero(measured | unique)
    rule = "boundaries with a measured dip or a uniquely identified plane"
    if len(pick) > max_rows:
        length = np.asarray(boundaries["length_um"], float)[pick]
        # Longest first; ties keep table order so that the choice is reproducible.
        pick = np.sort(pick[np.argsort(-length, kind="stable")[:max_rows]])
        rule += f", the {max_rows} longest of them"
    return pick, rule


def paper_table(boundaries, *, max_rows: int = PAPER_MAX_ROWS) -> PaperTable:
    """Select and round the boundaries table into the paper table's text cells.

    Rows: boundaries with a measured dip or a uniquely identified plane (class
    coherent twin or identified); the longest ``max_rows`` of them when there are
    more. Values with an uncertainty are rounded to it (:func:`round_to_uncertainty`),
    predicted dips and all dip directions to whole degrees.

    Examples
    --------
    >>> b = {"boundary_id": np.array([1, 2]), "grain_a": np.array([1, 1]),
    ...      "grain_b": np.array([2, 3]), "sigma": np.array(["3", ""], dtype=object),
    ...      "identification": np.array(["coherent_twin", "none"], dtype=object),
    ...      "plane_a": np.array(["(1 1 -1)", ""], dtype=object),
    ...      "plane_b": np.array(["(1 1 -1)", ""], dtype=object),
    ...      "trace_angle_deg": np.array([63.132, 10.0]),
    ...      "trace_sigma_deg": np.array([3.381, 1.0]),
    ...      "predicted_dip_deg": np.array([54.74, np.nan]),
    ...      "predicted_dip_azimuth_deg": np.array([153.1, np.nan]),
    ...      "measured_dip_deg": np.array([52.3, np.nan]),
    ...      "measured_dip_sigma_deg": np.array([2.04, np.nan]),
    ...      "measured_dip_azimuth_deg": np.array([151.0, np.nan]),
    ...      "dip_source": np.array(["cross-section", ""], dtype=object),
    ...      "sense": np.array(["agrees", ""], dtype=object),
    ...      "length_um": np.array([20.0, 5.0])}
    >>> t = paper_table(b)
    >>> t.n_rows, t.n_total, t.cells["trace"], t.cells["measured_dip"], t.cells["class"]
    (1, 2, ('63.1 ± 3.4',), ('52.3 ± 2.0',), ('CT',))
    """
    pick, rule = _paper_selection(boundaries, max_rows)
    col = {k: np.asarray(v) for k, v in boundaries.items()}
    cells = {c.name: [] for c in PAPER_COLUMNS}
    for i in pick.tolist():
        plane_a, plane_b = str(col["plane_a"][i] or ""), str(col["plane_b"][i] or "")
        cells["boundary_id"].append(str(int(col["boundary_id"][i])))
        cells["grains"].append(f"{int(col['grain_a'][i])}/{int(col['grain_b'][i])}")
        cells["sigma"].append(str(col["sigma"][i] or ""))
        cells["class"].append(CLASS_SYMBOLS.get(str(col["identification"][i]), ""))
        cells["plane"].append(
            f"{plane_a or '–'} / {plane_b}" if plane_b and plane_b != plane_a else plane_a
        )
        cells["trace"].append(_with_sigma(col["trace_angle_deg"][i], col["trace_sigma_deg"][i]))
        cells["predicted_dip"].append(_fixed(col["predicted_dip_deg"][i]))
        cells["predicted_direction"].append(_fixed(col["predicted_dip_azimuth_deg"][i]))
        cells["measured_dip"].append(
            _with_sigma(col["measured_dip_deg"][i], col["measured_dip_sigma_deg"][i])
        )
        cells["measured_direction"].append(_fixed(col["measured_dip_azimuth_deg"][i]))
        cells["source"].append(SOURCE_SYMBOLS.get(str(col["dip_source"][i] or ""), ""))
        cells["sense"].append(str(col["sense"][i] or ""))
    n_total = len(col["boundary_id"])
    return PaperTable({k: tuple(v) for k, v in cells.items()}, len(pick), n_total, rule)


def paper_legend() -> str:
    """The legend of the paper table's symbols, one sentence per symbol group.

    Examples
    --------
    >>> paper_legend().split(";")[0]
    'Class: CT coherent twin'
    """
    classes = "; ".join(
        f"{sym} {key.replace('_', ' ')}" for key, sym in CLASS_SYMBOLS.items() if key != "none"
    )
    sources = ", ".join(f"{sym} {name}" for name, sym in SOURCE_SYMBOLS.items())
    return (
        f"Class: {classes}; – no candidate fits. Plane a / plane b where the indices "
        f"differ; – / (h k l): low-index in grain b only. Src.: {sources}. Values ± one standard "
        "uncertainty, rounded to two significant digits of it; predicted dips and dip "
        "directions in whole degrees; empty: not available."
    )


def _overbar_unicode(text: str) -> str:
    # A combining overline after the digit: (1 1 -1) reads (1 1 1̄) as in print.
    return re.sub(r"-(\d)", "\\1\u0305", text)


def paper_markdown(paper: PaperTable) -> list[str]:
    """The paper table as Markdown lines (a pipe table)."""
    lines = ["| " + " | ".join(header_text(c) for c in PAPER_COLUMNS) + " |"]
    lines.append("|" + "|".join("---" for _ in PAPER_COLUMNS) + "|")
    for i in range(paper.n_rows):
        cells = [_overbar_unicode(paper.cells[c.name][i]) for c in PAPER_COLUMNS]
        lines.append("| " + " | ".join(x.replace("|", "\\|") for x in cells) + " |")
    if paper.n_rows == 0:
        lines += ["", "(no boundary with a measured dip or a uniquely identified plane)"]
    return lines


def paper_html(paper: PaperTable) -> list[str]:
    """The paper table as HTML lines (a ``<table class="paper">``)."""
    import html

    def cell(text):
        text = html.escape(text)
        return re.sub(r"-(\d)", r'<span class="bar">\1</span>', text)

    out = ['<table class="paper"><thead><tr>']
    out += [f"<th>{html.escape(header_text(c))}</th>" for c in PAPER_COLUMNS]
    out.append("</tr></thead><tbody>")
    for i in range(paper.n_rows):
        out.append(
            "<tr>"
            + "".join(f"<td>{cell(paper.cells[c.name][i])}</td>" for c in PAPER_COLUMNS)
            + "</tr>"
        )
    out.append("</tbody></table>")
    return out


#: Text width budget in pt: a plain A4 article at 10 pt (LaTeX's ``article`` class,
#: ``a4paper``: \textwidth = 345 pt, from the class file size10.clo). Wider pages only
#: gain room.
LATEX_TEXTWIDTH_PT = 345.0
# Footnotesize (8 pt Computer Modern): average width of a digit or letter, and of the
# column padding (2 × \tabcolsep of 3 pt); a generous estimate, from the font metrics.
_CHAR_PT = 4.4
_PAD_PT = 6.0
_SPLIT_AFTER = "trace"


def _latex_cell(name: str, text: str) -> str:
    if not text:
        return ""
    if name == "plane":
        return " / ".join(
            latex_indices(p.strip()) or _latex_text(p.strip()) for p in text.split("/")
        )
    if "±" in text:
        v, s = (p.strip() for p in text.split("±"))
        return f"${v}\\pm{s}$"
    return _latex_text(text)


def _natural_pt(name: str, texts) -> float:
    """Width estimate of a column's widest unbreakable cell (pt, footnotesize)."""
    widths = [0.0]
    for t in texts:
        if name == "plane":
            # Overbars and thin spaces: about one character per index and bracket.
            t = re.sub(r"-(\d)", r"\1", t)
        widths.append(len(t) * _CHAR_PT)
    return max(widths)


def _latex_block(paper: PaperTable, names: list[str]) -> list[str]:
    cols = [c for c in PAPER_COLUMNS if c.name in names]
    heads = [header_text(c) for c in cols]
    natural = [
        max(
            _natural_pt(c.name, paper.cells[c.name]),
            max(len(w) for w in h.split()) * _CHAR_PT,
        )
        for c, h in zip(cols, heads, strict=True)
    ]
    total = sum(natural)
    # X columns share the text width in proportion to their widest cell; the factors sum
    # to the number of columns (tabularx's \hsize rule), so the table is \textwidth wide.
    factors = [len(cols) * w / total for w in natural]
    align = {"plane": "raggedright", "grains": "raggedright", "sense": "raggedright"}
    spec = "".join(
        rf">{{\hsize={f:.3f}\hsize\{align.get(c.name, 'raggedleft')}\arraybackslash}}X"
        for c, f in zip(cols, factors, strict=True)
    )
    lines = [
        r"\begin{tabularx}{\textwidth}{@{}" + spec + "@{}}",
        r"\toprule",
        " & ".join(_latex_text(h) for h in heads) + r" \\",
        r"\midrule",
    ]
    for i in range(paper.n_rows):
        lines.append(" & ".join(_latex_cell(c.name, paper.cells[c.name][i]) for c in cols) + r" \\")
    lines += [r"\bottomrule", r"\end{tabularx}"]
    return lines


def latex_fits(paper: PaperTable, names: list[str]) -> bool:
    """Whether the columns ``names`` of the paper table fit the width budget in one table."""
    cols = [c for c in PAPER_COLUMNS if c.name in names]
    need = sum(
        max(
            _natural_pt(c.name, paper.cells[c.name]),
            max(len(w) for w in header_text(c).split()) * _CHAR_PT,
        )
        + _PAD_PT
        for c in cols
    )
    return need <= LATEX_TEXTWIDTH_PT


def paper_latex(paper: PaperTable, *, caption: str, label: str) -> str:
    r"""The paper table as a LaTeX ``table`` float that fits ``\textwidth``.

    A ``tabularx`` of width ``\textwidth`` whose columns share the width in proportion
    to their widest cell; when the widest cells together exceed the budget of a plain
    A4 article (:data:`LATEX_TEXTWIDTH_PT`), the table is split into two (the plane
    and trace, then the dips), each repeating the boundary id. Headers carry their
    units in plain LaTeX (no siunitx needed); packages: booktabs, tabularx.

    Examples
    --------
    >>> t = PaperTable({c.name: ("1",) for c in PAPER_COLUMNS}, 1, 1, "all")
    >>> text = paper_latex(t, caption="Boundaries.", label="tab:b")
    >>> text.splitlines()[0]
    '% Requires \\usepackage{booktabs} and \\usepackage{tabularx}; units in plain LaTeX.'
    >>> text.count("begin{tabularx}")
    1
    """
    names = [c.name for c in PAPER_COLUMNS]
    cut = names.index(_SPLIT_AFTER) + 1
    parts = [names] if latex_fits(paper, names) else [names[:cut], names[:1] + names[cut:]]
    lines = [
        r"% Requires \usepackage{booktabs} and \usepackage{tabularx}; units in plain LaTeX.",
        r"\begin{table}",
        r"\centering",
        r"\footnotesize",
        r"\setlength{\tabcolsep}{3pt}",
        r"\caption{" + _latex_text(caption) + "}",
        r"\label{" + label + "}",
    ]
    for k, part in enumerate(parts):
        if k:
            lines.append(r"\medskip")
        lines += _latex_block(paper, part)
    lines += [
        r"\par\smallskip\raggedright " + _latex_text(paper_legend()),
        r"\end{table}",
    ]
    return "\n".join(lines) + "\n"


def glossary_entries(columns_lists) -> list[tuple[str, str, str]]:
    """(header with unit, column name, description) of every column, then every class.

    Examples
    --------
    >>> from inclination.report.columns import PAPER_COLUMNS
    >>> glossary_entries([PAPER_COLUMNS])[0]
    ('ID', 'boundary_id', 'boundary number, as in boundaries.csv and on the map')
    """
    seen, out = set(), []
    for columns in columns_lists:
        for c in columns:
            if c.name in seen:
                continue
            seen.add(c.name)
            out.append((header_text(c), c.name, c.description))
    for key, text in CLASS_DESCRIPTIONS.items():
        out.append((f"class {CLASS_SYMBOLS[key]}", key, text))
    return out
