"""Tables encoded row by row in blocks, without a Python call per cell.

A table (a dict of equal-length 1-D arrays, with the column definitions of
:mod:`inclination.report.columns`) becomes text bytes a block of rows at a time.
Each column of a block turns into a few planes of uint32 words, a word per cell and
plane, whose NUL bytes are padding: numbers in a few numpy passes (digits three or
four to a word, each plane one ``np.take`` from a table of ASCII words, in int32
arithmetic where the digits fit), text by copying the code points of the strings that
need no escaping and one call of the reference per *distinct* other string. The
planes are laid side by side with the separators and the NUL bytes deleted in one
``bytes.translate``. Memory stays a few tens of MB
whatever the table's length, and the throughput is that of numpy, not of
``str.format`` (docs/performance.md, "Table writers").

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
``printf``
    Numbers only, as Python's ``%`` operator writes them (the map export of
    :func:`inclination.io.writers.write_csv`): ``float`` columns as ``%.{decimals}f``
    (``-0.00000`` kept), ``int`` columns as ``%d``, ``general`` columns as
    ``%.{decimals}g`` (``decimals`` significant digits, trailing zeros dropped, an
    exponent below 1e-4 and from 10^decimals on); NaN and ±inf as ``nan``, ``inf``,
    ``-inf``. Cells are separated by the ``delimiter`` of :func:`encode_rows`, any one
    character.

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
STYLES = ("csv", "jsonl", "fixed_csv", "json_rows", "printf")

_BLOCK_ROWS = 16_384
# Rows laid side by side and squeezed at a time (_join), a few MB of words.
_JOIN_ROWS = 4096
# csv / jsonl write |x| from this magnitude on as Python's repr (the styles' rule).
_FIXED_LIMIT = 1e15
# |value·10^d| below 2^50: the int64 digits are exact, and for json_rows two numbers
# 10^-d apart never round to the same float, so the fixed-point text is Python's repr.
_EXACT_LIMIT = float(2**50)
_POW10 = 10 ** np.arange(19, dtype=np.int64)
# Powers of ten a float64 holds exactly (10^22 is the last), from Python's exact integers.
_POW10_FLOAT = np.array([float(10**k) for k in range(23)])


# A word is 4 bytes of text viewed as one uint32 (memory order kept, whatever the endianness).
def _words(texts) -> np.ndarray:
    """Byte strings of at most 4 bytes as uint32 words, NUL-padded on the left."""
    return np.frombuffer(b"".join(t.rjust(4, b"\0") for t in texts), np.uint32)


def _words_left(texts) -> np.ndarray:
    """Byte strings of at most 4 bytes as uint32 words, NUL-padded on the right."""
    return np.frombuffer(b"".join(t.ljust(4, b"\0") for t in texts), np.uint32)


# Integer digits three to a word, so that the leading group has room for the sign; entry
# q + 1000 * state, state 0: a group after the leading one ("\0ddd"), 1: the leading
# group ("\0\0dd"), 2: the leading group of a negative number ("\0-dd").
_INT_WORDS = np.concatenate(
    [
        _words(b"%03d" % q for q in range(1000)),
        _words(b"%d" % q for q in range(1000)),
        _words(b"-%d" % q for q in range(1000)),
    ]
)
# The same for a group above the units: there a leading group of value 0 is above the
# number, so it is NUL (the units write "0" / "-0").
_UPPER_WORDS = _INT_WORDS.copy()
_UPPER_WORDS[[1000, 2000]] = 0
# Decimals: the point and up to three digits in the first word, then four to a word.
# _POINT_WORDS[k, trim] / _DIGIT_WORDS[k]: entry q is the word of k digits of value q, entry
# 10^k + q the same word when every later digit is zero, its trailing zeros dropped: to
# nothing (``all``; the point too when q is 0) or to one kept decimal (``keep_one``).


def _point_word(q: int, k: int, trim: str) -> bytes:
    text = b".%0*d" % (k, q)
    if trim == "none":
        return text
    text = text.rstrip(b"0")
    return text if text != b"." else b"" if trim == "all" else b".0"


_POINT_WORDS = {
    (k, trim): np.concatenate(
        [
            _words_left(_point_word(q, k, "none") for q in range(10**k)),
            _words_left(_point_word(q, k, trim) for q in range(10**k)),
        ]
    )
    for k in (1, 2, 3)
    for trim in ("none", "all", "keep_one")
}
_DIGIT_WORDS = {
    k: np.concatenate(
        [
            _words_left(b"%0*d" % (k, q) for q in range(10**k)),
            _words_left((b"%0*d" % (k, q)).rstrip(b"0") for q in range(10**k)),
        ]
    )
    for k in (1, 2, 3, 4)
}
_QUOTE = ord('"')


def _padded(width: int) -> int:
    return -(-width // 4) * 4


class _Cells:
    """A block of one column: word ``j`` of row ``i`` is ``planes[j, i]``.

    ``planes`` is (k, n) uint32, any strides (a number's words are contiguous planes, the
    gathers' own output; a text's a transposed view of its byte matrix). Row ``i``'s k
    words in memory order, their NUL bytes left out, are its text; byte 0 of the first
    word is NUL: room for a one-byte separator before the cell (:func:`_join`).
    ``nul_texts`` holds the few cells whose text itself holds a NUL character (only a
    CSV string can), by row.
    """

    __slots__ = ("planes", "nul_texts")

    def __init__(self, planes: np.ndarray):
        self.planes = planes
        self.nul_texts: dict[int, bytes] = {}

    def _widen(self, width: int) -> None:
        words = -(-width // 4)
        if words > self.planes.shape[0]:
            wider = np.zeros((words, self.planes.shape[1]), np.uint32)
            wider[: self.planes.shape[0]] = self.planes
            self.planes = wider

    def put(self, rows: np.ndarray, texts: Sequence[str]) -> None:
        """Replace the cells of ``rows`` by ``texts`` (the fallbacks)."""
        if len(rows) == 0:
            return
        block = _from_strings(texts)
        self._widen(1 + block.shape[1])
        mat = np.zeros((len(rows), 4 * self.planes.shape[0]), np.uint8)
        mat[:, 1 : 1 + block.shape[1]] = block
        self.planes[:, rows] = mat.view(np.uint32).T
        for i, t in zip(rows.tolist(), texts, strict=True):
            if "\0" in t:
                self.nul_texts[i] = t.encode("utf-8")

    def put_planes(self, rows: np.ndarray, planes: np.ndarray) -> None:
        """Replace the cells of ``rows`` (indices) by the words of other cells, (k, len(rows))."""
        self._widen(4 * planes.shape[0])
        self.planes[planes.shape[0] :, rows] = 0
        self.planes[: planes.shape[0], rows] = planes

    def put_same(self, mask: np.ndarray, text: str) -> None:
        """Replace the cells where ``mask`` (boolean) holds by one text (no NUL in it)."""
        if mask.any():
            self.put_rows(np.flatnonzero(mask), text)

    def put_rows(self, rows: np.ndarray, text: str) -> None:
        """Replace the cells of ``rows`` (indices) by one text (no NUL in it)."""
        if len(rows) == 0:
            return
        raw = b"\0" + text.encode("utf-8")
        self._widen(len(raw))
        words = np.frombuffer(raw.ljust(4 * self.planes.shape[0], b"\0"), np.uint32)
        self.planes[:, rows] = words[:, None]


def _from_strings(cells: Sequence[str]) -> np.ndarray:
    """UTF-8 of each text as a row of a NUL-padded (n, width) uint8 matrix."""
    encoded = [c.encode("utf-8") for c in cells]
    width = max((len(e) for e in encoded), default=0)
    mat = np.zeros((len(encoded), max(width, 1)), np.uint8)
    for i, e in enumerate(encoded):
        mat[i, : len(e)] = np.frombuffer(e, np.uint8)
    return mat


def _gather(table: np.ndarray, index: np.ndarray, out: np.ndarray) -> None:
    # Every index is in range by construction; mode "wrap" skips numpy's bounds error
    # path (about twice as fast as table[index] into a strided column).
    np.take(table, index, out=out, mode="wrap")


def _fixed_cells(scaled: np.ndarray, neg: np.ndarray | None, decimals: int, trim: str) -> _Cells:
    """``scaled`` = |value|·10^decimals as fixed-point text, ``-`` where ``neg``.

    ``scaled``: integers ≥ 0 below 2^63, as an integer array or a float one holding
    integers (below 2^53). ``neg``: boolean, or None for no sign. ``trim``: ``none``
    keeps every decimal; ``all`` drops trailing zeros and a bare point; ``keep_one``
    drops trailing zeros but keeps one decimal (``3.0``).
    """
    n = len(scaled)
    largest = int(scaled.max(initial=0))
    # Division of int32 is about three times that of int64: the digits in int32 when
    # they fit, the table indices (intp) only where a gather takes them.
    small = largest < 2**31 and decimals <= 9
    scaled = scaled.astype(np.int32 if small else np.int64, copy=False)
    unit = int(_POW10[decimals])
    whole = scaled // unit if decimals else scaled
    # Byte 0 of the cell stays free: a group of three digits fills the last three bytes of
    # its word, so only a negative number needs a digit of room for its sign ("-dd").
    longest = len(str(largest // unit))
    if longest % 3 == 0 and neg is not None and neg.any():  # else the sign fits anyway
        longest += bool(np.any(neg & (whole >= 10 ** (longest - 1))))
    groups = -(-longest // 3)
    # The decimals split into words: the first three with the point, then four at a time.
    cuts = [0, min(3, decimals), *range(7, decimals, 4)] + ([decimals] if decimals > 3 else [])
    spans = list(zip(cuts[:-1], cuts[1:], strict=True)) if decimals else []
    planes = np.empty((groups + len(spans), n), np.uint32)
    # The leading word's table offset: 1000 ("dd"), 2000 for a negative number ("-dd").
    if neg is None:
        lead = 1000
    else:
        lead = neg.astype(np.intp)
        lead *= 1000
        lead += 1000
    rest = whole
    for g in range(groups - 1, -1, -1):
        table = _INT_WORDS if g == groups - 1 else _UPPER_WORDS
        if g == 0:  # the number's leading group, whatever its value
            _gather(table, lead + rest, planes[g])
            break
        above = rest // 1000
        q = rest - above * 1000
        q = q + (above == 0) * lead
        _gather(table, q, planes[g])
        rest = above
    if spans:
        frac = scaled - whole * unit
        # Trailing zeros are dropped word by word from the last, while every later one is zero.
        zeros_after = None
        rest = frac
        for j in range(len(spans) - 1, -1, -1):
            size = spans[j][1] - spans[j][0]
            table = _POINT_WORDS[size, trim] if j == 0 else _DIGIT_WORDS[size]
            if j:
                above = rest // int(_POW10[size])
                q = rest - above * int(_POW10[size])
            else:
                above, q = None, rest
            if trim == "none":
                index = q
            elif zeros_after is None:
                index = q + int(_POW10[size])
                zeros_after = q == 0
            else:
                index = q + zeros_after * int(_POW10[size])
                zeros_after &= q == 0
            _gather(table, index, planes[groups + j])
            rest = above
    return _Cells(planes)


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


def _rows_with(flags: np.ndarray) -> np.ndarray:
    """Per row of a boolean (n, 8k) matrix: does it hold a True? (k 1-D passes, as uint64)."""
    seen = np.zeros(flags.shape[0], np.uint64)
    if flags.any():
        for column in flags.view(np.uint64).T:
            seen |= column
    return seen != 0


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
        cells = _Cells(np.zeros((1, n), np.uint32))
        cells.put_same(np.ones(n, bool), null)
        return cells
    codes = np.ascontiguousarray(arr).view(np.uint32).reshape(n, width)
    # Room for the quotes, and rows of whole 8-byte words, so that a row's flags OR in a
    # few 1-D passes (a reduction along a short axis is slow in numpy). The code points
    # are narrowed to bytes first (a contiguous cast) and copied as one item per row.
    mat = np.zeros((n, -(-(width + 3) // 8) * 8), np.uint8)
    mat[:, 2 : 2 + width].view(f"V{width}")[...] = codes.astype(np.uint8).view(f"V{width}")
    # A quote or a control character (the NUL padding is neither), or a JSON backslash.
    special = mat < 0x20
    special &= mat != 0
    special |= mat == _QUOTE
    if json_like:
        special |= mat == ord("\\")
    other = _rows_with(special)
    comma = np.zeros(n, bool) if json_like else _rows_with(mat == ord(","))
    if codes.max(initial=0) >= 0x7F:
        other |= (codes >= 0x7F).any(axis=1)  # past printable ASCII: to the reference
    # numpy pads a string with NUL past its end; one with a NUL of its own goes to the
    # reference. Each non-empty row turns from NUL to text once (at its first character,
    # its byte 2) unless a NUL is inside it or leads it: count those turns.
    first = mat[:, 2] != 0
    text = mat.reshape(-1) != 0
    turns = np.count_nonzero(text[1:] & ~text[:-1])
    if turns != np.count_nonzero(first):
        length = np.char.str_len(arr)
        other |= np.count_nonzero(codes, axis=1) != length
        first = length != 0
    # Quotes around every JSON string, and around CSV text whose only special is a comma
    # (what csv.writer does to a field holding the delimiter and no quote or line break).
    mat[:, 1] = _QUOTE if json_like else np.where(comma, _QUOTE, 0)
    mat[:, -1] = mat[:, 1]
    cells = _Cells(mat.view(np.uint32).T)
    cells.put_same(~other & ~first, null)
    rows = np.flatnonzero(other)
    if len(rows):
        uniq, inverse = np.unique(arr[rows], return_inverse=True)
        texts = [quote(u) for u in uniq.tolist()]
        cells.put(rows, [texts[i] for i in inverse.reshape(-1).tolist()])
    return cells


def _bool_cells(values: np.ndarray) -> _Cells:
    flags = np.asarray(values).astype(bool)
    words = np.frombuffer(b"\0false\0\0\0true\0\0\0", np.uint32).reshape(2, 2)
    return _Cells(words[flags.astype(np.intp)].T)


def _compact_number_cells(values: np.ndarray, kind: str, decimals: int, style: str) -> _Cells:
    """csv / jsonl numbers: |x|·10^d rounded, trailing zeros dropped, big values as repr."""
    null = "null" if style == "jsonl" else ""
    if kind != "float":
        x = np.asarray(values, np.int64)
        rows = np.flatnonzero((x < 0) | (x >= _FIXED_LIMIT))
        cells = _fixed_cells(_zeroed(x, rows), None, 0, "all")
        sub = x[rows]
        cells.put_rows(rows[sub < 0], null)
        cells.put(rows[sub >= 0], [repr(float(v)) for v in sub[sub >= 0].tolist()])
        return cells
    x = np.asarray(values, float)
    d = decimals
    with np.errstate(over="ignore", invalid="ignore"):
        y = np.abs(x) * 10.0**d
        # The fast cells: |x| < 1e15 (else repr) and |x|·10^d within exact int64 digits
        # (else Python writes the digits the rounding intends); NaN and ±inf fail both.
        rows = np.flatnonzero(~(y < min(_EXACT_LIMIT, _FIXED_LIMIT * 10.0**d)))
    scaled = np.rint(y)
    scaled[rows] = 0.0
    # (x < 0) & (scaled != 0): "-0" never.
    cells = _fixed_cells(scaled, np.copysign(scaled, x) < 0, d, "all")
    sub = x[rows]
    absent = ~np.isfinite(sub)
    big = ~absent & (np.abs(sub) >= _FIXED_LIMIT)
    cells.put_rows(rows[absent], null)
    cells.put(rows[big], [repr(float(v)) for v in sub[big].tolist()])
    huge = ~(absent | big)
    cells.put(rows[huge], [_trimmed(v, d) for v in sub[huge].tolist()])
    return cells


def _zeroed(x: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``x`` with the entries of ``rows`` set to 0 (a copy if there are any)."""
    if len(rows):
        x = x.copy()
        x[rows] = 0
    return x


