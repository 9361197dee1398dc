"""Stacks of serial sections: one least-squares plane per boundary (conventions §5, §8).

Owns :class:`PlaneFit` and :func:`fit_plane_through_traces` (a total-least-squares
plane through a boundary's traces at several depths) and :func:`measure_stack`,
which registers and pairs every deeper section with the surface map through the
serial-section stage (:mod:`.serial`) and fits each boundary's plane. Dip and dip
direction of the fitted normal come from
:func:`inclination.planes.geometry.surface_geometry` (§5). Positions are in the
sample frame S (§2), µm.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array, check_finite
from ..compare.sense import reversal_probability
from ..errors import SettingError
from ..planes.geometry import surface_geometry
from ._settings import setting_positive
from .formulas import serial_offset_um
from .registration import Registration, match_grains, register_sections
from .serial import check_section_phases, match_segments, segment_ends, trace_position_sigma_um

if TYPE_CHECKING:
    from ..grains import GrainMap

__all__ = ["PlaneFit", "fit_plane_through_traces", "measure_stack"]


@dataclass(frozen=True)
class PlaneFit:
    """A least-squares plane through traces at several depths.

    Attributes
    ----------
    normal_sample : tuple of 3 floats
        Unit normal in S, n_z >= 0.
    dip_deg, dip_direction_azimuth_deg : float
        Dip and dip-direction azimuth (S, [0, 360)), §5.
    residual_um : float
        RMS distance of the trace end points from the plane, µm.
    normal_sigma_deg : float
        First-order σ of the normal's direction: the point scatter (from the residual,
        or ``position_sigma_um`` if larger) over the plane's extent along its
        narrower in-plane direction, degrees.
    """

    normal_sample: tuple[float, float, float]
    dip_deg: float
    dip_direction_azimuth_deg: float
    residual_um: float
    normal_sigma_deg: float


def fit_plane_through_traces(
    x0_um: ArrayLike,
    y0_um: ArrayLike,
    x1_um: ArrayLike,
    y1_um: ArrayLike,
    depth_um: ArrayLike,
    *,
    position_sigma_um: float = 0.0,
) -> PlaneFit:
    """Total-least-squares plane through the traces of one boundary at several depths.

    Parameters
    ----------
    x0_um, y0_um, x1_um, y1_um : array_like, shape (K,)
        End points of the boundary's trace on each section, registered into the
        surface map's coordinates (S), µm.
    depth_um : array_like, shape (K,)
        Depth of each section below the surface, µm.
    position_sigma_um : float, optional
        Least σ of a trace's position (line fit and registration), µm.

    Returns
    -------
    PlaneFit

    Examples
    --------
    >>> # A plane dipping 45° toward +X: the trace moves by the depth.
    >>> fit = fit_plane_through_traces([0, 1, 2], [0, 0, 0], [0, 1, 2], [10, 10, 10],
    ...                                [0, 1, 2])
    >>> round(fit.dip_deg, 6), round(fit.dip_direction_azimuth_deg, 6), round(fit.residual_um, 6)
    (45.0, 0.0, 0.0)
    """
    cols = [
        as_float_array(v, name).ravel()
        for v, name in (
            (x0_um, "x0_um"),
            (y0_um, "y0_um"),
            (x1_um, "x1_um"),
            (y1_um, "y1_um"),
            (depth_um, "depth_um"),
        )
    ]
    k = len(cols[0])
    if any(len(c) != k for c in cols) or k < 2:
        raise SettingError(
            "Expected `x0_um`, `y0_um`, `x1_um`, `y1_um` and `depth_um` to be equal-length "
            f"arrays of at least 2 traces, got lengths {[len(c) for c in cols]}."
        )
    x0, y0, x1, y1, z = cols
    points = np.concatenate([np.stack([x0, y0, z], -1), np.stack([x1, y1, z], -1)], axis=0)
    check_finite(points, "traces")
    setting_positive(position_sigma_um, "position_sigma_um", allow_zero=True)
    centred = points - points.mean(axis=0)
    _, sv, vt = np.linalg.svd(centred, full_matrices=False)
    planes = surface_geometry(vt[-1])
    normal = planes.normal_sample
    residual = float(np.sqrt(np.mean((centred @ normal) ** 2)))
    # A fitted plane's normal tilts by (point scatter) / (extent) about each in-plane
    # axis; the narrower extent (singular value sv[1]) sets the larger σ.
    scatter = max(float(sv[2]) / math.sqrt(max(len(points) - 3, 1)), float(position_sigma_um))
    sigma = math.degrees(scatter / sv[1]) if sv[1] > 0 else 90.0
    return PlaneFit(
        tuple(float(v) for v in normal),
        float(planes.dip_deg),
        float(planes.dip_azimuth_deg),
        residual,
        min(sigma, 90.0),
    )


def measure_stack(
    surface_segments: Mapping,
    surface_grains: GrainMap,
    deeper_sections: Sequence,
    *,
    depths_um: ArrayLike,
    step_um: float,
    laue_by_phase: Mapping,
    registrations: Sequence[Registration | None] | None = None,
    threshold_deg: float = 5.0,
    max_angle_deg: float = 15.0,
    grid: str = "square",
) -> dict:
    """Per boundary, a least-squares plane through its traces on every section of a stack.

    Each deeper section is registered on the surface map and matched to it as in
    :func:`measure_serial_section`; a surface segment found on at least one deeper
    section gets the plane of :func:`fit_plane_through_traces` through all its traces.

    Parameters
    ----------
    surface_segments : mapping
        Segments table of the surface map (S).
    surface_grains : GrainMap
    deeper_sections : sequence of (segments table, GrainMap)
        The deeper sections, in any order.
    depths_um : array_like, shape (K,)
        Depth of each deeper section below the surface, µm (> 0).
    step_um : float
    laue_by_phase : mapping of int to str or Phase
    registrations : sequence of Registration or None, optional
        Known placements of the deeper sections (None entries are estimated).
    threshold_deg, max_angle_deg, grid : optional
        As in :func:`measure_serial_section`.

    Returns
    -------
    dict of 1-D arrays, one row per surface segment
        ``segment_id, n_sections`` (traces used, surface included), ``normal_x,
        normal_y, normal_z`` (S), ``measured_dip_deg, measured_dip_sigma_deg`` (the
        normal's first-order σ, :class:`PlaneFit`), ``dip_direction_azimuth_deg,
        dip_direction_sigma_deg, fit_residual_um, dip_source`` (``serial-stack``),
        ``status`` (``measured``/``unmatched``).

    Examples
    --------
    >>> from inclination.grains import GrainMap
    >>> def grains(edge):  # grain 1 left of column `edge`, grain 2 right of it, 1 µm step
    ...     labels = np.repeat(np.where(np.arange(20) < edge, 1, 2)[None, :], 20, 0)
    ...     table = {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...              "quat": np.array([[1.0, 0, 0, 0], [0.939693, 0, 0, 0.34202]]),
    ...              "area_px": np.array([20 * edge, 20 * (20 - edge)]),
    ...              "centroid_x_um": np.array([(edge - 1) / 2, (edge + 19) / 2]),
    ...              "centroid_y_um": np.array([9.5, 9.5]), "touches_edge": np.array([1, 1])}
    ...     return GrainMap(labels.astype(np.int32), table, {}, 5.0, 4)
    >>> def trace(x):  # the boundary's trace at x, along +Y
    ...     one = lambda v: np.array([v])
    ...     return {"segment_id": one(0), "grain_a": one(1), "grain_b": one(2),
    ...             "x0_um": one(x), "y0_um": one(0.0), "x1_um": one(x), "y1_um": one(19.0),
    ...             "length_um": one(19.0), "trace_angle_deg": one(90.0),
    ...             "trace_sigma_deg": one(0.5)}
    >>> placed = Registration(0.0, 0.0, 0.0, 0.0, 1, "given")
    >>> out = measure_stack(trace(9.5), grains(10),
    ...     [(trace(11.5), grains(12)), (trace(13.5), grains(14))], depths_um=[2.0, 4.0],
    ...     step_um=1.0, laue_by_phase={1: "m-3m"}, registrations=[placed, placed])
    >>> out["n_sections"].tolist(), out["measured_dip_deg"].round(6).tolist()
    ([3], [45.0])
    """
    depths = as_float_array(depths_um, "depths_um").ravel()
    if len(depths) != len(deeper_sections):
        raise SettingError(
            f"Expected `depths_um` to have one depth per deeper section "
            f"({len(deeper_sections)}), got {len(depths)}."
        )
    for h in depths:
        setting_positive(float(h), "depths_um")
    keep, a_s, b_s, _, _ = segment_ends(surface_segments)
    n = len(a_s)
    traces = [[(a_s[i], b_s[i], 0.0, 0.0)] for i in range(n)]
    if registrations is None:
        registrations = [None] * len(deeper_sections)
    elif len(registrations) != len(deeper_sections):
        raise SettingError(
            f"Expected `registrations` to have one entry per deeper section "
            f"({len(deeper_sections)}), got {len(registrations)}."
        )
    for (segs, grains), h, reg in zip(deeper_sections, depths, registrations, strict=True):
        check_section_phases(surface_grains, grains, laue_by_phase)
        if reg is None:
            reg = register_sections(
                surface_grains,
                grains,
                step_um=step_um,
                laue_by_phase=laue_by_phase,
                threshold_deg=threshold_deg,
                grid=grid,
            )
        pairs = match_grains(
            surface_grains,
            grains,
            reg,
            step_um=step_um,
            laue_by_phase=laue_by_phase,
            threshold_deg=threshold_deg,
            # As in measure_serial_section: a lamella moved by more than its width is
            # found by its centroid down to δ = 10° (§8).
            max_shift_um=float(serial_offset_um(h, 10.0)),
            grid=grid,
        )
        max_offset = float(serial_offset_um(h, 5.0)) + 2.0 * step_um
        paired = match_segments(
            surface_segments,
            segs,
            pairs,
            reg,
            step_um=step_um,
            max_angle_deg=max_angle_deg,
            max_offset_um=max_offset,
        )
        match, a_d, b_d = paired.deeper_row, paired.deeper_start_um, paired.deeper_end_um
        for i in np.flatnonzero((match >= 0) & ~paired.ambiguous):
            traces[i].append((a_d[match[i]], b_d[match[i]], float(h), reg.shift_sigma_um))
    normal = np.full((n, 3), np.nan)
    dip = np.full(n, np.nan)
    azimuth = np.full(n, np.nan)
    residual = np.full(n, np.nan)
    sigma = np.full(n, np.nan)
    line_sigma = trace_position_sigma_um(surface_segments, step_um=step_um)
    count = np.array([len(t) for t in traces])
    for i in np.flatnonzero(keep & (count >= 2)):
        p0 = np.array([t[0] for t in traces[i]])
        p1 = np.array([t[1] for t in traces[i]])
        z = np.array([t[2] for t in traces[i]])
        floor = math.hypot(line_sigma[i], max(t[3] for t in traces[i]))
        fit = fit_plane_through_traces(
            p0[:, 0], p0[:, 1], p1[:, 0], p1[:, 1], z, position_sigma_um=floor
        )
        normal[i] = fit.normal_sample
        dip[i], azimuth[i] = fit.dip_deg, fit.dip_direction_azimuth_deg
        residual[i], sigma[i] = fit.residual_um, fit.normal_sigma_deg
    found = keep & (count >= 2)
    # The horizontal part of the normal has length sin δ: its azimuth σ is σ_n / sin δ.
    with np.errstate(divide="ignore", invalid="ignore"):
        az_sigma = np.minimum(sigma / np.sin(np.deg2rad(dip)), 180.0)
    return {
        "segment_id": np.asarray(surface_segments["segment_id"]),
        "n_sections": np.where(keep, count, 0),
        "normal_x": normal[:, 0],
        "normal_y": normal[:, 1],
        "normal_z": normal[:, 2],
        "measured_dip_deg": dip,
        "measured_dip_sigma_deg": sigma,
        "dip_direction_azimuth_deg": azimuth,
        "dip_direction_sigma_deg": az_sigma,
        "reversal_probability": reversal_probability(dip, sigma),
        "fit_residual_um": residual,
        "dip_source": np.where(found, "serial-stack", "").astype(object),
        "status": np.where(found, "measured", "unmatched").astype(str),
    }
