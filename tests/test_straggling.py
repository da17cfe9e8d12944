"""Energy straggling: Bohr's variance, the Lindhard-Scharff correction, and propagation.

Every check names its source.  Closed forms for the propagated variance are derived in the
comments from dVar/dx = -2 (dS/dE)/1000 Var + rate(E) and dE/dx = -S(E)/1000.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest
from hypothesis import assume, given, settings, strategies as st
from scipy import constants

from forward import InputError
from forward._path import energy_after_path
from forward._straggling import (
    _BOHR_SPEED_KEV_PER_U, _E2_KEV_CM, bohr_variance, lindhard_scharff_chi,
    lindhard_scharff_ratio, propagate, straggling_rate,
)

HYPOTHESIS = settings(max_examples=30, deadline=None, derandomize=True)  # seed pinned
M_HE4_U = 4.002602  # 4He atomic mass in u, checked against periodictable below


def _needs_stopping():
    if importlib.util.find_spec("forward._stopping") is None:
        pytest.skip("forward._stopping is not in this checkout yet")
    from forward._stopping import StoppingModel
    return StoppingModel("4He")


def _zero_rate(energy_keV):
    return np.zeros(np.shape(energy_keV))


# ---------------------------------------------------------------------------------------------
# Bohr


def test_coulomb_constant_in_keV_cm():
    # Common practice: e^2/(4 pi eps0) = 1.44 eV nm = 1.44e-10 keV cm (here from
    # scipy.constants CODATA values; compare with the fine-structure constant times hbar c).
    hbar_c_kev_cm = constants.hbar * constants.c / (1e3 * constants.e) * 1e2
    assert _E2_KEV_CM == pytest.approx(constants.fine_structure * hbar_c_kev_cm, rel=1e-12)
    assert _E2_KEV_CM == pytest.approx(1.44e-10, rel=1e-3)


@pytest.mark.parametrize("z1,z2", [(2, 6), (2, 14), (2, 79), (1, 29)])
def test_bohr_variance_rule_of_thumb(z1, z2):
    # Common practice: Omega_B^2 = 0.26 Z1^2 Z2 keV^2 per 1e18 atoms/cm2 (to 1 %).
    assert bohr_variance(z1, z2, 1000.0) == pytest.approx(0.26 * z1 ** 2 * z2, rel=0.01)


def test_bohr_variance_scaling_and_vectorisation():
    # Bohr (1948): linear in areal density and in Z2, quadratic in Z1.
    n = np.array([0.0, 10.0, 2500.0])
    v = bohr_variance(2, 14, n)
    np.testing.assert_allclose(v, n * bohr_variance(2, 14, 1.0), rtol=1e-14)
    assert bohr_variance(2, 28, 7.0) == pytest.approx(2 * bohr_variance(2, 14, 7.0), rel=1e-14)
    assert bohr_variance(4, 14, 7.0) == pytest.approx(4 * bohr_variance(2, 14, 7.0), rel=1e-14)
    with pytest.raises(InputError, match="areal_density_1e15"):
        bohr_variance(2, 14, -1.0)


# ---------------------------------------------------------------------------------------------
# Lindhard-Scharff


def test_chi_scale_from_independent_constants():
    # chi = v^2/(Z2 v0^2): 0.5 m_u (alpha c)^2 equals the Rydberg energy times m_u/m_e
    # (scipy.constants, CODATA), and is about 25 keV per u (the approximation in common use).
    rydberg_kev = constants.physical_constants["Rydberg constant times hc in eV"][0] / 1e3
    mu_over_me = constants.physical_constants["atomic mass constant"][0] / constants.m_e
    assert _BOHR_SPEED_KEV_PER_U == pytest.approx(rydberg_kev * mu_over_me, rel=1e-9)
    assert _BOHR_SPEED_KEV_PER_U == pytest.approx(25.0, rel=0.01)
    assert lindhard_scharff_chi(4.0, 14, 2000.0) == pytest.approx(
        2000.0 / (_BOHR_SPEED_KEV_PER_U * 4.0 * 14), rel=1e-15)


def test_helium_mass_constant_matches_periodictable():
    # Reference library: periodictable's 4He isotope mass.
    import periodictable
    assert periodictable.He[4].mass == pytest.approx(M_HE4_U, rel=1e-6)


def test_lindhard_scharff_ratio_follows_the_published_formula():
    # J. Lindhard and M. Scharff, K. Dan. Vidensk. Selsk. Mat. Fys. Medd. 27 no. 15 (1953), as
    # given by Chu, Mayer and Nicolet (1978): ratio = L(chi)/2,
    # L = 1.36 chi^(1/2) - 0.016 chi^(3/2), for chi <= 3, and 1 above.
    chi = np.array([1e-4, 0.01, 0.1, 0.5, 1.0, 2.0, 2.2])
    formula = 0.5 * (1.36 * np.sqrt(chi) - 0.016 * chi ** 1.5)
    np.testing.assert_allclose(lindhard_scharff_ratio(chi), formula, rtol=1e-14)
    np.testing.assert_array_equal(lindhard_scharff_ratio(np.array([3.01, 10.0, 1e4])), 1.0)


def test_lindhard_scharff_cap_is_where_the_printed_formula_passes_one():
    # The printed formula exceeds 1 between chi ~ 2.28 and 3 (L(3)/2 = 1.136, computed here);
    # we cap at Bohr's value there, which makes the correction continuous (documented choice).
    assert 0.5 * (1.36 * np.sqrt(3.0) - 0.016 * 3.0 ** 1.5) == pytest.approx(1.136, abs=1e-3)
    chi = np.linspace(2.0, 3.5, 15001)
    ratio = lindhard_scharff_ratio(chi)
    assert np.max(np.abs(np.diff(ratio))) < 1e-4          # continuous on a fine grid
    crossing = chi[np.argmax(ratio >= 1.0)]
    assert crossing == pytest.approx(2.283, abs=2e-3)      # root of L(chi)/2 = 1, by hand


def test_lindhard_scharff_correction_limits():
    # Lindhard and Scharff (1953): the correction lies in (0, 1], tends to 1 (Bohr) at high
    # energy and falls towards 0 at low energy (fewer target electrons take part).
    energy = np.geomspace(1.0, 1e5, 400)
    for z2 in (6, 14, 47, 79):
        r = lindhard_scharff_ratio(lindhard_scharff_chi(M_HE4_U, z2, energy))
        assert np.all((r > 0.0) & (r <= 1.0))
        assert np.all(np.diff(r) >= 0.0)            # rises with energy, falls at low energy
        assert r[0] < 0.1 and r[-1] == 1.0


# ---------------------------------------------------------------------------------------------
# rate for a mixture


def test_straggling_rate_is_additive_over_atoms():
    # Bragg-type additivity of straggling over target atoms (Chu, Mayer and Nicolet 1978).
    e = np.array([300.0, 1000.0, 2000.0, 3000.0])
    si = straggling_rate(2, M_HE4_U, {"Si": 1.0}, e)
    o = straggling_rate(2, M_HE4_U, {"O": 1.0}, e)
    sio2 = straggling_rate(2, M_HE4_U, {"Si": 1 / 3, "O": 2 / 3}, e)
    np.testing.assert_allclose(sio2, si / 3 + 2 * o / 3, rtol=1e-14)
    # fractions are normalised, as in StoppingModel.mixture
    np.testing.assert_allclose(straggling_rate(2, M_HE4_U, {"Si": 1.0, "O": 2.0}, e), sio2,
                               rtol=1e-14)
    # without the correction it is Bohr's value per 1e15 atoms/cm2, for any energy
    bohr = straggling_rate(2, M_HE4_U, {"Au": 1.0}, e, correction="none")
    np.testing.assert_allclose(bohr, bohr_variance(2, 79, 1.0), rtol=1e-14)
    # and the correction lowers it for a heavy target at RBS energies (chi << 1 for Au)
    assert np.all(straggling_rate(2, M_HE4_U, {"Au": 1.0}, e) < 0.6 * bohr)


def test_straggling_rate_bad_input():
    with pytest.raises(InputError, match="correction"):
        straggling_rate(2, M_HE4_U, {"Si": 1.0}, 1000.0, correction="chu")
    with pytest.raises(InputError, match="fractions"):
        straggling_rate(2, M_HE4_U, {"Si": -1.0}, 1000.0)
    with pytest.raises(InputError, match="fractions"):
        straggling_rate(2, M_HE4_U, {}, 1000.0)
    with pytest.raises(InputError, match="unknown element"):
        straggling_rate(2, M_HE4_U, {"Xx": 1.0}, 1000.0)


# ---------------------------------------------------------------------------------------------
# propagation


def test_constant_stopping_variance_just_adds():
    # Closed form: with S constant dS/dE = 0, so dVar/dx = rate and Var = Var0 + r N / cos(a).
    def stopping(e):
        return np.full(np.shape(e), 70.0)

    def rate(e):
        return np.full(np.shape(e), 0.02)

    e, v = propagate(stopping, rate, 2000.0, 3.0, 900.0, 35.0)
    path = 900.0 / np.cos(np.radians(35.0))
    assert e == pytest.approx(2000.0 - 70.0 * path / 1000.0, abs=1e-9)
    assert v == pytest.approx(3.0 + 0.02 * path, rel=1e-10)


def test_energy_dependent_rate_with_constant_stopping():
    # Closed form: S constant and rate = alpha E.  dVar/dE = (dVar/dx)/(dE/dx) = -1000 alpha E/S,
    # so Var = Var0 + 1000 alpha (E0^2 - E^2) / (2 S).
    s_const, alpha = 80.0, 2e-5

    def stopping(e):
        return np.full(np.shape(e), s_const)

    def rate(e):
        return alpha * np.asarray(e)

    e, v = propagate(stopping, rate, 2500.0, 0.5, 15000.0)
    assert v == pytest.approx(0.5 + 1000.0 * alpha * (2500.0 ** 2 - e ** 2) / (2 * s_const),
                              rel=1e-9)


def test_linear_stopping_variance_closed_form():
    # Closed form: S = a + b E, dS/dE = b, constant rate r, s = x/1000:
    # dVar/ds = -2 b Var + 1000 r  ->  Var = Var0 exp(-2 b s) + (1000 r / (2 b)) (1 - exp(-2 b s)),
    # and E = (E0 + a/b) exp(-b s) - a/b (see test_path).  With b < 0 (stopping that rises as
    # the ion slows, as above the stopping maximum) the spread grows.
    for a, b in ((30.0, 0.02), (160.0, -0.03)):
        def stopping(e, a=a, b=b):
            return a + b * np.asarray(e)

        def rate(e):
            return np.full(np.shape(e), 0.015)

        x, e0, v0 = 4000.0, 1800.0, 2.0
        s = x / 1000.0
        e, v = propagate(stopping, rate, e0, v0, x, tol_keV=1e-8)
        assert e == pytest.approx((e0 + a / b) * np.exp(-b * s) - a / b, abs=1e-8)
        want = v0 * np.exp(-2 * b * s) + 1000.0 * 0.015 / (2 * b) * (1 - np.exp(-2 * b * s))
        assert v == pytest.approx(want, rel=1e-7)


def test_inverse_energy_stopping_spread_scales_as_stopping_ratio():
    # Closed form: S = c/E, no straggling.  A spread at entry leaves scaled by S(E)/S(E0)
    # = E0/E in standard deviation (Var ratio (E0/E)^2); dS/dE = -c/E^2 is here taken by
    # central finite difference, so this also checks that derivative.
    c = 2.0e5

    def stopping(e):
        return c / np.asarray(e)

    e, v = propagate(stopping, _zero_rate, 2000.0, 4.0, 6000.0, tol_keV=1e-8)
    assert e == pytest.approx(np.sqrt(2000.0 ** 2 - 2 * c * 6000.0 / 1000.0), abs=1e-8)
    assert v == pytest.approx(4.0 * (2000.0 / e) ** 2, rel=1e-7)


@pytest.mark.parametrize("symbol,e0,n", [("Si", 2000.0, 3000.0), ("Si", 700.0, 2000.0),
                                         ("Au", 2500.0, 2000.0)])
def test_spread_scales_with_real_stopping_ratio(symbol, e0, n):
    # The stopping-ratio result for a thin spread: sigma_exit / sigma_entry = S(E_exit) /
    # S(E_entry) (common practice).  The exit energy comes from energy_after_path and the ratio
    # from calling the stopping directly: independent of the variance integration.
    model = _needs_stopping()

    def stopping(e):
        return model.element(symbol, e)

    e, v = propagate(stopping, _zero_rate, e0, 1.0, n, 20.0, tol_keV=1e-8)
    e_ref = energy_after_path(stopping, e0, n, 20.0, tol_keV=1e-8)
    assert e == pytest.approx(e_ref, abs=1e-7)
    assert v == pytest.approx((stopping(e_ref) / stopping(e0)) ** 2, rel=1e-6)


def test_stopped_ion_has_zero_energy_and_variance():
    # Contract: an ion that stops in the layer leaves with energy 0 and variance 0.
    def stopping(e):
        return 3.0 * np.sqrt(np.asarray(e))

    def rate(e):
        return np.full(np.shape(e), 0.01)

    e, v = propagate(stopping, rate, np.array([400.0, 400.0]), 1.0, np.array([100.0, 1e5]))
    assert e[0] > 0.0 and v[0] > 1.0
    assert e[1] == 0.0 and v[1] == 0.0


def test_propagate_bad_input():
    def stopping(e):
        return np.full(np.shape(e), 70.0)

    with pytest.raises(InputError, match="variance_keV2"):
        propagate(stopping, _zero_rate, 1000.0, -1.0, 10.0)
    with pytest.raises(InputError, match="rate"):
        propagate(stopping, lambda e: -np.ones(np.shape(e)), 1000.0, 0.0, 10.0)


@HYPOTHESIS
@given(e0=st.floats(1500.0, 3000.0), n1=st.floats(1.0, 3000.0), n2=st.floats(1.0, 3000.0),
       symbol=st.sampled_from(["Si", "Ni", "Au"]), angle=st.floats(0.0, 70.0))
def test_straggling_variance_grows_with_path_length(e0, n1, n2, symbol, angle):
    # Property of dVar/dx = -2 (dS/dE)/1000 Var + rate with rate > 0: above the stopping
    # maximum (dS/dE < 0) both terms are >= 0, so the variance grows with path length.
    model = _needs_stopping()

    def stopping(e):
        return model.element(symbol, e)

    def rate(e):
        return straggling_rate(2, M_HE4_U, {symbol: 1.0}, e)

    grid = np.linspace(200.0, 3000.0, 2801)
    e_peak = grid[np.argmax(stopping(grid))]
    lo, hi = sorted((n1, n2))
    assume(hi - lo > 1e-3)
    assume(energy_after_path(stopping, e0, hi, angle) > e_peak + 50.0)
    (_, v_lo), (_, v_hi) = (propagate(stopping, rate, e0, 0.0, n, angle) for n in (lo, hi))
    assert 0.0 < v_lo < v_hi
