"""Library entry points: :func:`invert` a spectrum into posterior depth profiles, and
:func:`read_result` (re-exported from ``_store``)."""

from __future__ import annotations

import math
import sys
import warnings
from pathlib import Path

import emcee
import h5py
import numpy as np

import forward
from forward import InputError

from ._fitspec import depth_limit_of, parse_fit
from ._objective import ModelBuilder, Objective, first_fit_channel
from ._outputs import WriterLock, check_output, spectrum_file
from ._sampler import SafeHDFBackend, Sampler, stop_on_interrupt
from ._store import (MCMC_GROUP, QUANTILES, Result, check_input, damaged_message, now_text,
                     read_result, set_root_attrs, summarise, write_groups, write_input)

__all__ = ["invert", "read_result", "NotConvergedWarning", "prepare", "finalise", "PROGRAM"]

PROGRAM = "sondage"


class NotConvergedWarning(UserWarning):
    """The chain is shorter than ``tau_multiple`` autocorrelation times for some parameter."""


def _version() -> str:
    try:
        from importlib.metadata import version
        return version("sondage")
    except Exception:  # pragma: no cover - running from a bare checkout
        return "0+unknown"


def _load(run, spectrum):
    if not hasattr(run, "layers"):
        run = forward.load_run(run)
    if isinstance(spectrum, (str, Path)):
        spectrum = forward.read_spectrum(spectrum)
    if hasattr(spectrum, "channel") and hasattr(spectrum, "counts"):
        channel = np.asarray(spectrum.channel, dtype=int)
        values = np.asarray(spectrum.counts, dtype=float)
    else:
        values = np.asarray(spectrum, dtype=float)
        channel = np.arange(values.size)
    if values.ndim != 1 or values.size == 0:
        raise InputError("a spectrum is one non-empty row of counts", where="spectrum")
    n = int(channel.max()) + 1
    counts = np.zeros(n)
    measured = np.zeros(n, dtype=bool)
    counts[channel] = values
    measured[channel] = True
    return run, counts, measured


def _check_worth_fitting(run, counts, spectrum):
    """Refuse inputs that leave nothing to fit: a beam below every channel, no counts."""
    calibration = getattr(run, "calibration", None)
    beam = getattr(run, "beam", None)
    if calibration is not None and beam is not None:
        lowest_keV = float(calibration.energy_keV(0.0))
        beam_keV = float(beam.energy_keV)
        if beam_keV <= lowest_keV:
            raise InputError(
                f"the beam energy {beam_keV:g} keV is not above the lowest channel's energy "
                f"{lowest_keV:g} keV, so no backscattered particle can reach the spectrum; "
                "allowed: an offset below the beam energy", where=f"{run.source}: "
                "calibration.offset_keV")
    if not np.any(np.asarray(counts) > 0):
        source = getattr(spectrum, "source", None) or (
            str(spectrum) if isinstance(spectrum, (str, Path)) else "spectrum")
        raise InputError("every count is zero: there is nothing to fit; give a measured "
                         "spectrum with counts", where=source)


def prepare(run, spectrum, *, build_model=None, likelihood=True):
    """Build the objective for a run and a spectrum (no sampling, no file).

    Parameters
    ----------
    run : forward.Run or path
    spectrum : forward.Spectrum, path, or array of counts (channel 0 first)
    build_model : callable, optional
        ``build_model() -> ForwardModel``; default rebuilds ``forward.ForwardModel`` from the
        run file's text (what worker processes do).
    likelihood : bool
        False: posterior = prior.

    Returns
    -------
    run : forward.Run
    objective : Objective
    """
    run, counts, measured = _load(run, spectrum)
    _check_worth_fitting(run, counts, spectrum)
    if build_model is None:
        build_model = ModelBuilder(run.text, run.source, counts.size,
                                   base_dir=getattr(run, "base_dir", None),
                                   depth_limit_1e15=depth_limit_of(run.fit, run.source),
                                   first_channel=first_fit_channel(run.fit, counts.size))
    model = build_model()
    spec = parse_fit(run.fit, run, model)
    objective = Objective(spec, counts, build_model, model, measured=measured,
                          likelihood=likelihood)
    return run, objective


