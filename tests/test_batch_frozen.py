"""Compiled policies of the fixed-rule agents equal the looped env + agent, per agent family."""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import gymnasium as gym
import numpy as np
import pandas as pd
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.frozen_policy import FrozenBatchPolicy, first_float32_decoding_to
from shortcut_gym.agents.planner.compiled_lookup import CompiledPlanLookup
from shortcut_gym.agents.planner.selection import PolicyChoice
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.rollout import UserSums, context_of_world, drive_batch, run_episode
from shortcut_gym.envs import ENV_ID, BatchSimulator, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.sweep.batch import build_agent, simulate_users

SCHEDULE = {"sessions": 3, "trials_per_session": 30, "gap_h": [20.0, 0.5]}
SEEDS = [3, 7, 11, 2024, 31337]
FIELDS = ("trials", "time_s", "outcomes", "actions", "command_time_s", "command_uses")
SOFTMAX = {"b_hotkey": -1.0, "b_learn": -2.0, "w_hotkey_log_exposure": 0.9, "w_learn_log_exposure": -0.4}
SPECS: list[dict[str, Any]] = [
    {"name": "always_menu"},
    {"name": "always_hotkey"},
    {"name": "learn_first_k", "params": {"k": 0}},
    {"name": "learn_first_k", "params": {"k": 3}},
    {"name": "random"},
    {"name": "random", "params": {"p_hotkey": 0.0, "p_learn": 0.25}},
    {"name": "static_softmax", "params": SOFTMAX},
    {"name": "static_softmax", "covariates": ["session"],
     "params": {"b_hotkey": -0.5, "b_learn": -1.0, "w_hotkey_session": 0.8, "w_learn_session": -0.6}},
    {"name": "static_softmax", "covariates": ["log_exposure", "session"],
     "params": {**SOFTMAX, "w_hotkey_session": 0.5, "w_learn_session": -0.3}},
    {"name": "sarsa", "params": {"epsilon": 0.3}},
]
CASES = [(s, m) for m in (None, "spacing") for s in SPECS]
IDS = [f"{s['name']}{i % len(SPECS)}-{m}" for i, (s, m) in enumerate(CASES)]


def _random_table(agent: Agent, seed: int) -> Agent:
    """A tabular agent acting on a random Q table (so every cell feature changes choices)."""
    agent.clear()  # type: ignore[attr-defined]
    agent.q = np.random.default_rng(seed).normal(size=agent.q.shape)  # type: ignore[attr-defined]
    return agent


def _looped_sums(world_kwargs: dict[str, Any], make: Any, n_sess: int, n_cmd: int) -> UserSums:
    """Sums of gymnasium.make env + agent stepped trial by trial (trial order, as the batch adds)."""
    env = gym.make(ENV_ID, **world_kwargs)
    frames = [run_episode(env, make(), seed=s).assign(user=i) for i, s in enumerate(SEEDS)]
    df = pd.concat(frames, ignore_index=True)
    out = UserSums.zeros(len(SEEDS), n_sess, n_cmd)
    for r in df.itertuples():
        out.trials[r.user, r.session] += 1
        out.time_s[r.user, r.session] += r.duration_s
        out.outcomes[r.user, r.session, k.OUTCOME_NAMES.index(r.outcome)] += 1
        out.actions[r.user, r.session, k.ACTION_NAMES.index(r.action)] += 1
        out.command_time_s[r.user, r.command] += r.duration_s
        out.command_uses[r.user, r.command] += 1
    return out


def _assert_sums_equal(a: Any, b: Any) -> None:
    for f in FIELDS:
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f), err_msg=f)


@pytest.mark.parametrize(("spec", "memory"), CASES, ids=IDS)
def test_compiled_policy_equals_looped_env_agent(spec: dict[str, Any], memory: str | None) -> None:
    world = make_world(schedule=SCHEDULE, memory=memory)
    fused = simulate_users(world, spec, SEEDS)
    threaded = simulate_users(world, spec, SEEDS, threads=2, chunk_users=2)
    stepped = simulate_users(world, spec, SEEDS, fused=False)
    per_user = simulate_users(world, spec, SEEDS, use_batch_policy=False)
    looped = _looped_sums({"schedule": SCHEDULE, "memory": memory}, lambda: agent_from_spec(spec),
                          fused.trials.shape[1], world.commands.n_commands)
    for other in (threaded, stepped, per_user, looped):
        _assert_sums_equal(fused, other)


