"""The objective: data, forward model and noise model joined into log-prior, log-likelihood
and log-posterior, and :meth:`Objective.predict`, the one way to turn parameters into expected
counts (the likelihood, the predictive spectra and the bands all use it).  It knows nothing
about walkers, moves or files (see :mod:`inversion.sample`).

The objective pickles cheaply: it carries the checked run, the counts and the checked ``[fit]``
table, never the forward model, which each process builds once (:class:`ModelBuilder`).
"""

from __future__ import annotations

import dataclasses
import functools
import math

import numpy as np
from scipy.special import gammaln, xlogy

import forward
from forward import InputError

from ._stack import point_composition, refinement_points, stack_table
from . import _derived
from ._priors import _PriorSum
from ._profiles import NodeProfile, stick_breaking
from ._roles import Role
from ._spec import FitSpec
from ._window import film_floor_channel

__all__ = ["Objective", "ModelBuilder", "TAIL_WIDTHS", "log_prior_of"]

#: the slice grid reaches this many mixing widths below the deepest interface, so that the
#: Gaussian tails of every layer lie inside it (they are below 1e-15 there)
TAIL_WIDTHS = 8.0
#: the nuisance fields that hold one value per element
_PER_ELEMENT_FIELDS = tuple(role.field for role in Role if role.per_element)


@functools.lru_cache(maxsize=None)
def _init_fields(kind) -> tuple:
    """The fields of a nuisance dataclass its constructor takes (what dataclasses.replace
    passes on)."""
    return tuple(f.name for f in dataclasses.fields(kind) if f.init)


def log_prior_of(parameters, theta) -> float:
    """Sum of the log prior densities of ``parameters`` at ``theta`` (-inf outside any
    support); one copy for every objective."""
    return _PriorSum(parameters)(theta)


class ModelBuilder:
    """Build the run's forward model; pickled to worker processes instead of the model.

    Parameters
    ----------
    run_text : str
        The run file's text (parsed only if no ``run`` is given).
    source : str
        The run file's path (for messages).
    n_channels : int
        Channels of the measured spectrum.
    base_dir : str, optional
        Folder against which paths inside the run file are resolved.
    depth_limit_1e15 : float, optional
        Depth of the slice grid (default: the forward model's own choice).
    first_channel : int
        Channels below this one are not computed (see :class:`forward.ForwardModel`).
    run : forward.Run, optional
        The run, already parsed and checked (then never parsed again, here or in a worker).
    """

    def __init__(self, run_text: str, source: str, n_channels: int, base_dir=None,
                 depth_limit_1e15=None, first_channel: int = 0, *, run=None):
        self.run_text = run_text
        self.source = str(source)
        self.n_channels = int(n_channels)
        self.base_dir = None if base_dir is None else str(base_dir)
        self.depth_limit_1e15 = depth_limit_1e15
        self.first_channel = int(first_channel)
        self._run = run

    @classmethod
    def for_run(cls, run, n_channels: int, *, depth_limit_1e15=None,
                first_channel: int = 0) -> "ModelBuilder":
        """The builder of a parsed run."""
        return cls(run.text, run.source, n_channels, base_dir=getattr(run, "base_dir", None),
                   depth_limit_1e15=depth_limit_1e15, first_channel=first_channel, run=run)

    def run(self):
        """The run (parsed from the text once, if it was not given)."""
        if self._run is None:
            self._run = forward.parse_run(self.run_text, source=self.source,
                                          base_dir=self.base_dir)
        return self._run

    def __call__(self):
        return forward.ForwardModel(self.run(), n_channels=self.n_channels,
                                    depth_limit_1e15=self.depth_limit_1e15,
                                    first_channel=self.first_channel)

    def full_range(self) -> "ModelBuilder":
        """The same builder computing every channel (for predictive spectra over the whole
        spectrum, not only the fit window)."""
        return ModelBuilder(self.run_text, self.source, self.n_channels, self.base_dir,
                            self.depth_limit_1e15, first_channel=0, run=self._run)


@dataclasses.dataclass
class _Draw:
    """One parameter vector turned into the profile's parameters, the nuisance and the
    background levels."""

    thickness: np.ndarray
    mixing: np.ndarray
    compositions: np.ndarray
    node_params: np.ndarray
    nuisance: object
    background: np.ndarray  # (2,) levels


