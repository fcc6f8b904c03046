"""Where the learning models find what they read in an observation.

Only the ``forgetting`` mechanism reads the observation: the time since the target's last use,
stored by the environment as a float32 ``log1p(seconds)``. Its position comes from the world's
observation layout (:mod:`shortcut_gym.envs.observation`, the layout's one owner).
"""

from __future__ import annotations

import numpy as np

from shortcut_gym.agents.base import AgentContext
from shortcut_gym.envs.errors import NotReadyError
from shortcut_gym.envs.observation import feature_index

#: Name of the observation entry the ``forgetting`` mechanism reads.
DT_FEATURE = "log1p_seconds_since_last_use"


def dt_feature_index(context: AgentContext | None, obs_dim: int) -> int:
    """Index of :data:`DT_FEATURE` in an observation of length ``obs_dim`` of the bound world.

    The layout is named by ``context.obs_names``, else by ``context.world``; a context with
    neither leaves it to the one layout of that length
    (:func:`shortcut_gym.envs.observation.feature_index`, which raises when several fit).
    """
    if context is None:
        raise NotReadyError("the forgetting mechanism needs a bound context (call agent.bind(context) first)")
    names = tuple(context.obs_names)
    if not names and context.world is not None:
        names = tuple(context.world.observation_names())
    return feature_index(DT_FEATURE, obs_dim, context.n_commands, names)


def decode_dt_s(feature: np.ndarray | float) -> np.ndarray | float:
    """Seconds since last use from the observation's float32 log1p feature."""
    return np.expm1(np.asarray(feature, dtype=np.float64))
