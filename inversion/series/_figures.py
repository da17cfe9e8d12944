"""Figures and summary.md of a series result file, read through
:func:`inversion.series._seriesfile.read_series`, drawn in the report style
(:mod:`inversion.report._style`): the anneal temperatures, an ordered series, take the style's
ordered colours.  A member whose sampler did not converge or whose model was rejected (its own
result file's ``/diagnostics``) is named in a stamp on both figures and at the top of
summary.md.

Like every figure function, these leave matplotlib's backend alone; ``sondage series`` selects
the file-only Agg backend.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from forward import InputError

from ..report._style import (BAND_ALPHA_95, DATA_COLOUR, MODEL_COLOUR, PALETTE, draw_stamps,
                             figure_style, ordered_colours)
from ..results._result import read_result
from ._diffusion import BOLTZMANN_eV_PER_K, NM2_TO_CM2, interval
from ._seriesfile import read_series

__all__ = ["series_report", "member_verdicts", "plot_width_growth", "plot_arrhenius"]


def _g(x: float) -> str:
    return f"{x:.4g}"


def member_verdicts(path, members) -> list[str]:
    """Stamps naming the members whose run did not converge or whose model was rejected.

    Parameters
    ----------
    path : Path
        The series result file (member files are stored relative to its folder).
    members : list of dict
        The members as :func:`read_series` gives them (``label``, ``file``).

    Returns
    -------
    list of str
        At most two lines, "NOT CONVERGED: member(s) ..." and "MODEL REJECTED: member(s) ...";
        a member file that cannot be read is named as unread.
    """
    flags = {"not converged": [], "model rejected": [], "unread": []}
    for m in members:
        try:
            diag = read_result(Path(path).parent / m["file"]).diagnostics
        except InputError:
            flags["unread"].append(m["label"])
            continue
        if not diag.get("converged", False):
            flags["not converged"].append(m["label"])
        if diag.get("model_rejected", False):
            flags["model rejected"].append(m["label"])
    out = []
    for key, text in (("not converged", "NOT CONVERGED"), ("model rejected", "MODEL REJECTED")):
        if flags[key]:
            word = "member" if len(flags[key]) == 1 else "members"
            out.append(f"{text}: {word} {', '.join(flags[key])} (see their own reports)")
    if flags["unread"]:
        out.append(f"UNCHECKED: member file(s) of {', '.join(flags['unread'])} could not be read")
    return out


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
    import matplotlib.pyplot as plt

    path = Path(path)
    data = read_series(path)
    out_dir = Path(out_dir) if out_dir is not None else path.parent / f"{path.stem}.report"
    out_dir.mkdir(parents=True, exist_ok=True)
    attrs = data["attrs"]
    wu, du = str(attrs.get("width_unit", "nm")), str(attrs.get("d_unit", "nm2/s"))
    files = {}
    members = data["members"]
    stamps = member_verdicts(path, members)
    for name, maker in (("width2_vs_time", plot_width_growth), ("arrhenius", plot_arrhenius)):
        fig = maker(data, stamps=stamps)
        try:
            files[name] = out_dir / f"{name}.png"
            with figure_style():
                fig.savefig(files[name], dpi=120)
        finally:
            plt.close(fig)
    arr = data["arrhenius"]

    # summary.md
    lines = [f"> **WARNING: {text}.**" for text in stamps] + ([""] if stamps else [])
    lines += [f"# Annealing series: {str(attrs.get('title', '')) or path.stem}", "",
             f"Series file `{str(attrs.get('series_source', ''))}`, interface "
             f"{int(attrs.get('interface', 1))}; widths in {wu} "
             f"({str(attrs.get('width_unit_reason', ''))}); D in {du}.", "",
             "## Members", "",
             "| member | T (K) | time (s) | width median | width 68 % | D median | D 95 % "
             "| P(D < 0) |", "|---|---|---|---|---|---|---|---|"]
    for m in members:
        dd = data["diffusion"].get(m["label"])
        dcol = ("-", "-", "-") if dd is None else (
            _g(dd["median"]), f"{_g(dd['low95'])} to {_g(dd['high95'])}",
            f"{float(dd['negative_fraction']):.3f}")
        tcol = "as deposited" if m["as_deposited"] else f"{m['temperature_K']:.1f}"
        lines.append(f"| {m['label']} | {tcol} | {m['time_s']:g} | {_g(m['width_median'])} | "
                     f"{_g(m['width_low68'])} to {_g(m['width_high68'])} | {dcol[0]} | {dcol[1]} "
                     f"| {dcol[2]} |")
    lines += ["", "Negative D draws (annealed width below the as-deposited width) are kept, "
              "not clipped; P(D < 0) is their share.", ""]
    if arr is not None:
        a = arr["attrs"]
        d0 = np.exp(arr["ln_d0"])
        d0_iv = interval(d0)
        conv = (f" (cm2/s: {d0_iv['median'] * NM2_TO_CM2:.3g}, 95 % "
                f"{d0_iv['low95'] * NM2_TO_CM2:.3g} to {d0_iv['high95'] * NM2_TO_CM2:.3g})"
                if du == "nm2/s" else "")
        lines += ["## Arrhenius law D = D0 exp(-Ea / kT)", "",
                  "| quantity | median | 68 % interval | 95 % interval |", "|---|---|---|---|",
                  f"| Ea (eV) | {a['ea_eV.median']:.4g} | {a['ea_eV.low68']:.4g} to "
                  f"{a['ea_eV.high68']:.4g} | {a['ea_eV.low95']:.4g} to {a['ea_eV.high95']:.4g} |",
                  f"| ln(D0 / ({du})) | {a['ln_d0.median']:.4g} | {a['ln_d0.low68']:.4g} to "
                  f"{a['ln_d0.high68']:.4g} | {a['ln_d0.low95']:.4g} to {a['ln_d0.high95']:.4g} |"]
        if "scatter_ln.median" in a:
            lines.append(f"| extra scatter of ln D | {a['scatter_ln.median']:.3g} | "
                         f"{a['scatter_ln.low68']:.3g} to {a['scatter_ln.high68']:.3g} | "
                         f"{a['scatter_ln.low95']:.3g} to {a['scatter_ln.high95']:.3g} |")
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
        lines += [f"| {r['a']} | {r['b']} | {_g(r['median'])} | {_g(r['low95'])} to "
                  f"{_g(r['high95'])} | {r['p_a_greater']:.3f} |" for r in rows]
        lines.append("")
    lines += ["![width squared against anneal time](width2_vs_time.png)", "",
              "![Arrhenius plot](arrhenius.png)", ""]
    files["summary"] = out_dir / "summary.md"
    files["summary"].write_text("\n".join(lines))
    return files


def plot_width_growth(data, *, stamps=()):
    """Mixing width squared against anneal time, one line per temperature.

    Parameters
    ----------
    data : dict
        A series file as :func:`read_series` gives it.
    stamps : sequence of str, optional
        Warning stamps (e.g. from :func:`member_verdicts`).

    Returns
    -------
    matplotlib.figure.Figure
        Medians with marginal 68 % intervals; the as-deposited member at t = 0 in the data
        colour; the temperatures in the style's ordered colours, lowest darkest.
    """
    import matplotlib.pyplot as plt

    wu = str(data["attrs"].get("width_unit", "nm"))
    members = data["members"]
    ref = next(m for m in members if m["as_deposited"])
    temps = sorted({m["temperature_K"] for m in members if not m["as_deposited"]})
    colours = ordered_colours(len(temps))
    w2 = lambda m, k: m[f"width_{k}"] ** 2 if m[f"width_{k}"] > 0 else 0.0  # noqa: E731
    with figure_style():
        fig, ax = plt.subplots(figsize=(6.4, 4.4))
        ax.errorbar([0.0], [w2(ref, "median")], yerr=[[w2(ref, "median") - w2(ref, "low68")],
                                                        [w2(ref, "high68") - w2(ref, "median")]],
                    fmt="s", color=DATA_COLOUR, label=f"as deposited ({ref['label']})")
        for j, tk in enumerate(temps):
            ms = sorted([m for m in members if m["temperature_K"] == tk],
                        key=lambda m: m["time_s"])
            x = [m["time_s"] for m in ms]
            y = [w2(m, "median") for m in ms]
            yerr = [[y[i] - w2(m, "low68") for i, m in enumerate(ms)],
                    [w2(m, "high68") - y[i] for i, m in enumerate(ms)]]
            ax.errorbar(x, y, yerr=yerr, fmt="o-", color=colours[j], label=f"{tk:.0f} K")
        ax.set_xlabel("anneal time (s)")
        ax.set_ylabel(f"mixing width$^2$ ({wu})$^2$")
        ax.set_title("Interface broadening: median and marginal 68 % interval", fontsize=10)
        ax.legend(fontsize=8)
        fig.tight_layout()
        draw_stamps(fig, stamps)
    return fig


def plot_arrhenius(data, *, stamps=()):
    """ln D against 1/kT: each anneal's median and 68 % interval (an 84 % upper limit when not
    resolved from zero), the Arrhenius posterior median line and its 95 % band.

    Parameters
    ----------
    data : dict
        A series file as :func:`read_series` gives it.
    stamps : sequence of str, optional
        Warning stamps (e.g. from :func:`member_verdicts`).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    du = str(data["attrs"].get("d_unit", "nm2/s"))
    arr = data["arrhenius"]
    limit_colour = PALETTE["vermillion"]
    with figure_style():
        fig, ax = plt.subplots(figsize=(6.4, 4.4))
        for dd in data["diffusion"].values():
            x = 1.0 / (BOLTZMANN_eV_PER_K * float(dd["temperature_K"]))
            q16, q50, q84 = np.quantile(dd["d_draws"], [0.16, 0.5, 0.84])
            if q16 > 0:
                ax.errorbar([x], [np.log(q50)], yerr=[[np.log(q50) - np.log(q16)],
                                                      [np.log(q84) - np.log(q50)]],
                            fmt="o", color=MODEL_COLOUR)
            elif q84 > 0:  # not resolved from zero: an upper limit at the 84 % quantile
                ax.plot([x], [np.log(q84)], marker="v", color=limit_colour, linestyle="none")
        if arr is not None:
            gx = 1.0 / (BOLTZMANN_eV_PER_K * arr["band_temperature_K"])
            band = arr["band_ln_d"]
            ax.fill_between(gx, band[0], band[-1], color=MODEL_COLOUR, alpha=BAND_ALPHA_95,
                            linewidth=0, label="Arrhenius line, 95 % posterior band")
            ax.plot(gx, band[2], color=MODEL_COLOUR, label="posterior median line")
            a = arr["attrs"]
            ax.set_title(f"Ea = {a['ea_eV.median']:.3g} eV "
                         f"(95 %: {a['ea_eV.low95']:.3g} to {a['ea_eV.high95']:.3g})",
                         fontsize=10)
        ax.errorbar([], [], yerr=[], fmt="o", color=MODEL_COLOUR,
                    label="anneal: median, 68 % interval")
        ax.plot([], [], marker="v", color=limit_colour, linestyle="none",
                label="anneal not resolved: 84 % upper limit")
        ax.set_xlabel("1 / kT (1/eV)")
        ax.set_ylabel(f"ln(D / ({du}))")
        ax.legend(fontsize=8)
        fig.tight_layout()
        draw_stamps(fig, stamps)
    return fig
