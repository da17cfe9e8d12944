"""What a report shows, taken from a result file through the one reader
(:func:`inversion.results._result.read_result`): :class:`ReportData`.

Every number in the summaries comes from the file: medians and central intervals from
``/posterior/summary`` where the file has them, otherwise computed here from the stored draws
(``/posterior/samples`` and ``/derived``) with the same definition
(:func:`inversion.results._summary.summarise`).  Statistics use the one vocabulary of
:data:`inversion.results._schema.STATS`.
"""

from __future__ import annotations

import hashlib
import json
import math
import dataclasses
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from forward import InputError

from ..results._result import Result, read_result
from ..results._schema import DIAGNOSTICS, PROFILE, QUANTILES, SAMPLES, SPECTRUM, STATS
from ..results._summary import summarise

__all__ = ["ReportData", "Quantity", "read_report_data", "report_data", "summarise_draws",
           "unit_from_name", "PROFILE_QUANTILES"]

#: The quantiles (percent) stored for each profile and predictive band, lowest first.
PROFILE_QUANTILES = tuple(100.0 * q for q in QUANTILES)

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
        ``median``, ``mean``, ``sd``, ``low68``, ``high68``, ``low95``, ``high95``; for
        parameters also ``autocorr_time_steps`` and ``effective_sample_size`` when the file has
        diagnostics.
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
    #: the pre-flight warnings about the inputs (/diagnostics attribute ``input_warnings``):
    #: signals closer than the resolution, non-Rutherford onsets, stopping above its validated
    #: range, a calibration accepted deliberately, the readers' warnings
    input_warnings: list = field(default_factory=list)
    # read by _figure_inputs() below, for the figures
    profile_model: str = ""  # "layers", "nodes" or "" (the file does not say)
    node_depth_1e15: np.ndarray | None = None  # depths of the free-form profile's nodes
    model_rejected: bool | None = None  # the posterior predictive check's verdict, if any
    ppc_p_value: float | None = None
    ppc_ranges: np.ndarray | None = None  # (ranges, 3) int: first, last channel, sign
    #: a joint run: measurement name -> a ReportData whose spectrum fields are that spectrum's
    measurements: dict = field(default_factory=dict)

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


def _text(value) -> str:
    """An attribute value as text."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        if value.shape == ():
            return _text(value[()])
        return ", ".join(_text(v) for v in value.ravel())
    if isinstance(value, (list, tuple)):
        return ", ".join(_text(v) for v in value)
    if isinstance(value, np.generic):
        return _text(value.item())
    return str(value)


def _strings(value) -> list[str]:
    """A list-of-strings attribute (a list, or JSON list text)."""
    if value is None:
        return []
    if isinstance(value, (bytes, str)):
        text = _text(value)
        try:
            loaded = json.loads(text)
        except ValueError:
            return [text]
        return [str(v) for v in loaded] if isinstance(loaded, list) else [text]
    return [_text(v) for v in np.asarray(value, dtype=object).ravel()]


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
    """The summary statistics (:data:`STATS`) of one quantity's finite draws, as floats; NaN
    when no draw is finite."""
    x = np.asarray(draws, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {k: math.nan for k in STATS}
    return summarise(x)


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
        When the file is missing, is not HDF5, is damaged, is still being written, or has no
        ``/posterior/samples``.
    """
    return report_data(read_result(path, chain=True, require_finished=True))


