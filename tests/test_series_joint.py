"""An annealing series over a joint template: every member a run of two measurements.

The sample is INVENTED: a chromium-vanadium film on silicon, each anneal measured at normal
incidence and again tilted by 60 degrees.  The spectra are simulated by ``forward.simulate``
from each measurement's own run (Poisson noise, fixed seeds); the last anneal's tilted
spectrum was taken with another charge, which its series entry says in
``[member.measurement.tilt60]``.  The chains are short (20 steps, not converged): the test is
of the series code path (files, groups, statistics), not of the posterior.  The bad series
files of this kind are in the bad-input corpus (tests/bad_inputs/series_joint_*.toml).
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

import forward
import inversion
from forward import InputError
from inversion import load_series, read_series, run_series
from inversion.series._file import member_path
from inversion.series._runner import member_state

__all__: list[str] = []

TEMPLATE = """\
title = "invented: a CrV film on Si, seen at two tilts, series template"
[[layer]]
name = "film"
formula = "Cr0.5V0.5"
areal_density_1e15 = 250.0
density_g_cm3 = 6.5
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
fixed = ["stopping", "gain_keV@normal", "gain_keV@tilt60", "offset_keV@normal",
         "offset_keV@tilt60", "fwhm_keV@normal", "fwhm_keV@tilt60", "fluence_scale@normal",
         "fluence_scale@tilt60"]
walkers = 8
max_steps = 20
check_every = 10
band_draws = 10
[fit.free]
"film.areal_density" = { uniform = [100, 400] }
"film.mixing" = { halfnormal = 40 }
""" + "".join(f"""
[[measurement]]
name = "{name}"
[measurement.beam]
ion = "4He"
energy_keV = 2000.0
[measurement.geometry]
scattering_deg = 165.0
tilt_deg = {tilt}
layout = "IBM"
[measurement.detector]
fwhm_keV = 15.0
solid_angle_msr = 3.0
[measurement.calibration]
keV_per_channel = 2.0
offset_keV = 20.0
[measurement.exposure]
charge_uC = 2.0
""" for name, tilt in (("normal", 0.0), ("tilt60", 60.0)))

#: label -> (anneal temperature in K or None, the tilted spectrum's charge in uC)
MEMBERS = {"asdep": (None, 2.0), "a650": (650.0, 2.0), "a700": (700.0, 3.0)}


def _write_series(folder):
    (folder / "template.toml").write_text(TEMPLATE)
    found = forward.load_measurements(folder / "template.toml")
    lines = ["[series]", 'title = "invented CrV/Si anneals, two tilts"',
             'run = "template.toml"', "interface = 1", ""]
    for k, (label, (temp_K, charge)) in enumerate(MEMBERS.items()):
        for j, m in enumerate(found.measurements):
            run = m.run
            if m.name == "tilt60":
                run = run.with_overrides({"exposure": {"charge_uC": charge}})
            _, columns = forward.simulate(run, poisson=True, seed=100 * k + j)
            forward.write_spectrum_csv(folder / f"{label}_{m.name}.csv",
                                       {"channel": columns["channel"],
                                        "counts": columns["counts"]},
                                       header_lines=["invented: simulated for the series test"])
        lines += ["[[member]]", f'label = "{label}"',
                  f'spectra = {{ normal = "{label}_normal.csv", tilt60 = "{label}_tilt60.csv" }}']
        lines += (["as_deposited = true"] if temp_K is None else
                  [f"temperature_K = {temp_K}", "time_min = 30"])
        if charge != 2.0:
            lines += ["[member.measurement.tilt60]", f"charge_uC = {charge}"]
        lines.append("")
    path = folder / "series.toml"
    path.write_text("\n".join(lines))
    return path


def test_series_file_of_a_joint_template(tmp_path):
    series = load_series(_write_series(tmp_path))
    assert series.joint and series.measurement_names == ("normal", "tilt60")
    a700 = series.members[2]
    assert a700.spectrum is None and a700.overrides == {}
    assert a700.spectra == {n: str((tmp_path / f"a700_{n}.csv").resolve())
                            for n in ("normal", "tilt60")}
    assert a700.measurement_overrides == {"tilt60": {"exposure": {"charge_uC": 3.0}}}
    text = (tmp_path / "series.toml").read_text()
    cases = [
        (text.replace("charge_uC = 3.0", "gain_keV = 2.1"),
         "member[a700].measurement.tilt60.gain_keV", "allowed keys: charge_uC, particles"),
        (text.replace("charge_uC = 3.0", "charge_uC = 3.0\nparticles = 1e13"),
         "member[a700].measurement.tilt60.particles", "not both"),
        (text.replace(', tilt60 = "a650_tilt60.csv"', ""), "member[a650].spectra",
         "no spectrum for measurement 'tilt60'"),
    ]
    for bad, where, fragment in cases:
        (tmp_path / "bad.toml").write_text(bad)
        with pytest.raises(InputError) as info:
            load_series(tmp_path / "bad.toml")
        assert info.value.where.endswith(where), (info.value.where, where)
        assert fragment in info.value.message and "\n" not in str(info.value)


@pytest.mark.slow
def test_series_over_a_joint_template(tmp_path):
    series = load_series(_write_series(tmp_path))
    out = tmp_path / "series.h5"
    with pytest.warns(UserWarning):  # 20-step members: not converged, and said so
        run_series(series, out, workers=1, progress=False, report=False, arrhenius_steps=500)
    for label in MEMBERS:
        path = member_path(out, label)
        assert member_state(path) == "finished"
        result = inversion.read_result(path)
        # the joint objective: one posterior, the sample's parameters shared
        assert result.names[:2] == ["film.areal_density", "film.mixing"]
        assert list(result.measurements) == ["normal", "tilt60"]
        for name in ("normal", "tilt60"):
            stored = result.measurements[name]
            counts = forward.read_spectrum(tmp_path / f"{label}_{name}.csv").counts
            assert np.array_equal(stored["counts"], counts)
            # the model follows each spectrum, the a700 tilted one at its own charge
            window = np.asarray(stored["window"], bool)
            ratio = stored["model_median"][window].sum() / counts[window].sum()
            assert ratio == pytest.approx(1.0, abs=0.03), (label, name, ratio)
        assert {"film.mixing", "film.mixing_nm"} <= set(result.derived)
    data = read_series(out)
    assert [m["label"] for m in data["members"]] == list(MEMBERS)
    assert set(data["diffusion"]) == {"a650", "a700"}
    assert data["attrs"]["width_unit"] == "nm"  # every layer has a density
    arrhenius = data["arrhenius"]["attrs"]  # two temperatures: the Arrhenius fit was made
    assert 0 <= arrhenius["ea_eV.low95"] <= arrhenius["ea_eV.median"] \
        <= arrhenius["ea_eV.high95"] <= 10  # within its prior, uniform on [0, 10] eV
    with h5py.File(out, "r") as f:
        for label in MEMBERS:  # the series file's links open each member's groups
            assert set(f[f"members/links/{label}/measurements"]) == {"normal", "tilt60"}
