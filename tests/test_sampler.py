"""The sampler: prior-only runs reproduce the priors, resuming equals running longer, a
worker pool gives the same chain as one process."""

from __future__ import annotations

import emcee
import numpy as np
import pytest
from scipy import stats

from inversion import Sampler

FIT = {"free": {"film.areal_density": {"uniform": [100, 600]},
                "film.mixing": {"halfnormal": 30}},
       "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV"], "walkers": 12}


def _chain(objective, max_steps, *, path=None, seed=4, workers=1, should_stop=None,
           check_every=20):
    backend = emcee.backends.Backend() if path is None else \
        emcee.backends.HDFBackend(str(path), name="mcmc")
    if path is None or not backend.initialized:
        backend.reset(objective.spec.n_walkers, objective.ndim)
    s = Sampler(objective, n_walkers=objective.spec.n_walkers, seed=seed, backend=backend,
                workers=workers)
    status = s.run(max_steps=max_steps, tau_multiple=1e6, check_every=check_every,
                   should_stop=should_stop)
    return backend, status


def test_prior_only_samples_reproduce_the_priors(toy):
    fit = {"free": {"film.areal_density": {"uniform": [100, 600]},
                    "film.mixing": {"halfnormal": 30},
                    "film.composition": True,
                    "fluence_scale": {"lognormal": [1.0, 0.1]}},
           "fixed": ["stopping", "gain_keV", "offset_keV", "straggling"], "walkers": 24}
    obj = toy.objective(fit, likelihood=False)
    backend, status = _chain(obj, 6000, seed=9, check_every=1000)
    tau = float(np.max(status.tau))
    assert 6000 > 50 * tau  # long enough for emcee's autocorrelation estimate to hold
    # thin by the longest autocorrelation time: draws then are close to independent, as the
    # Kolmogorov-Smirnov test assumes
    draws = backend.get_chain(discard=1000, thin=int(np.ceil(tau)), flat=True)
    assert draws.shape[0] > 1000
    # Kolmogorov-Smirnov against each prior (scipy.stats, reference library); five tests at a
    # family-wise false-alarm rate of 1 % (Bonferroni)
    for j, p in enumerate(obj.spec.parameters):
        pvalue = stats.kstest(draws[:, j], p.prior.dist.cdf).pvalue
        assert pvalue > 0.01 / obj.ndim, (p.name, pvalue)


def test_resume_equals_one_uninterrupted_run(toy, tmp_path):
    obj = toy.objective(FIT)
    one, _ = _chain(obj, 80, path=tmp_path / "one.h5")
    first, st = _chain(obj, 40, path=tmp_path / "two.h5")
    assert st.steps == 40 and not st.interrupted
    early = first.get_chain().copy()
    second, st = _chain(obj, 80, path=tmp_path / "two.h5")
    assert st.steps == 80
    assert np.array_equal(second.get_chain()[:40], early)  # earlier steps unchanged
    assert np.array_equal(second.get_chain(), one.get_chain())  # bit-identical
    assert np.array_equal(second.get_log_prob(), one.get_log_prob())


def test_stop_after_a_step_then_resume(toy, tmp_path):
    obj = toy.objective(FIT)
    calls = {"n": 0}

    def stop_at_27():
        calls["n"] += 1
        return calls["n"] >= 27

    part, st = _chain(obj, 80, path=tmp_path / "cut.h5", should_stop=stop_at_27)
    assert st.interrupted and st.steps == 27
    full, st = _chain(obj, 80, path=tmp_path / "cut.h5")
    ref, _ = _chain(obj, 80)
    assert st.steps == 80
    assert np.array_equal(full.get_chain(), ref.get_chain())


def test_two_workers_give_the_same_chain_as_one(toy):
    obj = toy.objective(FIT)
    serial, _ = _chain(obj, 30)
    pooled, _ = _chain(obj, 30, workers=2)
    assert np.array_equal(serial.get_chain(), pooled.get_chain())


def test_walkers_start_inside_the_prior_support(toy):
    obj = toy.objective(FIT)
    s = Sampler(obj, n_walkers=12, seed=1)
    theta, logp = s.find_start()
    assert np.isfinite(logp)
    ball = s.initial_walkers(theta)
    assert ball.shape == (12, obj.ndim)
    assert all(np.isfinite(obj.log_prior(w)) for w in ball)
    assert np.linalg.matrix_rank(ball - ball.mean(axis=0)) == obj.ndim


def test_too_few_walkers_is_refused(toy):
    obj = toy.objective(FIT)
    with pytest.raises(ValueError, match="at least"):
        Sampler(obj, n_walkers=obj.ndim, seed=0)
