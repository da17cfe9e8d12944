"""The objective: Poisson likelihood, prior gate, window, pickling, parameter roles, and the
one prediction method (on the stand-in model of the ``toy`` fixture, tests/conftest.py)."""

from __future__ import annotations

import pickle

import numpy as np
import pytest
from scipy import stats

from inversion import Role

FIT = {"free": {"film.areal_density": {"uniform": [100, 600]},
                "film.mixing": {"halfnormal": 30}}, "fixed": ["stopping", "straggling"]}


def test_log_likelihood_equals_scipy_poisson_sum(toy):
    obj = toy.objective(FIT)
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


def test_log_posterior_is_prior_plus_likelihood_and_gated_by_prior(toy):
    obj = toy.objective(FIT)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    lp = sum(p.prior.dist.logpdf(v) for p, v in zip(obj.spec.parameters, theta))
    assert obj.log_prior(theta) == pytest.approx(lp, rel=1e-12)
    assert obj.log_posterior(theta) == pytest.approx(lp + obj.log_likelihood(theta), rel=1e-12)
    calls = obj.model.calls
    outside = theta.copy()
    outside[0] = 700.0  # above the uniform prior's upper bound
    assert obj.log_posterior(outside) == -np.inf
    assert obj.model.calls == calls  # the model never ran


def test_likelihood_switch_off_gives_prior(toy):
    obj = toy.objective(FIT, likelihood=False)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    assert obj.log_posterior(theta) == pytest.approx(obj.log_prior(theta), rel=1e-12)


def test_pickles_without_the_model_and_rebuilds_it(toy):
    obj = toy.objective(FIT)
    blob = pickle.dumps(obj)
    # the counts (300 float64) and the spec dominate; no model inside
    assert b"ToyModel" not in blob
    assert len(blob) < 60_000
    again = pickle.loads(blob)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0])
    assert again.log_posterior(theta) == obj.log_posterior(theta)


def test_default_window_covers_expected_counts_plus_margin(toy):
    obj = toy.objective(FIT)
    model = obj.model
    expected = model.expected_counts(model.layer_fractions())
    above = np.flatnonzero(expected > obj.spec.count_threshold)
    fwhm_ch = int(np.ceil(20.0 / 8.0))
    # upper end: the highest channel above threshold plus 5 FWHM (README.md, "The [fit] table")
    assert obj.channels[-1] == min(above[-1] + 5 * fwhm_ch, 149)
    # lower end: clear of the grid's depth limit by 3 FWHM (a substrate is present)
    assert obj.channels[0] == above[0] + 3 * fwhm_ch
    assert np.all(np.diff(obj.channels) == 1)


def test_user_windows_and_unmeasured_channels(toy):
    fit = dict(FIT, windows=[[50, 80], [100, 130]])
    obj = toy.objective(fit)
    assert obj.channels.tolist() == list(range(50, 81)) + list(range(100, 131))


def test_flat_background_adds_counts(toy):
    fit = dict(FIT, background="flat")
    obj = toy.objective(fit)
    assert obj.names[-1] == "background.level"
    theta = np.array([320.0, 12.0, 1.0, 8.0, 40.0, 20.0, 0.0])
    with_bg = theta.copy()
    with_bg[-1] = 2.5
    assert np.allclose(obj.expected(with_bg) - obj.expected(theta), 2.5)


def test_negative_background_is_outside_the_physical_limits(toy):
    fit = dict(FIT, background="linear", free=dict(FIT["free"], **{
        "background.low": {"normal": [0.0, 1.0]}}))
    obj = toy.objective(fit)
    theta = np.array([320.0, 12.0, 1.0, 8.0, 40.0, 20.0, -0.5, 1.0])
    assert obj.unpack(theta) is None and obj.slice_table(theta) is None
    assert obj.log_posterior(theta) == -np.inf


def test_node_profile_parameters_and_random_walk_prior(toy):
    fit = {"profile": "nodes", "nodes": {"count": 6, "depth_1e15": 480.0, "step_sd": 0.4},
           "fixed": ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "straggling"]}
    obj = toy.objective(fit)
    assert obj.names[:6] == ["nodes.Ge.logratio0"] + [f"nodes.Ge.step{k}" for k in range(1, 6)]
    assert obj.names[6:] == ["fluence_scale"]
    theta = np.array([0.4, -0.2, 0.1, -1.0, -2.0, -0.5, 1.0])
    # the smoothness prior is a Gaussian random walk: start normal(0, 3), steps normal(0, 0.4)
    # (scipy.stats.norm, reference library)
    ref = stats.norm(0, 3.0).logpdf(0.4) + stats.norm(0, 0.4).logpdf(theta[1:6]).sum() \
        + stats.norm(1.0, 0.05).logpdf(1.0)
    assert obj.log_prior(theta) == pytest.approx(ref, rel=1e-12)
    fr = obj.node_fractions(theta)
    assert np.allclose(fr.sum(axis=1), 1.0)  # a substrate: the deepest node holds below
    y = np.cumsum(theta[:6])
    # the profile passes through the nodes' log-ratios; between them the fractions are linear
    # in depth, so a slice inside one node interval holds the fractions at its centre
    nodes = np.linspace(0, 480, 6)
    at = obj.profile(theta, nodes)
    assert np.log(at[:, 0] / at[:, 1]) == pytest.approx(y)
    centre = 0.5 * (obj.edges_1e15[0] + obj.edges_1e15[1])
    assert obj.edges_1e15[1] <= nodes[1]
    assert fr[0] == pytest.approx(obj.profile(theta, [centre])[0], rel=1e-12)
    totals = obj.derived(theta)  # total.Ge, total.Si above the deepest node
    assert totals.sum() == pytest.approx(480.0)
    assert np.isfinite(obj.log_posterior(theta))


