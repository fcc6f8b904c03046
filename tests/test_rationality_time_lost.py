"""Time lost from the planner's values against the simulated loss (each hand switch charged once)."""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.planner.valuation import executed_shares, executed_values
from shortcut_gym.agents.rollout import context_of_world, drive_batch
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log
from shortcut_gym.lab.rationality.analysis import PlannerOptions, assess_choices

SCHEDULE = {"sessions": 4, "trials_per_session": 40}
#: Worlds where the planner's memory model is exact (exponential decay, approximation 1), with
#: homing: default costs; a slow typist with dear learning; fast forgetting with a low threshold.
EXACT_MEMORY_WORLDS = {
    "default costs": {"memory": {"kind": "exponential"}},
    "slow typist": {"costs": {"klm": {"keystroke_s": 0.5}, "learn": {"encoding_s": 3.0}},
                    "memory": {"kind": "exponential"}},
    "fast forgetting": {"memory": {"kind": "exponential", "exponential_rate_per_s": 1e-4, "threshold": -4.0}},
}
OPTIONS = PlannerOptions()
USERS = 64
PARTICIPANTS = 12


def world_of(settings):
    return make_world(schedule=SCHEDULE, **settings)


def simulated_totals(world, agent, seeds):
    agent.bind(context_of_world(world))
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    return drive_batch(sim, agent, seeds).sums.time_s.sum(axis=1)


def test_the_executed_plans_values_at_its_own_shares_are_the_optimal_values():
    # policy evaluation of the optimal policy gives back the backward induction's optimum (Bellman)
    world = world_of({})
    plan = cached_plan(world, None, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users).plan
    assert plan.choice.kind == "plan"
    same = executed_values(world, plan, plan.keyboard_share, plan.next_hotkey_share)
    for mine, theirs in zip(same.values, plan.values, strict=True):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-9)
    # at other shares the values move (the homing is priced there), not the policy
    other = executed_values(world, plan, 0.0, 0.0)
    assert any(not np.allclose(a, b) for a, b in zip(other.values, plan.values, strict=True))


@pytest.mark.parametrize("name", sorted(EXACT_MEMORY_WORLDS))
def test_always_menu_loses_the_simulated_loss_and_the_planner_loses_nothing(name):
    world = world_of(EXACT_MEMORY_WORLDS[name])
    planner = cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    rng = np.random.default_rng(7)
    # the planner's values take the expectation over the future schedule too (the next use is
    # geometric), so the truth is the loss over the world's own schedules: always-menu minus the
    # planner on the same simulated users (each user's schedule and recall draws shared)
    log = validate_log(simulate_log(world, make_agent("always_menu"), PARTICIPANTS, rng, prefix="menu"),
                       world.commands)
    lost = np.array([assess_choices(participant_trials(log, pid), world, OPTIONS)["q_time_lost_s"].sum()
                     for pid in log["participant"].unique()])
    seeds = list(range(9000, 9000 + USERS))
    diff = simulated_totals(world, make_agent("always_menu"), seeds) - simulated_totals(world, planner, seeds)
    se = np.hypot(diff.std(ddof=1) / np.sqrt(USERS), lost.std(ddof=1) / np.sqrt(len(lost)))
    # tolerance: 3 combined standard errors plus 5% of the loss for the plan's approximations (grid,
    # gap quantiles, uses-left rounding; measured -3% on default costs, see docs/rationality.md)
    assert diff.mean() > 20.0
    assert lost.mean() == pytest.approx(diff.mean(), abs=3 * se + 0.05 * diff.mean()), (lost.mean(), diff.mean(), se)
    # a participant simulated by the planner itself (deterministic, no trial noise): nothing lost
    mine = validate_log(simulate_log(world, planner, 1, rng, prefix="plan"), world.commands)
    own = assess_choices(participant_trials(mine, "plan-0"), world, OPTIONS)
    assert own["q_time_lost_s"].sum() == 0.0 and own["optimal"].all()


def test_the_hand_shares_of_the_executed_policy_are_the_planners_simulated_shares():
    # the midpoint pricing reads the optimum's shares from its plan; check them against the simulator
    world = world_of(EXACT_MEMORY_WORLDS["default costs"])
    planner = cached_plan(world, OPTIONS.keyboard_share, OPTIONS.n_bins, OPTIONS.n_weight_bins, OPTIONS.select_users)
    ks, q = executed_shares(world, planner.plan)
    log = simulate_log(world, planner, 12, np.random.default_rng(3))
    assert ks == pytest.approx(float((log["outcome"] == "hotkey").mean()), abs=0.05)
    assert q == pytest.approx(float((log["action"] == "hotkey").mean()), abs=0.05)
