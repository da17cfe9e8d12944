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
