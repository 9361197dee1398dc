"""The 3D model: Voronoi grains with annealing-twin lamellae, and which region a point is in.

Owns the microstructure itself; :mod:`.sampling` turns it into maps,
:mod:`.sectioning` into cross-sections, :mod:`.truth` into the known answer.

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

Every argument here is a setting (:class:`~inclination.errors.SettingError` when out
of range) except the points handed to :func:`region_at`, which are data
(:class:`~inclination.errors.InputError`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike
from scipy.spatial import Voronoi, cKDTree

from .._validation import as_float_array, check_finite, check_one_of, check_positive
from ..crystal.rotations import (
    quat_apply,
    quat_inverse,
    quat_multiply,
    quat_normalise,
    quat_reduce,
    random_quat,
)
from ..errors import InputError, SettingError
from ..planes.geometry import surface_geometry
from ._shared import Seed, checked, frozen, scatter_quat

if TYPE_CHECKING:
    from ..crystal.phases import Phase

__all__ = [
    "TwinSpec",
    "TwinLamella",
    "Microstructure",
    "twin_planes_crystal",
    "make_microstructure",
    "region_at",
]

_CUBIC_LAUE = ("m-3m", "m-3")
_HEXAGONAL_LAUE = ("6/mmm", "6/m", "-3m", "-3")
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
        The phase records (``inclination.crystal.phases.Phase``) of the sample.
    grain_pairs : ndarray, shape (M, 2)
        Pairs (a < b) of grains that share a face inside the box.
    """

    box_um: tuple[float, float, float]
    seeds_um: np.ndarray
    region_quat: np.ndarray
    region_phase: np.ndarray
    region_parent: np.ndarray
    lamellae: tuple[TwinLamella, ...]
    phases: tuple[Phase, ...]
    grain_pairs: np.ndarray

    @property
    def n_grains(self) -> int:
        """Number of Voronoi grains G."""
        return len(self.seeds_um)

    @property
    def n_regions(self) -> int:
        """Number of regions R = G + number of lamellae."""
        return len(self.region_quat)


def _format_indices(values) -> str:
    return "(" + " ".join(str(int(v)) for v in values) + ")"


