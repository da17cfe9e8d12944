"""Run files of several measurements of one sample: ``[[measurement]]`` tables.

One sample (``[[layer]]``, ``[physics]``, ``title`` and ``[fit]``) measured several times: two
detectors at different angles recording one exposure, the sample tilted, a second beam energy.
Each ``[[measurement]]`` table holds what belongs to one spectrum::

    [[measurement]]
    name = "tilt60"                  # letters, digits, '_' and '-'; unique
    spectrum = "tilt60.csv"          # relative to the run file's folder
    charge_group = "run1"            # optional: measurements of one exposure share its charge
    detector_group = "det1"          # optional: measurements of one detector share its
                                     # calibration and resolution
    windows = [[120, 460]]           # optional: this spectrum's fit windows
    [measurement.beam]               # the tables of a one-measurement run file
    [measurement.geometry]
    [measurement.detector]
    [measurement.calibration]
    [measurement.exposure]

Each measurement is checked as a run file of one measurement made of the shared tables and its
own (:func:`load_measurements` gives a :class:`forward.Run` per measurement, with every check of
:func:`forward.load_run`); error locations name the measurement
(``run.toml: measurement.tilt60.beam.energy_keV``).  A run file without ``[[measurement]]``
tables is one measurement, exactly as before.  :meth:`MeasurementSet.with_overrides` gives the
measurements other spectra and changed tables (a series member over a joint template), checked
again the same way.
"""

from __future__ import annotations

import dataclasses
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from ._errors import InputError
from ._runfile import _TOML_AT, _build, _kind, override_note

__all__ = ["Measurement", "MeasurementSet", "load_measurements", "parse_measurements",
           "has_measurements",
           "PER_MEASUREMENT_TABLES", "MEASUREMENT_KEYS"]

#: the tables that belong to one spectrum (shared tables: title, layer, physics, fit)
PER_MEASUREMENT_TABLES = ("beam", "geometry", "detector", "calibration", "exposure")
#: the keys of a ``[[measurement]]`` table
MEASUREMENT_KEYS = ("name", "spectrum", "charge_group", "detector_group", "windows") \
    + PER_MEASUREMENT_TABLES
_SHARED_KEYS = ("title", "layer", "physics", "fit", "measurement")
_NAME = re.compile(r"^[A-Za-z0-9_-]{1,40}$")


@dataclass(frozen=True)
class Measurement:
    """One spectrum of the sample.

    Attributes
    ----------
    name : str
        The measurement's name (parameter names carry it: ``fluence_scale@<name>``).
    run : forward.Run
        The shared tables and this measurement's own, checked as a run file of one
        measurement (its ``text`` is the whole file's).
    spectrum : Path or None
        The spectrum file (resolved against the run file's folder); None when not given.
    spectrum_text : str or None
        The spectrum as written in the run file (``file.h5:/dataset`` kept whole).
    charge_group : str or None
        Measurements of one exposure share one charge (fluence) factor.
    windows : list or None
        This spectrum's fit windows as written (checked by the inversion).
    detector_group : str or None
        Measurements of one detector (its electronics, its mounting) share its calibration and
        resolution: one ``gain_keV``, ``offset_keV`` and ``fwhm_keV`` parameter each.
    """

    name: str
    run: object
    spectrum: Path | None = None
    spectrum_text: str | None = None
    charge_group: str | None = None
    windows: list | None = None
    detector_group: str | None = None


