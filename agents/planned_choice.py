"""Planned choice: a softmax over the yardstick planner's action values in the chooser's own world.

P(a) = (1 - lapse) softmax(beta Q(a)) + lapse / 3, with Q(a) the planner's action value of menu,
hotkey and learn for this trial (minus expected seconds, this use and the later ones; see
:meth:`shortcut_gym.agents.planner.BoundedOptimalPlanner.action_values`) and ``beta`` the inverse
temperature in 1/s: beta -> infinity is the planner itself, beta = 0 is uniform choice. The lapse
is an optional mechanism (``with_lapse=True``; mixing with uniform choice, common practice, no source).
Softmax choice over values: Luce (1959), *Individual Choice Behavior*; the same rule as
Wilson & Collins (2019), eLife 8, model 3's choice stage, here over planned rather than learned values.

The planner's state follows the logged outcomes only, so a log's Q values do not depend on beta
or the lapse: they are computed once per (world, log) and the likelihood is a compiled loop over
them. The plan itself is made once per world and planner options by the package's one plan cache
(:mod:`shortcut_gym.agents.planner.cache`, keyed by the world's full content digest
:meth:`~shortcut_gym.envs.world.World.digest`, interface aids included).
Planner options: ``keyboard_share``, ``n_bins`` (20), ``n_weight_bins`` (5) and ``select_users``
(0: the action values are the dynamic program's whichever policy a selection among fixed rules
would execute; a selection only changes which of the two hand-share plans supplies them).
The world is ``world=`` or the bound context's; its schedule must have at least as many trials as
the log (the planner reads the schedule's clock at the trial index).
"""

from __future__ import annotations

import math
from collections import OrderedDict
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd
from numba import njit

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.planned_choice_batch import PlannedChoiceSteps, choice_probabilities, planned_choice_batch
from shortcut_gym.agents.planner import BoundedOptimalPlanner, check_memory_kind
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import ACTION_NAMES
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.world import World, make_world

_VALUES: OrderedDict[tuple, np.ndarray] = OrderedDict()
#: Largest inverse temperature fitted (1/s); choices are then deterministic for any gap of 0.1 s.
BETA_MAX = 200.0
#: Logged action values kept (least recently used dropped first).
CACHE_SIZE = 128


def _remember(cache: OrderedDict, key: tuple, value: Any) -> Any:
    cache[key] = value
    cache.move_to_end(key)
    while len(cache) > CACHE_SIZE:
        cache.popitem(last=False)
    return value


def cached_plan(world: World, keyboard_share: float | None, n_bins: int, n_weight_bins: int,
                select_users: int = 0) -> BoundedOptimalPlanner:
    """A reset planner for ``world`` on the plan the package's plan cache holds for this world and
    these options (made on the first call, :func:`shortcut_gym.agents.planner.cache.cached_plan`)."""
    planner = BoundedOptimalPlanner(world=world, keyboard_share=keyboard_share, n_bins=n_bins,
                                    n_weight_bins=n_weight_bins, select_users=select_users)
    planner.reset(0)  # prepare(): the package cache, keyed by world.digest() and the options
    return planner


def logged_action_values(planner_of: Callable[[], BoundedOptimalPlanner], key: tuple, command: np.ndarray,
                         outcome: np.ndarray) -> np.ndarray:
    """(n, 3) planner action values before each logged trial (cached per plan key and log)."""
    full = (*key, command.tobytes(), "|".join(map(str, outcome)))
    if full in _VALUES:
        _VALUES.move_to_end(full)
        return _VALUES[full]
    planner = planner_of()
    n = len(command)
    q = np.empty((n, 3))
    empty = np.zeros(0, dtype=np.float32)
    for t in range(n):
        c = int(command[t])
        q[t] = planner.action_values(c, t)
        planner.observe(Transition(empty, 0, 0.0, empty, {"command": c, "trial": t, "outcome": str(outcome[t])}))
    q.setflags(write=False)
    return _remember(_VALUES, full, q)


