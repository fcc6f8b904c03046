"""The choice of the executed policy (``select_users``) never changes the action values it reads.

docs/planner.md: a selection only changes which of the two hand-share plans (the menu-start and
keyboard-start fixed points) supplies the values. So the values of a plan made with
``select_users=32`` must be, to the last bit, those of the fixed point it names, solved with no
selection at all; and whenever ``select_users=0`` picks that same fixed point, the two plans give
identical action values, whatever policy the selection executes (the plan, a restriction of it,
a fixed rule).
"""

from __future__ import annotations

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.planner import BoundedOptimalPlanner, build_command_mdp, plan_world
from shortcut_gym.agents.planner.search import fixed_point, predicted_time_s
from shortcut_gym.envs import make_world
from shortcut_gym.lab.checks.predictive import simulate_log
from shortcut_gym.lab.data.logs import participant_trials, validate_log

N_BINS, N_WEIGHT_BINS = 12, 4
#: The family: default costs; hard recall (the selection prefers a fixed rule); cheap learning
#: with exponential memory; dear learning, a slow typist and week-long gaps; power memory, short gaps.
WORLDS = {
    "default": {},
    "hard recall": {"memory": {"threshold": -1.5}, "schedule": {"gap_h": 720.0}},
    "cheap learning, exponential": {"costs": {"learn": {"encoding_s": 0.3}}, "memory": {"kind": "exponential"}},
    "dear learning, slow typist": {"costs": {"klm": {"keystroke_s": 0.5}, "learn": {"encoding_s": 4.0}},
                                   "schedule": {"gap_h": 168.0}},
    "power memory, short gaps": {"memory": {"kind": "power"}, "schedule": {"gap_h": 1.0}},
}


def world_of(settings: dict):
    schedule = {"sessions": 3, "trials_per_session": 30, **settings.get("schedule", {})}
    return make_world(costs=settings.get("costs"), memory=settings.get("memory"), schedule=schedule)


def values_along(world, plan, trials) -> np.ndarray:
    """The planner's action values on every trial of a logged history (memory tracked from the outcomes)."""
    agent = BoundedOptimalPlanner(world=world, n_bins=N_BINS, n_weight_bins=N_WEIGHT_BINS)
    agent.plan = plan
    agent.reset(0)
    empty = np.zeros(0, dtype=np.float32)
    out = []
    for t, (c, outcome) in enumerate(zip(trials["command"].to_numpy(dtype=np.int64),
                                         trials["outcome"].astype(str), strict=True)):
        out.append(agent.action_values(int(c), t))
        agent.observe(Transition(empty, 0, 0.0, empty, {"command": int(c), "trial": t, "outcome": outcome}))
    return np.array(out)


def assert_same_values(world, a, b) -> None:
    for c in range(world.commands.n_commands):
        assert np.array_equal(a.values[c], b.values[c]), c
        assert np.array_equal(a.policy[c], b.policy[c]), c


@pytest.mark.parametrize("name", sorted(WORLDS))
def test_selection_leaves_the_action_values_of_the_plan_it_names_unchanged(name):
    world = world_of(WORLDS[name])
    alone = plan_world(world, n_bins=N_BINS, n_weight_bins=N_WEIGHT_BINS, select_users=0)
    chosen = plan_world(world, n_bins=N_BINS, n_weight_bins=N_WEIGHT_BINS, select_users=32)
    assert alone.choice.kind == "plan" and alone.choice.commands is None  # no selection: the plan as it is
    assert chosen.candidate_times_s, "the selection compared no candidates"
    # the two fixed points solved afresh, without any selection (menu start 0, keyboard start 1)
    mdps = [build_command_mdp(world, c, N_BINS, 0.0, 0.0, N_WEIGHT_BINS) for c in range(world.commands.n_commands)]
    starts = [fixed_point(world, world.horizon, mdps, s, 6) for s in (0.0, 1.0)]
    named = starts[chosen.choice.plan_index]
    assert_same_values(world, chosen, named)
    assert (chosen.keyboard_share, chosen.next_hotkey_share) == (named.keyboard_share, named.next_hotkey_share)
    # select_users=0 executes the fixed point of smaller predicted time (docs/planner.md)
    fewest = min(range(2), key=lambda i: predicted_time_s(world, starts[i]))
    trials = participant_trials(validate_log(simulate_log(world, make_agent("random"), 1, np.random.default_rng(5),
                                                          prefix="r"), world.commands), "r-0")
    assert {"menu", "learned", "hotkey"} <= set(trials["outcome"].astype(str))  # every kind of outcome
    if fewest == chosen.choice.plan_index:
        assert_same_values(world, alone, chosen)
        q_alone, q_chosen = values_along(world, alone, trials), values_along(world, chosen, trials)
        assert np.isfinite(q_alone).all() and np.ptp(q_alone) > 0
        assert np.array_equal(q_alone, q_chosen)
    else:  # a fixed rule carries the predicted-best plan's values, so only a plan choice may differ
        assert chosen.choice.kind == "plan"
        assert_same_values(world, alone, starts[fewest])

