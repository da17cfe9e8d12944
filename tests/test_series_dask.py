"""The annealing series on dask.distributed: a real scheduler and workers on 127.0.0.1.

The members here are inverted by a stand-in task (``standin_task`` below) that writes a member
result file in the same layout as a single inversion, with width draws from an invented truth
(Ea = 1.4 eV, D0 = 4e8 nm^2/s, as-deposited width 2 nm: invented numbers, no real material),
so the orchestration, resuming and worker loss are tested in seconds; one more test runs real
inversions of the invented demo series (short chains) through the command on the same cluster.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from forward import InputError
from inversion import load_series, read_series, run_series
from inversion.results._store import now_text, set_attrs, write_groups, write_input
from inversion.series._diffusion import BOLTZMANN_eV_PER_K
from inversion.series._file import member_path
from inversion.series._runner import member_state

HERE = Path(__file__).resolve().parent
# Invented truth (not a real material).
EA_eV, D0_NM2_S, W0_NM, TIME_S = 1.4, 4e8, 2.0, 1800.0
TEMPS_K = {"a600": 600.0, "a650": 650.0, "a700": 700.0, "a725": 725.0}
ATOMS_PER_NM3 = 80.0  # invented film density, 1e15 atoms/cm2 per nm = 1e-7 cm * n / 1e15


def true_width_nm(label: str) -> float:
    if label not in TEMPS_K:
        return W0_NM
    d = D0_NM2_S * np.exp(-EA_eV / (BOLTZMANN_eV_PER_K * TEMPS_K[label]))
    # w^2 = w0^2 + 2 D t (Crank, The Mathematics of Diffusion, 1975, eq. 2.14)
    return float(np.sqrt(W0_NM**2 + 2.0 * d * TIME_S))


def standin_task(payload: dict) -> dict:
    """Write a member result file like a finished inversion (sleeping a while in between)."""
    out = Path(payload["member_path"])
    state = member_state(out)
    if state == "finished":
        return {"label": payload["label"], "path": str(out), "state": state}
    if state in ("missing", "broken"):
        out.parent.mkdir(parents=True, exist_ok=True)
        write_input(out, run_text="stand-in", counts=np.zeros(4), measured=np.ones(4, bool),
                    priors=["stand-in"], attrs={"program": "stand-in", "status": "running",
                                                "seed": int(payload["seed"])})
    time.sleep(float(os.environ.get("SONDAGE_STANDIN_SLEEP_S", "0.2")))
    rng = np.random.default_rng(int(payload["seed"]))
    sd = 0.1
    w_obs = rng.normal(true_width_nm(payload["label"]), sd)
    w = rng.normal(w_obs, sd, 3000)
    write_groups(out, {
        "posterior": {"samples": w[:, None], "summary": {"names": np.array(["film.mixing"],
                                                                           dtype=object)}},
        "derived": {"film.mixing_nm": (w, {"unit": "nm"}),
                    "film.mixing": (w * ATOMS_PER_NM3 * 1e-7 * 1e21 / 1e15 / 1e7,
                                    {"unit": "1e15 atoms/cm2"})},
    })
    set_attrs(out, status="converged", finished=now_text())
    return {"label": payload["label"], "path": str(out), "state": state}


RUN = """\
# Invented scenario: a cobalt-iron film on silicon (numbers made up for the tests).
title = "invented: CoFe on Si, series template"
[beam]
ion = "4He"
energy_keV = 2000.0
[geometry]
scattering_deg = 165.0
incidence_deg = 0.0
exit_deg = 15.0
[detector]
fwhm_keV = 15.0
solid_angle_msr = 3.0
[calibration]
keV_per_channel = 2.0
offset_keV = 30.0
[exposure]
charge_uC = 10.0
[[layer]]
name = "film"
formula = "Co0.5Fe0.5"
areal_density_1e15 = 400.0
density_g_cm3 = 8.3
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
"""


def write_series(folder: Path, labels=("a600", "a650", "a700"), extra: str = "") -> Path:
    (folder / "template.toml").write_text(RUN)
    text = ['[series]', 'title = "invented CoFe/Si anneals"', 'run = "template.toml"',
            'interface = 1', extra, '',
            '[[member]]', 'label = "asdep"', 'spectrum = "asdep.csv"', 'as_deposited = true']
    (folder / "asdep.csv").write_text("\n".join(str(k) for k in range(50)) + "\n")
    for i, lab in enumerate(labels):
        (folder / f"{lab}.csv").write_text("\n".join(str(k + i) for k in range(50)) + "\n")
        text += ['', '[[member]]', f'label = "{lab}"', f'spectrum = "{lab}.csv"',
                 f'temperature_K = {TEMPS_K[lab]}', f'time_min = {TIME_S / 60}',
                 f'charge_uC = {10.0 + i}', 'calibration = { offset_keV = 31.0 }']
    path = folder / "series.toml"
    path.write_text("\n".join(text) + "\n")
    return path


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_for_workers(address: str, n: int, timeout_s: float = 60.0):
    from dask.distributed import Client

    with Client(address, timeout="30s") as c:
        c.wait_for_workers(n, timeout=timeout_s)


@pytest.fixture
def dask_cluster(tmp_path):
    """A dask scheduler and two single-thread workers (no nanny), as separate processes."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(HERE)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]),
        SONDAGE_STANDIN_SLEEP_S="1.5")
    log = open(tmp_path / "dask.log", "w")
    procs = []

    def stop():
        for p in reversed(procs):
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
        for p in reversed(procs):
            try:
                p.wait(timeout=10)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
        log.close()

    try:
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
             "--port", str(port), "--no-dashboard"], stdout=log, stderr=log, env=env,
            cwd=tmp_path))
        for _ in range(2):
            procs.append(subprocess.Popen(
                [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads",
                 "1", "--no-nanny", "--host", "127.0.0.1", "--no-dashboard"],
                stdout=log, stderr=log, env=env, cwd=tmp_path))
        _wait_for_workers(address, 2)
        yield address, procs[1:]
    finally:
        stop()


