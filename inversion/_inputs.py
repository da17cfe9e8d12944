"""An inversion's inputs, read once and checked before anything is written.

* :func:`load_inputs` reads the run file and the spectrum, recording the warnings the readers
  raise (and passing them on once), so that they can be listed in a report and stored in the
  result file;
* :func:`preflight_inputs` runs the pre-flight checks of :func:`forward.preflight` (the same
  that ``sondage check`` prints) and refuses what they call an error;
* :func:`check_seed` refuses a seed the random generators cannot take.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

import forward
from forward import InputError

from .sample._convergence import MAX_STEPS  # re-exported: ten million steps, weeks of sampling

__all__ = ["Inputs", "load_inputs", "preflight_inputs", "check_seed",
           "replay_warnings", "as_spectrum", "SEED_MAX", "MAX_STEPS", "PreflightWarning"]


#: The largest seed: the start search, the walker ball and the band draws use ``seed``,
#: ``seed + 1`` and ``seed + 2``, series members ``seed + 1000 k``, and numpy's generators
#: take at most 2**32 - 1.
SEED_MAX = 2**31 - 1


class PreflightWarning(forward.InputWarning):
    """A finding of the pre-flight checks that does not stop an inversion (recorded in the
    result file's ``/diagnostics`` attribute ``input_warnings``)."""


@dataclass
class Inputs:
    """A run and a spectrum as an inversion reads them.

    Attributes
    ----------
    run : forward.Run
    spectrum : forward.Spectrum or numpy.ndarray
        The spectrum as read (an array of counts stays an array).
    load_warnings : list of warnings.WarningMessage
        What the readers warned about.
    """

    run: object
    spectrum: object
    load_warnings: list = field(default_factory=list)


def replay_warnings(caught) -> None:
    """Issue recorded warnings again, each exactly once (whatever filters ran before)."""
    for w in caught:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)


def _recorded(function, *args):
    """(result, warnings raised) of ``function(*args)``."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        value = function(*args)
    return value, list(caught)


def load_inputs(run, spectrum, *, replay: bool = True) -> Inputs:
    """Read the run (a path or a parsed run) and the spectrum (a path, a
    :class:`forward.Spectrum`, an array of counts, or None), recording the warnings.

    Parameters
    ----------
    replay : bool
        Issue the recorded warnings again (the command line prints them).
    """
    caught = []
    if not hasattr(run, "layers"):
        run, caught = _recorded(forward.load_run, run)
    if spectrum is None:
        pass
    elif isinstance(spectrum, (str, Path)):
        spectrum, more = _recorded(forward.read_spectrum, spectrum)
        caught += more
    elif not hasattr(spectrum, "counts"):
        values = np.asarray(spectrum, dtype=float)
        if values.ndim == 1 and values.size and np.all(np.isfinite(values)):
            fractional = np.flatnonzero(values != np.round(values))
            if fractional.size:
                with warnings.catch_warnings(record=True) as more:
                    warnings.simplefilter("always")
                    warnings.warn(
                        f"spectrum (array of counts): {fractional.size} of {values.size} counts "
                        f"are not whole numbers (the first, {values[fractional[0]]:g}, in "
                        f"channel {fractional[0]}); they are read as they are",
                        forward.NonIntegerCountsWarning, stacklevel=2)
                caught += list(more)
    if replay:
        replay_warnings(caught)
    return Inputs(run, spectrum, caught)


def as_spectrum(spectrum):
    """A :class:`forward.Spectrum` of the spectrum (arrays of counts: channels from 0)."""
    if hasattr(spectrum, "channel") and hasattr(spectrum, "counts"):
        return spectrum
    counts = np.asarray(spectrum, dtype=float)
    return forward.Spectrum(channel=np.arange(counts.size), counts=counts,
                            source="spectrum (array of counts)")


def preflight_inputs(inputs: Inputs, *, accept_calibration: bool = False, emit: bool = True
                     ) -> list:
    """The pre-flight checks of an inversion: refuse errors, return the warnings.

    Parameters
    ----------
    inputs : Inputs
    accept_calibration : bool
        Proceed although the counts' leading signal is not where the calibration puts it
        (recorded as a warning).
    emit : bool
        Issue the checks' own warnings (:class:`PreflightWarning`); the readers' warnings
        were issued when they were read.

    Returns
    -------
    list of str
        Every warning, the readers' included, as one line each (what the result file keeps).

    Raises
    ------
    forward.InputError
        The first error, naming how many more ``sondage check`` would list.
    """
    report = forward.preflight(inputs.run, as_spectrum(inputs.spectrum),
                               load_warnings=inputs.load_warnings,
                               accept_calibration=accept_calibration)
    error = report.error()
    if error is not None:
        raise error
    found = report.warnings
    if emit:
        for f in found:
            if f.key != "input":
                warnings.warn(f.text(), PreflightWarning, stacklevel=2)
    return [f.text() for f in found]


def check_seed(seed, *, where: str = "--seed"):
    """The seed as an int, or None; refuse what the random generators cannot take."""
    if seed is None:
        return None
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) \
            or not 0 <= int(seed) <= SEED_MAX:
        raise InputError(f"seed {seed!r} is not allowed; allowed: a whole number from 0 to "
                         f"{SEED_MAX}", where=where)
    return int(seed)
