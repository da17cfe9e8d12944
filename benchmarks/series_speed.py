"""Series speed: 8 real member inversions on a local dask cluster against one after another.

Members: the six spectra of the INVENTED demo series (data/demo/series/) plus two more anneals
simulated here from the same invented truth (data/demo/make_demo.py: 475 C for 10 min and
425 C for 30 min, Poisson seeds 107 and 108), each inverted with the demo run file's [fit]
table and the series file's step cap (3000; most members converge before it).

* serial: the real member task, one member after another in this process (workers=1 each);
* parallel: `run_series` on a local dask cluster of N worker processes (1 thread each),
  cluster start-up included; the series statistics are timed apart.

    python benchmarks/series_speed.py --json [--workers 2] [--max-steps N]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data" / "demo"
# benchmarks/coverage.py must not shadow the coverage package that numba probes for
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != Path(__file__).resolve().parent]
sys.path.insert(0, str(DEMO))

EXTRA = [("c475-10min", 475.0, 600.0, 4.0, 107), ("c425-30min", 425.0, 1800.0, 4.0, 108)]


def _series(folder: Path, max_steps: int):
    import forward
    import make_demo  # the demo's own generator: the same invented truth

    from inversion import load_series

    template = forward.load_run(DEMO / "run.toml")
    text = (DEMO / "series.toml").read_text()
    text = text.replace('run = "run.toml"', f'run = "{DEMO / "run.toml"}"')
    text = text.replace('spectrum = "series/', f'spectrum = "{DEMO / "series"}/')
    text = text.replace("max_steps = 3000", f"max_steps = {max_steps}")
    for label, temp_c, time_s, charge, seed in EXTRA:
        run = template.with_overrides({"exposure": {"charge_uC": charge}})
        _, counts = make_demo.simulate(run, make_demo.mixing_width(temp_c, time_s), seed)
        make_demo.write(folder / f"{label}.csv", counts, [f"benchmark member {label}"])
        text += (f'\n[[member]]\nlabel = "{label}"\nspectrum = "{folder / label}.csv"\n'
                 f"temperature_C = {temp_c}\ntime_s = {time_s}\ncharge_uC = {charge}\n")
    (folder / "series.toml").write_text(text)
    return load_series(folder / "series.toml")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--max-steps", type=int, default=3000)
    args = parser.parse_args(argv)
    import warnings

    import h5py

    from inversion import run_series
    from inversion.series._runner import _payloads, invert_member

    warnings.simplefilter("ignore")  # not-converged warnings are counted below instead
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        series = _series(folder, args.max_steps)
        n = len(series.members)
        t0 = time.perf_counter()
        for p in _payloads(series, folder / "serial.h5", 0, None):
            invert_member(p)
        wall_serial = time.perf_counter() - t0
        t0 = time.perf_counter()
        run_series(series, folder / "parallel.h5", workers=args.workers, progress=False,
                   report=False)
        wall_parallel = time.perf_counter() - t0
        with h5py.File(folder / "parallel.h5", "r") as f:
            members_only = float(f.attrs["wall_s_members"])
            stats_s = float(f.attrs["wall_s_statistics"])
            converged = int(sum(bool(f[f"members/links/{m.label}/diagnostics"].attrs["converged"])
                                for m in series.members))
    result = {"members": n, "workers": args.workers, "max_steps": args.max_steps,
              "wall_s_parallel": round(members_only, 1), "wall_s_serial": round(wall_serial, 1),
              "speedup": round(wall_serial / members_only, 2),
              "wall_s_parallel_with_statistics": round(wall_parallel, 1),
              "wall_s_statistics": round(stats_s, 1), "members_converged": converged}
    if args.json:
        print(json.dumps(result))
    else:
        for k, v in result.items():
            print(f"{k:32s} {v}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
