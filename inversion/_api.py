"""Library entry points: :func:`prepare` the objective of a run and a spectrum, and
:func:`invert` a spectrum into posterior depth profiles in one result file.

The run is parsed once (or given parsed), the ``[fit]`` table read once and bound to the
forward model built from that run; the pieces live in :mod:`inversion.fit` (objective),
:mod:`inversion.sample` (sampler) and :mod:`inversion.results` (the file).
"""

from __future__ import annotations

import os
import sys
import warnings
from pathlib import Path

import numpy as np

import forward
from forward import InputError

from ._about import PROGRAM, version
from .fit._bands import posterior_bands
from .fit._predictive import PPC_ALPHA
from .fit._derived import depth_nm
from .fit._nodes import depth_resolution, describe_nodes
from .fit._joint import JointObjective
from .fit._objective import ModelBuilder, Objective
from .fit._spec import bind_fit, read_fit_settings, stopping_widths
from .fit._window import film_floor_channel
from ._joint import load_joint, preflight_joint
from ._inputs import (MAX_STEPS, PreflightWarning, check_seed, load_inputs, preflight_inputs,
                      replay_warnings)
from .results._outputs import WriterLock, check_output, spectrum_file
from .results._result import Result, read_result
from .results._backend import compact_result, discard_unstarted, expand_result
from .results._store import now_text, set_attrs
from .results._writer import (create_result, open_chain, open_for_resume, read_starts,
                              set_status, write_posterior, write_start)
from .sample._convergence import burn_in_and_thin, diagnostics, not_converged_message
from .fit._resolution import resolution_flags
from .sample._flags import PosteriorFlagWarning, posterior_flags
from .sample._sampler import Sampler, stop_on_interrupt

__all__ = ["invert", "invert_reporting", "read_result", "NotConvergedWarning", "prepare",
           "prepare_joint",
           "finalise", "PROGRAM", "PosteriorFlagWarning", "PreflightWarning"]


class NotConvergedWarning(UserWarning):
    """A loud warning: the chain is not converged (too short for ``tau_multiple``
    autocorrelation times, or walker groups that disagree), it was interrupted, the start
    searches disagree, or the data reject the model."""


def _load(run, spectrum):
    """The run (parsed once) and the counts with the channels the spectrum holds."""
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


def _node_resolution(settings, run, model):
    """The run's depth resolution, from which the free-form profile's node count defaults
    (None for the layer model)."""
    if settings.profile != "nodes":
        return None
    physics = getattr(run, "physics", None)
    return depth_resolution(model, getattr(physics, "slice_fraction", 0.25))


def prepare(run, spectrum, *, build_model=None, likelihood=True):
    """Build the objective for a run and a spectrum (no sampling, no file).

    Parameters
    ----------
    run : forward.Run or path
    spectrum : forward.Spectrum, path, or array of counts (channel 0 first)
    build_model : callable, optional
        ``build_model() -> ForwardModel``; default :class:`ModelBuilder` of the run (what
        worker processes call too).
    likelihood : bool
        False: posterior = prior.

    Returns
    -------
    run : forward.Run
    objective : Objective
    """
    run, counts, measured = _load(run, spectrum)
    _check_worth_fitting(run, counts, spectrum)
    settings = read_fit_settings(run.fit, run.source, counts.size)
    if build_model is None:
        # without explicit windows the model need not follow the ions below the automatic
        # window's floor (inversion/fit/_window.py)
        first = settings.first_channel if settings.windows else min(
            film_floor_channel(run), counts.size - 1)
        build_model = ModelBuilder.for_run(run, counts.size,
                                           depth_limit_1e15=settings.depth_limit_1e15,
                                           first_channel=first)
    model = build_model()
    columns = model.sample_columns()
    spec = bind_fit(settings, columns, model.default_nuisance(), stopping_widths(run, columns),
                    resolution=_node_resolution(settings, run, model))
    objective = Objective(spec, counts, build_model, model, measured=measured,
                          likelihood=likelihood)
    return run, objective


