"""The one agent protocol every agent of the zoo follows.

An agent both drives simulation (``act``) and scores logged behaviour
(``action_probabilities`` before the trial, then ``observe`` with the logged outcome), so the
same object serves simulation and likelihood fitting.

Conventions for what an agent may read, so that a trial log can be replayed through it:

* before a trial, ``info`` holds ``target`` (command index), ``target_name``, ``next_trial``,
  ``next_onset_s`` and ``next_session`` (all about the upcoming trial);
  the observation vector is also given but log-replayable agents rely on ``info``;
* after a trial, ``Transition.info`` holds ``trial``, ``session``, ``onset_s``, ``command``,
  ``action``, ``outcome`` (one of ``OUTCOME_NAMES``) and ``duration_s``; simulation adds
  ``time_s`` (operator breakdown) and ``p_recall``, which a log does not have.
"""

from __future__ import annotations

import math
import numbers
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from shortcut_gym.envs.errors import ConfigError

N_ACTIONS = 3
#: Extra entropy word that separates an agent's random stream from the environment's: the env
#: seeded with s draws from default_rng(s), an agent reset with s from default_rng([s, AGENT_STREAM]),
#: so the agent's choices are independent of the schedule drawn for the same seed.
AGENT_STREAM = 0x5A6E


def agent_rng(seed: int | None) -> np.random.Generator:
    """The agent's own generator for ``seed`` (independent of the env's stream for that seed)."""
    if seed is None:
        return np.random.default_rng()
    return np.random.default_rng([int(seed), AGENT_STREAM])


@dataclass(frozen=True)
class ParamSpec:
    """A fittable parameter: bounds and the transform used by optimisers.

    ``transform`` is 'logit' for a parameter bounded on both sides, 'log' for one bounded below
    only (upper = inf), 'none' for an unbounded one. ``to_free``/``from_free`` map between the
    natural value and an unbounded real.
    """

    name: str
    default: float
    lower: float = -math.inf
    upper: float = math.inf
    transform: str = "none"
    doc: str = ""

    def check(self, value: float, owner: str = "agent") -> float:
        """Return ``value`` as float or raise :class:`ConfigError` naming the parameter and its bounds.

        A value must be a finite real number (a bool, a string or inf/NaN is refused).
        """
        scalar = isinstance(value, np.ndarray) and value.ndim == 0 and value.dtype.kind in "iuf"
        if isinstance(value, (bool, np.bool_)) or not (isinstance(value, numbers.Real) or scalar):
            raise ConfigError(f"{owner}: parameter {self.name} must be a number, got {value!r}")
        v = float(value)
        if not math.isfinite(v):
            raise ConfigError(f"{owner}: parameter {self.name} must be a finite number, got {value!r}")
        if not self.lower <= v <= self.upper:
            raise ConfigError(f"{owner}: parameter {self.name}={value!r} is outside [{self.lower}, {self.upper}]")
        return v

    def to_free(self, value: float) -> float:
        """Natural value -> unbounded optimiser coordinate."""
        if self.transform == "logit":
            z = (value - self.lower) / (self.upper - self.lower)
            z = min(max(z, 1e-12), 1 - 1e-12)
            return math.log(z / (1 - z))
        if self.transform == "log":
            return math.log(max(value - self.lower, 1e-300))
        return value

    def from_free(self, x: float) -> float:
        """Unbounded optimiser coordinate -> natural value."""
        if self.transform == "logit":
            return self.lower + (self.upper - self.lower) / (1.0 + math.exp(-x))
        if self.transform == "log":
            return self.lower + math.exp(x)
        return x


@dataclass
class Transition:
    """What an agent sees after a trial: the action taken and the trial's result."""

    obs: np.ndarray
    action: int
    reward: float
    next_obs: np.ndarray
    info: dict[str, Any]
    terminated: bool = False
    truncated: bool = False


@dataclass
class AgentContext:
    """Facts about the world an agent may be built with (command count, names, horizon).

    ``obs_names`` (optional) names each entry of the observation vector (``World.observation_names()``);
    ``world`` (optional) is the World itself, for agents that plan with the true model (the planner).
    """

    n_commands: int
    horizon: int
    command_names: tuple[str, ...] = field(default_factory=tuple)
    obs_names: tuple[str, ...] = field(default_factory=tuple)
    world: Any = None


class Agent(ABC):
    """Base class: subclasses define ``params`` and ``action_probabilities``; ``act`` samples."""

    #: registry name
    name: str = "agent"

    def __init__(self, context: AgentContext | None = None, **params: float) -> None:
        self.context = context
        specs = self.param_specs()
        unknown = set(params) - set(specs)
        if unknown:
            raise ConfigError(f"{self.name}: unknown parameter(s) {sorted(unknown)}; known: {sorted(specs)}")
        self.params: dict[str, float] = {n: s.check(params.get(n, s.default), self.name) for n, s in specs.items()}
        self.rng = np.random.default_rng()

    def bind(self, context: AgentContext) -> None:
        """Attach the world facts (command count, horizon) before the first ``reset``."""
        self.context = context

    def param_specs(self) -> dict[str, ParamSpec]:
        """The agent's fittable parameters by name (empty for fixed agents)."""
        return {}

    def reset(self, seed: int | None = None) -> None:
        """Forget everything learned; reseed the agent's own random generator."""
        self.rng = agent_rng(seed)

    @abstractmethod
    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        """Probability of menu, hotkey, learn for the upcoming trial (sums to 1)."""

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        """Sample an action from :meth:`action_probabilities` with the agent's generator."""
        p = self.action_probabilities(obs, info)
        return int(self.rng.choice(N_ACTIONS, p=p))

    def observe(self, transition: Transition) -> None:  # noqa: B027 - fixed agents learn nothing
        """Update from a finished trial (no-op for fixed agents)."""

    def spec(self) -> dict[str, Any]:
        """A dict that rebuilds this agent with :func:`shortcut_gym.agents.registry.make_agent`."""
        return {"name": self.name, "params": dict(self.params)}
