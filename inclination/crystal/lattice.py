"""Crystal cells: the lattice, its reciprocal and metric, plane normals, directions, spacings.

Owns conventions §4 for a cell. A :class:`Lattice` holds the cell (a, b, c in
ångström, α, β, γ in degrees) and the Cartesian setting that ties it to the
crystal frame C:

- ``"x_parallel_a"``: X_C ∥ a, Z_C ∥ c*, Y_C = Z_C × X_C;
- ``"x_parallel_a_star"``: X_C ∥ a*, Z_C ∥ c, Y_C = Z_C × X_C.

The plane (hkl) has the unit normal of h·a* + k·b* + l·c* (reciprocal vectors
without the factor 2π); the direction [uvw] is u·a + v·b + w·c
(:func:`plane_normals_crystal`, :func:`direction_crystal`, :func:`d_spacing`,
:func:`interplanar_angle_deg`). Index strings and their integer forms live in
:mod:`inclination.crystal.indices`, plane families in
:mod:`inclination.crystal.families`, phases in :mod:`inclination.crystal.phases`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from .._validation import check_one_of
from ..errors import SettingError
from .indices import three_index_array
from .symmetry import LAUE_CLASSES, SETTINGS

__all__ = [
    "SETTINGS",
    "LAUE_CRYSTAL_SYSTEMS",
    "BRAVAIS_SYSTEMS",
    "Lattice",
    "check_lattice",
    "check_cell_fits_laue",
    "plane_normals_crystal",
    "direction_crystal",
    "interplanar_angle_deg",
    "d_spacing",
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
#: Crystal systems on hexagonal axes, the only ones Miller–Bravais (four-index) notation suits.
BRAVAIS_SYSTEMS = ("hexagonal", "trigonal")

# Equal lengths and special angles are typed as the same numbers (3.615 three times,
# 90, 120), so they are recognised to rounding error only: a near miss such as
# γ = 119.99° is refused for a hexagonal phase instead of being silently accepted,
# since the symmetry operators would then not map the cell onto itself.
_LENGTH_RTOL = 1e-9
_ANGLE_TOL_DEG = 1e-9
# A cell whose volume is below this fraction of abc is flat for every practical purpose.
_MIN_VOLUME_FRACTION = 1e-6


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


def _check_parameters_fit_laue(laue, a, b, c, alpha, beta, gamma) -> None:
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
    elif system in BRAVAIS_SYSTEMS:
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
        raise SettingError(
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
                raise SettingError(f"Expected `{name}` to be a number, got {type(value).__name__}.")
            object.__setattr__(self, name, float(value))
        for name, value in lengths.items():
            if not (math.isfinite(value) and value > 0):
                raise SettingError(f"Expected `{name}` to be a finite length > 0 Å, got {value!r}.")
        for name, value in angles.items():
            if not (math.isfinite(value) and 0.0 < value < 180.0):
                raise SettingError(
                    f"Expected `{name}` to lie strictly between 0° and 180°, got {value!r}."
                )
        alpha, beta, gamma = self.alpha_deg, self.beta_deg, self.gamma_deg
        if alpha + beta + gamma >= 360.0:
            raise SettingError(
                "Expected the cell angles to sum to less than 360°, "
                f"got α + β + γ = {alpha + beta + gamma}°: no cell has such angles."
            )
        ca, cb, cg = _cos_deg(alpha), _cos_deg(beta), _cos_deg(gamma)
        triple = 1.0 - ca * ca - cb * cb - cg * cg + 2.0 * ca * cb * cg
        if triple <= _MIN_VOLUME_FRACTION**2:
            raise SettingError(
                "Expected the cell angles to satisfy "
                "1 - cos²α - cos²β - cos²γ + 2 cosα cosβ cosγ > 0 (each angle smaller than "
                f"the sum of the other two), got {triple:.3g} for α={alpha}°, β={beta}°, "
                f"γ={gamma}°: the cell has no volume."
            )
        if self.laue is not None:
            check_one_of(self.laue, "laue", _LAUE)
            _check_parameters_fit_laue(self.laue, self.a, self.b, self.c, alpha, beta, gamma)
        if self.setting is not None:
            check_one_of(self.setting, "setting", SETTINGS)
        elif self.crystal_system in _SETTING_REQUIRED:
            raise SettingError(_setting_message(self.crystal_system, self._a_to_a_star_deg()))
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
        SettingError
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


def check_cell_fits_laue(lattice: Lattice, laue: str) -> None:
    """Refuse a cell that does not have the shape the crystal system of ``laue`` demands.

    Parameters
    ----------
    lattice : Lattice
    laue : str
        One of the 11 Laue classes.

    Raises
    ------
    SettingError
        Naming what the system needs (for instance a = b and γ = 120°) and what came.

    Examples
    --------
    >>> check_cell_fits_laue(Lattice.from_parameters(3, 3, 5, 90, 90, 90), "4/mmm")
    """
    check_lattice(lattice)
    check_one_of(laue, "laue", _LAUE)
    _check_parameters_fit_laue(laue, *lattice.parameters)


# --------------------------------------------------------------------------- vectors


def check_lattice(lattice: object) -> None:
    """Refuse anything but a :class:`Lattice`.

    Raises
    ------
    SettingError
        If ``lattice`` is not a Lattice.

    Examples
    --------
    >>> check_lattice(Lattice.from_parameters(3, 3, 3, 90, 90, 90))
    """
    if not isinstance(lattice, Lattice):
        raise SettingError(f"Expected `lattice` to be a Lattice, got {type(lattice).__name__}.")


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
    check_lattice(lattice)
    h = three_index_array(hkl, "hkl", "plane")
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
    check_lattice(lattice)
    u = three_index_array(uvw, "uvw", "direction")
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
    check_lattice(lattice)
    h = three_index_array(hkl, "hkl", "plane")
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
    check_lattice(lattice)
    n1 = plane_normals_crystal(lattice, hkl1)
    n2 = plane_normals_crystal(lattice, hkl2)
    cos = np.clip(np.sum(n1 * n2, axis=-1), -1.0, 1.0)
    return np.degrees(np.arccos(cos))
