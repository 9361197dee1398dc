"""Text tables and grid placement: the reading of coordinate-and-angle tables.

Owns the text parser (:func:`read_table`) and the placement of table rows on a square
or hexagonal grid from their coordinates (:func:`place_on_grid`, conventions §1).
These functions return plain arrays; :func:`inclination.maps.read_map` turns them
into an :class:`~inclination.maps.OrientationMap` and converts frames. Every
failure is an :class:`~inclination.errors.InputError` naming the file and, for a
table, the line (1-based, as a text editor counts) and the column.

Why this text parser. A 4-million-point table is about 250 MB of text. The
file is read once as bytes (hashed from the same buffer) and handed, without a
copy, to ``numpy.loadtxt``: since numpy 1.23 it is a C tokenizer and float
parser, measured here at about 2 million rows/s (1.8 s for 4 million rows of 7
columns), where ``numpy.fromstring`` took 4.9 s and a Python loop over lines
or the csv module take tens of seconds. Empty cells are not numbers to
``loadtxt``, so when a cheap byte search finds one, the body is rewritten once
with ``nan`` in every empty cell (``bytes.replace`` runs at memory speed).
Nothing else is scanned on the fast path: when ``loadtxt`` refuses the text,
the slow path finds the first ragged row (vectorised over a uint8 view) or
the first cell that is not a number (line by line) and names its line and
column.
"""

from __future__ import annotations

import hashlib
import io
import warnings
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from ..errors import InputError, SettingError

__all__ = ["Table", "GridPlacement", "read_table", "place_on_grid", "TABLE_DELIMITERS"]

#: Default delimiter of each table format (None: any run of spaces or tabs).
TABLE_DELIMITERS = {"csv": ",", "tsv": "\t", "text": None}

# Coordinates may sit off their grid point by this fraction of a step (conventions §1).
_OFF_GRID_FRACTION = 0.01


@dataclass(frozen=True)
class Table:
    """A parsed text table.

    Attributes
    ----------
    header : tuple of str
        Column names, in file order.
    values : ndarray, shape (N, C) float64
        One row per data line; empty cells are NaN.
    first_line : int
        1-based line number of the first data row (row k is on line first_line + k
        when the body has no blank lines).
    sha256 : str
        SHA-256 of the file's bytes as read.
    lines : ndarray of int, optional
        The line of each row, kept only when blank lines break the simple rule.
    """

    header: tuple
    values: np.ndarray
    first_line: int
    sha256: str = ""
    lines: np.ndarray | None = None

    def line_of(self, row: int) -> int:
        """The 1-based file line of data row ``row`` (blank lines are skipped)."""
        if self.lines is not None:
            return int(self.lines[int(row)])
        return self.first_line + int(row)


def _decode_header(line: bytes, delimiter, path) -> tuple:
    try:
        text = line.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(
            "Expected a UTF-8 text header row, got undecodable bytes.", path=path, pointer="line 1"
        ) from None
    cells = text.split() if delimiter is None else text.split(delimiter)
    names = tuple(c.strip().strip('"').strip("'").strip() for c in cells)
    if not names or any(not n for n in names):
        raise InputError(
            f"Expected a header row of non-empty column names, got {text.strip()!r}.",
            path=path,
            pointer="header",
        )
    seen = set()
    for n in names:
        if n in seen:
            raise InputError(
                f"Expected distinct column names, got {n!r} twice.", path=path, pointer="header"
            )
        seen.add(n)
    return names


def _fields_per_line(body: bytes, delimiter) -> np.ndarray:
    """Number of fields on each line of ``body`` (lines split at b'\\n')."""
    arr = np.frombuffer(body, dtype=np.uint8)
    if delimiter is None:
        # A field starts at a printable byte (> 32) that follows a space, tab or line end.
        printable = arr > 32
        starts = np.flatnonzero(printable[1:] & ~printable[:-1]) + 1
        if printable.size and printable[0]:
            starts = np.concatenate([[0], starts])
        line_ends = np.flatnonzero(arr == 10)
        bounds = np.searchsorted(starts, line_ends)
        return np.diff(np.concatenate([[0], bounds, [starts.size]]))
    events = np.flatnonzero((arr == ord(delimiter)) | (arr == 10))
    newline_events = np.flatnonzero(arr[events] == 10)
    per_line_delims = np.diff(np.concatenate([[-1], newline_events, [events.size]])) - 1
    return per_line_delims + 1


