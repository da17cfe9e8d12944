"""The report's tables: the printed summary, summary.csv and summary.md, and the short table
``sondage invert`` prints.

Statistics are read in the one vocabulary (:data:`inversion.results._schema.STATS`); summary.csv
spells them as :data:`inversion.results._schema.CSV_STAT_COLUMNS` says.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from ..results._schema import CSV_STAT_COLUMNS
from ._data import Quantity, ReportData, _per_parameter, _text

__all__ = ["SUMMARY_COLUMNS", "format_summary_text", "write_summary_csv", "write_summary_md",
           "interval_table", "loud"]

#: statistics of summary.csv, in column order (the one vocabulary), then the diagnostics
_CSV_KEYS = ("median", "mean", "sd", "low68", "high68", "low95", "high95",
             "autocorr_time_steps", "effective_sample_size")
#: Columns of summary.csv, in order.
SUMMARY_COLUMNS = ("quantity", "kind", "unit",
                   *(CSV_STAT_COLUMNS.get(k, k) for k in _CSV_KEYS), "prior")


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
                     f"[{_fmt(s['low68'])}, {_fmt(s['high68'])}]  "
                     f"[{_fmt(s['low95'])}, {_fmt(s['high95'])}]  {q.unit}".rstrip())
    for w in data.warnings:
        lines.append(f"warning: {w}")
    for w in data.input_warnings:
        lines.append(f"input warning: {w}")
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
            for key in _CSV_KEYS:
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
                       f"[{_fmt(s['low68'])}, {_fmt(s['high68'])}] | "
                       f"[{_fmt(s['low95'])}, {_fmt(s['high95'])}] | {_fmt(s['mean'])} | "
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
    out += ["", "## Warnings about the inputs", "",
            "What the pre-flight checks (the checks of `sondage check`) found before sampling.",
            ""]
    out += [f"- {w}" for w in data.input_warnings] or ["- none recorded"]
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


def _short(x: float) -> str:
    return f"{x:.4g}" if abs(x) < 1e5 else f"{x:.3e}"


def interval_table(result) -> str:
    """Median and 68 % interval of each layer thickness and interface mixing width of a
    :class:`~inversion.results._result.Result`, as ``sondage invert`` prints them."""
    rows = []
    for name, s in result.summary.items():
        if name.endswith((".thickness_nm", ".areal_density", ".mixing", ".mixing_nm")):
            rows.append((name, s.get("unit", ""), s["median"], s["low68"], s["high68"]))
    if not rows:
        return ""
    width = max(len(r[0]) for r in rows)
    lines = [f"{'quantity':<{width}}  {'median':>10}  {'68 % interval':>23}  unit"]
    for name, unit, med, lo, hi in rows:
        lines.append(f"{name:<{width}}  {_short(med):>10}  "
                     f"{'[' + _short(lo) + ', ' + _short(hi) + ']':>23}  {unit}")
    return "\n".join(lines)


def loud(message: str) -> str:
    """A warning nobody should miss: one line between two rules of exclamation marks."""
    text = " ".join(str(message).split())
    bar = "!" * 78
    return f"{bar}\nsondage: WARNING: {text}\n{bar}"
