"""The free-form profile: its defaults from the run, a node range inside the run file's layers,
atoms conserved (derived totals equal the profile's integrals), and recovery of a smooth
three-species profile within its bands.

Every sample here is INVENTED: a platinum cap over a nickel film on silicon whose interfaces
have interdiffused.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import integrate

import forward
import inversion
from benchmarks._runs import run_head
from forward import InputError
from inversion.fit._nodes import describe_nodes
from inversion.fit._stack import refinement_points, stack_table

#: the sample's layers and the fit (the run file's head is written by _run)
RUN = """\
[[layer]]
name = "cap"
formula = "Pt"
areal_density_1e15 = 100.0
density_g_cm3 = 21.4
[[layer]]
name = "film"
formula = "Ni"
areal_density_1e15 = 200.0
density_g_cm3 = 8.9
[[layer]]
name = "wafer"
formula = "Si"
substrate = true
density_g_cm3 = 2.33
[fit]
profile = "nodes"
fixed = ["stopping", "gain_keV", "offset_keV", "fwhm_keV", "straggling"]
windows = [[260, 780]]
{fit}
[fit.nodes]
{nodes}
"""

#: the invented truth: areal densities and interface widths of the stack that makes the data
TRUTH_T, TRUTH_W = np.array([100.0, 200.0]), np.array([30.0, 40.0])


def _run(tmp_path, nodes="", fit="", charge=5.0):
    path = tmp_path / "run.toml"
    head = run_head(title="invented: a Pt cap over Ni on Si, interfaces interdiffused",
                    charge_uC=charge, fwhm_keV=16.0, solid_angle_msr=2.5, keV_per_channel=2.5,
                    offset_keV=15.0)
    path.write_text(head + RUN.format(nodes=nodes, fit=fit))
    return path


def _truth(run_path):
    """Expected counts and the truth's profile (a callable of depth) of the invented sample:
    the run's layers mixed at their interfaces (the atom-conserving stack)."""
    from inversion.fit._stack import point_composition

    run = forward.load_run(run_path)
    model = forward.ForwardModel(run, n_channels=1024)
    comps = np.eye(3)  # Pt, Ni, Si in the order the layers bring them
    edges = np.asarray(model.sample_edges(TRUTH_T), dtype=float)
    extra = refinement_points(TRUTH_T, TRUTH_W, np.ones(2, dtype=bool))
    edges = np.unique(np.concatenate([edges, np.clip(extra, 0.0, edges[-1])]))
    widths, fractions, _ = stack_table(edges, TRUTH_T, TRUTH_W, comps, True)
    mu = np.maximum(model.expected_counts(fractions, widths_1e15=widths), 0.0)
    above = np.concatenate([[0.0], np.cumsum(widths)])

    def profile(depth):
        z = np.interp(depth, above, edges)
        return point_composition(z, TRUTH_T, TRUTH_W, comps, True)[0]

    return mu, profile


def test_defaults_follow_the_depth_resolution(tmp_path):
    path = _run(tmp_path)
    mu, _ = _truth(path)
    _, obj = inversion.prepare(path, np.round(mu))
    nodes = obj.spec.nodes
    # the range: 1.5 x the films over a substrate; nodes half a depth resolution apart
    assert nodes["bottom_1e15"] == pytest.approx(450.0)
    spacing = 450.0 / (nodes["count"] - 1)
    assert spacing <= 0.5 * nodes["resolution_1e15"] < spacing * (nodes["count"] - 1) / (
        nodes["count"] - 2)
    # every species of the layers over the range; the substrate's (held below) the reference
    assert [obj.spec.species[c] for c in nodes["columns"]][-1] == "Si"
    assert sorted(obj.spec.species[c] for c in nodes["columns"]) == ["Ni", "Pt", "Si"]
    text = describe_nodes(nodes, obj.spec.species)
    for word in ("nodes (default)", "species Pt, Ni, Si (default)", "log-ratios to Si",
                 "step sd 0.5 (default)", "depth resolution"):
        assert word in text
    assert obj.ndim == 2 * nodes["count"] + 1  # two log-ratios per node, and the fluence


def test_node_keys_are_checked(tmp_path):
    mu, _ = _truth(_run(tmp_path))
    for nodes, where in (('layers = ["wafer"]', "fit.nodes.layers"),
                         ('layers = ["cap", "wafer2"]', "fit.nodes.layers"),
                         ('layers = ["film"]\ndepth_1e15 = 300.0', "fit.nodes.layers"),
                         ('count = 2', "fit.nodes.count"),
                         ('species = ["Pt"]', "fit.nodes.species"),
                         ('spacing = 3', "fit.nodes.spacing")):
        with pytest.raises(InputError) as err:
            inversion.prepare(_run(tmp_path, nodes), np.round(mu))
        assert where in str(err.value)


