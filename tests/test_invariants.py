"""Physics invariants of the forward model over random layered samples (hypothesis), and one
inversion of a noiseless spectrum that must land on the truth.

Every sample here is invented: random elements from a list of film materials, random areal
densities, one to three layers, with or without a substrate.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import forward
from benchmarks._runs import run_head

__all__: list[str] = []

#: elements common in thin-film work, light to heavy (common practice)
ELEMENTS = ("C", "N", "O", "Al", "Si", "Ti", "Cr", "Fe", "Co", "Ni", "Cu", "Ge", "Zr", "Mo",
            "Ag", "Hf", "Ta", "W", "Pt")
#: elements used for the substrate
SUBSTRATES = ("Si", "Ge", "Al")

SETTINGS = settings(max_examples=30, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])

def _layer_text(name, formula, areal_density_1e15, substrate=False):
    if substrate:
        return f'[[layer]]\nname = "{name}"\nformula = "{formula}"\nsubstrate = true\n'
    return (f'[[layer]]\nname = "{name}"\nformula = "{formula}"\n'
            f"areal_density_1e15 = {areal_density_1e15!r}\n")


def _formula(elements, weights):
    w = np.asarray(weights, dtype=float)
    w = w / w.sum()
    return "".join(f"{e}{x:.4f}" for e, x in zip(elements, w))


@st.composite
def stacks(draw, max_layers=3):
    """(layers, substrate, energy_keV): layers as (formula, areal density) from the top."""
    n = draw(st.integers(1, max_layers))
    layers = []
    for _ in range(n):
        k = draw(st.integers(1, 2))
        els = draw(st.lists(st.sampled_from(ELEMENTS), min_size=k, max_size=k, unique=True))
        weights = draw(st.lists(st.floats(0.2, 1.0), min_size=k, max_size=k))
        t = draw(st.floats(20.0, 600.0))
        layers.append((_formula(els, weights), round(t, 3)))
    substrate = draw(st.one_of(st.none(), st.sampled_from(SUBSTRATES)))
    energy = draw(st.sampled_from((1500.0, 2000.0, 2800.0)))
    return layers, substrate, energy


def _run(layers, substrate, energy, charge=5.0):
    text = run_head(title="invented: random stack", note="invented sample for a property test",
                    energy_keV=energy, charge_uC=charge, solid_angle_msr=2.0, keV_per_channel=3.0)
    for i, (formula, t) in enumerate(layers):
        text += _layer_text(f"L{i + 1}", formula, t)
    if substrate:
        text += _layer_text("sub", substrate, None, substrate=True)
    return forward.parse_run(text, source="invented.toml")


def _counts(run, per_species=False, n_channels=1024):
    model = forward.ForwardModel(run, n_channels=n_channels)
    return model, np.asarray(model.expected_counts(model.layer_fractions(),
                                                   per_species=per_species), dtype=float)


@SETTINGS
@given(stacks())
def test_counts_are_never_negative(stack):
    _, mu = _counts(_run(*stack))
    assert np.all(np.isfinite(mu))
    assert mu.max() > 0
    assert mu.min() >= -1e-9 * mu.max()  # round-off only


@SETTINGS
@given(stacks(), st.floats(0.1, 40.0))
def test_counts_are_linear_in_charge(stack, factor):
    # the yield is proportional to the number of incident ions (common practice)
    _, mu1 = _counts(_run(*stack, charge=5.0))
    _, mu2 = _counts(_run(*stack, charge=5.0 * factor))
    assert mu2.sum() == pytest.approx(factor * mu1.sum(), rel=1e-12)
    np.testing.assert_allclose(mu2, factor * mu1, rtol=1e-12, atol=1e-12 * mu1.max())


def _leading_edge(signal, window_channels=15):
    """Fractional channel of a signal's high-energy edge: where it falls through half of its
    height just below the edge (the largest value within ``window_channels`` below the last
    channel above 2 % of the maximum, so that the tails and rare heavier isotopes such as 15N
    do not count), interpolated between channels (common practice)."""
    top = int(np.flatnonzero(signal > 0.02 * signal.max())[-1])
    lo = max(0, top - window_channels)
    half = 0.5 * signal[lo:top + 1].max()
    i = int(np.flatnonzero(signal[lo:top + 1] >= half)[-1]) + lo
    if i + 1 >= signal.size:
        return float(i)
    a, b = signal[i], signal[i + 1]
    return i + (a - half) / (a - b)


@SETTINGS
@given(stacks(max_layers=2), st.sampled_from(("Al", "C", "Ti")), st.floats(150.0, 800.0))
def test_a_layer_on_top_moves_every_buried_signal_down(stack, cap, cap_1e15):
    layers, substrate, energy = stack
    model0, per0 = _counts(_run(layers, substrate, energy), per_species=True)
    present = set(model0.species)
    if cap in present:  # the cap must not add to a buried element's own signal
        cap = next(e for e in ("B", "Mg", "Sc") if e not in present)
    model1, per1 = _counts(_run([(cap, cap_1e15), *layers], substrate, energy),
                           per_species=True)
    for j, sp in enumerate(model0.species):
        j1 = list(model1.species).index(sp)
        if per0[j].max() <= 0 or per1[j1].max() <= 0:
            continue
        before, after = _leading_edge(per0[j]), _leading_edge(per1[j1])
        # energy lost crossing the cap on the way in and out (Chu, Mayer and Nicolet,
        # Backscattering Spectrometry, 1978, ch. 3): the edge must move to lower energy
        assert after < before, (sp, before, after)


@SETTINGS
@given(stacks(max_layers=1), st.floats(20.0, 400.0), st.floats(20.0, 400.0))
def test_swapping_two_slices_of_one_material_changes_nothing(stack, t1, t2):
    # two layers of the same material are one layer: their order cannot matter
    (formula, _), = stack[0]
    substrate, energy = stack[1], stack[2]
    t1, t2 = round(t1, 3), round(t2, 3)
    _, a = _counts(_run([(formula, t1), (formula, t2)], substrate, energy))
    _, b = _counts(_run([(formula, t2), (formula, t1)], substrate, energy))
    # identical physics; the slice grids differ only at the inner boundary, so allow the
    # model's own discretisation error: at most 8e-6 of the maximum over these 30 examples
    # (measured on this machine), checked at 5e-5
    np.testing.assert_allclose(a, b, rtol=0, atol=5e-5 * max(a.max(), b.max()))


@SETTINGS
@given(stacks(), st.lists(st.floats(0.5, 2.0), min_size=3, max_size=3))
def test_a_grid_that_follows_the_sample_gives_that_samples_spectrum(stack, factors):
    # The model of the run file's sample, on sample_grid(t), against a model built from a run
    # file with the areal densities t (its own grid): the same physics on two grids.  Above
    # 100 keV detected energy they agree to the model's discretisation error: at most 8e-5 of
    # the maximum over these 30 examples (measured on this machine), checked at 5e-4.  (Near
    # the 10 keV table floor, where the deepest ions stop, the two grids' last slices differ
    # and so do the lowest channels, by up to 1.5 %; no fit window reaches there.)  On the
    # run file's own areal densities the two are the same grid, and the counts are equal.
    layers, substrate, energy = stack
    model = forward.ForwardModel(_run(layers, substrate, energy), n_channels=1024)
    t = [round(t0 * f, 3) for (_, t0), f in zip(layers, factors)]
    grid = model.sample_grid(t)
    ours = model.expected_counts(model.layer_fractions(grid), widths_1e15=grid.widths_1e15)
    direct_model = forward.ForwardModel(_run([(formula, tk) for (formula, _), tk
                                              in zip(layers, t)], substrate, energy),
                                        n_channels=1024)
    direct = direct_model.expected_counts(direct_model.layer_fractions())
    above = direct_model.channel_energy_keV() > 100.0
    assert np.all(ours >= 0.0)
    assert np.max(np.abs(ours - direct)[above]) < 5e-4 * direct.max()
    nominal = model.sample_grid([t0 for _, t0 in layers])
    np.testing.assert_array_equal(
        model.expected_counts(model.layer_fractions(nominal), widths_1e15=nominal.widths_1e15),
        model.expected_counts(model.layer_fractions()))


# ----------------------------------------------------------------------------------------------
NOISELESS_RUN = run_head(
    title="invented: HfO2 on Ge, noiseless recovery", energy_keV=2200.0, charge_uC=40.0,
    solid_angle_msr=2.0, keV_per_channel=3.5, offset_keV=30.0,
    note="INVENTED test scenario (not a real sample): a hafnium oxide film on germanium") + """\
[[layer]]
name = "film"
formula = "Hf0.33O0.67"
areal_density_1e15 = 220.0
[[layer]]
name = "wafer"
formula = "Ge"
substrate = true
[fit]
fixed = ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "fluence_scale"]
walkers = 8
tau_multiple = 1000
max_steps = 150
check_every = 50
band_draws = 20
[fit.free]
"film.areal_density" = { uniform = [50, 600] }
"""


@pytest.mark.slow
def test_noiseless_spectrum_inverts_to_the_truth(tmp_path):
    import warnings

    from inversion import NotConvergedWarning, invert

    run_path = tmp_path / "run.toml"
    run_path.write_text(NOISELESS_RUN)
    run = forward.load_run(run_path)
    model = forward.ForwardModel(run, n_channels=700)
    counts = np.rint(np.maximum(model.expected_counts(model.layer_fractions()), 0.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run_path, counts, tmp_path / "r.h5", seed=1, workers=1, progress=False)
    med, lo, hi = res.interval("film.areal_density", 95)
    # expected counts rounded: only the rounding is noise, so the posterior sits on the truth
    assert lo <= 220.0 <= hi
    assert med == pytest.approx(220.0, rel=0.01)
