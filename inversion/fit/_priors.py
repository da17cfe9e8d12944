"""Priors: the user's beliefs about each free quantity, as frozen scipy.stats distributions.

A prior is written in the run file's ``[fit]`` table as a one-key inline table, for example
``{ uniform = [100, 300] }``, ``{ normal = [1.0, 0.05] }``, ``{ lognormal = [20, 0.5] }`` or
``{ halfnormal = 15 }``.  Each becomes a frozen :mod:`scipy.stats` distribution, so it answers
``logpdf``, ``rvs`` and ``ppf``.  Physical limits (a thickness cannot be negative, fractions
stay on the simplex) are not priors: they are enforced by the parameterisation elsewhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from forward import InputError

__all__ = ["Prior", "make_prior", "parse_prior", "PRIOR_KINDS"]

#: prior kind -> (number of numbers, what they mean)
PRIOR_KINDS = {
    "uniform": (2, "[low, high]"),
    "normal": (2, "[mean, sd]"),
    "lognormal": (2, "[median, sigma of log]"),
    "halfnormal": (1, "scale"),
    "beta": (2, "[a, b]"),
}


@dataclass(frozen=True)
class Prior:
    """One prior: its kind, its numbers and the frozen scipy distribution built from them.

    Attributes
    ----------
    kind : str
        One of :data:`PRIOR_KINDS`.
    args : tuple of float
        The numbers as the user wrote them (see :data:`PRIOR_KINDS`).
    dist : scipy.stats frozen distribution
        Answers ``logpdf``, ``rvs``, ``ppf``, ``support``.
    """

    kind: str
    args: tuple
    dist: object

    def describe(self) -> str:
        """A short text such as ``normal(1, 0.05)`` for output and result files."""
        return f"{self.kind}({', '.join(f'{a:.6g}' for a in self.args)})"

    def bounds(self, tail: float = 0.001) -> tuple[float, float]:
        """Search bounds: the support where finite, else ``ppf(tail)`` .. ``ppf(1 - tail)``."""
        low, high = self.dist.support()
        if not math.isfinite(low):
            low = float(self.dist.ppf(tail))
        if not math.isfinite(high):
            high = float(self.dist.ppf(1.0 - tail))
        return float(low), float(high)

    def logpdf(self, x: float) -> float:
        """Log density at one point, in closed form (the same values as ``dist.logpdf``,
        checked in tests, at a fraction of the cost of scipy's generic machinery)."""
        return _LOGPDF[self.kind](float(x), self._consts)

    def closed_form(self):
        """``(function, constants)`` with ``function(x, constants) == logpdf(x)`` for a float
        ``x``: what :meth:`logpdf` calls, for loops that evaluate it many times."""
        return _LOGPDF[self.kind], self._consts

    @property
    def _consts(self):
        c = self.__dict__.get("_c")
        if c is None:
            c = _constants(self.kind, self.args)
            object.__setattr__(self, "_c", c)
        return c


_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


def _constants(kind, args):
    if kind == "uniform":
        low, high = args
        return (low, high, -math.log(high - low))
    if kind == "normal":
        mean, sd = args
        return (mean, sd, -math.log(sd) - _LOG_SQRT_2PI)
    if kind == "lognormal":
        median, sigma = args
        return (math.log(median), sigma, -math.log(sigma) - _LOG_SQRT_2PI)
    if kind == "halfnormal":
        (scale,) = args
        return (scale, 0.5 * math.log(2.0 / math.pi) - math.log(scale))
    a, b = args
    return (a, b, -(math.lgamma(a) + math.lgamma(b) - math.lgamma(a + b)))


def _uniform(x, c):
    return c[2] if c[0] <= x <= c[1] else -math.inf


def _normal(x, c):
    u = (x - c[0]) / c[1]
    return c[2] - 0.5 * u * u


def _lognormal(x, c):
    if x <= 0.0:
        return -math.inf
    lx = math.log(x)
    u = (lx - c[0]) / c[1]
    return c[2] - lx - 0.5 * u * u


def _halfnormal(x, c):
    if x < 0.0:
        return -math.inf
    u = x / c[0]
    return c[1] - 0.5 * u * u


def _beta(x, c):
    if not 0.0 < x < 1.0:
        return -math.inf
    return c[2] + (c[0] - 1.0) * math.log(x) + (c[1] - 1.0) * math.log1p(-x)


_LOGPDF = {"uniform": _uniform, "normal": _normal, "lognormal": _lognormal,
           "halfnormal": _halfnormal, "beta": _beta}


class _PriorSum:
    """The sum of the log prior densities of ``parameters`` (each with a ``prior``), each
    prior's closed form looked up once (objectives keep one and call it for every draw); -inf
    outside any support, the densities added in parameter order."""

    def __init__(self, parameters):
        self.parameters = parameters
        self.terms = tuple(p.prior.closed_form() for p in parameters)

    def __call__(self, theta) -> float:
        total = 0.0
        for value, (logpdf, constants) in zip(np.asarray(theta, dtype=float).tolist(),
                                              self.terms):
            lp = logpdf(value, constants)
            if lp == -math.inf or lp != lp:
                return -math.inf
            total += lp
        return total

    @classmethod
    def of(cls, owner) -> "_PriorSum":
        """The one of ``owner.spec.parameters``, kept in ``owner`` (built again when the
        parameter list is another)."""
        cached = owner.__dict__.get("_prior_sum")
        if cached is None or cached.parameters is not owner.spec.parameters:
            cached = owner.__dict__["_prior_sum"] = cls(owner.spec.parameters)
        return cached


def make_prior(kind: str, *args: float, where: str | None = None) -> Prior:
    """Build a :class:`Prior` from its kind and numbers, checking them.

    Parameters
    ----------
    kind : str
        ``uniform``, ``normal``, ``lognormal``, ``halfnormal`` or ``beta``.
    *args : float
        The numbers, see :data:`PRIOR_KINDS`.
    where : str, optional
        Where the prior came from, for error messages.
    """
    if kind not in PRIOR_KINDS:
        allowed = ", ".join(f"{k} = {v[1]}" for k, v in PRIOR_KINDS.items())
        raise InputError(f"unknown prior {kind!r}; allowed: {allowed}", where=where)
    n, meaning = PRIOR_KINDS[kind]
    try:
        values = tuple(float(a) for a in args)
    except (TypeError, ValueError):
        raise InputError(f"prior {kind} needs numbers {meaning}, got {args!r}", where=where) from None
    if len(values) != n or not all(math.isfinite(v) for v in values):
        raise InputError(f"prior {kind} needs {n} finite number(s) {meaning}, got {list(args)!r}",
                         where=where)
    if kind == "uniform":
        low, high = values
        if not low < high:
            raise InputError(f"uniform prior needs low < high, got low={low:g}, high={high:g}",
                             where=where)
        dist = stats.uniform(loc=low, scale=high - low)
    elif kind == "normal":
        mean, sd = values
        if sd <= 0:
            raise InputError(f"normal prior needs sd > 0, got {sd:g}", where=where)
        dist = stats.norm(loc=mean, scale=sd)
    elif kind == "lognormal":
        median, sigma = values
        if median <= 0 or sigma <= 0:
            raise InputError(f"lognormal prior needs median > 0 and sigma > 0, got {values!r}",
                             where=where)
        dist = stats.lognorm(s=sigma, scale=median)
    elif kind == "halfnormal":
        (scale,) = values
        if scale <= 0:
            raise InputError(f"halfnormal prior needs scale > 0, got {scale:g}", where=where)
        dist = stats.halfnorm(scale=scale)
    else:  # beta
        a, b = values
        if a <= 0 or b <= 0:
            raise InputError(f"beta prior needs a > 0 and b > 0, got {values!r}", where=where)
        dist = stats.beta(a, b)
    return Prior(kind, values, dist)


def parse_prior(value, where: str | None = None) -> Prior:
    """Read a prior written as a one-key table, e.g. ``{"normal": [1.0, 0.05]}``.

    Parameters
    ----------
    value : dict
        One key (the kind) whose value is a number or a list of numbers.
    where : str, optional
        ``"run.toml: fit.free.<name>"``, for error messages.
    """
    if not isinstance(value, dict) or len(value) != 1:
        raise InputError("a prior is a one-key table such as { normal = [1.0, 0.05] } or "
                         "{ uniform = [100, 300] }; kinds: " + ", ".join(PRIOR_KINDS), where=where)
    (kind, numbers), = value.items()
    if isinstance(numbers, (list, tuple)):
        return make_prior(kind, *numbers, where=where)
    return make_prior(kind, numbers, where=where)
