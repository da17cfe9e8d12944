"""sondage.inversion: profiles, priors, likelihood, sampler, result files, reports, series.

Uses :mod:`forward` only through its public names.  Public names are resolved lazily
(PEP 562), so ``import inversion`` stays cheap.

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
    "read_result": "._store",
    "Result": "._store",
    "NotConvergedWarning": "._api",
    # the [fit] table, priors, profiles
    "parse_fit": "._fitspec",
    "FitSpec": "._fitspec",
    "Parameter": "._fitspec",
    "Prior": "._priors",
    "make_prior": "._priors",
    "parse_prior": "._priors",
    "LayerStack": "._profiles",
    "NodeProfile": "._profiles",
    "step_average": "._profiles",
    # objective and sampler
    "Objective": "._objective",
    "ModelBuilder": "._objective",
    "Sampler": "._sampler",
    # reports and figures
    "build_report": "._report",
    "read_report_data": "._report",
    "plot_spectrum": "._plots",
    "plot_profile": "._plots",
    "plot_corner": "._plots",
    "plot_convergence": "._plots",
    # annealing series
    "diffusion_draws": "._diffusion",
    "arrhenius_fit": "._diffusion",
    "compare": "._diffusion",
    "compare_neighbours": "._diffusion",
    "load_series": "._series",
    "run_series": "._series",
    "read_series": "._series",
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
