"""Orientation maps of a microstructure: the surface, or a serial section at depth h.

Owns the making of maps from a :class:`~.microstructure.Microstructure`:
:func:`sample_map` samples the plane z = h on a square or hexagonal grid (§1), with
orientation noise, non-indexed points and clusters of wrongly indexed points, into a
:class:`SampledMap` that keeps the truth (region of every point, which points were
mis-indexed); :func:`recorded_in_frame` gives the same map as an instrument whose data
frame is turned against S would record it (§3, §6); :func:`as_orientation_map` hands
a sampled map to the analysis stages as a ``maps.OrientationMap``.

Sample frame S of conventions §2, micrometres and degrees. Every argument is a setting
(:class:`~inclination.errors.SettingError` when out of range).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.spatial import cKDTree

from .._validation import as_float_array, check_one_of, check_positive
from ..crystal.rotations import (
    quat_as_euler_deg,
    quat_multiply,
    quat_normalise,
    quat_reduce,
    random_quat,
)
from ..errors import SettingError
from ..maps import OrientationMap
from ._shared import Seed, checked, frozen, scatter_quat
from .microstructure import Microstructure, region_at

__all__ = [
    "SampledMap",
    "grid_positions_um",
    "sample_map",
    "recorded_in_frame",
    "as_orientation_map",
]

GRIDS = ("square", "hexagonal")
FRAME_TURNS = ("x180", "y180", "z180")


@dataclass(frozen=True, eq=False)
class SampledMap:
    """An orientation map sampled from a :class:`Microstructure` (truth included).

    Attributes
    ----------
    euler_deg : ndarray, shape (H, W, 3)
        Bunge angles in S (§3), degrees; NaN where not indexed.
    quat : ndarray, shape (H, W, 4)
        The same orientations as unit quaternions; NaN where not indexed.
    phase : ndarray, shape (H, W)
        Phase id; 0 = not indexed.
    grain_id : ndarray, shape (H, W)
        Truth: the region each point lies in (even where not indexed or mis-indexed).
    misindexed : ndarray, shape (H, W)
        Truth: points given a wrong orientation.
    x_um, y_um : ndarray, shape (H, W)
        Point positions in the map's own coordinates (§1), µm.
    step_um : float
    grid : {'square', 'hexagonal'}
    depth_um : float
        Depth of the sectioning plane below the surface (along +Z_S).
    offset_um : tuple of 2 floats
        The map point (0, 0) sits at (dx, dy) of the microstructure's frame: a feature at
        true position p appears in the map at p - offset.
    frame_rotation : tuple of 4 floats
        Quaternion of the turn Q of the data frame the orientations are recorded in
        (identity = S; ``v_S = Q v_data``); see :func:`recorded_in_frame`.
    """

    euler_deg: np.ndarray
    quat: np.ndarray
    phase: np.ndarray
    grain_id: np.ndarray
    misindexed: np.ndarray
    x_um: np.ndarray
    y_um: np.ndarray
    step_um: float
    grid: str
    depth_um: float
    offset_um: tuple[float, float]
    frame_rotation: tuple[float, float, float, float] = (1.0, 0.0, 0.0, 0.0)

    @property
    def shape(self) -> tuple[int, int]:
        """(H, W)."""
        return self.phase.shape


def grid_positions_um(
    shape: tuple[int, int], step_um: float, *, grid: str = "square"
) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the points of a map grid (conventions §1), in the map's own axes.

    Square: point (i, j) at (j·s, i·s). Hexagonal: rows s·√3/2 apart, odd rows shifted
    by s/2.

    Parameters
    ----------
    shape : tuple (H, W)
    step_um : float
    grid : {'square', 'hexagonal'}

    Returns
    -------
    x_um, y_um : ndarray, shape (H, W)

    Examples
    --------
    >>> x, y = grid_positions_um((2, 2), 1.0, grid="hexagonal")
    >>> x.round(6).tolist(), y.round(6).tolist()
    ([[0.0, 1.0], [0.5, 1.5]], [[0.0, 0.0], [0.866025, 0.866025]])
    """
    checked(SettingError, check_one_of, grid, "grid", GRIDS)
    checked(SettingError, check_positive, step_um, "step_um")
    h, w = (int(v) for v in shape)
    if h < 1 or w < 1:
        raise SettingError(f"Expected `shape` to be (H, W) with H, W >= 1, got {shape!r}.")
    rows = np.arange(h)[:, None]
    cols = np.arange(w)[None, :]
    if grid == "square":
        x = np.broadcast_to(cols * step_um, (h, w)).astype(float)
        y = np.broadcast_to(rows * step_um, (h, w)).astype(float)
    else:
        x = cols * step_um + 0.5 * step_um * (rows % 2)
        y = np.broadcast_to(rows * step_um * np.sqrt(3.0) / 2.0, (h, w)).astype(float)
    return np.ascontiguousarray(x), np.ascontiguousarray(y)


