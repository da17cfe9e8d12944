"""Priors from the [fit] table: scipy distributions, bounds, and prior-only sampling."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from forward import InputError
from inversion._priors import make_prior, parse_prior


def test_each_kind_is_the_scipy_distribution():
    # reference: scipy.stats (reference library)
    x = np.array([0.3, 1.0, 2.5])
    assert np.allclose(parse_prior({"uniform": [0.2, 3.0]}).dist.logpdf(x),
                       stats.uniform(0.2, 2.8).logpdf(x))
    assert np.allclose(parse_prior({"normal": [1.0, 0.05]}).dist.logpdf(x),
                       stats.norm(1.0, 0.05).logpdf(x))
    assert np.allclose(parse_prior({"lognormal": [1.5, 0.4]}).dist.logpdf(x),
                       stats.lognorm(0.4, scale=1.5).logpdf(x))
    assert np.allclose(parse_prior({"halfnormal": 2.0}).dist.logpdf(x),
                       stats.halfnorm(scale=2.0).logpdf(x))


@pytest.mark.parametrize("value", [{"uniform": [0.2, 3.0]}, {"normal": [1.0, 0.05]},
                                   {"lognormal": [1.5, 0.4]}, {"halfnormal": 2.0},
                                   {"beta": [2.0, 3.5]}])
def test_closed_form_logpdf_equals_scipy(value):
    # reference: the frozen scipy.stats distribution's logpdf (reference library)
    p = parse_prior(value)
    for x in (-0.5, 0.0, 0.05, 0.3, 0.99, 1.0, 1.04, 2.5, 3.0, 7.0):
        ref = float(p.dist.logpdf(x))
        got = p.logpdf(x)
        if np.isfinite(ref):
            assert got == pytest.approx(ref, rel=1e-12, abs=1e-12)
        else:
            assert got == -np.inf


def test_lognormal_is_set_by_its_median_and_log_sigma():
    p = make_prior("lognormal", 20.0, 0.5)
    assert p.dist.ppf(0.5) == pytest.approx(20.0)
    # log of a lognormal draw is normal(ln median, sigma) (common practice)
    logs = np.log(p.dist.rvs(20000, random_state=np.random.default_rng(1)))
    assert stats.kstest(logs, stats.norm(np.log(20.0), 0.5).cdf).pvalue > 0.01


def test_bounds_use_support_or_tails():
    assert make_prior("uniform", 2.0, 5.0).bounds() == (2.0, 5.0)
    lo, hi = make_prior("normal", 0.0, 1.0).bounds()
    # normal 0.1 % and 99.9 % points, +-3.0902 (scipy.stats.norm.ppf, reference library)
    assert (lo, hi) == pytest.approx((stats.norm.ppf(0.001), stats.norm.ppf(0.999)))
    lo, hi = make_prior("halfnormal", 3.0).bounds()
    assert lo == 0.0 and hi == pytest.approx(stats.halfnorm(scale=3.0).ppf(0.999))


def test_describe_is_short_text():
    assert make_prior("normal", 1.0, 0.05).describe() == "normal(1, 0.05)"


@pytest.mark.parametrize("value, words", [
    ({"uniform": [5, 2]}, "low < high"),
    ({"normal": [1, 0]}, "sd > 0"),
    ({"lognormal": [-1, 0.3]}, "median > 0"),
    ({"halfnormal": [1, 2]}, "1 finite number"),
    ({"cauchy": [0, 1]}, "unknown prior 'cauchy'"),
    ({"uniform": ["a", 3]}, "needs numbers"),
    ([1, 2], "one-key table"),
])
def test_bad_priors_are_input_errors(value, words):
    with pytest.raises(InputError) as err:
        parse_prior(value, where="run.toml: fit.free.film.mixing")
    assert words in str(err.value)
    assert str(err.value).startswith("run.toml: fit.free.film.mixing:")
    assert "\n" not in str(err.value)
