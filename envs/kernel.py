"""Compiled step kernel shared by the single environment and the batched simulator.

Both call :func:`step_users` on arrays of users (the single env is a batch of one), so the two
produce the same numbers bit for bit. The formulas mirror :mod:`shortcut_gym.envs.costs` and
:mod:`shortcut_gym.envs.memory`, which are the readable references the tests compare against.
Every time is in seconds.

The small per-trial helpers (activation, recall, trace, menu time) are compiled with
``inline="always"``: numba inlines them into :func:`step_user`, which saves a call passing a dozen
array structs each (about a fifth of a hotkey trial); the operations, and so the numbers, are the
same. :func:`step_user` itself stays a call (inlined into the loops it ran slower).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from shortcut_gym.envs.observation import (
    X_EXPOSURES,
    X_HAND_ON_KEYBOARD,
    X_HORIZON_LEFT,
    X_HOTKEY_FAILURES,
    X_HOTKEY_SUCCESSES,
    X_LEARN_COUNT,
    X_RECALL,
    X_SINCE_LAST_USE,
    write_target,
)

# ---- action and outcome codes -------------------------------------------------------------
MENU, HOTKEY, LEARN = 0, 1, 2
ACTION_NAMES = ("menu", "hotkey", "learn")
OUT_MENU, OUT_HOTKEY, OUT_FORGOTTEN, OUT_WRONG, OUT_LEARNED = 0, 1, 2, 3, 4
OUTCOME_NAMES = ("menu", "hotkey", "hotkey_forgotten", "hotkey_wrong", "learned")

# ---- array layouts: each column is named and documented by a NamedTuple of kernel_layout ---
# ---- parameter vector (KernelParams) -------------------------------------------------------
(P_M, P_K, P_P, P_B, P_H, P_ENC, P_COMM, P_UNDOK, P_DECAY, P_TAU, P_S, P_F, P_PA_C, P_PA_A,
 P_EXP_RATE, P_POW_U, W_LEARN, W_HK_OK, W_HK_FAIL, W_MENU) = range(20)
N_PAR = 20
# integer parameters (KernelIntParams)
I_KIND, I_RECENT, I_OBS_RECALL, I_ONEHOT, I_AIDS, I_WARMUP = range(6)
N_IPAR = 6
# I_AIDS: 1 when any interface aid is on (0 runs exactly the aid-free path); I_WARMUP: 0 off, 1 first
# session only, 2 every session (see :mod:`shortcut_gym.envs.aids`)
# memory kinds (see memory.MEMORY_CODES)
K_ACTR, K_ACTR_EXACT, K_PA, K_EXP, K_POW = range(5)

# ---- per-command constants (CommandConstants) ---------------------------------------------
C_SEARCH, C_DECISION, C_POINTING, C_KEYS = range(4)
# interface aids (0 when off): label search s, label trace, nudge window [from, until) of menu
# selections, nudge s and trace, menu delay s, uses before lockout (inf: never), warm-up s and trace
(C_LABEL_SEARCH, C_LABEL_W, C_NUDGE_FROM, C_NUDGE_UNTIL, C_NUDGE_S, C_NUDGE_W, C_DELAY_S, C_LOCK_AFTER,
 C_WARMUP_S, C_WARMUP_W) = range(4, 14)
N_CMDC = 14

# ---- per-user per-command state (CommandState: floats, then counts) --------------------------
# F_OLD_LAST_TRIAL: the trial that laid the newest folded-in trace (T_TRIAL of that trace)
F_OLD_W, F_OLD_FIRST, F_OLD_LAST, F_EXP_S, F_EXP_T, F_LAST_USE, F_OLD_LAST_TRIAL = range(7)
N_FS = 7
S_NTR, S_MENU_SEL, S_EXPOSURE, S_HK_OK, S_HK_FAIL, S_LEARN = range(6)
N_IS = 6
# one stored trace, a row of the per-command trace buffer (Trace): memory clock, weight, own decay, and
# the trial that laid it (-1: laid off the schedule's clocks, by a warm-up block or a caller's own clock)
T_CLOCK, T_WEIGHT, T_DECAY, T_TRIAL = range(4)
N_TRACE = 4
#: an entry of a decay-factor table not computed yet (a factor is never negative)
FACTOR_UNSET = -1.0
# per-user state (UserState)
U_TRIAL, U_HAND = range(2)
N_US = 2
HAND_MOUSE, HAND_KEYBOARD = 0, 1

# ---- time breakdown by operator -----------------------------------------------------------
OPERATOR_NAMES = ("M", "K", "P", "B", "H", "search", "decision", "pointing", "retrieval", "encoding",
                  "label_search", "nudge", "menu_delay", "lockout", "warmup")
(O_M, O_K, O_P, O_B, O_H, O_SEARCH, O_DECISION, O_POINTING, O_RETRIEVAL, O_ENCODING,
 O_LABEL_SEARCH, O_NUDGE, O_MENU_DELAY, O_LOCKOUT, O_WARMUP) = range(15)
N_OPS = 15

@njit(cache=True)
def activation(ipar, par, fs, ist, tr, now):
    """Activation A of one command's memory at clock ``now`` (-inf with no trace)."""
    kind = ipar[I_KIND]
    if kind == K_EXP:
        s = fs[F_EXP_S]
        if s <= 0.0:
            return -np.inf
        return math.log(s * math.exp(-par[P_EXP_RATE] * (now - fs[F_EXP_T])))
    n = ist[S_NTR]
    total = 0.0
    for j in range(n):
        age = now - tr[j, T_CLOCK]
        if kind == K_POW:
            total += tr[j, T_WEIGHT] * (1.0 + age / par[P_POW_U]) ** (-par[P_DECAY])
        elif kind == K_PA:
            total += tr[j, T_WEIGHT] * age ** (-tr[j, T_DECAY])
        else:
            total += tr[j, T_WEIGHT] * age ** (-par[P_DECAY])
    if kind == K_ACTR and fs[F_OLD_W] > 0.0:
        d = par[P_DECAY]
        a_n = now - fs[F_OLD_LAST]
        r = (fs[F_OLD_LAST] - fs[F_OLD_FIRST]) / a_n  # (a_o - a_n) / a_n, without cancellation
        if r <= 1e-12:  # mean of age^-d is a_n^-d (1 - d r / 2 + ...); avoids subnormal r
            total += fs[F_OLD_W] * a_n ** (-d)
        else:
            # a_o^{1-d} - a_n^{1-d} = a_n^{1-d} expm1((1-d) log1p(r)), stable for small r
            total += fs[F_OLD_W] * a_n ** (-d) * math.expm1((1.0 - d) * math.log1p(r)) / ((1.0 - d) * r)
    if total <= 0.0:
        return -np.inf
    return math.log(total)