def twin_planes_crystal(phase: Phase) -> tuple[np.ndarray, tuple[str, ...]]:
    """The twin planes of a phase: unit normals in its crystal frame C and their indices.

    Cubic phases (Laue m-3m, m-3) twin on {111} (four planes up to sign); hexagonal
    and trigonal phases (6/mmm, 6/m, -3m, -3) on {10-12} (six planes up to sign). The
    twin is the parent turned 180° about the plane normal.

    Parameters
    ----------
    phase : inclination.crystal.phases.Phase
        Needs ``laue``; a hexagonal phase also needs ``lattice`` (§4 reciprocal vectors).

    Returns
    -------
    normals_crystal : ndarray, shape (K, 3)
        Unit plane normals in C.
    labels : tuple of str
        Indices as text, e.g. ``"(1 1 -1)"`` or ``"(1 0 -1 2)"``.

    Examples
    --------
    >>> from inclination.crystal.phases import Phase
    >>> steel = Phase.from_dict({"id": 1, "name": "steel", "laue": "m-3m",
    ...     "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90}})
    >>> normals, labels = twin_planes_crystal(steel)
    >>> labels[3], (normals[3] * 3**0.5).round(6).tolist()
    ('(1 1 -1)', [1.0, 1.0, -1.0])
    """
    checked(SettingError, check_one_of, phase.laue, "phase.laue", _CUBIC_LAUE + _HEXAGONAL_LAUE)
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
    from ..crystal.phases import Phase

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
        raise SettingError(
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


def _orientations(texture, spread_deg: float, n: int, gen) -> np.ndarray:
    if texture is None:
        return random_quat(n, rng=gen)
    q = as_float_array(texture, "texture")
    if q.shape == (4,):
        return scatter_quat(np.broadcast_to(quat_normalise(q), (n, 4)).copy(), spread_deg, gen)
    if q.shape == (n, 4):
        return quat_reduce(quat_normalise(q))
    raise SettingError(f"Expected `texture` to have shape (4,) or ({n}, 4), got {q.shape}.")


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
        raise SettingError(
            f"Expected `twins` to be at most {len(eligible)} (grains of a twinning phase with "
            f"a large surface section), got {n_twins}."
        )
    chosen = gen.choice(eligible, size=n_twins, replace=False)
    specs = []
    for k in chosen:
        normals_c, _ = twin_planes_crystal(phases_by_id[int(phase_ids[k])])
        normals_s = _crystal_to_sample(quat[k], normals_c)
        dip = surface_geometry(normals_s).dip_deg
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
    box_um: ArrayLike,
    n_grains: int,
    rng: Seed,
    phases: Sequence[Phase] | None = None,
    phase_fractions: ArrayLike | None = None,
    twins: int | Sequence[TwinSpec] = 0,
    twin_thickness_um: tuple[float, float] = (2.0, 5.0),
    min_twin_dip_deg: float = 35.0,
    texture: ArrayLike | None = None,
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
    phases : sequence of inclination.crystal.phases.Phase, optional
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

    Raises
    ------
    SettingError
        A setting out of range (box, counts, fractions, twin specs, texture).
    TypeError
        ``twins`` neither an int nor a sequence of :class:`TwinSpec`.

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=12, rng=1,
    ...                             twins=[TwinSpec(grain=3, plane=0, thickness_um=2.0)])
    >>> micro.n_grains, micro.n_regions, micro.lamellae[0].indices
    (12, 13, '(1 1 1)')
    """
    box = _check_box(box_um)
    if isinstance(n_grains, bool) or int(n_grains) != n_grains or n_grains < 1:
        raise SettingError(f"Expected `n_grains` to be a whole number >= 1, got {n_grains!r}.")
    n_grains = int(n_grains)
    gen = np.random.default_rng(rng)
    phases = _default_phases() if phases is None else tuple(phases)
    if len(phases) == 0:
        raise SettingError("Expected `phases` to hold at least one phase, got none.")
    phases_by_id = {int(p.id): p for p in phases}
    if len(phases_by_id) != len(phases) or min(phases_by_id) < 1:
        raise SettingError(
            f"Expected `phases` to have distinct ids >= 1, got {[p.id for p in phases]}."
        )
    if phase_fractions is None:
        fractions = np.full(len(phases), 1.0 / len(phases))
    else:
        fractions = as_float_array(phase_fractions, "phase_fractions")
        if fractions.shape != (len(phases),) or np.any(fractions < 0) or fractions.sum() <= 0:
            raise SettingError(
                f"Expected `phase_fractions` to be {len(phases)} numbers >= 0 with a "
                f"positive sum, got {phase_fractions!r}."
            )
        fractions = fractions / fractions.sum()
    checked(SettingError, check_positive, texture_spread_deg, "texture_spread_deg", allow_zero=True)

    seeds = gen.uniform(0.0, 1.0, (n_grains, 3)) * np.array(box)
    ids = np.array([int(p.id) for p in phases])
    grain_phase = ids[gen.choice(len(phases), size=n_grains, p=fractions)]
    grain_quat = _orientations(texture, texture_spread_deg, n_grains, gen)

    if isinstance(twins, int | np.integer) and not isinstance(twins, bool):
        if twins < 0:
            raise SettingError(f"Expected `twins` to be >= 0 or a list of TwinSpec, got {twins}.")
        lo, hi = (float(v) for v in twin_thickness_um)
        if not (0 < lo <= hi):
            raise SettingError(
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
        seeds_um=frozen(seeds),
        region_quat=frozen(region_quat),
        region_phase=frozen(region_phase),
        region_parent=frozen(region_parent),
        lamellae=tuple(lamellae),
        phases=phases,
        grain_pairs=frozen(_grain_pairs(seeds, box)),
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
            raise SettingError(
                f"Expected `twins[{index}].grain` to be a grain id in 1..{n_grains}, "
                f"got {spec.grain}."
            )
        if spec.grain in used:
            raise SettingError(
                f"Expected `twins` to name each grain at most once, got grain {spec.grain} twice."
            )
        used.add(spec.grain)
        checked(SettingError, check_positive, spec.thickness_um, f"twins[{index}].thickness_um")
        k = spec.grain - 1
        normals_c, labels = twin_planes_crystal(phases_by_id[int(grain_phase[k])])
        if not (0 <= spec.plane < len(normals_c)):
            raise SettingError(
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


def region_at(micro: Microstructure, points_um: ArrayLike) -> np.ndarray:
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

    Raises
    ------
    InputError
        ``points_um`` not of shape (N, 3), or not finite.

    Examples
    --------
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=5, rng=1)
    >>> region_at(micro, micro.seeds_um).tolist()
    [1, 2, 3, 4, 5]
    """
    pts = as_float_array(points_um, "points_um")
    if pts.ndim != 2 or pts.shape[1] != 3:
        raise InputError(f"Expected `points_um` to have shape (N, 3), got {pts.shape}.")
    checked(InputError, check_finite, pts, "points_um")
    region = cKDTree(micro.seeds_um).query(pts)[1].astype(np.int64) + 1
    for lam in micro.lamellae:
        inside = np.flatnonzero(region == lam.parent)
        distance = pts[inside] @ np.asarray(lam.normal_sample)
        region[inside[(distance >= lam.lower_um) & (distance <= lam.upper_um)]] = lam.region
    return region
