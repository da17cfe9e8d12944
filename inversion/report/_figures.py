"""Figures of a result's data: the spectrum fit and the depth profile.

Each function takes either a result (a path to an HDF5 result file, or the
:class:`~inversion.report._data.ReportData` read from one) or plain arrays given by keyword,
draws one figure and returns it.  Options are keyword-only; ``fig=`` (or ``ax=``) draws into
an existing figure so a second result can be overplotted; an unknown keyword raises TypeError,
as Python does for any function without ``**kwargs``.  Array keywords override what the result
holds.  Figures read result files only through :mod:`inversion.results`.

The functions leave matplotlib's backend alone (so they also draw inline in a notebook); the
``sondage report`` command selects the file-only Agg backend before drawing.

Credible bands are labelled with what they are: "68 % credible band" is the region between the
16 % and 84 % posterior quantiles at each point, "95 % credible band" between 2.5 % and 97.5 %.
A figure of a run that did not converge, or whose model the posterior predictive check
rejected, carries a stamp saying so (:func:`verdict_stamps`).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

import forward

from . import _style
from ._data import ReportData, read_report_data
from ._spectrum_panels import (counts_limits, decorate_panel, find_panels, new_spectrum_figure,
                               zoom_regions)
from ._style import figure_style

__all__ = ["plot_spectrum", "plot_profile", "deviance_residuals", "resolve_result",
           "verdict_stamps", "has_minor_species", "MINOR_FRACTION"]

#: A species whose median atom fraction never reaches this is "minor": the report draws the
#: profile one panel per species, so its band is not flattened against zero.
MINOR_FRACTION = 0.1


def resolve_result(result):
    """A ReportData from a path, a ReportData, or None."""
    if result is None or isinstance(result, ReportData):
        return result
    if isinstance(result, (str, Path)):
        return read_report_data(result)
    raise TypeError(f"result must be a path to a result file or a ReportData, not "
                    f"{type(result).__name__}")


def _pick(explicit, result, attr):
    if explicit is not None:
        return explicit
    if result is not None:
        return getattr(result, attr)
    return None


def verdict_stamps(data) -> list[str]:
    """The stamps a run's figures carry: not converged, model rejected (none when all is well).

    Parameters
    ----------
    data : ReportData or None
        What was read from the result file (None: plain arrays, no stamps).

    Returns
    -------
    list of str
        "NOT CONVERGED: ..." when the file says the sampler did not converge or does not say
        (as summary.md flags it), "MODEL REJECTED: ..." when ``/diagnostics`` says
        ``model_rejected``.
    """
    if data is None:
        return []
    out = []
    if not data.diagnostics:
        out.append("NOT CONVERGED: the file has no convergence diagnostics (see summary.md)")
    elif data.converged is None:
        out.append("NOT CONVERGED: the file does not say whether the sampler converged "
                   "(see summary.md)")
    elif data.converged is False:
        out.append("NOT CONVERGED: chain shorter than the convergence rule asks; intervals "
                   "unverified (see summary.md)")
    if data.model_rejected:
        p = "" if data.ppc_p_value is None else \
            f" (posterior predictive p = {data.ppc_p_value:.2g})"
        out.append(f"MODEL REJECTED{p}: the data differ from what the model predicts "
                   "(see summary.md)")
    return out


def _stamp(fig, data, label) -> None:
    prefix = f"{label}: " if label else ""
    _style.draw_stamps(fig, [prefix + text for text in verdict_stamps(data)])
def deviance_residuals(counts, expected) -> np.ndarray:
    """Signed Poisson deviance residuals of measured counts against expected counts.

    r = sign(n - mu) * sqrt(2 * (n ln(n / mu) - (n - mu))), with n ln(n / mu) = 0 at n = 0
    (McCullagh and Nelder, Generalized Linear Models, 2nd ed., 1989, section 2.4.3).  Unlike
    (n - mu) / sqrt(mu) they stay close to unit normal in channels with few counts.

    Parameters
    ----------
    counts : array_like
        Measured counts per channel (n >= 0).
    expected : array_like
        Expected counts per channel (mu); NaN is returned where mu <= 0.

    Returns
    -------
    numpy.ndarray
        One residual per channel.
    """
    from scipy.special import xlogy

    n = np.asarray(counts, dtype=float)
    mu = np.asarray(expected, dtype=float)
    out = np.full(np.broadcast(n, mu).shape, np.nan)
    ok = mu > 0
    n_ok, mu_ok = np.broadcast_to(n, out.shape)[ok], np.broadcast_to(mu, out.shape)[ok]
    dev = 2.0 * (xlogy(n_ok, n_ok) - xlogy(n_ok, mu_ok) - (n_ok - mu_ok))
    out[ok] = np.sign(n_ok - mu_ok) * np.sqrt(np.clip(dev, 0.0, None))
    return out


def _monotone_map(x, y):
    """Functions x -> y and y -> x through a table that increases in both, or None.

    Points where either column fails to increase are dropped; None when fewer than two remain.

    Between table points the map is linear interpolation; beyond the ends it continues the end
    segments' slopes, so a secondary axis stays defined when the plot is padded or zoomed out.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.size < 2 or not (np.all(np.isfinite(x)) and
                                                 np.all(np.isfinite(y))):
        return None
    # points that do not advance in both (a repeated depth, a plateau) are left out
    keep = np.ones(x.size, bool)
    keep[1:] = (x[1:] > np.maximum.accumulate(x)[:-1]) & (y[1:] > np.maximum.accumulate(y)[:-1])
    x, y = x[keep], y[keep]
    if x.size < 2:
        return None
    slope_lo = (y[1] - y[0]) / (x[1] - x[0])
    slope_hi = (y[-1] - y[-2]) / (x[-1] - x[-2])

    def forward(v):
        v = np.asarray(v, dtype=float)
        out = np.interp(v, x, y)
        out = np.where(v < x[0], y[0] + (v - x[0]) * slope_lo, out)
        return np.where(v > x[-1], y[-1] + (v - x[-1]) * slope_hi, out)

    def inverse(v):
        v = np.asarray(v, dtype=float)
        out = np.interp(v, y, x)
        out = np.where(v < y[0], x[0] + (v - y[0]) / slope_lo, out)
        return np.where(v > y[-1], x[-1] + (v - y[-1]) / slope_hi, out)

    return forward, inverse


