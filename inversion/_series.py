"""Annealing series: the series file, inverting every member on dask.distributed, the series
result file and its report.

Series file (TOML, our own schema)::

    [series]
    title = "invented Ni/Si anneals"        # optional
    run = "template.toml"                     # shared run-file template (relative to this file)
    interface = 1                             # boundary below layer 1 (layers counted from 1)
    widths_in = "auto"                        # "nm", "areal_density" or "auto" (nm if possible)
    max_steps = 4000                          # optional: chain length per member
    arrhenius_scatter = false                 # optional: fit extra scatter of ln D

    [[member]]
    label = "as-deposited"                    # letters, digits, '-', '_', '.'
    spectrum = "asdep.csv"
    as_deposited = true

    [[member]]
    label = "a350-30"
    spectrum = "a350_30min.csv"
    temperature_C = 350                       # or temperature_K
    time_min = 30                             # or time_s, time_h
    charge_uC = 11.8                          # optional overrides of the template
    calibration = { offset_keV = 21.0 }

Series result file (HDF5)::

    /                       attrs: program, version, kind = "series", series_text, seed,
                            interface, width_unit, d_unit, status, created
    /members/table/         label, temperature_K, time_s, as_deposited, file (relative path)
    /members/links/<label>  h5py.ExternalLink to the member's own result file (root "/")
    /members/summary/       width median, lo68, hi68, lo95, hi95 per member
    /diffusion/<label>/     d_draws, negative (bool); attrs time_s, temperature_K, unit,
                            negative_fraction, median, lo68, hi68, lo95, hi95
    /arrhenius/             ea_eV, ln_d0, [scatter_ln] draws, band_temperature_K, band_ln_d;
                            attrs summary numbers, likelihood, d_unit
    /comparison/width, /comparison/diffusion   neighbouring pairs: a, b, median, lo95, hi95,
                            p_a_greater
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import re
import sys
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from forward import InputError

from ._diffusion import (
    BOLTZMANN_eV_PER_K,
    NM2_TO_CM2,
    arrhenius_fit,
    compare_neighbours,
    diffusion_draws,
    interval,
)

__all__ = [
    "Member",
    "Series",
    "load_series",
    "parse_series",
    "run_series",
    "invert_member",
    "member_state",
    "member_path",
    "series_statistics",
    "series_report",
    "read_series",
]

_STR = h5py.string_dtype()
_LABEL = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
_SERIES_KEYS = ("title", "run", "interface", "widths_in", "max_steps", "arrhenius_scatter")
_MEMBER_KEYS = ("label", "spectrum", "as_deposited", "temperature_C", "temperature_K",
                "time_s", "time_min", "time_h", "charge_uC", "particles", "calibration")
_TOP_KEYS = ("series", "member")
_CELSIUS_OFFSET_K = 273.15  # exact, by definition of the Celsius scale (SI Brochure)


# --------------------------------------------------------------------------------------------
# the series file
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Member:
    """One spectrum of the series.

    Attributes
    ----------
    label : str
    spectrum : str
        Path of the spectrum (absolute) or ``file.h5:/dataset``.
    as_deposited : bool
    temperature_K, time_s : float or None
        Anneal temperature (K) and time (s); None for the as-deposited member.
    overrides : dict
        Run-file tables to change for this member (``exposure``, ``calibration``).
    index : int
        Position in the series file (0-based).
    """

    label: str
    spectrum: str
    as_deposited: bool
    temperature_K: float | None
    time_s: float | None
    overrides: dict
    index: int


@dataclass(frozen=True)
class Series:
    """A checked series file."""

    source: str
    text: str
    base_dir: Path
    run_path: Path
    title: str
    interface: int
    widths_in: str
    max_steps: int | None
    arrhenius_scatter: bool
    members: tuple = field(default_factory=tuple)

    @property
    def anneals(self) -> list:
        return [m for m in self.members if not m.as_deposited]

    @property
    def reference(self) -> Member:
        return next(m for m in self.members if m.as_deposited)


def _kind(v) -> str:
    if isinstance(v, bool):
        return f"the boolean {str(v).lower()}"
    if isinstance(v, (int, float)):
        return f"the number {v!r}"
    if isinstance(v, str):
        return f"the string {v!r}"
    return "a table" if isinstance(v, dict) else ("an array" if isinstance(v, list) else
                                                  type(v).__name__)


def _check_keys(table, allowed, where_prefix, place):
    if not isinstance(table, dict):
        raise InputError(f"expected a table, got {_kind(table)}", where=where_prefix)
    for key in table:
        if key not in allowed:
            raise InputError(f"unknown key {key!r} in {place}; allowed keys: "
                             f"{', '.join(allowed)}", where=f"{where_prefix}.{key}")


def _number(table, key, where, *, positive=True):
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number, got {_kind(v)}", where=where)
    if positive and v <= 0:
        raise InputError(f"{v:g} is out of range; allowed: > 0", where=where)
    return float(v)


def load_series(path) -> Series:
    """Read and check a series file.

    Parameters
    ----------
    path : str or Path
        The TOML series file; paths inside it are relative to its folder.

    Returns
    -------
    Series
    """
    p = Path(path)
    if not p.is_file():
        raise InputError("series file not found; give the path of an existing .toml file",
                         where=str(path))
    try:
        text = p.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file; a series file is TOML text",
                         where=str(path)) from None
    return parse_series(text, source=str(path), base_dir=p.resolve().parent)


def parse_series(text: str, source: str = "<string>", base_dir=None) -> Series:
    """Check a series file given as text.

    Parameters
    ----------
    text : str
        TOML text.
    source : str
        Name used in error messages.
    base_dir : str or Path, optional
        Folder for relative paths (default: the current folder).

    Returns
    -------
    Series
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}; a series file is valid TOML "
                         "([series], [[member]])", where=source) from None
    for key in raw:
        if key not in _TOP_KEYS:
            raise InputError(f"unknown key {key!r} at the top level; allowed: [series] and "
                             "[[member]]", where=f"{source}: {key}")
    if "series" not in raw:
        raise InputError("missing required table [series]", where=f"{source}: series")
    s = raw["series"]
    _check_keys(s, _SERIES_KEYS, f"{source}: series", "[series]")
    if "run" not in s or not isinstance(s["run"], str):
        raise InputError("missing run-file template; give run = \"template.toml\"",
                         where=f"{source}: series.run")
    run_path = (base / s["run"]).resolve()
    if not run_path.is_file():
        raise InputError(f"run-file template {s['run']!r} not found (looked in {base})",
                         where=f"{source}: series.run")
    interface = s.get("interface", 1)
    if isinstance(interface, bool) or not isinstance(interface, int) or interface < 1:
        raise InputError(f"expected a whole number >= 1 (interface N lies below layer N), got "
                         f"{_kind(interface)}", where=f"{source}: series.interface")
    widths_in = s.get("widths_in", "auto")
    if widths_in not in ("auto", "nm", "areal_density"):
        raise InputError(f"unknown value {widths_in!r}; allowed: 'auto', 'nm', 'areal_density'",
                         where=f"{source}: series.widths_in")
    max_steps = s.get("max_steps")
    if max_steps is not None and (isinstance(max_steps, bool) or not isinstance(max_steps, int)
                                  or max_steps < 1):
        raise InputError(f"expected a whole number >= 1, got {_kind(max_steps)}",
                         where=f"{source}: series.max_steps")
    scatter = s.get("arrhenius_scatter", False)
    if not isinstance(scatter, bool):
        raise InputError(f"expected true or false, got {_kind(scatter)}",
                         where=f"{source}: series.arrhenius_scatter")

    items = raw.get("member", [])
    if not isinstance(items, list) or len(items) < 2:
        raise InputError("a series needs at least 2 [[member]] tables (one as-deposited and one "
                         "or more anneals)", where=f"{source}: member")
    members, labels = [], set()
    for i, m in enumerate(items):
        where = f"{source}: member[{i + 1}]"
        _check_keys(m, _MEMBER_KEYS, where, f"[[member]] number {i + 1}")
        label = m.get("label")
        if not isinstance(label, str) or not _LABEL.match(label):
            raise InputError(f"expected a label of letters, digits, '-', '_' or '.', got "
                             f"{_kind(label)}", where=f"{where}.label")
        if label in labels:
            raise InputError(f"label {label!r} is used twice; each member needs its own label",
                             where=f"{where}.label")
        labels.add(label)
        where = f"{source}: member[{label}]"
        spec = m.get("spectrum")
        if not isinstance(spec, str):
            raise InputError(f"missing spectrum path; give spectrum = \"file.csv\"",
                             where=f"{where}.spectrum")
        file_part, sep, dataset = spec.partition(".h5:")
        spectrum = str((base / (file_part + (".h5" if sep else ""))).resolve()) + (
            ":" + dataset if sep else "")
        as_dep = m.get("as_deposited", False)
        if not isinstance(as_dep, bool):
            raise InputError(f"expected true or false, got {_kind(as_dep)}",
                             where=f"{where}.as_deposited")
        temps = [k for k in ("temperature_C", "temperature_K") if k in m]
        times = [k for k in ("time_s", "time_min", "time_h") if k in m]
        if as_dep:
            if temps or times:
                raise InputError("an as-deposited member has no anneal temperature or time; "
                                 "remove them or set as_deposited = false",
                                 where=f"{where}.{(temps + times)[0]}")
            t_k = t_s = None
        else:
            if len(temps) != 1:
                raise InputError("give exactly one of temperature_C or temperature_K (or "
                                 "as_deposited = true)", where=f"{where}.temperature")
            if len(times) != 1:
                raise InputError("give exactly one of time_s, time_min or time_h (or "
                                 "as_deposited = true)", where=f"{where}.time")
            if temps[0] == "temperature_C":
                t_k = _number(m, "temperature_C", f"{where}.temperature_C", positive=False) \
                    + _CELSIUS_OFFSET_K
                if t_k <= 0:
                    raise InputError("below absolute zero; allowed: > -273.15",
                                     where=f"{where}.temperature_C")
            else:
                t_k = _number(m, "temperature_K", f"{where}.temperature_K")
            scale = {"time_s": 1.0, "time_min": 60.0, "time_h": 3600.0}[times[0]]
            t_s = _number(m, times[0], f"{where}.{times[0]}") * scale
        overrides: dict = {}
        if "charge_uC" in m and "particles" in m:
            raise InputError("give charge_uC or particles, not both", where=f"{where}.particles")
        for key in ("charge_uC", "particles"):
            if key in m:
                overrides.setdefault("exposure", {})[key] = _number(m, key, f"{where}.{key}")
        if "calibration" in m:
            if not isinstance(m["calibration"], dict):
                raise InputError(f"expected a table such as {{ offset_keV = 20.0 }}, got "
                                 f"{_kind(m['calibration'])}", where=f"{where}.calibration")
            overrides["calibration"] = dict(m["calibration"])
        members.append(Member(label=label, spectrum=spectrum, as_deposited=as_dep,
                              temperature_K=t_k, time_s=t_s, overrides=overrides, index=i))
    n_ref = sum(m.as_deposited for m in members)
    if n_ref != 1:
        raise InputError(f"{n_ref} members have as_deposited = true; a series needs exactly one",
                         where=f"{source}: member")
    return Series(source=source, text=text, base_dir=base, run_path=run_path,
                  title=str(s.get("title", "")), interface=interface, widths_in=widths_in,
                  max_steps=max_steps, arrhenius_scatter=scatter, members=tuple(members))


