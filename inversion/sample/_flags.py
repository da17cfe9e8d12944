"""What a finished chain says about itself, by name: parameters piling up at a prior bound,
walkers stuck apart from the others, nuisances far from their priors.

:func:`posterior_flags` is called once a run has sampled (``inversion._api.finalise``); its
messages join the convergence warnings in ``/diagnostics`` (attribute ``warnings``), are
printed by ``sondage invert`` and listed by ``sondage report``.
"""

from __future__ import annotations

import math

import numpy as np


__all__ = ["posterior_flags", "PosteriorFlagWarning", "PILE_FRACTION", "PILE_SPAN",
           "NUISANCE_SD", "STUCK_ACCEPTANCE", "STUCK_NEVER", "STUCK_SD", "STUCK_LOG_POSTERIOR",
           "STUCK_MIN_STEPS"]

#: A parameter piles at a bound when more than this fraction of the draws ...
PILE_FRACTION = 0.05
#: ... lie within this fraction of the prior's span of the bound.  (A halfnormal prior alone
#: puts 2.7 % of its draws within 1 % of its search span of zero, so it is not flagged.)
PILE_SPAN = 0.01
#: A nuisance is far from its prior when its posterior median lies further than this many
#: prior standard deviations from the prior's centre.
NUISANCE_SD = 3.0
#: A walker is stuck when its acceptance is below this fraction of the median walker's ...
STUCK_ACCEPTANCE = 0.1
#: ... or below this, whatever the others do (it has next to never moved) ...
STUCK_NEVER = 0.005
#: ... or when its median position (any parameter) or log-posterior over the second half of the
#: chain lies further than this many robust standard deviations (1.4826 x the median absolute
#: deviation) of the other walkers' draws from their median.
STUCK_SD = 5.0
#: ... and, for the log-posterior, lies at least this much below it (a likelihood ratio of
#: e^10, whatever the spread of a chain that has barely spread out from its start).
STUCK_LOG_POSTERIOR = 10.0
#: Walkers are judged only on chains at least this long (half of it is looked at).
STUCK_MIN_STEPS = 40


class PosteriorFlagWarning(UserWarning):
    """The posterior shows a problem by name (a bound, a stuck walker, a far nuisance)."""


def _unit(p) -> str:
    return f" {p.unit}" if p.unit else ""


def _bound_flags(spec, samples) -> list:
    out = []
    for j, p in enumerate(spec.parameters):
        low, high = (float(v) for v in p.prior.dist.support())
        b_low, b_high = p.prior.bounds()
        span = b_high - b_low
        if not (span > 0 and math.isfinite(span)):
            continue
        x = samples[:, j]
        for side, bound in (("lower", low), ("upper", high)):
            if not math.isfinite(bound):
                continue
            near = float(np.mean(np.abs(x - bound) <= PILE_SPAN * span))
            if near <= PILE_FRACTION:
                continue
            hint = ("quote an upper limit rather than the median" if side == "lower"
                    and bound == 0.0 else "widen the prior if the bound is not physical, or "
                    "check the run file's starting value")
            out.append(f"{p.name}: {100 * near:.0f} % of the posterior draws lie within "
                       f"{100 * PILE_SPAN:g} % of the prior's span of its {side} bound "
                       f"({bound:.6g}; prior {p.prior.describe()}): the data push it against "
                       f"the bound; {hint}")
    return out


def _nuisance_flags(spec, samples) -> list:
    out = []
    for j, p in enumerate(spec.parameters):
        if not p.role.is_nuisance:
            continue
        centre, sd = float(p.prior.dist.mean()), float(p.prior.dist.std())
        if not (sd > 0 and math.isfinite(sd) and math.isfinite(centre)):
            continue
        median = float(np.median(samples[:, j]))
        z = (median - centre) / sd
        if abs(z) > NUISANCE_SD:
            out.append(f"{p.name}: the posterior median {median:.6g}{_unit(p)} lies {z:+.1f} "
                       f"prior standard deviations from the prior's centre {centre:.6g}"
                       f"{_unit(p)} (prior {p.prior.describe()}): the data pull this nuisance "
                       "far from what the run file says; check the run file's value (charge, "
                       "solid angle, calibration, resolution or stopping), or give a prior "
                       "as wide as your real knowledge of it")
    return out


