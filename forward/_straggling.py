"""Energy straggling: Bohr's variance, a low-energy correction, and propagation along a path.

Bohr's energy-straggling variance for an ion of atomic number Z1 crossing a layer of N t atoms
per unit area of atomic number Z2 (N. Bohr, K. Dan. Vidensk. Selsk. Mat.-Fys. Medd. 18 no. 8
(1948); Chu, Mayer and Nicolet, *Backscattering Spectrometry*, Academic Press, 1978, ch. 2) is

    Omega_B^2 = 4 pi Z1^2 Z2 e^4 N t,      e^2 = q_e^2 / (4 pi eps_0),

independent of the ion energy.  It holds when the ion is fast compared with the target electrons.
At lower speeds fewer electrons take part and the variance is smaller; here that is described by
the correction of J. Lindhard and M. Scharff, K. Dan. Vidensk. Selsk. Mat.-Fys. Medd. 27 no. 15
(1953), as given by Chu, Mayer and Nicolet (1978):

    Omega^2 / Omega_B^2 = L(chi) / 2   for chi <= 3,   1 above,
    L(chi) = 1.36 chi^(1/2) - 0.016 chi^(3/2),   chi = v^2 / (Z2 v0^2),

with v0 the Bohr velocity.  As printed, L(chi)/2 exceeds 1 between chi ~ 2.28 and 3 and then
drops to 1; we cap the ratio at 1 (never above Bohr's value, which is the fast-ion limit), so the
correction is continuous.  Below chi ~ 2.28 it is exactly the printed formula.

A run file chooses the law with ``[physics] straggling`` (:data:`STRAGGLING_LAWS`):
``"lindhard-scharff"`` (the default, as above) or ``"bohr"`` (Bohr's value at every energy, no
low-energy correction).  The corrections of W. K. Chu, Phys. Rev. A 13 (1976) 2057, and of
Q. Yang, D. J. O'Connor and Z. Wang, NIM B 61 (1991) 149, are not offered: their fitted
constants are not at hand here, and we do not quote them from memory.  The spectrum model's
straggling-scale nuisance (:class:`forward.Nuisance`) multiplies whichever law is chosen.

Along a path, the variance of the ion energy obeys

    dVar/dx = -2 (dS/dE) / 1000 * Var + rate(E),

where the first term carries an existing spread (an energy spread at the entry leaves scaled by
S(E_exit) / S(E_entry) in standard deviation, the square of that in variance) and the second adds
new straggling; x is path areal density in 1e15 atoms/cm2 and S in eV/(1e15 atoms/cm2).
"""

from __future__ import annotations

from typing import Callable, Mapping

import numpy as np
from scipy import constants

from ._elements import element
from ._errors import InputError
from ._ode import _check_array, _checked_stopping, _dopri_integrate, _path_cosine

__all__ = [
    "bohr_variance",
    "lindhard_scharff_chi",
    "lindhard_scharff_ratio",
    "straggling_rate",
    "propagate",
    "CORRECTIONS",
    "STRAGGLING_LAWS",
    "STRAGGLING_EXPONENTS",
]

#: e^2 / (4 pi eps_0) in keV cm, from CODATA values in scipy.constants.
_E2_KEV_CM = constants.e ** 2 / (4.0 * np.pi * constants.epsilon_0) / (1e3 * constants.e) * 1e2

#: Kinetic energy of one unified atomic mass unit moving at the Bohr velocity alpha*c, in keV:
#: 0.5 * m_u c^2 * alpha^2 (about 24.8 keV).  chi = E / (this * M1[u] * Z2).
_BOHR_SPEED_KEV_PER_U = (0.5 * constants.physical_constants["atomic mass constant energy "
                                                            "equivalent in MeV"][0] * 1e3
                         * constants.fine_structure ** 2)

#: Relative step of the central difference for dS/dE.  Truncation error is of order h^2 relative
#: (about 1e-8 for a stopping curve that changes on the scale of E itself) and rounding error of
#: order eps/h (about 2e-12); a larger step than the optimum eps^(1/3) ~ 6e-6 keeps the
#: derivative safe from stopping functions with small relative noise, e.g. tabulated ones.
_DERIVATIVE_REL_STEP = 1e-4

#: Low-energy corrections that :func:`straggling_rate` knows.
CORRECTIONS = ("lindhard-scharff", "none")

#: Straggling laws a run file can choose (``[physics] straggling``), each with the
#: low-energy correction :func:`straggling_rate` applies for it; the first is the default.
STRAGGLING_LAWS = {"lindhard-scharff": "lindhard-scharff", "bohr": "none"}
#: each law as the exponent of the Lindhard-Scharff ratio in ``Bohr * ratio**a``
#: (``forward.Nuisance.straggling_correction``)
STRAGGLING_EXPONENTS = {"lindhard-scharff": 1.0, "bohr": 0.0}


