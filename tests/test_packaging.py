"""Packaging: a regular (wheel) install and the editable install both import every subpackage,
and gymnasium.make finds the environment with no import of ours."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SUBPACKAGES = ["shortcut_gym", "shortcut_gym.envs", "shortcut_gym.agents", "shortcut_gym.lab", "shortcut_gym.configs"]
PROBE = (
    "import importlib, json, sys\n"
    f"mods = {{m: importlib.import_module(m).__file__ for m in {SUBPACKAGES!r}}}\n"
    "import gymnasium\n"
    "env = gymnasium.make('shortcut_gym/CommandSelection-v0')\n"
    "from shortcut_gym.envs.config import bundled_config_dir\n"
    "print(json.dumps({'mods': mods, 'configs': str(bundled_config_dir())}))\n"
)


def _run(code: str, env: dict | None = None, cwd: Path | None = None) -> dict:
    import json

    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         cwd=cwd or Path("/"), timeout=300)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_gymnasium_make_needs_no_import_of_ours() -> None:
    code = ("import json, gymnasium, sys\n"
            "env = gymnasium.make('shortcut_gym/CommandSelection-v0')\n"
            "print(json.dumps({'ok': type(env.unwrapped).__name__}))\n")
    assert _run(code)["ok"] == "CommandSelectionEnv"


def test_editable_install_imports_every_subpackage_from_the_work_tree() -> None:
    info = _run(PROBE)
    for mod, path in info["mods"].items():
        assert Path(path).is_relative_to(ROOT), (mod, path)
    assert (Path(info["configs"]) / "costs" / "average_skilled_mouse.yaml").is_file()


def test_regular_wheel_install_imports_every_subpackage(tmp_path: Path) -> None:
    wheel_dir, target = tmp_path / "wheel", tmp_path / "site"
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q", "-w", str(wheel_dir),
         str(ROOT)], capture_output=True, text=True, timeout=600)
    assert build.returncode == 0, build.stderr
    wheels = list(wheel_dir.glob("shortcut_gym-*.whl"))
    assert len(wheels) == 1
    inst = subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target),
                           str(wheels[0])], capture_output=True, text=True, timeout=600)
    assert inst.returncode == 0, inst.stderr
    assert (target / "shortcut_gym_startup.pth").is_file()
    assert not (target / "envs").exists() and not (target / "agents").exists()  # no plain top-level names
    assert not (target / "shortcut_gym" / "setup.py").exists()  # the build script is not a module of ours
    assert not (target / "shortcut_gym" / "tests").exists()
    # site.addsitedir processes the .pth start-up hook as site-packages would
    code = f"import site; site.addsitedir({str(target)!r})\n" + PROBE
    env = {**os.environ, "PYTHONPATH": str(target)}
    info = _run(code, env=env, cwd=tmp_path)
    for mod, path in info["mods"].items():
        assert Path(path).is_relative_to(target), (mod, path)
    assert (Path(info["configs"]) / "scenarios" / "tidepool_logbook.yaml").is_file()
