"""``sondage check`` as a library function: the pre-flight report of a run file (its ``[fit]``
table checked as ``sondage invert`` would) and, optionally, a spectrum (:func:`check_files`).
"""

from __future__ import annotations

import forward
from forward import InputError

from ._api import prepare, prepare_joint
from ._inputs import load_inputs
from .fit._spec import bind_fit, read_fit_settings

__all__ = ["check_files"]


def _fit_findings(run, spectrum) -> list:
    """The ``[fit]`` table checked as ``sondage invert`` would: its errors as findings, and a
    warning for a table that frees nothing about the sample."""
    if "fit" not in getattr(run, "raw", {}) and not run.fit:
        return []
    try:
        settings = read_fit_settings(run.fit, run.source, 0)
        model = forward.ForwardModel(run)
        bind_fit(settings, model.sample_columns(), model.default_nuisance())
        if spectrum is not None:
            prepare(run, spectrum)  # windows and thresholds against the spectrum's channels
    except InputError as exc:
        if "nothing about the sample is free" not in exc.message:
            raise  # a key of the run file, reported as every other key is: no report
        return [forward.Finding("warning", "fit.free", exc.message + "; sondage invert "
                                "refuses a [fit] table that frees nothing", exc.where or "")]
    return []


def check_files(run_file, spectrum_file=None) -> "forward.Preflight":
    """What ``sondage check`` prints: the pre-flight report of a run file (its ``[fit]``
    table checked as ``sondage invert`` would) and, optionally, a spectrum.

    The readers' warnings are issued once (the command line prints them) and listed in the
    report.  Errors in the files, the ``[fit]`` table included, raise
    :class:`forward.InputError`; the pre-flight errors are in the report
    (:meth:`forward.Preflight.error`).
    """
    if not hasattr(run_file, "layers") and forward.has_measurements(run_file):
        found = forward.load_measurements(run_file)
        if spectrum_file is not None:
            raise InputError("this run file names a spectrum in each of its [[measurement]] "
                             "tables; allowed: sondage check RUN.toml without SPECTRUM",
                             where=str(spectrum_file))
        return _check_joint(found)
    inputs = load_inputs(run_file, spectrum_file)
    report = forward.preflight(inputs.run, inputs.spectrum, load_warnings=inputs.load_warnings)
    # with a spectrum that already fails, the [fit] table is checked without it
    report.findings += _fit_findings(inputs.run, None if report.errors else inputs.spectrum)
    return report


def _check_joint(found) -> "forward.Preflight":
    """The report of a run file of several measurements: each measurement's report (its
    edges, its depth resolution per layer, its spectrum against its calibration), under a
    heading naming it, with each finding located in its measurement; then the joint ``[fit]``
    table checked as ``sondage invert`` would."""
    from ._joint import load_joint, measurement_runs

    runs = measurement_runs(found)  # the [fit] table's @-names, checked
    report = forward.Preflight(lines=[f"Run file {found.source}: {len(runs)} measurements of "
                                      f"one sample ({', '.join(found.names)})"])
    spectra = []
    for m, run in zip(found.measurements, runs):
        spectrum = None
        if m.spectrum is not None:
            if not m.spectrum.is_file():
                raise InputError(f"spectrum file {str(m.spectrum)!r} not found; allowed: the "
                                 "path of an existing spectrum file, relative to the run file",
                                 where=f"{found.source}: measurement.{m.name}.spectrum")
            spectrum = forward.resolve_spectrum(m)
        inputs = load_inputs(run, spectrum)
        spectra.append(inputs.spectrum)
        part = forward.preflight(inputs.run, inputs.spectrum,
                                 load_warnings=inputs.load_warnings)
        group = "".join(f" ({kind} group {value!r})" for kind, value in
                        (("charge", m.charge_group), ("detector", m.detector_group)) if value)
        report.lines += ["", f"=== measurement {m.name!r}{group}: spectrum "
                             f"{m.spectrum_text or '(none named)'} ==="] + list(part.lines)
        report.findings += [forward.Finding(f.severity, f.key, f"measurement {m.name!r}: "
                                            f"{f.message}", f.where) for f in part.findings]
    if not report.errors and ("fit" in found.first.raw or found.first.fit):
        try:
            for run in runs:
                _fit_findings(run, None)
            if all(s is not None for s in spectra):
                objective = prepare_joint(load_joint(found, spectra=spectra))
                report.lines += ["", f"Joint fit: {objective.ndim} free parameters: "
                                     + ", ".join(objective.names)]
        except InputError as exc:
            if "nothing about the sample is free" not in exc.message:
                raise
            report.findings.append(forward.Finding(
                "warning", "fit.free", exc.message + "; sondage invert refuses a [fit] table "
                "that frees nothing", exc.where or ""))
    return report
