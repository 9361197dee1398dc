"""The whole job: job file in, tables, figures and report out.

:func:`run` chains the stages as pure computations on what the job names
(read → grains → network → traces → planes → sections → compare) and returns
one frozen :class:`Analysis`; :func:`write_outputs` turns it into files, in the
user's declared axes (conventions §2). :func:`analyse` is the two together,
writing into a staged folder that replaces the output folder only when every
file is complete. The command line calls these and nothing else.
"""

from __future__ import annotations

import contextlib
import math
import os
import platform
import tempfile
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from . import __version__
from .errors import InputError, SettingError
from .io.job import Job
from .maps import OrientationMap

if TYPE_CHECKING:
    # Annotations only: a grains-only run should not import the later stages (and
    # scipy.stats with them) at start-up.
    from .compare import FrameVerdict
    from .grains import GrainMap
    from .network import BoundaryNetwork
    from .planes import TwinTestSummary

__all__ = ["STAGES", "Analysis", "RunResult", "run", "write_outputs", "analyse", "audit", "demo"]

#: Stages in data-flow order; each includes everything before it.
STAGES = ("grains", "traces", "planes", "sections")
#: Version of the summary.json layout.
SUMMARY_VERSION = "1.0"

#: A table: one key per column, equal-length 1-D arrays (docs/architecture.md).
Table = dict[str, np.ndarray]
#: ``progress(total, desc)`` returning a bar with ``update(n)`` and ``close()``.
ProgressFactory = Callable[[int, str], Any]


@dataclass(frozen=True)
class Analysis:
    """Everything one run computed, in the sample frame S (conventions §2).

    Attributes
    ----------
    job : Job
        The job that was run.
    omap : OrientationMap
        The surface map.
    grain_map : GrainMap
    stage : str
        The last stage run, one of ``STAGES``.
    network : BoundaryNetwork or None
    segments, subgrain_segments : Table or None
        Straight segments of the grain boundaries and of the sub-grain network.
    identification, candidates : Table or None
        Tables of :func:`inclination.planes.identify` and ``candidates``.
    twin_summary : TwinTestSummary or None
    section_tables : tuple of Table
        One table per section of the job (and one for a stack), in job order.
    section_notes : tuple of dict
        What ``summary.json`` says of each of those tables.
    measured, senses, planes_full : Table or None
        The fields of :class:`inclination.compare.Comparison`.
    verdict : FrameVerdict or None
    faces : tuple of dict
        One per cross-section given as an image: ``name``, ``index`` (in the job's
        sections), ``measurement`` (:class:`inclination.sections.FaceMeasurement`),
        ``record`` (the :class:`~inclination.sections.CrossSection` measured),
        ``table`` (its section table), ``first_image_entry`` (rows from there on
        came from the image), ``image`` (the grey levels, for the overlay),
        ``grey_check`` (per image entry, :func:`inclination.sections.neighbour_check`),
        ``grey_check_notes`` (why each flagged pair is flagged,
        :func:`inclination.sections.neighbour_check_notes`).
    audit : FrameAudit or None
        The frame audit (inclination.audit), from the planes stage on.

    Absent stages hold None (or an empty tuple).
    """

    job: Job
    omap: OrientationMap
    grain_map: GrainMap
    stage: str
    network: BoundaryNetwork | None = None
    segments: Table | None = None
    subgrain_segments: Table | None = None
    identification: Table | None = None
    candidates: Table | None = None
    twin_summary: TwinTestSummary | None = None
    section_tables: tuple[Table, ...] = ()
    section_notes: tuple[dict, ...] = ()
    measured: Table | None = None
    senses: Table | None = None
    verdict: FrameVerdict | None = None
    planes_full: Table | None = None
    features: Table | None = None
    faces: tuple[dict, ...] = ()
    audit: Any = None

    @property
    def tables(self) -> dict:
        """Every table the run writes as CSV, by file stem, each with ``to_pandas()``.

        See :func:`inclination.run_tables.run_tables`; computed on each access.
        """
        from .run_tables import run_tables

        return run_tables(self)

    @property
    def boundaries(self):
        """The boundaries table as boundaries.csv holds it (a RunTable), or None before planes."""
        return self.tables.get("boundaries")


@dataclass(frozen=True)
class RunResult:
    """What a command wrote, and the lines it tells the user.

    Attributes
    ----------
    out_dir : Path
    files : tuple of Path
        The files written (empty for ``demo``, which writes whole folders).
    messages : tuple of str
        The lines the command line prints.
    summary : dict or None
        What ``summary.json`` holds; for ``demo``, the summaries by folder name.
    warnings : tuple of str
        Lines for stderr (the frame audit's finding and patch, when the declared frame
        is not the best beyond doubt).
    analysis : Analysis or None
        The run itself, for :func:`analyse` (``inclination.batch`` pools its traces);
        None for the other commands.
    """

    out_dir: Path
    files: tuple[Path, ...]
    messages: tuple[str, ...] = field(default=())
    summary: dict | None = None
    warnings: tuple[str, ...] = field(default=())
    analysis: Analysis | None = field(default=None, repr=False, compare=False)


def _stage_index(stage: str) -> int:
    if stage not in STAGES:
        raise SettingError(f"Expected `stage` to be one of {STAGES}, got {stage!r}.")
    return STAGES.index(stage)


def _progress_callback(progress, desc):
    """A fraction callback for a library stage, from the CLI's progress factory."""
    if progress is None:
        return None, (lambda: None)
    bar = progress(100, desc)
    state = {"done": 0}

    def update(fraction):
        target = int(round(100 * min(max(float(fraction), 0.0), 1.0)))
        if target > state["done"]:
            bar.update(target - state["done"])
            state["done"] = target

    return update, bar.close


