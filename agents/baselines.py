"""Fixed baseline agents: always menu, always hotkey, learn on the first k uses, random."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition, check_batch_users
from shortcut_gym.agents.frozen_policy import (
    FrozenBatchPolicy,
    cdf_of,
    constant_rule,
    first_uses_rule,
    frozen_policy,
    uses_session_rule,
)
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel import HOTKEY, LEARN, MENU
from shortcut_gym.envs.seeds import check_seeds


def _one_hot(action: int) -> np.ndarray:
    p = np.zeros(3)
    p[action] = 1.0
    return p


class AlwaysMenu(Agent):
    """Selects every command from its menu."""

    name = "always_menu"

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        return _one_hot(MENU)

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled policy of ``n_users`` users (see :mod:`~shortcut_gym.agents.frozen_policy`)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return frozen_policy(self, n_users, seeds, lambda uses, sessions: constant_rule(MENU))


class AlwaysHotkey(Agent):
    """Tries the hotkey on every trial (falls back to the menu when recall fails)."""

    name = "always_hotkey"

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        return _one_hot(HOTKEY)

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled policy of ``n_users`` users (see :mod:`~shortcut_gym.agents.frozen_policy`)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return frozen_policy(self, n_users, seeds, lambda uses, sessions: constant_rule(HOTKEY))


class LearnFirstK(Agent):
    """Learns the hotkey on the first ``k`` uses of each command, then always uses the hotkey."""

    name = "learn_first_k"

    def param_specs(self) -> dict[str, ParamSpec]:
        return {"k": ParamSpec("k", 1.0, 0.0, 1000.0, "none", "learning trials per command (integer)")}

    def __init__(self, context: AgentContext | None = None, **params: float) -> None:
        super().__init__(context, **params)
        if self.params["k"] != int(self.params["k"]):
            raise ConfigError(f"{self.name}: parameter k must be a whole number, got {self.params['k']}")

    def reset(self, seed: int | None = None) -> None:
        super().reset(seed)
        self.uses: dict[int, int] = {}

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        used = self.uses.get(int(info["target"]), 0)
        return _one_hot(LEARN if used < int(self.params["k"]) else HOTKEY)

    def observe(self, transition: Transition) -> None:
        c = int(transition.info["command"])
        self.uses[c] = self.uses.get(c, 0) + 1

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled policy of ``n_users`` users (see :mod:`~shortcut_gym.agents.frozen_policy`)."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        k = int(self.params["k"])
        return frozen_policy(self, n_users, seeds, lambda uses, sessions: first_uses_rule(k))


class RandomAgent(Agent):
    """Picks menu, hotkey, learn with fixed probabilities (``p_hotkey``, ``p_learn``)."""

    name = "random"

    def param_specs(self) -> dict[str, ParamSpec]:
        return {
            "p_hotkey": ParamSpec("p_hotkey", 1 / 3, 0.0, 1.0, "logit", "probability of the hotkey"),
            "p_learn": ParamSpec("p_learn", 1 / 3, 0.0, 1.0, "logit", "probability of learning"),
        }

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        ph, pl = self.params["p_hotkey"], self.params["p_learn"]
        if ph + pl > 1.0 + 1e-12:
            raise ConfigError(f"{self.name}: p_hotkey + p_learn = {ph + pl} exceeds 1")
        return np.array([max(1.0 - ph - pl, 0.0), ph, pl])

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> FrozenBatchPolicy:
        """Compiled policy of ``n_users`` users; user i draws what ``reset(seeds[i])`` draws."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        cdf = cdf_of(self.action_probabilities(np.zeros(0), {}))  # checks the probabilities first
        return frozen_policy(self, n_users, seeds, lambda uses, sessions: uses_session_rule(cdf.reshape(1, 1, 3)))
