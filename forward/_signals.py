"""Where each signal of a run lies at the detector, and how a measured spectrum lines up with
the run's expected one: the physics behind the pre-flight checks (:mod:`forward._preflight`),
the inversion's automatic channel window and the series' coverage check.

* :func:`signal_edges`: for every element of every layer, the detected energy of ions
  scattered at the layer's top and at its bottom (surface-energy free: the in and out paths
  are integrated through the layers above).
* :func:`species_edges`: the highest edge of each species (one column of the model's fraction
  table), and the same at another beam energy or geometry (what would separate two signals).
* :func:`align_leading_signal`: the shift, in channels, that best lines the run's expected
  leading signal up with the counts (a 1-D Poisson-deviance scan).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ._elements import element
from ._kinematics import kinematic_factor
from ._path import energy_after_path
from ._stopping import StoppingModel

__all__ = ["SignalEdge", "SpeciesEdge", "Alignment", "signal_edges", "species_edges",
           "align_leading_signal", "find_leading_edge", "stopping_model_of", "exit_angle_deg",
           "MAJOR_FRACTION"]

#: Elements below this atom fraction in a layer are left out of the leading-edge comparison.
MAJOR_FRACTION = 0.05


@dataclass(frozen=True)
class SignalEdge:
    """The energies at the detector of one element's signal from one layer.

    Attributes
    ----------
    layer : int
        Index of the layer (0 = top).
    layer_name, symbol : str
    fraction : float
        The element's atom fraction in the layer.
    substrate : bool
    top_keV : float
        Detected energy of ions scattered at the layer's top by the element (mean mass).
    bottom_keV : float or None
        The same at the layer's bottom (None for a substrate); 0 when no ion gets out.
    """

    layer: int
    layer_name: str
    symbol: str
    fraction: float
    substrate: bool
    top_keV: float
    bottom_keV: float | None


@dataclass(frozen=True)
class SpeciesEdge:
    """The highest edge of one species: where its signal starts at the detector."""

    label: str
    symbol: str
    layer: int
    mass_u: float
    edge_keV: float


@dataclass(frozen=True)
class Alignment:
    """How the counts line up with the run's expected leading signal.

    Attributes
    ----------
    shift_channels : float
        Shift of the expected spectrum that fits the counts best (positive: the counts sit
        higher than the run file expects), refined between channels.
    deviance_gain : float
        How much better (in Poisson deviance, -2 ln L) the best shift fits than the best
        shift within ``tolerance_channels`` of zero: 0 when the best shift is within it.
    tolerance_channels : float
    gain_over_zero : float
        How much better the best shift fits than no shift at all (inf when the counts do not
        cover the window unshifted).
    covered : bool
        True when the counts cover the expected leading signal without a shift.
    deviance_per_channel : float
        The best shift's deviance over the channels compared (about 1 for a good match).
    scale : float
        Counts over expected counts (median over the channels where the run expects most),
        the fixed scale of the comparison.
    """

    shift_channels: float
    deviance_gain: float
    tolerance_channels: float
    gain_over_zero: float
    covered: bool
    deviance_per_channel: float
    scale: float

    @property
    def agrees(self) -> bool:
        """The best shift lies within the tolerance, or the counts cannot tell (a gain in
        deviance below 25, about five standard deviations)."""
        return abs(self.shift_channels) <= self.tolerance_channels or self.deviance_gain < 25.0


def stopping_model_of(run_) -> StoppingModel:
    """The run's stopping (tables and scale factors of ``[physics]``)."""
    phys = run_.physics
    return StoppingModel(run_.beam.species, tables=phys.stopping_tables, scale=phys.stopping_scale)


def exit_angle_deg(run_, scattering_deg: float, tilt_deg: float | None = None) -> tuple:
    """(incidence, exit) angles for another scattering angle or tilt, in the run's layout
    (angles given directly are treated as an IBM layout with tilt = incidence); None when the
    exit angle would reach 85 degrees."""
    g = run_.geometry
    tilt = (g.tilt_deg if g.tilt_deg is not None else g.incidence_deg) if tilt_deg is None \
        else tilt_deg
    th1 = abs(tilt)
    if g.layout == "Cornell":
        th2 = math.degrees(math.acos(max(-1.0, min(1.0, -math.cos(math.radians(scattering_deg))
                                                     * math.cos(math.radians(tilt))))))
    else:
        th2 = abs(180.0 - scattering_deg + tilt)
    if th1 >= 85.0 or th2 >= 85.0:
        return None
    return th1, th2


