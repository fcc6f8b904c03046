"""Planned choice for many simulated users at once: the compiled plan lookup with a softmax draw.

:class:`PlannedChoiceBatch` is the batch policy of :class:`~shortcut_gym.agents.planned_choice.PlannedChoice`.
``run(sim)`` runs a just-reset :class:`~shortcut_gym.envs.simulator.BatchSimulator` to its horizon
in one numba loop (users outside, trials inside): each trial's action values come from the
planner's compiled lookup (:func:`~shortcut_gym.agents.planner.compiled_lookup.action_values_user`,
the operation-for-operation rebuild of ``BoundedOptimalPlanner.action_values``), the choice
probabilities from :func:`choice_probabilities` and the action from one uniform of the user's
agent generator ``agent_rng(seed)`` (compiled PCG64, :mod:`shortcut_gym.envs.simulator`) looked up
as ``Generator.choice(3, p=p)`` does (:func:`choose`). ``run_recorded`` does the same and keeps
every trial. ``actions`` / ``observe`` step trial by trial on per-user Python planners
(:class:`~shortcut_gym.agents.planner.batch.PlanLookupBatch`), with the same probabilities and draws.

Bit for bit the single agent's draws: the single agent computes its probabilities with the same
compiled :func:`choice_probabilities` (numba's ``exp`` and numpy's differ in the last bit on about
5% of arguments on an AVX-512 machine, so a numpy softmax on one side would not give the same
doubles), and the compiled action values rebuild the Python planner's operation for operation
(tests: the same probabilities, actions, outcomes and durations on every trial of a family of
worlds, memories, temperatures and lapses). A plan the compiled lookup does not cover
(:func:`~shortcut_gym.agents.planner.compiled_lookup.lookup_tables` gives None) runs on the
per-trial path only (:class:`PlannedChoiceSteps`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
from numba import njit

from shortcut_gym.agents.batch_loop import RULE_JIT, SumArrays, check_fresh_run, decay_factor_table
from shortcut_gym.agents.frozen_policy import UserDraws
from shortcut_gym.agents.planner.batch import PlanLookupBatch
from shortcut_gym.agents.planner.compiled_lookup import (
    I_CAP,
    PTS_ROWS,
    LookupTables,
    action_values_user,
    clear_memory,
    lookup_tables,
    observe_user,
    user_memory,
)
from shortcut_gym.agents.rollout import TrialRecord, UserSums
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, UsageError
from shortcut_gym.envs.simulator import BatchSimulator, pcg64_next_double
from shortcut_gym.envs.task import check_replay_length

if TYPE_CHECKING:
    from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner


@njit(**RULE_JIT)
def choice_probabilities(q0, q1, q2, beta, lapse):
    """(1 - lapse) softmax(beta q) + lapse / 3 of menu, hotkey, learn values (max subtracted
    first; the sum in numpy's order ((e0 + e1) + e2))."""
    z0, z1, z2 = beta * q0, beta * q1, beta * q2
    m = max(z0, max(z1, z2))
    e0, e1, e2 = math.exp(z0 - m), math.exp(z1 - m), math.exp(z2 - m)
    s = (e0 + e1) + e2
    keep, spread = 1.0 - lapse, lapse / 3.0
    return keep * (e0 / s) + spread, keep * (e1 / s) + spread, keep * (e2 / s) + spread


@njit(**RULE_JIT)
def choose(p0, p1, p2, u):
    """``Generator.choice(3, p=[p0, p1, p2])`` given its uniform ``u``: the number of entries of
    ``cdf = cumsum(p) / cumsum(p)[-1]`` at or below ``u``; -1 for probabilities that are not
    finite and non-negative with a positive sum (numpy refuses them)."""
    c1 = p0 + p1
    total = c1 + p2
    if not (p0 >= 0.0 and p1 >= 0.0 and p2 >= 0.0 and total > 0.0 and total < np.inf):
        return -1
    a = 0
    if p0 / total <= u:
        a += 1
    if c1 / total <= u:
        a += 1
    if total / total <= u:
        a += 1
    return a


@njit(**RULE_JIT)
def _next_uniform(pcg, b):
    s_hi, s_lo, u = pcg64_next_double(pcg[b, 0], pcg[b, 1], pcg[b, 2], pcg[b, 3])
    pcg[b, 0] = s_hi
    pcg[b, 1] = s_lo
    return u


@njit(cache=True)
def _draw_users(q, beta, lapse, pcg, out, probs):
    """Per-trial path: every user's probabilities (into ``probs``) and action from values ``q`` (B, 3)."""
    for b in range(q.shape[0]):
        p0, p1, p2 = choice_probabilities(q[b, 0], q[b, 1], q[b, 2], beta, lapse)
        probs[b, 0], probs[b, 1], probs[b, 2] = p0, p1, p2
        out[b] = choose(p0, p1, p2, _next_uniform(pcg, b))


@njit(cache=True, nogil=True)
def _run_users(ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u, sched_session,
               sched_noise, reward, outcome, ops, p_recall, obs, tab, mem, beta, lapse, pcg, sums, rec_action,
               rec_outcome, rec_duration, rec_p_recall, rec_ops, rec_probs, bad, factors):
    """Every trial of every user: action values, probabilities, draw, step, observe, sums; with
    ``rec_*`` arrays of users' rows, each trial as ``sim.step`` leaves it. ``bad`` gets the user and
    trial of invalid probabilities (the loop stops there). ``factors``: the run's decay-factor table
    or None."""
    n_users, h = sched_cmd.shape
    n_cmd = cmdc.shape[0]
    keep = rec_action.shape[0] > 0
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
            q0, q1, q2 = action_values_user(tab, mem, c, t, nw, pts, cell, frac)
            p0, p1, p2 = choice_probabilities(q0, q1, q2, beta, lapse)
            a = choose(p0, p1, p2, _next_uniform(pcg, b))
            if a < 0:
                bad[0], bad[1] = b, t
                return
            last = t == h - 1
            if last:
                o = ops[b]
            elif keep:
                o = rec_ops[b, t]
            else:
                o = scratch
            dur, res, pr = k.step_user(b, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset,
                                       sched_u, sched_session, o, last or keep, fail_lat, sched_noise, factors)
            s = sched_session[b, t]
            sums.trials[b, s] += 1
            sums.time_s[b, s] += dur
            sums.outcomes[b, s, res] += 1
            sums.actions[b, s, a] += 1
            sums.command_time_s[b, c] += dur
            sums.command_uses[b, c] += 1
            if last:
                reward[b] = -dur
                outcome[b] = res
                p_recall[b] = pr
            if keep:
                rec_action[b, t] = a
                rec_outcome[b, t] = res
                rec_duration[b, t] = dur
                rec_p_recall[b, t] = pr
                if last:
                    rec_ops[b, t] = ops[b]
                rec_probs[b, t, 0], rec_probs[b, t, 1], rec_probs[b, t, 2] = p0, p1, p2
            observe_user(tab, mem, c, t, res)
        k.write_obs(ipar, par, n_cmd, h, fs[b], ist[b], tr[b], us[b], sched_cmd[b], sched_clock[b], sched_onset[b],
                    obs[b])


class PlannedChoiceSteps:
    """Users of a planned-choice agent stepped trial by trial (``actions`` / ``observe``) on per-user
    Python planners; user i draws what the agent reset with ``seeds[i]`` draws."""

    def __init__(self, name: str, planner: BoundedOptimalPlanner, beta: float, lapse: float, n_users: int,
                 seeds: Sequence[int]) -> None:
        if len(seeds) != n_users:
            raise ConfigError(f"{name}: {len(seeds)} seeds for {n_users} users")
        self.name = name
        self.planner = planner
        self.beta, self.lapse = float(beta), float(lapse)
        self.n_users = n_users
        self.seeds = [int(s) for s in seeds]
        self.draws = UserDraws(name, self.seeds)
        self._stepped: PlanLookupBatch | None = None
        self._ran = False
        #: the last draw's probabilities (B, 3) of the per-trial path
        self.probabilities = np.zeros((n_users, 3))

    def _stepper(self) -> PlanLookupBatch:
        if self._ran:
            raise UsageError(f"{self.name}: this batch policy already ran its simulation")
        if self._stepped is None:
            self._stepped = PlanLookupBatch(self.planner, self.n_users, self.seeds)
        return self._stepped

    def actions(self, targets: np.ndarray, obs: np.ndarray) -> np.ndarray:
        """Each user's sampled action for its target at the current trial."""
        stepper = self._stepper()
        t = stepper.trial
        if stepper.users:
            stepper.users[0].check_trial(t, self.name)
        q = np.array([u.action_values(int(c), t) for u, c in zip(stepper.users, targets, strict=True)],
                     dtype=np.float64).reshape(self.n_users, 3)
        out = np.empty(self.n_users, dtype=np.int64)
        _draw_users(q, self.beta, self.lapse, self.draws.pcg, out, self.probabilities)
        bad = np.flatnonzero(out < 0)
        if len(bad):
            self._refuse(int(bad[0]), t)
        return out

    def observe(self, targets: np.ndarray, actions: np.ndarray, outcomes: np.ndarray, durations_s: np.ndarray) -> None:
        """Each user's planner tracks its command's new trace."""
        stepper = self._stepper()
        if stepper.users:
            stepper.users[0].check_trial(stepper.trial, self.name)
        stepper.observe(targets, actions, outcomes, durations_s)

    def _refuse(self, user: int, trial: int) -> None:
        raise ConfigError(f"{self.name}: user {user} (seed {self.seeds[user]}) at trial {trial}: choice probabilities "
                          f"are not finite and non-negative (beta={self.beta}, lapse={self.lapse})")


class PlannedChoiceBatch(PlannedChoiceSteps):
    """:class:`PlannedChoiceSteps` that also runs a whole simulation in one compiled loop (``run``,
    ``run_recorded``), on the plan's compiled lookup tables."""

    def __init__(self, name: str, planner: BoundedOptimalPlanner, tables: LookupTables, beta: float, lapse: float,
                 n_users: int, seeds: Sequence[int]) -> None:
        super().__init__(name, planner, beta, lapse, n_users, seeds)
        self.tables = tables
        #: choice probabilities (users, trials, 3) of the last ``run_recorded``
        self.recorded_probabilities = np.zeros((0, 0, 3))

    # ---- whole runs ------------------------------------------------------------------------
    def run(self, sim: BatchSimulator) -> UserSums:
        """Run a just-reset simulator to its horizon in one compiled loop (the per-trial path's sums)."""
        return self._run(sim, False)[0]

    def run_recorded(self, sim: BatchSimulator) -> tuple[UserSums, TrialRecord]:
        """:meth:`run` keeping every trial: the sums and the trials (as ``drive_batch(keep_trials=True)``
        keeps them); the choice probabilities go to ``recorded_probabilities``."""
        sums, kept, probs = self._run(sim, True)
        assert kept is not None and probs is not None
        self.recorded_probabilities = probs
        return sums, kept

    def _run(self, sim: BatchSimulator, keep: bool) -> tuple[UserSums, TrialRecord | None, np.ndarray | None]:
        check_fresh_run(sim, 1 if (self._stepped is not None or self._ran) else 0, self.n_users)
        # a shorter schedule (a log cut short) runs on the plan, a longer one is refused
        check_replay_length(sim.horizon, int(self.tables.clock.shape[0]), self.name)
        n, h = sim.n_users, sim.horizon
        n_cmd = sim.world.commands.n_commands
        sums = SumArrays(**vars(UserSums.zeros(n, int(sim.sched_session.max()) + 1, n_cmd)))
        mem = user_memory(n_cmd, int(self.tables.ints[I_CAP]))
        rows = n if keep else 0
        kept = TrialRecord(np.zeros((rows, h), dtype=np.int64), np.zeros((rows, h), dtype=np.int64),
                           np.zeros((rows, h)), np.zeros((rows, h)), np.zeros((rows, h, k.N_OPS)))
        probs = np.zeros((rows, h, 3))
        bad = np.full(2, -1, dtype=np.int64)
        self._ran = True
        _run_users(sim.kernel_int_params, sim.kernel_params, sim.command_constants, sim.command_float_state,
                   sim.command_counts, sim.traces, sim.user_state, sim.sched_command, sim.sched_clock, sim.sched_onset,
                   sim.sched_uniform, sim.sched_session, sim.sched_noise, sim.reward, sim.outcome, sim.operator_time_s,
                   sim.p_recall, sim.obs, self.tables, mem, self.beta, self.lapse, self.draws.pcg, sums,
                   kept.action, kept.outcome, kept.duration_s, kept.p_recall, kept.operator_s, probs, bad,
                   decay_factor_table(sim))
        if bad[0] >= 0:
            self._refuse(int(bad[0]), int(bad[1]))
        return UserSums(**sums._asdict()), (kept if keep else None), (probs if keep else None)


def planned_choice_batch(name: str, planner: BoundedOptimalPlanner, beta: float, lapse: float, n_users: int,
                         seeds: Sequence[int]) -> PlannedChoiceSteps:
    """The batch policy of a planned-choice agent on its planner: compiled where the plan's lookup
    is (:func:`~shortcut_gym.agents.planner.compiled_lookup.lookup_tables`), else per trial."""
    planner.prepare()
    tables = lookup_tables(planner, values_only=True)
    if tables is None:
        return PlannedChoiceSteps(name, planner, beta, lapse, n_users, seeds)
    return PlannedChoiceBatch(name, planner, tables, beta, lapse, n_users, seeds)