def _locate_bad_cell(body: bytes, delimiter, header, first_line, path):
    """Slow path: find the first cell that is not a number and raise for it."""
    lines = body.split(b"\n")
    block = 4096
    for start in range(0, len(lines), block):
        chunk = lines[start : start + block]
        for k, line in enumerate(chunk):
            cells = line.split() if delimiter is None else line.split(delimiter.encode())
            for c, cell in enumerate(cells):
                text = cell.strip().strip(b'"')
                if not text:
                    continue
                try:
                    float(text)
                except ValueError:
                    shown = text[:40].decode("utf-8", "replace")
                    name = header[c] if c < len(header) else f"#{c + 1}"
                    raise InputError(
                        f"Expected a number in column {name!r}, got {shown!r}.",
                        path=path,
                        pointer=f"line {first_line + start + k}",
                    ) from None
    raise InputError(  # pragma: no cover - loadtxt refused a buffer float() accepts
        "Expected numbers in every cell, got a buffer numpy could not parse.", path=path
    )


def read_table(
    path: str | PathLike, *, delimiter: str | None = None, whitespace: bool = False
) -> Table:
    """Read a delimited text table with a header row into a float array.

    Parameters
    ----------
    path : str or Path
        The file. Leading lines starting with ``#`` are skipped; the next line
        is the header. A UTF-8 byte-order mark, CR line ends, double-quoted
        cells and blank lines are accepted.
    delimiter : str, optional
        One character (``','``, ``'\\t'``, ``';'`` ...). Ignored when ``whitespace``.
    whitespace : bool, default False
        Fields are separated by any run of spaces or tabs.

    Returns
    -------
    Table

    Raises
    ------
    InputError
        Empty file, no data rows, a ragged row (first one named), a cell that
        is not a number (first one named), a header that cannot be read.

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("a,b\\n1,2\\n3,\\n")
    >>> t = read_table(p, delimiter=",")
    >>> t.header, t.values.tolist(), t.first_line
    (('a', 'b'), [[1.0, 2.0], [3.0, nan]], 2)
    """
    from .limits import read_bytes

    path = Path(path)
    raw = read_bytes(path, kind="map")
    # hashlib releases the GIL on large buffers: the digest is computed while
    # numpy parses the same bytes.
    hasher = ThreadPoolExecutor(max_workers=1)
    sha_future = hasher.submit(lambda data: hashlib.sha256(data).hexdigest(), raw)
    hasher.shutdown(wait=False)
    delim = None if whitespace or delimiter in (None, " ") else delimiter
    if delim is not None and (len(delim) != 1 or delim in "\n\r\"'."):
        raise SettingError(f"Expected `delimiter` to be one character, got {delimiter!r}.")
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if b"\r" in raw:
        raw = raw.replace(b"\r", b"")
    # Slices of a 250 MB buffer are copies; positions are kept instead.
    start, line_no = 0, 1
    while raw.startswith(b"#", start):
        cut = raw.find(b"\n", start)
        start = len(raw) if cut < 0 else cut + 1
        line_no += 1
    cut = raw.find(b"\n", start)
    header_end = len(raw) if cut < 0 else cut
    # Only a blank header line costs a copy of the rest, to tell "empty" from "no header".
    if not raw[start:header_end].strip() and not raw[start:].strip():
        raise InputError("Expected a header row and data rows, got an empty file.", path=path)
    header = _decode_header(raw[start:header_end], delim, path)
    first_line = line_no + 1
    body_start = header_end + 1

    n_cols = len(header)
    values, message = _loadtxt(raw, delim, first_line - 1)
    if values is None and delim is not None and "string ''" in message:
        # Empty cells (non-indexed points) stop the parser at the first one, usually
        # early; only then is the body rewritten with nan in every empty cell.
        # The header and comment lines hold no empty cell (names are checked), so the
        # whole buffer is rewritten: a slice first would cost one more copy.
        d = delim.encode()
        pair = d + d
        text = raw.replace(pair, d + b"nan" + d).replace(pair, d + b"nan" + d)
        text = text.replace(b"\n" + d, b"\nnan" + d).replace(d + b"\n", d + b"nan\n")
        if text.endswith(d):
            text = text + b"nan"
        values, message = _loadtxt(text, delim, first_line - 1)
        del text
    if values is not None and values.size == 0:
        raise InputError("Expected data rows after the header, got none.", path=path)
    if values is None or values.shape[1] != n_cols:
        body = raw[body_start:]
        blank = _blank_line_numbers(body)
        fields = _fields_per_line(body, delim)
        bad = np.flatnonzero((fields != n_cols) & ~blank)
        if bad.size:
            k = int(bad[0])
            raise InputError(
                f"Expected {n_cols} fields on every row (as in the header), got {int(fields[k])}.",
                path=path,
                pointer=f"line {first_line + k}",
            )
        _locate_bad_cell(body, delim, header, first_line, path)
    lines = None
    # Blank lines are skipped by the parser; rows then sit on other lines than
    # first_line + row, and the map of rows to lines is kept for error messages.
    end = len(raw)
    while end > body_start and raw[end - 1] in b"\n \t":
        end -= 1
    if raw.count(b"\n", body_start, end) + 1 != len(values):
        blank = _blank_line_numbers(raw[body_start:])
        lines = first_line + np.flatnonzero(~blank)
    sha = sha_future.result()
    return Table(header=header, values=values, first_line=first_line, sha256=sha, lines=lines)


