"""Several spectra of one sample, inverted jointly (run files with [[measurement]] tables).

The sample is INVENTED: a tantalum film on silicon, measured at normal incidence and tilted by
60 degrees.  "The world" has the film's stopping 4 % above the fit's (the forward model's own
stopping-scale nuisance, 1.04 for Ta), Poisson noise with a fixed seed; the fit is told
nothing of it.
"""

from __future__ import annotations

import dataclasses
import shutil

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


def _joint_text(extra="", group=None, detector=None, held=_HELD):
    """The joint run file; ``detector``: both measurements in that detector group (one
    detector seeing the sample at both tilts); ``held``: the nuisances fixed."""
    calibration = ("gain_keV", "offset_keV", "fwhm_keV")
    owners = [detector] if detector else list(TILTS)
    fixed = [f"{n}@{m}" if n in calibration else n
             for n in held for m in (owners if n in calibration else [None])]
    text = _SAMPLE.format(fixed=repr(sorted(set(fixed))).replace("'", '"')) + extra
    for name, tilt in TILTS.items():
        text += f'\n[[measurement]]\nname = "{name}"\nspectrum = "{name}.csv"\n'
        if group:
            text += f'charge_group = "{group}"\n'
        if detector:
            text += f'detector_group = "{detector}"\n'
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
    with pytest.raises(InputError, match="no measurement or group called 'c'"):
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


# ----- detector groups: one detector, one calibration and resolution -----
#: the calibration and resolution free this time, the rest held as above
_HELD_BUT_DETECTOR = ["straggling", "slope.Ta", "slope.Si"]


def _grouped_world(world, tmp_path, detector, group=None):
    """The world's spectra beside a joint run file with the calibration free, both
    measurements in detector group ``detector`` (None: each its own) and charge group
    ``group``."""
    for name in TILTS:
        (tmp_path / f"{name}.csv").write_bytes((world / f"{name}.csv").read_bytes())
    path = tmp_path / f"{detector or 'separate'}.toml"
    path.write_text(_joint_text(detector=detector, group=group, held=_HELD_BUT_DETECTOR))
    return path


def test_a_detector_group_shares_one_calibration_and_resolution(world, tmp_path):
    grouped = prepare_joint(load_joint(_grouped_world(world, tmp_path, "det")))
    separate = prepare_joint(load_joint(_grouped_world(world, tmp_path, None)))
    # one gain, offset and resolution for the group; a fluence per exposure
    assert grouped.names == ["film.areal_density", "stopping.Ta", "stopping.Si",
                             "fluence_scale@normal", "gain_keV@det", "offset_keV@det",
                             "fwhm_keV@det", "fluence_scale@tilt60"]
    assert grouped.ndim == 8 and separate.ndim == 11
    assert grouped.detector_groups == ["det", "det"]
    for quantity in ("gain_keV", "offset_keV", "fwhm_keV"):
        k = grouped.names.index(f"{quantity}@det")
        assert [take[list(part.spec.names).index(quantity)]
                for take, part in zip(grouped.takes, grouped.parts)] == [k, k]
    # with the separate values equal, the grouped objective is the separate one
    by_name = {"film.areal_density": 305.0, "stopping.Ta": 1.03, "stopping.Si": 0.99,
               "fluence_scale@normal": 0.98, "fluence_scale@tilt60": 1.02,
               "gain_keV": 2.004, "offset_keV": 19.2, "fwhm_keV": 15.8}
    theta = np.array([by_name[n.replace("@det", "")] for n in grouped.names])
    theta_separate = np.array([by_name[n.split("@")[0] if n.split("@")[0] in
                                       ("gain_keV", "offset_keV", "fwhm_keV") else n]
                               for n in separate.names])
    assert grouped.log_likelihood(theta) == pytest.approx(
        separate.log_likelihood(theta_separate), rel=1e-12)
    for k in range(2):
        assert np.allclose(grouped.predict(theta, measurement=k),
                           separate.predict(theta_separate, measurement=k), rtol=1e-12, atol=0)
    # and the group's one gain moves both spectra
    moved = theta.copy()
    moved[grouped.names.index("gain_keV@det")] *= 1.01
    for k in range(2):
        assert not np.allclose(grouped.predict(moved, measurement=k),
                               grouped.predict(theta, measurement=k))


