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
"""

from __future__ import annotations

import numpy as np
from emcee.moves.red_blue import RedBlueMove

from ..fit._roles import Role

__all__ = ["SubspaceDEMove", "BlockDEMove", "CROSSOVER_PROBABILITIES", "edge_spread_block"]

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