def _channel_to_energy(channel, channel_energy_keV, calibration):
    """Functions channel -> keV and keV -> channel, or None when the file gives no energies."""
    if calibration and channel is not None:
        channel_energy_keV = forward.channel_energy_keV(
            np.asarray(channel, dtype=float), float(calibration.get("offset_keV", 0.0)),
            float(calibration["keV_per_channel"]), float(calibration.get("quadratic_keV", 0.0)))
    if channel_energy_keV is not None and channel is not None:
        return _monotone_map(channel, channel_energy_keV)
    return None




def plot_spectrum(result=None, *, channel=None, counts=None, predictive=None,
                  species_spectra=None, model_median=None, channel_energy_keV=None,
                  calibration=None, window=None, ppc_ranges=None, model_rejected=None,
                  log_counts=False, zoom="auto", max_zoom=3, show_species=True, stamp=True,
                  label=None, fig=None, figsize=None, title=None):
    """Measured spectrum, posterior predictive bands, each species' contribution and residuals,
    with zoom panels on the signal regions.

    Parameters
    ----------
    result : str, pathlib.Path or ReportData, optional
        A result file (or what :func:`~inversion.report._data.read_report_data` read from it).
    channel : array_like, optional
        Channel numbers (x axis).
    counts : array_like, optional
        Measured counts per channel.
    predictive : array_like, shape (5, channels), optional
        Posterior predictive 2.5, 16, 50, 84 and 97.5 % quantiles of the counts (Poisson noise
        included).
    species_spectra : dict of str to array_like, optional
        Median model counts from each species, drawn as thin lines; they also decide where
        the zoom panels go.
    model_median : array_like, optional
        Median over the draws of the expected (noise-free) counts; the residuals are taken
        against it.  Without it, against the predictive median.
    channel_energy_keV : array_like, optional
        Energy of each channel (keV), for the energy axis on top.
    calibration : dict, optional
        ``{"offset_keV": a, "keV_per_channel": b, "quadratic_keV": q}``: the energy of channel
        c is a + b c + q c**2 (q optional); used before ``channel_energy_keV``.
    window : array_like of bool, optional
        True for channels inside the fitted window; residuals are drawn there only and the
        channels outside are shaded as not fitted.
    ppc_ranges : array_like of int, shape (ranges, 3), optional
        Rows ``(first_channel, last_channel, sign)``: where the residuals run systematically
        (the result's ``/diagnostics/ppc_ranges``; sign +1: data above the model).  Shaded on
        every panel, with a legend entry.
    model_rejected : bool, optional
        The posterior predictive check's verdict (the result's), said in the shading's legend.
    log_counts : bool, optional
        Logarithmic counts axis, on the main and zoom panels.
    zoom : "auto", False or sequence of (first, last) channel pairs, optional
        Zoom panels below the whole spectrum, each with its residuals.  "auto" (default): one
        per signal region found from the species' median contributions
        (:func:`~inversion.report._regions.signal_regions`), at most ``max_zoom``; False: none;
        pairs: exactly those ranges.  Ignored when drawing into ``fig``, whose panels are kept.
    max_zoom : int, optional
        Most zoom panels chosen automatically.
    show_species : bool, optional
        Draw the per-species contributions.
    stamp : bool, optional
        Stamp the figure when the result says the run did not converge or its model was
        rejected (:func:`verdict_stamps`).
    label : str, optional
        Prefix for the legend entries and stamps (useful when overplotting two results).
    fig : matplotlib.figure.Figure, optional
        A figure made by an earlier call, to overplot (its panels are reused).
    figsize : tuple of float, optional
        Figure size in inches, for a new figure (default 9 x 5.6, or 9 x 8.8 with zoom panels).
    title : str, optional
        Title of the upper panel.

    Returns
    -------
    matplotlib.figure.Figure
        Upper panel: counts against channel (energy on the top axis when known), regions drawn
        enlarged outlined and lettered.  Below it: signed Poisson deviance residuals of the data
        against the median model (see :func:`deviance_residuals`).  Then one column per zoom
        panel ("A: Zn, Y"), counts above residuals.
    """
    data = resolve_result(result)
    channel = _pick(channel, data, "channel")
    counts = _pick(counts, data, "counts")
    predictive = _pick(predictive, data, "predictive")
    species_spectra = _pick(species_spectra, data, "species_spectra") or {}
    channel_energy_keV = _pick(channel_energy_keV, data, "channel_energy_keV")
    calibration = _pick(calibration, data, "calibration") or {}
    window = _pick(window, data, "window")
    model_median = _pick(model_median, data, "model_median")
    ppc_ranges = _pick(ppc_ranges, data, "ppc_ranges")
    model_rejected = _pick(model_rejected, data, "model_rejected")
    if counts is None or predictive is None:
        raise ValueError("plot_spectrum needs counts and predictive (give a result or both "
                         "arrays)")
    counts = np.asarray(counts, dtype=float)
    predictive = np.asarray(predictive, dtype=float)
    if predictive.shape != (5, counts.size):
        raise ValueError(f"predictive must have shape (5, {counts.size}), not "
                         f"{predictive.shape}")
    channel = np.arange(counts.size) if channel is None else np.asarray(channel, dtype=float)
    parts = {k: np.asarray(v, dtype=float) for k, v in species_spectra.items()}
    if window is not None:
        window = np.asarray(window, dtype=bool)
    ranges = np.zeros((0, 3), int) if ppc_ranges is None else \
        np.asarray(ppc_ranges, dtype=float).reshape(-1, 3).astype(int)
    prefix = f"{label}: " if label else ""
    reference = predictive[2] if model_median is None else np.asarray(model_median, float)
    residual = deviance_residuals(counts, reference)
    if window is not None:
        residual = np.where(window, residual, np.nan)

    with figure_style():
        new = fig is None
        if new:
            regions = zoom_regions(zoom, channel, parts, reference, window, max_zoom)
            fig, panels = new_spectrum_figure(regions, figsize)
            bounds = {r.letter: (r.first, r.last) for r in regions}
            names = {r.letter: r.species for r in regions}
        else:
            panels = find_panels(fig)
            bounds = {}
            for az, _, letter in panels[1:]:
                lo, hi = az.get_xlim()
                inside = np.flatnonzero((channel >= lo) & (channel <= hi))
                bounds[letter] = (int(inside[0]), int(inside[-1])) if inside.size else (0, 0)
        colour = _style.MODEL_COLOUR if new else _style.PALETTE["orange"]
        colours = _style.species_colours(parts)
        x = channel
        for axis, axr, letter in panels:
            main = letter is None
            lo, hi = (0, x.size - 1) if main else bounds[letter]
            part = slice(lo, hi + 1)
            tag = (lambda text: f"{prefix}{text}") if main else (lambda text: None)
            axis.fill_between(x[part], predictive[0, part], predictive[4, part], step="mid",
                              color=colour, alpha=_style.BAND_ALPHA_95, linewidth=0,
                              label=tag("95 % predictive band"))
            axis.fill_between(x[part], predictive[1, part], predictive[3, part], step="mid",
                              color=colour, alpha=_style.BAND_ALPHA_68, linewidth=0,
                              label=tag("68 % predictive band"))
            axis.plot(x[part], predictive[2, part], drawstyle="steps-mid", color=colour,
                      linewidth=1.3, label=tag("predictive median"))
            if show_species:
                for name, spec in parts.items():
                    axis.plot(x[part], spec[part], color=colours[name], linewidth=1.0,
                              linestyle="-" if new else "--",
                              label=tag(f"{name} (median model)"))
            if new:
                axis.plot(x[part], counts[part], linestyle="none", marker="o",
                          markersize=2.2 if main else 3.0, markeredgewidth=0,
                          color=_style.DATA_COLOUR, zorder=5,
                          label="measured counts" if main else None)
            counts_limits(axis, lo, hi, [counts, predictive[4]]
                           + (list(parts.values()) if show_species else []),
                           log_counts, grow=not new)
            axr.plot(x[part], residual[part], linestyle="none", marker="o",
                     markersize=2.0 if main else 2.6, markeredgewidth=0,
                     color=_style.DATA_COLOUR if new else colour)
            finite = residual[part][np.isfinite(residual[part])]
            lim = max(3.5, float(np.max(np.abs(finite))) * 1.1) if finite.size else 3.5
            if not new:
                lim = max(lim, axr.get_ylim()[1])
            axr.set_ylim(-lim, lim)
            if new:
                decorate_panel(axis, axr, x, lo, hi, window, ranges, model_rejected, main,
                                names.get(letter, ()), letter)
        ax, axr = panels[0][0], panels[0][1]
        if new:
            for letter, (lo, hi) in bounds.items():
                ax.axvspan(x[lo] - 0.5, x[hi] + 0.5, fill=False,
                           edgecolor=_style.ZOOM_COLOUR, linestyle=(0, (3, 2)), linewidth=0.9,
                           zorder=4, label="drawn enlarged below" if letter == "A" else None)
                ax.text(0.5 * (x[lo] + x[hi]), 0.985, letter, transform=ax.get_xaxis_transform(),
                        ha="center", va="top", fontsize=9, fontweight="bold",
                        color=_style.ZOOM_COLOUR)
            if title:
                ax.set_title(title, pad=28)
            axr.text(0.995, 0.04, "shaded: |residual| < 2", transform=axr.transAxes,
                     ha="right", va="bottom", fontsize=7.5, color="#666666")
            functions = _channel_to_energy(channel, channel_energy_keV, calibration)
            if functions is not None:
                top = ax.secondary_xaxis("top", functions=functions)
                top.set_xlabel("energy (keV)")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0)
        if stamp:
            _stamp(fig, data, label)
    return fig


