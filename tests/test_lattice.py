"""Unit tests of inclination.crystal.lattice: cells, indices, normals, families, phases (conventions §4)."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from inclination.crystal import (
    LAUE_CRYSTAL_SYSTEMS,
    SETTINGS,
    Indices,
    Lattice,
    Phase,
    Phases,
    d_spacing,
    default_families,
    direction_crystal,
    expand_family,
    format_indices,
    format_indices_latex,
    interplanar_angle_deg,
    low_indices,
    parse_indices,
    plane_normals_crystal,
)
from inclination.errors import InputError, SettingError

# One cell of each crystal system, with the Laue class the cell is tested under.
CELLS = {
    "cubic": ((3.615, 3.615, 3.615, 90, 90, 90), "m-3m"),
    "tetragonal": ((4.59, 4.59, 2.96, 90, 90, 90), "4/mmm"),
    "orthorhombic": ((5.0, 6.0, 7.0, 90, 90, 90), "mmm"),
    "hexagonal": ((2.951, 2.951, 4.684, 90, 90, 120), "6/mmm"),
    "trigonal": ((4.76, 4.76, 12.99, 90, 90, 120), "-3m"),
    "monoclinic": ((5.1, 5.2, 5.3, 90, 99.2, 90), "2/m"),
    "triclinic": ((4.2, 5.3, 6.1, 81.0, 97.0, 104.0), "-1"),
}
CU = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90)
TI = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a")
CU_CELL = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
TI_CELL = {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120}


def _metric_from_parameters(a, b, c, alpha, beta, gamma):
    # Definition of the metric tensor: G_ij = a_i · a_j, e.g. G_12 = a b cos γ.
    ca, cb, cg = (math.cos(math.radians(x)) for x in (alpha, beta, gamma))
    return np.array(
        [
            [a * a, a * b * cg, a * c * cb],
            [a * b * cg, b * b, b * c * ca],
            [a * c * cb, b * c * ca, c * c],
        ]
    )


def _unsigned_set(rows):
    """Planes as a set with n ≡ −n, for comparing families as equivalence classes."""
    out = set()
    for r in np.asarray(rows).tolist():
        out.add(max(tuple(r), tuple(-x for x in r)))
    return out


# ---------------------------------------------------------------- Lattice


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("system", sorted(CELLS))
def test_structure_matrix_reproduces_metric_and_reciprocal(system, setting):
    params, laue = CELLS[system]
    lat = Lattice.from_parameters(*params, setting=setting, laue=laue)
    a = lat.structure_matrix
    assert_allclose(a.T @ a, _metric_from_parameters(*params), rtol=1e-12, atol=1e-12)
    assert_allclose(lat.metric_tensor, _metric_from_parameters(*params), rtol=1e-12, atol=1e-12)
    # Reciprocal relation a_i · a*_j = δ_ij (definition of the reciprocal lattice, no 2π).
    assert_allclose(a.T @ lat.reciprocal_matrix, np.eye(3), rtol=0, atol=1e-12)
    assert np.linalg.det(a) > 0  # right-handed cell in a right-handed frame
    assert lat.crystal_system == system


@pytest.mark.parametrize("system", sorted(CELLS))
def test_settings_put_the_named_axes_on_x_and_z(system):
    params, laue = CELLS[system]
    lat_a = Lattice.from_parameters(*params, setting="x_parallel_a", laue=laue)
    lat_s = Lattice.from_parameters(*params, setting="x_parallel_a_star", laue=laue)
    # conventions §4: x_parallel_a has X ∥ a and Z ∥ c*; x_parallel_a_star has X ∥ a*, Z ∥ c.
    a_vec, c_star = lat_a.structure_matrix[:, 0], lat_a.reciprocal_matrix[:, 2]
    assert_allclose(a_vec / np.linalg.norm(a_vec), [1, 0, 0], rtol=0, atol=1e-12)
    assert_allclose(c_star / np.linalg.norm(c_star), [0, 0, 1], rtol=0, atol=1e-12)
    a_star, c_vec = lat_s.reciprocal_matrix[:, 0], lat_s.structure_matrix[:, 2]
    assert_allclose(a_star / np.linalg.norm(a_star), [1, 0, 0], rtol=0, atol=1e-12)
    assert_allclose(c_vec / np.linalg.norm(c_vec), [0, 0, 1], rtol=0, atol=1e-12)
    # b lies in the Y–Z plane in the a* setting (conventions §4).
    assert abs(lat_s.structure_matrix[0, 1]) < 1e-12


def test_hexagonal_settings_differ_by_30_degrees_about_c():
    # a and a* of a hexagonal cell are 30° apart (hand derivation: a* ⊥ b, γ = 120°).
    lat_s = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a_star")
    a1, a2 = TI.structure_matrix, lat_s.structure_matrix
    cos = a1[:, 0] @ a2[:, 0] / (np.linalg.norm(a1[:, 0]) * np.linalg.norm(a2[:, 0]))
    assert_allclose(np.degrees(np.arccos(cos)), 30.0, rtol=0, atol=1e-9)
    assert_allclose(a1[2], a2[2], rtol=0, atol=1e-12)  # c unchanged


def test_orthogonal_settings_coincide_and_default():
    lat = Lattice.from_parameters(5, 6, 7, 90, 90, 90)
    other = Lattice.from_parameters(5, 6, 7, 90, 90, 90, setting="x_parallel_a_star")
    assert lat.setting == "x_parallel_a"
    assert_allclose(lat.structure_matrix, other.structure_matrix, rtol=0, atol=1e-12)
    assert_allclose(lat.structure_matrix, np.diag([5, 6, 7]), rtol=0, atol=1e-12)


def test_volume_matches_the_triple_product_formula():
    params, _ = CELLS["triclinic"]
    a, b, c, al, be, ga = params
    ca, cb, cg = (math.cos(math.radians(x)) for x in (al, be, ga))
    # Handbook formula: V = abc √(1 − cos²α − cos²β − cos²γ + 2 cosα cosβ cosγ).
    expected = a * b * c * math.sqrt(1 - ca**2 - cb**2 - cg**2 + 2 * ca * cb * cg)
    lat = Lattice.from_parameters(*params, setting="x_parallel_a_star")
    assert_allclose(lat.volume, expected, rtol=1e-12, atol=0)


@pytest.mark.parametrize(
    ("params", "system"),
    [
        ((3, 3, 3, 90, 90, 90), "cubic"),
        ((3, 3, 4, 90, 90, 90), "tetragonal"),
        ((3, 4, 5, 90, 90, 90), "orthorhombic"),
        ((3, 3, 5, 90, 90, 120), "hexagonal"),
        ((3, 3, 3, 80, 80, 80), "trigonal"),
        ((3, 4, 5, 90, 110, 90), "monoclinic"),
        ((3, 4, 5, 80, 85, 95), "triclinic"),
    ],
)
def test_crystal_system_from_parameters(params, system):
    setting = None if params[3:] == (90, 90, 90) else "x_parallel_a"
    assert Lattice.from_parameters(*params, setting=setting).crystal_system == system


def test_crystal_system_from_laue_overrides_parameters():
    lat = Lattice.from_parameters(3, 3, 5, 90, 90, 120, setting="x_parallel_a", laue="-3m")
    assert lat.crystal_system == "trigonal"
    lat = Lattice.from_parameters(3, 3, 3, 90, 90, 90, laue="mmm")
    assert lat.crystal_system == "orthorhombic"


@pytest.mark.parametrize(
    ("params", "match"),
    [
        ((0, 3, 3, 90, 90, 90), r"Expected `a` to be a finite length > 0"),
        ((3, -1, 3, 90, 90, 90), r"Expected `b` to be a finite length > 0"),
        ((3, 3, np.inf, 90, 90, 90), r"Expected `c` to be a finite length > 0"),
        ((3, 3, 3, 0, 90, 90), r"Expected `alpha_deg` to lie strictly between 0° and 180°"),
        ((3, 3, 3, 90, 180, 90), r"Expected `beta_deg` to lie strictly between"),
        ((3, 3, 3, 90, 90, np.nan), r"Expected `gamma_deg` to lie strictly between"),
        ((3, 3, 3, 120, 120, 120), r"sum to less than 360°"),
        ((3, 3, 3, 10, 10, 100), r"each angle smaller than the sum of the other two"),
        ((3, 3, 3, 60, 60, 120), r"the cell has no volume"),
    ],
)
def test_impossible_cells_are_refused(params, match):
    with pytest.raises(ValueError, match=match):
        Lattice.from_parameters(*params, setting="x_parallel_a")


def test_non_numbers_are_refused():
    with pytest.raises(SettingError, match=r"Expected `a` to be a number, got str"):
        Lattice.from_parameters("3", 3, 3, 90, 90, 90)
    with pytest.raises(SettingError, match=r"Expected `gamma_deg` to be a number, got bool"):
        Lattice.from_parameters(3, 3, 3, 90, 90, True)


@pytest.mark.parametrize(
    ("params", "system", "angle"),
    [
        ((2.951, 2.951, 4.684, 90, 90, 120), "hexagonal", "30.0°"),
        ((3, 3, 3, 80, 80, 80), "trigonal", r"\d+\.\d°"),
        ((3, 4, 5, 90, 110, 90), "monoclinic", "20.0°"),
        ((3, 4, 5, 80, 85, 95), "triclinic", r"\d+\.\d°"),
    ],
)
def test_missing_setting_is_refused_with_the_reason(params, system, angle):
    with pytest.raises(ValueError, match=rf"for a {system} cell, got None.*{angle} apart"):
        Lattice.from_parameters(*params)


def test_missing_setting_message_names_the_30_degree_error():
    with pytest.raises(ValueError, match=r"30° for every hexagonal cell.*turns every predicted"):
        Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, laue="6/mmm")


def test_unknown_setting_and_laue_are_refused_with_the_allowed_set():
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of \('x_parallel_a'"):
        Lattice.from_parameters(3, 3, 3, 90, 90, 90, setting="x_along_a")
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of \('-1', '2/m'.*'cubic'"):
        Lattice.from_parameters(3, 3, 3, 90, 90, 90, laue="cubic")


@pytest.mark.parametrize(
    ("params", "laue", "match"),
    [
        ((3, 3.1, 3, 90, 90, 90), "m-3m", r"cubic phase .*a = b = c"),
        ((3, 3.1, 5, 90, 90, 90), "4/m", r"tetragonal phase .*a = b and"),
        ((3, 4, 5, 90, 91, 90), "mmm", r"orthorhombic phase .*α = β = γ = 90°"),
        ((3, 3, 5, 90, 90, 90), "6/mmm", r"hexagonal phase .*hexagonal axes"),
        ((3, 3, 3, 80, 80, 80), "-3m", r"trigonal phase .*hexagonal axes"),
        ((3, 4, 5, 90, 90, 100), "2/m", r"monoclinic phase .*unique axis b"),
    ],
)
def test_cell_must_fit_its_laue_class(params, laue, match):
    with pytest.raises(ValueError, match=match):
        Lattice.from_parameters(*params, setting="x_parallel_a", laue=laue)


def test_near_misses_are_refused_not_rounded():
    # A cell that only nearly fits its Laue class would make the symmetry operators map
    # the lattice onto non-lattice planes; it is refused, never quietly idealised.
    with pytest.raises(ValueError, match=r"hexagonal phase .*γ=119.99°"):
        Lattice.from_parameters(
            2.951, 2.951, 4.684, 90, 90, 119.99, setting="x_parallel_a", laue="6/mmm"
        )
    with pytest.raises(ValueError, match=r"cubic phase .*b=3.6151"):
        Lattice.from_parameters(3.615, 3.6151, 3.615, 90, 90, 90, laue="m-3m")


def test_laue_classes_map_to_their_crystal_systems():
    # conventions §4: the 11 Laue classes in Hermann–Mauguin notation.
    assert tuple(LAUE_CRYSTAL_SYSTEMS) == (
        "-1",
        "2/m",
        "mmm",
        "4/m",
        "4/mmm",
        "-3",
        "-3m",
        "6/m",
        "6/mmm",
        "m-3",
        "m-3m",
    )
    assert SETTINGS == ("x_parallel_a", "x_parallel_a_star")
    with pytest.raises(TypeError):
        LAUE_CRYSTAL_SYSTEMS["-1"] = "cubic"


def test_lattice_is_frozen_and_matrices_are_fresh_copies():
    with pytest.raises(AttributeError):
        CU.a = 4.0
    m = CU.structure_matrix
    m[0, 0] = 99.0
    assert CU.structure_matrix[0, 0] == 3.615


# ---------------------------------------------------------------- parsing and formatting


@pytest.mark.parametrize(
    ("text", "kind", "family", "values"),
    [
        ("{1 1 1}", "plane", True, (1, 1, 1)),
        ("(1 -1 0)", "plane", False, (1, -1, 0)),
        ("[1 1 0]", "direction", False, (1, 1, 0)),
        ("<1 1 -2 0>", "direction", True, (1, 1, -2, 0)),
        ("{10-12}", "plane", True, (1, 0, -1, 2)),
        ("(0001)", "plane", False, (0, 0, 0, 1)),
        ("{-1 0 1 2}", "plane", True, (-1, 0, 1, 2)),
        ("(-1-11)", "plane", False, (-1, -1, 1)),
        ("  ( 1, 1, 2 ) ", "plane", False, (1, 1, 2)),
        ("(1 \u22121 0)", "plane", False, (1, -1, 0)),  # typographic minus sign
        ("[12 -5 0]", "direction", False, (12, -5, 0)),
    ],
)
def test_parse_accepts_the_trade_notations(text, kind, family, values):
    idx = parse_indices(text)
    assert (idx.kind, idx.family, idx.values) == (kind, family, values)
    assert idx.bravais == (len(values) == 4)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("", r"Expected `text` to be indices in \(\), \{\}, \[\] or <>"),
        ("1 1 1", r"Expected `text` to be indices in"),
        ("{1 1 1)", r"opened with '\{' to close with '\}'"),
        ("[1 1 0>", r"opened with '\[' to close with '\]'"),
        ("()", r"to hold 3 or 4 integer indices"),
        ("(1 1)", r"hold 3 or 4 integer indices, got 2"),
        ("(1 1 1 1 1)", r"got 5"),
        ("(1.5 1 1)", r"only integer indices"),
        ("(a b c)", r"only integer indices"),
        ("(1x1)", r"only integer indices"),
        ("(0 0 0)", r"not all zero"),
        (
            "(1 1 -1 2)",
            r"four-index plane \(h k i l\) with i = -\(h \+ k\).*i = -1, -\(h \+ k\) = -2",
        ),
        ("{10-22}", r"four-index plane"),
        ("[1 1 1 0]", r"four-index direction \[U V T W\] with T = -\(U \+ V\)"),
    ],
)
def test_parse_refuses_anything_else(text, match):
    with pytest.raises(ValueError, match=match):
        parse_indices(text)


def test_parse_refuses_non_strings():
    with pytest.raises(SettingError, match=r"Expected `text` to be a string, got tuple"):
        parse_indices((1, 1, 1))


def test_indices_built_directly_are_checked_too():
    assert Indices("plane", 1, [1, 0, 2]) == Indices("plane", True, (1, 0, 2))
    with pytest.raises(ValueError, match=r"Expected `kind` to be one of \('plane', 'direction'\)"):
        Indices("zone", False, (1, 1, 1))
    with pytest.raises(ValueError, match=r"Expected `values` to hold integers"):
        Indices("plane", False, (1, 0.5, 1))
    with pytest.raises(ValueError, match=r"Expected `values` to be not all zero"):
        Indices("plane", False, (0, 0, 0))
    with pytest.raises(ValueError, match=r"four-index direction \[U V T W\] with T = -\(U \+ V\)"):
        Indices("direction", True, (1, 0, 0, 0))


def test_three_index_conversion_of_four_index_notation():
    # conventions §4: (hkil) → (hkl); [UVTW] → [U−T, V−T, W].
    assert parse_indices("(1 0 -1 2)").three_index == (1, 0, 2)
    assert parse_indices("[1 1 -2 3]").three_index == (3, 3, 3)
    assert parse_indices("[1 1 0]").three_index == (1, 1, 0)


@given(
    st.lists(st.integers(-12, 12), min_size=3, max_size=3).filter(any),
    st.sampled_from(["plane", "direction"]),
    st.booleans(),
)
def test_format_then_parse_round_trip(values, kind, family):
    text = format_indices(values, kind, family=family)
    assert parse_indices(text) == Indices(kind=kind, family=family, values=tuple(values))


@given(st.integers(-9, 9), st.integers(-9, 9), st.integers(-9, 9))
def test_format_then_parse_round_trip_four_index(h, k, l_):
    values = (h, k, -(h + k), l_)
    if not any(values):
        return
    assert parse_indices(format_indices(values, "plane")).values == values
    assert parse_indices(str(parse_indices(format_indices(values, "direction")))).values == values


def test_format_examples_and_refusals():
    assert format_indices((1, 1, -1), "plane") == "(1 1 -1)"
    assert format_indices((1, 1, 1), "plane", family=True) == "{1 1 1}"
    assert format_indices(np.array([1, 1, 0]), "direction") == "[1 1 0]"
    assert format_indices((1, 1, -2, 0), "direction", family=True) == "<1 1 -2 0>"
    with pytest.raises(ValueError, match=r"Expected `kind` to be one of \('plane', 'direction'\)"):
        format_indices((1, 1, 1), "zone")
    with pytest.raises(ValueError, match=r"Expected `values` to have shape \(3,\) or \(4,\)"):
        format_indices((1, 1), "plane")
    with pytest.raises(ValueError, match=r"Expected `values` to hold integers, got \[1.5"):
        format_indices((1.5, 1, 1), "plane")


def test_latex_form_uses_overbars():
    assert format_indices_latex((1, 1, -1), "plane") == r"$(11\bar{1})$"
    assert format_indices_latex((1, 1, 1), "plane", family=True) == r"$\{111\}$"
    assert format_indices_latex((1, -1, 0), "direction") == r"$[1\bar{1}0]$"
    assert format_indices_latex((1, 1, -2, 0), "direction", family=True) == (
        r"$\langle 11\bar{2}0\rangle$"
    )
    assert format_indices_latex((10, -1, 0), "plane") == r"$(10\,\bar{1}\,0)$"
    with pytest.raises(ValueError, match=r"Expected `kind` to be one of"):
        format_indices_latex((1, 1, 1), "axis")


# ---------------------------------------------------------------- normals, directions, metrics


@pytest.mark.parametrize("setting", SETTINGS)
@given(seed=st.integers(0, 2**31 - 1))
def test_weiss_zone_law_normals_perpendicular_to_zone_directions(setting, seed):
    # Weiss zone law: [uvw] lies in (hkl) iff hu + kv + lw = 0, on any lattice.
    rng = np.random.default_rng(seed)
    lat = Lattice.from_parameters(*CELLS["triclinic"][0], setting=setting)
    hkl = rng.integers(-4, 5, (20, 3))
    hkl[np.all(hkl == 0, axis=1)] = (1, 0, 0)
    other = rng.integers(-4, 5, (20, 3))
    uvw = np.cross(hkl, other)  # h·u = 0 by construction
    keep = np.any(uvw != 0, axis=1)
    n = plane_normals_crystal(lat, hkl[keep])
    d = direction_crystal(lat, uvw[keep])
    assert_allclose(np.sum(n * d, axis=1), 0.0, rtol=0, atol=1e-12)
    assert_allclose(np.linalg.norm(n, axis=1), 1.0, rtol=1e-12, atol=0)


def test_normals_broadcast_and_do_not_modify_input():
    hkl = np.array([[[1, 1, 1], [1, 0, 0]], [[0, 1, 0], [1, 1, 0]]])
    before = hkl.copy()
    assert plane_normals_crystal(CU, hkl).shape == (2, 2, 3)
    assert (hkl == before).all()
    assert plane_normals_crystal(CU, parse_indices("(1 0 0)")).tolist() == [1.0, 0.0, 0.0]


def test_four_index_planes_and_directions():
    # (10-10) ⊥ [0001]; [2-1-10] ∥ a1; (0001) ∥ c (hand derivation, hexagonal axes).
    assert_allclose(plane_normals_crystal(TI, [0, 0, 0, 1]), [0, 0, 1], rtol=0, atol=1e-12)
    assert_allclose(direction_crystal(TI, [0, 0, 0, 1]), [0, 0, 1], rtol=0, atol=1e-12)
    assert_allclose(direction_crystal(TI, [2, -1, -1, 0]), [1, 0, 0], rtol=0, atol=1e-12)
    n4 = plane_normals_crystal(TI, [1, 0, -1, 2])
    assert_allclose(n4, plane_normals_crystal(TI, [1, 0, 2]), rtol=0, atol=1e-15)
    # In hexagonal axes the plane (hki0) normal is parallel to [hki0] (hand derivation).
    assert_allclose(
        plane_normals_crystal(TI, [1, 0, -1, 0]),
        direction_crystal(TI, [1, 0, -1, 0]),
        rtol=0,
        atol=1e-12,
    )


@pytest.mark.parametrize(
    ("func", "arg", "match"),
    [
        (
            plane_normals_crystal,
            [1, 1, 1, 1],
            r"Expected `hkl` in four-index form to have i = -\(h \+ k\)",
        ),
        (
            direction_crystal,
            [1, 1, 1, 1],
            r"Expected `uvw` in four-index form to have T = -\(U \+ V\)",
        ),
        (
            plane_normals_crystal,
            [0, 0, 0],
            r"Expected `hkl` to be non-zero, got all-zero indices\.$",
        ),
        (direction_crystal, [[1, 0, 0], [0, 0, 0]], r"Expected `uvw` to be non-zero.*index \(1,\)"),
        (
            plane_normals_crystal,
            [1, 1],
            r"Expected `hkl` to have shape \(\.\.\., 3\) or \(\.\.\., 4\)",
        ),
        (d_spacing, [np.nan, 1, 1], r"Expected `hkl` to be finite everywhere"),
    ],
)
def test_vector_functions_refuse_bad_indices(func, arg, match):
    with pytest.raises(ValueError, match=match):
        func(TI, arg)


def test_vector_functions_refuse_a_non_lattice():
    for func in (plane_normals_crystal, direction_crystal, d_spacing):
        with pytest.raises(SettingError, match=r"Expected `lattice` to be a Lattice, got dict"):
            func({"a": 1}, [1, 0, 0])
    with pytest.raises(SettingError, match=r"Expected `lattice` to be a Lattice"):
        interplanar_angle_deg(None, [1, 0, 0], [0, 1, 0])
    with pytest.raises(
        SettingError,
        match=r"Expected `hkl` to be an array of indices or an Indices, got the string '111'",
    ):
        plane_normals_crystal(CU, "111")


def test_cubic_d_spacing_handbook_formula():
    # Cubic d-spacing: d = a / √(h² + k² + l²) (any crystallography handbook).
    hkl = np.array([[1, 1, 1], [2, 0, 0], [2, 2, 0], [3, 1, 1], [1, 2, 3]])
    expected = 3.615 / np.sqrt(np.sum(hkl**2, axis=1))
    assert_allclose(d_spacing(CU, hkl), expected, rtol=1e-12, atol=0)
    assert_allclose(d_spacing(CU, [1, 1, 1]), 2.08712, rtol=0, atol=5e-6)  # a/√3 by hand


def test_hexagonal_d_spacing_handbook_formula():
    # Hexagonal d-spacing: 1/d² = 4(h² + hk + k²)/(3a²) + l²/c² (crystallography handbook).
    a, c = 2.951, 4.684
    hkl = np.array([[1, 0, 1], [1, 0, 2], [1, 1, 0], [0, 0, 2], [2, -1, 3]])
    h, k, l_ = hkl.T
    expected = 1 / np.sqrt(4 * (h * h + h * k + k * k) / (3 * a * a) + l_ * l_ / (c * c))
    for setting in SETTINGS:
        lat = Lattice.from_parameters(a, a, c, 90, 90, 120, setting=setting)
        assert_allclose(d_spacing(lat, hkl), expected, rtol=1e-12, atol=0)
    assert_allclose(d_spacing(TI, [1, 0, -1, 1]), 2.24344, rtol=0, atol=5e-6)  # formula by hand


def test_cubic_handbook_angles():
    # Cubic interplanar angles, handbook tables: (100)^(111) = 54.74°, (110)^(111) = 35.26°,
    # (111)^(-111) = 70.53° (exact: arccos(1/√3), arccos(√(2/3)), arccos(1/3)).
    got = interplanar_angle_deg(
        CU, [[1, 0, 0], [1, 1, 0], [1, 1, 1]], [[1, 1, 1], [1, 1, 1], [-1, 1, 1]]
    )
    expected = np.degrees(np.arccos([1 / math.sqrt(3), math.sqrt(2 / 3), 1 / 3]))
    assert_allclose(got, expected, rtol=0, atol=1e-10)
    assert_allclose(got, [54.74, 35.26, 70.5288], rtol=0, atol=5e-3)


def test_hexagonal_basal_to_pyramidal_angle():
    # Hexagonal angle between (0001) and (h0-hl): tan θ = 2 h c / (√3 l a) (hand derivation);
    # 61.3826° for Ti (10-11) by hand.
    expected = math.degrees(math.atan(2 * 4.684 / (math.sqrt(3) * 2.951)))
    got = interplanar_angle_deg(TI, [0, 0, 0, 1], [1, 0, -1, 1])
    assert_allclose(got, expected, rtol=0, atol=1e-10)
    assert_allclose(got, 61.3826, rtol=0, atol=5e-5)
    assert_allclose(interplanar_angle_deg(TI, [0, 0, 1], [0, 0, -1]), 180.0, rtol=0, atol=1e-9)


# ---------------------------------------------------------------- families


@pytest.mark.parametrize(
    ("hkl", "laue", "size"),
    [
        # Multiplicities of cubic forms up to sign: half the handbook multiplicity (8, 6, 12, 24).
        ((1, 1, 1), "m-3m", 4),
        ((1, 0, 0), "m-3m", 3),
        ((1, 1, 0), "m-3m", 6),
        ((1, 1, 2), "m-3m", 12),
        ((1, 2, 3), "m-3m", 24),
        ((1, 2, 3), "m-3", 12),  # the general form splits in m-3 (multiplicity 24 vs 48)
        ((1, 1, 2), "m-3", 12),
    ],
)
def test_cubic_family_sizes(hkl, laue, size):
    rows = expand_family(CU, hkl, laue)
    assert rows.shape == (size, 3) and rows.dtype.kind == "i"
    assert len(_unsigned_set(rows)) == size


@pytest.mark.parametrize(
    ("text", "laue", "size"),
    [
        # Hexagonal multiplicities up to sign: half the handbook multiplicity (12, 6, 6, 2, 12, 12).
        ("{10-12}", "6/mmm", 6),
        ("{10-10}", "6/mmm", 3),
        ("{11-20}", "6/mmm", 3),
        ("{0001}", "6/mmm", 1),
        ("{10-11}", "6/mmm", 6),
        ("{11-22}", "6/mmm", 6),
        ("{10-12}", "6/m", 6),
        ("{12-31}", "6/mmm", 12),
        ("{12-31}", "6/m", 6),
    ],
)
def test_hexagonal_family_sizes(text, laue, size):
    rows = expand_family(TI, parse_indices(text), laue)
    assert rows.shape == (size, 4)
    assert np.all(rows[:, 2] == -(rows[:, 0] + rows[:, 1]))
    assert len(_unsigned_set(rows)) == size


@pytest.mark.parametrize("setting", SETTINGS)
def test_family_members_share_spacing_and_angle_to_c(setting):
    lat = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting=setting)
    rows = expand_family(lat, [1, 0, -1, 2], "6/mmm")
    assert_allclose(d_spacing(lat, rows), d_spacing(lat, [1, 0, -1, 2]), rtol=1e-12, atol=0)
    tilt = interplanar_angle_deg(lat, [0, 0, 0, 1], rows)
    assert_allclose(
        np.minimum(tilt, 180 - tilt), tilt[0] if tilt[0] < 90 else 180 - tilt[0], rtol=0, atol=1e-9
    )


def test_family_is_the_same_whichever_member_is_given():
    ref = expand_family(CU, [1, 1, 2], "m-3m")
    for member in ([-1, 2, 1], [2, -1, -1], [-2, -1, -1]):
        assert (expand_family(CU, member, "m-3m") == ref).all()
    ref = expand_family(TI, [1, 0, -1, 1], "6/mmm")
    assert (expand_family(TI, [0, -1, 1, -1], "6/mmm") == ref).all()


def test_family_members_have_first_nonzero_index_positive_and_are_sorted():
    rows = expand_family(CU, [1, 1, 0], "m-3m")
    first = rows[np.arange(len(rows)), np.argmax(rows != 0, axis=1)]
    assert (first > 0).all()
    assert rows.tolist() == sorted(rows.tolist(), reverse=True)


def test_direction_families_keep_both_senses():
    # <110> has 12 members and <111> 8 in cubic; <2-1-10> 6 in hexagonal (handbook multiplicities).
    assert len(expand_family(CU, [1, 1, 0], "m-3m", kind="direction")) == 12
    assert len(expand_family(CU, [1, 1, 1], "m-3m", kind="direction")) == 8
    rows = expand_family(TI, parse_indices("<2 -1 -1 0>"), "6/mmm")
    assert rows.shape == (6, 4)
    assert {tuple(r) for r in rows.tolist()} == {
        (2, -1, -1, 0),
        (-1, 2, -1, 0),
        (-1, -1, 2, 0),
        (-2, 1, 1, 0),
        (1, -2, 1, 0),
        (1, 1, -2, 0),
    }


def test_expand_family_refuses_a_laue_class_that_is_not_a_symmetry_of_the_cell():
    with pytest.raises(ValueError, match=r"non-integer indices: check the Laue class"):
        expand_family(TI, [1, 0, 0], "m-3m")


def test_expand_family_refuses_bad_options():
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of"):
        expand_family(CU, [1, 1, 1], "Oh")
    with pytest.raises(ValueError, match=r"Expected `kind` to be one of"):
        expand_family(CU, [1, 1, 1], "m-3m", kind="zone")
    with pytest.raises(ValueError, match=r"Expected `setting` to be one of"):
        expand_family(CU, [1, 1, 1], "m-3m", setting="x_along_c")
    with pytest.raises(ValueError, match=r"Expected `hkl` to hold integers"):
        expand_family(CU, [0.5, 1, 1], "m-3m")
    with pytest.raises(SettingError, match=r"Expected `lattice` to be a Lattice"):
        expand_family("Cu", [1, 1, 1], "m-3m")


def test_default_families_of_cubic_and_hexagonal_phases():
    assert default_families("m-3m") == ("{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}")
    assert default_families("m-3") == default_families("m-3m")
    assert default_families("6/mmm") == (
        "(0 0 0 1)",
        "{1 0 -1 0}",
        "{1 1 -2 0}",
        "{1 0 -1 1}",
        "{1 0 -1 2}",
        "{1 1 -2 2}",
    )


@pytest.mark.parametrize(
    ("laue", "count"),
    [
        # Hand count: primitive index triples with entries in -2..2 number 124 − 26 = 98, i.e.
        # 49 up to sign; under mmm the 26 − 7 = 19 triples with entries in 0..2 stand for all.
        ("-1", 49),
        ("mmm", 19),
    ],
)
def test_default_low_index_families_counted_by_hand(laue, count):
    assert len(default_families(laue)) == count


@pytest.mark.parametrize("setting", SETTINGS)
@pytest.mark.parametrize("laue", sorted(LAUE_CRYSTAL_SYSTEMS))
def test_default_families_are_distinct_and_cover_every_low_index_plane(laue, setting):
    system = LAUE_CRYSTAL_SYSTEMS[laue]
    params, _ = CELLS[system]
    lat = Lattice.from_parameters(*params, setting=setting, laue=laue)
    phase = Phase(1, "p", laue, lat, default_families(laue))
    planes = phase.candidate_planes()  # raises if two families shared a plane
    if system not in ("cubic", "hexagonal"):
        three = {parse_indices(m).three_index for m in planes.member}
        # Every primitive triple with |index| <= 2 (and |i| <= 2 on hexagonal axes) is a member.
        for h in range(-2, 3):
            for k in range(-2, 3):
                for l_ in range(-2, 3):
                    if not (h or k or l_) or math.gcd(h, k, l_) != 1:
                        continue
                    if system == "trigonal" and abs(h + k) > 2:
                        continue
                    assert (h, k, l_) in three or (-h, -k, -l_) in three


def test_default_families_refuse_bad_options():
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of"):
        default_families("hexagonal")
    with pytest.raises(ValueError, match=r"Expected `laue` to be one of"):
        default_families(None)


# ---------------------------------------------------------------- Phase


def test_phase_from_dict_with_defaults():
    cu = Phase.from_dict({"id": 1, "name": "copper", "laue": "m-3m", "lattice": CU_CELL})
    assert cu.families == ("{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}")
    planes = cu.candidate_planes()
    assert len(planes) == 4 + 3 + 6 + 12
    assert planes.family.count("{1 1 2}") == 12
    assert_allclose(np.linalg.norm(planes.normal_crystal, axis=1), 1.0, rtol=1e-12, atol=0)
    assert cu.normals_crystal.shape == (25, 3)
    with pytest.raises(ValueError, match="read-only"):
        planes.normal_crystal[0, 0] = 0.0


def test_phase_from_dict_hexagonal():
    ti = Phase.from_dict(
        {
            "id": 2,
            "name": "alpha-Ti",
            "laue": "6/mmm",
            "lattice": TI_CELL,
            "setting": "x_parallel_a_star",
        }
    )
    assert ti.lattice.setting == "x_parallel_a_star"
    planes = ti.candidate_planes()
    assert len(planes) == 1 + 3 + 3 + 6 + 6 + 6
    assert planes.member[0] == "(0 0 0 1)"
    assert all(len(i) == 4 for i in planes.indices)


def test_phase_single_plane_is_not_expanded_and_labels_are_normalised():
    cu = Phase.from_dict(
        {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": CU_CELL, "families": ["(111)", "{110}"]}
    )
    assert cu.families == ("(1 1 1)", "{1 1 0}")
    assert len(cu.candidate_planes()) == 1 + 6


def _bad(entry_changes, drop=()):
    entry = {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": dict(CU_CELL)}
    entry.update(entry_changes)
    for key in drop:
        del entry[key]
    return entry


@pytest.mark.parametrize(
    ("entry", "pointer", "match"),
    [
        ([], "/phases/3", r"Expected a phase entry to be an object, got list"),
        (_bad({"colour": "red"}), "/phases/3", r"unknown \['colour'\]"),
        (_bad({}, drop=["laue"]), "/phases/3", r"to have the key 'laue'"),
        (_bad({"id": 0}), "/phases/3/id", r"Expected `id` to be an integer >= 1, got 0"),
        (_bad({"id": True}), "/phases/3/id", r"Expected `id` to be an integer >= 1, got True"),
        (_bad({"name": ""}), "/phases/3/name", r"Expected `name` to be a non-empty string"),
        (
            _bad({"laue": "Fm-3m"}),
            "/phases/3/laue",
            r"one of \('-1', '2/m', 'mmm'.*'m-3m'\), got 'Fm-3m'",
        ),
        (_bad({"lattice": [3.6]}), "/phases/3/lattice", r"Expected `lattice` to be an object"),
        (_bad({"lattice": {"a": 3.6}}), "/phases/3/lattice", r"exactly the keys \('a', 'b', 'c'"),
        (
            _bad({"lattice": dict(CU_CELL, b="3.6")}),
            "/phases/3/lattice/b",
            r"Expected `b` to be a number",
        ),
        (_bad({"setting": "x_a"}), "/phases/3/setting", r"Expected `setting` to be one of"),
        (_bad({"lattice": dict(CU_CELL, a=-1)}), "/phases/3/lattice", r"finite length > 0"),
        (_bad({"lattice": dict(CU_CELL, a=3.7)}), "/phases/3/lattice", r"cubic phase"),
        (
            _bad({"laue": "6/mmm", "lattice": TI_CELL}),
            "/phases/3/setting",
            r"30° for every hexagonal",
        ),
        (
            _bad({"laue": "6/mmm", "lattice": dict(TI_CELL, gamma=250)}),
            "/phases/3/lattice",
            r"strictly between",
        ),
        (_bad({"families": "{111}"}), "/phases/3/families", r"non-empty list of strings"),
        (_bad({"families": []}), "/phases/3/families", r"non-empty list of strings"),
        (_bad({"families": ["{111}", "{11}"]}), "/phases/3/families/1", r"3 or 4 integer indices"),
        (_bad({"families": [111]}), "/phases/3/families/0", r"Expected `text` to be a string"),
        (_bad({"families": ["<110>"]}), "/phases/3/families/0", r"got the direction '<110>'"),
        (
            _bad({"families": ["{10-12}"]}),
            "/phases/3/families/0",
            r"three-index planes for a cubic phase",
        ),
        (
            _bad({"families": ["{111}", "{1 1 1}"]}),
            "/phases/3/families/1",
            r"each family once.*/families/0",
        ),
        (_bad({"families": ["{111}", "{222}"]}), "/phases/3/families", r"which are the same plane"),
    ],
)
def test_phase_from_dict_refuses_bad_fields(entry, pointer, match):
    with pytest.raises(InputError, match=match) as info:
        Phase.from_dict(entry, path="job.json", pointer="/phases/3")
    assert info.value.pointer == pointer
    assert info.value.path == "job.json"
    assert str(info.value).startswith(f"job.json: {pointer}: ")


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"id": "1"}, SettingError, r"Expected `id` to be an integer, got str"),
        ({"id": 0}, ValueError, r"Expected `id` to be an integer >= 1 \(0 marks non-indexed"),
        ({"name": " "}, ValueError, r"Expected `name` to be a non-empty string"),
        ({"laue": "cubic"}, ValueError, r"Expected `laue` to be one of"),
        ({"lattice": CU_CELL}, SettingError, r"Expected `lattice` to be a Lattice, got dict"),
        (
            {"lattice": Lattice.from_parameters(3, 3, 3, 90, 90, 90, laue="m-3")},
            ValueError,
            r"Expected the lattice's Laue class to be 'm-3m', got 'm-3'",
        ),
        ({"laue": "6/mmm"}, ValueError, r"hexagonal phase"),
        (
            {"families": "{111}"},
            SettingError,
            r"Expected `families` to be a tuple of strings, got str",
        ),
        ({"families": ()}, ValueError, r"at least one plane family"),
        ({"families": ("{111}", "{1 1 1}")}, ValueError, r"each family once in `families`"),
        ({"families": ("[111]",)}, ValueError, r"got the direction"),
    ],
)
def test_phase_constructor_refuses_bad_values(kwargs, error, match):
    args = {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": CU, "families": ("{111}",)}
    args.update(kwargs)
    with pytest.raises(error, match=match):
        Phase(**args)


def test_candidate_planes_refuse_families_sharing_a_plane():
    phase = Phase(1, "Cu", "m-3m", CU, ("{1 0 0}", "(0 0 2)"))
    with pytest.raises(
        ValueError,
        match=r"got \(0 0 1\) of \{1 0 0\} and \(0 0 2\) of \(0 0 2\), which are the same plane",
    ):
        phase.candidate_planes()


def test_inputs_are_not_modified_by_from_dict():
    entry = {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": dict(CU_CELL), "families": ["{111}"]}
    before = repr(entry)
    Phase.from_dict(entry)
    assert repr(entry) == before


@pytest.mark.parametrize("n", [1, 2, 3])
def test_low_indices_are_every_primitive_triple_once(n):
    # Brute force with math.gcd over the cube [-n, n]³ (an independent enumeration).
    every = {
        t for t in itertools.product(range(-n, n + 1), repeat=3) if any(t) and math.gcd(*t) == 1
    }
    directions = low_indices(n, kind="direction")
    assert {tuple(r) for r in directions.tolist()} == every and len(directions) == len(every)
    planes = {tuple(r) for r in low_indices(n).tolist()}
    # n and -n are one plane: exactly one of each pair is listed.
    assert all((t in planes) != (tuple(-x for x in t) in planes) for t in every)
    size = np.abs(directions)
    key = size.max(axis=1) * 100 + size.sum(axis=1)
    assert np.all(np.diff(key) >= 0), "low indices come first"
    with pytest.raises(SettingError, match=r"Expected `max_index` to be an integer >= 1"):
        low_indices(0)


def test_phases_is_an_immutable_mapping_by_id():
    cu = Phase.from_dict({"id": 3, "name": "Cu", "laue": "m-3m", "lattice": CU_CELL})
    ti = Phase.from_dict(
        {
            "id": 1,
            "name": "Ti",
            "laue": "6/mmm",
            "setting": "x_parallel_a_star",
            "lattice": {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120},
        }
    )
    phases = Phases([cu, ti])
    assert list(phases) == [3, 1] and phases.ids == (3, 1) and phases[1] is ti
    assert Phases.from_records({3: cu, 1: ti}) == phases
    assert Phases.from_records(phases) is phases
    assert (cu.setting, ti.setting) == ("x_parallel_a", "x_parallel_a_star")
    with pytest.raises(AttributeError):
        phases.extra = 1
    with pytest.raises(SettingError, match="Expected distinct phase ids, got 3 twice"):
        Phases([cu, cu])
    with pytest.raises(SettingError, match="Expected `phases` to hold at least one Phase"):
        Phases([])
    with pytest.raises(SettingError, match="Expected each key of `phases` to be its phase's id"):
        Phases.from_records({2: cu})
    with pytest.raises(InputError, match=r"/phases/1/id: Expected distinct phase ids"):
        Phases.from_dicts([{"id": 3, "name": "a", "laue": "m-3m", "lattice": CU_CELL}] * 2)
