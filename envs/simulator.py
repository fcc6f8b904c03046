"""Batched simulator: many simulated users stepped at once by the compiled kernel.

User ``i`` reset with seed ``s_i`` draws exactly what ``CommandSelection-v0`` draws after
``reset(seed=s_i)`` (its schedule, then one uniform per trial, from ``default_rng(s_i)``), and
both step through :func:`shortcut_gym.envs.kernel.step_users`, so trajectories agree bit for bit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import overload

import numpy as np
from numba import njit

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ActionError, ConfigError, UsageError
from shortcut_gym.envs.kernel_layout import CommandState, ScheduleArrays, Trace, UserArrays, UserState
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.task import Schedule, check_replay_length, session_onsets
from shortcut_gym.envs.world import World


class _LazySchedules(Sequence[Schedule]):
    """The users' :class:`Schedule` objects, built on first access from the simulator's arrays
    (a given schedule is returned as the object that was given)."""

    def __init__(self, sim: BatchSimulator, given: list[Schedule | None]) -> None:
        # this reset's arrays (a later reset makes new ones, so these stay this batch's)
        self._rows = sim.schedule_arrays
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
            rows = self._rows
            made = Schedule(command=rows.command[b].copy(), onset_s=rows.onset_s[b].copy(),
                            session=rows.session[b].copy(), gap_total_s=rows.gap_total_s[b].copy())
            self._made[b] = made
        return made


#: The trial-time factor without noise (broadcast to users x trials, read-only).
_NO_NOISE = np.ones(1)
_NO_NOISE.setflags(write=False)


class BatchSimulator:
    """Step ``n_users`` simulated users of one :class:`World` in lock step.

    The arrays the compiled kernel reads and writes (B users, C commands, T trials; columns named
    by the index constants of :mod:`shortcut_gym.envs.kernel` and documented field by field in
    :mod:`shortcut_gym.envs.kernel_layout`; times in seconds):

    - ``kernel_params`` (float, ``P_*`` and ``W_*``) and ``kernel_int_params`` (int, ``I_*``): the
      world's costs, memory and observation settings (:meth:`World.parameters`);
      ``command_constants`` (C, ``C_*``): menu search, decision and pointing times, hotkey key
      count and the interface aids' constants.
    - ``sched_command``, ``sched_uniform``, ``sched_onset``, ``sched_clock``, ``sched_session``,
      ``sched_gap`` (B, T): each trial's target, its recall uniform, onset, memory clock (onset
      with session gaps scaled), session index and gap time before it; ``sched_noise`` (B, T): the
      trial-time factor of each trial (ones without ``costs.noise``).
    - ``command_float_state`` (B, C, ``F_*``): folded-in old ACT-R traces, exponential trace
      strength and time, onset of the last use; ``command_counts`` (B, C, ``S_*``, int): stored
      traces, menu selections, exposures, hotkey successes and failures, learn actions;
      ``traces`` (B, C, capacity, ``T_*``): each stored trace's clock time, weight and decay;
      ``user_state`` (B, ``U_*``, int): upcoming trial index and hand position.
    - After each step: ``reward`` (B, -seconds), ``outcome`` (B, ``OUT_*``), ``operator_time_s``
      (B, ``O_*``: seconds per operator), ``p_recall`` (B) and ``obs`` (B, ``World.obs_dim``).
    """

    def __init__(self, world: World) -> None:
        self.world = world
        self.kernel_params, self.kernel_int_params = world.parameters()
        self.command_constants = world.command_constants()
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
            raise ConfigError("give either seeds or rngs")
        if seeds is not None:
            seeds = check_seeds(seeds, "BatchSimulator.reset")
        compiled = None
        if seeds is not None and schedules is None and len(seeds) > 0:
            compiled = seed_words(np.asarray([int(s) for s in seeds]))
        if compiled is not None:
            gens: list[np.random.Generator | None] = [None] * len(seeds)  # type: ignore[arg-type]
        elif seeds is not None:
            gens = [np.random.default_rng(int(s)) for s in seeds]
        else:
            gens = list(rngs)  # type: ignore[arg-type]
        n = len(gens)
        if n == 0:
            raise ConfigError("need at least one user")
        given = list(schedules) if schedules is not None else [None] * n
        if len(given) != n:
            raise ConfigError(f"{len(given)} schedules for {n} users")
        replayed = [b for b, s in enumerate(given) if s is not None]
        for b in replayed:
            check_replay_length(given[b].horizon, self.world.horizon,  # type: ignore[union-attr]
                                f"BatchSimulator.reset: schedules[{b}]")
        horizons = {given[b].horizon for b in replayed}  # type: ignore[union-attr]
        if len(replayed) < n:
            horizons.add(self.world.horizon)
        if len(horizons) != 1:
            raise ConfigError(f"all users of a batch need the same horizon, got {sorted(horizons)}")
        h = horizons.pop()
        c = self.world.commands.n_commands
        self.sched_command = np.empty((n, h), dtype=np.int64)
        self.sched_uniform = np.empty((n, h))
        if compiled is not None:  # World.draw's doubles for every user, seeded in one compiled call
            seeded_schedules(compiled[0], compiled[1], self._cdf, self.sched_command, self.sched_uniform)
        if len(replayed) == 0:
            # every user's onsets, sessions and gaps are the world's: read-only views of one row
            self.sched_onset = np.broadcast_to(self._onset, (n, h))
            self.sched_clock = np.broadcast_to(self._clock, (n, h))
            self.sched_session = np.broadcast_to(self._session, (n, h))
            self.sched_gap = np.broadcast_to(self._gap, (n, h))
        else:
            self.sched_onset = np.empty((n, h))
            self.sched_clock = np.empty((n, h))
            self.sched_session = np.empty((n, h), dtype=np.int64)
            self.sched_gap = np.empty((n, h))
        # per sampled user exactly world.draw's calls: choice(c, size=h, p) is random(h) looked up in
        # the cdf, then random(h); one random(2 h) call yields the same doubles and generator state.
        # Users draw in order, so generators shared between users advance as in world.draw.
        scale = self.world.memory.gap_time_scale
        sampled: list[int] = []
        draws: list[np.ndarray] = []
        for b, g in enumerate(gens if compiled is None else ()):
            if given[b] is None:
                sampled.append(b)
                draws.append(g.random(2 * h))  # type: ignore[union-attr]
                continue
            sch, u = self.world.draw(g, given[b])  # type: ignore[arg-type]
            self.sched_command[b] = sch.command
            self.sched_onset[b] = sch.onset_s
            self.sched_clock[b] = sch.memory_clock_s(scale)
            self.sched_session[b] = sch.session
            self.sched_gap[b] = sch.gap_total_s
            self.sched_uniform[b] = u
        if sampled:
            drawn = np.stack(draws)
            rows = np.asarray(sampled) if len(sampled) < n else slice(None)
            self.sched_command[rows] = self._cdf.searchsorted(drawn[:, :h], side="right")
            self.sched_uniform[rows] = drawn[:, h:]
            if replayed:
                self.sched_onset[rows] = self._onset
                self.sched_clock[rows] = self._clock
                self.sched_session[rows] = self._session
                self.sched_gap[rows] = self._gap
        self.sched_noise = self._noise_factors(n, h, seeds, gens)
        self.schedules = _LazySchedules(self, given)  # type: ignore[arg-type]
        cap = self._trace_capacity(c)
        self.n_users, self.horizon = n, h
        self.command_float_state = np.zeros((n, c, k.N_FS))
        self.command_counts = np.zeros((n, c, k.N_IS), dtype=np.int64)
        self.traces = np.zeros((n, c, cap, k.N_TRACE))
        self.user_state = np.zeros((n, k.N_US), dtype=np.int64)
        self.reward = np.zeros(n)
        self.outcome = np.zeros(n, dtype=np.int64)
        self.operator_time_s = np.zeros((n, k.N_OPS))
        self.p_recall = np.zeros(n)
        self.obs = np.zeros((n, self.world.obs_dim), dtype=np.float32)
        k.write_obs_users(self.kernel_int_params, self.kernel_params, c, self.command_float_state,
                          self.command_counts, self.traces, self.user_state, self.sched_command, self.sched_clock,
                          self.sched_onset, self.obs)
        return self.obs

    def _noise_factors(self, n: int, h: int, seeds: Sequence[int] | None,
                       gens: Sequence[np.random.Generator | None]) -> np.ndarray:
        """(users x trials) trial-time factors: ones without noise (a read-only view), else lognormal
        factors of mean 1 and the world's CV, drawn from each user's own noise stream: the first
        child of its seed sequence (``SeedSequence(seed).spawn(1)[0]``; for a given generator the
        next child of the sequence it was made from), so no other draw changes."""
        cv = self.world.costs.noise.cv
        if cv == 0.0:
            return np.broadcast_to(_NO_NOISE, (n, h))
        sigma = math.sqrt(math.log1p(cv * cv))
        out = np.empty((n, h))
        for b in range(n):
            if seeds is not None:
                child = np.random.SeedSequence(int(seeds[b])).spawn(1)[0]
            else:
                made_from = getattr(gens[b].bit_generator, "seed_seq", None)  # type: ignore[union-attr]
                if not isinstance(made_from, np.random.SeedSequence):
                    raise ConfigError("trial-time noise (costs.noise.cv > 0) needs generators made from a seed "
                                      "sequence, such as numpy.random.default_rng(seed)")
                child = made_from.spawn(1)[0]
            out[b] = np.exp(np.random.default_rng(child).normal(-0.5 * sigma * sigma, sigma, h))
        return out

    def _trace_capacity(self, n_cmd: int) -> int:
        """:meth:`World.trace_capacity` of the users' schedules, from the command array."""
        if self.world.memory.kind in ("actr", "exponential"):
            return self.world.trace_capacity([])
        n = self.sched_command.shape[0]
        flat = (self.sched_command + n_cmd * np.arange(n)[:, None]).ravel()
        return max(int(np.bincount(flat, minlength=n * n_cmd).max()), 1)

    @property
    def schedule_arrays(self) -> ScheduleArrays:
        """This batch's ``sched_*`` arrays, named."""
        return ScheduleArrays(self.sched_command, self.sched_uniform, self.sched_onset, self.sched_clock,
                              self.sched_session, self.sched_gap, self.sched_noise)

    @property
    def user_arrays(self) -> UserArrays:
        """This batch's kernel state arrays, named."""
        return UserArrays(self.command_float_state, self.command_counts, self.traces, self.user_state)

    def command_state(self, user: int, command: int) -> CommandState:
        """User ``user``'s memory and counts for ``command``, by name."""
        floats = self.command_float_state[user, command].tolist()
        counts = self.command_counts[user, command].tolist()
        return CommandState(*floats, *counts)

    def stored_traces(self, user: int, command: int) -> list[Trace]:
        """The traces user ``user`` holds for ``command``, oldest first."""
        n = int(self.command_counts[user, command, k.S_NTR])
        return [Trace(*row) for row in self.traces[user, command, :n].tolist()]

    def user_state_of(self, user: int) -> UserState:
        """User ``user``'s upcoming trial index and hand, by name."""
        return UserState(*self.user_state[user].tolist())

    @property
    def trial(self) -> int:
        """Index of the upcoming trial (the same for every user)."""
        return int(self.user_state[0, k.U_TRIAL])

    def targets(self) -> np.ndarray:
        """Upcoming target command of every user."""
        t = min(self.trial, self.horizon - 1)
        return self.sched_command[:, t]

    def step(self, actions: np.ndarray) -> np.ndarray:
        """Advance all users one trial; returns rewards (= -seconds). Outcome etc. on attributes."""
        if self.n_users == 0:
            raise UsageError("call reset() before step()")
        if self.trial >= self.horizon:
            raise UsageError(f"the horizon of {self.horizon} trials is reached; call reset()")
        acts = np.asarray(actions)
        if acts.shape != (self.n_users,):
            raise ActionError(f"expected {self.n_users} actions, got shape {acts.shape}")
        if not np.issubdtype(acts.dtype, np.integer):
            raise ActionError(f"actions must be integers 0 (menu), 1 (hotkey), 2 (learn); got dtype {acts.dtype}")
        bad = (acts < 0) | (acts > 2)
        if bad.any():
            i = int(np.argmax(bad))
            raise ActionError(f"action {int(acts[i])} of user {i} is not 0 (menu), 1 (hotkey) or 2 (learn)")
        k.step_users(acts.astype(np.int64), *self.step_arrays())
        return self.reward

    def step_arrays(self) -> tuple[np.ndarray, ...]:
        """The arrays :func:`~shortcut_gym.envs.kernel.step_users` takes after the actions, in its
        order (the same objects until the next :meth:`reset`)."""
        return (self.kernel_int_params, self.kernel_params, self.command_constants, self.command_float_state,
                self.command_counts, self.traces, self.user_state, self.sched_command, self.sched_clock,
                self.sched_onset, self.sched_uniform, self.sched_session, self.reward, self.outcome,
                self.operator_time_s, self.p_recall, self.obs, self.sched_noise)


