"""The task: a command set laid out in menus with hotkeys, usage frequencies, and a schedule.

Usage frequency follows a Zipf law p_i ~ rank_i^-s over the listed order of the commands, with
s = 1 by default (common practice, no source), unless explicit weights are given.
A schedule is a sequence of sessions of trials; trial onsets are exogenous (fixed by the
schedule, not by how long the actions took), so every policy meets the same trials.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

_MODIFIERS = {"Ctrl", "Alt", "Shift", "Cmd", "Meta", "Option"}
_HOTKEY = re.compile(r"^[A-Za-z]+(\+[A-Za-z]+)*\+[A-Za-z0-9]$|^[A-Za-z]+(\+[A-Za-z]+)*\+F[0-9]{1,2}$")


class CommandSpec(BaseModel):
    """One command: a name, the hotkey that issues it ("Ctrl+Shift+K"), an optional weight."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    name: str = Field(min_length=1)
    hotkey: str
    weight: float | None = Field(default=None, gt=0)

    @field_validator("hotkey")
    @classmethod
    def _hotkey_form(cls, v: str) -> str:
        parts = v.split("+")
        if not _HOTKEY.match(v) or any(p not in _MODIFIERS for p in parts[:-1]):
            raise ValueError(
                f"hotkey {v!r} must be one or more modifiers from {sorted(_MODIFIERS)} and a key, "
                "joined by '+', e.g. 'Ctrl+K'"
            )
        return v


class MenuSpec(BaseModel):
    """A menu: its title and its items, top to bottom."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    title: str = Field(min_length=1)
    items: list[CommandSpec] = Field(min_length=1)


class ScheduleSettings(BaseModel):
    """Sessions of trials: ``trial_interval_s`` between trial onsets, ``gap_h`` between sessions."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    sessions: int = Field(default=10, ge=1)
    trials_per_session: int = Field(default=40, ge=1)
    trial_interval_s: float = Field(default=60.0, gt=0)
    gap_h: float | list[float] = 24.0

    @field_validator("gap_h")
    @classmethod
    def _gaps_positive(cls, v: float | list[float]) -> float | list[float]:
        values = v if isinstance(v, list) else [v]
        for i, g in enumerate(values):
            if not g > 0:
                raise ValueError(f"gap_h[{i}] = {g} must be > 0 hours")
        return v

    @model_validator(mode="after")
    def _gap_count(self) -> ScheduleSettings:
        if isinstance(self.gap_h, list) and len(self.gap_h) != self.sessions - 1:
            raise ValueError(
                f"gap_h lists {len(self.gap_h)} gaps but {self.sessions} sessions need "
                f"{self.sessions - 1}"
            )
        return self

    @property
    def horizon(self) -> int:
        """Total number of trials."""
        return self.sessions * self.trials_per_session