def _member_run(series: Series, member: Member):
    """The template run with the member's overrides, checked like a run file."""
    import forward

    run = forward.load_run(series.run_path)
    if member.overrides:
        run = run.with_overrides(member.overrides,
                                 source=f"{series.source}: member[{member.label}]")
    return run


# --------------------------------------------------------------------------------------------
# member results
# --------------------------------------------------------------------------------------------
def member_path(output, label: str) -> Path:
    """Where a member's own result file lives: ``<output stem>.members/<label>.h5``."""
    output = Path(output)
    return output.parent / f"{output.stem}.members" / f"{label}.h5"


def member_state(path) -> str:
    """``"missing"``, ``"finished"``, ``"partial"`` (resumable) or ``"broken"`` (restart)."""
    path = Path(path)
    if not path.exists():
        return "missing"
    try:
        with h5py.File(path, "r") as f:
            status = f.attrs.get("status", "")
            status = status.decode() if isinstance(status, bytes) else str(status)
            if "finished" in f.attrs and "posterior" in f and status not in ("running",
                                                                               "interrupted"):
                return "finished"
            return "partial" if "input" in f else "broken"
    except OSError:
        return "broken"


def invert_member(payload: dict) -> dict:
    """Invert one member (runs on a dask worker).

    A finished member file is left alone; a partial one is resumed (so a worker that dies
    mid-chain loses at most the steps since the last write); an unreadable one is restarted.

    Parameters
    ----------
    payload : dict
        ``label``, ``run_path``, ``overrides``, ``where``, ``spectrum``, ``member_path``,
        ``seed``, ``max_steps``.

    Returns
    -------
    dict
        ``label``, ``path`` and ``state`` before the call.
    """
    import forward

    from ._api import invert

    out = Path(payload["member_path"])
    state = member_state(out)
    if state != "finished":
        run = forward.load_run(payload["run_path"])
        if payload["overrides"]:
            run = run.with_overrides(payload["overrides"], source=payload["where"])
        out.parent.mkdir(parents=True, exist_ok=True)
        invert(run, payload["spectrum"], out, seed=int(payload["seed"]),
               max_steps=payload["max_steps"], resume=state == "partial",
               force=state == "broken", progress=False,
               command=f"sondage series member {payload['label']}")
    return {"label": payload["label"], "path": str(out), "state": state}


