"""A resolved world: scenario, costs, memory and options, packed into the kernel's arrays."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.aids import AidSettings
from shortcut_gym.envs.config import load_settings, validate
from shortcut_gym.envs.costs import CostSettings, fitts_time_s, hick_hyman_time_s
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.kernel_layout import KernelIntParams, KernelParams
from shortcut_gym.envs.memory import MEMORY_CODES, MemorySettings
from shortcut_gym.envs.observation import ObservationLayout
from shortcut_gym.envs.task import (
    CommandSet,
    ScenarioSettings,
    Schedule,
    ScheduleSettings,
    build_command_set,
    sample_schedule,
)

DEFAULT_SCENARIO = "tidepool_logbook"
DEFAULT_COSTS = "average_skilled_mouse"
TargetEncoding = Literal["onehot", "index"]


@dataclass(frozen=True)
class World:
    """Everything the simulator needs besides the random seed."""

    scenario: ScenarioSettings
    commands: CommandSet
    costs: CostSettings
    memory: MemorySettings
    schedule: ScheduleSettings
    observe_recall: bool = False
    target_encoding: TargetEncoding = "onehot"
    aids: AidSettings = AidSettings()

    @property
    def horizon(self) -> int:
        """Trials per simulated user."""
        return self.schedule.horizon

    def observation_layout(self) -> ObservationLayout:
        """The layout of this world's observation vector."""
        return ObservationLayout(self.commands.n_commands, self.target_encoding == "onehot", self.observe_recall)

    @property
    def obs_dim(self) -> int:
        """Length of the flat observation vector."""
        return self.observation_layout().dim

    def observation_names(self) -> list[str]:
        """Name of each observation entry."""
        return self.observation_layout().names(self.commands.names)

    def kernel_parameters(self) -> tuple[KernelParams, KernelIntParams]:
        """The kernel's float and integer parameters, named (:mod:`shortcut_gym.envs.kernel_layout`)."""
        c, m, aids = self.costs, self.memory, self.aids
        par = KernelParams(
            mental_s=c.klm.mental_s, keystroke_s=c.klm.k_s, point_s=c.klm.point_s, button_s=c.klm.button_s,
            home_s=c.klm.home_s, encoding_s=c.learn.encoding_s, commission_share=c.errors.commission_share,
            undo_keystrokes=c.errors.undo_keystrokes, decay=m.decay, threshold=m.threshold, noise_s=m.noise_s,
            latency_factor_s=m.latency_factor_s, spacing_scale=m.spacing_scale,
            spacing_intercept=m.spacing_intercept, exponential_rate_per_s=m.exponential_rate_per_s,
            power_time_unit_s=m.power_time_unit_s, learn_weight=m.weights.learn,
            hotkey_success_weight=m.weights.hotkey_success, hotkey_failure_weight=m.weights.hotkey_failure,
            menu_weight=m.weights.menu,
        )
        ipar = KernelIntParams(
            memory_kind=MEMORY_CODES[m.kind], recent_traces=m.recent_traces,
            observe_recall=int(self.observe_recall), onehot_target=int(self.target_encoding == "onehot"),
            aids_on=int(aids.any_on),
            warmup_sessions=0 if not aids.warmup.on else (1 if aids.warmup.sessions == "first" else 2),
        )
        return par, ipar

    def parameters(self) -> tuple[np.ndarray, np.ndarray]:
        """(float parameters, integer parameters) as the kernel's flat vectors (``kernel.P_*``,
        ``kernel.I_*``): :meth:`kernel_parameters` as arrays."""
        par, ipar = self.kernel_parameters()
        return par.array(), ipar.array()

    def command_constants(self) -> np.ndarray:
        """Per command: visual search time, Hick-Hyman decision time, pointing time, key count, and
        the interface aids' constants (``kernel.C_LABEL_SEARCH`` .. ``C_WARMUP_W``, see :meth:`aid_constants`).

        Computed once per world (it is frozen) and returned as a fresh copy.
        """
        cached = self.__dict__.get("_command_constants")
        if cached is None:
            cached = self._compute_command_constants()
            object.__setattr__(self, "_command_constants", cached)
        return cached.copy()

    def _compute_command_constants(self) -> np.ndarray:
        cs, mm, f = self.commands, self.costs.menu, self.costs.fitts
        out = np.zeros((cs.n_commands, k.N_CMDC))
        for i in range(cs.n_commands):
            out[i, k.C_SEARCH] = mm.search_intercept_s + mm.search_slope_s_per_item * cs.menu_size[i]
            out[i, k.C_DECISION] = hick_hyman_time_s(
                float(cs.within_menu_probability[i]), mm.decision_intercept_s, mm.decision_slope_s_per_bit
            )
            h = mm.item_height_px
            out[i, k.C_POINTING] = fitts_time_s((cs.item_index[i] + 0.5) * h, h, f.intercept_s, f.slope_s_per_bit)
            out[i, k.C_KEYS] = cs.keystrokes[i]
        out[:, k.C_LABEL_SEARCH:] = self.aid_constants()
        return out

    def aid_constants(self) -> np.ndarray:
        """(commands, 10) the aids' per-command constants in kernel column order from
        ``kernel.C_LABEL_SEARCH``; all zero (lockout after infinitely many uses) with every aid off."""
        a, cs, klm = self.aids, self.commands, self.costs.klm
        names = cs.names
        out = np.zeros((cs.n_commands, k.N_CMDC - k.C_LABEL_SEARCH))

        def col(c: int) -> int:
            return c - k.C_LABEL_SEARCH

        labelled = a.key_labels.mask(names, "aids.key_labels")
        for i in range(cs.n_commands):
            same_menu = cs.menu_of == cs.menu_of[i]
            out[i, col(k.C_LABEL_SEARCH)] = a.key_labels.search_s_per_label * int(labelled[same_menu].sum())
        out[labelled, col(k.C_LABEL_W)] = a.key_labels.trace_weight
        nudged = a.nudge.mask(names, "aids.nudge")
        out[nudged, col(k.C_NUDGE_FROM)] = a.nudge.after_menu_selections
        out[nudged, col(k.C_NUDGE_UNTIL)] = a.nudge.after_menu_selections + a.nudge.times
        out[nudged, col(k.C_NUDGE_S)] = a.nudge.reading_s
        out[nudged, col(k.C_NUDGE_W)] = a.nudge.trace_weight
        out[a.menu_delay.mask(names, "aids.menu_delay"), col(k.C_DELAY_S)] = a.menu_delay.delay_s
        locked = a.menu_lockout.mask(names, "aids.menu_lockout")
        out[:, col(k.C_LOCK_AFTER)] = np.where(locked, float(a.menu_lockout.after_uses), np.inf)
        warm = a.warmup.mask(names, "aids.warmup")
        out[warm, col(k.C_WARMUP_S)] = a.warmup.reading_s + klm.mental_s + cs.keystrokes[warm] * klm.k_s
        out[warm, col(k.C_WARMUP_W)] = a.warmup.trace_weight
        return out

    def warmup_block_s(self) -> float:
        """Seconds of the warm-up block from the keyboard (0 with the aid off; H more from the mouse)."""
        return float(self.aid_constants()[:, k.C_WARMUP_S - k.C_LABEL_SEARCH].sum())

    def trace_capacity(self, schedules: list[Schedule]) -> int:
        """Trace-buffer length per command: k for the O(1) forms, else the most trials of one command."""
        if self.memory.kind == "actr":
            return self.memory.recent_traces
        if self.memory.kind == "exponential":
            return 1
        most = max(int(np.bincount(s.command, minlength=self.commands.n_commands).max()) for s in schedules)
        return max(most, 1)

    def draw(self, rng: np.random.Generator, schedule: Schedule | None = None) -> tuple[Schedule, np.ndarray]:
        """One user's schedule (sampled unless given) and per-trial uniforms, from ``rng``."""
        if schedule is None:
            schedule = sample_schedule(self.commands, self.schedule, rng)
        elif schedule.command.max() >= self.commands.n_commands or schedule.command.min() < 0:
            raise ConfigError(
                f"replayed schedule names command index {int(schedule.command.max())}, "
                f"the scenario has {self.commands.n_commands} commands"
            )
        return schedule, rng.random(schedule.horizon)

    def digest(self) -> str:
        """Content digest (hex) of everything the world holds: equal worlds, equal digests (a key for
        what is computed once per world, such as a plan)."""
        h = hashlib.sha256()
        for name in self.__dataclass_fields__:
            _feed(h, name, getattr(self, name))
        return h.hexdigest()

    def problem_parts(self) -> dict[str, str]:
        """Digest (hex) of each part of the decision problem the world poses, as the simulator reads
        it and however the settings spell it: ``commands`` (the command set built from the scenario's
        menus, hotkeys and usage, not its name, description or default schedule), ``costs`` (K
        resolved from the typist class, not the preset's name), ``memory``, ``schedule`` (the one in
        force), ``observation`` (observe_recall, target_encoding) and ``aids`` (not the preset's name).
        Settings a part holds but its kind ignores (an aid switched off) still count."""
        costs = self.costs.model_dump(mode="json", exclude={"name"})
        costs["klm"] = {**costs["klm"], "typist": None, "keystroke_s": self.costs.klm.k_s}
        settings: dict[str, Any] = {
            "costs": costs, "memory": self.memory.model_dump(mode="json"),
            "schedule": self.schedule.model_dump(mode="json"),
            "observation": {"observe_recall": self.observe_recall, "target_encoding": self.target_encoding},
            "aids": self.aids.model_dump(mode="json", exclude={"name"}),
        }
        h = hashlib.sha256()
        _feed(h, "commands", self.commands)
        out = {"commands": h.hexdigest()}
        for name, value in settings.items():
            out[name] = hashlib.sha256(f"{name}:{json.dumps(value, sort_keys=True)}".encode()).hexdigest()
        return out

    def problem_digest(self) -> str:
        """One digest (hex) of :meth:`problem_parts`: equal for worlds that pose the same problem
        (the fingerprint a saved model keeps); :meth:`digest` also tells apart how it is spelled."""
        return hashlib.sha256(json.dumps(self.problem_parts(), sort_keys=True).encode()).hexdigest()

    def plan_digest(self) -> str:
        """Digest (hex) of every number the simulator reads and nothing else: the key of a plan,
        equal for worlds that differ only in text that names things (the scenario's name and
        description, command names, hotkey spellings of as many keys, menu titles, the costs' and
        aids' preset names). Covers the command arrays (menu, position, menu size, keys, usage
        probabilities), the costs (K resolved), memory, the schedule in force, the observation
        settings and the aids with their commands resolved to the scenario's positions (an aid
        names commands; the same name list on renamed commands may mean other positions)."""
        parts = self.problem_parts()
        cs = self.commands
        h = hashlib.sha256()
        for name in ("menu_of", "item_index", "menu_size", "keystrokes", "probability", "within_menu_probability"):
            array = np.ascontiguousarray(getattr(cs, name))
            h.update(f"{name}:{array.dtype.str}:{array.shape}".encode())
            h.update(array.tobytes())
        aids = self.aids.model_dump(mode="json", exclude={"name"})
        for section, values in aids.items():
            if isinstance(values, dict) and "commands" in values:
                where = f"aids.{section}"
                values["commands"] = getattr(self.aids, section).mask(cs.names, where).astype(int).tolist()
        settings = {name: parts[name] for name in ("costs", "memory", "schedule", "observation")}
        settings["aids"] = hashlib.sha256(json.dumps(aids, sort_keys=True).encode()).hexdigest()
        settings["commands"] = h.hexdigest()
        return hashlib.sha256(json.dumps(settings, sort_keys=True).encode()).hexdigest()

    def with_changes(self, **changes: Any) -> World:
        """A copy with some fields replaced."""
        fields = {f: getattr(self, f) for f in self.__dataclass_fields__}
        fields.update(changes)
        return World(**fields)


