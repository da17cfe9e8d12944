"""The series file: a TOML file naming a run-file template and the members of an annealing
series (our own schema; README.md, "Annealing series")::

    [series]
    title = "invented Ni/Si anneals"        # optional
    run = "template.toml"                     # shared run-file template (relative to this file)
    interface = 1                             # boundary below layer 1 (layers counted from 1)
    widths_in = "auto"                        # "nm", "areal_density" or "auto" (nm if possible)
    max_steps = 4000                          # optional: chain length per member
    arrhenius_scatter = false                 # optional: fit extra scatter of ln D

    [[member]]
    label = "as-deposited"                    # letters, digits, '-', '_', '.'
    spectrum = "asdep.csv"
    as_deposited = true

    [[member]]
    label = "a350-30"
    spectrum = "a350_30min.csv"
    temperature_C = 350                       # or temperature_K
    time_min = 30                             # or time_s, time_h
    charge_uC = 11.8                          # optional overrides of the template
    calibration = { offset_keV = 21.0 }

A template with ``[[measurement]]`` tables (a joint run) makes every member a joint run: the
member names one spectrum per measurement, and its overrides belong to one measurement::

    [[member]]
    label = "a350-30"
    spectra = { normal = "a350_normal.csv", tilt60 = "a350_tilt60.csv" }
    temperature_C = 350
    time_min = 30
    [member.measurement.tilt60]               # optional overrides of this measurement
    charge_uC = 9.6
    calibration = { offset_keV = 21.0 }
"""

from __future__ import annotations

import math
import re
import tomllib
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import forward
from forward import InputError

__all__ = ["Member", "Series", "load_series", "parse_series", "member_run",
           "member_measurements", "joint_member", "interface_names", "member_path"]

_LABEL = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
_SERIES_KEYS = ("title", "run", "interface", "widths_in", "max_steps", "arrhenius_scatter")
_MEMBER_KEYS = ("label", "spectrum", "spectra", "as_deposited", "temperature_C",
                "temperature_K", "time_s", "time_min", "time_h", "charge_uC", "particles",
                "calibration", "measurement")
#: what a member may change in the template (in ``[member.measurement.<name>]`` for a joint one)
_OVERRIDE_KEYS = ("charge_uC", "particles", "calibration")
_TOP_KEYS = ("series", "member")
_CELSIUS_OFFSET_K = 273.15  # exact, by definition of the Celsius scale (SI Brochure)



@dataclass(frozen=True)
class Member:
    """One spectrum of the series.

    Attributes
    ----------
    label : str
    spectrum : str or None
        Path of the spectrum (absolute) or ``file.h5:/dataset``; None for a member of a joint
        template.
    as_deposited : bool
    temperature_K, time_s : float or None
        Anneal temperature (K) and time (s); None for the as-deposited member.
    overrides : dict
        Run-file tables to change for this member (``exposure``, ``calibration``); empty for
        a member of a joint template.
    index : int
        Position in the series file (0-based).
    spectra : dict
        A member of a joint template: ``{measurement name: spectrum}`` (absolute paths, in
        the template's order); empty otherwise.
    measurement_overrides : dict
        A member of a joint template: ``{measurement name: run-file tables to change}``.
    """

    label: str
    spectrum: str | None
    as_deposited: bool
    temperature_K: float | None
    time_s: float | None
    overrides: dict
    index: int
    spectra: dict = field(default_factory=dict)
    measurement_overrides: dict = field(default_factory=dict)

    @property
    def spectrum_files(self) -> dict:
        """``{what: spectrum}``: ``"spectrum"``, or each measurement's name."""
        return dict(self.spectra) if self.spectra else {"spectrum": self.spectrum}


@dataclass(frozen=True)
class Series:
    """A checked series file."""

    source: str
    text: str
    base_dir: Path
    run_path: Path
    title: str
    interface: int
    widths_in: str
    max_steps: int | None
    arrhenius_scatter: bool
    members: tuple = field(default_factory=tuple)
    #: the template's measurements (a template with ``[[measurement]]`` tables); empty for a
    #: template of one measurement
    measurement_names: tuple = field(default_factory=tuple)

    @property
    def joint(self) -> bool:
        """True when the template is a joint run (every member names several spectra)."""
        return bool(self.measurement_names)

    @property
    def anneals(self) -> list:
        return [m for m in self.members if not m.as_deposited]

    @property
    def reference(self) -> Member:
        return next(m for m in self.members if m.as_deposited)


