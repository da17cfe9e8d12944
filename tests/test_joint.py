"""Several spectra of one sample, inverted jointly (run files with [[measurement]] tables).

The sample is INVENTED: a tantalum film on silicon, measured at normal incidence and tilted by
60 degrees.  "The world" has the film's stopping 4 % above the fit's (the forward model's own
stopping-scale nuisance, 1.04 for Ta), Poisson noise with a fixed seed; the fit is told
nothing of it.
"""

from __future__ import annotations

import dataclasses

import h5py
import numpy as np
import pytest

import forward
import inversion
from forward import InputError
from inversion._api import prepare_joint
from inversion._joint import load_joint
from inversion.fit._joint import measurement_fit

__all__: list[str] = []

TRUE_T = 300.0
WORLD_STOPPING_TA = 1.04

_SAMPLE = """\
title = "invented: a tantalum film on silicon, seen at two tilts"
[[layer]]
name = "film"
formula = "Ta"
areal_density_1e15 = 300.0
density_g_cm3 = 16.6
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
fixed = {fixed}
[fit.free]
"film.areal_density" = {{ uniform = [150.0, 450.0] }}
"""

_TABLES = """\
{prefix}beam]
ion = "4He"
energy_keV = 2000.0
{prefix}geometry]
scattering_deg = 165.0
tilt_deg = {tilt}
layout = "IBM"
{prefix}detector]
fwhm_keV = 15.0
solid_angle_msr = 3.0
{prefix}calibration]
keV_per_channel = 2.0
offset_keV = 20.0
{prefix}exposure]
charge_uC = 2.0
"""

TILTS = {"normal": 0.0, "tilt60": 60.0}
#: calibration, resolution, straggling and the stopping slopes are held (a short test); the
#: fluence of each spectrum and the stopping scales of Ta and Si stay free
_HELD = ["gain_keV", "offset_keV", "fwhm_keV", "straggling", "slope.Ta", "slope.Si"]


def _joint_text(extra="", group=None):
    fixed = [f"{n}@{m}" if n in ("gain_keV", "offset_keV", "fwhm_keV") else n
             for n in _HELD for m in (TILTS if n in ("gain_keV", "offset_keV", "fwhm_keV")
                                      else [None])]
    text = _SAMPLE.format(fixed=repr(sorted(set(fixed))).replace("'", '"')) + extra
    for name, tilt in TILTS.items():
        text += f'\n[[measurement]]\nname = "{name}"\nspectrum = "{name}.csv"\n'
        if group:
            text += f'charge_group = "{group}"\n'
        text += _TABLES.format(prefix="[measurement.", tilt=tilt)
    return text


def _single_text(name):
    return (_SAMPLE.format(fixed=repr(_HELD).replace("'", '"'))
            + _TABLES.format(prefix="[", tilt=TILTS[name]))


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """The joint run file, one run file per measurement, and the world's spectra."""
    folder = tmp_path_factory.mktemp("joint")
    rng = np.random.default_rng(14)
    for name in TILTS:
        (folder / f"{name}.toml").write_text(_single_text(name))
        run = forward.load_run(folder / f"{name}.toml")
        model = forward.ForwardModel(run, n_channels=1000)
        nu = model.default_nuisance()
        scale = np.array(nu.stopping_scale, dtype=float)
        scale[list(model.sample_columns().elements).index("Ta")] = WORLD_STOPPING_TA
        mu = model.expected_counts(model.layer_fractions(),
                                   dataclasses.replace(nu, stopping_scale=scale))
        counts = rng.poisson(np.maximum(np.asarray(mu, dtype=float), 0.0))
        np.savetxt(folder / f"{name}.csv", np.column_stack([np.arange(counts.size), counts]),
                   fmt="%d", delimiter=",", header="channel,counts", comments="")
    (folder / "joint.toml").write_text(_joint_text())
    return folder


# ----- the run file -----
def test_a_run_file_of_one_measurement_is_read_as_before(world):
    found = forward.load_measurements(world / "normal.toml")
    assert not found.joint and found.names == ["spectrum"]
    assert found.first == forward.load_run(world / "normal.toml")


