"""A plan folder: plan.csv, plan.md, a figure per varied key, and check.csv after ``--check``.

:func:`write_plan` writes what a :class:`PlanTable` holds; :func:`plan_reporting` is the whole
``sondage plan`` command as the library does it (plan, write, optionally check and write
again, print a short summary), so the command module only parses arguments.
"""

from __future__ import annotations

import csv
import math
import sys
from pathlib import Path

from forward import InputError

from ..results._outputs import check_output
from ._expected import TYPICAL_MAX_CHARGE_UC
from ._figures import plot_plan

__all__ = ["write_plan", "plan_reporting", "figure_name", "PLAN_FILES", "MAX_MD_ROWS"]

#: the tables a plan folder always holds
PLAN_FILES = ("plan.csv", "plan.md")
#: plan.md lists at most this many set-ups (plan.csv holds them all)
MAX_MD_ROWS = 60
#: and at most this many strongly correlated pairs of parameters
MAX_PAIRS = 8


def figure_name(key: str, fmt: str = "png") -> str:
    """``sd_vs_geometry_tilt_deg.png`` for ``geometry.tilt_deg``."""
    return f"sd_vs_{key.replace('.', '_')}.{fmt}"


def _text(value) -> str:
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf"
        return f"{value:.6g}"
    return str(value)


def _g(value, digits: int = 3) -> str:
    if value is None:
        return ""
    if isinstance(value, float) and not math.isfinite(value):
        return "not determined" if math.isinf(value) else "-"
    return f"{value:.{digits}g}"


def write_csv(table, path) -> Path:
    """plan.csv: one row per set-up, columns of :meth:`PlanTable.records`."""
    records = table.records()
    path = Path(path)
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(list(records[0]))
        for rec in records:
            writer.writerow([_text(v) for v in rec.values()])
    return path


def write_check_csv(check, path) -> Path:
    """check.csv: one row per quantity (:meth:`PlanCheck.records`)."""
    records = check.records()
    path = Path(path)
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(list(records[0]))
        for rec in records:
            writer.writerow([_text(v) for v in rec.values()])
    return path


def _method_lines() -> list[str]:
    return [
        "## Method",
        "",
        "Counts in the fit window are independent Poisson variables with means mu_c(theta) from "
        "sondage's forward model at the nominal sample theta0. Their expected Fisher information "
        "is I_ij = sum_c (d mu_c/d theta_i)(d mu_c/d theta_j) / mu_c (derivatives by central "
        "differences). The expected posterior is Gaussian with precision P = I + Lambda, where "
        "Lambda_ii = -d^2 ln p_i / d theta_i^2 at theta0 is each prior's curvature (the Laplace "
        "approximation; for a normal prior 1/sd^2, as in van Trees 1968; a uniform prior adds "
        "nothing, a half-normal 1/scale^2). Expected sd = sqrt((P^-1)_ii); derived quantities "
        "(thickness and width in nm, totals) by the delta method. The variance splits exactly "
        "into a counting part and one part per prior (P^-1 = P^-1 I P^-1 + sum_j Lambda_jj "
        "P^-1 e_j e_j^T P^-1): 'variance from' lists the largest parts. Charge scales every "
        "expected count, so one forward model serves every charge of a geometry; the charge for "
        "a target is the root of sd(charge) = target.",
        "",
        "These are expected error bars at the nominal sample: a real posterior also carries the "
        "spectrum's own noise, and is not Gaussian near the edge of a prior or a physical limit "
        "(see the warnings).",
        "",
    ]


