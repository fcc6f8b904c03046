"""The agent zoo: agent protocol, cognitive models, planners, RL adapters."""
