"""Square roots and arccosines of computed quantities at their domain edges.

A float32 unit quaternion has a norm of 1 ± ~1e-7, so q and -q (one rotation,
conventions §2), or a vector and its opposite, give dot products and squared
distances a rounding step outside [-1, 1] or [0, 4]. Every function that takes a
root or an arccosine of such a quantity is fed those inputs here and must return
the exact answer (an angle of 0 or 180°), never NaN.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from inclination.crystal.csl import classify_misorientation_quat, relation_deviation_deg
from inclination.crystal.lattice import Lattice, interplanar_angle_deg
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import (
    matrix_from_euler_deg,
    quat_angle_deg,
    quat_as_axis_angle_deg,
    quat_as_euler_deg,
    quat_as_matrix,
    quat_from_axis_angle_deg,
    random_quat,
)
from inclination.crystal.symmetry import (
    disorientation,
    disorientation_angle_deg,
    max_scalar_part,
)
from inclination.grains import segment_grains
from inclination.maps import OrientationMap
from inclination.planes.geometry import surface_geometry
from inclination.stereology.stereogram import project, unproject

CUBIC = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90), ("{1 1 1}",))


def _float32_unit(n: int, seed: int) -> np.ndarray:
    """Random unit quaternions rounded to float32, so that their norms miss 1 by ~1e-7."""
    return random_quat(n, rng=seed).astype(np.float32)


def _overshoot(q32: np.ndarray) -> np.ndarray:
    """Those of ``q32`` whose float32 norm² exceeds 1: the cases that used to fail."""
    norm2 = np.einsum("nc,nc->n", q32, q32, dtype=np.float32)
    return q32[norm2 > np.float32(1.0)]


def test_grain_spread_is_zero_for_a_grain_holding_q_and_minus_q():
    # A grain whose points carry q0 and -q0 is one orientation: spread 0 (q ≡ -q,
    # conventions §2). Seeds are scanned so that cases with a float32 norm above 1 occur;
    # before the clamp in grains.py, |q - m|² > 4 gave sqrt of a negative number.
    q0s = _float32_unit(200, 1)
    for q0 in q0s:
        q = np.empty((4, 4, 4), np.float32)
        q[:] = q0
        q[::2, ::2] *= -1
        omap = OrientationMap(
            q.astype(np.float64), np.ones((4, 4), int), grid="square", step_x_um=1, step_y_um=1
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # a single grain warns that it has no boundary
            gm = segment_grains(omap, [CUBIC], min_pixels=1)
        assert gm.grains["spread_mean_deg"].size == 1
        # Formula: near the antipode the chord is 4 - |q - m|², whose float32 step at 4
        # is 4.8e-7, so θ is resolved to 4·asin(√4.8e-7 / 2) = 0.08°.
        assert_allclose(gm.grains["spread_mean_deg"], 0.0, rtol=0, atol=0.1)
        assert_allclose(gm.grains["spread_max_deg"], 0.0, rtol=0, atol=0.1)


@pytest.mark.parametrize("laue", ["m-3m", "6/mmm", "m-3", "4/mmm", "-1"])
def test_disorientation_of_q_and_minus_q_is_zero_in_float32(laue):
    q = _overshoot(_float32_unit(2000, 2))
    assert len(q) > 0
    angle = disorientation_angle_deg(q, -q, laue)
    assert np.isfinite(angle).all()
    # float32 arccos near 1 resolves ~0.05°; scipy: the magnitude of q ⊗ q⁻¹ is 0.
    ref = Rotation.from_quat(q[:, [1, 2, 3, 0]].astype(float))
    ref = (ref * ref.inv()).magnitude()
    assert_allclose(angle, np.rad2deg(ref), rtol=0, atol=0.05)
    m = max_scalar_part(q.astype(np.float32), laue)
    assert np.isfinite(m).all() and np.all(m >= 0)
    d = disorientation(q, -q, laue)
    assert np.isfinite(d.angle_deg).all()
    assert_allclose(d.angle_deg, 0.0, rtol=0, atol=1e-3)


def test_quaternion_angle_axis_and_euler_at_the_scalar_part_edge():
    q = _overshoot(_float32_unit(2000, 3))
    for sign in (1, -1):
        # q ⊗ q* = ±(1, 0, 0, 0) up to rounding: the scalar part may exceed 1 in float32.
        ident = np.zeros_like(q)
        ident[:, 0] = sign * np.einsum("nc,nc->n", q, q, dtype=np.float32)
        angle = quat_angle_deg(ident)
        assert_allclose(angle, 0.0, rtol=0, atol=1e-6)  # formula: 2·arccos(1) = 0
        axis, angle2 = quat_as_axis_angle_deg(ident)
        assert np.isfinite(axis).all()
        assert_allclose(angle2, 0.0, rtol=0, atol=1e-6)
    euler = quat_as_euler_deg(-q)
    assert np.isfinite(euler).all()
    # Round trip: the Euler angles of -q give back the matrix of q (one rotation).
    assert_allclose(matrix_from_euler_deg(euler), quat_as_matrix(q), rtol=0, atol=1e-5)


def test_csl_deviation_of_a_sign_flipped_sigma3_is_zero():
    # Σ3 = 60° about <111> (Brandon 1966, Acta Metall. 14, 1479).
    sigma3 = quat_from_axis_angle_deg(np.ones(3) / np.sqrt(3.0), 60.0).astype(np.float32)
    flipped = -np.broadcast_to(sigma3, (8, 4)).astype(np.float32)
    flipped *= np.float32(1.0 + 1.2e-7)  # a float32 norm a rounding step above 1
    dev = relation_deviation_deg(flipped, sigma3, "m-3m")
    assert np.isfinite(dev).all()
    assert_allclose(dev, 0.0, rtol=0, atol=0.05)
    match = classify_misorientation_quat(flipped)
    assert np.all(np.asarray(match.sigma) == 3)
    assert np.isfinite(np.asarray(match.deviation_deg)).all()


def test_surface_geometry_of_a_normal_a_rounding_step_past_unit():
    # A plane parallel to the surface: dip 0 (conventions §5), whichever sign the normal has.
    for nz in (1.0 + 2e-7, -(1.0 + 2e-7)):
        pred = surface_geometry(np.array([[0.0, 0.0, nz]], np.float32))
        assert_allclose(pred.dip_deg, 0.0, rtol=0, atol=1e-3)  # formula: arccos(1) = 0


def test_interplanar_angle_of_opposite_planes_is_180():
    # (h k l) and (-h -k -l): antiparallel normals, 180° (formula: arccos(-1)).
    cu = CUBIC.lattice
    assert_allclose(interplanar_angle_deg(cu, [1, 1, 1], [-1, -1, -1]), 180.0, rtol=0, atol=1e-6)
    assert_allclose(interplanar_angle_deg(cu, [1, 2, 3], [1, 2, 3]), 0.0, rtol=0, atol=1e-5)


def test_stereogram_projection_at_the_pole_and_rim():
    n = np.array([[0.0, 0.0, -1.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0]], np.float32) * np.float32(
        1.0 + 1.2e-7
    )
    for projection in ("stereographic", "equal-area"):
        p = project(n, projection)
        assert np.isfinite(p).all()
        back = unproject(p * (1.0 + 1e-7), projection)  # a rim point a rounding step outside
        assert np.isfinite(back).all()
        assert_allclose(np.abs(back), np.abs(n / np.linalg.norm(n, axis=1)[:, None]), atol=1e-4)
