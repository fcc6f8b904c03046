"""What the compiled batch loops of every batch policy share.

The learning models' fused loop (:mod:`shortcut_gym.agents.learning.fused`), the frozen
policies' loop (:mod:`shortcut_gym.agents.frozen_policy`) and the planner's compiled lookup
(:mod:`shortcut_gym.agents.planner.compiled_lookup`) all run a just-reset
:class:`~shortcut_gym.envs.simulator.BatchSimulator` to its horizon, user by user: they share the
compilation options (:data:`RULE_JIT`), the sums they add into (:class:`SumArrays`), the step of one
chosen trial with its counting (:func:`step_and_count`) and the checks before a run
(:func:`check_fresh_run`). This module imports only ``envs``, so each can import it without a cycle.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.errors import ConfigError, UsageError
from shortcut_gym.envs.simulator import BatchSimulator


def _rule_jit_options() -> dict[str, bool]:
    """Compilation options of the per-trial rules and loops.

    They allocate nothing and return no array, so they run without numba's reference-counting
    runtime (``_nrt=False``): with it, every call increfs/decrefs each of its array arguments
    (atomic operations the refcount pruning cannot remove across the mechanism branches, numba
    issue #2350), more than half the cost of a trial. Same code and results. ``_nrt`` is a private
    numba option: if a numba version no longer knows it, the rules compile with the runtime on.
    """
    try:
        from numba.core.cpu import CPUTargetOptions
    except ImportError:
        return {"cache": True}
    return {"cache": True, "_nrt": False} if hasattr(CPUTargetOptions, "_nrt") else {"cache": True}


RULE_JIT = _rule_jit_options()


class SumArrays(NamedTuple):
    """The arrays of a :class:`~shortcut_gym.agents.rollout.UserSums` as the compiled loop adds into them
    (same fields)."""

    trials: np.ndarray
    time_s: np.ndarray
    outcomes: np.ndarray
    actions: np.ndarray
    command_time_s: np.ndarray
    command_uses: np.ndarray


#: the longest horizon a run gets a decay-factor table for (trials x trials float64: 8 MB at 1,024)
MAX_TABLE_TRIALS = 1024
#: the fewest users a run gets a decay-factor table for (filling one costs about a user's run)
MIN_TABLE_USERS = 8


def decay_factor_table(sim: BatchSimulator) -> np.ndarray | None:
    """A fresh decay-factor table for a compiled run of ``sim`` (see
    :func:`~shortcut_gym.envs.kernel.activation_at_trial`), or None where the run steps without one:
    a memory kind whose trace terms are not a function of age alone, users with their own clocks
    (replayed schedules), fewer than :data:`MIN_TABLE_USERS` users or more than
    :data:`MAX_TABLE_TRIALS` trials. The run's numbers are the same either way."""
    shared_clocks = sim.sched_clock.strides[0] == 0  # every row a view of the world's clocks
    if (not k.tabulated_kind(int(sim.kernel_int_params[k.I_KIND])) or not shared_clocks
            or sim.n_users < MIN_TABLE_USERS or sim.horizon > MAX_TABLE_TRIALS):
        return None
    return np.full((sim.horizon, sim.horizon), k.FACTOR_UNSET)


@njit(**RULE_JIT)
def step_and_count(b, t, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset, sched_u,
                   sched_session, sched_noise, reward, outcome, ops, p_recall, fail_lat, sums, scratch,
                   factors=None):
    """Step user ``b``'s trial ``t`` with action ``a``, add it to ``sums`` (by session and by
    command), and on the last trial write reward, outcome, operator breakdown and recall
    probability as after the last ``sim.step``; returns (duration s, outcome code). ``factors``:
    the run's :func:`decay_factor_table` (None: none)."""
    c = sched_cmd[b, t]
    last = t == sched_cmd.shape[1] - 1
    o = ops[b] if last else scratch
    dur, res, pr = k.step_user(b, a, ipar, par, cmdc, fs, ist, tr, us, sched_cmd, sched_clock, sched_onset,
                               sched_u, sched_session, o, last, fail_lat, sched_noise, factors)
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
    return dur, res


def check_fresh_run(sim: BatchSimulator, policy_trial: int, policy_users: int) -> None:
    """Raise unless ``sim`` is just reset and the policy (at ``policy_trial``, with ``policy_users``
    users) is fresh and has as many users as the simulator."""
    if sim.n_users == 0 or sim.trial != 0:
        raise UsageError("a fused run needs a simulator just reset (trial 0)")
    if policy_trial != 0:
        raise UsageError("a fused run needs a fresh batch policy (trial 0)")
    if policy_users != sim.n_users:
        raise ConfigError(f"the policy has {policy_users} users, the simulator {sim.n_users}")
