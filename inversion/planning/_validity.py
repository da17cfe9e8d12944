"""Where a set-up's expected spectrum leaves the validity of the model.

Three checks, each a line of text on the set-up's row of the plan:

* the beam above the estimated non-Rutherford onset of an element of the sample
  (:func:`forward.check_rutherford_validity`), unless the run gives that element a
  ratio-to-Rutherford table;
* the beam above the energy to which the helium stopping has been compared with NIST ASTAR
  (:func:`forward.check_stopping_range`);
* two species whose surface edges ``K E0`` lie closer than the detector resolution (FWHM): at
  the surface the set-up cannot separate their signals, and the fit can trade one for the
  other (the expected sds say how much).
"""

from __future__ import annotations

import warnings

import forward

__all__ = ["validity_warnings"]


def _caught(call) -> list[str]:
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        call()
    return [" ".join(str(w.message).split()) for w in caught]


def _kinematic(m1: float, m2: float, theta_deg: float):
    try:
        return forward.kinematic_factor(m1, m2, theta_deg)
    except ValueError:  # too light to scatter the ion to this angle
        return None


def validity_warnings(run, species=(), masses_u=()) -> list[str]:
    """The validity warnings of one set-up's run.

    Parameters
    ----------
    run : forward.Run
    species : sequence of str
        The sample's species (columns of the fraction table).
    masses_u : sequence of float
        Their mean masses (u).

    Returns
    -------
    list of str
        One line per problem, in the order of the checks above.
    """
    out: list[str] = []
    beam = run.beam
    e0 = float(beam.energy_keV)
    z1, m1 = beam.ion.z, beam.ion.mass_u
    theta = float(run.geometry.scattering_deg)
    ratio_tables = getattr(run.physics, "cross_section_ratio", {}) or {}
    for sym in run.elements:
        el = forward.element(sym)
        if sym in ratio_tables or _kinematic(m1, el.mass_u, theta) is None:
            continue
        out += _caught(lambda el=el, sym=sym: forward.check_rutherford_validity(
            z1, m1, el.z, el.mass_u, e0, label=sym))
    out += _caught(lambda: forward.check_stopping_range(e0, ion=beam.species))
    fwhm = float(run.detector.fwhm_keV)
    edges = []
    for name, mass in zip(species, masses_u):
        k = _kinematic(m1, float(mass), theta)
        if k is not None:
            edges.append((name, k * e0))
    for a in range(len(edges)):
        for b in range(a + 1, len(edges)):
            (na, ea), (nb, eb) = edges[a], edges[b]
            if abs(ea - eb) < fwhm:
                out.append(f"{na} and {nb}: surface edges at {ea:.1f} and {eb:.1f} keV, "
                           f"{abs(ea - eb):.1f} keV apart, closer than the detector resolution "
                           f"({fwhm:g} keV FWHM); at the surface this set-up cannot separate "
                           "their signals")
    return out
