"""The result file: layout, units, staged writes, tolerant reader, never overwritten."""

from __future__ import annotations

import warnings

import h5py
import numpy as np
import pytest

from forward import InputError
from inversion import NotConvergedWarning, invert, read_result
from inversion.results._schema import FORMAT_VERSION, QUANTILES
from inversion.results._store import write_groups, write_input

FIT = {"free": {"film.areal_density": {"uniform": [100, 600]},
                "film.mixing": {"halfnormal": 30}},
       "fixed": ["stopping", "gain_keV", "offset_keV", "straggling"], "walkers": 12, "max_steps": 60,
       "check_every": 20, "band_draws": 40}


def _counts(toy, run, seed=2):
    m = toy.Model(run)
    return np.random.default_rng(seed).poisson(m.expected_counts(m.layer_fractions()))


@pytest.fixture(scope="module")
def result_path(toy, tmp_path_factory):
    run = toy.run(FIT)
    path = tmp_path_factory.mktemp("store") / "result.h5"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)  # 60 steps: not converged
        invert(run, _counts(toy, run), path, seed=5, build_model=toy.Builder(run),
               progress=False)
    return path


def test_layout_names_and_units(result_path):
    with h5py.File(result_path, "r") as f:
        for key in ("program", "version", "seed", "started", "finished", "command", "status"):
            assert key in f.attrs
        assert f.attrs["seed"] == 5
        assert f["input/run"][()].decode().startswith("invented toy run")
        assert f["input/spectrum"].shape == (150,)
        s = f["posterior/samples"]
        names = [n.decode() if isinstance(n, bytes) else n for n in s.attrs["names"]]
        assert names == ["film.areal_density", "film.mixing", "fluence_scale", "fwhm_keV"]
        assert len(s.attrs["units"]) == 4 and s.shape[1] == 4
        summary = f["posterior/summary"]
        snames = [n.decode() for n in summary["names"][()]]
        for needed in ("film.areal_density", "film.thickness_nm", "film.mixing",
                       "film.mixing_nm", "total.Ge", "total.Si"):
            assert needed in snames
        assert np.all(summary["low95"][()] <= summary["low68"][()])
        assert np.all(summary["low68"][()] <= summary["median"][()])
        assert np.all(summary["median"][()] <= summary["high68"][()])
        assert np.all(summary["high68"][()] <= summary["high95"][()])
        assert f["derived/film.thickness_nm"].attrs["unit"] == "nm"
        n_slices = f["profile/depth"].shape[0]
        assert f["profile/depth"].attrs["unit"] == "1e15 atoms/cm2"
        assert f["profile/Ge"].shape == (5, n_slices)
        assert f["profile/Ge_map"].shape == (n_slices,)
        assert np.all(np.diff(f["profile/Ge"][()], axis=0) >= 0)  # quantiles in order
        assert list(f["profile/Ge"].attrs["quantiles"]) == list(QUANTILES)
        assert f["spectrum/predictive"].shape == (5, 150)
        assert f["spectrum/species/Ge"].shape == (150,)
        d = f["diagnostics"]
        assert d.attrs["steps"] == 60 and not d.attrs["converged"]
        assert d["autocorr_time"].shape == (4,) and d["ess"].shape == (4,)
        assert d["acceptance"].shape == (12,)
        assert "NOT CONVERGED" in d.attrs["warnings"][0]
        assert "_staging" not in f


def test_thickness_draws_follow_from_areal_density(result_path):
    res = read_result(result_path)
    t = res.derived["film.areal_density"]
    # atoms_per_cm3 4.5e22 from the invented toy run: nm = 1e15 * N / n * 1e7 (common practice)
    assert np.allclose(res.derived["film.thickness_nm"], t * 1e15 / 4.5e22 * 1e7)
    assert np.array_equal(t, res.samples[:, 0])
    # total Ge is 0.6 of the film for every draw (mixing conserves atoms)
    assert np.allclose(res.derived["total.Ge"], 0.6 * t)