def _check_series_file(out: Path, labels):
    data = read_series(out)
    assert [m["label"] for m in data["members"]] == ["asdep", *labels]
    assert set(data["diffusion"]) == set(labels)
    with h5py.File(out, "r") as f:
        for lab in ["asdep", *labels]:
            # the external link opens the member's own result file
            assert "film.mixing_nm" in f[f"members/links/{lab}/derived"]
            assert member_state(member_path(out, lab)) == "finished"
        # the layout the README documents (README.md, "The series result file")
        assert f.attrs["kind"] == "series" and f.attrs["format_version"] == 4
        assert set(f["members/summary"]) == {f"width_{k}" for k in
                                             ("median", "lo68", "hi68", "lo95", "hi95")}
        for lab in labels:
            assert {"median", "lo68", "hi68", "lo95", "hi95", "negative_fraction",
                    "time_s", "temperature_K", "unit"} <= set(f[f"diffusion/{lab}"].attrs)
            assert f[f"diffusion/{lab}"].attrs["lo95"] == data["diffusion"][lab]["low95"]
        for kind in ("width", "diffusion"):
            assert set(f[f"comparison/{kind}"]) == {"a", "b", "median", "lo95", "hi95",
                                                    "p_a_greater"}
        for k, m in enumerate(data["members"]):
            assert f["members/summary/width_hi68"][k] == m["width_high68"]
    return data


@pytest.mark.slow
def test_series_on_external_scheduler(dask_cluster, tmp_path):
    address, _ = dask_cluster
    series = load_series(write_series(tmp_path))
    out = tmp_path / "series.h5"
    run_series(series, out, scheduler=address, task=standin_task, progress=False,
               arrhenius_steps=1500)
    data = _check_series_file(out, ["a600", "a650", "a700"])
    arr = data["arrhenius"]["attrs"]
    # invented truth inside the 95 % interval
    assert arr["ea_eV.low95"] < EA_eV < arr["ea_eV.high95"]
    assert data["attrs"]["width_unit"] == "nm"
    # D per anneal: the truth lies within the stored 95 % interval
    for lab, dd in data["diffusion"].items():
        d_true = D0_NM2_S * np.exp(-EA_eV / (BOLTZMANN_eV_PER_K * TEMPS_K[lab]))
        assert dd["low95"] < d_true < dd["high95"]
    assert len(data["comparison"]["width"]) == 3
    assert all(r["p_a_greater"] > 0.99 for r in data["comparison"]["diffusion"])
    report = out.parent / "series.report"
    assert (report / "arrhenius.png").stat().st_size > 0
    assert "Ea (eV)" in (report / "summary.md").read_text()

    # --resume with every member finished submits nothing and rebuilds the statistics
    before = {lab: member_path(out, lab).stat().st_mtime_ns for lab in ["asdep", "a600"]}
    run_series(series, out, scheduler=address, task=standin_task, progress=False, resume=True,
               arrhenius_steps=1500, report=False)
    assert before == {lab: member_path(out, lab).stat().st_mtime_ns for lab in before}
    with pytest.raises(InputError, match="--resume"):
        run_series(series, out, scheduler=address, task=standin_task, progress=False)


