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
from ._style import figure_style

__all__ = ["plot_spectrum", "plot_profile", "deviance_residuals", "resolve_result"]


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

    Between table points the map is linear interpolation; beyond the ends it continues the end
    segments' slopes, so a secondary axis stays defined when the plot is padded or zoomed out.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.size < 2 or not (np.all(np.isfinite(x)) and
                                                 np.all(np.isfinite(y))):
        return None
    if not (np.all(np.diff(x) > 0) and np.all(np.diff(y) > 0)):
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
                  calibration=None, window=None, log_counts=False, show_species=True, label=None, fig=None,
                  figsize=(9.0, 5.6), title=None):
    """Measured spectrum, posterior predictive bands, each species' contribution and residuals.

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
        Median model counts from each species, drawn as thin lines.
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
    log_counts : bool, optional
        Logarithmic counts axis.
    show_species : bool, optional
        Draw the per-species contributions.
    label : str, optional
        Prefix for the legend entries (useful when overplotting two results).
    fig : matplotlib.figure.Figure, optional
        A figure made by an earlier call, to overplot (its first two axes are reused).
    figsize : tuple of float, optional
        Figure size in inches, for a new figure.
    title : str, optional
        Title of the upper panel.

    Returns
    -------
    matplotlib.figure.Figure
        Upper panel: counts against channel (energy on the top axis when known).  Lower panel:
        signed Poisson deviance residuals of the data against the median model (see
        :func:`deviance_residuals`).
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
    if counts is None or predictive is None:
        raise ValueError("plot_spectrum needs counts and predictive (give a result or both "
                         "arrays)")
    counts = np.asarray(counts, dtype=float)
    predictive = np.asarray(predictive, dtype=float)
    if predictive.shape != (5, counts.size):
        raise ValueError(f"predictive must have shape (5, {counts.size}), not "
                         f"{predictive.shape}")
    channel = np.arange(counts.size) if channel is None else np.asarray(channel, dtype=float)
    prefix = f"{label}: " if label else ""

    with figure_style():
        if fig is None:
            fig, (ax, axr) = plt.subplots(2, 1, figsize=figsize, sharex=True,
                                          gridspec_kw={"height_ratios": [3.2, 1.0],
                                                       "hspace": 0.06})
            new = True
        else:
            if len(fig.axes) < 2:
                raise ValueError("fig must come from an earlier plot_spectrum call (two panels)")
            ax, axr = fig.axes[0], fig.axes[1]
            new = False
        colour = _style.MODEL_COLOUR if new else _style.PALETTE["orange"]
        ax.fill_between(channel, predictive[0], predictive[4], step="mid", color=colour,
                        alpha=_style.BAND_ALPHA_95, linewidth=0,
                        label=f"{prefix}95 % predictive band")
        ax.fill_between(channel, predictive[1], predictive[3], step="mid", color=colour,
                        alpha=_style.BAND_ALPHA_68, linewidth=0,
                        label=f"{prefix}68 % predictive band")
        ax.plot(channel, predictive[2], drawstyle="steps-mid", color=colour, linewidth=1.3,
                label=f"{prefix}predictive median")
        if show_species:
            colours = _style.species_colours(species_spectra)
            for name, spec in species_spectra.items():
                ax.plot(channel, np.asarray(spec, dtype=float), color=colours[name],
                        linewidth=1.0, linestyle="--" if not new else "-",
                        label=f"{prefix}{name} (median model)")
        if new:
            ax.plot(channel, counts, linestyle="none", marker="o", markersize=2.2,
                    markeredgewidth=0, color=_style.DATA_COLOUR, label="measured counts",
                    zorder=5)
        ax.set_ylabel("counts per channel")
        if log_counts:
            ax.set_yscale("log")
            ax.set_ylim(bottom=0.5)
        else:
            ax.set_ylim(bottom=0)
        if title and new:
            ax.set_title(title, pad=28)

        reference = predictive[2] if model_median is None else model_median
        residual = deviance_residuals(counts, reference)
        if window is not None:
            window = np.asarray(window, dtype=bool)
            residual = np.where(window, residual, np.nan)
            if new and not window.all():
                outside = np.flatnonzero(~window)
                runs = np.split(outside, np.flatnonzero(np.diff(outside) > 1) + 1)
                for k, run in enumerate(runs):
                    for axis in (ax, axr):
                        axis.axvspan(channel[run[0]] - 0.5, channel[run[-1]] + 0.5,
                                     color="#f2f2f2", zorder=0, linewidth=0,
                                     label="not fitted" if (axis is ax and k == 0) else None)
        axr.axhspan(-2, 2, color="#eeeeee", zorder=0, linewidth=0)
        axr.axhline(0.0, color="#888888", linewidth=0.8)
        axr.plot(channel, residual, linestyle="none", marker="o", markersize=2.0,
                 markeredgewidth=0, color=_style.DATA_COLOUR if new else colour)
        finite = residual[np.isfinite(residual)]
        lim = max(3.5, float(np.max(np.abs(finite))) * 1.1) if finite.size else 3.5
        axr.set_ylim(-lim, lim)
        axr.set_ylabel("deviance\nresidual")
        axr.set_xlabel("channel")
        axr.set_xlim(channel[0] - 0.5, channel[-1] + 0.5)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0)
        if new:
            axr.text(0.995, 0.04, "shaded: |residual| < 2", transform=axr.transAxes,
                     ha="right", va="bottom", fontsize=7.5, color="#666666")
            functions = _channel_to_energy(channel, channel_energy_keV, calibration)
            if functions is not None:
                top = ax.secondary_xaxis("top", functions=functions)
                top.set_xlabel("energy (keV)")
    return fig


def plot_profile(result=None, *, depth_1e15=None, bands=None, best_fit=None, depth_nm=None,
                 species=None, show_best_fit=True, log_fraction=False, depth_max_1e15=None,
                 label=None, ax=None, figsize=(8.4, 4.6), title=None):
    """Atom fraction of each species against depth, with 68 % and 95 % credible bands.

    Parameters
    ----------
    result : str, pathlib.Path or ReportData, optional
        A result file, or what was read from one.
    depth_1e15 : array_like, optional
        Depth of each slice centre, in 1e15 atoms/cm2.
    bands : dict of str to array_like of shape (5, slices), optional
        Per species: the 2.5, 16, 50, 84 and 97.5 % posterior quantiles of its atom fraction.
    best_fit : dict of str to array_like, optional
        Per species: the best-fit (maximum a posteriori) atom fraction.
    depth_nm : array_like, optional
        Depth of each slice centre in nm, where the layer densities allow; adds a top axis.
    species : sequence of str, optional
        Which species to draw (default all, in file order).
    show_best_fit : bool, optional
        Draw the best-fit profile as a thin dashed line.
    log_fraction : bool, optional
        Logarithmic atom-fraction axis (from 1e-4), to see minor species and tails.
    depth_max_1e15 : float, optional
        Right end of the depth axis (1e15 atoms/cm2).  Default: 30 % beyond the deepest slice
        where any band still changes, so a thin film is not lost against a deep substrate.
    label : str, optional
        Prefix for the legend entries (when overplotting).
    ax : matplotlib.axes.Axes, optional
        Axes to draw into (e.g. from an earlier call, to overplot another result).
    figsize : tuple of float, optional
        Figure size in inches, for a new figure.
    title : str, optional
        Axes title.

    Returns
    -------
    matplotlib.figure.Figure
    """
    data = resolve_result(result)
    depth_1e15 = _pick(depth_1e15, data, "depth_1e15")
    bands = _pick(bands, data, "profile_bands")
    best_fit = _pick(best_fit, data, "profile_map") or {}
    depth_nm = _pick(depth_nm, data, "depth_nm")
    if depth_1e15 is None or not bands:
        raise ValueError("plot_profile needs depth_1e15 and bands (give a result or both)")
    depth = np.asarray(depth_1e15, dtype=float)
    names = list(bands) if species is None else list(species)
    unknown = [s for s in names if s not in bands]
    if unknown:
        raise ValueError(f"no profile for species {unknown}; the result has {list(bands)}")
    prefix = f"{label}: " if label else ""

    with figure_style():
        new = ax is None
        if new:
            fig, ax = plt.subplots(figsize=figsize)
        else:
            fig = ax.figure
        colours = _style.species_colours(bands)
        handles = []
        for name in names:
            q = np.asarray(bands[name], dtype=float)
            if q.shape != (5, depth.size):
                raise ValueError(f"profile of {name} must have shape (5, {depth.size}), not "
                                 f"{q.shape}")
            colour = colours[name]
            ax.fill_between(depth, q[0], q[4], color=colour, alpha=_style.BAND_ALPHA_95,
                            linewidth=0)
            ax.fill_between(depth, q[1], q[3], color=colour, alpha=_style.BAND_ALPHA_68,
                            linewidth=0)
            ax.plot(depth, q[2], color=colour, linewidth=1.6)
            handles.append(Line2D([], [], color=colour, linewidth=1.6, label=f"{prefix}{name}"))
            if show_best_fit and name in best_fit:
                ax.plot(depth, np.asarray(best_fit[name], dtype=float), color=colour,
                        linewidth=0.9, linestyle=(0, (4, 2)))
        grey = "#555555"
        handles += [
            Line2D([], [], color=grey, linewidth=1.6, label="posterior median"),
            Patch(facecolor=grey, alpha=_style.BAND_ALPHA_68 + 0.1, linewidth=0,
                  label="68 % credible band"),
            Patch(facecolor=grey, alpha=_style.BAND_ALPHA_95, linewidth=0,
                  label="95 % credible band"),
        ]
        if show_best_fit and any(n in best_fit for n in names):
            handles.append(Line2D([], [], color=grey, linewidth=0.9, linestyle=(0, (4, 2)),
                                  label="best fit (maximum posterior)"))
        if new:
            ax.set_xlabel(r"depth (10$^{15}$ atoms/cm$^2$)")
            ax.set_ylabel("atom fraction")
            ax.set_xlim(depth[0] if depth[0] <= 0 else 0.0,
                        depth_max_1e15 if depth_max_1e15 is not None else
                        _changing_depth(depth, [bands[n] for n in names]))
            if log_fraction:
                ax.set_yscale("log")
                ax.set_ylim(1e-4, 1.3)
            else:
                ax.set_ylim(-0.02, 1.02)
            functions = _monotone_map(depth, depth_nm) if depth_nm is not None else None
            if functions is not None:
                top = ax.secondary_xaxis("top", functions=functions)
                top.set_xlabel("depth (nm, from the layer densities)")
            if title:
                ax.set_title(title)
        ax.legend(handles=handles, loc="center left", bbox_to_anchor=(1.01, 0.5),
                  borderaxespad=0)
    return fig


def _changing_depth(depth, bands, tolerance=1e-3):
    """Depth 30 % beyond the deepest slice where any band differs from its value at the bottom."""
    last = 0
    for q in bands:
        q = np.asarray(q, dtype=float)
        moving = np.flatnonzero(np.any(np.abs(q - q[:, -1:]) > tolerance, axis=0))
        if moving.size:
            last = max(last, int(moving[-1]) + 1)
    last = min(last, depth.size - 1)
    return float(min(depth[-1], depth[last] * 1.3)) if depth[last] > 0 else float(depth[-1])
