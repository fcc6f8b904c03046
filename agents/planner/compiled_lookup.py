"""The planner's plan lookup compiled: every user's decide/observe inside the fused simulation loop.

:class:`CompiledPlanLookup` runs a just-reset :class:`~shortcut_gym.envs.simulator.BatchSimulator`
to its horizon in one numba loop (users outside, trials inside), with each user's tracked memory
(the planner's ``_traces`` / hybrid base level, trace weights, menu counts, uses, hand) held in
per-user scratch arrays and :meth:`BoundedOptimalPlanner.action_values` rebuilt operation for
operation: the exact trial cost of the tracked activation, the interface aids' terms, the warm-up
block's traces, and the future term (the plan's V bilinear in activation and log weight at the
N_GAP_QUANTILES next-use points, averaged in numpy's pairwise order). Ties go to the lowest action
index, as ``argmax``. Everything the lookup reads is tabulated once per plan (:func:`lookup_tables`);
a next-use point with the same clock and share as an earlier one of its trial copies that point's
values (:func:`same_points`: the same doubles in, the same doubles out).

Compiled: a "plan" choice (restricted to some commands or not) for memory kinds actr (hybrid base
level), actr_exact, exponential and power, aids on or off. Kept on the Python path
(:class:`~.batch.PlanLookupBatch`, the same actions): the per-trial ``actions``/``observe`` calls
(the exact kinds' traces grow with the horizon, so per-user state across calls is not held
compiled), and a plan whose commands' grids differ or whose quantile count is below 8 (the
pairwise order rebuilt here needs 8 or more points); :func:`lookup_tables` returns None then.
"""

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, NamedTuple

import numpy as np
from numba import njit

from shortcut_gym.agents.batch_loop import SumArrays, step_and_count
from shortcut_gym.agents.learning.rules import RULE_JIT
from shortcut_gym.agents.planner.batch import PlanLookupBatch
from shortcut_gym.agents.planner.interpolation import bilinear_at, weight_coordinate
from shortcut_gym.agents.planner.lookup_layout import (  # noqa: F401  (some are re-exported)
    _KIND_CODES,
    _TIME_FIELDS,
    AGE_TABLE_MAX_TRIALS,
    F_DECAY,
    F_EXP_RATE,
    F_HOME,
    F_KEY,
    F_LATENCY,
    F_NOISE,
    F_POW_UNIT,
    F_THRESHOLD,
    F_WARMUP_BLOCK,
    I_AIDS,
    I_CAP,
    I_KIND,
    I_RECENT,
    I_WARMUP,
    MEM_EXACT_ACTR,
    MEM_EXPONENTIAL,
    MEM_HYBRID,
    T_FAIL,
    T_HOT_FIXED,
    T_HOT_KB,
    T_LEARN,
    T_MENU,
    T_MENU_KB,
    T_RET_KB,
    T_RET_MOUSE,
    LookupTables,
    same_points,
)
from shortcut_gym.agents.rollout import UserSums
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, UsageError
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import check_replay_length

if TYPE_CHECKING:
    from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner

