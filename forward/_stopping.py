"""Stopping cross-sections of helium ions in the elements and in mixtures.

Everything here is in eV/(1e15 atoms/cm2) per target atom, with energies in keV, and every
function accepts a scalar or a numpy array of energies.  Kept whole: the electronic, nuclear
and tabulated stopping share the coefficient tables, range checks and units of one model.

Electronic stopping of 4He
    J. F. Ziegler, *Helium: Stopping Powers and Ranges in All Elemental Matter* (Pergamon,
    New York, 1977), with the revisions adopted in ICRU Report 49, *Stopping Powers and Ranges
    for Protons and Alpha Particles* (1993).  Five coefficients per element, read from
    ``data/stopping/helium_ziegler1977_icru49.csv``.  With T the 4He energy in MeV::

        S_low  = a0 (1000 T)^a1
        S_high = (a2 / T) ln(1 + a3 / T + a4 T)
        S      = S_low S_high / (S_low + S_high)

    Below 1 keV the 1 keV value is scaled with sqrt(E) (stopping proportional to velocity).
    Carbon: the coefficient file's row is graphite; ICRU Report 49 gives amorphous carbon its
    own coefficients (``data/stopping/helium_icru49_phases.csv``), chosen with
    ``carbon="amorphous"``.

Electronic stopping of 3He
    The 4He value at the same velocity, i.e. at E m(4He)/m(3He) (stopping of a bare or
    equally dressed ion depends on its velocity, not its mass; common practice).

Nuclear stopping
    The universal reduced nuclear stopping of J. F. Ziegler, J. P. Biersack and U. Littmark,
    *The Stopping and Range of Ions in Solids* (Pergamon, New York, 1985).

Mixtures
    Bragg's rule: the atom-fraction weighted mean of the elements' stopping cross-sections
    (W. H. Bragg and R. Kleeman, Philos. Mag. 10 (1905) 318).

Measured agreement of the electronic part with NIST ASTAR (which implements ICRU Report 49)
is written down in ``docs/stopping_vs_astar.md`` by ``benchmarks/stopping_vs_astar.py``.
"""

from __future__ import annotations

import csv
import math
import warnings
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Mapping

import numpy as np
import periodictable

from ._elements import element, ion as _ion, parse_formula
from ._errors import InputError

__all__ = [
    "CARBON_PHASES",
    "HELIUM_COEFFICIENT_FILE",
    "HELIUM_PHASE_FILE",
    "HELIUM_UNCERTAINTY_FILE",
    "STOPPING_SLOPE_REFERENCE_KEV",
    "UNCERTAINTY_BAND_KEV",
    "stopping_uncertainty",
    "VALIDATED_MAX_KEV",
    "StoppingRangeWarning",
    "StoppingTable",
    "StoppingModel",
    "helium_electronic_stopping",
    "nuclear_stopping",
    "reduced_nuclear_stopping",
    "reduced_energy",
    "stopping",
    "load_stopping_table",
    "check_stopping_range",
    "find_stopping_data",
]

#: File name of the 4He electronic stopping coefficients (Ziegler 1977, ICRU 49 revisions).
HELIUM_COEFFICIENT_FILE = "helium_ziegler1977_icru49.csv"
#: File name of the 4He coefficients of other phases of an element (ICRU 49 amorphous carbon).
HELIUM_PHASE_FILE = "helium_icru49_phases.csv"
#: Phases of carbon the helium stopping knows; the first is the default (the main file's row).
CARBON_PHASES = ("graphite", "amorphous")

#: Highest 4He energy (keV) up to which the electronic stopping has been compared with NIST
#: ASTAR element by element (tests/test_stopping.py, docs/stopping_vs_astar.md).  Up to here
#: most elements agree within a few per cent; above it the fitted form and the database part
#: ways (e.g. Be and Xe by 8-17 % at 4-6 MeV).  RBS with 1-3 MeV helium stays below it.
VALIDATED_MAX_KEV = 3000.0

#: Reference energy (keV) of a stopping slope: a slope ``b`` multiplies an element's stopping by
#: ``(E / STOPPING_SLOPE_REFERENCE_KEV)**b``, leaving it unchanged at this energy (the middle of
#: the energies a 1-3 MeV helium beam spends its path at).
STOPPING_SLOPE_REFERENCE_KEV = 1000.0

