"""Figures of a plan: the expected sd of the sample's free quantities against one varied key.

One panel per quantity (the ranking quantity first, then the other free quantities of the
sample, at most four), one line per combination of the other varied keys; with many
combinations the lines are grey and the one through the best set-up is drawn in the model
colour.  A target sd is a dashed line.  Colours and settings: :mod:`inversion.report._style`.
"""

from __future__ import annotations

import math

import matplotlib.pyplot as plt
from matplotlib import ticker
import numpy as np

from ..report._style import MODEL_COLOUR, figure_style, species_colour

__all__ = ["plot_plan", "figure_quantities", "MAX_PANELS"]

#: at most this many quantities are drawn, one panel each
MAX_PANELS = 4
#: with more combinations of the other keys than this, lines are grey but the best one
_MAX_COLOURED = 6


def figure_quantities(table) -> list:
    """The quantities drawn: the ranking quantity, then the sample's other free ones."""
    names = [table.rank_by]
    names += [q.name for q in table.quantities
              if q.free and q.sample and q.name != table.rank_by]
    return names[:MAX_PANELS]


def _label(values: dict) -> str:
    return ", ".join(f"{k.split('.')[-1]}={v:g}" for k, v in values.items()) or "as given"


def plot_plan(table, key: str, *, quantities=None, fig=None):
    """Expected posterior sd against one varied key.

    Parameters
    ----------
    table : PlanTable
    key : str
        One of ``table.varied``.
    quantities : list of str, optional
        Default :func:`figure_quantities`.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if key not in table.varied:
        raise ValueError(f"{key} is not varied in this plan; varied: {', '.join(table.varied)}")
    names = figure_quantities(table) if quantities is None else list(quantities)
    others = [k for k in table.varied if k != key]
    lines: dict[tuple, list] = {}
    for row in table.rows:
        lines.setdefault(tuple(row.values[k] for k in others), []).append(row)
    best = tuple(table.best.values[k] for k in others)
    coloured = len(lines) <= _MAX_COLOURED
    unit = table.varied[key]
    with figure_style():
        if fig is None:
            fig = plt.figure(figsize=(4.2 * min(len(names), 2), 3.3 * math.ceil(len(names) / 2)))
        axes = fig.subplots(math.ceil(len(names) / 2), min(len(names), 2), squeeze=False)
        for ax in axes.flat[len(names):]:
            ax.set_visible(False)
        for ax, name in zip(axes.flat, names):
            q = table.quantity(name)
            spread = []
            for n, (combo, rows) in enumerate(sorted(lines.items())):
                rows = sorted(rows, key=lambda r: r.values[key])
                x = np.array([r.values[key] for r in rows], dtype=float)
                y = np.array([r.sd[name] for r in rows], dtype=float)
                ok = np.isfinite(y)
                spread += list(y[ok])
                label = _label(dict(zip(others, combo)))
                if coloured:
                    style = dict(color=species_colour(n), marker="o", ms=4, label=label)
                elif combo == best:
                    style = dict(color=MODEL_COLOUR, marker="o", ms=4, lw=2,
                                 label=f"through the best set-up ({label})", zorder=3)
                else:
                    style = dict(color="#bbbbbb", lw=0.8, marker=".", ms=3)
                ax.plot(x[ok], y[ok], **style)
            if name == table.rank_by and table.target_sd is not None:
                ax.axhline(table.target_sd, color="#444444", ls="--", lw=1,
                           label=f"target {table.target_sd:g}")
            positive = [v for v in spread if v > 0]
            if positive and max(positive) / min(positive) > 10:
                ax.set_yscale("log")
            values = np.array(sorted({r.values[key] for r in table.rows}), dtype=float)
            if values.size > 1 and values.min() > 0 and values.max() / values.min() >= 10:
                ax.set_xscale("log")
            if values.size <= 8:
                ax.set_xticks(values)
                ax.set_xticklabels([f"{v:g}" for v in values])
                ax.xaxis.set_minor_locator(ticker.NullLocator())
            ax.set_xlabel(f"{key} ({unit})" if unit and not key.endswith(unit) else key)
            ax.set_ylabel("expected sd" + (f" ({q.unit})" if q.unit else ""))
            ax.set_title(name, fontsize=10)
        handles, labels = axes.flat[0].get_legend_handles_labels()
        if handles:
            axes.flat[0].legend(handles, labels, loc="best")
        fig.suptitle("expected posterior sd (Gaussian approximation at the nominal sample)",
                     fontsize=10)
        fig.tight_layout()
    return fig
