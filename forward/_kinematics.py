"""Kinematics of one elastic collision: the kinematic factor and the largest lab angle.

A projectile of mass ``m1`` (u) and energy ``E0`` scatters elastically from a target atom of
mass ``m2`` at rest, through the laboratory angle ``theta``.  Energy and momentum conservation
give the energy after the collision as ``E1 = K E0`` with the kinematic factor

    K = [ (sqrt(m2^2 - m1^2 sin^2 theta) + m1 cos theta) / (m1 + m2) ]^2

(W.-K. Chu, J. W. Mayer and M.-A. Nicolet, *Backscattering Spectrometry*, Academic Press 1978).
Angles here are scattering angles in the laboratory frame, in degrees.

When ``m1 < m2`` every angle from 0 to 180 degrees is reachable and the root is unique.  When
``m1 >= m2`` the projectile cannot be turned further than ``arcsin(m2 / m1)``; below that angle
two energies are possible and we take the ``+`` root (the more energetic projectile, i.e. the
smaller centre-of-mass angle), which is the branch the cross-section module uses as well.
"""

from __future__ import annotations

import numpy as np

__all__ = ["kinematic_factor", "max_scattering_angle_deg"]

# Relative tolerance used when an angle sits exactly on the largest reachable angle: round-off
# can make m2^2 - m1^2 sin^2(theta) a tiny negative number there.
_EDGE_RTOL = 1e-12


def _as_masses(m1, m2):
    m1 = np.asarray(m1, dtype=float)
    m2 = np.asarray(m2, dtype=float)
    if not (np.all(np.isfinite(m1)) and np.all(m1 > 0)):
        raise ValueError(f"projectile mass m1={m1!r} u; must be finite and > 0")
    if not (np.all(np.isfinite(m2)) and np.all(m2 > 0)):
        raise ValueError(f"target mass m2={m2!r} u; must be finite and > 0")
    return m1, m2


def _as_angle(theta_deg):
    theta_deg = np.asarray(theta_deg, dtype=float)
    if not (np.all(np.isfinite(theta_deg)) and np.all(theta_deg >= 0) and np.all(theta_deg <= 180)):
        raise ValueError(f"scattering angle theta_deg={theta_deg!r}; must lie in [0, 180] degrees")
    return theta_deg


def _scalar_or_array(value, *inputs):
    """Return a Python float when every input was a scalar, else the array."""
    if all(np.ndim(x) == 0 for x in inputs):
        return float(value)
    return value


def max_scattering_angle_deg(m1, m2):
    """Largest laboratory scattering angle reachable in an elastic collision.

    Parameters
    ----------
    m1 : float or array_like
        Projectile mass in u.
    m2 : float or array_like
        Target mass in u.

    Returns
    -------
    float or numpy.ndarray
        180 degrees where ``m1 < m2``; ``degrees(arcsin(m2 / m1))`` where ``m1 >= m2`` (90 degrees
        for equal masses).  Broadcasts over its arguments.
    """
    m1a, m2a = _as_masses(m1, m2)
    ratio = np.clip(m2a / m1a, 0.0, 1.0)
    out = np.where(m1a < m2a, 180.0, np.degrees(np.arcsin(ratio)))
    return _scalar_or_array(out, m1, m2)


def kinematic_factor(m1, m2, theta_deg):
    """Exact elastic two-body kinematic factor ``K = E_after / E_before``.

    Parameters
    ----------
    m1 : float or array_like
        Projectile mass in u.
    m2 : float or array_like
        Target mass in u.
    theta_deg : float or array_like
        Laboratory scattering angle in degrees, 0 to 180.

    Returns
    -------
    float or numpy.ndarray
        ``K`` in (0, 1] (it is 0 only for equal masses at exactly 90 degrees).  A Python float
        when every argument is a scalar; otherwise an array of the broadcast shape.

    Raises
    ------
    ValueError
        If a mass is not positive, an angle lies outside [0, 180] degrees, or ``m1 >= m2`` and the
        angle is beyond the largest reachable angle :func:`max_scattering_angle_deg`.

    Notes
    -----
    For ``m1 > m2`` two energies satisfy the conservation laws below the largest angle; this
    function returns the ``+`` root, ``sqrt(m2^2 - m1^2 sin^2 theta) + m1 cos theta``.
    """
    m1a, m2a = _as_masses(m1, m2)
    th = _as_angle(theta_deg)
    m1a, m2a, th = np.broadcast_arrays(m1a, m2a, th)
    theta_max = np.asarray(max_scattering_angle_deg(m1a, m2a))
    beyond = th > theta_max * (1.0 + _EDGE_RTOL)
    if np.any(beyond):
        i = np.flatnonzero(beyond.ravel())[0]
        raise ValueError(
            f"scattering angle {th.ravel()[i]:g} deg is not reachable for projectile mass "
            f"{m1a.ravel()[i]:g} u on target mass {m2a.ravel()[i]:g} u; the largest angle is "
            f"{theta_max.ravel()[i]:.6g} deg (a projectile at least as heavy as the target cannot "
            "be scattered further)")
    t = np.radians(th)
    root = np.sqrt(np.clip(m2a**2 - (m1a * np.sin(t)) ** 2, 0.0, None))
    k = ((root + m1a * np.cos(t)) / (m1a + m2a)) ** 2
    return _scalar_or_array(k, m1, m2, theta_deg)