#: Energy (keV) below which the electronic stopping is scaled with sqrt(E).
_LOW_ENERGY_KEV = 1.0


class StoppingRangeWarning(UserWarning):
    """Stopping is being evaluated above the energy range it has been validated for."""


# --------------------------------------------------------------------------------------------
# data files
# --------------------------------------------------------------------------------------------

def find_stopping_data(name: str) -> Path:
    """Locate a file of the stopping data folder.

    Looks first in ``forward/_data/stopping/`` (where an installed wheel carries it), then in
    ``data/stopping/`` at the top of a source checkout.

    Parameters
    ----------
    name : str
        File name, e.g. ``"helium_ziegler1977_icru49.csv"``.

    Returns
    -------
    pathlib.Path
        The first existing path.
    """
    here = Path(__file__).resolve()
    candidates = [here.parent / "_data" / "stopping" / name,
                  here.parents[1] / "data" / "stopping" / name]
    for path in candidates:
        if path.is_file():
            return path
    raise FileNotFoundError(f"stopping data {name!r} not found; looked in "
                            + ", ".join(str(p.parent) for p in candidates))


@lru_cache(maxsize=1)
def _helium_coefficients() -> np.ndarray:
    """Coefficients a0..a4 as a (93, 5) array indexed by Z (row 0 is unused, NaN)."""
    path = find_stopping_data(HELIUM_COEFFICIENT_FILE)
    table = np.full((93, 5), np.nan)
    with path.open(newline="") as fh:
        rows = csv.DictReader(line for line in fh if not line.lstrip().startswith("#"))
        for row in rows:
            z = int(row["Z"])
            table[z] = [float(row[k]) for k in ("a0", "a1", "a2", "a3", "a4")]
    if np.isnan(table[1:]).any():
        missing = [z for z in range(1, 93) if np.isnan(table[z]).any()]
        raise RuntimeError(f"{path}: coefficients missing for Z = {missing}")
    table.setflags(write=False)
    return table


@lru_cache(maxsize=1)
def _helium_phase_coefficients() -> dict:
    """{(Z, phase): (a0..a4)} of the phase file."""
    path = find_stopping_data(HELIUM_PHASE_FILE)
    out = {}
    with path.open(newline="") as fh:
        rows = csv.DictReader(line for line in fh if not line.lstrip().startswith("#"))
        for row in rows:
            out[(int(row["Z"]), row["phase"])] = tuple(float(row[k])
                                                       for k in ("a0", "a1", "a2", "a3", "a4"))
    return out


def _check_carbon(carbon) -> str:
    if carbon not in CARBON_PHASES:
        raise InputError(f"unknown carbon phase {carbon!r}; allowed: "
                         + ", ".join(repr(c) for c in CARBON_PHASES))
    return carbon


# --------------------------------------------------------------------------------------------
# input checks
# --------------------------------------------------------------------------------------------

def _energies(energy_keV, what: str = "energy_keV") -> np.ndarray:
    e = np.asarray(energy_keV, dtype=float)
    if not np.all(np.isfinite(e)) or np.any(e < 0):
        bad = e[~(np.isfinite(e) & (e >= 0))].ravel()[0]
        raise InputError(f"{what} = {bad!r} keV; energies must be finite and >= 0")
    return e


def _check_z(z2) -> int:
    if isinstance(z2, (bool, np.bool_)) or not isinstance(z2, (int, np.integer)) \
            or not 1 <= int(z2) <= 92:
        raise InputError(f"target atomic number {z2!r}; allowed: an integer from 1 (H) to 92 (U)")
    return int(z2)


@lru_cache(maxsize=None)
def _target(symbol: str) -> tuple[int, float]:
    """(Z, natural mean mass in u) of a target element.

    Elements without a natural isotopic composition (Tc, Pm, Po..Ac, Pa) get periodictable's
    standard mass (that of their longest-lived isotope).
    """
    try:
        el = element(symbol)
        return el.z, el.mass_u
    except InputError:
        pt = getattr(periodictable, symbol, None) if isinstance(symbol, str) and symbol.isalpha() \
            else None
        if pt is None or not hasattr(pt, "number") or not 1 <= pt.number <= 92:
            raise
        return int(pt.number), float(pt.mass)


# --------------------------------------------------------------------------------------------
# electronic stopping
# --------------------------------------------------------------------------------------------

