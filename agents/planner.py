"""Bounded-optimal planner: finite-horizon dynamic programming over a discretised hotkey memory.

For each command separately the planner builds a small Markov decision process whose state is the
command's memory strength at the moment it is needed, and solves it exactly for every number of
uses left. Sources: the cost formulas of :mod:`shortcut_gym.envs.costs` (KLM, Card, Moran & Newell
1980; Fitts' law, MacKenzie 1992; menu model, Cockburn, Gutwin & Greenberg 2007) and the memory
model of :mod:`shortcut_gym.envs.memory` (ACT-R base level, Anderson & Lebiere 1998; exponential
and power forgetting, Wixted & Ebbesen 1991). Finite-horizon DP: Bellman (1957), *Dynamic
Programming*; Puterman (1994), *Markov Decision Processes*, ch. 4.

The MDP of command c (states s, actions menu/hotkey/learn, stages = uses of c left):

* State 0: no trace (strength S = 0, recall probability 0). States 1..K: activation A = ln S on a
  uniform grid from tau - 8 s to tau + 8 s (tau, s: the world's retrieval threshold and noise);
  the recall probability of a state is the logistic of its grid activation.
* Transition: the action lays a trace of the world's weight (learn; hotkey recalled with
  probability p or failed with 1 - p; menu), then the time to the command's next use passes.
  The gap is drawn from the usage probability (trials between uses ~ geometric(p_c)), the trial
  interval and the between-session gaps (a gap of k trials crosses k / trials_per_session session
  boundaries, the fractional part as a probability), discretised by 8 equal-probability quantiles.
  The new activation is spread linearly over the two neighbouring grid points.
* Reward: minus the expected seconds of the action in that state.

Approximations (each makes the planner exact only for its own model, not for the simulator):

1. Memory history collapses to one number. Under power-law decay the old strength S ages as if it
   were one trace laid one mean gap before the current use: S' = S ((a + g)/a)^-d + w g^-d with
   a = E[gap]; exponential decay needs no approximation (S' = (S + w) e^{-lambda g});
   power forgetting uses the same effective-age rule. Spacing-sensitive decay is not supported.
2. The hand position is its stationary expectation: before a trial the hand is on the keyboard
   with probability ``keyboard_share`` (default 0.5), so a menu costs keyboard_share x H and a
   hotkey (1 - keyboard_share) x H in expectation; a failed hotkey always homes back (H).
3. Menu selections are costed at full menu expertise (e = 1, Hick-Hyman decision time); the first
   few selections really cost up to |search - decision| more, on every menu-using action alike.
4. Recall latency uses the grid activation of the state; commands are planned independently.

The agent tracks each command's actual activation with the world's exact memory formula from its
own history (when it learned, recalled or failed, at the schedule's onsets), maps it to the
nearest grid state, and looks up the optimal action for (command, state, expected uses left),
uses left = 1 + round(p_c x trials after this one).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.memory import actr_activation, exponential_activation, power_activation
from shortcut_gym.envs.task import session_onsets
from shortcut_gym.envs.world import World, make_world

N_GAP_QUANTILES = 8
GRID_HALF_WIDTH = 8.0  # in units of the retrieval noise s


@dataclass(frozen=True)
class ActionTimes:
    """Expected seconds of each path for one command (see module approximations 2 and 3)."""

    menu_s: float
    learn_s: float
    hotkey_fixed_s: float  # M + expected H + keys x K of a recalled hotkey, without the latency
    latency_factor_s: float
    failure_s: float  # a failed attempt including the menu that follows (omission/commission mix)


def action_times(world: World, command: int, keyboard_share: float = 0.5) -> ActionTimes:
    """Per-path expected times (s) of ``command`` from the world's cost settings."""
    if not 0.0 <= keyboard_share <= 1.0:
        raise ValueError(f"keyboard_share must be in [0, 1], got {keyboard_share}")
    c = world.costs
    klm = c.klm
    cmdc = world.command_constants()[command]
    item = cmdc[k.C_DECISION] + cmdc[k.C_POINTING]
    keys = cmdc[k.C_KEYS] * klm.k_s
    menu_core = klm.point_s + 4 * klm.button_s + item
    menu = klm.mental_s + keyboard_share * klm.home_s + menu_core
    hotkey_fixed = klm.mental_s + (1.0 - keyboard_share) * klm.home_s + keys
    fail_latency = world.memory.latency_factor_s * math.exp(-world.memory.threshold)
    commission = c.errors.commission_share * (keys + klm.mental_s + c.errors.undo_keystrokes * klm.k_s)
    failure = hotkey_fixed - keys + fail_latency + commission + klm.home_s + menu_core
    return ActionTimes(menu, menu + c.learn.encoding_s, hotkey_fixed, world.memory.latency_factor_s, failure)


