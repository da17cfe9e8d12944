"""Tests of forward._stopping: helium stopping cross-sections in elements and mixtures.

Outside references used here:
- NIST ASTAR: M. J. Berger et al., ESTAR, PSTAR and ASTAR, NIST Standard Reference Database 124
  (implementing ICRU Report 49), read from ../shared/refdata/astar_he.csv via
  conftest.read_refdata (the tests skip when it is absent).  "ASTAR" below means this source.
- scipy.constants (CODATA) for the ZBL prefactors.
- periodictable for masses.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import periodictable
import pytest
import scipy.constants as sc
from hypothesis import given, settings
from hypothesis import strategies as st

import forward
from forward import _stopping as stp
from forward._stopping import (VALIDATED_MAX_KEV, StoppingModel, StoppingRangeWarning,
                               StoppingTable, check_stopping_range, helium_electronic_stopping,
                               load_stopping_table, nuclear_stopping, reduced_energy,
                               reduced_nuclear_stopping, stopping)

from conftest import read_refdata  # tests/ is on sys.path (pytest rootdir-relative import)

ASTAR_FILE = "astar_he.csv"
LOW_BAND_KEV = (100.0, 1000.0)
HIGH_BAND_KEV = (1000.0, VALIDATED_MAX_KEV)

# Per-material tolerances on |ours / ASTAR - 1| in the two bands (fractions), set from the
# deviations measured by benchmarks/stopping_vs_astar.py (docs/stopping_vs_astar.md) with a
# small margin.  Agreement to 0.1 % below 1 MeV shows the coefficients are those ICRU 49 used
# there; above about 1 MeV ICRU 49 joins its fits to Bethe-formula values, so the five-coefficient
# form drifts by a few per cent.  Source of every reference value: ASTAR.
ELEMENT_TOLERANCE = {
    # material: (0.1-1 MeV, 1-3 MeV)           measured max |dev|, where
    "Ag": (0.002, 0.025),           # 0.01 %; 2.1 % at 3 MeV
    "Al": (0.002, 0.015),           # 0.04 %; 1.1 % at 3 MeV
    "Ar_gas": (0.005, 0.050),       # 0.38 % at 1 MeV; 4.5 % at 2.75 MeV
    "Au": (0.120, 0.050),           # 10.7 % at 0.1 MeV (known to differ); 4.4 % at 1.75 MeV
    "Be": (0.002, 0.135),           # 0.03 %; 12.5 % at 3 MeV (largest of all; grows with E)
    "C_amorphous": (0.002, 0.050),  # with the amorphous-carbon coefficients (ICRU 49):
                                    # 0.03 %; 4.6 % at 3 MeV (graphite's would be off by 8.9 %)
    "C_graphite": (0.002, 0.015),   # 0.03 %; 1.1 % at 3 MeV
    "Cu": (0.002, 0.010),           # 0.01 %; 0.5 % at 3 MeV
    "Fe": (0.002, 0.010),           # 0.02 %; 0.75 % at 3 MeV
    "Gd": (0.002, 0.030),           # 0.01 %; 2.5 % at 3 MeV
    "Ge": (0.002, 0.010),           # 0.03 %; 0.75 % at 3 MeV
    "H_gas": (0.002, 0.015),        # 0.01 %; 1.0 % at 2 MeV
    "He_gas": (0.002, 0.010),       # 0.03 %; 0.6 % at 2.25 MeV
    "Kr_gas": (0.002, 0.002),       # 0.01 % in both bands
    "Mo": (0.002, 0.020),           # 0.02 %; 1.6 % at 3 MeV
    "N_gas": (0.002, 0.020),        # 0.04 %; 1.6 % at 2 MeV
    "Ne_gas": (0.002, 0.027),       # 0.04 %; 2.3 % at 2.25 MeV
    "O_gas": (0.002, 0.035),        # 0.04 %; 3.0 % at 3 MeV
    "Pb": (0.002, 0.035),           # 0.02 %; 2.9 % at 3 MeV
    "Pt": (0.002, 0.070),           # 0.03 %; 6.4 % at 2.75 MeV
    "Si": (0.115, 0.055),           # 10.3 % at 0.45 MeV (known to differ); 4.7 % at 1 MeV
    "Sn": (0.002, 0.022),           # 0.01 %; 1.8 % at 3 MeV
    "Ti": (0.002, 0.010),           # 0.07 %; 0.8 % at 3 MeV
    "U": (0.002, 0.070),            # 0.02 %; 6.1 % at 3 MeV
    "W": (0.002, 0.020),            # 0.03 %; 1.6 % at 2.5 MeV
    "Xe_gas": (0.002, 0.055),       # 0.01 %; 5.0 % at 3 MeV
}

# Bragg's rule (our elements, gas-phase O) against ASTAR's compound values: measured max
# |dev| per band, with margin.  Bragg's rule with free-atom oxygen overestimates the stopping
# of an oxide (ASTAR's own element values combined the same way show nearly the same excess),
# so the sign is asserted too.
COMPOUND_TOLERANCE = {
    "SiO2": (0.250, 0.150),   # 23.2 % at 225 keV; 13.9 % at 1 MeV
    "Al2O3": (0.125, 0.110),  # 11.1 % at 275 keV; 9.8 % at 1 MeV
}


def _astar_material(name: str):
    """(formula, energies in keV, electronic stopping per atom) of one ASTAR material."""
    rows = [r for r in read_refdata(ASTAR_FILE) if r["material"] == name]
    assert rows, f"{name} not in {ASTAR_FILE}"
    energy_keV = np.array([1000.0 * float(r["energy_MeV"]) for r in rows])
    per_atom = np.array([float(r["S_electronic_eV_per_1e15_atoms_cm2"]) for r in rows])
    return rows[0]["formula"], int(rows[0]["atoms_per_formula_unit"]), energy_keV, per_atom


def _phase(material: str) -> str:
    """Our carbon phase for an ASTAR material name (graphite unless it is amorphous carbon)."""
    return "amorphous" if material == "C_amorphous" else "graphite"


def _band(energy_keV, band):
    return (energy_keV >= band[0]) & (energy_keV <= band[1])


# --------------------------------------------------------------------------------------------
# against NIST ASTAR
# --------------------------------------------------------------------------------------------

def test_every_astar_element_has_a_tolerance():
    # ASTAR: every elemental material of the tabulation is compared below.
    names = {r["material"] for r in read_refdata(ASTAR_FILE) if r["atoms_per_formula_unit"] == "1"}
    assert names == set(ELEMENT_TOLERANCE)


@pytest.mark.parametrize("material", sorted(ELEMENT_TOLERANCE))
def test_electronic_stopping_matches_astar(material):
    formula, atoms, energy_keV, reference = _astar_material(material)
    assert atoms == 1
    z2 = getattr(periodictable, formula).number
    ours = helium_electronic_stopping(z2, energy_keV, carbon=_phase(material))
    deviation = np.abs(ours / reference - 1.0)
    tol_low, tol_high = ELEMENT_TOLERANCE[material]
    low, high = _band(energy_keV, LOW_BAND_KEV), _band(energy_keV, HIGH_BAND_KEV)
    assert low.sum() >= 20 and high.sum() >= 8  # tabulated energies in each band
    # ASTAR (NIST SRD 124, ICRU 49), 0.1-1 MeV
    assert deviation[low].max() < tol_low, energy_keV[low][np.argmax(deviation[low])]
    # ASTAR (NIST SRD 124, ICRU 49), 1-3 MeV
    assert deviation[high].max() < tol_high, energy_keV[high][np.argmax(deviation[high])]


@pytest.mark.parametrize("phase, material, other", [("graphite", "C_graphite", "C_amorphous"),
                                                     ("amorphous", "C_amorphous", "C_graphite")])
def test_both_carbon_phases_against_astar(phase, material, other):
    # ASTAR (NIST SRD 124, implementing ICRU Report 49) tabulates graphite and amorphous carbon
    # separately; ICRU 49 gives each its own helium coefficients.  Each of our two coefficient
    # rows reproduces its own phase to 0.1 % at 0.1-1 MeV (measured 0.03 % for both) and misses
    # the other phase by several per cent (measured 8.1-8.9 % at 350 keV), so the choice matters.
    _, _, energy_keV, reference = _astar_material(material)
    _, _, _, reference_other = _astar_material(other)
    low = _band(energy_keV, LOW_BAND_KEV)
    ours = helium_electronic_stopping(6, energy_keV[low], carbon=phase)
    assert np.max(np.abs(ours / reference[low] - 1.0)) < 0.001
    assert np.max(np.abs(ours / reference_other[low] - 1.0)) > 0.05
    # the same through the stopping model and the public function
    model = StoppingModel("4He", nuclear=False, carbon=phase)
    np.testing.assert_array_equal(model.electronic("C", energy_keV[low]), ours)
    np.testing.assert_array_equal(stopping("4He", "C", energy_keV[low], nuclear=False,
                                           carbon=phase), ours)


def test_unknown_carbon_phase_is_an_input_error():
    with pytest.raises(forward.InputError, match="'graphite', 'amorphous'"):
        StoppingModel("4He", carbon="diamond")
    with pytest.raises(forward.InputError, match="unknown carbon phase"):
        helium_electronic_stopping(6, 1000.0, carbon="glassy")


def test_most_elements_agree_to_a_tenth_of_a_percent_below_1_MeV():
    # ASTAR: the brief's expectation "well under 1 % up to 1 MeV for most elements".
    good = [m for m, (tol_low, _) in ELEMENT_TOLERANCE.items() if tol_low <= 0.002]
    assert len(good) >= 0.8 * len(ELEMENT_TOLERANCE)


@pytest.mark.parametrize("compound", sorted(COMPOUND_TOLERANCE))
def test_bragg_rule_for_oxides_against_astar(compound):
    formula, atoms, energy_keV, reference = _astar_material(compound)
    assert atoms > 1
    model = StoppingModel("4He", nuclear=False)
    ours = model.mixture(forward.parse_formula(formula), energy_keV)
    deviation = ours / reference - 1.0
    tol_low, tol_high = COMPOUND_TOLERANCE[compound]
    low, high = _band(energy_keV, LOW_BAND_KEV), _band(energy_keV, HIGH_BAND_KEV)
    # ASTAR (NIST SRD 124, ICRU 49) compound values, Bragg's rule with gas-phase O
    assert np.abs(deviation[low]).max() < tol_low
    assert np.abs(deviation[high]).max() < tol_high
    # Bragg's rule with free-atom oxygen overestimates oxide stopping (ASTAR; physical and
    # chemical state effects, ICRU Report 49)
    assert np.all(deviation[low | high] > 0)


def test_spread_over_elements_in_the_rbs_band():
    # ASTAR: the element-to-element rms deviation at 1-2.5 MeV that sizes the stopping-scale
    # nuisance prior; measured 2.16 % (docs/stopping_vs_astar.md).
    rms = []
    for material in ELEMENT_TOLERANCE:
        formula, _, energy_keV, reference = _astar_material(material)
        z2 = getattr(periodictable, formula).number
        sel = _band(energy_keV, (1000.0, 2500.0))
        ours = helium_electronic_stopping(z2, energy_keV[sel], carbon=_phase(material))
        dev = ours / reference[sel] - 1.0
        rms.append(np.sqrt(np.mean(dev ** 2)))
    spread = float(np.sqrt(np.mean(np.square(rms))))
    assert 0.01 < spread < 0.03


# --------------------------------------------------------------------------------------------
# construction of the electronic part
# --------------------------------------------------------------------------------------------

def test_coefficient_file_is_found_and_complete():
    path = stp.find_stopping_data(stp.HELIUM_COEFFICIENT_FILE)
    text = path.read_text()
    assert "Ziegler" in text and "ICRU Report 49" in text
    table = stp._helium_coefficients()
    assert table.shape == (93, 5) and np.all(np.isfinite(table[1:]))


def test_formula_by_hand_for_silicon_at_2_MeV():
    # Construction check of the stated five-coefficient form with the Si row of the data file
    # (Ziegler 1977 / ICRU 49): a0..a4 = 2.1, 0.65, 49.34, 1.788, 4.133.
    t = 2.0
    s_low = 2.1 * (1000 * t) ** 0.65
    s_high = 49.34 / t * math.log(1 + 1.788 / t + 4.133 * t)
    assert helium_electronic_stopping(14, 2000.0) == pytest.approx(
        s_low * s_high / (s_low + s_high), rel=1e-12)


def test_below_1_keV_velocity_proportional():
    # Below 1 keV the stopping is proportional to velocity, i.e. to sqrt(E) (common practice;
    # the rule stated with the coefficients).
    e = np.array([0.01, 0.1, 0.25, 0.9])
    s1 = helium_electronic_stopping(26, 1.0)
    np.testing.assert_allclose(helium_electronic_stopping(26, e), s1 * np.sqrt(e), rtol=1e-12)
    assert helium_electronic_stopping(26, 0.0) == 0.0
    # continuous across 1 keV
    assert helium_electronic_stopping(26, 1.0 - 1e-9) == pytest.approx(s1, rel=1e-8)


def test_scalar_in_scalar_out_and_shapes_kept():
    assert isinstance(helium_electronic_stopping(14, 1500.0), float)
    assert isinstance(stopping("4He", "Si", 1500.0), float)
    e = np.linspace(100.0, 3000.0, 12).reshape(3, 4)
    assert helium_electronic_stopping(14, e).shape == (3, 4)
    assert StoppingModel().mixture({"Si": 1, "O": 2}, e).shape == (3, 4)


# --------------------------------------------------------------------------------------------
# nuclear stopping (ZBL 1985)
# --------------------------------------------------------------------------------------------

def test_zbl_prefactors_from_the_screening_length_and_scipy_constants():
    # Independent derivation: with the ZBL universal screening length a_U = 0.8854 a0 /
    # (Z1^0.23 + Z2^0.23) (ZBL 1985; 0.8854 from memory), the reduced energy is
    # eps = a_U M2 E / (Z1 Z2 e^2 (M1 + M2)) and S_n = 4 pi a_U Z1 Z2 e^2 M1 / (M1 + M2) s_n
    # (Lindhard's reduced units, common practice).  Constants from scipy.constants (CODATA).
    a0_cm = sc.physical_constants["Bohr radius"][0] * 100.0
    e2_eV_cm = sc.e / (4 * math.pi * sc.epsilon_0) * 100.0  # e^2/(4 pi eps0) in eV cm
    a_u_cm = 0.8854 * a0_cm
    eps_per_keV = a_u_cm / e2_eV_cm * 1000.0
    sn_prefactor = 4 * math.pi * a_u_cm * e2_eV_cm * 1e15  # eV/(1e15 atoms/cm2)
    # The published constants 32.53 and 8.462 agree to the rounding of older constants.
    assert stp._ZBL_EPS_PER_KEV == pytest.approx(eps_per_keV, rel=5e-4)
    assert stp._ZBL_SN_PREFACTOR == pytest.approx(sn_prefactor, rel=3e-3)


def test_reduced_nuclear_stopping_shape():
    eps = np.logspace(-4, 4, 4001)
    s = reduced_nuclear_stopping(eps)
    i = int(np.argmax(s))
    # Maximum of the universal reduced nuclear stopping near eps ~ 0.3, s_n ~ 0.35 (ZBL 1985
    # figure of the universal curve; from memory)
    assert 0.2 < eps[i] < 0.5
    assert 0.3 < s[i] < 0.4
    # Zero at zero energy, rising as a power of eps at low energy (screened potential)
    assert reduced_nuclear_stopping(0.0) == 0.0
    assert np.all(np.diff(s[:i]) > 0) and np.all(np.diff(s[i + 1:]) < 0)
    # High-energy limit: unscreened Coulomb scattering gives s_n -> ln(eps) / (2 eps)
    # (common practice); the fit joins it at eps = 30 within about 1 %.
    below = reduced_nuclear_stopping(30.0)
    above = reduced_nuclear_stopping(30.0 * (1 + 1e-12))
    assert above == pytest.approx(math.log(30.0) / 60.0, rel=1e-9)
    assert below == pytest.approx(above, rel=0.015)


def _universal_screening(x):
    # ZBL universal screening function (ZBL 1985, Ch. 2; coefficients from memory)
    c = np.array([0.18175, 0.50986, 0.28022, 0.028171])
    d = np.array([3.1998, 0.94229, 0.40290, 0.20162])
    return (c * np.exp(-np.multiply.outer(np.asarray(x, dtype=float), d))).sum(-1)


def _reduced_stopping_by_integration(eps, n_impact=400):
    """s_n(eps) = eps * integral of sin^2(theta/2) d(beta^2) for the universal potential.

    Classical centre-of-mass scattering integral in reduced units (r and b in units of the
    screening length, common practice), with the substitution u = x0/x = 1 - t^2 that removes
    the turning-point singularity, Gauss-Legendre in t and Simpson in ln(beta).
    """
    from scipy import integrate, optimize
    t, w = np.polynomial.legendre.leggauss(96)
    t, w = (t + 1) / 2, w / 2
    u = 1 - t ** 2

    def theta(beta):
        x0 = optimize.brentq(lambda x: 1 - _universal_screening(x) / (x * eps) - beta ** 2 / x ** 2,
                             1e-10, beta + 50.0, xtol=1e-15, rtol=1e-15)
        g = 1 - _universal_screening(x0 / u) * u / (x0 * eps) - beta ** 2 * u ** 2 / x0 ** 2
        return math.pi - 2 * beta / x0 * np.sum(w * 2 * t / np.sqrt(g))

    beta = np.geomspace(1e-4, 60.0, n_impact)
    y = np.array([math.sin(theta(b) / 2) ** 2 for b in beta])
    # below beta = 1e-4 the ion is backscattered (sin^2 = 1): that part adds eps * 1e-8
    return eps * (integrate.simpson(2 * beta ** 2 * y, x=np.log(beta)) + 1e-8)


@pytest.mark.parametrize("eps, tolerance", [
    (0.001, 0.005), (0.01, 0.005), (0.1, 0.005), (0.3, 0.006), (1.0, 0.01), (3.0, 0.015),
    (10.0, 0.05),
])
def test_reduced_nuclear_stopping_against_the_scattering_integral(eps, tolerance):
    # Independent check of the ZBL fit: integrate classical scattering in the ZBL universal
    # potential numerically.  Measured: |fit / integral - 1| = 0.04, 0.10, 0.12, 0.35, 0.78,
    # 1.0 and 3.6 % at these eps (integration converged to 1e-10).  The fit is meant to hold to
    # a few per cent (ZBL 1985; from memory).
    integral = _reduced_stopping_by_integration(eps)
    assert reduced_nuclear_stopping(eps) == pytest.approx(integral, rel=tolerance)


def test_nuclear_stopping_formula_by_hand():
    # Construction check of S_n = 8.462 z1 z2 m1 s_n / ((m1+m2)(z1^0.23+z2^0.23)) (ZBL 1985).
    z1, m1, z2, m2, e = 2, 4.0026, 79, 196.97, 500.0
    x = z1 ** 0.23 + z2 ** 0.23
    eps = 32.53 * m2 * e / (z1 * z2 * (m1 + m2) * x)
    assert reduced_energy(z1, m1, z2, m2, e) == pytest.approx(eps, rel=1e-12)
    sn = math.log(1 + 1.1383 * eps) / (2 * (eps + 0.01321 * eps ** 0.21226 + 0.19593 * eps ** 0.5))
    assert nuclear_stopping(z1, m1, z2, m2, e) == pytest.approx(
        8.462 * z1 * z2 * m1 * sn / ((m1 + m2) * x), rel=1e-12)


def test_nuclear_part_is_small_for_2_MeV_he_in_si_and_grows_at_low_energy():
    model = StoppingModel("4He")
    # Nuclear stopping is under 1 % of the total for MeV helium in Si (common practice)
    assert model.nuclear("Si", 2000.0) / model.element("Si", 2000.0) < 0.01
    e = np.geomspace(10.0, 3000.0, 60)
    share = model.nuclear("Si", e) / model.element("Si", e)
    assert np.all(np.diff(share) < 0)
    assert share[0] > 10 * share[-1]


# --------------------------------------------------------------------------------------------
# 3He
# --------------------------------------------------------------------------------------------

def test_helium3_electronic_at_equal_velocity_and_nuclear_with_real_masses():
    # Equal velocity means E(4He) = E(3He) m(4He)/m(3He) (common practice); masses from
    # periodictable.
    m4, m3 = periodictable.He[4].mass, periodictable.He[3].mass
    e = np.array([50.0, 400.0, 1500.0, 2500.0])
    he3 = StoppingModel("3He")
    np.testing.assert_allclose(he3.electronic("Ni", e),
                               helium_electronic_stopping(28, e * m4 / m3), rtol=1e-12)
    np.testing.assert_allclose(he3.nuclear("Ni", e),
                               nuclear_stopping(2, m3, 28, periodictable.Ni.mass, e), rtol=1e-12)
    # a lighter ion at the same energy is faster: below the stopping maximum (~0.5-1 MeV for
    # He in Ni), more stopping than 4He at the same energy (common practice)
    assert he3.electronic("Ni", 200.0) > StoppingModel("4He").electronic("Ni", 200.0)


def test_proton_beam_rejected():
    with pytest.raises(forward.InputError, match="proton"):
        StoppingModel("1H")
    with pytest.raises(forward.InputError, match="proton"):
        stopping("1H", "Si", 1000.0)


# --------------------------------------------------------------------------------------------
# properties
# --------------------------------------------------------------------------------------------

_SYMBOLS = [periodictable.elements[z].symbol for z in range(1, 93)]


@settings(max_examples=200, deadline=None, derandomize=True)
@given(z2=st.integers(1, 92), energy_keV=st.floats(10.0, 10000.0),
       ion=st.sampled_from(["4He", "3He"]))
def test_stopping_positive_and_finite_for_every_element(z2, energy_keV, ion):
    s = StoppingModel(ion).element(_SYMBOLS[z2 - 1], energy_keV)
    assert math.isfinite(s) and s > 0
    assert math.isfinite(helium_electronic_stopping(z2, energy_keV))


def test_stopping_positive_on_a_dense_grid_for_every_element():
    # complements the random draws above: all 92 elements, 10 keV-10 MeV
    e = np.geomspace(10.0, 10000.0, 400)
    model = StoppingModel("4He")
    for symbol in _SYMBOLS:
        s = model.element(symbol, e)
        assert np.all(np.isfinite(s)) and np.all(s > 0), symbol


@settings(max_examples=100, deadline=None, derandomize=True)
@given(a=st.sampled_from(_SYMBOLS), b=st.sampled_from(_SYMBOLS),
       fraction=st.floats(0.0, 1.0), energy_keV=st.floats(10.0, 10000.0))
def test_bragg_mixture_lies_between_its_constituents(a, b, fraction, energy_keV):
    # Bragg's rule is a weighted mean (W. H. Bragg and R. Kleeman, Philos. Mag. 10 (1905) 318)
    model = StoppingModel("4He")
    sa, sb = model.element(a, energy_keV), model.element(b, energy_keV)
    mix = model.mixture({a: fraction, b: 1.0 - fraction}, energy_keV) if a != b \
        else model.mixture({a: 1.0}, energy_keV)
    assert min(sa, sb) * (1 - 1e-12) <= mix <= max(sa, sb) * (1 + 1e-12)


def test_formula_target_equals_bragg_sum():
    # Bragg's rule per atom: SiO2 = (S_Si + 2 S_O) / 3 (Bragg and Kleeman 1905)
    e = np.array([300.0, 1200.0, 2000.0])
    model = StoppingModel("4He")
    np.testing.assert_allclose(stopping("4He", "SiO2", e),
                               (model.element("Si", e) + 2 * model.element("O", e)) / 3, rtol=1e-12)
    np.testing.assert_allclose(stopping("4He", "Ni0.45Ge0.55", e),
                               0.45 * model.element("Ni", e) + 0.55 * model.element("Ge", e),
                               rtol=1e-12)


# --------------------------------------------------------------------------------------------
# user tables and scale factors
# --------------------------------------------------------------------------------------------

def _write(tmp_path, text, name="table.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_user_table_replaces_element_and_scale_multiplies(tmp_path):
    # Invented table for a test only (not measured data): a power law 40 (E/1000 keV)^-0.3.
    e_tab = np.geomspace(50.0, 5000.0, 30)
    s_tab = 40.0 * (e_tab / 1000.0) ** -0.3
    rows = "\n".join(f"{e:.10g},{s:.10g}" for e, s in zip(e_tab, s_tab))
    path = _write(tmp_path, "# invented power law for a test\nenergy_keV,stopping\n" + rows + "\n")
    table = load_stopping_table(path)
    e = np.array([75.0, 333.0, 1000.0, 2718.0])
    # log-log interpolation reproduces a power law exactly (common practice)
    np.testing.assert_allclose(table(e), 40.0 * (e / 1000.0) ** -0.3, rtol=1e-9)

    plain = StoppingModel("4He")
    model = StoppingModel("4He", tables={"Si": path}, scale={"Si": 1.1, "O": 0.95})
    np.testing.assert_allclose(model.element("Si", e), 1.1 * table(e), rtol=1e-12)
    np.testing.assert_allclose(model.nuclear("Si", e), 0.0)
    np.testing.assert_allclose(model.element("O", e), 0.95 * plain.element("O", e), rtol=1e-12)
    np.testing.assert_allclose(model.element("Ni", e), plain.element("Ni", e), rtol=1e-12)
    np.testing.assert_allclose(model.mixture({"Si": 1, "O": 2}, e),
                               (1.1 * table(e) + 2 * 0.95 * plain.element("O", e)) / 3, rtol=1e-12)
    # a table object may be given directly, and the convenience function passes it on
    np.testing.assert_allclose(stopping("4He", "SiO2", e, tables={"Si": table}),
                               (table(e) + 2 * plain.element("O", e)) / 3, rtol=1e-12)
    with pytest.raises(forward.InputError, match="outside the table"):
        table(10.0)


def test_nuclear_switch():
    e = np.array([100.0, 2000.0])
    off = StoppingModel("4He", nuclear=False)
    np.testing.assert_allclose(off.element("Au", e), helium_electronic_stopping(79, e), rtol=1e-12)
    np.testing.assert_allclose(stopping("4He", "Au", e, nuclear=False), off.element("Au", e))


@pytest.mark.parametrize("text, line, match", [
    ("energy,stopping\n100,20\n200,25\n", 1, "header"),
    ("# c\nenergy_keV,stopping\n100,20\n100,25\n", 4, "strictly increasing"),
    ("energy_keV,stopping\n100,20\n200,-1\n", 3, "finite and > 0"),
    ("energy_keV,stopping\n100,20\n200,abc\n", 3, "two numbers"),
    ("energy_keV,stopping\n100,20\n200,1,3\n", 3, "columns"),
    ("energy_keV,stopping\n100,20\n200,nan\n", 3, "finite"),
    ("energy_keV,stopping\n0,20\n200,21\n", 2, "energies must be"),
])
def test_bad_table_names_file_and_line(tmp_path, text, line, match):
    path = _write(tmp_path, text)
    with pytest.raises(forward.InputError, match=match) as info:
        load_stopping_table(path)
    assert info.value.where == f"{path}: line {line}"
    assert "\n" not in str(info.value)


def test_table_too_short_or_missing(tmp_path):
    with pytest.raises(forward.InputError, match="at least two"):
        load_stopping_table(_write(tmp_path, "energy_keV,stopping\n100,20\n"))
    with pytest.raises(forward.InputError, match="no header"):
        load_stopping_table(_write(tmp_path, "# only comments\n"))
    with pytest.raises(forward.InputError, match="cannot read"):
        load_stopping_table(tmp_path / "absent.csv")


@pytest.mark.parametrize("call, match", [
    (lambda: helium_electronic_stopping(0, 1000.0), "1 \\(H\\) to 92"),
    (lambda: helium_electronic_stopping(93, 1000.0), "1 \\(H\\) to 92"),
    (lambda: helium_electronic_stopping(14, -5.0), ">= 0"),
    (lambda: helium_electronic_stopping(14, [100.0, np.nan]), "finite"),
    (lambda: StoppingModel(scale={"Si": 0.0}), "> 0"),
    (lambda: StoppingModel(scale={"Xx": 1.0}), "unknown element"),
    (lambda: StoppingModel().mixture({"Si": -0.1, "O": 1.1}, 1000.0), ">= 0"),
    (lambda: StoppingModel().mixture({}, 1000.0), "empty"),
    (lambda: stopping("4He", "Si(O2", 1000.0), "formula"),
    (lambda: StoppingModel("7Li"), "unknown ion"),
])
def test_bad_input_raises_input_error(call, match):
    with pytest.raises(forward.InputError, match=match):
        call()


# --------------------------------------------------------------------------------------------
# validated range
# --------------------------------------------------------------------------------------------

def test_range_warning_above_the_validated_energy():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_stopping_range(np.array([500.0, VALIDATED_MAX_KEV]))
    with pytest.warns(StoppingRangeWarning):
        assert not check_stopping_range(VALIDATED_MAX_KEV + 1.0)
    # 3He: the same velocity limit, lower by m(3He)/m(4He) (periodictable masses)
    limit_3he = VALIDATED_MAX_KEV * periodictable.He[3].mass / periodictable.He[4].mass
    with pytest.warns(StoppingRangeWarning):
        check_stopping_range(limit_3he + 1.0, ion="3He")
    assert issubclass(StoppingRangeWarning, UserWarning)


def test_table_object_validates_its_arrays():
    with pytest.raises(forward.InputError, match="strictly increasing"):
        StoppingTable(np.array([2.0, 1.0]), np.array([1.0, 1.0]), source="mem")


# --------------------------------------------------------------------------------------------
# recommended prior widths of the stopping nuisances
# --------------------------------------------------------------------------------------------

def _width_table_from_refdata():
    """Rows recomputed from ASTAR by the benchmark that wrote the widths file."""
    read_refdata(ASTAR_FILE)  # skips when the reference data is absent
    import importlib.util
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "benchmarks" / "stopping_vs_astar.py"
    spec = importlib.util.spec_from_file_location("stopping_vs_astar", path)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    return bench.uncertainty_rows(bench.read_astar())[0]


def test_width_table_is_up_to_date_with_the_measured_deviations():
    # ASTAR (NIST SRD 124, ICRU 49): the stored widths are what benchmarks/stopping_vs_astar.py
    # measures now (5 decimals stored); a change of the coefficients must regenerate them
    fresh = {(r["symbol"], r["phase"]): r for r in _width_table_from_refdata()}
    stored = stp._uncertainty_rows()
    assert len(stored) == len(fresh)
    for row in stored:
        new = fresh[(row["symbol"], row["phase"])]
        assert row["scale_sd"] == pytest.approx(new["scale_sd"], abs=1e-5)
        assert row["slope_sd"] == pytest.approx(new["slope_sd"], abs=1e-5)


@pytest.mark.parametrize("material", sorted(ELEMENT_TOLERANCE))
def test_prior_widths_cover_astar_at_every_energy(material):
    # ASTAR (NIST SRD 124, ICRU 49): with scale ~ N(1, scale_sd) and slope ~ N(0, slope_sd),
    # ln(S_ASTAR / S_ours) at energy E lies within 2 standard deviations of the prior,
    # sqrt(scale_sd^2 + (slope_sd ln(E/1000 keV))^2), at every tabulated energy of the band
    # (measured worst case 1.9, Be at 3 MeV)
    formula, _, energy_keV, reference = _astar_material(material)
    z2 = getattr(periodictable, formula).number
    sel = _band(energy_keV, stp.UNCERTAINTY_BAND_KEV)
    e = energy_keV[sel]
    ours = helium_electronic_stopping(z2, e, carbon=_phase(material))
    scale_sd, slope_sd = stp.stopping_uncertainty(formula, carbon=_phase(material))
    sd = np.sqrt(scale_sd ** 2 + (slope_sd * np.log(e / 1000.0)) ** 2)
    assert np.max(np.abs(np.log(reference[sel] / ours)) / sd) < 2.0


def test_oxygen_in_oxides_gets_the_bragg_rule_failure_as_width():
    # ASTAR (NIST SRD 124, ICRU 49) SiO2 and Al2O3 against Bragg's rule with our elements, the
    # difference laid on oxygen: at 1 MeV and at 400 keV the oxide prior must reach the
    # compound values within 2 sd (measured: compounds 4-20 % below Bragg's rule)
    scale_sd, slope_sd = stp.stopping_uncertainty("O", oxide=True)
    assert scale_sd > 5 * stp.stopping_uncertainty("O")[0]
    model = StoppingModel("4He", nuclear=False)
    for compound in ("SiO2", "Al2O3"):
        formula, _, energy_keV, reference = _astar_material(compound)
        fractions = forward.parse_formula(formula)
        for e in (400.0, 1000.0):
            ref = np.interp(np.log(e), np.log(energy_keV), np.log(reference))
            others = sum(f * model.electronic(s, e) for s, f in fractions.items() if s != "O")
            bound = (np.exp(ref) - others) / fractions["O"]
            sd = math.hypot(scale_sd, slope_sd * math.log(e / 1000.0))
            assert abs(math.log(bound / model.electronic("O", e))) < 2 * sd


def test_prior_widths_are_wider_where_the_coefficient_form_departs():
    # from the measured deviations (docs/stopping_vs_astar.md): Si and Au differ by up to 10 %
    # below 1 MeV, Be by 12.5 % at 3 MeV; elements without an ASTAR entry get the width of
    # their class, wider for Z >= 55 and Be, C, N, O (ICRU Report 49 leaves the coefficient
    # form above about 1 MeV there)
    cu = stp.stopping_uncertainty("Cu")
    for symbol in ("Si", "Au", "Be"):
        assert stp.stopping_uncertainty(symbol)[0] > 2 * cu[0]
    heavy = [stp.stopping_uncertainty(s) for s in ("Hf", "Ta", "Bi")]
    light = [stp.stopping_uncertainty(s) for s in ("Ni", "Co", "Cr")]
    assert heavy[0] == heavy[1] == heavy[2] and light[0] == light[1] == light[2]
    assert heavy[0][0] > light[0][0] and heavy[0][1] > light[0][1]
    assert 0.015 < light[0][0] < heavy[0][0] < 0.05
    # 3He: the 4He widths (equal velocity); amorphous carbon has its own
    assert stp.stopping_uncertainty("Si", "3He") == stp.stopping_uncertainty("Si")
    assert stp.stopping_uncertainty("C", carbon="amorphous") != stp.stopping_uncertainty("C")
    assert forward.stopping_uncertainty is stp.stopping_uncertainty


@pytest.mark.parametrize("call, match", [
    (lambda: stp.stopping_uncertainty("Si", "1H"), "proton|ion"),
    (lambda: stp.stopping_uncertainty("Si", oxide=True), "oxygen only"),
    (lambda: stp.stopping_uncertainty("Xx"), "Xx"),
    (lambda: stp.stopping_uncertainty("C", carbon="diamond"), "carbon phase"),
])
def test_prior_width_bad_input(call, match):
    with pytest.raises(forward.InputError, match=match):
        call()
