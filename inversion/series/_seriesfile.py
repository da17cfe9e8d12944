"""The series result file (HDF5): its trees, written and read through
:mod:`inversion.results._store`, with the names of :mod:`inversion.results._schema`.

Layout (README.md, "The series result file")::

    /                       attrs: program, version, format_version, kind = "series",
                            series_text, seed, interface, width_unit, d_unit, status, created
    /members/table/         label, temperature_K, time_s, as_deposited, file (relative path)
    /members/links/<label>  external link to the member's own result file (root "/")
    /members/summary/       width_median, width_lo68, width_hi68, width_lo95, width_hi95
    /diffusion/<label>/     d_draws, negative (bool); attrs time_s, temperature_K, unit,
                            negative_fraction, median, lo68, hi68, lo95, hi95 (and mean, sd)
    /arrhenius/             ea_eV, ln_d0, [scatter_ln] draws, band_temperature_K, band_ln_d;
                            attrs <quantity>.<statistic>, diagnostics.<key>, d_unit
    /comparison/width, /comparison/diffusion   neighbouring pairs: a, b, median, lo95, hi95,
                            p_a_greater

The file spells the statistics ``lo68``, ``hi95``...; the code uses ``low68``, ``high95``...
(:data:`inversion.results._schema.STATS`).  The two meet here only, through
:func:`inversion.results._schema.series_name`.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from forward import InputError

from .._about import PROGRAM, version
from ..results._schema import (SERIES_ARRHENIUS, SERIES_COMPARISON, SERIES_COMPARISON_STATS,
                               SERIES_DIFFUSION, SERIES_KIND, SERIES_MEMBERS_LINKS,
                               SERIES_MEMBERS_SUMMARY, SERIES_MEMBERS_TABLE, SERIES_STAT_NAMES,
                               STATS, series_name)
from ..results._store import Link, now_text, read_tree, set_attrs, write_tree

__all__ = ["write_members", "write_statistics", "set_series_attrs", "read_series"]

#: the statistics of the members' width summary, in the file's order
_WIDTH_STATS = ("median", "low68", "high68", "low95", "high95")
#: file name of each statistic -> the code's name
_FROM_FILE = {v: k for k, v in SERIES_STAT_NAMES.items()}


def _in_file(stats: dict) -> dict:
    """A summary dict in the file's spelling (``low68`` -> ``lo68``)."""
    return {series_name(k) if k in STATS else k: v for k, v in stats.items()}


def _in_code(key: str) -> str:
    """A file attribute name in the code's spelling: ``lo68`` -> ``low68``,
    ``ea_eV.hi95`` -> ``ea_eV.high95``; other names unchanged."""
    head, dot, tail = key.rpartition(".")
    if tail in _FROM_FILE:
        return f"{head}{dot}{_FROM_FILE[tail]}"
    return key


def write_members(output: Path, series, *, seed: int, status: str, member_files) -> None:
    """Start a series file: root attributes, the members' table and links to their files.

    Parameters
    ----------
    member_files : list of path
        Each member's result file (stored relative to the series file's folder).
    """
    ms = series.members
    rel = [os.path.relpath(p, output.parent) for p in member_files]
    table = {
        "label": np.array([m.label for m in ms], dtype=object),
        "temperature_K": (np.array([m.temperature_K if m.temperature_K is not None else np.nan
                                    for m in ms]), {"unit": "K"}),
        "time_s": (np.array([m.time_s if m.time_s is not None else 0.0 for m in ms]),
                   {"unit": "s"}),
        "as_deposited": np.array([m.as_deposited for m in ms]),
        "file": (np.array(rel, dtype=object),
                 {"description": "member result file, relative to this file's folder"}),
    }
    write_tree(output, {
        "@attrs": {"program": PROGRAM, "version": version(), "kind": SERIES_KIND,
                   "series_text": series.text, "series_source": series.source,
                   "seed": int(seed), "interface": series.interface, "title": series.title,
                   "status": status, "created": now_text()},
        SERIES_MEMBERS_TABLE: table,
        SERIES_MEMBERS_LINKS: {m.label: Link(r, "/") for m, r in zip(ms, rel)},
    }, mode="w")


def _rows(rows) -> dict:
    out = {k: np.array([r[k] for r in rows], dtype=object) for k in ("a", "b")}
    for k in (*SERIES_COMPARISON_STATS, "p_a_greater"):
        out[series_name(k) if k in STATS else k] = np.array([r[k] for r in rows], dtype=float)
    return out


