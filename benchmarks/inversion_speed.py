"""Inversion speed: wall time to a converged chain and effective samples per second.

Scenarios (invented samples, spectra simulated by the forward model with Poisson noise):

* ``layers``: Ni0.5Ge0.5 film (300e15 atoms/cm2) over a Ge film (200e15) on Si, 4He at
  2000 keV; free: both areal densities, both interface mixing widths, the film's Ni:Ge share,
  fluence, gain, offset, resolution, the Ge stopping scale, the stopping slopes of Ni, Ge and
  Si, the straggling scale and correction (15 parameters).
* ``nodes``: the same beam on a Ni film (250e15) that has mixed into Si (mixing width 60e15);
  fitted with the free-form profile, 20 nodes, species Ni and Si (20 parameters + fluence and
  the straggling scale and correction: 23).
* ``nodes3``: the same beam on a Pt cap (100e15) over a Ni film (200e15) on Si, both
  interfaces mixed (widths 30e15 and 40e15); fitted with the free-form profile, 20 nodes to
  450e15, species Pt, Ni and Si (40 parameters + fluence).
* ``joint``: the ``layers`` sample measured twice with one detector, at normal incidence (as
  ``layers``) and tilted by 45 degrees (IBM layout, exit 60 degrees), fitted jointly (one run
  file with two ``[[measurement]]`` tables in one ``detector_group``: the parameters of the
  ``layers`` fit plus the tilted spectrum's fluence; one gain, offset and resolution for both
  spectra) and, for comparison, the normal-incidence spectrum alone (the ``layers`` fit); both
  are reported.  ``--separate-detectors``: no detector group, each spectrum with its own
  gain, offset and resolution (the tilted spectrum's fluence, gain, offset and resolution on
  top of the ``layers`` fit's parameters), as before detector groups existed.

Usage::

    python benchmarks/inversion_speed.py --json                   # layers, 1 worker
    python benchmarks/inversion_speed.py --scenario nodes --moves stretch --json
    python benchmarks/inversion_speed.py --workers 2 --json
    python benchmarks/inversion_speed.py --scenario joint --separate-detectors --json
    python benchmarks/inversion_speed.py --scenario joint --workers 2 --seeds 1-6 --json
    python benchmarks/inversion_speed.py --scenario joint --workers 2 --seeds 1-6 --tilted-alone

The joint scenario's ratio of wall times moves with the seed (each seed other Poisson spectra,
other chains, and the chain lengths come in steps of 200): ``--seeds`` runs several and reports
each one with the median and range of the ratio.  ``--tilted-alone`` also fits the tilted
spectrum alone and reports the joint fit's time against the two single fits together
(``wall_ratio_vs_separate``: what a user fitting the spectra separately spends); the goal's
ratio stays ``wall_ratio``, against the normal-incidence fit alone.

Prints one JSON object (``--json``) with wall_s, converged, max_autocorr_steps, ess_per_s,
n_free_parameters and more.  Results: benchmarks/RESULTS.md, section "Inversion".
"""

from __future__ import annotations

import sys as _sys
from pathlib import Path as _Path

# benchmarks/coverage.py must not shadow the `coverage` package, which numba probes for on
# import: drop this script's own folder from the module search path before anything imports.
_sys.path[:] = [p for p in _sys.path
                if _Path(p or ".").resolve() != _Path(__file__).resolve().parent]

import argparse
import json
import os
import resource
import platform
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import forward  # noqa: E402
from benchmarks._runs import run_head  # noqa: E402
from inversion import NotConvergedWarning, invert  # noqa: E402

#: the invented set-up of every scenario (normal incidence; _TILTED: tilted by 45 degrees)
_SETUP = dict(title="invented inversion benchmark", charge_uC=5.0, fwhm_keV=16.0,
              solid_angle_msr=2.5, keV_per_channel=2.5, offset_keV=15.0,
              note="INVENTED benchmark scenario (not a real sample or measurement).")
COMMON = run_head(**_SETUP)