def test_each_measurement_is_a_checked_run_of_the_shared_sample(world):
    found = forward.load_measurements(world / "joint.toml")
    assert found.joint and found.names == ["normal", "tilt60"]
    normal, tilt = (m.run for m in found.measurements)
    assert normal.layers == tilt.layers
    # IBM layout: incidence = tilt, exit = 180 - scattering + tilt (common practice)
    assert tilt.geometry.incidence_deg == pytest.approx(60.0)
    assert tilt.geometry.exit_deg == pytest.approx(75.0)
    assert found.measurements[1].spectrum == (world / "tilt60.csv").resolve()
    # a command of one spectrum refuses the joint file on one line
    with pytest.raises(InputError, match=r"holds 2 \[\[measurement\]\] tables"):
        forward.load_run(world / "joint.toml")


def test_an_error_inside_a_measurement_names_it(tmp_path):
    text = _joint_text().replace("energy_keV = 2000.0", "energy_keV = 2.0", 1)
    with pytest.raises(InputError) as err:
        forward.parse_measurements(text, source="j.toml")
    assert err.value.where == "j.toml: measurement.normal.beam.energy_keV"


def test_every_measurement_uses_one_ion():
    # the stopping nuisances are shared: a 3He measurement beside a 4He one is refused
    text = _joint_text()
    at = text.index('name = "tilt60"')
    text = text[:at] + text[at:].replace('ion = "4He"', 'ion = "3He"', 1)
    with pytest.raises(InputError) as err:
        forward.parse_measurements(text, source="j.toml")
    assert err.value.where == "j.toml: measurement.tilt60.beam.ion"
    assert "one ion in every measurement" in err.value.message


def test_measurements_with_other_spectra_and_overrides(world, tmp_path):
    # what a series member over a joint template does to it (inversion/series)
    found = forward.load_measurements(world / "joint.toml")
    other = found.with_overrides({"tilt60": {"exposure": {"charge_uC": 3.0}}},
                                 spectra={"normal": str(tmp_path / "n.csv"),
                                          "tilt60": "t.h5:/counts"}, source="s.toml: member[a]")
    normal, tilt = other.measurements
    assert tilt.run.exposure.charge_uC == 3.0 and normal.run.exposure.charge_uC == 2.0
    assert normal.spectrum == tmp_path / "n.csv" and tilt.spectrum == (world / "t.h5").resolve()
    assert forward.resolve_spectrum(tilt) == f"{(world / 't.h5').resolve()}:/counts"
    assert found.measurements[1].run.exposure.charge_uC == 2.0  # the template is unchanged
    with pytest.raises(InputError) as err:
        found.with_overrides({"tilt60": {"calibration": {"keV_per_channel": -1.0}}},
                             source="s.toml: member[a]")
    assert str(err.value).startswith("s.toml: member[a].measurement.tilt60: "
                                     "calibration.keV_per_channel")
    with pytest.raises(InputError, match="no measurement called 'side'"):
        found.with_overrides(spectra={"side": "s.csv"})
    # members of a charge group keep one exposure
    grouped = forward.parse_measurements(_joint_text(group="run1"), source="g.toml",
                                         base_dir=world)
    with pytest.raises(InputError) as err:
        grouped.with_overrides({"tilt60": {"exposure": {"charge_uC": 3.0}}},
                               source="s.toml: member[a]")
    assert err.value.where == "s.toml: member[a].measurement.tilt60"
    assert "share charge group 'run1'" in err.value.message
    both = {n: {"exposure": {"charge_uC": 3.0}} for n in TILTS}
    assert [m.run.exposure.charge_uC for m in grouped.with_overrides(both).measurements] == \
        [3.0, 3.0]


def test_per_measurement_fit_keys_go_to_their_measurement():
    fit = {"free": {"film.areal_density": True, "fluence_scale@a": {"normal": [1.0, 0.1]},
                    "gain_keV@b": True}, "fixed": ["offset_keV@a", "stopping"]}
    a = measurement_fit(fit, name="a", group=None, names=["a", "b"], groups={},
                        windows=[[10, 20]], source="j.toml")
    b = measurement_fit(fit, name="b", group=None, names=["a", "b"], groups={},
                        windows=None, source="j.toml")
    assert a["free"] == {"film.areal_density": True, "fluence_scale": {"normal": [1.0, 0.1]}}
    assert a["fixed"] == ["offset_keV", "stopping"] and a["windows"] == [[10, 20]]
    assert b["free"] == {"film.areal_density": True, "gain_keV": True}
    assert b["fixed"] == ["stopping"] and "windows" not in b
    with pytest.raises(InputError, match="belongs to one spectrum"):
        measurement_fit({"free": {"gain_keV": True}}, name="a", group=None, names=["a", "b"],
                        groups={}, windows=None, source="j.toml")
    with pytest.raises(InputError, match="no measurement or charge group called 'c'"):
        measurement_fit({"fixed": ["gain_keV@c"]}, name="a", group=None, names=["a", "b"],
                        groups={}, windows=None, source="j.toml")


