"""Orientation representations and their conversions, vectorised (conventions §3).

Every orientation here is *passive*: it maps sample coordinates to crystal
coordinates, ``v_crystal = g @ v_sample``; the rows of ``g`` are the crystal
axes written in the sample frame S. Bunge Euler angles (φ1, Φ, φ2) give
``g = Rz(φ2) · Rx(Φ) · Rz(φ1)`` with frame-rotation matrices.

Quaternions are unit, scalar first, with scalar part >= 0 after reduction;
the conversions follow the consistent set of Rowenhorst et al. (2015),
*Modelling Simul. Mater. Sci. Eng.* 23, 083501, with P = +1. Under that
choice the quaternion product is the Hamilton product and
``quat_multiply(qb, qa)`` is the orientation ``g_b @ g_a``.

Axis–angle pairs describe the same passive rotation: ``q = (cos ω/2, n sin ω/2)``.
Rodrigues vectors are ``n tan(ω/2)``.

All functions accept any leading shape ``(...)`` and return arrays of that
leading shape; degrees at the interface, radians inside.
"""

from __future__ import annotations

import numpy as np

from .._validation import as_float_array, check_finite, check_last_axis

__all__ = [
    "quat_from_euler_deg",
    "quat_as_euler_deg",
    "quat_from_matrix",
    "quat_as_matrix",
    "matrix_from_euler_deg",
    "quat_from_axis_angle_deg",
    "quat_as_axis_angle_deg",
    "quat_from_rodrigues",
    "quat_as_rodrigues",
    "quat_multiply",
    "quat_inverse",
    "quat_reduce",
    "quat_normalise",
    "quat_apply",
    "quat_angle_deg",
    "random_quat",
    "mean_quat",
]

# Below this, sin(Φ/2)·cos(Φ/2) is treated as zero: the Euler angles are
# degenerate (Φ = 0 or 180°) and only φ1 ± φ2 is defined.
_DEGENERATE = 1e-12


def _check_quat(q, name: str = "quat") -> np.ndarray:
    q = as_float_array(q, name)
    check_last_axis(q, name, 4)
    check_finite(q, name)
    return q


def quat_normalise(quat) -> np.ndarray:
    """Scale quaternions to unit norm.

    Parameters
    ----------
    quat : array_like, shape (..., 4)
        Non-zero quaternions, scalar first.

    Returns
    -------
    ndarray, shape (..., 4)

    Examples
    --------
    >>> quat_normalise([2.0, 0.0, 0.0, 0.0]).round(6).tolist()
    [1.0, 0.0, 0.0, 0.0]
    """
    q = _check_quat(quat)
    norm = np.linalg.norm(q, axis=-1, keepdims=True)
    if np.any(norm == 0):
        raise ValueError("Expected `quat` to be non-zero, got a zero quaternion.")
    return q / norm


def quat_reduce(quat) -> np.ndarray:
    """Return the representative with scalar part >= 0 (q and -q are one rotation).

    Examples
    --------
    >>> quat_reduce([-0.5, 0.5, 0.5, 0.5]).round(6).tolist()
    [0.5, -0.5, -0.5, -0.5]
    """
    q = _check_quat(quat)
    return np.where(q[..., :1] < 0, -q, q)


def quat_from_euler_deg(euler_deg, *, dtype=np.float64) -> np.ndarray:
    """Bunge Euler angles (φ1, Φ, φ2) in degrees to unit quaternions.

    Parameters
    ----------
    euler_deg : array_like, shape (..., 3)
        Bunge angles in degrees (conventions §3).
    dtype : {numpy.float64, numpy.float32}
        Precision of the trigonometry and of the result. The half-angle sums are
        always formed in float64; float32 sines and cosines (vectorised, some 25×
        faster) then add at most 5e-5° to the rotation, the order of float32 storage of
        a map itself (the map readers use it).

    Returns
    -------
    ndarray, shape (..., 4)
        Unit quaternions, scalar first, scalar part >= 0.

    Examples
    --------
    >>> quat_from_euler_deg([90.0, 0.0, 0.0]).round(6).tolist()
    [0.707107, 0.0, 0.0, -0.707107]
    """
    e = as_float_array(euler_deg, "euler_deg")
    check_last_axis(e, "euler_deg", 3)
    check_finite(e, "euler_deg")
    if np.dtype(dtype) not in (np.float64, np.float32):
        raise ValueError(f"Expected `dtype` to be float64 or float32, got {np.dtype(dtype)}.")
    e = np.deg2rad(e)
    phi1, big_phi, phi2 = e[..., 0], e[..., 1], e[..., 2]
    sigma = (0.5 * (phi1 + phi2)).astype(dtype, copy=False)
    delta = (0.5 * (phi1 - phi2)).astype(dtype, copy=False)
    half = (0.5 * big_phi).astype(dtype, copy=False)
    c = np.cos(half)
    s = np.sin(half)
    q = np.stack(
        [c * np.cos(sigma), -s * np.cos(delta), -s * np.sin(delta), -c * np.sin(sigma)], axis=-1
    )
    # Adding 0.0 turns the -0.0 of exact zeros into +0.0 for clean output.
    return np.where(q[..., :1] < 0, -q, q) + 0.0


