"""Images of a milled cross-section face, rendered from the 3D microstructure.

Owns :func:`render_face_image` and its record :class:`FaceImage`: the picture a
tilted beam gives of the face along a section line (conventions §7) — every grain
at its own grey level (channelling contrast), a bright protective cap above the
surface edge, dark trench walls beyond the ends of the line, optical blur, noise
and, if asked, a small rotation of the whole picture. Which region lies at each
face point comes from :func:`.microstructure.region_at`, so the truth of every
boundary on the face is :func:`.sectioning.cross_section_crossings`.

The projection is worked out with vectors, on its own, so that it checks the
section formulas of :mod:`inclination.sections` instead of repeating them: the
beam travels ``b = cos θ·Z − sin θ·V`` (θ the imaging tilt, V toward the viewer),
image-right is ``V × Z`` and image-up the unit vector normal to both, on the
surface side. Sample frame S of conventions §2, micrometres and degrees.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import ndimage

from .._validation import check_positive
from ..errors import SettingError
from ..sections.formulas import section_line_frame
from ._shared import Seed, checked, frozen
from .microstructure import Microstructure, region_at

__all__ = ["FaceImage", "render_face_image"]

#: Grey of the protective cap and of the trench walls (image units, 0 black, 1 white).
CAP_GREY = 0.95
WALL_GREY = 0.08


@dataclass(frozen=True)
class FaceImage:
    """A rendered face image and what is known of it.

    Attributes
    ----------
    image : ndarray, shape (H, W)
        Grey levels in [0, 1], surface up (row 0 at the top), image-right along
        ``V × Z_S`` (conventions §7).
    pixel_um : float
        Horizontal pixel size, µm.
    line_start_px : tuple of float
        ``(col, row)`` of the pixel where the section line's first point meets the
        surface.
    surface_row_px : float
        Row of the surface edge at ``line_start_px`` (before any rotation it is
        the same row everywhere).
    rotation_deg : float
        Rotation applied to the picture about ``line_start_px``, counter-clockwise
        as seen (the surface edge's right end goes up).
    region_px : ndarray of int, shape (H, W)
        Region id seen at each pixel, 0 on the cap and the walls.
    grey_by_region : ndarray, shape (R + 1,)
        Grey level of each region id (index 0 unused).
    right_along_line : bool
        True when image-right points from the line's first point to its second.
    """

    image: np.ndarray
    pixel_um: float
    line_start_px: tuple[float, float]
    surface_row_px: float
    rotation_deg: float
    region_px: np.ndarray
    grey_by_region: np.ndarray
    right_along_line: bool


def render_face_image(
    micro: Microstructure,
    *,
    line_um: ArrayLike,
    viewer_at_um: ArrayLike,
    imaging_tilt_deg: float,
    pixel_um: float,
    depth_um: float,
    rng: Seed,
    face_inclination_deg: float = 90.0,
    cap_um: float = 1.5,
    margin_um: float = 2.0,
    blur_px: float = 1.0,
    noise_sd: float = 0.02,
    rotation_deg: float = 0.0,
    grey_range: tuple[float, float] = (0.2, 0.8),
    grey_by_region: ArrayLike | None = None,
    supersample: int = 3,
) -> FaceImage:
    """Render the face image of a cross-section along ``line_um`` (conventions §7).

    Parameters
    ----------
    micro : Microstructure
    line_um : array_like, shape (2, 2)
        First and second point of the section line, µm, in S.
    viewer_at_um : array_like, shape (2,)
        A point on the viewer's side of the line, µm, in S.
    imaging_tilt_deg : float
        Angle between the beam and the surface normal, degrees.
    pixel_um : float
        Pixel size, µm (square pixels in the image plane).
    depth_um : float
        Depth of the face shown, µm (measured down the face).
    rng : None, int or numpy.random.Generator
        Seed of the grey levels and the noise.
    face_inclination_deg : float, optional
        Angle between the face and the surface, degrees (leaning toward the viewer
        with depth when below 90).
    cap_um, margin_um : float, optional
        Height of the cap above the surface edge and width of the trench wall shown
        beyond each end of the line, µm in the image.
    blur_px, noise_sd : float, optional
        σ of the Gaussian blur (pixels) and SD of the added Gaussian noise.
    rotation_deg : float, optional
        Rotation of the picture about the line's start pixel, counter-clockwise as
        seen.
    grey_range : (float, float), optional
        Range of the uniform random grey level of each region.
    grey_by_region : array_like, shape (R + 1,), optional
        Grey of each region id, replacing the random ones (index 0 unused).
    supersample : int, optional
        Samples per pixel side before averaging (sharp edges land between pixels).

    Returns
    -------
    FaceImage

    Raises
    ------
    SettingError
        A size, σ or tilt out of range, or a line outside the box.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(60, 40, 20), n_grains=10, rng=3)
    >>> face = render_face_image(micro, line_um=((5, 20), (55, 20)), viewer_at_um=(30, 25),
    ...     imaging_tilt_deg=52, pixel_um=0.2, depth_um=4, rng=0)
    >>> face.image.shape, face.line_start_px, face.right_along_line
    ((24, 270), (10.0, 7.5), True)
    """
    for name, value in (("pixel_um", pixel_um), ("depth_um", depth_um)):
        checked(SettingError, check_positive, value, name)
    for name, value in (
        ("cap_um", cap_um),
        ("margin_um", margin_um),
        ("blur_px", blur_px),
        ("noise_sd", noise_sd),
    ):
        checked(SettingError, check_positive, value, name, allow_zero=True)
    if not 0.0 < imaging_tilt_deg <= 90.0:
        raise SettingError(f"Expected `imaging_tilt_deg` in (0, 90], got {imaging_tilt_deg!r}.")
    if int(supersample) < 1:
        raise SettingError(f"Expected `supersample` >= 1, got {supersample!r}.")
    line = np.asarray(line_um, dtype=float)
    frame = section_line_frame(line, np.asarray(viewer_at_um, dtype=float))
    lx, ly, _ = micro.box_um
    if frame.is_point or frame.viewer_on_line:
        raise SettingError(
            f"Expected two distinct points and a viewer off the line, got {line.tolist()} "
            f"and {np.asarray(viewer_at_um).tolist()}."
        )
    if line.min() < 0 or line[:, 0].max() > lx or line[:, 1].max() > ly:
        raise SettingError(
            f"Expected `line_um` to lie inside the box [0, {lx}] × [0, {ly}] µm, "
            f"got {line.tolist()}."
        )
    p0 = np.array([line[0, 0], line[0, 1], 0.0])
    u = np.array([*frame.along_sample, 0.0])
    v = np.array([*frame.toward_viewer_sample, 0.0])
    length = frame.length_um
    gen = np.random.default_rng(rng)

    z = np.array([0.0, 0.0, 1.0])
    theta = np.deg2rad(imaging_tilt_deg)
    phi = np.deg2rad(face_inclination_deg)
    beam = np.cos(theta) * z - np.sin(theta) * v
    right = np.cross(v, z)
    up = np.cross(beam, right)
    up /= np.linalg.norm(up)
    if up @ z > 0:
        up = -up
    down_face = np.sin(phi) * z + np.cos(phi) * v
    # Image µm per µm down the face: the projection of the face's down direction on
    # the image's down axis (the foreshortening of the tilted view).
    shortening = float(down_face @ -up)
    if shortening <= 1e-6:
        raise SettingError(
            f"Expected a tilt that sees the face, got {imaging_tilt_deg!r} deg for a face "
            f"at {face_inclination_deg!r} deg."
        )
    right_sign = float(np.sign(right @ u))

    width_um = length + 2.0 * margin_um
    height_um = cap_um + depth_um * shortening
    n_cols = int(np.ceil(width_um / pixel_um))
    n_rows = int(np.ceil(height_um / pixel_um))
    c0 = margin_um / pixel_um if right_sign > 0 else (margin_um + length) / pixel_um
    r0 = cap_um / pixel_um
    k = int(supersample)
    sub = (np.arange(k) + 0.5) / k - 0.5
    cols = (np.arange(n_cols)[:, None] + sub[None, :]).ravel()
    rows = (np.arange(n_rows)[:, None] + sub[None, :]).ravel()
    cc, rr = np.meshgrid(cols, rows)
    s = right_sign * (cc - c0) * pixel_um
    w = (rr - r0) * pixel_um / shortening
    on_face = (w >= 0) & (s >= 0) & (s <= length)
    points = p0 + s[on_face][:, None] * u + w[on_face][:, None] * down_face
    region_sub = np.zeros(cc.shape, dtype=np.int64)
    region_sub[on_face] = region_at(micro, points)

    if grey_by_region is None:
        lo, hi = grey_range
        greys = np.concatenate([[0.0], gen.uniform(lo, hi, micro.n_regions)])
    else:
        greys = np.asarray(grey_by_region, dtype=float)
    grey_sub = np.where(on_face, greys[region_sub], np.where(w < 0, CAP_GREY, WALL_GREY))
    image = grey_sub.reshape(n_rows, k, n_cols, k).mean(axis=(1, 3))
    region = region_sub.reshape(n_rows, k, n_cols, k)[:, k // 2, :, k // 2]
    if blur_px > 0:
        image = ndimage.gaussian_filter(image, blur_px, mode="nearest")
    if rotation_deg:
        from skimage.transform import rotate

        centre = (c0, r0)
        image = rotate(image, rotation_deg, center=centre, order=1, mode="edge")
        region = rotate(region, rotation_deg, center=centre, order=0, preserve_range=True)
        region = np.rint(region).astype(np.int64)
    if noise_sd > 0:
        image = image + gen.normal(0.0, noise_sd, image.shape)
    # Pixel coordinates put pixel centres on integers (as skimage does): the line's
    # first point meets the surface at (c0, r0).
    return FaceImage(
        image=frozen(np.clip(image, 0.0, 1.0)),
        pixel_um=float(pixel_um),
        line_start_px=(float(c0), float(r0)),
        surface_row_px=float(r0),
        rotation_deg=float(rotation_deg),
        region_px=frozen(region),
        grey_by_region=frozen(greys),
        right_along_line=bool(right_sign > 0),
    )
