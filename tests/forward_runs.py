"""Invented run files shared by the forward-model tests (a helper module, not a test file).

Every sample here is invented: a cobalt-antimony film over alumina on silicon, and two titanium
oxide layers with an 18O-enriched top one on carbon.
"""

from __future__ import annotations

import forward
from benchmarks._runs import run_head

__all__ = ["run_text", "make_run", "FILM_ON_SUBSTRATE", "TRACER"]


def run_text(layers: str, *, energy=1800.0, theta=165.0, th1=0.0, th2=15.0, fwhm=16.0,
             omega=2.5, gain=2.0, offset=50.0, quad=0.0, charge=5.0, physics: str = "") -> str:
    """An invented run file's text: the head (4He at ``energy`` keV, scattering angle ``theta``,
    incidence ``th1`` and exit ``th2`` in degrees, resolution ``fwhm`` keV, solid angle
    ``omega`` msr, calibration ``gain`` keV/channel, ``offset`` keV and ``quad`` keV/channel^2,
    charge ``charge`` uC), then ``layers`` and ``physics`` as given."""
    head = run_head(title="invented test sample", energy_keV=energy, scattering_deg=theta,
                    incidence_deg=th1, exit_deg=th2, fwhm_keV=fwhm, solid_angle_msr=omega,
                    keV_per_channel=gain, offset_keV=offset, quadratic_keV=quad,
                    charge_uC=charge)
    return "\n" + head + layers + physics


def make_run(layers: str, **values):
    """The :class:`forward.Run` of :func:`run_text` (same keywords)."""
    return forward.parse_run(run_text(layers, **values))


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


