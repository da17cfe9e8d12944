"""What a run file's set-up implies, before anything is fitted: the report of ``sondage check``.

For a run (and optionally a measured spectrum) :func:`check_report` derives the geometry and
lists, for every element, the kinematic factor, the surface-edge energy and its channel, the
stopping cross-sections at the beam energy, the depth scale of each layer and the depth
resolution near each layer's top, and warns where the cross-section may depart from Rutherford.
With a spectrum it also says whether the spectrum reaches the highest expected edge and whether
the counts show an edge near the expected channel (:func:`find_leading_edge`).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ._cross_section import (NonRutherfordWarning, check_rutherford_validity,
                             non_rutherford_onset_keV, rutherford_cross_section)
from ._elements import element
from ._kinematics import kinematic_factor
from ._path import energy_after_path, stopping_cross_section_factor
from ._stopping import StoppingModel

__all__ = ["check_report", "find_leading_edge", "MAJOR_FRACTION"]


def _table(rows: list[list[str]], header: list[str], indent: str = "  ") -> list[str]:
    """Left-aligned first column, right-aligned others, two spaces between columns."""
    cols = [header] + rows
    widths = [max(len(r[i]) for r in cols) for i in range(len(header))]
    out = []
    for k, r in enumerate(cols):
        cells = [r[0].ljust(widths[0])] + [c.rjust(w) for c, w in zip(r[1:], widths[1:])]
        out.append(indent + "  ".join(cells).rstrip())
        if k == 0:
            out.append(indent + "  ".join("-" * w for w in widths))
    return out


def _channel_text(calibration, energy_keV: float) -> str:
    c = calibration.channel_of(energy_keV)
    if not math.isfinite(c):
        return "beyond the calibration"
    if c < 0:
        return "below 0"
    return str(int(math.floor(c)))


def _kinematic(m1: float, m2: float, theta_deg: float):
    """K, or None when the target atom cannot scatter the ion to this angle."""
    try:
        return kinematic_factor(m1, m2, theta_deg)
    except ValueError:
        return None


def _layer_entry_energies(run_, model) -> list[float]:
    """Beam energy (keV) at the top of each layer, after the inward path through those above."""
    energies = [run_.beam.energy_keV]
    th1 = run_.geometry.incidence_deg
    for layer in run_.layers[:-1]:
        e = energies[-1]
        if e > 0 and layer.areal_density_1e15:
            e = energy_after_path(lambda x, f=layer.fractions: model.mixture(f, x),
                                          e, layer.areal_density_1e15, th1)
        energies.append(float(e))
    return energies


def _exit_energy(run_, model, index: int, energy_keV: float) -> float:
    """Energy (keV) after the outward path from the top of layer ``index`` to the surface."""
    th2 = run_.geometry.exit_deg
    e = energy_keV
    for layer in reversed(run_.layers[:index]):
        if e <= 0:
            return 0.0
        e = float(energy_after_path(lambda x, f=layer.fractions: model.mixture(f, x),
                                            e, layer.areal_density_1e15, th2))
    return e


def find_leading_edge(counts: np.ndarray, channel: np.ndarray, edge_width_channels: float,
                      threshold_fraction: float = 0.1) -> float | None:
    """Position of the highest-energy edge seen in a spectrum, in channels.

    The counts are smoothed with a running mean about one edge width wide (odd, so the edge
    does not move); the edge region is the highest channel whose smoothed counts reach
    ``threshold_fraction`` of the largest smoothed value; the local plateau is the largest
    smoothed value within ``3 * width + 10`` channels below it; the edge is where the smoothed
    counts cross half of that plateau, interpolated linearly.  A thin top layer whose peak is
    lower than a thick substrate's plateau is still found, as long as its peak reaches
    ``threshold_fraction`` of the highest level.

    Parameters
    ----------
    counts, channel : numpy arrays
        The spectrum (channels strictly increasing).
    edge_width_channels : float
        Width of a sharp edge after the detector, in channels (the FWHM in channels).
    threshold_fraction : float
        Fraction of the highest smoothed level that marks the edge region.

    Returns
    -------
    float or None
        The half-height crossing on the calibration's channel scale (channel ``c`` spans
        ``[c, c + 1)`` and its counts are placed at ``c + 0.5``), comparable with
        ``Calibration.channel_of``; None for a spectrum without counts.
    """
    counts = np.asarray(counts, float)
    channel = np.asarray(channel, float)
    if counts.size == 0 or not np.any(counts > 0):
        return None
    w = max(1, min(int(round(edge_width_channels)), counts.size))
    w = w if w % 2 else max(1, w - 1)
    smooth = np.convolve(counts, np.ones(w) / w, mode="same")
    region = np.flatnonzero(smooth >= threshold_fraction * np.max(smooth))
    top = int(region[-1])
    low = max(0, top - (3 * w + 10))
    half = 0.5 * np.max(smooth[low:top + 1])
    i = int(low + np.flatnonzero(smooth[low:top + 1] >= half)[-1])
    position = channel[i]
    if i + 1 < smooth.size and smooth[i] != smooth[i + 1]:
        frac = min(1.0, max(0.0, (smooth[i] - half) / (smooth[i] - smooth[i + 1])))
        position = channel[i] + frac * (channel[i + 1] - channel[i])
    return float(position) + 0.5


def check_report(run_, spectrum=None) -> str:
    """The text that ``sondage check`` prints.

    Warnings raised by the physics while the report is built are listed at its end instead of
    being printed separately.

    Parameters
    ----------
    run_ : forward.Run
    spectrum : forward.Spectrum, optional

    Returns
    -------
    str
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        lines, notes = _report_lines(run_, spectrum)
    other: list[str] = []
    for w in caught:
        if issubclass(w.category, NonRutherfordWarning):
            continue  # reported in the cross-section table and the notes
        text = " ".join(str(w.message).split())
        if text not in other:
            other.append(text)
    lines.append("")
    if notes or other:
        lines.append("Attention")
        lines += [f"  - {text}" for text in notes + other]
    else:
        lines.append("No problems found.")
    return "\n".join(lines) + "\n"


