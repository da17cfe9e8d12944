"""The run file's ``[fit]`` table: what is free, with which prior, and how long to sample.

:func:`parse_fit` checks the raw table (unknown keys are errors) against the sample the run
describes and returns a :class:`FitSpec`: the ordered list of free :class:`Parameter` objects
and the sampler settings.  Key reference and defaults: README.md, "The [fit] table".
"""

from __future__ import annotations

import contextvars
import math
import re
from dataclasses import dataclass, field

import numpy as np

from forward import InputError

from ._priors import Prior, make_prior, parse_prior

__all__ = ["Parameter", "LayerInfo", "FitSpec", "parse_fit", "layer_infos", "depth_limit_of", "NUISANCE_NAMES",
           "DEFAULT_STOPPING_SD"]

#: Relative sd of the per-element stopping scale prior.  Placeholder until the measured spread
#: of our helium stopping against NIST ASTAR (benchmarks/RESULTS.md) is available.
DEFAULT_STOPPING_SD = 0.03
#: Nuisances marginalised by default (``stopping.<El>`` for every element comes on top).
NUISANCE_NAMES = ("fluence_scale", "gain_keV", "offset_keV", "fwhm_keV")

_TOP_KEYS = {
    "profile": "'layers' or 'nodes'",
    "free": "table: quantity name -> prior table, or true for the default prior",
    "fixed": "list of nuisance names held at the run file's values",
    "background": "'off', 'flat' or 'linear'",
    "windows": "list of [first, last] channel pairs (inclusive)",
    "count_threshold": "expected counts per channel that open the default window (> 0)",
    "tau_multiple": "chain length wanted, in autocorrelation times (>= 1)",
    "max_steps": "step cap (>= 1)",
    "check_every": "steps between convergence checks (>= 10)",
    "walkers": "number of walkers (0: max(32, 4 x free parameters))",
    "band_draws": "posterior draws used for bands and predictive spectra (>= 10)",
    "nodes": "table for profile = 'nodes'",
    "moves": "'stretch' or 'differential'",
    "depth_limit_1e15": "depth of the model's slice grid (1e15 atoms/cm2, > 0)",
}
_NODE_KEYS = {
    "count": "number of nodes, 3 to 60",
    "depth_1e15": "depth of the deepest node (1e15 atoms/cm2, > 0)",
    "step_sd": "sd of the log-ratio step between neighbouring nodes (> 0)",
    "start_sd": "sd of the surface node's log-ratios (> 0)",
    "species": "list of species the nodes describe (at least 2)",
    "below": "'hold' or 'vacuum'",
}


@dataclass(frozen=True)
class Parameter:
    """One free quantity.

    Attributes
    ----------
    name : str
        As written in ``fit.free`` (``"film.areal_density"``, ``"gain_keV"``, ...).
    unit : str
        Its unit, ``""`` for dimensionless.
    prior : Prior
        The user's prior (or the stated default).
    role : tuple
        What it sets: ``("areal_density", layer)``, ``("mixing", interface)``,
        ``("share", layer, k)``, ``("node", index)``, ``("nuisance", field)``,
        ``("stopping", element)`` or ``("background", 0 | 1)``.
    default : bool
        True when the prior is the default, not the user's.
    """

    name: str
    unit: str
    prior: Prior
    role: tuple
    default: bool = False


@dataclass(frozen=True)
class LayerInfo:
    """What the inversion needs to know about one layer of the run's sample."""

    name: str
    composition: np.ndarray          # (n_species,) atom fractions
    areal_density_1e15: float | None  # None for a substrate
    substrate: bool
    density_g_cm3: float | None
    atoms_per_cm3: float | None


