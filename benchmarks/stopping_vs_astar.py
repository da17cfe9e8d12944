"""Compare sondage's helium electronic stopping with NIST ASTAR and write docs/stopping_vs_astar.md.

Reference: M. J. Berger, J. S. Coursey, M. A. Zucker and J. Chang, ESTAR, PSTAR and ASTAR,
NIST Standard Reference Database 124 (implementing ICRU Report 49, 1993).  The tabulation is read
from ../shared/refdata/astar_he.csv beside the project (it is not part of sondage; its numbers are
not copied into the report, only our deviations from them).

The comparison is made at the database's own tabulated energies, electronic stopping only (ASTAR
holds no nuclear part), per atom.  Compounds use Bragg's rule on the elements.

Run:  .venv/bin/python benchmarks/stopping_vs_astar.py [--out docs/stopping_vs_astar.md]
"""

from __future__ import annotations

import sys as _sys
from pathlib import Path as _Path

# benchmarks/coverage.py must not shadow the `coverage` package, which numba probes for on
# import: drop this script's own folder from the module search path before anything imports.
_sys.path[:] = [p for p in _sys.path
                if _Path(p or ".").resolve() != _Path(__file__).resolve().parent]

import argparse
import csv
import datetime
import platform
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from forward._elements import parse_formula  # noqa: E402
from forward._stopping import VALIDATED_MAX_KEV, StoppingModel  # noqa: E402

__all__ = ["read_astar", "deviations", "astar_bragg_deviation", "band_summary", "main"]

REFDATA = ROOT.parent / "shared" / "refdata" / "astar_he.csv"
#: Energy bands (keV) of the report: the low band and the RBS band.
BANDS_KEV = ((100.0, 1000.0), (1000.0, VALIDATED_MAX_KEV))
#: Band over which the element-to-element spread is summarised (typical RBS beam energies).
SPREAD_BAND_KEV = (1000.0, 2500.0)


def read_astar(path: Path = REFDATA) -> dict[str, dict]:
    """Materials of the tabulation: name -> {formula, phase, energy_keV, stopping per atom}."""
    out: dict[str, dict] = {}
    with path.open(newline="") as fh:
        for row in csv.DictReader(fh):
            m = out.setdefault(row["material"], {"formula": row["formula"], "phase": row["phase"],
                                                 "atoms": int(row["atoms_per_formula_unit"]),
                                                 "energy_keV": [], "stopping": []})
            m["energy_keV"].append(1000.0 * float(row["energy_MeV"]))
            m["stopping"].append(float(row["S_electronic_eV_per_1e15_atoms_cm2"]))
    for m in out.values():
        m["energy_keV"] = np.array(m["energy_keV"])
        m["stopping"] = np.array(m["stopping"])
    return out


def deviations(material: dict, model: StoppingModel) -> np.ndarray:
    """Relative deviation (ours / ASTAR - 1) at the tabulated energies, per atom."""
    formula = material["formula"]
    # A single element is taken as it is (forward.parse_formula needs natural abundances,
    # which periodictable lacks for U).
    fractions = {formula: 1.0} if material["atoms"] == 1 else parse_formula(formula)
    ours = model.mixture(fractions, material["energy_keV"])
    return ours / material["stopping"] - 1.0


def astar_bragg_deviation(name: str, astar: dict[str, dict]) -> np.ndarray | None:
    """ASTAR's own elements combined by Bragg's rule, relative to ASTAR's compound value.

    Shows how much of a compound's difference lies in the compound itself (phase and chemical
    binding) rather than in our element coefficients.  None when an element is missing.
    """
    m = astar[name]
    total = np.zeros_like(m["stopping"])
    for symbol, fraction in parse_formula(m["formula"]).items():
        candidates = [v for k, v in astar.items() if v["atoms"] == 1 and v["formula"] == symbol
                      and k != "C_amorphous"]
        if not candidates or not np.array_equal(candidates[0]["energy_keV"], m["energy_keV"]):
            return None
        total = total + fraction * candidates[0]["stopping"]
    return total / m["stopping"] - 1.0


def band_summary(energy_keV: np.ndarray, dev: np.ndarray, band: tuple[float, float]):
    """(max |dev|, energy of the max in keV, rms dev, mean dev) over a closed energy band."""
    sel = (energy_keV >= band[0]) & (energy_keV <= band[1])
    d, e = dev[sel], energy_keV[sel]
    i = int(np.argmax(np.abs(d)))
    return float(abs(d[i])), float(e[i]), float(np.sqrt(np.mean(d ** 2))), float(np.mean(d))


