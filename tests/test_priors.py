"""Priors from the [fit] table: their densities against the closed forms, bounds, errors."""

from __future__ import annotations

import math

import numpy as np
import pytest

from forward import InputError
from inversion import make_prior, parse_prior


@pytest.mark.parametrize("value, x, density", [
    # uniform on [a, b]: 1 / (b - a) inside (common practice)
    ({"uniform": [0.2, 3.0]}, 1.0, 1.0 / 2.8),
    # normal(m, s): exp(-(x - m)^2 / (2 s^2)) / (s sqrt(2 pi)) (common practice)
    ({"normal": [1.0, 0.05]}, 1.03, math.exp(-0.5 * 0.6 ** 2) / (0.05 * math.sqrt(2 * math.pi))),
    # lognormal with median M and sigma s of ln x: exp(-(ln x - ln M)^2 / (2 s^2)) /
    # (x s sqrt(2 pi)) (common practice)
    ({"lognormal": [1.5, 0.4]}, 2.5,
     math.exp(-0.5 * (math.log(2.5 / 1.5) / 0.4) ** 2) / (2.5 * 0.4 * math.sqrt(2 * math.pi))),
    # half-normal of scale s: sqrt(2 / pi) exp(-x^2 / (2 s^2)) / s for x >= 0 (common practice)
    ({"halfnormal": 2.0}, 1.0, math.sqrt(2 / math.pi) * math.exp(-0.125) / 2.0),
    # beta(a, b): x^(a-1) (1-x)^(b-1) / B(a, b), B(2, 3.5) = 1! Gamma(3.5) / Gamma(5.5)
    # = 1 / (4.5 x 3.5) by the recursion Gamma(z + 1) = z Gamma(z) (common practice)
    ({"beta": [2.0, 3.5]}, 0.3, 0.3 * 0.7 ** 2.5 * 4.5 * 3.5),
])
def test_each_kind_has_the_closed_form_density(value, x, density):
    p = parse_prior(value)
    assert math.exp(p.logpdf(x)) == pytest.approx(density, rel=1e-12)
    assert float(p.dist.pdf(x)) == pytest.approx(density, rel=1e-12)


@pytest.mark.parametrize("value, outside", [
    ({"uniform": [0.2, 3.0]}, (0.1, 3.1)), ({"lognormal": [1.5, 0.4]}, (0.0, -1.0)),
    ({"halfnormal": 2.0}, (-0.01,)), ({"beta": [2.0, 3.5]}, (0.0, 1.0, 1.2)),
])
def test_outside_the_support_the_log_density_is_minus_infinity(value, outside):
    p = parse_prior(value)
    for x in outside:
        assert p.logpdf(x) == -math.inf


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
    assert p.dist.ppf(0.5) == pytest.approx(20.0, rel=1e-12)
    # ln x of a lognormal is normal(ln median, sigma), so its 84.13 % point (one standard
    # deviation above the median of the log; Phi(1) = 0.841344746, from memory) is
    # median x exp(sigma) (common practice)
    assert p.dist.ppf(0.8413447460685429) == pytest.approx(20.0 * math.exp(0.5), rel=1e-9)


def test_bounds_use_support_or_tails():
    assert make_prior("uniform", 2.0, 5.0).bounds() == (2.0, 5.0)
    lo, hi = make_prior("normal", 0.0, 1.0).bounds()
    # the standard normal's 0.1 % and 99.9 % points are -+3.0902 (from memory; the
    # percentage points printed in statistics tables)
    assert (lo, hi) == pytest.approx((-3.0902, 3.0902), abs=1e-4)
    lo, hi = make_prior("halfnormal", 3.0).bounds()
    # a half-normal's 99.9 % point is the normal's 99.95 % point, 3.2905 (from memory), times
    # the scale
    assert lo == 0.0 and hi == pytest.approx(3.0 * 3.2905, abs=3e-4)


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
