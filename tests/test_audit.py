"""The frame audit (inclination.audit) on synthetic maps written under each frame error."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from inclination import synthetic
from inclination.audit import RELATIONS, audit_frame, relation_quat, turn_fit
from inclination.crystal.lattice import plane_normals_crystal
from inclination.crystal.phases import Phase
from inclination.crystal.rotations import quat_as_matrix, quat_from_axis_angle_deg, random_quat
from inclination.errors import SettingError
from inclination.frames import DeclaredAxes, orientations_to_declared, orientations_to_sample
from inclination.grains import segment_grains
from inclination.maps import OrientationMap
from inclination.network import boundary_network
from inclination.traces import fit_segments

_CUBIC = {"a": 3.615, "b": 3.615, "c": 3.615, "alpha": 90, "beta": 90, "gamma": 90}
CU = Phase.from_dict({"id": 1, "name": "Cu", "laue": "m-3m", "lattice": _CUBIC})
# Titanium, a = 2.951 Å, c = 4.684 Å (from memory; as in the csl tests).
_HEX = {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90, "gamma": 120}
STEP_UM = 0.5


def _phase(setting):
    return Phase.from_dict(
        {"id": 1, "name": "Ti", "laue": "6/mmm", "setting": setting, "lattice": _HEX}
    )


def _sample(phase, *, twins=10, seed=3):
    micro = synthetic.make_microstructure(
        box_um=(100.0, 100.0, 30.0), n_grains=50, rng=seed, phases=[phase], twins=twins
    )
    return synthetic.sample_map(micro, step_um=STEP_UM, rng=seed + 100, noise_deg=0.5)


def _audit(omap, phase):
    grains = segment_grains(omap, [phase])
    segments = fit_segments(boundary_network(omap, grains, [phase]), step_um=STEP_UM)
    return audit_frame(segments, grains.grains, {1: phase}, axes=DeclaredAxes())


@pytest.fixture(scope="module")
def cubic_sample():
    return _sample(CU)


def test_correct_map_gives_an_empty_patch(cubic_sample):
    audit = _audit(synthetic.as_orientation_map(cubic_sample), CU)
    assert audit.declared_is_best is True
    assert audit.patch_is_empty
    assert audit.best_hypothesis.fit.n_voters >= 5


@pytest.mark.parametrize("relation", [r for r in RELATIONS if r not in ("identity", "z180")])
def test_each_in_plane_relation_is_found(cubic_sample, relation):
    # recorded_in_frame(Q) writes the data in a frame turned by Q, which the job should
    # declare as its data_frame_rotation (synthetic.sampling docstring).
    recorded = synthetic.recorded_in_frame(cubic_sample, rotation=relation_quat(relation))
    audit = _audit(synthetic.as_orientation_map(recorded), CU)
    best = audit.best_hypothesis
    assert audit.declared_is_best is False
    # Without sections a relation and its 180° partner about z fit the traces alike.
    assert best.relation in (relation, RELATIONS[relation][1])
    assert "data_frame_rotation" in audit.job_patch["map"]
    assert "cannot tell" in audit.sentence()


def test_turn_180_alone_is_left_to_the_sections(cubic_sample):
    recorded = synthetic.recorded_in_frame(cubic_sample, rotation="z180")
    audit = _audit(synthetic.as_orientation_map(recorded), CU)
    # Traces cannot tell z180 from the declared frame (conventions §6).
    assert audit.best_hypothesis.relation == "identity"
    assert audit.settled_by == "traces only"


def test_three_degree_misalignment_is_recovered(cubic_sample):
    recorded = synthetic.recorded_in_frame(
        cubic_sample, rotation=quat_from_axis_angle_deg([0.0, 0.0, 1.0], 3.0)
    )
    audit = _audit(synthetic.as_orientation_map(recorded), CU)
    assert audit.declared_is_best is False and audit.turn_applied
    assert abs(audit.turn_deg - 3.0) < 0.3
    spec = audit.job_patch["map"]["data_frame_rotation"]
    assert_allclose(spec["axis"], [0.0, 0.0, 1.0], rtol=0, atol=1e-9)
    assert abs(spec["angle_deg"] - 3.0) < 0.3


def test_inverse_rotations_are_found(cubic_sample):
    omap = synthetic.as_orientation_map(cubic_sample)
    stored = np.array(omap.quat, dtype=float)
    stored[..., 1:] *= -1.0  # the crystal-to-sample rotation: the inverse
    inverse = OrientationMap(
        stored, omap.phase, grid="square", step_x_um=STEP_UM, step_y_um=STEP_UM
    )
    audit = _audit(inverse, CU)
    assert audit.declared_is_best is False
    assert audit.job_patch["map"] == {"rotation_sense": "active"}


def test_active_sense_is_scipy_inverse():
    # scipy's Rotation.inv() is the reference for the inverse rotation.
    q = random_quat(20, rng=5)
    out = orientations_to_sample(q, DeclaredAxes(), rotation_sense="active")
    inv = Rotation.from_quat(q[:, [1, 2, 3, 0]]).inv().as_quat()[:, [3, 0, 1, 2]]
    assert_allclose(quat_as_matrix(out), quat_as_matrix(inv), rtol=0, atol=1e-12)
    back = orientations_to_declared(out, DeclaredAxes(), rotation_sense="active")
    assert_allclose(quat_as_matrix(back), quat_as_matrix(q), rtol=0, atol=1e-12)


def test_hexagonal_settings_differ_by_the_a_to_a_star_angle():
    # X_C ∥ a against X_C ∥ a*: 30° about c for a hexagonal cell (conventions §4).
    n_a = plane_normals_crystal(_phase("x_parallel_a").lattice, [[1, 0, -1, 0]])[0]
    n_star = plane_normals_crystal(_phase("x_parallel_a_star").lattice, [[1, 0, -1, 0]])[0]
    assert_allclose(np.rad2deg(np.arccos(n_a @ n_star)), 30.0, rtol=0, atol=1e-9)


# Corundum, a = 4.759 Å, c = 12.992 Å, Laue -3m (from memory); it twins on {1 0 -1 2}.
_TRIGONAL = {"a": 4.759, "b": 4.759, "c": 12.992, "alpha": 90, "beta": 90, "gamma": 120}


def _trigonal(setting):
    return Phase.from_dict(
        {
            "id": 1,
            "name": "corundum",
            "laue": "-3m",
            "setting": setting,
            "lattice": _TRIGONAL,
            "families": ["{1 0 -1 2}", "{0 0 0 1}"],
        }
    )


@pytest.mark.parametrize(
    ("make", "min_voters"),
    # Hexagonal: the tabulated twins. Trigonal: the reflection twin on each declared K1 is
    # the half turn about its normal (from memory); it must vote.
    [(_phase, 0), (_trigonal, 5)],
    ids=["hexagonal", "trigonal"],
)
def test_wrong_cartesian_setting_is_found(make, min_voters):
    sample = _sample(make("x_parallel_a"))
    audit = _audit(synthetic.as_orientation_map(sample), make("x_parallel_a_star"))
    assert audit.declared_is_best is False
    assert audit.job_patch["phases"] == {"1": {"setting": "x_parallel_a"}}
    assert audit.job_patch["map"] == {}
    assert audit.best_hypothesis.fit.n_voters >= min_voters


def test_trigonal_half_turns_that_are_symmetries_do_not_vote():
    from inclination.crystal.symmetry import disorientation_angle_deg

    # In -3m the half turns about the <1 1 -2 0> or <1 0 -1 0> normals (by setting) are
    # two-fold axes of the class (International Tables, point group -3m; from memory).
    for setting in ("x_parallel_a", "x_parallel_a_star"):
        phase = Phase.from_dict(
            {
                "id": 1,
                "name": "corundum",
                "laue": "-3m",
                "setting": setting,
                "lattice": _TRIGONAL,
                "families": ["{1 1 -2 0}", "{1 0 -1 0}"],
            }
        )
        normals = plane_normals_crystal(phase.lattice, [[1, 1, -2, 0], [1, 0, -1, 0]])
        half = quat_from_axis_angle_deg(normals, np.full(2, 180.0))
        angles = disorientation_angle_deg(np.array([1.0, 0, 0, 0]), half, "-3m", setting=setting)
        assert min(angles) < 1e-6 and max(angles) > 59.0


def test_two_twin_boundaries_are_undecided():
    sample = _sample(CU, twins=1, seed=4)
    audit = _audit(synthetic.as_orientation_map(sample), CU)
    assert audit.declared_is_best == "undecided"
    assert "at least 5" in audit.reason
    assert audit.patch_is_empty


def test_turn_sigma_is_calibrated():
    # Simulation: deviations about a known turn with 20 % outliers; the z-scores of the
    # fitted turn must have unit spread.
    gen = np.random.default_rng(11)
    z = []
    for _ in range(300):
        n = 30
        sigma = gen.uniform(0.5, 2.0, n)
        d = 1.5 + gen.normal(0.0, sigma)
        wild = gen.random(n) < 0.2
        d[wild] = gen.uniform(-90.0, 90.0, wild.sum())
        fit = turn_fit(d, sigma)
        z.append((fit.turn_deg - 1.5) / fit.turn_sigma_deg)
    assert 0.85 < np.std(z) < 1.15
    assert abs(np.mean(z)) < 0.15


def test_turn_fit_without_voters():
    fit = turn_fit([], [])
    assert fit.n_voters == 0 and np.isnan(fit.turn_deg) and fit.log_likelihood == 0.0


def test_unknown_relation_and_sense_raise():
    with pytest.raises(SettingError, match="Expected a relation"):
        relation_quat("z45")
    with pytest.raises(SettingError, match="rotation_sense"):
        audit_frame({}, {}, {}, axes=DeclaredAxes(), rotation_sense="sideways")
    with pytest.raises(ValueError, match="rotation_sense"):
        orientations_to_sample([1.0, 0, 0, 0], DeclaredAxes(), rotation_sense="sideways")
