"""The spectrum model against the textbook relations of backscattering spectrometry.

W.-K. Chu, J. W. Mayer and M.-A. Nicolet, *Backscattering Spectrometry*, Academic Press 1978
(below: CMN 1978): the surface height of a thick elemental target, the area and
width of a thin film's signal, and the shift of a buried edge.  Samples are invented for the
tests; niobium, bismuth and aluminium are used because each has a single stable isotope, so the
textbook single-mass relations apply without an isotope sum.

Straggling and detector resolution are switched off (``straggling=False``, ``fwhm_keV = 0``)
because the relations describe the sharp spectrum.  The stopping and cross-section values come
from forward.StoppingModel and forward.rutherford_cross_section, which have their own tests.
"""

from __future__ import annotations

import warnings

import numpy as np

import forward
from forward._path import energy_after_path


E0 = 2000.0
THETA, TH1, TH2 = 160.0, 5.0, 25.0
GAIN = 0.5


def _model(make_run, layers, max_slice=2.0):
    run = make_run(layers, energy=E0, theta=THETA, th1=TH1, th2=TH2, fwhm=10.0, gain=GAIN,
                   offset=100.0, charge=2.0, omega=3.0,
                   physics=f"[physics]\nscreening = \"none\"\nmax_slice_1e15 = {max_slice}\n")
    model = forward.ForwardModel(run, straggling=False)
    sharp = model.default_nuisance()
    sharp.fwhm_keV = 0.0
    return run, model, sharp


def _stopping_keV(symbol, energy_keV):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return forward.StoppingModel("4He").element(symbol, energy_keV) / 1000.0


def _sigma_cm2(symbol, energy_keV, m1):
    el = forward.element(symbol)
    return forward.rutherford_cross_section(2, m1, el.z, el.isotopes[0].mass_u, energy_keV,
                                            THETA, screening=None) * 1e-27


def _cos(deg):
    return np.cos(np.radians(deg))


def test_thick_target_surface_height(make_run):
    run, model, sharp = _model(make_run, """
[[layer]]
formula = "Nb"
substrate = true
""")
    counts = model.expected_counts(model.layer_fractions(), sharp)
    m1 = run.beam.ion.mass_u
    k = forward.kinematic_factor(m1, forward.element("Nb").isotopes[0].mass_u, THETA)
    # CMN 1978: H0 = Q Omega sigma(E0) dE / ([eps_0] cos th1), surface energy
    # approximation [eps_0] = K eps(E0)/cos th1 + eps(K E0)/cos th2 (per atom, keV cm2 units)
    eps0 = (k * _stopping_keV("Nb", E0) / _cos(TH1) + _stopping_keV("Nb", k * E0) / _cos(TH2)) / 1e15
    q_omega = run.exposure.incident_particles * run.detector.solid_angle_msr * 1e-3
    h0 = q_omega * _sigma_cm2("Nb", E0, m1) * GAIN / (eps0 * _cos(TH1))
    edge = int(np.floor(run.calibration.channel_of(k * E0)))
    # the first whole channel below the edge (about 0.5 keV, i.e. 2e15 atoms/cm2, deep)
    assert abs(counts[edge - 1] / h0 - 1.0) < 0.02
    assert counts[edge + 1] == 0.0


def test_thin_film_area_and_width(make_run):
    nt = 50.0
    run, model, sharp = _model(make_run, f"""
[[layer]]
formula = "Bi"
areal_density_1e15 = {nt}
[[layer]]
formula = "C"
substrate = true
""", max_slice=5.0)
    per = model.expected_counts(model.layer_fractions(), sharp, per_species=True)
    bi = per[model.species.index("Bi")]
    m1 = run.beam.ion.mass_u
    k = forward.kinematic_factor(m1, forward.element("Bi").isotopes[0].mass_u, THETA)
    # CMN 1978: A = Q Omega sigma N t / cos th1, with sigma at the mean energy of the
    # ion in the film (mean-energy approximation, E0 minus half the energy lost on the way in)
    e_mean = E0 - 0.5 * _stopping_keV("Bi", E0) * nt / _cos(TH1)
    q_omega = run.exposure.incident_particles * run.detector.solid_angle_msr * 1e-3
    area = q_omega * _sigma_cm2("Bi", e_mean, m1) * nt * 1e15 / _cos(TH1)
    assert abs(bi.sum() / area - 1.0) < 0.01
    # CMN 1978: width dE = [eps] N t, surface energy approximation
    eps = k * _stopping_keV("Bi", E0) / _cos(TH1) + _stopping_keV("Bi", k * E0) / _cos(TH2)
    inside = np.flatnonzero(bi > 0)
    middle = inside[len(inside) // 4: 3 * len(inside) // 4]
    height = bi[middle].mean() / GAIN  # counts per keV
    width = bi.sum() / height
    assert abs(width / (eps * nt) - 1.0) < 0.02


def test_buried_substrate_edge_shift_matches_path_integration(make_run):
    nt = 200.0
    run, model, sharp = _model(make_run, f"""
[[layer]]
formula = "Nb"
areal_density_1e15 = {nt}
[[layer]]
formula = "Al"
substrate = true
""")
    per = model.expected_counts(model.layer_fractions(), sharp, per_species=True)
    al = per[model.species.index("Al")]
    m1 = run.beam.ion.mass_u
    k = forward.kinematic_factor(m1, forward.element("Al").isotopes[0].mass_u, THETA)

    # common practice: the edge moves down by the energy lost crossing the film in and out;
    # the two crossings from the slow adaptive integrator of forward._path
    def s_nb(e):
        return _stopping_keV("Nb", e) * 1000.0  # eV/(1e15 atoms/cm2)

    e_in = energy_after_path(s_nb, E0, nt, TH1, tol_keV=1e-6)
    expected = energy_after_path(s_nb, k * e_in, nt, TH2, tol_keV=1e-6)

    # locate the step: the channel holding the edge is filled up to it
    top = np.flatnonzero(al > 0).max()
    height = al[top - 1]  # the whole channel just below
    edges = model.channel_edges_keV(sharp)
    edge_keV = edges[top] + al[top] / height * (edges[top + 1] - edges[top])
    assert abs(edge_keV - expected) < 0.1
    # and the shift is far from zero: [eps] N t of niobium, tens of keV (CMN 1978)
    assert k * E0 - edge_keV > 20.0
