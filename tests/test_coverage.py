"""Are the error bars honest?  A fast version of benchmarks/coverage.py.

The scenario is the study's INVENTED one (250e15 Mo on glassy carbon, Mo/C interface width
40e15, 4He at 2000 keV; not a real sample), made cheaper: every nuisance fixed at its true value
(fluence, gain, offset, resolution, stopping scales), so only the film's areal density and
interface width are free, 12 walkers and chains of 30 autocorrelation times.  The full study
(benchmarks/coverage.py, results in docs/calibration.md) frees the nuisances and uses the
default sampler settings.
"""

from __future__ import annotations

import math
import multiprocessing
import tempfile
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

import forward
from benchmarks._runs import MO_ON_CARBON, run_head
from inversion import (NotConvergedWarning, cramer_rao_sd, fisher_matrix, invert,
                       nominal_theta, prepare)

#: the invented truth of the film (1e15 atoms/cm2)
TRUTH = {"film.areal_density": 250.0, "film.mixing": 40.0}
QUANTITIES = ("film.areal_density", "film.mixing")
CHANNELS = 1024
CHARGE_UC = 2.0
WINDOW = (760, 890)
FIXED = ["fluence_scale", "gain_keV", "offset_keV", "fwhm_keV", "stopping", "straggling"]
FAST = "walkers = 12\ntau_multiple = 30\ncheck_every = 50\nmax_steps = 6000\nband_draws = 10"
N_REPLICAS = 8

# The study's INVENTED scenario (the same as benchmarks/coverage.py's; not a real sample).
#: the sample and the fit; run_text puts the run file's head (MO_ON_CARBON) above them
_RUN = """\
[[layer]]
name = "film"
formula = "Mo"
areal_density_1e15 = 250.0
density_g_cm3 = 10.2
[[layer]]
name = "base"
formula = "C"
substrate = true
density_g_cm3 = 1.8
[fit]
profile = "layers"
{window}
{fixed}
{extra}
[fit.free]
"film.areal_density" = {{ uniform = [100.0, 500.0] }}
"film.mixing" = true
"""


def run_text(charge_uC=CHARGE_UC, *, fixed=(), fit_extra="", window=True) -> str:
    """The scenario's run text (``window=False``: no fit window, every channel computed)."""
    fixed_line = "" if not fixed else "fixed = [" + ", ".join(f'"{f}"' for f in fixed) + "]"
    window_line = f"windows = [[{WINDOW[0]}, {WINDOW[1]}]]" if window else ""
    head = run_head(charge_uC=float(charge_uC), **MO_ON_CARBON)
    return head + _RUN.format(fixed=fixed_line, extra=fit_extra, window=window_line)


def scenario_objective(text):
    """The objective of a run text; placeholder counts (the objective only predicts)."""
    return prepare(forward.parse_run(text, source="coverage.toml"), np.ones(CHANNELS))[1]


def run_replica(task: dict) -> dict:
    """Simulate one spectrum at the truth and invert it (picklable for a process pool)."""
    seed = int(task["seed"])
    text = run_text(task["charge_uC"], fixed=FIXED, fit_extra=FAST)
    sim = scenario_objective(run_text(task["charge_uC"], fixed=FIXED, fit_extra=FAST,
                                      window=False))
    expected = sim.predict(nominal_theta(sim, TRUTH), "all")
    counts = np.random.default_rng(seed).poisson(expected)
    run = forward.parse_run(text, source=f"test-{seed}.toml")
    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run, counts, Path(tmp) / "r.h5", seed=seed, workers=1, progress=False)
    return {"seed": seed, "truth": dict(TRUTH), "converged": bool(res.converged),
            "steps": int(res.diagnostics.get("steps", 0)),
            "tau_max": float(np.nanmax(res.diagnostics.get("autocorr_time", [np.nan]))),
            "summary": {n: dict(res.summary[n]) for n in res.names}}


# ----------------------------------------------------------------------------------------------
# the Fisher information itself
def test_fisher_information_of_the_fluence_is_the_total_count():
    # A Poisson mean proportional to a scale F (mu_c = F m_c) has Fisher information
    # sum_c m_c^2 / (F m_c) = N / F^2 at F = 1, N the expected total count: the bound on F is
    # 1/sqrt(N), the familiar relative error of a count (common practice).
    obj = scenario_objective(run_text())
    theta = nominal_theta(obj, TRUTH)
    i = obj.spec.names.index("fluence_scale")
    fisher = fisher_matrix(obj, theta)
    total = float(obj.predict(theta).sum())
    assert fisher[i, i] == pytest.approx(total, rel=1e-6)


