"""The demo scenario: an invented annealed austenitic-steel coupon, mapped and sectioned.

Coupon LK-7 of the invented Larkspur Metallurgy Works: an austenitic (FCC) steel
annealed so that many grains hold straight annealing-twin lamellae. The study asks
which straight boundaries are coherent {111} twins, which way each dips, and whether
the orientation data's frame is right. The sample is synthetic
(:mod:`inclination.synthetic`), so every answer is known and written to
``truth.json``.

Files written (all in the map's declared axes x right, y down, identical to the
sample frame S of conventions §2):

- ``surface.npz``: the surface map, step 0.5 µm, square grid, 0.5° noise, 1 %
  non-indexed points, a few mis-indexed clusters;
- ``serial_5um.npz``: the same area after removing 5 µm (§8);
- ``face_a.tif``, ``face_b.tif``: the face images of the two cross-sections (§7),
  rendered by :func:`inclination.synthetic.render_face_image` (imaging tilt 52°,
  0.1 µm pixels, every grain at its own grey level, a bright cap, dark trench walls,
  blur and noise); the tool measures the boundaries on them;
- ``job.json``: phases, map, grain and trace settings, the two cross-sections (each
  an ``image`` entry: path, pixel size, start pixel) and the serial section;
- ``surface_z180.npz``, ``serial_5um_z180.npz``, ``job_z180.json``: the same
  sample recorded by an instrument whose data frame is turned 180° about Z_S (§6),
  the job unaware of it: traces agree, every predicted dip direction is reversed;
- ``surface_z90.npz``, ``serial_5um_z90.npz``, ``job_z90.json``: the same sample
  exported with its orientation axes turned 90° about the surface normal, the job
  unaware of it: the frame audit (inclination.audit) must find it and give the patch;
- the job files also carry a ``features`` block: slip traces drawn in grains of a strained
  region (the right half of the map, invented: a tensile load along x), each on the {111}
  plane with the highest Schmid factor (:mod:`inclination.synthetic.slip_traces`);
- ``truth.json``: every grain and boundary plane, the boundaries each map shows,
  each cross-section's true crossings, and what each job should find.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np

from .crystal.phases import Phase
from .io.writers import write_npz
from .report.atomic import write_bytes_atomic, write_json_atomic
from .synthetic import (
    Microstructure,
    SampledMap,
    as_orientation_map,
    cross_section_crossings,
    ground_truth,
    make_microstructure,
    recorded_in_frame,
    render_face_image,
    sample_map,
)

__all__ = ["DEMO_SEED", "write_demo_scenario"]

#: Seed of the demo sample (the command line's default too).
DEMO_SEED = 7

# Lattice parameter of an austenitic steel, a ≈ 3.59 Å (from memory).
_AUSTENITE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}", "{1 1 2}"],
}
_BOX_UM = (200.0, 150.0, 30.0)
_STEP_UM = 0.5
_SERIAL_DEPTH_UM = 5.0
_TILT_DEG = 52.0
# The face images (invented microscope settings): 0.1 µm pixels, 4 µm of face shown,
# noise SD 0.02 of the grey range, as the synthetic face-image tests use.
_FACE_PIXEL_UM = 0.1
_FACE_DEPTH_UM = 4.0
_FACE_NOISE_SD = 0.02


def _trench_lines(micro: Microstructure, surface: SampledMap) -> tuple[dict, dict]:
    """Two section lines placed, as an experimenter would, across twinned grains.

    One runs along x and is viewed from +y, the other along y viewed from -x, so both
    image-right senses of §7 occur. Each goes through the map row (column) that crosses
    the most twin lamellae.
    """
    is_twin = surface.grain_id > micro.n_grains
    twin_ids = np.where(is_twin, surface.grain_id, 0)
    margin = int(round(10.0 / surface.step_um))

    def best(lines):
        counts = [len(np.unique(line[line > 0])) for line in lines[margin:-margin]]
        return margin + int(np.argmax(counts))

    row, col = best(twin_ids), best(twin_ids.T)
    y, x = float(surface.y_um[row, 0]), float(surface.x_um[0, col])
    lx, ly = float(surface.x_um.max()), float(surface.y_um.max())
    return (
        {
            "name": "trench A",
            "key": "a",
            "line_um": ((10.0, y), (lx - 10.0, y)),
            "viewer_at_um": (lx / 2, y + 6),
        },
        {
            "name": "trench B",
            "key": "b",
            "line_um": ((x, 10.0), (x, ly - 10.0)),
            "viewer_at_um": (x - 7, ly / 2),
        },
    )


def _write_face_tiff(path: Path, image: np.ndarray) -> Path:
    # 16-bit greyscale, as a microscope exports it; read back by sections.read_face_image.
    import tifffile

    buf = io.BytesIO()
    tifffile.imwrite(buf, np.round(np.clip(image, 0.0, 1.0) * 65535).astype(np.uint16))
    return write_bytes_atomic(path, buf.getvalue())


def _map_entry(path: str) -> dict:
    return {
        "path": path,
        "format": "npz",
        "angles": "deg",
        "step_um": _STEP_UM,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
    }


def _write_npz(path: Path, sample: SampledMap) -> Path:
    # The map module's own writer (euler_deg (H, W, 3), phase (H, W), 0 = not indexed),
    # so the demo's maps are exactly what its reader takes; the declared axes are S itself.
    return write_npz(path, as_orientation_map(sample))


def _job(surface: str, serial: str, cross_sections: list[dict], description: str) -> dict:
    return {
        "schema_version": 1,
        "description": description,
        "phases": [_AUSTENITE],
        "map": _map_entry(surface),
        "grains": {"threshold_deg": 5, "min_pixels": 8},
        "traces": {"min_length_um": 5, "tolerance_um": 0.75},
        "sections": [
            *cross_sections,
            {
                "kind": "serial",
                "name": "layer removed: 5 µm",
                "map": _map_entry(serial),
                "depth_um": _SERIAL_DEPTH_UM,
            },
        ],
    }


def write_demo_scenario(out_dir: str | os.PathLike, *, seed: int = DEMO_SEED) -> dict[str, Path]:
    """Build the demo sample and write its maps, job files and truth into ``out_dir``.

    Each file is written whole or not at all (temporary name, then rename); existing
    files of the same names are replaced. The folder is created if needed.

    Parameters
    ----------
    out_dir : str or os.PathLike
    seed : int
        Seed of the sample, its noise and its measurements.

    Returns
    -------
    dict of str to Path
        ``surface``, ``serial``, ``job``, ``surface_z180``, ``serial_z180``,
        ``job_z180``, ``truth``, ``surface_z90``, ``serial_z90``, ``job_z90``,
        ``survey``, ``job_survey``, ``face_a``, ``face_b``.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     paths = write_demo_scenario(folder)
    >>> sorted(paths)  # doctest: +NORMALIZE_WHITESPACE
    ['face_a', 'face_b', 'job', 'job_survey', 'job_z180', 'job_z90', 'serial', 'serial_z180',
     'serial_z90', 'surface', 'surface_z180', 'surface_z90', 'survey', 'truth']
    """
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer):
        raise TypeError(f"Expected `seed` to be an integer, got {type(seed).__name__}.")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    gen = np.random.default_rng(seed)
    micro = make_microstructure(
        box_um=_BOX_UM,
        n_grains=110,
        rng=gen,
        phases=[Phase.from_dict(_AUSTENITE)],
        twins=14,
        twin_thickness_um=(2.0, 5.0),
    )
    options = {"step_um": _STEP_UM, "noise_deg": 0.5, "nonindexed_fraction": 0.01}
    surface = sample_map(micro, rng=gen, misindexed_clusters=3, **options)
    serial = sample_map(micro, rng=gen, depth_um=_SERIAL_DEPTH_UM, **options)

    sections, section_truth, faces = [], [], {}
    for spec in _trench_lines(micro, surface):
        geometry = {
            "line_um": spec["line_um"],
            "viewer_at_um": spec["viewer_at_um"],
            "imaging_tilt_deg": _TILT_DEG,
            "max_depth_um": 3.0,
        }
        # The face as the microscope shows it (conventions §7): grains at their own grey
        # levels, bright cap, dark trench walls, blur and noise; the tool measures it.
        face = render_face_image(
            micro,
            line_um=spec["line_um"],
            viewer_at_um=spec["viewer_at_um"],
            imaging_tilt_deg=_TILT_DEG,
            pixel_um=_FACE_PIXEL_UM,
            depth_um=_FACE_DEPTH_UM,
            rng=gen,
            noise_sd=_FACE_NOISE_SD,
        )
        image_name = f"face_{spec['key']}.tif"
        faces[f"face_{spec['key']}"] = _write_face_tiff(out / image_name, face.image)
        sections.append(
            {
                "kind": "cross-section",
                "name": spec["name"],
                "line_um": [list(p) for p in spec["line_um"]],
                "viewer_at_um": list(spec["viewer_at_um"]),
                "imaging_tilt_deg": _TILT_DEG,
                "image": {
                    "path": image_name,
                    "pixel_um": _FACE_PIXEL_UM,
                    "line_start_px": [round(v, 3) for v in face.line_start_px],
                },
            }
        )
        table = cross_section_crossings(micro, **geometry)
        grey = face.grey_by_region
        section_truth.append(
            {
                "name": spec["name"],
                "image": image_name,
                "noise_sd": _FACE_NOISE_SD,
                "crossings": [
                    {
                        "along_um": float(table["along_um"][i]),
                        "grains": [int(table["region_a"][i]), int(table["region_b"][i])],
                        "is_twin": bool(table["is_twin"][i]),
                        "dip_deg": float(table["dip_deg"][i]),
                        "beta_deg": float(table["beta_deg"][i]),
                        "image_angle_deg": float(table["image_angle_deg"][i]),
                        "descends": str(table["descends"][i]),
                        # The grey step the image shows across it, in noise SDs.
                        "contrast": float(
                            abs(grey[table["region_a"][i]] - grey[table["region_b"][i]])
                            / _FACE_NOISE_SD
                        ),
                    }
                    for i in range(len(table["along_um"]))
                ],
            }
        )

    paths = {
        **faces,
        "surface": _write_npz(out / "surface.npz", surface),
        "serial": _write_npz(out / "serial_5um.npz", serial),
        "surface_z180": _write_npz(
            out / "surface_z180.npz", recorded_in_frame(surface, rotation="z180")
        ),
        "serial_z180": _write_npz(
            out / "serial_5um_z180.npz", recorded_in_frame(serial, rotation="z180")
        ),
    }
    story = (
        "Coupon LK-7, annealed austenitic steel (invented; synthetic sample, seed "
        f"{seed}): which straight boundaries are coherent {{111}} twins, which way do they dip"
    )
    features, feature_truth = _slip_features(micro, surface, seed)
    paths["job"] = write_json_atomic(
        out / "job.json",
        _with_features(
            _job("surface.npz", "serial_5um.npz", sections, story + ", and is the frame right?"),
            features,
        ),
    )
    paths["job_z180"] = write_json_atomic(
        out / "job_z180.json",
        _with_features(
            _job(
                "surface_z180.npz",
                "serial_5um_z180.npz",
                sections,
                story + "; maps exported in a frame turned 180° about the surface normal.",
            ),
            features,
        ),
    )
    truth = ground_truth(micro, maps={"surface": surface, "serial_5um": serial})
    truth["scenario"] = {
        "seed": seed,
        "cross_sections": section_truth,
        "cases": {
            "job.json": {"data_frame": "sample frame", "expected_sense": "agrees"},
            "job_z180.json": {
                "data_frame": "turned 180° about Z_S (conventions §6)",
                "expected_sense": "opposite",
            },
        },
    }
    truth["scenario"]["features"] = feature_truth
    paths.update(_turned_axes_case(out, surface, serial, sections, features, story))
    truth["scenario"]["cases"]["job_z90.json"] = {
        "data_frame": "turned 90° about Z_S (conventions §3)",
        "expected_audit": {"declared_is_best": False, "job_patch": {"data_frame_rotation": "z90"}},
    }
    paths.update(_survey_case(out, seed))
    truth["scenario"]["cases"]["job_survey.json"] = {
        "data_frame": "sample frame",
        "sample": (
            f"a larger area of the same coupon (invented): {_SURVEY_BOX_UM[0]:.0f} × "
            f"{_SURVEY_BOX_UM[1]:.0f} µm at {_SURVEY_STEP_UM} µm, {_SURVEY_GRAINS} grains, "
            f"{_SURVEY_TWINS} twinned; map only, for the plane distribution"
        ),
        "expected_peak": {"all": "(1 1 1)", "sigma3": "(1 1 1)"},
    }
    paths["truth"] = write_json_atomic(out / "truth.json", truth)
    return paths


# The fourth case (invented): a survey map of a larger area of the coupon, map only, with
# enough traces for the plane distribution (conventions §4 crystal frame): the stereology
# needs thousands of traces overall and over a thousand in the Σ3 class.
_SURVEY_BOX_UM = (500.0, 500.0, 20.0)
_SURVEY_STEP_UM = 1.0
_SURVEY_GRAINS = 900
_SURVEY_TWINS = 340


def _survey_case(out: Path, seed: int) -> dict[str, Path]:
    """The fourth case: a larger survey map and a job with a ``stereology`` block."""
    gen = np.random.default_rng([seed, 4])
    micro = make_microstructure(
        box_um=_SURVEY_BOX_UM,
        n_grains=_SURVEY_GRAINS,
        rng=gen,
        phases=[Phase.from_dict(_AUSTENITE)],
        twins=_SURVEY_TWINS,
        twin_thickness_um=(2.0, 5.0),
    )
    survey = sample_map(
        micro, rng=gen, step_um=_SURVEY_STEP_UM, noise_deg=0.5, nonindexed_fraction=0.01
    )
    paths = {"survey": _write_npz(out / "survey.npz", survey)}
    paths["job_survey"] = write_json_atomic(
        out / "job_survey.json",
        {
            "schema_version": 1,
            "description": (
                "Coupon LK-7 (invented; synthetic sample): survey map of a 500 × 500 µm area "
                "at 1 µm steps; which planes do the boundaries favour, overall and for Σ3?"
            ),
            "phases": [_AUSTENITE],
            "map": {**_map_entry("survey.npz"), "step_um": _SURVEY_STEP_UM},
            "grains": {"threshold_deg": 5, "min_pixels": 8},
            "traces": {"min_length_um": 5, "tolerance_um": 1.5},
            "stereology": {"classes": ["all", "sigma3"]},
        },
    )
    return paths


def _turned_axes_case(out, surface, serial, sections, features, story):
    """The third case: maps exported with their axes turned 90° about Z, the job unaware."""
    from .frames import data_frame_quat

    turn = data_frame_quat("z90")
    paths = {
        "surface_z90": _write_npz(
            out / "surface_z90.npz", recorded_in_frame(surface, rotation=turn)
        ),
        "serial_z90": _write_npz(
            out / "serial_5um_z90.npz", recorded_in_frame(serial, rotation=turn)
        ),
    }
    paths["job_z90"] = write_json_atomic(
        out / "job_z90.json",
        _with_features(
            _job(
                "surface_z90.npz",
                "serial_5um_z90.npz",
                sections,
                story + "; maps exported with their axes turned 90° about the surface normal.",
            ),
            features,
        ),
    )
    return paths


# The strained region of the demo (invented): the right half of the coupon, pulled along x.
_STRAINED_REGION_UM = (100.0, 0.0, 200.0, 150.0)
_LOAD = [1.0, 0.0, 0.0]


def _slip_features(micro, surface, seed):
    """Slip traces in the strained region, on each grain's most favoured {111} plane.

    Their own random stream (seeded from ``seed``), so the rest of the scenario is
    unchanged by them.
    """
    from .crystal.phases import Phase
    from .crystal.slip import slip_systems
    from .synthetic.slip_traces import slip_traces

    systems = slip_systems(Phase.from_dict(_AUSTENITE), ["fcc"])
    entries, truth = slip_traces(
        micro,
        surface,
        systems,
        rng=np.random.default_rng([seed, 19]),
        n_traces=8,
        noise_deg=0.3,
        load_sample=_LOAD,
        choice="highest_schmid",
        region_um=_STRAINED_REGION_UM,
    )
    features = {"loading_direction": _LOAD, "traces": entries}
    return features, {"strained_region_um": list(_STRAINED_REGION_UM), "traces": truth}


def _with_features(job: dict, features: dict) -> dict:
    return {**job, "phases": [{**_AUSTENITE, "slip_systems": ["fcc"]}], "features": features}
