"""Profile models: a few parameters in, a slice table (areal density and atom fractions per
slice) out.

* :class:`LayerStack`, layers with mixing at each interface, atoms conserved
  (:mod:`inversion.fit._stack`): its slices follow the sample, and their areal densities are
  the atoms they hold;
* :class:`NodeProfile`, a free-form profile through K nodes (additive log-ratios at the nodes,
  fractions linear in depth between them), on the forward model's nominal grid, alone or over
  a depth range inside the run file's layers.

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
    """A free-form profile through K nodes: log-ratios sampled at the nodes, atom fractions
    linear in depth between them.

    Parameters
    ----------
    edges_1e15 : ndarray, shape (n + 1,)
        Slice edges of the forward model's grid (1e15 atoms/cm2).
    n_species : int
        Columns of the fraction table.
    columns : sequence of int
        The species (columns) the nodes describe; the last one is the log-ratio reference.
        Other columns stay zero inside the node range.
    node_depth_1e15 : array_like, shape (K,)
        Depths of the nodes, increasing: the range is ``[node_depth[0], node_depth[-1]]``.
    below : {"hold", "vacuum", "layers"}
        Outside the range: below it keep the deepest node's composition (``"hold"``, a
        substrate) or nothing (``"vacuum"``); or the run file's layers above and below it
        (``"layers"``, a mixed model: ``layer_tops_1e15`` and ``layer_compositions`` needed).
    layer_tops_1e15 : array_like, optional
        Top of every run-file layer and the bottom of the last finite one (L + 1 values for L
        finite layers; a substrate continues below the last).
    layer_compositions : array_like (n_layers, n_species), optional

    Notes
    -----
    Node k holds log-ratios ``y_k`` (length m - 1).  The parameters are the first node's
    log-ratios ``y_0`` and the steps ``d_k = y_k - y_{k-1}``, so the smoothness prior (a
    Gaussian random walk) is a product of independent normal priors on the parameters.  Each
    node's fractions ``f_k`` follow from :func:`alr_to_fractions`; between nodes the fractions
    are linear in depth, so they stay on the simplex, and each slice holds the exact integral
    of that profile over its depth: a species' atoms in the slice table equal its profile's
    integral (to rounding), for any grid.
    """

    def __init__(self, edges_1e15, n_species, columns, node_depth_1e15, below="hold", *,
                 layer_tops_1e15=None, layer_compositions=None):
        self.edges_1e15 = np.asarray(edges_1e15, dtype=float)
        self.widths_1e15 = np.diff(self.edges_1e15)
        self.n_species = int(n_species)
        self.columns = np.asarray(columns, dtype=int)
        self.node_depth_1e15 = np.asarray(node_depth_1e15, dtype=float)
        self.n_nodes = self.node_depth_1e15.size
        if self.n_nodes < 2 or np.any(np.diff(self.node_depth_1e15) <= 0):
            raise ValueError("node depths must be at least two, strictly increasing")
        self.top_1e15 = float(self.node_depth_1e15[0])
        self.depth_1e15 = float(self.node_depth_1e15[-1])
        if below not in ("hold", "vacuum", "layers"):
            raise ValueError(f"below must be 'hold', 'vacuum' or 'layers', got {below!r}")
        self.below = below
        self.n_ratios = self.columns.size - 1
        self._gaps = np.diff(self.node_depth_1e15)
        self._edge_at = self._locate(self.edges_1e15)
        a, b = self.edges_1e15[:-1], self.edges_1e15[1:]
        overlap = np.clip(np.minimum(b, self.depth_1e15) - np.maximum(a, self.top_1e15), 0.0,
                          None)
        self._coverage = overlap / np.where(b > a, b - a, 1.0)
        self._base = None
        if below == "layers":
            tops = np.asarray(layer_tops_1e15, dtype=float)
            comps = np.asarray(layer_compositions, dtype=float)
            self._tops, self._comps = tops, comps
            self._base = self._layer_average(a, b)
        # what fractions() uses on every call, worked out once (the same operations on the
        # same numbers as when it computed them itself)
        k, dz, extra = self._edge_at
        self._dz, self._dz2, self._extra = dz[:, None], (dz * dz)[:, None], extra[:, None]
        self._half_gaps = 0.5 * self._gaps[:, None]
        self._span = np.where(self.widths_1e15 > 0, self.widths_1e15, 1.0)[:, None]
        self._every_column = bool(np.array_equal(self.columns, np.arange(self.n_species)))
        self._outside = (None if self._base is None
                         else (1.0 - self._coverage)[:, None] * self._base)

    # ----- the run file's layers outside the range (mixed model) -----
    def _layer_bounds(self):
        tops = self._tops
        n = self._comps.shape[0]
        lo = np.array([tops[i] if i < tops.size else tops[-1] for i in range(n)])
        hi = np.array([tops[i + 1] if i + 1 < tops.size else np.inf for i in range(n)])
        return lo, hi

    def _layer_average(self, a, b):
        """Area-weighted composition of the run file's layers in each slice [a, b]."""
        lo, hi = self._layer_bounds()
        out = np.zeros((a.size, self.n_species))
        span = np.where(b > a, b - a, 1.0)
        for i in range(self._comps.shape[0]):
            overlap = np.clip(np.minimum(b, hi[i]) - np.maximum(a, lo[i]), 0.0, None)
            out += (overlap / span)[:, None] * self._comps[i]
        return out

    def _layer_points(self, depth):
        lo, hi = self._layer_bounds()
        out = np.zeros((depth.size, self.n_species))
        for i in range(self._comps.shape[0]):
            on = (depth >= lo[i]) & (depth < hi[i])
            out[on] = self._comps[i]
        return out

    # ----- nodes -----
    @property
    def n_parameters(self) -> int:
        return self.n_nodes * self.n_ratios

    def _locate(self, depth):
        """(interval, offset into it, depth below the range) of each depth."""
        z = np.clip(depth, self.top_1e15, self.depth_1e15)
        k = np.clip(np.searchsorted(self.node_depth_1e15, z, side="right") - 1, 0,
                    self.n_nodes - 2)
        return k, z - self.node_depth_1e15[k], np.maximum(depth - self.depth_1e15, 0.0)

    def node_logratios(self, params):
        """Parameters (start, then steps; species-major) to node log-ratios, shape (K, m-1)."""
        p = np.asarray(params, dtype=float).reshape(self.n_ratios, self.n_nodes)
        return np.cumsum(p, axis=1).T

    def node_fractions(self, params):
        """Fractions of the described species at each node, shape (K, m)."""
        return alr_to_fractions(self.node_logratios(params))

    def fractions_at(self, params, depth_1e15):
        """Atom fractions at depths (1e15 atoms/cm2), shape (n, n_species): linear in depth
        between the nodes (point values)."""
        depth = np.atleast_1d(np.asarray(depth_1e15, dtype=float))
        f = self.node_fractions(params)
        k, dz, _ = self._locate(depth)
        t = (dz / self._gaps[k])[:, None]
        out = np.zeros((depth.size, self.n_species))
        out[:, self.columns] = (1.0 - t) * f[k] + t * f[k + 1]
        outside = (depth < self.top_1e15) | (depth > self.depth_1e15)
        if self.below == "vacuum":
            out[depth > self.depth_1e15] = 0.0
        elif self.below == "layers":
            out[outside] = self._layer_points(depth[outside])
        return out

    def fractions(self, params):
        """Atom fractions on the grid, shape (n_slices, n_species): each slice's average of
        the profile (exact: the integral of a piecewise-linear function)."""
        f = self.node_fractions(params)
        k = self._edge_at[0]
        # per interval between nodes: the profile's integral from the top of the range down
        # to its first node, the fractions there and half the slope, taken at once for every
        # edge (k: the interval of each edge)
        per = np.empty((3, self.n_nodes - 1, f.shape[1]))
        per[0, 0] = 0.0
        np.cumsum(self._half_gaps[:-1] * (f[1:-1] + f[:-2]), axis=0, out=per[0, 1:])
        per[1] = f[:-1]
        slope = (f[1:] - f[:-1]) / self._gaps[:, None]
        np.multiply(0.5, slope, out=per[2])
        at = per.take(k, axis=1)
        # the integral down to each edge
        integral = at[0] + at[1] * self._dz + at[2] * self._dz2
        if self.below == "hold":
            integral += f[-1] * self._extra
        inside = integral[1:] - integral[:-1]
        inside /= self._span
        np.maximum(inside, 0.0, out=inside)
        if self._every_column:
            out = inside
        else:
            out = np.zeros((self.widths_1e15.size, self.n_species))
            out[:, self.columns] = inside
        if self.below == "layers":
            out += self._outside
        return out


def stick_breaking(shares):
    """Stick-breaking shares ``v`` (length m - 1, each in (0, 1)) to m fractions.

    ``f_1 = v_1``, ``f_k = v_k (1 - v_1) ... (1 - v_{k-1})``, ``f_m = (1 - v_1) ... (1 - v_{m-1})``
    (README.md, "Free compositions").
    """
    v = np.asarray(shares, dtype=float)
    rest = np.concatenate([[1.0], np.cumprod(1.0 - v)])
    return np.concatenate([v, [1.0]]) * rest
