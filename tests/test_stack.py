"""The atom-conserving layer stack (inversion/_stack.py): atoms counted once for any widths,
the error-function step at an isolated interface, a thin marker's true amount."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import ndtr

from inversion.fit._stack import ramp_integral, refinement_points, slice_amounts, stack_table

__all__: list[str] = []


def _edges(total, n=600, extra=()):
    return np.unique(np.concatenate([np.linspace(0.0, total, n + 1), np.asarray(extra)]))


def test_ramp_integral_is_the_second_antiderivative_of_the_gaussian():
    # R(x, w) = w (x/w Phi(x/w) + phi(x/w)): R' = Phi(x/w) (the normal CDF; common practice),
    # checked by a central difference; R(x, 0) = max(x, 0)
    x = np.linspace(-30.0, 30.0, 61)
    h = 1e-4
    deriv = (ramp_integral(x + h, 7.0) - ramp_integral(x - h, 7.0)) / (2 * h)
    assert np.allclose(deriv, ndtr(x / 7.0), atol=1e-8)
    assert np.array_equal(ramp_integral(x, 0.0), np.maximum(x, 0.0))
    assert ramp_integral(1e4, 3.0) == pytest.approx(1e4, rel=1e-15)


@pytest.mark.parametrize("seed", range(6))
def test_every_layers_atoms_are_counted_once_for_any_widths(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 5))
    t = rng.uniform(2.0, 300.0, n)
    w = rng.uniform(0.0, 80.0, n) * (rng.uniform(size=n) > 0.2)
    substrate = bool(rng.integers(2))
    end = t.sum() + 10 * w.max() + 50.0
    edges = _edges(end, extra=refinement_points(t, w, np.ones(n, bool)).clip(0, end))
    amounts = slice_amounts(edges, t, w, substrate)
    assert np.all(amounts >= 0)
    assert np.allclose(amounts[:, :n].sum(axis=0), t, rtol=1e-9, atol=0)
    if substrate:  # the slices are full: atoms of the stack plus the substrate fill the depth
        assert amounts.sum() == pytest.approx(end, rel=1e-9)


def test_isolated_interface_is_the_error_function_step():
    # a thick layer on a substrate: the stack is the classic profile
    # f(u) = f_above + (f_below - f_above) Phi((u - z)/w) (Crank, The Mathematics of Diffusion,
    # 2nd ed. 1975, eq. 2.14); its slice averages follow from G' = Phi
    t, w = np.array([500.0]), np.array([25.0])
    edges = _edges(900.0, n=180)
    widths, fractions, _ = stack_table(edges, t, w, [[1.0, 0.0], [0.0, 1.0]], substrate=True)
    a, b = edges[:-1], edges[1:]
    expected = w[0] * (ramp_integral((b - 500.0) / w[0], 1.0)
                       - ramp_integral((a - 500.0) / w[0], 1.0)) / (b - a)
    assert np.allclose(widths, b - a, rtol=1e-12)
    assert np.allclose(fractions[:, 1], expected, atol=1e-12)
    assert np.allclose(fractions.sum(axis=1), 1.0, atol=1e-12)


def test_thin_marker_between_unequal_interfaces_keeps_its_amount():
    # 12e15 atoms/cm2 of marker under a 500e15 cap, widths 10e15 above and 30e15 below
    t, w = np.array([500.0, 12.0]), np.array([10.0, 30.0])
    comps = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 0.0]])  # Si cap, Ge marker, Si substrate
    edges = _edges(900.0, extra=refinement_points(t, w, [True, True]))
    widths, fractions, amounts = stack_table(edges, t, w, comps, substrate=True)
    marker = float(np.sum(widths * fractions[:, 1]))
    assert marker == pytest.approx(12.0, rel=1e-9)
    assert np.all(fractions >= 0) and np.all(fractions <= 1 + 1e-12)
    assert np.allclose(fractions.sum(axis=1), 1.0)
    # the marker's profile is spread over several widths, peaking well below 1
    assert fractions[:, 1].max() < 0.5


def test_counts_change_smoothly_when_a_width_passes_through_zero():
    t = np.array([200.0, 40.0])
    edges0 = _edges(500.0, n=200)
    values = []
    for w1 in np.linspace(0.0, 2.0, 21):
        w = np.array([5.0, w1])
        edges = np.sort(np.concatenate([edges0, refinement_points(t, w, [True, True])]))
        values.append(slice_amounts(edges, t, w, True)[:, 1] @ np.arange(edges.size - 1))
    steps = np.diff(values)
    assert np.all(np.isfinite(steps)) and np.max(np.abs(np.diff(steps))) < 1e-3 * np.ptp(values) + 1e-9


def test_sample_without_substrate_ends_with_empty_rows():
    t, w = np.array([100.0, 50.0]), np.array([4.0, 6.0])
    edges = _edges(250.0)
    widths, fractions, amounts = stack_table(edges, t, w, [[1, 0], [0, 1]], substrate=False)
    assert amounts.sum() == pytest.approx(150.0, rel=1e-9)
    deep = edges[1:] > 150.0 + 10 * 6.0
    assert np.all(widths[deep] < 1e-12) and np.all(fractions[deep] == 0.0)


@pytest.mark.parametrize("seed", range(5))
def test_compiled_amounts_equal_the_numpy_version(seed):
    from inversion.fit._stack import slice_amounts_numpy

    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(1, 5))
    t = rng.uniform(0.0, 300.0, n)
    w = rng.uniform(0.0, 60.0, n) * (rng.uniform(size=n) > 0.3)
    substrate = bool(rng.integers(2))
    edges = np.sort(np.concatenate([[0.0], rng.uniform(0.0, t.sum() + 500.0, 300),
                                    refinement_points(t, w, np.ones(n, bool)).clip(0)]))
    fast = slice_amounts(edges, t, w, substrate)
    slow = slice_amounts_numpy(edges, t, w, substrate)
    assert np.allclose(fast, slow, rtol=1e-12, atol=1e-12 * max(1.0, t.sum()))
