"""Fused simulation: a learning model and the batched simulator in one compiled loop.

:func:`run_fused` runs every trial of every user of a freshly reset
:class:`~shortcut_gym.envs.simulator.BatchSimulator` with a learning model's state inside one numba
loop (users outside, trials inside, so one user's state stays in cache) and returns per-user sums
by session and by command. The numbers equal those of the per-trial path (``policy.actions`` ->
``sim.step`` -> ``policy.observe`` of :class:`~shortcut_gym.agents.learning.batch.BatchLearningPolicy`)
bit for bit: the same compiled rules (:mod:`.rules`, :func:`~shortcut_gym.envs.kernel.step_user`),
the same uniforms (each user's agent generator, in order) and the time since last use rounded
through float32 exactly as the observation stores it. Observation features nobody reads inside the
loop are not computed; the final observation, reward, outcome, breakdown and recall probability are
written as after the last ``sim.step``.
"""


import math
from typing import NamedTuple

import numpy as np
from numba import njit

from shortcut_gym.agents.batch_loop import RULE_JIT, SumArrays, decay_factor_table, step_and_count
from shortcut_gym.agents.learning import mechanisms as mech
from shortcut_gym.agents.learning.rules import LearnerState, RuleSet, belief_now, decide, update
from shortcut_gym.agents.rollout import UserSums
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import UsageError
from shortcut_gym.envs.simulator import BatchSimulator, pcg64_next_double, pcg64_seeded


class AgentDraws(NamedTuple):
    """Where each user's action uniforms come from.

    Either ``uniforms`` (B, T) drawn beforehand from the users' generators, or (when ``uniforms``
    has no rows) drawn inside the loop from ``default_rng`` of entropy ``words[b, :n_words[b]]``,
    which gives the same doubles."""

    uniforms: np.ndarray  # (B, T) or (0, T)
    words: np.ndarray  # (B, W) uint64 SeedSequence entropy words
    n_words: np.ndarray  # (B,) int64 words used per user


@njit(**RULE_JIT)
def _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
              sched_noise, reward, outcome, ops, p_recall, rules, horizon, st, draws, sums, probs, scratch, pool,
              state32, factors):
    """Every trial of user ``b``: decide, step, learn, add to the sums (see module docstring)."""
    h = sched_cmd.shape[1]
    forgetting = rules.flags[mech.M_FORGETTING] == 1
    fail_lat = k.failed_retrieval_s(par)
    drawn = draws.uniforms.shape[0] == sched_cmd.shape[0]
    g_hi = g_lo = g_ihi = g_ilo = np.uint64(0)
    if not drawn:
        g_hi, g_lo, g_ihi, g_ilo = pcg64_seeded(draws.words, draws.n_words[b], b, pool, state32)
    for t in range(h):
        c = sched_cmd[b, t]
        dt = 0.0
        if forgetting:
            dt = math.expm1(np.float64(k.seconds_since_last_use_feature(ist[b], fs[b], c, sched_onset[b, t])))
        p = belief_now(b, c, dt, rules, st)
        decide(b, c, p, t, horizon, rules, st, probs)
        if drawn:
            u = draws.uniforms[b, t]
        else:
            g_hi, g_lo, u = pcg64_next_double(g_hi, g_lo, g_ihi, g_ilo)
        if u < probs[0]:
            a = 0
        elif u < probs[0] + probs[1]:
            a = 1
        else:
            a = 2
        dur, res = step_and_count(b, t, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset,
                                  sched_u, sched_session, sched_noise, reward, outcome, ops, p_recall, fail_lat, sums,
                                  scratch, factors)
        update(b, c, a, res, dur, p, rules, st)


@njit(cache=True, nogil=True)
def _run_users(ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
               sched_noise, reward, outcome, ops, p_recall, obs, rules, horizon, st, draws, sums, factors):
    """:func:`_run_user` for every user, then each user's final observation (without the GIL, so
    chunks of users can run on several Python threads); ``factors``: the run's decay-factor table
    or None."""
    n_users, h = sched_cmd.shape
    n_cmd = cmdc.shape[0]
    probs = np.empty(3)
    scratch = np.empty(k.N_OPS)
    pool = np.empty(4, dtype=np.uint64)
    state32 = np.empty(8, dtype=np.uint64)
    for b in range(n_users):
        _run_user(b, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
                  sched_noise, reward, outcome, ops, p_recall, rules, horizon, st, draws, sums, probs, scratch, pool,
                  state32, factors)
        k.write_obs(ipar, par, n_cmd, h, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b], sched_onset[b],
                    obs[b])


def run_fused(sim: BatchSimulator, rules: RuleSet, horizon: int, state: LearnerState,
              draws: AgentDraws) -> UserSums:
    """Run ``sim`` (just reset) to its horizon with a learning model (``state`` initialised, one row
    per sim user; ``horizon`` the model's planning horizon in trials); ``state`` is updated in place."""
    if sim.n_users == 0 or sim.trial != 0:
        raise UsageError("a fused run needs a simulator just reset (trial 0)")
    sums = SumArrays(**vars(UserSums.zeros(sim.n_users, int(sim.sched_session.max()) + 1,
                                          sim.world.commands.n_commands)))
    _run_users(sim.kernel_int_params, sim.kernel_params, sim.command_constants, sim.command_float_state,
               sim.command_counts, sim.traces, sim.user_state, sim.sched_command, sim.sched_clock, sim.sched_onset,
               sim.sched_uniform, sim.sched_session, sim.sched_noise, sim.reward, sim.outcome, sim.operator_time_s,
               sim.p_recall, sim.obs, rules, horizon, state, draws, sums, decay_factor_table(sim))
    return UserSums(**sums._asdict())
