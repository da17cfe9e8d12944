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
        return float(self.dist.logpdf(x))

    def in_support(self, x: float) -> bool:
        low, high = self.dist.support()
        return bool(low < x < high) if self.kind in ("uniform", "beta") else bool(low <= x <= high)


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
