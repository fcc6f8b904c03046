"""Plan search: solve every command's MDP at hand shares found by fixed point (from a menu-only
and from a keyboard-only start; the package docstring, approximation 2), then choose the executed
policy among those plans and fixed rules on common simulated users (:mod:`.selection`)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from shortcut_gym.agents.planner.action_costs import ActionTimes, action_rewards, action_times
from shortcut_gym.agents.planner.mdp import CommandMDP, build_command_mdp
from shortcut_gym.agents.planner.selection import PolicyChoice, select_policy
from shortcut_gym.agents.planner.solver import backward_induction_staged, hotkey_shares, stacked_csr, state_occupancy
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World

#: Simulated users the candidate policies are compared on by default (:func:`.selection.select_policy`).
SELECTION_USERS = 32


@dataclass
class Plan:
    """A solved plan and the policy the planner executes with it.

    ``values[c][n, s]`` and ``policy[c][n, s]``: the dynamic program's optimal value (minus expected
    seconds) and action of command c's MDP (``mdps[c]``) in state s with n uses left (n = 0..max_uses;
    row 0 is 0 / -1). ``keyboard_share`` / ``next_hotkey_share``: the hand-position shares it was
    solved with. ``choice``: what the agent executes (the plan's argmax on some or all commands, or a
    fixed rule, see :class:`~.selection.PolicyChoice`); ``candidate_times_s``: the mean seconds per
    simulated user of every candidate compared (empty when no selection ran); ``simulated_time_s``:
    the chosen one's.
    """

    mdps: list[CommandMDP]
    values: list[np.ndarray]
    policy: list[np.ndarray]
    max_uses: int
    keyboard_share: float = 0.5
    next_hotkey_share: float = 0.5
    predicted_time_s: float = math.nan  # expected seconds per user, see predicted_time_s()
    simulated_time_s: float = math.nan  # mean seconds per user of the chosen policy on the selection users
    own_device: bool = True  # the shares' own-command correction (see command_times); off for a fixed share
    choice: PolicyChoice = field(default_factory=PolicyChoice)
    candidate_times_s: dict[str, float] = field(default_factory=dict)

    def __deepcopy__(self, memo: dict) -> Plan:
        # read-only once solved: copies of a planner agent (one per simulated user) share it
        return self


def expected_uses(world: World, command: int) -> int:
    """Uses of ``command`` in one simulated user's horizon, p_c x horizon rounded (at least 1)."""
    return max(1, int(round(float(world.commands.probability[command]) * world.horizon)))


def command_times(world: World, command: int, ks: float, q: float, own_device: bool = True) -> ActionTimes:
    """:func:`action_times` of ``command`` at the plan's hand shares; with ``own_device`` its own
    usage probability is taken as the chance that the neighbouring trial repeats its device
    (approximation 2), without it the shares are the same before every trial."""
    return action_times(world, command, ks, q, float(world.commands.probability[command]) if own_device else 0.0)


def novice_terms(world: World, command: int, mdp: CommandMDP, n: int) -> tuple[np.ndarray, np.ndarray]:
    """The menu-expertise reward: (extra (S x actions), per_stage (n + 1,)). A menu selection at
    n uses left is taken as the command's t-th, t = max(1, U - n + 1) with U its expected uses (the
    count of a menu-only path), and costs the novice term (search - decision) / t on top of the
    full-expertise menu of R (Cockburn, Gutwin & Greenberg 2007): menu and learn always, a hotkey
    when it fails (1 - p)."""
    cmdc = world.command_constants()[command]
    gap = float(cmdc[k.C_SEARCH] - cmdc[k.C_DECISION])
    extra = np.zeros((mdp.n_states, 3))
    extra[:, k.MENU] = extra[:, k.LEARN] = -gap
    extra[:, k.HOTKEY] = -gap * (1.0 - mdp.p_recall)
    used = expected_uses(world, command) - np.arange(n + 1) + 1
    return extra, 1.0 / np.maximum(used, 1).astype(np.float64)


def solve_at_shares(world: World, n: int, mdps: list[CommandMDP], ks: float, q: float,
                    own_device: bool = True, menu_expertise: bool = True) -> Plan:
    """Set every MDP's rewards for hand shares (ks, q) and solve it (sparse P: rows are short), with
    the menu-expertise term by stage (:func:`novice_terms`) unless ``menu_expertise`` is False
    (full expertise throughout, e = 1)."""
    values, policies = [], []
    for c, mdp in enumerate(mdps):
        mdp.R = action_rewards(command_times(world, c, ks, q, own_device), mdp.activation, mdp.p_recall)
        extra, per_stage = novice_terms(world, c, mdp, n)
        if not menu_expertise:
            per_stage = np.zeros_like(per_stage)
        V, pol = backward_induction_staged(stacked_csr(mdp), np.ascontiguousarray(mdp.R, dtype=np.float64),
                                           extra, per_stage, n)
        values.append(V)
        policies.append(pol)
    return Plan(mdps, values, policies, n, ks, q, own_device=own_device)


