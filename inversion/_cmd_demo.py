"""``sondage demo``: the bundled invented scenario, end to end (check, invert, report)."""

from __future__ import annotations

import time
from pathlib import Path

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run", "demo_folder", "DEMO_MAX_STEPS"]

#: Step cap of the demo's chain.  The demo posterior's longest autocorrelation time is about
#: 50 steps, so 3000 steps reach the 50-tau convergence rule with a little to spare while the
#: whole demo stays within about three minutes on two cores (benchmarks/RESULTS.md).
DEMO_MAX_STEPS = 3000

HELP = "run the bundled invented scenario end to end: check, invert and report"

DESCRIPTION = """\
Run sondage on its bundled demo: an INVENTED sample (a Ti cap over a Co film on Si, its Co/Si
interface mixed by an anneal) whose spectrum was simulated by sondage itself with counting
noise.  The true values are in data/demo/TRUTH.md, so you can see how the posterior compares.

The demo checks the run file and the spectrum, inverts the spectrum (about two minutes on two
cores), writes the report, and prints where everything went.  Its output folder is the demo's
own: an earlier demo result in it is replaced.

examples:
  sondage demo                        # writes into ./demo-output
  sondage demo -o /tmp/sondage-demo
  sondage demo --max-steps 400        # a quick look (the chain will not have converged)
"""


def demo_folder() -> Path:
    """Where the demo's inputs are: the source tree's data/demo, or the copy inside a wheel."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "_data" / "demo", here.parent / "data" / "demo"):
        if (candidate / "run.toml").exists():
            return candidate
    from forward import InputError

    raise InputError("the bundled demo files are missing (looked for data/demo/run.toml beside "
                     "the package); reinstall sondage from its source tree")


def add_arguments(parser) -> None:
    parser.add_argument("-o", "--output", metavar="DIR", default="demo-output",
                        help="folder for the demo's result and report (default: ./demo-output)")
    parser.add_argument("--max-steps", type=int, default=DEMO_MAX_STEPS, metavar="N",
                        help=f"chain length (default {DEMO_MAX_STEPS})")
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="processes evaluating the model (default: as for sondage invert)")


def run(args) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from forward import InputError

    from . import _cmd_check
    from ._api import invert
    from ._cmd_invert import DEFAULT_WORKERS, summary_table
    from ._report import format_summary_text, read_report_data, write_report

    quiet = getattr(args, "quiet", False)
    say = (lambda *a, **k: None) if quiet else print
    if args.max_steps < 1:
        raise InputError(f"--max-steps {args.max_steps}: must be a whole number >= 1")
    folder = demo_folder()
    out = Path(args.output)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} exists and is not a folder; give -o a folder for the demo")
    out.mkdir(parents=True, exist_ok=True)
    run_file, spectrum = folder / "run.toml", folder / "spectrum.csv"
    result_file, report_dir = out / "demo-result.h5", out / "report"
    t0 = time.perf_counter()

    say("== 1/3  checking the run file and the spectrum (INVENTED demo data) ==")
    import forward

    say(_cmd_check.check_report(forward.load_run(run_file), forward.read_spectrum(spectrum)))

    say("== 2/3  inverting the spectrum ==")
    workers = args.workers if args.workers is not None else DEFAULT_WORKERS
    result = invert(run_file, spectrum, result_file, seed=args.seed, max_steps=args.max_steps,
                    force=True, workers=workers, progress=not quiet,
                    command=f"sondage demo -o {out} --max-steps {args.max_steps}")
    say(summary_table(result))

    say("== 3/3  writing the report ==")
    data = read_report_data(result_file)
    written = write_report(data, report_dir)
    say(format_summary_text(data, compact=True))

    say("")
    say(f"demo finished in {time.perf_counter() - t0:.0f} s")
    say(f"  run file      {run_file}")
    say(f"  spectrum      {spectrum}   (simulated, INVENTED)")
    say(f"  true values   {folder / 'TRUTH.md'}")
    say(f"  result file   {result_file}")
    say(f"  report        {report_dir}/")
    for name in sorted({Path(p).name for p in written.values()}):
        say(f"                  {name}")
    return 0