def lookup_tables(agent: "BoundedOptimalPlanner", values_only: bool = False) -> LookupTables | None:
    """The tables of a planner whose choice follows its plan (reset here if it was not, to price
    its plan's times); None where the compiled rebuild does not apply (see the module docstring).
    ``values_only``: tables for :func:`action_values_user` alone, whatever the plan's choice
    (``allowed`` is then 1 everywhere; :func:`decide_user` must not read them)."""
    if agent.plan is None or getattr(agent, "_times_for", None) is not agent.plan:
        agent.reset()
    plan = agent.plan
    if plan is None or (plan.choice.kind != "plan" and not values_only):
        raise UsageError(f"{agent.name}: the compiled lookup is for a plan choice, this one is "
                         f"{plan.choice.label if plan is not None else 'not made'}")
    m = agent._memory
    n_cmd = len(plan.mdps)
    grids = [mdp.grid() for mdp in plan.mdps]
    g0 = grids[0]
    same = all(g[:4] == g0[:4] and g[5:] == g0[5:] and np.array_equal(g.log_weight, g0.log_weight) for g in grids)
    if not same or agent._next_uses.clock_s.shape[-1] < 8:
        return None
    horizon = agent._horizon
    clock = np.ascontiguousarray(agent._clock, dtype=np.float64)
    value_row = np.full((n_cmd, horizon), -1, dtype=np.int64)
    rows: list[int] = []
    for c in range(n_cmd):
        p_c = agent._p_use[c]
        for t in range(horizon):
            after = max(horizon - t - 1, 0)
            uses = min(1 + int(round(p_c * after)), plan.max_uses)
            if uses > 1 and after > 0:
                value_row[c, t] = uses - 1
                rows.append(uses - 1)
    n_rows = max(rows) + 1 if rows else 1
    values = np.stack([np.ascontiguousarray(v[:n_rows], dtype=np.float64) for v in plan.values])
    times = np.array([[float(getattr(tm, f)) for f in _TIME_FIELDS] for tm in agent._times], dtype=np.float64)
    cmdc = np.ascontiguousarray(agent._cmdc, dtype=np.float64)
    warmup = int(agent._warmup)
    block = float(agent._cmdc[:, k.C_WARMUP_S].sum())  # the agent's own expression
    floats = np.array([m.threshold, m.noise_s, m.latency_factor_s, agent._home_s, agent._key_s, m.decay,
                       m.exponential_rate_per_s, m.power_time_unit_s, block], dtype=np.float64)
    sessions = int(np.asarray(agent._session).max()) + 1 if horizon else 1
    cap = horizon + sessions + 1  # traces per command: one per trial, one per warm-up block
    ints = np.array([_KIND_CODES[m.kind], m.recent_traces, 1 if agent._aids else 0, warmup, cap], dtype=np.int64)
    allowed = np.array([1 if values_only or plan.choice.allows(c) else 0 for c in range(n_cmd)], dtype=np.int64)
    nu = agent._next_uses
    next_clock = np.ascontiguousarray(nu.clock_s, dtype=np.float64)
    ages, next_trial = np.zeros((0, 0)), np.zeros((0, 0, 0), dtype=np.int64)
    if 0 < horizon <= AGE_TABLE_MAX_TRIALS and bool(np.all(np.diff(clock) >= 0)):
        idx = np.minimum(np.searchsorted(clock, next_clock), horizon - 1).astype(np.int64)
        if np.array_equal(clock[idx], next_clock):  # every next use sits on a trial's clock
            ages = np.empty((horizon, horizon))
            _fill_ages(clock, ints[I_KIND], floats, ages)
            next_trial = idx
    return LookupTables(ints, floats, allowed, clock, np.ascontiguousarray(agent._session, dtype=np.int64),
                        value_row, values, next_clock,
                        np.ascontiguousarray(nu.fresh, dtype=np.float64), times, cmdc,
                        np.ascontiguousarray(agent._new_weights, dtype=np.float64),
                        np.flatnonzero(agent._cmdc[:, k.C_WARMUP_S] > 0).astype(np.int64), g0, ages, next_trial,
                        same_points(next_clock, np.asarray(nu.fresh, dtype=np.float64)))


# ---- compiled memory of one user ------------------------------------------------------------------------
class UserMemory(NamedTuple):
    """One user's tracked memory (scratch, reset per user). Hybrid: the recent traces in
    ``times``/``weights`` (``n_traces`` of them), the older lump in ``lump`` (weight, first, last).
    ``trial_of`` / ``lump_trial``: the trial whose clock a trace (the lump's first, last) was laid
    at, -1 off the trials' clocks (the warm-up block's), for reading the age table."""

    times: np.ndarray  # (commands, cap)
    weights: np.ndarray  # (commands, cap)
    trial_of: np.ndarray  # (commands, cap) int64
    lump_trial: np.ndarray  # (commands, 2) int64
    n_traces: np.ndarray  # (commands,) int64
    lump: np.ndarray  # (commands, 3)
    total_weight: np.ndarray  # (commands,) planner's _weight
    menu_count: np.ndarray  # (commands,) int64
    uses: np.ndarray  # (commands,) int64
    hand: np.ndarray  # (2,) int64: hand on keyboard, last warmed trial


