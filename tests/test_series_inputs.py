"""``sondage series`` speaks in one voice: the warnings of members inverted on dask workers
reach the terminal as ``sondage: warning: member <label>: ...`` lines, never as raw Python
warnings, and a member without the chosen interface's signal is refused before any worker
starts (tests/bad_inputs: series_member_99_channels.toml, series_member_cut_below_film.toml).
The series is the invented tantalum-nitride barrier of the bad-input corpus."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

__all__: list[str] = []

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"


@pytest.mark.slow
def test_member_warnings_are_printed_by_the_runner_not_raw(tmp_path):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    proc = subprocess.run([sys.executable, "-m", "inversion.cli", "series",
                           str(CORPUS / "_valid_series.toml"), "-o", str(tmp_path / "s.h5"),
                           "--workers", "2", "--no-progress"], env=env, cwd=HERE.parent,
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert lines, "the 20-step members do not converge: their warnings must be printed"
    assert all(line.startswith("sondage: warning: member ") for line in lines), lines
    assert {line.split(":")[2].strip() for line in lines} == {"member asdep", "member a700"}
    assert any("NOT CONVERGED" in line for line in lines)
    assert "Warning:" not in proc.stderr and "warnings.warn" not in proc.stderr
