"""Symmetry and disorientation checked against outside references.

- scipy.spatial.transform.Rotation.create_group and Rotation.reduce (scipy >= 1.11);
- spglib's space-group operations turned into Cartesian rotations (reference extra),
  with the integer matrices also copied here as constants;
- Mackenzie (1958) and Heinz & Neumann (1991) for the largest disorientation.

Scipy quaternions are scalar-last; ours are scalar-first: columns are reordered
where the two meet. Scipy's rotations are used here only as matrices or groups, so
the passive/active question does not arise (a group is closed under inversion,
and ``(gB * gA.inv()).reduce(left=G, right=G)`` has the angle of our ``g_b @ g_a.T``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import require_reference
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from inclination.crystal.rotations import quat_from_axis_angle_deg, quat_from_matrix, random_quat
from inclination.crystal.symmetry import (
    LAUE_CLASSES,
    SETTINGS,
    disorientation,
    disorientation_angle_deg,
    max_disorientation_deg,
    proper_rotations,
)


def _same_rotation_set(p: np.ndarray, q: np.ndarray) -> bool:
    if len(p) != len(q):
        return False
    return bool(np.all(np.abs(p @ q.T).max(axis=1) > 1 - 1e-9))


def _scalar_first(rot: Rotation) -> np.ndarray:
    return rot.as_quat()[:, [3, 0, 1, 2]]


# scipy's groups with their main axis along Z (and C2 along Y, the monoclinic b).
SCIPY_GROUPS = {
    "-1": ("C1", "Z"),
    "2/m": ("C2", "Y"),
    "mmm": ("D2", "Z"),
    "4/m": ("C4", "Z"),
    "4/mmm": ("D4", "Z"),
    "-3": ("C3", "Z"),
    "-3m": ("D3", "Z"),
    "6/m": ("C6", "Z"),
    "6/mmm": ("D6", "Z"),
    "m-3": ("T", "Z"),
    "m-3m": ("O", "Z"),
}


def _scipy_group(laue: str, setting: str) -> Rotation:
    name, axis = SCIPY_GROUPS[laue]
    group = Rotation.create_group(name, axis=axis)
    if laue == "-3m" and setting == "x_parallel_a_star":
        # scipy's D3 has a 2-fold along X (= a1 with x_parallel_a); with x_parallel_a_star
        # a1 lies 30° clockwise of X_C, so the group is conjugated by that turn.
        turn = Rotation.from_euler("z", -30.0, degrees=True)
        group = turn * group * turn.inv()
    return group


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_rotation_sets_equal_scipy_groups(laue, setting):
    # Source: scipy.spatial.transform.Rotation.create_group.
    ours = proper_rotations(laue, setting=setting)
    assert _same_rotation_set(ours, _scalar_first(_scipy_group(laue, setting)))


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_disorientation_angle_equals_scipy_reduce(laue, setting):
    # Source: scipy Rotation.reduce(left=G, right=G) returns the equivalent of
    # gB * gA⁻¹ with the smallest magnitude, i.e. the disorientation angle.
    qa = random_quat(500, rng=61)
    qb = random_quat(500, rng=62)
    group = _scipy_group(laue, setting)
    ra = Rotation.from_quat(qa[:, [1, 2, 3, 0]])
    rb = Rotation.from_quat(qb[:, [1, 2, 3, 0]])
    expected = np.rad2deg((rb * ra.inv()).reduce(left=group, right=group).magnitude())
    assert_allclose(
        disorientation_angle_deg(qa, qb, laue, setting=setting), expected, rtol=0, atol=1e-6
    )
    assert_allclose(
        disorientation(qa, qb, laue, setting=setting).angle_deg, expected, rtol=0, atol=1e-9
    )
    got32 = disorientation_angle_deg(
        qa.astype(np.float32), qb.astype(np.float32), laue, setting=setting
    )
    assert_allclose(got32, expected, rtol=0, atol=0.01)


def test_cubic_disorientation_equals_brute_force_24_by_24():
    # Brute force over all 24 × 24 two-sided equivalents and grain exchange, with
    # scipy's O group and scipy's composition only (no code of ours in the loop).
    qa = random_quat(200, rng=71)
    qb = random_quat(200, rng=72)
    group = Rotation.create_group("O")
    ra = Rotation.from_quat(qa[:, [1, 2, 3, 0]])
    rb = Rotation.from_quat(qb[:, [1, 2, 3, 0]])
    # All 24 × 24 × 2 × 200 products in three scipy compositions: index p runs over
    # (s_i, s_j, exchange, pair).
    n = 200
    i, j, e, k = np.meshgrid(
        np.arange(24), np.arange(24), np.arange(2), np.arange(n), indexing="ij"
    )
    mis = [rb * ra.inv(), ra * rb.inv()]
    stacked = Rotation.concatenate(mis)[(e * n + k).ravel()]
    products = group[i.ravel()] * stacked * group[j.ravel()]
    best = products.magnitude().reshape(-1, n).min(axis=0)
    assert_allclose(disorientation_angle_deg(qa, qb, "m-3m"), np.rad2deg(best), rtol=0, atol=1e-6)


def test_random_pairs_approach_mackenzie_and_heinz_neumann_maxima():
    # Cubic: Mackenzie (1958), Biometrika 45, 229: arccos(√2/2 − 1/4) = 62.7994°.
    # Hexagonal 6/mmm: Heinz & Neumann (1991), Acta Cryst. A47, 780: 93.84° (from memory).
    assert_allclose(
        max_disorientation_deg("m-3m"),
        math.degrees(math.acos(math.sqrt(2) / 2 - 0.25)),
        rtol=0,
        atol=1e-12,
    )
    assert_allclose(max_disorientation_deg("m-3m"), 62.7994, rtol=0, atol=5e-5)
    assert_allclose(max_disorientation_deg("6/mmm"), 93.84, rtol=0, atol=5e-3)
    qa = random_quat(400_000, rng=81).astype(np.float32)
    qb = random_quat(400_000, rng=82).astype(np.float32)
    for laue, top in (("m-3m", 62.7994), ("6/mmm", 93.84)):
        got = disorientation_angle_deg(qa, qb, laue)
        assert top - 1.0 < got.max() <= top + 0.01


# --- spglib: point-group parts of space groups, in the Cartesian setting ------------------

# Integer rotation parts (acting on fractional coordinates, column vectors) of the
# proper operations of P-3m1 (Hall number 456) and P-31m (Hall 454), copied from
# spglib.get_symmetry_from_database (spglib 2.8): P-3m1 has its 2-folds along a1, a2,
# a1 + a2; P-31m along a1 - a2, a1 + 2a2, 2a1 + a2.
SPGLIB_P_3M1 = [
    [[1, 0, 0], [0, 1, 0], [0, 0, 1]],
    [[0, -1, 0], [1, -1, 0], [0, 0, 1]],
    [[-1, 1, 0], [-1, 0, 0], [0, 0, 1]],
    [[0, 1, 0], [1, 0, 0], [0, 0, -1]],
    [[1, -1, 0], [0, -1, 0], [0, 0, -1]],
    [[-1, 0, 0], [-1, 1, 0], [0, 0, -1]],
]
SPGLIB_P_31M = [
    [[1, 0, 0], [0, 1, 0], [0, 0, 1]],
    [[0, -1, 0], [1, -1, 0], [0, 0, 1]],
    [[-1, 1, 0], [-1, 0, 0], [0, 0, 1]],
    [[0, -1, 0], [-1, 0, 0], [0, 0, -1]],
    [[-1, 1, 0], [0, 1, 0], [0, 0, -1]],
    [[1, 0, 0], [1, -1, 0], [0, 0, -1]],
]

# Hall numbers of a centrosymmetric space group of each Laue class, default setting
# (spglib.get_spacegroup_type): P-1, P2/m (unique b), Pmmm, P4/m, P4/mmm, P-3,
# P-3m1, P6/m, P6/mmm, Pm-3, Pm-3m.
HALL = {
    "-1": 2,
    "2/m": 57,
    "mmm": 227,
    "4/m": 357,
    "4/mmm": 400,
    "-3": 435,
    "-3m": 456,
    "6/m": 469,
    "6/mmm": 485,
    "m-3": 494,
    "m-3m": 517,
}


def _structure_matrix(laue: str, setting: str) -> np.ndarray:
    """Columns a, b, c in C (conventions §4), written out by hand for test cells."""
    if laue in ("-3", "-3m", "6/m", "6/mmm"):
        a1 = 0.0 if setting == "x_parallel_a" else -30.0
        a2 = a1 + 120.0
        rad = np.deg2rad([a1, a2])
        return np.array(
            [[np.cos(rad[0]), np.cos(rad[1]), 0], [np.sin(rad[0]), np.sin(rad[1]), 0], [0, 0, 1.6]]
        )
    if laue == "2/m":
        beta = np.deg2rad(100.0)
        # x_parallel_a: a = X, b = Y, c in the X–Z plane; x_parallel_a_star: c = Z, b = Y.
        if setting == "x_parallel_a":
            return np.array([[1.0, 0, 1.2 * np.cos(beta)], [0, 1.1, 0], [0, 0, 1.2 * np.sin(beta)]])
        return np.array([[np.sin(beta), 0, 0], [0, 1.1, 0], [np.cos(beta), 0, 1.2]])
    if laue == "-1":
        return np.array([[1.0, 0.3, 0.2], [0, 1.1, 0.25], [0, 0, 1.2]])
    return {"mmm": np.diag([1.0, 1.1, 1.2]), "4/m": np.diag([1.0, 1.0, 1.3])}.get(
        laue, np.diag([1.0, 1.0, 1.3]) if laue == "4/mmm" else np.eye(3)
    )


def _cartesian_proper(int_rotations, basis: np.ndarray) -> np.ndarray:
    mats = [basis @ np.asarray(r, float) @ np.linalg.inv(basis) for r in int_rotations]
    proper = [m for m in mats if np.linalg.det(m) > 0]
    # Our quaternions are of g; the matrix of a symmetry element is its own g.
    return quat_from_matrix(np.array(proper))


@pytest.mark.parametrize(
    ("ops", "setting", "matches"),
    [
        (SPGLIB_P_3M1, "x_parallel_a", True),
        (SPGLIB_P_3M1, "x_parallel_a_star", True),
        (SPGLIB_P_31M, "x_parallel_a", False),
    ],
)
def test_minus_3m_against_copied_spglib_operations(ops, setting, matches):
    # Our -3m is the -3 2/m 1 arrangement (2-folds along a): it equals P-3m1's
    # rotations in either setting, and differs from P-31m's (2-folds 30° away).
    cart = _cartesian_proper(ops, _structure_matrix("-3m", setting))
    assert _same_rotation_set(proper_rotations("-3m", setting=setting), cart) == matches


def test_p31m_in_one_setting_is_p3m1_in_the_other():
    # A turn of 30° about c maps a1-type 2-folds onto a*-type ones.
    p31m_a = _cartesian_proper(SPGLIB_P_31M, _structure_matrix("-3m", "x_parallel_a"))
    assert _same_rotation_set(proper_rotations("-3m", setting="x_parallel_a_star"), p31m_a)


def _spglib(monkeypatch):
    spglib = require_reference("spglib")
    # spglib 2.x warns unless its new error handling (exceptions) is switched on.
    monkeypatch.setattr(spglib.error, "OLD_ERROR_HANDLING", False, raising=False)
    return spglib


@pytest.mark.reference
@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_rotation_sets_equal_spglib_point_groups(laue, setting, monkeypatch):
    spglib = _spglib(monkeypatch)
    rotations = spglib.get_symmetry_from_database(HALL[laue])["rotations"]
    unique = {tuple(np.asarray(r).ravel()) for r in rotations}
    ops = [np.array(r).reshape(3, 3) for r in sorted(unique)]
    cart = _cartesian_proper(ops, _structure_matrix(laue, setting))
    assert len(cart) == len(proper_rotations(laue))
    assert _same_rotation_set(proper_rotations(laue, setting=setting), cart)


@pytest.mark.reference
def test_copied_spglib_constants_are_current(monkeypatch):
    spglib = _spglib(monkeypatch)
    for hall, copied in ((456, SPGLIB_P_3M1), (454, SPGLIB_P_31M)):
        rotations = spglib.get_symmetry_from_database(hall)["rotations"]
        proper = {tuple(np.asarray(r).ravel()) for r in rotations if round(np.linalg.det(r)) == 1}
        assert proper == {tuple(np.asarray(r).ravel()) for r in copied}


def test_monoclinic_two_fold_is_b_in_both_settings():
    # P2/m unique axis b (spglib Hall 57): the one proper non-identity operation is
    # diag(-1, 1, -1) on fractional coordinates (copied from spglib).
    for setting in SETTINGS:
        cart = _cartesian_proper(
            [np.eye(3), np.diag([-1.0, 1.0, -1.0])], _structure_matrix("2/m", setting)
        )
        assert _same_rotation_set(proper_rotations("2/m", setting=setting), cart)
        assert _same_rotation_set(cart, quat_from_axis_angle_deg([[0, 1, 0]] * 2, [0.0, 180.0]))
