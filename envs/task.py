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
from pydantic import Field, field_validator, model_validator

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.strict import StrictModel

_MODIFIERS = {"Ctrl", "Alt", "Shift", "Cmd", "Meta", "Option"}
#: Canonical order of the modifiers in a normalised hotkey.
MODIFIER_ORDER = ("Ctrl", "Alt", "Option", "Shift", "Meta", "Cmd")
_CANONICAL_MODIFIER = {m.lower(): m for m in _MODIFIERS}
#: Most trials in one simulated user's schedule (sessions x trials per session); per-user arrays
#: of this length are held in memory by the simulator and the planner.
MAX_HORIZON = 1_000_000
#: A key: one printable ASCII character other than space (letter, digit or punctuation) or F1-F24.
_KEY = re.compile(r"^[!-~]$|^F([1-9]|1[0-9]|2[0-4])$")


def hotkey_parts(hotkey: str) -> tuple[tuple[str, ...], str]:
    """(modifiers, key) of a hotkey such as "Ctrl+Shift+K", "Alt+/", "Ctrl++", "K" or "?".

    The key is the part after the last '+' ("Ctrl++" is Ctrl and the '+' key); each modifier comes
    from the known set at most once. ValueError naming the hotkey and the fault otherwise.
    """
    if hotkey == "+" or hotkey.endswith("++"):
        head, key = hotkey[:-2] if hotkey != "+" else "", "+"
    elif "+" in hotkey:
        head, key = hotkey.rsplit("+", 1)
    else:
        head, key = "", hotkey
    modifiers = tuple(_CANONICAL_MODIFIER.get(m.lower(), m) for m in head.split("+")) if head else ()
    if not _KEY.match(key):
        raise ConfigError(
            f"hotkey {hotkey!r}: the key {key!r} must be one printable character (letter, digit or "
            "punctuation) or F1-F24, e.g. 'K', 'Ctrl+K', 'Ctrl+Shift+/', 'F5'"
        )
    unknown = [m for m in modifiers if m not in _MODIFIERS]
    if unknown:
        raise ConfigError(f"hotkey {hotkey!r}: modifier {unknown[0]!r} is not one of {sorted(_MODIFIERS)}")
    if len(set(modifiers)) != len(modifiers):
        raise ConfigError(f"hotkey {hotkey!r} names a modifier twice")
    return modifiers, key


def canonical_hotkey(hotkey: str) -> str:
    """The normalised form: modifiers in :data:`MODIFIER_ORDER` with their usual case, a letter key
    in upper case ("shift+ctrl+k" -> "Ctrl+Shift+K"); two hotkeys are the same iff their forms are."""
    modifiers, key = hotkey_parts(hotkey)
    ordered = sorted(modifiers, key=MODIFIER_ORDER.index)
    return "+".join([*ordered, key.upper() if len(key) == 1 else key])


def hotkey_keystrokes(hotkey: str) -> int:
    """Keys pressed for a hotkey: its modifiers plus the key (KLM counts each as one K)."""
    return len(hotkey_parts(hotkey)[0]) + 1


class CommandSpec(StrictModel):
    """One command: a name, the hotkey that issues it, an optional weight.

    A hotkey is zero, one or more modifiers and a key joined by '+': "Ctrl+Shift+K", "Alt+/",
    a single key "K" or a punctuation key "?" (see :func:`hotkey_parts`).
    """

    name: str = Field(min_length=1, description="unique within the scenario")
    hotkey: str = Field(description="modifiers and a key joined by '+', unique within the scenario")
    weight: float | None = Field(default=None, gt=0, le=1e12,
                                 description="relative usage frequency; give it to every command or to none "
                                             "(none: Zipf by menu order, see zipf_exponent)")

    @field_validator("name")
    @classmethod
    def _name_not_blank(cls, v: str) -> str:
        if not v.strip():
            raise ValueError(f"command name {v!r} is blank")
        return v

    @field_validator("hotkey")
    @classmethod
    def _hotkey_form(cls, v: str) -> str:
        return canonical_hotkey(v)


class MenuSpec(StrictModel):
    """A menu: its title and its items, top to bottom."""

    title: str = Field(min_length=1, description="the menu's name in the menu bar")
    items: list[CommandSpec] = Field(min_length=1, description="the menu's commands, top to bottom")


#: Sane ranges (a project choice, no source): trial onsets at least 0.1 s and at most a week
#: apart, session gaps at most 10 years; beyond them the memory clock loses its precision.
MIN_TRIAL_INTERVAL_S = 0.1
MAX_TRIAL_INTERVAL_S = 7 * 86_400.0
MAX_GAP_H = 87_600.0


