"""Bands are data: profiles and spectra from seeded posterior draws, reduced to quantiles.

For ``n`` draws picked at random (seeded) from the posterior samples: the fraction table of
each draw on the fit's slice grid, the expected spectrum over every channel (model plus
background) and each species' part of it, all from :meth:`Objective.predict`.  Stored as the
2.5, 16, 50, 84 and 97.5 % quantiles (profiles; the predictive spectrum with Poisson noise
drawn from the same generator) and medians (the noise-free model, each species).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..results._schema import QUANTILES

__all__ = ["Bands", "posterior_bands"]


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


def posterior_bands(objective, samples, theta_map, *, n_draws: int, seed: int) -> Bands:
    """Profile and spectrum bands from ``n_draws`` seeded draws of ``samples``.

    Parameters
    ----------
    objective : Objective
    samples : ndarray (draws, parameters)
    theta_map : ndarray
        The highest-posterior point of the chain.
    n_draws : int
        Draws to use (at most the number of samples).
    seed : int
        Seeds the choice of draws and the Poisson noise of the predictive spectrum.
    """
    species = objective.spec.species
    rng = np.random.default_rng(seed)
    n = min(n_draws, samples.shape[0]) if samples.shape[0] else 0
    idx = rng.choice(samples.shape[0], size=n, replace=False) if n else []
    profiles, spectra, parts = [], [], []
    for i in idx:
        profiles.append(objective.profile(samples[i]))
        spectra.append(objective.predict(samples[i], "all"))
        parts.append(objective.predict(samples[i], "all", per_species=True))
    out = Bands(draws=n, energy_keV=objective.channel_energy_keV(theta_map))
    if not n:
        return out
    fr_map = objective.profile(theta_map)
    q = np.quantile(np.array(profiles), QUANTILES, axis=0)  # (5, slices, species)
    for j, sp in enumerate(species):
        out.profile[sp] = q[:, :, j]
        out.profile_map[sp] = fr_map[:, j]
    spectra = np.array(spectra)
    out.predictive = np.quantile(rng.poisson(spectra), QUANTILES, axis=0)
    out.model_median = np.median(spectra, axis=0)
    median_parts = np.median(np.array(parts), axis=0)  # (species, channels)
    out.species = {sp: median_parts[j] for j, sp in enumerate(species)}
    return out
