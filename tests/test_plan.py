"""Planning a measurement (inversion.plan, sondage plan): the Fisher pieces against closed
forms, the exposure scaling against a recomputation, the bad inputs of the command, and (slow)
the expected sds against full inversions of simulated spectra.

The scenario is INVENTED (not a real sample, not a measurement): a tungsten cap over a copper
film on glassy carbon, 1800 keV 4He at 165 degrees in IBM geometry.
"""

from __future__ import annotations

import math
import warnings
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import integrate

import forward
import inversion
from benchmarks._runs import run_head
from inversion import Parameter, Role, cli, make_prior
from inversion.planning import _expected as E
from inversion.planning._check import check_plan
from inversion.planning._output import write_plan
from inversion.planning._plan import PlanWarning

# INVENTED scenario (not a real sample): W cap / Cu film / glassy carbon.  Both interfaces
# mixed (the film's lower one known from an earlier measurement: a lognormal prior), fluence and
# the stopping of W and Cu free; calibration and resolution fixed; short chains for the tests.
#: the sample and the fit (run_text puts the run file's head above them)
_RUN = """\
[[layer]]
name = "cap"
formula = "W"
areal_density_1e15 = 150.0
density_g_cm3 = 19.3
[[layer]]
name = "film"
formula = "Cu"
areal_density_1e15 = 300.0
density_g_cm3 = 8.96
[[layer]]
name = "base"
formula = "C"
substrate = true
density_g_cm3 = 1.8
[fit]
profile = "layers"
windows = [[480, 860]]
fixed = {fixed}
walkers = 20
tau_multiple = 30
check_every = 50
max_steps = 6000
band_draws = 10
[fit.free]
"cap.areal_density" = {{ uniform = [50.0, 400.0] }}
"film.areal_density" = {{ uniform = [100.0, 800.0] }}
"cap.mixing" = {{ halfnormal = 40.0 }}
"film.mixing" = {{ lognormal = [30.0, 0.1] }}
"""
NOMINAL = {"cap.mixing": 30.0, "film.mixing": 30.0}
FIXED = '["gain_keV", "offset_keV", "fwhm_keV", "stopping.C"]'


def run_text(energy_keV=1800.0, fixed=FIXED) -> str:
    head = run_head(title="invented: W cap / Cu film on glassy carbon", charge_uC=1.0,
                    energy_keV=float(energy_keV), tilt_deg=0.0, live_fraction=0.95,
                    note="INVENTED test scenario: a tungsten cap over a copper film on glassy "
                         "carbon.")
    return head + _RUN.format(fixed=fixed)


def scenario(**kwargs):
    return forward.parse_run(run_text(**kwargs), source="plan-test.toml")


def quiet_plan(run, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PlanWarning)
        return inversion.plan(run, **kwargs)


@pytest.fixture(scope="module")
def grid():
    """The scenario over two tilts and two charges."""
    return quiet_plan(scenario(), vary={"geometry.tilt_deg": [0, 50],
                                        "exposure.charge_uC": [0.5, 2.0]},
                      nominal=NOMINAL, target="cap.mixing=0.5")


# ----------------------------------------------------------------------------------------------
# the pieces against closed forms
class _Toy:
    """A stand-in objective with Poisson means ``mu_c = A exp(-c / tau) + b`` over channels
    c = 0..59: the decay length ``tau`` (and optionally a flat background ``b``) free."""

    def __init__(self, amplitude=400.0, background=False, tau_prior=None):
        self.amplitude = amplitude
        params = [Parameter("tau", "channels", tau_prior or make_prior("uniform", 1.0, 100.0),
                            Role.AREAL_DENSITY)]
        if background:
            params.append(Parameter("background.level", "counts/channel",
                                    make_prior("halfnormal", 5.0), Role.BACKGROUND))
        self.spec = SimpleNamespace(parameters=params, names=[p.name for p in params])
        self.c = np.arange(60.0)

    def predict(self, theta):
        theta = np.asarray(theta, dtype=float)
        if theta[0] <= 0:
            return None
        mu = self.amplitude * np.exp(-self.c / theta[0])
        return mu + (theta[1] if theta.size > 1 else 0.0)


