"""RL agents: tabular Q-learning and SARSA, SB3 adapters (train, save, load, evaluate)."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import agent_from_spec, make_agent, run_episode
from shortcut_gym.envs import CommandSelectionEnv, make_world

SHORT = make_world(schedule={"sessions": 2, "trials_per_session": 40})
EVAL_SEEDS = range(100, 108)


@pytest.fixture(scope="module")
def env():
    return CommandSelectionEnv(world=SHORT)


def _menu_time(env):
    return np.mean([run_episode(env, make_agent("always_menu"), seed=s)["duration_s"].sum() for s in EVAL_SEEDS])


@pytest.mark.parametrize("name", ["q_learning", "sarsa"])
def test_tabular_learns_is_seeded_and_round_trips(env, name, tmp_path):
    a, b = make_agent(name), make_agent(name)
    curve_a = a.train(env, 40, seed=0, progress_bar=False)
    curve_b = b.train(env, 40, seed=0, progress_bar=False)
    np.testing.assert_array_equal(curve_a["total_time_s"], curve_b["total_time_s"])
    np.testing.assert_array_equal(a.q, b.q)
    assert np.count_nonzero(a.q) > 20  # the table was updated
    p = a.action_probabilities(*env.reset(seed=1))
    assert p.sum() == pytest.approx(1.0) and p.min() == pytest.approx(a.params["epsilon"] / 3)
    path = a.save(tmp_path / name)
    c = make_agent(name)
    c.bind(a.context)
    c.load(path)
    np.testing.assert_array_equal(c.q, a.q)
    assert c.evaluate(env, [7])["total_time_s"].iloc[0] == a.evaluate(env, [7])["total_time_s"].iloc[0]


def test_ppo_short_training_beats_always_menu_and_round_trips(env, tmp_path):
    agent = make_agent("ppo", deterministic=True)
    agent.train(SHORT, total_timesteps=40_000, seed=0, progress_bar=False)
    ppo_time = agent.evaluate(env, EVAL_SEEDS)["total_time_s"].mean()
    assert ppo_time < _menu_time(env)
    path = agent.save(tmp_path / "ppo_model")
    loaded = agent_from_spec({"name": "ppo", "model_path": str(path), "deterministic": True})
    obs, info = env.reset(seed=5)
    np.testing.assert_allclose(loaded.action_probabilities(obs, info), agent.action_probabilities(obs, info),
                               rtol=1e-6)
    assert loaded.evaluate(env, EVAL_SEEDS)["total_time_s"].mean() == pytest.approx(ppo_time)


@pytest.mark.parametrize("name", ["a2c", "dqn"])
def test_other_sb3_adapters_run_through_the_protocol(env, name):
    agent = make_agent(name)
    agent.train(SHORT, total_timesteps=1_000, seed=0, progress_bar=False, n_envs=4)
    obs, info = env.reset(seed=0)
    p = agent.action_probabilities(obs, info)
    assert p.shape == (3,) and p.sum() == pytest.approx(1.0)
    df = run_episode(env, agent, seed=0)
    assert len(df) == SHORT.horizon


def test_sb3_errors():
    with pytest.raises(ValueError, match="train or load a model"):
        make_agent("ppo").action_probabilities(np.zeros(19, dtype=np.float32), {"target": 0, "next_trial": 0})
    with pytest.raises(ValueError, match="no model file"):
        make_agent("ppo", model_path="/nonexistent/model.zip")


def test_tabular_update_bootstraps_from_the_same_commands_next_use():
    """Three trials: command 0, command 1, command 0 (last). The first update must use command
    0's state at its next use (Q there 0), not the next trial's (command 1, Q preset to -100)."""
    from shortcut_gym.agents.base import AgentContext, Transition

    names = ("log1p_learn_count", "log1p_hotkey_successes", "log1p_hotkey_failures", "log1p_seconds_since_last_use")
    agent = make_agent("q_learning", learning_rate=0.5, discount=0.9)
    agent.bind(AgentContext(2, 3, ("a", "b"), names, None))
    agent.reset(0)
    fresh = np.zeros(4)
    learned_once = np.log1p([1.0, 0.0, 0.0, 120.0])  # learn count 1, used 2 minutes ago
    s0, s1 = agent.state(fresh, {"target": 0}), agent.state(fresh, {"target": 1})
    s2 = agent.state(learned_once, {"target": 0})
    agent.q[s1] = -100.0
    agent.learning = True
    steps = [(0, fresh, 2, -5.0, False), (1, fresh, 0, -3.0, False), (0, learned_once, 1, -1.0, True)]
    for c, obs, a, r, last in steps:
        agent.observe(Transition(obs, a, r, obs, {"command": c}, last, False))  # the schedule's end terminates
    assert agent.q[s0][2] == pytest.approx(0.5 * (-5.0 + 0.9 * 0.0))  # bootstrapped from s2 (all 0)
    assert agent.q[s2][1] == pytest.approx(0.5 * -1.0)  # its last use: a true end
    assert agent.q[s1][0] == pytest.approx(-100.0 + 0.5 * (-3.0 - -100.0))  # command 1 ends with the horizon
    assert agent._open == {}


def test_q_learning_trained_greedy_beats_always_menu():
    """1,000 simulated users of 3 sessions (about 8 s): the greedy table beats always-menu on 20
    other users (it did not when each update bootstrapped from the next trial's command)."""
    world = make_world(schedule={"sessions": 3, "trials_per_session": 40})
    env = CommandSelectionEnv(world=world)
    seeds = range(1000, 1020)
    agent = make_agent("q_learning")
    agent.train(env, 1000, seed=0, progress_bar=False)
    menu = np.mean([run_episode(env, make_agent("always_menu"), seed=s)["duration_s"].sum() for s in seeds])
    assert agent.evaluate(env, seeds, greedy=True)["total_time_s"].mean() < menu
    assert agent.params["epsilon"] == 0.1  # greedy only for that evaluation


def test_tabular_learns_nothing_from_uses_a_wrapper_cut_short():
    """A truncated episode (a TimeLimit cut) has no next state for its open uses: they are dropped,
    while a terminated one (the schedule's end) updates them toward the reward alone."""
    import gymnasium as gym

    from shortcut_gym import ENV_ID

    ends = {}
    for how, kwargs in (("terminated", {"schedule": {"sessions": 1, "trials_per_session": 1}}),
                        ("truncated", {"schedule": {"sessions": 1, "trials_per_session": 5}, "max_episode_steps": 1})):
        env = gym.make(ENV_ID, **kwargs)
        agent = make_agent("q_learning", learning_rate=1.0, epsilon=0.0, initial_value=-7.0)
        agent.train(env, 1, seed=3, progress_bar=False)
        changed = agent.q != -7.0
        ends[how] = (int(changed.sum()), agent.q[changed])
    one = run_episode(gym.make(ENV_ID, schedule={"sessions": 1, "trials_per_session": 1}), make_agent("always_menu"),
                      seed=3)
    assert ends["terminated"][0] == 1 and ends["terminated"][1][0] == pytest.approx(-one["duration_s"].iloc[0])
    assert ends["truncated"][0] == 0
