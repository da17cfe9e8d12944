"""What a run file's set-up implies, before anything is fitted: the pre-flight checks that
``sondage check``, ``sondage invert`` and ``sondage series`` share.

:func:`preflight` derives, for a run (and optionally a measured spectrum), the geometry, the
kinematic factor, surface-edge energy and channel of every isotope, the stopping
cross-sections at the beam energy, each layer's depth scale and depth resolution, and a list
of :class:`Finding` objects, each with a severity, a key and a message:

========================  ========  =========================================================
key                       severity  what
========================  ========  =========================================================
``input``                 warning   a warning raised while reading the run file or spectrum
``kinematics.<El>``       note      an element too light to scatter the beam to the detector
``cross_section.<El>``    warning   the beam is above the element's non-Rutherford onset
``stopping.range``        warning   the beam is above the energy the stopping was compared at
``signals.<a>+<b>``       warning   two species whose signals start closer than the FWHM
``spectrum.empty``        error     the spectrum holds no counts
``calibration.coverage``  warning   the spectrum ends below the highest expected edge
``calibration.edge``      error     the counts' leading signal is not where the run expects it
                          warning   ... it is within tolerance, but off by over half the FWHM
``exposure.counts``       error     counts off the run's expectation by more than a factor 10
                          warning   ... by more than a factor 1.5
========================  ========  =========================================================

The calibration error becomes a warning when the caller accepts the calibration
deliberately.  :meth:`Preflight.text` is the report ``sondage check`` prints;
:func:`check_report` returns it.  The physics of the edges and of the comparison with the
counts lives in :mod:`forward._signals`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ._cross_section import (NonRutherfordWarning, check_rutherford_validity,
                             non_rutherford_onset_keV, rutherford_cross_section)
from ._elements import element, ion
from ._errors import InputError
from ._kinematics import kinematic_factor
from ._path import stopping_cross_section_factor
from ._signals import (MAJOR_FRACTION, _Paths, align_leading_signal, exit_angle_deg,
                       find_leading_edge, species_edges, stopping_model_of)
from ._stopping import VALIDATED_MAX_KEV, StoppingRangeWarning

__all__ = ["Finding", "Preflight", "preflight", "check_report", "find_leading_edge",
           "MAJOR_FRACTION", "COUNTS_ERROR_FACTOR", "COUNTS_WARNING_FACTOR", "SEVERITIES"]

#: the severities of a finding, gravest first
SEVERITIES = ("error", "warning", "note")

#: Measured counts off the run file's expectation by more than this factor (either way) are an
#: error.  Every unit slip of the exposure is a factor of 1000 or more (charge in nC or C for
#: uC, solid angle in sr for msr, ions for microcoulombs), while a run file whose layers are
#: only guessed, a forgotten live fraction or charge state, or a substrate of the wrong
#: compound stays well inside a factor of 10.
COUNTS_ERROR_FACTOR = 10.0
#: A spectrum that ends below the expected highest edge holds that leading signal elsewhere
#: (a calibration error, not a cut spectrum) when a shift lines them up to within this Poisson
#: deviance per channel (a good match gives about 1; a cut spectrum, hundreds and more).
MATCH_DEVIANCE = 50.0
#: Beyond this factor the counts are a warning: the default fluence prior, normal(1, 0.05),
#: would have to stretch by ten standard deviations.
COUNTS_WARNING_FACTOR = 1.5


@dataclass(frozen=True)
class Finding:
    """One result of the pre-flight checks.

    Attributes
    ----------
    severity : str
        ``"error"`` (an inversion refuses it), ``"warning"`` (recorded, the run goes on) or
        ``"note"``.
    key : str
        What was checked, e.g. ``"calibration.edge"`` (see the module's table).
    message : str
        One line: what is wrong and what to do.
    where : str
        The file (and key) it is about, for messages.
    """

    severity: str
    key: str
    message: str
    where: str = ""

    def text(self) -> str:
        """``<where>: <message>``."""
        return f"{self.where}: {self.message}" if self.where else self.message


@dataclass
class Preflight:
    """The pre-flight report of a run (and a spectrum): the report's lines and the findings."""

    lines: list = field(default_factory=list)
    findings: list = field(default_factory=list)

    def of(self, severity: str) -> list:
        """The findings of one severity."""
        return [f for f in self.findings if f.severity == severity]

    @property
    def errors(self) -> list:
        return self.of("error")

    @property
    def warnings(self) -> list:
        return self.of("warning")

    def text(self) -> str:
        """The report ``sondage check`` prints: the sections, then every finding."""
        lines = list(self.lines) + [""]
        if not self.findings:
            lines.append("No problems found.")
        for severity, title in (("error", "Errors"), ("warning", "Warnings"),
                                ("note", "Notes")):
            found = self.of(severity)
            if found:
                lines.append(title)
                lines += [f"  - {f.text()}" for f in found]
        return "\n".join(lines) + "\n"

    def error(self) -> InputError | None:
        """The first error as an :class:`InputError` (one line, naming how many more there
        are), or None."""
        errors = self.errors
        if not errors:
            return None
        first = errors[0]
        more = (f" (and {len(errors) - 1} more error{'s' if len(errors) > 2 else ''}; "
                "sondage check lists them)") if len(errors) > 1 else ""
        return InputError(first.message + more, where=first.where or None)


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


def check_report(run_, spectrum=None) -> str:
    """The text that ``sondage check`` prints (:meth:`Preflight.text` of :func:`preflight`).

    Parameters
    ----------
    run_ : forward.Run
    spectrum : forward.Spectrum, optional

    Returns
    -------
    str
    """
    return preflight(run_, spectrum).text()


def preflight(run_, spectrum=None, *, load_warnings=(), accept_calibration: bool = False
              ) -> Preflight:
    """The pre-flight report of a run and, optionally, a measured spectrum.

    Parameters
    ----------
    run_ : forward.Run
    spectrum : forward.Spectrum, optional
    load_warnings : iterable of str or warnings.WarningMessage
        Warnings raised while the run file and the spectrum were read; listed first.
    accept_calibration : bool
        Turn the calibration error (``calibration.edge``) into a warning that says the
        calibration was accepted deliberately.

    Returns
    -------
    Preflight
    """
    findings: list[Finding] = []
    for w in load_warnings:
        if getattr(w, "category", None) is not None and issubclass(w.category,
                                                                     StoppingRangeWarning):
            continue  # said again below, from the run itself
        text = " ".join(str(getattr(w, "message", w)).split())
        if all(f.message != text for f in findings):
            findings.append(Finding("warning", "input", text))
    with warnings.catch_warnings():
        # the physics' own warnings are findings here (the cross-section table says it)
        warnings.simplefilter("ignore", NonRutherfordWarning)
        lines = _report_lines(run_, findings)
        _unresolved_signals(run_, findings)
        if spectrum is not None:
            lines += _spectrum_lines(run_, spectrum, findings, accept_calibration)
    order = {s: i for i, s in enumerate(SEVERITIES)}
    findings.sort(key=lambda f: order[f.severity])
    return Preflight(lines=lines, findings=findings)


def _report_lines(run_, findings):
    lines: list[str] = []
    g, beam, cal, det, exp = run_.geometry, run_.beam, run_.calibration, run_.detector, run_.exposure
    e0 = beam.energy_keV
    m1, z1 = beam.ion.mass_u, beam.ion.z
    phys = run_.physics
    src = run_.source
    screening = None if phys.screening == "none" else phys.screening
    model = stopping_model_of(run_)

    lines.append(f"run file   {src}")
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

    validated = VALIDATED_MAX_KEV * m1 / ion("4He").mass_u
    if e0 > validated:
        findings.append(Finding(
            "warning", "stopping.range",
            f"{beam.species} at {e0:g} keV is above {validated:.0f} keV, the highest energy at "
            "which the helium stopping has been compared with NIST ASTAR; expect stopping "
            "errors of several per cent", f"{src}: beam.energy_keV"))

    # where each element first appears, and the energies there
    paths = _Paths(run_, model)
    entry = paths.entry
    first_layer: dict[str, int] = {}
    for i, layer in enumerate(run_.layers):
        for sym in layer.fractions:
            first_layer.setdefault(sym, i)

    lines.append("")
    lines.append(f"Signals (K at {g.scattering_deg:g} deg; edge = energy at the detector from the "
                 "top of the first layer holding the element)")
    rows = []
    for sym, idx in first_layer.items():
        layer = run_.layers[idx]
        k_mean = _kinematic(m1, element(sym).mass_u, g.scattering_deg)
        for iso, frac in layer.isotope_fractions(sym):
            k = _kinematic(m1, iso.mass_u, g.scattering_deg)
            if k is None:
                rows.append([iso.label, f"{frac:.4f}", "-", "-", "-", "-", "-"])
                continue
            ke0 = k * e0
            edge = paths.out(idx, k * entry[idx]) if entry[idx] > 0 else 0.0
            rows.append([iso.label, f"{frac:.4f}", f"{k:.5f}", f"{ke0:.1f}", _channel_text(cal, ke0),
                         f"{edge:.1f}", _channel_text(cal, edge) if edge > 0 else "-"])
        if k_mean is None:
            findings.append(Finding(
                "note", f"kinematics.{sym}",
                f"{sym} is too light to scatter {beam.species} to {g.scattering_deg:g} deg; it "
                "shows no signal, only its stopping"))
    lines += _table(rows, ["isotope", "fraction", "K", "K*E0 keV", "channel", "edge keV",
                           "edge ch"])

    lines.append("")
    lines.append(f"Stopping cross-sections at {e0:g} keV (eV per 1e15 atoms/cm2)")
    rows = []
    for sym in first_layer:
        el_s, nu_s = model.electronic(sym, e0), model.nuclear(sym, e0)
        source = "table" if sym in model.tables else "built-in"
        if sym in model.scale:
            source += f" x {model.scale[sym]:g}"
        rows.append([sym, f"{el_s:.2f}", f"{nu_s:.3f}", f"{el_s + nu_s:.2f}", source])
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
            findings.append(Finding(
                "warning", f"cross_section.{sym}",
                f"{sym}: {e0:g} keV is above the estimated non-Rutherford onset of {onset:.0f} "
                "keV; give a ratio-to-Rutherford table in physics.cross_section_ratio or use a "
                "lower beam energy", src))
        rows.append([sym, f"{sigma:.4g}", f"{onset:.0f}", status])
    lines += _table(rows, ["element", "mb/sr", "onset keV", "status"])
    return lines


def _separations(run_, a: str, b: str) -> list:
    """(what, separation keV) of species ``a`` and ``b``'s edges under other set-ups: a larger
    scattering angle, a larger tilt, a higher beam energy (up to the validated range)."""
    g, beam = run_.geometry, run_.beam

    def apart(**kw):
        edges = {e.label: e.edge_keV for e in species_edges(run_, **kw)}
        return abs(edges[a] - edges[b]) if a in edges and b in edges else None

    out = []
    best = None
    for theta in (170.0, 175.0, 179.0):
        if theta <= g.scattering_deg:
            continue
        angles = exit_angle_deg(run_, theta)
        if angles is None:
            continue
        d = apart(scattering_deg=theta, incidence_deg=angles[0], exit_deg=angles[1])
        if d is not None and (best is None or d > best[1]):
            best = (f"a detector at {theta:g} deg", d)
    if best:
        out.append(best)
    best = None
    tilt_now = g.tilt_deg if g.tilt_deg is not None else g.incidence_deg
    for tilt in (30.0, 45.0, 60.0, 70.0):
        if tilt <= abs(tilt_now):
            continue
        angles = exit_angle_deg(run_, g.scattering_deg, tilt)
        if angles is None:
            continue
        d = apart(incidence_deg=angles[0], exit_deg=angles[1])
        if d is not None and (best is None or d > best[1]):
            best = (f"a tilt of {tilt:g} deg ({'Cornell' if g.layout == 'Cornell' else 'IBM'} "
                    "layout)", d)
    if best:
        out.append(best)
    top = VALIDATED_MAX_KEV * beam.ion.mass_u / ion("4He").mass_u
    if top > beam.energy_keV * 1.05:
        d = apart(e0_keV=top)
        if d is not None:
            out.append((f"a beam of {top:.0f} keV", d))
    return out


def _unresolved_signals(run_, findings):
    """Warn for each pair of species whose signals start closer than the detector FWHM."""
    fwhm = run_.detector.fwhm_keV
    edges = [e for e in species_edges(run_) if e.edge_keV > 0]
    for i, a in enumerate(edges):
        for b in edges[i + 1:]:
            gap = abs(a.edge_keV - b.edge_keV)
            if gap >= fwhm:
                continue
            options = _separations(run_, a.label, b.label)
            good = [f"{what} (edges {d:.1f} keV apart)" for what, d in options if d >= fwhm]
            if good:
                advice = "to separate them: " + ", or ".join(good)
            else:
                tried = "; ".join(f"{what}: {d:.1f} keV" for what, d in options)
                advice = ("no angle, tilt or beam energy within reach separates them"
                          + (f" ({tried})" if tried else "")
                          + f"; a detector resolution below {gap:.1f} keV would, or a [fit] "
                          "that holds one of them fixed")
            findings.append(Finding(
                "warning", f"signals.{a.label}+{b.label}",
                f"{a.label} and {b.label}: their signals start {gap:.1f} keV apart at the "
                f"detector ({a.edge_keV:.1f} and {b.edge_keV:.1f} keV), closer than the "
                f"detector FWHM of {fwhm:g} keV, so the counts cannot tell them apart there; "
                + advice, run_.source))


def _spectrum_lines(run_, spectrum, findings, accept_calibration):
    """The report's spectrum section and its findings: coverage, the leading signal, counts."""
    from ._model import ForwardModel

    cal, det = run_.calibration, run_.detector
    where = str(spectrum.source)
    ch = np.asarray(spectrum.channel, dtype=int)
    counts = np.asarray(spectrum.counts, dtype=float)
    lines = ["", f"Spectrum {spectrum.source}",
             f"  {len(spectrum)} channels from {int(ch[0])} to {int(ch[-1])}"
             + (" (with gaps)" if spectrum.has_gaps else "") + f", {counts.sum():.6g} counts"]
    if not np.any(counts > 0):
        lines.append("  no counts")
        findings.append(Finding("error", "spectrum.empty", "every count is zero: there is "
                                "nothing to fit; give a measured spectrum with counts", where))
        return lines
    calibration_where = f"{run_.source}: calibration"
    accepted = " (accepted deliberately with --accept-calibration)"

    def calibration_problem(key, message):
        if accept_calibration:
            findings.append(Finding("warning", key, message + accepted, calibration_where))
        else:
            findings.append(Finding("error", key, message + "; or, if you are sure, run again "
                                    "with --accept-calibration", calibration_where))

    edges = [e for e in species_edges(run_) if e.edge_keV > 0
             and run_.layers[e.layer].fractions.get(e.symbol, 0.0) >= MAJOR_FRACTION]
    if not edges:
        lines.append("  no signal of a major element reaches the detector; the calibration "
                     "cannot be checked")
        return lines
    top = max(edges, key=lambda e: e.edge_keV)
    top_c = cal.channel_of(top.edge_keV)
    lines.append(f"  highest expected edge (elements >= {MAJOR_FRACTION:g} atom fraction): "
                 f"{top.label} at {top.edge_keV:.1f} keV, channel "
                 f"{_channel_text(cal, top.edge_keV)}")
    if not math.isfinite(top_c) or top_c >= 65535:
        lines.append("  the calibration puts it beyond the channels a spectrum can hold")
        return lines
    fwhm_ch = det.fwhm_keV / cal.keV_per_channel
    covered = top_c < ch[-1]
    if covered:
        lines.append("  coverage: yes, the spectrum reaches the highest edge")
    else:
        lines.append("  coverage: NO, the spectrum ends below the highest edge")
        findings.append(Finding(
            "warning", "calibration.coverage",
            f"the spectrum {where} ends at channel {int(ch[-1])}, below the {top.label} edge "
            f"the run expects in channel {_channel_text(cal, top.edge_keV)}: the spectrum was "
            "cut, or the calibration is off (check calibration.keV_per_channel and "
            "offset_keV); an inversion sees none of that signal", calibration_where))
    tolerance = max(3.0, 2.0 * fwhm_ch)
    n_model = int(min(65536, max(int(ch[-1]) + 1, math.ceil(top_c + 4.0 * fwhm_ch) + 2)))
    model = ForwardModel(run_, n_channels=n_model)
    expected = np.asarray(model.expected_counts(model.layer_fractions()), dtype=float)
    full = np.full(int(ch[-1]) + 1, np.nan)
    full[ch] = counts
    found = align_leading_signal(expected, full, top_c, fwhm_ch, tolerance_channels=tolerance)
    if found is None:
        lines.append("  leading signal: the spectrum does not hold the channels around it; not "
                     "compared")
        return lines
    shift = round(found.shift_channels, 1) + 0.0  # no "-0.0"
    shift_keV = round(shift * cal.keV_per_channel, 1) + 0.0
    # a spectrum that does not reach the expected edge disagrees only where the expected
    # leading signal shows up elsewhere in it, unmistakably (else it was cut)
    agrees = found.agrees if covered else (abs(shift) <= tolerance
                                           or found.deviance_per_channel > MATCH_DEVIANCE)
    if agrees:
        verdict = ("agrees" if abs(shift) <= tolerance else
                   "the counts cannot tell; accepted" if covered else
                   "no match elsewhere in the counts")
    else:
        verdict = "DOES NOT AGREE"
    lines.append(f"  leading signal: the counts line up with the expected one shifted by "
                 f"{shift:+.1f} channels ({shift_keV:+.1f} keV); {verdict}, tolerance "
                 f"{tolerance:.0f} channels")
    if not agrees:
        calibration_problem("calibration.edge",
                            f"the counts of {where} line up with the run's expected spectrum "
                            f"only when it is shifted by {shift:+.1f} channels "
                            f"({shift_keV:+.1f} keV at {cal.keV_per_channel:g} keV per "
                            f"channel; the tolerance is {tolerance:.0f} channels); check "
                            "calibration.offset_keV and keV_per_channel, the beam energy and "
                            "the top layer")
    elif covered and abs(shift) > max(2.0, 0.5 * fwhm_ch) and found.gain_over_zero >= 25.0:
        findings.append(Finding(
            "warning", "calibration.edge",
            f"the counts of {where} line up with the run's expected spectrum when it is shifted "
            f"by {shift:+.1f} channels ({shift_keV:+.1f} keV), within the tolerance of "
            f"{tolerance:.0f} channels but more than half the detector FWHM; correct "
            "calibration.offset_keV (an inversion's default offset prior has an sd of 2 keV)",
            calibration_where))
    if not agrees or not covered:
        lines.append("  counts: not compared while the calibration is in doubt")
        return lines
    ratio = found.scale
    lines.append(f"  counts: {ratio:.3g} x what the run file expects (median over the channels "
                 f"where it expects most; allowed: within a factor {COUNTS_ERROR_FACTOR:g}, "
                 f"quiet within {COUNTS_WARNING_FACTOR:g})")
    off = max(ratio, 1.0 / ratio)
    text = (f"the spectrum {where} holds {ratio:.3g} times the counts the run file expects "
            "(exposure.charge_uC or particles, live_fraction, charge_state, "
            "detector.solid_angle_msr, the layers)")
    if off > COUNTS_ERROR_FACTOR:
        findings.append(Finding("error", "exposure.counts", text + "; a factor of 1000 is a "
                                "unit slip (nC or C for uC, sr for msr); allowed: within a "
                                f"factor {COUNTS_ERROR_FACTOR:g}", f"{run_.source}: exposure"))
    elif off > COUNTS_WARNING_FACTOR:
        free_form = isinstance(getattr(run_, "fit", None), dict) and \
            run_.fit.get("profile") == "nodes"
        findings.append(Finding("warning", "exposure.counts", text + (
            "; a free-form profile's layers only set its depth range and starting guess, so "
            "a profile unlike them explains part of this, but check the exposure: the fluence "
            "prior is normal(1, 0.05)" if free_form else
            "; the fluence prior normal(1, 0.05) will have to stretch"),
            f"{run_.source}: exposure"))
    return lines
