"""Do the error bars hold when the world is not our model?  The model-mismatch study.

Every sample here is INVENTED (not a real sample, not a measurement).  "The world" that makes
each spectrum uses other published physics choices than sondage's defaults:

* **stopping** from the NIST ASTAR tabulations (M. J. Berger et al., NIST Standard Reference
  Database 124, implementing ICRU Report 49), electronic stopping plus the universal nuclear
  stopping of Ziegler, Biersack and Littmark (1985), given to the forward model as user stopping
  tables built at run time from ../shared/refdata (never shipped).  Oxygen inside the oxide
  sample stops as ASTAR's Al2O3 compound says (effective oxygen stopping = compound stopping
  per formula unit minus two aluminium atoms, over three), not as Bragg's rule with free oxygen;
* **straggling**: plain Bohr straggling (``[physics] straggling = "bohr"``) where the forward
  model offers it, instead of the default Lindhard-Scharff correction;
* **slicing**: a grid ten times finer (``slice_fraction = 0.025``).

Each world spectrum (0.3 to 2 million counts) gets Poisson noise and is inverted with sondage's
default settings from a run file whose layer values are the truth perturbed by about 10 %
(what a user's first guess would be).  Nuisances (fluence, calibration, resolution) are at
their nominal values in the world; the fit does not know that.

Printed with ``--json``:

* ``coverage95`` per sample and quantity, per sample, and overall: the fraction of replicas
  whose central 95 % interval holds the truth (areal densities, mixing widths, fractions);
* ``seed_agreement``: over the replicas inverted twice with different seeds, the fraction whose
  two 68 % intervals overlap for every quantity;
* ``ppc_flagged``: the fraction of inversions whose posterior predictive check rejected the
  model (``/diagnostics`` attribute ``model_rejected``; ``null`` when the program does not
  record one);
* ``unresolved_widths`` / ``unresolved_bound_held``: interface widths the program names as
  not resolved by the spectrum (``inversion/fit/_resolution.py``: to be quoted as an upper
  bound), and the fraction whose truth lies below the 95 % upper bound; ``resolved_widths`` /
  ``resolved_width_coverage95`` the same for the widths it does not flag;
* ``discretization_deviance``: for the heavy film at 1.5 million counts, the Poisson deviance
  between the spectrum the fit's default grid gives at the true areal density and that of a
  grid twenty times finer (same physics), over the fit window;
* wall time.

Per-inversion records go to a JSON-lines state file as they arrive, so an interrupted study
resumes where it stopped (``--state``).

    .venv/bin/python benchmarks/mismatch.py --json --replicas 10 --workers 2
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import os
import platform
import sys
import tempfile
import time
import warnings
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != HERE]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import forward  # noqa: E402
import inversion  # noqa: E402
from benchmarks._runs import run_head  # noqa: E402

__all__ = ["SAMPLES", "Sample", "LayerSpec", "world_tables", "run_text", "simulate_world",
           "run_case", "summarise", "discretization_deviance", "main"]

REFDATA = ROOT.parent / "shared" / "refdata"
#: energy grid of the world's stopping tables, keV (ASTAR covers 1 keV to 10 MeV)
_TABLE_KEV = np.geomspace(5.0, 4000.0, 240)


@dataclass(frozen=True)
class LayerSpec:
    """One layer of an invented sample: truth, and what the fit frees."""

    name: str
    formula: str
    areal_density_1e15: float | None  # None: the substrate
    density_g_cm3: float
    mixing_1e15: float | None = None  # width of the interface below; None: sharp, not fitted
    free_composition: bool = False
    truth_fractions: dict | None = None  # the world's composition when it differs from formula


@dataclass(frozen=True)
class Sample:
    name: str
    description: str
    layers: tuple
    charge_uC: float
    incidence_deg: float = 0.0
    exit_deg: float = 15.0
    scattering_deg: float = 165.0
    energy_keV: float = 2000.0
    fwhm_keV: float = 15.0
    oxide_compound: str | None = None  # ASTAR compound whose oxygen the world uses
    extra_fit: str = ""

    def quantities(self) -> dict:
        """Quantity name -> true value (what coverage is measured on)."""
        out = {}
        for L in self.layers:
            if L.areal_density_1e15 is not None:
                out[f"{L.name}.areal_density"] = L.areal_density_1e15
            if L.mixing_1e15 is not None:
                out[f"{L.name}.mixing"] = L.mixing_1e15
            if L.free_composition:
                for sym, f in L.truth_fractions.items():
                    out[f"{L.name}.fraction.{sym}"] = f
        return out


#: The invented samples.  Charges are set so that each spectrum holds 0.3-2 million counts.
SAMPLES = (
    Sample("heavy", "INVENTED: a tungsten film on silicon with a sharp interface",
           (LayerSpec("film", "W", 320.0, 19.3),
            LayerSpec("wafer", "Si", None, 2.33)), charge_uC=9.0),
    Sample("tilted", "INVENTED: silver over titanium on silicon, tilted 55 degrees",
           (LayerSpec("top", "Ag", 120.0, 10.5, mixing_1e15=8.0),
            LayerSpec("base", "Ti", 350.0, 4.5, mixing_1e15=15.0),
            LayerSpec("wafer", "Si", None, 2.33)), charge_uC=12.0, incidence_deg=55.0,
           exit_deg=40.0, scattering_deg=165.0),
    Sample("mixed", "INVENTED: an iron film on silicon whose interface has mixed",
           (LayerSpec("film", "Fe", 400.0, 7.87, mixing_1e15=45.0),
            LayerSpec("wafer", "Si", None, 2.33)), charge_uC=10.0),
    Sample("oxide", "INVENTED: an alumina film of uncertain stoichiometry on glassy carbon",
           (LayerSpec("oxide", "Al2O3", 900.0, 3.5, free_composition=True,
                      truth_fractions={"Al": 0.42, "O": 0.58}),
            LayerSpec("base", "C", None, 1.8)), charge_uC=25.0, oxide_compound="Al2O3"),
    Sample("marker", "INVENTED: a thin germanium marker buried under silicon",
           (LayerSpec("cap", "Si", 500.0, 2.33, mixing_1e15=10.0),
            LayerSpec("marker", "Ge", 12.0, 5.3, mixing_1e15=30.0),
            LayerSpec("wafer", "Si", None, 2.33)), charge_uC=18.0),
)

_ASTAR_NAME = {"C": "C_graphite", "O": "O_gas", "N": "N_gas", "H": "H_gas"}


# ----------------------------------------------------------------------------------------------
# the world's physics
def _astar_rows():
    path = REFDATA / "astar_he.csv"
    if not path.exists():
        raise SystemExit(f"NIST ASTAR tabulation {path} not found: the mismatch study needs "
                         "../shared/refdata beside the project")
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


def _astar(rows, material: str, column: str) -> tuple[np.ndarray, np.ndarray]:
    pts = [(float(r["energy_MeV"]) * 1000.0, float(r[column])) for r in rows
           if r["material"] == material]
    if not pts:
        raise KeyError(material)
    e, s = np.array(pts).T
    return e, s


def _loglog(e_tab, s_tab, e):
    return np.exp(np.interp(np.log(e), np.log(e_tab), np.log(s_tab)))


def world_tables(sample: Sample, folder: Path) -> dict:
    """Write the world's stopping tables (ASTAR electronic + ZBL nuclear) into ``folder``.

    Returns ``{symbol: file name}`` for ``[physics] stopping_tables``.
    """
    rows = _astar_rows()
    ion = forward.ion("4He")
    symbols = sorted({s for L in sample.layers for s in forward.parse_formula(L.formula)})
    out = {}
    per_atom = "S_electronic_eV_per_1e15_atoms_cm2"
    for sym in symbols:
        el = forward.element(sym)
        if sym == "O" and sample.oxide_compound:
            e_c, s_c = _astar(rows, sample.oxide_compound, "S_electronic_eV_per_1e15_formula_units_cm2")
            metal = [s for s in forward.parse_formula(sample.oxide_compound) if s != "O"][0]
            e_m, s_m = _astar(rows, metal, per_atom)
            counts = forward.parse_formula(sample.oxide_compound)
            n_metal, n_o = counts[metal], counts["O"]
            total = sum(counts.values())
            # parse_formula gives atom fractions: scale to atoms per formula unit
            n_metal, n_o = n_metal * _atoms_per_unit(sample.oxide_compound) / total, \
                n_o * _atoms_per_unit(sample.oxide_compound) / total
            electronic = (_loglog(e_c, s_c, _TABLE_KEV)
                          - n_metal * _loglog(e_m, s_m, _TABLE_KEV)) / n_o
        else:
            e_t, s_t = _astar(rows, _ASTAR_NAME.get(sym, sym), per_atom)
            electronic = _loglog(e_t, s_t, _TABLE_KEV)
        nuclear = np.asarray(forward.nuclear_stopping(ion.z, ion.mass_u, el.z, el.mass_u,
                                                      _TABLE_KEV))
        total_s = electronic + nuclear
        if not np.all(total_s > 0):
            raise ValueError(f"world stopping of {sym} not positive")
        name = f"world_{sym}.csv"
        with (folder / name).open("w") as fh:
            fh.write(f"# world stopping of 4He in {sym}: NIST ASTAR electronic "
                     "(../shared/refdata) + ZBL 1985 nuclear; mismatch study only\n")
            fh.write("energy_keV,stopping\n")
            for e, s in zip(_TABLE_KEV, total_s):
                fh.write(f"{e:.6g},{s:.8g}\n")
        out[sym] = name
    return out


def _atoms_per_unit(formula: str) -> float:
    import re
    return sum(float(n) if n else 1.0 for _, n in re.findall(r"([A-Z][a-z]?)([0-9.]*)", formula))


def _straggling_key_supported() -> bool:
    try:
        forward.parse_run(run_text(SAMPLES[0], physics='straggling = "bohr"'),
                          source="probe.toml")
        return True
    except forward.InputError:
        return False


# ----------------------------------------------------------------------------------------------
# run files
def _formula(L: LayerSpec, world: bool) -> str:
    if world and L.truth_fractions:
        return "".join(f"{s}{f:g}" for s, f in L.truth_fractions.items())
    return L.formula


def run_text(sample: Sample, *, physics: str = "", guess: dict | None = None,
             world: bool = False) -> str:
    """A run file for ``sample``: the truth (``world``) or a user's guess (``guess``: layer
    name -> areal density)."""
    lines = run_head(title=sample.description, charge_uC=sample.charge_uC,
                     energy_keV=sample.energy_keV, scattering_deg=sample.scattering_deg,
                     incidence_deg=sample.incidence_deg, exit_deg=sample.exit_deg,
                     fwhm_keV=sample.fwhm_keV, live_fraction=1.0).splitlines()
    for L in sample.layers:
        lines += ["[[layer]]", f'name = "{L.name}"', f'formula = "{_formula(L, world)}"',
                  f"density_g_cm3 = {L.density_g_cm3}"]
        if L.areal_density_1e15 is None:
            lines.append("substrate = true")
        else:
            value = L.areal_density_1e15 if guess is None else guess[L.name]
            lines.append(f"areal_density_1e15 = {value:.6g}")
    if physics:
        lines += ["[physics]", physics]
    lines += ["[fit]"]
    if sample.extra_fit:
        lines.append(sample.extra_fit)
    lines += ["[fit.free]"]
    for L in sample.layers:
        if L.areal_density_1e15 is not None:
            lines.append(f'"{L.name}.areal_density" = true')
        if L.mixing_1e15 is not None:
            lines.append(f'"{L.name}.mixing" = true')
        if L.free_composition:
            lines.append(f'"{L.name}.composition" = true')
    return "\n".join(lines) + "\n"


def _truth_theta(objective, sample: Sample) -> np.ndarray:
    """The objective's parameter vector at the world's truth (nuisances at the run file's
    values: fluence 1, the calibration and resolution as written, stopping and straggling
    factors 1, slopes 0)."""
    from inversion import Role

    truth = sample.quantities()
    nu = objective.default_nuisance
    theta = []
    for p in objective.spec.parameters:
        if p.name in truth:
            theta.append(truth[p.name])
        elif p.role.is_nuisance:
            value = np.atleast_1d(np.asarray(getattr(nu, p.role.field), dtype=float))
            theta.append(float(value[p.target]) if value.size > 1 or p.role.per_element
                         else float(value[0]))
        elif p.role is Role.SHARE:
            theta.append(_share_value(objective, sample.layers[p.target], p))
        else:
            raise ValueError(f"no truth for {p.name}")
    return np.array(theta, dtype=float)


def _share_value(objective, layer, p):
    """Stick-breaking share of a species in a layer whose true fractions are known."""
    species = objective.spec.species
    columns = objective.spec.share_species[p.target]
    order = [species[c] for c in columns]
    sym = p.name.split(".share.")[1]
    element_of = {s: [k for k in layer.truth_fractions if s.startswith(k)][0] for s in order}
    rest = 1.0
    for s in order:
        f = layer.truth_fractions[element_of[s]]
        if s == sym:
            return f / rest
        rest -= f
    raise ValueError(p.name)


def simulate_world(sample: Sample, folder: Path, *, n_channels: int = 1100,
                   straggling_law: str | None = "bohr", slice_fraction: float = 0.025):
    """Expected counts of ``sample`` in the world (see module notes), every channel."""
    tables = world_tables(sample, folder)
    physics = ["stopping_tables = { " + ", ".join(f'{s} = "{n}"' for s, n in tables.items())
               + " }", f"slice_fraction = {slice_fraction}"]
    if straggling_law:
        physics.append(f'straggling = "{straggling_law}"')
    text = run_text(sample, physics="\n".join(physics), world=True)
    path = folder / "world.toml"
    path.write_text(text)
    run = forward.load_run(path)
    _, obj = inversion.prepare(run, np.ones(n_channels))
    return obj.predict(_truth_theta(obj, sample), "all")


def discretization_deviance(sample: Sample, total_counts: float = 1.5e6,
                            n_channels: int = 1100, refine: int = 20) -> float:
    """Deviance between the fit's default grid (built from a perturbed guess) and a grid
    ``refine`` times finer, both at the true areal density, default physics, over the window."""
    guess = {L.name: L.areal_density_1e15 * 1.07 for L in sample.layers
             if L.areal_density_1e15 is not None}
    spectra = []
    for frac, g in ((0.25, guess), (0.25 / refine, None)):
        text = run_text(sample, physics=f"slice_fraction = {frac}", guess=g)
        run = forward.parse_run(text, source=f"{sample.name}-grid.toml")
        _, obj = inversion.prepare(run, np.ones(n_channels))
        spectra.append((obj.predict(_truth_theta(obj, sample), "all"), obj.mask))
    (coarse, mask), (fine, _) = spectra
    scale = total_counts / fine.sum()
    d, f = coarse[mask] * scale, fine[mask] * scale
    ok = (d > 0) & (f > 0)
    return float(2.0 * np.sum(f[ok] * np.log(f[ok] / d[ok]) - (f[ok] - d[ok])))


# ----------------------------------------------------------------------------------------------
# one inversion
def run_case(task: dict) -> dict:
    """Simulate one world spectrum (seeded), invert it from a perturbed guess; picklable."""
    t0 = time.perf_counter()
    sample = {s.name: s for s in SAMPLES}[task["sample"]]
    replica, seed = int(task["replica"]), int(task["seed"])
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        expected = simulate_world(sample, folder, straggling_law=task["straggling"])
        counts = np.random.default_rng([replica, 11, len(sample.name)]).poisson(expected)
        rng = np.random.default_rng([replica, 23, len(sample.name)])
        guess = {L.name: L.areal_density_1e15 * float(np.exp(0.1 * rng.standard_normal()))
                 for L in sample.layers if L.areal_density_1e15 is not None}
        fit_path = folder / "fit.toml"
        fit_path.write_text(run_text(sample, guess=guess))
        spectrum = folder / "spectrum.csv"
        np.savetxt(spectrum, np.column_stack([np.arange(counts.size), counts]), fmt="%d",
                   delimiter=",", header="channel,counts", comments="")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = inversion.invert(fit_path, spectrum, folder / "r.h5", seed=seed, workers=1,
                                   progress=False)
    truth = sample.quantities()
    diag = res.diagnostics
    rejected = diag.get("model_rejected")
    said = [str(w) for w in np.atleast_1d(diag.get("warnings", []))]
    unresolved = sorted({w.split(":")[0] for w in said if "below the depth resolution" in w})
    return {"sample": sample.name, "replica": replica, "seed": seed,
            "counts": int(counts.sum()), "truth": truth,
            "summary": {k: {q: float(res.summary[k][q]) for q in
                            ("median", "low68", "high68", "low95", "high95")}
                        for k in list(truth) + [n for n in res.names if n not in truth]
                        if k in res.summary},
            "converged": bool(res.converged), "steps": int(diag.get("steps", 0)),
            "unresolved": unresolved,
            "model_rejected": None if rejected is None else bool(rejected),
            "ppc_p_value": (None if diag.get("ppc_p_value") is None
                            else float(diag.get("ppc_p_value"))),
            "wall_s": time.perf_counter() - t0}


# ----------------------------------------------------------------------------------------------
def summarise(records: list) -> dict:
    """Coverage, seed agreement and predictive-check flags from the per-inversion records."""
    first = [r for r in records if r["seed"] == _seed(r["sample"], r["replica"], 0)]
    out = {"coverage95": {}, "coverage95_by_sample": {}, "n": {}, "converged_fraction": {},
           "nuisance_medians": {}}
    inside_all = []
    for s in SAMPLES:
        recs = [r for r in first if r["sample"] == s.name]
        if not recs:
            continue
        cov = {}
        inside_s = []
        for q in s.quantities():
            inside = [r["summary"][q]["low95"] <= r["truth"][q] <= r["summary"][q]["high95"]
                      for r in recs if q in r["summary"]]
            cov[q] = float(np.mean(inside)) if inside else math.nan
            inside_s += inside
        out["coverage95"][s.name] = cov
        out["coverage95_by_sample"][s.name] = float(np.mean(inside_s))
        out["n"][s.name] = len(recs)
        out["converged_fraction"][s.name] = float(np.mean([r["converged"] for r in recs]))
        nuis = {}
        for name in recs[0]["summary"]:
            if name not in s.quantities():
                nuis[name] = float(np.median([r["summary"][name]["median"] for r in recs]))
        out["nuisance_medians"][s.name] = nuis
        inside_all += inside_s
    out["coverage95_overall"] = float(np.mean(inside_all)) if inside_all else math.nan
    # seeds: pairs (sample, replica) inverted with two seeds
    pairs = {}
    for r in records:
        pairs.setdefault((r["sample"], r["replica"]), []).append(r)
    agree = []
    for (name, _), recs in pairs.items():
        if len(recs) < 2:
            continue
        a, b = recs[:2]
        ok = all(max(a["summary"][q]["low68"], b["summary"][q]["low68"])
                 <= min(a["summary"][q]["high68"], b["summary"][q]["high68"])
                 for q in a["truth"] if q in a["summary"] and q in b["summary"])
        agree.append(ok)
    # widths the program names as not resolved (an upper bound, not a measurement): does the
    # bound hold, and how do the widths it does call measured cover?
    bound_held, measured_inside = [], []
    for r in first:
        if "unresolved" not in r:
            continue  # recorded before the flag existed
        for q, t in r["truth"].items():
            if not q.endswith(".mixing") or q not in r["summary"]:
                continue
            if q in r["unresolved"]:
                bound_held.append(t <= r["summary"][q]["high95"])
            else:
                s = r["summary"][q]
                measured_inside.append(s["low95"] <= t <= s["high95"])
    out["unresolved_widths"] = len(bound_held)
    out["unresolved_bound_held"] = float(np.mean(bound_held)) if bound_held else None
    out["resolved_widths"] = len(measured_inside)
    out["resolved_width_coverage95"] = (float(np.mean(measured_inside)) if measured_inside
                                        else None)
    out["seed_agreement"] = float(np.mean(agree)) if agree else None
    out["seed_pairs"] = len(agree)
    flags = [r["model_rejected"] for r in records if r["model_rejected"] is not None]
    out["ppc_flagged"] = float(np.mean(flags)) if flags else None
    return out


def noiseless_modes(sample: Sample, straggling_law: str | None = "bohr") -> dict:
    """Where the posterior's mode lies on the world's spectrum without noise.

    The world's expected counts (rounded) are fitted from the truth by local optimisation
    (scipy Powell, then Nelder-Mead) twice: every parameter free, and the sample's quantities
    (areal densities, widths, fractions) held at the truth with the nuisances free.  A mode
    far from the truth with a log-posterior far above the held optimum is a bias of the model;
    one close in log-posterior is a ridge the data do not resolve (the posterior should then
    cover the truth).

    Returns
    -------
    dict
        ``free`` and ``held``: ``{"log_posterior": ..., "values": {name: value}}``.
    """
    from scipy.optimize import minimize

    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        folder = Path(tmp)
        counts = np.round(simulate_world(sample, folder, straggling_law=straggling_law))
        (folder / "fit.toml").write_text(run_text(sample))
        _, obj = inversion.prepare(forward.load_run(folder / "fit.toml"), counts.astype(int))
        names = [p.name for p in obj.spec.parameters]
        truth = _truth_theta(obj, sample)
        held = [i for i, n in enumerate(names) if n in sample.quantities()
                or ".share." in n]

        def best(free):
            def f(u):
                t = truth.copy()
                t[free] = u
                return -obj.log_posterior(t)
            r = minimize(f, truth[free], method="Powell",
                         options=dict(maxiter=40000, xtol=1e-6, ftol=1e-10))
            r = minimize(f, r.x, method="Nelder-Mead",
                         options=dict(maxiter=40000, xatol=1e-7, fatol=1e-9))
            t = truth.copy()
            t[free] = r.x
            values = {n: float(v) for n, v in zip(names, t)}
            values.update({n: float(v) for n, v in zip(obj.derived_names()[0], obj.derived(t))
                           if n not in values})
            return {"log_posterior": float(-r.fun), "values": values}

        return {"free": best(list(range(len(names)))),
                "held": best([i for i in range(len(names)) if i not in held])}


def _seed(sample: str, replica: int, which: int) -> int:
    index = [s.name for s in SAMPLES].index(sample)
    return 1000 * index + replica + 500 * which


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--replicas", type=int, default=10)
    parser.add_argument("--seed-replicas", type=int, default=3,
                        help="replicas per sample inverted a second time with another seed")
    parser.add_argument("--samples", default=",".join(s.name for s in SAMPLES))
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--state", default=None, help="JSON-lines file of finished inversions")
    parser.add_argument("--straggling", default="auto",
                        help="the world's straggling law: auto (bohr where available), bohr, "
                             "lindhard-scharff")
    parser.add_argument("--noiseless", action="store_true",
                        help="instead of the study: each sample's posterior mode on the "
                             "world's spectrum without noise, free and with the sample's "
                             "quantities held at the truth (noiseless_modes)")
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    straggling = args.straggling
    if straggling == "auto":
        straggling = "bohr" if _straggling_key_supported() else None
    elif straggling == "lindhard-scharff":
        straggling = None
    if args.noiseless:
        names = [n for n in args.samples.split(",") if n]
        out = {s.name: noiseless_modes(s, straggling) for s in SAMPLES if s.name in names}
        for name, modes in out.items():
            truth = {s.name: s for s in SAMPLES}[name].quantities()
            free, held = modes["free"], modes["held"]
            print(f"{name}: log-posterior {free['log_posterior']:.1f} at the mode, "
                  f"{held['log_posterior']:.1f} with the sample held at the truth; mode: "
                  + ", ".join(f"{q} {free['values'].get(q, math.nan):.4g} (truth {t:g})"
                              for q, t in truth.items() if q in free["values"]))
        if args.json:
            print(json.dumps(out))
        return 0
    names = [n for n in args.samples.split(",") if n]
    state = Path(args.state) if args.state else None
    records = []
    if state is not None and state.exists():
        records = [json.loads(line) for line in state.read_text().splitlines() if line.strip()]
    done = {(r["sample"], r["replica"], r["seed"]) for r in records}
    tasks = []
    for name in names:
        for replica in range(args.replicas):
            for which in (0, 1) if replica < args.seed_replicas else (0,):
                seed = _seed(name, replica, which)
                if (name, replica, seed) not in done:
                    tasks.append({"sample": name, "replica": replica, "seed": seed,
                                  "straggling": straggling})
    with ProcessPoolExecutor(max_workers=args.workers) as pool:
        futures = [pool.submit(run_case, t) for t in tasks]
        for fut in as_completed(futures):
            rec = fut.result()
            records.append(rec)
            if state is not None:
                with state.open("a") as fh:
                    fh.write(json.dumps(rec) + "\n")
            if not args.json:
                print(f"{rec['sample']} replica {rec['replica']} seed {rec['seed']}: "
                      f"{rec['wall_s']:.0f} s, converged {rec['converged']}", flush=True)
    heavy = {s.name: s for s in SAMPLES}["heavy"]
    out = {"machine": f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores",
           "date": time.strftime("%Y-%m-%d"),
           "world": {"stopping": "NIST ASTAR electronic + ZBL nuclear",
                     "straggling": straggling or "lindhard-scharff (bohr unavailable)",
                     "slice_fraction": 0.025},
           **summarise([r for r in records if r["sample"] in names]),
           "discretization_deviance": discretization_deviance(heavy),
           "wall_s": time.perf_counter() - t0,
           "inversions": len([r for r in records if r["sample"] in names])}
    print(json.dumps(out, indent=1) if args.json else out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
