"""Neighbour links on the map grid: the kernels grains and the boundary network share.

Owns what both :mod:`inclination.grains` (which links neighbours into grains) and
:mod:`inclination.network` (which walks the edges between them) need to read an
orientation map point pair by point pair (conventions §1): the map as flat (4, N)
float32 planes, the declared phases as small records, the forward neighbour pairs of a
square or hexagonal grid, and cos(ω/2) of the disorientation of point pairs.

Work arrays are flat views of the (4, H, W) float32 planes taken in blocks of
:data:`BLOCK` points, so that memory above the map stays a few bytes per point.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from ._validation import check_one_of
from .crystal import symmetry
from .errors import InputError, SettingError

if TYPE_CHECKING:
    from .maps import OrientationMap

__all__ = [
    "BLOCK",
    "MapPlanes",
    "PhaseInfo",
    "disorientation_cos_half",
    "forward_pair_mask",
    "map_planes",
    "misorientation_columns",
    "neighbour_shifts",
    "phase_infos",
    "point_xy_um",
    "take_columns",
]

#: Points per block of the vectorised kernels (a few hundred kB of float32 buffers).
BLOCK = 65536

# More phases than this do not fit the uint8 phase codes of the link kernels.
_MAX_PHASES = 250


@dataclass(frozen=True)
class PhaseInfo:
    """What the link kernels need of one declared phase.

    Attributes
    ----------
    id : int
        Phase id as written in the map.
    laue : str
        Laue class symbol (crystal symmetry of the disorientation).
    setting : str
        Cartesian setting of the lattice (``'x_parallel_a'`` when the lattice has none).
    code : int
        1 + position of the phase in the declared order: the uint8 code of its points.
    """

    id: int
    laue: str
    setting: str
    code: int


@dataclass(frozen=True)
class MapPlanes:
    """An orientation map as the kernels read it (conventions §1).

    Attributes
    ----------
    quat : ndarray of float32, shape (4, N)
        Contiguous quaternion planes, point ``row·width + col`` in column N.
    height, width : int
        Rows H and columns W of the grid (N = H·W).
    grid : {'square', 'hexagonal'}
    """

    quat: np.ndarray
    height: int
    width: int
    grid: str


def phase_infos(phases: Iterable | Mapping) -> tuple[PhaseInfo, ...]:
    """Records of the declared phases, in their declared order.

    Parameters
    ----------
    phases : sequence or mapping of Phase
        Each with ``id``, ``laue`` and ``lattice``; ids unique; 1 to 250 phases.

    Returns
    -------
    tuple of PhaseInfo

    Raises
    ------
    TypeError
        If ``phases`` is not a collection of Phase records.
    SettingError
        If it holds no phase, more than 250, or repeated ids.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cell = Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90)
    >>> cu = Phase(3, "copper", "m-3m", cell, ("{1 1 1}",))
    >>> phase_infos({3: cu})
    (PhaseInfo(id=3, laue='m-3m', setting='x_parallel_a', code=1),)
    """
    if isinstance(phases, Mapping):
        items = list(phases.values())
    else:
        try:
            items = list(phases)
        except TypeError:
            raise TypeError(
                "Expected `phases` to be a sequence or mapping of Phase records, "
                f"got {type(phases).__name__}."
            ) from None
    infos = []
    for n, ph in enumerate(items):
        if not all(hasattr(ph, f) for f in ("id", "laue", "lattice")):
            raise TypeError(
                f"Expected `phases[{n}]` to be a Phase (with id, laue, lattice), "
                f"got {type(ph).__name__}."
            )
        infos.append(PhaseInfo(int(ph.id), str(ph.laue), str(ph.setting), n + 1))
    if not infos:
        raise SettingError("Expected `phases` to hold at least one Phase, got none.")
    if len(infos) > _MAX_PHASES:
        raise SettingError(
            f"Expected `phases` to hold at most {_MAX_PHASES} phases, got {len(infos)}."
        )
    ids = [p.id for p in infos]
    if len(set(ids)) != len(ids):
        raise SettingError(f"Expected the phase ids in `phases` to be unique, got {ids}.")
    return tuple(infos)


def map_planes(omap: OrientationMap) -> MapPlanes:
    """The map's quaternions as contiguous float32 (4, N) planes, with its grid.

    The one place the kernels read ``omap.quat``: converted once, and only when the
    reader did not already store contiguous float32 planes.

    Parameters
    ----------
    omap : OrientationMap
        ``quat`` (H, W, 4); ``phase`` and ``valid`` (H, W); ``grid``; steps.

    Returns
    -------
    MapPlanes

    Raises
    ------
    TypeError
        If ``omap`` lacks a field of an OrientationMap.
    InputError
        If the arrays do not have the shapes above.
    SettingError
        If the grid is not 'square' or 'hexagonal'.

    Examples
    --------
    >>> from inclination.maps import OrientationMap
    >>> quat = np.zeros((2, 3, 4)); quat[..., 0] = 1.0
    >>> planes = map_planes(OrientationMap(quat, np.ones((2, 3), int), grid="hexagonal"))
    >>> planes.quat.shape, planes.quat.dtype.name, planes.height, planes.width, planes.grid
    ((4, 6), 'float32', 2, 3, 'hexagonal')
    """
    for field in ("quat", "phase", "valid", "grid", "step_x_um", "step_y_um", "row_pitch_um"):
        if not hasattr(omap, field):
            raise TypeError(
                f"Expected `omap` to be an OrientationMap (with {field}), "
                f"got {type(omap).__name__}."
            )
    quat = np.asarray(omap.quat)
    if quat.ndim != 3 or quat.shape[-1] != 4:
        raise InputError(f"Expected `omap.quat` to have shape (H, W, 4), got {quat.shape}.")
    h, w = quat.shape[:2]
    # OrientationMap stores contiguous (4, H, W) planes and shows them quaternion-last;
    # moving the axis back is a view of those planes, not a copy.
    quat = np.moveaxis(quat, -1, 0)
    for field in ("phase", "valid"):
        shape = np.shape(getattr(omap, field))
        if shape != (h, w):
            raise InputError(f"Expected `omap.{field}` to have shape {(h, w)}, got {shape}.")
    check_one_of(omap.grid, "omap.grid", ("square", "hexagonal"))
    quat = np.ascontiguousarray(quat, dtype=np.float32)
    return MapPlanes(quat.reshape(4, h * w), int(h), int(w), str(omap.grid))


def point_xy_um(omap: OrientationMap, flat_index: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Positions in S (µm) of points given by flat index ``row·W + col`` (§1).

    Square: (col·step_x, row·step_y); hexagonal: rows step·√3/2 apart, odd rows shifted
    right by step/2.

    Examples
    --------
    >>> from inclination.maps import OrientationMap
    >>> quat = np.zeros((2, 3, 4)); quat[..., 0] = 1.0
    >>> m = OrientationMap(quat, np.ones((2, 3), int), grid="hexagonal")
    >>> [v.round(6).tolist() for v in point_xy_um(m, [0, 4])]
    [[0.0, 1.5], [0.0, 0.866025]]
    """
    w = np.shape(omap.quat)[1]
    k = np.asarray(flat_index, dtype=np.int64)
    i, j = np.divmod(k, w)
    x = j * float(omap.step_x_um)
    if omap.grid == "hexagonal":
        x = x + 0.5 * float(omap.step_x_um) * (i % 2)
    return x, i * float(omap.row_pitch_um)


