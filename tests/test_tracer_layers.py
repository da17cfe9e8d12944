"""Two layers of one element enriched differently: simulated, inverted, checked against the truth.

The sample is INVENTED: two TiO2 layers on carbon, the upper one with 90 % 18O, the lower one
with 60 % 18O (an oxygen-exchange tracer experiment as one might plan it).  The forward model
keeps the two oxygens apart (species ``O[18]`` and ``O[18]#2``); the inversion must take each
layer's oxygen, and its mass, from the forward model, or the lower layer is fitted with the
upper layer's isotope mix.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import forward
from benchmarks._runs import run_head
from inversion import (NotConvergedWarning, cramer_rao_sd, fisher_matrix, invert,
                       nominal_theta, prepare)

RUN = run_head(title="invented 18O tracer, two layers", charge_uC=20.0, fwhm_keV=13.0,
               note="INVENTED: two TiO2 layers enriched differently in 18O on a carbon "
                    "substrate") + """\
[[layer]]
name = "upper"
formula = "TiO2"
areal_density_1e15 = 300.0
density_g_cm3 = 4.2
isotopes = {{ O = {{ 18 = 0.9, 16 = 0.1 }} }}
[[layer]]
name = "lower"
formula = "TiO2"
areal_density_1e15 = 500.0
density_g_cm3 = 4.2
isotopes = {{ O = {{ 18 = 0.6, 16 = 0.4 }} }}
[[layer]]
name = "base"
formula = "C"
substrate = true
[fit]
fixed = ["fluence_scale", "gain_keV", "offset_keV", "fwhm_keV", "stopping", "straggling"]
windows = [[300, 800]]
walkers = 8
tau_multiple = 20
max_steps = {steps}
check_every = 100
band_draws = 20
[fit.free]
"upper.areal_density" = {{ uniform = [150.0, 600.0] }}
"lower.areal_density" = {{ uniform = [250.0, 1000.0] }}
"lower.composition" = true
"""
TRUTH = {"upper.areal_density": 300.0, "lower.areal_density": 500.0,
         "lower.fraction.Ti": 1.0 / 3.0}


def _simulated(tmp_path, steps=1200, seed=5):
    path = tmp_path / "tracer.toml"
    path.write_text(RUN.format(steps=steps))
    run = forward.load_run(path)
    _, columns = forward.simulate(run, n_channels=1000, poisson=True, seed=seed)
    spectrum = tmp_path / "tracer.csv"
    forward.write_spectrum_csv(spectrum, {"channel": columns["channel"],
                                          "counts": columns["counts"]},
                               ["invented: two-layer 18O tracer, Poisson noise"])
    return path, spectrum


def test_each_layer_gets_its_own_oxygen_column_and_mass(tmp_path):
    run_path, spectrum = _simulated(tmp_path, steps=10)
    _, objective = prepare(run_path, spectrum)
    spec = objective.spec
    upper, lower = spec.layers[0], spec.layers[1]
    o_upper = [spec.species[j] for j in np.flatnonzero(upper.composition)
               if spec.species[j] != "Ti"]
    o_lower = [spec.species[j] for j in np.flatnonzero(lower.composition)
               if spec.species[j] != "Ti"]
    assert o_upper != o_lower  # two oxygens, one per enrichment
    assert [p.name for p in spec.parameters] == [
        "upper.areal_density", "lower.areal_density", "lower.share.Ti"]
    # thicknesses in nm for a sampled composition need each oxygen's own mass: 0.6 18O +
    # 0.4 16O in the lower layer (masses 17.99916 u and 15.99491 u, NIST atomic weights)
    theta = np.array([300.0, 500.0, 1.0 / 3.0])
    names = objective.derived_names()[0]
    values = dict(zip(names, objective.derived(theta)))
    mass = (47.867 + 2 * (0.6 * 17.99915961 + 0.4 * 15.99491462)) / 3  # u per atom
    atoms = 4.2 * 6.02214076e23 / mass  # rho N_A / M (CODATA Avogadro constant)
    assert values["lower.thickness_nm"] == pytest.approx(500e15 / atoms * 1e7, rel=1e-6)
    assert values["lower.fraction.Ti"] == pytest.approx(1.0 / 3.0, rel=1e-12)


@pytest.mark.slow
def test_two_enrichments_invert_to_the_truth(tmp_path):
    run_path, spectrum = _simulated(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run_path, spectrum, tmp_path / "r.h5", seed=2, progress=False)
    assert res.converged
    for name, truth in TRUTH.items():
        med, lo, hi = res.interval(name, 95)
        assert lo < truth < hi, (name, lo, truth, hi)
    # As narrow as the counts allow: the Cramer-Rao bound (Cramer 1946; Rao 1945) at the truth
    # is about 1.7 % and 1.1 % of the two areal densities, a 95 % interval of about 3.9 bounds;
    # allow twice that.  Fitting the lower layer with the upper layer's isotope mix widens the
    # intervals some twenty-fold (measured while writing this test).
    _, objective = prepare(run_path, spectrum)
    theta = nominal_theta(objective, {"upper.areal_density": 300.0,
                                      "lower.areal_density": 500.0, "lower.share.Ti": 1 / 3})
    fisher = fisher_matrix(objective, theta)
    for i, name in enumerate(("upper.areal_density", "lower.areal_density")):
        med, lo, hi = res.interval(name, 95)
        assert hi - lo < 2 * 3.92 * cramer_rao_sd(fisher, i), name
    # the upper layer's thickness in nm follows from its own composition (run file values)
    upper = forward.load_run(run_path).layers[0]
    med, lo, hi = res.interval("upper.thickness_nm", 95)
    assert lo < upper.thickness_nm < hi
    # the predictive spectrum covers the counts: each oxygen signal is fitted
    band = res.spectrum["predictive"]
    counts = res.spectrum["counts"]
    window = res.spectrum["window"]
    inside = (counts >= band[0]) & (counts <= band[4])
    assert inside[window].mean() > 0.9


def test_predictions_below_the_fit_window_come_from_a_full_range_model(tmp_path):
    run_path, spectrum = _simulated(tmp_path, steps=10)
    _, objective = prepare(run_path, spectrum)
    assert objective.model.first_channel == 300  # the fit's model skips channels below 300
    theta = nominal_theta(objective, {"upper.areal_density": 300.0,
                                      "lower.areal_density": 500.0, "lower.share.Ti": 1 / 3})
    every = objective.predict(theta, "all")
    # the run file's own sample, sharp interfaces, every channel (forward.simulate)
    _, columns = forward.simulate(forward.load_run(run_path), n_channels=1000)
    expected = columns["expected"]
    assert every[:300].sum() > 0
    big = expected > 1.0
    np.testing.assert_allclose(every[big], expected[big], rtol=1e-9)
    # inside the window both models agree; they differ only where the fit's shorter slice grid
    # ends (measured: 3.5e-6 relative in channels with more than one count)
    window = objective.predict(theta)
    big = window > 1.0
    np.testing.assert_allclose(every[objective.mask][big], window[big], rtol=1e-5)
