"""The head of an invented run file (title, [beam], [geometry], [detector], [calibration],
[exposure]), shared by the benchmarks and the tests so that each writes only its sample.

Import it as ``benchmarks._runs`` with the repository root on the module search path (the
benchmarks put it there after taking their own folder off; pytest puts it there for the tests,
``pythonpath`` in pyproject.toml).  The defaults are an invented set-up
(4He at 2000 keV, 165 degrees, a 15 keV detector of 3 msr, 2 keV per channel from 20 keV), the
values most of the invented scenarios use; none is a real measurement.
"""

from __future__ import annotations

import json

__all__ = ["run_head", "MO_ON_CARBON"]

#: run_head's keywords (all but the charge) for the calibration study's invented scenario, a
#: molybdenum film on glassy carbon: benchmarks/coverage.py and its fast version in
#: tests/test_coverage.py
MO_ON_CARBON = dict(title="invented: Mo film on glassy carbon, mixed interface",
                    live_fraction=0.95,
                    note="INVENTED scenario for the calibration study (not a real sample, not a "
                         "measurement):\na molybdenum film on glassy carbon whose Mo/C interface "
                         "has mixed.")


def run_head(*, title: str, charge_uC, energy_keV=2000.0, scattering_deg=165.0,
             incidence_deg=None, exit_deg=None, tilt_deg=None, layout: str = "IBM",
             fwhm_keV=15.0, solid_angle_msr=3.0, keV_per_channel=2.0, offset_keV=20.0,
             quadratic_keV=None, live_fraction=None, note: str = "") -> str:
    """The run file's text up to its first ``[[layer]]``, one ``key = value`` a line.

    Numbers are written as Python prints them (``2000.0`` stays ``2000.0``, ``2000`` stays
    ``2000``), so a caller that passes what it wrote by hand gets the same text back.

    Parameters
    ----------
    title : str
        The run's title; say in it that the scenario is invented.
    charge_uC : float
        Beam charge in microcoulomb (``[exposure] charge_uC``).
    energy_keV : float
        Beam energy of the 4He ions in keV.
    scattering_deg : float
        Scattering angle in degrees.
    incidence_deg, exit_deg : float, optional
        Incidence and exit angles in degrees from the sample normal (default 0 and 15); not
        allowed with ``tilt_deg``.
    tilt_deg : float, optional
        Sample tilt in degrees; the geometry is then written as ``tilt_deg`` and ``layout``
        instead of incidence and exit angles.
    layout : str
        ``"IBM"`` or ``"Cornell"``, written only with ``tilt_deg``.
    fwhm_keV : float
        Detector resolution (full width at half maximum) in keV.
    solid_angle_msr : float
        Detector solid angle in millisteradian.
    keV_per_channel, offset_keV : float
        Energy calibration: gain in keV per channel and offset in keV.
    quadratic_keV : float, optional
        Quadratic calibration term in keV per channel squared; the line is left out if None.
    live_fraction : float, optional
        Live-time fraction of the exposure; the line is left out if None.
    note : str
        Comment lines put above the title (each line gets ``# ``); empty: none.

    Returns
    -------
    str
        The TOML text, ending in a newline.
    """
    if tilt_deg is None:
        geometry = [f"incidence_deg = {0.0 if incidence_deg is None else incidence_deg}",
                    f"exit_deg = {15.0 if exit_deg is None else exit_deg}"]
    elif incidence_deg is not None or exit_deg is not None:
        raise ValueError("run_head: give tilt_deg (with layout) or incidence_deg and exit_deg, "
                         "not both")
    else:
        geometry = [f"tilt_deg = {tilt_deg}", f"layout = {json.dumps(layout)}"]
    lines = [f"# {line}" for line in note.splitlines()]
    lines += [f"title = {json.dumps(title, ensure_ascii=False)}",
              "[beam]", 'ion = "4He"', f"energy_keV = {energy_keV}",
              "[geometry]", f"scattering_deg = {scattering_deg}", *geometry,
              "[detector]", f"fwhm_keV = {fwhm_keV}", f"solid_angle_msr = {solid_angle_msr}",
              "[calibration]", f"keV_per_channel = {keV_per_channel}", f"offset_keV = {offset_keV}"]
    if quadratic_keV is not None:
        lines.append(f"quadratic_keV = {quadratic_keV}")
    lines += ["[exposure]", f"charge_uC = {charge_uC}"]
    if live_fraction is not None:
        lines.append(f"live_fraction = {live_fraction}")
    return "\n".join(lines) + "\n"
