"""``sondage invert``: sample the posterior of a run's free parameters given a spectrum
(:func:`inversion.invert`)."""

from __future__ import annotations

import shlex

from ..sample._workers import DEFAULT_WORKERS

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "sample the depth-profile posterior of a spectrum into an HDF5 result file"

DESCRIPTION = """\
Invert a measured spectrum into posterior draws of the sample model's free quantities (the
run file's [fit] table says which, and with which priors; README.md, "The [fit] table"), with nuisances such as
fluence, calibration, resolution and stopping marginalised.  The result file holds the chain,
posterior draws, derived thicknesses and mixing widths, profile bands, predictive spectra and
convergence diagnostics.

Before anything is written, the inputs pass the checks 'sondage check' prints: an error there
(the counts' leading signal not where the calibration puts it, counts off the exposure by more
than a factor of 10, a spectrum without counts) stops the run with one line and exit code 2;
--accept-calibration goes on past a calibration error deliberately (it is recorded).  Warnings
(signals closer than the detector resolution, beams above a non-Rutherford onset or above the
validated stopping range) are printed and stored in the result file.

Sampling stops when the chain is fit.tau_multiple (default 50) autocorrelation times long, or
at the step cap.  Ctrl-C stops after the current step and leaves the file resumable.  After
sampling, parameters piling up at a prior bound, walkers stuck apart from the others and
nuisances far from their priors are named in the warnings.

Exit codes: 0 finished (a chain that did not converge is reported loudly), 2 bad input,
3 finished but not converged with --require-convergence, 130 interrupted.

A run file of several measurements of one sample ([[measurement]] tables, each naming its
spectrum relative to the run file) is inverted jointly without a SPECTRUM argument: one
posterior, the sample and the stopping shared, calibration, resolution and fluence per
measurement (README.md, "Several spectra of one sample").

examples:
  sondage invert run.toml spectrum.csv -o result.h5
  sondage invert two-tilts.toml -o result.h5
  sondage invert run.toml spectrum.csv -o result.h5 --seed 7 --max-steps 20000 --workers 2
  sondage invert run.toml spectrum.csv -o result.h5 --resume --max-steps 40000
  sondage invert run.toml data.h5:/detector1/counts -o result.h5 --force
"""


def add_arguments(parser) -> None:
    parser.add_argument("run_file", metavar="RUN.toml", help="run file with a [fit] table")
    parser.add_argument("spectrum", metavar="SPECTRUM", nargs="?", default=None,
                        help="measured spectrum: text/CSV file or file.h5:/dataset (left out "
                             "when the run file's [[measurement]] tables name the spectra)")
    parser.add_argument("-o", "--output", required=True, metavar="RESULT.h5",
                        help="HDF5 result file to write (never overwritten without --force)")
    parser.add_argument("--seed", type=int, default=None,
                        help="random seed, 0 to 2147483647; the same seed gives identical "
                             "samples (default 0; a resumed file keeps its own)")
    parser.add_argument("--max-steps", type=int, default=None, metavar="N",
                        help="total steps in the chain, earlier segments included "
                             "(default: fit.max_steps, 20000)")
    parser.add_argument("--workers", type=int, default=DEFAULT_WORKERS, metavar="N",
                        help="processes evaluating the model (default: "
                             f"{DEFAULT_WORKERS}, measured to pay on 2 cores; see the README's [fit] section)")
    parser.add_argument("--accept-calibration", action="store_true",
                        help="go on although the counts' leading signal is not where the "
                             "calibration puts it (or the spectrum ends below it); recorded "
                             "in the result file")
    parser.add_argument("--require-convergence", action="store_true",
                        help="exit with code 3 when the run finished but did not converge "
                             "(for batches; default: exit 0 with a loud warning)")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--resume", action="store_true",
                      help="continue the chain stored in the result file")
    mode.add_argument("--force", action="store_true",
                      help="replace an existing result file")


def run(args) -> int:
    """Invert, print the summary (and, even with --quiet, a loud not-converged warning);
    return 0, 130 when the run was interrupted, 3 when it did not converge and
    --require-convergence asks for it."""
    from .._api import invert_reporting

    command = "sondage invert " + " ".join(
        shlex.quote(a) for a in [args.run_file]
        + ([args.spectrum] if args.spectrum is not None else []) + ["-o", args.output]
        + (["--seed", str(args.seed)] if args.seed is not None else [])
        + (["--max-steps", str(args.max_steps)] if args.max_steps is not None else [])
        + ["--workers", str(args.workers)]
        + (["--accept-calibration"] if args.accept_calibration else [])
        + (["--resume"] if args.resume else []) + (["--force"] if args.force else []))
    result = invert_reporting(args.run_file, args.spectrum, args.output, seed=args.seed,
                              max_steps=args.max_steps, resume=args.resume, force=args.force,
                              workers=args.workers, command=command,
                              accept_calibration=args.accept_calibration,
                              quiet=bool(getattr(args, "quiet", False)))
    if bool(result.diagnostics.get("interrupted", False)):
        return 130
    return 3 if args.require_convergence and not result.converged else 0
