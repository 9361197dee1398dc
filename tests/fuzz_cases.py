"""Hostile inputs for the command line: a base case and its mutations, by class.

Shared by tests/test_fuzz.py (bounded, through hypothesis) and scripts/fuzz_inputs.py
(the long run by hand). A case is a folder holding a job, its maps and a finished run
folder; a mutation changes one of them. What every case must give: exit 0 or 2, never
1; on 2 one line on stderr; the inputs' bytes unchanged.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np

from inclination.io.writers import write_csv, write_npz
from inclination.maps import OrientationMap

PHASES = [
    {
        "id": 1,
        "name": "Cu",
        "laue": "m-3m",
        "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
    }
]
AXES = {"x": "right", "y": "down"}

# Values that replace a JSON number: outside the standard, outside a float, odd types.
BAD_NUMBERS = (
    "NaN",
    "Infinity",
    "-Infinity",
    "1e400",
    "1" + "0" * 400,
    "9" * 5000,
    "-1",
    "0",
    "1e308",
    "-1e308",
    "1e-320",
    "true",
    '"7"',
    "null",
    "[]",
    "{}",
    "0.5",
    "1e20",
)
# Values that replace a cell of a map table.
BAD_CELLS = ("1e308", "-1e308", "1e20", "inf", "-inf", "nan", "1e-320", "x", "", "0x10", "1e400")
SPECIAL_FILES = ("fifo", "/dev/zero", "/dev/urandom", "folder", "empty", "binary", "dangling")


def _two_grain_map(h=32, w=32):
    euler = np.zeros((h, w, 3))
    euler[:, w // 2 :, 0] = 40.0
    euler[: h // 2, : w // 2, 1] = 35.0
    return OrientationMap.from_euler_deg(euler, np.ones((h, w), int), grid="square", step_x_um=1.0)


def base_job(map_name="m.csv", fmt="csv") -> dict:
    """A job over the case's map; stage up to planes is fast on it."""
    return {
        "phases": PHASES,
        "map": {
            "path": map_name,
            "format": fmt,
            "step_um": 1,
            "grid": "square",
            "angles": "deg",
            "axes": AXES,
        },
        "grains": {"min_pixels": 2},
        "planes": {"floor_deg": 1, "max_tolerance_deg": 5},
    }


def make_case(folder: Path) -> Path:
    """Write job.json, job-npz.json, m.csv, m.npz and a finished run folder ``run/``."""
    from inclination.cli import main

    folder.mkdir(parents=True, exist_ok=True)
    omap = _two_grain_map()
    write_csv(folder / "m.csv", omap)
    write_npz(folder / "m.npz", omap)
    (folder / "job.json").write_text(json.dumps(base_job(), indent=1))
    (folder / "job-npz.json").write_text(json.dumps(base_job("m.npz", "npz"), indent=1))
    status = main(["planes", str(folder / "job.json"), "--out", str(folder / "run"), "--quiet"])
    assert status == 0, status
    return folder