def _phases_by_id(job):
    return job.phases


@contextlib.contextmanager
def _work_map(omap):
    """The map the grain and network stages read: a zarr map's tiles kept once converted.

    Those stages read each tile several times; converting Euler angles costs several
    times reading float32 quaternion planes (docs/performance.md, maps by tiles).
    """
    if not _is_tiled(omap) or omap.provenance.get("reader") != "zarr arrays":
        yield omap
        return
    from .tiles import cache_tiles

    with tempfile.TemporaryDirectory(prefix="inclination-tiles-") as folder:
        # Each tile is converted when the grains first read it (their progress shows it).
        yield cache_tiles(omap, folder)


def _grains_and_segments(omap, job, stage_i, progress, label, *, subgrains):
    """Grains, network and straight segments of one map; the sub-grain segments on request."""
    with _work_map(omap) as work:
        return _grains_and_segments_of(work, job, stage_i, progress, label, subgrains=subgrains)


def _grains_and_segments_of(omap, job, stage_i, progress, label, *, subgrains):
    from .grains import segment_grains
    from .network import boundary_network
    from .traces import fit_segments

    g = job.grains
    tiled = _is_tiled(omap)
    if tiled and subgrains and g.get("subgrain_network"):
        raise InputError(
            "Expected subgrain_network false for a map segmented by tiles, got true; the "
            "tiled path builds the grain-boundary network only.",
            path=job.source_path,
            pointer="/grains/subgrain_network",
        )
    update, close = _progress_callback(progress, f"{label}: grains")
    try:
        segment = segment_grains
        if tiled:
            from .tiles import segment_grains_tiled as segment
        grain_map = segment(
            omap,
            job.phases,
            threshold_deg=g["threshold_deg"],
            min_pixels=g["min_pixels"],
            small_grains=g["small_grains"],
            fill_isolated=g["fill_isolated"],
            progress=update,
        )
    finally:
        close()
    if grain_map.n_grains == 0:
        # Nothing downstream means anything without grains; the settings are the usual
        # cause (a serial section's phases check would otherwise take the blame).
        c = grain_map.cleanup
        raise InputError(
            f"Expected the {label} map to give at least one grain, got none with "
            f"threshold_deg = {g['threshold_deg']} and min_pixels = {g['min_pixels']} "
            f"({int(np.count_nonzero(np.asarray(omap.valid)))} indexed points, "
            f"{c.get('grains_dissolved', 0)} grains dissolved as too small); lower "
            "min_pixels or raise threshold_deg.",
            path=job.source_path,
            pointer="/grains",
        )
    if stage_i < 1:
        return grain_map, None, None, None
    low_angle = g["low_angle_deg"] if subgrains and g.get("subgrain_network") else None
    if tiled:
        from .tiles import boundary_network_tiled

        network = boundary_network_tiled(omap, grain_map, job.phases)
    else:
        network = boundary_network(omap, grain_map, job.phases, low_angle_deg=low_angle)
    step = float(min(omap.step_x_um, omap.step_y_um))
    t = job.traces
    segments = fit_segments(
        network,
        step_um=step,
        tolerance_um=t.get("tolerance_um"),
        min_length_um=t.get("min_length_um"),
        grid=omap.grid,
    )
    subgrain = None
    if network.low_angle is not None:
        # The sub-grain network is kept apart from the grain boundaries: its own table.
        subgrain = fit_segments(
            network.low_angle,
            step_um=step,
            tolerance_um=t.get("tolerance_um"),
            min_length_um=t.get("min_length_um"),
            grid=omap.grid,
        )
    return grain_map, network, segments, subgrain


def _is_tiled(omap) -> bool:
    return not isinstance(omap, OrientationMap)


def _read_surface(job, *, progress=None):
    """The surface map: an OrientationMap, or a TiledMap (the job's ``tiles``, a zarr map).

    A zarr map is read tile by tile (inclination.tiles); any other map is read whole and
    tiled when the job gives ``tiles.tile_px`` or the map exceeds ``tiles.memory_mib``.
    """
    spec = job.raw.get("tiles") or {}
    tile_px, memory_mib = spec.get("tile_px"), spec.get("memory_mib")
    if job.map.get("format") == "zarr":
        from .tiles import read_zarr_map

        return read_zarr_map(
            job.map,
            phase_ids=job.phase_ids,
            path_for_errors=job.source_path,
            pointer="/map",
            tile_px=tile_px,
        )
    omap = job.read_surface_map(progress=progress)
    from .tiles import DEFAULT_TILE_PX, TiledMap, needs_tiles

    if needs_tiles(omap.shape, format=job.map["format"], tile_px=tile_px, memory_mib=memory_mib):
        return TiledMap.from_orientation_map(omap, tile_px=tile_px or DEFAULT_TILE_PX)
    return omap


def _map_bounds_um(omap):
    # From the grid (§1), not from a full-size array of positions: the first point is at
    # the origin, odd rows of a hexagonal grid shift by half a step.
    h, w = omap.shape
    x_max = (w - 1) * float(omap.step_x_um)
    if omap.grid == "hexagonal" and h > 1:
        x_max += 0.5 * float(omap.step_x_um)
    return (0.0, 0.0, float(x_max), float((h - 1) * float(omap.row_pitch_um)))


def _status_counts(table) -> dict:
    """How many rows of a section table have each status (for summary.json)."""
    status, count = np.unique(np.asarray(table["status"]), return_counts=True)
    return dict(zip(status.tolist(), count.tolist(), strict=True))


