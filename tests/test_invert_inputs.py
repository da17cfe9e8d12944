"""``sondage invert`` one step off the documented path: counts that are not whole numbers,
warnings that must not be lost when an input error ends a run, a calibration accepted
deliberately, a resumed file given another seed, the exit code for batches, the progress bar,
a run that fails at its start, files another program holds open, and the size of the result
file.  The sample is the invented tantalum-nitride-on-silicon case of the bad-input corpus.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
import warnings
from pathlib import Path

import h5py
import numpy as np
import pytest

import forward
from forward import InputError
from inversion import cli, read_result
from inversion.results import _outputs

__all__: list[str] = []

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"
RUN = CORPUS / "_valid_fit_run.toml"
SPECTRUM = CORPUS / "_valid_spectrum.csv"


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _fractional(tmp_path) -> Path:
    """The corpus spectrum with three counts halved (as a rescaled spectrum would hold)."""
    spectrum = forward.read_spectrum(SPECTRUM)
    counts = spectrum.counts.astype(float)
    counts[[300, 400, 500]] += 0.5
    path = tmp_path / "fractional.csv"
    forward.write_spectrum_csv(path, {"channel": spectrum.channel, "counts": counts},
                               ["invented: the corpus spectrum with three half counts"])
    return path


def _invert(capsys, *argv):
    code = cli.main(["invert", *map(str, argv), "--workers", "1"])
    out, err = capsys.readouterr()
    return code, out, err


def test_non_whole_counts_are_read_with_the_readers_warning(tmp_path, capsys):
    spectrum = _fractional(tmp_path)
    out_file = tmp_path / "r.h5"
    code, out, err = _invert(capsys, RUN, spectrum, "-o", out_file)
    assert code == 0, err
    warning = [line for line in err.splitlines() if "not whole numbers" in line]
    assert len(warning) == 1
    assert warning[0].startswith(f"sondage: warning: {spectrum}: 3 of 900 counts")
    # the same rule in the library, and the warning in the file with the other input warnings
    result = read_result(out_file)
    assert any("not whole numbers" in w for w in result.diagnostics["input_warnings"])


def test_warnings_are_printed_when_an_input_error_ends_the_run(tmp_path, capsys):
    code, out, err = _invert(capsys, CORPUS / "fit_free_typo.toml", _fractional(tmp_path), "-o",
                             tmp_path / "r.h5")
    lines = err.strip().splitlines()
    assert code == 2
    assert len(lines) == 2 and "not whole numbers" in lines[0]
    assert lines[1].startswith("sondage: error: ") and "areal_densty" in lines[1]
    assert not (tmp_path / "r.h5").exists()


def test_a_calibration_accepted_deliberately_is_recorded_and_reported(tmp_path, capsys):
    out_file = tmp_path / "r.h5"
    bad = CORPUS / "offset_off_400.toml"
    code, out, err = _invert(capsys, bad, SPECTRUM, "-o", out_file)
    assert code == 2 and "--accept-calibration" in err and not out_file.exists()
    code, out, err = _invert(capsys, bad, SPECTRUM, "-o", out_file, "--accept-calibration")
    assert code == 0, err
    assert "accepted deliberately" in err
    recorded = read_result(out_file).diagnostics["input_warnings"]
    assert any("accepted deliberately" in w for w in recorded)
    assert "--accept-calibration" in read_result(out_file).attrs["command"]
    code = cli.main(["report", str(out_file), "-o", str(tmp_path / "report")])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "input warning: " in out and "accepted deliberately" in out
    summary = (tmp_path / "report" / "summary.md").read_text()
    inputs_section = summary.split("## Warnings about the inputs")[1].split("##")[0]
    assert "accepted deliberately" in inputs_section


def test_resume_keeps_its_seed_and_batches_get_their_exit_code(tmp_path, capsys):
    out_file = tmp_path / "r.h5"
    code, out, err = _invert(capsys, RUN, SPECTRUM, "-o", out_file, "--seed", "3",
                             "--require-convergence")
    assert code == 3, err  # finished, 20 steps, not converged
    assert "NOT CONVERGED" in err
    code, out, err = _invert(capsys, RUN, SPECTRUM, "-o", out_file, "--resume", "--seed", "9",
                             "--max-steps", "30")
    assert code == 0, err  # not converged either, but the default stays 0
    said = [line for line in err.splitlines() if "--seed 9 is ignored" in line]
    assert len(said) == 1 and "started with seed 3" in said[0]
    assert int(read_result(out_file).attrs["seed"]) == 3
    # a resumed run continues exactly: the same as 30 steps at once with seed 3
    one = tmp_path / "one.h5"
    code, out, err = _invert(capsys, RUN, SPECTRUM, "-o", one, "--seed", "3", "--max-steps", "30")
    with h5py.File(out_file, "r") as f, h5py.File(one, "r") as g:
        assert np.array_equal(f["mcmc/chain"][:30], g["mcmc/chain"][:30])
        assert np.array_equal(f["posterior/samples"][()], g["posterior/samples"][()])


def test_more_workers_than_cores_are_capped_with_a_warning(tmp_path, capsys):
    code = cli.main(["invert", str(RUN), str(SPECTRUM), "-o", str(tmp_path / "r.h5"),
                     "--workers", "1000"])
    err = capsys.readouterr().err
    assert code == 0, err
    assert f"--workers 1000 is more than the {os.cpu_count()} cores" in err


def test_the_progress_bar_starts_after_the_start_search(tmp_path, capsys):
    code, out, err = _invert(capsys, RUN, SPECTRUM, "-o", tmp_path / "r.h5")
    assert code == 0, err
    # the start search is never timed as if it were steps (no bar labelled with it)
    assert not re.search(r"start search\S*:\s*\d+%", err)
    told = err.index("searching for the start point")
    assert "sampling" in err[told:] and "sampling" not in err[:told]


def test_a_run_that_fails_at_its_start_leaves_no_file(tmp_path, monkeypatch):
    from inversion import invert
    from inversion.sample._sampler import Sampler

    def boom(self, **kwargs):
        raise RuntimeError("a failure inside the start search")

    monkeypatch.setattr(Sampler, "run", boom)
    with pytest.raises(RuntimeError):
        invert(RUN, SPECTRUM, tmp_path / "r.h5", progress=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_result_files_are_compact_and_resume_from_full_precision(tmp_path, capsys):
    out_file = tmp_path / "r.h5"
    code, out, err = _invert(capsys, RUN, SPECTRUM, "-o", out_file, "--max-steps", "40")
    assert code == 0, err
    with h5py.File(out_file, "r") as f:
        chain, mcmc = f["mcmc/chain"], f["mcmc"]
        assert chain.dtype == np.float32 and chain.compression == "gzip"
        assert chain.fletcher32 and f["mcmc/log_prob"].dtype == np.float32
        n = int(mcmc.attrs["iteration"])
        slot = n % 2
        assert int(mcmc["resume_coords_step"][slot]) == n
        last = mcmc["resume_coords"][slot]
        # the float64 positions the next step starts from round to the stored float32 row
        assert last.dtype == np.float64
        assert np.array_equal(last.astype(np.float32), chain[n - 1])


def _holder(path, mode="r"):
    """Another program holding a file open (an h5py session), until killed."""
    proc = subprocess.Popen(
        [sys.executable, "-c", "import sys, time, h5py\n"
         f"f = h5py.File(sys.argv[1], {mode!r})\nprint('open', flush=True)\ntime.sleep(300)\n",
         str(path)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "open"
    return proc


@pytest.mark.slow
def test_force_and_resume_on_a_file_another_program_holds_open(tmp_path, capsys, monkeypatch):
    if os.environ.get("HDF5_USE_FILE_LOCKING", "").upper() == "FALSE":
        pytest.skip("HDF5 file locking is switched off in this environment")
    out_file = tmp_path / "r.h5"
    assert cli.main(["-q", "invert", str(RUN), str(SPECTRUM), "-o", str(out_file),
                     "--workers", "1"]) == 0
    capsys.readouterr()
    holder = _holder(out_file)
    try:
        # --force writes a new file beside the one held open: it finishes, in a real process
        t0 = time.monotonic()
        proc = subprocess.run([sys.executable, "-m", "inversion.cli", "invert", str(RUN),
                               str(SPECTRUM), "-o", str(out_file), "--force", "--workers", "1"],
                              env=_env(), cwd=HERE.parent, capture_output=True, text=True,
                              timeout=240)
        assert proc.returncode == 0, proc.stderr
        assert time.monotonic() - t0 < 200
    finally:
        holder.kill()
        holder.wait()
    holder = _holder(out_file)
    try:
        # --resume must write into the file itself: it waits, then says busy on one line,
        # naming the file and not itself
        monkeypatch.setattr(_outputs, "LOCK_WAIT_S", 1.0)
        code = cli.main(["invert", str(RUN), str(SPECTRUM), "-o", str(out_file), "--resume",
                         "--max-steps", "30", "--workers", "1"])
        err = capsys.readouterr().err
        assert code == 2, err
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"sondage: error: {out_file}: busy: ")
        assert "another program" in lines[0] and str(os.getpid()) not in lines[0]
    finally:
        holder.kill()
        holder.wait()
    # nothing lost: the held file resumes once it is closed
    assert cli.main(["-q", "invert", str(RUN), str(SPECTRUM), "-o", str(out_file), "--resume",
                     "--max-steps", "30", "--workers", "1"]) == 0
    assert int(read_result(out_file).diagnostics["steps"]) == 30


def test_a_changed_run_is_recorded_and_its_resume_refused(tmp_path):
    # a run changed after reading (a series member's charge) keeps its file's text with the
    # change appended as comments: the result file says what was inverted, and resuming with
    # another change is refused instead of continuing a chain of another model
    from inversion import invert

    base = forward.load_run(RUN)
    charge = float(base.exposure.charge_uC)
    first = base.with_overrides({"exposure": {"charge_uC": 1.1 * charge}}, source="s.toml: a")
    out_file = tmp_path / "r.h5"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        invert(first, SPECTRUM, out_file, max_steps=10, progress=False)
    stored = read_result(out_file).run_text
    assert stored == first.text and stored.startswith(base.text)
    assert f"# exposure.charge_uC = {1.1 * charge!r}" in stored
    other = base.with_overrides({"exposure": {"charge_uC": 1.2 * charge}}, source="s.toml: a")
    with pytest.raises(InputError, match="different run file or spectrum"):
        invert(other, SPECTRUM, out_file, resume=True, max_steps=20, progress=False)
    # comments, not read: the stored text parses to the file's own values
    assert forward.parse_run(stored, source="stored").exposure.charge_uC == charge
