"""Find and load the JSON Schemas the package ships (schemas/*.schema.json).

An installed wheel carries them as package data in ``inclination/schemas/``; a
source checkout or an editable install keeps them in the repository's top-level
``schemas/`` folder. Each call reads the file afresh (no cache, no module state).
"""

from __future__ import annotations

import json
from importlib import resources
from pathlib import Path

__all__ = ["load_schema", "schema_path"]


def schema_path(name: str) -> Path:
    """Path of the schema file ``name`` (e.g. ``"job.schema.json"``).

    Examples
    --------
    >>> schema_path("job.schema.json").name
    'job.schema.json'
    """
    if not isinstance(name, str) or "/" in name or "\\" in name or not name.endswith(".json"):
        raise ValueError(f"Expected `name` to be a schema file name ending in .json, got {name!r}.")
    packaged = resources.files("inclination") / "schemas" / name
    if packaged.is_file():
        return Path(str(packaged))
    in_source = Path(__file__).resolve().parents[2] / "schemas" / name
    if in_source.is_file():
        return in_source
    raise FileNotFoundError(
        f"Expected the schema {name!r} in the package data or in {in_source.parent}, found neither."
    )


def load_schema(name: str) -> dict:
    """The parsed schema ``name`` as a new dict.

    Examples
    --------
    >>> load_schema("job.schema.json")["$schema"]
    'https://json-schema.org/draft/2020-12/schema'
    """
    return json.loads(schema_path(name).read_text(encoding="utf-8"))