@dataclass
class FitSpec:
    """The checked ``[fit]`` table."""

    profile: str
    parameters: list
    layers: list
    species: tuple
    elements: tuple
    fixed: tuple = ()
    background: str = "off"
    windows: list | None = None
    count_threshold: float = 0.5
    tau_multiple: float = 50.0
    max_steps: int = 20000
    check_every: int = 200
    walkers: int = 0
    band_draws: int = 200
    moves: str = "differential"
    depth_limit_1e15: float | None = None
    nodes: dict = field(default_factory=dict)
    share_species: dict = field(default_factory=dict)  # layer index -> species columns
    source: str = "run.toml"  # the run file, for error messages

    @property
    def names(self) -> list:
        return [p.name for p in self.parameters]

    @property
    def units(self) -> list:
        return [p.unit for p in self.parameters]

    @property
    def n_walkers(self) -> int:
        ndim = len(self.parameters)
        n = self.walkers or max(32, 4 * ndim)
        n = max(n, 2 * ndim + 2)
        return n + (n % 2)

    def describe_priors(self) -> list:
        """Lines ``name [unit]: prior (default)`` for output and result files."""
        return [f"{p.name} [{p.unit or '1'}]: {p.prior.describe()}" + (" (default)" if p.default
                                                                       else "")
                for p in self.parameters]


def _species_column(symbol: str, species: tuple) -> int | None:
    if symbol in species:
        return species.index(symbol)
    matches = [i for i, s in enumerate(species) if re.split(r"[\[\(]", s)[0] == symbol]
    return matches[0] if len(matches) == 1 else None


def layer_infos(run, species: tuple) -> list:
    """The run's layers as :class:`LayerInfo` (composition as a vector over ``species``)."""
    out = []
    for i, layer in enumerate(run.layers):
        name = str(getattr(layer, "name", None) or f"layer{i + 1}")
        comp = np.zeros(len(species))
        overrides = dict(getattr(layer, "isotopes", None) or {})
        for symbol, frac in dict(layer.fractions).items():
            col = None
            if symbol in overrides and overrides[symbol]:
                # the forward model labels an enriched element by its main isotope, "O[18]"
                iso = overrides[symbol]
                col = _species_column(f"{symbol}[{max(iso, key=iso.get)}]", species)
            if col is None:
                col = _species_column(str(symbol), species)
            if col is None:
                raise InputError(f"layer {name!r} has {symbol!r}, which is not among the model's "
                                 f"species {list(species)}", where="run file: layers")
            comp[col] += float(frac)
        if comp.sum() > 0:
            comp /= comp.sum()
        t = getattr(layer, "areal_density_1e15", None)
        sub = bool(getattr(layer, "substrate", t is None))
        rho = getattr(layer, "density_g_cm3", None)
        n = getattr(layer, "atoms_per_cm3", None)
        out.append(LayerInfo(name, comp, None if sub or t is None else float(t), sub,
                             None if rho is None else float(rho), None if n is None else float(n)))
    return out


def depth_limit_of(fit, source: str = "run.toml") -> float | None:
    """The ``fit.depth_limit_1e15`` setting, checked, before the model is built."""
    if isinstance(fit, dict) and "depth_limit_1e15" in fit:
        token = _SOURCE.set(str(source))
        try:
            return _number(fit["depth_limit_1e15"], "depth_limit_1e15", low=0,
                           low_inclusive=False)
        finally:
            _SOURCE.reset(token)
    return None


#: the run file being checked, for error messages (set by parse_fit / depth_limit_of)
_SOURCE: contextvars.ContextVar[str] = contextvars.ContextVar("fit_source", default="run.toml")


def _where(key: str) -> str:
    return f"{_SOURCE.get()}: fit.{key}"


def _number(value, key, *, low=None, integer=False, low_inclusive=True):
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if ok and integer:
        ok = float(value) == int(value)
    if ok and low is not None:
        ok = value >= low if low_inclusive else value > low
    if not ok:
        what = "an integer" if integer else "a number"
        bound = "" if low is None else f" {'>=' if low_inclusive else '>'} {low}"
        raise InputError(f"must be {what}{bound}, got {value!r}", where=_where(key))
    return int(value) if integer else float(value)


def parse_fit(fit: dict | None, run, model) -> FitSpec:
    """Check the raw ``[fit]`` table and build the :class:`FitSpec`.

    Parameters
    ----------
    fit : dict or None
        ``run.fit`` as read from the run file.
    run : forward.Run
        The run (its layers).
    model : forward.ForwardModel
        The forward model (species, elements, grid, default nuisance).

    Raises
    ------
    forward.InputError
        For unknown keys, unknown free quantities, bad priors or settings.
    """
    token = _SOURCE.set(str(getattr(run, "source", "run.toml")))
    try:
        spec = _parse_fit(fit, run, model)
    finally:
        _SOURCE.reset(token)
    spec.source = str(getattr(run, "source", "run.toml"))
    return spec


