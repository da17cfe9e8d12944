"""Reports from a result file: figures, summary.md and summary.csv.

:func:`read_report_data` reads everything a report shows from one HDF5 result file into a plain
:class:`ReportData` (numpy arrays and dicts), tolerating optional fields that an older or shorter
run did not write.  :func:`build_report` draws the figures and writes the summaries.

Every number in the summaries comes from the file: medians and central intervals from
``/posterior/summary`` where the file has them, otherwise computed here from the stored draws
(``/posterior/samples`` and ``/derived``) with the same definition (central intervals between the
2.5/97.5 % and 16/84 % quantiles).
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from forward import InputError

__all__ = [
    "ReportData",
    "Quantity",
    "read_report_data",
    "summarise_draws",
    "build_report",
    "write_report",
    "format_summary_text",
    "PROFILE_QUANTILES",
    "SUMMARY_COLUMNS",
]

#: The quantiles (percent) stored for each profile and predictive band, lowest first.
PROFILE_QUANTILES = (2.5, 16.0, 50.0, 84.0, 97.5)

#: Columns of summary.csv, in order.
SUMMARY_COLUMNS = (
    "quantity", "kind", "unit", "median", "mean", "sd",
    "lower_68", "upper_68", "lower_95", "upper_95",
    "autocorr_time_steps", "effective_sample_size", "prior",
)

_STAT_ALIASES = {
    "median": "median", "mean": "mean", "sd": "sd", "std": "sd",
    "low68": "lower_68", "high68": "upper_68", "low95": "lower_95", "high95": "upper_95",
    "lower_68": "lower_68", "upper_68": "upper_68", "lower_95": "lower_95",
    "upper_95": "upper_95",
}
_STAT_KEYS = ("median", "mean", "sd", "lower_68", "upper_68", "lower_95", "upper_95")
_PRIOR_LINE = re.compile(r"^\s*(?P<name>[^\[\]:]+?)\s*\[(?P<unit>[^\]]*)\]\s*:\s*(?P<prior>.*)$")


@dataclass
class Quantity:
    """One reported quantity: a sampled parameter or a derived quantity, with its summary.

    Attributes
    ----------
    name : str
        Name as stored in the result file.
    kind : str
        ``"parameter"`` or ``"derived"``.
    unit : str
        Unit text ("" for dimensionless).
    stats : dict of str to float
        ``median``, ``mean``, ``sd``, ``lower_68``, ``upper_68``, ``lower_95``, ``upper_95``;
        for parameters also ``autocorr_time_steps`` and ``effective_sample_size`` when the file
        has diagnostics.
    prior : str
        The prior as the file describes it ("" when the file does not say).
    draws : numpy.ndarray or None
        Posterior draws, when the file stores them.
    note : str
        The file's note on this quantity (e.g. why it is NaN).
    """

    name: str
    kind: str
    unit: str
    stats: dict
    prior: str = ""
    draws: np.ndarray | None = None
    note: str = ""


@dataclass
class ReportData:
    """Everything a report shows, read from one result file.  Optional parts are None or empty."""

    path: Path
    provenance: dict = field(default_factory=dict)
    run_text: str = ""
    quantities: list = field(default_factory=list)  # list[Quantity], parameters first
    parameter_names: list = field(default_factory=list)
    samples: np.ndarray | None = None  # draws x parameters
    report_notes: list = field(default_factory=list)
    depth_1e15: np.ndarray | None = None
    depth_nm: np.ndarray | None = None
    profile_bands: dict = field(default_factory=dict)  # species -> (5, slices)
    profile_map: dict = field(default_factory=dict)  # species -> (slices,)
    channel: np.ndarray | None = None
    counts: np.ndarray | None = None
    predictive: np.ndarray | None = None  # (5, channels)
    model_median: np.ndarray | None = None  # median expected counts (no noise)
    window: np.ndarray | None = None  # bool per channel: fitted
    species_spectra: dict = field(default_factory=dict)  # species -> (channels,)
    channel_energy_keV: np.ndarray | None = None
    calibration: dict = field(default_factory=dict)  # offset_keV, keV_per_channel, quadratic_keV
    calibration_source: str = ""
    chain: np.ndarray | None = None  # steps x walkers x parameters
    log_prob: np.ndarray | None = None  # steps x walkers
    diagnostics: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)

    def quantity(self, name: str, kind: str | None = None) -> Quantity:
        """The first :class:`Quantity` called ``name`` (of ``kind``, if given); KeyError if none."""
        for q in self.quantities:
            if q.name == name and (kind is None or q.kind == kind):
                return q
        raise KeyError(name)

    @property
    def converged(self) -> bool | None:
        """True or False as the file's diagnostics say; None when the file does not say."""
        value = self.diagnostics.get("converged")
        if value is None:
            return None
        return bool(np.asarray(value).all())