def test_fisher_information_of_a_decay_length():
    # Poisson means mu_c = A exp(-c/tau): d mu_c / d tau = mu_c c / tau^2, so the Fisher
    # information is I = sum_c mu_c c^2 / tau^4 (the information of independent Poisson counts,
    # sum (d mu/d tau)^2 / mu; common practice)
    toy = _Toy()
    tau = 12.0
    res = E.response(toy, [tau], particles=1.0)
    mu = 400.0 * np.exp(-toy.c / tau)
    keep = mu > 1e-9 * mu.max()
    closed = float(np.sum((mu * toy.c ** 2)[keep]) / tau ** 4)
    assert res.fisher(1.0)[0, 0] == pytest.approx(closed, rel=1e-6)
    # the counts scale with the exposure, and so does the information (common practice)
    assert res.fisher(3.0)[0, 0] == pytest.approx(3.0 * closed, rel=1e-6)
    assert res.counts(3.0) == pytest.approx(3.0 * mu.sum(), rel=1e-12)


def test_fisher_information_with_a_background_that_does_not_scale():
    # mu_c(r) = r A exp(-c/tau) + b: a background level does not grow with the charge.  With
    # s_c = A exp(-c/tau): I_tau,tau = sum (r s c/tau^2)^2 / mu, I_tau,b = sum (r s c/tau^2)/mu,
    # I_b,b = sum 1/mu (the Poisson information, common practice)
    toy = _Toy(background=True)
    tau, b, r = 12.0, 2.0, 5.0
    res = E.response(toy, [tau, b], particles=1.0)
    s = 400.0 * np.exp(-toy.c / tau)
    mu = r * s + b
    d_tau = r * s * toy.c / tau ** 2
    closed = np.array([[np.sum(d_tau ** 2 / mu), np.sum(d_tau / mu)],
                       [np.sum(d_tau / mu), np.sum(1.0 / mu)]])
    np.testing.assert_allclose(res.fisher(r), closed, rtol=1e-6)
    assert list(res.scales) == [True, False]


def test_a_step_across_a_physical_limit_is_one_sided():
    # at the physical limit tau > 0 a central difference would leave the model; the one-sided
    # second-order difference (-3 f0 + 4 f1 - f2) / 2h is exact for a quadratic (common
    # practice): mu = theta^2 a has derivative 2 theta a
    class Square(_Toy):
        def predict(self, theta):
            t = float(np.asarray(theta)[0])
            return None if t < 1.0 else t ** 2 * np.ones(3)

    toy = Square()
    res = E.response(toy, [1.0], particles=1.0)
    np.testing.assert_allclose(res.jacobian[0], 2.0 * np.ones(3), rtol=1e-9)


@pytest.mark.parametrize("kind, args, x, closed", [
    # -d2/dx2 ln p, by hand from each density (common practice)
    ("normal", (1.0, 0.05), 1.02, 1 / 0.05 ** 2),
    ("uniform", (100.0, 300.0), 180.0, 0.0),
    ("halfnormal", (30.0,), 12.0, 1 / 30.0 ** 2),
    ("halfnormal", (30.0,), 0.0, 1 / 30.0 ** 2),  # at the edge of its support
    ("lognormal", (30.0, 0.1), 30.0, (1 - 0.1 ** 2) / (0.1 ** 2 * 30.0 ** 2)),
    ("lognormal", (30.0, 0.1), 33.0,
     (1 - 0.1 ** 2 - math.log(33.0 / 30.0)) / (0.1 ** 2 * 33.0 ** 2)),
    ("beta", (2.0, 3.0), 0.3, 1.0 / 0.3 ** 2 + 2.0 / 0.7 ** 2),
    ("beta", (1.0, 1.0), 0.4, 0.0),
    ("beta", (0.5, 0.5), 0.4, 0.0),  # negative curvature: no information, clipped
])
def test_prior_precision_against_closed_forms(kind, args, x, closed):
    value = E.prior_precision(make_prior(kind, *args), x)
    assert value == pytest.approx(closed, rel=1e-5, abs=1e-12)


def test_a_nominal_value_outside_the_prior_is_refused():
    with pytest.raises(ValueError):
        E.prior_precision(make_prior("uniform", 100.0, 300.0), 50.0)


