"""Tests of the figures for thin films: zoom panels, stamps, the model check's shading, profiles
at the model's resolution, corner groups and the ordered colours.

Figures are checked through matplotlib's objects (axes, texts, legend labels, line data), never
pixels.  Result files come from the ``build_result`` fixture (tests/conftest.py, an invented
scenario); the posterior predictive check's entries (``/diagnostics`` attributes
``model_rejected``, ``ppc_p_value``, dataset ``ppc_ranges``) and the node profile's
(``/profile`` attribute ``model``, ``/profile/node_depth``) are added here as the result writer
lays them out.  Spectra given as arrays are invented shapes, not physics.
"""

from __future__ import annotations

from types import SimpleNamespace

import h5py
import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.colors import to_rgb
from matplotlib.patches import Rectangle
from scipy.special import erfc

from inversion import build_report, read_report_data
from inversion.cli import main
from inversion.report import _chain_figures, _figures, _style
from inversion.report._data import Quantity
from inversion.report._regions import signal_regions
from inversion.series import _figures as series_figures

FIGURE_MAKERS = (_figures.plot_spectrum, _figures.plot_profile, _chain_figures.plot_corner,
                 _chain_figures.plot_convergence)


# ---------------------------------------------------------------------------------------------
# helpers


def _add_model_check(path, *, rejected, p_value, ranges):
    """The posterior predictive check's entries, as the result writer lays them out."""
    with h5py.File(path, "a") as f:
        g = f["diagnostics"]
        g.attrs["model_rejected"] = rejected
        g.attrs["ppc_p_value"] = p_value
        g.create_dataset("ppc_ranges", data=np.asarray(ranges, dtype=np.int64).reshape(-1, 3))
    return path


def _stamps(fig) -> list[str]:
    return [t.get_text() for t in _style.stamps_of(fig)]


def _legend(axis) -> list[str]:
    return [t.get_text() for t in axis.get_legend().get_texts()]


def _spans(axis, colour) -> list[tuple[float, float]]:
    """x extents of the vertical spans of one colour on an axes."""
    out = []
    for patch in axis.patches:
        if isinstance(patch, Rectangle) and \
                np.allclose(patch.get_facecolor()[:3], to_rgb(colour)):
            out.append((patch.get_x(), patch.get_x() + patch.get_width()))
    return sorted(out)


def _by_gid(fig) -> dict:
    return {ax.get_gid(): ax for ax in fig.axes if ax.get_gid()}


def _box(channel, lo, hi, height, edge=3.0):
    return height * 0.5 * erfc((lo - channel) / edge) * 0.5 * erfc((channel - hi) / edge)


@pytest.fixture(scope="module")
def thin_film():
    """Invented spectrum of a heavy film 20 channels wide over a silicon substrate with a thin
    oxygen-rich and a thinner, faint nitrogen-rich layer (shapes only, not physics)."""
    rng = np.random.default_rng(1)
    ch = np.arange(1176.0)
    parts = {"Hf": _box(ch, 1010, 1030, 900.0),
             "Si": _box(ch, 80, 560, 400.0) * np.clip(1 + 0.002 * (560 - ch), 0, None),
             "O": _box(ch, 330, 350, 25.0),
             "N": _box(ch, 280, 296, 12.0)}
    total = sum(parts.values())
    draws = rng.poisson(total[None, :] * rng.normal(1.0, 0.01, (200, 1)))
    return SimpleNamespace(channel=ch, counts=rng.poisson(total).astype(float), parts=parts,
                           total=total, window=(ch > 60) & (ch < 1100),
                           predictive=np.quantile(draws, [0.025, 0.16, 0.5, 0.84, 0.975],
                                                  axis=0))


def _spectrum(film, **kw):
    return _figures.plot_spectrum(channel=film.channel, counts=film.counts,
                                  predictive=film.predictive, species_spectra=film.parts,
                                  model_median=film.total, window=film.window, **kw)


@pytest.fixture(scope="module")
def results(build_result, tmp_path_factory):
    """Result files: converged, not converged, converged but model rejected, no diagnostics."""
    folder = tmp_path_factory.mktemp("figures")
    return SimpleNamespace(
        converged=build_result(folder / "converged.h5", steps=4000, seed=7),
        short=build_result(folder / "short.h5", steps=60, seed=11),
        rejected=_add_model_check(build_result(folder / "rejected.h5", steps=4000, seed=7),
                                  rejected=True, p_value=0.0031,
                                  ranges=[[150, 170, 1], [60, 80, -1]]),
        bare=build_result(folder / "bare.h5", steps=200, with_diagnostics=False),
    )


