"""Nothing lost: killed inversions resume to the same chain, crashes while finalising keep the
previous state, damaged files are reported on one line, write failures exit with code 2 and
leave the inputs alone, and the same seed gives the same samples in separate processes.

The sample and spectrum are the invented tantalum-nitride-on-silicon case of the bad-input
corpus (tests/bad_inputs/_valid_fit_run.toml and _valid_spectrum.csv).
"""

from __future__ import annotations

import errno
import hashlib
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from forward import InputError
from inversion import cli
from inversion import read_result
from inversion.results._store import write_groups

__all__: list[str] = []

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "bad_inputs"
SPECTRUM = CORPUS / "_valid_spectrum.csv"
STEPS = 60


def _run_file(folder: Path) -> Path:
    """The corpus run with a chain long enough to kill part-way, never converging early."""
    text = (CORPUS / "_valid_fit_run.toml").read_text()
    assert "max_steps = 20" in text
    text = text.replace("max_steps = 20", f"max_steps = {STEPS}\ntau_multiple = 1000")
    path = folder / "run.toml"
    path.write_text(text)
    return path


def _sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _invert_argv(run, out, *extra, workers=1):
    return ["-q", "invert", str(run), str(SPECTRUM), "-o", str(out), "--seed", "5",
            "--workers", str(workers), *extra]


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _popen(argv):
    return subprocess.Popen([sys.executable, "-m", "inversion.cli", *argv], env=_env(),
                            cwd=HERE.parent, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


def _chain(path):
    with h5py.File(path, "r") as f:
        n = int(f["mcmc"].attrs["iteration"])
        return f["mcmc/chain"][:n], f["mcmc/log_prob"][:n], f["posterior/samples"][()]


def _iteration_readonly(path) -> int:
    """The step counter, read without taking the HDF5 file lock (the writer keeps going)."""
    try:
        with h5py.File(path, "r", locking=False) as f:
            return int(f["mcmc"].attrs["iteration"])
    except (OSError, KeyError):  # not created yet, or caught mid-write
        return -1


def _one_line_error(code, err, fragment):
    assert code == 2, err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith("sondage: error: ")
    assert fragment in lines[0], (fragment, lines[0])
    return lines[0]


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """One uninterrupted run in its own process: (run file, result file)."""
    folder = tmp_path_factory.mktemp("reference")
    run = _run_file(folder)
    out = folder / "one.h5"
    proc = subprocess.run([sys.executable, "-m", "inversion.cli",
                           *_invert_argv(run, out)], env=_env(), cwd=HERE.parent,
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return run, out


# ----------------------------------------------------------------------------------------------
# SIGKILL at seeded random steps, then --resume
@pytest.mark.slow
def test_sigkill_then_resume_gives_the_uninterrupted_chain(reference, tmp_path):
    run, one = reference
    ref_chain, ref_logp, ref_samples = _chain(one)
    assert ref_chain.shape[0] == STEPS
    inputs = {p: _sha(p) for p in (run, SPECTRUM)}
    rng = random.Random(20261201)  # seeded choice of kill points
    killed_at = []
    for trial in range(3):
        out = tmp_path / f"killed{trial}.h5"
        target = rng.randint(3, STEPS - 10)
        proc = _popen(_invert_argv(run, out))
        deadline = time.monotonic() + 240
        while _iteration_readonly(out) < target and proc.poll() is None:
            assert time.monotonic() < deadline, "the inversion never reached the kill point"
            time.sleep(0.002)
        time.sleep(rng.random() * 0.02)  # land anywhere within a step, writes included
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        assert proc.returncode == -signal.SIGKILL, "finished before the kill; raise STEPS"
        with h5py.File(out, "r") as f:  # the killed file opens, with whole steps only
            done = int(f["mcmc"].attrs["iteration"])
            before = f["mcmc/chain"][:done].copy()
        assert target <= done < STEPS
        killed_at.append(done)
        # the steps written before the kill are those of the uninterrupted run
        assert np.array_equal(before, ref_chain[:done])
        resumed = subprocess.run([sys.executable, "-m", "inversion.cli",
                                  *_invert_argv(run, out, "--resume")], env=_env(),
                                 cwd=HERE.parent, capture_output=True, text=True, timeout=300)
        assert resumed.returncode == 0, resumed.stderr
        chain, logp, samples = _chain(out)
        assert chain.shape[0] == STEPS  # the requested length
        assert np.array_equal(chain[:done], before)  # earlier steps unchanged
        assert np.array_equal(chain, ref_chain)  # bit for bit the uninterrupted chain
        assert np.array_equal(logp, ref_logp)
        assert np.array_equal(samples, ref_samples)
        assert read_result(out).attrs["status"] == "not converged"
    assert len(set(killed_at)) > 1  # different kill points
    assert {p: _sha(p) for p in inputs} == inputs


@pytest.mark.slow
def test_same_seed_same_samples_in_two_processes(reference, tmp_path):
    # test_invert.py::test_interrupt_then_resume_equals_one_run checks one process; here a
    # second process, with two model workers instead of one, must give the same bits
    run, one = reference
    out = tmp_path / "two.h5"
    proc = subprocess.run([sys.executable, "-m", "inversion.cli",
                           *_invert_argv(run, out, workers=2)], env=_env(), cwd=HERE.parent,
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    for a, b in zip(_chain(out), _chain(one)):
        assert np.array_equal(a, b)
    r1, r2 = read_result(out), read_result(one)
    for key in r1.profile:
        assert np.array_equal(r1.profile[key], r2.profile[key]), key
    for key in r1.spectrum:
        assert np.array_equal(r1.spectrum[key], r2.spectrum[key]), key


# ----------------------------------------------------------------------------------------------
# a disk that fills up while sampling: exit 2, then --resume completes the same chain
@pytest.mark.slow
def test_disk_full_while_sampling_then_resume(reference, tmp_path, capsys, monkeypatch):
    from inversion.results._backend import SafeHDFBackend

    run, one = reference
    out = tmp_path / "full.h5"
    original = SafeHDFBackend.save_step
    calls = {"n": 0}

    def fills_up(self, state, accepted):
        calls["n"] += 1
        if calls["n"] > 17:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(out))
        return original(self, state, accepted)

    monkeypatch.setattr(SafeHDFBackend, "save_step", fills_up)
    code = cli.main(_invert_argv(run, out))
    _one_line_error(code, capsys.readouterr().err, f"{out}: No space left on device")
    monkeypatch.setattr(SafeHDFBackend, "save_step", original)
    with h5py.File(out, "r") as f:
        assert int(f["mcmc"].attrs["iteration"]) == 17
    assert cli.main(_invert_argv(run, out, "--resume")) == 0
    for a, b in zip(_chain(out), _chain(one)):
        assert np.array_equal(a, b)


# ----------------------------------------------------------------------------------------------
# a crash while the final groups are written
def test_crash_while_finalising_keeps_the_previous_state(build_result, tmp_path, monkeypatch):
    from inversion.results import _store

    path = build_result(tmp_path / "r.h5", steps=200, band_draws=20)
    before = read_result(path)
    real = _store._write_tree
    written = {"n": 0}

    def crashes_part_way(group, tree):
        written["n"] += 1
        if written["n"] == 3:  # the third group: some new groups are already staged
            raise OSError(errno.EIO, "simulated crash while writing")
        return real(group, tree)

    monkeypatch.setattr(_store, "_write_tree", crashes_part_way)
    new = {"posterior": {"samples": np.zeros((4, len(before.names)))},
           "derived": {"x": np.ones(4)}, "profile": {"depth": np.arange(3.0)},
           "spectrum": {"counts": np.zeros(5)}}
    with pytest.raises(OSError):
        write_groups(path, new)
    after = read_result(path)  # readable, and still the previous complete state
    assert np.array_equal(after.samples, before.samples)
    assert after.derived.keys() == before.derived.keys()
    for key in before.profile:
        assert np.array_equal(after.profile[key], before.profile[key], equal_nan=True), key
    assert after.summary.keys() == before.summary.keys()
    with h5py.File(path, "r") as f:
        assert "_staging" in f  # the half-written stage is set apart, not read
    monkeypatch.setattr(_store, "_write_tree", real)
    write_groups(path, new)  # the next write clears the leftover stage
    with h5py.File(path, "r") as f:
        assert "_staging" not in f
        assert np.array_equal(f["profile/depth"][()], np.arange(3.0))


# ----------------------------------------------------------------------------------------------
# damaged result files
def _damaged_copies(src: Path, folder: Path):
    """(label, path) of cut-short and overwritten copies of ``src``."""
    size = src.stat().st_size
    out = []
    for frac in (0.0005, 0.3, 0.999):
        p = folder / f"cut{frac}.h5"
        shutil.copy(src, p)
        os.truncate(p, int(size * frac))
        out.append((f"truncated to {frac:.2%}", p))
    with h5py.File(src, "r") as f:
        offsets = {"superblock": 0,
                   "posterior draws": f["posterior/samples"].id.get_offset(),
                   "stored chain": f["mcmc/chain"].id.get_offset()}
    for name, offset in offsets.items():
        if offset is None:  # chunked data: find the first chunk's address
            with h5py.File(src, "r") as f:
                offset = f[name == "stored chain" and "mcmc/chain"
                           or "posterior/samples"].id.get_chunk_info(0).byte_offset
        p = folder / f"garbage_{name.replace(' ', '_')}.h5"
        shutil.copy(src, p)
        with open(p, "r+b") as fh:
            fh.seek(offset)
            fh.write(np.random.default_rng(3).integers(0, 256, 64, dtype=np.uint8).tobytes())
        out.append((f"garbage over the {name}", p))
    return out


def test_damaged_files_are_reported_on_one_line(small_result, tmp_path, capsys):
    for label, path in _damaged_copies(small_result, tmp_path):
        digest = _sha(path)
        if "stored chain" not in label:  # read_result does not read the chain
            with pytest.raises(InputError) as err:
                read_result(path)
            assert str(path) in str(err.value) and "\n" not in str(err.value), label
            code = cli.main(["report", str(path), "-o", str(tmp_path / "rep")])
            _one_line_error(code, capsys.readouterr().err, str(path))
            assert not (tmp_path / "rep").exists() or not any((tmp_path / "rep").iterdir())
        code = cli.main(["-q", "invert", str(CORPUS / "_valid_fit_run.toml"), str(SPECTRUM),
                         "-o", str(path), "--resume", "--max-steps", "30", "--workers", "1"])
        if "posterior draws" in label:
            # resuming needs only the input and the chain; the damaged draws are written anew
            err = capsys.readouterr().err
            assert code == 0, err
            assert read_result(path).samples.shape[0] > 0
            continue
        line = _one_line_error(code, capsys.readouterr().err, str(path))
        assert "cannot resume" in line, (label, line)
        assert _sha(path) == digest, label  # the damaged file is left for inspection


def test_garbage_anywhere_is_caught_or_harmless(small_result, tmp_path):
    # Overwrite 512 bytes at offsets across the whole file: either read_result refuses the
    # file, or what it returns equals the undamaged file (the bytes hit unused space or parts
    # it does not read).  Never different numbers without a word.
    ref = read_result(small_result)
    size = small_result.stat().st_size
    rng = np.random.default_rng(11)
    refused = 0
    for offset in range(0, size, 8192):
        p = tmp_path / "g.h5"
        shutil.copy(small_result, p)
        with open(p, "r+b") as fh:
            fh.seek(offset)
            fh.write(rng.integers(0, 256, 512, dtype=np.uint8).tobytes())
        try:
            got = read_result(p)
        except InputError:
            refused += 1
            continue
        assert np.array_equal(got.samples, ref.samples), offset
        assert got.attrs.keys() == ref.attrs.keys(), offset
        for part in ("derived", "profile", "spectrum"):
            a, b = getattr(got, part), getattr(ref, part)
            assert a.keys() == b.keys(), (offset, part)
            for key in a:
                assert np.array_equal(np.asarray(a[key]), np.asarray(b[key]),
                                      equal_nan=np.asarray(a[key]).dtype.kind == "f"), \
                    (offset, part, key)
    assert refused > 0


# ----------------------------------------------------------------------------------------------
# disk full, no permission, an output that is a folder or cannot be created
@pytest.mark.parametrize("err_no", [errno.ENOSPC, errno.EACCES])
def test_write_failures_exit_2_inputs_untouched(tmp_path, capsys, monkeypatch, err_no):
    from inversion.results import _writer

    run = CORPUS / "_valid_fit_run.toml"
    inputs = {p: _sha(p) for p in (run, SPECTRUM)}
    out = tmp_path / "r.h5"

    def refuses(path, **kw):
        raise OSError(err_no, os.strerror(err_no), str(path))

    monkeypatch.setattr(_writer, "write_input", refuses)
    code = cli.main(["-q", "invert", str(run), str(SPECTRUM), "-o", str(out), "--workers", "1"])
    _one_line_error(code, capsys.readouterr().err,
                    f"{out}: cannot write the result file: {os.strerror(err_no)}")
    assert {p: _sha(p) for p in inputs} == inputs


@pytest.mark.parametrize("output, fragment", [
    ("/proc/sondage-test-result.h5", "cannot write the result file"),  # stops root too
    ("{tmp}", "this is a folder; give the path of a result file"),
    ("{tmp}/absent/r.h5", "does not exist; create it first"),
])
def test_unwritable_outputs(tmp_path, capsys, output, fragment):
    run = CORPUS / "_valid_fit_run.toml"
    inputs = {p: _sha(p) for p in (run, SPECTRUM)}
    out = output.format(tmp=tmp_path)
    code = cli.main(["-q", "invert", str(run), str(SPECTRUM), "-o", out, "--workers", "1"])
    _one_line_error(code, capsys.readouterr().err, fragment)
    assert {p: _sha(p) for p in inputs} == inputs
    assert not Path("/proc/sondage-test-result.h5").exists()


def test_report_into_a_file_path_or_unwritable_folder(small_result, tmp_path, capsys):
    blocker = tmp_path / "taken"
    blocker.write_text("a file where the report folder should go\n")
    digest = _sha(small_result)
    for target in (blocker / "sub", Path("/proc/sondage-test-report")):
        code = cli.main(["report", str(small_result), "-o", str(target)])
        err = capsys.readouterr().err
        assert code == 2, err
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert _sha(small_result) == digest


# ----------------------------------------------------------------------------------------------
# a reader holding the file lock does not stop the sampler's writes
def test_sampler_writes_wait_for_a_reader_holding_the_lock(tmp_path):
    import emcee

    from inversion.results._backend import SafeHDFBackend

    if os.environ.get("HDF5_USE_FILE_LOCKING", "").upper() == "FALSE":
        pytest.skip("HDF5 file locking is switched off in this environment")
    path = tmp_path / "locked.h5"
    backend = SafeHDFBackend(str(path), name="mcmc")
    backend.reset(4, 1)
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, time, h5py\n"
         "f = h5py.File(sys.argv[1], 'r')\nprint('open', flush=True)\ntime.sleep(1.5)\n",
         str(path)], stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "open"  # the reader holds the lock now
    t0 = time.monotonic()
    state = emcee.State(np.zeros((4, 1)), log_prob=np.zeros(4),
                        random_state=np.random.RandomState(0).get_state())
    backend.grow(1, None)
    backend.save_step(state, np.ones(4, dtype=bool))
    waited = time.monotonic() - t0
    holder.wait(timeout=30)
    assert waited > 0.5  # it did wait for the reader (HDF5 file locking is on by default)
    assert int(backend.iteration) == 1
    assert np.array_equal(backend.accepted, np.ones(4))
    assert backend.random_state[1].tolist() == np.random.RandomState(0).get_state()[1].tolist()


def test_step_checks_and_acceptance_totals_across_writers(tmp_path):
    """The backend's own step checks (emcee's, read in the one open of the write) refuse a
    malformed step and write nothing; acceptance totals carry on alike whether the writer
    remembers the last step or a new writer (a resumed run) reads it back.  Common practice:
    emcee's ``accepted`` counts accepted proposals per walker since the chain began."""
    import emcee

    from inversion.results._backend import SafeHDFBackend

    path = tmp_path / "steps.h5"
    backend = SafeHDFBackend(str(path), name="mcmc")
    backend.reset(4, 2)
    backend.grow(4, None)
    rng = np.random.RandomState(3)

    def state(shape=(4, 2), n_logp=4, blobs=None):
        return emcee.State(rng.rand(*shape), log_prob=rng.rand(n_logp), blobs=blobs,
                           random_state=rng.get_state())

    steps = [np.array([1, 0, 1, 1], dtype=bool), np.array([0, 0, 1, 1], dtype=bool),
             np.array([1, 1, 1, 0], dtype=bool)]
    backend.save_step(state(), steps[0])
    backend.save_step(state(), steps[1])
    for bad, accepted, message in (
            (state(shape=(4, 3)), steps[0], "coordinate dimensions"),
            (state(n_logp=3), steps[0], "log probability size"),
            (state(), np.ones(3, dtype=bool), "acceptance size"),
            (state(blobs=np.zeros(4)), steps[0], "blobs")):
        with pytest.raises(ValueError, match=message):
            backend.save_step(bad, accepted)
        assert int(backend.iteration) == 2  # nothing of the refused step was written
    resumed = SafeHDFBackend(str(path), name="mcmc")  # no memory of the steps before
    resumed.save_step(state(), steps[2])
    expected = np.sum(steps, axis=0)
    assert np.array_equal(resumed.accepted, expected)
    assert np.array_equal(SafeHDFBackend(str(path), name="mcmc").accepted, expected)
    with h5py.File(path, "r") as f:
        assert np.array_equal(f["mcmc/accepted"][()], expected)  # emcee's own copy
        assert int(f["mcmc"].attrs["iteration"]) == 3
