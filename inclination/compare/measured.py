"""Measured planes: the best measurement per segment, written in both grains' crystals.

Owns :func:`best_measurements` (one plane per segment out of every section table),
:func:`full_planes` (each measured normal in the crystal frames of its two grains,
conventions §4–§5, with the nearest low-index plane and the coherent-twin test) and,
until the crystal package's one enumeration replaces it, :func:`low_index_planes`.
Normals are in the sample frame S (conventions §2).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from .._validation import as_float_array
from ..crystal.indices import format_indices, low_indices
from ..crystal.lattice import Lattice, plane_normals_crystal
from ..crystal.phases import Phase
from ..crystal.rotations import quat_apply, quat_as_matrix
from ..errors import SettingError

__all__ = [
    "COHERENT_TWIN_ANSWERS",
    "best_measurements",
    "coherent_twin_test",
    "full_planes",
    "low_index_planes",
]

#: Closed set of the ``coherent_twin`` column ("" where the test does not apply).
COHERENT_TWIN_ANSWERS = ("yes", "no", "cannot_tell")


def best_measurements(*tables: Mapping[str, ArrayLike]) -> dict[str, np.ndarray]:
    """One measured plane per segment: the one with the smallest dip σ among the tables.

    Parameters
    ----------
    *tables : mapping
        Tables of :mod:`inclination.sections` (``segment_id, normal_x, normal_y,
        normal_z, measured_dip_deg, measured_dip_sigma_deg, dip_direction_azimuth_deg,
        dip_direction_sigma_deg, dip_source, status``). Rows without a segment, or
        whose status is ``unmatched`` or ``ambiguous``, are left out.

    Returns
    -------
    dict of 1-D arrays
        The same columns, one row per segment, sorted by ``segment_id``.

    Examples
    --------
    >>> a = {"segment_id": np.array([1, 2]), "measured_dip_deg": np.array([50.0, 60.0]),
    ...      "measured_dip_sigma_deg": np.array([3.0, 1.0]), "status": np.array(["measured"] * 2)}
    >>> b = {"segment_id": np.array([1]), "measured_dip_deg": np.array([52.0]),
    ...      "measured_dip_sigma_deg": np.array([1.0]), "status": np.array(["measured"])}
    >>> best_measurements(a, b)["measured_dip_deg"].tolist()
    [52.0, 60.0]
    """
    keys = [k for k in _MEASUREMENT_COLUMNS if all(k in t for t in tables)] if tables else []
    if not keys:
        return {}
    rows = {k: [] for k in (*keys, "section")}
    for index, t in enumerate(tables):
        ok = (np.asarray(t["segment_id"]) >= 0) & np.isin(
            np.asarray(t["status"]).astype(str), ("measured", "ill_conditioned")
        )
        for k in keys:
            rows[k].append(np.asarray(t[k])[ok])
        rows["section"].append(np.full(int(ok.sum()), index))
    cat = {k: np.concatenate(v) for k, v in rows.items()}
    order = np.lexsort((cat["measured_dip_sigma_deg"], cat["segment_id"]))
    seg = cat["segment_id"][order]
    first = np.ones(len(seg), bool)
    first[1:] = seg[1:] != seg[:-1]
    return {k: v[order][first] for k, v in cat.items()}


_MEASUREMENT_COLUMNS = (
    "segment_id",
    "normal_x",
    "normal_y",
    "normal_z",
    "measured_dip_deg",
    "measured_dip_sigma_deg",
    "dip_direction_azimuth_deg",
    "dip_direction_sigma_deg",
    "dip_source",
    "status",
    "reversal_probability",
)


def low_index_planes(lattice: Lattice, *, max_index: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Every plane (hkl) with indices up to ``max_index``, once per ± pair.

    Parameters
    ----------
    lattice : Lattice
    max_index : int, optional
        Largest |h|, |k|, |l|.

    Returns
    -------
    hkl : ndarray of int, shape (M, 3)
        Primitive indices (no common factor), first non-zero index positive.
    normals_crystal : ndarray, shape (M, 3)
        Unit normals in C (§4).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> hkl, _ = low_index_planes(Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...                           max_index=1)
    >>> len(hkl)
    13
    """
    if not isinstance(max_index, int | np.integer) or max_index < 1:
        raise SettingError(f"Expected `max_index` to be an integer >= 1, got {max_index!r}.")
    rows = low_indices(max_index, kind="plane")
    return rows, plane_normals_crystal(lattice, rows)