def _loadtxt(buffer: bytes, delimiter, skip: int):
    """numpy's C parser on the buffer, without a copy; (values, "") or (None, message)."""
    try:
        with warnings.catch_warnings():
            # An empty body is reported by the caller, in this module's words.
            warnings.simplefilter("ignore", UserWarning)
            values = np.loadtxt(
                io.BytesIO(buffer),
                dtype=np.float64,
                delimiter=delimiter,
                comments=None,
                skiprows=skip,
                quotechar='"',
                ndmin=2,
                encoding="utf-8",
            )
    except ValueError as exc:
        return None, str(exc)
    return values, ""


def _blank_line_numbers(body: bytes) -> np.ndarray:
    """Bool per line of ``body``: True where the line holds only spaces or tabs."""
    return np.array([not line.strip() for line in body.split(b"\n")], dtype=bool)


@dataclass(frozen=True)
class GridPlacement:
    """Where each table row sits on the map grid (conventions §1, in S).

    Attributes
    ----------
    row, col : ndarray, shape (N,) int64
        Grid indices of each table row.
    shape : tuple of int
        (H, W).
    origin_sample_um : tuple of float
        Position of grid point (0, 0) in the frame the coordinates were given
        in after turning into S axes (µm).
    step_x_um, step_y_um : float
        Steps along X_S and Y_S; on a hexagonal grid both are the in-row
        neighbour distance and rows are ``step·√3/2`` apart.
    grid : {'square', 'hexagonal'}
    """

    row: np.ndarray
    col: np.ndarray
    shape: tuple
    origin_sample_um: tuple
    step_x_um: float
    step_y_um: float
    grid: str


def _spacing(values: np.ndarray, cut: float | None = None) -> tuple[float, float]:
    """(position of the first line, spacing) of coordinates clustered on regular lines.

    Points may sit up to 1 % of a step off their line while neighbouring lines
    are at least a step apart: sorted unique values jump either by under 2 % of
    a step (within a line) or by about a whole number of steps (to another
    line). Candidate cuts between the two sit where the sorted jumps grow more
    than fivefold; the largest cut whose clusters stay within 2 % of the
    smallest gap between them is taken (a band of missing lines makes a large
    jump, but its clusters would then be too wide). Returns spacing 0 for a
    single line. A known ``cut`` (from a declared step, or from the other axis)
    is used as it is.
    """
    u = np.unique(values)
    if u.size == 1:
        return float(u[0]), 0.0
    d = np.diff(u)
    if cut is not None:
        candidates = [float(cut)]
        if not np.any(d > cut):
            return float(np.mean(u)), 0.0
    else:
        ds = np.unique(d)
        candidates = [*ds[:-1][ds[1:] > 5.0 * ds[:-1]][::-1].tolist(), 0.0]
    for cut in candidates:
        split = np.flatnonzero(d > cut)
        if split.size == 0:
            continue
        first = np.concatenate([[0], split + 1])
        last = np.concatenate([split, [u.size - 1]])
        centres = 0.5 * (u[first] + u[last])
        gaps = np.diff(centres)
        if np.max(u[last] - u[first]) <= 0.02 * gaps.min():
            break
    # The step from single-step gaps, then a least-squares line through the line
    # centres, refitted without centres more than half the tolerance off, so that one
    # misplaced line neither sets the step nor hides which line is off.
    slope = float(np.median(gaps[gaps < 1.5 * gaps.min()]))
    k = np.rint((centres - centres[0]) / slope)
    intercept = float(np.median(centres - k * slope))
    for _ in range(3):
        keep = np.abs(centres - (intercept + slope * k)) <= 0.005 * slope
        if np.unique(k[keep]).size < 2:
            break
        slope, intercept = np.polyfit(k[keep], centres[keep], 1)
    # Coordinates are printed decimals: the fit's last-bit noise is not information.
    return float(np.round(intercept, 9)), float(f"{slope:.9g}")


