"""The job file: schema validation, defaults, phases and paths (schemas/job.schema.json).

A job file is JSON, every field described in schemas/job.schema.json. :func:`load_job` validates it
against the JSON Schema (draft 2020-12), fills in every default the schema
documents, builds the phases, resolves paths relative to the job file and
checks that the files exist. Any failure is one :class:`InputError` line naming
the file, the JSON pointer of the field, what was expected and what came.
"""

from __future__ import annotations

import copy
import difflib
import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from ..crystal.phases import Phases
from ..errors import InputError
from .schemas import load_schema

__all__ = ["Job", "load_job", "job_from_dict", "SCHEMA_VERSION", "PLACEHOLDER"]

#: The job format version this loader reads.
SCHEMA_VERSION = 1

#: Start of every value ``inclination init`` leaves for the user to fill in.
PLACEHOLDER = "FILL-IN"

# Defaults given in map steps when the job leaves them null (schema descriptions).
_MIN_LENGTH_STEPS = 10.0
_TOLERANCE_STEPS = 1.5
_MATCH_TOLERANCE_STEPS = 2.0


@dataclass(frozen=True, eq=False)
class Job:
    """A validated job, defaults filled in.

    Attributes
    ----------
    phases : inclination.crystal.Phases
        The phases, an immutable mapping id -> Phase in file order.
    map : dict
        The surface map entry, defaults filled, ``path`` (and ``sidecar``)
        absolute. Pass it to :func:`inclination.maps.read_map`.
    grains, traces, planes : dict
        Settings with defaults filled (``traces`` lengths in µm: null in the
        file becomes 10 and 1.5 map steps when the map's step is declared).
    audit : dict
        The frame audit's thresholds, defaults filled: ``outlier_fraction``,
        ``min_voters``, ``min_margin_log10`` (inclination.audit.audit_frame).
    sections : tuple of dict
        Each a validated cross-section or serial section; a serial section's
        ``map`` has an absolute path.
    source_path : str or None
        The job file (None when built from a dict without one).
    raw : dict
        The job as read with defaults filled (paths as written), JSON-ready.

    Treat the dicts as read-only: they are the job as loaded.
    """

    phases: Phases
    map: dict
    grains: dict
    traces: dict
    planes: dict
    audit: dict
    sections: tuple
    source_path: str | None
    raw: dict

    @property
    def base_dir(self) -> Path | None:
        """Folder of the job file (paths in the file are relative to it)."""
        return None if self.source_path is None else Path(self.source_path).parent

    @property
    def phase_ids(self) -> tuple:
        """The phases' ids, in file order."""
        return self.phases.ids

    def read_surface_map(self, *, progress=None):
        """Read the surface map (``inclination.maps.read_map`` with this job's context)."""
        from ..maps import read_map

        return read_map(
            self.map,
            phase_ids=self.phase_ids,
            path_for_errors=self.source_path,
            pointer="/map",
            progress=progress,
        )

    def read_section_map(self, index: int):
        """Read the map of serial section ``index`` (position in ``sections``)."""
        from ..maps import read_map

        section = self.sections[index]
        if section["kind"] != "serial":
            raise ValueError(
                f"Expected `index` to point at a serial section, got a {section['kind']!r}."
            )
        return read_map(
            section["map"],
            phase_ids=self.phase_ids,
            path_for_errors=self.source_path,
            pointer=f"/sections/{index}/map",
        )


def load_job(path) -> Job:
    """Read, validate and complete a job file.

    Parameters
    ----------
    path : str or Path
        The JSON job file.

    Returns
    -------
    Job

    Raises
    ------
    InputError
        A missing or unreadable file, invalid JSON (with line and column), a
        field that breaks the schema, duplicate phase ids, a bad phase, a map
        or sidecar file that does not exist, a degenerate section geometry.

    Examples
    --------
    >>> import tempfile, json
    >>> d = Path(tempfile.mkdtemp()); _ = (d / "m.csv").write_text("x_um\\n")
    >>> job = {"phases": [{"id": 1, "name": "matrix", "laue": "m-3m",
    ...        "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...        "map": {"path": "m.csv", "format": "csv", "step_um": 0.5, "angles": "deg",
    ...                "axes": {"x": "right", "y": "down"}}}
    >>> _ = (d / "job.json").write_text(json.dumps(job))
    >>> j = load_job(d / "job.json")
    >>> j.grains["threshold_deg"], j.traces, j.map["data_frame_rotation"]
    (5, {'min_length_um': 5.0, 'tolerance_um': 0.75}, 'identity')
    """
    from .limits import read_json

    path = Path(path)
    doc = read_json(path, kind="job")
    return job_from_dict(doc, base_dir=path.parent, path_for_errors=path)


