"""A simulated spectrum on disk: the CSV spectrum of :func:`forward.simulate` and its figure
(what ``sondage simulate`` writes)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

import forward
from forward import InputError

from ..results._outputs import check_output, same_path
from ._style import DATA_COLOUR, MODEL_COLOUR, figure_style, species_colours

__all__ = ["write_simulation", "plot_simulation", "PLOT_SUFFIXES"]

#: image files a simulation's figure can be written as
PLOT_SUFFIXES = (".png", ".pdf", ".svg")


def write_simulation(run_file, output, *, plot=None, n_channels=None, poisson=False,
                     seed=None, isotopes=False, force=False):
    """Simulate a run file's spectrum and write it as a CSV spectrum (and a figure).

    Parameters
    ----------
    run_file : path
        The run file (never written over).
    output : path
        The CSV spectrum; an existing file is replaced only with ``force``.
    plot : path, optional
        Also draw the spectrum into this image file (.png, .pdf or .svg).
    n_channels, poisson, seed, isotopes
        See :func:`forward.simulate`.
    force : bool
        Replace existing outputs.

    Returns
    -------
    model : forward.ForwardModel
    columns : dict[str, numpy.ndarray]
    """
    inputs = {"run file": run_file}
    check_output(output, inputs=inputs, force=force, kind="spectrum file")
    for what, path in (("-o", output), ("--plot", plot)):
        if path and not Path(path).expanduser().resolve().parent.is_dir():
            raise InputError(f"folder {str(Path(path).parent)!r} does not exist; create it "
                             "first or write elsewhere (nothing was written)", where=str(path))
    if plot:
        if same_path(plot, output):
            raise InputError("--plot names the same file as -o; give the figure its own name",
                             where=f"--plot {plot}")
        check_output(plot, inputs=inputs, force=force, option="--plot", kind="figure")
        if Path(plot).suffix.lower() not in PLOT_SUFFIXES:
            raise InputError(f"cannot tell the image format of {str(plot)!r}; allowed: a file "
                             "ending in " + ", ".join(PLOT_SUFFIXES), where="--plot")
    run = forward.load_run(run_file)
    model, columns = forward.simulate(run, n_channels=n_channels, poisson=poisson, seed=seed,
                                      isotopes=isotopes)
    header = [f"simulated by sondage from {run.source}",
              f"title: {run.title}" if run.title else "untitled run",
              "counts: " + ("Poisson draw" + (f", seed {seed}" if seed is not None else "")
                            if poisson else "expected counts"),
              "energy_keV: channel centre; expected_<species>: expected counts of one species"]
    forward.write_spectrum_csv(output, columns, header_lines=header)
    if plot:
        plot_simulation(model, columns, plot)
    return model, columns


def plot_simulation(model, columns, path) -> None:
    """Draw the simulated spectrum: counts, the expected total and each species, versus energy."""
    import matplotlib.pyplot as plt

    energy = columns["energy_keV"]
    colours = species_colours(model.species)
    cal = model.run.calibration
    with figure_style():
        fig, ax = plt.subplots(figsize=(7.0, 4.2))
        if columns["counts"] is not columns["expected"]:
            ax.plot(energy, columns["counts"], drawstyle="steps-mid", color=DATA_COLOUR,
                    lw=0.7, alpha=0.8, label="Poisson draw")
        ax.plot(energy, columns["expected"], color=MODEL_COLOUR, lw=1.6, label="expected, total")
        for name in model.species:
            ax.plot(energy, columns[forward.column_name(name)], color=colours[name], lw=1.0,
                    ls="--", label=f"expected, {name}")
        ax.set_xlabel("detected energy (keV)")
        ax.set_ylabel("counts per channel")
        ax.set_xlim(energy[0], energy[-1])
        ax.set_ylim(bottom=0)
        title = model.run.title or "simulated spectrum"
        ax.set_title(f"{title}\n{model.run.beam.species} {model.run.beam.energy_keV:g} keV, "
                     f"scattering {model.run.geometry.scattering_deg:g} deg", fontsize=10)
        top = ax.secondary_xaxis("top", functions=(
            lambda e: forward.channel_of_energy(np.asarray(e, dtype=float), cal.offset_keV,
                                                cal.keV_per_channel, cal.quadratic_keV),
            lambda c: cal.energy_keV(np.asarray(c, dtype=float))))
        top.set_xlabel("channel")
        ax.legend(loc="upper center")
        fig.savefig(path)
        plt.close(fig)