def _first_off(residual: np.ndarray) -> int:
    bad = np.flatnonzero(np.abs(residual) > _OFF_GRID_FRACTION)
    return -1 if bad.size == 0 else int(bad[0])


_MAX_COORD_UM = 1e9


def place_on_grid(
    x_um: ArrayLike,
    y_um: ArrayLike,
    *,
    step_x_um: float | None = None,
    step_y_um: float | None = None,
    grid: str | None = None,
    path: str | PathLike | None = None,
    line_of: Callable[[int], int] | None = None,
) -> GridPlacement:
    """Place points on a square or hexagonal grid from their coordinates (conventions §1).

    Parameters
    ----------
    x_um, y_um : array_like, shape (N,)
        Point positions along X_S and Y_S (any origin), µm, finite.
    step_x_um, step_y_um : float, optional
        Declared steps along X_S and Y_S; checked against the coordinates
        (1 %). Measured from the coordinates when omitted. On a hexagonal
        grid give the in-row neighbour distance for both.
    grid : {'square', 'hexagonal'}, optional
        Declared grid; checked against the coordinates. Recognised when omitted:
        hexagonal when every row's points lie on alternating half-step offsets
        and rows are step·√3/2 apart.
    path : optional
        The file, for error messages.
    line_of : callable, optional
        Row index → file line number, for error messages.

    Returns
    -------
    GridPlacement

    Raises
    ------
    InputError
        Zero or inconsistent steps, points off the grid by more than 1 % of the
        step, duplicate points (each with the first offending line), a declared
        grid the coordinates contradict.

    Examples
    --------
    >>> p = place_on_grid([0.0, 0.5, 0.25, 0.75], [0.0, 0.0, 0.433013, 0.433013])
    >>> p.grid, p.shape, p.row.tolist(), p.col.tolist()
    ('hexagonal', (2, 2), [0, 0, 1, 1], [0, 1, 0, 1])
    """
    from ..maps import row_pitch_um  # the one row-pitch formula; maps imports this module

    x = np.asarray(x_um, dtype=np.float64)
    y = np.asarray(y_um, dtype=np.float64)
    line_of = line_of or (lambda r: int(r) + 1)

    def refuse(message, row=None):
        pointer = None if row is None else f"line {line_of(row)}"
        raise InputError(message, path=path, pointer=pointer)

    # A map spans millimetres; coordinates beyond a kilometre are broken cells, and
    # far beyond they overflow the grid arithmetic (steps, indices).
    for name, v in (("x", x), ("y", y)):
        far = np.flatnonzero(~(np.abs(v) <= _MAX_COORD_UM))
        if far.size:
            refuse(
                f"Expected {name} coordinates within ±{_MAX_COORD_UM:g} µm, got {v[far[0]]!r}.",
                int(far[0]),
            )

    # A declared step separates lines at once: x lines are a step (square) or half a
    # step (hexagonal) apart, rows a step or step·√3/2, so these cuts suit both grids.
    x0, sx_all = _spacing(x, None if step_x_um is None else 0.25 * step_x_um)
    y0, sy = _spacing(y, None if step_y_um is None else 0.4 * step_y_um)
    # Without one, a single row (or column) whose points scatter a little would look
    # like many lines a hair apart: the other axis' spacing sets the scale instead.
    if step_y_um is None and 0 < sy < 0.05 * sx_all:
        y0, sy = _spacing(y, 0.5 * sx_all)
    if step_x_um is None and 0 < sx_all < 0.05 * sy:
        x0, sx_all = _spacing(x, 0.25 * sy)
    # Half-step index of every point along x, row index along y.
    hex_like = False
    if sy > 0 and sx_all > 0:
        i = np.rint((y - y0) / sy).astype(np.int64)
        k = np.rint((x - x0) / sx_all).astype(np.int64)
        parity = (k + i) % 2
        ratio = sy / (2.0 * sx_all)
        hex_like = (
            bool(np.all(parity == parity[0]))
            and abs(ratio / row_pitch_um("hexagonal", 1.0) - 1.0) < 0.01
        )
    detected = "hexagonal" if hex_like else "square"
    if grid is not None and grid != detected:
        refuse(
            f"Expected a {grid} grid as declared, got coordinates that form a {detected} "
            "grid; declare 'grid' to match the file."
        )

    if detected == "hexagonal":
        step = 2.0 * sx_all
        for declared in {step_x_um, step_y_um} - {None}:
            if abs(declared / step - 1.0) > _OFF_GRID_FRACTION:
                refuse(
                    f"Expected the points to be {declared:g} µm apart as declared, got a "
                    f"hexagonal grid with neighbours {step:.6g} µm apart (inconsistent step)."
                )
            step = float(declared)
        pitch = row_pitch_um("hexagonal", step)
        # Even rows must hold the unshifted points (conventions §1); when the top row
        # is a shifted one, the grid origin moves half a step left.
        shift = 0.5 * step if parity[0] == 1 else 0.0
        xg = x0 - shift
        u = (y - y0) / pitch
        row = np.rint(u).astype(np.int64)
        v = (x - xg) / step - 0.5 * (row % 2)
        col = np.rint(v).astype(np.int64)
        sx = sy_out = step
    else:
        sx, pitch = sx_all, sy
        for name, declared, measured in (("x", step_x_um, sx), ("y", step_y_um, sy)):
            if declared is None:
                continue
            if measured > 0 and abs(declared / measured - 1.0) > _OFF_GRID_FRACTION:
                refuse(
                    f"Expected points {declared:g} µm apart along {name} as declared, got "
                    f"{measured:.6g} µm (inconsistent step)."
                )
        sx = float(step_x_um) if step_x_um is not None else sx
        pitch = float(step_y_um) if step_y_um is not None else pitch
        if sx == 0 and pitch == 0:
            refuse(
                "Expected a map of more than one point position, got a single position; "
                "declare 'step_um'."
            )
        # A single row or column has no spacing of its own: take the other axis' step.
        sx = sx if sx > 0 else pitch
        pitch = pitch if pitch > 0 else sx
        xg = x0
        u = (y - y0) / pitch
        row = np.rint(u).astype(np.int64)
        v = (x - xg) / sx
        col = np.rint(v).astype(np.int64)
        sy_out = pitch

    # The origin from line centres can sit a fraction of the tolerance off; the median
    # offset of the points themselves (a fixed subsample: it only moves the origin)
    # centres the grid on them, so points within 1 % of their grid point pass.
    sub = slice(None, None, max(1, u.size // 65536))
    du, dv = float(np.median((u - row)[sub])), float(np.median((v - col)[sub]))
    row_c, col_c = np.rint(u - du).astype(np.int64), np.rint(v - dv).astype(np.int64)
    # On a tiny map of badly placed points the median could push a point past row or
    # column 0; the unrefined origin is kept then, and the check below names the point.
    if row_c.min() >= 0 and col_c.min() >= 0:
        y0, xg = y0 + du * pitch, xg + dv * sx
        u, v, row, col = u - du, v - dv, row_c, col_c

    for name, frac, step_name in (("y", u - row, pitch), ("x", v - col, sx)):
        first = _first_off(frac)
        if first >= 0:
            refuse(
                f"Expected {name} on the grid (steps of {step_name:.6g} µm) within 1 % of a "
                f"step, got {frac[first]:+.3f} steps off (irregular spacing).",
                first,
            )
    shape = (int(row.max()) + 1, int(col.max()) + 1)
    linear = row * shape[1] + col
    # Counting points per grid position is linear time; only a map that has a
    # duplicate pays for the sort that finds the first one in file order.
    if np.bincount(linear, minlength=shape[0] * shape[1]).max() > 1:
        order = np.argsort(linear, kind="stable")
        dup = np.flatnonzero(linear[order][1:] == linear[order][:-1])
        second = order[1:][dup]
        first_dup = int(second.min())
        refuse(
            f"Expected one point per grid position, got a duplicate of the point at "
            f"x = {x[first_dup]:.6g}, y = {y[first_dup]:.6g} µm.",
            first_dup,
        )
    return GridPlacement(
        row=row,
        col=col,
        shape=shape,
        origin_sample_um=(float(xg), float(y0)),
        step_x_um=float(sx),
        step_y_um=float(sy_out),
        grid=detected,
    )
