"""Agent registry: build any agent from its name and parameters, or from a YAML/dict spec."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.baselines import AlwaysHotkey, AlwaysMenu, LearnFirstK, RandomAgent
from shortcut_gym.agents.learning import ChoiceKernelAgent, RescorlaWagnerAgent, RWChoiceKernelAgent
from shortcut_gym.agents.planner import BoundedOptimalPlanner
from shortcut_gym.agents.sb3 import A2CAgent, DQNAgent, PPOAgent
from shortcut_gym.agents.static_softmax import StaticSoftmax
from shortcut_gym.agents.tabular import QLearningAgent, SarsaAgent
from shortcut_gym.envs.config import read_yaml
from shortcut_gym.envs.errors import ConfigError, ShortcutGymError

AGENTS: dict[str, type[Agent]] = {}


def register_agent(cls: type[Agent]) -> type[Agent]:
    """Add an agent class under its ``name`` (usable as a decorator)."""
    if cls.name in AGENTS and AGENTS[cls.name] is not cls:
        raise ValueError(f"agent name {cls.name!r} is already registered by {AGENTS[cls.name].__name__}")
    AGENTS[cls.name] = cls
    return cls


for _cls in (AlwaysMenu, AlwaysHotkey, LearnFirstK, RandomAgent, StaticSoftmax, RescorlaWagnerAgent,
             ChoiceKernelAgent, RWChoiceKernelAgent, BoundedOptimalPlanner, QLearningAgent, SarsaAgent, PPOAgent,
             A2CAgent, DQNAgent):
    register_agent(_cls)


def make_agent(name: str, context: AgentContext | None = None, **params: Any) -> Agent:
    """Build a registered agent; unknown names and bad parameters raise :class:`ConfigError` naming them.

    A constructor's own ValueError (a bad option value) and a TypeError about its arguments are
    the caller's mistake too, and come back as ConfigError naming the agent.
    """
    if not isinstance(name, str) or name not in AGENTS:
        raise ConfigError(f"unknown agent {name!r}; registered: {sorted(AGENTS)}")
    try:
        return AGENTS[name](context, **params)
    except ShortcutGymError:
        raise
    except ValueError as err:
        raise ConfigError(f"{name}: {err}") from err
    except TypeError as err:
        if "argument" not in str(err):
            raise
        raise ConfigError(f"{name}: {err}") from err


def agent_from_spec(spec: dict[str, Any] | str | Path, context: AgentContext | None = None) -> Agent:
    """Build an agent from ``{'name': ..., 'params': {...}, ...}`` or a YAML file holding one."""
    source = "agent spec"
    if isinstance(spec, (str, Path)):
        source = str(spec)
        path = Path(spec)
        if not path.is_file():
            raise ConfigError(f"{source}: no such agent spec file")
        spec = read_yaml(path)
    if not isinstance(spec, dict) or "name" not in spec:
        raise ConfigError(f"{source}: an agent spec needs a 'name' key, got {spec!r}")
    extra = {k: v for k, v in spec.items() if k not in ("name", "params")}
    params = spec.get("params")
    if params is None:
        params = {}
    if not isinstance(params, dict):
        raise ConfigError(f"{source}: 'params' must be a mapping, got {params!r}")
    clash = sorted(set(params) & set(extra))
    if clash:
        raise ConfigError(f"{source}: {clash} given both under 'params' and beside it")
    try:
        return make_agent(spec["name"], context, **extra, **params)
    except ConfigError as err:
        raise ConfigError(f"{source}: {err}") from None
