"""The planner agent: tracks each command's memory from its own history and looks up the plan.

Its Q for this trial is exact in the trial's own cost (recall probability and latency of the
tracked activation, the known hand, the menu expertise); it reaches the next use with the exact
memory at the schedule's clock after k ~ geometric(p_c) trials given k within the horizon
(N_GAP_QUANTILES quantiles), and values it by the plan's V (bilinear in activation and log weight).
Memory is tracked with the world's formula (the O(1) hybrid base level of Petrov 2006 for kind
"actr", as the simulator) from what the env shows: the command, the action and the outcome.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.frozen_policy import FrozenBatchPolicy
from shortcut_gym.agents.planner.batch import PlanLookupBatch, rule_policy
from shortcut_gym.agents.planner.cache import timed_cached_plan
from shortcut_gym.agents.planner.compiled_lookup import CompiledPlanLookup, lookup_tables
from shortcut_gym.agents.planner.memory_model import check_memory_kind
from shortcut_gym.agents.planner.next_uses import next_use_points
from shortcut_gym.agents.planner.search import SELECTION_USERS, Plan, command_times
from shortcut_gym.agents.planner.selection import rule_action
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.memory import (
    HybridBaseLevel,
    actr_activation,
    exponential_activation,
    power_activation,
    recall_probability,
)
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.task import check_replay_length, session_onsets
from shortcut_gym.envs.world import World, make_world, same_world


class BoundedOptimalPlanner(Agent):
    """Executes the policy its plan chose: the discretised MDP's argmax, restricted to some commands
    or not, or a fixed rule that beat it on common simulated users (see the package docstring).

    Build with ``world=`` (a World, or a dict of :func:`make_world` arguments, e.g. from YAML);
    without it the bound context's ``world`` is used. Options: ``keyboard_share`` (0..1, or None
    for the plan's own shares), ``n_bins``, ``n_weight_bins``, ``select_users`` (0: execute the
    plan's argmax as it is). Deterministic: ``action_probabilities`` is one-hot.
    At decision time the plan's expected hand and menu-expertise costs of the current trial are
    replaced by the known ones (where the last trial left the hand; this command's menu count).
    """

    name = "bounded_optimal"
    needs_planner = True

    def __init__(self, context: AgentContext | None = None, world: World | dict | str | Path | None = None,
                 keyboard_share: float | None = None, n_bins: int = 40, n_weight_bins: int = 10,
                 select_users: int = SELECTION_USERS, **params: float) -> None:
        super().__init__(context, **params)
        if isinstance(world, (dict, str, Path)):
            world = make_world(**world) if isinstance(world, dict) else make_world(world)
        if world is not None and not isinstance(world, World):
            raise ConfigError(f"{self.name}: world must be a World or a dict of make_world arguments, got "
                              f"{type(world).__name__}")
        if keyboard_share is not None and not 0.0 <= float(keyboard_share) <= 1.0:
            raise ConfigError(f"{self.name}: keyboard_share={keyboard_share} must be in [0, 1] (or None)")
        if int(n_bins) != n_bins or n_bins < 2:
            raise ConfigError(f"{self.name}: n_bins={n_bins} must be a whole number >= 2")
        if int(n_weight_bins) != n_weight_bins or n_weight_bins < 1:
            raise ConfigError(f"{self.name}: n_weight_bins={n_weight_bins} must be a whole number >= 1")
        if int(select_users) != select_users or select_users < 0:
            raise ConfigError(f"{self.name}: select_users={select_users} must be a whole number >= 0")
        if world is not None:
            check_memory_kind(world, f"agent {self.name!r}")
        self.select_users = int(select_users)
        self.world = world
        self.keyboard_share = None if keyboard_share is None else float(keyboard_share)
        self.n_bins = int(n_bins)
        self.n_weight_bins = int(n_weight_bins)
        self.plan: Plan | None = None
        self._times_for: Plan | None = None  # the plan self._times were priced for
        self._lookup_for: Plan | None = None  # the plan self._lookup was tabulated for

    def __deepcopy__(self, memo: dict) -> BoundedOptimalPlanner:
        """A copy for another simulated user: its own memory tracking, the same read-only world,
        context, plan and tables (copying the world per user cost more than the user's trials)."""
        twin = object.__new__(type(self))
        shared = ("world", "context", "plan", "_cmdc", "_clock", "_times", "_next_uses", "_times_for", "_memory",
                  "_p_use", "_new_weights", "_lookup", "_lookup_for")
        for key, value in self.__dict__.items():
            twin.__dict__[key] = value if key in shared else copy.deepcopy(value, memo)
        return twin

    def param_specs(self) -> dict[str, ParamSpec]:
        return {}

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "keyboard_share": self.keyboard_share, "n_bins": self.n_bins,
                "n_weight_bins": self.n_weight_bins, "select_users": self.select_users, "params": {}}

    def bind(self, context: AgentContext) -> None:
        """Attach the world facts; a bound world the planner cannot plan for is refused here."""
        if self.world is None and context.world is not None:
            check_memory_kind(context.world, f"agent {self.name!r}")
        before = self.context.world if self.context is not None else None
        super().bind(context)
        if self.world is None and not same_world(before, context.world):  # plan again for the new world
            self.plan = None
            self._times_for = None
            self._lookup_for = None

    def own_world(self) -> World | None:
        """The ``world=`` the agent was built with (None: it plans for the bound context's world)."""
        return self.world

    def _world(self) -> World:
        w = self.world or (self.context.world if self.context is not None else None)
        if w is None:
            raise ConfigError(f"{self.name}: needs the world it plans for: make_agent('{self.name}', world=...) "
                              "or a context with .world")
        check_memory_kind(w, f"agent {self.name!r}")
        return w

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        world = self._world()
        self.prepare()  # one plan per world and options in the process (agents.planner.cache)
        assert self.plan is not None
        self._cmdc = world.command_constants()
        onset, self._session, gap_total = session_onsets(world.schedule)
        self._clock = onset - (1.0 - world.memory.gap_time_scale) * gap_total
        if self._times_for is not self.plan:
            self._times = [command_times(world, c, self.plan.keyboard_share, self.plan.next_hotkey_share,
                                         self.plan.own_device)
                           for c in range(world.commands.n_commands)]
            self._next_uses = next_use_points(world, self._clock)
            self._times_for = self.plan
        m = world.memory
        self._memory = m
        self._horizon = world.horizon
        self._p_use = [float(x) for x in world.commands.probability]
        self._home_s = world.costs.klm.home_s
        self._new_weights = np.array([m.weights.menu, m.weights.learn, m.weights.hotkey_success,
                                      m.weights.hotkey_failure])
        self._traces: dict[int, tuple[list[float], list[float]]] = {}
        self._hybrid: dict[int, HybridBaseLevel] = {}
        self._weight = np.zeros(world.commands.n_commands)
        self._menu_count = np.zeros(world.commands.n_commands, dtype=np.int64)
        self._uses = np.zeros(world.commands.n_commands, dtype=np.int64)
        self._hand_on_keyboard = False  # the simulator starts every user with the hand on the mouse
        # interface aids (shortcut_gym.envs.aids), costed at decision time as the kernel applies them
        self._aids = world.aids.any_on
        self._warmup = world.parameters()[1][k.I_WARMUP]
        self._warmed = -1  # last trial whose warm-up block is in the tracked memory
        self._key_s = world.costs.klm.k_s

    def prepare(self) -> float:
        """Make (or fetch) the plan of the bound world before the first ``reset``; returns the
        seconds spent planning (0.0 when this world's plan was made before in the process)."""
        if self.plan is not None:
            return 0.0
        world = self._world()
        self.plan, seconds = timed_cached_plan(world, world.horizon, self.n_bins, self.keyboard_share,
                                               self.n_weight_bins, self.select_users)
        return seconds

    def _activation(self, c: int, now: float) -> float:
        m = self._memory
        if m.kind == "actr":  # the simulator's O(1) hybrid base level (Petrov 2006)
            h = self._hybrid.get(c)
            return -math.inf if h is None or not h.times else h.activation(now)
        times, weights = self._traces.get(c, ([], []))
        if not times:
            return -math.inf
        if m.kind == "exponential":
            return exponential_activation(now, times, m.exponential_rate_per_s, weights)
        if m.kind == "power":
            return power_activation(now, times, m.decay, m.power_time_unit_s, weights)
        return actr_activation(now, times, m.decay, weights)

    def _activations(self, c: int, now: np.ndarray) -> np.ndarray:
        """:meth:`_activation` at each clock of ``now`` (s, 1-D)."""
        h = self._hybrid.get(c)
        if self._memory.kind == "actr" and h is not None and h.times:
            return h.activations(now)
        return np.array([self._activation(c, t) for t in now])

    def action_values(self, c: int, trial: int) -> np.ndarray:
        """Q (minus expected seconds, this use and the later ones) of menu, hotkey, learn now.

        This trial is costed exactly (its recall probability and latency from the tracked memory,
        where the last trial left the hand, this command's menu count); the next use is reached
        with the exact memory and the schedule's clock after k more trials, k geometric(p_c)
        given that it falls in the horizon (N_GAP_QUANTILES quantiles), and valued by the plan's
        V there (bilinear in activation and log weight); the plan's shares price the homing the
        next trial pays. The next uses' clocks and decay shares are tabulated once per plan
        (:func:`next_use_points`) and the future term is compiled (:meth:`CommandMDP.mean_after_traces`).
        """
        if self.plan is None:
            self.reset()
        assert self.plan is not None
        self.check_trial(trial)
        if self._warmup:
            self._apply_warmup(trial)
        m = self._memory
        after = max(self._horizon - trial - 1, 0)
        p_c = self._p_use[c]
        uses = min(1 + int(round(p_c * after)), self.plan.max_uses)
        now = float(self._clock[min(trial, len(self._clock) - 1)])
        a_now = self._activation(c, now)
        p = recall_probability(a_now, m.threshold, m.noise_s)
        lat = m.latency_factor_s * math.exp(-a_now) if a_now > -math.inf else 0.0
        times = self._times[c]
        home = self._home_s
        on_kb = 1.0 if self._hand_on_keyboard else 0.0
        cmdc = self._cmdc[c]
        novice = (cmdc[k.C_SEARCH] - cmdc[k.C_DECISION]) / (self._menu_count[c] + 1)
        start_menu = home * (on_kb - times.menu_keyboard_share) + novice
        start_hot = home * ((1.0 - on_kb) - (1.0 - times.hotkey_keyboard_share))
        ok = times.hotkey_fixed_s + start_hot + lat + times.return_after_keyboard_s
        fail = times.failure_s + start_hot + novice + times.return_after_mouse_s
        q_menu = -(times.menu_s + start_menu + times.return_after_mouse_s)
        q_hot = -(p * ok + (1.0 - p) * fail)
        q_learn = -(times.learn_s + start_menu + times.return_after_mouse_s)
        new_weights = self._new_weights
        if self._aids:  # this trial's aid costs on the menu paths, and the traces they lay
            aid_s, aid_w, locked = self._aid_terms(c)
            back = times.return_after_keyboard_s - times.return_after_mouse_s if locked else 0.0
            q_menu -= aid_s + back
            q_learn -= aid_s + back
            fail += aid_s + back
            q_hot = -(p * ok + (1.0 - p) * fail)
            new_weights = new_weights + np.array([aid_w, aid_w, 0.0, aid_w])
        if uses > 1 and after > 0:
            V = self.plan.values[c][uses - 1]
            t_next = self._next_uses.clock_s[c, trial]
            # mean V at the next use after a menu, learn, recalled and failed hotkey trace
            f_menu, f_learn, f_ok, f_fail = self.plan.mdps[c].mean_after_traces(
                V, self._activations(c, t_next), self._next_uses.fresh[c, trial], float(self._weight[c]),
                new_weights)
            q_menu += f_menu
            q_learn += f_learn
            q_hot += p * f_ok + (1.0 - p) * f_fail
        q = np.empty(3)
        q[k.MENU], q[k.HOTKEY], q[k.LEARN] = q_menu, q_hot, q_learn
        return q

    def _aid_terms(self, c: int) -> tuple[float, float, bool]:
        """(seconds, trace weight, item locked) the aids add to a menu path of ``c`` now: the novice
        label search and the nudge of this menu selection, the lockout's H + keys x K."""
        cc = self._cmdc[c]
        sel = self._menu_count[c] + 1
        nudged = cc[k.C_NUDGE_FROM] <= sel < cc[k.C_NUDGE_UNTIL]
        locked = bool(self._uses[c] >= cc[k.C_LOCK_AFTER])
        seconds = cc[k.C_LABEL_SEARCH] / sel + (cc[k.C_NUDGE_S] if nudged else 0.0)
        if locked:
            seconds += self._home_s + cc[k.C_KEYS] * self._key_s
        return float(seconds), float(cc[k.C_LABEL_W] + (cc[k.C_NUDGE_W] if nudged else 0.0)), locked

    def _apply_warmup(self, trial: int) -> None:
        """Lay the warm-up block's traces before ``trial`` if it opens a warm-up session (once)."""
        if trial <= self._warmed or trial >= len(self._clock):
            return
        self._warmed = trial
        starts = trial == 0 or (self._warmup == 2 and self._session[trial] != self._session[trial - 1])
        if not starts:
            return
        block = float(self._cmdc[:, k.C_WARMUP_S].sum())
        if not self._hand_on_keyboard:
            block += self._home_s
        for j in np.flatnonzero(self._cmdc[:, k.C_WARMUP_S] > 0):
            self._lay(int(j), float(self._clock[trial]) - block, float(self._cmdc[j, k.C_WARMUP_W]))
        self._hand_on_keyboard = True

    def _lay(self, c: int, now: float, weight: float) -> None:
        """Add a trace of ``weight`` to the tracked memory of ``c`` at clock ``now``."""
        if weight <= 0:
            return
        m = self._memory
        self._weight[c] += weight
        if m.kind == "actr":
            h = self._hybrid.get(c)
            if h is None:
                h = self._hybrid[c] = HybridBaseLevel(m.decay, m.recent_traces)
            h.add(now, weight)
        else:
            times, weights = self._traces.setdefault(c, ([], []))
            times.append(now)
            weights.append(weight)

    def check_trial(self, trial: int, who: str | None = None) -> None:
        """Refuse a trial index past the plan's horizon (a replayed schedule longer than the world's),
        naming ``who`` (default: this agent)."""
        horizon = getattr(self, "_horizon", None)  # set by reset
        if horizon is not None and trial >= horizon:
            check_replay_length(trial + 1, horizon, who or self.name, at_least=True)

    def decide(self, c: int, trial: int) -> int:
        """The executed action for command ``c`` at ``trial``: the argmax of :meth:`action_values`
        (ties to the lowest action index) where ``plan.choice`` follows the plan for ``c``, else
        the choice's fixed rule (menu on commands a restricted choice leaves out)."""
        if self.plan is None:
            self.reset()
        assert self.plan is not None
        self.check_trial(trial)
        choice = self.plan.choice
        if choice.kind != "plan" or not choice.allows(c):
            return rule_action(choice, c, int(self._uses[c]))
        return int(self.action_values(c, trial).argmax())

    def batch_policy(self, n_users: int,
                     seeds: Sequence[int]) -> FrozenBatchPolicy | CompiledPlanLookup | PlanLookupBatch:
        """Many simulated users at once: a fixed-rule choice as a compiled rule (:mod:`.batch`), a
        plan looked up in the compiled fused loop (:mod:`.compiled_lookup`; per user in Python where
        that does not apply); either way each user's actions are this agent's for that user."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        self.prepare()
        assert self.plan is not None
        if self.plan.choice.kind != "plan":
            return rule_policy(self, self.plan.choice, n_users, seeds)
        if len(seeds) != n_users:
            raise ConfigError(f"{self.name}: {len(seeds)} seeds for {n_users} users")
        self.reset(int(seeds[0]) if len(seeds) else None)
        if getattr(self, "_lookup_for", None) is not self.plan:
            self._lookup, self._lookup_for = lookup_tables(self), self.plan
        if self._lookup is None:  # a plan the compiled rebuild does not cover (see .compiled_lookup)
            return PlanLookupBatch(self, n_users, seeds)
        return CompiledPlanLookup(self, self._lookup, n_users, seeds)

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        p = np.zeros(3)
        p[self.decide(int(info["target"]), int(info["next_trial"]))] = 1.0
        return p

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        return self.decide(int(info["target"]), int(info["next_trial"]))

    def observe(self, transition: Transition) -> None:
        info = transition.info
        c, t = int(info["command"]), int(info["trial"])
        if self.plan is None:
            self.reset()
        self.check_trial(t)
        m = self._memory
        w = m.weights
        outcome = info["outcome"]
        if self._warmup:
            self._apply_warmup(t)
        weight = {"menu": w.menu, "learned": w.learn, "hotkey": w.hotkey_success}.get(outcome, w.hotkey_failure)
        locked = False
        if self._aids and outcome != "hotkey":
            _, extra, locked = self._aid_terms(c)
            weight += extra
        self._hand_on_keyboard = outcome == "hotkey" or locked
        if outcome != "hotkey":
            self._menu_count[c] += 1
        self._uses[c] += 1
        self._lay(c, float(self._clock[t]), weight)
