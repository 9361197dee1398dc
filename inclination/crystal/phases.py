"""Phases: one phase of a job, the typed collection of a job's phases, candidate planes.

Owns the phase records every stage takes (docs/architecture.md): :class:`Phase`
(id, name, Laue class, lattice and candidate plane families, built from a job entry
by :meth:`Phase.from_dict`), :class:`Phases` (an immutable mapping id -> Phase, in
file order, the one form in which stages receive phases) and
:class:`CandidatePlanes` (every member of a phase's families with its unit normal
in C, conventions §4). :attr:`Phase.setting` is the one place a phase's effective
Cartesian setting is decided.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from os import PathLike
from types import MappingProxyType

import numpy as np

from .._validation import check_one_of
from ..errors import InputError, SettingError
from .families import default_families, expand_family
from .indices import format_indices, parse_indices
from .lattice import (
    BRAVAIS_SYSTEMS,
    LAUE_CRYSTAL_SYSTEMS,
    Lattice,
    check_cell_fits_laue,
    check_lattice,
    plane_normals_crystal,
)
from .symmetry import LAUE_CLASSES, SETTINGS

__all__ = ["CandidatePlanes", "Phase", "Phases"]

_LAUE = LAUE_CLASSES


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
    try:
        idx = parse_indices(text)
    except SettingError as exc:
        # The parser names its own parameter; a job-file reader knows the field.
        raise SettingError(str(exc).replace("`text`", "the family")) from None
    if idx.kind != "plane":
        raise SettingError(
            f"Expected a plane family such as '{{1 1 1}}' or a plane such as '(0 0 0 1)', "
            f"got the direction {text!r}."
        )
    if idx.bravais and system not in BRAVAIS_SYSTEMS:
        raise SettingError(
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
            raise SettingError(f"Expected `id` to be an integer, got {type(self.id).__name__}.")
        if self.id < 1:
            raise SettingError(
                f"Expected `id` to be an integer >= 1 (0 marks non-indexed points), got {self.id}."
            )
        object.__setattr__(self, "id", int(self.id))
        if not isinstance(self.name, str) or not self.name.strip():
            raise SettingError(f"Expected `name` to be a non-empty string, got {self.name!r}.")
        check_one_of(self.laue, "laue", _LAUE)
        check_lattice(self.lattice)
        if self.lattice.laue is not None and self.lattice.laue != self.laue:
            raise SettingError(
                f"Expected the lattice's Laue class to be {self.laue!r}, got {self.lattice.laue!r}."
            )
        check_cell_fits_laue(self.lattice, self.laue)
        if isinstance(self.families, str) or not isinstance(self.families, tuple | list):
            raise SettingError(
                f"Expected `families` to be a tuple of strings, got {type(self.families).__name__}."
            )
        if not self.families:
            raise SettingError("Expected `families` to list at least one plane family, got none.")
        system = LAUE_CRYSTAL_SYSTEMS[self.laue]
        labels = tuple(_check_family_text(f, system) for f in self.families)
        repeated = sorted({f for f in labels if labels.count(f) > 1})
        if repeated:
            raise SettingError(f"Expected each family once in `families`, got {repeated} twice.")
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
            Lattice.from_parameters(*params, setting=setting or "x_parallel_a", laue=laue)
        except ValueError as exc:
            fail(str(exc), "/lattice")
        try:
            # The cell is sound: what can still fail is a setting the cell needs stated.
            lattice = Lattice.from_parameters(*params, setting=setting, laue=laue)
        except ValueError as exc:
            fail(str(exc), "/setting")
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

    @property
    def setting(self) -> str:
        """The Cartesian setting of this phase's crystal frame (conventions §4).

        The one answer to "which setting are this phase's symmetry rotations written
        in": the lattice's setting, which :class:`~inclination.crystal.lattice.Lattice`
        records as ``"x_parallel_a"`` for orthogonal cells, where the two settings
        coincide.

        Examples
        --------
        >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
        >>> Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": cell}).setting
        'x_parallel_a'
        """
        return str(self.lattice.setting)

    def candidate_planes(self) -> CandidatePlanes:
        """Every member of every family, n and -n once, with unit normals in C.

        A family in braces is expanded under the phase's Laue class; a single
        plane in parentheses stands for itself.

        Returns
        -------
        CandidatePlanes

        Raises
        ------
        SettingError
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
            raise SettingError(
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


class Phases(Mapping):
    """The phases of a job: an immutable mapping phase id -> :class:`Phase`, in file order.

    The one form in which stages take phases. Iteration yields the ids in the
    order given; ``.values()`` the records.

    Parameters
    ----------
    phases : iterable of Phase
        At least one, ids distinct.

    Raises
    ------
    SettingError
        For an entry that is not a Phase, a repeated id, or no phase at all.

    Examples
    --------
    >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
    >>> phases = Phases.from_dicts([{"id": 2, "name": "Cu", "laue": "m-3m", "lattice": cell}])
    >>> list(phases), phases[2].name, len(phases)
    ([2], 'Cu', 1)
    """

    __slots__ = ("_by_id",)

    def __init__(self, phases: Iterable[Phase]) -> None:
        if isinstance(phases, Phase) or isinstance(phases, str | bytes | Mapping):
            raise SettingError(
                "Expected `phases` to be an iterable of Phase records, "
                f"got {type(phases).__name__}."
            )
        by_id: dict[int, Phase] = {}
        for n, phase in enumerate(phases):
            if not isinstance(phase, Phase):
                raise SettingError(
                    f"Expected `phases[{n}]` to be a Phase, got {type(phase).__name__}."
                )
            if phase.id in by_id:
                raise SettingError(f"Expected distinct phase ids, got {phase.id} twice.")
            by_id[phase.id] = phase
        if not by_id:
            raise SettingError("Expected `phases` to hold at least one Phase, got none.")
        object.__setattr__(self, "_by_id", MappingProxyType(by_id))

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError(f"Phases is immutable: cannot set {name!r}.")

    @classmethod
    def from_records(cls, phases: Phases | Phase | Mapping | Iterable[Phase]) -> Phases:
        """The collection of a Phases, one Phase, a mapping id -> Phase, or an iterable of Phases.

        For stages that still accept the older forms; a :class:`Phases` comes back as it is.

        Raises
        ------
        SettingError
            As the constructor, and for a mapping whose keys are not its records' ids.

        Examples
        --------
        >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
        >>> cu = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": cell})
        >>> Phases.from_records(cu) == Phases.from_records({1: cu}) == Phases([cu])
        True
        """
        if isinstance(phases, Phases):
            return phases
        if isinstance(phases, Phase):
            return cls([phases])
        if isinstance(phases, Mapping):
            for key, phase in phases.items():
                if getattr(phase, "id", None) != key:
                    raise SettingError(
                        f"Expected each key of `phases` to be its phase's id, got key {key!r} "
                        f"for {type(phase).__name__} {getattr(phase, 'id', None)!r}."
                    )
            return cls(phases.values())
        return cls(phases)

    @classmethod
    def from_dicts(
        cls,
        entries: Iterable[Mapping],
        *,
        path: str | PathLike | None = None,
        pointer: str = "/phases",
    ) -> Phases:
        """Build the phases of a job file's ``phases`` list; any bad entry raises InputError.

        Parameters
        ----------
        entries : iterable of dict
            Phase entries as :meth:`Phase.from_dict` reads them.
        path : str or os.PathLike, optional
            The job file, for the error message.
        pointer : str, default "/phases"
            JSON pointer of the list inside the job file.

        Raises
        ------
        InputError
            For a bad entry (its field named), a repeated id or an empty list.

        Examples
        --------
        >>> cell = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
        >>> entry = {"id": 1, "name": "Cu", "laue": "m-3m", "lattice": cell}
        >>> try:
        ...     Phases.from_dicts([entry, entry], path="job.json")
        ... except InputError as exc:
        ...     print(exc.pointer)
        /phases/1/id
        """
        seen: dict[int, int] = {}
        records = []
        for i, entry in enumerate(entries):
            where = f"{pointer}/{i}"
            phase = Phase.from_dict(entry, path=path, pointer=where)
            if phase.id in seen:
                raise InputError(
                    f"Expected distinct phase ids, got {phase.id} again "
                    f"(first at {pointer}/{seen[phase.id]}).",
                    path=path,
                    pointer=f"{where}/id",
                )
            seen[phase.id] = i
            records.append(phase)
        if not records:
            raise InputError("Expected at least one phase, got none.", path=path, pointer=pointer)
        return cls(records)

    def __getitem__(self, phase_id: int) -> Phase:
        return self._by_id[phase_id]

    def __iter__(self) -> Iterator[int]:
        return iter(self._by_id)

    def __len__(self) -> int:
        return len(self._by_id)

    def __repr__(self) -> str:
        names = ", ".join(f"{k}: {p.name!r}" for k, p in self._by_id.items())
        return f"Phases({{{names}}})"

    @property
    def ids(self) -> tuple[int, ...]:
        """The phase ids, in the order given."""
        return tuple(self._by_id)