# ---- compiled seeding: default_rng(seed).random(n) for many seeds at once ---------------------
# numpy's SeedSequence (O'Neill's seed_seq mixing; pool of four 32-bit words) feeding PCG64
# (128-bit LCG, XSL-RR output) and Generator.random's 53-bit doubles, rebuilt so that a batch of
# users is seeded without a Python call per user. Tests compare it with numpy for many seeds.
_M32 = np.uint64(0xFFFFFFFF)
_INIT_A, _MULT_A = np.uint64(0x43B0D7E5), np.uint64(0x931E8875)
_INIT_B, _MULT_B = np.uint64(0x8B51F9DD), np.uint64(0x58F38DED)
_MIX_L, _MIX_R = np.uint64(0xCA01F9DD), np.uint64(0x4973F715)
_PCG_MULT_HI, _PCG_MULT_LO = np.uint64(2549297995355413924), np.uint64(4865540595714422341)
_U16, _U32, _U1, _U58, _U63, _U11 = (np.uint64(v) for v in (16, 32, 1, 58, 63, 11))


@njit(cache=True)
def _mulhi64(a, b):
    """High 64 bits of the 128-bit product of two uint64."""
    a_lo, a_hi = a & _M32, a >> _U32
    b_lo, b_hi = b & _M32, b >> _U32
    lo_lo = a_lo * b_lo
    mid1 = a_hi * b_lo + (lo_lo >> _U32)
    mid2 = a_lo * b_hi + (mid1 & _M32)
    return a_hi * b_hi + (mid1 >> _U32) + (mid2 >> _U32)