def test_roles_carry_positions_and_targets(toy):
    fit = {"free": {"film.areal_density": {"uniform": [100, 600]},
                    "film.mixing": {"halfnormal": 30}, "film.composition": True},
           "fixed": ["gain_keV"], "background": "linear"}
    obj = toy.objective(fit)
    spec = obj.spec
    assert [p.role for p in spec.parameters] == [
        Role.AREAL_DENSITY, Role.MIXING, Role.SHARE, Role.FLUENCE_SCALE, Role.OFFSET,
        Role.FWHM, Role.STOPPING, Role.STOPPING, Role.STRAGGLING, Role.SLOPE, Role.SLOPE,
        Role.STRAGGLING_CORRECTION, Role.BACKGROUND, Role.BACKGROUND]
    positions, targets = spec.index[Role.STOPPING]
    assert positions.tolist() == [6, 7] and targets.tolist() == [0, 1]  # Ge, Si
    assert spec.index[Role.SLOPE][0].tolist() == [9, 10]
    assert spec.index[Role.BACKGROUND][1].tolist() == [0, 1]  # low end, high end
    assert Role.GAIN not in spec.index
    theta = np.array([320.0, 12.0, 0.6, 1.0, 40.0, 20.0, 1.02, 0.97, 1.1, 0.01, -0.02, 0.4,
                      0.5, 1.5])
    draw = obj.unpack(theta)
    nuisance = draw.nuisance
    assert nuisance.stopping_scale.tolist() == [1.02, 0.97]
    assert nuisance.straggling_scale == 1.1 and nuisance.stopping_slope.tolist() == [0.01, -0.02]
    assert nuisance.straggling_correction == 0.4
    assert nuisance.offset_keV == 40.0 and nuisance.gain_keV == 8.0  # gain stays fixed
    assert draw.background.tolist() == [0.5, 1.5]
    # physical limits, role by role: a share must lie inside (0, 1), a scale above 0; a slope
    # may take any sign
    for i, bad in ((0, -1.0), (1, -0.1), (2, 1.0), (2, 0.0), (3, 0.0), (5, -2.0), (7, 0.0),
                   (7, 0.1), (7, 6.0), (8, 0.0), (9, 0.6), (10, -0.5), (11, -2.0), (11, 3.0),
                   (12, -0.5)):
        outside = theta.copy()
        outside[i] = bad
        assert obj.unpack(outside) is None, (obj.names[i], bad)
    negative_offset = theta.copy()
    negative_offset[4] = -3.0  # an offset may be negative
    negative_offset[9] = -0.3  # and a slope (inside its limits, -0.5 to 0.5)
    assert obj.unpack(negative_offset) is not None


def test_role_index_limits_are_each_roles_limits(toy):
    # RoleIndex.outside tests the whole parameter vector at once, on plain floats; each
    # role's own Role.outside is the rule it must follow, at, just beyond and just inside every
    # limit, and for NaN and infinities
    fit = {"free": {"film.areal_density": {"uniform": [100, 600]},
                    "film.mixing": {"halfnormal": 30}, "film.composition": True},
           "fixed": ["gain_keV"], "background": "linear"}
    index = toy.objective(fit).spec.index
    theta = np.array([320.0, 12.0, 0.6, 1.0, 40.0, 20.0, 1.02, 0.97, 1.1, 0.01, -0.02, 0.4,
                      0.5, 1.5])
    special = [np.nan, np.inf, -np.inf, 0.0, -0.0, 1e-300, -1e-300]
    checked = 0
    for role, (positions, _) in index.slots:
        limits = [v for v in (role.lower, role.upper) if v is not None]
        values = special + [np.nextafter(v, d) for v in limits for d in (-np.inf, np.inf)]
        for i in positions:
            for value in values + limits:
                x = theta.copy()
                x[i] = value
                expected = any(r.outside(x[p]) for r, (p, _) in index.slots)
                assert index.outside(x.tolist()) == expected, (role, value)
                checked += expected
    assert checked > 20  # the limits were reached, not only passed


def test_one_prediction_method_for_every_channel_range(toy):
    fit = dict(FIT, background="flat", windows=[[50, 80], [100, 130]])
    obj = toy.objective(fit)
    theta = np.array([320.0, 12.0, 1.01, 8.01, 39.0, 19.0, 2.5])
    window = obj.predict(theta)
    every = obj.predict(theta, "all")
    assert every.shape == (150,) and window.shape == (obj.channels.size,)
    assert np.array_equal(every[obj.mask], window)
    assert np.array_equal(obj.predict(theta, obj.channels), window)
    assert np.array_equal(obj.expected(theta), window)
    # the background is counted in the window only; outside it the model alone
    parts = obj.predict(theta, "all", per_species=True)
    assert parts.shape == (2, 150)
    outside = ~obj.mask
    np.testing.assert_allclose(every[outside], parts.sum(axis=0)[outside], rtol=1e-12)
    np.testing.assert_allclose(every[obj.mask], parts.sum(axis=0)[obj.mask] + 2.5, rtol=1e-12)
    theta[0] = -5.0
    assert obj.predict(theta, "all") is None
