"""The run file's ``[fit]`` table: what is free, with which prior, and how long to sample.

The table is read once, in two steps.  :func:`read_fit_settings` checks every key that does
not depend on the sample (unknown keys are errors; profile model, windows, depth limit, sampler
settings) and gives :class:`FitSettings`, from which the forward model is built;
:func:`bind_fit` then binds the settings to that model's sample (its species columns, layers
and default nuisances) and gives the :class:`FitSpec`: the ordered list of free
:class:`Parameter` objects, each with its :class:`~inversion.fit._roles.Role` and prior.
:func:`parse_fit` does both.  Key reference and defaults: README.md, "The [fit] table".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from forward import InputError

from ._nodes import node_settings
from ._priors import Prior, make_prior, parse_prior
from ._roles import DEFAULT_STOPPING_SD, NUISANCE_NAMES, NUISANCES, Role, RoleIndex

__all__ = ["Parameter", "FitSettings", "FitSpec", "read_fit_settings", "bind_fit",
           "parse_fit", "stopping_widths", "NUISANCE_NAMES", "DEFAULT_STOPPING_SD",
           "USER_TABLE_WIDTHS"]

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
    "walkers": "number of walkers (0: automatic, see README)",
    "band_draws": "posterior draws used for bands and predictive spectra (>= 10)",
    "nodes": "table for profile = 'nodes'",
    "moves": "'stretch', 'differential' or 'subspace'",
    "depth_limit_1e15": "depth of the model's slice grid (1e15 atoms/cm2, > 0)",
}
#: the layer-model quantities a prior may not put mostly below zero
_NON_NEGATIVE = (Role.AREAL_DENSITY, Role.MIXING)


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
    role : Role
        What it sets.
    default : bool
        True when the prior is the default, not the user's.
    target : int
        Which one it sets: the layer (areal density, share), the interface (mixing), the node
        parameter, the element (stopping) or the background term (0, 1); 0 for a scalar
        nuisance.
    """

    name: str
    unit: str
    prior: Prior
    role: Role
    default: bool = False
    target: int = 0


class _Where:
    """Error locations ``<run file>: fit.<key>``."""

    def __init__(self, source: str):
        self.source = str(source)

    def __call__(self, key: str) -> str:
        return f"{self.source}: fit.{key}"


def _number(value, key, where, *, low=None, integer=False, low_inclusive=True):
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if ok and integer:
        ok = float(value) == int(value)
    if ok and low is not None:
        ok = value >= low if low_inclusive else value > low
    if not ok:
        what = "an integer" if integer else "a number"
        bound = "" if low is None else f" {'>=' if low_inclusive else '>'} {low}"
        raise InputError(f"must be {what}{bound}, got {value!r}", where=where(key))
    return int(value) if integer else float(value)


@dataclass
class FitSettings:
    """The ``[fit]`` keys that do not depend on the sample, checked.

    ``free``, ``fixed`` and ``nodes`` are kept as written; :func:`bind_fit` checks them against
    the sample.
    """

    source: str = "run.toml"
    profile: str = "layers"
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
    free: dict = field(default_factory=dict)
    fixed: list = field(default_factory=list)
    nodes: dict = field(default_factory=dict)

    @property
    def first_channel(self) -> int:
        """The lowest channel the explicit windows reach (0 without windows): the forward
        model need not follow ions below it."""
        return min(first for first, _ in self.windows) if self.windows else 0


@dataclass
class FitSpec:
    """The checked ``[fit]`` table bound to the run's sample."""

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
    columns: object = None  # forward.SampleColumns: species masses, layer densities

    @property
    def names(self) -> list:
        return [p.name for p in self.parameters]

    @property
    def units(self) -> list:
        return [p.unit for p in self.parameters]

    @property
    def index(self) -> RoleIndex:
        """Positions and targets of each role's parameters (worked out once)."""
        cached = self.__dict__.get("_index")
        if cached is None or cached[0] is not self.parameters:
            cached = (self.parameters, RoleIndex(self.parameters))
            self.__dict__["_index"] = cached
        return cached[1]

    @property
    def n_walkers(self) -> int:
        ndim = len(self.parameters)
        # the free-form profile: the fewest walkers the moves allow.  The chain must be 50
        # autocorrelation times long whatever the walker count, and on the 22-parameter node
        # benchmark 46 walkers mixed as fast per step as 84 (tau 79 and 83 steps,
        # benchmarks/RESULTS.md), so every further walker only costs evaluations
        auto = 2 * ndim + 2 if self.profile == "nodes" else max(32, 4 * ndim)
        n = self.walkers or auto
        n = max(n, 2 * ndim + 2)
        return n + (n % 2)

    def describe_priors(self) -> list:
        """Lines ``name [unit]: prior (default)`` for output and result files."""
        return [f"{p.name} [{p.unit or '1'}]: {p.prior.describe()}" + (" (default)" if p.default
                                                                       else "")
                for p in self.parameters]