@pytest.mark.slow
def test_series_survives_a_killed_worker(dask_cluster, tmp_path):
    address, workers = dask_cluster
    labels = ["a600", "a650", "a700", "a725"]
    series = load_series(write_series(tmp_path, labels=tuple(labels)))
    out = tmp_path / "series.h5"
    import threading

    def kill_soon():
        time.sleep(2.0)  # each stand-in member takes 1.5 s: the worker is mid-task
        workers[0].send_signal(signal.SIGKILL)

    killer = threading.Thread(target=kill_soon)
    killer.start()
    try:
        run_series(series, out, scheduler=address, task=standin_task, progress=False,
                   arrhenius_steps=1500, report=False)
    finally:
        killer.join()
    assert workers[0].poll() is not None  # the worker really died
    _check_series_file(out, labels)


def test_series_file_errors(tmp_path):
    path = write_series(tmp_path)
    text = path.read_text()
    cases = [
        (text.replace("interface = 1", "interface = 1\ncolour = 3"), "series.colour"),
        (text.replace('label = "a650"', 'label = "a650"\nvoltage = 2'), "member[3].voltage"),
        (text.replace("temperature_K = 650.0", "temperature_C = 650.0\ntemperature_K = 650.0"),
         "member[a650].temperature"),
        (text + '[[member]]\nlabel = "again"\nspectrum = "asdep.csv"\nas_deposited = true\n',
         "member"),
        (text.replace("as_deposited = true", "as_deposited = false"), "member[asdep].temperature"),
        (text.replace('label = "a700"', 'label = "a650"'), "member[4].label"),
    ]
    for bad, where in cases:
        path.write_text(bad)
        with pytest.raises(InputError) as info:
            load_series(path)
        assert info.value.where.endswith(where), (info.value.where, where)
        assert "\n" not in str(info.value)
    path.write_text(text)
    s = load_series(path)
    assert s.members[1].time_s == pytest.approx(TIME_S)
    assert s.members[1].overrides == {"exposure": {"charge_uC": 10.0},
                                      "calibration": {"offset_keV": 31.0}}
    # Celsius: T/K = t/degC + 273.15 exactly (SI Brochure, 9th ed., 2019)
    path.write_text(text.replace("temperature_K = 650.0", "temperature_C = 376.85"))
    assert load_series(path).members[2].temperature_K == pytest.approx(650.0, abs=1e-9)


@pytest.mark.slow
def test_real_inversions_through_the_command_on_an_external_scheduler(dask_cluster, tmp_path):
    """The real member task (`invert` on each spectrum) through `sondage series --scheduler`:
    three members of the invented demo series, short chains (not converged: the files and
    the statistics must still be complete and say so)."""
    from inversion.cli import main

    address, _ = dask_cluster
    demo = HERE.parent / "data" / "demo"
    members = [("asdep", None), ("c450-10min", 450), ("c500-10min", 500)]
    lines = ["[series]", f'run = "{demo / "run.toml"}"', "interface = 2", "max_steps = 30", ""]
    for label, temp in members:
        lines += ["[[member]]", f'label = "{label}"', f'spectrum = "{demo / "series" / label}.csv"']
        lines += ["as_deposited = true"] if temp is None else [f"temperature_C = {temp}",
                                                                "time_min = 10"]
        lines.append("")
    path = tmp_path / "real.toml"
    path.write_text("\n".join(lines))
    out = tmp_path / "real.h5"
    assert main(["series", str(path), "-o", str(out), "--scheduler", address]) == 0
    data = read_series(out)
    assert [m["label"] for m in data["members"]] == [m[0] for m in members]
    with h5py.File(out, "r") as f:
        for label, _ in members:
            g = f[f"members/links/{label}"]
            assert g["posterior/samples"].shape[0] > 0
            assert bool(g["diagnostics"].attrs["converged"]) is False  # 30 steps: honest flag
    assert set(data["diffusion"]) == {"c450-10min", "c500-10min"}