def neighbour_shifts(grid: str, w: int) -> tuple[tuple[int, int], ...]:
    """Forward neighbour pairs as ``(flat shift, row parity)``; parity -1 = every row.

    Square: (0, +1) and (+1, 0). Hexagonal with odd rows shifted right (§1): (0, +1),
    (+1, 0) on every row, (+1, -1) from even rows and (+1, +1) from odd rows.

    Examples
    --------
    >>> neighbour_shifts("hexagonal", 10)
    ((1, -1), (10, -1), (9, 0), (11, 1))
    """
    if grid == "square":
        return ((1, -1), (w, -1))
    return ((1, -1), (w, -1), (w - 1, 0), (w + 1, 1))


def forward_pair_mask(
    flat_index: np.ndarray, shift: int, parity: int, shape: tuple[int, int], *, horizontal: bool
) -> np.ndarray:
    """Which points ``flat_index`` have an in-map forward neighbour ``flat_index + shift``.

    ``(shift, parity)`` is one pair of :func:`neighbour_shifts`; ``shape`` is (H, W).
    A shift of one column has no partner in the last column; the hexagonal diagonals
    exist only from rows of their parity and not across the side of the map.
    ``horizontal`` says the pair is the (0, +1) one (the first of :func:`neighbour_shifts`):
    in a map one point wide the down shift is also 1, so the value cannot tell.

    Examples
    --------
    >>> forward_pair_mask(np.arange(6), 2, 0, (2, 3), horizontal=False).tolist()  # (+1, -1)
    [False, True, True, False, False, False]
    """
    h, w = shape
    i, j = np.divmod(flat_index, w)
    ok = j < w - 1 if horizontal else i < h - 1
    if shift == w - 1 and parity == 0:
        ok &= (j > 0) & (i % 2 == 0)
    elif shift == w + 1 and parity == 1:
        ok &= (j < w - 1) & (i % 2 == 1)
    return ok


