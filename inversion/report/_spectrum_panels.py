"""The spectrum figure's panels: the layout with its zoom panels, their limits and shading.

:func:`inversion.report._figures.plot_spectrum` draws the data into these panels: the whole
spectrum and its residuals on top, then one column per zoom panel (counts above residuals).
Each axes carries a gid (``spectrum:counts``, ``spectrum:residuals``, ``spectrum:zoom:A``,
``spectrum:zoom-residuals:A``, ...) so that a second result can be drawn into the same panels.
"""

from __future__ import annotations

import string

import matplotlib.pyplot as plt
import numpy as np

from . import _style
from ._regions import SignalRegion, signal_regions

__all__ = ["find_panels", "zoom_regions", "new_spectrum_figure", "counts_limits",
           "decorate_panel", "systematic_label"]


def _runs(mask) -> list:
    """(first, last) positions of each run of True in a boolean array."""
    where = np.flatnonzero(mask)
    if where.size == 0:
        return []
    return [(int(r[0]), int(r[-1])) for r in np.split(where, np.flatnonzero(np.diff(where) > 1)
                                                     + 1)]


def systematic_label(sign: int, rejected) -> str:
    """Legend text of the shading of a range where the residuals run one way (sign +1: the
    data lie above the model), saying when the check rejected the model."""
    side = "above" if sign > 0 else "below"
    verdict = " (model rejected)" if rejected else ""
    return f"data run {side} the model here{verdict}"


def find_panels(fig):
    """Panels of an earlier plot_spectrum figure: counts and residual axes, main panel first,
    then each zoom panel with its region letter."""
    by_gid = {ax.get_gid(): ax for ax in fig.axes if ax.get_gid()}
    if "spectrum:counts" not in by_gid or "spectrum:residuals" not in by_gid:
        raise ValueError("fig must come from an earlier plot_spectrum call")
    panels = [(by_gid["spectrum:counts"], by_gid["spectrum:residuals"], None)]
    for gid, ax in by_gid.items():
        if gid.startswith("spectrum:zoom:"):
            letter = gid.rsplit(":", 1)[1]
            panels.append((ax, by_gid[f"spectrum:zoom-residuals:{letter}"], letter))
    return panels


def zoom_regions(zoom, channel, parts, model, window, max_zoom) -> list:
    """The zoom panels' regions: found automatically, given as channel pairs, or none."""
    if zoom is None or zoom is False:
        return []
    if isinstance(zoom, str):
        if zoom != "auto":
            raise ValueError(f"zoom must be 'auto', False or a list of (first, last) channel "
                             f"pairs, not {zoom!r}")
        if not parts:
            return []
        return signal_regions(parts, total=model, window=window, max_regions=max_zoom)
    regions = []
    for k, pair in enumerate(zoom):
        first, last = (float(v) for v in pair)
        inside = np.flatnonzero((channel >= min(first, last)) & (channel <= max(first, last)))
        if inside.size < 2:
            raise ValueError(f"zoom range {pair!r} holds fewer than two channels")
        regions.append(SignalRegion(int(inside[0]), int(inside[-1]), (),
                                    string.ascii_uppercase[k]))
    return regions


def new_spectrum_figure(regions, figsize):
    """A new figure: the whole spectrum with its residuals on top, one column per zoom panel
    (counts above residuals) below."""
    n = len(regions)
    if figsize is None:
        figsize = (9.0, 8.8) if n else (9.0, 5.6)
    fig = plt.figure(figsize=figsize)
    if n:
        grid = fig.add_gridspec(5, n, height_ratios=[3.2, 1.0, 0.62, 2.3, 0.85], hspace=0.06,
                                wspace=0.28)
        ax = fig.add_subplot(grid[0, :])
        axr = fig.add_subplot(grid[1, :], sharex=ax)
    else:
        grid = fig.add_gridspec(2, 1, height_ratios=[3.2, 1.0], hspace=0.06)
        ax = fig.add_subplot(grid[0])
        axr = fig.add_subplot(grid[1], sharex=ax)
    ax.set_gid("spectrum:counts")
    axr.set_gid("spectrum:residuals")
    ax.tick_params(labelbottom=False)
    panels = [(ax, axr, None)]
    for k, region in enumerate(regions):
        az = fig.add_subplot(grid[3, k])
        azr = fig.add_subplot(grid[4, k], sharex=az)
        az.set_gid(f"spectrum:zoom:{region.letter}")
        azr.set_gid(f"spectrum:zoom-residuals:{region.letter}")
        az.tick_params(labelbottom=False)
        panels.append((az, azr, region.letter))
    return fig, panels


def counts_limits(axis, lo, hi, arrays, log_counts, grow):
    """y limits of a counts panel from the largest value shown between positions lo and hi."""
    shown = [np.asarray(a[lo:hi + 1], dtype=float) for a in arrays if a is not None]
    finite = [v[np.isfinite(v)] for v in shown]
    top = max([1.0] + [float(v.max()) for v in finite if v.size])
    if log_counts:
        axis.set_yscale("log")
        low, high = 0.5, top * 2.0
    else:
        low, high = 0.0, top * 1.12
    if grow:
        high = max(high, axis.get_ylim()[1])
    axis.set_ylim(low, high)


def decorate_panel(axis, axr, x, lo, hi, window, ranges, rejected, main, species, letter):
    """Labels, limits and shading of one new panel pair (main or zoom)."""
    label = main  # legend entries come from the main panel only
    if window is not None and not window.all():
        for k, (a, b) in enumerate(_runs(~window[lo:hi + 1])):
            for target in (axis, axr):
                target.axvspan(x[lo + a] - 0.5, x[lo + b] + 0.5, color=_style.NOT_FITTED_COLOUR,
                               zorder=0, linewidth=0,
                               label="not fitted" if (label and target is axis and k == 0)
                               else None)
    seen = set()
    for first, last, sign in ranges:
        sign = 1 if sign > 0 else -1
        a, b = max(float(first), x[lo]), min(float(last), x[hi])
        if a > b:
            continue
        for target in (axis, axr):
            target.axvspan(a - 0.5, b + 0.5, color=_style.SYSTEMATIC_COLOURS[sign], zorder=0.5,
                           linewidth=0,
                           label=systematic_label(sign, rejected)
                           if (label and target is axis and sign not in seen) else None)
        seen.add(sign)
    axr.axhspan(-2, 2, color="#eeeeee", zorder=0, linewidth=0)
    axr.axhline(0.0, color="#888888", linewidth=0.8)
    axr.set_xlim(x[lo] - 0.5, x[hi] + 0.5)
    axr.set_xlabel("channel")
    if main:
        axis.set_ylabel("counts per channel")
        axr.set_ylabel("deviance\nresidual")
        return
    axis.set_title(f"{letter}: {', '.join(species)}" if species else letter, fontsize=9.5,
                   loc="left")
    for spine in axis.spines.values():
        spine.set_edgecolor(_style.ZOOM_COLOUR)
    axis.tick_params(labelsize=8)
    axr.tick_params(labelsize=8)
