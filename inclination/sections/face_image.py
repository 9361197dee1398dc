"""Boundaries measured on the image of a cross-section face (conventions §7).

Owns the reading of a face image (:func:`read_face_image`: greyscale TIFF or PNG)
and its measurement (:func:`measure_face_image`): the surface edge, the regions of
uniform grey below it, and a straight line fitted to every boundary between two
regions that meets the surface. The result, :class:`FaceMeasurement`, lists each
line as a job file's ``boundaries`` entry would (along-line position, image angle,
the side it descends toward, σ of the angle) with a quality figure, and says which
entries are unsure (low contrast, short, curved); :meth:`FaceMeasurement.entries`
gives the sure ones, which go into :func:`.cross_section.measure_cross_section`
unchanged.

Image coordinates: ``(col, row)`` with pixel centres on integers, row down. The
surface edge runs at ``rotation_deg`` (counter-clockwise as seen); ``u`` is the
distance along it toward image-right and ``v`` the distance below it, both in
image µm (``pixel_um`` per pixel). Depths on the face are ``v`` over the
foreshortening of the tilted view, :func:`.formulas.face_depth_scale`.

Segmentation method: a watershed of the gradient of the Gaussian-smoothed image
(lines of the watershed sit on the gradient ridges, where a blurred grey step is
steepest) over-segments the noisy face into small basins; adjacent basins are then
merged, least different first, while their mean grey levels (of the raw image,
whose noise is independent pixel to pixel) differ by less than ``merge_z`` standard
errors — a statistical region merging — or by less than 1.5 noise SDs (a step no
line is trusted on). Noise decides what is merged, not a fixed grey step. The floor
matters along real boundaries: the strip of blurred edge pixels beside one has a
mean a noise SD or so off its grain's, and with a floor of a quarter SD it stood as
a region of its own, cutting the real boundary short (and leaving low-contrast
lines inside grains). Two grains less than 1.5 noise SDs apart in grey are one
region: their boundary is not measured, and the grey check of the lines either side
(:func:`neighbour_check`) then flags them, with the map's boundary between them
named (:func:`neighbour_check_notes`).

Measured 2026-12 on synthetic faces (the faces of
tests/end_to_end/test_face_images_synthetic.py: three samples, 15 faces, 0.1 µm
pixels, noise SD 0.02, blur 1 px, 52° tilt): image angle error median 0.48°, 90th
percentile 1.7° (110 lines); dip error median 0.47°, 90th percentile 1.2° (86
boundaries, β > 30°); RMS of angle error over σ 0.79; 39 of the 42 visible twin
boundaries used. With the former floor of a quarter SD: 84 lines (0.66°, 2.0°), 68
dips (0.54°, 1.65°), 27 of 42 twins.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from ..errors import InputError, SettingError
from ..traces import fit_line_tls
from ._settings import setting_positive
from .formulas import face_depth_scale, image_right_sample

_Z = np.array([0.0, 0.0, 1.0])
_Z.setflags(write=False)

__all__ = [
    "FACE_LINE_STATUSES",
    "FaceMeasurement",
    "along_offsets_um",
    "neighbour_check",
    "neighbour_check_notes",
    "read_face_image",
    "measure_face_image",
    "predicted_image_direction",
]

# A boundary that meets the surface has points from the top of the fitting window
# down (the region mask starts there, so the first row of pixel pairs lies half a
# pixel below it). One whose points start deeper runs under a grain that pinches out
# just below the surface: its line belongs to other grains than the trace at that
# place (the grey check then flags the pair), so it is short, not used.
_MAX_TOP_GAP_PX = 2.0

# Adjacent regions whose mean greys differ by less than this many noise SDs are merged
# (module docstring); a line then needs ``min_contrast`` SDs (default the same) to be used.
_MERGE_FLOOR_SD = 1.5

#: Closed set of the ``status`` of a line found on a face image.
FACE_LINE_STATUSES = ("used", "low_contrast", "short", "curved")


def read_face_image(path: str | os.PathLike, *, job_path=None, pointer: str = "") -> np.ndarray:
    """Read a greyscale face image (TIFF by tifffile, PNG by matplotlib).

    Parameters
    ----------
    path : str or Path
        The image file.
    job_path, pointer : optional
        Job file and JSON pointer of the ``image`` entry, for error messages.

    Returns
    -------
    ndarray, shape (H, W)
        Grey levels as floats, scaled to [0, 1] by the integer type's range (or
        left as they are for a float image; matplotlib gives a PNG in [0, 1]). An
        RGB(A) image whose colour channels are equal is grey and is read as its
        first channel. A file not named ``.tif``/``.tiff`` is read as PNG.

    Raises
    ------
    InputError
        A missing or unreadable file, a colour image, or fewer than 8 × 8 pixels.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import tifffile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "face.tif"
    >>> tifffile.imwrite(p, np.full((10, 12), 32768, np.uint16))
    >>> img = read_face_image(p)
    >>> img.shape, round(float(img[0, 0]), 4)
    ((10, 12), 0.5)
    """

    def fail(message):
        raise InputError(message, path=job_path, pointer=f"{pointer}/path")

    p = os.fspath(path)
    if not os.path.isfile(p):
        fail(f"Expected a face image file, got {p!r}, which does not exist.")
    try:
        if p.lower().endswith((".tif", ".tiff")):
            import tifffile

            raw = np.asarray(tifffile.imread(p))
        else:
            from matplotlib import image as mpimg

            # An open handle, closed here whatever the reader does with bad bytes.
            with open(p, "rb") as fh:
                raw = np.asarray(mpimg.imread(fh, format="png"))
    except Exception as exc:  # noqa: BLE001 - every reader failure is a bad input file
        fail(f"Expected a readable greyscale TIFF or PNG, got {p!r} ({type(exc).__name__}).")
    if raw.ndim == 3 and raw.shape[-1] in (3, 4):
        rgb = raw[..., :3]
        if not (
            np.array_equal(rgb[..., 0], rgb[..., 1]) and np.array_equal(rgb[..., 0], rgb[..., 2])
        ):
            fail(f"Expected a greyscale image, got a colour image of shape {raw.shape} in {p!r}.")
        raw = rgb[..., 0]
    if raw.ndim != 2:
        fail(f"Expected a 2-D greyscale image, got shape {raw.shape} in {p!r}.")
    if min(raw.shape) < 8:
        fail(f"Expected an image of at least 8 × 8 pixels, got {raw.shape} in {p!r}.")
    if np.issubdtype(raw.dtype, np.integer):
        info = np.iinfo(raw.dtype)
        return (raw.astype(float) - info.min) / (info.max - info.min)
    img = raw.astype(float)
    if not np.all(np.isfinite(img)):
        fail(f"Expected finite grey levels, got NaN or infinity in {p!r}.")
    return img


@dataclass(frozen=True)
class FaceMeasurement:
    """The surface edge and the boundary lines found on one face image (§7).

    Scalars describe the image; the ``lines`` table has one row per boundary line
    between two regions that meet the surface, in order along the section line.

    Attributes
    ----------
    surface_px : ndarray, shape (2, 2)
        ``(col, row)`` of the two ends of the surface edge across the image.
    origin_px : tuple of float
        ``(col, row)`` of the section line's first point on the surface edge.
    rotation_deg : float
        Rotation of the surface edge, counter-clockwise as seen.
    rotation_found : bool
        True when the rotation was fitted, not declared.
    noise_sd : float
        Estimated SD of the image noise (grey units).
    window_um : tuple of float
        Depth window on the face over which each line was fitted, µm.
    lines : dict of 1-D arrays
        ``along_um, image_angle_deg, descends, angle_sigma_deg, contrast``
        (grey step over the noise SD), ``grey_left, grey_right, residual_px``
        (RMS distance of the boundary points from the line), ``span_um`` (image
        µm), ``n_points``, ``status`` (one of ``FACE_LINE_STATUSES``),
        ``col0_px, row0_px, col1_px, row1_px`` (the fitted line over the window),
        ``region_left, region_right`` (ids in ``labels`` of the regions either side).
    labels : ndarray of int, shape (H, W)
        The regions of the face (0 outside the analysed part).
    """

    surface_px: np.ndarray
    origin_px: tuple[float, float]
    rotation_deg: float
    rotation_found: bool
    noise_sd: float
    window_um: tuple[float, float]
    lines: dict = field(repr=False)
    labels: np.ndarray = field(repr=False)

    def entries(self, *, all_lines: bool = False) -> list[dict]:
        """The lines as a job file's ``boundaries`` list (sure ones unless ``all_lines``).

        Examples
        --------
        >>> m = FaceMeasurement(np.zeros((2, 2)), (0.0, 0.0), 0.0, True, 0.01, (0.2, 2.0),
        ...     {"along_um": np.array([3.0]), "image_angle_deg": np.array([40.0]),
        ...      "descends": np.array(["left"]), "angle_sigma_deg": np.array([0.5]),
        ...      "status": np.array(["used"])}, np.zeros((2, 2), int))
        >>> m.entries()
        [{'along_um': 3.0, 'image_angle_deg': 40.0, 'descends': 'left', 'angle_sigma_deg': 0.5}]
        """
        t = self.lines
        keep = np.ones(len(t["status"]), bool) if all_lines else t["status"] == "used"
        return [
            {
                "along_um": round(float(t["along_um"][i]), 4),
                "image_angle_deg": round(float(t["image_angle_deg"][i]), 3),
                "descends": str(t["descends"][i]),
                "angle_sigma_deg": round(float(t["angle_sigma_deg"][i]), 3),
            }
            for i in np.flatnonzero(keep)
        ]


def _surface_points(image, smooth_px):
    """Per column, the sub-pixel row of the first strong bright-to-dark step from the top."""
    from skimage.filters import gaussian

    smooth = gaussian(image, sigma=smooth_px, mode="nearest", preserve_range=True)
    drop = smooth[:-1] - smooth[1:]
    # The noise of the row differences, from their median absolute deviation.
    scale = 1.4826 * np.median(np.abs(drop - np.median(drop)))
    strong = drop > max(6.0 * scale, 0.05)
    cols, rows = [], []
    for c in range(image.shape[1]):
        hits = np.flatnonzero(strong[:, c])
        if not len(hits):
            continue
        r = hits[0]
        # Walk down to the peak of this step, then refine it by a parabola.
        while r + 1 < drop.shape[0] and drop[r + 1, c] >= drop[r, c]:
            r += 1
        if 0 < r < drop.shape[0] - 1:
            a, b, cc = drop[r - 1, c], drop[r, c], drop[r + 1, c]
            den = a - 2 * b + cc
            off = 0.5 * (a - cc) / den if den != 0 else 0.0
        else:
            off = 0.0
        cols.append(c)
        rows.append(r + 0.5 + float(np.clip(off, -0.5, 0.5)))
    return np.array(cols, float), np.array(rows, float)


def _fit_surface(cols, rows, *, rotation_deg, surface_row, start):
    """Angle (deg, counter-clockwise as seen) and a point of the surface edge."""
    if len(cols) < 2:
        raise ValueError("no surface edge")
    pts = np.stack([cols, rows], axis=-1)
    inlier = np.ones(len(cols), bool)
    # Columns where a bright grain below the cap hides the step, or a dark grain
    # gives an early one, are outliers: refit on points within 1.5 px, three times.
    for _ in range(3):
        fit = fit_line_tls(pts[inlier])
        d = np.array(fit.direction)
        normal = np.array([-d[1], d[0]])
        dist = np.abs((pts - np.array(fit.centre_um)) @ normal)
        new = dist <= max(1.5, 3.0 * np.median(dist))
        if new.sum() < 2 or np.array_equal(new, inlier):
            break
        inlier = new
    fit = fit_line_tls(pts[inlier])
    d = np.array(fit.direction)
    angle = -math.degrees(math.atan2(d[1], d[0]))
    angle = (angle + 90.0) % 180.0 - 90.0
    if rotation_deg is not None:
        angle = float(rotation_deg)
    if surface_row is not None:
        return angle, np.array([start[0], float(surface_row)])
    rho = math.radians(angle)
    normal = np.array([math.sin(rho), math.cos(rho)])
    centre = np.median((pts[inlier]) @ normal)
    return angle, normal * centre


def _noise_sd(image, mask):
    """Noise SD from the median of the Laplacian-difference residual (Immerkær 1996).

    The 3 × 3 mask ``[[1, -2, 1], [-2, 4, -2], [1, -2, 1]]`` cancels any plane of grey,
    so a uniform region leaves noise alone (its weights' squares sum to 36); the
    median instead of the mean keeps the few pixels on region edges out of it.
    """
    from scipy import ndimage

    kernel = np.array([[1.0, -2.0, 1.0], [-2.0, 4.0, -2.0], [1.0, -2.0, 1.0]])
    residual = ndimage.convolve(image, kernel, mode="nearest")
    inner = ndimage.binary_erosion(mask, iterations=1)
    r = residual[inner] if inner.any() else residual[mask]
    return float(1.4826 * np.median(np.abs(r)) / 6.0)


def _joined_to_top(points):
    """Mask of the boundary points connected (steps <= 1 px) to the topmost one."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    pairs = cKDTree(points).query_pairs(r=1.01, output_type="ndarray")
    n = len(points)
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    return comp == comp[int(np.argmin(points[:, 1]))]


def _merge_regions(labels, image, *, noise_sd, merge_z):
    """Statistical region merging of adjacent basins, least different first.

    Each round merges every pair of adjacent regions that are each other's least
    different neighbour and differ by less than the threshold (a matching, so the
    globally least different pair always merges); rounds repeat until none is left.
    """
    n = int(labels.max()) + 1
    flat = labels.ravel()
    sums = np.bincount(flat, weights=image.ravel(), minlength=n)
    counts = np.bincount(flat, minlength=n).astype(float)
    pairs = []
    for a, b in ((labels[:, :-1], labels[:, 1:]), (labels[:-1, :], labels[1:, :])):
        m = (a != b) & (a > 0) & (b > 0)
        pairs.append(np.stack([np.minimum(a[m], b[m]), np.maximum(a[m], b[m])], axis=-1))
    edges = np.unique(np.concatenate(pairs), axis=0)
    root = np.arange(n)
    while len(edges):
        a, b = edges[:, 0], edges[:, 1]
        step = np.abs(sums[a] / counts[a] - sums[b] / counts[b])
        z = step / (noise_sd * np.sqrt(1.0 / counts[a] + 1.0 / counts[b]))
        # A step under _MERGE_FLOOR_SD noise SDs is no boundary to trust, however large
        # the regions. Merging it keeps the strips of blurred edge pixels along a real
        # boundary (their mean pulled a noise SD or so toward the neighbour's grey) from
        # standing as regions of their own, which cut the real boundary short.
        z[step < _MERGE_FLOOR_SD * noise_sd] = 0.0
        ok = z < merge_z
        if not ok.any():
            break
        best = np.full(n, np.inf)
        np.minimum.at(best, a[ok], z[ok])
        np.minimum.at(best, b[ok], z[ok])
        mutual = ok & (z == best[a]) & (z == best[b])
        # Ties could pair one region twice; keep the first pair of each region.
        chosen = np.flatnonzero(mutual)
        used = np.zeros(n, bool)
        keep = []
        for e in chosen:
            if not (used[a[e]] or used[b[e]]):
                used[a[e]] = used[b[e]] = True
                keep.append(e)
        keep = np.asarray(keep, dtype=np.int64)
        ka, kb = a[keep], b[keep]
        sums[ka] += sums[kb]
        counts[ka] += counts[kb]
        new_root = np.arange(n)
        new_root[kb] = ka
        root = new_root[root]
        edges = new_root[edges]
        edges = np.sort(edges, axis=1)
        edges = np.unique(edges[edges[:, 0] != edges[:, 1]], axis=0)
    root[0] = 0
    return root[labels]


def measure_face_image(
    image: ArrayLike,
    *,
    pixel_um: float,
    line_start_px: ArrayLike,
    line_length_um: float,
    right_along_line: bool,
    tilt_deg: float,
    face_inclination_deg: float = 90.0,
    surface_row: float | None = None,
    rotation_deg: float | None = None,
    depth_um: float | None = None,
    window_um: tuple[float, float] = (0.3, 2.5),
    smooth_px: float = 1.5,
    merge_z: float = 6.0,
    min_contrast: float = 1.5,
    max_residual_px: float = 0.8,
    min_span_fraction: float = 0.6,
) -> FaceMeasurement:
    """Find the surface edge and measure every boundary meeting it on a face image (§7).

    The surface edge is the first strong bright-to-dark step from the top of each
    column (the bright cap over the darker face), fitted by total least squares
    with outliers dropped; a declared ``rotation_deg`` or ``surface_row`` replaces
    the fitted angle or position. The face below (within the section line's ends,
    a pixel clear of the trench walls) is segmented (module docstring); each pair of
    regions that both reach the surface and share a boundary there gives a line,
    fitted with :func:`inclination.traces.fit_line_tls` to the midpoints between
    neighbouring pixels of the two regions whose depth on the face is within
    ``window_um``. Its σ adds the fit's own to the pixel staircase's,
    ``pixel / (span·√12)`` rad. A line is unsure — listed, not used — when the
    grey step across it is below ``min_contrast`` noise SDs (``low_contrast``), its
    points span less than ``min_span_fraction`` of the window or start more than 2 px
    below its top (``short``: a boundary under a grain that pinches out just below the
    surface does not meet the surface where its line would), or they
    stray from the line by more than ``max_residual_px`` RMS (``curved``).

    Parameters
    ----------
    image : array_like, shape (H, W)
        Grey levels, surface up.
    pixel_um : float
        Horizontal pixel size, µm.
    line_start_px : array_like, shape (2,)
        ``(col, row)`` where the section line's first point meets the surface.
    line_length_um : float
        Length of the section line, µm (the face is analysed between its ends).
    right_along_line : bool
        True when image-right points from the line's first point to its second
        (:func:`.formulas.image_right_sample`).
    tilt_deg : float
        Imaging tilt, degrees.
    face_inclination_deg : float, optional
        Angle between the face and the surface, degrees.
    surface_row, rotation_deg : float, optional
        Row of the surface edge at the start column, and its rotation
        (counter-clockwise as seen); found when None.
    depth_um : float, optional
        Depth on the face analysed, µm (default: to the bottom of the image).
    window_um : (float, float), optional
        Depths on the face between which lines are fitted, µm.
    smooth_px, merge_z, min_contrast, max_residual_px, min_span_fraction : float, optional
        Smoothing σ (pixels) for the gradient, the merge threshold (standard errors
        of the difference of two region means), and the three thresholds of an
        unsure line. Regions less than 1.5 noise SDs apart are merged whatever
        ``merge_z`` says, so ``low_contrast`` lines occur only with a
        ``min_contrast`` above 1.5.

    Returns
    -------
    FaceMeasurement

    Raises
    ------
    SettingError
        A size, threshold or window out of range.
    ValueError
        No surface edge in the image, or a start pixel off the image.

    Examples
    --------
    >>> img = np.full((40, 60), 0.3); img[:10] = 0.95
    >>> cols, rows = np.meshgrid(np.arange(60), np.arange(40))
    >>> img[(rows >= 10) & (cols > 30 + (rows - 10))] = 0.7
    >>> m = measure_face_image(img, pixel_um=0.1, line_start_px=(5, 9.5),
    ...     line_length_um=5.0, right_along_line=True, tilt_deg=90.0,
    ...     window_um=(0.3, 2.0), smooth_px=1.0)
    >>> m.lines["status"].tolist(), m.lines["descends"].tolist()
    (['used'], ['right'])
    >>> m.lines["along_um"].round(1).tolist(), m.lines["image_angle_deg"].round(0).tolist()
    ([2.5], [45.0])
    """
    from skimage.feature import peak_local_max
    from skimage.filters import gaussian, sobel
    from skimage.segmentation import watershed

    img = np.asarray(image, dtype=float)
    if img.ndim != 2:
        raise ValueError(f"Expected `image` to have 2 dimensions, got {img.ndim}.")
    for name, value in (
        ("pixel_um", pixel_um),
        ("line_length_um", line_length_um),
        ("smooth_px", smooth_px),
        ("merge_z", merge_z),
        ("max_residual_px", max_residual_px),
    ):
        setting_positive(value, name)
    setting_positive(min_contrast, "min_contrast", allow_zero=True)
    lo_um, hi_um = (float(w) for w in window_um)
    if not 0.0 <= lo_um < hi_um:
        raise SettingError(
            f"Expected `window_um` as (low, high) with 0 <= low < high, got {window_um!r}."
        )
    start = np.asarray(line_start_px, dtype=float)
    h, w = img.shape
    if start.shape != (2,) or not (-0.5 <= start[0] <= w - 0.5 and -0.5 <= start[1] <= h - 0.5):
        raise ValueError(
            f"Expected `line_start_px` (col, row) inside the image {w} × {h} px, "
            f"got {np.asarray(line_start_px).tolist()}."
        )
    scale = float(face_depth_scale(tilt_deg, face_inclination_deg=face_inclination_deg))

    found = rotation_deg is None
    if rotation_deg is None or surface_row is None:
        cols, rows = _surface_points(img, 1.0)
        try:
            angle, ref = _fit_surface(
                cols, rows, rotation_deg=rotation_deg, surface_row=surface_row, start=start
            )
        except ValueError:
            raise ValueError(
                "Expected a bright cap above a darker face (a straight surface edge), "
                "found no such edge."
            ) from None
    else:
        angle, ref = float(rotation_deg), np.array([start[0], float(surface_row)])
    rho = math.radians(angle)
    e_u = np.array([math.cos(rho), -math.sin(rho)])
    e_v = np.array([math.sin(rho), math.cos(rho)])
    origin = ref + ((start - ref) @ e_u) * e_u

    cc, rr = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    rel = np.stack([cc - origin[0], rr - origin[1]], axis=-1)
    u_px = rel @ e_u
    v_px = rel @ e_v
    along_sign = 1.0 if right_along_line else -1.0
    along_px = along_sign * u_px
    # Keep the blurred surface edge and trench walls out of the regions: a margin of
    # twice the smoothing (and two pixels) from each.
    edge_px = 2.0 * smooth_px + 2.0
    depth_px = np.inf if depth_um is None else depth_um * scale / pixel_um
    mask = (
        (v_px >= edge_px)
        & (v_px <= depth_px)
        & (along_px >= edge_px)
        & (along_px <= line_length_um / pixel_um - edge_px)
    )
    if mask.sum() < 16:
        raise ValueError("Expected a face below the surface edge, got fewer than 16 pixels.")
    face_pixels = img[mask]
    noise = _noise_sd(img, mask)
    noise = max(noise, 1e-3 * float(np.ptp(face_pixels)) + 1e-9)

    gradient = sobel(gaussian(img, sigma=smooth_px, mode="nearest", preserve_range=True))
    # Seeds at least 2 px apart: every regional minimum of a noisy gradient would give
    # basins of a few pixels, whose merging costs time and decides nothing.
    seeds = peak_local_max(
        -gradient, min_distance=2, labels=mask.astype(np.int64), exclude_border=False
    )
    markers = np.zeros(img.shape, dtype=np.int64)
    markers[tuple(seeds.T)] = np.arange(1, len(seeds) + 1)
    basins = watershed(gradient, markers=markers, mask=mask)
    labels = _merge_regions(basins, img, noise_sd=noise, merge_z=merge_z)

    n = int(labels.max()) + 1
    counts = np.bincount(labels.ravel(), minlength=n).astype(float)
    means = np.bincount(labels.ravel(), weights=img.ravel(), minlength=n) / np.maximum(counts, 1)
    top_band = v_px < edge_px + max(2.0, smooth_px * 2)
    at_top = np.zeros(n, bool)
    at_top[np.unique(labels[top_band & mask])] = True
    at_top[0] = False

    # Midpoints between neighbouring pixels of two different regions.
    mids, keys, a_left = [], [], []
    for axis in (1, 0):
        sl_a = (slice(None), slice(None, -1)) if axis == 1 else (slice(None, -1), slice(None))
        sl_b = (slice(None), slice(1, None)) if axis == 1 else (slice(1, None), slice(None))
        la, lb = labels[sl_a], labels[sl_b]
        m = (la != lb) & (la > 0) & (lb > 0)
        lo_l, hi_l = np.minimum(la[m], lb[m]), np.maximum(la[m], lb[m])
        keys.append(lo_l * n + hi_l)
        mids.append(
            0.5
            * (
                np.stack([u_px[sl_a][m], v_px[sl_a][m]], -1)
                + np.stack([u_px[sl_b][m], v_px[sl_b][m]], -1)
            )
        )
        # Horizontal neighbours tell which region lies to the left (smaller u).
        left_is_lo = (la[m] == lo_l) if axis == 1 else np.zeros(m.sum(), bool)
        a_left.append(np.where(axis == 1, left_is_lo.astype(float), np.nan))
    keys = np.concatenate(keys)
    mids = np.concatenate(mids)
    a_left = np.concatenate(a_left)

    lo_px, hi_px = lo_um * scale / pixel_um, hi_um * scale / pixel_um
    hi_px = min(hi_px, depth_px)
    rows = []
    for key in np.unique(keys):
        a, b = divmod(int(key), n)
        if not (at_top[a] and at_top[b]):
            continue
        sel = keys == key
        pts = mids[sel]
        if pts[:, 1].min() > edge_px + max(2.0, smooth_px * 2) + 1.0:
            continue
        # Only the stretch of the pair's boundary joined to its top point meets the
        # surface; the same two regions may touch again deeper down.
        pts = pts[_joined_to_top(pts)]
        inwin = (pts[:, 1] >= max(lo_px, edge_px)) & (pts[:, 1] <= hi_px)
        p = pts[inwin]
        contrast = abs(means[a] - means[b]) / noise
        side = a_left[sel][_joined_to_top(mids[sel])][inwin]
        side = side[np.isfinite(side)]
        lo_left = bool(side.mean() >= 0.5) if len(side) else True
        grey_left, grey_right = (means[a], means[b]) if lo_left else (means[b], means[a])
        region_left, region_right = (a, b) if lo_left else (b, a)
        if len(p) < 3 or np.ptp(p[:, 1]) <= 0:
            continue
        fit = fit_line_tls(p)
        d = np.array(fit.direction)
        if d[1] < 0:
            d = -d
        du, dv = d
        if dv < 1e-6:
            continue
        cu, cv = fit.centre_um
        u0 = cu - cv * du / dv
        span_v = float(np.ptp(p[:, 1]))
        alpha = math.degrees(math.atan2(dv, abs(du)))
        staircase = 1.0 / (max(fit.span_um, 1.0) * math.sqrt(12.0))
        sigma = math.hypot(
            0.0 if math.isnan(fit.sigma_deg) else fit.sigma_deg, math.degrees(staircase)
        )
        if contrast < min_contrast:
            status = "low_contrast"
        elif (
            span_v < min_span_fraction * (hi_px - max(lo_px, edge_px))
            or p[:, 1].min() > max(lo_px, edge_px) + _MAX_TOP_GAP_PX
        ):
            status = "short"
        elif fit.residual_um > max_residual_px:
            status = "curved"
        else:
            status = "used"
        ends = [origin + (u0 + du / dv * vv) * e_u + vv * e_v for vv in (0.0, hi_px)]
        rows.append(
            (
                along_sign * u0 * pixel_um,
                alpha,
                "right" if du >= 0 else "left",
                sigma,
                contrast,
                grey_left,
                grey_right,
                fit.residual_um,
                fit.span_um * pixel_um,
                len(p),
                status,
                ends[0][0],
                ends[0][1],
                ends[1][0],
                ends[1][1],
                region_left,
                region_right,
            )
        )
    rows.sort(key=lambda r: r[0])
    names = (
        "along_um",
        "image_angle_deg",
        "descends",
        "angle_sigma_deg",
        "contrast",
        "grey_left",
        "grey_right",
        "residual_px",
        "span_um",
        "n_points",
        "status",
        "col0_px",
        "row0_px",
        "col1_px",
        "row1_px",
        "region_left",
        "region_right",
    )
    lines = {}
    for j, name in enumerate(names):
        values = [r[j] for r in rows]
        if name in ("descends", "status"):
            lines[name] = np.array(values, dtype="<U12")
        elif name in ("n_points", "region_left", "region_right"):
            lines[name] = np.array(values, dtype=np.int64)
        else:
            lines[name] = np.array(values, dtype=float)
    far = np.array([[0.0, 0.0], [w - 1.0, 0.0]])
    surface = np.stack([origin + ((c - origin) @ e_u) * e_u for c in far])
    return FaceMeasurement(
        surface_px=surface,
        origin_px=(float(origin[0]), float(origin[1])),
        rotation_deg=float(angle),
        rotation_found=found,
        noise_sd=noise,
        window_um=(max(lo_um, edge_px * pixel_um / scale), min(hi_um, depth_px * pixel_um / scale)),
        lines=lines,
        labels=labels,
    )


def predicted_image_direction(
    normal_sample: ArrayLike,
    *,
    line_sample: ArrayLike,
    viewer_sample: ArrayLike,
    tilt_deg: float,
    face_inclination_deg: float = 90.0,
) -> np.ndarray:
    """Direction in the image of the line a plane cuts on the face (§7).

    The plane of normal n meets the face (spanned by image-right ``r``,
    :func:`.formulas.image_right_sample`, and the down-face direction
    ``w = sin φ·Z + cos φ·V``) along ``l ∝ n × (r × w)``; the image shows its
    down-face part shortened by :func:`.formulas.face_depth_scale`.

    Parameters
    ----------
    normal_sample : array_like, shape (N, 3)
        Plane normals in S.
    line_sample, viewer_sample : array_like
        Section line (2, 2) and a viewer point (2,), µm in S.
    tilt_deg, face_inclination_deg : float
        Imaging tilt and face inclination, degrees.

    Returns
    -------
    ndarray, shape (N, 2)
        Unit ``(du, dv)`` in the image (``u`` toward image-right, ``v`` down),
        pointing down (``dv >= 0``); NaN for a plane parallel to the face.

    Examples
    --------
    >>> predicted_image_direction([[0.0, 0.0, 1.0]], line_sample=[[0, 0], [10, 0]],
    ...     viewer_sample=[5, -3], tilt_deg=52.0).round(6).tolist()
    [[1.0, 0.0]]
    """
    n = np.atleast_2d(np.asarray(normal_sample, dtype=float))
    right = image_right_sample(line_sample, viewer_sample)
    toward = np.cross(_Z, right)
    phi = math.radians(face_inclination_deg)
    down = math.sin(phi) * _Z + math.cos(phi) * toward
    line = np.cross(n, np.cross(right, down))
    a, b = line @ right, line @ down
    b = b * float(face_depth_scale(tilt_deg, face_inclination_deg=face_inclination_deg))
    flip = np.where(b < 0, -1.0, 1.0)
    a, b = a * flip, b * flip
    norm = np.hypot(a, b)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.stack([a / norm, b / norm], axis=-1)
    out[norm < 1e-12] = np.nan
    return out + 0.0


def along_offsets_um(
    section, segments: dict, segment_ids: ArrayLike, along_um: ArrayLike
) -> np.ndarray:
    """How far along the section line each matched trace lies from its image entry, µm.

    A trace's position is where the straight line through its segment meets the
    section line; the offset is that position minus the entry's ``along_um``. A
    steady offset over a face says the image's start pixel is misplaced by it.

    Parameters
    ----------
    section : CrossSection
        The face (its line and axes in S).
    segments : mapping
        Segments table (``segment_id, x0_um, y0_um, x1_um, y1_um``), S.
    segment_ids, along_um : array_like, shape (K,)
        Matched segment of each entry and the entry's position, µm.

    Returns
    -------
    ndarray, shape (K,)
        Offsets, µm (NaN for a segment parallel to the line).

    Examples
    --------
    >>> from inclination.sections import CrossSection
    >>> sec = CrossSection(line_sample=[[0, 40], [100, 40]], viewer_sample=[50, 60],
    ...     tilt_deg=52.0, along_um=[], image_angle_deg=[], descends=[], angle_sigma_deg=[])
    >>> seg = {"segment_id": np.array([7]), "x0_um": np.array([50.0]), "y0_um": np.array([0.0]),
    ...        "x1_um": np.array([52.0]), "y1_um": np.array([100.0])}
    >>> along_offsets_um(sec, seg, [7], [50.0]).round(3).tolist()
    [0.8]
    """
    ids = np.asarray(segment_ids, dtype=np.int64)
    pos = {int(s): i for i, s in enumerate(np.asarray(segments["segment_id"]))}
    rows = np.array([pos[int(s)] for s in ids], dtype=np.int64)
    p0, p1 = section.line_sample
    e = (p1 - p0) / np.hypot(*(p1 - p0))
    n = np.array([-e[1], e[0]])
    a = np.stack([np.asarray(segments[k], float)[rows] for k in ("x0_um", "y0_um")], -1)
    b = np.stack([np.asarray(segments[k], float)[rows] for k in ("x1_um", "y1_um")], -1)
    da, db = (a - p0) @ n, (b - p0) @ n
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(np.abs(da - db) > 1e-12, da / (da - db), np.nan)
    x = a + t[:, None] * (b - a)
    return (x - p0) @ e - np.asarray(along_um, dtype=float)


def neighbour_check(
    region_left: ArrayLike, region_right: ArrayLike, grain_a: ArrayLike, grain_b: ArrayLike
) -> np.ndarray:
    """Second check of a face's matches: the image's grey regions against the map's grains.

    Two lines in a row along the face that bound one grey region between them
    (right region of one is the left region of the next) must be matched to traces
    that share a grain: the grain the region shows. Each line gets ``consistent``
    when every such neighbour agrees, ``inconsistent`` when one does not, and
    ``unchecked`` when it has no matched neighbour over a shared region.

    Parameters
    ----------
    region_left, region_right : array_like of int, shape (K,)
        Image regions either side of each line, in order along image-right.
    grain_a, grain_b : array_like of int, shape (K,)
        Grains either side of each line's matched trace; -1 where unmatched.

    Returns
    -------
    ndarray of str, shape (K,)

    Examples
    --------
    >>> neighbour_check([1, 2, 3], [2, 3, 4], [10, 11, 5], [11, 12, 6]).tolist()
    ['consistent', 'inconsistent', 'inconsistent']
    """
    left = np.asarray(region_left, dtype=np.int64)
    right = np.asarray(region_right, dtype=np.int64)
    ga = np.asarray(grain_a, dtype=np.int64)
    gb = np.asarray(grain_b, dtype=np.int64)
    k = len(left)
    out = np.full(k, "unchecked", dtype="<U12")
    for i in range(k - 1):
        j = i + 1
        if right[i] != left[j] or ga[i] < 0 or ga[j] < 0:
            continue
        share = bool({int(ga[i]), int(gb[i])} & {int(ga[j]), int(gb[j])})
        for m in (i, j):
            if not share:
                out[m] = "inconsistent"
            elif out[m] == "unchecked":
                out[m] = "consistent"
    return out


def neighbour_check_notes(
    along_um: ArrayLike,
    region_left: ArrayLike,
    region_right: ArrayLike,
    grain_a: ArrayLike,
    grain_b: ArrayLike,
    *,
    crossings: dict,
) -> list[dict]:
    """Why :func:`neighbour_check` flags each pair of lines it finds inconsistent.

    A flagged pair bounds one grey region of the face, yet its matched traces share no
    grain. Either the map shows a boundary between the two traces on the section line
    that the face does not (a grain that pinches out just below the surface, or a
    boundary too faint on the image: the line below it belongs to another pair of
    grains than the trace it was matched to), or it shows none, and one line is matched
    to the wrong trace.

    Parameters
    ----------
    along_um : array_like, shape (K,)
        Position of each line along the section line, µm, in order along image-right.
    region_left, region_right, grain_a, grain_b : array_like of int, shape (K,)
        As in :func:`neighbour_check`.
    crossings : mapping
        Where the map's boundary network crosses the section line
        (:func:`.cross_section.network_crossings`: ``along_um, grain_a, grain_b``).

    Returns
    -------
    list of dict
        One per flagged pair: ``lines`` (the two indices), ``along_um``, ``grains``
        (each line's matched pair), ``between`` (the map's crossings between the two
        traces, each ``{"along_um", "grains"}``) and ``reason`` (a sentence).

    Examples
    --------
    >>> crossings = {"along_um": np.array([10.0, 12.5, 14.0]),
    ...              "grain_a": np.array([40, 43, 44]), "grain_b": np.array([43, 44, 31])}
    >>> notes = neighbour_check_notes([10.0, 13.7], [12, 15], [15, 11], [40, 31], [43, 44],
    ...                               crossings=crossings)
    >>> notes[0]["between"]
    [{'along_um': 12.5, 'grains': [43, 44]}]
    """
    along = np.asarray(along_um, dtype=float)
    left = np.asarray(region_left, dtype=np.int64)
    right = np.asarray(region_right, dtype=np.int64)
    ga = np.asarray(grain_a, dtype=np.int64)
    gb = np.asarray(grain_b, dtype=np.int64)
    c_along = np.asarray(crossings["along_um"], dtype=float)
    c_pair = [
        sorted((int(a), int(b)))
        for a, b in zip(crossings["grain_a"], crossings["grain_b"], strict=True)
    ]
    notes = []
    for i in range(len(left) - 1):
        j = i + 1
        if right[i] != left[j] or ga[i] < 0 or ga[j] < 0:
            continue
        mine = [sorted((int(ga[i]), int(gb[i]))), sorted((int(ga[j]), int(gb[j])))]
        if set(mine[0]) & set(mine[1]):
            continue
        # The two matched traces' own crossings bound the stretch; any other crossing
        # of the line between them is a boundary the face image does not show.
        ends = [c_along[[p == m for p in c_pair]] for m in mine]
        lo = min([along[i], *ends[0]], key=lambda x: abs(x - along[i]))
        hi = min([along[j], *ends[1]], key=lambda x: abs(x - along[j]))
        lo, hi = min(lo, hi), max(lo, hi)
        between = [
            {"along_um": round(float(c_along[k]), 2), "grains": c_pair[k]}
            for k in np.flatnonzero((c_along > lo) & (c_along < hi))
            if c_pair[k] not in mine
        ]
        seen = f"lines at {along[i]:.2f} and {along[j]:.2f} µm bound one grey region of the face"
        traces = f"their traces (grains {mine[0][0]}|{mine[0][1]} and {mine[1][0]}|{mine[1][1]})"
        if between:
            listed = ", ".join(
                f"{b['grains'][0]}|{b['grains'][1]} at {b['along_um']:.2f} µm" for b in between
            )
            reason = (
                f"{seen}, but the map shows boundary {listed} between {traces}, which the "
                "face does not show: a grain that pinches out just below the surface (or a "
                "boundary too faint to see), so the line found beneath it belongs to other "
                "grains than the trace it was matched to"
            )
        else:
            reason = (
                f"{seen}, but {traces} share no grain and the map shows no boundary between "
                "them: one of the two lines is matched to the wrong trace"
            )
        notes.append(
            {
                "lines": [i, j],
                "along_um": [round(float(along[i]), 2), round(float(along[j]), 2)],
                "grains": mine,
                "between": between,
                "reason": reason,
            }
        )
    return notes