# --------------------------------------------------------------------------------------------
# running
# --------------------------------------------------------------------------------------------
def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _version() -> str:
    try:
        from importlib.metadata import version
        return version("sondage")
    except Exception:  # pragma: no cover - bare checkout
        return "0+unknown"


def _payloads(series: Series, output: Path, seed: int, max_steps):
    out = []
    for m in series.members:
        out.append({"label": m.label, "run_path": str(series.run_path),
                    "overrides": m.overrides, "where": f"{series.source}: member[{m.label}]",
                    "spectrum": m.spectrum, "member_path": str(member_path(output, m.label)),
                    "seed": int(seed) + 1000 * m.index,
                    "max_steps": max_steps if max_steps is not None else series.max_steps})
    return out


def run_series(series: Series, output, *, scheduler: str | None = None, workers: int = 2,
               resume: bool = False, force: bool = False, seed: int = 0,
               max_steps: int | None = None, task=None, progress: bool = True,
               report: bool = True, arrhenius_steps: int = 3000, check_inputs: bool = True):
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
        Check every member's run overrides and spectrum here before submitting.

    Returns
    -------
    Path
        The series result file.
    """
    from ._outputs import WriterLock, check_output, spectrum_file

    output = Path(output)
    workers = int(workers)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}", where="--workers")

    inputs = {"series file": series.source, "run-file template": series.run_path,
              **{f"spectrum of member {m.label}": spectrum_file(m.spectrum)
                 for m in series.members}}
    check_output(output, inputs=inputs, force=True, resume=True, kind="series file")
    if output.exists() and not (resume or force):
        raise InputError("series file exists; add --resume to continue it or --force to replace "
                         "it", where=str(output))
    with WriterLock(output):
        return _run_series_locked(series, output, scheduler=scheduler, workers=workers,
                                  resume=resume, force=force, seed=seed, max_steps=max_steps,
                                  task=task, progress=progress, report=report,
                                  arrhenius_steps=arrhenius_steps, check_inputs=check_inputs)


def _run_series_locked(series, output, *, scheduler, workers, resume, force, seed, max_steps,
                       task, progress, report, arrhenius_steps, check_inputs):
    """The body of :func:`run_series`, run while holding the series file's writer lock."""
    import forward
    from dask.distributed import Client, LocalCluster, as_completed

    if check_inputs:
        # everything a member's inversion would refuse, refused here, before any cluster starts
        # (one clear error instead of worker failures and a lost run)
        from ._api import prepare

        name_nm, name_areal = _interface_names(series)
        for m in series.members:
            run_m, spectrum_m = _member_run(series, m), forward.read_spectrum(m.spectrum)
            if task not in (None, invert_member):  # a stand-in task: no inversion to check
                continue
            _, objective = prepare(run_m, spectrum_m)
            spec = objective.spec
            if name_areal not in objective.derived_names()[0] or (
                    spec.profile == "layers" and name_areal not in spec.names):
                raise InputError(f"the template's [fit] table does not free the mixing width "
                                 f"of interface {series.interface} ({name_areal}); free it, "
                                 f"e.g. \"{name_areal}\" = true",
                                 where=f"{series.source}: series.interface")
    if force:
        for m in series.members:
            p = member_path(output, m.label)
            if p.exists():
                p.unlink()
    task = task or invert_member
    payloads = _payloads(series, output, seed, max_steps)
    member_path(output, "x").parent.mkdir(parents=True, exist_ok=True)
    todo = [p for p in payloads if member_state(p["member_path"]) != "finished"]
    _write_members(series, output, seed, status="running")

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
    _write_statistics(output, stats)
    set_wall = {"wall_s_members": t_members,
                "wall_s_statistics": time.perf_counter() - t_start - t_members}
    with h5py.File(output, "a") as f:
        f.attrs.update(set_wall)
    if report:
        series_report(output)
    return output


