"""Maps by tiles (inclination.tiles): the whole-map path as the oracle, on synthetic samples.

The same map is read whole from npz and in 4 × 4 chunks from zarr; the grains must be the
same partition (here: the same ids too) and the segments the same to within 0.5 step (end
points) and 0.1° (angles). The synthetic microstructure (inclination.synthetic) is the
ground truth of the map; the whole-map path is itself checked against it and against
scikit-image's labelling in tests/test_grains.py and tests/test_network.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

pytest.importorskip("zarr", reason="the optional extra 'tiles' (zarr) is not installed")
pytest.importorskip("dask", reason="the optional extra 'tiles' (dask) is not installed")

from inclination.crystal.lattice import Lattice  # noqa: E402
from inclination.crystal.phases import Phase  # noqa: E402
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
    return (
        np.unique(pairs[0]).size == pairs.shape[1] and np.unique(pairs[1]).size == pairs.shape[1]
    )


def test_zarr_reader_gives_the_npz_map_bit_for_bit(pair):
    omap, tmap = pair
    assert tmap.tile_px[0] >= 30 and tmap.shape == omap.shape
    whole = tmap.read(slice(0, omap.shape[0]), slice(0, omap.shape[1]))
    assert whole.quat.tobytes() == omap.quat.tobytes()
    assert_array_equal(whole.valid, omap.valid)
    assert whole.axes.origin_um == omap.axes.origin_um


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
