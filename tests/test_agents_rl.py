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