# ----- the objective -----
def test_joint_log_likelihood_is_the_sum_of_the_single_spectrum_ones(world):
    joint = prepare_joint(load_joint(world / "joint.toml"))
    assert joint.names == ["film.areal_density", "stopping.Ta", "stopping.Si",
                           "fluence_scale@normal", "fluence_scale@tilt60"]
    singles = [inversion.prepare(world / f"{n}.toml", world / f"{n}.csv")[1] for n in TILTS]
    assert [s.names for s in singles] == [["film.areal_density", "fluence_scale",
                                           "stopping.Ta", "stopping.Si"]] * 2
    theta = np.array([310.0, 1.02, 0.99, 0.97, 1.03])
    by_name = dict(zip(joint.names, theta))
    total = 0.0
    for name, single in zip(TILTS, singles):
        own = np.array([by_name[n if n != "fluence_scale" else f"fluence_scale@{name}"]
                        for n in single.names])
        total += single.log_likelihood(own)
    assert joint.log_likelihood(theta) == pytest.approx(total, rel=1e-12)
    # the prior is taken once over the joint parameters
    assert joint.log_prior(theta) == pytest.approx(
        sum(p.prior.logpdf(v) for p, v in zip(joint.spec.parameters, theta)), rel=1e-12)


def test_worker_processes_hold_the_joint_objective(world):
    # a worker unpickles the objective and builds every measurement's model once, at start
    from inversion.sample._workers import worker_log_posterior, worker_pool

    joint = prepare_joint(load_joint(world / "joint.toml"))
    theta = np.array([310.0, 1.02, 0.99, 0.97, 1.03])
    with worker_pool(joint, 2) as pool:
        values = pool.map(worker_log_posterior, [theta, theta * 1.001])
    assert values[0] == pytest.approx(joint.log_posterior(theta), rel=1e-12)
    assert values[1] == pytest.approx(joint.log_posterior(theta * 1.001), rel=1e-12)


def test_a_charge_group_shares_one_fluence(world, tmp_path):
    for name in TILTS:
        (tmp_path / f"{name}.csv").write_bytes((world / f"{name}.csv").read_bytes())
    (tmp_path / "grouped.toml").write_text(_joint_text(group="run1"))
    joint = prepare_joint(load_joint(tmp_path / "grouped.toml"))
    assert [n for n in joint.names if n.startswith("fluence")] == ["fluence_scale@run1"]
    assert joint.takes[0][1] == joint.takes[1][1] == joint.names.index("fluence_scale@run1")


# ----- the inversion -----
def _interval(result, name):
    median, low, high = result.interval(name, 95)
    return low, high


