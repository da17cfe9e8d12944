"""Shared test fixtures and helpers.

Fixtures, not imports between test files: ``toy`` (a stand-in forward model and its objective),
``build_result`` (small synthetic result files in the real layout), ``make_run`` (run files of
the forward-model tests), ``small_result`` (a real, finished 20-step inversion).
"""

from __future__ import annotations

import csv
import dataclasses
import math
import warnings
from pathlib import Path
from types import SimpleNamespace

import emcee
import h5py
import numpy as np
import pytest
from scipy.special import erfc, ndtr

import forward
import inversion
from inversion.results._schema import MCMC, QUANTILES
from inversion.results._store import set_attrs, write_groups, write_input
from inversion.results._summary import summarise

from forward_runs import make_run as _make_run  # tests/ is on sys.path

ROOT = Path(__file__).resolve().parents[1]
#: NIST ASTAR/PSTAR tabulations (NIST Standard Reference Database 124, implementing ICRU Report
#: 49), laid beside the project for tests only; see ../shared/refdata/README.md.
REFDATA = ROOT.parent / "shared" / "refdata"


def read_refdata(name: str) -> list[dict]:
    """Rows of a reference tabulation, or skip the test when the folder is absent."""
    path = REFDATA / name
    if not path.exists():
        pytest.skip(f"reference data {path} not present (it lies beside the project only on "
                    "developer and CI machines)")
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="session")
def small_result(tmp_path_factory):
    """A real, finished 20-step inversion of the invented corpus case (tantalum nitride on
    silicon, tests/bad_inputs/_valid_fit_run.toml), written in this process."""
    from inversion import cli

    corpus = ROOT / "tests" / "bad_inputs"
    out = tmp_path_factory.mktemp("small") / "small.h5"
    code = cli.main(["-q", "invert", str(corpus / "_valid_fit_run.toml"),
                     str(corpus / "_valid_spectrum.csv"), "-o", str(out), "--workers", "1"])
    assert code == 0
    return out


# ----------------------------------------------------------------------------------------------
# a stand-in forward model for the objective, sampler and store tests
#
# ToyModel has the forward model's interface (species, grid, layer_fractions, default_nuisance,
# sample_columns, expected_counts, channel_energy_keV) where the physics does not matter.  It
# is a smooth toy: every slice adds a Gaussian peak per species at an energy that falls
# linearly with depth.  It checks the plumbing, never the physics.  The classes live at module
# level so that worker processes can unpickle them.

@dataclasses.dataclass
class ToyNuisance:
    fluence_scale: float = 1.0
    gain_keV: float = 8.0
    offset_keV: float = 40.0
    quadratic_keV: float = 0.0
    fwhm_keV: float = 20.0
    stopping_scale: np.ndarray = dataclasses.field(default_factory=lambda: np.ones(2))
    straggling_scale: float = 1.0
    stopping_slope: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(2))
    straggling_correction: float = 1.0


