"""``inversion.plan``: the expected error bars of every set-up of a grid, before beam time.

For each set-up (:mod:`._setups`) the plan builds the objective of the run file with those
set-up values, exactly as an inversion would (same ``[fit]`` table, same window rule), and
evaluates its expected information at the nominal sample (:mod:`._expected`, method there and
in README.md, "Planning a measurement").  Set-ups that differ only in their exposure share one
forward model: charge only scales the counts.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

import forward
from forward import InputError

from .._api import prepare
from ..fit._information import nominal_theta
from ..fit._roles import Role
from ._expected import Analysis, Gaussian, charge_for_sd, derived_gradients, prior_precision, \
    response
from ._setups import (VARY_KEYS, build_setups, charge_for_particles_uC, counted_particles,
                      parse_assignments, parse_vary)
from ._table import PlanRow, PlanTable, Quantity
from ._validity import validity_warnings

__all__ = ["plan", "parse_target", "PlanWarning", "PRIOR_RULES"]

#: what each prior kind contributes to the posterior precision (module _expected)
PRIOR_RULES = {
    "normal": "1/sd^2 (as in van Trees 1968)",
    "uniform": "nothing: flat inside its bounds, which the Gaussian approximation does not see",
    "halfnormal": "1/scale^2, its curvature on the whole half-line (the edge at 0 is not seen)",
    "lognormal": "its curvature at the nominal value, (1 - sigma^2 - ln(x/median)) / "
                 "(sigma^2 x^2), clipped at 0",
    "beta": "its curvature at the nominal value, (a-1)/x^2 + (b-1)/(1-x)^2, clipped at 0",
}
_TARGET_WHERE = "command line: --target"


class PlanWarning(UserWarning):
    """A set-up leaves the model's validity, or the Gaussian approximation is rough."""


def parse_target(target) -> tuple[str, float | None, bool] | None:
    """``"NAME=SD"``, ``"NAME=SD%"``, ``"NAME"``, ``(name, sd)`` or None.

    Returns
    -------
    (name, sd or None, relative) or None
        ``relative``: the sd was given in per cent of the nominal value.
    """
    if target is None:
        return None
    if isinstance(target, (tuple, list)):
        if len(target) != 2:
            raise InputError("a target is (quantity, sd)", where=_TARGET_WHERE)
        name, value = str(target[0]), target[1]
        text = None if value is None else str(value)
    else:
        name, sep, text = str(target).partition("=")
        if not sep:
            text = None
    name = name.strip()
    if not name:
        raise InputError("give QUANTITY=SD, e.g. film.mixing=5 or film.areal_density=2%",
                         where=_TARGET_WHERE)
    if text is None:
        return name, None, False
    text = text.strip()
    relative = text.endswith("%")
    try:
        sd = float(text.rstrip("%"))
    except ValueError:
        raise InputError(f"{text!r} is not a number; give QUANTITY=SD in the quantity's unit, "
                         "or in per cent of its nominal value (e.g. 2%)",
                         where=f"{_TARGET_WHERE} {name}") from None
    if not (math.isfinite(sd) and sd > 0):
        raise InputError(f"the target sd must be a number > 0, got {text}",
                         where=f"{_TARGET_WHERE} {name}")
    return name, sd, relative


def _n_channels(run) -> int:
    """Channels of the planned spectrum: 1.05 times the highest surface edge (as
    ``sondage simulate``), and at least up to the last fit window."""
    m1 = run.beam.ion.mass_u
    e0 = float(run.beam.energy_keV)
    top = 0.0
    for layer in run.layers:
        for sym in layer.fractions:
            for iso, _ in layer.isotope_fractions(sym):
                try:
                    top = max(top, forward.kinematic_factor(m1, iso.mass_u,
                                                            run.geometry.scattering_deg))
                except ValueError:
                    continue
    n = int(math.ceil(run.calibration.channel_of(1.05 * (top or 1.0) * e0)))
    windows = (run.fit or {}).get("windows")
    try:
        n = max(n, max(int(w[1]) for w in windows) + 1)
    except (TypeError, ValueError, IndexError):
        pass
    return max(n, 1)