@pytest.mark.slow
def test_two_geometries_jointly_hold_the_truth_and_narrow_the_film(world, tmp_path):
    joint = inversion.invert(world / "joint.toml", None, tmp_path / "joint.h5", seed=3,
                             progress=False, max_steps=4000)
    singles = {n: inversion.invert(world / f"{n}.toml", world / f"{n}.csv",
                                   tmp_path / f"{n}.h5", seed=3, progress=False,
                                   max_steps=4000) for n in TILTS}
    assert joint.converged and all(s.converged for s in singles.values())
    truth = {"film.areal_density": TRUE_T, "stopping.Ta": WORLD_STOPPING_TA,
             "fluence_scale@normal": 1.0, "fluence_scale@tilt60": 1.0}
    for name, value in truth.items():
        low, high = _interval(joint, name)
        assert low < value < high, (name, low, high)
    width = np.diff(_interval(joint, "film.areal_density"))[0]
    single_widths = {n: np.diff(_interval(s, "film.areal_density"))[0]
                     for n, s in singles.items()}
    assert all(width < w for w in single_widths.values()), (width, single_widths)
    # the film's stopping is learned: narrower than its prior
    k = joint.names.index("stopping.Ta")
    prior_sd = float(prepare_joint(load_joint(world / "joint.toml")).spec.parameters[k]
                     .prior.dist.std())
    assert joint.summary["stopping.Ta"]["sd"] < 0.8 * prior_sd
    # one group per spectrum, holding its counts; the joint verdict beside them
    assert joint.format_version == 4 and not joint.spectrum
    assert list(joint.measurements) == ["normal", "tilt60"]
    for name in TILTS:
        stored = joint.measurements[name]
        counts = np.loadtxt(world / f"{name}.csv", delimiter=",", skiprows=1)[:, 1]
        assert np.array_equal(stored["counts"], counts)
        assert stored["predictive"].shape == (5, counts.size)
        assert stored["@attrs"]["ppc_alpha"] == pytest.approx(0.005)  # 0.01 / 2 spectra
    assert not joint.diagnostics["model_rejected"]
    with h5py.File(tmp_path / "joint.h5") as f:
        assert [s.decode() if isinstance(s, bytes) else s
                for s in f["input/measurements"][()]] == ["normal", "tilt60"]
        assert list(f["input/measurement_channels"][()]) == [1000, 1000]
    # the report draws one spectrum figure per measurement
    from inversion.report._build import build_report

    written = build_report(tmp_path / "joint.h5", tmp_path / "report", formats=("png",))
    assert {"spectrum_normal.png", "spectrum_tilt60.png"} <= set(written)


def test_check_reports_every_measurement(world, capsys):
    from inversion import cli

    code = cli.main(["check", str(world / "joint.toml")])
    out = capsys.readouterr().out
    assert code == 0
    assert "=== measurement 'normal'" in out and "=== measurement 'tilt60'" in out
    # each measurement's depth resolution per layer, and its spectrum against its calibration
    assert out.count("resolution 1e15") == 2 * 2 and out.count("leading signal") == 2
    assert "Joint fit: 5 free parameters" in out and "fluence_scale@tilt60" in out


def test_resuming_a_joint_run_equals_running_longer(world, tmp_path, capsys):
    # the command line without SPECTRUM; a cut chain resumed gives the uninterrupted one
    from inversion import cli

    base = ["-q", "invert", str(world / "joint.toml"), "--seed", "5", "--workers", "1"]
    assert cli.main(base + ["-o", str(tmp_path / "one.h5"), "--max-steps", "40"]) == 0
    assert cli.main(base + ["-o", str(tmp_path / "two.h5"), "--max-steps", "20"]) == 0
    assert cli.main(base + ["-o", str(tmp_path / "two.h5"), "--max-steps", "40",
                            "--resume"]) == 0
    capsys.readouterr()
    one = inversion.read_result(tmp_path / "one.h5", chain=True)
    two = inversion.read_result(tmp_path / "two.h5", chain=True)
    assert one.chain.shape[0] == two.chain.shape[0] == 40
    assert np.array_equal(one.chain, two.chain)
    assert np.array_equal(one.samples, two.samples)
    assert list(two.measurements) == ["normal", "tilt60"]


def test_a_joint_free_form_profile_needs_one_set_of_nodes(world, tmp_path):
    for name in TILTS:
        (tmp_path / f"{name}.csv").write_bytes((world / f"{name}.csv").read_bytes())
    text = _joint_text().replace('[fit]\n', '[fit]\nprofile = "nodes"\n').replace(
        '"film.areal_density" = { uniform = [150.0, 450.0] }\n',
        '[fit.nodes]\nspecies = ["Ta", "Si"]\n{nodes}')
    (tmp_path / "nodes.toml").write_text(text.replace("{nodes}", ""))
    # each measurement's depth resolution would give the nodes another default count
    with pytest.raises(InputError, match="different nodes"):
        prepare_joint(tmp_path / "nodes.toml")
    (tmp_path / "nodes.toml").write_text(text.replace("{nodes}",
                                                      "count = 6\ndepth_1e15 = 500.0\n"))
    joint = prepare_joint(tmp_path / "nodes.toml")
    assert [n for n in joint.names if n.startswith("nodes.")] == \
        ["nodes.Ta.logratio0"] + [f"nodes.Ta.step{k}" for k in range(1, 6)]