def test_laplace_sd_against_the_exact_posterior_of_a_decay_length():
    # The Laplace approximation (Tierney & Kadane, J. Am. Stat. Assoc. 81 (1986) 82): with
    # many counts the posterior sd is sqrt(1 / (I + 1/s^2)).  The exact posterior of counts at
    # their expected values (numerical integration over tau) agrees within 1 %.
    tau0, s = 12.0, 1.0
    toy = _Toy(amplitude=2000.0, tau_prior=make_prior("normal", tau0, s))
    res = E.response(toy, [tau0], particles=1.0)
    lam = E.prior_precision(toy.spec.parameters[0].prior, tau0)
    predicted = E.posterior(res.fisher(1.0), [lam]).sd(0)
    k = toy.predict([tau0])
    grid = np.linspace(tau0 - 2.0, tau0 + 2.0, 4001)
    log_post = np.array([np.sum(k * np.log(toy.predict([t])) - toy.predict([t]))
                         - 0.5 * ((t - tau0) / s) ** 2 for t in grid])
    w = np.exp(log_post - log_post.max())
    w /= integrate.trapezoid(w, grid)
    mean = integrate.trapezoid(w * grid, grid)
    exact = math.sqrt(integrate.trapezoid(w * (grid - mean) ** 2, grid))
    assert predicted == pytest.approx(exact, rel=0.01)


def test_variance_split_of_a_product_degeneracy():
    # One measurement of theta1 + theta2 with information I, a flat prior on theta1 and a
    # normal prior of precision L on theta2 (a film's areal density and the fluence, say): the
    # posterior variance of theta1 is 1/I + 1/L, of which 1/I comes from the counts and 1/L
    # from the prior of theta2 (Gaussian linear model, common practice)
    info, lam = 4.0, 16.0
    fisher = info * np.ones((2, 2))
    a = E.Analysis(fisher, [0.0, lam], ["film", "fluence"], nuisances=[1])
    u = a.uncertainty([1.0, 0.0])
    var = 1 / info + 1 / lam
    assert u.sd == pytest.approx(math.sqrt(var), rel=1e-12)
    shares = {lim.source: lim.share for lim in u.limits}
    assert shares == pytest.approx({"counts": (1 / info) / var, "fluence": (1 / lam) / var})
    # with the fluence known exactly, counting alone: 1/sqrt(I)
    assert u.sd_counting == pytest.approx(1 / math.sqrt(info), rel=1e-12)
    # without the fluence prior nothing pins theta1 down
    b = E.Analysis(fisher, [0.0, 0.0], ["film", "fluence"], nuisances=[1])
    assert math.isinf(b.sd([1.0, 0.0]))
    assert b.sd([1.0, 1.0]) == pytest.approx(1 / math.sqrt(info), rel=1e-9)  # the sum is known


def test_charge_for_a_target_closed_forms():
    # counting alone: sd = s0 sqrt(q0 / q), so the target t needs q0 (s0 / t)^2 (Poisson
    # statistics, common practice)
    q, note = E.charge_for_sd(lambda c: 3.0 * math.sqrt(2.0 / c), 2.0, 1.0)
    assert note == "" and q == pytest.approx(18.0, rel=1e-6)
    # a prior floor of 0.8 above the target 0.5: sd^2 = 4/q + 0.8^2 never reaches it
    q, note = E.charge_for_sd(lambda c: math.sqrt(4.0 / c + 0.64), 2.0, 0.5)
    assert math.isnan(q) and note.startswith("not reachable by charge alone")


# ----------------------------------------------------------------------------------------------
# the plan of a real forward model
def test_exposure_scaling_equals_recomputing_at_that_charge(grid):
    # set-ups that differ only in charge share one forward model (the 2 uC one) and scale its
    # counts; the 0.5 uC set-up planned on its own model must give the same sds
    alone = quiet_plan(scenario(), vary={"geometry.tilt_deg": [50],
                                         "exposure.charge_uC": [0.5]}, nominal=NOMINAL)
    scaled = next(r for r in grid if r.values == {"geometry.tilt_deg": 50,
                                                 "exposure.charge_uC": 0.5})
    for name, sd in alone.best.sd.items():
        assert scaled.sd[name] == pytest.approx(sd, rel=1e-6), name


