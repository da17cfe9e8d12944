"""The automatic channel window and the result file's size, measured.

1. Window: milliseconds per log-posterior evaluation (the run file's values, one process) with
   the automatic window (which stops a few detector widths below the lowest film signal,
   ``inversion/fit/_window.py``), with the rule it replaced (from the lowest channel the run
   expects half a count in, plus three widths: the deep substrate tail included), and with the
   whole spectrum from channel 0 (``fit.windows = [[0, last]]``).
2. Size: a default ``sondage invert`` (two workers, default ``[fit]`` settings), its wall time,
   steps, and the result file's size.

Scenarios (invented samples; spectra simulated by the forward model with Poisson noise):

* ``demo``: the bundled invented Ti/Co/Si demo (data/demo/run.toml and spectrum.csv);
* ``gate``: an invented HfO2 (4 nm) / TaN (10 nm) / Si gate stack, 4He at 2000 keV.

Usage::

    python benchmarks/window_and_size.py --window --json
    python benchmarks/window_and_size.py --size gate --json      # minutes: default settings
    python benchmarks/window_and_size.py --size gate --to-the-cap --json   # 20000 steps

Results: benchmarks/RESULTS.md, section "Window and result-file size".
"""

from __future__ import annotations

import sys as _sys
from pathlib import Path as _Path

# benchmarks/coverage.py must not shadow the `coverage` package, which numba probes for on
# import: drop this script's own folder from the module search path before anything imports.
_sys.path[:] = [p for p in _sys.path
                if _Path(p or ".").resolve() != _Path(__file__).resolve().parent]

import argparse
import dataclasses
import json
import math
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
from inversion import cli  # noqa: E402
from inversion._api import prepare  # noqa: E402

GATE = run_head(title="invented: HfO2 / TaN / Si gate stack", charge_uC=10.0, tilt_deg=7.0,
                note="INVENTED benchmark scenario (not a real sample or measurement).") + """\
[[layer]]
name = "oxide"
formula = "HfO2"
thickness_nm = 4.0
density_g_cm3 = 9.68
[[layer]]
name = "barrier"
formula = "Ta0.5N0.5"
thickness_nm = 10.0
density_g_cm3 = 14.3
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit.free]
"oxide.areal_density" = true
"barrier.areal_density" = true
"oxide.mixing" = true
"barrier.mixing" = true
"""


def _scenario(name: str, folder: Path):
    """(run file, spectrum file) of a scenario."""
    if name == "demo":
        return ROOT / "data" / "demo" / "run.toml", ROOT / "data" / "demo" / "spectrum.csv"
    run_file = folder / "gate.toml"
    run_file.write_text(GATE)
    run = forward.load_run(run_file)
    _, columns = forward.simulate(run, poisson=True, seed=2026)
    spectrum = folder / "gate.csv"
    forward.write_spectrum_csv(spectrum, {"counts": columns["counts"]},
                               ["invented: simulated from gate.toml, Poisson seed 2026"])
    return run_file, spectrum


def _old_floor(run, spectrum) -> int:
    """The rule the automatic window replaced: the lowest channel where the run expects more
    than fit.count_threshold counts, plus three detector widths with a substrate."""
    n = int(spectrum.channel[-1]) + 1
    model = forward.ForwardModel(run, n_channels=n)
    expected = model.expected_counts(model.layer_fractions())
    threshold = float(run.fit.get("count_threshold", 0.5))
    lo = int(np.flatnonzero(expected > threshold)[0])
    fwhm_channels = math.ceil(run.detector.fwhm_keV / run.calibration.keV_per_channel)
    return lo + (3 * fwhm_channels if run.layers[-1].substrate else 0)


def _ms_per_evaluation(run, spectrum, repeats: int = 300) -> tuple[float, int, int]:
    _, objective = prepare(run, spectrum)
    theta = np.array([p.prior.dist.median() if p.prior.kind != "uniform"
                      else 0.5 * sum(p.prior.bounds()) for p in objective.spec.parameters])
    objective.log_posterior(theta)
    best = math.inf
    for _ in range(3):  # the best of three rounds: least disturbed by other work
        t = time.perf_counter()
        for _ in range(repeats):
            objective.log_posterior(theta)
        best = min(best, (time.perf_counter() - t) / repeats)
    return 1e3 * best, int(objective.channels[0]), len(objective.edges_1e15) - 1


def window(names) -> dict:
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name in names:
            run_file, spectrum_file = _scenario(name, Path(tmp))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                run = forward.load_run(run_file)
                spectrum = forward.read_spectrum(spectrum_file)
            last = int(spectrum.channel[-1])
            rows = {}
            for label, first in (("automatic", None), ("replaced rule", _old_floor(run, spectrum)),
                                 ("whole spectrum", 0)):
                r = run if first is None else dataclasses.replace(
                    run, fit=dict(run.fit, windows=[[first, last]]))
                ms, lo, slices = _ms_per_evaluation(r, spectrum)
                rows[label] = {"ms_per_evaluation": round(ms, 4), "first_channel": lo,
                               "slices": slices}
            for label in ("replaced rule", "whole spectrum"):
                rows[label]["speed_up_of_automatic"] = round(
                    rows[label]["ms_per_evaluation"] / rows["automatic"]["ms_per_evaluation"], 2)
            out[name] = rows
    return out


def size(name: str, max_steps=None, to_the_cap: bool = False) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        run_file, spectrum_file = _scenario(name, Path(tmp))
        if to_the_cap:  # the worst case of the defaults: a chain that never converges
            text = run_file.read_text().replace("[fit.free]", "[fit]\ntau_multiple = 1e6\n"
                                                "[fit.free]")
            run_file = Path(tmp) / "cap.toml"
            run_file.write_text(text)
        result = Path(tmp) / "result.h5"
        argv = ["-q", "invert", str(run_file), str(spectrum_file), "-o", str(result)]
        if max_steps:
            argv += ["--max-steps", str(max_steps)]
        t = time.perf_counter()
        code = cli.main(argv)
        wall = time.perf_counter() - t
        from inversion import read_result

        r = read_result(result)
        return {"scenario": name, "exit_code": code, "wall_s": round(wall, 1),
                "steps": int(r.diagnostics["steps"]), "walkers": int(r.diagnostics["walkers"]),
                "parameters": len(r.names), "converged": bool(r.converged),
                "size_MB": round(result.stat().st_size / 1e6, 2),
                "stored_MB": _stored(result)}


def _stored(path) -> dict:
    """Bytes stored per top-level group (the chain's datasets apart), in MB."""
    import h5py

    out = {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                key = name if name in ("mcmc/chain", "mcmc/log_prob") else name.split("/")[0]
                out[key] = out.get(key, 0) + obj.id.get_storage_size()
        f.visititems(visit)
    return {k: round(v / 1e6, 3) for k, v in sorted(out.items())}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--window", action="store_true", help="time the windows")
    parser.add_argument("--size", choices=("demo", "gate"), help="a default inversion's file")
    parser.add_argument("--max-steps", type=int, default=None)
    parser.add_argument("--to-the-cap", action="store_true",
                        help="never converge (tau_multiple 1e6): the file at the step cap")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    report = {"machine": platform.platform(), "python": platform.python_version(),
              "date": time.strftime("%Y-%m-%d")}
    if args.window:
        report["window"] = window(["demo", "gate"])
    if args.size:
        report["size"] = size(args.size, args.max_steps, args.to_the_cap)
    print(json.dumps(report, indent=None if args.json else 2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
