"""The fused compiled loop (learning policy + simulator) equals the per-trial batch path and the looped env."""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np
import pandas as pd
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents.learning import MECHANISMS
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import run_episode
from shortcut_gym.envs import ENV_ID, BatchSimulator, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.lab.sweep.batch import build_agent, simulate_users

SCHEDULE = {"sessions": 3, "trials_per_session": 30, "gap_h": [20.0, 3.0]}
SEEDS = [3, 7, 11, 2024, 31337]
FIELDS = ("trials", "time_s", "outcomes", "actions", "command_time_s", "command_uses")
PLANNER = {"name": "composed_learner", "mechanisms": ["value", "memory_aware", "planning", "incidental", "forgetting",
                                                   "perseveration", "lapse"]}
EVERY = {"name": "composed_learner", "mechanisms": list(MECHANISMS)}
LEARNERS = {"rescorla_wagner": {"name": "rescorla_wagner"}, "composed_planner": PLANNER, "composed_all": EVERY}
CASES = [(name, memory) for name in LEARNERS for memory in (None, "spacing")]
IDS = [f"{n}-{m}" for n, m in CASES]


def _looped_sums(spec: dict[str, Any], memory: str | None, n_sess: int, n_cmd: int) -> dict[str, np.ndarray]:
    env = gym.make(ENV_ID, schedule=SCHEDULE, memory=memory)
    frames = [run_episode(env, agent_from_spec(spec), seed=s).assign(user=i) for i, s in enumerate(SEEDS)]
    df = pd.concat(frames, ignore_index=True)
    n = len(SEEDS)
    out = {"trials": np.zeros((n, n_sess), dtype=np.int64), "time_s": np.zeros((n, n_sess)),
           "outcomes": np.zeros((n, n_sess, 5), dtype=np.int64), "actions": np.zeros((n, n_sess, 3), dtype=np.int64),
           "command_time_s": np.zeros((n, n_cmd)), "command_uses": np.zeros((n, n_cmd), dtype=np.int64)}
    for r in df.itertuples():  # trial order within each user, as both batched paths add
        out["trials"][r.user, r.session] += 1
        out["time_s"][r.user, r.session] += r.duration_s
        out["outcomes"][r.user, r.session, k.OUTCOME_NAMES.index(r.outcome)] += 1
        out["actions"][r.user, r.session, k.ACTION_NAMES.index(r.action)] += 1
        out["command_time_s"][r.user, r.command] += r.duration_s
        out["command_uses"][r.user, r.command] += 1
    return out


@pytest.mark.parametrize(("name", "memory"), CASES, ids=IDS)
def test_fused_sums_equal_per_trial_batch_and_looped_env(name: str, memory: str | None) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory)
    spec = LEARNERS[name]
    fused = simulate_users(world, spec, SEEDS)
    threaded = simulate_users(world, spec, SEEDS, threads=2, chunk_users=2)
    stepped = simulate_users(world, spec, SEEDS, fused=False)
    looped = _looped_sums(spec, memory, fused.trials.shape[1], world.commands.n_commands)
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(fused, f), getattr(stepped, f), err_msg=f)
        np.testing.assert_array_equal(getattr(threaded, f), getattr(stepped, f), err_msg=f)
        np.testing.assert_array_equal(getattr(fused, f), looped[f], err_msg=f)
    # the runs exercise every action and both hotkey outcomes, so the equality is not vacuous
    assert (fused.actions.sum(axis=(0, 1)) > 0).all()
    assert fused.outcomes[:, :, k.OUT_HOTKEY].sum() > 0
    assert fused.outcomes[:, :, [k.OUT_FORGOTTEN, k.OUT_WRONG]].sum() > 0


@pytest.mark.parametrize(("name", "memory"), CASES, ids=IDS)
def test_fused_run_leaves_simulator_and_policy_as_stepping(name: str, memory: str | None) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory, observe_recall=True)
    agent = build_agent(LEARNERS[name], world)
    sims, policies = [], []
    for _ in range(2):
        sim = BatchSimulator(world)
        sim.reset(seeds=SEEDS)
        sims.append(sim)
        policies.append(agent.batch_policy(len(SEEDS), SEEDS))
    policies[0].run(sims[0])
    # a third run whose agent generators were made beforehand draws its uniforms from them
    sim2 = BatchSimulator(world)
    sim2.reset(seeds=SEEDS)
    pol2 = agent.batch_policy(len(SEEDS), SEEDS)
    assert len(pol2.gens) == len(SEEDS)
    pol2.run(sim2)
    sim, pol = sims[1], policies[1]
    for _ in range(sim.horizon):
        targets = sim.targets().copy()
        acts = pol.actions(targets, sim.obs)
        sim.step(acts)
        pol.observe(targets, acts, sim.outcome, -sim.reward)
    for attr in ("command_float_state", "command_counts", "traces", "user_state", "obs", "reward", "outcome",
                 "operator_time_s", "p_recall"):
        np.testing.assert_array_equal(getattr(sims[0], attr), getattr(sim, attr), err_msg=attr)
        np.testing.assert_array_equal(getattr(sim2, attr), getattr(sim, attr), err_msg=attr)
    for i, (a, b) in enumerate(zip(policies[0].state, pol.state, strict=True)):
        np.testing.assert_array_equal(a, b, err_msg=f"policy state {i}")
    assert policies[0].trial == pol.trial == sim.horizon


def test_fused_run_needs_fresh_simulator_and_policy() -> None:
    world = make_world(schedule=SCHEDULE)
    agent = build_agent(PLANNER, world)
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    with pytest.raises(ValueError, match="users"):
        agent.batch_policy(2, [1, 2]).run(sim)
    pol = agent.batch_policy(len(SEEDS), SEEDS)
    pol.run(sim)
    with pytest.raises(RuntimeError, match="just reset"):
        agent.batch_policy(len(SEEDS), SEEDS).run(sim)
