"""``sondage check`` as a library function: the pre-flight report of a run file (its ``[fit]``
table checked as ``sondage invert`` would) and, optionally, a spectrum (:func:`check_files`).
"""

from __future__ import annotations

import forward
from forward import InputError

from ._api import prepare
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
    inputs = load_inputs(run_file, spectrum_file)
    report = forward.preflight(inputs.run, inputs.spectrum, load_warnings=inputs.load_warnings)
    # with a spectrum that already fails, the [fit] table is checked without it
    report.findings += _fit_findings(inputs.run, None if report.errors else inputs.spectrum)
    return report