# --------------------------------------------------------------------------------------------
# reading


def _text(value) -> str:
    """An HDF5 attribute or scalar dataset value as text."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        if value.shape == ():
            return _text(value[()])
        return ", ".join(_text(v) for v in value.ravel())
    if isinstance(value, np.generic):
        return _text(value.item())
    return str(value)


def _strings(value) -> list[str]:
    """A list-of-strings attribute or dataset (array of strings, or JSON list text)."""
    if value is None:
        return []
    if isinstance(value, (bytes, str)):
        text = _text(value)
        try:
            loaded = json.loads(text)
        except ValueError:
            return [text]
        return [str(v) for v in loaded] if isinstance(loaded, list) else [text]
    return [_text(v) for v in np.asarray(value).ravel()]


def _plain(value):
    """An HDF5 attribute value as a plain Python object (str, float, int, bool, list, array)."""
    if isinstance(value, (bytes, str)):
        return _text(value)
    arr = np.asarray(value)
    if arr.dtype.kind in "SOU":
        return _strings(arr) if arr.ndim else _text(arr[()])
    if arr.ndim == 0:
        return arr.item()
    return arr


def unit_from_name(name: str) -> str:
    """The unit implied by a name's suffix (our naming rules), or "" when none is implied."""
    suffixes = (("_1e15", "1e15 atoms/cm2"), ("_nm", "nm"), ("_keV2", "keV^2"),
                ("_keV", "keV"), ("_deg", "deg"), ("_msr", "msr"), ("_uC", "uC"),
                ("_g_cm3", "g/cm3"))
    for suffix, unit in suffixes:
        if name.endswith(suffix):
            return unit
    return ""


def summarise_draws(draws) -> dict:
    """Median, mean, sd and central 68 % and 95 % intervals of one quantity's draws.

    Parameters
    ----------
    draws : array_like
        Posterior draws of one scalar quantity (any shape; flattened; NaN ignored).

    Returns
    -------
    dict
        ``median``, ``mean``, ``sd`` (ddof=1), ``lower_68``, ``upper_68`` (16 and 84 %
        quantiles), ``lower_95``, ``upper_95`` (2.5 and 97.5 % quantiles), all floats; NaN
        when no draw is finite.
    """
    x = np.asarray(draws, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {k: math.nan for k in _STAT_KEYS}
    q = np.quantile(x, [p / 100.0 for p in PROFILE_QUANTILES])
    return {
        "median": float(q[2]), "mean": float(x.mean()),
        "sd": float(x.std(ddof=1)) if x.size > 1 else 0.0,
        "lower_68": float(q[1]), "upper_68": float(q[3]),
        "lower_95": float(q[0]), "upper_95": float(q[4]),
    }


def _read_summary(group) -> list[tuple[str, str, dict]]:
    """``/posterior/summary`` as rows (name, unit, stats), in the file's order.

    The store writes ``names``, ``units`` and one dataset per statistic (``median``, ``mean``,
    ``sd``, ``low68``, ``high68``, ``low95``, ``high95``); a name may appear twice (a parameter
    and the derived quantity of the same name), hence rows rather than a dict.
    """
    import h5py

    if not isinstance(group, h5py.Group) or "names" not in group:
        return []
    names = _strings(group["names"][()])
    units = _strings(group["units"][()]) if "units" in group else [""] * len(names)
    if len(units) != len(names):
        units = [""] * len(names)
    columns = {}
    for key in group:
        if key.lower() in _STAT_ALIASES:
            values = np.asarray(group[key][()], dtype=float).ravel()
            if values.size == len(names):
                columns[_STAT_ALIASES[key.lower()]] = values
    return [(name, units[i], {k: float(v[i]) for k, v in columns.items()})
            for i, name in enumerate(names)]


def _read_priors(f) -> dict[str, str]:
    """Prior of each parameter as text: lines ``name [unit]: prior`` in the file."""
    for key in ("posterior/priors", "input/priors"):
        if key in f:
            priors = {}
            for line in _strings(f[key][()]):
                m = _PRIOR_LINE.match(line)
                if m:
                    priors[m["name"]] = m["prior"].strip()
            if priors:
                return priors
    return {}


def _sha256(data: bytes) -> str:
    return "sha256:" + hashlib.sha256(data).hexdigest()


def read_report_data(path) -> ReportData:
    """Read what a report needs from a result file.

    Parameters
    ----------
    path : str or pathlib.Path
        An HDF5 result file written by ``sondage invert``.

    Returns
    -------
    ReportData

    Raises
    ------
    forward.InputError
        When the file is missing, is not HDF5, is damaged, or has no ``/posterior/samples``.
    """
    import h5py

    path = Path(path)
    where = str(path)
    if not path.exists():
        raise InputError("result file not found; give the path of an HDF5 result file "
                         "written by 'sondage invert'", where=where)
    if path.is_dir():
        raise InputError("this is a folder; give the path of an HDF5 result file", where=where)
    from ._outputs import is_lock_error
    from ._store import check_finished, open_for_reading, unreadable

    try:
        f = open_for_reading(path)
    except OSError as exc:
        if is_lock_error(exc):
            raise unreadable(exc, path) from None
        raise InputError("not a readable HDF5 file (damaged, truncated or of another kind); "
                         "give a result file written by 'sondage invert'", where=where) from None
    try:
        with f:
            check_finished(path, dict(f.attrs))
            return _read_open_file(f, path)
    except InputError:
        raise
    except (OSError, KeyError, ValueError, TypeError, IndexError) as exc:
        first = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"result file is damaged or incomplete ({first}); write it again "
                         "with 'sondage invert'", where=where) from None


