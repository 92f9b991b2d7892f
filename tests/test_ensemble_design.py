"""Tests for the [uncertainty] scenario section and preyscape.ensemble.design."""

from __future__ import annotations

import numpy as np
import pytest
from ensemble_cases import ensemble_scenario
from scipy import stats

from preyscape.cli import main
from preyscape.ensemble.design import (
    Parameter,
    member_seed,
    parameters_of,
    plan_design,
    rebuild_of,
    unit_design,
)
from preyscape.errors import InputError
from preyscape.scenario import load_scenario, set_dotted


def write(tmp_path, *params, **kw):
    return ensemble_scenario(tmp_path, parameters=params or
                             ('{ key = "predator.mortality", range = [0.8, 1.2] }',), **kw)


# --- the scenario section -------------------------------------------------------------
def test_section_is_read_with_its_defaults(tmp_path):
    sc = load_scenario(ensemble_scenario(tmp_path, members=6))
    u = sc.uncertainty
    assert u.members == 6 and u.design == "latin-hypercube" and u.agreement == 0.9
    assert [p.key for p in u.parameters][2] == "measures.predator fence.permeability.predator"
    assert sc.for_variant("fenced").uncertainty == u  # variants keep the section


@pytest.mark.parametrize("param,needles", [
    ('{ key = "run.years", range = [1.0, 2.0] }', ["cannot be uncertain", "run length"]),
    ('{ key = "prey.growht", range = [1.0, 2.0] }', ["did you mean 'prey.growth'"]),
    ('{ key = "landscape.classes.7.prey_capacity", range = [0.1, 0.2] }',
     ["no habitat class with code 7", "codes: 1, 2"]),
    ('{ key = "measures.no such.permeability.prey", range = [0.1, 0.2] }',
     ["no measure of that name", "'fen refuge'"]),
    ('{ key = "measures.predator fence.permeability.predator", range = [0.5, 1.5] }',
     ["uncertainty.parameters[0].range", "1.5 is not a valid value"]),
    ('{ key = "prey.growth", range = [-1.0, 2.0] }', ["-1 is not a valid value", "prey.growth"]),
    ('{ key = "prey.growth", range = [2.0, 1.0] }', ["low < high"]),
    ('{ key = "prey.growth", range = [0.0, 1.0], distribution = "log-uniform" }',
     ["log-uniform range must be positive"]),
    ('{ key = "prey.growth", range = [1.0, 2.0], distribution = "normal" }',
     ["needs 'mean' and 'sd'"]),
    ('{ key = "prey.growth", range = [1.0, 2.0], mean = 1.5 }', ["apply to distribution"]),
    ('{ key = "predator.motility", range = [1.0, 2.0] }', ["motility", "does not apply"]),
])
def test_bad_parameters_are_refused_with_the_key_and_exit_2(tmp_path, capsys, param, needles):
    # design requirement: one clear message naming the file and key, exit status 2
    path = write(tmp_path, param)
    status = main(["check", str(path)])
    err = capsys.readouterr().err
    assert status == 2 and err.count("preyscape: error:") == 1 and "Traceback" not in err
    assert str(path) in err
    for n in needles:
        assert n in err


def test_section_level_checks(tmp_path):
    with pytest.raises(InputError, match="no variant named 'fence'; did you mean 'fenced'"):
        load_scenario(write(tmp_path, variants=("fence",)))
    with pytest.raises(InputError, match="members = N x 3 with N a power of two"):
        load_scenario(write(tmp_path, design="sobol", members=10))
    with pytest.raises(InputError, match="appears more than once"):
        load_scenario(write(tmp_path, '{ key = "prey.growth", range = [1.0, 2.0] }',
                            '{ key = "prey.growth", range = [1.0, 3.0] }'))
    with pytest.raises(InputError, match="agreement"):
        load_scenario(write(tmp_path, extra="agreement = 0.4\n"))


def test_variant_setting_an_uncertain_key_is_refused(tmp_path):
    path = write(tmp_path)
    path.write_text(path.read_text().replace(
        'add = ["predator fence"]', 'add = ["predator fence"]\nset = { "predator.mortality" '
        '= 1.1 }'))
    with pytest.raises(InputError, match="variant 'fenced' sets 'predator.mortality'"):
        load_scenario(path)


def test_with_values_sets_dotted_keys_of_every_kind(tmp_path):
    sc = load_scenario(ensemble_scenario(tmp_path)).for_variant("fenced")
    m = sc.with_values({"landscape.classes.2.prey_capacity": 0.25,
                        "measures.predator fence.permeability.predator": 0.2,
                        "start.releases.0.density": 7.0, "run.seed": 99})
    assert m.variant == "fenced" and m.uncertainty is None
    assert next(c for c in m.landscape.classes if c.code == 2).prey_capacity == 0.25
    assert m.measure("predator fence").permeability.predator == 0.2
    assert m.start.releases[0].density == 7.0 and m.run.seed == 99
    with pytest.raises(InputError, match="landscape.classes.9"):
        sc.with_values({"landscape.classes.9.prey_growth": 1.0})


