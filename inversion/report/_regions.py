"""Channel ranges the spectrum figure picks out: the signal regions it enlarges in zoom panels.

A heavy thin film can fill 20 of a thousand channels, and a light element's signal can be a
small step on a large background; on a linear axis over the whole spectrum neither can be
read.  :func:`signal_regions` finds, from each species' median contribution, the few ranges
worth a panel of their own:

1. for each species, the runs of channels (inside the fitted window) where its median
   contribution reaches ``fraction`` of its own peak;
2. a run counts only when its signal stands out from counting noise: the species' counts
   summed over the run are at least ``significance`` times the square root of the summed model
   counts there (Poisson noise; a three-standard-deviation rule is common practice);
3. a run wider than ``max_width_fraction`` of the fitted channels (a substrate, a thick layer)
   is left to the main panel, which already shows it legibly;
4. runs whose gap is at most half the wider run's width (or 3 channels) are merged, so
   overlapping peaks share a panel, as long as the merged region is not too wide by rule 3;
5. each region is padded by a quarter of its width (at least 3 channels) on both sides;
6. at most ``max_regions`` are kept: those least visible in the main panel (smallest product
   of their weakest species' height relative to the tallest model count, and their width
   relative to the fitted channels), then put back in channel order and lettered A, B, C...
"""

from __future__ import annotations

import string
from dataclasses import dataclass

import numpy as np

__all__ = ["SignalRegion", "signal_regions"]


@dataclass(frozen=True)
class SignalRegion:
    """A range of channels drawn enlarged.

    Attributes
    ----------
    first, last : int
        Positions (indices into the spectrum's arrays) of the first and last channel, padded.
    species : tuple of str
        The species whose signal made the region, in the order given.
    letter : str
        "A", "B", ... in channel order: the panel's name on the figure.
    """

    first: int
    last: int
    species: tuple
    letter: str = ""


def signal_regions(species_spectra, *, total=None, window=None, fraction=0.1,
                   significance=3.0, max_width_fraction=0.15, max_regions=3):
    """The signal regions of a spectrum worth a zoom panel (rules in the module text).

    Parameters
    ----------
    species_spectra : dict of str to array_like
        Each species' median model counts per channel (all the same length).
    total : array_like, optional
        The model's expected counts per channel (default: the sum of the species).
    window : array_like of bool, optional
        True for the fitted channels; regions lie inside it.
    fraction : float, optional
        A species' contribution must reach this fraction of its own peak.
    significance : float, optional
        Summed signal over the run, in standard deviations of the counting noise, for the run
        to count.
    max_width_fraction : float, optional
        Regions wider than this fraction of the fitted channels are left out.
    max_regions : int, optional
        At most this many regions.

    Returns
    -------
    list of SignalRegion
        In channel order, lettered A, B, ...
    """
    names = list(species_spectra)
    if not names or max_regions <= 0:
        return []
    parts = {s: np.nan_to_num(np.asarray(species_spectra[s], dtype=float)) for s in names}
    n = next(iter(parts.values())).size
    model = (np.sum([parts[s] for s in names], axis=0) if total is None
             else np.nan_to_num(np.asarray(total, dtype=float)))
    inside = np.ones(n, bool) if window is None else np.asarray(window, dtype=bool)
    fitted = np.flatnonzero(inside)
    if fitted.size == 0:
        return []
    span = fitted[-1] - fitted[0] + 1
    tallest = max(float(np.max(model[inside])), 1e-300)

    runs = []  # [first, last, species set, weakest peak]
    for name in names:
        y = np.where(inside, parts[name], 0.0)
        peak = float(np.max(y))
        if peak <= 0:
            continue
        above = np.flatnonzero(y >= fraction * peak)
        for run in np.split(above, np.flatnonzero(np.diff(above) > 1) + 1):
            lo, hi = int(run[0]), int(run[-1])
            signal = float(np.sum(y[lo:hi + 1]))
            noise = np.sqrt(max(float(np.sum(model[lo:hi + 1])), signal))
            if signal < significance * noise or signal <= 0:
                continue
            runs.append([lo, hi, [name], float(np.max(y[lo:hi + 1]))])
    widest = max_width_fraction * span
    runs = sorted((r for r in runs if r[1] - r[0] + 1 <= widest), key=lambda r: (r[0], r[1]))

    merged = []
    for run in runs:
        if merged:
            last = merged[-1]
            wider = max(last[1] - last[0] + 1, run[1] - run[0] + 1)
            close = run[0] - last[1] - 1 <= max(3, wider // 2)
            if close and max(last[1], run[1]) - last[0] + 1 <= widest:
                last[1] = max(last[1], run[1])
                last[2] += [s for s in run[2] if s not in last[2]]
                last[3] = min(last[3], run[3])
                continue
        merged.append(list(run))

    def hidden(r):  # small: hard to read in the main panel
        return (r[3] / tallest) * ((r[1] - r[0] + 1) / span)

    kept = sorted(sorted(merged, key=hidden)[:max_regions], key=lambda r: r[0])
    out = []
    for k, (lo, hi, species, _) in enumerate(kept):
        pad = max(3, (hi - lo + 1) // 4)
        order = tuple(s for s in names if s in species)
        out.append(SignalRegion(max(0, lo - pad), min(n - 1, hi + pad), order,
                                string.ascii_uppercase[k]))
    return out