def _parse_fit(fit, run, model) -> FitSpec:
    fit = dict(fit or {})
    for key in fit:
        if key not in _TOP_KEYS:
            allowed = ", ".join(_TOP_KEYS)
            raise InputError(f"unknown key {key!r}; allowed keys: {allowed}", where=_where(key))
    species = tuple(model.species)
    elements = tuple(model.elements)
    layers = layer_infos(run, species)
    if not layers:
        raise InputError("the sample has no layers", where="run file: layers")
    substrate = layers[-1].substrate
    spec = FitSpec(profile="layers", parameters=[], layers=layers, species=species,
                   elements=elements)

    profile = fit.get("profile", "layers")
    if profile not in ("layers", "nodes"):
        raise InputError(f"unknown profile model {profile!r}; allowed: 'layers', 'nodes'",
                         where=_where("profile"))
    spec.profile = profile
    if "nodes" in fit and profile != "nodes":
        raise InputError("a nodes table needs profile = 'nodes'", where=_where("nodes"))

    for key, low, integer, strict in (("count_threshold", 0, False, False),
                                      ("tau_multiple", 1, False, True),
                                      ("max_steps", 1, True, True),
                                      ("check_every", 10, True, True),
                                      ("walkers", 0, True, True),
                                      ("band_draws", 10, True, True)):
        if key in fit:
            setattr(spec, key, _number(fit[key], key, low=low, integer=integer,
                                       low_inclusive=strict))
    if spec.walkers and spec.walkers < 4:
        raise InputError(f"must be 0 (automatic) or at least 4, got {spec.walkers}",
                         where=_where("walkers"))

    background = fit.get("background", "off")
    if background not in ("off", "flat", "linear"):
        raise InputError(f"unknown background {background!r}; allowed: 'off', 'flat', 'linear'",
                         where=_where("background"))
    spec.background = background
    # differential-evolution moves mixed about 3x faster (effective samples per second) than
    # the stretch move on both the 21-parameter node benchmark and the 10-parameter layer
    # benchmark (benchmarks/RESULTS.md, "Inversion"): they are the default for both models
    moves = fit.get("moves", "differential")
    if moves not in ("stretch", "differential"):
        raise InputError(f"unknown moves {moves!r}; allowed: 'stretch', 'differential'",
                         where=_where("moves"))
    spec.moves = moves
    if "depth_limit_1e15" in fit:
        spec.depth_limit_1e15 = _number(fit["depth_limit_1e15"], "depth_limit_1e15", low=0,
                                        low_inclusive=False)

    n_channels = int(getattr(model, "n_channels", 0) or 0)
    if "windows" in fit:
        spec.windows = _parse_windows(fit["windows"], n_channels)

    # ----- the quantities that can be free, with default priors -----
    default = model.default_nuisance()
    available: dict[str, tuple] = {}  # name -> (unit, role, default prior factory)
    thick = [i for i, L in enumerate(layers) if not L.substrate]
    if any(L.substrate for L in layers[:-1]):
        raise InputError("only the last layer can be a substrate", where="run file: layers")
    if profile == "layers":
        for i in thick:
            t0 = layers[i].areal_density_1e15
            available[f"{layers[i].name}.areal_density"] = (
                "1e15 atoms/cm2", ("areal_density", i),
                lambda t0=t0: make_prior("uniform", 0.1 * t0, 3.0 * t0))
        n_if = len(layers) - 1 if substrate else len(layers)
        for i in range(n_if):
            near = [layers[j].areal_density_1e15 for j in (i, i + 1)
                    if j < len(layers) and not layers[j].substrate]
            available[f"{layers[i].name}.mixing"] = (
                "1e15 atoms/cm2", ("mixing", i),
                lambda s=0.25 * min(near): make_prior("halfnormal", s))
        for i, L in enumerate(layers):
            available[f"{L.name}.composition"] = ("", ("composition", i), None)
    for name in NUISANCE_NAMES:
        value = float(getattr(default, name))
        unit = "" if name == "fluence_scale" else ("keV/channel" if name == "gain_keV" else "keV")
        factory = {
            "fluence_scale": lambda v=value: make_prior("normal", v, 0.05),
            "gain_keV": lambda v=value: make_prior("normal", v, 0.005 * abs(v)),
            "offset_keV": lambda v=value: make_prior("normal", v, 2.0),
            "fwhm_keV": lambda v=value: make_prior("normal", v, 0.10 * v),
        }[name]
        available[name] = (unit, ("nuisance", name), factory)
    for e, el in enumerate(elements):
        available[f"stopping.{el}"] = ("", ("stopping", e),
                                       lambda: make_prior("normal", 1.0, DEFAULT_STOPPING_SD))
    if background == "flat":
        available["background.level"] = ("counts/channel", ("background", 0),
                                          lambda: make_prior("halfnormal", 1.0))
    elif background == "linear":
        available["background.low"] = ("counts/channel", ("background", 0),
                                       lambda: make_prior("halfnormal", 1.0))
        available["background.high"] = ("counts/channel", ("background", 1),
                                        lambda: make_prior("halfnormal", 1.0))

    fixed = fit.get("fixed", [])
    if not isinstance(fixed, (list, tuple)) or not all(isinstance(x, str) for x in fixed):
        raise InputError("must be a list of nuisance names", where=_where("fixed"))
    nuisance_like = [n for n in available if available[n][1][0] in ("nuisance", "stopping")]
    expanded = []
    for name in fixed:
        if name == "stopping":
            expanded += [n for n in nuisance_like if n.startswith("stopping.")]
        elif name in nuisance_like:
            expanded.append(name)
        else:
            raise InputError(f"{name!r} is not a nuisance; nuisances: "
                             f"{', '.join(nuisance_like)} (or 'stopping' for all)",
                             where=_where("fixed"))
    spec.fixed = tuple(expanded)

    free = fit.get("free", {})
    if not isinstance(free, dict):
        raise InputError("must be a table: quantity name -> prior", where=_where("free"))
    for name in free:
        if name not in available:
            raise InputError(f"no free quantity called {name!r}; available: "
                             f"{', '.join(available)}", where=_where(f"free.{name}"))
        if name in spec.fixed:
            raise InputError(f"{name!r} is listed both in fit.fixed and fit.free",
                             where=_where(f"free.{name}"))

    params: list[Parameter] = []
    # profile parameters first, in the order of the sample, then nuisances
    for name, (unit, role, factory) in available.items():
        if role[0] in ("nuisance", "stopping"):
            continue
        if name not in free:
            continue
        value = free[name]
        where = _where(f"free.{name}")
        if role[0] == "composition":
            params += _composition_parameters(spec, name, role[1], value, where)
            continue
        if value is True:
            prior, is_default = factory(), True
        elif value is False:
            continue
        else:
            prior, is_default = parse_prior(value, where), False
        if role[0] in ("areal_density", "mixing") and prior.dist.support()[0] < 0:
            low = float(prior.dist.cdf(0.0))
            if low > 0.05:
                raise InputError(f"this prior puts {100 * low:.0f} % of its mass below zero, "
                                 "where the quantity cannot be; use uniform, lognormal or "
                                 "halfnormal", where=where)
        params.append(Parameter(name, unit, prior, role, is_default))
    if profile == "nodes":
        params += _node_parameters(spec, fit.get("nodes", {}), layers, substrate)
    for name, (unit, role, factory) in available.items():
        if role[0] not in ("nuisance", "stopping", "background"):
            continue
        if role[0] == "background" or name not in spec.fixed:
            value = free.get(name, True)
            if value is False:
                continue
            if value is True:
                params.append(Parameter(name, unit, factory(), role, True))
            else:
                params.append(Parameter(name, unit, parse_prior(value, _where(f"free.{name}")),
                                        role, False))
    spec.parameters = params
    if not any(p.role[0] not in ("nuisance", "stopping", "background") for p in params):
        raise InputError("nothing about the sample is free; free at least one quantity, e.g. "
                         f"{next(iter(available))!r} = true", where=_where("free"))
    return spec