def tabulated_kind(kind: int) -> bool:
    """Whether a trace's term per unit weight depends on its age alone under memory ``kind`` (ACT-R
    and power forms), so a decay-factor table keyed by trial pairs can hold it."""
    return kind in (K_ACTR, K_ACTR_EXACT, K_POW)


@njit(cache=True, inline="always")
def trace_factor(kind, par, age):
    """A trace's term per unit weight at ``age`` s: (1 + age/u)^-d (power form), age^-d otherwise
    (the ACT-R kinds; :func:`activation`'s operations)."""
    if kind == K_POW:
        return (1.0 + age / par[P_POW_U]) ** (-par[P_DECAY])
    return age ** (-par[P_DECAY])


@njit(cache=True, inline="always")
def _table_factor(kind, par, factors, t, trial, age):
    """:func:`trace_factor` of a trace laid on trial ``trial`` (-1: off the schedule), read at trial
    ``t``: from ``factors[t, trial]``, computed and stored there on first use."""
    if trial < 0.0:
        return trace_factor(kind, par, age)
    i = int(trial)
    v = factors[t, i]
    if v == FACTOR_UNSET:
        v = trace_factor(kind, par, age)
        factors[t, i] = v
    return v


@njit(cache=True, inline="always")
def activation_at_trial(ipar, par, fs, ist, tr, now, t, factors):
    """:func:`activation` at trial ``t``'s clock ``now``, each age-only factor (ACT-R kinds, power
    form) read from the decay-factor table ``factors`` (trials x trials, :data:`FACTOR_UNSET` where
    not computed yet): the same operations on the same numbers, so the same value bit for bit.

    Valid only when every user sharing ``factors`` has the same memory clocks and parameters (a
    table entry is keyed by the trial pair); other kinds fall back to :func:`activation`."""
    kind = ipar[I_KIND]
    if not (kind == K_ACTR or kind == K_ACTR_EXACT or kind == K_POW):
        return activation(ipar, par, fs, ist, tr, now)
    n = ist[S_NTR]
    total = 0.0
    for j in range(n):
        total += tr[j, T_WEIGHT] * _table_factor(kind, par, factors, t, tr[j, T_TRIAL], now - tr[j, T_CLOCK])
    if kind == K_ACTR and fs[F_OLD_W] > 0.0:
        d = par[P_DECAY]
        a_n = now - fs[F_OLD_LAST]
        r = (fs[F_OLD_LAST] - fs[F_OLD_FIRST]) / a_n
        f = _table_factor(kind, par, factors, t, fs[F_OLD_LAST_TRIAL], a_n)
        if r <= 1e-12:
            total += fs[F_OLD_W] * f
        else:
            total += fs[F_OLD_W] * f * math.expm1((1.0 - d) * math.log1p(r)) / ((1.0 - d) * r)
    if total <= 0.0:
        return -np.inf
    return math.log(total)