def bohr_variance(z1, z2, areal_density_1e15):
    """Bohr's energy-straggling variance, keV^2.

    ``Omega_B^2 = 4 pi Z1^2 Z2 e^4 N t`` with ``e^2 = q_e^2/(4 pi eps_0)`` from scipy.constants
    (N. Bohr 1948; Chu, Mayer and Nicolet 1978).  About 0.26 Z1^2 Z2 keV^2 per 1e18 atoms/cm2.

    Parameters
    ----------
    z1 : int or array_like
        Atomic number of the ion.
    z2 : float or array_like
        Atomic number of the target atoms (an atom-fraction weighted mean for a mixture).
    areal_density_1e15 : float or array_like
        Areal density of the path, 1e15 atoms/cm2 (>= 0).

    Returns
    -------
    float or numpy.ndarray
        Variance in keV^2.
    """
    func = "bohr_variance"
    z1 = _check_array(z1, "z1", func, minimum=1.0)
    z2 = _check_array(z2, "z2", func, minimum=1.0)
    nt = _check_array(areal_density_1e15, "areal_density_1e15", func)
    out = 4.0 * np.pi * z1 ** 2 * z2 * _E2_KEV_CM ** 2 * nt * 1e15
    return float(out) if np.ndim(out) == 0 else out


def lindhard_scharff_chi(m1, z2, energy_keV):
    """Reduced energy ``chi = v^2 / (Z2 v0^2)`` of the Lindhard-Scharff correction.

    ``chi = E / (0.5 m_u (alpha c)^2 * M1 * Z2)``: the ion's speed squared over the Bohr speed
    squared, per target electron (CODATA constants from scipy.constants; about E/(24.8 keV M1 Z2)).

    Parameters
    ----------
    m1 : float or array_like
        Ion mass, u.
    z2 : float or array_like
        Atomic number of the target atom.
    energy_keV : float or array_like
        Ion energy, keV (>= 0).

    Returns
    -------
    float or numpy.ndarray
        chi (dimensionless).
    """
    out = np.asarray(energy_keV, dtype=float) / (_BOHR_SPEED_KEV_PER_U * np.asarray(m1, dtype=float)
                                                 * np.asarray(z2, dtype=float))
    return float(out) if np.ndim(out) == 0 else out


def lindhard_scharff_ratio(chi):
    """Ratio of the straggling variance to Bohr's, after Lindhard and Scharff (1953).

    ``L(chi)/2`` with ``L(chi) = 1.36 chi^(1/2) - 0.016 chi^(3/2)`` for chi <= 3 and 1 above
    (J. Lindhard and M. Scharff, K. Dan. Vidensk. Selsk. Mat.-Fys. Medd. 27 no. 15 (1953), as
    given by Chu, Mayer and Nicolet, 1978), capped at 1: the printed formula exceeds 1 for
    chi between about 2.28 and 3, where we take Bohr's value instead.

    Parameters
    ----------
    chi : float or array_like
        Reduced energy, see :func:`lindhard_scharff_chi` (>= 0).

    Returns
    -------
    float or numpy.ndarray
        Ratio in [0, 1]; 0 only at chi = 0.
    """
    chi = np.asarray(chi, dtype=float)
    root = np.sqrt(np.maximum(chi, 0.0))
    half_l = 0.5 * (1.36 * root - 0.016 * root ** 3)
    out = np.where(chi <= 3.0, np.minimum(half_l, 1.0), 1.0)
    return float(out) if out.ndim == 0 else out


def straggling_rate(z1, m1, fractions: Mapping[str, float], energy_keV, *,
                    correction: str = "lindhard-scharff"):
    """Straggling variance per unit path areal density in a mixture, keV^2 per 1e15 atoms/cm2.

    Additive over the target atoms (each with its own low-energy correction):
    ``rate = sum_i f_i * Omega_B^2(Z1, Z2_i, 1) * ratio(chi_i(E))``.

    Parameters
    ----------
    z1 : int
        Atomic number of the ion.
    m1 : float
        Ion mass, u.
    fractions : mapping of str to float
        ``{symbol: atom fraction}``, fractions >= 0; normalised to sum 1 (as in
        :meth:`forward._stopping.StoppingModel.mixture`).
    energy_keV : float or array_like
        Ion energy, keV (>= 0).
    correction : {"lindhard-scharff", "none"}, optional
        Low-energy correction to Bohr's value; "none" gives Bohr's energy-independent value.

    Returns
    -------
    float or numpy.ndarray
        keV^2 per 1e15 atoms/cm2 of path, shaped like ``energy_keV``.
    """
    func = "straggling_rate"
    if correction not in CORRECTIONS:
        raise InputError(f"unknown straggling correction {correction!r}; allowed: "
                         + ", ".join(repr(c) for c in CORRECTIONS), where=f"{func}: correction")
    if not isinstance(fractions, Mapping) or not fractions:
        raise InputError("fractions must be a non-empty {symbol: atom fraction} mapping, e.g. "
                         "{'Si': 1/3, 'O': 2/3}", where=f"{func}: fractions")
    try:
        values = np.array([float(v) for v in fractions.values()])
    except (TypeError, ValueError):
        values = np.array([np.nan])
    if not np.all(np.isfinite(values) & (values >= 0.0)) or not values.sum() > 0.0:
        raise InputError(f"atom fractions must be finite, >= 0 and not all 0; got "
                         f"{dict(fractions)!r}", where=f"{func}: fractions")
    total = float(values.sum())
    m1 = float(_check_array(m1, "m1", func))
    energy = _check_array(energy_keV, "energy_keV", func)
    rate = np.zeros(energy.shape)
    for symbol, frac in zip(fractions, values / total):
        if frac == 0.0:
            continue
        z2 = element(symbol).z
        per_atom = bohr_variance(z1, z2, 1.0)
        if correction == "lindhard-scharff":
            per_atom = per_atom * lindhard_scharff_ratio(lindhard_scharff_chi(m1, z2, energy))
        rate = rate + float(frac) * per_atom
    return float(rate) if rate.ndim == 0 else rate


