"""Are the error bars honest?  Coverage, the Cramer-Rao bound and model mismatch.

Everything here is an INVENTED scenario of our own (not a real sample, not a real
measurement): a molybdenum film of 250e15 atoms/cm2 on a glassy-carbon substrate, whose Mo/C
interface is mixed with a width of 40e15 atoms/cm2, measured with 2000 keV 4He at 165 degrees.
Spectra are simulated by sondage's own forward model plus Poisson counting noise and inverted
with the default ``[fit]`` settings (moves, walkers, convergence rule, nuisance priors); only the
fit window is given, as a normal run file would.

Three studies, printed as one JSON object with ``--json``:

1. **Coverage.**  ``--replicas`` Poisson spectra (different seeds), each inverted in its own
   process (``--workers`` processes in parallel, each inversion with ``workers=1``).  The
   fraction of replicas whose central 68 % and 95 % intervals contain the truth, with the
   binomial standard error ``sqrt(p (1 - p) / n)``.  The film's areal density and interface width
   are fixed at the truth; the nuisances' true values (fluence, gain, offset, resolution,
   stopping scales) are drawn from their default priors, one draw per replica, which is what
   those priors claim about a laboratory's calibration (the posterior-quantile check of Cook,
   Gelman & Rubin 2006, J. Comput. Graph. Stat. 15, 675).  ``--nuisance-truth nominal`` keeps
   them at the prior centres instead.  Replicas whose chain did not converge are kept in the
   coverage with the intervals they gave, and counted separately.
2. **Efficiency.**  The Cramer-Rao bound (Cramer 1946; Rao 1945) on the areal density from the
   Fisher information of the Poisson likelihood, ``I_ij = sum_c (d mu_c/d theta_i)(d mu_c/d
   theta_j) / mu_c`` over the window (common practice), by central finite differences; with the
   nuisances fixed and with them free (full matrix inverted, diagonal of the inverse read), the
   latter also with the Gaussian priors' information added (the Bayesian bound of van Trees
   1968).  ``crlb_ratio`` = posterior sd of the areal density at ten times the counts, nuisances
   fixed, over the bound.
3. **Model mismatch.**  Spectra simulated with the Mo stopping 3 % high
   (``physics.stopping_scale``), inverted with the nominal stopping, first with the stopping
   scales fixed, then free.

Per-replica results are appended to a JSON-lines state file as they arrive, so an interrupted
study resumes where it stopped (``--state``).

    .venv/bin/python benchmarks/coverage.py --json --replicas 100 --workers 2 --seed 1
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import sys
import tempfile
import time
import warnings
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
# Run as a script, this folder is sys.path[0], where this file would shadow the PyPI package
# called ``coverage`` that numba probes for on import: take the folder off the path first.
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != HERE]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import forward  # noqa: E402
from benchmarks._runs import MO_ON_CARBON, run_head  # noqa: E402
from inversion import (NotConvergedWarning, Role, cramer_rao_sd, fisher_matrix,  # noqa: E402
                       invert, nominal_theta, prepare)

__all__ = ["run_text", "scenario_objective", "simulate_counts", "run_replica",
           "coverage_summary", "expected_coverage_given_draws", "draw_statistics", "main",
           "TRUTH", "QUANTITIES"]

#: the invented truth of the film (1e15 atoms/cm2)
TRUTH = {"film.areal_density": 250.0, "film.mixing": 40.0}
#: the quantities whose coverage is reported first
QUANTITIES = ("film.areal_density", "film.mixing")
CHANNELS = 1024
CHARGE_UC = 2.0
WINDOW = (760, 890)

#: the sample and the fit; run_text puts the run file's head (MO_ON_CARBON) above them
_RUN = """\
[[layer]]
name = "film"
formula = "Mo"
areal_density_1e15 = 250.0
density_g_cm3 = 10.2
[[layer]]
name = "base"
formula = "C"
substrate = true
density_g_cm3 = 1.8
{physics}
[fit]
profile = "layers"
windows = [[{first}, {last}]]
{fixed}
{extra}
[fit.free]
"film.areal_density" = {{ uniform = [100.0, 500.0] }}
"film.mixing" = true
"""


def run_text(charge_uC: float = CHARGE_UC, *, fixed=(), stopping_scale_Mo: float | None = None,
             window=WINDOW, fit_extra: str = "") -> str:
    """The scenario's run file text.

    Parameters
    ----------
    charge_uC : float
        Beam charge in microcoulomb (sets the counts).
    fixed : sequence of str
        ``fit.fixed`` entries (nuisances held at the run file's values).
    stopping_scale_Mo : float, optional
        ``physics.stopping_scale`` for Mo (to simulate a stopping error).
    window : (int, int)
        The fit window, first and last channel.
    fit_extra : str
        More ``[fit]`` lines (the study uses none: default sampler settings).
    """
    physics = ("" if stopping_scale_Mo is None else
               f"[physics]\nstopping_scale = {{ Mo = {float(stopping_scale_Mo)!r} }}")
    fixed_line = "" if not fixed else "fixed = [" + ", ".join(f'"{f}"' for f in fixed) + "]"
    head = run_head(charge_uC=float(charge_uC), **MO_ON_CARBON)
    return head + _RUN.format(physics=physics, first=int(window[0]), last=int(window[1]),
                              fixed=fixed_line, extra=fit_extra)


def scenario_objective(text: str, *, full_range: bool = False):
    """``(run, objective)`` for a run text; ``full_range`` computes every channel (to
    simulate whole spectra), otherwise only the window's channels are computed."""
    if full_range:
        text = _strip_window(text)
    run = forward.parse_run(text, source="coverage.toml")
    # placeholder counts: this objective only evaluates expected counts (simulation, Fisher
    # information); an all-zero spectrum is refused as nothing to fit
    return prepare(run, np.ones(CHANNELS))


def _strip_window(text: str) -> str:
    return "\n".join(line for line in text.splitlines() if not line.startswith("windows"))


def truth_vector(objective, rng=None, nuisance_truth: str = "prior") -> np.ndarray:
    """The true parameter vector: film values from :data:`TRUTH`; nuisances at the run
    file's values (``"nominal"``) or drawn from their priors (``"prior"``, needs ``rng``)."""
    values = dict(TRUTH)
    if nuisance_truth == "prior":
        for p in objective.spec.parameters:
            if p.name not in TRUTH and p.role.is_nuisance:
                values[p.name] = float(p.prior.dist.rvs(random_state=rng))
    return nominal_theta(objective, values)


def simulate_counts(text: str, theta_by_name: dict, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Expected counts over every channel and one Poisson draw of them.

    ``theta_by_name`` gives the true values; parameters the run text frees but the dict does
    not name stay at the run file's values.
    """
    _, obj = scenario_objective(text, full_range=True)
    base = truth_vector(obj, nuisance_truth="nominal")
    theta = np.array([theta_by_name.get(n, b) for n, b in zip(obj.spec.names, base)])
    expected = obj.predict(theta, "all")
    counts = np.random.default_rng(seed).poisson(expected)
    return expected, counts


# ----------------------------------------------------------------------------------------------
# one replica
def run_replica(task: dict) -> dict:
    """Simulate one spectrum and invert it; returns what the summaries need (picklable)."""
    t0 = time.perf_counter()
    study, seed = task["study"], int(task["seed"])
    extra = task.get("fit_extra", "")
    fit_text = run_text(task["charge_uC"], fixed=task.get("fixed", ()), fit_extra=extra)
    sim_text = run_text(task["charge_uC"], fixed=task.get("fixed", ()), fit_extra=extra,
                        stopping_scale_Mo=task.get("sim_stopping_Mo"))
    _, fit_obj = scenario_objective(fit_text)
    rng = np.random.default_rng([seed, 7])
    theta_true = truth_vector(fit_obj, rng, task.get("nuisance_truth", "nominal"))
    truth = dict(zip(fit_obj.spec.names, theta_true.tolist()))
    sim_truth = dict(truth)
    if task.get("sim_stopping_Mo") is not None:
        # the simulation's run text carries the stopping error; record it as the truth
        sim_truth.pop("stopping.Mo", None)
        truth["stopping.Mo"] = float(task["sim_stopping_Mo"])
    _, counts = simulate_counts(sim_text, sim_truth, seed)
    run = forward.parse_run(fit_text, source=f"{study}-{seed}.toml")
    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run, counts, Path(tmp) / "r.h5", seed=seed, workers=1, progress=False)
    out = {"study": study, "seed": seed, "truth": truth,
           "converged": bool(res.converged), "steps": int(res.diagnostics.get("steps", 0)),
           "tau_max": float(np.nanmax(res.diagnostics.get("autocorr_time", [np.nan]))),
           "walkers": int(res.diagnostics.get("walkers", 0)),
           "counts_in_window": int(counts[WINDOW[0]:WINDOW[1] + 1].sum()),
           "wall_s": time.perf_counter() - t0, "summary": {}}
    for name in res.names:
        s = res.summary[name]
        out["summary"][name] = {k: s[k] for k in ("median", "sd", "low68", "high68", "low95",
                                                  "high95")}
    return out


# ----------------------------------------------------------------------------------------------
def coverage_summary(records: list, names=None) -> dict:
    """Coverage of the 68 % and 95 % intervals with binomial standard errors."""
    n = len(records)
    if names is None:
        names = list(records[0]["summary"]) if records else []
    cov = {"coverage68": {}, "coverage95": {}, "stderr68": {}, "stderr95": {}}
    for name in names:
        for level in (68, 95):
            inside = [r["summary"][name][f"low{level}"] <= r["truth"][name]
                      <= r["summary"][name][f"high{level}"] for r in records]
            p = float(np.mean(inside)) if n else math.nan
            cov[f"coverage{level}"][name] = p
            cov[f"stderr{level}"][name] = math.sqrt(p * (1 - p) / n) if n else math.nan
    return cov


def expected_coverage_given_draws(records: list) -> dict:
    """The coverage a correct posterior would give for these very nuisance draws.

    In the linear-Gaussian approximation at the nominal truth (Fisher matrix ``F`` of the
    likelihood, prior precision ``L``, ``P = F + L``) the posterior mean misses the truth by
    ``-P^-1 L (nu_true - nu_0)`` from the nuisance draws plus Poisson noise of covariance
    ``P^-1 F P^-1``, and the posterior sd is ``sqrt((P^-1)_ii)`` (common practice for Gaussian
    linear models).  Averaging the resulting probability of inclusion over the replicas gives
    the coverage expected from the draws actually made; a gap between it and the nominal level
    is the luck of the draws, a gap between it and the observed coverage would be a fault.
    Also returns the correlation between each replica's error and its predicted shift.
    """
    from scipy import stats
    _, obj = scenario_objective(run_text(CHARGE_UC))
    names = obj.spec.names
    theta0 = truth_vector(obj, nuisance_truth="nominal")
    fisher = fisher_matrix(obj, theta0)
    lam = np.array([1.0 / float(p.prior.dist.std()) ** 2 if p.role.is_nuisance
                    else 0.0 for p in obj.spec.parameters])
    p_inv = np.linalg.inv(fisher + np.diag(lam))
    noise = p_inv @ fisher @ p_inv
    truth = np.array([[r["truth"][n] for n in names] for r in records])
    median = np.array([[r["summary"][n]["median"] for n in names] for r in records])
    shift = -(p_inv @ (lam[:, None] * (truth - theta0).T)).T
    out = {"expected68": {}, "expected95": {}, "error_shift_correlation": {}}
    for i, name in enumerate(names):
        if obj.spec.parameters[i].role is Role.MIXING:
            continue  # half-normal prior: no Gaussian precision to add
        sd_post, sd_noise, m = math.sqrt(p_inv[i, i]), math.sqrt(noise[i, i]), shift[:, i]
        for level, z in ((68, 0.9945), (95, 1.96)):
            inside = (stats.norm.cdf((z * sd_post - m) / sd_noise)
                      - stats.norm.cdf((-z * sd_post - m) / sd_noise))
            out[f"expected{level}"][name] = float(np.mean(inside))
        out["error_shift_correlation"][name] = float(np.corrcoef(median[:, i] - truth[:, i],
                                                                 m)[0, 1])
    return out


def draw_statistics(records: list) -> dict:
    """What the truths drawn and the errors made look like, per quantity.

    ``draws_in_prior68`` / ``draws_in_prior95``: the share of the nuisance truths drawn that
    fall inside their prior's central 68 % (95 %) interval.  Where the spectrum hardly
    constrains a nuisance (posterior = prior) its coverage can be nothing else, so this says how
    lucky the draws were, without any inversion.  ``z_mean`` / ``z_sd``: mean and sd over the
    replicas of ``(posterior median - truth) / posterior sd``, near 0 and 1 for a calibrated
    posterior (a mean off 0 is a bias, an sd above 1 intervals too short).
    """
    _, obj = scenario_objective(run_text(CHARGE_UC))
    out = {"draws_in_prior68": {}, "draws_in_prior95": {}, "z_mean": {}, "z_sd": {}}
    for p in obj.spec.parameters:
        truth = np.array([r["truth"][p.name] for r in records])
        if p.role.is_nuisance:
            for level, tail in ((68, 0.16), (95, 0.025)):
                low, high = p.prior.dist.ppf([tail, 1.0 - tail])
                out[f"draws_in_prior{level}"][p.name] = float(np.mean((truth >= low)
                                                                      & (truth <= high)))
        z = np.array([(r["summary"][p.name]["median"] - r["truth"][p.name])
                      / r["summary"][p.name]["sd"] for r in records])
        out["z_mean"][p.name] = float(np.mean(z))
        out["z_sd"][p.name] = float(np.std(z))
    return out


def _load_state(path: Path) -> list:
    if not path.exists():
        return []
    out = []
    for line in path.read_text().splitlines():
        line = line.strip()
        if line:
            try:
                out.append(json.loads(line))
            except json.JSONDecodeError:  # a line cut short by an interruption
                continue
    return out


def _run_tasks(tasks, state: Path, workers: int, log) -> list:
    done = {(r["study"], r["seed"]) for r in _load_state(state)}
    todo = [t for t in tasks if (t["study"], t["seed"]) not in done]
    log(f"{len(tasks) - len(todo)} of {len(tasks)} replicas already in {state}; "
        f"running {len(todo)} on {workers} processes")
    if todo:
        with ProcessPoolExecutor(max_workers=workers) as pool, state.open("a") as fh:
            futures = [pool.submit(run_replica, t) for t in todo]
            for k, fut in enumerate(as_completed(futures), 1):
                rec = fut.result()
                fh.write(json.dumps(rec) + "\n")
                fh.flush()
                log(f"[{k}/{len(todo)}] {rec['study']} seed {rec['seed']}: "
                    f"{'converged' if rec['converged'] else 'NOT converged'} "
                    f"in {rec['steps']} steps, {rec['wall_s']:.1f} s")
    keys = {(t["study"], t["seed"]) for t in tasks}
    return [r for r in _load_state(state) if (r["study"], r["seed"]) in keys]


def crlb_study(rel_step: float = 1e-3, high_scale: float = 10.0) -> dict:
    """The Cramer-Rao bounds at the truth (nominal nuisances) for the study's counts and for
    ``high_scale`` times them."""
    out = {}
    text = run_text(CHARGE_UC)
    _, obj = scenario_objective(text)
    theta = truth_vector(obj, nuisance_truth="nominal")
    prior_sd = np.array([float(p.prior.dist.std()) if p.role.is_nuisance
                         else math.inf for p in obj.spec.parameters])
    film = [i for i, p in enumerate(obj.spec.parameters) if p.name in TRUTH]
    for label, scale in (("study_counts", 1.0), ("high_counts", high_scale)):
        f = fisher_matrix(obj, theta, rel_step, scale)
        f_half = fisher_matrix(obj, theta, rel_step / 2, scale)
        sub = f[np.ix_(film, film)]
        out[label] = {
            "charge_uC": CHARGE_UC * scale,
            "fixed_nuisances": cramer_rao_sd(sub, 0),
            "fixed_nuisances_half_step": cramer_rao_sd(f_half[np.ix_(film, film)], 0),
            "fixed_nuisances_mixing": cramer_rao_sd(sub, 1),
            "free_nuisances_likelihood_only": cramer_rao_sd(f, 0),
            "free_nuisances_with_priors": cramer_rao_sd(f, 0, prior_sd),
            "free_nuisances_with_priors_mixing": cramer_rao_sd(f, 1, prior_sd),
        }
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--replicas", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=1, help="first replica seed")
    ap.add_argument("--high-replicas", type=int, default=3,
                    help="replicas at ten times the counts, nuisances fixed (crlb_ratio)")
    ap.add_argument("--mismatch-replicas", type=int, default=5)
    ap.add_argument("--nuisance-truth", choices=("prior", "nominal"), default="prior")
    ap.add_argument("--state", default="coverage_state.jsonl",
                    help="JSON-lines file of per-replica results (resumable)")
    ap.add_argument("--only", choices=("all", "coverage", "crlb", "mismatch"), default="all")
    args = ap.parse_args(argv)
    if args.replicas < 1 or args.workers < 1:
        raise SystemExit("--replicas and --workers must be at least 1")

    def log(msg):
        print(msg, file=sys.stderr, flush=True)

    t0 = time.perf_counter()
    state = Path(args.state)
    result = {"machine": f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores",
              "python": platform.python_version(), "date": time.strftime("%Y-%m-%d"),
              "scenario": "invented: 250e15 Mo on glassy carbon, Mo/C width 40e15, 4He 2000 "
                          "keV, 165 deg, window channels %d-%d" % WINDOW}
    if args.only in ("all", "crlb"):
        crlb = crlb_study()
        tasks = [{"study": "high-counts-fixed", "seed": 10_000 + args.seed + i,
                  "charge_uC": 10 * CHARGE_UC, "fixed": ["fluence_scale", "gain_keV",
                                                         "offset_keV", "fwhm_keV", "stopping"]}
                 for i in range(args.high_replicas)]
        recs = _run_tasks(tasks, state, args.workers, log)
        sds = [r["summary"]["film.areal_density"]["sd"] for r in recs]
        bound = crlb["high_counts"]["fixed_nuisances"]
        result["crlb"] = crlb
        result["posterior_sd_high_counts"] = sds
        result["crlb_ratio"] = float(np.mean(sds) / bound)
        result["high_counts_converged"] = sum(r["converged"] for r in recs)
    if args.only in ("all", "mismatch"):
        rows = []
        for label, fixed in (("stopping fixed", ["stopping"]), ("stopping free", [])):
            tasks = [{"study": f"mismatch-{'fixed' if fixed else 'free'}",
                      "seed": 20_000 + args.seed + i, "charge_uC": CHARGE_UC, "fixed": fixed,
                      "sim_stopping_Mo": 1.03} for i in range(args.mismatch_replicas)]
            recs = _run_tasks(tasks, state, args.workers, log)
            for r in recs:
                row = {"fit": label, "seed": r["seed"], "converged": r["converged"]}
                for name in QUANTITIES:
                    s, t = r["summary"][name], r["truth"][name]
                    row[name] = {"truth": t, "median": s["median"],
                                 "low68": s["low68"], "high68": s["high68"],
                                 "low95": s["low95"], "high95": s["high95"],
                                 "in68": s["low68"] <= t <= s["high68"],
                                 "in95": s["low95"] <= t <= s["high95"]}
                if "stopping.Mo" in r["summary"]:
                    row["stopping.Mo_median"] = r["summary"]["stopping.Mo"]["median"]
                rows.append(row)
        result["mismatch"] = rows
    nominal = args.nuisance_truth
    if args.only in ("all", "coverage"):
        tasks = [{"study": f"coverage-{nominal}", "seed": args.seed + i, "charge_uC": CHARGE_UC,
                  "nuisance_truth": nominal} for i in range(args.replicas)]
        recs = _run_tasks(tasks, state, args.workers, log)
        cov = coverage_summary(recs)
        conv = [r for r in recs if r["converged"]]
        result.update({"replicas": len(recs), "converged": len(conv),
                       "nuisance_truth": nominal, **cov,
                       "converged_only": coverage_summary(conv, list(cov["coverage68"]))
                       if conv else {},
                       "given_draws": expected_coverage_given_draws(recs)
                       if nominal == "prior" else {},
                       "draws": draw_statistics(recs),
                       "replica_wall_s_median": float(np.median([r["wall_s"] for r in recs])),
                       "steps_median": float(np.median([r["steps"] for r in recs])),
                       "counts_in_window_median": float(np.median(
                           [r["counts_in_window"] for r in recs]))})
    result["wall_s"] = time.perf_counter() - t0
    if args.json:
        print(json.dumps(result, indent=1))
    else:
        for k, v in result.items():
            print(f"{k}: {v}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
