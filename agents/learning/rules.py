"""The learning models' compiled rules: recall belief, choice rule, learning rule, likelihood.

Every rule works on a :class:`LearnerState` whose arrays have a leading user axis, and reads the
model through a :class:`RuleSet` (full parameter vector + mechanism switches, positions in
:mod:`.mechanisms`). The same functions serve the single agent (a batch of one), the batch policy,
the fused simulation loop and the compiled log-likelihood, so those paths give the same numbers.

Action sampling: one uniform u per trial, action = the first a with u < P(0) + ... + P(a)
(:func:`sample_action`, and the same comparison inside the compiled loops).
"""


import math
from typing import NamedTuple

import numpy as np
from numba import njit

from shortcut_gym.agents.batch_loop import RULE_JIT  # the loops' options, without the refcount runtime
from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.envs.kernel import HOTKEY, LEARN, OUT_HOTKEY


class RuleSet(NamedTuple):
    """What the compiled rules read about the model."""

    par: np.ndarray  # (N_FULL_PAR,) float64, slots mech.P_*
    flags: np.ndarray  # (N_MECH,) int64, 1 = mechanism on, slots mech.M_*


class LearnerState(NamedTuple):
    """Everything a learning model has learned, for B users of C commands."""

    values: np.ndarray  # (B, C, 3) delta-rule action values Q (-seconds)
    kernel: np.ndarray  # (B, 3) choice kernel over actions
    last_action: np.ndarray  # (B, C) int64, -1 before the command's first use
    belief: np.ndarray  # (B, C) recall belief after the command's last use
    uses: np.ndarray  # (B, C) float64 count of the command's uses
    hotkey_time_s: np.ndarray  # (B, 2) estimated duration of a recalled (0) and failed (1) attempt
    seen: np.ndarray  # (B,) int64 trials seen


def new_state(n_users: int, n_commands: int) -> LearnerState:
    """Zeroed state arrays (call :func:`init_state` before use)."""
    return LearnerState(np.zeros((n_users, n_commands, 3)), np.zeros((n_users, 3)),
                        np.full((n_users, n_commands), -1, dtype=np.int64), np.zeros((n_users, n_commands)),
                        np.zeros((n_users, n_commands)), np.zeros((n_users, 2)), np.zeros(n_users, dtype=np.int64))


@njit(**RULE_JIT)
def belief_now(b, c, dt_s, rules, st):
    """User ``b``'s recall belief for command ``c`` after ``dt_s`` seconds since its last use
    (decayed when ``forgetting`` is on); the same value for the decision and the update."""
    p = st.belief[b, c]
    if rules.flags[mech.M_FORGETTING] == 1:
        p *= math.exp(-rules.par[mech.P_FORGET] * dt_s / 3600.0)
    return p


