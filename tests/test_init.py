"""``inclination init``: recognised columns, unit, grid and phases; a job that runs once filled.

The oracle is the map the tables and arrays were written from (a synthetic
microstructure, inclination.synthetic): the job ``init`` writes, with only its
placeholders filled, must read back the same orientations on the same grid.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.cli import main
from inclination.errors import InputError, SettingError
from inclination.io.init import PHASE_PRESETS, propose_job, write_job
from inclination.io.job import PLACEHOLDER, load_job
from inclination.io.writers import write_csv
from inclination.synthetic import as_orientation_map, make_microstructure, sample_map


def _omap(grid="square"):
    micro = make_microstructure(box_um=(30.0, 20.0, 10.0), n_grains=5, rng=3, twins=1)
    return as_orientation_map(sample_map(micro, step_um=0.5, rng=4, grid=grid))


@pytest.fixture(scope="module")
def square_map():
    return _omap()


def _fill(job_path, *, step_um=None):
    """Replace exactly the placeholders init left, as a user would."""
    job = json.loads(job_path.read_text())
    job["map"]["axes"] = {"x": "right", "y": "down"}
    job["map"]["data_frame_rotation"] = "identity"
    if step_um is not None:
        job["map"]["step_um"] = step_um
    for entry in job["phases"]:
        if isinstance(entry["laue"], str) and entry["laue"].startswith(PLACEHOLDER):
            entry.update(json.loads(json.dumps(PHASE_PRESETS["fcc"])))
            entry["name"] = "matrix"
    text = json.dumps(job)
    assert PLACEHOLDER not in text.replace(json.dumps(job.get("notes", [])), "")
    filled = job_path.with_name("filled.json")
    filled.write_text(text)
    return filled


def _rewrite_table(src, dst, *, order, names, delimiter, radians=False):
    """The writer's table with columns renamed, shuffled and re-delimited."""
    lines = src.read_text().splitlines()
    header = lines[0].split(",")
    rows = np.array([[float(c) for c in ln.split(",")] for ln in lines[1:]])
    if radians:
        rows[:, 2:5] = np.radians(rows[:, 2:5])
    cols = [header.index(c) for c in order]
    sep = " " if delimiter is None else delimiter
    out = [sep.join(names[c] for c in order)]
    out += [sep.join(repr(float(v)) for v in row[cols]) for row in rows]
    dst.write_text("\n".join(out) + "\n")
    return dst


_RENAMED = {
    "x_um": "X (µm)",
    "y_um": "Y (µm)",
    "phi1_deg": "Euler1",
    "Phi_deg": "Euler2",
    "phi2_deg": "Euler3",
    "phase": "Phase",
    "ci": "CI",
}


@pytest.mark.parametrize(
    ("delimiter", "fmt"), [(",", "csv"), ("\t", "tsv"), (None, "text"), (";", "csv")]
)
def test_init_renamed_shuffled_tables_read_back_the_map(tmp_path, square_map, delimiter, fmt):
    src = write_csv(tmp_path / "orig.csv", square_map)
    header = src.read_text().splitlines()[0].split(",")
    names = {**{h: h for h in header}, **_RENAMED}
    if delimiter is None:  # whitespace tables cannot hold spaces in their names
        names = {k: v.replace(" ", "") for k, v in names.items()}
    order = [header[k] for k in (4, 0, 5, 2, 1, 3, *range(6, len(header)))]
    table = _rewrite_table(src, tmp_path / "m.dat", order=order, names=names, delimiter=delimiter)
    out = tmp_path / "job.json"
    prop = propose_job(table, job_dir=tmp_path)
    assert prop.job["map"]["format"] == fmt
    assert prop.job["map"]["angles"] == "deg"
    assert prop.job["map"]["columns"]["phi1"] == "Euler1"
    assert prop.job["map"]["columns"]["x_um"] == names["x_um"]
    assert prop.job["map"]["grid"] == "square" and prop.job["map"]["step_um"] == 0.5
    assert prop.job["notes"], "every guess is listed"
    write_job(prop, out)
    job = load_job(_fill(out))
    back = job.read_surface_map()
    assert back.shape == square_map.shape
    # 1e-5 degree text (inclination.io.writers.write_csv) and float32 quaternions (eps 1.2e-7).
    assert_allclose(np.abs(np.sum(back.quat * square_map.quat, axis=-1)), 1.0, rtol=0, atol=5e-7)


def test_init_recognises_radians_from_values(tmp_path, square_map):
    src = write_csv(tmp_path / "orig.csv", square_map)
    header = src.read_text().splitlines()[0].split(",")
    names = {h: h.replace("_deg", "") for h in header}
    table = _rewrite_table(
        src, tmp_path / "m.csv", order=header, names=names, delimiter=",", radians=True
    )
    prop = propose_job(table)
    assert prop.job["map"]["angles"] == "rad"
    assert prop.job["map"]["columns"]["Phi"] == "Phi"
    assert any("guessed from the values" in n for n in prop.job["notes"])
    write_job(prop, tmp_path / "job.json")
    back = load_job(_fill(tmp_path / "job.json")).read_surface_map()
    assert_allclose(np.abs(np.sum(back.quat * square_map.quat, axis=-1)), 1.0, rtol=0, atol=5e-7)


