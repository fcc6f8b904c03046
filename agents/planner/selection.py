"""The executed policy: the planner's candidate policies compared on common random numbers.

The dynamic-programming plans rest on approximations (see the package docstring), so on its own a
plan can lose to a simple rule where recall is hard. :func:`select_policy` therefore simulates
every candidate on the same simulated users of the world's own model (users seeded
:data:`SELECTION_SEED`, ``SELECTION_SEED + 1``, ...: common random numbers, so the schedule and
every recall draw are shared; these are not the users an evaluation scores) and keeps the one of
least mean time per user. The candidates:

* each dynamic-programming plan (the menu-start and keyboard-start fixed points, when they differ);
* each plan restricted to the commands on which it beat always-menu in that simulation (summed
  time of the command's own trials), the others by menu;
* the fixed rules always-menu, always-hotkey and learn-first-k for k = 1, 2, 3 (larger k only add
  learning trials), and learn-first-1 restricted to the commands on which it beat always-menu.

The result is a policy of what the env shows (the target, the trial index, the outcomes): the
selection reads no hidden state of the scored users, only the world model every planner uses.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Literal

import numpy as np

from shortcut_gym.agents.base import Agent, Transition, check_batch_users
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.world import World

if TYPE_CHECKING:
    from shortcut_gym.agents.planner.search import Plan

#: First seed of the simulated users the candidates are compared on (far from the seeds users get).
SELECTION_SEED = 2**20
#: The candidates are compared on at least this many simulated trials (more users than asked in short worlds).
SELECTION_TRIALS = 4096
#: Learning trials per command of the learn-first-k candidates.
LEARN_FIRST_KS = (1, 2, 3)

RuleKind = Literal["plan", "always_menu", "always_hotkey", "learn_first_k"]


@dataclass(frozen=True)
class PolicyChoice:
    """The policy a planner agent executes.

    ``kind`` "plan" follows the dynamic-programming plan's argmax on ``commands`` (a mask per
    command; None: every command) and the menu on the others; "always_menu", "always_hotkey" and
    "learn_first_k" are the fixed rules (``k`` learning trials per command, then the hotkey;
    restricted to ``commands`` when given, the menu elsewhere). ``plan_index`` names which of the
    candidate plans (0: menu-start fixed point, 1: keyboard-start) a "plan" choice follows, and for
    a fixed rule the plan whose values ``action_values`` reads (the one predicted best, as the
    planner without selection would use).
    """

    kind: RuleKind = "plan"
    k: int = 0
    commands: tuple[bool, ...] | None = None
    plan_index: int = 0

    @property
    def label(self) -> str:
        """A short readable name, e.g. ``plan[0] on 3/12 commands`` or ``learn_first_k(k=2)``."""
        base = f"plan[{self.plan_index}]" if self.kind == "plan" else (
            f"learn_first_k(k={self.k})" if self.kind == "learn_first_k" else self.kind)
        if self.commands is None:
            return base
        return f"{base} on {sum(self.commands)}/{len(self.commands)} commands"

    def allows(self, command: int) -> bool:
        """Whether ``command`` follows the rule (else the menu)."""
        return self.commands is None or self.commands[command]


class _RuleAgent(Agent):
    """A fixed rule of a :class:`PolicyChoice` as an agent (for simulating the candidates)."""

    name = "planner_rule"

    def __init__(self, choice: PolicyChoice) -> None:
        super().__init__(None)
        self.choice = choice

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.uses: dict[int, int] = {}

    def action_probabilities(self, obs: np.ndarray, info: dict) -> np.ndarray:
        p = np.zeros(3)
        p[rule_action(self.choice, int(info["target"]), self.uses.get(int(info["target"]), 0))] = 1.0
        return p

    def act(self, obs: np.ndarray, info: dict) -> int:
        return int(np.argmax(self.action_probabilities(obs, info)))

    def observe(self, transition: Transition) -> None:
        c = int(transition.info["command"])
        self.uses[c] = self.uses.get(c, 0) + 1

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> _RuleBatch:
        """The rule for many users at once (deterministic: the seeds draw nothing)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return _RuleBatch(self.choice, n_users, self.context.n_commands if self.context else 0)