class ToyModel:
    """Two species ("Ge" heavy, "Si" light) on 40e15-atoms/cm2 slices; 150 channels."""

    species = ("Ge", "Si")
    elements = ("Ge", "Si")
    species_element = np.array([0, 1])
    surface_keV = np.array([1150.0, 800.0])    # invented surface energies
    loss_keV_per_1e15 = 0.25                      # invented energy loss per depth
    yield_per_1e15 = np.array([3.0, 0.8])         # invented counts per 1e15 atoms/cm2

    def __init__(self, run, n_channels=150, slice_1e15=40.0, depth_1e15=2000.0):
        self.run = run
        self.n_channels = n_channels
        edges = np.arange(0.0, depth_1e15 + slice_1e15 / 2, slice_1e15)
        self.grid = SimpleNamespace(edges_1e15=edges, centres_1e15=0.5 * (edges[1:] + edges[:-1]),
                                    widths_1e15=np.diff(edges))
        self.calls = 0

    def default_nuisance(self):
        return ToyNuisance()

    def sample_columns(self):
        """The toy run's layers as columns over (Ge, Si), with the elements' masses."""
        layers = []
        for layer in self.run.layers:
            comp = np.array([layer.fractions.get(s, 0.0) for s in self.species])
            layers.append(forward.LayerColumns(
                layer.name, comp / comp.sum(),
                None if layer.substrate else layer.areal_density_1e15, layer.substrate,
                layer.density_g_cm3, layer.atoms_per_cm3))
        return forward.SampleColumns(self.species, self.elements, self.species_element,
                                     np.array([forward.element(s).mass_u
                                               for s in self.species]), tuple(layers))

    def channel_energy_keV(self, nuisance=None):
        nu = nuisance or self.default_nuisance()
        ch = np.arange(self.n_channels)
        return nu.offset_keV + nu.gain_keV * ch + nu.quadratic_keV * ch ** 2

    def layer_fractions(self):
        out = np.zeros((self.grid.centres_1e15.size, 2))
        top = 0.0
        for layer in self.run.layers:
            comp = np.array([layer.fractions.get(s, 0.0) for s in self.species])
            bottom = np.inf if layer.substrate else top + layer.areal_density_1e15
            inside = (self.grid.centres_1e15 >= top) & (self.grid.centres_1e15 < bottom)
            out[inside] = comp
            top = bottom
        return out

    def sample_edges(self, areal_density_1e15, nuisance=None):
        """The toy's slices do not follow the sample: always its fixed grid."""
        return self.grid.edges_1e15

    def expected_counts(self, fractions, nuisance=None, *, widths_1e15=None, per_species=False):
        self.calls += 1
        nu = nuisance or self.default_nuisance()
        scale = np.asarray(nu.stopping_scale)[self.species_element]
        widths = self.grid.widths_1e15 if widths_1e15 is None else np.asarray(widths_1e15)
        z = np.cumsum(widths) - 0.5 * widths
        energy = self.surface_keV[None, :] - self.loss_keV_per_1e15 * scale[None, :] * z[:, None]
        amount = fractions * widths[:, None] * self.yield_per_1e15[None, :]
        edges = nu.offset_keV + nu.gain_keV * (np.arange(self.n_channels + 1) - 0.5)
        sigma = nu.fwhm_keV / 2.3548200450309493
        cdf = ndtr((edges[None, None, :] - energy[:, :, None]) / sigma)
        per = nu.fluence_scale * np.einsum("ij,ijc->jc", amount, np.diff(cdf, axis=2))
        return per.copy() if per_species else per.sum(axis=0)  # (species, channels) as forward


def toy_run(fit=None, *, film_1e15=300.0, substrate=True):
    layers = [SimpleNamespace(name="film", fractions={"Ge": 0.6, "Si": 0.4},
                              areal_density_1e15=film_1e15, substrate=False, density_g_cm3=None,
                              atoms_per_cm3=4.5e22)]
    if substrate:
        layers.append(SimpleNamespace(name="base", fractions={"Si": 1.0}, areal_density_1e15=None,
                                      substrate=True, density_g_cm3=None, atoms_per_cm3=5.0e22))
    return SimpleNamespace(layers=layers, fit=fit or {}, text=f"invented toy run {fit!r}",
                           source="toy.toml")


class ToyBuilder:
    """Picklable ``build_model()`` for the toy (what workers call)."""

    def __init__(self, run):
        self.run = run

    def __call__(self):
        return ToyModel(self.run)


def toy_objective(fit, counts=None, *, likelihood=True, seed=3, **run_kw):
    run = toy_run(fit, **run_kw)
    model = ToyModel(run)
    spec = inversion.parse_fit(run.fit, run, model)
    if counts is None:
        rng = np.random.default_rng(seed)
        counts = rng.poisson(model.expected_counts(model.layer_fractions()))
    return inversion.Objective(spec, counts, ToyBuilder(run), model, likelihood=likelihood)


@pytest.fixture(scope="session")
def toy():
    """The stand-in model: ``toy.Model``, ``toy.Builder``, ``toy.run(fit)``,
    ``toy.objective(fit, counts=None, likelihood=True, seed=3, **run_kw)``."""
    return SimpleNamespace(Model=ToyModel, Builder=ToyBuilder, Nuisance=ToyNuisance,
                           run=toy_run, objective=toy_objective)


