"""The learning model as a zoo agent: :class:`LearningAgent`, configured by mechanism names.

What the agent reads, so that a log can be replayed: before a trial ``info['target']``,
``info['next_trial']`` and, for the ``forgetting`` mechanism only, the observation feature
``log1p_seconds_since_last_use`` (time since the target's last use; from a log it is recomputed
from ``onset_s`` and rounded through float32 exactly as the environment stores it); after a trial
``command``, ``action``, ``outcome`` and ``duration_s``. The planning horizon in trials is the
bound context's ``horizon`` (for a log without a bound context, the log's number of trials).

The single agent is a batch of one over the compiled rules of :mod:`.rules`; its generator draws
one uniform per trial (:func:`~shortcut_gym.agents.learning.rules.sample_action`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import N_ACTIONS, Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.agents.learning.batch import BatchLearningPolicy
from shortcut_gym.agents.learning.features import DT_FEATURE, decode_dt_s, dt_feature_index
from shortcut_gym.agents.learning.rules import (
    RuleSet,
    belief_now,
    decide,
    init_state,
    log_likelihood_kernel,
    new_state,
    sample_action,
    update,
)
from shortcut_gym.agents.learning.trials import TrialArrays
from shortcut_gym.envs.errors import ConfigError, DataError, NotReadyError
from shortcut_gym.envs.kernel import OUTCOME_NAMES
from shortcut_gym.envs.seeds import check_seeds


class LearningAgent(Agent):
    """A learning model built from named mechanisms (see :mod:`.mechanisms`)."""

    name = "learning"
    default_mechanisms: ClassVar[tuple[str, ...]] = ()

    def __init__(self, context: AgentContext | None = None, mechanisms: Iterable[str] | None = None,
                 options: dict[str, float] | None = None, **params: float) -> None:
        self.mechanisms = mech.resolve_mechanisms(self.name, mechanisms if mechanisms is not None
                                                  else self.default_mechanisms)
        for p in params:
            owner = mech.owner_of(p)
            if owner is not None and owner not in self.mechanisms:
                raise ConfigError(f"{self.name}: parameter {p!r} belongs to mechanism {owner!r}, which is switched "
                                  f"off (on: {list(self.mechanisms)})")
        opts = dict(mech.OPTION_DEFAULTS)
        for key, value in (options or {}).items():
            if key not in opts:
                raise ConfigError(f"{self.name}: unknown option {key!r}; known: {sorted(opts)}")
            if not (isinstance(value, (int, float)) and value >= 0 and math.isfinite(value)):
                raise ConfigError(f"{self.name}: option {key}={value!r} must be a number of seconds >= 0")
            opts[key] = float(value)
        self.options = opts
        super().__init__(context, **params)
        self._dt_index: int | None = None
        self._alloc()

    # -- specification
    def param_specs(self) -> dict[str, ParamSpec]:
        return {spec.name: spec for m in self.mechanisms for _, spec in mech.MECHANISMS[m].params}

    def param_slots(self) -> np.ndarray:
        """Position of each fitted parameter (in ``param_specs`` order) in the full kernel vector."""
        return np.array([slot for m in self.mechanisms for slot, _ in mech.MECHANISMS[m].params], dtype=np.int64)

    def flags(self) -> np.ndarray:
        """Mechanism switches of the compiled kernel."""
        f = np.zeros(mech.N_MECH, dtype=np.int64)
        for m in self.mechanisms:
            f[mech.MECHANISMS[m].flag] = 1
        return f

    def full_parameters(self, theta: np.ndarray | None = None) -> np.ndarray:
        """Kernel parameter vector: defaults, options, then ``theta`` (natural values) or ``params``."""
        par = np.zeros(mech.N_FULL_PAR)
        for m in mech.MECHANISMS.values():
            for slot, spec in m.params:
                par[slot] = spec.default
        for key, slot in mech.OPTION_SLOTS.items():
            par[slot] = self.options[key]
        values = np.array([self.params[n] for n in self.param_specs()]) if theta is None else np.asarray(theta, float)
        par[self.param_slots()] = values
        return par

    def rule_set(self, theta: np.ndarray | None = None) -> RuleSet:
        """What the compiled rules read: :meth:`full_parameters` and :meth:`flags`."""
        return RuleSet(self.full_parameters(theta), self.flags())

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "mechanisms": list(self.mechanisms), "options": dict(self.options),
                "params": dict(self.params)}

    # -- single agent (a batch of one)
    def _alloc(self) -> None:
        n = self.context.n_commands if self.context is not None else 0
        self._state = new_state(1, n)
        self._rules = self.rule_set()
        if n:
            init_state(self._rules, self._state)
        self._p = np.zeros(N_ACTIONS)

    def bind(self, context: AgentContext) -> None:
        super().bind(context)
        self._dt_index = None
        self._alloc()

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        if self.context is None:
            raise NotReadyError(f"{self.name}: bind a context (command count, horizon) before reset")
        self._alloc()

    def _dt_from_obs(self, obs: np.ndarray | None) -> float:
        if self._rules.flags[mech.M_FORGETTING] == 0:
            return 0.0
        if obs is None or np.ndim(obs) != 1 or len(obs) == 0:
            raise ConfigError(f"{self.name}: the forgetting mechanism reads {DT_FEATURE!r} from the observation; "
                              "none was given")
        if self._dt_index is None:
            self._dt_index = dt_feature_index(self.context, len(obs))
        return float(decode_dt_s(obs[self._dt_index]))

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self.context is None:
            raise NotReadyError(f"{self.name}: bind a context before use")
        c, trial = int(info["target"]), int(info["next_trial"])
        dt = self._dt_from_obs(obs)
        p = belief_now(0, c, dt, self._rules, self._state)
        decide(0, c, p, trial, self.context.horizon, self._rules, self._state, self._p)
        return self._p.copy()

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        p = self.action_probabilities(obs, info)
        return sample_action(p, float(self.rng.random()))

    def observe(self, transition: Transition) -> None:
        info = transition.info
        c, a = int(info["command"]), int(transition.action)
        outcome = OUTCOME_NAMES.index(info["outcome"]) if isinstance(info["outcome"], str) else int(info["outcome"])
        dt = self._dt_from_obs(transition.obs)
        p = belief_now(0, c, dt, self._rules, self._state)
        update(0, c, a, outcome, float(info["duration_s"]), p, self._rules, self._state)

    def action_values(self, command: int) -> np.ndarray:
        """Current delta-rule values Q[command, (menu, hotkey, learn)] (-seconds) of the single agent."""
        return self._state.values[0, int(command)].copy()

    # -- compiled paths
    def likelihood_function(self, trials: TrialArrays) -> Callable[[np.ndarray], float]:
        """Compiled log-likelihood of ``trials`` as a function of the natural parameter vector
        (order of ``param_specs()``); uses the bound context's horizon and command count when bound."""
        n_cmd = self.context.n_commands if self.context is not None else trials.n_commands
        if trials.command.max() >= n_cmd:
            raise DataError(f"log names command {int(trials.command.max())}, the agent knows {n_cmd} commands")
        horizon = self.context.horizon if self.context is not None else trials.n_trials
        flags = self.flags()
        slots = self.param_slots()
        base = self.full_parameters()
        log = trials.logged()
        k = len(slots)

        def log_likelihood(theta: np.ndarray) -> float:
            theta = np.asarray(theta, dtype=np.float64)
            if theta.shape != (k,):
                raise ConfigError(f"theta must have {k} entries {list(self.param_specs())}, got shape {theta.shape}")
            par = base.copy()
            par[slots] = theta
            return float(log_likelihood_kernel(log, horizon, n_cmd, RuleSet(par, flags)))

        return log_likelihood

    def log_likelihood(self, df: pd.DataFrame) -> float:
        """Log-likelihood of a one-participant trial table under the current parameters."""
        trials = TrialArrays.from_frame(df, self.context.n_commands if self.context is not None else None)
        return self.likelihood_function(trials)(np.array([self.params[n] for n in self.param_specs()]))

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> BatchLearningPolicy:
        """Compiled policy for ``n_users`` simulated users (user i seeded like ``reset(seeds[i])``)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return BatchLearningPolicy(self.name, self.context, self.rule_set(), n_users, seeds)
