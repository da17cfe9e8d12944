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
import json
import math
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

# Field names other writers might use for the same statistic -> our name.
_STAT_ALIASES = {
    "median": "median", "p50": "median", "q50": "median",
    "mean": "mean",
    "sd": "sd", "std": "sd", "stdev": "sd",
    "lower_68": "lower_68", "lo68": "lower_68", "q16": "lower_68", "p16": "lower_68",
    "upper_68": "upper_68", "hi68": "upper_68", "q84": "upper_68", "p84": "upper_68",
    "lower_95": "lower_95", "lo95": "lower_95", "q2.5": "lower_95", "p2.5": "lower_95",
    "q025": "lower_95",
    "upper_95": "upper_95", "hi95": "upper_95", "q97.5": "upper_95", "p97.5": "upper_95",
    "q975": "upper_95",
}
_INTERVAL_ALIASES = {"ci68": ("lower_68", "upper_68"), "interval_68": ("lower_68", "upper_68"),
                     "ci95": ("lower_95", "upper_95"), "interval_95": ("lower_95", "upper_95")}


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
        ``median``, ``mean``, ``sd``, ``lower_68``, ``upper_68``, ``lower_95``, ``upper_95``.
    prior : str
        The prior as the file describes it ("" when the file does not say).
    draws : numpy.ndarray or None
        Posterior draws, when the file stores them.
    """

    name: str
    kind: str
    unit: str
    stats: dict
    prior: str = ""
    draws: np.ndarray | None = None


@dataclass
class ReportData:
    """Everything a report shows, read from one result file.  Optional parts are None or empty."""

    path: Path
    provenance: dict = field(default_factory=dict)
    run_text: str = ""
    quantities: list = field(default_factory=list)  # list[Quantity], parameters first
    parameter_names: list = field(default_factory=list)
    samples: np.ndarray | None = None  # draws x parameters
    derived_notes: list = field(default_factory=list)
    report_notes: list = field(default_factory=list)
    depth_1e15: np.ndarray | None = None
    depth_nm: np.ndarray | None = None
    profile_bands: dict = field(default_factory=dict)  # species -> (5, slices)
    profile_map: dict = field(default_factory=dict)  # species -> (slices,)
    channel: np.ndarray | None = None
    counts: np.ndarray | None = None
    predictive: np.ndarray | None = None  # (5, channels)
    species_spectra: dict = field(default_factory=dict)  # species -> (channels,)
    channel_energy_keV: np.ndarray | None = None
    calibration: dict = field(default_factory=dict)  # offset_keV, keV_per_channel, quadratic_keV
    chain: np.ndarray | None = None  # steps x walkers x parameters
    log_prob: np.ndarray | None = None  # steps x walkers
    diagnostics: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)

    def quantity(self, name: str) -> Quantity:
        """The :class:`Quantity` called ``name``; KeyError if the file has none."""
        for q in self.quantities:
            if q.name == name:
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
    """A list-of-strings attribute (array, JSON text or comma-free single string)."""
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
    """An HDF5 attribute value as a plain Python object (str, float, int, bool, list)."""
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
    suffixes = (("_1e15", "1e15 atoms/cm2"), ("_nm", "nm"), ("_keV", "keV"), ("_deg", "deg"),
                ("_msr", "msr"), ("_uC", "uC"), ("_keV2", "keV^2"), ("_g_cm3", "g/cm3"))
    for suffix, unit in suffixes:
        if name.endswith(suffix):
            return unit
    return ""


def summarise_draws(draws) -> dict:
    """Median, mean, sd and central 68 % and 95 % intervals of one quantity's draws.

    Parameters
    ----------
    draws : array_like
        Posterior draws of one scalar quantity (any shape; flattened).

    Returns
    -------
    dict
        ``median``, ``mean``, ``sd`` (ddof=1), ``lower_68``, ``upper_68`` (16 and 84 %
        quantiles), ``lower_95``, ``upper_95`` (2.5 and 97.5 % quantiles), all floats.
    """
    x = np.asarray(draws, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {k: math.nan for k in ("median", "mean", "sd", "lower_68", "upper_68",
                                      "lower_95", "upper_95")}
    q = np.percentile(x, PROFILE_QUANTILES)
    return {
        "median": float(q[2]), "mean": float(x.mean()),
        "sd": float(x.std(ddof=1)) if x.size > 1 else 0.0,
        "lower_68": float(q[1]), "upper_68": float(q[3]),
        "lower_95": float(q[0]), "upper_95": float(q[4]),
    }


def _read_summary(node) -> dict[str, dict]:
    """``/posterior/summary`` as {quantity name: {statistic: value}}; tolerant of layouts.

    Accepted layouts: a structured dataset with a name field and one field per statistic; a
    group holding ``names`` and one dataset per statistic (``ci68``/``ci95`` as n x 2 allowed);
    a group holding one sub-group per quantity whose attributes are the statistics.
    """
    import h5py

    out: dict[str, dict] = {}
    if isinstance(node, h5py.Dataset) and node.dtype.names:
        table = node[()]
        name_field = next((f for f in ("name", "names", "quantity") if f in node.dtype.names), None)
        if name_field is None:
            return out
        for row in np.atleast_1d(table):
            stats = {}
            for f in node.dtype.names:
                key = _STAT_ALIASES.get(f.lower())
                if key:
                    stats[key] = float(row[f])
            out[_text(row[name_field])] = stats
        return out
    if not isinstance(node, h5py.Group):
        return out
    if "names" in node or "names" in node.attrs:
        names = _strings(node["names"][()] if "names" in node else node.attrs["names"])
        columns: dict[str, np.ndarray] = {}
        for key in node:
            if key == "names":
                continue
            data = np.asarray(node[key][()], dtype=float)
            low = key.lower()
            if low in _STAT_ALIASES:
                columns[_STAT_ALIASES[low]] = data.reshape(len(names))
            elif low in _INTERVAL_ALIASES:
                data = data.reshape(len(names), 2) if data.shape[0] == len(names) else data.T
                lo, hi = _INTERVAL_ALIASES[low]
                columns[lo], columns[hi] = data[:, 0], data[:, 1]
        for i, name in enumerate(names):
            out[name] = {k: float(v[i]) for k, v in columns.items()}
        return out
    for name, sub in node.items():
        stats = {}
        source = dict(sub.attrs) if isinstance(sub, h5py.Group) else {}
        if isinstance(sub, h5py.Group):
            for key in sub:
                source[key] = sub[key][()]
        for key, value in source.items():
            low = key.lower()
            if low in _STAT_ALIASES:
                stats[_STAT_ALIASES[low]] = float(np.asarray(value))
            elif low in _INTERVAL_ALIASES:
                lo, hi = _INTERVAL_ALIASES[low]
                stats[lo], stats[hi] = (float(v) for v in np.asarray(value).ravel()[:2])
        if stats:
            out[name] = stats
    return out


def _read_priors(f, names: list[str]) -> dict[str, str]:
    """Prior of each parameter as text, from wherever the file keeps it."""
    priors: dict[str, str] = {}
    samples = f["posterior/samples"]
    if "priors" in samples.attrs:
        texts = _strings(samples.attrs["priors"])
        if len(texts) == len(names):
            priors.update(zip(names, texts))
    node = f.get("posterior/priors")
    if node is not None:
        if hasattr(node, "attrs") and not hasattr(node, "shape"):
            for key, value in node.attrs.items():
                priors[key] = _text(value)
            for key in node:
                priors[key] = _text(node[key][()])
        else:
            texts = _strings(node[()])
            if len(texts) == len(names):
                priors.update(zip(names, texts))
    return priors


def _walk_datasets(group, prefix=""):
    import h5py

    for key, item in group.items():
        name = f"{prefix}{key}"
        if isinstance(item, h5py.Group):
            yield from _walk_datasets(item, prefix=f"{name}/")
        else:
            yield name, item


def read_report_data(path) -> ReportData:
    """Read what a report needs from a result file.

    Parameters
    ----------
    path : str or pathlib.Path
        An HDF5 result file written by the sampler.

    Returns
    -------
    ReportData

    Raises
    ------
    forward.InputError
        When the file is missing, is not HDF5, or has no ``/posterior/samples``.
    """
    import h5py

    path = Path(path)
    where = str(path)
    if not path.exists():
        raise InputError("result file not found; give the path of an HDF5 result file "
                         "written by the sampler", where=where)
    if path.is_dir():
        raise InputError("this is a folder; give the path of an HDF5 result file", where=where)
    try:
        f = h5py.File(path, "r")
    except OSError:
        raise InputError("not a readable HDF5 file (corrupt or of another kind); give a result "
                         "file written by the sampler", where=where) from None
    try:
        with f:
            return _read_open_file(f, path)
    except InputError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        first = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"result file is damaged or incomplete ({first}); write it again "
                         "with the sampler", where=where) from None


def _read_open_file(f, path: Path) -> ReportData:
    import h5py

    where = str(path)
    data = ReportData(path=path)
    if "posterior/samples" not in f:
        raise InputError("no posterior draws in this file; a report needs /posterior/samples, "
                         "written by a finished or resumed sampler run",
                         where=f"{where}: /posterior/samples")

    # provenance: root attributes, and the input file hashes wherever they are kept
    data.provenance = {k: _plain(v) for k, v in f.attrs.items()}
    if "input" in f:
        for key, value in f["input"].attrs.items():
            data.provenance.setdefault(f"input.{key}", _plain(value))
        if "run" in f["input"]:
            data.run_text = _text(f["input/run"][()])

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

    summary = _read_summary(f["posterior/summary"]) if "posterior/summary" in f else {}
    priors = _read_priors(f, names)

    for i, name in enumerate(names):
        stats = summarise_draws(samples[:, i])
        stats.update(summary.get(name, {}))
        data.quantities.append(Quantity(name, "parameter", units[i], stats,
                                        priors.get(name, ""), samples[:, i]))

    if "derived" in f:
        group = f["derived"]
        for key, value in group.attrs.items():
            if isinstance(value, (str, bytes)) or np.asarray(value).dtype.kind in "SOU":
                data.derived_notes.append(f"{key}: {_text(value)}")
        for name, ds in _walk_datasets(group):
            arr = np.asarray(ds[()])
            if arr.dtype.kind not in "fiu" or arr.size == 0:
                continue
            for key, value in ds.attrs.items():
                if key not in ("units", "unit", "label") and isinstance(value, (str, bytes)):
                    data.derived_notes.append(f"{name}: {_text(value)}")
            qname = name.replace("/", ".")
            unit = _text(ds.attrs.get("units", ds.attrs.get("unit", unit_from_name(name))))
            draws = arr.astype(float).ravel()
            stats = summarise_draws(draws)
            stats.update(summary.get(qname, summary.get(name, {})))
            data.quantities.append(Quantity(qname, "derived", unit, stats, "", draws))

    # derived quantities that exist only in the summary (no draws stored)
    known = {q.name for q in data.quantities} | {q.name.replace(".", "/") for q in data.quantities}
    for name, stats in summary.items():
        if name not in known and stats:
            full = {k: stats.get(k, math.nan) for k in summarise_draws([])}
            data.quantities.append(Quantity(name, "derived", unit_from_name(name), full))

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

    if "spectrum" in f:
        spec = f["spectrum"]
        if "counts" in spec:
            data.counts = np.asarray(spec["counts"][()], dtype=float)
        elif "input" in f and "spectrum" in f["input"]:
            data.counts = np.asarray(f["input/spectrum"][()], dtype=float)
        if "channel" in spec:
            data.channel = np.asarray(spec["channel"][()], dtype=float)
        elif data.counts is not None:
            data.channel = np.arange(data.counts.size, dtype=float)
        if "predictive" in spec:
            data.predictive = np.asarray(spec["predictive"][()], dtype=float)
        for key in ("energy_keV", "channel_energy_keV", "energy"):
            if key in spec:
                data.channel_energy_keV = np.asarray(spec[key][()], dtype=float)
                break
        species_group = next((spec[k] for k in ("species", "by_species", "partial")
                              if k in spec and isinstance(spec[k], h5py.Group)), None)
        if species_group is not None:
            for key, ds in species_group.items():
                data.species_spectra[key] = np.asarray(ds[()], dtype=float)
        for key, ds in spec.items():
            if isinstance(ds, h5py.Dataset) and key.endswith("_model"):
                data.species_spectra[key[:-6]] = np.asarray(ds[()], dtype=float)
        attrs = {k: _plain(v) for k, v in spec.attrs.items()}
        for group_attrs in (attrs, {k: _plain(v) for k, v in
                                    (spec["calibration"].attrs.items()
                                     if "calibration" in spec else ())}):
            gain = next((group_attrs[k] for k in ("keV_per_channel", "gain_keV_per_channel")
                         if k in group_attrs), None)
            if gain is not None:
                data.calibration = {
                    "offset_keV": float(group_attrs.get("offset_keV", 0.0)),
                    "keV_per_channel": float(gain),
                    "quadratic_keV": float(group_attrs.get("quadratic_keV", 0.0)),
                }
    elif "input" in f and "spectrum" in f["input"]:
        data.counts = np.asarray(f["input/spectrum"][()], dtype=float)
        data.channel = np.arange(data.counts.size, dtype=float)

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
        data.warnings = [w for w in _strings(diag.get("warnings")) if w.strip()]

    if data.diagnostics:
        tau = _per_parameter(data.diagnostics, ("autocorr_time", "tau", "autocorrelation_time"),
                             len(names))
        ess = _per_parameter(data.diagnostics, ("ess", "effective_sample_size"), len(names))
        for i, q in enumerate(data.quantities[:len(names)]):
            if tau is not None:
                q.stats["autocorr_time_steps"] = float(tau[i])
            if ess is not None:
                q.stats["effective_sample_size"] = float(ess[i])
    return data


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
    """A number for the markdown table: 4 significant digits, blank for missing."""
    if value is None:
        return ""
    value = float(value)
    if not math.isfinite(value):
        return ""
    return f"{value:.4g}"


def _convergence_verdict(data: ReportData) -> tuple[bool, str]:
    """(converged, one-line reason) from the file's diagnostics."""
    diag = data.diagnostics
    if not diag:
        return False, "the file has no convergence diagnostics; treat every interval as unverified"
    tau = _per_parameter(diag, ("autocorr_time", "tau", "autocorrelation_time"),
                         len(data.parameter_names))
    steps = diag.get("steps")
    detail = ""
    if tau is not None and steps is not None and np.all(np.isfinite(tau)):
        ratio = float(np.asarray(steps).item()) / float(np.max(tau))
        detail = (f" (chain length {int(np.asarray(steps).item())} steps = {ratio:.1f} times "
                  f"the longest autocorrelation time {float(np.max(tau)):.3g} steps; "
                  "at least 50 is asked for)")
    if data.converged is False:
        return False, "the sampler did not converge" + detail
    if data.converged is None:
        return False, "the file does not say whether the sampler converged" + detail
    return True, "converged" + detail