@njit(cache=True, inline="always")
def recall_p(par, a):
    """Logistic retrieval probability of activation ``a``."""
    if a == -np.inf:
        return 0.0
    z = -(a - par[P_TAU]) / par[P_S]
    if z > 700.0:
        return 0.0
    return 1.0 / (1.0 + math.exp(z))


@njit(cache=True, inline="always")
def add_trace(ipar, par, fs, ist, tr, now, w, trial=-1):
    """Lay a trace of weight ``w`` at clock ``now``, laid by trial ``trial`` (-1: not on the
    schedule's clocks; the decay-factor table skips it)."""
    if w <= 0.0:
        return
    kind = ipar[I_KIND]
    if kind == K_EXP:
        s = fs[F_EXP_S]
        if s > 0.0:
            s = s * math.exp(-par[P_EXP_RATE] * (now - fs[F_EXP_T]))
        fs[F_EXP_S] = s + w
        fs[F_EXP_T] = now
        return
    n = ist[S_NTR]
    if kind == K_ACTR and n == ipar[I_RECENT]:
        if fs[F_OLD_W] == 0.0:
            fs[F_OLD_FIRST] = tr[0, T_CLOCK]
        fs[F_OLD_LAST] = tr[0, T_CLOCK]
        fs[F_OLD_LAST_TRIAL] = tr[0, T_TRIAL]
        fs[F_OLD_W] += tr[0, T_WEIGHT]
        for j in range(n - 1):
            tr[j, T_CLOCK] = tr[j + 1, T_CLOCK]
            tr[j, T_WEIGHT] = tr[j + 1, T_WEIGHT]
            tr[j, T_TRIAL] = tr[j + 1, T_TRIAL]
        n -= 1
    decay = par[P_DECAY]
    if kind == K_PA:
        m = activation(ipar, par, fs, ist, tr, now)
        decay = par[P_PA_A] if m == -np.inf else par[P_PA_C] * math.exp(m) + par[P_PA_A]
    tr[n, T_CLOCK] = now
    tr[n, T_WEIGHT] = w
    tr[n, T_DECAY] = decay
    tr[n, T_TRIAL] = trial
    ist[S_NTR] = n + 1