def report_data(result: Result) -> ReportData:
    """A :class:`ReportData` from a result already read (with ``chain=True`` for the
    convergence figure)."""
    path = Path(result.path)
    if result.samples is None:
        status = _text(result.attrs.get("status", ""))
        hint = f" (the file's status is {status!r})" if status else ""
        raise InputError(f"no posterior draws in this file{hint}; a report needs "
                         f"/{SAMPLES}, written when a run finishes or is interrupted",
                         where=f"{path}: /{SAMPLES}")
    data = ReportData(path=path)
    data.provenance = dict(result.attrs)
    hashes = {}
    if result.run_text:
        data.run_text = result.run_text
        hashes["run file text stored in the result"] = _sha256(data.run_text.encode("utf-8"))
    if result.counts is not None:
        counts = np.ascontiguousarray(result.counts, dtype="<f8")
        hashes["spectrum counts stored in the result (float64, little-endian)"] = \
            _sha256(counts.tobytes())
    data.provenance["_input_hashes"] = hashes

    samples = np.asarray(result.samples, dtype=float)
    if samples.ndim == 1:
        samples = samples[:, None]
    names = _strings(result.names)
    if len(names) != samples.shape[1]:
        names = [f"parameter_{i}" for i in range(samples.shape[1])]
    units = _strings(result.units)
    if len(units) != len(names):
        units = [unit_from_name(n) for n in names]
    data.samples = samples
    data.parameter_names = names
    priors = {}
    for line in result.priors:
        m = _PRIOR_LINE.match(line)
        if m:
            priors[m["name"]] = m["prior"].strip()
    rows = result.summary_rows

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
    stored = {k: v for k, v in result.derived.items()
              if isinstance(v, np.ndarray) and v.dtype.kind in "fiu"}
    in_summary = {r[0] for r in derived_rows}
    order = [r[0] for r in derived_rows] + [n for n in stored if n not in in_summary]
    derived_summary = {r[0]: (r[1], r[2]) for r in derived_rows}
    for name in order:
        unit, summary_stats = derived_summary.get(name, (unit_from_name(name), {}))
        if name not in stored:  # summarised but without stored draws
            full = {k: summary_stats.get(k, math.nan) for k in STATS}
            data.quantities.append(Quantity(name, "derived", unit, full))
            continue
        draws = np.asarray(stored[name], dtype=float).ravel()
        if result.derived_units.get(name):
            unit = _text(result.derived_units[name])
        stats = summarise_draws(draws)
        stats.update(summary_stats)
        note = _text(result.derived_notes.get(name, ""))
        data.quantities.append(Quantity(name, "derived", unit, stats, "", draws, note))

    prof = result.profile
    if "depth" in prof:
        data.depth_1e15 = np.asarray(prof["depth"], dtype=float)
    if "depth_nm" in prof:
        data.depth_nm = np.asarray(prof["depth_nm"], dtype=float)
    for key, value in prof.items():
        if key in ("depth", "depth_nm", _NODE_DEPTH) or "/" in key:
            continue
        arr = np.asarray(value, dtype=float)
        if key.endswith("_map"):
            data.profile_map[key[:-4]] = arr
        elif arr.ndim == 2 and arr.shape[0] == len(PROFILE_QUANTILES):
            data.profile_bands[key] = arr

    if not result.measurements:
        _spectrum_fields(data, result.spectrum, counts=result.counts)
    data.calibration, data.calibration_source = _calibration(data, result)

    if result.chain is not None and result.chain.ndim == 3:
        data.chain = result.chain
        data.log_prob = result.log_prob

    _figure_inputs(data, result)
    if DIAGNOSTICS in result.parts:
        diag = dict(result.diagnostics)
        data.diagnostics = diag
        data.warnings = [w for w in _strings(diag.get("warnings"))
                         if w.strip() and w.strip().lower() != "none"]
        data.input_warnings = [w for w in _strings(diag.get("input_warnings"))
                               if w.strip() and w.strip().lower() != "none"]
        tau = _per_parameter(diag, ("autocorr_time",), len(names))
        ess = _per_parameter(diag, ("ess",), len(names))
        for i, q in enumerate(data.quantities[:len(names)]):
            if tau is not None:
                q.stats["autocorr_time_steps"] = float(tau[i])
            if ess is not None:
                q.stats["effective_sample_size"] = float(ess[i])
    for name, spec in result.measurements.items():  # a joint run: a panel per spectrum
        data.measurements[name] = _measurement_data(data, result, name, spec)
    return data


def _spectrum_fields(data: ReportData, spec: dict, counts=None) -> None:
    """One spectrum's counts, window, predictive bands and channel energies."""
    if "counts" in spec:
        data.counts = np.asarray(spec["counts"], dtype=float)
    elif counts is not None:
        data.counts = np.asarray(counts, dtype=float)
    if data.counts is not None:
        data.channel = np.asarray(spec["channel"], dtype=float) if "channel" in spec else \
            np.arange(data.counts.size, dtype=float)
    if "predictive" in spec:
        data.predictive = np.asarray(spec["predictive"], dtype=float)
    if "model_median" in spec:
        data.model_median = np.asarray(spec["model_median"], dtype=float)
    if "window" in spec:
        data.window = np.asarray(spec["window"], dtype=bool)
    if "energy_keV" in spec:
        data.channel_energy_keV = np.asarray(spec["energy_keV"], dtype=float)
    for key, value in spec.items():
        if key.startswith("species/"):
            data.species_spectra[key[len("species/"):]] = np.asarray(value, dtype=float)


