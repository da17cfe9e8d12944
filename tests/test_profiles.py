"""Profile models: slice averages, diffusion convention, simplex, conservation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import erfc

from inversion.fit._profiles import (LayerStack, NodeProfile, alr_to_fractions, step_average,
                                     stick_breaking)

EDGES = np.concatenate([np.linspace(0.0, 400.0, 41), np.linspace(410.0, 1000.0, 60)])


@pytest.mark.parametrize("position, width", [(200.0, 15.0), (205.0, 0.7), (3.0, 25.0),
                                             (900.0, 120.0)])
def test_step_average_matches_numerical_integral(position, width):
    # reference: scipy.integrate.quad of scipy.stats.norm.cdf over each slice (reference library)
    got = step_average(EDGES, position, width)
    ref = [integrate.quad(lambda z: stats.norm.cdf((z - position) / width), a, b,
                          points=[position], epsabs=1e-13)[0] / (b - a)
           for a, b in zip(EDGES[:-1], EDGES[1:])]
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-12)


def test_zero_width_is_the_sharp_step_with_partial_slice():
    got = step_average(EDGES, 203.0, 0.0)
    # the slice [200, 210] is 70 % below the step; common practice (slice average of a step)
    i = np.searchsorted(EDGES, 203.0) - 1
    assert got[i] == pytest.approx(0.7)
    assert np.all(got[:i] == 0.0) and np.all(got[i + 1:] == 1.0)


def test_width_is_the_diffusion_length_sqrt_2Dt():
    # A sharp step diffusing for time t with coefficient D becomes
    # c/c0 = 1/2 erfc(-(z - z0) / (2 sqrt(D t))) (Crank, The Mathematics of Diffusion, 2nd ed.
    # 1975, ch. 2, extended initial distribution; equation number from memory).  With our
    # convention w = sqrt(2 D t) that is Phi((z - z0) / w).
    D, t, z0 = 0.8, 250.0, 500.0  # invented, (1e15 atoms/cm2)^2 per s and s
    w = np.sqrt(2 * D * t)
    fine = np.linspace(400.0, 600.0, 20001)
    avg = step_average(fine, z0, w)
    centres = 0.5 * (fine[1:] + fine[:-1])
    assert np.allclose(avg, 0.5 * erfc(-(centres - z0) / (2 * np.sqrt(D * t))), atol=1e-8)


def test_layer_stack_rows_on_simplex_and_areal_density_conserved():
    comps = np.array([[0.5, 0.5, 0.0], [0.0, 0.2, 0.8], [0.0, 0.0, 1.0]])
    stack = LayerStack(3, substrate=True)
    t = np.array([150.0, 220.0])
    widths, fr = stack.table(EDGES, t, [12.0, 30.0], comps)
    assert np.all(fr >= 0) and np.allclose(fr.sum(axis=1), 1.0, atol=1e-12)
    # mixing moves atoms, never makes or loses them: species 0 lives only in layer 1
    # (common practice: the error-function step conserves the integral of the profile)
    assert widths @ fr[:, 0] == pytest.approx(0.5 * 150.0, rel=1e-9)
    assert widths @ fr[:, 1] == pytest.approx(0.5 * 150.0 + 0.2 * 220.0, rel=1e-9)


def test_no_substrate_leaves_vacuum_below():
    comps = np.array([[1.0, 0.0], [0.3, 0.7]])
    stack = LayerStack(2, substrate=False)
    widths, fr = stack.table(EDGES, [100.0, 203.0], [5.0, 0.0], comps)
    sums = fr.sum(axis=1)
    held = widths > 0
    assert np.allclose(sums[held], 1.0) and np.all(fr[~held] == 0.0)
    assert widths.sum() == pytest.approx(303.0, rel=1e-12)  # every atom, and only atoms
    assert widths @ fr[:, 1] == pytest.approx(0.7 * 203.0, rel=1e-12)
    assert np.all(widths[EDGES[:-1] >= 303.0] == 0.0)


def test_thin_marker_spreads_as_a_gaussian_of_its_areal_density():
    # a 2e15 layer with mixing 40 above and below: its profile is its box convolved with
    # the Gaussian, close to t * phi((z - zc) / w) / w (common practice: a thin source
    # diffusing)
    fine = np.linspace(0.0, 1000.0, 2001)
    stack = LayerStack(3, substrate=True)
    comps = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 0.0]])
    widths, fr = stack.table(fine, [400.0, 2.0], [40.0, 40.0], comps)
    assert np.allclose(widths, np.diff(fine), rtol=1e-9)  # equal widths: no depth distortion
    centres = 0.5 * (fine[1:] + fine[:-1])
    gauss = 2.0 * stats.norm.pdf(centres, loc=401.0, scale=40.0)
    assert np.max(np.abs(fr[:, 1] - gauss)) < 1e-3 * gauss.max() * 10


def test_overlapping_interfaces_stay_on_the_simplex():
    stack = LayerStack(3, substrate=True)
    comps = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 0.0]])
    edges = np.linspace(0.0, 310.0 + 8 * 200.0, 801)  # the grid holds 8 widths of tail
    widths, fr = stack.table(edges, [300.0, 10.0], [200.0, 1.0], comps)
    assert np.all(fr >= 0) and np.allclose(fr.sum(axis=1), 1.0)
    assert widths @ fr[:, 1] == pytest.approx(10.0, rel=1e-9)  # nothing clipped


def test_alr_round_trip():
    y = np.array([[0.3, -2.0], [5.0, 1.0]])
    f = alr_to_fractions(y)
    assert np.allclose(f.sum(axis=1), 1.0)
    assert np.allclose(np.log(f[:, :2] / f[:, 2:]), y)


def test_node_profile_passes_through_its_nodes():
    nodes = np.linspace(0.0, 400.0, 5)
    prof = NodeProfile(EDGES, 3, [2, 0], nodes, below="hold")
    params = np.array([0.5, -1.0, 0.3, 0.0, 2.0])  # start then four steps
    y_nodes = np.cumsum(params)
    at = prof.fractions_at(params, nodes)
    assert np.all(at[:, 1] == 0.0) and np.allclose(at.sum(axis=1), 1.0)
    assert np.log(at[:, 2] / at[:, 0]) == pytest.approx(y_nodes)
    # between nodes the fractions are linear in depth (the chord of the two nodes)
    mid = prof.fractions_at(params, 0.5 * (nodes[1:] + nodes[:-1]))
    assert mid == pytest.approx(0.5 * (at[1:] + at[:-1]))
    fr = prof.fractions(params)
    assert np.all(fr[:, 1] == 0.0) and np.allclose(fr.sum(axis=1), 1.0)
    deep = EDGES[:-1] >= 400.0
    assert np.allclose(np.log(fr[deep, 2] / fr[deep, 0]), y_nodes[-1])


def test_node_slices_hold_the_profile_integral():
    # each slice's row is the average of the point profile over its depth: compared with
    # scipy.integrate.quad of the point profile (reference library)
    from scipy.integrate import quad

    nodes = np.array([0.0, 35.0, 120.0, 260.0, 305.0])
    prof = NodeProfile(EDGES, 3, [0, 2, 1], nodes, below="vacuum")
    params = np.random.default_rng(3).normal(0.0, 1.5, prof.n_parameters)
    fr = prof.fractions(params)
    for j in (0, 3, 7, 15, 30, EDGES.size - 2):
        a, b = EDGES[j], EDGES[j + 1]
        for c in range(3):
            ref, _ = quad(lambda z: prof.fractions_at(params, z)[0, c], a, b,
                          points=[z for z in nodes if a < z < b], epsabs=1e-12)
            assert fr[j, c] * (b - a) == pytest.approx(ref, rel=1e-9, abs=1e-10)
    # vacuum below: the table holds exactly the range's atoms
    assert np.diff(EDGES) @ fr.sum(axis=1) == pytest.approx(305.0, rel=1e-12)


def test_node_profile_vacuum_below():
    prof = NodeProfile(EDGES, 2, [0, 1], np.linspace(0.0, 305.0, 4), below="vacuum")
    fr = prof.fractions(np.zeros(4))
    assert np.diff(EDGES) @ fr.sum(axis=1) == pytest.approx(305.0)


def test_node_range_inside_layers():
    # a mixed model: nodes from 100 to 250 between a cap (species 0) and a substrate
    # (species 2); outside the range the run file's layers, sharp
    tops = np.array([0.0, 100.0, 250.0])
    comps = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    edges = np.unique(np.concatenate([EDGES, [100.0, 250.0]]))
    prof = NodeProfile(edges, 3, [0, 2, 1], np.linspace(100.0, 250.0, 6), below="layers",
                       layer_tops_1e15=tops, layer_compositions=comps)
    params = np.random.default_rng(5).normal(0.0, 1.0, prof.n_parameters)
    fr = prof.fractions(params)
    centres = 0.5 * (edges[1:] + edges[:-1])
    assert np.allclose(fr.sum(axis=1), 1.0)
    assert np.all(fr[centres < 100.0] == comps[0])
    assert np.all(fr[centres > 250.0] == comps[2])
    assert np.all(fr[(centres > 100.0) & (centres < 250.0)].min(axis=0) > 0.0)
    at = prof.fractions_at(params, [50.0, 100.0, 250.0, 400.0])
    assert at[0] == pytest.approx(comps[0]) and at[3] == pytest.approx(comps[2])
    assert np.log(at[1, 0] / at[1, 1]) == pytest.approx(params[0])
    # the range holds exactly its areal density
    inside = (centres > 100.0) & (centres < 250.0)
    assert np.diff(edges)[inside] @ fr[inside].sum(axis=1) == pytest.approx(150.0, rel=1e-12)


def test_stick_breaking_with_beta_priors_is_dirichlet():
    # Beta(a, (m-k-1) a) sticks give Dirichlet(a,...,a) (Connor & Mosimann 1969); check each
    # component against the Dirichlet marginal Beta(a, (m-1) a) (scipy.stats, reference library)
    rng = np.random.default_rng(11)
    a, m, n = 1.0, 4, 4000
    v = np.column_stack([stats.beta(a, (m - k - 1) * a).rvs(n, random_state=rng)
                         for k in range(m - 1)])
    f = np.array([stick_breaking(row) for row in v])
    assert np.allclose(f.sum(axis=1), 1.0)
    # four KS tests at a family-wise false-alarm rate of 1 % (Bonferroni: 0.25 % each)
    for j in range(m):
        assert stats.kstest(f[:, j], stats.beta(a, (m - 1) * a).cdf).pvalue > 0.01 / m
    # and the exact Dirichlet mean 1/m, within 4 standard errors
    sd = stats.beta(a, (m - 1) * a).std()
    assert np.all(np.abs(f.mean(axis=0) - 1 / m) < 4 * sd / np.sqrt(n))