def user_memory(n_cmd: int, cap: int) -> UserMemory:
    """Empty scratch memory for ``n_cmd`` commands of up to ``cap`` traces each."""
    return UserMemory(np.zeros((n_cmd, cap)), np.zeros((n_cmd, cap)), np.full((n_cmd, cap), -1, dtype=np.int64),
                      np.full((n_cmd, 2), -1, dtype=np.int64), np.zeros(n_cmd, dtype=np.int64),
                      np.zeros((n_cmd, 3)), np.zeros(n_cmd), np.zeros(n_cmd, dtype=np.int64),
                      np.zeros(n_cmd, dtype=np.int64), np.zeros(2, dtype=np.int64))


@njit(**RULE_JIT)
def clear_memory(mem):
    mem.n_traces[:] = 0
    mem.lump[:, :] = 0.0
    mem.lump_trial[:, :] = -1
    mem.total_weight[:] = 0.0
    mem.menu_count[:] = 0
    mem.uses[:] = 0
    mem.hand[0] = 0
    mem.hand[1] = -1


@njit(**RULE_JIT, inline="always")
def _decay_factor(kind, f, age):
    """The share of its weight a trace keeps after ``age`` (s), as the planner's activation
    formulas compute it: age^-d (ACT-R kinds), e^{-lambda age}, (1 + age/u)^-b."""
    if kind == MEM_HYBRID or kind == MEM_EXACT_ACTR:
        return age ** (-f[F_DECAY])
    if kind == MEM_EXPONENTIAL:
        return math.exp(-f[F_EXP_RATE] * age)
    return (1.0 + age / f[F_POW_UNIT]) ** (-f[F_DECAY])


@njit(**RULE_JIT)
def _fill_ages(clock, kind, f, out):
    """``out[i, j]``: the decay factor at trial i's clock of a trace laid at trial j's (every pair,
    the same expression :func:`_activation` evaluates, so reading it gives the same doubles)."""
    for i in range(clock.shape[0]):
        for j in range(clock.shape[0]):
            out[i, j] = _decay_factor(kind, f, clock[i] - clock[j])


@njit(**RULE_JIT, inline="always")
def _old_lump(now, d, weight, first, last, last_factor):
    """envs.memory._old_lump, operation for operation, with ``last_factor`` = (now - last)^-d given."""
    a_n = now - last
    r = (last - first) / a_n
    if r <= 1e-12:
        return weight * last_factor
    return weight * last_factor * math.expm1((1 - d) * math.log1p(r)) / ((1 - d) * r)


@njit(**RULE_JIT, inline="always")
def _activation(tab, mem, c, now, now_trial):
    """The planner's ``_activation`` of command ``c`` at clock ``now`` (s); ``now_trial``: a trial
    whose clock is ``now`` (the decay factors then come from the age table), or -1."""
    n = mem.n_traces[c]
    if n == 0:
        return -np.inf
    kind = tab.ints[I_KIND]
    f = tab.floats
    tabled = now_trial >= 0 and tab.ages.shape[0] > 0
    total = 0.0
    for j in range(n):
        tj = mem.trial_of[c, j]
        if tabled and tj >= 0:
            total += mem.weights[c, j] * tab.ages[now_trial, tj]
        else:
            total += mem.weights[c, j] * _decay_factor(kind, f, now - mem.times[c, j])
    if kind == MEM_HYBRID and mem.lump[c, 0] != 0.0:
        last = mem.lump_trial[c, 1]
        d = f[F_DECAY]
        factor = tab.ages[now_trial, last] if tabled and last >= 0 else (now - mem.lump[c, 2]) ** (-d)
        total += _old_lump(now, d, mem.lump[c, 0], mem.lump[c, 1], mem.lump[c, 2], factor)
    return math.log(total) if total > 0 else -np.inf


