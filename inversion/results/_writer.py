"""The one writer of result files: what an inversion puts where, in the names of
:mod:`inversion.results._schema`.

:func:`create_result` starts a file (input, sampler backend, parameter names),
:func:`open_for_resume` checks and reopens one, :func:`write_start` records the start point,
and :func:`write_posterior` writes the final groups (posterior draws and summary, derived
quantities, profile bands, spectra, diagnostics) in one staged swap.
"""

from __future__ import annotations

from pathlib import Path

import emcee
import numpy as np

from forward import InputError

from ._backend import SafeHDFBackend
from ._schema import (DATASETS, DERIVED, DIAGNOSTICS, FORMAT_VERSION, INTERVAL_NOTE,
                      LOG_POSTERIOR, MCMC, MEASUREMENTS, POSTERIOR_PRIORS, PROFILE, QUANTILES,
                      SAMPLES, SPECTRUM, START, SUMMARY, attrs_of)
from ._store import (HDF5_ERRORS, damaged_message, has_same_input, now_text, read_attrs,
                     read_mcmc_head, set_attrs, write_groups, write_input)
from ._summary import summarise

__all__ = ["create_result", "open_for_resume", "write_start", "read_starts", "write_posterior",
           "set_status", "open_chain"]


def create_result(path, *, run_text, counts, measured, priors, attrs, names, units,
                  n_walkers: int, ndim: int, measurements=None) -> SafeHDFBackend:
    """A fresh result file (any file there is replaced): input, root attributes, an empty
    chain of ``n_walkers`` x ``ndim``; returns its backend.  ``measurements``: a joint run's
    ``(names, channels per spectrum)``, stored under ``/input``.

    Raises
    ------
    forward.InputError
        When the file cannot be written (a full disk, no permission).
    """
    path = Path(path)
    try:
        if path.exists():
            path.unlink()
        write_input(path, run_text=run_text, counts=counts, measured=measured, priors=priors,
                    attrs=dict(attrs, emcee_version=emcee.__version__),
                    measurements=measurements)
        backend = SafeHDFBackend(str(path), name=MCMC)
        backend.reset(n_walkers, ndim)
        set_attrs(path, MCMC, parameter_names=names, parameter_units=units)
    except OSError as exc:
        reason = exc.strerror or " ".join(str(exc).split())
        raise InputError(f"cannot write the result file: {reason}; choose a folder you can "
                         "write to, with free space", where=str(path)) from exc
    return backend


