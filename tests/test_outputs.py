"""No command writes over one of its inputs; one writer per result file.

Real processes throughout for the two-writer cases: a second ``sondage invert`` (``--force``
or ``--resume``) while a first one writes is refused with one line naming the file and the
first one's process id, the first one is unharmed, and once the first one is killed its lock
is taken over.  The sample is the invented tantalum-nitride-on-silicon case of the bad-input
corpus.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import pytest

from forward import InputError
from inversion import cli
from inversion.results._outputs import WriterLock, check_output, lock_path, writer_pid
from inversion import read_result

__all__: list[str] = []

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"
RUN = CORPUS / "_valid_fit_run.toml"
SPECTRUM = CORPUS / "_valid_spectrum.csv"


def _sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _one_line_error(code, err, *fragments):
    assert code == 2, err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    return lines[0]


@pytest.fixture()
def inputs(tmp_path):
    """Copies of the corpus run file and spectrum in a folder of their own."""
    run, spectrum = tmp_path / "run.toml", tmp_path / "sim.csv"
    shutil.copy(RUN, run)
    shutil.copy(SPECTRUM, spectrum)
    return run, spectrum


# ----------------------------------------------------------------------------------------------
# outputs that would replace an input
def test_simulate_never_writes_over_its_run_file(inputs, capsys):
    run, _ = inputs
    before = _sha(run)
    for extra in ([], ["--force"]):
        code = cli.main(["simulate", str(run), "-o", str(run), *extra])
        _one_line_error(code, capsys.readouterr().err, "names the run file",
                        "not even with --force")
    assert _sha(run) == before


def test_simulate_needs_force_to_replace_an_output(inputs, tmp_path, capsys):
    run, _ = inputs
    out = tmp_path / "old.csv"
    out.write_text("# an earlier spectrum the user wants to keep\n1\n2\n")
    before = _sha(out)
    code = cli.main(["simulate", str(run), "-o", str(out)])
    _one_line_error(code, capsys.readouterr().err, "exists; add --force")
    assert _sha(out) == before
    assert cli.main(["simulate", str(run), "-o", str(out), "--force"]) == 0
    assert "wrote" in capsys.readouterr().out  # says what it did
    assert _sha(out) != before


def test_simulate_plot_checks_before_computing(inputs, tmp_path, capsys):
    run, _ = inputs
    out = tmp_path / "new.csv"
    code = cli.main(["simulate", str(run), "-o", str(out), "--plot", str(tmp_path / "fig.txt")])
    _one_line_error(code, capsys.readouterr().err, "--plot", ".png")
    assert not out.exists()  # nothing written before the refusal
    code = cli.main(["simulate", str(run), "-o", str(out), "--plot", str(run)])
    _one_line_error(code, capsys.readouterr().err, "names the run file")


@pytest.mark.parametrize("target", ["spectrum", "run"])
@pytest.mark.parametrize("extra", [[], ["--force"], ["--resume"]])
def test_invert_never_writes_over_its_inputs(inputs, capsys, target, extra):
    run, spectrum = inputs
    digests = {p: _sha(p) for p in inputs}
    out = spectrum if target == "spectrum" else run
    code = cli.main(["-q", "invert", str(run), str(spectrum), "-o", str(out), "--workers", "1",
                     *extra])
    _one_line_error(code, capsys.readouterr().err,
                    f"names the {target} file, an input of this command")
    assert {p: _sha(p) for p in inputs} == digests


def test_invert_never_writes_over_an_hdf5_spectrum_file(tmp_path, capsys):
    import numpy as np

    from forward import read_spectrum

    data = tmp_path / "data.h5"
    with h5py.File(data, "w") as f:
        f["det/counts"] = np.asarray(read_spectrum(SPECTRUM).counts)
    before = _sha(data)
    code = cli.main(["-q", "invert", str(RUN), f"{data}:/det/counts", "-o", str(data),
                     "--force", "--workers", "1"])
    _one_line_error(code, capsys.readouterr().err, "names the spectrum file")
    assert _sha(data) == before


def test_report_needs_force_to_replace_its_files(small_result, tmp_path, capsys):
    folder = tmp_path / "rep"
    assert cli.main(["report", str(small_result), "-o", str(folder)]) == 0
    capsys.readouterr()
    summary = folder / "summary.md"
    summary.write_text("notes the user added\n")
    code = cli.main(["report", str(small_result), "-o", str(folder)])
    _one_line_error(code, capsys.readouterr().err, "exists; add --force")
    assert summary.read_text() == "notes the user added\n"
    assert cli.main(["report", str(small_result), "-o", str(folder), "--force"]) == 0
    assert summary.read_text() != "notes the user added\n"


def test_check_output_unit_rules(tmp_path):
    a = tmp_path / "a.csv"
    a.write_text("1\n")
    with pytest.raises(InputError, match="names the spectrum file"):
        check_output(tmp_path / "." / "a.csv", inputs={"spectrum file": a}, force=True)
    with pytest.raises(InputError, match="exists; add --force"):
        check_output(a, inputs={}, force=False)
    assert check_output(a, inputs={}, force=True) == a
    with pytest.raises(InputError, match="this is a folder"):
        check_output(tmp_path, inputs={}, force=True)


# ----------------------------------------------------------------------------------------------
# one writer per result file
_HOLD = """
import sys, time
from inversion.results._outputs import WriterLock
lock = WriterLock(sys.argv[1]).acquire()
print("held", flush=True)
time.sleep(float(sys.argv[2]))
"""


def _holder(path, seconds=60.0):
    proc = subprocess.Popen([sys.executable, "-c", _HOLD, str(path), str(seconds)], env=_env(),
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "held"
    return proc


def test_a_live_writer_is_named_and_a_dead_one_taken_over(tmp_path):
    target = tmp_path / "r.h5"
    proc = _holder(target)
    try:
        assert writer_pid(target) == proc.pid
        with pytest.raises(InputError) as err:
            WriterLock(target).acquire()
        assert f"process {proc.pid}" in str(err.value) and str(target) in str(err.value)
    finally:
        proc.kill()
        proc.wait()
    # the kernel dropped the dead owner's lock: taken over, no manual clean-up
    assert lock_path(target).exists()
    assert writer_pid(target) is None
    with WriterLock(target):
        assert writer_pid(target) == os.getpid()
    assert not lock_path(target).exists()


_FORK_AND_DIE = """
import os, sys, time
from inversion.results._outputs import WriterLock, release_inherited_locks
lock = WriterLock(sys.argv[1]).acquire()
ready_r, ready_w = os.pipe()
child = os.fork()
if child == 0:           # a worker process: drops its inherited copy, then lives on
    release_inherited_locks()
    os.write(ready_w, b"x")
    time.sleep(30)
    os._exit(0)