def _kind(v) -> str:
    if isinstance(v, bool):
        return f"the boolean {str(v).lower()}"
    if isinstance(v, (int, float)):
        return f"the number {v!r}"
    if isinstance(v, str):
        return f"the string {v!r}"
    return "a table" if isinstance(v, dict) else ("an array" if isinstance(v, list) else
                                                  type(v).__name__)


def _check_keys(table, allowed, where_prefix, place):
    if not isinstance(table, dict):
        raise InputError(f"expected a table, got {_kind(table)}", where=where_prefix)
    for key in table:
        if key not in allowed:
            raise InputError(f"unknown key {key!r} in {place}; allowed keys: "
                             f"{', '.join(allowed)}", where=f"{where_prefix}.{key}")


def _number(table, key, where, *, positive=True):
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number, got {_kind(v)}", where=where)
    if positive and v <= 0:
        raise InputError(f"{v:g} is out of range; allowed: > 0", where=where)
    return float(v)


def load_series(path) -> Series:
    """Read and check a series file.

    Parameters
    ----------
    path : str or Path
        The TOML series file; paths inside it are relative to its folder.

    Returns
    -------
    Series
    """
    p = Path(path)
    if not p.is_file():
        raise InputError("series file not found; give the path of an existing .toml file",
                         where=str(path))
    try:
        text = p.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file; a series file is TOML text",
                         where=str(path)) from None
    return parse_series(text, source=str(path), base_dir=p.resolve().parent)