def _write_members(series: Series, output: Path, seed: int, status: str):
    with h5py.File(output, "w") as f:
        f.attrs.update({"program": "sondage", "version": _version(), "kind": "series",
                        "series_text": series.text, "series_source": series.source,
                        "seed": int(seed), "interface": series.interface,
                        "title": series.title, "status": status, "created": _now()})
        g = f.create_group("members")
        t = g.create_group("table")
        ms = series.members
        t.create_dataset("label", data=np.array([m.label for m in ms], dtype=object), dtype=_STR)
        t.create_dataset("temperature_K", data=np.array(
            [m.temperature_K if m.temperature_K is not None else np.nan for m in ms]))
        t["temperature_K"].attrs["unit"] = "K"
        t.create_dataset("time_s", data=np.array(
            [m.time_s if m.time_s is not None else 0.0 for m in ms]))
        t["time_s"].attrs["unit"] = "s"
        t.create_dataset("as_deposited", data=np.array([m.as_deposited for m in ms]))
        rel = [os.path.relpath(member_path(output, m.label), output.parent) for m in ms]
        t.create_dataset("file", data=np.array(rel, dtype=object), dtype=_STR)
        t["file"].attrs["description"] = "member result file, relative to this file's folder"
        links = g.create_group("links")
        for m, r in zip(ms, rel):
            links[m.label] = h5py.ExternalLink(r, "/")


