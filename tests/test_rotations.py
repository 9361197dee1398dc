"""Rotations against scipy.spatial.transform and against invariants (conventions §3)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from inclination.crystal.rotations import (
    matrix_from_euler_deg,
    mean_quat,
    quat_angle_deg,
    quat_apply,
    quat_as_axis_angle_deg,
    quat_as_euler_deg,
    quat_as_matrix,
    quat_as_rodrigues,
    quat_from_axis_angle_deg,
    quat_from_euler_deg,
    quat_from_matrix,
    quat_from_rodrigues,
    quat_inverse,
    quat_multiply,
    quat_normalise,
    quat_reduce,
    random_quat,
)


def _random_euler(n, seed):
    rng = np.random.default_rng(seed)
    return rng.uniform([0, 0, 0], [360, 180, 360], (n, 3))


def _scipy_g(euler_deg):
    # scipy's extrinsic-free "ZXZ" (intrinsic) is the active rotation whose matrix is gᵀ,
    # so the passive Bunge matrix g is its inverse (scipy documentation, Rotation.from_euler).
    return Rotation.from_euler("ZXZ", euler_deg, degrees=True).inv()


def test_bunge_matrix_worked_value():
    # Reference: scipy Rotation.from_euler("ZXZ", [30, 45, 60], degrees=True).inv().as_matrix(),
    # values as printed in the foundation issue.
    expected = [
        [0.126826, 0.780330, 0.612372],
        [-0.926777, -0.126826, 0.353553],
        [0.353553, -0.612372, 0.707107],
    ]
    assert_allclose(matrix_from_euler_deg([30, 45, 60]), expected, rtol=0, atol=1e-6)
    assert_allclose(_scipy_g([30, 45, 60]).as_matrix(), expected, rtol=0, atol=1e-6)


def test_euler_to_matrix_matches_scipy():
    e = _random_euler(2000, 1)
    assert_allclose(matrix_from_euler_deg(e), _scipy_g(e).as_matrix(), rtol=0, atol=1e-12)


def test_quaternion_matches_scipy_conjugate_convention():
    # scipy's quaternions are scalar-last and describe the active rotation; the active
    # rotation whose matrix equals g is R.inv(), so our scalar-first q equals scipy's
    # R.inv().as_quat() rolled to scalar-first (up to the sign of q).
    e = _random_euler(2000, 2)
    ours = quat_from_euler_deg(e)
    theirs = np.roll(_scipy_g(e).as_quat(), 1, axis=-1)
    theirs *= np.where(theirs[:, :1] < 0, -1.0, 1.0)
    assert_allclose(ours, theirs, rtol=0, atol=1e-12)


def test_matrix_to_quaternion_round_trip():
    e = _random_euler(2000, 3)
    q = quat_from_euler_deg(e)
    assert_allclose(quat_from_matrix(quat_as_matrix(q)), q, rtol=0, atol=1e-12)
    assert_allclose(quat_from_matrix(_scipy_g(e).as_matrix()), q, rtol=0, atol=1e-12)


def test_euler_round_trip_on_the_matrix():
    e = _random_euler(2000, 4)
    back = quat_as_euler_deg(quat_from_euler_deg(e))
    assert_allclose(matrix_from_euler_deg(back), matrix_from_euler_deg(e), rtol=0, atol=1e-10)
    assert np.all((back[:, 0] >= 0) & (back[:, 0] < 360))
    assert np.all((back[:, 1] >= 0) & (back[:, 1] <= 180))
    assert np.all((back[:, 2] >= 0) & (back[:, 2] < 360))


@pytest.mark.parametrize("big_phi", [0.0, 180.0])
def test_degenerate_euler_round_trip_without_warnings(big_phi):
    # Φ = 0 and Φ = 180° leave only φ1 ± φ2 defined; the round trip must hold on the matrix,
    # and pytest's filterwarnings=error proves no RuntimeWarning leaks.
    e = np.array([[30.0, big_phi, 60.0], [0.0, big_phi, 0.0], [359.0, big_phi, 2.0]])
    back = quat_as_euler_deg(quat_from_euler_deg(e))
    assert_allclose(matrix_from_euler_deg(back), matrix_from_euler_deg(e), rtol=0, atol=1e-10)
    assert_allclose(back[:, 2], 0.0, rtol=0, atol=0)


def test_axis_angle_matches_scipy_rotvec():
    e = _random_euler(1000, 5)
    axis, angle = quat_as_axis_angle_deg(quat_from_euler_deg(e))
    # scipy's rotvec of the active rotation with matrix g (= R.inv()).
    assert_allclose(axis * angle[:, None], _scipy_g(e).as_rotvec(degrees=True), rtol=0, atol=1e-9)
    q = quat_from_axis_angle_deg(axis, angle)
    assert_allclose(q, quat_from_euler_deg(e), rtol=0, atol=1e-12)
    assert_allclose(quat_angle_deg(q), angle, rtol=0, atol=1e-9)


def test_rodrigues_round_trip_and_scipy_mrp_relation():
    q = random_quat(500, rng=6)
    r = quat_as_rodrigues(q)
    assert_allclose(quat_from_rodrigues(r), q, rtol=0, atol=1e-12)
    # Rodrigues-Frank vector n tan(ω/2) = rotvec/ω · tan(ω/2) (hand derivation from the definition).
    rot = Rotation.from_quat(np.roll(q, -1, axis=-1))
    rv = rot.as_rotvec()
    w = np.linalg.norm(rv, axis=-1, keepdims=True)
    assert_allclose(r, rv / w * np.tan(w / 2), rtol=1e-9, atol=1e-12)


def test_apply_and_compose_match_matrices():
    qa, qb = random_quat(300, rng=7), random_quat(300, rng=8)
    v = np.random.default_rng(9).normal(size=(300, 3))
    ga, gb = quat_as_matrix(qa), quat_as_matrix(qb)
    assert_allclose(quat_apply(qa, v), np.einsum("nij,nj->ni", ga, v), rtol=0, atol=1e-12)
    assert_allclose(quat_as_matrix(quat_multiply(qb, qa)), gb @ ga, rtol=0, atol=1e-12)
    assert_allclose(quat_as_matrix(quat_inverse(qa)), np.swapaxes(ga, -1, -2), rtol=0, atol=1e-12)
    # scipy composition: (Rb * Ra) applies Ra first; our g_b @ g_a is the same order.
    sa = Rotation.from_quat(np.roll(qa, -1, axis=-1))
    sb = Rotation.from_quat(np.roll(qb, -1, axis=-1))
    assert_allclose((sb * sa).as_matrix(), gb @ ga, rtol=0, atol=1e-12)


def test_random_quat_is_uniform():
    # For uniform orientations E[q0²] = 1/4 and the rotation angle has density
    # (1 - cos ω)/π on [0, π] (Morawiec, Orientations and Rotations, 2004), mean ω = π/2 + 2/π.
    q = random_quat(200_000, rng=10)
    assert_allclose(np.linalg.norm(q, axis=1), 1.0, rtol=0, atol=1e-12)
    assert np.all(q[:, 0] >= 0)
    assert_allclose(np.mean(q**2, axis=0), 0.25, rtol=0, atol=0.005)
    mean_angle = np.deg2rad(quat_angle_deg(q)).mean()
    assert_allclose(mean_angle, np.pi / 2 + 2 / np.pi, rtol=0, atol=0.01)


def test_random_quat_is_reproducible():
    assert_allclose(random_quat(5, rng=3), random_quat(5, rng=3), rtol=0, atol=0)


def test_mean_quat_symmetry_aware():
    # Orientations scattered 2° about a centre and each replaced by a random cubic
    # equivalent (24 rotations from scipy's create_group("O")) still average to the centre.
    centre = quat_from_euler_deg([20.0, 30.0, 40.0])
    rng = np.random.default_rng(11)
    scatter = quat_from_axis_angle_deg(rng.normal(size=(50, 3)), rng.uniform(0, 2, 50))
    q = quat_multiply(scatter, np.broadcast_to(centre, (50, 4)))
    ops = np.roll(Rotation.create_group("O").as_quat(), 1, axis=-1)
    q_sym = quat_multiply(ops[rng.integers(0, 24, 50)], q)
    m_plain = mean_quat(q)
    m_sym = mean_quat(q_sym, ops)
    # Compare up to symmetry: the smallest angle between m_sym and any s ⊗ centre.
    best = np.max(np.abs(quat_multiply(ops, np.broadcast_to(centre, (24, 4))) @ m_sym))
    assert 2 * np.rad2deg(np.arccos(min(best, 1.0))) < 0.5
    assert abs(m_plain @ centre) > np.cos(np.deg2rad(0.25))


@given(
    st.floats(0, 360, allow_nan=False),
    st.floats(0, 180, allow_nan=False),
    st.floats(0, 360, allow_nan=False),
)
def test_property_euler_matrix_round_trip(phi1, big_phi, phi2):
    e = np.array([phi1, big_phi, phi2])
    g = matrix_from_euler_deg(e)
    assert_allclose(
        matrix_from_euler_deg(quat_as_euler_deg(quat_from_matrix(g))), g, rtol=0, atol=1e-9
    )


def test_bad_inputs_raise():
    with pytest.raises(
        ValueError, match=r"Expected `euler_deg` to have shape \(\.\.\., 3\), got \(2, 4\)"
    ):
        quat_from_euler_deg(np.zeros((2, 4)))
    with pytest.raises(ValueError, match="non-finite value at index"):
        quat_from_euler_deg([[0, np.nan, 0]])
    with pytest.raises(ValueError, match="non-zero"):
        quat_normalise([0, 0, 0, 0])
    with pytest.raises(ValueError, match="proper rotations"):
        quat_from_matrix(-np.eye(3))
    with pytest.raises(ValueError, match="whole number"):
        random_quat(-1)
    with pytest.raises(TypeError, match="array of numbers"):
        quat_reduce("abc")
    with pytest.raises(ValueError, match="zero axis"):
        quat_from_axis_angle_deg([0, 0, 0], 10.0)
    with pytest.raises(ValueError, match=r"shape \(N, 4\)"):
        mean_quat(np.zeros((0, 4)))


def test_float32_euler_conversion_precision():
    # float32 trigonometry (the map readers' path) against the float64 result: the
    # rotation between them stays below 5e-5° (bound stated in the docstring). The angle
    # comes from the chord |q64 - q32| (4 arcsin(chord/2)), which, unlike arccos of the
    # dot product, keeps its precision near zero.
    e = _random_euler(100_000, 12)
    q64 = quat_from_euler_deg(e)
    q32 = quat_from_euler_deg(e, dtype=np.float32)
    assert q32.dtype == np.float32
    chord = np.linalg.norm(q64 - q32.astype(np.float64), axis=1)
    angle = np.rad2deg(4 * np.arcsin(chord / 2))
    assert angle.max() < 5e-5
    with pytest.raises(ValueError, match="float64 or float32"):
        quat_from_euler_deg(e[:2], dtype=np.int32)


def test_euler_angles_of_a_row_do_not_depend_on_the_other_rows():
    # quat_as_euler_deg works out the degenerate rows (Φ = 0 or 180°) apart from the others;
    # every step is elementwise, so a row's bits are the same alone or among any others.
    rng = np.random.default_rng(21)
    q = rng.normal(size=(400, 4))
    e = np.array([[30.0, 0.0, 60.0], [359.0, 180.0, 2.0], [0.0, 0.0, 0.0], [200.0, 180.0, 0.0]])
    q[::9] = quat_from_euler_deg(e)[rng.integers(0, 4, len(q[::9]))]
    q[5::11, 1:] *= 1e-13  # chi below the degenerate limit, not exactly zero
    q[7::13] *= -1.0
    whole = quat_as_euler_deg(q)
    alone = np.array([quat_as_euler_deg(row) for row in q])
    assert np.array_equal(whole.view(np.int64), alone.view(np.int64))
    assert np.array_equal(quat_as_euler_deg(q[3:10]).view(np.int64), whole[3:10].view(np.int64))
    # And the angles are scipy's: our q is scipy's R.inv() (scalar first, see above), and
    # R's intrinsic ZXZ angles are Bunge's; away from the degenerate rows, where only
    # φ1 ± φ2 is defined, and wrapped to [0, 360) here.
    general = np.abs(whole[:, 1] % 180.0) > 1e-3
    theirs = Rotation.from_quat(np.roll(q[general], -1, axis=-1)).inv()
    ref = theirs.as_euler("ZXZ", degrees=True) % 360.0
    diff = (whole[general] - ref + 180.0) % 360.0 - 180.0
    assert_allclose(diff, 0.0, rtol=0, atol=1e-9)
