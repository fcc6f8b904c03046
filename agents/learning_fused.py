"""Fused simulation: a learning model's batch policy and the batched simulator in one compiled loop.

:func:`simulate_fused` runs every trial of every user of a freshly reset
:class:`~shortcut_gym.envs.simulator.BatchSimulator` with a fresh
:class:`~shortcut_gym.agents.learning.BatchLearningPolicy` inside one numba loop (users outside,
trials inside, so one user's state stays in cache) and returns per-user sums by session and by
command. The numbers equal those of the per-trial path (``policy.actions`` -> ``sim.step`` ->
``policy.observe``) bit for bit: the same compiled rules (:func:`_belief_now`, :func:`_decide`,
:func:`_update`, :func:`~shortcut_gym.envs.kernel.step_user`), the same uniforms (each user's
agent generator, in order) and the time since last use rounded through float32 exactly as the
observation stores it. Observation features nobody reads inside the loop are not computed; the
final observation, reward, outcome, breakdown and recall probability are written as after the
last ``sim.step``. The policy's generators are not advanced by a fused run (it has reached the
horizon; make a new policy for new users).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from shortcut_gym.agents import mechanisms as mech
from shortcut_gym.agents.base import AGENT_STREAM
from shortcut_gym.agents.learning import (
    _DT_FEATURE,
    _RULE_JIT,
    BatchLearningPolicy,
    _belief_now,
    _decide,
    _update,
)
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.simulator import BatchSimulator, pcg64_next_double, pcg64_seeded, seed_words


@dataclass
class FusedSums:
    """Per-user sums of a fused run (session index as in the schedules; times in seconds)."""

    trials: np.ndarray  # (B, S) int
    time_s: np.ndarray  # (B, S)
    outcomes: np.ndarray  # (B, S, 5) int, codes of kernel.OUTCOME_NAMES
    actions: np.ndarray  # (B, S, 3) int
    command_time_s: np.ndarray  # (B, C)
    command_uses: np.ndarray  # (B, C) int


@njit(**_RULE_JIT)
def _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
              reward, outcome, ops, p_recall, apar, flags, horizon, q, ck, last_a, belief, count, tk, seen, agent_u,
              trials, time_s, outcomes, actions, command_time_s, command_uses, probs, scratch, words, n_words, pool,
              state32):
    """Every trial of user ``b``: decide, step, learn, add to the sums (see module docstring).

    The agent's uniforms are ``agent_u[b]`` when it has a row per user, else drawn trial by trial
    from ``default_rng`` of entropy ``words[b, :n_words[b]]`` (the same doubles)."""
    h = sched_cmd.shape[1]
    forgetting = flags[mech.M_FORGETTING] == 1
    fail_lat = k.failed_retrieval_s(par)
    drawn = agent_u.shape[0] == sched_cmd.shape[0]
    g_hi = g_lo = g_ihi = g_ilo = np.uint64(0)
    if not drawn:
        g_hi, g_lo, g_ihi, g_ilo = pcg64_seeded(words, n_words[b], b, pool, state32)
    for t in range(h):
        c = sched_cmd[b, t]
        dt = 0.0
        if forgetting:
            dt = math.expm1(np.float64(k.seconds_since_last_use_feature(ist[b], fs[b], c, sched_onset[b, t])))
        p = _belief_now(b, c, dt, apar, flags, belief)
        _decide(b, c, p, t, horizon, apar, flags, q, ck, last_a, count, tk, seen, probs)
        if drawn:
            u = agent_u[b, t]
        else:
            g_hi, g_lo, u = pcg64_next_double(g_hi, g_lo, g_ihi, g_ilo)
        if u < probs[0]:
            a = 0
        elif u < probs[0] + probs[1]:
            a = 1
        else:
            a = 2
        last = t == h - 1
        o = ops[b] if last else scratch
        dur, res, pr = k.step_user(b, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset,
                                   sched_u, o, last, fail_lat)
        _update(b, c, a, res, dur, p, apar, flags, q, ck, last_a, belief, count, tk, seen)
        s = sched_session[b, t]
        trials[b, s] += 1
        time_s[b, s] += dur
        outcomes[b, s, res] += 1
        actions[b, s, a] += 1
        command_time_s[b, c] += dur
        command_uses[b, c] += 1
        if last:
            reward[b] = -dur
            outcome[b] = res
            p_recall[b] = pr


@njit(cache=True, nogil=True)
def _run_users(ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
               reward, outcome, ops, p_recall, obs, apar, flags, horizon, q, ck, last_a, belief, count, tk, seen,
               agent_u, trials, time_s, outcomes, actions, command_time_s, command_uses, words, n_words):
    """:func:`_run_user` for every user, then each user's final observation (without the GIL, so
    chunks of users can run on several Python threads)."""
    n_users, h = sched_cmd.shape
    n_cmd = cmdc.shape[0]
    probs = np.empty(3)
    scratch = np.empty(k.N_OPS)
    pool = np.empty(4, dtype=np.uint64)
    state32 = np.empty(8, dtype=np.uint64)
    for b in range(n_users):
        _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
                  reward, outcome, ops, p_recall, apar, flags, horizon, q, ck, last_a, belief, count, tk, seen,
                  agent_u, trials, time_s, outcomes, actions, command_time_s, command_uses, probs, scratch, words,
                  n_words, pool, state32)
        k.write_obs(ipar, par, n_cmd, h, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b], sched_onset[b],
                    obs[b])


def simulate_fused(policy: BatchLearningPolicy, sim: BatchSimulator) -> FusedSums:
    """Run ``sim`` (just reset) to its horizon with ``policy`` (just made, one user per sim user)."""
    if sim.n_users == 0 or sim.trial != 0:
        raise RuntimeError("simulate_fused needs a simulator just reset (trial 0)")
    if policy.trial != 0:
        raise RuntimeError("simulate_fused needs a fresh batch policy (trial 0)")
    if policy.n_users != sim.n_users:
        raise ValueError(f"the policy has {policy.n_users} users, the simulator {sim.n_users}")
    if policy.flags[mech.M_FORGETTING] == 1:
        names = sim.world.observation_names()
        want = names.index(_DT_FEATURE)
        from shortcut_gym.agents.learning import dt_feature_index

        got = dt_feature_index(policy.agent.context, sim.obs.shape[1])
        if got != want:
            raise ValueError(f"the agent reads {_DT_FEATURE!r} at observation index {got}, the simulator writes it "
                             f"at {want}; bind the agent to this world's context")
    n, h = sim.n_users, sim.horizon
    # each user's agent uniforms in generator order, as the policy draws them block by block; drawn
    # inside the compiled loop unless the generators are already in use
    words = seed_words(np.asarray(policy.seeds), (AGENT_STREAM,)) if policy._gens is None else None
    if words is None:
        agent_u = np.stack([g.random(h) for g in policy.gens])
        words = (np.zeros((n, 1), dtype=np.uint64), np.zeros(n, dtype=np.int64))
    else:
        agent_u = np.empty((0, h))
    policy._u_pos = policy._BLOCK
    n_sess = int(sim.sched_session.max()) + 1
    c = sim.world.commands.n_commands
    out = FusedSums(
        trials=np.zeros((n, n_sess), dtype=np.int64), time_s=np.zeros((n, n_sess)),
        outcomes=np.zeros((n, n_sess, len(k.OUTCOME_NAMES)), dtype=np.int64),
        actions=np.zeros((n, n_sess, 3), dtype=np.int64), command_time_s=np.zeros((n, c)),
        command_uses=np.zeros((n, c), dtype=np.int64),
    )
    _run_users(sim.ipar, sim.par, sim.cmdc, sim.fs, sim.ist, sim.tr, sim.us, sim.sched_cmd, sim.sched_clock,
               sim.sched_onset, sim.sched_u, sim.sched_session, sim.reward, sim.outcome, sim.ops, sim.p_recall,
               sim.obs, policy.par, policy.flags, policy.horizon, *policy.state, agent_u,
               out.trials, out.time_s, out.outcomes, out.actions, out.command_time_s, out.command_uses, words[0],
               words[1].astype(np.int64))
    policy.trial = h
    return out
