"""Compiled batch policies of the agents whose choice rule is fixed during a simulation.

The fixed baselines (always menu, always hotkey, learn on the first k uses, random), the static
softmax and the tabular agents' epsilon-greedy policy over a frozen Q table all choose from what a
:class:`DecisionRule` holds: one constant action; learn until the k-th use of the command, then the
hotkey; or a table of cumulative action probabilities looked up by the target's use count and the
session (random, static softmax) or by the tabular agents' discrete state. Their batch policy
(:class:`FrozenBatchPolicy`) steps trial by trial (``actions`` / ``observe``) or runs a just-reset
:class:`~shortcut_gym.envs.simulator.BatchSimulator` to its horizon in one compiled loop (``run``).

Bit for bit the single agent's choices: a sampled action is ``rng.choice(3, p=p)`` of the agent's
generator ``agent_rng(seed)`` (one double u per trial; the action is the number of entries of
``cdf = p.cumsum() / p.cumsum()[-1]`` at or below u), with the same doubles drawn by the compiled
PCG64 of :mod:`shortcut_gym.envs.simulator` and ``cdf`` tabulated by the agent's own numpy code. A
deterministic rule draws nothing (the agent's draws change nothing else). The tabular state's cells
are read from the observation's float32 features against float32 thresholds equal to the agent's
float64 bucket edges after ``expm1``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
from numba import njit

from shortcut_gym.agents.base import AGENT_STREAM, N_ACTIONS
from shortcut_gym.agents.batch_loop import RULE_JIT, SumArrays, check_fresh_run, decay_factor_table, step_and_count
from shortcut_gym.agents.rollout import UserSums
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, NotReadyError
from shortcut_gym.envs.seeds import check_seeds
from shortcut_gym.envs.simulator import BatchSimulator, pcg64_next_double, pcg64_seeded, seed_words

#: rule kinds: one action; learn on the first k uses then hotkey; a cdf per (uses, session); a cdf per tabular cell
RULE_CONSTANT, RULE_FIRST_USES, RULE_BY_USES_SESSION, RULE_BY_CELL = range(4)
#: the tabular state's features, in the order of a cell index (after the command)
CELL_FEATURES = ("log1p_learn_count", "log1p_hotkey_successes", "log1p_hotkey_failures",
                 "log1p_seconds_since_last_use")
_NO_THRESHOLD = np.float32(np.inf)


class DecisionRule(NamedTuple):
    """What a compiled frozen policy reads (arrays, so one compiled loop serves every kind).

    ``ints``: kind, constant action, k, uses rows (0: not a covariate), session columns (0: not a
    covariate), cells per command, then the number of bucket edges of each cell feature. ``cdf``
    (rows, 3): cumulative action probabilities. ``thresholds`` (4, 3) float32: per cell feature,
    the smallest float32 feature value of each next bucket (+inf pads). ``menu_only`` (commands,)
    int64: 1 where a constant or first-uses rule gives the menu instead (empty: nowhere).
    """

    ints: np.ndarray
    cdf: np.ndarray
    thresholds: np.ndarray
    menu_only: np.ndarray


def constant_rule(action: int, menu_only: Sequence[bool] = ()) -> DecisionRule:
    """Always ``action`` (the menu on the commands ``menu_only`` marks)."""
    return _rule(RULE_CONSTANT, action=action)._replace(menu_only=_mask(menu_only))


def first_uses_rule(k_uses: int, menu_only: Sequence[bool] = ()) -> DecisionRule:
    """Learn while the target has been used fewer than ``k_uses`` times, then the hotkey (the menu
    on the commands ``menu_only`` marks)."""
    return _rule(RULE_FIRST_USES, k_uses=k_uses)._replace(menu_only=_mask(menu_only))


def _mask(menu_only: Sequence[bool]) -> np.ndarray:
    return np.asarray([1 if m else 0 for m in menu_only], dtype=np.int64)


def cdf_of(p: np.ndarray) -> np.ndarray:
    """Row-wise ``Generator.choice``'s cumulative table of probabilities ``p`` (..., 3)."""
    cdf = np.cumsum(p, axis=-1)
    cdf /= cdf[..., -1:]
    return cdf


def uses_session_rule(cdf: np.ndarray) -> DecisionRule:
    """A cdf table (uses rows or 1, sessions or 1, 3), row ``min`` of nothing: the table must cover
    every use count and session it is asked for (rows of 1 mean the count is not read)."""
    uses, sessions = cdf.shape[0], cdf.shape[1]
    return _rule(RULE_BY_USES_SESSION, uses_rows=uses if uses > 1 else 0,
                 session_cols=sessions if sessions > 1 else 0, cdf=cdf.reshape(-1, N_ACTIONS))


