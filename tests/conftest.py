"""Shared test helpers."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
#: NIST ASTAR/PSTAR tabulations (NIST Standard Reference Database 124, implementing ICRU Report
#: 49), laid beside the project for tests only; see ../shared/refdata/README.md.
REFDATA = ROOT.parent / "shared" / "refdata"


def read_refdata(name: str) -> list[dict]:
    """Rows of a reference tabulation, or skip the test when the folder is absent."""
    path = REFDATA / name
    if not path.exists():
        pytest.skip(f"reference data {path} not present (it lies beside the project only on "
                    "developer and CI machines)")
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="session")
def small_result(tmp_path_factory):
    """A real, finished 20-step inversion of the invented corpus case (tantalum nitride on
    silicon, tests/bad_inputs/_valid_fit_run.toml), written in this process."""
    from inversion import cli

    corpus = ROOT / "tests" / "bad_inputs"
    out = tmp_path_factory.mktemp("small") / "small.h5"
    code = cli.main(["-q", "invert", str(corpus / "_valid_fit_run.toml"),
                     str(corpus / "_valid_spectrum.csv"), "-o", str(out), "--workers", "1"])
    assert code == 0
    return out
