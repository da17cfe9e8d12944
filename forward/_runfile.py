"""The run file: one TOML file that describes an experiment and a sample model.

The schema is documented key by key in README.md, "The run file".  This module reads the file with
:mod:`tomllib`, checks every value and builds frozen dataclasses.  Every problem raises
:class:`forward.InputError` with ``where="<file>: <dotted key>"``, e.g.
``run.toml: layer[2].areal_density_1e15`` (layers are counted from 1, top layer first).
Kept whole: one file format read by one set of table helpers with one way of naming where a
problem is; split, the checks of one table would end up in several places.

Geometry conventions (angles in degrees, measured from the sample normal):

* ``incidence_deg`` (th1) is the angle between the reversed beam direction and the normal,
* ``exit_deg`` (th2) is the angle between the direction towards the detector and the normal,
* ``scattering_deg`` (theta) is the angle between the beam and the detector direction.

The three directions (reversed beam, normal, detector) form a spherical triangle whose sides
are th1, th2 and 180 - theta, so a direct triple must satisfy the triangle inequalities
``|th1 - th2| <= 180 - theta <= th1 + th2`` (common practice; any spherical geometry text).
With a tilt instead (tilt from the untilted position, where the normal points back along the
beam), two layouts are known by name in the trade:

* IBM layout, tilt axis perpendicular to the scattering plane:
  ``th1 = |tilt|``, ``th2 = |180 - theta + tilt|``; a positive tilt turns the normal away from
  the detector, so the exit path becomes longer.
* Cornell layout, tilt axis in the scattering plane and perpendicular to the beam:
  ``th1 = |tilt|``, ``cos th2 = -cos(theta) cos(tilt)``.

Unit slips (MeV for keV, eV for keV, coulombs for microcoulombs) are caught where a value lies
outside what the physics supports (an :class:`InputError`) or outside what an experiment
plausibly gives (an :class:`InputWarning`); the bounds are the module constants below and the
README lists them.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import scipy.constants

from ._conversions import (MAX_CHANNELS, areal_density_from_nm, atoms_per_cm3,
                           channel_energy_keV, channel_of_energy, nm_from_1e15)
from ._elements import Isotope, capitalisation_slips, element, ion, isotope, parse_formula
from ._errors import InputError, warn_input

__all__ = [
    "Run",
    "Beam",
    "Geometry",
    "Detector",
    "Calibration",
    "Exposure",
    "Layer",
    "Physics",
    "Pileup",
    "load_run",
    "parse_run",
    "ibm_angles",
    "cornell_angles",
    "check_angle_triple",
    "SCREENING_CHOICES",
    "STRAGGLING_CHOICES",
    "CARBON_CHOICES",
    "LAYOUT_CHOICES",
    "MAX_CHANNELS",
    "MIN_BEAM_KEV",
    "MAX_BEAM_KEV",
    "beam_energy_range_keV",
    "MAX_FWHM_FRACTION",
    "MIN_PLAUSIBLE_FWHM_KEV",
    "MIN_PLAUSIBLE_CHARGE_UC",
    "MIN_EDGE_CHANNELS",
]

#: Screening corrections the cross-section module knows.
SCREENING_CHOICES = ("andersen", "lecuyer", "none")
#: Straggling laws (forward._straggling.STRAGGLING_LAWS); the first is the default.
STRAGGLING_CHOICES = ("lindhard-scharff", "bohr")
#: Helium stopping coefficients for carbon (forward._stopping.CARBON_PHASES); first: default.
CARBON_CHOICES = ("graphite", "amorphous")
#: Named tilt layouts; ``"direct"`` is recorded when both angles are given.
LAYOUT_CHOICES = ("IBM", "Cornell")

#: Lowest beam energy (keV).  Below about 100 keV a helium beam is no longer a backscattering
#: beam in the sense of the model: at 100 keV the screening corrections to the Rutherford
#: cross-section (Andersen et al. 1980, L'Ecuyer et al. 1979; forward.screening_factor) already
#: reach 30-40 % for the heaviest targets, beyond which these first-order forms are not meant
#: to be used (from memory), and the model's energy tables start at 10 keV.
MIN_BEAM_KEV = 100.0
#: Highest 4He beam energy (keV): the top of the range of the helium electronic stopping
#: parameterisation (Ziegler 1977, 1 keV to 10 MeV; from memory).  A 3He beam is limited to the
#: same velocity, 10 MeV x m(3He)/m(4He), since its stopping is the 4He stopping at that velocity.
MAX_BEAM_KEV = 10000.0
#: The detector FWHM must be below this fraction of the beam energy.  A resolution of half the
#: beam energy smears every surface edge over most of the spectrum, so no layer or mass can be
#: told apart, and the Gaussian spills a large part of the counts below zero energy; silicon
#: detectors give 10-20 keV at 2 MeV (common practice), so the bound only catches slips such
#: as eV typed for keV.
MAX_FWHM_FRACTION = 0.5
#: A FWHM below this (keV) warns: no backscattering detector resolves so finely (magnetic and
#: electrostatic analysers reach a few tenths of a keV; from memory); MeV typed for keV lands here.
MIN_PLAUSIBLE_FWHM_KEV = 0.1
#: A charge below this (microcoulomb) warns: RBS spectra take about 1 to 100 uC (common
#: practice), and a charge typed in coulombs lands near 1e-6.  The same number of ions given as
#: ``particles`` (about 6.2e9 singly charged ions) warns too.
MIN_PLAUSIBLE_CHARGE_UC = 1e-3
#: The highest surface edge must lie at least this many channels above zero energy
#: (``K E0 / keV_per_channel``).  Backscattering spectra span hundreds to thousands of channels
#: (common practice); fewer than this cannot show a single layer, and a gain typed in eV per
#: channel lands here.
MIN_EDGE_CHANNELS = 16

_TOP_KEYS = ("title", "beam", "geometry", "detector", "calibration", "exposure", "layer",
             "physics", "fit")


# ----------------------------------------------------------------------------------------------
# geometry helpers
# ----------------------------------------------------------------------------------------------
def ibm_angles(scattering_deg: float, tilt_deg: float) -> tuple[float, float]:
    """Incidence and exit angles for the IBM layout (tilt axis normal to the scattering plane).

    Parameters
    ----------
    scattering_deg : float
        Scattering angle theta in degrees.
    tilt_deg : float
        Sample tilt in degrees; positive turns the sample normal away from the detector.

    Returns
    -------
    (incidence_deg, exit_deg) : tuple of float
        ``th1 = |tilt|`` and ``th2 = |180 - theta + tilt|``.
    """
    return abs(tilt_deg), abs(180.0 - scattering_deg + tilt_deg)


def cornell_angles(scattering_deg: float, tilt_deg: float) -> tuple[float, float]:
    """Incidence and exit angles for the Cornell layout (tilt axis in the scattering plane).

    Parameters
    ----------
    scattering_deg : float
        Scattering angle theta in degrees.
    tilt_deg : float
        Sample tilt in degrees about the axis in the scattering plane perpendicular to the beam.

    Returns
    -------
    (incidence_deg, exit_deg) : tuple of float
        ``th1 = |tilt|`` and ``th2 = arccos(-cos(theta) cos(tilt))``.
    """
    c = -math.cos(math.radians(scattering_deg)) * math.cos(math.radians(tilt_deg))
    return abs(tilt_deg), math.degrees(math.acos(max(-1.0, min(1.0, c))))


def check_angle_triple(scattering_deg: float, incidence_deg: float, exit_deg: float,
                       tol_deg: float = 1e-9) -> bool:
    """True if a normal can make angles th1 and th2 with the reversed beam and the detector.

    The reversed beam, the normal and the detector direction are three unit vectors; the arcs
    between them are th1, th2 and 180 - theta, and three arcs close a spherical triangle only if
    ``|th1 - th2| <= 180 - theta <= th1 + th2`` (the third condition, a perimeter of at most
    360 degrees, always holds here because each side is below 90 degrees).
    """
    side = 180.0 - scattering_deg
    return abs(incidence_deg - exit_deg) <= side + tol_deg and side <= incidence_deg + exit_deg + tol_deg


def beam_energy_range_keV(beam_ion: Isotope) -> tuple[float, float]:
    """Lowest and highest beam energy (keV) accepted for a helium ion.

    Parameters
    ----------
    beam_ion : Isotope
        The beam ion (4He or 3He).

    Returns
    -------
    (low_keV, high_keV) : tuple of float
        :data:`MIN_BEAM_KEV`, and :data:`MAX_BEAM_KEV` scaled to the same velocity as 4He at
        that energy (``MAX_BEAM_KEV * m / m(4He)``).
    """
    return MIN_BEAM_KEV, MAX_BEAM_KEV * beam_ion.mass_u / ion("4He").mass_u


# ----------------------------------------------------------------------------------------------
# dataclasses
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Beam:
    """The incident ion and its energy.

    Attributes
    ----------
    ion : Isotope
        The beam ion (``4He`` or ``3He``), mass in u.
    energy_keV : float
        Incident energy in keV.
    """

    ion: Isotope
    energy_keV: float

    @property
    def species(self) -> str:
        """The ion as written in the run file, e.g. ``"4He"``."""
        return self.ion.label


@dataclass(frozen=True)
class Geometry:
    """Scattering geometry; all angles in degrees, incidence and exit from the sample normal.

    ``layout`` is ``"IBM"`` or ``"Cornell"`` when a tilt was given, ``"direct"`` when both
    angles were given; ``tilt_deg`` is None in the direct case.
    """

    scattering_deg: float
    incidence_deg: float
    exit_deg: float
    layout: str = "direct"
    tilt_deg: float | None = None

    @property
    def path_in_factor(self) -> float:
        """1 / cos(th1): path length per unit depth on the way in."""
        return 1.0 / math.cos(math.radians(self.incidence_deg))

    @property
    def path_out_factor(self) -> float:
        """1 / cos(th2): path length per unit depth on the way out."""
        return 1.0 / math.cos(math.radians(self.exit_deg))


@dataclass(frozen=True)
class Detector:
    """Detector energy resolution (FWHM, keV) and solid angle (msr)."""

    fwhm_keV: float
    solid_angle_msr: float

    @property
    def sigma_keV(self) -> float:
        """Gaussian standard deviation matching the FWHM: FWHM / (2 sqrt(2 ln 2))."""
        return self.fwhm_keV / (2.0 * math.sqrt(2.0 * math.log(2.0)))

    @property
    def solid_angle_sr(self) -> float:
        """Solid angle in steradian."""
        return self.solid_angle_msr * 1e-3


@dataclass(frozen=True)
class Calibration:
    """Channel to energy: ``E(c) = offset_keV + keV_per_channel * c + quadratic_keV * c**2``.

    ``E(c)`` is the energy of the *lower edge* of channel ``c``; channel ``c`` holds the
    particles detected with energies in ``[E(c), E(c + 1))``.
    """

    keV_per_channel: float
    offset_keV: float = 0.0
    quadratic_keV: float = 0.0

    def energy_keV(self, channel):
        """Energy (keV) of the lower edge of ``channel`` (scalar or array, may be fractional)."""
        return channel_energy_keV(channel, self.offset_keV, self.keV_per_channel,
                                  self.quadratic_keV)

    def centre_keV(self, channel):
        """Energy (keV) at the middle of ``channel``: ``E(channel + 0.5)``."""
        return self.energy_keV(channel + 0.5)

    def channel_edges_keV(self, channels):
        """Lower and upper edges (keV) of the given channels.

        Parameters
        ----------
        channels : int or array of int
            An int ``n`` means channels ``0 .. n-1``; an array lists the channels explicitly
            (gaps allowed).

        Returns
        -------
        (lower_keV, upper_keV) : tuple of numpy arrays
        """
        import numpy as np

        ch = np.arange(int(channels)) if np.ndim(channels) == 0 else np.asarray(channels, float)
        ch = ch.astype(float)
        return self.energy_keV(ch), self.energy_keV(ch + 1.0)

    def channel_of(self, energy_keV: float) -> float:
        """Fractional channel position of an energy (the inverse of :meth:`energy_keV`).

        ``floor(channel_of(E))`` is the channel that holds energy ``E``.
        """
        return channel_of_energy(energy_keV, self.offset_keV, self.keV_per_channel,
                                 self.quadratic_keV)


@dataclass(frozen=True)
class Exposure:
    """How many ions hit the sample.

    Exactly one of ``charge_uC`` (integrated beam charge, microcoulomb) and ``particles`` is
    set.  ``live_fraction`` is the fraction of the time the acquisition was live (1 - dead time).
    """

    charge_uC: float | None = None
    particles: float | None = None
    charge_state: int = 1
    live_fraction: float = 1.0

    @property
    def incident_particles(self) -> float:
        """Number of incident ions: ``charge / (e * charge_state)``, or ``particles``.

        Uses the elementary charge from :mod:`scipy.constants` (CODATA).
        """
        if self.particles is not None:
            return float(self.particles)
        return self.charge_uC * 1e-6 / (scipy.constants.e * self.charge_state)

    @property
    def counted_particles(self) -> float:
        """Incident ions seen by a live acquisition: ``incident_particles * live_fraction``."""
        return self.incident_particles * self.live_fraction


@dataclass(frozen=True)
class Layer:
    """One layer of the sample model, from the surface down.

    Attributes
    ----------
    name : str
    fractions : dict[str, float]
        Atom fraction per element symbol, summing to 1, in formula order.
    areal_density_1e15 : float or None
        Areal density in 1e15 atoms/cm2; None for a semi-infinite substrate.
    density_g_cm3 : float or None
        Mass density, if given; lets depths be reported in nm.
    isotopes : dict[str, dict[int, float]]
        Isotope fractions (per element, summing to 1) that replace the natural abundances.
    substrate : bool
        True for the semi-infinite last layer.
    formula : str
        The formula as written.
    """

    name: str
    fractions: dict
    areal_density_1e15: float | None
    density_g_cm3: float | None = None
    isotopes: dict = field(default_factory=dict)
    substrate: bool = False
    formula: str = ""

    def isotope_fractions(self, symbol: str) -> list[tuple[Isotope, float]]:
        """The isotopes of one element in this layer with their fractions (summing to 1)."""
        if symbol in self.isotopes:
            return [(isotope(symbol, a), f) for a, f in self.isotopes[symbol].items() if f > 0]
        return [(iso, iso.abundance) for iso in element(symbol).isotopes]

    @property
    def mean_mass_u(self) -> float:
        """Atom-fraction weighted mean atomic mass (u), isotope overrides included."""
        total = 0.0
        for sym, frac in self.fractions.items():
            if sym in self.isotopes:
                m = sum(iso.mass_u * f for iso, f in self.isotope_fractions(sym))
            else:
                m = element(sym).mass_u
            total += frac * m
        return total

    @property
    def atoms_per_cm3(self) -> float | None:
        """Atomic density ``rho N_A / M_mean`` in atoms/cm3, or None without a mass density."""
        if self.density_g_cm3 is None:
            return None
        return atoms_per_cm3(self.density_g_cm3, self.mean_mass_u)

    @property
    def thickness_nm(self) -> float | None:
        """Thickness in nm from areal density and mass density, or None if either is missing."""
        n = self.atoms_per_cm3
        if n is None or self.areal_density_1e15 is None:
            return None
        return nm_from_1e15(self.areal_density_1e15, n)

    def nm_per_1e15(self) -> float | None:
        """Thickness in nm of 1e15 atoms/cm2 of this layer, or None without a mass density."""
        n = self.atoms_per_cm3
        return None if n is None else nm_from_1e15(1.0, n)


@dataclass(frozen=True)
class Pileup:
    """First-order pile-up: a pulse sums with another within ``resolving_time_us``.

    The probability of a pile-up per pulse is ``p = count_rate_hz * resolving_time_us * 1e-6``.
    Only the parameters are stored here; the spectrum model applies them.
    """

    enabled: bool = False
    resolving_time_us: float = 0.5
    count_rate_hz: float = 0.0

    @property
    def probability(self) -> float:
        """``rate * tau``; 0 when pile-up is disabled."""
        if not self.enabled:
            return 0.0
        return self.count_rate_hz * self.resolving_time_us * 1e-6


@dataclass(frozen=True)
class Physics:
    """Model options; see README.md, "The run file" for defaults.

    Paths in ``stopping_tables`` and ``cross_section_ratio`` are absolute (resolved against the
    run file's folder).
    """

    screening: str = "andersen"
    slice_fraction: float = 0.25
    max_slice_1e15: float | None = None
    stopping_tables: dict = field(default_factory=dict)
    stopping_scale: dict = field(default_factory=dict)
    cross_section_ratio: dict = field(default_factory=dict)
    pileup: Pileup = field(default_factory=Pileup)
    straggling: str = "lindhard-scharff"
    carbon: str = "graphite"


@dataclass(frozen=True)
class Run:
    """Everything one run file says.

    ``source`` is the file name as given (or ``"<string>"``), ``text`` the file's text,
    ``raw`` the parsed TOML (used by :meth:`with_overrides`), ``fit`` the ``[fit]`` table passed
    through untouched.
    """

    title: str
    beam: Beam
    geometry: Geometry
    detector: Detector
    calibration: Calibration
    exposure: Exposure
    layers: tuple
    physics: Physics
    fit: dict
    source: str = "<string>"
    text: str = ""
    raw: dict = field(default_factory=dict, repr=False, compare=False)
    base_dir: Path = field(default_factory=Path.cwd, repr=False, compare=False)

    @property
    def elements(self) -> list[str]:
        """Element symbols present in any layer, in order of first appearance from the top."""
        seen: dict[str, None] = {}
        for layer in self.layers:
            for sym in layer.fractions:
                seen.setdefault(sym, None)
        return list(seen)

    def with_overrides(self, changes: Mapping[str, Any], source: str | None = None) -> "Run":
        """A new Run with some tables changed, checked exactly like a run file.

        Parameters
        ----------
        changes : mapping
            Tables in run-file form, e.g. ``{"exposure": {"charge_uC": 12.0},
            "calibration": {"offset_keV": 18.5}}``.  Keys inside a table replace those of the
            run file; setting ``charge_uC`` drops ``particles`` and the reverse.  ``layer`` and
            ``fit`` are replaced whole.
        source : str, optional
            Where the changes came from, for error messages (default: this run's source).
        """
        raw = {k: (dict(v) if isinstance(v, dict) else v) for k, v in self.raw.items()}
        where = source or self.source
        text = self.text + override_note({"": changes}, where)
        for key, value in changes.items():
            if key not in _TOP_KEYS:
                raise InputError(f"unknown table {key!r}; allowed: {', '.join(_TOP_KEYS)}", where=where)
            if isinstance(value, Mapping) and isinstance(raw.get(key), dict) and key not in ("fit",):
                merged = dict(raw[key])
                if key == "exposure":
                    if "charge_uC" in value:
                        merged.pop("particles", None)
                    if "particles" in value:
                        merged.pop("charge_uC", None)
                merged.update(value)
                raw[key] = merged
            else:
                raw[key] = value
        return _build(raw, source=where, text=text, base_dir=self.base_dir)


def _note_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{k} = {_note_value(v)}" for k, v in value.items()) + " }"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_note_value(v) for v in value) + "]"
    return repr(value)


def override_note(changes: Mapping[str, Mapping[str, Any]], source: str) -> str:
    """TOML comment lines recording changes made over a run file's text.

    A run changed after reading (:meth:`Run.with_overrides`, a series member's charge or
    calibration, a planned set-up) keeps its file's text with these lines appended, so the text
    stored in a result file says what was inverted, and a resume with other changes is refused
    (the text differs).  Comments: the text still parses to the file's own values.

    Parameters
    ----------
    changes : mapping
        ``{prefix: {table: {key: value}}}``; the prefix (a measurement's name, or ``""``) is
        written before each table.
    source : str
        Where the changes came from.
    """
    lines = []
    for prefix, tables in changes.items():
        for table, value in (tables or {}).items():
            head = f"{prefix}.{table}" if prefix else str(table)
            if isinstance(value, Mapping) and table not in ("fit",):
                lines += [f"# {head}.{key} = {_note_value(v)}" for key, v in value.items()]
            else:
                lines.append(f"# {head} = {_note_value(value)}")
    if not lines:
        return ""
    return ("\n# ---- changed over the tables above (" + " ".join(str(source).split())
            + "); comments, not read ----\n" + "\n".join(lines) + "\n")


# ----------------------------------------------------------------------------------------------
# reading
# ----------------------------------------------------------------------------------------------
def load_run(path) -> Run:
    """Read and check a run file.

    Parameters
    ----------
    path : str or Path
        The TOML file.  Paths inside it are resolved relative to its folder.

    Returns
    -------
    Run

    Raises
    ------
    InputError
        For a missing or unreadable file and for every bad key or value.
    """
    p = Path(path)
    if not p.exists():
        raise InputError("run file not found; give the path of an existing .toml file", where=str(path))
    if p.is_dir():
        raise InputError("this is a folder, not a run file; give the path of a .toml file", where=str(path))
    data = p.read_bytes()
    from ._spectrum_io import decode_text

    try:
        # UTF-8, or a byte-order mark for UTF-8 (dropped), UTF-16 or UTF-32
        text, _ = decode_text(data)
    except UnicodeDecodeError as exc:
        encoding = "UTF-8" if exc.encoding.startswith("utf-8") else exc.encoding.upper()
        raise InputError(f"not a {encoding} text file (byte {exc.start}); a run file is TOML "
                         "text", where=str(path)) from None
    return parse_run(text, source=str(path), base_dir=p.resolve().parent)


_TOML_AT = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")


def parse_run(text: str, source: str = "<string>", base_dir=None) -> Run:
    """Check a run file given as text.

    Parameters
    ----------
    text : str
        TOML text.
    source : str
        Name used in error messages.
    base_dir : str or Path, optional
        Folder against which relative paths are resolved (default: the current folder).
    """
    text = text.removeprefix("\ufeff")  # a byte-order mark left by an editor
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = _TOML_AT.search(msg)
        where = source
        if m:
            where = f"{source}: line {m.group(1)}"
            msg = msg[: m.start()]
        raise InputError(f"TOML syntax error: {msg[:1].lower() + msg[1:]}; the run file must be "
                         "valid TOML (key = value, [table], [[layer]])", where=where) from None
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    if "measurement" in raw:
        n = len(raw["measurement"]) if isinstance(raw["measurement"], list) else 1
        raise InputError(f"this run file holds {n} [[measurement]] tables, each naming its own "
                         "spectrum; allowed here: a run file of one measurement (sondage invert "
                         "RUN.toml -o RESULT.h5 without SPECTRUM and sondage check read several)",
                         where=f"{source}: measurement")
    return _build(raw, source=source, text=text, base_dir=base)


_MISSING = object()


class _Table:
    """A TOML table being read: tracks its dotted name and reports unknown keys."""

    def __init__(self, source: str, name: str, value, allowed: tuple[str, ...]):
        self.source = source
        self.name = name
        if not isinstance(value, dict):
            raise InputError(f"expected a table ([{name}] or {{...}}), got {_kind(value)}",
                             where=self.where_root())
        self.data = value
        unknown = [k for k in value if k not in allowed]
        if unknown:
            place = f"[{name}]" if name else "the run file's top level"
            raise InputError(f"unknown key {unknown[0]!r} in {place}; allowed keys: "
                             f"{', '.join(allowed)}", where=self.where(unknown[0]))

    def where_root(self) -> str:
        return f"{self.source}: {self.name}"

    def where(self, key: str) -> str:
        return f"{self.source}: {self.name}.{key}" if self.name else f"{self.source}: {key}"

    def has(self, key: str) -> bool:
        return key in self.data

    def get(self, key: str, default=_MISSING):
        if key not in self.data:
            if default is _MISSING:
                place = f"[{self.name}]" if self.name else "the run file's top level"
                raise InputError(f"missing required key {key!r} in {place}", where=self.where(key))
            return default
        return self.data[key]

    def number(self, key: str, default=_MISSING, *, low=None, high=None, low_open=True,
               high_open=False, unit: str = "", allowed_text: str | None = None):
        """A finite real number, optionally in (low, high]."""
        v = self.get(key, default)
        if v is default and default is not _MISSING:
            return v
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise InputError(f"expected a number{_unit(unit)}, got {_kind(v)}", where=self.where(key))
        v = float(v)
        rng = allowed_text or _range_text(low, high, low_open, high_open, unit)
        if not math.isfinite(v):
            raise InputError(f"{v} is not finite; allowed: {rng}", where=self.where(key))
        if low is not None and (v <= low if low_open else v < low):
            raise InputError(f"{_fmt(v)} is out of range; allowed: {rng}", where=self.where(key))
        if high is not None and (v >= high if high_open else v > high):
            raise InputError(f"{_fmt(v)} is out of range; allowed: {rng}", where=self.where(key))
        return v

    def string(self, key: str, default=_MISSING, choices: tuple[str, ...] | None = None):
        v = self.get(key, default)
        if v is default and default is not _MISSING:
            return v
        if not isinstance(v, str):
            raise InputError(f"expected a text string in quotes, got {_kind(v)}", where=self.where(key))
        if choices is not None and v not in choices:
            raise InputError(f"unknown value {v!r}; allowed: {', '.join(repr(c) for c in choices)}",
                             where=self.where(key))
        return v

    def boolean(self, key: str, default=_MISSING):
        v = self.get(key, default)
        if not isinstance(v, bool):
            raise InputError(f"expected true or false, got {_kind(v)}", where=self.where(key))
        return v


def _kind(v) -> str:
    if isinstance(v, bool):
        return f"the boolean {str(v).lower()}"
    if isinstance(v, (int, float)):
        return f"the number {v!r}"
    if isinstance(v, str):
        return f"the string {v!r}"
    if isinstance(v, dict):
        return "a table"
    if isinstance(v, list):
        return "an array"
    return type(v).__name__


def _unit(unit: str) -> str:
    return f" in {unit}" if unit else ""


def _fmt(v: float) -> str:
    return f"{v:g}"


def _hinted(what: str, hint: str, allowed: str) -> str:
    """``<what is wrong>; [<likely slip>] allowed: <what is allowed>`` (the house form)."""
    return f"{what}; {hint + ' ' if hint else ''}allowed: {allowed}"


def _range_text(low, high, low_open, high_open, unit) -> str:
    u = f" {unit}" if unit else ""
    if low is not None and high is not None:
        return f"{'(' if low_open else '['}{_fmt(low)}, {_fmt(high)}{')' if high_open else ']'}{u}"
    if low is not None:
        return f"{'>' if low_open else '>='} {_fmt(low)}{u}"
    if high is not None:
        return f"{'<' if high_open else '<='} {_fmt(high)}{u}"
    return f"any finite number{u}"


def _build(raw: dict, source: str, text: str, base_dir: Path) -> Run:
    top = _Table(source, "", raw, _TOP_KEYS)
    title = top.string("title", "")
    beam = _read_beam(source, top)
    geometry = _read_geometry(source, top)
    detector = _read_detector(source, top, beam)
    calibration = _read_calibration(source, top)
    exposure = _read_exposure(source, top)
    layers = _read_layers(source, top)
    _check_calibration_reach(source, beam, geometry, calibration, layers)
    physics = _read_physics(source, top, layers, base_dir)
    fit = raw.get("fit", {})
    if not isinstance(fit, dict):
        raise InputError(f"expected a table [fit], got {_kind(fit)}", where=f"{source}: fit")
    return Run(title=title, beam=beam, geometry=geometry, detector=detector,
               calibration=calibration, exposure=exposure, layers=tuple(layers), physics=physics,
               fit=fit, source=source, text=text, raw=raw, base_dir=base_dir)


def _section(source: str, top: _Table, name: str, allowed: tuple[str, ...], required: bool = True):
    if name not in top.data:
        if not required:
            return _Table(source, name, {}, allowed)
        raise InputError(f"missing required table [{name}]", where=f"{source}: {name}")
    return _Table(source, name, top.data[name], allowed)


def _read_beam(source, top) -> Beam:
    t = _section(source, top, "beam", ("ion", "energy_keV"))
    species = t.string("ion")
    try:
        beam_ion = ion(species)
    except InputError as exc:
        raise InputError(exc.message, where=t.where("ion")) from None
    low, high = beam_energy_range_keV(beam_ion)
    allowed = f"{low:g} to {high:.0f} keV" + ("" if species == "4He" else f" for {species}")
    energy = t.number("energy_keV", unit="keV", allowed_text=allowed)
    where = t.where("energy_keV")
    if energy <= 0:
        raise InputError(f"{_fmt(energy)} is out of range; allowed: {allowed}", where=where)
    if energy < low:
        hint = "did you give MeV?" if low <= 1000.0 * energy <= high else ""
        raise InputError(_hinted(f"{_fmt(energy)} keV is far below any backscattering beam",
                                 hint, allowed), where=where)
    if energy > high:
        hint = "did you give eV?" if low <= energy / 1000.0 <= high else ""
        raise InputError(_hinted(f"{_fmt(energy)} keV is above {high:.0f} keV, the top of the "
                                 "helium stopping parameterisation", hint, allowed), where=where)
    from ._stopping import VALIDATED_MAX_KEV, StoppingRangeWarning

    validated = VALIDATED_MAX_KEV * beam_ion.mass_u / ion("4He").mass_u
    if energy > validated:
        # the README promises this warning; stacklevel 4 names the caller of load_run/parse_run
        warn_input(f"{species} at {_fmt(energy)} keV is above {validated:.0f} keV, the highest "
                   "energy at which the helium stopping has been compared with NIST ASTAR; "
                   "expect stopping errors of several per cent", where=where,
                   category=StoppingRangeWarning, stacklevel=4)
    return Beam(beam_ion, energy)


def _read_geometry(source, top) -> Geometry:
    t = _section(source, top, "geometry",
                 ("scattering_deg", "incidence_deg", "exit_deg", "tilt_deg", "layout"))
    theta = t.number("scattering_deg", low=90.0, high=180.0, unit="degrees")
    direct = t.has("incidence_deg") or t.has("exit_deg")
    tilted = t.has("tilt_deg") or t.has("layout")
    if direct and tilted:
        key = "tilt_deg" if t.has("tilt_deg") else "layout"
        raise InputError("give either incidence_deg and exit_deg, or tilt_deg and layout, not both",
                         where=t.where(key))
    angle_text = "[0, 90) degrees from the sample normal"
    if tilted:
        for key in ("tilt_deg", "layout"):
            if not t.has(key):
                raise InputError(f"missing required key {key!r}: a tilt needs both tilt_deg and "
                                 "layout ('IBM' or 'Cornell')", where=t.where(key))
        tilt = t.number("tilt_deg", low=-90.0, high=90.0, low_open=True, high_open=True,
                        unit="degrees")
        layout = t.string("layout", choices=LAYOUT_CHOICES)
        th1, th2 = (ibm_angles if layout == "IBM" else cornell_angles)(theta, tilt)
        if th2 >= 90.0:
            raise InputError(f"this tilt gives an exit angle of {th2:.4g} degrees from the normal, "
                             "so the detector would look at the back of the sample; the exit angle "
                             "must be below 90 degrees", where=t.where("tilt_deg"))
        return Geometry(theta, th1, th2, layout, tilt)
    for key in ("incidence_deg", "exit_deg"):
        if not t.has(key):
            raise InputError(f"missing required key {key!r}: give incidence_deg and exit_deg, "
                             "or tilt_deg and layout", where=t.where(key))
    th1 = t.number("incidence_deg", low=0.0, high=90.0, low_open=False, high_open=True,
                   allowed_text=angle_text)
    th2 = t.number("exit_deg", low=0.0, high=90.0, low_open=False, high_open=True,
                   allowed_text=angle_text)
    if not check_angle_triple(theta, th1, th2):
        raise InputError(
            f"no sample orientation gives incidence {th1:g}, exit {th2:g} and scattering "
            f"{theta:g} degrees; allowed: |incidence - exit| <= 180 - scattering <= "
            "incidence + exit", where=t.where("exit_deg"))
    return Geometry(theta, th1, th2, "direct", None)


def _read_detector(source, top, beam: Beam) -> Detector:
    t = _section(source, top, "detector", ("fwhm_keV", "solid_angle_msr"))
    # see MAX_FWHM_FRACTION for why the resolution must stay below half the beam energy
    limit = MAX_FWHM_FRACTION * beam.energy_keV
    allowed = f"(0, {limit:g}) keV, below half the {beam.energy_keV:g} keV beam energy"
    fwhm = t.number("fwhm_keV", low=0.0, unit="keV", allowed_text=allowed)
    where = t.where("fwhm_keV")
    if fwhm >= limit:
        hint = "did you give eV?" if MIN_PLAUSIBLE_FWHM_KEV <= fwhm / 1000.0 < limit else ""
        raise InputError(_hinted(f"{_fmt(fwhm)} keV is not small compared with the beam energy: "
                                 "it would smear every edge over most of the spectrum", hint,
                                 allowed), where=where)
    if fwhm < MIN_PLAUSIBLE_FWHM_KEV:
        hint = " did you give MeV?" if 1000.0 * fwhm < limit else ""
        warn_input(f"{_fmt(fwhm)} keV is finer than any backscattering detector resolves (silicon "
                   f"detectors about 10 to 20 keV, magnetic or electrostatic analysers a few "
                   f"tenths of a keV);{hint} the value is used as given", where=where, stacklevel=4)
    omega = t.number("solid_angle_msr", low=0.0, high=4000.0 * math.pi, unit="msr")
    return Detector(fwhm, omega)


def _read_calibration(source, top) -> Calibration:
    t = _section(source, top, "calibration", ("keV_per_channel", "offset_keV", "quadratic_keV"))
    gain = t.number("keV_per_channel", low=0.0, unit="keV per channel")
    offset = t.number("offset_keV", 0.0, unit="keV")
    quad = t.number("quadratic_keV", 0.0, unit="keV per channel^2")
    if quad < 0 and -gain / (2.0 * quad) < MAX_CHANNELS:
        raise InputError(f"with this negative quadratic term the energy stops increasing at channel "
                         f"{-gain / (2.0 * quad):.0f}; the calibration must increase over "
                         f"{MAX_CHANNELS} channels, so use a quadratic term >= "
                         f"{-gain / (2.0 * MAX_CHANNELS):.3g}", where=t.where("quadratic_keV"))
    return Calibration(gain, offset, quad)


def _highest_edge(beam: Beam, geometry: Geometry, layers) -> tuple[float, str]:
    """``(K E0, text)`` of the heaviest isotope in the sample, or the beam energy if none scatters.

    ``K E0`` bounds every signal from above: it is the energy of an ion scattered at the
    surface by the heaviest atom, before any energy loss.
    """
    from ._kinematics import kinematic_factor

    heaviest = None
    for layer in layers:
        for sym in layer.fractions:
            for iso, frac in layer.isotope_fractions(sym):
                if frac > 0 and iso.mass_u > beam.ion.mass_u and (
                        heaviest is None or iso.mass_u > heaviest.mass_u):
                    heaviest = iso
    if heaviest is None:
        return beam.energy_keV, f"the beam energy ({beam.energy_keV:g} keV)"
    top = kinematic_factor(beam.ion.mass_u, heaviest.mass_u, geometry.scattering_deg) * beam.energy_keV
    return top, f"the highest surface edge (K E0 of {heaviest.label}, {top:.1f} keV)"


def _check_calibration_reach(source, beam: Beam, geometry: Geometry, calibration: Calibration,
                             layers) -> None:
    """The highest surface edge must lie in a channel a spectrum can hold, with room below it.

    Refuses a gain so coarse that the whole spectrum fits into a handful of channels (eV per
    channel typed for keV), an offset above every signal, and a gain so fine that the signals
    lie beyond the last channel a spectrum may have (MeV per channel typed for keV).
    """
    top, edge = _highest_edge(beam, geometry, layers)
    gain, offset = calibration.keV_per_channel, calibration.offset_keV
    where = f"{source}: calibration."
    span = top / gain
    if span < MIN_EDGE_CHANNELS:
        hint = ("did you give eV per channel?"
                if top / (gain / 1000.0) >= MIN_EDGE_CHANNELS else "")
        raise InputError(_hinted(f"{_fmt(gain)} keV per channel puts everything from zero energy "
                                 f"up to {edge} into {span:.3g} channels", hint,
                                 f"at most {top / MIN_EDGE_CHANNELS:.4g} keV per channel, so that "
                                 f"the edge lies at least {MIN_EDGE_CHANNELS} channels above zero "
                                 "energy"), where=where + "keV_per_channel")
    if offset >= top:
        # an offset many times the beam energy is no keV value anyone meant
        hint = ("did you give eV?" if offset > 5.0 * beam.energy_keV and offset / 1000.0 < top
                else "")
        if offset >= beam.energy_keV:
            what = (f"the beam energy {beam.energy_keV:g} keV is not above the lowest channel's "
                    f"energy {offset:g} keV, so no backscattered particle can reach the spectrum")
        else:
            what = (f"channel 0 starts at {offset:g} keV, above {edge}, so no backscattered "
                    "particle can reach the spectrum")
        raise InputError(_hinted(what, hint, f"an offset below {top:.1f} keV"),
                         where=where + "offset_keV")
    channel = calibration.channel_of(top)
    if not (math.isfinite(channel) and channel < MAX_CHANNELS):
        at = f"channel {channel:.0f}" if math.isfinite(channel) else "no channel"
        what = (f"the calibration puts {edge} in {at}, beyond the {MAX_CHANNELS} channels a "
                "spectrum may have")
        allowed = f"a calibration that puts it below channel {MAX_CHANNELS}"
        if offset < 0 and Calibration(gain, 0.0, calibration.quadratic_keV).channel_of(top) \
                < MAX_CHANNELS:
            # the gain alone would be fine: the negative offset pushes the edge out
            raise InputError(_hinted(what, "", allowed), where=where + "offset_keV")
        coarser = top / (gain * 1000.0)
        hint = ("did you give MeV per channel?"
                if MIN_EDGE_CHANNELS <= coarser < MAX_CHANNELS else "")
        raise InputError(_hinted(what, hint, allowed), where=where + "keV_per_channel")


def _read_exposure(source, top) -> Exposure:
    t = _section(source, top, "exposure", ("charge_uC", "particles", "charge_state", "live_fraction"))
    if t.has("charge_uC") == t.has("particles"):
        raise InputError("give exactly one of charge_uC (integrated charge, microcoulomb) and "
                         "particles (number of incident ions)",
                         where=t.where("particles" if t.has("particles") else "charge_uC"))
    charge = t.number("charge_uC", None, low=0.0, unit="microcoulomb")
    particles = t.number("particles", None, low=0.0)
    state = t.get("charge_state", 1)
    if isinstance(state, bool) or not isinstance(state, int) or state not in (1, 2):
        raise InputError(f"expected the whole number 1 or 2 (charge of the helium ions in units of "
                         f"e), got {_kind(state)}", where=t.where("charge_state"))
    live = t.number("live_fraction", 1.0, low=0.0, high=1.0)
    exposure = Exposure(charge, particles, state, live)
    if charge is not None and charge < MIN_PLAUSIBLE_CHARGE_UC:
        hint = (" did you give coulombs (1 uC = 1e-6 C)?"
                if MIN_PLAUSIBLE_CHARGE_UC <= charge * 1e6 <= 1e5 else "")
        warn_input(f"{_fmt(charge)} uC is implausibly small for a backscattering spectrum (they take "
                   f"about 1 to 100 uC);{hint} the value is used as microcoulombs",
                   where=t.where("charge_uC"), stacklevel=4)
    fewest = MIN_PLAUSIBLE_CHARGE_UC * 1e-6 / scipy.constants.e
    if particles is not None and particles < fewest:
        warn_input(f"{_fmt(particles)} ions are implausibly few for a backscattering spectrum "
                   f"(1 uC of singly charged ions is {1e-6 / scipy.constants.e:.3g} ions; "
                   f"warning below {fewest:.2g}); did you give a charge? the value is used as a "
                   "number of ions", where=t.where("particles"), stacklevel=4)
    return exposure


def _read_layers(source, top) -> list[Layer]:
    if "layer" not in top.data:
        raise InputError("missing required [[layer]] tables; describe the sample from the surface "
                         "down with one [[layer]] each", where=f"{source}: layer")
    entries = top.data["layer"]
    if not isinstance(entries, list) or not entries:
        raise InputError(f"expected one or more [[layer]] tables, got {_kind(entries)}",
                         where=f"{source}: layer")
    layers: list[Layer] = []
    names: set[str] = set()
    for i, entry in enumerate(entries, start=1):
        t = _Table(source, f"layer[{i}]", entry,
                   ("name", "formula", "areal_density_1e15", "thickness_nm", "density_g_cm3",
                    "isotopes", "substrate"))
        name = t.string("name", f"layer {i}")
        if not name.strip():
            raise InputError("empty layer name; give a short text or leave the key out",
                             where=t.where("name"))
        if name in names:
            raise InputError(f"layer name {name!r} is used twice; each layer needs its own name",
                             where=t.where("name"))
        names.add(name)
        formula = t.string("formula")
        try:
            fractions = parse_formula(formula)
        except InputError as exc:
            raise InputError(exc.message, where=t.where("formula")) from None
        for read, meant in capitalisation_slips(formula):
            warn_input(f"{formula!r} reads {read!r} as the two elements {read[0]} and "
                       f"{read[1]}; if you meant {meant} (Z = {element(meant).z}) write "
                       f"{formula.replace(read, meant, 1)!r} (symbols are case-sensitive)",
                       where=t.where("formula"))
        substrate = t.boolean("substrate", False)
        if substrate and i != len(entries):
            raise InputError(f"only the last layer can be the substrate, but this is layer {i} of "
                             f"{len(entries)}; move it to the end or set substrate = false",
                             where=t.where("substrate"))
        density = t.number("density_g_cm3", None, low=0.0, high=30.0, unit="g/cm3")
        isotopes = _read_isotopes(t, fractions)
        has_n, has_nm = t.has("areal_density_1e15"), t.has("thickness_nm")
        if substrate:
            if has_n or has_nm:
                key = "areal_density_1e15" if has_n else "thickness_nm"
                raise InputError("a substrate is semi-infinite and takes no areal density or "
                                 "thickness; remove the key or set substrate = false",
                                 where=t.where(key))
            areal = None
        else:
            if has_n and has_nm:
                raise InputError("give either areal_density_1e15 or thickness_nm, not both",
                                 where=t.where("thickness_nm"))
            if not (has_n or has_nm):
                raise InputError("missing required key 'areal_density_1e15' (or thickness_nm with "
                                 "density_g_cm3); or set substrate = true on the last layer",
                                 where=t.where("areal_density_1e15"))
            if has_n:
                areal = t.number("areal_density_1e15", low=0.0, unit="1e15 atoms/cm2")
            else:
                thickness = t.number("thickness_nm", low=0.0, unit="nm")
                if density is None:
                    raise InputError("thickness_nm needs density_g_cm3 to give an areal density; "
                                     "add density_g_cm3 or give areal_density_1e15 instead",
                                     where=t.where("thickness_nm"))
                probe = Layer(name, fractions, None, density, isotopes, False, formula)
                areal = areal_density_from_nm(thickness, probe.atoms_per_cm3)
        layers.append(Layer(name, fractions, areal, density, isotopes, substrate, formula))
    return layers


def _read_isotopes(t: _Table, fractions: dict) -> dict:
    value = t.get("isotopes", {})
    where = t.where("isotopes")
    if not isinstance(value, dict):
        raise InputError("expected a table such as { O = { 18 = 0.95, 16 = 0.05 } }, got "
                         f"{_kind(value)}", where=where)
    out: dict[str, dict[int, float]] = {}
    for sym, table in value.items():
        w = f"{where}.{sym}"
        if sym not in fractions:
            raise InputError(f"element {sym!r} is not in this layer's formula "
                             f"({', '.join(fractions)}); isotope fractions apply to elements of "
                             "the layer", where=w)
        if not isinstance(table, dict) or not table:
            raise InputError("expected a table of mass number = fraction, e.g. { 18 = 0.95, "
                             f"16 = 0.05 }}, got {_kind(table)}", where=w)
        parts: dict[int, float] = {}
        for a_text, frac in table.items():
            wa = f"{w}.{a_text}"
            if not str(a_text).isdigit():
                raise InputError(f"{a_text!r} is not a mass number; write whole numbers such as "
                                 "18 = 0.95", where=wa)
            a = int(a_text)
            try:
                isotope(sym, a)
            except InputError as exc:
                raise InputError(exc.message, where=wa) from None
            if isinstance(frac, bool) or not isinstance(frac, (int, float)) or not 0.0 <= frac <= 1.0:
                raise InputError(f"expected a fraction in [0, 1], got {_kind(frac)}", where=wa)
            parts[a] = float(frac)
        total = sum(parts.values())
        if abs(total - 1.0) > 1e-3:
            raise InputError(f"the isotope fractions of {sym} add up to {total:.4g}; they must sum "
                             "to 1 (within 0.001)", where=w)
        out[sym] = {a: f / total for a, f in parts.items()}
    return out


def _read_physics(source, top, layers: list[Layer], base_dir: Path) -> Physics:
    t = _section(source, top, "physics",
                 ("screening", "slice_fraction", "max_slice_1e15", "stopping_tables",
                  "stopping_scale", "cross_section_ratio", "pileup", "straggling", "carbon"),
                 required=False)
    present = {sym for layer in layers for sym in layer.fractions}
    screening = t.string("screening", "andersen", choices=SCREENING_CHOICES)
    straggling = t.string("straggling", STRAGGLING_CHOICES[0], choices=STRAGGLING_CHOICES)
    carbon = t.string("carbon", CARBON_CHOICES[0], choices=CARBON_CHOICES)
    slice_fraction = t.number("slice_fraction", 0.25, low=0.0, high=1.0)
    max_slice = t.number("max_slice_1e15", None, low=0.0, unit="1e15 atoms/cm2")

    def per_element(key: str, kind: str):
        value = t.get(key, {})
        if not isinstance(value, dict):
            raise InputError(f"expected a table such as {{ Si = ... }}, got {_kind(value)}",
                             where=t.where(key))
        out = {}
        for sym, v in value.items():
            w = f"{t.where(key)}.{sym}"
            if sym not in present:
                try:
                    element(sym)
                except InputError as exc:
                    raise InputError(exc.message, where=w) from None
                raise InputError(f"element {sym!r} is in no layer; elements of the sample: "
                                 f"{', '.join(sorted(present))}", where=w)
            if kind == "path":
                if not isinstance(v, str) or not v:
                    raise InputError(f"expected a file name in quotes, got {_kind(v)}", where=w)
                p = Path(v)
                p = p if p.is_absolute() else (base_dir / p)
                if not p.is_file():
                    raise InputError(f"file {v!r} not found (paths are relative to the run file's "
                                     "folder)", where=w)
                out[sym] = p
            else:
                if isinstance(v, bool) or not isinstance(v, (int, float)) or not (0.0 < v <= 10.0):
                    raise InputError(f"expected a scale factor in (0, 10], got {_kind(v)}", where=w)
                out[sym] = float(v)
        return out

    tables = per_element("stopping_tables", "path")
    scale = per_element("stopping_scale", "number")
    ratio = per_element("cross_section_ratio", "path")
    pileup = Pileup()
    if t.has("pileup"):
        p = _Table(source, "physics.pileup", t.data["pileup"],
                   ("enabled", "resolving_time_us", "count_rate_hz"))
        enabled = p.boolean("enabled", False)
        tau = p.number("resolving_time_us", 0.5, low=0.0, unit="microseconds")
        if enabled and not p.has("count_rate_hz"):
            raise InputError("missing required key 'count_rate_hz' (pulses per second at the "
                             "detector) when pile-up is enabled", where=p.where("count_rate_hz"))
        rate = p.number("count_rate_hz", 0.0, low=0.0, low_open=False, unit="Hz")
        pileup = Pileup(enabled, tau, rate)
        if enabled and pileup.probability >= 0.1:
            raise InputError(f"count_rate_hz * resolving_time gives a pile-up probability of "
                             f"{pileup.probability:.3g}; the first-order model holds only below 0.1",
                             where=p.where("count_rate_hz"))
    return Physics(screening, slice_fraction, max_slice, tables, scale, ratio, pileup,
                   straggling, carbon)

