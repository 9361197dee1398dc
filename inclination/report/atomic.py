"""Atomic writes: a file appears whole or not at all; an output folder likewise.

A crashed or interrupted run must never leave a half-written table that looks
complete, and must never destroy the results of an earlier run.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = [
    "RawJSON",
    "dumps_json",
    "json_ready",
    "staged_output_dir",
    "write_bytes_atomic",
    "write_chunks_atomic",
    "write_json_atomic",
    "write_text_atomic",
]


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    return write_chunks_atomic(path, (data,))


def write_chunks_atomic(path: str | os.PathLike, chunks: Iterable[bytes]) -> Path:
    """Write byte blocks to ``path`` atomically, one block in memory at a time."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            for chunk in chunks:
                fh.write(chunk)
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
        # Numbers and text in bulk: a table column of 10⁵ values is not walked value by value.
        if value.dtype.kind in "biuU":
            return value.tolist()
        if value.dtype.kind == "f":
            bad = ~np.isfinite(value)
            if not bad.any():
                return value.tolist()
            cells = value.astype(object)
            cells[bad] = None
            return cells.tolist()
        return json_ready(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


@dataclass(frozen=True)
class RawJSON:
    """JSON text already encoded, written as it is by :func:`write_json_atomic`.

    For a column encoded in bulk (:func:`inclination.report.tables.json_number_array`).

    Examples
    --------
    >>> print(dumps_json({"a": RawJSON("[1.5, null]")}))
    {
      "a": [1.5, null]
    }
    """

    text: str


#: Longest string of a list written on one line: a column of codes is, a list of notes is not.
_SHORT_TEXT = 32


def _is_column(value: list) -> bool:
    return all(
        v is None
        or isinstance(v, int | float | np.number | np.bool_)
        or (isinstance(v, str) and len(v) <= _SHORT_TEXT)
        for v in value
    )


def _pieces(value, depth: int) -> Iterator[str]:
    """``json.dumps(indent=2)`` of ``value`` in pieces, a column on one line."""
    if isinstance(value, RawJSON):
        yield value.text
        return
    ready = isinstance(value, np.ndarray)
    if ready:
        if value.ndim == 1 and value.dtype.kind in "biufU":
            # A column of numbers or of text: one line, and no test value by value.
            yield json.dumps(json_ready(value), allow_nan=False)
            return
        if value.ndim == 1 and value.dtype.kind == "O":
            items = value.tolist()
            if all(type(v) is str for v in items):  # text held as objects: a column too
                yield json.dumps(items)
                return
        value = json_ready(value)  # numbers in bulk, before the column test below
    if isinstance(value, dict) and value:
        inner = "\n" + "  " * (depth + 1)
        yield "{"
        for k, (key, item) in enumerate(value.items()):
            yield ("," if k else "") + inner + json.dumps(str(key)) + ": "
            yield from _pieces(item, depth + 1)
        yield "\n" + "  " * depth + "}"
        return
    if isinstance(value, list | tuple):
        value = list(value)
        if value and not _is_column(value):
            inner = "\n" + "  " * (depth + 1)
            yield "["
            for k, item in enumerate(value):
                yield ("," if k else "") + inner
                yield from _pieces(item, depth + 1)
            yield "\n" + "  " * depth + "]"
            return
    # A leaf, an empty container or a column: the C encoder, on one line.
    yield json.dumps(value if ready else json_ready(value), default=_json_default, allow_nan=False)


def dumps_json(document: object) -> str:
    """A JSON document as the run's files hold it: indented, a column on one line.

    NaN and infinities become ``null`` (:func:`json_ready`). Indented as
    ``json.dumps(indent=2)`` indents, except that a list of numbers, booleans, nulls and
    short strings (a table's column, a vector, a list of codes) is one line: a long
    column is then written by the C encoder at its speed, not value by value by the
    indenting one, and a person reads a vector as one. Lists holding a longer string
    (notes, messages) keep one item per line.

    Examples
    --------
    >>> notes = ["The second map was registered on the grain structure."]
    >>> print(dumps_json({"xy": np.array([1.5, np.nan]), "ok": [True, "yes"], "notes": notes}))
    {
      "xy": [1.5, null],
      "ok": [true, "yes"],
      "notes": [
        "The second map was registered on the grain structure."
      ]
    }
    """
    return "".join(_pieces(document, 0))


def _blocks(pieces: Iterable[str], size: int = 1 << 20) -> Iterator[bytes]:
    """UTF-8 blocks of about ``size`` characters from a stream of text pieces."""
    held, n = [], 0
    for piece in pieces:
        held.append(piece)
        n += len(piece)
        if n >= size:
            yield "".join(held).encode("utf-8")
            held, n = [], 0
    held.append("\n")
    yield "".join(held).encode("utf-8")


def write_json_atomic(path: str | os.PathLike, document: object) -> Path:
    """Write a JSON document atomically (:func:`dumps_json`), streamed a column at a time."""
    return write_chunks_atomic(path, _blocks(_pieces(document, 0)))


# ----------------------------------------------------------------------------- output folders
#
# The protocol (docs/architecture.md, "Output folders"):
# 1. claim: a lock file ``.NAME.lock`` beside ``NAME``, created with O_EXCL, names the run
#    (pid, state); a second run into the same name finds it and stops. A new ``NAME`` is
#    created empty at once, so the name is visibly taken.
# 2. stage: results are written into ``.NAME.PID.partial`` beside ``NAME``.
# 3. swap: a new (empty) ``NAME`` is replaced by rename(2), which fails if anything was put
#    into it meanwhile; an existing ``NAME`` (with ``overwrite``) is exchanged with the stage
#    in one step (renameat2 RENAME_EXCHANGE), so ``NAME`` holds the old or the new results at
#    every instant. Where the exchange is not supported, two renames are journalled in the
#    lock file, and the next run completes or undoes them.
# 4. clean up: the replaced results are deleted only if nothing was added to them during the
#    run; the lock is removed on every exit path.

_LOCK_SUFFIX = ".lock"
_NAME_KEEP = 120  # chars of NAME kept in helper names: NAME may be up to 255 chars itself
_RENAME_EXCHANGE = 2  # linux/fs.h
# Failures of the output location itself (full disk, read-only, quota, a name too long):
# bad input to the run, not a fault of the tool.
_WRITE_ERRNOS = frozenset(
    getattr(errno, n)
    for n in ("ENOSPC", "EDQUOT", "EROFS", "EACCES", "EPERM", "EFBIG", "ENAMETOOLONG", "EIO")
    if hasattr(errno, n)
)


def _helper_name(out: Path, kind: str, pid: int | None = None) -> Path:
    stem = out.name[:_NAME_KEEP]
    if kind == "lock":
        return out.with_name(f".{stem}{_LOCK_SUFFIX}")
    if kind == "partial":
        return out.with_name(f".{stem}.{pid}.partial")
    return out.with_name(f".{stem}.old-{pid}")


def _exchange(a: Path, b: Path) -> None:
    """Swap two paths in one step (Linux renameat2); OSError where unsupported."""
    import ctypes

    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        raise OSError(errno.ENOSYS, "renameat2 is not available") from None
    at_fdcwd = -100
    rc = renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), _RENAME_EXCHANGE)
    if rc != 0:
        code = ctypes.get_errno()
        raise OSError(code, os.strerror(code))


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # alive, but someone else's
        return True
    return True


