"""Stable-Baselines3 adapters (PPO, A2C, DQN) behind the agent protocol.

Raffin et al. (2021), "Stable-Baselines3: reliable reinforcement learning implementations", JMLR 22;
PPO: Schulman et al. (2017); A2C: Mnih et al. (2016); DQN: Mnih et al. (2015).

``train(env_or_world, total_timesteps, seed, progress_bar)`` builds a CommandSelection env (when
given a World) and learns; ``save(path)`` / ``load(path)`` (or ``model_path=`` in the spec);
``evaluate(env, seeds)`` runs :func:`run_episode` per seed. ``action_probabilities`` is the
policy's action distribution (PPO, A2C), or for DQN the epsilon-greedy distribution over its
Q-values with epsilon = the model's final exploration rate. ``act`` samples from it with the
agent's generator, or takes its most probable action when ``deterministic=True``.
Stable-Baselines3 and torch are imported on first use; torch runs on at most 2 threads.
Progress bars use tqdm (SB3's own bar needs ``rich``, which is not a dependency).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.rollout import context_of, run_episode

MAX_TORCH_THREADS = 2


def _algorithms() -> dict[str, Any]:
    import torch
    from stable_baselines3 import A2C, DQN, PPO

    torch.set_num_threads(min(MAX_TORCH_THREADS, torch.get_num_threads()))
    return {"ppo": PPO, "a2c": A2C, "dqn": DQN}


def tqdm_callback(total_timesteps: int, desc: str) -> Any:
    """An SB3 callback drawing a tqdm bar over environment steps."""
    from stable_baselines3.common.callbacks import BaseCallback
    from tqdm.auto import tqdm

    class _Bar(BaseCallback):
        def _on_training_start(self) -> None:
            self.bar = tqdm(total=total_timesteps, desc=desc, unit="step")

        def _on_step(self) -> bool:
            self.bar.update(self.training_env.num_envs)
            return True

        def _on_training_end(self) -> None:
            self.bar.close()

    return _Bar()


class SB3Agent(Agent):
    """A Stable-Baselines3 model as a zoo agent (subclasses pick the algorithm)."""

    name = "sb3"
    algorithm: ClassVar[str] = ""

    def __init__(self, context: AgentContext | None = None, model_path: str | Path | None = None,
                 deterministic: bool = False, hyperparameters: dict[str, Any] | None = None, **params: float) -> None:
        super().__init__(context, **params)
        if not isinstance(deterministic, bool):
            raise ValueError(f"{self.name}: deterministic must be true or false, got {deterministic!r}")
        self.deterministic = deterministic
        self.hyperparameters = dict(hyperparameters or {})
        self.model_path = None if model_path is None else str(model_path)
        self.model: Any = None
        if self.model_path is not None:
            self.load(self.model_path)

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "model_path": self.model_path, "deterministic": self.deterministic,
                "hyperparameters": dict(self.hyperparameters), "params": {}}

    def train(self, env_or_world: Any, total_timesteps: int, seed: int = 0, progress_bar: bool = True) -> SB3Agent:
        """Learn for ``total_timesteps`` environment steps on a CommandSelection env or World."""
        from shortcut_gym.envs.env import CommandSelectionEnv
        from shortcut_gym.envs.world import World

        env = CommandSelectionEnv(world=env_or_world) if isinstance(env_or_world, World) else env_or_world
        if self.context is None:
            self.bind(context_of(env))
        algo = _algorithms()[self.algorithm]
        if self.model is None:
            self.model = algo("MlpPolicy", env, seed=seed, verbose=0, device="cpu", **self.hyperparameters)
        callback = tqdm_callback(total_timesteps, f"train {self.name}") if progress_bar else None
        self.model.learn(total_timesteps=int(total_timesteps), callback=callback)
        return self

    def save(self, path: str | Path) -> Path:
        """Write the model zip; returns its path."""
        if self.model is None:
            raise ValueError(f"{self.name}: nothing to save, train or load a model first")
        self.model.save(str(path))
        p = Path(path)
        self.model_path = str(p if p.suffix == ".zip" else p.with_suffix(".zip"))
        return Path(self.model_path)

    def load(self, path: str | Path) -> SB3Agent:
        """Read a model saved by :meth:`save`."""
        p = Path(path)
        if not p.is_file() and not p.with_suffix(".zip").is_file():
            raise ValueError(f"{self.name}: no model file at {p}")
        self.model = _algorithms()[self.algorithm].load(str(p), device="cpu")
        self.model_path = str(p)
        return self

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self.model is None:
            raise ValueError(f"{self.name}: train or load a model before use")
        import torch

        policy = self.model.policy
        with torch.no_grad():
            tensor = policy.obs_to_tensor(np.asarray(obs, dtype=np.float32))[0]
            if self.algorithm == "dqn":
                q = policy.q_net(tensor)[0].numpy()
                eps = float(self.model.exploration_rate)
                p = np.full(3, eps / 3)
                p[int(np.argmax(q))] += 1 - eps
                return p
            probs = policy.get_distribution(tensor).distribution.probs[0].numpy().astype(np.float64)
        return probs / probs.sum()

    def act(self, obs: np.ndarray, info: dict[str, Any]) -> int:
        p = self.action_probabilities(obs, info)
        if self.deterministic:
            return int(np.argmax(p))
        return int(self.rng.choice(3, p=p))

    def evaluate(self, env: Any, seeds: list[int] | range) -> pd.DataFrame:
        """Total time (s) and hotkey share per simulated user."""
        rows = []
        for s in seeds:
            df = run_episode(env, self, seed=int(s))
            rows.append({"seed": int(s), "total_time_s": df["duration_s"].sum(),
                         "hotkey_share": float((df["outcome"] == "hotkey").mean())})
        return pd.DataFrame(rows)


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
