"""Declared axes and data-frame rotations (conventions §2–§3), checked against scipy's rotations."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy.spatial.transform import Rotation

from inclination.crystal.rotations import (
    quat_as_matrix,
    quat_from_euler_deg,
    quat_multiply,
    random_quat,
)
from inclination.errors import InputError
from inclination.frames import (
    NAMED_TURNS,
    DeclaredAxes,
    data_frame_quat,
    orientations_to_declared,
    orientations_to_sample,
)

# Hand table (conventions §2: X_S right, Y_S down, Z_S = X_S × Y_S into the material):
# each screen direction as a vector in S, and where x × y points for every perpendicular pair.
SCREEN = {"right": (1, 0, 0), "left": (-1, 0, 0), "down": (0, 1, 0), "up": (0, -1, 0)}
EIGHT = [
    ("right", "down", "into"),
    ("right", "up", "out"),
    ("left", "down", "out"),
    ("left", "up", "into"),
    ("down", "right", "out"),
    ("down", "left", "into"),
    ("up", "right", "into"),
    ("up", "left", "out"),
]


def hand_matrix(x, y):
    """Columns: declared x, y, z in S, built here from the hand table (not from frames.py)."""
    ex, ey = np.array(SCREEN[x], float), np.array(SCREEN[y], float)
    return np.column_stack([ex, ey, np.cross(ex, ey)])


def bunge_matrix_scipy(euler_deg):
    # Bunge passive g = Rz(φ2)Rx(Φ)Rz(φ1) is the transpose of scipy's intrinsic 'ZXZ'
    # active rotation (scipy.spatial.transform.Rotation documentation, intrinsic sequences).
    return Rotation.from_euler("ZXZ", euler_deg, degrees=True).as_matrix().swapaxes(-1, -2)


@pytest.mark.parametrize(("x", "y", "z"), EIGHT)
def test_matrix_and_z_for_all_eight_declarations(x, y, z):
    axes = DeclaredAxes(x, y)
    m = axes.matrix_to_sample
    assert_array_equal(m, hand_matrix(x, y))
    assert_allclose(np.linalg.det(m), 1.0, rtol=0, atol=1e-12)
    assert axes.z == z
    assert not m.flags.writeable


@pytest.mark.parametrize(("x", "y", "z"), EIGHT)
def test_in_plane_angles_agree_with_vector_conversion(x, y, z):
    axes = DeclaredAxes(x, y)
    theta = np.random.default_rng(3).uniform(0, 360, 50)
    u_s = np.stack([np.cos(np.radians(theta)), np.sin(np.radians(theta)), 0 * theta], axis=-1)
    # Reference: the direction's declared components, angle from +x toward +y (§2).
    u_d = u_s @ hand_matrix(x, y)
    expected = np.degrees(np.arctan2(u_d[:, 1], u_d[:, 0])) % 360.0
    got = axes.angle_to_declared_deg(theta, kind="azimuth")
    assert_allclose(np.cos(np.radians(got - expected)), 1.0, rtol=0, atol=1e-12)
    assert np.all((got >= 0) & (got < 360))
    trace = axes.angle_to_declared_deg(theta, kind="trace")
    assert np.all((trace >= 0) & (trace < 180))
    assert_allclose(np.sin(np.radians(trace - expected)), 0.0, rtol=0, atol=1e-12)
    back = axes.angle_to_sample_deg(got, kind="azimuth")
    assert_allclose(back, theta % 360.0, rtol=0, atol=1e-9)


def test_angles_pass_nan_and_refuse_unknown_kind():
    axes = DeclaredAxes("right", "up")
    assert np.isnan(axes.angle_to_declared_deg(np.nan))
    with pytest.raises(ValueError, match=r"Expected `kind` to be one of \('trace', 'azimuth'\)"):
        axes.angle_to_declared_deg(10.0, kind="bearing")
    with pytest.raises(ValueError, match="Expected `kind` to be one of"):
        axes.angle_to_sample_deg(10.0, kind="bearing")


@pytest.mark.parametrize(("x", "y", "z"), EIGHT)
def test_points_and_vectors_round_trip(x, y, z):
    axes = DeclaredAxes(x, y, origin_um=(12.5, -3.0))
    xy_s = np.random.default_rng(1).uniform(-50, 50, (20, 2))
    xy_d = axes.points_to_declared(xy_s)
    # Reference: declared coordinates are the origin plus the S offset's declared components.
    expected = np.array([12.5, -3.0]) + (np.c_[xy_s, np.zeros(20)] @ hand_matrix(x, y))[:, :2]
    assert_allclose(xy_d, expected, rtol=0, atol=1e-12)
    assert_allclose(axes.points_to_sample(xy_d), xy_s, rtol=0, atol=1e-12)
    v = np.random.default_rng(2).normal(size=(10, 3))
    assert_allclose(axes.vectors_to_sample(axes.vectors_to_declared(v)), v, rtol=0, atol=1e-12)
    assert_allclose(axes.vectors_to_declared(v), v @ hand_matrix(x, y), rtol=0, atol=1e-12)


def test_declared_axes_refuse_bad_values():
    with pytest.raises(ValueError, match="Expected `x` to be one of"):
        DeclaredAxes("east", "down")
    with pytest.raises(ValueError, match="Expected `y` to be one of"):
        DeclaredAxes("right", "south")
    with pytest.raises(ValueError, match="Expected `x` and `y` to be perpendicular"):
        DeclaredAxes("right", "left")
    with pytest.raises(ValueError, match="Expected `origin_um` to be two finite numbers"):
        DeclaredAxes("right", "down", origin_um=(0.0, np.nan))


def test_from_dict_errors_name_the_pointer():
    assert DeclaredAxes.from_dict({"x": "up", "y": "left"}) == DeclaredAxes("up", "left")
    with pytest.raises(InputError, match=r"/map/axes: Expected an object with exactly the keys"):
        DeclaredAxes.from_dict({"x": "right"})
    with pytest.raises(InputError, match=r"job.json: /map/axes/y: Expected one of"):
        DeclaredAxes.from_dict({"x": "right", "y": "inward"}, path="job.json")
    with pytest.raises(InputError, match=r"/map/axes: Expected `x` and `y` to be perpendicular"):
        DeclaredAxes.from_dict({"x": "up", "y": "down"})


def test_as_dict_and_with_origin():
    axes = DeclaredAxes("down", "right").with_origin((1.0, 2.0))
    assert axes.as_dict() == {"x": "down", "y": "right"}
    assert axes.origin_um == (1.0, 2.0)
    assert DeclaredAxes().is_sample_frame and not axes.is_sample_frame


@pytest.mark.parametrize("name", NAMED_TURNS)
def test_named_turns_match_scipy(name):
    q = data_frame_quat(name)
    if name == "identity":
        expected = np.eye(3)
    else:
        axis = np.eye(3)["xyz".index(name[0])]
        # scipy's from_rotvec is the active right-handed turn: its matrix has the turned
        # axes as columns, which is Q (v_declared = Q v_data) by the schema's definition.
        expected = Rotation.from_rotvec(np.radians(float(name[1:])) * axis).as_matrix()
    assert_allclose(quat_as_matrix(q), expected, rtol=0, atol=1e-12)


def test_axis_angle_turn_matches_scipy():
    q = data_frame_quat({"axis": [1, 2, 2], "angle_deg": 40})
    expected = Rotation.from_rotvec(np.radians(40) * np.array([1, 2, 2]) / 3).as_matrix()
    assert_allclose(quat_as_matrix(q), expected, rtol=0, atol=1e-12)
    assert_array_equal(data_frame_quat(None), [1, 0, 0, 0])


def test_data_frame_rotation_errors():
    with pytest.raises(InputError, match=r"/map/data_frame_rotation: Expected one of \('identity'"):
        data_frame_quat("z45")
    with pytest.raises(InputError, match=r"data_frame_rotation/axis: Expected a non-zero 'axis'"):
        data_frame_quat({"axis": [0, 0, 0], "angle_deg": 90})
    with pytest.raises(InputError, match="Expected 'axis' to be 3 finite numbers"):
        data_frame_quat({"axis": [0, 1], "angle_deg": 90})
    with pytest.raises(InputError, match="Expected 'axis' to be 3 finite numbers"):
        data_frame_quat({"axis": [0, 0, 1], "angle_deg": "ninety"})
    with pytest.raises(InputError, match="Expected one of"):
        data_frame_quat(42)


def test_hand_worked_orientation_in_turned_axes():
    # Declared x left, y up: the declared frame is S turned 180° about Z_S. A crystal
    # whose axes coincide with the declared axes (g_data = identity) has its crystal x
    # axis along screen left, -X_S: row 0 of g_S (crystal x in S) is (-1, 0, 0).
    g = quat_as_matrix(orientations_to_sample([1.0, 0, 0, 0], DeclaredAxes("left", "up")))
    assert_allclose(g, np.diag([-1.0, -1.0, 1.0]), rtol=0, atol=1e-12)


@pytest.mark.parametrize(("x", "y", "z"), EIGHT)
@pytest.mark.parametrize(
    "turn", [None, "z180", "x90", {"axis": [1, -1, 2], "angle_deg": 33.0}], ids=str
)
def test_orientations_to_sample_against_scipy(x, y, z, turn):
    euler = np.random.default_rng(7).uniform([0, 0, 0], [360, 180, 360], (25, 3))
    g_data = bunge_matrix_scipy(euler)
    q_turn = data_frame_quat(turn)
    if turn is None:
        big_q = np.eye(3)
    elif isinstance(turn, str):
        axis = np.eye(3)["xyz".index(turn[0])]
        big_q = Rotation.from_rotvec(np.radians(float(turn[1:])) * axis).as_matrix()
    else:
        axis = np.array(turn["axis"], float) / np.linalg.norm(turn["axis"])
        big_q = Rotation.from_rotvec(np.radians(turn["angle_deg"]) * axis).as_matrix()
    # Derivation (frames.orientations_to_sample): v_C = g_data v_A, v_A = Qᵀ Mᵀ v_S.
    expected = g_data @ big_q.T @ hand_matrix(x, y).T
    axes = DeclaredAxes(x, y)
    q_s = orientations_to_sample(quat_from_euler_deg(euler), axes, q_turn)
    assert_allclose(quat_as_matrix(q_s), expected, rtol=0, atol=1e-12)
    assert np.all(q_s[:, 0] >= 0)
    back = orientations_to_declared(q_s, axes, q_turn)
    assert_allclose(quat_as_matrix(back), g_data, rtol=0, atol=1e-12)


def test_orientation_round_trip_random():
    q = random_quat(100, rng=5)
    axes = DeclaredAxes("up", "right")
    turn = data_frame_quat("y270")
    back = orientations_to_sample(orientations_to_declared(q, axes, turn), axes, turn)
    assert_allclose(quat_as_matrix(back), quat_as_matrix(q), rtol=0, atol=1e-12)


@pytest.mark.parametrize("sense", ["passive", "active"])
def test_orientations_to_declared_in_the_sample_frame_is_the_product_by_the_identity(sense):
    # Declared axes = S and no data-frame turn: the product by R = identity is skipped
    # (conventions §2–§3); the bits are those of the product q ⊗ (1, -0, -0, -0) written out
    # (quat_multiply), signed zeros and negative scalar parts included.
    rng = np.random.default_rng(31)
    q = rng.normal(size=(3000, 4))
    q[rng.random(q.shape) < 0.2] = 0.0
    q[rng.random(q.shape) < 0.1] = -0.0
    got = orientations_to_declared(q, DeclaredAxes(), rotation_sense=sense)
    p = quat_multiply(q, [1.0, -0.0, -0.0, -0.0])
    if sense == "active":
        p = p * np.array([1.0, -1.0, -1.0, -1.0])
    want = np.where(p[..., :1] < 0, -p, p) + 0.0
    assert np.array_equal(got.view(np.int64), want.view(np.int64))
    with pytest.raises(InputError, match="quat_sample"):
        orientations_to_declared([[np.nan, 0.0, 0.0, 1.0]], DeclaredAxes())