@njit(cache=True, inline="always")
def _menu(par, cmdc, ist, hand, include_m, ops, aids):
    """Menu selection time; counts the selection for the search-to-decision expertise. With
    ``aids`` the interface aids' menu costs are added (label search, nudge, delay)."""
    t = 0.0
    if include_m:
        ops[O_M] += par[P_M]
        t += par[P_M]
    if hand == HAND_KEYBOARD:
        ops[O_H] += par[P_H]
        t += par[P_H]
    ist[S_MENU_SEL] += 1
    e = 1.0 - 1.0 / ist[S_MENU_SEL]
    search = (1.0 - e) * cmdc[C_SEARCH]
    decision = e * cmdc[C_DECISION]
    ops[O_P] += par[P_P]
    ops[O_B] += 4.0 * par[P_B]
    ops[O_SEARCH] += search
    ops[O_DECISION] += decision
    ops[O_POINTING] += cmdc[C_POINTING]
    t = t + par[P_P] + 4.0 * par[P_B] + search + decision + cmdc[C_POINTING]
    if aids:
        label = (1.0 - e) * cmdc[C_LABEL_SEARCH]
        nudge = cmdc[C_NUDGE_S] if cmdc[C_NUDGE_FROM] <= ist[S_MENU_SEL] < cmdc[C_NUDGE_UNTIL] else 0.0
        ops[O_LABEL_SEARCH] += label
        ops[O_NUDGE] += nudge
        ops[O_MENU_DELAY] += cmdc[C_DELAY_S]
        t += label + nudge + cmdc[C_DELAY_S]
    return t


@njit(cache=True)
def _aid_menu_end(par, cmdc, ist, uses, ops):
    """After a menu selection with aids on: (extra seconds, extra trace weight, hand on keyboard).

    The label's and the nudge's traces; a locked item (``uses`` >= the lockout count) makes the
    user type the hotkey it shows: H + keys x K."""
    w = cmdc[C_LABEL_W]
    if cmdc[C_NUDGE_FROM] <= ist[S_MENU_SEL] < cmdc[C_NUDGE_UNTIL]:
        w += cmdc[C_NUDGE_W]
    if uses >= cmdc[C_LOCK_AFTER]:
        t = par[P_H] + cmdc[C_KEYS] * par[P_K]
        ops[O_LOCKOUT] += t
        return t, w, True
    return 0.0, w, False


@njit(cache=True)
def _warmup(ipar, par, cmdc, fs, ist, tr, hand, now, ops):
    """The warm-up block before a session's first trial: (seconds, hand after). One H from the
    mouse, then each practised command's reading + M + keys x K; their traces are laid at the
    block's start (``now`` minus the block's length)."""
    block = 0.0
    for j in range(cmdc.shape[0]):
        block += cmdc[j, C_WARMUP_S]
    if block == 0.0:
        return 0.0, hand
    if hand == HAND_MOUSE:
        block += par[P_H]
    for j in range(cmdc.shape[0]):
        if cmdc[j, C_WARMUP_S] > 0.0:
            add_trace(ipar, par, fs[j], ist[j], tr[j], now - block, cmdc[j, C_WARMUP_W])
    ops[O_WARMUP] += block
    return block, HAND_KEYBOARD


