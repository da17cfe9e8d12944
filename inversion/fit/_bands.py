"""Bands are data: profiles and spectra from seeded posterior draws, reduced to quantiles.

For ``n`` draws picked at random (seeded) from the posterior samples: the profile of each draw
at the points of one shared depth grid (:func:`band_depth_1e15`: the layer model's continuous
profile, the node model's interpolated nodes), the expected spectrum over every channel (model
plus background) and each species' part of it, all from the objective.  Stored as the 2.5, 16,
50, 84 and 97.5 % quantiles (profiles; the predictive spectrum with Poisson noise drawn from the
same generator) and medians (the noise-free model, each species).  The same draws' expected
counts in the fit window give the posterior predictive check
(:mod:`inversion.fit._predictive`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..results._schema import QUANTILES
from ._predictive import PPC_ALPHA, PredictiveCheck, predictive_check
from ._roles import Role

__all__ = ["Bands", "posterior_bands", "band_depth_1e15"]

#: points of the shared depth grid spread evenly over its whole depth
_EVEN_POINTS = 500
#: points around each of the run file's interfaces
_INTERFACE_POINTS = 81


@dataclass
class Bands:
    """Quantile bands of one posterior.

    Attributes
    ----------
    draws : int
        Posterior draws used.
    profile : dict species -> ndarray (5, n_slices)
        Quantiles of each species' atom fraction.
    profile_map : dict species -> ndarray (n_slices,)
        The highest-posterior draw's fractions.
    predictive : ndarray (5, n_channels) or None
        Quantiles of Poisson draws of the expected counts.
    model_median : ndarray (n_channels,) or None
        Median expected counts (no noise).
    species : dict species -> ndarray (n_channels,)
        Median expected counts of each species.
    energy_keV : ndarray (n_channels,)
        Channel-centre energies at the highest-posterior draw's calibration.
    """

    draws: int
    profile: dict = field(default_factory=dict)
    profile_map: dict = field(default_factory=dict)
    predictive: np.ndarray | None = None
    model_median: np.ndarray | None = None
    species: dict = field(default_factory=dict)
    energy_keV: np.ndarray | None = None
    depth_1e15: np.ndarray | None = None
    check: PredictiveCheck | None = None


def _upper(p, fallback: float) -> float:
    """A high point of a parameter's prior (its 99.9 % quantile, or the fallback)."""
    try:
        value = float(p.prior.dist.ppf(0.999))
    except (AttributeError, ValueError):
        return fallback
    return value if np.isfinite(value) else fallback


