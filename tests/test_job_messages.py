"""Messages a newcomer meets: accepted names listed, the nearest suggested, a wrong delimiter named.

Each message is checked against the rule it states (style guide, "Errors"): the
field, what was expected, what came, and never a parameter name from inside the code.
"""

from __future__ import annotations

import json

import pytest

from inclination.cli import main
from inclination.errors import InputError
from inclination.io.job import job_from_dict, load_job
from inclination.maps import read_map

_PHASE = {
    "id": 1,
    "name": "matrix",
    "laue": "m-3m",
    "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
}
_CSV = "x_um,y_um,phi1_deg,Phi_deg,phi2_deg,phase\n0,0,10,20,30,1\n1,0,10,20,30,1\n"


def _job(tmp_path, **map_fields):
    (tmp_path / "m.csv").write_text(_CSV)
    spec = {"path": "m.csv", "format": "csv", "angles": "deg", "axes": {"x": "right", "y": "down"}}
    return {"phases": [dict(_PHASE)], "map": {**spec, **map_fields}}


def test_unknown_field_suggests_the_nearest(tmp_path):
    doc = _job(tmp_path, setp_um=0.5)
    with pytest.raises(InputError, match=r"/map/setp_um: Expected only the fields \(.*'step_um'.*\), got 'setp_um' \(did you mean 'step_um'\?\)"):
        job_from_dict(doc, base_dir=tmp_path)


def test_unknown_column_role_lists_roles_and_suggests(tmp_path):
    doc = _job(tmp_path, columns={"x": "X"})
    with pytest.raises(InputError, match=r"/map/columns/x: Expected only the fields \('x_um', 'y_um', 'phi1', 'Phi', 'phi2', 'phase'\), got 'x' \(did you mean 'x_um'\?\)"):
        job_from_dict(doc, base_dir=tmp_path)


def test_enum_value_suggests_the_nearest(tmp_path):
    doc = _job(tmp_path, grid="hexagon")
    with pytest.raises(InputError, match=r"/map/grid: Expected one of \('square', 'hexagonal'\), got \"hexagon\" \(did you mean 'hexagonal'\?\)"):
        job_from_dict(doc, base_dir=tmp_path)


def test_missing_column_lists_the_mapping_keys_and_the_nearest(tmp_path):
    (tmp_path / "m.csv").write_text(_CSV.replace("phi1_deg", "phi1"))
    spec = {"path": str(tmp_path / "m.csv"), "format": "csv", "angles": "deg",
            "axes": {"x": "right", "y": "down"}}
    with pytest.raises(InputError, match=r"Expected a column 'phi1_deg' for 'phi1', got columns \[.*\] \(did you mean 'phi1'\?\). Name the file's columns in the job's map.columns under the keys \('x_um', 'y_um', 'phi1', 'Phi', 'phi2', 'phase'\)"):
        read_map(spec)


@pytest.mark.parametrize(
    ("fmt", "text", "said"),
    [
        ("tsv", _CSV, "splits at comma into 6"),
        ("csv", _CSV.replace(",", "\t"), "splits at tab into 6"),
        ("csv", _CSV.replace(",", " "), "splits at spaces or tabs into 6"),
        ("text", _CSV.replace(",", ";"), "splits at semicolon into 6"),
    ],
)
def test_wrong_delimiter_is_named(tmp_path, fmt, text, said):
    (tmp_path / "m.txt").write_text(text)
    spec = {"path": str(tmp_path / "m.txt"), "format": fmt, "angles": "deg",
            "axes": {"x": "right", "y": "down"}}
    with pytest.raises(InputError, match=rf"header: Expected columns separated by .*, got a single column .* that {said}: the file looks delimited otherwise"):
        read_map(spec)


def test_family_without_braces_names_the_field_not_a_parameter(tmp_path):
    doc = _job(tmp_path)
    doc["phases"][0]["families"] = ["111"]
    path = tmp_path / "job.json"
    path.write_text(json.dumps(doc))
    with pytest.raises(InputError) as info:
        load_job(path)
    message = str(info.value)
    assert "/phases/0/families/0" in message
    assert "Expected the family to be indices in (), {}, [] or <>" in message
    assert "`text`" not in message


def test_cli_message_is_one_line_exit_2(tmp_path, capsys):
    doc = _job(tmp_path, grid="hexagon")
    path = tmp_path / "job.json"
    path.write_text(json.dumps(doc))
    assert main(["analyse", str(path), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "did you mean 'hexagonal'" in err