def _fitting_shape(extent, step: float, grid: str) -> tuple[int, int]:
    width, height = extent
    dy = step if grid == "square" else step * np.sqrt(3.0) / 2.0
    # Points fill [0, width) × [0, height); odd hexagonal rows need room for the shift.
    w = int(np.floor((width - (0.5 * step if grid == "hexagonal" else 0.0)) / step + 1e-9))
    h = int(np.floor(height / dy + 1e-9))
    return max(h, 1), max(w, 1)


def sample_map(
    micro: Microstructure,
    *,
    step_um: float,
    rng: Seed,
    depth_um: float = 0.0,
    shape: tuple[int, int] | None = None,
    extent_um: tuple[float, float] | None = None,
    grid: str = "square",
    offset_um: tuple[float, float] = (0.0, 0.0),
    noise_deg: float = 0.5,
    nonindexed_fraction: float = 0.0,
    misindexed_clusters: int = 0,
    cluster_radius_um: float | None = None,
) -> SampledMap:
    """Sample the orientation map of the plane z = depth_um (conventions §1–§3).

    Parameters
    ----------
    micro : Microstructure
    step_um : float
        Grid step.
    rng : None, int or numpy.random.Generator
        Seed of the noise, the non-indexed points and the clusters.
    depth_um : float
        Depth of the plane below the surface, along +Z_S (a serial section at h).
    shape : tuple (H, W), optional
        Grid size. Otherwise the largest grid that fits ``extent_um`` (width, height),
        or the box, with its points in [0, width) × [0, height).
    grid : {'square', 'hexagonal'}
    offset_um : tuple (dx, dy)
        Where the map's point (0, 0) lies in the microstructure's frame (a shifted serial
        section, for registration tests): a feature at p appears in the map at p - offset.
    noise_deg : float
        RMS angle of the random rotation added to each point.
    nonindexed_fraction : float
        Fraction of points, in [0, 1), chosen at random and marked not indexed.
    misindexed_clusters : int
        Number of discs of points, each given one random wrong orientation.
    cluster_radius_um : float, optional
        Radius of those discs; two steps if omitted.

    Returns
    -------
    SampledMap

    Raises
    ------
    SettingError
        A setting out of range, or a sampled area that leaves the box.
    TypeError
        ``misindexed_clusters`` not a whole number.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=12, rng=1)
    >>> m = sample_map(micro, step_um=1.0, rng=2, nonindexed_fraction=0.01)
    >>> m.shape, int((m.phase == 0).sum()), m.euler_deg.shape
    ((40, 50), 20, (40, 50, 3))
    """
    checked(SettingError, check_positive, step_um, "step_um")
    checked(SettingError, check_one_of, grid, "grid", GRIDS)
    checked(SettingError, check_positive, noise_deg, "noise_deg", allow_zero=True)
    if not (np.isfinite(depth_um) and 0.0 <= depth_um <= micro.box_um[2]):
        raise SettingError(
            f"Expected `depth_um` to be in [0, {micro.box_um[2]}] (the box depth), "
            f"got {depth_um!r}."
        )
    if not (0.0 <= nonindexed_fraction < 1.0):
        raise SettingError(
            f"Expected `nonindexed_fraction` to be in [0, 1), got {nonindexed_fraction!r}."
        )
    if isinstance(misindexed_clusters, bool) or int(misindexed_clusters) != misindexed_clusters:
        raise TypeError(
            f"Expected `misindexed_clusters` to be a whole number, got {misindexed_clusters!r}."
        )
    if misindexed_clusters < 0:
        raise SettingError(
            f"Expected `misindexed_clusters` to be >= 0, got {misindexed_clusters!r}."
        )
    offset = as_float_array(offset_um, "offset_um")
    if offset.shape != (2,) or not np.all(np.isfinite(offset)):
        raise SettingError(f"Expected `offset_um` to be (dx, dy), got {offset_um!r}.")
    if shape is None:
        extent = micro.box_um[:2] if extent_um is None else tuple(extent_um)
        if len(extent) != 2 or min(extent) <= 0:
            raise SettingError(
                f"Expected `extent_um` to be (width, height) > 0, got {extent_um!r}."
            )
        shape = _fitting_shape(extent, step_um, grid)
    x, y = grid_positions_um(shape, step_um, grid=grid)
    xs, ys = x + offset[0], y + offset[1]
    tol = 1e-9 * max(micro.box_um)
    if (
        xs.min() < -tol
        or ys.min() < -tol
        or xs.max() > micro.box_um[0] + tol
        or (ys.max() > micro.box_um[1] + tol)
    ):
        raise SettingError(
            f"Expected the sampled area to lie inside the box [0, {micro.box_um[0]}] × "
            f"[0, {micro.box_um[1]}] µm, got x in [{xs.min():.6g}, {xs.max():.6g}], "
            f"y in [{ys.min():.6g}, {ys.max():.6g}]."
        )
    gen = np.random.default_rng(rng)
    h, w = x.shape
    pts = np.stack([xs.ravel(), ys.ravel(), np.full(xs.size, float(depth_um))], axis=1)
    region = region_at(micro, pts)
    quat = scatter_quat(micro.region_quat[region - 1], noise_deg, gen)
    phase = micro.region_phase[region - 1].copy()

    misindexed = np.zeros(h * w, dtype=bool)
    if misindexed_clusters:
        radius = 2.0 * step_um if cluster_radius_um is None else float(cluster_radius_um)
        checked(SettingError, check_positive, radius, "cluster_radius_um")
        centres = gen.choice(h * w, size=int(misindexed_clusters), replace=False)
        wrong = random_quat(int(misindexed_clusters), rng=gen)
        tree = cKDTree(pts[:, :2])
        for centre, q_wrong in zip(centres, wrong, strict=True):
            members = tree.query_ball_point(pts[centre, :2], radius)
            quat[members] = q_wrong
            misindexed[members] = True

    n_bad = int(round(nonindexed_fraction * h * w))
    if n_bad:
        bad = gen.choice(h * w, size=n_bad, replace=False)
        phase[bad] = 0
        misindexed[bad] = False
    indexed = phase != 0
    quat = np.where(indexed[:, None], quat, np.nan)
    euler = np.full((h * w, 3), np.nan)
    euler[indexed] = quat_as_euler_deg(quat[indexed])
    return SampledMap(
        euler_deg=frozen(euler.reshape(h, w, 3)),
        quat=frozen(quat.reshape(h, w, 4)),
        phase=frozen(phase.reshape(h, w)),
        grain_id=frozen(region.reshape(h, w)),
        misindexed=frozen(misindexed.reshape(h, w)),
        x_um=frozen(x),
        y_um=frozen(y),
        step_um=float(step_um),
        grid=grid,
        depth_um=float(depth_um),
        offset_um=(float(offset[0]), float(offset[1])),
    )


