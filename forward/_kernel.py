"""The numba kernel of the spectrum model: one flat slice table in, expected counts out.

Everything here works on plain arrays; :mod:`forward._model` prepares them once per run.  The
algorithm, step by step (the plain numpy version in ``tests/reference_model.py`` does the same
thing and is checked against this one on every test run):

1. **Inward path.**  The ion enters each slice ``j`` with energy ``E_j`` and energy variance
   ``V_j`` and leaves it after a path ``w_j / cos(th1)``.  One third-order Taylor step per slice
   integrates ``dE/dx = -S(E)`` (``E + dx E' + dx^2 E''/2 + dx^3 E'''/6`` with ``E' = -S``,
   ``E'' = S S'``, ``E''' = -S (S S'' + S'^2)``; slices lose a few keV each, so the local error is
   far below 1e-5 keV).  The variance follows ``dV/dx = -2 S' V + W(E)`` (straggling rate ``W``):
   the old variance is scaled by the square of ``dE_out/dE_in`` and the slice adds
   ``dx W - dx^2 (S W'/2 + W S')`` (first order in the slice's energy loss).

2. **Outward path: characteristics.**  Instead of following every scattered particle out through
   all the slices above it (work growing as slices squared), the kernel follows a fixed set of
   detected energies ``D_p`` (a uniform grid from below the lowest channel to above the highest
   surface edge) *into* the sample.  Particle ``p`` carries, at the current depth, the energy
   ``E_p`` it must have there to leave the surface with ``D_p``, the derivative
   ``g_p = dD/dE`` and the outward straggling variance ``U_p`` it collects on the way out.
   Crossing a slice the same Taylor step runs backwards (``dE/dy = +S``), ``g`` is divided by
   ``dE_new/dE_old`` and ``U`` gains ``g^2 (dy W + dy^2 (S W'/2 - W S'))``.  No re-interpolation
   between slices, so no error piles up.  A scattered ion starting out with ``K E_j`` is then
   placed between two neighbouring characteristics by cubic Hermite interpolation (values and
   the carried derivatives); its outward variance is interpolated linearly.

3. **Yield per slice and isotope.**  ``Y = Q Omega sigma(E_mid) n_iso / cos(th1)`` with
   ``n_iso`` the isotope's areal density in the slice and ``sigma`` read from a table of
   ``E^3 sigma(E)`` at the mean energy of the ion in the slice.

4. **Broadening.**  Slice ``j`` puts ``Y`` into a box between the detected energies of its front
   and back edges.  A box of height ``h`` on ``[a, b]`` is ``h (step(a) - step(b))`` and adjacent
   boxes share edges, so the spectrum is a sum of steps, one per edge, with amplitude
   ``h_above - h_below``.  Each step is smoothed by a Gaussian whose variance is the detector
   term plus the inward variance (times ``(K g)^2``) plus the outward variance at that edge,
   and integrated *exactly* over every channel: with ``F(x) = s f(x/s)``,
   ``f(u) = u Phi(u) + phi(u)``, a step at ``e`` puts ``F(hi - e) - F(lo - e)`` into the bin
   ``[lo, hi]``.  ``f`` comes from a table on ``[-8, 8]`` with cubic Hermite interpolation
   (``f' = Phi``); beyond ``+8`` it equals ``u`` and below ``-8`` zero to within 1e-15.  Bins
   more than 8 standard deviations above a step get the full bin width, added at the end with
   one running sum.

5. **Stop.**  The loop ends when no isotope can be detected above the lowest characteristic
   (placed well below the lowest channel), when the ion's energy falls to the table's floor, or
   at the last slice; open boxes are closed at that edge.

Nuisances that change the physics without new tables
----------------------------------------------------
* ``stopping_scale`` (one factor per element) multiplies ``S``, ``S'`` and ``S''`` inside the
  Bragg sum.
* ``straggling_scale`` (one number) multiplies every straggling rate ``W`` and ``W'``, inward and
  outward; the straggling variances are linear in it.
* ``stopping_slope`` (one exponent ``b`` per element) multiplies an element's stopping by
  ``(E / E_ref)^b`` with ``E_ref = slope_reference_keV``.  When any ``b`` is non-zero the kernel
  first rescales that element's tables once, from the lowest energy it looks up (``S f``,
  ``(S' + S b/E) f`` and ``(S'' + 2 S' b/E + S b (b - 1)/E^2) f`` with ``f = (E/E_ref)^b``: the
  analytic derivatives of the product), so the slice loop runs at the same cost.

Inputs
------
:class:`KernelInputs` names the arguments of :func:`spectrum_kernel` in order; the spectrum
model builds one per call and the kernel is called as ``spectrum_kernel(*inputs)``.

Kept whole: numba compiles the kernel together with the helpers it inlines, and the steps
above share their per-slice state; split, they would need that state passed across modules.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit

__all__ = [
    "BROADENING_HALF_WIDTH",
    "KernelInputs",
    "ROWS_TOTAL",
    "ROWS_PER_SPECIES",
    "ROWS_PER_ISOTOPE",
    "broadening_table",
    "spectrum_kernel",
    "step_integral_table_eval",
]

#: The Gaussian of each step is truncated at this many standard deviations (tail < 1e-15).
BROADENING_HALF_WIDTH = 8.0

#: Values of ``rows_mode``: one spectrum in all, one per species, one per isotope.
ROWS_TOTAL, ROWS_PER_SPECIES, ROWS_PER_ISOTOPE = 0, 1, 2


class KernelInputs(NamedTuple):
    """The arguments of :func:`spectrum_kernel`, named and in order.

    Built by :meth:`forward.ForwardModel.kernel_inputs`; call the kernel with
    ``spectrum_kernel(*inputs)``.  Every field is a plain number or numpy array; see
    :func:`spectrum_kernel` for units and shapes.  The slice table is ``widths_1e15`` (one areal
    density per slice, from the surface down) with ``fractions`` (one row per slice, one column
    per species); it may have any number of rows.
    """

    widths_1e15: np.ndarray
    fractions: np.ndarray
    species_element: np.ndarray
    n_elements: int
    tab_e0_keV: float
    tab_step_keV: float
    S: np.ndarray
    dS: np.ndarray
    d2S: np.ndarray
    W: np.ndarray
    dW: np.ndarray
    stopping_scale: np.ndarray
    stopping_slope: np.ndarray
    slope_reference_keV: float
    straggling_scale: float
    iso_species: np.ndarray
    iso_k: np.ndarray
    iso_weight: np.ndarray
    e3sigma: np.ndarray
    energy_keV: float
    inv_cos_in: float
    inv_cos_out: float
    yield_factor: float
    edges_keV: np.ndarray
    sigma_det_keV: float
    particle_step_keV: float
    floor_keV: float
    ftab: np.ndarray
    fder: np.ndarray
    u_max: float
    du: float
    rows_mode: int
    record: np.ndarray


def broadening_table(step_u: float = 1.0 / 64.0, half_width: float = BROADENING_HALF_WIDTH):
    """Table of ``f(u) = u Phi(u) + phi(u)`` and ``f'(u) = Phi(u)`` on a uniform grid.

    ``f`` is the second antiderivative of the standard normal density ``phi`` (``Phi`` is its
    cumulative distribution), so a unit step at 0 smoothed by a Gaussian of standard deviation
    ``s`` integrates over ``[lo, hi]`` to ``s (f(hi/s) - f(lo/s))``.

    Parameters
    ----------
    step_u : float
        Grid step in units of the standard deviation.  With cubic Hermite interpolation the
        error is below ``step_u**4 / 384 * max|f''''|`` = ``0.4 step_u**4 / 384`` (about 6e-11
        for the default 1/64).
    half_width : float
        The grid covers ``[-half_width, half_width]``.

    Returns
    -------
    f, fprime : numpy.ndarray
        Values at ``u_i = -half_width + i step_u``.
    """
    from scipy.special import ndtr

    n = int(round(2.0 * half_width / step_u))
    u = -half_width + step_u * np.arange(n + 1)
    cdf = ndtr(u)
    pdf = np.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi)
    return u * cdf + pdf, cdf


@njit(cache=True, error_model="numpy")
def _step_F(x, inv_s, s, ftab, fder, u_max, inv_du, du):
    """``F(x) = s f(x/s)`` from the table (see :func:`broadening_table`)."""
    u = x * inv_s
    if u <= -u_max:
        return 0.0
    if u >= u_max:
        return x
    pos = (u + u_max) * inv_du
    i = int(pos)
    if i >= ftab.size - 1:
        i = ftab.size - 2
    t = pos - i
    t2 = t * t
    t3 = t2 * t
    h00 = 2.0 * t3 - 3.0 * t2 + 1.0
    h10 = t3 - 2.0 * t2 + t
    h01 = -2.0 * t3 + 3.0 * t2
    h11 = t3 - t2
    return s * (h00 * ftab[i] + h10 * du * fder[i] + h01 * ftab[i + 1] + h11 * du * fder[i + 1])


@njit(cache=True, error_model="numpy")
def step_integral_table_eval(x, s, ftab, fder, u_max, du):
    """``F(x) = s f(x / s)`` for an array ``x`` (exposed for the interpolation-error test)."""
    out = np.empty(x.size)
    for i in range(x.size):
        out[i] = _step_F(x[i], 1.0 / s, s, ftab, fder, u_max, 1.0 / du, du)
    return out


@njit(cache=True, error_model="numpy")
def _hermite_coefficients(ftab, fder, du):
    """Per table interval, the cubic ``c0 + c1 t + c2 t^2 + c3 t^3`` of the Hermite interpolant."""
    n = ftab.size - 1
    coef = np.empty((n, 4))
    for i in range(n):
        y0, y1 = ftab[i], ftab[i + 1]
        m0, m1 = du * fder[i], du * fder[i + 1]
        coef[i, 0] = y0
        coef[i, 1] = m0
        coef[i, 2] = 3.0 * (y1 - y0) - 2.0 * m0 - m1
        coef[i, 3] = 2.0 * (y0 - y1) + m0 + m1
    return coef


@njit(cache=True, error_model="numpy")
def _add_step(out, plateau, row, edges, e, s, amp, ftab, fder, u_max, inv_du, du, coef):
    """Add a Gaussian-smoothed step of height ``amp`` at energy ``e`` to ``out[row]``.

    Channel ``k`` gets ``amp * (F(edges[k+1] - e) - F(edges[k] - e))``; edges strictly inside
    ``e +- u_max s`` use the table, the two outer ones the exact limits (0 below, ``x`` above).
    """
    n_ch = edges.size - 1
    half = u_max * s
    kl = np.searchsorted(edges, e - half, side="right")  # first edge inside the window
    kh = np.searchsorted(edges, e + half, side="left")   # first edge at or above the window
    k0 = kl - 1 if kl > 0 else 0
    k1 = kh if kh < n_ch else n_ch
    if k0 < k1:
        inv_s = 1.0 / s
        top = coef.shape[0] - 1
        f_lo = _step_F(edges[k0] - e, inv_s, s, ftab, fder, u_max, inv_du, du)
        last = k1 - 1 if kh <= n_ch else k1
        for k in range(k0, k1):
            x = edges[k + 1] - e
            if k < last:
                pos = (x * inv_s + u_max) * inv_du
                ii = int(pos)
                if ii > top:
                    ii = top
                t = pos - ii
                f_hi = s * (coef[ii, 0] + t * (coef[ii, 1] + t * (coef[ii, 2] + t * coef[ii, 3])))
            else:
                f_hi = _step_F(x, inv_s, s, ftab, fder, u_max, inv_du, du)
            out[row, k] += amp * (f_hi - f_lo)
            f_lo = f_hi
    if kh < n_ch:
        plateau[row, kh] += amp


@njit(cache=True, error_model="numpy")
def _mix(energy, n_nz, nz_el, nz_c, tab_e0, tab_inv_step, tab_step, S, dS, d2S, W, dW, scale,
         w_scale):
    """Bragg-rule mixture at one energy: S, S', S'' (keV per 1e15, scaled) and W, W' (scaled)."""
    pos = (energy - tab_e0) * tab_inv_step
    if pos < 0.0:
        pos = 0.0
    i = int(pos)
    n = S.shape[1]
    if i >= n - 1:
        i = n - 2
    t = pos - i
    if t > 1.0:
        t = 1.0
    t2 = t * t
    t3 = t2 * t
    h00 = 2.0 * t3 - 3.0 * t2 + 1.0
    h10 = (t3 - 2.0 * t2 + t) * tab_step
    h01 = -2.0 * t3 + 3.0 * t2
    h11 = (t3 - t2) * tab_step
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    w0 = 0.0
    w1 = 0.0
    for m in range(n_nz):
        el = nz_el[m]
        c = nz_c[m]
        cs = c * scale[el]
        s0 += cs * (h00 * S[el, i] + h10 * dS[el, i] + h01 * S[el, i + 1] + h11 * dS[el, i + 1])
        s1 += cs * (dS[el, i] + t * (dS[el, i + 1] - dS[el, i]))
        s2 += cs * (d2S[el, i] + t * (d2S[el, i + 1] - d2S[el, i]))
        w0 += c * (W[el, i] + t * (W[el, i + 1] - W[el, i]))
        w1 += c * (dW[el, i] + t * (dW[el, i + 1] - dW[el, i]))
    return s0, s1, s2, w0 * w_scale, w1 * w_scale


@njit(cache=True, error_model="numpy")
def _sloped_tables(tab_e0, tab_step, S, dS, d2S, slope, e_ref, first=0):
    """``S``, ``S'``, ``S''`` of every element times ``(E/e_ref)^slope`` (analytic derivatives),
    from table row ``first`` on (the rows below are copied unchanged: the kernel passes the row
    of the lowest energy it looks up)."""
    n_el, n = S.shape
    S2 = S.copy()
    dS2 = dS.copy()
    d2S2 = d2S.copy()
    for i in range(max(first, 0), n):
        e = tab_e0 + i * tab_step
        log_ratio = math.log(e / e_ref)   # one logarithm per energy, shared by the elements
        inv_e = 1.0 / e
        for el in range(n_el):
            b = slope[el]
            if b == 0.0:
                continue
            f = math.exp(b * log_ratio)
            u = b * inv_e
            S2[el, i] = S[el, i] * f
            dS2[el, i] = (dS[el, i] + S[el, i] * u) * f
            d2S2[el, i] = (d2S[el, i] + 2.0 * dS[el, i] * u
                           + S[el, i] * u * (b - 1.0) * inv_e) * f
    return S2, dS2, d2S2


@njit(cache=True, error_model="numpy")
def spectrum_kernel(widths_1e15, fractions, species_element, n_elements,
                    tab_e0_keV, tab_step_keV, S, dS, d2S, W, dW, stopping_scale,
                    stopping_slope, slope_reference_keV, straggling_scale,
                    iso_species, iso_k, iso_weight, e3sigma,
                    energy_keV, inv_cos_in, inv_cos_out, yield_factor,
                    edges_keV, sigma_det_keV, particle_step_keV, floor_keV,
                    ftab, fder, u_max, du, rows_mode, record):
    """Expected counts per channel for one slice table.

    Parameters
    ----------
    widths_1e15 : (n,) float64
        Areal density of each slice, 1e15 atoms/cm2, from the surface down.
    fractions : (n, n_species) float64
        Atom fraction of each species in each slice (a row of zeros is vacuum).
    species_element : (n_species,) int64
        Element index of each species.
    n_elements : int
    tab_e0_keV, tab_step_keV : float
        First energy and step of the uniform energy grid of all tables.
    S, dS, d2S : (n_elements, n_tab) float64
        Stopping, keV per 1e15 atoms/cm2, and its first and second energy derivatives.
    W, dW : (n_elements, n_tab) float64
        Straggling rate, keV^2 per 1e15 atoms/cm2 of path, and its derivative (zeros: no
        straggling).
    stopping_scale : (n_elements,) float64
        Factors multiplying each element's stopping.
    stopping_slope : (n_elements,) float64
        Exponents ``b``: each element's stopping is also multiplied by ``(E/E_ref)^b``.
    slope_reference_keV : float
        ``E_ref`` of the slopes, keV.
    straggling_scale : float
        Factor (>= 0) on every straggling rate, inward and outward.
    iso_species : (n_iso,) int64
        Species of each isotope.
    iso_k : (n_iso,) float64
        Kinematic factor of each isotope.
    iso_weight : (n_iso,) float64
        Fraction of the species' atoms that are this isotope.
    e3sigma : (n_iso, n_tab) float64
        ``E^3 sigma(E)``, keV^3 mb/sr, on the table grid.
    energy_keV : float
        Beam energy.
    inv_cos_in, inv_cos_out : float
        ``1/cos(th1)`` and ``1/cos(th2)``.
    yield_factor : float
        ``N_incident * Omega[sr] * 1e-27 cm2/mb * 1e15 * live * fluence_scale / cos(th1)``.
    edges_keV : (n_channels + 1,) float64
        Channel edge energies, increasing.
    sigma_det_keV : float
        Detector resolution as a standard deviation.
    particle_step_keV : float
        Spacing of the detected energies followed into the sample.
    floor_keV : float
        Lowest energy followed (at least the table's first energy).
    ftab, fder : float64 arrays
        :func:`broadening_table`; ``u_max`` its half width and ``du`` its step.
    rows_mode : int
        0: one row in all; 1: one row per species; 2: one row per isotope (in the order of
        ``iso_k``).
    record : (n + 1, n_iso, 3) float64
        If its first dimension is not zero, the kernel follows every isotope at every edge and
        writes ``[detected energy, straggling variance at the detector (without the detector
        term), ion energy before scattering]`` per edge and isotope (NaN where not reached).
        Pass ``np.zeros((0, 0, 3))`` otherwise.

    Returns
    -------
    (n_rows, n_channels) float64
    """
    n_slices = widths_1e15.size
    n_species = fractions.shape[1]
    n_iso = iso_k.size
    n_ch = edges_keV.size - 1
    n_rows = n_species if rows_mode == 1 else (n_iso if rows_mode == 2 else 1)
    out = np.zeros((n_rows, n_ch))
    plateau = np.zeros((n_rows, n_ch))
    coef = _hermite_coefficients(ftab, fder, du)
    inv_du = 1.0 / du
    tab_inv_step = 1.0 / tab_step_keV
    sig_det2 = sigma_det_keV * sigma_det_keV
    tiny_s = 1e-9

    k_max = 0.0
    for q in range(n_iso):
        if iso_k[q] > k_max:
            k_max = iso_k[q]

    # characteristics: detected energies followed into the sample
    d0 = edges_keV[0] - BROADENING_HALF_WIDTH * sigma_det_keV - 150.0
    if d0 < floor_keV:
        d0 = floor_keV
    # stopping slopes: the tables rescaled once, from the row of d0 up (every stopping lookup
    # is at an energy of at least d0: the characteristics start there and only gain energy,
    # and an ion is followed in only while k E_in reaches the lowest of them)
    for el in range(stopping_slope.size):
        if stopping_slope[el] != 0.0:
            S, dS, d2S = _sloped_tables(tab_e0_keV, tab_step_keV, S, dS, d2S, stopping_slope,
                                        slope_reference_keV,
                                        int((d0 - tab_e0_keV) / tab_step_keV))
            break
    d_top = k_max * energy_keV + 2.0 * particle_step_keV
    n_p = int(math.ceil((d_top - d0) / particle_step_keV)) + 1
    if n_p < 2:
        n_p = 2
    p_det = np.empty(n_p)
    p_e = np.empty(n_p)
    p_g = np.ones(n_p)
    p_u = np.zeros(n_p)
    for p in range(n_p):
        p_det[p] = d0 + p * particle_step_keV
        p_e[p] = p_det[p]
    p_hi = n_p - 1

    # per-isotope edge bookkeeping
    alive = np.ones(n_iso, dtype=np.bool_)
    has_edge = np.zeros(n_iso, dtype=np.bool_)
    e_prev = np.zeros(n_iso)
    s_prev = np.zeros(n_iso)
    h_before = np.zeros(n_iso)
    y_prev = np.zeros(n_iso)
    ptr = np.full(n_iso, n_p - 2)

    comp = np.zeros(n_elements)
    nz_el = np.zeros(n_elements, dtype=np.int64)
    nz_c = np.zeros(n_elements)

    recording = record.shape[0] > 0
    if recording:
        record[:, :, :] = np.nan

    # last slice holding each species: below it (and its closing edge) the species' isotopes
    # need no characteristics
    last_slice = np.full(n_species, -1)
    for jj in range(n_slices):
        for sp in range(n_species):
            if fractions[jj, sp] > 0.0:
                last_slice[sp] = jj

    e_in = energy_keV
    v_in = 0.0
    j = 0
    while True:
        k_need = 0.0
        for q in range(n_iso):
            if alive[q] and (recording or last_slice[iso_species[q]] >= j - 1) \
                    and iso_k[q] > k_need:
                k_need = iso_k[q]
        final = j >= n_slices or e_in <= floor_keV or k_need * e_in < p_e[0]
        # drop characteristics that no scattered ion can reach any more
        while p_hi > 1 and p_e[p_hi - 1] > k_need * e_in:
            p_hi -= 1

        # composition of slice j
        n_nz = 0
        if not final:
            for el in range(n_elements):
                comp[el] = 0.0
            for sp in range(n_species):
                comp[species_element[sp]] += fractions[j, sp]
            for el in range(n_elements):
                if comp[el] > 0.0:
                    nz_el[n_nz] = el
                    nz_c[n_nz] = comp[el]
                    n_nz += 1

        # inward step through slice j
        e_next = e_in
        v_next = v_in
        if not final and n_nz > 0:
            dx = widths_1e15[j] * inv_cos_in
            s0, s1, s2, w0, w1 = _mix(e_in, n_nz, nz_el, nz_c, tab_e0_keV, tab_inv_step,
                                      tab_step_keV, S, dS, d2S, W, dW, stopping_scale,
                                      straggling_scale)
            e_next = e_in - dx * s0 + 0.5 * dx * dx * s0 * s1 \
                - dx * dx * dx * s0 * (s0 * s2 + s1 * s1) / 6.0
            deriv = 1.0 - dx * s1 + 0.5 * dx * dx * (s1 * s1 + s0 * s2)
            v_next = v_in * deriv * deriv + dx * w0 - dx * dx * (0.5 * s0 * w1 + w0 * s1)
            if v_next < 0.0:
                v_next = 0.0
            if e_next < floor_keV:
                e_next = floor_keV

        # mean energy of the ion in slice j, for the cross-sections
        e_mid = 0.5 * (e_in + e_next)
        pos = (e_mid - tab_e0_keV) * tab_inv_step
        if pos < 0.0:
            pos = 0.0
        ti = int(pos)
        if ti >= e3sigma.shape[1] - 1:
            ti = e3sigma.shape[1] - 2
        tt = pos - ti
        if tt > 1.0:
            tt = 1.0
        inv_e3 = 1.0 / (e_mid * e_mid * e_mid)

        # edge j for every isotope
        for q in range(n_iso):
            if not alive[q]:
                continue
            sp = iso_species[q]
            frac = 0.0 if final else fractions[j, sp]
            row = sp if rows_mode == 1 else (q if rows_mode == 2 else 0)
            need = y_prev[q] > 0.0 or frac > 0.0 or recording
            if need:
                x = iso_k[q] * e_in
                below = x < p_e[0]
                if below:
                    e_j = p_det[0] - (p_e[0] - x) * p_g[0]
                    g = p_g[0]
                    u = p_u[0]
                else:
                    p = ptr[q]
                    if p > p_hi - 1:
                        p = p_hi - 1
                    while p > 0 and p_e[p] > x:
                        p -= 1
                    ptr[q] = p
                    x0 = p_e[p]
                    hx = p_e[p + 1] - x0
                    t = (x - x0) / hx
                    t2 = t * t
                    t3 = t2 * t
                    m0 = p_g[p] * hx
                    m1 = p_g[p + 1] * hx
                    e_j = (2.0 * t3 - 3.0 * t2 + 1.0) * p_det[p] + (t3 - 2.0 * t2 + t) * m0 \
                        + (-2.0 * t3 + 3.0 * t2) * p_det[p + 1] + (t3 - t2) * m1
                    g = ((6.0 * t2 - 6.0 * t) * (p_det[p] - p_det[p + 1])
                         + (3.0 * t2 - 4.0 * t + 1.0) * m0 + (3.0 * t2 - 2.0 * t) * m1) / hx
                    u = p_u[p] + t * (p_u[p + 1] - p_u[p])
                kg = iso_k[q] * g
                s_j = math.sqrt(sig_det2 + kg * kg * v_in + u)
                if s_j < tiny_s:
                    s_j = tiny_s
                if recording:
                    record[j, q, 0] = e_j
                    record[j, q, 1] = kg * kg * v_in + u
                    record[j, q, 2] = e_in
                h_here = 0.0
                if y_prev[q] > 0.0:
                    width = e_prev[q] - e_j
                    if width < 1e-12:
                        width = 1e-12
                    h_here = y_prev[q] / width
                if has_edge[q]:
                    _add_step(out, plateau, row, edges_keV, e_prev[q], s_prev[q],
                              h_before[q] - h_here, ftab, fder, u_max, inv_du, du, coef)
                e_prev[q] = e_j
                s_prev[q] = s_j
                h_before[q] = h_here
                has_edge[q] = True
                if final or below:
                    _add_step(out, plateau, row, edges_keV, e_j, s_j, h_here,
                              ftab, fder, u_max, inv_du, du, coef)
                    has_edge[q] = False
                    h_before[q] = 0.0
                    if below:
                        alive[q] = False
                        y_prev[q] = 0.0
                        continue
            else:
                if has_edge[q]:
                    _add_step(out, plateau, row, edges_keV, e_prev[q], s_prev[q], h_before[q],
                              ftab, fder, u_max, inv_du, du, coef)
                    has_edge[q] = False
                    h_before[q] = 0.0
            if final:
                continue
            # yield of slice j for this isotope
            if frac > 0.0:
                e3s = e3sigma[q, ti] + tt * (e3sigma[q, ti + 1] - e3sigma[q, ti])
                y_prev[q] = yield_factor * widths_1e15[j] * frac * iso_weight[q] * e3s * inv_e3
            else:
                y_prev[q] = 0.0

        if final:
            break

        # carry the characteristics through slice j (deeper by one slice)
        if n_nz > 0:
            dy = widths_1e15[j] * inv_cos_out
            for p in range(p_hi + 1):
                ep = p_e[p]
                s0, s1, s2, w0, w1 = _mix(ep, n_nz, nz_el, nz_c, tab_e0_keV, tab_inv_step,
                                          tab_step_keV, S, dS, d2S, W, dW, stopping_scale,
                                          straggling_scale)
                gp = p_g[p]
                p_u[p] += gp * gp * (dy * w0 + dy * dy * (0.5 * s0 * w1 - w0 * s1))
                p_e[p] = ep + dy * s0 + 0.5 * dy * dy * s0 * s1 \
                    + dy * dy * dy * s0 * (s0 * s2 + s1 * s1) / 6.0
                p_g[p] = gp / (1.0 + dy * s1 + 0.5 * dy * dy * (s1 * s1 + s0 * s2))

        e_in = e_next
        v_in = v_next
        j += 1

    # bins far above a step get the full bin width times the step's amplitude
    for r in range(n_rows):
        run = 0.0
        for k in range(n_ch):
            run += plateau[r, k]
            v = out[r, k] + run * (edges_keV[k + 1] - edges_keV[k])
            # every channel is a sum of boxes smoothed by Gaussians, so it is >= 0; the
            # differences of step integrals can leave -1e-13 or so of rounding
            out[r, k] = v if v > 0.0 else 0.0
    return out
