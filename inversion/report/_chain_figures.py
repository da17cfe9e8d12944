"""Figures of a result's chain: the corner plot and the convergence figure.

Same conventions as :mod:`inversion.report._figures`: a result (path or
:class:`~inversion.report._data.ReportData`) or plain arrays in, keyword-only options, the
figure returned.
"""

from __future__ import annotations

import math

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.ticker import LogFormatter

from . import _style
from ..fit._roles import NUISANCE_NAMES, NUISANCES, Role
from ._data import unit_from_name
from ._figures import _pick, _stamp, resolve_result
from ._style import figure_style

__all__ = ["plot_corner", "plot_convergence", "autocorr_growth", "corner_groups", "CORNER_GROUPS"]


def _axis_label(name: str, unit: str) -> str:
    """A quantity's axis label: the name, plus its unit unless the name's suffix says it."""
    return name if (not unit or unit_from_name(name)) else f"{name}\n[{unit}]"


#: the groups ``plot_corner(include=...)`` can add to the sample's quantities
CORNER_GROUPS = ("nuisances", "shares")

#: nuisance parameters named with a prefix (one per element or background term)
_NUISANCE_PREFIXES = tuple(k.name.split("{")[0] for k in NUISANCES if k.role.per_element) + \
    (f"{Role.BACKGROUND.key}.",)


def corner_groups(include) -> tuple[str, ...]:
    """The groups of ``include`` (a sequence, or text like "nuisances,shares"), checked.

    Raises
    ------
    ValueError
        For a name outside :data:`CORNER_GROUPS`.
    """
    if include is None:
        return ()
    items = include.split(",") if isinstance(include, str) else list(include)
    names = [str(i).strip() for i in items if str(i).strip()]
    unknown = [n for n in names if n not in CORNER_GROUPS]
    if unknown:
        raise ValueError(f"unknown corner group {unknown[0]!r}; allowed: "
                         f"{', '.join(CORNER_GROUPS)}")
    return tuple(g for g in CORNER_GROUPS if g in names)


def _corner_group(q) -> str:
    """Which corner group a quantity belongs to: "sample", "nuisances", "shares", "fractions"
    or "" (never drawn, e.g. the totals per element)."""
    name = q.name
    if q.kind == "parameter":
        if name in NUISANCE_NAMES or name.startswith(_NUISANCE_PREFIXES):
            return "nuisances"
        if f".{Role.SHARE.key}." in name:
            return "shares"
        return "sample"
    if ".fraction." in name:
        return "fractions"
    if any(w in name.lower() for w in ("thickness", "width", "mixing")):
        return "sample"
    return ""


