"""Run tables from Python (inclination.run_tables) against the CSV files the same run writes."""

from __future__ import annotations

import json
from collections.abc import Mapping

import numpy as np
import pytest
from numpy.testing import assert_allclose

import inclination
from inclination.io.job import load_job
from inclination.io.writers import write_csv
from inclination.run_tables import RunTable
from inclination.synthetic import as_orientation_map, make_microstructure, sample_map

pd = pytest.importorskip("pandas", reason="the optional extra 'pandas' is not installed")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    d = tmp_path_factory.mktemp("run")
    micro = make_microstructure(box_um=(30.0, 20.0, 10.0), n_grains=5, rng=3, twins=1)
    write_csv(d / "m.csv", as_orientation_map(sample_map(micro, step_um=0.5, rng=4)))
    job = {
        "phases": [{"id": 1, "name": "matrix", "laue": "m-3m",
                    "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
        "map": {"path": "m.csv", "format": "csv", "angles": "deg",
                "axes": {"x": "right", "y": "down"}},
    }
    (d / "job.json").write_text(json.dumps(job))
    inclination.analyse(d / "job.json", d / "out")
    return inclination.run(load_job(d / "job.json")), d / "out"


def _csv_frame(path, columns):
    # What a pandas user would write to read the CSV with the columns' kinds.
    dtypes = {"int": "Int64", "float": "float64", "str": "string"}
    frame = pd.read_csv(
        path,
        dtype={c.name: dtypes[c.kind] for c in columns if c.kind in dtypes},
        true_values=["true"],
        false_values=["false"],
        keep_default_na=False,
        na_values={c.name: [""] for c in columns if c.kind != "bool"},
    )
    return frame


@pytest.mark.parametrize("name", ["grains", "segments", "boundaries"])
def test_to_pandas_matches_the_written_csv(run, name):
    analysis, out = run
    table = analysis.tables[name]
    df = table.to_pandas()
    ref = _csv_frame(out / f"{name}.csv", table.columns)
    assert list(df.columns) == list(ref.columns)
    assert len(df) == len(ref) > 0
    for c in table.columns:
        got, want = df[c.name], ref[c.name]
        assert got.dtype == want.dtype, c.name
        assert got.isna().tolist() == want.isna().tolist(), c.name
        if c.kind == "float":
            # The CSV rounds to the column's decimals (report.columns); half a unit in the last place.
            assert_allclose(got.to_numpy(), want.to_numpy(), rtol=0, atol=0.5 * 10.0**-c.decimals + 1e-12)
        else:
            assert got.fillna(0 if c.kind == "int" else "").tolist() == want.fillna(
                0 if c.kind == "int" else ""
            ).tolist(), c.name


def test_boundaries_is_a_read_only_mapping_of_arrays(run):
    analysis, _ = run
    b = analysis.boundaries
    assert isinstance(b, Mapping) and isinstance(b, RunTable)
    assert list(b) == [c.name for c in b.columns]
    with pytest.raises(ValueError, match="read-only"):
        b["length_um"][0] = 1.0
    with pytest.raises(TypeError):
        b["length_um"] = np.zeros(3)  # type: ignore[index]
    assert analysis.boundaries.n_rows == len(dict(b)["length_um"])


def test_unequal_columns_refused():
    from inclination.report.columns import Column

    with pytest.raises(ValueError, match=r"Expected columns of equal length, got lengths \[1, 2\]"):
        RunTable({"a": [1], "b": [1.0, 2.0]}, [Column("a", "int"), Column("b", "float")], name="t")