def test_set_dotted_finds_the_longest_measure_name():
    d = {"measures": [{"name": "a"}, {"name": "a.b", "permeability": {"prey": 1.0}}]}
    set_dotted(d, "measures.a.b.permeability.prey", 0.5)
    assert d["measures"][1]["permeability"]["prey"] == 0.5 and "b" not in d["measures"][0]


# --- distributions and designs --------------------------------------------------------
def test_latin_hypercube_uses_every_stratum_once():
    # McKay, Beckman & Conover 1979, Technometrics 21:239: each of the n equal-probability
    # slices of every parameter holds exactly one point
    u = unit_design(16, 3, "latin-hypercube", seed=4)
    for j in range(3):
        assert sorted(np.floor(u[:, j] * 16).astype(int)) == list(range(16))


def test_distributions_follow_their_inverse_cdf():
    u = np.linspace(0.01, 0.99, 9)
    lu = Parameter("k", "log-uniform", 0.5, 8.0).from_unit(u)
    # reference library: scipy.stats.loguniform
    np.testing.assert_allclose(lu, stats.loguniform(0.5, 8.0).ppf(u), rtol=1e-12)
    tn = Parameter("k", "normal", 1.0, 3.0, mean=1.5, sd=1.0).from_unit(u)
    np.testing.assert_allclose(tn, stats.truncnorm(-0.5, 1.5, loc=1.5, scale=1.0).ppf(u),
                               rtol=1e-12)
    assert (tn >= 1.0).all() and (tn <= 3.0).all()
    un = Parameter("k", "uniform", 2.0, 4.0).from_unit(u)
    np.testing.assert_allclose(un, 2.0 + 2.0 * u)


def test_member_seeds_are_distinct_and_follow_seedsequence_spawn():
    seeds = [member_seed(11, i) for i in range(200)]
    assert len(set(seeds)) == 200
    assert all(0 <= s < 2**63 for s in seeds)
    # reference library: numpy's SeedSequence; child i of spawn key (1,) is (1, i)
    ref = np.random.SeedSequence(11, spawn_key=(1,)).spawn(3)
    assert seeds[:3] == [int(c.generate_state(1, np.uint64)[0] >> np.uint64(1)) for c in ref]
    assert member_seed(11, 5) == member_seed(11, 5) != member_seed(12, 5)


def test_sobol_design_is_salibs_saltelli_sample():
    from SALib.sample import sobol

    u = unit_design(40, 3, "sobol", seed=2)
    assert u.shape == (40, 3) and ((u >= 0) & (u <= 1)).all()
    # the A and B matrices of Saltelli et al. 2010 alternate with the D mixed ones:
    # row blocks of D + 2 = 5, the mixed row j takes column j from B, the rest from A
    blocks = u.reshape(8, 5, 3)
    for j in range(3):
        np.testing.assert_array_equal(blocks[:, 1 + j, j], blocks[:, 4, j])
        others = [k for k in range(3) if k != j]
        np.testing.assert_array_equal(blocks[:, 1 + j, others], blocks[:, 0, others])
    assert sobol is not None
    with pytest.raises(InputError, match="power of two"):
        unit_design(30, 3, "sobol", seed=2)


def test_plan_design_is_deterministic_and_in_range(tmp_path):
    sc = load_scenario(ensemble_scenario(tmp_path, members=8))
    ps = parameters_of(sc.uncertainty)
    a = plan_design(ps, members=8, design="latin-hypercube", seed=5)
    b = plan_design(ps, members=8, design="latin-hypercube", seed=5)
    assert np.array_equal(a.values, b.values) and a.seeds == b.seeds
    for j, p in enumerate(ps):
        assert (a.values[:, j] >= p.low).all() and (a.values[:, j] <= p.high).all()
    assert a.member_values(3)["predator.mortality"] == a.values[3, 0]
    assert not np.array_equal(a.values, plan_design(ps, members=8, design="latin-hypercube",
                                                    seed=6).values)


def test_rebuild_of_names_what_each_key_forces():
    assert rebuild_of("interaction.attack_rate") == "nothing"
    assert rebuild_of("prey.growth") == rebuild_of("predator.mortality") == "fields"
    assert rebuild_of("prey.diffusivity") == "operators"
    assert rebuild_of("landscape.classes.2.prey_capacity") == "operators"
    assert rebuild_of("measures.x.permeability.prey") == "operators"
    assert rebuild_of("start.noise") == rebuild_of("start.releases.0.x") == "start"