def has_minor_species(bands, *, threshold=MINOR_FRACTION) -> bool:
    """True when some species' median atom fraction stays below ``threshold`` at every depth.

    Parameters
    ----------
    bands : dict of str to array_like, shape (5, points)
        Profile quantiles per species (the median is row 2).
    threshold : float, optional
        Atom fraction.
    """
    return any(float(np.nanmax(np.asarray(q, dtype=float)[2])) < threshold
               for q in bands.values())


def _profile_handles(names, colours, prefix, *, best_fit, nodes) -> list:
    grey = "#555555"
    handles = [Line2D([], [], color=colours[n], linewidth=1.6, label=f"{prefix}{n}")
               for n in names]
    handles += [
        Line2D([], [], color=grey, linewidth=1.6, label="posterior median"),
        Patch(facecolor=grey, alpha=_style.BAND_ALPHA_68 + 0.1, linewidth=0,
              label="68 % credible band"),
        Patch(facecolor=grey, alpha=_style.BAND_ALPHA_95, linewidth=0,
              label="95 % credible band"),
    ]
    if best_fit:
        handles.append(Line2D([], [], color=grey, linewidth=0.9, linestyle=(0, (4, 2)),
                              label="best fit (maximum posterior)"))
    if nodes:
        handles.append(Line2D([], [], color=_NODE_COLOUR, linewidth=0.8, linestyle=":",
                              label="nodes of the free-form profile"))
    return handles


