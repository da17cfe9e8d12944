"""The spectrum model: kernel against its plain numpy reference, tables, paths, bookkeeping.

All samples here are invented for the tests.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.special import ndtr

import forward
from forward._kernel import (KernelInputs, _sloped_tables, broadening_table, spectrum_kernel,
                             step_integral_table_eval)
from forward._path import Slab, detected_energy
from forward._straggling import straggling_rate

from reference_model import spectrum_kernel_reference, step_integral

from forward_runs import FILM_ON_SUBSTRATE, TRACER, make_run, run_text


def _compare(model, fractions, nuisance=None, widths_1e15=None):
    for per_species, per_isotope in ((False, False), (True, False), (False, True)):
        inputs = model.kernel_inputs(fractions, nuisance, widths_1e15=widths_1e15,
                                     per_species=per_species, per_isotope=per_isotope)
        fast = spectrum_kernel(*inputs)
        slow = spectrum_kernel_reference(*inputs)
        big = slow > 1.0
        assert big.sum() > 50
        rel = np.abs(fast[big] - slow[big]) / slow[big]
        assert rel.max() < 1e-6, rel.max()
        # channels with fewer counts agree in absolute terms
        assert np.max(np.abs(fast - slow)) < 1e-6 * slow.max()


# ----------------------------------------------------------------------------------------------
# kernel against the plain numpy reference (same algorithm, exact erf-based step integrals)


def test_kernel_matches_reference_layered_film_on_substrate():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    _compare(model, model.layer_fractions())


def test_kernel_matches_reference_tracer_isotope_and_quadratic_calibration():
    model = forward.ForwardModel(make_run(TRACER, quad=2e-4, offset=30.0))
    assert "O[18]" in model.species and "O" in model.species
    _compare(model, model.layer_fractions())


def test_kernel_matches_reference_free_form_fractions():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE), depth_limit_1e15=1500.0)
    rng = np.random.default_rng(20261201)
    n, m = len(model.grid), len(model.species)
    fr = rng.uniform(0.0, 1.0, size=(n, m)) * (rng.uniform(size=(n, m)) > 0.3)
    fr[5:8] = 0.0  # a gap of vacuum inside the sample
    _compare(model, fr)


def test_kernel_matches_reference_with_changed_nuisance():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    nu = model.default_nuisance()
    nu.fluence_scale, nu.gain_keV, nu.offset_keV, nu.quadratic_keV = 1.1, 2.03, 45.0, 1e-4
    nu.fwhm_keV = 21.0
    nu.stopping_scale = np.array([1.05, 0.97, 1.02, 0.95, 1.0])[: len(model.elements)]
    _compare(model, model.layer_fractions(), nu)


def test_kernel_matches_reference_with_straggling_scale_and_stopping_slopes():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    nu = model.default_nuisance()
    nu.straggling_scale = 1.7
    nu.stopping_scale = np.array([1.03, 0.98, 1.01, 0.97, 1.02])[: len(model.elements)]
    nu.stopping_slope = np.array([0.08, -0.06, 0.12, -0.1, 0.05])[: len(model.elements)]
    _compare(model, model.layer_fractions(), nu)
    # the kernel rescales its tables only from the lowest energy it looks up: the same bits as
    # tables rescaled whole beforehand and no slope
    inputs = model.kernel_inputs(model.layer_fractions(), nu)
    whole = _sloped_tables(inputs.tab_e0_keV, inputs.tab_step_keV, inputs.S, inputs.dS,
                           inputs.d2S, inputs.stopping_slope, inputs.slope_reference_keV)
    given = inputs._replace(S=whole[0], dS=whole[1], d2S=whole[2],
                            stopping_slope=np.zeros_like(inputs.stopping_slope))
    assert np.array_equal(spectrum_kernel(*inputs), spectrum_kernel(*given))
    nu.straggling_scale = 0.0  # no straggling at all: detector resolution alone
    _compare(model, model.layer_fractions(), nu)


def test_kernel_matches_reference_on_a_grid_of_the_callers_own():
    # a grid that follows thinner and thicker layers than the run file's, and a coarse grid of
    # arbitrary widths with random fractions (any row count)
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    for t in ((180.0, 520.0), (330.0, 250.0)):
        grid = model.sample_grid(t)
        _compare(model, model.layer_fractions(grid), widths_1e15=grid.widths_1e15)
    rng = np.random.default_rng(5)
    widths = rng.uniform(5.0, 40.0, size=137)
    fr = rng.uniform(0.0, 1.0, size=(137, len(model.species)))
    _compare(model, fr, widths_1e15=widths)


def test_kernel_inputs_are_named_like_the_kernel_and_the_reference():
    # bookkeeping: the named inputs are the kernel's and the reference's arguments, in order
    import inspect

    kernel_names = tuple(inspect.signature(spectrum_kernel.py_func).parameters)
    reference_names = tuple(inspect.signature(spectrum_kernel_reference).parameters)
    assert KernelInputs._fields == kernel_names == reference_names
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    inputs = model.kernel_inputs(model.layer_fractions(), per_species=True)
    assert isinstance(inputs, KernelInputs)
    assert inputs.widths_1e15 is model.grid.widths_1e15
    assert inputs.rows_mode == 1 and inputs.straggling_scale == 1.0
    assert not inputs.stopping_slope.any() and inputs.slope_reference_keV == 1000.0


# ----------------------------------------------------------------------------------------------
# tables against the direct formulas


def test_stopping_and_straggling_tables_interpolate_within_bounds():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    stop = forward.StoppingModel("4He")
    rng = np.random.default_rng(7)
    energies = rng.uniform(50.0, 1800.0, 400)
    n_tab = model.table_energy_keV.size
    for i, sym in enumerate(model.elements):
        comp = np.zeros(len(model.elements))
        comp[i] = 1.0
        inp = model.kernel_inputs(model.layer_fractions())
        from reference_model import _Tables  # the same interpolation the kernel uses
        tab = _Tables(inp.tab_e0_keV, inp.tab_step_keV, inp.S, inp.dS, inp.d2S, inp.W, inp.dW,
                      inp.stopping_scale)
        s, _, _, w, _ = tab.mixture(energies, comp)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            direct = np.asarray(stop.element(sym, energies)) / 1000.0
        # cubic Hermite on a 2 keV grid: the stopping formula is smooth, error far below 1e-5
        assert np.max(np.abs(s / direct - 1.0)) < 1e-5
        rate = straggling_rate(2, model._m1, {sym: 1.0}, energies)
        # linear interpolation of the straggling rate: 1e-4 relative except near the capped
        # kink of the Lindhard-Scharff ratio (forward._straggling), where 1e-3
        assert np.max(np.abs(w / rate - 1.0)) < 1e-3
    assert n_tab == math.ceil((1.1 * 1800.0 - 10.0) / 2.0) + 1


def test_cross_section_table_interpolates_within_bounds():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    rng = np.random.default_rng(3)
    energies = rng.uniform(60.0, 1800.0, 300)
    grid = model.table_energy_keV
    for q, label in enumerate(model.isotope_labels):
        a = int("".join(c for c in label if c.isdigit()))
        sym = "".join(c for c in label if c.isalpha())
        el = forward.element(sym)
        mass = forward.isotope(sym, a).mass_u
        direct = forward.rutherford_cross_section(2, model._m1, el.z, mass, energies, 165.0,
                                                  screening="andersen")
        interp = np.interp(energies, grid, model._e3sigma[q]) / energies**3
        rel = np.abs(interp / direct - 1.0)
        # measured: 1.2e-5 for Sb at 60 keV, where the screening correction bends most
        assert np.max(rel) < 2e-5, label
        # measured: 1.4e-7 for Sb just above 200 keV
        assert np.max(rel[energies > 200.0]) < 3e-7, label


def test_step_integral_table_error_below_1e_9():
    # f(u) = u Phi(u) + phi(u) against scipy.special.ndtr (the normal CDF); reference library.
    ftab, fder = broadening_table()
    x = np.linspace(-9.0, 9.0, 20001) * 3.0
    s = 3.0
    table = step_integral_table_eval(x, s, ftab, fder, 8.0, 1.0 / 64.0)
    exact = x * ndtr(x / s) + s * np.exp(-0.5 * (x / s) ** 2) / math.sqrt(2 * math.pi)
    assert np.max(np.abs(table - exact)) < 1e-9 * s
    assert np.allclose(step_integral(x, s), exact, rtol=0, atol=1e-14)


# ----------------------------------------------------------------------------------------------
# paths against the slow accurate reference of forward._path


def _slabs(model, run):
    stop = forward.StoppingModel(run.beam.species)
    slabs = []
    for layer in run.layers:
        fr = dict(layer.fractions)
        t = layer.areal_density_1e15 if layer.areal_density_1e15 is not None else \
            float(model.grid.edges_1e15[-1])
        slabs.append(Slab(lambda e, fr=fr: stop.mixture(fr, e),
                          lambda e, fr=fr: straggling_rate(2, run.beam.ion.mass_u, fr, e), t))
    return slabs


def test_detected_energy_and_variance_match_slow_reference():
    run = make_run(FILM_ON_SUBSTRATE, th1=10.0, th2=25.0)
    model = forward.ForwardModel(run)
    rec = model.edge_table()
    slabs = _slabs(model, run)
    edges = model.grid.edges_1e15
    for q in (0, model.isotope_labels.index("28Si"), model.isotope_labels.index("16O")):
        ok = np.flatnonzero(np.isfinite(rec[:, q, 0]) & (rec[:, q, 0] > 200.0))
        idx = ok[:: max(1, ok.size // 12)]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            before, det, var = detected_energy(slabs, model._iso_k[q], edges[idx], 1800.0,
                                               10.0, 25.0)
        # algorithm error bound asked of the model: < 0.05 keV, < 1e-3 relative in variance
        assert np.max(np.abs(rec[idx, q, 2] - before)) < 0.01
        assert np.max(np.abs(rec[idx, q, 0] - det)) < 0.05
        deep = var > 1.0
        assert np.max(np.abs(rec[idx, q, 1][deep] / var[deep] - 1.0)) < 1e-3


# ----------------------------------------------------------------------------------------------
# bookkeeping


def test_counts_exactly_linear_in_charge_and_solid_angle():
    base = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE)).expected_counts(
        forward.ForwardModel(make_run(FILM_ON_SUBSTRATE)).layer_fractions())
    m2 = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE, charge=15.0, omega=0.5))
    scaled = m2.expected_counts(m2.layer_fractions())
    # 15 uC / 5 uC times 0.5 msr / 2.5 msr, exact up to rounding
    np.testing.assert_allclose(scaled, base * 3.0 * 0.2, rtol=1e-12, atol=1e-12 * base.max())


def test_heavier_element_appears_at_higher_energy():
    layers = """