def _face_image(section, record, job_path, pointer):
    """Read and measure the face image of a cross-section entry (conventions §7)."""
    from .sections import image_right_sample, measure_face_image, read_face_image

    spec = section["image"]
    image = read_face_image(spec["path"], job_path=job_path, pointer=f"{pointer}/image")
    right = image_right_sample(record.line_sample, record.viewer_sample)
    along = record.line_sample[1] - record.line_sample[0]
    length = float(np.hypot(*along))
    try:
        face = measure_face_image(
            image,
            pixel_um=float(spec["pixel_um"]),
            line_start_px=spec["line_start_px"],
            line_length_um=length,
            right_along_line=bool(right[:2] @ along > 0),
            tilt_deg=record.tilt_deg,
            face_inclination_deg=record.face_inclination_deg,
            surface_row=spec.get("surface_row"),
            rotation_deg=spec.get("rotation_deg"),
            depth_um=spec.get("depth_um"),
        )
    except ValueError as exc:
        field = "line_start_px" if "line_start_px" in str(exc) else "path"
        raise InputError(
            f"{exc} (image {spec['path']!r})", path=job_path, pointer=f"{pointer}/image/{field}"
        ) from None
    return face, image


def _grey_check(face, table, segments, first, crossings):
    """The image's grey regions against the matched traces' grains, per used line.

    Returns ``(check, notes)``: the notes say why each flagged pair is flagged, from the
    map's ``crossings`` of the section line (None without a network: none between
    traces; :func:`.sections.neighbour_check_notes`).
    """
    from .sections import neighbour_check, neighbour_check_notes

    used = face.lines["status"] == "used"
    seg_ids = np.asarray(table["segment_id"])[first:]
    row_of = {int(s): i for i, s in enumerate(np.asarray(segments["segment_id"]))}
    ga = np.full(len(seg_ids), -1, dtype=np.int64)
    gb = np.full(len(seg_ids), -1, dtype=np.int64)
    for j, s in enumerate(seg_ids):
        if s >= 0:
            ga[j] = int(segments["grain_a"][row_of[int(s)]])
            gb[j] = int(segments["grain_b"][row_of[int(s)]])
    left, right = face.lines["region_left"][used], face.lines["region_right"][used]
    if crossings is None:
        crossings = {
            "along_um": np.zeros(0),
            "grain_a": np.zeros(0, np.int64),
            "grain_b": np.zeros(0, np.int64),
        }
    notes = neighbour_check_notes(
        face.lines["along_um"][used], left, right, ga, gb, crossings=crossings
    )
    return neighbour_check(left, right, ga, gb), notes


def _face_note(face, record, table, segments, first, grey):
    """What summary.json says of a face image: lines found, used, and the match offset.

    ``grey`` is the ``(check, notes)`` pair of :func:`_grey_check`.
    """
    from .sections import along_offsets_um

    lines = face.lines
    rows = np.arange(first, len(table["status"]))
    matched = rows[np.asarray(table["segment_id"])[rows] >= 0]
    offsets = along_offsets_um(
        record, segments, table["segment_id"][matched], np.asarray(table["along_um"])[matched]
    )
    check, why = grey
    return {
        "grey_check": {
            **{k: int(np.sum(check == k)) for k in ("consistent", "inconsistent")},
            # Each flagged pair of lines and why (the map shows a boundary the face
            # hides, or a line matched to the wrong trace).
            "flagged": why,
        },
        "lines_found": int(len(lines["status"])),
        "lines_used": int(np.sum(lines["status"] == "used")),
        "unsure": {
            k: int(np.sum(lines["status"] == k)) for k in ("low_contrast", "short", "curved")
        },
        "rotation_deg": round(face.rotation_deg, 4),
        "rotation_found": face.rotation_found,
        # The shift of the image's along-line positions against the traces: a misplaced
        # line_start_px shows here as a steady offset.
        "along_offset_um": round(float(np.median(offsets)), 4) if len(offsets) else None,
    }


def _depth_note(estimate, given=None) -> dict:
    """The sections note of the coherent twins' fit of a serial section (§8).

    ``given`` is the job's depth (a LayerDepth) when it gave one: the twins then refined
    the registration and their depth is a check on the given one.
    """
    d = estimate.depth
    fit = (
        f"{estimate.n_used} identified coherent twins, fitted to their trace offsets "
        f"Δ = h cot δ of their predicted dips δ (outliers set aside: {estimate.n_rejected})"
    )
    if given is None:
        note = (
            f"No depth was given: h = {d.depth_um:.3g} ± {d.depth_sigma_um:.2g} µm was "
            f"estimated from {fit}. Those twins' measured dips agree with their predictions "
            "by construction and are no evidence for their planes; all dip directions "
            "(senses) are unaffected."
        )
    else:
        z = (d.depth_um - given.depth_um) / math.hypot(d.depth_sigma_um, given.depth_sigma_um)
        note = (
            f"The registration on the grain structure was refined by {fit}, which also "
            f"imply h = {d.depth_um:.3g} ± {d.depth_sigma_um:.2g} µm against the "
            f"{given.depth_um:g} µm given ({z:+.2f} σ)."
        )
    out = {
        "n_twins": estimate.n_used,
        "n_rejected": estimate.n_rejected,
        "scatter_ratio": round(estimate.scatter_ratio, 3),
        "note": note,
        "segment_ids": [int(i) for i in estimate.segment_ids],
    }
    if given is not None:
        out |= {"twins_depth_um": d.depth_um, "twins_depth_sigma_um": d.depth_sigma_um}
    return out


