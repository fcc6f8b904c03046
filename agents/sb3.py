"""Stable-Baselines3 adapters (PPO, A2C, DQN) behind the agent protocol.

Raffin et al. (2021), "Stable-Baselines3: reliable reinforcement learning implementations", JMLR 22;
PPO: Schulman et al. (2017); A2C: Mnih et al. (2016); DQN: Mnih et al. (2015).

``train(env_or_world, total_timesteps, seed, progress_bar)`` builds a CommandSelection env (when
given a World) and learns; ``save(path)`` / ``load(path)`` (or ``model_path=`` in the spec);
``evaluate(env, seeds)`` runs :func:`run_episode` per seed. ``action_probabilities`` is the
policy's action distribution (PPO, A2C), or for DQN the epsilon-greedy distribution over its
Q-values with epsilon = the model's final exploration rate. ``act`` samples from it with the
agent's generator, or takes its most probable action when ``deterministic=True``.
Stable-Baselines3 and torch are imported on first use; torch runs on 1 thread (the project allows
2; one thread trained 9x faster on a busy 2-core machine).
Progress bars use tqdm (SB3's own bar needs ``rich``, which is not a dependency).

Training runs on ``n_envs`` batched users (``envs.vector.make_sb3_vec_env``) and, with
``normalize=True`` (default), through SB3's ``VecNormalize`` of observations and rewards: without
it PPO settles on always-menu in short budgets on this task (measured while building the adapter).
The observation statistics are frozen after training and saved beside the model
(``<path>.obs_norm.npz``). PPO defaults (n_steps 128, batch 256, lr 1e-3, gamma 0.99, 10 epochs,
entropy 0.01) are settings of this project found by a small search, no source.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.rollout import context_of, evaluate_agent

MAX_TORCH_THREADS = 1  # <= 2 as the project asks; 1 is far faster when the 2 cores are shared
DEFAULT_HYPERPARAMETERS: dict[str, dict[str, Any]] = {
    "ppo": {"n_steps": 128, "batch_size": 256, "learning_rate": 1e-3, "gamma": 0.99, "n_epochs": 10, "ent_coef": 0.01},
    "a2c": {},
    "dqn": {},
}


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
                 deterministic: bool = False, hyperparameters: dict[str, Any] | None = None, normalize: bool = True,
                 **params: float) -> None:
        super().__init__(context, **params)
        for key, flag in (("deterministic", deterministic), ("normalize", normalize)):
            if not isinstance(flag, bool):
                raise ValueError(f"{self.name}: {key} must be true or false, got {flag!r}")
        self.deterministic = deterministic
        self.normalize = normalize
        self.hyperparameters = {**DEFAULT_HYPERPARAMETERS[self.algorithm], **(hyperparameters or {})}
        self.obs_norm: dict[str, Any] | None = None
        self.model_path = None if model_path is None else str(model_path)
        self.model: Any = None
        if self.model_path is not None:
            self.load(self.model_path)

    def spec(self) -> dict[str, Any]:
        return {"name": self.name, "model_path": self.model_path, "deterministic": self.deterministic,
                "normalize": self.normalize, "hyperparameters": dict(self.hyperparameters), "params": {}}

    def train(self, env_or_world: Any, total_timesteps: int, seed: int = 0, progress_bar: bool = True,
              n_envs: int = 8) -> SB3Agent:
        """Learn for ``total_timesteps`` steps on ``n_envs`` users of a World (or of an env's world)."""
        from shortcut_gym.envs.vector import make_sb3_vec_env
        from shortcut_gym.envs.world import World

        world = env_or_world if isinstance(env_or_world, World) else env_or_world.unwrapped.world
        if self.context is None:
            from shortcut_gym.envs.env import CommandSelectionEnv

            self.bind(context_of(CommandSelectionEnv(world=world)))
        algos = _algorithms()
        venv = make_sb3_vec_env(int(n_envs), world=world, seed=seed)
        if self.normalize:
            from stable_baselines3.common.vec_env import VecNormalize

            venv = VecNormalize(venv, norm_obs=True, norm_reward=True, gamma=self.hyperparameters.get("gamma", 0.99))
        if self.model is None:
            self.model = algos[self.algorithm]("MlpPolicy", venv, seed=seed, verbose=0, device="cpu",
                                               **self.hyperparameters)
        else:
            self.model.set_env(venv)
        callback = tqdm_callback(total_timesteps, f"train {self.name}") if progress_bar else None
        self.model.learn(total_timesteps=int(total_timesteps), callback=callback)
        if self.normalize:
            rms = venv.obs_rms
            self.obs_norm = {"mean": rms.mean.copy(), "var": rms.var.copy(), "clip": float(venv.clip_obs),
                             "epsilon": float(venv.epsilon)}
        return self

    def _prepare(self, obs: np.ndarray) -> np.ndarray:
        x = np.asarray(obs, dtype=np.float32)
        if self.obs_norm is None:
            return x
        n = self.obs_norm
        z = (x - n["mean"]) / np.sqrt(n["var"] + n["epsilon"])
        return np.clip(z, -n["clip"], n["clip"]).astype(np.float32)

    def save(self, path: str | Path) -> Path:
        """Write the model zip; returns its path."""
        if self.model is None:
            raise ValueError(f"{self.name}: nothing to save, train or load a model first")
        self.model.save(str(path))
        p = Path(path)
        p = p if p.suffix == ".zip" else p.with_suffix(".zip")
        if self.obs_norm is not None:
            np.savez(_norm_path(p), **self.obs_norm)
        self.model_path = str(p)
        return p

    def load(self, path: str | Path) -> SB3Agent:
        """Read a model saved by :meth:`save`."""
        p = Path(path)
        if not p.is_file() and not p.with_suffix(".zip").is_file():
            raise ValueError(f"{self.name}: no model file at {p}")
        self.model = _algorithms()[self.algorithm].load(str(p), device="cpu")
        norm = _norm_path(p if p.suffix == ".zip" else p.with_suffix(".zip"))
        if self.normalize:
            if not norm.is_file():
                raise ValueError(f"{self.name}: normalize is on but {norm} (observation statistics) is missing")
            with np.load(norm) as d:
                self.obs_norm = {"mean": d["mean"], "var": d["var"], "clip": float(d["clip"]),
                                 "epsilon": float(d["epsilon"])}
        self.model_path = str(p)
        return self

    def action_probabilities(self, obs: np.ndarray, info: dict[str, Any]) -> np.ndarray:
        if self.model is None:
            raise ValueError(f"{self.name}: train or load a model before use")
        import torch

        policy = self.model.policy
        with torch.no_grad():
            tensor = policy.obs_to_tensor(self._prepare(obs))[0]
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
        return evaluate_agent(env, self, seeds)


def _norm_path(model_zip: Path) -> Path:
    return model_zip.with_suffix(".obs_norm.npz")


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
