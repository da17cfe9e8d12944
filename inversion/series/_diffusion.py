"""Diffusion statistics for an annealing series: D per anneal, the Arrhenius law, comparisons.

Everything here works on plain arrays of posterior draws and knows nothing about files.

Conventions
-----------
An interface's mixing width ``w`` is the standard deviation of the Gaussian that blurs a sharp
step.  A sharp step that diffuses for a time ``t`` with a constant coefficient ``D`` becomes an
error-function profile of standard deviation ``sqrt(2 D t)`` (Crank, *The Mathematics of
Diffusion*, 2nd ed., Oxford 1975, eq. 2.14), and variances of independent Gaussian blurs add, so

    D = (w**2 - w0**2) / (2 t)

with ``w0`` the as-deposited width.  Widths in nm give D in nm^2/s; widths in 1e15 atoms/cm2
give D in (1e15 atoms/cm2)^2/s.  The functions here never convert: D carries the square of the
width unit per second.

The Arrhenius law ``D = D0 exp(-Ea / (k T))`` uses Boltzmann's constant in eV/K from
:mod:`scipy.constants` (CODATA).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import emcee
import numpy as np
from scipy import constants
from scipy.stats import gaussian_kde

from forward import InputError

from ..results._schema import QUANTILES
from ..results._summary import summarise

__all__ = [
    "BOLTZMANN_eV_PER_K",
    "NM2_TO_CM2",
    "DiffusionDraws",
    "ArrheniusFit",
    "Comparison",
    "diffusion_draws",
    "arrhenius_fit",
    "compare",
    "compare_neighbours",
    "interval",
]

#: Boltzmann constant in eV/K (scipy.constants, CODATA).
BOLTZMANN_eV_PER_K = constants.physical_constants["Boltzmann constant in eV/K"][0]
#: 1 nm^2 = 1e-14 cm^2: multiply D in nm^2/s by this to get cm^2/s.
NM2_TO_CM2 = 1e-14

def interval(draws) -> dict:
    """Median and central 68 % and 95 % intervals of a set of draws.

    Parameters
    ----------
    draws : array_like
        One-dimensional posterior draws (non-finite draws are an error).

    Returns
    -------
    dict
        ``median``, ``mean``, ``sd``, ``low68``, ``high68``, ``low95``, ``high95``, as floats
        (:func:`inversion.results._summary.summarise`).
    """
    x = np.asarray(draws, dtype=float).ravel()
    if x.size == 0 or not np.all(np.isfinite(x)):
        raise InputError("draws must be a non-empty array of finite numbers; got "
                         f"{x.size} values, {int(np.sum(~np.isfinite(x)))} not finite")
    return summarise(x)


def _as_draws(values, name: str) -> np.ndarray:
    x = np.asarray(values, dtype=float).ravel()
    if x.size < 2:
        raise InputError(f"{name} needs at least 2 posterior draws; got {x.size}")
    if not np.all(np.isfinite(x)):
        raise InputError(f"{name} has {int(np.sum(~np.isfinite(x)))} non-finite draws; "
                         "only finite numbers are allowed")
    return x


# --------------------------------------------------------------------------------------------
# D per anneal
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DiffusionDraws:
    """Posterior draws of one anneal's diffusion coefficient.

    Attributes
    ----------
    d_draws : ndarray
        Draws of D in (width unit)^2/s.  Negative draws are kept (see :func:`diffusion_draws`).
    negative : ndarray of bool
        Which draws have w^2 < w0^2.
    negative_fraction : float
        Share of negative draws: the posterior probability that this anneal did not broaden
        the interface beyond the as-deposited width.
    time_s : float
        Anneal time in s.
    """

    d_draws: np.ndarray
    negative: np.ndarray
    negative_fraction: float
    time_s: float

    @property
    def flagged(self) -> bool:
        """True when any draw is negative (the anneal is not resolved from the start width)."""
        return bool(self.negative_fraction > 0.0)


def diffusion_draws(width_draws, width0_draws, time_s: float, *, n_draws: int | None = None,
                    seed: int = 0) -> DiffusionDraws:
    """Posterior draws of D = (w^2 - w0^2) / (2 t) for one anneal.

    The annealed and the as-deposited sample are separate measurements, so their posteriors are
    independent and the joint posterior is their product.  We sample it by pairing a randomly
    chosen draw of each (with replacement, from a seeded generator), which avoids any spurious
    correlation that pairing draws in stored order could carry over from the two chains.

    A draw with w^2 < w0^2 gives a negative D.  It is kept as it is and flagged, not clipped at
    zero: the negative draws are the posterior's honest statement that the anneal may not have
    broadened the interface at all.  Clipping would pile that probability onto D = 0 and shift
    every median and interval upwards; dropping the draws would bias D upwards even more.  The
    Arrhenius fit uses the draws as they are (its likelihood is a density in D, defined on both
    sides of zero).

    Parameters
    ----------
    width_draws : array_like
        Posterior draws of the annealed interface's mixing width (nm, or 1e15 atoms/cm2).
    width0_draws : array_like
        Posterior draws of the as-deposited mixing width, in the same unit.
    time_s : float
        Anneal time in s (> 0).
    n_draws : int, optional
        Number of paired draws; default the larger of the two draw counts.
    seed : int
        Seed of the pairing generator.

    Returns
    -------
    DiffusionDraws
        D draws in (width unit)^2/s with the negative-draw flag.
    """
    w = _as_draws(width_draws, "width_draws")
    w0 = _as_draws(width0_draws, "width0_draws")
    if not (np.isfinite(time_s) and time_s > 0):
        raise InputError(f"anneal time must be a positive number of seconds; got {time_s!r}")
    n = int(n_draws) if n_draws is not None else max(w.size, w0.size)
    if n < 2:
        raise InputError(f"n_draws must be at least 2; got {n_draws!r}")
    rng = np.random.default_rng(seed)
    a = w[rng.integers(0, w.size, n)]
    b = w0[rng.integers(0, w0.size, n)]
    d = (a * a - b * b) / (2.0 * float(time_s))
    neg = d < 0
    return DiffusionDraws(d_draws=d, negative=neg, negative_fraction=float(neg.mean()),
                          time_s=float(time_s))


# --------------------------------------------------------------------------------------------
# Arrhenius fit
# --------------------------------------------------------------------------------------------
class _MemberTable:
    """One member's likelihood of ln D, tabulated on a uniform ln-D grid for several scatters.

    The member's posterior of D is summarised by a Gaussian kernel density in D (Scott's
    bandwidth, scipy.stats.gaussian_kde), which is defined for negative draws too.  Read as a
    likelihood of the true D (flat prior in D assumed), it is evaluated at D = exp(u) on a grid
    of u = ln D and, for the extra-scatter model, convolved in u with normals of several widths.
    """

    def __init__(self, d_draws: np.ndarray, scatter_levels: np.ndarray, step_u: float,
                 max_kde_draws: int, rng: np.random.Generator):
        d = d_draws
        if d.size > max_kde_draws:
            d = rng.choice(d, size=max_kde_draws, replace=False)
        if np.ptp(d) <= 0:
            raise InputError("an anneal's D draws are all equal; the Arrhenius fit needs a "
                             "posterior with some spread")
        kde = gaussian_kde(d)
        h = float(np.sqrt(kde.covariance[0, 0]))
        # The density in D, exactly, on a uniform D grid fine against the bandwidth.
        d_grid = np.arange(d.min() - 12.0 * h, d.max() + 12.0 * h + h / 20.0, h / 20.0)
        logp_d = kde.logpdf(d_grid)
        top = float(d_grid[-1])
        smax = float(scatter_levels[-1])
        # u = ln D.  Left end: far below the bandwidth the density no longer changes with D (it
        # is the density at D = 0); right end: 12 bandwidths above the largest draw, where it
        # has fallen by exp(-72).  Widened by 6 scatter widths for the convolution below.
        lo = np.log(h) - 12.0 - 6.0 * smax
        hi = np.log(top) + 6.0 * smax
        self.u = np.arange(lo, hi + step_u, step_u)
        # Beyond the grid the kernel sum is dominated by the nearest draw: a Gaussian tail,
        # joined continuously at the grid ends (12 bandwidths out).
        self.h, self.d_max = h, float(d.max())
        self.c_hi = float(logp_d[-1]) + 72.0
        self.c_lo = float(logp_d[0]) + 72.0
        self.d_min = float(d.min())
        logp = self._log_density_d(np.exp(self.u), d_grid, logp_d)
        peak = logp.max()
        lin = np.exp(logp - peak)
        self.tables = np.empty((scatter_levels.size, self.u.size))
        # Convolution in u with a normal of width s, done in Fourier space on an edge-padded
        # copy (the density is flat at the left end and ~0 at the right end).
        pad = int(np.ceil(8.0 * smax / step_u)) + 1 if smax > 0 else 0
        if pad:
            padded = np.concatenate([np.full(pad, lin[0]), lin, np.full(pad, lin[-1])])
            spec = np.fft.rfft(padded)
            k = 2.0 * np.pi * np.fft.rfftfreq(padded.size, d=step_u)
        for j, sj in enumerate(scatter_levels):
            if sj <= 0:
                self.tables[j] = logp
                continue
            sm = np.fft.irfft(spec * np.exp(-0.5 * (sj * k) ** 2), n=padded.size)
            self.tables[j] = np.log(np.maximum(sm[pad:pad + lin.size], 1e-300)) + peak
        self.u_lo, self.u_hi = self.u[0], self.u[-1]
        self.step_u = step_u

    def _log_density_d(self, d_values, d_grid, logp_d):
        out = np.interp(d_values, d_grid, logp_d)
        below, above = d_values < d_grid[0], d_values > d_grid[-1]
        out[below] = self.c_lo - 0.5 * ((d_values[below] - self.d_min) / self.h) ** 2
        out[above] = self.c_hi - 0.5 * ((d_values[above] - self.d_max) / self.h) ** 2
        return out

    def log_like(self, mu: np.ndarray, j0: np.ndarray, frac: np.ndarray) -> np.ndarray:
        """Log-likelihood at ln D = ``mu`` between scatter levels j0 and j0+1 (weight frac)."""
        x = (np.clip(mu, self.u_lo, self.u_hi) - self.u_lo) / self.step_u
        i0 = np.minimum(np.floor(x).astype(int), self.u.size - 2)
        t = x - i0
        n_lev = self.tables.shape[0]
        j1 = np.minimum(j0 + 1, n_lev - 1)
        a = self.tables[j0, i0] * (1 - t) + self.tables[j0, i0 + 1] * t
        b = self.tables[j1, i0] * (1 - t) + self.tables[j1, i0 + 1] * t
        out = a * (1 - frac) + b * frac
        # Above the grid (more than 12 bandwidths beyond the largest draw, plus 6 scatter
        # widths) only the Gaussian tail of the nearest draw remains.
        above = mu > self.u_hi
        if np.any(above):
            d_far = np.exp(np.minimum(mu[above], 700.0))
            with np.errstate(over="ignore"):  # far above: -inf, as it should be
                out[above] = self.c_hi - 0.5 * ((d_far - self.d_max) / self.h) ** 2
        return out


@dataclass
class ArrheniusFit:
    """Posterior of the Arrhenius law ln D = ln D0 - Ea / (k T).

    Attributes
    ----------
    ea_eV : ndarray
        Draws of the activation energy in eV.
    ln_d0 : ndarray
        Draws of ln D0, D0 in the unit of the D draws (e.g. nm^2/s).
    scatter_ln : ndarray or None
        Draws of the extra scatter of ln D about the line (None when not fitted).
    summary : dict
        :func:`interval` of ``ea_eV``, ``ln_d0`` and ``scatter_ln``.
    temperature_grid_K : ndarray
        Temperatures of the band.
    band_ln_d : ndarray, shape (5, n_grid)
        Quantiles 2.5, 16, 50, 84, 97.5 % of the line's ln D on the grid.
    diagnostics : dict
        Walkers, steps, burn-in, thinning, acceptance fraction, autocorrelation time.
    """

    ea_eV: np.ndarray
    ln_d0: np.ndarray
    scatter_ln: np.ndarray | None
    summary: dict
    temperature_grid_K: np.ndarray
    band_ln_d: np.ndarray
    band_quantiles: tuple = QUANTILES
    diagnostics: dict = field(default_factory=dict)


def arrhenius_fit(temperatures_K, d_draws_list, *, scatter: bool = False,
                  ea_max_eV: float = 10.0, scatter_max_ln: float = 3.0, n_walkers: int = 32,
                  n_steps: int = 3000, burn: int | None = None, seed: int = 0,
                  temperature_grid_K=None, max_kde_draws: int = 4000,
                  step_ln_d: float = 0.002) -> ArrheniusFit:
    """Bayesian fit of D = D0 exp(-Ea / (k T)) to the D posteriors of a series of anneals.

    Likelihood: for anneal i the posterior of D_i, summarised by a Gaussian kernel density
    ``p_i(D)`` of its draws, is read as the likelihood of the true D_i (exact if the member's
    prior was flat in D over the relevant range).  With ``mu_i = ln D0 - Ea / (k T_i)``

        L = prod_i p_i(exp(mu_i))                                    (scatter=False)
        L = prod_i  integral p_i(exp(u)) N(u; mu_i, s^2) du           (scatter=True)

    the second letting the true ln D_i scatter about the line by ``s`` (sample-to-sample
    variation that the width posteriors do not carry).  Priors: Ea uniform on [0, ea_max_eV];
    ln D0 uniform (improper, the data bound it); s uniform on [0, scatter_max_ln].  The
    posterior is sampled with emcee in (Ea, ln D at the mean 1/kT, s), a linear change of
    variables with unit Jacobian that removes the strong Ea-ln D0 correlation.

    Parameters
    ----------
    temperatures_K : array_like
        Anneal temperatures in K, one per anneal (at least 2 distinct).
    d_draws_list : sequence of array_like
        D draws per anneal, same unit for all (negative draws allowed).
    scatter : bool
        Fit the extra scatter ``s`` too.
    ea_max_eV, scatter_max_ln : float
        Upper ends of the uniform priors.
    n_walkers, n_steps, burn, seed : int
        emcee settings; ``burn`` defaults to a third of ``n_steps``.
    temperature_grid_K : array_like, optional
        Temperatures of the band; default 60 points spanning the data +-5 %.
    max_kde_draws : int
        Draws per anneal used for the kernel density (seeded subsample above this).
    step_ln_d : float
        Grid step in ln D of the tabulated likelihoods.

    Returns
    -------
    ArrheniusFit
    """
    t_k = np.asarray(temperatures_K, dtype=float).ravel()
    if t_k.size != len(d_draws_list):
        raise InputError(f"{t_k.size} temperatures but {len(d_draws_list)} sets of D draws; "
                         "give one temperature per anneal")
    if not np.all(np.isfinite(t_k) & (t_k > 0)):
        raise InputError("temperatures must be positive numbers in kelvin")
    if np.unique(t_k).size < 2:
        raise InputError("the Arrhenius fit needs anneals at 2 or more distinct temperatures; "
                         f"got {np.unique(t_k).size}")
    draws = [_as_draws(d, f"D draws of anneal {i}") for i, d in enumerate(d_draws_list)]
    if n_walkers < 8 or n_walkers % 2:
        raise InputError(f"n_walkers must be an even number >= 8; got {n_walkers}")
    burn = n_steps // 3 if burn is None else int(burn)
    if not 0 <= burn < n_steps:
        raise InputError(f"burn must lie in [0, n_steps); got burn={burn}, n_steps={n_steps}")

    rng = np.random.default_rng(seed)
    inv_kt = 1.0 / (BOLTZMANN_eV_PER_K * t_k)
    x_ref = float(inv_kt.mean())
    dx = inv_kt - x_ref
    levels = (np.linspace(0.0, 1.0, 41) ** 2 * scatter_max_ln) if scatter else np.zeros(1)
    tables = [_MemberTable(d, levels, step_ln_d, max_kde_draws, rng) for d in draws]

    # Starting point: weighted least squares of ln(median D) on 1/kT over anneals whose median
    # is positive (a start only; the posterior does not depend on it).
    med = np.array([np.median(d) for d in draws])
    spread = np.array([max(np.std(d), 1e-300) for d in draws])
    ok = med > 0
    if ok.sum() >= 2 and np.unique(dx[ok]).size >= 2:
        sig = np.clip(spread[ok] / med[ok], 0.02, 5.0)
        slope, icpt = np.polyfit(dx[ok], np.log(med[ok]), 1, w=1.0 / sig)
        ea0, lnref0 = float(np.clip(-slope, 0.05, ea_max_eV - 0.05)), float(icpt)
    else:
        pos = np.array([np.percentile(d, 84) for d in draws])
        ea0, lnref0 = min(1.0, ea_max_eV / 2), float(np.log(np.abs(pos).max()))

    n_lev = levels.size

    def log_posterior(theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(theta)
        ea, lnref = theta[:, 0], theta[:, 1]
        s = theta[:, 2] if scatter else np.zeros(theta.shape[0])
        inside = (ea >= 0) & (ea <= ea_max_eV) & (s >= 0) & (s <= scatter_max_ln)
        if scatter:
            # levels are quadratic in [0, 1]: invert to an index and a weight
            r = np.sqrt(np.clip(s, 0, scatter_max_ln) / scatter_max_ln) * (n_lev - 1)
            j0 = np.minimum(np.floor(r).astype(int), n_lev - 2)
            lev_lo, lev_hi = levels[j0], levels[j0 + 1]
            frac = (np.clip(s, 0, scatter_max_ln) - lev_lo) / (lev_hi - lev_lo)
        else:
            j0 = np.zeros(theta.shape[0], dtype=int)
            frac = np.zeros(theta.shape[0])
        total = np.zeros(theta.shape[0])
        for i, tab in enumerate(tables):
            mu = lnref - ea * dx[i]
            total += tab.log_like(mu, j0, frac)
        return np.where(inside, total, -np.inf)

    ndim = 3 if scatter else 2
    start = np.empty((n_walkers, ndim))
    start[:, 0] = np.clip(ea0 + 0.01 * rng.standard_normal(n_walkers), 1e-3, ea_max_eV - 1e-3)
    start[:, 1] = lnref0 + 0.01 * rng.standard_normal(n_walkers)
    if scatter:
        start[:, 2] = rng.uniform(0.02, min(0.3, scatter_max_ln), n_walkers)
    lp0 = log_posterior(start)
    if not np.all(np.isfinite(lp0)):
        raise InputError("the Arrhenius fit found no start point with finite likelihood; the "
                         "D posteriors are inconsistent with any line D0 exp(-Ea/kT) with "
                         f"0 <= Ea <= {ea_max_eV} eV")
    sampler = emcee.EnsembleSampler(n_walkers, ndim, log_posterior, vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31))).get_state()
    sampler.run_mcmc(start, n_steps, progress=False)
    chain = sampler.get_chain(discard=burn, flat=True)
    # quiet and without a tolerance: never raises; a degenerate chain gives NaN
    tau = sampler.get_autocorr_time(discard=burn, quiet=True, tol=0)

    ea = chain[:, 0]
    ln_d0 = chain[:, 1] + ea * x_ref
    sc = chain[:, 2] if scatter else None
    summary = {"ea_eV": interval(ea), "ln_d0": interval(ln_d0)}
    if sc is not None:
        summary["scatter_ln"] = interval(sc)

    if temperature_grid_K is None:
        grid = np.linspace(t_k.min() * 0.95, t_k.max() * 1.05, 60)
    else:
        grid = np.asarray(temperature_grid_K, dtype=float).ravel()
        if not np.all(np.isfinite(grid) & (grid > 0)):
            raise InputError("temperature_grid_K must hold positive temperatures in kelvin")
    sub = chain if chain.shape[0] <= 4000 else chain[rng.choice(chain.shape[0], 4000, False)]
    line = (sub[:, 1][:, None] + sub[:, 0][:, None] * x_ref
            - sub[:, 0][:, None] / (BOLTZMANN_eV_PER_K * grid[None, :]))
    band = np.quantile(line, QUANTILES, axis=0)
    diag = {"n_walkers": n_walkers, "n_steps": n_steps, "burn": burn,
            "acceptance_fraction": float(np.mean(sampler.acceptance_fraction)),
            "autocorr_time": [float(t) for t in tau],
            "steps_over_tau": float((n_steps - burn) / np.nanmax(tau)) if np.all(np.isfinite(tau)) else float("nan"),
            "likelihood": "kde_in_D" + ("_with_lognormal_scatter" if scatter else ""),
            "x_ref_inv_eV": x_ref}
    return ArrheniusFit(ea_eV=ea, ln_d0=ln_d0, scatter_ln=sc, summary=summary,
                        temperature_grid_K=grid, band_ln_d=band, diagnostics=diag)


# --------------------------------------------------------------------------------------------
# Comparisons
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Comparison:
    """Posterior of the difference a - b between two independent quantities.

    Attributes
    ----------
    diff_draws : ndarray
        Draws of a - b (random pairing).
    summary : dict
        :func:`interval` of the difference.
    p_a_greater : float
        Posterior probability that a > b.
    p_a_greater_mc_error : float
        Its Monte Carlo standard error, sqrt(p (1 - p) / n) for independent draws.
    """

    diff_draws: np.ndarray
    summary: dict
    p_a_greater: float
    p_a_greater_mc_error: float


def compare(draws_a, draws_b, *, n_draws: int | None = None, seed: int = 0) -> Comparison:
    """Compare two independent posteriors: the difference a - b, its 95 % interval, P(a > b).

    Parameters
    ----------
    draws_a, draws_b : array_like
        Posterior draws of the two quantities, same unit (e.g. D in nm^2/s of two anneals).
    n_draws : int, optional
        Number of random pairs; default the larger draw count.
    seed : int
        Seed of the pairing generator.

    Returns
    -------
    Comparison
    """
    a = _as_draws(draws_a, "draws_a")
    b = _as_draws(draws_b, "draws_b")
    n = int(n_draws) if n_draws is not None else max(a.size, b.size)
    rng = np.random.default_rng(seed)
    diff = a[rng.integers(0, a.size, n)] - b[rng.integers(0, b.size, n)]
    p = float(np.mean(diff > 0))
    return Comparison(diff_draws=diff, summary=interval(diff), p_a_greater=p,
                      p_a_greater_mc_error=float(np.sqrt(max(p * (1 - p), 1.0 / n) / n)))


def compare_neighbours(labels, draws_list, *, seed: int = 0) -> list[dict]:
    """Compare each member with the next one in the series.

    Parameters
    ----------
    labels : sequence of str
        Member labels, in series order.
    draws_list : sequence of array_like
        Posterior draws per member (same unit for all).
    seed : int
        Base seed; pair k uses ``seed + k``.

    Returns
    -------
    list of dict
        One row per neighbouring pair: ``a``, ``b``, ``median``, ``low95``, ``high95``,
        ``p_a_greater``.
    """
    if len(labels) != len(draws_list):
        raise InputError(f"{len(labels)} labels but {len(draws_list)} sets of draws")
    rows = []
    for k in range(len(labels) - 1):
        c = compare(draws_list[k + 1], draws_list[k], seed=seed + k)
        rows.append({"a": str(labels[k + 1]), "b": str(labels[k]),
                     "median": c.summary["median"], "low95": c.summary["low95"],
                     "high95": c.summary["high95"], "p_a_greater": c.p_a_greater})
    return rows