def recorded_in_frame(sample: SampledMap, *, rotation: str | ArrayLike = "z180") -> SampledMap:
    """The same map as recorded by an instrument whose data frame is turned against S.

    Derivation: let the data frame D be S turned by the rotation Q (the columns of Q are
    D's axes written in S, quaternion q_turn with ``quat_as_matrix(q_turn) = Q``), so
    ``v_S = Q v_D``. A crystal direction is the same physical vector either way, so
    ``v_C = g v_S = g Q v_D = g_D v_D`` for every v, hence ``g_D = g Q`` and
    ``q_D = q ⊗ q_turn`` (§3: product = matrix product). A plane normal read back
    naively as if D were S becomes ``g_Dᵀ n_C = Qᵀ gᵀ n_C = Qᵀ n_S``: for ``'z180'``
    (Q = diag(-1, -1, 1)) that is (-n_x, -n_y, n_z), the 180° ambiguity of
    conventions §6. Positions are not touched: only the orientation data refer to the
    turned frame. Q is what a job declares as the map's ``data_frame_rotation``
    (``frames.data_frame_quat``) to read the recorded map back into S.

    Parameters
    ----------
    sample : SampledMap
    rotation : {'x180', 'y180', 'z180'} or array_like, shape (4,)
        The frame turn Q: 180° about an axis of S, or its quaternion (scalar first).

    Returns
    -------
    SampledMap
        With ``quat``, ``euler_deg`` and ``frame_rotation`` replaced.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(20, 20, 10), n_grains=3, rng=1)
    >>> m = sample_map(micro, step_um=5.0, rng=0, noise_deg=0.0)
    >>> recorded_in_frame(m, rotation="z180").frame_rotation
    (0.0, 0.0, 0.0, 1.0)
    """
    if isinstance(rotation, str):
        checked(SettingError, check_one_of, rotation, "rotation", FRAME_TURNS)
        r = np.zeros(4)
        r[1 + FRAME_TURNS.index(rotation)] = 1.0
    else:
        r = as_float_array(rotation, "rotation")
        if r.shape != (4,):
            raise SettingError(f"Expected `rotation` to have shape (4,), got {r.shape}.")
        r = quat_normalise(r)
    indexed = sample.phase != 0
    quat = np.full(sample.quat.shape, np.nan)
    quat[indexed] = quat_reduce(quat_multiply(sample.quat[indexed], r))
    euler = np.full(sample.euler_deg.shape, np.nan)
    euler[indexed] = quat_as_euler_deg(quat[indexed])
    # A second turn Q2 of an already turned frame Q1 gives v_S = Q1 Q2 v_D2.
    previous = np.asarray(sample.frame_rotation, dtype=float)
    total = quat_reduce(quat_multiply(previous, r))
    return dataclasses.replace(
        sample,
        quat=frozen(quat),
        euler_deg=frozen(euler),
        frame_rotation=tuple(float(v) + 0.0 for v in total),
    )


