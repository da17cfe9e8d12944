"""Series speed: 8 members on a local dask cluster (2 worker processes) against one after another.

Each member runs a CPU-bound stand-in for an inversion: an emcee chain on an invented
Gaussian width posterior (numpy only), sized to take a few seconds, then writes a member
result file in the real layout.  The measured quantity is the orchestration's parallel
speed-up on this machine, not the physics kernel's speed.

    python benchmarks/series_speed.py --json
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
sys.path.insert(0, str(ROOT / "tests"))

N_MEMBERS = 8


def busy_member(payload: dict) -> dict:
    """Stand-in inversion: sample an invented width posterior with emcee, write the member file."""
    import emcee

    from inversion._series import member_state
    from inversion._store import now_text, set_root_attrs, write_groups, write_input

    out = Path(payload["member_path"])
    if member_state(out) == "finished":
        return {"label": payload["label"], "path": str(out), "state": "finished"}
    out.parent.mkdir(parents=True, exist_ok=True)
    write_input(out, run_text="benchmark stand-in", counts=np.zeros(4),
                measured=np.ones(4, bool), priors=["stand-in"],
                attrs={"program": "stand-in", "status": "running"})
    rng = np.random.default_rng(int(payload["seed"]))
    w_true = 2.0 + 0.5 * (int(payload["seed"]) // 1000)  # invented widths, nm
    obs = rng.normal(w_true, 0.3, 400)

    def log_posterior(theta):
        w, s = theta
        if w <= 0 or s <= 0:
            return -np.inf
        return -obs.size * np.log(s) - 0.5 * np.sum((obs - w) ** 2) / s**2

    sampler = emcee.EnsembleSampler(16, 2, log_posterior)
    sampler.random_state = np.random.RandomState(int(payload["seed"]) % 2**31).get_state()
    sampler.run_mcmc(np.column_stack([rng.normal(w_true, 0.05, 16),
                                      rng.uniform(0.2, 0.4, 16)]), 10000, progress=False)
    w = sampler.get_chain(discard=2000, thin=4, flat=True)[:, 0]
    write_groups(out, {"posterior": {"samples": w[:, None]},
                       "derived": {"film.mixing_nm": (w, {"unit": "nm"}),
                                   "film.mixing": (w * 8.0, {"unit": "1e15 atoms/cm2"})}})
    set_root_attrs(out, status="converged", finished=now_text())
    return {"label": payload["label"], "path": str(out), "state": "missing"}


def _series(folder: Path):
    from test_series_dask import RUN  # invented template run file of the tests

    from inversion._series import load_series

    (folder / "template.toml").write_text(RUN)
    lines = ['[series]', 'run = "template.toml"', 'interface = 1']
    for k in range(N_MEMBERS):
        (folder / f"m{k}.csv").write_text("\n".join(str(i) for i in range(50)) + "\n")
        lines += ['[[member]]', f'label = "m{k}"', f'spectrum = "m{k}.csv"']
        lines += (['as_deposited = true'] if k == 0 else
                  [f'temperature_K = {600 + 20 * k}', 'time_s = 1800'])
    (folder / "series.toml").write_text("\n".join(lines) + "\n")
    return load_series(folder / "series.toml")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    from inversion._series import _payloads, run_series

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        series = _series(folder)
        # serial: the same task, one member after another, in this process
        payloads = _payloads(series, folder / "serial.h5", 0, None)
        busy_member(dict(payloads[0], member_path=str(folder / "warm.h5")))  # imports, warm-up
        t0 = time.perf_counter()
        for p in payloads:
            busy_member(p)
        wall_serial = time.perf_counter() - t0
        # parallel: local cluster, start-up included; the statistics are timed apart
        t0 = time.perf_counter()
        run_series(series, folder / "parallel.h5", workers=args.workers, task=busy_member,
                   progress=False, report=False, arrhenius_steps=10)
        wall_parallel = time.perf_counter() - t0
        import h5py
        with h5py.File(folder / "parallel.h5", "r") as f:
            members_only = float(f.attrs["wall_s_members"])
            stats_s = float(f.attrs["wall_s_statistics"])
    result = {"members": N_MEMBERS, "workers": args.workers,
              "wall_s_parallel": round(members_only, 2), "wall_s_serial": round(wall_serial, 2),
              "wall_s_parallel_with_statistics": round(wall_parallel, 2),
              "wall_s_statistics": round(stats_s, 2)}
    if args.json:
        print(json.dumps(result))
    else:
        for k, v in result.items():
            print(f"{k:16s} {v}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