def invert(run, spectrum, output, *, seed=None, max_steps=None, resume=False, force=False,
           workers=1, progress=True, command=None, build_model=None, likelihood=True,
           accept_calibration=False, announce=None) -> Result:
    """Sample the posterior of the run's free parameters given a measured spectrum.

    Parameters
    ----------
    run : forward.Run or path
        The run file (sample model, experiment, ``[fit]`` table).
    spectrum : forward.Spectrum, path, or array of counts
        The measured spectrum.
    output : path
        The HDF5 result file.  Never overwritten unless ``force``; continued with ``resume``.
    seed : int, optional
        Seeds the start search, the walkers and the band draws (0 to 2**31 - 1; default 0);
        the same seed gives bit-identical samples.  A resumed file keeps the seed it was
        started with (a different one is ignored, with a warning).
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
        See :func:`prepare` (for tests and studies).  With either, the pre-flight comparison
        of the counts with the run's own forward model is skipped.
    accept_calibration : bool
        Go on although the counts' leading signal is not where the calibration puts it (the
        pre-flight error ``calibration.edge``); recorded as a warning.
    announce : callable, optional
        ``announce(line)`` with what the fit will do that the run file left to defaults (the
        free-form profile's nodes), before sampling.

    Returns
    -------
    Result
        What :func:`read_result` gives for ``output``.

    Raises
    ------
    forward.InputError
        Bad inputs, including everything ``sondage check`` calls an error; nothing is written.
    """
    output = Path(output)
    seed = check_seed(seed)
    run_path = getattr(run, "source", run) if not isinstance(run, (str, Path)) else run
    inputs = {"run file": run_path if isinstance(run_path, (str, Path)) else None,
              "spectrum file": spectrum_file(spectrum)}
    if spectrum is None:  # the spectra are named in the run file: several measurements
        run, objective, input_warnings, spectra = _joint_inputs(
            run, likelihood=likelihood, accept_calibration=accept_calibration)
        inputs.update(spectra)
    else:
        loaded = load_inputs(run, spectrum)
        run, objective = prepare(loaded.run, loaded.spectrum, build_model=build_model,
                                 likelihood=likelihood)
        input_warnings = [str(w.message) for w in loaded.load_warnings]
        if build_model is None and likelihood:
            input_warnings = preflight_inputs(loaded, accept_calibration=accept_calibration)
    if announce is not None and objective.spec.profile == "nodes":
        announce(describe_nodes(objective.spec.nodes, objective.spec.species))
    steps_where = "--max-steps" if max_steps is not None else f"{run.source}: fit.max_steps"
    max_steps = objective.spec.max_steps if max_steps is None else max_steps
    if int(max_steps) < 1:
        raise InputError(f"max steps must be at least 1, got {max_steps}", where=steps_where)
    if int(max_steps) > MAX_STEPS:
        raise InputError(f"max steps {max_steps} is more than any inversion needs; allowed: 1 "
                         f"to {MAX_STEPS}", where=steps_where)
    if int(workers) < 1:
        raise InputError(f"workers must be at least 1, got {workers}", where="--workers")
    cores = os.cpu_count() or 1
    if int(workers) > cores:
        warnings.warn(f"--workers {workers} is more than the {cores} cores of this machine; "
                      f"using {cores} (more processes than cores only slow each step down)",
                      forward.InputWarning, stacklevel=2)
        workers = cores
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
        fresh = not (resume and output.exists())
        backend, seed = _open_backend(output, run, objective, seed=seed, resume=resume,
                                      command=command)
        if not fresh:  # a compacted chain back in the layout steps are appended to
            expand_result(output)
        try:
            status = _sample(output, objective, backend, seed=seed, max_steps=int(max_steps),
                             workers=int(workers), progress=progress)
        except BaseException:
            if fresh:  # a new file that never got a step holds nothing worth keeping
                discard_unstarted(output)
            raise
        messages = _messages(status, objective.spec)
        converged_messages = len(messages)
        # finalise appends the posterior's flags to messages and returns the loud verdicts
        # (the model rejected by the predictive check)
        rejected = finalise(output, objective, status, seed=seed, messages=messages)
        set_attrs(output, "diagnostics", input_warnings=input_warnings or ["none"])
        set_status(output, finished=now_text(),
                   status="interrupted" if status.interrupted else
                   ("converged" if status.converged else "not converged"))
        try:
            compact_result(output)
        except (OSError, InputError) as exc:  # the file is whole, only larger than it could be
            warnings.warn(f"{output}: the finished result file could not be compacted "
                          f"({' '.join(str(exc).split())}); it is complete, only larger",
                          forward.InputWarning, stacklevel=2)
    for m in messages[:converged_messages] + rejected:
        warnings.warn(m, NotConvergedWarning, stacklevel=2)
    for m in messages[converged_messages:]:  # the posterior's flags (sample/_flags.py)
        warnings.warn(m, PosteriorFlagWarning, stacklevel=2)
    return read_result(output)