def quat_as_euler_deg(quat) -> np.ndarray:
    """Unit quaternions to Bunge Euler angles in degrees.

    φ1 and φ2 lie in [0, 360), Φ in [0, 180]. When Φ is 0 or 180° only the sum
    (or difference) of φ1 and φ2 is defined; φ2 is then set to 0.

    Parameters
    ----------
    quat : array_like, shape (..., 4)

    Returns
    -------
    ndarray, shape (..., 3)

    Examples
    --------
    >>> quat_as_euler_deg(quat_from_euler_deg([30.0, 45.0, 60.0])).round(6).tolist()
    [30.0, 45.0, 60.0]
    >>> quat_as_euler_deg(quat_from_euler_deg([30.0, 0.0, 60.0])).round(6).tolist()
    [90.0, 0.0, 0.0]
    """
    q = quat_normalise(quat)
    q0, q1, q2, q3 = q[..., 0], q[..., 1], q[..., 2], q[..., 3]
    q03 = q0 * q0 + q3 * q3
    q12 = q1 * q1 + q2 * q2
    chi = np.sqrt(q03 * q12)
    general = chi > _DEGENERATE
    # Every step is elementwise, so the degenerate rows (few, if any) are worked out on
    # their own below and the general formula's value of theirs is overwritten.
    degenerate = np.flatnonzero(~general)
    safe_chi = chi
    if len(degenerate):
        safe_chi = np.where(general, chi, 1.0)
    # asarray: a single quaternion's angles are numpy scalars, not arrays to write into.
    phi1 = np.asarray(np.arctan2((q1 * q3 - q0 * q2) / safe_chi, (-q0 * q1 - q2 * q3) / safe_chi))
    big_phi = np.asarray(np.arctan2(2.0 * chi, q03 - q12))
    phi2 = np.asarray(np.arctan2((q0 * q2 + q1 * q3) / safe_chi, (q2 * q3 - q0 * q1) / safe_chi))
    if len(degenerate):
        # Degenerate cases (Rowenhorst et al. 2015, eq. for chi = 0).
        d0, d1, d2, d3 = (c.reshape(-1)[degenerate] for c in (q0, q1, q2, q3))
        near_zero = q12.reshape(-1)[degenerate] <= q03.reshape(-1)[degenerate]
        phi1.reshape(-1)[degenerate] = np.where(
            near_zero,
            np.arctan2(-2.0 * d0 * d3, d0 * d0 - d3 * d3),
            np.arctan2(2.0 * d1 * d2, d1 * d1 - d2 * d2),
        )
        big_phi.reshape(-1)[degenerate] = np.where(near_zero, 0.0, np.pi)
        phi2.reshape(-1)[degenerate] = 0.0
    return np.stack([_turn_deg(phi1), np.rad2deg(big_phi), _turn_deg(phi2)], axis=-1)


def _turn_deg(angle_rad: np.ndarray) -> np.ndarray:
    """An angle of [-π, π] in degrees of [0, 360); a hair below 360 is 0 for every purpose."""
    deg = np.rad2deg(angle_rad)
    # deg % 360.0 for deg in [-180, 180]: numpy's remainder is fmod (deg itself), plus
    # 360 where deg is negative, and +0.0 for ±0.0; written out, as it is several times
    # faster than the remainder's branch on the sign.
    turned = np.where(deg < 0.0, deg + 360.0, deg + 0.0)
    turned[turned >= 360.0 - 1e-10] = 0.0
    return turned


