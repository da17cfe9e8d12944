"""Energy loss along a straight path through a target, and the slow reference for one depth.

A layer of areal density ``N`` (1e15 atoms/cm2, measured along the sample normal) crossed at an
angle ``a`` from the normal is a path of areal density ``N / cos(a)``.  Along the path the ion
loses energy at the rate

    dE/dx = -S(E) / 1000      [keV per 1e15 atoms/cm2],

with ``S`` the stopping cross-section in eV/(1e15 atoms/cm2) (the factor 1000 turns eV into keV).
This is the usual continuous-slowing-down description of ion backscattering (W. K. Chu,
J. W. Mayer and M.-A. Nicolet, *Backscattering Spectrometry*, Academic Press, 1978, ch. 2-3).

Every function takes the stopping as a plain callable ``stopping_fn(energy_keV)`` returning
eV/(1e15 atoms/cm2), vectorised over a numpy array of energies, so this module does not depend
on how stopping is computed.

The integrator is the explicit Runge-Kutta pair of J. R. Dormand and P. J. Prince, "A family of
embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6 (1980) 19-26 (order 5 with an embedded
order-4 error estimate), with a per-energy adaptive step, vectorised over many energies at once;
it lives in :mod:`forward._ode`, shared with :func:`forward._straggling.propagate`, which
carries the energy variance (imported here for :func:`detected_energy`; it does not import
this module back).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
from scipy.integrate import quad_vec

from ._errors import InputError
from ._ode import StoppingFn, _check_array, _checked_stopping, _dopri_integrate, _path_cosine
from ._straggling import propagate

__all__ = [
    "energy_after_path",
    "path_to_energy",
    "stopping_cross_section_factor",
    "mean_energy_stopping_factor",
    "Slab",
    "detected_energy",
]


def _energy_rhs(stopping_fn):
    def rhs(y):
        return -stopping_fn(y[0])[None, :] / 1000.0
    return rhs


# --------------------------------------------------------------------------------------------
# public functions


def energy_after_path(stopping_fn: StoppingFn, energy_keV, areal_density_1e15, angle_deg=0.0,
                      *, tol_keV: float = 1e-4):
    """Energy of an ion after crossing a layer at an angle.

    Integrates ``dE/dx = -S(E)/1000`` over a path of areal density
    ``areal_density_1e15 / cos(angle_deg)`` with an adaptive Dormand-Prince 5(4) step.

    Parameters
    ----------
    stopping_fn : callable
        ``stopping_fn(energy_keV) -> eV/(1e15 atoms/cm2)``, vectorised, positive for E > 0.
    energy_keV : float or array_like
        Energy on entering the layer, keV (>= 0).
    areal_density_1e15 : float or array_like
        Areal density of the layer along the sample normal, 1e15 atoms/cm2 (>= 0).
    angle_deg : float or array_like, optional
        Angle of the path from the sample normal, degrees, 0 <= angle < 90.
    tol_keV : float, optional
        Error allowed in the final energy, keV (default 1e-4 keV).

    Returns
    -------
    float or numpy.ndarray
        Energy after the path in keV (broadcast shape of the inputs).  Exactly 0 when the ion
        stops inside the layer; never negative.
    """
    func = "energy_after_path"
    e0 = _check_array(energy_keV, "energy_keV", func)
    n = _check_array(areal_density_1e15, "areal_density_1e15", func)
    cos_a = _path_cosine(angle_deg, "angle_deg", func)
    if not (np.isfinite(tol_keV) and tol_keV > 0):
        raise InputError(f"tol_keV must be a positive number; got {tol_keV!r}", where=f"{func}: tol_keV")
    e0, n, cos_a = np.broadcast_arrays(e0, n, cos_a)
    shape = e0.shape
    y = _dopri_integrate(_energy_rhs(_checked_stopping(stopping_fn, func)),
                         e0.reshape(1, -1), (n / cos_a).ravel(), tol_keV)
    out = y[0].reshape(shape)
    return float(out) if out.ndim == 0 else out


def path_to_energy(stopping_fn: StoppingFn, energy_keV, final_energy_keV, angle_deg=0.0):
    """Areal density of a layer that slows an ion from one energy to another.

    Evaluates ``N = cos(angle) * 1000 * integral(dE / S(E), E_final..E)`` by adaptive
    Gauss-Kronrod quadrature (``scipy.integrate.quad_vec``, relative tolerance 1e-11), after
    the change of variable ``E = E_final + (E - E_final) u^2``, which removes the integrable
    singularity at ``E_final = 0`` for stopping that vanishes like a power of E.

    Parameters
    ----------
    stopping_fn : callable
        ``stopping_fn(energy_keV) -> eV/(1e15 atoms/cm2)``, vectorised, positive for E > 0.
    energy_keV : float or array_like
        Energy on entering the layer, keV (>= 0).
    final_energy_keV : float or array_like
        Energy on leaving the layer, keV, 0 <= final <= energy_keV (0 gives the range).
    angle_deg : float or array_like, optional
        Angle of the path from the sample normal, degrees, 0 <= angle < 90.

    Returns
    -------
    float or numpy.ndarray
        Areal density along the sample normal, 1e15 atoms/cm2.
    """
    func = "path_to_energy"
    e0 = _check_array(energy_keV, "energy_keV", func)
    e1 = _check_array(final_energy_keV, "final_energy_keV", func)
    cos_a = _path_cosine(angle_deg, "angle_deg", func)
    e0, e1, cos_a = np.broadcast_arrays(e0, e1, cos_a)
    if np.any(e1 > e0):
        raise InputError("final_energy_keV must not exceed energy_keV (an ion only loses "
                         "energy along a path)", where=f"{func}: final_energy_keV")
    shape = e0.shape
    e0, e1, cos_a = e0.ravel(), e1.ravel(), cos_a.ravel()
    span = e0 - e1
    live = span > 0
    out = np.zeros(e0.shape)
    if live.any():
        s_fn = _checked_stopping(stopping_fn, func)
        lo, d = e1[live], span[live]

        def integrand(u):
            if u == 0.0:
                return np.zeros_like(d)
            return 2.0 * d * u / s_fn(lo + d * u * u)

        value, _err = quad_vec(integrand, 0.0, 1.0, epsabs=0.0, epsrel=1e-11, norm="max",
                               limit=2000)
        out[live] = 1000.0 * value * cos_a[live]
    out = out.reshape(shape)
    return float(out) if out.ndim == 0 else out


def stopping_cross_section_factor(k, stopping_in_fn: StoppingFn, stopping_out_fn: StoppingFn,
                                  energy_keV, incidence_deg, exit_deg):
    """Stopping cross-section factor in the surface-energy approximation.

    ``[eps_0] = K eps_in(E0) / cos(theta_1) + eps_out(K E0) / cos(theta_2)``
    (Chu, Mayer and Nicolet, *Backscattering Spectrometry*, 1978, ch. 3).  The energy width of
    the signal from a thin layer of areal density N at the surface is ``[eps_0] N / 1000`` keV.

    Parameters
    ----------
    k : float or array_like
        Kinematic factor of the scattering atom (0 < k <= 1).
    stopping_in_fn, stopping_out_fn : callable
        Stopping of the medium on the inward and outward paths,
        ``f(energy_keV) -> eV/(1e15 atoms/cm2)`` (the same function for a uniform layer).
    energy_keV : float or array_like
        Beam energy E0, keV (> 0).
    incidence_deg, exit_deg : float or array_like
        Angles of the inward and outward paths from the sample normal, degrees, in [0, 90).

    Returns
    -------
    float or numpy.ndarray
        [eps_0] in eV/(1e15 atoms/cm2).
    """
    func = "stopping_cross_section_factor"
    k = _check_kinematic(k, func)
    e0 = _check_array(energy_keV, "energy_keV", func)
    cos1 = _path_cosine(incidence_deg, "incidence_deg", func)
    cos2 = _path_cosine(exit_deg, "exit_deg", func)
    s_in = np.asarray(stopping_in_fn(e0), dtype=float)
    s_out = np.asarray(stopping_out_fn(k * e0), dtype=float)
    out = k * s_in / cos1 + s_out / cos2
    return float(out) if np.ndim(out) == 0 else out


def mean_energy_stopping_factor(k, stopping_in_fn: StoppingFn, stopping_out_fn: StoppingFn,
                                energy_keV, areal_density_1e15, incidence_deg, exit_deg):
    """Stopping cross-section factor in the mean-energy approximation for a layer.

    For a uniform layer of areal density N, the inward stopping is taken at the mean of the
    energies at the surface and at depth N, and the outward stopping at the mean of the energies
    just after scattering and on leaving the surface (Chu, Mayer and Nicolet, 1978, ch. 3).  The
    energies are computed here by path integration, so ``[eps] N / 1000`` is the energy width of
    the layer's signal to second order in N.

    Parameters
    ----------
    k : float or array_like
        Kinematic factor (0 < k <= 1).
    stopping_in_fn, stopping_out_fn : callable
        Stopping on the inward and outward paths, eV/(1e15 atoms/cm2).
    energy_keV : float or array_like
        Beam energy E0, keV (> 0).
    areal_density_1e15 : float or array_like
        Areal density of the layer along the normal, 1e15 atoms/cm2.
    incidence_deg, exit_deg : float or array_like
        Angles of the inward and outward paths from the sample normal, degrees, in [0, 90).

    Returns
    -------
    float or numpy.ndarray
        [eps] in eV/(1e15 atoms/cm2).
    """
    func = "mean_energy_stopping_factor"
    k = _check_kinematic(k, func)
    e0 = _check_array(energy_keV, "energy_keV", func)
    cos1 = _path_cosine(incidence_deg, "incidence_deg", func)
    cos2 = _path_cosine(exit_deg, "exit_deg", func)
    e_depth = energy_after_path(stopping_in_fn, e0, areal_density_1e15, incidence_deg, tol_keV=1e-7)
    e_out = energy_after_path(stopping_out_fn, k * e_depth, areal_density_1e15, exit_deg,
                              tol_keV=1e-7)
    s_in = np.asarray(stopping_in_fn(0.5 * (e0 + e_depth)), dtype=float)
    s_out = np.asarray(stopping_out_fn(0.5 * (k * e_depth + e_out)), dtype=float)
    out = k * s_in / cos1 + s_out / cos2
    return float(out) if np.ndim(out) == 0 else out


def _check_kinematic(k, func: str) -> np.ndarray:
    k = _check_array(k, "k", func)
    if np.any((k <= 0.0) | (k > 1.0)):
        raise InputError(f"kinematic factor k must be in (0, 1]; got {k!r}", where=f"{func}: k")
    return k


# --------------------------------------------------------------------------------------------
# the slow, accurate reference for one scattering depth


@dataclass(frozen=True)
class Slab:
    """One uniform slab of a target, for :func:`detected_energy`.

    Attributes
    ----------
    stopping_fn : callable
        ``stopping_fn(energy_keV) -> eV/(1e15 atoms/cm2)`` of the slab's material, vectorised.
    straggling_rate_fn : callable
        ``rate(energy_keV) -> keV^2 per 1e15 atoms/cm2`` of path (see
        :func:`forward._straggling.straggling_rate`), vectorised.
    areal_density_1e15 : float
        Areal density along the sample normal, 1e15 atoms/cm2 (>= 0).
    """

    stopping_fn: StoppingFn
    straggling_rate_fn: Callable[[np.ndarray], np.ndarray]
    areal_density_1e15: float


def detected_energy(slabs: Sequence[Slab], k, depth_1e15, energy_keV, incidence_deg, exit_deg,
                    *, straggling: bool = True, tol_keV: float = 1e-5):
    """Energy and energy variance of an ion backscattered at a given depth.

    The ion enters at ``incidence_deg``, crosses the slabs from the surface down to
    ``depth_1e15`` (measured along the normal), scatters with kinematic factor ``k`` (energy
    times k, variance times k^2), and leaves along ``exit_deg`` back through the same slabs to
    the surface.  Energy and variance are carried by :func:`forward._straggling.propagate`.
    This is the slow, accurate reference against which the spectrum model is tested.

    Parameters
    ----------
    slabs : sequence of Slab
        The target from the surface down.
    k : float or array_like
        Kinematic factor of the scattering atom (0 < k <= 1).
    depth_1e15 : float or array_like
        Scattering depth along the normal, 1e15 atoms/cm2, between 0 and the total of the slabs.
    energy_keV : float or array_like
        Beam energy, keV (>= 0); a beam energy spread is not included (add it separately).
    incidence_deg, exit_deg : float
        Angles of the inward and outward paths from the sample normal, degrees, in [0, 90).
    straggling : bool, optional
        Carry the energy variance (default).  If False the variance returned is 0.
    tol_keV : float, optional
        Error allowed in each path integration, keV.

    Returns
    -------
    energy_before_keV, energy_detected_keV, variance_keV2 : float or numpy.ndarray
        Energy just before scattering, energy on leaving the surface (0 if the ion stops) and the
        energy variance on leaving the surface (0 if the ion stops), broadcast over ``k``,
        ``depth_1e15`` and ``energy_keV``.
    """
    func = "detected_energy"
    if not slabs:
        raise InputError("the target has no slab; give at least one", where=f"{func}: slabs")
    k = _check_kinematic(k, func)
    depth = _check_array(depth_1e15, "depth_1e15", func)
    e0 = _check_array(energy_keV, "energy_keV", func)
    _path_cosine(incidence_deg, "incidence_deg", func)
    _path_cosine(exit_deg, "exit_deg", func)
    thick = np.array([_check_array(s.areal_density_1e15, "areal_density_1e15", func)
                      for s in slabs], dtype=float)
    total = float(thick.sum())
    if np.any(depth > total * (1.0 + 1e-12)):
        raise InputError(f"depth_1e15 must lie within the target (0 to {total:g} 1e15 atoms/cm2); "
                         f"got {depth_1e15!r}", where=f"{func}: depth_1e15")
    k, depth, e0 = np.broadcast_arrays(k, depth, e0)
    tops = np.concatenate(([0.0], np.cumsum(thick)[:-1]))
    crossing = [np.clip(depth - top, 0.0, t) for top, t in zip(tops, thick)]

    energy = e0.astype(float)
    variance = np.zeros_like(energy)
    for slab, dx in zip(slabs, crossing):
        if straggling:
            energy, variance = propagate(slab.stopping_fn, slab.straggling_rate_fn, energy,
                                         variance, dx, incidence_deg, tol_keV=tol_keV)
        else:
            energy = energy_after_path(slab.stopping_fn, energy, dx, incidence_deg, tol_keV=tol_keV)
    before = np.asarray(energy, dtype=float)
    energy = k * before
    variance = k * k * np.asarray(variance, dtype=float)
    for slab, dx in zip(reversed(slabs), reversed(crossing)):
        if straggling:
            energy, variance = propagate(slab.stopping_fn, slab.straggling_rate_fn, energy,
                                         variance, dx, exit_deg, tol_keV=tol_keV)
        else:
            energy = energy_after_path(slab.stopping_fn, energy, dx, exit_deg, tol_keV=tol_keV)
    energy = np.asarray(energy, dtype=float)
    variance = np.where(energy > 0.0, np.asarray(variance, dtype=float), 0.0)
    if not straggling:
        variance = np.zeros_like(energy)
    if before.ndim == 0:
        return float(before), float(energy), float(variance)
    return before, energy, variance