[[layer]]
formula = "Co0.2Sb0.2Al0.2Si0.2O0.2"
areal_density_1e15 = 200
[[layer]]
formula = "C"
substrate = true
"""
    model = forward.ForwardModel(make_run(layers))
    per = model.expected_counts(model.layer_fractions(), per_species=True)
    energy = model.channel_energy_keV()
    # the leading edge: highest energy where the signal exceeds 5 % of its maximum
    top = {s: energy[np.flatnonzero(row > 0.05 * row.max())].max()
           for s, row in zip(model.species, per)}
    # common practice: K grows with target mass (Chu, Mayer and Nicolet 1978)
    assert top["Sb"] > top["Co"] > top["Si"] > top["Al"] > top["O"]


def test_per_species_rows_add_up_to_total():
    model = forward.ForwardModel(make_run(TRACER))
    fr = model.layer_fractions()
    np.testing.assert_allclose(model.expected_counts(fr, per_species=True).sum(axis=0),
                               model.expected_counts(fr), rtol=1e-12, atol=1e-9)


def test_resolution_conserves_counts_of_a_film_inside_the_channel_range():
    layers = """
[[layer]]
formula = "Ge0.5Se0.5"
areal_density_1e15 = 300
"""
    model = forward.ForwardModel(make_run(layers, offset=300.0))
    fr = model.layer_fractions()
    sharp = model.default_nuisance()
    sharp.fwhm_keV = 0.0
    wide = model.default_nuisance()
    wide.fwhm_keV = 30.0
    total_sharp = model.expected_counts(fr, sharp).sum()
    total_wide = model.expected_counts(fr, wide).sum()
    assert total_sharp > 1e4
    assert abs(total_wide / total_sharp - 1.0) < 1e-6


def test_vacuum_rows_add_nothing():
    layers = """
