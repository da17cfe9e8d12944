"""Where the automatic channel window stops at low energy.

Below the lowest signal of the films the spectrum holds only the substrate's deep tail: the
slowest part to compute (the slice grid has to follow the ions deep into the substrate) and
the least certain one (stopping at low energy, multiple and plural scattering).  The automatic
window (``Objective._window``) therefore stops :data:`TAIL_FWHM` detector widths below the
lowest of

* the low edge of every element of every layer above the substrate (ions scattered at the
  layer's bottom), and
* the surface edge of every element of the substrate (so its height, which carries the
  fluence and the stopping, stays in the fit).

An explicit ``fit.windows`` reaching lower (e.g. ``windows = [[0, 950]]``) fits the whole
substrate.  README.md, "Likelihood and channel window", gives the measured speed-up.
"""

from __future__ import annotations

import math

import forward

__all__ = ["TAIL_FWHM", "film_floor_keV", "film_floor_channel"]

#: Detector widths kept below the lowest film signal's low edge (and the substrate's edge):
#: the edge's own spread (about one FWHM each side, plus straggling at depth) fits inside.
TAIL_FWHM = 5.0


def film_floor_keV(run) -> float:
    """The lowest energy the automatic window keeps (keV; 0 when every signal reaches down to
    zero energy or none reaches the detector)."""
    edges = forward.signal_edges(run)
    lows = [e.bottom_keV for e in edges if not e.substrate and e.bottom_keV]
    lows += [e.top_keV for e in edges if e.substrate and e.top_keV > 0]
    if not lows:
        return 0.0
    return max(0.0, min(lows) - TAIL_FWHM * float(run.detector.fwhm_keV))


def film_floor_channel(run) -> int:
    """The channel of :func:`film_floor_keV` at the run file's calibration (0 or more)."""
    floor = film_floor_keV(run)
    if floor <= 0:
        return 0
    c = run.calibration.channel_of(floor)
    return max(0, int(math.floor(c))) if math.isfinite(c) else 0
