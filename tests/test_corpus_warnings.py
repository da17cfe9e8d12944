"""The corpus inputs that `sondage check` reads: with one warning, or without a word.

tests/bad_inputs/expected.toml lists them in ``[run_warning]`` and ``[spectrum_warning]`` (an
input that looks like a slip: exit code 0, exactly one ``sondage: warning:`` line on stderr
naming the file and the key or line) and in ``[accepted]`` (files saved by editors and
spreadsheets in forms a stricter reader refused: exit code 0, nothing on stderr).  The errors
of the same corpus are tested in tests/test_bad_inputs.py.  All content is invented.
"""

from __future__ import annotations

import tomllib
import warnings
from pathlib import Path

import pytest

import forward
from inversion import cli

__all__: list[str] = []

CORPUS = Path(__file__).resolve().parent / "bad_inputs"
EXPECTED = tomllib.loads((CORPUS / "expected.toml").read_text())
VALID_RUN = CORPUS / "_valid_run.toml"

WARNING_CASES = ([(f"run:{n}", [CORPUS / n], f) for n, f in EXPECTED["run_warning"].items()]
                 + [(f"spectrum:{n}", [VALID_RUN, CORPUS / n], f)
                    for n, f in EXPECTED["spectrum_warning"].items()])
ACCEPTED_CASES = ([(f"run:{n}", [CORPUS / n]) for n in EXPECTED["accepted"]["run"]]
                  + [(f"spectrum:{n}", [VALID_RUN, CORPUS / n])
                     for n in EXPECTED["accepted"]["spectrum"]])


def _check(capsys, inputs):
    code = cli.main(["check", *map(str, inputs)])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("case_id, inputs, fragment", WARNING_CASES,
                         ids=[c[0] for c in WARNING_CASES])
def test_warning_is_one_line_naming_file_and_key(capsys, case_id, inputs, fragment):
    with warnings.catch_warnings():
        warnings.simplefilter("always")  # the registry of an earlier test must not hide it
        code, out, err = _check(capsys, inputs)
    assert code == 0, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith(f"sondage: warning: {inputs[-1]}: "), lines[0]
    assert fragment in lines[0], (fragment, lines[0])
    assert "Traceback" not in err
    assert out.startswith("run file")  # the report is still printed


@pytest.mark.parametrize("case_id, inputs", ACCEPTED_CASES, ids=[c[0] for c in ACCEPTED_CASES])
def test_accepted_inputs_read_silently(capsys, case_id, inputs):
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        code, out, err = _check(capsys, inputs)
    assert code == 0, err
    assert err == ""
    assert out.startswith("run file")


def test_warning_categories():
    # the category lets a caller filter them; each load warns once
    with pytest.warns(forward.InputWarning) as record:
        forward.load_run(CORPUS / "charge_in_coulombs.toml")
    assert len(record) == 1
    with pytest.warns(forward.StoppingRangeWarning) as record:
        forward.load_run(CORPUS / "beam_above_validated_stopping.toml")
    assert len(record) == 1
    with pytest.warns(forward.NonIntegerCountsWarning) as record:
        spectrum = forward.read_spectrum(CORPUS / "fractional_counts.csv")
    assert len(record) == 1 and issubclass(forward.NonIntegerCountsWarning, forward.InputWarning)
    assert spectrum.whole_counts is False


def test_every_listed_file_exists():
    names = [*EXPECTED["run_warning"], *EXPECTED["spectrum_warning"],
             *EXPECTED["accepted"]["run"], *EXPECTED["accepted"]["spectrum"]]
    assert len(names) == len(set(names))
    for name in names:
        assert (CORPUS / name).is_file(), name
