"""The objective: Poisson likelihood, prior gate, window, pickling.

The module also holds :class:`ToyModel`, a small stand-in with the forward model's interface
(species, grid, layer_fractions, default_nuisance, expected_counts, channel_energy_keV) that the
sampler and store tests use where the physics does not matter.  It is a smooth toy: every slice
adds a Gaussian peak per species at an energy that falls linearly with depth.  It checks the
plumbing, never the physics.
"""

from __future__ import annotations

import dataclasses
import pickle
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats
from scipy.special import ndtr

from forward import InputError
from inversion._fitspec import parse_fit
from inversion._objective import Objective


@dataclasses.dataclass
class ToyNuisance:
    fluence_scale: float = 1.0
    gain_keV: float = 8.0
    offset_keV: float = 40.0
    quadratic_keV: float = 0.0
    fwhm_keV: float = 20.0
    stopping_scale: np.ndarray = dataclasses.field(default_factory=lambda: np.ones(2))


class ToyModel:
    """Two species ("Ge" heavy, "Si" light) on 40e15-atoms/cm2 slices; 150 channels."""

    species = ("Ge", "Si")
    elements = ("Ge", "Si")
    species_element = np.array([0, 1])
    surface_keV = np.array([1150.0, 800.0])    # invented surface energies
    loss_keV_per_1e15 = 0.25                      # invented energy loss per depth
    yield_per_1e15 = np.array([3.0, 0.8])         # invented counts per 1e15 atoms/cm2

    def __init__(self, run, n_channels=150, slice_1e15=40.0, depth_1e15=2000.0):
        self.run = run
        self.n_channels = n_channels
        edges = np.arange(0.0, depth_1e15 + slice_1e15 / 2, slice_1e15)
        self.grid = SimpleNamespace(edges_1e15=edges, centres_1e15=0.5 * (edges[1:] + edges[:-1]),
                                    widths_1e15=np.diff(edges))
        self.calls = 0

    def default_nuisance(self):
        return ToyNuisance()

    def channel_energy_keV(self, nuisance=None):
        nu = nuisance or self.default_nuisance()
        ch = np.arange(self.n_channels)
        return nu.offset_keV + nu.gain_keV * ch + nu.quadratic_keV * ch ** 2

    def layer_fractions(self):
        out = np.zeros((self.grid.centres_1e15.size, 2))
        top = 0.0
        for layer in self.run.layers:
            comp = np.array([layer.fractions.get(s, 0.0) for s in self.species])
            bottom = np.inf if layer.substrate else top + layer.areal_density_1e15
            inside = (self.grid.centres_1e15 >= top) & (self.grid.centres_1e15 < bottom)
            out[inside] = comp
            top = bottom
        return out

    def expected_counts(self, fractions, nuisance=None, *, per_species=False):
        self.calls += 1
        nu = nuisance or self.default_nuisance()
        scale = np.asarray(nu.stopping_scale)[self.species_element]
        z = self.grid.centres_1e15
        energy = self.surface_keV[None, :] - self.loss_keV_per_1e15 * scale[None, :] * z[:, None]
        amount = fractions * self.grid.widths_1e15[:, None] * self.yield_per_1e15[None, :]
        edges = nu.offset_keV + nu.gain_keV * (np.arange(self.n_channels + 1) - 0.5)
        sigma = nu.fwhm_keV / 2.3548200450309493
        cdf = ndtr((edges[None, None, :] - energy[:, :, None]) / sigma)
        per = nu.fluence_scale * np.einsum("ij,ijc->jc", amount, np.diff(cdf, axis=2))
        return per.T.copy() if per_species else per.sum(axis=0)


def toy_run(fit=None, *, film_1e15=300.0, substrate=True):
    layers = [SimpleNamespace(name="film", fractions={"Ge": 0.6, "Si": 0.4},
                              areal_density_1e15=film_1e15, substrate=False, density_g_cm3=None,
                              atoms_per_cm3=4.5e22)]
    if substrate:
        layers.append(SimpleNamespace(name="base", fractions={"Si": 1.0}, areal_density_1e15=None,
                                      substrate=True, density_g_cm3=None, atoms_per_cm3=5.0e22))
    return SimpleNamespace(layers=layers, fit=fit or {}, text=f"invented toy run {fit!r}",
                           source="toy.toml")


class ToyBuilder:
    """Picklable ``build_model()`` for the toy (what workers call)."""

    def __init__(self, run):
        self.run = run

    def __call__(self):
        return ToyModel(self.run)


def toy_objective(fit, counts=None, *, likelihood=True, seed=3, **run_kw):
    run = toy_run(fit, **run_kw)
    model = ToyModel(run)
    spec = parse_fit(run.fit, run, model)
    if counts is None:
        rng = np.random.default_rng(seed)
        counts = rng.poisson(model.expected_counts(model.layer_fractions()))
    return Objective(spec, counts, ToyBuilder(run), model, likelihood=likelihood)


FIT = {"free": {"film.areal_density": {"uniform": [100, 600]},
                "film.mixing": {"halfnormal": 30}}, "fixed": ["stopping"]}


