"""A subspace (crossover) differential-evolution move for emcee.

Differential evolution with crossover (J. A. Vrugt, C. J. F. ter Braak, C. G. H. Diks,
B. A. Robinson, J. M. Hyman and D. Higdon, "Accelerating Markov chain Monte Carlo simulation by
differential evolution with self-adaptive randomized subspace sampling", Int. J. Nonlinear Sci.
Numer. Simul. 10 (2009) 273): each walker moves along the difference of two other walkers in a
random subset of the coordinates only, each coordinate taken with probability ``CR`` (drawn per
proposal from 1/3, 2/3 and 1, at least one coordinate), the jump scaled by
``2.38 / sqrt(2 d')`` for ``d'`` coordinates moved (ter Braak 2006).  The proposal is
symmetric, so the Metropolis ratio is the posterior ratio (emcee's red-blue update keeps the
ensemble's detailed balance).
"""

from __future__ import annotations

import numpy as np
from emcee.moves.red_blue import RedBlueMove

__all__ = ["SubspaceDEMove", "CROSSOVER_PROBABILITIES"]

#: crossover probabilities, one drawn per proposal (Vrugt et al. 2009 use n_CR = 3)
CROSSOVER_PROBABILITIES = (1.0 / 3.0, 2.0 / 3.0, 1.0)


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
        first = random.randint(nc, size=ns)
        second = (first + 1 + random.randint(nc - 1, size=ns)) % nc  # never the same walker
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
