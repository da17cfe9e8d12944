"""The bundled invented demo runs end to end (reduced: a short chain), as `make demo` would."""

from pathlib import Path

import h5py
import pytest

from inversion.cli import main


@pytest.mark.slow
def test_demo_runs_end_to_end_in_reduced_form(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "-o", str(out), "--max-steps", "60", "--workers", "1"]) == 0
    printed = capsys.readouterr().out
    result = out / "demo-result.h5"
    assert str(result) in printed and "TRUTH.md" in printed
    with h5py.File(result, "r") as f:
        assert f["posterior/samples"].shape[0] > 0
        names = list(f["posterior/samples"].attrs["names"])
        assert {"cap.areal_density", "film.areal_density", "film.mixing"} <= set(names)
        # 60 steps cannot satisfy the 50-autocorrelation-time rule: the file must say so
        assert not bool(f["diagnostics"].attrs["converged"])
    for name in ("spectrum", "profile", "corner", "convergence"):
        for ext in ("png", "svg"):
            assert (out / "report" / f"{name}.{ext}").stat().st_size > 1000
    summary = (out / "report" / "summary.md").read_text()
    assert "NOT CONVERGED" in summary


def test_demo_refuses_an_output_that_is_a_file(tmp_path, capsys):
    target = tmp_path / "a-file"
    target.write_text("not a folder")
    assert main(["demo", "-o", str(target)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not a folder" in err[0]
    assert target.read_text() == "not a folder"
