"""SB3 models act for many users through one batched forward pass, equal to the per-user path."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from shortcut_gym.agents.registry import make_agent
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs import BatchSimulator, make_world

SCHEDULE = {"sessions": 2, "trials_per_session": 20, "gap_h": 20.0}
SEEDS = [3, 7, 11, 2024, 31337, 5, 6, 8]
FIELDS = ("trials", "time_s", "outcomes", "actions", "command_time_s", "command_uses")
SMALL = {"ppo": {"n_steps": 64, "batch_size": 64}, "a2c": {"n_steps": 8},
         "dqn": {"learning_starts": 0, "buffer_size": 1000}}
CASES = [("ppo", False), ("ppo", True), ("a2c", False), ("dqn", False)]


def _trained(name: str, deterministic: bool) -> Any:
    world = make_world(schedule=SCHEDULE)
    agent = make_agent(name, context_of_world(world), deterministic=deterministic, hyperparameters=SMALL[name])
    agent.train(world, total_timesteps=128, seed=0, progress_bar=False, n_envs=2)
    return world, agent


@pytest.mark.parametrize(("name", "deterministic"), CASES, ids=[f"{n}-{'det' if d else 'sampled'}" for n, d in CASES])
def test_batched_forward_pass_equals_per_user_agents(name: str, deterministic: bool) -> None:
    world, agent = _trained(name, deterministic)
    runs = []
    for batch in (True, False):
        sim = BatchSimulator(world)
        sim.reset(seeds=SEEDS)
        runs.append(drive_batch(sim, agent, SEEDS, use_batch_policy=batch, keep_trials=True))
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(runs[0].sums, f), getattr(runs[1].sums, f), err_msg=f)
    np.testing.assert_array_equal(runs[0].trials.action, runs[1].trials.action)
    # the probabilities of one batched pass equal those of one observation at a time
    sim = BatchSimulator(world)
    obs = sim.reset(seeds=SEEDS)
    rows = agent.probability_rows(obs)
    single = np.stack([agent.action_probabilities(o, {}) for o in obs])
    np.testing.assert_allclose(rows, single, rtol=1e-6, atol=1e-7)


def test_batch_policy_needs_a_model() -> None:
    with pytest.raises(ValueError, match="train or load"):
        make_agent("ppo").batch_policy(2, [0, 1])