os.read(ready_r, 1)      # the worker has dropped its copy
print(child, flush=True)
time.sleep(30)
"""


def test_forked_workers_do_not_keep_a_dead_writers_lock(tmp_path):
    target = tmp_path / "r.h5"
    proc = subprocess.Popen([sys.executable, "-c", _FORK_AND_DIE, str(target)], env=_env(),
                            stdout=subprocess.PIPE, text=True)
    child = int(proc.stdout.readline())
    try:
        assert writer_pid(target) == proc.pid
        proc.kill()
        proc.wait()
        os.kill(child, 0)  # the worker is still alive ...
        assert writer_pid(target) is None  # ... but the lock died with its owner
    finally:
        try:
            os.kill(child, signal.SIGKILL)
        except ProcessLookupError:
            pass


def test_readers_say_busy_not_damaged(tmp_path, small_result, capsys):
    target = tmp_path / "copy.h5"
    shutil.copy(small_result, target)
    with h5py.File(target, "a") as f:
        f.attrs["status"] = "running"
    proc = _holder(target)
    try:
        code = cli.main(["report", str(target), "-o", str(tmp_path / "rep")])
        _one_line_error(code, capsys.readouterr().err, "busy", f"process {proc.pid}")
    finally:
        proc.kill()
        proc.wait()
    # the writer died before finishing: not "busy", not "damaged", but how to go on
    code = cli.main(["report", str(target), "-o", str(tmp_path / "rep")])
    _one_line_error(code, capsys.readouterr().err, "stopped before it finished", "--resume")


_OPEN_FOR_WRITING = """
import sys, time, h5py
f = h5py.File(sys.argv[1], "a")
print("open", flush=True)
time.sleep(60)
"""


def test_a_file_held_open_by_another_program_is_busy(tmp_path, small_result, monkeypatch):
    if os.environ.get("HDF5_USE_FILE_LOCKING", "").upper() == "FALSE":
        pytest.skip("HDF5 file locking is switched off in this environment")
    import inversion.results._store as store

    target = tmp_path / "copy.h5"
    shutil.copy(small_result, target)
    proc = subprocess.Popen([sys.executable, "-c", _OPEN_FOR_WRITING, str(target)],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "open"
    monkeypatch.setattr(store, "READ_LOCK_WAIT_S", 0.3)
    try:
        t0 = time.monotonic()
        with pytest.raises(InputError) as err:
            read_result(target)
        assert time.monotonic() - t0 < 30  # a reader never waits for ever
        message = str(err.value)
        assert "busy" in message and "damaged" not in message
    finally:
        proc.kill()
        proc.wait()


@pytest.mark.slow
def test_second_invert_while_one_writes_is_refused_then_takes_over(inputs, tmp_path):
    run, spectrum = inputs
    text = run.read_text().replace("max_steps = 20", "max_steps = 100000\ntau_multiple = 1e6")
    run.write_text(text)
    out = tmp_path / "r.h5"
    argv = [sys.executable, "-m", "inversion.cli", "-q", "invert", str(run), str(spectrum),
            "-o", str(out), "--workers", "1", "--seed", "3"]
    first = subprocess.Popen(argv, env=_env(), cwd=HERE.parent, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while writer_pid(out) != first.pid:
            assert first.poll() is None, first.communicate()
            assert time.monotonic() < deadline
            time.sleep(0.1)
        # wait until steps are being written
        while True:
            try:
                with h5py.File(out, "r", locking=False) as f:
                    if int(f["mcmc"].attrs["iteration"]) >= 3:
                        break
            except (OSError, KeyError):
                pass
            assert first.poll() is None
            time.sleep(0.2)
        for extra in (["--force"], ["--resume"]):
            second = subprocess.run(argv + extra, env=_env(), cwd=HERE.parent,
                                    capture_output=True, text=True, timeout=120)
            _one_line_error(second.returncode, second.stderr, str(out),
                            f"process {first.pid}", "is writing this result file")
        assert first.poll() is None  # the first writer is unharmed
    finally:
        first.kill()
        first.wait()
    # the first one was killed: its lock is taken over and its chain continued
    with h5py.File(out, "r", locking=False) as f:
        done = int(f["mcmc"].attrs["iteration"])
    resumed = subprocess.run(argv + ["--resume", "--max-steps", str(done + 2)], env=_env(),
                             cwd=HERE.parent, capture_output=True, text=True, timeout=300)
    assert resumed.returncode == 0, resumed.stderr
    result = read_result(out)
    assert result.attrs["status"] in ("converged", "not converged")
    assert int(result.diagnostics["steps"]) == done + 2
    assert not lock_path(out).exists()
