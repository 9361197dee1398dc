"""Lattice geometry against outside references (conventions §4).

Two kinds of check:

- reference numbers copied as constants (values computed with pymatgen-core and
  matching handbook formulas), which run without the extra;
- live cross-checks against pymatgen-core (``Lattice``, ``reciprocal_lattice_crystallographic``,
  ``d_hkl``) and spglib (symmetry operations in the lattice basis), which need the
  ``reference`` extra and are gated by ``require_reference``.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from conftest import require_reference
from numpy.testing import assert_allclose

from inclination.crystal.families import expand_family
from inclination.crystal.lattice import (
    SETTINGS,
    Lattice,
    d_spacing,
    interplanar_angle_deg,
    plane_normals_crystal,
)

# One cell of each crystal system (lengths in Å, angles in degrees) and its holohedry.
CELLS = {
    "cubic": ((3.615, 3.615, 3.615, 90, 90, 90), "m-3m"),
    "tetragonal": ((4.59, 4.59, 2.96, 90, 90, 90), "4/mmm"),
    "orthorhombic": ((5.0, 6.0, 7.0, 90, 90, 90), "mmm"),
    "hexagonal": ((2.951, 2.951, 4.684, 90, 90, 120), "6/mmm"),
    "trigonal": ((4.76, 4.76, 12.99, 90, 90, 120), "-3m"),
    "monoclinic": ((5.1, 5.2, 5.3, 90, 99.2, 90), "2/m"),
    "triclinic": ((4.2, 5.3, 6.1, 81.0, 97.0, 104.0), "-1"),
}
HKL = np.array(
    [h for h in itertools.product(range(-2, 3), repeat=3) if any(h) and math.gcd(*h) == 1]
)

# Reference values (pymatgen-core Lattice.d_hkl and
# reciprocal_lattice_crystallographic give the same to the digits shown).
CU_A = 3.615
CU_111_M111_DEG = 70.5288
CU_D111 = 2.08712
TI_A, TI_C = 2.951, 4.684
TI_0001_10M11_DEG = 61.3826
TI_D10M11 = 2.24344
# Cubic handbook angles (any crystallography handbook's table of interplanar angles).
CUBIC_100_111_DEG = 54.74
CUBIC_110_111_DEG = 35.26


def _lattice(system, setting):
    params, laue = CELLS[system]
    return Lattice.from_parameters(*params, setting=setting, laue=laue)


# ---------------------------------------------------------------- constants, no extra needed


def test_copper_reference_values():
    cu = Lattice.from_parameters(CU_A, CU_A, CU_A, 90, 90, 90, laue="m-3m")
    assert_allclose(
        interplanar_angle_deg(cu, [1, 1, 1], [-1, 1, 1]), CU_111_M111_DEG, rtol=0, atol=5e-5
    )
    assert_allclose(d_spacing(cu, [1, 1, 1]), CU_D111, rtol=0, atol=5e-6)
    assert_allclose(
        interplanar_angle_deg(cu, [1, 0, 0], [1, 1, 1]), CUBIC_100_111_DEG, rtol=0, atol=5e-3
    )
    assert_allclose(
        interplanar_angle_deg(cu, [1, 1, 0], [1, 1, 1]), CUBIC_110_111_DEG, rtol=0, atol=5e-3
    )


@pytest.mark.parametrize("setting", SETTINGS)
def test_titanium_reference_values(setting):
    ti = Lattice.from_parameters(TI_A, TI_A, TI_C, 90, 90, 120, setting=setting, laue="6/mmm")
    got = interplanar_angle_deg(ti, [0, 0, 0, 1], [1, 0, -1, 1])
    assert_allclose(got, TI_0001_10M11_DEG, rtol=0, atol=5e-5)
    assert_allclose(d_spacing(ti, [1, 0, -1, 1]), TI_D10M11, rtol=0, atol=5e-6)


# ---------------------------------------------------------------- pymatgen-core


@pytest.mark.parametrize("system", sorted(CELLS))
def test_x_parallel_a_matches_pymatgen_vesta_frame(system):
    # pymatgen Lattice.from_parameters(..., vesta=True) puts a along x and b in the x–y
    # plane (so c* along z): the x_parallel_a setting. Its matrix rows are a, b, c.
    pmg = require_reference("pymatgen.core")
    params, _ = CELLS[system]
    ref = pmg.Lattice.from_parameters(*params, vesta=True)
    ours = _lattice(system, "x_parallel_a")
    assert_allclose(ours.structure_matrix.T, ref.matrix, rtol=0, atol=1e-12)
    assert_allclose(
        ours.reciprocal_matrix.T,
        ref.reciprocal_lattice_crystallographic.matrix,
        rtol=0,
        atol=1e-12,
    )
    assert_allclose(ours.metric_tensor, ref.metric_tensor, rtol=1e-12, atol=1e-12)
    assert_allclose(ours.volume, ref.volume, rtol=1e-12, atol=0)


@pytest.mark.parametrize("system", sorted(CELLS))
def test_x_parallel_a_star_is_a_proper_rotation_of_the_pymatgen_cell(system):
    # pymatgen's default frame (c along z) is neither setting in general; the a* setting
    # must be the same cell turned rigidly: same metric, same reciprocal metric.
    pmg = require_reference("pymatgen.core")
    params, _ = CELLS[system]
    ref = pmg.Lattice.from_parameters(*params)
    ours = _lattice(system, "x_parallel_a_star")
    rotation = ours.structure_matrix @ np.linalg.inv(ref.matrix.T)
    assert_allclose(rotation @ rotation.T, np.eye(3), rtol=0, atol=1e-12)
    assert_allclose(np.linalg.det(rotation), 1.0, rtol=0, atol=1e-12)
    recip = ref.reciprocal_lattice_crystallographic
    assert_allclose(
        ours.reciprocal_matrix.T @ ours.reciprocal_matrix,
        recip.metric_tensor,
        rtol=1e-12,
        atol=1e-12,
    )


def test_hexagonal_default_pymatgen_frame_is_x_parallel_a1():
    # For hexagonal cells pymatgen's default frame has x ∥ a1 and z ∥ c: x_parallel_a.
    pmg = require_reference("pymatgen.core")
    ref = pmg.Lattice.from_parameters(TI_A, TI_A, TI_C, 90, 90, 120)
    ours = Lattice.from_parameters(TI_A, TI_A, TI_C, 90, 90, 120, setting="x_parallel_a")
    assert_allclose(ours.structure_matrix.T, ref.matrix, rtol=0, atol=1e-12)


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("system", sorted(CELLS))
def test_d_spacings_and_angles_match_pymatgen(system, setting):
    pmg = require_reference("pymatgen.core")
    params, _ = CELLS[system]
    ref = pmg.Lattice.from_parameters(*params, vesta=True)
    ours = _lattice(system, setting)
    expected = np.array([ref.d_hkl(tuple(h)) for h in HKL])
    assert_allclose(d_spacing(ours, HKL), expected, rtol=1e-12, atol=0)
    # Angles between plane normals from pymatgen's reciprocal lattice (no 2π), compared as
    # cosines: arccos loses digits near 0° and 180°.
    g = ref.reciprocal_lattice_crystallographic.get_cartesian_coords(HKL)
    g /= np.linalg.norm(g, axis=1, keepdims=True)
    ours_angles = interplanar_angle_deg(ours, HKL[:, None, :], HKL[None, :, :])
    assert_allclose(np.cos(np.radians(ours_angles)), g @ g.T, rtol=0, atol=1e-12)


def test_pymatgen_reproduces_the_copied_constants():
    pmg = require_reference("pymatgen.core")
    cu = pmg.Lattice.cubic(CU_A)
    assert_allclose(cu.d_hkl((1, 1, 1)), CU_D111, rtol=0, atol=5e-6)
    ti = pmg.Lattice.hexagonal(TI_A, TI_C)
    assert_allclose(ti.d_hkl((1, 0, 1)), TI_D10M11, rtol=0, atol=5e-6)
    g = ti.reciprocal_lattice_crystallographic.get_cartesian_coords([[0, 0, 1], [1, 0, 1]])
    cos = g[0] @ g[1] / (np.linalg.norm(g[0]) * np.linalg.norm(g[1]))
    assert_allclose(np.degrees(np.arccos(cos)), TI_0001_10M11_DEG, rtol=0, atol=5e-5)


# ---------------------------------------------------------------- spglib


@pytest.fixture
def spglib_module(monkeypatch):
    spglib = require_reference("spglib")
    errors = require_reference("spglib.error")
    # spglib 2.x warns on every call unless told to raise its errors directly.
    monkeypatch.setattr(errors, "OLD_ERROR_HANDLING", False)
    return spglib


# Structures whose point groups are the holohedries of their cells, plus CdI2 (P-3m1,
# Cd at 0 0 0, I at ±(1/3 2/3 1/4)), whose 2-fold axes lie along the hexagonal a-axes.
STRUCTURES = {
    "copper (fcc)": (
        "cubic",
        [[0, 0, 0], [0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]],
        [1, 1, 1, 1],
        "m-3m",
    ),
    "titanium (hcp)": ("hexagonal", [[1 / 3, 2 / 3, 0.25], [2 / 3, 1 / 3, 0.75]], [1, 1], "6/mmm"),
    "CdI2 (P-3m1)": (
        "trigonal",
        [[0, 0, 0], [1 / 3, 2 / 3, 0.25], [2 / 3, 1 / 3, 0.75]],
        [1, 2, 2],
        "-3m",
    ),
    "tetragonal P": ("tetragonal", [[0, 0, 0]], [1], "4/mmm"),
    "orthorhombic P": ("orthorhombic", [[0, 0, 0]], [1], "mmm"),
    "monoclinic P": ("monoclinic", [[0, 0, 0]], [1], "2/m"),
    "triclinic P": ("triclinic", [[0, 0, 0]], [1], "-1"),
}


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("name", sorted(STRUCTURES))
def test_families_match_spglib_point_group_orbits(spglib_module, name, setting):
    system, positions, numbers, laue = STRUCTURES[name]
    lat = _lattice(system, setting)
    cell = (lat.structure_matrix.T, positions, numbers)
    dataset = spglib_module.get_symmetry_dataset(cell, symprec=1e-5)
    # spglib's point group (Hermann–Mauguin symbol) is the Laue class tested here.
    assert dataset.pointgroup == laue
    rotations = np.unique(dataset.rotations, axis=0)  # W in the lattice basis: x' = W x
    for hkl in HKL:
        # Plane indices are covariant: (hkl) goes to (hkl) W⁻¹; over a group that is {Wᵀ h}.
        orbit = {
            max(tuple(r.tolist()), tuple((-r).tolist())) for r in rotations.transpose(0, 2, 1) @ hkl
        }
        ours = {max(tuple(r.tolist()), tuple((-r).tolist())) for r in expand_family(lat, hkl, laue)}
        assert ours == orbit, hkl


@pytest.mark.parametrize("name", ["copper (fcc)", "titanium (hcp)"])
def test_unit_normals_are_invariant_under_spglib_rotations(spglib_module, name):
    # A symmetry operation written in C must carry each family member's normal onto another
    # member's normal: checks the frame of the normals, not only the index bookkeeping.
    system, positions, numbers, laue = STRUCTURES[name]
    lat = _lattice(system, "x_parallel_a")
    a = lat.structure_matrix
    dataset = spglib_module.get_symmetry_dataset((a.T, positions, numbers), symprec=1e-5)
    cartesian = np.einsum(
        "ij,kjl,lm->kim", a, np.unique(dataset.rotations, axis=0), np.linalg.inv(a)
    )
    members = expand_family(lat, [1, 1, 2] if system == "cubic" else [1, 0, 2], laue)
    n = plane_normals_crystal(lat, members)
    moved = np.einsum("kij,mj->kmi", cartesian, n).reshape(-1, 3)
    closest = np.max(np.abs(moved @ n.T), axis=1)
    assert_allclose(closest, 1.0, rtol=0, atol=1e-12)
