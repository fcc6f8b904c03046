"""The batched entry points simulate the agent object they are given, in its current state.

A tabular agent trained in memory, one loaded from a file and trained further, and an SB3 model
trained in memory: every entry point that takes an agent object (``simulate_users`` with every
driver, chunking and threads, ``prepare_agent``, ``simulate_agents``, ``evaluate_agent``,
``simulate_log``) gives, trial by trial, what a ``gymnasium.make`` env stepped one user at a time
with that same object gives. A fresh agent of the object's spec acts otherwise (the negative
control: rebuilding from the spec would be caught).
"""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents.base import Agent, Transition
from shortcut_gym.agents.registry import agent_from_spec, make_agent
from shortcut_gym.agents.rollout import context_of, evaluate_agent
from shortcut_gym.envs import ENV_ID, CommandSelectionEnv, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.lab.simulate import simulate_agents
from shortcut_gym.lab.sweep.batch import prepare_agent, simulate_users

SCHEDULE = {"sessions": 2, "trials_per_session": 12, "gap_h": 20.0}
SEEDS = [300, 301, 302, 303, 304, 305, 306]


def _loop(agent: Agent, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Actions and durations of one user: a gymnasium.make env and the object, stepped by hand."""
    env = gym.make(ENV_ID, schedule=SCHEDULE)
    agent.bind(context_of(env))
    obs, info = env.reset(seed=seed)
    agent.reset(seed)
    actions, durations = [], []
    while True:
        a = agent.act(obs, info)
        nxt, reward, terminated, truncated, step_info = env.step(a)
        agent.observe(Transition(obs, a, float(reward), nxt, step_info, terminated, truncated))
        actions.append(a)
        durations.append(step_info["duration_s"])
        obs, info = nxt, step_info
        if terminated or truncated:
            return np.array(actions), np.array(durations)


def _looped(agent: Agent) -> tuple[np.ndarray, np.ndarray]:
    runs = [_loop(agent, s) for s in SEEDS]
    return np.stack([r[0] for r in runs]), np.stack([r[1] for r in runs])


def _trained_tabular(name: str, epsilon: float) -> Agent:
    world = make_world(schedule=SCHEDULE)
    agent = make_agent(name, epsilon=epsilon, learning_rate=0.5)
    agent.train(CommandSelectionEnv(world=world), episodes=60, seed=0, progress_bar=False)  # type: ignore[attr-defined]
    return agent


def _assert_every_path_equals_loop(agent: Agent) -> None:
    world = make_world(schedule=SCHEDULE)
    actions, durations = _looped(agent)
    trials = simulate_users(world, agent, SEEDS, record="trials")
    np.testing.assert_array_equal(trials.rollout.trials.action, actions)  # type: ignore[union-attr]
    np.testing.assert_array_equal(trials.rollout.trials.duration_s, durations)  # type: ignore[union-attr]
    sums = trials.time_s
    for kw in ({}, {"fused": False}, {"use_batch_policy": False}, {"chunk_users": 2}, {"threads": 2, "chunk_users": 3}):
        other = simulate_users(world, agent, SEEDS, **kw)  # type: ignore[arg-type]
        np.testing.assert_array_equal(other.time_s, sums, err_msg=str(kw))
        np.testing.assert_array_equal(other.actions.sum(axis=1), (actions[:, :, None] == np.arange(3)).sum(axis=1),
                                      err_msg=str(kw))
    table = simulate_agents(world, [agent], SEEDS)
    for i, s in enumerate(SEEDS):
        rows = table[table["user"] == s]
        np.testing.assert_array_equal(rows["action"].map(k.ACTION_NAMES.index).to_numpy(), actions[i])
        np.testing.assert_array_equal(rows["duration_s"].to_numpy(), durations[i])
    totals = evaluate_agent(CommandSelectionEnv(world=world), agent, SEEDS)["total_time_s"].to_numpy()
    np.testing.assert_allclose(totals, durations.sum(axis=1), rtol=1e-12)


@pytest.mark.parametrize(("name", "epsilon"), [("q_learning", 0.0), ("q_learning", 0.3), ("sarsa", 0.1)])
def test_tabular_trained_in_memory_is_simulated_as_trained(name: str, epsilon: float) -> None:
    agent = _trained_tabular(name, epsilon)
    assert agent.spec().get("model_path") is None  # the spec cannot carry the table
    _assert_every_path_equals_loop(agent)
    world = make_world(schedule=SCHEDULE)
    fresh = simulate_users(world, {"name": name, "params": dict(agent.params)}, SEEDS, record="trials")
    mine = simulate_users(world, agent, SEEDS, record="trials")
    assert (fresh.rollout.trials.action != mine.rollout.trials.action).any()  # type: ignore[union-attr]


def test_table_loaded_then_trained_further_runs_its_current_table(tmp_path: Any) -> None:
    world = make_world(schedule=SCHEDULE)
    agent = _trained_tabular("q_learning", 0.0)
    agent.save(tmp_path / "q.npz")  # type: ignore[attr-defined]
    on_file = agent_from_spec(agent.spec())
    agent.params["learning_rate"] = 1.0
    agent.train(CommandSelectionEnv(world=world), episodes=40, seed=500, progress_bar=False)  # type: ignore[attr-defined]
    assert not np.array_equal(agent.q, on_file.q)  # type: ignore[attr-defined]
    _assert_every_path_equals_loop(agent)
    mine = simulate_users(world, agent, SEEDS, record="trials").rollout.trials.action  # type: ignore[union-attr]
    theirs = simulate_users(world, on_file, SEEDS, record="trials").rollout.trials.action  # type: ignore[union-attr]
    assert (mine != theirs).any()


def test_prepare_agent_and_simulate_log_use_the_object() -> None:
    from shortcut_gym.lab.checks.predictive import simulate_log

    world = make_world(schedule=SCHEDULE)
    agent = _trained_tabular("q_learning", 0.0)
    assert prepare_agent(agent, world) == 0.0
    log = simulate_log(world, agent, 6, np.random.default_rng(3))
    fresh = simulate_log(world, agent_from_spec({"name": "q_learning", "params": dict(agent.params)}), 6,
                         np.random.default_rng(3))
    assert not log["action"].equals(fresh["action"])  # the trained table acts otherwise than a new one


def test_planner_object_is_prepared_itself() -> None:
    world = make_world(schedule=SCHEDULE)
    agent = make_agent("bounded_optimal", n_bins=12, n_weight_bins=4, select_users=0)
    assert agent.context is None
    prepare_agent(agent, world)
    assert agent.context is not None and agent.context.world is world  # the object itself was prepared
    _assert_every_path_equals_loop(agent)


@pytest.mark.parametrize("deterministic", [True, False])
def test_sb3_model_trained_in_memory_is_simulated(deterministic: bool) -> None:
    pytest.importorskip("stable_baselines3")
    world = make_world(schedule=SCHEDULE)
    agent = make_agent("ppo", deterministic=deterministic, hyperparameters={"n_steps": 64, "batch_size": 64})
    agent.train(world, total_timesteps=256, seed=0, progress_bar=False, n_envs=2)  # type: ignore[attr-defined]
    assert agent.spec()["model_path"] is None
    _assert_every_path_equals_loop(agent)


def test_planner_built_for_its_own_world_is_refused_on_another() -> None:
    from shortcut_gym.envs.errors import WorldMismatchError

    world = make_world(schedule=SCHEDULE)
    other = make_world(schedule={**SCHEDULE, "gap_h": 200.0})
    agent = make_agent("planned_choice", world={"schedule": SCHEDULE}, beta=3.0, n_bins=12, n_weight_bins=4)
    simulate_users(world, agent, SEEDS[:2])  # its own world: runs
    with pytest.raises(WorldMismatchError, match="simulate_users.*planned_choice"):
        simulate_users(other, agent, SEEDS[:2])
    with pytest.raises(WorldMismatchError, match="prepare_agent"):
        prepare_agent(agent, other)


@pytest.mark.parametrize("deterministic", [True, False])
def test_sb3_model_just_trained_drives_one_object_per_user(deterministic: bool) -> None:
    pytest.importorskip("stable_baselines3")
    world = make_world(schedule=SCHEDULE)
    agent = make_agent("ppo", deterministic=deterministic, hyperparameters={"n_steps": 64, "batch_size": 64})
    agent.train(world, total_timesteps=256, seed=0, progress_bar=False, n_envs=2)  # type: ignore[attr-defined]
    per_user = simulate_users(world, agent, SEEDS, use_batch_policy=False, record="trials")  # copies the object
    actions, durations = _looped(agent)
    np.testing.assert_array_equal(per_user.rollout.trials.action, actions)  # type: ignore[union-attr]
    np.testing.assert_array_equal(per_user.rollout.trials.duration_s, durations)  # type: ignore[union-attr]