# ---------------------------------------------------------------------------------------------
# signal regions


def test_regions_pick_the_narrow_signals_and_leave_the_substrate(thin_film):
    regions = signal_regions(thin_film.parts, total=thin_film.total, window=thin_film.window)
    assert [(r.letter, r.species) for r in regions] == [("A", ("O",)), ("B", ("Hf",))]
    oxygen, heavy = regions
    # each region holds its signal's channels, padded by a quarter of its width
    assert oxygen.first < 330 < 350 < oxygen.last and oxygen.last - oxygen.first < 60
    assert heavy.first < 1010 < 1030 < heavy.last and heavy.last - heavy.first < 60


def test_a_signal_under_the_counting_noise_gets_no_panel():
    # a flat background of B counts and a signal of s counts per channel over w channels:
    # the run counts when s w >= 3 sqrt((B + s) w) (the module's rule)
    background, width = 400.0, 16
    channel = np.arange(200.0)
    inside = (channel >= 100) & (channel < 100 + width)
    for factor, expected in ((0.97, 0), (1.03, 1)):
        # solve s w = 3 f sqrt((B + s) w) for s
        k = (3.0 * factor) ** 2 / width
        s = 0.5 * (k + np.sqrt(k * k + 4 * k * background))
        parts = {"bulk": np.full(channel.size, background), "thin": np.where(inside, s, 0.0)}
        found = signal_regions(parts, max_width_fraction=0.5)
        assert len(found) == expected, factor


def test_close_peaks_share_a_panel_and_the_count_is_capped():
    channel = np.arange(1000.0)
    parts = {"Pt": _box(channel, 800, 815, 500.0), "Ir": _box(channel, 818, 830, 300.0),
             "Au": _box(channel, 600, 610, 200.0), "Ag": _box(channel, 400, 410, 100.0),
             "Cu": _box(channel, 200, 210, 50.0)}
    regions = signal_regions(parts, max_regions=10)
    assert [r.species for r in regions] == [("Cu",), ("Ag",), ("Au",), ("Pt", "Ir")]
    # at most three: the least visible ones are kept (the tallest, widest goes)
    capped = signal_regions(parts)
    assert [r.species for r in capped] == [("Cu",), ("Ag",), ("Au",)]
    assert [r.letter for r in capped] == ["A", "B", "C"]
    # nothing outside the fitted window
    window = channel < 500
    assert [r.species for r in signal_regions(parts, window=window)] == [("Cu",), ("Ag",)]
    assert signal_regions({}) == []


# ---------------------------------------------------------------------------------------------
# the spectrum figure


def test_zoom_panels_with_their_residuals(thin_film):
    fig = _spectrum(thin_film)
    panels = _by_gid(fig)
    assert set(panels) == {"spectrum:counts", "spectrum:residuals", "spectrum:zoom:A",
                           "spectrum:zoom-residuals:A", "spectrum:zoom:B",
                           "spectrum:zoom-residuals:B"}
    assert panels["spectrum:zoom:A"].get_title(loc="left") == "A: O"
    assert panels["spectrum:zoom:B"].get_title(loc="left") == "B: Hf"
    low, high = panels["spectrum:zoom:B"].get_xlim()
    assert low < 1010 and high > 1030 and high - low < 60
    # each zoom panel's residuals are the deviance residuals of its channels
    expected = _figures.deviance_residuals(thin_film.counts, thin_film.total)
    (line,) = [ln for ln in panels["spectrum:zoom-residuals:B"].get_lines()
               if ln.get_marker() == "o"]
    x = np.asarray(line.get_xdata())
    assert x.min() >= low and x.max() <= high
    np.testing.assert_allclose(line.get_ydata(), expected[x.astype(int)])
    # the y axis of a zoom panel is fitted to its channels, not to the whole spectrum
    assert panels["spectrum:zoom:A"].get_ylim()[1] < 0.9 * panels["spectrum:counts"].get_ylim()[1]
    # the regions are outlined and lettered on the whole spectrum
    main = panels["spectrum:counts"]
    assert "drawn enlarged below" in _legend(main)
    assert {"A", "B"} <= {t.get_text() for t in main.texts}
    plt.close(fig)


