"""CSL relations and hexagonal twins checked against outside references.

- Grimmer, Bollmann & Warrington (1974), Acta Cryst. A30, 197, tables of cubic
  coincidence relations in disorientation form (values as quoted from its tables; the
  complete Σ <= 49 list below is from memory and agrees with them);
- pymatgen-core ``GrainBoundaryGenerator.enum_sigma_cubic`` (reference extra);
- Yoo (1981), Metall. Trans. A 12, 409, for the hexagonal twin angles of titanium;
- scipy.spatial.transform.Rotation.reduce for the twin disorientations.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import require_reference
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from inclination.crystal.csl import cubic_csl_relations, hexagonal_twins, relation_deviation_deg
from inclination.crystal.rotations import quat_from_axis_angle_deg
from inclination.crystal.symmetry import disorientation

# Grimmer, Bollmann & Warrington (1974): label, angle (°), axis, as quoted from its tables.
GRIMMER_1974 = [
    ("3", 60.0, (1, 1, 1)),
    ("5", 36.87, (1, 0, 0)),
    ("7", 38.21, (1, 1, 1)),
    ("9", 38.94, (1, 1, 0)),
    ("11", 50.48, (1, 1, 0)),
    ("13a", 22.62, (1, 0, 0)),
    ("13b", 27.80, (1, 1, 1)),
    ("17a", 28.07, (1, 0, 0)),
    ("17b", 61.93, (2, 2, 1)),
    ("43c", 60.77, (3, 3, 2)),
    ("49a", 43.57, (1, 1, 1)),
    ("49b", 43.57, (5, 1, 1)),
]

# The whole list Σ <= 49 in disorientation form (from memory of the same tables).
FROM_MEMORY_49 = [
    ("1", 0.0, (1, 0, 0)), ("3", 60.00, (1, 1, 1)), ("5", 36.87, (1, 0, 0)),
    ("7", 38.21, (1, 1, 1)), ("9", 38.94, (1, 1, 0)), ("11", 50.48, (1, 1, 0)),
    ("13a", 22.62, (1, 0, 0)), ("13b", 27.80, (1, 1, 1)), ("15", 48.19, (2, 1, 0)),
    ("17a", 28.07, (1, 0, 0)), ("17b", 61.93, (2, 2, 1)), ("19a", 26.53, (1, 1, 0)),
    ("19b", 46.83, (1, 1, 1)), ("21a", 21.79, (1, 1, 1)), ("21b", 44.42, (2, 1, 1)),
    ("23", 40.46, (3, 1, 1)), ("25a", 16.26, (1, 0, 0)), ("25b", 51.68, (3, 3, 1)),
    ("27a", 31.59, (1, 1, 0)), ("27b", 35.43, (2, 1, 0)), ("29a", 43.60, (1, 0, 0)),
    ("29b", 46.40, (2, 2, 1)), ("31a", 17.90, (1, 1, 1)), ("31b", 52.20, (2, 1, 1)),
    ("33a", 20.05, (1, 1, 0)), ("33b", 33.56, (3, 1, 1)), ("33c", 58.99, (1, 1, 0)),
    ("35a", 34.05, (2, 1, 1)), ("35b", 43.23, (3, 3, 1)), ("37a", 18.92, (1, 0, 0)),
    ("37b", 43.14, (3, 1, 0)), ("37c", 50.57, (1, 1, 1)), ("39a", 32.20, (1, 1, 1)),
    ("39b", 50.13, (3, 2, 1)), ("41a", 12.68, (1, 0, 0)), ("41b", 40.88, (2, 1, 0)),
    ("41c", 55.88, (1, 1, 0)), ("43a", 15.18, (1, 1, 1)), ("43b", 27.91, (2, 1, 0)),
    ("43c", 60.77, (3, 3, 2)), ("45a", 28.62, (3, 1, 1)), ("45b", 36.87, (2, 2, 1)),
    ("45c", 53.13, (2, 2, 1)), ("47a", 37.07, (3, 3, 1)), ("47b", 43.66, (3, 2, 0)),
    ("49a", 43.57, (1, 1, 1)), ("49b", 43.57, (5, 1, 1)), ("49c", 49.23, (3, 2, 2)),
]  # fmt: skip


def _by_label():
    return {r.label: r for r in cubic_csl_relations(49)}


@pytest.mark.parametrize(("label", "angle_deg", "axis"), GRIMMER_1974)
def test_grimmer_bollmann_warrington_values(label, angle_deg, axis):
    r = _by_label()[label]
    assert r.axis == axis
    assert_allclose(r.angle_deg, angle_deg, rtol=0, atol=0.005)


def test_the_whole_table_to_sigma_49():
    got = [(r.label, round(r.angle_deg, 2), r.axis) for r in cubic_csl_relations(49)]
    assert [g[0] for g in got] == [m[0] for m in FROM_MEMORY_49]
    assert [g[2] for g in got] == [m[2] for m in FROM_MEMORY_49]
    assert_allclose([g[1] for g in got], [m[1] for m in FROM_MEMORY_49], rtol=0, atol=0.011)


def test_sigma49a_and_49b_share_an_angle_and_differ_by_axis():
    # Both are 43.57°: 2·atan(3√3/13) about <111> and 2·atan(√27/13) about <511>
    # (hand evaluation of the generating formula; Grimmer et al. 1974).
    rel = _by_label()
    assert_allclose(rel["49a"].angle_deg, rel["49b"].angle_deg, rtol=0, atol=1e-9)
    assert_allclose(
        rel["49a"].angle_deg, math.degrees(2 * math.atan(3 * math.sqrt(3) / 13)), rtol=0, atol=1e-9
    )
    assert relation_deviation_deg(np.array(rel["49a"].quat), rel["49b"].quat, "m-3m") > 5.0


def _primitive_axes(max_n: int):
    for u in range(1, math.isqrt(max_n) + 1):
        for v in range(u + 1):
            for w in range(v + 1):
                if u * u + v * v + w * w <= max_n and math.gcd(u, v, w) == 1:
                    yield (u, v, w)


@pytest.mark.reference
def test_relations_agree_with_pymatgen_enum_sigma_cubic():
    interface = require_reference("pymatgen.core.interface")
    cutoff = 29
    axes, angles, sigmas = [], [], []
    for axis in _primitive_axes(4 * cutoff):
        for sigma, values in interface.GrainBoundaryGenerator.enum_sigma_cubic(
            cutoff, axis
        ).items():
            for angle in values:
                axes.append(axis)
                angles.append(angle)
                sigmas.append(sigma)
    reduced = disorientation(
        [1.0, 0.0, 0.0, 0.0], quat_from_axis_angle_deg(np.array(axes), np.array(angles)), "m-3m"
    )
    ours = [r for r in cubic_csl_relations(cutoff) if r.sigma > 1]
    sigmas = np.array(sigmas)
    # deviation of every pymatgen rotation from each of our relations, (R, P)
    devs = np.array([relation_deviation_deg(reduced.quat, r.quat, "m-3m") for r in ours])
    devs[np.array([r.sigma for r in ours])[:, None] != sigmas[None, :]] = np.inf
    # Every pymatgen rotation is one of our relations of the same Σ...
    assert np.all(devs.min(axis=0) < 1e-5)
    hit = {ours[k].label for k in np.argmin(devs, axis=0)}
    # ...and every relation of ours is reached by some pymatgen rotation.
    assert hit == {r.label for r in ours}


# --- hexagonal twins of titanium ---------------------------------------------------------

TI_C_OVER_A = 4.684 / 2.951

# Yoo (1981), as quoted from the paper: name, angle (°), axis family.
YOO_1981_TI = [
    ("{1 0 -1 2}", 85.00, (0, 1, 1, 2)),
    ("{1 0 -1 1}", 57.23, (0, 1, 1, 2)),
    ("{1 1 -2 2}", 64.42, (0, 0, 1, 1)),
    ("{1 1 -2 1}", 34.97, (0, 0, 1, 1)),
]


@pytest.mark.parametrize("setting", ["x_parallel_a", "x_parallel_a_star"])
def test_titanium_twins_match_yoo(setting):
    twins = hexagonal_twins(TI_C_OVER_A, setting=setting)
    for twin, (name, angle_deg, family) in zip(twins, YOO_1981_TI, strict=True):
        assert twin.name == name
        assert_allclose(twin.angle_deg, angle_deg, rtol=0, atol=0.006)
        assert tuple(sorted(map(abs, twin.axis))) == family


def test_twin_angles_follow_the_plane_geometry():
    # Hand derivation: the K1 normal of (h0-hl) lies at ψ from c with tan ψ = h·2γ/(√3 l),
    # of (hh-2hl) with tan ψ = 2hγ/l (γ = c/a); the 180° turn about it combined with
    # the 2-fold about c or about the in-plane normal gives 2ψ or 180° − 2ψ.
    g = TI_C_OVER_A
    expected = [
        2 * math.degrees(math.atan(g / math.sqrt(3))),
        180 - 2 * math.degrees(math.atan(2 * g / math.sqrt(3))),
        180 - 2 * math.degrees(math.atan(g)),
        180 - 2 * math.degrees(math.atan(2 * g)),
    ]
    got = [t.angle_deg for t in hexagonal_twins(g)]
    assert_allclose(got, expected, rtol=0, atol=1e-9)


def test_twin_disorientations_equal_scipy_reduce():
    # Plane normals written out by hand for x_parallel_a (a1 = X, a2 at 120°, c = Z):
    # reciprocal vectors a1* = (1, 1/√3, 0), a2* = (0, 2/√3, 0), c* = (0, 0, 1/γ) for a = 1.
    g = TI_C_OVER_A
    a1s, a2s, cs = (
        np.array([1, 1 / math.sqrt(3), 0]),
        np.array([0, 2 / math.sqrt(3), 0]),
        np.array([0, 0, 1 / g]),
    )
    planes = [(1, 0, 2), (1, 0, 1), (1, 1, 2), (1, 1, 1)]  # (h k l) of (h k -(h+k) l)
    normals = np.array([h * a1s + k * a2s + ell * cs for h, k, ell in planes])
    normals /= np.linalg.norm(normals, axis=1, keepdims=True)
    half_turns = Rotation.from_rotvec(math.pi * normals)
    group = Rotation.create_group("D6")
    expected = np.rad2deg(half_turns.reduce(left=group, right=group).magnitude())
    got = [t.angle_deg for t in hexagonal_twins(g)]
    assert_allclose(got, expected, rtol=0, atol=1e-9)
