"""The sampler: a MAP start, a ball of walkers, emcee until the chain is long enough.

It owns the walkers, the starting points, the moves, the worker pool and the emcee backend;
the physics and the statistics live in the objective (``_objective``).  Worker processes get
the objective once, through the pool initializer; each call then ships only a parameter
vector.
"""

from __future__ import annotations

import contextlib
import logging
import multiprocessing
import pickle
import signal
import time
from dataclasses import dataclass, field

import emcee
import h5py
import numpy as np
from scipy import optimize

from forward import InputError

from ._outputs import is_lock_error, release_inherited_locks

__all__ = ["Sampler", "SamplerStatus", "autocorr_summary", "make_moves", "worker_pool",
           "stop_on_interrupt", "SafeHDFBackend"]

#: cost given to points outside the prior or the physical limits during the start search; far
#: above any real -log posterior, yet small enough that the optimiser's population statistics
#: do not overflow
_PENALTY = 1e30

# ----- worker side: one objective per process, set by the pool initializer -----
_WORKER_OBJECTIVE = None


def _init_worker(blob: bytes):
    global _WORKER_OBJECTIVE
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C
    release_inherited_locks()  # the parent's writer lock must die with the parent
    _WORKER_OBJECTIVE = pickle.loads(blob)
    _WORKER_OBJECTIVE.model  # build the forward model once, now


def _worker_log_posterior(theta):
    return _WORKER_OBJECTIVE.log_posterior(theta)


def _worker_cost(theta):
    value = _WORKER_OBJECTIVE.log_posterior(theta)
    return -value if np.isfinite(value) else _PENALTY


class _LocalCost:
    def __init__(self, objective):
        self.objective = objective

    def __call__(self, theta):
        value = self.objective.log_posterior(theta)
        return -value if np.isfinite(value) else _PENALTY


@contextlib.contextmanager
def worker_pool(objective, workers: int):
    """A pool of ``workers`` processes, each holding its own copy of ``objective``.

    Yields None for ``workers <= 1`` (everything runs in this process).
    """
    if workers <= 1:
        yield None
        return
    try:
        ctx = multiprocessing.get_context("fork")
    except ValueError:  # pragma: no cover - platforms without fork
        ctx = multiprocessing.get_context()
    pool = ctx.Pool(workers, initializer=_init_worker, initargs=(pickle.dumps(objective),))
    try:
        yield pool
    finally:
        pool.terminate()
        pool.join()


