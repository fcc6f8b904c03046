"""Stable-Baselines3 models (PPO, A2C, DQN) as zoo agents behind the agent protocol.

``train(env_or_world, total_timesteps, seed, progress_bar)`` learns on batched users of a World
(:mod:`.training`); ``save(path)`` / ``load(path)`` (or ``model_path=`` in the spec; :mod:`.files`);
``evaluate(env, seeds)`` runs :func:`run_episode` per seed. ``action_probabilities`` is the
policy's action distribution (PPO, A2C), or for DQN the epsilon-greedy distribution over its
Q-values with epsilon = the model's final exploration rate. ``act`` samples from it with the
agent's generator, or takes its most probable action when ``deterministic=True``. Observations
go through the frozen training statistics when ``normalize`` is on (default); a saved model records
whether it was trained so, and loading it with the other setting is refused (:mod:`.files`). Stable-Baselines3
and torch are imported on first use; torch runs on :data:`~.algorithms.MAX_TORCH_THREADS` thread.
A saved model keeps the record of the world it was trained on (:mod:`.files`); a loaded one
refuses another world (or a zip without a record) unless ``allow_other_world=True``
(:mod:`shortcut_gym.agents.world_record`). Hyperparameters of the SB3 class come under
``hyperparameters`` or as keywords beside the options (``make_agent("ppo", n_steps=64)``), checked
against the class's own signature (:mod:`.hyperparameters`).
"""

from __future__ import annotations

import copy
import json
import threading
from collections.abc import Sequence
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext, check_batch_users
from shortcut_gym.agents.frozen_policy import UserDraws
from shortcut_gym.agents.model_files import model_file_path
from shortcut_gym.agents.rollout import bind_for_world, evaluate_agent
from shortcut_gym.agents.sb3.algorithms import DEFAULT_HYPERPARAMETERS
from shortcut_gym.agents.sb3.files import load_model, save_model
from shortcut_gym.agents.sb3.hyperparameters import gather_hyperparameters
from shortcut_gym.agents.sb3.training import train_model
from shortcut_gym.agents.world_record import WorldRecorded, check_flag
from shortcut_gym.envs.errors import ConfigError, NotReadyError
from shortcut_gym.envs.seeds import check_seeds

#: held around every forward pass: SB3's policy keeps the last distribution on itself
#: (``policy.action_dist``), so two threads simulating chunks of users with one model would read
#: each other's probabilities (``simulate_users(..., threads=2)`` with an agent object)
FORWARD_LOCK = threading.Lock()

#: The adapter's own options (its constructor's keywords); any other keyword is a hyperparameter.
OPTIONS = ["allow_other_world", "deterministic", "hyperparameters", "model_path", "normalize"]