def prepare_joint(joint, *, likelihood=True, build_models=None):
    """The joint objective of every measurement of a joint run.

    Parameters
    ----------
    joint : path, forward.MeasurementSet or inversion._joint.JointInputs
        A run file with ``[[measurement]]`` tables naming its spectra, or its inputs as
        :func:`inversion._joint.load_joint` reads them.
    likelihood : bool
        False: posterior = prior.
    build_models : list of callable, optional
        One ``build_model`` per measurement (see :func:`prepare`).

    Returns
    -------
    JointObjective
    """
    if not hasattr(joint, "inputs"):
        joint = load_joint(joint)
    parts = []
    builders = build_models or [None] * len(joint.runs)
    for m, inputs, build in zip(joint.measurements.measurements, joint.inputs, builders):
        try:
            _, objective = prepare(inputs.run, inputs.spectrum, build_model=build,
                                   likelihood=likelihood)
        except InputError as exc:
            raise InputError(f"measurement {m.name!r}: {exc.message}", where=exc.where) from None
        parts.append(objective)
    found = joint.measurements
    return JointObjective(parts, found.names, [m.charge_group for m in found.measurements],
                          [m.detector_group for m in found.measurements])


def _joint_inputs(run, *, likelihood, accept_calibration):
    """``(first measurement's run, JointObjective, input warnings, {what: spectrum file})`` of
    a run file that names its spectra in ``[[measurement]]`` tables."""
    path = getattr(run, "source", run)
    if hasattr(run, "measurements"):
        found = run
    elif isinstance(path, (str, Path)) and forward.has_measurements(path):
        found = forward.load_measurements(path)
    else:
        found = None
        if isinstance(path, (str, Path)) and not Path(path).is_file():
            forward.load_run(path)  # its own message for a missing file or a folder
    if found is None or not found.joint:
        raise InputError("no spectrum given, and the run file names none; allowed: a spectrum "
                         "argument (sondage invert RUN.toml SPECTRUM -o RESULT.h5), or "
                         "[[measurement]] tables each naming its spectrum", where=str(path))
    joint = load_joint(found)
    objective = prepare_joint(joint, likelihood=likelihood)
    input_warnings = [f"measurement {m.name!r}: {w.message}"
                      for m, loaded in zip(found.measurements, joint.inputs)
                      for w in loaded.load_warnings]
    if likelihood:
        input_warnings = preflight_joint(joint, accept_calibration=accept_calibration)
    spectra = {f"spectrum file of measurement {m.name!r}": m.spectrum
               for m in found.measurements}
    return joint.runs[0], objective, input_warnings, spectra


def invert_reporting(run, spectrum, output, *, quiet=False, **kwargs) -> Result:
    """:func:`invert` as the command line runs it: a progress bar unless ``quiet``, then the
    median and 68 % interval of each thickness and width and the sampler's figures on stdout,
    and a loud banner on stderr when the chain is not converged (printed even when ``quiet``).
    Every other warning is printed once, also when an input error ends the run.

    ``kwargs`` are those of :func:`invert`.
    """
    from .report._tables import interval_table, loud

    caught = []
    if not quiet:
        kwargs.setdefault("announce", print)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            result = invert(run, spectrum, output, progress=not quiet, **kwargs)
    finally:  # also when an input error ends the run: what was found is not lost
        loud_ones = [w for w in caught if issubclass(w.category, NotConvergedWarning)]
        replay_warnings([w for w in caught if w not in loud_ones])
    if not quiet:
        table = interval_table(result)
        if table:
            print(table)
        diag = result.diagnostics
        print(f"{int(diag.get('steps', 0))} steps x {int(diag.get('walkers', 0))} walkers, "
              f"mean acceptance {float(diag.get('mean_acceptance', float('nan'))):.2f}; "
              f"result in {output}")
    for w in loud_ones:  # convergence is reported on every run, loudly, even when quiet
        print(loud(str(w.message)), file=sys.stderr)
    return result