# ----------------------------------------------------------------------------------------------
def read_fit_settings(fit: dict | None, source: str, n_channels: int) -> FitSettings:
    """Check the ``[fit]`` keys that do not depend on the sample.

    Parameters
    ----------
    fit : dict or None
        ``run.fit`` as read from the run file.
    source : str
        The run file, for error messages.
    n_channels : int
        Channels of the spectrum (windows must lie inside).

    Raises
    ------
    forward.InputError
        For unknown keys and bad settings.
    """
    fit = dict(fit or {})
    where = _Where(source)
    for key in fit:
        if key not in _TOP_KEYS:
            allowed = ", ".join(_TOP_KEYS)
            raise InputError(f"unknown key {key!r}; allowed keys: {allowed}", where=where(key))
    out = FitSettings(source=where.source)
    profile = fit.get("profile", "layers")
    if profile not in ("layers", "nodes"):
        raise InputError(f"unknown profile model {profile!r}; allowed: 'layers', 'nodes'",
                         where=where("profile"))
    out.profile = profile
    if "nodes" in fit and profile != "nodes":
        raise InputError("a nodes table needs profile = 'nodes'", where=where("nodes"))

    for key, low, integer, strict in (("count_threshold", 0, False, False),
                                      ("tau_multiple", 1, False, True),
                                      ("max_steps", 1, True, True),
                                      ("check_every", 10, True, True),
                                      ("walkers", 0, True, True),
                                      ("band_draws", 10, True, True)):
        if key in fit:
            setattr(out, key, _number(fit[key], key, where, low=low, integer=integer,
                                      low_inclusive=strict))
    if out.walkers and out.walkers < 4:
        raise InputError(f"must be 0 (automatic) or at least 4, got {out.walkers}",
                         where=where("walkers"))

    background = fit.get("background", "off")
    if background not in ("off", "flat", "linear"):
        raise InputError(f"unknown background {background!r}; allowed: 'off', 'flat', 'linear'",
                         where=where("background"))
    out.background = background
    # differential-evolution moves mixed about 3x faster (effective samples per second) than
    # the stretch move on both the 21-parameter node benchmark and the 10-parameter layer
    # benchmark (benchmarks/RESULTS.md, "Inversion"): they are the default for both models
    moves = fit.get("moves", "differential")
    if moves not in ("stretch", "differential", "subspace"):
        raise InputError(f"unknown moves {moves!r}; allowed: 'stretch', 'differential', "
                         "'subspace'", where=where("moves"))
    out.moves = moves
    if "depth_limit_1e15" in fit:
        out.depth_limit_1e15 = _number(fit["depth_limit_1e15"], "depth_limit_1e15", where,
                                       low=0, low_inclusive=False)
    if "windows" in fit:
        out.windows = _parse_windows(fit["windows"], int(n_channels or 0), where)

    fixed = fit.get("fixed", [])
    if not isinstance(fixed, (list, tuple)) or not all(isinstance(x, str) for x in fixed):
        raise InputError("must be a list of nuisance names", where=where("fixed"))
    out.fixed = list(fixed)
    free = fit.get("free", {})
    if not isinstance(free, dict):
        raise InputError("must be a table: quantity name -> prior", where=where("free"))
    out.free = dict(free)
    nodes = fit.get("nodes", {})
    if not isinstance(nodes, dict):
        raise InputError("must be a table", where=where("nodes"))
    out.nodes = dict(nodes)
    return out