[[layer]]
formula = "Ge0.5Se0.5"
areal_density_1e15 = 300
"""
    short = forward.ForwardModel(make_run(layers))
    deep = forward.ForwardModel(make_run(layers), depth_limit_1e15=2000.0)
    fr = deep.layer_fractions()
    assert len(deep.grid) > len(short.grid) and not fr[len(short.grid):].any()
    np.testing.assert_allclose(deep.expected_counts(fr),
                               short.expected_counts(short.layer_fractions()), rtol=1e-12, atol=1e-12)


def test_pileup_moves_counts_to_summed_energies():
    physics = """
[physics.pileup]
enabled = true
count_rate_hz = 20000
resolving_time_us = 1.0
"""
    layers = """
[[layer]]
formula = "Ge0.5Se0.5"
areal_density_1e15 = 300
"""
    off = forward.ForwardModel(make_run(layers, offset=300.0))
    on = forward.ForwardModel(make_run(layers, offset=300.0, physics=physics), n_channels=1500)
    p = 0.02
    single = off.expected_counts(off.layer_fractions())
    piled = on.expected_counts(on.layer_fractions())
    # first order: (1 - p) singles plus p N / 2 pulses at summed energies
    assert abs(piled.sum() - single.sum() * (1.0 - p / 2.0)) < 1e-9 * single.sum()
    np.testing.assert_allclose(piled[: single.size][single > 10],
                               (1 - p) * single[single > 10], rtol=1e-9)
    assert piled[single.size:].sum() > 0.49 * p * single.sum()


def test_bad_fraction_table_raises_input_error():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    with pytest.raises(forward.InputError, match="n_slices, n_species"):
        model.expected_counts(np.ones((3, 2)))
    fr = model.layer_fractions()
    fr[0, 0] = -0.1
    with pytest.raises(forward.InputError, match=">= 0"):
        model.expected_counts(fr)
    nu = model.default_nuisance()
    nu.stopping_scale = np.ones(2)
    with pytest.raises(forward.InputError, match="one per element"):
        model.expected_counts(model.layer_fractions(), nu)


def test_grid_respects_slice_rule_and_layer_boundaries():
    run = make_run(FILM_ON_SUBSTRATE)
    model = forward.ForwardModel(run)
    edges = model.grid.edges_1e15
    assert 250.0 in edges and 650.0 in edges
    fr = model.layer_fractions()
    np.testing.assert_allclose(fr.sum(axis=1), 1.0)
    # each slice loses at most slice_fraction * FWHM in and out for the nominal sample:
    # [eps] w = (K S(E)/cos th1 + S(K E)/cos th2) w (Chu, Mayer and Nicolet 1978)
    rec = model.edge_table()
    stop = forward.StoppingModel("4He")
    q = model.isotope_labels.index("28Si")
    k = model._iso_k[q]
    e_in = rec[:-1, q, 2]
    sub = np.flatnonzero(np.isfinite(e_in) & (edges[:-1] >= 650.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        loss = (k * stop.element("Si", e_in[sub]) * model.inv_cos_in
                + stop.element("Si", k * e_in[sub]) * model.inv_cos_out) / 1000.0 \
            * model.grid.widths_1e15[sub]
    assert loss.max() < 0.25 * 16.0 * 1.01 and loss.max() > 0.25 * 16.0 * 0.9


def test_nuisance_round_trip():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    nu = model.default_nuisance()
    n = len(model.elements)
    nu.straggling_scale = 1.3
    nu.stopping_slope = np.linspace(-0.1, 0.1, n)
    arr = nu.to_array()
    names = forward.Nuisance.array_names(model.elements)
    assert arr.size == 7 + 2 * n == len(names)
    # layout: the five scalars, the scales, the straggling scale, the slopes, the correction
    assert names[5:5 + n] == [f"stopping_scale_{e}" for e in model.elements]
    assert names[5 + n] == "straggling_scale" and arr[5 + n] == 1.3
    assert names[6 + n:6 + 2 * n] == [f"stopping_slope_{e}" for e in model.elements]
    assert names[-1] == "straggling_correction" and arr[-1] == 1.0  # the default law's
    for back in (forward.Nuisance.from_array(arr), forward.Nuisance.from_array(arr, n)):
        assert np.array_equal(back.to_array(), arr)
    # the layout before the correction (6 + 2 n values): the run's law
    mid = forward.Nuisance.from_array(arr[:-1])
    assert mid.straggling_correction is None and np.isnan(mid.to_array()[-1])
    assert np.array_equal(mid.to_array()[:-1], arr[:-1])
    # the oldest layout (5 + n values) still reads, with straggling scale 1 and no slopes
    old = forward.Nuisance.from_array(arr[:5 + n], n_elements=n)
    assert old.straggling_scale == 1.0 and np.array_equal(old.stopping_scale, nu.stopping_scale)
    assert np.array_equal(old.to_array()[6 + n:6 + 2 * n], np.zeros(n))
    with pytest.raises(ValueError, match="n_elements"):
        forward.Nuisance.from_array(arr[:5])
    # a nuisance made without slopes (empty array) means no tilt
    plain = forward.Nuisance(*arr[:5], nu.stopping_scale)
    assert plain.stopping_slope.size == 0 and plain.straggling_scale == 1.0
    np.testing.assert_array_equal(model.expected_counts(model.layer_fractions(), plain),
                                  model.expected_counts(model.layer_fractions(),
                                                        model.default_nuisance()))


def test_depth_map_runs_from_surface_edge_down():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    maps = model.depth_map()
    e, d = maps["Si"]
    assert d[0] == 0.0 and np.all(np.diff(e) < 0) and np.all(np.diff(d) > 0)
    # the surface edge of Si is K E0 (Chu, Mayer and Nicolet 1978: E1 = K E0 at the surface)
    k = forward.kinematic_factor(model._m1, forward.isotope("Si", 28).mass_u, 165.0)
    assert abs(e[0] - k * 1800.0) < 1e-9


# ----------------------------------------------------------------------------------------------
# the `sondage simulate` command


def _write_run(tmp_path, **kw):
    path = tmp_path / "invented.toml"
    path.write_text(run_text(TRACER, **kw))
    return path


def test_simulate_command_writes_a_spectrum_that_reads_back(tmp_path):
    from inversion.cli import main

    run_file = _write_run(tmp_path)
    out = tmp_path / "sim.csv"
    png = tmp_path / "sim.png"
    assert main(["simulate", str(run_file), "-o", str(out), "--poisson", "--seed", "11",
                 "--plot", str(png)]) == 0
    spectrum = forward.read_spectrum(str(out))
    model = forward.ForwardModel(forward.load_run(run_file))
    expected = model.expected_counts(model.layer_fractions())
    assert len(spectrum) == model.n_channels
    # the draw is the seeded Poisson draw of the expected counts (numpy's default generator)
    np.testing.assert_array_equal(spectrum.counts, np.random.default_rng(11).poisson(expected))
    header = out.read_text().splitlines()[4]
    assert header == ("channel,energy_keV,counts,expected,expected_Ti,expected_O18,expected_O,"
                      "expected_C")
    assert png.stat().st_size > 10000
    # without --poisson the counts column is the expected spectrum itself
    out2 = tmp_path / "exact.csv"
    assert main(["simulate", str(run_file), "-o", str(out2), "--channels", "700"]) == 0
    with pytest.warns(UserWarning, match="not whole numbers"):
        exact = forward.read_spectrum(str(out2))
    wide = forward.ForwardModel(forward.load_run(run_file), n_channels=700)
    assert len(exact) == 700 > model.n_channels
    np.testing.assert_allclose(exact.counts, wide.expected_counts(wide.layer_fractions()),
                               rtol=1e-15)


def test_simulate_command_rejects_seed_without_poisson(tmp_path, capsys):
    from inversion.cli import main

    run_file = _write_run(tmp_path)
    assert main(["simulate", str(run_file), "-o", str(tmp_path / "x.csv"), "--seed", "3"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--seed" in err[0]


def test_first_channel_skips_only_what_lies_below_it():
    # Channels from first_channel up must not change beyond the kernel's interpolation error
    # (the deep substrate that is skipped cannot reach them: its signal lies more than
    # 8 sigma + 150 keV lower; the outward characteristics start elsewhere, which moves the
    # Hermite interpolation nodes: about 1e-6 relative, far inside the 0.05 keV bound on
    # detected energies tested above); channels below read zero; the slice grid is shorter.
    run = make_run(FILM_ON_SUBSTRATE)
    full = forward.ForwardModel(run, n_channels=700)
    first = 250
    cut = forward.ForwardModel(run, n_channels=700, first_channel=first)
    assert len(cut.grid) < len(full.grid)
    a = full.expected_counts(full.layer_fractions())
    b = cut.expected_counts(cut.layer_fractions())
    assert np.all(b[:first] == 0.0)
    big = a[first:] > 1.0
    assert np.max(np.abs(b[first:][big] / a[first:][big] - 1.0)) < 1e-5
    with pytest.raises(forward.InputError, match="first_channel"):
        forward.ForwardModel(run, n_channels=700, first_channel=700)


def test_per_isotope_rows_add_up_to_each_species():
    # bookkeeping: the isotopes of a species sum to that species' spectrum, and the tracer's
    # 18O and 16O signals sit apart (K rises with target mass: common practice)
    model = forward.ForwardModel(make_run(TRACER))
    fr = model.layer_fractions()
    per_sp = model.expected_counts(fr, per_species=True)
    per_iso = model.expected_counts(fr, per_isotope=True)
    assert per_iso.shape == (len(model.isotope_labels), model.n_channels)
    for sp in range(len(model.species)):
        rows = per_iso[model.isotope_species == sp]
        np.testing.assert_allclose(rows.sum(axis=0), per_sp[sp], rtol=1e-12, atol=1e-9)
    e = model.channel_energy_keV()
    centroid = {lab: float((row * e).sum() / row.sum())
                for lab, row in zip(model.isotope_labels, per_iso) if row.sum() > 0}
    assert centroid["18O"] > centroid["16O"]