# --------------------------------------------------------------------------------------------
# statistics
# --------------------------------------------------------------------------------------------
def _interface_names(series: Series):
    run = forward_load(series.run_path)
    layers = run.layers
    if series.interface > len(layers) - 1:
        raise InputError(f"interface {series.interface} does not exist: the run file has "
                         f"{len(layers)} layers, so interfaces 1 to {len(layers) - 1}",
                         where=f"{series.source}: series.interface")
    name = layers[series.interface - 1].name
    return f"{name}.mixing_nm", f"{name}.mixing"


def forward_load(path):
    import forward
    return forward.load_run(path)


def series_statistics(series: Series, output, *, seed: int = 0, arrhenius_steps: int = 3000):
    """Width draws per member, D draws per anneal, the Arrhenius posterior and comparisons.

    Parameters
    ----------
    series : Series
    output : path
        The series result file (member files beside it).
    seed : int
        Seed of the pairings and the Arrhenius sampler.
    arrhenius_steps : int
        emcee steps of the Arrhenius fit.

    Returns
    -------
    dict
    """
    from ._store import read_result

    name_nm, name_areal = _interface_names(series)
    widths = {}
    for m in series.members:
        res = read_result(member_path(output, m.label))
        if name_nm not in res.derived and name_areal not in res.derived:
            raise InputError(f"member {m.label!r} has no mixing width for interface "
                             f"{series.interface} ({name_areal}); free that interface's mixing "
                             "width in the run file's [fit] table",
                             where=f"{series.source}: series.interface")
        widths[m.label] = (np.asarray(res.derived.get(name_nm, [np.nan]), float),
                           np.asarray(res.derived[name_areal], float))
    use_nm = {"nm": True, "areal_density": False}.get(series.widths_in)
    if use_nm is None:
        use_nm = all(np.all(np.isfinite(w[0])) for w in widths.values())
    if use_nm and not all(np.all(np.isfinite(w[0])) for w in widths.values()):
        raise InputError("widths in nm need every layer's density in the run file; give the "
                         "densities or use widths_in = \"areal_density\"",
                         where=f"{series.source}: series.widths_in")
    width_unit = "nm" if use_nm else "1e15 atoms/cm2"
    d_unit = "nm2/s" if use_nm else "(1e15 atoms/cm2)2/s"
    w = {k: (v[0] if use_nm else v[1]) for k, v in widths.items()}
    for label, draws in w.items():
        if np.ptp(draws) <= 0:
            raise InputError(f"member {label!r}: the mixing width of interface "
                             f"{series.interface} has no spread (is it fixed?); free it in the "
                             "run file's [fit] table", where=f"{series.source}: series.interface")

    ref = series.reference
    d = {}
    for k, m in enumerate(series.anneals):
        d[m.label] = diffusion_draws(w[m.label], w[ref.label], m.time_s, seed=seed + k)
    stats = {"width_unit": width_unit, "d_unit": d_unit, "widths": w, "diffusion": d,
             "labels": [m.label for m in series.members], "arrhenius": None, "notes": []}
    temps = np.array([m.temperature_K for m in series.anneals])
    if np.unique(temps).size >= 2:
        stats["arrhenius"] = arrhenius_fit(temps, [d[m.label].d_draws for m in series.anneals],
                                           scatter=series.arrhenius_scatter, seed=seed,
                                           n_steps=arrhenius_steps)
    else:
        stats["notes"].append("all anneals share one temperature: no Arrhenius fit")
    stats["comparison_width"] = compare_neighbours(stats["labels"],
                                                   [w[k] for k in stats["labels"]], seed=seed)
    order = sorted(series.anneals, key=lambda m: (m.temperature_K, m.time_s, m.index))
    stats["comparison_diffusion"] = compare_neighbours(
        [m.label for m in order], [d[m.label].d_draws for m in order], seed=seed + 500)
    stats["width_unit_reason"] = ("nm from the run file's layer densities" if use_nm else
                                  "1e15 atoms/cm2 (layer densities missing or widths_in set)")
    return stats


def _write_rows(group, rows):
    keys = ("a", "b", "median", "lo95", "hi95", "p_a_greater")
    for k in keys:
        vals = [r[k] for r in rows]
        if k in ("a", "b"):
            group.create_dataset(k, data=np.array(vals, dtype=object), dtype=_STR)
        else:
            group.create_dataset(k, data=np.array(vals, dtype=float))


