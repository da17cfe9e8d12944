"""invert() and ``sondage invert``: bad [fit] input, kill and resume, the command line, and
synthetic recovery with the real forward model."""

from __future__ import annotations

import os
import signal
import warnings

import numpy as np
import pytest

import forward
from benchmarks._runs import run_head
from forward import InputError
from inversion import NotConvergedWarning, invert, parse_fit, read_result

BASE = {"free": {"film.areal_density": {"uniform": [100, 600]}}}


# ----------------------------------------------------------------------------------------------
# bad [fit] input: one clear line naming the key
@pytest.mark.parametrize("fit, where, words", [
    ({**BASE, "walkres": 10}, "fit.walkres", "unknown key 'walkres'"),
    ({"free": {"film.areal_density": {"uniform": [600, 100]}}}, "fit.free.film.areal_density",
     "low < high"),
    ({"free": {"film.thickness": True}}, "fit.free.film.thickness", "no free quantity"),
    ({"free": {"film.mixing": {"gamma": [2, 1]}}}, "fit.free.film.mixing", "unknown prior"),
    ({**BASE, "windows": [[90, 40]]}, "fit.windows", "empty window"),
    ({**BASE, "windows": [[10, 400]]}, "fit.windows", "outside the spectrum"),
    ({**BASE, "fixed": ["film.areal_density"]}, "fit.fixed", "not a nuisance"),
    ({**BASE, "profile": "spline"}, "fit.profile", "allowed: 'layers', 'nodes'"),
    ({**BASE, "tau_multiple": 0}, "fit.tau_multiple", ">= 1"),
    ({"free": {"base.composition": True}}, "fit.free.base.composition", "one species"),
    ({"free": {"film.mixing": {"normal": [0, 30]}}}, "fit.free.film.mixing", "below zero"),
    ({"fixed": ["stopping"]}, "fit.free", "nothing about the sample is free"),
    ({**BASE, "count_threshold": 1e9}, "fit.count_threshold", "empty channel window"),
])
def test_bad_fit_tables_raise_input_errors(toy, fit, where, words):
    with pytest.raises(InputError) as err:
        toy.objective(fit)
    text = str(err.value)
    # the error names the run file it came from (the toy run's source) and the key
    assert err.value.where == f"toy.toml: {where}", text
    assert words in text
    assert "\n" not in text


def test_defaults_are_stated_in_the_spec(toy):
    run = toy.run({"free": {"film.areal_density": True, "film.mixing": True}})
    spec = parse_fit(run.fit, run, toy.Model(run))
    lines = spec.describe_priors()
    assert lines[0] == "film.areal_density [1e15 atoms/cm2]: uniform(30, 900) (default)"
    assert "film.mixing [1e15 atoms/cm2]: halfnormal(75) (default)" in lines
    assert "fluence_scale [1]: normal(1, 0.05) (default)" in lines
    # stopping priors from the measured spread against NIST ASTAR (forward.stopping_uncertainty)
    scale_sd, slope_sd = forward.stopping_uncertainty("Ge")
    assert f"stopping.Ge [1]: normal(1, {scale_sd:.4g}) (default)" in lines
    assert f"slope.Ge [1]: normal(0, {slope_sd:.4g}) (default)" in lines
    assert "straggling_scale [1]: lognormal(1, 0.3) (default)" in lines
    assert "straggling_correction [1]: normal(1, 0.5) (default)" in lines
    assert spec.n_walkers == 48  # max(32, 4 x 12 parameters)


# ----------------------------------------------------------------------------------------------
# Ctrl-C part-way, then --resume: the same chain as one uninterrupted run
def _interrupting_builder(toy, run, at):
    """A builder of the toy model that sends this process SIGINT (a Ctrl-C) at its n-th
    evaluation."""

    class InterruptingModel(toy.Model):
        def expected_counts(self, *args, **kw):
            if self.calls + 1 == at:
                os.kill(os.getpid(), signal.SIGINT)
            return super().expected_counts(*args, **kw)

    class InterruptingBuilder(toy.Builder):
        def __call__(self):
            return InterruptingModel(self.run)

    return InterruptingBuilder(run)


FIT = {"free": {"film.areal_density": {"uniform": [100, 600]},
                "film.mixing": {"halfnormal": 30}},
       "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV"], "walkers": 8,
       "max_steps": 60, "check_every": 20, "band_draws": 20}


