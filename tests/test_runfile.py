"""Run files: parsing into dataclasses, derived quantities and geometry.

All samples are invented scenarios.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import periodictable
import pytest
import scipy.constants
from hypothesis import given, settings
from hypothesis import strategies as st

import forward
from forward._runfile import (check_angle_triple, cornell_angles, ibm_angles, load_run, parse_run)

GOOD = """
title = "invented: cobalt silicide contact with a thin oxide"
[beam]
ion = "3He"
energy_keV = 1500.0
[geometry]
scattering_deg = 150.0
incidence_deg = 10.0
exit_deg = 35.0
[detector]
fwhm_keV = 18.0
solid_angle_msr = 4.5
[calibration]
keV_per_channel = 1.5
offset_keV = -12.0
quadratic_keV = 1e-5
[exposure]
charge_uC = 20.0
charge_state = 2
live_fraction = 0.9
[[layer]]
name = "silicide"
formula = "CoSi2"
areal_density_1e15 = 400.0
density_g_cm3 = 4.95
[[layer]]
formula = "SiO2"
thickness_nm = 3.0
density_g_cm3 = 2.2
isotopes = { O = { 18 = 0.8, 16 = 0.2 } }
[[layer]]
formula = "Si"
substrate = true
[physics]
screening = "lecuyer"
slice_fraction = 0.5
max_slice_1e15 = 10.0
stopping_scale = { Co = 1.03 }
pileup = { enabled = true, resolving_time_us = 0.8, count_rate_hz = 3000.0 }
[fit]
walkers = 48
free = ["silicide.areal_density_1e15"]
"""


@pytest.fixture()
def run():
    return parse_run(GOOD, source="good.toml")


def test_good_run_file_round_trips(run):
    assert run.title.startswith("invented")
    assert run.beam.species == "3He" and run.beam.energy_keV == 1500.0
    assert run.beam.ion.mass_u == pytest.approx(periodictable.He[3].mass)  # periodictable
    g = run.geometry
    assert (g.scattering_deg, g.incidence_deg, g.exit_deg, g.layout, g.tilt_deg) == \
        (150.0, 10.0, 35.0, "direct", None)
    assert run.detector.fwhm_keV == 18.0 and run.detector.solid_angle_msr == 4.5
    assert run.calibration.keV_per_channel == 1.5 and run.calibration.offset_keV == -12.0
    assert run.calibration.quadratic_keV == 1e-5
    assert run.exposure.charge_uC == 20.0 and run.exposure.particles is None
    assert run.exposure.charge_state == 2 and run.exposure.live_fraction == 0.9
    names = [layer.name for layer in run.layers]
    assert names == ["silicide", "layer 2", "layer 3"]
    co, ox, sub = run.layers
    assert co.fractions == pytest.approx({"Co": 1 / 3, "Si": 2 / 3})
    assert co.areal_density_1e15 == 400.0 and not co.substrate
    assert ox.isotopes == {"O": {18: 0.8, 16: 0.2}}
    assert sub.substrate and sub.areal_density_1e15 is None and sub.atoms_per_cm3 is None
    p = run.physics
    assert p.screening == "lecuyer" and p.slice_fraction == 0.5 and p.max_slice_1e15 == 10.0
    assert p.stopping_scale == {"Co": 1.03} and p.stopping_tables == {}
    assert p.pileup.enabled and p.pileup.probability == pytest.approx(3000.0 * 0.8e-6)
    assert run.fit == {"walkers": 48, "free": ["silicide.areal_density_1e15"]}
    assert run.elements == ["Co", "Si", "O"]
    assert run.source == "good.toml" and run.text == GOOD


def test_defaults():
    text = GOOD.split("[physics]")[0].replace("charge_state = 2\n", "").replace(
        "live_fraction = 0.9\n", "")
    run = parse_run(text)
    p = run.physics
    assert (p.screening, p.slice_fraction, p.max_slice_1e15) == ("andersen", 0.25, None)
    assert not p.pileup.enabled and p.pileup.probability == 0.0
    assert run.exposure.charge_state == 1 and run.exposure.live_fraction == 1.0
    assert run.fit == {}


def test_incident_particles_from_charge(run):
    # N = Q / (q e), elementary charge from scipy.constants (CODATA)
    expected = 20e-6 / (2 * scipy.constants.e)
    assert run.exposure.incident_particles == pytest.approx(expected, rel=1e-12)
    assert run.exposure.counted_particles == pytest.approx(0.9 * expected, rel=1e-12)
    # 1 uC of singly charged ions is 6.2415e12 ions (from memory; CODATA e = 1.602176634e-19 C)
    one = run.with_overrides({"exposure": {"charge_uC": 1.0, "charge_state": 1}})
    assert one.exposure.incident_particles == pytest.approx(6.2415e12, rel=1e-4)


def test_silicon_thickness_to_areal_density():
    # Si at 2.33 g/cm3 (handbook density, common practice) holds 4.99e22 atoms/cm3; the mass
    # comes from periodictable and N_A from scipy.constants
    text = GOOD.replace("formula = \"Si\"\nsubstrate = true",
                        "formula = \"Si\"\nthickness_nm = 100.0\ndensity_g_cm3 = 2.33")
    layer = parse_run(text).layers[-1]
    n = 2.33 * scipy.constants.N_A / periodictable.Si.mass
    assert layer.atoms_per_cm3 == pytest.approx(4.99e22, rel=0.005)
    assert layer.atoms_per_cm3 == pytest.approx(n, rel=1e-12)
    # 100 nm = 1e-5 cm -> N = n * 1e-5 atoms/cm2 = about 499.6e15
    assert layer.areal_density_1e15 == pytest.approx(n * 1e-5 / 1e15, rel=1e-12)
    assert layer.areal_density_1e15 == pytest.approx(499.0, rel=0.005)
    assert layer.thickness_nm == pytest.approx(100.0, rel=1e-12)


def test_isotope_override_sets_the_mean_mass(run):
    ox = run.layers[1]
    # mean mass of Si(1/3) O(2/3) with O = 80 % 18O, 20 % 16O; masses from periodictable
    m_o = 0.8 * periodictable.O[18].mass + 0.2 * periodictable.O[16].mass
    expected = (periodictable.Si.mass + 2 * m_o) / 3
    assert ox.mean_mass_u == pytest.approx(expected, rel=1e-12)
    n = 2.2 * scipy.constants.N_A / expected
    assert ox.areal_density_1e15 == pytest.approx(3.0e-7 * n / 1e15, rel=1e-12)
    labels = {iso.label: f for iso, f in ox.isotope_fractions("O")}
    assert labels == {"18O": 0.8, "16O": 0.2}
    natural = {iso.label: f for iso, f in ox.isotope_fractions("Si")}
    assert sum(natural.values()) == pytest.approx(1.0)
    assert natural["28Si"] == pytest.approx(periodictable.Si[28].abundance / 100, rel=1e-3)


def test_calibration(run):
    cal = run.calibration
    c = np.array([0.0, 10.0, 1000.0])
    assert np.allclose(cal.energy_keV(c), -12.0 + 1.5 * c + 1e-5 * c * c)
    lower, upper = cal.channel_edges_keV(4)
    assert np.allclose(lower, cal.energy_keV(np.arange(4.0)))
    assert np.allclose(upper[:-1], lower[1:])
    lower, upper = cal.channel_edges_keV(np.array([5, 9]))
    assert np.allclose(lower, cal.energy_keV(np.array([5.0, 9.0])))
    for e in (0.0, 700.0, 1499.0):
        assert cal.energy_keV(cal.channel_of(e)) == pytest.approx(e, abs=1e-9)
    assert cal.centre_keV(3) == pytest.approx(cal.energy_keV(3.5))


def test_tilted_layouts_in_the_run_file():
    ibm = parse_run(GOOD.replace("incidence_deg = 10.0\nexit_deg = 35.0",
                                 "tilt_deg = 10.0\nlayout = \"IBM\"")).geometry
    assert (ibm.layout, ibm.tilt_deg) == ("IBM", 10.0)
    assert (ibm.incidence_deg, ibm.exit_deg) == pytest.approx((10.0, 40.0))
    cor = parse_run(GOOD.replace("incidence_deg = 10.0\nexit_deg = 35.0",
                                 "tilt_deg = 10.0\nlayout = \"Cornell\"")).geometry
    assert cor.layout == "Cornell"
    assert cor.exit_deg == pytest.approx(math.degrees(math.acos(
        -math.cos(math.radians(150)) * math.cos(math.radians(10)))))


# ----------------------------------------------------------------------------------------------
# geometry against an independent vector calculation
def _angles_from_vectors(theta_deg, normal):
    """th1, th2 from unit vectors: beam along +z, detector in the x-z plane on the +x side."""
    t = math.radians(theta_deg)
    beam = np.array([0.0, 0.0, 1.0])
    detector = np.array([math.sin(t), 0.0, math.cos(t)])
    normal = normal / np.linalg.norm(normal)
    th1 = math.degrees(math.acos(np.clip(np.dot(-beam, normal), -1, 1)))
    th2 = math.degrees(math.acos(np.clip(np.dot(detector, normal), -1, 1)))
    return th1, th2


def _rotate(axis, angle_deg, v):
    """Rodrigues' rotation of v about a unit axis."""
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    return v * c + np.cross(a, v) * s + a * np.dot(a, v) * (1 - c)