def _pct(x: float) -> str:
    return f"{100 * x:.2f}"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "stopping_vs_astar.md")
    args = parser.parse_args(argv)
    if not REFDATA.exists():
        print(f"reference data {REFDATA} not present; nothing to compare", file=sys.stderr)
        return 1
    astar = read_astar()
    model = StoppingModel("4He", nuclear=False)
    elements = {k: v for k, v in astar.items() if v["atoms"] == 1}
    compounds = {k: v for k, v in astar.items() if v["atoms"] > 1}

    lines = [
        "# Helium electronic stopping against NIST ASTAR",
        "",
        "Generated by `benchmarks/stopping_vs_astar.py`; do not edit by hand.",
        f"Date {datetime.date.today().isoformat()}, Python {platform.python_version()}, "
        f"{platform.machine()}.",
        "",
        "Our model: J. F. Ziegler, *Helium: Stopping Powers and Ranges in All Elemental Matter* "
        "(Pergamon, 1977) with the ICRU Report 49 (1993) revisions "
        "(`data/stopping/helium_ziegler1977_icru49.csv`). Reference: M. J. Berger et al., ESTAR, "
        "PSTAR and ASTAR, NIST Standard Reference Database 124 (implementing ICRU Report 49). "
        "Electronic stopping only, per atom, at the database's tabulated energies. Gas-phase "
        "entries (H, He, N, O, Ne, Ar, Kr, Xe) are per atom of the gas. Deviation = ours / ASTAR - 1.",
        "",
        "## Elements",
        "",
        "| material | phase | max abs dev 0.1-1 MeV (%) | at (keV) | rms 0.1-1 MeV (%) "
        f"| max abs dev 1-{VALIDATED_MAX_KEV / 1000:g} MeV (%) | at (keV) "
        f"| rms 1-{VALIDATED_MAX_KEV / 1000:g} MeV (%) | mean {SPREAD_BAND_KEV[0] / 1000:g}-"
        f"{SPREAD_BAND_KEV[1] / 1000:g} MeV (%) |",
        "|---|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    spread_rms, spread_mean, spread_names = [], [], []
    for name in sorted(elements):
        m = elements[name]
        dev = deviations(m, model)
        lo = band_summary(m["energy_keV"], dev, BANDS_KEV[0])
        hi = band_summary(m["energy_keV"], dev, BANDS_KEV[1])
        sp = band_summary(m["energy_keV"], dev, SPREAD_BAND_KEV)
        spread_rms.append(sp[2])
        spread_mean.append(sp[3])
        spread_names.append(name)
        phase = m["phase"].split(" ")[0].rstrip(",")
        lines.append(f"| {name} | {phase} | {_pct(lo[0])} | {lo[1]:.0f} | {_pct(lo[2])} | "
                     f"{_pct(hi[0])} | {hi[1]:.0f} | {_pct(hi[2])} | {100 * sp[3]:+.2f} |")

    known = {"Si", "C_amorphous", "Au"}
    rms_all = float(np.sqrt(np.mean(np.square(spread_rms))))
    rms_typ = float(np.sqrt(np.mean([r ** 2 for r, n in zip(spread_rms, spread_names)
                                     if n not in known])))
    sd_mean = float(np.std(spread_mean))
    worst = spread_names[int(np.argmax(spread_rms))]
    lines += [
        "",
        f"## Spread over elements, {SPREAD_BAND_KEV[0] / 1000:g}-{SPREAD_BAND_KEV[1] / 1000:g} MeV",
        "",
        f"- rms deviation over all {len(spread_names)} elemental materials: **{_pct(rms_all)} %** "
        "(root mean square of each material's rms deviation in the band)",
        f"- the same without Si, amorphous C and Au (known to differ more): {_pct(rms_typ)} %",
        f"- standard deviation over materials of the mean signed deviation: {_pct(sd_mean)} %",
        f"- largest rms in the band: {worst} ({_pct(max(spread_rms))} %)",
        "",
        "These numbers size the prior width of the stopping-scale nuisance parameter: a few "
        "per cent is what the model's stopping is known to within for an element that has not "
        "been measured separately.",
        "",
        "## Compounds by Bragg's rule",
        "",
        "Our elements combined by Bragg's rule (oxygen and hydrogen from their gas-phase "
        "coefficients) against the database's compound values. Oxygen bound in a solid stops "
        "differently from the free gas, so part of these differences is a physical failure of "
        "Bragg's rule, not of the element coefficients: the last two columns apply Bragg's rule "
        "to the database's own element values (gas-phase O and H) and show nearly the same "
        "excess.",
        "",
        "| compound | max abs dev 0.1-1 MeV (%) | at (keV) | mean 0.1-1 MeV (%) "
        f"| max abs dev 1-{VALIDATED_MAX_KEV / 1000:g} MeV (%) | at (keV) "
        f"| mean 1-{VALIDATED_MAX_KEV / 1000:g} MeV (%) "
        f"| ASTAR elements by Bragg, mean 0.1-1 MeV (%) "
        f"| ASTAR elements by Bragg, mean 1-{VALIDATED_MAX_KEV / 1000:g} MeV (%) |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for name in sorted(compounds):
        m = compounds[name]
        dev = deviations(m, model)
        lo = band_summary(m["energy_keV"], dev, BANDS_KEV[0])
        hi = band_summary(m["energy_keV"], dev, BANDS_KEV[1])
        own = astar_bragg_deviation(name, astar)
        if own is None:
            own_lo = own_hi = "n/a"
        else:
            own_lo = f"{100 * band_summary(m['energy_keV'], own, BANDS_KEV[0])[3]:+.2f}"
            own_hi = f"{100 * band_summary(m['energy_keV'], own, BANDS_KEV[1])[3]:+.2f}"
        lines.append(f"| {name} | {_pct(lo[0])} | {lo[1]:.0f} | {100 * lo[3]:+.2f} | "
                     f"{_pct(hi[0])} | {hi[1]:.0f} | {100 * hi[3]:+.2f} | {own_lo} | {own_hi} |")
    lines.append("")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text("\n".join(lines))
    print(f"wrote {args.out}")
    print(f"spread {SPREAD_BAND_KEV}: rms all {_pct(rms_all)} %, without Si/C_amorphous/Au "
          f"{_pct(rms_typ)} %, sd of means {_pct(sd_mean)} %")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
