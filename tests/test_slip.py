"""Slip-system notation, expansion under the Laue class, presets (inclination.crystal.slip)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.crystal.phases import Phase
from inclination.crystal.slip import (
    SLIP_PRESET_SOURCES,
    SLIP_PRESETS,
    parse_slip_system,
    schmid_factor,
    slip_systems,
)

CU = Phase.from_dict(
    {
        "id": 1,
        "name": "Cu",
        "laue": "m-3m",
        "lattice": {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90},
    }
)
TI = Phase.from_dict(
    {
        "id": 2,
        "name": "alpha-Ti",
        "laue": "6/mmm",
        "lattice": {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120},
        "setting": "x_parallel_a",
    }
)


# Counts of independent systems (±b once) from the standard tables (Hull & Bacon,
# Introduction to Dislocations, 5th ed., ch. 3, from memory): FCC {111}<110> 12, BCC
# {110}<111> 12, {112}<111> 12, {123}<111> 24; HCP basal 3, prismatic 3, pyramidal <a> 6,
# pyramidal <c+a> {11-22}<11-23> 6.
@pytest.mark.parametrize(
    ("phase", "preset", "count"),
    [
        (CU, "fcc", 12),
        (CU, "bcc-110", 12),
        (CU, "bcc-112", 12),
        (CU, "bcc-123", 24),
        (CU, "bcc", 24),
        (TI, "hcp-basal", 3),
        (TI, "hcp-prismatic", 3),
        (TI, "hcp-pyramidal-a", 6),
        (TI, "hcp-pyramidal-ca", 6),
        (TI, "hcp", 18),
    ],
)
def test_expansion_counts_and_directions_lie_in_their_planes(phase, preset, count):
    s = slip_systems(phase, [preset])
    assert len(s) == count
    assert_allclose(np.sum(s.normal_crystal * s.direction_crystal, axis=1), 0, rtol=0, atol=1e-12)
    # ±b once and ±n once: no two systems are the same pair up to sign.
    key = {(p, d) for p, d in zip(s.plane, s.direction, strict=True)}
    assert len(key) == count


def test_any_member_gives_the_same_set():
    # Invariant: the family is the orbit, whichever member is written.
    a = slip_systems(CU, ["{1 1 1}<1 -1 0>"])
    b = slip_systems(CU, ["{-1 1 1}<0 1 -1>"])
    assert set(zip(a.plane, a.direction, strict=True)) == set(
        zip(b.plane, b.direction, strict=True)
    )


def test_miller_bravais_and_three_index_agree_for_basal_slip():
    four = slip_systems(TI, ["{0 0 0 1}<1 1 -2 0>"])
    three = slip_systems(TI, ["{0 0 1}<1 1 0>"])  # [1 1 -2 0] = [3 3 0] ∥ [1 1 0] (§4)
    n4 = np.abs(four.direction_crystal @ three.direction_crystal.T).max(axis=1)
    assert_allclose(n4, 1.0, rtol=0, atol=1e-12)


def test_presets_have_sources_and_parse():
    assert set(SLIP_PRESETS) == set(SLIP_PRESET_SOURCES)
    for texts in SLIP_PRESETS.values():
        for text in texts:
            plane, direction = parse_slip_system(text)
            assert plane.kind == "plane" and direction.kind == "direction"


def test_plane_families_in_order():
    assert slip_systems(CU, ["bcc"]).plane_families == ("{1 1 0}", "{1 1 2}")


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("{1 1 1}", "plane family and a direction family"),
        ("<1 1 0>{1 1 1}", "plane family and a direction family"),
        ("{1 1 1}<1 1 -2 0>", "same notation"),
        ("{1 1 1}<1 1 1>", "lie in the planes"),
        ("fcc-typo", "presets"),
    ],
)
def test_bad_strings(text, match):
    with pytest.raises(ValueError, match=match):
        slip_systems(CU, [text])


def test_four_index_refused_for_cubic():
    with pytest.raises(ValueError, match="Miller–Bravais indices belong to hexagonal axes"):
        slip_systems(CU, ["{1 0 -1 0}<1 1 -2 0>"])


def test_repeated_and_empty_and_type():
    with pytest.raises(ValueError, match="each slip system once"):
        slip_systems(CU, ["fcc", "{1 1 1}<1 1 0>"])
    with pytest.raises(ValueError, match="at least one"):
        slip_systems(CU, [])
    with pytest.raises(TypeError, match="list of strings"):
        slip_systems(CU, "fcc")
    with pytest.raises(TypeError, match="slip-system string"):
        parse_slip_system(3)


def test_schmid_factor_refuses_zero_vectors():
    with pytest.raises(ValueError, match="Expected `load` to hold non-zero vectors"):
        schmid_factor([0, 0, 0], [1, 1, 1], [1, -1, 0])
