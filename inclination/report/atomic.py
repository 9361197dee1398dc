"""Atomic writes: a file appears whole or not at all; an output folder likewise.

A crashed or interrupted run must never leave a half-written table that looks
complete, and must never destroy the results of an earlier run.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = [
    "json_ready",
    "staged_output_dir",
    "write_bytes_atomic",
    "write_json_atomic",
    "write_text_atomic",
]


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        # mkstemp makes the file private (0600); results are ordinary data files.
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return path


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 text atomically (see :func:`write_bytes_atomic`)."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def _json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"Expected a JSON-serialisable value, got {type(value).__name__}.")


def json_ready(value: object) -> object:
    """Replace NaN and infinities by None: JSON has no NaN, and absent is not a number.

    Dicts, lists, tuples and arrays are converted all the way down; keys become strings.

    Examples
    --------
    >>> json_ready({"a": np.array([1.5, np.nan]), 2: (np.float32(np.inf), "x")})
    {'a': [1.5, None], '2': [None, 'x']}
    """
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_ready(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def write_json_atomic(path: str | os.PathLike, document: object) -> Path:
    """Write a JSON document atomically; NaN becomes null."""
    text = json.dumps(json_ready(document), indent=2, default=_json_default, allow_nan=False)
    return write_text_atomic(path, text + "\n")


@contextlib.contextmanager
def staged_output_dir(out_dir: str | os.PathLike, *, overwrite: bool = False) -> Iterator[Path]:
    """Yield a fresh staging folder that replaces ``out_dir`` only when the block succeeds.

    An existing, non-empty ``out_dir`` is refused unless ``overwrite`` is true;
    even then it is removed only after the new results are complete.

    Raises
    ------
    InputError
        When ``out_dir`` exists, is not empty and ``overwrite`` is false, or is a file.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError(
            "Expected the output path to be a folder or not to exist, got a file.", path=out
        )
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise InputError(
            "Expected an empty or new output folder, got one that holds files "
            "(pass --overwrite to replace it).",
            path=out,
        )
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
    try:
        yield stage
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    backup = None
    if out.exists():
        backup = out.with_name(f".{out.name}.old-{os.getpid()}")
        os.replace(out, backup)
    os.replace(stage, out)
    if backup is not None:
        shutil.rmtree(backup, ignore_errors=True)
