"""Tests of ``sondage report``: files written, numbers carried over, flags and errors.

The result files are small synthetic ones from the ``build_result`` fixture (tests/conftest.py;
an invented scenario, written with the result store's own writers).
"""

from __future__ import annotations

import csv
import math
import warnings
import xml.etree.ElementTree as ET

import h5py
import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import numpy as np
import pytest
from scipy import stats
from scipy.stats.mstats import mquantiles

from forward import InputError
from inversion import build_report, read_report_data
from inversion.cli import main
from inversion.report import _chain_figures, _figures
from inversion.report._tables import SUMMARY_COLUMNS, format_summary_text

FIGURES = ("spectrum", "profile", "corner", "convergence")


@pytest.fixture(scope="module")
def converged(build_result, tmp_path_factory):
    folder = tmp_path_factory.mktemp("converged")
    path = build_result(folder / "film.h5", steps=4000, seed=7)
    return path, build_report(path, folder / "report")


@pytest.fixture(scope="module")
def short(build_result, tmp_path_factory):
    """60 steps (not converged) and no layer density (thickness in nm undefined)."""
    folder = tmp_path_factory.mktemp("short")
    path = build_result(folder / "short.h5", steps=60, seed=11, with_density=False)
    return path, build_report(path, folder / "report")


def _csv_rows(path):
    with open(path, newline="") as fh:
        reader = csv.DictReader(fh)
        assert tuple(reader.fieldnames) == SUMMARY_COLUMNS
        return list(reader)


def _file_summary(path):
    """/posterior/summary rows straight from the file: (name, {stat: value})."""
    with h5py.File(path, "r") as f:
        g = f["posterior/summary"]
        names = [n.decode() if isinstance(n, bytes) else n for n in g["names"][()]]
        cols = {k: g[k][()] for k in ("median", "mean", "sd", "low68", "high68", "low95",
                                      "high95")}
    return [(n, {k: float(v[i]) for k, v in cols.items()}) for i, n in enumerate(names)]


# ---------------------------------------------------------------------------------------------
# files


def test_every_file_is_written_and_readable(converged):
    _, written = converged
    expected = {f"{name}.{ext}" for name in FIGURES for ext in ("png", "svg")}
    expected |= {"summary.md", "summary.csv"}
    assert set(written) == expected
    for key, path in written.items():
        assert path.exists() and path.stat().st_size > 0, key
        if key.endswith(".png"):
            image = mpimg.imread(path)
            assert image.ndim == 3 and image.shape[0] > 200 and image.shape[1] > 200
            assert np.ptp(image[..., :3]) > 0.5  # not a blank canvas
        elif key.endswith(".svg"):
            root = ET.parse(path).getroot()
            assert root.tag.endswith("svg")
    rows = _csv_rows(written["summary.csv"])
    assert len(rows) == len(_file_summary(converged[0]))


def test_bad_format_is_an_input_error(tmp_path, converged):
    with pytest.raises(InputError, match="png, svg or pdf"):
        build_report(converged[0], tmp_path / "x", formats=("png", "jpeg2000"))


# ---------------------------------------------------------------------------------------------
# numbers


def test_csv_matches_the_files_posterior_summary(converged):
    path, written = converged
    rows = _csv_rows(written["summary.csv"])
    stored = _file_summary(path)
    # the report lists the quantities in the file's own order, parameters first
    assert [r["quantity"] for r in rows] == [n for n, _ in stored]
    mapping = {"median": "median", "mean": "mean", "sd": "sd", "lower_68": "low68",
               "upper_68": "high68", "lower_95": "low95", "upper_95": "high95"}
    for row, (_, values) in zip(rows, stored):
        for column, key in mapping.items():
            assert float(row[column]) == pytest.approx(values[key], rel=1e-12, abs=0), \
                (row["quantity"], column)


