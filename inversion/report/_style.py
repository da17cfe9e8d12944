"""The visual style of sondage's figures.

One place for colours, line widths and band shading, so every figure the program writes looks
alike: a colour-blind-safe palette, labelled axes with units, a light grid and white background.

The palette is the eight-colour set of M. Okabe and K. Ito, "Color Universal Design" (2002),
as published in B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011); it stays
distinguishable under the common forms of colour-vision deficiency.

Ordered series (anneal temperatures, times) take :func:`ordered_colours`, a ramp of our own from
dark indigo to ochre whose lightness rises steadily and whose lightest colour still stands out
from the white background: its contrast ratio against white (W3C, Web Content Accessibility
Guidelines 2.1, 2018, "contrast ratio") is at least 3, the guidelines' minimum for graphical
objects, so no line of a series fades into the page as a pale yellow end does.

A run whose sampler did not converge, or whose model the posterior predictive check rejected,
carries a stamp on every figure (:func:`draw_stamps`).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

import matplotlib
import matplotlib.pyplot as plt
import numpy as np
from matplotlib.colors import LinearSegmentedColormap, to_hex, to_rgb
from matplotlib.transforms import offset_copy

__all__ = [
    "PALETTE",
    "DATA_COLOUR",
    "MODEL_COLOUR",
    "BAND_ALPHA_68",
    "BAND_ALPHA_95",
    "RC_PARAMS",
    "NOT_FITTED_COLOUR",
    "SYSTEMATIC_COLOURS",
    "ZOOM_COLOUR",
    "STAMP_COLOUR",
    "ORDERED_RAMP",
    "MIN_CONTRAST_ON_WHITE",
    "species_colour",
    "species_colours",
    "ordered_colours",
    "contrast_on_white",
    "draw_stamps",
    "stamps_of",
    "figure_style",
]

#: Okabe-Ito colours (hex), in the order used for species.  Black is kept for measured data.
PALETTE: dict[str, str] = {
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "bluish_green": "#009E73",
    "reddish_purple": "#CC79A7",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "yellow": "#F0E442",
    "black": "#000000",
}

_SPECIES_ORDER = ("vermillion", "bluish_green", "reddish_purple", "orange", "sky_blue",
                  "blue", "yellow")

#: Measured counts are drawn in near-black, the model in blue.
DATA_COLOUR = "#222222"
MODEL_COLOUR = PALETTE["blue"]

#: Opacity of credible bands: the 95 % band is lighter than the 68 % band it contains.
BAND_ALPHA_95 = 0.18
BAND_ALPHA_68 = 0.38

#: Channels outside the fitted window.
NOT_FITTED_COLOUR = "#f2f2f2"
#: Channel ranges where the residuals run one way (the posterior predictive check's ranges):
#: warm where the data lie above the model (+1), cool where below (-1).
SYSTEMATIC_COLOURS = {1: "#f6cfb6", -1: "#d5cbe8"}
#: Outline of a region drawn enlarged in a zoom panel, and the panel's frame.
ZOOM_COLOUR = "#6b6b6b"
#: The stamps of a run that did not converge or whose model was rejected.
STAMP_COLOUR = PALETTE["vermillion"]

#: Anchors of the ramp for ordered series, dark to light (our own choice; see the module text).
ORDERED_RAMP = ("#1B2A5E", "#5B3A8E", "#A8417A", "#CF5F3A", "#C9781F")
#: Smallest contrast ratio against white allowed for a line colour of an ordered series
#: (W3C WCAG 2.1, success criterion 1.4.11, "non-text contrast").
MIN_CONTRAST_ON_WHITE = 3.0

#: Matplotlib settings applied while a figure is drawn.
RC_PARAMS: dict[str, object] = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#444444",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.spines.top": True,
    "axes.spines.right": True,
    "axes.labelsize": 10,
    "axes.titlesize": 11,
    "axes.titleweight": "regular",
    "axes.prop_cycle": matplotlib.cycler(color=[PALETTE[k] for k in _SPECIES_ORDER]),
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "grid.linestyle": "-",
    "xtick.labelsize": 9,
    "ytick.labelsize": 9,
    "xtick.direction": "out",
    "ytick.direction": "out",
    "legend.fontsize": 8.5,
    "legend.frameon": True,
    "legend.framealpha": 0.9,
    "legend.edgecolor": "#cccccc",
    "lines.linewidth": 1.4,
    "font.family": "DejaVu Sans",
    "svg.fonttype": "none",  # text stays text in SVG files
    "savefig.dpi": 150,
    "savefig.bbox": "tight",
}


def species_colour(index: int) -> str:
    """Colour of the ``index``-th species (0-based), cycling through the palette.

    Parameters
    ----------
    index : int
        Position of the species in the result file's species list.

    Returns
    -------
    str
        A hex colour from the Okabe-Ito set (never the data or model colour first).
    """
    return PALETTE[_SPECIES_ORDER[int(index) % len(_SPECIES_ORDER)]]


def species_colours(names) -> dict[str, str]:
    """One colour per species name, assigned in sorted name order.

    Sorting makes the assignment depend only on which species a result has, so the same element
    has the same colour in the spectrum and in the depth profile.

    Parameters
    ----------
    names : iterable of str
        Species names (e.g. ``["Zn", "O", "Si"]``).

    Returns
    -------
    dict of str to str
        Name -> hex colour.
    """
    return {name: species_colour(i) for i, name in enumerate(sorted(names))}


def ordered_colours(n: int) -> list[str]:
    """``n`` colours for an ordered series (temperatures, times), dark to light.

    Evenly spaced along :data:`ORDERED_RAMP` (one colour: its middle).  Every colour has a
    contrast ratio of at least :data:`MIN_CONTRAST_ON_WHITE` against the white background.

    Parameters
    ----------
    n : int
        Number of members of the series (>= 0).

    Returns
    -------
    list of str
        Hex colours, the first for the lowest member.
    """
    ramp = LinearSegmentedColormap.from_list("sondage_ordered", ORDERED_RAMP)
    positions = [0.5] if n == 1 else np.linspace(0.0, 1.0, max(int(n), 0))
    return [to_hex(ramp(float(t))) for t in positions]


def _relative_luminance(colour) -> float:
    """Relative luminance of an sRGB colour (W3C WCAG 2.1 definition)."""
    rgb = np.asarray(to_rgb(colour), dtype=float)
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def contrast_on_white(colour) -> float:
    """Contrast ratio of a colour against white, from 1 (white) to 21 (black).

    (L_white + 0.05) / (L + 0.05) with L the relative luminance, as the W3C Web Content
    Accessibility Guidelines 2.1 define it.

    Parameters
    ----------
    colour : str or tuple
        Any colour matplotlib understands.

    Returns
    -------
    float
    """
    return 1.05 / (_relative_luminance(colour) + 0.05)


#: gid of a stamp's text, so a second call stacks its stamps above the first one's
_STAMP_GID = "sondage-stamp"


def stamps_of(fig) -> list:
    """The stamp texts already on a figure (as matplotlib Text objects), lowest first."""
    return [t for t in fig.texts if t.get_gid() == _STAMP_GID]


def draw_stamps(fig, texts) -> list:
    """Write warning stamps above everything else on a figure, one line each.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        A finished figure (its content decides where "above" is).
    texts : sequence of str
        The stamps, e.g. "NOT CONVERGED: ...".

    Returns
    -------
    list of matplotlib.text.Text
        The stamps drawn.
    """
    texts = [t for t in texts if t]
    if not texts:
        return []
    earlier = stamps_of(fig)
    if earlier:  # stack above the stamps of an earlier call, on the same base line
        base = earlier[0].get_position()[1]
    else:
        box = fig.get_tightbbox()  # inches; includes titles and secondary axes
        base = box.y1 / fig.get_size_inches()[1]
    drawn = []
    for k, text in enumerate(texts):
        level = len(earlier) + len(texts) - 1 - k  # the first stamp on top
        offset = offset_copy(fig.transFigure, fig=fig, x=0.0, y=6.0 + 18.0 * level,
                             units="points")
        drawn.append(fig.text(0.0, base, text, transform=offset, ha="left", va="bottom",
                              color=STAMP_COLOUR, fontsize=9.5, fontweight="bold",
                              gid=_STAMP_GID, zorder=10,
                              bbox={"facecolor": "white", "edgecolor": STAMP_COLOUR,
                                    "boxstyle": "square,pad=0.3", "linewidth": 1.2}))
    return drawn


@contextlib.contextmanager
def figure_style() -> Iterator[None]:
    """Context manager that draws with sondage's style and restores the caller's settings."""
    with plt.rc_context(RC_PARAMS):
        yield