def _shares(spec, layer_index: int) -> list[float]:
    """Stick-breaking shares of a layer's run-file composition (inverse of
    ``inversion.fit._profiles.stick_breaking``): ``v_k = x_k / (1 - x_1 - ... - x_{k-1})``."""
    columns = spec.share_species[layer_index]
    x = np.asarray(spec.layers[layer_index].composition, dtype=float)[columns]
    x = x / x.sum()
    rest = 1.0 - np.concatenate([[0.0], np.cumsum(x)[:-1]])
    return list((x / rest)[:-1])


def _nominal_values(objective, nominal: dict) -> dict:
    """Values of the free parameters that the run file does not give as nuisances."""
    spec = objective.spec
    values = {}
    shares: dict[int, list] = {}
    for p in spec.parameters:
        if p.name in nominal:
            values[p.name] = nominal[p.name]
        elif p.role is Role.AREAL_DENSITY:
            values[p.name] = float(spec.layers[p.target].areal_density_1e15)
        elif p.role is Role.SHARE:
            queue = shares.setdefault(p.target, _shares(spec, p.target))
            values[p.name] = float(queue.pop(0))
        elif p.role is Role.BACKGROUND:
            values[p.name] = 0.0
        elif p.role is Role.MIXING:
            raise InputError(f"{p.name} is free but a run file cannot give its nominal value; "
                             f"give the width you expect with --nominal {p.name}=VALUE "
                             "(1e15 atoms/cm2, > 0)", where="command line: --nominal")
        elif not p.role.is_nuisance:
            raise InputError(f"no nominal value for {p.name}; give --nominal {p.name}=VALUE",
                             where="command line: --nominal")
    for p in spec.parameters:
        if p.role is Role.MIXING and values.get(p.name) == 0:
            raise InputError("a width of 0 (a sharp interface) gives the spectrum no first-order "
                             "response to it; give the width you expect (> 0)",
                             where=f"command line: --nominal {p.name}")
    return values