def _centre_spread(values, axis=0):
    """Median and robust standard deviation (1.4826 x the median absolute deviation)."""
    centre = np.median(values, axis=axis)
    spread = 1.4826 * np.median(np.abs(values - centre), axis=axis)
    return centre, spread


def _stuck_flags(spec, chain, log_prob, acceptance) -> list:
    chain = np.asarray(chain, dtype=float)
    log_prob = np.asarray(log_prob, dtype=float)
    acceptance = np.asarray(acceptance, dtype=float)
    steps, walkers = chain.shape[:2]
    if steps < STUCK_MIN_STEPS or walkers < 3:
        return []
    half = chain[steps // 2:]
    half_lp = log_prob[steps // 2:]
    medians = np.median(half, axis=0)  # (walkers, ndim)
    lp_medians = np.median(half_lp, axis=0)
    typical = float(np.median(acceptance)) if acceptance.size == walkers else math.nan
    out = []
    for w in range(walkers):
        reasons = []
        if acceptance.size == walkers and acceptance[w] < max(
                STUCK_ACCEPTANCE * (typical if math.isfinite(typical) else 0.0), STUCK_NEVER):
            reasons.append(f"acceptance {acceptance[w]:.3f} (median walker {typical:.3f})")
        centre, spread = _centre_spread(np.delete(half, w, axis=1).reshape(-1, half.shape[2]))
        apart = [spec.parameters[j].name for j in range(half.shape[2])
                 if spread[j] > 0 and abs(medians[w, j] - centre[j]) > STUCK_SD * spread[j]]
        if apart:
            reasons.append(f"its draws sit more than {STUCK_SD:g} robust sd from the other "
                           "walkers' in " + ", ".join(apart[:4])
                           + (" ..." if len(apart) > 4 else ""))
        others_lp = np.delete(half_lp, w, axis=1).ravel()
        others_lp = others_lp[np.isfinite(others_lp)]
        if others_lp.size:
            c_lp, s_lp = _centre_spread(others_lp)
            if lp_medians[w] < c_lp - max(STUCK_SD * s_lp, STUCK_LOG_POSTERIOR):
                reasons.append(f"its log-posterior lies {c_lp - lp_medians[w]:.3g} below the "
                               "other walkers' median")
        if reasons:
            out.append((w, reasons))
    if not out:
        return []
    if len(out) > walkers // 2:  # most walkers "apart": the ensemble has no settled core
        return [f"{len(out)} of {walkers} walkers disagree with the others over the second half "
                "of the chain: the ensemble has not settled; run longer (--resume with a "
                "larger --max-steps)"]
    return [f"walker {w} looks stuck apart from the others: " + "; ".join(reasons)
            + "; its draws are part of the posterior, so run longer (--resume with a larger "
            "--max-steps) or start again with another --seed" for w, reasons in out]


def posterior_flags(spec, chain, log_prob, acceptance, samples) -> list:
    """Problems the posterior shows, one line each, naming the parameter or walker.

    Parameters
    ----------
    spec : FitSpec
        The free parameters with their priors and roles.
    chain : numpy.ndarray, shape (steps, walkers, parameters)
        The whole stored chain.
    log_prob : numpy.ndarray, shape (steps, walkers)
        Its log-posteriors.
    acceptance : numpy.ndarray, shape (walkers,)
        Acceptance fraction of each walker.
    samples : numpy.ndarray, shape (draws, parameters)
        The posterior draws (after burn-in and thinning).

    Returns
    -------
    list of str
        * a parameter with more than :data:`PILE_FRACTION` of its draws within
          :data:`PILE_SPAN` of its prior's span of a bound of the prior;
        * a walker whose acceptance is below :data:`STUCK_ACCEPTANCE` of the median walker's
          or below :data:`STUCK_NEVER`, or whose median position or log-posterior over the
          second half of the chain lies more than :data:`STUCK_SD` robust standard deviations
          from the other walkers' (in chains of at least :data:`STUCK_MIN_STEPS` steps);
        * a nuisance whose posterior median lies more than :data:`NUISANCE_SD` prior standard
          deviations from the prior's centre.
    """
    samples = np.asarray(samples, dtype=float)
    if samples.ndim != 2 or samples.shape[0] < 2 or samples.shape[1] != len(spec.parameters):
        return []
    return (_bound_flags(spec, samples) + _stuck_flags(spec, chain, log_prob, acceptance)
            + _nuisance_flags(spec, samples))