@njit(cache=True)
def _pcg_step(s_hi, s_lo, i_hi, i_lo):
    """state * multiplier + increment (mod 2^128)."""
    lo = s_lo * _PCG_MULT_LO
    hi = _mulhi64(s_lo, _PCG_MULT_LO) + s_hi * _PCG_MULT_LO + s_lo * _PCG_MULT_HI
    new_lo = lo + i_lo
    carry = np.uint64(1) if new_lo < lo else np.uint64(0)
    return hi + i_hi + carry, new_lo


@njit(cache=True)
def pcg64_seeded(words, n, b, pool, state32):
    """PCG64 (state hi, lo, increment hi, lo) of ``default_rng(entropy)`` for row ``b`` of ``words``."""
    hc = _INIT_A
    for i in range(4):
        v = words[b, i] if i < n else np.uint64(0)
        v = (v ^ hc) & _M32
        hc = (hc * _MULT_A) & _M32
        v = (v * hc) & _M32
        pool[i] = v ^ (v >> _U16)
    for i_src in range(4):
        for i_dst in range(4):
            if i_src != i_dst:
                v = (pool[i_src] ^ hc) & _M32
                hc = (hc * _MULT_A) & _M32
                v = (v * hc) & _M32
                v ^= v >> _U16
                r = (_MIX_L * pool[i_dst] - _MIX_R * v) & _M32
                pool[i_dst] = r ^ (r >> _U16)
    for i_src in range(4, n):
        for i_dst in range(4):
            v = (words[b, i_src] ^ hc) & _M32
            hc = (hc * _MULT_A) & _M32
            v = (v * hc) & _M32
            v ^= v >> _U16
            r = (_MIX_L * pool[i_dst] - _MIX_R * v) & _M32
            pool[i_dst] = r ^ (r >> _U16)
    hc = _INIT_B
    for i in range(8):
        v = (pool[i % 4] ^ hc) & _M32
        hc = (hc * _MULT_B) & _M32
        v = (v * hc) & _M32
        state32[i] = v ^ (v >> _U16)
    seed_hi = state32[0] | (state32[1] << _U32)
    seed_lo = state32[2] | (state32[3] << _U32)
    inc_hi0 = state32[4] | (state32[5] << _U32)
    inc_lo0 = state32[6] | (state32[7] << _U32)
    i_hi = (inc_hi0 << _U1) | (inc_lo0 >> _U63)
    i_lo = (inc_lo0 << _U1) | _U1
    s_hi, s_lo = _pcg_step(np.uint64(0), np.uint64(0), i_hi, i_lo)
    lo = s_lo + seed_lo
    s_hi = s_hi + seed_hi + (np.uint64(1) if lo < s_lo else np.uint64(0))
    s_hi, s_lo = _pcg_step(s_hi, lo, i_hi, i_lo)
    return s_hi, s_lo, i_hi, i_lo