def _format_plane(hkl: np.ndarray, lattice: Lattice) -> str:
    h, k, l_ = (int(v) for v in hkl)
    if lattice.crystal_system in ("hexagonal", "trigonal"):
        return format_indices((h, k, -(h + k), l_), "plane")
    return format_indices((h, k, l_), "plane")


def full_planes(
    measured: Mapping[str, ArrayLike],
    boundaries: Mapping[str, ArrayLike],
    grains: Mapping[str, ArrayLike],
    phases: Mapping[int, Phase],
    *,
    max_index: int = 3,
    coherent_tolerance_deg: float = 5.0,
) -> dict[str, np.ndarray]:
    """Each measured plane in both grains' crystal frames, with its nearest low-index plane.

    For every row of ``measured`` with a normal: ``n_C = g · n_S`` in grain a and in
    grain b (§5), the nearest plane (hkl) with indices up to ``max_index`` in each
    grain and the angle to it; for Σ3 boundaries between two grains of one cubic
    phase, the {111} plane the two grains share and whether the measured plane lies
    within ``coherent_tolerance_deg`` of it (a coherent twin).

    Parameters
    ----------
    measured : mapping
        Measured planes by ``segment_id`` (e.g. :func:`best_measurements`), normals in S.
    boundaries : mapping
        Segments or identification table with ``segment_id, grain_a, grain_b`` and
        optionally ``sigma`` (CSL label such as ``"3"``, ``""`` when none; integers
        are read alike).
    grains : mapping
        Grain table: ``grain_id, phase, quat`` (G, 4) (sample to crystal, §3).
    phases : mapping of int to Phase
        The job's phases by id (``.lattice``, ``.laue``).
    max_index : int, optional
        Largest Miller index searched.
    coherent_tolerance_deg : float, optional
        Largest angle from the common {111} of a coherent Σ3 twin plane itself (5° is
        common practice for measured planes), before the measurement's σ.

    Returns
    -------
    dict of 1-D arrays, one row per measured segment
        ``segment_id, normal_x, normal_y, normal_z`` (S); ``normal_a_x/y/z``,
        ``normal_b_x/y/z`` (crystal frames of grains a and b); ``plane_a_measured,
        plane_b_measured`` (e.g. ``(1 1 -1)``), ``plane_a_deviation_deg,
        plane_b_deviation_deg``; ``twin_plane_deviation_deg`` (NaN unless Σ3) and
        ``coherent_twin`` (:func:`coherent_twin_test` against the σ of the measured
        normal from ``measured_dip_sigma_deg`` and ``dip_direction_sigma_deg`` when
        ``measured`` has them, else an exact normal; "" unless Σ3).

    Examples
    --------
    >>> from inclination.crystal.lattice import Lattice
    >>> from inclination.crystal.phases import Phase
    >>> cu = Phase(1, "copper", "m-3m", Lattice.from_parameters(3.6, 3.6, 3.6, 90, 90, 90),
    ...            ("{1 1 1}",))
    >>> out = full_planes(
    ...     {"segment_id": np.array([0]), "normal_x": np.array([0.0]),
    ...      "normal_y": np.array([0.6]), "normal_z": np.array([0.8])},
    ...     {"segment_id": np.array([0]), "grain_a": np.array([1]), "grain_b": np.array([2])},
    ...     {"grain_id": np.array([1, 2]), "phase": np.array([1, 1]),
    ...      "quat": np.array([[1.0, 0, 0, 0], [0.0, 1, 0, 0]])},
    ...     {1: cu})
    >>> out["plane_a_measured"].tolist(), out["plane_a_deviation_deg"].round(3).tolist()
    (['(0 2 3)'], [3.18])
    """
    if not (np.isfinite(coherent_tolerance_deg) and coherent_tolerance_deg > 0):
        raise SettingError(
            "Expected `coherent_tolerance_deg` to be a finite number > 0, "
            f"got {coherent_tolerance_deg!r}."
        )
    seg = np.asarray(measured["segment_id"])
    normal_s = np.stack(
        [np.asarray(measured[k], float) for k in ("normal_x", "normal_y", "normal_z")], -1
    )
    has = (seg >= 0) & np.all(np.isfinite(normal_s), axis=1)
    seg, normal_s = seg[has], normal_s[has]
    normal_s = normal_s / np.linalg.norm(normal_s, axis=1, keepdims=True)
    m = len(seg)

    b_ids = np.asarray(boundaries["segment_id"])
    order = np.argsort(b_ids)
    found = np.minimum(np.searchsorted(b_ids, seg, sorter=order), max(len(b_ids) - 1, 0))
    pos = order[found] if m and len(b_ids) else np.zeros(m, int)
    if m and (len(b_ids) == 0 or np.any(b_ids[pos] != seg)):
        missing = seg[b_ids[pos] != seg][0] if len(b_ids) else seg[0]
        raise ValueError(f"Expected every measured segment in `boundaries`, got {missing!r}.")
    grain_ab = [np.asarray(boundaries[k])[pos] for k in ("grain_a", "grain_b")]
    # Σ comes as a CSL label ("3", "13b", "") or as an integer; both name Σ3 alike.
    sigma = (
        np.char.strip(np.asarray(boundaries["sigma"]).astype(str))[pos]
        if "sigma" in boundaries
        else np.full(m, "")
    )
    g_ids = np.asarray(grains["grain_id"])
    g_order = np.argsort(g_ids)
    quat = np.asarray(grains["quat"], float)
    g_phase = np.asarray(grains["phase"])

    out = {"segment_id": seg}
    for axis, k in zip("xyz", range(3), strict=True):
        out[f"normal_{axis}"] = normal_s[:, k]
    common_s = {}
    for side, ids in zip("ab", grain_ab, strict=True):
        idx = np.minimum(np.searchsorted(g_ids, ids, sorter=g_order), len(g_ids) - 1)
        row = g_order[idx]
        if m and np.any(g_ids[row] != ids):
            bad = ids[g_ids[row] != ids][0]
            raise ValueError(f"Expected every grain of `boundaries` in `grains`, got {bad!r}.")
        q = quat[row]
        n_c = quat_apply(q, normal_s) if m else np.zeros((0, 3))
        for axis, k in zip("xyz", range(3), strict=True):
            out[f"normal_{side}_{axis}"] = n_c[:, k]
        names = np.full(m, "", dtype=object)
        dev = np.full(m, np.nan)
        for phase_id in np.unique(g_phase[row]):
            sel = g_phase[row] == phase_id
            phase = phases[int(phase_id)]
            hkl, nc = low_index_planes(phase.lattice, max_index=max_index)
            cos = np.abs(n_c[sel] @ nc.T)
            best = np.argmax(cos, axis=1)
            dev[sel] = np.rad2deg(np.arccos(np.clip(cos[np.arange(sel.sum()), best], 0, 1)))
            # Each low-index plane named once, then gathered: not one format per boundary.
            labels = np.array([_format_plane(row, phase.lattice) for row in hkl], dtype=object)
            names[sel] = labels[best]
            if phase.laue in ("m-3m", "m-3"):
                n111 = plane_normals_crystal(
                    phase.lattice, [[1, 1, 1], [1, 1, -1], [1, -1, 1], [-1, 1, 1]]
                )
                # The {111} normals of each grain written in S: n_S = gᵀ n_C.
                common_s.setdefault(side, np.full((m, 4, 3), np.nan))
                common_s[side][sel] = np.einsum("nji,kj->nki", quat_as_matrix(q[sel]), n111)
        out[f"plane_{side}_measured"] = names.astype(str) if m else np.array([], str)
        out[f"plane_{side}_deviation_deg"] = dev

    twin_dev = np.full(m, np.nan)
    is_twin = (sigma == "3") & (grain_ab[0] >= 0)
    if "a" in common_s and "b" in common_s:
        sel = (
            is_twin
            & np.all(np.isfinite(common_s["a"][:, 0]), axis=1)
            & np.all(np.isfinite(common_s["b"][:, 0]), axis=1)
        )
        if sel.any():
            na, nb = common_s["a"][sel], common_s["b"][sel]
            cos_ab = np.abs(np.einsum("nki,nli->nkl", na, nb)).reshape(len(na), -1)
            best = np.argmax(cos_ab, axis=1)
            shared = na[np.arange(len(na)), best // 4]
            cos_m = np.abs(np.sum(shared * normal_s[sel], axis=1))
            twin_dev[sel] = np.rad2deg(np.arccos(np.clip(cos_m, 0.0, 1.0)))
    coherent = coherent_twin_test(
        twin_dev, _normal_sigma_deg(measured, has, normal_s), coherent_tolerance_deg
    )
    out["twin_plane_deviation_deg"] = twin_dev
    out["coherent_twin"] = coherent.astype(str)
    return out


def coherent_twin_test(
    deviation_deg: ArrayLike,
    sigma_deg: ArrayLike,
    tolerance_deg: float,
    *,
    alpha: float = 0.01,
) -> np.ndarray:
    """Whether measured planes are the common {111} of a Σ3 twin, against their σ.

    The angle d between a measured normal and the {111} is, if the plane is the
    {111} and the normal's error is normal with σ per direction, Rayleigh
    distributed: P(d > c) = exp(−c²/2σ²), so d > c = σ·√(−2 ln α) rejects the
    {111} at significance α; a coherent twin plane may itself lie up to
    ``tolerance_deg`` (t) off. The answer is ``no`` when d > t + c; ``yes`` when it
    is not and the noise is no larger than the tolerance (c <= t, so that a plane
    beyond about 2t would have been rejected); ``cannot_tell`` when σ is too large
    for that. NaN deviation gives "".

    Parameters
    ----------
    deviation_deg : array_like
        Angle from the common {111}, degrees.
    sigma_deg : array_like
        σ of the measured normal per direction, degrees (0: exact; broadcast).
    tolerance_deg : float
        Largest angle of a coherent twin plane itself from the {111}.
    alpha : float, optional
        Significance of the rejection.

    Returns
    -------
    ndarray of str
        One of :data:`COHERENT_TWIN_ANSWERS` or "".

    Examples
    --------
    >>> coherent_twin_test([1.0, 7.0, 20.0, 6.0, np.nan], [0.5, 1.5, 1.0, 8.0, 1.0],
    ...                    5.0).tolist()
    ['yes', 'yes', 'no', 'cannot_tell', '']
    """
    d = as_float_array(deviation_deg, "deviation_deg")
    sigma = np.broadcast_to(as_float_array(sigma_deg, "sigma_deg"), d.shape)
    critical = np.nan_to_num(sigma, nan=0.0) * np.sqrt(-2.0 * np.log(alpha))
    answer = np.where(
        d > tolerance_deg + critical,
        "no",
        np.where(critical <= tolerance_deg, "yes", "cannot_tell"),
    )
    return np.where(np.isnan(d), "", answer).astype(str)


def _normal_sigma_deg(measured, has, normal_s):
    """σ per direction of each measured normal: the larger of the dip's and the strike's."""
    if "measured_dip_sigma_deg" not in measured:
        return np.zeros(len(normal_s))
    dip_sigma = np.asarray(measured["measured_dip_sigma_deg"], float)[has]
    az_sigma = np.asarray(
        measured.get("dip_direction_sigma_deg", np.full(len(has), np.nan)), float
    )[has]
    # An azimuth error φ moves the normal by sin δ · φ, δ the dip (sin δ = |n_xy|).
    strike = np.hypot(normal_s[:, 0], normal_s[:, 1]) * az_sigma
    return np.fmax(np.nan_to_num(dip_sigma, nan=0.0), strike)