def quat_as_matrix(quat) -> np.ndarray:
    """Unit quaternions to orientation matrices ``g`` (sample to crystal).

    Parameters
    ----------
    quat : array_like, shape (..., 4)

    Returns
    -------
    ndarray, shape (..., 3, 3)
        ``v_crystal = g @ v_sample``.

    Examples
    --------
    >>> quat_as_matrix(quat_from_euler_deg([90.0, 0.0, 0.0])).round(6).tolist()
    [[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, 1.0]]
    """
    q = quat_normalise(quat)
    q0, q1, q2, q3 = q[..., 0], q[..., 1], q[..., 2], q[..., 3]
    qbar = q0 * q0 - (q1 * q1 + q2 * q2 + q3 * q3)
    g = np.empty(q.shape[:-1] + (3, 3))
    g[..., 0, 0] = qbar + 2 * q1 * q1
    g[..., 0, 1] = 2 * (q1 * q2 - q0 * q3)
    g[..., 0, 2] = 2 * (q1 * q3 + q0 * q2)
    g[..., 1, 0] = 2 * (q1 * q2 + q0 * q3)
    g[..., 1, 1] = qbar + 2 * q2 * q2
    g[..., 1, 2] = 2 * (q2 * q3 - q0 * q1)
    g[..., 2, 0] = 2 * (q1 * q3 - q0 * q2)
    g[..., 2, 1] = 2 * (q2 * q3 + q0 * q1)
    g[..., 2, 2] = qbar + 2 * q3 * q3
    return g + 0.0


def matrix_from_euler_deg(euler_deg) -> np.ndarray:
    """Bunge Euler angles in degrees to orientation matrices ``g`` (sample to crystal).

    Examples
    --------
    >>> matrix_from_euler_deg([30.0, 45.0, 60.0]).round(6).tolist()[0]
    [0.126826, 0.78033, 0.612372]
    """
    return quat_as_matrix(quat_from_euler_deg(euler_deg))


def quat_from_matrix(matrix) -> np.ndarray:
    """Orientation matrices to unit quaternions (scalar part >= 0).

    Uses the numerically stable branch selection on the largest diagonal
    combination (Shepperd's method), which gives the same result as the
    Rowenhorst et al. formula without its sign cases.

    Parameters
    ----------
    matrix : array_like, shape (..., 3, 3)
        Proper orthogonal matrices ``g`` (sample to crystal).

    Returns
    -------
    ndarray, shape (..., 4)

    Examples
    --------
    >>> quat_from_matrix([[0, 1, 0], [-1, 0, 0], [0, 0, 1]]).round(6).tolist()
    [0.707107, 0.0, 0.0, -0.707107]
    """
    m = as_float_array(matrix, "matrix")
    if m.ndim < 2 or m.shape[-2:] != (3, 3):
        raise ValueError(f"Expected `matrix` to have shape (..., 3, 3), got {m.shape}.")
    check_finite(m.reshape(m.shape[:-2] + (9,)), "matrix")
    det = np.linalg.det(m)
    if np.any(np.abs(det - 1.0) > 1e-3):
        bad = np.argwhere(np.abs(np.atleast_1d(det) - 1.0) > 1e-3)[0]
        raise ValueError(
            "Expected `matrix` to be proper rotations (det = +1), "
            f"got det = {np.atleast_1d(det)[tuple(bad)]:.6g} at index {tuple(int(i) for i in bad)}."
        )
    m00, m11, m22 = m[..., 0, 0], m[..., 1, 1], m[..., 2, 2]
    # Candidate 4|q_k| squared for k = 0..3; pick the largest for stability.
    cand = np.stack(
        [1 + m00 + m11 + m22, 1 + m00 - m11 - m22, 1 - m00 + m11 - m22, 1 - m00 - m11 + m22],
        axis=-1,
    )
    k = np.argmax(cand, axis=-1)
    root = np.sqrt(np.maximum(np.take_along_axis(cand, k[..., None], -1)[..., 0], 1e-300))
    half = 0.5 * root
    inv = 0.5 / root
    # The antisymmetric part of g = passive rotation: g[1,2]-g[2,1] = -4 q0 q1 etc.
    # From quat_as_matrix: g21 - g12 = 4 q0 q1, g02 - g20 = 4 q0 q2, g10 - g01 = 4 q0 q3,
    # and the symmetric sums give 4 q1 q2, 4 q1 q3, 4 q2 q3.
    a = (m[..., 2, 1] - m[..., 1, 2]) * inv
    b = (m[..., 0, 2] - m[..., 2, 0]) * inv
    c = (m[..., 1, 0] - m[..., 0, 1]) * inv
    d = (m[..., 0, 1] + m[..., 1, 0]) * inv
    e = (m[..., 0, 2] + m[..., 2, 0]) * inv
    f = (m[..., 1, 2] + m[..., 2, 1]) * inv
    q = np.empty(m.shape[:-2] + (4,))
    q0 = np.choose(k, [half, a, b, c])
    q1 = np.choose(k, [a, half, d, e])
    q2 = np.choose(k, [b, d, half, f])
    q3 = np.choose(k, [c, e, f, half])
    q[..., 0], q[..., 1], q[..., 2], q[..., 3] = q0, q1, q2, q3
    q /= np.linalg.norm(q, axis=-1, keepdims=True)
    return np.where(q[..., :1] < 0, -q, q)


