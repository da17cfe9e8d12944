"""The objective: data, forward model and noise model joined into log-prior, log-likelihood
and log-posterior.  It knows nothing about walkers, moves or files (see ``_sampler``).

The objective pickles cheaply: it carries the run file's text, the counts and the checked
``[fit]`` table, never the forward model, which each process rebuilds once from the text
(:class:`ModelBuilder`).
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
from scipy.constants import Avogadro
from scipy.special import gammaln, xlogy

import forward
from forward import InputError

from ._fitspec import FitSpec
from ._profiles import LayerStack, NodeProfile

__all__ = ["Objective", "ModelBuilder", "species_mass_u"]


class ModelBuilder:
    """Rebuild the run and its forward model from the run file's text (cheap to pickle).

    Parameters
    ----------
    run_text : str
        The run file's text.
    source : str
        The run file's path (for messages).
    n_channels : int
        Channels of the measured spectrum.
    base_dir : str, optional
        Folder against which paths inside the run file are resolved.
    depth_limit_1e15 : float, optional
        Depth of the slice grid (default: the forward model's own choice).
    """

    def __init__(self, run_text: str, source: str, n_channels: int, base_dir=None,
                 depth_limit_1e15=None, first_channel: int = 0):
        self.run_text = run_text
        self.source = str(source)
        self.n_channels = int(n_channels)
        self.base_dir = None if base_dir is None else str(base_dir)
        self.depth_limit_1e15 = depth_limit_1e15
        self.first_channel = int(first_channel)

    def run(self):
        return forward.parse_run(self.run_text, source=self.source, base_dir=self.base_dir)

    def __call__(self):
        return forward.ForwardModel(self.run(), n_channels=self.n_channels,
                                    depth_limit_1e15=self.depth_limit_1e15,
                                    first_channel=self.first_channel)

    def full_range(self) -> "ModelBuilder":
        """The same builder computing every channel (for predictive spectra over the whole
        spectrum, not only the fit window)."""
        return ModelBuilder(self.run_text, self.source, self.n_channels, self.base_dir,
                            self.depth_limit_1e15, first_channel=0)


def first_fit_channel(fit: dict, n_channels: int) -> int:
    """The lowest channel the run's explicit ``fit.windows`` reach (0 without windows).

    The model then need not follow ions below it.  Malformed windows give 0 here: the
    ``[fit]`` check reports them properly.
    """
    windows = fit.get("windows") if isinstance(fit, dict) else None
    try:
        lows = [int(w[0]) for w in windows]
    except (TypeError, ValueError, IndexError):
        return 0
    if not lows:
        return 0
    return int(min(max(min(lows), 0), max(n_channels - 1, 0)))


def species_mass_u(species: str) -> float:
    """Mass (u) of a species column name: ``"Ni"`` (natural) or ``"O[18]"`` (one isotope)."""
    m = re.fullmatch(r"([A-Z][a-z]?)(?:\[(\d+)\])?", species)
    if m is None:
        raise InputError(f"cannot read species name {species!r}")
    if m.group(2):
        return forward.isotope(m.group(1), int(m.group(2))).mass_u
    return forward.element(m.group(1)).mass_u


class Objective:
    """Log-prior, log-likelihood and log-posterior of the free parameters.

    Parameters
    ----------
    spec : FitSpec
        The checked ``[fit]`` table (free parameters and priors).
    counts : array_like of int, shape (n_channels,)
        Measured counts per channel.
    build_model : callable
        ``build_model() -> forward.ForwardModel``; pickled to workers instead of the model.
    model : forward.ForwardModel, optional
        An already built model, used in this process.
    measured : array_like of bool, optional
        False for channels the spectrum file does not hold; they never enter the likelihood.
    likelihood : bool
        False switches the likelihood off (the posterior is then the prior; used in tests).
    """

    def __init__(self, spec: FitSpec, counts, build_model, model=None, *, measured=None,
                 likelihood=True):
        self.spec = spec
        self.counts = np.asarray(counts)
        if self.counts.ndim != 1 or np.any(self.counts < 0) or np.any(
                self.counts != np.round(self.counts)):
            raise InputError("counts must be one row of non-negative whole numbers",
                             where="spectrum")
        self.counts = self.counts.astype(np.float64)
        self.measured = (np.ones(self.counts.size, dtype=bool) if measured is None
                         else np.asarray(measured, dtype=bool))
        self.build_model = build_model
        self.use_likelihood = bool(likelihood)
        self._model = model
        self._setup()

    # ----- pickling: never ship the model -----
    def __getstate__(self):
        state = self.__dict__.copy()
        state["_model"] = None
        for key in ("_stack", "_nodes"):
            state.pop(key, None)
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._setup_profile()

    @property
    def model(self):
        if self._model is None:
            self._model = self.build_model()
        return self._model

    # ----- set-up -----
    def _setup(self):
        model = self.model
        spec = self.spec
        if self.counts.size != len(model.channel_energy_keV()):
            raise InputError(f"the spectrum has {self.counts.size} channels but the model "
                             f"{len(model.channel_energy_keV())}", where="spectrum")
        self.edges_1e15 = np.asarray(model.grid.edges_1e15, dtype=float)
        self.widths_1e15 = np.diff(self.edges_1e15)
        self.default_nuisance = model.default_nuisance()
        self.species_element = np.asarray(model.species_element, dtype=int)
        layers = spec.layers
        self.substrate = layers[-1].substrate
        self.base_thickness = np.array([L.areal_density_1e15 for L in layers if not L.substrate],
                                       dtype=float)
        self.n_interfaces = len(layers) - 1 if self.substrate else len(layers)
        self.base_compositions = np.array([L.composition for L in layers])
        self.names = spec.names
        self.ndim = len(spec.parameters)
        self._setup_profile()
        self.mask = self._window() & self.measured
        if not self.mask.any():
            raise InputError("empty channel window: no measured channel inside it",
                             where=f"{self.spec.source}: fit.windows")
        self.channels = np.flatnonzero(self.mask)
        k = self.counts[self.mask]
        self._k = k
        self._log_k_factorial = float(np.sum(gammaln(k + 1.0)))
        lo, hi = self.channels[0], self.channels[-1]
        self._bg_ramp = (self.channels - lo) / max(hi - lo, 1)

    def _setup_profile(self):
        spec = self.spec
        layers = spec.layers
        if spec.profile == "layers":
            self._stack = LayerStack(self.edges_1e15, len(spec.species), len(layers),
                                     layers[-1].substrate)
        else:
            n = spec.nodes
            self._nodes = NodeProfile(self.edges_1e15, len(spec.species), n["columns"],
                                      n["count"], n["depth_1e15"], n["below"])

    def _window(self):
        spec = self.spec
        n = self.counts.size
        mask = np.zeros(n, dtype=bool)
        if spec.windows:
            for first, last in spec.windows:
                if last >= n:
                    raise InputError(f"window [{first}, {last}] outside the spectrum's channels "
                                     f"0..{n - 1}", where=f"{self.spec.source}: fit.windows")
                mask[first:last + 1] = True
            return mask
        model = self.model
        nu = self.default_nuisance
        expected = model.expected_counts(model.layer_fractions(), nu)
        above = np.flatnonzero(expected > spec.count_threshold)
        if above.size == 0:
            raise InputError(f"empty channel window: the run's own sample expects no channel "
                             f"above {spec.count_threshold:g} counts; lower the threshold or "
                             "give fit.windows", where=f"{self.spec.source}: fit.count_threshold")
        energy = np.asarray(model.channel_energy_keV(nu))
        kev_per_channel = abs(float(np.median(np.diff(energy))))
        fwhm_channels = int(math.ceil(float(nu.fwhm_keV) / kev_per_channel))
        lo = int(above[0])
        if self.substrate:
            # the slice grid ends at the depth limit: keep clear of that artificial edge
            lo += 3 * fwhm_channels
        hi = int(above[-1]) + 5 * fwhm_channels
        lo, hi = max(lo, 0), min(hi, n - 1)
        if lo > hi:
            raise InputError("empty channel window after the margins; give fit.windows",
                             where=f"{self.spec.source}: fit.windows")
        mask[lo:hi + 1] = True
        return mask

    # ----- parameters to model inputs -----
    def unpack(self, theta):
        """Free parameters to ``(fractions, nuisance, background)``; None outside physical limits.

        Returns
        -------
        fractions : ndarray (n_slices, n_species)
        nuisance : forward.Nuisance
        background : ndarray (n_window_channels,) counts per channel
        """
        spec = self.spec
        theta = np.asarray(theta, dtype=float)
        thickness = self.base_thickness.copy()
        mixing = np.zeros(self.n_interfaces)
        comps = None
        node_params = np.empty(0)
        if spec.profile == "nodes":
            node_params = np.empty(self._nodes.n_parameters)
        fields = {}
        stopping = np.array(self.default_nuisance.stopping_scale, dtype=float, copy=True)
        bg = [0.0, 0.0]
        shares: dict[int, list] = {}
        for value, p in zip(theta, spec.parameters):
            kind = p.role[0]
            if kind == "areal_density":
                if value < 0:
                    return None
                thickness[p.role[1]] = value
            elif kind == "mixing":
                if value < 0:
                    return None
                mixing[p.role[1]] = value
            elif kind == "share":
                if not 0.0 < value < 1.0:
                    return None
                shares.setdefault(p.role[1], []).append(value)
            elif kind == "node":
                node_params[p.role[1]] = value
            elif kind == "nuisance":
                if value <= 0 and p.role[1] != "offset_keV":
                    return None
                fields[p.role[1]] = value
            elif kind == "stopping":
                if value <= 0:
                    return None
                stopping[p.role[1]] = value
            elif kind == "background":
                if value < 0:
                    return None
                bg[p.role[1]] = value
        if shares:
            comps = self.base_compositions.copy()
            for layer, v in shares.items():
                comps[layer] = 0.0
                comps[layer, spec.share_species[layer]] = _stick_breaking(v)
        if spec.profile == "layers":
            fractions = self._stack.fractions(thickness, mixing,
                                              self.base_compositions if comps is None else comps)
        else:
            fractions = self._nodes.fractions(node_params)
        nuisance = dataclasses.replace(self.default_nuisance, stopping_scale=stopping, **fields)
        if spec.background == "flat":
            background = np.full(self.channels.size, bg[0])
        elif spec.background == "linear":
            background = bg[0] + (bg[1] - bg[0]) * self._bg_ramp
        else:
            background = np.zeros(self.channels.size)
        return fractions, nuisance, background

    def compositions(self, theta):
        """Layer compositions (n_layers, n_species) for this draw (free shares applied)."""
        comps = self.base_compositions.copy()
        shares: dict[int, list] = {}
        for value, p in zip(theta, self.spec.parameters):
            if p.role[0] == "share":
                shares.setdefault(p.role[1], []).append(value)
        for layer, v in shares.items():
            comps[layer] = 0.0
            comps[layer, self.spec.share_species[layer]] = _stick_breaking(v)
        return comps

    # ----- the three log densities -----
    def log_prior(self, theta) -> float:
        """Sum of the parameters' log prior densities (-inf outside any support)."""
        total = 0.0
        for value, p in zip(theta, self.spec.parameters):
            lp = p.prior.logpdf(value)
            if lp == -math.inf or lp != lp:
                return -np.inf
            total += float(lp)
        return total

    def expected(self, theta, *, per_species=False):
        """Expected counts in the window channels for ``theta`` (None outside the limits)."""
        state = self.unpack(theta)
        if state is None:
            return None
        fractions, nuisance, background = state
        if per_species:
            parts = np.asarray(self.model.expected_counts(fractions, nuisance, per_species=True))
            return parts
        mu = np.asarray(self.model.expected_counts(fractions, nuisance))[self.mask]
        # the kernel's channel integrals are differences of large numbers: clip the round-off
        # (|mu| ~ 1e-12 counts) below zero, which no Poisson mean can be
        return np.maximum(mu, 0.0) + background

    def log_likelihood(self, theta) -> float:
        """Poisson log-likelihood of the counts in the window (zeros included).

        ``sum_i [k_i ln(mu_i) - mu_i - ln(k_i!)]`` over the window channels.
        """
        if not self.use_likelihood:
            return 0.0
        mu = self.expected(theta)
        if mu is None or not np.all(np.isfinite(mu)) or np.any(mu < 0):
            return -np.inf
        value = float(np.sum(xlogy(self._k, mu) - mu)) - self._log_k_factorial
        return value if math.isfinite(value) else -np.inf

    def log_posterior(self, theta) -> float:
        """log_prior + log_likelihood; -inf before the model runs when outside the prior."""
        lp = self.log_prior(theta)
        if not np.isfinite(lp):
            return -np.inf
        return lp + self.log_likelihood(theta)

    __call__ = log_posterior

    # ----- derived quantities, one draw at a time -----
    def derived_names(self):
        """Names, units and notes of the derived quantities (see :meth:`derived`)."""
        spec = self.spec
        names, units, notes = [], [], {}
        if spec.profile == "layers":
            for i, L in enumerate(spec.layers):
                if L.substrate:
                    continue
                names += [f"{L.name}.areal_density", f"{L.name}.thickness_nm"]
                units += ["1e15 atoms/cm2", "nm"]
                if L.density_g_cm3 is None and L.atoms_per_cm3 is None:
                    notes[f"{L.name}.thickness_nm"] = "no mass density given: NaN"
            for i in range(self.n_interfaces):
                L = spec.layers[i]
                names += [f"{L.name}.mixing", f"{L.name}.mixing_nm"]
                units += ["1e15 atoms/cm2", "nm"]
            for i in spec.share_species:
                for col in spec.share_species[i]:
                    names.append(f"{spec.layers[i].name}.fraction.{spec.species[col]}")
                    units.append("")
        for e in self._total_elements():
            names.append(f"total.{spec.elements[e]}")
            units.append("1e15 atoms/cm2")
        return names, units, notes

    def _total_elements(self):
        """Element indices whose total areal density above the substrate can be non-zero
        (an element found only in the substrate would always report 0: left out).  Fixed by
        the spec, so worked out once."""
        cached = self.__dict__.get("_total_elements_cached")
        if cached is None:
            cached = self._total_elements_cached = self._find_total_elements()
        return cached

    def _find_total_elements(self):
        spec = self.spec
        if spec.profile != "layers":
            return list(range(len(spec.elements)))
        cols = set()
        for i, L in enumerate(spec.layers):
            if L.substrate:
                continue
            cols.update(int(c) for c in np.flatnonzero(np.asarray(L.composition) > 0))
            cols.update(int(c) for c in spec.share_species.get(i, ()))
        return sorted({int(self.species_element[c]) for c in cols})

    def _atoms_per_cm3(self, comps):
        out = []
        masses = np.array([species_mass_u(s) for s in self.spec.species])
        for i, L in enumerate(self.spec.layers):
            if L.density_g_cm3 is not None and (i in self.spec.share_species
                                                or L.atoms_per_cm3 is None):
                out.append(L.density_g_cm3 * Avogadro / float(comps[i] @ masses))
            else:
                out.append(L.atoms_per_cm3 if L.atoms_per_cm3 is not None else math.nan)
        return np.array(out, dtype=float)

    def derived(self, theta):
        """Derived quantities for one draw, in the order of :meth:`derived_names`."""
        spec = self.spec
        theta = np.asarray(theta, dtype=float)
        values = []
        comps = self.compositions(theta)
        to_nm = 1e15 * 1e7  # (1e15 atoms/cm2) / (atoms/cm3) -> cm -> nm
        if spec.profile == "layers":
            thickness = self.base_thickness.copy()
            mixing = np.zeros(self.n_interfaces)
            for value, p in zip(theta, spec.parameters):
                if p.role[0] == "areal_density":
                    thickness[p.role[1]] = value
                elif p.role[0] == "mixing":
                    mixing[p.role[1]] = value
            n = self._atoms_per_cm3(comps)
            k = 0
            for i, L in enumerate(spec.layers):
                if L.substrate:
                    continue
                values += [thickness[k], thickness[k] * to_nm / n[i]]
                k += 1
            for i in range(self.n_interfaces):
                near = n[i:i + 2]
                near = near[np.isfinite(near)]
                dens = float(np.mean(near)) if near.size else math.nan
                values += [mixing[i], mixing[i] * to_nm / dens]
            for i in spec.share_species:
                values += list(comps[i, spec.share_species[i]])
            per_species = thickness @ comps[: thickness.size]
        else:
            fractions = self._nodes.fractions(theta[[p.role[0] == "node"
                                                     for p in spec.parameters]])
            a, b = self.edges_1e15[:-1], self.edges_1e15[1:]
            inside = np.clip(spec.nodes["depth_1e15"] - a, 0.0, b - a)
            per_species = inside @ fractions
        for e in self._total_elements():
            values.append(float(per_species[self.species_element == e].sum()))
        return np.array(values, dtype=float)

    def profile(self, theta):
        """The fraction table (n_slices, n_species) for one draw."""
        state = self.unpack(theta)
        if state is None:
            raise ValueError("parameters outside their physical limits")
        return state[0]


def _stick_breaking(v):
    """Stick-breaking shares ``v`` (length m - 1, each in (0, 1)) to m fractions."""
    v = np.asarray(v, dtype=float)
    rest = np.concatenate([[1.0], np.cumprod(1.0 - v)])
    return np.concatenate([v, [1.0]]) * rest
