"""The sampler: independent start searches, walker groups spread over their regions, emcee
until the chain is long enough and the groups agree.

It owns the walkers, the starting points (:mod:`inversion.sample._start`), the moves, the
worker pool (:mod:`inversion.sample._workers`) and the backend; the physics and the statistics
live in the objective (:mod:`inversion.fit`), the stopping rule in
:mod:`inversion.sample._convergence`.
"""

from __future__ import annotations

import contextlib
import signal

import emcee
import numpy as np

from ._convergence import (WALKER_GROUPS, SamplerStatus, autocorr_summary, group_rhat,
                           is_converged)
from ._start import (START_MAXITER, START_POPSIZE, find_start, find_starts, laplace_covariance,
                     prior_bounds, starts_disagree, walker_ball, walker_groups)
from ._moves import BlockDEMove, SubspaceDEMove, edge_spread_block
from ._polish import gradient_polish
from ._workers import worker_log_posterior, worker_pool

__all__ = ["Sampler", "SamplerStatus", "make_moves", "stop_on_interrupt",
           "DIFFERENTIAL_SHARES"]


#: shares of the differential moves: whole-vector differential evolution, the edge-spread
#: block (when the fit has one) and the snooker update
DIFFERENTIAL_SHARES = (0.7, 0.1, 0.2)


