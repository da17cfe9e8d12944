"""The run's sample as the forward model sees it: layers as vectors over the species columns of
the fraction table, and the mass of each species.

The forward model decides the species (an element with natural isotopes, or an element whose
isotopes a layer overrides, labelled ``"O[18]"``, ``"O[18]#2"`` for a second enrichment); this
module reads that decision from the model, never from the labels, so two layers of one element
enriched differently stay two columns with their own masses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._conversions import atoms_per_cm3
from ._elements import element

__all__ = ["LayerColumns", "SampleColumns", "sample_columns"]


@dataclass(frozen=True)
class LayerColumns:
    """One layer of the run's sample.

    Attributes
    ----------
    name : str
    composition : numpy.ndarray
        Atom fractions over the model's species columns (sums to 1).
    areal_density_1e15 : float or None
        None for a substrate.
    substrate : bool
    density_g_cm3 : float or None
        Mass density from the run file, if given.
    atoms_per_cm3 : float or None
        Atomic density of the run file's composition, None without a mass density.
    """

    name: str
    composition: np.ndarray
    areal_density_1e15: float | None
    substrate: bool
    density_g_cm3: float | None
    atoms_per_cm3: float | None


@dataclass(frozen=True)
class SampleColumns:
    """Species columns, their elements and masses, and the layers as columns.

    Attributes
    ----------
    species : tuple of str
        Column labels of the fraction table.
    elements : tuple of str
        Element symbols (order of the stopping scales).
    species_element : numpy.ndarray of int
        Element index of each species.
    mass_u : numpy.ndarray
        Mean atomic mass of each species (u): the standard atomic weight for natural isotopes,
        the fraction-weighted isotope masses where a layer overrides them.
    layers : tuple of LayerColumns
        Surface first.
    """

    species: tuple
    elements: tuple
    species_element: np.ndarray
    mass_u: np.ndarray
    layers: tuple

    @property
    def compositions(self) -> np.ndarray:
        """``(n_layers, n_species)`` atom fractions of the run's layers."""
        return np.array([layer.composition for layer in self.layers])

    def atoms_per_cm3(self, index: int, composition=None) -> float | None:
        """Atomic density (atoms/cm3) of layer ``index``.

        Parameters
        ----------
        index : int
            The layer (0 = top).
        composition : array_like, optional
            Atom fractions over the species to use instead of the run file's (a sampled
            composition); the layer's mass density is kept.

        Returns
        -------
        float or None
            None when the run file gives no mass density for the layer.
        """
        layer = self.layers[index]
        if composition is None:
            return layer.atoms_per_cm3
        if layer.density_g_cm3 is None:
            return None
        return atoms_per_cm3(layer.density_g_cm3, float(np.asarray(composition) @ self.mass_u))


def sample_columns(model) -> SampleColumns:
    """Build the :class:`SampleColumns` of a :class:`forward.ForwardModel` (its species
    decision, its run's layers)."""
    species = tuple(model.species)
    mass = np.full(len(species), np.nan)
    layers = []
    for i, (layer, per) in enumerate(zip(model.run.layers, model._layer_species)):
        comp = np.zeros(len(species))
        for symbol, fraction in layer.fractions.items():
            info = per[symbol]
            column = species.index(info.label)
            comp[column] += float(fraction)
            if symbol in layer.isotopes:
                mass[column] = sum(m * f for _, m, f in info.isotopes)
            else:
                mass[column] = element(symbol).mass_u
        if comp.sum() > 0:
            comp /= comp.sum()
        t = layer.areal_density_1e15
        layers.append(LayerColumns(
            name=str(layer.name or f"layer{i + 1}"), composition=comp,
            areal_density_1e15=None if layer.substrate or t is None else float(t),
            substrate=bool(layer.substrate),
            density_g_cm3=None if layer.density_g_cm3 is None else float(layer.density_g_cm3),
            atoms_per_cm3=layer.atoms_per_cm3))
    return SampleColumns(species, tuple(model.elements),
                         np.asarray(model.species_element, dtype=np.int64), mass, tuple(layers))