def propagate(stopping_fn: Callable, rate_fn: Callable, energy_keV, variance_keV2,
              areal_density_1e15, angle_deg=0.0, *, tol_keV: float = 1e-4):
    """Carry an ion's energy and energy variance along a path.

    Integrates, over a path of areal density ``areal_density_1e15 / cos(angle_deg)``,

        dE/dx = -S(E)/1000,     dVar/dx = -2 (dS/dE)/1000 * Var + rate(E),

    with the adaptive Dormand-Prince 5(4) integrator of :mod:`forward._ode`.  dS/dE is a
    central finite difference of ``stopping_fn`` with relative step 1e-4 (see
    ``_DERIVATIVE_REL_STEP``).

    Parameters
    ----------
    stopping_fn : callable
        ``stopping_fn(energy_keV) -> eV/(1e15 atoms/cm2)``, vectorised, positive for E > 0.
    rate_fn : callable
        ``rate_fn(energy_keV) -> keV^2 per 1e15 atoms/cm2`` (e.g. a partial of
        :func:`straggling_rate`), vectorised, >= 0.
    energy_keV : float or array_like
        Energy at the start of the path, keV (>= 0).
    variance_keV2 : float or array_like
        Energy variance at the start, keV^2 (>= 0).
    areal_density_1e15 : float or array_like
        Areal density of the layer along the sample normal, 1e15 atoms/cm2 (>= 0).
    angle_deg : float or array_like, optional
        Angle of the path from the sample normal, degrees, 0 <= angle < 90.
    tol_keV : float, optional
        Error allowed in the final energy, keV; the variance is integrated to about 1e-7
        relative.

    Returns
    -------
    energy_keV, variance_keV2 : float or numpy.ndarray
        At the end of the path (broadcast shape of the inputs).  Both are exactly 0 for an ion
        that stops in the layer.
    """
    func = "propagate"
    e0 = _check_array(energy_keV, "energy_keV", func)
    v0 = _check_array(variance_keV2, "variance_keV2", func)
    n = _check_array(areal_density_1e15, "areal_density_1e15", func)
    cos_a = _path_cosine(angle_deg, "angle_deg", func)
    if not (np.isfinite(tol_keV) and tol_keV > 0):
        raise InputError(f"tol_keV must be a positive number; got {tol_keV!r}", where=f"{func}: tol_keV")
    e0, v0, n, cos_a = np.broadcast_arrays(e0, v0, n, cos_a)
    shape = e0.shape
    s_fn = _checked_stopping(stopping_fn, func)
    h = _DERIVATIVE_REL_STEP

    def checked_rate(energy):
        r = np.asarray(rate_fn(energy), dtype=float)
        if not np.all(np.isfinite(r) & (r >= 0.0)):
            raise InputError("the straggling rate function returned a negative or non-finite "
                             "value; it must be >= 0 keV^2 per 1e15 atoms/cm2",
                             where=f"{func}: rate_fn")
        return np.broadcast_to(r, np.shape(energy))

    def rhs(y):
        e, var = y[0], y[1]
        m = e.size
        s_all = s_fn(np.concatenate((e, e * (1.0 + h), e * (1.0 - h))))
        s, s_up, s_down = s_all[:m], s_all[m:2 * m], s_all[2 * m:]
        ds_de = (s_up - s_down) / (2.0 * h * e)
        return np.stack((-s / 1000.0, -2.0 * ds_de / 1000.0 * var + checked_rate(e)))

    y0 = np.stack((e0.ravel(), v0.ravel())).astype(float)
    y = _dopri_integrate(rhs, y0, (n / cos_a).ravel(), tol_keV)
    e_out, v_out = y[0].reshape(shape), y[1].reshape(shape)
    if e_out.ndim == 0:
        return float(e_out), float(v_out)
    return e_out, v_out
