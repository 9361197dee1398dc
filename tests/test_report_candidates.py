"""Streamed row encoding and the candidates.jsonl output: round trips, schema, selection."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from inclination.report.candidates import (
    CANDIDATE_COLUMNS,
    candidates_schema,
    select_candidate_rows,
    write_candidates,
)
from inclination.report.columns import Column
from inclination.report.streams import encode_rows

ROOT = Path(__file__).resolve().parents[1]
COLS = [
    Column("id", "int"),
    Column("x_deg", "float", 4),
    Column("n", "float", 6),
    Column("ok", "bool"),
    Column("plane", "str"),
]


def _table(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n) * 10.0 ** rng.integers(-5, 6, n)
    x[::7] = np.nan
    x[3::11] = np.inf
    x[5::13] = 0.0
    x[6::17] = -1e-9  # rounds to 0: written "0", never "-0"
    x[8::19] = 3e17  # beyond the fixed-point range: repr
    ids = rng.integers(-1, 10**12, n)
    planes = rng.choice(["(1 1 1)", "(1 -1 1)", "", 'a, "b"', "é"], n)
    return {
        "id": ids,
        "x_deg": x,
        "n": rng.uniform(-1, 1, n),
        "ok": rng.random(n) < 0.5,
        "plane": planes,
    }


def _expected_float(v, decimals):
    # Python's float formatting is the reference: the value rounded to the column's decimals.
    if not np.isfinite(v):
        return None
    if abs(v) >= 1e15:
        return float(v)
    return float(f"{v:.{decimals}f}")


@pytest.mark.parametrize("block_rows", [1, 7, 65536])
def test_jsonl_rows_read_back_with_the_json_module(block_rows):
    t = _table(500, 1)
    text = b"".join(encode_rows(t, COLS, style="jsonl", block_rows=block_rows)).decode("utf-8")
    rows = [json.loads(line) for line in text.splitlines()]
    assert len(rows) == 500
    for i, r in enumerate(rows):
        assert r[0] == (None if t["id"][i] < 0 else int(t["id"][i]))
        assert r[1] == _expected_float(t["x_deg"][i], 4)
        assert r[2] == _expected_float(t["n"][i], 6)
        assert r[3] is bool(t["ok"][i])
        assert r[4] == (str(t["plane"][i]) or None)
    assert "-0," not in text and "-0]" not in text


def test_csv_rows_read_back_with_the_csv_module():
    t = _table(300, 2)
    text = b"".join(encode_rows(t, COLS, style="csv")).decode("utf-8")
    rows = list(csv.reader(io.StringIO(text)))
    assert len(rows) == 300
    for i, r in enumerate(rows):
        x = _expected_float(t["x_deg"][i], 4)
        assert (r[1] == "") == (x is None)
        if x is not None:
            assert float(r[1]) == x
        assert r[4] == str(t["plane"][i])
        assert r[3] == ("true" if t["ok"][i] else "false")


def test_encode_rows_raises_on_bad_style_and_ragged_columns():
    with pytest.raises(ValueError, match="Expected `style` to be one of"):
        list(encode_rows({}, [], style="xml"))
    with pytest.raises(ValueError, match="equal length"):
        list(encode_rows({"a": [1], "b": [1, 2]}, [Column("a", "int"), Column("b", "int")]))
    with pytest.raises(ValueError, match="to have columns"):
        list(encode_rows({}, [Column("a", "int")]))


def _candidates(n, seed):
    rng = np.random.default_rng(seed)
    t = {}
    for c in CANDIDATE_COLUMNS:
        if c.kind == "float":
            t[c.name] = rng.uniform(0, 90, n)
        elif c.kind == "int":
            t[c.name] = rng.integers(1, 1000, n)
        elif c.kind == "bool":
            t[c.name] = rng.random(n) < 0.2
        else:
            t[c.name] = rng.choice(["(1 1 1)", "(1 -1 1)"], n)
    t["side"] = rng.choice(["a", "b"], n)
    t["shared_with"] = np.where(rng.random(n) < 0.1, "(1 1 1)", "")
    t["shared_normal_deviation_deg"] = np.where(t["shared_with"] != "", 1.0, np.nan)
    return t


@pytest.mark.parametrize("rows", ["fit_or_shared", "all"])
def test_candidates_file_validates_and_keeps_the_chosen_rows(tmp_path, rows):
    t = _candidates(400, 3)
    path = write_candidates(tmp_path / "candidates.jsonl", t, meta={"x": 1}, rows=rows)
    lines = path.read_text(encoding="utf-8").splitlines()
    schema = candidates_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    header = json.loads(lines[0])
    jsonschema.validate(header, {**schema, "$ref": "#/$defs/header"})
    assert [c["name"] for c in header["columns"]] == [c.name for c in CANDIDATE_COLUMNS]
    row_schema = {**schema, "$ref": "#/$defs/row"}
    body = [json.loads(line) for line in lines[1:]]
    for r in body:
        jsonschema.validate(r, row_schema)
    keep = t["fits"] | (t["shared_with"] != "") if rows == "fit_or_shared" else np.ones(400, bool)
    assert len(body) == keep.sum()
    i_fits = [c.name for c in CANDIDATE_COLUMNS].index("fits")
    i_dip = [c.name for c in CANDIDATE_COLUMNS].index("dip_deg")
    assert_array_equal([r[i_fits] for r in body], t["fits"][keep])
    # Written with 4 decimals (the column's), so read back within half a unit of the last.
    assert_allclose([r[i_dip] for r in body], t["dip_deg"][keep], rtol=0, atol=5e-5)


def test_select_candidate_rows_raises_on_an_unknown_selection():
    with pytest.raises(ValueError, match="Expected `rows` to be one of"):
        select_candidate_rows({"fits": np.array([True]), "shared_with": np.array([""])}, rows="x")


def test_committed_candidates_schema_is_the_rendered_one():
    text = (ROOT / "schemas" / "candidates.schema.json").read_text(encoding="utf-8")
    assert json.loads(text) == candidates_schema()
