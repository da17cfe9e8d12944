"""Running a series: every member inverted on dask.distributed, each into its own resumable
result file, then the statistics and the report.

Member k (0-based, in file order) uses seed ``seed + 1000 k``; its result file is
``<series stem>.members/<label>.h5``.  Each member is one task submitted with ``retries=2``: a
worker that dies loses nothing that was written; its task runs again elsewhere and resumes
the member's own file.  A member of a template with ``[[measurement]]`` tables is a joint run:
its spectra and per-measurement overrides go into the template's measurements, and it is
inverted as ``sondage invert RUN.toml -o RESULT.h5`` inverts a joint run.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path

import forward
from forward import InputError

from ..results._outputs import WriterLock, check_output, spectrum_file
from ..results._store import read_head
from ._file import (Series, interface_names, joint_member, member_measurements, member_path,
                    member_run)
from ._seriesfile import set_series_attrs, write_members, write_statistics
from ._statistics import series_statistics

__all__ = ["run_series", "invert_member", "member_state", "member_path", "MemberWarning"]


class MemberWarning(UserWarning):
    """A warning raised while a member was inverted on a worker, passed on by the runner."""


def member_state(path) -> str:
    """``"missing"``, ``"finished"``, ``"partial"`` (resumable) or ``"broken"`` (restart)."""
    path = Path(path)
    if not path.exists():
        return "missing"
    try:
        attrs, parts = read_head(path)
    except InputError:
        return "broken"
    status = str(attrs.get("status", ""))
    if "finished" in attrs and "posterior" in parts and status not in ("running",
                                                                       "interrupted"):
        return "finished"
    return "partial" if "input" in parts else "broken"


def _interface_channels(series: Series, run, where: str):
    """(first, last, low keV, high keV) of the channels holding the chosen interface's signal
    at a member's calibration: from the top edge of the layer above (its whole signal, the
    film's peak) down to the low edge of the layer above and the top edge of the layer below,
    each with a margin of two detector widths."""
    above, below = series.interface - 1, series.interface
    edges = [e for e in forward.signal_edges(run) if e.fraction >= 0.05]
    highs = [e.top_keV for e in edges if e.layer in (above, below) and e.top_keV > 0]
    lows = ([e.bottom_keV for e in edges if e.layer == above and e.bottom_keV]
            + [e.top_keV for e in edges if e.layer == below and e.top_keV > 0])
    if not highs or not lows:
        raise InputError(f"no signal of interface {series.interface} reaches the detector at "
                         "this beam energy and geometry", where=where)
    fwhm = run.detector.fwhm_keV
    high, low = max(highs) + 2.0 * fwhm, max(0.0, min(lows) - 2.0 * fwhm)
    cal = run.calibration
    first = max(0, int(cal.channel_of(max(low, cal.energy_keV(0.0)))))
    last = int(cal.channel_of(high))
    return first, last, low, high


def _check_coverage(series: Series, member, loaded, where: str | None = None) -> None:
    """Refuse a member whose spectrum does not hold the chosen interface's signal; one line
    naming the member (and the measurement, ``where``) and the file."""
    where = where or f"{series.source}: member[{member.label}]"
    spectrum = loaded.spectrum
    first, last, low, high = _interface_channels(series, loaded.run, where)
    have_first, have_last = int(spectrum.channel[0]), int(spectrum.channel[-1])
    if have_first > first or have_last < last:
        layers = loaded.run.layers
        raise InputError(
            f"the spectrum {spectrum.source} holds channels {have_first} to {have_last}, but "
            f"the signal of interface {series.interface} ({layers[series.interface - 1].name} "
            f"over {layers[series.interface].name}) needs channels {first} to {last} "
            f"({low:.0f} to {high:.0f} keV at this member's calibration); give the whole "
            "spectrum, or check the member's calibration", where=where)


def invert_member(payload: dict) -> dict:
    """Invert one member (runs on a dask worker).

    A finished member file is left alone; a partial one is resumed (so a worker that dies
    mid-chain loses at most the steps since the last write); an unreadable one is restarted.

    Parameters
    ----------
    payload : dict
        ``label``, ``run_path``, ``overrides``, ``where``, ``spectrum``, ``member_path``,
        ``seed``, ``max_steps``; for a member of a joint template ``spectra`` and
        ``measurement_overrides`` (``spectrum`` None).

    Returns
    -------
    dict
        ``label``, ``path`` and ``state`` before the call.
    """
    from .._api import invert

    out = Path(payload["member_path"])
    state = member_state(out)
    said = []
    if state != "finished":
        # warnings go back to the process that prints them (never raw from a worker)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            if payload.get("spectra"):  # a joint run: the spectra named in its measurements
                run = joint_member(payload["run_path"], payload["spectra"],
                                   payload.get("measurement_overrides") or {},
                                   source=payload["where"])
            else:
                run = forward.load_run(payload["run_path"])
                if payload["overrides"]:
                    run = run.with_overrides(payload["overrides"], source=payload["where"])
            out.parent.mkdir(parents=True, exist_ok=True)
            invert(run, payload["spectrum"], out, seed=int(payload["seed"]),
                   max_steps=payload["max_steps"], resume=state == "partial",
                   force=state == "broken", progress=False,
                   accept_calibration=bool(payload.get("accept_calibration", False)),
                   command=f"sondage series member {payload['label']}")
        said = [f"member {payload['label']}: {' '.join(str(w.message).split())}"
                for w in caught if not issubclass(w.category, forward.InputWarning)]
    return {"label": payload["label"], "path": str(out), "state": state, "warnings": said}


def _payloads(series: Series, output: Path, seed: int, max_steps, accept_calibration=False):
    out = []
    for m in series.members:
        out.append({"label": m.label, "run_path": str(series.run_path),
                    "overrides": m.overrides, "where": f"{series.source}: member[{m.label}]",
                    "spectrum": m.spectrum, "spectra": dict(m.spectra),
                    "measurement_overrides": m.measurement_overrides,
                    "member_path": str(member_path(output, m.label)),
                    "seed": int(seed) + 1000 * m.index,
                    "max_steps": max_steps if max_steps is not None else series.max_steps,
                    "accept_calibration": bool(accept_calibration)})
    return out


def run_series(series: Series, output, *, scheduler: str | None = None, workers: int = 2,
               resume: bool = False, force: bool = False, seed: int = 0,
               max_steps: int | None = None, task=None, progress: bool = True,
               report: bool = True, arrhenius_steps: int = 3000, check_inputs: bool = True,
               accept_calibration: bool = False):
    """Invert every member of a series on dask.distributed, then the series statistics.

    Parameters
    ----------
    series : Series
    output : path
        The series result file (HDF5).  Member files go to ``<stem>.members/<label>.h5``.
    scheduler : str, optional
        Address of a running dask scheduler (``tcp://host:port``); default a local cluster of
        ``workers`` processes with one thread each.
    workers : int
        Worker processes of the local cluster.
    resume : bool
        Keep finished member files, resume partial ones.
    force : bool
        Replace an existing series file and member files.
    seed : int
        Base seed; member k uses ``seed + 1000 k``; the statistics use ``seed``.
    max_steps : int, optional
        Chain length per member (default: the series file's, else the run file's).
    task : callable, optional
        ``task(payload) -> dict`` run per member (default :func:`invert_member`).
    progress : bool
        A progress bar across members on stderr.
    report : bool
        Write the figures and summary.md into ``<stem>.report/``.
    arrhenius_steps : int
        emcee steps of the Arrhenius fit.
    check_inputs : bool
        Check every member's run overrides and spectrum (every measurement's, for a joint
        template) here before submitting: the checks of ``sondage check``, and that each
        spectrum holds the chosen interface's signal.
    accept_calibration : bool
        Go on past the pre-flight calibration errors of any member (recorded in its file).

    Returns
    -------
    Path
        The series result file.
    """
    output = Path(output)
    from .._inputs import SEED_MAX, check_seed

    workers = int(workers)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}", where="--workers")
    seed = check_seed(0 if seed is None else seed)
    if seed + 1000 * (len(series.members) - 1) + 2 > 2**32 - 1:
        raise InputError(f"seed {seed} is too large for {len(series.members)} members (member "
                         f"k uses seed + 1000 k); allowed: 0 to {SEED_MAX}", where="--seed")

    inputs = {"series file": series.source, "run-file template": series.run_path}
    for m in series.members:
        for name, spectrum in m.spectrum_files.items():
            what = f"spectrum of member {m.label}" + (f", measurement {name}" if m.spectra
                                                      else "")
            inputs[what] = spectrum_file(spectrum)
    check_output(output, inputs=inputs, force=True, resume=True, kind="series file")
    if output.exists() and not (resume or force):
        raise InputError("series file exists; add --resume to continue it or --force to replace "
                         "it", where=str(output))
    with WriterLock(output):
        return _run_series_locked(series, output, scheduler=scheduler, workers=workers,
                                  resume=resume, force=force, seed=seed, max_steps=max_steps,
                                  task=task, progress=progress, report=report,
                                  arrhenius_steps=arrhenius_steps, check_inputs=check_inputs,
                                  accept_calibration=accept_calibration)


def _run_series_locked(series, output, *, scheduler, workers, resume, force, seed, max_steps,
                       task, progress, report, arrhenius_steps, check_inputs,
                       accept_calibration):
    """The body of :func:`run_series`, run while holding the series file's writer lock."""
    from dask.distributed import Client, LocalCluster, as_completed

    if check_inputs:
        # everything a member's inversion would refuse, refused here, before any cluster starts
        # (one clear error instead of worker failures and a lost run)
        from .._api import prepare, prepare_joint
        from .._inputs import load_inputs, preflight_inputs, replay_warnings
        from .._joint import load_joint, preflight_joint

        name_nm, name_areal = interface_names(series)
        told = set()
        for m in series.members:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                if m.spectra:  # a joint member: every measurement's run and spectrum
                    found_m = member_measurements(series, m)
                    joint = load_joint(found_m, spectra=list(m.spectra.values()))
                    loaded_all = joint.inputs
                else:
                    run_m = member_run(series, m)
                    loaded_all = [load_inputs(run_m, m.spectrum, replay=False)]
            # each reader's warning once, not once per member
            replay_warnings([w for w in caught if str(w.message) not in told])
            told |= {str(w.message) for w in caught}
            if not m.spectra:
                loaded_all[0].load_warnings = list(caught)
            if task not in (None, invert_member):  # a stand-in task: no inversion to check
                continue
            where = f"{series.source}: member[{m.label}]"
            for name, loaded in zip(m.spectra or ["spectrum"], loaded_all):
                _check_coverage(series, m, loaded,
                                where=f"{where}.spectra.{name}" if m.spectra else where)
            try:
                objective = prepare_joint(joint) if m.spectra else \
                    prepare(loaded_all[0].run, loaded_all[0].spectrum)[1]
            except InputError as exc:
                raise InputError(str(exc), where=where) from None
            spec = objective.spec
            if name_areal not in objective.derived_names()[0] or (
                    spec.profile == "layers" and name_areal not in spec.names):
                raise InputError(f"the template's [fit] table does not free the mixing width "
                                 f"of interface {series.interface} ({name_areal}); free it, "
                                 f"e.g. \"{name_areal}\" = true",
                                 where=f"{series.source}: series.interface")
            with warnings.catch_warnings(record=True) as found:
                warnings.simplefilter("always")
                try:
                    if m.spectra:
                        preflight_joint(joint, accept_calibration=accept_calibration)
                    else:
                        preflight_inputs(loaded_all[0], accept_calibration=accept_calibration)
                except InputError as exc:
                    raise InputError(str(exc), where=where) from None
            replay_warnings([w for w in found if str(w.message) not in told])
            told |= {str(w.message) for w in found}
    if force:
        for m in series.members:
            p = member_path(output, m.label)
            if p.exists():
                p.unlink()
    task = task or invert_member
    payloads = _payloads(series, output, seed, max_steps, accept_calibration)
    member_path(output, "x").parent.mkdir(parents=True, exist_ok=True)
    todo = [p for p in payloads if member_state(p["member_path"]) != "finished"]
    write_members(output, series, seed=seed, status="running",
                  member_files=[member_path(output, m.label) for m in series.members])

    t_start = time.perf_counter()
    if todo:
        cluster = None
        if scheduler:
            client = Client(scheduler, timeout="20s")
        else:
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   dashboard_address=None, host="127.0.0.1")
            client = Client(cluster)
        bar = None
        try:
            futures = [client.submit(task, p, key=f"sondage-member-{p['label']}-{os.getpid()}-"
                                     f"{abs(hash(str(output)))}", retries=2, pure=False)
                       for p in todo]
            if progress:
                from tqdm import tqdm
                bar = tqdm(total=len(payloads), initial=len(payloads) - len(todo),
                           unit="member", desc="series", file=sys.stderr, dynamic_ncols=True,
                           mininterval=0.1 if sys.stderr.isatty() else 30.0)
            for fut in as_completed(futures):
                res = fut.result()
                for text in res.get("warnings", ()):  # a worker's warnings, printed here
                    warnings.warn(text, MemberWarning, stacklevel=2)
                if bar is not None:
                    bar.set_postfix_str(str(res.get("label", "")))
                    bar.update(1)
        finally:
            if bar is not None:
                bar.close()
            client.close()
            if cluster is not None:
                cluster.close()

    missing = [p["label"] for p in payloads if member_state(p["member_path"]) != "finished"]
    if missing:
        raise RuntimeError(f"members not finished after the run: {', '.join(missing)}")
    t_members = time.perf_counter() - t_start
    stats = series_statistics(series, output, seed=seed, arrhenius_steps=arrhenius_steps)
    write_statistics(output, stats)
    set_series_attrs(output, wall_s_members=t_members,
                     wall_s_statistics=time.perf_counter() - t_start - t_members)
    if report:
        from ._figures import series_report  # matplotlib only here, never on a worker

        series_report(output)
    return output
