"""The executed policy's values priced at other hand shares (for charging a participant's losses).

The plan's values price each trial's homing at the optimum's own hand shares (the package
docstring, approximation 2): right for a decision made among the optimum's trials. A participant's
neighbouring trials are theirs, not the optimum's, and the homing time of the world is bilinear in
the two shares (a switch is paid when a trial ending on one device is followed by one starting on
the other), so a loss summed trial by trial from values linearised at the optimum's shares counts
a switch between two changed neighbours twice. For a cost quadratic in the shares the first-order
sum is exact at the midpoint of the two policies' shares (mean-value theorem for quadratics), so
:func:`executed_values` re-prices the executed policy there: each switch is charged once.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from shortcut_gym.agents.planner.action_costs import action_rewards
from shortcut_gym.agents.planner.search import Plan, command_times, expected_uses, novice_terms, plan_shares
from shortcut_gym.agents.planner.solver import policy_evaluation_staged, stacked_csr
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World


def executed_policy(world: World, plan: Plan) -> list[np.ndarray]:
    """Per command the (max_uses + 1, S) actions the planner executes: the plan's argmax where its
    choice follows the plan, else the fixed rule (menu on commands a restricted choice leaves out;
    learn-first-k learns while fewer than k of the command's U expected uses lie before, U - n at n
    uses left, the count of approximation 3)."""
    choice = plan.choice
    out = []
    for c, pol in enumerate(plan.policy):
        stages = np.arange(pol.shape[0])
        if not choice.allows(c) or choice.kind == "always_menu":
            act = np.full_like(pol, k.MENU)
        elif choice.kind == "plan":
            act = pol.copy()
        elif choice.kind == "always_hotkey":
            act = np.full_like(pol, k.HOTKEY)
        else:
            before = np.maximum(expected_uses(world, c) - stages, 0)
            act = np.where((before < choice.k)[:, None], k.LEARN, k.HOTKEY) * np.ones_like(pol)
        act[0] = -1
        out.append(act.astype(np.int64))
    return out


def executed_shares(world: World, plan: Plan) -> tuple[float, float]:
    """(success, attempt) hotkey shares of the executed policy (usage-weighted, over the horizon)."""
    return plan_shares(world, replace(plan, policy=executed_policy(world, plan)))


def executed_values(world: World, plan: Plan, keyboard_share: float, next_hotkey_share: float) -> Plan:
    """A copy of ``plan`` whose ``values`` are the executed policy's (not re-optimised) with every
    trial's homing priced at these shares (:func:`command_times`, menu-expertise term included)."""
    for label, v in (("keyboard_share", keyboard_share), ("next_hotkey_share", next_hotkey_share)):
        if not 0.0 <= v <= 1.0:
            raise ConfigError(f"{label} must be in [0, 1], got {v}")
    policy = executed_policy(world, plan)
    values = []
    for c, mdp in enumerate(plan.mdps):
        times = command_times(world, c, keyboard_share, next_hotkey_share, plan.own_device)
        R = np.ascontiguousarray(action_rewards(times, mdp.activation, mdp.p_recall), dtype=np.float64)
        extra, per_stage = novice_terms(world, c, mdp, plan.max_uses)
        values.append(policy_evaluation_staged(stacked_csr(mdp), R, extra, per_stage, policy[c]))
    return replace(plan, values=values, keyboard_share=float(keyboard_share),
                   next_hotkey_share=float(next_hotkey_share))
