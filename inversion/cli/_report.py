"""``sondage report``: figures and summaries of a finished (or interrupted) inversion
(:func:`inversion.build_report`).

Reads one HDF5 result file and writes, into one folder, the spectrum figure (measured counts,
posterior predictive bands, each species' contribution, residuals), the depth-profile figure
(atom fractions with 68 % and 95 % credible bands), a corner plot, a convergence figure, and
summary.md / summary.csv; then prints a short summary.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "draw the figures and write the summary tables of a result file"

DESCRIPTION = """\
Read a result file written by 'sondage invert' and write into one folder:

  spectrum.png/.svg     measured counts, posterior predictive median with 68 % and 95 %
                        bands, each species' median contribution, and Poisson deviance
                        residuals below; channel axis with the energy (keV) on top; zoom
                        panels (A, B, ...) with their residuals on the narrow signal regions;
                        shaded ranges where the residuals run one way (model check)
  profile.png/.svg      atom fraction of each species against depth (1e15 atoms/cm2, and nm
                        on top where the layer densities allow) with 68 % and 95 % credible
                        bands and the best-fit profile; one panel per species when one of
                        them is minor (--profile)
  corner.png/.svg       one- and two-dimensional marginals of the sample's parameters and the
                        derived thicknesses and mixing widths (more with --corner)
  convergence.png/.svg  walker traces and the autocorrelation time estimated on growing
                        parts of the chain, against the N/50 line
  summary.md, .csv      every quantity with median, 68 % and 95 % intervals, unit and prior;
                        the sampler diagnostics, warnings and the run's provenance

A run that did not converge, or whose model the posterior predictive check rejected, is
flagged at the top of summary.md and of the printed summary, and stamped on every figure.

examples:
  sondage report film.h5                     # writes film_report/ beside film.h5
  sondage report film.h5 -o figures/film     # writes into figures/film/
  sondage report film.h5 --format pdf        # PNG and PDF instead of PNG and SVG
  sondage report film.h5 --log-counts        # logarithmic counts axis on the spectrum
  sondage report film.h5 --profile species   # one profile panel per species
  sondage report film.h5 --corner nuisances,shares   # corner plot with nuisances and
                                                     # compositions too
  sondage report film.h5 --force             # replace an earlier report in film_report/
"""


def add_arguments(parser) -> None:
    """Options of ``sondage report``."""
    parser.add_argument("result", metavar="RESULT.h5", help="the result file of an inversion")
    parser.add_argument("-o", "--output", metavar="DIR", default=None,
                        help="folder for the figures and summaries (default: <RESULT>_report "
                             "beside the result file)")
    parser.add_argument("--format", choices=("svg", "pdf"), default="svg",
                        help="vector format written beside each PNG (default: svg)")
    parser.add_argument("--log-counts", action="store_true",
                        help="logarithmic counts axis on the spectrum figure")
    parser.add_argument("--profile", choices=("auto", "overlay", "log", "species"),
                        default="auto",
                        help="profile figure: every species on one axis (overlay), on one "
                             "logarithmic axis (log), one panel per species (species), or "
                             "per species only when one is minor (auto, the default)")
    parser.add_argument("--corner", metavar="GROUPS", default="",
                        help="add to the corner plot, comma-separated: nuisances (fluence, "
                             "calibration, resolution, stopping, background), shares (the "
                             "free compositions); default: the sample's quantities only")
    parser.add_argument("--force", action="store_true",
                        help="replace report files already in the folder")


def run(args) -> int:
    """Write the report, print a short summary and the files written; return 0."""
    import matplotlib

    matplotlib.use("Agg")  # files only: never open a window, whatever the environment
    from ..report._build import write_report
    from ..report._data import read_report_data
    from ..report._tables import format_summary_text

    data = read_report_data(args.result)
    written = write_report(data, args.output, formats=("png", args.format), force=args.force,
                           log_counts=args.log_counts, profile=args.profile,
                           corner=args.corner)
    print(format_summary_text(data, compact=True))
    folder = Path(next(iter(written.values()))).parent
    print(f"wrote {len(written)} files to {folder}/: "
          + ", ".join(sorted(p.name for p in written.values())))
    return 0
