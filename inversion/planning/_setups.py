"""The set-ups of a plan: which run-file keys vary, over which values, and each set-up's run.

A set-up is the run file with some set-up numbers replaced (beam energy, angles, resolution,
charge, ...).  Every set-up is re-checked by the run-file reader
(:meth:`forward.Run.with_overrides`, the same checks as a run file), so every range rule of the
run file applies to the values a plan tries.  Set-ups that differ only in their exposure keys
(``exposure.*``) share one geometry: their expected counts differ only by the number of
counted ions, so the plan builds one forward model per geometry and scales the counts.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass, field

from forward import InputError

__all__ = ["VARY_KEYS", "EXPOSURE_KEYS", "SetUp", "parse_vary", "parse_assignments",
           "build_setups", "vary_where", "check_vary_key", "counted_particles",
           "charge_for_particles_uC"]

#: the set-up numbers ``--vary`` can change, with their units (run-file keys, README.md)
VARY_KEYS = {
    "beam.energy_keV": "keV",
    "geometry.scattering_deg": "deg",
    "geometry.tilt_deg": "deg",
    "geometry.incidence_deg": "deg",
    "geometry.exit_deg": "deg",
    "detector.fwhm_keV": "keV",
    "detector.solid_angle_msr": "msr",
    "calibration.keV_per_channel": "keV/channel",
    "calibration.offset_keV": "keV",
    "exposure.charge_uC": "uC",
    "exposure.particles": "ions",
    "exposure.live_fraction": "",
}
#: keys that only change how many ions are counted: the expected counts scale with them
EXPOSURE_KEYS = ("exposure.charge_uC", "exposure.particles", "exposure.live_fraction")
#: run-file keys that exist but are not numbers a plan can try
_NOT_NUMBERS = {"beam.ion", "geometry.layout", "title", "exposure.charge_state"}
_TILT = ("geometry.tilt_deg",)
_DIRECT = ("geometry.incidence_deg", "geometry.exit_deg")


def vary_where(key: str | None = None) -> str:
    """Error location of a ``--vary`` option."""
    return "command line: --vary" + (f" {key}" if key else "")


def _allowed() -> str:
    return ", ".join(VARY_KEYS)


def _number(text: str, where: str, what: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{what} {text.strip()!r} is not a number; give numbers in the run "
                         "file's units", where=where) from None
    if not math.isfinite(value):
        raise InputError(f"{what} {text.strip()!r} is not a finite number", where=where)
    return value


def check_vary_key(key: str) -> str:
    """The key itself if ``--vary`` can change it; InputError otherwise."""
    if key in VARY_KEYS:
        return key
    if key in _NOT_NUMBERS or key.startswith(("layer", "physics", "fit")):
        raise InputError(f"{key} is not a set-up number a plan can vary; allowed: {_allowed()}",
                         where=vary_where(key))
    raise InputError(f"unknown set-up key {key!r}; allowed: {_allowed()}",
                     where=vary_where(key))


def parse_vary(texts) -> dict[str, list[float]]:
    """``["KEY=V1,V2,...", ...]`` (the ``--vary`` options) to ``{key: [values]}``.

    Also accepts a mapping ``{key: values}`` (the library's form), checked the same way.

    Raises
    ------
    forward.InputError
        For an unknown or non-numeric key, a key given twice, a missing or non-numeric value.
    """
    out: dict[str, list[float]] = {}
    if texts is None:
        return out
    if isinstance(texts, dict):
        items = [(str(k), v) for k, v in texts.items()]
    else:
        items = []
        for text in texts:
            key, sep, values = str(text).partition("=")
            if not sep:
                raise InputError(f"{text!r} has no '='; write KEY=V1,V2,... e.g. "
                                 "geometry.tilt_deg=0,30,60", where=vary_where())
            items.append((key.strip(), [v for v in values.split(",")] if values.strip()
                          else []))
    for key, values in items:
        check_vary_key(key)
        if key in out:
            raise InputError(f"{key} is varied twice; give all its values in one --vary",
                             where=vary_where(key))
        if isinstance(values, (int, float, str)):
            values = [values]
        numbers: list[float] = []
        for v in values:
            if isinstance(v, bool):
                raise InputError(f"value {v!r} is not a number", where=vary_where(key))
            x = _number(str(v), vary_where(key), "value")
            if x not in numbers:
                numbers.append(x)
        if not numbers:
            raise InputError("no values; write KEY=V1,V2,...", where=vary_where(key))
        out[key] = numbers
    exposure = [k for k in out if k in ("exposure.charge_uC", "exposure.particles")]
    if len(exposure) > 1:
        raise InputError("vary either exposure.charge_uC or exposure.particles, not both",
                         where=vary_where(exposure[1]))
    return out


def parse_assignments(texts, option: str) -> dict[str, float]:
    """``["NAME=VALUE", ...]`` (``--nominal``) to ``{name: value}``; a mapping passes through
    checked."""
    where = f"command line: {option}"
    if texts is None:
        return {}
    if isinstance(texts, dict):
        return {str(k): _number(str(v), f"{where} {k}", "value") for k, v in texts.items()}
    out: dict[str, float] = {}
    for text in texts:
        name, sep, value = str(text).partition("=")
        name = name.strip()
        if not sep or not name:
            raise InputError(f"{text!r}: write NAME=VALUE, e.g. film.mixing=40", where=where)
        if name in out:
            raise InputError(f"{name} given twice", where=f"{where} {name}")
        out[name] = _number(value, f"{where} {name}", "value")
    return out


@dataclass
class SetUp:
    """One set-up of a plan.

    Attributes
    ----------
    values : dict
        The varied keys and their values here (run-file units), in ``--vary`` order.
    run : forward.Run
        The run file with those values, checked by the run-file reader.
    geometry : tuple
        The values of the keys that are not exposure keys: set-ups with the same ``geometry``
        share one forward model.
    warnings : list of str
        What the run-file reader warned about for this set-up.
    """

    values: dict
    run: object
    geometry: tuple
    warnings: list = field(default_factory=list)


def _changes(values: dict) -> dict:
    """``{"geometry.tilt_deg": 30}`` to the run-file form ``{"geometry": {"tilt_deg": 30}}``."""
    out: dict[str, dict] = {}
    for key, value in values.items():
        table, _, name = key.partition(".")
        out.setdefault(table, {})[name] = value
    return out


def _check_geometry_form(run, keys) -> None:
    """Tilts need a tilt-and-layout run file, angles a run file that gives them directly."""
    direct = run.geometry.layout == "direct"
    for key in keys:
        if direct and key in _TILT:
            raise InputError("the run file gives geometry.incidence_deg and exit_deg, not a "
                             "tilt; vary those, or give tilt_deg and layout in the run file",
                             where=vary_where(key))
        if not direct and key in _DIRECT:
            raise InputError(f"the run file gives geometry.tilt_deg and layout "
                             f"({run.geometry.layout}); vary geometry.tilt_deg, or give "
                             "incidence_deg and exit_deg in the run file", where=vary_where(key))


def _checked(run, values: dict):
    """(run with the values, the reader's warnings as text)."""
    text = ", ".join(f"{k}={v:g}" for k, v in values.items())
    source = f"{run.source} (--vary {text})" if text else run.source
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        new = run.with_overrides(_changes(values), source=source) if values else run
    return new, [" ".join(str(w.message).split()) for w in caught]


def build_setups(run, vary: dict[str, list[float]]) -> list[SetUp]:
    """Every combination of the varied values (the run itself when nothing varies).

    Each value is first checked alone against the run file (so a message names the one value
    that is out of range), then every combination (an angle that is fine alone may close no
    geometry with another).

    Raises
    ------
    forward.InputError
        For a value or a combination the run-file reader refuses.
    """
    _check_geometry_form(run, vary)
    for key, values in vary.items():
        for v in values:
            _checked(run, {key: v})
    keys = list(vary)
    out = []
    for combination in itertools.product(*(vary[k] for k in keys)):
        values = dict(zip(keys, combination))
        new, caught = _checked(run, values)
        geometry = tuple((k, v) for k, v in values.items() if k not in EXPOSURE_KEYS)
        out.append(SetUp(values, new, geometry, caught))
    return out


def counted_particles(run) -> float:
    """Ions counted by a live acquisition in this run (what the expected counts scale with)."""
    return float(run.exposure.counted_particles)


def charge_for_particles_uC(run, counted: float) -> float:
    """The charge (uC) that gives ``counted`` counted ions at this run's charge state and live
    fraction (``charge = counted e z / live``, the elementary charge of
    :mod:`scipy.constants`)."""
    import scipy.constants

    exposure = run.exposure
    return (float(counted) / float(exposure.live_fraction) * scipy.constants.e
            * int(exposure.charge_state) * 1e6)
