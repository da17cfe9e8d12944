"""The bad-input corpus (tests/bad_inputs/, every case invented), run through the real commands.

One table-driven test covers run files (``sondage check RUN``), spectra (``sondage check
_valid_run.toml SPECTRUM``), inversions (``sondage invert RUN SPECTRUM -o OUT``), series
(``sondage series SERIES -o OUT``) and any command with options (``[[command]]``): exit code 2,
the expected fragment, exactly one line on stderr, no traceback, and nothing written.  The cases and fragments live in tests/bad_inputs/expected.toml.  One
case of each kind also runs in a separate interpreter, for the true process exit status.
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

from inversion import cli

__all__: list[str] = []

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"
EXPECTED = tomllib.loads((CORPUS / "expected.toml").read_text())
VALID_RUN = CORPUS / "_valid_run.toml"


def _cases():
    """(id, kind, argv builder, fragment) for every corpus entry."""
    cases = []
    for name, fragment in EXPECTED["run"].items():
        cases.append((f"run:{name}", "check", [CORPUS / name], fragment))
    for name, fragment in EXPECTED["spectrum"].items():
        cases.append((f"spectrum:{name}", "check", [VALID_RUN, f"{CORPUS}/{name}"], fragment))
    for entry in EXPECTED["invert"]:
        cases.append((f"invert:{entry['run']}+{entry['spectrum']}", "invert",
                      [CORPUS / entry["run"], f"{CORPUS}/{entry['spectrum']}"],
                      entry["fragment"]))
    for name, fragment in EXPECTED["series"].items():
        cases.append((f"series:{name}", "series", [CORPUS / name], fragment))
    for entry in EXPECTED["command"]:
        argv = [str(CORPUS / a) if (CORPUS / a).exists() else a for a in entry["argv"]]
        cases.append((f"command:{' '.join(entry['argv'])}", "command", argv,
                      entry["fragment"]))
    return cases


CASES = _cases()


def _argv(kind, inputs, tmp_path):
    if kind == "command":
        return [str(a).replace("{tmp}", str(tmp_path)) for a in inputs]
    argv = [kind, *map(str, inputs)]
    if kind == "invert":
        argv += ["-o", str(tmp_path / "result.h5"), "--workers", "1"]
    elif kind == "series":
        argv += ["-o", str(tmp_path / "series.h5"), "--workers", "1", "--no-progress"]
    return argv


def _assert_one_line_error(code, err, fragment):
    assert code == 2, err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith("sondage: error: "), lines[0]
    assert fragment in lines[0], (fragment, lines[0])


def _digest(paths):
    out = {}
    for p in paths:
        if not str(p).startswith(str(CORPUS)):  # an option or an output
            continue
        p = Path(str(p).split(".h5:")[0] + ".h5") if ".h5:" in str(p) else Path(p)
        out[str(p)] = hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else None
    return out


def test_corpus_size_and_files():
    # the brief: at least 30 broken inputs across run files, spectra and series files
    assert len(CASES) >= 30
    kinds = {c[1] for c in CASES}
    assert kinds == {"check", "invert", "series", "command"}
    assert len(EXPECTED["series"]) >= 10 and len(EXPECTED["invert"]) >= 5
    for _, kind, inputs, _ in CASES:
        for p in inputs:
            text = str(p)
            if "no_such_file" in text or kind == "command":
                continue
            assert Path(text.split(".h5:")[0] + (".h5" if ".h5:" in text else "")).exists(), p


@pytest.mark.parametrize("case_id, kind, inputs, fragment", CASES, ids=[c[0] for c in CASES])
def test_bad_input(capsys, tmp_path, case_id, kind, inputs, fragment):
    before = _digest(inputs)
    code = cli.main(_argv(kind, inputs, tmp_path))
    out, err = capsys.readouterr()
    _assert_one_line_error(code, err, fragment)
    assert _digest(inputs) == before  # inputs untouched
    # nothing half-written: a refused command leaves nothing behind (not even a lock file)
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_valid_corpus_inputs_are_accepted(capsys):
    # the invalid cases differ from these valid ones by the one broken thing each
    assert cli.main(["check", str(VALID_RUN)]) == 0
    assert cli.main(["check", str(CORPUS / "_valid_fit_run.toml"),
                     str(CORPUS / "_valid_spectrum.csv")]) == 0
    from inversion import load_series

    series = load_series(CORPUS / "_valid_series.toml")
    assert [m.label for m in series.members] == ["asdep", "a700"]
    joint = load_series(CORPUS / "_valid_joint_series.toml")
    assert joint.measurement_names == ("front", "repeat")
    assert [list(m.spectra) for m in joint.members] == [["front", "repeat"]] * 2
    assert joint.members[1].measurement_overrides == {
        "repeat": {"exposure": {"charge_uC": 8.0}, "calibration": {"offset_keV": 35.0}}}
    capsys.readouterr()


def _subprocess(argv):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run([sys.executable, "-m", "inversion.cli", *argv], capture_output=True,
                          text=True, env=env, cwd=HERE.parent, timeout=180)


@pytest.mark.parametrize("case_id", ["run:proton_beam.toml", "spectrum:ragged_rows.csv",
                                     "invert:_valid_fit_run.toml+all_zero_counts.csv",
                                     "series:series_missing_spectrum.toml"])
def test_exit_status_in_a_real_process(tmp_path, case_id):
    (_, kind, inputs, fragment), = [c for c in CASES if c[0] == case_id]
    proc = _subprocess(_argv(kind, inputs, tmp_path))
    _assert_one_line_error(proc.returncode, proc.stderr, fragment)
