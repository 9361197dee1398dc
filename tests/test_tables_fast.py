"""The streamed table writers write the same bytes as Python's csv and json modules.

The oracles are written here, cell by cell, with the outside references doing the
encoding: ``csv.writer`` (quoting) with Python's ``f"{x:.{d}f}"`` (digits) for
``write_csv``, ``json.dumps`` of each row for ``write_table_json`` and for the
JSON lines of ``candidates.jsonl``. The tables hold the values that break fast
paths: NaN, ±inf, -0.0, ties at the last decimal (0.0005, 0.125), 1e-7, 1e16,
1e300, long floats, ids past 10^12, empty strings, strings with commas, quotes,
line breaks, backslashes, NUL, control characters and non-ASCII text.
"""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np
import pytest

from inclination.report.candidates import CANDIDATE_COLUMNS, write_candidates
from inclination.report.columns import BOUNDARY_COLUMNS, Column
from inclination.report.streams import encode_rows
from inclination.report.tables import write_csv, write_table_json

TEXTS = [
    "", "(1 1 1)", "a,b", 'say "x"', "line\nbreak", "cr\rlf", "tab\tx", "back\\slash",
    " padded ", "é", "Σ3 ⟨1 1 1⟩", "日本", "\x7f", "\u2028", "a\x00b", "x" * 70, ",", '"',
]  # fmt: skip
COLUMNS = [
    *(Column(f"f{d}", "float", d) for d in (0, 1, 3, 4, 6, 8)),
    Column("id", "int"),
    Column("ok", "bool"),
    Column("text", "str"),
]


def _floats(rng, n):
    x = rng.standard_normal(n) * 10.0 ** rng.integers(-9, 17, n)
    special = np.array([np.nan, np.inf, -np.inf, -0.0, 0.0, 1e-7, -1e-7, 1e16, -1e300, 1e300,
                        0.0005, -0.0005, 0.125, 2.675, 1 / 3, 123456.789012345678, 5e-5])  # fmt: skip
    pick = rng.random(n) < 0.3
    x[pick] = rng.choice(special, pick.sum())
    ties = rng.random(n) < 0.1  # multiples of 1/8 and of 0.0005: exact or near decimal ties
    x[ties] = rng.integers(-(10**6), 10**6, ties.sum()) * rng.choice([0.125, 0.0005], ties.sum())
    return x


def _table(seed, n=3000, *, objects=False):
    rng = np.random.default_rng(seed)
    t = {c.name: _floats(rng, n) for c in COLUMNS if c.kind == "float"}
    t["id"] = rng.integers(-5, 10**13, n)
    t["ok"] = rng.random(n) < 0.5
    text = rng.choice(np.array(TEXTS, dtype=object), n)
    if objects:
        text[::7] = None
    t["text"] = text if objects else text.astype(str)
    return t


# ------------------------------------------------------------------------------ oracles


def _csv_cell(value, column):
    # The cell rule of write_csv (format_cell); the csv module does the quoting.
    if column.kind == "float":
        if not math.isfinite(value):
            return ""
        text = f"{value:.{column.decimals}f}"
        return text[1:] if text == f"{-0.0:.{column.decimals}f}" else text
    if column.kind == "int":
        return "" if value < 0 else str(int(value))
    if column.kind == "bool":
        return "true" if value else "false"
    return "" if value is None else str(value)


def _csv_oracle(table, columns):
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    lists = [table[c.name].tolist() for c in columns]
    for row in zip(*lists, strict=True):
        writer.writerow([_csv_cell(v, c) for v, c in zip(row, columns, strict=True)])
    return buf.getvalue().encode("utf-8")


def _json_value(value, column):
    # The value rule of write_table_json (table_rows): floats rounded to decimals + 3.
    if column.kind == "float":
        with np.errstate(over="ignore"):  # 1e300 rounded to 9 decimals overflows: null
            v = float(np.round(float(value), column.decimals + 3))
        return v if math.isfinite(v) else None
    if column.kind == "int":
        return None if value < 0 else int(value)
    if column.kind == "bool":
        return bool(value)
    return None if value is None or str(value) == "" else str(value)


def _json_oracle(table, columns, meta):
    head = {
        "schema_version": "1",
        "meta": meta,
        "columns": [
            {"name": c.name, "kind": c.kind, "description": c.description} for c in columns
        ],
    }
    n = len(table[columns[0].name]) if columns else 0
    lists = {c.name: table[c.name].tolist() for c in columns}
    rows = [
        json.dumps(
            {c.name: _json_value(lists[c.name][i], c) for c in columns},
            ensure_ascii=False,
            allow_nan=False,
        )
        for i in range(n)
    ]
    text = json.dumps(head, indent=2, ensure_ascii=False, allow_nan=False)[:-2]
    body = ("\n    " + ",\n    ".join(rows) + "\n  ") if rows else ""
    return (text + ',\n  "rows": [' + body + "]\n}\n").encode("utf-8")


