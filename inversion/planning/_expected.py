"""The expected information of a set-up, and the Gaussian posterior it implies.

The method (README.md, "Planning a measurement"):

* **Likelihood.**  The counts of the window channels ``c`` are independent Poisson variables
  with means ``mu_c(theta)``; their expected Fisher information is
  ``I_ij = sum_c (d mu_c / d theta_i)(d mu_c / d theta_j) / mu_c`` (common practice), with the
  derivatives by central differences of :meth:`Objective.predict` at the nominal parameters
  ``theta0`` (a one-sided second-order difference where a step would cross a physical limit;
  steps in :func:`difference_steps`).
* **Exposure.**  ``mu_c = r s_c + b_c``: the sample's counts ``s`` scale with the ratio ``r`` of
  counted ions to the reference exposure, a background level ``b`` does not.  The derivatives
  scale the same way (every column but the background levels' by ``r``), so one set of
  derivatives gives the exact information at every charge: ``I(r) = G_r diag(1/mu(r)) G_r^T``.
* **Priors.**  The posterior precision at ``theta0`` is ``P = I + Lambda`` with
  ``Lambda_ii = -d^2 ln p_i / d theta_i^2`` at ``theta0_i`` (the Laplace approximation),
  clipped at zero.  For a normal prior this is ``1/sd^2``, the prior information of the
  Bayesian bound of van Trees (1968).  A uniform prior adds nothing (it is flat; its bounds are
  not seen), a half-normal of scale ``s`` adds ``1/s^2`` (its curvature everywhere on the
  half-line; the edge at zero is not seen), a lognormal of median ``m`` and log-sd ``sigma``
  adds ``(1 - sigma^2 - ln(theta/m)) / (sigma^2 theta^2)``, a beta(a, b) share adds
  ``(a - 1)/x^2 + (b - 1)/(1 - x)^2``; a curvature below zero counts as zero.  The curvature is
  taken by finite differences of the prior's own log density, so any prior kind works.
* **Posterior.**  ``theta ~ N(theta0, P^-1)``: the expected posterior sd of parameter ``i``
  is ``sqrt((P^-1)_ii)``, of a derived quantity ``g`` (thickness in nm, a fraction, a total)
  ``sqrt(a^T P^-1 a)`` with ``a = grad g`` (the delta method).  ``P`` is inverted in
  coordinates scaled to a unit diagonal; a direction with no information (eigenvalue below
  1e-10 there) has an infinite sd: "not determined".
* **What limits it.**  The variance splits exactly into a counting part and one part per
  prior (:class:`Analysis`); fixing every nuisance gives the sd from counting alone.
* **Charge for a target.**  The sd falls monotonically with the charge ``q``; the charge that
  reaches a target is the root of ``sd(q) = target`` (Brent's method on ``ln q``).  Where the
  priors dominate, the sd levels off and no charge reaches the target.

Joint planning of several measurements adds their likelihood informations (each
:meth:`Response.fisher`) and the priors' precision once; :func:`posterior` takes the sum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from ..fit._information import fd_steps
from ..fit._roles import Role

__all__ = ["prior_precision", "difference_steps", "Response", "response", "Gaussian",
           "posterior", "Limit", "Uncertainty", "Analysis", "COUNTS", "derived_gradients", "charge_for_sd",
           "UNDETERMINED_TOLERANCE", "COUNT_FLOOR", "MAX_CHARGE_UC", "TYPICAL_MAX_CHARGE_UC"]

#: channels expecting less than this fraction of the window's largest count are left out of
#: the information (:meth:`Response.fisher`)
COUNT_FLOOR = 1e-9
#: eigenvalues of the unit-diagonal precision below this are directions without information
UNDETERMINED_TOLERANCE = 1e-10
#: the most charge a backscattering measurement usually takes (1-100 uC, common practice)
TYPICAL_MAX_CHARGE_UC = 100.0
#: the largest charge a target may ask for: 10 mC, a hundred times that
MAX_CHARGE_UC = 1.0e4


def prior_precision(prior, value: float) -> float:
    """``-d^2 ln p / d theta^2`` of a prior at ``value``, clipped at zero (module docstring).

    Parameters
    ----------
    prior : Prior
        Anything with ``logpdf(x)`` and ``dist.std()``.
    value : float
        Where the curvature is taken (inside the prior's support).

    Raises
    ------
    ValueError
        When ``value`` lies outside the prior's support.
    """
    f = prior.logpdf
    x = float(value)
    f0 = f(x)
    if not math.isfinite(f0):
        raise ValueError(f"{x:g} lies outside the prior")
    sd = float(prior.dist.std())
    scale = sd if math.isfinite(sd) and sd > 0 else max(abs(x), 1.0)
    h = 1e-3 * scale
    fp, fm = f(x + h), f(x - h)
    if math.isfinite(fp) and math.isfinite(fm):
        curvature = -(fp - 2.0 * f0 + fm) / h ** 2
    elif math.isfinite(fp):  # at the lower edge of the support: a forward difference
        curvature = -(f0 - 2.0 * fp + f(x + 2.0 * h)) / h ** 2
    elif math.isfinite(fm):
        curvature = -(f0 - 2.0 * fm + f(x - 2.0 * h)) / h ** 2
    else:
        curvature = 0.0
    return float(curvature) if math.isfinite(curvature) and curvature > 0 else 0.0


# ----------------------------------------------------------------------------------------------
@dataclass
class Response:
    """How the expected window counts of one geometry answer the free parameters.

    Attributes
    ----------
    theta : ndarray (n,)
        The nominal parameters.
    signal : ndarray (m,)
        Expected counts from the sample in the window channels at the reference exposure.
    background : ndarray (m,)
        Background counts per window channel (the same at every exposure).
    jacobian : ndarray (n, m)
        ``d mu_c / d theta_i`` at the reference exposure.
    scales : ndarray of bool (n,)
        True for the parameters whose derivatives scale with the exposure (all but the
        background levels).
    particles : float
        Counted ions of the reference exposure.
    """

    theta: np.ndarray
    signal: np.ndarray
    background: np.ndarray
    jacobian: np.ndarray
    scales: np.ndarray
    particles: float

    def counts(self, ratio: float = 1.0) -> float:
        """Expected counts in the window at ``ratio`` times the reference exposure."""
        return float(ratio * self.signal.sum() + self.background.sum())

    def fisher(self, ratio: float = 1.0) -> np.ndarray:
        """Expected Fisher information of the window counts at ``ratio`` times the reference
        exposure (module docstring).

        Channels whose expected counts lie below :data:`COUNT_FLOOR` times the window's
        largest are left out: the kernel's channel integrals are differences of large numbers
        (round-off about 1e-12 of them), so there both the counts and their differences are
        round-off, and ``g^2 / mu`` of two round-off numbers can be anything (one such channel
        at 1e-26 counts once outweighed the whole spectrum), while a true tail channel that
        far down holds no information worth the name.
        """
        mu = ratio * self.signal + self.background
        g = self.jacobian * np.where(self.scales, ratio, 1.0)[:, None]
        keep = mu > COUNT_FLOOR * float(np.max(mu, initial=0.0))
        out = (g[:, keep] / mu[keep]) @ g[:, keep].T
        return 0.5 * (out + out.T)


def difference_steps(objective, theta, rel_step: float = 1e-3) -> np.ndarray:
    """Difference steps: :func:`inversion.fit._information.fd_steps` for the sample's
    parameters, and for a nuisance at most ``rel_step`` times its prior sd.

    A nuisance's value can be hundreds of prior sds (a gain of 2 keV/channel known to 0.01):
    a step relative to the value shifts the high channels by a good part of the resolution and
    the difference feels the curvature, while the prior sd is the scale on which the posterior
    moves it.  With these steps the expected sds of the invented demo change by less than
    0.2 % from ``rel_step`` 1e-4 to 1e-2 (tests/test_plan.py).
    """
    steps = np.array(fd_steps(objective, theta, rel_step), dtype=float)
    for i, p in enumerate(objective.spec.parameters):
        sd = float(p.prior.dist.std())
        if p.role.is_nuisance and math.isfinite(sd) and sd > 0:
            steps[i] = min(steps[i], rel_step * sd)
    return steps


def _derivative(f, theta, i, h, centre):
    """d f / d theta_i: central, or one-sided second order where a step leaves the limits."""
    up, down = theta.copy(), theta.copy()
    up[i] += h
    down[i] -= h
    fu, fd = f(up), f(down)
    if fu is not None and fd is not None:
        return (np.asarray(fu) - np.asarray(fd)) / (2.0 * h)
    sign = 1.0 if fu is not None else -1.0
    near = fu if fu is not None else fd
    far_theta = theta.copy()
    far_theta[i] += 2.0 * sign * h
    far = f(far_theta)
    if near is None or far is None:
        raise ValueError(f"the expected counts are not defined around parameter {i}")
    return sign * (-3.0 * np.asarray(centre) + 4.0 * np.asarray(near) - np.asarray(far)) / (2.0 * h)


def response(objective, theta, particles: float, rel_step: float = 1e-3) -> Response:
    """The :class:`Response` of an objective at ``theta``.

    Parameters
    ----------
    objective : Objective
        Used only through ``predict``, ``spec.parameters`` and the difference steps of
        :func:`inversion.fit._information.fd_steps`.
    theta : array_like
        Nominal parameters.
    particles : float
        Counted ions of the objective's run (the reference exposure).
    rel_step : float
        Relative difference step.
    """
    theta = np.asarray(theta, dtype=float)
    mu = objective.predict(theta)
    if mu is None:
        raise ValueError("the nominal parameters lie outside their physical limits")
    mu = np.asarray(mu, dtype=float)
    parameters = objective.spec.parameters
    scales = np.array([p.role is not Role.BACKGROUND for p in parameters], dtype=bool)
    if scales.all():
        signal, background = mu, np.zeros_like(mu)
    else:
        quiet = theta.copy()
        quiet[~scales] = 0.0
        signal = np.asarray(objective.predict(quiet), dtype=float)
        background = mu - signal
    steps = difference_steps(objective, theta, rel_step)
    jac = np.array([_derivative(objective.predict, theta, i, h, mu)
                    for i, h in enumerate(steps)])
    return Response(theta, signal, background, jac, scales, float(particles))


# ----------------------------------------------------------------------------------------------
class Gaussian:
    """The Gaussian posterior ``N(theta0, P^-1)`` of a precision matrix ``P``.

    ``P`` is scaled to a unit diagonal and diagonalised once; directions whose eigenvalue
    there is below :data:`UNDETERMINED_TOLERANCE` carry no information, and any quantity
    with a component along them has an infinite variance.
    """

    def __init__(self, precision):
        p = np.array(precision, dtype=float)
        p = 0.5 * (p + p.T)
        self.n = p.shape[0]
        d = np.sqrt(np.clip(np.diag(p), 0.0, None))
        self.known = d > 0
        self.d = d[self.known]
        sub = p[np.ix_(self.known, self.known)] / np.outer(self.d, self.d)
        if sub.size:
            e, v = np.linalg.eigh(sub)
        else:
            e, v = np.zeros(0), np.zeros((0, 0))
        self.null = e <= UNDETERMINED_TOLERANCE * max(float(e.max(initial=0.0)), 1.0)
        self.e, self.v = e, v

    def _coefficients(self, a):
        a = np.asarray(a, dtype=float)
        if np.any(a[~self.known] != 0):
            return None
        c = self.v.T @ (a[self.known] / self.d)
        size = float(np.linalg.norm(c))
        if size == 0.0:
            return c
        if np.any(np.abs(c[self.null]) > 1e-8 * size):
            return None
        return c

    def variance(self, a) -> float:
        """``a^T P^-1 a`` (inf along a direction without information)."""
        c = self._coefficients(a)
        if c is None:
            return math.inf
        keep = ~self.null
        return float(np.sum(c[keep] ** 2 / self.e[keep]))

    def times(self, a) -> np.ndarray | None:
        """``P^-1 a``, or None when ``a`` has a component without information."""
        c = self._coefficients(a)
        if c is None:
            return None
        keep = ~self.null
        out = np.zeros(self.n)
        out[self.known] = (self.v[:, keep] @ (c[keep] / self.e[keep])) / self.d
        return out

    def sd(self, i: int) -> float:
        """Posterior sd of parameter ``i``."""
        a = np.zeros(self.n)
        a[i] = 1.0
        return math.sqrt(self.variance(a))

    def correlation(self) -> np.ndarray:
        """Correlation matrix of the parameters (NaN where a parameter is not determined)."""
        out = np.full((self.n, self.n), np.nan)
        cols = []
        for i in range(self.n):
            a = np.zeros(self.n)
            a[i] = 1.0
            cols.append(self.times(a))
        for i in range(self.n):
            for j in range(self.n):
                if cols[i] is not None and cols[j] is not None:
                    out[i, j] = cols[i][j] / math.sqrt(cols[i][i] * cols[j][j])
        return out


def posterior(fishers, prior_precision_diag) -> Gaussian:
    """The Gaussian posterior of one or more measurements' informations and the priors.

    Parameters
    ----------
    fishers : ndarray or sequence of ndarray
        Likelihood information of each measurement (same parameters, same order).
    prior_precision_diag : array_like
        The priors' precision per parameter (:func:`prior_precision`), counted once.
    """
    if isinstance(fishers, np.ndarray) and fishers.ndim == 2:
        fishers = [fishers]
    total = np.sum(np.asarray(list(fishers), dtype=float), axis=0)
    return Gaussian(total + np.diag(np.asarray(prior_precision_diag, dtype=float)))


# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Limit:
    """One part of a quantity's expected posterior variance.

    Attributes
    ----------
    source : str
        ``"counts"`` (the Poisson counting statistics) or the name of the parameter whose
        prior the part comes from.
    share : float
        Fraction of the variance (the parts of one quantity add up to 1).
    """

    source: str
    share: float

    def describe(self) -> str:
        """``prior of fluence_scale 62 %`` or ``counts 30 %``."""
        who = "counts" if self.source == COUNTS else f"prior of {self.source}"
        return f"{who} {100 * self.share:.0f} %"


#: the :attr:`Limit.source` of the counting statistics
COUNTS = "counts"


@dataclass(frozen=True)
class Uncertainty:
    """The expected posterior sd of one quantity at one set-up, and what it comes from.

    Attributes
    ----------
    sd : float
        Expected posterior sd (inf: not determined).
    sd_counting : float
        The sd if every nuisance were known exactly (counting statistics and the sample's
        own priors only); NaN for a nuisance itself.
    limits : tuple of Limit
        The parts of the variance by decreasing share (parts under 1 % left out).
    """

    sd: float
    sd_counting: float
    limits: tuple

    def describe(self, top: int = 3) -> str:
        """The largest parts as text."""
        return "; ".join(lim.describe() for lim in self.limits[:top] if lim.share >= 0.05)


class Analysis:
    """The Gaussian posterior of one set-up and the parts of its variances.

    With ``P = I + Lambda``, ``P^-1 = P^-1 I P^-1 + sum_j Lambda_jj (P^-1 e_j)(P^-1 e_j)^T``
    (since ``P^-1 P P^-1 = P^-1``): the variance of a quantity with gradient ``a`` splits
    exactly into a counting part ``b^T I b`` and one part ``Lambda_jj b_j^2`` per prior,
    ``b = P^-1 a``.  A prior's part is the spread it hands on to the quantity through the
    correlations: "areal density limited by the fluence prior" reads as a large part of the
    fluence prior.

    Parameters
    ----------
    fisher : ndarray
        ``I``, the likelihood's expected information.
    prior_diag : ndarray
        ``Lambda``, the priors' precision per parameter.
    names : sequence of str
        The parameters.
    nuisances : sequence of int
        Positions of the nuisance parameters (fixed for :attr:`Uncertainty.sd_counting`).
    """

    def __init__(self, fisher, prior_diag, names, nuisances):
        self.fisher = np.asarray(fisher, dtype=float)
        self.prior_diag = np.asarray(prior_diag, dtype=float)
        self.names = list(names)
        self.precision = self.fisher + np.diag(self.prior_diag)
        self.gauss = Gaussian(self.precision)
        nuis = set(int(i) for i in nuisances)
        self.rest = [i for i in range(self.gauss.n) if i not in nuis]
        self.counting = Gaussian(self.precision[np.ix_(self.rest, self.rest)])

    def sd(self, a) -> float:
        """Expected posterior sd of the quantity with gradient ``a``."""
        return math.sqrt(self.gauss.variance(a))

    def uncertainty(self, a) -> Uncertainty:
        """The :class:`Uncertainty` of the quantity with gradient ``a``."""
        a = np.asarray(a, dtype=float)
        var = self.gauss.variance(a)
        sd = math.sqrt(var)
        sample_part = a[self.rest]
        sd_counting = (math.sqrt(self.counting.variance(sample_part))
                       if self.rest and np.any(sample_part != 0) else math.nan)
        limits = []
        b = self.gauss.times(a) if math.isfinite(var) and var > 0 else None
        if b is not None:
            parts = [(COUNTS, float(b @ self.fisher @ b))]
            parts += [(name, float(lam * b[i] ** 2))
                      for i, (name, lam) in enumerate(zip(self.names, self.prior_diag))
                      if lam > 0]
            total = sum(v for _, v in parts)
            limits = [Limit(name, v / total) for name, v in parts if v / total >= 0.01]
            limits.sort(key=lambda lim: -lim.share)
        return Uncertainty(sd, sd_counting, tuple(limits))


def derived_gradients(objective, theta, rel_step: float = 1e-3) -> dict:
    """Gradients of the derived quantities that depend on the free parameters.

    Returns
    -------
    dict
        ``name -> (gradient, nominal value, unit)`` for each derived quantity of
        :meth:`Objective.derived_names` that is not itself a free parameter, is finite at
        ``theta`` and changes with some free parameter.
    """
    theta = np.asarray(theta, dtype=float)
    names, units, _ = objective.derived_names()
    values = np.asarray(objective.derived(theta), dtype=float)
    steps = difference_steps(objective, theta, rel_step)
    jac = []
    for i, h in enumerate(steps):
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        jac.append((np.asarray(objective.derived(up), dtype=float)
                    - np.asarray(objective.derived(down), dtype=float)) / (2.0 * h))
    jac = np.array(jac).T if jac else np.zeros((len(names), 0))
    free = set(objective.spec.names)
    out = {}
    for k, (name, unit) in enumerate(zip(names, units)):
        if name in free or not math.isfinite(values[k]) or not np.all(np.isfinite(jac[k])):
            continue
        if np.max(np.abs(jac[k]), initial=0.0) == 0.0:
            continue
        out[name] = (jac[k], float(values[k]), unit)
    return out


# ----------------------------------------------------------------------------------------------
def charge_for_sd(sd_at, charge_uC: float, target: float,
                  max_charge_uC: float = MAX_CHARGE_UC, explain=None) -> tuple[float, str]:
    """The charge at which the expected sd reaches ``target``.

    Parameters
    ----------
    sd_at : callable
        ``sd_at(charge_uC) -> sd``, decreasing in the charge.
    charge_uC : float
        The set-up's own charge (where the search starts).
    target : float
        The sd wanted.
    max_charge_uC : float
        The search stops here (:data:`MAX_CHARGE_UC`, a hundred times the most a measurement
        usually takes).
    explain : callable, optional
        ``explain(charge_uC) -> Uncertainty``: where the variance comes from at that charge,
        quoted when the target is out of reach.

    Returns
    -------
    charge_uC : float
        NaN when no charge up to ``max_charge_uC`` reaches the target.
    note : str
        ``""``, or why the target is out of reach: "not reachable by charge alone" where the
        priors hold more than half the variance at the largest charge tried, otherwise "needs
        more than" that charge; with the sd there and, from ``explain``, its parts.
    """
    def f(log_q):
        return math.log(sd_at(math.exp(log_q))) - math.log(target)

    top = max(max_charge_uC, charge_uC)
    sd_top = sd_at(top)
    if not sd_top <= target:
        if not math.isfinite(sd_top):
            return math.nan, "not reachable by charge alone: the quantity is not determined"
        parts = explain(top) if explain is not None else None
        counting = sum(lim.share for lim in parts.limits if lim.source == COUNTS) \
            if parts is not None else 0.0
        head = ("not reachable by charge alone" if parts is None or counting < 0.5
                else f"needs more than {top:g} uC")
        why = f", its variance then from {parts.describe()}" if parts is not None else ""
        return math.nan, f"{head}: sd {sd_top:.3g} at {top:g} uC{why}"
    low = min(charge_uC, top)
    while sd_at(low) <= target:
        if low < 1e-12 * top:
            return low, ""
        low /= 10.0
    log_q = brentq(f, math.log(low), math.log(top), xtol=1e-6, rtol=1e-8)
    return math.exp(log_q), ""