def quat_from_axis_angle_deg(axis, angle_deg) -> np.ndarray:
    """Axis (any length) and angle in degrees to unit quaternions.

    Parameters
    ----------
    axis : array_like, shape (..., 3)
        Rotation axes; normalised here. A zero axis is allowed only with a zero angle.
    angle_deg : array_like, shape (...)
        Rotation angles in degrees.

    Returns
    -------
    ndarray, shape (..., 4)
        ``(cos ω/2, n sin ω/2)``, reduced to scalar part >= 0.

    Examples
    --------
    >>> quat_from_axis_angle_deg([0, 0, 2], 180.0).round(6).tolist()
    [0.0, 0.0, 0.0, 1.0]
    """
    n = as_float_array(axis, "axis")
    check_last_axis(n, "axis", 3)
    w = np.deg2rad(as_float_array(angle_deg, "angle_deg"))
    norm = np.linalg.norm(n, axis=-1, keepdims=True)
    if np.any((norm[..., 0] == 0) & (np.broadcast_to(w, norm.shape[:-1]) != 0)):
        raise ValueError(
            "Expected `axis` to be non-zero where `angle_deg` is not 0, got a zero axis."
        )
    n = n / np.where(norm == 0, 1.0, norm)
    half = 0.5 * w[..., None]
    q = np.concatenate([np.cos(half), np.sin(half) * n], axis=-1)
    return np.where(q[..., :1] < 0, -q, q)


def quat_as_axis_angle_deg(quat) -> tuple[np.ndarray, np.ndarray]:
    """Unit quaternions to unit axes and angles in [0, 180] degrees.

    The identity returns the axis (0, 0, 1) and angle 0.

    Returns
    -------
    axis : ndarray, shape (..., 3)
    angle_deg : ndarray, shape (...)

    Examples
    --------
    >>> axis, angle = quat_as_axis_angle_deg(quat_from_axis_angle_deg([1, 1, 1], 60.0))
    >>> axis.round(6).tolist(), round(float(angle), 6)
    ([0.57735, 0.57735, 0.57735], 60.0)
    """
    q = quat_reduce(quat_normalise(quat))
    vec = q[..., 1:]
    s = np.linalg.norm(vec, axis=-1)
    angle = 2.0 * np.arctan2(s, q[..., 0])
    tiny = s < 1e-15
    axis = np.where(
        tiny[..., None], np.array([0.0, 0.0, 1.0]), vec / np.where(tiny, 1.0, s)[..., None]
    )
    return axis, np.rad2deg(angle)


def quat_from_rodrigues(rodrigues) -> np.ndarray:
    """Rodrigues–Frank vectors ``n tan(ω/2)`` to unit quaternions.

    Examples
    --------
    >>> quat_from_rodrigues([1.0, 0.0, 0.0]).round(6).tolist()
    [0.707107, 0.707107, 0.0, 0.0]
    """
    r = as_float_array(rodrigues, "rodrigues")
    check_last_axis(r, "rodrigues", 3)
    check_finite(r, "rodrigues")
    q = np.concatenate([np.ones(r.shape[:-1] + (1,)), r], axis=-1)
    return q / np.linalg.norm(q, axis=-1, keepdims=True)