def _composition_parameters(spec, name, layer_index, value, where):
    """Stick-breaking shares for a layer's free composition, Dirichlet(alpha) prior."""
    layer = spec.layers[layer_index]
    alpha = 1.0
    if isinstance(value, dict):
        if set(value) != {"dirichlet"}:
            raise InputError("a free composition takes { dirichlet = alpha } (alpha > 0) or true",
                             where=where)
        alpha = _number(value["dirichlet"], where.split("fit.", 1)[1] + ".dirichlet", low=0,
                        low_inclusive=False)
    elif value is not True:
        raise InputError("a free composition takes { dirichlet = alpha } (alpha > 0) or true",
                         where=where)
    columns = [int(c) for c in np.flatnonzero(layer.composition > 0)]
    if len(columns) < 2:
        raise InputError(f"layer {layer.name!r} has one species; its composition cannot be free",
                         where=where)
    spec.share_species[layer_index] = columns
    m = len(columns)
    out = []
    for k, col in enumerate(columns[:-1]):
        # Stick-breaking: v_k ~ Beta(alpha, (m - k - 1) alpha) independently gives exactly
        # Dirichlet(alpha, ..., alpha) on the fractions (Connor & Mosimann 1969, J. Am. Stat.
        # Assoc. 64, 194).
        prior = make_prior("beta", alpha, (m - k - 1) * alpha, where=where)
        out.append(Parameter(f"{layer.name}.share.{spec.species[col]}", "", prior,
                             ("share", layer_index, k), value is True))
    return out