def _corner_selection(data, max_quantities, include=()):
    """Columns and labels for the corner plot: the sample's parameters, then its thicknesses
    and widths, then the groups of ``include``.

    At most ``max_quantities`` of the sample's quantities, up to half of them derived; the
    groups asked for come whole.  "shares" draws each free composition as atom fractions
    (the derived ``<layer>.fraction.<species>``), or as the sampled stick-breaking shares when
    the file has no fractions.  A derived quantity identical, draw for draw, to one already
    chosen (a layer's areal density stored again under /derived) is left out.
    """
    columns, labels, groups = [], [], []
    n = data.samples.shape[0]
    usable = [q for q in data.quantities if q.draws is not None and q.draws.size == n]
    # atom fractions stand for the stick-breaking shares that make them
    fractions = any(_corner_group(q) == "fractions" for q in usable)
    for q in usable:
        group = _corner_group(q)
        if fractions and group in ("shares", "fractions"):
            group = "shares" if group == "fractions" else ""
        if not group:
            continue
        if not np.all(np.isfinite(q.draws)):
            continue
        if any(np.array_equal(q.draws, c) for c in columns):
            continue
        columns.append(q.draws)
        labels.append(_axis_label(q.name, q.unit))
        groups.append("derived" if group == "sample" and q.kind == "derived" else group)

    def of(group):
        return [i for i, g in enumerate(groups) if g == group]

    # keep room for the derived thicknesses and widths when there are many parameters
    n_derived = min(len(of("derived")), max_quantities // 2)
    keep = of("sample")[:max_quantities - n_derived]
    keep += of("derived")[:max_quantities - len(keep)]
    chosen = corner_groups(include)
    for group in ("shares", "nuisances"):  # the sample, its compositions, then the rest
        if group in chosen:
            keep += of(group)
    return [columns[i] for i in keep], [labels[i] for i in keep]


def plot_corner(result=None, *, samples=None, labels=None, include=(), max_quantities=8,
                bins=25, colour=None, stamp=True, fig=None, figsize=None):
    """Corner plot (one- and two-dimensional marginals) of the sample's quantities, and of the
    nuisances and compositions when asked.

    Drawn with the corner package (Foreman-Mackey, J. Open Source Softw. 1, 24, 2016).  Contours
    enclose 68 % and 95 % of the two-dimensional posterior mass; dashed lines mark the 16, 50 and
    84 % quantiles of each one-dimensional marginal.

    Parameters
    ----------
    result : str, pathlib.Path or ReportData, optional
        A result file: the sample's sampled parameters (areal densities, mixing widths, nodes)
        and the derived thicknesses and interface widths.
    samples : array_like, shape (draws, quantities), optional
        Draws to plot instead of the result's.
    labels : sequence of str, optional
        Axis labels, one per column of ``samples``.
    include : sequence of str or str, optional
        Groups drawn after the sample's quantities, from a result: "nuisances" (fluence,
        calibration, resolution, stopping scales, background) and "shares" (each free
        composition's atom fractions, or its stick-breaking shares when the file has no
        fractions); also as text, "nuisances,shares".  Default: none.
    max_quantities : int, optional
        At most this many of the sample's quantities (up to half of them the derived
        thicknesses and widths, the rest the first parameters in the file's order); the groups
        of ``include`` come whole on top.  With ``samples``, at most this many columns.
    bins : int, optional
        Histogram bins per axis.
    colour : str, optional
        Colour of the histograms and contours.
    stamp : bool, optional
        Stamp the figure when the result says the run did not converge or its model was
        rejected.
    fig : matplotlib.figure.Figure, optional
        A figure from an earlier call, to overplot.
    figsize : tuple of float, optional
        Figure size in inches (default 1.6 inch per quantity).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import corner

    data = resolve_result(result)
    groups = corner_groups(include)
    if samples is None:
        if data is None:
            raise ValueError("plot_corner needs a result or samples")
        columns, auto_labels = _corner_selection(data, max_quantities, groups)
        samples = np.column_stack(columns)
        labels = auto_labels if labels is None else labels
        samples = np.asarray(samples, dtype=float)
    else:
        samples = np.asarray(samples, dtype=float)
        if samples.ndim == 1:
            samples = samples[:, None]
        samples = samples[:, :max_quantities]
    if labels is not None:
        labels = list(labels)[:samples.shape[1]]
        if len(labels) != samples.shape[1]:
            raise ValueError(f"{len(labels)} labels for {samples.shape[1]} quantities")
    # a quantity that never moved (a fixed value stored as a draw) cannot be histogrammed
    spread = np.all(np.isfinite(samples), axis=0) & (np.ptp(samples, axis=0) > 0)
    if not spread.all():
        samples = samples[:, spread]
        labels = [lab for lab, keep in zip(labels, spread) if keep] if labels else None
    k = samples.shape[1]
    with figure_style():
        if fig is None:
            size = figsize or (max(3.2, 1.65 * k), max(3.2, 1.65 * k))
            fig = plt.figure(figsize=size)
        fig = corner.corner(
            samples, labels=labels, bins=bins, fig=fig, color=colour or _style.MODEL_COLOUR,
            quantiles=(0.16, 0.5, 0.84), levels=(0.68, 0.95), show_titles=True,
            titles=[lab.split("\n")[0] + "\n" for lab in labels] if labels else None,
            title_fmt=".3g", title_kwargs={"fontsize": 7.5}, label_kwargs={"fontsize": 8},
            plot_datapoints=False, fill_contours=True, smooth=1.0,
            max_n_ticks=3, labelpad=0.08,
        )
        for axis in fig.axes:
            axis.grid(False)
            axis.tick_params(labelsize=7)
        fig.text(0.98, 0.98, "contours: 68 % and 95 % credible regions\n"
                             "dashed: 16, 50, 84 % quantiles\n"
                             "titles: median and 68 % interval",
                 ha="right", va="top", fontsize=8, color="#444444")
        if stamp:
            _stamp(fig, data, None)
    return fig


def autocorr_growth(chain, *, n_points=12, min_steps=20):
    """Integrated autocorrelation time estimated on growing prefixes of a chain.

    Uses ``emcee.autocorr.integrated_time`` (Foreman-Mackey et al., PASP 125, 306, 2013, and the
    emcee documentation) on the first N steps for N spaced geometrically up to the chain length.

    Parameters
    ----------
    chain : array_like, shape (steps, walkers, parameters)
        The stored chain.
    n_points : int, optional
        Number of prefix lengths.
    min_steps : int, optional
        Shortest prefix.

    Returns
    -------
    steps : numpy.ndarray of int
        Prefix lengths N.
    tau : numpy.ndarray, shape (len(steps), parameters)
        Estimated autocorrelation time (steps) of each parameter on each prefix.
    """
    from emcee.autocorr import integrated_time

    chain = np.asarray(chain, dtype=float)
    total = chain.shape[0]
    start = min(max(min_steps, 4), total)
    steps = np.unique(np.geomspace(start, total, n_points).astype(int))
    # a walker that has not moved yet in a short prefix has no autocorrelation function
    # (0/0): that prefix's tau is NaN, and the figure leaves the point out
    with np.errstate(invalid="ignore", divide="ignore"):
        tau = np.array([integrated_time(chain[:n], tol=0) for n in steps])
    return steps, tau


def plot_convergence(result=None, *, chain=None, names=None, discard=None, max_traces=4,
                     n_points=12, stamp=True, fig=None, figsize=(8.5, 5.2)):
    """Walker traces of the slowest parameters and the autocorrelation time against length.

    The right panel shows the estimate of the integrated autocorrelation time on the first N
    steps, with the line tau = N / 50 (or the file's own multiple): the estimate is trustworthy, and the chain long enough,
    once the curves flatten and lie below that line (common practice, after the emcee
    documentation's convergence guidance).

    Parameters
    ----------
    result : str, pathlib.Path or ReportData, optional
        A result file with an ``/mcmc`` chain.
    chain : array_like, shape (steps, walkers, parameters), optional
        Chain to draw instead of the result's.
    names : sequence of str, optional
        Parameter names (default: from the result, or p0, p1, ...).
    discard : int, optional
        Burn-in steps left out of the posterior draws (default: the result's), shaded on the
        traces.
    max_traces : int, optional
        How many parameters get a trace panel (those with the longest autocorrelation times).
    n_points : int, optional
        Number of prefix lengths for the autocorrelation curve.
    stamp : bool, optional
        Stamp the figure when the result says the run did not converge or its model was
        rejected.
    fig : matplotlib.figure.Figure, optional
        An empty figure to draw into.
    figsize : tuple of float, optional
        Figure size in inches, for a new figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    data = resolve_result(result)
    chain = _pick(chain, data, "chain")
    if chain is None:
        raise ValueError("plot_convergence needs a chain (give a result with /mcmc or chain=)")
    chain = np.asarray(chain, dtype=float)
    if chain.ndim != 3:
        raise ValueError(f"chain must have shape (steps, walkers, parameters), not {chain.shape}")
    n_steps, n_walkers, n_par = chain.shape
    if names is None:
        names = data.parameter_names if data is not None and data.parameter_names else \
            [f"p{i}" for i in range(n_par)]
    names = list(names)
    if discard is None and data is not None and "discard" in data.diagnostics:
        discard = int(np.asarray(data.diagnostics["discard"]).item())
    steps, tau = autocorr_growth(chain, n_points=n_points)
    order = np.argsort(-tau[-1])[:max(1, min(max_traces, n_par))]

    with figure_style():
        if fig is None:
            fig = plt.figure(figsize=figsize)
        grid = fig.add_gridspec(len(order), 2, width_ratios=[1.35, 1.0], wspace=0.32,
                                hspace=0.12)
        first = None
        for row, j in enumerate(order):
            axis = fig.add_subplot(grid[row, 0], sharex=first)
            first = first or axis
            axis.plot(np.arange(n_steps), chain[:, :, j], color=_style.MODEL_COLOUR,
                      alpha=max(0.08, min(0.5, 6.0 / n_walkers)), linewidth=0.6,
                      rasterized=True)
            if discard:
                axis.axvspan(0, discard, color="#e8e8e8", linewidth=0, zorder=0)
            axis.text(0.01, 0.96, names[j], transform=axis.transAxes, ha="left", va="top",
                      fontsize=8, bbox={"facecolor": "white", "edgecolor": "none",
                                        "alpha": 0.8, "pad": 1.5})
            axis.tick_params(labelsize=7.5)
            if row < len(order) - 1:
                axis.tick_params(labelbottom=False)
            else:
                axis.set_xlabel("step")
            if row == 0:
                title = f"walker traces ({n_walkers} walkers; slowest parameters)"
                if discard:
                    title += "\ngrey: burn-in, left out of the posterior draws"
                axis.set_title(title, fontsize=9.5)
        axt = fig.add_subplot(grid[:, 1])
        for k, j in enumerate(order):
            axt.plot(steps, tau[:, j], marker="o", markersize=3,
                     color=_style.species_colour(k), label=f"{names[j]}")
        if n_par > len(order):
            axt.plot(steps, tau.mean(axis=1), color="#777777", linestyle=":",
                     label="mean of all parameters")
        multiple = 50.0
        if data is not None and "tau_multiple" in data.diagnostics:
            multiple = float(np.asarray(data.diagnostics["tau_multiple"]).item())
        line = np.array([steps[0], steps[-1]], dtype=float)
        axt.plot(line, line / multiple, color="black", linestyle="--", linewidth=1.0,
                 label=f"N / {multiple:g} (long enough below this line)")
        axt.set_xscale("log")
        axt.set_yscale("log")
        for axis in (axt.xaxis, axt.yaxis):  # plain numbers (20, 300), not 2x10^1
            axis.set_major_formatter(LogFormatter(labelOnlyBase=False))
            axis.set_minor_formatter(LogFormatter(labelOnlyBase=False,
                                                  minor_thresholds=(1.5, 0.6)))
        axt.set_xlabel("chain length N (steps)")
        axt.set_ylabel("autocorrelation time estimate (steps)")
        axt.set_title("autocorrelation time on the first N steps", fontsize=9.5)
        axt.legend(loc="lower right", fontsize=7.5)
        if not math.isfinite(float(np.max(tau))):
            axt.text(0.5, 0.5, "estimate undefined", transform=axt.transAxes, ha="center")
        if stamp:
            _stamp(fig, data, None)
    return fig