@njit(cache=True)
def write_obs(ipar, par, n_cmd, horizon, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, obs):
    """Observation of the user's upcoming trial (or of the last one once the horizon is reached),
    in the layout of :mod:`shortcut_gym.envs.observation`."""
    t = us[U_TRIAL]
    done = t >= horizon
    tt = horizon - 1 if done else t
    c = sched_cmd[tt]
    obs[:] = 0.0
    k = write_target(obs, c, n_cmd, ipar[I_ONEHOT] == 1)
    obs[k + X_EXPOSURES] = math.log1p(ist[c, S_EXPOSURE])
    obs[k + X_SINCE_LAST_USE] = seconds_since_last_use_feature(ist, fs, c, sched_onset[tt])
    obs[k + X_HOTKEY_SUCCESSES] = math.log1p(ist[c, S_HK_OK])
    obs[k + X_HOTKEY_FAILURES] = math.log1p(ist[c, S_HK_FAIL])
    obs[k + X_LEARN_COUNT] = math.log1p(ist[c, S_LEARN])
    obs[k + X_HAND_ON_KEYBOARD] = 1.0 if us[U_HAND] == HAND_KEYBOARD else 0.0
    obs[k + X_HORIZON_LEFT] = (horizon - t) / horizon
    if ipar[I_OBS_RECALL] == 1:
        if done:
            obs[k + X_RECALL] = 0.0
        else:
            a = activation(ipar, par, fs[c], ist[c], tr[c], sched_clock[tt])
            obs[k + X_RECALL] = recall_p(par, a)


@njit(cache=True)
def step_user(
    b, act, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session, ops, full,
    fail_lat, sched_noise, factors=None,
):
    """Advance user ``b`` one trial with action ``act``; returns (duration_s, outcome code, p_recall).

    Writes the operator breakdown into ``ops`` (N_OPS,). With ``full`` False the recall probability is
    computed only when the action needs it (a hotkey attempt) and returned as -1.0 otherwise; the
    duration, outcome and memory state are the same either way. Writes no observation.
    ``fail_lat`` is :func:`failed_retrieval_s` of ``par`` (computed once by the caller).
    ``sched_session`` is read only by the warm-up aid (a session's first trial). ``sched_noise``
    (users x trials) multiplies the trial's time and its breakdown (1.0: no trial-time noise).
    ``factors``: a decay-factor table (:func:`activation_at_trial`) of these clocks, or None.
    """
    t = us[b, U_TRIAL]
    c = sched_cmd[b, t]
    now = sched_clock[b, t]
    f = fs[b, c]
    s = ist[b, c]
    trc = tr[b, c]
    o = ops
    o[:] = 0.0
    hand = us[b, U_HAND]
    aids = ipar[I_AIDS] == 1
    dur = 0.0
    if ipar[I_WARMUP] != 0 and (t == 0 or (ipar[I_WARMUP] == 2 and sched_session[b, t] != sched_session[b, t - 1])):
        dur, hand = _warmup(ipar, par, cmdc, fs[b], ist[b], tr[b], hand, now, o)
    uses = s[S_EXPOSURE]
    if full or act == HOTKEY:
        if factors is None:
            a = activation(ipar, par, f, s, trc, now)
        else:
            a = activation_at_trial(ipar, par, f, s, trc, now, t, factors)
        p = recall_p(par, a)
    else:
        a = -np.inf
        p = -1.0
    if act == MENU:
        dur += _menu(par, cmdc[c], s, hand, True, o, aids)
        res = OUT_MENU
        w = par[W_MENU]
        us[b, U_HAND] = HAND_MOUSE
    elif act == LEARN:
        dur += _menu(par, cmdc[c], s, hand, True, o, aids) + par[P_ENC]
        o[O_ENCODING] += par[P_ENC]
        res = OUT_LEARNED
        w = par[W_LEARN]
        s[S_LEARN] += 1
        us[b, U_HAND] = HAND_MOUSE
    else:
        dur += par[P_M]
        o[O_M] += par[P_M]
        if hand == HAND_MOUSE:
            dur += par[P_H]
            o[O_H] += par[P_H]
        u = sched_u[b, t]
        keys = cmdc[c, C_KEYS] * par[P_K]
        if u < p:
            lat = par[P_F] * math.exp(-a)
            dur += lat + keys
            o[O_RETRIEVAL] += lat
            o[O_K] += keys
            res = OUT_HOTKEY
            w = par[W_HK_OK]
            s[S_HK_OK] += 1
            us[b, U_HAND] = HAND_KEYBOARD
        else:
            lat = fail_lat
            dur += lat
            o[O_RETRIEVAL] += lat
            if u < p + (1.0 - p) * par[P_COMM]:
                undo_keys = par[P_UNDOK] * par[P_K]
                dur += keys + par[P_M] + undo_keys
                o[O_K] += keys + undo_keys
                o[O_M] += par[P_M]
                res = OUT_WRONG
            else:
                res = OUT_FORGOTTEN
            dur += _menu(par, cmdc[c], s, HAND_KEYBOARD, False, o, aids)
            w = par[W_HK_FAIL]
            s[S_HK_FAIL] += 1
            us[b, U_HAND] = HAND_MOUSE
    if aids and res != OUT_HOTKEY:
        extra_s, extra_w, typed = _aid_menu_end(par, cmdc[c], s, uses, o)
        dur += extra_s
        w += extra_w
        if typed:
            us[b, U_HAND] = HAND_KEYBOARD
    add_trace(ipar, par, f, s, trc, now, w, t)
    s[S_EXPOSURE] += 1
    f[F_LAST_USE] = sched_onset[b, t]
    us[b, U_TRIAL] = t + 1
    g = sched_noise[b, t]
    if g != 1.0:
        dur *= g
        o *= g
    return dur, res, p