def _write_lock_state(lock: Path, state: dict) -> None:
    # Rewritten in place (never replaced) so the O_EXCL claim keeps its meaning.
    with open(lock, "r+", encoding="utf-8") as fh:
        fh.truncate(0)
        fh.write(json.dumps(state))
        fh.flush()
        os.fsync(fh.fileno())


def _read_lock_state(lock: Path) -> dict:
    try:
        with open(lock, encoding="utf-8") as fh:
            state = json.loads(fh.read(4096) or "{}")
    except (OSError, ValueError):
        return {}
    return state if isinstance(state, dict) else {}


def _claim_lock(out: Path) -> Path:
    """Create the lock beside ``out``; take over a stale one left by a killed run."""
    lock = _helper_name(out, "lock")
    for _ in range(3):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
        except FileExistsError:
            pid = _read_lock_state(lock).get("pid")
            if isinstance(pid, int) and _pid_alive(pid) and pid != os.getpid():
                raise InputError(
                    f"Expected no other run writing this output folder, got one (process {pid}"
                    f", lock {lock.name}); wait for it or choose another --out.",
                    path=out,
                ) from None
            # Stale: move it aside under a unique name (only one taker's rename succeeds),
            # then recover what its run left before claiming afresh.
            aside = lock.with_name(f"{lock.name}.stale-{os.getpid()}")
            try:
                os.rename(lock, aside)
            except FileNotFoundError:
                continue
            try:
                _STALE[out] = _read_lock_state(aside)
            finally:
                with contextlib.suppress(OSError):
                    os.unlink(aside)
            continue
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(json.dumps({"pid": os.getpid(), "state": "computing"}))
        return lock
    raise InputError(
        "Expected to claim the output folder, got a lock that keeps changing.", path=out
    )