class _Profiles:
    """The fit's profile construction: one slice table per draw.

    The layer model lays its slices out on the grid that follows the sample
    (:meth:`forward.ForwardModel.sample_edges`: every layer's nominal slices stretched with its
    areal density, so each interface is a slice edge at its current depth in every evaluation),
    adds edges around each interface whose mixing is free at fixed multiples of its width
    (:func:`inversion._stack.refinement_points`: slices there are fine relative to the width and
    move with it), and fills them with the atom-conserving stack
    (:func:`inversion._stack.stack_table`), whose slices' areal densities follow from the atoms
    they hold.  The node model keeps the model's nominal grid.
    """

    def __init__(self, spec: FitSpec, n_interfaces: int, substrate: bool):
        self.layers = spec.profile == "layers"
        self.substrate = bool(substrate)
        self.refine = np.zeros(n_interfaces, dtype=bool)
        if Role.MIXING in spec.index:
            self.refine[spec.index[Role.MIXING][1]] = True
        self.node_settings = dict(spec.nodes)
        self.n_species = len(spec.species)
        # the run file's layers, around a node range inside them (mixed model)
        thick = [L.areal_density_1e15 for L in spec.layers if not L.substrate]
        self.layer_tops = np.concatenate([[0.0], np.cumsum(thick)])
        self.layer_compositions = np.array([L.composition for L in spec.layers], dtype=float)
        self._nodes = None

    def nodes(self, model) -> NodeProfile:
        edges = model.grid.edges_1e15
        if self._nodes is not None and self._nodes.edges_1e15 is edges:
            return self._nodes  # built on this very array (the usual case: no comparison)
        if self._nodes is None or self._nodes.edges_1e15.size != edges.size \
                or not np.array_equal(self._nodes.edges_1e15, edges):
            n = self.node_settings
            self._nodes = NodeProfile(model.grid.edges_1e15, self.n_species, n["columns"],
                                      n["node_depth_1e15"], n["below"],
                                      layer_tops_1e15=self.layer_tops,
                                      layer_compositions=self.layer_compositions)
        return self._nodes

    def edges(self, model, draw) -> np.ndarray:
        """Slice edges (auxiliary depth, see :mod:`inversion._stack`) of the layer model."""
        t, w = draw.thickness, draw.mixing
        edges = model.sample_edges(t, draw.nuisance)
        if t.size:
            # the Gaussian tails of every finite layer end inside the grid (conservation)
            reach = float(t.sum()) + TAIL_WIDTHS * float(w.max() if w.size else 0.0)
            if edges[-1] < reach:
                edges = np.append(edges, reach)
            extra = refinement_points(t, w, self.refine)
            if extra.size:
                edges = np.sort(np.concatenate([edges, np.clip(extra, 0.0, edges[-1])]))
        return edges

    def table(self, model, draw):
        """``(widths_1e15, fractions)`` of one draw."""
        if self.layers:
            widths, fractions, _ = stack_table(self.edges(model, draw), draw.thickness,
                                               draw.mixing, draw.compositions, self.substrate)
            return widths, fractions
        return model.grid.widths_1e15, self.nodes(model).fractions(draw.node_params)

    def points(self, model, draw, depth_1e15) -> np.ndarray:
        """Atom fractions at depths (1e15 atoms/cm2 from the surface), ``(n, n_species)``:
        the layer model's continuous profile, the node model's interpolated nodes."""
        depth = np.asarray(depth_1e15, dtype=float)
        if not self.layers:
            return self.nodes(model).fractions_at(draw.node_params, depth)
        edges = self.edges(model, draw)
        widths, _, _ = stack_table(edges, draw.thickness, draw.mixing, draw.compositions,
                                   self.substrate)
        # the areal density above each edge; the auxiliary depth of each requested depth by
        # interpolation between edges (the atom density is smooth between them), then the
        # exact composition there
        above = np.concatenate([[0.0], np.cumsum(widths)])
        keep = np.concatenate([[True], np.diff(above) > 0])
        z = np.interp(depth, above[keep], edges[keep])
        fractions, _ = point_composition(z, draw.thickness, draw.mixing, draw.compositions,
                                         self.substrate)
        fractions[depth > above[-1]] = 0.0
        return fractions


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
        self.counts = np.asarray(counts, dtype=np.float64)
        # counts that are not whole numbers are accepted (the reader warned, naming the file);
        # the Poisson likelihood below is defined for them through ln Gamma(k + 1)
        if self.counts.ndim != 1 or not np.all(np.isfinite(self.counts)) or np.any(
                self.counts < 0):
            raise InputError("counts must be one row of finite, non-negative numbers",
                             where="spectrum")
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
        for key in ("_profiles", "_whole", "_prior_sum", "_window_rows", "_no_background"):
            state.pop(key, None)
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._profiles = _Profiles(self.spec, self.n_interfaces, self.substrate)
        self._window_arrays()

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
        self._profiles = _Profiles(spec, self.n_interfaces, self.substrate)
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
        self._window_arrays()

    def _window_arrays(self):
        """What :meth:`predict` uses on every call: the window channels of a full spectrum (one
        slice when they are contiguous, a view rather than a gathered copy; else their
        indices) and the zero background."""
        lo, hi = int(self.channels[0]), int(self.channels[-1])
        contiguous = self.channels.size == hi - lo + 1
        self._window_rows = slice(lo, hi + 1) if contiguous else self.channels
        self._no_background = np.zeros(self.channels.size)
        self._no_background.flags.writeable = False

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
        if isinstance(model, forward.ForwardModel):
            # leave out the substrate's deep tail below the films' signals (fit/_window.py)
            lo = max(lo, film_floor_channel(model.run))
        hi = int(above[-1]) + 5 * fwhm_channels
        lo, hi = max(lo, 0), min(hi, n - 1)
        if lo > hi:
            raise InputError("empty channel window after the margins; give fit.windows",
                             where=f"{self.spec.source}: fit.windows")
        mask[lo:hi + 1] = True
        return mask

    def fwhm_channels(self) -> int:
        """The run file's detector resolution in channels (at least 1)."""
        nu = self.default_nuisance
        energy = np.asarray(self.model.channel_energy_keV(nu))
        kev_per_channel = abs(float(np.median(np.diff(energy)))) if energy.size > 1 else 1.0
        return max(1, int(math.ceil(float(nu.fwhm_keV) / kev_per_channel)))

    # ----- parameters to model inputs -----
    def _draw(self, theta) -> _Draw | None:
        """Free parameters to profile parameters, nuisance and background levels; None
        outside the physical limits."""
        index = self.spec.index
        theta = np.asarray(theta, dtype=float)
        if theta.ndim == 1:
            if index.outside(theta.tolist()):
                return None
        else:
            for role, (pos, _) in index.slots:
                if role.outside(theta[pos]):
                    return None
        thickness = self.base_thickness.copy()
        mixing = np.zeros(self.n_interfaces)
        compositions = self.base_compositions
        node_params = np.empty(0)
        background = np.zeros(2)
        default = self.default_nuisance
        fields = {name: np.array(getattr(default, name), dtype=float, copy=True)
                  for name in _PER_ELEMENT_FIELDS}
        for role, (pos, target) in index.slots:
            if role is Role.AREAL_DENSITY:
                thickness[target] = theta[pos]
            elif role is Role.MIXING:
                mixing[target] = theta[pos]
            elif role is Role.SHARE:
                compositions = self._shared(theta, pos, target)
            elif role is Role.NODE:
                node_params = np.empty(pos.size)
                node_params[target] = theta[pos]
            elif role is Role.BACKGROUND:
                background[target] = theta[pos]
            elif role.per_element:
                fields[role.field][target] = theta[pos]
            else:
                fields[role.field] = theta[pos[0]]
        # dataclasses.replace(default, **fields), without its per-call look-up of the fields
        values = {name: getattr(default, name) for name in _init_fields(type(default))}
        values.update(fields)
        nuisance = type(default)(**values)
        return _Draw(thickness, mixing, compositions, node_params, nuisance, background)

    def _shared(self, theta, positions, targets):
        comps = self.base_compositions.copy()
        for layer, columns in self.spec.share_species.items():
            comps[layer] = 0.0
            comps[layer, columns] = stick_breaking(theta[positions[targets == layer]])
        return comps

    def _window_background(self, draw: _Draw) -> np.ndarray:
        """Background counts per window channel."""
        kind = self.spec.background
        levels = draw.background
        if kind == "flat":
            return np.full(self.channels.size, levels[0])
        if kind == "linear":
            return levels[0] + (levels[1] - levels[0]) * self._bg_ramp
        return self._no_background

    def unpack(self, theta):
        """What one parameter vector sets: ``thickness``, ``mixing``, ``compositions``,
        ``node_params``, ``nuisance`` and the ``background`` levels; None outside the physical
        limits."""
        return self._draw(theta)

    def slice_table(self, theta):
        """``(widths_1e15, fractions, nuisance)`` of one draw on the fit's own model; None
        outside the physical limits.  ``widths_1e15`` is each slice's areal density, from the
        surface down, ``fractions`` its atom fractions ``(n_slices, n_species)``."""
        draw = self._draw(theta)
        if draw is None:
            return None
        widths, fractions = self._profiles.table(self.model, draw)
        return widths, fractions, draw.nuisance

    def compositions(self, theta):
        """Layer compositions (n_layers, n_species) for this draw (free shares applied)."""
        theta = np.asarray(theta, dtype=float)
        slots = self.spec.index.get(Role.SHARE)
        if slots is None:
            return self.base_compositions.copy()
        return self._shared(theta, *slots)

    def profile(self, theta, depth_1e15):
        """Atom fractions ``(n, n_species)`` of one draw at depths in 1e15 atoms/cm2 (the layer
        model's continuous profile, the node model's interpolated nodes)."""
        draw = self._draw(theta)
        if draw is None:
            raise ValueError("parameters outside their physical limits")
        return self._profiles.points(self.model, draw, depth_1e15)

    # ----- predictions -----
    def _whole_range(self):
        """The model computing every channel: the fit's own model, or, when that one skips
        the channels below the fit window, a second model of the same run."""
        if not (getattr(self.model, "first_channel", 0)
                and hasattr(self.build_model, "full_range")):
            return self.model
        whole = self.__dict__.get("_whole")
        if whole is None:
            whole = self._whole = self.build_model.full_range()()
        return whole

    def predict(self, theta, channels=None, *, per_species=False):
        """Expected counts for one parameter vector.

        Parameters
        ----------
        theta : array_like
            The free parameters.
        channels : None, "all" or array of int
            None: the likelihood's window channels; ``"all"``: every channel from 0; or the
            channels listed.
        per_species : bool
            One row per species (model counts only, no background).

        Returns
        -------
        numpy.ndarray or None
            ``(n,)`` counts (model, clipped at zero, plus background), or ``(n_species, n)``;
            None outside the physical limits.
        """
        draw = self._draw(theta)
        if draw is None:
            return None
        if channels is None:
            model = self.model
            rows = self.mask
        else:
            model = self._whole_range()
            rows = slice(None) if isinstance(channels, str) and channels == "all" else \
                np.asarray(channels, dtype=int)
        widths, fractions = self._profiles.table(model, draw)
        if per_species:
            parts = np.asarray(model.expected_counts(fractions, draw.nuisance,
                                                     widths_1e15=widths, per_species=True),
                               dtype=float)
            return np.maximum(parts, 0.0)[:, rows]
        mu = np.asarray(model.expected_counts(fractions, draw.nuisance, widths_1e15=widths))
        if channels is None:
            # the kernel's channel integrals are differences of large numbers: clip the
            # round-off (|mu| ~ 1e-12 counts) below zero, which no Poisson mean can be
            return np.maximum(mu[self._window_rows], 0.0) + self._window_background(draw)
        mu = np.maximum(mu.astype(float), 0.0)
        mu[self.mask] += self._window_background(draw)
        return mu[rows]

    def expected(self, theta, *, per_species=False):
        """Expected counts in the window channels for ``theta`` (None outside the limits);
        see :meth:`predict`."""
        return self.predict(theta, per_species=per_species)

    def channel_energy_keV(self, theta) -> np.ndarray:
        """Channel-centre energies (keV) at this draw's calibration."""
        draw = self._draw(theta)
        return np.asarray(self.model.channel_energy_keV(draw.nuisance))

    # ----- the three log densities -----
    def log_prior(self, theta) -> float:
        """Sum of the parameters' log prior densities (-inf outside any support)."""
        return _PriorSum.of(self)(theta)

    def log_likelihood(self, theta) -> float:
        """Poisson log-likelihood of the counts in the window (zeros included).

        ``sum_i [k_i ln(mu_i) - mu_i - ln(k_i!)]`` over the window channels.
        """
        if not self.use_likelihood:
            return 0.0
        mu = self.predict(theta)
        # min >= 0 is False for NaN and anything below zero, max < inf catches +inf
        if mu is None or not (mu.min() >= 0.0 and mu.max() < math.inf):
            return -np.inf
        value = float(np.sum(xlogy(self._k, mu) - mu)) - self._log_k_factorial
        return value if math.isfinite(value) else -np.inf

    def log_posterior(self, theta) -> float:
        """log_prior + log_likelihood; -inf before the model runs when outside the prior."""
        lp = self.log_prior(theta)
        if not math.isfinite(lp):
            return -np.inf
        return lp + self.log_likelihood(theta)

    __call__ = log_posterior

    # ----- derived quantities, one draw at a time (inversion.fit._derived) -----
    def derived_names(self):
        """Names, units and notes of the derived quantities (see :meth:`derived`)."""
        return _derived.derived_names(self)

    def derived(self, theta):
        """Derived quantities for one draw, in the order of :meth:`derived_names`."""
        return _derived.derived_values(self, theta)

    def node_fractions(self, theta):
        """The node profile's fraction table on the model's grid (free-form profile only)."""
        slots = self.spec.index[Role.NODE]
        params = np.empty(slots[0].size)
        params[slots[1]] = np.asarray(theta, dtype=float)[slots[0]]
        return self._profiles.nodes(self.model).fractions(params)
