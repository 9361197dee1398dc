"""The job file: schema, defaults, phases, paths and one-line errors (schemas/job.schema.json)."""

from __future__ import annotations

import copy
import json

import jsonschema
import numpy as np
import pytest

from inclination.errors import InputError
from inclination.io.job import SCHEMA_VERSION, job_from_dict, load_job
from inclination.io.schemas import load_schema, schema_path

CUBIC = {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}

# A complete example job, with a field of every part of schemas/job.schema.json.
DESIGN_EXAMPLE = {
    "phases": [
        {
            "id": 1,
            "name": "matrix",
            "laue": "m-3m",
            "lattice": CUBIC,
            "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}"],
        }
    ],
    "map": {
        "path": "surface.csv",
        "format": "csv",
        "step_um": 0.5,
        "grid": "square",
        "angles": "deg",
        "axes": {"x": "right", "y": "down"},
    },
    "grains": {"threshold_deg": 5, "min_pixels": 8},
    "traces": {"min_length_um": 5, "tolerance_um": 0.75},
    "sections": [
        {
            "kind": "cross-section",
            "line_um": [[10, 40], [90, 40]],
            "viewer_at_um": [50, 45],
            "imaging_tilt_deg": 52,
            "boundaries": [{"along_um": 23.4, "image_angle_deg": 41.0, "descends": "right"}],
        },
        {
            "kind": "serial",
            "map": {
                "path": "depth1.csv",
                "format": "csv",
                "step_um": 0.5,
                "grid": "square",
                "angles": "deg",
                "axes": {"x": "right", "y": "down"},
            },
            "depth_um": 1.5,
        },
    ],
}

MAP_TEXT = "x_um,y_um,phi1_deg,Phi_deg,phi2_deg,phase\n0,0,10,20,30,1\n0.5,0,10,20,30,1\n"


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "surface.csv").write_text(MAP_TEXT)
    (tmp_path / "depth1.csv").write_text(MAP_TEXT)
    return tmp_path


def write_job(folder, doc, name="job.json"):
    path = folder / name
    path.write_text(json.dumps(doc))
    return path


def minimal(**changes):
    doc = {
        "phases": [{"id": 1, "name": "matrix", "laue": "m-3m", "lattice": dict(CUBIC)}],
        "map": {
            "path": "surface.csv",
            "format": "csv",
            "angles": "deg",
            "step_um": 0.5,
            "axes": {"x": "right", "y": "down"},
        },
    }
    doc.update(changes)
    return doc


def test_design_example_loads_with_defaults(folder):
    path = write_job(folder, DESIGN_EXAMPLE)
    job = load_job(path)
    assert job.source_path == str(path)
    assert job.phase_ids == (1,) and job.phases[1].name == "matrix"
    assert job.map["path"] == str((folder / "surface.csv").resolve())
    assert job.map["data_frame_rotation"] == "identity" and job.map["columns"] == {}
    assert job.grains == {
        "threshold_deg": 5,
        "min_pixels": 8,
        "small_grains": "merge",
        "fill_isolated": False,
        "low_angle_deg": 2,
        "subgrain_network": False,
    }
    assert job.traces == {"min_length_um": 5, "tolerance_um": 0.75}
    assert job.planes == {
        "k": 2,
        "floor_deg": 1,
        "max_tolerance_deg": 5,
        "sigma_criterion": "brandon",
        "candidate_rows": "fit_or_shared",
    }
    cross, serial = job.sections
    assert cross["face_inclination_deg"] == 90
    assert cross["match_tolerance_um"] == 1.0  # 2 steps of 0.5 µm
    assert cross["boundaries"][0]["angle_sigma_deg"] == 1
    assert serial["map"]["path"] == str((folder / "depth1.csv").resolve())
    assert serial["depth_sigma_um"] is None
    # raw keeps the paths as written, defaults filled, and is JSON-ready for summary.json
    assert job.raw["map"]["path"] == "surface.csv"
    assert job.raw["schema_version"] == SCHEMA_VERSION
    assert json.loads(json.dumps(job.raw))["grains"]["small_grains"] == "merge"
    assert job.base_dir == folder


def test_filled_job_validates_against_the_schema(folder):
    job = load_job(write_job(folder, DESIGN_EXAMPLE))
    jsonschema.Draft202012Validator(load_schema("job.schema.json")).validate(job.raw)


def test_trace_defaults_in_steps(folder):
    job = load_job(write_job(folder, minimal()))
    # Schema: null lengths become 10 steps and 1.5 steps of the declared map step.
    assert job.traces == {"min_length_um": 5.0, "tolerance_um": 0.75}
    doc = minimal()
    del doc["map"]["step_um"]
    job = load_job(write_job(folder, doc))
    assert job.traces == {"min_length_um": None, "tolerance_um": None}
    doc["map"].update(step_x_um=0.4, step_y_um=0.8)
    job = load_job(write_job(folder, doc))
    assert job.traces["tolerance_um"] == pytest.approx(0.6, rel=1e-12, abs=0)


