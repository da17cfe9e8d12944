"""The pre-flight checks shared by ``sondage check``, ``invert`` and ``series``
(:func:`forward.preflight`): structured findings, the leading signal compared with the counts
as a whole, the counts against the exposure, signals closer than the detector resolution.

Every spectrum here is invented: the run's own forward model with Poisson noise, measured
(when a slip is studied) with another calibration or exposure than the run file says.
"""

from __future__ import annotations

import dataclasses
import re

import numpy as np
import pytest

import forward
from benchmarks._runs import run_head
from inversion import cli

__all__: list[str] = []

#: a thin hafnium marker under a silicon cap, above a thick, light silicon carbide matrix
MARKER = """
[[layer]]
name = "cap"
formula = "Si"
thickness_nm = 20.0
density_g_cm3 = 2.33
[[layer]]
name = "marker"
formula = "Hf"
areal_density_1e15 = 1.0
[[layer]]
name = "matrix"
formula = "SiC"
substrate = true
density_g_cm3 = 3.2
"""

#: a hafnium oxide gate film over a tantalum nitride barrier on silicon
GATE = """
[[layer]]
name = "oxide"
formula = "HfO2"
thickness_nm = {oxide}
density_g_cm3 = 9.68
[[layer]]
name = "barrier"
formula = "Ta0.5N0.5"
thickness_nm = {barrier}
density_g_cm3 = 14.3
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
"""


def _run(layers, *, title="sample", energy=2000.0, charge=40.0, source="run.toml"):
    text = run_head(title=f"invented: {title}", energy_keV=energy, charge_uC=charge,
                    tilt_deg=7.0) + layers
    return forward.parse_run(text, source=source)


def _measured(run_, *, seed=3, n_channels=953, source="counts.csv", **calibration):
    """The run's spectrum with Poisson noise, measured with another calibration if given."""
    measured = run_
    if calibration:
        measured = dataclasses.replace(run_, calibration=dataclasses.replace(
            run_.calibration, **calibration))
    _, columns = forward.simulate(measured, n_channels=n_channels, poisson=True, seed=seed)
    return forward.Spectrum(channel=np.arange(n_channels), counts=columns["counts"],
                            source=source)


def _keys(report, severity):
    return [f.key for f in report.findings if f.severity == severity]


@pytest.fixture(scope="module")
def marker():
    run_ = _run(MARKER, title="Hf marker in SiC", charge=13.0)
    return run_, _measured(run_)


def test_a_thin_buried_marker_over_a_light_matrix_passes(marker):
    run_, spectrum = marker
    cal = run_.calibration
    top = max(e.edge_keV for e in forward.species_edges(run_))
    top_c = cal.channel_of(top)
    peak = spectrum.counts[int(top_c) - 10:int(top_c) + 3].max()
    assert 100 < peak < 400 and peak < 0.1 * spectrum.counts.max()  # the weak signal
    # an edge finder that looks for 10 % of the highest level takes the matrix edge instead,
    # some 300 channels lower: what made the old check cry wolf
    found = forward.find_leading_edge(spectrum.counts, spectrum.channel,
                                      run_.detector.fwhm_keV / cal.keV_per_channel)
    assert top_c - found > 200
    report = forward.preflight(run_, spectrum)
    assert report.errors == [] and "calibration.edge" not in _keys(report, "warning")
    line = next(x for x in report.lines if "leading signal" in x)
    assert "agrees" in line
    assert report.text().count("DOES NOT AGREE") == 0


@pytest.mark.parametrize("offset_keV, shift", [(420.0, 200.0), (-180.0, -100.0)])
def test_an_offset_far_off_fails_with_the_shift(marker, offset_keV, shift):
    # the run file says offset 20 keV; counts measured with an offset 400 keV lower sit
    # 400 keV / 2 keV per channel = 200 channels higher than the run file expects
    run_, spectrum = marker
    wrong = dataclasses.replace(run_, calibration=dataclasses.replace(run_.calibration,
                                                                      offset_keV=offset_keV))
    report = forward.preflight(wrong, spectrum)
    assert _keys(report, "error") == ["calibration.edge"]
    error = report.error()
    assert "calibration.offset_keV" in str(error) and "--accept-calibration" in str(error)
    m = re.search(r"shifted by ([-+0-9.]+) channels", str(error))
    assert float(m.group(1)) == pytest.approx(shift, abs=0.5)
    # accepted deliberately: a warning that says so, no error
    accepted = forward.preflight(wrong, spectrum, accept_calibration=True)
    assert accepted.errors == []
    (f,) = [f for f in accepted.warnings if f.key == "calibration.edge"]
    assert "accepted deliberately" in f.message


def test_layer_thicknesses_only_guessed_do_not_move_the_edge():
    guess = _run(GATE.format(oxide=4.0, barrier=10.0), title="gate guess")
    truth = _run(GATE.format(oxide=8.0, barrier=25.0), title="gate truth")
    report = forward.preflight(guess, _measured(truth))
    assert report.errors == []
    line = next(x for x in report.lines if "leading signal" in x)
    assert "agrees" in line


def test_an_offset_within_tolerance_but_off_warns(marker):
    run_, spectrum = marker
    off = dataclasses.replace(run_, calibration=dataclasses.replace(run_.calibration,
                                                                    offset_keV=40.0))
    report = forward.preflight(off, spectrum)
    assert report.errors == []
    assert "calibration.edge" in _keys(report, "warning")


def test_few_counts_cannot_tell_and_pass():
    # 0.01 uC: a few counts per channel in the marker; the data cannot place the edge
    run_ = _run(MARKER, title="faint", charge=0.01)
    report = forward.preflight(run_, _measured(run_))
    assert report.errors == []


