"""The one agent protocol every agent of the zoo follows.

An agent both drives simulation (``act``) and scores logged behaviour
(``action_probabilities`` before the trial, then ``observe`` with the logged outcome), so the
same object serves simulation and likelihood fitting.

What an agent may read, so that a trial log can be replayed through it, is the typed ``info``
contract of :mod:`shortcut_gym.envs.info`: before a trial :class:`~shortcut_gym.envs.info.UpcomingInfo`
(``target``, ``target_name``, ``next_trial``, ``next_onset_s``, ``next_session``), after a trial
``Transition.info`` is a :class:`~shortcut_gym.envs.info.StepInfo` (the finished trial's ``trial``,
``session``, ``onset_s``, ``command``, ``action``, ``outcome``, ``duration_s``, plus the next
trial's keys; simulation adds ``time_s`` and ``p_recall``, which a log does not have). A policy
reads the upcoming trial's keys (``target``, ``next_*``), never the finished trial's ``session``.
The observation vector is also given, in the layout of :mod:`shortcut_gym.envs.observation`.

Capabilities beyond the protocol are declared by the Protocols at the end of this module
(:class:`LikelihoodAgent`, :class:`BatchAgent` and the batch policies'), which the drivers and
the fitting code check with ``isinstance``.
"""

from __future__ import annotations

import math
import numbers
from abc import ABC, abstractmethod
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar, Protocol, runtime_checkable

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
    #: (low, high) natural values a participant plausibly has: where optimisers draw starts and
    #: recovery studies draw truths by default; None = derived by the lab (``lab.fitting.starts``).
    plausible: tuple[float, float] | None = None

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
    #: what ``likelihood_function`` takes, for agents that have one (:class:`LikelihoodAgent`):
    #: "trial_arrays" (the lab's per-trial arrays of one participant) or "frame" (the frame itself)
    likelihood_input: ClassVar[str] = "trial_arrays"
    #: True for agents that act on the dynamic-programming planner's plan of their world, which
    #: refuse a world whose memory kind the planner does not model
    #: (:func:`shortcut_gym.agents.planner.memory_model.check_memory_kind`)
    needs_planner: ClassVar[bool] = False
    #: True when ``bind`` rebuilds (or ``reset`` rebuilds) everything the agent derives from the bound
    #: world, so an agent bound to one world may be bound again to another: the drivers
    #: (:func:`shortcut_gym.agents.rollout.bind_for_world`) rebind it when it runs on another world,
    #: and refuse an agent with False naming both worlds
    rebinds: ClassVar[bool] = True

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

    def own_world(self) -> Any:
        """The world the agent was built for, whatever it is bound to (None: it acts for the bound
        context's world). The planner agents built with ``world=`` return it."""
        return None

    def param_specs(self) -> dict[str, ParamSpec]:
        """The agent's fittable parameters by name (empty for fixed agents)."""
        return {}

    @classmethod  # noqa: B027 - most agents check nothing early
    def check_options(cls, options: dict[str, Any]) -> None:
        """Refuse, before the agent is built, what its class can tell is wrong in the constructor
        keywords ``options`` (params and options together); a :class:`ConfigError` names the key.
        Most agents check in their constructor only; the SB3 adapters check their hyperparameters."""

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


def check_batch_users(name: str, n_users: Any, seeds: Sequence[int]) -> int:
    """Return ``n_users`` of a ``batch_policy`` call, or raise :class:`ConfigError` naming agent
    ``name``: the count must be a whole number >= 1 and ``seeds`` must hold one seed per user. Every
    agent's ``batch_policy`` checks this first, so each refuses the same inputs in the same words."""
    if isinstance(n_users, (bool, np.bool_)) or not isinstance(n_users, numbers.Integral) or n_users < 1:
        raise ConfigError(f"{name}: a batch policy needs a whole number of users >= 1, got {n_users!r} users")
    if len(seeds) != n_users:
        raise ConfigError(f"{name}: {len(seeds)} seeds for {n_users} users")
    return int(n_users)


# ---- capabilities beyond the protocol -----------------------------------------------------------
@runtime_checkable
class LikelihoodAgent(Protocol):
    """An agent with a fast (compiled or vectorised) log-likelihood of one participant's trials.

    ``likelihood_function(trials)`` returns f(theta) -> ln L over the natural parameter vector in
    ``param_specs()`` order; ``trials`` is what ``likelihood_input`` names. f must equal the sum of
    ln ``action_probabilities`` of the logged actions when the log is replayed trial by trial.
    """

    likelihood_input: ClassVar[str]

    def likelihood_function(self, trials: Any) -> Callable[[np.ndarray], float]: ...


@runtime_checkable
class BatchPolicy(Protocol):
    """Many simulated users of one agent, one call per trial for all of them."""

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """One action (B,) per user for its upcoming target (B,), given the observations (B, D)."""
        ...

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray,
                durations_s: np.ndarray) -> None:
        """Learn from the trial just run (outcome codes of ``OUTCOME_NAMES``, durations in seconds)."""
        ...


@runtime_checkable
class SessionBatchPolicy(BatchPolicy, Protocol):
    """A batch policy that reads each user's upcoming session (the driver calls ``set_session``
    before every ``actions``)."""

    def set_session(self, session: np.ndarray) -> None:
        """Session index (B,) of every user's upcoming trial."""
        ...


@runtime_checkable
class FusedBatchPolicy(BatchPolicy, Protocol):
    """A batch policy that can also run a just-reset batched simulator to its horizon in one call,
    returning the same per-user sums as the per-trial loop (:class:`~shortcut_gym.agents.rollout.UserSums`)."""

    def run(self, sim: Any) -> Any: ...


@runtime_checkable
class RecordingBatchPolicy(FusedBatchPolicy, Protocol):
    """A fused batch policy that can also keep every trial of its one-call run: ``run_recorded(sim)``
    returns the sums and a :class:`~shortcut_gym.agents.rollout.TrialRecord` equal to the per-trial
    loop's with ``keep_trials``."""

    def run_recorded(self, sim: Any) -> Any: ...


@runtime_checkable
class BatchAgent(Protocol):
    """An agent with a batch policy: user i of ``batch_policy(n_users, seeds)`` draws what the
    agent reset with ``seeds[i]`` draws."""

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> BatchPolicy: ...


@runtime_checkable
class ComposedAgent(Protocol):
    """An agent assembled from switchable mechanisms: ``mechanisms`` names the ones switched on (its
    constructor's ``mechanisms`` list chooses them), so a knock-out study can drop each."""

    mechanisms: tuple[str, ...]


@runtime_checkable
class PreparedAgent(Protocol):
    """An agent with costly set-up done once per world before it acts (a planner's plan, shared by
    every user of the world); drivers call ``prepare()`` first, which returns the seconds the set-up
    took (0.0 when it was done before), and report them apart from simulation time."""

    def prepare(self) -> float: ...