def helium_electronic_stopping(z2: int, energy_keV, *, carbon: str = "graphite"):
    """Electronic stopping cross-section of 4He in element ``z2``.

    Ziegler (1977) five-coefficient form with the ICRU Report 49 revisions (see module notes).

    Parameters
    ----------
    z2 : int
        Atomic number of the target element, 1-92.
    energy_keV : float or array_like
        4He kinetic energy in keV, >= 0.
    carbon : {"graphite", "amorphous"}, optional
        Coefficients used for carbon (z2 = 6): graphite (default) or ICRU Report 49's
        amorphous carbon.  Ignored for other elements.

    Returns
    -------
    float or numpy.ndarray
        Stopping cross-section in eV/(1e15 atoms/cm2), same shape as ``energy_keV``.
    """
    z2 = _check_z(z2)
    e = _energies(energy_keV)
    if z2 == 6 and _check_carbon(carbon) != CARBON_PHASES[0]:
        a0, a1, a2, a3, a4 = _helium_phase_coefficients()[(6, carbon)]
    else:
        a0, a1, a2, a3, a4 = _helium_coefficients()[z2]
    e_fit = np.maximum(e, _LOW_ENERGY_KEV)
    t_MeV = e_fit / 1000.0
    s_low = a0 * e_fit ** a1
    s_high = (a2 / t_MeV) * np.log1p(a3 / t_MeV + a4 * t_MeV)
    s = s_low * s_high / (s_low + s_high)
    s = np.where(e < _LOW_ENERGY_KEV, s * np.sqrt(e / _LOW_ENERGY_KEV), s)
    return s if s.ndim else float(s)


# --------------------------------------------------------------------------------------------
# nuclear stopping (ZBL 1985)
# --------------------------------------------------------------------------------------------

# Constants of the universal nuclear stopping, J. F. Ziegler, J. P. Biersack, U. Littmark,
# The Stopping and Range of Ions in Solids (Pergamon, 1985); from memory (the book is not at
# hand).  tests/test_stopping.py derives the two prefactors independently from the ZBL
# screening length 0.8854 a0 / (Z1^0.23 + Z2^0.23) and scipy.constants.
_ZBL_EPS_PER_KEV = 32.53      # reduced energy per keV (lab), times m2 / (z1 z2 (m1+m2) X)
_ZBL_SN_PREFACTOR = 8.462     # eV/(1e15 atoms/cm2), times z1 z2 m1 / ((m1+m2) X)
_ZBL_EPS_SWITCH = 30.0        # above this the unscreened (Coulomb) form is used


def _screening_sum(z1: float, z2: float) -> float:
    return z1 ** 0.23 + z2 ** 0.23


def reduced_energy(z1: float, m1_u: float, z2: float, m2_u: float, energy_keV):
    """ZBL reduced energy of a projectile (z1, m1) on a target atom (z2, m2).

    Parameters
    ----------
    z1, z2 : float
        Atomic numbers of projectile and target.
    m1_u, m2_u : float
        Masses in u.
    energy_keV : float or array_like
        Projectile energy in the laboratory frame, keV.

    Returns
    -------
    float or numpy.ndarray
        Reduced energy (dimensionless).
    """
    e = _energies(energy_keV)
    eps = _ZBL_EPS_PER_KEV * m2_u * e / (z1 * z2 * (m1_u + m2_u) * _screening_sum(z1, z2))
    return eps if eps.ndim else float(eps)


def reduced_nuclear_stopping(eps):
    """ZBL universal reduced nuclear stopping s_n(eps).

    ``ln(1 + 1.1383 eps) / (2 (eps + 0.01321 eps^0.21226 + 0.19593 eps^0.5))`` for
    eps <= 30 and the unscreened Coulomb form ``ln(eps) / (2 eps)`` above (ZBL 1985).

    Parameters
    ----------
    eps : float or array_like
        Reduced energy, >= 0.

    Returns
    -------
    float or numpy.ndarray
        Reduced nuclear stopping (dimensionless); 0 at eps = 0.
    """
    x = np.asarray(eps, dtype=float)
    if not np.all(np.isfinite(x)) or np.any(x < 0):
        raise InputError("reduced energy must be finite and >= 0")
    with np.errstate(divide="ignore", invalid="ignore"):
        low = np.log1p(1.1383 * x) / (2.0 * (x + 0.01321 * x ** 0.21226 + 0.19593 * np.sqrt(x)))
        high = np.log(np.maximum(x, _ZBL_EPS_SWITCH)) / (2.0 * np.maximum(x, _ZBL_EPS_SWITCH))
    s = np.where(x > _ZBL_EPS_SWITCH, high, np.where(x > 0, low, 0.0))
    return s if s.ndim else float(s)