def gap_distribution(world: World, command: int) -> tuple[np.ndarray, np.ndarray]:
    """Memory-clock gaps (s) between uses of ``command`` and their probabilities."""
    p = float(world.commands.probability[command])
    sch = world.schedule
    gaps_h = sch.gap_h if isinstance(sch.gap_h, list) else [sch.gap_h]
    session_gap_s = float(np.mean(gaps_h)) * 3600.0 * world.memory.gap_time_scale if sch.sessions > 1 else 0.0
    q = (np.arange(N_GAP_QUANTILES) + 0.5) / N_GAP_QUANTILES
    trials = np.maximum(1.0, np.ceil(np.log1p(-q) / math.log1p(-p))) if p < 1 else np.ones(N_GAP_QUANTILES)
    crossings = trials / sch.trials_per_session
    lo = np.floor(crossings)
    frac = crossings - lo
    gaps = np.concatenate([trials * sch.trial_interval_s + lo * session_gap_s,
                           trials * sch.trial_interval_s + (lo + 1) * session_gap_s])
    probs = np.concatenate([(1 - frac), frac]) / N_GAP_QUANTILES
    keep = probs > 0
    return gaps[keep], probs[keep]


@dataclass
class CommandMDP:
    """The discretised MDP of one command: P (actions x S x S), R (S x actions, -seconds)."""

    command: int
    activation: np.ndarray  # (S,) grid activation, -inf for state 0
    p_recall: np.ndarray  # (S,)
    P: np.ndarray
    R: np.ndarray

    @property
    def n_states(self) -> int:
        """Number of states (no-trace state included)."""
        return len(self.p_recall)


def _next_strength(world: World, strength: float, weight: float, gaps: np.ndarray, mean_gap: float) -> np.ndarray:
    m = world.memory
    if m.kind in ("actr", "actr_exact"):
        old = strength * ((mean_gap + gaps) / mean_gap) ** (-m.decay) if strength > 0 else 0.0
        return old + weight * gaps ** (-m.decay)
    if m.kind == "exponential":
        return (strength + weight) * np.exp(-m.exponential_rate_per_s * gaps)
    if m.kind == "power":
        u = m.power_time_unit_s
        old = strength * ((1 + (mean_gap + gaps) / u) / (1 + mean_gap / u)) ** (-m.decay) if strength > 0 else 0.0
        return old + weight * (1 + gaps / u) ** (-m.decay)
    raise ValueError(f"the planner supports memory kinds actr, actr_exact, exponential, power; got {m.kind!r}")


def _spread(activations: np.ndarray, probs: np.ndarray, grid: np.ndarray, row: np.ndarray) -> None:
    """Add probability mass of each activation to ``row`` (state 0 = -inf), linear between grid points."""
    for a, w in zip(activations, probs):
        if a == -np.inf:
            row[0] += w
            continue
        x = (min(max(a, grid[0]), grid[-1]) - grid[0]) / (grid[1] - grid[0])
        i = min(int(math.floor(x)), len(grid) - 2)
        f = x - i
        row[1 + i] += w * (1 - f)
        row[2 + i] += w * f


