"""Trial logs: read, write and validate the lab's CSV/Parquet trial tables.

Schema (one row per trial, columns in the order of :data:`LOG_COLUMNS`; the project's own format):

=============  ======================================================================
participant    identifier of the person (any string or integer)
session        session index (integer, non-decreasing within a participant)
trial          trial index (integer, strictly increasing within a participant)
onset_s        trial onset in seconds (strictly increasing within a participant)
command        command name of the scenario (e.g. "Add species sighting")
action         menu | hotkey | learn
outcome        menu | hotkey | hotkey_forgotten | hotkey_wrong | learned
duration_s     trial duration in seconds (>= 0)
=============  ======================================================================

Validation collects every fault with its file, row (1-based data row; the CSV line is row + 1)
and column, and raises one :class:`LogError` listing them all; rows are never dropped.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from shortcut_gym.envs.errors import ConfigError, DataError, InputFileError, ShortcutGymError
from shortcut_gym.envs.kernel import ACTION_NAMES, OUTCOME_NAMES
from shortcut_gym.envs.task import CommandSet, Schedule

LOG_COLUMNS: tuple[str, ...] = (
    "participant", "session", "trial", "onset_s", "command", "action", "outcome", "duration_s",
)
#: Outcomes each logged action can have (the world's semantics, envs/kernel.py step_users).
OUTCOMES_OF_ACTION: dict[str, tuple[str, ...]] = {
    "menu": ("menu",),
    "learn": ("learned",),
    "hotkey": ("hotkey", "hotkey_forgotten", "hotkey_wrong"),
}
_NUMERIC = ("session", "trial", "onset_s", "duration_s")
_INTEGER = ("session", "trial")
_MAX_LISTED = 50


@dataclass(frozen=True)
class LogFault:
    """One problem in a log: where (file, 1-based data row or None for the whole file, column) and what."""

    source: str
    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        where = [self.source]
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"column {self.column!r}")
        return f"{', '.join(where)}: {self.message}"


class LogError(ShortcutGymError, ValueError):
    """A trial log has faults; ``faults`` lists each one, the message shows them."""

    def __init__(self, faults: list[LogFault]) -> None:
        self.faults = faults
        shown = "\n  ".join(str(f) for f in faults[:_MAX_LISTED])
        more = f"\n  ... and {len(faults) - _MAX_LISTED} more" if len(faults) > _MAX_LISTED else ""
        super().__init__(f"{len(faults)} fault(s) in trial log:\n  {shown}{more}")


#: File suffix -> trial-log format.
LOG_FORMATS: dict[str, str] = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


def _unknown_type(suffix: str) -> str:
    return f"unknown file type {suffix!r}; use .csv or .parquet"


def log_format(path: str | Path) -> str:
    """'csv' or 'parquet' by the suffix of ``path``; a ValueError naming the file otherwise."""
    suffix = Path(path).suffix.lower()
    if suffix not in LOG_FORMATS:
        raise ConfigError(f"{path}: {_unknown_type(suffix)}")
    return LOG_FORMATS[suffix]


def read_log_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV (``.csv``) or Parquet (``.parquet``/``.pq``) file as it is, without validation."""
    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{p}: no such trial log file")
    fmt = LOG_FORMATS.get(p.suffix.lower())
    if fmt is None:
        raise LogError([LogFault(str(p), None, None, _unknown_type(p.suffix.lower()))])
    try:
        if fmt == "csv":
            # every cell as text, no "NA"/"None" read as missing: participant ids stay as written,
            # numbers are parsed (and faults named) by validate_log
            return pd.read_csv(p, dtype=str, keep_default_na=False)
        return pd.read_parquet(p)
    except pd.errors.EmptyDataError:
        raise LogError([LogFault(str(p), None, None, "the file is empty (no header line)")]) from None
    except (pd.errors.ParserError, UnicodeDecodeError, OSError, ValueError) as exc:
        kind = "CSV" if fmt == "csv" else "Parquet"
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise LogError([LogFault(str(p), None, None, f"cannot be read as {kind}: {first}")]) from exc


def read_log(path: str | Path, commands: CommandSet, skip_bad_participants: bool = False) -> pd.DataFrame:
    """Read and validate a trial log; returns the table with an added ``command_index`` column.

    See :func:`validate_log` for ``skip_bad_participants``.
    """
    return validate_log(read_log_table(path), commands, source=str(path), skip_bad_participants=skip_bad_participants)


def write_log(log: pd.DataFrame, path: str | Path) -> Path:
    """Write the schema columns of ``log`` to CSV or Parquet (by suffix); returns the path."""
    p = Path(path)
    missing = [c for c in LOG_COLUMNS if c not in log.columns]
    if missing:
        raise DataError(f"cannot write a trial log without column(s) {missing}")
    table = log[list(LOG_COLUMNS)]
    fmt = log_format(p)
    p.parent.mkdir(parents=True, exist_ok=True)
    if fmt == "csv":
        table.to_csv(p, index=False)
    else:
        table.to_parquet(p, index=False)
    return p