def write_md(table, path, figures=(), check=None) -> Path:
    """plan.md: the ranking, the best set-up in detail, the priors, warnings and figures."""
    lines = [f"# Measurement plan: {table.title or table.source}", "",
             f"Run file: `{table.source}`. "]
    q = table.quantity(table.rank_by)
    unit = f" {q.unit}" if q.unit else ""
    if table.target_sd is not None:
        lines[-1] += (f"Set-ups ranked by the expected posterior sd of **{table.rank_by}**; "
                      f"target sd {table.target_sd:.4g}{unit}.")
    else:
        lines[-1] += (f"Set-ups ranked by the expected posterior sd of **{table.rank_by}** "
                      "(the first free quantity of the sample; choose another with --target).")
    lines += ["", *_method_lines()]

    lines += ["## Free parameters: nominal values and priors", "",
              "| parameter | unit | nominal | prior and what it adds to the precision |",
              "|---|---|---:|---|"]
    for name, value in zip(table.parameters, table.theta):
        quantity = table.quantity(name)
        lines.append(f"| {name} | {quantity.unit} | {value:.6g} | {table.prior_notes[name]} |")
    lines.append("")

    keys = list(table.varied)
    header = ["rank", *keys, "charge (uC)", "counts in window", f"sd of {table.rank_by}",
              "relative sd"]
    if table.target_sd is not None:
        header.append("charge for the target (uC)")
    header.append("warnings")
    lines += ["## Set-ups", "", "| " + " | ".join(header) + " |",
              "|" + "---:|" * (len(header) - 1) + "---|"]
    for row in table.rows[:MAX_MD_ROWS]:
        sd = row.sd[table.rank_by]
        cells = [str(row.rank), *[f"{row.values[k]:g}" for k in keys], _g(row.charge_uC),
                 f"{row.counts:.4g}", _g(sd),
                 f"{100 * sd / abs(q.nominal):.2g} %" if q.nominal and math.isfinite(sd) else ""]
        if table.target_sd is not None:
            c = row.charge_for_target_uC
            cells.append(_g(c) + (" (beyond typical beam time)" if c > TYPICAL_MAX_CHARGE_UC
                                  else "")
                         if c is not None and math.isfinite(c) else row.target_note)
        cells.append(str(len(row.warnings)) if row.warnings else "")
        lines.append("| " + " | ".join(cells) + " |")
    if len(table.rows) > MAX_MD_ROWS:
        lines.append(f"\n({len(table.rows) - MAX_MD_ROWS} more set-ups in plan.csv.)")
    lines.append("")
    fewest = table.fewest_charge() if table.target_sd is not None else None
    if fewest is not None:
        lines += [f"The least charge that reaches the target: {_g(fewest[1])} uC, at "
                  f"{fewest[0].geometry_label()}.", ""]
    elif table.target_sd is not None:
        lines += ["No set-up reaches the target (see the last column).", ""]

    best = table.best
    lines += [f"## The best set-up: {best.label()}", "",
              f"Charge {best.charge_uC:.4g} uC, {best.counts:.4g} expected counts in the fit "
              "window.", "",
              "| quantity | unit | nominal | expected sd | relative | sd if every nuisance "
              "were known | variance from |", "|---|---|---:|---:|---:|---:|---|"]
    for quantity in table.quantities:
        sd = best.sd[quantity.name]
        rel = (f"{100 * sd / abs(quantity.nominal):.2g} %"
               if quantity.nominal and math.isfinite(sd) else "")
        lines.append(f"| {quantity.name} | {quantity.unit} | {quantity.nominal:.6g} | "
                     f"{_g(sd)} | {rel} | {_g(best.sd_counting[quantity.name])} | "
                     f"{best.limited_by(quantity.name)} |")
    pairs = []
    corr = best.correlation
    for i in range(len(table.parameters)):
        for j in range(i + 1, len(table.parameters)):
            if corr is not None and math.isfinite(corr[i, j]) and abs(corr[i, j]) >= 0.7:
                pairs.append((abs(corr[i, j]), table.parameters[i], table.parameters[j],
                              corr[i, j]))
    if pairs:
        pairs = sorted(pairs, reverse=True)
        lines += ["", "Strongest posterior correlations (|rho| >= 0.7): "
                  + "; ".join(f"{a} and {b} {r:+.2f}" for _, a, b, r in pairs[:MAX_PAIRS])
                  + (f"; and {len(pairs) - MAX_PAIRS} more" if len(pairs) > MAX_PAIRS else "")
                  + "."]
    if table.target_sd is not None:
        c = best.charge_for_target_uC
        lines += ["", f"Charge for the target ({table.rank_by} sd {table.target_sd:.4g}{unit}) "
                  f"at this set-up: "
                  + (f"{c:.3g} uC." if c is not None and math.isfinite(c)
                     else f"{best.target_note}.")]
    lines.append("")

    messages: dict[str, int] = {}
    for row in table.rows:
        for m in row.warnings:
            messages[m] = messages.get(m, 0) + 1
    if messages:
        lines += ["## Warnings", ""]
        lines += [f"- {m} ({n} of {len(table.rows)} set-ups)" for m, n in messages.items()]
        lines.append("")
    if figures:
        lines += ["## Figures", ""]
        lines += [f"![expected sd against {key}]({name})" for key, name in figures]
        lines.append("")
    if check is not None:
        lines += _check_lines(check)
    Path(path).write_text("\n".join(lines) + "\n")
    return Path(path)


