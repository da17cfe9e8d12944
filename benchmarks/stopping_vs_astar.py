"""Compare sondage's helium electronic stopping with NIST ASTAR; write the report and the widths.

Writes docs/stopping_vs_astar.md (the comparison) and data/stopping/helium_stopping_uncertainty.csv
(recommended prior widths of the stopping nuisances, set from the measured deviations; read by
forward.stopping_uncertainty).

Reference: M. J. Berger, J. S. Coursey, M. A. Zucker and J. Chang, ESTAR, PSTAR and ASTAR,
NIST Standard Reference Database 124 (implementing ICRU Report 49, 1993).  The tabulation is read
from ../shared/refdata/astar_he.csv beside the project (it is not part of sondage; its numbers are
not copied into the report, only our deviations from them).

The comparison is made at the database's own tabulated energies, electronic stopping only (ASTAR
holds no nuclear part), per atom.  Compounds use Bragg's rule on the elements.  ASTAR's amorphous
carbon is compared with our amorphous-carbon coefficients (``[physics] carbon = "amorphous"``),
its graphite with the default ones.

Prior widths: for each elemental material, ``ln(S_ASTAR / S_ours)`` over
``forward._stopping.UNCERTAINTY_BAND_KEV`` is fitted with ``a + b ln(E / 1000 keV)`` (least
squares at the tabulated energies, residual rms ``r``); ``scale_sd = sqrt(f_s^2 + a^2 + r^2)``,
``slope_sd = sqrt(f_b^2 + b^2)`` with the floors ``f_s``, ``f_b`` the root mean square over the
materials of ``sqrt(a^2 + r^2)`` and of ``b``.  Oxygen bound in oxides gets its own row from
SiO2 and Al2O3 (the compound's ASTAR value minus our other elements by Bragg's rule, the rest laid
on oxygen; one line fitted through both compounds' points).  Only these derived deviations are
written, never the database's values.

Run:  .venv/bin/python benchmarks/stopping_vs_astar.py [--out docs/stopping_vs_astar.md]
      [--widths data/stopping/helium_stopping_uncertainty.csv]
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
from forward._stopping import (  # noqa: E402
    HELIUM_UNCERTAINTY_FILE, STOPPING_SLOPE_REFERENCE_KEV, UNCERTAINTY_BAND_KEV, VALIDATED_MAX_KEV,
    StoppingModel, _coefficient_form_departs, _target,
)

__all__ = ["read_astar", "deviations", "astar_bragg_deviation", "band_summary", "model_for",
           "line_fit", "uncertainty_rows", "write_uncertainty_table", "main"]

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


def model_for(name: str) -> StoppingModel:
    """Our electronic stopping for an ASTAR material (amorphous-carbon coefficients for it)."""
    return StoppingModel("4He", nuclear=False,
                         carbon="amorphous" if name == "C_amorphous" else "graphite")


def line_fit(energy_keV: np.ndarray, log_ratio: np.ndarray):
    """``log_ratio = a + b ln(E / E_ref)`` by least squares: (a, b, residual rms)."""
    x = np.log(np.asarray(energy_keV) / STOPPING_SLOPE_REFERENCE_KEV)
    design = np.vstack([np.ones_like(x), x]).T
    (a, b), *_ = np.linalg.lstsq(design, log_ratio, rcond=None)
    r = float(np.sqrt(np.mean((log_ratio - a - b * x) ** 2)))
    return float(a), float(b), r


def _in_band(energy_keV, band=UNCERTAINTY_BAND_KEV):
    return (energy_keV >= band[0]) & (energy_keV <= band[1])


def uncertainty_rows(astar: dict[str, dict]) -> tuple[list[dict], float, float]:
    """Per-material deviation fits and recommended widths; also the two floors."""
    rows = []
    for name in sorted(astar):
        m = astar[name]
        if m["atoms"] != 1:
            continue
        sel = _in_band(m["energy_keV"])
        e = m["energy_keV"][sel]
        ours = model_for(name).mixture({m["formula"]: 1.0}, e)
        y = np.log(m["stopping"][sel] / ours)
        a, b, r = line_fit(e, y)
        phase = ("amorphous" if name == "C_amorphous" else "graphite" if name == "C_graphite"
                 else m["phase"].split(" ")[0].rstrip(","))
        rows.append({"symbol": m["formula"], "Z": _target(m["formula"])[0], "phase": phase, "material": name, "n_energies": int(sel.sum()),
                     "log_offset": a, "slope": b, "residual_rms": r,
                     "max_abs_dev": float(np.max(np.abs(np.expm1(-y))))})
    floor_s = float(np.sqrt(np.mean([r["log_offset"] ** 2 + r["residual_rms"] ** 2
                                     for r in rows])))
    floor_b = float(np.sqrt(np.mean([r["slope"] ** 2 for r in rows])))
    # oxygen bound in solid oxides: the compounds' values minus our other elements
    model = model_for("")
    e_all, y_all, dev_all = [], [], []
    for name in ("SiO2", "Al2O3"):
        m = astar[name]
        fractions = parse_formula(m["formula"])
        sel = _in_band(m["energy_keV"])
        e = m["energy_keV"][sel]
        others = sum(f * model.electronic(s, e) for s, f in fractions.items() if s != "O")
        bound = (m["stopping"][sel] - others) / fractions["O"]
        y = np.log(bound / model.electronic("O", e))
        e_all.append(e)
        y_all.append(y)
    e_all, y_all = np.concatenate(e_all), np.concatenate(y_all)
    a, b, r = line_fit(e_all, y_all)
    rows.append({"symbol": "O", "Z": 8, "phase": "oxide", "material": "SiO2+Al2O3",
                 "n_energies": int(e_all.size), "log_offset": a, "slope": b, "residual_rms": r,
                 "max_abs_dev": float(np.max(np.abs(np.expm1(-y_all))))})
    for row in rows:
        row["scale_sd"] = float(np.sqrt(floor_s ** 2 + row["log_offset"] ** 2
                                        + row["residual_rms"] ** 2))
        row["slope_sd"] = float(np.sqrt(floor_b ** 2 + row["slope"] ** 2))
    return rows, floor_s, floor_b


_WIDTH_COLUMNS = ("symbol", "Z", "phase", "material", "n_energies", "log_offset", "slope",
                  "residual_rms", "max_abs_dev", "scale_sd", "slope_sd")


def write_uncertainty_table(path: Path, rows: list[dict], floor_s: float, floor_b: float) -> None:
    """The widths file read by forward.stopping_uncertainty (measured deviations only)."""
    lo, hi = UNCERTAINTY_BAND_KEV
    head = [
        "# Recommended prior widths of the stopping nuisances of forward.Nuisance, per element,",
        "# for 4He (3He at equal velocity): stopping multiplied by scale * (E / 1000 keV)^slope,",
        "# priors centred on scale 1 and slope 0.  Read by forward.stopping_uncertainty.",
        "#",
        "# Made by benchmarks/stopping_vs_astar.py from the measured deviation of our helium",
        "# electronic stopping (helium_ziegler1977_icru49.csv, helium_icru49_phases.csv) from NIST",
        "# ASTAR (M. J. Berger et al., NIST Standard Reference Database 124, implementing ICRU",
        "# Report 49).  These are deviations, not ASTAR values; do not edit by hand.",
        f"# For each material, ln(S_ASTAR / S_ours) at the tabulated energies from {lo:g} to",
        f"# {hi:g} keV is fitted with log_offset + slope * ln(E / 1000 keV) (residual_rms: rms",
        "# of what the line leaves; max_abs_dev: largest |S_ours / S_ASTAR - 1| in the band).",
        "# scale_sd = sqrt(f_s^2 + log_offset^2 + residual_rms^2), slope_sd = sqrt(f_b^2 + slope^2),",
        "# floors f_s = rms of sqrt(log_offset^2 + residual_rms^2) and f_b = rms of slope over the",
        f"# elemental materials: f_s = {floor_s:.5f}, f_b = {floor_b:.5f}.",
        "# Gas-phase entries (phase gas) are per atom of the gas.  The row O/oxide is oxygen bound",
        "# in SiO2 and Al2O3: ASTAR's compound value minus our other elements by Bragg's rule,",
        "# the rest laid on oxygen, one line through both compounds' points.",
        "# Elements not listed: forward.stopping_uncertainty uses the rms of the widths of the",
        "# listed elements of the same class (Be, C, N, O and Z >= 55, whose ICRU 49 stopping",
        "# leaves the coefficient form above about 1 MeV; or the others).",
        ",".join(_WIDTH_COLUMNS),
    ]
    body = []
    for r in rows:
        body.append(",".join([r["symbol"], str(r["Z"]), r["phase"], r["material"],
                              str(r["n_energies"])]
                             + [f"{r[k]:.5f}" for k in _WIDTH_COLUMNS[5:]]))
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(head + body) + "\n")


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
    parser.add_argument("--widths", type=Path,
                        default=ROOT / "data" / "stopping" / HELIUM_UNCERTAINTY_FILE)
    args = parser.parse_args(argv)
    if not REFDATA.exists():
        print(f"reference data {REFDATA} not present; nothing to compare", file=sys.stderr)
        return 1
    astar = read_astar()
    model = model_for("")
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
        "(`data/stopping/helium_ziegler1977_icru49.csv`; amorphous carbon from "
        "`data/stopping/helium_icru49_phases.csv`). Reference: M. J. Berger et al., ESTAR, "
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
    width_rows, floor_s, floor_b = uncertainty_rows(astar)
    spread_rms, spread_mean, spread_names = [], [], []
    for name in sorted(elements):
        m = elements[name]
        dev = deviations(m, model_for(name))
        lo = band_summary(m["energy_keV"], dev, BANDS_KEV[0])
        hi = band_summary(m["energy_keV"], dev, BANDS_KEV[1])
        sp = band_summary(m["energy_keV"], dev, SPREAD_BAND_KEV)
        spread_rms.append(sp[2])
        spread_mean.append(sp[3])
        spread_names.append(name)
        phase = m["phase"].split(" ")[0].rstrip(",")
        lines.append(f"| {name} | {phase} | {_pct(lo[0])} | {lo[1]:.0f} | {_pct(lo[2])} | "
                     f"{_pct(hi[0])} | {hi[1]:.0f} | {_pct(hi[2])} | {100 * sp[3]:+.2f} |")

    known = {"Si", "Au"}
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
        f"- the same without Si and Au (known to differ more below 1 MeV): {_pct(rms_typ)} %",
        f"- standard deviation over materials of the mean signed deviation: {_pct(sd_mean)} %",
        f"- largest rms in the band: {worst} ({_pct(max(spread_rms))} %)",
        "",
        "These numbers size the prior width of the stopping-scale nuisance parameter: a few "
        "per cent is what the model's stopping is known to within for an element that has not "
        "been measured separately.",
        "",
        f"## Prior widths of the stopping nuisances ({UNCERTAINTY_BAND_KEV[0]:g}-"
        f"{UNCERTAINTY_BAND_KEV[1]:g} keV)",
        "",
        "Line fitted to ln(S_ASTAR / S_ours) against ln(E / 1000 keV): offset a, slope b, "
        "residual rms r. Recommended widths (written to "
        f"`data/stopping/{HELIUM_UNCERTAINTY_FILE}`, read by `forward.stopping_uncertainty`): "
        "scale_sd = sqrt(f_s^2 + a^2 + r^2), slope_sd = sqrt(f_b^2 + b^2), floors "
        f"f_s = {floor_s:.4f} and f_b = {floor_b:.4f} (rms over the elements of sqrt(a^2 + r^2) "
        "and of b). Class: departs for Be, C, N, O and Z >= 55 (ICRU 49 leaves the "
        "coefficient form above about 1 MeV); unlisted elements get the rms of their class.",
        "",
        "| material | phase | class | a | b | r | max abs dev (%) | scale_sd | slope_sd |",
        "|---|---|---|---:|---:|---:|---:|---:|---:|",
    ]
    for r in width_rows:
        cls = "departs" if _coefficient_form_departs(r["Z"]) else "other"
        lines.append(f"| {r['material']} | {r['phase']} | {cls} | {r['log_offset']:+.4f} | "
                     f"{r['slope']:+.4f} | {r['residual_rms']:.4f} | "
                     f"{100 * r['max_abs_dev']:.2f} | {r['scale_sd']:.4f} | {r['slope_sd']:.4f} |")
    lines += [
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
    write_uncertainty_table(args.widths, width_rows, floor_s, floor_b)
    print(f"wrote {args.out} and {args.widths}")
    print(f"spread {SPREAD_BAND_KEV}: rms all {_pct(rms_all)} %, without Si/Au "
          f"{_pct(rms_typ)} %, sd of means {_pct(sd_mean)} %")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
