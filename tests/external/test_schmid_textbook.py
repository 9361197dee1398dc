"""Schmid factors of the expanded slip systems against textbook values and hand derivations.

The FCC values for uniaxial loads along <001>, <111> and <011> are the standard results
tabulated in W. F. Hosford, Mechanical Behavior of Materials, 2nd ed. (Cambridge University
Press, 2010), chapter on slip, and in D. Hull and D. J. Bacon, Introduction to Dislocations,
5th ed. (2011), ch. 3 (both from memory). Every value is also derived by hand beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.crystal.phases import Phase
from inclination.crystal.rotations import quat_apply, random_quat
from inclination.crystal.slip import schmid_factor, slip_systems

CUBIC = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
CU = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": CUBIC})
TI = Phase.from_dict(
    {
        "id": 2,
        "name": "alpha-Ti",
        "laue": "6/mmm",
        "lattice": {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120},
        "setting": "x_parallel_a",
    }
)


def _factors(phase, preset, load):
    s = slip_systems(phase, [preset])
    return np.sort(schmid_factor(load, s.normal_crystal, s.direction_crystal))


@pytest.mark.parametrize(
    ("load", "value", "count"),
    [
        # [001]: cos φ = 1/√3 on every {111}, cos λ = 1/√2 for the <110> with a z part,
        # 0 for the one in the x-y plane: eight systems at 1/√6, four at 0.
        ([0, 0, 1], 1 / np.sqrt(6), 8),
        # [111]: the (111) plane's systems have cos λ = 0; on the other three planes
        # cos φ = 1/3 and two directions have cos λ = 2/√6: six at 2/(3√6) = 0.272.
        ([1, 1, 1], 2 / (3 * np.sqrt(6)), 6),
        # [011]: (1 1 1) and (-1 1 1) have cos φ = 2/√6, (1 -1 1) and (1 1 -1) have 0; on
        # each of the first two, two <110> have cos λ = 1/2 and one 0: four at 1/√6.
        ([0, 1, 1], 1 / np.sqrt(6), 4),
    ],
)
def test_fcc_textbook_loads(load, value, count):
    m = _factors(CU, "fcc", load)
    assert len(m) == 12
    assert_allclose(m[-count:], value, rtol=0, atol=1e-12)
    assert_allclose(m[:-count], 0.0, rtol=0, atol=1e-12)


def test_fcc_123_primary_system_hand_derived():
    # Hand derivation: load [1 2 3]/√14 on the primary system (-1 1 1)[1 0 1]:
    # cos φ = 4/√42, cos λ = 4/√28, m = 16/√1176 = 0.46657.
    m = _factors(CU, "fcc", [1, 2, 3])
    assert_allclose(m[-1], 16 / np.sqrt(1176), rtol=0, atol=1e-12)
    # (-1 1 1)[1 1 0]: cos λ = 3/√28 → 12/√1176 = 0.34993.
    assert_allclose(m[-2], 12 / np.sqrt(1176), rtol=0, atol=1e-12)


def test_hcp_load_along_c_gives_zero_on_basal_and_prismatic():
    # Hand derivation: along c, basal slip has cos λ = 0 (b lies in the basal plane) and
    # prismatic slip has cos φ = 0 (the normal lies in the basal plane): m = 0 for all six.
    for preset in ("hcp-basal", "hcp-prismatic"):
        assert_allclose(_factors(TI, preset, [0, 0, 1]), 0.0, rtol=0, atol=1e-12)


@pytest.mark.parametrize("psi_deg", [0.0, 17.0, 30.0, 52.0])
def test_hcp_load_in_basal_plane_hand_derived(psi_deg):
    # Hand derivation: a load in the basal plane at ψ from a1 (X_C in x_parallel_a) has
    # cos φ = 0 on the basal plane (m = 0). A prism plane with normal at θ (30°, 90°, 150°)
    # has its one <11-20> slip direction at θ ± 90° in the basal plane, so
    # m = |cos(ψ - θ) sin(ψ - θ)| = |sin 2(ψ - θ)| / 2.
    psi = np.deg2rad(psi_deg)
    load = [np.cos(psi), np.sin(psi), 0.0]
    assert_allclose(_factors(TI, "hcp-basal", load), 0.0, rtol=0, atol=1e-12)
    theta = np.deg2rad([30.0, 90.0, 150.0])
    expected = np.sort(np.abs(np.sin(2 * (psi - theta))) / 2)
    assert_allclose(_factors(TI, "hcp-prismatic", load), expected, rtol=0, atol=1e-12)


def test_schmid_factor_is_frame_invariant_and_bounded():
    # Invariant: rotating load, normal and direction together leaves m unchanged; m ≤ 1/2
    # because cos φ cos λ ≤ cos²(45°) when n ⟂ b.
    s = slip_systems(CU, ["fcc"])
    q = random_quat(20, rng=3)
    load = np.random.default_rng(3).normal(size=(20, 3))
    m_crystal = schmid_factor(quat_apply(q, load)[:, None], s.normal_crystal, s.direction_crystal)
    g_inv = q * np.array([1.0, -1.0, -1.0, -1.0])  # the inverse rotation, crystal to sample
    n_s = quat_apply(g_inv[:, None], s.normal_crystal[None])
    b_s = quat_apply(g_inv[:, None], s.direction_crystal[None])
    assert_allclose(schmid_factor(load[:, None], n_s, b_s), m_crystal, rtol=0, atol=1e-12)
    assert m_crystal.max() <= 0.5 + 1e-12
