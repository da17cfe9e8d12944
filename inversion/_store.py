"""The result file: one self-describing HDF5 file per inversion.

Layout (every array named, units as attributes; readers tolerate optional parts missing)::

    /                     attrs: program, version, seed, command, started, finished, status
    /input/run            the run file's text
    /input/spectrum       measured counts (channels 0..n-1; attrs: measured mask name)
    /input/measured       bool per channel: True where the spectrum has a value
    /input/priors         one line per free parameter: name [unit]: prior
    /mcmc/...             emcee's HDF5 backend layout: chain, log_prob (Fletcher-32 checksums),
                          accepted, attr iteration; plus resume_key, resume_meta,
                          resume_accepted: the random state and acceptances after step n in
                          slot n % 2, flushed before the counter (see SafeHDFBackend)
    /start                attrs: MAP start point and its log-posterior
    /posterior/samples    (draws, parameters), attrs names, units, discard, thin
    /posterior/log_posterior
    /posterior/summary/   names, units, median, mean, sd, low68, high68, low95, high95
    /derived/<name>       draws of each derived quantity, attr unit
    /profile/depth        slice centres (1e15 atoms/cm2); /profile/depth_nm where densities allow
    /profile/<species>    (5, slices) quantiles 2.5, 16, 50, 84, 97.5 %; <species>_map best fit
    /spectrum/channel, counts, predictive (5, channels), model_median, species/<species>
    /diagnostics/         autocorr_time, acceptance, ess, attrs steps, converged, warnings

The final groups are written under ``/_staging`` and then moved into place one by one, so a
crash while writing leaves the previous complete state readable.  Numeric datasets carry
Fletcher-32 checksums, so damaged bytes raise an error on reading instead of becoming numbers.
"""

from __future__ import annotations

import datetime as _dt
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

__all__ = ["Result", "read_result", "damaged_message", "unreadable", "open_for_reading", "QUANTILES", "write_input", "check_input", "write_groups",
           "set_root_attrs", "MCMC_GROUP", "summarise", "now_text", "checksummed"]

#: quantiles stored for bands and predictive spectra (fractions): 2.5, 16, 50, 84, 97.5 %
QUANTILES = (0.025, 0.16, 0.5, 0.84, 0.975)
MCMC_GROUP = "mcmc"
_FINAL_GROUPS = ("posterior", "derived", "profile", "spectrum", "diagnostics")
_STR = h5py.string_dtype()


def now_text() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def set_root_attrs(path, **attrs):
    with h5py.File(path, "a") as f:
        for key, value in attrs.items():
            f.attrs[key] = value


def checksummed(arr) -> dict:
    """Dataset options adding a Fletcher-32 checksum to each chunk of a numeric array.

    HDF5 verifies the checksum on every read, so bytes damaged on disk raise an error instead
    of being read as numbers (scalars and empty arrays cannot be chunked and go without).
    """
    arr = np.asarray(arr)
    if arr.ndim == 0 or arr.size == 0 or arr.dtype.kind not in "biuf":
        return {}
    return {"fletcher32": True}


def write_input(path, *, run_text, counts, measured, priors, attrs):
    """Create the file's input part (a fresh file)."""
    with h5py.File(path, "w") as f:
        for key, value in attrs.items():
            f.attrs[key] = value
        g = f.create_group("input")
        g.create_dataset("run", data=run_text, dtype=_STR)
        counts = np.asarray(counts, dtype=float)
        d = g.create_dataset("spectrum", data=counts, **checksummed(counts))
        d.attrs["unit"] = "counts"
        d.attrs["description"] = "measured counts per channel, channel 0 first"
        measured = np.asarray(measured, dtype=bool)
        g.create_dataset("measured", data=measured, **checksummed(measured))
        g.create_dataset("priors", data=np.array(priors, dtype=object), dtype=_STR)


def check_input(path, *, run_text, counts):
    """True if the file's stored input equals this run text and these counts."""
    with h5py.File(path, "r") as f:
        if "input" not in f:
            return False
        stored = f["input/run"][()]
        stored = stored.decode() if isinstance(stored, bytes) else str(stored)
        same_counts = np.array_equal(f["input/spectrum"][()], np.asarray(counts, dtype=float))
        return stored == run_text and same_counts