@pytest.mark.parametrize("factor, severity", [(1e3, "error"), (1e-6, "error"), (2.0, "warning"),
                                              (1.2, None)])
def test_counts_against_the_exposure(marker, factor, severity):
    run_, spectrum = marker
    said = dataclasses.replace(run_, exposure=dataclasses.replace(
        run_.exposure, charge_uC=run_.exposure.charge_uC * factor))
    report = forward.preflight(said, spectrum)
    found = [f for f in report.findings if f.key == "exposure.counts"]
    if severity is None:
        assert found == []
        return
    assert [f.severity for f in found] == [severity]
    assert f"{1 / factor:.3g} times the counts the run file expects" in found[0].message
    if severity == "warning":
        assert "will have to stretch" in found[0].message
        # a free-form fit's layers are only its range and first guess: said so
        nodes = dataclasses.replace(said, fit={**dict(said.fit or {}), "profile": "nodes"})
        (free,) = [f for f in forward.preflight(nodes, spectrum).findings
                   if f.key == "exposure.counts"]
        assert free.severity == "warning" and "free-form profile" in free.message


def test_signals_closer_than_the_resolution_name_both_and_the_ways_out():
    gate = _run(GATE.format(oxide=4.0, barrier=10.0), title="gate")
    report = forward.preflight(gate)
    (f,) = [f for f in report.warnings if f.key.startswith("signals.")]
    assert f.key == "signals.Hf+Ta"
    assert "Hf and Ta" in f.message and "FWHM of 15 keV" in f.message
    assert "tilt" in f.message and "keV" in f.message
    # a thicker oxide buries the tantalum signal deep enough below hafnium's: no warning, and
    # the separations offered for the thin oxide say which set-up would do
    thick = _run(GATE.format(oxide=40.0, barrier=10.0), title="thick oxide")
    assert not [f for f in forward.preflight(thick).warnings if f.key.startswith("signals.")]


def test_physics_warnings_are_findings():
    # C above the Bozoian et al. (1990) onset 0.25 * 6 + 0.4 = 1.9 MeV (from memory), and a
    # beam above 3000 keV, where the stopping was compared with NIST ASTAR
    with pytest.warns(forward.StoppingRangeWarning):
        run_ = _run(MARKER, title="hot", energy=3500.0)
    report = forward.preflight(run_)
    keys = _keys(report, "warning")
    assert "cross_section.C" in keys and "stopping.range" in keys
    assert report.errors == []
    assert "No problems found." not in report.text()


def test_report_sections_and_an_empty_spectrum(marker):
    run_, spectrum = marker
    text = forward.preflight(run_, spectrum).text()
    assert text.startswith("run file") and "Spectrum counts.csv" in text
    empty = forward.Spectrum(channel=np.arange(10), counts=np.zeros(10), source="zeros.csv")
    report = forward.preflight(run_, empty)
    assert _keys(report, "error") == ["spectrum.empty"]
    assert "Errors" in report.text()
    quiet = _run(GATE.format(oxide=40.0, barrier=10.0), title="quiet")
    assert forward.preflight(quiet).text().rstrip().endswith("No problems found.")


def test_check_lists_reader_warnings_and_exits_2_after_an_error(tmp_path, capsys, marker):
    run_, spectrum = marker
    path = tmp_path / "run.toml"
    path.write_text(run_.text.replace("charge_uC = 13.0", "charge_uC = 1.3e-05"))
    counts = tmp_path / "counts.csv"
    forward.write_spectrum_csv(counts, {"counts": spectrum.counts}, ["invented"])
    code = cli.main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 0
    assert "did you give coulombs" in err and err.count("\n") == 1
    assert "No problems found." not in out
    assert "did you give coulombs" in out.split("Warnings")[1]  # listed in the report too
    # with the spectrum: counts a million times what that charge implies is an error
    code = cli.main(["check", str(path), str(counts)])
    out, err = capsys.readouterr()
    assert code == 2
    assert err.strip().splitlines()[-1].startswith("sondage: error: ")
    assert "exposure: the spectrum" in err and "allowed: within a factor 10" in err


def test_check_validates_the_fit_table(tmp_path, capsys):
    gate = _run(GATE.format(oxide=4.0, barrier=10.0), title="gate")
    path = tmp_path / "gate.toml"
    path.write_text(gate.text + '\n[fit]\n[fit.free]\n"oxide.areal_densty" = true\n')
    code = cli.main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 2
    assert "fit.free.oxide.areal_densty: no free quantity called 'oxide.areal_densty'" in err
    # a one-element layer's composition is not offered
    assert "wafer.composition" not in err and "oxide.composition" in err
    # a [fit] table that frees nothing is a warning in check (invert refuses it)
    path.write_text(gate.text + "\n[fit]\n")
    code = cli.main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 0 and "nothing about the sample is free" in out


def test_simulated_energies_print_short(tmp_path):
    gate = _run(GATE.format(oxide=4.0, barrier=10.0), title="gate")
    odd = dataclasses.replace(gate, calibration=dataclasses.replace(
        gate.calibration, keV_per_channel=2.2, offset_keV=12.325))
    _, columns = forward.simulate(odd, n_channels=1000)
    out = tmp_path / "s.csv"
    forward.write_spectrum_csv(out, columns, ["invented"])
    energies = [line.split(",")[1] for line in out.read_text().splitlines()[2:]]
    assert max(len(e) for e in energies) <= 12, max(energies, key=len)
    # channel centre E(c + 1/2) = 12.325 + 2.2 (c + 0.5): channel 988 at 2187.025 keV
    assert energies[988] == "2187.025"
