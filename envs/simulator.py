"""Batched simulator: many simulated users stepped at once by the compiled kernel.

User ``i`` reset with seed ``s_i`` draws exactly what ``CommandSelection-v0`` draws after
``reset(seed=s_i)`` (its schedule, then one uniform per trial, from ``default_rng(s_i)``), and
both step through :func:`shortcut_gym.envs.kernel.step_users`, so trajectories agree bit for bit.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import overload

import numpy as np

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ActionError
from shortcut_gym.envs.task import Schedule, session_onsets
from shortcut_gym.envs.world import World


class _LazySchedules(Sequence[Schedule]):
    """The users' :class:`Schedule` objects, built on first access from the simulator's arrays
    (a given schedule is returned as the object that was given)."""

    def __init__(self, sim: BatchSimulator, given: list[Schedule | None]) -> None:
        self._sim = sim
        self._made: list[Schedule | None] = given

    def __len__(self) -> int:
        return len(self._made)

    @overload
    def __getitem__(self, i: int) -> Schedule: ...

    @overload
    def __getitem__(self, i: slice) -> list[Schedule]: ...

    def __getitem__(self, i: int | slice) -> Schedule | list[Schedule]:
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        b = range(len(self))[i]
        made = self._made[b]
        if made is None:
            sim = self._sim
            made = Schedule(command=sim.sched_cmd[b].copy(), onset_s=sim.sched_onset[b].copy(),
                            session=sim.sched_session[b].copy(), gap_total_s=sim.sched_gap[b].copy())
            self._made[b] = made
        return made


class BatchSimulator:
    """Step ``n_users`` simulated users of one :class:`World` in lock step."""

    def __init__(self, world: World) -> None:
        self.world = world
        self.par, self.ipar = world.parameters()
        self.cmdc = world.command_constants()
        self.n_users = 0
        self.schedules: Sequence[Schedule] = []
        # the sampled schedules' fixed part, the same for every user (computed once per world)
        self._onset, self._session, self._gap = session_onsets(world.schedule)
        self._clock = self._onset - (1.0 - world.memory.gap_time_scale) * self._gap
        p = world.commands.probability
        # Generator.choice(n, size, p=p) draws ``random(size)`` and looks each draw up in this cdf
        self._cdf = p.cumsum()
        self._cdf /= self._cdf[-1]

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
        replayed = [b for b, s in enumerate(given) if s is not None]
        horizons = {given[b].horizon for b in replayed}  # type: ignore[union-attr]
        if len(replayed) < n:
            horizons.add(self.world.horizon)
        if len(horizons) != 1:
            raise ValueError(f"all users of a batch need the same horizon, got {sorted(horizons)}")
        h = horizons.pop()
        c = self.world.commands.n_commands
        self.sched_cmd = np.empty((n, h), dtype=np.int64)
        self.sched_onset = np.empty((n, h))
        self.sched_clock = np.empty((n, h))
        self.sched_session = np.empty((n, h), dtype=np.int64)
        self.sched_gap = np.empty((n, h))
        self.sched_u = np.empty((n, h))
        # per sampled user exactly world.draw's calls: choice(c, size=h, p) is random(h) looked up in
        # the cdf, then random(h); one random(2 h) call yields the same doubles and generator state.
        # Users draw in order, so generators shared between users advance as in world.draw.
        scale = self.world.memory.gap_time_scale
        sampled: list[int] = []
        draws: list[np.ndarray] = []
        for b, g in enumerate(gens):
            if given[b] is None:
                sampled.append(b)
                draws.append(g.random(2 * h))
                continue
            sch, u = self.world.draw(g, given[b])
            self.sched_cmd[b] = sch.command
            self.sched_onset[b] = sch.onset_s
            self.sched_clock[b] = sch.memory_clock_s(scale)
            self.sched_session[b] = sch.session
            self.sched_gap[b] = sch.gap_total_s
            self.sched_u[b] = u
        if sampled:
            drawn = np.stack(draws)
            rows = np.asarray(sampled) if len(sampled) < n else slice(None)
            self.sched_cmd[rows] = self._cdf.searchsorted(drawn[:, :h], side="right")
            self.sched_u[rows] = drawn[:, h:]
            self.sched_onset[rows] = self._onset
            self.sched_clock[rows] = self._clock
            self.sched_session[rows] = self._session
            self.sched_gap[rows] = self._gap
        self.schedules = _LazySchedules(self, given)
        cap = self._trace_capacity(c)
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
        k.write_obs_users(self.ipar, self.par, c, self.fs, self.ist, self.tr, self.us, self.sched_cmd,
                          self.sched_clock, self.sched_onset, self.obs)
        return self.obs

    def _trace_capacity(self, n_cmd: int) -> int:
        """:meth:`World.trace_capacity` of the users' schedules, from the command array."""
        if self.world.memory.kind in ("actr", "exponential"):
            return self.world.trace_capacity([])
        n = self.sched_cmd.shape[0]
        flat = (self.sched_cmd + n_cmd * np.arange(n)[:, None]).ravel()
        return max(int(np.bincount(flat, minlength=n * n_cmd).max()), 1)

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
