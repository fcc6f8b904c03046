"""Bundled YAML settings: cost presets, scenarios, memory, agents, sweeps."""
