"""Small numerical helpers shared by :mod:`forward._path` and :mod:`forward._straggling`.

Both modules integrate ordinary differential equations along an ion's path: the energy alone
(:func:`forward._path.energy_after_path`) or the energy and its variance
(:func:`forward._straggling.propagate`).  The integrator and the argument checks they share live
here, so that neither module has to import the other for them.

The integrator is the explicit Runge-Kutta pair of J. R. Dormand and P. J. Prince, "A family of
embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6 (1980) 19-26 (order 5 with an embedded
order-4 error estimate), with a per-energy adaptive step, vectorised over many energies at once.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from ._errors import InputError

__all__: list[str] = []  # private helpers only

StoppingFn = Callable[[np.ndarray], np.ndarray]

# --------------------------------------------------------------------------------------------
# Dormand-Prince 5(4) tableau (Dormand & Prince 1980, table 2).  The right-hand sides here do
# not depend on the path coordinate itself, so the nodes c_i are not needed.
_A = (
    (),
    (1 / 5,),
    (3 / 40, 9 / 40),
    (44 / 45, -56 / 15, 32 / 9),
    (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
    (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
    (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84),
)
#: Order-5 weights (equal to the last row of _A: the "first same as last" property).
_B5 = (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0)
#: Order-4 weights of the embedded solution.
_B4 = (5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40)
#: Difference b5 - b4: the local error estimate of the order-4 solution.
_E = tuple(b5 - b4 for b5, b4 in zip(_B5, _B4))

_MAX_STEPS = 20000          # per call; a smooth stopping curve needs a few tens
#: Smallest local error allowed in one step, as a fraction of the tolerance.  Where the stopping
#: function jumps (e.g. where a model switches between two fitted forms) the local error falls
#: only like h, as does the relative allowance; the floor lets the step shrink across the jump
#: and pass, at a cost of at most this fraction of the tolerance per such step.
_ERROR_FLOOR = 1e-3
_SAFETY = 0.9
_MIN_FACTOR, _MAX_FACTOR = 0.2, 5.0


def _dopri_integrate(rhs, y0, length, energy_tol_keV, variance_rtol=1e-7,
                     variance_atol_keV2=1e-10, first_loss_fraction=0.05):
    """Integrate ``dy/dx = rhs(y)`` over path lengths ``length`` (one per column).

    Row 0 of ``y`` is the energy in keV; an optional row 1 is an energy variance in keV^2.
    Each column has its own adaptive step.  The local error allowed in a step is
    ``energy_tol_keV * max(h / length, |dE| / E_start, 1e-3)``; the first two terms add up to at
    most ``2 * energy_tol_keV`` over the whole path whether the ion crosses it or stops in it,
    and the floor only matters across a jump in the stopping function (``_ERROR_FLOOR``); the
    order-5 solution is kept (local extrapolation), so the true error is usually far smaller.
    An ion whose energy falls below ``energy_tol_keV`` is stopped: energy and variance are set
    to exactly 0 (the true final energy lies between 0 and the current one, so this is within
    the tolerance).

    Returns the final ``y`` (same shape as ``y0``).
    """
    y = np.array(y0, dtype=float, copy=True)
    nrow, n = y.shape
    length = np.asarray(length, dtype=float)
    x = np.zeros(n)
    e_start = y[0].copy()
    done = (length <= 0.0) | (y[0] <= energy_tol_keV)
    stopped = (y[0] <= energy_tol_keV) & (length > 0.0)
    y[:, stopped] = 0.0

    idx0 = np.flatnonzero(~done)
    if idx0.size == 0:
        return y
    # first step: lose about 5 % of the energy, at most the whole path
    k1_all = np.zeros_like(y)
    k1_all[:, idx0] = rhs(y[:, idx0])
    slope = np.abs(k1_all[0, idx0])
    h = np.zeros(n)
    h[idx0] = np.minimum(length[idx0],
                         first_loss_fraction * y[0, idx0] / np.maximum(slope, 1e-300))

    for _ in range(_MAX_STEPS):
        idx = np.flatnonzero(~done)
        if idx.size == 0:
            return y
        yi = y[:, idx]
        hi = np.minimum(h[idx], length[idx] - x[idx])
        k = [k1_all[:, idx]]
        bad = np.zeros(idx.size, dtype=bool)
        for s in range(1, 7):
            ys = yi + hi * sum(a * kj for a, kj in zip(_A[s], k) if a != 0.0)
            bad |= ~(ys[0] > 0.0)          # an energy at or below zero (or nan) in a stage
            ys[:, bad] = yi[:, bad]        # evaluate something harmless; rejected below
            k.append(rhs(ys))
        y5 = yi + hi * sum(b * kj for b, kj in zip(_B5, k) if b != 0.0)
        err = hi * sum(e * kj for e, kj in zip(_E, k) if e != 0.0)
        bad |= ~(y5[0] > 0.0)

        loss = np.abs(y5[0] - yi[0])
        allowed_e = energy_tol_keV * np.maximum(np.maximum(hi / length[idx], loss / e_start[idx]),
                                                _ERROR_FLOOR)
        ratio = np.abs(err[0]) / np.maximum(allowed_e, 1e-300)
        if nrow > 1:
            allowed_v = variance_rtol * np.maximum(np.abs(y5[1]), np.abs(yi[1])) + variance_atol_keV2
            ratio = np.maximum(ratio, np.abs(err[1]) / allowed_v)
        ratio = np.where(bad, np.inf, ratio)
        accept = ratio <= 1.0

        # step-size update (standard controller, exponent 1/5 for an order-4 error estimate)
        with np.errstate(divide="ignore"):
            factor = np.where(ratio == 0.0, _MAX_FACTOR,
                              np.clip(_SAFETY * ratio ** -0.2, _MIN_FACTOR, _MAX_FACTOR))
        factor = np.where(bad, 0.25, factor)
        if not accept.any() and np.all(hi * factor <= 1e-14 * length[idx]):
            raise RuntimeError("path integration cannot make progress: the step size fell to "
                               "zero (is the stopping function smooth and positive?)")

        acc = idx[accept]
        y[:, acc] = y5[:, accept]
        x[acc] += hi[accept]
        k1_all[:, acc] = k[6][:, accept]   # first same as last
        h[idx] = hi * factor

        low = acc[y[0, acc] <= energy_tol_keV]
        y[:, low] = 0.0
        done[low] = True
        done[acc[x[acc] >= length[acc] * (1.0 - 1e-15)]] = True
    raise RuntimeError(f"path integration did not finish in {_MAX_STEPS} steps")


# --------------------------------------------------------------------------------------------
# input checks


def _check_array(value, name: str, func: str, *, minimum: float | None = 0.0) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name} must be a finite number; got {value!r}", where=f"{func}: {name}")
    if minimum is not None and np.any(arr < minimum):
        raise InputError(f"{name} must be >= {minimum:g}; got {value!r}", where=f"{func}: {name}")
    return arr


def _path_cosine(angle_deg, name: str, func: str) -> np.ndarray:
    angle = _check_array(angle_deg, name, func)
    if np.any(angle >= 90.0):
        raise InputError(f"{name} must be from 0 up to (not including) 90 degrees from the "
                         f"sample normal; got {angle_deg!r}", where=f"{func}: {name}")
    return np.cos(np.radians(angle))


def _checked_stopping(stopping_fn: StoppingFn, func: str):
    """Wrap ``stopping_fn`` so that a non-positive or non-finite value is reported clearly."""

    def wrapped(energy_keV):
        s = np.asarray(stopping_fn(energy_keV), dtype=float)
        if not np.all(np.isfinite(s) & (s > 0.0)):
            e = np.broadcast_to(np.asarray(energy_keV, dtype=float), s.shape)
            bad = ~(np.isfinite(s) & (s > 0.0))
            raise InputError(f"the stopping function returned {s[bad].flat[0]!r} at "
                             f"{e[bad].flat[0]:.6g} keV; stopping cross-sections must be finite "
                             "and positive at positive energies", where=f"{func}: stopping_fn")
        return s

    return wrapped
