"""Section geometry against published worked values and textbook formulas (conventions §7–§8)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation
from scipy.stats import vonmises

from inclination.compare import boundary_sense
from inclination.sections import (
    VICKERS_DEPTH_FACTOR,
    apparent_dip_deg,
    depth_from_indent_um,
    face_angle_from_image_deg,
    image_right_sample,
    serial_dip_deg,
    serial_dip_sigma_deg,
    true_dip_from_apparent_deg,
)


@pytest.mark.parametrize(
    ("beta_deg", "expected_deg"),
    # Apparent-dip relation, tan α = tan δ sin β, worked for δ = 60° (Ragan, Structural
    # Geology: An Introduction to Geometrical Techniques, apparent-dip chapter).
    [(45.0, 50.768), (30.0, 40.893), (10.0, 16.740)],
)
def test_apparent_dip_matches_ragan_worked_values(beta_deg, expected_deg):
    assert_allclose(apparent_dip_deg(60.0, beta_deg), expected_deg, rtol=0, atol=5e-4)
    assert_allclose(true_dip_from_apparent_deg(expected_deg, beta_deg), 60.0, rtol=0, atol=2e-3)


def test_tilt_correction_at_52_degrees():
    # A face imaged at 52° tilt: tan α_face = tan α_image / sin 52° (the usual
    # FIB-SEM foreshortening, depth factor 1/sin 52° = 1.26902; hand-computed).
    assert_allclose(face_angle_from_image_deg(30.0, 52.0), 36.229, rtol=0, atol=5e-4)
    assert_allclose(1.0 / math.sin(math.radians(52.0)), 1.26902, rtol=0, atol=5e-6)
    # A face seen square-on (tilt 90° on a vertical face) is not foreshortened.
    assert_allclose(face_angle_from_image_deg(30.0, 90.0), 30.0, rtol=0, atol=1e-12)


def test_serial_section_worked_values():
    # tan δ = h / Δ: h = 1 µm, Δ = 0.5774 µm (= 1/√3) → δ = 60.00° (hand-computed).
    assert_allclose(serial_dip_deg(1.0, 0.5774), 60.0, rtol=0, atol=5e-3)
    # σ_δ = √((Δσ_h)² + (hσ_Δ)²)/(h² + Δ²): h = 5, Δ = 2.887, σ = 0.2 µm → 2.0°
    # (first-order propagation of δ = atan(h/Δ), hand-computed: 1.985°).
    assert_allclose(serial_dip_sigma_deg(5.0, 2.887, 0.2, 0.2), 2.0, rtol=0, atol=0.02)


def test_serial_sigma_matches_monte_carlo():
    # First order against brute-force sampling of δ = atan(h/Δ) (numpy random, seeded).
    gen = np.random.default_rng(4)
    h = 5.0 + 0.2 * gen.standard_normal(200_000)
    d = 2.887 + 0.2 * gen.standard_normal(200_000)
    mc = np.rad2deg(np.arctan2(h, d)).std()
    assert_allclose(serial_dip_sigma_deg(5.0, 2.887, 0.2, 0.2), mc, rtol=0.03, atol=0)


def test_vickers_depth_from_diagonals():
    # 136° Vickers pyramid: depth = diagonal / (2√2 tan 68°) = diagonal / 7.0006
    # (indenter geometry, ISO 6507-1); 30.0 → 23.0 µm gives 0.99991 µm.
    assert_allclose(VICKERS_DEPTH_FACTOR, 7.0006, rtol=0, atol=5e-5)
    assert_allclose(depth_from_indent_um(30.0, 23.0), 0.99991, rtol=0, atol=5e-6)


def test_image_right_for_line_along_x_seen_from_minus_y():
    # Conventions §7: a section line along X viewed from the −Y side has image-right −X.
    assert_allclose(
        image_right_sample([[10.0, 40.0], [90.0, 40.0]], [50.0, 30.0]),
        [-1.0, 0.0, 0.0],
        rtol=0,
        atol=1e-12,
    )


def test_image_right_is_v_cross_z_from_scipy_rotation():
    # V × Z_S: turning V by −90° about Z_S (scipy's rotation, right-handed) gives V × Z.
    gen = np.random.default_rng(0)
    for angle in gen.uniform(0, 360, 10):
        a = math.radians(angle)
        e = np.array([math.cos(a), math.sin(a)])
        v = np.array([-e[1], e[0]])
        right = image_right_sample([[0.0, 0.0], 10 * e], 3.0 * v + 4.0 * e)
        expected = Rotation.from_euler("z", -90, degrees=True).apply([v[0], v[1], 0.0])
        assert_allclose(right, expected, rtol=0, atol=1e-12)


def test_sense_likelihood_ratio_is_the_von_mises_density_ratio():
    # The per-boundary odds: von Mises density (scipy.stats.vonmises) about μ (f₁)
    # and about μ + 180° (f₂), κ = 1/σ², mixed with a flip of chance ε:
    # ((1 − ε)f₁ + εf₂) / ((1 − ε)f₂ + εf₁).
    sigma_deg = 25.0
    kappa = 1.0 / math.radians(sigma_deg) ** 2
    phi, mu = 100.0, 70.0
    f1 = vonmises.pdf(math.radians(phi), kappa, loc=math.radians(mu))
    f2 = vonmises.pdf(math.radians(phi), kappa, loc=math.radians(mu + 180.0))
    for eps in (0.05, 0.01):
        expected = math.log10(((1 - eps) * f1 + eps * f2) / ((1 - eps) * f2 + eps * f1))
        out = boundary_sense(
            [mu],
            [50.0],
            [phi],
            [sigma_deg],
            predicted_azimuth_sigma_deg=0.0,
            min_log10_ratio=0.1,
            blunder_rate=eps,
        )
        assert_allclose(out["log10_likelihood_ratio"], [expected], rtol=1e-9, atol=1e-9)
