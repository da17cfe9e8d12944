"""Convergence across walker groups (rank-normalised split R-hat) and the posterior predictive
check, on draws whose truth is known by construction."""

from __future__ import annotations

import numpy as np
import pytest

from inversion.fit._predictive import poisson_deviance, predictive_check
from inversion.sample._rhat import RHAT_LIMIT, rank_normalised_split_rhat, split_rhat

__all__: list[str] = []


# ----------------------------------------------------------------------------------------------
# R-hat
def test_classic_split_rhat_matches_its_large_sample_limit():
    # Gelman & Rubin (1992): var+ / W -> 1 + var(chain means) / W for long chains.  Half the
    # chains N(0, 1), half N(delta, 1): the chain means' sample variance (ddof 1) over m chains is
    # delta^2 / 4 * m / (m - 1), so R -> sqrt(1 + delta^2 m / (4 (m - 1))).
    rng = np.random.default_rng(1)
    n, m, delta = 200_000, 8, 0.6
    x = rng.standard_normal((n, m))
    x[:, m // 2:] += delta
    expected = np.sqrt(1 + delta ** 2 * m / (4 * (m - 1)))
    assert split_rhat(x) == pytest.approx(expected, rel=2e-3)


def test_independent_chains_pass_and_separated_groups_fail():
    rng = np.random.default_rng(2)
    good = rng.standard_normal((4000, 40, 2))
    assert np.all(rank_normalised_split_rhat(good) < RHAT_LIMIT)
    # two groups of walkers stuck in modes 0.5 sd apart in the second parameter only
    bad = good.copy()
    bad[:, 20:, 1] += 0.5
    rhat = rank_normalised_split_rhat(bad)
    assert rhat[0] < RHAT_LIMIT and rhat[1] > 1.02


def test_rank_normalisation_is_invariant_to_monotone_transforms():
    # Vehtari et al. (2021): the rank-normalised R-hat depends on the draws only through their
    # ranks, so it is unchanged by any strictly increasing transform (here exp)
    rng = np.random.default_rng(3)
    x = rng.standard_normal((1000, 6))
    x[:, :3] += 0.2
    assert rank_normalised_split_rhat(np.exp(x)) == pytest.approx(
        float(rank_normalised_split_rhat(x)), rel=1e-12)


def test_folded_rhat_catches_chains_that_differ_only_in_spread():
    # Vehtari et al. (2021), section 4: equal means, different scales go unseen by the bulk
    # R-hat but are caught on the folded draws
    rng = np.random.default_rng(4)
    x = rng.standard_normal((4000, 8))
    x[:, :4] *= 2.0
    from inversion.sample._rhat import _normal_scores, _split
    bulk = split_rhat(_normal_scores(_split(x)))
    assert bulk < RHAT_LIMIT
    assert rank_normalised_split_rhat(x) > 1.05


def test_nonmixing_single_chain_split_detects_a_trend():
    # split R-hat: a chain whose first and second halves differ is not converged
    t = np.linspace(0, 1, 2000)[:, None] * np.ones((1, 4))
    rng = np.random.default_rng(5)
    assert rank_normalised_split_rhat(t + 0.1 * rng.standard_normal(t.shape)) > 1.1


# ----------------------------------------------------------------------------------------------
# predictive check
def _spectrum(n=400, height=2500.0):
    """A smooth invented spectrum: a plateau with an edge and a peak, about 1e6 counts."""
    c = np.arange(n)
    mu = height / (1 + np.exp((c - 300) / 4.0)) + 1.5 * height * np.exp(-0.5 * ((c - 340) / 6) ** 2)
    return mu + 5.0


def test_deviance_is_zero_for_a_perfect_fit_and_grows_with_misfit():
    # D(y, mu) = 0 when mu = y; D > 0 otherwise (Poisson deviance, common practice)
    y = np.array([0.0, 3.0, 10.0])
    assert poisson_deviance(y, np.where(y > 0, y, 1e-300)) == pytest.approx(0.0, abs=1e-9)
    assert poisson_deviance(y, y + 1.0) > 0


def _draws(mu, rng, n=200, spread=0.002):
    """Posterior-like draws: the expected counts scaled by a small random factor."""
    return mu[None, :] * (1 + spread * rng.standard_normal((n, 1)))


def test_correct_model_is_rarely_rejected():
    rng = np.random.default_rng(6)
    mu = _spectrum()
    channels = np.arange(mu.size)
    flagged = 0
    for k in range(40):
        y = rng.poisson(mu)
        check = predictive_check(y, _draws(mu, rng), channels, block_channels=8, seed=k)
        flagged += check.rejected
        assert 0.0 <= check.p_value <= 1.0
    # nominal false-alarm rate about 2 % (two tests at 1 %), conservative in practice
    assert flagged <= 3


def test_a_systematic_misfit_is_flagged_and_located():
    rng = np.random.default_rng(7)
    mu = _spectrum()
    world = mu.copy()
    world[280:300] *= 1.04  # the world has 4 % more counts just below the edge
    y = rng.poisson(world)
    check = predictive_check(y, _draws(mu, rng), np.arange(mu.size), block_channels=8, seed=1)
    assert check.rejected
    assert check.p_value < 0.01
    assert any(first <= 295 and last >= 285 and sign > 0 for first, last, sign in check.ranges)


def test_blocks_never_straddle_a_gap_in_the_window():
    rng = np.random.default_rng(8)
    mu = _spectrum()
    channels = np.concatenate([np.arange(100, 150), np.arange(200, 260)])
    y = rng.poisson(mu[channels])
    check = predictive_check(y, _draws(mu[channels], rng), channels, block_channels=8)
    for first, last in zip(check.block_first, check.block_last):
        assert (last < 150) or (first >= 200)


def test_between_group_rhat_passes_mixed_groups_and_names_the_stuck_parameter():
    from inversion.sample._rhat import between_group_rhat

    rng = np.random.default_rng(9)
    # an AR(1) chain per walker (autocorrelation time about 19 steps), two groups of 20
    steps, walkers = 3000, 40
    x = np.zeros((steps, walkers, 2))
    for t in range(1, steps):
        x[t] = 0.9 * x[t - 1] + np.sqrt(1 - 0.81) * rng.standard_normal((walkers, 2))
    assert np.all(between_group_rhat(x[300:], 2) < RHAT_LIMIT)
    # the second group found another mode, 0.3 sd away, in the first parameter only
    y = x.copy()
    y[:, 20:, 0] += 0.3
    rhat = between_group_rhat(y[300:], 2)
    assert rhat[0] > RHAT_LIMIT and rhat[1] < RHAT_LIMIT
