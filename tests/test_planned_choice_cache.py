"""Planned choice reads the package's one plan cache, keyed by the world's full content digest:
worlds that differ only in an interface aid get their own plans and action values."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.planned_choice import cached_plan
from shortcut_gym.agents.planner import cache, plan_world
from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.data.logs import log_from_simulation, participant_trials, validate_log

SCHEDULE = {"sessions": 2, "trials_per_session": 20, "gap_h": 10.0}
OPTIONS = {"n_bins": 8, "n_weight_bins": 3}
#: pairs of aid settings that differ in one setting only
AID_PAIRS = [
    ({"nudge": {"commands": "all", "reading_s": 1.5}}, {"nudge": {"commands": "all", "reading_s": 4.0}}),
    ({"key_labels": {"commands": "all", "trace_weight": 0.2}},
     {"key_labels": {"commands": "all", "trace_weight": 1.5}}),
    ({"menu_delay": {"commands": "none"}}, {"menu_delay": {"commands": "all"}}),
    ({"menu_lockout": {"commands": "all", "after_uses": 5}}, {"menu_lockout": {"commands": "all", "after_uses": 2}}),
]
_FRESH = itertools.count()


def _world(aids=None):
    return make_world(schedule=SCHEDULE, aids=aids)


def _menu_log(world) -> pd.DataFrame:
    """One user's trials under always-menu (menu selections trigger the menu-path aids)."""
    rows = run_episode(CommandSelectionEnv(world=world), make_agent("always_menu"), seed=3)
    log = validate_log(log_from_simulation(rows.assign(user=0), world.commands), world.commands)
    return participant_trials(log, log["participant"].iloc[0])


def _uncached_values(world, trials: pd.DataFrame) -> np.ndarray:
    """The logged action values from a planner whose plan is made here, bypassing every cache."""
    planner = BoundedOptimalPlanner(world=world, select_users=0, **OPTIONS)
    planner.plan = plan_world(world, world.horizon, OPTIONS["n_bins"], None, n_weight_bins=OPTIONS["n_weight_bins"],
                              select_users=0)
    planner.reset(0)
    agent = make_agent("planned_choice", world=world, **OPTIONS)
    agent.planner = lambda: planner  # type: ignore[method-assign]
    key = ("uncached", next(_FRESH))  # a key no cached entry has
    agent.plan_key = lambda: key  # type: ignore[method-assign]
    return agent.action_values_of(trials)


@pytest.mark.parametrize("pair", AID_PAIRS, ids=[next(iter(a)) for a, _ in AID_PAIRS])
def test_worlds_differing_in_one_aid_setting_get_their_own_plan_and_values(pair) -> None:
    first, second = _world(pair[0]), _world(pair[1])
    assert first.digest() != second.digest()
    trials = _menu_log(first)
    a = make_agent("planned_choice", world=first, **OPTIONS)
    b = make_agent("planned_choice", world=second, **OPTIONS)
    qa, qb = a.action_values_of(trials), b.action_values_of(trials)  # a first: b must not reuse its plan or values
    assert a.planner().plan is not b.planner().plan
    assert not np.array_equal(qa, qb)
    np.testing.assert_array_equal(qb, _uncached_values(second, trials))
    np.testing.assert_array_equal(qa, _uncached_values(first, trials))


def test_identical_worlds_share_one_plan_object_with_the_planner_agent() -> None:
    aids = {"nudge": {"commands": "all"}}
    made = cache.plans_made()
    one = cached_plan(_world(aids), None, OPTIONS["n_bins"], OPTIONS["n_weight_bins"])
    two = make_agent("planned_choice", world=_world(aids), **OPTIONS).planner()  # an equal world built anew
    planner = BoundedOptimalPlanner(world=_world(aids), select_users=0, **OPTIONS)
    planner.reset(1)
    assert one.plan is two.plan is planner.plan
    assert cache.plans_made() <= made + 1
