"""The one reader of result files: :func:`read_result` gives a :class:`Result` of plain arrays
and dicts, which the reports, the series statistics and scripts all use.

Parts missing from a file (an older or shorter run) stay empty; a file without the root
attribute ``format_version`` is a version 1 file of the same layout.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from forward import InputError

from ._schema import (DERIVED, DIAGNOSTICS, INPUT_MEASURED, INPUT_MEASUREMENTS, INPUT_PRIORS,
                      INPUT_RUN, INPUT_SPECTRUM, LOG_POSTERIOR, MCMC, MEASUREMENTS,
                      POSTERIOR_PRIORS, PROFILE, SAMPLES, SPECTRUM, START, STATS, SUMMARY)
from ._store import read_tree

__all__ = ["Result", "read_result"]


@dataclass
class Result:
    """A result file's content as plain arrays and dicts (for reports and scripts).

    Attributes
    ----------
    path : str
    attrs : dict
        Root attributes (program, version, format_version, seed, command, times, status).
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
    counts, measured : ndarray or None
        The stored input spectrum and which channels the spectrum file held.
    priors : list of str
        ``name [unit]: prior`` per free parameter.
    log_posterior : ndarray or None
        Log-posterior of each draw.
    summary_rows : list of (name, unit, dict)
        ``/posterior/summary`` in the file's order (a name can appear twice: a parameter and
        the derived quantity of the same name).
    derived_notes : dict name -> str
        Why a derived quantity is NaN, where the file says.
    start : dict
        The start point's attributes.
    chain, log_prob : ndarray or None
        The stored chain (steps, walkers, parameters) and its log-posteriors, when read with
        ``chain=True``.
    parts : set of str
        The top-level groups the file has.
    group_attrs : dict group -> dict
        Attributes of the top-level groups (e.g. ``spectrum``'s ``run_calibration_keV``).
    measurements : dict name -> dict
        A joint run's spectra (empty for a run of one spectrum): per measurement, in the run
        file's order, the datasets of ``spectrum`` plus ``ppc_deviance``, ``ppc_blocks`` and
        ``ppc_ranges``, and the group's attributes under ``"@attrs"``
        (``run_calibration_keV``, ``ppc_p_value``, ``model_rejected``...).
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
    counts: np.ndarray | None = None
    measured: np.ndarray | None = None
    priors: list = field(default_factory=list)
    log_posterior: np.ndarray | None = None
    summary_rows: list = field(default_factory=list)
    derived_notes: dict = field(default_factory=dict)
    start: dict = field(default_factory=dict)
    chain: np.ndarray | None = None
    log_prob: np.ndarray | None = None
    parts: set = field(default_factory=set)
    group_attrs: dict = field(default_factory=dict)
    measurements: dict = field(default_factory=dict)

    @property
    def format_version(self) -> int:
        """1 for files written before the attribute existed."""
        return int(self.attrs.get("format_version", 1))

    @property
    def converged(self) -> bool:
        return bool(self.diagnostics.get("converged", False))

    def interval(self, name: str, level: int = 68) -> tuple[float, float, float]:
        """(median, low, high) of a parameter or derived quantity, ``level`` 68 or 95."""
        s = self.summary[name]
        return s["median"], s[f"low{level}"], s[f"high{level}"]


def _lists(value):
    """Arrays as (nested) lists, as the result's attributes and diagnostics are given."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (list, tuple)):
        return [_lists(v) for v in value]
    return value


def _strings(value) -> list:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return [str(v) for v in np.asarray(value, dtype=object).ravel()]


def read_result(path, *, chain: bool = False, require_finished: bool = False) -> Result:
    """Read a result file into a :class:`Result`; parts missing from the file stay empty.

    Parameters
    ----------
    path : path
    chain : bool
        Also read the stored chain and its log-posteriors (``/mcmc``), up to the step counter.
    require_finished : bool
        Refuse a file still being written, or whose inversion stopped before finishing.

    Raises
    ------
    forward.InputError
        A file that is missing, busy, not HDF5, cut short or damaged, named on one line;
        nothing is returned half-read.
    """
    path = str(path)
    head = {f"{MCMC}/chain": "iteration", f"{MCMC}/log_prob": "iteration"} if chain else {}
    tree = read_tree(path, skip=(MCMC,), head=head, require_finished=require_finished)
    return _result(path, tree)


def _result(path: str, tree) -> Result:
    res = Result(path=path)
    res.attrs = {k: _lists(v) for k, v in tree.attrs.items()}
    res.parts = set(tree.children)
    res.group_attrs = {name: dict(node.attrs) for name, node in tree.children.items()
                       if not node.is_dataset}
    if INPUT_RUN in tree:
        res.run_text = tree[INPUT_RUN].value
    if INPUT_SPECTRUM in tree:
        res.counts = tree[INPUT_SPECTRUM].value
    if INPUT_MEASURED in tree:
        res.measured = np.asarray(tree[INPUT_MEASURED].value, dtype=bool)
    for key in (POSTERIOR_PRIORS, INPUT_PRIORS):
        if key in tree:
            res.priors = _strings(tree[key].value)
            if res.priors:
                break
    if SAMPLES in tree:
        node = tree[SAMPLES]
        res.samples = node.value
        res.names = _lists(node.attrs.get("names", []))
        res.units = _lists(node.attrs.get("units", []))
    if LOG_POSTERIOR in tree:
        res.log_posterior = tree[LOG_POSTERIOR].value
    if SUMMARY in tree and "names" in tree[SUMMARY]:
        g = tree[SUMMARY]
        names = _strings(g["names"].value)
        units = _strings(g["units"].value) if "units" in g else [""] * len(names)
        cols = {k: np.asarray(g[k].value, dtype=float).ravel() for k in STATS if k in g}
        if len(units) != len(names) or any(v.size != len(names) for v in cols.values()):
            raise InputError("damaged or incomplete result file: the posterior summary's "
                             "columns and names differ in length; re-run the inversion with "
                             "--force", where=f"{path}: /{SUMMARY}")
        for i, name in enumerate(names):
            stats = {k: float(v[i]) for k, v in cols.items()}
            res.summary_rows.append((name, units[i], stats))
            res.summary[name] = {**stats, "unit": units[i]}
    if DERIVED in tree:
        for name, node in tree[DERIVED].children.items():
            if node.is_dataset:
                res.derived[name] = node.value
                res.derived_units[name] = node.attrs.get("unit", "")
                if "note" in node.attrs:
                    res.derived_notes[name] = node.attrs["note"]
    for key, target in ((PROFILE, res.profile), (SPECTRUM, res.spectrum)):
        if key in tree:
            _flatten(tree[key], "", target)
    if MEASUREMENTS in tree:
        order = _strings(tree[INPUT_MEASUREMENTS].value) if INPUT_MEASUREMENTS in tree else []
        children = tree[MEASUREMENTS].children
        for name in [n for n in order if n in children] + sorted(set(children) - set(order)):
            node = children[name]
            out = {"@attrs": {k: _lists(v) for k, v in node.attrs.items()}}
            _flatten(node, "", out)
            res.measurements[name] = out
    if DIAGNOSTICS in tree:
        g = tree[DIAGNOSTICS]
        res.diagnostics = {k: _lists(v) for k, v in g.attrs.items()}
        for name, node in g.children.items():
            res.diagnostics[name] = _lists(node.value)
    elif MCMC in tree:
        res.diagnostics = {"steps": int(tree[MCMC].attrs.get("iteration", 0)),
                           "converged": False}
    if START in tree:
        res.start = dict(tree[START].attrs)
    if f"{MCMC}/chain" in tree and tree[f"{MCMC}/chain"].value is not None:
        res.chain = np.asarray(tree[f"{MCMC}/chain"].value, dtype=float)
        if f"{MCMC}/log_prob" in tree:
            res.log_prob = np.asarray(tree[f"{MCMC}/log_prob"].value, dtype=float)
    return res


def _flatten(node, prefix: str, out: dict) -> None:
    for key, child in node.children.items():
        name = f"{prefix}{key}"
        if child.is_dataset:
            out[name] = child.value
        else:
            _flatten(child, name + "/", out)