@njit(cache=True)
def pcg64_next_double(s_hi, s_lo, i_hi, i_lo):
    """Advance PCG64 once; (new state hi, lo, Generator.random's double)."""
    s_hi, s_lo = _pcg_step(s_hi, s_lo, i_hi, i_lo)
    value = s_hi ^ s_lo
    rot = s_hi >> _U58
    x = (value >> rot) | (value << ((np.uint64(64) - rot) & _U63))
    return s_hi, s_lo, np.float64(x >> _U11) * (1.0 / 9007199254740992.0)


@njit(cache=True)
def seeded_uniforms(words, n_words, n_draws, out):
    """Row b of ``out`` = ``np.random.default_rng(entropy_b).random(n_draws)`` where entropy_b's
    32-bit words (little end first, as SeedSequence coerces ints and lists of ints) are
    ``words[b, :n_words[b]]``."""
    pool = np.empty(4, dtype=np.uint64)
    state32 = np.empty(8, dtype=np.uint64)
    for b in range(words.shape[0]):
        s_hi, s_lo, i_hi, i_lo = pcg64_seeded(words, n_words[b], b, pool, state32)
        for j in range(n_draws):
            s_hi, s_lo, out[b, j] = pcg64_next_double(s_hi, s_lo, i_hi, i_lo)


