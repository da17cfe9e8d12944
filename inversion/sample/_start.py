"""Where the walkers start: a global-then-local search for the posterior's mode inside the
prior bounds, and a small ball of walkers around it.

1. Differential evolution (scipy) inside the prior bounds (the support, or ppf(0.001) ..
   ppf(0.999) for unbounded priors), then a Nelder-Mead polish; seeded.
2. A ball of relative size 1e-4 of the bounds around the start, every walker with a finite
   posterior.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from ._workers import LocalCost, worker_cost

__all__ = ["prior_bounds", "find_start", "walker_ball", "START_POPSIZE", "START_MAXITER"]

#: differential evolution settings for the MAP start
START_POPSIZE = 6
START_MAXITER = 40


def prior_bounds(objective) -> list:
    """Search bounds of each free parameter (:meth:`Prior.bounds`)."""
    return [p.prior.bounds() for p in objective.spec.parameters]


def find_start(objective, bounds, *, seed: int, pool=None, popsize: int = START_POPSIZE,
               maxiter: int = START_MAXITER):
    """Differential evolution inside ``bounds``, then a Nelder-Mead polish.

    Parameters
    ----------
    objective : Objective
    bounds : list of (low, high)
    seed : int
    pool : multiprocessing.Pool, optional
        Workers holding the objective (:func:`inversion.sample._workers.worker_pool`).

    Returns
    -------
    theta : ndarray (ndim,)
    log_posterior : float
    """
    ndim = len(bounds)
    cost = LocalCost(objective)
    kwargs = {}
    if pool is not None:
        cost = worker_cost
        kwargs["workers"] = pool.map
    result = optimize.differential_evolution(
        cost, bounds, seed=seed, popsize=popsize, maxiter=maxiter, tol=1e-4, polish=False,
        updating="deferred", init="sobol" if ndim < 40 else "latinhypercube", **kwargs)
    local = LocalCost(objective)
    polished = optimize.minimize(local, result.x, method="Nelder-Mead", bounds=bounds,
                                 options=dict(maxfev=60 * ndim, xatol=1e-6, fatol=1e-3))
    best = polished.x if polished.fun <= result.fun else result.x
    return np.asarray(best, dtype=float), -float(min(polished.fun, result.fun))


def walker_ball(objective, theta, bounds, *, n_walkers: int, seed: int) -> np.ndarray:
    """``n_walkers`` points in a small ball around ``theta``, each with a finite posterior."""
    ndim = len(bounds)
    rng = np.random.default_rng(seed)
    lo = np.array([b[0] for b in bounds])
    hi = np.array([b[1] for b in bounds])
    scale = 1e-4 * (hi - lo)
    out = np.empty((n_walkers, ndim))
    for i in range(n_walkers):
        for attempt in range(200):
            trial = theta + scale * rng.standard_normal(ndim) * 0.5 ** (attempt // 20)
            if np.isfinite(objective.log_posterior(trial)):
                break
        else:
            raise RuntimeError("could not place a walker with a finite posterior near the "
                               "start point")
        out[i] = trial
    return out