def _sections(job, omap, grain_map, segments, progress, network=None, identification=None):
    """Measure every section of the job; returns (tables, notes)."""
    from .sections import (
        CrossSection,
        SerialLayer,
        estimate_depth_from_twins,
        measure_cross_section,
        measure_serial_section,
        measure_stack,
        network_crossings,
        network_junctions_um,
    )

    tables, notes, faces = [], [], []
    step = float(min(omap.step_x_um, omap.step_y_um))
    junctions = (
        None
        if network is None
        else network_junctions_um(network, _map_bounds_um(omap), step_um=step)
    )
    # Phase records, not bare Laue symbols: the setting matters for hexagonal phases.
    laue_by_phase = _phases_by_id(job)
    stack = []
    for index, section in enumerate(job.sections):
        pointer = f"/sections/{index}"
        name = section.get("name") or f"section {index + 1}"
        if section["kind"] == "cross-section":
            # The job entry becomes a typed record in S here, once (conventions §2).
            record = CrossSection.from_job_entry(
                section, axes=omap.axes, path=job.source_path, pointer=pointer
            )
            listed = len(record.along_um)
            face = None
            if "image" in section:
                face, face_grey = _face_image(section, record, job.source_path, pointer)
                record = CrossSection.from_job_entry(
                    {**section, "boundaries": [*section.get("boundaries", []), *face.entries()]},
                    axes=omap.axes,
                    path=job.source_path,
                    pointer=pointer,
                )
            # Matches come from where the network itself crosses the line, and entries
            # at a triple junction are flagged (conventions §7).
            crossings = None if network is None else network_crossings(network, record.line_sample)
            table = measure_cross_section(
                record,
                segments,
                step_um=step,
                bounds_um=_map_bounds_um(omap),
                crossings=crossings,
                junctions_um=None if network is None else junctions,
                path=job.source_path,
                pointer=pointer,
            )
            if face is not None:
                table["dip_source"][listed:] = "cross-section image"
                grey = _grey_check(face, table, segments, listed, crossings)
                faces.append(
                    {
                        "name": name,
                        "index": index,
                        "measurement": face,
                        "record": record,
                        "table": table,
                        "first_image_entry": listed,
                        "image": face_grey,
                        "grey_check": grey[0],
                        "grey_check_notes": grey[1],
                    }
                )
            notes.append(
                {
                    "name": name,
                    "kind": "cross-section",
                    "entries": int(len(table["status"])),
                    "status": _status_counts(table),
                    **(
                        {}
                        if face is None
                        else {"image": _face_note(face, record, table, segments, listed, grey)}
                    ),
                }
            )
        else:
            deeper = job.read_section_map(index)
            if deeper.grid != omap.grid or not np.isclose(deeper.step_x_um, omap.step_x_um):
                raise InputError(
                    f"Expected the serial section's map on the surface map's grid "
                    f"({omap.grid}, step {omap.step_x_um} µm), got {deeper.grid}, "
                    f"step {deeper.step_x_um} µm.",
                    path=job.source_path,
                    pointer=f"{pointer}/map",
                )
            deeper_grains, _, deeper_segments, _ = _grains_and_segments(
                deeper, job, 1, progress, name, subgrains=False
            )
            layer = SerialLayer.from_job_entry(
                section,
                surface_axes=omap.axes,
                section_axes=deeper.axes,
                path=job.source_path,
                pointer=pointer,
            )
            # The deeper map's planes (21 bytes per point) are not needed past its grains
            # and segments: freed before the registration and the next section's read.
            del deeper
            pair = (segments, grain_map, deeper_segments, deeper_grains)
            settings = {
                "step_um": step,
                "laue_by_phase": laue_by_phase,
                "fiducials_um": layer.fiducials_um,
                "threshold_deg": job.grains["threshold_deg"],
                "grid": omap.grid,
                "path": job.source_path,
                "pointer": pointer,
            }
            depth, estimate, registration = layer.depth, None, None
            if depth is None:
                # No depth given: the coherent twins' known planes measure it (§8).
                estimate = estimate_depth_from_twins(*pair, identification, **settings)
                depth, registration = estimate.depth, estimate.registration
            elif layer.fiducials_um is None:
                # A registration on the grain structure is off by the boundaries' net move;
                # the coherent twins' offsets measure that shift (§8). Too few twins: as is.
                try:
                    estimate = estimate_depth_from_twins(*pair, identification, **settings)
                    registration = estimate.registration
                except InputError:
                    estimate = None
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                result = measure_serial_section(
                    *pair,
                    depth_um=depth.depth_um,
                    depth_sigma_um=depth.depth_sigma_um,
                    registration=registration,
                    **settings,
                )
            stack.append((deeper_segments, deeper_grains, depth.depth_um, result.registration))
            table = result.boundaries
            reg = result.registration
            notes.append(
                {
                    "name": name,
                    "kind": "serial",
                    "depth_um": depth.depth_um,
                    "depth_sigma_um": depth.depth_sigma_um,
                    "depth_source": depth.source,
                    **(
                        {}
                        if estimate is None
                        else {"depth_estimate": _depth_note(estimate, layer.depth)}
                    ),
                    "registration": {
                        "shift_x_um": reg.shift_x_um,
                        "shift_y_um": reg.shift_y_um,
                        "rotation_deg": reg.rotation_deg,
                        "residual_um": reg.residual_um,
                        "n_points": reg.n_points,
                        "method": reg.method,
                    },
                    "status": _status_counts(table),
                    "warnings": [str(w.message) for w in caught],
                }
            )
        tables.append(table)
    if len(stack) >= 2:
        # Several serial sections of one area: one least-squares plane per boundary
        # through all its traces (conventions §8), beside the pairwise measurements.
        table = measure_stack(
            segments,
            grain_map,
            [(seg, grains) for seg, grains, _, _ in stack],
            depths_um=[d for _, _, d, _ in stack],
            step_um=step,
            laue_by_phase=laue_by_phase,
            registrations=[reg for _, _, _, reg in stack],
            threshold_deg=job.grains["threshold_deg"],
            grid=omap.grid,
        )
        notes.append(
            {
                "name": "stack of all serial sections",
                "kind": "stack",
                "depths_um": [d for _, _, d, _ in stack],
                "status": _status_counts(table),
            }
        )
        tables.append(table)
    return tuple(tables), tuple(notes), tuple(faces)


