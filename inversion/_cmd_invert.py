"""``sondage invert``: sample the posterior of a run's free parameters given a spectrum."""

from __future__ import annotations

import os
import shlex
import sys
import warnings

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run", "summary_table", "DEFAULT_WORKERS"]

#: Two processes ran the 10-parameter layer benchmark 1.5x faster than one on this 2-core
#: machine (benchmarks/RESULTS.md, "Inversion"), with identical samples.
DEFAULT_WORKERS = min(2, os.cpu_count() or 1)

HELP = "sample the depth-profile posterior of a spectrum into an HDF5 result file"

DESCRIPTION = """\
Invert a measured spectrum into posterior draws of the sample model's free quantities (the
run file's [fit] table says which, and with which priors; README.md, "The [fit] table"), with nuisances such as
fluence, calibration, resolution and stopping marginalised.  The result file holds the chain,
posterior draws, derived thicknesses and mixing widths, profile bands, predictive spectra and
convergence diagnostics.

Sampling stops when the chain is fit.tau_multiple (default 50) autocorrelation times long, or
at the step cap.  Ctrl-C stops after the current step and leaves the file resumable.

examples:
  sondage invert run.toml spectrum.csv -o result.h5
  sondage invert run.toml spectrum.csv -o result.h5 --seed 7 --max-steps 20000 --workers 2
  sondage invert run.toml spectrum.csv -o result.h5 --resume --max-steps 40000
  sondage invert run.toml data.h5:/detector1/counts -o result.h5 --force
"""


def add_arguments(parser) -> None:
    parser.add_argument("run_file", metavar="RUN.toml", help="run file with a [fit] table")
    parser.add_argument("spectrum", metavar="SPECTRUM",
                        help="measured spectrum: text/CSV file or file.h5:/dataset")
    parser.add_argument("-o", "--output", required=True, metavar="RESULT.h5",
                        help="HDF5 result file to write (never overwritten without --force)")
    parser.add_argument("--seed", type=int, default=0,
                        help="random seed; the same seed gives identical samples (default 0)")
    parser.add_argument("--max-steps", type=int, default=None, metavar="N",
                        help="total steps in the chain, earlier segments included "
                             "(default: fit.max_steps, 20000)")
    parser.add_argument("--workers", type=int, default=DEFAULT_WORKERS, metavar="N",
                        help="processes evaluating the model (default: "
                             f"{DEFAULT_WORKERS}, measured to pay on 2 cores; see the README's [fit] section)")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--resume", action="store_true",
                      help="continue the chain stored in the result file")
    mode.add_argument("--force", action="store_true",
                      help="replace an existing result file")


def _fmt(x: float) -> str:
    return f"{x:.4g}" if abs(x) < 1e5 else f"{x:.3e}"


def summary_table(result) -> str:
    """Median and 68 % interval of each layer thickness and interface mixing width."""
    rows = []
    for name, s in result.summary.items():
        if name.endswith((".thickness_nm", ".areal_density", ".mixing", ".mixing_nm")):
            rows.append((name, s.get("unit", ""), s["median"], s["low68"], s["high68"]))
    if not rows:
        return ""
    width = max(len(r[0]) for r in rows)
    lines = [f"{'quantity':<{width}}  {'median':>10}  {'68 % interval':>23}  unit"]
    for name, unit, med, lo, hi in rows:
        lines.append(f"{name:<{width}}  {_fmt(med):>10}  "
                     f"{'[' + _fmt(lo) + ', ' + _fmt(hi) + ']':>23}  {unit}")
    return "\n".join(lines)


def run(args) -> int:
    from ._api import NotConvergedWarning, invert

    command = "sondage invert " + " ".join(
        shlex.quote(a) for a in [args.run_file, args.spectrum, "-o", args.output]
        + (["--seed", str(args.seed)])
        + (["--max-steps", str(args.max_steps)] if args.max_steps is not None else [])
        + ["--workers", str(args.workers)]
        + (["--resume"] if args.resume else []) + (["--force"] if args.force else []))
    quiet = bool(getattr(args, "quiet", False))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotConvergedWarning)
        result = invert(args.run_file, args.spectrum, args.output, seed=args.seed,
                        max_steps=args.max_steps, resume=args.resume, force=args.force,
                        workers=args.workers, progress=not quiet, command=command)
    for w in caught:
        if not issubclass(w.category, NotConvergedWarning):
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    table = summary_table(result)
    if table and not quiet:
        print(table)
    diag = result.diagnostics
    steps = int(diag.get("steps", 0))
    if not quiet:
        print(f"{steps} steps x {int(diag.get('walkers', 0))} walkers, mean acceptance "
              f"{float(diag.get('mean_acceptance', float('nan'))):.2f}; result in {args.output}")
    # convergence is reported on every run, loudly, even with --quiet
    for w in caught:
        if issubclass(w.category, NotConvergedWarning):
            text = " ".join(str(w.message).split())
            bar = "!" * 78
            print(f"{bar}\nsondage: WARNING: {text}\n{bar}", file=sys.stderr)
    if bool(diag.get("interrupted", False)):
        return 130
    return 0
