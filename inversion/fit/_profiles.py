"""Profile models: a few parameters in, a slice table (areal density and atom fractions per
slice) out.

* :class:`LayerStack`, layers with mixing at each interface, atoms conserved
  (:mod:`inversion.fit._stack`): its slices follow the sample, and their areal densities are
  the atoms they hold;
* :class:`NodeProfile`, a free-form profile through K nodes in additive log-ratio space, on the
  forward model's nominal grid.

Every row is a slice AVERAGE of the profile, so expected counts are continuous in every
parameter.  Rows are non-negative and sum to one, except where a sample without a substrate
ends: there a row holds nothing (or, for the node model, the part of the slice above its last
node).  Equations: README.md, "The [fit] table".
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

from ._stack import point_composition, stack_table

__all__ = ["step_average", "LayerStack", "NodeProfile", "alr_to_fractions", "stick_breaking"]

_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


def _g_negative(x):
    """G(-|x|), where G(x) = x Phi(x) + phi(x) is the antiderivative of the normal CDF Phi."""
    u = -np.abs(x)
    return u * ndtr(u) + _INV_SQRT_2PI * np.exp(-0.5 * u * u)


def step_average(edges_1e15, position_1e15, width_1e15):
    """Slice averages of the smoothed step ``Phi((z - position) / width)``.

    Parameters
    ----------
    edges_1e15 : ndarray, shape (n + 1,)
        Slice edges, increasing depth (1e15 atoms/cm2).
    position_1e15 : float
        Depth of the step (1e15 atoms/cm2).
    width_1e15 : float
        Standard deviation of the Gaussian the sharp step is convolved with (1e15 atoms/cm2);
        0 gives the sharp step.

    Returns
    -------
    ndarray, shape (n,)
        ``(1 / (b - a)) * integral_a^b Phi((z - position) / width) dz`` for each slice [a, b],
        from 0 (far above the step) to 1 (far below it).

    Notes
    -----
    With G(x) = x Phi(x) + phi(x), G' = Phi, the average is
    ``width * (G(xb) - G(xa)) / (b - a)``.  Since G(x) = max(x, 0) + G(-|x|), the difference
    is split into a piecewise-linear part and a small smooth part, which keeps full precision
    for narrow steps deep in the sample.
    """
    a = edges_1e15[:-1]
    b = edges_1e15[1:]
    span = b - a
    ramp = (np.clip(b - position_1e15, 0.0, None) - np.clip(a - position_1e15, 0.0, None)) / span
    if width_1e15 <= 1e-9 * float(np.min(span)):
        return ramp
    xa = (a - position_1e15) / width_1e15
    xb = (b - position_1e15) / width_1e15
    return ramp + width_1e15 * (_g_negative(xb) - _g_negative(xa)) / span


class LayerStack:
    """Layers of fixed or free composition, each box blurred by its own interfaces, atoms
    conserved (the construction and its equations: :mod:`inversion.fit._stack`).

    Parameters
    ----------
    n_layers : int
        Number of layers, surface first, the substrate (if any) last.
    substrate : bool
        True if the last layer is a semi-infinite substrate; False if vacuum lies below.

    Notes
    -----
    Interface ``k`` is the bottom of finite layer ``k`` (areal density ``t_k``) with mixing
    width ``w_k``.  Every layer's atoms are counted once for any widths: the slices of layer
    ``k`` hold exactly ``t_k`` atoms, compositions are non-negative and sum to one, and an
    isolated interface between thick layers is the error-function step
    ``f_above + (f_below - f_above) Phi((z - z_k) / w_k)``.  Nothing is clipped.
    """

    def __init__(self, n_layers: int, substrate: bool):
        self.n_layers = int(n_layers)
        self.substrate = bool(substrate)
        #: finite layers; each has an interface at its bottom (to the next layer, the
        #: substrate, or vacuum)
        self.n_thick = self.n_layers - 1 if self.substrate else self.n_layers
        self.n_interfaces = self.n_thick

    def table(self, edges, areal_density_1e15, mixing_1e15, compositions):
        """The slice table on slice edges of auxiliary depth.

        Returns
        -------
        widths_1e15 : ndarray, shape (n_slices,)
            Areal density of each slice (the atoms it holds).
        fractions : ndarray, shape (n_slices, n_species)
        """
        widths, fractions, _ = stack_table(edges, areal_density_1e15, mixing_1e15,
                                           compositions, self.substrate)
        return widths, fractions

    def points(self, depth, areal_density_1e15, mixing_1e15, compositions):
        """Atom fractions ``(n, n_species)`` at auxiliary depths (see :mod:`._stack`)."""
        return point_composition(depth, areal_density_1e15, mixing_1e15, compositions,
                                 self.substrate)[0]


def alr_to_fractions(logratios):
    """Additive log-ratios (last column is the reference) to fractions on the simplex.

    Parameters
    ----------
    logratios : ndarray, shape (..., m - 1)
        ``y_j = log(f_j / f_m)``.

    Returns
    -------
    ndarray, shape (..., m)
        ``f_j = exp(y_j) / (1 + sum exp(y))``, ``f_m = 1 / (1 + sum exp(y))``.
    """
    y = np.asarray(logratios, dtype=float)
    full = np.concatenate([y, np.zeros(y.shape[:-1] + (1,))], axis=-1)
    full -= full.max(axis=-1, keepdims=True)
    e = np.exp(full)
    return e / e.sum(axis=-1, keepdims=True)


class NodeProfile:
    """A free-form profile through K nodes, linear in additive log-ratio space.

    Parameters
    ----------
    edges_1e15 : ndarray, shape (n + 1,)
        Slice edges of the forward model's grid (1e15 atoms/cm2).
    n_species : int
        Columns of the fraction table.
    columns : sequence of int
        The species (columns) the nodes describe; the last one is the log-ratio reference.
        Other columns stay zero.
    n_nodes : int
        Number of nodes K, evenly spaced from the surface to ``depth_1e15``.
    depth_1e15 : float
        Depth of the deepest node (1e15 atoms/cm2).
    below : {"hold", "vacuum"}
        Below the deepest node: keep its composition (a substrate) or nothing (vacuum).

    Notes
    -----
    Node k holds log-ratios ``y_k`` (length m - 1).  The parameters are the surface node's
    log-ratios ``y_0`` and the steps ``d_k = y_k - y_{k-1}``, so the smoothness prior (a
    Gaussian random walk) is a product of independent normal priors on the parameters.  The
    log-ratios are interpolated linearly to the slice centres and mapped to fractions with
    :func:`alr_to_fractions`.
    """

    def __init__(self, edges_1e15, n_species, columns, n_nodes, depth_1e15, below="hold"):
        self.edges_1e15 = np.asarray(edges_1e15, dtype=float)
        self.centres_1e15 = 0.5 * (self.edges_1e15[1:] + self.edges_1e15[:-1])
        self.n_species = int(n_species)
        self.columns = np.asarray(columns, dtype=int)
        self.n_nodes = int(n_nodes)
        self.depth_1e15 = float(depth_1e15)
        self.below = below
        self.node_depth_1e15 = np.linspace(0.0, self.depth_1e15, self.n_nodes)
        self.n_ratios = self.columns.size - 1
        a, b = self.edges_1e15[:-1], self.edges_1e15[1:]
        self._coverage = np.clip((self.depth_1e15 - a) / (b - a), 0.0, 1.0)

    @property
    def n_parameters(self) -> int:
        return self.n_nodes * self.n_ratios

    def node_logratios(self, params):
        """Parameters (start, then steps; species-major) to node log-ratios, shape (K, m-1)."""
        p = np.asarray(params, dtype=float).reshape(self.n_ratios, self.n_nodes)
        return np.cumsum(p, axis=1).T

    def fractions_at(self, params, depth_1e15):
        """Atom fractions at depths (1e15 atoms/cm2), shape (n, n_species): the node
        log-ratios interpolated linearly in depth (the point values, not slice averages)."""
        depth = np.asarray(depth_1e15, dtype=float)
        y_nodes = self.node_logratios(params)
        y = np.empty((depth.size, self.n_ratios))
        for j in range(self.n_ratios):
            y[:, j] = np.interp(depth, self.node_depth_1e15, y_nodes[:, j])
        out = np.zeros((depth.size, self.n_species))
        out[:, self.columns] = alr_to_fractions(y)
        if self.below == "vacuum":
            out[depth > self.depth_1e15] = 0.0
        return out

    def fractions(self, params):
        """Atom fractions on the grid, shape (n_slices, n_species)."""
        y_nodes = self.node_logratios(params)
        y = np.empty((self.centres_1e15.size, self.n_ratios))
        for j in range(self.n_ratios):
            y[:, j] = np.interp(self.centres_1e15, self.node_depth_1e15, y_nodes[:, j])
        out = np.zeros((self.centres_1e15.size, self.n_species))
        out[:, self.columns] = alr_to_fractions(y)
        if self.below == "vacuum":
            out *= self._coverage[:, None]
        return out


def stick_breaking(shares):
    """Stick-breaking shares ``v`` (length m - 1, each in (0, 1)) to m fractions.

    ``f_1 = v_1``, ``f_k = v_k (1 - v_1) ... (1 - v_{k-1})``, ``f_m = (1 - v_1) ... (1 - v_{m-1})``
    (README.md, "Free compositions").
    """
    v = np.asarray(shares, dtype=float)
    rest = np.concatenate([[1.0], np.cumprod(1.0 - v)])
    return np.concatenate([v, [1.0]]) * rest