UNTILTED = np.array([0.0, 0.0, -1.0])  # outward normal facing the incoming beam


@settings(max_examples=200, deadline=None, derandomize=True)
@given(theta=st.floats(91.0, 180.0), tilt=st.floats(-60.0, 60.0))
def test_ibm_formula_matches_vectors(theta, tilt):
    # IBM: tilt axis perpendicular to the scattering plane (y).  A rotation by +tilt about y
    # turns the normal (0, 0, -1) towards -x, away from the detector at +x, for positive tilt.
    normal = _rotate([0, 1, 0], tilt, UNTILTED)
    assert normal[0] <= 1e-12 if tilt >= 0 else normal[0] >= -1e-12
    th1, th2 = _angles_from_vectors(theta, normal)
    assert ibm_angles(theta, tilt) == pytest.approx((th1, th2), abs=1e-6)
    assert check_angle_triple(theta, th1, th2, tol_deg=1e-6)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(theta=st.floats(91.0, 180.0), tilt=st.floats(-60.0, 60.0))
def test_cornell_formula_matches_vectors(theta, tilt):
    # Cornell: tilt axis in the scattering plane, perpendicular to the beam (x)
    normal = _rotate([1, 0, 0], tilt, UNTILTED)
    th1, th2 = _angles_from_vectors(theta, normal)
    assert cornell_angles(theta, tilt) == pytest.approx((th1, th2), abs=1e-6)
    assert check_angle_triple(theta, th1, th2, tol_deg=1e-6)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(theta=st.floats(91.0, 180.0), x=st.floats(-1, 1), y=st.floats(-1, 1))