def _read_open_file(f, path: Path) -> ReportData:
    import h5py

    where = str(path)
    data = ReportData(path=path)
    if "posterior/samples" not in f:
        status = _text(f.attrs.get("status", "")) if "status" in f.attrs else ""
        hint = f" (the file's status is {status!r})" if status else ""
        raise InputError(f"no posterior draws in this file{hint}; a report needs "
                         "/posterior/samples, written when a run finishes or is interrupted",
                         where=f"{where}: /posterior/samples")

    # provenance: root attributes, plus fingerprints of the inputs stored in the file
    data.provenance = {k: _plain(v) for k, v in f.attrs.items()}
    hashes = {}
    if "input/run" in f:
        data.run_text = _text(f["input/run"][()])
        hashes["run file text stored in the result"] = _sha256(data.run_text.encode("utf-8"))
    if "input/spectrum" in f:
        counts = np.ascontiguousarray(f["input/spectrum"][()], dtype="<f8")
        hashes["spectrum counts stored in the result (float64, little-endian)"] = \
            _sha256(counts.tobytes())
    data.provenance["_input_hashes"] = hashes

    samples_ds = f["posterior/samples"]
    samples = np.asarray(samples_ds[()], dtype=float)
    if samples.ndim == 1:
        samples = samples[:, None]
    names = _strings(samples_ds.attrs.get("names"))
    if len(names) != samples.shape[1]:
        names = [f"parameter_{i}" for i in range(samples.shape[1])]
    units = _strings(samples_ds.attrs.get("units"))
    if len(units) != len(names):
        units = [unit_from_name(n) for n in names]
    data.samples = samples
    data.parameter_names = names
    priors = _read_priors(f)
    rows = _read_summary(f["posterior/summary"]) if "posterior/summary" in f else []

    # parameters: the first rows of the summary, when they name the parameters in order
    param_rows = rows[:len(names)] if [r[0] for r in rows[:len(names)]] == names else []
    derived_rows = rows[len(param_rows):]
    for i, name in enumerate(names):
        stats = summarise_draws(samples[:, i])
        if param_rows:
            stats.update(param_rows[i][2])
        data.quantities.append(Quantity(name, "parameter", units[i], stats,
                                        priors.get(name, ""), samples[:, i]))

    # derived quantities: in the summary's order, then any stored draws the summary lacks
    stored = {}
    if "derived" in f:
        for name, ds in f["derived"].items():
            if isinstance(ds, h5py.Dataset) and ds.dtype.kind in "fiu":
                stored[name] = ds
    order = [r[0] for r in derived_rows] + [n for n in stored if n not in
                                           {r[0] for r in derived_rows}]
    derived_summary = {r[0]: (r[1], r[2]) for r in derived_rows}
    for name in order:
        unit, summary_stats = derived_summary.get(name, (unit_from_name(name), {}))
        ds = stored.get(name)
        if ds is None:  # summarised but without stored draws
            full = {k: summary_stats.get(k, math.nan) for k in _STAT_KEYS}
            data.quantities.append(Quantity(name, "derived", unit, full))
            continue
        draws = np.asarray(ds[()], dtype=float).ravel()
        unit_attr = ds.attrs.get("unit", ds.attrs.get("units"))
        if unit_attr is not None:
            unit = _text(unit_attr)
        stats = summarise_draws(draws)
        stats.update(summary_stats)
        note = _text(ds.attrs["note"]) if "note" in ds.attrs else ""
        data.quantities.append(Quantity(name, "derived", unit, stats, "", draws, note))

    if "profile" in f:
        prof = f["profile"]
        if "depth" in prof:
            data.depth_1e15 = np.asarray(prof["depth"][()], dtype=float)
        if "depth_nm" in prof:
            data.depth_nm = np.asarray(prof["depth_nm"][()], dtype=float)
        for key, ds in prof.items():
            if not isinstance(ds, h5py.Dataset) or key in ("depth", "depth_nm"):
                continue
            arr = np.asarray(ds[()], dtype=float)
            if key.endswith("_map"):
                data.profile_map[key[:-4]] = arr
            elif arr.ndim == 2 and arr.shape[0] == len(PROFILE_QUANTILES):
                data.profile_bands[key] = arr

    spec = f["spectrum"] if "spectrum" in f else {}
    if "counts" in spec:
        data.counts = np.asarray(spec["counts"][()], dtype=float)
    elif "input/spectrum" in f:
        data.counts = np.asarray(f["input/spectrum"][()], dtype=float)
    if data.counts is not None:
        data.channel = np.asarray(spec["channel"][()], dtype=float) if "channel" in spec else \
            np.arange(data.counts.size, dtype=float)
    if "predictive" in spec:
        data.predictive = np.asarray(spec["predictive"][()], dtype=float)
    if "model_median" in spec:
        data.model_median = np.asarray(spec["model_median"][()], dtype=float)
    if "window" in spec:
        data.window = np.asarray(spec["window"][()], dtype=bool)
    if "energy_keV" in spec:
        data.channel_energy_keV = np.asarray(spec["energy_keV"][()], dtype=float)
    if "species" in spec and isinstance(spec["species"], h5py.Group):
        for key, ds in spec["species"].items():
            data.species_spectra[key] = np.asarray(ds[()], dtype=float)
    data.calibration, data.calibration_source = _calibration(data)

    if "mcmc" in f and "chain" in f["mcmc"]:
        g = f["mcmc"]
        steps = int(g.attrs.get("iteration", g["chain"].shape[0]))
        data.chain = np.asarray(g["chain"][:steps], dtype=float)
        if "log_prob" in g:
            data.log_prob = np.asarray(g["log_prob"][:steps], dtype=float)

    if "diagnostics" in f:
        g = f["diagnostics"]
        diag = {k: _plain(v) for k, v in g.attrs.items()}
        for key, ds in g.items():
            if isinstance(ds, h5py.Dataset):
                value = ds[()]
                diag[key] = _plain(value) if np.asarray(value).dtype.kind in "SOU" else \
                    np.asarray(value)
        data.diagnostics = diag
        data.warnings = [w for w in _strings(diag.get("warnings"))
                         if w.strip() and w.strip().lower() != "none"]
        tau = _per_parameter(diag, ("autocorr_time",), len(names))
        ess = _per_parameter(diag, ("ess",), len(names))
        for i, q in enumerate(data.quantities[:len(names)]):
            if tau is not None:
                q.stats["autocorr_time_steps"] = float(tau[i])
            if ess is not None:
                q.stats["effective_sample_size"] = float(ess[i])
    return data


