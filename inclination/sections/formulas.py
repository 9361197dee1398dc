"""The formulas of the second views: apparent dip, tilt correction, image side, depths.

Owns the closed-form relations of docs/conventions.md §7 (cross-sections: the
apparent-dip relation, the imaging-tilt correction, which way image-right points)
and §8 (serial sections: the Vickers indent depth, ``tan δ = h / Δ`` and its
first-order σ). They are pure vectorised functions, checked against published
worked values in ``tests/external/test_section_formulas.py``; the measuring stages
(:mod:`.cross_section`, :mod:`.serial`) call these same functions.

Every vector and point is in the sample frame S (conventions §2: X right, Y down,
Z into the material).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array

__all__ = [
    "VICKERS_DEPTH_FACTOR",
    "SectionLineFrame",
    "apparent_dip_deg",
    "true_dip_from_apparent_deg",
    "face_angle_from_image_deg",
    "face_depth_scale",
    "section_line_frame",
    "image_right_sample",
    "depth_from_indent_um",
    "serial_dip_deg",
    "serial_dip_sigma_deg",
    "serial_offset_um",
]

#: Depth of a Vickers indent per unit of diagonal: 2·√2·tan 68° (136° pyramid, §8).
VICKERS_DEPTH_FACTOR = 2.0 * math.sqrt(2.0) * math.tan(math.radians(68.0))

_Z = np.array([0.0, 0.0, 1.0])
_Z.setflags(write=False)

# A section line shorter than this (µm) is one point twice; a viewer closer to the
# line than 1e-6 of its length (at least 1e-6 µm) stands on it and names no side.
_MIN_LINE_UM = 1e-9
_MIN_VIEWER_OFFSET = 1e-6


def apparent_dip_deg(true_dip_deg: ArrayLike, beta_deg: ArrayLike) -> np.ndarray:
    """Apparent dip on a vertical face: ``tan α = tan δ · |sin β|`` (§7).

    Parameters
    ----------
    true_dip_deg : array_like
        True dip δ of the plane, degrees in [0, 90].
    beta_deg : array_like
        Angle β between the trace and the section line, degrees (broadcast).

    Returns
    -------
    ndarray
        Apparent dip α in degrees, [0, 90].

    Examples
    --------
    >>> apparent_dip_deg(60.0, [45.0, 30.0, 10.0]).round(3).tolist()
    [50.768, 40.893, 16.74]
    """
    delta = np.deg2rad(as_float_array(true_dip_deg, "true_dip_deg"))
    beta = np.deg2rad(as_float_array(beta_deg, "beta_deg"))
    return np.rad2deg(np.arctan(np.tan(delta) * np.abs(np.sin(beta))))


def true_dip_from_apparent_deg(apparent_dip_deg: ArrayLike, beta_deg: ArrayLike) -> np.ndarray:
    """True dip from the apparent dip on a vertical face, inverse of :func:`apparent_dip_deg`.

    Parameters
    ----------
    apparent_dip_deg : array_like
        Apparent dip α in degrees, [0, 90].
    beta_deg : array_like
        Angle between trace and section line, degrees; ``sin β = 0`` gives 90°
        (the face then runs along the trace and any α > 0 means a vertical plane).

    Returns
    -------
    ndarray
        True dip δ in degrees, [0, 90].

    Examples
    --------
    >>> true_dip_from_apparent_deg(50.768, 45.0).round(3).tolist()
    60.0
    """
    alpha = np.deg2rad(as_float_array(apparent_dip_deg, "apparent_dip_deg"))
    beta = np.deg2rad(as_float_array(beta_deg, "beta_deg"))
    return np.rad2deg(np.arctan2(np.tan(alpha), np.abs(np.sin(beta))))


def face_angle_from_image_deg(
    image_angle_deg: ArrayLike, tilt_deg: ArrayLike, *, face_inclination_deg: ArrayLike = 90.0
) -> np.ndarray:
    """Correct an angle measured in a tilted image to the angle on the face (§7).

    Depths on the face appear shortened by ``cos(φ − θ)`` where θ is the imaging tilt
    (beam to surface normal) and φ the face inclination to the surface; for a face
    perpendicular to the surface this is ``sin θ`` and
    ``tan α_face = tan α_image / sin θ``. An inclined face is taken to lean toward the
    viewer with depth (the wall of a milled trench).

    Parameters
    ----------
    image_angle_deg : array_like
        Angle between the surface line and the boundary in the image, degrees [0, 90].
    tilt_deg : float or array_like
        Imaging tilt θ, degrees.
    face_inclination_deg : float, optional
        Inclination φ of the face to the surface, degrees (90 = perpendicular).

    Returns
    -------
    ndarray
        Angle on the face, degrees [0, 90].

    Examples
    --------
    >>> face_angle_from_image_deg(30.0, 52.0).round(3).tolist()
    36.229
    >>> round(1.0 / math.sin(math.radians(52.0)), 5)
    1.26902
    """
    alpha = np.deg2rad(as_float_array(image_angle_deg, "image_angle_deg"))
    shortening = face_depth_scale(tilt_deg, face_inclination_deg=face_inclination_deg)
    return np.rad2deg(np.arctan2(np.tan(alpha), shortening))


def face_depth_scale(tilt_deg: ArrayLike, *, face_inclination_deg: ArrayLike = 90.0) -> np.ndarray:
    """Image length per unit of depth down the face, ``cos(φ − θ)`` (§7).

    A distance ``w`` down a face inclined φ to the surface, seen by a beam at θ to
    the surface normal, appears as ``w·cos(φ − θ)`` in the image (``sin θ`` for a
    perpendicular face).

    Parameters
    ----------
    tilt_deg : float or array_like
        Imaging tilt θ, degrees.
    face_inclination_deg : float, optional
        Inclination φ of the face to the surface, degrees (90 = perpendicular).

    Returns
    -------
    ndarray
        The foreshortening factor, (0, 1].

    Raises
    ------
    ValueError
        When the beam does not see the face (factor <= 1e-6).

    Examples
    --------
    >>> face_depth_scale(52.0).round(5).tolist()
    0.78801
    """
    theta = np.deg2rad(as_float_array(tilt_deg, "tilt_deg"))
    phi = np.deg2rad(as_float_array(face_inclination_deg, "face_inclination_deg"))
    shortening = np.cos(phi - theta)
    if np.any(shortening <= 1e-6):
        raise ValueError(
            "Expected `tilt_deg` to let the beam see the face (cos(face inclination − tilt)"
            f" > 0), got tilt {np.rad2deg(theta)!r} for a face at {np.rad2deg(phi)!r} deg."
        )
    return shortening


def image_right_sample(line_sample: ArrayLike, viewer_sample: ArrayLike) -> np.ndarray:
    """Unit vector of image-right for a section viewed from the viewer's side (§7).

    Image-right is ``V × Z_S`` with V the in-plane unit vector from the section line
    toward the viewer.

    Parameters
    ----------
    line_sample : array_like, shape (2, 2)
        First and second point of the section line, µm, in S.
    viewer_sample : array_like, shape (2,)
        Any point on the viewer's side, µm, in S.

    Returns
    -------
    ndarray, shape (3,)
        Image-right in S (it lies along the section line).

    Examples
    --------
    >>> image_right_sample([[0, 0], [10, 0]], [5, -3]).round(6).tolist()
    [-1.0, 0.0, 0.0]
    """
    frame = section_line_frame(line_sample, viewer_sample)
    if frame.is_point:
        raise ValueError("Expected `line_sample` to have two distinct points, got one point.")
    if frame.viewer_on_line:
        raise ValueError("Expected `viewer_sample` to lie off the section line, got a point on it.")
    v3 = np.array([frame.toward_viewer_sample[0], frame.toward_viewer_sample[1], 0.0])
    return np.cross(v3, _Z) + 0.0


@dataclass(frozen=True)
class SectionLineFrame:
    """The in-plane frame of a section line and the viewer's side of it (§7), in S.

    Attributes
    ----------
    along_sample : ndarray, shape (2,)
        Unit vector from the line's first point to its second; NaN if ``is_point``.
    toward_viewer_sample : ndarray, shape (2,)
        Unit vector V, perpendicular to the line, toward the viewer; NaN if the
        line is a point or the viewer stands on it.
    length_um : float
        Length of the line, µm.
    viewer_offset_um : float
        Distance of the viewer point from the (infinite) line, µm.
    """

    along_sample: np.ndarray
    toward_viewer_sample: np.ndarray
    length_um: float
    viewer_offset_um: float

    @property
    def is_point(self) -> bool:
        """True when the two points of the line coincide (no direction)."""
        return self.length_um <= _MIN_LINE_UM

    @property
    def viewer_on_line(self) -> bool:
        """True when the viewer point lies on the line (it names no side)."""
        return self.viewer_offset_um <= _MIN_VIEWER_OFFSET * max(1.0, self.length_um)


def section_line_frame(line_sample: ArrayLike, viewer_sample: ArrayLike) -> SectionLineFrame:
    """Direction, length and viewer side of a section line (§7), in S.

    Parameters
    ----------
    line_sample : array_like, shape (2, 2)
        First and second point of the section line, µm, in S.
    viewer_sample : array_like, shape (2,)
        Any point on the viewer's side, µm, in S.

    Returns
    -------
    SectionLineFrame
        A degenerate geometry (one point twice, a viewer on the line) is reported
        by ``is_point`` and ``viewer_on_line``, with NaN directions, not raised.

    Examples
    --------
    >>> f = section_line_frame([[0, 0], [10, 0]], [5, -3])
    >>> f.along_sample.tolist(), f.toward_viewer_sample.tolist(), f.length_um
    ([1.0, 0.0], [0.0, -1.0], 10.0)
    >>> section_line_frame([[0, 0], [10, 0]], [5, 0]).viewer_on_line
    True
    """
    line = as_float_array(line_sample, "line_sample")
    viewer = as_float_array(viewer_sample, "viewer_sample")
    if line.shape != (2, 2):
        raise ValueError(f"Expected `line_sample` to have shape (2, 2), got {line.shape}.")
    if viewer.shape != (2,):
        raise ValueError(f"Expected `viewer_sample` to have shape (2,), got {viewer.shape}.")
    nan2 = np.full(2, np.nan)
    delta = line[1] - line[0]
    length = float(np.hypot(*delta))
    if length <= _MIN_LINE_UM:
        return SectionLineFrame(nan2, nan2, length, float(np.hypot(*(viewer - line[0]))))
    along = delta / length
    rel = viewer - line[0]
    perp = rel - (rel @ along) * along
    dist = float(np.hypot(*perp))
    toward = nan2 if dist <= _MIN_VIEWER_OFFSET * max(1.0, length) else perp / dist
    return SectionLineFrame(along, toward, length, dist)


def depth_from_indent_um(diagonal_before_um: ArrayLike, diagonal_after_um: ArrayLike) -> np.ndarray:
    """Layer thickness from the shrinkage of a Vickers indent (§8).

    ``h = (d_before − d_after) / (2·√2·tan 68°)`` for the 136° square pyramid.

    Parameters
    ----------
    diagonal_before_um, diagonal_after_um : array_like
        Mean indent diagonal before and after removing the layer, µm.

    Returns
    -------
    ndarray
        Layer thickness h, µm.

    Examples
    --------
    >>> depth_from_indent_um(30.0, 23.0).round(5).tolist()
    0.99991
    """
    before = as_float_array(diagonal_before_um, "diagonal_before_um")
    after = as_float_array(diagonal_after_um, "diagonal_after_um")
    if np.any(after > before):
        raise ValueError(
            "Expected `diagonal_after_um` <= `diagonal_before_um` (the indent shrinks as "
            f"material is removed), got {after.tolist()!r} > {before.tolist()!r}."
        )
    return (before - after) / VICKERS_DEPTH_FACTOR


def serial_dip_deg(depth_um: ArrayLike, offset_um: ArrayLike) -> np.ndarray:
    """Dip from a serial section: ``tan δ = h / Δ`` (§8).

    Parameters
    ----------
    depth_um : array_like
        Layer thickness h, µm.
    offset_um : array_like
        Perpendicular offset Δ of the trace, µm (its sign is ignored).

    Returns
    -------
    ndarray
        Dip in degrees, [0, 90].

    Examples
    --------
    >>> serial_dip_deg(1.0, 0.5774).round(2).tolist()
    60.0
    """
    h = as_float_array(depth_um, "depth_um")
    d = as_float_array(offset_um, "offset_um")
    return np.rad2deg(np.arctan2(h, np.abs(d)))


def serial_offset_um(depth_um: ArrayLike, dip_deg: ArrayLike) -> np.ndarray:
    """How far a plane's trace moves between two sections: ``Δ = h / tan δ`` (§8).

    The inverse of :func:`serial_dip_deg`; with the least dip of interest it bounds the
    search for a boundary's trace on the deeper section.

    Parameters
    ----------
    depth_um : array_like
        Layer thickness h, µm.
    dip_deg : array_like
        Dip δ, degrees, (0, 90].

    Returns
    -------
    ndarray
        Perpendicular offset Δ, µm.

    Examples
    --------
    >>> serial_offset_um(1.0, 60.0).round(4).tolist()
    0.5774
    >>> serial_dip_deg(5.0, serial_offset_um(5.0, 10.0)).round(9).tolist()
    10.0
    """
    h = as_float_array(depth_um, "depth_um")
    dip = as_float_array(dip_deg, "dip_deg")
    return h / np.tan(np.deg2rad(dip))


def serial_dip_sigma_deg(
    depth_um: ArrayLike, offset_um: ArrayLike, depth_sigma_um: ArrayLike, offset_sigma_um: ArrayLike
) -> np.ndarray:
    """First-order σ of the serial-section dip: ``√((Δσ_h)² + (hσ_Δ)²) / (h² + Δ²)``.

    Parameters
    ----------
    depth_um, offset_um, depth_sigma_um, offset_sigma_um : array_like
        h, Δ and their standard deviations, µm (broadcast).

    Returns
    -------
    ndarray
        σ of the dip in degrees.

    Examples
    --------
    >>> serial_dip_sigma_deg(5.0, 2.887, 0.2, 0.2).round(2).tolist()
    1.98
    """
    h = as_float_array(depth_um, "depth_um")
    d = np.abs(as_float_array(offset_um, "offset_um"))
    sh = as_float_array(depth_sigma_um, "depth_sigma_um")
    sd = as_float_array(offset_sigma_um, "offset_sigma_um")
    return np.rad2deg(np.hypot(d * sh, h * sd) / (h**2 + d**2))