def number_pointers(doc, prefix=()):
    """Paths (tuples) of every number in a JSON document, in document order."""
    out = []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out += number_pointers(v, (*prefix, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            out += number_pointers(v, (*prefix, i))
    elif isinstance(doc, int | float) and not isinstance(doc, bool):
        out.append(prefix)
    return out


def value_pointers(doc, prefix=()):
    """Paths of every leaf value (numbers, strings, booleans, null)."""
    out = []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out += value_pointers(v, (*prefix, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            out += value_pointers(v, (*prefix, i))
    else:
        out.append(prefix)
    return out


_MARK = "\u0000MARK\u0000"


def replace_at(doc, pointer, raw: str) -> str:
    """JSON text of ``doc`` with the value at ``pointer`` replaced by the raw text ``raw``."""
    doc = json.loads(json.dumps(doc))
    target = doc
    for key in pointer[:-1]:
        target = target[key]
    target[pointer[-1]] = _MARK
    return json.dumps(doc, indent=1).replace(json.dumps(_MARK), raw)


def set_at(doc, pointer, value) -> dict:
    doc = json.loads(json.dumps(doc))
    target = doc
    for key in pointer[:-1]:
        target = target.setdefault(key, {}) if isinstance(target, dict) else target[key]
    target[pointer[-1]] = value
    return doc


def deep_nesting(depth=100_000) -> str:
    return '{"phases": ' + "[" * depth + "]" * depth + "}"


def make_special(path: Path, kind: str) -> None:
    """Put a special file (or a stand-in) at ``path``."""
    if path.exists() or path.is_symlink():
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path)
        else:
            path.unlink()
    if kind == "fifo":
        os.mkfifo(path)
    elif kind.startswith("/dev/"):
        path.symlink_to(kind)
    elif kind == "folder":
        path.mkdir()
    elif kind == "empty":
        path.write_bytes(b"")
    elif kind == "binary":
        path.write_bytes(bytes(range(256)) * 8)
    elif kind == "dangling":
        path.symlink_to(path.with_name("nowhere"))
    else:
        raise ValueError(kind)


def table_text_mutation(text: str, row: int, col: int, cell: str) -> str:
    """The CSV text with one cell (data row ``row``, column ``col``) replaced."""
    lines = text.split("\n")
    header = 0
    while lines[header].startswith("#"):
        header += 1
    i = header + 1 + row % max(len(lines) - header - 2, 1)
    cells = lines[i].split(",")
    cells[col % len(cells)] = cell
    lines[i] = ",".join(cells)
    return "\n".join(lines)


def scale_column(text: str, col: int, factor: float) -> str:
    lines = text.split("\n")
    header = 0
    while lines[header].startswith("#"):
        header += 1
    for i in range(header + 1, len(lines)):
        if not lines[i]:
            continue
        cells = lines[i].split(",")
        c = col % len(cells)
        try:
            cells[c] = repr(float(cells[c]) * factor)
        except ValueError:
            pass
        lines[i] = ",".join(cells)
    return "\n".join(lines)


def forged_npz(path: Path, kind: str) -> None:
    """An npz that lies: truncated, a bare .npy, a header promising 224 GiB, objects."""
    import io
    import zipfile

    if kind == "truncated":
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 2])
    elif kind == "npy":
        buf = io.BytesIO()
        np.save(buf, np.zeros((12, 12, 3)))
        path.write_bytes(buf.getvalue())
    elif kind == "huge-header":
        buf = io.BytesIO()
        np.lib.format.write_array_header_1_0(
            buf, {"descr": "<f8", "fortran_order": False, "shape": (120000, 83000, 3)}
        )
        with zipfile.ZipFile(path, "w") as zf:
            zf.writestr("euler_deg.npy", buf.getvalue() + b"\0" * 64)
            zf.writestr("phase.npy", buf.getvalue())
    elif kind == "extra-role":
        with np.load(path) as npz:
            arrays = {k: npz[k] for k in npz.files}
        arrays["euler_rad"] = np.zeros_like(arrays["euler_deg"])
        np.savez(path, **arrays)
    elif kind == "phase-inf":
        with np.load(path) as npz:
            arrays = {k: npz[k] for k in npz.files}
        phase = arrays["phase"].astype(float)
        phase[0, 0] = np.inf
        arrays["phase"] = phase
        np.savez(path, **arrays)
    elif kind == "euler-huge":
        with np.load(path) as npz:
            arrays = {k: npz[k] for k in npz.files}
        e = arrays["euler_deg"].astype(float)
        e[0, 0, 0] = 1e308
        e[1, 1, 1] = 1e20
        arrays["euler_deg"] = e
        np.savez(path, **arrays)
    elif kind == "csv":
        path.write_text("x_um,y_um\n0,0\n")
    else:
        raise ValueError(kind)


NPZ_KINDS = ("truncated", "npy", "huge-header", "extra-role", "phase-inf", "euler-huge", "csv")


def snapshot(folder: Path) -> dict:
    """Bytes of every regular file under ``folder`` (special files skipped)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_symlink() or not p.is_file():
            continue
        out[str(p.relative_to(folder))] = p.read_bytes()
    return out
