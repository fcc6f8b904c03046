"""The agent zoo: one agent protocol, fixed baselines, learning models, planners, RL adapters."""

from shortcut_gym.agents.base import Agent, AgentContext, ParamSpec, Transition
from shortcut_gym.agents.registry import AGENTS, agent_from_spec, make_agent, register_agent
from shortcut_gym.agents.rollout import context_of, run_episode

__all__ = [
    "AGENTS",
    "Agent",
    "AgentContext",
    "ParamSpec",
    "Transition",
    "agent_from_spec",
    "context_of",
    "make_agent",
    "register_agent",
    "run_episode",
]