@dataclass(frozen=True)
class MeasurementSet:
    """Every measurement of a run file (one for a run file without ``[[measurement]]``).

    Attributes
    ----------
    measurements : tuple of Measurement
    source : str
        The run file.
    text : str
        Its text.
    joint : bool
        True for a run file with ``[[measurement]]`` tables.
    """

    measurements: tuple
    source: str
    text: str
    joint: bool

    @property
    def names(self) -> list:
        return [m.name for m in self.measurements]

    @property
    def first(self):
        """The first measurement's run (the sample is the same in every one)."""
        return self.measurements[0].run

    def _members_by(self, key: str) -> dict:
        """``{group: [measurement names]}`` of the measurements' attribute ``key``."""
        out: dict = {}
        for m in self.measurements:
            if getattr(m, key) is not None:
                out.setdefault(getattr(m, key), []).append(m.name)
        return out

    def groups(self) -> dict:
        """``{charge group: [measurement names]}``."""
        return self._members_by("charge_group")

    def detector_groups(self) -> dict:
        """``{detector group: [measurement names]}``."""
        return self._members_by("detector_group")

    def with_overrides(self, changes=None, *, spectra=None, source: str | None = None
                       ) -> "MeasurementSet":
        """The measurements with some tables changed and other spectra, checked again.

        Parameters
        ----------
        changes : mapping, optional
            ``{measurement name: {table: {key: value}}}``, each measurement's changes applied
            by :meth:`forward.Run.with_overrides` (checked exactly like a run file).
        spectra : mapping, optional
            ``{measurement name: spectrum}`` replacing the spectra the run file names
            (``file.csv`` or ``file.h5:/dataset``; a relative path is taken from the run
            file's folder).
        source : str, optional
            Where the changes come from, for messages (default: the run file); a
            measurement's errors are located at ``<source>.measurement.<name>``.

        Raises
        ------
        InputError
            A name that is no measurement's, a bad key or value, members of a charge group
            left with different beams or exposures, members of a detector group left with
            different calibrations or detectors.
        """
        changes, spectra = dict(changes or {}), dict(spectra or {})
        where = source or self.source
        for name in [*changes, *spectra]:
            if name not in self.names:
                raise InputError(f"no measurement called {name!r}; measurements: "
                                 f"{', '.join(self.names)}", where=where)
        out = []
        for m in self.measurements:
            here = f"{where}.measurement.{m.name}" if source else \
                f"{self.source}: measurement.{m.name}"
            run = m.run.with_overrides(changes[m.name], source=here) if changes.get(m.name) \
                else m.run
            new = dataclasses.replace(m, run=run)
            if m.name in spectra:
                text = spectra[m.name]
                text = str(text) if isinstance(text, Path) else text
                new = dataclasses.replace(new, spectrum=_spectrum_path(
                    text, m.run.base_dir or Path.cwd(), here), spectrum_text=text)
            out.append(new)
        note = override_note({name: {**(changes.get(name) or {}),
                                     **({"spectrum": str(spectra[name])} if name in spectra
                                        else {})} for name in self.names}, where)
        found = dataclasses.replace(self, measurements=tuple(out), text=self.text + note)
        located = (lambda name: f"{where}.measurement.{name}") if source else None
        _check_ions(found, located)
        _check_groups(found, located)
        _check_detector_groups(found, located)
        return found


def load_measurements(path) -> MeasurementSet:
    """Read and check a run file of one or several measurements.

    Raises
    ------
    InputError
        For a missing file and every bad key or value, a measurement named twice, a
        per-measurement table at the top level beside ``[[measurement]]`` tables, a charge
        group or a detector group of one member, members of a detector group with different
        calibrations or detectors, a missing spectrum file.
    """
    from ._runfile import load_run

    p = Path(path)
    if not p.exists() or p.is_dir():
        return _single(load_run(path))  # its own message
    from ._spectrum_io import decode_text

    try:
        text, _ = decode_text(p.read_bytes())
    except UnicodeDecodeError:
        return _single(load_run(path))
    return parse_measurements(text, source=str(path), base_dir=p.resolve().parent)