def test_mixed_model_conserves_atoms(tmp_path):
    # nodes over the Ni film only, between the run file's Pt cap and Si substrate: the derived
    # totals equal the integrals of the stored profile (scipy.integrate.quad, reference
    # library), and the range holds exactly the film's areal density
    path = _run(tmp_path, 'layers = ["film"]\nspecies = ["Pt", "Si", "Ni"]\ncount = 7')
    mu, _ = _truth(path)
    _, obj = inversion.prepare(path, np.round(mu))
    assert obj.spec.nodes["top_1e15"] == 100.0 and obj.spec.nodes["bottom_1e15"] == 300.0
    names = obj.derived_names()[0]
    rng = np.random.default_rng(17)
    breaks = list(obj.spec.nodes["node_depth_1e15"])
    for _ in range(3):
        theta = np.concatenate([rng.normal(0.0, 2.0, obj.ndim - 1), [1.0]])
        derived = dict(zip(names, obj.derived(theta)))
        for j, sp in enumerate(obj.spec.species):
            ref, _ = integrate.quad(lambda z: obj.profile(theta, [z])[0, j], 0.0, 300.0,
                                    points=breaks, limit=200, epsabs=1e-10)
            assert derived[f"total.{sp}"] == pytest.approx(ref, rel=1e-7, abs=1e-7)
        assert sum(derived[f"total.{sp}"] for sp in obj.spec.species) == pytest.approx(300.0)
        # outside the range the run file's layers, sharp
        at = obj.profile(theta, [50.0, 350.0])
        assert at[0] == pytest.approx([1.0, 0.0, 0.0]) and at[1] == pytest.approx([0, 0, 1.0])


#: an invented smooth three-species interdiffusion profile: log-ratios ln(Pt/Si), ln(Ni/Si) at
#: seven nodes from the surface to 450e15 atoms/cm2 (Pt-rich at the surface, Ni in the middle,
#: Si below; every species present everywhere, as after a long anneal)
SMOOTH_PT = [3.0, 2.0, 0.5, -1.0, -2.0, -2.5, -2.5]
SMOOTH_NI = [1.0, 1.5, 2.0, 1.0, -0.5, -1.5, -2.0]


@pytest.mark.slow
def test_recovers_a_smooth_three_species_profile(tmp_path):
    # the truth is a smooth profile the node model can hold (seven nodes, fractions linear
    # between them); the data are Poisson counts of its spectrum.  The truth must lie inside
    # the pointwise 95 % bands at most depths: about 95 % is nominal, and neighbouring depths
    # are correlated, so one spectrum's fraction scatters around it
    nodes = 'species = ["Pt", "Ni", "Si"]\ncount = 7\nstep_sd = 1.0'
    path = _run(tmp_path, nodes, fit="max_steps = 1200")
    mu, _ = _truth(path)
    _, obj = inversion.prepare(path, np.round(mu))
    truth = np.concatenate([np.r_[SMOOTH_PT[0], np.diff(SMOOTH_PT)],
                            np.r_[SMOOTH_NI[0], np.diff(SMOOTH_NI)], [1.0]])
    counts = np.random.default_rng(2).poisson(obj.predict(truth, "all"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", inversion.NotConvergedWarning)
        result = inversion.invert(path, counts, tmp_path / "out.h5", seed=3, workers=2,
                                  progress=False)
    depth = np.asarray(result.profile["depth"], dtype=float)
    expected = obj.profile(truth, depth)
    inside = []
    for j, sp in enumerate(obj.spec.species):
        band = np.asarray(result.profile[sp])
        inside.append((band[0] <= expected[:, j] + 1e-9) & (expected[:, j] - 1e-9 <= band[4]))
        # and the bands say something: a median 95 % width well below the fractions' range
        # (measured 0.02 for Pt, 0.09 for Ni and Si with seed 3)
        assert np.median(band[4] - band[0]) < 0.15, sp
    fraction = float(np.mean(inside))
    # measured: 100 % of the points (seed 3, 1200 steps)
    print(f"truth inside the 95 % bands at {100 * fraction:.1f} % of depth points x species")
    assert fraction >= 0.8


def test_mixed_model_result_and_report(tmp_path):
    # a short run of the mixed model: the result stores the nodes over the zone's range, bands
    # at four points per node interval there, and the report draws them
    path = _run(tmp_path, 'layers = ["film"]\nspecies = ["Pt", "Si", "Ni"]\ncount = 5',
                fit="max_steps = 30\ncheck_every = 10")
    mu, _ = _truth(path)
    counts = np.random.default_rng(4).poisson(mu)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", inversion.NotConvergedWarning)
        result = inversion.invert(path, counts, tmp_path / "mixed.h5", seed=1, progress=False)
    assert np.allclose(result.profile["node_depth"], np.linspace(100.0, 300.0, 5))
    depth = np.asarray(result.profile["depth"])
    assert np.all(np.isin(np.linspace(100.0, 300.0, 17), depth))
    above = depth < 100.0
    assert np.allclose(np.asarray(result.profile["Pt"])[:, above], 1.0)
    inversion.build_report(tmp_path / "mixed.h5", tmp_path / "report")
    assert (tmp_path / "report" / "profile.png").exists()