def test_input_dict_is_not_modified(folder):
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    job_from_dict(doc, base_dir=folder)
    assert doc == DESIGN_EXAMPLE


def test_reads_the_surface_and_section_maps(folder):
    job = load_job(write_job(folder, DESIGN_EXAMPLE))
    omap = job.read_surface_map()
    assert omap.shape == (1, 2) and omap.step_x_um == 0.5
    assert job.read_section_map(1).shape == (1, 2)
    with pytest.raises(ValueError, match="Expected `index` to point at a serial section"):
        job.read_section_map(0)


def test_surface_map_errors_name_the_job_pointer(folder):
    (folder / "surface.csv").write_text(MAP_TEXT.replace("30,1\n0.5", "30,7\n0.5"))
    job = load_job(write_job(folder, DESIGN_EXAMPLE))
    with pytest.raises(InputError, match=r"surface.csv: line 2: Expected phase ids among the job"):
        job.read_surface_map()


def test_tiff_sidecar_path_resolved(folder):
    (folder / "m.tif").write_bytes(b"")
    (folder / "m.tif.json").write_text("{}")
    doc = minimal()
    doc["map"].update(path="m.tif", format="tiff", grid="square")
    job = load_job(write_job(folder, doc))
    assert job.map["sidecar"] == str((folder / "m.tif.json").resolve())
    (folder / "m.tif.json").unlink()
    with pytest.raises(
        InputError, match=r"job.json: /map/sidecar: Expected the TIFF's JSON sidecar"
    ):
        load_job(write_job(folder, doc))


def test_serial_section_with_indent(folder):
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    serial = doc["sections"][1]
    del serial["depth_um"]
    serial["indent"] = {"diagonal_before_um": 30.0, "diagonal_after_um": 23.0}
    serial["fiducials"] = [{"surface_um": [1, 2], "section_um": [1.5, 2.5]}]
    job = load_job(write_job(folder, doc))
    assert job.sections[1]["indent"]["diagonal_after_um"] == 23.0


def test_job_from_dict_without_a_file(folder):
    job = job_from_dict(minimal(), base_dir=folder)
    assert job.source_path is None and job.base_dir is None
    assert job.sections == ()


def test_schema_files_are_found_and_valid():
    for name in ("job.schema.json", "tiff-sidecar.schema.json"):
        schema = load_schema(name)
        jsonschema.Draft202012Validator.check_schema(schema)
        assert schema["schema_version"] == 1
        assert schema_path(name).is_file()
    with pytest.raises(ValueError, match="Expected `name` to be a schema file name"):
        schema_path("../secrets.txt")
    with pytest.raises(FileNotFoundError, match="Expected the schema 'nope.json'"):
        schema_path("nope.json")


# ----------------------------------------------------------------------------- bad input


def expect(folder, doc, pattern):
    path = write_job(folder, doc)
    with pytest.raises(InputError, match=pattern) as info:
        load_job(path)
    message = str(info.value)
    assert "\n" not in message and message.startswith(str(path))
    return info.value


def test_unknown_top_level_field(folder):
    err = expect(folder, minimal(colour="blue"), r"job.json: /colour: Expected only the fields")
    assert err.pointer == "/colour"


def test_missing_required_fields(folder):
    doc = minimal()
    del doc["map"]["angles"]
    expect(folder, doc, r"/map/angles: Expected the required field 'angles', got none")
    expect(folder, {"map": minimal()["map"]}, r": /phases: Expected the required field 'phases'")


def test_unknown_laue_class(folder):
    doc = minimal()
    doc["phases"][0]["laue"] = "cubic"
    expect(folder, doc, r"/phases/0/laue: Expected one of \('-1', '2/m', .*'m-3m'\), got \"cubic\"")


def test_impossible_lattice_angles(folder):
    doc = minimal()
    # α + β + γ >= 360° cannot form a cell (the triple-product condition; lattice.py)
    doc["phases"][0]["lattice"].update(alpha=120, beta=120, gamma=125)
    expect(folder, doc, r"/phases/0/lattice.*360")


def test_wrong_types_and_ranges(folder):
    doc = minimal()
    doc["map"]["step_um"] = 0
    expect(folder, doc, r"/map/step_um: Expected a number > 0, got 0\.")
    doc = minimal()
    doc["map"]["step_um"] = "half"
    expect(folder, doc, r"/map/step_um: Expected a number, got a string \"half\"")
    doc = minimal(grains={"threshold_deg": 5, "min_pixels": 2.5})
    expect(folder, doc, r"/grains/min_pixels: Expected a whole number, got a number 2.5")
    doc = minimal(grains={"small_grains": "drop"})
    expect(folder, doc, r"/grains/small_grains: Expected one of \('merge', 'unindex'\)")
    doc = minimal(schema_version=2)
    expect(folder, doc, r"/schema_version: Expected 1, got 2")
    doc = minimal(phases=[])
    expect(folder, doc, r"/phases: Expected at least 1 items, got 0")
    doc = minimal()
    doc["phases"][0]["name"] = ""
    expect(folder, doc, r"/phases/0/name: Expected a non-empty string")
    doc = minimal()
    doc["map"]["delimiter"] = ";;"
    expect(folder, doc, r"/map/delimiter: Expected a string of at most 1 characters")
    doc = minimal()
    doc["map"]["axes"] = {"x": "right", "y": "inward"}
    expect(folder, doc, r"/map/axes/y: Expected one of \('right', 'left', 'up', 'down'\)")
    doc = minimal()
    doc["map"]["data_frame_rotation"] = "z45"
    expect(folder, doc, r"/map/data_frame_rotation: Expected one of \('identity', 'x90'")
    doc = minimal()
    doc["map"]["data_frame_rotation"] = {"axis": [0, 0, 1]}
    expect(folder, doc, r"/map/data_frame_rotation/angle_deg: Expected the required field")
    doc = minimal()
    doc["map"]["step_x_um"] = 0.5
    del doc["map"]["step_um"]
    expect(folder, doc, r"/map: Expected 'step_y_um' together with 'step_x_um'")