def has_measurements(path) -> bool:
    """True for a run file with ``[[measurement]]`` tables (read as TOML only, no checks and
    no warnings; a file that cannot be read is left to :func:`load_run`'s own message)."""
    from ._spectrum_io import decode_text

    try:
        text, _ = decode_text(Path(path).read_bytes())
        return "measurement" in tomllib.loads(text.removeprefix("\ufeff"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False


def _single(run) -> MeasurementSet:
    return MeasurementSet((Measurement("spectrum", run),), run.source, run.text, False)


def parse_measurements(text: str, source: str = "<string>", base_dir=None) -> MeasurementSet:
    """:func:`load_measurements` of a run file given as text."""
    from ._runfile import parse_run

    text = text.removeprefix("\ufeff")
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        parse_run(text, source=source, base_dir=base_dir)  # raises the house message
        raise
    if "measurement" not in raw:
        return _single(parse_run(text, source=source, base_dir=base_dir))
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    tables = raw["measurement"]
    if not isinstance(tables, list) or not tables or not all(isinstance(t, dict)
                                                             for t in tables):
        raise InputError(f"expected [[measurement]] tables, got {_kind(tables)}; each "
                         "measurement is a [[measurement]] table with a name and its spectrum",
                         where=f"{source}: measurement")
    for key in raw:
        if key in PER_MEASUREMENT_TABLES:
            raise InputError(f"[{key}] belongs to one measurement, but this run file has "
                             f"[[measurement]] tables; allowed: [measurement.{key}] inside each "
                             "measurement (the top level holds title, [[layer]], [physics], "
                             "[fit])", where=f"{source}: {key}")
        if key not in _SHARED_KEYS:
            raise InputError(f"unknown key {key!r} in the run file's top level; allowed keys: "
                             f"{', '.join(_SHARED_KEYS)}", where=f"{source}: {key}")
    fit = raw.get("fit", {})
    if isinstance(fit, dict) and "windows" in fit:
        raise InputError("fit.windows belongs to one spectrum, but this run file has "
                         "[[measurement]] tables; allowed: windows = [[first, last], ...] in "
                         "each [[measurement]] table", where=f"{source}: fit.windows")
    out, seen = [], set()
    for k, table in enumerate(tables):
        here = f"{source}: measurement[{k + 1}]"
        unknown = [key for key in table if key not in MEASUREMENT_KEYS]
        if unknown:
            raise InputError(f"unknown key {unknown[0]!r} in a [[measurement]] table; allowed "
                             f"keys: {', '.join(MEASUREMENT_KEYS)}", where=f"{here}.{unknown[0]}")
        name = table.get("name")
        if not isinstance(name, str) or not _NAME.match(name):
            raise InputError(f"expected a name of 1 to 40 letters, digits, '_' or '-', got "
                             f"{_kind(name) if name is not None else 'none'}; every measurement "
                             "has a name (parameters are named after it, fluence_scale@<name>)",
                             where=f"{here}.name")
        if name in seen:
            raise InputError(f"two measurements are named {name!r}; allowed: a different name "
                             "for each measurement", where=f"{here}.name")
        seen.add(name)
        here = f"{source}: measurement.{name}"
        spectrum_text = table.get("spectrum")
        spectrum = None
        if spectrum_text is not None:
            spectrum = _spectrum_path(spectrum_text, base, f"{here}.spectrum")
        group = table.get("charge_group")
        if group is not None and (not isinstance(group, str) or not _NAME.match(group)):
            raise InputError(f"expected a name of 1 to 40 letters, digits, '_' or '-', got "
                             f"{_kind(group)}", where=f"{here}.charge_group")
        detector = table.get("detector_group")
        if detector is not None and (not isinstance(detector, str)
                                     or not _NAME.match(detector)):
            raise InputError(f"expected a name of 1 to 40 letters, digits, '_' or '-', got "
                             f"{_kind(detector)}", where=f"{here}.detector_group")
        windows = table.get("windows")
        single = {key: raw[key] for key in ("title", "layer", "physics", "fit") if key in raw}
        for key in PER_MEASUREMENT_TABLES:
            if key in table:
                single[key] = table[key]
        try:
            run = _build(single, source=source, text=text, base_dir=base)
        except InputError as exc:
            raise _located(exc, source, name) from None
        out.append(Measurement(name, run, spectrum, spectrum_text, group, windows, detector))
    found = MeasurementSet(tuple(out), source, text, True)
    _check_ions(found)
    _check_groups(found)
    _check_detector_groups(found)
    return found


def _spectrum_path(text: str, base: Path, where: str) -> Path:
    """The file of a spectrum as a run file names it (``file.h5:/dataset`` gives the file)."""
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"expected the path of a spectrum file in quotes, got {_kind(text)}",
                         where=where)
    file_part = text.split(":/", 1)[0] if ".h5:" in text or ".hdf5:" in text else text
    return (base / file_part).resolve() if not Path(file_part).is_absolute() \
        else Path(file_part)


def _check_ions(found: MeasurementSet, located=None) -> None:
    """One ion in every measurement: the stopping and straggling nuisances are shared."""
    first = found.measurements[0]
    for m in found.measurements[1:]:
        if m.run.beam.species != first.run.beam.species:
            where = located(m.name) if located else \
                f"{found.source}: measurement.{m.name}.beam.ion"
            raise InputError(f"measurement {m.name!r} uses {m.run.beam.species} but "
                             f"{first.name!r} {first.run.beam.species}; the stopping and "
                             "straggling nuisances are shared, so allowed: one ion in every "
                             "measurement (the beam energy may differ)", where=where)


def resolve_spectrum(measurement: Measurement) -> str | None:
    """The spectrum as :func:`forward.read_spectrum` takes it (an HDF5 dataset kept)."""
    if measurement.spectrum is None:
        return None
    text = measurement.spectrum_text or ""
    if ":/" in text and (".h5:" in text or ".hdf5:" in text):
        return f"{measurement.spectrum}:/{text.split(':/', 1)[1]}"
    return str(measurement.spectrum)


def _located(exc: InputError, source: str, name: str) -> InputError:
    """The error of a measurement's table, located inside that measurement."""
    where = exc.where or ""
    prefix = f"{source}: "
    if where.startswith(prefix):
        key = where[len(prefix):]
        if key.split(".", 1)[0] in PER_MEASUREMENT_TABLES:
            return InputError(exc.message, where=f"{prefix}measurement.{name}.{key}")
        if not key or key == "<string>":
            return InputError(exc.message, where=f"{prefix}measurement.{name}")
    return InputError(f"{exc.message} (measurement {name!r})", where=exc.where)


def _check_groups(found: MeasurementSet, located=None) -> None:
    """A charge group joins two or more measurements of one exposure: same charge and beam.

    ``located(name)``, when given, locates a mismatch left by changes made elsewhere
    (:meth:`MeasurementSet.with_overrides`)."""
    source = found.source
    by_name = {m.name: m for m in found.measurements}
    for group, names in found.groups().items():
        if group in by_name:
            raise InputError(f"charge group {group!r} has the name of a measurement; "
                             "parameters are named <quantity>@<owner>, so allowed: a charge "
                             "group name that no measurement has",
                             where=f"{source}: measurement.{names[0]}.charge_group")
        if len(names) < 2:
            raise InputError(f"charge group {group!r} has one member ({names[0]!r}); a charge "
                             "group joins two or more measurements of one exposure (detectors "
                             "recording one beam); allowed: the same charge_group in two or "
                             "more measurements, or none",
                             where=f"{source}: measurement.{names[0]}.charge_group")
        first = by_name[names[0]].run
        for other in names[1:]:
            run = by_name[other].run
            if (dataclasses.astuple(run.exposure) != dataclasses.astuple(first.exposure)
                    or run.beam != first.beam):
                allowed = ("the same changes of the beam and exposure for every member of the "
                           "charge group" if located else "the same [measurement.beam] and "
                           "[measurement.exposure] in every member of a charge group")
                raise InputError(f"measurements {names[0]!r} and {other!r} share charge group "
                                 f"{group!r} but not one beam and exposure; allowed: {allowed}",
                                 where=located(other) if located else
                                 f"{source}: measurement.{other}.charge_group")


#: what the members of a detector group have in common: (table, key) of every value compared
_DETECTOR_KEYS = (("calibration", "keV_per_channel"), ("calibration", "offset_keV"),
                  ("calibration", "quadratic_keV"), ("detector", "fwhm_keV"),
                  ("detector", "solid_angle_msr"))


def _check_detector_groups(found: MeasurementSet, located=None) -> None:
    """A detector group joins two or more spectra of one detector: one calibration, one
    detector table (resolution and solid angle).

    The solid angle is compared too, although no parameter is made of it: one detector in one
    mounting sees the sample under one solid angle whatever the sample's tilt, so a different
    value means another detector (or the same one moved), whose calibration and resolution
    the group would wrongly tie.  ``located(name)`` as in :func:`_check_groups`."""
    source = found.source
    by_name = {m.name: m for m in found.measurements}
    charge_groups = found.groups()
    for group, names in found.detector_groups().items():
        where = f"{source}: measurement.{names[0]}.detector_group"
        if len(names) < 2:
            raise InputError(f"detector group {group!r} has one member ({names[0]!r}); a "
                             "detector group joins two or more spectra of one detector "
                             "(the sample tilted, a second exposure); allowed: the same "
                             "detector_group in two or more measurements, or none", where=where)
        if group in by_name or group in charge_groups:
            what = "measurement" if group in by_name else "charge group"
            raise InputError(f"detector group {group!r} has the name of a {what}; parameters "
                             "are named <quantity>@<owner>, so allowed: a detector group name "
                             "that no measurement or charge group has", where=where)
        first = by_name[names[0]].run
        for other in names[1:]:
            run = by_name[other].run
            for table, key in _DETECTOR_KEYS:
                mine = getattr(getattr(first, table), key)
                theirs = getattr(getattr(run, table), key)
                if mine == theirs:
                    continue
                allowed = ("the same changes of the calibration for every member of the "
                           "detector group" if located else "the same [measurement.calibration] "
                           "and [measurement.detector] in every member of a detector group "
                           "(one detector, its electronics and its mounting), or no "
                           "detector_group")
                raise InputError(f"measurements {names[0]!r} and {other!r} share detector "
                                 f"group {group!r} but {table}.{key} is {mine:g} and "
                                 f"{theirs:g}; allowed: {allowed}",
                                 where=located(other) if located else
                                 f"{source}: measurement.{other}.detector_group")