def _rounded_scaled(x: np.ndarray, decimals: int) -> tuple[np.ndarray, np.ndarray]:
    """|x|·10^decimals rounded as Python rounds the exact binary value, and the other rows.

    Returns ``(scaled, rows)``: ``scaled`` (float, exact integers, 0 at ``rows``) and the
    indices of the cells the float product cannot decide: NaN, ±inf, |x|·10^d ≥ 2^50,
    and a product within 1e-15 of a decimal tie (it carries one rounding error, at most
    1.2e-16 relative, so the exact value lies between the two products tried; where
    they round alike, so does it: 0.0005 at 3 decimals is a tie Python rounds to
    ``0.001``, the float product to ``0.000``).
    """
    with np.errstate(over="ignore", invalid="ignore"):
        y = np.abs(x) * 10.0**decimals
        low = np.rint(y * (1.0 - 1e-15))
        high = np.rint(y * (1.0 + 1e-15))
        rows = np.flatnonzero(~((low == high) & (high < _EXACT_LIMIT)))
    low[rows] = 0.0
    return low, rows


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
        x = np.asarray(values).astype(np.int64, copy=False)
        rows = np.flatnonzero(x < 0)
        cells = _fixed_cells(_zeroed(x, rows), None, 0, "none")
        cells.put_rows(rows, "")
        return cells
    x = np.asarray(values).astype(float, copy=False)
    scaled, rows = _rounded_scaled(x, decimals)
    # (x < 0) & (scaled != 0): "-0.000" reads as a sign that is not there.
    cells = _fixed_cells(scaled, np.copysign(scaled, x) < 0, decimals, "none")
    sub = x[rows]
    finite = np.isfinite(sub)
    cells.put_rows(rows[~finite], "")
    cells.put(rows[finite], [_csv_float(v, decimals) for v in sub[finite].tolist()])
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


