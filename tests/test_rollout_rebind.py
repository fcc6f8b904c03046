"""An agent bound to one world and then run on another acts for the world it runs on: the drivers
(``run_episode``, ``evaluate_agent``, ``drive_batch``, ``evaluate_exactly``, tabular training)
bind it again, so its trials are those of a fresh agent bound to the second world, trial for trial;
agents that cannot be bound again, planners built for their own world and trained models on
another world are refused naming both worlds."""

from __future__ import annotations

from typing import ClassVar

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.baselines import AlwaysMenu
from shortcut_gym.agents.registry import make_agent
from shortcut_gym.agents.rollout import context_of_world, drive_batch, evaluate_agent, run_episode
from shortcut_gym.agents.world_record import describe, world_record
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import WorldMismatchError
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world, same_world

#: Two worlds that differ in costs (keystroke time K) and schedule (sessions, trials, gaps).
QUICK = make_world(costs={"klm": {"keystroke_s": 0.2}}, schedule={"sessions": 1, "trials_per_session": 8})
SLOW = make_world(costs={"klm": {"keystroke_s": 1.5}},
                  schedule={"sessions": 2, "trials_per_session": 6, "gap_h": 2.0, "trial_interval_s": 300.0})
SEEDS = (0, 1, 2)

#: name -> constructor keywords: a baseline, the planners, learning models (one whose look-ahead
#: reads the horizon, one that forgets between uses), the static softmax, an untrained Q-learner.
AGENTS: dict[str, dict] = {
    "learn_first_k": {"k": 1},
    "bounded_optimal": {"n_bins": 4, "n_weight_bins": 1, "select_users": 0},
    "planned_choice": {"n_bins": 4, "n_weight_bins": 1, "beta": 3.0},
    "rescorla_wagner": {"alpha": 0.4, "beta": 4.0},
    "composed_learner": {"mechanisms": ["value", "memory_aware", "planning", "forgetting", "lapse"]},
    "static_softmax": {"covariates": ["log_exposure", "session"], "b_hotkey": -1.0, "w_hotkey_session": 2.0},
    "q_learning": {},
}


def test_the_two_worlds_differ_where_the_agents_look() -> None:
    assert not same_world(QUICK, SLOW)
    assert (QUICK.horizon, SLOW.horizon) == (8, 12)
    assert QUICK.costs.klm.k_s != SLOW.costs.klm.k_s and QUICK.schedule.sessions != SLOW.schedule.sessions


def _fresh(name: str, world=None):
    agent = make_agent(name, **AGENTS[name])
    if world is not None:
        agent.bind(context_of_world(world))
    return agent


@pytest.mark.parametrize("name", list(AGENTS))
def test_run_episode_on_a_second_world_equals_a_fresh_agent_there(name: str) -> None:
    agent = _fresh(name, QUICK)
    first = run_episode(CommandSelectionEnv(world=QUICK), agent, seed=7)
    assert len(first) == QUICK.horizon
    for seed in SEEDS:
        moved = run_episode(CommandSelectionEnv(world=SLOW), agent, seed=seed)
        fresh = run_episode(CommandSelectionEnv(world=SLOW), _fresh(name, SLOW), seed=seed)
        assert len(moved) == SLOW.horizon
        pd.testing.assert_frame_equal(moved, fresh)
    assert same_world(agent.context.world, SLOW) and agent.context.horizon == SLOW.horizon
    # and back: the first world's trials again
    again = run_episode(CommandSelectionEnv(world=QUICK), agent, seed=7)
    pd.testing.assert_frame_equal(again, first)


@pytest.mark.parametrize("name", ["learn_first_k", "bounded_optimal", "composed_learner"])
def test_evaluate_agent_on_a_second_world(name: str) -> None:
    agent = _fresh(name, QUICK)
    evaluate_agent(CommandSelectionEnv(world=QUICK), agent, [0])
    moved = evaluate_agent(CommandSelectionEnv(world=SLOW), agent, SEEDS)
    fresh = evaluate_agent(CommandSelectionEnv(world=SLOW), _fresh(name, SLOW), SEEDS)
    pd.testing.assert_frame_equal(moved, fresh)


@pytest.mark.parametrize("name", ["learn_first_k", "bounded_optimal", "planned_choice", "rescorla_wagner",
                                  "static_softmax"])
@pytest.mark.parametrize("batch", [True, False], ids=["batch-policy", "per-user"])
def test_drive_batch_on_a_second_world(name: str, batch: bool) -> None:
    def run(agent):
        sim = BatchSimulator(SLOW)
        sim.reset(seeds=list(SEEDS))
        return drive_batch(sim, agent, SEEDS, use_batch_policy=batch, keep_trials=True)

    agent = _fresh(name, QUICK)
    quick = BatchSimulator(QUICK)
    quick.reset(seeds=[0])
    drive_batch(quick, agent, [0], use_batch_policy=batch)
    moved, fresh = run(agent), run(_fresh(name, SLOW))
    assert moved.trials is not None and fresh.trials is not None
    assert moved.trials.duration_s.shape == (len(SEEDS), SLOW.horizon)
    np.testing.assert_array_equal(moved.trials.action, fresh.trials.action)
    np.testing.assert_array_equal(moved.trials.duration_s, fresh.trials.duration_s)
    np.testing.assert_array_equal(moved.sums.time_s, fresh.sums.time_s)