def test_every_orientation_passes_the_triangle_check(theta, x, y):
    normal = np.array([x, y, -1.0])
    th1, th2 = _angles_from_vectors(theta, normal)
    assert check_angle_triple(theta, th1, th2, tol_deg=1e-6)


def test_triangle_check_rejects_impossible_triples():
    # 180 - theta = 15: the arcs 0 and 40 cannot close a triangle with 15
    assert not check_angle_triple(165.0, 0.0, 40.0)
    assert not check_angle_triple(165.0, 5.0, 5.0)      # 5 + 5 < 15
    assert check_angle_triple(165.0, 0.0, 15.0)          # normal incidence, in-plane
    assert check_angle_triple(165.0, 7.5, 7.5)           # normal halfway, in-plane


# ----------------------------------------------------------------------------------------------
# files, paths, overrides
def test_paths_are_relative_to_the_run_file(tmp_path):
    folder = tmp_path / "exp"
    folder.mkdir()
    (folder / "co.csv").write_text("# invented\n")
    (folder / "o_ratio.csv").write_text("# invented\n")
    text = GOOD.replace("stopping_scale = { Co = 1.03 }",
                        "stopping_tables = { Co = \"co.csv\" }\n"
                        "cross_section_ratio = { O = \"o_ratio.csv\" }")
    path = folder / "run.toml"
    path.write_text(text)
    run = load_run(path)
    assert run.physics.stopping_tables == {"Co": folder / "co.csv"}
    assert run.physics.cross_section_ratio == {"O": folder / "o_ratio.csv"}
    assert run.source == str(path)
    with pytest.raises(forward.InputError, match="not found"):
        parse_run(text, source="elsewhere.toml", base_dir=tmp_path)