def summarise(draws):
    """Median, mean, sd and 68 %/95 % central intervals of each column of ``draws``."""
    draws = np.asarray(draws, dtype=float)
    with warnings.catch_warnings():
        # a quantity with no value (thickness without a mass density) summarises to NaN
        warnings.simplefilter("ignore", RuntimeWarning)
        q = np.nanquantile(draws, [0.5, 0.16, 0.84, 0.025, 0.975], axis=0) if draws.size else \
            np.full((5, draws.shape[1]), np.nan)
        mean = np.nanmean(draws, axis=0)
        sd = np.nanstd(draws, axis=0, ddof=1)
    return dict(median=q[0], mean=mean, sd=sd, low68=q[1], high68=q[2], low95=q[3], high95=q[4])


def _write_tree(group, tree):
    """Write a nested dict: dict -> group; (array, attrs) or array -> dataset; '@attrs' -> attrs."""
    for key, value in tree.items():
        if key == "@attrs":
            for k, v in value.items():
                group.attrs[k] = v
            continue
        if isinstance(value, dict):
            _write_tree(group.create_group(key), value)
            continue
        attrs = {}
        if isinstance(value, tuple):
            value, attrs = value
        arr = np.asarray(value)
        if arr.dtype.kind in ("U", "O"):
            d = group.create_dataset(key, data=arr.astype(object), dtype=_STR)
        else:
            d = group.create_dataset(key, data=arr, **checksummed(arr))
        for k, v in attrs.items():
            d.attrs[k] = v


def write_groups(path, groups: dict):
    """Write final groups under /_staging, then swap each into place."""
    with h5py.File(path, "a") as f:
        if "_staging" in f:
            del f["_staging"]
        stage = f.create_group("_staging")
        for name, tree in groups.items():
            _write_tree(stage.create_group(name), tree)
        f.flush()
        for name in groups:
            if name in f:
                del f[name]
            f.move(f"_staging/{name}", name)
        del f["_staging"]


# ----------------------------------------------------------------------------------------------
@dataclass
class Result:
    """A result file's content as plain arrays and dicts (for reports and scripts).

    Attributes
    ----------
    path : str
    attrs : dict
        Root attributes (program, version, seed, command, times, status).
    names, units : list of str
        Free parameters.
    samples : ndarray (draws, parameters) or None
    summary : dict name -> dict(median, mean, sd, low68, high68, low95, high95, unit)
    derived : dict name -> ndarray of draws
    derived_units : dict name -> str
    profile : dict name -> ndarray (``depth``, ``depth_nm``, ``<species>``, ``<species>_map``)
    spectrum : dict name -> ndarray (``channel``, ``counts``, ``predictive``, ...)
    diagnostics : dict
    run_text : str
    """

    path: str
    attrs: dict = field(default_factory=dict)
    names: list = field(default_factory=list)
    units: list = field(default_factory=list)
    samples: np.ndarray | None = None
    summary: dict = field(default_factory=dict)
    derived: dict = field(default_factory=dict)
    derived_units: dict = field(default_factory=dict)
    profile: dict = field(default_factory=dict)
    spectrum: dict = field(default_factory=dict)
    diagnostics: dict = field(default_factory=dict)
    run_text: str = ""

    @property
    def converged(self) -> bool:
        return bool(self.diagnostics.get("converged", False))

    def interval(self, name: str, level: int = 68) -> tuple[float, float, float]:
        """(median, low, high) of a parameter or derived quantity, ``level`` 68 or 95."""
        s = self.summary[name]
        return s["median"], s[f"low{level}"], s[f"high{level}"]


