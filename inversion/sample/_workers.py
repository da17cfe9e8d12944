"""Worker processes: each holds one copy of the objective, set once by the pool initializer,
so a call ships only a parameter vector (never the forward model).
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import pickle
import signal

import numpy as np

from ..results._outputs import release_inherited_locks

__all__ = ["PENALTY", "DEFAULT_WORKERS", "worker_pool", "worker_log_posterior", "worker_cost",
           "LocalCost"]

#: Workers of the command line's inversions.  Two processes ran the 10-parameter layer
#: benchmark 1.5x faster than one on a 2-core machine (benchmarks/RESULTS.md, "Inversion"),
#: with identical samples; the library's invert() defaults to one.
DEFAULT_WORKERS = min(2, os.cpu_count() or 1)

#: cost given to points outside the prior or the physical limits during the start search; far
#: above any real -log posterior, yet small enough that the optimiser's population statistics
#: do not overflow
PENALTY = 1e30

# ----- worker side: one objective per process, set by the pool initializer -----
_WORKER_OBJECTIVE = None
#: what went wrong while a worker built its objective: raised by every call instead (an
#: initializer that raises makes the pool start a new worker, which fails the same way, for
#: ever, while the parent waits)
_WORKER_ERROR: str | None = None


def _init_worker(blob: bytes):
    global _WORKER_OBJECTIVE, _WORKER_ERROR
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C
    release_inherited_locks()  # the parent's writer lock must die with the parent
    try:
        _WORKER_OBJECTIVE = pickle.loads(blob)
        _WORKER_OBJECTIVE.model  # build the forward model once, now
    except Exception as exc:  # noqa: BLE001 - reported to the parent on the first call
        _WORKER_ERROR = f"{type(exc).__name__}: {exc}"


def _objective():
    if _WORKER_ERROR is not None:
        raise RuntimeError(f"a worker process could not build the objective ({_WORKER_ERROR})")
    return _WORKER_OBJECTIVE


def worker_log_posterior(theta):
    """The worker's objective's log-posterior."""
    return _objective().log_posterior(theta)


def worker_cost(theta):
    """The worker's objective's -log-posterior, :data:`PENALTY` outside the prior."""
    value = _objective().log_posterior(theta)
    return -value if np.isfinite(value) else PENALTY


class LocalCost:
    """-log-posterior of an objective in this process, :data:`PENALTY` outside the prior."""

    def __init__(self, objective):
        self.objective = objective

    def __call__(self, theta):
        value = self.objective.log_posterior(theta)
        return -value if np.isfinite(value) else PENALTY


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