def test_csv_matches_quantiles_of_the_derived_draws(converged):
    path, written = converged
    rows = {r["quantity"]: r for r in _csv_rows(written["summary.csv"]) if r["kind"] == "derived"}
    with h5py.File(path, "r") as f:
        draws = {name: ds[()] for name, ds in f["derived"].items()}
    assert set(rows) == set(draws)
    for name, x in draws.items():
        # Hyndman and Fan (1996, Am. Stat. 50, 361) definition 7 sample quantiles, from
        # scipy.stats.mstats.mquantiles with alphap = betap = 1 (reference library)
        q = mquantiles(x, prob=[0.025, 0.16, 0.5, 0.84, 0.975], alphap=1, betap=1)
        row = rows[name]
        got = [float(row[c]) for c in ("lower_95", "lower_68", "median", "upper_68",
                                       "upper_95")]  # the csv's own column names
        np.testing.assert_allclose(got, q, rtol=1e-10, err_msg=name)
        assert float(row["sd"]) == pytest.approx(np.std(x, ddof=1), rel=1e-10)


def test_units_priors_and_diagnostics_reach_the_csv(converged):
    path, written = converged
    rows = {(r["quantity"], r["kind"]): r for r in _csv_rows(written["summary.csv"])}
    assert rows[("film.thickness_nm", "derived")]["unit"] == "nm"
    assert rows[("film.areal_density", "parameter")]["unit"] == "1e15 atoms/cm2"
    assert rows[("film.mixing", "parameter")]["prior"] == "halfnormal(155)"
    with h5py.File(path, "r") as f:
        tau = f["diagnostics/autocorr_time"][()]
        names = list(f["posterior/samples"].attrs["names"])
    for name, t in zip(names, tau):
        assert float(rows[(name, "parameter")]["autocorr_time_steps"]) == pytest.approx(t)


def test_markdown_carries_the_medians_and_provenance(converged):
    path, written = converged
    text = written["summary.md"].read_text()
    data = read_report_data(path)
    q = data.quantity("film.thickness_nm")
    assert f"| film.thickness_nm | nm | {q.stats['median']:.4g} |" in text
    assert "NOT CONVERGED" not in text
    assert "- seed: `7`" in text and "- version: `0.1.0`" in text
    assert "sha256:" in text
    # the verdict quotes the file's own autocorrelation times and chain length
    assert "chain of 4000 steps" in text


# ---------------------------------------------------------------------------------------------
# flags


def test_non_converged_run_is_flagged_at_the_top(short):
    path, written = short
    first = written["summary.md"].read_text().splitlines()[0]
    assert first.startswith("> **WARNING: NOT CONVERGED.**")
    printed = format_summary_text(read_report_data(path))
    assert printed.splitlines()[0].startswith("WARNING: NOT CONVERGED")


def test_undefined_thickness_is_blank_with_the_files_note(short):
    _, written = short
    rows = {r["quantity"]: r for r in _csv_rows(written["summary.csv"]) if r["kind"] == "derived"}
    assert rows["film.thickness_nm"]["median"] == ""
    assert float(rows["film.areal_density"]["median"]) > 0
    assert "film.thickness_nm: no mass density given: NaN" in written["summary.md"].read_text()


def test_file_without_diagnostics_is_flagged(build_result, tmp_path):
    path = build_result(tmp_path / "nodiag.h5", steps=200, with_diagnostics=False)
    text = format_summary_text(read_report_data(path))
    assert text.startswith("WARNING: NOT CONVERGED: the file has no convergence diagnostics")


# ---------------------------------------------------------------------------------------------
# errors


def test_missing_file(tmp_path):
    with pytest.raises(InputError) as err:
        read_report_data(tmp_path / "absent.h5")
    assert "\n" not in str(err.value) and "not found" in str(err.value)