def same_world(a: World | None, b: World | None) -> bool:
    """Whether ``a`` and ``b`` are the same world by content (:meth:`World.digest`); None is only
    the same as None."""
    if a is b:
        return True
    return a is not None and b is not None and a.digest() == b.digest()


def _feed(h: Any, name: str, value: Any) -> None:
    """Add one named field of a world to the hash ``h``."""
    h.update(name.encode())
    if hasattr(value, "model_dump_json"):
        h.update(value.model_dump_json().encode())
    elif name == "commands":
        for part in vars(value).values():
            h.update(part.tobytes() if isinstance(part, np.ndarray) else repr(part).encode())
    else:
        h.update(repr(value).encode())


def _check_inherited_gaps(base: ScheduleSettings, override: Any, scenario: Any) -> None:
    """Refuse an override of the sessions that keeps the scenario's per-gap list when the list no
    longer fits, naming where the list came from and the two fixes."""
    if not isinstance(override, dict) or "gap_h" in override or not isinstance(base.gap_h, list):
        return
    sessions = override.get("sessions", base.sessions)
    if not isinstance(sessions, int) or isinstance(sessions, bool) or len(base.gap_h) == sessions - 1:
        return
    source = "the default scenario" if scenario is None else (
        f"the scenario {str(scenario)!r}" if isinstance(scenario, (str, Path)) else "the scenario given")
    raise ConfigError(
        f"schedule={override!r}: {source} lists gap_h {base.gap_h} ({len(base.gap_h)} gaps, for "
        f"{base.sessions} sessions), which does not fit {sessions} sessions; give gap_h with the sessions "
        f"(one number for every gap, e.g. {{'sessions': {sessions}, 'gap_h': 24.0}}, or a list of "
        f"{sessions - 1} gaps), or keep sessions at {len(base.gap_h) + 1}")