@njit(**RULE_JIT)
def _lay(tab, mem, c, now, weight, trial):
    """The planner's ``_lay``: a trace of ``weight`` at ``now`` (the clock of ``trial``, or -1 off
    the trials' clocks; the hybrid keeps the recent ones)."""
    if weight <= 0:
        return
    mem.total_weight[c] += weight
    n = mem.n_traces[c]
    mem.times[c, n] = now
    mem.weights[c, n] = weight
    mem.trial_of[c, n] = trial
    n += 1
    if tab.ints[I_KIND] == MEM_HYBRID and n > tab.ints[I_RECENT]:
        t0, w0, i0 = mem.times[c, 0], mem.weights[c, 0], mem.trial_of[c, 0]
        for j in range(n - 1):
            mem.times[c, j] = mem.times[c, j + 1]
            mem.weights[c, j] = mem.weights[c, j + 1]
            mem.trial_of[c, j] = mem.trial_of[c, j + 1]
        n -= 1
        if mem.lump[c, 0] == 0.0:
            mem.lump[c, 1] = t0
            mem.lump_trial[c, 0] = i0
        mem.lump[c, 2] = t0
        mem.lump_trial[c, 1] = i0
        mem.lump[c, 0] += w0
    mem.n_traces[c] = n


@njit(**RULE_JIT)
def _warmup(tab, mem, trial):
    """The planner's ``_apply_warmup``: the warm-up block's traces before a warm-up session."""
    mode = tab.ints[I_WARMUP]
    if mode == 0 or trial <= mem.hand[1] or trial >= tab.clock.shape[0]:
        return
    mem.hand[1] = trial
    starts = trial == 0 or (mode == 2 and tab.session[trial] != tab.session[trial - 1])
    if not starts:
        return
    block = tab.floats[F_WARMUP_BLOCK]
    if mem.hand[0] == 0:
        block += tab.floats[F_HOME]
    for i in range(tab.warmup_cmds.shape[0]):
        j = tab.warmup_cmds[i]
        _lay(tab, mem, j, tab.clock[trial] - block, tab.cmdc[j, k.C_WARMUP_W], -1)
    mem.hand[0] = 1


@njit(**RULE_JIT)
def _aid_terms(tab, mem, c):
    """The planner's ``_aid_terms``: (seconds, trace weight, locked) of a menu path of ``c`` now."""
    cc = tab.cmdc[c]
    sel = mem.menu_count[c] + 1
    nudged = cc[k.C_NUDGE_FROM] <= sel < cc[k.C_NUDGE_UNTIL]
    locked = mem.uses[c] >= cc[k.C_LOCK_AFTER]
    seconds = cc[k.C_LABEL_SEARCH] / sel + (cc[k.C_NUDGE_S] if nudged else 0.0)
    if locked:
        seconds += tab.floats[F_HOME] + cc[k.C_KEYS] * tab.floats[F_KEY]
    return seconds, cc[k.C_LABEL_W] + (cc[k.C_NUDGE_W] if nudged else 0.0), locked


@njit(**RULE_JIT)
def _pairwise_mean(pts, j):
    """``np.add.reduce(pts, axis=1)[j] / G`` for 8 <= G <= 128: numpy's eight-accumulator order."""
    n = pts.shape[1]
    r0, r1, r2, r3 = pts[j, 0], pts[j, 1], pts[j, 2], pts[j, 3]
    r4, r5, r6, r7 = pts[j, 4], pts[j, 5], pts[j, 6], pts[j, 7]
    i = 8
    while i < n - (n % 8):
        r0 += pts[j, i]
        r1 += pts[j, i + 1]
        r2 += pts[j, i + 2]
        r3 += pts[j, i + 3]
        r4 += pts[j, i + 4]
        r5 += pts[j, i + 5]
        r6 += pts[j, i + 6]
        r7 += pts[j, i + 7]
        i += 8
    res = ((r0 + r1) + (r2 + r3)) + ((r4 + r5) + (r6 + r7))
    while i < n:
        res += pts[j, i]
        i += 1
    return res / n


