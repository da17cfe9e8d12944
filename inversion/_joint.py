"""The inputs of a joint inversion: a run file of several ``[[measurement]]`` tables, each
naming its spectrum, read and checked once (:func:`load_joint`), and its objective
(:func:`prepare_joint`).

Each measurement goes through exactly what a run of one spectrum goes through (reading with
its warnings recorded, the pre-flight checks of ``sondage check``); their objectives are
joined by :func:`inversion._api.prepare_joint` into one
:class:`~inversion.fit._joint.JointObjective`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import forward
from forward import InputError

from ._inputs import load_inputs, preflight_inputs
from .fit._joint import measurement_fit

__all__ = ["JointInputs", "load_joint", "preflight_joint", "measurement_runs"]


@dataclass
class JointInputs:
    """A joint run as an inversion reads it.

    Attributes
    ----------
    measurements : forward.MeasurementSet
    runs : list of forward.Run
        Each measurement's run, its ``[fit]`` table its own (:func:`measurement_fit`).
    inputs : list of inversion._inputs.Inputs
        Each measurement's run and spectrum, with the readers' warnings.
    """

    measurements: object
    runs: list
    inputs: list = field(default_factory=list)


def measurement_runs(measurements) -> list:
    """Each measurement's run with its own ``[fit]`` table (``<quantity>@<measurement>``
    resolved, its windows set)."""
    groups = measurements.groups()
    detector_groups = measurements.detector_groups()
    names = measurements.names
    out = []
    for m in measurements.measurements:
        fit = measurement_fit(m.run.fit, name=m.name, group=m.charge_group, names=names,
                              groups=groups, windows=m.windows, source=measurements.source,
                              detector_group=m.detector_group,
                              detector_groups=detector_groups)
        out.append(replace(m.run, fit=fit))
    return out


def load_joint(run_file, *, spectra=None) -> JointInputs:
    """Read a joint run file and every spectrum it names.

    Parameters
    ----------
    run_file : path or forward.MeasurementSet
    spectra : list, optional
        The spectra (paths, :class:`forward.Spectrum` or arrays of counts), one per
        measurement in the run file's order; default the files the run file names.

    Raises
    ------
    forward.InputError
        A measurement without a spectrum, a spectrum file that is missing, a bad key.
    """
    found = run_file if hasattr(run_file, "measurements") else \
        forward.load_measurements(run_file)
    runs = measurement_runs(found)
    if spectra is None:
        spectra = []
        for m in found.measurements:
            if m.spectrum is None:
                raise InputError("this measurement names no spectrum; allowed: spectrum = "
                                 "\"file.csv\" (relative to the run file) in every "
                                 "[[measurement]] table", where=f"{found.source}: measurement."
                                 f"{m.name}.spectrum")
            if not m.spectrum.is_file():
                raise InputError(f"spectrum file {str(m.spectrum)!r} not found; allowed: the "
                                 "path of an existing spectrum file, relative to the run file",
                                 where=f"{found.source}: measurement.{m.name}.spectrum")
            spectra.append(forward.resolve_spectrum(m))
    if len(spectra) != len(runs):
        raise InputError(f"{len(spectra)} spectra for {len(runs)} measurements; allowed: one "
                         "spectrum per measurement", where=found.source)
    inputs = [load_inputs(run, spectrum) for run, spectrum in zip(runs, spectra)]
    return JointInputs(found, runs, inputs)


def preflight_joint(joint: JointInputs, *, accept_calibration: bool = False) -> list:
    """The pre-flight checks of every measurement: refuse the first error (its location names
    the measurement), return every warning prefixed with the measurement's name."""
    out = []
    for m, inputs in zip(joint.measurements.measurements, joint.inputs):
        try:
            found = preflight_inputs(inputs, accept_calibration=accept_calibration)
        except InputError as exc:
            raise InputError(f"measurement {m.name!r}: {exc.message}", where=exc.where) from None
        out += [f"measurement {m.name!r}: {w}" for w in found]
    return out
