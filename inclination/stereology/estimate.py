"""The distribution of boundary planes in the crystal frame from the traces of one section.

The stereology of Saylor, El-Dasher, Adams & Rohrer (Metall. Mater. Trans. A 35 (2004)
1981–1989). A straight trace with direction t lies in its boundary plane, so the plane's
normal is perpendicular to t: it lies on the great circle ``{n : n · t_C = 0}`` of the
crystal frame C (``t_C = g t_S``, conventions §3 and §5), but where on the circle one
section cannot say. Summing every trace's circle, with every symmetric copy ``R_s t_C`` of
it (the proper rotations of the Laue class; n ≡ −n adds the inversion), on the
equal-area grid of :mod:`.grid`, the true normals pile up while the rest of each circle
spreads into a background.

The background, derived here from the geometry
----------------------------------------------
A boundary of normal n cut by sections of every direction leaves traces whose directions
are uniform on the circle perpendicular to n (whatever the sin ψ weight of the trace
length, it does not depend on the azimuth about n). The circles of its traces are then
the great circles through n, uniform in azimuth: the accumulated density at an angle α
from n is ``1 / (2π² sin α)`` per steradian, i.e. ``2 / (π sin α)`` MRD over the sphere,
and a uniform plane distribution accumulates to exactly 1 MRD everywhere. Binned, this
is a linear map ``A = F λ`` from the true distribution λ (MRD per bin) to the accumulated
one A, with ``F[i, j]`` the share of bin i in the circles of bin j's planes
(:func:`accumulation_kernel`, by quadrature; ``a_i = F[i, i]`` is about 0.045 for 10°
bins).

Which background removal, and why: :func:`remove_background` solves it,
``λ = 1 + F⁻¹ (A − 1)``, a direct (not iterative) deconvolution. Saylor et al. take the
part of every circle outside its plane's bin to spread like that of random planes, i.e.
``F ≈ a I + (1 − a) J / n``; with that F the same formula is exactly their subtraction
``λ = 1 + (A − 1) / a`` (the subtraction as read from the method; the paper's own
constants were not at hand to compare, so ``a`` here comes from the grid's geometry).
The full F also knows the 1/sin α tail next to each plane, which
the subtraction leaves in the neighbouring bins: on the 3D oracle's twinned sample the
correlation with the true distribution rose from 0.83 (subtraction) to 0.90 (full F),
tests/end_to_end/test_stereology_synthetic.py. The price is noise: the smallest
eigenvalues of F (about 0.007 at 10°) amplify some patterns more than 1/a does; the
bootstrap σ shows it. λ can dip below zero where noise dominates; it is reported as
computed.

Uncertainty: boundaries (grain pairs), not traces, are resampled with replacement,
because the traces of one boundary are not independent; the σ of each bin is the
standard deviation of λ over the resamples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..crystal.csl import classify_misorientation_quat, relation_deviation_deg
from ..crystal.indices import format_indices
from ..crystal.lattice import LAUE_CRYSTAL_SYSTEMS, direction_crystal, plane_normals_crystal
from ..crystal.phases import Phases
from ..crystal.rotations import quat_apply, quat_as_matrix, quat_from_axis_angle_deg
from ..crystal.symmetry import misorientation_quat, proper_rotations, reduce_axis_to_triangle
from .grid import HemisphereGrid

__all__ = [
    "WEIGHTINGS",
    "MisorientationClass",
    "PlaneDistribution",
    "plane_distribution",
    "accumulation_kernel",
    "remove_background",
    "zone_accumulation",
]

WEIGHTINGS = ("length", "count")
# Points per half great circle: two per bin width. One trace's share of a bin is then
# coarse, but the points fall at every offset over many traces, so the sum is unbiased.
_POINTS_PER_BIN = 2
# Sides of traces per block: bounds the temporaries (K·M·3 doubles each) to tens of MB.
_BLOCK_ELEMENTS = 2_500_000
_CUBIC = ("m-3m", "m-3")
_GOLDEN = (np.sqrt(5.0) - 1.0) / 2.0


@dataclass(frozen=True)
class MisorientationClass:
    """Which boundaries a distribution covers.

    ``kind`` is ``"all"``, ``"sigma"`` (a coincidence class of a cubic phase, by the
    job's deviation criterion) or ``"axis_angle"`` (within ``tolerance_deg`` of the
    rotation ``angle_deg`` about the crystal direction ``axis`` [u v w]).

    Examples
    --------
    >>> MisorientationClass.from_spec("sigma3").name
    'sigma3'
    >>> MisorientationClass.from_spec({"axis": [1, 1, 0], "angle_deg": 38.9,
    ...                                "tolerance_deg": 3}).name
    '38.9deg[1 1 0]'
    """

    name: str
    kind: str
    sigma: int = 0
    axis: tuple = ()
    angle_deg: float = 0.0
    tolerance_deg: float = 0.0

    @classmethod
    def from_spec(cls, spec) -> MisorientationClass:
        """From ``"all"``, ``"sigma<N>"`` or ``{"axis", "angle_deg", "tolerance_deg", "name"}``."""
        if spec == "all":
            return cls("all", "all")
        if isinstance(spec, str) and spec.startswith("sigma") and spec[5:].isdigit():
            sigma = int(spec[5:])
            if sigma < 1 or sigma % 2 == 0:
                raise ValueError(f"Expected an odd Σ >= 1 in {spec!r}, got {sigma}.")
            return cls(spec, "sigma", sigma=sigma)
        if isinstance(spec, dict) and {"axis", "angle_deg", "tolerance_deg"} <= set(spec):
            axis = tuple(int(v) for v in spec["axis"])
            angle = float(spec["angle_deg"])
            name = spec.get("name") or f"{angle:g}deg[{' '.join(str(v) for v in axis)}]"
            return cls(
                name,
                "axis_angle",
                axis=axis,
                angle_deg=angle,
                tolerance_deg=float(spec["tolerance_deg"]),
            )
        raise ValueError(
            "Expected a misorientation class 'all', 'sigma<N>' or "
            f"{{'axis': [u, v, w], 'angle_deg': ..., 'tolerance_deg': ...}}, got {spec!r}."
        )


@dataclass(frozen=True, eq=False)
class PlaneDistribution:
    """The plane distribution of one phase and misorientation class.

    Attributes
    ----------
    phase : int
    misorientation : str
        The class name (``"all"``, ``"sigma3"``…).
    n_traces, n_sides, n_boundaries : int
        Segments used, grain sides accumulated (two per trace with both sides), boundaries
        (grain pairs) resampled.
    grid : HemisphereGrid
    mrd : ndarray, shape (n_bins,) or None
        λ per bin, multiples of a random distribution; None below ``min_traces``.
    mrd_sigma : ndarray, shape (n_bins,) or None
        Bootstrap standard deviation of λ per bin.
    accumulated_mrd : ndarray, shape (n_bins,) or None
        The summed circles before the background removal, MRD.
    self_fraction : ndarray, shape (n_bins,)
        ``a_i = F[i, i]``: the share of a circle that stays in its plane's bin.
    peak_normal_crystal : tuple of 3 floats or None
        Centre of the highest bin, reduced to the Laue class's standard triangle.
    peak_indices : str
        The nearest plane with indices up to 3, e.g. ``"(1 1 1)"``; ``""`` without a peak.
    peak_offset_deg : float
        Angle between the peak and that plane.
    peak_mrd, peak_mrd_sigma : float
        λ of the highest bin and its bootstrap σ.
    peak_position_sigma_deg : float
        RMS angle (up to symmetry) between the resamples' highest bins and the peak.
    n_bootstrap : int
    weighting : {'length', 'count'}
    both_sides : bool
    note : str
        Why there is no distribution (too few traces), or ``""``.
    """

    phase: int
    misorientation: str
    n_traces: int
    n_sides: int
    n_boundaries: int
    grid: HemisphereGrid
    mrd: np.ndarray | None
    mrd_sigma: np.ndarray | None
    accumulated_mrd: np.ndarray | None
    self_fraction: np.ndarray
    peak_normal_crystal: tuple | None
    peak_indices: str
    peak_offset_deg: float
    peak_mrd: float
    peak_mrd_sigma: float
    peak_position_sigma_deg: float
    n_bootstrap: int
    weighting: str
    both_sides: bool
    note: str


def _perpendicular_basis(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # The helper axis is the coordinate axis least aligned with t, so e1 is never degenerate.
    helper = np.eye(3)[np.argmin(np.abs(t), axis=1)]
    e1 = np.cross(t, helper)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    return e1, np.cross(t, e1)


def zone_accumulation(
    directions_crystal,
    weights,
    grid: HemisphereGrid,
    rotations_quat,
    *,
    groups=None,
    replicate_weights=None,
):
    """Sum the great circles perpendicular to each direction, with every symmetric copy.

    Each direction's half circle (n ≡ −n) is sampled at points half a bin apart and
    every copy ``R_s t`` carries ``weight / K`` of it, so each direction adds its weight.

    Parameters
    ----------
    directions_crystal : array_like, shape (N, 3)
        Trace directions in C (unit length; either sense).
    weights : array_like, shape (N,)
    grid : HemisphereGrid
    rotations_quat : array_like, shape (K, 4)
        The proper rotations of the Laue class (``symmetry.proper_rotations``).
    groups : array_like of int, shape (N,), optional
        Boundary index 0..G-1 of each direction; needed with ``replicate_weights``.
    replicate_weights : array_like, shape (R, G), optional
        Weight of each boundary in each bootstrap resample.

    Returns
    -------
    total : ndarray, shape (n_bins,)
        Summed weight per bin.
    replicates : ndarray, shape (R, n_bins) or None

    Examples
    --------
    >>> grid = HemisphereGrid.from_resolution_deg(30.0)
    >>> total, _ = zone_accumulation([[0.0, 0.0, 1.0]], [1.0], grid, [[1.0, 0, 0, 0]])
    >>> round(float(total.sum()), 6), round(float(total[: grid.n_azimuth].sum()), 6)
    (1.0, 1.0)
    """
    t = np.asarray(directions_crystal, dtype=float).reshape(-1, 3)
    w = np.asarray(weights, dtype=float).reshape(-1)
    mats = quat_as_matrix(np.asarray(rotations_quat, dtype=float).reshape(-1, 4))
    k = len(mats)
    m = int(np.ceil(180.0 * _POINTS_PER_BIN / grid.resolution_deg))
    psi = np.arange(m) * (np.pi / m)
    n_bins = grid.n_bins
    total = np.zeros(n_bins)
    if replicate_weights is None:
        g = np.zeros(len(t), dtype=np.int64)
        rep_w = None
        replicates = None
    else:
        g = np.asarray(groups, dtype=np.int64).reshape(-1)
        rep_w = np.asarray(replicate_weights, dtype=np.float32)
        replicates = np.zeros((len(rep_w), n_bins))
    order = np.argsort(g, kind="stable")
    t, w, g = t[order], w[order], g[order]
    per_side = k * m * 3
    block = max(1, _BLOCK_ELEMENTS // per_side)
    start = 0
    while start < len(t):
        stop = min(len(t), start + block)
        if rep_w is not None and stop < len(t):
            # Blocks end at a boundary's last side, so each boundary's histogram is whole.
            stop = int(np.searchsorted(g, g[stop - 1], side="right"))
        # Every symmetric copy R_s t gets its own basis, built from the copy itself: the
        # points then depend only on the set {R_s t}, which relabelling a grain's
        # orientation by a symmetry operator leaves unchanged (the invariance is exact).
        copies = np.einsum("kij,nj->kni", mats, t[start:stop]).reshape(-1, 3)
        e1, e2 = _perpendicular_basis(copies)
        # Each circle's points start at its own phase, spread evenly over one spacing
        # (golden-ratio sequence): a common start would tie the points to the basis, which
        # is tied to the crystal axes, and bias whole rings by ±10 % (measured).
        phase = (np.arange(start, stop) * _GOLDEN % 1.0)[:, None] * (np.pi / m)
        ang = np.tile(psi[None, :] + phase, (k, 1))
        cos_a, sin_a = np.cos(ang), np.sin(ang)
        # float32 for the binning (half the bytes; bins are degrees wide, rounding 1e-7).
        x, y, z = (
            (e1[:, c, None] * cos_a + e2[:, c, None] * sin_a).astype(np.float32).ravel()
            for c in range(3)
        )
        bins = grid.bin_of_components(x, y, z).reshape(k, -1)
        share = np.repeat(w[start:stop] / (k * m), m)
        if rep_w is None:
            total += np.bincount(bins.ravel(), np.tile(share, k), minlength=n_bins)
        else:
            g0 = g[start]
            local = np.repeat(g[start:stop] - g0, m)
            n_local = int(g[stop - 1] - g0) + 1
            flat = (local[None, :] * n_bins + bins).ravel()
            hist = np.bincount(flat, np.tile(share, k), minlength=n_local * n_bins)
            hist = hist.reshape(n_local, n_bins)
            total += hist.sum(axis=0)
            replicates += rep_w[:, g0 : g0 + n_local] @ hist.astype(np.float32)
        start = stop
    return total, replicates


def accumulation_kernel(grid: HemisphereGrid) -> np.ndarray:
    """The binned forward model F: ``F[i, j]`` = share of bin i in the circles of bin j's planes.

    For planes spread evenly over bin j and traces in every direction of each plane, the
    mean share of their great circles (half circles, n ≡ −n) that lands in bin i. By
    quadrature: 6 × 6 normals over the bin, 24 trace directions about each, 8 points per
    bin width along each circle (deterministic, no random numbers). A turn about Z_C by
    one sector maps the grid onto itself, so one bin per ring is computed and the others
    are its cyclic shifts. No symmetry copies are needed: the distributions it acts on
    are symmetric, and the kernel commutes with rotations.

    Returns
    -------
    ndarray, shape (n_bins, n_bins)
        Columns sum to 1.

    Examples
    --------
    >>> f = accumulation_kernel(HemisphereGrid.from_resolution_deg(10.0))
    >>> f.shape, bool(np.allclose(f.sum(axis=0), 1.0)), bool(0.03 < np.diag(f).mean() < 0.06)
    ((324, 324), True, True)
    """
    p = (np.arange(6) + 0.5) / 6
    d_phi = 2.0 * np.pi / grid.n_azimuth
    m = int(np.ceil(180.0 * 8 / grid.resolution_deg))
    psi = (np.arange(m) + 0.5) * (np.pi / m) - 0.5 * np.pi
    beta = (np.arange(24) + 0.5) * (np.pi / 24)
    kernel = np.empty((grid.n_bins, grid.n_bins))
    for ring in range(grid.n_polar):
        u = (ring + p) / grid.n_polar
        uu, pp = np.meshgrid(u, p * d_phi, indexing="ij")
        s = np.sqrt(1.0 - uu**2)
        n = np.stack([s * np.cos(pp), s * np.sin(pp), uu], -1).reshape(-1, 3)
        e1, e2 = _perpendicular_basis(n)
        d = np.cos(beta)[None, :, None] * e1[:, None] + np.sin(beta)[None, :, None] * e2[:, None]
        pts = (
            np.cos(psi)[None, None, :, None] * n[:, None, None, :]
            + np.sin(psi)[None, None, :, None] * d[:, :, None, :]
        )
        column = np.bincount(grid.bin_of(pts).ravel(), minlength=grid.n_bins) / pts[..., 0].size
        column = column.reshape(grid.n_polar, grid.n_azimuth)
        for sector in range(grid.n_azimuth):
            kernel[:, ring * grid.n_azimuth + sector] = np.roll(column, sector, axis=1).ravel()
    return kernel


def remove_background(accumulated_mrd, kernel: np.ndarray) -> np.ndarray:
    """The plane distribution λ from the accumulated one: ``λ = 1 + F⁻¹ (A − 1)``.

    With F approximated by its diagonal plus a uniform rest, ``F ≈ a I + (1 − a) J / n``
    (J the all-ones matrix), the inverse is ``λ = 1 + (A − 1) / a``: the background
    subtraction of Saylor et al. (2004). The full F also holds the 1/sin α tail next to
    each plane, which the subtraction leaves in the neighbouring bins.

    Parameters
    ----------
    accumulated_mrd : array_like, shape (..., n_bins)
    kernel : ndarray, shape (n_bins, n_bins)
        :func:`accumulation_kernel`.

    Returns
    -------
    ndarray, shape (..., n_bins)

    Examples
    --------
    >>> n, a = 4, 0.25
    >>> f = a * np.eye(n) + (1 - a) / n
    >>> remove_background([1.75, 0.75, 0.75, 0.75], f).round(6).tolist()
    [4.0, 0.0, 0.0, 0.0]
    """
    excess = np.asarray(accumulated_mrd, dtype=float) - 1.0
    return 1.0 + np.linalg.solve(kernel, excess.reshape(-1, kernel.shape[0]).T).T.reshape(
        excess.shape
    )


def _class_members(cls: MisorientationClass, m_quat, phase, criterion: str) -> np.ndarray | str:
    """Mask of the traces in the class, or a note why the class does not apply."""
    if cls.kind == "all":
        return np.ones(len(m_quat), dtype=bool)
    if cls.kind == "sigma":
        if phase.laue not in _CUBIC:
            return f"Σ classes are defined here for cubic phases only (phase {phase.id})."
        if len(m_quat) == 0:
            return np.zeros(0, dtype=bool)
        match = classify_misorientation_quat(
            m_quat, criterion=criterion, max_sigma=max(29, cls.sigma)
        )
        return match.sigma == cls.sigma
    axis = direction_crystal(phase.lattice, np.array(cls.axis))
    rel = quat_from_axis_angle_deg(axis, cls.angle_deg)
    if len(m_quat) == 0:
        return np.zeros(0, dtype=bool)
    dev = relation_deviation_deg(m_quat, rel, phase.laue, setting=phase.setting)
    return dev <= cls.tolerance_deg


def _nearest_plane(normal: np.ndarray, phase) -> tuple[str, float]:
    r = np.arange(-3, 4)
    hkl = np.stack(np.meshgrid(r, r, r, indexing="ij"), -1).reshape(-1, 3)
    hkl = hkl[np.any(hkl != 0, axis=1)]
    # One representative per direction: drop multiples such as (2 2 2) of (1 1 1).
    hkl = hkl[np.gcd.reduce(np.abs(hkl), axis=1) == 1]
    normals = plane_normals_crystal(phase.lattice, hkl)
    cos = np.abs(normals @ normal)
    best = int(np.argmax(cos))
    offset = float(np.rad2deg(np.arccos(min(1.0, cos[best]))))
    h, k, l_ = (
        int(v) for v in hkl[best] * (1 if hkl[best][np.flatnonzero(hkl[best])[0]] > 0 else -1)
    )
    if LAUE_CRYSTAL_SYSTEMS[phase.laue] in ("hexagonal", "trigonal"):
        return format_indices((h, k, -(h + k), l_), "plane"), offset
    return format_indices((h, k, l_), "plane"), offset


def _symmetric_angle_deg(a: np.ndarray, b: np.ndarray, mats: np.ndarray) -> np.ndarray:
    """Smallest angle between normals a (R, 3) and every ±R_s b, degrees."""
    images = np.einsum("kij,j->ki", mats, b)
    cos = np.max(np.abs(a @ images.T), axis=1)
    return np.rad2deg(np.arccos(np.clip(cos, 0.0, 1.0)))


def plane_distribution(
    segments,
    grains,
    phases,
    *,
    classes=("all",),
    resolution_deg: float = 10.0,
    min_traces: int = 1000,
    both_sides: bool = True,
    weighting: str = "length",
    n_bootstrap: int = 200,
    sigma_criterion: str = "brandon",
    rng=None,
) -> tuple[PlaneDistribution, ...]:
    """Distribution of boundary planes in the crystal frame from one section's traces.

    Parameters
    ----------
    segments : dict of str to ndarray
        The segments table of ``traces.fit_segments``: ``grain_a``, ``grain_b``,
        ``trace_angle_deg`` (S, from +X toward +Y, §2), ``length_um``,
        ``is_phase_boundary``. Traces without an angle and phase boundaries are left out.
    grains : dict of str to ndarray
        The grains table of ``grains.segment_grains``: ``grain_id``, ``phase``, ``quat``
        (sample to crystal, §3).
    phases : sequence of inclination.crystal.phases.Phase
    classes : sequence
        Misorientation classes (:meth:`MisorientationClass.from_spec` forms).
    resolution_deg : float
        Bin width of :class:`HemisphereGrid`, 1° to 30°.
    min_traces : int
        A class with fewer traces gets no distribution, only a note.
    both_sides : bool
        Accumulate each trace in both grains' frames (True) or in grain a's only.
    weighting : {'length', 'count'}
        Each trace weighs its length in µm, or 1.
    n_bootstrap : int
        Resamples of the boundaries for σ (>= 2).
    sigma_criterion : {'brandon', 'palumbo-aust'}
    rng : None, int or numpy.random.Generator

    Returns
    -------
    tuple of PlaneDistribution
        One per phase with traces and class, phases in the order given.

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cu = Phase(1, "Cu", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> grains = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...           "quat": np.array([[1.0, 0, 0, 0], [0.5, 0.5, 0.5, 0.5]])}
    >>> segments = {"grain_a": np.array([1]), "grain_b": np.array([2]),
    ...             "trace_angle_deg": np.array([30.0]), "length_um": np.array([5.0]),
    ...             "is_phase_boundary": np.array([False])}
    >>> (d,) = plane_distribution(segments, grains, [cu], min_traces=1, n_bootstrap=4, rng=0)
    >>> d.n_traces, d.n_sides, d.grid.n_bins, d.mrd.shape
    (1, 2, 324, (324,))
    """
    if weighting not in WEIGHTINGS:
        raise ValueError(f"Expected `weighting` to be one of {WEIGHTINGS}, got {weighting!r}.")
    if isinstance(n_bootstrap, bool) or int(n_bootstrap) != n_bootstrap or n_bootstrap < 2:
        raise ValueError(f"Expected `n_bootstrap` to be a whole number >= 2, got {n_bootstrap!r}.")
    if isinstance(min_traces, bool) or int(min_traces) != min_traces or min_traces < 1:
        raise ValueError(f"Expected `min_traces` to be a whole number >= 1, got {min_traces!r}.")
    grid = HemisphereGrid.from_resolution_deg(resolution_deg)
    specs = [MisorientationClass.from_spec(c) for c in classes]
    gen = np.random.default_rng(rng)
    kernel = accumulation_kernel(grid)
    a_frac = np.diag(kernel).copy()

    grain_id = np.asarray(grains["grain_id"], dtype=np.int64)
    row_of = np.full(int(grain_id.max(initial=0)) + 1, -1, dtype=np.int64)
    row_of[grain_id] = np.arange(len(grain_id))
    g_quat = np.asarray(grains["quat"], dtype=float)
    g_phase = np.asarray(grains["phase"], dtype=np.int64)

    ga = np.asarray(segments["grain_a"], dtype=np.int64)
    gb = np.asarray(segments["grain_b"], dtype=np.int64)
    angle = np.asarray(segments["trace_angle_deg"], dtype=float)
    length = np.asarray(segments["length_um"], dtype=float)
    known = (ga > 0) & (gb > 0) & (ga < len(row_of)) & (gb < len(row_of))
    ra = np.where(known, row_of[np.clip(ga, 0, len(row_of) - 1)], -1)
    rb = np.where(known, row_of[np.clip(gb, 0, len(row_of) - 1)], -1)
    use = (
        np.isfinite(angle)
        & (ra >= 0)
        & (rb >= 0)
        & ~np.asarray(segments["is_phase_boundary"], dtype=bool)
    )
    use &= np.where(use, g_phase[np.maximum(ra, 0)] == g_phase[np.maximum(rb, 0)], False)
    ra, rb, angle, length = ra[use], rb[use], angle[use], length[use]
    weight = length if weighting == "length" else np.ones_like(length)
    theta = np.deg2rad(angle)
    # §2: the trace direction in S lies in the surface, at the trace angle from +X toward +Y.
    t_sample = np.stack([np.cos(theta), np.sin(theta), np.zeros_like(theta)], axis=1)
    pair = np.stack([np.minimum(ra, rb), np.maximum(ra, rb)], axis=1)

    out = []
    for phase in Phases.from_records(phases).values():
        in_phase = g_phase[ra] == phase.id
        if not np.any(in_phase):
            continue
        qa, qb = g_quat[ra[in_phase]], g_quat[rb[in_phase]]
        m_quat = misorientation_quat(qa, qb)
        rotations = proper_rotations(phase.laue, setting=phase.setting)
        mats = quat_as_matrix(rotations)
        for cls in specs:
            members = _class_members(cls, m_quat, phase, sigma_criterion)
            if isinstance(members, str):
                out.append(
                    _empty(phase, cls, grid, a_frac, 0, n_bootstrap, weighting, both_sides, members)
                )
                continue
            sel = np.flatnonzero(in_phase)[members]
            n_traces = len(sel)
            # §3: v_C = g v_S for each side's grain.
            dirs = [quat_apply(g_quat[ra[sel]], t_sample[sel])]
            if both_sides:
                dirs.append(quat_apply(g_quat[rb[sel]], t_sample[sel]))
            dirs = np.concatenate(dirs)
            w = np.tile(weight[sel], len(dirs) // max(n_traces, 1)) if n_traces else weight[sel]
            _, boundary = np.unique(pair[sel], axis=0, return_inverse=True)
            boundary = np.tile(boundary.reshape(-1), 2 if both_sides else 1)
            n_boundaries = int(boundary.max()) + 1 if n_traces else 0
            if n_traces < min_traces:
                note = (
                    f"{n_traces} traces, fewer than the {min_traces} asked for "
                    "(stereology.min_traces): no distribution."
                )
                out.append(
                    _empty(
                        phase,
                        cls,
                        grid,
                        a_frac,
                        n_traces,
                        n_bootstrap,
                        weighting,
                        both_sides,
                        note,
                        n_sides=len(dirs),
                        n_boundaries=n_boundaries,
                    )
                )
                continue
            draws = gen.integers(0, n_boundaries, size=(n_bootstrap, n_boundaries))
            rep_w = np.stack([np.bincount(d, minlength=n_boundaries) for d in draws])
            total, reps = zone_accumulation(
                dirs, w, grid, rotations, groups=boundary, replicate_weights=rep_w
            )
            accumulated = total * grid.n_bins / total.sum()
            mrd = remove_background(accumulated, kernel)
            rep_acc = reps * grid.n_bins / reps.sum(axis=1, keepdims=True)
            rep_mrd = remove_background(rep_acc, kernel)
            sigma = rep_mrd.std(axis=0, ddof=1)
            peak = int(np.argmax(mrd))
            centres = grid.centres_crystal()
            spread = _symmetric_angle_deg(centres[np.argmax(rep_mrd, axis=1)], centres[peak], mats)
            normal = reduce_axis_to_triangle(centres[peak], phase.laue, setting=phase.setting)
            label, offset = _nearest_plane(normal, phase)
            out.append(
                PlaneDistribution(
                    phase=phase.id,
                    misorientation=cls.name,
                    n_traces=n_traces,
                    n_sides=len(dirs),
                    n_boundaries=n_boundaries,
                    grid=grid,
                    mrd=mrd,
                    mrd_sigma=sigma,
                    accumulated_mrd=accumulated,
                    self_fraction=a_frac,
                    peak_normal_crystal=tuple(float(v) for v in normal),
                    peak_indices=label,
                    peak_offset_deg=offset,
                    peak_mrd=float(mrd[peak]),
                    peak_mrd_sigma=float(sigma[peak]),
                    peak_position_sigma_deg=float(np.sqrt(np.mean(spread**2))),
                    n_bootstrap=int(n_bootstrap),
                    weighting=weighting,
                    both_sides=bool(both_sides),
                    note="",
                )
            )
    return tuple(out)


def _empty(
    phase,
    cls,
    grid,
    a_frac,
    n_traces,
    n_bootstrap,
    weighting,
    both_sides,
    note,
    *,
    n_sides=0,
    n_boundaries=0,
) -> PlaneDistribution:
    return PlaneDistribution(
        phase=phase.id,
        misorientation=cls.name,
        n_traces=n_traces,
        n_sides=n_sides,
        n_boundaries=n_boundaries,
        grid=grid,
        mrd=None,
        mrd_sigma=None,
        accumulated_mrd=None,
        self_fraction=a_frac,
        peak_normal_crystal=None,
        peak_indices="",
        peak_offset_deg=float("nan"),
        peak_mrd=float("nan"),
        peak_mrd_sigma=float("nan"),
        peak_position_sigma_deg=float("nan"),
        n_bootstrap=int(n_bootstrap),
        weighting=weighting,
        both_sides=bool(both_sides),
        note=note,
    )
