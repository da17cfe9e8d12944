"""Rutherford cross-section, screening, non-Rutherford onset and ratio tables.

Outside truth used here: CODATA constants from scipy.constants (two independent routes to
e^2/(4 pi eps0)), the small-mass-ratio formula of Chu, Mayer and Nicolet (Backscattering
Spectrometry, 1978), the centre-of-mass Rutherford cross-section transformed to the lab frame
with a Jacobian computed numerically in this file, periodictable masses, and the screening and
onset formulas of the papers cited beside each check.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import periodictable as pt
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants
from scipy.optimize import brentq

from forward import InputError
from forward._cross_section import (
    _HE4_MASS_U,
    E2_KEV_CM,
    NonRutherfordWarning,
    RatioTable,
    check_rutherford_validity,
    load_ratio_table,
    non_rutherford_onset_keV,
    rutherford_cross_section,
    screening_factor,
)

HE4 = pt.He[4].mass  # periodictable
HE3 = pt.He[3].mass  # periodictable
H1 = pt.H[1].mass  # periodictable
H2 = pt.H[2].mass  # periodictable


def mass(symbol):
    return getattr(pt, symbol).mass  # periodictable, natural abundance


def z(symbol):
    return getattr(pt, symbol).number  # periodictable


# ------------------------------------------------------------------------------------------
# the Coulomb constant


def test_coulomb_constant_by_two_routes():
    # e^2/(4 pi eps0) = alpha hbar c (CODATA via scipy.constants): an independent route.
    alpha_hbar_c_kev_cm = (constants.alpha * constants.hbar * constants.c
                           / (1e3 * constants.e) * 1e2)
    assert E2_KEV_CM == pytest.approx(alpha_hbar_c_kev_cm, rel=1e-9)
    # about 1.44 eV nm (common practice).
    assert E2_KEV_CM * 1e3 * 1e7 == pytest.approx(1.44, abs=0.001)


# ------------------------------------------------------------------------------------------
# Rutherford: limits, hand values and the CM -> lab transformation


def _compact_mb(z1, z2, energy_keV, theta_deg):
    """(Z1 Z2 e^2 / 4E)^2 / sin^4(theta/2) in mb/sr (Chu, Mayer and Nicolet 1978), m1/m2 -> 0."""
    e2 = constants.e**2 / (4 * math.pi * constants.epsilon_0)  # J m
    energy_j = energy_keV * 1e3 * constants.e
    sigma_m2 = (z1 * z2 * e2 / (4 * energy_j)) ** 2 / math.sin(math.radians(theta_deg) / 2) ** 4
    return sigma_m2 / 1e-31  # 1 mb = 1e-27 cm2 = 1e-31 m2


@pytest.mark.parametrize("theta", [60.0, 100.0, 140.0, 165.0, 170.0, 179.0, 180.0])
def test_reduces_to_compact_formula_as_mass_ratio_vanishes(theta):
    # Chu, Mayer and Nicolet (1978): the lab formula tends to the compact one as m1/m2 -> 0,
    # and the relative difference falls like (m1/m2)^2 (the first correction is second order).
    m1 = 4.0
    ratios = []
    for x in (1e-1, 1e-2, 1e-3):
        exact = rutherford_cross_section(2, m1, 50, m1 / x, 1500.0, theta, screening=None)
        compact = _compact_mb(2, 50, 1500.0, theta)
        ratios.append(abs(exact / compact - 1.0) / x**2)
    # rel. difference / x^2 settles to a constant (the last two agree to 1 %), so the
    # difference itself shrinks a hundredfold per decade of x; it is real, not zero.
    assert ratios[2] == pytest.approx(ratios[1], rel=1e-2)
    assert 0 < ratios[2] < 10


def test_hand_value_helium_on_silicon_at_90_degrees():
    # At 90 deg the lab formula gives (Z1 Z2 e^2 / 4E)^2 * 4 sqrt(1 - (m1/m2)^2); computed
    # here in SI units from scipy.constants (CODATA), independently of the module's keV cm.
    m1, m2 = HE4, mass("Si")
    e2 = constants.e**2 / (4 * math.pi * constants.epsilon_0)  # J m
    energy_j = 2000.0 * 1e3 * constants.e
    by_hand_m2 = (2 * 14 * e2 / (4 * energy_j)) ** 2 * 4 * math.sqrt(1 - (m1 / m2) ** 2)
    by_hand_mb = by_hand_m2 / 1e-31
    assert rutherford_cross_section(2, m1, 14, m2, 2000.0, 90.0, screening=None) == \
        pytest.approx(by_hand_mb, rel=1e-12)
    # about 1.0 b/sr (rough arithmetic: (28 * 1.44e-10 / 8000)^2 cm2 * 4 = 1.0e-24 cm2).
    assert 990.0 < by_hand_mb < 1020.0


def test_hand_value_at_180_degrees():
    # Exactly backward the Jacobian dOmega_cm/dOmega_lab = (1 - x)^2 and E_cm = E/(1 + x), so
    # sigma_lab(180) = (Z1 Z2 e^2 / 4E)^2 (1 - x^2)^2 (standard CM -> lab transformation,
    # Goldstein, Classical Mechanics); computed in SI units from scipy.constants.
    m1, m2 = HE4, mass("O")
    x = m1 / m2
    e2 = constants.e**2 / (4 * math.pi * constants.epsilon_0)
    energy_j = 1800.0 * 1e3 * constants.e
    by_hand_mb = (2 * 8 * e2 / (4 * energy_j)) ** 2 * (1 - x * x) ** 2 / 1e-31
    got = rutherford_cross_section(2, m1, 8, m2, 1800.0, 180.0, screening=None)
    assert got == pytest.approx(by_hand_mb, rel=1e-12)
    # and the value just off 180 deg joins smoothly (no 0/0 at the end point).
    near = rutherford_cross_section(2, m1, 8, m2, 1800.0, 180.0 - 1e-6, screening=None)
    assert near == pytest.approx(got, rel=1e-9)


def _theta_cm(theta_lab, x):
    """CM angle (rad) from tan(theta_lab) = sin(theta_cm) / (cos(theta_cm) + x), by root
    finding on the branch where the outgoing projectile is faster (Goldstein)."""
    upper = math.pi if x < 1 else math.acos(-1.0 / x)
    return brentq(lambda tc: math.atan2(math.sin(tc), math.cos(tc) + x) - theta_lab,
                  0.0, upper, xtol=1e-15, rtol=1e-15)


def _lab_from_cm_mb(z1, m1, z2, m2, energy_keV, theta_deg):
    """CM Rutherford cross-section times the numerical Jacobian d(cos theta_cm)/d(cos theta).

    CM Rutherford: (Z1 Z2 e^2 / 4 E_cm)^2 / sin^4(theta_cm/2), E_cm = E m2/(m1 + m2)
    (Rutherford's law in the centre-of-mass frame).  Jacobian by central differences.
    """
    x = m1 / m2
    e_cm = energy_keV * m2 / (m1 + m2)
    th = math.radians(theta_deg)
    tc = _theta_cm(th, x)
    e2 = constants.alpha * constants.hbar * constants.c / (1e3 * constants.e) * 1e2  # keV cm
    sigma_cm = (z1 * z2 * e2 / (4 * e_cm)) ** 2 / math.sin(tc / 2) ** 4 * 1e27
    h = 1e-5
    dcos_cm = math.cos(_theta_cm(th + h, x)) - math.cos(_theta_cm(th - h, x))
    dcos_lab = math.cos(th + h) - math.cos(th - h)
    return sigma_cm * dcos_cm / dcos_lab


@pytest.mark.parametrize("symbol", ["C", "O", "Si", "Ni", "Au"])
@pytest.mark.parametrize("theta", [100.0, 135.0, 150.0, 165.0, 170.0, 178.0])
def test_lab_value_equals_transformed_cm_value(symbol, theta):
    # Independent computation: CM Rutherford law and a numerical Jacobian (see helper).
    z2, m2 = z(symbol), mass(symbol)
    expected = _lab_from_cm_mb(2, HE4, z2, m2, 2200.0, theta)
    got = rutherford_cross_section(2, HE4, z2, m2, 2200.0, theta, screening=None)
    assert got == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize("m2,theta", [(H1, 8.0), (H2, 20.0), (HE3, 40.0)])
def test_heavy_projectile_branch_equals_transformed_cm_value(m2, theta):
    # m1 > m2: the + branch (smaller CM angle), same independent computation.
    expected = _lab_from_cm_mb(2, HE4, 1 if m2 < 3 else 2, m2, 2000.0, theta)
    got = rutherford_cross_section(2, HE4, 1 if m2 < 3 else 2, m2, 2000.0, theta,
                                   screening=None)
    assert got == pytest.approx(expected, rel=1e-7)


def test_unreachable_angle_raises():
    # 4He cannot be scattered beyond about 14.6 deg by 1H (common practice).
    with pytest.raises(ValueError, match="reaches only angles below"):
        rutherford_cross_section(2, HE4, 1, H1, 2000.0, 30.0)


def test_vectorised_over_energy_and_angle():
    energies = np.array([[500.0], [1000.0], [2000.0]])
    angles = np.array([150.0, 165.0, 170.0, 180.0])
    grid = rutherford_cross_section(2, HE4, 14, mass("Si"), energies, angles)
    assert grid.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            assert grid[i, j] == pytest.approx(
                rutherford_cross_section(2, HE4, 14, mass("Si"), float(energies[i, 0]),
                                         float(angles[j])), rel=1e-14)
    # 1/E^2 scaling without screening (Rutherford's law, common practice).
    bare = rutherford_cross_section(2, HE4, 14, mass("Si"), energies, 170.0, screening=None)
    assert bare[0, 0] / bare[2, 0] == pytest.approx(16.0, rel=1e-12)
    assert isinstance(rutherford_cross_section(2, HE4, 14, mass("Si"), 2000.0, 170.0), float)


def test_screening_is_multiplied_in():
    for model in ("lecuyer", "andersen"):
        bare = rutherford_cross_section(2, HE4, 79, mass("Au"), 1500.0, 165.0, screening=None)
        screened = rutherford_cross_section(2, HE4, 79, mass("Au"), 1500.0, 165.0,
                                            screening=model)
        f = screening_factor(2, 79, 1500.0, 165.0, HE4, mass("Au"), model=model)
        assert screened == pytest.approx(bare * f, rel=1e-14)


@pytest.mark.parametrize("bad", ["Andersen", "thomas-fermi", "", 1])
def test_unknown_screening_raises_naming_choices(bad):
    with pytest.raises(ValueError, match="None, 'lecuyer', 'andersen'"):
        rutherford_cross_section(2, HE4, 14, mass("Si"), 2000.0, 170.0, screening=bad)
    with pytest.raises(ValueError, match="None, 'lecuyer', 'andersen'"):
        screening_factor(2, 14, 2000.0, 170.0, HE4, mass("Si"), model=bad)


@pytest.mark.parametrize("kwargs", [dict(energy_keV=0.0), dict(energy_keV=-5.0),
                                    dict(theta_deg=0.0), dict(theta_deg=190.0),
                                    dict(energy_keV=float("nan"))])
def test_bad_arguments_raise(kwargs):
    args = dict(z1=2, m1=HE4, z2=14, m2=mass("Si"), energy_keV=2000.0, theta_deg=170.0)
    args.update(kwargs)
    with pytest.raises(ValueError):
        rutherford_cross_section(**args)


# ------------------------------------------------------------------------------------------
# screening


def test_screening_on_gold_at_2_mev():
    # 2 MeV 4He on Au at 170 deg: screening lowers the cross-section by close to 2 % and the
    # L'Ecuyer (Phys. Rev. A 20 (1979) 1) and Andersen (Phys. Rev. A 21 (1980) 1891) forms
    # agree to about 0.1 % there (common practice / from memory).
    m2 = mass("Au")
    f_l = screening_factor(2, 79, 2000.0, 170.0, HE4, m2, model="lecuyer")
    f_a = screening_factor(2, 79, 2000.0, 170.0, HE4, m2, model="andersen")
    assert 0.015 < 1.0 - f_l < 0.02
    assert 0.015 < 1.0 - f_a < 0.02
    assert abs(f_l - f_a) < 1e-3


def test_lecuyer_by_hand_on_gold():
    # F = 1 - 0.049 Z1 Z2^(4/3) / E_cm, E_cm = E m2/(m1+m2) in keV (L'Ecuyer et al. 1979,
    # constant from memory); written out here for 2000 keV 4He on Au.
    m2 = mass("Au")
    e_cm = 2000.0 * m2 / (HE4 + m2)
    expected = 1.0 - 0.049 * 2 * 79 ** (4 / 3) / e_cm
    assert screening_factor(2, 79, 2000.0, None, HE4, m2, model="lecuyer") == \
        pytest.approx(expected, rel=1e-14)


def test_andersen_head_on_limit():
    # At theta_cm = 180 deg the Andersen factor collapses to 1 / (1 + V1/(2 E_cm))^2
    # (algebra on Andersen et al. 1980, V1 = 0.04873 Z1 Z2 sqrt(Z1^(2/3) + Z2^(2/3)) keV,
    # constant from memory).
    m2 = mass("Ag")
    e_cm = 1200.0 * m2 / (HE4 + m2)
    v1 = 0.04873 * 2 * 47 * math.sqrt(2 ** (2 / 3) + 47 ** (2 / 3))
    expected = 1.0 / (1.0 + v1 / (2 * e_cm)) ** 2
    assert screening_factor(2, 47, 1200.0, 180.0, HE4, m2, model="andersen") == \
        pytest.approx(expected, rel=1e-13)


@pytest.mark.parametrize("symbol,energy,theta", [("C", 300.0, 120.0), ("Si", 500.0, 100.0),
                                                  ("Au", 800.0, 150.0)])
def test_andersen_by_hand_in_the_centre_of_mass_frame(symbol, energy, theta):
    # Andersen et al., Phys. Rev. A 21 (1980) 1891 (V1 constant 0.04873 keV from memory),
    # written out with E_cm = E m2/(m1+m2) and the CM angle found by root finding above.
    z2, m2 = z(symbol), mass(symbol)
    e_cm = energy * m2 / (HE4 + m2)
    tc = _theta_cm(math.radians(theta), HE4 / m2)
    v1 = 0.04873 * 2 * z2 * math.sqrt(2 ** (2 / 3) + z2 ** (2 / 3))
    expected = ((1 + v1 / (2 * e_cm)) ** 2
                / (1 + v1 / e_cm + (v1 / (2 * e_cm * math.sin(tc / 2))) ** 2) ** 2)
    got = screening_factor(2, z2, energy, theta, HE4, m2, model="andersen")
    assert got == pytest.approx(expected, rel=1e-13)


def test_screening_on_silicon_is_a_few_tenths_of_a_percent():
    # 2 MeV 4He on Si at 170 deg: a few tenths of a per cent (common practice / from memory).
    for model in ("lecuyer", "andersen"):
        f = screening_factor(2, 14, 2000.0, 170.0, HE4, mass("Si"), model=model)
        assert 0.001 < 1.0 - f < 0.005


@pytest.mark.parametrize("model", ["lecuyer", "andersen"])
@pytest.mark.parametrize("symbol", ["C", "Si", "Ge", "Au", "U"])
def test_screening_grows_as_energy_falls(model, symbol):
    # Screening matters more at low energy (common practice): F strictly increasing with E.
    energies = np.linspace(300.0, 3000.0, 28)
    f = screening_factor(2, z(symbol), energies, 165.0, HE4, mass(symbol), model=model)
    assert np.all(np.diff(f) > 0)
    assert np.all((f > 0) & (f <= 1))


def test_no_screening_model_gives_one():
    assert screening_factor(2, 79, 2000.0, 170.0, HE4, mass("Au"), model=None) == 1.0


def test_screening_argument_errors():
    with pytest.raises(ValueError, match="masses"):
        screening_factor(2, 79, 2000.0, 170.0)
    with pytest.raises(ValueError, match="needs the scattering angle"):
        screening_factor(2, 79, 2000.0, None, HE4, mass("Au"), model="andersen")
    # L'Ecuyer's first-order form turns negative below E_cm = 0.049 Z1 Z2^(4/3) keV.
    with pytest.raises(ValueError, match="use screening='andersen'"):
        screening_factor(2, 92, 30.0, 170.0, HE4, mass("U"), model="lecuyer")


# ------------------------------------------------------------------------------------------
# non-Rutherford onset (Bozoian, Hubbard and Nastasi, NIM B 51 (1990) 311)


def test_helium_mass_constant_matches_periodictable():
    assert _HE4_MASS_U == pytest.approx(HE4, rel=1e-9)  # periodictable


def test_onset_formula_values():
    # 4He: E_NR(MeV) = 0.25 Z2 + 0.4; 1H: E_NR(MeV) = 0.12 Z2 - 0.5 (Bozoian et al. 1990,
    # constants from memory).
    assert non_rutherford_onset_keV(2, HE4, 8, mass("O")) == pytest.approx(2400.0, rel=1e-12)
    assert non_rutherford_onset_keV(2, HE4, 14, mass("Si")) == pytest.approx(3900.0, rel=1e-12)
    assert non_rutherford_onset_keV(1, H1, 26, mass("Fe")) == pytest.approx(2620.0, rel=1e-12)
    assert non_rutherford_onset_keV(1, H1, 3, mass("Li")) == 0.0  # clipped: any energy


def test_onset_for_helium3_keeps_the_centre_of_mass_energy():
    # Our own scaling (documented in the module): same E_cm as the 4He onset.
    m2 = mass("C")
    e4 = non_rutherford_onset_keV(2, HE4, 6, m2)
    e3 = non_rutherford_onset_keV(2, HE3, 6, m2)
    assert e3 * m2 / (HE3 + m2) == pytest.approx(e4 * m2 / (HE4 + m2), rel=1e-9)
    assert e3 < e4


def test_onset_unknown_projectile_raises():
    with pytest.raises(ValueError, match="no non-Rutherford onset rule"):
        non_rutherford_onset_keV(3, 7.016, 14, mass("Si"))
    with pytest.raises(ValueError, match="no non-Rutherford onset rule"):
        non_rutherford_onset_keV(1, H2, 14, mass("Si"))


@pytest.mark.parametrize("symbol", ["C", "O"])
def test_warning_fires_for_light_targets_at_3_mev(symbol):
    # 3 MeV 4He is above the onset for C (1.9 MeV) and O (2.4 MeV) (Bozoian et al. 1990).
    with pytest.warns(NonRutherfordWarning, match=rf"{symbol} in layer 1: beam energy 3000 keV"):
        ok = check_rutherford_validity(2, HE4, z(symbol), mass(symbol), 3000.0,
                                       label=f"{symbol} in layer 1")
    assert ok is False


@pytest.mark.parametrize("symbol,energy", [("Si", 2000.0), ("Ti", 3000.0), ("Ag", 3000.0),
                                           ("Au", 3000.0), ("U", 3000.0)])
def test_warning_silent_for_heavier_targets(symbol, energy):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_rutherford_validity(2, HE4, z(symbol), mass(symbol), energy) is True


def test_warning_checks_the_highest_energy_of_an_array():
    with pytest.warns(NonRutherfordWarning, match="Z2=8"):
        assert check_rutherford_validity(2, HE4, 8, mass("O"), [1000.0, 2500.0]) is False


# ------------------------------------------------------------------------------------------
# ratio-to-Rutherford tables (our own CSV format; the numbers below are invented)


GOOD_TABLE = """\
# invented ratios for a test, not measured data
# lab energy (keV), cross-section / Rutherford
energy_keV,ratio

1500, 1.00
2000, 1.10
2500, 1.60
3000, 1.20
"""


def _write(tmp_path, text, name="ratio.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_ratio_table_loads_and_interpolates(tmp_path):
    path = _write(tmp_path, GOOD_TABLE)
    table = load_ratio_table(path)
    assert isinstance(table, RatioTable)
    assert table.source == str(path)
    assert table.energy_range_keV == (1500.0, 3000.0)
    # linear interpolation (common practice): tabulated points exactly, midpoints halfway.
    assert table(2000.0) == 1.10
    assert table(2250.0) == pytest.approx(1.35, rel=1e-14)
    assert table(1500.0) == 1.0 and table(3000.0) == 1.2
    values = table(np.array([1750.0, 2750.0]))
    assert np.allclose(values, [1.05, 1.40], rtol=1e-14)


def test_ratio_table_rejects_energies_outside(tmp_path):
    table = load_ratio_table(_write(tmp_path, GOOD_TABLE))
    with pytest.raises(ValueError, match="outside the ratio table .* covers 1500 to 3000 keV"):
        table(1400.0)
    with pytest.raises(ValueError, match="3100 keV is outside"):
        table(np.array([2000.0, 3100.0]))


@pytest.mark.parametrize("text,line,message", [
    ("energy_keV,ratio\n1000,1.0\n900,1.1\n", 3, "increase strictly"),
    ("energy_keV,ratio\n1000,1.0\n1000,1.1\n", 3, "increase strictly"),
    ("# c\nenergy_keV,ratio\n1000,1.0\n1100,-0.5\n", 4, "finite and > 0"),
    ("energy_keV,ratio\n1000,1.0\n1100,0\n", 3, "finite and > 0"),
    ("energy_keV,ratio\n1000,one\n1100,1.0\n", 2, "cannot read"),
    ("energy_keV,ratio\n1000,1.0\n1100,nan\n", 3, "finite and > 0"),
    ("energy_keV,ratio\n1000,1.0,3\n", 2, "two numbers"),
    ("energy,ratio\n1000,1.0\n", 1, "energy_keV,ratio"),
    ("energy_keV,ratio\n-10,1.0\n1000,1.0\n", 2, "energies must be finite and > 0"),
])
def test_ratio_table_bad_rows_name_file_and_line(tmp_path, text, line, message):
    path = _write(tmp_path, text)
    with pytest.raises(InputError, match=message) as info:
        load_ratio_table(path)
    assert info.value.where == f"{path}: line {line}"
    assert str(info.value).startswith(f"{path}: line {line}: ")
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("text,message", [("", "empty"), ("# only comments\n\n", "empty"),
                                          ("energy_keV,ratio\n", "at least two"),
                                          ("energy_keV,ratio\n1000,1.0\n", "at least two")])
def test_ratio_table_empty_or_short_files(tmp_path, text, message):
    path = _write(tmp_path, text)
    with pytest.raises(InputError, match=message) as info:
        load_ratio_table(path)
    assert info.value.where == str(path)


def test_ratio_table_missing_file(tmp_path):
    path = tmp_path / "absent.csv"
    with pytest.raises(InputError, match="cannot read the ratio table") as info:
        load_ratio_table(path)
    assert info.value.where == str(path)


# ------------------------------------------------------------------------------------------
# property tests


_ELEMENTS = [pt.elements[n] for n in range(3, 93) if pt.elements[n].mass > 0]


@settings(max_examples=150, deadline=None, derandomize=True)
@given(el=st.sampled_from(_ELEMENTS), ion=st.sampled_from([(2, HE4), (2, HE3), (1, H1)]),
       energy=st.floats(20.0, 5000.0), theta=st.floats(90.0, 180.0, exclude_min=True),
       model=st.sampled_from([None, "andersen"]))
def test_property_cross_section_positive_and_finite(el, ion, energy, theta, model):
    z1, m1 = ion
    sigma = rutherford_cross_section(z1, m1, el.number, el.mass, energy, theta, screening=model)
    assert math.isfinite(sigma) and sigma > 0


@settings(max_examples=150, deadline=None, derandomize=True)
@given(el=st.sampled_from(_ELEMENTS), e_low=st.floats(200.0, 4000.0),
       step=st.floats(1.0, 2000.0), theta=st.floats(90.0, 180.0, exclude_min=True),
       model=st.sampled_from(["lecuyer", "andersen"]))
def test_property_screening_in_unit_interval_and_increasing(el, e_low, step, theta, model):
    # F in (0, 1], and less screening at higher energy (common practice).
    f_low = screening_factor(2, el.number, e_low, theta, HE4, el.mass, model=model)
    f_high = screening_factor(2, el.number, e_low + step, theta, HE4, el.mass, model=model)
    assert 0.0 < f_low <= 1.0 and 0.0 < f_high <= 1.0
    assert f_high > f_low