class _RuleBatch:
    """:class:`_RuleAgent` for a batch of users, one numpy call per trial."""

    def __init__(self, choice: PolicyChoice, n_users: int, n_commands: int) -> None:
        self.choice = choice
        self.uses = np.zeros((n_users, n_commands), dtype=np.int64)
        self.allowed = np.ones(n_commands, dtype=bool) if choice.commands is None else np.array(choice.commands)
        self.rows = np.arange(n_users)

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        kind = self.choice.kind
        if kind == "always_menu":
            rule = np.zeros(len(targets), dtype=np.int64)
        elif kind == "always_hotkey":
            rule = np.ones(len(targets), dtype=np.int64)
        else:
            rule = np.where(self.uses[self.rows, targets] < self.choice.k, 2, 1)
        return np.where(self.allowed[targets], rule, 0).astype(np.int64)

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray,
                durations_s: np.ndarray) -> None:
        self.uses[self.rows, targets] += 1


def rule_action(choice: PolicyChoice, command: int, uses: int) -> int:
    """The action of a fixed rule for ``command`` used ``uses`` times before (menu 0, hotkey 1, learn 2)."""
    if not choice.allows(command) or choice.kind == "always_menu":
        return 0
    if choice.kind == "always_hotkey":
        return 1
    return 2 if uses < choice.k else 1


def simulate(world: World, agent: Agent, seeds: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """(users,) total seconds and (users, commands) seconds per command of ``agent`` on the
    world's batched simulator, users seeded ``seeds``."""
    from shortcut_gym.agents.rollout import context_of_world, drive_batch
    from shortcut_gym.envs.simulator import BatchSimulator

    agent.bind(context_of_world(world))
    sim = BatchSimulator(world)
    sim.reset(seeds=seeds)
    sums = drive_batch(sim, agent, seeds).sums
    return sums.time_s.sum(axis=1), sums.command_time_s


def select_policy(world: World, plans: list[Plan], n_users: int, n_bins: int,
                  n_weight_bins: int) -> tuple[Plan, dict[str, float]]:
    """The candidate of least mean time per user on ``n_users`` common simulated users, or on as
    many as make :data:`SELECTION_TRIALS` trials if more (see the module docstring); returns the
    plan to execute (a copy of one of ``plans`` carrying its :class:`PolicyChoice` and
    ``simulated_time_s``) and every candidate's mean seconds per user."""
    from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner

    n_users = max(int(n_users), -(-SELECTION_TRIALS // world.horizon))
    seeds = [SELECTION_SEED + i for i in range(n_users)]
    n_cmd = world.commands.n_commands

    def planner_on(plan: Plan, choice: PolicyChoice) -> tuple[np.ndarray, np.ndarray]:
        agent = BoundedOptimalPlanner(world=world, n_bins=n_bins, n_weight_bins=n_weight_bins)
        agent.plan = replace(plan, choice=choice)
        return simulate(world, agent, seeds)

    results: dict[PolicyChoice, tuple[np.ndarray, np.ndarray]] = {}
    menu = PolicyChoice("always_menu")
    results[menu] = simulate(world, _RuleAgent(menu), seeds)
    menu_cmd = results[menu][1].mean(axis=0)
    for choice in [PolicyChoice("always_hotkey")] + [PolicyChoice("learn_first_k", k) for k in LEARN_FIRST_KS]:
        results[choice] = simulate(world, _RuleAgent(choice), seeds)

    def restricted(choice: PolicyChoice, run: Plan | None) -> None:
        wins = tuple(bool(x) for x in results[choice][1].mean(axis=0) < menu_cmd - 1e-9)
        if 0 < sum(wins) < n_cmd:
            sub = replace(choice, commands=wins)
            results[sub] = planner_on(run, sub) if run is not None else simulate(world, _RuleAgent(sub), seeds)

    restricted(PolicyChoice("learn_first_k", 1), None)
    distinct = [0] + [i for i in range(1, len(plans))
                      if any(not np.array_equal(a, b) for a, b in zip(plans[i].policy, plans[0].policy))]
    for i in distinct:
        choice = PolicyChoice("plan", plan_index=i)
        results[choice] = planner_on(plans[i], choice)
        restricted(choice, plans[i])
    means = {choice: float(totals.mean()) for choice, (totals, _) in results.items()}
    best = min(means, key=lambda ch: (means[ch], ch.kind != "plan"))  # a tie keeps the plan
    best_s = means[best]
    if best.kind != "plan":  # a fixed rule carries the values of the plan predicted best (as without selection)
        best = replace(best, plan_index=min(range(len(plans)), key=lambda i: plans[i].predicted_time_s))
    chosen = replace(plans[best.plan_index], choice=best, simulated_time_s=best_s)
    return chosen, {choice.label: means[choice] for choice in means}