def _measurement_data(data: ReportData, result: Result, name: str, spec: dict) -> ReportData:
    """The report data of one spectrum of a joint run: the shared parts of ``data``, the
    spectrum, calibration and predictive check of measurement ``name``."""
    part = dataclasses.replace(data, measurements={}, species_spectra={}, counts=None,
                               channel=None, predictive=None, model_median=None, window=None,
                               channel_energy_keV=None, ppc_ranges=None, model_rejected=None,
                               ppc_p_value=None)
    _spectrum_fields(part, spec)
    attrs = spec.get("@attrs", {})
    # a measurement of a detector group has its calibration under the group's name
    owner = _text(attrs["detector_group"]) if "detector_group" in attrs else name
    part.calibration, part.calibration_source = _calibration(
        part, result, attrs.get("run_calibration_keV"), suffix=f"@{owner}")
    _predictive_check(part, {**attrs, **{k: v for k, v in spec.items() if k != "@attrs"}})
    return part


#: names the figures read beyond the bands (README, "Result file"); optional, absent from older
#: files: ``/profile`` attribute ``model``, ``/profile/node_depth``, ``/diagnostics``
#: attributes ``model_rejected``, ``ppc_p_value`` and dataset ``ppc_ranges``
_PROFILE_MODEL, _NODE_DEPTH = "model", "node_depth"
_MODEL_REJECTED, _PPC_P_VALUE, _PPC_RANGES = "model_rejected", "ppc_p_value", "ppc_ranges"


def _figure_inputs(data: ReportData, result: Result) -> None:
    """What only the figures read: the profile model and its node depths, and the posterior
    predictive check (verdict, p-value, the channel ranges where residuals run one way).
    Every part is optional; a file without it leaves the field empty."""
    model = result.group_attrs.get(PROFILE, {}).get(_PROFILE_MODEL)
    data.profile_model = _text(model) if model is not None else ""
    if _NODE_DEPTH in result.profile:
        data.node_depth_1e15 = np.asarray(result.profile[_NODE_DEPTH], dtype=float).ravel()
    _predictive_check(data, result.diagnostics)


def _predictive_check(data: ReportData, found: dict) -> None:
    """The predictive check's verdict, p-value and ranges from ``/diagnostics`` (or a joint
    run's ``/measurements/<name>``), where the file has them."""
    if _MODEL_REJECTED in found:
        data.model_rejected = bool(np.asarray(found[_MODEL_REJECTED]).any())
    if _PPC_P_VALUE in found:
        data.ppc_p_value = float(np.asarray(found[_PPC_P_VALUE], dtype=float).ravel()[0])
    if _PPC_RANGES in found:
        ranges = np.asarray(found[_PPC_RANGES], dtype=float)
        data.ppc_ranges = ranges.reshape(-1, 3).astype(int) if ranges.size else \
            np.zeros((0, 3), dtype=int)


def _calibration(data: ReportData, result: Result, stored=None, *,
                 suffix: str = "") -> tuple[dict, str]:
    """Channel-to-energy calibration for the energy axis, and where it came from.

    Sampled ``gain_keV`` / ``offset_keV`` parameters give their posterior medians; the rest is
    the run file's calibration, stored with the spectrum (``run_calibration_keV``: offset,
    gain, quadratic).  A file without it (format version 1) shows the stored channel energies
    of the highest-posterior draw instead.
    """
    if stored is None:
        stored = result.group_attrs.get(SPECTRUM, {}).get("run_calibration_keV")
    if stored is None:
        return {}, ("channel energies at the highest-posterior draw's calibration"
                    if data.channel_energy_keV is not None else "")
    offset, gain, quadratic = (float(v) for v in np.asarray(stored, dtype=float).ravel()[:3])
    medians = {q.name: q.stats["median"] for q in data.quantities if q.kind == "parameter"}
    cal = {"offset_keV": float(medians.get("offset_keV" + suffix, offset)),
           "keV_per_channel": float(medians.get("gain_keV" + suffix, gain)),
           "quadratic_keV": quadratic}
    sampled = [n + suffix for n in ("gain_keV", "offset_keV") if n + suffix in medians]
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