def _kinematic(m1: float, m2: float, theta_deg: float):
    try:
        return kinematic_factor(m1, m2, theta_deg)
    except ValueError:  # too light to scatter the ion to this angle
        return None


class _Paths:
    """Energies along the in and out paths of one set-up (beam energy, angles)."""

    def __init__(self, run_, stopping, e0_keV=None, incidence_deg=None, exit_deg=None):
        self.layers = run_.layers
        self.stopping = stopping
        self.th1 = run_.geometry.incidence_deg if incidence_deg is None else incidence_deg
        self.th2 = run_.geometry.exit_deg if exit_deg is None else exit_deg
        energies = [float(run_.beam.energy_keV if e0_keV is None else e0_keV)]
        for layer in self.layers:
            e = energies[-1]
            if e > 0 and layer.areal_density_1e15:
                e = float(energy_after_path(self._fn(layer), e, layer.areal_density_1e15,
                                            self.th1))
            energies.append(e)
        #: beam energy at the top of each layer (and below the last finite one)
        self.entry = energies

    def _fn(self, layer):
        return lambda x, f=layer.fractions: self.stopping.mixture(f, x)

    def out(self, index: int, energy_keV: float) -> float:
        """Energy after the outward path from the top of layer ``index`` to the surface."""
        e = energy_keV
        for layer in reversed(self.layers[:index]):
            if e <= 0:
                return 0.0
            e = float(energy_after_path(self._fn(layer), e, layer.areal_density_1e15,
                                        self.th2))
        return max(e, 0.0)


def signal_edges(run_) -> list:
    """Top and bottom edges at the detector of every element of every layer.

    Parameters
    ----------
    run_ : forward.Run

    Returns
    -------
    list of SignalEdge
        In layer order; elements too light to scatter the beam to the detector are left out.
    """
    m1, theta = run_.beam.ion.mass_u, run_.geometry.scattering_deg
    paths = _Paths(run_, stopping_model_of(run_))
    out = []
    for i, layer in enumerate(run_.layers):
        for sym, frac in layer.fractions.items():
            mass = sum(iso.mass_u * f for iso, f in layer.isotope_fractions(sym))
            k = _kinematic(m1, mass, theta)
            if k is None:
                continue
            top = paths.out(i, k * paths.entry[i]) if paths.entry[i] > 0 else 0.0
            bottom = None
            if not layer.substrate:
                e_in = paths.entry[i + 1]
                bottom = paths.out(i + 1, k * e_in) if e_in > 0 else 0.0
            out.append(SignalEdge(i, layer.name, sym, float(frac), bool(layer.substrate),
                                  float(top), None if bottom is None else float(bottom)))
    return out


def _species(run_):
    """(label, symbol, first layer, mass) of each species, as the model's columns name them."""
    from ._model import _species_of

    seen = {}
    for i, layer in enumerate(run_.layers):
        for sym, info in _species_of(layer).items():
            if info.label in seen:
                continue
            if info.label == sym:
                mass = element(sym).mass_u
            else:  # an enriched element: its main isotope
                mass = max(info.isotopes, key=lambda p: p[2])[1]
            seen[info.label] = (info.label, sym, i, float(mass))
    return list(seen.values())


def species_edges(run_, *, e0_keV=None, scattering_deg=None, incidence_deg=None,
                  exit_deg=None) -> list:
    """The highest edge of each species at the detector, for the run's set-up or another.

    Parameters
    ----------
    run_ : forward.Run
    e0_keV, scattering_deg, incidence_deg, exit_deg : float, optional
        Another beam energy or geometry (default: the run's).

    Returns
    -------
    list of SpeciesEdge
        Species too light to scatter the beam to the detector are left out.
    """
    theta = run_.geometry.scattering_deg if scattering_deg is None else scattering_deg
    paths = _Paths(run_, stopping_model_of(run_), e0_keV, incidence_deg, exit_deg)
    out = []
    for label, sym, i, mass in _species(run_):
        k = _kinematic(run_.beam.ion.mass_u, mass, theta)
        if k is None or paths.entry[i] <= 0:
            continue
        out.append(SpeciesEdge(label, sym, i, mass, paths.out(i, k * paths.entry[i])))
    return out