_STALE: dict = {}  # out -> lock state of a killed run, handed from _claim_lock to _recover


def _recover(out: Path, notes: list) -> None:
    """Complete or undo what killed runs left beside ``out``; report what is kept."""
    state = _STALE.pop(out, {})
    if state.get("state") == "swapping":
        stage = out.with_name(state.get("stage", ""))
        backup = out.with_name(state.get("backup", ""))
        if not os.path.lexists(out) and stage.is_dir() and state.get("stage"):
            # Killed between the two renames: the new results are complete; finish.
            os.rename(stage, out)
            notes.append(
                f"note: completed the replacement of {out} that a killed run left half done; "
                f"the earlier results are kept at {backup.name}."
            )
        elif not os.path.lexists(out) and backup.is_dir() and state.get("backup"):
            os.rename(backup, out)
            notes.append(f"note: restored {out} from {backup.name}, left by a killed run.")
    stem = out.name[:_NAME_KEEP]
    removed = 0
    for entry in sorted(out.parent.glob(f".{glob_escape(stem)}.*")):
        name = entry.name[len(stem) + 2 :]
        if name.endswith(".partial"):
            pid = _pid_of(name[: -len(".partial")])
            if pid is not None and not _pid_alive(pid) and entry.is_dir():
                # An unfinished staging folder of a killed run: never results, always junk.
                shutil.rmtree(entry, ignore_errors=True)
                removed += 1
        elif name.startswith("old-"):
            pid = _pid_of(name[len("old-") :])
            if pid is not None and not _pid_alive(pid):
                if not os.path.lexists(out):
                    os.rename(entry, out)
                    notes.append(f"note: restored {out} from {entry.name}, left by a killed run.")
                else:
                    notes.append(
                        f"note: {entry} holds results a killed run replaced; "
                        f"delete it (rm -r) once you no longer need them."
                    )
    if removed:
        notes.append(
            f"note: removed {removed} unfinished staging folder(s) of killed runs beside {out}."
        )


def _pid_of(text: str) -> int | None:
    return int(text) if text.isdigit() else None


def glob_escape(text: str) -> str:
    """``text`` with glob's special characters made literal."""
    import glob

    return glob.escape(text)


def _input_folders(inputs) -> list[Path]:
    from ..io.chunked import is_store_address

    folders = []
    for p in inputs:
        # A store address (s3://…) is no folder of this machine: nothing to stay out of.
        if p is None or is_store_address(p):
            continue
        p = Path(p)
        with contextlib.suppress(OSError):
            folders.append(p.resolve().parent if not p.is_dir() else p.resolve())
    return folders


def _check_out_path(out: Path, inputs) -> None:
    if out.is_symlink():
        what = "a dangling symbolic link" if not out.exists() else "a symbolic link"
        raise InputError(f"Expected --out to be a folder or a new name, got {what}.", path=out)
    if out.exists() and not out.is_dir():
        raise InputError("Expected --out to be a folder or a new name, got a file.", path=out)
    resolved = out.resolve()
    for folder in _input_folders(inputs):
        if folder == resolved or resolved in folder.parents:
            raise InputError(
                f"Expected --out outside the inputs' folders, got a folder that holds "
                f"the input folder {str(folder)!r}; choose a new folder.",
                path=out,
            )


def _listing(folder: Path) -> set:
    try:
        return set(os.listdir(folder))
    except OSError:
        return set()


def _os_error(exc: OSError, out: Path) -> InputError:
    reason = exc.strerror or type(exc).__name__
    where = exc.filename if exc.filename is not None else out
    return InputError(
        f"Expected to write the output folder, got {reason!r} at {str(where)!r}; "
        "nothing was replaced.",
        path=out,
    )


