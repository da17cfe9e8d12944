"""Differential-evolution moves for emcee beyond its own: in a random subspace, and in a fixed
block of coordinates.

**Subspace.**
Differential evolution with crossover (J. A. Vrugt, C. J. F. ter Braak, C. G. H. Diks,
B. A. Robinson, J. M. Hyman and D. Higdon, "Accelerating Markov chain Monte Carlo simulation by
differential evolution with self-adaptive randomized subspace sampling", Int. J. Nonlinear Sci.
Numer. Simul. 10 (2009) 273): each walker moves along the difference of two other walkers in a
random subset of the coordinates only, each coordinate taken with probability ``CR`` (drawn per
proposal from 1/3, 2/3 and 1, at least one coordinate), the jump scaled by
``2.38 / sqrt(2 d')`` for ``d'`` coordinates moved (ter Braak 2006).  The proposal is
symmetric, so the Metropolis ratio is the posterior ratio (emcee's red-blue update keeps the
ensemble's detailed balance).

**Block.** :class:`BlockDEMove` moves one fixed block of coordinates along the difference of
two other walkers in that block, the jump scaled by ``2.38 / sqrt(2 d_b)`` for a block of
``d_b`` coordinates (ter Braak 2006, Stat. Comput. 16, 239), the other coordinates held: the
block update of Metropolis-within-Gibbs samplers (common practice), with a differential
proposal.  It is symmetric too.  In a fit of several spectra the sampler gives it the
parameters that set the energy spread of the edges below the surface, the interface widths
and the straggling nuisances (:func:`edge_spread_block`): each spectrum measures a sum of their
variances, weighted by its own geometry, so their joint posterior is curved and skewed, and
whole-vector moves crossed it slowly (benchmarks/RESULTS.md, "Joint fits").

**Delayed acceptance.** In a fit of several spectra every move accepts in two stages
(J. A. Christen and C. Fox, "Markov chain Monte Carlo using an approximation", J. Comput.
Graph. Stat. 14 (2005) 795): a proposal ``y`` of a walker at ``x`` first faces the prior and
one spectrum alone, ``pi1 = prior x L_1``, with the move's own proposal factor ``f``
(accepted with probability ``min(1, f pi1(y) / pi1(x))``); only a proposal that passes is
shown the other spectra, ``pi2 = L_2 ... L_n``, and accepted with probability
``min(1, pi2(y) / pi2(x))``.  The chain keeps the full posterior ``pi1 pi2`` as its stationary
distribution (the two-stage kernel is reversible with respect to it, Christen and Fox,
Theorem 1), and a proposal the first stage refuses costs one spectrum instead of all of them.
Two-stage acceptance accepts less than one stage, so the chain's autocorrelation time grows;
on the benchmark's two spectra it grew by about a sixth while a step cost a third less
(benchmarks/RESULTS.md, "Joint fits").  :class:`Stages` keeps what the first stage said of
each walker's current position, so each proposal is evaluated once per stage.
"""

from __future__ import annotations

import numpy as np
from emcee.moves.red_blue import RedBlueMove
from emcee.state import State

from ..fit._roles import Role

__all__ = ["SubspaceDEMove", "BlockDEMove", "CROSSOVER_PROBABILITIES", "edge_spread_block",
           "Stages", "DelayedAcceptance", "delayed"]

#: crossover probabilities, one drawn per proposal (Vrugt et al. 2009 use n_CR = 3)
CROSSOVER_PROBABILITIES = (1.0 / 3.0, 2.0 / 3.0, 1.0)


def _two_others(random, nc: int, ns: int):
    """For each of ``ns`` proposals, two different walkers of the ``nc`` complementary ones."""
    first = random.randint(nc, size=ns)
    second = (first + 1 + random.randint(nc - 1, size=ns)) % nc  # never the same walker
    return first, second


class SubspaceDEMove(RedBlueMove):
    """Differential evolution in a random subspace (see the module notes).

    Parameters
    ----------
    sigma : float
        Relative spread of the jump scale (as emcee's ``DEMove``).
    """

    def __init__(self, sigma: float = 1.0e-5, **kwargs):
        self.sigma = float(sigma)
        super().__init__(**kwargs)

    def get_proposal(self, s, c, random):
        c = np.concatenate(c, axis=0)
        ns, ndim = s.shape
        nc = c.shape[0]
        first, second = _two_others(random, nc, ns)
        diffs = c[second] - c[first]
        cr = np.asarray(CROSSOVER_PROBABILITIES)[random.randint(len(CROSSOVER_PROBABILITIES),
                                                                size=ns)]
        chosen = random.rand(ns, ndim) < cr[:, None]
        none = ~chosen.any(axis=1)
        chosen[none, random.randint(ndim, size=int(none.sum()))] = True
        moved = chosen.sum(axis=1, keepdims=True)
        gamma = 2.38 / np.sqrt(2.0 * moved) * (1.0 + self.sigma * random.randn(ns, 1))
        q = s + gamma * diffs * chosen
        return q, np.zeros(ns, dtype=np.float64)


class BlockDEMove(RedBlueMove):
    """Differential evolution in one fixed block of coordinates (see the module notes).

    Parameters
    ----------
    block : sequence of int
        The coordinates moved (at least one); the others are held.
    sigma : float
        Relative spread of the jump scale (as emcee's ``DEMove``).
    """

    def __init__(self, block, sigma: float = 1.0e-5, **kwargs):
        self.block = np.asarray(block, dtype=np.intp)
        if self.block.size == 0:
            raise ValueError("a block move needs at least one coordinate")
        self.sigma = float(sigma)
        self.gamma0 = 2.38 / np.sqrt(2.0 * self.block.size)
        super().__init__(**kwargs)

    def get_proposal(self, s, c, random):
        c = np.concatenate(c, axis=0)
        ns = s.shape[0]
        nc = c.shape[0]
        first, second = _two_others(random, nc, ns)
        gamma = self.gamma0 * (1.0 + self.sigma * random.randn(ns, 1))
        q = np.array(s, dtype=np.float64, copy=True)
        q[:, self.block] += gamma * (c[second][:, self.block] - c[first][:, self.block])
        return q, np.zeros(ns, dtype=np.float64)


