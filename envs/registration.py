"""Registration of the environments with gymnasium.

Declared in the ``gymnasium.envs`` entry-point group of ``pyproject.toml``; gymnasium 1.x does not
read that group, so an installed ``.pth`` start-up hook (``shortcut_gym._startup``) registers when
gymnasium loads. Importing ``shortcut_gym.envs`` registers too.
"""

from shortcut_gym._startup import ENV_ID, register_envs

__all__ = ["ENV_ID", "register_envs"]