def make_moves(kind: str):
    """emcee moves by name: ``"stretch"`` (affine-invariant stretch move, Goodman & Weare 2010,
    Comm. App. Math. Comp. Sci. 5, 65) or ``"differential"`` (differential evolution moves,
    ter Braak 2006, Stat. Comput. 16, 239, mixed 4:1 with the snooker update, ter Braak &
    Vrugt 2008, Stat. Comput. 18, 435)."""
    if kind == "stretch":
        return emcee.moves.StretchMove()
    if kind == "differential":
        return [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    raise ValueError(f"unknown moves {kind!r}")


class SafeHDFBackend(emcee.backends.HDFBackend):
    """emcee's HDF5 backend, with each step's resume state written so that a crash at any
    moment leaves the last complete step resumable, bit for bit.

    emcee's own ``save_step`` updates the random state and the acceptance counts before the
    step counter in the same write; a process killed between the two leaves a random state one
    step ahead of the stored chain (the resumed chain then differs from an uninterrupted one)
    and the acceptances counted twice.  Here the random state and the cumulative acceptances
    go into one of two fixed-size slots (``resume_key``, ``resume_meta``,
    ``resume_accepted``: contiguous datasets allocated at reset, so writing them changes no
    file structure), the slot of step ``n`` being ``n % 2`` and tagged with ``n``; the file is
    flushed, and only then is the counter (``iteration``) advanced.  Readers take the slot
    whose tag equals the counter, so a step is either wholly in the file or not at all.

    Files written by plain emcee (no slots) are read and continued as before.  Opening the
    file is retried for a while when another process holds an HDF5 file lock (a reader
    looking at a running inversion), instead of failing the run.
    """

    #: seconds to keep retrying an open refused by another process's file lock
    LOCK_WAIT_S = 30.0

    def open(self, mode="r"):
        start = time.monotonic()
        told = False
        while True:
            try:
                return super().open(mode)
            except OSError as exc:
                if not is_lock_error(exc):
                    raise
                waited = time.monotonic() - start
                if waited > self.LOCK_WAIT_S:
                    raise InputError(
                        f"busy: another program has kept this file open for {waited:.0f} s, "
                        "so the sampler cannot write its next step; close it there. Every "
                        "step written so far is kept: continue with --resume",
                        where=self.filename) from None
                if not told and waited > 2.0:
                    told = True
                    logging.getLogger("sondage").warning(
                        "%s: waiting for another program to close the file", self.filename)
                time.sleep(0.05)

    def _create_slots(self, g, nwalkers):
        if "resume_key" in g:
            return
        g.create_dataset("resume_key", shape=(2, 624), dtype=np.uint32)
        meta = g.create_dataset("resume_meta", shape=(2, 4), dtype=np.float64)
        meta.attrs["columns"] = ["step", "pos", "has_gauss", "cached_gaussian"]
        meta[:, 0] = -1.0
        g.create_dataset("resume_accepted", shape=(2, nwalkers), dtype=np.float64)
        g.attrs["resume_slots"] = ("random state and acceptances after step n in slot n % 2, "
                                   "written and flushed before the counter 'iteration'")

    def reset(self, nwalkers, ndim):
        super().reset(nwalkers, ndim)
        with self.open("a") as f:
            g = f[self.name]
            # the chain and log-posteriors again, with a Fletcher-32 checksum per chunk: bytes
            # damaged on disk then fail loudly on reading instead of entering a resumed chain
            for key, shape in (("chain", (nwalkers, ndim)), ("log_prob", (nwalkers,))):
                del g[key]
                g.create_dataset(key, (0, *shape), maxshape=(None, *shape), dtype=self.dtype,
                                 chunks=(max(1, 4096 // (8 * int(np.prod(shape)))), *shape),
                                 fletcher32=True)
            self._create_slots(g, nwalkers)

    def _slot(self, g):
        """(key, meta, accepted) of the slot matching the counter, or None without slots."""
        if "resume_key" not in g:
            return None
        n = int(g.attrs["iteration"])
        meta = g["resume_meta"][()]
        if np.all(meta[:, 0] < 0):  # slots added to a plain emcee file, never written
            return None
        for s in (n % 2, 1 - n % 2):
            if int(meta[s, 0]) == n:
                return g["resume_key"][s], meta[s], g["resume_accepted"][s]
        if n == 0:
            return None
        raise OSError(f"the sampler state of step {n} is missing from the result file "
                      "(damaged file)")

    @property
    def random_state(self):
        with self.open() as f:
            slot = self._slot(f[self.name])
        if slot is None:
            return super().random_state
        key, meta, _ = slot
        return ("MT19937", np.asarray(key, dtype=np.uint32), int(meta[1]), int(meta[2]),
                float(meta[3]))

    @property
    def accepted(self):
        with self.open() as f:
            g = f[self.name]
            slot = self._slot(g)
            if slot is None:
                return g["accepted"][...]
            return np.array(slot[2])

    def save_step(self, state, accepted):
        self._check(state, accepted)
        with self.open("a") as f:
            g = f[self.name]
            n = int(g.attrs["iteration"])
            previous = self._slot(g)
            total = (np.array(previous[2]) if previous is not None else g["accepted"][...])
            total = total + accepted
            self._create_slots(g, int(g.attrs["nwalkers"]))
            g["chain"][n, :, :] = state.coords
            g["log_prob"][n, :] = state.log_prob
            if state.blobs is not None:
                g["blobs"][n, :] = state.blobs
            g["accepted"][:] = total  # emcee's own copy, for plain emcee readers
            name, key, pos, has_gauss, cached = state.random_state
            s = (n + 1) % 2
            g["resume_key"][s] = np.asarray(key, dtype=np.uint32)
            g["resume_accepted"][s] = total
            g["resume_meta"][s] = [n + 1, pos, has_gauss, cached]
            f.flush()
            g.attrs.modify("iteration", n + 1)


@dataclass
class SamplerStatus:
    """Where a sampling run stands."""

    steps: int
    converged: bool
    interrupted: bool
    tau: np.ndarray
    acceptance: np.ndarray
    warnings: list = field(default_factory=list)
    map_theta: np.ndarray | None = None
    map_log_posterior: float | None = None


def autocorr_summary(chain):
    """Integrated autocorrelation time per parameter (emcee's estimate, no tolerance check).

    Parameters
    ----------
    chain : ndarray, shape (steps, walkers, ndim)
    """
    if chain.shape[0] < 2:
        return np.full(chain.shape[2], np.nan)
    return np.asarray(emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True))


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
    START_POPSIZE = 6
    START_MAXITER = 40

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
        self.bounds = [p.prior.bounds() for p in objective.spec.parameters]

    # ----- start -----
    def find_start(self, pool=None):
        """Differential evolution inside the prior bounds, then a Nelder-Mead polish.

        Returns
        -------
        theta : ndarray (ndim,)
        log_posterior : float
        """
        cost = _LocalCost(self.objective)
        kwargs = {}
        if pool is not None:
            cost = _worker_cost
            kwargs["workers"] = pool.map
        result = optimize.differential_evolution(
            cost, self.bounds, seed=self.seed, popsize=self.START_POPSIZE,
            maxiter=self.START_MAXITER, tol=1e-4, polish=False, updating="deferred",
            init="sobol" if self.ndim < 40 else "latinhypercube", **kwargs)
        local = _LocalCost(self.objective)
        polished = optimize.minimize(local, result.x, method="Nelder-Mead", bounds=self.bounds,
                                     options=dict(maxfev=60 * self.ndim, xatol=1e-6,
                                                  fatol=1e-3))
        best = polished.x if polished.fun <= result.fun else result.x
        return np.asarray(best, dtype=float), -float(min(polished.fun, result.fun))

    def initial_walkers(self, theta):
        """A small ball around ``theta``, every walker inside the prior support."""
        rng = np.random.default_rng(self.seed + 1)
        lo = np.array([b[0] for b in self.bounds])
        hi = np.array([b[1] for b in self.bounds])
        scale = 1e-4 * (hi - lo)
        out = np.empty((self.n_walkers, self.ndim))
        for i in range(self.n_walkers):
            for attempt in range(200):
                trial = theta + scale * rng.standard_normal(self.ndim) * 0.5 ** (attempt // 20)
                if np.isfinite(self.objective.log_posterior(trial)):
                    break
            else:
                raise RuntimeError("could not place a walker with a finite posterior near the "
                                   "start point")
            out[i] = trial
        return out

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
            ``on_start(theta_map, log_posterior_map)`` after a fresh start search.

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
                theta, logp = self.find_start(pool)
                status.map_theta, status.map_log_posterior = theta, logp
                if on_start is not None:
                    on_start(theta, logp)
                start = emcee.State(self.initial_walkers(theta),
                                    random_state=np.random.RandomState(self.seed).get_state())
            else:
                # positions, log-posteriors and the random state of the last stored step
                start = self.backend.get_last_sample()
            fn = _worker_log_posterior if pool is not None else self.objective.log_posterior
            sampler = emcee.EnsembleSampler(self.n_walkers, self.ndim, fn, pool=pool,
                                            backend=self.backend, moves=make_moves(self.moves))
            if done > 0:
                converged, tau = self._check(sampler, tau_multiple)
                status.tau = tau
                if converged and done % check_every == 0:
                    status.converged = True
            remaining = max_steps - done
            if remaining > 0 and not status.converged:
                for _ in sampler.sample(start, iterations=remaining, progress=False):
                    step = sampler.iteration
                    if progress is not None:
                        progress(step)
                    if step % check_every == 0 or step == max_steps:
                        converged, status.tau = self._check(sampler, tau_multiple)
                        if converged and step % check_every == 0:
                            status.converged = True
                            break
                    if should_stop is not None and should_stop():
                        status.interrupted = True
                        break
            status.steps = int(self.backend.iteration)
            status.acceptance = (np.asarray(self.backend.accepted) / max(status.steps, 1))
            if status.steps:
                status.tau = autocorr_summary(self.backend.get_chain())
        if not status.converged and not status.interrupted:
            status.converged = bool(np.all(np.isfinite(status.tau))
                                    and status.steps >= tau_multiple * np.max(status.tau)
                                    and status.steps % check_every == 0)
        return status

    def _check(self, sampler, tau_multiple):
        tau = autocorr_summary(sampler.get_chain())
        ok = bool(np.all(np.isfinite(tau)) and sampler.iteration >= tau_multiple * np.max(tau))
        return ok, tau


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
