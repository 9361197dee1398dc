"""The hdf5 map reader (inclination.io.hdf5) against the npz reader on the same arrays."""

from __future__ import annotations

import numpy as np
import pytest

from inclination.errors import InputError
from inclination.io.writers import write_npz
from inclination.maps import read_map
from inclination.synthetic import as_orientation_map, make_microstructure, sample_map

h5py = pytest.importorskip("h5py", reason="the optional extra 'hdf5' (h5py) is not installed")


@pytest.fixture(scope="module")
def omap():
    micro = make_microstructure(box_um=(20.0, 15.0, 10.0), n_grains=4, rng=5)
    return as_orientation_map(sample_map(micro, step_um=0.5, rng=6, nonindexed_fraction=0.02))


def _spec(path, fmt, **extra):
    return {
        "path": str(path),
        "format": fmt,
        "angles": "deg",
        "step_um": 0.5,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
        **extra,
    }


def _write_h5(path, omap, *, coords=True):
    xy = omap.positions_declared_um()
    with h5py.File(path, "w") as f:
        f["m/euler"] = omap.euler_deg_declared()
        f["m/phase"] = np.asarray(omap.phase)
        f["m/iq"] = np.arange(omap.n_points, dtype=float).reshape(omap.shape)
        if coords:
            f["m/x"] = xy[..., 0]
            f["m/y"] = xy[..., 1]
    return path


DATASETS = {"euler": "m/euler", "phase": "m/phase", "x": "m/x", "y": "m/y"}


def test_hdf5_gives_the_npz_map_bit_for_bit(tmp_path, omap):
    # Same arrays, two containers: the npz writer is the project's reference reader path.
    npz = write_npz(tmp_path / "m.npz", omap)
    h5 = _write_h5(tmp_path / "m.h5", omap)
    a = read_map(_spec(npz, "npz"))
    b = read_map(_spec(h5, "hdf5", datasets={**DATASETS, "quality": {"iq": "m/iq"}}))
    assert a.quat.tobytes() == b.quat.tobytes()
    assert np.array_equal(a.phase, b.phase) and np.array_equal(a.valid, b.valid)
    assert a.axes.origin_um == b.axes.origin_um
    assert sorted(b.quality) == ["iq"]
    assert b.provenance["reader"] == "hdf5 datasets"


def test_hdf5_unit_check_as_other_readers(tmp_path, omap):
    h5 = _write_h5(tmp_path / "m.h5", omap)
    with pytest.raises(InputError, match=r"Expected angles in radians as declared"):
        read_map({**_spec(h5, "hdf5", datasets=DATASETS), "angles": "rad"})


def test_hdf5_coordinates_checked_against_the_axes(tmp_path, omap):
    h5 = _write_h5(tmp_path / "m.h5", omap)
    with pytest.raises(InputError, match=r"Expected the x and y datasets to place each point"):
        read_map({**_spec(h5, "hdf5", datasets=DATASETS), "axes": {"x": "left", "y": "down"}})


def test_hdf5_missing_dataset_lists_and_suggests(tmp_path, omap):
    h5 = _write_h5(tmp_path / "m.h5", omap, coords=False)
    with pytest.raises(InputError, match=r"Expected a dataset at 'm/eulr' for euler \(did you mean 'm/euler'\?\).*'m/iq'"):
        read_map(_spec(h5, "hdf5", datasets={"euler": "m/eulr", "phase": "m/phase"}))


def test_hdf5_wrong_shape(tmp_path, omap):
    h5 = _write_h5(tmp_path / "m.h5", omap, coords=False)
    with h5py.File(h5, "a") as f:
        f["m/short"] = np.zeros((2, 2))
    with pytest.raises(InputError, match=r"Expected dataset 'm/short' \(quality/q\) to have shape"):
        read_map(_spec(h5, "hdf5", datasets={"euler": "m/euler", "phase": "m/phase", "quality": {"q": "m/short"}}))


def test_hdf5_needs_datasets(tmp_path, omap):
    h5 = _write_h5(tmp_path / "m.h5", omap, coords=False)
    with pytest.raises(InputError, match=r"Expected 'datasets' naming the euler and phase"):
        read_map(_spec(h5, "hdf5"))
