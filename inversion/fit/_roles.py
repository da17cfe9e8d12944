"""Parameter roles: what a free parameter sets, and the physical limits it must respect.

Every free parameter has one :class:`Role`.  The objective never dispatches on names or
strings: :class:`RoleIndex` gathers, once per fit, the positions in the parameter vector and
the targets (layer, interface, element, node, background term) of every role, so turning a
parameter vector into model inputs is a handful of array assignments.

A new nuisance joins with one enum member here (the field of :class:`forward.Nuisance` it
sets, its physical limit) and one line in :data:`NUISANCES` (its name, unit and default prior).

Default priors of the stopping nuisances come from the measured spread of our helium stopping
against NIST ASTAR (:func:`forward.stopping_uncertainty`): per element a scale
``normal(1, scale_sd)`` and a slope ``normal(0, slope_sd)`` of the factor
``scale * (E / 1000 keV)**slope``.  The straggling scale multiplies every straggling variance:
published corrections to Bohr's value (Lindhard & Scharff 1953; Chu, Phys. Rev. A 13 (1976)
2057; Yang, O'Connor & Wang, NIM B 61 (1991) 149) differ by tens of per cent for heavy targets,
so its default prior is lognormal with median 1 and sigma 0.3.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np

from ._priors import Prior, make_prior

__all__ = ["Role", "NuisanceKind", "NUISANCES", "NUISANCE_NAMES", "DEFAULT_STOPPING_SD",
           "STRAGGLING_SIGMA", "STRAGGLING_CORRECTION_SD", "RoleIndex"]

#: Relative sd of the stopping scale prior of an element whose stopping comes from the user's
#: own table (the run file's ``[physics] stopping_tables``): the table is as well known as the
#: user says; 0.03 unless the run file's ``[fit.free]`` gives another prior.  Built-in stopping
#: gets the measured widths of :func:`forward.stopping_uncertainty`.
DEFAULT_STOPPING_SD = 0.03
#: sigma of the log of the straggling scale's default lognormal prior (median 1)
STRAGGLING_SIGMA = 0.3
#: sd of the straggling correction's default normal prior, centred on the run's law (1 for
#: Lindhard-Scharff, 0 for Bohr): the other law two standard deviations away
STRAGGLING_CORRECTION_SD = 0.5


class Role(enum.Enum):
    """What a free parameter sets.

    Each member carries ``(key, lower, upper, field, per_element)``: a value below ``lower``
    (at or below it where ``upper`` is None and the limit is strict, see :attr:`strict`) or
    above ``upper`` lies outside the physical limits, where the log-posterior is minus infinity
    before the model runs; ``field`` names the :class:`forward.Nuisance` attribute a nuisance
    sets (an array over the elements when ``per_element``).
    """

    #: a layer's areal density (1e15 atoms/cm2), >= 0; target: layer above the substrate
    AREAL_DENSITY = ("areal_density", 0.0, None, None, False)
    #: an interface's mixing width (1e15 atoms/cm2), >= 0; target: interface
    MIXING = ("mixing", 0.0, None, None, False)
    #: a stick-breaking share of a free composition, in (0, 1); target: layer
    SHARE = ("share", 0.0, 1.0, None, False)
    #: a node log-ratio or step of the free-form profile, unlimited; target: node parameter
    NODE = ("node", None, None, None, False)
    #: nuisances: > 0 except the calibration offset
    FLUENCE_SCALE = ("fluence_scale", 0.0, None, "fluence_scale", False)
    GAIN = ("gain_keV", 0.0, None, "gain_keV", False)
    OFFSET = ("offset_keV", None, None, "offset_keV", False)
    FWHM = ("fwhm_keV", 0.0, None, "fwhm_keV", False)
    #: an element's stopping scale, in (0.2, 5): no evaluation of helium stopping is off by a
    #: factor of five (the measured spread against NIST ASTAR is a few per cent, and 20 % for
    #: oxygen in oxides); target: element
    STOPPING = ("stopping", 0.2, 5.0, "stopping_scale", True)
    #: the energy dependence of an element's stopping, in (-0.5, 0.5): a slope of 0.5 changes
    #: the stopping tenfold between 10 keV and 1 MeV, far beyond any evaluation's error (the
    #: measured slopes against NIST ASTAR are a few hundredths); target: element
    SLOPE = ("slope", -0.5, 0.5, "stopping_slope", True)
    #: one factor on every straggling variance, > 0
    STRAGGLING = ("straggling_scale", 0.0, None, "straggling_scale", False)
    #: the exponent of the Lindhard-Scharff ratio in every straggling rate (1: that law, 0:
    #: Bohr's), in (-2, 3): at least three prior standard deviations beyond either law, so
    #: that the limits do not cut the prior (and the planning's Gaussian prior stays right)
    STRAGGLING_CORRECTION = ("straggling_correction", -2.0, 3.0, "straggling_correction", False)
    #: background level (counts/channel), >= 0; target: 0 (flat or low end), 1 (high end)
    BACKGROUND = ("background", 0.0, None, None, False)

    def __init__(self, key, lower, upper, field, per_element):
        self.key = key
        self.lower = lower
        self.upper = upper
        self.field = field
        self.per_element = per_element

    @property
    def strict(self) -> bool:
        """True when the lower limit itself is outside (a nuisance scale or a share)."""
        return (self.field is not None and self.lower is not None) or self.upper is not None

    @property
    def is_nuisance(self) -> bool:
        return self.field is not None

    @property
    def is_sample(self) -> bool:
        """Sets the depth profile (not a nuisance, not the background)."""
        return self.field is None and self is not Role.BACKGROUND

    def outside(self, values) -> bool:
        """True if any of ``values`` (an array) lies outside this role's physical limits.

        A NaN is outside an interval (a share) but passes a one-sided limit; the prior gate
        of the objective refuses it before the limits are asked.
        """
        if self.upper is not None:
            return not np.all((values > self.lower) & (values < self.upper))
        if self.lower is None:
            return False
        return bool(np.any(values <= self.lower) if self.strict else np.any(values < self.lower))


@dataclass(frozen=True)
class NuisanceKind:
    """A nuisance every fit marginalises unless the run file fixes it.

    Attributes
    ----------
    role : Role
    name : str
        Parameter name; ``{element}`` is replaced for a per-element nuisance.
    unit : str
    default_prior : callable
        ``default_prior(value, widths) -> Prior`` from the run file's value and, for the
        stopping nuisances, the element's ``(scale_sd, slope_sd)``.
    """

    role: Role
    name: str
    unit: str
    default_prior: object

    def prior(self, value: float, widths=(DEFAULT_STOPPING_SD, 0.0)) -> Prior:
        return self.default_prior(value, widths)


#: the nuisances, in the order their parameters take (README.md, "Quantities that can be free")
NUISANCES = (
    NuisanceKind(Role.FLUENCE_SCALE, "fluence_scale", "",
                 lambda v, w: make_prior("normal", v, 0.05)),
    NuisanceKind(Role.GAIN, "gain_keV", "keV/channel",
                 lambda v, w: make_prior("normal", v, 0.005 * abs(v))),
    NuisanceKind(Role.OFFSET, "offset_keV", "keV", lambda v, w: make_prior("normal", v, 2.0)),
    NuisanceKind(Role.FWHM, "fwhm_keV", "keV", lambda v, w: make_prior("normal", v, 0.10 * v)),
    NuisanceKind(Role.STOPPING, "stopping.{element}", "",
                 lambda v, w: make_prior("normal", 1.0, w[0])),
    NuisanceKind(Role.STRAGGLING, "straggling_scale", "",
                 lambda v, w: make_prior("lognormal", v, STRAGGLING_SIGMA)),
    NuisanceKind(Role.SLOPE, "slope.{element}", "",
                 lambda v, w: make_prior("normal", v, w[1])),
    NuisanceKind(Role.STRAGGLING_CORRECTION, "straggling_correction", "",
                 lambda v, w: make_prior("normal", v, STRAGGLING_CORRECTION_SD)),
)
#: names of the scalar nuisances (``stopping.<El>`` for every element comes on top)
NUISANCE_NAMES = tuple(k.name for k in NUISANCES if not k.role.per_element)


class RoleIndex:
    """Where each role's parameters sit in the parameter vector, and what they set.

    ``index[role]`` is ``(positions, targets)``: integer arrays, in parameter order.  Roles
    without parameters are absent.
    """

    def __init__(self, parameters):
        pos: dict = {}
        for i, p in enumerate(parameters):
            pos.setdefault(p.role, ([], []))
            pos[p.role][0].append(i)
            pos[p.role][1].append(p.target)
        self._slots = {role: (np.array(a, dtype=np.intp), np.array(b, dtype=np.intp))
                       for role, (a, b) in pos.items()}
        #: the roles present, in declaration order (limits are checked in this order)
        self.roles = tuple(r for r in Role if r in self._slots)
        #: ``(role, (positions, targets))`` of the roles present, in that order
        self.slots = tuple((role, self._slots[role]) for role in self.roles)
        # the limits of every parameter, for outside(): (position, lower) at or below which
        # (strict) or below which (loose) a value is outside, and (position, lower, upper)
        # of an interval
        strict, loose, interval = [], [], []
        for role, (positions, _) in self.slots:
            if role.upper is not None:
                interval += [(int(i), role.lower, role.upper) for i in positions]
            elif role.lower is not None:
                (strict if role.strict else loose).extend((int(i), role.lower)
                                                          for i in positions)
        self._strict, self._loose, self._interval = tuple(strict), tuple(loose), tuple(interval)

    def outside(self, values) -> bool:
        """True if any parameter lies outside its role's physical limits: the tests of
        :meth:`Role.outside` on the whole parameter vector ``values``, given as a sequence of
        floats (one pass of plain comparisons, no arrays)."""
        for i, lower in self._strict:
            if values[i] <= lower:
                return True
        for i, lower in self._loose:
            if values[i] < lower:
                return True
        for i, lower, upper in self._interval:
            # a NaN is outside an interval, and passes a one-sided limit (as in Role.outside)
            if not lower < values[i] < upper:
                return True
        return False

    def __contains__(self, role: Role) -> bool:
        return role in self._slots

    def __getitem__(self, role: Role):
        return self._slots[role]

    def get(self, role: Role, default=None):
        return self._slots.get(role, default)