def parse_series(text: str, source: str = "<string>", base_dir=None) -> Series:
    """Check a series file given as text.

    Parameters
    ----------
    text : str
        TOML text.
    source : str
        Name used in error messages.
    base_dir : str or Path, optional
        Folder for relative paths (default: the current folder).

    Returns
    -------
    Series
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}; a series file is valid TOML "
                         "([series], [[member]])", where=source) from None
    for key in raw:
        if key not in _TOP_KEYS:
            raise InputError(f"unknown key {key!r} at the top level; allowed: [series] and "
                             "[[member]]", where=f"{source}: {key}")
    if "series" not in raw:
        raise InputError("missing required table [series]", where=f"{source}: series")
    s = raw["series"]
    _check_keys(s, _SERIES_KEYS, f"{source}: series", "[series]")
    if "run" not in s or not isinstance(s["run"], str):
        raise InputError("missing run-file template; give run = \"template.toml\"",
                         where=f"{source}: series.run")
    run_path = (base / s["run"]).resolve()
    if not run_path.is_file():
        raise InputError(f"run-file template {s['run']!r} not found (looked in {base})",
                         where=f"{source}: series.run")
    names = _template_measurements(run_path)
    interface = s.get("interface", 1)
    if isinstance(interface, bool) or not isinstance(interface, int) or interface < 1:
        raise InputError(f"expected a whole number >= 1 (interface N lies below layer N), got "
                         f"{_kind(interface)}", where=f"{source}: series.interface")
    widths_in = s.get("widths_in", "auto")
    if widths_in not in ("auto", "nm", "areal_density"):
        raise InputError(f"unknown value {widths_in!r}; allowed: 'auto', 'nm', 'areal_density'",
                         where=f"{source}: series.widths_in")
    max_steps = s.get("max_steps")
    if max_steps is not None and (isinstance(max_steps, bool) or not isinstance(max_steps, int)
                                  or max_steps < 1):
        raise InputError(f"expected a whole number >= 1, got {_kind(max_steps)}",
                         where=f"{source}: series.max_steps")
    scatter = s.get("arrhenius_scatter", False)
    if not isinstance(scatter, bool):
        raise InputError(f"expected true or false, got {_kind(scatter)}",
                         where=f"{source}: series.arrhenius_scatter")

    items = raw.get("member", [])
    if not isinstance(items, list) or len(items) < 2:
        raise InputError("a series needs at least 2 [[member]] tables (one as-deposited and one "
                         "or more anneals)", where=f"{source}: member")
    members, labels = [], set()
    for i, m in enumerate(items):
        where = f"{source}: member[{i + 1}]"
        _check_keys(m, _MEMBER_KEYS, where, f"[[member]] number {i + 1}")
        label = m.get("label")
        if not isinstance(label, str) or not _LABEL.match(label):
            raise InputError(f"expected a label of letters, digits, '-', '_' or '.', got "
                             f"{_kind(label)}", where=f"{where}.label")
        if label in labels:
            raise InputError(f"label {label!r} is used twice; each member needs its own label",
                             where=f"{where}.label")
        labels.add(label)
        where = f"{source}: member[{label}]"
        if names:
            spectrum = None
            spectra = _member_spectra(m, names, base, where, s["run"])
        else:
            for key in ("spectra", "measurement"):
                if key in m:
                    raise InputError(
                        f"the run-file template {s['run']!r} is one measurement (it has no "
                        "[[measurement]] tables); allowed: spectrum = \"file.csv\" and the "
                        f"overrides {', '.join(_OVERRIDE_KEYS)} in the [[member]] table ({key} "
                        "belongs to a member of a template with [[measurement]] tables)",
                        where=f"{where}.{key}")
            spec = m.get("spectrum")
            if not isinstance(spec, str):
                raise InputError(f"missing spectrum path; give spectrum = \"file.csv\"",
                                 where=f"{where}.spectrum")
            spectrum, spectra = _resolve(base, spec), {}
        as_dep = m.get("as_deposited", False)
        if not isinstance(as_dep, bool):
            raise InputError(f"expected true or false, got {_kind(as_dep)}",
                             where=f"{where}.as_deposited")
        temps = [k for k in ("temperature_C", "temperature_K") if k in m]
        times = [k for k in ("time_s", "time_min", "time_h") if k in m]
        if as_dep:
            if temps or times:
                raise InputError("an as-deposited member has no anneal temperature or time; "
                                 "remove them or set as_deposited = false",
                                 where=f"{where}.{(temps + times)[0]}")
            t_k = t_s = None
        else:
            if len(temps) != 1:
                raise InputError("give exactly one of temperature_C or temperature_K (or "
                                 "as_deposited = true)", where=f"{where}.temperature")
            if len(times) != 1:
                raise InputError("give exactly one of time_s, time_min or time_h (or "
                                 "as_deposited = true)", where=f"{where}.time")
            if temps[0] == "temperature_C":
                t_k = _number(m, "temperature_C", f"{where}.temperature_C", positive=False) \
                    + _CELSIUS_OFFSET_K
                if t_k <= 0:
                    raise InputError("below absolute zero; allowed: > -273.15",
                                     where=f"{where}.temperature_C")
            else:
                t_k = _number(m, "temperature_K", f"{where}.temperature_K")
            scale = {"time_s": 1.0, "time_min": 60.0, "time_h": 3600.0}[times[0]]
            t_s = _number(m, times[0], f"{where}.{times[0]}") * scale
        per_measurement = _measurement_overrides(m, names, where) if names else {}
        overrides = {} if names else _overrides(m, where)
        members.append(Member(label=label, spectrum=spectrum, as_deposited=as_dep,
                              temperature_K=t_k, time_s=t_s, overrides=overrides, index=i,
                              spectra=spectra, measurement_overrides=per_measurement))
    n_ref = sum(m.as_deposited for m in members)
    if n_ref != 1:
        raise InputError(f"{n_ref} members have as_deposited = true; a series needs exactly one",
                         where=f"{source}: member")
    return Series(source=source, text=text, base_dir=base, run_path=run_path,
                  title=str(s.get("title", "")), interface=interface, widths_in=widths_in,
                  max_steps=max_steps, arrhenius_scatter=scatter, members=tuple(members),
                  measurement_names=names)


def _template_measurements(path) -> tuple:
    """The measurements' names of a template with ``[[measurement]]`` tables, read and checked
    (a broken template refused with the run-file reader's own message); () for a template of
    one measurement (read when the series runs)."""
    if not forward.has_measurements(path):
        return ()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the template's warnings: said when the series runs
        return tuple(forward.load_measurements(path).names)


def _resolve(base: Path, spec: str) -> str:
    """A spectrum path of the series file, absolute (``file.h5:/dataset`` kept whole)."""
    file_part, sep, dataset = spec.partition(".h5:")
    return str((base / (file_part + (".h5" if sep else ""))).resolve()) + (
        ":" + dataset if sep else "")


def _member_spectra(m: dict, names, base: Path, where: str, template: str) -> dict:
    """A joint member's ``spectra`` table: every measurement of the template named once."""
    example = "spectra = { " + ", ".join(f'{n} = "{n}.csv"' for n in names) + " }"
    if "spectrum" in m:
        raise InputError(f"the run-file template {template!r} holds {len(names)} measurements "
                         f"({', '.join(names)}), so a member names one spectrum for each; "
                         f"allowed: {example} instead of spectrum", where=f"{where}.spectrum")
    table = m.get("spectra")
    if table is None:
        raise InputError(f"missing spectra; give {example}, one spectrum for each measurement "
                         f"of the run-file template {template!r}", where=f"{where}.spectra")
    if not isinstance(table, dict):
        raise InputError(f"expected a table such as {example}, got {_kind(table)}",
                         where=f"{where}.spectra")
    for key, value in table.items():
        if key not in names:
            raise InputError(f"the run-file template {template!r} has no measurement called "
                             f"{key!r}; allowed: {', '.join(names)}",
                             where=f"{where}.spectra.{key}")
        if not isinstance(value, str) or not value.strip():
            raise InputError(f"expected the path of a spectrum file in quotes, got "
                             f"{_kind(value)}", where=f"{where}.spectra.{key}")
    missing = [n for n in names if n not in table]
    if missing:
        raise InputError(f"no spectrum for measurement {missing[0]!r}; allowed: spectra naming "
                         f"every measurement of the run-file template {template!r} once "
                         f"({', '.join(names)})", where=f"{where}.spectra")
    return {n: _resolve(base, table[n]) for n in names}


def _overrides(table: dict, where: str) -> dict:
    """The run-file tables a member (or one measurement of a joint member) changes."""
    overrides: dict = {}
    if "charge_uC" in table and "particles" in table:
        raise InputError("give charge_uC or particles, not both", where=f"{where}.particles")
    for key in ("charge_uC", "particles"):
        if key in table:
            overrides.setdefault("exposure", {})[key] = _number(table, key, f"{where}.{key}")
    if "calibration" in table:
        if not isinstance(table["calibration"], dict):
            raise InputError(f"expected a table such as {{ offset_keV = 20.0 }}, got "
                             f"{_kind(table['calibration'])}", where=f"{where}.calibration")
        overrides["calibration"] = dict(table["calibration"])
    return overrides


def _measurement_overrides(m: dict, names, where: str) -> dict:
    """A joint member's ``[member.measurement.<name>]`` tables; overrides of the whole member
    are refused (each measurement has its own detector, calibration and charge)."""
    for key in _OVERRIDE_KEYS:
        if key in m:
            raise InputError(f"{key} of a member of a template with [[measurement]] tables "
                             "belongs to one measurement; allowed: [member.measurement.<name>] "
                             f"with {', '.join(_OVERRIDE_KEYS)}, for a measurement among "
                             f"{', '.join(names)}", where=f"{where}.{key}")
    tables = m.get("measurement", {})
    if not isinstance(tables, dict):
        raise InputError(f"expected tables [member.measurement.<name>], got {_kind(tables)}",
                         where=f"{where}.measurement")
    out = {}
    for name, table in tables.items():
        here = f"{where}.measurement.{name}"
        if name not in names:
            raise InputError(f"the run-file template has no measurement called {name!r}; "
                             f"allowed: {', '.join(names)}", where=here)
        _check_keys(table, _OVERRIDE_KEYS, here, f"[member.measurement.{name}]")
        found = _overrides(table, here)
        if found:
            out[name] = found
    return out


def member_run(series: Series, member: Member):
    """The template run with the member's overrides, checked like a run file (a member of a
    template of one measurement; see :func:`member_measurements` for a joint one)."""
    run = forward.load_run(series.run_path)
    if member.overrides:
        run = run.with_overrides(member.overrides,
                                 source=f"{series.source}: member[{member.label}]")
    return run


def member_measurements(series: Series, member: Member):
    """A joint member as a :class:`forward.MeasurementSet`: the template's measurements with
    the member's spectra and per-measurement overrides, checked like a run file."""
    return joint_member(series.run_path, member.spectra, member.measurement_overrides,
                        source=f"{series.source}: member[{member.label}]")


def joint_member(run_path, spectra: dict, overrides: dict, *, source: str):
    """The template's measurements with a member's spectra and overrides (what a worker
    builds from its payload); errors are located at ``<source>.measurement.<name>``."""
    return forward.load_measurements(run_path).with_overrides(overrides, spectra=spectra,
                                                              source=source)


def interface_names(series: Series):
    """Names of the chosen interface's mixing width in a member's result: (nm, 1e15)."""
    run = forward.load_measurements(series.run_path).first if series.joint else \
        forward.load_run(series.run_path)
    layers = run.layers
    if series.interface > len(layers) - 1:
        raise InputError(f"interface {series.interface} does not exist: the run file has "
                         f"{len(layers)} layers, so interfaces 1 to {len(layers) - 1}",
                         where=f"{series.source}: series.interface")
    name = layers[series.interface - 1].name
    return f"{name}.mixing_nm", f"{name}.mixing"


def member_path(output, label: str) -> Path:
    """Where a member's own result file lives: ``<output stem>.members/<label>.h5``."""
    output = Path(output)
    return output.parent / f"{output.stem}.members" / f"{label}.h5"
