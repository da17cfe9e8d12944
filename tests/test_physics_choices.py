"""Run-file physics choices: the straggling law and the carbon phase.

Every sample here is invented for the tests.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import forward
from forward._runfile import CARBON_CHOICES, STRAGGLING_CHOICES
from forward._stopping import CARBON_PHASES, helium_electronic_stopping, nuclear_stopping
from forward._straggling import (STRAGGLING_LAWS, bohr_variance, lindhard_scharff_chi,
                                 straggling_rate)

from forward_runs import make_run, run_text

FILM_ON_CARBON = """
[[layer]]
formula = "Ti0.5Si0.5"
areal_density_1e15 = 300
[[layer]]
formula = "C"
substrate = true
"""


def _physics(**keys) -> str:
    return "[physics]\n" + "".join(f'{k} = "{v}"\n' for k, v in keys.items())


def test_choices_match_the_physics_modules():
    # bookkeeping: the run file offers exactly what the physics knows, defaults first
    assert STRAGGLING_CHOICES == tuple(STRAGGLING_LAWS)
    assert CARBON_CHOICES == CARBON_PHASES


def test_run_file_defaults_and_choices():
    run = make_run(FILM_ON_CARBON)
    assert run.physics.straggling == "lindhard-scharff" and run.physics.carbon == "graphite"
    run = make_run(FILM_ON_CARBON, physics=_physics(straggling="bohr", carbon="amorphous"))
    assert run.physics.straggling == "bohr" and run.physics.carbon == "amorphous"


@pytest.mark.parametrize("key, value, allowed", [
    ("straggling", "chu", "'lindhard-scharff', 'bohr'"),
    ("carbon", "diamond", "'graphite', 'amorphous'"),
])
def test_unknown_choice_is_one_line_naming_key_and_allowed_values(key, value, allowed):
    with pytest.raises(forward.InputError) as err:
        make_run(FILM_ON_CARBON, physics=_physics(**{key: value}))
    message = str(err.value)
    assert message.startswith(f"<string>: physics.{key}: unknown value {value!r}")
    assert message.endswith(f"allowed: {allowed}") and "\n" not in message


def test_unknown_choice_on_the_command_line_exits_2_with_one_line(tmp_path, capsys):
    from inversion.cli import main

    path = tmp_path / "invented.toml"
    path.write_text(run_text(FILM_ON_CARBON, physics=_physics(straggling="yang")))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "physics.straggling" in err[0] and "'bohr'" in err[0]


# ----------------------------------------------------------------------------------------------
# the straggling law in the spectrum model


def test_bohr_law_gives_bohrs_energy_independent_rate():
    model = forward.ForwardModel(make_run(FILM_ON_CARBON, physics=_physics(straggling="bohr")))
    for i, sym in enumerate(model.elements):
        z2 = forward.element(sym).z
        # common practice: Omega_B^2 = 0.26 Z1^2 Z2 keV^2 per 1e18 atoms/cm2 (to 1 %)
        assert model._W[i] * 1000.0 == pytest.approx(0.26 * 4 * z2, rel=0.01)
        # Bohr (1948): no energy dependence at all
        np.testing.assert_allclose(model._W[i], bohr_variance(2, z2, 1.0), rtol=1e-12)
        np.testing.assert_allclose(model._dW[i], 0.0, atol=1e-15)


def test_lindhard_scharff_law_is_bohr_times_the_published_ratio():
    bohr = forward.ForwardModel(make_run(FILM_ON_CARBON, physics=_physics(straggling="bohr")))
    ls = forward.ForwardModel(make_run(FILM_ON_CARBON))
    e = ls.table_energy_keV
    for i, sym in enumerate(ls.elements):
        z2 = forward.element(sym).z
        chi = lindhard_scharff_chi(ls._m1, z2, e)
        # J. Lindhard and M. Scharff, K. Dan. Vidensk. Selsk. Mat. Fys. Medd. 27 no. 15 (1953),
        # as given by Chu, Mayer and Nicolet (1978): L(chi)/2, L = 1.36 chi^1/2 - 0.016 chi^3/2
        # for chi <= 3, 1 above; capped at 1 (documented choice in forward._straggling)
        ratio = np.where(chi <= 3.0, np.minimum(0.5 * (1.36 * np.sqrt(chi) - 0.016 * chi ** 1.5),
                                                1.0), 1.0)
        np.testing.assert_allclose(ls._W[i] / bohr._W[i], ratio, rtol=1e-12)


def test_straggling_at_depth_is_larger_with_bohrs_law():
    # Bohr's value is the fast-ion limit of the Lindhard-Scharff correction, so every variance
    # is at least as large with it (Lindhard and Scharff 1953); energies are the same
    bohr = forward.ForwardModel(make_run(FILM_ON_CARBON, physics=_physics(straggling="bohr")))
    ls = forward.ForwardModel(make_run(FILM_ON_CARBON))
    rec_b, rec_l = bohr.edge_table(), ls.edge_table()
    ok = np.isfinite(rec_l[..., 1]) & (rec_l[..., 1] > 0)
    assert np.all(rec_b[..., 1][ok] >= rec_l[..., 1][ok])
    assert np.max(rec_b[..., 1][ok] / rec_l[..., 1][ok]) > 1.2
    np.testing.assert_array_equal(rec_b[..., 0], rec_l[..., 0])
    # and the straggling rate function agrees with the table it was built from
    rate = straggling_rate(2, ls._m1, {"Ti": 1.0}, 1500.0, correction=STRAGGLING_LAWS["bohr"])
    assert rate == pytest.approx(bohr_variance(2, 22, 1.0), rel=1e-14)


# ----------------------------------------------------------------------------------------------
# the carbon phase in the spectrum model


def test_carbon_phase_reaches_the_model_tables():
    graphite = forward.ForwardModel(make_run(FILM_ON_CARBON))
    amorphous = forward.ForwardModel(make_run(FILM_ON_CARBON,
                                              physics=_physics(carbon="amorphous")))
    c = graphite.elements.index("C")
    e = graphite.table_energy_keV
    m_c = forward.element("C").mass_u
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for model, phase in ((graphite, "graphite"), (amorphous, "amorphous")):
            direct = (helium_electronic_stopping(6, e, carbon=phase)
                      + nuclear_stopping(2, model._m1, 6, m_c, e)) / 1000.0
            np.testing.assert_allclose(model._S[c], direct, rtol=1e-12)
    # other elements are untouched; the carbon substrate's signal differs
    others = [i for i in range(len(graphite.elements)) if i != c]
    np.testing.assert_array_equal(graphite._S[others], amorphous._S[others])
    a = graphite.expected_counts(graphite.layer_fractions())
    b = amorphous.expected_counts(amorphous.layer_fractions())
    assert np.max(np.abs(a - b)) > 0.01 * a.max()