def cell_rule(cdf: np.ndarray, edges: Sequence[Sequence[float]]) -> DecisionRule:
    """A cdf per (command, cell) (commands, *cells, 3); ``edges``: each cell feature's bucket edges
    (counts or seconds, the bucket being the number of edges at or below the decoded value)."""
    thresholds = np.full((len(CELL_FEATURES), 3), _NO_THRESHOLD, dtype=np.float32)
    for j, feature_edges in enumerate(edges):
        for i, e in enumerate(feature_edges):
            thresholds[j, i] = first_float32_decoding_to(float(e))
    per_command = int(np.prod(cdf.shape[1:-1]))
    return _rule(RULE_BY_CELL, cells=per_command, cdf=cdf.reshape(-1, N_ACTIONS), thresholds=thresholds)


def first_float32_decoding_to(edge: float) -> np.float32:
    """The smallest float32 f with ``np.expm1(float64(f)) >= edge`` (a ``log1p`` feature's bucket edge)."""
    f = np.float32(np.log1p(edge))
    up, down = np.float32(np.inf), np.float32(-np.inf)
    while np.expm1(np.float64(f)) < edge:
        f = np.nextafter(f, up)
    while np.expm1(np.float64(np.nextafter(f, down))) >= edge:
        f = np.nextafter(f, down)
    return f


def _rule(kind: int, action: int = 0, k_uses: int = 0, uses_rows: int = 0, session_cols: int = 0, cells: int = 0,
          cdf: np.ndarray | None = None, thresholds: np.ndarray | None = None) -> DecisionRule:
    thr = thresholds if thresholds is not None else np.full((len(CELL_FEATURES), 3), _NO_THRESHOLD, np.float32)
    edges_per_feature = [int((row < np.inf).sum()) for row in thr]
    ints = np.array([kind, action, k_uses, uses_rows, session_cols, cells, *edges_per_feature], dtype=np.int64)
    table = np.ascontiguousarray(cdf if cdf is not None else np.ones((1, N_ACTIONS)), dtype=np.float64)
    return DecisionRule(ints, table, np.ascontiguousarray(thr, dtype=np.float32), np.zeros(0, dtype=np.int64))


# ---- compiled decision ---------------------------------------------------------------------------------
@njit(**RULE_JIT)
def _bucket(thresholds, j, value):
    n = 0
    for i in range(thresholds.shape[1]):
        if value >= thresholds[j, i]:
            n += 1
    return n


@njit(**RULE_JIT)
def _cell(rule, c, f_learn, f_ok, f_fail, f_since):
    """Row of ``rule.cdf`` of command ``c``'s tabular cell with these float32 features."""
    thr = rule.thresholds
    n = rule.ints
    idx = _bucket(thr, 0, f_learn)
    idx = idx * (n[7] + 1) + _bucket(thr, 1, f_ok)
    idx = idx * (n[8] + 1) + _bucket(thr, 2, f_fail)
    idx = idx * (n[9] + 1) + _bucket(thr, 3, f_since)
    return c * n[5] + idx


@njit(**RULE_JIT)
def _masked(rule, c, a):
    """``a``, or the menu where the rule leaves command ``c`` to it."""
    if rule.menu_only.shape[0] > 0 and rule.menu_only[c] == 1:
        return k.MENU
    return a


@njit(**RULE_JIT)
def _pick(cdf, row, u):
    """``Generator.choice``: the number of cdf entries at or below ``u``."""
    a = 0
    for j in range(cdf.shape[1]):
        if cdf[row, j] <= u:
            a += 1
    return a


@njit(**RULE_JIT)
def _draw(pcg, b):
    s_hi, s_lo, u = pcg64_next_double(pcg[b, 0], pcg[b, 1], pcg[b, 2], pcg[b, 3])
    pcg[b, 0] = s_hi
    pcg[b, 1] = s_lo
    return u


@njit(**RULE_JIT)
def _uses_session_row(rule, uses, session):
    row = 0
    if rule.ints[3] > 0:
        row = uses
    if rule.ints[4] > 0:
        row = row * rule.ints[4] + session
    return row


@njit(cache=True)
def _seed_all(words, n_words, pcg):
    """Each user's ``default_rng(entropy)`` PCG64 state (rows of ``pcg``: state hi, lo, increment hi, lo)."""
    pool = np.empty(4, dtype=np.uint64)
    state32 = np.empty(8, dtype=np.uint64)
    for b in range(pcg.shape[0]):
        s_hi, s_lo, i_hi, i_lo = pcg64_seeded(words, n_words[b], b, pool, state32)
        pcg[b, 0], pcg[b, 1], pcg[b, 2], pcg[b, 3] = s_hi, s_lo, i_hi, i_lo


