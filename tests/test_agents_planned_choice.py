"""The planned-choice model: a softmax over the planner's action values in the chooser's world."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.planned_choice import BETA_MAX, cached_plan, softmax_probabilities
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.data.logs import log_from_simulation, participant_trials, validate_log
from shortcut_gym.lab.fitting import ModelSpec, fit_participant, joint_table

SCHEDULE = {"sessions": 3, "trials_per_session": 20, "gap_h": 20.0}


@pytest.fixture(scope="module")
def world():
    return make_world(schedule=SCHEDULE)


def _trials(world, agent, seed=0) -> pd.DataFrame:
    rows = run_episode(CommandSelectionEnv(world=world), agent, seed=seed)
    log = validate_log(log_from_simulation(rows.assign(user=0), world.commands), world.commands)
    return participant_trials(log, log["participant"].iloc[0])


def test_probabilities_are_the_lapse_mixed_softmax_of_the_planner_values(world):
    agent = make_agent("planned_choice", world=world, with_lapse=True, beta=1.7, lapse=0.1)
    agent.reset(0)
    planner = make_agent("bounded_optimal", world=world, n_bins=20, n_weight_bins=5, select_users=0)
    planner.reset(0)
    empty = np.zeros(0, dtype=np.float32)
    steps = [(0, "menu"), (0, "learned"), (3, "menu"), (0, "hotkey"), (3, "hotkey_forgotten")]
    for t, (c, outcome) in enumerate(steps):
        q = planner.action_values(c, t)
        z = np.exp(1.7 * (q - q.max()))
        expect = 0.9 * z / z.sum() + 0.1 / 3
        np.testing.assert_allclose(agent.action_probabilities(empty, {"target": c, "next_trial": t}), expect,
                                   rtol=1e-12)
        tr = Transition(empty, 0, 0.0, empty, {"command": c, "trial": t, "outcome": outcome})
        agent.observe(tr)
        planner.observe(tr)


def test_a_high_inverse_temperature_chooses_what_the_planner_chooses(world):
    planner = make_agent("bounded_optimal", world=world, n_bins=20, n_weight_bins=5, select_users=0)
    chosen = _trials(world, planner, seed=3)
    sharp = make_agent("planned_choice", world=world, beta=BETA_MAX)
    codes = chosen["action"].map({"menu": 0, "hotkey": 1, "learn": 2}).to_numpy()
    np.testing.assert_array_equal(sharp.action_values_of(chosen).argmax(axis=1), codes)
    assert sharp.likelihood_function(chosen)(np.array([BETA_MAX])) > -1.0  # the planner's own choices: ln L ~ 0
    assert make_agent("planned_choice", world=world).likelihood_function(chosen)(np.array([0.0])) == \
        pytest.approx(len(chosen) * np.log(1 / 3))


def test_the_plan_is_made_once_per_world_and_options(world):
    a, b = cached_plan(world, None, 20, 5), cached_plan(make_world(schedule=SCHEDULE), None, 20, 5)
    assert a.plan is b.plan
    assert cached_plan(world, 0.5, 20, 5).plan is not a.plan


def test_fitting_finds_the_generating_inverse_temperature_on_average(world):
    long = make_world(schedule={"sessions": 6, "trials_per_session": 40, "gap_h": 20.0})
    ctx = context_of_world(long)
    spec = ModelSpec("planned_choice", options={"world": long})
    fits = [fit_participant(spec, _trials(long, make_agent("planned_choice", world=long, beta=b), seed=s), ctx,
                            n_starts=2).params["beta"] for s, b in enumerate([0.5, 3.0])]
    assert fits[0] < fits[1]
    assert 0.2 < fits[0] < 1.2 and 1.2 < fits[1] < 9.0


def test_bad_options_and_a_log_longer_than_the_world_are_refused(world):
    with pytest.raises(ConfigError, match="with_lapse must be true or false"):
        make_agent("planned_choice", world=world, with_lapse="yes")
    with pytest.raises(ConfigError, match="n_bins"):
        make_agent("planned_choice", world=world, n_bins=1)
    with pytest.raises(ConfigError, match="needs the chooser's world"):
        make_agent("planned_choice").reset(0)
    short = make_world(schedule={"sessions": 1, "trials_per_session": 10})
    trials = _trials(world, make_agent("always_menu"))
    with pytest.raises(ConfigError, match="the log has 60 trials, the planner's world only 10"):
        make_agent("planned_choice", world=short).likelihood_function(trials)


def test_softmax_probabilities_sum_to_one_and_order_by_value():
    q = np.array([[-3.0, -1.0, -2.0], [0.0, 0.0, 0.0]])
    p = softmax_probabilities(q, 2.0, 0.06)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    assert p[0, 1] > p[0, 2] > p[0, 0] and np.allclose(p[1], 1 / 3)


def test_joint_table_adds_the_duration_likelihood_and_parameters():
    choice = pd.DataFrame({"participant": ["a", "b"], "model": "m", "loglik": [-10.0, -20.0], "n_params": [2, 2],
                           "n_trials": [100, 100]})
    durations = pd.DataFrame({"participant": ["b", "a"], "loglik": [-5.0, -1.0], "n_params": [7, 6]})
    out = joint_table(choice, durations)
    assert list(out["joint_loglik"]) == [-11.0, -25.0]
    assert list(out["joint_n_params"]) == [8, 9]
    assert out["joint_bic"].iloc[0] == pytest.approx(8 * np.log(100) + 22.0)
    with pytest.raises(ValueError, match=r"no duration fit for participant\(s\) \['b'\]"):
        joint_table(choice, durations.iloc[1:])