def test_detector_group_names_in_the_fit_table():
    names, detectors = ["a", "b", "c"], {"det": ["a", "b"]}

    def fit_of(fit, name):
        return measurement_fit(fit, name=name, group=None, names=names, groups={},
                               windows=None, source="j.toml",
                               detector_group="det" if name in ("a", "b") else None,
                               detector_groups=detectors)

    fit = {"free": {"gain_keV@det": {"normal": [2.0, 0.01]}, "gain_keV@c": True},
           "fixed": ["fwhm_keV@det", "offset_keV@c", "fluence_scale@a"]}
    assert fit_of(fit, "a") == {"free": {"gain_keV": {"normal": [2.0, 0.01]}},
                                "fixed": ["fwhm_keV", "fluence_scale"]}
    assert fit_of(fit, "b") == {"free": {"gain_keV": {"normal": [2.0, 0.01]}},
                                "fixed": ["fwhm_keV"]}
    assert fit_of(fit, "c") == {"free": {"gain_keV": True}, "fixed": ["offset_keV"]}
    with pytest.raises(InputError) as err:  # a member's own name is refused
        fit_of({"fixed": ["gain_keV@a"]}, "c")
    assert err.value.message == ("measurement 'a' shares its detector in group 'det'; "
                                 "allowed: gain_keV@det")
    assert err.value.where == "j.toml: fit.fixed"
    with pytest.raises(InputError, match="'fluence_scale' does not belong to detector group "
                                         "'det'; allowed: fluence_scale@a"):
        fit_of({"free": {"fluence_scale@det": True}}, "a")
    with pytest.raises(InputError, match="allowed: offset_keV@det, offset_keV@c$"):
        fit_of({"free": {"offset_keV": True}}, "a")
    with pytest.raises(InputError, match="detector groups: det"):
        fit_of({"free": {"gain_keV@d": True}}, "a")


def test_members_of_a_detector_group_have_one_detector(world):
    text = _joint_text(detector="det", held=_HELD_BUT_DETECTOR)
    found = forward.parse_measurements(text, source="j.toml", base_dir=world)
    assert [m.detector_group for m in found.measurements] == ["det", "det"]
    assert found.detector_groups() == {"det": ["normal", "tilt60"]} and found.groups() == {}
    # another offset (the calibration), another solid angle (another detector) are refused
    at = text.index('name = "tilt60"')
    for old, new, key in (("offset_keV = 20.0", "offset_keV = 21.5", "calibration.offset_keV"),
                          ("solid_angle_msr = 3.0", "solid_angle_msr = 2.0",
                           "detector.solid_angle_msr")):
        with pytest.raises(InputError) as err:
            forward.parse_measurements(text[:at] + text[at:].replace(old, new, 1),
                                       source="j.toml", base_dir=world)
        assert err.value.where == "j.toml: measurement.tilt60.detector_group"
        assert err.value.message.startswith(f"measurements 'normal' and 'tilt60' share detector "
                                            f"group 'det' but {key} is ")
    # a group named like a measurement would make gain_keV@<name> ambiguous
    with pytest.raises(InputError, match="detector group 'normal' has the name of a "
                                         "measurement"):
        forward.parse_measurements(_joint_text(detector="normal", held=_HELD_BUT_DETECTOR),
                                   source="j.toml", base_dir=world)
    # a series member changes the calibration of every member alike, or of none
    with pytest.raises(InputError) as err:
        found.with_overrides({"tilt60": {"calibration": {"offset_keV": 21.0}}},
                             source="s.toml: member[a]")
    assert err.value.where == "s.toml: member[a].measurement.tilt60"
    assert "share detector group 'det'" in err.value.message
    both = found.with_overrides({n: {"calibration": {"offset_keV": 21.0}} for n in TILTS})
    assert [m.run.calibration.offset_keV for m in both.measurements] == [21.0, 21.0]