# ----------------------------------------------------------------------------------------------
# small synthetic result files for the report tests
#
# The scenario is invented for testing only: a zinc oxide film with a few percent yttrium on a
# silicon substrate.  The chain is a real emcee run on a known Gaussian posterior (so the
# autocorrelation times and the converged flag are honest), stored in emcee's own HDF5 backend
# layout under /mcmc; profiles and spectra are smooth shapes computed from the draws, not a
# physics model.  The file is written with the result store's own writers and group trees
# shaped like those of the result writer, so its layout is the real one.

#: (name, unit, mean, sd, prior text) of the invented Gaussian posterior.
PARAMETERS = (
    ("film.areal_density", "1e15 atoms/cm2", 620.0, 14.0, "uniform(62, 1860)"),
    ("film.mixing", "1e15 atoms/cm2", 45.0, 9.0, "halfnormal(155)"),
    ("fluence_scale", "", 1.0, 0.02, "normal(1, 0.05)"),
    ("gain_keV", "keV/channel", 7.2, 0.01, "normal(7.2, 0.036)"),
    ("offset_keV", "keV", 95.0, 1.5, "normal(95, 2)"),
)
SPECIES = ("Zn", "Y", "O", "Si")
#: Invented film composition (atom fractions of Zn, Y, O).
_FILM = {"Zn": 0.48, "Y": 0.02, "O": 0.50}
#: Invented atomic densities (atoms/cm3) of the film and the substrate, for depths in nm.
_FILM_ATOMS_CM3 = 8.0e22
_SUBSTRATE_ATOMS_CM3 = 5.0e22

RUN_TEXT = """# invented test scenario: yttrium-doped zinc oxide on silicon (not a real sample)
title = "invented Y:ZnO film on Si, test only"

[beam]
ion = "4He"
energy_keV = 2000.0

[calibration]
keV_per_channel = 7.2
offset_keV = 95.0
"""


def _log_prob(x, mean, sd):
    return -0.5 * np.sum(((x - mean) / sd) ** 2)


def _nm_per_1e15(atoms_cm3: float) -> float:
    """Thickness in nm of 1e15 atoms/cm2 at the given atomic density (atoms/cm3)."""
    return 1e15 / atoms_cm3 * 1e7


def _fractions(depth, areal, width):
    """Atom fractions (draws, slices, species) of a film over Si with an erf interface."""
    f = 0.5 * erfc((depth[None, :] - areal[:, None]) / (np.sqrt(2.0) * width[:, None]))
    return np.stack([_FILM["Zn"] * f, _FILM["Y"] * f, _FILM["O"] * f, 1 - f], axis=-1)


def _species_spectra(channel, areal, scale):
    """Toy per-species counts (draws, channels, species): smooth plateaus and an edge."""
    def plateau(edge, height, width_channels):
        rise = 0.5 * erfc((channel[None, :] - edge) / 2.5)
        fall = 0.5 * erfc((edge - width_channels[:, None] - channel[None, :]) / 3.0)
        return height * rise * fall

    w = areal / 12.0
    zn = plateau(200.0, 160.0, w)
    yy = plateau(214.0, 13.0, w)
    o = plateau(75.0, 18.0, w)
    edge = 128.0 - w[:, None]
    si = 55.0 * 0.5 * erfc((channel[None, :] - edge) / 3.0) * np.clip(
        1 + 0.004 * (edge - channel[None, :]), 0, None)
    return np.stack([zn, yy, o, si], axis=-1) * scale[:, None, None]