@pytest.mark.parametrize("name", ["q_learning", "sarsa"])
def test_tabular_policy_of_a_learned_table_equals_looped_env(name: str) -> None:
    world = make_world(schedule=SCHEDULE)
    agent = _random_table(build_agent({"name": name, "params": {"epsilon": 0.2}}, world), seed=4)
    runs = []
    for fused in (True, False):
        sim = BatchSimulator(world)
        sim.reset(seeds=SEEDS)
        runs.append(drive_batch(sim, agent, SEEDS, fused=fused).sums)
    looped = _looped_sums({"schedule": SCHEDULE}, lambda: agent, runs[0].trials.shape[1], world.commands.n_commands)
    _assert_sums_equal(runs[0], runs[1])
    _assert_sums_equal(runs[0], looped)
    # the random table makes the greedy action vary between cells, so all three actions occur
    assert (runs[0].actions.sum(axis=(0, 1)) > 0).all()


def test_tabular_cells_follow_every_feature() -> None:
    """Per-trial batch actions equal the agent's own choices trial by trial, with every cell
    feature visited in more than one bucket (long gaps and short ones, repeated learning)."""
    world = make_world(schedule={"sessions": 4, "trials_per_session": 40, "gap_h": [0.2, 30.0, 2.0]})
    agent = _random_table(build_agent({"name": "q_learning", "params": {"epsilon": 0.0}}, world), seed=9)
    sim = BatchSimulator(world)
    sim.reset(seeds=SEEDS)
    policy = agent.batch_policy(len(SEEDS), SEEDS)  # type: ignore[attr-defined]
    singles = [build_agent(agent, world) for _ in SEEDS]
    cells = set()
    for one, seed in zip(singles, SEEDS, strict=True):
        one.q = agent.q  # type: ignore[attr-defined]
        one.reset(seed)
    for _ in range(sim.horizon):
        targets = sim.targets().copy()
        acts = policy.actions(targets, sim.obs)
        for b, one in enumerate(singles):
            info = {"target": int(targets[b])}
            assert acts[b] == one.act(sim.obs[b], info)
            cells.add(one.state(sim.obs[b], info)[1:])  # type: ignore[attr-defined]
        sim.step(acts)
        policy.observe(targets, acts, sim.outcome, -sim.reward)
    for j in range(4):
        assert len({c[j] for c in cells}) > 1, f"cell feature {j} never changed bucket"


@pytest.mark.parametrize("edge", [0.5, 1.5, 4.5, 3600.0, 1e-3, 7.25e5])
def test_float32_threshold_is_the_first_decoding_at_or_above_the_edge(edge: float) -> None:
    f = first_float32_decoding_to(edge)
    below = np.nextafter(f, np.float32(-np.inf))
    assert np.expm1(np.float64(f)) >= edge > np.expm1(np.float64(below))


def test_compiled_run_leaves_simulator_as_stepping() -> None:
    world = make_world(schedule=SCHEDULE, observe_recall=True)
    spec = {"name": "static_softmax", "covariates": ["log_exposure", "session"], "params": SOFTMAX}
    agent = build_agent(spec, world)
    sims = []
    for _ in range(2):
        sim = BatchSimulator(world)
        sim.reset(seeds=SEEDS)
        sims.append(sim)
    fused = agent.batch_policy(len(SEEDS), SEEDS)  # type: ignore[attr-defined]
    fused.run(sims[0])
    sim, pol = sims[1], agent.batch_policy(len(SEEDS), SEEDS)  # type: ignore[attr-defined]
    for t in range(sim.horizon):
        targets = sim.targets().copy()
        pol.set_session(sim.sched_session[:, t])
        acts = pol.actions(targets, sim.obs)
        sim.step(acts)
        pol.observe(targets, acts, sim.outcome, -sim.reward)
    for attr in ("command_float_state", "command_counts", "traces", "user_state", "obs", "reward", "outcome",
                 "operator_time_s", "p_recall"):
        np.testing.assert_array_equal(getattr(sims[0], attr), getattr(sim, attr), err_msg=attr)
    np.testing.assert_array_equal(fused.uses, pol.uses)
    np.testing.assert_array_equal(fused.pcg, pol.pcg)  # the same number of draws per user
    again = BatchSimulator(world)
    again.reset(seeds=SEEDS)
    with pytest.raises(RuntimeError, match="fresh"):
        fused.run(again)
    with pytest.raises(RuntimeError, match="just reset"):
        agent.batch_policy(len(SEEDS), SEEDS).run(sims[1])  # type: ignore[attr-defined]


