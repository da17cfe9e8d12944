"""Is an interface width measured, or only bounded?  The depth resolution at each interface.

A spectrum sees an interface of mixing width ``w`` (the Gaussian sd of its error-function step,
1e15 atoms/cm2) through an edge whose variance, in depth, is ``w^2 + s^2``: ``s`` is the depth
resolution there, the detector resolution and the energy straggling accumulated in and out,
divided by the rate at which the detected energy falls with depth.  When ``w`` is small against
``s`` the width is read from a small excess of the edge's variance over what the straggling and
detector models predict, so it is only as good as those models (the mismatch study in
benchmarks/RESULTS.md: a silver/titanium stack whose top width came out at twice the truth,
with a predictive check that saw nothing wrong).

:func:`interface_resolution` computes ``s`` per interface at one parameter vector;
:func:`resolution_flags` names every free width whose posterior median adds less than
:data:`UNRESOLVED_VARIANCE_FRACTION` of the edge's variance.  Its messages join the posterior's
flags (``inversion._api.finalise``): stored in ``/diagnostics``, printed by ``sondage invert``,
listed by ``sondage report``.
"""

from __future__ import annotations

import numpy as np

from forward import InputError

from ._roles import Role

__all__ = ["interface_resolution", "resolution_flags", "UNRESOLVED_VARIANCE_FRACTION"]

#: A width is not resolved when ``w^2 < f (w^2 + s^2)`` for this ``f``: the width then widens the
#: edge by less than about 15 % (``sqrt(1 / (1 - f)) = 1.15``), a change of the size the
#: straggling laws' differences make.  Our own rule of thumb, not a published criterion.
UNRESOLVED_VARIANCE_FRACTION = 0.25

_FWHM_TO_SIGMA = 1.0 / np.sqrt(8.0 * np.log(2.0))


def interface_resolution(objective, theta) -> np.ndarray:
    """Depth resolution (Gaussian sd, 1e15 atoms/cm2) at each interface of a layer fit.

    Evaluated for the sample and nuisance of ``theta`` with every interface sharp: for each
    isotope of a species whose fraction changes across interface ``k``, the sd of the detected
    energy of ions scattered there (straggling in and out, and the detector,
    ``forward.ForwardModel.edge_table``) divided by the fall of that detected energy with depth
    through the neighbouring slice that holds the species; the smallest over those isotopes
    (the best view any signal gives).

    Parameters
    ----------
    objective : inversion.Objective
        A layer-stack objective (``profile = "layers"``).
    theta : array_like
        One parameter vector.

    Returns
    -------
    (n_interfaces,) float64
        NaN where no signal reaches the interface.
    """
    model = objective.model
    n_if = int(objective.n_interfaces)
    out = np.full(n_if, np.nan)
    draw = objective.unpack(theta)
    if draw is None or n_if == 0:
        return out
    nu = draw.nuisance
    grid = model.sample_grid(draw.thickness, nu)
    layer = np.asarray(grid.layer)
    comps = np.asarray(draw.compositions, dtype=float)
    fractions = np.where(layer[:, None] >= 0, comps[np.clip(layer, 0, None)], 0.0)
    rec = model.edge_table(fractions, nu, widths_1e15=grid.widths_1e15)
    energy, variance = rec[:, :, 0], rec[:, :, 1]
    edges = np.asarray(grid.edges_1e15, dtype=float)
    depth = np.cumsum(np.asarray(draw.thickness, dtype=float))
    iso_species = np.asarray(model.isotope_species)
    sig_det2 = (float(nu.fwhm_keV) * _FWHM_TO_SIGMA) ** 2
    for k in range(min(n_if, depth.size)):
        j = int(np.argmin(np.abs(edges - depth[k])))
        above = comps[k]
        below = comps[k + 1] if k + 1 < comps.shape[0] else np.zeros_like(above)
        changing = np.flatnonzero(np.abs(above - below) > 1e-9)
        best = np.inf
        for i in np.flatnonzero(np.isin(iso_species, changing)):
            # the fall through the slice on the side that holds the species (its own stopping)
            lo, hi = (j - 1, j) if above[iso_species[i]] > 0 else (j, j + 1)
            if lo < 0 or hi >= edges.size:
                continue
            fall = (energy[lo, i] - energy[hi, i]) / (edges[hi] - edges[lo])
            spread2 = variance[j, i] + sig_det2
            if np.isfinite(fall) and fall > 0 and np.isfinite(spread2):
                best = min(best, float(np.sqrt(spread2) / fall))
        if np.isfinite(best):
            out[k] = best
    return out


def _layer_widths(spec):
    """``[(parameter index, interface index, name)]`` of the free mixing widths."""
    return [(j, int(p.target), p.name) for j, p in enumerate(spec.parameters)
            if p.role is Role.MIXING]


def resolution_flags(objective, samples) -> list:
    """Messages naming each free interface width the spectrum does not resolve.

    Parameters
    ----------
    objective : inversion.Objective or inversion.JointObjective
        For a joint fit every measurement's resolution is computed and the best (smallest) is
        used: a width one geometry resolves is resolved.
    samples : (draws, parameters) array_like
        Posterior draws.

    Returns
    -------
    list of str
        Empty for free-form profiles, fits without free widths and resolved widths.
    """
    samples = np.asarray(samples, dtype=float)
    spec = objective.spec
    if getattr(spec, "profile", "layers") != "layers" or samples.ndim != 2 or not len(samples):
        return []
    widths = _layer_widths(spec)
    if not widths:
        return []
    theta = np.median(samples, axis=0)
    parts = getattr(objective, "parts", None)
    singles = parts if parts else [objective]
    if not all(hasattr(p.model, "edge_table") and hasattr(p.model, "sample_grid")
               for p in singles):
        return []  # a stand-in model without the physics (tests' toy models)
    try:
        if parts:
            names = list(objective.measurement_names)
            per = [interface_resolution(part, objective.part_theta(theta[None, :], k)[0])
                   for k, part in enumerate(parts)]
        else:
            names, per = [None], [interface_resolution(objective, theta)]
    except (InputError, ValueError, ArithmeticError) as exc:
        # a diagnostic never costs the finished run: say that it could not be made
        return [f"the depth resolution at the interfaces could not be computed "
                f"({' '.join(str(exc).split())}); widths were not checked against it"]
    out = []
    for j, k, name in widths:
        values = [(r[k], m) for r, m in zip(per, names) if k < r.size and np.isfinite(r[k])]
        if not values:
            continue
        s, where = min(values, key=lambda v: v[0])
        w = float(np.median(samples[:, j]))
        high = float(np.quantile(samples[:, j], 0.975))
        share = w * w / (w * w + s * s)
        if share < UNRESOLVED_VARIANCE_FRACTION:
            seen = f" (best seen in measurement {where!r})" if where is not None else ""
            out.append(
                f"{name}: median {w:.3g} 1e15 atoms/cm2 lies below the depth resolution there, "
                f"sd {s:.3g}{seen}; the width adds {100 * share:.0f} % of the edge's variance, "
                "so its interval rests on the straggling and stopping models: read it as an "
                f"upper bound (95 %: below {high:.3g}), not a measurement")
    return out