class _Geometry:
    """The objective, nominal parameters, priors and response of one geometry."""

    def __init__(self, setups, nominal: dict, rel_step: float):
        self.setups = setups
        self.reference = max(setups, key=lambda s: counted_particles(s.run))
        run = self.reference.run
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            _, objective = prepare(run, np.ones(_n_channels(run)))
        self.warnings = [" ".join(str(w.message).split()) for w in caught]
        spec = objective.spec
        if spec.profile != "layers":
            raise InputError("planning needs the layer model; the free-form node profile has "
                             "no nominal sample to plan for; allowed: profile = 'layers'",
                             where=f"{run.source}: fit.profile")
        self.objective = objective
        self.parameters = list(spec.parameters)
        self.names = [p.name for p in self.parameters]
        unknown = [n for n in nominal if n not in self.names]
        if unknown:
            raise InputError(f"{unknown[0]} is not a free parameter of this fit; free: "
                             f"{', '.join(self.names)}", where=f"command line: --nominal "
                                                               f"{unknown[0]}")
        values = _nominal_values(objective, nominal)
        self.theta = nominal_theta(objective, values)
        self.prior = np.zeros(len(self.names))
        for i, p in enumerate(self.parameters):
            where = (f"command line: --nominal {p.name}" if p.name in nominal
                     else f"{run.source}: fit.free.{p.name}")
            if p.role.outside(np.array([self.theta[i]])):
                raise InputError(f"the nominal value {self.theta[i]:g} of {p.name} is outside "
                                 "its physical limits", where=where)
            try:
                self.prior[i] = prior_precision(p.prior, self.theta[i])
            except ValueError:
                raise InputError(f"the nominal value {self.theta[i]:g} of {p.name} lies outside "
                                 f"its prior {p.prior.describe()}", where=where) from None
        if Role.SHARE in spec.index:
            comps = objective.compositions(self.theta)
            for layer in spec.share_species:
                if not np.allclose(comps[layer], spec.layers[layer].composition, atol=1e-9):
                    raise RuntimeError("nominal shares do not reproduce the run's composition")
        self.response = response(objective, self.theta, counted_particles(run), rel_step)
        self.derived = derived_gradients(objective, self.theta, rel_step)
        self.nuisances = [(i, p.name) for i, p in enumerate(self.parameters)
                          if p.role.is_nuisance]
        columns = spec.columns
        self.validity = validity_warnings(run, getattr(columns, "species", ()),
                                          getattr(columns, "mass_u", ()))

    def gradients(self) -> dict:
        """Quantity name -> gradient over the parameters."""
        out = {}
        for i, name in enumerate(self.names):
            a = np.zeros(len(self.names))
            a[i] = 1.0
            out[name] = a
        for name, (a, _, _) in self.derived.items():
            out[name] = a
        return out

    def quantities(self) -> list[Quantity]:
        out = [Quantity(p.name, p.unit, float(self.theta[i]), True, p.role.is_sample)
               for i, p in enumerate(self.parameters)]
        out += [Quantity(name, unit, value, False, True)
                for name, (_, value, unit) in self.derived.items()]
        return out

    def ratio(self, setup) -> float:
        return counted_particles(setup.run) / self.response.particles

    def prior_notes(self) -> dict:
        notes = {}
        for i, p in enumerate(self.parameters):
            rule = PRIOR_RULES.get(p.prior.kind, "its curvature at the nominal value")
            notes[p.name] = (f"{p.prior.describe()}: {rule}; here {self.prior[i]:.4g}"
                             + (f" /({p.unit})^2" if p.unit else ""))
        return notes

    def edge_notes(self, sd: dict) -> list[str]:
        """Free parameters whose nominal value lies within two expected sds of the edge of
        their prior or physical range: the Gaussian approximation is rough there."""
        out = []
        for i, p in enumerate(self.parameters):
            s = sd[p.name]
            if not (math.isfinite(s) and s > 0):
                continue
            low, high = (float(b) for b in p.prior.dist.support())
            if p.role.lower is not None:
                low = max(low, float(p.role.lower))
            if p.role.upper is not None:
                high = min(high, float(p.role.upper))
            v = float(self.theta[i])
            for edge in (low, high):
                if math.isfinite(edge) and abs(v - edge) < 2.0 * s:
                    out.append(f"{p.name}: its nominal value {v:.4g} lies within two "
                               f"expected sd of {edge:g}, the edge of its prior or physical "
                               "range: the posterior is cut there and not Gaussian, so its "
                               "expected sd is rough at this set-up")
        return out


def _check_target(target, quantities) -> tuple[str, float | None]:
    name, sd, relative = target
    names = [q.name for q in quantities]
    if name not in names:
        raise InputError(f"{name} is not a free quantity of this plan (or one derived from "
                         f"them); allowed: {', '.join(names)}", where=_TARGET_WHERE)
    q = quantities[names.index(name)]
    if sd is not None and relative:
        if q.nominal == 0:
            raise InputError(f"{name} has the nominal value 0: give its target sd in "
                             f"{q.unit or 'its unit'}, not in per cent", where=_TARGET_WHERE)
        sd = sd / 100.0 * abs(q.nominal)
    return name, sd