def align_leading_signal(expected, counts, top_channel: float, fwhm_channels: float, *,
                         tolerance_channels: float, below_fwhm: float = 1.5,
                         above_fwhm: float = 3.0) -> Alignment | None:
    """Line the run's expected leading signal up with the counts.

    The expected counts in a window from ``below_fwhm`` detector widths below the expected
    highest edge to ``above_fwhm`` widths above it are compared, at every whole-channel shift
    that keeps the window inside the measured channels, with the counts there: the Poisson
    deviance ``2 sum [k ln(k / mu) - (k - mu)]`` with ``mu`` the expected counts times one
    fixed scale (the median ratio of counts to expected counts where the run expects most)
    plus a small floor.  The window is short below the edge so that layer thicknesses, which
    the run file may only guess, do not move the best shift; the empty region above the edge
    is what a weak leading signal (a thin buried marker) is recognised by, since no other
    edge of the spectrum has nothing above it.

    Parameters
    ----------
    expected : numpy.ndarray
        Expected counts per channel from channel 0, covering at least the window.
    counts : numpy.ndarray
        Measured counts per channel from channel 0; NaN where the spectrum holds no channel.
    top_channel : float
        Expected position of the highest edge on the calibration's channel scale.
    fwhm_channels : float
        Detector FWHM in channels.
    tolerance_channels : float
        Shifts within this are agreement.

    Returns
    -------
    Alignment or None
        None when no shift keeps the window inside the measured channels.
    """
    expected = np.asarray(expected, dtype=float)
    counts = np.asarray(counts, dtype=float)
    f = max(float(fwhm_channels), 1.0)
    lo = max(int(math.floor(top_channel - below_fwhm * f)), 0)
    hi = int(math.ceil(top_channel + above_fwhm * f))
    if hi >= expected.size or hi <= lo:
        return None
    measured = np.flatnonzero(np.isfinite(counts))
    if measured.size == 0:
        return None
    width = hi - lo + 1
    first, last = int(measured[0]), int(measured[-1])
    s_min, s_max = first - lo, last - hi
    if s_min > s_max:
        return None
    size = max(counts.size, expected.size) + abs(s_min) + abs(s_max) + 1
    padded = np.full(size, np.nan)
    padded[:counts.size] = counts
    windows = np.lib.stride_tricks.sliding_window_view(padded, width)
    busy_mu = expected >= max(10.0, 0.05 * float(np.max(expected)))

    def scale_at(shift):
        """Counts over expected counts, median where the run expects most, the counts read
        ``shift`` channels higher (robust to a few edges out of place); the totals when that
        leaves nothing."""
        idx = np.arange(expected.size) + shift
        inside = (idx >= 0) & (idx < counts.size)
        k = np.full(expected.size, np.nan)
        k[inside] = counts[idx[inside]]
        busy = busy_mu & np.isfinite(k)
        if busy.any():
            value = float(np.median(k[busy] / expected[busy]))
        else:
            ok = np.isfinite(k)
            total = float(np.sum(expected[ok]))
            value = float(np.sum(k[ok])) / total if total > 0 else 1.0
        return value if math.isfinite(value) and value > 0 else 1.0

    def scan(scale):
        mu = scale * expected[lo:hi + 1]
        mu = mu + max(0.5, 1e-3 * float(np.max(mu)))

        def deviance(shifts):
            out = np.empty(len(shifts))
            for j0 in range(0, len(shifts), 4096):
                k = windows[lo + np.asarray(shifts[j0:j0 + 4096], dtype=int)]
                ok = np.isfinite(k)
                kk = np.where(ok, k, 0.0)
                term = (np.where(kk > 0, kk * np.log(np.where(kk > 0, kk, 1.0) / mu), 0.0)
                        - (kk - mu))
                out[j0:j0 + 4096] = 2.0 * np.sum(np.where(ok, term, 0.0), axis=1)
            return out

        stride = max(1, int(f // 4))
        coarse = np.arange(s_min, s_max + 1, stride)
        best = int(coarse[int(np.argmin(deviance(coarse)))])
        fine = np.arange(max(s_min, best - stride), min(s_max, best + stride) + 1)
        fine_dev = deviance(fine)
        return int(fine[int(np.argmin(fine_dev))]), float(np.min(fine_dev)), deviance

    scale = scale_at(0)
    best, d_best, deviance = scan(scale)
    if abs(best) > tolerance_channels:  # the scale again, with the counts lined up
        best, d_best, deviance = scan(scale_at(best))
    near = np.arange(max(s_min, -int(math.floor(tolerance_channels))),
                     min(s_max, int(math.floor(tolerance_channels))) + 1)
    gain = float(np.min(deviance(near)) - d_best) if near.size else math.inf
    over_zero = float(deviance([0])[0] - d_best) if s_min <= 0 <= s_max else math.inf
    # refine between channels with a parabola through the three deviances around the best
    shift = float(best)
    if s_min < best < s_max:
        dm, d0, dp = deviance([best - 1, best, best + 1])
        curvature = dm - 2.0 * d0 + dp
        if curvature > 0:
            shift = best + 0.5 * (dm - dp) / curvature
    return Alignment(shift_channels=shift, deviance_gain=max(gain, 0.0),
                     tolerance_channels=float(tolerance_channels),
                     gain_over_zero=max(over_zero, 0.0), covered=bool(s_min <= 0 <= s_max),
                     deviance_per_channel=d_best / width, scale=scale)


def find_leading_edge(counts: np.ndarray, channel: np.ndarray, edge_width_channels: float,
                      threshold_fraction: float = 0.1) -> float | None:
    """Position of the highest-energy edge seen in a spectrum, in channels.

    The counts are smoothed with a running mean about one edge width wide (odd, so the edge
    does not move); the edge region is the highest channel whose smoothed counts reach
    ``threshold_fraction`` of the largest smoothed value; the local plateau is the largest
    smoothed value within ``3 * width + 10`` channels below it; the edge is where the smoothed
    counts cross half of that plateau, interpolated linearly.  A leading signal weaker than
    ``threshold_fraction`` of the highest level is not seen (the pre-flight checks compare the
    whole expected leading signal with the counts instead, :func:`align_leading_signal`).

    Parameters
    ----------
    counts, channel : numpy arrays
        The spectrum (channels strictly increasing).
    edge_width_channels : float
        Width of a sharp edge after the detector, in channels (the FWHM in channels).
    threshold_fraction : float
        Fraction of the highest smoothed level that marks the edge region.

    Returns
    -------
    float or None
        The half-height crossing on the calibration's channel scale (channel ``c`` spans
        ``[c, c + 1)`` and its counts are placed at ``c + 0.5``), comparable with
        ``Calibration.channel_of``; None for a spectrum without counts.
    """
    counts = np.asarray(counts, float)
    channel = np.asarray(channel, float)
    if counts.size == 0 or not np.any(counts > 0):
        return None
    w = max(1, min(int(round(edge_width_channels)), counts.size))
    w = w if w % 2 else max(1, w - 1)
    smooth = np.convolve(counts, np.ones(w) / w, mode="same")
    region = np.flatnonzero(smooth >= threshold_fraction * np.max(smooth))
    top = int(region[-1])
    low = max(0, top - (3 * w + 10))
    half = 0.5 * np.max(smooth[low:top + 1])
    i = int(low + np.flatnonzero(smooth[low:top + 1] >= half)[-1])
    position = channel[i]
    if i + 1 < smooth.size and smooth[i] != smooth[i + 1]:
        frac = min(1.0, max(0.0, (smooth[i] - half) / (smooth[i] - smooth[i + 1])))
        position = channel[i] + frac * (channel[i + 1] - channel[i])
    return float(position) + 0.5