def test_existing_file_is_never_overwritten_without_force(toy, result_path):
    run = toy.run(FIT)
    before = result_path.read_bytes()
    with pytest.raises(InputError, match="--resume .* --force"):
        invert(run, _counts(toy, run), result_path, build_model=toy.Builder(run), progress=False)
    assert result_path.read_bytes() == before


def test_resume_refuses_a_different_spectrum(toy, result_path, tmp_path):
    run = toy.run(FIT)
    copy = tmp_path / "copy.h5"
    copy.write_bytes(result_path.read_bytes())
    with pytest.raises(InputError, match="different run file or spectrum"):
        invert(run, _counts(toy, run, seed=99), copy, resume=True, build_model=toy.Builder(run),
               progress=False)


def test_reader_tolerates_missing_parts(tmp_path):
    path = tmp_path / "bare.h5"
    write_input(path, run_text="invented", counts=np.arange(5), measured=np.ones(5, bool),
                priors=["a [1]: normal(0, 1)"], attrs={"seed": 1})
    res = read_result(path)
    assert res.run_text == "invented" and res.samples is None
    assert res.summary == {} and res.profile == {} and not res.converged


def test_staged_write_replaces_whole_groups(tmp_path):
    path = tmp_path / "g.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("profile/old", data=[1.0])
    write_groups(path, {"profile": {"new": (np.arange(3.0), {"unit": "nm"})}})
    with h5py.File(path, "r") as f:
        assert list(f["profile"]) == ["new"] and f["profile/new"].attrs["unit"] == "nm"
        assert "_staging" not in f


def test_layer_without_mass_density_has_nan_thickness_and_a_note(toy, tmp_path):
    run = toy.run(FIT)
    run.layers[0].atoms_per_cm3 = None  # no mass density given for the film
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        warnings.simplefilter("ignore", NotConvergedWarning)
        invert(run, _counts(toy, run), tmp_path / "r.h5", seed=5, max_steps=20,
               build_model=toy.Builder(run), progress=False)
    res = read_result(tmp_path / "r.h5")
    assert np.all(np.isnan(res.derived["film.thickness_nm"]))
    assert np.isnan(res.summary["film.thickness_nm"]["median"])
    with h5py.File(tmp_path / "r.h5", "r") as f:
        assert "no mass density" in f["derived/film.thickness_nm"].attrs["note"]
        assert "depth_nm" not in f["profile"]


def test_files_carry_their_format_version_and_older_files_read_as_version_1(result_path,
                                                                           tmp_path):
    with h5py.File(result_path, "r") as f:
        assert f.attrs["format_version"] == FORMAT_VERSION == 4
        assert list(f["spectrum"].attrs["run_calibration_keV"]) == [40.0, 8.0, 0.0]
    assert read_result(result_path).format_version == 4
    old = tmp_path / "version1.h5"
    old.write_bytes(result_path.read_bytes())
    with h5py.File(old, "a") as f:  # a file written before the attribute existed
        del f.attrs["format_version"]
    res = read_result(old)
    assert res.format_version == 1
    assert np.array_equal(res.samples, read_result(result_path).samples)


def test_programming_errors_are_not_reported_as_damaged_files(result_path, monkeypatch):
    # only what HDF5 raises for a missing or damaged file becomes "damaged"; a bug in our own
    # code surfaces as itself (the command line then says "internal error", exit code 1)
    from inversion.results import _result

    def bug(path, tree):
        raise TypeError("a bug of ours")

    monkeypatch.setattr(_result, "_result", bug)
    with pytest.raises(TypeError, match="a bug of ours"):
        read_result(result_path)


def test_resuming_a_version_1_file_writes_it_in_this_version(toy, result_path, tmp_path):
    old = tmp_path / "version1.h5"
    old.write_bytes(result_path.read_bytes())
    with h5py.File(old, "a") as f:
        del f.attrs["format_version"]
        del f["spectrum"].attrs["run_calibration_keV"]
    run = toy.run(FIT)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotConvergedWarning)
        res = invert(run, _counts(toy, run), old, resume=True, max_steps=80,
                     build_model=toy.Builder(run), progress=False)
    assert res.format_version == 4 and int(res.diagnostics["steps"]) == 80
    assert "run_calibration_keV" in res.group_attrs["spectrum"]