def as_orientation_map(sample: SampledMap) -> OrientationMap:
    """The sampled map as the record the analysis stages take (``maps.OrientationMap``).

    The orientations are taken as recorded: declared axes are S itself and no
    data-frame rotation is declared, so a map from :func:`recorded_in_frame` is handed
    over with its frame error, as an unaware user would read it.

    Parameters
    ----------
    sample : SampledMap

    Returns
    -------
    inclination.maps.OrientationMap
        ``quat`` (H, W, 4) float32, ``phase``, ``valid = phase != 0``, the grid and step.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(20, 20, 10), n_grains=3, rng=1)
    >>> omap = as_orientation_map(sample_map(micro, step_um=0.5, rng=0))
    >>> omap.shape, omap.quat.shape, omap.step_x_um
    ((40, 40), (40, 40, 4), 0.5)
    """
    if not isinstance(sample, SampledMap):
        raise TypeError(f"Expected `sample` to be a SampledMap, got {type(sample).__name__}.")
    indexed = sample.phase != 0
    quat = np.where(indexed[..., None], sample.quat, np.array([1.0, 0.0, 0.0, 0.0]))
    return OrientationMap(
        quat,
        sample.phase,
        grid=sample.grid,
        step_x_um=sample.step_um,
        step_y_um=sample.step_um,
        provenance={"reader": "inclination.synthetic", "depth_um": sample.depth_um},
    )
