"""Regenerate the INVENTED demo spectra in this folder from the truth in TRUTH.md.

Everything here is invented for the demo: the sample, the anneals, the activation energy. The
spectra are simulated with sondage's own forward model (layer stack with error-function mixed
interfaces) plus Poisson counting noise from a seeded generator, so the files are reproducible:

    .venv/bin/python data/demo/make_demo.py

writes spectrum.csv (the single-spectrum demo) and series/*.csv (the annealing series).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import scipy.constants

import forward
from inversion import LayerStack

HERE = Path(__file__).resolve().parent

# ---- the invented truth (mirrored in TRUTH.md) --------------------------------------------
CAP_1E15 = 120.0            # Ti cap
FILM_1E15 = 380.0           # Co film
CAP_FILM_WIDTH_1E15 = 12.0  # Ti/Co interface, unchanged by the anneals
WIDTH0_1E15 = 20.0          # Co/Si interface as deposited
EA_EV = 1.45                # activation energy of the Co/Si intermixing
D_REF = 18.4                # D at T_REF, (1e15 atoms/cm2)^2 / s
T_REF_K = 773.15
CHANNELS = 800
K_B_EV = scipy.constants.k / scipy.constants.e

#: label, temperature in C (None: as deposited), time in s, charge in uC, seed
SERIES = [
    ("asdep", None, 0.0, 4.0, 101),
    ("c400-10min", 400.0, 600.0, 4.1, 102),
    ("c400-30min", 400.0, 1800.0, 3.9, 103),
    ("c450-10min", 450.0, 600.0, 4.0, 104),
    ("c450-30min", 450.0, 1800.0, 4.2, 105),
    ("c500-10min", 500.0, 600.0, 4.0, 106),
]
#: the single-spectrum demo is this member of the series
SINGLE = "c400-30min"


def diffusion_coefficient(temperature_K: float) -> float:
    """Invented Arrhenius law, (1e15 atoms/cm2)^2 / s."""
    return D_REF * math.exp(-EA_EV / K_B_EV * (1.0 / temperature_K - 1.0 / T_REF_K))


def mixing_width(temperature_C, time_s) -> float:
    """w = sqrt(w0^2 + 2 D t), the convention sondage uses everywhere."""
    if temperature_C is None:
        return WIDTH0_1E15
    d = diffusion_coefficient(temperature_C + 273.15)
    return math.sqrt(WIDTH0_1E15**2 + 2.0 * d * time_s)


def simulate(run, width_1e15: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    model = forward.ForwardModel(run, n_channels=CHANNELS)
    stack = LayerStack(model.grid.edges_1e15, len(model.species), 3, substrate=True)
    comps = np.zeros((3, len(model.species)))
    for k, sym in enumerate(("Ti", "Co", "Si")):
        comps[k, model.species.index(sym)] = 1.0
    fractions = stack.fractions([CAP_1E15, FILM_1E15], [CAP_FILM_WIDTH_1E15, width_1e15], comps)
    expected = model.expected_counts(fractions)
    counts = np.random.default_rng(seed).poisson(expected)
    return expected, counts


def write(path: Path, counts: np.ndarray, lines: list[str]) -> None:
    forward.write_spectrum_csv(path, {"channel": np.arange(counts.size), "counts": counts},
                               ["INVENTED demo spectrum: simulated by sondage, not measured."] + lines)


def main() -> None:
    template = forward.load_run(HERE / "run.toml")
    (HERE / "series").mkdir(exist_ok=True)
    for label, temp_c, time_s, charge, seed in SERIES:
        run = template.with_overrides({"exposure": {"charge_uC": charge}})
        width = mixing_width(temp_c, time_s)
        _, counts = simulate(run, width, seed)
        what = "as deposited" if temp_c is None else f"{temp_c:g} C for {time_s:g} s"
        lines = [f"member {label}: {what}; charge {charge} uC; Co/Si mixing width "
                 f"{width:.2f} 1e15 atoms/cm2 (true value, invented); Poisson seed {seed}"]
        write(HERE / "series" / f"{label}.csv", counts, lines)
        if label == SINGLE:
            write(HERE / "spectrum.csv", counts, lines)
        print(f"{label:12s} w = {width:7.2f}  total counts {counts.sum():9d}")
    d0 = D_REF * math.exp(EA_EV / (K_B_EV * T_REF_K))
    print(f"D0 = {d0:.4g} (1e15 atoms/cm2)^2/s, Ea = {EA_EV} eV")


if __name__ == "__main__":
    main()
