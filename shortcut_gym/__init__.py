"""shortcut-gym: command-selection environments, an agent zoo and lab tools.

Import namespace root. The subpackages live in the project's top-level folders ``envs/``
(``shortcut_gym.envs``), ``agents/`` (``shortcut_gym.agents``) and ``lab/`` (``shortcut_gym.lab``);
this folder holds only the root module. Importing it registers ``shortcut_gym/CommandSelection-v0``
with gymnasium (Gymnasium 1.x convention), so ``gymnasium.make("shortcut_gym:shortcut_gym/CommandSelection-v0")``
works with no prior import.
"""

import logging
from importlib.metadata import PackageNotFoundError, version

from shortcut_gym.envs.registration import ENV_ID, register_envs

try:
    __version__ = version("shortcut-gym")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0+unknown"

logging.getLogger("shortcut_gym").addHandler(logging.NullHandler())

register_envs()

# the helpers imported above are this module's own, not part of the package's namespace
del logging, version, PackageNotFoundError

__all__ = ["ENV_ID", "__version__", "register_envs"]
