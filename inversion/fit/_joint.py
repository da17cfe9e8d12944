"""Several spectra of one sample, one posterior: :class:`JointObjective`.

Each measurement keeps its own :class:`~inversion.fit._objective.Objective` (its counts, its
window, its forward model, its grid that follows the sample); the joint objective holds them
and one parameter vector.  What is a property of the materials is shared: the sample
(areal densities, mixing widths, compositions, profile nodes) and the stopping and straggling
nuisances (``stopping.<El>``, ``slope.<El>``, ``straggling_scale``).  What belongs to one
spectrum is not: the calibration (``gain_keV``, ``offset_keV``), the resolution
(``fwhm_keV``), the fluence (``fluence_scale``) and the background levels, named
``<quantity>@<measurement>``; measurements of one ``charge_group`` share one
``fluence_scale@<group>``, measurements of one ``detector_group`` one ``gain_keV@<group>``,
``offset_keV@<group>`` and ``fwhm_keV@<group>``.  An index map per measurement
(:attr:`JointObjective.takes`) picks its objective's parameters out of the joint vector, so
the log-likelihood is the sum of each spectrum's Poisson log-likelihood over its own window,
and the log-prior is taken once over the joint parameters.

The ``[fit]`` table of a joint run is one table: keys of ``fit.free`` and ``fit.fixed`` that
belong to one spectrum carry ``@<measurement>`` (or ``@<charge group>`` for a shared
fluence, ``@<detector group>`` for a shared calibration and resolution);
:func:`measurement_fit` gives each measurement's objective its own table.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from forward import InputError

from ._objective import Objective
from ._priors import _PriorSum
from ._roles import Role

__all__ = ["JointObjective", "measurement_fit", "PER_MEASUREMENT_ROLES",
           "PER_MEASUREMENT_NAMES", "DETECTOR_ROLES", "DETECTOR_NAMES", "joint_name"]

#: roles whose parameters belong to one spectrum (named ``<quantity>@<measurement>``)
PER_MEASUREMENT_ROLES = (Role.FLUENCE_SCALE, Role.GAIN, Role.OFFSET, Role.FWHM,
                         Role.BACKGROUND)
#: their names in ``fit.free`` and ``fit.fixed`` (before ``@``)
PER_MEASUREMENT_NAMES = ("fluence_scale", "gain_keV", "offset_keV", "fwhm_keV",
                         "background.level", "background.low", "background.high")
#: roles a detector group shares (the detector's calibration and resolution)
DETECTOR_ROLES = (Role.GAIN, Role.OFFSET, Role.FWHM)
#: their names in ``fit.free`` and ``fit.fixed`` (before ``@``)
DETECTOR_NAMES = ("gain_keV", "offset_keV", "fwhm_keV")


def joint_name(name: str, role: Role, measurement: str, group: str | None,
               detector_group: str | None = None) -> str:
    """The joint parameter name of one measurement's parameter.

    Parameters
    ----------
    name : str
        The parameter's name in the measurement's own objective (``gain_keV``).
    role : Role
    measurement : str
    group : str or None
        The measurement's charge group (owns its fluence).
    detector_group : str or None
        The measurement's detector group (owns its calibration and resolution).
    """
    if role not in PER_MEASUREMENT_ROLES:
        return name
    owner = measurement
    if role is Role.FLUENCE_SCALE and group:
        owner = group
    elif role in DETECTOR_ROLES and detector_group:
        owner = detector_group
    return f"{name}@{owner}"


def measurement_fit(fit: dict | None, *, name: str, group: str | None, names, groups,
                    windows, source: str, detector_group: str | None = None,
                    detector_groups=None) -> dict:
    """The ``[fit]`` table as measurement ``name``'s own objective reads it.

    Parameters
    ----------
    fit : dict or None
        The run file's ``[fit]`` table.
    name : str
        The measurement.
    group : str or None
        Its charge group.
    names : sequence of str
        Every measurement's name.
    groups : dict
        ``{charge group: [measurement names]}``.
    windows : list or None
        The measurement's own ``windows``.
    source : str
        The run file (for messages).
    detector_group : str or None
        Its detector group.
    detector_groups : dict, optional
        ``{detector group: [measurement names]}``.

    Raises
    ------
    forward.InputError
        A per-spectrum quantity without ``@``, an ``@`` naming no measurement or group, a
        fluence named after a measurement of a charge group, a calibration or resolution
        named after a measurement of a detector group, a quantity named after a group that
        does not own it, a shared quantity with ``@``.
    """
    owners = _Owners(name, names, groups, detector_groups or {})
    fit = dict(fit or {})
    out = {k: v for k, v in fit.items() if k not in ("free", "fixed")}
    free = fit.get("free", {})
    fixed = fit.get("fixed", [])
    mine_free, mine_fixed = {}, []
    if isinstance(free, dict):
        for key, value in free.items():
            keep = _mine(key, owners, f"{source}: fit.free.{key}")
            if keep is not None:
                mine_free[keep] = value
    else:
        mine_free = free
    if isinstance(fixed, (list, tuple)):
        for key in fixed:
            if not isinstance(key, str):
                mine_fixed.append(key)
                continue
            keep = _mine(key, owners, f"{source}: fit.fixed")
            if keep is not None:
                mine_fixed.append(keep)
    else:
        mine_fixed = fixed
    if "free" in fit:
        out["free"] = mine_free
    if "fixed" in fit:
        out["fixed"] = mine_fixed
    if windows is not None:
        out["windows"] = windows
    return out


class _Owners:
    """Who owns what in a joint run, seen from one measurement."""

    def __init__(self, name, names, groups, detector_groups):
        self.name, self.names = name, list(names)
        self.groups, self.detector_groups = dict(groups), dict(detector_groups)

    def allowed(self, base: str) -> list:
        """Every owner ``base`` may be named after: its groups, then the measurements in
        none of them."""
        groups = self.groups if base == "fluence_scale" else \
            self.detector_groups if base in DETECTOR_NAMES else {}
        grouped = {m for members in groups.values() for m in members}
        return list(groups) + [n for n in self.names if n not in grouped]


def _mine(key: str, owners: _Owners, where):
    """The key as this measurement's objective names it, or None when it is another's."""
    base, at, owner = key.partition("@")
    if not at:
        if base in PER_MEASUREMENT_NAMES:
            examples = ", ".join(f"{base}@{n}" for n in owners.allowed(base))
            raise InputError(f"{base!r} belongs to one spectrum in a run file of several "
                             f"measurements; allowed: {examples}", where=where)
        return key
    if base not in PER_MEASUREMENT_NAMES:
        raise InputError(f"{base!r} is shared by every measurement (a property of the sample "
                         f"or its materials); allowed: {base!r} without '@'", where=where)
    groups, detectors = owners.groups, owners.detector_groups
    if owner not in owners.names and owner not in groups and owner not in detectors:
        raise InputError(f"no measurement or group called {owner!r}; measurements: "
                         f"{', '.join(owners.names)}"
                         + (f"; charge groups: {', '.join(groups)}" if groups else "")
                         + (f"; detector groups: {', '.join(detectors)}" if detectors else ""),
                         where=where)
    examples = ", ".join(f"{base}@{n}" for n in owners.allowed(base))
    if base == "fluence_scale":
        mine, others = groups, detectors
    elif base in DETECTOR_NAMES:
        mine, others = detectors, groups
    else:
        mine, others = {}, {**groups, **detectors}
    if owner in others:
        kind = "charge group" if owner in groups else "detector group"
        raise InputError(f"{base!r} does not belong to {kind} {owner!r}; allowed: {examples}",
                         where=where)
    members = mine.get(owner)
    if members is None:
        shared = next((g for g, m in mine.items() if owner in m), None)
        if shared is not None:
            kind = "charge" if mine is groups else "detector"
            raise InputError(f"measurement {owner!r} shares its {kind} in group {shared!r}; "
                             f"allowed: {base}@{shared}", where=where)
        return base if owner == owners.name else None
    return base if owners.name in members else None


class JointObjective:
    """Log-prior, log-likelihood and log-posterior of several spectra of one sample.

    Parameters
    ----------
    parts : list of Objective
        One objective per measurement, each built from its measurement's run, counts and
        ``[fit]`` table (:func:`measurement_fit`).
    names : list of str
        The measurements' names.
    groups : list of (str or None)
        Each measurement's charge group.
    detector_groups : list of (str or None), optional
        Each measurement's detector group.

    Attributes
    ----------
    spec : FitSpec
        The first measurement's, with the joint parameters.
    takes : list of ndarray of int
        ``theta[takes[k]]`` is measurement ``k``'s parameter vector.
    """

    def __init__(self, parts, names, groups=None, detector_groups=None):
        self.parts = list(parts)
        self.measurement_names = list(names)
        groups = list(groups or [None] * len(self.parts))
        #: each measurement's charge group (None: its own fluence)
        self.charge_groups = list(groups)
        #: each measurement's detector group (None: its own calibration and resolution)
        self.detector_groups = list(detector_groups or [None] * len(self.parts))
        first = self.parts[0]
        shared = [p for p in first.spec.parameters if p.role not in PER_MEASUREMENT_ROLES]
        params = list(shared)
        position = {p.name: i for i, p in enumerate(params)}
        takes = []
        for part, name, group, detector in zip(self.parts, self.measurement_names, groups,
                                               self.detector_groups):
            mine = [p.name for p in part.spec.parameters if p.role not in PER_MEASUREMENT_ROLES]
            if mine != [p.name for p in shared]:
                if first.spec.profile == "nodes":
                    raise InputError(
                        f"measurements {self.measurement_names[0]!r} and {name!r} give the "
                        "free-form profile different nodes (the default node count and range "
                        "follow each measurement's depth resolution); allowed: fit.nodes.count "
                        "and fit.nodes.depth_1e15 given in the run file, the same for every "
                        "measurement", where=f"{first.spec.source}: fit.nodes")
                raise InputError(f"measurement {name!r} frees other shared quantities than "
                                 f"{self.measurement_names[0]!r}; the sample and its materials "
                                 "are one for every measurement", where=first.spec.source)
            take = []
            for p in part.spec.parameters:
                joint = joint_name(p.name, p.role, name, group, detector)
                if joint not in position:
                    position[joint] = len(params)
                    params.append(dataclasses.replace(p, name=joint))
                elif p.role in PER_MEASUREMENT_ROLES and \
                        params[position[joint]].prior.describe() != p.prior.describe():
                    # one parameter of a group: the run-file checks give its members one
                    # value, so one default prior; a difference here is a defect upstream
                    raise InputError(f"measurement {name!r} gives {joint} the prior "
                                     f"{p.prior.describe()}, another member of its group "
                                     f"{params[position[joint]].prior.describe()}; allowed: "
                                     "one value for every member of a group",
                                     where=first.spec.source)
                take.append(position[joint])
            takes.append(np.asarray(take, dtype=np.intp))
        self.takes = takes
        self.spec = dataclasses.replace(first.spec, parameters=params)
        self.names = self.spec.names
        self.ndim = len(params)
        self.use_likelihood = first.use_likelihood
        #: every spectrum's counts and measured channels, joined in measurement order (what
        #: the result file's ``/input/spectrum`` keeps)
        self.counts = np.concatenate([p.counts for p in self.parts])
        self.measured = np.concatenate([p.measured for p in self.parts])

    @property
    def model(self):
        """Every measurement's forward model, built now (worker processes ask for this once,
        when they start); the first measurement's is returned."""
        for part in self.parts:
            part.model
        return self.parts[0].model

    # ----- what the sampler and the finishing steps ask of an objective -----
    def part_theta(self, theta, k: int) -> np.ndarray:
        """Measurement ``k``'s parameter vector (or rows of vectors)."""
        return np.asarray(theta, dtype=float)[..., self.takes[k]]

    def log_prior(self, theta) -> float:
        """Sum of the joint parameters' log prior densities (each parameter once)."""
        return _PriorSum.of(self)(theta)

    def log_likelihood(self, theta) -> float:
        """Sum of each spectrum's Poisson log-likelihood over its own window."""
        theta = np.asarray(theta, dtype=float)
        total = 0.0
        for part, take in zip(self.parts, self.takes):
            value = part.log_likelihood(theta[take])
            if not math.isfinite(value):
                return -np.inf
            total += value
        return total

    #: log_prior + log_likelihood, -inf before any model runs when outside the prior (the
    #: single objective's own method, on these two)
    log_posterior = Objective.log_posterior

    __call__ = log_posterior

    def derived_names(self):
        """The sample's derived quantities (the same for every measurement)."""
        return self.parts[0].derived_names()

    def derived(self, theta):
        return self.parts[0].derived(self.part_theta(theta, 0))

    def profile(self, theta, depth_1e15):
        """Atom fractions of one draw at depths (the sample is one for every measurement)."""
        return self.parts[0].profile(self.part_theta(theta, 0), depth_1e15)

    def predict(self, theta, channels=None, *, per_species=False, measurement: int = 0):
        """Expected counts of one measurement's spectrum (see ``Objective.predict``)."""
        return self.parts[measurement].predict(self.part_theta(theta, measurement), channels,
                                               per_species=per_species)