def parse_fit(fit: dict | None, run, model) -> FitSpec:
    """Check the raw ``[fit]`` table and bind it to the model's sample.

    Parameters
    ----------
    fit : dict or None
        ``run.fit`` as read from the run file.
    run : forward.Run
        The run (its source, for messages).
    model : forward.ForwardModel
        The forward model (species columns, layers, default nuisance, channels).

    Raises
    ------
    forward.InputError
        For unknown keys, unknown free quantities, bad priors or settings.
    """
    source = str(getattr(run, "source", "run.toml"))
    settings = read_fit_settings(fit, source, int(getattr(model, "n_channels", 0) or 0))
    from ._nodes import depth_resolution

    physics = getattr(run, "physics", None)
    resolution = depth_resolution(model, getattr(physics, "slice_fraction", 0.25))
    return bind_fit(settings, model.sample_columns(), model.default_nuisance(),
                    stopping_widths(run, model.sample_columns()), resolution=resolution)


#: prior widths (scale sd, slope sd) of the stopping of an element whose stopping the run file
#: replaces by the user's own table: as well known as the user says (see DEFAULT_STOPPING_SD)
USER_TABLE_WIDTHS = (DEFAULT_STOPPING_SD, 0.02)


def stopping_widths(run, columns) -> dict:
    """``{element: (scale_sd, slope_sd)}``: the default prior widths of each element's stopping
    scale and slope (:func:`forward.stopping_uncertainty`, the measured spread against NIST
    ASTAR; oxygen in a layer with other elements counts as oxygen bound in an oxide;
    :data:`USER_TABLE_WIDTHS` for an element with a user table)."""
    import forward

    physics = getattr(run, "physics", None)
    tables = dict(getattr(physics, "stopping_tables", {}) or {})
    carbon = getattr(physics, "carbon", "graphite")
    ion = getattr(getattr(run, "beam", None), "species", "4He")
    oxide = False
    if "O" in columns.elements:
        o = columns.elements.index("O")
        for layer in columns.layers:
            present = {int(columns.species_element[c])
                       for c in np.flatnonzero(np.asarray(layer.composition) > 0)}
            oxide = oxide or (o in present and len(present) > 1)
    out = {}
    for el in columns.elements:
        if el in tables:
            out[el] = USER_TABLE_WIDTHS
        else:
            out[el] = tuple(float(x) for x in forward.stopping_uncertainty(
                el, ion, carbon=carbon, oxide=oxide and el == "O"))
    return out