def build_result_file(path, *, steps=4000, walkers=16, seed=7, with_density=True,
                 with_diagnostics=True, band_draws=300) -> Path:
    """Write a small result file with the store's layout and return its path.

    Parameters
    ----------
    path : str or pathlib.Path
        File to create (replaced if present).
    steps : int
        emcee steps; 4000 pass the 50-autocorrelation-times rule here, 60 do not.
    walkers : int
        emcee walkers.
    seed : int
        Seed of every random draw.
    with_density : bool
        When False, the film has no density: ``film.thickness_nm`` is NaN with a note and
        ``/profile/depth_nm`` is absent (as the store writes it).
    with_diagnostics : bool
        Write ``/diagnostics``.
    band_draws : int
        Posterior draws used for the profile and predictive quantiles.
    """
    path = Path(path)
    if path.exists():
        path.unlink()
    rng = np.random.default_rng(seed)
    names = [p[0] for p in PARAMETERS]
    units = [p[1] for p in PARAMETERS]
    mean = np.array([p[2] for p in PARAMETERS])
    sd = np.array([p[3] for p in PARAMETERS])
    ndim = len(names)
    priors = [f"{p[0]} [{p[1] or '1'}]: {p[4]}" for p in PARAMETERS]

    channel = np.arange(256)
    truth = _species_spectra(channel.astype(float), mean[[0]], mean[[2]]).sum(axis=-1)[0]
    counts = rng.poisson(truth).astype(float)
    write_input(path, run_text=RUN_TEXT, counts=counts, measured=np.ones(counts.size, bool),
                priors=priors,
                attrs=dict(program="sondage", version="0.1.0", seed=seed,
                           command="invert('invented_run.toml', seed=7) [test helper]",
                           started="2026-01-01T00:00:00+00:00", status="running",
                           emcee_version=emcee.__version__, profile_model="layers"))

    sampler = emcee.EnsembleSampler(walkers, ndim, _log_prob, args=(mean, sd))
    sampler.random_state = np.random.RandomState(seed).get_state()
    start = mean + 1e-3 * sd * rng.standard_normal((walkers, ndim))
    sampler.run_mcmc(start, steps, progress=False)
    chain = sampler.get_chain()
    log_prob = sampler.get_log_prob()
    # emcee's own HDF5 backend lays out /mcmc; the chain goes in with one write instead of
    # one write per step, which keeps the helper fast.
    backend = emcee.backends.HDFBackend(str(path), name=MCMC)
    backend.reset(walkers, ndim)
    with h5py.File(path, "a") as f:
        g = f[MCMC]
        g["chain"].resize(steps, axis=0)
        g["chain"][:] = chain
        g["log_prob"].resize(steps, axis=0)
        g["log_prob"][:] = log_prob
        g["accepted"][:] = sampler.backend.accepted
        g.attrs["iteration"] = steps
        g.attrs["parameter_names"] = names
        g.attrs["parameter_units"] = units

    tau = emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True)
    tau_max = float(np.max(tau))
    converged = bool(steps >= 50.0 * tau_max)
    discard = int(min(math.ceil(3 * tau_max), steps // 2))
    thin = max(1, int(tau_max / 2))
    samples = chain[discard::thin].reshape(-1, ndim)
    logp = log_prob[discard::thin].reshape(-1)
    areal, mixing, scale = samples[:, 0], samples[:, 1], samples[:, 2]

    nm_film = _nm_per_1e15(_FILM_ATOMS_CM3) if with_density else math.nan
    derived = {
        "film.areal_density": (areal, "1e15 atoms/cm2"),
        "film.thickness_nm": (areal * nm_film, "nm"),
        "film.mixing": (mixing, "1e15 atoms/cm2"),
        "film.mixing_nm": (mixing * nm_film, "nm"),
        "total.Zn": (_FILM["Zn"] * areal, "1e15 atoms/cm2"),
        "total.Y": (_FILM["Y"] * areal, "1e15 atoms/cm2"),
        "total.O": (_FILM["O"] * areal, "1e15 atoms/cm2"),
    }
    notes = {} if with_density else {"film.thickness_nm": "no mass density given: NaN"}
    derived_names = list(derived)
    derived_draws = np.column_stack([v[0] for v in derived.values()])
    with warnings.catch_warnings():  # all-NaN columns (no density) warn inside numpy
        warnings.simplefilter("ignore", RuntimeWarning)
        summ = summarise(np.column_stack([samples, derived_draws]))
    groups = {
        "posterior": {
            "samples": (samples, {"names": names, "units": units, "discard": discard,
                                  "thin": thin}),
            "log_posterior": (logp, {"unit": "natural log"}),
            "priors": np.array(priors, dtype=object),
            "summary": {"names": np.array(names + derived_names, dtype=object),
                        "units": np.array(units + [v[1] for v in derived.values()],
                                          dtype=object),
                        **summ,
                        "@attrs": {"intervals": "central: low68/high68 = 16/84 %, "
                                                "low95/high95 = 2.5/97.5 % quantiles"}},
        },
        "derived": {name: (derived[name][0], {"unit": derived[name][1],
                                              **({"note": notes[name]} if name in notes
                                                 else {})})
                    for name in derived_names},
    }

    idx = rng.choice(samples.shape[0], size=min(band_draws, samples.shape[0]), replace=False)
    edges = np.linspace(0.0, 1200.0, 61)
    depth = 0.5 * (edges[1:] + edges[:-1])
    profiles = _fractions(depth, areal[idx], mixing[idx])
    best = int(np.argmax(logp))
    fr_map = _fractions(depth, areal[[best]], mixing[[best]])[0]
    q = np.quantile(profiles, QUANTILES, axis=0)  # (5, slices, species)
    profile = {"depth": (depth, {"unit": "1e15 atoms/cm2", "description": "slice centres"}),
               "@attrs": {"quantiles": QUANTILES, "draws": idx.size}}
    if with_density:
        a50 = float(np.median(areal))
        profile["depth_nm"] = (np.where(depth <= a50, depth * nm_film,
                                        a50 * nm_film + (depth - a50)
                                        * _nm_per_1e15(_SUBSTRATE_ATOMS_CM3)),
                               {"unit": "nm"})
    for j, sp in enumerate(SPECIES):
        profile[sp] = (q[:, :, j], {"unit": "atom fraction", "quantiles": QUANTILES})
        profile[f"{sp}_map"] = (fr_map[:, j], {"unit": "atom fraction"})
    parts = _species_spectra(channel.astype(float), areal[idx], scale[idx])
    spectra = parts.sum(axis=-1)
    noisy = rng.poisson(spectra)
    window = (channel >= 5) & (channel <= 230)
    groups["profile"] = profile
    groups["spectrum"] = {
        "channel": channel, "counts": (counts, {"unit": "counts"}), "window": window,
        "predictive": (np.quantile(noisy, QUANTILES, axis=0), {"unit": "counts"}),
        "model_median": (np.median(spectra, axis=0), {"unit": "counts"}),
        "species": {sp: (np.median(parts[:, :, j], axis=0), {"unit": "counts"})
                    for j, sp in enumerate(SPECIES)},
        # the run file's calibration (offset, gain, quadratic), as the writer keeps it
        "@attrs": {"run_calibration_keV": np.array([95.0, 7.2, 0.0])},
    }
    messages = [] if converged else [
        f"NOT CONVERGED: {steps} steps, but 50 x the longest autocorrelation time "
        f"({tau_max:.1f} steps) is {50 * tau_max:.0f}"]
    if with_diagnostics:
        acceptance = np.asarray(sampler.backend.accepted, dtype=float) / steps
        groups["diagnostics"] = {
            "autocorr_time": (tau, {"unit": "steps", "names": names}),
            "acceptance": (acceptance, {"description": "acceptance fraction per walker"}),
            "ess": (steps * walkers / tau, {"names": names}),
            "@attrs": {"steps": steps, "converged": converged, "interrupted": False,
                       "tau_multiple": 50.0, "walkers": walkers, "discard": discard,
                       "thin": thin, "warnings": messages if messages else ["none"],
                       "mean_acceptance": float(acceptance.mean())},
        }
    write_groups(path, groups)
    set_attrs(path, finished="2026-01-01T00:00:05+00:00",
              status="converged" if converged else "not converged")
    return path


@pytest.fixture(scope="session")
def build_result():
    """``build_result(path, *, steps=4000, walkers=16, seed=7, with_density=True,
    with_diagnostics=True, band_draws=300)`` writes a synthetic result file (see
    :func:`build_result_file`); ``build_result.PARAMETERS``, ``.SPECIES``, ``.RUN_TEXT``."""
    build_result_file.PARAMETERS = PARAMETERS
    build_result_file.SPECIES = SPECIES
    build_result_file.RUN_TEXT = RUN_TEXT
    return build_result_file


# ----------------------------------------------------------------------------------------------
# run files of the forward-model tests
# (the run text and the builder live in tests/forward_runs.py, shared with the test modules)


@pytest.fixture(scope="session")
def make_run():
    """``make_run(layers_text, *, energy=1800, theta=165, th1=0, th2=15, fwhm=16, omega=2.5,
    gain=2, offset=50, quad=0, charge=5, physics="")``: a parsed invented run."""
    return _make_run
