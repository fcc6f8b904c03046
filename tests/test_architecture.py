"""The layout's rules, checked on the source: imports run one way (envs <- agents <- lab), no
subpackage imports the one above it, not even lazily inside a function, and modules stay small."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LAYERS = {"envs": 0, "agents": 1, "lab": 2}
#: DEVELOPERS.md asks for small modules (under about 500 lines); this ceiling leaves a little slack.
MAX_LINES = 560


def imported_modules(path: Path) -> set[str]:
    """Every ``shortcut_gym...`` module a file imports, at top level or inside functions."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
            found |= {f"{node.module}.{a.name}" for a in node.names}
    return {m for m in found if m.startswith("shortcut_gym")}


def package_files(layer: str) -> list[Path]:
    return sorted((ROOT / layer).rglob("*.py"))


@pytest.mark.parametrize("layer", list(LAYERS))
def test_imports_point_down_the_layers(layer: str) -> None:
    wrong = []
    for path in package_files(layer):
        for mod in imported_modules(path):
            parts = mod.split(".")
            if len(parts) > 1 and parts[1] in LAYERS and LAYERS[parts[1]] > LAYERS[layer]:
                wrong.append(f"{path.relative_to(ROOT)} imports {mod}")
    assert not wrong, "\n".join(wrong)


def test_the_checker_sees_a_lazy_upward_import(tmp_path: Path) -> None:
    bad = tmp_path / "m.py"
    bad.write_text("def f():\n    from shortcut_gym.lab.sweep import spec\n    return spec\n")
    assert "shortcut_gym.lab.sweep" in imported_modules(bad)


@pytest.mark.parametrize("layer", [*LAYERS, "shortcut_gym"])
def test_modules_stay_small(layer: str) -> None:
    big = {str(p.relative_to(ROOT)): n for p in package_files(layer)
           if (n := len(p.read_text().splitlines())) > MAX_LINES}
    assert not big, f"modules over {MAX_LINES} lines: {big}"


def test_no_module_of_the_package_prints() -> None:
    """Library code reports through return values and logging; only the CLI writes to the terminal."""
    offenders = []
    for layer in LAYERS:
        for path in package_files(layer):
            if path.is_relative_to(ROOT / "lab" / "cli"):
                continue
            for node in ast.walk(ast.parse(path.read_text())):
                if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "print":
                    offenders.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert not offenders, offenders


def test_cli_status_goes_to_stderr_and_q_silences_it(tmp_path: Path, capsys) -> None:
    from shortcut_gym.lab.cli import main

    spec = tmp_path / "s.yaml"
    spec.write_text("name: tiny\nbase:\n  schedule: {sessions: 1, trials_per_session: 5}\n"
                    "vary: {design: grid, parameters: {costs.klm.keystroke_s: {values: [0.2]}}}\n"
                    "agents: [{name: always_menu}]\nseeds: {first: 0, count: 1}\n")
    out = tmp_path / "o"
    assert main(["sweep", str(spec), "--out", str(out), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["sweep", str(spec), "--out", str(out), "--quiet"]) == 0  # a resume: status on stderr
    first = capsys.readouterr()
    assert "resuming" in first.err and "resuming" not in first.out
    assert main(["-q", "sweep", str(spec), "--out", str(out), "--quiet"]) == 0
    assert "resuming" not in capsys.readouterr().err


def test_version_option(capsys) -> None:
    from shortcut_gym import __version__
    from shortcut_gym.lab.cli import main

    with pytest.raises(SystemExit) as done:
        main(["--version"])
    assert done.value.code == 0 and capsys.readouterr().out.strip() == f"shortcut-gym {__version__}"
