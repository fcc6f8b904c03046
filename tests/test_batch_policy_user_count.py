"""Every registered agent's batch_policy refuses a user count below 1 (or not a whole number) the
same way, naming the agent and the count, before anything else (a model, a plan) is looked at;
a seed list of another length is told as such."""

from __future__ import annotations

from typing import Any

import pytest

from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.envs import make_world
from shortcut_gym.envs.errors import ConfigError

SCHEDULE = {"sessions": 2, "trials_per_session": 6, "gap_h": 20.0}
SMALL_PLAN = {"n_bins": 8, "n_weight_bins": 3, "select_users": 0}


def _bound(name: str) -> Any:
    world = make_world(schedule=SCHEDULE)
    options: dict[str, Any] = {}
    if name in ("bounded_optimal", "planned_choice"):
        options = dict(SMALL_PLAN)
    if name == "composed_learner":
        options = {"mechanisms": ["value", "lapse"]}
    return make_agent(name, context_of_world(world), **options)


@pytest.mark.parametrize("name", sorted(AGENTS))
@pytest.mark.parametrize(("n_users", "seeds"), [(0, []), (-2, [1, 2]), (-1, []), (2.5, [1, 2]), (True, [1])])
def test_user_count_below_one_is_refused_naming_agent_and_count(name: str, n_users: Any, seeds: list[int]) -> None:
    agent = _bound(name)
    with pytest.raises(ConfigError) as err:
        agent.batch_policy(n_users, seeds)
    text = str(err.value)
    assert text.startswith(f"{name}: ")
    assert f"got {n_users!r}" in text and "users" in text and "seeds for" not in text


@pytest.mark.parametrize("name", sorted(AGENTS))
def test_seed_count_mismatch_is_told_as_such(name: str) -> None:
    agent = _bound(name)
    with pytest.raises(ConfigError, match=f"^{name}: 2 seeds for 3 users"):
        agent.batch_policy(3, [1, 2])