def _jsonl_number(value, decimals):
    # The number rule of candidates.jsonl (conventions of report.streams): |x|·10^d rounded
    # half to even, trailing zeros and a bare point dropped, never "-0"; |x| ≥ 1e15 as repr.
    if abs(value) >= 1e15:
        return repr(float(value))
    digits = str(int(np.rint(abs(value) * 10.0**decimals))).rjust(decimals + 1, "0")
    text = digits
    if decimals:
        text = (digits[:-decimals] + "." + digits[-decimals:]).rstrip("0").rstrip(".")
    return ("-" if value < 0 and text != "0" else "") + text


def _jsonl_cell(value, column):
    if column.kind == "float":
        return _jsonl_number(value, column.decimals) if math.isfinite(value) else "null"
    if column.kind == "int":
        return "null" if value < 0 else _jsonl_number(value, 0)
    if column.kind == "bool":
        return json.dumps(bool(value))
    return json.dumps(str(value)) if str(value) else "null"


def _jsonl_oracle(table, columns):
    n = len(table[columns[0].name])
    lists = {c.name: table[c.name].tolist() for c in columns}
    lines = [
        "[" + ",".join(_jsonl_cell(lists[c.name][i], c) for c in columns) + "]\n" for i in range(n)
    ]
    return "".join(lines).encode("utf-8")


# -------------------------------------------------------------------------------- tests


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_write_csv_writes_the_bytes_of_csv_writer(tmp_path, seed):
    t = _table(seed)
    assert write_csv(tmp_path / "t.csv", t, COLUMNS).read_bytes() == _csv_oracle(t, COLUMNS)


def test_write_csv_object_text_and_one_column_tables(tmp_path):
    t = _table(3, 500, objects=True)
    assert write_csv(tmp_path / "o.csv", t, COLUMNS).read_bytes() == _csv_oracle(t, COLUMNS)
    # One column: csv.writer writes a row of one empty field as "", not as a blank line.
    for c in COLUMNS:
        one = {c.name: t[c.name]}
        assert write_csv(tmp_path / "1.csv", one, [c]).read_bytes() == _csv_oracle(one, [c]), c.name


@pytest.mark.parametrize("seed", [0, 1])
def test_write_table_json_writes_the_bytes_of_json_dumps(tmp_path, seed):
    t = _table(seed, objects=seed == 1)
    meta = {"frame": "declared axes", "é": [1, 2]}
    got = write_table_json(tmp_path / "t.json", t, COLUMNS, schema_version="1", meta=meta)
    assert got.read_bytes() == _json_oracle(t, COLUMNS, meta)


def test_empty_tables(tmp_path):
    t = {k: v[:0] for k, v in _table(4, 10).items()}
    assert write_csv(tmp_path / "e.csv", t, COLUMNS).read_bytes() == _csv_oracle(t, COLUMNS)
    got = write_table_json(tmp_path / "e.json", t, COLUMNS, schema_version="1", meta={})
    assert got.read_bytes() == _json_oracle(t, COLUMNS, {})
    assert list(encode_rows(t, COLUMNS, style="jsonl")) == []


@pytest.mark.parametrize("block_rows", [1, 7, 4096])
def test_rows_do_not_depend_on_the_block_size(block_rows):
    t = _table(5, 900)
    for style in ("fixed_csv", "json_rows", "jsonl"):
        whole = b"".join(encode_rows(t, COLUMNS, style=style))
        assert b"".join(encode_rows(t, COLUMNS, style=style, block_rows=block_rows)) == whole


def test_jsonl_rows_are_the_json_dumps_of_each_cell():
    t = _table(6)
    # Past |x|·10^d ≈ 2^53 the old encoder's int64 digits were wrong; keep to its exact range.
    for c in COLUMNS:
        if c.kind == "float":
            x = t[c.name]
            x[(np.abs(x) < 1e15) & (np.abs(x) * 10.0**c.decimals >= 2**50)] = 2.5
    got = b"".join(encode_rows(t, COLUMNS, style="jsonl", block_rows=1000))
    assert got == _jsonl_oracle(t, COLUMNS)
    for line in got.decode("utf-8").splitlines():
        json.loads(line)  # every line is JSON


def _candidates(n, seed):
    rng = np.random.default_rng(seed)
    t = {}
    for c in CANDIDATE_COLUMNS:
        if c.kind == "float":
            t[c.name] = _floats(rng, n) / 1e3
        elif c.kind == "int":
            t[c.name] = rng.integers(-1, 200_000, n)
        elif c.kind == "bool":
            t[c.name] = rng.random(n) < 0.5
        else:
            t[c.name] = rng.choice(np.array(TEXTS), n)
    return t