def run(job: Job, *, stage: str = "sections", progress: ProgressFactory | None = None) -> Analysis:
    """Run the job's stages up to ``stage`` and return what they computed.

    Parameters
    ----------
    job : inclination.io.job.Job
    stage : {'grains', 'traces', 'planes', 'sections'}
        The last stage to run; each includes the ones before it.
    progress : callable, optional
        ``progress(total, desc)`` returning a bar with ``update(n)`` and
        ``close()`` (the CLI passes tqdm); silent when omitted.

    Returns
    -------
    Analysis

    Raises
    ------
    SettingError
        ``stage`` is not one of ``STAGES``.

    Examples
    --------
    >>> import tempfile
    >>> from inclination.io.job import job_from_dict
    >>> from inclination.io.writers import write_npz
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> a = run(job_from_dict(spec, base_dir=folder), stage="planes")
    >>> len(a.grain_map.grains["grain_id"]), a.segments["trace_angle_deg"].round(6).tolist()
    (2, [90.0])
    >>> a.identification["identification"].tolist(), a.verdict is None
    (['ambiguous'], True)
    """
    stage_i = _stage_index(stage)
    update, close = _progress_callback(progress, "surface: read map")
    try:
        omap = _read_surface(job, progress=update)
    finally:
        close()
    grain_map, network, segments, subgrain = _grains_and_segments(
        omap, job, stage_i, progress, "surface", subgrains=True
    )
    analysis = Analysis(
        job,
        omap,
        grain_map,
        stage,
        network=network,
        segments=segments,
        subgrain_segments=subgrain,
    )
    if stage_i < 2:
        return analysis
    # Imported here: a grains- or traces-only run should not pay for scipy.stats at start-up.
    from .planes import match_planes, twin_test_summary

    p = job.planes
    options = {
        "k": p["k"],
        "floor_deg": p["floor_deg"],
        "max_tolerance_deg": p["max_tolerance_deg"],
        "sigma_criterion": p["sigma_criterion"],
    }
    matched = match_planes(segments, grain_map, job.phases, **options)
    identification, cands = matched.identification, matched.candidates
    twin = twin_test_summary(identification, segments)
    analysis = replace(analysis, identification=identification, candidates=cands, twin_summary=twin)
    if stage_i < 3 or not job.sections:
        return _with_features(replace(analysis, audit=_frame_audit(analysis)))
    from .compare import DEFAULT_BLUNDER_RATE, best_measurements, compare_map

    tables, notes, faces = _sections(
        job, omap, grain_map, segments, progress, network, identification
    )
    comparison = compare_map(
        best_measurements(*tables),
        identification,
        grain_map.grains,
        _phases_by_id(job),
        coherent_tolerance_deg=job.planes["max_tolerance_deg"],
        blunder_rate=float(job.raw.get("comparison", {}).get("blunder_rate", DEFAULT_BLUNDER_RATE)),
        section_names=[note.get("name", "") for note in notes]
        if len(notes) == len(tables)
        else None,
    )
    analysis = replace(
        analysis,
        section_tables=tables,
        section_notes=notes,
        faces=faces,
        measured=comparison.measured,
        senses=comparison.senses,
        verdict=comparison.verdict,
        planes_full=comparison.planes_full,
    )
    return _with_features(replace(analysis, audit=_frame_audit(analysis)))


def _frame_audit(analysis: Analysis):
    """The frame audit of the surface map (inclination.audit), settled by the sections."""
    from .audit import audit_frame

    job, omap = analysis.job, analysis.omap
    settle = None
    if analysis.section_tables:
        from .compare import best_measurements, compare_map
        from .planes import match_planes

        measured = best_measurements(*analysis.section_tables)
        p = job.planes

        def settle(quat_sample, phases):
            # The comparator under the hypothesis: the same grains and segments, the
            # grain orientations turned as the hypothesis says (conventions §6). Within
            # 0.2° of the declared orientations the run's own verdict is that comparison.
            declared = np.asarray(analysis.grain_map.grains["quat"], float)
            same = np.abs(np.einsum("ni,ni->n", np.nan_to_num(declared), quat_sample))
            close = same[np.isfinite(declared[:, 0])] > 1 - 1.5e-6
            if analysis.verdict is not None and np.all(close):
                return analysis.verdict.verdict
            grains = dict(analysis.grain_map.grains, quat=quat_sample)
            grain_map = replace(analysis.grain_map, grains=grains)
            table = match_planes(
                analysis.segments,
                grain_map,
                phases,
                k=p["k"],
                floor_deg=p["floor_deg"],
                max_tolerance_deg=p["max_tolerance_deg"],
                sigma_criterion=p["sigma_criterion"],
            ).identification
            return compare_map(
                measured,
                table,
                grains,
                phases,
                coherent_tolerance_deg=p["max_tolerance_deg"],
            ).verdict.verdict

    pointers = ["/map"] + [
        f"/sections/{i}/map" for i, s in enumerate(job.sections) if s.get("kind") == "serial"
    ]
    return audit_frame(
        analysis.segments,
        analysis.grain_map.grains,
        job.phases,
        axes=omap.axes,
        data_frame_rotation=omap.data_frame_rotation,
        rotation_sense=omap.rotation_sense,
        sigma_criterion=job.planes["sigma_criterion"],
        settle=settle,
        min_voters=int(job.audit["min_voters"]),
        # The job states the margin as odds (log10); the audit weighs in nats.
        min_margin_nats=float(job.audit["min_margin_log10"]) * float(np.log(10.0)),
        outlier_fraction=float(job.audit["outlier_fraction"]),
        map_pointers=tuple(pointers),
    )


