"""The headline time lost (logged total minus the planner simulated on the participant's own
schedule) against independent Monte Carlo on the Gymnasium env, on both memories.

Truth: the participant policy and the yardstick planner run through ``CommandSelection-v0`` on the
participant's replayed schedule with the same seeds (common random numbers), their mean difference.
The library runs the planner on the batched simulator with its own seeds; both are Monte Carlo
estimates of E[own policy] - E[planner] on that schedule, so they must agree within 3 combined
standard errors, with no allowance for approximation (the headline needs no value function).
"""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, schedule_of, validate_log
from shortcut_gym.lab.rationality import PlannerOptions, simulated_time_lost

OPTIONS = PlannerOptions()
#: (memory kind, encoding s of a learn trial, hours between sessions); None keeps the default.
WORLDS = {
    "actr-default": ("actr", None, None),
    "actr-dear learning, 7 day gaps": ("actr", 3.0, 168.0),
    "exponential-dear learning, 1 h gaps": ("exponential", 3.0, 1.0),
}
ENV_SEEDS = 32
SIMS = 256


def world_of(name: str):
    memory, encoding_s, gap_h = WORLDS[name]
    schedule = {"sessions": 4, "trials_per_session": 40, **({"gap_h": gap_h} if gap_h else {})}
    costs = {"learn": {"encoding_s": encoding_s}} if encoding_s else None
    return make_world(schedule=schedule, costs=costs, memory={"kind": memory})


def planner_of(world):
    return cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)


def env_total(env: CommandSelectionEnv, agent, seed: int, schedule) -> tuple[float, np.ndarray]:
    """Total seconds and the targets met by one episode of ``agent`` replaying ``schedule``."""
    obs, info = env.reset(seed=seed, options={"schedule": schedule})
    agent.reset(seed)
    total, done, targets = 0.0, False, []
    while not done:
        targets.append(info["target"])
        a = agent.act(obs, info)
        nxt, r, term, trunc, step = env.step(a)
        agent.observe(Transition(obs, a, float(r), nxt, step, term, trunc))
        total -= float(r)
        obs, info, done = nxt, step, term or trunc
    return total, np.asarray(targets)


def crn_difference(world, policy, planner, schedule, seeds) -> np.ndarray:
    """Per seed: the policy's total minus the planner's on the same seed and schedule (env)."""
    env = CommandSelectionEnv(world=world)
    for agent in (policy, planner):
        if agent.context is None:
            from shortcut_gym.agents.rollout import context_of

            agent.bind(context_of(env))
    return np.array([env_total(env, policy, s, schedule)[0] - env_total(env, planner, s, schedule)[0]
                     for s in seeds])


@pytest.mark.parametrize("name", sorted(WORLDS))
def test_an_always_menu_participant_loses_the_env_monte_carlo_loss_on_their_own_schedule(name):
    world = world_of(name)
    planner = planner_of(world)
    log = validate_log(simulate_log(world, make_agent("always_menu"), 3, np.random.default_rng(5), prefix="menu"),
                       world.commands)
    for pid in log["participant"].unique():
        trials = participant_trials(log, pid)
        schedule = schedule_of(trials)
        # the replay is exact: the env meets the logged targets in order, and the logged always-menu
        # user (no trial-time noise, no recall draw) takes the logged time again to the rounding
        env = CommandSelectionEnv(world=world)
        menu = make_agent("always_menu")
        from shortcut_gym.agents.rollout import context_of

        menu.bind(context_of(env))
        again, targets = env_total(env, menu, 1, schedule)
        np.testing.assert_array_equal(targets, trials["command"].to_numpy())
        assert again == pytest.approx(trials["duration_s"].sum(), rel=1e-12)
        diff = crn_difference(world, menu, planner, schedule, range(7000, 7000 + ENV_SEEDS))
        got = simulated_time_lost(trials, world, OPTIONS, SIMS, seed=3)
        se = np.hypot(got.lost_se, diff.std(ddof=1) / np.sqrt(ENV_SEEDS))
        assert diff.mean() > 20.0 and se < 0.05 * diff.mean()  # a real loss, measured tightly
        assert got.lost_s == pytest.approx(diff.mean(), abs=3 * se), (pid, got, diff.mean(), se)
        assert got.observed_s == pytest.approx(trials["duration_s"].sum())
        assert got.lost_se == pytest.approx(got.optimum_sd_s / np.sqrt(SIMS))


@pytest.mark.parametrize("name", sorted(WORLDS))
def test_planner_participants_lose_nothing_within_their_luck(name):
    world = world_of(name)
    planner = planner_of(world)
    k = 12
    log = validate_log(simulate_log(world, planner, k, np.random.default_rng(11), prefix="plan"), world.commands)
    got = [simulated_time_lost(participant_trials(log, f"plan-{i}"), world, OPTIONS, SIMS, seed=4) for i in range(k)]
    lost = np.array([g.lost_s for g in got])
    # the truth with common random numbers is exactly zero: the planner against itself on one seed
    trials = participant_trials(log, "plan-0")
    assert np.all(crn_difference(world, planner, planner, schedule_of(trials), range(3)) == 0.0)
    # each history is one draw of the planner's total: its loss is luck, on the scale of one
    # simulated user's spread; over the group the mean is zero within 3 standard errors
    se = np.hypot(lost.std(ddof=1) / np.sqrt(k), np.mean([g.lost_se for g in got]))
    assert se < 4.0
    assert abs(lost.mean()) < 3 * se, (lost.mean(), se)
    sd = np.mean([g.optimum_sd_s for g in got])
    assert lost.std(ddof=1) == pytest.approx(sd, rel=0.6)  # the luck is the planner's own spread


def test_bad_inputs_are_refused_naming_them():
    world = world_of("actr-default")
    log = validate_log(simulate_log(world, make_agent("always_menu"), 1, np.random.default_rng(0)), world.commands)
    trials = participant_trials(log, "sim-0")
    with pytest.raises(ConfigError, match="n_sims must be >= 1, got 0"):
        simulated_time_lost(trials, world, OPTIONS, 0)
    with pytest.raises(ConfigError, match="at least one trial"):
        simulated_time_lost(trials.iloc[:0], world, OPTIONS, 4)
