"""A builder of small synthetic result files for the report tests.

The scenario is invented for testing only: a zinc oxide film with a few percent yttrium on a
silicon substrate, four sampled parameters.  The chain is a real emcee run (with emcee's own
HDF5 backend writing ``/mcmc``) on a known Gaussian posterior, so the diagnostics are honest;
profiles and spectra are simple smooth shapes computed from the draws, not a physics model.
Only the layout of the file matters here: it follows the result-file layout that the report
reads (``/input``, ``/posterior``, ``/derived``, ``/profile``, ``/spectrum``, ``/mcmc``,
``/diagnostics``).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import emcee
import h5py
import numpy as np
from scipy.special import erfc

__all__ = ["build_result", "PARAMETERS", "SPECIES"]

#: (name, unit, mean, sd, prior text) of the invented posterior.
PARAMETERS = (
    ("layer1_areal_density_1e15", "1e15 atoms/cm2", 620.0, 14.0, "uniform(200, 1200)"),
    ("layer1_fraction_Y", "", 0.045, 0.006, "uniform(0, 0.2)"),
    ("interface1_width_1e15", "1e15 atoms/cm2", 45.0, 9.0, "uniform(0, 200)"),
    ("charge_solid_angle_scale", "", 1.0, 0.02, "normal(1, 0.05)"),
)
SPECIES = ("Zn", "Y", "O", "Si")

#: Invented atomic densities (atoms/cm3) of the film and the substrate, for depths in nm.
_FILM_ATOMS_CM3 = 8.0e22
_SUBSTRATE_ATOMS_CM3 = 5.0e22

_RUN_TEXT = """# invented test scenario: yttrium-doped zinc oxide on silicon
title = "invented Y:ZnO film on Si (test only)"
[beam]
ion = "4He"
energy_keV = 2000
"""


def _log_prob(x, mean, sd):
    return -0.5 * np.sum(((x - mean) / sd) ** 2)


def _nm_per_1e15(atoms_cm3: float) -> float:
    """Thickness in nm of 1e15 atoms/cm2 at a given atomic density."""
    return 1e15 / atoms_cm3 * 1e7


def _fractions(depth, areal, y, width):
    """Atom fractions (species x depth) of a draw: film (Zn1-yYy)O over Si, erf interface."""
    f = 0.5 * erfc((depth[None, :] - areal[:, None]) / (np.sqrt(2.0) * width[:, None]))
    return np.stack([0.5 * f * (1 - y[:, None]), 0.5 * f * y[:, None], 0.5 * f, 1 - f])


def _species_spectra(channel, areal, y, scale):
    """Toy per-species spectra (species x draws x channels): smooth plateaus and edges."""
    def plateau(edge, height, width_channels):
        lo = edge - width_channels[:, None]
        rise = 0.5 * erfc((channel[None, :] - edge) / 2.5)
        fall = 0.5 * erfc((lo - channel[None, :]) / 3.0)
        return height * rise * fall

    w = areal / 12.0
    zn = plateau(200.0, 160.0, w) * (1 - y[:, None]) / 0.955
    yy = plateau(214.0, 160.0 * 1.9, w) * y[:, None] / 0.955
    o = plateau(75.0, 18.0, w)
    si_edge = 128.0 - w[:, None]
    si = 55.0 * 0.5 * erfc((channel[None, :] - si_edge) / 3.0) * (1 + 0.004 * (si_edge -
                                                                            channel[None, :]))
    return np.stack([zn, yy, o, np.clip(si, 0, None)]) * scale[None, :, None]


def build_result(path, *, steps=3000, walkers=16, seed=7, with_depth_nm=True,
                 with_diagnostics=True, draws_for_bands=400) -> Path:
    """Write a small result file and return its path.

    Parameters
    ----------
    path : str or pathlib.Path
        File to create (overwritten).
    steps : int
        emcee steps; 3000 converge by the 50-autocorrelation-times rule, 60 do not.
    walkers : int
        emcee walkers.
    seed : int
        Seed of every random draw.
    with_depth_nm : bool
        Write ``/profile/depth_nm`` and the derived thicknesses in nm.
    with_diagnostics : bool
        Write ``/diagnostics``.
    draws_for_bands : int
        Posterior draws used for profile and predictive quantiles.
    """
    path = Path(path)
    if path.exists():
        path.unlink()
    rng = np.random.default_rng(seed)
    names = [p[0] for p in PARAMETERS]
    mean = np.array([p[2] for p in PARAMETERS])
    sd = np.array([p[3] for p in PARAMETERS])
    ndim = len(names)

    sampler = emcee.EnsembleSampler(walkers, ndim, _log_prob, args=(mean, sd))
    sampler.random_state = np.random.RandomState(seed).get_state()
    start = mean + 1e-3 * sd * rng.standard_normal((walkers, ndim))
    sampler.run_mcmc(start, steps, progress=False)
    chain = sampler.get_chain()
    log_prob = sampler.get_log_prob()
    accepted = sampler.backend.accepted
    # emcee's own HDF5 backend lays out /mcmc; the chain is then stored in one write rather
    # than one write per step, which keeps the helper fast.
    backend = emcee.backends.HDFBackend(str(path), name="mcmc")
    backend.reset(walkers, ndim)
    with h5py.File(path, "a") as f:
        g = f["mcmc"]
        g["chain"].resize(steps, axis=0)
        g["chain"][:] = chain
        g["log_prob"].resize(steps, axis=0)
        g["log_prob"][:] = log_prob
        g["accepted"][:] = accepted
        g.attrs["iteration"] = steps

    burn = steps // 4
    samples = chain[burn:].reshape(-1, ndim)
    tau = emcee.autocorr.integrated_time(chain, tol=0)
    converged = bool(steps > 50 * tau.max())
    acceptance = accepted / steps
    ess = samples.shape[0] / tau

    areal, y, width, scale = samples.T
    derived = {
        "layer1/areal_density_1e15": (areal, "1e15 atoms/cm2"),
        "interface1/width_1e15": (width, "1e15 atoms/cm2"),
        "element/Zn_areal_density_1e15": (0.5 * (1 - y) * areal, "1e15 atoms/cm2"),
        "element/Y_areal_density_1e15": (0.5 * y * areal, "1e15 atoms/cm2"),
        "element/O_areal_density_1e15": (0.5 * areal, "1e15 atoms/cm2"),
    }
    if with_depth_nm:
        derived["layer1/thickness_nm"] = (areal * _nm_per_1e15(_FILM_ATOMS_CM3), "nm")
        derived["interface1/width_nm"] = (width * _nm_per_1e15(_FILM_ATOMS_CM3), "nm")

    with h5py.File(path, "a") as f:
        f.attrs["program"] = "sondage"
        f.attrs["program_version"] = "0.1.0"
        f.attrs["seed"] = seed
        f.attrs["command"] = "sondage (test helper) invented_run.toml"
        f.attrs["started"] = "2026-01-01T00:00:00+00:00"
        f.attrs["finished"] = "2026-01-01T00:00:05+00:00"
        f.attrs["input_hashes"] = json.dumps(
            {"invented_run.toml": "sha256:" + hashlib.sha256(_RUN_TEXT.encode()).hexdigest()})

        inp = f.create_group("input")
        inp.create_dataset("run", data=_RUN_TEXT)

        post = f.create_group("posterior")
        ds = post.create_dataset("samples", data=samples)
        ds.attrs["names"] = names
        ds.attrs["units"] = [p[1] for p in PARAMETERS]
        ds.attrs["priors"] = [p[4] for p in PARAMETERS]
        summary_names = names + [k.replace("/", ".") for k in derived]
        columns = [samples[:, i] for i in range(ndim)] + [v[0] for v in derived.values()]
        summ = post.create_group("summary")
        summ.create_dataset("names", data=summary_names)
        summ.create_dataset("median", data=[np.quantile(c, 0.5) for c in columns])
        summ.create_dataset("mean", data=[np.mean(c) for c in columns])
        summ.create_dataset("sd", data=[np.std(c, ddof=1) for c in columns])
        summ.create_dataset("ci68", data=[np.quantile(c, [0.16, 0.84]) for c in columns])
        summ.create_dataset("ci95", data=[np.quantile(c, [0.025, 0.975]) for c in columns])

        der = f.create_group("derived")
        for key, (values, unit) in derived.items():
            d = der.create_dataset(key, data=values)
            d.attrs["units"] = unit
        if not with_depth_nm:
            der.attrs["thickness_nm"] = "no layer density given; thicknesses in nm not derived"

        pick = rng.choice(samples.shape[0], size=min(draws_for_bands, samples.shape[0]),
                          replace=False)
        best = int(np.argmax(log_prob[burn:].reshape(-1)))
        depth = np.linspace(0.0, 1200.0, 61)[:-1] + 10.0
        fr = _fractions(depth, areal[pick], y[pick], width[pick])
        fr_map = _fractions(depth, areal[[best]], y[[best]], width[[best]])[:, 0]
        prof = f.create_group("profile")
        prof.create_dataset("depth", data=depth)
        if with_depth_nm:
            a50 = np.median(areal)
            nm = np.where(depth <= a50, depth * _nm_per_1e15(_FILM_ATOMS_CM3),
                          a50 * _nm_per_1e15(_FILM_ATOMS_CM3)
                          + (depth - a50) * _nm_per_1e15(_SUBSTRATE_ATOMS_CM3))
            prof.create_dataset("depth_nm", data=nm)
        for i, s in enumerate(SPECIES):
            prof.create_dataset(s, data=np.percentile(fr[i], [2.5, 16, 50, 84, 97.5], axis=0))
            prof.create_dataset(f"{s}_map", data=fr_map[i])

        channel = np.arange(256, dtype=float)
        parts = _species_spectra(channel, areal[pick], y[pick], scale[pick])
        total = parts.sum(axis=0)
        truth = _species_spectra(channel, mean[[0]], mean[[1]], mean[[3]]).sum(axis=0)[0]
        counts = rng.poisson(truth)
        noisy = rng.poisson(total)
        spec = f.create_group("spectrum")
        spec.create_dataset("channel", data=channel)
        spec.create_dataset("counts", data=counts)
        spec.create_dataset("predictive",
                            data=np.percentile(noisy, [2.5, 16, 50, 84, 97.5], axis=0))
        species = spec.create_group("species")
        for i, s in enumerate(SPECIES):
            species.create_dataset(s, data=np.median(parts[i], axis=0))
        spec.attrs["offset_keV"] = 95.0
        spec.attrs["keV_per_channel"] = 7.2
        inp.create_dataset("spectrum", data=counts)

        if with_diagnostics:
            diag = f.create_group("diagnostics")
            diag.create_dataset("autocorr_time", data=tau)
            diag.create_dataset("acceptance_fraction", data=acceptance)
            diag.create_dataset("ess", data=ess)
            diag.attrs["steps"] = steps
            diag.attrs["walkers"] = walkers
            diag.attrs["burn"] = burn
            diag.attrs["converged"] = converged
            warnings = [] if converged else [
                f"chain of {steps} steps is shorter than 50 autocorrelation times "
                f"({50 * tau.max():.0f} steps); run longer"]
            diag.attrs["warnings"] = json.dumps(warnings)
    return path
