"""The root package shows its public API only: ``dir(shortcut_gym)`` lists what ``__all__`` names
and the subpackages, and no helper it imported for itself (``logging``, ``version``, ...)."""

from __future__ import annotations

import json
import subprocess
import sys
import types

import shortcut_gym


def _public(names: list[str]) -> set[str]:
    return {n for n in names if not n.startswith("_")}


def test_every_exported_name_exists() -> None:
    for name in shortcut_gym.__all__:
        assert hasattr(shortcut_gym, name), name


def test_dir_holds_the_api_and_subpackages_only() -> None:
    """In this process other tests may have imported any subpackage: a module is public when it is
    one of ours; every other public name must be exported."""
    exported = _public(shortcut_gym.__all__)
    for name in _public(dir(shortcut_gym)) - exported:
        value = getattr(shortcut_gym, name)
        assert isinstance(value, types.ModuleType) and value.__name__ == f"shortcut_gym.{name}", (
            f"shortcut_gym.{name} ({value!r}) is neither in __all__ nor a subpackage")


def test_fresh_import_shows_nothing_else() -> None:
    """A fresh interpreter: after ``import shortcut_gym`` the public names are __all__'s and the
    subpackages the import itself loaded (envs, for the registration)."""
    code = ("import json, types, shortcut_gym as s; "
            "print(json.dumps({'dir': dir(s), 'all': s.__all__, "
            "'modules': [n for n in dir(s) if isinstance(getattr(s, n), types.ModuleType)]}))")
    out = json.loads(subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                                    text=True).stdout)
    extra = _public(out["dir"]) - _public(out["all"])
    assert extra <= {"envs", "agents", "lab", "configs"}, sorted(extra)
    assert extra <= set(out["modules"]), sorted(extra)
    for leaked in ("logging", "version", "PackageNotFoundError", "annotations"):
        assert leaked not in out["dir"]