def quat_as_rodrigues(quat) -> np.ndarray:
    """Unit quaternions to Rodrigues–Frank vectors; a 180° rotation gives infinities.

    Examples
    --------
    >>> q = quat_from_axis_angle_deg([1, 0, 0], 90.0)  # tan 45° = 1
    >>> quat_as_rodrigues(q).round(6).tolist()
    [1.0, 0.0, 0.0]
    """
    q = quat_reduce(quat_normalise(quat))
    half_turn = q[..., :1] == 0
    r = q[..., 1:] / np.where(half_turn, 1.0, q[..., :1])
    # tan(90°) is infinite along the axis; components that are zero stay zero.
    infinite = np.where(q[..., 1:] == 0, 0.0, np.copysign(np.inf, q[..., 1:]))
    return np.where(half_turn, infinite, r)


def quat_multiply(a, b) -> np.ndarray:
    """Hamilton product ``a ⊗ b``: the orientation ``g_a @ g_b`` (apply b first).

    Not reduced, so that products of symmetry elements keep their sign.

    Examples
    --------
    >>> qa = quat_from_euler_deg([10.0, 20.0, 30.0]); qb = quat_from_euler_deg([40.0, 50.0, 60.0])
    >>> product = quat_as_matrix(quat_multiply(qa, qb))
    >>> bool(np.allclose(product, quat_as_matrix(qa) @ quat_as_matrix(qb)))
    True
    """
    a = _check_quat(a, "a")
    b = _check_quat(b, "b")
    a0, a1, a2, a3 = a[..., 0], a[..., 1], a[..., 2], a[..., 3]
    b0, b1, b2, b3 = b[..., 0], b[..., 1], b[..., 2], b[..., 3]
    return np.stack(
        [
            a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
            a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
            a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
            a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
        ],
        axis=-1,
    )


def quat_inverse(quat) -> np.ndarray:
    """Inverse (conjugate) of unit quaternions: the orientation ``g.T``.

    Examples
    --------
    >>> quat_inverse([0.5, 0.5, 0.5, 0.5]).round(6).tolist()
    [0.5, -0.5, -0.5, -0.5]
    """
    q = _check_quat(quat)
    return q * np.array([1.0, -1.0, -1.0, -1.0])


def quat_apply(quat, vectors) -> np.ndarray:
    """Apply orientations to vectors: ``v_crystal = g @ v_sample``.

    Parameters
    ----------
    quat : array_like, shape (..., 4)
    vectors : array_like, shape (..., 3)
        Broadcast against ``quat``'s leading shape.

    Returns
    -------
    ndarray, shape (broadcast, 3)

    Examples
    --------
    >>> (quat_apply(quat_from_euler_deg([90.0, 0.0, 0.0]), [1.0, 0.0, 0.0]).round(6) + 0.0).tolist()
    [0.0, -1.0, 0.0]
    """
    q = _check_quat(quat)
    v = as_float_array(vectors, "vectors")
    check_last_axis(v, "vectors", 3)
    # With P = +1 the quaternion of g is the Hamilton quaternion of the matrix g
    # itself, so g v = v + 2 q0 (u × v) + 2 u × (u × v) with u = (q1, q2, q3).
    u = q[..., 1:]
    q0 = q[..., :1]
    uv = np.cross(u, v)
    return v + 2.0 * q0 * uv + 2.0 * np.cross(u, uv)


def quat_angle_deg(quat) -> np.ndarray:
    """Rotation angle in degrees, in [0, 180], of unit quaternions (no symmetry).

    Examples
    --------
    >>> float(quat_angle_deg([0.5, 0.5, 0.5, 0.5]).round(6))
    120.0
    """
    q = _check_quat(quat)
    return np.rad2deg(2.0 * np.arccos(np.clip(np.abs(q[..., 0]), 0.0, 1.0)))


