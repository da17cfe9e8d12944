"""The visual style of sondage's figures.

One place for colours, line widths and band shading, so every figure the program writes looks
alike: a colour-blind-safe palette, labelled axes with units, a light grid and white background.

The palette is the eight-colour set of M. Okabe and K. Ito, "Color Universal Design" (2002),
as published in B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011); it stays
distinguishable under the common forms of colour-vision deficiency.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

import matplotlib
import matplotlib.pyplot as plt

__all__ = [
    "PALETTE",
    "DATA_COLOUR",
    "MODEL_COLOUR",
    "BAND_ALPHA_68",
    "BAND_ALPHA_95",
    "RC_PARAMS",
    "species_colour",
    "species_colours",
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


@contextlib.contextmanager
def figure_style() -> Iterator[None]:
    """Context manager that draws with sondage's style and restores the caller's settings."""
    with plt.rc_context(RC_PARAMS):
        yield
