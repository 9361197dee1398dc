"""Slip systems of a phase and their Schmid factors (docs/conventions.md §4).

Owns the slip-system notation ``"{1 1 1}<1 -1 0>"`` (a plane family and a direction
family; Miller–Bravais for hexagonal phases), its expansion under a phase's Laue class
into the individual systems (plane, direction in that plane, ±b counted once), the
named presets, and the one Schmid-factor formula m = |cos φ · cos λ|. Nothing here
knows of a map: vectors are in the crystal frame C, or in any one frame the caller
keeps for all three vectors.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from .._validation import as_float_array, check_last_axis
from .families import expand_family
from .indices import format_indices, parse_indices
from .lattice import LAUE_CRYSTAL_SYSTEMS, direction_crystal, plane_normals_crystal

__all__ = [
    "SLIP_PRESETS",
    "SLIP_PRESET_SOURCES",
    "SlipSystems",
    "parse_slip_system",
    "schmid_factor",
    "slip_systems",
]

#: Named sets of slip systems: name → slip-system strings. Sources in
#: :data:`SLIP_PRESET_SOURCES`.
SLIP_PRESETS = MappingProxyType(
    {
        "fcc": ("{1 1 1}<1 -1 0>",),
        "bcc": ("{1 1 0}<1 -1 1>", "{1 1 2}<1 1 -1>"),
        "bcc-110": ("{1 1 0}<1 -1 1>",),
        "bcc-112": ("{1 1 2}<1 1 -1>",),
        "bcc-123": ("{1 2 3}<1 1 -1>",),
        "hcp-basal": ("{0 0 0 1}<1 1 -2 0>",),
        "hcp-prismatic": ("{1 0 -1 0}<1 1 -2 0>",),
        "hcp-pyramidal-a": ("{1 0 -1 1}<1 1 -2 0>",),
        "hcp-pyramidal-ca": ("{1 1 -2 2}<1 1 -2 -3>",),
        "hcp": (
            "{0 0 0 1}<1 1 -2 0>",
            "{1 0 -1 0}<1 1 -2 0>",
            "{1 0 -1 1}<1 1 -2 0>",
            "{1 1 -2 2}<1 1 -2 -3>",
        ),
    }
)

_HULL_BACON = (
    "D. Hull and D. J. Bacon, Introduction to Dislocations, 5th ed. (Butterworth-Heinemann, "
    "2011), ch. 3, slip systems of the common structures (from memory)"
)
_YOO = (
    "M. H. Yoo, Slip, twinning and fracture in hexagonal close-packed metals, Metall. Trans. A "
    "12 (1981) 409-418 (from memory)"
)
#: Where each preset's systems are listed.
SLIP_PRESET_SOURCES = MappingProxyType(
    {
        "fcc": _HULL_BACON,
        "bcc": _HULL_BACON,
        "bcc-110": _HULL_BACON,
        "bcc-112": _HULL_BACON,
        "bcc-123": _HULL_BACON,
        "hcp-basal": _HULL_BACON,
        "hcp-prismatic": _HULL_BACON,
        "hcp-pyramidal-a": _YOO,
        "hcp-pyramidal-ca": _YOO,
        "hcp": _YOO,
    }
)

_SYSTEM = re.compile(r"^\s*(\{[^{}<>]*\})\s*(<[^{}<>]*>)\s*$")
# Integer zone rule h·u + k·v + l·w = 0 decides "direction lies in the plane" exactly.
_BRAVAIS_SYSTEMS = ("hexagonal", "trigonal")


def parse_slip_system(text):
    """Split a slip-system string into its plane family and direction family.

    Parameters
    ----------
    text : str
        ``"{h k l}<u v w>"`` or Miller–Bravais ``"{h k i l}<U V T W>"``; the index
        forms of :func:`inclination.crystal.indices.parse_indices` are accepted.

    Returns
    -------
    plane, direction : Indices
        The plane family (kind ``"plane"``) and the direction family (``"direction"``).

    Raises
    ------
    ValueError
        If ``text`` is not a plane family in braces followed by a direction family in
        angle brackets, or if the two use different index counts.

    Examples
    --------
    >>> plane, direction = parse_slip_system("{1 1 1}<1 -1 0>")
    >>> plane.values, direction.values
    ((1, 1, 1), (1, -1, 0))
    >>> str(parse_slip_system("{10-10}<11-20>")[1])
    '<1 1 -2 0>'
    """
    if not isinstance(text, str):
        raise TypeError(f"Expected a slip-system string, got {type(text).__name__}.")
    match = _SYSTEM.match(text.replace("\u2212", "-"))
    if match is None:
        raise ValueError(
            "Expected a slip system as a plane family and a direction family such as "
            f"'{{1 1 1}}<1 -1 0>', or one of the presets {tuple(SLIP_PRESETS)}, got {text!r}."
        )
    plane = parse_indices(match.group(1))
    direction = parse_indices(match.group(2))
    if len(plane.values) != len(direction.values):
        raise ValueError(
            f"Expected the plane and the direction in the same notation (three or four "
            f"indices each), got {text!r}."
        )
    return plane, direction


@dataclass(frozen=True, eq=False)
class SlipSystems:
    """The individual slip systems of a phase, one row per (plane, direction), ±b once.

    Attributes
    ----------
    system : tuple of str, length K
        The system string it came from, as written by :func:`format_indices`.
    plane : tuple of str, length K
        The plane of the system, ``'(1 1 1)'`` (first non-zero index positive).
    direction : tuple of str, length K
        The slip direction, ``'[1 -1 0]'`` (first non-zero index positive).
    normal_crystal, direction_crystal : ndarray, shape (K, 3)
        Unit plane normals and unit slip directions in C (read-only).
    """

    system: tuple[str, ...]
    plane: tuple[str, ...]
    direction: tuple[str, ...]
    normal_crystal: np.ndarray = field(repr=False)
    direction_crystal: np.ndarray = field(repr=False)

    def __len__(self) -> int:
        return len(self.plane)

    @property
    def plane_families(self) -> tuple[str, ...]:
        """The plane families of the systems, in order, each once (``'{1 1 1}'``)."""
        out = []
        for s in self.system:
            family = s[: s.index("}") + 1]
            if family not in out:
                out.append(family)
        return tuple(out)


def _three(rows: np.ndarray, kind: str) -> np.ndarray:
    """Three-index forms of (M, 3|4) indices (conventions §4)."""
    if rows.shape[1] == 3:
        return rows
    if kind == "plane":
        return rows[:, [0, 1, 3]]
    return np.stack([rows[:, 0] - rows[:, 2], rows[:, 1] - rows[:, 2], rows[:, 3]], axis=1)


def _positive_first(rows: np.ndarray) -> np.ndarray:
    first = np.argmax(rows != 0, axis=-1)
    return rows * np.sign(rows[np.arange(len(rows)), first])[:, None]


def _expand_one(phase, text: str):
    plane, direction = parse_slip_system(text)
    system = LAUE_CRYSTAL_SYSTEMS[phase.laue]
    if plane.bravais and system not in _BRAVAIS_SYSTEMS:
        raise ValueError(
            f"Expected three-index slip systems for a {system} phase, got the four-index "
            f"{text!r}: Miller–Bravais indices belong to hexagonal axes."
        )
    lattice = phase.lattice
    planes = expand_family(lattice, plane.values, phase.laue, kind="plane")
    directions = expand_family(lattice, direction.values, phase.laue, kind="direction")
    directions = np.unique(_positive_first(directions), axis=0)[::-1]
    p3 = _three(planes, "plane")
    d3 = _three(directions, "direction")
    # The zone rule on integers: exact, and the same in every setting and cell.
    in_plane = (p3 @ d3.T) == 0
    if not in_plane.any():
        raise ValueError(
            f"Expected some direction of {direction} to lie in the planes of {plane}, got none "
            f"in {text!r}."
        )
    label = f"{plane}{direction}"
    rows_p, rows_d = np.nonzero(in_plane)
    return (
        [label] * len(rows_p),
        [format_indices(planes[i], "plane") for i in rows_p],
        [format_indices(directions[j], "direction") for j in rows_d],
        plane_normals_crystal(lattice, planes[rows_p]),
        direction_crystal(lattice, directions[rows_d]),
    )


def slip_systems(phase, systems) -> SlipSystems:
    """Expand slip-system strings or preset names under a phase's Laue class.

    Parameters
    ----------
    phase : inclination.crystal.phases.Phase
        Supplies the lattice (and its setting) and the Laue class.
    systems : sequence of str
        Slip-system strings (:func:`parse_slip_system`) or names of
        :data:`SLIP_PRESETS`, mixed freely.

    Returns
    -------
    SlipSystems
        Every (plane, direction) pair with the direction in the plane (zone rule),
        planes and directions each counted once up to sign.

    Raises
    ------
    ValueError
        An unknown string, a direction family with no member in the plane family, or
        the same system listed twice.

    Examples
    --------
    >>> from inclination.crystal.phases import Phase
    >>> cell = {"a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}
    >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": cell})
    >>> s = slip_systems(cu, ["fcc"])
    >>> len(s), s.plane[0], s.direction[:3]
    (12, '(1 1 1)', ('[1 0 -1]', '[1 -1 0]', '[0 1 -1]'))
    """
    if isinstance(systems, str) or not isinstance(systems, tuple | list):
        raise TypeError(
            f"Expected `systems` to be a list of strings, got {type(systems).__name__}."
        )
    parts = [[], [], [], [], []]
    for text in systems:
        expanded = SLIP_PRESETS.get(text, (text,)) if isinstance(text, str) else (text,)
        for one in expanded:
            for part, values in zip(parts, _expand_one(phase, one), strict=True):
                part.append(values)
    if not parts[0]:
        raise ValueError("Expected at least one slip system, got none.")
    system, plane, direction = (sum(p, []) for p in parts[:3])
    normal = np.concatenate(parts[3], axis=0)
    slip = np.concatenate(parts[4], axis=0)
    pairs = list(zip(plane, direction, strict=True))
    repeated = sorted({p for p in pairs if pairs.count(p) > 1})
    if repeated:
        raise ValueError(
            f"Expected each slip system once, got {repeated[0][0]}{repeated[0][1]} twice."
        )
    normal.setflags(write=False)
    slip.setflags(write=False)
    return SlipSystems(tuple(system), tuple(plane), tuple(direction), normal, slip)


def schmid_factor(load, normal, direction) -> np.ndarray:
    """Schmid factor m = |cos φ · cos λ| of slip systems under a uniaxial load.

    φ is the angle between the load axis and the plane normal, λ the angle between
    the load axis and the slip direction (Schmid's law). The absolute value is
    returned: tension and compression, and ±b, give the same resolved-shear magnitude.

    Parameters
    ----------
    load : array_like, shape (..., 3)
        Load axis, any non-zero length.
    normal, direction : array_like, shape (..., 3)
        Plane normals and slip directions in the same frame as ``load``, any
        non-zero length; broadcast against ``load``.

    Returns
    -------
    ndarray, shape (broadcast)
        m in [0, 0.5].

    Examples
    --------
    >>> # Load along [0 0 1] on (1 1 1)[0 1 -1]: cos φ = 1/√3, cos λ = 1/√2, m = 1/√6.
    >>> schmid_factor([0, 0, 1], [1, 1, 1], [0, 1, -1]).round(6).tolist()
    0.408248
    """
    arrays = []
    for value, name in ((load, "load"), (normal, "normal"), (direction, "direction")):
        v = as_float_array(value, name)
        check_last_axis(v, name, 3)
        length = np.linalg.norm(v, axis=-1, keepdims=True)
        if np.any(length == 0):
            raise ValueError(f"Expected `{name}` to hold non-zero vectors, got a zero vector.")
        arrays.append(v / length)
    axis, n, b = arrays
    return np.abs(np.sum(axis * n, axis=-1) * np.sum(axis * b, axis=-1))
