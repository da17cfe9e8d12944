"""``sondage check``: validate a run file (and a spectrum) and print what the physics expects
(:func:`inversion._check.check_files`, the pre-flight report of :func:`forward.preflight`)."""

from __future__ import annotations

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run"]

HELP = "validate a run file (and optionally a spectrum) and print the expected signals"

DESCRIPTION = """\
Read a run file, check every key (the [fit] table too, as 'sondage invert' would), and print
the derived geometry, the beam, the kinematic factor and surface-edge energy and channel of
every isotope, the stopping cross-sections at the beam energy, each layer's depth scale and
surface depth resolution, signals closer than the detector resolution, and any warning about
the Rutherford cross-section.  Give a spectrum as well to check that the counts' leading
signal lies where the calibration puts it and that the counts are what the exposure implies.

A run file of several measurements ([[measurement]] tables) is reported measurement by
measurement, each with the spectrum it names (no SPECTRUM argument), then the joint fit's free
parameters.

The report ends with every error, warning and note found, the warnings raised while reading
the files included.  Exit code 0 without errors; 2 when the files cannot be read or the
report lists an error (what 'sondage invert' would refuse), with the first error on stderr.

examples:
  sondage check sample.toml
  sondage check sample.toml measured.csv
  sondage check sample.toml results.h5:/spectra/point_03
  sondage check two-tilts.toml
"""


def add_arguments(parser) -> None:
    """Options of ``sondage check``."""
    parser.add_argument("run_file", metavar="RUN.toml", help="the run file to validate")
    parser.add_argument("spectrum", metavar="SPECTRUM", nargs="?",
                        help="a measured spectrum: text/CSV file, or file.h5:/dataset")


def run(args) -> int:
    """Print the report; return 0, or raise the first error the report lists."""
    from .._check import check_files

    report = check_files(args.run_file, args.spectrum)
    print(report.text(), end="")
    error = report.error()
    if error is not None:
        raise error
    return 0
