"""The sample as columns of the fraction table, species masses, and the two unit conversions.

The two-layer tracer sample is INVENTED (two TiO2 layers, 90 % and 60 % 18O, on carbon).
"""

from __future__ import annotations

import numpy as np
import pytest

import forward
from benchmarks._runs import run_head

TRACER = run_head(title="invented two-layer 18O tracer", charge_uC=10.0, fwhm_keV=13.0,
                  note="INVENTED: two TiO2 layers enriched differently in 18O, on carbon") + """\
[[layer]]
name = "upper"
formula = "TiO2"
areal_density_1e15 = 300
density_g_cm3 = 4.2
isotopes = { O = { 18 = 0.9, 16 = 0.1 } }
[[layer]]
name = "lower"
formula = "TiO2"
areal_density_1e15 = 500
density_g_cm3 = 4.2
isotopes = { O = { 18 = 0.6, 16 = 0.4 } }
[[layer]]
name = "base"
formula = "C"
substrate = true
"""

# Atomic masses of 16O and 18O in u (NIST, Atomic Weights and Isotopic Compositions, from the
# 2016 atomic mass evaluation), and the standard atomic weight of Ti (IUPAC).
M_O16, M_O18, M_TI = 15.99491462, 17.99915961, 47.867


def test_two_enrichments_of_one_element_are_two_columns_with_their_own_masses():
    model = forward.ForwardModel(forward.parse_run(TRACER))
    cols = model.sample_columns()
    assert cols.species == model.species
    assert len(cols.species) == 4  # Ti, 90 % 18O oxygen, 60 % 18O oxygen, C
    upper, lower, base = cols.layers
    o_upper = [j for j in np.flatnonzero(upper.composition) if cols.species[j] != "Ti"]
    o_lower = [j for j in np.flatnonzero(lower.composition) if cols.species[j] != "Ti"]
    assert len(o_upper) == len(o_lower) == 1 and o_upper != o_lower
    # TiO2: one third titanium, two thirds oxygen (the formula)
    assert upper.composition[o_upper[0]] == pytest.approx(2 / 3)
    assert lower.composition[o_lower[0]] == pytest.approx(2 / 3)
    assert cols.mass_u[o_upper[0]] == pytest.approx(0.9 * M_O18 + 0.1 * M_O16, abs=1e-6)
    assert cols.mass_u[o_lower[0]] == pytest.approx(0.6 * M_O18 + 0.4 * M_O16, abs=1e-6)
    assert cols.mass_u[cols.species.index("Ti")] == pytest.approx(M_TI, abs=1e-3)
    assert base.substrate and base.areal_density_1e15 is None and base.atoms_per_cm3 is None
    # the model's own table puts each layer's oxygen into its own column
    fr = model.layer_fractions()
    top = fr[0]
    assert top[o_upper[0]] == pytest.approx(2 / 3) and top[o_lower[0]] == 0.0


def test_atomic_density_follows_a_sampled_composition():
    cols = forward.ForwardModel(forward.parse_run(TRACER)).sample_columns()
    # the run file's composition: rho N_A / M with the isotope-weighted mean mass
    assert cols.atoms_per_cm3(0) == pytest.approx(forward.parse_run(TRACER).layers[0]
                                                  .atoms_per_cm3, rel=1e-12)
    comp = np.zeros(len(cols.species))
    comp[cols.species.index("Ti")] = 1.0  # pure titanium at 4.2 g/cm3
    # 4.2 g/cm3 / 47.867 g/mol x 6.02214076e23 /mol (CODATA Avogadro constant)
    assert cols.atoms_per_cm3(0, comp) == pytest.approx(4.2 / M_TI * 6.02214076e23, rel=1e-5)
    assert cols.atoms_per_cm3(2, comp) is None  # no mass density for the carbon


def test_nm_conversion_against_the_atomic_density_of_silicon():
    # Silicon: 2.329 g/cm3 and 28.0855 u give 4.994e22 atoms/cm3 (common practice, the
    # textbook atomic density of crystalline Si, 5.0e22 cm-3), so 1e15 atoms/cm2 is 0.2002 nm
    n = forward.atoms_per_cm3(2.329, 28.0855)
    assert n == pytest.approx(4.994e22, rel=1e-3)
    assert forward.nm_from_1e15(1.0, n) == pytest.approx(0.2002, rel=1e-3)
    # the inverse
    assert forward.areal_density_from_nm(forward.nm_from_1e15(250.0, n), n) == \
        pytest.approx(250.0, rel=1e-14)


@pytest.mark.parametrize("quadratic", [0.0, 2e-4])
def test_channel_of_energy_inverts_the_calibration(quadratic):
    channels = np.array([0.0, 0.5, 17.25, 300.0, 1023.0])
    energy = forward.channel_energy_keV(channels, 20.0, 2.0, quadratic)
    # the lower edge of channel 0 is the offset; one channel up adds the gain (the definition of
    # the calibration in the README, common practice)
    assert forward.channel_energy_keV(0.0, 20.0, 2.0, quadratic) == 20.0
    assert forward.channel_energy_keV(1.0, 20.0, 2.0, quadratic) == pytest.approx(
        22.0 + quadratic, rel=1e-15)
    assert forward.channel_of_energy(energy, 20.0, 2.0, quadratic) == pytest.approx(
        channels, abs=1e-9)
    assert isinstance(forward.channel_of_energy(30.0, 20.0, 2.0, quadratic), float)
    # a quadratic term that bends the calibration down never reaches some energies
    assert forward.channel_of_energy(1e9, 20.0, 2.0, -1e-3) == np.inf


def test_run_calibration_and_model_channels_agree():
    run = forward.parse_run(TRACER)
    model = forward.ForwardModel(run, n_channels=64)
    # channel centres at E(c + 1/2); edges at E(c)
    assert np.array_equal(model.channel_energy_keV(),
                          run.calibration.energy_keV(np.arange(64) + 0.5))
    assert np.array_equal(model.channel_edges_keV(), run.calibration.energy_keV(
        np.arange(65.0)))