def plan_shares(world: World, plan: Plan) -> tuple[float, float]:
    """Usage-weighted (success, attempt) hotkey shares of a plan's own policy over the horizon."""
    prob = world.commands.probability
    ks = q = 0.0
    for c, mdp in enumerate(plan.mdps):
        n_c = min(expected_uses(world, c), plan.max_uses)
        rows = plan.policy[c][np.arange(n_c, 0, -1)]
        attempt, success = hotkey_shares(mdp, rows)
        ks += float(prob[c]) * success
        q += float(prob[c]) * attempt
    return ks, q


def predicted_time_s(world: World, plan: Plan) -> float:
    """Expected seconds per simulated user under the plan in its own model: every command's uses
    (p_c x horizon of them) from the no-trace state, each trial paying its own homing at the plan's
    keyboard share (each switch counted once), full menu expertise."""
    total = 0.0
    for c, mdp in enumerate(plan.mdps):
        own = replace(command_times(world, c, plan.keyboard_share, plan.next_hotkey_share, plan.own_device),
                      return_after_mouse_s=0.0, return_after_keyboard_s=0.0)
        R = action_rewards(own, mdp.activation, mdp.p_recall)
        rows = plan.policy[c][np.arange(min(expected_uses(world, c), plan.max_uses), 0, -1)]
        occupancy = state_occupancy(mdp, rows)
        total -= float((occupancy * np.take_along_axis(R.T, rows, axis=0)).sum())
    return total


def fixed_point(world: World, n: int, mdps: list[CommandMDP], start: float, iterations: int,
                menu_expertise: bool = True) -> Plan:
    """Solve from hand shares ``start``, then at the plan's own shares until both move < 0.005."""
    ks = q = start
    plan = solve_at_shares(world, n, mdps, ks, q, menu_expertise=menu_expertise)
    for _ in range(iterations):
        new_ks, new_q = plan_shares(world, plan)
        if abs(new_ks - ks) < 0.005 and abs(new_q - q) < 0.005:
            break
        ks, q = new_ks, new_q
        plan = solve_at_shares(world, n, mdps, ks, q, menu_expertise=menu_expertise)
    return plan


def set_rewards(world: World, mdps: list[CommandMDP], plan: Plan) -> None:
    """The shared MDPs' R back to ``plan``'s hand shares."""
    for c, mdp in enumerate(mdps):
        mdp.R = action_rewards(command_times(world, c, plan.keyboard_share, plan.next_hotkey_share, plan.own_device),
                               mdp.activation,
                               mdp.p_recall)


def plan_world(world: World, max_uses: int | None = None, n_bins: int = 40,
               keyboard_share: float | None = None, iterations: int = 6, n_weight_bins: int = 10,
               select_users: int = SELECTION_USERS, menu_expertise: bool = True) -> Plan:
    """Solve every command's MDP for up to ``max_uses`` uses left (default: the horizon) and choose
    the policy to execute.

    ``keyboard_share`` None (default): the hand shares are the plan's own (approximation 2), found
    by fixed point twice, from a menu-only world (shares 0) and from a keyboard-only one (shares 1):
    solve, measure the plan's usage-weighted hotkey success and attempt shares, solve again,
    ``iterations`` times at most (stops once both move < 0.005). A number fixes both shares to it
    (one plan). ``select_users`` > 0: the executed policy is the best of those plans, their
    per-command restrictions and the fixed rules on that many common simulated users
    (:func:`.selection.select_policy`); 0 executes the plan of smaller :func:`predicted_time_s`
    as it is (which can lose to always-menu where recall is hard). ``menu_expertise`` False costs
    every future menu selection at full expertise (no novice term; the model of the values the
    hotkey assignment in ``lab.design`` separates into per-command savings).
    """
    n = world.horizon if max_uses is None else int(max_uses)
    if n < 1:
        raise ConfigError(f"max_uses must be >= 1, got {max_uses}")
    if keyboard_share is not None and not 0.0 <= float(keyboard_share) <= 1.0:
        raise ConfigError(f"keyboard_share must be in [0, 1] or None, got {keyboard_share}")
    if int(select_users) != select_users or select_users < 0:
        raise ConfigError(f"select_users must be a whole number >= 0, got {select_users}")
    mdps = [build_command_mdp(world, c, n_bins, 0.0, 0.0, n_weight_bins) for c in range(world.commands.n_commands)]
    candidates = []
    for start in ((float(keyboard_share),) if keyboard_share is not None else (0.0, 1.0)):
        if keyboard_share is not None:
            plan = solve_at_shares(world, n, mdps, start, start, own_device=False, menu_expertise=menu_expertise)
        else:
            plan = fixed_point(world, n, mdps, start, iterations, menu_expertise)
        plan.predicted_time_s = predicted_time_s(world, plan)
        candidates.append(plan)
    if select_users:
        best, table = select_policy(world, candidates, int(select_users), n_bins, n_weight_bins)
        best.candidate_times_s = table
    else:
        best = min(candidates, key=lambda p: p.predicted_time_s)
    set_rewards(world, mdps, best)
    return best
