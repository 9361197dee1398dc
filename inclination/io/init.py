"""A first job file from a map: what ``inclination init`` recognises and writes.

Owns :func:`propose_job` (read a map's header or arrays, recognise the columns or
datasets by their names and values, the angle unit, the grid kind and step, the
phases present) and :func:`write_job` (write the proposal atomically, never over
an existing file unless asked). What cannot be read from a map is left as a
placeholder string starting with :data:`inclination.io.job.PLACEHOLDER`, which
the job loader refuses by name: the declared axes and the data frame above all
(conventions §2), and the phases unless a preset is chosen. Every guess is
listed in the job's ``notes``, which the tool ignores.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np

from ..errors import InputError, SettingError
from .job import PLACEHOLDER
from .text import place_on_grid, read_table

__all__ = ["Proposal", "PHASE_PRESETS", "column_role", "propose_job", "write_job"]

#: Phase presets for ``--phase ID=NAME``. Lattice parameters are room-temperature handbook
#: values, from memory: nickel a = 3.524 Å (fcc), alpha-iron a = 2.8665 Å (bcc), alpha-titanium
#: a = 2.951 Å, c = 4.684 Å (hcp). Change them to your alloy's.
PHASE_PRESETS = {
    "fcc": {
        "name": "fcc (nickel lattice parameter)",
        "laue": "m-3m",
        "lattice": {"a": 3.524, "b": 3.524, "c": 3.524, "alpha": 90, "beta": 90, "gamma": 90},
    },
    "bcc": {
        "name": "bcc (alpha-iron lattice parameter)",
        "laue": "m-3m",
        "lattice": {"a": 2.8665, "b": 2.8665, "c": 2.8665, "alpha": 90, "beta": 90, "gamma": 90},
    },
    "hcp": {
        "name": "hcp (alpha-titanium lattice parameters)",
        "laue": "6/mmm",
        "lattice": {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120},
        "setting": (
            f"{PLACEHOLDER}: x_parallel_a or x_parallel_a_star, the Cartesian setting the "
            "map's orientations use (conventions §4)"
        ),
    },
}

_LAUE_WORDS = "-1, 2/m, mmm, 4/m, 4/mmm, -3, -3m, 6/m, 6/mmm, m-3, m-3m"

# Normalised header names (lower case, letters and digits only) of each role; a unit
# suffix (deg, rad, um, micron, mm) is removed first and kept as evidence.
_NAME_PATTERNS = {
    "x_um": r"(x|xpos|posx|xposition|xcoord|xcoordinate)",
    "y_um": r"(y|ypos|posy|yposition|ycoord|ycoordinate)",
    "phi1": r"(phi1|euler1|eul1|e1|angle1|ang1|varphi1|φ1)",
    "Phi": r"(phi|bigphi|capphi|euler2|eul2|e2|angle2|ang2|φ)",
    "phi2": r"(phi2|euler3|eul3|e3|angle3|ang3|varphi2|φ2)",
    "phase": r"(phase|phaseid|phaseindex|phasenumber|phasenr|ph)",
}
_UNIT_SUFFIX = re.compile(r"(deg|degrees|rad|radians|um|µm|microns?|mum)$")

# More indexed points than this with no angle above 2π: radians (conventions §3).
_UNIT_EVIDENCE_POINTS = 100


@dataclass(frozen=True)
class Proposal:
    """A proposed job and what went into it.

    Attributes
    ----------
    job : dict
        The job file's content, JSON-ready; undecided values are placeholders.
    recognised : tuple of str
        What was read from the map, one line each (also in ``job["notes"]``).
    to_decide : tuple of str
        What the user must still fill in, one line each.
    """

    job: dict
    recognised: tuple
    to_decide: tuple


def _normalise(name: str) -> tuple[str, str | None]:
    n = re.sub(r"[^0-9a-zµφ]", "", name.strip().lower())
    m = _UNIT_SUFFIX.search(n)
    unit = None
    if m and m.start() > 0:
        unit = {"d": "deg", "r": "rad"}.get(m.group(1)[0], "um")
        n = n[: m.start()]
    return n, unit


def column_role(name: str) -> str | None:
    """The role a header name is recognised as (a key of the job's map.columns), or None.

    Examples
    --------
    >>> [column_role(n) for n in ("X (µm)", "Euler2", "phi1_rad", "Phase", "CI")]
    ['x_um', 'Phi', 'phi1', 'phase', None]
    """
    return _role_of(name)[0]


def _role_of(name: str) -> tuple[str | None, str | None]:
    n, unit = _normalise(name)
    for role, pattern in _NAME_PATTERNS.items():
        if re.fullmatch(pattern, n):
            return role, unit
    return None, unit


def _unit_from_values(angles: np.ndarray, named: set, notes: list) -> str:
    finite = angles[np.isfinite(angles).all(axis=-1)]
    largest = float(np.max(np.abs(finite))) if finite.size else 0.0
    by_values = "deg" if largest > 2.0 * np.pi * 1.001 else "rad"
    if len(named) == 1:
        unit = named.pop()
        if unit != by_values and finite.shape[0] > _UNIT_EVIDENCE_POINTS:
            notes.append(
                f"The column names say {unit} but the largest angle is {largest:.4g}; "
                f"kept {unit} (the reader checks it)."
            )
        notes.append(f"Angles in {unit}: from the names (largest |angle| {largest:.4g}).")
        return unit
    if finite.shape[0] <= _UNIT_EVIDENCE_POINTS and by_values == "rad":
        notes.append(
            f"Angles guessed in rad from only {finite.shape[0]} indexed points "
            f"(none above 2π); check."
        )
    else:
        notes.append(
            f"Angles in {by_values}: guessed from the values (largest |angle| {largest:.4g})."
        )
    return by_values


def _sniff_delimiter(path: Path) -> tuple[str, str | None]:
    try:
        with open(path, "rb") as fh:
            head = fh.read(1 << 16)
    except OSError as exc:
        raise InputError(f"Expected a readable map file, got {exc.strerror}.", path=path) from None
    lines = [ln for ln in head.decode("utf-8", "replace").splitlines() if ln.strip()]
    header = next((ln for ln in lines if not ln.startswith("#")), "")
    for delim, fmt in (("\t", "tsv"), (",", "csv"), (";", "csv")):
        if delim in header:
            return fmt, delim
    return "text", None


def _table_proposal(path: Path, notes: list) -> tuple[dict, list]:
    fmt, delim = _sniff_delimiter(path)
    table = read_table(path, delimiter=delim, whitespace=delim is None)
    notes.append(
        f"Format {fmt}: the header splits at "
        f"{ {',': 'commas', chr(9): 'tabs', ';': 'semicolons'}.get(delim, 'spaces')} "
        f"into {len(table.header)} columns."
    )
    roles, units = {}, set()
    for k, name in enumerate(table.header):
        role, unit = _role_of(name)
        if role is not None and role not in roles:
            roles[role] = k
            if role in ("phi1", "Phi", "phi2") and unit in ("deg", "rad"):
                units.add(unit)
    v = table.values
    missing = [r for r in ("x_um", "y_um", "phi1", "Phi", "phi2") if r not in roles]
    if missing:
        raise InputError(
            f"Expected columns recognisable as {missing}, got {list(table.header)}; "
            "rename them (x, y, phi1, Phi, phi2, phase are recognised) or write the job's "
            "map.columns by hand.",
            path=path,
            pointer="header",
        )
    if "phase" not in roles:
        # A column of a few whole numbers >= 0 is read as the phase id.
        for k, _name in enumerate(table.header):
            if k in roles.values():
                continue
            col = v[:, k][np.isfinite(v[:, k])]
            if col.size and np.all(col == np.rint(col)) and col.min() >= 0:
                if np.unique(col).size <= 8:
                    roles["phase"] = k
                    notes.append(
                        f"Column {table.header[k]!r} taken as the phase id (a few whole "
                        "numbers); check."
                    )
                    break
    spec = {"path": str(path), "format": fmt}
    if delim == ";":
        spec["delimiter"] = ";"
    angles = v[:, [roles["phi1"], roles["Phi"], roles["phi2"]]]
    spec["angles"] = _unit_from_values(angles, units, notes)
    columns = {role: table.header[roles[role]] for role in _NAME_PATTERNS if role in roles}
    if "phase" not in roles:
        columns["phase"] = None
        notes.append("No phase column: every point with finite angles is phase 1.")
        phase_ids = [1]
    else:
        ph = v[:, roles["phase"]]
        phase_ids = sorted(int(p) for p in np.unique(ph[np.isfinite(ph)]) if p > 0)
    spec["columns"] = columns
    notes.append(
        "Columns: " + ", ".join(f"{role} = {name!r}" for role, name in columns.items()) + "."
    )
    quality = [n for k, n in enumerate(table.header) if k not in roles.values()]
    if quality:
        notes.append(f"Quality channels (every other column): {quality}.")
    finite = np.isfinite(v[:, roles["x_um"]]) & np.isfinite(v[:, roles["y_um"]])
    placement = place_on_grid(
        v[finite, roles["x_um"]], v[finite, roles["y_um"]], path=path, line_of=table.line_of
    )
    spec["grid"] = placement.grid
    if abs(placement.step_x_um / placement.step_y_um - 1.0) < 1e-6:
        spec["step_um"] = placement.step_x_um
        step_text = f"step {placement.step_x_um:g} µm"
    else:
        spec["step_x_um"], spec["step_y_um"] = placement.step_x_um, placement.step_y_um
        step_text = f"steps {placement.step_x_um:g} µm (x) and {placement.step_y_um:g} µm (y)"
    notes.append(
        f"Grid {placement.grid}, {step_text}, {placement.shape[0]} × {placement.shape[1]} "
        "points: measured from the coordinates."
    )
    return spec, phase_ids


def _array_phase_ids(phase: np.ndarray) -> list:
    finite = phase[np.isfinite(phase)] if phase.dtype.kind == "f" else phase.ravel()
    return sorted(int(p) for p in np.unique(finite) if p > 0 and p == int(p))


def _unplaced_grid(spec: dict, shape: tuple, notes: list, decide: list) -> None:
    spec["grid"] = "square"
    spec["step_um"] = f"{PLACEHOLDER}: grid step in µm (arrays carry no coordinates)"
    notes.append(
        f"Grid square: guessed ({shape[0]} × {shape[1]} arrays carry no coordinates); "
        "set 'hexagonal' if the map was scanned on one."
    )
    decide.append("map.step_um: the grid step in µm (the arrays do not hold it).")


def _npz_proposal(path: Path, notes: list, decide: list) -> tuple[dict, list]:
    try:
        with np.load(path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (OSError, ValueError, EOFError) as exc:
        raise InputError(f"Expected a NumPy .npz archive, got {exc}.", path=path) from None
    named = [k for k in ("euler_deg", "euler_rad") if k in arrays]
    if len(named) != 1 or "phase" not in arrays:
        raise InputError(
            "Expected arrays 'euler_deg' or 'euler_rad' (H, W, 3) and 'phase' (H, W), "
            f"got arrays {sorted(arrays)}.",
            path=path,
        )
    euler, phase = arrays[named[0]], arrays["phase"]
    spec = {"path": str(path), "format": "npz"}
    spec["angles"] = _unit_from_values(euler, {named[0][-3:]}, notes)
    quality = sorted(k for k in arrays if k not in (named[0], "phase"))
    if quality:
        notes.append(f"Quality arrays: {quality}.")
    _unplaced_grid(spec, phase.shape, notes, decide)
    return spec, _array_phase_ids(phase)


def _tiff_proposal(path: Path, notes: list, decide: list) -> tuple[dict, list]:
    from .arrays import read_sidecar, read_tiff_arrays

    sidecar = Path(str(path) + ".json")
    side = read_sidecar(sidecar)
    unit = side.get("angles")
    euler, phase, quality = read_tiff_arrays(path, sidecar_path=sidecar, angles=unit or "deg")
    spec = {"path": str(path), "format": "tiff"}
    spec["angles"] = _unit_from_values(euler, {unit} if unit else set(), notes)
    if quality:
        notes.append(f"Quality channels (sidecar): {sorted(quality)}.")
    _unplaced_grid(spec, phase.shape, notes, decide)
    return spec, _array_phase_ids(phase)


def _pick_dataset(candidates, words):
    for word in words:
        for name in candidates:
            if word in name.rsplit("/", 1)[-1].lower():
                return name
    return candidates[0] if candidates else None


def _hdf5_proposal(path: Path, notes: list, decide: list) -> tuple[dict, list]:
    from .hdf5 import list_hdf5_datasets, read_hdf5_arrays

    found = list_hdf5_datasets(path)
    triples = [n for n, (s, _) in found.items() if len(s) == 3 and s[-1] == 3]
    euler_name = _pick_dataset(triples, ("euler", "angle", "orient"))
    if euler_name is None:
        raise InputError(
            f"Expected a dataset of shape (H, W, 3) for the Euler angles, got datasets "
            f"{ {n: s for n, (s, _) in found.items()} }.",
            path=path,
        )
    shape = found[euler_name][0][:2]
    planes = [n for n, (s, _) in found.items() if s == shape]
    phase_name = _pick_dataset(
        [n for n in planes if "phase" in n.lower()] or [n for n in planes if found[n][1] in "iu"],
        ("phase",),
    )
    if phase_name is None:
        raise InputError(
            f"Expected a dataset of shape {shape} for the phase ids, got none among {planes}.",
            path=path,
        )
    datasets = {"euler": euler_name, "phase": phase_name}
    leaf = {n: n.rsplit("/", 1)[-1].lower() for n in planes}
    for axis in ("x", "y"):
        hit = [n for n in planes if _role_of(leaf[n])[0] == f"{axis}_um"]
        if hit:
            datasets[axis] = hit[0]
    if ("x" in datasets) != ("y" in datasets):
        datasets.pop("x", None)
        datasets.pop("y", None)
    quality = {
        leaf[n]: n for n in planes if n not in datasets.values() and found[n][1] in "biuf"
    }
    if quality:
        datasets["quality"] = quality
    notes.append(
        "Datasets: " + ", ".join(f"{k} = {v!r}" for k, v in datasets.items() if k != "quality")
        + (f", quality {sorted(quality)}" if quality else "")
        + f" (shapes {shape + (3,)} and {shape}); check."
    )
    euler, phase, _, coords = read_hdf5_arrays(path, datasets=datasets)
    spec = {"path": str(path), "format": "hdf5", "datasets": datasets}
    named = {u for u in ("deg", "rad") if u in euler_name.lower()}
    spec["angles"] = _unit_from_values(euler, named, notes)
    if coords:
        placement = place_on_grid(coords[0].ravel(), coords[1].ravel(), path=path)
        spec["grid"] = placement.grid
        spec["step_um"] = placement.step_x_um
        notes.append(
            f"Grid {placement.grid}, step {placement.step_x_um:g} µm: measured from the x and "
            "y datasets."
        )
    else:
        _unplaced_grid(spec, shape, notes, decide)
    return spec, _array_phase_ids(phase)


def _phase_entry(phase_id: int, preset: str | None, decide: list) -> dict:
    if preset is None:
        decide.append(f"phases (id {phase_id}): name, Laue class and lattice, or --phase "
                      f"{phase_id}=fcc|bcc|hcp.")
        fill = f"{PLACEHOLDER}: lattice length in ångström"
        angle = f"{PLACEHOLDER}: lattice angle in degrees"
        return {
            "id": phase_id,
            "name": f"{PLACEHOLDER}: name of phase {phase_id}",
            "laue": f"{PLACEHOLDER}: Laue class, one of {_LAUE_WORDS}",
            "lattice": {"a": fill, "b": fill, "c": fill, "alpha": angle, "beta": angle,
                        "gamma": angle},
        }
    entry = {"id": phase_id, **json.loads(json.dumps(PHASE_PRESETS[preset]))}
    if "setting" in entry:
        decide.append(f"phases (id {phase_id}) setting: x_parallel_a or x_parallel_a_star.")
    return entry


def propose_job(
    map_path: str | PathLike, *, job_dir: str | PathLike | None = None, phases=None
) -> Proposal:
    """Recognise a map's columns or datasets, unit, grid, step and phases; propose a job.

    Parameters
    ----------
    map_path : str or Path
        A table (csv, tsv, whitespace text, recognised from the header row), an
        ``.npz``, a ``.tif``/``.tiff`` with its JSON sidecar, or an ``.h5``/``.hdf5``.
    job_dir : str or Path, optional
        Folder the job file will be written in; the map's path is made relative to it.
    phases : mapping of int -> str, optional
        Presets by phase id, each a key of :data:`PHASE_PRESETS`.

    Returns
    -------
    Proposal

    Raises
    ------
    InputError
        An unreadable map, or one whose coordinates and angles cannot be recognised.
    SettingError
        An unknown preset.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp()); p = d / "m.csv"
    >>> _ = p.write_text("X,Y,euler1,euler2,euler3,Phase\\n0,0,10,20,30,1\\n1,0,200,20,30,1\\n")
    >>> prop = propose_job(p, phases={1: "fcc"})
    >>> prop.job["map"]["angles"], prop.job["map"]["columns"]["phi1"], prop.job["map"]["step_um"]
    ('deg', 'euler1', 1.0)
    >>> prop.job["map"]["axes"]["x"][:7]
    'FILL-IN'
    """
    path = Path(map_path)
    if not path.is_file():
        raise InputError("Expected an existing map file, got none at this path.", path=path)
    presets = dict(phases or {})
    for pid, name in presets.items():
        if name not in PHASE_PRESETS:
            raise SettingError(
                f"Expected a phase preset among {tuple(PHASE_PRESETS)} for phase {pid}, "
                f"got {name!r}."
            )
    notes, decide = [], []
    suffix = path.suffix.lower()
    if suffix == ".npz":
        spec, ids = _npz_proposal(path, notes, decide)
    elif suffix in (".tif", ".tiff"):
        spec, ids = _tiff_proposal(path, notes, decide)
    elif suffix in (".h5", ".hdf5", ".he5", ".nxs"):
        spec, ids = _hdf5_proposal(path, notes, decide)
    else:
        spec, ids = _table_proposal(path, notes)
    ids = sorted(set(ids) | set(presets))
    if not ids:
        raise InputError("Expected at least one indexed point (phase id > 0), got none.", path=path)
    notes.append(f"Phase ids present: {ids}.")
    for pid, name in sorted(presets.items()):
        notes.append(
            f"Phase {pid}: preset {name!r}, lattice parameters from memory (handbook values); "
            "replace them with your alloy's."
        )
    base = Path(job_dir) if job_dir is not None else path.parent
    try:
        spec["path"] = str(path.resolve().relative_to(base.resolve()))
    except ValueError:
        spec["path"] = str(path.resolve())
    spec["axes"] = {
        "x": f"{PLACEHOLDER}: screen direction of the data's +x: right, left, up or down",
        "y": f"{PLACEHOLDER}: screen direction of the data's +y: right, left, up or down",
    }
    spec["data_frame_rotation"] = (
        f"{PLACEHOLDER}: identity when the orientations refer to the declared axes, else the "
        "turn between them such as z180 (conventions §2)"
    )
    decide[:0] = [
        "map.axes: where the data's +x and +y point on the screen image (conventions §2); "
        "a wrong choice flips every dip.",
        "map.data_frame_rotation: identity, or the known turn of the orientation data's frame "
        "(conventions §2); the frame verdict checks it against sections.",
    ]
    phase_entries = [_phase_entry(pid, presets.get(pid), decide) for pid in ids]
    job = {
        "schema_version": 1,
        "notes": ["Written by 'inclination init'; every line below is a guess to check.", *notes],
        "phases": phase_entries,
        "map": spec,
    }
    return Proposal(job=job, recognised=tuple(notes), to_decide=tuple(decide))


def write_job(proposal: Proposal, out: str | PathLike, *, force: bool = False) -> Path:
    """Write the proposed job as JSON, atomically; an existing file only with ``force``.

    Examples
    --------
    >>> import tempfile
    >>> out = Path(tempfile.mkdtemp()) / "job.json"
    >>> p = write_job(Proposal(job={"notes": []}, recognised=(), to_decide=()), out)
    >>> p.read_text()
    '{\\n  "notes": []\\n}\\n'
    """
    from ..report.atomic import write_text_atomic

    out = Path(out)
    if out.exists() and not force:
        raise InputError(
            "Expected a new job file, got an existing one; pass --force to replace it.", path=out
        )
    return write_text_atomic(out, json.dumps(proposal.job, indent=2, ensure_ascii=False) + "\n")
