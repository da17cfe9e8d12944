"""Derived quantities, computed for every posterior draw so that their intervals are honest:
each layer's areal density and thickness in nm, each interface's mixing width (also in nm),
the fractions of a free composition, and the total areal density of each element; and the
depth of the profile's slices in nm.

Thickness in nm uses the atomic density ``n = rho N_A / M`` of the layer's mass density and its
(possibly sampled) composition, with the species masses the forward model reports
(:class:`forward.SampleColumns`); a mixing width in nm uses the mean atomic density of the two
neighbouring layers.  Conversions: :func:`forward.nm_from_1e15`.
"""

from __future__ import annotations

import math

import numpy as np

from forward import nm_from_1e15

from ._roles import Role

__all__ = ["derived_names", "derived_values", "depth_nm"]


def derived_names(objective):
    """Names, units and notes of the derived quantities of an objective's fit."""
    spec = objective.spec
    names, units, notes = [], [], {}
    if spec.profile == "layers":
        for L in spec.layers:
            if L.substrate:
                continue
            names += [f"{L.name}.areal_density", f"{L.name}.thickness_nm"]
            units += ["1e15 atoms/cm2", "nm"]
            if L.density_g_cm3 is None and L.atoms_per_cm3 is None:
                notes[f"{L.name}.thickness_nm"] = "no mass density given: NaN"
        for i in range(objective.n_interfaces):
            L = spec.layers[i]
            names += [f"{L.name}.mixing", f"{L.name}.mixing_nm"]
            units += ["1e15 atoms/cm2", "nm"]
        for i in spec.share_species:
            for col in spec.share_species[i]:
                names.append(f"{spec.layers[i].name}.fraction.{spec.species[col]}")
                units.append("")
    for e in _total_elements(objective):
        names.append(f"total.{spec.elements[e]}")
        units.append("1e15 atoms/cm2")
    return names, units, notes


def _total_elements(objective):
    """Element indices whose total areal density above the substrate can be non-zero (an
    element found only in the substrate would always report 0: left out).  Fixed by the
    fit, so worked out once per objective."""
    cached = objective.__dict__.get("_total_elements_cached")
    if cached is None:
        cached = objective._total_elements_cached = _find_total_elements(objective)
    return cached


def _find_total_elements(objective):
    spec = objective.spec
    if spec.profile != "layers":
        return list(range(len(spec.elements)))
    cols = set()
    for i, L in enumerate(spec.layers):
        if L.substrate:
            continue
        cols.update(int(c) for c in np.flatnonzero(np.asarray(L.composition) > 0))
        cols.update(int(c) for c in spec.share_species.get(i, ()))
    return sorted({int(objective.species_element[c]) for c in cols})


def _atoms_per_cm3(spec, compositions) -> np.ndarray:
    """Atomic density of each layer (NaN without a mass density): the run file's, or from the
    mass density and the sampled composition where the composition is free."""
    out = []
    for i, L in enumerate(spec.layers):
        if L.density_g_cm3 is not None and (i in spec.share_species or L.atoms_per_cm3 is None):
            out.append(spec.columns.atoms_per_cm3(i, compositions[i]))
        else:
            out.append(L.atoms_per_cm3 if L.atoms_per_cm3 is not None else math.nan)
    return np.array(out, dtype=float)


def derived_values(objective, theta) -> np.ndarray:
    """Derived quantities for one draw, in the order of :func:`derived_names`."""
    spec = objective.spec
    theta = np.asarray(theta, dtype=float)
    index = spec.index
    values = []
    comps = objective.compositions(theta)
    if spec.profile == "layers":
        thickness = objective.base_thickness.copy()
        mixing = np.zeros(objective.n_interfaces)
        for role, target in ((Role.AREAL_DENSITY, thickness), (Role.MIXING, mixing)):
            if role in index:
                pos, where = index[role]
                target[where] = theta[pos]
        n = _atoms_per_cm3(spec, comps)
        k = 0
        for i, L in enumerate(spec.layers):
            if L.substrate:
                continue
            values += [thickness[k], nm_from_1e15(thickness[k], n[i])]
            k += 1
        for i in range(objective.n_interfaces):
            near = n[i:i + 2]
            near = near[np.isfinite(near)]
            dens = float(np.mean(near)) if near.size else math.nan
            values += [mixing[i], nm_from_1e15(mixing[i], dens)]
        for i in spec.share_species:
            values += list(comps[i, spec.share_species[i]])
        per_species = thickness @ comps[: thickness.size]
    else:
        fractions = objective.node_fractions(theta)
        a, b = objective.edges_1e15[:-1], objective.edges_1e15[1:]
        inside = np.clip(spec.nodes["total_depth_1e15"] - a, 0.0, b - a)
        per_species = inside @ fractions
    for e in _total_elements(objective):
        values.append(float(per_species[objective.species_element == e].sum()))
    return np.array(values, dtype=float)


def depth_nm(objective, depth_1e15):
    """Depths in nm of depths in 1e15 atoms/cm2, through the run's layers at their run-file
    areal densities (sharp interfaces), or None if a layer has no atomic density.  Below a
    sample without substrate the last layer's scale continues."""
    spec = objective.spec
    layers = spec.layers
    nm_per = []
    for L in layers:
        if L.atoms_per_cm3 is None:
            return None
        nm_per.append(nm_from_1e15(1.0, L.atoms_per_cm3))
    depth = np.asarray(depth_1e15, dtype=float)
    tops = np.concatenate([[0.0], np.cumsum(objective.base_thickness)])
    out = np.zeros_like(depth)
    for k, per in enumerate(nm_per):
        top = tops[k] if k < tops.size else tops[-1]
        bottom = tops[k + 1] if k + 1 < tops.size and not (k == len(nm_per) - 1) else np.inf
        out += per * np.clip(np.minimum(depth, bottom) - top, 0.0, None)
    return out
