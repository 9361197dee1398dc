"""The known answer: true boundary-plane normals, and every grain and plane as JSON-ready data.

Owns the truth the analysis is scored against: :func:`boundary_normals_sample` gives the
exact normal in S of the plane between two regions of a
:class:`~.microstructure.Microstructure` (a Voronoi bisector, or a twin plane), and
:func:`ground_truth` every grain, lamella and boundary plane, with its trace, dip and
dip direction from the package's one §5 function
(:func:`inclination.planes.geometry.surface_geometry`), and the boundaries each sampled
map shows (conventions §2–§5).

Region ids are data (:class:`~inclination.errors.InputError` when they name no region).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from ..crystal.rotations import quat_as_euler_deg
from ..errors import InputError
from ..planes.geometry import surface_geometry
from .microstructure import Microstructure
from .sampling import SampledMap

__all__ = ["boundary_normals_sample", "ground_truth"]


def _region_ids(micro: Microstructure, values, name: str) -> np.ndarray:
    ids = np.asarray(values)
    if ids.dtype.kind not in "iu":
        raise TypeError(f"Expected `{name}` to hold integer region ids, got dtype {ids.dtype}.")
    if ids.size and (ids.min() < 1 or ids.max() > micro.n_regions):
        raise InputError(
            f"Expected `{name}` to hold region ids in 1..{micro.n_regions}, "
            f"got values in [{ids.min()}, {ids.max()}]."
        )
    return ids.astype(np.int64)


def boundary_normals_sample(
    micro: Microstructure, region_a: ArrayLike, region_b: ArrayLike
) -> np.ndarray:
    """The true boundary-plane normal in S between pairs of regions.

    Regions in different grains meet on the bisector plane of the two grains' seeds; the
    normal is oriented from a's seed toward b's (it is the face plane whether or not
    the two cells touch). A lamella and its parent meet on the twin plane (normal
    ``TwinLamella.normal_sample``, sign as stored). Other pairs (a region with itself,
    two lamellae of one grain) give NaN.

    Parameters
    ----------
    micro : Microstructure
    region_a, region_b : array_like of int, shape (N,)

    Returns
    -------
    ndarray, shape (N, 3)
        Unit normals in S.

    Raises
    ------
    InputError
        An id that names no region, or ``region_a`` and ``region_b`` of different shapes.
    TypeError
        Ids that are not integers.

    Examples
    --------
    >>> from inclination.synthetic import make_microstructure
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=4, rng=1)
    >>> n = boundary_normals_sample(micro, [1], [2])[0]
    >>> d = micro.seeds_um[1] - micro.seeds_um[0]
    >>> (n - d / (d @ d) ** 0.5).round(6).tolist()
    [0.0, 0.0, 0.0]
    """
    a = _region_ids(micro, np.atleast_1d(region_a), "region_a")
    b = _region_ids(micro, np.atleast_1d(region_b), "region_b")
    if a.shape != b.shape or a.ndim != 1:
        raise InputError(
            f"Expected `region_a` and `region_b` to be 1-D of one length, got {a.shape} "
            f"and {b.shape}."
        )
    pa = micro.region_parent[a - 1]
    pb = micro.region_parent[b - 1]
    d = micro.seeds_um[pb - 1] - micro.seeds_um[pa - 1]
    length = np.linalg.norm(d, axis=1, keepdims=True)
    normals = np.where(length > 0, d / np.where(length > 0, length, 1.0), np.nan)
    twin_normals = np.full((micro.n_regions + 1, 3), np.nan)
    for lam in micro.lamellae:
        twin_normals[lam.region] = lam.normal_sample
    same = pa == pb
    # Within one grain only a lamella against its own parent is a twin-plane pair.
    lam_side = np.where(a > micro.n_grains, a, b)
    other = np.where(a > micro.n_grains, b, a)
    is_twin_pair = same & (other == pa) & (lam_side != other)
    normals[same] = np.nan
    normals[is_twin_pair] = twin_normals[lam_side[is_twin_pair]]
    return normals


def _json_number(value):
    value = float(value)
    return None if not np.isfinite(value) else value


def _map_pairs(sample: SampledMap) -> tuple[np.ndarray, np.ndarray]:
    """Region pairs (a < b) that meet between neighbouring points, and how many times."""
    ids = sample.grain_id
    # The right and lower neighbours are neighbours on both grids (§1).
    a = np.concatenate([ids[:, :-1].ravel(), ids[:-1, :].ravel()])
    b = np.concatenate([ids[:, 1:].ravel(), ids[1:, :].ravel()])
    differ = a != b
    pairs = np.sort(np.stack([a[differ], b[differ]], axis=1), axis=1)
    if len(pairs) == 0:
        return np.zeros((0, 2), dtype=np.int64), np.zeros(0, dtype=np.int64)
    unique, counts = np.unique(pairs, axis=0, return_counts=True)
    return unique, counts


def ground_truth(micro: Microstructure, *, maps: Mapping[str, SampledMap] | None = None) -> dict:
    """The known answer: every grain and boundary plane, JSON-ready (conventions §2–§5).

    Parameters
    ----------
    micro : Microstructure
    maps : mapping of str to SampledMap, optional
        Sampled maps (e.g. ``{"surface": m0, "serial_5um": m1}``); for each, the region
        pairs that meet in it and how many neighbouring point pairs show each.

    Returns
    -------
    dict
        ``frame``, ``box_um``, ``phases``, ``grains`` (every region: id, kind, parent,
        phase, ``euler_deg``, ``quat``), ``boundaries`` (every face between two grains
        inside the box, every twin plane, and every other pair seen in a map: ``grains``,
        ``kind`` ('grain' or 'twin'), ``normal_sample``, ``trace_angle_deg``, ``dip_deg``,
        ``dip_azimuth_deg`` (in S, degrees; null where §5 leaves them undefined),
        ``twin_plane`` (indices in the parent, or null)) and ``maps``. Floats, ints,
        strings, lists and None only.

    Examples
    --------
    >>> from inclination.synthetic import TwinSpec, make_microstructure
    >>> micro = make_microstructure(box_um=(50, 40, 20), n_grains=8, rng=1,
    ...                             twins=[TwinSpec(grain=2, plane=1, thickness_um=2.0)])
    >>> truth = ground_truth(micro)
    >>> [b for b in truth["boundaries"] if b["kind"] == "twin"][0]["twin_plane"]
    '(-1 1 1)'
    """
    maps = {} if maps is None else dict(maps)
    pairs = [tuple(int(v) for v in p) for p in micro.grain_pairs]
    kinds = {p: "grain" for p in pairs}
    for lam in micro.lamellae:
        kinds[(lam.parent, lam.region)] = "twin"
    map_entries = {}
    for name, sample in maps.items():
        if not isinstance(sample, SampledMap):
            raise TypeError(
                f"Expected `maps[{name!r}]` to be a SampledMap, got {type(sample).__name__}."
            )
        found, counts = _map_pairs(sample)
        for p in found:
            kinds.setdefault((int(p[0]), int(p[1])), "grain")
        map_entries[name] = {
            "depth_um": sample.depth_um,
            "offset_um": list(sample.offset_um),
            "step_um": sample.step_um,
            "grid": sample.grid,
            "shape": [int(v) for v in sample.shape],
            "frame_rotation": list(sample.frame_rotation),
            "boundaries": [
                {"grains": [int(p[0]), int(p[1])], "point_pairs": int(c)}
                for p, c in zip(found, counts, strict=True)
            ],
        }
    keys = sorted(kinds)
    key_a = np.array([k[0] for k in keys], dtype=np.int64)
    key_b = np.array([k[1] for k in keys], dtype=np.int64)
    normals = boundary_normals_sample(micro, key_a, key_b).reshape(-1, 3)
    ok = np.all(np.isfinite(normals), axis=1)
    geometry = surface_geometry(np.where(ok[:, None], normals, 1.0))
    twin_plane = {lam.region: lam.indices for lam in micro.lamellae}
    boundaries = []
    for i, key in enumerate(keys):
        if not ok[i]:
            continue
        boundaries.append(
            {
                "grains": [key[0], key[1]],
                "kind": kinds[key],
                "is_twin": kinds[key] == "twin",
                "parent_grains": [int(micro.region_parent[k - 1]) for k in key],
                "normal_sample": [float(v) for v in normals[i]],
                "trace_angle_deg": _json_number(geometry.trace_angle_deg[i]),
                "dip_deg": _json_number(geometry.dip_deg[i]),
                "dip_azimuth_deg": _json_number(geometry.dip_azimuth_deg[i]),
                "twin_plane": twin_plane.get(key[1]) if kinds[key] == "twin" else None,
            }
        )
    euler = quat_as_euler_deg(micro.region_quat)
    grains = []
    for r in range(1, micro.n_regions + 1):
        entry = {
            "id": r,
            "kind": "grain" if r <= micro.n_grains else "twin",
            "parent": int(micro.region_parent[r - 1]),
            "phase": int(micro.region_phase[r - 1]),
            "euler_deg": [float(v) for v in euler[r - 1]],
            "quat": [float(v) for v in micro.region_quat[r - 1]],
        }
        if r <= micro.n_grains:
            entry["seed_um"] = [float(v) for v in micro.seeds_um[r - 1]]
        grains.append(entry)
    lamellae = [
        {
            "region": lam.region,
            "parent": lam.parent,
            "twin_plane": lam.indices,
            "normal_sample": list(lam.normal_sample),
            "normal_crystal": list(lam.normal_crystal),
            "lower_um": lam.lower_um,
            "upper_um": lam.upper_um,
            "thickness_um": lam.upper_um - lam.lower_um,
        }
        for lam in micro.lamellae
    ]
    return {
        "frame": (
            "sample frame S: x right, y down, z into the material (conventions §2); "
            "lengths in µm, angles in degrees; a plane is n·x = c with n = normal_sample"
        ),
        "box_um": list(micro.box_um),
        "phases": [
            {"id": int(p.id), "name": str(p.name), "laue": str(p.laue)} for p in micro.phases
        ],
        "grains": grains,
        "lamellae": lamellae,
        "boundaries": boundaries,
        "maps": map_entries,
    }