def edge_spread_block(parameters, measurements: int = 1) -> list:
    """Positions of the parameters that set the energy spread of buried edges in a fit of
    several spectra: the free interface widths and, with them, the straggling scale and
    correction.

    ``[]`` for a fit of one spectrum (there the widths mixed as fast as every other parameter
    and the block's share only slowed the rest: 4200 steps against 3600 on the benchmark's
    single fit), and when no width is free (the free-form profile, or every width fixed).  In a
    joint fit each geometry weighs widths and straggling differently, and the whole-vector moves
    crossed their curved posterior slowly (5800 steps; 4000 with the block), see
    benchmarks/RESULTS.md, "Joint fits".
    """
    roles = [getattr(p, "role", None) for p in parameters]
    if measurements < 2 or Role.MIXING not in roles:
        return []
    spread = (Role.MIXING, Role.STRAGGLING, Role.STRAGGLING_CORRECTION)
    return [i for i, role in enumerate(roles) if role in spread]


class Stages:
    """The two stages of delayed acceptance of one sampler (see the module notes), and the
    first stage's values at the walkers' current positions.

    Parameters
    ----------
    first : callable
        ``first(theta)``: log prior plus the first spectrum's log-likelihood (-inf outside the
        prior).
    later : callable
        ``later(theta)``: the other spectra's log-likelihoods, summed (``first + later`` is the
        log-posterior).  Both are mapped with the sampler's ``map`` (a worker pool's, or the
        built-in one), so with a pool they must be picklable module functions.
    """

    def __init__(self, first, later):
        self.first, self.later = first, later
        self._coords = None
        self._first = None

    def current(self, map_fn, coords) -> np.ndarray:
        """The first stage at ``coords`` (the walkers' positions): remembered from the last
        step, computed when the positions are others (the first step, a resumed chain)."""
        if self._coords is None or self._coords.shape != coords.shape \
                or not np.array_equal(self._coords, coords):
            self.remember(coords, self.evaluate(map_fn, self.first, coords))
        return self._first.copy()

    def remember(self, coords, first) -> None:
        self._coords = np.array(coords, dtype=float, copy=True)
        self._first = np.array(first, dtype=float, copy=True)

    @staticmethod
    def evaluate(map_fn, fn, points) -> np.ndarray:
        """``fn`` at every point, as floats (NaN refused, as emcee refuses it)."""
        out = np.array([float(v) for v in map_fn(fn, list(points))], dtype=float)
        if np.any(np.isnan(out)):
            raise ValueError("Probability function returned NaN")
        return out


class DelayedAcceptance:
    """Two-stage acceptance for an emcee red-blue move (see the module notes).

    Mixed in before the move's class (:func:`delayed`); ``stages`` (:class:`Stages`) set, the
    move's proposals are accepted in two stages, unset it is the move itself.
    """

    stages: Stages | None = None

    def propose(self, model, state):
        if self.stages is None:
            return super().propose(model, state)
        nwalkers, ndim = state.coords.shape
        if nwalkers < 2 * ndim and not self.live_dangerously:
            raise RuntimeError("It is unadvisable to use a red-blue move with fewer walkers "
                               "than twice the number of dimensions.")
        self.setup(state.coords)
        stages = self.stages
        first_now = stages.current(model.map_fn, state.coords)
        accepted = np.zeros(nwalkers, dtype=bool)
        all_inds = np.arange(nwalkers)
        inds = all_inds % self.nsplits
        if self.randomize_split:
            model.random.shuffle(inds)
        for split in range(self.nsplits):
            subset = inds == split
            sets = [state.coords[inds == j] for j in range(self.nsplits)]
            s = sets[split]
            c = sets[:split] + sets[split + 1:]
            q, factors = self.get_proposal(s, c, model.random)
            walkers = all_inds[subset]
            first = stages.evaluate(model.map_fn, stages.first, q)
            log_u = np.log(model.random.rand(2, walkers.size))
            passed = factors + first - first_now[walkers] > log_u[0]
            later = np.full(walkers.size, -np.inf)
            if passed.any():
                later[passed] = stages.evaluate(model.map_fn, stages.later, q[passed])
            later_now = state.log_prob[walkers] - first_now[walkers]
            ok = passed & (later - later_now > log_u[1])
            log_prob = np.where(passed, first + later, -np.inf)
            accepted[walkers[ok]] = True
            state = self.update(state, State(q, log_prob=log_prob), accepted, subset)
            first_now[walkers[ok]] = first[ok]
        stages.remember(state.coords, first_now)
        return state, accepted


_DELAYED_CLASSES: dict = {}


def delayed(move_class):
    """``move_class`` (an emcee red-blue move) with :class:`DelayedAcceptance` mixed in; set
    an instance's ``stages`` to accept in two stages."""
    out = _DELAYED_CLASSES.get(move_class)
    if out is None:
        out = type(f"Delayed{move_class.__name__}", (DelayedAcceptance, move_class),
                   {"__doc__": f"{move_class.__name__} accepting in two stages "
                               "(:class:`DelayedAcceptance`)."})
        _DELAYED_CLASSES[move_class] = out
    return out