def nuclear_stopping(z1: float, m1_u: float, z2: float, m2_u: float, energy_keV):
    """Nuclear stopping cross-section, ZBL (1985) universal form.

    Parameters
    ----------
    z1, z2 : float
        Atomic numbers of projectile and target atom.
    m1_u, m2_u : float
        Masses of projectile and target atom in u.
    energy_keV : float or array_like
        Projectile energy (lab), keV, >= 0.

    Returns
    -------
    float or numpy.ndarray
        Nuclear stopping cross-section in eV/(1e15 atoms/cm2).
    """
    for name, v in (("z1", z1), ("m1_u", m1_u), ("z2", z2), ("m2_u", m2_u)):
        if not (isinstance(v, (int, float, np.integer, np.floating)) and math.isfinite(v) and v > 0):
            raise InputError(f"nuclear stopping: {name} = {v!r}; must be a positive number")
    eps = reduced_energy(z1, m1_u, z2, m2_u, energy_keV)
    s = (_ZBL_SN_PREFACTOR * z1 * z2 * m1_u / ((m1_u + m2_u) * _screening_sum(z1, z2))
         * np.asarray(reduced_nuclear_stopping(eps)))
    return s if s.ndim else float(s)


# --------------------------------------------------------------------------------------------
# user tables
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class StoppingTable:
    """A user stopping table: total stopping per atom of one element versus energy.

    Interpolated log-log between the tabulated points.  Energies outside the tabulated range
    raise :class:`forward.InputError` (a ValueError): a user table is trusted only where it
    has values, so it must cover every energy the run reaches.

    Attributes
    ----------
    energy_keV : numpy.ndarray
        Strictly increasing energies, keV, > 0.
    stopping : numpy.ndarray
        Stopping cross-sections, eV/(1e15 atoms/cm2), > 0.
    source : str
        Where the table came from (a file name), used in messages.
    """

    energy_keV: np.ndarray
    stopping: np.ndarray
    source: str = "stopping table"

    def __post_init__(self):
        e = np.asarray(self.energy_keV, dtype=float)
        s = np.asarray(self.stopping, dtype=float)
        if e.ndim != 1 or e.shape != s.shape or e.size < 2:
            raise InputError("a stopping table needs at least two rows of (energy_keV, stopping)",
                             where=self.source)
        if not (np.all(np.isfinite(e)) and np.all(e > 0) and np.all(np.diff(e) > 0)):
            raise InputError("table energies must be finite, > 0 and strictly increasing",
                             where=self.source)
        if not (np.all(np.isfinite(s)) and np.all(s > 0)):
            raise InputError("table stopping values must be finite and > 0", where=self.source)
        object.__setattr__(self, "energy_keV", e)
        object.__setattr__(self, "stopping", s)
        object.__setattr__(self, "_log_e", np.log(e))
        object.__setattr__(self, "_log_s", np.log(s))

    @property
    def min_keV(self) -> float:
        """Lowest tabulated energy, keV."""
        return float(self.energy_keV[0])

    @property
    def max_keV(self) -> float:
        """Highest tabulated energy, keV."""
        return float(self.energy_keV[-1])

    def __call__(self, energy_keV):
        """Stopping in eV/(1e15 atoms/cm2) at ``energy_keV`` (log-log interpolation)."""
        e = _energies(energy_keV)
        if e.size and (e.min() < self.min_keV or e.max() > self.max_keV):
            outside = e.min() if e.min() < self.min_keV else e.max()
            raise InputError(f"energy {outside:g} keV is outside the table's range "
                             f"{self.min_keV:g}-{self.max_keV:g} keV; extend the table to cover "
                             "every energy of the run", where=self.source)
        s = np.exp(np.interp(np.log(e), self._log_e, self._log_s))
        return s if s.ndim else float(s)


