"""Series statistics from the members' result files: the chosen interface's mixing-width
draws, D draws per anneal, the Arrhenius posterior and the comparisons of neighbours
(the statistics themselves: :mod:`inversion.series._diffusion`).
"""

from __future__ import annotations

import numpy as np

from forward import InputError

from ..results._result import read_result
from ._diffusion import arrhenius_fit, compare_neighbours, diffusion_draws
from ._file import Series, interface_names, member_path

__all__ = ["series_statistics"]


def series_statistics(series: Series, output, *, seed: int = 0, arrhenius_steps: int = 3000):
    """Width draws per member, D draws per anneal, the Arrhenius posterior and comparisons.

    Parameters
    ----------
    series : Series
    output : path
        The series result file (member files beside it).
    seed : int
        Seed of the pairings and the Arrhenius sampler.
    arrhenius_steps : int
        emcee steps of the Arrhenius fit.

    Returns
    -------
    dict
    """
    name_nm, name_areal = interface_names(series)
    widths = {}
    for m in series.members:
        res = read_result(member_path(output, m.label))
        if name_nm not in res.derived and name_areal not in res.derived:
            raise InputError(f"member {m.label!r} has no mixing width for interface "
                             f"{series.interface} ({name_areal}); free that interface's mixing "
                             "width in the run file's [fit] table",
                             where=f"{series.source}: series.interface")
        widths[m.label] = (np.asarray(res.derived.get(name_nm, [np.nan]), float),
                           np.asarray(res.derived[name_areal], float))
    use_nm = {"nm": True, "areal_density": False}.get(series.widths_in)
    if use_nm is None:
        use_nm = all(np.all(np.isfinite(w[0])) for w in widths.values())
    if use_nm and not all(np.all(np.isfinite(w[0])) for w in widths.values()):
        raise InputError("widths in nm need every layer's density in the run file; give the "
                         "densities or use widths_in = \"areal_density\"",
                         where=f"{series.source}: series.widths_in")
    width_unit = "nm" if use_nm else "1e15 atoms/cm2"
    d_unit = "nm2/s" if use_nm else "(1e15 atoms/cm2)2/s"
    w = {k: (v[0] if use_nm else v[1]) for k, v in widths.items()}
    for label, draws in w.items():
        if np.ptp(draws) <= 0:
            raise InputError(f"member {label!r}: the mixing width of interface "
                             f"{series.interface} has no spread (is it fixed?); free it in the "
                             "run file's [fit] table", where=f"{series.source}: series.interface")

    ref = series.reference
    d = {}
    for k, m in enumerate(series.anneals):
        d[m.label] = diffusion_draws(w[m.label], w[ref.label], m.time_s, seed=seed + k)
    stats = {"width_unit": width_unit, "d_unit": d_unit, "widths": w, "diffusion": d,
             "labels": [m.label for m in series.members], "arrhenius": None, "notes": [],
             "temperatures": {m.label: (m.temperature_K if m.temperature_K is not None
                                        else np.nan) for m in series.members}}
    temps = np.array([m.temperature_K for m in series.anneals])
    if np.unique(temps).size >= 2:
        stats["arrhenius"] = arrhenius_fit(temps, [d[m.label].d_draws for m in series.anneals],
                                           scatter=series.arrhenius_scatter, seed=seed,
                                           n_steps=arrhenius_steps)
    else:
        stats["notes"].append("all anneals share one temperature: no Arrhenius fit")
    stats["comparison_width"] = compare_neighbours(stats["labels"],
                                                   [w[k] for k in stats["labels"]], seed=seed)
    order = sorted(series.anneals, key=lambda m: (m.temperature_K, m.time_s, m.index))
    stats["comparison_diffusion"] = compare_neighbours(
        [m.label for m in order], [d[m.label].d_draws for m in order], seed=seed + 500)
    stats["width_unit_reason"] = ("nm from the run file's layer densities" if use_nm else
                                  "1e15 atoms/cm2 (layer densities missing or widths_in set)")
    return stats