def test_interrupt_then_resume_equals_one_run(toy, tmp_path):
    # the handler found before (Python's own, or "ignore" in a job started in the background)
    before = signal.getsignal(signal.SIGINT)
    run = toy.run(FIT)
    m = toy.Model(run)
    counts = np.random.default_rng(8).poisson(m.expected_counts(m.layer_fractions()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        ref = invert(run, counts, tmp_path / "one.h5", seed=3, build_model=toy.Builder(run),
                     progress=False)
        # the model is called once per walker and step after the start search, so a Ctrl-C
        # at evaluation 1200 falls in the middle of the chain
        cut = invert(run, counts, tmp_path / "cut.h5", seed=3, progress=False,
                     build_model=_interrupting_builder(toy, run, at=1200))
        assert cut.attrs["status"] == "interrupted"
        steps_cut = int(cut.diagnostics["steps"])
        assert 0 < steps_cut < 60
        assert any("--resume" in w for w in cut.diagnostics["warnings"])
        import h5py
        with h5py.File(tmp_path / "cut.h5", "r") as f:
            early = f["mcmc/chain"][:steps_cut].copy()
        done = invert(run, counts, tmp_path / "cut.h5", seed=3, resume=True,
                      build_model=toy.Builder(run), progress=False)
    assert int(done.diagnostics["steps"]) == 60
    with h5py.File(tmp_path / "cut.h5", "r") as f, h5py.File(tmp_path / "one.h5", "r") as g:
        assert np.array_equal(f["mcmc/chain"][:steps_cut], early)  # earlier steps unchanged
        assert np.array_equal(f["mcmc/chain"][:60], g["mcmc/chain"][:60])
    assert np.array_equal(done.samples, ref.samples)
    assert signal.getsignal(signal.SIGINT) is before  # the Ctrl-C handler is given back


# ----------------------------------------------------------------------------------------------
# the real forward model
#: the sample and the fit (_simulate puts the run file's head above them)
RUN_TEXT = """\
[[layer]]
name = "top"
formula = "Ni"
areal_density_1e15 = 150.0
density_g_cm3 = 8.9
[[layer]]
name = "mid"
formula = "Ge"
areal_density_1e15 = 250.0
density_g_cm3 = 5.3
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
fixed = ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "fluence_scale", "straggling"]
walkers = 8
tau_multiple = 30
max_steps = {steps}
check_every = 100
band_draws = 50
windows = [[150, 460]]
[fit.free]
"top.areal_density" = {{ uniform = [50, 400] }}
"mid.areal_density" = {{ uniform = [50, 600] }}
"""
TRUTH = {"top.areal_density": 150.0, "mid.areal_density": 250.0}


def _simulate(tmp_path, charge, seed, steps=2000):
    path = tmp_path / f"run_{charge:g}.toml"
    head = run_head(title="invented: Ni / Ge / Si for the inversion tests", charge_uC=charge,
                    scattering_deg=160.0, exit_deg=20.0, solid_angle_msr=2.0,
                    keV_per_channel=4.0, offset_keV=10.0,
                    note="INVENTED test scenario (not a real sample): a nickel film over a "
                         "germanium film on silicon.")
    path.write_text(head + RUN_TEXT.format(steps=steps))
    run = forward.load_run(path)
    model = forward.ForwardModel(run, n_channels=512)
    expected = np.maximum(model.expected_counts(model.layer_fractions()), 0.0)
    counts = np.random.default_rng(seed).poisson(expected)
    spec = tmp_path / f"spectrum_{charge:g}.csv"
    forward.write_spectrum_csv(spec, {"channel": np.arange(512), "counts": counts},
                               ["invented: simulated with Poisson noise for a test"])
    return path, spec


def test_command_line_writes_a_result_and_refuses_to_overwrite(tmp_path, capsys):
    from inversion.cli import main

    run, spec = _simulate(tmp_path, 2.0, seed=1, steps=40)
    out = tmp_path / "r.h5"
    code = main(["-q", "invert", str(run), str(spec), "-o", str(out), "--seed", "2"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "NOT CONVERGED" in captured.err  # 40 steps: reported loudly even with -q
    res = read_result(out)
    assert res.attrs["command"].startswith("sondage invert")
    assert int(res.diagnostics["steps"]) == 40
    code = main(["invert", str(run), str(spec), "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--force" in err[0]


@pytest.mark.slow
def test_synthetic_recovery_and_interval_scaling(tmp_path):
    widths = {}
    for charge, seed in ((2.0, 11), (20.0, 12)):  # ten times the counts
        run, spec = _simulate(tmp_path, charge, seed)
        res = invert(run, spec, tmp_path / f"r{charge:g}.h5", seed=4, progress=False)
        assert res.converged, res.diagnostics["warnings"]
        for name, truth in TRUTH.items():
            med, lo, hi = res.interval(name, 95)
            assert lo < truth < hi, (charge, name, lo, truth, hi)
            widths.setdefault(name, []).append(res.interval(name, 68)[2]
                                               - res.interval(name, 68)[1])
    # Poisson statistics: interval widths scale as 1/sqrt(counts) (common practice).
    # Tolerance 25 %: each 68 % width comes from about 8 walkers x 30 autocorrelation times,
    # some 240 effectively independent draws (about 5 % each), and the two spectra carry
    # their own noise.  Measured on this machine: 0.287 and 0.280 against 0.316.
    for name, (w1, w10) in widths.items():
        assert w10 / w1 == pytest.approx(1 / np.sqrt(10), rel=0.25), name