def test_the_batched_rollout_matches_the_env_on_the_second_world() -> None:
    """Independent paths agree: the rebound planner's batched totals are its env totals on SLOW."""
    agent = _fresh("bounded_optimal", QUICK)
    run_episode(CommandSelectionEnv(world=QUICK), agent, seed=0)
    sim = BatchSimulator(SLOW)
    sim.reset(seeds=list(SEEDS))
    batched = drive_batch(sim, agent, SEEDS).sums.time_s.sum(axis=1)
    env = evaluate_agent(CommandSelectionEnv(world=SLOW), agent, SEEDS)["total_time_s"].to_numpy()
    np.testing.assert_allclose(batched, env, rtol=1e-9)


def test_a_context_of_the_same_world_is_kept() -> None:
    """Bound to a world equal by content (another object), with its own horizon: nothing is rebound."""
    agent = _fresh("learn_first_k")
    twin = make_world(costs={"klm": {"keystroke_s": 0.2}}, schedule={"sessions": 1, "trials_per_session": 8})
    assert twin is not QUICK and same_world(twin, QUICK)
    context = context_of_world(twin, horizon=5)
    agent.bind(context)
    run_episode(CommandSelectionEnv(world=QUICK), agent, seed=0)
    assert agent.context is context


def test_a_context_without_a_world_is_bound_to_the_env_world() -> None:
    agent = _fresh("bounded_optimal")
    agent.bind(context_of_world(QUICK).__class__(QUICK.commands.n_commands, 3))
    moved = run_episode(CommandSelectionEnv(world=SLOW), agent, seed=1)
    pd.testing.assert_frame_equal(moved, run_episode(CommandSelectionEnv(world=SLOW), _fresh("bounded_optimal", SLOW),
                                                     seed=1))


class _Stuck(AlwaysMenu):
    """An agent that says its state is not rebuilt on bind."""

    name = "stuck_menu"
    rebinds: ClassVar[bool] = False


def test_an_agent_that_cannot_be_bound_again_is_refused_naming_both_worlds() -> None:
    agent = _Stuck()
    agent.bind(context_of_world(QUICK))
    run_episode(CommandSelectionEnv(world=QUICK), agent, seed=0)  # its own world: runs
    with pytest.raises(WorldMismatchError) as refused:
        run_episode(CommandSelectionEnv(world=SLOW), agent, seed=0)
    text = str(refused.value)
    assert text.startswith("run_episode: agent 'stuck_menu' is bound to the world ")
    assert describe(world_record(QUICK)) in text and describe(world_record(SLOW)) in text
    sim = BatchSimulator(SLOW)
    sim.reset(seeds=[0])
    with pytest.raises(WorldMismatchError, match="^drive_batch: agent 'stuck_menu' is bound to the world"):
        drive_batch(sim, agent, [0])


@pytest.mark.parametrize("name", ["bounded_optimal", "planned_choice"])
def test_a_planner_built_for_its_own_world_is_refused_on_another(name: str) -> None:
    options = {k: v for k, v in AGENTS[name].items() if k != "beta"}
    agent = make_agent(name, world=QUICK, **options)
    twin = make_world(costs={"klm": {"keystroke_s": 0.2}}, schedule={"sessions": 1, "trials_per_session": 8})
    assert len(run_episode(CommandSelectionEnv(world=twin), agent, seed=0)) == QUICK.horizon  # the same problem
    with pytest.raises(WorldMismatchError) as refused:
        run_episode(CommandSelectionEnv(world=SLOW), agent, seed=0)
    text = str(refused.value)
    assert f"agent {name!r} was built for the world {describe(world_record(QUICK))}" in text
    assert f"runs on the world {describe(world_record(SLOW))} (costs and schedule differ)" in text


def test_a_trained_table_on_another_world_is_refused_and_allowed_when_asked() -> None:
    agent = make_agent("q_learning")
    agent.train(CommandSelectionEnv(world=QUICK), episodes=2, progress_bar=False)
    with pytest.raises(WorldMismatchError, match="was trained on the world"):
        run_episode(CommandSelectionEnv(world=SLOW), agent, seed=0)
    lenient = make_agent("q_learning", allow_other_world=True)
    lenient.train(CommandSelectionEnv(world=QUICK), episodes=2, progress_bar=False)
    assert len(run_episode(CommandSelectionEnv(world=SLOW), lenient, seed=0)) == SLOW.horizon
    assert same_world(lenient.context.world, SLOW)


def test_an_untrained_table_trains_on_the_world_it_is_given() -> None:
    agent = make_agent("q_learning")
    agent.bind(context_of_world(QUICK))
    totals = agent.train(CommandSelectionEnv(world=SLOW), episodes=1, progress_bar=False)
    assert same_world(agent.context.world, SLOW) and len(totals) == 1
    assert agent.trained_for == world_record(SLOW)


def test_evaluate_exactly_rebinds_the_planner() -> None:
    from shortcut_gym.agents.planner import evaluate_exactly, small_world

    a = small_world(sessions=1, trials_per_session=3, keystroke_s=0.2)
    b = small_world(sessions=2, trials_per_session=2, keystroke_s=1.5)
    agent = make_agent("bounded_optimal", n_bins=4, n_weight_bins=1, select_users=0)
    agent.bind(context_of_world(a))
    evaluate_exactly(a, agent)
    fresh = make_agent("bounded_optimal", n_bins=4, n_weight_bins=1, select_users=0)
    fresh.bind(context_of_world(b))
    assert evaluate_exactly(b, agent) == evaluate_exactly(b, fresh)