@njit(**RULE_JIT)
def decide_user(tab, mem, c, trial, nw, pts, cell, frac):
    """:meth:`BoundedOptimalPlanner.decide` for a plan choice (menu off the choice's commands);
    ``nw``, ``pts``, ``cell``, ``frac``: scratch (4,), (PTS_ROWS, G), (4,) int64, (4,)."""
    if tab.allowed[c] == 0:
        return k.MENU
    q_menu, q_hot, q_learn = action_values_user(tab, mem, c, trial, nw, pts, cell, frac)
    return _argmax3(q_menu, q_hot, q_learn)


@njit(**RULE_JIT)
def action_values_user(tab, mem, c, trial, nw, pts, cell, frac):
    """:meth:`BoundedOptimalPlanner.action_values` (menu, hotkey, learn) of command ``c`` at
    ``trial``, operation for operation (scratch as :func:`decide_user`)."""
    _warmup(tab, mem, trial)
    f = tab.floats
    h = tab.clock.shape[0]
    now_trial = min(trial, h - 1)
    now = tab.clock[now_trial]
    a_now = _activation(tab, mem, c, now, now_trial)
    p = 0.0
    if a_now != -np.inf:
        z = -(a_now - f[F_THRESHOLD]) / f[F_NOISE]
        if z <= 700:
            p = 1.0 / (1.0 + math.exp(z))
    lat = f[F_LATENCY] * math.exp(-a_now) if a_now > -np.inf else 0.0
    tm = tab.times[c]
    home = f[F_HOME]
    on_kb = 1.0 if mem.hand[0] == 1 else 0.0
    novice = (tab.cmdc[c, k.C_SEARCH] - tab.cmdc[c, k.C_DECISION]) / (mem.menu_count[c] + 1)
    start_menu = home * (on_kb - tm[T_MENU_KB]) + novice
    start_hot = home * ((1.0 - on_kb) - (1.0 - tm[T_HOT_KB]))
    ok = tm[T_HOT_FIXED] + start_hot + lat + tm[T_RET_KB]
    fail = tm[T_FAIL] + start_hot + novice + tm[T_RET_MOUSE]
    q_menu = -(tm[T_MENU] + start_menu + tm[T_RET_MOUSE])
    q_hot = -(p * ok + (1.0 - p) * fail)
    q_learn = -(tm[T_LEARN] + start_menu + tm[T_RET_MOUSE])
    for j in range(4):
        nw[j] = tab.new_weights[j]
    if tab.ints[I_AIDS] == 1:
        aid_s, aid_w, locked = _aid_terms(tab, mem, c)
        back = tm[T_RET_KB] - tm[T_RET_MOUSE] if locked else 0.0
        q_menu -= aid_s + back
        q_learn -= aid_s + back
        fail += aid_s + back
        q_hot = -(p * ok + (1.0 - p) * fail)
        nw[0] += aid_w
        nw[1] += aid_w
        nw[2] += 0.0
        nw[3] += aid_w
    row = tab.value_row[c, trial] if trial < h else -1
    if row >= 0:
        V = tab.values[c, row]
        weight = mem.total_weight[c]
        tabled = tab.next_trial.shape[0] > 0
        for j in range(4):  # the weight after each trace is the same at every point: its log once
            cell[j], frac[j] = weight_coordinate(weight + nw[j], tab.grid)
        _future_points(tab, mem, c, trial, V, nw, pts, cell, frac, tabled)
        q_menu += _pairwise_mean(pts, 0)
        q_learn += _pairwise_mean(pts, 1)
        q_hot += p * _pairwise_mean(pts, 2) + (1.0 - p) * _pairwise_mean(pts, 3)
    return q_menu, q_hot, q_learn