def bind_fit(settings: FitSettings, columns, default_nuisance, widths=None, *,
             resolution=None) -> FitSpec:
    """The :class:`FitSpec` of checked settings for one sample.

    Parameters
    ----------
    settings : FitSettings
    columns : forward.SampleColumns
        The sample: species columns, elements, layers.
    default_nuisance : forward.Nuisance
        The run file's calibration, resolution and stopping scales (centres of the default
        nuisance priors).
    widths : dict, optional
        ``{element: (scale_sd, slope_sd)}`` of the default stopping priors
        (:func:`stopping_widths`); default :data:`DEFAULT_STOPPING_SD` and 0.02 for every element.
    resolution : (centres_1e15, resolution_1e15), optional
        The run's depth resolution (:func:`inversion.fit._nodes.depth_resolution`), from which
        the free-form profile's node count defaults.
    """
    widths = dict(widths or {})
    where = _Where(settings.source)
    layers = list(columns.layers)
    if not layers:
        raise InputError("the sample has no layers", where="run file: layers")
    if any(L.substrate for L in layers[:-1]):
        raise InputError("only the last layer can be a substrate", where="run file: layers")
    substrate = layers[-1].substrate
    spec = FitSpec(profile=settings.profile, parameters=[], layers=layers,
                   species=tuple(columns.species), elements=tuple(columns.elements),
                   background=settings.background, windows=settings.windows,
                   count_threshold=settings.count_threshold,
                   tau_multiple=settings.tau_multiple, max_steps=settings.max_steps,
                   check_every=settings.check_every, walkers=settings.walkers,
                   band_draws=settings.band_draws, moves=settings.moves,
                   depth_limit_1e15=settings.depth_limit_1e15, source=settings.source,
                   columns=columns)

    # ----- the quantities that can be free: name -> (unit, role, target, default prior) -----
    available: dict[str, tuple] = {}
    if spec.profile == "layers":
        for i, L in enumerate(layers):
            if L.substrate:
                continue
            t0 = L.areal_density_1e15
            available[f"{L.name}.areal_density"] = (
                "1e15 atoms/cm2", Role.AREAL_DENSITY, i,
                lambda t0=t0: make_prior("uniform", 0.1 * t0, 3.0 * t0))
        n_if = len(layers) - 1 if substrate else len(layers)
        # a width's default scale: a quarter of the films' total areal density, so that a thin
        # layer (a marker) may spread far beyond its own thickness, as diffusion spreads it
        films = sum(L.areal_density_1e15 for L in layers if not L.substrate)
        for i in range(n_if):
            available[f"{layers[i].name}.mixing"] = (
                "1e15 atoms/cm2", Role.MIXING, i,
                lambda s=0.25 * films: make_prior("halfnormal", s))
        for i, L in enumerate(layers):
            available[f"{L.name}.composition"] = ("", Role.SHARE, i, None)
    for kind in NUISANCES:
        field_value = getattr(default_nuisance, kind.role.field)
        if kind.role.per_element:
            field_value = np.asarray(field_value, dtype=float)
            for e, el in enumerate(spec.elements):
                v = float(field_value[e]) if field_value.size else 0.0
                w = widths.get(el, USER_TABLE_WIDTHS)
                available[kind.name.format(element=el)] = (
                    kind.unit, kind.role, e, lambda kind=kind, v=v, w=w: kind.prior(v, w))
        else:
            v = float(field_value)
            available[kind.name] = (kind.unit, kind.role, 0, lambda kind=kind, v=v: kind.prior(v))
    levels = {"flat": ("background.level",), "linear": ("background.low", "background.high")}
    for k, name in enumerate(levels.get(spec.background, ())):
        available[name] = ("counts/channel", Role.BACKGROUND, k,
                           lambda: make_prior("halfnormal", 1.0))

    nuisance_like = [n for n, a in available.items() if a[1].is_nuisance]
    expanded = []
    for name in settings.fixed:
        if name == "stopping":
            # the stopping is trusted: its scales and its energy dependence
            expanded += [n for n in nuisance_like
                         if available[n][1] in (Role.STOPPING, Role.SLOPE)]
        elif name == "straggling":
            # the straggling law is trusted: its scale and its correction
            expanded += [n for n in nuisance_like
                         if available[n][1] in (Role.STRAGGLING, Role.STRAGGLING_CORRECTION)]
        elif name in nuisance_like:
            expanded.append(name)
        else:
            raise InputError(f"{name!r} is not a nuisance; nuisances: "
                             f"{', '.join(nuisance_like)} (or 'stopping' for every "
                             "stopping scale and slope, 'straggling' for the straggling "
                             "scale and correction)",
                             where=where("fixed"))
    spec.fixed = tuple(expanded)

    free = settings.free
    for name in free:
        if name not in available:
            offered = [n for n, a in available.items()  # a one-species layer has no share
                       if a[1] is not Role.SHARE or np.count_nonzero(layers[a[2]].composition) > 1]
            raise InputError(f"no free quantity called {name!r}; available: "
                             f"{', '.join(offered)}", where=where(f"free.{name}"))
        if name in spec.fixed:
            raise InputError(f"{name!r} is listed both in fit.fixed and fit.free",
                             where=where(f"free.{name}"))

    params: list[Parameter] = []
    # profile parameters first, in the order of the sample, then nuisances and background
    for name, (unit, role, target, factory) in available.items():
        if not role.is_sample or name not in free:
            continue
        value = free[name]
        at = where(f"free.{name}")
        if role is Role.SHARE:
            params += _composition_parameters(spec, name, target, value, where)
            continue
        if value is True:
            prior, is_default = factory(), True
        elif value is False:
            continue
        else:
            prior, is_default = parse_prior(value, at), False
        if role in _NON_NEGATIVE and prior.dist.support()[0] < 0:
            low = float(prior.dist.cdf(0.0))
            if low > 0.05:
                raise InputError(f"this prior puts {100 * low:.0f} % of its mass below zero, "
                                 "where the quantity cannot be; use uniform, lognormal or "
                                 "halfnormal", where=at)
        params.append(Parameter(name, unit, prior, role, is_default, target))
    if spec.profile == "nodes":
        params += _node_parameters(spec, settings.nodes, layers, where, resolution)
    for name, (unit, role, target, factory) in available.items():
        if role.is_sample:
            continue
        if role is Role.BACKGROUND or name not in spec.fixed:
            value = free.get(name, True)
            if value is False:
                continue
            if value is True:
                params.append(Parameter(name, unit, factory(), role, True, target))
            else:
                params.append(Parameter(name, unit, parse_prior(value, where(f"free.{name}")),
                                        role, False, target))
    spec.parameters = params
    if not any(p.role.is_sample for p in params):
        raise InputError("nothing about the sample is free; free at least one quantity, e.g. "
                         f"{next(iter(available))!r} = true", where=where("free"))
    return spec


