"""The subspace differential-evolution move samples a known posterior."""

from __future__ import annotations

import emcee
import numpy as np
import pytest
from scipy import stats

from inversion.sample._moves import SubspaceDEMove


def test_subspace_move_samples_a_known_normal():
    # a 12-dimensional normal with unequal scales; draws compared with scipy.stats.norm
    # (reference library) by Kolmogorov-Smirnov on thinned draws, and the sample moments
    ndim, walkers = 12, 40
    scale = np.linspace(0.5, 3.0, ndim)
    rng = np.random.default_rng(1)
    sampler = emcee.EnsembleSampler(
        walkers, ndim, lambda x: -0.5 * np.sum((x / scale) ** 2),
        moves=[(SubspaceDEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)])
    sampler.random_state = np.random.RandomState(2).get_state()
    sampler.run_mcmc(rng.normal(0.0, 0.1, (walkers, ndim)), 6000, progress=False)
    tau = float(np.max(sampler.get_autocorr_time(discard=1000, quiet=True)))
    assert 5000 > 50 * tau
    draws = sampler.get_chain(discard=1000, thin=int(np.ceil(tau)), flat=True)
    for j in range(ndim):
        z = draws[:, j] / scale[j]
        # twelve tests at a family-wise false-alarm rate of 1 % (Bonferroni)
        assert stats.kstest(z, stats.norm.cdf).pvalue > 0.01 / ndim
    assert np.all(np.abs(draws.mean(axis=0) / scale) < 5 / np.sqrt(draws.shape[0]))


def test_resume_with_subspace_moves_is_exact(toy, tmp_path):
    # the free-form profile's sampler: two segments on disk give the chain of one run, bit for
    # bit (the move draws only from emcee's stored random state)
    from inversion import Sampler

    fit = {"profile": "nodes", "nodes": {"count": 5, "depth_1e15": 480.0},
           "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "straggling"],
           "moves": "subspace"}
    obj = toy.objective(fit)

    def chain(steps, path=None):
        backend = emcee.backends.Backend() if path is None else \
            emcee.backends.HDFBackend(str(path), name="mcmc")
        if path is None or not backend.initialized:
            backend.reset(obj.spec.n_walkers, obj.ndim)
        s = Sampler(obj, n_walkers=obj.spec.n_walkers, seed=5, backend=backend,
                    moves=obj.spec.moves)
        s.run(max_steps=steps, tau_multiple=1e6, check_every=20)
        return backend

    one = chain(60)
    first = chain(25, tmp_path / "two.h5")
    assert first.iteration == 25
    second = chain(60, tmp_path / "two.h5")
    assert np.array_equal(second.get_chain(), one.get_chain())
    assert np.array_equal(second.get_log_prob(), one.get_log_prob())


def test_gradient_polish_climbs_and_is_the_same_with_workers(toy):
    # the polish only ever improves a start, and two workers give the same point as one
    # process (the same evaluations, in the same order)
    from inversion.sample._polish import gradient_polish
    from inversion.sample._start import prior_bounds
    from inversion.sample._workers import worker_pool

    fit = {"profile": "nodes", "nodes": {"count": 6, "depth_1e15": 480.0},
           "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "straggling"]}
    obj = toy.objective(fit)
    bounds = prior_bounds(obj)
    start = np.concatenate([np.full(obj.ndim - 1, 0.3), [1.02]])
    theta, logp = gradient_polish(obj, start, bounds, maxiter=40)
    assert logp > obj.log_posterior(start) and logp == obj.log_posterior(theta)
    with worker_pool(obj, 2) as pool:
        pooled, logp2 = gradient_polish(obj, start, bounds, pool=pool, maxiter=40)
    assert np.array_equal(theta, pooled) and logp == logp2


class _BreaksInWorkers:
    """An objective whose forward model cannot be built (as in a worker missing a file)."""

    @property
    def model(self):
        raise OSError("stopping table gone")

    def log_posterior(self, theta):  # pragma: no cover - never reached
        return 0.0


def test_a_worker_that_cannot_build_its_objective_raises_in_the_parent():
    # the pool's initializer must not fail: a failing initializer is restarted for ever and the
    # parent waits on the first call; the error comes back with the call instead
    from inversion.sample._workers import worker_log_posterior, worker_pool

    with worker_pool(_BreaksInWorkers(), 2) as pool:
        pending = pool.map_async(worker_log_posterior, [np.zeros(1)])
        with pytest.raises(RuntimeError, match="could not build the objective.*stopping table"):
            pending.get(timeout=120)