def load_stopping_table(path) -> StoppingTable:
    """Read a user stopping table.

    The format is our own plain CSV: lines starting with ``#`` are comments, the first other
    line is the header ``energy_keV,stopping``, then one row per energy.  ``stopping`` is the
    total (electronic + nuclear) stopping cross-section per atom in eV/(1e15 atoms/cm2).
    Energies must be strictly increasing, values finite and > 0.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.

    Returns
    -------
    StoppingTable
        Callable on energies in keV; log-log interpolation; energies outside the table raise
        :class:`forward.InputError`.
    """
    path = Path(path)
    try:
        text = path.read_text()
    except OSError as exc:
        raise InputError(f"cannot read stopping table ({exc.strerror}); give an existing CSV "
                         "file with header 'energy_keV,stopping'", where=str(path)) from None
    header_seen = False
    energies: list[float] = []
    values: list[float] = []
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        where = f"{path}: line {number}"
        cells = [c.strip() for c in line.split(",")]
        if not header_seen:
            if cells != ["energy_keV", "stopping"]:
                raise InputError(f"header is {line!r}; expected 'energy_keV,stopping'", where=where)
            header_seen = True
            continue
        if len(cells) != 2:
            raise InputError(f"{len(cells)} columns; expected two numbers 'energy_keV,stopping'",
                             where=where)
        try:
            e, s = float(cells[0]), float(cells[1])
        except ValueError:
            raise InputError(f"cannot read {line!r} as two numbers 'energy_keV,stopping'",
                             where=where) from None
        if not (math.isfinite(e) and e > 0):
            raise InputError(f"energy {cells[0]} keV; energies must be finite and > 0", where=where)
        if not (math.isfinite(s) and s > 0):
            raise InputError(f"stopping {cells[1]}; values must be finite and > 0 "
                             "(eV/(1e15 atoms/cm2))", where=where)
        if energies and e <= energies[-1]:
            raise InputError(f"energy {cells[0]} keV does not increase (previous row "
                             f"{energies[-1]:g} keV); energies must be strictly increasing",
                             where=where)
        energies.append(e)
        values.append(s)
    if not header_seen:
        raise InputError("no header line; the first non-comment line must be "
                         "'energy_keV,stopping'", where=str(path))
    if len(energies) < 2:
        raise InputError(f"{len(energies)} data row(s); a stopping table needs at least two",
                         where=str(path))
    return StoppingTable(np.array(energies), np.array(values), source=str(path))


# --------------------------------------------------------------------------------------------
# the model
# --------------------------------------------------------------------------------------------