def _composition_parameters(spec, name, layer_index, value, where):
    """Stick-breaking shares for a layer's free composition, Dirichlet(alpha) prior."""
    layer = spec.layers[layer_index]
    at = where(f"free.{name}")
    alpha = 1.0
    if isinstance(value, dict):
        if set(value) != {"dirichlet"}:
            raise InputError("a free composition takes { dirichlet = alpha } (alpha > 0) or true",
                             where=at)
        alpha = _number(value["dirichlet"], f"free.{name}.dirichlet", where, low=0,
                        low_inclusive=False)
    elif value is not True:
        raise InputError("a free composition takes { dirichlet = alpha } (alpha > 0) or true",
                         where=at)
    columns = [int(c) for c in np.flatnonzero(layer.composition > 0)]
    if len(columns) < 2:
        raise InputError(f"layer {layer.name!r} has one species; its composition cannot be free",
                         where=at)
    spec.share_species[layer_index] = columns
    m = len(columns)
    out = []
    for k, col in enumerate(columns[:-1]):
        # Stick-breaking: v_k ~ Beta(alpha, (m - k - 1) alpha) independently gives exactly
        # Dirichlet(alpha, ..., alpha) on the fractions (Connor & Mosimann 1969, J. Am. Stat.
        # Assoc. 64, 194).
        prior = make_prior("beta", alpha, (m - k - 1) * alpha, where=at)
        out.append(Parameter(f"{layer.name}.share.{spec.species[col]}", "", prior, Role.SHARE,
                             value is True, layer_index))
    return out


def _node_parameters(spec, nodes, layers, where, resolution):
    """The free-form profile's parameters: per species but the reference, the first node's
    log-ratio (prior normal(0, start_sd)) and the steps (normal(0, step_sd))."""
    spec.nodes = node_settings(nodes, species=spec.species, layers=layers, where=where,
                               resolution=resolution)
    count = spec.nodes["count"]
    names = [spec.species[c] for c in spec.nodes["columns"]]
    ref = names[-1]
    out = []
    index = 0
    for s in names[:-1]:
        for k in range(count):
            if k == 0:
                prior = make_prior("normal", 0.0, spec.nodes["start_sd"])
                label = f"nodes.{s}.logratio0"
            else:
                prior = make_prior("normal", 0.0, spec.nodes["step_sd"])
                label = f"nodes.{s}.step{k}"
            out.append(Parameter(label, f"ln({s}/{ref})", prior, Role.NODE, True, index))
            index += 1
    return out


def _parse_windows(value, n_channels: int, where) -> list:
    at = where("windows")
    if (not isinstance(value, list) or not value
            or not all(isinstance(w, list) and len(w) == 2 for w in value)):
        raise InputError("must be a non-empty list of [first, last] channel pairs, "
                         "e.g. [[120, 460]]", where=at)
    out = []
    for first, last in value:
        if not all(isinstance(c, int) and not isinstance(c, bool) for c in (first, last)):
            raise InputError(f"channels must be integers, got [{first!r}, {last!r}]", where=at)
        if first > last:
            raise InputError(f"empty window [{first}, {last}]: first channel above last",
                             where=at)
        if first < 0 or (n_channels and last >= n_channels):
            raise InputError(f"window [{first}, {last}] outside the spectrum's channels "
                             f"0..{n_channels - 1}", where=at)
        out.append((first, last))
    return out