@njit(**RULE_JIT)
def decide(b, c, p, trial, horizon, rules, st, out):
    """Write P(menu, hotkey, learn) of user ``b`` for target ``c`` at ``trial`` into ``out`` (3,);
    ``p`` is :func:`belief_now` (unused without ``memory_aware``)."""
    par, flags = rules.par, rules.flags
    q = st.values
    n_cmd = q.shape[1]
    logit0 = 0.0
    logit1 = 0.0
    logit2 = 0.0
    if flags[mech.M_VALUE] == 1:
        t_menu = -q[b, c, 0]
        t_hk = -q[b, c, 1]
        t_learn = -q[b, c, 2]
        if flags[mech.M_MEMORY_AWARE] == 1:
            t_ok = st.hotkey_time_s[b, 0]
            t_fail = st.hotkey_time_s[b, 1]
            t_hk = p * t_ok + (1.0 - p) * t_fail
            if flags[mech.M_PLANNING] == 1:
                left = max(horizon - trial - 1, 0)
                freq = (st.uses[b, c] + 1.0) / (st.seen[b] + n_cmd)
                uses = min(par[mech.P_HORIZON_USES], freq * left)
                now_best = min(t_menu, t_hk)
                p_l = p + par[mech.P_RECALL_RATE] * (1.0 - p)
                after_learn = min(t_menu, p_l * t_ok + (1.0 - p_l) * t_fail)
                gain_learn = uses * max(0.0, now_best - after_learn)
                rate = par[mech.P_RECALL_RATE]
                p_up = p + rate * (1.0 - p)
                p_down = p - rate * p
                after_hk = (p * min(t_menu, p_up * t_ok + (1.0 - p_up) * t_fail)
                            + (1.0 - p) * min(t_menu, p_down * t_ok + (1.0 - p_down) * t_fail))
                gain_hk = uses * max(0.0, now_best - after_hk)
                gain_menu = 0.0
                if flags[mech.M_INCIDENTAL] == 1:
                    p_m = p + par[mech.P_INCIDENTAL] * (1.0 - p)
                    after_menu = min(t_menu, p_m * t_ok + (1.0 - p_m) * t_fail)
                    gain_menu = uses * max(0.0, now_best - after_menu)
                t_learn -= gain_learn
                t_hk -= gain_hk
                t_menu -= gain_menu
        beta = par[mech.P_BETA]
        logit0 = -beta * t_menu
        logit1 = -beta * t_hk
        logit2 = -beta * t_learn
    if flags[mech.M_CHOICE_KERNEL] == 1:
        w = par[mech.P_BETA_CK]
        logit0 += w * st.kernel[b, 0]
        logit1 += w * st.kernel[b, 1]
        logit2 += w * st.kernel[b, 2]
    if flags[mech.M_PERSEVERATION] == 1:
        last = st.last_action[b, c]
        if last == 0:
            logit0 += par[mech.P_STICK]
        elif last == 1:
            logit1 += par[mech.P_STICK]
        elif last == 2:
            logit2 += par[mech.P_STICK]
    top = max(logit0, max(logit1, logit2))
    # exp(0) is exactly 1: the largest logit's term needs no exp call (same numbers, one call fewer)
    e0 = 1.0 if logit0 == top else math.exp(logit0 - top)
    e1 = 1.0 if logit1 == top else math.exp(logit1 - top)
    e2 = 1.0 if logit2 == top else math.exp(logit2 - top)
    z = e0 + e1 + e2
    lapse = par[mech.P_LAPSE] if flags[mech.M_LAPSE] == 1 else 0.0
    out[0] = (1.0 - lapse) * e0 / z + lapse / 3.0
    out[1] = (1.0 - lapse) * e1 / z + lapse / 3.0
    out[2] = (1.0 - lapse) * e2 / z + lapse / 3.0


@njit(**RULE_JIT)
def update(b, c, a, outcome, dur_s, p, rules, st):
    """Learn from user ``b``'s finished trial: command c, action a, outcome code, duration (s);
    ``p`` is :func:`belief_now` before the trial."""
    par, flags = rules.par, rules.flags
    alpha = par[mech.P_ALPHA]
    if flags[mech.M_VALUE] == 1:
        st.values[b, c, a] += alpha * (-dur_s - st.values[b, c, a])
    if flags[mech.M_MEMORY_AWARE] == 1:
        rate = par[mech.P_RECALL_RATE]
        tk = st.hotkey_time_s
        if a == LEARN:
            p += rate * (1.0 - p)
        elif a == HOTKEY:
            if outcome == OUT_HOTKEY:
                p += rate * (1.0 - p)
                tk[b, 0] += alpha * (dur_s - tk[b, 0])
            else:
                p -= rate * p
                tk[b, 1] += alpha * (dur_s - tk[b, 1])
        elif flags[mech.M_INCIDENTAL] == 1:
            p += par[mech.P_INCIDENTAL] * (1.0 - p)
        st.belief[b, c] = p
    if flags[mech.M_CHOICE_KERNEL] == 1:
        r = par[mech.P_ALPHA_CK]
        for k in range(3):
            target = 1.0 if k == a else 0.0
            st.kernel[b, k] += r * (target - st.kernel[b, k])
    st.last_action[b, c] = a
    st.uses[b, c] += 1.0
    st.seen[b] += 1