def _text(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.ndarray):
        return [_text(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [_text(v) for v in value]
    return value


def read_result(path) -> Result:
    """Read a result file into a :class:`Result`; parts missing from the file stay empty.

    A file that is not HDF5, is cut short or has damaged parts raises
    :class:`forward.InputError` naming the file and what HDF5 reported; nothing is returned
    half-read.
    """
    from forward import InputError

    path = str(path)
    if not Path(path).exists():
        raise InputError("result file not found", where=path)
    if Path(path).is_dir():
        raise InputError("this is a folder, not a result file", where=path)
    try:
        return _read_result(path)
    except InputError:
        raise
    except (OSError, KeyError, ValueError, TypeError, RuntimeError, IndexError) as exc:
        raise unreadable(exc, path) from exc


def damaged_message(exc) -> str:
    """One line saying a result file cannot be read, with HDF5's own reason."""
    reason = " ".join(str(exc).split()) or type(exc).__name__
    return (f"damaged or not a result file (HDF5 says: {reason}); re-run the inversion "
            "with --force, or restore the file from a copy")


#: seconds a reader retries while a writer holds HDF5's own file lock (a writer keeps the file
#: open only for the moment of writing one step)
READ_LOCK_WAIT_S = 5.0


def open_for_reading(path, wait_s: float = READ_LOCK_WAIT_S):
    """``h5py.File(path, "r")``, retried for ``wait_s`` seconds while another process has
    the file open for writing; then the lock error is raised (see :func:`unreadable`)."""
    from ._outputs import is_lock_error

    deadline = time.monotonic() + wait_s
    while True:
        try:
            return h5py.File(path, "r")
        except OSError as exc:
            if not is_lock_error(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.05)


def unreadable(exc, path):
    """The :class:`forward.InputError` for a result file that could not be read: "busy" when
    another process holds it, "damaged" otherwise."""
    from forward import InputError

    from ._outputs import is_lock_error, writer_pid

    if is_lock_error(exc):
        pid = writer_pid(path)
        who = (f"sondage process {pid} is writing it" if pid is not None and pid > 0
               else "another program has it open for writing")
        return InputError(f"busy: {who}; try again when it has finished or closed the file",
                          where=str(path))
    return InputError(damaged_message(exc), where=str(path))


def check_finished(path, attrs) -> None:
    """Refuse a result file whose inversion is still writing it or stopped before finishing."""
    from forward import InputError

    from ._outputs import writer_pid

    status = attrs.get("status", "")
    status = status.decode() if isinstance(status, bytes) else str(status)
    if status != "running":
        return
    pid = writer_pid(path)
    if pid is not None:
        who = f"sondage process {pid}" if pid > 0 else "another sondage process"
        raise InputError(f"busy: {who} is still writing this result file; wait for it to "
                         "finish", where=str(path))
    raise InputError("the inversion writing this file stopped before it finished (status "
                     "'running', no process writing it); continue it with sondage invert ... "
                     "--resume, then try again", where=str(path))


def _read_result(path: str) -> Result:
    res = Result(path=path)
    with open_for_reading(path) as f:
        res.attrs = {k: _text(v) for k, v in f.attrs.items()}
        if "input/run" in f:
            res.run_text = _text(f["input/run"][()])
        if "posterior/samples" in f:
            d = f["posterior/samples"]
            res.samples = d[()]
            res.names = _text(d.attrs.get("names", []))
            res.units = _text(d.attrs.get("units", []))
        if "posterior/summary" in f:
            g = f["posterior/summary"]
            names = _text(g["names"][()])
            units = _text(g["units"][()]) if "units" in g else [""] * len(names)
            cols = [k for k in ("median", "mean", "sd", "low68", "high68", "low95", "high95")
                    if k in g]
            values = {k: g[k][()] for k in cols}
            for i, name in enumerate(names):
                res.summary[name] = {k: float(values[k][i]) for k in cols}
                res.summary[name]["unit"] = units[i]
        if "derived" in f:
            for name, d in f["derived"].items():
                if isinstance(d, h5py.Dataset):
                    res.derived[name] = d[()]
                    res.derived_units[name] = _text(d.attrs.get("unit", ""))
        for key, target in (("profile", res.profile), ("spectrum", res.spectrum)):
            if key in f:
                f[key].visititems(lambda n, obj, t=target: t.__setitem__(n, obj[()])
                                  if isinstance(obj, h5py.Dataset) else None)
        if "diagnostics" in f:
            g = f["diagnostics"]
            res.diagnostics = {k: _text(v) for k, v in g.attrs.items()}
            for name, d in g.items():
                res.diagnostics[name] = _text(d[()])
        elif MCMC_GROUP in f:
            res.diagnostics = {"steps": int(f[MCMC_GROUP].attrs.get("iteration", 0)),
                               "converged": False}
    return res