@njit(cache=True)
def failed_retrieval_s(par):
    """Latency of a failed retrieval, F e^-tau (s)."""
    return par[P_F] * math.exp(-par[P_TAU])


@njit(cache=True)
def since_last_use_feature(exposures, last_use_s, onset_s):
    """The ``log1p_seconds_since_last_use`` observation entry (float32): log1p of the seconds from a
    command's last use onset ``last_use_s`` to ``onset_s`` (at least 0), 0 before its first use
    (``exposures`` = 0). The one owner of the formula: the kernel's observation and the lab's
    rebuild from a log both call it."""
    if exposures > 0:
        return np.float32(math.log1p(max(onset_s - last_use_s, 0.0)))
    return np.float32(0.0)


@njit(cache=True)
def seconds_since_last_use_feature(ist, fs, c, onset_s):
    """:func:`since_last_use_feature` of one user's command ``c`` at onset ``onset_s`` (``ist``,
    ``fs``: that user's per-command state)."""
    return since_last_use_feature(ist[c, S_EXPOSURE], fs[c, F_LAST_USE], onset_s)


@njit(cache=True, nogil=True)
def write_obs_users(ipar, par, n_cmd, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, obs):
    """:func:`write_obs` for every user (rows of the state and schedule arrays)."""
    horizon = sched_cmd.shape[1]
    for b in range(obs.shape[0]):
        write_obs(ipar, par, n_cmd, horizon, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b],
                  sched_onset[b], obs[b])


@njit(cache=True)
def step_users(
    actions, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
    reward, outcome, ops, p_recall, obs, sched_noise,
):
    """Advance every user one trial with its action; write reward, outcome, breakdown, obs."""
    n_users = actions.shape[0]
    n_cmd = cmdc.shape[0]
    horizon = sched_cmd.shape[1]
    fail_lat = failed_retrieval_s(par)
    for b in range(n_users):
        dur, res, p = step_user(b, actions[b], ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock,
                                sched_onset, sched_u, sched_session, ops[b], True, fail_lat, sched_noise)
        p_recall[b] = p
        reward[b] = -dur
        outcome[b] = res
        write_obs(ipar, par, n_cmd, horizon, fs[b], ist[b], tr[b], us[b], sched_cmd[b],
                  sched_clock[b], sched_onset[b], obs[b])
