"""Plain numpy version of the spectrum kernel, written to read like the equations.

Same arguments and same algorithm as :func:`forward._kernel.spectrum_kernel` (see that module's
notes), with none of its speed tricks: the stopping and cross-section tables are interpolated
with plain numpy, the characteristics are updated as whole arrays, and every smoothed step is
integrated over every channel with the exact ``F(x) = x Phi(x/s) + s phi(x/s)`` from
scipy.special instead of the interpolated table.  The broadening table arguments are accepted
and ignored.

Two nuisances are applied where the physics reads them rather than the way the kernel does:
an element's stopping slope multiplies its interpolated stopping at each energy by
``(E/E_ref)^b``, with the derivatives of that product written out (the kernel rescales its tables
once instead), and the straggling scale multiplies the mixture's straggling rate.

The arguments are the fields of :class:`forward._kernel.KernelInputs`: call
``spectrum_kernel_reference(*inputs)``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

__all__ = ["spectrum_kernel_reference", "step_integral"]

HALF_WIDTH = 8.0


def step_integral(x, s):
    """Second antiderivative of the normal density of width ``s``: ``x Phi(x/s) + s phi(x/s)``."""
    x = np.asarray(x, dtype=float)
    u = x / s
    return x * ndtr(u) + s * np.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi)


def _hermite(x, x0, x1, y0, y1, d0, d1):
    h = x1 - x0
    t = (x - x0) / h
    value = ((2 * t**3 - 3 * t**2 + 1) * y0 + (t**3 - 2 * t**2 + t) * h * d0
             + (-2 * t**3 + 3 * t**2) * y1 + (t**3 - t**2) * h * d1)
    slope = ((6 * t**2 - 6 * t) * (y0 - y1) / h + (3 * t**2 - 4 * t + 1) * d0
             + (3 * t**2 - 2 * t) * d1)
    return value, slope


class _Tables:
    def __init__(self, e0, step, S, dS, d2S, W, dW, scale, slope=None, e_ref=1000.0,
                 w_scale=1.0):
        self.e0, self.step = e0, step
        self.S, self.dS, self.d2S, self.W, self.dW = S, dS, d2S, W, dW
        self.scale = scale
        self.slope = np.zeros(S.shape[0]) if slope is None else np.asarray(slope, dtype=float)
        self.e_ref = e_ref
        self.w_scale = w_scale
        self.n = S.shape[1]

    def mixture(self, energy, comp):
        """S, S', S'' (scaled, tilted) and W, W' (scaled) of element fractions ``comp``."""
        energy = np.atleast_1d(np.asarray(energy, dtype=float))
        pos = np.clip((energy - self.e0) / self.step, 0.0, None)
        i = np.minimum(pos.astype(int), self.n - 2)
        t = np.minimum(pos - i, 1.0)
        out = [np.zeros_like(energy) for _ in range(5)]
        for el, c in enumerate(comp):
            if c <= 0:
                continue
            x0 = self.e0 + i * self.step
            s, _ = _hermite(x0 + t * self.step, x0, x0 + self.step, self.S[el, i],
                            self.S[el, i + 1], self.dS[el, i], self.dS[el, i + 1])
            lin = [(1 - t) * a[el, i] + t * a[el, i + 1] for a in (self.dS, self.d2S, self.W, self.dW)]
            ds, d2s = lin[0], lin[1]
            b = self.slope[el]
            if b != 0.0:
                # S f with f = (E/E_ref)^b: (S f)' = S' f + S f b/E,
                # (S f)'' = S'' f + 2 S' f b/E + S f b (b - 1)/E^2
                f = (energy / self.e_ref) ** b
                s, ds, d2s = (s * f, (ds + s * b / energy) * f,
                              (d2s + 2 * ds * b / energy + s * b * (b - 1) / energy**2) * f)
            cs = c * self.scale[el]
            out[0] += cs * s
            out[1] += cs * ds
            out[2] += cs * d2s
            out[3] += c * self.w_scale * lin[2]
            out[4] += c * self.w_scale * lin[3]
        return out


def spectrum_kernel_reference(widths_1e15, fractions, species_element, n_elements,
                              tab_e0_keV, tab_step_keV, S, dS, d2S, W, dW, stopping_scale,
                              stopping_slope, slope_reference_keV, straggling_scale,
                              iso_species, iso_k, iso_weight, e3sigma,
                              energy_keV, inv_cos_in, inv_cos_out, yield_factor,
                              edges_keV, sigma_det_keV, particle_step_keV, floor_keV,
                              ftab, fder, u_max, du, rows_mode, record):
    """Same result as :func:`forward._kernel.spectrum_kernel`, computed plainly."""
    tables = _Tables(tab_e0_keV, tab_step_keV, S, dS, d2S, W, dW, stopping_scale,
                     stopping_slope, slope_reference_keV, straggling_scale)
    n_slices, n_species = fractions.shape
    n_iso = iso_k.size
    n_ch = edges_keV.size - 1
    rows = n_species if rows_mode == 1 else (n_iso if rows_mode == 2 else 1)
    out = np.zeros((rows, n_ch))
    k_max = iso_k.max()

    # the detected energies followed into the sample
    d0 = max(edges_keV[0] - HALF_WIDTH * sigma_det_keV - 150.0, floor_keV)
    n_p = max(int(math.ceil((k_max * energy_keV + 2 * particle_step_keV - d0)
                            / particle_step_keV)) + 1, 2)
    det = d0 + particle_step_keV * np.arange(n_p)
    loc = det.copy()           # energy at the current depth
    slope = np.ones(n_p)       # dE_detected / dE_here
    var_out = np.zeros(n_p)    # outward straggling variance at the detector
    active = n_p               # characteristics 0 .. active-1 are still needed

    def add_step(row, e, s, amp):
        """A Gaussian-smoothed step of height amp at e, integrated over every channel."""
        if amp == 0.0:
            return
        F = step_integral(edges_keV - e, s)
        out[row] += amp * np.diff(F)

    # per isotope: list of edges (energy, sigma) and of box yields, built slice by slice
    edge_e = [[] for _ in range(n_iso)]
    edge_s = [[] for _ in range(n_iso)]
    box_y = [[] for _ in range(n_iso)]
    open_iso = np.ones(n_iso, dtype=bool)

    # the last slice holding each species
    present = fractions > 0
    last_slice = np.where(present.any(axis=0), n_slices - 1 - np.argmax(present[::-1], axis=0), -1)

    e_in, v_in = energy_keV, 0.0
    j = 0
    while True:
        # heaviest isotope still to be followed: present in this slice or the one above
        needed = open_iso & ((last_slice[iso_species] >= j - 1) | (record.shape[0] > 0))
        k_need = iso_k[needed].max() if needed.any() else 0.0
        final = j >= n_slices or e_in <= floor_keV or k_need * e_in < loc[0]
        while active > 2 and loc[active - 2] > k_need * e_in:
            active -= 1
        comp = np.zeros(n_elements)
        if not final:
            np.add.at(comp, species_element, fractions[j])

        e_next, v_next = e_in, v_in
        if not final and comp.any():
            dx = widths_1e15[j] * inv_cos_in
            s0, s1, s2, w0, w1 = (float(a[0]) for a in tables.mixture(e_in, comp))
            e_next = e_in - dx * s0 + dx**2 * s0 * s1 / 2 - dx**3 * s0 * (s0 * s2 + s1**2) / 6
            deriv = 1 - dx * s1 + dx**2 * (s1**2 + s0 * s2) / 2
            v_next = max(v_in * deriv**2 + dx * w0 - dx**2 * (s0 * w1 / 2 + w0 * s1), 0.0)
            e_next = max(e_next, floor_keV)
        e_mid = 0.5 * (e_in + e_next)

        for q in range(n_iso):
            if not open_iso[q]:
                continue
            sp = iso_species[q]
            frac = 0.0 if final else fractions[j, sp]
            was_present = bool(box_y[q]) and box_y[q][-1] > 0
            if not (was_present or frac > 0 or record.shape[0] > 0):
                box_y[q].append(0.0)
                edge_e[q].append(np.nan)
                edge_s[q].append(np.nan)
                continue
            x = iso_k[q] * e_in
            below = x < loc[0]
            if below:
                e_det = det[0] - (loc[0] - x) * slope[0]
                g, u = slope[0], var_out[0]
            else:
                p = min(np.searchsorted(loc[:active], x, side="right") - 1, active - 2)
                e_det, g = _hermite(x, loc[p], loc[p + 1], det[p], det[p + 1], slope[p], slope[p + 1])
                t = (x - loc[p]) / (loc[p + 1] - loc[p])
                u = var_out[p] + t * (var_out[p + 1] - var_out[p])
            straggle = (iso_k[q] * g) ** 2 * v_in + u
            if record.shape[0] > 0:
                record[j, q] = (e_det, straggle, e_in)
            edge_e[q].append(e_det)
            edge_s[q].append(max(math.sqrt(sigma_det_keV**2 + straggle), 1e-9))
            if final or below:
                open_iso[q] = False
                box_y[q].append(0.0)
                continue
            e3s = np.interp(e_mid, tab_e0_keV + tab_step_keV * np.arange(e3sigma.shape[1]), e3sigma[q])
            box_y[q].append(yield_factor * widths_1e15[j] * frac * iso_weight[q] * e3s / e_mid**3)
        if final:
            break

        if comp.any():
            dy = widths_1e15[j] * inv_cos_out
            ep = loc[:active + 0]
            s0, s1, s2, w0, w1 = tables.mixture(ep, comp)
            var_out[:active] += slope[:active] ** 2 * (dy * w0 + dy**2 * (s0 * w1 / 2 - w0 * s1))
            loc[:active] = ep + dy * s0 + dy**2 * s0 * s1 / 2 + dy**3 * s0 * (s0 * s2 + s1**2) / 6
            slope[:active] /= 1 + dy * s1 + dy**2 * (s1**2 + s0 * s2) / 2
        e_in, v_in = e_next, v_next
        j += 1

    # boxes between consecutive edges -> steps at the edges
    for q in range(n_iso):
        row = iso_species[q] if rows_mode == 1 else (q if rows_mode == 2 else 0)
        e, s, y = np.array(edge_e[q]), np.array(edge_s[q]), np.array(box_y[q])
        heights = np.zeros(len(y))
        for i in range(len(y) - 1):
            if y[i] > 0:
                heights[i] = y[i] / max(e[i] - e[i + 1], 1e-12)
        above = 0.0
        for i in range(len(e)):
            if np.isfinite(e[i]):
                add_step(row, e[i], s[i], above - heights[i])
            above = heights[i]
    return np.maximum(out, 0.0)  # clear the rounding below zero, as the kernel does
