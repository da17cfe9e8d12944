"""The straggling scale and the stopping slope: what they do to the model, checked independently.

Every sample here is invented for the tests.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import forward
from forward._kernel import _sloped_tables

from forward_runs import FILM_ON_SUBSTRATE, make_run


def test_straggling_variances_are_proportional_to_the_straggling_scale():
    # dV/dx = -2 S' V + s W with V = 0 at the surface is linear in s, inward and outward
    # (the transport equation of forward._straggling); energies do not depend on s at all
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE, th1=10.0, th2=25.0))
    fr = model.layer_fractions()
    base = model.edge_table(fr)
    for s in (0.0, 0.4, 2.5):
        nu = model.default_nuisance()
        nu.straggling_scale = s
        rec = model.edge_table(fr, nu)
        ok = np.isfinite(base[..., 1])
        np.testing.assert_array_equal(np.isfinite(rec[..., 1]), ok)
        np.testing.assert_allclose(rec[..., 1][ok], s * base[..., 1][ok], rtol=1e-12, atol=1e-12)
        np.testing.assert_array_equal(rec[..., 0][ok], base[..., 0][ok])


def test_straggling_scale_widens_a_buried_edge():
    # the low-energy edge of a buried film's signal gets wider with more straggling and its
    # total count does not change (straggling only moves counts; common practice)
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE, offset=300.0))
    fr = model.layer_fractions()
    col = model.species.index("Sb")
    nu = model.default_nuisance()
    nu.fwhm_keV = 1.0
    narrow = model.expected_counts(fr, nu, per_species=True)[col]
    nu.straggling_scale = 4.0
    wide = model.expected_counts(fr, nu, per_species=True)[col]
    assert wide.sum() == pytest.approx(narrow.sum(), rel=1e-6)

    def edge_width(row):
        # 20-80 % rise of the back (low-energy) edge, in channels
        top = row.max()
        lo = np.flatnonzero(row > 0.2 * top)[0]
        hi = np.flatnonzero(row > 0.8 * top)[0]
        return hi - lo

    assert edge_width(wide) > 1.5 * edge_width(narrow)


def test_sloped_tables_have_the_derivatives_of_the_tilted_stopping():
    # The kernel's once-per-call rescaling of S, S', S'' for a slope b against central
    # differences of the tilted stopping function S(E) (E/1000)^b, built directly from
    # forward.StoppingModel (not from the model's tables).  The step is the model's own
    # 0.25 keV (its untilted S', S'' are central differences with that step), so that the
    # comparison also holds where the stopping function has a kink (e.g. where the nuclear
    # stopping switches to its unscreened form).
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    stop = forward.StoppingModel("4He")
    e = model.table_energy_keV
    slope = np.linspace(-0.15, 0.2, len(model.elements))
    S2, dS2, d2S2 = _sloped_tables(float(e[0]), model.table_step_keV, model._S, model._dS,
                                   model._d2S, slope, 1000.0)
    h = 0.25
    sel = e > 50.0
    for i, sym in enumerate(model.elements):
        def tilted(x, sym=sym, b=slope[i]):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return np.asarray(stop.element(sym, x)) / 1000.0 * (x / 1000.0) ** b

        ee = e[sel]
        direct = tilted(ee)
        d1 = (tilted(ee + h) - tilted(ee - h)) / (2 * h)
        d2 = (tilted(ee + h) - 2 * direct + tilted(ee - h)) / (h * h)
        np.testing.assert_allclose(S2[i, sel], direct, rtol=1e-12)
        # errors relative to each derivative's largest value (S' passes through zero at the
        # stopping maximum); measured at most 1e-5 for S' (where the stopping has a kink) and
        # 2e-6 for S''
        err1 = np.max(np.abs(dS2[i, sel] - d1)) / np.max(np.abs(d1))
        err2 = np.max(np.abs(d2S2[i, sel] - d2)) / np.max(np.abs(d2))
        assert err1 < 3e-5 and err2 < 1e-5, (sym, err1, err2)
    # a zero slope leaves the tables exactly as they are
    S0, dS0, d2S0 = _sloped_tables(float(e[0]), model.table_step_keV, model._S, model._dS,
                                   model._d2S, np.zeros(len(model.elements)), 1000.0)
    assert np.array_equal(S0, model._S) and np.array_equal(d2S0, model._d2S)


def test_stopping_slope_equals_the_same_tilt_given_as_a_user_table(tmp_path):
    # The slope nuisance on Si against a run whose Si stopping is a user table of the tilted
    # built-in stopping (a different path through the code: log-log interpolation of a table
    # read from a file, derivatives by central differences).  Slope 0.1 at 1000 keV
    # reference: Si stopping 6 % higher at 1800 keV and 37 % lower at 10 keV.  Both models
    # run on the same slice table.
    b = 0.1
    stop = forward.StoppingModel("4He")
    energy = np.arange(5.0, 2000.05, 0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        total = np.asarray(stop.element("Si", energy)) * (energy / 1000.0) ** b
    table = tmp_path / "si_tilted.csv"
    table.write_text("# invented for a test: built-in Si stopping tilted by (E/1000 keV)^0.1\n"
                     "energy_keV,stopping\n"
                     + "".join(f"{e:.17g},{s:.17g}\n" for e, s in zip(energy, total)))
    physics = f'[physics]\nstopping_tables = {{ Si = "{table}" }}\n'
    plain = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE, energy=1800.0))
    tabled = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE, energy=1800.0, physics=physics))
    nu = plain.default_nuisance()
    nu.stopping_slope = np.where(np.array(plain.elements) == "Si", b, 0.0)
    fr, widths = plain.layer_fractions(), plain.grid.widths_1e15
    tilted = plain.expected_counts(fr, nu)
    reference = tabled.expected_counts(fr, widths_1e15=widths)
    untilted = plain.expected_counts(fr)
    top = reference.max()
    # the tilt matters (30 % of the peak somewhere) and the two routes agree far better:
    # measured 7.5e-6 of the peak, at the lowest channels (with a 0.5 keV table, 1.9e-4:
    # the table's numerical second derivative limits it)
    assert np.max(np.abs(untilted - reference)) > 0.1 * top
    assert np.max(np.abs(tilted - reference)) < 3e-5 * top


def test_stopping_scale_and_slope_meet_at_the_reference_energy():
    # a slope leaves the stopping unchanged at 1000 keV: a thin film at the surface seen with a
    # 1000 keV beam has the same width (common practice: width = [eps] N) whatever the slope,
    # to first order in the film's energy loss
    layers = """
