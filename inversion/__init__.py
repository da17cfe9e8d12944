"""sondage.inversion: profiles, priors, likelihood, sampler, result files, reports, series.

Uses :mod:`forward` only through its public names.  Public names are resolved lazily
(PEP 562), so ``import inversion`` stays cheap.  The map of the subpackages (``fit``,
``sample``, ``results``, ``report``, ``series``, ``cli``) is in DEVELOPERS.md.

A few lines do the whole job::

    import inversion
    result = inversion.invert("run.toml", "spectrum.csv", "result.h5", seed=1)
    print(result.interval("film.thickness_nm", 68))
    inversion.build_report("result.h5", "report/")
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    # the job
    "invert": "._api",
    "prepare": "._api",
    "prepare_joint": "._api",
    "read_result": ".results._result",
    "Result": ".results._result",
    "NotConvergedWarning": "._api",
    # the [fit] table, parameter roles, priors, profiles
    "parse_fit": ".fit._spec",
    "FitSpec": ".fit._spec",
    "Parameter": ".fit._spec",
    "Role": ".fit._roles",
    "Prior": ".fit._priors",
    "make_prior": ".fit._priors",
    "parse_prior": ".fit._priors",
    "LayerStack": ".fit._profiles",
    "NodeProfile": ".fit._profiles",
    "step_average": ".fit._profiles",
    # objective and sampler
    "Objective": ".fit._objective",
    "ModelBuilder": ".fit._objective",
    "Sampler": ".sample._sampler",
    # what a measurement can tell: Fisher information and the Cramer-Rao bound
    "fisher_matrix": ".fit._information",
    "cramer_rao_sd": ".fit._information",
    "nominal_theta": ".fit._information",
    # planning a measurement: expected error bars of candidate set-ups
    "plan": ".planning._plan",
    # reports and figures
    "build_report": ".report._build",
    "read_report_data": ".report._data",
    "plot_spectrum": ".report._figures",
    "plot_profile": ".report._figures",
    "plot_corner": ".report._chain_figures",
    "plot_convergence": ".report._chain_figures",
    # annealing series
    "diffusion_draws": ".series._diffusion",
    "arrhenius_fit": ".series._diffusion",
    "compare": ".series._diffusion",
    "compare_neighbours": ".series._diffusion",
    "load_series": ".series._file",
    "run_series": ".series._runner",
    "read_series": ".series._seriesfile",
    "series_report": ".series._figures",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module 'inversion' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