@njit(cache=True, nogil=True)
def seeded_schedules(words, n_words, cdf, command, uniforms):
    """Per user b (entropy as in :func:`seeded_uniforms`): ``command[b]`` = ``rng.choice(len(cdf),
    size=h, p)`` (``random(h)`` looked up as ``cdf.searchsorted(u, side='right')``), then
    ``uniforms[b]`` = ``rng.random(h)``: :meth:`World.draw`'s draws."""
    pool = np.empty(4, dtype=np.uint64)
    state32 = np.empty(8, dtype=np.uint64)
    h = command.shape[1]
    m = cdf.shape[0]
    for b in range(words.shape[0]):
        s_hi, s_lo, i_hi, i_lo = pcg64_seeded(words, n_words[b], b, pool, state32)
        for j in range(h):
            s_hi, s_lo, u = pcg64_next_double(s_hi, s_lo, i_hi, i_lo)
            below = 0  # searchsorted(side='right') on the non-decreasing cdf: the count of entries <= u,
            for i in range(m):  # counted without a branch (the draw decides where a search would stop)
                below += cdf[i] <= u
            command[b, j] = below
        for j in range(h):
            s_hi, s_lo, uniforms[b, j] = pcg64_next_double(s_hi, s_lo, i_hi, i_lo)


def seed_words(seeds: np.ndarray, extra: Sequence[int] = ()) -> tuple[np.ndarray, np.ndarray] | None:
    """SeedSequence's 32-bit entropy words of ``[seed, *extra]`` per seed (``seed`` alone without
    ``extra``), or None when a seed is outside 0 .. 2^64 - 1 (left to numpy, which reports it)."""
    s = np.asarray(seeds)
    if s.dtype.kind not in "iu" or (s.dtype.kind == "i" and (s < 0).any()):
        return None
    s = s.astype(np.uint64)
    lo, hi = s & _M32, s >> _U32
    two = hi > 0
    n = len(s)
    extra_words = [w for e in extra for w in _int_words(int(e))]
    width = 2 + len(extra_words)
    words = np.zeros((n, width), dtype=np.uint64)
    words[:, 0] = lo
    words[two, 1] = hi[two]
    count = np.where(two, 2, 1)
    for j, w in enumerate(extra_words):
        words[np.arange(n), count + j] = w
    return words, count + len(extra_words)


def _int_words(x: int) -> list[int]:
    if x < 0:
        raise ConfigError(f"entropy {x} must be >= 0")
    out = [x & 0xFFFFFFFF]
    x >>= 32
    while x:
        out.append(x & 0xFFFFFFFF)
        x >>= 32
    return out
