"""What a finished chain says about itself (inversion/sample/_flags.py): parameters piling up at
a prior bound, walkers stuck apart from the others, nuisances far from their priors, and the
advice of a chain that did not converge.  The chains are seeded Gaussian draws (common
practice), shaped like emcee's (steps, walkers, parameters)."""

from __future__ import annotations

import re
from types import SimpleNamespace

import numpy as np
import pytest

from inversion.fit._priors import make_prior
from inversion.fit._roles import Role
from inversion.fit._spec import Parameter
from inversion.sample._convergence import not_converged_message
from inversion.sample._flags import NUISANCE_SD, PILE_FRACTION, posterior_flags

__all__: list[str] = []

SPEC = SimpleNamespace(parameters=[
    Parameter("film.areal_density", "1e15 atoms/cm2", make_prior("uniform", 100.0, 500.0),
              Role.AREAL_DENSITY),
    Parameter("film.mixing", "1e15 atoms/cm2", make_prior("halfnormal", 20.0), Role.MIXING),
    Parameter("fluence_scale", "", make_prior("normal", 1.0, 0.05), Role.FLUENCE_SCALE),
])


def _chain(steps=400, walkers=32, seed=1, centre=(300.0, 20.0, 1.0), sd=(10.0, 5.0, 0.01)):
    """A well-mixed ensemble: independent Gaussian draws, and their log-posteriors."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((steps, walkers, 3))
    chain = np.asarray(centre) + np.asarray(sd) * z
    log_prob = -0.5 * np.sum(z ** 2, axis=2)
    return chain, log_prob, np.full(walkers, 0.3)


def _samples(chain):
    return chain[chain.shape[0] // 2:].reshape(-1, chain.shape[2]).copy()


def test_a_well_mixed_chain_raises_no_flag():
    chain, log_prob, acceptance = _chain()
    assert posterior_flags(SPEC, chain, log_prob, acceptance, _samples(chain)) == []


def test_a_parameter_piling_at_a_bound_is_named():
    chain, log_prob, acceptance = _chain()
    samples = _samples(chain)
    samples[: samples.shape[0] // 5, 0] = 100.5  # 20 % within 1 % of the uniform's span of 100
    flags = posterior_flags(SPEC, chain, log_prob, acceptance, samples)
    (flag,) = flags
    assert flag.startswith("film.areal_density: 20 % of the posterior draws")
    assert "lower bound (100" in flag


def test_a_halfnormal_prior_alone_does_not_pile():
    # draws of the halfnormal prior itself: 2.7 % lie within 1 % of its search span of zero
    # (the span being 0 .. ppf(0.999) = 3.29 scales), below the 5 % that flags
    chain, log_prob, acceptance = _chain()
    samples = _samples(chain)
    samples[:, 1] = np.abs(np.random.default_rng(4).normal(0.0, 20.0, samples.shape[0]))
    near = np.mean(samples[:, 1] < 0.01 * SPEC.parameters[1].prior.bounds()[1])
    assert 0.015 < near < PILE_FRACTION
    assert posterior_flags(SPEC, chain, log_prob, acceptance, samples) == []
    samples[: samples.shape[0] // 2, 1] = 0.01  # a width the data put at zero
    (flag,) = posterior_flags(SPEC, chain, log_prob, acceptance, samples)
    assert flag.startswith("film.mixing: ") and "quote an upper limit" in flag


def test_a_stuck_walker_is_named():
    chain, log_prob, acceptance = _chain()
    chain[:, 5] = [380.0, 20.0, 1.0]  # stuck far out in the areal density, never moving
    log_prob[:, 5] = -40.0
    acceptance[5] = 0.0
    flags = posterior_flags(SPEC, chain, log_prob, acceptance, _samples(chain))
    (flag,) = flags
    assert flag.startswith("walker 5 looks stuck apart from the others: ")
    assert "acceptance 0.000" in flag and "film.areal_density" in flag
    assert "log-posterior" in flag


def test_a_walker_with_no_acceptance_alone_is_named():
    chain, log_prob, acceptance = _chain()
    acceptance[9] = 0.01
    (flag,) = posterior_flags(SPEC, chain, log_prob, acceptance, _samples(chain))
    assert flag.startswith("walker 9 ") and "acceptance 0.010 (median walker 0.300)" in flag


def test_an_unsettled_ensemble_is_one_flag_not_one_per_walker():
    chain, log_prob, acceptance = _chain()
    acceptance[:20] = 0.001
    (flag,) = posterior_flags(SPEC, chain, log_prob, acceptance, _samples(chain))
    assert flag.startswith("20 of 32 walkers disagree")


@pytest.mark.parametrize("median, flagged", [(1.30, True), (0.80, True), (1.10, False)])
def test_a_nuisance_far_from_its_prior_is_named(median, flagged):
    chain, log_prob, acceptance = _chain(centre=(300.0, 20.0, median))
    flags = posterior_flags(SPEC, chain, log_prob, acceptance, _samples(chain))
    if not flagged:
        assert flags == []
        return
    (flag,) = flags
    z = (median - 1.0) / 0.05
    assert abs(z) > NUISANCE_SD
    found = float(re.search(r"the posterior median ([0-9.]+)", flag).group(1))
    assert flag.startswith("fluence_scale: ") and found == pytest.approx(median, abs=0.002)
    found_z = float(re.search(r"lies ([-+0-9.]+) prior standard deviations", flag).group(1))
    assert found_z == pytest.approx(z, abs=0.1)


def test_not_converged_message_gives_at_least_the_steps_and_a_larger_cap():
    status = SimpleNamespace(steps=5, tau=np.array([0.46, 0.2]), rhat=None)
    text = not_converged_message(status, 50.0, check_every=200)
    assert "NOT CONVERGED: 5 steps" in text and "at least 23 steps" in text
    assert "lower bound" in text
    assert int(re.search(r"--max-steps (\d+)", text).group(1)) == 200  # the check grid
    status = SimpleNamespace(steps=2000, tau=np.array([209.2, 50.0]), rhat=None)
    text = not_converged_message(status, 50.0, check_every=200)
    assert "at least 10460 steps" in text
    assert int(re.search(r"--max-steps (\d+)", text).group(1)) == 10600
    status = SimpleNamespace(steps=200, tau=np.array([np.nan]), rhat=None)
    assert "--max-steps 400" in not_converged_message(status, 50.0, check_every=200)