def format_summary_text(data: ReportData) -> str:
    """The short plain-text summary the command prints (a few lines)."""
    ok, reason = _convergence_verdict(data)
    lines = []
    if not ok:
        lines.append(f"WARNING: NOT CONVERGED: {reason}.")
    lines.append(f"result: {data.path}")
    width = max((len(q.name) for q in data.quantities), default=8)
    for q in data.quantities:
        s = q.stats
        unit = f" {q.unit}" if q.unit else ""
        lines.append(f"  {q.name:<{width}}  {_fmt(s['median'])}{unit}  "
                     f"68 %: [{_fmt(s['lower_68'])}, {_fmt(s['upper_68'])}]  "
                     f"95 %: [{_fmt(s['lower_95'])}, {_fmt(s['upper_95'])}]")
    for w in data.warnings:
        lines.append(f"warning: {w}")
    if ok:
        lines.append(f"convergence: {reason}")
    return "\n".join(lines)


def write_summary_csv(data: ReportData, path: Path) -> Path:
    """Write summary.csv: one row per quantity, columns :data:`SUMMARY_COLUMNS`."""
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
    prov = data.provenance
    lines = []
    preferred = ("program", "program_version", "version", "seed", "command", "started",
                 "start_time", "finished", "end_time")
    for key in preferred:
        if key in prov:
            lines.append(f"- {key.replace('_', ' ')}: `{_text(prov[key])}`")
    hashes = []
    for key, value in prov.items():
        if "hash" in key.lower() or "sha" in key.lower():
            text = _text(value)
            try:
                loaded = json.loads(text)
            except ValueError:
                loaded = None
            if isinstance(loaded, dict):
                hashes += [f"  - {k}: `{v}`" for k, v in loaded.items()]
            else:
                hashes.append(f"  - {key}: `{text}`")
    for key, value in prov.items():
        if key in preferred or "hash" in key.lower() or "sha" in key.lower():
            continue
        lines.append(f"- {key.replace('_', ' ')}: `{_text(value)}`")
    lines.append("- input file hashes:" if hashes else "- input file hashes: not recorded")
    lines += hashes
    return lines