@njit(cache=True)
def _decide_users(rule, targets, uses, session, obs, cell_cols, pcg, out):
    """Per-trial path: every user's action from its target, use counts, session and observation."""
    kind = rule.ints[0]
    for b in range(targets.shape[0]):
        c = targets[b]
        if kind == RULE_CONSTANT:
            out[b] = _masked(rule, c, rule.ints[1])
        elif kind == RULE_FIRST_USES:
            out[b] = _masked(rule, c, k.LEARN if uses[b, c] < rule.ints[2] else k.HOTKEY)
        else:
            if kind == RULE_BY_USES_SESSION:
                row = _uses_session_row(rule, uses[b, c], session[b])
            else:
                row = _cell(rule, c, obs[b, cell_cols[0]], obs[b, cell_cols[1]], obs[b, cell_cols[2]],
                            obs[b, cell_cols[3]])
            out[b] = _pick(rule.cdf, row, _draw(pcg, b))


@njit(**RULE_JIT)
def _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
              sched_noise, reward, outcome, ops, p_recall, rule, uses, pcg, sums, scratch, factors):
    """Every trial of user ``b``: choose, step, count, add to the sums."""
    h = sched_cmd.shape[1]
    kind = rule.ints[0]
    fail_lat = k.failed_retrieval_s(par)
    for t in range(h):
        c = sched_cmd[b, t]
        s = sched_session[b, t]
        if kind == RULE_CONSTANT:
            a = _masked(rule, c, rule.ints[1])
        elif kind == RULE_FIRST_USES:
            a = _masked(rule, c, k.LEARN if uses[b, c] < rule.ints[2] else k.HOTKEY)
        else:
            if kind == RULE_BY_USES_SESSION:
                row = _uses_session_row(rule, uses[b, c], s)
            else:  # the observation's float32 features of the upcoming trial, as write_obs stores them
                cs = ist[b, c]
                row = _cell(rule, c, np.float32(math.log1p(cs[k.S_LEARN])), np.float32(math.log1p(cs[k.S_HK_OK])),
                            np.float32(math.log1p(cs[k.S_HK_FAIL])),
                            k.seconds_since_last_use_feature(ist[b], fs[b], c, sched_onset[b, t]))
            a = _pick(rule.cdf, row, _draw(pcg, b))
        step_and_count(b, t, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u,
                       sched_session, sched_noise, reward, outcome, ops, p_recall, fail_lat, sums, scratch, factors)
        uses[b, c] += 1


@njit(cache=True, nogil=True)
def _run_users(ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
               sched_noise, reward, outcome, ops, p_recall, obs, rule, uses, pcg, sums, factors):
    """:func:`_run_user` for every user, then its final observation (without the GIL); ``factors``:
    the run's decay-factor table or None."""
    n_users, h = sched_cmd.shape
    n_cmd = cmdc.shape[0]
    scratch = np.empty(k.N_OPS)
    for b in range(n_users):
        _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
                  sched_noise, reward, outcome, ops, p_recall, rule, uses, pcg, sums, scratch, factors)
        k.write_obs(ipar, par, n_cmd, h, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b], sched_onset[b],
                    obs[b])