def _calibration(data: ReportData) -> tuple[dict, str]:
    """Channel-to-energy calibration for the energy axis, and where it came from.

    Sampled ``gain_keV`` / ``offset_keV`` parameters give their posterior medians; otherwise the
    run file's ``[calibration]`` table (``keV_per_channel``, ``offset_keV``, ``quadratic_keV``).
    """
    import tomllib

    table = {}
    if data.run_text:
        try:
            table = tomllib.loads(data.run_text).get("calibration", {})
        except tomllib.TOMLDecodeError:
            table = {}
    if not isinstance(table, dict):
        table = {}
    medians = {q.name: q.stats["median"] for q in data.quantities if q.kind == "parameter"}
    gain = medians.get("gain_keV", table.get("keV_per_channel"))
    if gain is None:
        return {}, ""
    try:
        cal = {"offset_keV": float(medians.get("offset_keV", table.get("offset_keV", 0.0))),
               "keV_per_channel": float(gain),
               "quadratic_keV": float(table.get("quadratic_keV", 0.0))}
    except (TypeError, ValueError):
        return {}, ""
    sampled = [n for n in ("gain_keV", "offset_keV") if n in medians]
    source = ("posterior median of " + " and ".join(sampled) + ", the rest from the run file"
              if sampled else "the run file's [calibration]")
    return cal, source