def make_world(
    scenario: str | Path | dict | ScenarioSettings | None = None,
    costs: str | Path | dict | CostSettings | None = None,
    memory: str | Path | dict | MemorySettings | None = None,
    schedule: dict | ScheduleSettings | None = None,
    observe_recall: bool = False,
    target_encoding: str = "onehot",
    aids: str | Path | dict | AidSettings | None = None,
) -> World:
    """Resolve names, paths and dicts into a validated :class:`World` (``aids``: interface aids,
    :mod:`shortcut_gym.envs.aids`; None = none)."""
    sc = load_settings(ScenarioSettings, DEFAULT_SCENARIO if scenario is None else scenario)
    co = load_settings(CostSettings, DEFAULT_COSTS if costs is None else costs)
    me = load_settings(MemorySettings, memory)
    ai = load_settings(AidSettings, aids)
    if schedule is None:
        sch = sc.schedule
    elif isinstance(schedule, ScheduleSettings):
        sch = schedule
    else:
        merged = {**sc.schedule.model_dump(), **schedule} if isinstance(schedule, dict) else schedule
        _check_inherited_gaps(sc.schedule, schedule, scenario)
        sch = validate(ScheduleSettings, merged, "schedule")
    if target_encoding not in ("onehot", "index"):
        raise ConfigError(f"target_encoding must be 'onehot' or 'index', got {target_encoding!r}")
    if not isinstance(observe_recall, bool):
        raise ConfigError(f"observe_recall must be true or false, got {observe_recall!r}")
    world = World(
        scenario=sc,
        commands=build_command_set(sc),
        costs=co,
        memory=me,
        schedule=sch,
        observe_recall=observe_recall,
        target_encoding=target_encoding,  # type: ignore[arg-type]
        aids=ai,
    )
    retrieval_fail = me.latency_factor_s * math.exp(-me.threshold)
    if not math.isfinite(retrieval_fail):
        raise ConfigError(f"memory.threshold={me.threshold} makes the retrieval-failure time infinite")
    world.aid_constants()  # unknown command names raise here, naming the aid
    block = world.warmup_block_s() + co.klm.home_s
    if ai.warmup.on and block >= sch.trial_interval_s:
        raise ConfigError(f"aids.warmup: the warm-up block lasts {block:.2f} s, not shorter than the schedule's "
                          f"trial_interval_s={sch.trial_interval_s} (its traces would predate the previous trial); "
                          "practise fewer commands or lengthen the interval")
    return world
