"""Time lost against a Monte Carlo simulation, on both memories over a family of worlds.

Two figures are checked. The headline ``simulated_time_lost_s`` (logged total minus the planner
simulated on the participant's own schedule) must meet the truth within 3 standard errors in every
cell, with no allowance: it has no approximation, only Monte Carlo error. The decomposition
``q_time_lost_s`` (the planner's Q-values along the observed path) is held to the looser bound below.

The truth is the simulated loss: a participant policy minus the yardstick planner on the same
simulated users (common random numbers: each user's schedule and recall draws shared), 128 users.
The prediction is the mean over 16 participants simulated by that policy of the yardstick's summed
time lost (each on their own schedule: the values take the expectation over the schedule too).
Tolerance: 3 combined standard errors (of the simulated difference and of the participants' mean)
plus ``BOUND`` of the simulated loss for the plan's remaining approximations (gap quantiles,
uses-left rounding, the hand's mean field, the menu-expertise count; docs/rationality.md lists the
measured errors). ``KNOWN_GAPS`` are cells where the yardstick is measured outside that bound; they
are strict expected failures, so a fix that brings one inside shows up.
"""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.rationality.analysis import PlannerOptions, assess_choices, simulated_time_lost

OPTIONS = PlannerOptions()
USERS = 128
PARTICIPANTS = 16
BOUND = 0.06
#: Participants per cell for the headline: each history carries its own luck with recall (the
#: decomposition's values take the expectation), so its group mean needs more of them.
HEADLINE_PARTICIPANTS = 64
#: (encoding s of a learn trial, hours between sessions); None keeps the default (1 s, 24 h).
WORLDS = {
    "default": (None, None),
    "cheap learning, 1 h gaps": (0.5, 1.0),
    "cheap learning, 7 day gaps": (0.5, 168.0),
    "dear learning, 1 h gaps": (3.0, 1.0),
    "dear learning, 7 day gaps": (3.0, 168.0),
}
MEMORIES = ("actr", "exponential")
POLICIES = ("always_menu", "learn_first_1")
#: (memory, world, policy): cells where the decomposition is measured outside the tolerance,
#: predicted against simulated seconds (docs/rationality.md); the headline meets them all. The
#: ACT-R ones are not the lumped memory's recall: along the plan's own path its recall is the
#: simulator's within a point (tests/test_agents_planner_recall.py).
KNOWN_GAPS = {
    ("actr", "default", "always_menu"): "predicted 97.1 s against 82.8 s simulated (+17%)",
    ("actr", "cheap learning, 7 day gaps", "always_menu"): "predicted 115.9 s against 104.7 s simulated (+11%)",
    ("actr", "dear learning, 1 h gaps", "learn_first_1"): "predicted 6.9 s against 3.2 s simulated",
    ("actr", "dear learning, 7 day gaps", "always_menu"): "predicted 74.9 s against 44.0 s simulated (+70%)",
    ("exponential", "dear learning, 1 h gaps", "always_menu"): "predicted 154.3 s against 195.7 s simulated (-21%)",
}


def world_of(memory: str, name: str):
    encoding_s, gap_h = WORLDS[name]
    schedule = {"sessions": 4, "trials_per_session": 40, **({"gap_h": gap_h} if gap_h else {})}
    costs = {"learn": {"encoding_s": encoding_s}} if encoding_s else None
    return make_world(schedule=schedule, costs=costs, memory={"kind": memory})


def policy(name: str):
    return make_agent("learn_first_k", k=1) if name == "learn_first_1" else make_agent(name)


def simulated_totals(world, agent, seeds):
    agent.bind(context_of_world(world))
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    return drive_batch(sim, agent, seeds).sums.time_s.sum(axis=1)


CASES = [pytest.param(m, w, p, marks=[pytest.mark.xfail(strict=True, reason=KNOWN_GAPS[(m, w, p)])]
                      if (m, w, p) in KNOWN_GAPS else [], id=f"{m}-{w}-{p}")
         for m in MEMORIES for w in WORLDS for p in POLICIES]


@pytest.mark.parametrize("memory,world_name,policy_name", CASES)
def test_predicted_time_lost_is_the_simulated_loss(memory, world_name, policy_name):
    world = world_of(memory, world_name)
    planner = cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    seeds = list(range(9000, 9000 + USERS))
    diff = simulated_totals(world, policy(policy_name), seeds) - simulated_totals(world, planner, seeds)
    log = validate_log(simulate_log(world, policy(policy_name), PARTICIPANTS, np.random.default_rng(7), prefix="p"),
                       world.commands)
    lost = np.array([assess_choices(participant_trials(log, pid), world, OPTIONS)["q_time_lost_s"].sum()
                     for pid in log["participant"].unique()])
    se = np.hypot(diff.std(ddof=1) / np.sqrt(USERS), lost.std(ddof=1) / np.sqrt(PARTICIPANTS))
    assert se < 0.1 * max(abs(diff.mean()), 20.0)  # the check is tight enough to mean something
    tolerance = 3 * se + BOUND * abs(diff.mean())
    assert lost.mean() == pytest.approx(diff.mean(), abs=tolerance), (lost.mean(), diff.mean(), se)


@pytest.mark.parametrize("memory,world_name,policy_name",
                         [pytest.param(m, w, p, id=f"{m}-{w}-{p}") for m in MEMORIES for w in WORLDS for p in POLICIES])
def test_simulated_time_lost_is_the_simulated_loss_in_every_cell(memory, world_name, policy_name):
    world = world_of(memory, world_name)
    planner = cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    seeds = list(range(9000, 9000 + USERS))
    diff = simulated_totals(world, policy(policy_name), seeds) - simulated_totals(world, planner, seeds)
    log = validate_log(simulate_log(world, policy(policy_name), HEADLINE_PARTICIPANTS, np.random.default_rng(8),
                                    prefix="p"), world.commands)
    got = [simulated_time_lost(participant_trials(log, pid), world, OPTIONS, USERS, seed=1)
           for pid in log["participant"].unique()]
    lost = np.array([g.lost_s for g in got])
    # SE: the participants' spread (their luck and schedules, and the Monte Carlo error of each
    # figure) and the truth's own
    se = np.hypot(diff.std(ddof=1) / np.sqrt(USERS), lost.std(ddof=1) / np.sqrt(HEADLINE_PARTICIPANTS))
    assert se < 0.1 * max(abs(diff.mean()), 20.0)  # the check is tight enough to mean something
    assert lost.mean() == pytest.approx(diff.mean(), abs=3 * se), (lost.mean(), diff.mean(), se)