def test_init_hexagonal_grid_then_analyse(tmp_path):
    omap = _omap("hexagonal")
    table = write_csv(tmp_path / "hex.csv", omap)
    out = tmp_path / "job.json"
    assert main(["init", str(table), "--out", str(out), "--phase", "1=fcc"]) == 0
    job = json.loads(out.read_text())
    assert job["map"]["grid"] == "hexagonal"
    assert job["map"]["step_um"] == pytest.approx(0.5, rel=1e-9, abs=0)
    assert main(["analyse", str(_fill(out)), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    assert (tmp_path / "run" / "boundaries.csv").is_file()


def test_init_csv_then_analyse_and_refuses_to_overwrite(tmp_path, square_map, capsys):
    table = write_csv(tmp_path / "m.csv", square_map)
    out = tmp_path / "job.json"
    assert main(["init", str(table), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "map.axes" in printed and "data_frame_rotation" in printed
    assert "phases (id 1)" in printed
    before = out.read_text()
    assert main(["init", str(table), "--out", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert out.read_text() == before
    assert main(["init", str(table), "--out", str(out), "--force", "--phase", "1=bcc"]) == 0
    assert json.loads(out.read_text())["phases"][0]["laue"] == "m-3m"
    assert main(["analyse", str(_fill(out)), "--out", str(tmp_path / "run"), "--quiet"]) == 0


def test_init_on_the_demo_maps(tmp_path):
    from inclination.demo import write_demo_scenario

    paths = write_demo_scenario(tmp_path / "demo")
    reference = load_job(paths["job"])
    for key, index in (("surface", None), ("serial", len(reference.sections) - 1)):
        out = tmp_path / "demo" / f"init-{key}.json"
        prop = propose_job(paths[key], job_dir=out.parent, phases={1: "fcc"})
        assert prop.job["map"]["format"] == "npz" and prop.job["map"]["angles"] == "deg"
        assert any("step_um" in line for line in prop.to_decide)
        write_job(prop, out)
        filled = _fill(out, step_um=0.5)
        back = load_job(filled).read_surface_map()
        # The demo's own job declares the same axes, frame and step (inclination.demo).
        ref = reference.read_surface_map() if index is None else reference.read_section_map(index)
        assert np.array_equal(back.quat, ref.quat)
    assert main(["analyse", str(filled), "--out", str(tmp_path / "run"), "--quiet"]) == 0


def test_init_hdf5_proposes_paths_and_runs(tmp_path, square_map):
    h5py = pytest.importorskip("h5py", reason="the optional extra 'hdf5' (h5py) is not installed")
    xy = square_map.positions_declared_um()
    with h5py.File(tmp_path / "m.h5", "w") as f:
        f["scan/data/euler_deg"] = square_map.euler_deg_declared()
        f["scan/data/phase_id"] = np.asarray(square_map.phase)
        f["scan/data/x"] = xy[..., 0]
        f["scan/data/y"] = xy[..., 1]
        f["scan/data/ci"] = np.ones(square_map.shape)
        f["scan/header/step"] = np.array([0.5])
    out = tmp_path / "job.json"
    assert main(["init", str(tmp_path / "m.h5"), "--out", str(out)]) == 0
    job = json.loads(out.read_text())
    assert job["map"]["datasets"] == {
        "euler": "scan/data/euler_deg",
        "phase": "scan/data/phase_id",
        "x": "scan/data/x",
        "y": "scan/data/y",
        "quality": {"ci": "scan/data/ci"},
    }
    assert job["map"]["step_um"] == 0.5 and job["map"]["grid"] == "square"
    assert main(["analyse", str(_fill(out)), "--out", str(tmp_path / "run"), "--quiet"]) == 0


def test_placeholder_left_is_one_line_naming_the_field(tmp_path, square_map, capsys):
    table = write_csv(tmp_path / "m.csv", square_map)
    out = tmp_path / "job.json"
    assert main(["init", str(table), "--out", str(out), "--phase", "1=fcc"]) == 0
    capsys.readouterr()
    assert main(["analyse", str(out), "--out", str(tmp_path / "run")]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err
    assert "/map/axes/x" in err and "placeholder" in err
    job = json.loads(out.read_text())
    job["map"]["axes"] = {"x": "right", "y": "down"}
    job["map"]["data_frame_rotation"] = "identity"
    job["phases"][0]["lattice"]["a"] = f"{PLACEHOLDER}: lattice length"
    out.write_text(json.dumps(job))
    with pytest.raises(InputError, match=r"/phases/0/lattice/a: Expected a value in place"):
        load_job(out)


def test_init_refuses_unknown_preset_and_unrecognised_columns(tmp_path):
    p = tmp_path / "m.csv"
    p.write_text("a,b,c\n1,2,3\n")
    with pytest.raises(InputError, match=r"Expected columns recognisable as \['x_um'"):
        propose_job(p)
    with pytest.raises(SettingError, match=r"Expected a phase preset among \('fcc'"):
        propose_job(p, phases={1: "fcc-like"})


def test_init_on_a_tiff_stack(tmp_path, square_map):
    from inclination.io.writers import write_tiff

    tif, _ = write_tiff(tmp_path / "m.tif", square_map)
    prop = propose_job(tif, phases={1: "fcc"})
    assert prop.job["map"]["format"] == "tiff" and prop.job["map"]["angles"] == "deg"
    write_job(prop, tmp_path / "job.json")
    back = load_job(_fill(tmp_path / "job.json", step_um=0.5)).read_surface_map()
    assert np.array_equal(back.valid, square_map.valid)
    # float32 channels (inclination.io.writers.write_tiff) and float32 quaternions.
    assert_allclose(np.abs(np.sum(back.quat * square_map.quat, axis=-1)), 1.0, rtol=0, atol=5e-7)