class StoppingModel:
    """Stopping of one helium beam in elements and mixtures, with user tables and scales.

    Parameters
    ----------
    ion : {"4He", "3He"}
        Beam ion.  Proton beams are not supported.
    tables : dict[str, StoppingTable or path], optional
        Element symbol -> user table (or the path of one, read with
        :func:`load_stopping_table`).  A table replaces that element's total stopping
        (electronic and nuclear).
    scale : dict[str, float], optional
        Element symbol -> factor (> 0) multiplying that element's stopping, tabulated or not.
    nuclear : bool, default True
        Include nuclear stopping for elements without a user table.
    carbon : {"graphite", "amorphous"}, default "graphite"
        Which helium coefficients carbon uses (see :func:`helium_electronic_stopping`).
    slope : dict[str, float], optional
        Element symbol -> exponent ``b``: that element's stopping (tabulated or not) is also
        multiplied by ``(E / STOPPING_SLOPE_REFERENCE_KEV)**b`` (the shape nuisance of the
        spectrum model, :class:`forward.Nuisance`; here for checks and studies).

    Notes
    -----
    For every element ``element(s, E) == electronic(s, E) + nuclear(s, E)``.  For an element
    with a user table, ``electronic`` returns the (scaled) table and ``nuclear`` returns zeros,
    since the table holds the total.
    """

    def __init__(self, ion: str = "4He", tables: Mapping | None = None,
                 scale: Mapping[str, float] | None = None, nuclear: bool = True,
                 carbon: str = "graphite", slope: Mapping[str, float] | None = None):
        beam = _ion(ion)  # raises InputError for protons and unknown ions
        self.ion = ion
        self.z1 = beam.z
        self.m1_u = beam.mass_u
        # The 4He energy with the same velocity as this ion at energy E is E * m(4He) / m.
        self._to_4he = _ion("4He").mass_u / beam.mass_u
        self.include_nuclear = bool(nuclear)
        self.carbon = _check_carbon(carbon)
        self.tables: dict[str, StoppingTable] = {}
        for symbol, table in (tables or {}).items():
            _target(symbol)
            if not isinstance(table, StoppingTable):
                table = load_stopping_table(table)
            self.tables[symbol] = table
        self.scale: dict[str, float] = {}
        for symbol, factor in (scale or {}).items():
            _target(symbol)
            try:
                value = float(factor)
            except (TypeError, ValueError):
                value = math.nan
            if not (math.isfinite(value) and value > 0):
                raise InputError(f"stopping scale for {symbol} is {factor!r}; "
                                 "it must be a finite number > 0 (1 = unchanged)")
            self.scale[symbol] = value
        self.slope: dict[str, float] = {}
        for symbol, b in (slope or {}).items():
            _target(symbol)
            try:
                value = float(b)
            except (TypeError, ValueError):
                value = math.nan
            if not math.isfinite(value):
                raise InputError(f"stopping slope for {symbol} is {b!r}; it must be a finite "
                                 "number (0 = unchanged)")
            self.slope[symbol] = value

    def __repr__(self) -> str:
        return (f"StoppingModel(ion={self.ion!r}, tables={sorted(self.tables)}, "
                f"scale={self.scale}, nuclear={self.include_nuclear}, carbon={self.carbon!r}, "
                f"slope={self.slope})")

    def _factor(self, symbol: str, energy_keV=None):
        f = self.scale.get(symbol, 1.0)
        b = self.slope.get(symbol, 0.0)
        if b and energy_keV is not None:
            return f * (np.asarray(energy_keV, dtype=float) / STOPPING_SLOPE_REFERENCE_KEV) ** b
        return f

    def electronic(self, symbol: str, energy_keV):
        """Electronic stopping per atom of ``symbol`` (or its user table), after scaling.

        Parameters
        ----------
        symbol : str
            Element symbol.
        energy_keV : float or array_like
            Beam-ion energy, keV.

        Returns
        -------
        float or numpy.ndarray
            eV/(1e15 atoms/cm2).
        """
        z2, _ = _target(symbol)
        if symbol in self.tables:
            s = np.asarray(self.tables[symbol](energy_keV))
        else:
            e = _energies(energy_keV)
            s = np.asarray(helium_electronic_stopping(z2, e * self._to_4he, carbon=self.carbon))
        s = s * self._factor(symbol, energy_keV)
        return s if s.ndim else float(s)

    def nuclear(self, symbol: str, energy_keV):
        """Nuclear stopping per atom of ``symbol`` (ZBL 1985), after scaling.

        Zero when the model was built with ``nuclear=False`` or the element has a user table.

        Parameters
        ----------
        symbol : str
            Element symbol.
        energy_keV : float or array_like
            Beam-ion energy, keV.

        Returns
        -------
        float or numpy.ndarray
            eV/(1e15 atoms/cm2).
        """
        z2, m2 = _target(symbol)
        e = _energies(energy_keV)
        if symbol in self.tables or not self.include_nuclear:
            s = np.zeros_like(e)
        else:
            s = np.asarray(nuclear_stopping(self.z1, self.m1_u, z2, m2, e)) * self._factor(symbol, e)
        return s if s.ndim else float(s)

    def element(self, symbol: str, energy_keV):
        """Total (electronic + nuclear) stopping per atom of one element, after table/scale.

        Parameters
        ----------
        symbol : str
            Element symbol.
        energy_keV : float or array_like
            Beam-ion energy, keV.

        Returns
        -------
        float or numpy.ndarray
            eV/(1e15 atoms/cm2).
        """
        s = np.asarray(self.electronic(symbol, energy_keV)) \
            + np.asarray(self.nuclear(symbol, energy_keV))
        return s if s.ndim else float(s)

    def mixture(self, fractions: Mapping[str, float], energy_keV):
        """Stopping per atom of a mixture by Bragg's rule.

        Parameters
        ----------
        fractions : dict[str, float]
            Element symbol -> atom fraction (>= 0).  Normalised to sum 1.
        energy_keV : float or array_like
            Beam-ion energy, keV.

        Returns
        -------
        float or numpy.ndarray
            Atom-fraction weighted mean stopping, eV/(1e15 atoms/cm2) per atom.
        """
        if not fractions:
            raise InputError("empty composition; give at least one element with a fraction > 0")
        items = []
        for symbol, f in fractions.items():
            _target(symbol)  # unknown symbols are an error even at fraction 0
            try:
                value = float(f)
            except (TypeError, ValueError):
                value = math.nan
            if not (math.isfinite(value) and value >= 0):
                raise InputError(f"atom fraction of {symbol} is {f!r}; fractions must be "
                                 "finite and >= 0")
            items.append((symbol, value))
        total = sum(v for _, v in items)
        if not total > 0:
            raise InputError("atom fractions sum to 0; at least one must be > 0")
        e = _energies(energy_keV)
        s = np.zeros_like(e)
        for symbol, value in items:
            if value > 0:
                s = s + (value / total) * np.asarray(self.element(symbol, e))
        return s if s.ndim else float(s)