def job_from_dict(d: Mapping, *, base_dir=None, path_for_errors=None) -> Job:
    """Validate and complete a job given as a dict (the demo builds one).

    Parameters
    ----------
    d : mapping
        The job, as the JSON file would hold it. Not modified.
    base_dir : str or Path, optional
        Folder relative paths are resolved against (default: the working folder).
    path_for_errors : str or Path, optional
        Named in error messages, and kept as ``Job.source_path``.

    Returns
    -------
    Job

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp()); _ = (d / "m.npz").write_bytes(b"")
    >>> job = job_from_dict({"phases": [{"id": 1, "name": "m", "laue": "m-3m",
    ...     "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "up"}}}, base_dir=d)
    >>> job.phase_ids, job.planes["sigma_criterion"], job.sections
    ((1,), 'brandon', ())
    """
    from .limits import schema_validator

    if not isinstance(d, Mapping):
        raise InputError(
            f"Expected a JSON object at the top level, got {_json_type(d)}.",
            path=path_for_errors,
            pointer="/",
        )
    doc = copy.deepcopy(dict(d))
    _refuse_placeholders(doc, path_for_errors)
    schema = load_schema("job.schema.json")
    validator = schema_validator(schema)
    errors = list(validator.iter_errors(doc))
    if errors:
        raise _schema_error(_pick(errors), path_for_errors)
    _fill_defaults(doc, schema, schema, validator)

    steps = _declared_step(doc["map"])
    if steps is not None:
        for key, n in (("min_length_um", _MIN_LENGTH_STEPS), ("tolerance_um", _TOLERANCE_STEPS)):
            if doc["traces"][key] is None:
                doc["traces"][key] = n * steps
        for section in doc["sections"]:
            if section["kind"] == "cross-section" and section["match_tolerance_um"] is None:
                section["match_tolerance_um"] = _MATCH_TOLERANCE_STEPS * steps

    # Slip systems belong to the features stage (inclination.features), not to Phase.
    phase_entries = [
        {k: v for k, v in entry.items() if k != "slip_systems"} for entry in doc["phases"]
    ]
    phases = Phases.from_dicts(phase_entries, path=path_for_errors)
    base = Path(".") if base_dir is None else Path(base_dir)
    surface = _resolve_map(doc["map"], base, path_for_errors, "/map")
    sections = []
    for i, section in enumerate(doc["sections"]):
        pointer = f"/sections/{i}"
        _check_section(section, doc["map"], path_for_errors, pointer)
        resolved = copy.deepcopy(section)
        if section["kind"] == "serial":
            resolved["map"] = _resolve_map(section["map"], base, path_for_errors, f"{pointer}/map")
        if section["kind"] == "cross-section" and "image" in section:
            # The face image's path is relative to the job file, as the maps' are.
            resolved["image"]["path"] = str((base / section["image"]["path"]).resolve())
        sections.append(resolved)
    _check_features(doc, phases, path_for_errors)
    return Job(
        phases=phases,
        map=surface,
        grains=copy.deepcopy(doc["grains"]),
        traces=copy.deepcopy(doc["traces"]),
        planes=copy.deepcopy(doc["planes"]),
        audit=copy.deepcopy(doc["audit"]),
        sections=tuple(sections),
        source_path=None if path_for_errors is None else str(path_for_errors),
        raw=doc,
    )


# ----------------------------------------------------------------------------- helpers


def _refuse_placeholders(doc, path, where=()):
    """The first value ``inclination init`` left to fill in, as one InputError."""
    if isinstance(doc, str) and doc.startswith(PLACEHOLDER):
        raise InputError(
            f"Expected a value in place of the placeholder that 'inclination init' wrote, "
            f"got it unchanged: {doc!r}.",
            path=path,
            pointer=_pointer(list(where)),
        )
    if isinstance(doc, Mapping):
        items = doc.items()
    else:
        items = enumerate(doc) if isinstance(doc, list) else ()
    for key, value in items:
        if key == "notes" and not where:
            continue
        _refuse_placeholders(value, path, (*where, key))