def test_with_overrides(run):
    other = run.with_overrides({"exposure": {"particles": 3e13},
                                "calibration": {"offset_keV": 8.0}})
    assert other.exposure.particles == 3e13 and other.exposure.charge_uC is None
    assert other.exposure.incident_particles == 3e13
    assert other.calibration.offset_keV == 8.0 and other.calibration.keV_per_channel == 1.5
    assert other.layers == run.layers and run.calibration.offset_keV == -12.0
    with pytest.raises(forward.InputError) as err:
        run.with_overrides({"calibration": {"keV_per_channel": -1.0}}, source="series.toml")
    assert str(err.value).startswith("series.toml: calibration.keV_per_channel: -1 is out of range")


def test_toml_syntax_error_names_the_line():
    text = GOOD.replace("fwhm_keV = 18.0", "fwhm_keV = = 18.0")
    line = text.splitlines().index("fwhm_keV = = 18.0") + 1
    with pytest.raises(forward.InputError) as err:
        parse_run(text, source="x.toml")
    assert str(err.value).startswith(f"x.toml: line {line}: TOML syntax error")
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("change, where, fragment", [
    (("energy_keV = 1500.0", "energy_keV = true"), "beam.energy_keV", "got the boolean true"),
    (("solid_angle_msr = 4.5", "solid_angle_msr = 0"), "detector.solid_angle_msr", "out of range"),
    (("charge_uC = 20.0", "charge_uC = -1.0"), "exposure.charge_uC", "out of range"),
    (("charge_uC = 20.0", ""), "exposure.charge_uC", "exactly one of charge_uC"),
    (("slice_fraction = 0.5", "slice_fraction = 1.5"), "physics.slice_fraction", "(0, 1]"),
    (("Co = 1.03", "Fe = 1.03"), "physics.stopping_scale.Fe", "is in no layer"),
    (("Co = 1.03", "Co = -1"), "physics.stopping_scale.Co", "scale factor"),
    (("count_rate_hz = 3000.0", "count_rate_hz = 3e5"), "physics.pileup.count_rate_hz",
     "pile-up probability of 0.24"),
    (("quadratic_keV = 1e-5", "quadratic_keV = -1e-3"), "calibration.quadratic_keV",
     "stops increasing at channel 750"),
    (("walkers = 48", "walkers = 48\n[extra]\nx = 1"), "extra", "unknown key 'extra'"),
    (("name = \"silicide\"", "name = \"\""), "layer[1].name", "empty layer name"),
])
def test_bad_values_name_their_key(change, where, fragment):
    with pytest.raises(forward.InputError) as err:
        parse_run(GOOD.replace(*change), source="r.toml")
    assert str(err.value).startswith(f"r.toml: {where}:")
    assert fragment in str(err.value)


def test_the_documented_example_is_valid():
    from pathlib import Path

    doc = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    section = doc.split("## The run file", 1)[1]
    example = section.split("```toml\n", 1)[1].split("```", 1)[0]
    run = parse_run(example, source="README.md")
    assert [layer.name for layer in run.layers] == ["contact", "oxide", "wafer"]
    assert run.geometry.layout == "IBM" and run.geometry.exit_deg == pytest.approx(22.0)


# ----------------------------------------------------------------------------------------------
# encodings
CORPUS = __import__("pathlib").Path(__file__).resolve().parent / "bad_inputs"


