"""The subspace and block differential-evolution moves sample known posteriors; the block is
the edge-spread parameters of a joint fit."""

from __future__ import annotations

import emcee
import numpy as np
import pytest
from scipy import stats

from inversion.fit._roles import Role
from inversion.fit._spec import Parameter
from inversion.sample._moves import BlockDEMove, SubspaceDEMove, edge_spread_block
from inversion.sample._sampler import make_moves


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


def test_block_moves_sample_a_known_correlated_normal():
    # the joint fit's mixture (whole-vector differential evolution, the block, the snooker
    # update) on a 6-dimensional normal whose first three coordinates are correlated 0.8 and
    # skewed in scale; marginals compared with scipy.stats.norm (reference library) by
    # Kolmogorov-Smirnov on thinned draws, and the block's correlations with the covariance's
    ndim, walkers, block = 6, 32, [0, 1, 2]
    scale = np.array([1.0, 5.0, 0.2, 2.0, 1.0, 3.0])
    corr = np.eye(ndim)
    corr[np.ix_(block, block)] = 0.8
    np.fill_diagonal(corr, 1.0)
    cov = corr * np.outer(scale, scale)
    precision = np.linalg.inv(cov)
    moves = make_moves("differential", block)
    assert [type(m) for m, _ in moves] == [emcee.moves.DEMove, BlockDEMove,
                                           emcee.moves.DESnookerMove]
    rng = np.random.default_rng(3)
    sampler = emcee.EnsembleSampler(walkers, ndim, lambda x: -0.5 * x @ precision @ x,
                                    moves=moves)
    sampler.random_state = np.random.RandomState(4).get_state()
    sampler.run_mcmc(rng.normal(0.0, 0.1, (walkers, ndim)) * scale, 6000, progress=False)
    tau = float(np.max(sampler.get_autocorr_time(discard=1000, quiet=True)))
    assert 5000 > 50 * tau
    draws = sampler.get_chain(discard=1000, thin=int(np.ceil(tau)), flat=True)
    for j in range(ndim):
        # six tests at a family-wise false-alarm rate of 1 % (Bonferroni)
        assert stats.kstest(draws[:, j] / scale[j], stats.norm.cdf).pvalue > 0.01 / ndim
    measured = np.corrcoef(draws.T)
    assert np.allclose(measured[np.ix_(block, block)], corr[np.ix_(block, block)], atol=0.06)


def test_the_block_move_holds_the_other_coordinates():
    move = BlockDEMove([1, 3])
    s = np.zeros((4, 5))
    c = [np.arange(30.0).reshape(6, 5)]
    q, factors = move.get_proposal(s, c, np.random.RandomState(0))
    assert np.all(q[:, [0, 2, 4]] == 0.0) and np.all(q[:, [1, 3]] != 0.0)
    assert np.all(factors == 0.0)  # symmetric: the Metropolis ratio is the posterior ratio
    with pytest.raises(ValueError, match="at least one"):
        BlockDEMove([])


def test_the_edge_spread_block_is_the_widths_and_straggling_of_a_joint_fit():
    def par(name, role):
        return Parameter(name, "", None, role)

    params = [par("film.areal_density", Role.AREAL_DENSITY), par("film.mixing", Role.MIXING),
              par("stopping.Ge", Role.STOPPING), par("straggling_scale", Role.STRAGGLING),
              par("under.mixing", Role.MIXING),
              par("straggling_correction", Role.STRAGGLING_CORRECTION),
              par("fwhm_keV@detector", Role.FWHM)]
    assert edge_spread_block(params, measurements=2) == [1, 3, 4, 5]
    assert edge_spread_block(params, measurements=1) == []  # one spectrum: no block
    no_width = [p for p in params if p.role is not Role.MIXING]
    assert edge_spread_block(no_width, measurements=2) == []
    # without a block the differential moves are the 4:1 mixture of before
    assert [type(m) for m, _ in make_moves("differential")] == [emcee.moves.DEMove,
                                                                emcee.moves.DESnookerMove]


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
