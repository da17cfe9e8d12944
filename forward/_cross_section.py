"""Differential cross-section of one scattering event, in the laboratory frame.

Contents
--------
* :func:`rutherford_cross_section`: the Rutherford cross-section in mb/sr, exact for a finite
  projectile-to-target mass ratio, optionally corrected for electron screening.
* :func:`screening_factor`: the screening correction of L'Ecuyer et al. (1979) or of Andersen
  et al. (1980).
* :func:`non_rutherford_onset_keV` and :func:`check_rutherford_validity`: the beam energy above
  which nuclear forces may make a light target's cross-section depart from Rutherford.
* :func:`load_ratio_table` and :class:`RatioTable`: a user-supplied table of the measured
  cross-section divided by Rutherford, which the spectrum model multiplies in.

Frames
------
Arguments called ``energy_keV`` and ``theta_deg`` are always the *laboratory* beam energy and
the *laboratory* scattering angle.  The screening formulas are written in the centre-of-mass
frame; the conversion is done here with ``E_CM = E m2 / (m1 + m2)`` and
``theta_CM = theta + arcsin((m1 / m2) sin theta)`` (the ``+`` branch, see ``_kinematics``).

Units: 1 b = 1e-24 cm2, 1 mb = 1e-27 cm2.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import constants

from ._errors import InputError
from ._kinematics import max_scattering_angle_deg

__all__ = [
    "E2_KEV_CM",
    "SCREENING_MODELS",
    "NonRutherfordWarning",
    "RatioTable",
    "check_rutherford_validity",
    "load_ratio_table",
    "non_rutherford_onset_keV",
    "rutherford_cross_section",
    "screening_factor",
]

#: e^2 / (4 pi epsilon_0) in keV cm, built from the CODATA values in scipy.constants
#: (about 1.44e-10 keV cm = 1.44 eV nm).
E2_KEV_CM = constants.e**2 / (4.0 * math.pi * constants.epsilon_0) / (constants.e * 1e3) * 1e2

_CM2_TO_MB = 1e27  # 1 mb = 1e-27 cm2

#: Accepted values of the ``screening`` / ``model`` argument.
SCREENING_MODELS = (None, "lecuyer", "andersen")

# 4He mass (u) the 4He onset rule refers to; periodictable gives 4.002603...  Kept as a literal
# so this module does not import the element tables; a test checks it against periodictable.
_HE4_MASS_U = 4.00260325413
_H1_MASS_U = 1.00782503224


# --------------------------------------------------------------------------------------------
# helpers


def _positive_array(value, name, unit):
    arr = np.asarray(value, dtype=float)
    if not (np.all(np.isfinite(arr)) and np.all(arr > 0)):
        raise ValueError(f"{name}={value!r} {unit}; must be finite and > 0")
    return arr


def _scalar_or_array(value, *inputs):
    if all(np.ndim(x) == 0 for x in inputs):
        return float(value)
    return value


def _check_model(model, argname):
    if model not in SCREENING_MODELS:
        raise ValueError(f"{argname}={model!r} is not a screening model; choose one of "
                         "None, 'lecuyer', 'andersen'")


def _cm_angle_rad(theta_rad, mass_ratio):
    """Centre-of-mass angle for a lab angle, ``+`` branch: theta + arcsin(x sin theta)."""
    return theta_rad + np.arcsin(np.clip(mass_ratio * np.sin(theta_rad), -1.0, 1.0))


def _check_reachable(m1, m2, theta_deg):
    """Raise when a lab angle is at or beyond the largest angle (the lab form diverges there)."""
    if m1 < m2:
        return
    theta_max = max_scattering_angle_deg(m1, m2)
    bad = np.asarray(theta_deg) >= theta_max
    if np.any(bad):
        worst = float(np.max(np.asarray(theta_deg)[bad]))
        raise ValueError(
            f"scattering angle {worst:g} deg: a projectile of {m1:g} u on a target of {m2:g} u "
            f"reaches only angles below {theta_max:.6g} deg (the laboratory cross-section "
            "diverges at the largest angle)")


# --------------------------------------------------------------------------------------------
# Rutherford cross-section


def rutherford_cross_section(z1, m1, z2, m2, energy_keV, theta_deg, screening="andersen"):
    """Laboratory-frame Rutherford differential cross-section, in mb/sr.

    Parameters
    ----------
    z1, m1 : float
        Atomic number and mass (u) of the projectile.
    z2, m2 : float
        Atomic number and mass (u) of the target atom.
    energy_keV : float or array_like
        Laboratory energy of the projectile just before the collision, keV.
    theta_deg : float or array_like
        Laboratory scattering angle, degrees in (0, 180].  Broadcasts against ``energy_keV``.
    screening : {None, "lecuyer", "andersen"}
        Electron-screening correction multiplied in (see :func:`screening_factor`); ``None``
        gives the bare Rutherford value.

    Returns
    -------
    float or numpy.ndarray
        ``dsigma/dOmega`` in mb/sr (1 mb = 1e-27 cm2); a float when energy and angle are scalars.

    Notes
    -----
    The exact laboratory form for a finite mass ratio (Chu, Mayer and Nicolet, *Backscattering
    Spectrometry*, Academic Press 1978) is::

        (Z1 Z2 e^2 / 4E)^2 * 4 / sin^4(theta)
            * [sqrt(1 - (m1/m2 sin theta)^2) + cos theta]^2 / sqrt(1 - (m1/m2 sin theta)^2)

    with ``E`` the laboratory energy and ``e^2 = e^2/(4 pi eps0)`` from scipy.constants.  As
    ``m1/m2 -> 0`` it reduces to ``(Z1 Z2 e^2 / 4E)^2 / sin^4(theta/2)``.  Backward of 90 degrees
    the equivalent form ``4 (1 - x^2)^2 / (sqrt(1 - x^2 sin^2) - cos)^2`` (``x = m1/m2``) replaces
    ``4 [...]^2 / sin^4`` so that 180 degrees is computed without a 0/0.  For ``m1 >= m2`` the
    ``+`` branch is used and angles at or beyond the largest reachable angle raise ValueError.
    No ratio-to-Rutherford table is applied here; the spectrum model multiplies that in.
    """
    _check_model(screening, "screening")
    for name, value in (("z1", z1), ("z2", z2)):
        _positive_array(value, name, "(atomic number)")
    _positive_array(m1, "m1", "u")
    _positive_array(m2, "m2", "u")
    energy = _positive_array(energy_keV, "energy_keV", "keV")
    theta = np.asarray(theta_deg, dtype=float)
    if not (np.all(np.isfinite(theta)) and np.all(theta > 0) and np.all(theta <= 180)):
        raise ValueError(f"theta_deg={theta_deg!r}; the scattering angle must lie in (0, 180] deg")
    _check_reachable(float(m1), float(m2), theta)

    x = float(m1) / float(m2)
    t = np.radians(theta)
    sin_t, cos_t = np.sin(t), np.cos(t)
    root = np.sqrt(1.0 - (x * sin_t) ** 2)
    # 4 (root + cos)^2 / sin^4 is 0/0 at 180 deg.  Backward of 90 deg (only reachable when
    # m1 < m2) use the identity root + cos = (1 - x^2) sin^2 / (root - cos), which is exact and
    # smooth up to 180 deg; forward of 90 deg keep the direct form (no cancellation there).
    backward = cos_t < 0.0
    safe_sin4 = np.where(backward, 1.0, sin_t**4)
    angular = np.where(backward,
                       4.0 * (1.0 - x * x) ** 2 / (root - cos_t) ** 2,
                       4.0 * (root + cos_t) ** 2 / safe_sin4) / root
    prefactor = (float(z1) * float(z2) * E2_KEV_CM / (4.0 * energy)) ** 2  # cm2
    sigma = prefactor * angular * _CM2_TO_MB
    if screening is not None:
        sigma = sigma * screening_factor(z1, z2, energy, theta, m1, m2, model=screening)
    return _scalar_or_array(sigma, energy_keV, theta_deg)


# --------------------------------------------------------------------------------------------
# screening


def screening_factor(z1, z2, energy_keV, theta_deg=None, m1=None, m2=None, model="andersen"):
    """Electron-screening correction: the screened cross-section divided by Rutherford.

    Parameters
    ----------
    z1, z2 : float
        Atomic numbers of projectile and target.
    energy_keV : float or array_like
        *Laboratory* projectile energy, keV; converted here to the centre-of-mass energy
        ``E_CM = energy_keV * m2 / (m1 + m2)``.
    theta_deg : float or array_like, optional
        *Laboratory* scattering angle in degrees; needed by ``"andersen"`` only (converted to
        the centre-of-mass angle), ignored by ``"lecuyer"``.
    m1, m2 : float
        Projectile and target masses in u; required (they set the centre-of-mass energy).
    model : {"andersen", "lecuyer", None}
        ``"lecuyer"``: L'Ecuyer et al., Phys. Rev. A 20 (1979) 1,
        ``F = 1 - 0.049 Z1 Z2^(4/3) / E_CM`` (E_CM in keV).
        ``"andersen"``: Andersen et al., Phys. Rev. A 21 (1980) 1891,
        ``F = (1 + V1/(2 E_CM))^2 / (1 + V1/E_CM + [V1 / (2 E_CM sin(theta_CM/2))]^2)^2`` with
        ``V1 = 0.04873 Z1 Z2 sqrt(Z1^(2/3) + Z2^(2/3))`` keV.
        ``None``: no correction (returns ones).

    Returns
    -------
    float or numpy.ndarray
        ``F`` in (0, 1]; a float for scalar inputs.

    Raises
    ------
    ValueError
        For an unknown model, missing masses, a missing angle with ``"andersen"``, or an energy
        so low that the L'Ecuyer factor would not be positive (the formula is a first-order
        correction and fails there; use ``"andersen"``).

    Notes
    -----
    The constants 0.049 and 0.04873 are quoted from memory of the two papers.
    """
    _check_model(model, "model")
    if m1 is None or m2 is None:
        raise ValueError("screening_factor needs the masses m1 and m2 (u) to convert the "
                         "laboratory energy to the centre-of-mass frame")
    energy = _positive_array(energy_keV, "energy_keV", "keV")
    m1f = float(_positive_array(m1, "m1", "u"))
    m2f = float(_positive_array(m2, "m2", "u"))
    z1f = float(_positive_array(z1, "z1", "(atomic number)"))
    z2f = float(_positive_array(z2, "z2", "(atomic number)"))
    if model is None:
        out = np.ones(np.broadcast_shapes(energy.shape, np.shape(theta_deg)))
        return _scalar_or_array(out, energy_keV, theta_deg)

    e_cm = energy * m2f / (m1f + m2f)
    if model == "lecuyer":
        # L'Ecuyer et al. 1979; constant 0.049 keV from memory.
        shift = 0.049 * z1f * z2f ** (4.0 / 3.0)
        if np.any(e_cm <= shift):
            raise ValueError(
                f"L'Ecuyer screening is not defined below a centre-of-mass energy of {shift:.4g} "
                f"keV for Z1={z1f:g}, Z2={z2f:g} (lowest given: {float(np.min(e_cm)):.4g} keV); "
                "use screening='andersen'")
        out = 1.0 - shift / e_cm
        return _scalar_or_array(out, energy_keV)

    # Andersen et al. 1980; constant 0.04873 keV from memory.
    if theta_deg is None:
        raise ValueError("the 'andersen' screening model needs the scattering angle theta_deg")
    theta = np.asarray(theta_deg, dtype=float)
    if not (np.all(np.isfinite(theta)) and np.all(theta > 0) and np.all(theta <= 180)):
        raise ValueError(f"theta_deg={theta_deg!r}; the scattering angle must lie in (0, 180] deg")
    _check_reachable(m1f, m2f, theta)
    v1 = 0.04873 * z1f * z2f * math.sqrt(z1f ** (2.0 / 3.0) + z2f ** (2.0 / 3.0))
    theta_cm = _cm_angle_rad(np.radians(theta), m1f / m2f)
    a = v1 / e_cm
    out = (1.0 + 0.5 * a) ** 2 / (1.0 + a + (0.5 * a / np.sin(0.5 * theta_cm)) ** 2) ** 2
    return _scalar_or_array(out, energy_keV, theta_deg)


# --------------------------------------------------------------------------------------------
# onset of non-Rutherford scattering


class NonRutherfordWarning(UserWarning):
    """The beam energy is above the onset where nuclear forces may alter the cross-section."""


def non_rutherford_onset_keV(z1, m1, z2, m2):
    """Lab beam energy above which the backward-angle cross-section may depart from Rutherford.

    Parameters
    ----------
    z1, m1 : float
        Atomic number and mass (u) of the projectile: helium (z1 = 2, any isotope) or the
        proton (z1 = 1, m1 close to 1 u).
    z2, m2 : float
        Atomic number and mass (u) of the target atom.

    Returns
    -------
    float
        The onset energy in keV (laboratory frame); 0 means "at any energy".

    Notes
    -----
    The rule of Bozoian, Hubbard and Nastasi, Nucl. Instrum. Methods B 51 (1990) 311, also
    quoted in the Handbook of Modern Ion Beam Materials Analysis (MRS, 1995), for backward
    angles (constants from memory):

    * 4He: ``E_NR (MeV) = 0.25 Z2 + 0.4``;
    * 1H:  ``E_NR (MeV) = 0.12 Z2 - 0.5`` (clipped at 0: for the lightest targets any energy).

    For another helium isotope (3He) we keep the centre-of-mass energy of the 4He onset, since
    the Coulomb barrier the rule reflects depends on the centre-of-mass energy:
    ``E_NR(m1) = E_NR(4He) (m1 + m2) / (m_4He + m2)``.  This scaling is our own choice, not
    part of the published rule.  It is a rough guide, good to a few hundred keV at best.
    """
    z1f = float(z1)
    z2f = float(_positive_array(z2, "z2", "(atomic number)"))
    m1f = float(_positive_array(m1, "m1", "u"))
    m2f = float(_positive_array(m2, "m2", "u"))
    if z1f == 2.0:
        onset_he4_mev = 0.25 * z2f + 0.4  # Bozoian et al. 1990, from memory
        return 1e3 * onset_he4_mev * (m1f + m2f) / (_HE4_MASS_U + m2f)
    if z1f == 1.0 and abs(m1f - _H1_MASS_U) < 0.5:
        onset_h1_mev = 0.12 * z2f - 0.5  # Bozoian et al. 1990, from memory
        return 1e3 * max(onset_h1_mev, 0.0)
    raise ValueError(f"no non-Rutherford onset rule for a projectile with Z1={z1!r}, m1={m1!r} u; "
                     "the rule covers helium (Z1=2) and protons (Z1=1, m1 about 1 u)")


def check_rutherford_validity(z1, m1, z2, m2, energy_keV, label=""):
    """Warn when a beam energy is above the non-Rutherford onset for this target.

    Parameters
    ----------
    z1, m1, z2, m2 : float
        Atomic numbers and masses (u) of projectile and target atom.
    energy_keV : float or array_like
        Laboratory beam energy (or energies), keV; the largest one is checked.
    label : str, optional
        Name of the target in the message, e.g. ``"O in layer 2"``.

    Returns
    -------
    bool
        True when the energy is at or below the onset (Rutherford may be assumed); False after
        issuing a :class:`NonRutherfordWarning`.
    """
    energy = float(np.max(_positive_array(energy_keV, "energy_keV", "keV")))
    onset = non_rutherford_onset_keV(z1, m1, z2, m2)
    if energy <= onset:
        return True
    who = label or f"Z2={float(z2):g}"
    warnings.warn(
        f"{who}: beam energy {energy:.0f} keV is above the estimated non-Rutherford onset of "
        f"{onset:.0f} keV (Bozoian et al. 1990); the cross-section may differ from Rutherford. "
        "Supply a ratio-to-Rutherford table for this element or lower the beam energy.",
        NonRutherfordWarning, stacklevel=2)
    return False


# --------------------------------------------------------------------------------------------
# ratio-to-Rutherford tables


@dataclass(frozen=True, eq=False)
class RatioTable:
    """Measured cross-section divided by Rutherford, against laboratory energy.

    Attributes
    ----------
    energy_keV : numpy.ndarray
        Laboratory projectile energies, keV, strictly increasing.
    ratio : numpy.ndarray
        Cross-section / Rutherford at the run's scattering angle, finite and > 0.
    source : str
        Where the table came from (the file path), kept for provenance.
    """

    energy_keV: np.ndarray
    ratio: np.ndarray
    source: str = field(default="")

    def __call__(self, energy_keV):
        """Linearly interpolated ratio at ``energy_keV`` (keV); ValueError outside the table."""
        energy = np.asarray(energy_keV, dtype=float)
        lo, hi = float(self.energy_keV[0]), float(self.energy_keV[-1])
        outside = ~((energy >= lo) & (energy <= hi))
        if np.any(outside):
            bad = energy[outside] if energy.ndim else energy
            raise ValueError(
                f"energy {float(np.ravel(bad)[0]):g} keV is outside the ratio table "
                f"{self.source or '(unnamed)'}, which covers {lo:g} to {hi:g} keV")
        out = np.interp(energy, self.energy_keV, self.ratio)
        return float(out) if energy.ndim == 0 else out

    @property
    def energy_range_keV(self) -> tuple[float, float]:
        """Lowest and highest tabulated energies, keV."""
        return float(self.energy_keV[0]), float(self.energy_keV[-1])


_RATIO_HEADER = ("energy_keV", "ratio")


def load_ratio_table(path) -> RatioTable:
    """Read a ratio-to-Rutherford table from a small CSV file.

    The format is ours: lines starting with ``#`` are comments and blank lines are ignored; the
    first other line is the header ``energy_keV,ratio``; each following line holds a laboratory
    energy in keV and the measured cross-section divided by Rutherford at the run's scattering
    angle.  Energies must increase strictly and ratios be finite and > 0; at least two rows.

    Parameters
    ----------
    path : str or os.PathLike
        The file.

    Returns
    -------
    RatioTable

    Raises
    ------
    forward.InputError
        Naming the file and line for anything malformed.
    """
    path = Path(path)
    name = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the ratio table ({exc.__class__.__name__}); give a "
                         "readable UTF-8 CSV file", where=name) from None

    header_seen = False
    energies: list[float] = []
    ratios: list[float] = []
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        where = f"{name}: line {lineno}"
        cells = [c.strip() for c in line.split(",")]
        if not header_seen:
            if tuple(cells) != _RATIO_HEADER:
                raise InputError(f"header {line!r} not recognised; the first non-comment line "
                                 "must be 'energy_keV,ratio'", where=where)
            header_seen = True
            continue
        if len(cells) != 2:
            raise InputError(f"{len(cells)} values in {line!r}; each row holds two numbers, "
                             "energy_keV,ratio", where=where)
        try:
            energy, ratio = float(cells[0]), float(cells[1])
        except ValueError:
            raise InputError(f"cannot read {line!r} as numbers; each row holds two numbers, "
                             "energy_keV,ratio", where=where) from None
        if not (math.isfinite(energy) and energy > 0):
            raise InputError(f"energy {cells[0]!r} keV; energies must be finite and > 0",
                             where=where)
        if not (math.isfinite(ratio) and ratio > 0):
            raise InputError(f"ratio {cells[1]!r}; ratios to Rutherford must be finite and > 0",
                             where=where)
        if energies and energy <= energies[-1]:
            raise InputError(f"energy {energy:g} keV is not above the previous row's "
                             f"{energies[-1]:g} keV; energies must increase strictly", where=where)
        energies.append(energy)
        ratios.append(ratio)

    if not header_seen:
        raise InputError("the ratio table is empty; write the header 'energy_keV,ratio' and at "
                         "least two rows", where=name)
    if len(energies) < 2:
        raise InputError(f"the ratio table has {len(energies)} data row(s); at least two are "
                         "needed to interpolate", where=name)
    e = np.array(energies)
    r = np.array(ratios)
    e.setflags(write=False)
    r.setflags(write=False)
    return RatioTable(energy_keV=e, ratio=r, source=name)
