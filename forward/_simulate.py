"""The spectrum a run file's layered sample would give, as the columns of a spectrum CSV.

:func:`simulate` returns ``channel``, ``energy_keV`` (channel centre), ``counts`` (a Poisson
draw, or the expected counts), ``expected`` and one ``expected_<species>`` column per species
(optionally one ``expected_<isotope>`` per scattering isotope); :func:`forward.write_spectrum_csv`
writes them and :func:`forward.read_spectrum` reads them back.
"""

from __future__ import annotations

import re

import numpy as np

from ._model import ForwardModel

__all__ = ["simulate", "column_name"]


def column_name(species: str) -> str:
    """CSV column of one species: ``expected_Si``, ``expected_O18`` for ``"O[18]"``,
    ``expected_O18_2`` for ``"O[18]#2"``."""
    return "expected_" + re.sub(r"[^A-Za-z0-9_]", "", species.replace("#", "_"))


def simulate(run, *, n_channels=None, poisson=False, seed=None, isotopes=False):
    """Expected (and optionally Poisson-drawn) spectrum of a run's layered sample.

    Parameters
    ----------
    run : forward.Run
    n_channels : int, optional
        Number of channels (default: enough for 1.05 times the highest surface edge).
    poisson : bool
        Draw the counts from a Poisson distribution with the expected means.
    seed : int, optional
        Seed of numpy's default generator for the draw.
    isotopes : bool
        Add one column per scattering isotope (``expected_18O``; where two species share an
        isotope, e.g. natural O and an 18O-enriched ``O[18]``, the species is appended:
        ``expected_18O_O18``).

    Returns
    -------
    model : forward.ForwardModel
    columns : dict[str, numpy.ndarray]
        The CSV columns, in order.
    """
    model = ForwardModel(run, n_channels=n_channels)
    fractions = model.layer_fractions()
    expected = model.expected_counts(fractions)
    per = model.expected_counts(fractions, per_species=True)
    if poisson:
        counts = np.random.default_rng(seed).poisson(expected).astype(np.int64)
    else:
        counts = expected
    columns = {
        "channel": np.arange(model.n_channels, dtype=np.int64),
        # to a micro-electronvolt: offset + gain * (c + 1/2) in binary floating point would
        # otherwise print as 55.900000000000006
        "energy_keV": np.round(model.channel_energy_keV(), 9),
        "counts": counts,
        "expected": expected,
    }
    for name, row in zip(model.species, per):
        columns[column_name(name)] = row
    if isotopes:
        per_iso = model.expected_counts(fractions, per_isotope=True)
        labels = list(model.isotope_labels)
        for q, (label, row) in enumerate(zip(labels, per_iso)):
            name = "expected_" + label
            if labels.count(label) > 1:
                name += "_" + column_name(model.species[model.isotope_species[q]])[9:]
            columns[name] = row
    return model, columns
