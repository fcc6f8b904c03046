"""Packaging: a regular (wheel) install and the editable install both import every subpackage,
every package folder is listed in pyproject.toml, and registration follows Gymnasium 1.x
(``import shortcut_gym`` registers; the ``shortcut_gym:`` module prefix needs no prior import)."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SUBPACKAGES = ["shortcut_gym", "shortcut_gym.envs", "shortcut_gym.agents", "shortcut_gym.lab", "shortcut_gym.configs"]
PROBE = (
    "import importlib, json, sys\n"
    f"mods = {{m: importlib.import_module(m).__file__ for m in {SUBPACKAGES!r}}}\n"
    "import gymnasium\n"
    "env = gymnasium.make('shortcut_gym:shortcut_gym/CommandSelection-v0')\n"
    "from shortcut_gym.envs.config import bundled_config_dir\n"
    "print(json.dumps({'mods': mods, 'configs': str(bundled_config_dir())}))\n"
)


def _run(code: str, env: dict | None = None, cwd: Path | None = None) -> dict:
    import json

    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         cwd=cwd or Path("/"), timeout=300)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_module_prefixed_id_needs_no_import_of_ours() -> None:
    code = ("import json, sys, gymnasium\n"
            "before = 'shortcut_gym' in sys.modules\n"
            "env = gymnasium.make('shortcut_gym:shortcut_gym/CommandSelection-v0')\n"
            "print(json.dumps({'ok': type(env.unwrapped).__name__, 'before': before}))\n")
    info = _run(code)
    assert info == {"ok": "CommandSelectionEnv", "before": False}


def test_import_registers_the_plain_id_and_nothing_runs_at_interpreter_start() -> None:
    code = ("import json, sys, gymnasium\n"
            "from gymnasium.envs.registration import registry\n"
            "start = 'shortcut_gym/CommandSelection-v0' in registry or 'shortcut_gym' in sys.modules\n"
            "import shortcut_gym\n"
            "print(json.dumps({'start': start, 'after': 'shortcut_gym/CommandSelection-v0' in registry}))\n")
    assert _run(code) == {"start": False, "after": True}


def test_every_package_folder_is_listed_in_pyproject() -> None:
    tool = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    roots = {name: ROOT / folder for name, folder in tool["package-dir"].items()}
    found = set()
    for name, folder in roots.items():
        for init in folder.rglob("__init__.py"):
            rel = init.parent.relative_to(folder).parts
            found.add(".".join((name, *rel)))
    assert found == set(tool["packages"])


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
    assert not list(target.glob("*.pth"))  # no start-up hook
    assert sorted(p.name for p in target.iterdir() if not p.name.endswith(".dist-info")) == ["bin", "shortcut_gym"]
    assert (target / "shortcut_gym" / "py.typed").is_file()
    assert not (target / "shortcut_gym" / "tests").exists()
    assert not (target / "shortcut_gym" / "lab" / "bench_env.py").exists()  # benchmarks stay in scripts/
    code = PROBE
    env = {**os.environ, "PYTHONPATH": str(target)}
    info = _run(code, env=env, cwd=tmp_path)
    for mod, path in info["mods"].items():
        assert Path(path).is_relative_to(target), (mod, path)
    assert (Path(info["configs"]) / "scenarios" / "tidepool_logbook.yaml").is_file()


def test_the_base_install_works_without_the_rl_extra_and_names_it_when_needed(tmp_path: Path) -> None:
    """torch and Stable-Baselines3 are the 'rl' extra: everything else imports and runs without them,
    and an SB3 agent or VecEnv asked for without them names the extra to install."""
    code = textwrap.dedent('''
        import sys
        class NotInstalled:  # as if torch and SB3 were not installed: importing them raises ImportError
            def find_spec(self, name, path=None, target=None):
                if name.split(".")[0] in ("torch", "stable_baselines3"):
                    raise ImportError(f"No module named {name!r}")
        sys.meta_path.insert(0, NotInstalled())
        from shortcut_gym.agents import make_agent, run_episode
        from shortcut_gym.envs import CommandSelectionEnv, make_world
        from shortcut_gym.envs.errors import MissingExtraError
        from shortcut_gym.envs.vector import make_sb3_vec_env
        from shortcut_gym.lab.cli import main
        world = make_world(schedule={"sessions": 1, "trials_per_session": 5})
        assert len(run_episode(CommandSelectionEnv(world=world), make_agent("q_learning"), seed=0)) == 5
        calls = (lambda: make_agent("ppo").train(world, 10, progress_bar=False), lambda: make_sb3_vec_env(2, world))
        for call in calls:
            try:
                call()
            except MissingExtraError as err:
                assert "pip install 'shortcut-gym[rl]'" in str(err), err
            else:
                raise AssertionError("no MissingExtraError")
        assert main(["train", "--agent", "ppo", "--out", sys.argv[1] + "/m.zip"]) == 2
        assert "torch" not in sys.modules and "stable_baselines3" not in sys.modules
        print("ok")
    ''')
    res = subprocess.run([sys.executable, "-c", code, str(tmp_path)], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0 and res.stdout.strip().endswith("ok"), res.stderr[-3000:]
    assert "shortcut-gym[rl]" in res.stderr  # the CLI's one line names the extra
