"""``sondage plan``: expected error bars of candidate set-ups before the measurement
(:func:`inversion.plan`, written by :func:`inversion.planning._output.plan_reporting`)."""

from __future__ import annotations

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "expected error bars of candidate set-ups (angles, energy, charge) before measuring"

DESCRIPTION = """\
Read a run file that describes the sample you expect (its layers at their nominal values) and
what the inversion will free ([fit]), and work out, for every set-up of a grid, the posterior
standard deviation each free quantity is expected to get: from the Fisher information of the
Poisson counts the forward model expects at the nominal sample, plus the priors' curvature
(a Gaussian, Laplace approximation).  Derived quantities (thickness and mixing width in nm,
totals) follow by the delta method; the variance of each is split into a counting part and one
part per prior, which says what limits it.  With --target, each set-up also gets the charge
that brings the target quantity's sd to the target, or "not reachable by charge alone" where
the priors dominate.

Every --vary value is checked by the run-file reader as if it were in the run file.  Set-ups
that differ only in charge share one forward model (charge only scales the counts).

Writes into the folder: plan.csv (every set-up, ranked), plan.md (ranking, the best set-up in
detail, priors, warnings), one figure per varied key (expected sd against it), and with
--check N, check.csv: N spectra simulated at the best set-up, each inverted in full, their mean
posterior sd against the expected sd.

varied keys (run-file units): beam.energy_keV, geometry.scattering_deg, geometry.tilt_deg,
geometry.incidence_deg, geometry.exit_deg, detector.fwhm_keV, detector.solid_angle_msr,
calibration.keV_per_channel, calibration.offset_keV, exposure.charge_uC, exposure.particles,
exposure.live_fraction

examples:
  sondage plan film.toml --nominal film.mixing=40 -o plan/
  sondage plan film.toml --nominal film.mixing=40 --vary geometry.tilt_deg=0,20,40,60 \\
      --vary exposure.charge_uC=1,2,5,10,20 --target film.mixing=5 -o plan/
  sondage plan film.toml --vary beam.energy_keV=1500,2000,2500 \\
      --target film.areal_density=1% -o plan/ --check 5
"""


def add_arguments(parser) -> None:
    """Options of ``sondage plan``."""
    parser.add_argument("run_file", metavar="RUN.toml",
                        help="run file: the expected sample, the set-up, and [fit]")
    parser.add_argument("-o", "--output", metavar="DIR", required=True,
                        help="folder for plan.csv, plan.md and the figures")
    parser.add_argument("--vary", metavar="KEY=V1,V2,...", action="append", default=[],
                        help="a set-up key and the values to try (repeat for a grid)")
    parser.add_argument("--target", metavar="QUANTITY[=SD]", default=None,
                        help="rank by this quantity's expected sd and give the charge that "
                             "reaches SD (in its unit, or in per cent: 2%%)")
    parser.add_argument("--nominal", metavar="NAME=VALUE", action="append", default=[],
                        help="nominal value of a free parameter the run file cannot give "
                             "(every free mixing width needs one)")
    parser.add_argument("--check", metavar="N", type=int, default=0,
                        help="invert N simulated spectra at the best set-up and compare their "
                             "posterior sds with the expected ones (minutes per spectrum)")
    parser.add_argument("--seed", type=int, default=0,
                        help="first seed of the --check spectra and chains (default 0)")
    parser.add_argument("--workers", type=int, default=1, metavar="N",
                        help="processes per --check inversion (default 1)")
    parser.add_argument("--max-steps", type=int, default=None, metavar="N",
                        help="step cap of each --check inversion (default: fit.max_steps)")
    parser.add_argument("--format", choices=("png", "svg", "pdf"), default="png",
                        help="image format of the figures (default png)")
    parser.add_argument("--force", action="store_true",
                        help="replace plan files already in the folder")


def run(args) -> int:
    """Plan, write the folder and print the best set-ups; return 0."""
    import matplotlib

    matplotlib.use("Agg")  # files only
    from ..planning._output import plan_reporting

    plan_reporting(args.run_file, args.output, vary=args.vary, target=args.target,
                   nominal=args.nominal, check=args.check, seed=args.seed,
                   workers=args.workers, max_steps=args.max_steps, force=args.force,
                   quiet=bool(getattr(args, "quiet", False)), formats=(args.format,))
    return 0