def _audit_warnings(analysis: Analysis) -> tuple[str, ...]:
    """The one stderr line of a frame audit that does not confirm the declared frame."""
    a = analysis.audit
    if a is None or a.declared_is_best is True:
        return ()
    if a.declared_is_best == "undecided":
        return (f"inclination: warning: frame audit undecided: {a.reason}",)
    return (
        "inclination: warning: the declared frame is not the best fit of the twin traces; "
        f"job patch {a.patch_line()} (see audit.json)",
    )


def _with_features(analysis: Analysis) -> Analysis:
    """The job's traces inside grains (inclination.features), when it lists any."""
    from .features import features_of_analysis

    if analysis.job.raw.get("features") is None:
        return analysis
    return replace(analysis, features=features_of_analysis(analysis))


def analyse(
    job_path: str | os.PathLike,
    out_dir: str | os.PathLike,
    *,
    stage: str = "sections",
    overwrite: bool = False,
    progress: ProgressFactory | None = None,
    all_candidates: bool = False,
) -> RunResult:
    """Load a job file, run it up to ``stage`` and write the outputs into ``out_dir``.

    The outputs are written into a staged folder that replaces ``out_dir`` only once
    every file is complete; an existing ``out_dir`` is replaced only with ``overwrite``.

    Parameters
    ----------
    job_path : str or PathLike
        The job file (JSON, ``schemas/job.schema.json``).
    out_dir : str or PathLike
        The output folder.
    stage : {'grains', 'traces', 'planes', 'sections'}, optional
        The last stage to run.
    overwrite : bool, optional
        Replace an existing ``out_dir``.
    progress : callable, optional
        As for :func:`run`.
    all_candidates : bool, optional
        Write every candidate plane to ``candidates.jsonl``, as the job setting
        ``planes.candidate_rows = "all"`` does.

    Returns
    -------
    RunResult

    Examples
    --------
    >>> import tempfile
    >>> from inclination.io.job import job_from_dict
    >>> from inclination.io.writers import write_npz
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> import json
    >>> _ = (folder / "job.json").write_text(json.dumps(spec))
    >>> result = analyse(folder / "job.json", folder / "out", stage="traces")
    >>> [p.name for p in result.files]
    ['grains.csv', 'segments.csv', 'segments.json', 'segments.meta.json', 'summary.json']
    >>> result.summary["counts"]["segments"]
    1
    """
    from .io.job import load_job
    from .report.atomic import staged_output_dir

    job = load_job(job_path)
    if all_candidates:
        job = replace(job, planes={**job.planes, "candidate_rows": "all"})
    out = Path(out_dir)
    notes: list = []
    with staged_output_dir(
        out, overwrite=overwrite, inputs=input_files(job), notes=notes
    ) as stage_dir:
        analysis = run(job, stage=stage, progress=progress)
        files, summary = write_outputs(
            analysis, stage_dir, relocate=(stage_dir, out), progress=progress
        )
        files += _stereology_outputs(analysis, stage_dir, standalone=False)
    files = tuple(out / Path(f).name for f in files)
    return RunResult(
        out,
        files,
        tuple(notes + _messages(summary, out)),
        summary,
        warnings=_audit_warnings(analysis),
        analysis=analysis,
    )


def input_files(job) -> list:
    """Every file the job reads, the job file first.

    The output folder must not be or hold their folders (report.atomic), and
    ``inclination batch`` hashes them to tell a changed job from a finished one.
    """
    files = [job.source_path, job.map.get("path"), job.map.get("sidecar")]
    for section in job.sections:
        spec = section.get("map")
        if isinstance(spec, dict):
            files += [spec.get("path"), spec.get("sidecar")]
        image = section.get("image")
        if isinstance(image, dict):
            files.append(image.get("path"))
    return [f for f in files if f]


def audit(
    job_path: str | os.PathLike,
    out_dir: str | os.PathLike,
    *,
    overwrite: bool = False,
    progress: ProgressFactory | None = None,
) -> RunResult:
    """The frame audit of a job alone: writes ``audit.json`` (schemas/audit.schema.json).

    Runs the job up to its planes (and its sections, which settle the 180° partner,
    when it has any) and writes the ranked hypotheses and the job patch.
    """
    from .io.job import load_job
    from .report.atomic import staged_output_dir, write_json_atomic

    job = load_job(job_path)
    out = Path(out_dir)
    notes: list = []
    with staged_output_dir(
        out, overwrite=overwrite, inputs=input_files(job), notes=notes
    ) as stage_dir:
        analysis = run(job, stage="sections", progress=progress)
        write_json_atomic(stage_dir / "audit.json", analysis.audit.as_dict())
    line = f"{out / 'audit.json'}: {analysis.audit.sentence()}"
    return RunResult(
        out,
        (out / "audit.json",),
        (*notes, line),
        analysis.audit.as_dict(),
        warnings=_audit_warnings(analysis),
    )


def _messages(summary, out):
    c = summary["counts"]
    lines = [f"{out}: {c['grains']} grains"]
    if "segments" in c:
        lines[0] += f", {c['segments']} straight segments ({c['segments_for_planes']} long enough)"
    if "identified" in summary:
        ids = summary["identified"]
        lines.append("planes: " + ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in ids.items()))
    verdict = summary.get("frame_verdict")
    if verdict:
        lines.append(f"frame: {verdict['sentence']}")
    return lines


