"""Posterior summaries in the one vocabulary of :data:`~inversion.results._schema.STATS`.

``median``, ``mean``, ``sd`` (ddof = 1) and the central intervals ``low68``/``high68`` (16 and
84 % quantiles) and ``low95``/``high95`` (2.5 and 97.5 %), numpy's default sample quantiles
(Hyndman and Fan 1996, definition 7).  NaN draws are left out (a thickness without a mass
density summarises to NaN).
"""

from __future__ import annotations

import warnings

import numpy as np

from ._schema import STATS

__all__ = ["summarise", "STATS"]



def summarise(draws) -> dict:
    """Summary statistics of posterior draws.

    Parameters
    ----------
    draws : array_like, shape (n_draws,) or (n_draws, n_quantities)

    Returns
    -------
    dict
        The keys of :data:`STATS`; floats for one quantity, arrays (one value per column) for
        several.  A single draw has sd 0; a quantity without finite draws gives NaN.
    """
    x = np.asarray(draws, dtype=float)
    one = x.ndim == 1
    if one:
        x = x[:, None]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns
        if x.size:
            q = np.nanquantile(x, [0.5, 0.16, 0.84, 0.025, 0.975], axis=0)
        else:
            q = np.full((5, x.shape[1]), np.nan)
        mean = np.nanmean(x, axis=0)
        sd = np.nanstd(x, axis=0, ddof=1) if x.shape[0] > 1 else np.zeros(x.shape[1])
    out = dict(median=q[0], mean=mean, sd=sd, low68=q[1], high68=q[2], low95=q[3], high95=q[4])
    if one:
        return {k: float(v[0]) for k, v in out.items()}
    return out
