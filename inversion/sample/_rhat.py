"""Rank-normalised split R-hat: does the answer depend on where the chains started?

A. Vehtari, A. Gelman, D. Simpson, B. Carpenter and P.-C. Buerkner, "Rank-normalization,
folding, and localization: an improved R-hat for assessing convergence of MCMC", Bayesian
Analysis 16 (2021) 667.  Each chain is split in half; all draws are replaced by the normal
scores of their pooled ranks; the classic potential scale reduction of A. Gelman and D. B.
Rubin, Statistical Science 7 (1992) 457, is computed on those scores ("bulk") and on the scores
of the draws' distances from the pooled median ("tail", the folded draws); R-hat is the larger
of the two.  Values above 1.01 say the chains have not mixed (Vehtari et al. recommend 1.01).

For an ensemble sampler whose walkers started in separate groups (one per start search,
:mod:`inversion.sample._start`), :func:`between_group_rhat` makes each group one chain: its
walkers' draws pooled step by step.  Groups that found different modes, or a chain that still
drifts, give a large R-hat for the parameters concerned; groups that mix give about
``1 + 1 / (effective draws per group)``, so at the 50-autocorrelation-time rule the check costs
no extra steps.
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtri
from scipy.stats import rankdata

__all__ = ["split_rhat", "rank_normalised_split_rhat", "between_group_rhat", "RHAT_LIMIT"]

#: the convergence limit recommended by Vehtari et al. (2021)
RHAT_LIMIT = 1.01


def _split(chains: np.ndarray) -> np.ndarray:
    """(draws, chains) -> (draws // 2, 2 chains): each chain cut in two halves."""
    n = chains.shape[0] // 2
    return np.concatenate([chains[:n], chains[chains.shape[0] - n:]], axis=1)


def split_rhat(chains) -> float:
    """Gelman-Rubin potential scale reduction of already split chains, shape (draws, chains).

    ``B = n/(m-1) sum_j (mean_j - mean)^2``, ``W = mean_j s_j^2``,
    ``var+ = (n-1)/n W + B/n``, ``R = sqrt(var+ / W)`` (Gelman & Rubin 1992; Vehtari et al.
    2021, eq. 3-4).
    """
    x = np.asarray(chains, dtype=float)
    n, m = x.shape
    if n < 2 or m < 2:
        return float("nan")
    means = x.mean(axis=0)
    b = n * means.var(ddof=1)
    w = x.var(axis=0, ddof=1).mean()
    if w <= 0:
        # every chain constant: equal constants agree, different ones do not
        return 1.0 if b == 0 else float("inf")
    var_plus = (n - 1) / n * w + b / n
    return float(np.sqrt(var_plus / w))


def _normal_scores(x: np.ndarray) -> np.ndarray:
    """Rank-normalisation: ``z = Phi^-1((r - 3/8) / (S + 1/4))`` with pooled average ranks
    ``r`` of all ``S`` draws (Vehtari et al. 2021, eq. 14, Blom's offset)."""
    r = rankdata(x, method="average").reshape(x.shape)
    return ndtri((r - 0.375) / (x.size + 0.25))


def rank_normalised_split_rhat(chains) -> np.ndarray:
    """Rank-normalised split R-hat per parameter (Vehtari et al. 2021).

    Parameters
    ----------
    chains : array_like, shape (draws, chains) or (draws, chains, parameters)
        Draws after burn-in; for an ensemble sampler, one chain per walker.

    Returns
    -------
    numpy.ndarray
        One value per parameter (a 0-d array for 2-d input): the larger of the bulk and the
        folded (tail) R-hat.
    """
    x = np.asarray(chains, dtype=float)
    squeeze = x.ndim == 2
    if squeeze:
        x = x[:, :, None]
    out = np.empty(x.shape[2])
    for k in range(x.shape[2]):
        split = _split(x[:, :, k])
        if split.shape[0] < 2:
            out[k] = np.nan
            continue
        bulk = split_rhat(_normal_scores(split))
        folded = np.abs(split - np.median(split))
        tail = split_rhat(_normal_scores(folded))
        out[k] = max(bulk, tail)
    return out[0] if squeeze else out


def between_group_rhat(chain, n_groups: int) -> np.ndarray:
    """Rank-normalised split R-hat per parameter with each walker group as one chain.

    Parameters
    ----------
    chain : array_like, shape (steps, walkers, parameters)
        Draws after burn-in.
    n_groups : int
        Walkers ``g * walkers // n_groups`` up to the next group's first are group ``g``.

    Returns
    -------
    numpy.ndarray
        One value per parameter (NaN when there are too few steps).
    """
    x = np.asarray(chain, dtype=float)
    steps, walkers, ndim = x.shape
    edges = np.linspace(0, walkers, int(n_groups) + 1).round().astype(int)
    sizes = np.diff(edges)
    if steps < 4 or n_groups < 1 or sizes.min() < 1:
        return np.full(ndim, np.nan)
    half = steps // 2
    m = int(sizes.min())  # equal-length chains: the same number of walkers from each group
    chains = []
    for g in range(int(n_groups)):
        block = x[:, edges[g]:edges[g] + m, :]
        for part in (block[:half], block[steps - half:]):
            chains.append(part.reshape(half * m, ndim))
    pooled = np.stack(chains, axis=1)  # (draws, 2 * groups, parameters)
    out = np.empty(ndim)
    for k in range(ndim):
        y = pooled[:, :, k]
        bulk = split_rhat(_normal_scores(y))
        folded = np.abs(y - np.median(y))
        out[k] = max(bulk, split_rhat(_normal_scores(folded)))
    return out