def take_columns(q: np.ndarray, index: np.ndarray) -> np.ndarray:
    """Columns ``index`` of (4, N) planes as a (4, n) array, one ``take`` per row.

    Examples
    --------
    >>> take_columns(np.arange(12.0).reshape(4, 3), np.array([2, 0])).tolist()
    [[2.0, 0.0], [5.0, 3.0], [8.0, 6.0], [11.0, 9.0]]
    """
    out = np.empty((4, len(index)), q.dtype)
    for c in range(4):
        q[c].take(index, out=out[c])
    return out


def misorientation_columns(qa: np.ndarray, qb: np.ndarray) -> np.ndarray:
    """Crystal-frame misorientations ``qb ⊗ qa⁻¹`` of pairs given as (4, n) columns (§3).

    Returned as an (n, 4) view of contiguous (4, n) rows, the layout the symmetry
    kernel copies its blocks from; the dtype of the inputs is kept.

    Examples
    --------
    >>> qa = np.array([[1.0], [0.0], [0.0], [0.0]])
    >>> qb = np.array([[0.0], [0.0], [0.0], [1.0]])  # 180° about Z
    >>> misorientation_columns(qa, qb).tolist()
    [[0.0, 0.0, 0.0, 1.0]]
    """
    a0, a1, a2, a3 = qa
    b0, b1, b2, b3 = qb
    out = np.empty((4, qa.shape[1]), dtype=np.result_type(qa, qb))
    out[0] = b0 * a0 + b1 * a1 + b2 * a2 + b3 * a3
    out[1] = b1 * a0 - b0 * a1 - b2 * a3 + b3 * a2
    out[2] = b2 * a0 - b0 * a2 + b1 * a3 - b3 * a1
    out[3] = b3 * a0 - b0 * a3 - b1 * a2 + b2 * a1
    return out.T


def disorientation_cos_half(qa: np.ndarray, qb: np.ndarray, info: PhaseInfo) -> np.ndarray:
    """cos(ω/2) of the disorientation ω of pairs given as (4, n) columns, shape (n,).

    The misorientation ``qb ⊗ qa⁻¹`` goes to
    :func:`inclination.crystal.symmetry.max_scalar_part` with the phase's Laue class.

    Examples
    --------
    >>> info = PhaseInfo(1, "m-3m", "x_parallel_a", 1)
    >>> qa = np.array([[1.0], [0.0], [0.0], [0.0]])
    >>> qb = np.array([[0.92388], [0.0], [0.0], [0.382683]])  # 45° about Z
    >>> np.rad2deg(2 * np.arccos(disorientation_cos_half(qa, qb, info))).round(3).tolist()
    [45.0]
    """
    dq = misorientation_columns(qa, qb)
    return symmetry.max_scalar_part(dq, info.laue, setting=info.setting)
