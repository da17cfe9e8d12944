"""Does the model describe the data?  The posterior predictive check of a spectrum.

Two questions, both answered from posterior draws of the expected counts in the fit window:

1. **The whole spectrum.**  The discrepancy is the Poisson deviance
   ``D(y, mu) = 2 sum_c [y_c ln(y_c / mu_c) - (y_c - mu_c)]`` (``y ln y = 0`` at ``y = 0``).  For
   each posterior draw ``s`` a replicated spectrum ``y_rep ~ Poisson(mu_s)`` is drawn and
   ``p = P(D(y_rep, mu_s) >= D(y, mu_s))`` is estimated over the draws: the posterior predictive
   p-value with a discrepancy that depends on the parameters (A. Gelman, X.-L. Meng and H. Stern,
   "Posterior predictive assessment of model fitness via realized discrepancies", Statistica
   Sinica 6 (1996) 733).  Such p-values are conservative (under a correct model they crowd
   towards 0.5), so a small one is a real signal.
2. **Where.**  The window is cut into blocks of about one detector FWHM; in each block the
   standardised residual sum ``z = sum (y - m) / sqrt(sum m + Var_post(sum mu))`` (``m`` the
   posterior mean of the expected counts) is compared with a normal limit corrected for the
   number of blocks (Bonferroni), so that on a correct model at most ``alpha`` of spectra show
   any flagged block.  Neighbouring flagged blocks of one sign are merged into ranges: that is
   where the residuals run systematically.

The model is **rejected** when ``p < alpha`` or any block is flagged; the default ``alpha`` is
0.01 for each, so a correct model is rejected in at most about 2 % of spectra.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import ndtri, xlogy

__all__ = ["poisson_deviance", "PredictiveCheck", "predictive_check", "PPC_ALPHA"]

#: false-alarm level of each of the two tests on a correct model
PPC_ALPHA = 0.01


def poisson_deviance(counts, mu) -> np.ndarray:
    """``2 sum [y ln(y/mu) - (y - mu)]`` over the last axis (common practice)."""
    y = np.asarray(counts, dtype=float)
    m = np.asarray(mu, dtype=float)
    return 2.0 * np.sum(xlogy(y, y) - xlogy(y, m) - (y - m), axis=-1)


@dataclass
class PredictiveCheck:
    """The outcome of :func:`predictive_check`.

    Attributes
    ----------
    p_value : float
        Posterior predictive p-value of the deviance.
    deviance_observed : numpy.ndarray
        ``D(y, mu_s)`` per draw.
    deviance_replicated : numpy.ndarray
        ``D(y_rep_s, mu_s)`` per draw.
    block_first, block_last : numpy.ndarray of int
        First and last channel of each block.
    block_z : numpy.ndarray
        Standardised residual sum per block.
    z_limit : float
        ``|z|`` above which a block is flagged.
    ranges : list of (int, int, int)
        Merged flagged ranges: first channel, last channel, sign of the residuals (+1: the data
        lie above the model).
    rejected : bool
        True when the data reject the model (see module notes).
    alpha : float
    """

    p_value: float
    deviance_observed: np.ndarray
    deviance_replicated: np.ndarray
    block_first: np.ndarray
    block_last: np.ndarray
    block_z: np.ndarray
    z_limit: float
    alpha: float
    ranges: list = field(default_factory=list)

    @property
    def rejected(self) -> bool:
        return bool(self.p_value < self.alpha or self.ranges)


def _blocks(channels: np.ndarray, width: int):
    """Consecutive runs of the window's channels cut into blocks of ``width`` channels
    (a short remainder joins the block before it)."""
    runs, start = [], 0
    for i in range(1, channels.size + 1):
        if i == channels.size or channels[i] != channels[i - 1] + 1:
            runs.append((start, i))
            start = i
    out = []
    for a, b in runs:
        n = b - a
        k = max(1, n // width)
        edges = np.linspace(a, b, k + 1).round().astype(int)
        out += [(int(edges[j]), int(edges[j + 1])) for j in range(k)]
    return out


def predictive_check(counts, mu_draws, channels, *, block_channels: int, seed: int = 0,
                     alpha: float = PPC_ALPHA) -> PredictiveCheck:
    """Posterior predictive check of a spectrum (see module notes).

    Parameters
    ----------
    counts : array_like, shape (n,)
        Measured counts in the fit window.
    mu_draws : array_like, shape (draws, n)
        Expected counts (background included) for posterior draws.
    channels : array_like of int, shape (n,)
        The window's channel numbers (blocks never straddle a gap).
    block_channels : int
        Block width in channels, about one detector FWHM.
    seed : int
        Seeds the replicated spectra.
    alpha : float
        False-alarm level of each test.
    """
    y = np.asarray(counts, dtype=float)
    mu = np.maximum(np.asarray(mu_draws, dtype=float), 1e-300)
    channels = np.asarray(channels, dtype=int)
    rng = np.random.default_rng(seed)
    y_rep = rng.poisson(mu)
    d_obs = poisson_deviance(y, mu)
    d_rep = poisson_deviance(y_rep, mu)
    p = float(np.mean(d_rep >= d_obs)) if d_obs.size else math.nan

    blocks = _blocks(channels, max(1, int(block_channels)))
    mean = mu.mean(axis=0)
    z = np.empty(len(blocks))
    for i, (a, b) in enumerate(blocks):
        sums = mu[:, a:b].sum(axis=1)
        var = float(mean[a:b].sum() + (sums.var(ddof=1) if sums.size > 1 else 0.0))
        z[i] = float((y[a:b] - mean[a:b]).sum() / math.sqrt(var)) if var > 0 else 0.0
    limit = float(ndtri(1.0 - alpha / (2.0 * max(len(blocks), 1))))
    ranges = []
    for i, (a, b) in enumerate(blocks):
        if abs(z[i]) <= limit:
            continue
        sign = 1 if z[i] > 0 else -1
        first, last = int(channels[a]), int(channels[b - 1])
        if ranges and ranges[-1][2] == sign and ranges[-1][1] + 1 == first:
            ranges[-1] = (ranges[-1][0], last, sign)
        else:
            ranges.append((first, last, sign))
    return PredictiveCheck(p_value=p, deviance_observed=d_obs, deviance_replicated=d_rep,
                           block_first=np.array([channels[a] for a, _ in blocks], dtype=int),
                           block_last=np.array([channels[b - 1] for _, b in blocks], dtype=int),
                           block_z=z, z_limit=limit, alpha=float(alpha), ranges=ranges)
