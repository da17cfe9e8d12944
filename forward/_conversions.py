"""The program's two unit conversions, each written once: channel to energy (the calibration
polynomial) and areal density to thickness in nm.

Everything that turns channels into keV (the run file's calibration, the forward model's channel
edges, the figures' energy axes) and everything that turns 1e15 atoms/cm2 into nm (a layer's
thickness, derived thicknesses and widths, depth axes) calls these functions.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.constants

__all__ = ["MAX_CHANNELS", "channel_energy_keV", "channel_of_energy", "atoms_per_cm3", "nm_from_1e15",
           "areal_density_from_nm"]

#: A calibration must increase over at least this many channels (2**16, common ADC sizes);
#: spectra hold at most this many channels (0 .. 65535) and the highest surface edge must lie
#: below channel MAX_CHANNELS.
MAX_CHANNELS = 65536

#: (1e15 atoms/cm2) / (atoms/cm3) = 1e15 cm = 1e22 nm
_NM_PER_1E15_CM = 1e22


def channel_energy_keV(channel, offset_keV, gain_keV, quadratic_keV=0.0):
    """Energy (keV) of the lower edge of ``channel``: ``offset + gain c + quadratic c^2``.

    Channel ``c`` holds the energies ``[E(c), E(c + 1))``; its centre is ``E(c + 0.5)``.

    Parameters
    ----------
    channel : float or array_like
        Channel position (may be fractional).
    offset_keV : float
        Energy of the lower edge of channel 0, keV.
    gain_keV : float
        keV per channel.
    quadratic_keV : float, optional
        keV per channel squared.

    Returns
    -------
    float or numpy.ndarray
    """
    if quadratic_keV:
        return offset_keV + gain_keV * channel + quadratic_keV * channel * channel
    return offset_keV + gain_keV * channel


def channel_of_energy(energy_keV, offset_keV, gain_keV, quadratic_keV=0.0):
    """Fractional channel position of an energy, the inverse of :func:`channel_energy_keV`.

    ``floor(channel_of_energy(E))`` is the channel holding ``E``.  With a quadratic term the
    root on the increasing branch is taken (written to avoid cancellation); an energy the
    calibration never reaches gives ``inf``.

    Returns
    -------
    float for a scalar energy, numpy.ndarray otherwise
    """
    c = offset_keV - np.asarray(energy_keV, dtype=float)
    if quadratic_keV == 0.0:
        out = -c / gain_keV
    else:
        disc = gain_keV * gain_keV - 4.0 * quadratic_keV * c
        with np.errstate(invalid="ignore"):
            out = np.where(disc < 0, math.inf, 2.0 * -c / (gain_keV + np.sqrt(disc)))
    return float(out) if np.ndim(out) == 0 else out


def atoms_per_cm3(density_g_cm3: float, mean_mass_u: float) -> float:
    """Atomic density ``rho N_A / M`` (atoms/cm3) from the mass density (g/cm3) and the mean
    atomic mass (u, numerically g/mol); Avogadro's constant from scipy.constants (CODATA)."""
    return density_g_cm3 * scipy.constants.N_A / mean_mass_u


def nm_from_1e15(areal_density_1e15, atoms_per_cm3_):
    """Thickness in nm of an areal density (1e15 atoms/cm2) at an atomic density (atoms/cm3)."""
    return areal_density_1e15 * _NM_PER_1E15_CM / atoms_per_cm3_


def areal_density_from_nm(thickness_nm, atoms_per_cm3_):
    """Areal density (1e15 atoms/cm2) of a thickness in nm at an atomic density (atoms/cm3);
    the inverse of :func:`nm_from_1e15`."""
    return thickness_nm * atoms_per_cm3_ / _NM_PER_1E15_CM
