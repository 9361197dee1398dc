"""Tables encoded row by row in blocks, without a Python call per cell.

A table (a dict of equal-length 1-D arrays, with the column definitions of
:mod:`inclination.report.columns`) becomes text bytes a block of rows at a time.
Each column of a block turns into a byte matrix and, per row, the span of it that
holds the cell: numbers in a few numpy passes (the digits four at a time from a
table of the 10,000 four-digit groups), text by copying the code points of the
strings that need no quoting or escaping and one Python call per *distinct*
other string. The matrices are laid side by side with the separators and the
spans cut out in one pass. Memory stays a few tens of MB whatever the table's
length, and the throughput is that of numpy, not of ``str.format``.

The encodings (:data:`STYLES`):

``csv``, ``jsonl``
    Numbers with the column's decimals and trailing zeros dropped (``90.25``,
    ``3``, never ``-0``); absent values (NaN, a negative id, an empty string) are
    an empty cell in CSV and ``null`` in JSON lines, where each row is a JSON array.
``fixed_csv``
    The CSV of :func:`inclination.report.tables.write_csv`: every float with all
    of its column's decimals, as Python's ``f"{x:.{decimals}f}"`` writes it
    (correctly rounded) but never ``-0.000``; text quoted exactly as Python's
    :func:`csv.writer` quotes it (the module itself quotes every distinct string
    that might need it).
``json_rows``
    The rows of :func:`inclination.report.tables.write_table_json`: one JSON
    object per line, ``{"name": value, ...}`` as :func:`json.dumps` writes it with
    ``ensure_ascii=False``; floats rounded with :func:`numpy.round` to the
    column's decimals + 3 and written as Python's ``repr`` writes them (the
    shortest text that reads back to the same float).

Where the fast path cannot promise the same bytes as those references (a value
too large for exact int64 digits, a float within a rounding error of a tie, a
``repr`` in exponent form), that cell alone is written by the reference.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator, Mapping, Sequence

import numpy as np

__all__ = ["STYLES", "encode_rows"]

#: Closed set of encodings.
STYLES = ("csv", "jsonl", "fixed_csv", "json_rows")

_BLOCK_ROWS = 65_536
# Past this magnitude, |x|·10^d no longer fits an int64 exactly (jsonl, csv): such cells
# fall back to repr.
_FIXED_LIMIT = 1e15
# |value·10^d| below 2^50: the int64 digits are exact, and for json_rows two numbers
# 10^-d apart never round to the same float, so the fixed-point text is Python's repr.
_EXACT_LIMIT = float(2**50)
_POW10 = 10 ** np.arange(19, dtype=np.int64)
# Entry i: the four ASCII digits of i, zero-padded, as one uint32 (memory order kept).
_GROUPS4 = np.frombuffer(b"".join(b"%04d" % i for i in range(10_000)), np.uint32)
_QUOTE, _BACKSLASH, _COMMA = ord('"'), ord("\\"), ord(",")


class _Cells:
    """A block of one column: ``mat[i, start[i]:end[i]]`` is the text of row ``i``."""

    __slots__ = ("mat", "start", "end")

    def __init__(self, mat: np.ndarray, start: np.ndarray, end: np.ndarray):
        self.mat, self.start, self.end = mat, start, end

    def put(self, rows: np.ndarray, texts: Sequence[str]) -> None:
        """Replace the cells of ``rows`` by ``texts`` (the fallbacks and absent values)."""
        if len(rows) == 0:
            return
        block = _from_strings(texts)
        lengths = np.array([len(t.encode("utf-8")) for t in texts], np.intp)
        if block.shape[1] > self.mat.shape[1]:
            wider = np.zeros((self.mat.shape[0], block.shape[1]), np.uint8)
            wider[:, : self.mat.shape[1]] = self.mat
            self.mat = wider
        self.mat[rows, : block.shape[1]] = block
        self.start[rows] = 0
        self.end[rows] = lengths

    def put_same(self, rows: np.ndarray, text: str) -> None:
        """Replace the cells of ``rows`` (a boolean mask or indices) by one text."""
        rows = np.flatnonzero(rows) if rows.dtype == bool else rows
        if len(rows):
            self.put(rows, [text] * len(rows))


def _from_strings(cells: Sequence[str], inverse: np.ndarray | None = None) -> np.ndarray:
    encoded = [c.encode("utf-8") for c in cells]
    width = max((len(e) for e in encoded), default=0)
    mat = np.zeros((len(encoded), max(width, 1)), np.uint8)
    for i, e in enumerate(encoded):
        mat[i, : len(e)] = np.frombuffer(e, np.uint8)
    return mat if inverse is None else mat[inverse]


def _digits(v: np.ndarray) -> np.ndarray:
    """Number of decimal digits of non-negative int64 values (1 for 0)."""
    return np.maximum(np.searchsorted(_POW10, v, side="right"), 1)


def _zero_padded(v: np.ndarray, width: int) -> np.ndarray:
    """Non-negative int64 values below 10**width as (n, width) zero-padded ASCII digits."""
    groups = -(-width // 4)
    out = np.empty((len(v), groups), np.uint32)
    rest = v.copy()
    for g in range(groups - 1, -1, -1):
        out[:, g] = _GROUPS4[rest % 10_000]
        rest //= 10_000
    return out.view(np.uint8)[:, 4 * groups - width :]


def _fixed_cells(scaled: np.ndarray, neg: np.ndarray, decimals: int, trim: str) -> _Cells:
    """``scaled`` = |value|·10^decimals (int64 ≥ 0) as fixed-point text, ``-`` where ``neg``.

    ``trim``: ``none`` keeps every decimal; ``all`` drops trailing zeros and a bare
    point; ``keep_one`` drops trailing zeros but keeps one decimal (``3.0``).
    """
    n = len(scaled)
    nd = _digits(scaled)
    width = max(int(nd.max(initial=1)), decimals + 1)
    digits = _zero_padded(scaled, width)
    # Column 0 is room for the sign; the point goes after the integer digits.
    point = 1 + width - decimals
    mat = np.empty((n, width + 1 + (1 if decimals else 0)), np.uint8)
    mat[:, 1:point] = digits[:, : width - decimals]
    if decimals:
        mat[:, point] = ord(".")
        mat[:, point + 1 :] = digits[:, width - decimals :]
    start = 1 + width - np.maximum(nd, decimals + 1)
    signed = np.flatnonzero(neg)
    start[signed] -= 1
    mat[signed, start[signed]] = ord("-")
    if decimals == 0 or trim == "none":
        return _Cells(mat, start, np.full(n, mat.shape[1], np.intp))
    frac = mat[:, point + 1 :]
    trailing = np.zeros(n, np.intp)
    running = np.ones(n, bool)
    for k in range(decimals - 1, -1, -1):
        running &= frac[:, k] == ord("0")
        trailing += running
    end = mat.shape[1] - trailing
    whole = trailing == decimals
    end[whole] = point + (2 if trim == "keep_one" else 0)
    return _Cells(mat, start, end)


def _csv_text(text: str) -> str:
    if any(ch in text for ch in ',"\n\r'):
        return '"' + text.replace('"', '""') + '"'
    return text


def _csv_module_text(text: str) -> str:
    """One field as Python's csv.writer writes it (its quoting rules differ by version)."""
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow([text, ""])
    return buf.getvalue()[:-2]