@contextlib.contextmanager
def staged_output_dir(
    out_dir: str | os.PathLike, *, overwrite: bool = False, inputs=(), notes: list | None = None
) -> Iterator[Path]:
    """Yield a staging folder that replaces ``out_dir`` only when the block succeeds.

    ``out_dir`` is claimed at the start (a lock beside it; a new folder is created
    empty), so a second run into the same name stops at once. An existing,
    non-empty ``out_dir`` is refused unless ``overwrite`` is true; even then it is
    replaced in one step and deleted only if nothing was added to it meanwhile.

    Parameters
    ----------
    out_dir : str or Path
        The output folder.
    overwrite : bool, optional
        Replace an existing output folder.
    inputs : iterable of path, optional
        The run's input files: ``out_dir`` must not be or hold their folders.
    notes : list, optional
        Receives one-line notes (stale leftovers of killed runs, recoveries).

    Raises
    ------
    InputError
        ``out_dir`` is a file or a symbolic link, holds files without ``overwrite``,
        holds an input, is being written by another run, or cannot be written.

    Examples
    --------
    >>> import tempfile
    >>> out = Path(tempfile.mkdtemp()) / "run"
    >>> with staged_output_dir(out) as stage:
    ...     _ = (stage / "a.txt").write_text("new")
    >>> sorted(p.name for p in out.iterdir()), sorted(p.name for p in out.parent.iterdir())
    (['a.txt'], ['run'])
    """
    notes = [] if notes is None else notes
    out = Path(os.path.abspath(out_dir))
    try:
        _check_out_path(out, inputs)
    except OSError as exc:
        raise _os_error(exc, out) from None
    created = stage = lock = None
    try:
        try:
            out.parent.mkdir(parents=True, exist_ok=True)
            lock = _claim_lock(out)
            _recover(out, notes)
            _check_out_path(out, inputs)  # recovery may have restored a folder
            if not out.exists():
                os.mkdir(out, 0o777)
                created = out
            before = _listing(out)
            if before and not overwrite:
                raise InputError(
                    "Expected an empty or new output folder, got one that holds files "
                    "(pass --overwrite to replace it).",
                    path=out,
                )
            stage = _helper_name(out, "partial", os.getpid())
            os.mkdir(stage, 0o777)
        except OSError as exc:
            raise _os_error(exc, out) from None
        try:
            yield stage
        except OSError as exc:
            if exc.errno not in _WRITE_ERRNOS:
                raise
            raise _os_error(exc, out) from None
        try:
            _swap(stage, out, lock, before, notes)
        except OSError as exc:
            raise _os_error(exc, out) from None
        stage = created = None
    finally:
        if stage is not None:
            shutil.rmtree(stage, ignore_errors=True)
        if created is not None:
            with contextlib.suppress(OSError):
                os.rmdir(created)  # only if still empty: never removes another's file
        if lock is not None:
            with contextlib.suppress(OSError):
                os.unlink(lock)


def _swap(stage: Path, out: Path, lock: Path, before: set, notes: list) -> None:
    if not before:
        try:
            os.rename(stage, out)  # replaces an empty folder only
        except OSError as exc:
            if _listing(out):
                kept = out.with_name(f"{out.name[:_NAME_KEEP]}.new-{os.getpid()}")
                os.rename(stage, kept)
                raise InputError(
                    f"Expected the output folder to stay empty during the run, got "
                    f"{sorted(_listing(out))[:3]} put into it; the new results are at "
                    f"{str(kept)!r}.",
                    path=out,
                ) from None
            raise exc
        return
    try:
        _exchange(stage, out)
        replaced = stage
    except OSError:
        replaced = _helper_name(out, "old", os.getpid())
        _write_lock_state(
            lock,
            {"pid": os.getpid(), "state": "swapping", "stage": stage.name, "backup": replaced.name},
        )
        os.rename(out, replaced)
        os.rename(stage, out)
    added = _listing(replaced) - before
    if added:
        kept = out.with_name(f"{out.name[:_NAME_KEEP]}.replaced-{os.getpid()}")
        os.rename(replaced, kept)
        notes.append(
            f"note: {sorted(added)[:3]} appeared in {out} during the run; the replaced "
            f"folder is kept at {kept}."
        )
    else:
        shutil.rmtree(replaced, ignore_errors=True)