def _per_parameter(diag: dict, keys, n: int):
    for key in keys:
        if key in diag:
            arr = np.asarray(diag[key], dtype=float).ravel()
            if arr.size == n:
                return arr
    return None


# --------------------------------------------------------------------------------------------
# summaries


def _fmt(value) -> str:
    """A number for the markdown table and the printed summary: 4 significant digits."""
    if value is None:
        return "-"
    value = float(value)
    if not math.isfinite(value):
        return "n/a"
    return f"{value:.4g}"


def _convergence_verdict(data: ReportData) -> tuple[bool, str]:
    """(converged, one-line reason) from the file's diagnostics."""
    diag = data.diagnostics
    if not diag:
        return False, "the file has no convergence diagnostics; treat every interval as unverified"
    tau = _per_parameter(diag, ("autocorr_time",), len(data.parameter_names))
    steps = diag.get("steps")
    multiple = float(diag.get("tau_multiple", 50.0))
    detail = ""
    if tau is not None and steps is not None and np.all(np.isfinite(tau)) and np.max(tau) > 0:
        n = int(np.asarray(steps).item())
        ratio = n / float(np.max(tau))
        detail = (f" (chain of {n} steps = {ratio:.1f} times the longest autocorrelation time, "
                  f"{float(np.max(tau)):.3g} steps; {multiple:g} times is asked for)")
    if diag.get("interrupted") in (True, 1) or bool(np.asarray(diag.get("interrupted",
                                                                        False)).any()):
        detail += "; the run was interrupted"
    if data.converged is False:
        return False, "the sampler did not converge" + detail
    if data.converged is None:
        return False, "the file does not say whether the sampler converged" + detail
    return True, "converged" + detail


def format_summary_text(data: ReportData, *, compact: bool = False) -> str:
    """The plain-text summary the command prints: verdict, then one line per quantity.

    Parameters
    ----------
    data : ReportData
        What was read from the result file.
    compact : bool, optional
        Leave out derived quantities that repeat a parameter (same name, same draws: a layer's
        areal density stored again under /derived), so the printed list stays short.
    """
    ok, reason = _convergence_verdict(data)
    lines = []
    if not ok:
        lines.append(f"WARNING: NOT CONVERGED: {reason}.")
    lines.append(f"{data.path.name}: median [68 % interval] [95 % interval]")
    shown = [q for q in data.quantities if not (compact and _repeats_parameter(data, q))]
    width = max((len(q.name) for q in shown), default=8)
    for q in shown:
        s = q.stats
        lines.append(f"  {q.name:<{width}}  {_fmt(s['median']):>9}  "
                     f"[{_fmt(s['lower_68'])}, {_fmt(s['upper_68'])}]  "
                     f"[{_fmt(s['lower_95'])}, {_fmt(s['upper_95'])}]  {q.unit}".rstrip())
    for w in data.warnings:
        lines.append(f"warning: {w}")
    if ok:
        lines.append(f"convergence: {reason}")
    return "\n".join(lines)


def _repeats_parameter(data: ReportData, q: Quantity) -> bool:
    """True for a derived quantity stored under a parameter's name with the same draws."""
    if q.kind != "derived" or q.draws is None:
        return False
    return any(p.kind == "parameter" and p.name == q.name and p.draws is not None
               and np.array_equal(p.draws, q.draws) for p in data.quantities)