def _json_text(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _text_cells(values: np.ndarray, style: str) -> _Cells:
    """Text cells: printable ASCII that needs no quoting is copied, the rest quoted once."""
    n = len(values)
    if values.dtype.kind == "U":
        arr = values
    elif style in ("fixed_csv", "json_rows"):
        # As write_csv / write_table_json have always read a cell: str() of any object.
        arr = np.array(["" if v is None else str(v) for v in values.tolist()], dtype=str)
    else:
        arr = values.astype(str)
    json_like = style in ("jsonl", "json_rows")
    null = "null" if json_like else ""
    quote = {
        "csv": _csv_text,
        "jsonl": json.dumps,
        "fixed_csv": _csv_module_text,
        "json_rows": _json_text,
    }[style]
    width = arr.dtype.itemsize // 4
    if width == 0:
        cells = _Cells(np.zeros((n, 1), np.uint8), np.zeros(n, np.intp), np.zeros(n, np.intp))
        cells.put_same(np.ones(n, bool), null)
        return cells
    codes = np.ascontiguousarray(arr).view(np.uint32).reshape(n, width)
    length = np.char.str_len(arr).astype(np.intp)
    inside = np.arange(width) < length[:, None]
    special = (codes == _QUOTE) | ((codes == _BACKSLASH) if json_like else (codes == _COMMA))
    bad = ((codes < 0x20) | (codes > 0x7E) | special) & inside
    plain = ~bad.any(axis=1)
    offset = 1 if json_like else 0
    mat = np.empty((n, width + 2 * offset), np.uint8)
    mat[:, offset : offset + width] = codes
    if json_like:
        mat[:, 0] = _QUOTE
        mat[np.arange(n), length + 1] = _QUOTE
    cells = _Cells(mat, np.zeros(n, np.intp), length + 2 * offset)
    cells.put_same(plain & (length == 0), null)
    other = np.flatnonzero(~plain)
    if len(other):
        uniq, inverse = np.unique(arr[other], return_inverse=True)
        texts = [quote(u) for u in uniq.tolist()]
        cells.put(other, [texts[i] for i in inverse.reshape(-1).tolist()])
    return cells


def _bool_cells(values: np.ndarray) -> _Cells:
    flags = np.asarray(values).astype(bool)
    mat = np.frombuffer(b"falsetrue\0", np.uint8).reshape(2, 5)[flags.astype(np.intp)]
    return _Cells(mat, np.zeros(len(flags), np.intp), np.where(flags, 4, 5))


def _compact_number_cells(values: np.ndarray, kind: str, decimals: int, style: str) -> _Cells:
    """csv / jsonl numbers: |x|·10^d rounded, trailing zeros dropped, big values as repr."""
    null = "null" if style == "jsonl" else ""
    x = np.asarray(values, float if kind == "float" else np.int64)
    d = decimals if kind == "float" else 0
    absent = ~np.isfinite(x) if kind == "float" else x < 0
    big = ~absent & (np.abs(x) >= _FIXED_LIMIT)
    ok = ~(absent | big)
    y = np.abs(np.where(ok, x, 0.0)) * 10.0**d
    # |x| < 1e15 but |x|·10^d past int64 exactness: the digits the rounding intends, in Python.
    huge = y >= _EXACT_LIMIT
    scaled = np.rint(np.where(huge, 0.0, y)).astype(np.int64)
    neg = (x < 0) & (scaled != 0)
    cells = _fixed_cells(scaled, neg, d, "all")
    cells.put_same(absent, null)
    rows = np.flatnonzero(big)
    cells.put(rows, [repr(float(v)) for v in x[rows].tolist()])
    rows = np.flatnonzero(huge)
    cells.put(rows, [_trimmed(v, d) for v in x[rows].tolist()])
    return cells


def _trimmed(value: float, decimals: int) -> str:
    digits = str(int(np.rint(abs(value) * 10.0**decimals))).rjust(decimals + 1, "0")
    text = digits
    if decimals:
        text = (digits[:-decimals] + "." + digits[-decimals:]).rstrip("0").rstrip(".")
    return ("-" if value < 0 and text != "0" else "") + text


def _csv_float(value: float, decimals: int) -> str:
    text = f"{value:.{decimals}f}"
    # "-0.000" reads as a sign that is not there.
    return text[1:] if text == f"{-0.0:.{decimals}f}" else text


def _fixed_csv_number_cells(values: np.ndarray, kind: str, decimals: int) -> _Cells:
    """write_csv numbers: ints as str(), floats as f"{x:.{d}f}" (never -0), absent empty."""
    if kind == "int":
        x = np.asarray(values).astype(np.int64)
        absent = x < 0
        cells = _fixed_cells(np.where(absent, 0, x), np.zeros(len(x), bool), 0, "none")
        cells.put_same(absent, "")
        return cells
    x = np.asarray(values).astype(float)
    absent = ~np.isfinite(x)
    with np.errstate(over="ignore", invalid="ignore"):
        # A finite x past 1e305 overflows here; such cells take the slow path below.
        y = np.abs(np.where(absent, 0.0, x)) * 10.0**decimals
    rounded = np.rint(y)
    # Python rounds the exact binary value; the product y carries one rounding error, so a
    # cell within a few ulps of a tie (0.0005 at 3 decimals) is left to Python.
    near_tie = np.abs(np.abs(y - rounded) - 0.5) <= 4 * np.spacing(y)
    slow = ~absent & ((y >= _EXACT_LIMIT) | near_tie)
    scaled = np.where(slow, 0.0, rounded).astype(np.int64)
    cells = _fixed_cells(scaled, (x < 0) & (scaled != 0), decimals, "none")
    cells.put_same(absent, "")
    rows = np.flatnonzero(slow)
    cells.put(rows, [_csv_float(v, decimals) for v in x[rows].tolist()])
    return cells


def _json_number_cells(values: np.ndarray, kind: str, decimals: int) -> _Cells:
    """write_table_json numbers: ints as str(), floats as repr(np.round(x, d + 3))."""
    if kind == "int":
        x = np.asarray(values).astype(np.int64)
        absent = x < 0
        cells = _fixed_cells(np.where(absent, 0, x), np.zeros(len(x), bool), 0, "none")
        cells.put_same(absent, "null")
        return cells
    k = decimals + 3
    x = np.asarray(values).astype(float)
    # As write_table_json has always done: rounded first, then absent if not finite.
    with np.errstate(over="ignore", invalid="ignore"):
        rounded = np.round(x, k)
    absent = ~np.isfinite(rounded)
    x0 = np.where(absent, 0.0, x)
    r = np.rint(x0 * 10.0**k)
    magnitude = np.abs(r)
    # repr switches to exponent form below 1e-4 (|r| < 10^(k-4)); and np.round's own
    # arithmetic is checked, not assumed.
    slow = ~absent & (
        (magnitude >= _EXACT_LIMIT)
        | ((magnitude < 10.0 ** (k - 4)) & (r != 0))
        | (r / 10.0**k != rounded)
    )
    scaled = np.where(slow, 0.0, magnitude).astype(np.int64)
    cells = _fixed_cells(scaled, np.signbit(r), k, "keep_one")
    cells.put_same(absent, "null")
    rows = np.flatnonzero(slow)
    cells.put(rows, [repr(v) for v in rounded[rows].tolist()])
    return cells


def _column_cells(values: np.ndarray, kind: str, decimals: int, style: str) -> _Cells:
    if kind == "bool":
        return _bool_cells(values)
    if kind == "str":
        return _text_cells(np.asarray(values), style)
    if style == "fixed_csv":
        return _fixed_csv_number_cells(values, kind, decimals)
    if style == "json_rows":
        return _json_number_cells(values, kind, decimals)
    return _compact_number_cells(values, kind, decimals, style)


def _layout(columns: Sequence, style: str) -> list[str]:
    """The literal text before each column and after the last (len(columns) + 1 pieces)."""
    if style == "jsonl":
        return ["["] + [","] * (len(columns) - 1) + ["]\n"]
    if style == "json_rows":
        keys = [json.dumps(c.name, ensure_ascii=False) + ": " for c in columns]
        return ["{" + keys[0]] + [", " + k for k in keys[1:]] + ["}\n"] if keys else ["{}\n"]
    return [""] + [","] * (len(columns) - 1) + ["\n"]


def _join(pieces: list, n: int) -> bytes:
    """Lay literals and cell spans side by side and keep the spans: the rows' bytes."""
    mats, masks = [], []
    for p in pieces:
        if isinstance(p, str):
            if p:
                raw = np.frombuffer(p.encode("utf-8"), np.uint8)
                mats.append(np.broadcast_to(raw, (n, raw.size)))
                masks.append(np.ones((1, raw.size), bool).repeat(n, axis=0))
            continue
        cols = np.arange(p.mat.shape[1])
        mats.append(p.mat)
        masks.append((cols >= p.start[:, None]) & (cols < p.end[:, None]))
    matrix = np.concatenate(mats, axis=1)
    return matrix[np.concatenate(masks, axis=1)].tobytes()


def encode_rows(
    table: Mapping[str, np.ndarray],
    columns: Sequence,
    *,
    style: str = "csv",
    block_rows: int = _BLOCK_ROWS,
) -> Iterator[bytes]:
    """Encode the rows of a table, a block at a time.

    Parameters
    ----------
    table : mapping of str to 1-D array
        Equal-length columns; every ``columns`` name must be present.
    columns : sequence of Column
        Name, kind (``int``, ``float``, ``str``, ``bool``) and decimals of each column,
        in output order.
    style : {'csv', 'jsonl', 'fixed_csv', 'json_rows'}, optional
        See the module docstring. ``csv``: comma-separated cells, text quoted only
        when it holds a comma, a quote or a line break. ``jsonl``: each row a JSON
        array, one per line. ``fixed_csv``: the rows of ``write_csv``. ``json_rows``:
        each row a JSON object, one per line.
    block_rows : int, optional
        Rows encoded per block (the memory bound).

    Yields
    ------
    bytes
        UTF-8 text of consecutive blocks of rows, each row ending in a line break; no
        header. An empty table yields nothing.

    Examples
    --------
    >>> from inclination.report.columns import Column
    >>> cols = [Column("id", "int"), Column("a_deg", "float", 3), Column("ok", "bool"),
    ...         Column("plane", "str")]
    >>> t = {"id": np.array([1, 2]), "a_deg": np.array([-0.0001, np.nan]),
    ...      "ok": np.array([True, False]), "plane": np.array(["(1 1 1)", ""])}
    >>> b"".join(encode_rows(t, cols, style="jsonl")).decode()
    '[1,0,true,"(1 1 1)"]\\n[2,null,false,null]\\n'
    >>> b"".join(encode_rows(t, cols, style="csv")).decode()
    '1,0,true,(1 1 1)\\n2,,false,\\n'
    >>> b"".join(encode_rows(t, cols, style="fixed_csv")).decode()
    '1,0.000,true,(1 1 1)\\n2,,false,\\n'
    >>> print(b"".join(encode_rows(t, cols, style="json_rows", block_rows=1)).decode())
    {"id": 1, "a_deg": -0.0001, "ok": true, "plane": "(1 1 1)"}
    {"id": 2, "a_deg": null, "ok": false, "plane": null}
    <BLANKLINE>
    """
    if style not in STYLES:
        raise ValueError(f"Expected `style` to be one of {STYLES}, got {style!r}.")
    missing = [c.name for c in columns if c.name not in table]
    if missing:
        raise ValueError(f"Expected the table to have columns {missing}, got {sorted(table)}.")
    lengths = {len(table[c.name]) for c in columns}
    if len(lengths) > 1:
        raise ValueError(f"Expected columns of equal length, got lengths {sorted(lengths)}.")
    n_rows = lengths.pop() if lengths else 0
    literals = _layout(columns, style)
    arrays = [np.asarray(table[c.name]) for c in columns]
    for start in range(0, n_rows, block_rows):
        stop = min(start + block_rows, n_rows)
        pieces: list = [literals[0]]
        for c, arr, after in zip(columns, arrays, literals[1:], strict=True):
            cells = _column_cells(arr[start:stop], c.kind, c.decimals, style)
            if style == "fixed_csv" and len(columns) == 1:
                # csv.writer writes a row of one empty field as "" (else it would be a blank line).
                cells.put_same(cells.end == cells.start, '""')
            pieces += [cells, after]
        yield _join(pieces, stop - start)