def build_command_mdp(world: World, command: int, n_bins: int = 40, keyboard_share: float = 0.5) -> CommandMDP:
    """The discretised MDP of ``command`` (see the module docstring for every approximation)."""
    if n_bins < 2:
        raise ValueError(f"n_bins must be >= 2, got {n_bins}")
    m = world.memory
    grid = np.linspace(m.threshold - GRID_HALF_WIDTH * m.noise_s, m.threshold + GRID_HALF_WIDTH * m.noise_s, n_bins)
    act = np.concatenate([[-np.inf], grid])
    p_rec = np.concatenate([[0.0], 1.0 / (1.0 + np.exp(-(grid - m.threshold) / m.noise_s))])
    times = action_times(world, command, keyboard_share)
    gaps, gp = gap_distribution(world, command)
    mean_gap = float(np.dot(gaps, gp))
    w = m.weights
    n = n_bins + 1
    P = np.zeros((3, n, n))
    R = np.zeros((n, 3))
    for s in range(n):
        strength = 0.0 if s == 0 else math.exp(act[s])
        for a, outcomes in ((k.MENU, [(1.0, w.menu)]), (k.LEARN, [(1.0, w.learn)]),
                            (k.HOTKEY, [(p_rec[s], w.hotkey_success), (1 - p_rec[s], w.hotkey_failure)])):
            for prob, weight in outcomes:
                if prob <= 0:
                    continue
                nxt = _next_strength(world, strength, weight, gaps, mean_gap)
                with np.errstate(divide="ignore"):
                    _spread(np.log(np.asarray(nxt, dtype=float) * np.ones_like(gaps)), prob * gp, grid, P[a, s])
        ok = times.hotkey_fixed_s + (times.latency_factor_s * math.exp(-act[s]) if s > 0 else 0.0)
        R[s, k.MENU] = -times.menu_s
        R[s, k.LEARN] = -times.learn_s
        R[s, k.HOTKEY] = -(p_rec[s] * ok + (1 - p_rec[s]) * times.failure_s)
    return CommandMDP(command, act, p_rec, P, R)