def stopping(ion: str, target: str, energy_keV, *, nuclear: bool = True,
             tables: Mapping | None = None, scale: Mapping[str, float] | None = None,
             carbon: str = "graphite"):
    """Stopping cross-section of a helium ion in an element or a compound, per target atom.

    Parameters
    ----------
    ion : {"4He", "3He"}
        Beam ion.
    target : str
        An element symbol (``"Si"``) or a formula (``"SiO2"``, ``"Ni0.45Ge0.55"``).
    energy_keV : float or array_like
        Ion energy, keV.
    nuclear : bool, default True
        Include nuclear stopping.
    tables, scale : dict, optional
        As for :class:`StoppingModel`.
    carbon : {"graphite", "amorphous"}, default "graphite"
        Which helium coefficients carbon uses.

    Returns
    -------
    float or numpy.ndarray
        eV/(1e15 atoms/cm2) per atom of the target (Bragg's rule for compounds).
    """
    model = StoppingModel(ion, tables=tables, scale=scale, nuclear=nuclear, carbon=carbon)
    try:
        _target(target)
        fractions = {target: 1.0}
    except (InputError, TypeError):
        fractions = parse_formula(target)
    return model.mixture(fractions, energy_keV)


def check_stopping_range(energy_keV, ion: str = "4He") -> bool:
    """Warn if any energy lies above the range the stopping has been validated over.

    Parameters
    ----------
    energy_keV : float or array_like
        Energies a run reaches, keV (the beam energy is the highest).
    ion : {"4He", "3He"}, default "4He"
        Beam ion; for 3He the limit is the 3He energy with the velocity of 4He at
        :data:`VALIDATED_MAX_KEV`.

    Returns
    -------
    bool
        True when all energies are inside the validated range.
    """
    e = _energies(energy_keV)
    limit_keV = VALIDATED_MAX_KEV * _ion(ion).mass_u / _ion("4He").mass_u
    if e.size and e.max() > limit_keV:
        warnings.warn(f"{ion} at {e.max():g} keV is above {limit_keV:g} keV, the highest energy "
                      "at which the helium stopping has been compared with NIST ASTAR; expect "
                      "stopping errors of several per cent", StoppingRangeWarning, stacklevel=2)
        return False
    return True


# --------------------------------------------------------------------------------------------
# how well the stopping is known: prior widths for the stopping nuisances
# --------------------------------------------------------------------------------------------

#: File of recommended prior widths per element (written by benchmarks/stopping_vs_astar.py).
HELIUM_UNCERTAINTY_FILE = "helium_stopping_uncertainty.csv"

#: Energy band (keV) over which the widths were measured: the energies 1-3 MeV helium spends its
#: path at in a backscattering measurement, down to the low-energy end of typical spectra.
UNCERTAINTY_BAND_KEV = (200.0, 3000.0)

#: Elements whose ICRU Report 49 helium stopping leaves the coefficient form above about 1 MeV
#: (Bethe theory there): Be, C, N, O and Z >= 55 (ICRU Report 49, 1993).
_FORM_DEPARTS_Z = frozenset({4, 6, 7, 8})


def _coefficient_form_departs(z2: int) -> bool:
    return z2 >= 55 or z2 in _FORM_DEPARTS_Z


