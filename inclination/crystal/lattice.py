"""Crystal lattices, Miller and Miller–Bravais indices, plane families and phases.

Implements conventions §4. A :class:`Lattice` holds the cell (a, b, c in
ångström, α, β, γ in degrees) and the Cartesian setting that ties it to the
crystal frame C:

- ``"x_parallel_a"``: X_C ∥ a, Z_C ∥ c*, Y_C = Z_C × X_C;
- ``"x_parallel_a_star"``: X_C ∥ a*, Z_C ∥ c, Y_C = Z_C × X_C.

The plane (hkl) has the unit normal of h·a* + k·b* + l·c* (reciprocal vectors
without the factor 2π); the direction [uvw] is u·a + v·b + w·c. Four-index
Miller–Bravais planes (hkil) drop i; directions [UVTW] become
[U − T, V − T, W].

A :class:`Phase` is one entry of a job file: an id, a name, a Laue class, a
lattice and the plane families whose members are the candidate boundary planes.
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from .._validation import as_float_array, check_finite, check_one_of
from ..errors import InputError
from .rotations import quat_as_matrix
from .symmetry import LAUE_CLASSES, SETTINGS, proper_rotations

__all__ = [
    "SETTINGS",
    "LAUE_CRYSTAL_SYSTEMS",
    "Lattice",
    "Indices",
    "parse_indices",
    "format_indices",
    "format_indices_latex",
    "plane_normals_crystal",
    "direction_crystal",
    "expand_family",
    "interplanar_angle_deg",
    "d_spacing",
    "default_families",
    "CandidatePlanes",
    "Phase",
]

# The crystal system each Laue class belongs to (conventions §4); read-only.
LAUE_CRYSTAL_SYSTEMS = MappingProxyType(
    {
        "-1": "triclinic",
        "2/m": "monoclinic",
        "mmm": "orthorhombic",
        "4/m": "tetragonal",
        "4/mmm": "tetragonal",
        "-3": "trigonal",
        "-3m": "trigonal",
        "6/m": "hexagonal",
        "6/mmm": "hexagonal",
        "m-3": "cubic",
        "m-3m": "cubic",
    }
)
_LAUE = LAUE_CLASSES

# In these systems the two Cartesian settings differ, so the setting must be stated.
_SETTING_REQUIRED = ("hexagonal", "trigonal", "monoclinic", "triclinic")
# Four-index (Miller–Bravais) notation belongs to cells on hexagonal axes only.
_BRAVAIS_SYSTEMS = ("hexagonal", "trigonal")

# Equal lengths and special angles are typed as the same numbers (3.615 three times,
# 90, 120), so they are recognised to rounding error only: a near miss such as
# γ = 119.99° is refused for a hexagonal phase instead of being silently accepted,
# since the symmetry operators would then not map the cell onto itself.
_LENGTH_RTOL = 1e-9
_ANGLE_TOL_DEG = 1e-9
# A cell whose volume is below this fraction of abc is flat for every practical purpose.
_MIN_VOLUME_FRACTION = 1e-6
# Rotated indices further than this from integers mean the rotations are not
# symmetries of the lattice (wrong Laue class or wrong setting).
_INTEGER_TOL = 1e-6


# --------------------------------------------------------------------------- cells


def _is_close_length(x: float, y: float) -> bool:
    return abs(x - y) <= _LENGTH_RTOL * max(abs(x), abs(y))


def _is_angle(x: float, target: float) -> bool:
    return abs(x - target) <= _ANGLE_TOL_DEG


def _cos_deg(angle_deg: float) -> float:
    value = math.cos(math.radians(angle_deg))
    # cos(90°) comes out as 6e-17; an exact zero keeps cubic matrices exactly diagonal.
    return 0.0 if abs(value) < 1e-15 else value


def _system_from_parameters(a, b, c, alpha, beta, gamma) -> str:
    right = [_is_angle(x, 90.0) for x in (alpha, beta, gamma)]
    if all(right):
        if _is_close_length(a, b) and _is_close_length(b, c):
            return "cubic"
        if _is_close_length(a, b):
            return "tetragonal"
        return "orthorhombic"
    if right[0] and right[1] and _is_angle(gamma, 120.0) and _is_close_length(a, b):
        return "hexagonal"
    if (
        _is_close_length(a, b)
        and _is_close_length(b, c)
        and _is_angle(alpha, beta)
        and _is_angle(beta, gamma)
    ):
        return "trigonal"
    if sum(right) == 2:
        return "monoclinic"
    return "triclinic"


def _check_cell_fits_laue(laue, a, b, c, alpha, beta, gamma) -> None:
    system = LAUE_CRYSTAL_SYSTEMS[laue]
    right = [_is_angle(x, 90.0) for x in (alpha, beta, gamma)]
    got = f"got a={a}, b={b}, c={c}, α={alpha}°, β={beta}°, γ={gamma}°"
    if system == "cubic":
        ok = all(right) and _is_close_length(a, b) and _is_close_length(b, c)
        need = "a = b = c and α = β = γ = 90°"
    elif system == "tetragonal":
        ok = all(right) and _is_close_length(a, b)
        need = "a = b and α = β = γ = 90°"
    elif system == "orthorhombic":
        ok, need = all(right), "α = β = γ = 90°"
    elif system in _BRAVAIS_SYSTEMS:
        # Symmetry operators are written for hexagonal axes (3- or 6-fold along c);
        # a rhombohedral cell must be converted to hexagonal axes first.
        ok = right[0] and right[1] and _is_angle(gamma, 120.0) and _is_close_length(a, b)
        need = "hexagonal axes: a = b, α = β = 90° and γ = 120°"
    elif system == "monoclinic":
        # The 2-fold axis is b (the unique-axis-b choice of the trade).
        ok, need = right[0] and right[2], "the unique axis b: α = γ = 90°"
    else:
        ok, need = True, ""
    if not ok:
        raise ValueError(
            f"Expected the cell of a {system} phase (Laue class {laue!r}) to have {need}, {got}."
        )


def _setting_message(system: str, angle_deg: float) -> str:
    return (
        f"Expected `setting` to be one of {SETTINGS} for a {system} cell, got None. "
        f"The two Cartesian settings put X_C along a or along a*, which are "
        f"{angle_deg:.1f}° apart in this cell (30° for every hexagonal cell): "
        f"a wrong guess turns every predicted trace and dip direction by that much "
        f"(conventions §4), so the setting has to be stated."
    )


def _structure_x_parallel_a(a, b, c, alpha, beta, gamma) -> np.ndarray:
    ca, cb, cg = _cos_deg(alpha), _cos_deg(beta), _cos_deg(gamma)
    sg = math.sin(math.radians(gamma))
    root = math.sqrt(1.0 - ca * ca - cb * cb - cg * cg + 2.0 * ca * cb * cg)
    # Columns a, b, c: a along X, b in the X–Y plane, so c* lies along Z.
    return np.array(
        [
            [a, b * cg, c * cb],
            [0.0, b * sg, c * (ca - cb * cg) / sg],
            [0.0, 0.0, c * root / sg],
        ]
    )


@dataclass(frozen=True)
class Lattice:
    """A crystal cell tied to the crystal Cartesian frame C (conventions §4).

    Build it with :meth:`from_parameters`; direct construction runs the same
    checks. Lengths in ångström, angles in degrees.

    Attributes
    ----------
    a, b, c : float
        Cell edge lengths (Å), > 0.
    alpha_deg, beta_deg, gamma_deg : float
        Cell angles (degrees), each in (0, 180).
    setting : str
        ``"x_parallel_a"`` or ``"x_parallel_a_star"``. Required for hexagonal,
        trigonal, monoclinic and triclinic cells; for orthogonal cells, where
        the two coincide, an omitted setting is recorded as ``"x_parallel_a"``.
    laue : str or None
        Laue class, when known; the cell must then fit its crystal system.

    Examples
    --------
    >>> ti = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a")
    >>> ti.crystal_system
    'hexagonal'
    >>> ti.structure_matrix.round(6).tolist()
    [[2.951, -1.4755, 0.0], [0.0, 2.555641, 0.0], [0.0, 0.0, 4.684]]
    """

    a: float
    b: float
    c: float
    alpha_deg: float
    beta_deg: float
    gamma_deg: float
    setting: str | None = None
    laue: str | None = None

    def __post_init__(self):
        lengths = {"a": self.a, "b": self.b, "c": self.c}
        angles = {"alpha_deg": self.alpha_deg, "beta_deg": self.beta_deg}
        angles["gamma_deg"] = self.gamma_deg
        for name, value in {**lengths, **angles}.items():
            if isinstance(value, bool) or not isinstance(value, int | float | np.number):
                raise TypeError(f"Expected `{name}` to be a number, got {type(value).__name__}.")
            object.__setattr__(self, name, float(value))
        for name, value in lengths.items():
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"Expected `{name}` to be a finite length > 0 Å, got {value!r}.")
        for name, value in angles.items():
            if not (math.isfinite(value) and 0.0 < value < 180.0):
                raise ValueError(
                    f"Expected `{name}` to lie strictly between 0° and 180°, got {value!r}."
                )
        alpha, beta, gamma = self.alpha_deg, self.beta_deg, self.gamma_deg
        if alpha + beta + gamma >= 360.0:
            raise ValueError(
                "Expected the cell angles to sum to less than 360°, "
                f"got α + β + γ = {alpha + beta + gamma}°: no cell has such angles."
            )
        ca, cb, cg = _cos_deg(alpha), _cos_deg(beta), _cos_deg(gamma)
        triple = 1.0 - ca * ca - cb * cb - cg * cg + 2.0 * ca * cb * cg
        if triple <= _MIN_VOLUME_FRACTION**2:
            raise ValueError(
                "Expected the cell angles to satisfy "
                "1 - cos²α - cos²β - cos²γ + 2 cosα cosβ cosγ > 0 (each angle smaller than "
                f"the sum of the other two), got {triple:.3g} for α={alpha}°, β={beta}°, "
                f"γ={gamma}°: the cell has no volume."
            )
        if self.laue is not None:
            check_one_of(self.laue, "laue", _LAUE)
            _check_cell_fits_laue(self.laue, self.a, self.b, self.c, alpha, beta, gamma)
        if self.setting is not None:
            check_one_of(self.setting, "setting", SETTINGS)
        elif self.crystal_system in _SETTING_REQUIRED:
            raise ValueError(_setting_message(self.crystal_system, self._a_to_a_star_deg()))
        else:
            object.__setattr__(self, "setting", "x_parallel_a")

    @classmethod
    def from_parameters(
        cls, a, b, c, alpha_deg, beta_deg, gamma_deg, *, setting=None, laue=None
    ) -> Lattice:
        """Build a lattice from cell parameters (Å, degrees).

        Parameters
        ----------
        a, b, c : float
            Edge lengths in ångström.
        alpha_deg, beta_deg, gamma_deg : float
            Angles in degrees.
        setting : {"x_parallel_a", "x_parallel_a_star"}, optional
            Required unless the cell is orthogonal (cubic, tetragonal, orthorhombic).
        laue : str, optional
            One of the 11 Laue classes; fixes the crystal system and is checked
            against the cell.

        Raises
        ------
        ValueError
            For a cell that cannot exist, a cell that does not fit ``laue``, or a
            missing setting where the two settings differ.

        Examples
        --------
        >>> cu = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90, laue="m-3m")
        >>> cu.crystal_system, cu.setting
        ('cubic', 'x_parallel_a')
        """
        return cls(a, b, c, alpha_deg, beta_deg, gamma_deg, setting=setting, laue=laue)

    def _a_to_a_star_deg(self) -> float:
        a0 = _structure_x_parallel_a(*self.parameters)
        a_star = np.linalg.inv(a0).T[:, 0]
        cos = a0[:, 0] @ a_star / (np.linalg.norm(a0[:, 0]) * np.linalg.norm(a_star))
        return math.degrees(math.acos(min(1.0, cos)))

    @property
    def parameters(self) -> tuple[float, float, float, float, float, float]:
        """(a, b, c, α, β, γ) in ångström and degrees."""
        return (self.a, self.b, self.c, self.alpha_deg, self.beta_deg, self.gamma_deg)

    @property
    def crystal_system(self) -> str:
        """The crystal system: from the Laue class when given, else from the parameters.

        A cell on hexagonal axes without a Laue class reads as ``"hexagonal"``;
        one with a = b = c and α = β = γ ≠ 90° as ``"trigonal"``.

        Examples
        --------
        >>> Lattice.from_parameters(3, 4, 5, 90, 100, 90, setting="x_parallel_a").crystal_system
        'monoclinic'
        """
        if self.laue is not None:
            return LAUE_CRYSTAL_SYSTEMS[self.laue]
        return _system_from_parameters(*self.parameters)

    @property
    def structure_matrix(self) -> np.ndarray:
        """(3, 3) matrix whose columns are a, b, c written in C (Å).

        ``x_crystal = structure_matrix @ [u, v, w]`` is the direction [uvw].

        Examples
        --------
        >>> lat = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120,
        ...                               setting="x_parallel_a_star")
        >>> lat.structure_matrix.round(6).tolist()
        [[2.555641, 0.0, 0.0], [-1.4755, 2.951, 0.0], [0.0, 0.0, 4.684]]
        """
        a0 = _structure_x_parallel_a(*self.parameters)
        if self.setting == "x_parallel_a":
            return a0
        a_star = np.linalg.inv(a0).T[:, 0]
        e_z = a0[:, 2] / np.linalg.norm(a0[:, 2])
        e_x = a_star / np.linalg.norm(a_star)
        rows = np.stack([e_x, np.cross(e_z, e_x), e_z])
        out = rows @ a0
        # Products of exact zeros leave -0.0 and 1e-17 residues; b·a* = 0 exactly by construction.
        out[0, 1:] = 0.0
        return out + 0.0

    @property
    def reciprocal_matrix(self) -> np.ndarray:
        """(3, 3) matrix whose columns are a*, b*, c* in C (1/Å, no factor 2π).

        ``structure_matrix.T @ reciprocal_matrix`` is the identity.

        Examples
        --------
        >>> Lattice.from_parameters(2, 2, 2, 90, 90, 90).reciprocal_matrix.round(6).tolist()
        [[0.5, 0.0, 0.0], [0.0, 0.5, 0.0], [0.0, 0.0, 0.5]]
        """
        return np.linalg.inv(self.structure_matrix).T + 0.0

    @property
    def metric_tensor(self) -> np.ndarray:
        """(3, 3) metric tensor G with G_ij = a_i · a_j (Å²).

        Examples
        --------
        >>> lat = Lattice.from_parameters(1, 1, 2, 90, 90, 120, setting="x_parallel_a")
        >>> lat.metric_tensor.round(6).tolist()
        [[1.0, -0.5, 0.0], [-0.5, 1.0, 0.0], [0.0, 0.0, 4.0]]
        """
        m = self.structure_matrix
        return m.T @ m

    @property
    def volume(self) -> float:
        """Cell volume in Å³.

        Examples
        --------
        >>> round(Lattice.from_parameters(2, 3, 4, 90, 90, 90).volume, 6)
        24.0
        """
        return float(np.linalg.det(self.structure_matrix))


# --------------------------------------------------------------------------- indices

_BRACKETS = {"(": (")", "plane", False), "{": ("}", "plane", True)}
_BRACKETS |= {"[": ("]", "direction", False), "<": (">", "direction", True)}
_KINDS = ("plane", "direction")
_INTEGER_TOKEN = re.compile(r"[+-]?\d+")
_COMPACT = re.compile(r"(?:-?\d)+")


@dataclass(frozen=True)
class Indices:
    """Parsed Miller or Miller–Bravais indices.

    Attributes
    ----------
    kind : {"plane", "direction"}
    family : bool
        True for ``{hkl}`` and ``<uvw>`` (all symmetric equivalents).
    values : tuple of int
        Three indices, or four (Miller–Bravais).

    Examples
    --------
    >>> idx = parse_indices("{10-12}")
    >>> idx.kind, idx.family, idx.values, idx.bravais, str(idx)
    ('plane', True, (1, 0, -1, 2), True, '{1 0 -1 2}')
    """

    kind: str
    family: bool
    values: tuple[int, ...]

    def __post_init__(self):
        check_one_of(self.kind, "kind", _KINDS)
        object.__setattr__(self, "family", bool(self.family))
        values = _integer_tuple(self.values, "values")
        if not any(values):
            raise ValueError(f"Expected `values` to be not all zero, got {values}.")
        _check_bravais(values, self.kind, values)
        object.__setattr__(self, "values", values)

    @property
    def bravais(self) -> bool:
        """True for four-index (Miller–Bravais) notation."""
        return len(self.values) == 4

    @property
    def three_index(self) -> tuple[int, int, int]:
        """The same plane or direction in three-index form (hkil → hkl, UVTW → uvw).

        Examples
        --------
        >>> parse_indices("[2 -1 -1 0]").three_index
        (3, 0, 0)
        """
        v = self.values
        if len(v) == 3:
            return v
        if self.kind == "plane":
            return (v[0], v[1], v[3])
        return (v[0] - v[2], v[1] - v[2], v[3])

    def __str__(self) -> str:
        return format_indices(self.values, self.kind, family=self.family)


def _check_bravais(values, kind: str, text) -> None:
    if len(values) != 4:
        return
    if kind == "plane" and values[2] != -(values[0] + values[1]):
        raise ValueError(
            f"Expected a four-index plane (h k i l) with i = -(h + k), got {text!r} "
            f"(i = {values[2]}, -(h + k) = {-(values[0] + values[1])})."
        )
    if kind == "direction" and values[2] != -(values[0] + values[1]):
        raise ValueError(
            f"Expected a four-index direction [U V T W] with T = -(U + V), got {text!r} "
            f"(T = {values[2]}, -(U + V) = {-(values[0] + values[1])})."
        )


def parse_indices(text) -> Indices:
    """Parse an index string such as ``{1 1 1}``, ``(1 -1 0)``, ``<1 1 -2 0>``, ``{10-12}``.

    Brackets give the kind: ``( )`` a plane, ``{ }`` a family of planes,
    ``[ ]`` a direction, ``< >`` a family of directions. Indices are integers
    separated by spaces or commas, or written together as single digits with
    minus signs (``10-12`` is 1, 0, -1, 2). The minus sign may be "-" or "−".
    Three indices, or four for Miller–Bravais notation, where the third must be
    minus the sum of the first two.

    Parameters
    ----------
    text : str

    Returns
    -------
    Indices

    Raises
    ------
    TypeError
        If ``text`` is not a string.
    ValueError
        For empty text, unknown or mismatched brackets, non-integers, a count
        other than 3 or 4, all-zero indices, or an inconsistent fourth index.

    Examples
    --------
    >>> parse_indices("(1 -1 0)")
    Indices(kind='plane', family=False, values=(1, -1, 0))
    >>> parse_indices("<1 1 -2 0>").values
    (1, 1, -2, 0)
    """
    if not isinstance(text, str):
        raise TypeError(f"Expected `text` to be a string, got {type(text).__name__}.")
    s = text.strip().replace("\u2212", "-")
    if len(s) < 2 or s[0] not in _BRACKETS:
        raise ValueError(
            "Expected `text` to be indices in (), {}, [] or <>, such as '{1 1 1}', "
            f"got {text!r}."
        )
    closing, kind, family = _BRACKETS[s[0]]
    if s[-1] != closing:
        raise ValueError(
            f"Expected `text` opened with {s[0]!r} to close with {closing!r}, got {text!r}."
        )
    inner = s[1:-1].strip()
    if not inner:
        raise ValueError(f"Expected `text` to hold 3 or 4 integer indices, got {text!r}.")
    if re.search(r"[\s,]", inner):
        tokens = [t for t in re.split(r"[\s,]+", inner) if t]
        if not all(_INTEGER_TOKEN.fullmatch(t) for t in tokens):
            raise ValueError(f"Expected `text` to hold only integer indices, got {text!r}.")
        values = tuple(int(t) for t in tokens)
    elif _COMPACT.fullmatch(inner):
        values = tuple(int(t) for t in re.findall(r"-?\d", inner))
    else:
        raise ValueError(f"Expected `text` to hold only integer indices, got {text!r}.")
    if len(values) not in (3, 4):
        raise ValueError(
            f"Expected `text` to hold 3 or 4 integer indices, got {len(values)} in {text!r}."
        )
    if not any(values):
        raise ValueError(f"Expected `text` to hold indices that are not all zero, got {text!r}.")
    _check_bravais(values, kind, text)
    return Indices(kind=kind, family=family, values=values)


def _integer_tuple(values, name: str) -> tuple[int, ...]:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] not in (3, 4):
        raise ValueError(f"Expected `{name}` to have shape (3,) or (4,), got {arr.shape}.")
    if not np.issubdtype(arr.dtype, np.number) or np.any(arr != np.round(arr)):
        raise ValueError(f"Expected `{name}` to hold integers, got {arr.tolist()}.")
    return tuple(int(v) for v in arr)


def format_indices(values, kind: str, *, family: bool = False) -> str:
    """Write indices as the tables do: ``(1 1 -1)``, ``{1 1 1}``, ``[1 1 0]``, ``<1 1 -2 0>``.

    Parameters
    ----------
    values : sequence of int, length 3 or 4
    kind : {"plane", "direction"}
    family : bool, default False

    Returns
    -------
    str

    Examples
    --------
    >>> format_indices((1, 1, -1), "plane")
    '(1 1 -1)'
    >>> format_indices([1, 1, -2, 0], "direction", family=True)
    '<1 1 -2 0>'
    """
    v = _integer_tuple(values, "values")
    check_one_of(kind, "kind", _KINDS)
    opening, closing = {
        ("plane", False): "()",
        ("plane", True): "{}",
        ("direction", False): "[]",
        ("direction", True): "<>",
    }[(kind, bool(family))]
    return opening + " ".join(str(x) for x in v) + closing


def format_indices_latex(values, kind: str, *, family: bool = False) -> str:
    """Write indices for LaTeX, negatives with overbars: ``$(11\\bar{1})$``.

    Indices run together as the trade prints them; when any index has two or
    more digits they are separated by thin spaces so they stay readable.

    Parameters
    ----------
    values : sequence of int, length 3 or 4
    kind : {"plane", "direction"}
    family : bool, default False

    Returns
    -------
    str
        Inline math, including the ``$`` delimiters.

    Examples
    --------
    >>> print(format_indices_latex((1, 0, -1, 2), "plane", family=True))
    $\\{10\\bar{1}2\\}$
    >>> print(format_indices_latex((1, 1, 0), "direction", family=True))
    $\\langle 110\\rangle$
    >>> print(format_indices_latex((12, -1, 0), "plane"))
    $(12\\,\\bar{1}\\,0)$
    """
    v = _integer_tuple(values, "values")
    check_one_of(kind, "kind", _KINDS)
    parts = [rf"\bar{{{-x}}}" if x < 0 else str(x) for x in v]
    sep = r"\," if any(abs(x) > 9 for x in v) else ""
    body = sep.join(parts)
    opening, closing = {
        ("plane", False): ("(", ")"),
        ("plane", True): (r"\{", r"\}"),
        ("direction", False): ("[", "]"),
        ("direction", True): (r"\langle ", r"\rangle"),
    }[(kind, bool(family))]
    return f"${opening}{body}{closing}$"


# --------------------------------------------------------------------------- vectors


def _index_array(values, name: str, kind: str) -> np.ndarray:
    """(..., 3) three-index float array from (..., 3) or (..., 4) input."""
    if isinstance(values, Indices):
        values = values.values
    if isinstance(values, str):
        raise TypeError(
            f"Expected `{name}` to be an array of indices or an Indices, got the string "
            f"{values!r}: read it with parse_indices first."
        )
    arr = as_float_array(values, name)
    if arr.ndim == 0 or arr.shape[-1] not in (3, 4):
        raise ValueError(f"Expected `{name}` to have shape (..., 3) or (..., 4), got {arr.shape}.")
    check_finite(arr, name)
    if arr.shape[-1] == 4:
        third = -(arr[..., 0] + arr[..., 1])
        if not np.allclose(arr[..., 2], third, rtol=0, atol=1e-9):
            bad = np.argwhere(~np.isclose(arr[..., 2], third, rtol=0, atol=1e-9))[0]
            letter = "i = -(h + k)" if kind == "plane" else "T = -(U + V)"
            raise ValueError(
                f"Expected `{name}` in four-index form to have {letter}, "
                f"got {arr[tuple(bad)].tolist()} at index {tuple(int(i) for i in bad)}."
            )
        if kind == "plane":
            arr = arr[..., [0, 1, 3]]
        else:
            arr = np.stack(
                [arr[..., 0] - arr[..., 2], arr[..., 1] - arr[..., 2], arr[..., 3]], axis=-1
            )
    zero = np.all(arr == 0, axis=-1)
    if np.any(zero):
        where = "" if arr.ndim == 1 else f" at index {tuple(int(i) for i in np.argwhere(zero)[0])}"
        raise ValueError(f"Expected `{name}` to be non-zero, got all-zero indices{where}.")
    return arr


def _check_lattice(lattice) -> None:
    if not isinstance(lattice, Lattice):
        raise TypeError(f"Expected `lattice` to be a Lattice, got {type(lattice).__name__}.")


def _normalise(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def plane_normals_crystal(lattice: Lattice, hkl) -> np.ndarray:
    """Unit normals in C of planes (hkl) or (hkil) (conventions §4).

    Parameters
    ----------
    lattice : Lattice
    hkl : array_like, shape (..., 3) or (..., 4), or Indices
        Miller indices, or Miller–Bravais indices with i = -(h + k).

    Returns
    -------
    ndarray, shape (..., 3)
        h·a* + k·b* + l·c*, normalised, in the crystal frame C.

    Examples
    --------
    >>> ti = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a")
    >>> plane_normals_crystal(ti, [[0, 0, 0, 1], [1, 0, -1, 0]]).round(6).tolist()
    [[0.0, 0.0, 1.0], [0.866025, 0.5, 0.0]]
    """
    _check_lattice(lattice)
    h = _index_array(hkl, "hkl", "plane")
    return _normalise(h @ lattice.reciprocal_matrix.T)


def direction_crystal(lattice: Lattice, uvw) -> np.ndarray:
    """Unit vectors in C along directions [uvw] or [UVTW] (conventions §4).

    Parameters
    ----------
    lattice : Lattice
    uvw : array_like, shape (..., 3) or (..., 4), or Indices
        Three-index directions, or four-index ones with T = -(U + V), which
        become [U - T, V - T, W].

    Returns
    -------
    ndarray, shape (..., 3)
        u·a + v·b + w·c, normalised, in C.

    Examples
    --------
    >>> ti = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a")
    >>> direction_crystal(ti, [2, -1, -1, 0]).round(6).tolist()
    [1.0, 0.0, 0.0]
    """
    _check_lattice(lattice)
    u = _index_array(uvw, "uvw", "direction")
    return _normalise(u @ lattice.structure_matrix.T)


def d_spacing(lattice: Lattice, hkl) -> np.ndarray:
    """Interplanar spacing d = 1 / |h·a* + k·b* + l·c*| in ångström.

    Parameters
    ----------
    lattice : Lattice
    hkl : array_like, shape (..., 3) or (..., 4), or Indices

    Returns
    -------
    ndarray, shape (...)

    Examples
    --------
    >>> cu = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90)
    >>> d_spacing(cu, [1, 1, 1]).round(6).tolist()
    2.087121
    """
    _check_lattice(lattice)
    h = _index_array(hkl, "hkl", "plane")
    return 1.0 / np.linalg.norm(h @ lattice.reciprocal_matrix.T, axis=-1)


def interplanar_angle_deg(lattice: Lattice, hkl1, hkl2) -> np.ndarray:
    """Angle in degrees, in [0, 180], between the normals of two planes.

    The normals keep the signs of the indices; as unsigned planes the angle is
    min(θ, 180° − θ).

    Parameters
    ----------
    lattice : Lattice
    hkl1, hkl2 : array_like, shape (..., 3) or (..., 4), or Indices
        Broadcast against each other.

    Returns
    -------
    ndarray, shape (broadcast)

    Examples
    --------
    >>> cu = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90)
    >>> interplanar_angle_deg(cu, [1, 1, 1], [-1, 1, 1]).round(4).tolist()
    70.5288
    """
    _check_lattice(lattice)
    n1 = plane_normals_crystal(lattice, hkl1)
    n2 = plane_normals_crystal(lattice, hkl2)
    cos = np.clip(np.sum(n1 * n2, axis=-1), -1.0, 1.0)
    return np.degrees(np.arccos(cos))


# --------------------------------------------------------------------------- families


def _canonical_sign(rows: np.ndarray) -> np.ndarray:
    """Flip each row so that its first non-zero entry is positive (n and -n are one plane)."""
    first = np.argmax(rows != 0, axis=-1)
    sign = np.sign(rows[np.arange(len(rows)), first])
    return rows * sign[:, None]


def _to_bravais(rows: np.ndarray, kind: str) -> np.ndarray:
    """(M, 3) integer indices to (M, 4) Miller–Bravais indices (inverse of conventions §4)."""
    if kind == "plane":
        h, k, l_ = rows.T
        return np.stack([h, k, -(h + k), l_], axis=-1)
    # [uvw] = [U - T, V - T, W] with T = -(U + V) inverts to U = (2u - v)/3, V = (2v - u)/3;
    # the images of an integer [UVTW] are integer again, so the division by 3 is exact.
    u, v, w = rows.T
    big_u, big_v = 2 * u - v, 2 * v - u
    out = np.stack([big_u, big_v, -(big_u + big_v), 3 * w], axis=-1)
    return out // 3 if np.all(out % 3 == 0) else out


def _orbit(lattice: Lattice, three: np.ndarray, rotations: np.ndarray, kind: str) -> np.ndarray:
    """Distinct integer images of one three-index vector under (K, 3, 3) rotations in C."""
    a = lattice.structure_matrix
    b = lattice.reciprocal_matrix
    if kind == "plane":
        # h_i = a_i · G for the reciprocal vector G, so indices come back through aᵀ.
        images = np.einsum("ji,kjl,lm,m->ki", a, rotations, b, three)
    else:
        images = np.einsum("ji,kjl,lm,m->ki", b, rotations, a, three)
    rounded = np.round(images)
    if np.max(np.abs(images - rounded)) > _INTEGER_TOL * max(1.0, np.max(np.abs(three))):
        raise ValueError(
            f"Expected the rotations of `laue` to be symmetries of this lattice "
            f"(setting {lattice.setting!r}), but they map {three.astype(int).tolist()} onto "
            "non-integer indices: check the Laue class, the cell and the setting."
        )
    rounded = rounded.astype(np.int64)
    if kind == "plane":
        rounded = _canonical_sign(rounded)
    return np.unique(rounded, axis=0)[::-1]


def _rotation_matrices(laue: str, setting: str) -> np.ndarray:
    return quat_as_matrix(proper_rotations(laue, setting=setting))


def expand_family(lattice: Lattice, hkl, laue: str, *, setting=None, kind=None) -> np.ndarray:
    """All distinct members of a family under the proper rotations of a Laue class.

    Parameters
    ----------
    lattice : Lattice
    hkl : array_like of int, shape (3,) or (4,), or Indices
        One member of the family.
    laue : str
        One of the 11 Laue classes; its rotations must be symmetries of the lattice.
    setting : {"x_parallel_a", "x_parallel_a_star"}, optional
        The Cartesian setting of the rotations; defaults to ``lattice.setting``.
    kind : {"plane", "direction"}, optional
        Planes count n and -n once (each member has its first non-zero index
        positive); directions keep both senses. Default: the kind of ``hkl``
        when it is an :class:`Indices`, else "plane".

    Returns
    -------
    ndarray of int, shape (M, 3) or (M, 4)
        Members in the notation of ``hkl`` (three or four indices), in
        descending lexicographic order; the same set whichever member is given.

    Raises
    ------
    ValueError
        If the rotations do not map the lattice onto itself (wrong Laue class
        or setting for this cell).

    Examples
    --------
    >>> cu = Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90)
    >>> expand_family(cu, [1, 1, 1], "m-3m").tolist()
    [[1, 1, 1], [1, 1, -1], [1, -1, 1], [1, -1, -1]]
    >>> ti = Lattice.from_parameters(2.951, 2.951, 4.684, 90, 90, 120, setting="x_parallel_a")
    >>> len(expand_family(ti, [1, 0, -1, 2], "6/mmm"))
    6
    """
    _check_lattice(lattice)
    check_one_of(laue, "laue", _LAUE)
    if kind is None:
        kind = hkl.kind if isinstance(hkl, Indices) else "plane"
    check_one_of(kind, "kind", _KINDS)
    if setting is None:
        setting = lattice.setting
    check_one_of(setting, "setting", SETTINGS)
    raw = hkl.values if isinstance(hkl, Indices) else hkl
    bravais = len(_integer_tuple(raw, "hkl")) == 4
    three = _index_array(raw, "hkl", kind)
    members = _orbit(lattice, three, _rotation_matrices(laue, setting), kind)
    if not bravais:
        return members
    out = _to_bravais(members, kind)
    if kind == "plane":
        out = _canonical_sign(out)
    return out[np.lexsort(out.T[::-1])[::-1]]


_DEFAULT_CUBIC = ("{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}")
_DEFAULT_HEXAGONAL = (
    "(0 0 0 1)",
    "{1 0 -1 0}",
    "{1 1 -2 0}",
    "{1 0 -1 1}",
    "{1 0 -1 2}",
    "{1 1 -2 2}",
)
# Cells that stand for each lower crystal system when sorting index triples into
# families: any cell of the system gives the same families in index space.
_TYPICAL_CELLS = {
    "triclinic": (1.0, 1.1, 1.2, 80.0, 85.0, 95.0),
    "monoclinic": (1.0, 1.2, 1.4, 90.0, 100.0, 90.0),
    "orthorhombic": (1.0, 1.2, 1.4, 90.0, 90.0, 90.0),
    "tetragonal": (1.0, 1.0, 1.4, 90.0, 90.0, 90.0),
    "trigonal": (1.0, 1.0, 1.6, 90.0, 90.0, 120.0),
}
_MAX_DEFAULT_INDEX = 2


def default_families(laue: str) -> tuple[str, ...]:
    """The plane families a phase is searched for when its entry lists none.

    Cubic: {111}, {100}, {110}, {112}; hexagonal: (0001), {10-10}, {11-20},
    {10-11}, {10-12}, {11-22}; other Laue classes: every family of planes whose
    indices (with no common factor) are at most 2 in size, sorted from low to
    high index, four-index for trigonal classes.

    Parameters
    ----------
    laue : str
        One of the 11 Laue classes.

    Returns
    -------
    tuple of str
        Family labels in the form :func:`format_indices` writes.

    Examples
    --------
    >>> default_families("m-3m")
    ('{1 1 1}', '{1 0 0}', '{1 1 0}', '{1 1 2}')
    >>> default_families("4/mmm")[:4]
    ('{1 0 0}', '{0 0 1}', '{1 1 0}', '{1 0 1}')
    """
    check_one_of(laue, "laue", _LAUE)
    system = LAUE_CRYSTAL_SYSTEMS[laue]
    # Families in index space do not depend on the setting (the -3m 2-folds follow
    # the a-axes in both, see inclination.crystal.symmetry); one setting serves for all.
    setting = "x_parallel_a"
    if system == "cubic":
        return _DEFAULT_CUBIC
    if system == "hexagonal":
        return _DEFAULT_HEXAGONAL
    lattice = Lattice.from_parameters(*_TYPICAL_CELLS[system], setting=setting, laue=laue)
    rotations = _rotation_matrices(laue, setting)
    n = _MAX_DEFAULT_INDEX
    seen: set[tuple[int, ...]] = set()
    labels = []
    for triple in itertools.product(range(n, -n - 1, -1), repeat=3):
        v = np.array(triple)
        if not v.any() or math.gcd(*triple) != 1:
            continue
        if system == "trigonal" and abs(v[0] + v[1]) > n:
            continue
        members = _orbit(lattice, v.astype(float), rotations, "plane")
        if tuple(members[0]) in seen:
            continue
        seen.add(tuple(members[0]))
        if system == "trigonal":
            members = _canonical_sign(_to_bravais(members, "plane"))
        # A family is named by its member with the fewest minus signs, {1 1 -2 0} rather
        # than {2 -1 -1 0} (common practice).
        label = max(members.tolist(), key=lambda m: (-sum(x < 0 for x in m), m))
        labels.append(label)
    labels.sort(key=lambda m: (max(map(abs, m)), sum(map(abs, m)), [-x for x in m]))
    return tuple(format_indices(m, "plane", family=True) for m in labels)


# --------------------------------------------------------------------------- phases


@dataclass(frozen=True, eq=False)
class CandidatePlanes:
    """Every candidate plane of a phase: one row per member, n and -n once.

    Attributes
    ----------
    family : tuple of str, length M
        Family label of each member, as listed in the phase (``'{1 1 1}'``).
    member : tuple of str, length M
        The member's own label (``'(1 1 -1)'``).
    indices : tuple of tuple of int, length M
        The member's indices, three or four as in its family label.
    normal_crystal : ndarray, shape (M, 3)
        Unit plane normals in C (read-only).

    Examples
    --------
    >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
    >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": cell,
    ...                       "families": ["{100}"]})
    >>> planes = cu.candidate_planes()
    >>> len(planes), planes.family[0], planes.indices
    (3, '{1 0 0}', ((1, 0, 0), (0, 1, 0), (0, 0, 1)))
    >>> planes.normal_crystal.round(6).tolist()
    [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
    """

    family: tuple[str, ...]
    member: tuple[str, ...]
    indices: tuple[tuple[int, ...], ...]
    normal_crystal: np.ndarray = field(repr=False)

    def __len__(self) -> int:
        return len(self.family)


def _check_family_text(text, system: str) -> str:
    """Parse one family label for a phase; return it in the tables' form."""
    idx = parse_indices(text)
    if idx.kind != "plane":
        raise ValueError(
            f"Expected a plane family such as '{{1 1 1}}' or a plane such as '(0 0 0 1)', "
            f"got the direction {text!r}."
        )
    if idx.bravais and system not in _BRAVAIS_SYSTEMS:
        raise ValueError(
            f"Expected three-index planes for a {system} phase, got the four-index {text!r}: "
            "Miller–Bravais indices belong to hexagonal axes."
        )
    return str(idx)


_PHASE_KEYS = ("id", "name", "laue", "lattice", "setting", "families")
_LATTICE_KEYS = ("a", "b", "c", "alpha", "beta", "gamma")


@dataclass(frozen=True)
class Phase:
    """One phase of a job: id, name, Laue class, lattice and candidate plane families.

    Attributes
    ----------
    id : int
        Phase id as used in the maps (>= 1; 0 marks non-indexed points).
    name : str
    laue : str
        One of the 11 Laue classes.
    lattice : Lattice
    families : tuple of str
        Candidate plane families (``'{1 1 1}'``: every symmetric equivalent) or
        single planes (``'(0 0 0 1)'``), in the form :func:`format_indices` writes.

    Examples
    --------
    >>> cu = Phase.from_dict({"id": 1, "name": "copper", "laue": "m-3m",
    ...     "lattice": {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}})
    >>> cu.families
    ('{1 1 1}', '{1 0 0}', '{1 1 0}', '{1 1 2}')
    >>> len(cu.candidate_planes())
    25
    """

    id: int
    name: str
    laue: str
    lattice: Lattice
    families: tuple[str, ...]

    def __post_init__(self):
        if isinstance(self.id, bool) or not isinstance(self.id, int | np.integer):
            raise TypeError(f"Expected `id` to be an integer, got {type(self.id).__name__}.")
        if self.id < 1:
            raise ValueError(
                f"Expected `id` to be an integer >= 1 (0 marks non-indexed points), got {self.id}."
            )
        object.__setattr__(self, "id", int(self.id))
        if not isinstance(self.name, str) or not self.name.strip():
            raise ValueError(f"Expected `name` to be a non-empty string, got {self.name!r}.")
        check_one_of(self.laue, "laue", _LAUE)
        _check_lattice(self.lattice)
        if self.lattice.laue is not None and self.lattice.laue != self.laue:
            raise ValueError(
                f"Expected the lattice's Laue class to be {self.laue!r}, got {self.lattice.laue!r}."
            )
        a, b, c, alpha, beta, gamma = self.lattice.parameters
        _check_cell_fits_laue(self.laue, a, b, c, alpha, beta, gamma)
        if isinstance(self.families, str) or not isinstance(self.families, tuple | list):
            raise TypeError(
                f"Expected `families` to be a tuple of strings, got {type(self.families).__name__}."
            )
        if not self.families:
            raise ValueError("Expected `families` to list at least one plane family, got none.")
        system = LAUE_CRYSTAL_SYSTEMS[self.laue]
        labels = tuple(_check_family_text(f, system) for f in self.families)
        repeated = sorted({f for f in labels if labels.count(f) > 1})
        if repeated:
            raise ValueError(f"Expected each family once in `families`, got {repeated} twice.")
        object.__setattr__(self, "families", labels)

    @classmethod
    def from_dict(cls, d, *, path=None, pointer: str = "/phases/0") -> Phase:
        """Build a phase from a job-file entry; any bad field raises InputError.

        Parameters
        ----------
        d : dict
            Keys ``id``, ``name``, ``laue``, ``lattice`` (``a, b, c`` in Å,
            ``alpha, beta, gamma`` in degrees), ``setting`` (required for
            hexagonal, trigonal, monoclinic and triclinic phases) and optionally
            ``families`` (default: :func:`default_families`).
        path : str or os.PathLike, optional
            The job file, for the error message.
        pointer : str, default "/phases/0"
            JSON pointer of the entry inside the job file.

        Raises
        ------
        InputError
            Naming the field (``pointer`` + ``/lattice``, ``/setting``,
            ``/families/2``, ...) and what was expected.

        Examples
        --------
        >>> ti = Phase.from_dict({"id": 2, "name": "alpha-Ti", "laue": "6/mmm",
        ...     "lattice": {"a": 2.951, "b": 2.951, "c": 4.684,
        ...                 "alpha": 90, "beta": 90, "gamma": 120},
        ...     "setting": "x_parallel_a", "families": ["{10-12}"]})
        >>> ti.families, len(ti.candidate_planes())
        (('{1 0 -1 2}',), 6)
        """

        def fail(message, where=""):
            raise InputError(message, path=path, pointer=pointer + where)

        if not isinstance(d, dict):
            fail(f"Expected a phase entry to be an object, got {type(d).__name__}.")
        unknown = sorted(set(d) - set(_PHASE_KEYS))
        if unknown:
            fail(f"Expected phase keys among {_PHASE_KEYS}, got unknown {unknown}.")
        for key in ("id", "name", "laue", "lattice"):
            if key not in d:
                fail(f"Expected the phase entry to have the key {key!r}, got none.")
        phase_id, name, laue = d["id"], d["name"], d["laue"]
        if isinstance(phase_id, bool) or not isinstance(phase_id, int) or phase_id < 1:
            fail(f"Expected `id` to be an integer >= 1, got {phase_id!r}.", "/id")
        if not isinstance(name, str) or not name.strip():
            fail(f"Expected `name` to be a non-empty string, got {name!r}.", "/name")
        if laue not in _LAUE:
            fail(f"Expected `laue` to be one of {_LAUE}, got {laue!r}.", "/laue")
        cell = d["lattice"]
        if not isinstance(cell, dict):
            fail(f"Expected `lattice` to be an object, got {type(cell).__name__}.", "/lattice")
        wrong = sorted(set(cell) ^ set(_LATTICE_KEYS))
        if wrong:
            fail(
                f"Expected `lattice` to have exactly the keys {_LATTICE_KEYS}, got {sorted(cell)}.",
                "/lattice",
            )
        for key in _LATTICE_KEYS:
            value = cell[key]
            if isinstance(value, bool) or not isinstance(value, int | float):
                fail(f"Expected `{key}` to be a number, got {value!r}.", f"/lattice/{key}")
        setting = d.get("setting")
        system = LAUE_CRYSTAL_SYSTEMS[laue]
        if setting is not None and setting not in SETTINGS:
            fail(f"Expected `setting` to be one of {SETTINGS}, got {setting!r}.", "/setting")
        params = [cell[k] for k in _LATTICE_KEYS]
        try:
            # Checked first with a stand-in setting, so that an impossible cell is
            # reported as such and not as a missing setting.
            lattice = Lattice.from_parameters(*params, setting=setting or "x_parallel_a", laue=laue)
        except ValueError as exc:
            fail(str(exc), "/lattice")
        if setting is None and system in _SETTING_REQUIRED:
            fail(_setting_message(system, lattice._a_to_a_star_deg()), "/setting")
        lattice = Lattice.from_parameters(*params, setting=setting, laue=laue)
        if "families" in d:
            families = d["families"]
            if not isinstance(families, list) or not families:
                fail(
                    f"Expected `families` to be a non-empty list of strings, got {families!r}.",
                    "/families",
                )
            labels = []
            for j, text in enumerate(families):
                try:
                    labels.append(_check_family_text(text, system))
                except (TypeError, ValueError) as exc:
                    fail(str(exc), f"/families/{j}")
                if labels[-1] in labels[:-1]:
                    fail(
                        f"Expected each family once, got {text!r} again "
                        f"(first at /families/{labels.index(labels[-1])}).",
                        f"/families/{j}",
                    )
        else:
            labels = list(default_families(laue))
        phase = cls(id=phase_id, name=name, laue=laue, lattice=lattice, families=tuple(labels))
        try:
            phase.candidate_planes()
        except ValueError as exc:
            fail(str(exc), "/families")
        return phase

    def candidate_planes(self) -> CandidatePlanes:
        """Every member of every family, n and -n once, with unit normals in C.

        A family in braces is expanded under the phase's Laue class; a single
        plane in parentheses stands for itself.

        Returns
        -------
        CandidatePlanes

        Raises
        ------
        ValueError
            If two families share a plane (for instance {1 1 1} and {2 2 2}),
            which would count one candidate twice.

        Examples
        --------
        >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
        >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "families": ["{111}"],
        ...                       "lattice": cell})
        >>> cu.candidate_planes().member
        ('(1 1 1)', '(1 1 -1)', '(1 -1 1)', '(1 -1 -1)')
        """
        family, member, indices, normals = [], [], [], []
        for label in self.families:
            idx = parse_indices(label)
            if idx.family:
                rows = expand_family(self.lattice, idx.values, self.laue)
            else:
                rows = np.array([idx.values])
            for row in rows:
                family.append(label)
                member.append(format_indices(row, "plane"))
                indices.append(tuple(int(x) for x in row))
            normals.append(plane_normals_crystal(self.lattice, rows))
        normal = np.concatenate(normals, axis=0)
        overlap = np.abs(normal @ normal.T) > 1.0 - 1e-9
        np.fill_diagonal(overlap, False)
        if overlap.any():
            i, j = np.argwhere(overlap)[0]
            raise ValueError(
                f"Expected every candidate plane once, got {member[i]} of {family[i]} "
                f"and {member[j]} of {family[j]}, which are the same plane."
            )
        normal.setflags(write=False)
        return CandidatePlanes(tuple(family), tuple(member), tuple(indices), normal)

    @property
    def normals_crystal(self) -> np.ndarray:
        """(M, 3) unit normals in C of :meth:`candidate_planes`, in the same order.

        Examples
        --------
        >>> cell = {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120}
        >>> ti = Phase.from_dict({"id": 1, "name": "Ti", "laue": "6/mmm", "lattice": cell,
        ...                       "setting": "x_parallel_a", "families": ["(0001)", "{10-10}"]})
        >>> ti.normals_crystal.round(6).tolist()
        [[0.0, 0.0, 1.0], [0.866025, 0.5, 0.0], [0.866025, -0.5, 0.0], [0.0, 1.0, 0.0]]
        """
        return self.candidate_planes().normal_crystal
