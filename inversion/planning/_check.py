"""The prediction of a plan checked the expensive way: simulated spectra, full inversions.

At one set-up (the best by default) ``n`` spectra are drawn from the forward model at the
nominal sample (Poisson counts around :meth:`Objective.predict` over every channel) and each is
inverted with the run file's own ``[fit]`` table (:func:`inversion.invert`, the sampler and its
stopping rule as in any inversion).  The mean of the posterior sds is compared with the
expected sd: a ratio near 1 says the Gaussian approximation holds at this set-up.
"""

from __future__ import annotations

import math
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._api import NotConvergedWarning, invert, prepare
from ._plan import _n_channels

__all__ = ["PlanCheck", "check_plan", "simulate_counts"]


@dataclass
class PlanCheck:
    """Expected sds of one set-up against the posterior sds of inverted simulated spectra.

    Attributes
    ----------
    row : PlanRow
        The set-up checked.
    names : list of str
        The quantities compared.
    units : list of str
    predicted : dict
        Name -> expected posterior sd (the plan's).
    posterior_sd : dict
        Name -> array of the posterior sd of each inversion.
    converged : list of bool
        Per inversion: the chain reached the run's stopping rule.
    seeds : list of int
        The Poisson and sampler seed of each inversion.
    """

    row: object
    names: list
    units: list
    predicted: dict
    posterior_sd: dict = field(default_factory=dict)
    converged: list = field(default_factory=list)
    seeds: list = field(default_factory=list)

    @property
    def n(self) -> int:
        return len(self.seeds)

    def mean_sd(self, name: str) -> float:
        """Mean posterior sd over the inversions."""
        return float(np.mean(self.posterior_sd[name]))

    def ratio(self, name: str) -> float:
        """Mean posterior sd over the expected sd."""
        return self.mean_sd(name) / self.predicted[name]

    def records(self) -> list[dict]:
        """The rows of check.csv: quantity, unit, expected sd, mean posterior sd, the standard
        error of that mean, their ratio, spectra, converged chains."""
        out = []
        for name, unit in zip(self.names, self.units):
            values = np.asarray(self.posterior_sd[name], dtype=float)
            sem = float(values.std(ddof=1) / math.sqrt(values.size)) if values.size > 1 \
                else math.nan
            out.append({"quantity": name, "unit": unit, "expected_sd": self.predicted[name],
                        "mean_posterior_sd": float(values.mean()),
                        "standard_error": sem, "ratio": self.ratio(name),
                        "spectra": int(values.size), "converged": int(sum(self.converged))})
        return out


def simulate_counts(run, theta, seed: int) -> np.ndarray:
    """Poisson counts over every channel of the planned spectrum at ``theta``."""
    _, objective = prepare(run, np.ones(_n_channels(run)))
    expected = np.asarray(objective.predict(theta, "all"), dtype=float)
    return np.random.default_rng(seed).poisson(expected)


def check_plan(table, n: int, *, row=None, seed: int = 0, workers: int = 1,
               max_steps: int | None = None, progress=None) -> PlanCheck:
    """Invert ``n`` simulated spectra at one set-up and compare their posterior sds with the
    plan's expected sds.

    Parameters
    ----------
    table : PlanTable
        From :func:`inversion.plan`.
    n : int
        Number of simulated spectra (>= 1).
    row : PlanRow, optional
        The set-up (default: the best, ``table.best``).
    seed : int
        Spectrum ``k`` uses the seed ``seed + k`` for its Poisson draw and its sampler.
    workers : int
        Processes per inversion.
    max_steps : int, optional
        Step cap of each inversion (default the run's ``fit.max_steps``).
    progress : callable, optional
        ``progress(k, n, result)`` after each inversion.

    Returns
    -------
    PlanCheck
    """
    from forward import InputError

    if int(n) != n or n < 1:
        raise InputError(f"--check needs a whole number of spectra >= 1, got {n}",
                         where="command line: --check")
    row = table.best if row is None else row
    free = [q for q in table.quantities if math.isfinite(row.sd[q.name])]
    out = PlanCheck(row=row, names=[q.name for q in free], units=[q.unit for q in free],
                    predicted={q.name: row.sd[q.name] for q in free},
                    posterior_sd={q.name: [] for q in free})
    with tempfile.TemporaryDirectory(prefix="sondage-plan-check-") as tmp:
        for k in range(int(n)):
            s = int(seed) + k
            counts = simulate_counts(row.run, row.theta, s)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", NotConvergedWarning)
                result = invert(row.run, counts, Path(tmp) / f"check-{k}.h5", seed=s,
                                workers=workers, max_steps=max_steps, progress=False,
                                command=f"sondage plan --check (spectrum {k + 1} of {n})")
            for q in free:
                out.posterior_sd[q.name].append(float(result.summary[q.name]["sd"]))
            out.converged.append(bool(result.converged))
            out.seeds.append(s)
            if progress is not None:
                progress(k + 1, int(n), result)
    out.posterior_sd = {k: np.asarray(v) for k, v in out.posterior_sd.items()}
    return out