def _put_non_finite(cells: _Cells, x: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``nan``, ``inf`` and ``-inf`` among ``rows``, as Python's ``%`` writes them (the sign
    of a NaN is not); returns the finite rows among them."""
    sub = x[rows]
    for mask, text in ((np.isnan(sub), "nan"), (sub == np.inf, "inf"), (sub == -np.inf, "-inf")):
        cells.put_rows(rows[mask], text)
    return rows[np.isfinite(sub)]


def _printf_int_cells(values: np.ndarray) -> _Cells:
    """``%d``: the integer with its sign (a float is cut toward zero, as ``%d`` does)."""
    x = np.asarray(values).astype(np.int64, copy=False)
    # -2^63 has no int64 magnitude: Python writes it.
    rows = np.flatnonzero(x == np.iinfo(np.int64).min)
    cells = _fixed_cells(np.abs(_zeroed(x, rows)), x < 0, 0, "none")
    cells.put(rows, ["%d" % v for v in x[rows].tolist()])  # noqa: UP031 (% is the rule)
    return cells


def _printf_fixed_cells(values: np.ndarray, decimals: int) -> _Cells:
    """``%.{decimals}f``: correctly rounded, the sign of a negative zero kept (``-0.000``)."""
    x = np.asarray(values).astype(float, copy=False)
    scaled, rows = _rounded_scaled(x, decimals)
    # The sign bit of a non-finite cell does not matter: put_rows replaces the cell.
    cells = _fixed_cells(scaled, np.signbit(x), decimals, "none")
    rows = _put_non_finite(cells, x, rows)
    cells.put(rows, ["%.*f" % (decimals, v) for v in x[rows].tolist()])  # noqa: UP031 (% is the rule)
    return cells


# The exponent of %g as one word, "e+dd" / "e-dd", for the exponents of the fast path.
_EXPONENT_MIN = -23
_EXPONENT_WORDS = _words_left(b"e%+03d" % e for e in range(_EXPONENT_MIN, 24 + 23))


# Nearest float64 of each power of ten from 10^-330 to 10^310 (the decimal exponent
# guess of %g compares |x| with them; a wrong guess is caught afterwards).
_POW10_MIN = -330
_POW10_NEAR = np.array([float(f"1e{k}") for k in range(_POW10_MIN, 311)])


def _printf_general_cells(values: np.ndarray, digits: int) -> _Cells:
    """``%.{digits}g``: ``digits`` significant digits, fixed or exponent form, zeros dropped.

    For a finite x ≠ 0 with decimal exponent e (after rounding to ``digits`` digits),
    Python writes the fixed form with ``digits - 1 - e`` decimals if -4 ≤ e < digits,
    else the mantissa and ``e±dd``; trailing zeros and a bare point are dropped in both.
    The mantissa m = |x|·10^(digits-1-e0) rounded, one multiplication or division by an
    exact power of ten, so one rounding error; a cell near a tie or with a wrong guess
    e0 of the exponent (near a power of ten) is left to Python.
    """
    x = np.asarray(values).astype(float, copy=False)
    digits = max(digits, 1)  # %.0g writes one digit, as %.1g
    a = np.abs(x)
    # The decimal exponent from the binary one: a = f·2^b with f in [0.5, 1), so
    # log10(a) is in [(b - 1)·log10(2), b·log10(2)): e0 = floor((b - 1)·log10(2)), as
    # (b - 1)·78913 >> 18 (exact for |b| < 1650), plus one where a reaches the next
    # power of ten.
    _, b = np.frexp(a)
    b -= 1
    b *= 78913
    b >>= 18
    e0 = b
    e0 += a >= np.take(_POW10_NEAR, e0 + (1 - _POW10_MIN), mode="clip")
    k = (digits - 1) - e0
    # Mostly k ≥ 0 (|x| < 10^(digits-1)): a product; the rest a division, never by an
    # inexact power (past |k| = 22 the power is clipped, so y falls out of range below).
    y = a * np.take(_POW10_FLOAT, k, mode="clip")
    down = np.flatnonzero(k < 0)
    if len(down):
        y[down] = a[down] / np.take(_POW10_FLOAT, -k[down], mode="clip")
    low, high = float(10 ** (digits - 1)), float(10**digits)
    with np.errstate(invalid="ignore", over="ignore"):
        # As in _rounded_scaled: the exact product lies between these two, so where they
        # round alike it rounds the same; NaN and ±inf fail the range.
        m = np.rint(y * (1.0 - 1e-15))
        fast = m == np.rint(y * (1.0 + 1e-15))
        fast &= y >= low
        fast &= y < high
    fast |= a == 0.0
    if high > _EXACT_LIMIT:
        fast = a == 0.0
    others = np.flatnonzero(~fast)
    carry = m == high  # 9999999.6 -> 1000000, one exponent up
    if carry.any():
        m[carry] = low
        e0 += carry
    e = e0
    # Zero, and every cell replaced below, is m = 0 in the fixed form: "0" or "-0".
    zero_or_other = np.flatnonzero(~fast | (a == 0.0))
    m[zero_or_other] = 0.0
    e[zero_or_other] = digits - 1
    neg = np.signbit(x)
    # The fixed form has d = digits - 1 - e decimals, for 0 ≤ d ≤ digits + 3. Written with
    # the block's most decimals (top), m·10^(top - d), in one pass: the zeros this appends
    # are dropped with the other trailing zeros.
    d = (digits - 1) - e
    fixed = (d >= 0) & (d <= digits + 3)
    exponent = np.flatnonzero(~fixed)
    top = int(np.max(d, where=fixed, initial=0)) if len(exponent) else int(d.max(initial=0))
    if digits + top <= 18:  # m·10^(top - d) < 10^(digits + top) fits int64
        scaled = m.astype(np.int64) * np.take(_POW10, top - d, mode="clip")
        scaled[exponent] = 0
        cells = _fixed_cells(scaled, neg, top, "all")
    else:  # one pass per number of decimals
        cells = _fixed_cells(np.zeros(len(x)), neg, 0, "none")
        for k in np.unique(d[fixed]).tolist():
            rows = np.flatnonzero(fixed & (d == k))
            cells.put_planes(rows, _fixed_cells(m[rows], neg[rows], k, "all").planes)
    if len(exponent):
        mantissa = _fixed_cells(m[exponent], neg[exponent], digits - 1, "all").planes
        words = _EXPONENT_WORDS[e[exponent] - _EXPONENT_MIN]
        cells.put_planes(exponent, np.concatenate([mantissa, words[None]]))
    others = _put_non_finite(cells, x, others)
    cells.put(others, ["%.*g" % (digits, v) for v in x[others].tolist()])  # noqa: UP031 (% is the rule)
    return cells


def _printf_cells(values: np.ndarray, kind: str, decimals: int) -> _Cells:
    if kind == "int":
        return _printf_int_cells(values)
    if kind == "float":
        return _printf_fixed_cells(values, decimals)
    if kind == "general":
        return _printf_general_cells(values, decimals)
    raise ValueError(f"Expected a printf column of kind int, float or general, got {kind!r}.")


def _column_cells(values: np.ndarray, kind: str, decimals: int, style: str) -> _Cells:
    if style == "printf":
        return _printf_cells(values, kind, decimals)
    if kind == "general":
        raise ValueError(f"Expected a column of kind general in the printf style, got {style!r}.")
    if kind == "bool":
        return _bool_cells(values)
    if kind == "str":
        return _text_cells(np.asarray(values), style)
    if style == "fixed_csv":
        return _fixed_csv_number_cells(values, kind, decimals)
    if style == "json_rows":
        return _json_number_cells(values, kind, decimals)
    return _compact_number_cells(values, kind, decimals, style)


def _layout(columns: Sequence, style: str, delimiter: str = ",") -> list[str]:
    """The literal text before each column and after the last (len(columns) + 1 pieces)."""
    if style == "jsonl":
        return ["["] + [","] * (len(columns) - 1) + ["]\n"]
    if style == "json_rows":
        keys = [json.dumps(c.name, ensure_ascii=False) + ": " for c in columns]
        return ["{" + keys[0]] + [", " + k for k in keys[1:]] + ["}\n"] if keys else ["{}\n"]
    return [""] + [delimiter] * (len(columns) - 1) + ["\n"]


def _literal_words(raw: bytes) -> np.ndarray:
    return np.frombuffer(raw.ljust(_padded(len(raw)), b"\0"), np.uint32)


def _join(pieces: list, n: int) -> list[bytes]:
    """Lay literals and cells side by side as words and drop the NUL padding: the rows.

    Returns the rows as consecutive pieces of at most :data:`_JOIN_ROWS` rows each.
    """
    # A one-byte literal (",", "[") goes into the free byte 0 of the cell after it.
    plan: list[tuple[object, bytes]] = []
    k = 0
    while k < len(pieces):
        p = pieces[k]
        if isinstance(p, _Cells):
            plan.append((p, b""))
        elif p:
            raw = p.encode("utf-8")
            if len(raw) == 1 and k + 1 < len(pieces) and isinstance(pieces[k + 1], _Cells):
                plan.append((pieces[k + 1], raw))
                k += 1
            else:
                plan.append((raw, b""))
        k += 1
    parts = [
        (item.planes if isinstance(item, _Cells) else _literal_words(item), prefix)
        for item, prefix in plan
    ]
    overrides = [item.nul_texts for item, _ in plan if isinstance(item, _Cells) and item.nul_texts]
    # A few thousand rows at a time: the words, their bytes and the text stay a few MB,
    # buffers the allocator keeps (past about 8 MB they went back to the system and were
    # faulted in again, block after block: a third of the time of a wide table).
    step = n if overrides else _JOIN_ROWS
    buffer = np.empty((min(n, step), sum(words.shape[0] for words, _ in parts)), np.uint32)
    out = []
    for start in range(0, n, step):
        stop = min(start + step, n)
        matrix = buffer[: stop - start]
        at = 0
        # One word column at a time: a 1-D strided copy is several times faster than a
        # 2-D one a few words wide.
        for words, prefix in parts:
            for j in range(words.shape[0]):
                column = words[j, start:stop] if words.ndim == 2 else words[j]
                if j == 0 and prefix:
                    byte0 = np.frombuffer(prefix + b"\0\0\0", np.uint32)[0]
                    np.bitwise_or(column, byte0, out=matrix[:, at])
                else:
                    matrix[:, at] = column
                at += 1
        if not overrides:
            out.append(matrix.tobytes().translate(None, b"\0"))
    if not overrides:
        return out
    # A text with a NUL of its own (a CSV cell only): the rows that hold one, cell by cell.
    matrix = buffer
    rows = []
    for i, line in enumerate(matrix.view(np.uint8)):
        if not any(i in o for o in overrides):
            rows.append(line.tobytes().translate(None, b"\0"))
            continue
        at, cells = 0, []
        for (item, prefix), (words, _) in zip(plan, parts, strict=True):
            cell = line[4 * at : 4 * (at + words.shape[0])].tobytes()
            at += words.shape[0]
            own = item.nul_texts.get(i) if isinstance(item, _Cells) else None
            cells.append(prefix + own if own is not None else cell.translate(None, b"\0"))
        rows.append(b"".join(cells))
    return [b"".join(rows)]


def encode_rows(
    table: Mapping[str, np.ndarray],
    columns: Sequence,
    *,
    style: str = "csv",
    block_rows: int = _BLOCK_ROWS,
    delimiter: str = ",",
) -> Iterator[bytes]:
    """Encode the rows of a table, a block at a time.

    Parameters
    ----------
    table : mapping of str to 1-D array
        Equal-length columns; every ``columns`` name must be present.
    columns : sequence of Column
        Name, kind (``int``, ``float``, ``str``, ``bool``) and decimals of each column,
        in output order.
    style : {'csv', 'jsonl', 'fixed_csv', 'json_rows', 'printf'}, optional
        See the module docstring. ``csv``: comma-separated cells, text quoted only
        when it holds a comma, a quote or a line break. ``jsonl``: each row a JSON
        array, one per line. ``fixed_csv``: the rows of ``write_csv``. ``json_rows``:
        each row a JSON object, one per line. ``printf``: numbers as Python's ``%``
        writes them (column kinds ``int``: ``%d``, ``float``: ``%.{decimals}f``,
        ``general``: ``%.{decimals}g``).
    block_rows : int, optional
        Rows encoded per block (the memory bound).
    delimiter : str, optional
        The one character between cells of the ``printf`` style (the other styles
        take only ``,``).

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
    >>> cols = [Column("a_deg", "float", 3), Column("id", "int"), Column("q", "general", 7)]
    >>> t = {"a_deg": np.array([-0.0001, np.nan]), "id": np.array([1, -2]),
    ...      "q": np.array([1e16, 0.125])}
    >>> b"".join(encode_rows(t, cols, style="printf", delimiter=";")).decode()
    '-0.000;1;1e+16\\nnan;-2;0.125\\n'
    """
    if style not in STYLES:
        raise ValueError(f"Expected `style` to be one of {STYLES}, got {style!r}.")
    if len(delimiter) != 1 or (delimiter != "," and style != "printf"):
        raise ValueError(
            f"Expected `delimiter` to be one character (',' unless printf), got {delimiter!r}."
        )
    missing = [c.name for c in columns if c.name not in table]
    if missing:
        raise ValueError(f"Expected the table to have columns {missing}, got {sorted(table)}.")
    lengths = {len(table[c.name]) for c in columns}
    if len(lengths) > 1:
        raise ValueError(f"Expected columns of equal length, got lengths {sorted(lengths)}.")
    n_rows = lengths.pop() if lengths else 0
    # A NUL separator would go with the padding: a byte no printf cell holds stands in for it.
    nul = delimiter == "\0"
    literals = _layout(columns, style, "\1" if nul else delimiter)
    arrays = [np.asarray(table[c.name]) for c in columns]
    for start in range(0, n_rows, block_rows):
        stop = min(start + block_rows, n_rows)
        pieces: list = [literals[0]]
        for c, arr, after in zip(columns, arrays, literals[1:], strict=True):
            cells = _column_cells(arr[start:stop], c.kind, c.decimals, style)
            if style == "fixed_csv" and len(columns) == 1:
                # csv.writer writes a row of one empty field as "" (else it would be a blank line).
                cells.put_same(~cells.planes.any(axis=0), '""')
            pieces += [cells, after]
        for rows in _join(pieces, stop - start):
            yield rows.replace(b"\1", b"\0") if nul else rows
