"""Registration of the environments with gymnasium (Gymnasium 1.x convention: on import).

``import shortcut_gym`` (or any of its subpackages) registers ``shortcut_gym/CommandSelection-v0``;
``gymnasium.make("shortcut_gym:shortcut_gym/CommandSelection-v0")`` imports the package first.
"""

from __future__ import annotations

ENV_ID = "shortcut_gym/CommandSelection-v0"


def register_envs() -> None:
    """Register ``shortcut_gym/CommandSelection-v0`` with gymnasium (idempotent)."""
    from gymnasium.envs.registration import register, registry

    if ENV_ID in registry:
        return
    register(
        id=ENV_ID,
        entry_point="shortcut_gym.envs.env:CommandSelectionEnv",
        vector_entry_point="shortcut_gym.envs.vector:CommandSelectionVectorEnv",
    )