def test_fluence_information_is_the_total_count(grid):
    # mu_c = F m_c: the information on F at F = 1 is the expected total count in the window
    # (the relative error of a count is 1/sqrt(N); common practice)
    row = grid.best
    i = grid.parameters.index("fluence_scale")
    assert row.fisher[i, i] == pytest.approx(row.counts, rel=1e-6)


def test_expected_sds_do_not_depend_on_the_difference_step():
    run = scenario()
    a = quiet_plan(run, vary={"geometry.tilt_deg": [35]}, nominal=NOMINAL, rel_step=1e-4)
    b = quiet_plan(run, vary={"geometry.tilt_deg": [35]}, nominal=NOMINAL, rel_step=1e-2)
    for name, sd in a.best.sd.items():
        assert b.best.sd[name] == pytest.approx(sd, rel=0.005), name


def test_the_table(grid):
    # ranked by the target quantity, the smallest expected sd first
    sds = grid.column("cap.mixing")
    assert list(sds) == sorted(sds)
    assert [r.rank for r in grid] == [1, 2, 3, 4]
    # more charge never widens a posterior, and no posterior is wider than a normal prior
    for tilt in (0, 50):
        rows = {r.values["exposure.charge_uC"]: r for r in grid
                if r.values["geometry.tilt_deg"] == tilt}
        for name in rows[2.0].sd:
            assert rows[2.0].sd[name] <= rows[0.5].sd[name] * (1 + 1e-9), name
    for row in grid:
        for name in ("fluence_scale", "stopping.W", "stopping.Cu"):
            assert row.sd[name] <= (0.05 if name == "fluence_scale" else 0.03) * (1 + 1e-9)
    # a derived quantity by the delta method: thickness = areal density / atomic density
    cap = scenario().layers[0]
    for row in grid:
        assert row.sd["cap.thickness_nm"] == pytest.approx(
            row.sd["cap.areal_density"] * cap.nm_per_1e15(), rel=1e-6)
    # every row reaches the target at some charge, the same within one geometry (the root is
    # found to 1e-6 in ln q)
    charges = {}
    for row in grid:
        charges.setdefault(row.values["geometry.tilt_deg"], []).append(row.charge_for_target_uC)
    for values in charges.values():
        assert values[0] == pytest.approx(values[1], rel=1e-5)
    # and there the expected sd is the target
    row = grid.best
    at = quiet_plan(row.run, nominal=NOMINAL, vary={"exposure.charge_uC": [
        row.charge_for_target_uC]})
    assert at.best.sd["cap.mixing"] == pytest.approx(0.5, rel=1e-5)
    # the variance parts of a quantity add up to at most 1 (parts under 1 % are left out)
    assert 0.95 <= sum(lim.share for lim in grid.best.limits["cap.areal_density"]) <= 1.0
    records = grid.records()
    assert list(records[0])[:5] == ["rank", "geometry.tilt_deg", "exposure.charge_uC",
                                    "charge_uC", "counts_in_window"]
    assert "sd.film.thickness_nm" in records[0] and "charge_for_target_uC" in records[0]


def test_a_target_without_an_sd_only_ranks():
    table = quiet_plan(scenario(), vary={"geometry.tilt_deg": [0, 50]}, nominal=NOMINAL,
                       target="film.thickness_nm")
    assert table.rank_by == "film.thickness_nm" and table.target_sd is None
    assert list(table.column("film.thickness_nm")) == sorted(table.column("film.thickness_nm"))
    assert all(row.charge_for_target_uC is None for row in table)
    assert "charge_for_target_uC" not in table.records()[0]
    # a relative target: 1 % of the nominal thickness (forward's own nm conversion)
    table = quiet_plan(scenario(), nominal=NOMINAL, target="film.thickness_nm=1%")
    assert table.target_sd == pytest.approx(0.01 * scenario().layers[1].thickness_nm)


