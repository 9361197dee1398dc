"""Input limits in one place: which files are read, how big, and what JSON may hold.

Every reader of the package's inputs goes through here before parsing, so a hostile or
broken input is refused with one :class:`~inclination.errors.InputError` instead of a hang
(a FIFO, ``/dev/zero``), unbounded memory (a huge file, an npz header promising
hundreds of GiB) or an internal error deep in a parser (``NaN`` literals, integers beyond
any float, nesting thousands of levels deep).
"""

from __future__ import annotations

import json
import math
import os
import stat
from pathlib import Path

from ..errors import InputError

__all__ = [
    "MAX_BYTES",
    "MAX_JSON_DEPTH",
    "check_regular_file",
    "loads_json",
    "read_bytes",
    "read_json",
    "schema_validator",
]

# Bytes allowed per kind of file. A job or sidecar is a hand-written page; a run folder's
# tables grow with the boundaries (a 16-million-point map gives some 10^5 rows); a map
# may be a few GiB of text.
MAX_BYTES = {
    "job": 8 << 20,
    "sidecar": 1 << 20,
    "run": 1 << 30,
    "map": 64 << 30,
}
# Deeper than any document the schemas describe (the job nests 5 levels).
MAX_JSON_DEPTH = 64
# A float holds about 308 decimal digits; a longer integer literal is refused before
# Python converts it (it would raise past its own 4300-digit limit, or overflow later).
_MAX_INT_DIGITS = 308


def check_regular_file(path, *, kind: str, path_for_errors=None, pointer=None) -> int:
    """Refuse anything but an existing regular file within the size limit of ``kind``.

    Parameters
    ----------
    path : str or Path
        The file (symbolic links are followed).
    kind : {'job', 'sidecar', 'run', 'map'}
        Which size limit applies (:data:`MAX_BYTES`).
    path_for_errors, pointer : optional
        Where the error points (default: the file itself).

    Returns
    -------
    int
        The file's size in bytes.

    Raises
    ------
    InputError
        No such file, not a regular file (a FIFO, a device, a folder) or too big.

    Examples
    --------
    >>> check_regular_file("/dev/null", kind="job")
    Traceback (most recent call last):
    ...
    inclination.errors.InputError: /dev/null: Expected a regular file, got a character device.
    """
    where = path if path_for_errors is None else path_for_errors
    try:
        st = os.stat(path)
    except FileNotFoundError:
        noun = "job file" if kind == "job" else "file"
        at = "this path" if path_for_errors is None else repr(str(path))
        raise InputError(
            f"Expected an existing {noun}, got none at {at}.", path=where, pointer=pointer
        ) from None
    except OSError as exc:
        raise InputError(
            f"Expected a readable file, got {exc.strerror} at {str(path)!r}.",
            path=where,
            pointer=pointer,
        ) from None
    if not stat.S_ISREG(st.st_mode):
        what = (
            "a folder"
            if stat.S_ISDIR(st.st_mode)
            else "a FIFO"
            if stat.S_ISFIFO(st.st_mode)
            else "a character device"
            if stat.S_ISCHR(st.st_mode)
            else "a block device"
            if stat.S_ISBLK(st.st_mode)
            else "a socket"
        )
        msg = f"Expected a regular file, got {what}."
        if path_for_errors is not None:
            msg = f"Expected a regular file at {str(path)!r}, got {what}."
        raise InputError(msg, path=where, pointer=pointer)
    limit = MAX_BYTES[kind]
    if st.st_size > limit:
        raise InputError(
            f"Expected a {kind} file of at most {limit} bytes, got {st.st_size} bytes.",
            path=where,
            pointer=pointer,
        )
    return int(st.st_size)


def read_bytes(path, *, kind: str) -> bytes:
    """The bytes of a regular file within the limit of ``kind`` (see :func:`check_regular_file`).

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "a.json"
    >>> _ = p.write_text("{}")
    >>> read_bytes(p, kind="job")
    b'{}'
    """
    size = check_regular_file(path, kind=kind)
    limit = MAX_BYTES[kind]
    try:
        with open(path, "rb") as fh:
            # One byte more than the file held when checked: growth shows, and no
            # buffer of the whole limit is allocated.
            data = fh.read(size + 1)
    except OSError as exc:
        raise InputError(f"Expected a readable file, got {exc.strerror}.", path=path) from None
    if len(data) > min(size, limit):  # grew after the check
        raise InputError(f"Expected a {kind} file of at most {limit} bytes, got more.", path=path)
    return data


