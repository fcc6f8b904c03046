"""Batched simulator: many simulated users stepped at once by the compiled kernel.

User ``i`` reset with seed ``s_i`` draws exactly what ``CommandSelection-v0`` draws after
``reset(seed=s_i)`` (its schedule, then one uniform per trial, from ``default_rng(s_i)``), and
both step through :func:`shortcut_gym.envs.kernel.step_users`, so trajectories agree bit for bit.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ActionError
from shortcut_gym.envs.task import Schedule
from shortcut_gym.envs.world import World


class BatchSimulator:
    """Step ``n_users`` simulated users of one :class:`World` in lock step."""

    def __init__(self, world: World) -> None:
        self.world = world
        self.par, self.ipar = world.parameters()
        self.cmdc = world.command_constants()
        self.n_users = 0
        self.schedules: list[Schedule] = []

    def reset(
        self,
        seeds: Sequence[int] | None = None,
        rngs: Sequence[np.random.Generator] | None = None,
        schedules: Sequence[Schedule | None] | None = None,
    ) -> np.ndarray:
        """Start one user per seed (or per generator); returns observations (users x obs_dim)."""
        if (seeds is None) == (rngs is None):
            raise ValueError("give either seeds or rngs")
        gens = [np.random.default_rng(int(s)) for s in seeds] if seeds is not None else list(rngs)  # type: ignore[arg-type]
        n = len(gens)
        if n == 0:
            raise ValueError("need at least one user")
        given = list(schedules) if schedules is not None else [None] * n
        if len(given) != n:
            raise ValueError(f"{len(given)} schedules for {n} users")
        drawn = [self.world.draw(g, s) for g, s in zip(gens, given)]
        self.schedules = [d[0] for d in drawn]
        horizons = {s.horizon for s in self.schedules}
        if len(horizons) != 1:
            raise ValueError(f"all users of a batch need the same horizon, got {sorted(horizons)}")
        h = horizons.pop()
        scale = self.world.memory.gap_time_scale
        self.sched_cmd = np.stack([s.command for s in self.schedules]).astype(np.int64)
        self.sched_onset = np.stack([s.onset_s for s in self.schedules]).astype(np.float64)
        self.sched_clock = np.stack([s.memory_clock_s(scale) for s in self.schedules]).astype(np.float64)
        self.sched_u = np.stack([d[1] for d in drawn])
        c = self.world.commands.n_commands
        cap = self.world.trace_capacity(self.schedules)
        self.n_users, self.horizon = n, h
        self.fs = np.zeros((n, c, k.N_FS))
        self.ist = np.zeros((n, c, k.N_IS), dtype=np.int64)
        self.tr = np.zeros((n, c, cap, 3))
        self.us = np.zeros((n, k.N_US), dtype=np.int64)
        self.reward = np.zeros(n)
        self.outcome = np.zeros(n, dtype=np.int64)
        self.ops = np.zeros((n, k.N_OPS))
        self.p_recall = np.zeros(n)
        self.obs = np.zeros((n, self.world.obs_dim), dtype=np.float32)
        for b in range(n):
            k.write_obs(self.ipar, self.par, c, h, self.fs[b], self.ist[b], self.tr[b], self.us[b],
                        self.sched_cmd[b], self.sched_clock[b], self.sched_onset[b], self.obs[b])
        return self.obs

    @property
    def trial(self) -> int:
        """Index of the upcoming trial (the same for every user)."""
        return int(self.us[0, k.U_TRIAL])

    def targets(self) -> np.ndarray:
        """Upcoming target command of every user."""
        t = min(self.trial, self.horizon - 1)
        return self.sched_cmd[:, t]

    def step(self, actions: np.ndarray) -> np.ndarray:
        """Advance all users one trial; returns rewards (= -seconds). Outcome etc. on attributes."""
        if self.n_users == 0:
            raise RuntimeError("call reset() before step()")
        if self.trial >= self.horizon:
            raise RuntimeError(f"the horizon of {self.horizon} trials is reached; call reset()")
        acts = np.asarray(actions)
        if acts.shape != (self.n_users,):
            raise ActionError(f"expected {self.n_users} actions, got shape {acts.shape}")
        if not np.issubdtype(acts.dtype, np.integer):
            raise ActionError(f"actions must be integers 0 (menu), 1 (hotkey), 2 (learn); got dtype {acts.dtype}")
        bad = (acts < 0) | (acts > 2)
        if bad.any():
            i = int(np.argmax(bad))
            raise ActionError(f"action {int(acts[i])} of user {i} is not 0 (menu), 1 (hotkey) or 2 (learn)")
        k.step_users(acts.astype(np.int64), self.ipar, self.par, self.cmdc, self.fs, self.ist, self.tr,
                     self.us, self.sched_cmd, self.sched_clock, self.sched_onset, self.sched_u,
                     self.reward, self.outcome, self.ops, self.p_recall, self.obs)
        return self.reward
