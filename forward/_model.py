"""The spectrum model: a run file's experiment turned into plain arrays for the numba kernel.

:class:`ForwardModel` is built once per run.  It decides the species (element symbols, or
``"O[18]"`` for a layer whose isotopes the run file overrides), the fixed slice grid, and the
per-element and per-isotope tables on one uniform energy grid; then
:meth:`ForwardModel.expected_counts` evaluates the kernel of :mod:`forward._kernel` on a
``(n_slices, n_species)`` table of atom fractions (on the nominal grid, or on slice widths the
caller gives) with the calibration, resolution, fluence, stopping scale and slope and
straggling scale of a :class:`Nuisance`.  Kept whole: species, tables, slice grid and the
kernel's argument list are the set-up of one object and change together.

Tables
------
All tables share one energy grid, from ``TABLE_FLOOR_KEV`` (10 keV) to 1.1 times the beam
energy in steps of ``table_step_keV`` (default 2 keV):

* per element: stopping ``S`` (keV per 1e15 atoms/cm2; electronic + nuclear, from
  :class:`forward.StoppingModel`), ``dS/dE`` and ``d2S/dE2`` (central differences of the
  stopping function, not of the table), the straggling rate ``W`` of
  :func:`forward._straggling.straggling_rate` with the run's law (``[physics] straggling``)
  and ``dW/dE``; carbon uses the run's ``[physics] carbon`` coefficients;
* per isotope: ``E^3 sigma(E)`` (keV^3 mb/sr), with ``sigma`` from
  :func:`forward.rutherford_cross_section` times the run's ratio-to-Rutherford table if any.
  With Rutherford's ``1/E^2`` taken out, the screening correction ``1 - c/E + ...`` makes
  ``E^3 sigma`` nearly linear in ``E``, so linear interpolation on a 2 keV grid is accurate to
  about 1e-5 relative above 60 keV and 2e-7 above 200 keV (measured for Co and Sb; tabulating
  ``E^2 sigma`` would give three times and thirty times more).

The kernel interpolates ``S`` with cubic Hermite polynomials (values and ``dS/dE``), the rest
linearly.  ``tests/test_model.py`` bounds these interpolation errors against the direct formulas.

Slice grid
----------
From the surface down, each slice is as thick as lets the ion lose at most ``slice_fraction``
(default 0.25, from ``[physics]``) of the detector FWHM in it, in and out, for the nominal
sample: ``width = slice_fraction * FWHM / max_iso [eps]`` with the stopping cross-section factor
``[eps] = K S(E)/cos th1 + S(K E)/cos th2`` of the most demanding isotope at that depth,
capped by ``max_slice_1e15``; slices are cut at the run file's layer boundaries.  A substrate's
grid runs down to where a particle scattered by the heaviest isotope would be detected below the
lowest characteristic (well below the lowest channel; the substrate signal trails down to low
energy, common practice), plus 20 % in depth so that smaller stopping scales are still covered;
a sample without substrate ends at its last layer.  Either is extended to ``depth_limit_1e15``
if that is deeper (rows below a sample without substrate are vacuum).  ``SliceGrid.layer``
records the layer of each slice.

Grids that follow the sample
----------------------------
A fixed grid makes counts ripple when a layer boundary moves through a slice.
:meth:`ForwardModel.sample_grid` instead stretches each finite layer's nominal slices by
``t_k / t0_k`` and shifts the substrate (or vacuum) slices below, so layer boundaries stay slice
edges and edges move continuously with the areal densities; the substrate is extended when
thinner films or lower stopping need it deeper (see that method).  Pass its widths with a
fraction table of the same rows to :meth:`ForwardModel.expected_counts` (``widths_1e15=``).
A layer thicker than nominal gets proportionally wider slices (``slice_fraction`` holds for the
run file's sample); build the model from a run file near the thickest sample of interest, or
lower ``slice_fraction``, if that matters.

Pile-up
-------
Off unless ``[physics.pileup]`` enables it.  First order: each event, with probability
``p = rate * tau``, arrives together with another and the two are recorded as one pulse at the
summed energy.  The result is ``(1 - p) S + (p N / 2) (s * s)`` with ``S`` the single-event
spectrum, ``N`` its total and ``s * s`` the self-convolution of the normalised spectrum (the
summed energy uses the linear part of the calibration).  Per-species rows hold the single
events only, ``(1 - p) S_species``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, fields

import numpy as np

from ._conversions import channel_energy_keV
from ._cross_section import load_ratio_table, rutherford_cross_section
from ._elements import element
from ._errors import InputError
from ._kernel import (BROADENING_HALF_WIDTH, ROWS_PER_ISOTOPE, ROWS_PER_SPECIES, ROWS_TOTAL,
                      KernelInputs, broadening_table, spectrum_kernel)
from ._kinematics import kinematic_factor
from ._stopping import STOPPING_SLOPE_REFERENCE_KEV, StoppingModel
from ._straggling import (STRAGGLING_EXPONENTS, STRAGGLING_LAWS, bohr_variance,
                          lindhard_scharff_chi, lindhard_scharff_ratio, straggling_rate)

__all__ = ["ForwardModel", "Nuisance", "SliceGrid", "SpeciesInfo", "TABLE_FLOOR_KEV",
           "FWHM_TO_SIGMA"]

#: Lowest energy of the tables and of the ions followed, keV.
TABLE_FLOOR_KEV = 10.0
#: Standard deviation of a Gaussian over its FWHM: 1 / (2 sqrt(2 ln 2)) = 1 / 2.3548.
FWHM_TO_SIGMA = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
#: Depth margin of a substrate's grid beyond the nominal detection limit (see module notes).
_SUBSTRATE_DEPTH_MARGIN = 1.2
#: A substrate's grid reaches at most this many times its nominal reach plus the films
_MAX_REACH_FACTOR = 4.0
#: Smallest resolution used to size slices when the detector FWHM is tiny, keV.
_MIN_SIZING_FWHM_KEV = 1.0


@dataclass(frozen=True)
class SliceGrid:
    """A depth grid: ``edges_1e15`` (n+1), ``centres_1e15`` and ``widths_1e15`` (n).

    Depths along the sample normal in 1e15 atoms/cm2, from the surface (0) down.  ``layer``
    (n ints, or None) is the run-file layer each slice belongs to, counted from 0 at the
    surface; -1 marks vacuum below a sample without substrate.  Layer boundaries are always
    slice edges on the grids :class:`ForwardModel` builds.
    """

    edges_1e15: np.ndarray
    centres_1e15: np.ndarray
    widths_1e15: np.ndarray
    layer: np.ndarray | None = None

    @classmethod
    def from_edges(cls, edges_1e15, layer=None) -> "SliceGrid":
        edges = np.asarray(edges_1e15, dtype=float)
        if layer is not None:
            layer = np.asarray(layer, dtype=np.int64)
            if layer.shape != (edges.size - 1,):
                raise ValueError(f"layer has shape {layer.shape}; give one per slice "
                                 f"({edges.size - 1})")
        return cls(edges, 0.5 * (edges[1:] + edges[:-1]), np.diff(edges), layer)

    def __len__(self) -> int:
        return int(self.widths_1e15.size)


@dataclass
class Nuisance:
    """Experimental parameters the posterior may free, beside the depth profile.

    Attributes
    ----------
    fluence_scale : float
        Multiplies the number of incident ions times the solid angle (1 = as in the run file).
    gain_keV : float
        keV per channel.
    offset_keV : float
        Energy of the lower edge of channel 0, keV.
    quadratic_keV : float
        keV per channel squared.
    fwhm_keV : float
        Detector resolution (FWHM), keV; 0 switches the detector term off.
    stopping_scale : numpy.ndarray
        One factor per element of :attr:`ForwardModel.elements`, multiplying its stopping.
    straggling_scale : float
        One factor (>= 0) on every straggling variance rate, inward and outward (1 = the run's
        straggling law as it is).  The straggling variances are proportional to it.
    stopping_slope : numpy.ndarray
        One exponent per element: its stopping is multiplied by
        ``stopping_scale * (E / STOPPING_SLOPE_REFERENCE_KEV)**stopping_slope`` (reference
        energy 1000 keV), so ``stopping_scale`` is the factor at 1000 keV and the slope tilts the
        stopping curve about it.  An empty array means all zero (no tilt).
    straggling_correction : float or None
        The exponent ``a`` of the Lindhard-Scharff correction in every straggling rate:
        ``rate = Bohr * ratio(chi)**a`` per element (:func:`forward.straggling_rate`), so 1 is
        the Lindhard-Scharff law, 0 Bohr's, and values between lie between the laws, by
        element and energy as the laws themselves differ.  None: the run's law
        (``[physics] straggling``).  ``straggling_scale`` multiplies the result.

    Notes
    -----
    :meth:`to_array` lays the values out as::

        [fluence_scale, gain_keV, offset_keV, quadratic_keV, fwhm_keV,
         stopping_scale[0], ..., stopping_scale[n-1],
         straggling_scale,
         stopping_slope[0], ..., stopping_slope[n-1],
         straggling_correction]

    for ``n`` elements (``7 + 2 n`` values; NaN for a correction of None).  The first
    ``6 + 2 n`` values are the layout before the straggling correction existed, the first
    ``5 + n`` the one before the straggling scale and the slopes; :meth:`from_array` reads
    both.
    """

    fluence_scale: float = 1.0
    gain_keV: float = 1.0
    offset_keV: float = 0.0
    quadratic_keV: float = 0.0
    fwhm_keV: float = 15.0
    stopping_scale: np.ndarray = field(default_factory=lambda: np.ones(0))
    straggling_scale: float = 1.0
    stopping_slope: np.ndarray = field(default_factory=lambda: np.zeros(0))
    straggling_correction: float | None = None

    def __post_init__(self):
        self.stopping_scale = np.atleast_1d(np.asarray(self.stopping_scale, dtype=float))
        self.stopping_slope = np.atleast_1d(np.asarray(self.stopping_slope, dtype=float))

    def to_array(self) -> np.ndarray:
        """The values as one float64 array (layout in the class notes)."""
        n = self.stopping_scale.size
        slope = self.stopping_slope if self.stopping_slope.size else np.zeros(n)
        if slope.size != n:
            raise ValueError(f"stopping_slope has {slope.size} values and stopping_scale {n}; "
                             "give one of each per element")
        head = [self.fluence_scale, self.gain_keV, self.offset_keV, self.quadratic_keV,
                self.fwhm_keV]
        corr = math.nan if self.straggling_correction is None else self.straggling_correction
        return np.concatenate([np.asarray(head, dtype=float), self.stopping_scale,
                               [float(self.straggling_scale)], slope, [float(corr)]])

    @classmethod
    def from_array(cls, values, n_elements: int | None = None) -> "Nuisance":
        """Inverse of :meth:`to_array`.

        Parameters
        ----------
        values : array_like
            ``7 + 2 n`` values (layout in the class notes), or ``6 + 2 n`` (the straggling
            correction None).
        n_elements : int, optional
            Number of elements ``n``.  When given, the oldest layout of ``5 + n`` values
            (without straggling scale and slopes: they are set to 1 and 0) is accepted too.
            Without it the layout is told by the parity of the length (odd: ``7 + 2 n``, even:
            ``6 + 2 n``), which misreads an array of the oldest layout, so pass it whenever an
            array may be that old.
        """
        v = np.asarray(values, dtype=float)
        if v.ndim != 1:
            raise ValueError(f"a nuisance array is one-dimensional, got shape {v.shape}")
        if n_elements is None:
            if v.size < 6:
                raise ValueError(f"a nuisance array has 7 + 2 n values for n elements, got "
                                 f"{v.size}; pass n_elements for the older 5 + n layout")
            n = (v.size - 6) // 2
        else:
            n = int(n_elements)
            if v.size == 5 + n:
                return cls(*(float(x) for x in v[:5]), v[5:].copy())
            if v.size not in (6 + 2 * n, 7 + 2 * n):
                raise ValueError(f"a nuisance array for {n} elements has {7 + 2 * n} values "
                                 f"(or {6 + 2 * n} or {5 + n} in older layouts), got {v.size}")
        corr = None
        if v.size == 7 + 2 * n and math.isfinite(v[-1]):
            corr = float(v[-1])
        return cls(*(float(x) for x in v[:5]), v[5:5 + n].copy(), float(v[5 + n]),
                   v[6 + n:6 + 2 * n].copy(), corr)

    @staticmethod
    def array_names(elements) -> list[str]:
        """Names of the entries of :meth:`to_array` for the given element symbols."""
        head = [f.name for f in fields(Nuisance)][:5]
        return (head + [f"stopping_scale_{sym}" for sym in elements] + ["straggling_scale"]
                + [f"stopping_slope_{sym}" for sym in elements] + ["straggling_correction"])


@dataclass(frozen=True)
class SpeciesInfo:
    """One column of the fraction table: an element with natural or overridden isotopes."""

    label: str
    symbol: str
    isotopes: tuple  # ((mass_number, mass_u, fraction), ...)


def _species_of(layer) -> dict[str, SpeciesInfo]:
    """Species of each element of one layer, keyed by element symbol."""
    out = {}
    for sym in layer.fractions:
        parts = tuple((iso.mass_number, iso.mass_u, float(f))
                      for iso, f in layer.isotope_fractions(sym))
        if sym in layer.isotopes:
            main = max(parts, key=lambda p: p[2])[0]
            label = f"{sym}[{main}]"
        else:
            label = sym
        out[sym] = SpeciesInfo(label, sym, parts)
    return out


class ForwardModel:
    """Expected RBS spectrum of a run's experiment for any composition table on a fixed grid.

    Parameters
    ----------
    run : forward.Run
        The experiment (from :func:`forward.load_run`).
    n_channels : int, optional
        Number of channels; default enough to hold 1.05 times the highest surface edge.
    depth_limit_1e15 : float, optional
        Extend the grid to at least this depth (1e15 atoms/cm2), e.g. the deepest interface a
        prior allows.
    straggling : bool, optional
        Include energy straggling (default True).  False is for tests of the textbook limits.
    table_step_keV : float, optional
        Step of the energy grid of the tables (default 2 keV).
    particle_step_keV : float, optional
        Spacing of the detected energies followed into the sample (default 20 keV).

    Attributes
    ----------
    species : tuple of str
    elements : tuple of str
    species_element : numpy.ndarray of int
    grid : SliceGrid
    n_channels : int
    """

    def __init__(self, run, n_channels: int | None = None, depth_limit_1e15: float | None = None,
                 *, straggling: bool = True, table_step_keV: float = 2.0,
                 particle_step_keV: float = 20.0, first_channel: int = 0):
        self.run = run
        src = run.source
        if int(first_channel) != first_channel or first_channel < 0:
            raise InputError(f"first_channel={first_channel!r}; give a whole number >= 0",
                             where=f"{src}: first_channel")
        #: channels below this one are not computed (they read zero): the slice grid and the
        #: kernel stop once no ion can reach it, which saves the deep substrate when a fit
        #: window starts high
        self.first_channel = int(first_channel)
        if n_channels is not None and (int(n_channels) != n_channels or n_channels < 1):
            raise InputError(f"n_channels={n_channels!r}; give a whole number >= 1",
                             where=f"{src}: n_channels")
        if depth_limit_1e15 is not None and not (np.isfinite(depth_limit_1e15)
                                                 and depth_limit_1e15 >= 0):
            raise InputError(f"depth_limit_1e15={depth_limit_1e15!r}; give a depth >= 0 in "
                             "1e15 atoms/cm2", where=f"{src}: depth_limit_1e15")
        if not (table_step_keV > 0 and particle_step_keV > 0):
            raise InputError("table_step_keV and particle_step_keV must be > 0",
                             where=f"{src}: physics")
        self.straggling = bool(straggling)
        self.table_step_keV = float(table_step_keV)
        self.particle_step_keV = float(particle_step_keV)
        beam = run.beam
        self.energy_keV = float(beam.energy_keV)
        self._z1, self._m1 = beam.ion.z, beam.ion.mass_u
        geo = run.geometry
        self.theta_deg = float(geo.scattering_deg)
        self.inv_cos_in = 1.0 / math.cos(math.radians(geo.incidence_deg))
        self.inv_cos_out = 1.0 / math.cos(math.radians(geo.exit_deg))

        # species and elements
        self._layer_species: list[dict[str, SpeciesInfo]] = []
        species: dict[str, SpeciesInfo] = {}
        for i, layer in enumerate(run.layers, start=1):
            per = _species_of(layer)
            for sym, info in per.items():
                label = info.label
                if label in species and species[label].isotopes != info.isotopes:
                    n = 2
                    while f"{label}#{n}" in species and species[f"{label}#{n}"].isotopes != info.isotopes:
                        n += 1
                    label = f"{label}#{n}"
                    info = SpeciesInfo(label, sym, info.isotopes)
                    per[sym] = info
                species.setdefault(label, info)
            self._layer_species.append(per)
        self._species_info = tuple(species.values())
        self.species = tuple(species)
        self.elements = tuple(run.elements)
        self.species_element = np.array([self.elements.index(s.symbol)
                                         for s in self._species_info], dtype=np.int64)

        self._build_tables()
        self._ftab, self._fder = broadening_table()
        self._du = 1.0 / 64.0
        self.grid = self._build_grid(depth_limit_1e15)
        self._prepare_sample_grids()
        if n_channels is None:
            top = 1.05 * float(np.max(self._iso_k)) * self.energy_keV if self._iso_k.size \
                else 1.05 * self.energy_keV
            n_channels = int(math.ceil(run.calibration.channel_of(top)))
            if not (1 <= n_channels <= 65536):
                raise InputError(f"the calibration puts the highest surface edge ({top:.1f} keV) "
                                 f"at channel {n_channels}; check keV_per_channel and offset_keV",
                                 where=f"{src}: calibration")
        self.n_channels = int(n_channels)
        if self.first_channel >= self.n_channels:
            raise InputError(f"first_channel={self.first_channel} is not below the channel count "
                             f"{self.n_channels}", where=f"{src}: first_channel")
        self._empty_record = np.zeros((0, 0, 3))
        # derived once, used on every call
        self._edge_channels = np.arange(self.n_channels + 1, dtype=float)
        self._default_nuisance = self.default_nuisance()
        self._zero_slope = np.zeros(len(self.elements))
        exp = run.exposure
        self._yield_base = (exp.incident_particles * run.detector.solid_angle_msr * 1e-3
                            * 1e-27 * 1e15 * exp.live_fraction * self.inv_cos_in)

    # ------------------------------------------------------------------------------------------
    # tables
    def _build_tables(self):
        run = self.run
        phys = run.physics
        e_top = 1.1 * self.energy_keV
        n_tab = int(math.ceil((e_top - TABLE_FLOOR_KEV) / self.table_step_keV)) + 1
        self.table_energy_keV = TABLE_FLOOR_KEV + self.table_step_keV * np.arange(n_tab)
        e = self.table_energy_keV
        stop = StoppingModel(run.beam.species, tables=dict(phys.stopping_tables),
                             carbon=phys.carbon)
        correction = STRAGGLING_LAWS[phys.straggling]
        self._stopping_model = stop
        n_el = len(self.elements)
        S = np.zeros((n_el, n_tab))
        dS = np.zeros((n_el, n_tab))
        d2S = np.zeros((n_el, n_tab))
        W = np.zeros((n_el, n_tab))
        dW = np.zeros((n_el, n_tab))
        bohr = np.zeros((n_el, 1))
        ratio = np.zeros((n_el, n_tab))
        dlog = np.zeros((n_el, n_tab))  # d ln(ratio) / dE, 1/keV
        h = 0.25  # keV, central-difference step
        with warnings.catch_warnings():
            # the tables reach below the stopping formulas' fitted range so that the
            # substrate signal can trail off to the lowest channel
            warnings.simplefilter("ignore")
            for i, sym in enumerate(self.elements):
                f = lambda x: np.asarray(stop.element(sym, x), dtype=float) / 1000.0  # noqa: E731
                s_mid, s_hi, s_lo = f(e), f(e + h), f(e - h)
                S[i], dS[i] = s_mid, (s_hi - s_lo) / (2 * h)
                d2S[i] = (s_hi - 2 * s_mid + s_lo) / (h * h)
                if self.straggling:
                    r = lambda x: np.asarray(straggling_rate(  # noqa: E731
                        self._z1, self._m1, {sym: 1.0}, x, correction=correction))
                    W[i], dW[i] = r(e), (r(e + h) - r(e - h)) / (2 * h)
                    # Bohr's rate and the Lindhard-Scharff ratio, for other corrections
                    bohr[i] = bohr_variance(self._z1, element(sym).z, 1.0)
                    q = lambda x: lindhard_scharff_ratio(  # noqa: E731
                        lindhard_scharff_chi(self._m1, element(sym).z, x))
                    ratio[i] = q(e)
                    dlog[i] = np.where(ratio[i] > 0, (q(e + h) - q(e - h)) / (2 * h)
                                       / np.where(ratio[i] > 0, ratio[i], 1.0), 0.0)
        self._S, self._dS, self._d2S, self._W, self._dW = S, dS, d2S, W, dW
        #: the run's law as an exponent of the Lindhard-Scharff ratio (1 or 0)
        self.straggling_law_exponent = STRAGGLING_EXPONENTS[phys.straggling]
        with np.errstate(divide="ignore"):
            log_ratio = np.log(ratio)  # -inf where the ratio is 0 (never at table energies > 0)
        self._bohr, self._ls_ratio, self._ls_log, self._ls_dlog = bohr, ratio, log_ratio, dlog
        self._ls_positive = ratio > 0
        self._ls_all_positive = bool(self._ls_positive.all())
        self._corrected = (self.straggling_law_exponent, W, dW)

        screening = None if phys.screening == "none" else phys.screening
        ratios = {sym: load_ratio_table(path) for sym, path in phys.cross_section_ratio.items()}
        for sym, table in ratios.items():
            lo, hi = table.energy_range_keV
            if hi < self.energy_keV:
                raise InputError(f"the ratio-to-Rutherford table for {sym} ends at {hi:g} keV, "
                                 f"below the beam energy {self.energy_keV:g} keV; it must cover "
                                 "the beam energy", where=f"{run.source}: physics.cross_section_ratio.{sym}")
        iso_species, iso_k, iso_w, e3s, iso_labels = [], [], [], [], []
        for sp, info in enumerate(self._species_info):
            el = element(info.symbol)
            for a, mass, frac in info.isotopes:
                if frac <= 0:
                    continue
                try:
                    k = kinematic_factor(self._m1, mass, self.theta_deg)
                    sigma = rutherford_cross_section(self._z1, self._m1, el.z, mass, e,
                                                     self.theta_deg, screening=screening)
                except ValueError:
                    # a target lighter than the beam cannot scatter it backwards: stopping only
                    continue
                sigma = np.asarray(sigma, dtype=float)
                if info.symbol in ratios:
                    t = ratios[info.symbol]
                    lo, hi = t.energy_range_keV
                    # below the table the cross-section is taken as Rutherford
                    sigma = sigma * np.where(e < lo, 1.0,
                                             np.interp(e, t.energy_keV, t.ratio))
                iso_species.append(sp)
                iso_k.append(k)
                iso_w.append(frac)
                e3s.append(e * e * e * sigma)
                iso_labels.append(f"{a}{info.symbol}")
        self._iso_species = np.array(iso_species, dtype=np.int64)
        self._iso_k = np.array(iso_k, dtype=float)
        self._iso_weight = np.array(iso_w, dtype=float)
        self._e3sigma = np.array(e3s, dtype=float).reshape(len(iso_k), n_tab)
        self.isotope_labels = tuple(iso_labels)
        #: species index (column of the fraction table) of each scattering isotope
        self.isotope_species = self._iso_species.copy()

    # ------------------------------------------------------------------------------------------
    # grid
    def _element_fractions(self, layer) -> np.ndarray:
        c = np.zeros(len(self.elements))
        for sym, f in layer.fractions.items():
            c[self.elements.index(sym)] += f
        return c

    def _mix_stopping(self, comp, energy, scale):
        """Bragg-rule stopping (keV per 1e15) of element fractions ``comp`` at ``energy``."""
        out = np.zeros_like(np.asarray(energy, dtype=float))
        for i, c in enumerate(comp):
            if c > 0:
                out = out + c * scale[i] * np.interp(energy, self.table_energy_keV, self._S[i])
        return out

    def _build_grid(self, depth_limit_1e15):
        run = self.run
        layers = run.layers
        tops = [0.0]
        for layer in layers:
            if layer.areal_density_1e15 is not None:
                tops.append(tops[-1] + float(layer.areal_density_1e15))
        has_substrate = bool(layers[-1].substrate)
        film_total = tops[-1]
        comps = [self._element_fractions(layer) for layer in layers]
        scale = self.default_nuisance().stopping_scale
        fwhm = max(float(run.detector.fwhm_keV), _MIN_SIZING_FWHM_KEV)
        max_slice = run.physics.max_slice_1e15
        frac = float(run.physics.slice_fraction)
        k_all = self._iso_k
        # isotopes present in each layer
        present = []
        for per in self._layer_species:
            labels = {info.label for info in per.values()}
            present.append(np.array([self.species[s] in labels for s in self._iso_species]))
        limit = 0.0 if depth_limit_1e15 is None else float(depth_limit_1e15)
        cal = run.calibration
        sigma_det = run.detector.fwhm_keV * FWHM_TO_SIGMA
        d0 = max(TABLE_FLOOR_KEV, cal.energy_keV(float(self.first_channel))
                 - BROADENING_HALF_WIDTH * sigma_det - 150.0)
        hard_end = film_total if not has_substrate else math.inf
        hard_end = max(hard_end, limit)

        edges = [0.0]
        e_in = [self.energy_keV]
        layer_of = []
        z, energy = 0.0, self.energy_keV
        while z < hard_end * (1 - 1e-12) and energy > max(d0, TABLE_FLOOR_KEV) and len(edges) < 200000:
            li = int(np.searchsorted(tops, z, side="right")) - 1
            if li >= len(layers):
                li = None  # vacuum below a sample without substrate
            if li is None:
                width = max_slice if max_slice else max(hard_end - z, 1e-9)
                z = hard_end if width >= hard_end - z else z + width
                edges.append(z)
                e_in.append(energy)
                layer_of.append(-1)
                continue
            comp = comps[li]
            ks = k_all[present[li]] if k_all.size and present[li].any() else np.array([1.0])
            s_in = float(self._mix_stopping(comp, energy, scale))
            s_out = self._mix_stopping(comp, ks * energy, scale)
            eps = float(np.max(ks * s_in * self.inv_cos_in + s_out * self.inv_cos_out))
            width = frac * fwhm / eps if eps > 0 else (max_slice or 1.0)
            if max_slice:
                width = min(width, float(max_slice))
            # the next layer boundary (or the end of the grid) is met exactly, so that every
            # layer boundary is a slice edge
            boundary = tops[li + 1] if li + 1 < len(tops) else math.inf
            boundary = min(boundary, hard_end)
            at_boundary = width >= boundary - z
            if at_boundary:
                width = boundary - z
            width = max(width, 1e-9)
            # midpoint step of the nominal energy
            e_half = energy - 0.5 * width * s_in * self.inv_cos_in
            energy = energy - width * float(self._mix_stopping(comp, e_half, scale)) * self.inv_cos_in
            z = boundary if at_boundary else z + width
            edges.append(z)
            e_in.append(energy)
            layer_of.append(li)
        edges = np.asarray(edges)
        layer_of = np.asarray(layer_of, dtype=np.int64)
        #: depth (from the surface) down to which the nominal sample is needed, before the
        #: margin; see sample_grid
        self._reach0_1e15 = float(edges[-1]) / _SUBSTRATE_DEPTH_MARGIN
        self._grid_floor_keV = max(d0, TABLE_FLOOR_KEV)
        if has_substrate and k_all.size:
            # where does the heaviest isotope's signal fall below the lowest characteristic?
            # (followed out for at most 256 sampled depths, so this stays O(n_slices))
            e_in = np.asarray(e_in)
            layer_of = np.asarray(layer_of)
            samples = np.unique(np.linspace(0, len(e_in) - 1, min(len(e_in), 256)).astype(int))
            out_e = k_all.max() * e_in[samples]
            for j in range(len(layer_of) - 1, -1, -1):
                if layer_of[j] < 0:
                    continue
                first = int(np.searchsorted(samples, j + 1))
                if first >= samples.size:
                    continue
                dy = (edges[j + 1] - edges[j]) * self.inv_cos_out
                sub = out_e[first:]
                comp = comps[layer_of[j]]
                half = sub - 0.5 * dy * self._mix_stopping(comp, sub, scale)
                sub -= dy * self._mix_stopping(comp, np.maximum(half, 1.0), scale)
                np.maximum(sub, 0.0, out=sub)
            below = np.flatnonzero(out_e < d0)
            if below.size:
                self._reach0_1e15 = float(edges[samples[below[0]]])
                need = max(self._reach0_1e15 * _SUBSTRATE_DEPTH_MARGIN, limit)
                cut = int(np.searchsorted(edges, need, side="left"))
                edges = edges[: min(cut + 1, edges.size)]
        if edges.size < 2:
            edges = np.array([0.0, max(limit, 1.0)])
            layer_of = np.array([len(layers) - 1 if has_substrate else 0], dtype=np.int64)
        return SliceGrid.from_edges(edges, layer_of[: edges.size - 1])

    def _prepare_sample_grids(self):
        """Per nominal edge: its layer and relative position in it, for :meth:`sample_grid`."""
        layers = self.run.layers
        g = self.grid
        self._substrate = bool(layers[-1].substrate)
        n_fin = sum(1 for layer in layers if not layer.substrate)
        t0 = np.array([float(layer.areal_density_1e15) for layer in layers[:n_fin]])
        tops0 = np.concatenate(([0.0], np.cumsum(t0)))
        self._t0 = t0
        self._tops0 = tops0
        # each edge goes with the slice below it (the last edge with the slice above)
        lay = np.append(g.layer, g.layer[-1])
        film = (lay >= 0) & (lay < n_fin)
        self._edge_film = np.where(film, lay, -1)
        # what sample_grid indexes with on every call
        self._edge_in_film = film
        self._edge_film_or_0 = np.where(film, lay, 0)
        # depth of each film edge below the top of its layer
        within = np.zeros(lay.size)
        for k in range(n_fin):
            on = lay == k
            within[on] = g.edges_1e15[on] - tops0[k]
        self._edge_within = within
        self._last_substrate_width = 1.0
        self._rho = 1.0
        if self._substrate:
            sub = np.flatnonzero(g.layer == len(layers) - 1)
            if sub.size:
                self._last_substrate_width = float(g.widths_1e15[sub[-1]])
            # largest ratio of any element's stopping to the substrate's over the energies the
            # grid follows: a film thinner by dt needs at most about rho * dt more substrate
            e = self.table_energy_keV
            band = (e >= self._grid_floor_keV) & (e <= self.energy_keV)
            if band.any():
                comp = self._element_fractions(layers[-1])
                s_sub = comp @ self._S[:, band]
                self._rho = max(1.0, float(np.max(self._S[:, band] / s_sub)))
        #: the two ends of the energies the grid follows, over the slope's reference energy
        self._slope_ends = (np.array([self._grid_floor_keV, self.energy_keV])
                            / STOPPING_SLOPE_REFERENCE_KEV)
        self._layer_rows = np.zeros((len(layers), len(self.species)))
        for i, (layer, per) in enumerate(zip(layers, self._layer_species)):
            for sym, f in layer.fractions.items():
                self._layer_rows[i, self.species.index(per[sym].label)] += f

    # ------------------------------------------------------------------------------------------
    # public
    def default_nuisance(self) -> Nuisance:
        """The nuisance parameters as the run file gives them."""
        cal = self.run.calibration
        scale = np.array([self.run.physics.stopping_scale.get(s, 1.0) for s in self.elements])
        return Nuisance(1.0, float(cal.keV_per_channel), float(cal.offset_keV),
                        float(cal.quadratic_keV), float(self.run.detector.fwhm_keV), scale,
                        1.0, np.zeros(len(self.elements)),
                        float(STRAGGLING_EXPONENTS[self.run.physics.straggling]))

    def layer_fractions(self, grid: SliceGrid | None = None) -> np.ndarray:
        """The run's layered sample on a grid, ``(n_slices, n_species)``.

        Parameters
        ----------
        grid : SliceGrid, optional
            Default: the nominal grid :attr:`grid`, on which a slice that straddles a layer
            boundary gets the areal-density-weighted mix.  A grid from :meth:`sample_grid`
            (or any grid with ``layer`` set) gets each slice's layer composition.

        Returns
        -------
        numpy.ndarray
            Atom fractions; slices below a sample without substrate are rows of zeros
            (vacuum).
        """
        if grid is not None:
            if grid.layer is None:
                raise InputError("the grid has no layer index per slice; build it with "
                                 "ForwardModel.sample_grid", where="layer_fractions: grid")
            out = np.zeros((len(grid), len(self.species)))
            inside = grid.layer >= 0
            out[inside] = self._layer_rows[grid.layer[inside]]
            return out
        g = self.grid
        out = np.zeros((len(g), len(self.species)))
        top = 0.0
        for layer, per in zip(self.run.layers, self._layer_species):
            bottom = math.inf if layer.substrate else top + float(layer.areal_density_1e15)
            overlap = np.clip(np.minimum(g.edges_1e15[1:], bottom)
                              - np.maximum(g.edges_1e15[:-1], top), 0.0, None)
            weight = overlap / g.widths_1e15
            for sym, f in layer.fractions.items():
                out[:, self.species.index(per[sym].label)] += weight * f
            if layer.substrate:
                break
            top = bottom
        return out

    @property
    def finite_layers(self) -> tuple[int, ...]:
        """Indices (from 0 at the surface) of the run's layers with a finite areal density."""
        return tuple(range(self._t0.size))

    def sample_grid(self, areal_density_1e15, nuisance=None) -> SliceGrid:
        """A slice grid that follows a sample whose finite layers have other areal densities.

        Each finite layer's nominal slices are stretched by ``t_k / t0_k`` (``t0_k`` the run
        file's areal density), so every layer boundary is a slice edge and every edge moves
        continuously with the ``t_k``; the substrate's (or the vacuum's) slices keep their
        nominal widths and move down with the bottom of the films.  Counts computed on such
        grids are smooth functions of the ``t_k``.

        Below a substrate the grid is extended, with slices of the nominal width of the
        deepest substrate slice, so that it still reaches the depth the spectrum needs: the
        nominal reach plus, for films thinner than nominal, ``rho`` times the missing areal
        density (``rho`` the largest ratio of any element's stopping to the substrate's over
        the energies followed), all times the nominal 20 % margin, divided by the smallest
        factor by which ``nuisance`` lowers any element's stopping (scale and slope) relative to
        the run file.  The extra slices lie below the depth at which the kernel stops, so they
        change the row count but not the counts.

        Parameters
        ----------
        areal_density_1e15 : array_like
            One areal density (1e15 atoms/cm2, >= 0) per finite layer, in the order of
            :attr:`finite_layers`.
        nuisance : Nuisance, optional
            The nuisance the grid will be used with (for the depth reach); default the run
            file's.

        Returns
        -------
        SliceGrid
            With ``layer`` set (the run-file layer of each slice, -1 for vacuum).
        """
        return SliceGrid.from_edges(*self._sample_edges(areal_density_1e15, nuisance))

    def _sample_edges(self, areal_density_1e15, nuisance):
        """``(edges, layer)`` of :meth:`sample_grid`."""
        t = np.asarray(areal_density_1e15, dtype=float)
        if t.shape != self._t0.shape:
            raise InputError(f"give {self._t0.size} areal densities, one per finite layer; got "
                             f"shape {t.shape}", where="sample_grid: areal_density_1e15")
        if t.size and not (t.min() >= 0.0 and t.max() < math.inf):
            raise InputError("areal densities must be finite and >= 0 (1e15 atoms/cm2)",
                             where="sample_grid: areal_density_1e15")
        tops = np.concatenate(([0.0], np.cumsum(t)))
        total = float(tops[-1])
        shift = tops - self._tops0
        film = self._edge_in_film
        k = self._edge_film_or_0
        # written as changes of the nominal edges, so that t = t0 gives them exactly
        edges = self.grid.edges_1e15 + shift[-1]
        if t.size:
            stretch = t / self._t0 - 1.0
            edges = np.where(film, self.grid.edges_1e15 + shift[k]
                             + self._edge_within * stretch[k], edges)
            # a layer squeezed to zero may leave rounding of -1e-14 in its widths
            edges = np.maximum.accumulate(edges)
        layer = self.grid.layer
        if self._substrate:
            nu = self._check_nuisance(nuisance)
            thinner = float(np.sum(np.maximum(self._t0 - t, 0.0)))
            need = (total + self._reach0_1e15 - self._tops0[-1] + self._rho * thinner) \
                * _SUBSTRATE_DEPTH_MARGIN / min(1.0, self._lowest_stopping_factor(nu))
            # never more than a few times the nominal reach: a nuisance that lowers some
            # stopping further than that (far outside any prior) would otherwise ask for
            # billions of slices
            need = min(need, _MAX_REACH_FACTOR * (self._reach0_1e15 + total))
            if edges[-1] < need:
                w = self._last_substrate_width
                extra = int(math.ceil((need - edges[-1]) / w))
                edges = np.concatenate((edges, edges[-1] + w * np.arange(1, extra + 1)))
                layer = np.concatenate((layer, np.full(extra, len(self.run.layers) - 1)))
        return edges, layer

    def sample_edges(self, areal_density_1e15, nuisance=None) -> np.ndarray:
        """Slice edges of :meth:`sample_grid` (1e15 atoms/cm2, from 0 at the surface)."""
        return np.asarray(self._sample_edges(areal_density_1e15, nuisance)[0], dtype=float)

    def _lowest_stopping_factor(self, nu) -> float:
        """Smallest factor, relative to the run file, by which ``nu`` scales any stopping.

        Over the energies the grid follows (``scale * (E/E_ref)^slope`` is monotonic in E, so
        its two ends bound it).
        """
        ratio = nu.stopping_scale / self._default_nuisance.stopping_scale
        slope = nu.stopping_slope if nu.stopping_slope.size else self._zero_slope
        ends = self._slope_ends
        factor = ratio[:, None] * ends[None, :] ** slope[:, None]
        return float(factor.min()) if factor.size else 1.0

    def _check_nuisance(self, nuisance) -> Nuisance:
        if nuisance is None:
            # built once in __init__ (callers wanting their own copy use default_nuisance())
            return self._default_nuisance
        if not isinstance(nuisance, Nuisance):
            raise TypeError(f"nuisance must be a forward.Nuisance, got {type(nuisance).__name__}")
        if nuisance.stopping_scale.size != len(self.elements):
            raise InputError(f"stopping_scale has {nuisance.stopping_scale.size} values; give one "
                             f"per element ({', '.join(self.elements)})", where="nuisance: stopping_scale")
        if nuisance.stopping_slope.size not in (0, len(self.elements)):
            raise InputError(f"stopping_slope has {nuisance.stopping_slope.size} values; give one "
                             f"per element ({', '.join(self.elements)}) or none",
                             where="nuisance: stopping_slope")
        return nuisance

    def channel_edges_keV(self, nuisance=None) -> np.ndarray:
        """Lower edges of channels 0..n and the upper edge of the last one, keV."""
        nu = self._check_nuisance(nuisance)
        c = self._edge_channels
        edges = channel_energy_keV(c, nu.offset_keV, nu.gain_keV, nu.quadratic_keV)
        # the width of channel c is gain + quad (2c + 1), linear in c: positive everywhere
        # exactly when it is positive for the first and the last channel
        n = self.n_channels
        if not (nu.gain_keV + nu.quadratic_keV > 0
                and nu.gain_keV + nu.quadratic_keV * (2 * n - 1) > 0):
            raise InputError("the calibration does not increase over the channels; give a "
                             "positive keV_per_channel and a quadratic term that keeps it rising",
                             where="nuisance: gain_keV")
        return edges

    def channel_energy_keV(self, nuisance=None) -> np.ndarray:
        """Energy at the middle of each channel, keV: ``E(c + 0.5)``."""
        nu = self._check_nuisance(nuisance)
        c = np.arange(self.n_channels, dtype=float) + 0.5
        return channel_energy_keV(c, nu.offset_keV, nu.gain_keV, nu.quadratic_keV)

    def kernel_inputs(self, fractions, nuisance=None, *, widths_1e15=None, per_species=False,
                      per_isotope=False, record=None) -> KernelInputs:
        """The inputs of :func:`forward._kernel.spectrum_kernel` for one slice table.

        Parameters are those of :meth:`expected_counts`; ``record`` is the kernel's record
        array (see :meth:`edge_table`).  Call the kernel as ``spectrum_kernel(*inputs)``.
        """
        nu = self._check_nuisance(nuisance)
        fr = np.ascontiguousarray(fractions, dtype=float)
        m = len(self.species)
        if widths_1e15 is None:
            widths = self.grid.widths_1e15
            n = widths.size
            if fr.shape != (n, m):
                raise InputError(f"the fraction table has shape {fr.shape}; it must be "
                                 f"(n_slices, n_species) = ({n}, {m})", where="fractions")
        else:
            widths = np.ascontiguousarray(widths_1e15, dtype=float)
            if widths.ndim != 1 or widths.size < 1:
                raise InputError(f"widths_1e15 has shape {widths.shape}; give one areal density "
                                 "per slice (a 1-D array)", where="widths_1e15")
            if not (widths.min() >= 0.0 and widths.max() < math.inf):
                raise InputError("slice widths must be finite and >= 0 (1e15 atoms/cm2)",
                                 where="widths_1e15")
            if fr.shape != (widths.size, m):
                raise InputError(f"the fraction table has shape {fr.shape}; with {widths.size} "
                                 f"slice widths it must be (n_slices, n_species) = "
                                 f"({widths.size}, {m})", where="fractions")
        # min >= 0 is False for NaN; max < inf catches infinities: two passes over the table
        if fr.size and not (fr.min() >= 0.0 and fr.max() < math.inf):
            raise InputError("fractions must be finite and >= 0", where="fractions")
        for name in ("fluence_scale", "gain_keV", "fwhm_keV"):
            v = getattr(nu, name)
            if not (math.isfinite(v) and (v > 0 or (name == "fwhm_keV" and v == 0))):
                raise InputError(f"{name}={v!r}; it must be a finite number > 0"
                                 + (" (or 0 for fwhm_keV)" if name == "fwhm_keV" else ""),
                                 where=f"nuisance: {name}")
        # min > 0 is False for NaN and -inf, max < inf catches +inf: two passes, no temporaries
        scale = nu.stopping_scale
        if scale.size and not (scale.min() > 0.0 and scale.max() < math.inf):
            raise InputError("stopping scales must be finite and > 0", where="nuisance: stopping_scale")
        w_scale = float(nu.straggling_scale)
        if not (math.isfinite(w_scale) and w_scale >= 0.0):
            raise InputError(f"straggling_scale={nu.straggling_scale!r}; it must be a finite "
                             "number >= 0", where="nuisance: straggling_scale")
        W, dW = self.straggling_tables(nu.straggling_correction)
        slope = nu.stopping_slope
        if slope.size == 0:
            slope = self._zero_slope
        elif not (slope.min() > -math.inf and slope.max() < math.inf):
            raise InputError("stopping slopes must be finite numbers", where="nuisance: stopping_slope")
        yield_factor = self._yield_base * nu.fluence_scale
        edges = self.channel_edges_keV(nu)[self.first_channel:]
        rec = self._empty_record if record is None else record
        mode = ROWS_PER_ISOTOPE if per_isotope else (ROWS_PER_SPECIES if per_species else ROWS_TOTAL)
        return KernelInputs(
            widths, fr, self.species_element, len(self.elements),
            float(self.table_energy_keV[0]), self.table_step_keV,
            self._S, self._dS, self._d2S, W, dW,
            np.ascontiguousarray(nu.stopping_scale, dtype=float),
            np.ascontiguousarray(slope, dtype=float), STOPPING_SLOPE_REFERENCE_KEV, w_scale,
            self._iso_species, self._iso_k, self._iso_weight, self._e3sigma,
            self.energy_keV, self.inv_cos_in, self.inv_cos_out, yield_factor,
            edges, float(nu.fwhm_keV) * FWHM_TO_SIGMA, self.particle_step_keV,
            TABLE_FLOOR_KEV, self._ftab, self._fder, BROADENING_HALF_WIDTH, self._du,
            mode, rec)

    def straggling_tables(self, correction=None):
        """The straggling rate tables ``(W, dW/dE)`` per element over :attr:`table_energy_keV`
        (keV^2 per 1e15 atoms/cm2, and per keV) for a correction exponent (see
        :attr:`Nuisance.straggling_correction`; None: the run's law).

        ``W = Bohr * ratio**a`` and ``dW/dE = a * W * d ln(ratio)/dE``, ``ratio`` the
        Lindhard-Scharff ratio of each element; the last exponent asked for is cached.  None
        and the run's own law give the tables the law builds directly, whatever was asked
        before.
        """
        if correction is None or correction == self.straggling_law_exponent:
            return self._W, self._dW
        a, W, dW = self._corrected
        if correction == a:
            return W, dW
        a = float(correction)
        if not math.isfinite(a):
            raise InputError(f"straggling_correction={correction!r}; it must be a finite "
                             "number (1: Lindhard-Scharff, 0: Bohr)",
                             where="nuisance: straggling_correction")
        if not self.straggling:
            return self._W, self._dW
        W = self._bohr * np.exp(a * self._ls_log)
        if not self._ls_all_positive:
            W = np.where(self._ls_positive, W, self._bohr if a == 0 else 0.0)
        dW = a * W * self._ls_dlog
        self._corrected = (a, W, dW)
        return W, dW

    #: Older name of :meth:`kernel_inputs` (it returned a plain tuple in the same order).
    kernel_arguments = kernel_inputs

    def expected_counts(self, fractions, nuisance=None, *, widths_1e15=None, per_species=False,
                        per_isotope=False) -> np.ndarray:
        """Expected counts per channel.

        Parameters
        ----------
        fractions : (n_slices, n_species) array_like
            Atom fractions per slice (rows of zeros are vacuum).
        nuisance : Nuisance, optional
            Default: :meth:`default_nuisance`.
        widths_1e15 : (n_slices,) array_like, optional
            Areal density of each slice, 1e15 atoms/cm2 (>= 0), from the surface down, for a
            slice table of the caller's own (any number of rows, e.g. from
            :meth:`sample_grid`).  Default: the nominal :attr:`grid`.
        per_species : bool, optional
            Return ``(n_species, n_channels)``, one spectrum per species.
        per_isotope : bool, optional
            Return ``(n_isotopes, n_channels)``, one spectrum per scattering isotope, in the
            order of :attr:`isotope_labels` (species of each: :attr:`isotope_species`).

        Returns
        -------
        numpy.ndarray
            ``(n_channels,)`` float64, ``(n_species, n_channels)`` or
            ``(n_isotopes, n_channels)``.
        """
        if per_species and per_isotope:
            raise InputError("ask for per_species or per_isotope, not both",
                             where="expected_counts")
        inputs = self.kernel_inputs(fractions, nuisance, widths_1e15=widths_1e15,
                                    per_species=per_species, per_isotope=per_isotope)
        out = spectrum_kernel(*inputs)
        if self.first_channel:
            full = np.zeros((out.shape[0], self.n_channels))
            full[:, self.first_channel:] = out
            out = full
        p = self.run.physics.pileup.probability
        if per_species or per_isotope:
            return out * (1.0 - p) if p > 0 else out
        total = out[0]
        if p > 0:
            nu = self._check_nuisance(nuisance)
            total = self._with_pileup(total, p, nu)
        return total

    def _with_pileup(self, single, p, nu):
        """First-order pile-up (see module notes)."""
        n_total = float(single.sum())
        if n_total <= 0:
            return single
        s = single / n_total
        conv = np.convolve(s, s)  # index m = c1 + c2
        # centres: E = off + g (c + 0.5); sum at off + g (m + off/g + 0.5) + ... -> position
        pos = np.arange(conv.size) + nu.offset_keV / nu.gain_keV + 0.5
        lo = np.floor(pos).astype(int)
        w_hi = pos - lo
        piled = np.zeros(single.size)
        for idx, w in ((lo, 1.0 - w_hi), (lo + 1, w_hi)):
            ok = (idx >= 0) & (idx < single.size)
            np.add.at(piled, idx[ok], (conv * w)[ok])
        return (1.0 - p) * single + 0.5 * p * n_total * piled

    def edge_table(self, fractions=None, nuisance=None, *, widths_1e15=None) -> np.ndarray:
        """Per grid edge and isotope: detected energy, straggling variance, energy before scattering.

        Parameters
        ----------
        fractions : (n_slices, n_species) array_like, optional
            Default: the run's layered sample on the nominal grid (then ``widths_1e15`` must
            not be given).
        nuisance : Nuisance, optional
        widths_1e15 : (n_slices,) array_like, optional
            Slice widths of the caller's own table, as in :meth:`expected_counts`.

        Returns
        -------
        (n_slices + 1, n_isotopes, 3) float64
            ``[..., 0]`` detected energy (keV) of an ion scattered at that edge,
            ``[..., 1]`` its energy variance from straggling at the detector (keV^2; the
            detector term not included), ``[..., 2]`` the ion energy just before scattering.
            NaN below the depth the model follows.
        """
        if fractions is None:
            if widths_1e15 is not None:
                raise InputError("give the fractions that go with widths_1e15",
                                 where="edge_table: fractions")
            fractions = self.layer_fractions()
        n = len(self.grid) if widths_1e15 is None else np.size(widths_1e15)
        rec = np.zeros((n + 1, self._iso_k.size, 3))
        spectrum_kernel(*self.kernel_inputs(fractions, nuisance, widths_1e15=widths_1e15,
                                            record=rec))
        return rec

    def depth_map(self, nuisance=None, fractions=None, *, widths_1e15=None) -> dict:
        """Detected surface-edge-to-depth map per species.

        For each species, the detected energy (keV) of ions scattered by its most abundant
        isotope at each grid edge, and that edge's depth (1e15 atoms/cm2), for the run's
        layered sample unless ``fractions`` (and optionally ``widths_1e15``, as in
        :meth:`expected_counts`) are given.

        Returns
        -------
        dict[str, tuple[numpy.ndarray, numpy.ndarray]]
            species -> ``(energy_keV, depth_1e15)``, energy decreasing with depth.
        """
        rec = self.edge_table(fractions, nuisance, widths_1e15=widths_1e15)
        if widths_1e15 is None:
            depth = self.grid.edges_1e15
        else:
            depth = np.concatenate(([0.0], np.cumsum(np.asarray(widths_1e15, dtype=float))))
        out = {}
        for sp, label in enumerate(self.species):
            idx = np.flatnonzero(self._iso_species == sp)
            if idx.size == 0:
                out[label] = (np.zeros(0), np.zeros(0))
                continue
            q = idx[np.argmax(self._iso_weight[idx])]
            e = rec[:, q, 0]
            ok = np.isfinite(e)
            out[label] = (e[ok].copy(), depth[ok].copy())
        return out

    def sample_columns(self):
        """The run's layers as columns of the fraction table, with species masses
        (:class:`forward.SampleColumns`, built once)."""
        cached = self.__dict__.get("_sample_columns")
        if cached is None:
            from ._columns import sample_columns
            cached = self._sample_columns = sample_columns(self)
        return cached