@njit(cache=True)
def init_state(rules, st):
    """The model's state before any trial (priors from the option slots)."""
    par = rules.par
    st.values[:] = -par[mech.P_PRIOR_TIME]
    st.kernel[:] = 0.0
    st.last_action[:] = -1
    st.belief[:] = 0.0
    st.uses[:] = 0.0
    st.hotkey_time_s[:, 0] = par[mech.P_PRIOR_HOTKEY]
    st.hotkey_time_s[:, 1] = par[mech.P_PRIOR_FAILURE]
    st.seen[:] = 0


class LoggedTrials(NamedTuple):
    """One participant's logged trials as the likelihood kernel reads them (trial order)."""

    command: np.ndarray  # (T,) int64
    action: np.ndarray  # (T,) int64 codes of kernel.ACTION_NAMES
    outcome: np.ndarray  # (T,) int64 codes of kernel.OUTCOME_NAMES
    duration_s: np.ndarray  # (T,)
    dt_s: np.ndarray  # (T,) seconds since the command's last use
    trial: np.ndarray  # (T,) int64 trial index within the horizon


@njit(cache=True)
def log_likelihood_kernel(log, horizon, n_cmd, rules):
    """Sum over trials of ln P(logged action), replaying the logged outcomes (compiled)."""
    st = LearnerState(np.empty((1, n_cmd, 3)), np.empty((1, 3)), np.empty((1, n_cmd), dtype=np.int64),
                      np.empty((1, n_cmd)), np.empty((1, n_cmd)), np.empty((1, 2)), np.empty(1, dtype=np.int64))
    init_state(rules, st)
    out = np.empty(3)
    total = 0.0
    for t in range(log.command.shape[0]):
        c = log.command[t]
        p = belief_now(0, c, log.dt_s[t], rules, st)
        decide(0, c, p, log.trial[t], horizon, rules, st, out)
        total += math.log(max(out[log.action[t]], 1e-300))
        update(0, c, log.action[t], log.outcome[t], log.duration_s[t], p, rules, st)
    return total


class BatchStep(NamedTuple):
    """One trial of a batch of B users: what :func:`batch_decide` reads and writes."""

    targets: np.ndarray  # (B,) int64 target command
    dt_s: np.ndarray  # (B,) seconds since the target's last use
    uniforms: np.ndarray  # (B,) one uniform per user for the action draw
    probs: np.ndarray  # (B, 3) written: P(menu, hotkey, learn)
    actions: np.ndarray  # (B,) int64 written: sampled actions
    beliefs_now: np.ndarray  # (B,) written: belief_now, read back by batch_update


@njit(cache=True)
def batch_decide(step, trial, horizon, rules, st):
    """Probabilities and sampled actions of every user for its target (into ``step``)."""
    for b in range(step.targets.shape[0]):
        c = step.targets[b]
        p = belief_now(b, c, step.dt_s[b], rules, st)
        step.beliefs_now[b] = p
        probs = step.probs[b]
        decide(b, c, p, trial, horizon, rules, st, probs)
        u = step.uniforms[b]
        if u < probs[0]:
            step.actions[b] = 0
        elif u < probs[0] + probs[1]:
            step.actions[b] = 1
        else:
            step.actions[b] = 2


@njit(cache=True)
def batch_update(targets, actions, outcomes, durations_s, beliefs_now, rules, st):
    """Learn from every user's finished trial (``beliefs_now`` as written by :func:`batch_decide`)."""
    for b in range(targets.shape[0]):
        update(b, targets[b], actions[b], outcomes[b], durations_s[b], beliefs_now[b], rules, st)


def sample_action(p: np.ndarray, u: float) -> int:
    """First action a with u < P(0) + ... + P(a) (the same rule as :func:`batch_decide`)."""
    if u < p[0]:
        return 0
    if u < p[0] + p[1]:
        return 1
    return 2