[[layer]]
formula = "Pt"
areal_density_1e15 = 100
[[layer]]
formula = "C"
substrate = true
"""
    model = forward.ForwardModel(make_run(layers, energy=1000.0, gain=0.5, offset=100.0))
    fr = model.layer_fractions()
    col = model.species.index("Pt")
    nu = model.default_nuisance()
    nu.fwhm_keV = 0.0
    nu.straggling_scale = 0.0
    flat = model.expected_counts(fr, nu, per_species=True)[col]
    nu.stopping_slope = np.array([0.3 if e == "Pt" else 0.0 for e in model.elements])
    tilted = model.expected_counts(fr, nu, per_species=True)[col]
    nu.stopping_slope = np.zeros(len(model.elements))
    nu.stopping_scale = np.array([1.1 if e == "Pt" else 1.0 for e in model.elements])
    scaled = model.expected_counts(fr, nu, per_species=True)[col]
    width = lambda row: np.count_nonzero(row > 0.5 * row.max())  # noqa: E731
    # about 46 channels wide; the tilt moves it by at most one channel (the outward path at
    # K E0 = 920 keV sees 2.5 % less stopping), a 10 % scale by about four
    assert width(flat) > 30
    assert abs(width(tilted) - width(flat)) <= 1
    assert width(scaled) - width(flat) >= 3


def test_bad_nuisance_values_raise_input_errors():
    model = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    fr = model.layer_fractions()
    nu = model.default_nuisance()
    nu.straggling_scale = -0.1
    with pytest.raises(forward.InputError, match="straggling_scale"):
        model.expected_counts(fr, nu)
    nu = model.default_nuisance()
    nu.stopping_slope = np.full(len(model.elements), np.nan)
    with pytest.raises(forward.InputError, match="slopes must be finite"):
        model.expected_counts(fr, nu)
    nu.stopping_slope = np.zeros(2)
    with pytest.raises(forward.InputError, match="one per element"):
        model.expected_counts(fr, nu)


def test_straggling_correction_moves_between_the_laws():
    # rate = Bohr * ratio(chi)**a: a = 1 is the Lindhard-Scharff law, a = 0 Bohr's (the two
    # laws as forward.straggling_rate gives them, each built into its own model), a = 0.5 their
    # geometric mean, and dW/dE = a W d ln(ratio)/dE by central differences of that product
    ls = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE))
    bohr = forward.ForwardModel(make_run(FILM_ON_SUBSTRATE,
                                         physics='[physics]\nstraggling = "bohr"\n'))
    assert ls.default_nuisance().straggling_correction == 1.0
    assert bohr.default_nuisance().straggling_correction == 0.0
    w1, dw1 = ls.straggling_tables(1.0)
    np.testing.assert_allclose(w1, ls._W, rtol=1e-12)
    w0, dw0 = ls.straggling_tables(0.0)
    np.testing.assert_allclose(w0, bohr._W, rtol=1e-12)
    np.testing.assert_array_equal(dw0, 0.0)
    wh, dwh = ls.straggling_tables(0.5)
    np.testing.assert_allclose(wh, np.sqrt(ls._W * bohr._W), rtol=1e-12)
    e = ls.table_energy_keV
    for i, sym in enumerate(ls.elements):
        z2 = forward.element(sym).z

        def rate(x, z2=z2):
            return (forward.straggling_rate(2, ls._m1, {sym: 1.0}, x, correction="none")
                    * np.sqrt(forward.straggling_rate(2, ls._m1, {sym: 1.0}, x)
                              / forward.straggling_rate(2, ls._m1, {sym: 1.0}, x,
                                                        correction="none")))
        inner = slice(10, -10)
        numeric = (rate(e[inner] + 0.01) - rate(e[inner] - 0.01)) / 0.02
        np.testing.assert_allclose(dwh[i, inner], numeric, rtol=1e-3, atol=1e-9)
    # through the whole model: an LS run at a = 0 gives the Bohr run's spectrum
    fr = ls.layer_fractions()
    nu = ls.default_nuisance()
    nu.straggling_correction = 0.0
    np.testing.assert_allclose(ls.expected_counts(fr, nu), bohr.expected_counts(fr),
                               rtol=1e-12, atol=1e-12)
    nu.straggling_correction = float("nan")
    with pytest.raises(forward.InputError, match="straggling_correction"):
        ls.expected_counts(fr, nu)
    # None (the run's law) and the law's exponent give the law's own tables whatever was
    # asked before (the cache of the last correction once answered None with it)
    ls.straggling_tables(0.3)
    for asked in (None, 1.0):
        w, dw = ls.straggling_tables(asked)
        assert w is ls._W and dw is ls._dW
    nu.straggling_correction = None
    ls.straggling_tables(0.3)
    np.testing.assert_array_equal(ls.expected_counts(fr, nu), ls.expected_counts(fr))


def test_straggling_correction_is_a_default_nuisance_centred_on_the_law():
    import inversion
    from inversion.fit._information import nominal_theta

    run = make_run(FILM_ON_SUBSTRATE, physics='[physics]\nstraggling = "bohr"\n'
                   '[fit.free]\n"layer 1.areal_density" = true\n')
    _, obj = inversion.prepare(run, np.ones(1024))
    lines = obj.spec.describe_priors()
    assert "straggling_correction [1]: normal(0, 0.5) (default)" in lines
    theta = nominal_theta(obj, {"layer 1.areal_density": 250.0})
    assert obj.unpack(theta).nuisance.straggling_correction == 0.0
    theta[obj.spec.names.index("straggling_correction")] = 3.5  # beyond the limits (-2, 3)
    assert obj.unpack(theta) is None