#: Elements below this atom fraction in their first layer are left out of the edge comparison.
MAJOR_FRACTION = 0.05


def _report_lines(run_, spectrum):
    lines: list[str] = []
    notes: list[str] = []
    g, beam, cal, det, exp = run_.geometry, run_.beam, run_.calibration, run_.detector, run_.exposure
    e0 = beam.energy_keV
    m1, z1 = beam.ion.mass_u, beam.ion.z
    phys = run_.physics
    screening = None if phys.screening == "none" else phys.screening
    model = StoppingModel(beam.species, tables=phys.stopping_tables,
                                  scale=phys.stopping_scale)

    lines.append(f"run file   {run_.source}")
    if run_.title:
        lines.append(f"title      {run_.title}")
    lines.append("")
    lines.append("Set-up")
    layout = ("angles given directly" if g.layout == "direct"
              else f"{g.layout} layout, tilt {g.tilt_deg:g} deg")
    setup = [
        ("beam", f"{beam.species} ({m1:.4f} u) at {e0:g} keV"),
        ("scattering angle", f"{g.scattering_deg:.2f} deg"),
        ("incidence angle", f"{g.incidence_deg:.2f} deg from the sample normal (path x "
                            f"{g.path_in_factor:.4f})"),
        ("exit angle", f"{g.exit_deg:.2f} deg from the sample normal (path x "
                       f"{g.path_out_factor:.4f})"),
        ("geometry", layout),
        ("detector", f"FWHM {det.fwhm_keV:g} keV, solid angle {det.solid_angle_msr:g} msr"),
        ("calibration", f"E(c) = {cal.offset_keV:g} + {cal.keV_per_channel:g} c"
                        + (f" + {cal.quadratic_keV:g} c^2" if cal.quadratic_keV else "")
                        + " keV at the lower edge of channel c"),
        ("ions", f"{exp.incident_particles:.4g} incident"
                 + (f" ({exp.charge_uC:g} uC, charge state {exp.charge_state})"
                    if exp.charge_uC is not None else "")
                 + f", live fraction {exp.live_fraction:g}"),
        ("screening", phys.screening),
    ]
    if phys.pileup.enabled:
        setup.append(("pile-up", f"first order, probability {phys.pileup.probability:.3g} per pulse"))
    width = max(len(k) for k, _ in setup)
    lines += [f"  {k.ljust(width)}  {v}" for k, v in setup]

    # where each element first appears, and the energies there
    entry = _layer_entry_energies(run_, model)
    first_layer: dict[str, int] = {}
    for i, layer in enumerate(run_.layers):
        for sym in layer.fractions:
            first_layer.setdefault(sym, i)

    lines.append("")
    lines.append(f"Signals (K at {g.scattering_deg:g} deg; edge = energy at the detector from the "
                 "top of the first layer holding the element)")
    rows = []
    edges: dict[str, float] = {}
    for sym, idx in first_layer.items():
        layer = run_.layers[idx]
        el = element(sym)
        k_mean = _kinematic(m1, el.mass_u, g.scattering_deg)
        if k_mean is not None and entry[idx] > 0 and layer.fractions[sym] >= MAJOR_FRACTION:
            edges[sym] = _exit_energy(run_, model, idx, k_mean * entry[idx])
        for iso, frac in layer.isotope_fractions(sym):
            k = _kinematic(m1, iso.mass_u, g.scattering_deg)
            if k is None:
                rows.append([iso.label, f"{frac:.4f}", "-", "-", "-", "-", "-"])
                continue
            ke0 = k * e0
            edge = _exit_energy(run_, model, idx, k * entry[idx]) if entry[idx] > 0 else 0.0
            rows.append([iso.label, f"{frac:.4f}", f"{k:.5f}", f"{ke0:.1f}", _channel_text(cal, ke0),
                         f"{edge:.1f}", _channel_text(cal, edge) if edge > 0 else "-"])
        if k_mean is None:
            notes.append(f"{sym} is too light to scatter {beam.species} to {g.scattering_deg:g} deg; "
                         "it shows no signal, only its stopping")
    lines += _table(rows, ["isotope", "fraction", "K", "K*E0 keV", "channel", "edge keV",
                           "edge ch"])

    lines.append("")
    lines.append(f"Stopping cross-sections at {e0:g} keV (eV per 1e15 atoms/cm2)")
    rows = []
    for sym in first_layer:
        el_s, nu_s = model.electronic(sym, e0), model.nuclear(sym, e0)
        src = "table" if sym in model.tables else "built-in"
        if sym in model.scale:
            src += f" x {model.scale[sym]:g}"
        rows.append([sym, f"{el_s:.2f}", f"{nu_s:.3f}", f"{el_s + nu_s:.2f}", src])
    lines += _table(rows, ["element", "electronic", "nuclear", "total", "source"])

    lines.append("")
    lines.append("Layers ([eps] in the surface-energy approximation at each layer's top; depth "
                 "resolution = FWHM / depth scale, without straggling)")
    for i, layer in enumerate(run_.layers):
        n_text = ("substrate (semi-infinite)" if layer.substrate
                  else f"{layer.areal_density_1e15:.5g} 1e15 atoms/cm2")
        if layer.thickness_nm is not None:
            n_text += f" = {layer.thickness_nm:.4g} nm"
        if layer.density_g_cm3 is not None:
            n_text += f", {layer.density_g_cm3:g} g/cm3"
        ein = entry[i]
        lines.append(f"  [{i + 1}] {layer.name}: {layer.formula}, {n_text}")
        if ein <= 0:
            lines.append("      the beam stops before reaching this layer")
            continue
        s_mix = model.mixture(layer.fractions, ein)
        lines.append(f"      beam energy at its top {ein:.1f} keV; stopping (Bragg's rule) "
                     f"{s_mix:.2f} eV/(1e15 atoms/cm2)")
        nm_per = layer.nm_per_1e15()
        rows = []
        for sym in layer.fractions:
            k = _kinematic(m1, element(sym).mass_u, g.scattering_deg)
            if k is None:
                continue
            eps = stopping_cross_section_factor(
                k, lambda x, f=layer.fractions: model.mixture(f, x),
                lambda x, f=layer.fractions: model.mixture(f, x), ein, g.incidence_deg, g.exit_deg)
            kev_per_1e15 = eps / 1000.0
            res_1e15 = det.fwhm_keV / kev_per_1e15
            row = [sym, f"{eps:.1f}", f"{kev_per_1e15:.4f}"]
            if nm_per is not None:
                row += [f"{kev_per_1e15 / nm_per:.3f}", f"{res_1e15:.1f}", f"{res_1e15 * nm_per:.2f}"]
            else:
                row += ["-", f"{res_1e15:.1f}", "-"]
            rows.append(row)
        if rows:
            lines += _table(rows, ["signal", "[eps] eV/1e15", "keV/1e15", "keV/nm",
                                   "resolution 1e15", "resolution nm"], indent="      ")

    lines.append("")
    lines.append(f"Cross-sections at {e0:g} keV ({'Rutherford' if screening is None else 'Rutherford, ' + phys.screening + ' screening'})")
    rows = []
    for sym in first_layer:
        el = element(sym)
        if _kinematic(m1, el.mass_u, g.scattering_deg) is None:
            continue
        sigma = rutherford_cross_section(z1, m1, el.z, el.mass_u, e0, g.scattering_deg,
                                                 screening=screening)
        onset = non_rutherford_onset_keV(z1, m1, el.z, el.mass_u)
        ok = check_rutherford_validity(z1, m1, el.z, el.mass_u, e0, label=sym)
        if ok:
            status = "Rutherford"
        elif sym in phys.cross_section_ratio:
            status = "above onset; ratio table given"
        else:
            status = "ABOVE ONSET"
            notes.append(f"{sym}: {e0:g} keV is above the estimated non-Rutherford onset of "
                         f"{onset:.0f} keV; give a ratio-to-Rutherford table in "
                         "physics.cross_section_ratio or use a lower beam energy")
        rows.append([sym, f"{sigma:.4g}", f"{onset:.0f}", status])
    lines += _table(rows, ["element", "mb/sr", "onset keV", "status"])

    if spectrum is not None:
        lines.append("")
        lines.append(f"Spectrum {spectrum.source}")
        ch = spectrum.channel
        lines.append(f"  {len(spectrum)} channels from {int(ch[0])} to {int(ch[-1])}"
                     + (" (with gaps)" if spectrum.has_gaps else "")
                     + f", {spectrum.counts.sum():.6g} counts")
        if edges:
            top_sym = max(edges, key=edges.get)
            top_e = edges[top_sym]
            top_c = cal.channel_of(top_e)
            lines.append(f"  highest expected edge (elements >= {MAJOR_FRACTION:g} atom fraction): {top_sym} at {top_e:.1f} keV, channel "
                         f"{_channel_text(cal, top_e)}")
            if not (math.isfinite(top_c) and top_c < ch[-1]):
                lines.append("  coverage: NO, the spectrum ends below the highest edge")
                notes.append(f"the spectrum ends at channel {int(ch[-1])}, below the {top_sym} "
                             f"edge expected in channel {_channel_text(cal, top_e)}; check "
                             "calibration.keV_per_channel and offset_keV")
            else:
                lines.append("  coverage: yes, the spectrum reaches the highest edge")
            found = find_leading_edge(spectrum.counts, ch, det.fwhm_keV / cal.keV_per_channel)
            if found is None:
                lines.append("  leading edge: the spectrum holds no counts")
                notes.append("the spectrum holds no counts")
            elif math.isfinite(top_c):
                diff = found - top_c
                tol = max(3.0, 2.0 * det.fwhm_keV / cal.keV_per_channel)
                verdict = "agrees" if abs(diff) <= tol else "DOES NOT AGREE"
                lines.append(f"  leading edge in the counts: channel {found:.1f} "
                             f"({diff:+.1f} channels from the expected one; {verdict}, "
                             f"tolerance {tol:.0f} channels)")
                if abs(diff) > tol:
                    notes.append(f"the counts show their leading edge at channel {found:.1f}, "
                                 f"{diff:+.1f} channels from the expected {top_sym} edge; check "
                                 "the calibration, the beam energy and the top layer")

    return lines, notes