@pytest.mark.parametrize("kind", ["garbage", "truncated", "no_samples", "crashed"])
def test_corrupt_files_are_input_errors(tmp_path, converged, kind):
    path = tmp_path / f"{kind}.h5"
    if kind == "garbage":
        path.write_bytes(b"this is not an HDF5 file\n" * 20)
    elif kind == "truncated":
        whole = converged[0].read_bytes()
        path.write_bytes(whole[: len(whole) // 3])
    else:
        with h5py.File(path, "w") as f:
            # "running" with nobody writing: the inversion died before finishing
            f.attrs["status"] = "running" if kind == "crashed" else "not converged"
            f.create_group("input")
    with pytest.raises(InputError) as err:
        build_report(path, tmp_path / "out")
    message = str(err.value)
    assert "\n" not in message and message.startswith(str(path))
    if kind == "no_samples":
        assert "/posterior/samples" in message
    if kind == "crashed":
        assert "stopped before it finished" in message and "--resume" in message


def test_cli_writes_pdf_and_exits_2_on_a_bad_file(tmp_path, converged, capsys):
    out_dir = tmp_path / "cli"
    assert main(["report", str(converged[0]), "-o", str(out_dir), "--format", "pdf"]) == 0
    out = capsys.readouterr().out
    assert "wrote 10 files" in out and "film.thickness_nm" in out
    assert {p.name for p in out_dir.glob("*.pdf")} == {f"{n}.pdf" for n in FIGURES}
    assert (out_dir / "profile.pdf").read_bytes()[:5] == b"%PDF-"
    bad = tmp_path / "bad.h5"
    bad.write_bytes(b"\x00" * 64)
    assert main(["report", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("sondage: error:") and len(err.splitlines()) == 1


# ---------------------------------------------------------------------------------------------
# plot functions


@pytest.mark.parametrize("function", [_figures.plot_spectrum, _figures.plot_profile,
                                      _chain_figures.plot_corner, _chain_figures.plot_convergence])
def test_unknown_keyword_is_rejected(converged, function):
    with pytest.raises(TypeError):
        function(converged[0], colour_sheme="dark")


def test_bands_are_labelled_and_overplotting_reuses_the_figure(converged):
    data = read_report_data(converged[0])
    fig = _figures.plot_profile(data, layout="overlay")
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert {"68 % credible band", "95 % credible band", "posterior median"} <= set(labels)
    top = fig.axes[0].child_axes  # the secondary depth axis in nm
    assert len(top) == 1 and top[0].get_xlabel().startswith("depth (nm")
    again = _figures.plot_profile(data, ax=fig.axes[0], species=["Zn"], label="second")
    assert again is fig
    plt.close(fig)

    fig = _figures.plot_spectrum(data)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "68 % predictive band" in labels and "measured counts" in labels
    assert [ax.get_xlabel() for ax in fig.axes[0].child_axes] == ["energy (keV)"]
    assert _figures.plot_spectrum(data, fig=fig, show_species=False, label="again") is fig
    plt.close(fig)


def test_plots_take_plain_arrays():
    rng = np.random.default_rng(3)
    fig = _chain_figures.plot_corner(samples=rng.normal(size=(500, 3)), labels=["a", "b", "c"])
    assert len(fig.axes) == 9
    plt.close(fig)
    depth = np.linspace(0, 100, 11)
    band = np.tile(np.linspace(0.1, 0.9, 5)[:, None], (1, depth.size))
    fig = _figures.plot_profile(depth_1e15=depth, bands={"Ni": band, "Cr": 1 - band[::-1]})
    assert fig.axes[0].get_ylabel() == "atom fraction"
    plt.close(fig)


def test_energy_axis_follows_a_quadratic_calibration():
    forward, inverse = _figures._channel_to_energy(
        np.arange(512), None, {"offset_keV": 30.0, "keV_per_channel": 3.5,
                               "quadratic_keV": 1e-4})
    channels = np.array([0.0, 17.0, 250.5, 511.0])
    # E(c) = a + b c + q c^2 (the run file's calibration form)
    assert forward(channels) == pytest.approx(30.0 + 3.5 * channels + 1e-4 * channels ** 2,
                                              rel=1e-6)
    assert inverse(forward(channels)) == pytest.approx(channels, abs=1e-3)


# ---------------------------------------------------------------------------------------------
# residuals and autocorrelation


def test_deviance_residuals_match_the_poisson_log_likelihood():
    counts = np.array([0, 1, 3, 10, 57, 400, 2])
    expected = np.array([0.4, 2.5, 3.0, 7.2, 60.0, 380.5, 0.05])
    r = _figures.deviance_residuals(counts, expected)
    # deviance residual squared = 2 [log L(saturated) - log L(model)] (McCullagh and Nelder,
    # Generalized Linear Models, 1989, section 2.4.3), log L from scipy.stats.poisson
    deviance = 2 * (stats.poisson.logpmf(counts, np.maximum(counts, 1e-300))
                    - stats.poisson.logpmf(counts, expected))
    deviance[counts == 0] = 2 * expected[counts == 0]  # saturated log L is 0 at n = 0
    np.testing.assert_allclose(r ** 2, deviance, rtol=1e-9)
    np.testing.assert_array_equal(np.sign(r), np.sign(counts - expected))
    assert math.isnan(_figures.deviance_residuals([3], [0.0])[0])


def test_autocorrelation_of_an_ar1_chain():
    # AR(1) with coefficient phi has autocorrelation phi^k at lag k, so its integrated
    # autocorrelation time 1 + 2 sum_k phi^k is (1 + phi) / (1 - phi) (analytic; the definition
    # of tau is the one in the emcee documentation; common practice)
    phi, steps, walkers = 0.8, 20000, 8
    rng = np.random.default_rng(5)
    noise = rng.standard_normal((steps, walkers, 1))
    chain = np.empty_like(noise)
    chain[0] = noise[0] / np.sqrt(1 - phi ** 2)
    for t in range(1, steps):
        chain[t] = phi * chain[t - 1] + noise[t]
    n, tau = _chain_figures.autocorr_growth(chain, n_points=6)
    assert n[-1] == steps and tau.shape == (n.size, 1)
    assert tau[-1, 0] == pytest.approx((1 + phi) / (1 - phi), rel=0.1)


def test_autocorrelation_growth_leaves_out_prefixes_where_a_walker_has_not_moved():
    # a walker held still for the first 50 steps has no autocorrelation function there (0/0):
    # those prefixes give NaN, quietly, and the longer ones a finite time
    rng = np.random.default_rng(6)
    chain = rng.standard_normal((400, 6, 2))
    chain[:50, 0, :] = 0.5  # exactly its own mean (an arbitrary value could leave rounding)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        n, tau = _chain_figures.autocorr_growth(chain, n_points=8)
    assert np.all(np.isnan(tau[n <= 50])) and np.all(np.isfinite(tau[n > 50]))


def test_corner_keeps_room_for_thicknesses_and_widths(converged):
    fig = _chain_figures.plot_corner(converged[0], max_quantities=4)
    bottom = [ax.get_xlabel() for ax in fig.axes[-4:]]
    assert bottom == ["film.areal_density\n[1e15 atoms/cm2]", "film.mixing\n[1e15 atoms/cm2]",
                      "film.thickness_nm", "film.mixing_nm"]
    plt.close(fig)


def test_depth_axis_ends_where_the_profile_stops_changing():
    depth = np.arange(100) * 10.0 + 5.0  # a thin film over a deep substrate
    step = (depth > 200).astype(float)
    bands = {"Si": np.tile(step, (5, 1)), "Ni": np.tile(1 - step, (5, 1))}
    fig = _figures.plot_profile(depth_1e15=depth, bands=bands)
    assert fig.axes[0].get_xlim()[1] == pytest.approx(1.3 * 205.0)
    plt.close(fig)
    fig = _figures.plot_profile(depth_1e15=depth, bands=bands, depth_max_1e15=800.0)
    assert fig.axes[0].get_xlim()[1] == 800.0
    plt.close(fig)


def test_energy_axis_of_a_version_1_file_comes_from_its_stored_channel_energies(
        converged, tmp_path):
    # files written before the run's calibration was kept beside the spectrum (format
    # version 1) still have the channel energies of the highest-posterior draw
    path = tmp_path / "v1.h5"
    path.write_bytes(converged[0].read_bytes())
    with h5py.File(path, "a") as f:
        del f.attrs["format_version"]
        del f["spectrum"].attrs["run_calibration_keV"]
        f["spectrum"].create_dataset("energy_keV", data=100.0 + 7.0 * np.arange(256))
    data = read_report_data(path)
    assert data.calibration == {} and "highest-posterior" in data.calibration_source
    fig = _figures.plot_spectrum(data)
    top = fig.axes[0].child_axes
    assert [ax.get_xlabel() for ax in top] == ["energy (keV)"]
    plt.close(fig)
    # the newer file takes the posterior medians of gain and offset, the rest from the run file
    new = read_report_data(converged[0])
    assert new.calibration["keV_per_channel"] == new.quantity("gain_keV").stats["median"]
    assert new.calibration["quadratic_keV"] == 0.0
