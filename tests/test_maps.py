"""OrientationMap, the map readers (text, npz, TIFF) and the writers (conventions §1–§3).

The reference data are built here, independently of the reader: declared coordinates
from a hand table of screen directions, Euler angles from scipy's rotations.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import tifffile
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy.spatial.transform import Rotation

from inclination.crystal.rotations import quat_inverse, quat_multiply, random_quat
from inclination.errors import InputError, SettingError
from inclination.frames import DeclaredAxes
from inclination.io.text import place_on_grid, read_table
from inclination.io.writers import write_csv, write_npz, write_tiff
from inclination.maps import OrientationMap, read_map, read_map_file, row_pitch_um

SCREEN = {"right": (1, 0), "left": (-1, 0), "down": (0, 1), "up": (0, -1)}
EIGHT = [
    ("right", "down"),
    ("right", "up"),
    ("left", "down"),
    ("left", "up"),
    ("down", "right"),
    ("down", "left"),
    ("up", "right"),
    ("up", "left"),
]
HEADER = "x_um,y_um,phi1_deg,Phi_deg,phi2_deg,phase"


def angle_between_deg(qa, qb):
    """Rotation angle (degrees) between orientations given as (4, N) columns, q ≡ -q.

    scipy's Rotation.magnitude is computed from the vector part, so it stays exact
    near 0 where arccos of the dot product loses half the digits.
    """
    ra = Rotation.from_quat(np.asarray(qa, float)[[1, 2, 3, 0]].T)
    rb = Rotation.from_quat(np.asarray(qb, float)[[1, 2, 3, 0]].T)
    return np.degrees((ra.inv() * rb).magnitude())


def hand_matrix(x, y):
    ex, ey = np.array([*SCREEN[x], 0.0]), np.array([*SCREEN[y], 0.0])
    return np.column_stack([ex, ey, np.cross(ex, ey)])


def scipy_matrix(q_scalar_first):
    # rotations.py (P = +1) gives g the Hamilton matrix of q, which is scipy's as_matrix
    # of the same quaternion written scalar-last (Rowenhorst et al. 2015, eq. for P = +1).
    q = np.asarray(q_scalar_first, float)
    return Rotation.from_quat(np.c_[q[:, 1:], q[:, :1]]).as_matrix()


def bunge_from_matrix_scipy(g):
    # Bunge passive g is the transpose of scipy's intrinsic 'ZXZ' active rotation.
    return Rotation.from_matrix(np.swapaxes(g, -1, -2)).as_euler("ZXZ", degrees=True) % 360.0


def write_text(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def spec_for(path, **extra):
    spec = {
        "path": str(path),
        "format": "csv",
        "angles": "deg",
        "axes": {"x": "right", "y": "down"},
    }
    spec.update(extra)
    return spec


def small_csv(tmp_path, rows, header=HEADER, name="m.csv"):
    return write_text(tmp_path / name, header + "\n" + "\n".join(rows) + "\n")


# ----------------------------------------------------------------------------- the record


def test_record_is_immutable_and_copies_inputs():
    q = np.zeros((2, 3, 4))
    q[..., 0] = 1.0
    phase = np.array([[1, 1, 0], [1, 2, 1]])
    ci = np.ones((2, 3))
    omap = OrientationMap(q, phase, quality={"ci": ci}, grid="square", step_x_um=1, step_y_um=2)
    # Quaternion on the last axis, over contiguous (4, H, W) planes.
    assert omap.quat.dtype == np.float32 and omap.quat.shape == (2, 3, 4)
    assert np.moveaxis(omap.quat, -1, 0).flags.c_contiguous
    assert omap.phase.dtype == np.int32
    for arr in (omap.quat, omap.phase, omap.valid, omap.quality["ci"], omap.data_frame_rotation):
        assert not arr.flags.writeable
    with pytest.raises(TypeError):
        omap.quality["extra"] = ci
    with pytest.raises(AttributeError):
        omap.grid = "hexagonal"
    q[0, 0, 0] = 5.0  # the caller's array stays the caller's
    assert omap.quat[0, 0, 0] == 1.0
    assert_array_equal(omap.valid, phase != 0)
    assert omap.shape == (2, 3) and omap.n_points == 6


def test_record_adopts_sealed_phase_and_valid_but_copies_writeable_ones():
    # Sealed arrays (read-only and owning their memory, as the readers hand over) cannot
    # change under the record, so it keeps them; a writeable caller's array is copied.
    q = np.zeros((2, 3, 4))
    q[..., 0] = 1.0
    phase = np.array([[1, 1, 0], [1, 2, 1]], dtype=np.int32)
    valid = phase != 0
    mine = OrientationMap(q, phase, valid=valid, grid="square", step_x_um=1)
    assert not np.shares_memory(mine.phase, phase) and not np.shares_memory(mine.valid, valid)
    phase[0, 0] = 2  # the caller's arrays stay the caller's
    valid[0, 0] = False
    assert mine.phase[0, 0] == 1 and mine.valid[0, 0]
    phase[0, 0] = 1
    valid[0, 0] = True
    phase.flags.writeable = False
    valid.flags.writeable = False
    sealed = OrientationMap(q, phase, valid=valid, grid="square", step_x_um=1)
    assert np.shares_memory(sealed.phase, phase) and np.shares_memory(sealed.valid, valid)
    assert_array_equal(sealed.phase, mine.phase)
    assert_array_equal(sealed.valid, mine.valid)
    # A sealed view of a writeable owner is not sealed: copied.
    owner = np.array([[1, 1, 0], [1, 2, 1]], dtype=np.int32)
    view = owner[:]
    view.flags.writeable = False
    assert not np.shares_memory(OrientationMap(q, view, grid="square", step_x_um=1).phase, owner)


def test_invalid_points_hold_identity():
    q = np.full((1, 2, 4), np.nan)
    q[0, 0] = [0.0, 1.0, 0.0, 0.0]
    omap = OrientationMap(q, [[1, 0]], grid="square", step_x_um=1, step_y_um=1)
    assert_array_equal(omap.quat[0, 1], [1, 0, 0, 0])


def test_positions_square_and_hexagonal():
    q = np.zeros((3, 2, 4))
    q[..., 0] = 1
    sq = OrientationMap(q, np.ones((3, 2), int), grid="square", step_x_um=0.5, step_y_um=0.25)
    # conventions §1: point (i, j) at (j·s_x, i·s_y).
    assert_allclose(sq.positions_sample_um()[2, 1], [0.5, 0.5], rtol=0, atol=1e-12)
    hx = OrientationMap(q, np.ones((3, 2), int), grid="hexagonal", step_x_um=2, step_y_um=2)
    pos = hx.positions_sample_um()
    # conventions §1: rows s·√3/2 apart, odd rows shifted by s/2.
    assert_allclose(pos[1, 0], [1.0, np.sqrt(3)], rtol=0, atol=1e-12)
    assert_allclose(pos[2, 1], [2.0, 2 * np.sqrt(3)], rtol=0, atol=1e-12)
    assert_allclose(hx.row_pitch_um, np.sqrt(3), rtol=0, atol=1e-12)


def test_row_pitch_is_the_hexagon_height():
    # Equilateral triangles of side s have height s·√3/2 (plane geometry), conventions §1.
    assert_allclose(row_pitch_um("hexagonal", 3.0), 3.0 * np.sin(np.pi / 3), rtol=0, atol=1e-12)
    assert row_pitch_um("square", 0.25) == 0.25
    with pytest.raises(ValueError, match="Expected `grid` to be one of"):
        row_pitch_um("triangular", 1.0)


def test_record_refuses_bad_arrays():
    q = np.zeros((2, 2, 4))
    q[..., 0] = 1
    ok = dict(grid="square", step_x_um=1.0, step_y_um=1.0)
    with pytest.raises(ValueError, match=r"Expected `quat` to have shape \(H, W, 4\)"):
        OrientationMap(np.zeros((2, 2, 3)), np.ones((2, 2), int), **ok)
    with pytest.raises(ValueError, match="Expected `phase` to have shape"):
        OrientationMap(q, np.ones((2, 3), int), **ok)
    with pytest.raises(TypeError, match="Expected `phase` to be integers"):
        OrientationMap(q, np.ones((2, 2)), **ok)
    with pytest.raises(ValueError, match="Expected `phase` to hold ids >= 0"):
        OrientationMap(q, -np.ones((2, 2), int), **ok)
    with pytest.raises(ValueError, match="Expected `quat` to be unit at valid points"):
        OrientationMap(2 * q, np.ones((2, 2), int), **ok)
    with pytest.raises(ValueError, match="Expected `quat` to be finite at valid points"):
        OrientationMap(q * np.nan, np.ones((2, 2), int), **ok)
    with pytest.raises(ValueError, match="Expected `valid` to be False wherever `phase` is 0"):
        OrientationMap(q, np.zeros((2, 2), int), np.ones((2, 2), bool), **ok)
    with pytest.raises(ValueError, match="Expected `valid` to be bool of shape"):
        OrientationMap(q, np.ones((2, 2), int), np.ones((2, 2)), **ok)
    with pytest.raises(ValueError, match="Expected `grid` to be one of"):
        OrientationMap(q, np.ones((2, 2), int), grid="triangular", step_x_um=1, step_y_um=1)
    with pytest.raises(ValueError, match="Expected `step_x_um` to be a finite number > 0"):
        OrientationMap(q, np.ones((2, 2), int), grid="square", step_x_um=0, step_y_um=1)
    with pytest.raises(ValueError, match="Expected `step_x_um` == `step_y_um` on a hexagonal"):
        OrientationMap(q, np.ones((2, 2), int), grid="hexagonal", step_x_um=1, step_y_um=2)
    with pytest.raises(TypeError, match="Expected `axes` to be DeclaredAxes"):
        OrientationMap(q, np.ones((2, 2), int), axes={"x": "right"}, **ok)
    with pytest.raises(ValueError, match="Expected quality names to be non-empty and not one of"):
        OrientationMap(q, np.ones((2, 2), int), quality={"phase": np.ones((2, 2))}, **ok)
    with pytest.raises(ValueError, match="Expected quality channel 'ci' to have shape"):
        OrientationMap(q, np.ones((2, 2), int), quality={"ci": np.ones(3)}, **ok)
    with pytest.raises(ValueError, match="Expected `data_frame_rotation` to be a unit quaternion"):
        OrientationMap(q, np.ones((2, 2), int), data_frame_rotation=[2, 0, 0, 0], **ok)


def test_from_euler_deg_refuses_bad_shapes():
    with pytest.raises(ValueError, match=r"Expected `euler_deg` to have shape \(H, W, 3\)"):
        OrientationMap.from_euler_deg(
            np.zeros((2, 3)), np.ones((2, 3), int), grid="square", step_x_um=1
        )
    with pytest.raises(ValueError, match="Expected `phase` to have shape"):
        OrientationMap.from_euler_deg(
            np.zeros((2, 3, 3)), np.ones((3, 2), int), grid="square", step_x_um=1
        )
    with pytest.raises(ValueError, match=r"Expected `data_frame_rotation` to have shape \(4,\)"):
        OrientationMap.from_euler_deg(
            np.zeros((1, 1, 3)), [[1]], grid="square", step_x_um=1, data_frame_rotation=[1, 0, 0]
        )


# ----------------------------------------------------------------------------- 8 declarations


def reference_sample(h=6, w=7, seed=11):
    """Random orientations in S on a grid, a few points non-indexed, two phases."""
    rng = np.random.default_rng(seed)
    q = random_quat(h * w, rng=rng)  # (N, 4) in S
    phase = rng.integers(1, 3, h * w)
    phase[rng.choice(h * w, 5, replace=False)] = 0
    return q, phase


def declared_table(q_s, phase, h, w, step, x, y, turn_matrix, origin, hexagonal=False):
    """Rows of a table in the declared frame, built independently of the reader."""
    m = hand_matrix(x, y)
    # g_data = g_S · M · Q: the inverse of g_S = g_data Qᵀ Mᵀ (conventions §2–§3).
    g_data = scipy_matrix(q_s) @ m @ turn_matrix
    euler = bunge_from_matrix_scipy(g_data)
    i, j = np.divmod(np.arange(h * w), w)
    if hexagonal:
        xs, ys = j * step + 0.5 * step * (i % 2), i * step * np.sqrt(3) / 2
    else:
        xs, ys = j * step, i * step
    declared = np.asarray(origin) + (np.c_[xs, ys, 0 * xs] @ m)[:, :2]
    rows = []
    for k in range(h * w):
        if phase[k] == 0:
            rows.append(f"{declared[k, 0]:.9f},{declared[k, 1]:.9f},,,,0")
        else:
            e = euler[k]
            rows.append(
                f"{declared[k, 0]:.9f},{declared[k, 1]:.9f},{e[0]:.9f},{e[1]:.9f},{e[2]:.9f},"
                f"{phase[k]}"
            )
    return rows, euler


TURNS = {
    "none": (None, np.eye(3)),
    "z180": ("z180", np.diag([-1.0, -1.0, 1.0])),
    "axis-angle": (
        {"axis": [1.0, 1.0, 0.0], "angle_deg": 37.0},
        Rotation.from_rotvec(np.radians(37.0) * np.array([1, 1, 0]) / np.sqrt(2)).as_matrix(),
    ),
}


@pytest.mark.parametrize(("x", "y"), EIGHT)
@pytest.mark.parametrize("turn", sorted(TURNS))
def test_eight_declarations_read_back_identical_sample(tmp_path, x, y, turn):
    h, w, step = 6, 7, 0.5
    q_s, phase = reference_sample(h, w)
    spec_turn, turn_matrix = TURNS[turn]
    origin = (40.0, 25.0)
    rows, _ = declared_table(q_s, phase, h, w, step, x, y, turn_matrix, origin)
    order = np.random.default_rng(2).permutation(len(rows))  # any row order
    path = small_csv(tmp_path, [rows[k] for k in order])
    spec = spec_for(path, axes={"x": x, "y": y}, step_um=step)
    if spec_turn is not None:
        spec["data_frame_rotation"] = spec_turn
    omap = read_map(spec, phase_ids=[1, 2])
    assert omap.shape == (h, w)
    assert_array_equal(omap.valid.ravel(), phase != 0)
    assert_array_equal(omap.phase.ravel(), phase)
    # Same orientations in S to float32 precision: within 1e-4° (components ~6e-8).
    q_read = omap.quat.reshape(-1, 4)[phase != 0].T
    assert_allclose(angle_between_deg(q_read, q_s[phase != 0].T), 0.0, rtol=0, atol=1e-4)
    # Same positions: grid point (0, 0) is the reference sample's point (0, 0).
    expected_pos = np.stack(np.meshgrid(np.arange(w) * step, np.arange(h) * step), axis=-1)
    assert_allclose(omap.positions_sample_um(), expected_pos, rtol=0, atol=1e-9)
    assert_allclose(omap.axes.origin_um, origin, rtol=0, atol=1e-6)
    assert (omap.axes.x, omap.axes.y) == (x, y)


@pytest.mark.parametrize(("x", "y"), EIGHT)
def test_eight_declarations_npz_arrays(tmp_path, x, y):
    h, w = 4, 5
    q_s, phase = reference_sample(h, w, seed=3)
    g_data = scipy_matrix(q_s) @ hand_matrix(x, y) @ np.diag([-1.0, -1.0, 1.0])
    euler = bunge_from_matrix_scipy(g_data)
    euler[phase == 0] = np.nan
    np.savez(tmp_path / "m.npz", euler_deg=euler.reshape(h, w, 3), phase=phase.reshape(h, w))
    spec = {
        "path": str(tmp_path / "m.npz"),
        "format": "npz",
        "angles": "deg",
        "step_um": 1.0,
        "grid": "square",
        "axes": {"x": x, "y": y},
        "data_frame_rotation": "z180",
    }
    omap = read_map(spec)
    q_read = omap.quat.reshape(-1, 4)[phase != 0].T
    assert_allclose(angle_between_deg(q_read, q_s[phase != 0].T), 0.0, rtol=0, atol=1e-4)
    # Arrays are screen-laid (row 0 on top); declared coordinates start at 0 on both axes.
    corners = omap.positions_declared_um()[[0, 0, -1, -1], [0, -1, 0, -1]]
    assert_allclose(corners.min(axis=0), [0.0, 0.0], rtol=0, atol=1e-12)


def test_undeclared_turn_differs_by_half_turn_about_z(tmp_path):
    # A file recorded in a frame turned 180° about Z but read without saying so gives
    # g' = g_data · Mᵀ, i.e. g_S turned by 180° about Z_S: q' = q_S ⊗ (0, 0, 0, 1).
    h, w = 3, 4
    q_s, phase = reference_sample(h, w, seed=5)
    rows, _ = declared_table(q_s, phase, h, w, 1.0, "right", "down", np.diag([-1.0, -1, 1]), (0, 0))
    omap = read_map(spec_for(small_csv(tmp_path, rows)))
    expected = quat_multiply(q_s, np.array([0.0, 0, 0, 1]))
    q_read = omap.quat.reshape(-1, 4)[phase != 0].T
    assert_allclose(angle_between_deg(q_read, expected[phase != 0].T), 0.0, rtol=0, atol=1e-4)
    assert np.all(angle_between_deg(q_read, q_s[phase != 0].T) > 1.0)


# ----------------------------------------------------------------------------- writers


def sample_map(grid="square", axes=None, turn=None):
    rng = np.random.default_rng(21)
    h, w = 5, 6
    e = np.stack(
        [rng.uniform(0, 360, (h, w)), rng.uniform(0, 180, (h, w)), rng.uniform(0, 360, (h, w))],
        axis=-1,
    )
    phase = rng.integers(1, 3, (h, w))
    phase[0, 0] = 0
    e[1, 2] = np.nan
    ci = rng.uniform(0, 1, (h, w))
    return OrientationMap.from_euler_deg(
        e,
        phase,
        grid=grid,
        step_x_um=0.5,
        axes=axes,
        data_frame_rotation=turn,
        quality={"ci": ci},
    )


def assert_same_map(a, b, atol_deg=1e-4):
    assert a.shape == b.shape and a.grid == b.grid
    assert_array_equal(a.valid, b.valid)
    assert_array_equal(a.phase, b.phase)
    dq = angle_between_deg(
        a.quat.reshape(-1, 4)[a.valid.ravel()].T, b.quat.reshape(-1, 4)[b.valid.ravel()].T
    )
    assert_allclose(dq, 0.0, rtol=0, atol=atol_deg)
    assert_allclose(a.positions_sample_um(), b.positions_sample_um(), rtol=0, atol=1e-6)
    assert sorted(a.quality) == sorted(b.quality)
    for name in a.quality:
        assert_allclose(a.quality[name], b.quality[name], rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
@pytest.mark.parametrize(("x", "y"), [("right", "down"), ("up", "left"), ("left", "up")])
def test_csv_round_trip(tmp_path, grid, x, y):
    omap = sample_map(grid, DeclaredAxes(x, y, origin_um=(3.0, 4.0)), "z180")
    path = write_csv(tmp_path / "out.csv", omap)
    back = read_map(spec_for(path, axes={"x": x, "y": y}, data_frame_rotation="z180"))
    assert_same_map(omap, back)
    assert_allclose(back.axes.origin_um, (3.0, 4.0), rtol=0, atol=1e-6)
    assert back.provenance["reader"] == "text table"


def test_csv_round_trip_tab_delimiter(tmp_path):
    omap = sample_map()
    path = write_csv(tmp_path / "out.tsv", omap, delimiter="\t")
    back = read_map(spec_for(path, format="tsv"))
    assert_same_map(omap, back)


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
def test_npz_round_trip(tmp_path, grid):
    omap = sample_map(grid, DeclaredAxes("down", "left"), {"axis": [0, 1, 1], "angle_deg": 20})
    path = write_npz(tmp_path / "out.npz", omap)
    back = read_map(
        {
            "path": str(path),
            "format": "npz",
            "angles": "deg",
            "step_um": 0.5,
            "grid": grid,
            "axes": {"x": "down", "y": "left"},
            "data_frame_rotation": {"axis": [0, 1, 1], "angle_deg": 20},
        }
    )
    assert_same_map(omap, back, atol_deg=1e-4)
    with np.load(path) as npz:
        assert sorted(npz.files) == ["ci", "euler_deg", "phase"]
        assert npz["euler_deg"].shape == (5, 6, 3)


def test_tiff_round_trip(tmp_path):
    omap = sample_map("square", DeclaredAxes("right", "up"))
    tif, side = write_tiff(tmp_path / "out.tif", omap)
    doc = json.loads(side.read_text())
    assert doc["channels"] == ["phi1", "Phi", "phi2", "phase", "ci"]
    assert tifffile.imread(tif).shape == (5, 5, 6)
    back = read_map(
        {
            "path": str(tif),
            "format": "tiff",
            "angles": "deg",
            "step_um": 0.5,
            "grid": "square",
            "axes": {"x": "right", "y": "up"},
        }
    )
    # float32 channels: angles good to ~1e-5 of 360°, i.e. about 2e-3°.
    assert_same_map(omap, back, atol_deg=5e-3)
    assert back.provenance["settings"]["sidecar"] == str(side)


def test_writers_are_atomic_and_leave_no_temporary(tmp_path):
    omap = sample_map()
    write_csv(tmp_path / "a.csv", omap)
    write_npz(tmp_path / "a.npz", omap)
    write_tiff(tmp_path / "a.tif", omap)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.csv", "a.npz", "a.tif", "a.tif.json"]


def test_writer_failure_removes_temporary(tmp_path):
    omap = sample_map()
    with pytest.raises(IsADirectoryError):
        (tmp_path / "dir.npz").mkdir()
        write_npz(tmp_path / "dir.npz", omap)
    assert [p.name for p in tmp_path.iterdir()] == ["dir.npz"]


def test_writers_refuse_bad_arguments(tmp_path):
    with pytest.raises(SettingError, match="Expected `omap` to be an OrientationMap"):
        write_csv(tmp_path / "a.csv", {"quat": 1})
    with pytest.raises(ValueError, match="Expected `delimiter` to be one separator character"):
        write_csv(tmp_path / "a.csv", sample_map(), delimiter="--")


# ----------------------------------------------------------------------------- text reader


def test_missing_points_nan_empty_and_phase_zero_are_not_indexed(tmp_path):
    rows = [
        "0,0,10,20,30,1",
        "1,0,nan,20,30,1",
        "2,0,10,20,30,0",
        "0,1,,,,1",
        "2,1,10,20,30,1",
    ]  # (1, 1) is absent
    omap = read_map(spec_for(small_csv(tmp_path, rows)))
    assert omap.valid.tolist() == [[True, False, False], [False, False, True]]
    assert omap.phase.tolist() == [[1, 0, 0], [0, 0, 1]]


def test_column_mapping_quality_and_whitespace(tmp_path):
    text = (
        "# exported by a lab script\nX Y e1 e2 e3 ph CI IQ\n"
        "0 0 0.1 0.2 0.3 1 0.9 100\n1.5 0 0.1 0.2 0.3 1 0.8 90\n"
    )
    path = write_text(tmp_path / "m.txt", text)
    spec = spec_for(
        path,
        format="text",
        angles="rad",
        columns={"x_um": "X", "y_um": "Y", "phi1": "e1", "Phi": "e2", "phi2": "e3", "phase": "ph"},
    )
    omap = read_map(spec)
    assert omap.step_x_um == 1.5 and omap.shape == (1, 2)
    assert sorted(omap.quality) == ["CI", "IQ"]
    assert_allclose(omap.quality["CI"], [[0.9, 0.8]], rtol=1e-6, atol=0)
    assert omap.provenance["settings"]["columns"]["phi1"] == "e1"
    # the same angles in degrees give the same orientation
    deg = write_text(
        tmp_path / "d.csv",
        HEADER
        + "\n"
        + ",".join(["0", "0", *(f"{np.degrees(v):.9f}" for v in (0.1, 0.2, 0.3)), "1"])
        + "\n",
    )
    ref = read_map(spec_for(deg, step_um=1.5))
    assert_allclose(
        angle_between_deg(ref.quat[0, 0:1].T, omap.quat[0, 0:1].T), 0, rtol=0, atol=1e-4
    )


def test_phase_column_null_uses_the_only_phase(tmp_path):
    path = small_csv(
        tmp_path, ["0,0,1,2,3", "1,0,nan,nan,nan"], header="x_um,y_um,phi1_deg,Phi_deg,phi2_deg"
    )
    omap = read_map(spec_for(path, columns={"phase": None}), phase_ids=[4])
    assert omap.phase.tolist() == [[4, 0]]
    with pytest.raises(InputError, match=r"/map/columns/phase: Expected a phase column when"):
        read_map(spec_for(path, columns={"phase": None}), phase_ids=[1, 2])


def test_hexagonal_grid_recognised_and_checked(tmp_path):
    s, r = 1.0, np.sqrt(3) / 2
    rows = [
        f"{x:.6f},{y:.6f},1,2,3,1"
        for x, y in [(0, 0), (1, 0), (2, 0), (0.5, r), (1.5, r), (0, 2 * r), (1, 2 * r)]
    ]
    path = small_csv(tmp_path, rows)
    omap = read_map(spec_for(path))
    assert omap.grid == "hexagonal" and omap.shape == (3, 3) and omap.step_x_um == s
    assert omap.valid.tolist() == [[True, True, True], [True, True, False], [True, True, False]]
    with pytest.raises(InputError, match="Expected a square grid as declared, got coordinates"):
        read_map(spec_for(path, grid="square"))
    sq = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1", "0,1,1,2,3,1"], name="sq.csv")
    with pytest.raises(InputError, match="Expected a hexagonal grid as declared"):
        read_map(spec_for(sq, grid="hexagonal"))


def test_hexagonal_grid_whose_top_row_is_shifted(tmp_path):
    r = np.sqrt(3) / 2
    rows = [f"{x:.6f},{y:.6f},1,2,3,1" for x, y in [(0.5, 0), (1.5, 0), (0, r), (1, r)]]
    omap = read_map(spec_for(small_csv(tmp_path, rows)))
    # Even rows hold the unshifted points (conventions §1): the origin moves half a step left.
    assert omap.valid.tolist() == [[False, True, True], [True, True, False]]
    # coordinates were written to 1e-6 µm
    assert_allclose(omap.axes.origin_um, (-0.5, 0.0), rtol=0, atol=1e-6)


def test_wide_gap_of_missing_columns_keeps_the_step(tmp_path):
    xs = [0, 1, 2, 30, 31]
    rows = [f"{x},{y},1,2,3,1" for x in xs for y in (0, 1)]
    omap = read_map(spec_for(small_csv(tmp_path, rows)))
    assert omap.step_x_um == 1.0 and omap.shape == (2, 32)
    assert int(omap.valid.sum()) == 10


def test_off_grid_noise_within_one_percent_is_accepted(tmp_path):
    rows = ["0.004,0,1,2,3,1", "1.0,0.003,1,2,3,1", "1.996,0,1,2,3,1", "0,1.0,1,2,3,1"]
    omap = read_map(spec_for(small_csv(tmp_path, rows)))
    assert omap.shape == (2, 3)


def test_crlf_bom_quotes_and_trailing_empty_cell(tmp_path):
    raw = (
        '\ufeff"x_um","y_um","phi1_deg","Phi_deg","phi2_deg","phase","ci"\r\n'
        "0,0,1,2,3,1,\r\n1,0,1,2,3,1,0.5\r\n"
    )
    path = write_text(tmp_path / "m.csv", raw)
    omap = read_map(spec_for(path))
    assert omap.quality["ci"][0, 0] != omap.quality["ci"][0, 0]  # NaN: the empty last cell
    assert omap.quality["ci"][0, 1] == np.float32(0.5)


def test_reader_leaves_the_file_unchanged(tmp_path):
    path = write_csv(tmp_path / "m.csv", sample_map())
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    omap = read_map(spec_for(path))
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before
    assert omap.provenance["sha256"] == before


def test_read_map_file_and_relative_paths(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "2,0,1,2,3,1"])
    assert read_map_file(path, format="csv", angles="deg").step_x_um == 2.0
    rel = read_map(spec_for("m.csv", step_um=2), base_dir=tmp_path)
    assert rel.provenance["source_path"] == str(path.resolve())
    axes = read_map_file(path, format="csv", angles="deg", axes=DeclaredAxes("left", "up")).axes
    assert (axes.x, axes.y) == ("left", "up")


def test_read_table_parses_empty_cells_anywhere(tmp_path):
    path = write_text(tmp_path / "t.csv", "a,b,c\n,2,\n,,\n4,,6\n")
    t = read_table(path, delimiter=",")
    assert_array_equal(np.isnan(t.values), [[1, 0, 1], [1, 1, 1], [0, 1, 0]])
    with pytest.raises(ValueError, match="Expected `delimiter` to be one character"):
        read_table(path, delimiter="ab")


def test_place_on_grid_single_row_and_column():
    p = place_on_grid([0.0, 0.5, 1.0], [2.0, 2.0, 2.0])
    assert p.shape == (1, 3) and p.step_y_um == 0.5
    p = place_on_grid([1.0, 1.0], [0.0, 0.25])
    assert p.shape == (2, 1) and p.step_x_um == 0.25


# ----------------------------------------------------------------------------- bad input


def test_missing_column(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3"], header="x_um,y_um,phi1_deg,Phi_deg,phi2_deg")
    with pytest.raises(InputError, match=r"m.csv: header: Expected a column 'phase' for 'phase', got columns \["):
        read_map(spec_for(path))


def test_ragged_row(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3", "2,0,1,2,3,1"])
    with pytest.raises(InputError, match=r"line 3: Expected 6 fields on every row .* got 5"):
        read_map(spec_for(path))
    path = write_text(tmp_path / "w.txt", "a b\n1 2\n3 4 5\n")
    with pytest.raises(InputError, match=r"line 3: Expected 2 fields on every row"):
        read_table(path, whitespace=True)


def test_text_in_a_number_column(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,abc,3,1"])
    with pytest.raises(
        InputError, match=r"line 3: Expected a number in column 'Phi_deg', got 'abc'"
    ):
        read_map(spec_for(path))


def test_all_points_not_indexed(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,0", "1,0,,,,1"])
    with pytest.raises(InputError, match="Expected at least one indexed point"):
        read_map(spec_for(path))


def test_inconsistent_step(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1", "0,1,1,2,3,1"])
    with pytest.raises(
        InputError, match=r"Expected points 0.5 µm apart along x as declared, got 1"
    ):
        read_map(spec_for(path, step_um=0.5))
    with pytest.raises(InputError, match=r"Expected points 1 µm apart along y as declared, got 2"):
        two = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1", "0,2,1,2,3,1"], name="b.csv")
        read_map(spec_for(two, step_x_um=1, step_y_um=1))


def test_zero_and_contradictory_steps(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1"])
    with pytest.raises(InputError, match=r"job.json: /map/step_um: Expected a step > 0 µm, got 0"):
        read_map(spec_for(path, step_um=0), path_for_errors="job.json")
    with pytest.raises(InputError, match="Expected either 'step_um' or 'step_x_um'"):
        read_map(spec_for(path, step_um=1, step_x_um=1, step_y_um=1))
    with pytest.raises(InputError, match="Expected 'step_x_um' and 'step_y_um' together"):
        read_map(spec_for(path, step_x_um=1))
    with pytest.raises(InputError, match="Expected a single 'step_um' on a hexagonal grid"):
        read_map(spec_for(path, step_x_um=1, step_y_um=1, grid="hexagonal"))
    same = small_csv(tmp_path, ["0,0,1,2,3,1", "0,0,1,2,3,1"], name="same.csv")
    with pytest.raises(InputError, match="Expected a map of more than one point position"):
        read_map(spec_for(same))


def test_duplicate_and_off_grid_points(tmp_path):
    dup = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1", "0,1,1,2,3,1", "1,0,5,2,3,1"])
    with pytest.raises(
        InputError, match=r"line 5: Expected one point per grid position, got a dup"
    ):
        read_map(spec_for(dup))
    off = small_csv(
        tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,1", "2,0,1,2,3,1", "3.05,0,1,2,3,1"], name="off.csv"
    )
    with pytest.raises(InputError, match=r"line 5: Expected x on the grid .*\(irregular spacing\)"):
        read_map(spec_for(off))
    irregular = small_csv(
        tmp_path,
        ["0,0,1,2,3,1", "1,0,1,2,3,1", "2,0,1,2,3,1", "3.5,0,1,2,3,1", "4.5,0,1,2,3,1"],
        name="irr.csv",
    )
    with pytest.raises(InputError, match=r"line 5: Expected x on the grid"):
        read_map(spec_for(irregular))


def test_missing_coordinates(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", ",0,1,2,3,1"])
    with pytest.raises(InputError, match=r"line 3: Expected finite coordinates on every row"):
        read_map(spec_for(path))


def test_degrees_radians_mismatch(tmp_path):
    rng = np.random.default_rng(0)
    rows = [
        f"{j},{i},{a:.6f},{b:.6f},{c:.6f},1"
        for (i, j), (a, b, c) in zip(np.ndindex(11, 11), rng.uniform(0, 3.1, (121, 3)), strict=True)
    ]
    path = small_csv(tmp_path, rows)
    with pytest.raises(InputError, match=r"look like radians; if so, declare \"angles\": \"rad\""):
        read_map(spec_for(path))
    as_rad = {"phi1": "phi1_deg", "Phi": "Phi_deg", "phi2": "phi2_deg"}
    assert read_map(spec_for(path, angles="rad", columns=as_rad)).valid.all()
    degrees = small_csv(tmp_path, ["0,0,120,45,300,1"], name="deg.csv")
    with pytest.raises(InputError, match=r"Expected angles in radians as declared .* \"deg\""):
        read_map(spec_for(degrees, angles="rad", columns=as_rad, step_um=1))


def test_phase_id_not_in_the_job(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1", "1,0,1,2,3,3"])
    with pytest.raises(
        InputError, match=r"line 3: Expected phase ids among the job's phases \(1, 2\)"
    ):
        read_map(spec_for(path), phase_ids=[1, 2])
    bad = small_csv(tmp_path, ["0,0,1,2,3,1.5"], name="b.csv")
    with pytest.raises(
        InputError, match=r"Expected phase ids to be whole numbers >= 0 and < 2\^31"
    ):
        read_map(spec_for(bad, step_um=1))


def test_empty_file_and_header_only(tmp_path):
    with pytest.raises(InputError, match="empty.csv: Expected a header row and data rows, got an"):
        read_map(spec_for(write_text(tmp_path / "empty.csv", "")))
    with pytest.raises(InputError, match="Expected data rows after the header, got none"):
        read_map(spec_for(write_text(tmp_path / "h.csv", HEADER + "\n")))
    with pytest.raises(InputError, match="Expected distinct column names, got 'a' twice"):
        read_table(write_text(tmp_path / "d.csv", "a,a\n1,2\n"), delimiter=",")
    with pytest.raises(InputError, match="Expected a header row of non-empty column names"):
        read_table(write_text(tmp_path / "e.csv", "a,,b\n1,2,3\n"), delimiter=",")
    (tmp_path / "u.csv").write_bytes(b"\xff\xfe,a\n1,2\n")
    with pytest.raises(InputError, match="Expected a UTF-8 text header row"):
        read_table(tmp_path / "u.csv", delimiter=",")
    with pytest.raises(InputError, match="Expected a regular file, got a folder"):
        read_table(tmp_path, delimiter=",")


def test_path_that_does_not_exist(tmp_path):
    with pytest.raises(InputError, match=r"/map/path: Expected an existing map file, got no file"):
        read_map(spec_for(tmp_path / "nope.csv"))
    with pytest.raises(InputError, match="Expected an existing file, got none at this path"):
        read_table(tmp_path / "nope.csv")


def test_spec_field_errors(tmp_path):
    path = small_csv(tmp_path, ["0,0,1,2,3,1"])
    with pytest.raises(InputError, match=r"/map/format: Expected one of \('csv', 'tsv'"):
        read_map(spec_for(path, format="xlsx"))
    with pytest.raises(InputError, match=r"/map/angles: Expected one of \('deg', 'rad'\)"):
        read_map({k: v for k, v in spec_for(path).items() if k != "angles"})
    with pytest.raises(InputError, match=r"/map/grid: Expected one of \('square', 'hexagonal'\)"):
        read_map(spec_for(path, grid="hex"))
    with pytest.raises(InputError, match=r"/map: Expected a 'path' to the map file"):
        read_map({"format": "csv"})
    with pytest.raises(InputError, match="Expected an object"):
        read_map(["not", "a", "spec"])
    with pytest.raises(InputError, match=r"/map/columns/euler: Expected column roles among"):
        read_map(spec_for(path, columns={"euler": "E"}))


def test_npz_errors(tmp_path):
    p = tmp_path / "m.npz"
    base = {
        "path": str(p),
        "format": "npz",
        "angles": "deg",
        "step_um": 1,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }
    np.savez(p, phase=np.ones((2, 2)))
    with pytest.raises(InputError, match=r"euler_deg: Expected an array named 'euler_deg'"):
        read_map(base)
    np.savez(p, euler_deg=np.zeros((2, 2)), phase=np.ones((2, 2)))
    with pytest.raises(InputError, match=r"Expected 'euler_deg' to have shape \(H, W, 3\)"):
        read_map(base)
    np.savez(p, euler_deg=np.zeros((2, 2, 3)), phase=np.ones((3, 2)))
    with pytest.raises(InputError, match=r"Expected 'phase' to have shape \(2, 2\)"):
        read_map(base)
    np.savez(p, euler_deg=np.zeros((2, 2, 3)), phase=np.ones((2, 2)), ci=np.ones(3))
    with pytest.raises(InputError, match="Expected quality array 'ci' to be numbers of shape"):
        read_map(base)
    np.savez(p, euler_deg=np.zeros((2, 2, 3)), euler_rad=np.zeros((2, 2, 3)), phase=np.ones((2, 2)))
    with pytest.raises(InputError, match="Expected only 'euler_deg'"):
        read_map(base)
    np.savez(p, euler_deg=np.zeros((2, 2, 3)), phase=np.array([["a", "b"], ["c", "d"]]))
    with pytest.raises(InputError, match="phase: Expected numbers, got dtype"):
        read_map(base)
    p.write_bytes(b"not a zip")
    with pytest.raises(InputError, match="Expected a NumPy .npz archive"):
        read_map(base)
    with pytest.raises(InputError, match=r"/map/grid: Expected 'grid' for a npz map"):
        read_map({k: v for k, v in base.items() if k != "grid"})
    np.savez(p, euler_deg=np.zeros((2, 2, 3)), phase=np.full((2, 2), 7))
    with pytest.raises(InputError, match=r"row 0, column 0: Expected phase ids among the job's"):
        read_map(base, phase_ids=[1])


def test_tiff_channel_count_disagrees_with_sidecar(tmp_path):
    tif = tmp_path / "m.tif"
    tifffile.imwrite(tif, np.zeros((5, 3, 3), np.float32), photometric="minisblack")
    side = tmp_path / "m.tif.json"
    side.write_text(json.dumps({"schema_version": 1, "channels": ["phi1", "Phi", "phi2", "phase"]}))
    spec = {
        "path": str(tif),
        "format": "tiff",
        "angles": "deg",
        "step_um": 1,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }
    with pytest.raises(
        InputError, match=r"m.tif: Expected 4 channels as the sidecar names .* got 5"
    ):
        read_map(spec)
    side.write_text(json.dumps({"schema_version": 1, "channels": ["phi1", "Phi", "phase", "ci"]}))
    with pytest.raises(InputError, match=r"m.tif.json: /channels: Expected a valid sidecar"):
        read_map(spec)
    side.write_text(
        json.dumps(
            {
                "schema_version": 1,
                "angles": "rad",
                "channels": ["phi1", "Phi", "phi2", "phase", "ci"],
            }
        )
    )
    with pytest.raises(InputError, match=r"/angles: Expected the sidecar's angles to agree"):
        read_map(spec)
    side.write_text("{not json")
    with pytest.raises(InputError, match="Expected valid JSON, got"):
        read_map(spec)
    side.unlink()
    with pytest.raises(InputError, match="Expected the TIFF's JSON sidecar naming its channels"):
        read_map(spec)
    side.write_text(json.dumps({"schema_version": 1, "channels": ["phi1", "Phi", "phi2", "phase"]}))
    tif.write_bytes(b"not a tiff")
    with pytest.raises(InputError, match="Expected a TIFF file, got an unreadable one"):
        read_map(spec)


def test_quat_storage_precision_bound():
    # float32 components: the stored orientation is within 1e-5° of the float64 one.
    q = random_quat(2000, rng=9)
    q32 = q.astype(np.float32).astype(np.float64)
    q32 /= np.linalg.norm(q32, axis=1, keepdims=True)
    d = quat_multiply(quat_inverse(q), q32)
    angle = np.degrees(2 * np.arcsin(np.clip(np.linalg.norm(d[:, 1:], axis=1), 0, 1)))
    assert angle.max() < 1e-5


def test_blank_lines_keep_line_numbers(tmp_path):
    text = HEADER + "\n0,0,1,2,3,1\n\n1,0,1,2,3,1\n\n5.5,0,1,2,3,1\n\n"
    path = write_text(tmp_path / "b.csv", text)
    table = read_table(path, delimiter=",")
    assert [table.line_of(k) for k in range(3)] == [2, 4, 6]
    with pytest.raises(InputError, match=r"line 6: Expected x on the grid"):
        read_map(spec_for(path))


def test_empty_cells_at_line_start_and_quoted_numbers(tmp_path):
    path = write_text(tmp_path / "q.csv", 'a,b,c\n,"2",3\n4,5,\n')
    assert_array_equal(np.isnan(read_table(path, delimiter=",").values), [[1, 0, 0], [0, 0, 1]])


def test_written_files_get_ordinary_permissions(tmp_path):
    import os

    old = os.umask(0o022)
    try:
        path = write_csv(tmp_path / "p.csv", sample_map())
    finally:
        os.umask(old)
    assert (path.stat().st_mode & 0o777) == 0o644


def test_hexagonal_step_checked_against_declaration(tmp_path):
    r = np.sqrt(3) / 2
    rows = [f"{x:.6f},{y:.6f},1,2,3,1" for x, y in [(0, 0), (1, 0), (0.5, r), (1.5, r)]]
    path = small_csv(tmp_path, rows)
    assert read_map(spec_for(path, step_um=1.0, grid="hexagonal")).step_x_um == 1.0
    with pytest.raises(InputError, match=r"Expected the points to be 0.5 µm apart as declared"):
        read_map(spec_for(path, step_um=0.5))


def test_array_maps_need_a_step(tmp_path):
    np.savez(tmp_path / "m.npz", euler_deg=np.zeros((2, 2, 3)), phase=np.ones((2, 2)))
    spec = {
        "path": str(tmp_path / "m.npz"),
        "format": "npz",
        "angles": "deg",
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }
    with pytest.raises(InputError, match=r"/map/step_um: Expected 'step_um' for a npz map"):
        read_map(spec)


def test_tiff_reader_direct_errors(tmp_path):
    from inclination.io.arrays import read_tiff_arrays

    side = tmp_path / "c.tif.json"
    side.write_text(json.dumps({"schema_version": 1, "channels": ["phi1", "Phi", "phi2", "phase"]}))
    with pytest.raises(InputError, match="Expected an existing file, got none at this path"):
        read_tiff_arrays(tmp_path / "none.tif", sidecar_path=side, angles="deg")
    tifffile.imwrite(
        tmp_path / "c.tif", np.zeros((4, 2, 2), np.complex64), photometric="minisblack"
    )
    with pytest.raises(InputError, match="Expected numeric channels, got dtype complex64"):
        read_tiff_arrays(tmp_path / "c.tif", sidecar_path=side, angles="deg")


def test_npz_and_tiff_files_unchanged_by_reading(tmp_path):
    omap = sample_map()
    npz = write_npz(tmp_path / "m.npz", omap)
    tif, side = write_tiff(tmp_path / "m.tif", omap)
    before = [p.read_bytes() for p in (npz, tif, side)]
    common = {
        "angles": "deg",
        "step_um": 0.5,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }
    read_map({"path": str(npz), "format": "npz", **common})
    read_map({"path": str(tif), "format": "tiff", **common})
    assert [p.read_bytes() for p in (npz, tif, side)] == before


def test_points_and_vectors_refuse_bad_shapes():
    axes = DeclaredAxes()
    with pytest.raises(ValueError, match=r"Expected `xy_sample_um` to have shape \(\.\.\., 2\)"):
        axes.points_to_declared([1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match=r"Expected `v_sample` to have shape \(\.\.\., 3\)"):
        axes.vectors_to_declared([1.0, 2.0])


@given(
    h=st.integers(1, 6),
    w=st.integers(2, 6),
    step=st.sampled_from([0.1, 0.25, 0.5, 1.0, 3.0]),
    hexagonal=st.booleans(),
    seed=st.integers(0, 2**16),
)
def test_place_on_grid_recovers_indices_of_any_subset_in_any_order(h, w, step, hexagonal, seed):
    # Invariant: points placed from their own coordinates land on their grid indices,
    # whatever subset is present and in whatever order (conventions §1 positions).
    rng = np.random.default_rng(seed)
    i, j = np.divmod(np.arange(h * w), w)
    keep = rng.random(h * w) < 0.7
    # Two neighbours in the first row and the first point of the second fix the
    # origin and show the declared step (a wider spacing is refused as inconsistent).
    keep[[0, 1]] = True
    if h > 1:
        keep[w] = True
    i, j = i[keep], j[keep]
    if hexagonal:
        x, y = (j + 0.5 * (i % 2)) * step, i * step * np.sqrt(3) / 2
    else:
        x, y = j * step, i * step
    order = rng.permutation(i.size)
    noise = rng.uniform(-0.004, 0.004, (2, i.size)) * step
    grid = "hexagonal" if hexagonal and h > 1 else "square"
    p = place_on_grid(
        x[order] + noise[0], y[order] + noise[1], step_x_um=step, step_y_um=step, grid=grid
    )
    assert_array_equal(p.row, i[order] - i.min())
    assert_array_equal(p.col, j[order])


def test_rotation_sense_active_reads_the_inverse(tmp_path):
    # An active rotation r maps crystal to data frame, so g = rᵀ (conventions §3);
    # scipy's Rotation.inv() is the reference inverse.
    q = random_quat(6, rng=3).reshape(2, 3, 4)
    omap = OrientationMap(q, np.ones((2, 3), int), grid="square", step_x_um=1.0, step_y_um=1.0)
    write_npz(tmp_path / "m.npz", omap)
    spec = {
        "path": "m.npz",
        "format": "npz",
        "angles": "deg",
        "step_um": 1,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
        "rotation_sense": "active",
    }
    active = read_map(spec, base_dir=tmp_path)
    expected = Rotation.from_quat(q.reshape(-1, 4)[:, [1, 2, 3, 0]]).inv().as_matrix()
    got = Rotation.from_quat(np.asarray(active.quat, float).reshape(-1, 4)[:, [1, 2, 3, 0]])
    assert_allclose(got.as_matrix(), expected, rtol=0, atol=1e-5)
    assert active.rotation_sense == "active"
    # Written back, the Euler angles are the stored ones again.
    assert_allclose(active.euler_deg_declared(), omap.euler_deg_declared(), rtol=0, atol=2e-3)


def test_rotation_sense_bad_value(tmp_path):
    q = np.zeros((1, 2, 4))
    q[..., 0] = 1.0
    write_npz(tmp_path / "m.npz", OrientationMap(q, np.ones((1, 2), int), step_x_um=1.0))
    spec = {
        "path": "m.npz",
        "format": "npz",
        "angles": "deg",
        "step_um": 1,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
        "rotation_sense": "inverse",
    }
    with pytest.raises(InputError, match="rotation_sense"):
        read_map(spec, base_dir=tmp_path)
    with pytest.raises(SettingError, match="rotation_sense"):
        OrientationMap(q, np.ones((1, 2), int), rotation_sense="inverse")