_NODE_COLOUR = "#8a8a8a"


def _draw_profile(axis, depth, q, best, colour):
    """One species' bands, median and best fit, as lines through the given depth points."""
    axis.fill_between(depth, q[0], q[4], color=colour, alpha=_style.BAND_ALPHA_95, linewidth=0)
    axis.fill_between(depth, q[1], q[3], color=colour, alpha=_style.BAND_ALPHA_68, linewidth=0)
    axis.plot(depth, q[2], color=colour, linewidth=1.6)
    if best is not None:
        axis.plot(depth, best, color=colour, linewidth=0.9, linestyle=(0, (4, 2)))


def _fraction_limits(axis, arrays, log_fraction, whole):
    """Atom-fraction axis: 0 to 1 (whole), or fitted to one species' band."""
    if log_fraction:
        axis.set_yscale("log")
        positive = np.concatenate([a[a > 0] for a in arrays]) if arrays else np.array([])
        low = 1e-4 if whole or positive.size == 0 else \
            float(np.clip(0.5 * positive.min(), 1e-6, 1e-4))
        axis.set_ylim(low, 1.3)
        return
    if whole:
        axis.set_ylim(-0.02, 1.02)
        return
    top = min(1.02, max(1e-3, 1.1 * max(float(np.nanmax(a)) for a in arrays)))
    axis.set_ylim(-0.02 * top, top)