def plan(run, *, vary=None, target=None, nominal=None, rel_step: float = 1e-3) -> PlanTable:
    """The expected posterior sds of a run file's free quantities at every set-up of a grid.

    Parameters
    ----------
    run : forward.Run or path
        The expected sample (its layers at their nominal values) and the ``[fit]`` table of
        what will be free, with the set-up the grid starts from.
    vary : dict or list of str, optional
        ``{"geometry.tilt_deg": [0, 30, 60], "exposure.charge_uC": [2, 8]}`` or the command
        line's ``["geometry.tilt_deg=0,30,60", ...]``: every combination is a set-up (the run
        file as given when None).  Keys: :data:`~inversion.planning._setups.VARY_KEYS`.
    target : str or (str, float), optional
        ``"film.mixing=5"`` (an sd in the quantity's unit), ``"film.areal_density=2%"`` (per
        cent of its nominal value) or ``"film.mixing"`` (rank by it, no charge): the rows are
        ranked by this quantity's expected sd, and each row gets the charge that reaches the
        target sd.  Default ranking: the first free quantity of the sample.
    nominal : dict or list of str, optional
        Nominal values of free parameters the run file cannot state (mixing widths; required)
        or that differ from it (``{"film.mixing": 40}`` or ``["film.mixing=40"]``).
        Background levels default to 0, shares to the layer's formula, nuisances to the run
        file's values.
    rel_step : float
        Relative step of the finite differences.

    Returns
    -------
    PlanTable
        Ranked rows, one per set-up (see :class:`~inversion.planning._table.PlanTable`).

    Raises
    ------
    forward.InputError
        For an unknown or non-numeric key, a value the run file does not allow, a target that
        is not free, a missing or impossible nominal value.
    """
    if not hasattr(run, "layers"):
        run = forward.load_run(run)
    vary = parse_vary(vary)
    nominal = parse_assignments(nominal, "--nominal")
    wanted = parse_target(target)
    setups = build_setups(run, vary)
    groups: dict = {}
    for s in setups:
        groups.setdefault(s.geometry, []).append(s)
    geometries = [_Geometry(members, nominal, rel_step) for members in groups.values()]
    first = geometries[0]
    quantities = first.quantities()
    if wanted is not None:
        rank_by, target_sd = _check_target(wanted, quantities)
    else:
        rank_by = next(q.name for q in quantities if q.sample)
        target_sd = None

    rows, row_geometry = [], []
    for geo in geometries:
        gradients = geo.gradients()
        for setup in geo.setups:
            rows.append(_row(geo, setup, gradients, rank_by, target_sd))
            row_geometry.append(geo)
    order = sorted(range(len(rows)), key=lambda k: (_rank_key(rows[k].sd[rank_by]),
                                                    rows[k].charge_uC))
    ranked = []
    for rank, k in enumerate(order, start=1):
        rows[k].rank = rank
        ranked.append(rows[k])
    best_geo = row_geometry[order[0]]
    table = PlanTable(rows=ranked, varied={k: VARY_KEYS[k] for k in vary},
                      quantities=quantities, rank_by=rank_by, target_sd=target_sd,
                      parameters=list(first.names), theta=best_geo.theta.copy(),
                      prior_precision=best_geo.prior.copy(), prior_notes=best_geo.prior_notes(),
                      source=str(run.source), title=str(run.title or ""))
    seen = set()
    for row in ranked:
        for message in row.warnings:
            if message not in seen:
                seen.add(message)
                warnings.warn(message, PlanWarning, stacklevel=2)
    return table


def _rank_key(sd: float) -> float:
    return sd if math.isfinite(sd) else math.inf


def _row(geo: _Geometry, setup, gradients: dict, rank_by: str, target_sd) -> PlanRow:
    ratio = geo.ratio(setup)
    fisher = geo.response.fisher(ratio)
    nuisances = [i for i, _ in geo.nuisances]
    analysis = Analysis(fisher, geo.prior, geo.names, nuisances)
    sd, sd_counting, limits = {}, {}, {}
    for name, a in gradients.items():
        u = analysis.uncertainty(a)
        sd[name], sd_counting[name], limits[name] = u.sd, u.sd_counting, u.limits
    charge = charge_for_particles_uC(setup.run, counted_particles(setup.run))
    row = PlanRow(rank=0, values=dict(setup.values), charge_uC=charge,
                  counts=geo.response.counts(ratio), sd=sd, sd_counting=sd_counting,
                  limits=limits, fisher=fisher, correlation=analysis.gauss.correlation(),
                  run=setup.run, theta=geo.theta.copy(), prior_precision=geo.prior.copy())
    if target_sd is not None:
        a = gradients[rank_by]

        def sd_at(q):
            r = ratio * q / charge
            return math.sqrt(Gaussian(geo.response.fisher(r) + np.diag(geo.prior)).variance(a))

        def explain(q):
            fisher_q = geo.response.fisher(ratio * q / charge)
            return Analysis(fisher_q, geo.prior, geo.names, nuisances).uncertainty(a)

        row.charge_for_target_uC, row.target_note = charge_for_sd(sd_at, charge, target_sd,
                                                                  explain=explain)
    found = list(setup.warnings) + geo.warnings + geo.validity + geo.edge_notes(sd)
    row.warnings = list(dict.fromkeys(found))
    return row