def _check_lines(check) -> list[str]:
    lines = [f"## Check: {check.n} simulated spectra inverted at {check.row.label()}", "",
             f"Spectra drawn from the forward model at the nominal sample (Poisson counts, seeds "
             f"{check.seeds[0]} to {check.seeds[-1]}), each inverted with the run file's [fit] "
             f"table; {sum(check.converged)} of {check.n} chains converged.", "",
             "| quantity | unit | expected sd | mean posterior sd | standard error | ratio |",
             "|---|---|---:|---:|---:|---:|"]
    for rec in check.records():
        lines.append(f"| {rec['quantity']} | {rec['unit']} | {rec['expected_sd']:.4g} | "
                     f"{rec['mean_posterior_sd']:.4g} | {_g(rec['standard_error'])} | "
                     f"{rec['ratio']:.3f} |")
    lines.append("")
    return lines


def write_plan(table, out_dir, *, check=None, force: bool = False,
               formats=("png",), inputs=None) -> dict[str, Path]:
    """Write a plan folder.

    Parameters
    ----------
    table : PlanTable
    out_dir : path
        The folder (created if needed).
    check : PlanCheck, optional
        Adds check.csv and a section of plan.md.
    force : bool
        Replace plan files already in the folder.
    formats : tuple of str
        Image formats of the figures (png, svg, pdf).
    inputs : dict, optional
        ``{description: path}`` never written over (the run file).

    Returns
    -------
    dict
        File name -> path of what was written.
    """
    import matplotlib.pyplot as plt

    out = Path(out_dir)
    bad = [f for f in formats if f not in ("png", "svg", "pdf")]
    if bad:
        raise InputError(f"image format {bad[0]!r} not supported; use png, svg or pdf",
                         where="plan: formats")
    if out.exists() and not out.is_dir():
        raise InputError("output path is a file; give a folder with -o", where=str(out))
    names = list(PLAN_FILES) + [figure_name(k, f) for k in table.varied for f in formats]
    names += ["check.csv"] if check is not None else []
    for name in names:
        check_output(out / name, inputs=dict(inputs or {}), force=force, kind="plan file")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder ({exc.strerror}); give a writable "
                         "folder with -o", where=str(out)) from None
    written = {"plan.csv": write_csv(table, out / "plan.csv")}
    figures = []
    for key in table.varied:
        if len({row.values[key] for row in table.rows}) < 2:
            continue
        fig = plot_plan(table, key)
        try:
            for fmt in formats:
                name = figure_name(key, fmt)
                fig.savefig(out / name, format=fmt, dpi=150, bbox_inches="tight",
                            facecolor="white")
                written[name] = out / name
        finally:
            plt.close(fig)
        figures.append((key, figure_name(key, formats[0])))
    if check is not None:
        written["check.csv"] = write_check_csv(check, out / "check.csv")
    written["plan.md"] = write_md(table, out / "plan.md", figures, check)
    return written


