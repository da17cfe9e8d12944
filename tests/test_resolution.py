"""Depth resolution at an interface, and the flag for widths a spectrum does not resolve
(inversion/fit/_resolution.py).

Checked against the textbook construction of depth resolution (W.-K. Chu, J. W. Mayer and
M.-A. Nicolet, Backscattering Spectrometry, Academic Press 1978, chapters 2-3): the detected
energy of ions scattered at depth z falls at the rate
``[K S(E)/cos th1 + S(K E)/cos th2] * S(E_det)/S(K E)`` (the energy-loss factor at depth,
carried to the detector by the ratio of the stopping at the two ends of the outward path), and
the energy spread is the detector's and Bohr's straggling, 0.26 Z1^2 Z2 keV^2 per 1e18 atoms/cm2
(common practice), inward (times K^2) and outward.  The energies along the paths come from
scipy's ODE solver over forward.StoppingModel, not from the spectrum kernel.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import forward
import inversion
from inversion import Role
from inversion.fit._resolution import (UNRESOLVED_VARIANCE_FRACTION, interface_resolution,
                                       resolution_flags)

from benchmarks._runs import run_head

_FILM_1E15 = 300.0
_EXIT_DEG = 15.0


def _run(tmp_path, fwhm_keV, name="r"):
    # INVENTED: a nickel film on silicon, Bohr straggling (energy independent, so the
    # reference needs no straggling law of its own)
    text = run_head(title="invented: Ni film on Si", charge_uC=5.0, fwhm_keV=fwhm_keV,
                    exit_deg=_EXIT_DEG) + f"""
[[layer]]
name = "film"
formula = "Ni"
density_g_cm3 = 8.9
areal_density_1e15 = {_FILM_1E15}
[[layer]]
name = "wafer"
formula = "Si"
density_g_cm3 = 2.33
substrate = true
[physics]
straggling = "bohr"
[fit.free]
"film.areal_density" = true
"film.mixing" = true
"""
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    run = forward.load_run(path)
    counts = forward.simulate(run, n_channels=1024)[1]["counts"]
    return inversion.prepare(run, counts)[1]


def _theta(objective, width):
    """The run file's sample, nuisances at their prior medians, ``width`` for every mixing."""
    out = []
    for p in objective.spec.parameters:
        if p.role is Role.AREAL_DENSITY:
            out.append(_FILM_1E15)
        elif p.role is Role.MIXING:
            out.append(width)
        else:
            out.append(float(p.prior.dist.median()))
    return np.array(out)


def _reference_fall_and_straggling():
    """Chu, Mayer & Nicolet's construction for the Ni/Si interface (see module notes)."""
    stop = forward.StoppingModel("4He")
    s_ni = lambda e: float(stop.element("Ni", e)) / 1000.0  # noqa: E731  keV per 1e15
    k = forward.kinematic_factor(forward.ion("4He").mass_u, forward.element("Ni").mass_u, 165.0)
    cos_out = math.cos(math.radians(_EXIT_DEG))
    e_in = solve_ivp(lambda z, e: [-s_ni(e[0])], (0.0, _FILM_1E15), [2000.0],
                     rtol=1e-10, atol=1e-10).y[0, -1]
    e1 = k * e_in
    e_det = solve_ivp(lambda z, e: [-s_ni(e[0]) / cos_out], (0.0, _FILM_1E15), [e1],
                      rtol=1e-10, atol=1e-10).y[0, -1]
    carry = s_ni(e_det) / s_ni(e1)
    fall = (k * s_ni(e_in) + s_ni(e1) / cos_out) * carry
    bohr = 0.26 * 4 * 28 / 1000.0  # keV^2 per 1e15 atoms/cm2 (Z1 = 2, Z2 = 28)
    # inward spread times K^2 and carried out; the outward spread, carried part way on average
    strag = (k * k * bohr * _FILM_1E15 * carry ** 2
             + bohr * _FILM_1E15 / cos_out * (1 + carry ** 2) / 2)
    return fall, strag


def test_interface_resolution_follows_the_textbook_construction(tmp_path):
    fall_ref, strag_ref = _reference_fall_and_straggling()
    sig = lambda fwhm: fwhm / math.sqrt(8 * math.log(2))  # noqa: E731
    s15 = interface_resolution(obj15 := _run(tmp_path, 15.0, "a"), _theta(obj15, 1.0))[0]
    s30 = interface_resolution(obj30 := _run(tmp_path, 30.0, "b"), _theta(obj30, 1.0))[0]
    # two detectors: the difference of the squares sees the fall of the detected energy alone
    fall = math.sqrt((sig(30.0) ** 2 - sig(15.0) ** 2) / (s30 ** 2 - s15 ** 2))
    assert fall == pytest.approx(fall_ref, rel=0.01)  # measured 0.6 % apart
    # what is left of the spread is the straggling (Bohr's, in and out), to 10 %: the
    # reference carries the outward spread by an average ratio (measured 2 % apart)
    strag = (s15 * fall) ** 2 - sig(15.0) ** 2
    assert strag == pytest.approx(strag_ref, rel=0.10)


def test_narrow_widths_are_flagged_and_wide_ones_are_not(tmp_path):
    objective = _run(tmp_path, 15.0)
    s = interface_resolution(objective, _theta(objective, 1.0))[0]
    j = [p.role for p in objective.spec.parameters].index(Role.MIXING)
    rng = np.random.default_rng(3)

    def draws(width):
        theta = np.tile(_theta(objective, width), (200, 1))
        theta[:, j] = np.abs(width + 0.1 * width * rng.standard_normal(200))
        return theta

    limit = s * math.sqrt(UNRESOLVED_VARIANCE_FRACTION / (1 - UNRESOLVED_VARIANCE_FRACTION))
    narrow = resolution_flags(objective, draws(0.5 * limit))
    assert len(narrow) == 1 and narrow[0].startswith("film.mixing:")
    assert "upper bound" in narrow[0] and f"sd {s:.3g}" in narrow[0]
    assert resolution_flags(objective, draws(2.0 * limit)) == []
