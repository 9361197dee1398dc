"""Synthetic slip traces inside the grains of a sampled map, with their true planes.

Owns the oracle of :mod:`inclination.features`: for chosen grains of a
:class:`~inclination.synthetic.SampledMap` it takes one slip system, draws the true
trace of its plane (conventions §5, from the region's true orientation) as a line
through the grain's interior, adds angle noise, and records the truth (plane, dip,
dip direction, Schmid factor). Positions are in the map's own coordinates, which for
the declared axes x right, y down are S itself (conventions §2).
"""

from __future__ import annotations

import numpy as np

__all__ = ["slip_traces"]

_CHOICES = ("random", "highest_schmid")


def slip_traces(
    micro,
    sample,
    systems,
    *,
    rng,
    n_traces: int,
    noise_deg: float = 0.3,
    half_length_um: float = 6.0,
    load_sample=None,
    choice: str = "random",
    region_um=None,
    min_margin_um: float = 2.0,
):
    """Slip-band traces in ``n_traces`` distinct grains, as job entries and truth.

    Parameters
    ----------
    micro : Microstructure
    sample : SampledMap
        The surface map (``depth_um`` 0); its ``grain_id`` is the true region map.
    systems : SlipSystems
        The phase's slip systems (:func:`inclination.crystal.slip.slip_systems`).
    rng : int or numpy Generator
    n_traces : int
    noise_deg : float
        Standard deviation of the Gaussian noise on each trace angle.
    half_length_um : float
        Largest half length of a drawn line; shorter where the grain is narrow.
    load_sample : array_like, shape (3,), optional
        Load axis in S for the Schmid factors (and ``choice="highest_schmid"``).
    choice : {'random', 'highest_schmid'}
        Which system slips: any (uniform), or the one with the largest Schmid factor
        (a strained grain).
    region_um : (x0, y0, x1, y1), optional
        Only grains whose chosen centre lies in this box (map coordinates).
    min_margin_um : float
        Smallest distance from the line's centre to the grain's edge.

    Returns
    -------
    entries : list of dict
        Job entries ``{"line_um", "kind": "slip"}`` in map coordinates.
    truth : list of dict
        Per entry: ``region``, ``plane``, ``direction``, ``normal_sample``, ``dip_deg``,
        ``dip_azimuth_deg``, ``trace_angle_deg`` (noise-free), ``schmid_factor``,
        ``plane_schmid_factor`` (largest on the plane; NaN without a load).
    """
    from scipy.ndimage import distance_transform_edt

    from ..crystal.rotations import quat_apply, quat_as_matrix
    from ..crystal.slip import schmid_factor
    from ..planes import surface_geometry

    if choice not in _CHOICES:
        raise ValueError(f"Expected `choice` to be one of {_CHOICES}, got {choice!r}.")
    gen = np.random.default_rng(rng)
    labels = np.asarray(sample.grain_id)
    step = float(sample.step_um)
    regions = [int(r) for r in np.unique(labels) if r > 0]
    gen.shuffle(regions)
    entries, truth = [], []
    for region in regions:
        if len(entries) >= n_traces:
            break
        inside = np.pad(labels == region, 1)
        depth = distance_transform_edt(inside)[1:-1, 1:-1] * step
        row, col = np.unravel_index(int(np.argmax(depth)), depth.shape)
        if depth[row, col] < min_margin_um + step:
            continue
        centre = np.array([sample.x_um[row, col], sample.y_um[row, col]], float)
        if region_um is not None:
            x0, y0, x1, y1 = region_um
            if not (x0 <= centre[0] <= x1 and y0 <= centre[1] <= y1):
                continue
        q = np.asarray(micro.region_quat[region - 1], float)
        g = quat_as_matrix(q)
        normals_sample = systems.normal_crystal @ g  # n_S = gᵀ n_C, row-wise (§5)
        geometry = surface_geometry(normals_sample)
        m = np.full(len(systems), np.nan)
        if load_sample is not None:
            load_crystal = quat_apply(q, np.asarray(load_sample, float))
            m = schmid_factor(load_crystal, systems.normal_crystal, systems.direction_crystal)
        usable = np.flatnonzero(geometry.has_trace & (geometry.dip_deg > 10.0))
        if len(usable) == 0:
            continue
        if choice == "random":
            k = int(gen.choice(usable))
        else:
            k = int(usable[np.argmax(m[usable])])
        angle = np.deg2rad(geometry.trace_angle_deg[k] + gen.normal(0.0, noise_deg))
        half = min(half_length_um, depth[row, col] - step - 0.5 * min_margin_um)
        direction = np.array([np.cos(angle), np.sin(angle)])
        ends = np.stack([centre - half * direction, centre + half * direction])
        on_plane = np.abs(systems.normal_crystal @ systems.normal_crystal[k]) > 1.0 - 1e-9
        entries.append({"line_um": np.round(ends, 3).tolist(), "kind": "slip"})
        truth.append(
            {
                "region": region,
                "plane": systems.plane[k],
                "direction": systems.direction[k],
                "normal_sample": geometry.normal_sample[k].tolist(),
                "dip_deg": float(geometry.dip_deg[k]),
                "dip_azimuth_deg": float(geometry.dip_azimuth_deg[k]),
                "trace_angle_deg": float(geometry.trace_angle_deg[k]),
                "schmid_factor": float(m[k]),
                "plane_schmid_factor": float(np.max(m[on_plane])),
            }
        )
    return entries, truth