def write_summary_md(data: ReportData, path: Path, figures: dict[str, Path]) -> Path:
    """Write summary.md: convergence verdict first, then quantities, diagnostics, provenance."""
    ok, reason = _convergence_verdict(data)
    out = []
    if not ok:
        out += ["> **WARNING: NOT CONVERGED.** " + reason[0].upper() + reason[1:] + ".",
                "> The medians and intervals below are not yet trustworthy: run the sampler "
                "longer (resume the same file) and make the report again.", ""]
    out += [f"# Posterior summary: {data.path.name}", ""]
    out += ["Medians with central credible intervals: the 68 % interval lies between the 16 % "
            "and 84 % posterior quantiles, the 95 % interval between the 2.5 % and 97.5 % "
            "quantiles.", ""]
    header = ("| quantity | unit | median | 68 % interval | 95 % interval | mean | sd | prior |")
    rule = "|---|---|---:|---|---|---:|---:|---|"
    for kind, title in (("parameter", "Sampled parameters"), ("derived", "Derived quantities")):
        rows = [q for q in data.quantities if q.kind == kind]
        if not rows:
            continue
        out += [f"## {title}", "", header, rule]
        for q in rows:
            s = q.stats
            prior = q.prior or ("(from the parameters)" if kind == "derived" else "not recorded")
            out.append(f"| {q.name} | {q.unit or '-'} | {_fmt(s['median'])} | "
                       f"[{_fmt(s['lower_68'])}, {_fmt(s['upper_68'])}] | "
                       f"[{_fmt(s['lower_95'])}, {_fmt(s['upper_95'])}] | {_fmt(s['mean'])} | "
                       f"{_fmt(s['sd'])} | {prior} |")
        out.append("")
    if data.derived_notes:
        out += ["Notes on derived quantities:", ""] + [f"- {n}" for n in data.derived_notes] + [""]

    out += ["## Sampler diagnostics", "", f"- verdict: {reason}"]
    diag = data.diagnostics
    if diag:
        for key in ("steps", "walkers", "burn", "burn_in", "thin"):
            if key in diag:
                out.append(f"- {key.replace('_', ' ')}: {_text(diag[key])}")
        acc = diag.get("acceptance_fraction")
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
    import matplotlib.pyplot as plt

    from . import _plots

    allowed = {"png", "svg", "pdf"}
    bad = [fmt for fmt in formats if fmt not in allowed]
    if bad or not formats:
        raise InputError(f"image format {bad[0] if bad else '(none)'!r} not supported; "
                         "use png, svg or pdf", where="report: formats")
    data = read_report_data(result_path)
    out = Path(out_dir) if out_dir is not None else \
        data.path.with_name(f"{data.path.stem}_report")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder ({exc.strerror}); give a writable "
                         "folder with -o", where=str(out)) from None

    written: dict[str, Path] = {}
    skipped: list[str] = []
    makers = (
        ("spectrum", _plots.plot_spectrum, data.counts is not None and data.predictive is not None),
        ("profile", _plots.plot_profile, bool(data.profile_bands) and data.depth_1e15 is not None),
        ("corner", _plots.plot_corner, data.samples is not None and data.samples.shape[0] > 1),
        ("convergence", _plots.plot_convergence, data.chain is not None and data.chain.shape[0] > 1),
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
    if skipped:
        data.report_notes.append("figures not drawn, as the file lacks their data: "
                                 + ", ".join(skipped))
    written["summary.csv"] = write_summary_csv(data, out / "summary.csv")
    written["summary.md"] = write_summary_md(data, out / "summary.md", written)
    return written