def test_log_likelihood_equals_scipy_poisson_sum():
    obj = toy_objective(FIT)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    assert obj.names == ["film.areal_density", "film.mixing", "fluence_scale", "gain_keV",
                         "offset_keV", "fwhm_keV"]
    mu = obj.expected(theta)
    k = obj.counts[obj.mask]
    # zero counts, and zero expectation above the surface edge, are part of the sum
    assert np.any(k == 0) and np.any(mu == 0) and np.all(mu >= 0)
    # reference: scipy.stats.poisson.logpmf (reference library); logpmf(0; mu=0) = 0
    ref = stats.poisson.logpmf(k, mu).sum()
    assert np.isfinite(ref)
    assert obj.log_likelihood(theta) == pytest.approx(ref, rel=1e-12, abs=1e-9)


def test_log_posterior_is_prior_plus_likelihood_and_gated_by_prior():
    obj = toy_objective(FIT)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    lp = sum(p.prior.dist.logpdf(v) for p, v in zip(obj.spec.parameters, theta))
    assert obj.log_prior(theta) == pytest.approx(lp, rel=1e-12)
    assert obj.log_posterior(theta) == pytest.approx(lp + obj.log_likelihood(theta), rel=1e-12)
    calls = obj.model.calls
    outside = theta.copy()
    outside[0] = 700.0  # above the uniform prior's upper bound
    assert obj.log_posterior(outside) == -np.inf
    assert obj.model.calls == calls  # the model never ran


def test_likelihood_switch_off_gives_prior():
    obj = toy_objective(FIT, likelihood=False)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    assert obj.log_posterior(theta) == pytest.approx(obj.log_prior(theta), rel=1e-12)


def test_pickles_without_the_model_and_rebuilds_it():
    obj = toy_objective(FIT)
    blob = pickle.dumps(obj)
    # the counts (300 float64) and the spec dominate; no model inside
    assert b"ToyModel" not in blob
    assert len(blob) < 60_000
    again = pickle.loads(blob)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    assert again.log_posterior(theta) == obj.log_posterior(theta)


def test_default_window_covers_expected_counts_plus_margin():
    obj = toy_objective(FIT)
    model = obj.model
    expected = model.expected_counts(model.layer_fractions())
    above = np.flatnonzero(expected > obj.spec.count_threshold)
    fwhm_ch = int(np.ceil(20.0 / 8.0))
    # upper end: the highest channel above threshold plus 5 FWHM (README.md, "The [fit] table")
    assert obj.channels[-1] == min(above[-1] + 5 * fwhm_ch, 149)
    # lower end: clear of the grid's depth limit by 3 FWHM (a substrate is present)
    assert obj.channels[0] == above[0] + 3 * fwhm_ch
    assert np.all(np.diff(obj.channels) == 1)


def test_user_windows_and_unmeasured_channels():
    fit = dict(FIT, windows=[[50, 80], [100, 130]])
    obj = toy_objective(fit)
    assert obj.channels.tolist() == list(range(50, 81)) + list(range(100, 131))


def test_flat_background_adds_counts():
    fit = dict(FIT, background="flat")
    obj = toy_objective(fit)
    assert obj.names[-1] == "background.level"
    theta = np.array([320.0, 12.0, 1.0, 8.0, 40.0, 20.0, 0.0])
    with_bg = theta.copy()
    with_bg[-1] = 2.5
    assert np.allclose(obj.expected(with_bg) - obj.expected(theta), 2.5)


def test_negative_background_is_outside_the_physical_limits():
    fit = dict(FIT, background="linear", free=dict(FIT["free"], **{
        "background.low": {"normal": [0.0, 1.0]}}))
    obj = toy_objective(fit)
    theta = np.array([320.0, 12.0, 1.0, 8.0, 40.0, 20.0, -0.5, 1.0])
    assert obj.unpack(theta) is None
    assert obj.log_posterior(theta) == -np.inf


def test_node_profile_parameters_and_random_walk_prior():
    fit = {"profile": "nodes", "nodes": {"count": 6, "depth_1e15": 480.0, "step_sd": 0.4},
           "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV"]}
    obj = toy_objective(fit)
    assert obj.names[:6] == ["nodes.Ge.logratio0"] + [f"nodes.Ge.step{k}" for k in range(1, 6)]
    assert obj.names[6:] == ["fluence_scale"]
    theta = np.array([0.4, -0.2, 0.1, -1.0, -2.0, -0.5, 1.0])
    # the smoothness prior is a Gaussian random walk: start normal(0, 3), steps normal(0, 0.4)
    # (scipy.stats.norm, reference library)
    ref = stats.norm(0, 3.0).logpdf(0.4) + stats.norm(0, 0.4).logpdf(theta[1:6]).sum() \
        + stats.norm(1.0, 0.05).logpdf(1.0)
    assert obj.log_prior(theta) == pytest.approx(ref, rel=1e-12)
    fr = obj.profile(theta)
    assert np.allclose(fr.sum(axis=1), 1.0)  # a substrate: the deepest node holds below
    y = np.cumsum(theta[:6])
    assert np.log(fr[0, 0] / fr[0, 1]) == pytest.approx(np.interp(20.0, np.linspace(0, 480, 6), y))
    totals = obj.derived(theta)  # total.Ge, total.Si above the deepest node
    assert totals.sum() == pytest.approx(480.0)
    assert np.isfinite(obj.log_posterior(theta))