@njit(cache=True)
def softmax_log_likelihood(q, actions, beta, lapse):
    """Sum over trials of ln((1 - lapse) softmax(beta q_t)[a_t] + lapse / 3)."""
    total = 0.0
    for t in range(q.shape[0]):
        z0, z1, z2 = beta * q[t, 0], beta * q[t, 1], beta * q[t, 2]
        m = max(z0, max(z1, z2))
        lse = m + math.log(math.exp(z0 - m) + math.exp(z1 - m) + math.exp(z2 - m))
        a = actions[t]
        za = z0 if a == 0 else (z1 if a == 1 else z2)
        lp = za - lse
        if lapse > 0.0:
            lp = math.log((1.0 - lapse) * math.exp(lp) + lapse / 3.0)
        total += lp
    return total


def softmax_probabilities(q: np.ndarray, beta: float, lapse: float = 0.0) -> np.ndarray:
    """(1 - lapse) softmax(beta q) + lapse / 3 over the last axis."""
    z = beta * np.asarray(q, dtype=float)
    z = z - z.max(axis=-1, keepdims=True)
    p = np.exp(z)
    p /= p.sum(axis=-1, keepdims=True)
    return (1.0 - lapse) * p + lapse / 3.0


class PlannedChoice(Agent):
    """Softmax (inverse temperature ``beta``, optional ``lapse``) over the planner's action values."""

    name = "planned_choice"
    needs_planner = True
    likelihood_input = "frame"

    def __init__(self, context: AgentContext | None = None, world: World | dict | str | None = None,
                 with_lapse: bool = False, keyboard_share: float | None = None, n_bins: int = 20,
                 n_weight_bins: int = 5, select_users: int = 0, **params: float) -> None:
        if not isinstance(with_lapse, bool):
            raise ConfigError(f"{self.name}: with_lapse must be true or false, got {with_lapse!r}")
        self.with_lapse = with_lapse
        super().__init__(context, **params)
        if isinstance(world, (dict, str)):
            world = make_world(**world) if isinstance(world, dict) else make_world(world)
        if world is not None and not isinstance(world, World):
            raise ConfigError(f"{self.name}: world must be a World or a dict of make_world arguments, got "
                              f"{type(world).__name__}")
        if world is not None:
            check_memory_kind(world, f"agent {self.name!r}")
        # checks the planner options now, with the planner's own messages
        BoundedOptimalPlanner(keyboard_share=keyboard_share, n_bins=n_bins, n_weight_bins=n_weight_bins,
                              select_users=select_users)
        self.select_users = int(select_users)
        self.world = world
        self.keyboard_share = keyboard_share
        self.n_bins, self.n_weight_bins = int(n_bins), int(n_weight_bins)
        self._planner: BoundedOptimalPlanner | None = None

    def param_specs(self) -> dict[str, ParamSpec]:
        # natural scale on [0, BETA_MAX]: a log transform leaves the optimiser stranded on the flat
        # likelihood near beta = 0 (the gradient in log beta vanishes there)
        specs = {"beta": ParamSpec("beta", 2.0, 0.0, BETA_MAX, "none", "inverse temperature (1/s of action value)")}
        if self.with_lapse:
            specs["lapse"] = ParamSpec("lapse", 0.05, 0.0, 1.0, "logit", "share of uniformly random choices")
        return specs

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "with_lapse": self.with_lapse, "keyboard_share": self.keyboard_share,
                "n_bins": self.n_bins, "n_weight_bins": self.n_weight_bins, "select_users": self.select_users,
                "params": dict(self.params)}

    def planner_world(self) -> World:
        """The world the planner plans for (``world=`` or the bound context's)."""
        w = self.world or (self.context.world if self.context is not None else None)
        if w is None:
            raise ConfigError(f"{self.name}: needs the chooser's world: make_agent('{self.name}', world=...) or a "
                              "context with .world")
        check_memory_kind(w, f"agent {self.name!r}")
        return w

    def bind(self, context: AgentContext) -> None:
        """Attach the world facts; a bound world the planner cannot plan for is refused here."""
        if self.world is None and context.world is not None:
            check_memory_kind(context.world, f"agent {self.name!r}")
        super().bind(context)
        self._planner = None  # the next reset fetches the plan of the bound world

    def own_world(self) -> World | None:
        """The ``world=`` the agent was built with (None: it plans for the bound context's world)."""
        return self.world

    def plan_key(self) -> tuple:
        """Cache key of this agent's plan and logged values: the world's plan digest (its numbers, not
        the text naming things: :meth:`World.plan_digest`) and the options."""
        return (self.planner_world().plan_digest(), self.keyboard_share, self.n_bins, self.n_weight_bins,
                self.select_users)

    def planner(self) -> BoundedOptimalPlanner:
        """A fresh (reset) planner on the cached plan."""
        return cached_plan(self.planner_world(), self.keyboard_share, self.n_bins, self.n_weight_bins,
                           self.select_users)

    def prepare(self) -> float:
        """Make (or fetch) the plan before the first ``reset``; the seconds spent planning (0.0 when the
        package's plan cache held it), so drivers report them apart from simulation time."""
        planner = BoundedOptimalPlanner(world=self.planner_world(), keyboard_share=self.keyboard_share,
                                        n_bins=self.n_bins, n_weight_bins=self.n_weight_bins,
                                        select_users=self.select_users)
        return planner.prepare()

    # ---- protocol -------------------------------------------------------------------------
    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self._planner = self.planner()

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self._planner is None:
            self.reset()
        assert self._planner is not None
        self._planner.check_trial(int(info["next_trial"]), self.name)
        q = self._planner.action_values(int(info["target"]), int(info["next_trial"]))
        # the compiled softmax the batch policy draws from, so both give the same doubles
        return np.array(choice_probabilities(float(q[0]), float(q[1]), float(q[2]), self.params["beta"],
                                             self.params.get("lapse", 0.0)))

    def observe(self, transition: Transition) -> None:
        if self._planner is None:
            self.reset()
        assert self._planner is not None
        self._planner.check_trial(int(transition.info["trial"]), self.name)
        self._planner.observe(transition)

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> PlannedChoiceSteps:
        """Many simulated users at once (:mod:`shortcut_gym.agents.planned_choice_batch`): user i
        draws what this agent reset with ``seeds[i]`` draws."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return planned_choice_batch(self.name, self.planner(), self.params["beta"], self.params.get("lapse", 0.0),
                                    n_users, seeds)

    # ---- fast likelihood ------------------------------------------------------------------
    def action_values_of(self, trials: pd.DataFrame) -> np.ndarray:
        """(n, 3) planner action values before each trial of a one-participant frame (trial order)."""
        horizon = self.planner_world().horizon
        if len(trials) > horizon:
            raise ConfigError(f"{self.name}: the log has {len(trials)} trials, the planner's world only {horizon}; "
                              "give a world whose schedule covers the log")
        d = trials.sort_values("trial", kind="stable")
        return logged_action_values(self.planner, self.plan_key(), d["command"].to_numpy(dtype=np.int64),
                                    d["outcome"].to_numpy())

    def likelihood_function(self, trials: pd.DataFrame) -> Callable[[np.ndarray], float]:
        """f(theta = [beta(, lapse)]) -> ln L of one participant's frame; Q computed once here."""
        q = np.ascontiguousarray(self.action_values_of(trials))
        d = trials.sort_values("trial", kind="stable")
        lookup = {n: i for i, n in enumerate(ACTION_NAMES)}
        actions = np.array([lookup[str(a)] for a in d["action"]], dtype=np.int64)
        n_par = len(self.param_specs())

        def log_likelihood(theta: np.ndarray) -> float:
            t = np.asarray(theta, dtype=np.float64)
            if t.shape != (n_par,):
                raise ConfigError(f"theta must have {n_par} entries {list(self.param_specs())}, got shape {t.shape}")
            return float(softmax_log_likelihood(q, actions, t[0], t[1] if n_par == 2 else 0.0))

        return log_likelihood
