"""``sondage series``: invert every spectrum of an annealing series and fit the Arrhenius law.

The series file names a run-file template and the members (see :mod:`inversion.series` and
README.md, "Annealing series").  Members are inverted on dask.distributed, by default on a
local cluster of worker processes; each member keeps its own resumable result file beside the
series file.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "invert an annealing series and fit diffusion coefficients and the Arrhenius law"

DESCRIPTION = """\
Invert every member of an annealing series (one spectrum per anneal plus the as-deposited
sample; one per measurement when the template has [[measurement]] tables), then compute the
posterior of the diffusion coefficient D = (w^2 - w0^2) / (2 t) of one interface for each
anneal, the Arrhenius law D = D0 exp(-Ea / kT), and comparisons of neighbouring members.  Each member's full result is kept in SERIES.members/LABEL.h5 next to
the output file, linked from it; figures and summary.md go to SERIES.report/.

Before any worker starts, every member passes the checks of 'sondage check' and each of its
spectra must hold the chosen interface's signal; a member that fails stops the series with one
line naming it and its spectrum (exit code 2).

examples:
  sondage series anneals.toml -o anneals.h5
  sondage series anneals.toml -o anneals.h5 --workers 2 --seed 7
  sondage series anneals.toml -o anneals.h5 --resume
  sondage series anneals.toml -o anneals.h5 --scheduler tcp://127.0.0.1:8786
"""


def add_arguments(parser) -> None:
    """Options of ``sondage series``."""
    parser.add_argument("series_file", metavar="SERIES.toml", help="the series file")
    parser.add_argument("-o", "--output", metavar="SERIES.h5", required=True,
                        help="the series result file to write")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="address of a running dask.distributed scheduler, e.g. "
                             "tcp://127.0.0.1:8786 (default: start a local cluster)")
    parser.add_argument("--workers", metavar="N", type=int, default=2,
                        help="worker processes of the local cluster, one thread each "
                             "(default 2)")
    parser.add_argument("--resume", action="store_true",
                        help="keep finished members, continue unfinished ones")
    parser.add_argument("--force", action="store_true",
                        help="replace an existing series file and its member files")
    parser.add_argument("--seed", metavar="N", type=int, default=0,
                        help="base seed: member k uses N + 1000 k (default 0)")
    parser.add_argument("--max-steps", metavar="N", type=int, default=None,
                        help="chain length per member (default: the series file's, else the "
                             "run file's)")
    parser.add_argument("--accept-calibration", action="store_true",
                        help="go on although a member's counts do not line up with its "
                             "calibration (recorded in the member's result file)")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def run(args) -> int:
    """Run the series; return 0 (bad input raises InputError)."""
    from forward import InputError

    from ..series._file import load_series
    from ..series._runner import run_series

    if args.resume and args.force:
        raise InputError("give --resume or --force, not both", where="--force")
    if args.max_steps is not None and args.max_steps < 1:
        raise InputError(f"max steps must be at least 1, got {args.max_steps}",
                         where="--max-steps")
    if args.scheduler and not args.scheduler.startswith(("tcp://", "tls://", "inproc://")):
        raise InputError(f"scheduler address {args.scheduler!r} needs a protocol; e.g. "
                         "tcp://127.0.0.1:8786", where="--scheduler")
    import matplotlib

    matplotlib.use("Agg")  # the series report is drawn to files only
    series = load_series(args.series_file)
    out = run_series(series, Path(args.output), scheduler=args.scheduler, workers=args.workers,
                     resume=args.resume, force=args.force, seed=args.seed,
                     max_steps=args.max_steps, progress=not args.no_progress,
                     accept_calibration=args.accept_calibration)
    print(f"series written to {out}; report in {out.parent / (out.stem + '.report')}")
    return 0
