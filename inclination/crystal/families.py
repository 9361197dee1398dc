"""Plane families: the symmetric equivalents of a plane or direction, and default families.

Owns the orbit of an index triple under the proper rotations of a Laue class
(:func:`expand_family`, conventions §4) and the families a phase is searched for
when its job entry lists none (:func:`default_families`). The low-index triples
sorted into default families come from :func:`inclination.crystal.indices.low_indices`.
"""

from __future__ import annotations

import numpy as np

from .._validation import check_one_of
from ..errors import SettingError
from .indices import (
    KINDS,
    Indices,
    canonical_sign,
    format_indices,
    integer_indices,
    low_indices,
    three_index_array,
    to_bravais,
)
from .lattice import LAUE_CRYSTAL_SYSTEMS, Lattice, check_lattice
from .rotations import quat_as_matrix
from .symmetry import LAUE_CLASSES, SETTINGS, proper_rotations

__all__ = ["expand_family", "default_families"]

_LAUE = LAUE_CLASSES
# Rotated indices further than this from integers mean the rotations are not
# symmetries of the lattice (wrong Laue class or wrong setting).
_INTEGER_TOL = 1e-6


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
        raise SettingError(
            f"Expected the rotations of `laue` to be symmetries of this lattice "
            f"(setting {lattice.setting!r}), but they map {three.astype(int).tolist()} onto "
            "non-integer indices: check the Laue class, the cell and the setting."
        )
    rounded = rounded.astype(np.int64)
    if kind == "plane":
        rounded = canonical_sign(rounded)
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
    SettingError
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
    check_lattice(lattice)
    check_one_of(laue, "laue", _LAUE)
    if kind is None:
        kind = hkl.kind if isinstance(hkl, Indices) else "plane"
    check_one_of(kind, "kind", KINDS)
    if setting is None:
        setting = lattice.setting
    check_one_of(setting, "setting", SETTINGS)
    raw = hkl.values if isinstance(hkl, Indices) else hkl
    bravais = len(integer_indices(raw, "hkl")) == 4
    three = three_index_array(raw, "hkl", kind)
    members = _orbit(lattice, three, _rotation_matrices(laue, setting), kind)
    if not bravais:
        return members
    out = to_bravais(members, kind)
    if kind == "plane":
        out = canonical_sign(out)
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
    for v in low_indices(n, kind="plane"):
        if system == "trigonal" and abs(v[0] + v[1]) > n:
            continue
        members = _orbit(lattice, v.astype(float), rotations, "plane")
        if tuple(members[0]) in seen:
            continue
        seen.add(tuple(members[0]))
        if system == "trigonal":
            members = canonical_sign(to_bravais(members, "plane"))
        # A family is named by its member with the fewest minus signs, {1 1 -2 0} rather
        # than {2 -1 -1 0} (common practice).
        label = max(members.tolist(), key=lambda m: (-sum(x < 0 for x in m), m))
        labels.append(label)
    labels.sort(key=lambda m: (max(map(abs, m)), sum(map(abs, m)), [-x for x in m]))
    return tuple(format_indices(m, "plane", family=True) for m in labels)
