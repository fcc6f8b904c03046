"""Which Stable-Baselines3 algorithms the adapters wrap, their default settings and torch threads.

Raffin et al. (2021), "Stable-Baselines3: reliable reinforcement learning implementations", JMLR 22;
PPO: Schulman et al. (2017); A2C: Mnih et al. (2016); DQN: Mnih et al. (2015).
"""

from __future__ import annotations

from typing import Any

from shortcut_gym.envs.errors import require_extra

MAX_TORCH_THREADS = 1  # <= 2 as the project asks; 1 is far faster when the 2 cores are shared
#: Hyperparameters merged under a spec's own. PPO's (n_steps 128, batch 256, lr 1e-3, gamma 0.99,
#: 10 epochs, entropy 0.01) are settings of this project found by a small search, no source.
DEFAULT_HYPERPARAMETERS: dict[str, dict[str, Any]] = {
    "ppo": {"n_steps": 128, "batch_size": 256, "learning_rate": 1e-3, "gamma": 0.99, "n_epochs": 10, "ent_coef": 0.01},
    "a2c": {},
    "dqn": {},
}


def algorithm_classes() -> dict[str, Any]:
    """The SB3 classes by adapter algorithm name (imports SB3 and torch, sets torch's threads);
    without the ``rl`` extra installed, :class:`~shortcut_gym.envs.errors.MissingExtraError`."""
    require_extra("torch", "rl")
    require_extra("stable_baselines3", "rl")
    import torch
    from stable_baselines3 import A2C, DQN, PPO

    torch.set_num_threads(min(MAX_TORCH_THREADS, torch.get_num_threads()))
    return {"ppo": PPO, "a2c": A2C, "dqn": DQN}
