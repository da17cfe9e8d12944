"""Convergence: integrated autocorrelation times, the between-group R-hat, the stopping rule,
burn-in and thinning, and the diagnostics stored beside the samples.

A chain is converged when (1) it is ``tau_multiple`` times emcee's integrated autocorrelation
time long for every parameter (Foreman-Mackey et al., PASP 125, 306, 2013), and (2) the walker
groups, started apart at independent start searches, agree: the rank-normalised split R-hat
with each group as one chain is at most 1.01 for every parameter (Vehtari et al., Bayesian
Analysis 16 (2021) 667; :mod:`inversion.sample._rhat`), computed after burn-in on the chain
thinned by tau/2.  Burn-in discards 3 tau (at most half the chain) and thinning keeps every
tau/2-th step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import emcee
import numpy as np

from ._rhat import RHAT_LIMIT, between_group_rhat

#: the longest chain any command accepts (``--max-steps``, ``fit.max_steps``)
MAX_STEPS = 10_000_000

__all__ = ["SamplerStatus", "autocorr_summary", "is_converged", "burn_in_and_thin",
           "diagnostics", "not_converged_message", "MAX_STEPS", "group_rhat", "WALKER_GROUPS"]

#: walker groups, one per independent start search
WALKER_GROUPS = 2


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
    rhat: np.ndarray | None = None


def autocorr_summary(chain):
    """Integrated autocorrelation time per parameter (emcee's estimate, no tolerance check).

    Parameters
    ----------
    chain : ndarray, shape (steps, walkers, ndim)
    """
    if chain.shape[0] < 2:
        return np.full(chain.shape[2], np.nan)
    # a walker that has not moved yet has no autocorrelation function (0/0): its parameter's
    # tau comes out NaN, which the rules read as "not converged"
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.asarray(emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True))


def is_converged(tau, steps: int, tau_multiple: float, rhat=None) -> bool:
    """True when ``steps >= tau_multiple * tau`` for every parameter (tau finite) and, when
    given, every ``rhat`` is at most :data:`RHAT_LIMIT`."""
    tau = np.asarray(tau, dtype=float)
    ok = bool(np.all(np.isfinite(tau)) and steps >= tau_multiple * np.max(tau))
    if ok and rhat is not None:
        r = np.asarray(rhat, dtype=float)
        ok = bool(np.all(np.isfinite(r)) and np.max(r) <= RHAT_LIMIT)
    return ok


def group_rhat(chain, tau, groups: int = WALKER_GROUPS) -> np.ndarray:
    """Between-group R-hat of a chain (steps, walkers, parameters) after burn-in, thinned."""
    steps = chain.shape[0]
    discard, thin = burn_in_and_thin(tau, steps)
    return between_group_rhat(chain[discard::thin], groups)


def _tau_max(tau) -> float:
    tau = np.asarray(tau, dtype=float)
    return float(np.nanmax(tau)) if np.any(np.isfinite(tau)) else 1.0


def burn_in_and_thin(tau, steps: int) -> tuple[int, int]:
    """(discard, thin): 3 tau of burn-in, at most half the chain; every tau/2-th step."""
    tau_max = _tau_max(tau)
    return int(min(math.ceil(3 * tau_max), steps // 2)), max(1, int(tau_max / 2))


def not_converged_message(status, tau_multiple: float, names=None, *,
                          check_every: int | None = None) -> str:
    """The warning for a chain that is not converged: too short for ``tau_multiple``
    autocorrelation times, or walker groups that disagree (naming the parameters).

    The autocorrelation time estimated from a chain shorter than ``tau_multiple`` times it is
    a lower bound (the estimate grows as the chain does), so the steps needed are given as
    "at least", and the suggested ``--max-steps`` is at least twice the chain so far, on the
    ``check_every`` grid where convergence is checked (when given), never above
    :data:`MAX_STEPS`.
    """
    tau = np.asarray(status.tau, dtype=float)
    steps = int(status.steps)
    finite = bool(np.any(np.isfinite(tau)))
    tau_max = float(np.nanmax(tau)) if finite else math.nan
    parts = []
    needed = 2 * steps
    if not finite:
        parts.append(f"{steps} steps, but the autocorrelation time could not be estimated yet")
    elif not (np.all(np.isfinite(tau)) and steps >= tau_multiple * tau_max):
        needed = tau_multiple * tau_max
        parts.append(f"{steps} steps, but {tau_multiple:g} x the longest autocorrelation time "
                     f"estimated so far ({tau_max:.1f} steps) asks for at least "
                     f"{math.ceil(needed)} steps, and an estimate from a chain this short is a "
                     "lower bound (it grows as the chain does)")
    rhat = getattr(status, "rhat", None)
    rhat = None if rhat is None else np.asarray(rhat, dtype=float)
    if rhat is not None and not (np.all(np.isfinite(rhat)) and rhat.max() <= RHAT_LIMIT):
        bad = [i for i in np.argsort(-np.nan_to_num(rhat, nan=np.inf))
               if not rhat[i] <= RHAT_LIMIT][:3]
        label = (lambda i: names[i]) if names is not None else (lambda i: f"parameter {i}")
        parts.append("the walker groups started at independent start searches disagree "
                     "(R-hat " + ", ".join(f"{label(i)} {rhat[i]:.3f}" for i in bad)
                     + f" > {RHAT_LIMIT}): the answer depends on where the chain started")
    if not parts:
        parts.append(f"{steps} steps; the convergence rule was not checked at the last step")
    suggest = max(needed, 2 * steps, steps + 1)
    if check_every:
        suggest = math.ceil(suggest / check_every) * check_every
    suggest = min(int(math.ceil(suggest)), MAX_STEPS)
    return ("NOT CONVERGED: " + "; ".join(parts) + "; intervals may be too narrow or "
            f"misplaced. Continue with --resume --max-steps {suggest} (or more)")


def diagnostics(status, *, steps: int, n_walkers: int, tau_multiple: float, discard: int,
                thin: int, messages) -> dict:
    """What the result file's ``/diagnostics`` holds: per-parameter autocorrelation times and
    effective sample sizes (steps x walkers / tau), acceptance per walker, and the verdict."""
    tau = np.asarray(status.tau, dtype=float)
    acceptance = np.asarray(status.acceptance, dtype=float)
    ess = steps * n_walkers / tau if np.all(np.isfinite(tau)) else np.full(tau.shape, np.nan)
    rhat = (np.asarray(status.rhat, dtype=float) if status.rhat is not None
            else np.full(tau.shape, np.nan))
    return {"autocorr_time": tau, "acceptance": acceptance, "ess": ess, "rhat": rhat,
            "rhat_max": float(np.nanmax(rhat)) if np.any(np.isfinite(rhat)) else math.nan,
            "rhat_limit": RHAT_LIMIT, "groups": WALKER_GROUPS,
            "steps": steps, "converged": bool(status.converged),
            "interrupted": bool(status.interrupted), "tau_multiple": tau_multiple,
            "walkers": n_walkers, "discard": discard, "thin": thin,
            "warnings": list(messages) if messages else ["none"],
            "mean_acceptance": float(acceptance.mean()) if acceptance.size else math.nan}