def _nearest(name, allowed) -> str:
    """' (did you mean 'x'?)' for the closest allowed name, or ''."""
    allowed = [str(a) for a in allowed]
    # A bare prefix ("x" for "x_um") is the commonest slip and scores low on similarity.
    near = [a for a in allowed if a.lower().startswith(str(name).lower())]
    near = near or difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.5)
    return f" (did you mean {near[0]!r}?)" if near else ""


def _declared_step(map_spec) -> float | None:
    if "step_um" in map_spec:
        return float(map_spec["step_um"])
    if "step_x_um" in map_spec:
        return float(min(map_spec["step_x_um"], map_spec["step_y_um"]))
    return None


def _resolve_map(spec, base: Path, path, pointer) -> dict:
    from .chunked import check_store_address, is_store_address

    out = copy.deepcopy(spec)
    if is_store_address(spec["path"]):
        # Kept as the string given (inclination.io.chunked): never joined to the job's folder.
        if spec["format"] != "zarr":
            raise InputError(
                f"Expected a local file path for a {spec['format']} map (only zarr maps may "
                f"be given as a store address), got {spec['path']!r}.",
                path=path,
                pointer=f"{pointer}/path",
            )
        check_store_address(spec["path"], path=path, pointer=f"{pointer}/path")
        return out
    if "storage_options" in spec:
        raise InputError(
            f"Expected 'storage_options' only beside a store address (s3://…, gs://…) of a "
            f"zarr map, got it beside the local path {spec['path']!r}.",
            path=path,
            pointer=f"{pointer}/storage_options",
        )
    target = base / spec["path"]
    if spec["format"] == "zarr":
        # A zarr map is a folder of chunks (inclination.io.chunked).
        if not target.is_dir():
            raise InputError(
                f"Expected an existing zarr map (a folder), got no folder at {str(target)!r}.",
                path=path,
                pointer=f"{pointer}/path",
            )
    elif not target.is_file():
        raise InputError(
            f"Expected an existing map file, got no file at {str(target)!r}.",
            path=path,
            pointer=f"{pointer}/path",
        )
    out["path"] = str(target.resolve())
    if spec["format"] == "tiff":
        sidecar = base / spec.get("sidecar", spec["path"] + ".json")
        if not sidecar.is_file():
            raise InputError(
                f"Expected the TIFF's JSON sidecar at {str(sidecar)!r}, got no file.",
                path=path,
                pointer=f"{pointer}/sidecar",
            )
        out["sidecar"] = str(sidecar.resolve())
    return out


def _check_section(section, map_spec, path, pointer):
    """Section checks the schema cannot express, made where the section records are built.

    The records' constructors (``inclination.sections``) hold those checks; building
    the records here, with the map's declared axes, makes a bad section fail when the
    job is read rather than after the maps are segmented. The checks do not depend on
    the axes' origin, which only the map's reader knows.
    """
    from ..frames import DeclaredAxes
    from ..sections import CrossSection, section_depth

    if section["kind"] == "cross-section":
        axes = DeclaredAxes.from_dict(map_spec["axes"], path=path, pointer="/map/axes")
        CrossSection.from_job_entry(section, axes=axes, path=path, pointer=pointer)
    else:
        section_depth(section, path=path, pointer=pointer)


def _resolve_ref(schema, root):
    while isinstance(schema, Mapping) and "$ref" in schema:
        ref = schema["$ref"]
        node = root
        for part in ref.lstrip("#/").split("/"):
            node = node[part]
        schema = {**node, **{k: v for k, v in schema.items() if k != "$ref"}}
    return schema


def _fill_defaults(instance, schema, root, validator):
    """Set every absent property that has a schema default, recursively (in place)."""
    schema = _resolve_ref(schema, root)
    if not isinstance(schema, Mapping):
        return
    for sub in schema.get("allOf", ()):
        sub = _resolve_ref(sub, root)
        if "if" in sub:
            if validator.evolve(schema=sub["if"]).is_valid(instance):
                _fill_defaults(instance, sub.get("then", {}), root, validator)
        else:
            _fill_defaults(instance, sub, root, validator)
    if isinstance(instance, dict):
        for key, prop in schema.get("properties", {}).items():
            prop = _resolve_ref(prop, root)
            if key not in instance and "default" in prop:
                instance[key] = copy.deepcopy(prop["default"])
            if key in instance:
                _fill_defaults(instance[key], prop, root, validator)
    elif isinstance(instance, list) and "items" in schema:
        for item in instance:
            _fill_defaults(item, schema["items"], root, validator)


