"""``sondage demo``: the bundled invented scenario, end to end (check, invert, report;
:func:`inversion._demo.run_demo`)."""

from __future__ import annotations

from .._demo import DEMO_MAX_STEPS

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "run the bundled invented scenario end to end: check, invert and report"

DESCRIPTION = """\
Run sondage on its bundled demo: an INVENTED sample (a Ti cap over a Co film on Si, its Co/Si
interface mixed by an anneal) whose spectrum was simulated by sondage itself with counting
noise.  The true values are in data/demo/TRUTH.md, so you can see how the posterior compares.

The demo checks the run file and the spectrum, inverts the spectrum (a few minutes: 4000
steps, 272 s on one busy core), writes the report, and prints where everything went.  Its output folder is the demo's
own: an earlier demo result in it is replaced.

examples:
  sondage demo                        # writes into ./demo-output
  sondage demo -o /tmp/sondage-demo
  sondage demo --max-steps 400        # a quick look (the chain will not have converged)
"""


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
    from .._demo import run_demo

    run_demo(args.output, max_steps=args.max_steps, seed=args.seed, workers=args.workers,
             quiet=getattr(args, "quiet", False))
    return 0