class SB3Agent(WorldRecorded, Agent):
    """A Stable-Baselines3 model as a zoo agent (subclasses pick the algorithm)."""

    name = "sb3"
    algorithm: ClassVar[str] = ""

    def __init__(self, context: AgentContext | None = None, model_path: str | Path | None = None,
                 deterministic: bool = False, hyperparameters: dict[str, Any] | None = None, normalize: bool = True,
                 allow_other_world: bool = False, **given: Any) -> None:
        """``given``: hyperparameters beside the options (``ppo:n_steps=64``), joined with the
        ``hyperparameters`` mapping by :func:`.hyperparameters.gather_hyperparameters`."""
        super().__init__(context)
        chosen = gather_hyperparameters(self.name, self.algorithm, hyperparameters, given, OPTIONS)
        self.allow_other_world = check_flag(self.name, allow_other_world)
        for key, flag in (("deterministic", deterministic), ("normalize", normalize)):
            if not isinstance(flag, bool):
                raise ConfigError(f"{self.name}: {key} must be true or false, got {flag!r}")
        self.deterministic = deterministic
        self.normalize = normalize
        self.hyperparameters = {**DEFAULT_HYPERPARAMETERS[self.algorithm], **chosen}
        self.obs_norm: dict[str, Any] | None = None
        self.model_path = None if model_path is None else str(model_path)
        self.model: Any = None
        if self.model_path is not None:
            self.load(self.model_path)

    @classmethod
    def check_options(cls, options: dict[str, Any]) -> None:
        """Check the hyperparameters among ``options`` (keys and kinds) against the SB3 class."""
        beside = {k: v for k, v in options.items() if k not in OPTIONS}
        gather_hyperparameters(cls.name, cls.algorithm, options.get("hyperparameters"), beside, OPTIONS)

    def bind(self, context: AgentContext) -> None:
        """Attach the world facts; a loaded model must read this world's observation length."""
        shape = getattr(getattr(self.model, "observation_space", None), "shape", None)
        if shape is not None and context.obs_names and shape[0] != len(context.obs_names):
            raise ConfigError(f"{self.name}: the model {self.model_path or ''} reads observations of length "
                              f"{shape[0]}, this world's have {len(context.obs_names)} (train it on this scenario)")
        self.check_world(context.world)
        super().bind(context)

    def has_model(self) -> bool:
        """True once a model was trained or loaded."""
        return self.model is not None

    def __deepcopy__(self, memo: dict[int, Any]) -> SB3Agent:
        """A copy for another simulated user (the per-user drivers copy one agent per user): its own
        generator, settings and statistics, sharing the model, which simulation only reads (a model
        just trained holds tensors torch cannot deep-copy). Train a copy only after loading its own."""
        clone = copy.copy(self)
        memo[id(self)] = clone
        for key in ("rng", "hyperparameters", "obs_norm"):
            setattr(clone, key, copy.deepcopy(getattr(self, key), memo))
        return clone

    def spec(self) -> dict[str, Any]:
        out = {"name": self.name, "model_path": self.model_path, "deterministic": self.deterministic,
               "normalize": self.normalize, "hyperparameters": dict(self.hyperparameters), "params": {}}
        if self.allow_other_world:
            out["allow_other_world"] = True
        return out

    def train(self, env_or_world: Any, total_timesteps: int, seed: int = 0, progress_bar: bool = True,
              n_envs: int = 8) -> SB3Agent:
        """Learn for ``total_timesteps`` steps on ``n_envs`` users of a World (or of an env's world)."""
        from shortcut_gym.envs.world import World

        world = env_or_world if isinstance(env_or_world, World) else env_or_world.unwrapped.world
        # a loaded model trained further: on its own world only, unless allowed
        bind_for_world(self, world, where=f"{self.name} train")
        self.model, obs_norm = train_model(self.algorithm, self.hyperparameters, world, total_timesteps, seed, n_envs,
                                           self.normalize, self.model, f"train {self.name}" if progress_bar else None)
        if obs_norm is not None:
            self.obs_norm = obs_norm
        self.trained_on(world)
        return self

    def _prepare(self, obs: np.ndarray) -> np.ndarray:
        x = np.asarray(obs, dtype=np.float32)
        if self.obs_norm is None:
            return x
        n = self.obs_norm
        z = (x - n["mean"]) / np.sqrt(n["var"] + n["epsilon"])
        return np.clip(z, -n["clip"], n["clip"]).astype(np.float32)

    def save(self, path: str | Path) -> Path:
        """Write the model zip to ``path`` (.zip; added when ``path`` has no suffix, another suffix
        refused: :func:`~shortcut_gym.agents.model_files.model_file_path`); returns the path written."""
        if self.model is None:
            raise NotReadyError(f"{self.name}: nothing to save, train or load a model first")
        record = self.record_to_save(self.context.world if self.context is not None else None)
        path = model_file_path(self.name, path, ".zip")
        p = save_model(self.model, self.obs_norm, path, json.dumps(record, sort_keys=True), self.algorithm)
        self.model_path = str(p)
        return p

    def load(self, path: str | Path) -> SB3Agent:
        """Read a model saved by :meth:`save`."""
        model, obs_norm, record = load_model(self.name, self.algorithm, path, self.normalize)
        self.adopt_record(record, str(Path(path)), self.context.world if self.context is not None else None)
        self.model = model
        if obs_norm is not None:
            self.obs_norm = obs_norm
        self.model_path = str(Path(path))
        return self

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        return self.probability_rows(np.asarray(obs)[None])[0]

    def probability_rows(self, obs: np.ndarray) -> np.ndarray:
        """(B, 3) :meth:`action_probabilities` of B observations in one forward pass of the policy."""
        if self.model is None:
            raise NotReadyError(f"{self.name}: train or load a model before use")
        import torch

        policy = self.model.policy
        with FORWARD_LOCK, torch.no_grad():
            tensor = policy.obs_to_tensor(self._prepare(obs))[0]
            if self.algorithm == "dqn":
                q = policy.q_net(tensor).numpy()
                eps = float(self.model.exploration_rate)
                p = np.full((len(q), 3), eps / 3)
                p[np.arange(len(q)), np.argmax(q, axis=1)] += 1 - eps
                return p
            probs = policy.get_distribution(tensor).distribution.probs.numpy().astype(np.float64)
        return probs / probs.sum(axis=1, keepdims=True)

    def batch_policy(self, n_users: int, seeds: Sequence[int]) -> SB3BatchPolicy:
        """The policy for many users: one forward pass per trial over every user's observation
        (the vector env's batch), each user's action drawn from its own agent generator."""
        seeds = check_seeds(seeds, f"{self.name}.batch_policy")
        check_batch_users(self.name, n_users, seeds)
        return SB3BatchPolicy(self, n_users, seeds)

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        p = self.action_probabilities(obs, info)
        if self.deterministic:
            return int(np.argmax(p))
        return int(self.rng.choice(3, p=p))

    def evaluate(self, env: Any, seeds: list[int] | range) -> pd.DataFrame:
        """Total time (s) and hotkey share per simulated user."""
        return evaluate_agent(env, self, seeds)


class SB3BatchPolicy:
    """Users of one SB3 model: ``actions`` is one batched forward pass, then each user's draw."""

    def __init__(self, agent: SB3Agent, n_users: int, seeds: Sequence[int]) -> None:
        if len(seeds) != n_users:
            raise ConfigError(f"{agent.name}: {len(seeds)} seeds for {n_users} users")
        if agent.model is None:
            raise NotReadyError(f"{agent.name}: train or load a model before use")
        self.agent = agent
        self.draws = None if agent.deterministic else UserDraws(agent.name, seeds)

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """One action per user from the model's distribution for its observation."""
        p = self.agent.probability_rows(obs)
        if self.draws is None:
            return np.argmax(p, axis=1).astype(np.int64)
        return self.draws.sample(p)

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """A trained model does not learn while it is simulated."""


class PPOAgent(SB3Agent):
    """PPO adapter."""

    name = "ppo"
    algorithm = "ppo"


class A2CAgent(SB3Agent):
    """A2C adapter."""

    name = "a2c"
    algorithm = "a2c"


class DQNAgent(SB3Agent):
    """DQN adapter."""

    name = "dqn"
    algorithm = "dqn"