def test_bad_policies_are_refused() -> None:
    world = make_world(schedule=SCHEDULE)
    with pytest.raises(ValueError, match="exceeds 1"):
        build_agent({"name": "random", "params": {"p_hotkey": 0.7, "p_learn": 0.6}}, world).batch_policy(2, [0, 1])
    learner = build_agent({"name": "sarsa"}, world)
    learner.learning = True  # type: ignore[attr-defined]
    with pytest.raises(ValueError, match="learning off"):
        learner.batch_policy(2, [0, 1])  # type: ignore[attr-defined]
    with pytest.raises(ValueError, match="seeds"):
        build_agent({"name": "random"}, world).batch_policy(2, [-1, 1])  # type: ignore[attr-defined]
    with pytest.raises(ValueError, match="3 seeds for 2 users"):
        build_agent({"name": "always_menu"}, world).batch_policy(2, [0, 1, 2])  # type: ignore[attr-defined]
    unbound = agent_from_spec({"name": "learn_first_k"})
    with pytest.raises(ValueError, match="bind a context"):
        unbound.batch_policy(2, [0, 1])  # type: ignore[attr-defined]
    unbound.bind(context_of_world(world))
    assert unbound.batch_policy(2, [0, 1]).n_users == 2  # type: ignore[attr-defined]
    with pytest.raises(ConfigError):
        agent_from_spec({"name": "learn_first_k", "params": {"k": 1.5}})


@pytest.mark.parametrize("aids", ["key_labels", "nudge", "menu_lockout", "warmup"])
def test_compiled_policy_equals_looped_env_with_interface_aids(aids: str) -> None:
    world = make_world(schedule=SCHEDULE, aids=aids)
    for spec in ({"name": "learn_first_k", "params": {"k": 1}}, {"name": "static_softmax", "params": SOFTMAX}):
        fused = simulate_users(world, spec, SEEDS)
        looped = _looped_sums({"schedule": SCHEDULE, "aids": aids}, lambda s=spec: agent_from_spec(s),
                              fused.trials.shape[1], world.commands.n_commands)
        _assert_sums_equal(fused, looped)


PLANNER_CHOICES = [
    PolicyChoice("always_menu"),
    PolicyChoice("always_hotkey", commands=(True, False) * 6),
    PolicyChoice("learn_first_k", 2),
    PolicyChoice("learn_first_k", 1, commands=(False, True, True) * 4),
    PolicyChoice("plan"),
    PolicyChoice("plan", commands=(True, True, False) * 4),
]


@pytest.mark.parametrize("choice", PLANNER_CHOICES, ids=[c.label for c in PLANNER_CHOICES])
def test_planner_batch_policy_equals_looped_env_for_every_kind_of_choice(choice: PolicyChoice) -> None:
    schedule = {"sessions": 2, "trials_per_session": 15, "gap_h": 20.0}
    world = make_world(schedule=schedule)
    assert world.commands.n_commands == 12
    agent = build_agent({"name": "bounded_optimal", "n_bins": 8, "n_weight_bins": 3, "select_users": 2}, world)
    agent.prepare()  # type: ignore[attr-defined]
    agent.plan = replace(agent.plan, choice=choice)  # type: ignore[attr-defined]
    runs = []
    for batch, fused in ((True, True), (True, False), (False, True)):
        sim = BatchSimulator(world)
        sim.reset(seeds=SEEDS)
        runs.append(drive_batch(sim, agent, SEEDS, use_batch_policy=batch, fused=fused).sums)
    looped = _looped_sums({"schedule": schedule}, lambda: agent, runs[0].trials.shape[1], world.commands.n_commands)
    for other in runs[1:] + [looped]:
        _assert_sums_equal(runs[0], other)
    policy = agent.batch_policy(2, [0, 1])  # type: ignore[attr-defined]
    assert isinstance(policy, CompiledPlanLookup if choice.kind == "plan" else FrozenBatchPolicy)
    if choice.commands is not None:  # the commands left out are always selected from the menu
        left_out = ~np.array(choice.commands)
        assert runs[0].command_uses[:, left_out].sum() > 0
        n_menu = runs[0].actions[:, :, k.MENU].sum()
        assert n_menu >= runs[0].command_uses[:, left_out].sum()