def plot_profile(result=None, *, depth_1e15=None, bands=None, best_fit=None, depth_nm=None,
                 node_depth_1e15=None, species=None, layout="auto", show_best_fit=True,
                 log_fraction=False, depth_max_1e15=None, stamp=True, label=None, ax=None,
                 fig=None, figsize=None, title=None):
    """Atom fraction of each species against depth, with 68 % and 95 % credible bands.

    The bands and lines go straight through the depth points the result gives (the profile
    model's own resolution: a fine grid for the layer model, the nodes' for the free-form one),
    never as steps.

    Parameters
    ----------
    result : str, pathlib.Path or ReportData, optional
        A result file, or what was read from one.
    depth_1e15 : array_like, optional
        Depth of each profile point, in 1e15 atoms/cm2.
    bands : dict of str to array_like of shape (5, points), optional
        Per species: the 2.5, 16, 50, 84 and 97.5 % posterior quantiles of its atom fraction.
    best_fit : dict of str to array_like, optional
        Per species: the best-fit (maximum a posteriori) atom fraction.
    depth_nm : array_like, optional
        Depth of each point in nm, where the layer densities allow; adds a top axis.
    node_depth_1e15 : array_like, optional
        Depths of the free-form profile's nodes (the result's ``/profile/node_depth``), marked
        by dotted vertical lines.
    species : sequence of str, optional
        Which species to draw (default all, in file order).
    layout : {"auto", "overlay", "species"}, optional
        "overlay": every species on one atom-fraction axis from 0 to 1; "species": one panel
        per species, each axis fitted to that species' band, so a minor species is as legible
        as a major one; "auto" (default): "species" when a species' median stays below
        :data:`MINOR_FRACTION` everywhere, else "overlay" (always "overlay" into ``ax``).
    show_best_fit : bool, optional
        Draw the best-fit profile as a thin dashed line.
    log_fraction : bool, optional
        Logarithmic atom-fraction axis, to see minor species and tails.
    depth_max_1e15 : float, optional
        Right end of the depth axis (1e15 atoms/cm2).  Default: 30 % beyond the deepest point
        where any band still changes, so a thin film is not lost against a deep substrate.
    stamp : bool, optional
        Stamp the figure when the result says the run did not converge or its model was
        rejected (:func:`verdict_stamps`).
    label : str, optional
        Prefix for the legend entries and stamps (when overplotting).
    ax : matplotlib.axes.Axes, optional
        Axes to draw an overlay into (e.g. from an earlier call, to overplot another result).
    fig : matplotlib.figure.Figure, optional
        A figure from an earlier call with ``layout="species"``, to overplot into its panels.
    figsize : tuple of float, optional
        Figure size in inches, for a new figure.
    title : str, optional
        Title (of the top panel).

    Returns
    -------
    matplotlib.figure.Figure
    """
    data = resolve_result(result)
    depth_1e15 = _pick(depth_1e15, data, "depth_1e15")
    bands = _pick(bands, data, "profile_bands")
    best_fit = _pick(best_fit, data, "profile_map") or {}
    depth_nm = _pick(depth_nm, data, "depth_nm")
    nodes = _pick(node_depth_1e15, data, "node_depth_1e15")
    nodes = [] if nodes is None else [float(d) for d in np.asarray(nodes, float).ravel()]
    if depth_1e15 is None or not bands:
        raise ValueError("plot_profile needs depth_1e15 and bands (give a result or both)")
    depth = np.asarray(depth_1e15, dtype=float)
    names = list(bands) if species is None else list(species)
    unknown = [s for s in names if s not in bands]
    if unknown:
        raise ValueError(f"no profile for species {unknown}; the result has {list(bands)}")
    q = {}
    for name in names:
        q[name] = np.asarray(bands[name], dtype=float)
        if q[name].shape != (5, depth.size):
            raise ValueError(f"profile of {name} must have shape (5, {depth.size}), not "
                             f"{q[name].shape}")
    if layout not in ("auto", "overlay", "species"):
        raise ValueError(f"layout must be 'auto', 'overlay' or 'species', not {layout!r}")
    if layout == "species" and ax is not None:
        raise ValueError("layout='species' draws one panel per species; give fig=, not ax=")
    if layout == "auto":
        layout = "species" if (ax is None and (fig is not None or has_minor_species(q))) \
            else "overlay"
    prefix = f"{label}: " if label else ""
    best = {n: np.asarray(best_fit[n], dtype=float) for n in names
            if show_best_fit and n in best_fit}

    with figure_style():
        new = ax is None and fig is None
        if layout == "overlay":
            if ax is None:
                if fig is not None:
                    raise ValueError("fig= takes a per-species figure; give ax= to overplot "
                                     "an overlay")
                fig, ax = plt.subplots(figsize=figsize or (8.4, 4.6))
                ax.set_gid("profile:overlay")
            fig = ax.figure
            panels = {n: ax for n in names}
        elif fig is None:
            n = len(names)
            fig, axes = plt.subplots(n, 1, sharex=True, squeeze=False,
                                     figsize=figsize or (8.4, max(3.2, 1.35 * n + 1.1)),
                                     gridspec_kw={"hspace": 0.12})
            panels = {}
            for name, axis in zip(names, axes[:, 0]):
                axis.set_gid(f"profile:{name}")
                panels[name] = axis
        else:
            by_gid = {a.get_gid(): a for a in fig.axes if a.get_gid()}
            missing = [n for n in names if f"profile:{n}" not in by_gid]
            if missing:
                raise ValueError(f"fig has no panel for species {missing}; give a figure from "
                                 "an earlier plot_profile call with the same species")
            panels = {n: by_gid[f"profile:{n}"] for n in names}
        colours = _style.species_colours(bands)
        for name in names:
            _draw_profile(panels[name], depth, q[name], best.get(name), colours[name])
        if new:
            for axis in dict.fromkeys(panels.values()):  # each panel once
                for d in nodes:
                    axis.axvline(d, color=_NODE_COLOUR, linewidth=0.6, linestyle=":",
                                 zorder=0.8)
        first = panels[names[0]]
        if new:
            right = depth_max_1e15 if depth_max_1e15 is not None else \
                _changing_depth(depth, [q[n] for n in names])
            first.set_xlim(depth[0] if depth[0] <= 0 else 0.0, right)
            bottom = list(panels.values())[-1]
            bottom.set_xlabel(r"depth (10$^{15}$ atoms/cm$^2$)")
            if layout == "overlay":
                first.set_ylabel("atom fraction")
                _fraction_limits(first, [], log_fraction, whole=True)
            else:
                for name, axis in panels.items():
                    shown = [q[name][:, depth <= right]] + \
                        ([best[name][depth <= right]] if name in best else [])
                    _fraction_limits(axis, [np.ravel(a) for a in shown], log_fraction,
                                     whole=False)
                    axis.set_ylabel(name, color=colours[name], fontweight="bold")
                    axis.tick_params(labelsize=8)
                fig.supylabel("atom fraction", fontsize=10)
            functions = _monotone_map(depth, depth_nm) if depth_nm is not None else None
            if functions is not None:
                top = first.secondary_xaxis("top", functions=functions)
                top.set_xlabel("depth (nm, from the layer densities)")
            if title:
                first.set_title(title)
        handles = _profile_handles(names, colours, prefix, best_fit=bool(best),
                                   nodes=bool(nodes))
        first.legend(handles=handles, loc="upper left" if layout == "species" else "center left",
                     bbox_to_anchor=(1.01, 1.0 if layout == "species" else 0.5),
                     borderaxespad=0)
        if stamp:
            _stamp(fig, data, label)
    return fig


def _changing_depth(depth, bands, tolerance=1e-3):
    """Depth 30 % beyond the deepest point where any band differs from its value at the bottom."""
    last = 0
    for q in bands:
        q = np.asarray(q, dtype=float)
        moving = np.flatnonzero(np.any(np.abs(q - q[:, -1:]) > tolerance, axis=0))
        if moving.size:
            last = max(last, int(moving[-1]) + 1)
    last = min(last, depth.size - 1)
    return float(min(depth[-1], depth[last] * 1.3)) if depth[last] > 0 else float(depth[-1])
