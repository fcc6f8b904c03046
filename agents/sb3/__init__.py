"""Stable-Baselines3 adapters (PPO, A2C, DQN) behind the agent protocol.

:mod:`.adapter` (the agents), :mod:`.training` (learning on batched users, normalisation),
:mod:`.files` (model zip + observation statistics), :mod:`.algorithms` (classes, defaults, threads).
"""

from shortcut_gym.agents.sb3.adapter import A2CAgent, DQNAgent, PPOAgent, SB3Agent
from shortcut_gym.agents.sb3.algorithms import DEFAULT_HYPERPARAMETERS, MAX_TORCH_THREADS
from shortcut_gym.agents.sb3.training import tqdm_callback

__all__ = ["DEFAULT_HYPERPARAMETERS", "MAX_TORCH_THREADS", "A2CAgent", "DQNAgent", "PPOAgent", "SB3Agent",
           "tqdm_callback"]
