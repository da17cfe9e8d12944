"""Convergence: integrated autocorrelation times, the stopping rule, burn-in and thinning,
and the diagnostics stored beside the samples.

The chain is long enough when it is ``tau_multiple`` times emcee's integrated autocorrelation
time long for every parameter (Foreman-Mackey et al., PASP 125, 306, 2013); burn-in discards
3 tau (at most half the chain) and thinning keeps every tau/2-th step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import emcee
import numpy as np

__all__ = ["SamplerStatus", "autocorr_summary", "is_converged", "burn_in_and_thin",
           "diagnostics", "not_converged_message"]


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


def is_converged(tau, steps: int, tau_multiple: float) -> bool:
    """True when ``steps >= tau_multiple * tau`` for every parameter (tau finite)."""
    tau = np.asarray(tau, dtype=float)
    return bool(np.all(np.isfinite(tau)) and steps >= tau_multiple * np.max(tau))


def _tau_max(tau) -> float:
    tau = np.asarray(tau, dtype=float)
    return float(np.nanmax(tau)) if np.any(np.isfinite(tau)) else 1.0


def burn_in_and_thin(tau, steps: int) -> tuple[int, int]:
    """(discard, thin): 3 tau of burn-in, at most half the chain; every tau/2-th step."""
    tau_max = _tau_max(tau)
    return int(min(math.ceil(3 * tau_max), steps // 2)), max(1, int(tau_max / 2))


def not_converged_message(status, tau_multiple: float) -> str:
    """The warning for a chain shorter than ``tau_multiple`` autocorrelation times."""
    tau = np.asarray(status.tau, dtype=float)
    tau_max = float(np.nanmax(tau)) if np.any(np.isfinite(tau)) else math.nan
    return (f"NOT CONVERGED: {status.steps} steps, but {tau_multiple:g} x the longest "
            f"autocorrelation time ({tau_max:.1f} steps) is "
            f"{tau_multiple * tau_max:.0f}; intervals may be too narrow or misplaced. "
            "Continue with --resume and a larger --max-steps")


def diagnostics(status, *, steps: int, n_walkers: int, tau_multiple: float, discard: int,
                thin: int, messages) -> dict:
    """What the result file's ``/diagnostics`` holds: per-parameter autocorrelation times and
    effective sample sizes (steps x walkers / tau), acceptance per walker, and the verdict."""
    tau = np.asarray(status.tau, dtype=float)
    acceptance = np.asarray(status.acceptance, dtype=float)
    ess = steps * n_walkers / tau if np.all(np.isfinite(tau)) else np.full(tau.shape, np.nan)
    return {"autocorr_time": tau, "acceptance": acceptance, "ess": ess,
            "steps": steps, "converged": bool(status.converged),
            "interrupted": bool(status.interrupted), "tau_multiple": tau_multiple,
            "walkers": n_walkers, "discard": discard, "thin": thin,
            "warnings": list(messages) if messages else ["none"],
            "mean_acceptance": float(acceptance.mean()) if acceptance.size else math.nan}