def write_summary_csv(data: ReportData, path: Path) -> Path:
    """Write summary.csv: one row per quantity, columns :data:`SUMMARY_COLUMNS`.

    Numbers are written in full precision (``repr``); a missing or NaN value is an empty cell.
    """
    with Path(path).open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(SUMMARY_COLUMNS)
        for q in data.quantities:
            s = q.stats
            row = [q.name, q.kind, q.unit]
            for key in SUMMARY_COLUMNS[3:-1]:
                value = s.get(key)
                row.append("" if value is None or not math.isfinite(value) else repr(float(value)))
            row.append(q.prior)
            writer.writerow(row)
    return Path(path)


def _provenance_lines(data: ReportData) -> list[str]:
    prov = {k: v for k, v in data.provenance.items() if not k.startswith("_")}
    lines = []
    preferred = ("program", "version", "program_version", "emcee_version", "seed", "command",
                 "started", "resumed", "finished", "status")
    for key in preferred:
        if key in prov:
            lines.append(f"- {key.replace('_', ' ')}: `{_text(prov[key])}`")
    for key, value in prov.items():
        if key not in preferred:
            lines.append(f"- {key.replace('_', ' ')}: `{_text(value)}`")
    hashes = dict(data.provenance.get("_input_hashes", {}))
    for key, value in prov.items():
        if "hash" in key.lower():
            hashes[key] = _text(value)
    if hashes:
        lines.append("- input fingerprints (compare with `sha256sum` of your run file; the "
                     "spectrum's is of its stored counts):")
        lines += [f"  - {k}: `{v}`" for k, v in hashes.items()]
    else:
        lines.append("- input fingerprints: not recorded")
    return lines


def write_summary_md(data: ReportData, path: Path, figures: dict[str, Path]) -> Path:
    """Write summary.md: convergence verdict first, then quantities, diagnostics, provenance."""
    ok, reason = _convergence_verdict(data)
    out = []
    if not ok:
        out += ["> **WARNING: NOT CONVERGED.** " + reason[0].upper() + reason[1:] + ".",
                "> The medians and intervals below are not yet trustworthy: continue the run "
                "(resume the same file with more steps) and make the report again.", ""]
    out += [f"# Posterior summary: {data.path.name}", ""]
    out += ["Medians with central credible intervals: the 68 % interval lies between the 16 % "
            "and 84 % posterior quantiles, the 95 % interval between the 2.5 % and 97.5 % "
            "quantiles.", ""]
    header = "| quantity | unit | median | 68 % interval | 95 % interval | mean | sd | prior |"
    rule = "|---|---|---:|---|---|---:|---:|---|"
    for kind, title in (("parameter", "Sampled parameters"), ("derived", "Derived quantities")):
        rows = [q for q in data.quantities if q.kind == kind]
        if not rows:
            continue
        out += [f"## {title}", "", header, rule]
        for q in rows:
            s = q.stats
            prior = q.prior or ("(follows from the parameters)" if kind == "derived"
                                else "not recorded")
            out.append(f"| {q.name} | {q.unit or '-'} | {_fmt(s['median'])} | "
                       f"[{_fmt(s['lower_68'])}, {_fmt(s['upper_68'])}] | "
                       f"[{_fmt(s['lower_95'])}, {_fmt(s['upper_95'])}] | {_fmt(s['mean'])} | "
                       f"{_fmt(s['sd'])} | {prior} |")
        out.append("")
        noted = [q for q in rows if q.note]
        if noted:
            out += [f"- {q.name}: {q.note}" for q in noted] + [""]

    out += ["## Sampler diagnostics", "", f"- verdict: {reason}"]
    diag = data.diagnostics
    if diag:
        for key in ("steps", "walkers", "discard", "thin", "tau_multiple"):
            if key in diag:
                label = {"discard": "burn-in discarded (steps)", "thin": "thinning (steps)",
                         "tau_multiple": "chain length asked for (autocorrelation times)"}
                out.append(f"- {label.get(key, key)}: {_text(diag[key])}")
        acc = diag.get("acceptance", diag.get("acceptance_fraction"))
        if acc is not None:
            acc = np.asarray(acc, dtype=float).ravel()
            out.append(f"- acceptance fraction: mean {acc.mean():.3f} "
                       f"(walkers from {acc.min():.3f} to {acc.max():.3f})")
        rows = [q for q in data.quantities if "autocorr_time_steps" in q.stats
                or "effective_sample_size" in q.stats]
        if rows:
            out += ["", "| parameter | autocorrelation time (steps) | effective sample size |",
                    "|---|---:|---:|"]
            for q in rows:
                out.append(f"| {q.name} | {_fmt(q.stats.get('autocorr_time_steps'))} | "
                           f"{_fmt(q.stats.get('effective_sample_size'))} |")
    out += ["", "## Warnings", ""]
    out += [f"- {w}" for w in data.warnings] or ["- none recorded"]
    if data.report_notes:
        out += ["", "## Notes on this report", ""] + [f"- {n}" for n in data.report_notes]
    out += ["", "## Provenance", ""] + _provenance_lines(data)
    if figures:
        out += ["", "## Figures", ""]
        for key, p in figures.items():
            if p.suffix == ".png":
                out.append(f"- {key}: [{p.name}]({p.name})")
    Path(path).write_text("\n".join(out) + "\n")
    return Path(path)