LAYERS = COMMON + """\
[[layer]]
name = "film"
formula = "Ni0.5Ge0.5"
areal_density_1e15 = 300.0
density_g_cm3 = 6.9
[[layer]]
name = "under"
formula = "Ge"
areal_density_1e15 = 200.0
density_g_cm3 = 5.3
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
fixed = ["stopping.Ni", "stopping.Si"]
windows = [[260, 760]]
max_steps = {max_steps}
moves = "{moves}"
walkers = {walkers}
[fit.free]
"film.areal_density" = {{ uniform = [100, 600] }}
"under.areal_density" = {{ uniform = [50, 500] }}
"film.mixing" = {{ halfnormal = 40 }}
"under.mixing" = {{ halfnormal = 40 }}
"film.composition" = true
"""

NODES = COMMON + """\
[[layer]]
name = "film"
formula = "Ni"
areal_density_1e15 = 250.0
density_g_cm3 = 8.9
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
profile = "nodes"
fixed = ["stopping", "gain_keV", "offset_keV", "fwhm_keV"]
windows = [[260, 760]]
max_steps = {max_steps}
moves = "{moves}"
walkers = {walkers}
[fit.nodes]
count = 20
depth_1e15 = 500.0
step_sd = 0.7
species = ["Ni", "Si"]
"""

NODES3 = COMMON + """\
[[layer]]
name = "cap"
formula = "Pt"
areal_density_1e15 = 100.0
density_g_cm3 = 21.4
[[layer]]
name = "film"
formula = "Ni"
areal_density_1e15 = 200.0
density_g_cm3 = 8.9
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
profile = "nodes"
fixed = ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "straggling"]
windows = [[260, 780]]
max_steps = {max_steps}
moves = "{moves}"
walkers = {walkers}
[fit.nodes]
count = 20
depth_1e15 = 450.0
species = ["Pt", "Ni", "Si"]
"""

_TILTED = run_head(**_SETUP, tilt_deg=45.0, layout="IBM")
#: the layers sample tilted by 45 degrees, as a run file of one measurement (to simulate it)
LAYERS_TILTED = LAYERS.replace(COMMON, _TILTED).replace("windows = [[260, 760]]\n", "")


def _measurement(name, tables, windows=None, detector_group=None):
    """A ``[[measurement]]`` table from the tables of a one-measurement run file."""
    body = tables.split("[beam]", 1)[1]
    for key in ("geometry", "detector", "calibration", "exposure"):
        body = body.replace(f"[{key}]", f"[measurement.{key}]")
    head = f'\n[[measurement]]\nname = "{name}"\nspectrum = "{name}.csv"\n'
    if detector_group:
        head += f'detector_group = "{detector_group}"\n'
    if windows:
        head += f"windows = {windows}\n"
    return head + "[measurement.beam]" + body


def joint_text(separate_detectors: bool = False) -> str:
    """Both measurements in one run file, the sample and the stopping shared, the fluence each
    spectrum's own (two exposures).  The calibration and resolution are the one detector's,
    shared through a detector group, unless ``separate_detectors`` (then each spectrum has
    its own)."""
    group = None if separate_detectors else "detector"
    return (LAYERS.split("[[layer]]", 1)[1].join(["# INVENTED benchmark scenario (not a real "
                                                   "sample or measurement).\ntitle = "
                                                   "\"invented joint benchmark\"\n[[layer]]",
                                                   ""])
            .replace("windows = [[260, 760]]\n", "")
            + _measurement("normal", COMMON, "[[260, 760]]", group)
            + _measurement("tilt45", _TILTED, None, group))


#: the joint run file: one detector group
JOINT = joint_text()

#: invented truths: areal densities and mixing widths of the layer stack that made the spectra
TRUTH = {"layers": ([300.0, 200.0], [15.0, 25.0]), "nodes": ([250.0], [60.0]),
         "nodes3": ([100.0, 200.0], [30.0, 40.0])}
TRUTH["joint"] = TRUTH["layers"]
TEXT = {"layers": LAYERS, "nodes": NODES, "nodes3": NODES3, "joint": JOINT}


def simulate(run_path, scenario, seed):
    """Poisson counts of the invented truth: the run's layers mixed at their interfaces (the
    atom-conserving stack), on the grid that follows that sample."""
    from inversion.fit._stack import refinement_points, stack_table

    run = forward.load_run(run_path)
    model = forward.ForwardModel(run, n_channels=1024)
    comps = np.zeros((len(run.layers), len(model.species)))
    for i, layer in enumerate(run.layers):
        for sym, f in layer.fractions.items():
            comps[i, model.species.index(sym)] = f
    thickness, mixing = (np.asarray(v, dtype=float) for v in TRUTH[scenario])
    edges = np.asarray(model.sample_edges(thickness), dtype=float)
    extra = refinement_points(thickness, mixing, np.ones(mixing.size, dtype=bool))
    edges = np.unique(np.concatenate([edges, np.clip(extra, 0.0, edges[-1])]))
    widths, fractions, _ = stack_table(edges, thickness, mixing, comps, True)
    expected = np.maximum(model.expected_counts(fractions, widths_1e15=widths), 0.0)
    return np.random.default_rng(seed).poisson(expected)