def _node_parameters(spec, nodes, layers, substrate):
    if not isinstance(nodes, dict):
        raise InputError("must be a table", where=_where("nodes"))
    for key in nodes:
        if key not in _NODE_KEYS:
            raise InputError(f"unknown key {key!r}; allowed: {', '.join(_NODE_KEYS)}",
                             where=_where(f"nodes.{key}"))
    count = _number(nodes.get("count", 20), "nodes.count", low=3, integer=True)
    if count > 60:
        raise InputError(f"must be at most 60, got {count}", where=_where("nodes.count"))
    thick_total = sum(L.areal_density_1e15 for L in layers if not L.substrate)
    depth = nodes.get("depth_1e15", 1.5 * thick_total if substrate else thick_total)
    depth = _number(depth, "nodes.depth_1e15", low=0, low_inclusive=False)
    step_sd = _number(nodes.get("step_sd", 0.5), "nodes.step_sd", low=0, low_inclusive=False)
    start_sd = _number(nodes.get("start_sd", 3.0), "nodes.start_sd", low=0, low_inclusive=False)
    below = nodes.get("below", "hold" if substrate else "vacuum")
    if below not in ("hold", "vacuum"):
        raise InputError(f"must be 'hold' or 'vacuum', got {below!r}", where=_where("nodes.below"))
    names = nodes.get("species", list(spec.species))
    if (not isinstance(names, list) or len(names) < 2
            or any(s not in spec.species for s in names) or len(set(names)) != len(names)):
        raise InputError(f"must list at least two distinct species from {list(spec.species)}, "
                         f"got {names!r}", where=_where("nodes.species"))
    columns = [spec.species.index(s) for s in names]
    spec.nodes = dict(count=count, depth_1e15=depth, step_sd=step_sd, start_sd=start_sd,
                      below=below, columns=columns)
    ref = names[-1]
    out = []
    index = 0
    for s in names[:-1]:
        for k in range(count):
            if k == 0:
                prior = make_prior("normal", 0.0, start_sd)
                label = f"nodes.{s}.logratio0"
            else:
                prior = make_prior("normal", 0.0, step_sd)
                label = f"nodes.{s}.step{k}"
            out.append(Parameter(label, f"ln({s}/{ref})", prior, ("node", index), True))
            index += 1
    return out


def _parse_windows(value, n_channels: int) -> list:
    where = _where("windows")
    if (not isinstance(value, list) or not value
            or not all(isinstance(w, list) and len(w) == 2 for w in value)):
        raise InputError("must be a non-empty list of [first, last] channel pairs, "
                         "e.g. [[120, 460]]", where=where)
    out = []
    for first, last in value:
        if not all(isinstance(c, int) and not isinstance(c, bool) for c in (first, last)):
            raise InputError(f"channels must be integers, got [{first!r}, {last!r}]", where=where)
        if first > last:
            raise InputError(f"empty window [{first}, {last}]: first channel above last",
                             where=where)
        if first < 0 or (n_channels and last >= n_channels):
            raise InputError(f"window [{first}, {last}] outside the spectrum's channels "
                             f"0..{n_channels - 1}", where=where)
        out.append((first, last))
    return out
