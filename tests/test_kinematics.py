"""Kinematic factor of one elastic collision, checked against outside truth.

Masses come from the periodictable package.  The reference kinematic factor is
computed here by a separate route: the centre-of-mass derivation, with the centre-of-mass angle
found by root finding from the lab/CM angle relation, so no formula is shared with the module.
"""

from __future__ import annotations

import math

import numpy as np
import periodictable as pt
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from forward._kinematics import kinematic_factor, max_scattering_angle_deg

HE4 = pt.He[4].mass  # periodictable
HE3 = pt.He[3].mass  # periodictable
H1 = pt.H[1].mass  # periodictable
H2 = pt.H[2].mass  # periodictable


def _cm_angle(theta_lab, x):
    """Centre-of-mass angle for a lab angle (rad), x = m1/m2, by root finding.

    Lab/CM relation for an elastic collision with the target at rest (Goldstein, Classical
    Mechanics): tan(theta_lab) = sin(theta_cm) / (cos(theta_cm) + x).  For x < 1 the lab angle
    grows monotonically with the CM angle on [0, pi]; for x >= 1 it grows on [0, arccos(-1/x)],
    the branch giving the larger outgoing energy.
    """
    upper = math.pi if x < 1 else math.acos(-1.0 / x)

    def lab_of_cm(tc):
        return math.atan2(math.sin(tc), math.cos(tc) + x)

    if theta_lab >= lab_of_cm(upper):
        return upper
    return brentq(lambda tc: lab_of_cm(tc) - theta_lab, 0.0, upper, xtol=1e-15, rtol=1e-15)


def _k_centre_of_mass(m1, m2, theta_deg):
    """E1/E0 from the CM picture: E1/E0 = 1 - 2 m1 m2 / (m1 + m2)^2 (1 - cos theta_cm).

    Energy transferred to the target in an elastic collision (Goldstein, Classical Mechanics).
    """
    tc = _cm_angle(math.radians(theta_deg), m1 / m2)
    return 1.0 - 2.0 * m1 * m2 / (m1 + m2) ** 2 * (1.0 - math.cos(tc))


TARGETS = ["C", "N", "O", "Al", "Si", "Ti", "Fe", "Ni", "Ge", "Ag", "Hf", "Au", "Bi", "U"]