class ScenarioSettings(BaseModel):
    """A scenario: the command set and the default schedule (one YAML in configs/scenarios)."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    name: str = Field(min_length=1)
    description: str = ""
    menus: list[MenuSpec] = Field(min_length=1)
    zipf_exponent: float = Field(default=1.0, ge=0)
    schedule: ScheduleSettings = ScheduleSettings()

    @model_validator(mode="after")
    def _unique(self) -> ScenarioSettings:
        names: set[str] = set()
        keys: dict[str, str] = {}
        weighted = [c.weight is not None for m in self.menus for c in m.items]
        for m in self.menus:
            for c in m.items:
                if c.name in names:
                    raise ValueError(f"command name {c.name!r} appears twice")
                names.add(c.name)
                if c.hotkey in keys:
                    raise ValueError(f"hotkey {c.hotkey!r} is given to both {keys[c.hotkey]!r} and {c.name!r}")
                keys[c.hotkey] = c.name
        if any(weighted) and not all(weighted):
            raise ValueError("give a weight to every command or to none (Zipf frequencies)")
        return self


@dataclass(frozen=True)
class CommandSet:
    """Flat arrays over commands, in listed order (index = frequency rank when Zipf)."""

    names: tuple[str, ...]
    hotkeys: tuple[str, ...]
    menu_titles: tuple[str, ...]
    menu_of: np.ndarray  # int, menu index of each command
    item_index: np.ndarray  # int, 0 = top item
    menu_size: np.ndarray  # int, items in the command's menu
    keystrokes: np.ndarray  # int, keys in the hotkey chord
    probability: np.ndarray  # float, usage probability
    within_menu_probability: np.ndarray  # float, probability among its menu's items

    @property
    def n_commands(self) -> int:
        """Number of commands."""
        return len(self.names)

    def index(self, name: str) -> int:
        """Index of a command by name; KeyError naming the unknown command."""
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"unknown command {name!r}; known: {list(self.names)}") from None


def zipf_probabilities(n: int, exponent: float) -> np.ndarray:
    """p_i = i^-s / sum_k k^-s for ranks i = 1..n (Zipf law)."""
    if n < 1:
        raise ValueError(f"need at least one command, got n={n}")
    ranks = np.arange(1, n + 1, dtype=float)
    w = ranks ** (-exponent)
    return w / w.sum()


def build_command_set(scenario: ScenarioSettings) -> CommandSet:
    """Flatten a scenario's menus into a :class:`CommandSet`."""
    names, keys, titles, menu_of, item, size, strokes, weights = [], [], [], [], [], [], [], []
    for mi, m in enumerate(scenario.menus):
        titles.append(m.title)
        for ii, c in enumerate(m.items):
            names.append(c.name)
            keys.append(c.hotkey)
            menu_of.append(mi)
            item.append(ii)
            size.append(len(m.items))
            strokes.append(len(c.hotkey.split("+")))
            weights.append(c.weight)
    n = len(names)
    if weights[0] is None:
        p = zipf_probabilities(n, scenario.zipf_exponent)
    else:
        w = np.asarray(weights, dtype=float)
        p = w / w.sum()
    menu_arr = np.asarray(menu_of)
    within = np.empty(n)
    for mi in range(len(titles)):
        mask = menu_arr == mi
        within[mask] = p[mask] / p[mask].sum()
    return CommandSet(
        names=tuple(names),
        hotkeys=tuple(keys),
        menu_titles=tuple(titles),
        menu_of=menu_arr,
        item_index=np.asarray(item),
        menu_size=np.asarray(size),
        keystrokes=np.asarray(strokes),
        probability=p,
        within_menu_probability=within,
    )


@dataclass(frozen=True)
class Schedule:
    """One simulated user's trials: target command, onset (s), session, cumulative gap time (s)."""

    command: np.ndarray  # int64
    onset_s: np.ndarray  # float64
    session: np.ndarray  # int64
    gap_total_s: np.ndarray  # float64, time spent in between-session gaps before the trial

    def __post_init__(self) -> None:
        n = len(self.command)
        for field in ("onset_s", "session", "gap_total_s"):
            if len(getattr(self, field)) != n:
                raise ValueError(f"schedule.{field} has {len(getattr(self, field))} entries, command has {n}")
        if n == 0:
            raise ValueError("a schedule needs at least one trial")
        if np.any(np.diff(self.onset_s) <= 0):
            bad = int(np.argmax(np.diff(self.onset_s) <= 0)) + 1
            raise ValueError(f"schedule onsets must increase; trial {bad} starts at {self.onset_s[bad]} s")

    @property
    def horizon(self) -> int:
        """Number of trials."""
        return len(self.command)

    def memory_clock_s(self, gap_time_scale: float) -> np.ndarray:
        """Onsets with between-session gaps scaled (Pavlik & Anderson's psychological time)."""
        return self.onset_s - (1.0 - gap_time_scale) * self.gap_total_s


def session_onsets(settings: ScheduleSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Onset (s), session index and cumulative gap (s) of every trial of a schedule."""
    n, k = settings.sessions, settings.trials_per_session
    gaps_h = settings.gap_h if isinstance(settings.gap_h, list) else [settings.gap_h] * (n - 1)
    gap_s = np.concatenate([[0.0], np.cumsum(np.asarray(gaps_h, dtype=float) * 3600.0)])
    session_len = k * settings.trial_interval_s
    starts = np.arange(n) * session_len + gap_s
    within = np.arange(k) * settings.trial_interval_s
    onset = (starts[:, None] + within[None, :]).ravel()
    session = np.repeat(np.arange(n), k)
    gap_total = np.repeat(gap_s, k)
    return onset, session, gap_total


def sample_schedule(commands: CommandSet, settings: ScheduleSettings, rng: np.random.Generator) -> Schedule:
    """Draw each trial's target i.i.d. from the usage probabilities (one ``rng.choice`` call)."""
    onset, session, gap_total = session_onsets(settings)
    target = rng.choice(commands.n_commands, size=settings.horizon, p=commands.probability)
    return Schedule(command=target.astype(np.int64), onset_s=onset, session=session, gap_total_s=gap_total)