class ScheduleSettings(StrictModel):
    """Sessions of trials: ``trial_interval_s`` between trial onsets, ``gap_h`` between sessions.

    At most :data:`MAX_HORIZON` trials in all.
    """

    sessions: int = Field(default=10, ge=1, description="sessions per simulated user")
    trials_per_session: int = Field(default=40, ge=1, description="trials (command selections) per session")
    trial_interval_s: float = Field(default=60.0, ge=MIN_TRIAL_INTERVAL_S, le=MAX_TRIAL_INTERVAL_S,
                                    description="time between trial onsets within a session")
    gap_h: float | list[float] = Field(default=24.0, description="gap between sessions: one value for every gap, "
                                                                 "or a list of sessions - 1 gaps (each > 0 and "
                                                                 f"≤ {MAX_GAP_H:,.0f} h)")

    @field_validator("gap_h")
    @classmethod
    def _gaps_positive(cls, v: float | list[float]) -> float | list[float]:
        values = v if isinstance(v, list) else [v]
        for i, g in enumerate(values):
            if not 0 < g <= MAX_GAP_H:
                raise ValueError(f"gap_h[{i}] = {g} must be > 0 and at most {MAX_GAP_H:g} hours (10 years)")
        return v

    @model_validator(mode="after")
    def _gap_count(self) -> ScheduleSettings:
        if self.sessions * self.trials_per_session > MAX_HORIZON:
            raise ValueError(f"sessions x trials_per_session = {self.sessions} x {self.trials_per_session} = "
                             f"{self.sessions * self.trials_per_session:,} trials exceeds the limit of "
                             f"{MAX_HORIZON:,} trials per simulated user")
        if isinstance(self.gap_h, list) and len(self.gap_h) != self.sessions - 1:
            raise ValueError(
                f"gap_h lists {len(self.gap_h)} gaps but {self.sessions} sessions need "
                f"{self.sessions - 1} (one between each pair of sessions): give a list of {self.sessions - 1} "
                f"gaps or one number for every gap, or set sessions to {len(self.gap_h) + 1}"
            )
        return self

    @property
    def horizon(self) -> int:
        """Total number of trials."""
        return self.sessions * self.trials_per_session


class ScenarioSettings(StrictModel):
    """A scenario: the command set and the default schedule (one YAML in configs/scenarios)."""

    name: str = Field(min_length=1, description="the scenario's name (shown in outputs)")
    description: str = Field(default="", description="free text about the scenario (not used by the model)")
    menus: list[MenuSpec] = Field(min_length=1, description="the menu bar, left to right")
    zipf_exponent: float = Field(default=1.0, ge=0, le=20,
                                 description="usage frequency of the k-th command in menu order ~ k^-exponent when "
                                             "no weights are given (common practice, no source)")
    schedule: ScheduleSettings = Field(default=ScheduleSettings(), description="the default schedule")

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

    def __post_init__(self) -> None:
        # read-only copies: a world (and the digest that keys its plans) cannot change under a simulator
        for name in ("menu_of", "item_index", "menu_size", "keystrokes", "probability", "within_menu_probability"):
            frozen = np.array(getattr(self, name))
            frozen.flags.writeable = False
            object.__setattr__(self, name, frozen)

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
        raise ConfigError(f"need at least one command, got n={n}")
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
            strokes.append(hotkey_keystrokes(c.hotkey))
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
                raise ConfigError(f"schedule.{field} has {len(getattr(self, field))} entries, command has {n}")
        if n == 0:
            raise ConfigError("a schedule needs at least one trial")
        if np.any(np.diff(self.onset_s) <= 0):
            bad = int(np.argmax(np.diff(self.onset_s) <= 0)) + 1
            raise ConfigError(f"schedule onsets must increase; trial {bad} starts at {self.onset_s[bad]} s")

    @property
    def horizon(self) -> int:
        """Number of trials."""
        return len(self.command)

    def memory_clock_s(self, gap_time_scale: float) -> np.ndarray:
        """Onsets with between-session gaps scaled (Pavlik & Anderson's psychological time)."""
        return self.onset_s - (1.0 - gap_time_scale) * self.gap_total_s


def replay_too_long(n_trials: int, horizon: int, where: str, at_least: bool = False) -> ConfigError | None:
    """The error for a replayed schedule of ``n_trials`` trials given where ``where`` says, on a
    world of ``horizon`` trials, or None when it fits. A replay may be shorter than the horizon (a
    log cut short: the user's world goes on past it) but not longer: nothing (a plan, the world's
    clock) covers trials past the horizon. ``at_least``: only a lower bound of the length is known
    (a trial index past the horizon was met)."""
    if n_trials <= horizon:
        return None
    count = f"at least {n_trials}" if at_least else str(n_trials)
    return ConfigError(
        f"{where}: the replayed schedule has {count} trials, more than the world's horizon of {horizon} "
        f"trials; a replay may be shorter than the horizon but not longer: replay only its first {horizon} "
        f"trials, or make the world with a schedule of at least {n_trials} trials (schedule sessions x "
        "trials_per_session)")


def check_replay_length(n_trials: int, horizon: int, where: str, at_least: bool = False) -> None:
    """Raise :func:`replay_too_long`'s error for a replayed schedule longer than the world's horizon."""
    err = replay_too_long(n_trials, horizon, where, at_least)
    if err is not None:
        raise err


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