def demo(
    out_dir: str | os.PathLike,
    *,
    seed: int = 7,
    overwrite: bool = False,
    progress: ProgressFactory | None = None,
) -> RunResult:
    """Write the demo scenario and run the whole job on it, and on its turned-frame twin.

    The folder gets ``scenario/`` (maps, job files, ground truth), ``results/``
    (the job as declared), ``results-turned-frame/`` (the same sample recorded
    in a frame turned 180° about the surface normal: its verdict must say so) and
    ``results-turned-axes/`` (recorded with axes turned 90° about the normal: the
    frame audit leads its report with the finding and the job patch) and
    ``results-survey/`` (a larger survey map, map only, whose report shows the plane
    distribution overall and for Σ3 from its thousands of traces).

    Examples
    --------
    >>> import tempfile
    >>> result = demo(Path(tempfile.mkdtemp()) / "demo")
    >>> [result.summary[k]["frame_verdict"]["verdict"]
    ...  for k in ("results", "results-turned-frame")]
    ['as_declared', 'turned_180_about_normal']
    >>> result.summary["results-turned-axes"]["frame_audit"]["job_patch"]["map"]
    {'data_frame_rotation': 'z90'}
    """
    from .demo import write_demo_scenario
    from .io.job import load_job
    from .report.atomic import staged_output_dir

    out = Path(out_dir)
    messages: list = []
    with staged_output_dir(out, overwrite=overwrite, notes=messages) as stage_dir:
        paths = write_demo_scenario(stage_dir / "scenario", seed=seed)
        summaries = {}
        cases = (
            ("job", "results"),
            ("job_z180", "results-turned-frame"),
            ("job_z90", "results-turned-axes"),
            ("job_survey", "results-survey"),
        )
        for key, folder in cases:
            job = load_job(paths[key])
            analysis = run(job, stage="sections", progress=progress)
            (stage_dir / folder).mkdir()
            _, summary = write_outputs(
                analysis, stage_dir / folder, relocate=(stage_dir, out), progress=progress
            )
            _stereology_outputs(analysis, stage_dir / folder, standalone=False)
            summaries[folder] = summary
            messages += _messages(summary, out / folder)
            messages += [f"{out / folder}: {w}" for w in _audit_warnings(analysis)]
    messages.append(f"scenario, maps and ground truth: {out / 'scenario'}")
    messages.append(f"open {out / 'results' / 'report.html'} for the report")
    return RunResult(out, (), tuple(messages), summaries)


def rebuild_report(run_dir: str | os.PathLike) -> RunResult:
    """Write ``report.html`` and ``report.md`` again from a finished run's own files.

    Reads ``summary.json``, ``boundaries.json`` and the figures ``summary.json``
    lists of the folder (as an ``analyse`` or ``planes`` run wrote them) and nothing else.

    Raises
    ------
    InputError
        A file is missing or unreadable.

    Examples
    --------
    >>> import tempfile
    >>> from inclination.io.job import job_from_dict
    >>> from inclination.io.writers import write_npz
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> a = run(job_from_dict(spec, base_dir=folder), stage="planes")
    >>> (folder / "out").mkdir()
    >>> _ = write_outputs(a, folder / "out")
    >>> (folder / "out" / "report.html").unlink()
    >>> [p.name for p in rebuild_report(folder / "out").files]
    ['report.html', 'report.md']
    """

    from .io.limits import read_json
    from .report.columns import BOUNDARY_COLUMNS
    from .report.document import write_report

    folder = Path(run_dir)
    if not folder.is_dir():
        raise InputError(
            "Expected the output folder of an earlier run, got no folder.", path=folder
        )
    docs = {}
    for name in ("summary.json", "boundaries.json"):
        path = folder / name
        if not os.path.lexists(path):
            raise InputError(
                "Expected the output folder of an analyse or planes run, got a folder "
                f"without {name}.",
                path=path,
            )
        docs[name] = read_json(path, kind="run")
        if not isinstance(docs[name], dict):
            raise InputError(f"Expected a JSON object, got {type(docs[name]).__name__}.", path=path)
    rows = docs["boundaries.json"].get("rows")
    if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows):
        raise InputError(
            "Expected a list of rows (objects), got none.",
            path=folder / "boundaries.json",
            pointer="/rows",
        )
    table = {}
    for c in BOUNDARY_COLUMNS:
        values = [r.get(c.name) for r in rows]
        table[c.name] = _run_column(values, c, folder / "boundaries.json")
    try:
        files = write_report(folder, docs["summary.json"], table)
    except (TypeError, KeyError, AttributeError, ValueError, IndexError) as exc:
        # An edited summary.json: its parts have the wrong types for the report.
        raise InputError(
            f"Expected summary.json as a run wrote it, got a part of the wrong type "
            f"({type(exc).__name__}).",
            path=folder / "summary.json",
        ) from None
    return RunResult(folder, tuple(files), (f"{folder}: report.html and report.md written",))


def _run_column(values: list, column, path) -> np.ndarray:
    """One column of an earlier run's boundaries.json, its types checked."""
    kinds = {"float": (int, float), "int": (int,), "str": (str,)}.get(column.kind, (str,))
    for i, v in enumerate(values):
        if v is not None and (not isinstance(v, kinds) or isinstance(v, bool)):
            raise InputError(
                f"Expected {column.name!r} to be {column.kind} or null, got {type(v).__name__}.",
                path=path,
                pointer=f"/rows/{i}/{column.name}",
            )
    if column.kind == "float":
        return np.array([np.nan if v is None else v for v in values], float)
    if column.kind == "int":
        ints = [-1 if v is None else v for v in values]
        if any(abs(v) > np.iinfo(np.int64).max for v in ints):
            raise InputError(
                f"Expected {column.name!r} to fit 64-bit integers, got a larger one.",
                path=path,
                pointer=f"/rows/*/{column.name}",
            )
        return np.array(ints, np.int64)
    return np.array(["" if v is None else v for v in values], dtype=object)


