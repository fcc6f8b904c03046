"""Agent registry: build any agent from its name and parameters, or from a YAML/dict spec."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.baselines import AlwaysHotkey, AlwaysMenu, LearnFirstK, RandomAgent
from shortcut_gym.agents.learning import ChoiceKernelAgent, RescorlaWagnerAgent, RWChoiceKernelAgent
from shortcut_gym.agents.planner import BoundedOptimalPlanner
from shortcut_gym.agents.sb3 import A2CAgent, DQNAgent, PPOAgent
from shortcut_gym.agents.static_softmax import StaticSoftmax
from shortcut_gym.agents.tabular import QLearningAgent, SarsaAgent

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
    """Build a registered agent; unknown names and parameters raise ValueError naming them."""
    if name not in AGENTS:
        raise ValueError(f"unknown agent {name!r}; registered: {sorted(AGENTS)}")
    return AGENTS[name](context, **params)


def agent_from_spec(spec: dict[str, Any] | str | Path, context: AgentContext | None = None) -> Agent:
    """Build an agent from ``{'name': ..., 'params': {...}, ...}`` or a YAML file holding one."""
    source = "agent spec"
    if isinstance(spec, (str, Path)):
        source = str(spec)
        path = Path(spec)
        if not path.is_file():
            raise ValueError(f"{source}: no such agent spec file")
        spec = yaml.safe_load(path.read_text())
    if not isinstance(spec, dict) or "name" not in spec:
        raise ValueError(f"{source}: an agent spec needs a 'name' key, got {spec!r}")
    extra = {k: v for k, v in spec.items() if k not in ("name", "params")}
    params = dict(spec.get("params") or {})
    if not isinstance(params, dict):
        raise ValueError(f"{source}: 'params' must be a mapping, got {params!r}")
    try:
        return make_agent(spec["name"], context, **extra, **params)
    except (TypeError, ValueError) as err:
        raise ValueError(f"{source}: {err}") from None
