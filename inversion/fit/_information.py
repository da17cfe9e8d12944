"""Fisher information and the Cramer-Rao bound of a fit: how well a measurement can pin its
free parameters down, before (or beside) sampling.

``I_ij = sum_c (d mu_c / d theta_i)(d mu_c / d theta_j) / mu_c`` over the window channels, the
information of independent Poisson counts with means ``mu_c`` (common practice), with the
derivatives by central finite differences of :meth:`Objective.predict`.  The bound on
parameter ``i`` is ``sqrt((I^-1)_ii)`` (Cramer 1946; Rao 1945); with Gaussian priors their
information ``1 / sd^2`` is added first (the Bayesian bound of van Trees 1968).
"""

from __future__ import annotations

import math

import numpy as np

from ._roles import Role

__all__ = ["nominal_theta", "fd_steps", "fisher_matrix", "cramer_rao_sd"]


def nominal_theta(objective, values: dict | None = None) -> np.ndarray:
    """A parameter vector: ``values`` by parameter name; nuisances not named there at the run
    file's values.

    Raises
    ------
    ValueError
        For a sample parameter without a value.
    """
    values = dict(values or {})
    default = objective.default_nuisance
    theta = []
    for p in objective.spec.parameters:
        if p.name in values:
            theta.append(float(values[p.name]))
        elif p.role.is_nuisance:
            v = getattr(default, p.role.field)
            theta.append(float(v[p.target] if p.role.per_element else v))
        else:
            raise ValueError(f"no value for {p.name}")
    return np.array(theta)


#: channels expecting less than this fraction of the largest expected count are left out of
#: the Fisher information (their counts are round-off)
MU_FLOOR = 1e-9


def fd_steps(objective, theta, rel_step: float) -> np.ndarray:
    """Central-difference steps per parameter: ``rel_step`` x |value| for areal densities
    and widths (x the prior sd at zero), ``rel_step`` x the prior sd for nuisances,
    ``rel_step`` x max(|value|, prior sd) otherwise.

    Why 1e-3 is a good step: the expected counts are smooth in every parameter, so a central
    difference errs by O(h^2) relative to the scale on which the spectrum changes (about
    (0.25e15 / 60e15)^2 = 2e-5 for an areal density), while the counts' round-off (about 1e-12
    relative) divided by the step stays near 1e-9.
    """
    steps = []
    for value, p in zip(theta, objective.spec.parameters):
        sd = float(p.prior.dist.std())
        if p.role in (Role.AREAL_DENSITY, Role.MIXING) and value != 0:
            scale = abs(value)
        elif p.role.is_nuisance and math.isfinite(sd) and sd > 0:
            # a nuisance moves the spectrum as a whole (the gain shifts high channels by
            # hundreds of times its relative change): step by a fraction of its prior sd
            scale = sd
        else:
            scale = max(abs(value), sd) if math.isfinite(sd) else max(abs(value), 1.0)
        steps.append(rel_step * scale)
    return np.array(steps)


def fisher_matrix(objective, theta, rel_step: float = 1e-3, scale: float = 1.0) -> np.ndarray:
    """Fisher information of the Poisson likelihood over the window at ``theta``.

    Parameters
    ----------
    objective : Objective
    theta : array_like
    rel_step : float
        Relative difference step (:func:`fd_steps`).
    scale : float
        Multiplies every expected count (more charge).
    """
    theta = np.asarray(theta, dtype=float)
    mu = scale * objective.predict(theta)
    steps = fd_steps(objective, theta, rel_step)
    grads = []
    for i, h in enumerate(steps):
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        grads.append(scale * (objective.predict(up) - objective.predict(down)) / (2 * h))
    g = np.array(grads)
    # channels whose expected counts are round-off (1e-26 above a surface edge) would divide
    # the derivatives' own round-off by almost nothing: keep channels that hold counts
    keep = mu > MU_FLOOR * (float(mu.max()) if mu.size else 0.0)
    return (g[:, keep] / mu[keep]) @ g[:, keep].T


def cramer_rao_sd(fisher, index: int = 0, prior_sd=None) -> float:
    """sqrt of the ``index``-th diagonal element of the inverse Fisher matrix; with
    ``prior_sd`` (one per parameter, inf for none) the Gaussian priors' information
    ``1/sd^2`` is added first (van Trees 1968)."""
    f = np.array(fisher, dtype=float)
    if prior_sd is not None:
        f = f + np.diag(1.0 / np.asarray(prior_sd, dtype=float) ** 2)
    return float(math.sqrt(np.linalg.inv(f)[index, index]))
