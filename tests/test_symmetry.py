"""Unit and property tests of inclination.crystal.symmetry (conventions §4)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from inclination.crystal.rotations import (
    quat_apply,
    quat_as_matrix,
    quat_from_axis_angle_deg,
    quat_from_rodrigues,
    quat_inverse,
    quat_multiply,
    random_quat,
)
from inclination.crystal.symmetry import (
    LAUE_CLASSES,
    SETTINGS,
    disorientation,
    disorientation_angle_deg,
    max_disorientation_deg,
    max_scalar_part,
    misorientation_quat,
    proper_rotations,
    reduce_axis_to_triangle,
    reduce_to_fundamental_zone,
)
from inclination.crystal.symmetry import _triangle_walls as triangle_walls

SIZES = dict(zip(LAUE_CLASSES, (1, 2, 4, 4, 8, 3, 6, 6, 12, 12, 24), strict=True))
CASES = [(laue, setting) for laue in LAUE_CLASSES for setting in SETTINGS]


def _same_rotation_set(p: np.ndarray, q: np.ndarray) -> bool:
    """Equal as sets of rotations (q and -q are one rotation)."""
    if len(p) != len(q):
        return False
    return bool(np.all(np.abs(p @ q.T).max(axis=1) > 1 - 1e-9))


def _brute_force_cos_half(dq: np.ndarray, laue: str, setting: str) -> np.ndarray:
    """max over s_i, s_j of |scalar(s_i ⊗ dq ⊗ s_j)|: both-sided symmetry, no shortcut."""
    sym = proper_rotations(laue, setting=setting)
    best = np.zeros(len(dq))
    for si in sym:
        left = quat_multiply(si, dq)
        for sj in sym:
            best = np.maximum(best, np.abs(quat_multiply(left, sj)[:, 0]))
    return best


def _angle_deg(cos_half: np.ndarray) -> np.ndarray:
    return np.rad2deg(2 * np.arccos(np.clip(cos_half, 0.0, 1.0)))


# --- the rotation sets ---------------------------------------------------------------------


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_rotations_size_identity_unit_distinct(laue, setting):
    sym = proper_rotations(laue, setting=setting)
    assert sym.shape == (SIZES[laue], 4)
    assert sym.dtype == np.float64
    assert_array_equal(sym[0], [1.0, 0.0, 0.0, 0.0])
    assert_allclose(np.linalg.norm(sym, axis=1), 1.0, rtol=0, atol=1e-14)
    overlap = np.abs(sym @ sym.T) - np.eye(len(sym))
    assert overlap.max() < 1 - 1e-6  # no rotation listed twice, not even as -q


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_rotations_closed_under_products_and_inverses(laue, setting):
    # Group closure (style §16): every product and every inverse is in the set.
    sym = proper_rotations(laue, setting=setting)
    products = quat_multiply(sym[:, None, :], sym[None, :, :]).reshape(-1, 4)
    assert np.all(np.abs(products @ sym.T).max(axis=1) > 1 - 1e-12)
    assert np.all(np.abs(quat_inverse(sym) @ sym.T).max(axis=1) > 1 - 1e-12)


@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_only_minus_3m_depends_on_setting(laue):
    a = proper_rotations(laue, setting="x_parallel_a")
    b = proper_rotations(laue, setting="x_parallel_a_star")
    assert _same_rotation_set(a, b) == (laue != "-3m")


@pytest.mark.parametrize(
    ("setting", "azimuths_deg"),
    [("x_parallel_a", (0.0, 60.0, 120.0)), ("x_parallel_a_star", (-30.0, 30.0, 90.0))],
)
def test_minus_3m_two_folds_lie_along_the_a_axes(setting, azimuths_deg):
    # Hand derivation: a1 is X_C (x_parallel_a) or 30° clockwise of X_C = a*
    # (x_parallel_a_star); a2, a3 follow at 120° steps (60° as axes).
    axes = [(math.cos(math.radians(t)), math.sin(math.radians(t)), 0.0) for t in azimuths_deg]
    expected = np.vstack(
        [
            quat_from_axis_angle_deg([[0, 0, 1]] * 3, [0.0, 120.0, 240.0]),
            quat_from_axis_angle_deg(axes, [180.0] * 3),
        ]
    )
    assert _same_rotation_set(proper_rotations("-3m", setting=setting), expected)


def test_monoclinic_two_fold_is_y():
    expected = quat_from_axis_angle_deg([[0, 1, 0]] * 2, [0.0, 180.0])
    for setting in SETTINGS:
        assert _same_rotation_set(proper_rotations("2/m", setting=setting), expected)


def test_bad_laue_and_setting_list_the_options():
    with pytest.raises(
        ValueError, match=r"Expected `laue` to be one of \('-1', '2/m'.*got 'cubic'"
    ):
        proper_rotations("cubic")
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of .*got 'x_along_a'"):
        proper_rotations("m-3m", setting="x_along_a")


# --- the kernel ----------------------------------------------------------------------------


def _one_sided_reference(dq, laue, setting):
    sym = proper_rotations(laue, setting=setting)
    return np.abs(quat_multiply(dq[:, None, :], sym[None, :, :])[..., 0]).max(axis=1)


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_max_scalar_part_matches_all_rotations(laue, setting):
    dq = random_quat(3000, rng=11)
    expected = _one_sided_reference(dq, laue, setting)
    assert_allclose(max_scalar_part(dq, laue, setting=setting), expected, rtol=0, atol=1e-14)
    got32 = max_scalar_part(dq.astype(np.float32), laue, setting=setting)
    assert got32.dtype == np.float32
    assert_allclose(got32, expected, rtol=0, atol=2e-6)


@pytest.mark.parametrize("laue", ["m-3m", "6/mmm", "-3m", "mmm"])
def test_max_scalar_part_across_block_edges(laue):
    # 70 000 rows span two blocks of 65 536 and end in a partial one.
    dq = random_quat(70_000, rng=5)
    got = max_scalar_part(dq, laue)
    assert_allclose(got, _one_sided_reference(dq, laue, "x_parallel_a"), rtol=0, atol=1e-14)


def test_max_scalar_part_writes_into_out_and_keeps_leading_shape():
    dq = random_quat(12, rng=3).reshape(3, 4, 4).astype(np.float32)
    out = np.empty((3, 4), np.float32)
    result = max_scalar_part(dq, "m-3m", out=out)
    assert result is out
    assert_allclose(
        out.ravel(),
        _one_sided_reference(dq.reshape(-1, 4).astype(np.float64), "m-3m", "x_parallel_a"),
        rtol=0,
        atol=2e-6,
    )
    assert max_scalar_part(np.zeros((0, 4)), "m-3m").shape == (0,)


def test_max_scalar_part_does_not_modify_input():
    dq = random_quat(100, rng=4).astype(np.float32)
    before = dq.copy()
    max_scalar_part(dq, "m-3m")
    max_scalar_part(dq, "-3")
    assert_array_equal(dq, before)


def test_max_scalar_part_errors():
    dq = random_quat(5, rng=0)
    with pytest.raises(
        ValueError, match=r"Expected `dq` to have shape \(\.\.\., 4\), got \(5, 3\)"
    ):
        max_scalar_part(dq[:, :3], "m-3m")
    bad = dq.copy()
    bad[3, 1] = np.nan
    with pytest.raises(ValueError, match=r"Expected `dq` to be finite everywhere, .* index \(3,\)"):
        max_scalar_part(bad, "m-3m")
    with pytest.raises(ValueError, match=r"Expected `dq` to be finite everywhere, .* index \(3,\)"):
        max_scalar_part(bad, "-3")
    with pytest.raises(
        ValueError, match=r"Expected `out` to be a contiguous array of shape \(5,\)"
    ):
        max_scalar_part(dq, "m-3m", out=np.empty(5, np.float32))
    with pytest.raises(ValueError, match=r"Expected `out` to be a contiguous array"):
        max_scalar_part(dq, "m-3m", out=[0.0] * 5)
    with pytest.raises(TypeError, match=r"Expected `dq` to be an array of numbers, got str"):
        max_scalar_part("quaternions", "m-3m")


# --- misorientation and disorientation ----------------------------------------------------


def test_misorientation_maps_crystal_a_to_crystal_b():
    # v_b = Δg v_a for one sample vector seen in both crystals (module notes).
    qa, qb = random_quat(2, rng=8)
    v_sample = np.array([0.3, -0.5, 0.8])
    v_a = quat_apply(qa, v_sample)
    v_b = quat_apply(qb, v_sample)
    assert_allclose(quat_apply(misorientation_quat(qa, qb), v_a), v_b, rtol=0, atol=1e-14)


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_angle_equals_brute_force_both_sided_search(laue, setting):
    qa = random_quat(400, rng=21)
    qb = random_quat(400, rng=22)
    dq = misorientation_quat(qa, qb)
    expected = _angle_deg(_brute_force_cos_half(dq, laue, setting))
    got = disorientation_angle_deg(qa, qb, laue, setting=setting)
    assert_allclose(got, expected, rtol=0, atol=1e-6)
    full = disorientation(qa, qb, laue, setting=setting)
    assert_allclose(full.angle_deg, expected, rtol=0, atol=1e-6)
    assert np.all(got <= max_disorientation_deg(laue) + 1e-9)


def test_angle_float32_stays_float32():
    qa = random_quat(1000, rng=1).astype(np.float32)
    qb = random_quat(1000, rng=2).astype(np.float32)
    got = disorientation_angle_deg(qa, qb, "m-3m")
    assert got.dtype == np.float32
    ref = disorientation_angle_deg(qa.astype(np.float64), qb.astype(np.float64), "m-3m")
    assert_allclose(got, ref, rtol=0, atol=0.05)


def test_angle_broadcasts_and_handles_empty_input():
    qa = random_quat(1, rng=1)[0]
    qb = random_quat(6, rng=2).reshape(2, 3, 4)
    got = disorientation_angle_deg(qa, qb, "6/mmm")
    assert got.shape == (2, 3)
    assert_allclose(
        got.ravel(),
        disorientation_angle_deg(np.tile(qa, (6, 1)), qb.reshape(-1, 4), "6/mmm"),
        rtol=0,
        atol=1e-12,
    )
    assert disorientation_angle_deg(np.zeros((0, 4)), np.zeros((0, 4)), "m-3m").shape == (0,)
    assert disorientation(np.zeros((0, 4)), np.zeros((0, 4)), "m-3m").axis_crystal.shape == (0, 3)


def test_angle_errors():
    qa = random_quat(4, rng=1)
    qb = random_quat(4, rng=2)
    with pytest.raises(ValueError, match=r"Expected `qa` and `qb` to have broadcastable shapes"):
        disorientation_angle_deg(qa, qb[:3], "m-3m")
    bad = qb.copy()
    bad[2, 0] = np.inf
    with pytest.raises(ValueError, match=r"Expected `qb` to be finite everywhere, .* \(2,\)"):
        disorientation_angle_deg(qa, bad, "m-3m")
    with pytest.raises(ValueError, match=r"Expected `qb` to be finite everywhere"):
        disorientation(qa, bad, "m-3m")
    with pytest.raises(ValueError, match=r"Expected `qa` and `qb` to be unit quaternions"):
        disorientation(np.zeros((4, 4)), qb, "m-3m")


def _in_triangle(axes, laue, setting, tol=1e-9):
    return np.all(axes @ triangle_walls(laue, setting).T >= -tol, axis=-1)


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_disorientation_axis_in_triangle_and_quat_is_an_equivalent(laue, setting):
    qa = random_quat(300, rng=31)
    qb = random_quat(300, rng=32)
    d = disorientation(qa, qb, laue, setting=setting)
    assert np.all(_in_triangle(d.axis_crystal, laue, setting))
    assert_allclose(np.linalg.norm(d.axis_crystal, axis=1), 1.0, rtol=0, atol=1e-12)
    half = np.deg2rad(d.angle_deg) / 2
    assert_allclose(d.quat[:, 0], np.cos(half), rtol=0, atol=1e-12)
    assert_allclose(d.quat[:, 1:], np.sin(half)[:, None] * d.axis_crystal, rtol=0, atol=1e-12)
    # d.quat is s_i ⊗ dq ⊗ s_j for some s_i, s_j, or the same for dq⁻¹ (grain exchange):
    # then the "disorientation" between d.quat and dq, both sides, is zero.
    dq = misorientation_quat(qa, qb)
    sym = proper_rotations(laue, setting=setting)
    best = np.zeros(len(dq))
    for candidate in (dq, quat_inverse(dq)):
        for si in sym:
            for sj in sym:
                equiv = quat_multiply(quat_multiply(si, candidate), sj)
                best = np.maximum(best, np.abs(np.einsum("ij,ij->i", equiv, d.quat)))
    assert_allclose(best, 1.0, rtol=0, atol=1e-9)
    with pytest.raises(ValueError, match="read-only"):
        d.angle_deg[0] = 0.0


def test_sigma3_written_about_110_reduces_to_60_about_111():
    # Σ3 is 70.53° about <110> as well as 60° about <111> (Grimmer, Bollmann &
    # Warrington 1974, Acta Cryst. A30, 197): the disorientation picks the latter.
    twin = quat_from_axis_angle_deg([1, 1, 0], math.degrees(math.acos(1 / 3)))
    d = disorientation([1.0, 0.0, 0.0, 0.0], twin, "m-3m")
    assert_allclose(d.angle_deg, 60.0, rtol=0, atol=1e-9)
    assert_allclose(d.axis_crystal, np.full(3, 1 / math.sqrt(3)), rtol=0, atol=1e-9)


def test_disorientation_of_identity_is_zero_with_the_reduced_z_axis():
    q = random_quat(3, rng=4)
    d = disorientation(q, q, "m-3m")
    assert_allclose(d.angle_deg, 0.0, rtol=0, atol=1e-6)
    d0 = disorientation([1.0, 0, 0, 0], [1.0, 0, 0, 0], "m-3m")
    assert_allclose(d0.axis_crystal, [1.0, 0.0, 0.0], rtol=0, atol=0)


# --- hypothesis properties (style §16) ------------------------------------------------------

unit_quats = st.lists(st.floats(-1, 1), min_size=4, max_size=4).filter(
    lambda v: np.linalg.norm(v) > 0.2
)


def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


@given(
    a=unit_quats,
    b=unit_quats,
    case=st.sampled_from(CASES),
    i=st.integers(0, 23),
    j=st.integers(0, 23),
)
def test_disorientation_properties(a, b, case, i, j):
    laue, setting = case
    qa, qb = _unit(a), _unit(b)
    sym = proper_rotations(laue, setting=setting)
    sa, sb = sym[i % len(sym)], sym[j % len(sym)]
    d_ab = disorientation_angle_deg(qa, qb, laue, setting=setting)
    # Tolerances are 1e-5°: arccos of a scalar part near 1 resolves ~3e-6° (float64).
    # Δ(a, b) = Δ(b, a) and Δ(a, a) = 0.
    assert_allclose(
        disorientation_angle_deg(qb, qa, laue, setting=setting), d_ab, rtol=0, atol=1e-5
    )
    assert_allclose(disorientation_angle_deg(qa, qa, laue, setting=setting), 0.0, rtol=0, atol=1e-5)
    # Invariance when either orientation is replaced by a symmetric equivalent s ⊗ q.
    d_sym = disorientation_angle_deg(
        quat_multiply(sa, qa), quat_multiply(sb, qb), laue, setting=setting
    )
    assert_allclose(d_sym, d_ab, rtol=0, atol=1e-5)
    full = disorientation(qa, qb, laue, setting=setting)
    exchanged = disorientation(qb, qa, laue, setting=setting)
    swapped_sym = disorientation(quat_multiply(sb, qb), qa, laue, setting=setting)
    assert_allclose(full.angle_deg, d_ab, rtol=0, atol=1e-5)
    assert_allclose(exchanged.angle_deg, full.angle_deg, rtol=0, atol=1e-5)
    assert_allclose(swapped_sym.angle_deg, full.angle_deg, rtol=0, atol=1e-5)
    # The reduced axis is unique off the faces of the fundamental zone (one best
    # equivalent) and off the walls of the triangle: there it survives grain exchange
    # and symmetry applied to either grain.
    scalars = np.sort(np.abs(quat_multiply(sym, misorientation_quat(qa, qb))[:, 0]))
    gap = scalars[-1] - scalars[-2] if len(sym) > 1 else 1.0
    slack = (full.axis_crystal @ triangle_walls(laue, setting).T).min()
    if gap > 1e-6 and slack > 1e-6 and float(d_ab) > 1e-3:
        assert_allclose(exchanged.axis_crystal, full.axis_crystal, rtol=0, atol=1e-6)
        assert_allclose(swapped_sym.axis_crystal, full.axis_crystal, rtol=0, atol=1e-6)


@given(a=unit_quats, case=st.sampled_from(CASES))
def test_fundamental_zone_properties(a, case):
    laue, setting = case
    q = _unit(a)
    fz = reduce_to_fundamental_zone(q, laue, setting=setting)
    assert fz[0] >= 0
    # Same orientation up to symmetry, with the disorientation to the identity as its angle.
    assert_allclose(
        max_scalar_part(quat_multiply(fz, quat_inverse(q)), laue, setting=setting),
        1.0,
        rtol=0,
        atol=1e-12,
    )
    angle = np.rad2deg(2 * np.arccos(min(1.0, fz[0])))
    ident = np.array([1.0, 0.0, 0.0, 0.0])
    assert_allclose(
        angle, disorientation_angle_deg(ident, q, laue, setting=setting), rtol=0, atol=1e-5
    )
    # Reducing again keeps the angle; on a face of the zone it may pick the other tie.
    again = reduce_to_fundamental_zone(fz, laue, setting=setting)
    assert_allclose(again[0], fz[0], rtol=0, atol=1e-12)


@given(
    v=st.lists(st.floats(-1, 1), min_size=3, max_size=3).filter(lambda v: np.linalg.norm(v) > 0.2),
    case=st.sampled_from(CASES),
    i=st.integers(0, 23),
    flip=st.booleans(),
)
def test_triangle_reduction_properties(v, case, i, flip):
    laue, setting = case
    axis = _unit(v)
    reduced = reduce_axis_to_triangle(axis, laue, setting=setting)
    assert _in_triangle(reduced, laue, setting)
    sym = proper_rotations(laue, setting=setting)
    image = quat_as_matrix(sym[i % len(sym)]) @ axis * (-1 if flip else 1)
    again = reduce_axis_to_triangle(image, laue, setting=setting)
    # The same orbit: equal unless the axis sits on a wall of the triangle.
    slack = (reduced @ triangle_walls(laue, setting).T).min()
    if slack > 1e-6:
        assert_allclose(again, reduced, rtol=0, atol=1e-9)


def test_triangle_reduction_errors():
    with pytest.raises(ValueError, match=r"Expected `axis_crystal` to be non-zero vectors"):
        reduce_axis_to_triangle([0.0, 0.0, 0.0], "m-3m")
    with pytest.raises(ValueError, match=r"Expected `axis_crystal` to have shape \(\.\.\., 3\)"):
        reduce_axis_to_triangle([1.0, 0.0], "m-3m")


def test_fundamental_zone_errors():
    with pytest.raises(ValueError, match=r"Expected `q` to be finite everywhere"):
        reduce_to_fundamental_zone([np.nan, 0, 0, 1], "m-3m")


# --- the largest disorientation -----------------------------------------------------------

# Heinz & Neumann (1991), Acta Cryst. A47, 780, table of maximum disorientation
# angles (from memory, to 0.01°); cubic: Mackenzie (1958), Biometrika 45, 229.
MAX_DISORIENTATION_DEG = {
    "-1": 180.0,
    "2/m": 180.0,
    "mmm": 120.0,
    "4/m": 180.0,
    "4/mmm": 98.42,
    "-3": 180.0,
    "-3m": 104.48,
    "6/m": 180.0,
    "6/mmm": 93.84,
    "m-3": 90.0,
    "m-3m": 62.80,
}


@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_max_disorientation_table(laue):
    assert_allclose(max_disorientation_deg(laue), MAX_DISORIENTATION_DEG[laue], rtol=0, atol=0.005)


# Fundamental-zone vertices farthest from the identity (hand derivation in Rodrigues
# space: dihedral zones are prisms |r_z| <= tan(π/2n) over a 2n-gon of apothem 1; the
# cubic zone is the truncated cube with vertex (√2−1, √2−1, 3−2√2)).
VERTICES = {
    "mmm": (1.0, 1.0, 1.0),
    "4/mmm": (1.0, math.tan(math.pi / 8), math.tan(math.pi / 8)),
    "-3m": (1.0, math.tan(math.pi / 6), math.tan(math.pi / 6)),
    "6/mmm": (1.0, math.tan(math.pi / 12), math.tan(math.pi / 12)),
    "m-3": (1.0, 0.0, 0.0),
    "m-3m": (math.sqrt(2) - 1, math.sqrt(2) - 1, 3 - 2 * math.sqrt(2)),
}


@pytest.mark.parametrize("laue", sorted(VERTICES))
def test_max_disorientation_is_reached_at_the_zone_vertex(laue):
    # In-plane corners lie between adjacent 2-folds; for -3m with x_parallel_a the
    # 2-folds are at 0° and 60°, so the corner is at 30°, (1, tan 30°).
    q = quat_from_rodrigues(VERTICES[laue])
    got = disorientation_angle_deg([1.0, 0.0, 0.0, 0.0], q, laue)
    assert_allclose(got, max_disorientation_deg(laue), rtol=0, atol=1e-9)


@pytest.mark.parametrize("laue", LAUE_CLASSES)
def test_random_pairs_never_exceed_the_largest_disorientation(laue):
    qa = random_quat(20_000, rng=41)
    qb = random_quat(20_000, rng=42)
    got = disorientation_angle_deg(qa, qb, laue)
    top = max_disorientation_deg(laue)
    assert got.max() <= top + 1e-9
    # The density near the vertex is low, but 20 000 pairs come within 6°.
    assert got.max() > top - 6.0


@pytest.mark.parametrize(("laue", "setting"), CASES)
def test_reduced_axis_survives_exchange_and_symmetry_on_random_pairs(laue, setting):
    # Random pairs lie off the faces of the zone and the walls of the triangle with
    # probability 1, so the reduced axis must be the same for every equivalent pair.
    qa = random_quat(500, rng=51)
    qb = random_quat(500, rng=52)
    sym = proper_rotations(laue, setting=setting)
    d = disorientation(qa, qb, laue, setting=setting)
    exchanged = disorientation(qb, qa, laue, setting=setting)
    moved = disorientation(
        quat_multiply(sym[-1], qb), quat_multiply(sym[len(sym) // 2], qa), laue, setting=setting
    )
    assert_allclose(exchanged.axis_crystal, d.axis_crystal, rtol=0, atol=1e-12)
    assert_allclose(moved.axis_crystal, d.axis_crystal, rtol=0, atol=1e-12)
    assert_allclose(moved.quat, d.quat, rtol=0, atol=1e-12)


def test_misorientation_errors_name_the_argument():
    with pytest.raises(ValueError, match=r"Expected `qb` to have shape \(\.\.\., 4\), got \(3,\)"):
        misorientation_quat([1.0, 0.0, 0.0, 0.0], [1.0, 0.0, 0.0])


def test_option_errors_of_the_other_public_functions():
    q = random_quat(2, rng=0)
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of .*got 'hcp'"):
        max_disorientation_deg("hcp")
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of .*got None"):
        disorientation(q, q, "-3m", setting=None)
    bad = q.copy()
    bad[1, 2] = np.nan
    with pytest.raises(ValueError, match=r"Expected `qa` to be finite everywhere, .* \(1,\)"):
        disorientation_angle_deg(bad, q, "-3m")


@given(case=st.sampled_from(CASES), i=st.integers(0, 23), j=st.integers(0, 23))
def test_closure_property(case, i, j):
    # Group closure as a property: s_i ⊗ s_j and s_i⁻¹ are in the set.
    laue, setting = case
    sym = proper_rotations(laue, setting=setting)
    a, b = sym[i % len(sym)], sym[j % len(sym)]
    assert np.abs(sym @ quat_multiply(a, b)).max() > 1 - 1e-12
    assert np.abs(sym @ quat_inverse(a)).max() > 1 - 1e-12