def test_path_that_does_not_exist(folder):
    doc = minimal()
    doc["map"]["path"] = "missing.csv"
    expect(folder, doc, r"/map/path: Expected an existing map file, got no file at .*missing.csv")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][1]["map"]["path"] = "gone.csv"
    expect(folder, doc, r"/sections/1/map/path: Expected an existing map file")


def test_missing_empty_and_invalid_job_files(folder):
    with pytest.raises(InputError, match=r"nope.json: Expected an existing job file"):
        load_job(folder / "nope.json")
    (folder / "empty.json").write_text("  \n")
    with pytest.raises(InputError, match=r"empty.json: Expected a JSON object, got an empty file"):
        load_job(folder / "empty.json")
    (folder / "bad.json").write_text('{"phases": [,]}')
    with pytest.raises(InputError, match=r"bad.json: line 1, column 13: Expected valid JSON"):
        load_job(folder / "bad.json")
    (folder / "list.json").write_text("[1, 2]")
    with pytest.raises(InputError, match=r"list.json: /: Expected a JSON object at the top level"):
        load_job(folder / "list.json")
    (folder / "latin.json").write_bytes(b'{"name": "\xe9"}')
    with pytest.raises(InputError, match=r"latin.json: Expected UTF-8 text"):
        load_job(folder / "latin.json")


def test_duplicate_phase_ids(folder):
    doc = minimal()
    doc["phases"].append({"id": 1, "name": "other", "laue": "m-3m", "lattice": dict(CUBIC)})
    expect(folder, doc, r"/phases/1/id: Expected distinct phase ids, got 1 again")


def test_section_errors(folder):
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][1]["indent"] = {"diagonal_before_um": 30, "diagonal_after_um": 20}
    expect(folder, doc, r"/sections/1: Expected at most one of \('depth_um', 'indent'\), got both")
    # Neither is allowed (the depth is then estimated from the coherent twins), but a σ
    # with no depth to qualify is refused.
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    del doc["sections"][1]["depth_um"]
    doc["sections"][1]["depth_sigma_um"] = 0.2
    expect(folder, doc, r"/sections/1/depth_sigma_um: Expected depth_um or indent beside")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    del doc["sections"][1]["depth_um"]
    doc["sections"][1]["indent"] = {"diagonal_before_um": 20, "diagonal_after_um": 25}
    expect(folder, doc, r"/sections/1/indent: Expected the indent diagonal to shrink")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["viewer_at_um"] = [30, 40]
    expect(folder, doc, r"/sections/0/viewer_at_um: Expected the viewer point off the section")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["line_um"] = [[10, 40], [10, 40]]
    expect(folder, doc, r"/sections/0/line_um: Expected two distinct points")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["boundaries"][0]["along_um"] = 95
    expect(folder, doc, r"/sections/0/boundaries/0/along_um: Expected along_um within the section")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["boundaries"][0]["descends"] = "down"
    expect(folder, doc, r"/sections/0/boundaries/0/descends: Expected one of \('left', 'right'\)")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["kind"] = "slice"
    expect(folder, doc, r"/sections/0/kind: Expected one of \('cross-section', 'serial'\)")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["imaging_tilt_deg"] = 95
    expect(folder, doc, r"/sections/0/imaging_tilt_deg: Expected a number <= 90, got 95")
    doc = copy.deepcopy(DESIGN_EXAMPLE)
    doc["sections"][0]["depth_um"] = 3
    expect(folder, doc, r"/sections/0/depth_um: Expected only the fields \('kind', 'name'")


def test_long_values_are_shortened(folder):
    doc = minimal()
    doc["map"]["format"] = "x" * 200
    err = expect(folder, doc, r"/map/format: Expected one of .* got \"x+\.\.\.")
    assert len(str(err)) < 400


def test_error_pointer_escapes_special_characters(folder):
    doc = minimal()
    doc["map"]["a/b"] = 1
    err = expect(folder, doc, r"/map/a~1b: Expected only the fields")
    assert err.pointer == "/map/a~1b"
    assert np.isfinite(len(err.message))