def validate_log(log: pd.DataFrame, commands: CommandSet, source: str = "<table>",
                 skip_bad_participants: bool = False) -> pd.DataFrame:
    """Check every row of ``log`` against the schema and the scenario's command set.

    Faults found: missing column, missing value (NaN/empty), non-numeric or non-integer number,
    unknown command, unknown action, unknown outcome, outcome impossible for the action,
    negative duration, trial / onset / session out of order within a participant.
    Returns a copy in the original row order with ``command_index`` (int) added.

    Durations and onsets are plain numbers of seconds: a timedelta or datetime column is refused
    naming the column (convert it yourself, e.g. ``df[c].dt.total_seconds()``). Sessions and
    trials are whole numbers >= 0. With ``skip_bad_participants`` the participants with a faulty
    row are left out instead (a fault of the whole table still raises); the returned table's
    ``attrs["skipped_participants"]`` maps each one left out to its first fault.
    """
    faults: list[LogFault] = []
    missing = [c for c in LOG_COLUMNS if c not in log.columns]
    for c in missing:
        faults.append(LogFault(source, None, c, "required column is missing"))
    if missing:
        raise LogError(faults)
    df = log.reset_index(drop=True).copy()
    rows = np.arange(1, len(df) + 1)
    if len(df) == 0:
        raise LogError([LogFault(source, None, None, "the log has no rows")])

    def add(mask: np.ndarray, column: str, message) -> None:
        for i in np.flatnonzero(mask):
            text = message(i) if callable(message) else message
            faults.append(LogFault(source, int(rows[i]), column, text))

    kinds = [c for c in _NUMERIC
             if pd.api.types.is_timedelta64_dtype(df[c]) or pd.api.types.is_datetime64_any_dtype(df[c])]
    if kinds:
        raise LogError([LogFault(source, None, c, f"holds {df[c].dtype} values; give {c} as plain numbers of "
                                 f"seconds (e.g. df[{c!r}].dt.total_seconds())") for c in kinds])
    null = {c: df[c].isna().to_numpy() | (df[c].astype(str).str.strip() == "").to_numpy() for c in LOG_COLUMNS}
    for c in LOG_COLUMNS:
        add(null[c], c, "missing value (NaN or empty)")
    numbers: dict[str, np.ndarray] = {}
    for c in _NUMERIC:
        values = pd.to_numeric(df[c], errors="coerce").to_numpy(dtype=float)
        add(~null[c] & np.isnan(values), c, lambda i, c=c: f"value {df[c].iloc[i]!r} is not a number")
        if c in _INTEGER:
            add(np.isfinite(values) & (values != np.round(values)), c,
                lambda i, c=c: f"value {df[c].iloc[i]!r} is not a whole number")
        add(np.isinf(values), c, "value is infinite")
        numbers[c] = values
    add(numbers["duration_s"] < 0, "duration_s", lambda i: f"negative duration {numbers['duration_s'][i]} s")
    for c in _INTEGER:
        add(numbers[c] < 0, c, lambda i, c=c: f"negative {c} {numbers[c][i]:g} (must be >= 0)")

    known = {name: i for i, name in enumerate(commands.names)}
    cmd_text = df["command"].astype(str)
    cmd_index = cmd_text.map(known)
    add(~null["command"] & cmd_index.isna().to_numpy(), "command",
        lambda i: f"unknown command {cmd_text.iloc[i]!r}; the scenario has {list(commands.names)}")
    action = df["action"].astype(str)
    outcome = df["outcome"].astype(str)
    bad_action = ~null["action"] & ~action.isin(ACTION_NAMES).to_numpy()
    add(bad_action, "action", lambda i: f"unknown action {action.iloc[i]!r}; expected one of {list(ACTION_NAMES)}")
    bad_outcome = ~null["outcome"] & ~outcome.isin(OUTCOME_NAMES).to_numpy()
    add(bad_outcome, "outcome",
        lambda i: f"unknown outcome {outcome.iloc[i]!r}; expected one of {list(OUTCOME_NAMES)}")
    both_ok = ~bad_action & ~bad_outcome & ~null["action"] & ~null["outcome"]
    allowed = np.array([o in OUTCOMES_OF_ACTION.get(a, ()) for a, o in zip(action, outcome, strict=True)], dtype=bool)
    add(both_ok & ~allowed, "outcome",
        lambda i: f"outcome {outcome.iloc[i]!r} cannot follow action {action.iloc[i]!r} "
                  f"(allowed: {list(OUTCOMES_OF_ACTION[action.iloc[i]])})")

    part = df["participant"].astype(str).to_numpy()
    for column, strict, what in (("trial", True, "trial"), ("onset_s", True, "onset"), ("session", False, "session")):
        v = numbers[column]
        for pid in pd.unique(part):
            idx = np.flatnonzero(part == pid)
            vals = v[idx]
            ok = np.isfinite(vals)
            idx, vals = idx[ok], vals[ok]
            if len(vals) < 2:
                continue
            step = np.diff(vals)
            bad = step <= 0 if strict else step < 0
            for j in np.flatnonzero(bad):
                faults.append(LogFault(
                    source, int(rows[idx[j + 1]]), column,
                    f"{what} out of order for participant {pid!r}: {vals[j + 1]:g} after {vals[j]:g} "
                    f"(must {'increase' if strict else 'not decrease'})",
                ))
    if faults:
        faults.sort(key=lambda f: (f.row or 0, LOG_COLUMNS.index(f.column) if f.column in LOG_COLUMNS else 99))
        if not skip_bad_participants or any(f.row is None for f in faults):
            raise LogError(faults)
        first: dict[str, str] = {}
        for f in faults:
            first.setdefault(str(part[f.row - 1]), str(f))  # type: ignore[operator]
        keep = ~np.isin(part, list(first))
        if not keep.any():
            raise LogError(faults)
        rest = validate_log(log.iloc[np.flatnonzero(keep)], commands, source)
        rest.attrs["skipped_participants"] = first
        return rest
    df["participant"] = df["participant"].astype(str)
    for c in _INTEGER:
        df[c] = numbers[c].astype(np.int64)
    for c in ("onset_s", "duration_s"):
        df[c] = numbers[c]
    df["command"] = cmd_text
    df["command_index"] = cmd_index.astype(np.int64)
    return df