def _cpu_s() -> float:
    """CPU seconds of this process and of its finished children (the worker processes)."""
    own, kids = (resource.getrusage(w) for w in (resource.RUSAGE_SELF,
                                                   resource.RUSAGE_CHILDREN))
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scenario", choices=tuple(TEXT), default="layers")
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--max-steps", type=int, default=20000)
    ap.add_argument("--moves", choices=("stretch", "differential", "subspace"),
                    default="differential",
                    help="emcee moves (default: differential, the program's own default)")
    ap.add_argument("--walkers", type=int, default=0,
                    help="walkers (default 0: the program's own choice)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--separate-detectors", action="store_true",
                    help="joint scenario: each spectrum its own gain, offset and resolution "
                         "(default: one detector group, one of each for both spectra)")
    ap.add_argument("--seeds", default=None,
                    help="joint scenario: several seeds, e.g. 1-6 or 1,3,5 (other Poisson "
                         "spectra and chains each); reports each seed and the median ratio")
    ap.add_argument("--tilted-alone", action="store_true",
                    help="joint scenario: also fit the tilted spectrum alone, and report the "
                         "joint fit's time against both single fits together (what fitting "
                         "the two spectra separately costs)")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args(argv)
    if args.seeds and args.scenario != "joint":
        ap.error("--seeds goes with --scenario joint")
    if args.tilted_alone and args.scenario != "joint":
        ap.error("--tilted-alone goes with --scenario joint")
    if args.seeds:
        try:
            _seed_list(args.seeds)
        except ValueError:
            ap.error(f"--seeds {args.seeds!r}: give a range such as 1-6 or a list such as 1,3,5")

    settings = dict(max_steps=args.max_steps, moves=args.moves, walkers=args.walkers)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if args.scenario == "joint":
            seeds = _seed_list(args.seeds) if args.seeds else [args.seed]
            runs = [_joint(args, settings, seed, tmp / f"seed{seed}") for seed in seeds]
            out = runs[0] if len(runs) == 1 else _over_seeds(runs, seeds)
        else:
            run_path = tmp / "run.toml"
            run_path.write_text(TEXT[args.scenario].format(**settings))
            counts = simulate(run_path, args.scenario, args.seed)
            out = _figures(*_timed(run_path, counts, tmp / "out.h5", args), args,
                           args.scenario)
    if args.json:
        print(json.dumps(out))
    else:
        for k, v in out.items():
            print(f"{k:>22}: {v}")


def _seed_list(text: str) -> list:
    """``"1-6"`` or ``"1,3,5"`` as a list of seeds (ValueError otherwise)."""
    seeds = []
    for part in text.split(","):
        first, dash, last = part.strip().partition("-")
        lo, hi = int(first), int(last if dash else first)
        if hi < lo:
            raise ValueError(text)
        seeds.extend(range(lo, hi + 1))
    if not seeds:
        raise ValueError(text)
    return seeds