def open_for_resume(path, *, run_text: str, counts, n_walkers: int, ndim: int,
                    command: str) -> tuple[SafeHDFBackend, int | None]:
    """Reopen a result file to continue its chain: same run text and counts, same walkers and
    parameters, every stored step readable (checksums verified).

    Returns
    -------
    backend : SafeHDFBackend
    seed : int or None
        The seed the file was started with.

    Raises
    ------
    forward.InputError
        A folder, another run or spectrum, other walkers or parameters, or a damaged file.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError("this is a folder, not a result file", where=str(path))
    try:
        same_input = has_same_input(path, run_text=run_text, counts=counts)
    except InputError as exc:
        raise InputError(f"cannot resume: {exc.message}", where=str(path)) from exc
    if not same_input:
        raise InputError("cannot resume: the file holds a different run file or spectrum "
                         "(or is no result file); use --force to start afresh", where=str(path))
    try:
        root, stored = read_mcmc_head(path)
    except InputError as exc:
        raise InputError(f"cannot resume: {exc.message}", where=str(path)) from exc
    if stored is not None and (int(stored["nwalkers"]) != n_walkers
                               or int(stored["ndim"]) != ndim):
        raise InputError("cannot resume: walkers or parameters differ from the file's",
                         where=str(path))
    try:
        backend = SafeHDFBackend(str(path), name=MCMC)
        if stored is not None and int(backend.iteration) > 0:
            # read every stored step (checksums verified) and the state to continue from
            backend.get_chain()
            backend.get_log_prob()
            backend.get_last_sample()
    except HDF5_ERRORS as exc:
        raise InputError("cannot resume: " + damaged_message(exc), where=str(path)) from exc
    if not backend.initialized:
        backend.reset(n_walkers, ndim)
    # the final groups are written anew in this version's layout
    set_attrs(path, command=command, resumed=now_text(), status="running",
              format_version=FORMAT_VERSION)
    seed = root.get("seed")
    return backend, None if seed is None else int(seed)


def write_start(path, theta, log_posterior: float, names, *, searches=None,
                search_log_posterior=None, method: str = "") -> None:
    """Record the start of the chain (``/start`` attributes): the best start point, and the
    optimum of every independent start search."""
    extra = {}
    if searches is not None:
        extra = {"searches": np.asarray(searches, dtype=float),
                 "search_log_posterior": np.asarray(search_log_posterior, dtype=float)}
    set_attrs(path, START, theta=theta, log_posterior=log_posterior, names=names,
              method=method or "differential evolution in prior bounds, Nelder-Mead polish",
              **extra)


def read_starts(path):
    """``(log_posteriors, thetas)`` of the start searches stored in ``/start`` (None when the
    file predates them)."""
    attrs = read_attrs(path, START)
    if "searches" not in attrs:
        return None
    return (np.asarray(attrs["search_log_posterior"], dtype=float),
            np.asarray(attrs["searches"], dtype=float))


def set_status(path, **attrs) -> None:
    """Root attributes such as ``finished`` and ``status``."""
    set_attrs(path, **attrs)


def open_chain(path) -> SafeHDFBackend:
    """The stored chain, read-only."""
    return SafeHDFBackend(str(path), name=MCMC, read_only=True)


def write_posterior(path, *, spec, samples, log_posterior, discard: int, thin: int,
                    derived_names, derived_units, derived_notes, derived, depth_1e15,
                    depth_nm, bands, counts, window, run_calibration_keV,
                    diagnostics: dict, measurements=None) -> None:
    """Write the final groups of a result file in one staged swap.

    Parameters
    ----------
    path : path
    spec : FitSpec
        Names, units and priors of the free parameters.
    samples, log_posterior : ndarray
        Posterior draws (draws, parameters) after burn-in and thinning, and their
        log-posteriors.
    discard, thin : int
        Burn-in steps dropped and the thinning step.
    derived_names, derived_units : list of str
    derived_notes : dict
        Why a derived quantity is NaN.
    derived : ndarray (draws, derived quantities)
    depth_1e15, depth_nm : ndarray (depth_nm may be None)
        Slice centres.
    bands : inversion.fit._bands.Bands
    counts, window : ndarray
        The measured counts and the likelihood's channels.
    run_calibration_keV : sequence of 3 floats
        The run file's calibration: offset (keV), gain (keV/channel), quadratic term
        (keV/channel^2); stored as an attribute of ``/spectrum`` for the figures' energy axis.
    diagnostics : dict
        From :func:`inversion.sample._convergence.diagnostics`.
    measurements : list of dict, optional
        A joint run's spectra, each ``{name, bands, counts, window, run_calibration_keV,
        check}`` and optionally ``detector_group`` and ``charge_group``: written as
        ``/measurements/<name>`` (the datasets of ``/spectrum``, the spectrum's own predictive
        check, the attributes ``detector_group`` and ``charge_group`` when it has them) instead
        of ``/spectrum``; ``bands`` then gives the profile bands only.
    """
    names, units = spec.names, spec.units
    summary = summarise(np.column_stack([samples, derived]) if derived.size else samples)
    groups = {}
    groups["posterior"] = {
        _leaf(SAMPLES): (samples, attrs_of(SAMPLES, names=names, units=units, discard=discard,
                                           thin=thin)),
        _leaf(LOG_POSTERIOR): (log_posterior, attrs_of(LOG_POSTERIOR)),
        _leaf(POSTERIOR_PRIORS): np.array(spec.describe_priors(), dtype=object),
        _leaf(SUMMARY): {"names": np.array(names + derived_names, dtype=object),
                         "units": np.array(units + derived_units, dtype=object),
                         **summary, "@attrs": {"intervals": INTERVAL_NOTE}},
    }
    groups[DERIVED] = {
        name: (derived[:, i], {"unit": unit, **({"note": derived_notes[name]}
                                                if name in derived_notes else {})})
        for i, (name, unit) in enumerate(zip(derived_names, derived_units))}

    profile = {"depth": (depth_1e15, attrs_of("profile/depth")),
               "@attrs": {"quantiles": QUANTILES, "draws": bands.draws,
                          "model": spec.profile}}
    if depth_nm is not None:
        profile["depth_nm"] = (depth_nm, attrs_of("profile/depth_nm"))
    if spec.profile == "nodes":
        profile["node_depth"] = (np.asarray(spec.nodes["node_depth_1e15"], dtype=float),
                                 attrs_of("profile/node_depth"))
    if bands.draws:
        for sp, q in bands.profile.items():
            profile[sp] = (q, attrs_of("profile/{species}", quantiles=QUANTILES))
            profile[f"{sp}_map"] = (bands.profile_map[sp], attrs_of("profile/{species}_map"))
    groups[PROFILE] = profile
    if measurements is None:
        groups[SPECTRUM] = _spectrum_group(counts, window, bands, run_calibration_keV)
    else:
        groups[MEASUREMENTS] = {m["name"]: _measurement_group(m) for m in measurements}

    d = dict(diagnostics)
    per_parameter = {"autocorr_time", "ess", "rhat"}
    groups[DIAGNOSTICS] = {}
    for key in list(d):
        # arrays with a schema entry are datasets; everything else is an attribute
        if f"diagnostics/{key}" in DATASETS and isinstance(d[key], np.ndarray):
            extra = {"names": names} if key in per_parameter else {}
            groups[DIAGNOSTICS][key] = (d.pop(key), attrs_of(f"diagnostics/{key}", **extra))
    groups[DIAGNOSTICS]["@attrs"] = d
    write_groups(path, groups)


def _spectrum_group(counts, window, bands, run_calibration_keV) -> dict:
    """The datasets of ``/spectrum`` (one spectrum's counts, window and predictive bands)."""
    spectrum = {"channel": np.arange(counts.size),
                "counts": (counts, attrs_of("spectrum/counts")),
                "window": (window, attrs_of("spectrum/window")),
                "energy_keV": (bands.energy_keV, attrs_of("spectrum/energy_keV")),
                "@attrs": {"run_calibration_keV": np.asarray(run_calibration_keV, dtype=float)}}
    if bands.draws:
        spectrum["predictive"] = (bands.predictive, attrs_of("spectrum/predictive",
                                                             quantiles=QUANTILES))
        spectrum["model_median"] = (bands.model_median, attrs_of("spectrum/model_median"))
        spectrum["species"] = {sp: (row, attrs_of("spectrum/species/{species}"))
                               for sp, row in bands.species.items()}
    return spectrum


def _measurement_group(m: dict) -> dict:
    """``/measurements/<name>``: the spectrum's datasets and its own predictive check."""
    group = _spectrum_group(m["counts"], m["window"], m["bands"], m["run_calibration_keV"])
    if m.get("detector_group"):
        # its calibration and resolution are the parameters <quantity>@<detector group>
        group["@attrs"]["detector_group"] = str(m["detector_group"])
    if m.get("charge_group"):
        # its fluence is the parameter fluence_scale@<charge group>
        group["@attrs"]["charge_group"] = str(m["charge_group"])
    check = m.get("check")
    if check is not None:
        group["@attrs"].update(ppc_p_value=check.p_value, model_rejected=check.rejected,
                               ppc_alpha=check.alpha, ppc_z_limit=check.z_limit)
        group["ppc_deviance"] = (np.column_stack([check.deviance_observed,
                                                  check.deviance_replicated]),
                                 attrs_of("measurements/{name}/ppc_deviance"))
        group["ppc_blocks"] = (np.column_stack([check.block_first, check.block_last,
                                                check.block_z]),
                               attrs_of("measurements/{name}/ppc_blocks"))
        group["ppc_ranges"] = (np.array(check.ranges, dtype=np.int64).reshape(-1, 3),
                               attrs_of("measurements/{name}/ppc_ranges"))
    return group


def _leaf(path: str) -> str:
    return path.rsplit("/", 1)[1]
