"""Speed of planning: a 5 x 5 grid (tilt x charge) on the invented demo sample, one core.

Workload: ``data/demo/plan.toml`` (the INVENTED demo sample: a Ti cap of 120e15 atoms/cm2
over a Co film of 380e15 on Si, 4He at 2000 keV, 165 degrees, IBM geometry; eleven free
parameters: two areal densities, two mixing widths, fluence, gain, offset, resolution and three
stopping scales), nominal mixing widths 12e15 and 55e15 (data/demo/TRUTH.md), tilts 0, 15, 30,
45, 60 degrees, charges 1, 2, 4, 8, 16 uC, target film.mixing = 2e15.  Measured:

* ``first_call_s``: the first :func:`inversion.plan` of the process (numba cache warm, tables
  and models built for the first time);
* ``wall_s_median``, ``wall_s_min``: further calls of the same plan (goal: under 10 s);
* ``models``: forward models built per plan (one per geometry; charge only scales counts);
* ``per_model_setups_wall_s``: the same 25 set-ups planned one at a time, each with its own
  forward model (what the charge scaling saves).

Threads of numba and the BLAS are limited to one before numpy is imported.

Usage: ``python benchmarks/plan_speed.py [--json] [--repeats N]``.  No assertion is made here.
"""

from __future__ import annotations

import os
import sys as _sys
from pathlib import Path as _Path

# benchmarks/coverage.py must not shadow the `coverage` package, which numba probes for on
# import: drop this script's own folder from the module search path before anything imports.
_sys.path[:] = [p for p in _sys.path
                if _Path(p or ".").resolve() != _Path(__file__).resolve().parent]
for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

RUN = ROOT / "data" / "demo" / "plan.toml"
NOMINAL = {"cap.mixing": 12.0, "film.mixing": 55.0}
TILTS = [0.0, 15.0, 30.0, 45.0, 60.0]
CHARGES = [1.0, 2.0, 4.0, 8.0, 16.0]
TARGET = "film.mixing=2"


def _plan(run, vary):
    import inversion

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return inversion.plan(run, vary=vary, nominal=NOMINAL, target=TARGET)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--repeats", type=int, default=3, help="timed plans after the first")
    args = ap.parse_args(argv)

    import numba
    import numpy

    import forward

    run = forward.load_run(RUN)
    vary = {"geometry.tilt_deg": TILTS, "exposure.charge_uC": CHARGES}
    t0 = time.perf_counter()
    table = _plan(run, vary)
    first = time.perf_counter() - t0
    times = []
    for _ in range(max(1, args.repeats)):
        t0 = time.perf_counter()
        table = _plan(run, vary)
        times.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    for tilt in TILTS:
        for charge in CHARGES:
            _plan(run, {"geometry.tilt_deg": [tilt], "exposure.charge_uC": [charge]})
    one_at_a_time = time.perf_counter() - t0
    best = table.best
    result = {
        "machine": f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores "
                   "(one used)",
        "date": time.strftime("%Y-%m-%d %H:%M"),
        "python": platform.python_version(), "numpy": numpy.__version__,
        "numba": numba.__version__,
        "workload": "invented demo sample (data/demo/plan.toml), 5 tilts x 5 charges, "
                    f"{len(table.parameters)} free parameters, target {TARGET}",
        "setups": len(table), "models": len(TILTS),
        "first_call_s": round(first, 3),
        "wall_s_median": round(statistics.median(times), 3),
        "wall_s_min": round(min(times), 3),
        "goal_s": 10.0,
        "per_model_setups_wall_s": round(one_at_a_time, 3),
        "best_setup": best.label(),
        "best_sd_film_mixing": round(best.sd["film.mixing"], 4),
    }
    if args.json:
        print(json.dumps(result, indent=1))
    else:
        for k, v in result.items():
            print(f"{k}: {v}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