def random_quat(n: int, *, rng=None) -> np.ndarray:
    """Uniformly distributed random orientations (Shoemake 1992, subgroup algorithm).

    Parameters
    ----------
    n : int
        Number of orientations.
    rng : None, int or numpy.random.Generator
        Passed to ``numpy.random.default_rng``.

    Returns
    -------
    ndarray, shape (n, 4)
        Unit quaternions, scalar part >= 0.

    Examples
    --------
    >>> random_quat(3, rng=0).shape
    (3, 4)
    """
    if int(n) != n or n < 0:
        raise ValueError(f"Expected `n` to be a whole number >= 0, got {n!r}.")
    gen = np.random.default_rng(rng)
    u1, u2, u3 = gen.random((3, int(n)))
    a = np.sqrt(1.0 - u1)
    b = np.sqrt(u1)
    q = np.stack(
        [
            a * np.sin(2 * np.pi * u2),
            a * np.cos(2 * np.pi * u2),
            b * np.sin(2 * np.pi * u3),
            b * np.cos(2 * np.pi * u3),
        ],
        axis=-1,
    )
    return np.where(q[..., :1] < 0, -q, q)


def mean_quat(quat, symmetry_quat=None, *, reference=None, weights=None) -> np.ndarray:
    """Mean orientation of a set, under crystal symmetry.

    Each orientation is first replaced by its symmetric equivalent ``s ⊗ q``
    nearest the reference (by default the first orientation; then once more
    nearest the first estimate, which removes the dependence on the starting
    choice for any set tighter than half the fundamental zone), and the
    equivalents are averaged by the eigenvector method of Markley et al.
    (2007), *J. Guidance Control Dyn.* 30, 1193 — the quaternion average that
    is invariant to the sign of each quaternion.

    Parameters
    ----------
    quat : array_like, shape (N, 4)
        Orientations (sample to crystal). N >= 1.
    symmetry_quat : array_like, shape (K, 4), optional
        Proper rotations of the Laue class in the crystal frame; identity only if omitted.
    reference : array_like, shape (4,), optional
        Starting orientation for choosing equivalents.
    weights : array_like, shape (N,), optional
        Non-negative weights.

    Returns
    -------
    ndarray, shape (4,)
        Unit quaternion, scalar part >= 0.

    Examples
    --------
    >>> q = quat_from_axis_angle_deg([[0, 0, 1], [0, 0, 1]], [10.0, 20.0])
    >>> quat_as_axis_angle_deg(mean_quat(q))[1].round(6).tolist()
    15.0
    """
    q = _check_quat(quat)
    if q.ndim != 2 or q.shape[0] == 0:
        raise ValueError(f"Expected `quat` to have shape (N, 4) with N >= 1, got {q.shape}.")
    ops = (
        np.array([[1.0, 0.0, 0.0, 0.0]])
        if symmetry_quat is None
        else _check_quat(symmetry_quat, "symmetry_quat")
    )
    w = np.ones(len(q)) if weights is None else as_float_array(weights, "weights")
    if w.shape != (len(q),) or np.any(w < 0) or not np.any(w > 0):
        raise ValueError(
            f"Expected `weights` to have shape ({len(q)},), be >= 0 and not all 0, "
            f"got shape {w.shape}."
        )
    ref = q[0] if reference is None else _check_quat(reference, "reference")
    for _ in range(2):
        q_near = nearest_equivalents(q, ops, ref)
        m = (q_near * w[:, None]).T @ q_near
        _, vecs = np.linalg.eigh(m)
        ref = vecs[:, -1]
    return ref if ref[0] >= 0 else -ref


def nearest_equivalents(
    quat: np.ndarray, symmetry_quat: np.ndarray, reference: np.ndarray
) -> np.ndarray:
    """Symmetric equivalents ``s ⊗ q`` of each orientation nearest a reference.

    Internal helper (callers validate): ``quat`` (N, 4), ``symmetry_quat`` (K, 4),
    ``reference`` (4,). Works in blocks so that no (N, K, 4) array is formed.
    Returned quaternions are signed to lie in the reference's hemisphere.
    """
    out = np.empty_like(quat, dtype=np.float64)
    ref = np.asarray(reference, dtype=np.float64)
    block = 65536
    for start in range(0, len(quat), block):
        qb = np.asarray(quat[start : start + block], dtype=np.float64)
        # <s⊗q, r> = <q, s⁻¹⊗r>: one (n, 4)·(4, K) product gives every alignment.
        targets = quat_multiply(quat_inverse(symmetry_quat), ref[None, :])  # (K, 4)
        dots = qb @ targets.T
        k = np.argmax(np.abs(dots), axis=1)
        sq = quat_multiply(symmetry_quat[k], qb)
        sign = np.sign(np.einsum("ij,j->i", sq, ref))
        sign[sign == 0] = 1.0
        out[start : start + block] = sq * sign[:, None]
    return out