def test_validity_warnings():
    run = scenario()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        table = inversion.plan(run, vary={"beam.energy_keV": [1800, 3500]}, nominal=NOMINAL)
    by_energy = {r.values["beam.energy_keV"]: " ".join(r.warnings) for r in table}
    # carbon: the non-Rutherford onset estimate 0.25 Z2 + 0.4 MeV = 1.9 MeV for 4He (Bozoian,
    # Hubbard and Nastasi 1990, from memory, as forward states it)
    assert "non-Rutherford" not in by_energy[1800] and "non-Rutherford" in by_energy[3500]
    # the stopping is compared with NIST ASTAR up to 3000 keV only
    assert "ASTAR" in by_energy[3500] and "ASTAR" not in by_energy[1800]
    assert any(issubclass(w.category, PlanWarning) for w in caught)
    # two species whose surface edges lie closer than the resolution (common practice)
    text = run_text().replace('formula = "Cu"', 'formula = "Ta0.5W0.5"')
    table = quiet_plan(forward.parse_run(text, source="overlap.toml"), nominal=NOMINAL)
    assert any("cannot separate" in w and "Ta" in w for w in table.best.warnings)


def test_writes_the_folder(grid, tmp_path):
    written = write_plan(grid, tmp_path / "plan")
    assert set(written) == {"plan.csv", "plan.md", "sd_vs_geometry_tilt_deg.png",
                            "sd_vs_exposure_charge_uC.png"}
    lines = (tmp_path / "plan" / "plan.csv").read_text().splitlines()
    assert len(lines) == 1 + len(grid)
    md = (tmp_path / "plan" / "plan.md").read_text()
    assert "## Set-ups" in md and "## The best set-up" in md and "van Trees" in md
    with pytest.raises(forward.InputError, match="exists"):
        write_plan(grid, tmp_path / "plan")
    write_plan(grid, tmp_path / "plan", force=True)


# ----------------------------------------------------------------------------------------------
# the command
@pytest.fixture()
def run_file(tmp_path):
    path = tmp_path / "plan-test.toml"
    path.write_text(run_text())
    return path


