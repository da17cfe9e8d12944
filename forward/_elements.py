"""Elements, isotopes and chemical formulas, from the periodictable package.

periodictable carries evaluated atomic masses and natural isotopic abundances (IUPAC values), so
we do not keep a table of our own.  Masses are in unified atomic mass units (u).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import periodictable

from ._errors import InputError

__all__ = ["Element", "Isotope", "element", "isotope", "ion", "parse_formula", "ION_SPECIES"]


@dataclass(frozen=True)
class Isotope:
    """One isotope: ``mass_number`` (A), ``mass_u`` (u) and natural ``abundance`` (0-1)."""

    symbol: str
    z: int
    mass_number: int
    mass_u: float
    abundance: float

    @property
    def label(self) -> str:
        return f"{self.mass_number}{self.symbol}"


@dataclass(frozen=True)
class Element:
    """One chemical element with its natural isotopes (abundances summing to 1)."""

    symbol: str
    z: int
    mass_u: float
    isotopes: tuple[Isotope, ...]


_ELEMENT_CACHE: dict[str, Element] = {}


def element(symbol: str) -> Element:
    """Return the :class:`Element` for a symbol such as ``"Si"``; raise InputError if unknown."""
    if symbol in _ELEMENT_CACHE:
        return _ELEMENT_CACHE[symbol]
    el = getattr(periodictable, symbol, None) if isinstance(symbol, str) and symbol.isalpha() else None
    if el is None or not hasattr(el, "number") or el.number < 1 or el.number > 92:
        raise InputError(f"unknown element {symbol!r}; use a chemical symbol from H to U, e.g. 'Si'")
    isos = []
    for a in el.isotopes:
        iso = el[a]
        abundance = float(iso.abundance) / 100.0
        if abundance > 0:
            isos.append(Isotope(symbol, int(el.number), int(a), float(iso.mass), abundance))
    if not isos:
        # periodictable lists no natural abundances for a few elements (Tc, Pm, U, ...): treat
        # the element as one pseudo-isotope at its standard atomic weight.  A layer's isotope
        # overrides can still name real isotopes.
        if not float(el.mass) > 0:
            raise InputError(f"element {symbol!r} has no standard atomic weight; give its isotopes "
                             "explicitly in the layer's isotope overrides")
        isos.append(Isotope(symbol, int(el.number), int(round(float(el.mass))), float(el.mass), 1.0))
    total = sum(i.abundance for i in isos)
    isos = tuple(Isotope(i.symbol, i.z, i.mass_number, i.mass_u, i.abundance / total) for i in isos)
    out = Element(symbol, int(el.number), float(el.mass), isos)
    _ELEMENT_CACHE[symbol] = out
    return out


def isotope(symbol: str, mass_number: int) -> Isotope:
    """Return one isotope (any known isotope, natural or not), with abundance 1."""
    el = element(symbol)
    pt = getattr(periodictable, symbol)
    if mass_number not in pt.isotopes:
        known = ", ".join(str(a) for a in pt.isotopes)
        raise InputError(f"{symbol} has no isotope with mass number {mass_number}; known: {known}")
    return Isotope(symbol, el.z, int(mass_number), float(pt[mass_number].mass), 1.0)


#: Ions the program accepts as a beam, with their atomic number.  1H is out of scope for now.
ION_SPECIES = {"4He": ("He", 4), "3He": ("He", 3)}


def ion(species: str) -> Isotope:
    """Return the beam ion (``"4He"`` or ``"3He"``) as an :class:`Isotope` with its mass in u."""
    if species not in ION_SPECIES:
        allowed = " or ".join(repr(s) for s in ION_SPECIES)
        if species in ("1H", "H", "p", "proton"):
            raise InputError(f"ion {species!r}: proton beams are not supported yet; use {allowed}")
        raise InputError(f"unknown ion {species!r}; allowed: {allowed}")
    sym, a = ION_SPECIES[species]
    return isotope(sym, a)


_TOKEN = re.compile(r"([A-Z][a-z]?)((?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)?")


def capitalisation_slips(formula: str) -> list[tuple[str, str]]:
    """Two one-letter symbols written together that would also read as one element.

    ``"HFO2"`` reads as hydrogen, fluorine and oxygen, but was most likely meant as hafnium
    oxide; ``"CO"`` reads as carbon and oxygen but could be cobalt.  Returns ``[(as read,
    the element it could be), ...]``, e.g. ``[("HF", "Hf")]``; elements beyond uranium are not
    offered.
    """
    tokens = [(m.group(1), m.group(2)) for m in _TOKEN.finditer(formula.replace(" ", ""))]
    out = []
    for (a, num_a), (b, _) in zip(tokens, tokens[1:]):
        if len(a) != 1 or len(b) != 1 or num_a:
            continue
        candidate = a + b.lower()
        try:
            el = element(candidate)
        except InputError:
            continue
        if el.z <= 92:
            out.append((a + b, candidate))
    return out


def parse_formula(formula: str) -> dict[str, float]:
    """Parse a formula such as ``"SiO2"`` or ``"Ni0.45Ge0.55"`` into atom fractions.

    Returns an insertion-ordered ``{symbol: atom fraction}`` whose values sum to 1.  An element
    that appears twice is added up.  Parentheses and hydrates are not supported.
    """
    if not isinstance(formula, str) or not formula.strip():
        raise InputError("empty chemical formula; write one such as 'SiO2' or 'Ni0.45Ge0.55'")
    text = formula.replace(" ", "")
    pos = 0
    amounts: dict[str, float] = {}
    for m in _TOKEN.finditer(text):
        if m.start() != pos:
            break
        sym, num = m.group(1), m.group(2)
        element(sym)  # raises for unknown symbols
        value = float(num) if num else 1.0
        if not value > 0:
            raise InputError(f"formula {formula!r}: the amount of {sym} must be positive")
        amounts[sym] = amounts.get(sym, 0.0) + value
        pos = m.end()
    if pos != len(text) or not amounts:
        raise InputError(f"cannot read chemical formula {formula!r}; write element symbols with "
                         "optional amounts, e.g. 'SiO2', 'Ni0.45Ge0.55' (no parentheses)")
    total = sum(amounts.values())
    return {k: v / total for k, v in amounts.items()}