@lru_cache(maxsize=1)
def _uncertainty_rows() -> tuple[dict, ...]:
    path = find_stopping_data(HELIUM_UNCERTAINTY_FILE)
    with path.open(newline="") as fh:
        rows = csv.DictReader(line for line in fh if not line.lstrip().startswith("#"))
        out = []
        for row in rows:
            row = dict(row)
            row["Z"] = int(row["Z"])
            row["scale_sd"] = float(row["scale_sd"])
            row["slope_sd"] = float(row["slope_sd"])
            out.append(row)
    return tuple(out)


def stopping_uncertainty(symbol: str, ion: str = "4He", *, carbon: str = "graphite",
                         oxide: bool = False) -> tuple[float, float]:
    """Recommended prior widths of an element's stopping scale and stopping slope.

    The spectrum model multiplies an element's stopping by
    ``stopping_scale * (E / 1000 keV)**stopping_slope`` (:class:`forward.Nuisance`).  These are
    standard deviations for priors centred on 1 and 0, set from the measured spread of our
    helium electronic stopping against NIST ASTAR (M. J. Berger et al., NIST Standard Reference
    Database 124, implementing ICRU Report 49), ``benchmarks/stopping_vs_astar.py``, and stored
    in ``data/stopping/helium_stopping_uncertainty.csv``:

    * for each element ASTAR tabulates, ``ln(S_ASTAR / S_ours)`` over 200-3000 keV is fitted
      with a line ``a + b ln(E / 1000 keV)`` (residual rms ``r``);
      ``scale_sd = sqrt(f_s^2 + a^2 + r^2)`` and ``slope_sd = sqrt(f_b^2 + b^2)``, with floors
      ``f_s``, ``f_b`` the root mean square of ``sqrt(a^2 + r^2)`` and of ``b`` over all those
      elements (agreement with one evaluation does not make an element better known than
      evaluations typically differ).  With these widths ASTAR lies within 2 standard
      deviations of the prior at every energy of the band, for every element (tested);
    * an element ASTAR does not tabulate gets the root mean square of the widths of the
      measured elements of its class: those whose ICRU 49 stopping leaves the coefficient form
      above about 1 MeV (Be, C, N, O and Z >= 55; wider) and the others;
    * ``oxide=True`` (oxygen only) gives the widths for oxygen bound in a solid oxide, from
      ASTAR's SiO2 and Al2O3 against Bragg's rule with our elements, the whole difference laid
      on oxygen: ASTAR's oxides stop 15-20 % less than Bragg's rule below 1 MeV (chemical and
      phase effects), so these widths are several times larger.

    Widths are for the built-in stopping; an element whose stopping comes from a user table is
    as well known as that table.

    Parameters
    ----------
    symbol : str
        Element symbol.
    ion : {"4He", "3He"}, optional
        Beam ion.  3He gets the 4He widths (its stopping is the 4He value at equal velocity;
        the slope is the same and the scale moves by ``b ln(4/3)``, well inside the floor).
    carbon : {"graphite", "amorphous"}, optional
        For carbon: which coefficients the run uses (``[physics] carbon``).
    oxide : bool, optional
        Oxygen bound in a solid oxide instead of oxygen alone.

    Returns
    -------
    scale_sd, slope_sd : float
        Standard deviations of ``stopping_scale`` (around 1) and ``stopping_slope`` (around 0).
    """
    _ion(ion)  # protons and unknown ions raise InputError
    z2, _ = _target(symbol)
    phase = _check_carbon(carbon) if z2 == 6 else None
    rows = _uncertainty_rows()
    if oxide:
        if symbol != "O":
            raise InputError(f"oxide widths exist for oxygen only, not {symbol!r}",
                             where="stopping_uncertainty: oxide")
        row = next(r for r in rows if r["symbol"] == "O" and r["phase"] == "oxide")
        return row["scale_sd"], row["slope_sd"]
    for r in rows:
        if r["symbol"] == symbol and r["phase"] != "oxide" and (phase is None
                                                                 or r["phase"] == phase):
            return r["scale_sd"], r["slope_sd"]
    # not tabulated by ASTAR: the root mean square of its class (default phases only)
    same = [r for r in rows if r["phase"] not in ("oxide", "amorphous")
            and _coefficient_form_departs(r["Z"]) == _coefficient_form_departs(z2)]
    scale = math.sqrt(sum(r["scale_sd"] ** 2 for r in same) / len(same))
    slope = math.sqrt(sum(r["slope_sd"] ** 2 for r in same) / len(same))
    return scale, slope