@njit(**RULE_JIT, inline="always")
def _future_points(tab, mem, c, trial, V, nw, pts, cell, frac, tabled):
    """``pts[j, g]``: V at next-use point g after a trace of ``nw[j]`` laid now, as
    ``interpolate_after_traces`` computes it, each value by the same operations; done in phases
    across the points (every point's trace sum, then every lump, then the logarithms, ...) so
    that the points' independent work sits side by side for the processor (rows 4..9 of ``pts``
    are the phases' scratch). Points repeating an earlier one (``same_point``) copy its values."""
    n_pts = pts.shape[1]
    src = tab.same_point[c, trial]
    n = mem.n_traces[c]
    kind = tab.ints[I_KIND]
    f = tab.floats
    for g in range(n_pts):  # row 8: the sum over the tracked traces, in their order
        pts[8, g] = 0.0
    for j in range(n):
        w = mem.weights[c, j]
        tj = mem.trial_of[c, j]
        tj_ok = tabled and tj >= 0 and tab.ages.shape[0] > 0
        for g in range(n_pts):
            if src[g] < 0:
                if tj_ok:
                    pts[8, g] += w * tab.ages[tab.next_trial[c, trial, g], tj]
                else:
                    pts[8, g] += w * _decay_factor(kind, f, tab.next_clock[c, trial, g] - mem.times[c, j])
    if n > 0 and kind == MEM_HYBRID and mem.lump[c, 0] != 0.0:  # the hybrid's old lump
        d = f[F_DECAY]
        last = mem.lump_trial[c, 1]
        lw, lf, ll = mem.lump[c, 0], mem.lump[c, 1], mem.lump[c, 2]
        by_table = tabled and last >= 0 and tab.ages.shape[0] > 0
        for g in range(n_pts):
            if src[g] < 0:
                now = tab.next_clock[c, trial, g]
                factor = tab.ages[tab.next_trial[c, trial, g], last] if by_table else (now - ll) ** (-d)
                pts[8, g] += _old_lump(now, d, lw, lf, ll, factor)
    for g in range(n_pts):  # row 9: e^A of the old memory at the point
        if src[g] < 0:
            total = pts[8, g]
            act = (math.log(total) if total > 0 else -np.inf) if n > 0 else -np.inf
            pts[9, g] = math.exp(act) if act > -np.inf else 0.0
    for g in range(n_pts):  # rows 4..7: the activation after each new trace
        if src[g] < 0:
            old = pts[9, g]
            fr = tab.fresh[c, trial, g]
            for j in range(4):
                s = old + nw[j] * fr
                pts[4 + j, g] = math.log(s) if s > 0 else -np.inf
    for g in range(n_pts):
        if src[g] < 0:
            for j in range(4):
                pts[j, g] = bilinear_at(V, pts[4 + j, g], cell[j], frac[j], tab.grid)
        else:
            for j in range(4):
                pts[j, g] = pts[j, src[g]]


#: rows of the ``pts`` scratch of :func:`decide_user` / :func:`action_values_user`
PTS_ROWS = 10


@njit(**RULE_JIT)
def _argmax3(q0, q1, q2):
    """``np.argmax([q0, q1, q2])``: the first maximum, the first NaN if any."""
    if math.isnan(q0):
        return 0
    if math.isnan(q1):
        return 1
    if math.isnan(q2):
        return 2
    best, v = 0, q0
    if q1 > v:
        best, v = 1, q1
    if q2 > v:
        best = 2
    return best


@njit(**RULE_JIT)
def observe_user(tab, mem, c, trial, outcome):
    """:meth:`BoundedOptimalPlanner.observe` of the trial's command, outcome code and trial index."""
    _warmup(tab, mem, trial)
    w = tab.new_weights
    if outcome == k.OUT_MENU:
        weight = w[0]
    elif outcome == k.OUT_LEARNED:
        weight = w[1]
    elif outcome == k.OUT_HOTKEY:
        weight = w[2]
    else:
        weight = w[3]
    locked = False
    if tab.ints[I_AIDS] == 1 and outcome != k.OUT_HOTKEY:
        _, extra, locked = _aid_terms(tab, mem, c)
        weight += extra
    mem.hand[0] = 1 if (outcome == k.OUT_HOTKEY or locked) else 0
    if outcome != k.OUT_HOTKEY:
        mem.menu_count[c] += 1
    mem.uses[c] += 1
    _lay(tab, mem, c, tab.clock[trial], weight, trial)


