"""The world: task, costs, memory, the CommandSelection environment and the batched simulator."""

from shortcut_gym.envs.aids import AID_NAMES, AidSettings
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ActionError, ConfigError
from shortcut_gym.envs.kernel import ACTION_NAMES, HOTKEY, LEARN, MENU, OUTCOME_NAMES
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.registration import ENV_ID, register_envs
from shortcut_gym.envs.simulator import BatchSimulator
from shortcut_gym.envs.task import ScenarioSettings, Schedule, ScheduleSettings
from shortcut_gym.envs.world import World, make_world
from shortcut_gym.envs.wrappers import ScheduleReplay, TrialRecorder

register_envs()

__all__ = [
    "ACTION_NAMES",
    "AID_NAMES",
    "ActionError",
    "AidSettings",
    "BatchSimulator",
    "CommandSelectionEnv",
    "ConfigError",
    "CostSettings",
    "ENV_ID",
    "HOTKEY",
    "LEARN",
    "MENU",
    "MemorySettings",
    "OUTCOME_NAMES",
    "ScenarioSettings",
    "Schedule",
    "ScheduleReplay",
    "ScheduleSettings",
    "TrialRecorder",
    "World",
    "make_world",
    "register_envs",
]
