"""A participant's logged trials as the arrays the compiled likelihood reads."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from shortcut_gym.agents.learning.rules import LoggedTrials
from shortcut_gym.envs.errors import DataError
from shortcut_gym.envs.kernel import ACTION_NAMES, OUTCOME_NAMES


@dataclass(frozen=True)
class TrialArrays:
    """One participant's logged trials as the compiled likelihood's arrays (trial order)."""

    command: np.ndarray  # int64
    action: np.ndarray  # int64 codes (ACTION_NAMES)
    outcome: np.ndarray  # int64 codes (OUTCOME_NAMES)
    duration_s: np.ndarray
    onset_s: np.ndarray
    trial: np.ndarray  # int64
    dt_s: np.ndarray  # seconds since the command's last use, rounded as the env's float32 obs
    n_commands: int

    @property
    def n_trials(self) -> int:
        """Number of trials."""
        return int(self.command.shape[0])

    def logged(self) -> LoggedTrials:
        """The arrays the compiled likelihood kernel reads."""
        return LoggedTrials(self.command, self.action, self.outcome, self.duration_s, self.dt_s, self.trial)

    @classmethod
    def from_frame(cls, df: pd.DataFrame, n_commands: int | None = None) -> TrialArrays:
        """Build from a one-participant table (trial, session, onset_s, command, action, outcome,
        duration_s); errors name the column and row at fault."""
        need = ["trial", "session", "onset_s", "command", "action", "outcome", "duration_s"]
        missing = [c for c in need if c not in df.columns]
        if missing:
            raise DataError(f"trial table lacks column(s) {missing}; has {list(df.columns)}")
        if len(df) == 0:
            raise DataError("trial table has no rows")
        d = df.sort_values("trial", kind="stable")
        codes = {}
        for col, names in (("action", ACTION_NAMES), ("outcome", OUTCOME_NAMES)):
            values = d[col].to_numpy()
            if values.dtype.kind in "iu":
                arr = values.astype(np.int64)
                bad = (arr < 0) | (arr >= len(names))
            else:
                lookup = {n: i for i, n in enumerate(names)}
                arr = np.array([lookup.get(str(v), -1) for v in values], dtype=np.int64)
                bad = arr < 0
            if bad.any():
                i = int(np.argmax(bad))
                raise DataError(f"trial table row {d.index[i]}: column {col!r} value {values[i]!r} is not one of "
                                f"{list(names)}")
            codes[col] = arr
        command = d["command"].to_numpy()
        if command.dtype.kind not in "iu":
            raise DataError(f"column 'command' must hold integer command indices, got dtype {command.dtype}")
        command = command.astype(np.int64)
        n_cmd = int(command.max()) + 1 if n_commands is None else int(n_commands)
        if command.min() < 0 or command.max() >= n_cmd:
            i = int(np.argmax((command < 0) | (command >= n_cmd)))
            raise DataError(f"trial table row {d.index[i]}: command {command[i]} is outside 0..{n_cmd - 1}")
        onset = d["onset_s"].to_numpy(dtype=np.float64)
        dur = d["duration_s"].to_numpy(dtype=np.float64)
        if not np.all(np.isfinite(dur)) or np.any(dur < 0):
            i = int(np.argmax(~np.isfinite(dur) | (dur < 0)))
            raise DataError(f"trial table row {d.index[i]}: duration_s {dur[i]!r} must be a finite number >= 0")
        dt = np.zeros(len(d))
        last: dict[int, float] = {}
        for i, (c, t) in enumerate(zip(command.tolist(), onset.tolist())):
            if c in last:
                raw = max(t - last[c], 0.0)
                dt[i] = float(np.expm1(np.float64(np.float32(math.log1p(raw)))))
            last[c] = t
        return cls(command, codes["action"], codes["outcome"], dur, onset, d["trial"].to_numpy().astype(np.int64),
                   dt, n_cmd)
