"""Speed and memory of the spectrum model on a realistic workload.

Workload (an invented sample): 4He at 2000 keV, scattering 165 degrees, a Ni0.45Ge0.55 contact
(300e15 atoms/cm2) over SiO2 (600e15) on a Si substrate, natural isotopes (16 in all), detector
FWHM 19 keV, 1024 channels of 1.6 keV.  Measured:

* ``compile_s``: a fresh interpreter with an empty numba cache builds the model and evaluates it
  once (import, tables, compile, first call);
* ``cached_start_s``: the same in a fresh interpreter with the cache warm;
* ``hot_call_ms_*``: ``model.expected_counts`` on one core, median and 10/90 percentiles;
* ``hot_call_tilted_ms_median``: the same with a straggling scale and non-zero stopping slopes
  for every element (the kernel rescales its stopping tables once per call);
* ``sample_grid_call_ms_median``: ``model.sample_grid(t)``, ``model.layer_fractions(grid)`` and
  ``model.expected_counts(..., widths_1e15=grid.widths_1e15)`` for areal densities other than
  the run file's (the inversion's hot path with grids that follow the sample);
* ``numpy_reference_ratio``: the plain numpy reference (tests/reference_model.py) over the
  kernel, same arguments, same run;
* ``peak_rss_mb`` and ``rss_growth_mb``: resident memory over many hot calls (flat memory means
  growth near zero).

Usage: ``python benchmarks/forward_speed.py [--json] [--calls N]``.  No assertion is made here.
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
import platform
import resource
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from benchmarks._runs import run_head  # noqa: E402

RUN_TEXT = run_head(title="invented benchmark: NiGe-like contact over an oxide on silicon",
                    energy_keV=2000, scattering_deg=165, incidence_deg=0, exit_deg=15,
                    fwhm_keV=19, keV_per_channel=1.6, offset_keV=60, charge_uC=10) + """\
[[layer]]
formula = "Ni0.45Ge0.55"
areal_density_1e15 = 300
[[layer]]
formula = "SiO2"
areal_density_1e15 = 600
[[layer]]
formula = "Si"
substrate = true
"""
N_CHANNELS = 1024


def build_model():
    import forward

    run = forward.parse_run(RUN_TEXT, source="benchmark.toml")
    return forward.ForwardModel(run, n_channels=N_CHANNELS)


_START = textwrap.dedent(f"""
    import sys, time
    t0 = time.perf_counter()
    sys.path.insert(0, {str(ROOT)!r}); sys.path.insert(0, {str(ROOT / 'benchmarks')!r})
    from forward_speed import build_model
    m = build_model()
    m.expected_counts(m.layer_fractions())
    print(time.perf_counter() - t0)
""")


def _fresh_start(cache_dir: str) -> float:
    env = dict(os.environ, NUMBA_CACHE_DIR=cache_dir)
    out = subprocess.run([sys.executable, "-c", _START], env=env, check=True,
                         capture_output=True, text=True)
    return float(out.stdout.strip().splitlines()[-1])


def _rss_mb() -> float:
    with open("/proc/self/statm") as fh:
        pages = int(fh.read().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE") / 2**20


def _cpu_model() -> str:
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True, check=True).stdout
        for line in out.splitlines():
            if line.startswith("Model name:"):
                return line.split(":", 1)[1].strip()
    except (OSError, subprocess.CalledProcessError):
        pass
    return platform.processor() or "unknown"


def measure(calls: int) -> dict:
    import numpy as np

    from forward._kernel import spectrum_kernel
    from reference_model import spectrum_kernel_reference

    with tempfile.TemporaryDirectory() as cache:
        compile_s = _fresh_start(cache)
        cached_s = _fresh_start(cache)

    model = build_model()
    fractions = model.layer_fractions()
    model.expected_counts(fractions)
    times = []
    for _ in range(2000):
        t = time.perf_counter()
        model.expected_counts(fractions)
        times.append(time.perf_counter() - t)
    times = np.array(times) * 1e3
    tilted = model.default_nuisance()
    tilted.straggling_scale = 1.3
    tilted.stopping_slope = np.linspace(-0.05, 0.05, len(model.elements))
    model.expected_counts(fractions, tilted)
    tilted_times = []
    for _ in range(2000):
        t = time.perf_counter()
        model.expected_counts(fractions, tilted)
        tilted_times.append(time.perf_counter() - t)
    thickness = [310.0, 585.0]
    grid_times = []
    for i in range(2000):
        t = time.perf_counter()
        grid = model.sample_grid([thickness[0] + 0.01 * (i % 7), thickness[1]])
        model.expected_counts(model.layer_fractions(grid), widths_1e15=grid.widths_1e15)
        grid_times.append(time.perf_counter() - t)
    inputs = model.kernel_inputs(fractions)
    kernel_times = []
    for _ in range(500):
        t = time.perf_counter()
        spectrum_kernel(*inputs)
        kernel_times.append(time.perf_counter() - t)
    ref_times = []
    for _ in range(5):
        t = time.perf_counter()
        spectrum_kernel_reference(*inputs)
        ref_times.append(time.perf_counter() - t)
    kernel_ms = float(np.median(kernel_times) * 1e3)
    ref_ms = float(np.median(ref_times) * 1e3)

    rss_start = _rss_mb()
    rss_samples = []
    t_loop = time.perf_counter()
    for i in range(calls):
        model.expected_counts(fractions)
        if i % max(1, calls // 20) == 0:
            rss_samples.append(_rss_mb())
    loop_s = time.perf_counter() - t_loop
    rss_end = _rss_mb()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    return {
        "date": time.strftime("%Y-%m-%d"),
        "machine": f"{_cpu_model()}, {os.cpu_count()} cores",
        "python": platform.python_version(),
        "numba": __import__("numba").__version__,
        "numpy": np.__version__,
        "n_slices": len(model.grid),
        "n_channels": model.n_channels,
        "n_isotopes": len(model.isotope_labels),
        "compile_s": round(compile_s, 3),
        "cached_start_s": round(cached_s, 3),
        "hot_call_ms_median": round(float(np.median(times)), 4),
        "hot_call_ms_p10": round(float(np.percentile(times, 10)), 4),
        "hot_call_ms_p90": round(float(np.percentile(times, 90)), 4),
        "kernel_only_ms_median": round(kernel_ms, 4),
        "hot_call_tilted_ms_median": round(float(np.median(tilted_times) * 1e3), 4),
        "sample_grid_call_ms_median": round(float(np.median(grid_times) * 1e3), 4),
        "numpy_reference_ms": round(ref_ms, 2),
        "numpy_reference_ratio": round(ref_ms / kernel_ms, 1),
        "rss_calls": calls,
        "rss_loop_s": round(loop_s, 2),
        "rss_start_mb": round(rss_start, 1),
        "rss_end_mb": round(rss_end, 1),
        "rss_growth_mb": round(rss_end - rss_start, 2),
        "rss_min_max_mb": [round(min(rss_samples), 1), round(max(rss_samples), 1)],
        "peak_rss_mb": round(peak, 1),
    }


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--calls", type=int, default=100_000,
                        help="hot calls for the memory check (default 1e5)")
    args = parser.parse_args(argv)
    result = measure(args.calls)
    if args.json:
        print(json.dumps(result))
    else:
        for key, value in result.items():
            print(f"{key:>24}: {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
