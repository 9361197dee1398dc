"""Synthetic 3D microstructures with known planes, and their sections (the test oracle).

A :class:`Microstructure` is a box of Voronoi grains: every point belongs to the
grain of its nearest seed, so every grain face lies on the perpendicular bisector
plane of two seeds and its normal is known exactly. Chosen grains hold one
annealing-twin lamella: a slab between two parallel twin planes of the parent in
which the crystal is the parent turned 180° about the twin-plane normal. For a
cubic phase that is a {111} plane and a rotation about <111> (the Σ3 relation);
for a hexagonal phase a {10-12} plane.

Everything here works in the sample frame S of conventions §2 (X right, Y down,
Z into the material), in micrometres; the surface is the plane z = 0 and depth
is +z. Orientations are passive (``v_crystal = g @ v_sample``, §3).

Grains and twin lamellae are *regions*, numbered from 1: regions
1..G are the Voronoi grains (seed k - 1 of ``seeds_um``), regions G+1..G+T are
the lamellae in the order of ``micro.lamellae``. A sampled map's ``grain_id``
holds these region ids. A lamella can cut its parent's section in two; both pieces
keep the parent's id (a segmenter will see two grains there).

Sections of the sample:

- :func:`sample_map`: the orientation map of a plane at a chosen depth, on a
  square or hexagonal grid (§1), with orientation noise, non-indexed points and
  clusters of wrongly indexed points; serial sections are maps at depth h.
- :func:`recorded_in_frame`: the same map as an instrument whose data frame is
  turned against S would record it (for the frame audit and the comparator).
- :func:`cross_section_crossings` and :func:`simulate_cross_section`: the
  boundaries a milled face along a section line meets, as the job file lists
  them (§7).
- :func:`ground_truth`: every grain and boundary plane as JSON-ready data.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.spatial import Voronoi, cKDTree

from .._validation import as_float_array, check_finite, check_one_of, check_positive
from ..crystal.rotations import (
    quat_apply,
    quat_as_euler_deg,
    quat_from_axis_angle_deg,
    quat_inverse,
    quat_multiply,
    quat_normalise,
    quat_reduce,
    random_quat,
)

__all__ = [
    "TwinSpec",
    "TwinLamella",
    "Microstructure",
    "SampledMap",
    "twin_planes_crystal",
    "make_microstructure",
    "region_at",
    "grid_positions_um",
    "sample_map",
    "recorded_in_frame",
    "as_orientation_map",
    "boundary_normals_sample",
    "plane_geometry",
    "cross_section_crossings",
    "simulate_cross_section",
    "ground_truth",
]

GRIDS = ("square", "hexagonal")
FRAME_TURNS = ("x180", "y180", "z180")
_CUBIC_LAUE = ("m-3m", "m-3")
_HEXAGONAL_LAUE = ("6/mmm", "6/m")
# The four {111} planes up to sign, and the six {10-12} planes up to sign.
_CUBIC_TWIN_PLANES = ((1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1))
_HEXAGONAL_TWIN_PLANES = (
    (1, 0, -1, 2),
    (0, 1, -1, 2),
    (-1, 1, 0, 2),
    (-1, 0, 1, 2),
    (0, -1, 1, 2),
    (1, -1, 0, 2),
)
# §5: a plane whose normal is within 1° of Z_S has no usable trace.
_COS_1_DEG = float(np.cos(np.deg2rad(1.0)))
# Below this |n_z| a plane counts as vertical and its dip direction is undefined (§5).
_VERTICAL = 1e-9


@dataclass(frozen=True)
class TwinSpec:
    """One twin lamella to place in a grain.

    Parameters
    ----------
    grain : int
        Region id of the parent grain (1..G).
    plane : int
        Index into :func:`twin_planes_crystal` of the parent's phase.
    thickness_um : float
        Distance between the two bounding planes.
    through_um : tuple of 3 floats, optional
        A point in S (µm) on the lamella's mid-plane; the parent's seed if omitted.
    """

    grain: int
    plane: int
    thickness_um: float
    through_um: tuple[float, float, float] | None = None


@dataclass(frozen=True)
class TwinLamella:
    """A twin lamella inside its parent grain: the points x with lower_um <= n·x <= upper_um.

    ``normal_sample`` is the twin-plane normal n in S (gᵀ n_C of the parent, §5),
    ``normal_crystal`` the same normal in the parent's crystal frame C (unit),
    ``indices`` its Miller (or Miller–Bravais) indices as text, e.g. ``"(1 1 -1)"``.
    ``quat`` is the lamella's orientation ``s ⊗ q_parent``, s the 180° turn about n_C.
    """

    parent: int
    region: int
    normal_sample: tuple[float, float, float]
    normal_crystal: tuple[float, float, float]
    indices: str
    lower_um: float
    upper_um: float
    quat: tuple[float, float, float, float]


@dataclass(frozen=True, eq=False)
class Microstructure:
    """A box of Voronoi grains with twin lamellae; see the module docstring for region ids.

    Attributes
    ----------
    box_um : tuple of 3 floats
        (Lx, Ly, Lz): the box is [0, Lx] × [0, Ly] × [0, Lz] in S; z = 0 is the surface.
    seeds_um : ndarray, shape (G, 3)
        Voronoi seeds in S (µm); grain k (region k) has seed k - 1.
    region_quat : ndarray, shape (R, 4)
        Orientation of each region (sample to crystal, §3); row r - 1 is region r.
    region_phase : ndarray, shape (R,)
        Phase id of each region.
    region_parent : ndarray, shape (R,)
        The grain each region lies in (a grain is its own parent).
    lamellae : tuple of TwinLamella
        Regions G+1.. in order.
    phases : tuple
        The phase records (``inclination.crystal.lattice.Phase``) of the sample.
    grain_pairs : ndarray, shape (M, 2)
        Pairs (a < b) of grains that share a face inside the box.
    """

    box_um: tuple[float, float, float]
    seeds_um: np.ndarray
    region_quat: np.ndarray
    region_phase: np.ndarray
    region_parent: np.ndarray
    lamellae: tuple[TwinLamella, ...]
    phases: tuple
    grain_pairs: np.ndarray

    @property
    def n_grains(self) -> int:
        """Number of Voronoi grains G."""
        return len(self.seeds_um)

    @property
    def n_regions(self) -> int:
        """Number of regions R = G + number of lamellae."""
        return len(self.region_quat)


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


def _frozen(arr: np.ndarray) -> np.ndarray:
    arr = np.ascontiguousarray(arr)
    arr.setflags(write=False)
    return arr


def _format_indices(values) -> str:
    return "(" + " ".join(str(int(v)) for v in values) + ")"


def twin_planes_crystal(phase) -> tuple[np.ndarray, tuple[str, ...]]:
    """The twin planes of a phase: unit normals in its crystal frame C and their indices.

    Cubic phases (Laue m-3m, m-3) twin on {111} (four planes up to sign); hexagonal
    phases (6/mmm, 6/m) on {10-12} (six planes up to sign). The twin is the parent
    turned 180° about the plane normal.

    Parameters
    ----------
    phase : inclination.crystal.lattice.Phase
        Needs ``laue``; a hexagonal phase also needs ``lattice`` (§4 reciprocal vectors).

    Returns
    -------
    normals_crystal : ndarray, shape (K, 3)
        Unit plane normals in C.
    labels : tuple of str
        Indices as text, e.g. ``"(1 1 -1)"`` or ``"(1 0 -1 2)"``.

    Examples
    --------
    >>> from inclination.crystal.lattice import Phase
    >>> steel = Phase.from_dict({"id": 1, "name": "steel", "laue": "m-3m",
    ...     "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90}})
    >>> normals, labels = twin_planes_crystal(steel)
    >>> labels[3], (normals[3] * 3**0.5).round(6).tolist()
    ('(1 1 -1)', [1.0, 1.0, -1.0])
    """
    check_one_of(phase.laue, "phase.laue", _CUBIC_LAUE + _HEXAGONAL_LAUE)
    if phase.laue in _CUBIC_LAUE:
        # In a cubic cell the (hkl) normal is parallel to [hkl] (§4 with a* ∥ a).
        hkl = np.array(_CUBIC_TWIN_PLANES, dtype=float)
        return hkl / np.linalg.norm(hkl, axis=1, keepdims=True), tuple(
            _format_indices(v) for v in _CUBIC_TWIN_PLANES
        )
    from ..crystal.lattice import plane_normals_crystal

    normals = np.asarray(plane_normals_crystal(phase.lattice, _HEXAGONAL_TWIN_PLANES))
    return normals, tuple(_format_indices(v) for v in _HEXAGONAL_TWIN_PLANES)


def _default_phases():
    from ..crystal.lattice import Phase

    # An austenitic (FCC) matrix; a = 3.59 Å is typical of such steels (from memory).
    return (
        Phase.from_dict(
            {
                "id": 1,
                "name": "austenite",
                "laue": "m-3m",
                "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
            }
        ),
    )


def _check_box(box_um) -> tuple[float, float, float]:
    box = as_float_array(box_um, "box_um")
    if box.shape != (3,) or not np.all(np.isfinite(box)) or np.any(box <= 0):
        raise ValueError(
            f"Expected `box_um` to be three finite lengths > 0 (Lx, Ly, Lz), got {box_um!r}."
        )
    return tuple(float(v) for v in box)


def _grain_pairs(seeds: np.ndarray, box: tuple[float, float, float]) -> np.ndarray:
    """Pairs of grains sharing a face inside the box.

    Reflecting every seed in the six box faces makes the box faces Voronoi faces, so
    the Voronoi cells of the original seeds are exactly their cells clipped to the box
    and a ridge between two original seeds is a face inside the box.
    """
    g = len(seeds)
    if g == 1:
        return np.zeros((0, 2), dtype=np.int64)
    images = [seeds]
    for axis in range(3):
        for wall in (0.0, box[axis]):
            mirrored = seeds.copy()
            mirrored[:, axis] = 2.0 * wall - mirrored[:, axis]
            images.append(mirrored)
    ridges = Voronoi(np.concatenate(images)).ridge_points
    inner = ridges[(ridges[:, 0] < g) & (ridges[:, 1] < g)]
    pairs = np.sort(inner, axis=1) + 1
    return np.unique(pairs, axis=0)


def _scatter(q0: np.ndarray, spread_deg: float, n: int, gen) -> np.ndarray:
    """n orientations ``dq ⊗ q0`` with rotation vectors normal, RMS angle spread_deg."""
    if spread_deg == 0:
        return np.broadcast_to(q0, (n, 4)).copy()
    rotvec = gen.normal(0.0, np.deg2rad(spread_deg) / np.sqrt(3.0), (n, 3))
    angle = np.linalg.norm(rotvec, axis=1)
    dq = quat_from_axis_angle_deg(rotvec, np.rad2deg(angle))
    return quat_reduce(quat_multiply(dq, q0))


def _orientations(texture, spread_deg: float, n: int, gen) -> np.ndarray:
    if texture is None:
        return random_quat(n, rng=gen)
    q = as_float_array(texture, "texture")
    if q.shape == (4,):
        return _scatter(quat_normalise(q), spread_deg, n, gen)
    if q.shape == (n, 4):
        return quat_reduce(quat_normalise(q))
    raise ValueError(f"Expected `texture` to have shape (4,) or ({n}, 4), got {q.shape}.")


def _surface_sections(seeds: np.ndarray, box) -> tuple[np.ndarray, np.ndarray]:
    """Area (points) and centroid of each grain's section by the surface, on a coarse grid."""
    step = min(box[0], box[1]) / 150.0
    xs = np.arange(step / 2, box[0], step)
    ys = np.arange(step / 2, box[1], step)
    xx, yy = np.meshgrid(xs, ys)
    pts = np.stack([xx.ravel(), yy.ravel(), np.zeros(xx.size)], axis=1)
    nearest = cKDTree(seeds).query(pts)[1]
    g = len(seeds)
    count = np.bincount(nearest, minlength=g).astype(float)
    cx = np.bincount(nearest, weights=pts[:, 0], minlength=g) / np.maximum(count, 1)
    cy = np.bincount(nearest, weights=pts[:, 1], minlength=g) / np.maximum(count, 1)
    return count, np.stack([cx, cy, np.zeros(g)], axis=1)


def _random_twin_specs(
    n_twins: int,
    seeds,
    quat,
    phase_ids,
    phases_by_id,
    box,
    thickness_range,
    min_dip_deg,
    gen,
) -> list[TwinSpec]:
    area, centroid = _surface_sections(seeds, box)
    # Twin lamellae are put where a surface map will show them: in grains with a large
    # section, through the section's centre, on a plane steep enough to show as a band.
    twinning = np.array(
        [phases_by_id[int(p)].laue in _CUBIC_LAUE + _HEXAGONAL_LAUE for p in phase_ids]
    )
    large = area >= max(np.median(area[area > 0]), 1.0)
    eligible = np.flatnonzero(large & twinning)
    if n_twins > len(eligible):
        raise ValueError(
            f"Expected `twins` to be at most {len(eligible)} (grains of a twinning phase with "
            f"a large surface section), got {n_twins}."
        )
    chosen = gen.choice(eligible, size=n_twins, replace=False)
    specs = []
    for k in chosen:
        normals_c, _ = twin_planes_crystal(phases_by_id[int(phase_ids[k])])
        normals_s = _crystal_to_sample(quat[k], normals_c)
        dip = np.rad2deg(np.arccos(np.clip(np.abs(normals_s[:, 2]), 0.0, 1.0)))
        steep = np.flatnonzero(dip >= min_dip_deg)
        plane = int(gen.choice(steep)) if len(steep) else int(np.argmax(dip))
        thickness = float(gen.uniform(*thickness_range))
        specs.append(TwinSpec(int(k) + 1, plane, thickness, tuple(float(v) for v in centroid[k])))
    return specs


def _crystal_to_sample(quat: np.ndarray, vectors_crystal: np.ndarray) -> np.ndarray:
    # §5: n_S = gᵀ n_C, and gᵀ is the orientation of the inverse quaternion.
    return quat_apply(quat_inverse(quat), vectors_crystal)


def make_microstructure(
    *,
    box_um,
    n_grains: int,
    rng,
    phases=None,
    phase_fractions=None,
    twins=0,
    twin_thickness_um=(2.0, 5.0),
    min_twin_dip_deg: float = 35.0,
    texture=None,
    texture_spread_deg: float = 10.0,
) -> Microstructure:
    """Build a box of Voronoi grains with annealing-twin lamellae.

    Parameters
    ----------
    box_um : tuple of 3 floats
        (Lx, Ly, Lz) in µm; the box spans [0, L] on each axis of S, z = 0 is the surface.
    n_grains : int
        Number of Voronoi seeds, >= 1, drawn uniformly in the box.
    rng : None, int or numpy.random.Generator
        Seed of everything random here.
    phases : sequence of inclination.crystal.lattice.Phase, optional
        Default: one FCC phase (id 1, Laue m-3m).
    phase_fractions : sequence of float, optional
        Probability of each phase per grain; equal if omitted.
    twins : int or sequence of TwinSpec
        An int n twins n grains chosen at random among those with a large surface
        section, each with one lamella through the centre of that section, on a randomly
        chosen twin plane with a dip of at least ``min_twin_dip_deg`` (the steepest if
        none is), of a thickness drawn uniformly from ``twin_thickness_um``; only grains
        of a twinning phase (cubic {111}, hexagonal {10-12}) are chosen.
        Explicit specs place lamellae exactly; a grain may hold at most one lamella.
    twin_thickness_um : tuple of 2 floats
        Range of random lamella thicknesses.
    min_twin_dip_deg : float
        Smallest dip of a random twin plane.
    texture : array_like, shape (4,) or (n_grains, 4), optional
        None: random orientations. (4,): orientations scattered about this one with
        rotation angles of RMS ``texture_spread_deg``. (n_grains, 4): these orientations.

    Returns
    -------
    Microstructure

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=12, rng=1,
    ...                             twins=[TwinSpec(grain=3, plane=0, thickness_um=2.0)])
    >>> micro.n_grains, micro.n_regions, micro.lamellae[0].indices
    (12, 13, '(1 1 1)')
    """
    box = _check_box(box_um)
    if isinstance(n_grains, bool) or int(n_grains) != n_grains or n_grains < 1:
        raise ValueError(f"Expected `n_grains` to be a whole number >= 1, got {n_grains!r}.")
    n_grains = int(n_grains)
    gen = np.random.default_rng(rng)
    phases = _default_phases() if phases is None else tuple(phases)
    if len(phases) == 0:
        raise ValueError("Expected `phases` to hold at least one phase, got none.")
    phases_by_id = {int(p.id): p for p in phases}
    if len(phases_by_id) != len(phases) or min(phases_by_id) < 1:
        raise ValueError(
            f"Expected `phases` to have distinct ids >= 1, got {[p.id for p in phases]}."
        )
    if phase_fractions is None:
        fractions = np.full(len(phases), 1.0 / len(phases))
    else:
        fractions = as_float_array(phase_fractions, "phase_fractions")
        if fractions.shape != (len(phases),) or np.any(fractions < 0) or fractions.sum() <= 0:
            raise ValueError(
                f"Expected `phase_fractions` to be {len(phases)} numbers >= 0 with a "
                f"positive sum, got {phase_fractions!r}."
            )
        fractions = fractions / fractions.sum()
    check_positive(texture_spread_deg, "texture_spread_deg", allow_zero=True)

    seeds = gen.uniform(0.0, 1.0, (n_grains, 3)) * np.array(box)
    ids = np.array([int(p.id) for p in phases])
    grain_phase = ids[gen.choice(len(phases), size=n_grains, p=fractions)]
    grain_quat = _orientations(texture, texture_spread_deg, n_grains, gen)

    if isinstance(twins, int | np.integer) and not isinstance(twins, bool):
        if twins < 0:
            raise ValueError(f"Expected `twins` to be >= 0 or a list of TwinSpec, got {twins}.")
        lo, hi = (float(v) for v in twin_thickness_um)
        if not (0 < lo <= hi):
            raise ValueError(
                f"Expected `twin_thickness_um` to be (low, high) with 0 < low <= high, "
                f"got {twin_thickness_um!r}."
            )
        specs = (
            _random_twin_specs(
                int(twins),
                seeds,
                grain_quat,
                grain_phase,
                phases_by_id,
                box,
                (lo, hi),
                min_twin_dip_deg,
                gen,
            )
            if twins
            else []
        )
    elif isinstance(twins, Sequence) and not isinstance(twins, str):
        specs = list(twins)
    else:
        raise TypeError(
            f"Expected `twins` to be an int or a sequence of TwinSpec, got {type(twins).__name__}."
        )
    lamellae = _make_lamellae(specs, seeds, grain_quat, grain_phase, phases_by_id)

    twin_quat = np.array([lam.quat for lam in lamellae], dtype=float).reshape(-1, 4)
    region_quat = np.concatenate([grain_quat, twin_quat])
    region_parent = np.concatenate(
        [np.arange(1, n_grains + 1), np.array([lam.parent for lam in lamellae], dtype=int)]
    ).astype(np.int64)
    region_phase = grain_phase[region_parent - 1].astype(np.int64)
    return Microstructure(
        box_um=box,
        seeds_um=_frozen(seeds),
        region_quat=_frozen(region_quat),
        region_phase=_frozen(region_phase),
        region_parent=_frozen(region_parent),
        lamellae=tuple(lamellae),
        phases=phases,
        grain_pairs=_frozen(_grain_pairs(seeds, box)),
    )


def _make_lamellae(specs, seeds, grain_quat, grain_phase, phases_by_id) -> list[TwinLamella]:
    lamellae = []
    used = set()
    n_grains = len(seeds)
    for index, spec in enumerate(specs):
        if not isinstance(spec, TwinSpec):
            raise TypeError(
                f"Expected `twins[{index}]` to be a TwinSpec, got {type(spec).__name__}."
            )
        if not (1 <= spec.grain <= n_grains):
            raise ValueError(
                f"Expected `twins[{index}].grain` to be a grain id in 1..{n_grains}, "
                f"got {spec.grain}."
            )
        if spec.grain in used:
            raise ValueError(
                f"Expected `twins` to name each grain at most once, got grain {spec.grain} twice."
            )
        used.add(spec.grain)
        check_positive(spec.thickness_um, f"twins[{index}].thickness_um")
        k = spec.grain - 1
        normals_c, labels = twin_planes_crystal(phases_by_id[int(grain_phase[k])])
        if not (0 <= spec.plane < len(normals_c)):
            raise ValueError(
                f"Expected `twins[{index}].plane` to be in 0..{len(normals_c) - 1}, "
                f"got {spec.plane}."
            )
        n_c = normals_c[spec.plane]
        n_s = _crystal_to_sample(grain_quat[k], n_c)
        through = seeds[k] if spec.through_um is None else np.asarray(spec.through_um, float)
        middle = float(n_s @ through)
        # The 180° turn about n_C, applied in the crystal frame: g_twin = S g_parent,
        # i.e. q_twin = s ⊗ q_parent (§3: quaternion product = matrix product).
        s = np.concatenate([[0.0], n_c])
        q_twin = quat_reduce(quat_multiply(s, grain_quat[k]))
        lamellae.append(
            TwinLamella(
                parent=spec.grain,
                region=n_grains + index + 1,
                normal_sample=tuple(float(v) for v in n_s),
                normal_crystal=tuple(float(v) for v in n_c),
                indices=labels[spec.plane],
                lower_um=middle - 0.5 * spec.thickness_um,
                upper_um=middle + 0.5 * spec.thickness_um,
                quat=tuple(float(v) for v in q_twin),
            )
        )
    return lamellae


def region_at(micro: Microstructure, points_um) -> np.ndarray:
    """Region id of points in S.

    Parameters
    ----------
    micro : Microstructure
    points_um : array_like, shape (N, 3)
        Points in S, µm (outside the box they still get their nearest grain).

    Returns
    -------
    ndarray of int, shape (N,)
        Region ids (1..R).

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=5, rng=1)
    >>> region_at(micro, micro.seeds_um).tolist()
    [1, 2, 3, 4, 5]
    """
    pts = as_float_array(points_um, "points_um")
    if pts.ndim != 2 or pts.shape[1] != 3:
        raise ValueError(f"Expected `points_um` to have shape (N, 3), got {pts.shape}.")
    check_finite(pts, "points_um")
    region = cKDTree(micro.seeds_um).query(pts)[1].astype(np.int64) + 1
    for lam in micro.lamellae:
        inside = np.flatnonzero(region == lam.parent)
        distance = pts[inside] @ np.asarray(lam.normal_sample)
        region[inside[(distance >= lam.lower_um) & (distance <= lam.upper_um)]] = lam.region
    return region


def grid_positions_um(shape, step_um: float, *, grid: str = "square"):
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
    check_one_of(grid, "grid", GRIDS)
    check_positive(step_um, "step_um")
    h, w = (int(v) for v in shape)
    if h < 1 or w < 1:
        raise ValueError(f"Expected `shape` to be (H, W) with H, W >= 1, got {shape!r}.")
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


def _noisy(quat: np.ndarray, noise_deg: float, gen) -> np.ndarray:
    if noise_deg == 0 or len(quat) == 0:
        return quat
    rotvec = gen.normal(0.0, np.deg2rad(noise_deg) / np.sqrt(3.0), (len(quat), 3))
    angle = np.rad2deg(np.linalg.norm(rotvec, axis=1))
    return quat_reduce(quat_multiply(quat_from_axis_angle_deg(rotvec, angle), quat))


def sample_map(
    micro: Microstructure,
    *,
    step_um: float,
    rng,
    depth_um: float = 0.0,
    shape=None,
    extent_um=None,
    grid: str = "square",
    offset_um=(0.0, 0.0),
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

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=12, rng=1)
    >>> m = sample_map(micro, step_um=1.0, rng=2, nonindexed_fraction=0.01)
    >>> m.shape, int((m.phase == 0).sum()), m.euler_deg.shape
    ((40, 50), 20, (40, 50, 3))
    """
    check_positive(step_um, "step_um")
    check_one_of(grid, "grid", GRIDS)
    check_positive(noise_deg, "noise_deg", allow_zero=True)
    if not (np.isfinite(depth_um) and 0.0 <= depth_um <= micro.box_um[2]):
        raise ValueError(
            f"Expected `depth_um` to be in [0, {micro.box_um[2]}] (the box depth), "
            f"got {depth_um!r}."
        )
    if not (0.0 <= nonindexed_fraction < 1.0):
        raise ValueError(
            f"Expected `nonindexed_fraction` to be in [0, 1), got {nonindexed_fraction!r}."
        )
    if isinstance(misindexed_clusters, bool) or int(misindexed_clusters) != misindexed_clusters:
        raise TypeError(
            f"Expected `misindexed_clusters` to be a whole number, got {misindexed_clusters!r}."
        )
    if misindexed_clusters < 0:
        raise ValueError(f"Expected `misindexed_clusters` to be >= 0, got {misindexed_clusters!r}.")
    offset = as_float_array(offset_um, "offset_um")
    if offset.shape != (2,) or not np.all(np.isfinite(offset)):
        raise ValueError(f"Expected `offset_um` to be (dx, dy), got {offset_um!r}.")
    if shape is None:
        extent = micro.box_um[:2] if extent_um is None else tuple(extent_um)
        if len(extent) != 2 or min(extent) <= 0:
            raise ValueError(f"Expected `extent_um` to be (width, height) > 0, got {extent_um!r}.")
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
        raise ValueError(
            f"Expected the sampled area to lie inside the box [0, {micro.box_um[0]}] × "
            f"[0, {micro.box_um[1]}] µm, got x in [{xs.min():.6g}, {xs.max():.6g}], "
            f"y in [{ys.min():.6g}, {ys.max():.6g}]."
        )
    gen = np.random.default_rng(rng)
    h, w = x.shape
    pts = np.stack([xs.ravel(), ys.ravel(), np.full(xs.size, float(depth_um))], axis=1)
    region = region_at(micro, pts)
    quat = _noisy(micro.region_quat[region - 1], noise_deg, gen)
    phase = micro.region_phase[region - 1].copy()

    misindexed = np.zeros(h * w, dtype=bool)
    if misindexed_clusters:
        radius = 2.0 * step_um if cluster_radius_um is None else float(cluster_radius_um)
        check_positive(radius, "cluster_radius_um")
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
        euler_deg=_frozen(euler.reshape(h, w, 3)),
        quat=_frozen(quat.reshape(h, w, 4)),
        phase=_frozen(phase.reshape(h, w)),
        grain_id=_frozen(region.reshape(h, w)),
        misindexed=_frozen(misindexed.reshape(h, w)),
        x_um=_frozen(x),
        y_um=_frozen(y),
        step_um=float(step_um),
        grid=grid,
        depth_um=float(depth_um),
        offset_um=(float(offset[0]), float(offset[1])),
    )


def recorded_in_frame(sample: SampledMap, *, rotation="z180") -> SampledMap:
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
    >>> micro = make_microstructure(box_um=(20, 20, 10), n_grains=3, rng=1)
    >>> m = sample_map(micro, step_um=5.0, rng=0, noise_deg=0.0)
    >>> recorded_in_frame(m, rotation="z180").frame_rotation
    (0.0, 0.0, 0.0, 1.0)
    """
    if isinstance(rotation, str):
        check_one_of(rotation, "rotation", FRAME_TURNS)
        r = np.zeros(4)
        r[1 + FRAME_TURNS.index(rotation)] = 1.0
    else:
        r = as_float_array(rotation, "rotation")
        if r.shape != (4,):
            raise ValueError(f"Expected `rotation` to have shape (4,), got {r.shape}.")
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
        quat=_frozen(quat),
        euler_deg=_frozen(euler),
        frame_rotation=tuple(float(v) + 0.0 for v in total),
    )


def as_orientation_map(sample: SampledMap):
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
    >>> micro = make_microstructure(box_um=(20, 20, 10), n_grains=3, rng=1)
    >>> omap = as_orientation_map(sample_map(micro, step_um=0.5, rng=0))
    >>> omap.shape, omap.quat.shape, omap.step_x_um
    ((40, 40), (40, 40, 4), 0.5)
    """
    from ..maps import OrientationMap

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


def _region_ids(micro: Microstructure, values, name: str) -> np.ndarray:
    ids = np.asarray(values)
    if ids.dtype.kind not in "iu":
        raise TypeError(f"Expected `{name}` to hold integer region ids, got dtype {ids.dtype}.")
    if ids.size and (ids.min() < 1 or ids.max() > micro.n_regions):
        raise ValueError(
            f"Expected `{name}` to hold region ids in 1..{micro.n_regions}, "
            f"got values in [{ids.min()}, {ids.max()}]."
        )
    return ids.astype(np.int64)


def boundary_normals_sample(micro: Microstructure, region_a, region_b) -> np.ndarray:
    """The true boundary-plane normal in S between pairs of regions.

    Regions in different grains meet on the bisector plane of the two grains' seeds; the
    normal is oriented from a's seed toward b's (it is the face plane whether or not
    the two cells touch). A lamella and its parent meet on the twin plane (normal
    ``TwinLamella.normal_sample``, sign as stored). Other pairs (a region with itself,
    two lamellae of one grain) give NaN.

    Parameters
    ----------
    micro : Microstructure
    region_a, region_b : array_like of int, shape (N,)

    Returns
    -------
    ndarray, shape (N, 3)
        Unit normals in S.

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=4, rng=1)
    >>> n = boundary_normals_sample(micro, [1], [2])[0]
    >>> d = micro.seeds_um[1] - micro.seeds_um[0]
    >>> (n - d / (d @ d) ** 0.5).round(6).tolist()
    [0.0, 0.0, 0.0]
    """
    a = _region_ids(micro, np.atleast_1d(region_a), "region_a")
    b = _region_ids(micro, np.atleast_1d(region_b), "region_b")
    if a.shape != b.shape or a.ndim != 1:
        raise ValueError(
            f"Expected `region_a` and `region_b` to be 1-D of one length, got {a.shape} "
            f"and {b.shape}."
        )
    pa = micro.region_parent[a - 1]
    pb = micro.region_parent[b - 1]
    d = micro.seeds_um[pb - 1] - micro.seeds_um[pa - 1]
    length = np.linalg.norm(d, axis=1, keepdims=True)
    normals = np.where(length > 0, d / np.where(length > 0, length, 1.0), np.nan)
    twin_normals = np.full((micro.n_regions + 1, 3), np.nan)
    for lam in micro.lamellae:
        twin_normals[lam.region] = lam.normal_sample
    same = pa == pb
    # Within one grain only a lamella against its own parent is a twin-plane pair.
    lam_side = np.where(a > micro.n_grains, a, b)
    other = np.where(a > micro.n_grains, b, a)
    is_twin_pair = same & (other == pa) & (lam_side != other)
    normals[same] = np.nan
    normals[is_twin_pair] = twin_normals[lam_side[is_twin_pair]]
    return normals


def plane_geometry(normals_sample) -> dict[str, np.ndarray]:
    """Trace angle, dip and dip azimuth of planes in S (conventions §5).

    Parameters
    ----------
    normals_sample : array_like, shape (N, 3)
        Plane normals in S (either sign, any length > 0).

    Returns
    -------
    dict of ndarray, each shape (N,)
        ``trace_angle_deg`` in [0, 180) (NaN when |n_z| > cos 1°), ``dip_deg`` in
        [0, 90], ``dip_azimuth_deg`` in [0, 360) from +X toward +Y (NaN for a vertical
        or a horizontal plane, whose dip direction is undefined).

    Examples
    --------
    >>> g = plane_geometry([[1.0, 0.0, 1.0]])
    >>> [round(float(g[k][0]), 6) for k in ("trace_angle_deg", "dip_deg", "dip_azimuth_deg")]
    [90.0, 45.0, 180.0]
    """
    n = as_float_array(normals_sample, "normals_sample")
    if n.ndim != 2 or n.shape[1] != 3:
        raise ValueError(f"Expected `normals_sample` to have shape (N, 3), got {n.shape}.")
    n = n / np.linalg.norm(n, axis=1, keepdims=True)
    nx, ny, nz = n[:, 0], n[:, 1], n[:, 2]
    # t = Z_S × n = (-n_y, n_x, 0).
    trace = np.rad2deg(np.arctan2(nx, -ny)) % 180.0
    trace = np.where(np.abs(nz) > _COS_1_DEG, np.nan, trace)
    trace = np.where(trace >= 180.0 - 1e-10, 0.0, trace)
    dip = np.rad2deg(np.arccos(np.clip(np.abs(nz), 0.0, 1.0)))
    # d = -sign(n_z) (n_x, n_y) / |(n_x, n_y)|.
    sign = -np.sign(nz)
    azimuth = np.rad2deg(np.arctan2(sign * ny, sign * nx)) % 360.0
    horizontal = np.hypot(nx, ny) < _VERTICAL
    azimuth = np.where((np.abs(nz) < _VERTICAL) | horizontal, np.nan, azimuth)
    azimuth = np.where(azimuth >= 360.0 - 1e-10, 0.0, azimuth)
    return {"trace_angle_deg": trace + 0.0, "dip_deg": dip, "dip_azimuth_deg": azimuth + 0.0}


def _section_line(micro: Microstructure, line_um, viewer_at_um):
    line = as_float_array(line_um, "line_um")
    if line.shape != (2, 2) or not np.all(np.isfinite(line)):
        raise ValueError(f"Expected `line_um` to be ((x0, y0), (x1, y1)), got {line_um!r}.")
    viewer = as_float_array(viewer_at_um, "viewer_at_um")
    if viewer.shape != (2,) or not np.all(np.isfinite(viewer)):
        raise ValueError(f"Expected `viewer_at_um` to be (x, y), got {viewer_at_um!r}.")
    lx, ly, _ = micro.box_um
    if line.min() < 0 or line[:, 0].max() > lx or line[:, 1].max() > ly:
        raise ValueError(
            f"Expected `line_um` to lie inside the box [0, {lx}] × [0, {ly}] µm, "
            f"got {line.tolist()}."
        )
    p0 = np.array([line[0, 0], line[0, 1], 0.0])
    along = np.array([line[1, 0] - line[0, 0], line[1, 1] - line[0, 1], 0.0])
    length = float(np.linalg.norm(along))
    if length == 0:
        raise ValueError(f"Expected `line_um` to join two distinct points, got {line.tolist()}.")
    u = along / length
    v = np.array([viewer[0] - p0[0], viewer[1] - p0[1], 0.0])
    v = v - (v @ u) * u
    if np.linalg.norm(v) < 1e-9 * length:
        raise ValueError(
            f"Expected `viewer_at_um` to lie off the section line, got {viewer.tolist()} "
            "on the line."
        )
    return p0, u, length, v / np.linalg.norm(v)


def _pair_plane(micro: Microstructure, a: int, b: int):
    """Normal and the offsets c (n·x = c) of the planes on which regions a and b can meet."""
    pa, pb = int(micro.region_parent[a - 1]), int(micro.region_parent[b - 1])
    if pa != pb:
        sa, sb = micro.seeds_um[pa - 1], micro.seeds_um[pb - 1]
        n = (sb - sa) / np.linalg.norm(sb - sa)
        return n, (float(n @ (sa + sb)) / 2.0,), False
    lam = micro.lamellae[max(a, b) - micro.n_grains - 1]
    return np.asarray(lam.normal_sample), (lam.lower_um, lam.upper_um), True


def cross_section_crossings(
    micro: Microstructure,
    *,
    line_um,
    viewer_at_um,
    imaging_tilt_deg: float,
    max_depth_um: float,
    face_inclination_deg: float = 90.0,
    resolution_um: float = 0.01,
) -> dict[str, np.ndarray]:
    """Every boundary a milled face along a section line meets, with its true geometry (§7).

    The face contains the section line (on the surface, z = 0) and goes down from it
    along ``w = cos θ·V + sin θ·Z_S``, θ = ``face_inclination_deg`` (90: vertical) and V
    the in-plane unit vector from the line toward the viewer, so a face that is not
    vertical slopes down toward the viewer's (trench) side. The viewer sees the face
    with the surface at the top; image-right is ``V × Z_S``.

    A crossing is listed when the two regions on either side of it at the surface stay
    on either side of the same plane down to ``max_depth_um`` (a boundary that ends
    sooner would not be measured as a straight line). A boundary seen exactly vertical
    in the image (no side to descend to) or running level in the face is left out.

    The angle in the image comes from the vector geometry: the boundary's line in the
    face is L = n × m (m the face normal); on the face ``tan α = |L·w| / |L·u|``, and an
    imaging beam tilted by T from the surface normal toward the face shortens the
    in-face depth direction by ``|cos(θ - T)|`` (``sin T`` for a vertical face). For a
    vertical face this is the apparent-dip relation ``tan α = tan δ |sin β|``. The
    boundary descends toward image-right when ``L·(V × Z_S) > 0`` with L pointing down
    the face; on a vertical face that is ``d·(V × Z_S) > 0``, d the dip direction (§5).

    Parameters
    ----------
    micro : Microstructure
    line_um : ((x0, y0), (x1, y1))
        The section line on the surface, in S (µm).
    viewer_at_um : (x, y)
        Any point on the viewer's side of the line, in S.
    imaging_tilt_deg : float
        Angle between the imaging beam and the surface normal, in (0, 90].
    max_depth_um : float
        Depth over which each listed boundary stays between the same two regions.
    face_inclination_deg : float
        Angle between the face and the surface on the viewer's side, in (0, 90].
    resolution_um : float
        Spacing of the probes along the line that find the crossings.

    Returns
    -------
    dict of ndarray, each shape (N,)
        ``along_um`` (from the first point), ``x_um``, ``y_um`` (S), ``region_a`` (the
        region before the crossing), ``region_b``, ``is_twin``, ``normal_x``,
        ``normal_y``, ``normal_z`` (S), ``dip_deg``, ``trace_angle_deg``, ``beta_deg``
        (angle between trace and line, [0, 90]), ``face_angle_deg`` (apparent dip on the
        face), ``image_angle_deg`` (as imaged, no noise), ``descends``
        ('left'/'right').

    Examples
    --------
    >>> micro = make_microstructure(box_um=(60, 40, 20), n_grains=10, rng=3)
    >>> c = cross_section_crossings(micro, line_um=((5, 20), (55, 20)), viewer_at_um=(30, 25),
    ...                             imaging_tilt_deg=52, max_depth_um=2)
    >>> sorted(set(c["descends"].tolist())) <= ["left", "right"]
    True
    """
    p0, u, length, view = _section_line(micro, line_um, viewer_at_um)
    for name, value in (
        ("imaging_tilt_deg", imaging_tilt_deg),
        ("face_inclination_deg", face_inclination_deg),
    ):
        if not (np.isfinite(value) and 0.0 < value <= 90.0):
            raise ValueError(f"Expected `{name}` to be in (0, 90], got {value!r}.")
    check_positive(resolution_um, "resolution_um")
    check_positive(max_depth_um, "max_depth_um")
    if max_depth_um > micro.box_um[2]:
        raise ValueError(
            f"Expected `max_depth_um` to be at most the box depth {micro.box_um[2]}, "
            f"got {max_depth_um!r}."
        )
    z = np.array([0.0, 0.0, 1.0])
    right = np.cross(view, z)
    theta = np.deg2rad(face_inclination_deg)
    down = np.cos(theta) * view + np.sin(theta) * z
    face_normal = np.cross(u, down)
    shortening = abs(np.cos(theta - np.deg2rad(imaging_tilt_deg)))

    t = np.linspace(0.0, length, int(np.ceil(length / resolution_um)) + 1)
    labels = region_at(micro, p0 + t[:, None] * u)
    rows = []
    probe_um = min(0.1, 0.25 * max_depth_um)
    depths = np.linspace(0.0, max_depth_um, 6)
    for k in np.flatnonzero(labels[:-1] != labels[1:]):
        a, b = int(labels[k]), int(labels[k + 1])
        n, offsets, is_twin = _pair_plane(micro, a, b)
        nu = float(n @ u)
        if abs(nu) < 1e-12:
            continue
        hits = [(c - float(n @ p0)) / nu for c in offsets]
        hits = [h for h in hits if t[k] - 1e-9 <= h <= t[k + 1] + 1e-9]
        if not hits:
            continue
        crossing = p0 + hits[0] * u
        line_dir = np.cross(n, face_normal)
        line_dir /= np.linalg.norm(line_dir)
        if line_dir @ down < 0:
            line_dir = -line_dir
        a_u, a_w = float(line_dir @ u), float(line_dir @ down)
        if abs(a_u) < 1e-9 or line_dir[2] < 1e-9:
            continue
        # Probes just either side of the boundary line in the face, at several depths.
        side = np.cross(face_normal, line_dir)
        side *= np.sign(side @ u)
        centres = crossing + (depths / line_dir[2])[:, None] * line_dir
        before = region_at(micro, centres - probe_um * side)
        after = region_at(micro, centres + probe_um * side)
        if np.any(before != a) or np.any(after != b):
            continue
        rows.append(
            (
                hits[0],
                crossing,
                a,
                b,
                is_twin,
                n,
                np.rad2deg(np.arctan2(abs(a_w), abs(a_u))),
                np.rad2deg(np.arctan2(abs(a_w) * shortening, abs(a_u))),
                "right" if line_dir @ right > 0 else "left",
            )
        )
    normals = np.array([r[5] for r in rows]).reshape(-1, 3)
    geometry = plane_geometry(normals)
    trace = np.cross(z, normals)
    trace_len = np.linalg.norm(trace, axis=1)
    cos_beta = np.abs(trace @ u) / np.where(trace_len > 0, trace_len, 1.0)
    beta = np.where(trace_len > 0, np.rad2deg(np.arccos(np.clip(cos_beta, 0.0, 1.0))), np.nan)
    return {
        "along_um": np.array([r[0] for r in rows], dtype=float),
        "x_um": np.array([r[1][0] for r in rows], dtype=float),
        "y_um": np.array([r[1][1] for r in rows], dtype=float),
        "region_a": np.array([r[2] for r in rows], dtype=np.int64),
        "region_b": np.array([r[3] for r in rows], dtype=np.int64),
        "is_twin": np.array([r[4] for r in rows], dtype=bool),
        "normal_x": normals[:, 0].copy(),
        "normal_y": normals[:, 1].copy(),
        "normal_z": normals[:, 2].copy(),
        "dip_deg": geometry["dip_deg"],
        "trace_angle_deg": geometry["trace_angle_deg"],
        "beta_deg": beta,
        "face_angle_deg": np.array([r[6] for r in rows], dtype=float),
        "image_angle_deg": np.array([r[7] for r in rows], dtype=float),
        "descends": np.array([r[8] for r in rows], dtype="<U5"),
    }


def simulate_cross_section(
    micro: Microstructure,
    *,
    line_um,
    viewer_at_um,
    imaging_tilt_deg: float,
    max_depth_um: float,
    rng,
    face_inclination_deg: float = 90.0,
    angle_noise_deg: float = 1.0,
) -> list[dict]:
    """The boundaries a cross-section meets, as the job file lists them (conventions §7).

    The truth comes from :func:`cross_section_crossings` (same arguments; its table says
    which boundary each entry is); normal noise of SD ``angle_noise_deg`` is added to
    each image angle, which is then folded into (0, 90] (a shallow boundary stays
    shallow). Coordinates are in S: a job that declares axes x right, y down can use
    them as they are.

    Parameters
    ----------
    micro : Microstructure
    line_um, viewer_at_um, imaging_tilt_deg, max_depth_um, face_inclination_deg
        As in :func:`cross_section_crossings`.
    rng : None, int or numpy.random.Generator
        Seed of the angle noise.
    angle_noise_deg : float
        Standard deviation of the noise added to each image angle.

    Returns
    -------
    list of dict
        ``{"along_um": float, "image_angle_deg": float, "descends": "left" | "right"}``,
        in order along the line.

    Examples
    --------
    >>> micro = make_microstructure(box_um=(60, 40, 20), n_grains=10, rng=3)
    >>> found = simulate_cross_section(micro, line_um=((5, 20), (55, 20)),
    ...     viewer_at_um=(30, 25), imaging_tilt_deg=52, max_depth_um=2, rng=0)
    >>> sorted(found[0])
    ['along_um', 'descends', 'image_angle_deg']
    """
    check_positive(angle_noise_deg, "angle_noise_deg", allow_zero=True)
    table = cross_section_crossings(
        micro,
        line_um=line_um,
        viewer_at_um=viewer_at_um,
        imaging_tilt_deg=imaging_tilt_deg,
        max_depth_um=max_depth_um,
        face_inclination_deg=face_inclination_deg,
    )
    gen = np.random.default_rng(rng)
    angle = table["image_angle_deg"] + gen.normal(0.0, angle_noise_deg, len(table["along_um"]))
    # The job file takes angles in (0, 90]: a noisy angle below zero is read as a shallow one.
    angle = np.clip(np.abs(angle), 1e-3, 90.0)
    return [
        {"along_um": float(s), "image_angle_deg": float(a), "descends": str(d)}
        for s, a, d in zip(table["along_um"], angle, table["descends"], strict=True)
    ]


def _json_number(value):
    value = float(value)
    return None if not np.isfinite(value) else value


def _map_pairs(sample: SampledMap) -> tuple[np.ndarray, np.ndarray]:
    """Region pairs (a < b) that meet between neighbouring points, and how many times."""
    ids = sample.grain_id
    # The right and lower neighbours are neighbours on both grids (§1).
    a = np.concatenate([ids[:, :-1].ravel(), ids[:-1, :].ravel()])
    b = np.concatenate([ids[:, 1:].ravel(), ids[1:, :].ravel()])
    differ = a != b
    pairs = np.sort(np.stack([a[differ], b[differ]], axis=1), axis=1)
    if len(pairs) == 0:
        return np.zeros((0, 2), dtype=np.int64), np.zeros(0, dtype=np.int64)
    unique, counts = np.unique(pairs, axis=0, return_counts=True)
    return unique, counts


def ground_truth(micro: Microstructure, *, maps=None) -> dict:
    """The known answer: every grain and boundary plane, JSON-ready (conventions §2–§5).

    Parameters
    ----------
    micro : Microstructure
    maps : mapping of str to SampledMap, optional
        Sampled maps (e.g. ``{"surface": m0, "serial_5um": m1}``); for each, the region
        pairs that meet in it and how many neighbouring point pairs show each.

    Returns
    -------
    dict
        ``frame``, ``box_um``, ``phases``, ``grains`` (every region: id, kind, parent,
        phase, ``euler_deg``, ``quat``), ``boundaries`` (every face between two grains
        inside the box, every twin plane, and every other pair seen in a map: ``grains``,
        ``kind`` ('grain' or 'twin'), ``normal_sample``, ``trace_angle_deg``, ``dip_deg``,
        ``dip_azimuth_deg`` (in S, degrees; null where §5 leaves them undefined),
        ``twin_plane`` (indices in the parent, or null)) and ``maps``. Floats, ints,
        strings, lists and None only.

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=8, rng=1,
    ...                             twins=[TwinSpec(grain=2, plane=1, thickness_um=2.0)])
    >>> truth = ground_truth(micro)
    >>> [b for b in truth["boundaries"] if b["kind"] == "twin"][0]["twin_plane"]
    '(-1 1 1)'
    """
    maps = {} if maps is None else dict(maps)
    pairs = [tuple(int(v) for v in p) for p in micro.grain_pairs]
    kinds = {p: "grain" for p in pairs}
    for lam in micro.lamellae:
        kinds[(lam.parent, lam.region)] = "twin"
    map_entries = {}
    for name, sample in maps.items():
        if not isinstance(sample, SampledMap):
            raise TypeError(
                f"Expected `maps[{name!r}]` to be a SampledMap, got {type(sample).__name__}."
            )
        found, counts = _map_pairs(sample)
        for p in found:
            kinds.setdefault((int(p[0]), int(p[1])), "grain")
        map_entries[name] = {
            "depth_um": sample.depth_um,
            "offset_um": list(sample.offset_um),
            "step_um": sample.step_um,
            "grid": sample.grid,
            "shape": [int(v) for v in sample.shape],
            "frame_rotation": list(sample.frame_rotation),
            "boundaries": [
                {"grains": [int(p[0]), int(p[1])], "point_pairs": int(c)}
                for p, c in zip(found, counts, strict=True)
            ],
        }
    keys = sorted(kinds)
    key_a = np.array([k[0] for k in keys], dtype=np.int64)
    key_b = np.array([k[1] for k in keys], dtype=np.int64)
    normals = boundary_normals_sample(micro, key_a, key_b).reshape(-1, 3)
    ok = np.all(np.isfinite(normals), axis=1)
    geometry = plane_geometry(np.where(ok[:, None], normals, 1.0))
    twin_plane = {lam.region: lam.indices for lam in micro.lamellae}
    boundaries = []
    for i, key in enumerate(keys):
        if not ok[i]:
            continue
        boundaries.append(
            {
                "grains": [key[0], key[1]],
                "kind": kinds[key],
                "is_twin": kinds[key] == "twin",
                "parent_grains": [int(micro.region_parent[k - 1]) for k in key],
                "normal_sample": [float(v) for v in normals[i]],
                "trace_angle_deg": _json_number(geometry["trace_angle_deg"][i]),
                "dip_deg": _json_number(geometry["dip_deg"][i]),
                "dip_azimuth_deg": _json_number(geometry["dip_azimuth_deg"][i]),
                "twin_plane": twin_plane.get(key[1]) if kinds[key] == "twin" else None,
            }
        )
    euler = quat_as_euler_deg(micro.region_quat)
    grains = []
    for r in range(1, micro.n_regions + 1):
        entry = {
            "id": r,
            "kind": "grain" if r <= micro.n_grains else "twin",
            "parent": int(micro.region_parent[r - 1]),
            "phase": int(micro.region_phase[r - 1]),
            "euler_deg": [float(v) for v in euler[r - 1]],
            "quat": [float(v) for v in micro.region_quat[r - 1]],
        }
        if r <= micro.n_grains:
            entry["seed_um"] = [float(v) for v in micro.seeds_um[r - 1]]
        grains.append(entry)
    lamellae = [
        {
            "region": lam.region,
            "parent": lam.parent,
            "twin_plane": lam.indices,
            "normal_sample": list(lam.normal_sample),
            "normal_crystal": list(lam.normal_crystal),
            "lower_um": lam.lower_um,
            "upper_um": lam.upper_um,
            "thickness_um": lam.upper_um - lam.lower_um,
        }
        for lam in micro.lamellae
    ]
    return {
        "frame": (
            "sample frame S: x right, y down, z into the material (conventions §2); "
            "lengths in µm, angles in degrees; a plane is n·x = c with n = normal_sample"
        ),
        "box_um": list(micro.box_um),
        "phases": [
            {"id": int(p.id), "name": str(p.name), "laue": str(p.laue)} for p in micro.phases
        ],
        "grains": grains,
        "lamellae": lamellae,
        "boundaries": boundaries,
        "maps": map_entries,
    }