@pytest.mark.parametrize("ion_mass", [HE4, HE3, H1], ids=["4He", "3He", "1H"])
@pytest.mark.parametrize("symbol", TARGETS)
def test_matches_centre_of_mass_derivation(ion_mass, symbol):
    # Independent closed form (centre-of-mass derivation above), to 1e-9.
    m2 = getattr(pt, symbol).mass  # periodictable
    for theta in (95.0, 120.0, 135.0, 150.0, 160.0, 165.0, 170.0, 175.0, 179.0):
        assert kinematic_factor(ion_mass, m2, theta) == pytest.approx(
            _k_centre_of_mass(ion_mass, m2, theta), rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("m1,m2,theta", [(HE4, H1, 5.0), (HE4, H1, 14.0), (HE4, H2, 10.0),
                                          (HE4, H2, 29.0), (HE4, HE3, 40.0), (HE4, HE4, 45.0)])
def test_heavy_projectile_branch_matches_centre_of_mass(m1, m2, theta):
    # m1 >= m2 (forward recoil kinematics): the + root is the branch with the smaller CM angle;
    # compared with the independent CM derivation restricted to that branch, to 1e-9.
    assert kinematic_factor(m1, m2, theta) == pytest.approx(
        _k_centre_of_mass(m1, m2, theta), rel=1e-9)


def test_helium_on_silicon_at_170_degrees():
    # 4He on natural Si at 170 deg: K = 0.566 (handbook value, from memory).
    assert round(kinematic_factor(HE4, pt.Si.mass, 170.0), 3) == 0.566


def test_rises_toward_one_as_target_mass_grows():
    # Heavier targets take less energy from the projectile (common practice).
    masses = sorted(getattr(pt, s).mass for s in TARGETS)  # periodictable
    k = kinematic_factor(HE4, np.array(masses), 170.0)
    assert np.all(np.diff(k) > 0)
    # and K -> 1 as m2 -> infinity: 1 - K ~ 4 m1/m2 at 180 deg (common practice).
    assert 1.0 - kinematic_factor(HE4, 1e9, 170.0) < 1e-7


def test_backscattering_at_180_degrees():
    # K(180 deg) = ((m2 - m1) / (m2 + m1))^2 (common practice).
    for symbol in TARGETS:
        m2 = getattr(pt, symbol).mass
        expected = ((m2 - HE4) / (m2 + HE4)) ** 2
        assert kinematic_factor(HE4, m2, 180.0) == pytest.approx(expected, rel=1e-12)


def test_at_90_degrees():
    # K(90 deg) = (m2 - m1) / (m2 + m1) for m1 < m2 (common practice).
    for symbol in TARGETS:
        m2 = getattr(pt, symbol).mass
        assert kinematic_factor(HE4, m2, 90.0) == pytest.approx((m2 - HE4) / (m2 + HE4),
                                                                 rel=1e-12)


def test_equal_masses_give_cos_squared():
    # Equal masses: K = cos^2(theta) (common practice).
    theta = np.array([0.0, 15.0, 30.0, 45.0, 60.0, 75.0, 89.0])
    assert np.allclose(kinematic_factor(HE4, HE4, theta), np.cos(np.radians(theta)) ** 2,
                       rtol=1e-12, atol=1e-15)


def test_at_the_largest_angle_for_heavy_projectile():
    # At theta_max = arcsin(m2/m1) the square root vanishes and K = (m1 - m2)/(m1 + m2)
    # (follows from the closed form: cos^2 theta_max = 1 - (m2/m1)^2; common practice).
    for m2 in (H1, H2, HE3):
        tmax = max_scattering_angle_deg(HE4, m2)
        assert tmax == pytest.approx(math.degrees(math.asin(m2 / HE4)), rel=1e-14)
        assert kinematic_factor(HE4, m2, tmax) == pytest.approx((HE4 - m2) / (HE4 + m2),
                                                                rel=1e-9)


def test_largest_angle():
    # 180 deg when m1 < m2, 90 deg for equal masses, arcsin(m2/m1) otherwise (common practice).
    assert max_scattering_angle_deg(HE4, pt.Si.mass) == 180.0
    assert max_scattering_angle_deg(HE4, HE4) == pytest.approx(90.0, rel=1e-14)
    # 4He on 1H: about 14.5 deg (common practice for elastic recoil detection of hydrogen).
    assert 14.4 < max_scattering_angle_deg(HE4, H1) < 14.7
    out = max_scattering_angle_deg(HE4, np.array([H1, 12.0, 28.0]))
    assert out.shape == (3,) and out[1] == 180.0 and out[2] == 180.0


@pytest.mark.parametrize("m1,m2,theta", [(HE4, H1, 15.0), (HE4, H2, 31.0), (HE4, HE4, 90.5),
                                          (HE4, HE3, 150.0), (HE4, H1, 170.0)])
def test_unreachable_angle_raises(m1, m2, theta):
    # A projectile at least as heavy as the target is never turned beyond arcsin(m2/m1);
    # 150 deg has sin < m2/m1 for 4He on 3He but is still unreachable (common practice).
    with pytest.raises(ValueError, match="not reachable"):
        kinematic_factor(m1, m2, theta)


def test_unreachable_angle_inside_an_array_raises():
    with pytest.raises(ValueError, match="largest angle"):
        kinematic_factor(HE4, np.array([H1, 28.0]), np.array([[10.0], [20.0]]))


@pytest.mark.parametrize("m1,m2,theta", [(-4.0, 28.0, 170.0), (4.0, 0.0, 170.0),
                                          (4.0, 28.0, 181.0), (4.0, 28.0, -1.0),
                                          (4.0, float("nan"), 170.0)])
def test_bad_arguments_raise(m1, m2, theta):
    with pytest.raises(ValueError):
        kinematic_factor(m1, m2, theta)


def test_scalar_in_float_out_and_broadcasting():
    k = kinematic_factor(HE4, 28.0, 170.0)
    assert isinstance(k, float)
    masses = np.array([[12.0], [28.0], [197.0]])
    angles = np.array([150.0, 160.0, 170.0, 180.0])
    grid = kinematic_factor(HE4, masses, angles)
    assert grid.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            assert grid[i, j] == kinematic_factor(HE4, float(masses[i, 0]), float(angles[j]))


@settings(max_examples=200, deadline=None, derandomize=True)
@given(m1=st.floats(0.5, 250.0), extra=st.floats(1e-3, 300.0),
       theta=st.floats(90.0, 180.0, exclude_min=True))
def test_property_k_in_unit_interval(m1, extra, theta):
    # K in (0, 1] for m1 < m2 and backward angles (common practice), and it agrees with the
    # independent centre-of-mass derivation.
    m2 = m1 + extra
    k = kinematic_factor(m1, m2, theta)
    assert 0.0 < k <= 1.0
    assert k == pytest.approx(_k_centre_of_mass(m1, m2, theta), rel=1e-9, abs=1e-15)