def invert(run, spectrum, output, *, seed=0, max_steps=None, resume=False, force=False,
           workers=1, progress=True, command=None, build_model=None, likelihood=True) -> Result:
    """Sample the posterior of the run's free parameters given a measured spectrum.

    Parameters
    ----------
    run : forward.Run or path
        The run file (sample model, experiment, ``[fit]`` table).
    spectrum : forward.Spectrum, path, or array of counts
        The measured spectrum.
    output : path
        The HDF5 result file.  Never overwritten unless ``force``; continued with ``resume``.
    seed : int
        Seeds the start search, the walkers and the band draws; the same seed gives
        bit-identical samples.
    max_steps : int, optional
        Total steps in the chain (default ``fit.max_steps``).
    resume : bool
        Continue the chain stored in ``output`` (same run text and counts required).
    force : bool
        Replace an existing ``output``.
    workers : int
        Processes evaluating the model (see README.md, "The [fit] table" for when 2 pays).
    progress : bool
        Show a progress bar on stderr.
    command : str, optional
        The command line, stored in the file.
    build_model, likelihood
        See :func:`prepare` (for tests and studies).

    Returns
    -------
    Result
        What :func:`read_result` gives for ``output``.
    """
    output = Path(output)
    run_path = getattr(run, "source", run) if not isinstance(run, (str, Path)) else run
    inputs = {"run file": run_path if isinstance(run_path, (str, Path)) else None,
              "spectrum file": spectrum_file(spectrum)}
    run, objective = prepare(run, spectrum, build_model=build_model, likelihood=likelihood)
    spec = objective.spec
    counts = objective.counts
    if max_steps is None:
        max_steps = spec.max_steps
    if int(max_steps) < 1:
        raise InputError(f"max steps must be at least 1, got {max_steps}", where="--max-steps")
    max_steps = int(max_steps)
    workers = int(workers)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}", where="--workers")
    if command is None:
        command = f"invert({run.source!r}, output={str(output)!r}, seed={seed})"

    check_output(output, inputs=inputs, force=True, resume=True, kind="result file")
    if not output.parent.is_dir():
        raise InputError(f"folder {str(output.parent)!r} does not exist; create it first or "
                         "write the result elsewhere", where=str(output))
    with WriterLock(output):
        # one writer at a time: checked under the lock, so no second process can start
        # between the check and the first write
        check_output(output, inputs=inputs, force=force, resume=resume, resumable=True,
                     kind="result file")
        return _invert_locked(output, run, objective, seed=seed, max_steps=max_steps,
                              resume=resume, workers=workers, progress=progress,
                              command=command)