def band_depth_1e15(objective) -> np.ndarray:
    """The shared depth grid of the profile bands (1e15 atoms/cm2 from the surface).

    Layer model: 500 points evenly from the surface to the deepest the films' priors allow
    (plus a quarter more over a substrate), and 81 points across each of the run file's
    interfaces, as wide as three of its mixing prior's 84 % widths or a fifth of the thinner
    neighbouring layer.  Node model: four points per node interval down to the deepest node
    (a tenth more over a substrate); with the nodes inside the run file's layers, four per node
    interval over the range and nine over each stretch of layers above and below it.
    """
    spec = objective.spec
    model_end = float(objective.edges_1e15[-1])
    if spec.profile != "layers":
        nodes = spec.nodes
        top, depth = float(nodes["top_1e15"]), float(nodes["depth_1e15"])
        inside = np.linspace(top, depth, 4 * (int(nodes["count"]) - 1) + 1)
        if nodes["below"] != "layers":
            end = depth * (1.1 if nodes["below"] == "hold" else 1.0)
            return np.linspace(0.0, min(end, max(model_end, depth)), inside.size)
        # a mixed model: the run file's sharp layers above and below the node range, each
        # boundary drawn as a step (a point just above it), down to a tenth below the films
        films = float(nodes["total_depth_1e15"])
        end = films * 1.1 if objective.substrate else films
        tops = [z for z in np.cumsum(objective.base_thickness) if z < end]
        parts = [inside, np.linspace(0.0, top, 9), np.linspace(depth, max(end, depth), 9),
                 [np.nextafter(z, -np.inf) for z in tops + [top] if z > 0], tops]
        return np.unique(np.clip(np.concatenate([np.atleast_1d(p) for p in parts]), 0.0,
                                 max(end, depth)))
    t0 = np.asarray(objective.base_thickness, dtype=float)
    t_hi = t0.copy()
    w_hi = np.zeros(objective.n_interfaces)
    w_84 = np.zeros(objective.n_interfaces)
    for p in spec.parameters:
        if p.role is Role.AREAL_DENSITY:
            t_hi[p.target] = max(t0[p.target], _upper(p, t0[p.target]))
        elif p.role is Role.MIXING:
            w_hi[p.target] = _upper(p, 0.0)
            w_84[p.target] = float(p.prior.dist.ppf(0.84))
    end = float(t_hi.sum()) + 3.0 * float(w_hi.max() if w_hi.size else 0.0)
    if objective.substrate:
        end *= 1.25
    if end <= 0:
        end = model_end
    points = [np.linspace(0.0, end, _EVEN_POINTS)]
    tops = np.cumsum(t0)
    for k, z in enumerate(tops):
        near = [t0[k]] + ([t0[k + 1]] if k + 1 < t0.size else [])
        half = max(3.0 * w_84[k], 0.2 * min(near), 1.0)
        points.append(z + np.linspace(-half, half, _INTERFACE_POINTS))
    depth = np.unique(np.clip(np.concatenate(points), 0.0, end))
    return depth


def posterior_bands(objective, samples, theta_map, *, n_draws: int, seed: int,
                    alpha: float = PPC_ALPHA, profiles: bool = True) -> Bands:
    """Profile and spectrum bands, and the predictive check, from ``n_draws`` seeded draws.

    Parameters
    ----------
    objective : Objective
    samples : ndarray (draws, parameters)
    theta_map : ndarray
        The highest-posterior point of the chain.
    n_draws : int
        Draws to use (at most the number of samples).
    seed : int
        Seeds the choice of draws, the Poisson noise of the predictive spectrum and the
        replicated spectra of the predictive check.
    alpha : float
        False-alarm level of the predictive check's tests (a joint run divides it among its
        spectra).
    profiles : bool
        False: spectra only (a joint run's later spectra: the profile bands are the first's).
    """
    species = objective.spec.species
    rng = np.random.default_rng(seed)
    n = min(n_draws, samples.shape[0]) if samples.shape[0] else 0
    idx = rng.choice(samples.shape[0], size=n, replace=False) if n else []
    depth = band_depth_1e15(objective)
    want_profiles = bool(profiles)
    profiles, spectra, parts = [], [], []
    for i in idx:
        if want_profiles:
            profiles.append(objective.profile(samples[i], depth))
        spectra.append(objective.predict(samples[i], "all"))
        parts.append(objective.predict(samples[i], "all", per_species=True))
    out = Bands(draws=n, energy_keV=objective.channel_energy_keV(theta_map), depth_1e15=depth)
    if not n:
        return out
    if want_profiles:
        fr_map = objective.profile(theta_map, depth)
        q = np.quantile(np.array(profiles), QUANTILES, axis=0)  # (5, points, species)
        for j, sp in enumerate(species):
            out.profile[sp] = q[:, :, j]
            out.profile_map[sp] = fr_map[:, j]
    spectra = np.array(spectra)
    out.predictive = np.quantile(rng.poisson(spectra), QUANTILES, axis=0)
    out.model_median = np.median(spectra, axis=0)
    median_parts = np.median(np.array(parts), axis=0)  # (species, channels)
    out.species = {sp: median_parts[j] for j, sp in enumerate(species)}
    if n >= 10 and objective.use_likelihood:
        out.check = predictive_check(objective.counts[objective.mask], spectra[:, objective.mask],
                                     objective.channels,
                                     block_channels=objective.fwhm_channels(), seed=seed + 1,
                                     alpha=alpha)
    return out