def test_zoom_can_be_switched_off_or_given(thin_film):
    fig = _spectrum(thin_film, zoom=False)
    assert len(fig.axes) == 2
    plt.close(fig)
    fig = _spectrum(thin_film, zoom=[(270, 300)])
    panels = _by_gid(fig)
    assert panels["spectrum:zoom:A"].get_xlim() == pytest.approx((269.5, 300.5))
    assert "spectrum:zoom:B" not in panels
    plt.close(fig)
    with pytest.raises(ValueError, match="zoom"):
        _spectrum(thin_film, zoom="everywhere")


def test_log_counts_on_every_counts_panel(thin_film):
    fig = _spectrum(thin_film, log_counts=True)
    counts_panels = [ax for gid, ax in _by_gid(fig).items()
                     if gid == "spectrum:counts" or gid.startswith("spectrum:zoom:")]
    assert len(counts_panels) == 3
    assert {ax.get_yscale() for ax in counts_panels} == {"log"}
    assert {ax.get_yscale() for gid, ax in _by_gid(fig).items() if "residuals" in gid} == \
        {"linear"}
    plt.close(fig)


def test_overplotting_reuses_the_zoom_panels(thin_film):
    fig = _spectrum(thin_film)
    zoom = _by_gid(fig)["spectrum:zoom:B"]
    before = len(zoom.get_lines())
    assert _spectrum(thin_film, fig=fig, label="second") is fig
    assert len(zoom.get_lines()) > before
    assert "second: 68 % predictive band" in _legend(_by_gid(fig)["spectrum:counts"])
    plt.close(fig)


def test_systematic_residual_ranges_are_shaded_and_named(results):
    data = read_report_data(results.rejected)
    assert data.model_rejected is True and data.ppc_p_value == pytest.approx(0.0031)
    np.testing.assert_array_equal(data.ppc_ranges, [[150, 170, 1], [60, 80, -1]])
    fig = _figures.plot_spectrum(data, zoom=False)
    main, residuals = fig.axes[0], fig.axes[1]
    labels = _legend(main)
    assert "data run above the model here (model rejected)" in labels
    assert "data run below the model here (model rejected)" in labels
    for axis in (main, residuals):
        assert _spans(axis, _style.SYSTEMATIC_COLOURS[1]) == [(149.5, 170.5)]
        assert _spans(axis, _style.SYSTEMATIC_COLOURS[-1]) == [(59.5, 80.5)]
    plt.close(fig)
    # ranges of a check that did not reject the model are shaded without the verdict
    fig = _figures.plot_spectrum(data, zoom=False, model_rejected=False, stamp=False)
    assert "data run above the model here" in _legend(fig.axes[0])
    plt.close(fig)


def test_a_file_without_the_model_check_has_no_shading(results):
    data = read_report_data(results.converged)
    assert data.model_rejected is None and data.ppc_ranges is None
    fig = _figures.plot_spectrum(data)
    assert not any("model" in text and "run" in text for text in _legend(fig.axes[0]))
    assert _spans(fig.axes[0], _style.SYSTEMATIC_COLOURS[1]) == []
    plt.close(fig)


# ---------------------------------------------------------------------------------------------
# stamps


@pytest.mark.parametrize("maker", FIGURE_MAKERS)
def test_every_figure_of_a_flagged_run_is_stamped(results, maker):
    fig = maker(results.converged)
    assert _stamps(fig) == []
    plt.close(fig)
    fig = maker(results.short)
    assert [s.split(":")[0] for s in _stamps(fig)] == ["NOT CONVERGED"]
    plt.close(fig)
    fig = maker(results.rejected)
    (stamp,) = _stamps(fig)
    assert stamp.startswith("MODEL REJECTED (posterior predictive p = 0.0031)")
    plt.close(fig)
    fig = maker(results.bare) if maker is not _chain_figures.plot_convergence else None
    if fig is not None:
        assert _stamps(fig) == ["NOT CONVERGED: the file has no convergence diagnostics "
                                "(see summary.md)"]
        plt.close(fig)


