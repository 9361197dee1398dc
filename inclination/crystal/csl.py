"""Coincidence-site-lattice relations, hexagonal twins, and classification.

Cubic relations are generated, not typed in: a rotation about the axis [u v w]
by θ = 2·atan(n√N / m), with N = u² + v² + w² and coprime integers m >= 0,
n >= 1, is a coincidence relation with Σ the odd part of m² + N n²
(Ranganathan 1966, Acta Cryst. 21, 197; Grimmer, Bollmann & Warrington 1974,
Acta Cryst. A30, 197). Its quaternion is (m, n u, n v, n w) / √(m² + N n²).
Each is reduced to its disorientation (``symmetry.disorientation``); several
generated relations reduce to one (Σ3 written as 70.53° about <110> is 60°
about <111>), and distinct relations of one Σ are lettered a, b, c… in order of
angle (then of N for the axis), as in the trade's tables: Σ13a 22.62° <100>,
Σ13b 27.80° <111>.

The deviation of a misorientation M from a relation R is their disorientation:
the smallest angle of M ⊗ R'⁻¹ over every symmetric equivalent R' = s_a ⊗ R ⊗ s_b
of R and of R⁻¹ (grain exchange). It is computed with the one-sided kernel
``symmetry.max_scalar_part`` over one s_b per coset, never over K² products.

Misorientations are ``qb ⊗ qa⁻¹`` (``symmetry.misorientation_quat``): crystal-a
coordinates to crystal-b coordinates, in the crystal frame C.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .._validation import as_float_array, check_finite, check_last_axis, check_one_of
from .rotations import quat_from_axis_angle_deg, quat_multiply
from .symmetry import (
    LAUE_CLASSES,
    SETTINGS,
    disorientation,
    max_scalar_part,
    proper_rotations,
)

__all__ = [
    "CRITERIA",
    "CSLRelation",
    "CSLMatch",
    "TwinRelation",
    "TwinMatch",
    "cubic_csl_relations",
    "max_deviation_deg",
    "relation_deviation_deg",
    "classify_misorientation",
    "classify_misorientation_quat",
    "TWIN_MAX_DEVIATION_DEG",
    "half_turn_disorientations",
    "hexagonal_twins",
    "classify_hexagonal_misorientation",
]

CRITERIA = ("brandon", "palumbo-aust")

# Generating every relation up to Σ = 199 takes about 3 s; published tables stop
# far below (Σ <= 49 or 99).
_MAX_SIGMA_LIMIT = 199

_CONJ = np.array([1.0, -1.0, -1.0, -1.0])


@dataclass(frozen=True)
class CSLRelation:
    """One cubic coincidence relation in disorientation form.

    Attributes
    ----------
    sigma : int
        Σ, the reciprocal density of coincidence sites (odd).
    label : str
        ``"3"``, ``"13a"``, ``"13b"``…: a letter only where one Σ holds several relations.
    angle_deg : float
        Disorientation angle, degrees.
    axis : tuple of int
        Disorientation axis [h k l] with h >= k >= l >= 0, smallest integers.
    quat : tuple of float
        The disorientation (cos θ/2, sin θ/2 · axis/|axis|), scalar first, in C.
    """

    sigma: int
    label: str
    angle_deg: float
    axis: tuple[int, int, int]
    quat: tuple[float, float, float, float]


def _odd_part(k: int) -> int:
    while k % 2 == 0:
        k //= 2
    return k


def _integer_axis(axis: np.ndarray) -> tuple[int, ...]:
    """Smallest integers along a rational unit axis (largest component first, > 0)."""
    lead = int(np.argmax(np.abs(axis)))
    ratios = [Fraction(float(c / axis[lead])).limit_denominator(1000) for c in axis]
    scale = math.lcm(*(r.denominator for r in ratios))
    ints = [int(r * scale) for r in ratios]
    g = math.gcd(*ints)
    return tuple(i // g for i in ints)


def _check_max_sigma(max_sigma) -> int:
    if (
        isinstance(max_sigma, bool)
        or not isinstance(max_sigma, (int, np.integer))
        or not 1 <= max_sigma <= _MAX_SIGMA_LIMIT
    ):
        raise ValueError(
            f"Expected `max_sigma` to be a whole number from 1 to {_MAX_SIGMA_LIMIT}, "
            f"got {max_sigma!r}."
        )
    return int(max_sigma)


def _generated_candidates(max_sigma: int):
    """(Σ, quaternion) for every axis u >= v >= w >= 0 and coprime m, n with Σ <= max_sigma."""
    # The odd part halves m² + N n² at most twice (m² + N n² ≡ 4 mod 8 at worst
    # for coprime m, n), so m² + N n² <= 4 Σ bounds the search.
    bound = 4 * max_sigma
    top = math.isqrt(bound)
    sigmas, quats = [1], [(1.0, 0.0, 0.0, 0.0)]
    for u in range(1, top + 1):
        for v in range(0, u + 1):
            for w in range(0, v + 1):
                big_n = u * u + v * v + w * w
                if big_n > bound or math.gcd(u, v, w) != 1:
                    continue
                for n in range(1, math.isqrt(bound // big_n) + 1):
                    for m in range(0, math.isqrt(bound - big_n * n * n) + 1):
                        if math.gcd(m, n) != 1:
                            continue
                        total = m * m + big_n * n * n
                        sigma = _odd_part(total)
                        if sigma > max_sigma:
                            continue
                        norm = math.sqrt(total)
                        sigmas.append(sigma)
                        quats.append((m / norm, n * u / norm, n * v / norm, n * w / norm))
    return np.array(sigmas), np.array(quats)


def cubic_csl_relations(max_sigma: int = 49) -> tuple[CSLRelation, ...]:
    """Cubic coincidence relations up to ``max_sigma``, in disorientation form.

    Parameters
    ----------
    max_sigma : int, default 49
        Largest Σ kept, 1 to 199.

    Returns
    -------
    tuple of CSLRelation
        Sorted by Σ, then angle; Σ1 (the identity, angle 0, axis [1 0 0]) first.

    Raises
    ------
    ValueError
        For a ``max_sigma`` that is not a whole number in range.

    Examples
    --------
    >>> for r in cubic_csl_relations(13):
    ...     print(r.label, round(r.angle_deg, 2), r.axis)
    1 0.0 (1, 0, 0)
    3 60.0 (1, 1, 1)
    5 36.87 (1, 0, 0)
    7 38.21 (1, 1, 1)
    9 38.94 (1, 1, 0)
    11 50.48 (1, 1, 0)
    13a 22.62 (1, 0, 0)
    13b 27.8 (1, 1, 1)
    """
    max_sigma = _check_max_sigma(max_sigma)
    sigmas, quats = _generated_candidates(max_sigma)
    identity = np.array([1.0, 0.0, 0.0, 0.0])
    dis = disorientation(identity, quats, "m-3m")
    angles = np.round(dis.angle_deg, 6)
    axes = [_integer_axis(a) for a in dis.axis_crystal]
    # Off the faces of the fundamental zone the reduced angle and axis name a relation
    # uniquely, so (Σ, angle, axis) merges the many ways of writing it.
    first: dict[tuple, int] = {}
    for i, key in enumerate(zip(sigmas.tolist(), angles.tolist(), axes, strict=True)):
        first.setdefault(key, i)
    relations = []
    for sigma in np.unique(sigmas):
        kept: list[int] = []
        candidates = sorted(
            (i for key, i in first.items() if key[0] == sigma),
            key=lambda i: (angles[i], sum(a * a for a in axes[i])),
        )
        for r in candidates:
            # On a face two reduced forms of one relation can differ in axis; their
            # deviation (two-sided symmetry, exchange) is then zero.
            twins = [
                k
                for k in kept
                if angles[k] == angles[r]
                and relation_deviation_deg(dis.quat[r], dis.quat[k], "m-3m") < 1e-5
            ]
            if not twins:
                kept.append(r)
        for rank, k in enumerate(kept):
            letter = "abcdefghijklmnopqrstuvwxyz"[rank] if len(kept) > 1 else ""
            relations.append(
                CSLRelation(
                    sigma=int(sigma),
                    label=f"{int(sigma)}{letter}",
                    angle_deg=float(dis.angle_deg[k]),
                    axis=axes[k],
                    quat=tuple(float(x) for x in dis.quat[k]),
                )
            )
    return tuple(relations)


def max_deviation_deg(sigma, *, criterion: str = "brandon") -> np.ndarray:
    """Largest deviation from a Σ relation that still counts as that relation.

    Brandon (1966), Acta Metall. 14, 1479: 15°/√Σ. Palumbo & Aust (1990),
    Acta Metall. Mater. 38, 2343: 15°/Σ^(5/6).

    Parameters
    ----------
    sigma : array_like of int
        Σ values >= 1.
    criterion : {"brandon", "palumbo-aust"}

    Returns
    -------
    ndarray
        Degrees, the shape of ``sigma``.

    Examples
    --------
    >>> max_deviation_deg([1, 3, 9]).round(6).tolist()
    [15.0, 8.660254, 5.0]
    >>> max_deviation_deg([3], criterion="palumbo-aust").round(6).tolist()
    [6.004685]
    """
    check_one_of(criterion, "criterion", CRITERIA)
    s = as_float_array(sigma, "sigma")
    if np.any(~np.isfinite(s)) or np.any(s < 1):
        raise ValueError(f"Expected `sigma` to be >= 1 everywhere, got {np.asarray(sigma)!r}.")
    exponent = 0.5 if criterion == "brandon" else 5.0 / 6.0
    return 15.0 / s**exponent


def _check_misorientation(value, name: str = "misorientation") -> np.ndarray:
    q = as_float_array(value, name)
    check_last_axis(q, name, 4)
    check_finite(q, name)
    return q


def _coset_targets(relation: np.ndarray, laue: str, setting: str) -> np.ndarray:
    """T = (R ⊗ s_b)⁻¹ for one s_b per right coset G ⊗ R ⊗ s_b, for R and for R⁻¹.

    s_a ⊗ R ⊗ s_b runs over the whole double coset G R G as s_a runs over G and
    s_b over these representatives, so max_scalar_part(M ⊗ T) over the T is the
    largest |<M, R'>| over every equivalent R'. Two s_b give one coset when
    (R s_b)(R s_b')⁻¹ is in G; for Σ3 only 4 of the 24 are needed.
    """
    sym = proper_rotations(laue, setting=setting)
    targets = []
    for rel in (relation, relation * _CONJ):
        x = quat_multiply(rel, sym)  # (K, 4): R ⊗ s_b
        pairs = quat_multiply(x[:, None, :], x[None, :, :] * _CONJ)
        same = max_scalar_part(pairs, laue, setting=setting) > 1 - 1e-9
        reps = [b for b in range(len(sym)) if not same[b, :b].any()]
        if targets:
            reached = _deviation_cos_half(rel[None, :], np.array(targets), laue, setting)
            if reached[0] > 1 - 1e-9:
                # R⁻¹ lies in G R G (true of most cubic relations): G R⁻¹ G adds nothing.
                break
        targets.extend(x[b] * _CONJ for b in reps)
    return np.array(targets)


def _deviation_cos_half(m: np.ndarray, targets: np.ndarray, laue: str, setting: str):
    best = np.zeros(len(m))
    for t in targets:
        np.maximum(best, max_scalar_part(quat_multiply(m, t), laue, setting=setting), out=best)
    return best


def relation_deviation_deg(
    misorientation, relation_quat, laue: str, *, setting: str = "x_parallel_a"
) -> np.ndarray:
    """Disorientation between misorientations and one relation (CSL or twin), degrees.

    Two-sided symmetry and grain exchange included; vectorised over the
    misorientations (about 4 to 48 kernel passes, by the relation's stabiliser).

    Parameters
    ----------
    misorientation : array_like, shape (..., 4)
        Misorientations ``qb ⊗ qa⁻¹`` in C, unit quaternions.
    relation_quat : array_like, shape (4,)
        The relation, e.g. ``CSLRelation.quat``.
    laue : str
        One of ``symmetry.LAUE_CLASSES``.
    setting : {"x_parallel_a", "x_parallel_a_star"}

    Returns
    -------
    ndarray, shape (...)
        Degrees in [0, max_disorientation_deg(laue)].

    Examples
    --------
    >>> sigma3 = cubic_csl_relations(3)[1].quat
    >>> m = quat_from_axis_angle_deg([[1, 1, 1], [1, 1, 0]], [57.0, 70.528779])
    >>> relation_deviation_deg(m, sigma3, "m-3m").round(4).tolist()
    [3.0, 0.0]
    """
    check_one_of(laue, "laue", LAUE_CLASSES)
    check_one_of(setting, "setting", SETTINGS)
    m = _check_misorientation(misorientation)
    rel = _check_misorientation(relation_quat, "relation_quat")
    if rel.shape != (4,):
        raise ValueError(f"Expected `relation_quat` to have shape (4,), got {rel.shape}.")
    rel = rel / np.linalg.norm(rel)
    flat = m.reshape(-1, 4)
    cos_half = _deviation_cos_half(flat, _coset_targets(rel, laue, setting), laue, setting)
    return np.rad2deg(2.0 * np.arccos(np.clip(cos_half, 0.0, 1.0))).reshape(m.shape[:-1])


@dataclass(frozen=True)
class CSLMatch:
    """Σ classification of misorientations (arrays of one leading shape).

    Attributes
    ----------
    sigma : ndarray of int
        Σ of the matched relation, -1 where none matches.
    label : ndarray of str
        ``"3"``, ``"13b"``…, ``""`` where none matches.
    deviation_deg : ndarray of float
        Deviation from the matched relation, NaN where none matches.
    max_deviation_deg : ndarray of float
        The criterion's limit for the matched Σ, NaN where none matches.
    """

    sigma: np.ndarray
    label: np.ndarray
    deviation_deg: np.ndarray
    max_deviation_deg: np.ndarray


def classify_misorientation_quat(
    misorientation, *, criterion: str = "brandon", max_sigma: int = 29
) -> CSLMatch:
    """Σ class of cubic misorientations by Brandon's or Palumbo–Aust's criterion.

    A misorientation matches every relation it deviates from by no more than the
    criterion's limit for that Σ; of several, the lowest Σ wins (then the smaller
    deviation): common practice, since the limits of high Σ overlap. Σ1 (low
    angle, within 15° by Brandon) is a class like any other.

    Parameters
    ----------
    misorientation : array_like, shape (..., 4)
        Misorientations ``qb ⊗ qa⁻¹`` in C (m-3m), unit quaternions.
    criterion : {"brandon", "palumbo-aust"}
    max_sigma : int, default 29

    Returns
    -------
    CSLMatch
        Arrays of shape (...).

    Examples
    --------
    >>> m = quat_from_axis_angle_deg([[1, 1, 1], [1, 0, 0], [1, 2, 3]], [58.0, 36.0, 45.0])
    >>> match = classify_misorientation_quat(m)
    >>> match.label.tolist(), match.deviation_deg.round(2).tolist()
    (['3', '5', ''], [2.0, 0.87, nan])
    """
    check_one_of(criterion, "criterion", CRITERIA)
    max_sigma = _check_max_sigma(max_sigma)
    m = _check_misorientation(misorientation)
    lead = m.shape[:-1]
    flat = m.reshape(-1, 4)
    n = len(flat)
    sigma = np.full(n, -1, dtype=np.int64)
    label = np.full(n, "", dtype=object)
    deviation = np.full(n, np.nan)
    limit_out = np.full(n, np.nan)
    if n:
        angle = np.rad2deg(2.0 * np.arccos(np.clip(max_scalar_part(flat, "m-3m"), 0.0, 1.0)))
        for rel in cubic_csl_relations(max_sigma):
            limit = float(max_deviation_deg(rel.sigma, criterion=criterion))
            # The deviation is at least the difference of the disorientation angles
            # (triangle inequality on the orientation space), so only rows within
            # reach, and not yet matched to a lower Σ, need the full comparison.
            open_rows = (sigma < 0) | (sigma == rel.sigma)
            rows = np.flatnonzero(open_rows & (np.abs(angle - rel.angle_deg) <= limit + 1e-9))
            if not len(rows):
                continue
            dev = relation_deviation_deg(flat[rows], rel.quat, "m-3m")
            better = (dev <= limit) & ~(deviation[rows] <= dev)
            hit = rows[better]
            sigma[hit] = rel.sigma
            label[hit] = rel.label
            deviation[hit] = dev[better]
            limit_out[hit] = limit
    return CSLMatch(
        sigma=sigma.reshape(lead),
        label=label.astype(str).reshape(lead),
        deviation_deg=deviation.reshape(lead),
        max_deviation_deg=limit_out.reshape(lead),
    )


def classify_misorientation(
    angle_deg, axis_crystal, *, criterion: str = "brandon", max_sigma: int = 29
) -> CSLMatch:
    """Σ class of cubic misorientations given as angle and axis (crystal frame C).

    Same rule as ``classify_misorientation_quat``; the rotation by ``angle_deg``
    about ``axis_crystal`` is the misorientation (any symmetric equivalent, e.g.
    the fields of ``symmetry.disorientation``).

    Parameters
    ----------
    angle_deg : array_like, shape (...)
    axis_crystal : array_like, shape (..., 3)
        Non-zero axes (normalised on the way).
    criterion : {"brandon", "palumbo-aust"}
    max_sigma : int, default 29

    Returns
    -------
    CSLMatch

    Examples
    --------
    >>> match = classify_misorientation([60.0, 27.0], [[1, 1, 1], [1, 1, 1]])
    >>> match.label.tolist(), match.deviation_deg.round(2).tolist()
    (['3', '13b'], [0.0, 0.8])
    """
    angle = as_float_array(angle_deg, "angle_deg")
    check_finite(np.atleast_1d(angle), "angle_deg")
    axis = as_float_array(axis_crystal, "axis_crystal")
    check_last_axis(axis, "axis_crystal", 3)
    check_finite(axis, "axis_crystal")
    if axis.shape[:-1] != angle.shape:
        raise ValueError(
            f"Expected `axis_crystal` to have shape {angle.shape + (3,)} to match `angle_deg`, "
            f"got {axis.shape}."
        )
    if np.any(np.linalg.norm(axis, axis=-1) == 0):
        raise ValueError("Expected `axis_crystal` to be non-zero vectors, got a zero vector.")
    quat = quat_from_axis_angle_deg(axis, angle)
    return classify_misorientation_quat(quat, criterion=criterion, max_sigma=max_sigma)


# --- hexagonal twins -----------------------------------------------------------------------

# Twin planes K1 of the four common twins in hexagonal close-packed metals (Yoo 1981,
# Metall. Trans. A 12, 409): two tension and two compression modes.
_HEX_TWIN_PLANES = ((1, 0, -1, 2), (1, 0, -1, 1), (1, 1, -2, 2), (1, 1, -2, 1))


@dataclass(frozen=True)
class TwinRelation:
    """A twin of a hexagonal phase in disorientation form (6/mmm).

    Attributes
    ----------
    name : str
        The twin plane family, e.g. ``"{1 0 -1 2}"``.
    plane : tuple of int
        Miller–Bravais indices (h k i l) of K1.
    axis : tuple of int
        Disorientation axis as a Miller–Bravais direction [U V T W] (smallest
        integers), a <1 1 -2 0> or <1 0 -1 0> direction for these twins.
    angle_deg : float
        Disorientation angle, degrees.
    axis_crystal : tuple of float
        The same axis as a unit vector in C.
    quat : tuple of float
        The disorientation, scalar first, in C of ``setting``.
    setting : str
        Cartesian setting of ``axis_crystal`` and ``quat``.
    max_deviation_deg : float
        Deviation up to which a misorientation counts as this twin.
    """

    name: str
    plane: tuple[int, int, int, int]
    axis: tuple[int, int, int, int]
    angle_deg: float
    axis_crystal: tuple[float, float, float]
    quat: tuple[float, float, float, float]
    setting: str
    max_deviation_deg: float


def _bravais_direction(axis_crystal: np.ndarray, structure: np.ndarray) -> tuple[int, ...]:
    uvw = np.linalg.solve(structure, axis_crystal)
    u, v, w = uvw
    # [u v w] → [U V T W] with U = (2u − v)/3, V = (2v − u)/3, T = −(U + V), W = w.
    four = np.array([(2 * u - v) / 3, (2 * v - u) / 3, -(u + v) / 3, w])
    ints = _integer_axis(four)
    # Written with its first non-zero index positive, as tables do.
    sign = 1 if next(i for i in ints if i) > 0 else -1
    return tuple(sign * i for i in ints)


#: Classification tolerance of a twin relation (common practice: there is no Brandon-like
#: rule for twins).
TWIN_MAX_DEVIATION_DEG = 5.0


def half_turn_disorientations(lattice, planes, laue: str):
    """The 180° rotations about the normals of ``planes``, reduced under ``laue`` (§4).

    The reflection twin on a plane K1, composed with the inversion every Laue class holds,
    is the half turn about K1's normal; reduced to its disorientation it is the twin's
    misorientation. A half turn that reduces to about 0° is a symmetry of the class.

    Parameters
    ----------
    lattice : Lattice
        The phase's lattice; its ``setting`` is the Cartesian setting of the result.
    planes : array_like of int, shape (N, 3) or (N, 4)
        Miller or Miller–Bravais indices of K1.
    laue : str
        Laue class symbol.

    Returns
    -------
    Disorientation
        One row per plane (:func:`inclination.crystal.symmetry.disorientation`).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> hexagonal = Lattice.from_parameters(1.0, 1.0, 1.587, 90, 90, 120, setting="x_parallel_a")
    >>> half_turn_disorientations(hexagonal, [[1, 0, -1, 2]], "6/mmm").angle_deg.round(1)
    array([85.])
    """
    from .lattice import plane_normals_crystal

    normals = plane_normals_crystal(lattice, np.asarray(planes))
    half_turns = quat_from_axis_angle_deg(normals, np.full(len(normals), 180.0))
    return disorientation(np.array([1.0, 0.0, 0.0, 0.0]), half_turns, laue, setting=lattice.setting)


def hexagonal_twins(
    c_over_a: float,
    *,
    setting: str = "x_parallel_a",
    max_deviation_deg: float = TWIN_MAX_DEVIATION_DEG,
) -> tuple[TwinRelation, ...]:
    """The {10-12}, {10-11}, {11-22} and {11-21} twins of a hexagonal phase.

    Each twin is the 180° rotation about the normal of its plane K1 (for these
    compound twins it equals the 180° rotation about the shear direction η1, up
    to symmetry), reduced to its disorientation under 6/mmm. For titanium
    (c/a = 1.587) that gives 85.0° and 57.2° about <1 1 -2 0>, 64.4° and 35.0°
    about <1 0 -1 0>, the angles of Yoo (1981), Metall. Trans. A 12, 409.

    Parameters
    ----------
    c_over_a : float
        Axial ratio, > 0.
    setting : {"x_parallel_a", "x_parallel_a_star"}
        Cartesian setting of the returned quaternions and axes (conventions §4).
    max_deviation_deg : float, default 5.0
        Classification tolerance stored in each relation (common practice: there
        is no Brandon-like rule for twins).

    Returns
    -------
    tuple of TwinRelation
        In the order {10-12}, {10-11}, {11-22}, {11-21}.

    Examples
    --------
    >>> for t in hexagonal_twins(4.684 / 2.951):
    ...     print(t.name, round(t.angle_deg, 2), t.axis)
    {1 0 -1 2} 85.0 (2, -1, -1, 0)
    {1 0 -1 1} 57.23 (2, -1, -1, 0)
    {1 1 -2 2} 64.42 (1, 0, -1, 0)
    {1 1 -2 1} 34.97 (1, 0, -1, 0)
    """
    from .indices import format_indices
    from .lattice import Lattice

    c_over_a = float(as_float_array(c_over_a, "c_over_a"))
    if not np.isfinite(c_over_a) or c_over_a <= 0:
        raise ValueError(f"Expected `c_over_a` to be a finite number > 0, got {c_over_a!r}.")
    check_one_of(setting, "setting", SETTINGS)
    if not np.isfinite(max_deviation_deg) or not 0 < max_deviation_deg < 90:
        raise ValueError(
            f"Expected `max_deviation_deg` to be between 0 and 90, got {max_deviation_deg!r}."
        )
    lattice = Lattice.from_parameters(1.0, 1.0, c_over_a, 90, 90, 120, setting=setting)
    dis = half_turn_disorientations(lattice, _HEX_TWIN_PLANES, "6/mmm")
    twins = []
    for i, plane in enumerate(_HEX_TWIN_PLANES):
        axis = np.asarray(dis.axis_crystal[i])
        twins.append(
            TwinRelation(
                name=format_indices(plane, "plane", family=True),
                plane=plane,
                axis=_bravais_direction(axis, lattice.structure_matrix),
                angle_deg=float(dis.angle_deg[i]),
                axis_crystal=tuple(float(x) for x in axis),
                quat=tuple(float(x) for x in dis.quat[i]),
                setting=setting,
                max_deviation_deg=float(max_deviation_deg),
            )
        )
    return tuple(twins)


@dataclass(frozen=True)
class TwinMatch:
    """Twin classification of hexagonal misorientations (arrays of one leading shape).

    Attributes
    ----------
    label : ndarray of str
        The matched twin's name (``"{1 0 -1 2}"``), ``""`` where none matches.
    deviation_deg : ndarray of float
        Deviation from it, NaN where none matches.
    max_deviation_deg : ndarray of float
        Its tolerance, NaN where none matches.
    """

    label: np.ndarray
    deviation_deg: np.ndarray
    max_deviation_deg: np.ndarray


def classify_hexagonal_misorientation(misorientation, twins) -> TwinMatch:
    """Which twin, if any, each hexagonal misorientation is (6/mmm).

    The twin with the smallest deviation within its tolerance wins.

    Parameters
    ----------
    misorientation : array_like, shape (..., 4)
        Misorientations ``qb ⊗ qa⁻¹`` in C, in the setting the twins were built for.
    twins : sequence of TwinRelation
        Typically ``hexagonal_twins(c_over_a, setting=...)``; all of one setting.

    Returns
    -------
    TwinMatch
        Arrays of shape (...).

    Examples
    --------
    >>> twins = hexagonal_twins(1.587)
    >>> m = np.array([twins[0].quat, twins[3].quat, [1.0, 0.0, 0.0, 0.0]])
    >>> classify_hexagonal_misorientation(m, twins).label.tolist()
    ['{1 0 -1 2}', '{1 1 -2 1}', '']
    """
    m = _check_misorientation(misorientation)
    twins = tuple(twins)
    if not twins or not all(isinstance(t, TwinRelation) for t in twins):
        raise TypeError(
            f"Expected `twins` to be a non-empty sequence of TwinRelation, got {twins!r:.80}."
        )
    settings = {t.setting for t in twins}
    if len(settings) != 1:
        raise ValueError(f"Expected `twins` to share one setting, got {sorted(settings)}.")
    flat = m.reshape(-1, 4)
    n = len(flat)
    label = np.full(n, "", dtype=object)
    deviation = np.full(n, np.nan)
    limit = np.full(n, np.nan)
    for twin in twins:
        dev = relation_deviation_deg(flat, twin.quat, "6/mmm", setting=twin.setting)
        better = (dev <= twin.max_deviation_deg) & ~(deviation <= dev)
        label[better] = twin.name
        deviation[better] = dev[better]
        limit[better] = twin.max_deviation_deg
    lead = m.shape[:-1]
    return TwinMatch(
        label=label.astype(str).reshape(lead),
        deviation_deg=deviation.reshape(lead),
        max_deviation_deg=limit.reshape(lead),
    )
