"""The next uses a planner decision averages over, tabulated once per plan."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from shortcut_gym.agents.planner.memory_model import N_GAP_QUANTILES, QUANTILE_MIDPOINTS, fresh_share
from shortcut_gym.envs.world import World


@dataclass(frozen=True)
class NextUses:
    """The next uses a decision averages over (see :func:`next_use_points`), read-only: the copies
    of a planner agent (one per simulated user) share them, as they share the plan."""

    clock_s: np.ndarray  # (commands, horizon - 1, N_GAP_QUANTILES) memory clock of the next use
    fresh: np.ndarray  # same shape: share of its weight a trace laid now keeps there

    def __deepcopy__(self, memo: dict) -> NextUses:
        return self


def next_use_points(world: World, clock: np.ndarray) -> NextUses:
    """The next uses the planner's decision averages over, for every command c and trial t before
    the last: the memory clock (s) of the N_GAP_QUANTILES quantiles of k ~ geometric(p_c) given
    k <= trials after t, and the share of its weight a trace laid at t keeps there (age^-d, or
    e^{-lambda age}, or (1 + age/u)^-b); ``clock`` is the schedule's memory clock of each trial (s)."""
    m = world.memory
    horizon = world.horizon
    trials = np.arange(horizon - 1)
    after = horizon - trials - 1
    n_cmd = world.commands.n_commands
    t_next = np.empty((n_cmd, len(trials), N_GAP_QUANTILES))
    for c in range(n_cmd):
        p_c = float(world.commands.probability[c])
        if p_c >= 1:
            steps = np.ones((len(trials), N_GAP_QUANTILES), dtype=np.int64)
        else:
            F = np.array([1.0 - (1.0 - p_c) ** int(a) for a in after])  # scalar pow, as numpy's may differ
            k_ = np.ceil(np.log1p(-(QUANTILE_MIDPOINTS[None, :] * F[:, None])) / math.log1p(-p_c))
            steps = np.clip(k_, 1, after[:, None]).astype(np.int64)
        t_next[c] = clock[trials[:, None] + steps]
    fresh = fresh_share(m, t_next - clock[trials][None, :, None])
    t_next.setflags(write=False)
    fresh.setflags(write=False)
    return NextUses(t_next, fresh)