def test_stamps_can_be_left_out_and_stack_when_overplotting(results):
    fig = _figures.plot_spectrum(results.short, stamp=False)
    assert _stamps(fig) == []
    plt.close(fig)
    fig = _figures.plot_spectrum(results.short)
    _figures.plot_spectrum(results.rejected, fig=fig, label="second")
    stamps = _style.stamps_of(fig)
    assert [t.get_text().split(" (")[0].split(":")[0] for t in stamps] == \
        ["NOT CONVERGED", "second"]
    assert stamps[1].get_text().startswith("second: MODEL REJECTED")
    # the later stamp sits above the earlier one
    fig.canvas.draw()
    assert stamps[1].get_window_extent().y0 > stamps[0].get_window_extent().y0
    plt.close(fig)


def test_the_report_of_a_rejected_model_stamps_every_figure(results, tmp_path, monkeypatch):
    from inversion.report import _build

    stamped = []
    original = _style.draw_stamps

    def spy(fig, texts):
        drawn = original(fig, texts)
        stamped.append([t.get_text() for t in drawn])
        return drawn

    monkeypatch.setattr(_style, "draw_stamps", spy)
    written = build_report(results.rejected, tmp_path / "report", formats=("png",))
    assert {f"{n}.png" for n in _build.FIGURES} <= set(written)
    assert len(stamped) == len(_build.FIGURES)
    assert all(len(s) == 1 and s[0].startswith("MODEL REJECTED") for s in stamped)
    assert "shades 2 channel range(s)" in written["summary.md"].read_text()


# ---------------------------------------------------------------------------------------------
# the profile figure


def test_profile_lines_go_through_the_given_points():
    depth = np.array([0.0, 3.0, 4.0, 7.5, 20.0, 60.0])
    median = np.array([1.0, 0.9, 0.4, 0.1, 0.0, 0.0])
    band = np.stack([median - 0.05, median - 0.02, median, median + 0.02, median + 0.05])
    fig = _figures.plot_profile(depth_1e15=depth, bands={"Pt": band, "Si": 1 - band[::-1]},
                                layout="overlay")
    lines = [ln for ln in fig.axes[0].get_lines() if ln.get_linewidth() == 1.6]
    assert len(lines) == 2
    np.testing.assert_array_equal(lines[0].get_xdata(), depth)
    np.testing.assert_array_equal(lines[0].get_ydata(), median)
    assert {ln.get_drawstyle() for ln in lines} == {"default"}  # never steps
    plt.close(fig)


def test_a_minor_species_gets_its_own_panel(results):
    data = read_report_data(results.converged)
    assert _figures.has_minor_species(data.profile_bands)  # Y at 2 % in the invented film
    fig = _figures.plot_profile(data)
    panels = _by_gid(fig)
    assert set(panels) == {f"profile:{s}" for s in data.profile_bands}
    yttrium = panels["profile:Y"]
    assert yttrium.get_ylim()[1] < 0.05  # fitted to its own band, not 0 to 1
    assert yttrium.get_ylabel() == "Y"
    first = fig.axes[0]
    labels = _legend(first)
    assert {"68 % credible band", "95 % credible band", "posterior median",
            "best fit (maximum posterior)"} <= set(labels)
    assert set(data.profile_bands) <= set(labels)
    assert [a.get_xlabel() for a in first.child_axes] == ["depth (nm, from the layer densities)"]
    assert fig._supylabel.get_text() == "atom fraction"
    # a second result drawn into the same panels
    assert _figures.plot_profile(data, fig=fig, label="second", show_best_fit=False) is fig
    plt.close(fig)
    fig = _figures.plot_profile(data, layout="overlay")
    assert len(fig.axes) == 1 and fig.axes[0].get_ylim() == (-0.02, 1.02)
    plt.close(fig)
    fig = _figures.plot_profile(data, layout="overlay", log_fraction=True)
    assert fig.axes[0].get_yscale() == "log"
    plt.close(fig)


def test_profile_without_densities_has_no_nm_axis(build_result, tmp_path):
    data = read_report_data(build_result(tmp_path / "nodensity.h5", steps=60,
                                         with_density=False))
    fig = _figures.plot_profile(data, layout="overlay")
    assert fig.axes[0].child_axes == []
    plt.close(fig)