def test_cramer_rao_bound_does_not_depend_on_the_difference_step():
    # Central differences err by O(h^2) (common practice): halving the step must leave the
    # bound (Cramer 1946; Rao 1945) on the areal density unchanged within 1 %.
    text = run_text(10 * CHARGE_UC, fixed=FIXED)
    obj = scenario_objective(text)
    theta = nominal_theta(obj, TRUTH)
    assert obj.spec.names == ["film.areal_density", "film.mixing"]
    full = cramer_rao_sd(fisher_matrix(obj, theta, rel_step=1e-3))
    half = cramer_rao_sd(fisher_matrix(obj, theta, rel_step=5e-4))
    assert half == pytest.approx(full, rel=0.01)
    # the bound scales as 1/sqrt(counts) (Poisson statistics, common practice)
    obj1 = scenario_objective(run_text(CHARGE_UC, fixed=FIXED))
    one = cramer_rao_sd(fisher_matrix(obj1, theta, rel_step=1e-3))
    assert full / one == pytest.approx(1 / math.sqrt(10), rel=1e-3)
    # freeing the nuisances cannot lower the bound (the inverse of a Schur complement is
    # at least the inverse of the block; Rao 1945), and with the priors' information added
    # (van Trees 1968) it lies between the two
    free = scenario_objective(run_text(10 * CHARGE_UC))
    theta_free = nominal_theta(free, TRUTH)
    f = fisher_matrix(free, theta_free)
    prior_sd = [float(p.prior.dist.std()) if p.role.is_nuisance else math.inf
                for p in free.spec.parameters]
    with_priors = cramer_rao_sd(f, 0, prior_sd)
    assert full <= with_priors <= cramer_rao_sd(f, 0)


# ----------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_coverage_and_efficiency_of_the_posterior():
    tasks = [{"seed": seed, "charge_uC": CHARGE_UC} for seed in range(1, N_REPLICAS + 1)]
    high = {"seed": 1000, "charge_uC": 10 * CHARGE_UC}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with ProcessPoolExecutor(max_workers=2,
                                 mp_context=multiprocessing.get_context("fork")) as pool:
            records = list(pool.map(run_replica, tasks + [high]))
    high_rec = records.pop()
    assert all(r["converged"] for r in records + [high_rec]), \
        [(r["seed"], r["steps"], r["tau_max"]) for r in records + [high_rec]]

    # Coverage: each replica's central interval holds the truth with probability 0.68 (0.95)
    # if the posterior is calibrated, so the number that do is Binomial(n, p); accept the
    # central 99.9 % of that distribution (scipy.stats.binom).
    for name in QUANTITIES:
        for level, p in ((68, 0.68), (95, 0.95)):
            inside = sum(r["summary"][name][f"low{level}"] <= r["truth"][name]
                         <= r["summary"][name][f"high{level}"] for r in records)
            low, high_ = stats.binom.interval(0.999, N_REPLICAS, p)
            assert low <= inside <= high_, (name, level, inside, (low, high_))

    # Efficiency: at ten times the counts with the nuisances fixed, the posterior sd of the
    # areal density should reach the Cramer-Rao bound (Cramer 1946; Rao 1945).  The band
    # [0.9, 1.25]: the sd is estimated from about walkers x 30 autocorrelation times,
    # some 360 independent draws (relative error about 1/sqrt(2 x 360) = 4 %, so 0.9 is more
    # than two such errors below 1); the noise of one spectrum and the mixing prior move the
    # posterior sd a few per cent either way; and the bound is the asymptotic, Gaussian limit,
    # which a finite-count posterior with a skewed width parameter can exceed (upper side 25 %).
    text = run_text(10 * CHARGE_UC, fixed=FIXED, fit_extra=FAST)
    obj = scenario_objective(text)
    theta = nominal_theta(obj, TRUTH)
    bound = cramer_rao_sd(fisher_matrix(obj, theta))
    ratio = high_rec["summary"]["film.areal_density"]["sd"] / bound
    assert 0.9 <= ratio <= 1.25, (ratio, bound)