def _write_statistics(output: Path, stats: dict):
    with h5py.File(output, "a") as f:
        for name in ("diffusion", "arrhenius", "comparison"):
            if name in f:
                del f[name]
        f.attrs["width_unit"] = stats["width_unit"]
        f.attrs["width_unit_reason"] = stats["width_unit_reason"]
        f.attrs["d_unit"] = stats["d_unit"]
        f.attrs["notes"] = stats["notes"] or ["none"]
        s = f["members"].require_group("summary")
        for k in list(s):
            del s[k]
        ivs = [interval(stats["widths"][lab]) for lab in stats["labels"]]
        for key in ("median", "lo68", "hi68", "lo95", "hi95"):
            s.create_dataset(f"width_{key}", data=np.array([iv[key] for iv in ivs]))
            s[f"width_{key}"].attrs["unit"] = stats["width_unit"]
        g = f.create_group("diffusion")
        table = {m: None for m in stats["labels"]}
        temps = dict(zip(stats["labels"], f["members/table/temperature_K"][()]))
        for label, dd in stats["diffusion"].items():
            h = g.create_group(label)
            h.create_dataset("d_draws", data=dd.d_draws).attrs["unit"] = stats["d_unit"]
            h.create_dataset("negative", data=dd.negative)
            h.attrs.update({"time_s": dd.time_s, "temperature_K": float(temps[label]),
                            "unit": stats["d_unit"], "negative_fraction": dd.negative_fraction,
                            **interval(dd.d_draws)})
        del table
        fit = stats["arrhenius"]
        if fit is not None:
            a = f.create_group("arrhenius")
            a.create_dataset("ea_eV", data=fit.ea_eV).attrs["unit"] = "eV"
            a.create_dataset("ln_d0", data=fit.ln_d0).attrs["unit"] = f"ln({stats['d_unit']})"
            if fit.scatter_ln is not None:
                a.create_dataset("scatter_ln", data=fit.scatter_ln)
            a.create_dataset("band_temperature_K", data=fit.temperature_grid_K)
            a.create_dataset("band_ln_d", data=fit.band_ln_d).attrs["quantiles"] = \
                np.array(fit.band_quantiles)
            for q, iv in fit.summary.items():
                for k, v in iv.items():
                    a.attrs[f"{q}.{k}"] = v
            for k, v in fit.diagnostics.items():
                a.attrs[f"diagnostics.{k}"] = v
            a.attrs["d_unit"] = stats["d_unit"]
        c = f.create_group("comparison")
        _write_rows(c.create_group("width"), stats["comparison_width"])
        _write_rows(c.create_group("diffusion"), stats["comparison_diffusion"])
        c.attrs["description"] = ("neighbouring pairs: a - b posterior, median, central 95 % "
                                  "interval, P(a > b)")
        f.attrs["status"] = "finished"
        f.attrs["finished"] = _now()


# --------------------------------------------------------------------------------------------
# reading and reporting
# --------------------------------------------------------------------------------------------
def _s(v):
    return v.decode() if isinstance(v, bytes) else str(v)