def _invert_locked(output, run, objective, *, seed, max_steps, resume, workers, progress,
                   command) -> Result:
    """The body of :func:`invert`, run while holding the result file's writer lock."""
    spec = objective.spec
    counts = objective.counts
    n_walkers = spec.n_walkers
    if resume and output.exists():
        if output.is_dir():
            raise InputError("this is a folder, not a result file", where=str(output))
        try:
            same_input = h5py.is_hdf5(output) and check_input(output, run_text=run.text,
                                                              counts=counts)
        except (OSError, KeyError, ValueError, TypeError, RuntimeError) as exc:
            raise InputError("cannot resume: " + damaged_message(exc), where=str(output)) \
                from exc
        if not same_input:
            raise InputError("cannot resume: the file holds a different run file or spectrum "
                             "(or is no result file); use --force to start afresh",
                             where=str(output))
        try:
            with h5py.File(output, "r") as f:
                seed = int(f.attrs.get("seed", seed))
                stored = dict(f[MCMC_GROUP].attrs) if MCMC_GROUP in f else None
            if stored is not None and (int(stored["nwalkers"]) != n_walkers
                                       or int(stored["ndim"]) != objective.ndim):
                raise InputError("cannot resume: walkers or parameters differ from the file's",
                                 where=str(output))
            backend = SafeHDFBackend(str(output), name=MCMC_GROUP)
            if stored is not None and int(backend.iteration) > 0:
                # read every stored step (checksums verified) and the state to continue from
                backend.get_chain()
                backend.get_log_prob()
                backend.get_last_sample()
        except (OSError, KeyError, ValueError, TypeError, RuntimeError) as exc:
            raise InputError("cannot resume: " + damaged_message(exc), where=str(output)) \
                from exc
        if not backend.initialized:
            backend.reset(n_walkers, objective.ndim)
        set_root_attrs(output, command=command, resumed=now_text(), status="running")
    else:
        try:
            if output.exists():
                output.unlink()
            write_input(output, run_text=run.text, counts=counts, measured=objective.measured,
                        priors=spec.describe_priors(),
                        attrs=dict(program=PROGRAM, version=_version(), seed=int(seed),
                                   command=command, started=now_text(), status="running",
                                   emcee_version=emcee.__version__, profile_model=spec.profile,
                                   moves=spec.moves))
            backend = SafeHDFBackend(str(output), name=MCMC_GROUP)
            backend.reset(n_walkers, objective.ndim)
            with h5py.File(output, "a") as f:
                g = f[MCMC_GROUP]
                g.attrs["parameter_names"] = spec.names
                g.attrs["parameter_units"] = spec.units
        except OSError as exc:
            reason = exc.strerror or " ".join(str(exc).split())
            raise InputError(f"cannot write the result file: {reason}; choose a folder you can "
                             "write to, with free space", where=str(output)) from exc

    sampler = Sampler(objective, n_walkers=n_walkers, seed=seed, backend=backend,
                      workers=workers, moves=spec.moves)

    def on_start(theta, logp):
        if bar is not None:
            bar.set_description("sampling")
        with h5py.File(output, "a") as f:
            g = f.require_group("start")
            g.attrs["theta"] = theta
            g.attrs["log_posterior"] = logp
            g.attrs["names"] = spec.names
            g.attrs["method"] = "differential evolution in prior bounds, Nelder-Mead polish"

    bar = None
    if progress:
        from tqdm import tqdm
        fresh = int(backend.iteration) == 0
        bar = tqdm(total=max_steps, initial=int(backend.iteration), unit="step",
                   desc="start search" if fresh else "sampling", file=sys.stderr,
                   dynamic_ncols=True,
                   # into a log file (not a terminal): a line every 30 s, not every step
                   mininterval=0.1 if sys.stderr.isatty() else 30.0)
    last = [int(backend.iteration)]

    def on_step(step):
        if bar is not None:
            bar.update(step - last[0])
        last[0] = step

    try:
        with stop_on_interrupt() as should_stop:
            status = sampler.run(max_steps=max_steps, tau_multiple=spec.tau_multiple,
                                 check_every=spec.check_every, progress=on_step,
                                 should_stop=should_stop, on_start=on_start)
    finally:
        if bar is not None:
            bar.close()

    messages = []
    if status.interrupted:
        messages.append(f"interrupted after {status.steps} steps; the file is resumable: run the "
                        f"same command with --resume to continue")
    if not status.converged:
        tau_max = float(np.nanmax(status.tau)) if np.any(np.isfinite(status.tau)) else math.nan
        messages.append(
            f"NOT CONVERGED: {status.steps} steps, but {spec.tau_multiple:g} x the longest "
            f"autocorrelation time ({tau_max:.1f} steps) is "
            f"{spec.tau_multiple * tau_max:.0f}; intervals may be too narrow or misplaced. "
            "Continue with --resume and a larger --max-steps")
    finalise(output, objective, status, seed=seed, messages=messages)
    set_root_attrs(output, finished=now_text(),
                   status="interrupted" if status.interrupted else
                   ("converged" if status.converged else "not converged"))
    for m in messages:
        warnings.warn(m, NotConvergedWarning, stacklevel=2)
    return read_result(output)