def _json_type(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float)):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, Mapping):
        return "an object"
    return type(value).__name__  # pragma: no cover - json gives only the types above


def _shown(value) -> str:
    text = json.dumps(value, ensure_ascii=False) if _jsonable(value) else repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _jsonable(value) -> bool:
    try:
        json.dumps(value)
    except (TypeError, ValueError):
        return False
    return True


def _depth(err) -> int:
    return len(err.absolute_path)


def _pick(errors):
    """The most specific error: descend into if/then and oneOf contexts, deepest path first."""
    flat = []
    for err in errors:
        stack = [err]
        while stack:
            e = stack.pop()
            if e.context and e.validator in ("anyOf",):
                stack.extend(e.context)
            else:
                flat.append(e)
    return min(flat, key=lambda e: (-_depth(e), list(map(str, e.absolute_path))))


def _pointer(parts) -> str:
    parts = [str(p).replace("~", "~0").replace("/", "~1") for p in parts]
    return "/" + "/".join(parts) if parts else "/"


_TYPE_WORDS = {
    "number": "a number",
    "integer": "a whole number",
    "string": "a string",
    "object": "an object",
    "array": "an array",
    "boolean": "true or false",
    "null": "null",
}


def _schema_error(err, path) -> InputError:
    where = list(err.absolute_path)
    kind = err.validator
    value = err.validator_value
    inst = err.instance
    if kind == "required":
        missing = [k for k in value if not (isinstance(inst, Mapping) and k in inst)]
        name = missing[0] if missing else value[0]
        return InputError(
            f"Expected the required field {name!r}, got none.",
            path=path,
            pointer=_pointer(where + [name]),
        )
    if kind == "additionalProperties":
        allowed = tuple(err.schema.get("properties", {}))
        extra = [k for k in inst if k not in allowed]
        return InputError(
            f"Expected only the fields {allowed}, got {extra[0]!r}{_nearest(extra[0], allowed)}.",
            path=path,
            pointer=_pointer(where + [extra[0]]),
        )
    if kind == "enum":
        message = f"Expected one of {tuple(value)}, got {_shown(inst)}{_nearest(inst, value)}."
    elif kind == "const":
        message = f"Expected {_shown(value)}, got {_shown(inst)}."
    elif kind == "type":
        types = [value] if isinstance(value, str) else list(value)
        wanted = " or ".join(_TYPE_WORDS.get(t, t) for t in types)
        message = f"Expected {wanted}, got {_json_type(inst)} {_shown(inst)}."
    elif kind in ("minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum"):
        sign = {"minimum": ">=", "exclusiveMinimum": ">", "maximum": "<=", "exclusiveMaximum": "<"}[
            kind
        ]
        message = f"Expected a number {sign} {value}, got {_shown(inst)}."
    elif kind in ("minItems", "maxItems"):
        word = "at least" if kind == "minItems" else "at most"
        message = f"Expected {word} {value} items, got {len(inst)}."
    elif kind == "minLength":
        message = f"Expected a non-empty string, got {_shown(inst)}."
    elif kind == "maxLength":
        message = f"Expected a string of at most {value} characters, got {_shown(inst)}."
    elif kind == "oneOf" and all(set(s) == {"required"} for s in value):
        names = [s["required"][0] for s in value]
        present = [n for n in names if isinstance(inst, Mapping) and n in inst]
        got = "both" if len(present) > 1 else "neither"
        message = f"Expected exactly one of {tuple(names)}, got {got}."
    elif kind == "not" and set(value) == {"required"}:
        message = f"Expected at most one of {tuple(value['required'])}, got both."
    elif kind == "dependentRequired":
        pairs = [(k, v) for k, v in value.items() if k in inst]
        first, needs = pairs[0]
        message = f"Expected {needs[0]!r} together with {first!r}, got {first!r} alone."
    else:
        message = f"Expected a valid value, got {_shown(inst)} ({err.message})."
    return InputError(message, path=path, pointer=_pointer(where))


def _check_features(doc, phases, path):
    """Slip-system strings and the loading direction, checked on loading (inclination.features)."""
    from ..features import read_loading_direction, read_slip_systems
    from ..frames import DeclaredAxes

    read_slip_systems(doc["phases"], phases, path=path)
    if "features" in doc:
        # Only its length is checked here; the map's own axes convert it in the run.
        read_loading_direction(doc["features"], axes=DeclaredAxes(), path=path)
