"""Are the error bars honest?  A fast version of benchmarks/coverage.py.

The scenario is the study's INVENTED one (250e15 Mo on glassy carbon, Mo/C interface width
40e15, 4He at 2000 keV; not a real sample), made cheaper: every nuisance fixed at its true value
(fluence, gain, offset, resolution, stopping scales), so only the film's areal density and
interface width are free, 12 walkers and chains of 30 autocorrelation times.  The full study
(benchmarks/coverage.py, results in docs/calibration.md) frees the nuisances and uses the
default sampler settings.
"""

from __future__ import annotations

import importlib.util
import math
import sys
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]


def _load_study():
    # loaded under its own name: "coverage" would be taken for the PyPI package of that name
    name = "sondage_benchmark_coverage"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, ROOT / "benchmarks" / "coverage.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


study = _load_study()

FIXED = ["fluence_scale", "gain_keV", "offset_keV", "fwhm_keV", "stopping"]
FAST = "walkers = 12\ntau_multiple = 30\ncheck_every = 50\nmax_steps = 6000\nband_draws = 10"
N_REPLICAS = 8


def _task(seed, charge_uC=study.CHARGE_UC):
    return {"study": "test", "seed": seed, "charge_uC": charge_uC, "fixed": FIXED,
            "fit_extra": FAST, "nuisance_truth": "nominal"}


# ----------------------------------------------------------------------------------------------
# the Fisher information itself
def test_fisher_information_of_the_fluence_is_the_total_count():
    # A Poisson mean proportional to a scale F (mu_c = F m_c) has Fisher information
    # sum_c m_c^2 / (F m_c) = N / F^2 at F = 1, N the expected total count: the bound on F is
    # 1/sqrt(N), the familiar relative error of a count (common practice).
    _, obj = study.scenario_objective(study.run_text())
    theta = study.truth_vector(obj, nuisance_truth="nominal")
    i = obj.spec.names.index("fluence_scale")
    fisher = study.fisher_matrix(obj, theta)
    total = float(obj.expected(theta).sum())
    assert fisher[i, i] == pytest.approx(total, rel=1e-6)


def test_cramer_rao_bound_does_not_depend_on_the_difference_step():
    # Central differences err by O(h^2) (common practice): halving the step must leave the
    # bound (Cramer 1946; Rao 1945) on the areal density unchanged within 1 %.
    text = study.run_text(10 * study.CHARGE_UC, fixed=FIXED)
    _, obj = study.scenario_objective(text)
    theta = study.truth_vector(obj, nuisance_truth="nominal")
    assert obj.spec.names == ["film.areal_density", "film.mixing"]
    full = study.cramer_rao_sd(study.fisher_matrix(obj, theta, rel_step=1e-3))
    half = study.cramer_rao_sd(study.fisher_matrix(obj, theta, rel_step=5e-4))
    assert half == pytest.approx(full, rel=0.01)
    # the bound scales as 1/sqrt(counts) (Poisson statistics, common practice)
    _, obj1 = study.scenario_objective(study.run_text(study.CHARGE_UC, fixed=FIXED))
    one = study.cramer_rao_sd(study.fisher_matrix(obj1, theta, rel_step=1e-3))
    assert full / one == pytest.approx(1 / math.sqrt(10), rel=1e-3)
    # freeing the nuisances cannot lower the bound (the inverse of a Schur complement is
    # at least the inverse of the block; Rao 1945), and with the priors' information added
    # (van Trees 1968) it lies between the two
    _, free = study.scenario_objective(study.run_text(10 * study.CHARGE_UC))
    theta_free = study.truth_vector(free, nuisance_truth="nominal")
    f = study.fisher_matrix(free, theta_free)
    prior_sd = [float(p.prior.dist.std()) if p.role[0] in ("nuisance", "stopping") else math.inf
                for p in free.spec.parameters]
    with_priors = study.cramer_rao_sd(f, 0, prior_sd)
    assert full <= with_priors <= study.cramer_rao_sd(f, 0)


# ----------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_coverage_and_efficiency_of_the_posterior():
    tasks = [_task(seed) for seed in range(1, N_REPLICAS + 1)]
    high = _task(1000, charge_uC=10 * study.CHARGE_UC)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with ProcessPoolExecutor(max_workers=2) as pool:
            records = list(pool.map(study.run_replica, tasks + [high]))
    high_rec = records.pop()
    assert all(r["converged"] for r in records + [high_rec]), \
        [(r["seed"], r["steps"], r["tau_max"]) for r in records + [high_rec]]

    # Coverage: each replica's central interval holds the truth with probability 0.68 (0.95)
    # if the posterior is calibrated, so the number that do is Binomial(n, p); accept the
    # central 99.9 % of that distribution (scipy.stats.binom).
    for name in study.QUANTITIES:
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
    text = study.run_text(10 * study.CHARGE_UC, fixed=FIXED, fit_extra=FAST)
    _, obj = study.scenario_objective(text)
    theta = study.truth_vector(obj, nuisance_truth="nominal")
    bound = study.cramer_rao_sd(study.fisher_matrix(obj, theta))
    ratio = high_rec["summary"]["film.areal_density"]["sd"] / bound
    assert 0.9 <= ratio <= 1.25, (ratio, bound)