def test_charge_groups_and_detector_groups_together(world, tmp_path):
    # two detectors (a, b), each recording two exposures (1, 2): the charge is one per
    # exposure, the calibration one per detector
    for name in TILTS:
        (tmp_path / f"{name}.csv").write_bytes((world / f"{name}.csv").read_bytes())
    text = _SAMPLE.format(fixed='["straggling", "slope.Ta", "slope.Si"]')
    for name, (spectrum, charge, detector) in {"a1": ("normal", "x1", "da"),
                                               "b1": ("tilt60", "x1", "db"),
                                               "a2": ("normal", "x2", "da"),
                                               "b2": ("tilt60", "x2", "db")}.items():
        text += (f'\n[[measurement]]\nname = "{name}"\nspectrum = "{spectrum}.csv"\n'
                 f'charge_group = "{charge}"\ndetector_group = "{detector}"\n'
                 + _TABLES.format(prefix="[measurement.", tilt=TILTS[spectrum]))
    (tmp_path / "four.toml").write_text(text)
    joint = prepare_joint(load_joint(tmp_path / "four.toml"))
    assert joint.names[3:] == ["fluence_scale@x1", "gain_keV@da", "offset_keV@da", "fwhm_keV@da",
                               "gain_keV@db", "offset_keV@db", "fwhm_keV@db",
                               "fluence_scale@x2"]


def test_a_detector_group_in_the_result_file_and_report(world, tmp_path):
    # a few dozen steps: what the result file and the report make of the group's names
    from inversion.report._data import read_report_data

    path = _grouped_world(world, tmp_path, "det", group="shot")
    with pytest.warns(inversion.NotConvergedWarning):  # 30 steps are far too few, as meant
        result = inversion.invert(path, None, tmp_path / "det.h5", seed=2, progress=False,
                                  max_steps=30, workers=1)
    assert result.names == prepare_joint(load_joint(path)).names
    assert "fluence_scale@shot" in result.names
    for name in TILTS:
        assert result.measurements[name]["@attrs"]["detector_group"] == "det"
        assert result.measurements[name]["@attrs"]["charge_group"] == "shot"
    data = read_report_data(tmp_path / "det.h5")
    for name in TILTS:
        part = data.measurements[name]
        assert part.calibration_source.startswith(
            "posterior median of gain_keV@det and offset_keV@det")
        assert part.calibration["keV_per_channel"] == pytest.approx(
            result.summary["gain_keV@det"]["median"])


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


def test_a_joint_fit_with_a_free_width_moves_widths_and_straggling_as_a_block(world, tmp_path):
    # the joint fit's differential moves also update the edge-spread block (benchmarks/
    # RESULTS.md, "Joint fits"); a single spectrum's do not, nor a joint fit without widths
    from inversion import Sampler

    for name in TILTS:
        shutil.copy(world / f"{name}.csv", tmp_path / f"{name}.csv")
    held = [h for h in _HELD if h != "straggling"]
    (tmp_path / "wide.toml").write_text(
        _joint_text('"film.mixing" = { halfnormal = 20.0 }\n', held=held))
    joint = prepare_joint(load_joint(tmp_path / "wide.toml"))
    sampler = Sampler(joint, n_walkers=joint.spec.n_walkers)
    assert [joint.names[i] for i in sampler.block] == ["film.mixing", "straggling_scale",
                                                       "straggling_correction"]
    single = inversion.prepare(forward.parse_run(_single_text("normal").replace(
        "[fit.free]\n", '[fit.free]\n"film.mixing" = { halfnormal = 20.0 }\n'),
        source="single.toml"), np.loadtxt(world / "normal.csv", delimiter=",",
                                          skiprows=1)[:, 1])[1]
    assert "film.mixing" in single.names
    assert Sampler(single, n_walkers=single.spec.n_walkers).block == []
    plain = prepare_joint(load_joint(world / "joint.toml"))
    assert Sampler(plain, n_walkers=plain.spec.n_walkers).block == []
