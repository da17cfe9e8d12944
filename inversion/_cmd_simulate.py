"""``sondage simulate``: the expected spectrum of a run file's sample, optionally with noise.

Writes our spectrum CSV (:func:`forward.write_spectrum_csv`) with the columns ``channel``,
``energy_keV`` (channel centre), ``counts`` (a Poisson draw with ``--poisson``, else the expected
counts), ``expected`` and one ``expected_<species>`` column per species (with ``--isotopes``
also one ``expected_<isotope>`` column per scattering isotope, e.g. ``expected_29Si``).  The file
reads back with :func:`forward.read_spectrum`.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

__all__ = ["HELP", "DESCRIPTION", "add_arguments", "run", "simulate", "column_name",
           "plot_simulation"]

#: image files --plot can write
PLOT_SUFFIXES = (".png", ".pdf", ".svg")

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


def column_name(species: str) -> str:
    """CSV column of one species: ``expected_Si``, ``expected_O18`` for ``"O[18]"``."""
    return "expected_" + re.sub(r"[^A-Za-z0-9_]", "", species.replace("#", "_"))


def simulate(run, *, n_channels=None, poisson=False, seed=None, isotopes=False):
    """Expected (and optionally Poisson-drawn) spectrum of a run's layered sample.

    Parameters
    ----------
    run : forward.Run
    n_channels : int, optional
    poisson : bool
        Draw the counts from a Poisson distribution with the expected means.
    seed : int, optional
        Seed of numpy's default generator for the draw.
    isotopes : bool
        Add one column per scattering isotope (``expected_18O``; where two species share an
        isotope, e.g. natural O and an 18O-enriched ``O[18]``, the species is appended:
        ``expected_18O_O18``).

    Returns
    -------
    model : forward.ForwardModel
    columns : dict[str, numpy.ndarray]
        The CSV columns, in order.
    """
    import forward

    model = forward.ForwardModel(run, n_channels=n_channels)
    fractions = model.layer_fractions()
    expected = model.expected_counts(fractions)
    per = model.expected_counts(fractions, per_species=True)
    if poisson:
        counts = np.random.default_rng(seed).poisson(expected).astype(np.int64)
    else:
        counts = expected
    columns = {
        "channel": np.arange(model.n_channels, dtype=np.int64),
        "energy_keV": model.channel_energy_keV(),
        "counts": counts,
        "expected": expected,
    }
    for name, row in zip(model.species, per):
        columns[column_name(name)] = row
    if isotopes:
        per_iso = model.expected_counts(fractions, per_isotope=True)
        labels = list(model.isotope_labels)
        for q, (label, row) in enumerate(zip(labels, per_iso)):
            name = "expected_" + label
            if labels.count(label) > 1:
                name += "_" + column_name(model.species[model.isotope_species[q]])[9:]
            columns[name] = row
    return model, columns


def plot_simulation(model, columns, path) -> None:
    """Draw the simulated spectrum: counts, the expected total and each species, versus energy."""
    import matplotlib.pyplot as plt

    from ._style import DATA_COLOUR, MODEL_COLOUR, figure_style, species_colours

    energy = columns["energy_keV"]
    colours = species_colours(model.species)
    with figure_style():
        fig, ax = plt.subplots(figsize=(7.0, 4.2))
        if columns["counts"] is not columns["expected"]:
            ax.plot(energy, columns["counts"], drawstyle="steps-mid", color=DATA_COLOUR,
                    lw=0.7, alpha=0.8, label="Poisson draw")
        ax.plot(energy, columns["expected"], color=MODEL_COLOUR, lw=1.6, label="expected, total")
        for name in model.species:
            ax.plot(energy, columns[column_name(name)], color=colours[name], lw=1.0,
                    ls="--", label=f"expected, {name}")
        ax.set_xlabel("detected energy (keV)")
        ax.set_ylabel("counts per channel")
        ax.set_xlim(energy[0], energy[-1])
        ax.set_ylim(bottom=0)
        title = model.run.title or "simulated spectrum"
        ax.set_title(f"{title}\n{model.run.beam.species} {model.run.beam.energy_keV:g} keV, "
                     f"scattering {model.run.geometry.scattering_deg:g} deg", fontsize=10)
        top = ax.secondary_xaxis("top", functions=(_to_channel(model), _to_energy(model)))
        top.set_xlabel("channel")
        ax.legend(loc="upper center")
        fig.savefig(path)
        plt.close(fig)


def _to_channel(model):
    cal = model.run.calibration

    def f(energy):
        e = np.asarray(energy, dtype=float)
        return (e - cal.offset_keV) / cal.keV_per_channel if cal.quadratic_keV == 0 else \
            np.vectorize(cal.channel_of)(e)
    return f


def _to_energy(model):
    cal = model.run.calibration

    def f(channel):
        return cal.energy_keV(np.asarray(channel, dtype=float))
    return f


def run(args) -> int:
    """Write the spectrum (and the figure); return 0."""
    import forward

    if args.channels is not None and args.channels < 1:
        raise forward.InputError(f"--channels {args.channels}: give a whole number >= 1",
                                 where="command line: --channels")
    if args.seed is not None and not args.poisson:
        raise forward.InputError("--seed only applies to a Poisson draw; add --poisson",
                                 where="command line: --seed")
    from ._outputs import check_output, same_path

    inputs = {"run file": args.run_file}
    check_output(args.output, inputs=inputs, force=args.force, kind="spectrum file")
    if args.plot:
        if same_path(args.plot, args.output):
            raise forward.InputError("--plot names the same file as -o; give the figure its "
                                     "own name", where=f"command line: --plot {args.plot}")
        check_output(args.plot, inputs=inputs, force=args.force, option="--plot",
                     kind="figure")
        if Path(args.plot).suffix.lower() not in PLOT_SUFFIXES:
            raise forward.InputError(
                f"cannot tell the image format of {args.plot!r}; allowed: a file ending in "
                + ", ".join(PLOT_SUFFIXES), where="command line: --plot")
    run_ = forward.load_run(args.run_file)
    model, columns = simulate(run_, n_channels=args.channels, poisson=args.poisson,
                              seed=args.seed, isotopes=args.isotopes)
    header = [f"simulated by sondage from {run_.source}",
              f"title: {run_.title}" if run_.title else "untitled run",
              "counts: " + ("Poisson draw" + (f", seed {args.seed}" if args.seed is not None else "")
                            if args.poisson else "expected counts"),
              "energy_keV: channel centre; expected_<species>: expected counts of one species"]
    forward.write_spectrum_csv(args.output, columns, header_lines=header)
    if args.plot:
        import matplotlib

        matplotlib.use("Agg")  # the command draws to files only
        plot_simulation(model, columns, args.plot)
    if not getattr(args, "quiet", False):
        total = float(np.sum(columns["expected"]))
        print(f"wrote {model.n_channels} channels ({total:.4g} expected counts) to {args.output}"
              + (f"; figure {args.plot}" if args.plot else ""))
    return 0
