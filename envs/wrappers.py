"""Wrappers for ``CommandSelection-v0``: record a tidy trial table, replay given schedules.

Both work under any agent that speaks plain Gymnasium (Stable-Baselines3 included), so a
trained network's behaviour can be tabulated, or evaluated on participants' own trial orders,
without the agent protocol of :mod:`shortcut_gym.agents`.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterable
from typing import Any

import gymnasium as gym
import numpy as np
import pandas as pd

from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError, UsageError
from shortcut_gym.envs.kernel import ACTION_NAMES, OPERATOR_NAMES
from shortcut_gym.envs.task import Schedule, check_replay_length

#: Columns of one trial's row, in order: the step's info, the action by name, then the time
#: breakdown by operator as ``t_<operator>`` (seconds).
TRIAL_COLUMNS: tuple[str, ...] = (
    "trial", "session", "onset_s", "command", "command_name", "action", "outcome", "duration_s", "p_recall",
    *(f"t_{op}" for op in OPERATOR_NAMES),
)


def trial_row(step_info: dict[str, Any]) -> dict[str, Any]:
    """One trial-table row from the ``info`` a ``step`` returned (action as its name)."""
    row = {key: step_info[key] for key in ("trial", "session", "onset_s", "command", "command_name",
                                           "outcome", "duration_s", "p_recall")}
    row["action"] = ACTION_NAMES[step_info["action"]]
    for op in OPERATOR_NAMES:
        row[f"t_{op}"] = step_info["time_s"][op]
    return {c: row[c] for c in TRIAL_COLUMNS}


def _command_env(env: gym.Env, wrapper: str) -> CommandSelectionEnv:
    base = env.unwrapped
    if not isinstance(base, CommandSelectionEnv):
        raise TypeError(f"{wrapper} wraps a CommandSelection-v0 env, got {type(base).__name__}")
    return base


class TrialRecorder(gym.Wrapper):
    """Keeps every step's trial row; :meth:`trials` returns them as one table.

    Rows carry an ``episode`` number (0, 1, ... in reset order, per wrapper) before the columns of
    :data:`TRIAL_COLUMNS`. ``max_trials`` (default: unlimited) caps the rows kept; older rows are
    dropped first, and :attr:`dropped` counts them, so nothing is lost without a record.
    """

    def __init__(self, env: gym.Env, max_trials: int | None = None) -> None:
        super().__init__(env)
        _command_env(env, "TrialRecorder")
        if max_trials is not None and (int(max_trials) != max_trials or max_trials < 1):
            raise ConfigError(f"TrialRecorder: max_trials must be a whole number >= 1 or None, got {max_trials!r}")
        self.max_trials = None if max_trials is None else int(max_trials)
        self._rows: deque[dict[str, Any]] = deque(maxlen=self.max_trials)
        self.episode = -1
        self.dropped = 0

    def reset(self, **kwargs: Any) -> tuple[Any, dict[str, Any]]:
        self.episode += 1
        return self.env.reset(**kwargs)

    def step(self, action: Any) -> tuple[Any, float, bool, bool, dict[str, Any]]:
        if self.episode < 0:
            raise UsageError("call reset() before step()")
        out = self.env.step(action)
        if self.max_trials is not None and len(self._rows) == self.max_trials:
            self.dropped += 1
        self._rows.append({"episode": self.episode, **trial_row(out[4])})
        return out  # type: ignore[return-value]

    def trials(self) -> pd.DataFrame:
        """The recorded trials, oldest first (``episode`` then :data:`TRIAL_COLUMNS`)."""
        return pd.DataFrame(list(self._rows), columns=["episode", *TRIAL_COLUMNS])

    def clear(self) -> None:
        """Forget the recorded rows (the episode count goes on)."""
        self._rows.clear()
        self.dropped = 0


class ScheduleReplay(gym.Wrapper):
    """Each ``reset`` replays the next of the given schedules (targets, onsets, sessions).

    Use it to evaluate or train any Gymnasium agent on fixed trial orders, e.g. the schedules of
    participants' logs. ``cycle`` True starts again after the last; False raises once all are used.
    A schedule passed explicitly as ``reset(options={'schedule': ...})`` is used instead and does
    not advance the sequence. A schedule may be shorter than the env's horizon (a log cut short:
    the episode ends with it) but not longer; a longer one is refused here (or at reset).
    """

    def __init__(self, env: gym.Env, schedules: Iterable[Schedule], cycle: bool = True) -> None:
        super().__init__(env)
        base = _command_env(env, "ScheduleReplay")
        self.schedules = list(schedules)
        if not self.schedules:
            raise ConfigError("ScheduleReplay: needs at least one schedule")
        horizon = base.world.horizon
        for i, s in enumerate(self.schedules):
            if not isinstance(s, Schedule):
                raise TypeError(f"ScheduleReplay: schedules[{i}] must be a Schedule, got {type(s).__name__}")
            check_replay_length(s.horizon, horizon, f"ScheduleReplay: schedules[{i}]")
            n_commands = base.world.commands.n_commands
            if np.any((s.command < 0) | (s.command >= n_commands)):
                raise ConfigError(f"ScheduleReplay: schedules[{i}] names commands outside 0..{n_commands - 1}")
        self.cycle = bool(cycle)
        self.position = 0  # index of the schedule the next reset replays

    def reset(self, *, seed: int | None = None, options: dict | None = None) -> tuple[Any, dict[str, Any]]:
        if options and options.get("schedule") is not None:
            return self.env.reset(seed=seed, options=options)
        if self.position >= len(self.schedules):
            if not self.cycle:
                raise UsageError(f"ScheduleReplay: all {len(self.schedules)} schedules are used "
                                 "(cycle=False)")
            self.position = 0
        schedule = self.schedules[self.position]
        self.position += 1
        return self.env.reset(seed=seed, options={**(options or {}), "schedule": schedule})
