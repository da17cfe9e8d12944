"""``sondage check``: validate a run file (and a spectrum) and print what the physics expects
(:func:`forward.check_report`)."""

from __future__ import annotations

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "validate a run file (and optionally a spectrum) and print the expected signals"

DESCRIPTION = """\
Read a run file, check every key, and print the derived geometry, the beam, the kinematic factor
and surface-edge energy and channel of every isotope, the stopping cross-sections at the beam
energy, each layer's depth scale and surface depth resolution, and any warning about the
Rutherford cross-section.  Give a spectrum as well to check that the calibration puts the
highest edge where the counts show one.

examples:
  sondage check sample.toml
  sondage check sample.toml measured.csv
  sondage check sample.toml results.h5:/spectra/point_03
"""


def add_arguments(parser) -> None:
    """Options of ``sondage check``."""
    parser.add_argument("run_file", metavar="RUN.toml", help="the run file to validate")
    parser.add_argument("spectrum", metavar="SPECTRUM", nargs="?",
                        help="a measured spectrum: text/CSV file, or file.h5:/dataset")


def run(args) -> int:
    """Print the report; return 0 (problems with the input raise InputError)."""
    import forward

    run_ = forward.load_run(args.run_file)
    spectrum = forward.read_spectrum(args.spectrum) if args.spectrum else None
    print(forward.check_report(run_, spectrum), end="")
    return 0