class _Refused(ValueError):
    pass


def _refuse_constant(name):
    raise _Refused(f"Expected a JSON number, got the non-standard literal {name}")


def _parse_int(text):
    digits = len(text.lstrip("-"))
    if digits > _MAX_INT_DIGITS:
        raise _Refused(f"Expected a number a float can hold, got an integer of {digits} digits")
    value = int(text)
    if abs(value) >= 2**63:
        # Counts, ids and seeds end up in 64-bit integers; beyond, they overflow there.
        raise _Refused(f"Expected an integer within ±2^63, got one of {digits} digits")
    return value


def _parse_float(text):
    value = float(text)
    if not math.isfinite(value):
        raise _Refused(f"Expected a finite number, got {text[:40]!r}")
    return value


def _depth(doc) -> int:
    deepest, stack = 0, [(doc, 1)]
    while stack:
        value, d = stack.pop()
        if isinstance(value, dict | list):
            deepest = max(deepest, d)
            if d > MAX_JSON_DEPTH:
                return d
            items = value.values() if isinstance(value, dict) else value
            stack.extend((v, d + 1) for v in items)
    return deepest


def loads_json(text: str, *, path=None):
    """Parse standard JSON only: no NaN/Infinity, numbers a float can hold, bounded nesting.

    Raises
    ------
    InputError
        The text is not JSON, uses a non-standard literal, holds an integer a float
        cannot hold or nests deeper than :data:`MAX_JSON_DEPTH`.

    Examples
    --------
    >>> loads_json('{"a": [1, 2.5]}')
    {'a': [1, 2.5]}
    >>> loads_json('{"a": NaN}', path="j")
    Traceback (most recent call last):
    ...
    inclination.errors.InputError: j: Expected a JSON number, got the non-standard literal NaN.
    """
    try:
        doc = json.loads(
            text,
            parse_constant=_refuse_constant,
            parse_int=_parse_int,
            parse_float=_parse_float,
        )
    except _Refused as exc:
        raise InputError(f"{exc}.", path=path) from None
    except json.JSONDecodeError as exc:
        raise InputError(
            f"Expected valid JSON, got {exc.msg}.",
            path=path,
            pointer=f"line {exc.lineno}, column {exc.colno}",
        ) from None
    except RecursionError:
        raise InputError(
            f"Expected JSON nested at most {MAX_JSON_DEPTH} levels deep, got deeper.", path=path
        ) from None
    if _depth(doc) > MAX_JSON_DEPTH:
        raise InputError(
            f"Expected JSON nested at most {MAX_JSON_DEPTH} levels deep, got deeper.", path=path
        )
    return doc


def _strict_integer(_checker, value) -> bool:
    # JSON Schema counts 1e308 (a float with no fraction) as an integer; the code that
    # uses an integer field cannot, so only integer literals are integers here.
    return isinstance(value, int) and not isinstance(value, bool)


def schema_validator(schema: dict):
    """A JSON Schema (2020-12) validator whose ``integer`` means an integer literal.

    Examples
    --------
    >>> v = schema_validator({"type": "integer"})
    >>> v.is_valid(3), v.is_valid(3.0), v.is_valid(1e308)
    (True, False, False)
    """
    from jsonschema import Draft202012Validator, validators

    checker = Draft202012Validator.TYPE_CHECKER.redefine("integer", _strict_integer)
    cls = validators.extend(Draft202012Validator, type_checker=checker)
    return cls(schema)


def read_json(path, *, kind: str):
    """Read a UTF-8 JSON file of ``kind`` with the limits above."""
    data = read_bytes(path, kind=kind)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(
            f"Expected UTF-8 text, got a byte that is not (at offset {exc.start}).", path=path
        ) from None
    if not text.strip():
        raise InputError("Expected a JSON object, got an empty file.", path=path)
    return loads_json(text, path=Path(path))