@njit(cache=True, nogil=True)
def _run_users(ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
               sched_noise, reward, outcome, ops, p_recall, obs, tab, mem, sums, record):
    """Every trial of every user: decide, step, observe, add to the sums (and the action into
    ``record`` (users, trials) when it has rows); then the final observation."""
    n_users, h = sched_cmd.shape
    n_cmd = cmdc.shape[0]
    scratch = np.empty(k.N_OPS)
    nw = np.empty(4)
    pts = np.empty((PTS_ROWS, tab.next_clock.shape[2]))
    cell = np.empty(4, dtype=np.int64)
    frac = np.empty(4)
    fail_lat = k.failed_retrieval_s(par)
    for b in range(n_users):
        clear_memory(mem)
        for t in range(h):
            c = sched_cmd[b, t]
            a = decide_user(tab, mem, c, t, nw, pts, cell, frac)
            if record.shape[0] > 0:
                record[b, t] = a
            _, res = step_and_count(b, t, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset,
                                    sched_u, sched_session, sched_noise, reward, outcome, ops, p_recall, fail_lat,
                                    sums, scratch)
            observe_user(tab, mem, c, t, res)
        k.write_obs(ipar, par, n_cmd, h, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b], sched_onset[b],
                    obs[b])


class CompiledPlanLookup:
    """Users of a planner following its plan: ``run(sim)`` in one compiled loop (module docstring);
    ``actions`` / ``observe`` per trial through :class:`~.batch.PlanLookupBatch` (the same actions)."""

    def __init__(self, agent: "BoundedOptimalPlanner", tables: LookupTables, n_users: int,
                 seeds: Sequence[int]) -> None:
        if len(seeds) != n_users:
            raise ConfigError(f"{agent.name}: {len(seeds)} seeds for {n_users} users")
        self.agent = agent
        self.tables = tables
        self.n_users = n_users
        self.seeds = [int(s) for s in seeds]
        self._stepped: PlanLookupBatch | None = None
        self._ran = False
        self.recorded = np.zeros((0, 0), dtype=np.int64)

    def _stepper(self) -> PlanLookupBatch:
        if self._ran:
            raise UsageError(f"{self.agent.name}: this batch policy already ran its simulation")
        if self._stepped is None:
            self._stepped = PlanLookupBatch(self.agent, self.n_users, self.seeds)
        return self._stepped

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """Each user's planned action (the Python per-user path)."""
        return self._stepper().actions(targets, obs)

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Each user's planner tracks its command's new trace (the Python per-user path)."""
        self._stepper().observe(targets, actions, outcomes, durations_s)

    def run(self, sim: BatchSimulator, record: bool = False) -> UserSums:
        """Run a just-reset simulator to its horizon in one compiled loop (sums equal to stepping);
        ``record``: keep every user's action of every trial in ``self.recorded`` (users, trials)."""
        if sim.n_users == 0 or sim.trial != 0:
            raise UsageError("a fused run needs a simulator just reset (trial 0)")
        if self._stepped is not None or self._ran:
            raise UsageError("a fused run needs a fresh batch policy (trial 0)")
        if self.n_users != sim.n_users:
            raise ConfigError(f"the policy has {self.n_users} users, the simulator {sim.n_users}")
        # a shorter schedule (a log cut short) runs on the plan, a longer one is refused
        check_replay_length(sim.horizon, int(self.tables.clock.shape[0]), self.agent.name)
        n_cmd = sim.world.commands.n_commands
        sums = SumArrays(**vars(UserSums.zeros(sim.n_users, int(sim.sched_session.max()) + 1, n_cmd)))
        mem = user_memory(n_cmd, int(self.tables.ints[I_CAP]))
        self.recorded = np.zeros((sim.n_users, sim.horizon) if record else (0, 0), dtype=np.int64)
        _run_users(sim.kernel_int_params, sim.kernel_params, sim.command_constants, sim.command_float_state,
                   sim.command_counts, sim.traces, sim.user_state, sim.sched_command, sim.sched_clock, sim.sched_onset,
                   sim.sched_uniform, sim.sched_session, sim.sched_noise, sim.reward, sim.outcome, sim.operator_time_s,
                   sim.p_recall, sim.obs, self.tables, mem, sums, self.recorded)
        self._ran = True
        return UserSums(**sums._asdict())