def participants(log: pd.DataFrame) -> list[str]:
    """Participant identifiers in order of first appearance."""
    return [str(p) for p in pd.unique(log["participant"].astype(str))]


def participant_trials(log: pd.DataFrame, participant: str) -> pd.DataFrame:
    """One participant's trials as the frame learning models read (command = int index).

    Columns: trial (0-based position in the participant's history, what agents see as
    ``next_trial``), session, onset_s, command (int index), action, outcome, duration_s, and
    log_trial (the log's own trial number). ``log`` must be validated (it has ``command_index``).
    """
    rows = log[log["participant"].astype(str) == str(participant)]
    if rows.empty:
        raise KeyError(f"participant {participant!r} is not in the log")
    out = rows[["session", "onset_s", "action", "outcome", "duration_s"]].copy().reset_index(drop=True)
    out.insert(0, "trial", np.arange(len(out), dtype=np.int64))
    out.insert(3, "command", rows["command_index"].to_numpy(dtype=np.int64))
    out["log_trial"] = rows["trial"].to_numpy()
    return out


def schedule_of(trials: pd.DataFrame) -> Schedule:
    """A replay :class:`Schedule` from one participant's trials (``participant_trials`` output).

    The between-session gap before session s is its first onset minus the previous session's
    last onset minus the median within-session onset interval (clamped at 0); the cumulative gap
    feeds the memory clock's gap scaling.
    """
    onset = trials["onset_s"].to_numpy(dtype=float)
    session = trials["session"].to_numpy(dtype=np.int64)
    same = np.diff(session) == 0
    steps = np.diff(onset)
    interval = float(np.median(steps[same])) if same.any() else 0.0
    gap = np.where(~same, np.maximum(steps - interval, 0.0), 0.0)
    gap_total = np.concatenate([[0.0], np.cumsum(gap)])
    return Schedule(
        command=trials["command"].to_numpy(dtype=np.int64),
        onset_s=onset,
        session=session,
        gap_total_s=gap_total,
    )


def log_from_simulation(trials: pd.DataFrame, commands: CommandSet, participant_column: str = "user",
                        prefix: str = "P") -> pd.DataFrame:
    """Turn simulated trial tables (``run_episode`` rows plus a user column) into the log schema."""
    if participant_column not in trials.columns:
        raise DataError(f"simulated trials have no {participant_column!r} column")
    out = pd.DataFrame({
        "participant": [f"{prefix}{u}" if prefix else str(u) for u in trials[participant_column]],
        "session": trials["session"].to_numpy(dtype=np.int64),
        "trial": trials["trial"].to_numpy(dtype=np.int64),
        "onset_s": trials["onset_s"].to_numpy(dtype=float),
        "command": [commands.names[int(c)] for c in trials["command"]],
        "action": trials["action"].astype(str).to_numpy(),
        "outcome": trials["outcome"].astype(str).to_numpy(),
        "duration_s": trials["duration_s"].to_numpy(dtype=float),
    })
    return out