# --------------------------------------------------------------------------------------------
# the report


def build_report(result_path, out_dir=None, *, formats=("png", "svg")) -> dict[str, Path]:
    """Make every figure and summary for one result file.

    Parameters
    ----------
    result_path : str or pathlib.Path
        The HDF5 result file.
    out_dir : str or pathlib.Path, optional
        Folder for the outputs (created if needed); default ``<result stem>_report`` beside the
        result file.
    formats : tuple of str, optional
        Image formats for each figure, by file suffix; default PNG and SVG.

    Returns
    -------
    dict of str to pathlib.Path
        What was written, keyed ``"spectrum.png"``, ``"profile.svg"``, ..., ``"summary.md"``,
        ``"summary.csv"``.  A figure whose data the file lacks is left out (and said so in
        summary.md).

    Raises
    ------
    forward.InputError
        When the result file is missing, corrupt or has no posterior draws, or when an image
        format is not one matplotlib writes.
    """
    return write_report(read_report_data(result_path), out_dir, formats=formats)


def write_report(data: ReportData, out_dir=None, *, formats=("png", "svg")) -> dict[str, Path]:
    """Like :func:`build_report`, for a result already read with :func:`read_report_data`."""
    import matplotlib.pyplot as plt

    from . import _plots

    allowed = {"png", "svg", "pdf"}
    bad = [fmt for fmt in formats if fmt not in allowed]
    if bad or not formats:
        raise InputError(f"image format {bad[0] if bad else '(none)'!r} not supported; "
                         "use png, svg or pdf", where="report: formats")
    out = Path(out_dir) if out_dir is not None else \
        data.path.with_name(f"{data.path.stem}_report")
    if out.exists() and not out.is_dir():
        raise InputError("output path is a file; give a folder with -o", where=str(out))
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder ({exc.strerror}); give a writable "
                         "folder with -o", where=str(out)) from None

    written: dict[str, Path] = {}
    skipped: list[str] = []
    makers = (
        ("spectrum", _plots.plot_spectrum,
         data.counts is not None and data.predictive is not None),
        ("profile", _plots.plot_profile,
         bool(data.profile_bands) and data.depth_1e15 is not None),
        ("corner", _plots.plot_corner, data.samples is not None and data.samples.shape[0] > 1),
        ("convergence", _plots.plot_convergence,
         data.chain is not None and data.chain.shape[0] > 1),
    )
    for name, maker, available in makers:
        if not available:
            skipped.append(name)
            continue
        fig = maker(data)
        try:
            for fmt in formats:
                target = out / f"{name}.{fmt}"
                fig.savefig(target, format=fmt, dpi=150, bbox_inches="tight",
                            facecolor="white")
                written[f"{name}.{fmt}"] = target
        finally:
            plt.close(fig)
    if data.calibration_source and "spectrum" not in skipped:
        data.report_notes.append("energy axis of the spectrum figure: "
                                 + data.calibration_source)
    if data.window is not None and not data.window.all() and "spectrum" not in skipped:
        data.report_notes.append("spectrum residuals are shown only inside the fitted window "
                                 f"({int(data.window.sum())} of {data.window.size} channels)")
    if data.depth_nm is None and "profile" not in skipped:
        data.report_notes.append("the depth profile has no nm axis: the file gives no depth in "
                                 "nm (a layer without a density in the run file)")
    if skipped:
        data.report_notes.append("figures not drawn, as the file lacks their data: "
                                 + ", ".join(skipped))
    written["summary.csv"] = write_summary_csv(data, out / "summary.csv")
    written["summary.md"] = write_summary_md(data, out / "summary.md", written)
    return written