def test_free_form_nodes_are_marked(results, tmp_path):
    path = tmp_path / "nodes.h5"
    path.write_bytes(results.converged.read_bytes())
    nodes = np.linspace(0.0, 900.0, 7)
    with h5py.File(path, "a") as f:
        f["profile"].attrs["model"] = "nodes"
        f["profile"].create_dataset("node_depth", data=nodes)
    data = read_report_data(path)
    assert data.profile_model == "nodes"
    np.testing.assert_array_equal(data.node_depth_1e15, nodes)
    assert "node_depth" not in data.profile_bands
    fig = _figures.plot_profile(data, layout="overlay")
    axis = fig.axes[0]
    vertical = sorted(ln.get_xdata()[0] for ln in axis.get_lines()
                      if ln.get_linestyle() == ":" and ln.get_xdata()[0] == ln.get_xdata()[1])
    assert vertical == pytest.approx(nodes)
    assert "nodes of the free-form profile" in _legend(axis)
    plt.close(fig)


def test_profile_layout_errors(results):
    data = read_report_data(results.converged)
    with pytest.raises(ValueError, match="layout"):
        _figures.plot_profile(data, layout="grid")
    fig, axis = plt.subplots()
    with pytest.raises(ValueError, match="fig="):
        _figures.plot_profile(data, layout="species", ax=axis)
    plt.close(fig)


# ---------------------------------------------------------------------------------------------
# the corner plot


def _bottom_labels(fig, k):
    return [ax.get_xlabel().split("\n")[0] for ax in fig.axes[-k:]]


def test_corner_draws_the_sample_unless_asked_for_more(results):
    data = read_report_data(results.converged)
    fig = _chain_figures.plot_corner(data)
    assert _bottom_labels(fig, 4) == ["film.areal_density", "film.mixing", "film.thickness_nm",
                                      "film.mixing_nm"]
    assert len(fig.axes) == 16
    plt.close(fig)
    fig = _chain_figures.plot_corner(data, include="nuisances")
    assert _bottom_labels(fig, 7)[4:] == ["fluence_scale", "gain_keV", "offset_keV"]
    plt.close(fig)


def test_corner_shares_are_the_compositions_fractions(results):
    data = read_report_data(results.converged)
    rng = np.random.default_rng(2)
    n = data.samples.shape[0]
    share = rng.uniform(0.4, 0.6, n)
    data.quantities += [
        Quantity("film.share.Zn", "parameter", "", {}, draws=share),
        Quantity("stopping.Si", "parameter", "", {}, draws=rng.normal(1, 0.03, n)),
        Quantity("background.level", "parameter", "counts/channel", {},
                 draws=rng.uniform(0, 1, n)),
    ]
    shares_only = _chain_figures._corner_selection(data, 8, ("shares",))[1]
    assert shares_only[-1] == "film.share.Zn"
    data.quantities += [Quantity("film.fraction.Zn", "derived", "", {}, draws=share),
                        Quantity("film.fraction.O", "derived", "", {}, draws=1 - share)]
    labels = _chain_figures._corner_selection(data, 8, ("shares", "nuisances"))[1]
    # with two species the first fraction is the share itself (stick-breaking): the fractions
    # replace the share, and both fractions are drawn
    assert [lab.split("\n")[0] for lab in labels] == [
        "film.areal_density", "film.mixing", "film.thickness_nm", "film.mixing_nm",
        "film.fraction.Zn", "film.fraction.O", "fluence_scale", "gain_keV", "offset_keV",
        "stopping.Si", "background.level"]


