"""What to fit: a registered agent, its constructor options and the parameters held fixed."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from shortcut_gym.agents.base import Agent, AgentContext
from shortcut_gym.agents.registry import AGENTS, make_agent
from shortcut_gym.envs.errors import ConfigError


@dataclass(frozen=True)
class ModelSpec:
    """A model to fit: a registered agent name, constructor options, parameters held fixed."""

    name: str
    label: str = ""
    options: Mapping[str, Any] = field(default_factory=dict)
    fixed: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.name not in AGENTS:
            raise ConfigError(f"unknown model {self.name!r}; registered agents: {sorted(AGENTS)}")
        if not self.label:
            object.__setattr__(self, "label", self.name)
        specs = self.build().param_specs()
        unknown = set(self.fixed) - set(specs)
        if unknown:
            raise ConfigError(f"model {self.label!r}: fixed parameter(s) {sorted(unknown)} unknown; "
                              f"known {list(specs)}")

    def build(self, context: AgentContext | None = None, **params: float) -> Agent:
        """The agent with these options, fixed values and ``params``."""
        return make_agent(self.name, context, **dict(self.options), **{**dict(self.fixed), **params})

    def free_parameters(self) -> list[str]:
        """Names of the fitted parameters, in ``param_specs()`` order."""
        return [n for n in self.build().param_specs() if n not in self.fixed]

    def to_dict(self) -> dict[str, Any]:
        """Plain form for tables and YAML."""
        return {"name": self.name, "label": self.label, "options": dict(self.options), "fixed": dict(self.fixed)}