def _joint(args, settings, seed, folder) -> dict:
    """The joint scenario at one seed (``settings``: the run files' ``[fit]`` values): the
    normal-incidence spectrum alone, then both spectra jointly, timed one after the other."""
    folder.mkdir()
    for name, text in (("normal", LAYERS), ("tilt45", LAYERS_TILTED)):
        (folder / f"{name}.toml").write_text(text.format(**settings))
        counts = simulate(folder / f"{name}.toml", "joint", seed)
        np.savetxt(folder / f"{name}.csv", np.column_stack([np.arange(counts.size), counts]),
                   fmt="%d", delimiter=",", header="channel,counts", comments="")
    (folder / "joint.toml").write_text(joint_text(args.separate_detectors).format(**settings))
    args = argparse.Namespace(**{**vars(args), "seed": seed})
    single = _timed(folder / "normal.toml", folder / "normal.csv", folder / "single.h5", args)
    joint = _timed(folder / "joint.toml", None, folder / "joint.h5", args)
    out = {"scenario": "joint", "seed": seed, "single": _figures(*single, args, "layers"),
           "joint": _figures(*joint, args, "joint"),
           "detectors": "separate" if args.separate_detectors else "one group"}
    out["wall_ratio"] = round(joint[1] / single[1], 2)
    out["step_ratio"] = round(out["joint"]["steps"] / out["single"]["steps"], 3)
    out["ess_per_s_ratio"] = round(out["joint"]["ess_per_s"] / out["single"]["ess_per_s"], 2)
    if getattr(args, "tilted_alone", False):
        # the tilted spectrum alone, with its automatic window as in the joint fit
        tilted = _timed(folder / "tilt45.toml", folder / "tilt45.csv", folder / "tilted.h5",
                        args)
        out["single_tilted"] = _figures(*tilted, args, "layers")
        out["wall_ratio_vs_separate"] = round(joint[1] / (single[1] + tilted[1]), 2)
    out["load_average"] = [round(x, 2) for x in os.getloadavg()]
    out["date"] = time.strftime("%Y-%m-%d %H:%M")
    return out


def _over_seeds(runs, seeds) -> dict:
    """Several seeds of the joint scenario: each one's figures and the ratios' median and
    range (the chain lengths, hence the ratio, change from seed to seed)."""
    ratios = [r["wall_ratio"] for r in runs]
    out = {"scenario": "joint", "seeds": seeds, "runs": runs,
           "wall_ratio_median": round(float(np.median(ratios)), 2),
           "wall_ratio_range": [min(ratios), max(ratios)],
           "step_ratio_median": round(float(np.median([r["step_ratio"] for r in runs])), 3),
           "seeds_within_2x": sum(r <= 2.0 for r in ratios),
           "date": time.strftime("%Y-%m-%d %H:%M")}
    separate = [r["wall_ratio_vs_separate"] for r in runs if "wall_ratio_vs_separate" in r]
    if separate:
        out["wall_ratio_vs_separate_median"] = round(float(np.median(separate)), 2)
        out["wall_ratio_vs_separate_range"] = [min(separate), max(separate)]
    return out


def _timed(run_path, counts, output, args):
    """``(result, wall s, cpu s)`` of one inversion (``counts`` None: the run file names its
    spectra), the numba kernel compiled before the clock starts."""
    forward.ForwardModel(forward.load_measurements(run_path).first, n_channels=1024)
    t0 = time.perf_counter()
    cpu0 = _cpu_s()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run_path, counts, output, seed=args.seed, workers=args.workers,
                     progress=False)
    return res, time.perf_counter() - t0, _cpu_s() - cpu0


def _figures(res, wall, cpu, args, scenario) -> dict:
    """The benchmark's figures of one inversion."""
    d = res.diagnostics
    tau = np.asarray(d["autocorr_time"], dtype=float)
    ess = np.asarray(d["ess"], dtype=float)
    out = {
        "scenario": scenario, "moves": args.moves, "workers": args.workers,
        "wall_s": round(wall, 2), "cpu_s": round(cpu, 1), "converged": bool(d["converged"]),
        "steps": int(d["steps"]), "walkers": int(d["walkers"]),
        "max_autocorr_steps": round(float(np.nanmax(tau)), 1),
        "min_ess": round(float(np.nanmin(ess)), 1),
        "ess_per_s": round(float(np.nanmin(ess)) / wall, 2),
        "ess_per_cpu_s": round(float(np.nanmin(ess)) / cpu, 2),
        "mean_acceptance": round(float(d["mean_acceptance"]), 3),
        "n_free_parameters": len(res.names),
        "rhat_max": round(float(d.get("rhat_max", float("nan"))), 4),
        "load_average": [round(x, 2) for x in os.getloadavg()],
        "date": time.strftime("%Y-%m-%d %H:%M"),
        "python": platform.python_version(),
    }
    if scenario in ("layers", "joint"):
        for name in ("film.areal_density", "under.areal_density"):
            out[f"{name}_95"] = [round(v, 2) for v in res.interval(name, 95)]
        out["stopping.Ge_sd"] = round(res.summary["stopping.Ge"]["sd"], 4)
    return out


if __name__ == "__main__":
    main()