def test_corner_groups_are_checked(results, tmp_path, capsys):
    assert _chain_figures.corner_groups("shares, nuisances") == ("nuisances", "shares")
    with pytest.raises(ValueError, match="allowed: nuisances, shares"):
        _chain_figures.plot_corner(results.converged, include=["everything"])
    assert main(["report", str(results.converged), "-o", str(tmp_path / "r"),
                 "--corner", "everything"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "nuisances, shares" in err


def test_report_command_takes_the_figure_options(results, tmp_path, monkeypatch):
    calls = {}

    def spy(name, function):
        def wrapped(*args, **kwargs):
            calls[name] = kwargs
            return function(*args, **kwargs)
        return wrapped

    for name in ("plot_spectrum", "plot_profile"):
        monkeypatch.setattr(_figures, name, spy(name, getattr(_figures, name)))
    monkeypatch.setattr(_chain_figures, "plot_corner",
                        spy("plot_corner", _chain_figures.plot_corner))
    out = tmp_path / "opts"
    assert main(["-q", "report", str(results.converged), "-o", str(out), "--log-counts",
                 "--profile", "log", "--corner", "nuisances,shares"]) == 0
    assert calls["plot_spectrum"] == {"log_counts": True}
    assert calls["plot_profile"] == {"layout": "overlay", "log_fraction": True}
    assert calls["plot_corner"] == {"include": ("nuisances", "shares")}
    assert (out / "corner.png").stat().st_size > 0


# ---------------------------------------------------------------------------------------------
# ordered colours and the series figures


def test_contrast_ratio_end_points():
    # W3C WCAG 2.1 ("contrast ratio"): ratios range from 1 (white on white) to 21 (black)
    assert _style.contrast_on_white("#ffffff") == pytest.approx(1.0)
    assert _style.contrast_on_white("#000000") == pytest.approx(21.0)
    # #767676 is the lightest grey with a 4.5:1 ratio on white (from memory: 4.54)
    assert _style.contrast_on_white("#767676") == pytest.approx(4.54, abs=0.01)


def test_ordered_colours_darken_steadily_and_never_fade_into_white():
    for n in (1, 2, 3, 6, 12):
        colours = _style.ordered_colours(n)
        assert len(colours) == n
        contrast = [_style.contrast_on_white(c) for c in colours]
        assert min(contrast) >= _style.MIN_CONTRAST_ON_WHITE
        assert np.all(np.diff(contrast) < 0)  # dark to light, in order
    # no pale yellow end: the lightest colour of the ramp is not a yellow of low contrast
    assert _style.contrast_on_white(_style.ORDERED_RAMP[-1]) >= 3.0
    assert _style.contrast_on_white(_style.PALETTE["yellow"]) < 3.0  # why it is not used


def _series_data(temperatures):
    members = [{"label": "asdep", "temperature_K": float("nan"), "time_s": 0.0,
                "as_deposited": True, "file": "asdep.h5", "width_median": 2.0,
                "width_low68": 1.8, "width_high68": 2.2}]
    for k, tk in enumerate(temperatures):
        for t in (600.0, 1800.0):
            w = 2.0 + 0.001 * t * (k + 1)
            members.append({"label": f"a{tk:.0f}_{t:.0f}", "temperature_K": tk, "time_s": t,
                            "as_deposited": False, "file": f"a{k}.h5", "width_median": w,
                            "width_low68": w - 0.2, "width_high68": w + 0.2})
    return {"attrs": {"width_unit": "nm", "d_unit": "nm2/s"}, "members": members,
            "diffusion": {}, "arrhenius": None, "comparison": {}}


def test_width_figure_uses_the_ordered_colours():
    fig = series_figures.plot_width_growth(_series_data([700.0, 600.0, 650.0]),
                                           stamps=["NOT CONVERGED: member a600_600"])
    axis = fig.axes[0]
    colours = _style.ordered_colours(3)
    lines = {c.get_label(): c.lines[0] for c in axis.containers}
    assert list(lines) == ["as deposited (asdep)", "600 K", "650 K", "700 K"]
    for label, colour in zip(("600 K", "650 K", "700 K"), colours):
        assert np.allclose(to_rgb(lines[label].get_color()), to_rgb(colour))
    assert _stamps(fig) == ["NOT CONVERGED: member a600_600"]
    plt.close(fig)


def test_series_stamps_name_the_flagged_members(build_result, tmp_path):
    build_result(tmp_path / "good.h5", steps=4000, seed=7)
    build_result(tmp_path / "short.h5", steps=60, seed=11)
    _add_model_check(build_result(tmp_path / "bad.h5", steps=4000, seed=7), rejected=True,
                     p_value=0.001, ranges=[])
    members = [{"label": name, "file": f"{name}.h5"} for name in ("good", "short", "bad")]
    members.append({"label": "gone", "file": "gone.h5"})
    stamps = series_figures.member_verdicts(tmp_path / "series.h5", members)
    assert stamps == ["NOT CONVERGED: member short (see their own reports)",
                      "MODEL REJECTED: member bad (see their own reports)",
                      "UNCHECKED: member file(s) of gone could not be read"]