@pytest.mark.parametrize("name", ["run_utf8_bom.toml", "run_utf16_bom.toml"])
def test_run_files_saved_with_a_byte_order_mark_read(name):
    # the same invented TaN-on-Si run as _valid_run.toml, saved by other editors
    run = load_run(CORPUS / name)
    plain = load_run(CORPUS / "_valid_run.toml")
    assert run.beam.energy_keV == 2000.0 and run.calibration.keV_per_channel == 2.2
    assert [layer.name for layer in run.layers] == ["barrier", "wafer"]
    assert run.layers[0].areal_density_1e15 == 180.0
    assert run.raw == plain.raw
    assert not run.text.startswith("\ufeff")


def test_parse_run_drops_a_byte_order_mark():
    assert parse_run("\ufeff" + GOOD).beam.energy_keV == 1500.0


# ----------------------------------------------------------------------------------------------
# unit slips
def _err(change, source="r.toml"):
    with pytest.raises(forward.InputError) as err:
        parse_run(GOOD.replace(*change), source=source)
    text = str(err.value)
    assert "\n" not in text
    return text


def _quiet(text):
    """Parse without any warning."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return parse_run(text)


@pytest.mark.parametrize("energy, fragment", [
    ("1.5", "1.5 keV is far below any backscattering beam; did you give MeV? allowed: 100 to "
            "7535 keV for 3He"),
    ("50.0", "50 keV is far below any backscattering beam; allowed: 100 to 7535 keV for 3He"),
    ("0.0", "0 is out of range; allowed: 100 to 7535 keV for 3He"),
    ("1.5e6", "1.5e+06 keV is above 7535 keV, the top of the helium stopping parameterisation; "
              "did you give eV? allowed"),
    ("7600.0", "7600 keV is above 7535 keV"),
    ("inf", "inf is not finite; allowed: 100 to 7535 keV for 3He"),
])
def test_beam_energy_range_3he(energy, fragment):
    text = _err(("energy_keV = 1500.0", f"energy_keV = {energy}"))
    assert text.startswith("r.toml: beam.energy_keV: ")
    assert fragment in text


def test_beam_energy_range_edges():
    # 4He: 100 to 10000 keV; 3He to the same velocity, 10000 keV x m(3He)/m(4He)
    # (masses: periodictable)
    he4 = GOOD.replace('ion = "3He"', 'ion = "4He"').replace("charge_state = 2\n", "")
    for e in ("100.0", "10000.0"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", forward.StoppingRangeWarning)
            assert parse_run(he4.replace("energy_keV = 1500.0", f"energy_keV = {e}")).beam
    for e in ("99.9", "10000.5"):
        with pytest.raises(forward.InputError, match="allowed: 100 to 10000 keV$"):
            parse_run(he4.replace("energy_keV = 1500.0", f"energy_keV = {e}"))
    top = 10000.0 * periodictable.He[3].mass / periodictable.He[4].mass
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", forward.StoppingRangeWarning)
        assert parse_run(GOOD.replace("energy_keV = 1500.0", f"energy_keV = {top - 1:.1f}"))
    _err(("energy_keV = 1500.0", f"energy_keV = {top + 1:.1f}"))


@pytest.mark.parametrize("species, energy, warns", [
    ("4He", 3000.0, False), ("4He", 3001.0, True),
    # 3He: same velocity as 4He at 3000 keV, 3000 x 3.016/4.003 = 2260.6 keV (periodictable)
    ("3He", 2250.0, False), ("3He", 2270.0, True),
])
def test_stopping_range_warning_when_loading(species, energy, warns, tmp_path):
    text = GOOD.replace('ion = "3He"', f'ion = "{species}"').replace(
        "energy_keV = 1500.0", f"energy_keV = {energy}")
    path = tmp_path / "hot.toml"
    path.write_text(text)
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        load_run(path)
    ours = [w for w in record if issubclass(w.category, forward.StoppingRangeWarning)]
    assert len(ours) == (1 if warns else 0)
    if warns:
        message = str(ours[0].message)
        assert message.startswith(f"{path}: beam.energy_keV: {species} at {energy:g} keV is "
                                  "above ")
        assert "NIST ASTAR" in message and "\n" not in message


@pytest.mark.parametrize("fwhm, fragment", [
    ("750.0", "750 keV is not small compared with the beam energy: it would smear every edge "
              "over most of the spectrum; did you give eV? allowed: (0, 750) keV, below half the "
              "1500 keV beam energy"),
    ("18000.0", "did you give eV?"),
    ("1e9", "1e+09 keV is not small compared with the beam energy: it would smear every edge "
            "over most of the spectrum; allowed: (0, 750) keV"),
    ("0.0", "0 is out of range; allowed: (0, 750) keV"),
])
def test_fwhm_must_be_small_compared_with_the_beam(fwhm, fragment):
    text = _err(("fwhm_keV = 18.0", f"fwhm_keV = {fwhm}"))
    assert text.startswith("r.toml: detector.fwhm_keV: ") and fragment in text
    assert _quiet(GOOD.replace("fwhm_keV = 18.0", "fwhm_keV = 749.0")).detector.fwhm_keV == 749.0


def test_tiny_fwhm_warns():
    with pytest.warns(forward.InputWarning) as record:
        run = parse_run(GOOD.replace("fwhm_keV = 18.0", "fwhm_keV = 0.018"), source="r.toml")
    assert run.detector.fwhm_keV == 0.018 and len(record) == 1
    assert str(record[0].message).startswith("r.toml: detector.fwhm_keV: 0.018 keV is finer than "
                                             "any backscattering detector resolves")
    assert "did you give MeV?" in str(record[0].message)
    _quiet(GOOD.replace("fwhm_keV = 18.0", "fwhm_keV = 0.1"))


@pytest.mark.parametrize("change, key, fragment", [
    (("charge_uC = 20.0", "charge_uC = 2e-5"), "exposure.charge_uC",
     "2e-05 uC is implausibly small for a backscattering spectrum (they take about 1 to 100 uC); "
     "did you give coulombs (1 uC = 1e-6 C)? the value is used as microcoulombs"),
    (("charge_uC = 20.0", "charge_uC = 1e-12"), "exposure.charge_uC",
     "1e-12 uC is implausibly small for a backscattering spectrum (they take about 1 to 100 uC); "
     "the value"),
    (("charge_uC = 20.0", "particles = 20.0"), "exposure.particles",
     "20 ions are implausibly few"),
])
def test_implausible_exposure_warns(change, key, fragment):
    with pytest.warns(forward.InputWarning) as record:
        run = parse_run(GOOD.replace(*change), source="r.toml")
    assert len(record) == 1
    assert str(record[0].message).startswith(f"r.toml: {key}: {fragment}")
    assert run.exposure.incident_particles > 0  # used as given
    _quiet(GOOD.replace("charge_uC = 20.0", "charge_uC = 1e-3"))
    _quiet(GOOD.replace("charge_uC = 20.0", "particles = 1e10"))


# The GOOD run: 3He at 1500 keV, 150 degrees, heaviest atom 59Co; its surface edge K E0 is
# 1239.0 keV (the message takes K from forward.kinematic_factor, tested in test_kinematics.py).
LINEAR = ("quadratic_keV = 1e-5\n", "")


def test_highest_surface_edge_names_the_heaviest_isotope():
    k = forward.kinematic_factor(periodictable.He[3].mass, periodictable.Co[59].mass, 150.0)
    text = _err(("offset_keV = -12.0", "offset_keV = 1300.0"))
    assert f"(K E0 of 59Co, {k * 1500.0:.1f} keV)" in text


@pytest.mark.parametrize("changes, key, fragment", [
    # eV per channel typed for keV per channel: the spectrum shrinks into one channel
    ([("keV_per_channel = 1.5", "keV_per_channel = 1500.0")], "calibration.keV_per_channel",
     "1500 keV per channel puts everything from zero energy up to the highest surface edge "
     "(K E0 of 59Co, 1239.0 keV) into 0.826 channels; did you give eV per channel? allowed: at "
     "most 77.44 keV per channel, so that the edge lies at least 16 channels above zero energy"),
    # MeV per channel: the edge lies beyond the last channel
    ([("keV_per_channel = 1.5", "keV_per_channel = 0.0015"), LINEAR],
     "calibration.keV_per_channel", "(K E0 of 59Co, 1239.0 keV) in channel 833990, beyond the "
     "65536 channels a spectrum may have; did you give MeV per channel? allowed: a calibration "
     "that puts it below channel 65536"),
    ([("keV_per_channel = 1.5", "keV_per_channel = 1e-5"), LINEAR],
     "calibration.keV_per_channel", "beyond the 65536 channels a spectrum may have; allowed"),
    ([("offset_keV = -12.0", "offset_keV = 1300.0")], "calibration.offset_keV",
     "channel 0 starts at 1300 keV, above the highest surface edge (K E0 of 59Co, 1239.0 keV), "
     "so no backscattered particle can reach the spectrum; allowed: an offset below 1239.0 keV"),
    ([("offset_keV = -12.0", "offset_keV = 12000.0")], "calibration.offset_keV",
     "the beam energy 1500 keV is not above the lowest channel's energy 12000 keV, so no "
     "backscattered particle can reach the spectrum; did you give eV? allowed"),
    ([("offset_keV = -12.0", "offset_keV = -2e5")], "calibration.offset_keV",
     "beyond the 65536 channels a spectrum may have; allowed"),
])
def test_calibration_must_reach_the_signals(changes, key, fragment):
    text = GOOD
    for change in changes:
        text = text.replace(*change)
    with pytest.raises(forward.InputError) as err:
        parse_run(text, source="r.toml")
    assert str(err.value).startswith(f"r.toml: {key}: ")
    assert fragment in str(err.value)


def test_calibration_edges_that_pass():
    # the edge 16 channels above zero energy, and just below channel 65536
    coarse = _quiet(GOOD.replace("keV_per_channel = 1.5", "keV_per_channel = 77.0"))
    assert coarse.calibration.keV_per_channel == 77.0
    fine = _quiet(GOOD.replace(*LINEAR).replace("keV_per_channel = 1.5",
                                                "keV_per_channel = 0.0191"))
    assert 65000 < fine.calibration.channel_of(1239.0) < 65536


def test_calibration_check_without_any_scattering_atom():
    # a hydrogen film cannot turn helium beyond 90 degrees: the beam energy bounds the signals
    text = GOOD.split("[[layer]]")[0] + "[[layer]]\nformula = \"H\"\nareal_density_1e15 = 5.0\n"
    assert _quiet(text).layers[0].fractions == {"H": 1.0}
    with pytest.raises(forward.InputError, match=r"calibration\.keV_per_channel: 1000 keV per "
                                                 r"channel puts everything from zero energy up to "
                                                 r"the beam energy \(1500 keV\)"):
        parse_run(text.replace("keV_per_channel = 1.5", "keV_per_channel = 1000.0"))


def test_overrides_meet_the_same_checks(run):
    with pytest.raises(forward.InputError, match="series.toml: calibration.keV_per_channel: "
                                                 "1500 keV per channel"):
        run.with_overrides({"calibration": {"keV_per_channel": 1500.0}}, source="series.toml")
    with pytest.raises(forward.InputError, match="series.toml: beam.energy_keV: 1.5 keV is far"):
        run.with_overrides({"beam": {"energy_keV": 1.5}}, source="series.toml")


def test_no_warning_for_the_good_run():
    assert _quiet(GOOD).title.startswith("invented")


def test_capitalisation_slips_are_named():
    # symbols are case-sensitive (IUPAC): "HF" is hydrogen and fluorine, "Hf" hafnium
    from forward._elements import capitalisation_slips

    assert capitalisation_slips("HFO2") == [("HF", "Hf")]
    assert capitalisation_slips("NI3Si") == [("NI", "Ni")]
    assert capitalisation_slips("SiO2") == [] and capitalisation_slips("Ta0.55N0.45") == []
    assert capitalisation_slips("C2O") == []  # a number between them: clearly two elements