def read_series(path) -> dict:
    """Read a series result file into plain arrays and dicts.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict
        ``attrs``, ``members`` (list of dicts), ``diffusion`` (label -> dict with ``d_draws``
        and attrs), ``arrhenius`` (dict or None), ``comparison`` (``width``, ``diffusion``:
        lists of rows).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("series result file not found", where=str(path))
    out: dict = {}
    with h5py.File(path, "r") as f:
        if _s(f.attrs.get("kind", "")) != "series":
            raise InputError("not a series result file (no kind = 'series' attribute)",
                             where=str(path))
        out["attrs"] = {k: (_s(v) if isinstance(v, (bytes, str)) else v)
                        for k, v in f.attrs.items()}
        t = f["members/table"]
        s = f["members"].get("summary")
        members = []
        for i, lab in enumerate(t["label"][()]):
            row = {"label": _s(lab), "temperature_K": float(t["temperature_K"][i]),
                   "time_s": float(t["time_s"][i]), "as_deposited": bool(t["as_deposited"][i]),
                   "file": _s(t["file"][i])}
            if s is not None and "width_median" in s:
                for k in ("median", "lo68", "hi68", "lo95", "hi95"):
                    row[f"width_{k}"] = float(s[f"width_{k}"][i])
            members.append(row)
        out["members"] = members
        out["diffusion"] = {}
        if "diffusion" in f:
            for lab, g in f["diffusion"].items():
                out["diffusion"][lab] = {"d_draws": g["d_draws"][()],
                                         **{k: g.attrs[k] for k in g.attrs}}
        out["arrhenius"] = None
        if "arrhenius" in f:
            a = f["arrhenius"]
            out["arrhenius"] = {k: a[k][()] for k in a}
            out["arrhenius"]["attrs"] = {k: a.attrs[k] for k in a.attrs}
        out["comparison"] = {}
        if "comparison" in f:
            for kind, g in f["comparison"].items():
                n = g["median"].shape[0]
                out["comparison"][kind] = [
                    {"a": _s(g["a"][i]), "b": _s(g["b"][i]), "median": float(g["median"][i]),
                     "lo95": float(g["lo95"][i]), "hi95": float(g["hi95"][i]),
                     "p_a_greater": float(g["p_a_greater"][i])} for i in range(n)]
    return out


def _g(x: float) -> str:
    return f"{x:.4g}"


def series_report(path, out_dir=None) -> dict:
    """Figures and summary.md of a series result file.

    Writes ``width2_vs_time.png`` (w^2 against anneal time per temperature, medians with
    68 % intervals, the as-deposited member at t = 0), ``arrhenius.png`` (ln D against 1/kT:
    member medians with 68 % intervals, the posterior median line and its 95 % band) and
    ``summary.md`` (members, D per anneal, Arrhenius parameters, comparison tables).

    Parameters
    ----------
    path : str or Path
        Series result file.
    out_dir : str or Path, optional
        Default ``<stem>.report/`` beside the file.

    Returns
    -------
    dict
        Name -> path of each written file.
    """
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    path = Path(path)
    data = read_series(path)
    out_dir = Path(out_dir) if out_dir is not None else path.parent / f"{path.stem}.report"
    out_dir.mkdir(parents=True, exist_ok=True)
    attrs = data["attrs"]
    wu, du = _s(attrs.get("width_unit", "nm")), _s(attrs.get("d_unit", "nm2/s"))
    files = {}
    members = data["members"]
    ref = next(m for m in members if m["as_deposited"])

    # width^2 against time, per temperature
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    temps = sorted({m["temperature_K"] for m in members if not m["as_deposited"]})
    cmap = plt.get_cmap("viridis")
    w2 = lambda m, k: m[f"width_{k}"] ** 2 if m[f"width_{k}"] > 0 else 0.0  # noqa: E731
    ax.errorbar([0.0], [w2(ref, "median")], yerr=[[w2(ref, "median") - w2(ref, "lo68")],
                                                    [w2(ref, "hi68") - w2(ref, "median")]],
                fmt="s", color="k", label=f"as deposited ({ref['label']})")
    for j, tk in enumerate(temps):
        col = cmap(j / max(1, len(temps) - 1))
        ms = sorted([m for m in members if m["temperature_K"] == tk], key=lambda m: m["time_s"])
        x = [m["time_s"] for m in ms]
        y = [w2(m, "median") for m in ms]
        yerr = [[y[i] - w2(m, "lo68") for i, m in enumerate(ms)],
                [w2(m, "hi68") - y[i] for i, m in enumerate(ms)]]
        ax.errorbar(x, y, yerr=yerr, fmt="o-", color=col, label=f"{tk:.0f} K")
    ax.set_xlabel("anneal time (s)")
    ax.set_ylabel(f"mixing width$^2$ ({wu})$^2$")
    ax.set_title("Interface broadening: median and marginal 68 % interval", fontsize=10)
    ax.legend(fontsize=8)
    fig.tight_layout()
    files["width2_vs_time"] = out_dir / "width2_vs_time.png"
    fig.savefig(files["width2_vs_time"], dpi=120)
    plt.close(fig)

    # Arrhenius plot
    arr = data["arrhenius"]
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    for lab, dd in data["diffusion"].items():
        x = 1.0 / (BOLTZMANN_eV_PER_K * float(dd["temperature_K"]))
        q16, q50, q84 = np.quantile(dd["d_draws"], [0.16, 0.5, 0.84])
        if q16 > 0:
            ax.errorbar([x], [np.log(q50)], yerr=[[np.log(q50) - np.log(q16)],
                                                  [np.log(q84) - np.log(q50)]],
                        fmt="o", color="C0")
        elif q84 > 0:  # not resolved from zero: an upper limit at the 84 % quantile
            ax.plot([x], [np.log(q84)], marker="v", color="C3", linestyle="none")
    if arr is not None:
        gx = 1.0 / (BOLTZMANN_eV_PER_K * arr["band_temperature_K"])
        band = arr["band_ln_d"]
        ax.fill_between(gx, band[0], band[-1], color="C0", alpha=0.2,
                        label="Arrhenius line, 95 % posterior band")
        ax.plot(gx, band[2], color="C0", label="posterior median line")
        a = arr["attrs"]
        ax.set_title(f"Ea = {a['ea_eV.median']:.3g} eV "
                     f"(95 %: {a['ea_eV.lo95']:.3g} to {a['ea_eV.hi95']:.3g})", fontsize=10)
    ax.errorbar([], [], yerr=[], fmt="o", color="C0", label="anneal: median, 68 % interval")
    ax.plot([], [], marker="v", color="C3", linestyle="none",
            label="anneal not resolved: 84 % upper limit")
    ax.set_xlabel("1 / kT (1/eV)")
    ax.set_ylabel(f"ln(D / ({du}))")
    ax.legend(fontsize=8)
    fig.tight_layout()
    files["arrhenius"] = out_dir / "arrhenius.png"
    fig.savefig(files["arrhenius"], dpi=120)
    plt.close(fig)

    # summary.md
    lines = [f"# Annealing series: {_s(attrs.get('title', '')) or path.stem}", "",
             f"Series file `{_s(attrs.get('series_source', ''))}`, interface "
             f"{int(attrs.get('interface', 1))}; widths in {wu} "
             f"({_s(attrs.get('width_unit_reason', ''))}); D in {du}.", "",
             "## Members", "",
             "| member | T (K) | time (s) | width median | width 68 % | D median | D 95 % "
             "| P(D < 0) |", "|---|---|---|---|---|---|---|---|"]
    for m in members:
        dd = data["diffusion"].get(m["label"])
        dcol = ("-", "-", "-") if dd is None else (
            _g(dd["median"]), f"{_g(dd['lo95'])} to {_g(dd['hi95'])}",
            f"{float(dd['negative_fraction']):.3f}")
        tcol = "as deposited" if m["as_deposited"] else f"{m['temperature_K']:.1f}"
        lines.append(f"| {m['label']} | {tcol} | {m['time_s']:g} | {_g(m['width_median'])} | "
                     f"{_g(m['width_lo68'])} to {_g(m['width_hi68'])} | {dcol[0]} | {dcol[1]} "
                     f"| {dcol[2]} |")
    lines += ["", "Negative D draws (annealed width below the as-deposited width) are kept, "
              "not clipped; P(D < 0) is their share.", ""]
    if arr is not None:
        a = arr["attrs"]
        d0 = np.exp(arr["ln_d0"])
        d0_iv = interval(d0)
        conv = (f" (cm2/s: {d0_iv['median'] * NM2_TO_CM2:.3g}, 95 % "
                f"{d0_iv['lo95'] * NM2_TO_CM2:.3g} to {d0_iv['hi95'] * NM2_TO_CM2:.3g})"
                if du == "nm2/s" else "")
        lines += ["## Arrhenius law D = D0 exp(-Ea / kT)", "",
                  "| quantity | median | 68 % interval | 95 % interval |", "|---|---|---|---|",
                  f"| Ea (eV) | {a['ea_eV.median']:.4g} | {a['ea_eV.lo68']:.4g} to "
                  f"{a['ea_eV.hi68']:.4g} | {a['ea_eV.lo95']:.4g} to {a['ea_eV.hi95']:.4g} |",
                  f"| ln(D0 / ({du})) | {a['ln_d0.median']:.4g} | {a['ln_d0.lo68']:.4g} to "
                  f"{a['ln_d0.hi68']:.4g} | {a['ln_d0.lo95']:.4g} to {a['ln_d0.hi95']:.4g} |"]
        if "scatter_ln.median" in a:
            lines.append(f"| extra scatter of ln D | {a['scatter_ln.median']:.3g} | "
                         f"{a['scatter_ln.lo68']:.3g} to {a['scatter_ln.hi68']:.3g} | "
                         f"{a['scatter_ln.lo95']:.3g} to {a['scatter_ln.hi95']:.3g} |")
        lines += ["", f"D0 median {d0_iv['median']:.4g} {du}{conv}.  Sampler: "
                  f"{int(a['diagnostics.n_walkers'])} walkers, {int(a['diagnostics.n_steps'])} "
                  f"steps, acceptance {float(a['diagnostics.acceptance_fraction']):.2f}, chain "
                  f"length / autocorrelation time {float(a['diagnostics.steps_over_tau']):.0f}.",
                  ""]
    else:
        lines += ["No Arrhenius fit: the anneals need two or more distinct temperatures.", ""]
    for kind, title, unit in (("width", "Mixing width, neighbouring members", wu),
                              ("diffusion", "D, neighbouring anneals (by temperature, time)", du)):
        rows = data["comparison"].get(kind, [])
        if not rows:
            continue
        lines += [f"## {title}", "", f"| a | b | a - b median ({unit}) | 95 % interval | "
                  "P(a > b) |", "|---|---|---|---|---|"]
        lines += [f"| {r['a']} | {r['b']} | {_g(r['median'])} | {_g(r['lo95'])} to "
                  f"{_g(r['hi95'])} | {r['p_a_greater']:.3f} |" for r in rows]
        lines.append("")
    lines += ["![width squared against anneal time](width2_vs_time.png)", "",
              "![Arrhenius plot](arrhenius.png)", ""]
    files["summary"] = out_dir / "summary.md"
    files["summary"].write_text("\n".join(lines))
    return files