def _depth_nm(objective):
    """Slice-centre depths in nm from the run's layers, or None if a layer has no density."""
    spec = objective.spec
    layers = spec.layers
    nm_per = []
    for L in layers:
        if L.atoms_per_cm3 is None:
            return None
        nm_per.append(1e22 / L.atoms_per_cm3)
    t = objective.base_thickness
    from ._profiles import LayerStack
    stack = LayerStack(objective.edges_1e15, len(spec.species), len(layers),
                       layers[-1].substrate)
    w = stack.weights(t, np.zeros(stack.n_interfaces))
    per_slice = w[:, : len(layers)] @ np.array(nm_per)
    if not layers[-1].substrate:  # below the sample: keep the last layer's scale
        per_slice = per_slice + w[:, -1] * nm_per[-1]
    edges_nm = np.concatenate([[0.0], np.cumsum(objective.widths_1e15 * per_slice)])
    return 0.5 * (edges_nm[1:] + edges_nm[:-1])


def finalise(output, objective, status, *, seed, messages):
    """Posterior draws, derived quantities, bands, predictive spectra and diagnostics."""
    spec = objective.spec
    backend = SafeHDFBackend(str(output), name=MCMC_GROUP, read_only=True)
    steps = int(backend.iteration)
    groups = {}
    tau = np.asarray(status.tau, dtype=float)
    tau_max = float(np.nanmax(tau)) if np.any(np.isfinite(tau)) else 1.0
    if steps == 0:
        return
    discard = int(min(math.ceil(3 * tau_max), steps // 2))
    thin = max(1, int(tau_max / 2))
    samples = backend.get_chain(discard=discard, thin=thin, flat=True)
    logp = backend.get_log_prob(discard=discard, thin=thin, flat=True)
    chain_all = backend.get_chain()
    logp_all = backend.get_log_prob()
    best = np.unravel_index(np.argmax(logp_all), logp_all.shape)
    theta_map = chain_all[best]

    derived_names, derived_units, notes = objective.derived_names()
    derived = np.array([objective.derived(t) for t in samples])
    all_names = spec.names + derived_names
    all_units = spec.units + derived_units
    summ = summarise(np.column_stack([samples, derived]) if derived.size else samples)
    groups["posterior"] = {
        "samples": (samples, {"names": spec.names, "units": spec.units, "discard": discard,
                              "thin": thin, "description": "posterior draws after burn-in "
                              "(discard) and thinning, walkers flattened"}),
        "log_posterior": (logp, {"unit": "natural log"}),
        "priors": np.array(spec.describe_priors(), dtype=object),
        "summary": {"names": np.array(all_names, dtype=object),
                    "units": np.array(all_units, dtype=object),
                    **{k: v for k, v in summ.items()},
                    "@attrs": {"intervals": "central: low68/high68 = 16/84 %, "
                                            "low95/high95 = 2.5/97.5 % quantiles"}},
    }
    groups["derived"] = {name: (derived[:, i], {"unit": unit, **({"note": notes[name]}
                                                                  if name in notes else {})})
                         for i, (name, unit) in enumerate(zip(derived_names, derived_units))}

    # bands and predictive spectra from seeded draws
    rng = np.random.default_rng(seed + 2)
    n_draws = min(spec.band_draws, samples.shape[0]) if samples.shape[0] else 0
    idx = rng.choice(samples.shape[0], size=n_draws, replace=False) if n_draws else []
    n_ch = objective.counts.size
    # The fit's model may skip channels below the fit window; the predictive spectra cover
    # every channel, so they come from the same parameters on a full-range model.
    whole = objective
    if getattr(objective.model, "first_channel", 0) and hasattr(objective.build_model,
                                                                 "full_range"):
        whole = Objective(spec, objective.counts, objective.build_model.full_range(),
                          measured=objective.measured, likelihood=objective.use_likelihood)
    model = whole.model
    profiles, spectra, parts = [], [], []
    for i in idx:
        fr, nu, bg = objective.unpack(samples[i])
        profiles.append(fr)
        fr_whole = fr if whole is objective else whole.unpack(samples[i])[0]
        mu = np.maximum(np.asarray(model.expected_counts(fr_whole, nu), dtype=float), 0.0)
        mu[objective.mask] += bg
        spectra.append(mu)
        per = np.maximum(np.asarray(model.expected_counts(fr_whole, nu, per_species=True),
                                    dtype=float), 0.0)
        parts.append(per if per.shape[0] == n_ch else per.T)
    profile = {"depth": (0.5 * (objective.edges_1e15[1:] + objective.edges_1e15[:-1]),
                         {"unit": "1e15 atoms/cm2", "description": "slice centres"}),
               "@attrs": {"quantiles": QUANTILES, "draws": n_draws}}
    depth_nm = _depth_nm(objective)
    if depth_nm is not None:
        profile["depth_nm"] = (depth_nm, {"unit": "nm", "description": "slice centres, "
                                          "converted with the run file's layer densities"})
    fr_map = objective.unpack(theta_map)[0]
    spectrum = {"channel": np.arange(n_ch), "counts": (objective.counts, {"unit": "counts"}),
                "window": (objective.mask, {"description": "channels in the likelihood"}),
                "energy_keV": (np.asarray(model.channel_energy_keV(objective.unpack(theta_map)[1])),
                               {"unit": "keV", "description": "channel energies at the "
                                "highest-posterior draw's calibration"})}
    if n_draws:
        profiles = np.array(profiles)
        q = np.quantile(profiles, QUANTILES, axis=0)  # (5, slices, species)
        for j, sp in enumerate(spec.species):
            profile[sp] = (q[:, :, j], {"unit": "atom fraction", "quantiles": QUANTILES})
            profile[f"{sp}_map"] = (fr_map[:, j], {"unit": "atom fraction",
                                                   "description": "highest-posterior draw"})
        spectra = np.array(spectra)
        noisy = rng.poisson(spectra)
        spectrum["predictive"] = (np.quantile(noisy, QUANTILES, axis=0),
                                  {"unit": "counts", "quantiles": QUANTILES,
                                   "description": "posterior predictive, Poisson noise included"})
        spectrum["model_median"] = (np.median(spectra, axis=0), {"unit": "counts"})
        parts = np.median(np.array(parts), axis=0)  # (channels, species)
        spectrum["species"] = {sp: (parts[:, j], {"unit": "counts",
                                                  "description": "median model, this species"})
                               for j, sp in enumerate(spec.species)}
    groups["profile"] = profile
    groups["spectrum"] = spectrum

    acceptance = np.asarray(status.acceptance, dtype=float)
    n_total = steps * objective.spec.n_walkers
    ess = n_total / tau if np.all(np.isfinite(tau)) else np.full(tau.shape, np.nan)
    groups["diagnostics"] = {
        "autocorr_time": (tau, {"unit": "steps", "names": spec.names}),
        "acceptance": (acceptance, {"description": "acceptance fraction per walker"}),
        "ess": (ess, {"description": "effective sample size: steps x walkers / tau",
                      "names": spec.names}),
        "@attrs": {"steps": steps, "converged": bool(status.converged),
                   "interrupted": bool(status.interrupted), "tau_multiple": spec.tau_multiple,
                   "walkers": spec.n_walkers, "discard": discard, "thin": thin,
                   "warnings": messages if messages else ["none"],
                   "mean_acceptance": float(acceptance.mean()) if acceptance.size else math.nan},
    }
    write_groups(output, groups)