def _open_backend(output, run, objective, *, seed, resume, command):
    """(backend, seed) of a resumed file (its own seed) or of a fresh one."""
    spec = objective.spec
    if resume and output.exists():
        backend, stored_seed = open_for_resume(output, run_text=run.text,
                                               counts=objective.counts,
                                               n_walkers=spec.n_walkers, ndim=objective.ndim,
                                               command=command)
        if stored_seed is None:
            return backend, 0 if seed is None else seed
        if seed is not None and seed != stored_seed:
            warnings.warn(f"{output}: --seed {seed} is ignored: the file was started with seed "
                          f"{stored_seed}, and a resumed chain continues with the seed it was "
                          "started with (to start afresh with another seed, use --force)",
                          forward.InputWarning, stacklevel=3)
        return backend, stored_seed
    seed = 0 if seed is None else seed
    parts = getattr(objective, "parts", None)
    backend = create_result(
        output, run_text=run.text, counts=objective.counts, measured=objective.measured,
        priors=spec.describe_priors(),
        attrs=dict(program=PROGRAM, version=version(), seed=int(seed), command=command,
                   started=now_text(), status="running", profile_model=spec.profile,
                   moves=spec.moves),
        names=spec.names, units=spec.units, n_walkers=spec.n_walkers, ndim=objective.ndim,
        measurements=None if parts is None else (objective.measurement_names,
                                                 [p.counts.size for p in parts]))
    return backend, seed


def _sample(output, objective, backend, *, seed, max_steps, workers, progress):
    """Run the sampler into the file's backend, with a progress bar (started once the start
    search is done, so that its rate and time left are those of the sampling) and Ctrl-C
    handling."""
    spec = objective.spec
    sampler = Sampler(objective, n_walkers=spec.n_walkers, seed=seed, backend=backend,
                      workers=workers, moves=spec.moves)
    bar = []
    last = [int(backend.iteration)]

    def start_bar():
        if progress and not bar:
            from tqdm import tqdm
            bar.append(tqdm(total=max_steps, initial=last[0], unit="step", desc="sampling",
                            file=sys.stderr, dynamic_ncols=True,
                            # into a log file (not a terminal): a line every 30 s
                            mininterval=0.1 if sys.stderr.isatty() else 30.0))

    if progress and last[0] == 0:
        print(f"{PROGRAM}: searching for the start point ({objective.ndim} parameters; "
              "independent differential-evolution searches, each polished)", file=sys.stderr,
              flush=True)
    else:
        start_bar()

    def on_start(thetas, logps, warning):
        best = int(np.argmax(logps))
        write_start(output, thetas[best], float(logps[best]), spec.names, searches=thetas,
                    search_log_posterior=logps,
                    method=f"{len(logps)} independent searches (differential evolution in "
                           "prior bounds, Nelder-Mead polish"
                           + (", L-BFGS-B polish" if spec.profile == "nodes" else "")
                           + "); walkers in one group per search, drawn from its Laplace "
                           "approximation")
        start_bar()

    def on_step(step):
        start_bar()
        if bar:
            bar[0].update(step - last[0])
        last[0] = step

    try:
        with stop_on_interrupt() as should_stop:
            return sampler.run(max_steps=max_steps, tau_multiple=spec.tau_multiple,
                               check_every=spec.check_every, progress=on_step,
                               should_stop=should_stop, on_start=on_start)
    finally:
        if bar:
            bar[0].close()


def _messages(status, spec) -> list:
    messages = []
    if status.interrupted:
        messages.append(f"interrupted after {status.steps} steps; the file is resumable: run the "
                        f"same command with --resume to continue")
    if not status.converged:
        messages.append(not_converged_message(status, spec.tau_multiple, spec.names,
                                              check_every=spec.check_every))
    return messages + list(status.warnings)


def _rejection_message(check) -> str:
    """The loud warning for a spectrum the model does not describe."""
    where = ", ".join(f"channels {a}-{b} ({'more' if sign > 0 else 'fewer'} counts than the "
                      "model)" for a, b, sign in check.ranges[:4])
    return ("MODEL REJECTED: the data do not fit the model (posterior predictive p-value "
            f"{check.p_value:.3g}" + (f"; residuals run systematically at {where}" if where
                                       else "") + "). The intervals hold only if the model were "
            "right: look at the residuals, the window and the physics options (straggling "
            "law, stopping, non-Rutherford cross-sections) before trusting them")


