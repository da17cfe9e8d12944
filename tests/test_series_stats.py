"""Diffusion statistics of an annealing series, checked against outside truth.

All series here are invented numbers (no real material is meant): an activation energy of
1.7 eV and D0 = 3e10 nm^2/s, anneals of one hour at 650-750 K, an as-deposited width of 2 nm.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from forward import InputError
from inversion.series._diffusion import (
    BOLTZMANN_eV_PER_K,
    arrhenius_fit,
    compare,
    compare_neighbours,
    diffusion_draws,
    interval,
)

# Invented truth for the synthetic series (not a real material).
EA_TRUE_eV = 1.7
D0_TRUE_NM2_S = 3e10
TIME_S = 3600.0
W0_TRUE_NM = 2.0
TEMPS_K = np.array([650.0, 675.0, 700.0, 725.0, 750.0])


def _synthetic_series(width_sd_nm: float, seed: int, n_draws: int = 4000):
    """D draws per anneal from Gaussian width posteriors around noisy observations of the truth."""
    rng = np.random.default_rng(seed)
    w0_obs = rng.normal(W0_TRUE_NM, width_sd_nm)
    w0_draws = rng.normal(w0_obs, width_sd_nm, n_draws)
    out = []
    for k, t_k in enumerate(TEMPS_K):
        d_true = D0_TRUE_NM2_S * np.exp(-EA_TRUE_eV / (BOLTZMANN_eV_PER_K * t_k))
        # w = sqrt(w0^2 + 2 D t): Crank, The Mathematics of Diffusion (1975), eq. 2.14
        w_true = np.sqrt(W0_TRUE_NM**2 + 2.0 * d_true * TIME_S)
        w_obs = rng.normal(w_true, width_sd_nm)
        w_draws = rng.normal(w_obs, width_sd_nm, n_draws)
        out.append(diffusion_draws(w_draws, w0_draws, TIME_S, seed=seed + k).d_draws)
    return out


def test_boltzmann_constant_from_codata():
    # the CODATA 2018 value, exact since the 2019 SI: 8.617333262e-5 eV/K
    assert BOLTZMANN_eV_PER_K == pytest.approx(8.617333262e-5, rel=1e-9)


def test_diffusion_from_sharp_widths_matches_closed_form():
    # D = (w^2 - w0^2) / (2 t): Crank (1975) eq. 2.14 with Gaussian variances adding
    w = np.full(10, 10.0)
    w0 = np.full(10, 2.0)
    res = diffusion_draws(w, w0, 3600.0)
    np.testing.assert_allclose(res.d_draws, (100.0 - 4.0) / 7200.0, rtol=1e-14)
    assert not res.flagged and res.negative_fraction == 0.0


def test_negative_draws_are_kept_and_flagged():
    # Annealed and as-deposited widths from the same normal: the difference of squares of two
    # independent draws from one distribution has mean 0 and is negative half of the time
    # (symmetry, common practice).
    rng = np.random.default_rng(5)
    w = rng.normal(3.0, 0.2, 50_000)
    w0 = rng.normal(3.0, 0.2, 50_000)
    res = diffusion_draws(w, w0, 100.0, seed=1)
    assert res.d_draws.min() < 0  # not clipped
    assert res.flagged
    n = res.d_draws.size
    assert abs(res.negative_fraction - 0.5) < 4 * np.sqrt(0.25 / n)
    assert np.array_equal(res.negative, res.d_draws < 0)


def test_pairing_is_seeded():
    rng = np.random.default_rng(2)
    w, w0 = rng.normal(5, 0.5, 300), rng.normal(2, 0.3, 200)
    a = diffusion_draws(w, w0, 60.0, seed=7).d_draws
    b = diffusion_draws(w, w0, 60.0, seed=7).d_draws
    c = diffusion_draws(w, w0, 60.0, seed=8).d_draws
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    assert a.size == 300


@pytest.mark.parametrize("bad", [0.0, -5.0, float("nan")])
def test_bad_time_is_an_input_error(bad):
    with pytest.raises(InputError, match="anneal time"):
        diffusion_draws([3.0, 3.1], [2.0, 2.1], bad)


def test_arrhenius_recovers_invented_truth_with_realistic_widths():
    # Width posteriors with 0.3 nm standard deviation (a realistic interface-width precision).
    d_list = _synthetic_series(width_sd_nm=0.3, seed=11)
    fit = arrhenius_fit(TEMPS_K, d_list, seed=3, n_steps=2000)
    ea, ld0 = fit.summary["ea_eV"], fit.summary["ln_d0"]
    assert ea["low95"] < EA_TRUE_eV < ea["high95"]
    assert ld0["low95"] < np.log(D0_TRUE_NM2_S) < ld0["high95"]
    assert fit.diagnostics["steps_over_tau"] > 20
    # The band brackets the true line at every grid temperature.
    truth = np.log(D0_TRUE_NM2_S) - EA_TRUE_eV / (BOLTZMANN_eV_PER_K * fit.temperature_grid_K)
    assert np.all(fit.band_ln_d[0] < truth) and np.all(truth < fit.band_ln_d[-1])
    # Quantile bands are ordered.
    assert np.all(np.diff(fit.band_ln_d, axis=0) >= 0)


def test_arrhenius_with_scatter_recovers_invented_truth():
    d_list = _synthetic_series(width_sd_nm=0.3, seed=12)
    fit = arrhenius_fit(TEMPS_K, d_list, scatter=True, seed=4, n_steps=2000)
    ea = fit.summary["ea_eV"]
    assert ea["low95"] < EA_TRUE_eV < ea["high95"]
    assert fit.scatter_ln is not None and np.all(fit.scatter_ln >= 0)


def test_arrhenius_agrees_with_weighted_least_squares_for_precise_widths():
    # Precise widths (0.02 nm): every ln D posterior is close to normal, so with flat priors the
    # posterior of (Ea, ln D0) is the weighted least-squares likelihood of ln D on 1/kT.
    # Reference: numpy.polyfit (weighted, cov="unscaled") and scipy.stats.linregress.
    d_list = _synthetic_series(width_sd_nm=0.02, seed=13)
    ln_d = [np.log(d) for d in d_list]
    assert all(np.all(d > 0) for d in d_list)
    y = np.array([np.median(x) for x in ln_d])
    sig = np.array([np.std(x) for x in ln_d])
    x = 1.0 / (BOLTZMANN_eV_PER_K * TEMPS_K)
    (slope, icpt), cov = np.polyfit(x, y, 1, w=1.0 / sig, cov="unscaled")
    ea_wls, ea_wls_sd = -slope, np.sqrt(cov[0, 0])
    fit = arrhenius_fit(TEMPS_K, d_list, seed=5, n_steps=2000)
    ea = fit.summary["ea_eV"]
    assert abs(ea["median"] - ea_wls) < 0.25 * ea_wls_sd
    assert ea["sd"] == pytest.approx(ea_wls_sd, rel=0.25)
    assert abs(fit.summary["ln_d0"]["median"] - icpt) < 0.25 * np.sqrt(cov[1, 1])
    # Unweighted cross-check with scipy.stats.linregress: same line within its own error.
    lr = stats.linregress(x, y)
    assert abs(-lr.slope - ea["median"]) < 3 * lr.stderr + 3 * ea["sd"]


def test_arrhenius_input_errors():
    d = [np.array([1.0, 2.0, 3.0])] * 2
    with pytest.raises(InputError, match="distinct temperatures"):
        arrhenius_fit([700.0, 700.0], d)
    with pytest.raises(InputError, match="one temperature per anneal"):
        arrhenius_fit([700.0, 710.0, 720.0], d)
    with pytest.raises(InputError, match="kelvin"):
        arrhenius_fit([700.0, -1.0], d)


def test_compare_two_normals_matches_analytic_probability():
    # For independent normals P(a > b) = Phi((mu_a - mu_b) / sqrt(sa^2 + sb^2)) (common
    # practice; scipy.stats.norm is the reference), and a - b is normal with that spread.
    rng = np.random.default_rng(21)
    mu_a, sa, mu_b, sb = 1.0, 0.5, 0.6, 0.8
    n = 200_000
    c = compare(rng.normal(mu_a, sa, n), rng.normal(mu_b, sb, n), seed=9)
    s = np.hypot(sa, sb)
    p_ref = stats.norm.cdf((mu_a - mu_b) / s)
    assert abs(c.p_a_greater - p_ref) < 4 * c.p_a_greater_mc_error
    lo95, hi95 = stats.norm.ppf([0.025, 0.975], loc=mu_a - mu_b, scale=s)
    assert c.summary["low95"] == pytest.approx(lo95, abs=0.02)
    assert c.summary["high95"] == pytest.approx(hi95, abs=0.02)


def test_compare_neighbours_table():
    rng = np.random.default_rng(3)
    draws = [rng.normal(m, 0.1, 5000) for m in (1.0, 2.0, 1.5)]
    rows = compare_neighbours(["a", "b", "c"], draws)
    assert [(r["a"], r["b"]) for r in rows] == [("b", "a"), ("c", "b")]
    assert rows[0]["p_a_greater"] > 0.999 and rows[1]["p_a_greater"] < 0.001
    assert rows[0]["low95"] < 1.0 < rows[0]["high95"]


def test_interval_is_hyndman_fan_definition_7():
    # Sample quantiles of definition 7 of Hyndman and Fan (1996, Am. Stat. 50, 361): on the
    # sorted values x_1..x_n the p-quantile sits at position 1 + (n - 1) p, interpolated
    # linearly.  For the values 0, 1, ..., 100 (n = 101) that position is 1 + 100 p, so the
    # p-quantile is 100 p exactly; the mean is 50 and the sd (ddof 1) sqrt(101 x 102 / 12)
    # = 29.3002 (the variance of the integers 0..N is (N + 1)(N + 2) / 12 with ddof 1,
    # common practice).
    x = np.random.default_rng(0).permutation(101).astype(float)
    iv = interval(x)
    assert iv["median"] == 50.0
    assert (iv["low68"], iv["high68"]) == pytest.approx((16.0, 84.0), rel=1e-12)
    assert (iv["low95"], iv["high95"]) == pytest.approx((2.5, 97.5), rel=1e-12)
    assert iv["mean"] == pytest.approx(50.0, rel=1e-12)
    assert iv["sd"] == pytest.approx(np.sqrt(101 * 102 / 12), rel=1e-12)
    with pytest.raises(InputError):
        interval([1.0, float("nan")])
