"""The ``sondage`` command frame, the ``check`` command and the bad-input corpus.

Every sample here is invented.  Physics numbers printed by ``check`` come from the forward
package (tested in its own files); here we check that the command reports them consistently
with closed-form relations.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

import forward
from inversion import cli
from forward import check_report, find_leading_edge

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"
EXPECTED = tomllib.loads((CORPUS / "expected.toml").read_text())
VALID_RUN = CORPUS / "_valid_run.toml"


def _run_main(capsys, argv):
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _assert_one_line_error(code, err, fragment, name):
    assert code == 2, err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith("sondage: error: ")
    assert fragment in lines[0], (fragment, lines[0])
    assert name.split(":")[0] in lines[0]  # the message names the file


# ----------------------------------------------------------------------------------------------
# the corpus
def test_corpus_is_large_enough():
    assert len(EXPECTED["run"]) >= 20
    assert len(EXPECTED["spectrum"]) >= 8
    for name in EXPECTED["run"]:
        assert (CORPUS / name).is_file(), name


@pytest.mark.parametrize("name", sorted(EXPECTED["run"]))
def test_bad_run_file(capsys, name):
    code, out, err = _run_main(capsys, ["check", CORPUS / name])
    _assert_one_line_error(code, err, EXPECTED["run"][name], name)
    assert out == ""


@pytest.mark.parametrize("name", sorted(EXPECTED["spectrum"]))
def test_bad_spectrum(capsys, name):
    code, out, err = _run_main(capsys, ["check", VALID_RUN, f"{CORPUS}/{name}"])
    _assert_one_line_error(code, err, EXPECTED["spectrum"][name], name)


def test_valid_corpus_run_passes(capsys):
    code, out, err = _run_main(capsys, ["check", VALID_RUN])
    assert code == 0, err
    assert "No problems found." in out


def _subprocess(args, **kw):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run([sys.executable, "-m", "inversion.cli", *map(str, args)],
                          capture_output=True, text=True, env=env, cwd=HERE.parent, timeout=120, **kw)


def test_corpus_exit_codes_in_a_real_process():
    # one run file and one spectrum through a real interpreter, for the true exit status
    name = "proton_beam.toml"
    proc = _subprocess(["check", CORPUS / name])
    _assert_one_line_error(proc.returncode, proc.stderr, EXPECTED["run"][name], name)
    name = "ragged_rows.csv"
    proc = _subprocess(["check", VALID_RUN, CORPUS / name])
    _assert_one_line_error(proc.returncode, proc.stderr, EXPECTED["spectrum"][name], name)


# ----------------------------------------------------------------------------------------------
# the frame
def test_version(capsys):
    code, out, err = _run_main(capsys, ["--version"])
    import importlib.metadata
    assert code == 0
    assert out.strip() == f"sondage {importlib.metadata.version('sondage')}"


def test_usage_error_exits_2(capsys):
    code, out, err = _run_main(capsys, ["check"])
    assert code == 2
    assert "usage:" in err and "RUN.toml" in err
    code, out, err = _run_main(capsys, ["no-such-command"])
    assert code == 2


def test_no_command_prints_help_and_exits_2(capsys):
    code, out, err = _run_main(capsys, [])
    assert code == 2
    assert "check" in err


def test_command_modules_define_the_contract():
    names = [name for name, _ in cli._available_commands()]
    assert "check" in names
    for name, module in cli._available_commands():
        assert isinstance(module.HELP, str) and "\n" not in module.HELP.strip()
        assert "sondage " + name in module.DESCRIPTION  # usage examples
        assert callable(module.add_arguments) and callable(module.run)


def test_missing_and_folder_inputs_exit_2(capsys, tmp_path):
    code, out, err = _run_main(capsys, ["check", tmp_path / "absent.toml"])
    _assert_one_line_error(code, err, "run file not found", str(tmp_path / "absent.toml"))
    code, out, err = _run_main(capsys, ["check", tmp_path])
    _assert_one_line_error(code, err, "folder", str(tmp_path))


def test_unreadable_file_is_an_os_error_exit_2(capsys, tmp_path, monkeypatch):
    path = tmp_path / "run.toml"
    path.write_text(VALID_RUN.read_text())

    def refuse(self):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "read_bytes", refuse)
    code, out, err = _run_main(capsys, ["check", path])
    assert code == 2
    assert err.strip() == f"sondage: error: {path}: Permission denied"


def test_internal_error_exit_1_and_debug_traceback(capsys, monkeypatch):
    def boom(*a, **k):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(forward, "preflight", boom)
    code, out, err = _run_main(capsys, ["check", VALID_RUN])
    assert code == 1
    assert err.strip() == ("sondage: internal error: ZeroDivisionError: float division by zero "
                           "(run with --debug for the traceback)")
    code, out, err = _run_main(capsys, ["--debug", "check", VALID_RUN])
    assert code == 1
    assert "Traceback" in err


def test_keyboard_interrupt_exit_130(capsys, monkeypatch):
    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(forward, "preflight", interrupted)
    code, out, err = _run_main(capsys, ["check", VALID_RUN])
    assert code == 130
    assert err.strip() == "sondage: interrupted"


# ----------------------------------------------------------------------------------------------
# check on good input
INVENTED_RUN = """
title = "invented: hafnium silicate gate film with an 18O tracer on silicon"
[beam]
ion = "4He"
energy_keV = 1800.0
[geometry]
scattering_deg = 170.0
tilt_deg = 5.0
layout = "Cornell"
[detector]
fwhm_keV = 14.0
solid_angle_msr = 2.0
[calibration]
keV_per_channel = 1.8
offset_keV = 12.0
[exposure]
particles = 5.0e13
[[layer]]
name = "gate"
formula = "Hf0.2Si0.2O0.6"
areal_density_1e15 = 60.0
density_g_cm3 = 6.0
isotopes = { O = { 18 = 0.9, 16 = 0.1 } }
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
"""


@pytest.fixture()
def invented_run():
    return forward.parse_run(INVENTED_RUN, source="invented.toml")


def _section(text, title):
    """The lines of the report section whose heading starts with ``title``."""
    out, inside = [], False
    for line in text.splitlines():
        if line and not line.startswith(" "):
            inside = line.startswith(title)
            continue
        if inside:
            out.append(line)
    assert out, f"no section {title!r} in\n{text}"
    return "\n".join(out)


def _row(text, label):
    for line in text.splitlines():
        parts = line.split()
        if parts and parts[0] == label:
            return parts
    raise AssertionError(f"no row {label!r} in\n{text}")


def test_check_prints_kinematics_and_channels(invented_run):
    text = check_report(invented_run)
    g = invented_run.geometry
    # Cornell layout: cos th2 = -cos(theta) cos(tilt) (common practice; derived in test_runfile)
    th2 = math.degrees(math.acos(-math.cos(math.radians(170)) * math.cos(math.radians(5))))
    assert f"{th2:.2f} deg" in text and g.layout == "Cornell"
    m1 = forward.ion("4He").mass_u
    for label, (sym, a) in {"180Hf": ("Hf", 180), "18O": ("O", 18), "28Si": ("Si", 28)}.items():
        m2 = forward.isotope(sym, a).mass_u
        # closed-form elastic kinematic factor (Chu, Mayer and Nicolet, Backscattering
        # Spectrometry, 1978, eq. 2.5), written out here independently of forward
        t = math.radians(170.0)
        k = ((math.sqrt(m2**2 - (m1 * math.sin(t))**2) + m1 * math.cos(t)) / (m1 + m2))**2
        row = _row(text, label)
        assert float(row[2]) == pytest.approx(k, abs=1e-5)
        assert float(row[3]) == pytest.approx(k * 1800.0, abs=0.05)
        # channel of K*E0 from E(c) = 12 + 1.8 c at the lower edge
        assert int(row[4]) == math.floor((k * 1800.0 - 12.0) / 1.8)
    # the 18O override appears with its fraction
    assert float(_row(text, "18O")[1]) == pytest.approx(0.9)


def test_check_layer_depth_scale_is_consistent(invented_run):
    text = check_report(invented_run)
    layer = invented_run.layers[0]
    layer_row = _row(_section(text, "Layers"), "Hf")
    eps, kev_per_1e15, kev_per_nm, res_1e15, res_nm = map(float, layer_row[1:6])
    assert kev_per_1e15 == pytest.approx(eps / 1000.0, rel=1e-3)
    assert res_1e15 == pytest.approx(14.0 / kev_per_1e15, rel=2e-3)
    assert res_nm == pytest.approx(res_1e15 * layer.nm_per_1e15(), rel=2e-3)
    assert kev_per_nm == pytest.approx(kev_per_1e15 / layer.nm_per_1e15(), rel=2e-3)
    # [eps_0] = K S(E0)/cos th1 + S(K E0)/cos th2 (Chu, Mayer and Nicolet 1978, ch. 3), with the
    # layer's Bragg's-rule stopping from forward.StoppingModel
    model = forward.StoppingModel("4He")
    k = forward.kinematic_factor(forward.ion("4He").mass_u, forward.element("Hf").mass_u, 170.0)
    g = invented_run.geometry
    s_in = model.mixture(layer.fractions, 1800.0)
    s_out = model.mixture(layer.fractions, k * 1800.0)
    expected = (k * s_in / math.cos(math.radians(g.incidence_deg))
                + s_out / math.cos(math.radians(g.exit_deg)))
    assert eps == pytest.approx(expected, abs=0.05)


def test_check_warns_above_the_non_rutherford_onset(capsys, tmp_path):
    # O at 3500 keV is above the Bozoian et al. (1990) 4He onset of 0.25*8 + 0.4 = 2.4 MeV
    run_text = INVENTED_RUN.replace("energy_keV = 1800.0", "energy_keV = 3500.0")
    path = tmp_path / "hot.toml"
    path.write_text(run_text)
    code, out, err = _run_main(capsys, ["check", path])
    assert code == 0
    table = _section(out, "Cross-sections")
    assert " ".join(_row(table, "O")[3:]) == "ABOVE ONSET"
    assert float(_row(table, "O")[2]) == pytest.approx(2400.0)
    assert _row(table, "Hf")[3] == "Rutherford"  # 0.25*72 + 0.4 = 18.4 MeV, far above
    assert "O: 3500 keV is above the estimated non-Rutherford onset of 2400 keV" in out


def _simulated(run_, tmp_path, name="spec.csv", seed=7, **calibration):
    """An invented spectrum: the run's own expected spectrum with Poisson noise, as measured
    with another calibration (keys of [calibration]) when given."""
    import dataclasses

    measured = run_
    if calibration:
        measured = dataclasses.replace(run_, calibration=dataclasses.replace(
            run_.calibration, **calibration))
    model, columns = forward.simulate(measured, n_channels=1024, poisson=True, seed=seed)
    path = tmp_path / name
    forward.write_spectrum_csv(path, {"counts": columns["counts"]}, ["invented, simulated"])
    return path


def _shift_channels(out):
    import re

    m = re.search(r"leading signal: the counts line up with the expected one shifted by "
                  r"([-+0-9.]+) channels", out)
    assert m, out
    return float(m.group(1))


def test_check_finds_the_edge_in_a_matching_spectrum(capsys, tmp_path, invented_run):
    spec = _simulated(invented_run, tmp_path)
    run_path = tmp_path / "run.toml"
    run_path.write_text(INVENTED_RUN)
    code, out, err = _run_main(capsys, ["check", run_path, spec])
    assert code == 0, err
    assert "coverage: yes" in out
    assert "agrees" in out and "DOES NOT AGREE" not in out
    assert "No problems found." in out
    assert abs(_shift_channels(out)) <= 0.5
    assert "counts: 1" in out or "counts: 0.99" in out


def test_check_flags_a_shifted_spectrum(capsys, tmp_path, invented_run):
    # measured with the offset 150 keV lower than the run file says: every signal sits
    # 150 keV / 1.8 keV per channel = 83.3 channels higher in the counts
    spec = _simulated(invented_run, tmp_path, offset_keV=12.0 - 150.0)
    run_path = tmp_path / "run.toml"
    run_path.write_text(INVENTED_RUN)
    code, out, err = _run_main(capsys, ["check", run_path, spec])
    assert code == 2
    assert "DOES NOT AGREE" in out
    assert "calibration.offset_keV" in err and "--accept-calibration" in err
    assert len(err.strip().splitlines()) == 1
    assert _shift_channels(out) == pytest.approx(150.0 / 1.8, abs=0.6)


def test_check_flags_a_short_spectrum(capsys, tmp_path, invented_run):
    spec = tmp_path / "short.csv"
    spec.write_text("\n".join(["100"] * 300) + "\n")
    run_path = tmp_path / "run.toml"
    run_path.write_text(INVENTED_RUN)
    code, out, err = _run_main(capsys, ["check", run_path, spec])
    assert code == 0  # a cut spectrum is a warning: nothing in it looks like the leading edge
    assert "coverage: NO" in out
    assert "ends at channel 299" in out and "cut" in out


def test_check_flags_a_spectrum_whose_edge_lies_beyond_the_calibration(capsys, tmp_path,
                                                                      invented_run):
    # measured with the offset 300 keV higher than the run file says: the counts hold the
    # leading signal 166.7 channels lower, and the run expects it beyond their last channel
    spec = _simulated(invented_run, tmp_path, offset_keV=12.0 + 300.0)
    text = spec.read_text().splitlines()
    spec.write_text("\n".join(text[:2 + 820]) + "\n")  # channels 0..819
    run_path = tmp_path / "run.toml"
    run_path.write_text(INVENTED_RUN)
    code, out, err = _run_main(capsys, ["check", run_path, spec])
    assert code == 2, out
    assert "coverage: NO" in out and "DOES NOT AGREE" in out
    assert _shift_channels(out) == pytest.approx(-300.0 / 1.8, abs=0.6)


def test_find_leading_edge_on_a_smooth_step():
    # an exact error-function step: the half-height point is the step position (common practice)
    from scipy.special import erfc

    ch = np.arange(400)
    sigma = 4.0
    counts = 1000.0 * 0.5 * erfc((ch + 0.5 - 250.3) / (math.sqrt(2) * sigma))
    fwhm = 2.0 * math.sqrt(2.0 * math.log(2.0)) * sigma
    assert find_leading_edge(counts, ch, fwhm) == pytest.approx(250.3, abs=0.1)
    assert find_leading_edge(counts, ch, 1) == pytest.approx(250.3, abs=0.1)


def test_find_leading_edge_sees_a_thin_top_peak_below_the_substrate_plateau():
    ch = np.arange(600)
    counts = np.where(ch < 300, 1000.0, 0.0)
    counts[480:490] = 300.0  # a thin heavy film, 30 % of the substrate height
    found = find_leading_edge(counts, ch, 1)
    assert found == pytest.approx(490.0, abs=0.5)
    assert find_leading_edge(np.zeros(10), np.arange(10), 3) is None
