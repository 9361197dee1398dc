"""The candidates output: its columns, which rows it keeps, its schema and its writer.

``candidates.jsonl`` is a JSON-lines table: the first line is a header object
(schema version, frame, the row selection and the column list), every further
line one row as a JSON array in column order. By default it keeps the rows a
reader can act on, a plane that fits its trace or that both grains share
(``fit_or_shared``); most rows of a large map fit nothing. ``all`` keeps every
(segment, side, plane) row of :func:`inclination.planes.candidates`. Vectors and
angles are in the sample frame S (conventions §2).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from .atomic import write_chunks_atomic
from .columns import Column
from .schemas import SCHEMA_VERSION, column_schema
from .streams import encode_rows

__all__ = [
    "CANDIDATE_COLUMNS",
    "CANDIDATE_ROWS",
    "candidates_schema",
    "select_candidate_rows",
    "write_candidates",
]

#: Closed set of row selections.
CANDIDATE_ROWS = ("fit_or_shared", "all")

CANDIDATE_COLUMNS = (
    Column("segment_id", "int", 0, "segment number (segments.csv)"),
    Column("side", "str", 0, "grain side of the segment: a or b"),
    Column("grain_id", "int", 0, "grain of that side (grains.csv)"),
    Column("phase", "int", 0, "phase id of the grain"),
    Column("family", "str", 0, "plane family the candidate belongs to"),
    Column("plane", "str", 0, "candidate plane, Miller (Bravais-Miller) indices"),
    Column("normal_x", "float", 6, "unit plane normal in S, x (n_z >= 0)"),
    Column("normal_y", "float", 6, "unit plane normal in S, y"),
    Column("normal_z", "float", 6, "unit plane normal in S, z"),
    Column("trace_angle_deg", "float", 4, "predicted trace angle in S, [0, 180); null if none"),
    Column("trace_deviation_deg", "float", 4, "predicted minus measured trace angle, absolute"),
    Column("tolerance_deg", "float", 4, "trace-angle tolerance of this candidate"),
    Column("dip_deg", "float", 4, "predicted dip: 0 parallel to the surface, 90 vertical"),
    Column("dip_azimuth_deg", "float", 4, "predicted dip direction in S"),
    Column("has_trace", "bool", 0, "the plane meets the surface in a line"),
    Column("fits", "bool", 0, "the trace deviation is within the tolerance"),
    Column("shared_with", "str", 0, "plane of the other grain whose normal agrees; null if none"),
    Column("shared_normal_deviation_deg", "float", 4, "angle between the two shared normals"),
)


def _check_rows(rows: str) -> None:
    if rows not in CANDIDATE_ROWS:
        raise ValueError(f"Expected `rows` to be one of {CANDIDATE_ROWS}, got {rows!r}.")


def select_candidate_rows(table: Mapping, *, rows: str = "fit_or_shared") -> dict:
    """The rows of a candidates table that ``rows`` keeps, in their order.

    Parameters
    ----------
    table : mapping of str to 1-D array
        A table of :func:`inclination.planes.candidates`.
    rows : {'fit_or_shared', 'all'}, optional
        ``fit_or_shared`` keeps rows whose ``fits`` is true or whose ``shared_with``
        is not empty.

    Returns
    -------
    dict of 1-D arrays

    Examples
    --------
    >>> t = {"fits": np.array([True, False, False]), "shared_with": np.array(["", "", "(1 1 1)"])}
    >>> select_candidate_rows(t)["shared_with"].tolist()
    ['', '(1 1 1)']
    """
    _check_rows(rows)
    if rows == "all":
        return {k: np.asarray(v) for k, v in table.items()}
    keep = np.asarray(table["fits"], bool) | (np.asarray(table["shared_with"]).astype(str) != "")
    return {k: np.asarray(v)[keep] for k, v in table.items()}


def candidates_schema() -> dict:
    """JSON Schema of ``candidates.jsonl``: ``$defs/header`` for line 1, ``$defs/row`` after.

    Examples
    --------
    >>> s = candidates_schema()
    >>> s["$defs"]["row"]["minItems"] == len(CANDIDATE_COLUMNS)
    True
    """
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": "inclination/candidates.schema.json",
        "title": "Candidate planes (JSON lines: a header line, then one array per row)",
        "$defs": {
            "header": {
                "type": "object",
                "required": ["schema_version", "table", "rows", "frame", "meta", "columns"],
                "properties": {
                    "schema_version": {"const": SCHEMA_VERSION},
                    "table": {"const": "candidates"},
                    "rows": {"enum": list(CANDIDATE_ROWS)},
                    "frame": {"type": "string"},
                    "meta": {"type": "object"},
                    "columns": {
                        "type": "array",
                        "items": {"type": "object", "required": ["name", "kind"]},
                    },
                },
            },
            "row": {
                "type": "array",
                "minItems": len(CANDIDATE_COLUMNS),
                "maxItems": len(CANDIDATE_COLUMNS),
                "prefixItems": [column_schema(c) for c in CANDIDATE_COLUMNS],
            },
        },
    }


def write_candidates(path, table: Mapping, *, meta: dict, rows: str = "fit_or_shared") -> Path:
    """Write a candidates table as ``candidates.jsonl``, streamed a block of rows at a time.

    Parameters
    ----------
    path : str or PathLike
        Output file; written atomically.
    table : mapping of str to 1-D array
        A table of :func:`inclination.planes.candidates`.
    meta : dict
        Goes into the header line.
    rows : {'fit_or_shared', 'all'}, optional
        See :func:`select_candidate_rows`.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile
    >>> t = {c.name: np.zeros(2, bool if c.kind == "bool" else float if c.kind == "float"
    ...      else int if c.kind == "int" else "U8") for c in CANDIDATE_COLUMNS}
    >>> t["fits"][1] = True
    >>> p = write_candidates(Path(tempfile.mkdtemp()) / "c.jsonl", t, meta={})
    >>> lines = p.read_text().splitlines()
    >>> len(lines), json.loads(lines[0])["rows"], json.loads(lines[1])[15]
    (2, 'fit_or_shared', True)
    """
    chosen = select_candidate_rows(table, rows=rows)
    header = {
        "schema_version": SCHEMA_VERSION,
        "table": "candidates",
        "rows": rows,
        "frame": "sample frame S (conventions §2)",
        "meta": meta,
        "columns": [
            {"name": c.name, "kind": c.kind, "description": c.description}
            for c in CANDIDATE_COLUMNS
        ],
    }
    first = (json.dumps(header, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")

    def chunks():
        yield first
        yield from encode_rows(chosen, CANDIDATE_COLUMNS, style="jsonl")

    return write_chunks_atomic(path, chunks())
