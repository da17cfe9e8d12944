"""``sondage simulate``: the expected spectrum of a run file's sample, optionally with noise,
as a CSV spectrum (:func:`forward.simulate`, written by
:func:`inversion.report._simulation.write_simulation`)."""

from __future__ import annotations

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "compute the expected spectrum of a run file's sample (optionally with counting noise)"

DESCRIPTION = """\
Compute the spectrum the run file's layered sample would give under its beam, geometry,
detector, calibration and exposure, and write it as a CSV spectrum: channel, channel-centre
energy, counts, the expected counts, and the expected counts of each species.  With --poisson
the counts column is a Poisson draw (reproducible with --seed); otherwise it holds the expected
counts.  The file reads back like a measured spectrum, so a simulated run can be inverted.

examples:
  sondage simulate sample.toml -o spectrum.csv
  sondage simulate sample.toml -o noisy.csv --poisson --seed 7 --plot noisy.png
  sondage simulate sample.toml -o wide.csv --channels 2048
  sondage simulate sample.toml -o spectrum.csv --force    # replace an earlier spectrum.csv
  sondage simulate tracer.toml -o tracer.csv --isotopes    # 16O and 18O signals apart
"""


def add_arguments(parser) -> None:
    """Options of ``sondage simulate``."""
    parser.add_argument("run_file", metavar="RUN.toml", help="the run file with the sample")
    parser.add_argument("-o", "--output", metavar="SPECTRUM.csv", required=True,
                        help="where to write the simulated spectrum (CSV)")
    parser.add_argument("--poisson", action="store_true",
                        help="draw the counts column from a Poisson distribution")
    parser.add_argument("--seed", type=int, default=None, metavar="N",
                        help="seed of the Poisson draw (default: a fresh seed each run)")
    parser.add_argument("--plot", metavar="FIGURE.png", default=None,
                        help="also draw the spectrum to this image file (png, pdf or svg)")
    parser.add_argument("--isotopes", action="store_true",
                        help="also write one expected-counts column per scattering isotope")
    parser.add_argument("--channels", type=int, default=None, metavar="N",
                        help="number of channels (default: enough for 1.05 x the highest edge)")
    parser.add_argument("--force", action="store_true",
                        help="replace an existing output file (never the run file)")


def run(args) -> int:
    """Write the spectrum (and the figure); return 0."""
    import numpy as np

    from forward import InputError

    from ..report._simulation import write_simulation

    if args.channels is not None and not 1 <= args.channels <= 65536:
        raise InputError(f"{args.channels} channels; allowed: a whole number from 1 to 65536",
                         where="--channels")
    if args.seed is not None and not args.poisson:
        raise InputError("--seed only applies to a Poisson draw; add --poisson",
                         where="--seed")
    if args.seed is not None and not 0 <= args.seed <= 2**31 - 1:
        raise InputError(f"seed {args.seed} is not allowed; allowed: a whole number from 0 to "
                         f"{2**31 - 1}", where="--seed")
    if args.plot:
        import matplotlib

        matplotlib.use("Agg")  # the command draws to files only
    model, columns = write_simulation(args.run_file, args.output, plot=args.plot,
                                      n_channels=args.channels, poisson=args.poisson,
                                      seed=args.seed, isotopes=args.isotopes, force=args.force)
    if not getattr(args, "quiet", False):
        total = float(np.sum(columns["expected"]))
        print(f"wrote {model.n_channels} channels ({total:.4g} expected counts) to {args.output}"
              + (f"; figure {args.plot}" if args.plot else ""))
    return 0
