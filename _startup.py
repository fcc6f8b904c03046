"""Registers ``shortcut_gym/CommandSelection-v0`` with gymnasium as soon as gymnasium loads.

Gymnasium 1.x no longer reads the ``gymnasium.envs`` entry-point group, so a ``.pth`` file
installed with the package imports this module at interpreter start. It only installs a meta-path
hook (no gymnasium or numpy import at start-up): when ``gymnasium.envs`` finishes loading, the
hook calls :func:`register_envs`.
"""

from __future__ import annotations

import importlib.abc
import importlib.machinery
import sys
from types import ModuleType

_WATCHED = "gymnasium.envs"
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


class _RegisterAfterLoad(importlib.abc.Loader):
    def __init__(self, inner: importlib.abc.Loader) -> None:
        self._inner = inner

    def create_module(self, spec: importlib.machinery.ModuleSpec) -> ModuleType | None:
        return self._inner.create_module(spec)

    def exec_module(self, module: ModuleType) -> None:
        self._inner.exec_module(module)
        register_envs()


class _GymnasiumWatcher(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path, target=None):  # type: ignore[no-untyped-def]
        if name != _WATCHED:
            return None
        for finder in sys.meta_path:
            if finder is self or not hasattr(finder, "find_spec"):
                continue
            spec = finder.find_spec(name, path, target)
            if spec is not None and spec.loader is not None:
                spec.loader = _RegisterAfterLoad(spec.loader)
                return spec
        return None


def install() -> None:
    """Install the hook once (idempotent); register at once if gymnasium is already loaded."""
    if _WATCHED in sys.modules:
        register_envs()
        return
    if not any(isinstance(f, _GymnasiumWatcher) for f in sys.meta_path):
        sys.meta_path.insert(0, _GymnasiumWatcher())