def solve_finite_horizon(P: np.ndarray, R: np.ndarray, n_stages: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact backward induction. Returns V (n_stages + 1, S), V[n] the optimal value with n
    stages left (V[0] = 0), and policy (n_stages + 1, S) (row 0 unused, -1); ties go to the
    lowest action index."""
    n_states = R.shape[0]
    V = np.zeros((n_stages + 1, n_states))
    policy = np.full((n_stages + 1, n_states), -1, dtype=np.int64)
    for n in range(1, n_stages + 1):
        Q = R.T + P @ V[n - 1]  # (actions, S)
        policy[n] = np.argmax(Q, axis=0)
        V[n] = Q[policy[n], np.arange(n_states)]
    return V, policy


@dataclass
class Plan:
    """Optimal values and actions per command: ``policy[c][n, s]`` with n uses left."""

    mdps: list[CommandMDP]
    values: list[np.ndarray]
    policy: list[np.ndarray]
    max_uses: int


def plan_world(world: World, max_uses: int | None = None, n_bins: int = 40, keyboard_share: float = 0.5) -> Plan:
    """Solve every command's MDP for up to ``max_uses`` uses left (default: the horizon)."""
    n = world.horizon if max_uses is None else int(max_uses)
    if n < 1:
        raise ValueError(f"max_uses must be >= 1, got {max_uses}")
    mdps = [build_command_mdp(world, c, n_bins, keyboard_share) for c in range(world.commands.n_commands)]
    solved = [solve_finite_horizon(m.P, m.R, n) for m in mdps]
    return Plan(mdps, [v for v, _ in solved], [p for _, p in solved], n)


def break_even_table(world: World, keyboard_share: float = 0.5, n_bins: int = 40) -> pd.DataFrame:
    """Analytic break-even per command: learning pays when expected future uses U satisfy
    U (menu - E[hotkey]) > learning cost, E[hotkey] = p ok + (1 - p) failure, i.e. when
    U x saving > learning cost + U x expected error cost, so U* = learning cost / (saving - error cost).

    p is the expected recall probability at the next use after one learning trace (the planner's
    transition from the no-trace state); the rule treats p as constant over the later uses.
    """
    rows = []
    for c in range(world.commands.n_commands):
        times = action_times(world, c, keyboard_share)
        mdp = build_command_mdp(world, c, n_bins, keyboard_share)
        nxt = mdp.P[k.LEARN, 0]
        p = float(np.dot(nxt, mdp.p_recall))
        latency = float(sum(w * times.latency_factor_s * math.exp(-a) for w, a in zip(nxt[1:], mdp.activation[1:])))
        latency = latency / max(1e-300, float(nxt[1:].sum())) if nxt[1:].sum() > 0 else 0.0
        ok = times.hotkey_fixed_s + latency
        saving = times.menu_s - ok
        error = (1 - p) * (times.failure_s - ok)
        net = saving - error
        cost = times.learn_s - times.menu_s
        be = cost / net if net > 0 else math.inf
        expected = float(world.commands.probability[c] * world.horizon)
        rows.append({
            "command": c, "command_name": world.commands.names[c],
            "usage_probability": float(world.commands.probability[c]), "expected_uses": expected,
            "menu_s": times.menu_s, "learn_s": times.learn_s, "hotkey_recalled_s": ok,
            "hotkey_failed_s": times.failure_s, "p_recall_after_learning": p, "learning_cost_s": cost,
            "saving_per_use_s": saving, "error_cost_per_use_s": error, "break_even_uses": be,
            "learning_pays": expected - 1 > be,
        })
    return pd.DataFrame(rows)


class BoundedOptimalPlanner(Agent):
    """Looks up the exact optimal action of its discretised MDP (see module docstring).

    Build with ``world=`` (a World, or a dict of :func:`make_world` arguments, e.g. from YAML);
    without it the bound context's ``world`` is used. Options: ``keyboard_share`` (0..1),
    ``n_bins``. Deterministic: ``action_probabilities`` is one-hot.
    """

    name = "bounded_optimal"

    def __init__(self, context: AgentContext | None = None, world: World | dict | str | Path | None = None,
                 keyboard_share: float = 0.5, n_bins: int = 40, **params: float) -> None:
        super().__init__(context, **params)
        if isinstance(world, (dict, str, Path)):
            world = make_world(**world) if isinstance(world, dict) else make_world(world)
        if world is not None and not isinstance(world, World):
            raise ValueError(f"{self.name}: world must be a World or a dict of make_world arguments, got "
                             f"{type(world).__name__}")
        if not 0.0 <= float(keyboard_share) <= 1.0:
            raise ValueError(f"{self.name}: keyboard_share={keyboard_share} must be in [0, 1]")
        if int(n_bins) != n_bins or n_bins < 2:
            raise ValueError(f"{self.name}: n_bins={n_bins} must be a whole number >= 2")
        self.world = world
        self.keyboard_share = float(keyboard_share)
        self.n_bins = int(n_bins)
        self.plan: Plan | None = None

    def param_specs(self) -> dict[str, ParamSpec]:
        return {}

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "keyboard_share": self.keyboard_share, "n_bins": self.n_bins, "params": {}}

    def _world(self) -> World:
        w = self.world or getattr(self.context, "world", None)
        if w is None:
            raise ValueError(f"{self.name}: needs the world it plans for: make_agent('{self.name}', world=...) "
                             "or a context with .world")
        return w

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        world = self._world()
        if self.plan is None:
            self.plan = plan_world(world, world.horizon, self.n_bins, self.keyboard_share)
        onset, _, gap_total = session_onsets(world.schedule)
        self._clock = onset - (1.0 - world.memory.gap_time_scale) * gap_total
        self._traces: dict[int, tuple[list[float], list[float]]] = {}

    def _activation(self, c: int, now: float) -> float:
        times, weights = self._traces.get(c, ([], []))
        if not times:
            return -math.inf
        m = self._world().memory
        if m.kind == "exponential":
            return exponential_activation(now, times, m.exponential_rate_per_s, weights)
        if m.kind == "power":
            return power_activation(now, times, m.decay, m.power_time_unit_s, weights)
        return actr_activation(now, times, m.decay, weights)

    def state_of(self, c: int, trial: int) -> int:
        """Nearest grid state of command ``c``'s current activation at ``trial``."""
        assert self.plan is not None
        a = self._activation(c, float(self._clock[min(trial, len(self._clock) - 1)]))
        if a == -math.inf:
            return 0
        grid = self.plan.mdps[c].activation[1:]
        return 1 + int(np.argmin(np.abs(grid - a)))

    def decide(self, c: int, trial: int) -> int:
        """Optimal action for command ``c`` at ``trial``."""
        if self.plan is None:
            self.reset()
        assert self.plan is not None
        world = self._world()
        after = max(world.horizon - trial - 1, 0)
        uses = min(1 + int(round(world.commands.probability[c] * after)), self.plan.max_uses)
        return int(self.plan.policy[c][uses, self.state_of(c, trial)])

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        p = np.zeros(3)
        p[self.decide(int(info["target"]), int(info["next_trial"]))] = 1.0
        return p

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        return self.decide(int(info["target"]), int(info["next_trial"]))

    def observe(self, transition: Transition) -> None:
        info = transition.info
        c, t = int(info["command"]), int(info["trial"])
        w = self._world().memory.weights
        weight = {"menu": w.menu, "learned": w.learn, "hotkey": w.hotkey_success}.get(info["outcome"], w.hotkey_failure)
        if weight > 0:
            times, weights = self._traces.setdefault(c, ([], []))
            times.append(float(self._clock[t]))
            weights.append(weight)