def plan_reporting(run_file, output, *, vary=None, target=None, nominal=None, check=0,
                   seed=0, workers=1, max_steps=None, force=False, quiet=False,
                   formats=("png",)):
    """``sondage plan`` as the library runs it: plan, write the folder, print a summary;
    with ``check`` > 0 invert that many simulated spectra at the best set-up and write the
    folder again with the comparison.

    Returns
    -------
    (PlanTable, PlanCheck or None)
    """
    import forward

    from ._check import check_plan
    from ._plan import plan
    from ._setups import parse_vary

    run = forward.load_run(run_file)
    if int(check) < 0:
        raise InputError(f"--check {check}: give a number of spectra >= 0",
                         where="command line: --check")
    inputs = {"run file": run_file}
    # refuse an occupied folder before any work (nothing computed is lost to a late refusal)
    out = Path(output)
    names = list(PLAN_FILES) + (["check.csv"] if check else [])
    names += [figure_name(k, f) for k in parse_vary(vary) for f in formats]
    for name in names:
        check_output(out / name, inputs=inputs, force=force, kind="plan file")
    table = plan(run, vary=vary, target=target, nominal=nominal)
    written = write_plan(table, out, force=force, formats=formats, inputs=inputs)
    if not quiet:
        print(summary_text(table))
        print(f"wrote {', '.join(sorted(written))} to {out}/")
    result = None
    if check:
        def progress(k, n, res):
            if not quiet:
                print(f"check: spectrum {k} of {n} inverted"
                      + ("" if res.converged else " (chain not converged)"),
                      file=sys.stderr, flush=True)

        result = check_plan(table, int(check), seed=seed, workers=workers,
                            max_steps=max_steps, progress=progress)
        written = write_plan(table, out, check=result, force=True, formats=formats,
                             inputs=inputs)
        if not quiet:
            print(check_text(result))
    return table, result


def summary_text(table, top: int = 5) -> str:
    """The best few set-ups on a few lines."""
    q = table.quantity(table.rank_by)
    unit = f" {q.unit}" if q.unit else ""
    lines = [f"expected posterior sd of {table.rank_by}{unit} ({len(table.rows)} set-ups, "
             "best first):"]
    for row in table.rows[:top]:
        text = f"  {row.rank:>3}  {row.label()}: {_g(row.sd[table.rank_by])}"
        if table.target_sd is not None:
            c = row.charge_for_target_uC
            text += ("; target reached at " + _g(c) + " uC" if c is not None and math.isfinite(c)
                     else f"; {row.target_note}")
            if c is not None and math.isfinite(c) and c > TYPICAL_MAX_CHARGE_UC:
                text += " (beyond typical beam time)"
        lines.append(text)
    best = table.best
    limited = best.limited_by(table.rank_by)
    if limited:
        lines.append(f"  at the best set-up its variance comes from: {limited}")
    fewest = table.fewest_charge() if table.target_sd is not None else None
    if fewest is not None:
        lines.append(f"  the least charge for the target: {_g(fewest[1])} uC at "
                     f"{fewest[0].geometry_label()}")
    return "\n".join(lines)


def check_text(check) -> str:
    """The check's comparison on a few lines."""
    lines = [f"check at {check.row.label()}: {check.n} simulated spectra, "
             f"{sum(check.converged)} converged; mean posterior sd / expected sd:"]
    for rec in check.records():
        lines.append(f"  {rec['quantity']}: {rec['mean_posterior_sd']:.4g} / "
                     f"{rec['expected_sd']:.4g} = {rec['ratio']:.3f}")
    return "\n".join(lines)
