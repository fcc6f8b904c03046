"""shortcut-gym: command-selection environments, an agent zoo and lab tools.

Import namespace root. The subpackages live in the project's top-level folders
``envs/`` (``shortcut_gym.envs``), ``agents/`` (``shortcut_gym.agents``) and
``lab/`` (``shortcut_gym.lab``).
"""

__version__ = "0.1.0"

# The public subpackages (the project's top-level folder also holds setup.py, tests and scripts,
# which are not part of the package).
__all__ = ["__version__", "agents", "configs", "envs", "lab"]
