"""Maps by tiles (inclination.tiles): the whole-map path as the oracle, on synthetic samples.

The same map is read whole from npz and in 4 × 4 chunks from zarr; the grains must be the
same partition (here: the same ids too) and the segments the same to within 0.5 step (end
points) and 0.1° (angles). The synthetic microstructure (inclination.synthetic) is the
ground truth of the map; the whole-map path is itself checked against it and against
scikit-image's labelling in tests/test_grains.py and tests/test_network.py.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

pytest.importorskip("zarr", reason="the optional extra 'tiles' (zarr) is not installed")
pytest.importorskip("dask", reason="the optional extra 'tiles' (dask) is not installed")

from inclination.cli import main  # noqa: E402
from inclination.crystal.lattice import Lattice  # noqa: E402
from inclination.crystal.phases import Phase  # noqa: E402
from inclination.errors import InputError, SettingError  # noqa: E402
from inclination.grains import segment_grains  # noqa: E402
from inclination.io.chunked import write_zarr_map  # noqa: E402
from inclination.io.writers import write_npz  # noqa: E402
from inclination.maps import read_map  # noqa: E402
from inclination.network import boundary_network  # noqa: E402
from inclination.synthetic import as_orientation_map, make_microstructure, sample_map  # noqa: E402
from inclination.tiles import (  # noqa: E402
    TiledMap,
    boundary_network_tiled,
    read_zarr_map,
    segment_grains_tiled,
)
from inclination.traces import fit_segments  # noqa: E402

STEP = 0.5
CU = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90), ("{1 1 1}",))


def _spec(path, fmt, grid):
    return {
        "path": str(path),
        "format": fmt,
        "angles": "deg",
        "step_um": STEP,
        "grid": grid,
        "axes": {"x": "right", "y": "down"},
    }


def _write_pair(folder, grid, *, shape=(120, 116), seed=3):
    """The same synthetic map as npz (read whole) and as zarr in 4 × 4 chunks."""
    micro = make_microstructure(box_um=(62.0, 62.0, 20.0), n_grains=30, rng=seed, twins=3)
    sample = sample_map(
        micro, step_um=STEP, rng=seed + 1, shape=shape, grid=grid, nonindexed_fraction=0.03
    )
    npz = write_npz(folder / f"{grid}.npz", as_orientation_map(sample))
    with np.load(npz) as f:
        euler, phase = f["euler_deg"], f["phase"]
    chunks = (-(-shape[0] // 4), -(-shape[1] // 4))
    zarr_path = folder / f"{grid}.zarr"
    write_zarr_map(zarr_path, euler, phase, chunks_px=chunks)
    return npz, zarr_path


@pytest.fixture(scope="module", params=["square", "hexagonal"])
def pair(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp(request.param)
    npz, zarr_path = _write_pair(folder, request.param)
    omap = read_map(_spec(npz, "npz", request.param))
    tmap = read_zarr_map(_spec(zarr_path, "zarr", request.param), phase_ids=(1,))
    return omap, tmap


def _same_partition(a, b):
    """Labels a and b split the map the same way (a bijection between their ids)."""
    pairs = np.unique(np.stack([a.ravel(), b.ravel()]), axis=1)
    return np.unique(pairs[0]).size == pairs.shape[1] and np.unique(pairs[1]).size == pairs.shape[1]


def test_zarr_reader_gives_the_npz_map_bit_for_bit(pair):
    omap, tmap = pair
    assert tmap.tile_px[0] >= 30 and tmap.shape == omap.shape
    whole = tmap.read(slice(0, omap.shape[0]), slice(0, omap.shape[1]))
    assert whole.quat.tobytes() == omap.quat.tobytes()
    assert_array_equal(whole.valid, omap.valid)
    assert whole.axes.origin_um == omap.axes.origin_um
    # read_map reads the same store whole (a serial section's map, say): the same map too.
    zarr_path = tmap.provenance["source_path"]
    read_whole = read_map(_spec(zarr_path, "zarr", omap.grid))
    assert read_whole.quat.tobytes() == omap.quat.tobytes()
    assert read_whole.provenance["reader"] == "zarr arrays"


@pytest.mark.parametrize(
    "options",
    [
        {"min_pixels": 1},
        {"min_pixels": 8, "small_grains": "merge"},
        {"min_pixels": 12, "small_grains": "unindex", "fill_isolated": True},
    ],
)
def test_tiled_grains_are_the_whole_maps(pair, options):
    omap, tmap = pair
    whole = segment_grains(omap, [CU], threshold_deg=5.0, **options)
    tiled = segment_grains_tiled(tmap, [CU], threshold_deg=5.0, **options)
    assert whole.n_grains > 20
    assert _same_partition(whole.labels, tiled.labels)
    # Stronger than the partition: the same ids (raster order of each grain's first point).
    assert_array_equal(tiled.labels, whole.labels)
    assert tiled.cleanup == whole.cleanup
    for name in ("grain_id", "phase", "area_px", "touches_edge"):
        assert_array_equal(tiled.grains[name], whole.grains[name], err_msg=name)
    for name in ("area_um2", "centroid_x_um", "centroid_y_um"):
        assert_allclose(tiled.grains[name], whole.grains[name], rtol=1e-12, atol=1e-9)
    # Float32 sums in another order: equal to well under the 0.5° noise of the sample.
    qa, qb = tiled.grains["quat"], whole.grains["quat"]
    ok = np.isfinite(qb[:, 0])
    assert_array_equal(np.isfinite(qa[:, 0]), ok)
    assert_allclose(np.abs(np.einsum("ni,ni->n", qa[ok], qb[ok])), 1.0, rtol=0, atol=1e-9)
    for name in ("spread_mean_deg", "spread_max_deg"):
        assert_allclose(tiled.grains[name], whole.grains[name], rtol=0, atol=1e-3, err_msg=name)


def _segments(omap_or_tiles, gm, net):
    return fit_segments(net, step_um=STEP, grid=omap_or_tiles.grid)


def test_tiled_segments_are_the_whole_maps(pair):
    omap, tmap = pair
    whole_gm = segment_grains(omap, [CU], min_pixels=8)
    tiled_gm = segment_grains_tiled(tmap, [CU], min_pixels=8)
    whole_net = boundary_network(omap, whole_gm, [CU])
    tiled_net = boundary_network_tiled(tmap, tiled_gm, [CU])
    assert_array_equal(tiled_net.offsets, whole_net.offsets)
    assert_array_equal(tiled_net.pixel_pairs, whole_net.pixel_pairs)
    assert_array_equal(tiled_net.closed, whole_net.closed)
    a = _segments(omap, whole_gm, whole_net)
    b = _segments(tmap, tiled_gm, tiled_net)
    assert a["segment_id"].size > 50
    assert_array_equal(b["grain_a"], a["grain_a"])
    assert_array_equal(b["grain_b"], a["grain_b"])
    for end in ("x0_um", "y0_um", "x1_um", "y1_um"):
        assert_allclose(b[end], a[end], rtol=0, atol=0.5 * STEP, err_msg=end)
    fin = np.isfinite(a["trace_angle_deg"])
    assert_array_equal(np.isfinite(b["trace_angle_deg"]), fin)
    diff = (b["trace_angle_deg"][fin] - a["trace_angle_deg"][fin] + 90.0) % 180.0 - 90.0
    assert_allclose(diff, 0.0, rtol=0, atol=0.1)
    assert_allclose(b["misorientation_deg"], a["misorientation_deg"], rtol=0, atol=1e-6)


def test_tiles_of_a_map_in_memory_match_odd_tile_sizes(pair):
    # Tiles that do not divide the map, of an odd size (rounded to even rows on hexagonal).
    omap, _ = pair
    whole = segment_grains(omap, [CU], min_pixels=8)
    tiled = segment_grains_tiled(TiledMap.from_orientation_map(omap, tile_px=(17, 23)), [CU])
    assert_array_equal(tiled.labels, whole.labels)


@pytest.mark.parametrize(
    "change",
    [
        {"angles": "rad"},
        {"axes": {"x": "left", "y": "up"}, "rotation_sense": "active"},
        {"data_frame_rotation": {"axis": [1, 2, 3], "angle_deg": 35}},
    ],
)
def test_zarr_tiles_are_the_whole_read_of_the_store_for_any_declared_frame(tmp_path, change):
    # The tile reader converts in blocks; inclination.maps.read_map reads the same store
    # whole through the readers' own conversion: the same float32 planes, bit for bit.
    from inclination.crystal.rotations import quat_as_euler_deg, random_quat

    rng = np.random.default_rng(5)
    euler = quat_as_euler_deg(random_quat(15 * 14, rng=rng)).reshape(15, 14, 3)
    euler[3, 4] = np.nan
    phase = np.ones((15, 14), np.int32)
    phase[7, 2] = 0
    angles = change.get("angles", "deg")
    values = np.deg2rad(euler) if angles == "rad" else euler
    write_zarr_map(tmp_path / "m.zarr", values, phase, chunks_px=(4, 5), angles=angles)
    spec = {**_spec(tmp_path / "m.zarr", "zarr", "square"), **change}
    tmap = read_zarr_map(spec, phase_ids=(1,))
    whole = read_map(spec)
    tiled = tmap.read(slice(0, 15), slice(0, 14))
    assert tiled.quat.tobytes() == whole.quat.tobytes()
    assert_array_equal(tiled.valid, whole.valid)
    assert not tiled.valid[3, 4] and not tiled.valid[7, 2]
    # Tile by tile, the same values again.
    for rows, cols in tmap.tiles():
        assert tmap.read(rows, cols).quat.tobytes() == whole.quat[rows, cols].tobytes()


def test_cache_tiles_converts_each_tile_once_and_gives_the_same_map(pair, tmp_path):
    # Reads of single tiles, of bands across tiles and of the whole map, from two threads:
    # each tile is converted once (counted at the source), and every read gives the
    # source's values bit for bit.
    import dataclasses
    import threading
    from concurrent.futures import ThreadPoolExecutor

    from inclination.tiles import cache_tiles

    omap, tmap = pair
    calls = []
    lock = threading.Lock()

    def counting(rows, cols):
        with lock:
            calls.append((rows.start, cols.start))
        return tmap.reader(rows, cols)

    cached = cache_tiles(dataclasses.replace(tmap, reader=counting), tmp_path)
    tiles = list(tmap.tiles())
    band = (slice(tiles[0][0].stop - 2, tiles[0][0].stop + 1), slice(0, omap.shape[1]))
    with ThreadPoolExecutor(max_workers=2) as pool:
        first = list(pool.map(lambda rc: cached.read(*rc), [band, *tiles]))
    again = [cached.read(*rc) for rc in tiles]
    everything = cached.read(slice(0, omap.shape[0]), slice(0, omap.shape[1]))
    assert sorted(calls) == sorted((r.start, c.start) for r, c in tiles)
    assert first[0].quat.tobytes() == omap.quat[band].tobytes()
    for (rows, cols), a, b in zip(tiles, first[1:], again, strict=True):
        assert a.quat.tobytes() == b.quat.tobytes() == omap.quat[rows, cols].tobytes()
        assert_array_equal(b.valid, omap.valid[rows, cols])
    assert everything.quat.tobytes() == omap.quat.tobytes()
    assert_array_equal(everything.phase, omap.phase)


def test_tiled_statistics_of_equivalents_and_of_a_gradient_across_tiles():
    # Grain A is written as two symmetric equivalents (the right half turned by the cubic
    # 90° about [001]), one per tile: its tiles' sums are turned onto the grain's first
    # point. Grain B turns 1.2° a column about the crystal's [001] (56° across the map):
    # its far tiles' points are nearer another equivalent of the first point than the
    # tile's own, so its sum comes from its points. Both as the whole map gives them.
    from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_multiply
    from inclination.maps import OrientationMap

    h, w = 24, 48
    a = quat_from_axis_angle_deg([0.3, 0.5, 0.8], 20.0)
    b = quat_from_axis_angle_deg([0.9, -0.2, 0.4], 55.0)
    turn = quat_from_axis_angle_deg([0.0, 0.0, 1.0], 90.0)
    quat = np.zeros((h, w, 4))
    quat[:12, :24] = a
    quat[:12, 24:] = quat_multiply(turn, a)
    steps = quat_from_axis_angle_deg(np.tile([0.0, 0.0, 1.0], (w, 1)), 1.2 * np.arange(w))
    quat[12:] = quat_multiply(steps, b[None])[None]
    omap = OrientationMap(quat, np.ones((h, w), int))
    whole = segment_grains(omap, [CU], min_pixels=1)
    tiled = segment_grains_tiled(
        TiledMap.from_orientation_map(omap, tile_px=(8, 12)), [CU], min_pixels=1
    )
    assert whole.n_grains == 2
    assert_array_equal(tiled.labels, whole.labels)
    qa, qb = tiled.grains["quat"], whole.grains["quat"]
    assert_allclose(np.abs(np.einsum("ni,ni->n", qa, qb)), 1.0, rtol=0, atol=1e-9)
    for name in ("spread_mean_deg", "spread_max_deg"):
        assert_allclose(tiled.grains[name], whole.grains[name], rtol=0, atol=1e-3, err_msg=name)


# ----------------------------------------------------------------------------- the pipeline


def _job(folder, map_path, fmt, grid, **top):
    job = {
        "phases": [
            {
                "id": 1,
                "name": "Cu",
                "laue": "m-3m",
                "lattice": {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90},
                "families": ["{1 1 1}"],
            }
        ],
        "map": _spec(map_path, fmt, grid),
        **top,
    }
    path = folder / f"job_{fmt}_{len(top)}.json"
    path.write_text(json.dumps(job))
    return path


@pytest.fixture(scope="module")
def square_files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("jobs")
    npz, zarr_path = _write_pair(folder, "square", shape=(96, 100), seed=11)
    return folder, npz, zarr_path


@pytest.mark.parametrize("tiles", [None, {"tile_px": 40}])
def test_pipeline_on_a_zarr_map_matches_the_npz_run(square_files, tiles):
    # The whole pipeline up to the planes: zarr (its chunks or 40-point tiles) against npz.
    from inclination.io.job import load_job
    from inclination.pipeline import run

    folder, npz, zarr_path = square_files
    extra = {} if tiles is None else {"tiles": tiles}
    a = run(load_job(_job(folder, npz, "npz", "square")), stage="planes")
    b = run(load_job(_job(folder, zarr_path, "zarr", "square", **extra)), stage="planes")
    assert_array_equal(b.grain_map.labels, a.grain_map.labels)
    assert b.segments["segment_id"].size == a.segments["segment_id"].size > 20
    for end in ("x0_um", "y0_um", "x1_um", "y1_um"):
        assert_allclose(b.segments[end], a.segments[end], rtol=0, atol=0.5 * STEP)
    assert_array_equal(b.identification["identification"], a.identification["identification"])
    assert b.omap.provenance["reader"] == "zarr arrays"


def test_tiles_setting_tiles_an_npz_map(square_files):
    from inclination.io.job import load_job
    from inclination.pipeline import run

    folder, npz, _ = square_files
    a = run(load_job(_job(folder, npz, "npz", "square")), stage="traces")
    b = run(load_job(_job(folder, npz, "npz", "square", tiles={"tile_px": 32})), stage="traces")
    assert isinstance(b.omap, TiledMap) and b.omap.tile_px == (32, 32)
    assert_array_equal(b.grain_map.labels, a.grain_map.labels)
    assert_allclose(b.segments["x0_um"], a.segments["x0_um"], rtol=0, atol=0.5 * STEP)


# ----------------------------------------------------------------------------- bad input


def _one_line_exit_2(job_path, capsys):
    status = main(["grains", str(job_path), "--out", str(job_path.parent / "out")])
    err = capsys.readouterr().err.strip()
    assert status == 2
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    return err


def test_missing_zarr_store_exits_2_with_one_line(tmp_path, capsys):
    err = _one_line_exit_2(_job(tmp_path, tmp_path / "absent.zarr", "zarr", "square"), capsys)
    assert "absent.zarr" in err and "folder" in err


def test_zarr_with_a_wrong_dtype_exits_2_with_one_line(tmp_path, capsys):
    import zarr

    group = zarr.open_group(str(tmp_path / "m.zarr"), mode="w")
    group.create_array("euler_deg", shape=(8, 8, 3), chunks=(4, 4, 3), dtype="f8")[...] = 0.0
    group.create_array("phase", shape=(8, 8), chunks=(4, 4), dtype=bool)[...] = True
    err = _one_line_exit_2(_job(tmp_path, tmp_path / "m.zarr", "zarr", "square"), capsys)
    assert "m.zarr" in err and "'phase'" in err and "bool" in err


def test_zarr_with_a_wrong_shape_exits_2_with_one_line(tmp_path, capsys):
    write_zarr_map(
        tmp_path / "m.zarr", np.zeros((8, 8, 2)), np.ones((8, 8), np.int32), chunks_px=(4, 4)
    )
    err = _one_line_exit_2(_job(tmp_path, tmp_path / "m.zarr", "zarr", "square"), capsys)
    assert "'euler_deg'" in err and "(H, W, 3)" in err and "(8, 8, 2)" in err


def test_zarr_with_an_undeclared_phase_exits_2_naming_the_point(tmp_path, capsys):
    phase = np.ones((8, 8), np.int32)
    phase[5, 6] = 7
    write_zarr_map(tmp_path / "m.zarr", np.zeros((8, 8, 3)), phase, chunks_px=(4, 4))
    err = _one_line_exit_2(_job(tmp_path, tmp_path / "m.zarr", "zarr", "square"), capsys)
    assert "row 5, column 6" in err and "7" in err


def test_subgrain_network_on_the_tiled_path_exits_2(tmp_path, capsys):
    e = np.zeros((8, 8, 3))
    e[:, 4:, 0] = 40.0
    write_zarr_map(tmp_path / "m.zarr", e, np.ones((8, 8), np.int32), chunks_px=(4, 4))
    job = _job(tmp_path, tmp_path / "m.zarr", "zarr", "square", grains={"subgrain_network": True})
    status = main(["traces", str(job), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip()
    assert status == 2 and len(err.splitlines()) == 1 and "subgrain_network" in err


def test_analyse_of_a_zarr_map_writes_the_npz_runs_tables(square_files):
    # The whole command, report included: the tables are byte for byte those of the npz run.
    folder, npz, zarr_path = square_files
    out_a, out_b = folder / "run_npz", folder / "run_zarr"
    assert main(["analyse", str(_job(folder, npz, "npz", "square")), "--out", str(out_a)]) == 0
    job_b = _job(folder, zarr_path, "zarr", "square")
    assert main(["analyse", str(job_b), "--out", str(out_b)]) == 0
    for name in ("grains.csv", "segments.csv", "boundaries.csv"):
        assert (out_b / name).read_bytes() == (out_a / name).read_bytes(), name
    summary = json.loads((out_b / "summary.json").read_text())
    assert summary["provenance"]["map"]["reader"] == "zarr arrays"


def test_a_map_over_the_memory_budget_is_tiled(square_files):
    # 96 × 100 points at about 40 bytes each is ~0.37 MiB: over a 0.1 MiB budget, under 1.
    from inclination.io.job import load_job
    from inclination.pipeline import run

    folder, npz, _ = square_files
    over = run(
        load_job(_job(folder, npz, "npz", "square", tiles={"memory_mib": 0.1})), stage="grains"
    )
    under = run(
        load_job(_job(folder, npz, "npz", "square", tiles={"memory_mib": 1.0})), stage="grains"
    )
    assert isinstance(over.omap, TiledMap) and not isinstance(under.omap, TiledMap)
    assert_array_equal(over.grain_map.labels, under.grain_map.labels)


# ----------------------------------------------------------------------------- every raise


def _identity_map(shape):
    from inclination.maps import OrientationMap

    quat = np.zeros((*shape, 4))
    quat[..., 0] = 1.0
    return OrientationMap(quat, np.ones(shape, int))


def _small_tiles(tile_px=2):
    return TiledMap.from_orientation_map(_identity_map((4, 4)), tile_px=tile_px)


@pytest.mark.parametrize(
    ("options", "error", "match"),
    [
        ({"min_pixels": 0}, SettingError, "min_pixels"),
        ({"min_pixels": 2.5}, TypeError, "min_pixels"),
        ({"small_grains": "drop"}, SettingError, "small_grains"),
        ({"progress": "bar"}, TypeError, "progress"),
        ({"threshold_deg": -1.0}, SettingError, "threshold_deg"),
    ],
)
def test_segment_grains_tiled_refuses_bad_options(options, error, match):
    with pytest.raises(error, match=match):
        segment_grains_tiled(_small_tiles(), [CU], **options)


def test_tiled_functions_refuse_bad_records():
    with pytest.raises(TypeError, match="TiledMap"):
        segment_grains_tiled(np.zeros((4, 4)), [CU])
    with pytest.raises(SettingError, match="tile_px"):
        _small_tiles(tile_px=1)
    gm = segment_grains_tiled(_small_tiles(), [CU], min_pixels=1)
    wide = TiledMap.from_orientation_map(_identity_map((4, 6)), tile_px=2)
    with pytest.raises(InputError, match="map's shape"):
        boundary_network_tiled(wide, gm, [CU])


def test_a_map_with_no_indexed_point_is_refused():
    from inclination.maps import OrientationMap

    quat = np.zeros((4, 4, 4))
    quat[..., 0] = 1.0
    empty = OrientationMap(quat, np.zeros((4, 4), int))
    with pytest.raises(InputError, match="at least one valid indexed point"):
        segment_grains_tiled(TiledMap.from_orientation_map(empty, tile_px=2), [CU])


def test_zarr_store_errors_name_the_array(tmp_path):
    import zarr

    from inclination.io.chunked import open_zarr_arrays

    with pytest.raises(InputError, match="no folder"):
        open_zarr_arrays(tmp_path / "none.zarr", angles="deg")
    (tmp_path / "plain").mkdir()
    (tmp_path / "plain" / "zarr.json").write_text("not json")
    with pytest.raises(InputError, match="zarr cannot open"):
        open_zarr_arrays(tmp_path / "plain", angles="deg")
    write_zarr_map(
        tmp_path / "m.zarr", np.zeros((4, 4, 3)), np.ones((4, 4), np.int32), chunks_px=(2, 2)
    )
    with pytest.raises(InputError, match="'euler_rad'"):
        open_zarr_arrays(tmp_path / "m.zarr", angles="rad")
    group = zarr.open_group(str(tmp_path / "short.zarr"), mode="w")
    group.create_array("euler_deg", shape=(4, 4, 3), chunks=(2, 2, 3), dtype="f4")
    group.create_array("phase", shape=(4, 5), chunks=(2, 2), dtype="i4")
    with pytest.raises(InputError, match="'phase' to have shape"):
        open_zarr_arrays(tmp_path / "short.zarr", angles="deg")


@pytest.mark.parametrize(
    ("change", "match"),
    [({"grid": None}, "'grid'"), ({"step_um": None}, "step_um")],
)
def test_read_zarr_map_refuses_a_spec_without_grid_or_step(tmp_path, change, match):
    write_zarr_map(
        tmp_path / "m.zarr", np.zeros((4, 4, 3)), np.ones((4, 4), np.int32), chunks_px=(2, 2)
    )
    spec = _spec(tmp_path / "m.zarr", "zarr", "square")
    spec.update(change)
    spec = {k: v for k, v in spec.items() if v is not None}
    with pytest.raises(InputError, match=match):
        read_zarr_map(spec, phase_ids=(1,))