# ----------------------------------------------------------------------------- outputs


def write_outputs(
    analysis: Analysis,
    out_dir: str | os.PathLike,
    *,
    relocate: tuple[os.PathLike, os.PathLike] | None = None,
    progress: ProgressFactory | None = None,
) -> tuple[list[Path], dict]:
    """Write every table, figure and the report of ``analysis`` into ``out_dir``.

    Values are written in the map's declared axes (conventions §2); ``out_dir`` must
    exist (:func:`analyse` stages it). ``relocate = (staging, final)`` writes paths
    under the staging folder as they will be once it is moved into place.

    Returns
    -------
    files : list of Path
    summary : dict
        What ``summary.json`` holds.

    Examples
    --------
    >>> import tempfile
    >>> from inclination.io.job import job_from_dict
    >>> from inclination.io.writers import write_npz
    >>> folder = Path(tempfile.mkdtemp())
    >>> euler = np.zeros((20, 20, 3)); euler[:, 10:, 0] = 40.0  # two grains, 40° about Z
    >>> _ = write_npz(folder / "m.npz", OrientationMap.from_euler_deg(
    ...     euler, np.ones((20, 20), int), grid="square", step_x_um=1.0))
    >>> spec = {"phases": [{"id": 1, "name": "Cu", "laue": "m-3m", "lattice": {
    ...     "a": 3.6, "b": 3.6, "c": 3.6, "alpha": 90, "beta": 90, "gamma": 90}}],
    ...     "map": {"path": "m.npz", "format": "npz", "step_um": 1, "grid": "square",
    ...             "angles": "deg", "axes": {"x": "right", "y": "down"}}}
    >>> (folder / "out").mkdir()
    >>> files, summary = write_outputs(run(job_from_dict(spec, base_dir=folder)), folder / "out")
    >>> sorted(p.name for p in files if p.suffix == ".csv"), summary["stage"]
    (['boundaries.csv', 'grains.csv', 'segments.csv'], 'sections')
    """
    from .report import outputs

    files, summary = outputs.write_all(
        analysis,
        Path(out_dir),
        summary_base=_summary_base(analysis),
        relocate=relocate,
        progress=progress,
    )
    if analysis.audit is not None:
        from .report.atomic import write_json_atomic

        files = [*files, write_json_atomic(Path(out_dir) / "audit.json", analysis.audit.as_dict())]
    return files, summary


def _summary_base(analysis: Analysis) -> dict:
    job = analysis.job
    omap = analysis.omap
    return {
        "schema_version": SUMMARY_VERSION,
        "title": "Boundary planes",
        "tool": {
            "name": "inclination",
            "version": __version__,
            "python": platform.python_version(),
            "numpy": np.__version__,
        },
        "conventions": {
            "sample_frame": "X right, Y down, Z into the material (conventions §2)",
            "declared_axes": omap.axes.as_dict(),
            "reported_in": "declared axes; angles from +x toward +y",
            "euler": "Bunge (phi1, Phi, phi2), passive, degrees",
            "trace_angle_range_deg": [0, 180],
            "azimuth_range_deg": [0, 360],
            "dip": "0 = parallel to the surface, 90 = vertical",
        },
        "job": job.raw,
        "provenance": {
            "job_file": job.source_path,
            "map": dict(omap.provenance),
        },
        "stage": analysis.stage,
    } | _audit_summary(analysis)


def _audit_summary(analysis: Analysis) -> dict:
    """summary.json's ``frame_audit`` when the declared frame is not best beyond doubt."""
    a = analysis.audit
    if a is None or a.declared_is_best is True:
        return {}
    return {
        "frame_audit": {
            "declared_is_best": a.declared_is_best,
            "sentence": a.sentence(),
            "warning": (
                "The analysis ran in the frame as declared; the frame audit finds that "
                "frame doubtful. Apply the job patch and run again."
                if a.declared_is_best is False
                else "The frame audit could not confirm the declared frame."
            ),
            "job_patch": a.job_patch,
            "best": a.best_hypothesis.describe(),
        }
    }


# ----------------------------------------------------------------------------- stereology


def _stereology_outputs(analysis: Analysis, out_dir, *, standalone: bool) -> list:
    """The job's stereology block on the surface traces: files written (none without it)."""
    if "stereology" not in analysis.job.raw or analysis.segments is None:
        return []
    from .stereology.outputs import run_from_job, write_stereology

    results, settings = run_from_job(analysis.job, analysis.segments, analysis.grain_map.grains)
    return write_stereology(
        results, analysis.job.phases, Path(out_dir), settings=settings, standalone=standalone
    )


def stereology(job_path, out_dir, *, overwrite: bool = False, progress=None) -> RunResult:
    """Grains and traces of the job's surface map, then only the plane distribution.

    Writes ``plane_distribution.json``, the stereograms and ``stereology.md``/``.html``;
    the job's ``stereology`` block may be absent (its defaults are then used).
    """
    from .io.job import load_job
    from .report.atomic import staged_output_dir

    job = load_job(job_path)
    if "stereology" not in job.raw:
        from .io.job import job_from_dict

        job = job_from_dict(
            {**job.raw, "stereology": {}}, base_dir=job.base_dir, path_for_errors=job.source_path
        )
    out = Path(out_dir)
    lines: list = []
    with staged_output_dir(
        out, overwrite=overwrite, inputs=input_files(job), notes=lines
    ) as stage_dir:
        analysis = run(job, stage="traces", progress=progress)
        files = _stereology_outputs(analysis, stage_dir, standalone=True)
    lines.append(f"{out}: plane_distribution.json and {len(files) - 3} stereogram files")
    return RunResult(out, tuple(out / Path(f).name for f in files), tuple(lines))
