"""Stereology of one section (inclination.stereology): grid, accumulation, background, σ.

Outside references: the accumulation of the traces of one plane is checked against the
great-circle geometry derived in the module docstring (derived from the geometry: no
worked example with numbers is published for it in Saylor et al. 2004 that we hold);
uniform planes must give 1 MRD; the bootstrap σ is checked against the scatter over
independent simulated sections; relabelling by symmetry must change nothing.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from jsonschema import Draft202012Validator
from numpy.testing import assert_allclose

from inclination.crystal.lattice import Lattice
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import quat_apply, quat_inverse, quat_multiply, random_quat
from inclination.crystal.symmetry import proper_rotations
from inclination.io.schemas import load_schema
from inclination.stereology import (
    HemisphereGrid,
    MisorientationClass,
    accumulation_kernel,
    plane_distribution,
    remove_background,
    zone_accumulation,
)
from inclination.stereology.outputs import distribution_document, write_stereology
from inclination.stereology.stereogram import project, unproject

CU = Phase(
    1,
    "Cu",
    "m-3m",
    Lattice.from_parameters(3.615, 3.615, 3.615, 90, 90, 90),
    ("{1 1 1}", "{1 0 0}", "{1 1 0}"),
)


def _uniform_tables(n_boundaries, *, per_boundary=2, rng, n_grains=400):
    """Traces of planes uniform in the crystal frame: random grains, random sections.

    Random orientations and random trace angles give crystal-frame trace directions that
    are uniform on the sphere, the traces of a random set of planes.
    """
    gen = np.random.default_rng(rng)
    grains = {
        "grain_id": np.arange(1, n_grains + 1),
        "phase": np.ones(n_grains, int),
        "quat": random_quat(n_grains, rng=gen),
    }
    pairs = gen.choice(n_grains, size=(n_boundaries, 2), replace=True)
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    rows = np.repeat(pairs, per_boundary, axis=0)
    n = len(rows)
    segments = {
        "grain_a": rows[:, 0] + 1,
        "grain_b": rows[:, 1] + 1,
        "trace_angle_deg": gen.uniform(0, 180, n),
        "length_um": gen.uniform(2, 20, n),
        "is_phase_boundary": np.zeros(n, bool),
    }
    return segments, grains


def test_grid_bins_are_equal_area_and_cover_the_hemisphere():
    grid = HemisphereGrid.from_resolution_deg(10.0)
    # Uniform points on the sphere fill equal-area bins equally (Archimedes: equal steps
    # of cos θ are equal areas); 2e6 points give a relative scatter of about 1.3 %.
    v = np.random.default_rng(0).normal(size=(2_000_000, 3))
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    counts = np.bincount(grid.bin_of(v), minlength=grid.n_bins)
    assert counts.size == grid.n_bins
    assert_allclose(counts / counts.mean(), 1.0, rtol=0, atol=0.07)
    assert_allclose(grid.solid_angle_sr * grid.n_bins, 2 * np.pi, rtol=1e-12, atol=0)
    centres = grid.centres_crystal()
    assert np.array_equal(grid.bin_of(centres), np.arange(grid.n_bins))


def test_one_plane_accumulates_as_meridians():
    # Derived from the geometry (module docstring of estimate): traces of a plane of normal
    # Z_C run in every direction of the plane, and their circles are the meridians through
    # Z_C, so ring i (i/n <= cos θ < (i+1)/n) holds the share (2/π)(asin u_hi − asin u_lo)
    # of every circle.
    grid = HemisphereGrid.from_resolution_deg(10.0)
    beta = np.linspace(0, np.pi, 400, endpoint=False)
    t = np.stack([np.cos(beta), np.sin(beta), 0 * beta], 1)
    total, _ = zone_accumulation(t, np.ones(len(t)), grid, proper_rotations("-1"))
    ring_share = total.reshape(grid.n_polar, -1).sum(axis=1) / total.sum()
    u = np.arange(grid.n_polar + 1) / grid.n_polar
    expected = (2 / np.pi) * np.diff(np.arcsin(u))
    assert_allclose(ring_share, expected, rtol=0, atol=0.004)


def test_self_fraction_matches_the_arc_of_a_ring_bin():
    # Derived from the geometry: a circle through the pole runs along a meridian, so for a
    # normal in the polar ring it keeps at least the arc from the normal to the ring's edge.
    grid = HemisphereGrid.from_resolution_deg(10.0)
    kernel = accumulation_kernel(grid)
    a = np.diag(kernel)
    assert a.shape == (grid.n_bins,)
    # Uniform planes accumulate to uniform (module docstring): rows sum to 1 as columns do.
    assert_allclose(kernel.sum(axis=0), 1.0, rtol=0, atol=1e-12)
    assert_allclose(kernel.sum(axis=1), 1.0, rtol=0, atol=0.01)
    assert np.all((a > 0.02) & (a < 0.08))
    # A 10° bin crossed along a random chord keeps roughly (π/4)·10°/180° of a half circle:
    # the mean chord of a convex cell is π·area/perimeter (Cauchy), about 0.8 bin widths.
    assert_allclose(a.mean(), np.pi / 4 * 10 / 180, rtol=0.3, atol=0)


def test_background_removal_reduces_to_the_subtraction_for_a_flat_background():
    # With F = a I + (1 - a) J / n (self share plus a random rest, Saylor et al. 2004) the
    # inverse is the subtraction 1 + (A - 1) / a, for any A of mean 1.
    n, a = 324, 0.045
    f = a * np.eye(n) + (1 - a) / n
    acc = 1.0 + np.random.default_rng(0).normal(0, 0.1, n)
    acc += 1.0 - acc.mean()
    assert_allclose(remove_background(acc, f), 1.0 + (acc - 1.0) / a, rtol=0, atol=1e-9)
    kernel = accumulation_kernel(HemisphereGrid.from_resolution_deg(15.0))
    assert_allclose(remove_background(np.ones(len(kernel)), kernel), 1.0, rtol=0, atol=1e-12)


def test_uniform_planes_give_one_mrd_within_the_bootstrap_band():
    segments, grains = _uniform_tables(1500, rng=3)
    (d,) = plane_distribution(segments, grains, [CU], min_traces=100, n_bootstrap=100, rng=1)
    z = (d.mrd - 1.0) / d.mrd_sigma
    # Bonferroni over 324 bins at 5 %: |z| < 3.6; 4 leaves room for a heavy tail.
    assert np.max(np.abs(z)) < 4.0
    assert abs(d.peak_mrd - 1.0) < 4.0 * d.peak_mrd_sigma


def test_bootstrap_sigma_matches_the_scatter_over_independent_sections():
    # Calibration by simulation: 12 independent samples of uniform planes; the bootstrap σ
    # of each bin against the spread of λ between samples.
    runs = [
        plane_distribution(
            *_uniform_tables(500, rng=100 + i),
            [CU],
            min_traces=100,
            n_bootstrap=60,
            rng=i,
            resolution_deg=15.0,
        )[0]
        for i in range(12)
    ]
    mrd = np.array([r.mrd for r in runs])
    sigma = np.array([r.mrd_sigma for r in runs])
    ratio = np.sqrt(np.mean(sigma**2)) / np.sqrt(np.mean(mrd.std(axis=0, ddof=1) ** 2))
    assert 0.8 < ratio < 1.25, ratio


def test_relabelling_grains_by_symmetry_changes_nothing():
    # Invariance under symmetry applied to either grain (style rule 16): g -> S g for a
    # proper rotation S of m-3m, independently per grain.
    segments, grains = _uniform_tables(150, rng=5)
    gen = np.random.default_rng(9)
    ops = proper_rotations("m-3m")[gen.integers(0, 24, len(grains["quat"]))]
    relabelled = {**grains, "quat": quat_multiply(ops, grains["quat"])}
    kw = {"classes": ("all", "sigma3"), "min_traces": 1, "n_bootstrap": 20, "rng": 4}
    for a, b in zip(
        plane_distribution(segments, grains, [CU], **kw),
        plane_distribution(segments, relabelled, [CU], **kw),
        strict=True,
    ):
        assert a.n_traces == b.n_traces
        assert_allclose(a.mrd, b.mrd, rtol=0, atol=1e-9)
        assert_allclose(a.mrd_sigma, b.mrd_sigma, rtol=0, atol=1e-6)


def test_single_twin_plane_peaks_at_111():
    # Traces of the (1 1 1) plane of random grains, both sides Σ3 twins of each other: the
    # estimate peaks within one bin of {1 1 1}.
    gen = np.random.default_rng(2)
    n = 1500
    parent = random_quat(n, rng=gen)
    n_c = np.array([1.0, 1.0, 1.0]) / np.sqrt(3)
    twin = quat_multiply(np.r_[0.0, n_c], parent)  # 180° about n_C, applied in C
    n_s = quat_apply(quat_inverse(parent), np.tile(n_c, (n, 1)))  # §5: n_S = gᵀ n_C
    keep = np.abs(n_s[:, 2]) < 0.95
    t = np.cross([0.0, 0.0, 1.0], n_s[keep])  # §5: t = Z_S × n_S
    m = int(keep.sum())
    grains = {
        "grain_id": np.arange(1, 2 * m + 1),
        "phase": np.ones(2 * m, int),
        "quat": np.concatenate([parent[keep], twin[keep]]),
    }
    segments = {
        "grain_a": np.arange(1, m + 1),
        "grain_b": np.arange(m + 1, 2 * m + 1),
        "trace_angle_deg": np.rad2deg(np.arctan2(t[:, 1], t[:, 0])) % 180,
        "length_um": np.ones(m),
        "is_phase_boundary": np.zeros(m, bool),
    }
    (d,) = plane_distribution(
        segments, grains, [CU], classes=("sigma3",), min_traces=100, n_bootstrap=20, rng=0
    )
    assert d.n_traces == m
    assert d.peak_indices == "(1 1 1)"
    assert d.peak_offset_deg <= d.grid.resolution_deg


def test_classes_and_settings_are_checked():
    with pytest.raises(ValueError, match="misorientation class"):
        MisorientationClass.from_spec("twins")
    with pytest.raises(ValueError, match="odd"):
        MisorientationClass.from_spec("sigma4")
    segments, grains = _uniform_tables(20, rng=1)
    with pytest.raises(ValueError, match="weighting"):
        plane_distribution(segments, grains, [CU], weighting="area")
    with pytest.raises(ValueError, match="n_bootstrap"):
        plane_distribution(segments, grains, [CU], n_bootstrap=1)
    with pytest.raises(ValueError, match="min_traces"):
        plane_distribution(segments, grains, [CU], min_traces=0)
    with pytest.raises(ValueError, match="resolution_deg"):
        plane_distribution(segments, grains, [CU], resolution_deg=0.5)


def test_too_few_traces_give_a_note_and_no_distribution():
    segments, grains = _uniform_tables(20, rng=1)
    (d,) = plane_distribution(segments, grains, [CU], min_traces=1000, n_bootstrap=5)
    assert d.mrd is None and "fewer than the 1000" in d.note


def test_axis_angle_class_selects_twins_like_sigma3():
    segments, grains = _uniform_tables(60, rng=7)
    spec = {"axis": [1, 1, 1], "angle_deg": 60.0, "tolerance_deg": 8.66}
    a, b = plane_distribution(
        segments, grains, [CU], classes=("sigma3", spec), min_traces=1, n_bootstrap=5, rng=0
    )
    # Brandon's limit for Σ3 is 15°/√3 = 8.66° (Brandon 1966): the two classes coincide.
    assert a.n_traces == b.n_traces


def test_projections_round_trip_and_put_the_equator_on_the_unit_circle():
    v = np.random.default_rng(1).normal(size=(50, 3))
    v[:, 2] = np.abs(v[:, 2])
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    for projection in ("stereographic", "equal-area"):
        assert_allclose(unproject(project(v, projection), projection), v, rtol=0, atol=1e-12)
        eq = project([[np.cos(0.3), np.sin(0.3), 0.0]], projection)
        assert_allclose(np.hypot(*eq[0]), 1.0, rtol=0, atol=1e-12)
    with pytest.raises(ValueError, match="projection"):
        project(v, "polar")


def test_written_document_follows_its_schema(tmp_path):
    segments, grains = _uniform_tables(300, rng=2)
    results = plane_distribution(
        segments, grains, [CU], classes=("all", "sigma3"), min_traces=50, n_bootstrap=10, rng=0
    )
    settings = {"projection": "equal-area", "weighting": "length", "both_sides": True}
    files = write_stereology(results, [CU], tmp_path, settings=settings, standalone=True)
    doc = json.loads((tmp_path / "plane_distribution.json").read_text())
    Draft202012Validator(load_schema("plane_distribution.schema.json")).validate(doc)
    assert doc == json.loads(json.dumps(distribution_document(results, settings=settings)))
    assert (tmp_path / "stereogram_phase1_all.svg").exists()
    assert (tmp_path / "stereogram_phase1_all.png").exists()
    assert "never gives the plane of any one boundary" in (tmp_path / "stereology.md").read_text()
    assert len(files) >= 3
