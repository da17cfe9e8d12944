"""Invented run files shared by the forward-model tests (a helper module, not a test file).

Every sample here is invented: a cobalt-antimony film over alumina on silicon, and two titanium
oxide layers with an 18O-enriched top one on carbon.
"""

from __future__ import annotations

import forward

__all__ = ["RUN_HEAD", "make_run", "FILM_ON_SUBSTRATE", "TRACER"]

RUN_HEAD = """
title = "invented test sample"
[beam]
ion = "4He"
energy_keV = {energy}
[geometry]
scattering_deg = {theta}
incidence_deg = {th1}
exit_deg = {th2}
[detector]
fwhm_keV = {fwhm}
solid_angle_msr = {omega}
[calibration]
keV_per_channel = {gain}
offset_keV = {offset}
quadratic_keV = {quad}
[exposure]
charge_uC = {charge}
"""


def make_run(layers: str, *, energy=1800.0, theta=165.0, th1=0.0, th2=15.0, fwhm=16.0,
             omega=2.5, gain=2.0, offset=50.0, quad=0.0, charge=5.0, physics: str = ""):
    text = RUN_HEAD.format(energy=energy, theta=theta, th1=th1, th2=th2, fwhm=fwhm, omega=omega,
                           gain=gain, offset=offset, quad=quad, charge=charge) + layers + physics
    return forward.parse_run(text)


FILM_ON_SUBSTRATE = """
[[layer]]
formula = "Co0.4Sb0.6"
areal_density_1e15 = 250
[[layer]]
formula = "Al2O3"
areal_density_1e15 = 400
[[layer]]
formula = "Si"
substrate = true
"""

TRACER = """
[[layer]]
formula = "TiO2"
areal_density_1e15 = 300
isotopes = { O = { 18 = 0.9, 16 = 0.1 } }
[[layer]]
formula = "TiO2"
areal_density_1e15 = 500
[[layer]]
formula = "C"
substrate = true
"""