def make_moves(kind: str, block=()):
    """emcee moves by name: ``"stretch"`` (affine-invariant stretch move, Goodman & Weare 2010,
    Comm. App. Math. Comp. Sci. 5, 65) or ``"differential"`` (differential evolution moves,
    ter Braak 2006, Stat. Comput. 16, 239, mixed 4:1 with the snooker update, ter Braak &
    Vrugt 2008, Stat. Comput. 18, 435) or ``"subspace"`` (differential evolution in random
    subspaces, :class:`inversion.sample._moves.SubspaceDEMove`, with the same snooker share).

    ``block``: positions of the edge-spread parameters
    (:func:`inversion.sample._moves.edge_spread_block`).  When given, ``"differential"`` spends
    a share of its proposals (:data:`DIFFERENTIAL_SHARES`) on differential evolution in that
    block alone (:class:`inversion.sample._moves.BlockDEMove`).
    """
    if kind == "stretch":
        return emcee.moves.StretchMove()
    if kind == "differential":
        if len(block):
            whole, part, snooker = DIFFERENTIAL_SHARES
            return [(emcee.moves.DEMove(), whole), (BlockDEMove(block), part),
                    (emcee.moves.DESnookerMove(), snooker)]
        return [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    if kind == "subspace":
        return [(SubspaceDEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    raise ValueError(f"unknown moves {kind!r}")


class Sampler:
    """MAP start, walker ball and emcee sampling with a resumable HDF5 backend.

    Parameters
    ----------
    objective : Objective
        Answers ``log_posterior(theta)``; its parameters carry the priors (``spec``).
    n_walkers : int
        Number of walkers (at least ``2 * ndim``, even).
    seed : int
        Seeds the start search, the walker ball and emcee's random state.
    backend : emcee.backends.Backend
        Where the chain goes (an :class:`emcee.backends.HDFBackend` for result files).
    workers : int
        Processes evaluating the objective (1: this process only).
    moves : str
        ``"stretch"`` or ``"differential"`` (see :func:`make_moves`).
    """

    #: differential evolution settings for the MAP start
    START_POPSIZE = START_POPSIZE
    START_MAXITER = START_MAXITER

    def __init__(self, objective, *, n_walkers, seed=0, backend=None, workers=1,
                 moves="stretch"):
        self.objective = objective
        self.ndim = objective.ndim
        if n_walkers < 2 * self.ndim:
            raise ValueError(f"need at least {2 * self.ndim} walkers, got {n_walkers}")
        self.n_walkers = int(n_walkers)
        self.seed = int(seed)
        self.backend = backend if backend is not None else emcee.backends.Backend()
        self.workers = int(workers)
        self.moves = moves
        self.bounds = prior_bounds(objective)
        #: the edge-spread parameters the differential moves also update as a block (joint
        #: fits only)
        spec = getattr(objective, "spec", None)
        self.block = edge_spread_block(getattr(spec, "parameters", ()),
                                       measurements=len(getattr(objective, "parts", ())) or 1)

    # ----- start -----
    def find_start(self, pool=None):
        """One start search: differential evolution inside the prior bounds, then a
        Nelder-Mead polish (:func:`inversion.sample._start.find_start`).

        Returns
        -------
        theta : ndarray (ndim,)
        log_posterior : float
        """
        return find_start(self.objective, self.bounds, seed=self.seed, pool=pool,
                          popsize=self.START_POPSIZE, maxiter=self.START_MAXITER)

    def initial_walkers(self, theta):
        """A small ball around ``theta`` (for tests and studies)."""
        return walker_ball(self.objective, theta, self.bounds, n_walkers=self.n_walkers,
                           seed=self.seed + 1)

    def start(self, pool=None):
        """Independent start searches and walker groups spread over their regions.

        Returns
        -------
        walkers : ndarray (n_walkers, ndim)
        thetas, log_posteriors : ndarray
            The searches' optima.
        warning : str or None
            Said when the searches disagree.
        """
        thetas, logps = find_starts(self.objective, self.bounds, seed=self.seed, pool=pool,
                                    searches=WALKER_GROUPS, popsize=self.START_POPSIZE,
                                    maxiter=self.START_MAXITER)
        if getattr(self.objective.spec, "profile", "layers") == "nodes":
            # tens of node parameters: the searches stop short of the mode; a gradient
            # polish puts each group's walkers where the posterior is (sample/_polish.py)
            for g in range(thetas.shape[0]):
                thetas[g], logps[g] = gradient_polish(self.objective, thetas[g], self.bounds,
                                                      pool=pool)
        covs = [laplace_covariance(self.objective, th, self.bounds) for th in thetas]
        best = int(np.argmax(logps))
        warning = starts_disagree(thetas, logps, covs[best], self.objective.spec.names)
        walkers = walker_groups(self.objective, thetas, covs, self.bounds,
                                n_walkers=self.n_walkers, seed=self.seed + 1)
        return walkers, thetas, logps, warning

    # ----- sampling -----
    def run(self, *, max_steps, tau_multiple=50.0, check_every=200, progress=None,
            should_stop=None, on_start=None):
        """Sample until ``steps >= tau_multiple * tau`` for every parameter or ``max_steps``.

        Resumes from the backend when it already holds steps (the stored random state and
        positions continue the chain exactly).

        Parameters
        ----------
        max_steps : int
            Total steps in the chain (earlier segments included).
        tau_multiple : float
            Chain length wanted, in integrated autocorrelation times.
        check_every : int
            Steps between convergence checks (at absolute step numbers, so a resumed run
            checks at the same steps as an uninterrupted one).
        progress : callable, optional
            ``progress(steps_done)`` after each step.
        should_stop : callable, optional
            Returns True to stop after the current step (Ctrl-C).
        on_start : callable, optional
            ``on_start(thetas, log_posteriors, warning)`` after fresh start searches (their
            optima, and the message when they disagree).

        Returns
        -------
        SamplerStatus
        """
        done = int(self.backend.iteration)
        status = SamplerStatus(steps=done, converged=False, interrupted=False,
                               tau=np.full(self.ndim, np.nan),
                               acceptance=np.zeros(self.n_walkers))
        with worker_pool(self.objective, self.workers) as pool:
            if done == 0:
                walkers, thetas, logps, warning = self.start(pool)
                best = int(np.argmax(logps))
                status.map_theta, status.map_log_posterior = thetas[best], float(logps[best])
                if warning:
                    status.warnings.append(warning)
                if on_start is not None:
                    on_start(thetas, logps, warning)
                start = emcee.State(walkers,
                                    random_state=np.random.RandomState(self.seed).get_state())
            else:
                # positions, log-posteriors and the random state of the last stored step
                start = self.backend.get_last_sample()
            fn = worker_log_posterior if pool is not None else self.objective.log_posterior
            sampler = emcee.EnsembleSampler(self.n_walkers, self.ndim, fn, pool=pool,
                                            backend=self.backend,
                                            moves=make_moves(self.moves, self.block))
            if done > 0:
                converged, status.tau, status.rhat = self._check(sampler, tau_multiple)
                if converged and done % check_every == 0:
                    status.converged = True
            remaining = max_steps - done
            if remaining > 0 and not status.converged:
                # each state yielded is one step stored (counted here: reading the counter
                # back from the file would open it once more per step)
                for step, _ in enumerate(sampler.sample(start, iterations=remaining,
                                                        progress=False), start=done + 1):
                    if progress is not None:
                        progress(step)
                    if step % check_every == 0 or step == max_steps:
                        converged, status.tau, status.rhat = self._check(sampler, tau_multiple)
                        if converged and step % check_every == 0:
                            status.converged = True
                            break
                    if should_stop is not None and should_stop():
                        status.interrupted = True
                        break
            status.steps = int(self.backend.iteration)
            status.acceptance = (np.asarray(self.backend.accepted) / max(status.steps, 1))
            if status.steps:
                chain = self.backend.get_chain()
                status.tau = autocorr_summary(chain)
                status.rhat = group_rhat(chain, status.tau)
        if not status.converged and not status.interrupted:
            status.converged = (is_converged(status.tau, status.steps, tau_multiple,
                                             status.rhat)
                                and status.steps % check_every == 0)
        return status

    def _check(self, sampler, tau_multiple):
        """(converged, tau, rhat) of the chain so far."""
        chain = sampler.get_chain()
        tau = autocorr_summary(chain)
        rhat = group_rhat(chain, tau)
        return is_converged(tau, sampler.iteration, tau_multiple, rhat), tau, rhat


@contextlib.contextmanager
def stop_on_interrupt():
    """Turn Ctrl-C (SIGINT) into a flag checked after each step; yields ``should_stop()``."""
    flag = {"stop": False}

    def handler(signum, frame):
        flag["stop"] = True

    try:
        previous = signal.signal(signal.SIGINT, handler)
    except ValueError:  # not the main thread: no handler, no clean stop
        yield lambda: False
        return
    try:
        yield lambda: flag["stop"]
    finally:
        signal.signal(signal.SIGINT, previous)