# ---- the batch policy ------------------------------------------------------------------------------------
class FrozenBatchPolicy:
    """Many users of an agent with a fixed choice rule: ``actions`` / ``observe`` per trial, or
    ``run(sim)`` for a whole just-reset simulation in one compiled loop (the same numbers).

    ``rule_for(uses_rows, sessions)`` returns the rule for tables covering that many use counts and
    sessions (called again with larger sizes when a simulation needs them); ``cell_columns``: the
    observation's column of each of :data:`CELL_FEATURES` (tabular rules only).
    """

    def __init__(self, name: str, n_users: int, seeds: Sequence[int], n_commands: int, horizon: int,
                 n_sessions: int, rule_for, cell_columns: Sequence[int] = ()) -> None:
        if len(seeds) != n_users:
            raise ConfigError(f"{name}: {len(seeds)} seeds for {n_users} users")
        self.name = name
        self.n_users = n_users
        self.seeds = check_seeds(seeds, name)
        self._rule_for = rule_for
        self._sizes = (max(int(horizon), 1), max(int(n_sessions), 1))
        self.rule: DecisionRule = rule_for(*self._sizes)
        self.uses = np.zeros((n_users, n_commands), dtype=np.int64)
        self.session = np.zeros(n_users, dtype=np.int64)
        self.cell_columns = np.zeros(4, dtype=np.int64)
        self.cell_columns[:len(cell_columns)] = cell_columns
        self.pcg = np.zeros((n_users, 4), dtype=np.uint64)
        if self.draws:
            words = seed_words(np.asarray(self.seeds, dtype=np.int64), (AGENT_STREAM,))
            assert words is not None  # checked seeds are in 0 .. 2**63 - 1
            _seed_all(words[0], words[1].astype(np.int64), self.pcg)
        self.trial = 0

    @property
    def draws(self) -> bool:
        """Whether the rule samples (one uniform per user and trial)."""
        return int(self.rule.ints[0]) in (RULE_BY_USES_SESSION, RULE_BY_CELL)

    def _cover(self, uses: int, sessions: int) -> None:
        """Rebuild the rule's tables if they do not reach ``uses`` rows and ``sessions`` columns."""
        if uses > self._sizes[0] or sessions > self._sizes[1]:
            self._sizes = (max(uses, 2 * self._sizes[0]), max(sessions, self._sizes[1]))
            self.rule = self._rule_for(*self._sizes)

    def set_session(self, session: np.ndarray) -> None:
        """Session index (B,) of every user's upcoming trial."""
        self.session = np.asarray(session, dtype=np.int64)

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """One action per user for its target, given the observations (B, D)."""
        targets = np.asarray(targets, dtype=np.int64)
        self._cover(self.trial + 1, int(self.session.max()) + 1)
        out = np.empty(self.n_users, dtype=np.int64)
        _decide_users(self.rule, targets, self.uses, self.session, np.asarray(obs, dtype=np.float32),
                      self.cell_columns, self.pcg, out)
        return out

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Count the trial's use of each user's command."""
        self.uses[np.arange(self.n_users), np.asarray(targets, dtype=np.int64)] += 1
        self.trial += 1

    def run(self, sim: BatchSimulator) -> UserSums:
        """Run a just-reset simulator to its horizon in one compiled loop; per-user sums equal to
        stepping ``actions`` / ``sim.step`` / ``observe`` trial by trial."""
        check_fresh_run(sim, self.trial, self.n_users)
        n_sessions = int(sim.sched_session.max()) + 1
        self._cover(sim.horizon, n_sessions)
        sums = SumArrays(**vars(UserSums.zeros(sim.n_users, n_sessions, sim.world.commands.n_commands)))
        _run_users(sim.kernel_int_params, sim.kernel_params, sim.command_constants, sim.command_float_state,
                   sim.command_counts, sim.traces, sim.user_state, sim.sched_command, sim.sched_clock, sim.sched_onset,
                   sim.sched_uniform, sim.sched_session, sim.sched_noise, sim.reward, sim.outcome, sim.operator_time_s,
                   sim.p_recall, sim.obs, self.rule, self.uses, self.pcg, sums, decay_factor_table(sim))
        self.trial = sim.horizon
        return UserSums(**sums._asdict())


def frozen_policy(agent, n_users: int, seeds: Sequence[int], rule_for,
                  cell_columns: Sequence[int] = ()) -> FrozenBatchPolicy:
    """:class:`FrozenBatchPolicy` of a bound agent (its context gives the commands, horizon and sessions)."""
    context = agent.context
    if context is None or not context.n_commands:
        raise NotReadyError(f"{agent.name}: bind a context before batch_policy")
    world = context.world
    n_sessions = world.schedule.sessions if world is not None else 1
    return FrozenBatchPolicy(agent.name, n_users, seeds, context.n_commands, context.horizon, n_sessions, rule_for,
                             cell_columns)


@njit(cache=True)
def _sample_rows(cdf, pcg, out):
    for b in range(cdf.shape[0]):
        out[b] = _pick(cdf, b, _draw(pcg, b))


class UserDraws:
    """Each user's agent generator (``agent_rng(seed)``) as compiled PCG64 states: ``sample(p)``
    draws one action per user as ``rng.choice(3, p=p[b])`` would."""

    def __init__(self, name: str, seeds: Sequence[int]) -> None:
        checked = check_seeds(seeds, name)
        words = seed_words(np.asarray(checked, dtype=np.int64), (AGENT_STREAM,))
        assert words is not None  # checked seeds are in 0 .. 2**63 - 1
        self.pcg = np.zeros((len(checked), 4), dtype=np.uint64)
        _seed_all(words[0], words[1].astype(np.int64), self.pcg)

    def sample(self, p: np.ndarray) -> np.ndarray:
        """(B,) actions for probabilities ``p`` (B, 3)."""
        out = np.empty(len(p), dtype=np.int64)
        _sample_rows(np.ascontiguousarray(cdf_of(np.asarray(p, dtype=np.float64))), self.pcg, out)
        return out
