"""The layer stack that conserves atoms: each layer's box blurred by its own interfaces.

Depths here are in 1e15 atoms/cm2.  The sample is laid out along an auxiliary depth ``z``:
finite layer ``k`` (areal density ``t_k``) occupies ``[z_{k-1}, z_k]`` with
``z_k = t_0 + ... + t_k``, the substrate (if any) lies below ``z_last``, and interface ``k``
(the bottom of layer ``k``) has the mixing width ``w_k``.  Each layer is cut at its middle
``m_k`` into two half boxes; the upper half is blurred by a Gaussian of the upper interface's
width (for the top layer: of its lower interface, the reflection below keeping the surface
sharp) and the lower half by the lower interface's width; the substrate
is one box ``[z_last, inf)`` blurred by ``w_last``.  Atoms cannot leave through the surface:
the blur reflects there (the image method), so every half box keeps its area exactly:

    B_[a,b](z) = Phi((z-a)/w) - Phi((z-b)/w) + Phi((-z-a)/w) - Phi((-z-b)/w),   z >= 0,
    integral_0^inf B dz = b - a.

The amount of a half box between two depths comes from the antiderivative
``R(x, w) = w G(x / w) = max(x, 0) + w G(-|x| / w)``, ``G(x) = x Phi(x) + phi(x)`` (``G' = Phi``),
written so that narrow blurs keep full precision and ``w = 0`` is the sharp box:

    H_[a,b](z) = R(z-a) - R(z-b) - R(-z-a) + R(-z-b).

The atom density at ``z`` is ``D(z) = sum_h B_h(z)``; the forward model's depth is the areal
density ``u(z) = integral_0^z D``.  A slice between auxiliary depths ``e_j`` and ``e_{j+1}`` holds
``A_hj = H_h(e_{j+1}) - H_h(e_j)`` atoms of half box ``h``; its areal density is
``sum_h A_hj`` and its composition ``sum_h A_hj c_h / sum_h A_hj``.  So every layer's atoms are
counted exactly once, for any widths: the slices of layer ``k`` hold ``t_k`` atoms in all (up to
the Gaussian tails beyond the last edge, which the caller keeps below 1e-12 by extending the
grid), compositions are non-negative and sum to one, and counts are smooth in every areal
density and width.  An isolated interface between thick layers is exactly the error-function
step ``f_above + (f_below - f_above) Phi((u - z_k)/w_k)`` (both sides are blurred by ``w_k``
there, ``D = 1``); where two half boxes of one layer meet with different widths ``D`` departs
from 1 symmetrically about ``m_k`` (no net shift of depth, no change of composition); a thin
layer between interfaces of different widths becomes two blurred halves whose area is its
areal density.

Below a sample without substrate there is no atom: rows there hold nothing.  The width of the
last interface then spreads the last layer's lower half into that space, which in the
forward model's areal-density depth only reorders atoms.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from scipy.special import ndtr

__all__ = ["half_boxes", "ramp_integral", "slice_amounts", "slice_amounts_numpy",
           "stack_table", "refinement_points", "point_composition", "REFINEMENT_U"]

#: beyond this many widths from its corner a ramp integral is its straight part (the smooth
#: part is below 1e-16 of the width there)
_SMOOTH_REACH = 9.0

_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)

#: Where, in units of an interface's width, the slice grid gets extra edges around a mixed
#: interface: slices there are at most half the width across within +-2 widths.
REFINEMENT_U = np.array([-5.0, -3.5, -2.5, -2.0, -1.5, -1.0, -0.5, 0.5, 1.0, 1.5, 2.0, 2.5,
                         3.5, 5.0])


def ramp_integral(x, w):
    """``R(x, w) = w G(x / w)`` with ``G(x) = x Phi(x) + phi(x)``; ``max(x, 0)`` for ``w = 0``.

    The second antiderivative of a Gaussian of standard deviation ``w`` (``R'' = phi_w``), split
    as ``max(x, 0) + w G(-|x| / w)`` so the small smooth part keeps full precision.
    """
    x = np.asarray(x, dtype=float)
    w = np.asarray(w, dtype=float)
    ramp = np.maximum(x, 0.0)
    safe = np.where(w > 0, w, 1.0)
    u = -np.abs(x) / safe
    smooth = safe * (u * ndtr(u) + _INV_SQRT_2PI * np.exp(-0.5 * u * u))
    return np.where(w > 0, ramp + smooth, ramp)


def half_boxes(areal_density_1e15, mixing_1e15, substrate: bool):
    """The half boxes of the stack: ``(top, bottom, width, layer)`` arrays.

    Parameters
    ----------
    areal_density_1e15 : array_like, shape (n_thick,)
        Areal density of each finite layer, surface first.
    mixing_1e15 : array_like, shape (n_thick,)
        Width of the interface at the bottom of each finite layer (the last one: the interface
        to the substrate, or the lower surface when vacuum lies below).
    substrate : bool
        A semi-infinite substrate below the last finite layer (its box has ``bottom = inf``).

    Returns
    -------
    top, bottom, width : numpy.ndarray
        Box edges (auxiliary depth) and blur width of each half box.
    layer : numpy.ndarray of int
        The layer each half box belongs to (the substrate is layer ``n_thick``).
    """
    t = np.asarray(areal_density_1e15, dtype=float)
    w = np.asarray(mixing_1e15, dtype=float)
    n = t.size
    z = np.concatenate([[0.0], np.cumsum(t)])
    mid = z[:-1] + 0.5 * t
    # upper halves first, then lower halves, then the substrate's box (filled in place: this
    # runs for every draw)
    size = 2 * n + (1 if substrate else 0)
    top, bottom, width = np.empty(size), np.empty(size), np.empty(size)
    layer = np.empty(size, dtype=int)
    top[:n], top[n:2 * n] = z[:-1], mid
    bottom[:n], bottom[n:2 * n] = mid, z[1:]
    # the top layer's upper half takes its lower interface's width: the blur reflects at the
    # surface, so the surface stays sharp either way, and a lone layer then has D = 1
    width[:n][:1], width[1:n], width[n:2 * n] = w[:1], w[:-1], w
    layer[:n] = layer[n:2 * n] = np.arange(n)
    if substrate:
        top[-1], bottom[-1], layer[-1] = z[-1], np.inf, n
        width[-1] = w[-1] if n else 0.0
    return top, bottom, width, layer


def _antiderivative(edges, top, bottom, width):
    """``H_h(e)`` for every half box ``h`` (rows) and edge ``e`` (columns)."""
    e = np.asarray(edges, dtype=float)[None, :]
    a, b, w = top[:, None], bottom[:, None], width[:, None]
    finite = np.isfinite(b)
    b_safe = np.where(finite, b, 0.0)
    h = ramp_integral(e - a, w) - ramp_integral(-e - a, w)
    h -= np.where(finite, ramp_integral(e - b_safe, w) - ramp_integral(-e - b_safe, w), 0.0)
    return h


def slice_amounts_numpy(edges, areal_density_1e15, mixing_1e15, substrate: bool):
    """Atoms of each layer in each slice, shape ``(n_slices, n_layers)``: the plain numpy
    version of :func:`slice_amounts` (the tests hold the two together)."""
    top, bottom, width, layer = half_boxes(areal_density_1e15, mixing_1e15, substrate)
    h = _antiderivative(edges, top, bottom, width)
    per_half = np.diff(h, axis=1).T  # (slices, halves)
    n_layers = int(layer.max()) + 1 if layer.size else 0
    out = np.zeros((per_half.shape[0], n_layers))
    np.add.at(out.T, layer, per_half.T)
    # amounts are differences of a monotone function: never below zero but for rounding
    np.maximum(out, 0.0, out=out)
    return out


@njit(cache=True)
def _ramp(x, w):
    """``R(x, w)`` of :func:`ramp_integral` for one value (compiled)."""
    ramp = x if x > 0.0 else 0.0
    if w <= 0.0:
        return ramp
    u = -abs(x) / w
    if u < -_SMOOTH_REACH:
        return ramp
    return ramp + w * (u * 0.5 * math.erfc(-u / math.sqrt(2.0))
                       + math.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi))


@njit(cache=True)
def _amounts_kernel(edges, top, bottom, width, layer, n_layers):
    n = edges.size - 1
    out = np.zeros((n, n_layers))
    for h in range(top.size):
        a, b, w = top[h], bottom[h], width[h]
        finite = b < np.inf
        k = layer[h]
        prev = 0.0
        for j in range(edges.size):
            e = edges[j]
            value = _ramp(e - a, w) - _ramp(-e - a, w)
            if finite:
                value -= _ramp(e - b, w) - _ramp(-e - b, w)
            if j > 0:
                out[j - 1, k] += value - prev
            prev = value
    for j in range(n):
        for k in range(n_layers):
            if out[j, k] < 0.0:
                out[j, k] = 0.0
    return out


def slice_amounts(edges, areal_density_1e15, mixing_1e15, substrate: bool):
    """Atoms of each layer in each slice, shape ``(n_slices, n_layers)``.

    ``n_layers`` counts the substrate when there is one.  Slices are ``[edges_j, edges_j+1]``
    in auxiliary depth, ``edges[0] = 0``.  Compiled (numba); :func:`slice_amounts_numpy` is
    the same in plain numpy.
    """
    top, bottom, width, layer = half_boxes(areal_density_1e15, mixing_1e15, substrate)
    n_layers = int(layer.max()) + 1 if layer.size else 0
    return _amounts_kernel(np.ascontiguousarray(edges, dtype=float), top, bottom, width,
                           layer.astype(np.int64), n_layers)


def stack_table(edges, areal_density_1e15, mixing_1e15, compositions, substrate: bool):
    """The forward model's slice table for a layer stack.

    Parameters
    ----------
    edges : array_like, shape (n + 1,)
        Slice edges in auxiliary depth, increasing from 0.
    areal_density_1e15, mixing_1e15 : array_like, shape (n_thick,)
        See :func:`half_boxes`.
    compositions : array_like, shape (n_layers, n_species)
        Atom fractions of every layer (the substrate last, when there is one).
    substrate : bool

    Returns
    -------
    widths_1e15 : numpy.ndarray, shape (n,)
        Areal density of each slice (its atoms).
    fractions : numpy.ndarray, shape (n, n_species)
        Composition of each slice; a row of zeros where a slice holds no atom.
    amounts : numpy.ndarray, shape (n, n_layers)
        Atoms of each layer in each slice.
    """
    amounts = slice_amounts(edges, areal_density_1e15, mixing_1e15, substrate)
    comps = np.asarray(compositions, dtype=float)
    widths = amounts.sum(axis=1)
    atoms = amounts @ comps[: amounts.shape[1]]
    safe = np.where(widths > 0, widths, 1.0)
    fractions = np.where(widths[:, None] > 0, atoms / safe[:, None], 0.0)
    return widths, fractions, amounts


def refinement_points(areal_density_1e15, mixing_1e15, refine):
    """Extra slice edges around the interfaces flagged in ``refine``: ``z_k + w_k u`` for the
    offsets :data:`REFINEMENT_U`; they move continuously with depth and width (all collapse onto
    the interface as its width goes to zero)."""
    z = np.cumsum(np.asarray(areal_density_1e15, dtype=float))
    w = np.asarray(mixing_1e15, dtype=float)
    pts = [z[k] + w[k] * REFINEMENT_U for k in range(z.size) if refine[k]]
    return np.concatenate(pts) if pts else np.zeros(0)


def _cdf(x, w):
    """``Phi(x / w)``; for ``w = 0`` the sharp step (1/2 exactly at 0)."""
    safe = np.where(w > 0, w, 1.0)
    sharp = np.where(x > 0, 1.0, np.where(x < 0, 0.0, 0.5))
    return np.where(w > 0, ndtr(x / safe), sharp)


def point_composition(z, areal_density_1e15, mixing_1e15, compositions, substrate: bool):
    """Composition and atom density at auxiliary depths ``z`` (see module notes).

    Returns
    -------
    fractions : numpy.ndarray, shape (n_points, n_species)
        ``sum_h B_h(z) c_h / D(z)``; zeros where ``D = 0`` (below a sample without substrate).
    density : numpy.ndarray, shape (n_points,)
        ``D(z)``, atoms per unit of auxiliary depth (1 inside thick layers).
    """
    top, bottom, width, layer = half_boxes(areal_density_1e15, mixing_1e15, substrate)
    zz = np.asarray(z, dtype=float)[None, :]
    a, w = top[:, None], width[:, None]
    finite = np.isfinite(bottom)[:, None]
    b = np.where(finite, bottom[:, None], 0.0)
    dens = _cdf(zz - a, w) + _cdf(-zz - a, w)
    dens = dens - np.where(finite, _cdf(zz - b, w) + _cdf(-zz - b, w), 0.0)
    dens = np.maximum(dens, 0.0)  # (halves, points)
    comps = np.asarray(compositions, dtype=float)[layer]  # (halves, species)
    total = dens.sum(axis=0)
    atoms = dens.T @ comps
    safe = np.where(total > 0, total, 1.0)
    return np.where(total[:, None] > 1e-15, atoms / safe[:, None], 0.0), total