def test_candidates_jsonl_is_the_header_and_the_json_rows(tmp_path):
    t = _candidates(2000, 7)
    for c in CANDIDATE_COLUMNS:
        if c.kind == "float":
            x = t[c.name]
            x[(np.abs(x) < 1e15) & (np.abs(x) * 10.0**c.decimals >= 2**50)] = -7.25
    lines = write_candidates(tmp_path / "c.jsonl", t, meta={"m": 1}, rows="all").read_bytes()
    first, _, rows = lines.partition(b"\n")
    assert json.loads(first)["table"] == "candidates"
    assert rows == _jsonl_oracle(t, CANDIDATE_COLUMNS)


def test_boundary_columns_round_trip_through_the_csv_module(tmp_path):
    # The real column set (its decimals and kinds), read back with csv.reader. Without a
    # lone CR: csv.writer (Python 3.11) leaves one unquoted under lineterminator="\n", and
    # the file keeps the module's bytes.
    texts = np.array([x for x in TEXTS if "\r" not in x])
    rng = np.random.default_rng(8)
    n = 400
    t = {}
    for c in BOUNDARY_COLUMNS:
        if c.kind == "float":
            t[c.name] = _floats(rng, n)
        elif c.kind == "int":
            t[c.name] = rng.integers(-1, 10**6, n)
        elif c.kind == "bool":
            t[c.name] = rng.random(n) < 0.5
        else:
            t[c.name] = rng.choice(texts, n)
    data = write_csv(tmp_path / "b.csv", t, BOUNDARY_COLUMNS).read_bytes()
    assert data == _csv_oracle(t, BOUNDARY_COLUMNS)
    rows = list(csv.reader(io.StringIO(data.decode("utf-8"), newline="")))
    assert rows[0] == [c.name for c in BOUNDARY_COLUMNS]
    assert len(rows) == n + 1
    for c, cells in zip(BOUNDARY_COLUMNS, zip(*rows[1:], strict=True), strict=True):
        if c.kind == "str":
            assert list(cells) == t[c.name].tolist()


def test_number_and_text_cells_at_their_edges(tmp_path):
    # Ties at the last decimal and next to them, 2^50 (the digits' exact limit), 2^53,
    # subnormals, 1e15 (where jsonl turns to repr); text with NUL inside or leading and
    # code points whose low byte is NUL. Against csv.writer and json.dumps, cell by cell.
    rng = np.random.default_rng(12)
    n = 6000
    edges = np.concatenate(
        [
            (rng.integers(-(10**7), 10**7, n) + 0.5) * 10.0 ** -rng.integers(0, 9, n),
            rng.integers(-(10**9), 10**9, n) * 5e-4,
            2.0**50 / 10.0 ** rng.integers(0, 9, n) + rng.integers(-3, 3, n),
            2.0**53 + rng.integers(-50, 50, n),
            np.frombuffer(rng.integers(1, 2**52, n).astype(np.int64).tobytes(), np.float64),
            [1e15, -1e15, np.nextafter(1e15, 0), 0.0, -0.0, np.nan, np.inf, -np.inf, 1e-7],
        ]
    )
    edges = rng.permutation(edges)
    m = len(edges)
    t = {c.name: edges.copy() for c in COLUMNS if c.kind == "float"}
    t["id"] = rng.integers(-2, 2**40, m)
    t["ok"] = rng.random(m) < 0.5
    texts = np.array(TEXTS + ["\x00lead", "\u0100", "a\u0100b", "\u0100\u0200", "x\x00"])
    t["text"] = rng.choice(texts, m)
    got = write_csv(tmp_path / "e.csv", t, COLUMNS)
    assert got.read_bytes() == _csv_oracle(t, COLUMNS)
    # The jsonl rule rounds the float product itself; past 2^50 its old oracle is inexact.
    for c in COLUMNS:
        if c.kind == "float":
            x = t[c.name]
            x[(np.abs(x) < 1e15) & (np.abs(x) * 10.0**c.decimals >= 2**50)] = 2.5
    assert b"".join(encode_rows(t, COLUMNS, style="jsonl")) == _jsonl_oracle(t, COLUMNS)


def test_tables_longer_than_one_squeeze(tmp_path):
    # A block's rows are squeezed 4,096 at a time (report.streams): the pieces of a
    # 16,384-row block join up, also where write_table_json turns line breaks into ",\n".
    t = _table(7, 10_000)
    got = write_table_json(tmp_path / "l.json", t, COLUMNS, schema_version="1", meta={})
    assert got.read_bytes() == _json_oracle(t, COLUMNS, {})
    assert write_csv(tmp_path / "l.csv", t, COLUMNS).read_bytes() == _csv_oracle(t, COLUMNS)