def test_command_writes_plan(run_file, tmp_path, capsys):
    out = tmp_path / "out"
    code = cli.main(["plan", str(run_file), "--nominal", "cap.mixing=30", "--nominal",
                     "film.mixing=30", "--vary", "geometry.tilt_deg=0,50", "--vary",
                     "exposure.charge_uC=0.5,2", "--target", "cap.areal_density=1%",
                     "-o", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "expected posterior sd of cap.areal_density" in captured.out
    assert sorted(p.name for p in out.iterdir()) == [
        "plan.csv", "plan.md", "sd_vs_exposure_charge_uC.png", "sd_vs_geometry_tilt_deg.png"]
    # an existing plan is not replaced without --force
    again = ["plan", str(run_file), "--nominal", "cap.mixing=30", "--nominal",
             "film.mixing=30", "-o", str(out)]
    assert cli.main(again) == 2
    assert "exists" in capsys.readouterr().err
    assert cli.main(again + ["--force"]) == 0


BAD = [
    (["--vary", "beam.colour_keV=1,2"], "unknown set-up key 'beam.colour_keV'"),
    (["--vary", "beam.ion=3"], "beam.ion is not a set-up number"),
    (["--vary", "geometry.layout=1"], "geometry.layout is not a set-up number"),
    (["--vary", "geometry.tilt_deg"], "has no '='"),
    (["--vary", "geometry.tilt_deg=ten"], "'ten' is not a number"),
    (["--vary", "geometry.tilt_deg=0", "--vary", "geometry.tilt_deg=5"], "varied twice"),
    (["--vary", "geometry.tilt_deg=0,80"], "exit angle"),
    (["--vary", "beam.energy_keV=20000"], "above 10000 keV"),
    (["--vary", "exposure.charge_uC=-1"], "out of range"),
    (["--vary", "geometry.exit_deg=20"], "vary geometry.tilt_deg"),
    (["--target", "base.areal_density=1"], "is not a free quantity"),
    (["--target", "cap.mixing=abc"], "is not a number"),
    (["--target", "cap.mixing=-1"], "must be a number > 0"),
    (["--nominal", "nosuch=1"], "not a free parameter"),
    (["--nominal", "cap.mixing=-3"], "outside its physical limits"),
    (["--nominal", "film.mixing=0"], "no first-order response"),
    (["--check", "-1"], "give a number of spectra >= 0"),
]


@pytest.mark.parametrize("extra, fragment", BAD, ids=[b[1] for b in BAD])
def test_bad_input_of_the_command(run_file, tmp_path, capsys, extra, fragment):
    nominal = {"cap.mixing": "30", "film.mixing": "30"}
    for k in range(0, len(extra), 2):
        if extra[k] == "--nominal" and "=" in extra[k + 1]:
            nominal.pop(extra[k + 1].split("=")[0], None)
    argv = ["plan", str(run_file), "-o", str(tmp_path / "out"), *extra]
    for name, value in nominal.items():
        argv += ["--nominal", f"{name}={value}"]
    code = cli.main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("sondage: error: "), lines
    assert fragment in lines[0], lines[0]
    assert "Traceback" not in err
    assert not (tmp_path / "out" / "plan.csv").exists()  # nothing half-written


def test_a_free_mixing_width_needs_a_nominal_value(run_file, tmp_path, capsys):
    code = cli.main(["plan", str(run_file), "-o", str(tmp_path / "out"), "--nominal",
                     "cap.mixing=30"])
    err = capsys.readouterr().err
    assert code == 2 and "--nominal film.mixing=VALUE" in err


def test_a_tilt_needs_a_tilted_run_file(tmp_path, capsys):
    text = run_text().replace('tilt_deg = 0.0\nlayout = "IBM"', "incidence_deg = 0.0\n"
                                                                "exit_deg = 15.0")
    path = tmp_path / "direct.toml"
    path.write_text(text)
    code = cli.main(["plan", str(path), "-o", str(tmp_path / "out"), "--nominal",
                     "cap.mixing=30", "--nominal", "film.mixing=30", "--vary",
                     "geometry.tilt_deg=0,30"])
    err = capsys.readouterr().err
    assert code == 2 and "the run file gives geometry.incidence_deg and exit_deg" in err


# ----------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_expected_sds_agree_with_inversions_of_simulated_spectra(grid):
    # Three set-ups that differ in tilt (50 and 0 degrees at 2 uC) and in charge (2 and 0.5 uC
    # at 0 degrees): one spectrum each, Poisson counts at the nominal sample, inverted with
    # the scenario's own [fit] table.  The posterior sd of every free and derived quantity must
    # lie within 20 % of the expected one (the brief's tolerance; the sd of a chain of about
    # 20 walkers x 30 autocorrelation times is itself uncertain by a few per cent, and one
    # spectrum's noise moves it by a few more), and the three set-ups must come in the same
    # order by the ranking quantity.
    chosen = [{"geometry.tilt_deg": 50, "exposure.charge_uC": 2.0},
              {"geometry.tilt_deg": 0, "exposure.charge_uC": 2.0},
              {"geometry.tilt_deg": 0, "exposure.charge_uC": 0.5}]
    rows = [next(r for r in grid if r.values == v) for v in chosen]
    checks = [check_plan(grid, 1, row=row, seed=11 + k) for k, row in enumerate(rows)]
    for row, check in zip(rows, checks):
        assert all(check.converged), row.label()
        assert set(check.names) == {q.name for q in grid.quantities}
        for name in check.names:
            assert 0.8 <= check.ratio(name) <= 1.2, (row.label(), name, check.ratio(name))
    predicted = [row.sd[grid.rank_by] for row in rows]
    found = [check.mean_sd(grid.rank_by) for check in checks]
    assert np.argsort(predicted).tolist() == np.argsort(found).tolist() == [0, 1, 2]


@pytest.mark.slow
def test_command_check(run_file, tmp_path, capsys):
    out = tmp_path / "out"
    code = cli.main(["plan", str(run_file), "--nominal", "cap.mixing=30", "--nominal",
                     "film.mixing=30", "--check", "1", "--seed", "5", "-o", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "check at the run file as given: 1 simulated spectra" in captured.out
    rows = (out / "check.csv").read_text().splitlines()
    assert rows[0].startswith("quantity,unit,expected_sd,mean_posterior_sd")
    assert "## Check: 1 simulated spectra" in (out / "plan.md").read_text()