def finalise(output, objective, status, *, seed, messages) -> list:
    """Posterior draws, derived quantities, bands, predictive spectra, the posterior
    predictive check and diagnostics, written into the result file's final groups.

    The posterior's flags (inversion/sample/_flags.py) are appended to ``messages``.

    Returns
    -------
    list of str
        Loud warnings found while finishing (the model rejected by the predictive check); they
        are stored with ``messages`` in ``/diagnostics``.
    """
    spec = objective.spec
    backend = open_chain(output)
    steps = int(backend.iteration)
    if steps == 0:
        return []
    discard, thin = burn_in_and_thin(status.tau, steps)
    samples = backend.get_chain(discard=discard, thin=thin, flat=True)
    logp = backend.get_log_prob(discard=discard, thin=thin, flat=True)
    logp_all = backend.get_log_prob()
    theta_map = backend.get_chain()[np.unravel_index(np.argmax(logp_all), logp_all.shape)]

    # the posterior's flags join the warnings (inversion/sample/_flags.py)
    messages += posterior_flags(spec, backend.get_chain(), logp_all, status.acceptance, samples)
    # widths the spectrum does not resolve, by name (inversion/fit/_resolution.py)
    messages += resolution_flags(objective, samples)
    derived_names, derived_units, notes = objective.derived_names()
    derived = np.array([objective.derived(t) for t in samples])
    found = []
    diag = diagnostics(status, steps=steps, n_walkers=spec.n_walkers,
                       tau_multiple=spec.tau_multiple, discard=discard, thin=thin,
                       messages=messages)
    parts = getattr(objective, "parts", None)
    measurements = None
    if parts is None:
        bands = posterior_bands(objective, samples, theta_map, n_draws=spec.band_draws,
                                seed=seed + 2)
        check = bands.check
        if check is not None:
            if check.rejected:
                found.append(_rejection_message(check))
            diag.update(ppc_p_value=check.p_value, model_rejected=check.rejected,
                        ppc_alpha=check.alpha, ppc_z_limit=check.z_limit,
                        ppc_deviance=np.column_stack([check.deviance_observed,
                                                      check.deviance_replicated]),
                        ppc_blocks=np.column_stack([check.block_first, check.block_last,
                                                    check.block_z]),
                        ppc_ranges=np.array(check.ranges, dtype=np.int64).reshape(-1, 3))
        profile_objective = objective
    else:
        bands, measurements = _joint_bands(objective, samples, theta_map, seed=seed, diag=diag,
                                           found=found)
        profile_objective = parts[0]
    starts = read_starts(output)
    if starts is not None:
        diag["starts"] = np.column_stack([starts[0], starts[1]])
    if found:
        diag["warnings"] = [m for m in diag["warnings"] if m != "none"] + found
    write_posterior(
        output, spec=spec, samples=samples, log_posterior=logp, discard=discard, thin=thin,
        derived_names=derived_names, derived_units=derived_units, derived_notes=notes,
        derived=derived, depth_1e15=bands.depth_1e15,
        depth_nm=depth_nm(profile_objective, bands.depth_1e15), bands=bands,
        counts=objective.counts, window=getattr(objective, "mask", None),
        run_calibration_keV=_run_calibration(profile_objective), diagnostics=diag,
        measurements=measurements)
    return found


def _joint_bands(objective, samples, theta_map, *, seed, diag, found):
    """The bands of a joint run: the profile bands once (the sample is one), each spectrum's
    predictive bands and predictive check, at a false-alarm level divided among the spectra
    (Bonferroni); the joint verdict (rejected when any spectrum is) goes into ``diag``, each
    rejection's message into ``found``."""
    parts = objective.parts
    alpha = PPC_ALPHA / len(parts)
    spec = objective.spec
    measurements, checks = [], []
    bands = None
    detector_groups = getattr(objective, "detector_groups", None) or [None] * len(parts)
    charge_groups = getattr(objective, "charge_groups", None) or [None] * len(parts)
    for k, (name, part) in enumerate(zip(objective.measurement_names, parts)):
        # the same seed picks the same posterior draws for every spectrum
        b = posterior_bands(part, objective.part_theta(samples, k),
                            objective.part_theta(theta_map, k), n_draws=spec.band_draws,
                            seed=seed + 2, alpha=alpha, profiles=k == 0)
        bands = b if bands is None else bands
        measurements.append(dict(name=name, bands=b, counts=part.counts, window=part.mask,
                                 run_calibration_keV=_run_calibration(part), check=b.check,
                                 detector_group=detector_groups[k],
                                 charge_group=charge_groups[k]))
        if b.check is not None:
            checks.append(b.check)
            if b.check.rejected:
                found.append(f"measurement {name!r}: " + _rejection_message(b.check))
    if checks:
        diag.update(ppc_p_value=min(c.p_value for c in checks),
                    model_rejected=any(c.rejected for c in checks), ppc_alpha=alpha,
                    ppc_spectra=len(parts))
    return bands, measurements


def _run_calibration(objective):
    """The run file's calibration (offset, gain, quadratic), kept for the figures."""
    nu = objective.default_nuisance
    return [float(nu.offset_keV), float(nu.gain_keV), float(nu.quadratic_keV)]
