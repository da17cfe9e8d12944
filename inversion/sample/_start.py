"""Where the walkers start: independent global searches for the posterior's mode inside the
prior bounds, and groups of walkers spread over the region each search found.

1. **Start searches.**  ``n`` independent searches (differential evolution, scipy, inside the
   prior bounds: the support, or ppf(0.001) .. ppf(0.999) for unbounded priors; then a
   Nelder-Mead polish), each with its own seed.  When their optima differ by more than a few
   log-posterior units and by more than two posterior standard deviations in some parameter,
   they found different modes or one of them stopped on a ridge: that is said (a warning in the
   result), and the walkers start in both places.
2. **Walker groups.**  The walkers are split evenly into one group per search.  Each group is
   drawn from the Laplace approximation at its search's optimum: a normal distribution whose
   covariance is the inverse of the negative log-posterior's Hessian there (central finite
   differences), its eigenvalues floored so that no direction is wider than the prior bounds;
   every walker has a finite posterior.  So the groups start apart (at the searches' optima)
   and each is spread over its region, not packed into a tiny ball; walkers that never leave
   their group's mode show up in the between-group check (:mod:`._rhat`).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from ._workers import LocalCost, worker_cost

__all__ = ["prior_bounds", "find_start", "find_starts", "laplace_covariance", "walker_groups",
           "walker_ball", "starts_disagree", "START_POPSIZE", "START_MAXITER", "START_SEARCHES"]

#: differential evolution settings for each start search
START_POPSIZE = 6
START_MAXITER = 40
#: independent start searches (and walker groups)
START_SEARCHES = 2
#: optima closer than this in log-posterior count as one mode
_SAME_MODE_LOGP = 2.0


def prior_bounds(objective) -> list:
    """Search bounds of each free parameter (:meth:`Prior.bounds`)."""
    return [p.prior.bounds() for p in objective.spec.parameters]


def find_start(objective, bounds, *, seed: int, pool=None, popsize: int = START_POPSIZE,
               maxiter: int = START_MAXITER):
    """One search: differential evolution inside ``bounds``, then a Nelder-Mead polish.

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


def find_starts(objective, bounds, *, seed: int, pool=None, searches: int = START_SEARCHES,
                popsize: int = START_POPSIZE, maxiter: int = START_MAXITER):
    """``searches`` independent start searches (seeds ``seed``, ``seed + 1``, ...).

    Returns
    -------
    thetas : ndarray (searches, ndim)
    log_posteriors : ndarray (searches,)
    """
    found = [find_start(objective, bounds, seed=seed + k, pool=pool, popsize=popsize,
                        maxiter=maxiter) for k in range(int(searches))]
    return np.array([f[0] for f in found]), np.array([f[1] for f in found])


def _steps(theta, bounds):
    span = np.array([hi - lo for lo, hi in bounds], dtype=float)
    return 1e-3 * np.maximum(span, 1e-12)


def laplace_covariance(objective, theta, bounds) -> np.ndarray:
    """Inverse of the negative log-posterior's Hessian at ``theta`` (central differences of
    steps 1e-3 of each parameter's bounds, ``theta`` moved inside the bounds by 2.5 steps
    where it lies on one), with eigenvalues floored so that no direction is wider than the
    prior bounds."""
    h = _steps(theta, bounds)
    lo = np.array([b[0] for b in bounds], dtype=float)
    hi = np.array([b[1] for b in bounds], dtype=float)
    # an optimum on a bound (a sharp interface: mixing 0) has no curvature there: take it a
    # few steps inside, where both sides of every difference lie within the bounds
    theta = np.clip(np.asarray(theta, dtype=float), lo + 2.5 * h, hi - 2.5 * h)
    n = theta.size
    f0 = objective.log_posterior(theta)

    def f(d):
        value = objective.log_posterior(theta + d)
        return value if np.isfinite(value) else f0 - 1e6

    hess = np.empty((n, n))
    for i in range(n):
        ei = np.zeros(n)
        ei[i] = h[i]
        hess[i, i] = (f(ei) - 2 * f0 + f(-ei)) / h[i] ** 2
        for j in range(i):
            ej = np.zeros(n)
            ej[j] = h[j]
            hess[i, j] = hess[j, i] = (f(ei + ej) - f(ei - ej) - f(-ei + ej) + f(-ei - ej)) / (
                4 * h[i] * h[j])
    span = np.array([hi - lo for lo, hi in bounds], dtype=float)
    # work in units of the prior bounds, so the eigenvalue floor means the same everywhere
    scaled = -hess * np.outer(span, span)
    scaled = 0.5 * (scaled + scaled.T)
    values, vectors = np.linalg.eigh(scaled)
    values = np.maximum(values, 1.0)  # no direction wider than the bounds themselves
    cov_scaled = (vectors / values) @ vectors.T
    return cov_scaled * np.outer(span, span)


def starts_disagree(thetas, log_posteriors, covariance, names) -> str | None:
    """A message when the start searches found different optima (see module notes)."""
    order = np.argsort(log_posteriors)[::-1]
    best = order[0]
    sd = np.sqrt(np.maximum(np.diag(covariance), 1e-300))
    for k in order[1:]:
        gap = float(log_posteriors[best] - log_posteriors[k])
        z = np.abs(thetas[k] - thetas[best]) / sd
        worst = int(np.argmax(z))
        if gap > _SAME_MODE_LOGP and z[worst] > 2.0:
            return (f"the {len(thetas)} independent start searches disagree: log-posterior "
                    f"{log_posteriors[best]:.1f} and {log_posteriors[k]:.1f}, {names[worst]} at "
                    f"{thetas[best][worst]:.4g} and {thetas[k][worst]:.4g} ({z[worst]:.1f} sd "
                    "apart); walkers start at both")
    return None


def walker_groups(objective, thetas, covariances, bounds, *, n_walkers: int,
                  seed: int) -> np.ndarray:
    """Walkers in one group per start, each group drawn from its start's Laplace
    approximation (see module notes); every walker has a finite posterior.

    Returns
    -------
    ndarray (n_walkers, ndim)
        Group ``g`` holds rows ``g * n_walkers // groups`` up to the next group's first row.
    """
    rng = np.random.default_rng(seed)
    thetas = np.atleast_2d(thetas)
    groups = thetas.shape[0]
    ndim = thetas.shape[1]
    out = np.empty((n_walkers, ndim))
    edges = np.linspace(0, n_walkers, groups + 1).round().astype(int)
    for g in range(groups):
        chol = np.linalg.cholesky(covariances[g] + 1e-300 * np.eye(ndim))
        for i in range(edges[g], edges[g + 1]):
            for attempt in range(400):
                shrink = 0.5 ** (attempt // 40)
                trial = thetas[g] + shrink * chol @ rng.standard_normal(ndim)
                if np.isfinite(objective.log_posterior(trial)):
                    break
            else:
                raise RuntimeError("could not place a walker with a finite posterior near the "
                                   "start point")
            out[i] = trial
    return out


def walker_ball(objective, theta, bounds, *, n_walkers: int, seed: int) -> np.ndarray:
    """``n_walkers`` points in a small ball around ``theta``, each with a finite posterior
    (for tests and studies; the sampler uses :func:`walker_groups`)."""
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
