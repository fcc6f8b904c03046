"""``CommandSelection-v0``: one simulated user's history of command selections.

Each step is one trial: the user must issue the target command by menu (0), hotkey (1) or by
menu while learning the hotkey (2). Reward is minus the trial's time in seconds. The episode
*terminates* at the schedule's end: the horizon is part of the task and observed (the
``horizon_left_fraction`` feature), so it is a true end in Gymnasium's sense and nothing is bootstrapped past
it. ``truncated`` is never set by the env; wrappers such as ``TimeLimit`` set it when they cut an
episode short.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np
from gymnasium import spaces

from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.aids import AidSettings
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.errors import ActionError, ConfigError, UsageError
from shortcut_gym.envs.info import StepInfo, UpcomingInfo, simulator_step_info, simulator_upcoming_info
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.seeds import check_seed
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import ScenarioSettings, Schedule, ScheduleSettings, check_replay_length
from shortcut_gym.envs.world import World, make_world


def action_index(action: Any) -> int:
    """The action as an int in {0, 1, 2}: a Python or numpy integer (or a 0-d integer array).

    Floats, booleans, strings and other number types are refused with :class:`ActionError`,
    even when they equal an action (``1.0``, ``True``, ``Decimal('1')``).
    """
    if type(action) is int and 0 <= action <= 2:  # the common case, checked first
        return action
    value = action
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)):
        raise ActionError(f"action must be 0 (menu), 1 (hotkey) or 2 (learn), got {action!r} "
                          f"of type {type(action).__name__} (actions are integers)")
    if not 0 <= int(value) <= 2:
        raise ActionError(f"action must be 0 (menu), 1 (hotkey) or 2 (learn), got {action!r}")
    return int(value)

class CommandSelectionEnv(gym.Env):
    """Gymnasium environment of command selection by menu, hotkey or learning the hotkey.

    Keyword arguments: ``scenario``, ``costs``, ``memory`` (preset name, YAML path, dict or
    settings object), ``schedule`` (dict of schedule fields overriding the scenario's),
    ``observe_recall`` (expose the true recall probability), ``target_encoding``
    ('onehot' | 'index'), ``render_mode`` ('ansi': a line of text; 'rgb_array': a picture of the
    trial, see :mod:`shortcut_gym.envs.render`), ``aids`` (interface aids, :mod:`shortcut_gym.envs.aids`).
    ``reset(options={'schedule': Schedule})``
    replays a given schedule of targets.
    """

    metadata = {"render_modes": ["ansi", "rgb_array"], "render_fps": 4}

    def __init__(
        self,
        scenario: str | Path | dict | ScenarioSettings | None = None,
        costs: str | Path | dict | CostSettings | None = None,
        memory: str | Path | dict | MemorySettings | None = None,
        schedule: dict | ScheduleSettings | None = None,
        observe_recall: bool = False,
        target_encoding: str = "onehot",
        render_mode: str | None = None,
        world: World | None = None,
        aids: str | Path | dict | AidSettings | None = None,
    ) -> None:
        if render_mode is not None and render_mode not in self.metadata["render_modes"]:
            raise ConfigError(f"render_mode must be one of {self.metadata['render_modes']}, got {render_mode!r}")
        self.world = world or make_world(scenario, costs, memory, schedule, observe_recall, target_encoding, aids)
        self.render_mode = render_mode
        self.action_space = spaces.Discrete(3)
        self.observation_space = self.world.observation_layout().space()
        self._sim = BatchSimulator(self.world)
        self._act = np.zeros(1, dtype=np.int64)
        self._last: StepInfo | None = None
        self._painter: Any = None
        self._step_arrays: tuple[np.ndarray, ...] = ()

    # ---- gymnasium API --------------------------------------------------------------------
    def reset(self, *, seed: int | None = None, options: dict | None = None) -> tuple[np.ndarray, dict]:
        """Start a new simulated user; ``options={'schedule': Schedule}`` replays targets."""
        super().reset(seed=None if seed is None else check_seed(seed, "reset"))
        schedule = None
        if options:
            unknown = set(options) - {"schedule"}
            if unknown:
                raise ConfigError(f"unknown reset option(s) {sorted(unknown)}; known: ['schedule']")
            schedule = options.get("schedule")
            if schedule is not None and not isinstance(schedule, Schedule):
                raise ConfigError(f"options['schedule'] must be a Schedule, got {type(schedule).__name__}")
            if schedule is not None:
                check_replay_length(schedule.horizon, self.world.horizon, "reset(options['schedule'])")
        sim = self._sim
        obs = sim.reset(rngs=[self.np_random], schedules=[schedule])
        self._step_arrays = sim.step_arrays()  # read once per reset, not per step
        self._last = None
        return obs[0].copy(), self._upcoming_info()  # type: ignore[return-value]

    def step(self, action: Any) -> tuple[np.ndarray, float, bool, bool, dict]:
        """One trial with ``action`` in {0: menu, 1: hotkey, 2: learn}."""
        sim = self._sim
        if sim.n_users == 0:
            raise UsageError("call reset() before step()")
        a = action_index(action)
        t = sim.user_state.item(0, k.U_TRIAL)  # .item: a Python int without a numpy scalar
        if t >= sim.horizon:
            raise UsageError(f"the episode reached its horizon of {sim.horizon} trials; call reset()")
        self._act[0] = a
        k.step_users(self._act, *self._step_arrays)
        info = simulator_step_info(sim, 0, t, a, self.world.commands.names)
        self._last = info
        terminated = t + 1 >= sim.horizon
        return sim.obs[0].copy(), sim.reward.item(0), terminated, False, info  # type: ignore[return-value]

    def render(self) -> str | np.ndarray | None:
        """ansi: a one-line summary of the last trial; rgb_array: a picture of it (H x W x 3 uint8)."""
        if self.render_mode is not None and self._sim.n_users == 0:
            raise UsageError("call reset() before render()")
        if self.render_mode == "rgb_array":
            from shortcut_gym.envs import render

            if self._painter is None:
                self._painter = render.BoardPainter(self.world.commands)
            return self._painter.draw(render.scene_of(self._sim, self._last))  # type: ignore[arg-type]
        if self.render_mode != "ansi":
            return None
        if self._last is None:
            return f"trial 0/{self._sim.horizon}: next {self.world.commands.names[self._sim.targets()[0]]}"
        i = self._last
        hk = self.world.commands.hotkeys[i["command"]]
        return (
            f"trial {i['trial'] + 1}/{self._sim.horizon} session {i['session'] + 1}: "
            f"{i['command_name']} [{hk}] {k.ACTION_NAMES[i['action']]} -> {i['outcome']} "
            f"{i['duration_s']:.2f} s (p_recall {i['p_recall']:.2f})"
        )

    # ---- helpers --------------------------------------------------------------------------
    def _upcoming_info(self) -> UpcomingInfo:
        return simulator_upcoming_info(self._sim, 0, self.world.commands.names)

    @property
    def schedule(self) -> Schedule:
        """The current user's schedule."""
        return self._sim.schedules[0]
