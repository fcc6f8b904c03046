"""The typed ``info`` contract: what an agent may read before and after a trial, and the one builder.

Before a trial an agent reads :class:`UpcomingInfo`: every key is about the upcoming trial and is
named ``target*`` or ``next_*``. After a trial, :class:`StepInfo` holds the upcoming trial's keys
again (for the trial after it) plus the finished trial's keys, which carry no prefix (``trial``,
``session``, ``onset_s``, ``command``, ...). So ``info['session']`` is always the session of the
trial that has just finished and ``info['next_session']`` the session of the trial about to be
decided; a policy reads only the ``next_*`` keys and ``target``.

Every producer builds its dicts through :func:`upcoming_info` and :func:`step_info`: the env, the
vector env (arrays, one entry per user), the rollout driver on the batched simulator and the lab's
replay of a trial log. :func:`simulator_upcoming_info` and :func:`simulator_step_info` read one
user of a :class:`~shortcut_gym.envs.simulator.BatchSimulator`, their plural forms every user (the SB3 VecEnv).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, NotRequired, TypedDict, cast

import numpy as np

from shortcut_gym.envs.kernel import OPERATOR_NAMES, OUTCOME_NAMES

if TYPE_CHECKING:
    from shortcut_gym.envs.simulator import BatchSimulator


class UpcomingInfo(TypedDict):
    """About the trial to be decided next (after the horizon: the last trial, ``next_trial`` = horizon)."""

    target: int  # command index
    target_name: str
    next_trial: int  # 0-based trial index in the user's history
    next_onset_s: float  # seconds since the history began
    next_session: int  # 0-based session index


class StepInfo(UpcomingInfo):
    """A finished trial (no prefix) plus :class:`UpcomingInfo` of the trial after it."""

    trial: int
    session: int  # the finished trial's session
    onset_s: float
    command: int
    command_name: str
    action: int  # 0 menu, 1 hotkey, 2 learn
    outcome: str  # one of OUTCOME_NAMES
    duration_s: float
    p_recall: NotRequired[float]  # simulation only: the true recall probability at the trial
    time_s: NotRequired[dict[str, float]]  # simulation only: seconds by operator (OPERATOR_NAMES)


#: Keys of :class:`UpcomingInfo` and of the finished-trial part of :class:`StepInfo`, in order.
UPCOMING_KEYS: tuple[str, ...] = tuple(UpcomingInfo.__annotations__)
FINISHED_KEYS: tuple[str, ...] = tuple(k for k in StepInfo.__annotations__ if k not in UpcomingInfo.__annotations__)


def upcoming_info(target: Any, target_name: Any, next_trial: Any, next_onset_s: Any, next_session: Any) -> UpcomingInfo:
    """The upcoming-trial info. Values are scalars for one user or arrays with one entry per user
    (the vector env); ``target_name`` None leaves the name out (the vector env's ``full_info=False``)."""
    info: dict[str, Any] = {"target": target}
    if target_name is not None:
        info["target_name"] = target_name
    info["next_trial"] = next_trial
    info["next_onset_s"] = next_onset_s
    info["next_session"] = next_session
    return cast(UpcomingInfo, info)


def step_info(upcoming: UpcomingInfo, trial: Any, session: Any, onset_s: Any, command: Any, command_name: Any,
              action: Any, outcome: Any, duration_s: Any, p_recall: Any = None,
              time_s: Any = None) -> StepInfo:
    """A finished trial's info: ``upcoming`` (the next trial's, extended in place) plus the finished
    trial's keys. ``command_name``, ``p_recall`` and ``time_s`` None are left out (a log has no
    recall probability or operator breakdown)."""
    info = cast(dict[str, Any], upcoming)
    info["trial"] = trial
    info["session"] = session
    info["onset_s"] = onset_s
    info["command"] = command
    if command_name is not None:
        info["command_name"] = command_name
    info["action"] = action
    info["outcome"] = outcome
    info["duration_s"] = duration_s
    if p_recall is not None:
        info["p_recall"] = p_recall
    if time_s is not None:
        info["time_s"] = time_s
    return cast(StepInfo, info)


def simulator_upcoming_info(sim: BatchSimulator, user: int, command_names: Sequence[str],
                            next_trial: int | None = None) -> UpcomingInfo:
    """User ``user``'s upcoming-trial info on a batched simulator; ``next_trial``: ``sim.trial`` when
    the caller knows it (saves reading it from the simulator's state on every step)."""
    t = sim.trial if next_trial is None else next_trial
    last = min(t, sim.horizon - 1)
    c = sim.sched_command.item(user, last)  # .item: the Python int/float, without a numpy scalar
    return upcoming_info(c, command_names[c], t, sim.sched_onset.item(user, last), sim.sched_session.item(user, last))


def simulator_step_info(sim: BatchSimulator, user: int, trial: int, action: int,
                        command_names: Sequence[str]) -> StepInfo:
    """User ``user``'s info after ``sim.step`` ran trial ``trial`` with ``action``."""
    c = sim.sched_command.item(user, trial)
    return step_info(
        simulator_upcoming_info(sim, user, command_names, trial + 1), trial, sim.sched_session.item(user, trial),
        sim.sched_onset.item(user, trial), c, command_names[c], int(action), OUTCOME_NAMES[sim.outcome.item(user)],
        -sim.reward.item(user), sim.p_recall.item(user),
        dict(zip(OPERATOR_NAMES, sim.operator_time_s[user].tolist())),  # a row has one entry per operator
    )


def simulator_upcoming_infos(sim: BatchSimulator, command_names: Sequence[str]) -> list[UpcomingInfo]:
    """:func:`simulator_upcoming_info` of every user, read from whole columns at once."""
    t = sim.trial
    last = min(t, sim.horizon - 1)
    return [upcoming_info(c, command_names[c], t, onset, session) for c, onset, session in zip(
        sim.sched_command[:, last].tolist(), sim.sched_onset[:, last].tolist(),
        sim.sched_session[:, last].tolist(), strict=True)]


def simulator_step_infos(sim: BatchSimulator, trial: int, actions: np.ndarray,
                         command_names: Sequence[str]) -> list[StepInfo]:
    """:func:`simulator_step_info` of every user (the same dicts), read from whole columns at once."""
    finished = zip(sim.sched_command[:, trial].tolist(), sim.sched_session[:, trial].tolist(),
                   sim.sched_onset[:, trial].tolist(), np.asarray(actions).tolist(), sim.outcome.tolist(),
                   (-sim.reward).tolist(), sim.p_recall.tolist(), sim.operator_time_s.tolist(), strict=True)
    return [step_info(upcoming, trial, session, onset, c, command_names[c], action, OUTCOME_NAMES[outcome],
                      duration, p_recall, dict(zip(OPERATOR_NAMES, times, strict=True)))
            for upcoming, (c, session, onset, action, outcome, duration, p_recall, times)
            in zip(simulator_upcoming_infos(sim, command_names), finished, strict=True)]
