"""The planner's batch policy: its executed choice for many simulated users at once.

The plan's :class:`~shortcut_gym.agents.planner.selection.PolicyChoice` decides the path:

* a fixed rule (always-menu, always-hotkey, learn-first-k, each possibly restricted to some
  commands, the menu elsewhere) runs as a compiled frozen rule
  (:mod:`shortcut_gym.agents.frozen_policy`), inside the fused loop or the per-trial batch loop;
* a dynamic-programming plan is looked up inside the compiled fused loop
  (:mod:`shortcut_gym.agents.planner.compiled_lookup`); stepped trial by trial, or for a plan that
  module does not cover, it is looked up per user here (:class:`PlanLookupBatch`) by
  :meth:`BoundedOptimalPlanner.decide` on its own copy of the planner (its tracked memory), fed the
  command, trial and outcome directly (no info dicts or observation copies).

Either way a user's actions are the single planner's for the same user, bit for bit (the same
rule, the same decide/observe code or its compiled rebuild, tested trial by trial).
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.frozen_policy import FrozenBatchPolicy, constant_rule, first_uses_rule, frozen_policy
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import HOTKEY, MENU, OUTCOME_NAMES

if TYPE_CHECKING:
    from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner
    from shortcut_gym.agents.planner.selection import PolicyChoice


def rule_policy(agent: BoundedOptimalPlanner, choice: PolicyChoice, n_users: int,
                seeds: Sequence[int]) -> FrozenBatchPolicy:
    """The compiled frozen policy of a fixed-rule choice."""
    n_cmd = agent.context.n_commands if agent.context is not None else 0
    menu_only = [] if choice.commands is None else [not allowed for allowed in choice.commands]
    if choice.kind == "always_menu":
        rule = constant_rule(MENU)
    elif choice.kind == "always_hotkey":
        rule = constant_rule(HOTKEY, menu_only)
    elif choice.kind == "learn_first_k":
        rule = first_uses_rule(int(choice.k), menu_only)
    else:
        raise ValueError(f"{agent.name}: {choice.label} is not a fixed rule")  # invariant: fixed rules only
    if menu_only and len(menu_only) != n_cmd:
        raise ConfigError(f"{agent.name}: the plan's choice covers {len(menu_only)} commands, the world has {n_cmd}")
    return frozen_policy(agent, n_users, seeds, lambda uses, sessions: rule)


class PlanLookupBatch:
    """Users of a planner following its dynamic-programming plan: one planner copy per user
    (the plan and tables shared), ``decide`` before a trial and ``observe`` after it."""

    def __init__(self, agent: BoundedOptimalPlanner, n_users: int, seeds: Sequence[int]) -> None:
        if len(seeds) != n_users:
            raise ConfigError(f"{agent.name}: {len(seeds)} seeds for {n_users} users")
        agent.reset(int(seeds[0]) if len(seeds) else None)
        self.users = [copy.deepcopy(agent) for _ in seeds]
        for user, seed in zip(self.users, seeds, strict=True):
            user.reset(int(seed))
        self.trial = 0
        self._empty = np.zeros(0, dtype=np.float32)

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """Each user's planned action for its target at the current trial."""
        t = self.trial
        return np.array([u.decide(int(c), t) for u, c in zip(self.users, targets, strict=True)], dtype=np.int64)

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Each user's planner tracks its command's new trace."""
        t, e = self.trial, self._empty
        for u, c, a, o in zip(self.users, targets, actions, outcomes, strict=True):
            u.observe(Transition(e, int(a), 0.0, e, {"command": int(c), "trial": t, "outcome": OUTCOME_NAMES[int(o)]}))
        self.trial += 1