def write_statistics(output: Path, stats: dict) -> None:
    """Write (or replace) the members' width summary, the D draws, the Arrhenius fit and the
    comparisons, and mark the series finished.

    ``stats`` is what :func:`inversion.series._statistics.series_statistics` returns.
    """
    from ._diffusion import interval

    unit, d_unit = stats["width_unit"], stats["d_unit"]
    widths = [interval(stats["widths"][lab]) for lab in stats["labels"]]
    tree = {"@attrs": {"width_unit": unit, "width_unit_reason": stats["width_unit_reason"],
                       "d_unit": d_unit, "notes": stats["notes"] or ["none"]}}
    tree[SERIES_MEMBERS_SUMMARY] = {
        f"width_{series_name(k)}": (np.array([iv[k] for iv in widths]), {"unit": unit})
        for k in _WIDTH_STATS}
    diffusion = {}
    for label, dd in stats["diffusion"].items():
        diffusion[label] = {
            "d_draws": (dd.d_draws, {"unit": d_unit}), "negative": dd.negative,
            "@attrs": {"time_s": dd.time_s, "temperature_K": float(stats["temperatures"][label]),
                       "unit": d_unit, "negative_fraction": dd.negative_fraction,
                       **_in_file(interval(dd.d_draws))}}
    tree[SERIES_DIFFUSION] = diffusion
    fit = stats["arrhenius"]
    if fit is not None:
        a = {"ea_eV": (fit.ea_eV, {"unit": "eV"}),
             "ln_d0": (fit.ln_d0, {"unit": f"ln({d_unit})"})}
        if fit.scatter_ln is not None:
            a["scatter_ln"] = fit.scatter_ln
        a["band_temperature_K"] = fit.temperature_grid_K
        a["band_ln_d"] = (fit.band_ln_d, {"quantiles": np.array(fit.band_quantiles)})
        attrs = {f"{q}.{k}": v for q, iv in fit.summary.items() for k, v in _in_file(iv).items()}
        attrs.update({f"diagnostics.{k}": v for k, v in fit.diagnostics.items()})
        attrs["d_unit"] = d_unit
        a["@attrs"] = attrs
        tree[SERIES_ARRHENIUS] = a
    tree[SERIES_COMPARISON] = {
        "width": _rows(stats["comparison_width"]),
        "diffusion": _rows(stats["comparison_diffusion"]),
        "@attrs": {"description": "neighbouring pairs: a - b posterior, median, central 95 % "
                                  "interval, P(a > b)"}}
    if fit is None:
        tree[SERIES_ARRHENIUS] = None
    write_tree(output, tree)
    set_series_attrs(output, status="finished", finished=now_text())


def set_series_attrs(output: Path, **attrs) -> None:
    """Root attributes of a series file (status, times)."""
    set_attrs(output, **attrs)


def read_series(path) -> dict:
    """Read a series result file into plain arrays and dicts, statistics named as in the code
    (``low68``, ``high95``...).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict
        ``attrs``, ``members`` (list of dicts: label, temperature_K, time_s, as_deposited, file,
        width_median, width_low68, ...), ``diffusion`` (label -> dict with ``d_draws`` and the
        attributes), ``arrhenius`` (dict or None; its ``attrs`` keyed ``<quantity>.<stat>``),
        ``comparison`` (``width``, ``diffusion``: lists of rows with ``a``, ``b``, ``median``,
        ``low95``, ``high95``, ``p_a_greater``).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("series result file not found", where=str(path))
    tree = read_tree(path, what="series result file")
    if str(tree.attrs.get("kind", "")) != SERIES_KIND:
        raise InputError("not a series result file (no kind = 'series' attribute)",
                         where=str(path))
    out: dict = {"attrs": dict(tree.attrs)}
    t = tree[SERIES_MEMBERS_TABLE]
    s = tree.get(SERIES_MEMBERS_SUMMARY)
    members = []
    for i, label in enumerate(t["label"].value):
        row = {"label": str(label), "temperature_K": float(t["temperature_K"].value[i]),
               "time_s": float(t["time_s"].value[i]),
               "as_deposited": bool(t["as_deposited"].value[i]),
               "file": str(t["file"].value[i])}
        if s is not None and "width_median" in s:
            for k in _WIDTH_STATS:
                row[f"width_{k}"] = float(s[f"width_{series_name(k)}"].value[i])
        members.append(row)
    out["members"] = members
    out["diffusion"] = {}
    if SERIES_DIFFUSION in tree:
        for label, g in tree[SERIES_DIFFUSION].children.items():
            out["diffusion"][label] = {"d_draws": g["d_draws"].value,
                                       **{_in_code(k): v for k, v in g.attrs.items()}}
    out["arrhenius"] = None
    if SERIES_ARRHENIUS in tree:
        a = tree[SERIES_ARRHENIUS]
        out["arrhenius"] = {k: node.value for k, node in a.children.items()}
        out["arrhenius"]["attrs"] = {_in_code(k): v for k, v in a.attrs.items()}
    out["comparison"] = {}
    if SERIES_COMPARISON in tree:
        for kind, g in tree[SERIES_COMPARISON].children.items():
            n = len(g["median"].value)
            out["comparison"][kind] = [
                {"a": str(g["a"].value[i]), "b": str(g["b"].value[i]),
                 **{k: float(g[series_name(k)].value[i]) for k in SERIES_COMPARISON_STATS},
                 "p_a_greater": float(g["p_a_greater"].value[i])} for i in range(n)]
    return out
