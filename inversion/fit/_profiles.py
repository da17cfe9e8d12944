"""Profile models: a few parameters in, a (slices x species) atom-fraction table out.

Two models share one contract, ``fractions(...) -> ndarray (n_slices, n_species)``, evaluated
on the forward model's fixed slice grid (edges in 1e15 atoms/cm2):

* :class:`LayerStack`, layers with error-function mixing at each interface;
* :class:`NodeProfile`, a free-form profile through K nodes in additive log-ratio space.

Every row is a slice AVERAGE of the profile, so expected counts are continuous in every
parameter.  Rows are non-negative and sum to one, except where a sample without a substrate
ends: there a row sums to the part of the slice that holds atoms (0 below the sample).
Equations: README.md, "The [fit] table".
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

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
    """Layers of fixed or free composition with error-function mixing at each interface.

    Parameters
    ----------
    edges_1e15 : ndarray, shape (n + 1,)
        Slice edges of the forward model's grid (1e15 atoms/cm2).
    n_species : int
        Columns of the fraction table.
    n_layers : int
        Number of layers, surface first, the substrate (if any) last.
    substrate : bool
        True if the last layer is a semi-infinite substrate; False if vacuum lies below.

    Notes
    -----
    With interface i at depth ``z_i`` (cumulative areal density of the layers above it) and
    mixing width ``w_i``, ``S_i(z) = Phi((z - z_i) / w_i)`` and layer weights
    ``W_0 = 1 - S_0``, ``W_k = S_{k-1} - S_k``, ``W_last = S_last``; the composition is
    ``f(z) = sum_k W_k(z) c_k``, identical to ``f_above + (f_below - f_above) S_i`` at an
    isolated interface.  Where two interfaces of very different widths overlap, a weight can
    turn negative; it is then set to zero and the weights renormalised, which keeps every row
    on the simplex.
    """

    def __init__(self, edges_1e15, n_species: int, n_layers: int, substrate: bool):
        self.edges_1e15 = np.asarray(edges_1e15, dtype=float)
        self.n_species = int(n_species)
        self.n_layers = int(n_layers)
        self.substrate = bool(substrate)
        #: interfaces: between layers, plus the bottom of the last layer when vacuum is below
        self.n_interfaces = self.n_layers - 1 if self.substrate else self.n_layers
        self.n_thick = self.n_layers - 1 if self.substrate else self.n_layers

    def weights(self, areal_density_1e15, mixing_1e15):
        """Slice-averaged weight of each layer (and of vacuum, last column, if no substrate).

        Parameters
        ----------
        areal_density_1e15 : array_like, shape (n_thick,)
            Areal density of each layer above the substrate (1e15 atoms/cm2).
        mixing_1e15 : array_like, shape (n_interfaces,)
            Mixing width (Gaussian standard deviation) of each interface (1e15 atoms/cm2).

        Returns
        -------
        ndarray, shape (n_slices, n_interfaces + 1)
        """
        depth = np.cumsum(np.asarray(areal_density_1e15, dtype=float))
        n = self.edges_1e15.size - 1
        steps = np.empty((n, self.n_interfaces))
        for i in range(self.n_interfaces):
            steps[:, i] = step_average(self.edges_1e15, depth[i], float(mixing_1e15[i]))
        w = np.empty((n, self.n_interfaces + 1))
        w[:, 0] = 1.0 - steps[:, 0] if self.n_interfaces else 1.0
        for k in range(1, self.n_interfaces):
            w[:, k] = steps[:, k - 1] - steps[:, k]
        if self.n_interfaces:
            w[:, -1] = steps[:, -1]
        np.clip(w, 0.0, None, out=w)
        w /= w.sum(axis=1, keepdims=True)
        return w

    def fractions(self, areal_density_1e15, mixing_1e15, compositions):
        """Atom fractions on the grid.

        Parameters
        ----------
        areal_density_1e15 : array_like, shape (n_thick,)
        mixing_1e15 : array_like, shape (n_interfaces,)
        compositions : array_like, shape (n_layers, n_species)
            Atom fractions of each layer (rows on the simplex).

        Returns
        -------
        ndarray, shape (n_slices, n_species)
        """
        w = self.weights(areal_density_1e15, mixing_1e15)
        comps = np.asarray(compositions, dtype=float)
        return w[:, : self.n_layers] @ comps


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
