"""Documentation cannot rot: the tutorial runs, quoted commands and code run, --help works, API builds."""

from __future__ import annotations

import importlib.util
import os
import re
import shlex
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
DOCS = [ROOT / "README.md", ROOT / "DEVELOPERS.md", ROOT / "docs" / "tutorial.md"]
#: `make test` is the command running this suite (it cannot run itself); `make demo` is run
#: by test_make_demo_runs below with its output sent to a temporary folder.
NOT_RUN_HERE = {"make test", "make demo"}


def _load(name: str):
    path = ROOT / "examples" / f"{name}.py"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _blocks(lang: str) -> list[tuple[Path, str]]:
    out = []
    for doc in DOCS:
        out += [(doc, b) for b in re.findall(rf"```{lang}\n(.*?)```", doc.read_text(), re.S)]
    return out


def _command_blocks() -> list[tuple[str, tuple[str, ...]]]:
    """(document, the commands of one quoted bash block in order); a block is run as a sequence,
    since a later line may read what an earlier one wrote."""
    out = []
    for doc, block in _blocks("bash"):
        lines = tuple(line.split("#", 1)[0].strip() for line in block.splitlines())
        lines = tuple(line for line in lines if line and line not in NOT_RUN_HERE)
        if lines:
            out.append((doc.name, lines))
    return out


# ---- the tutorial, step by step -----------------------------------------------------------
def test_tutorial_1_totals_equal_the_registered_baselines() -> None:
    from shortcut_gym.agents import make_agent, run_episode
    from shortcut_gym.envs import CommandSelectionEnv

    totals = _load("tutorial_01_environment").main()
    env = CommandSelectionEnv(schedule={"sessions": 3, "trials_per_session": 40})
    menu = run_episode(env, make_agent("always_menu"), seed=7)["duration_s"].sum()
    learn = run_episode(env, make_agent("learn_first_k", k=1), seed=7)["duration_s"].sum()
    assert totals["always menu"] == pytest.approx(menu)
    assert totals["learn once, then hotkey"] == pytest.approx(learn)


def test_tutorial_2_scores_against_the_planner() -> None:
    scores = _load("tutorial_02_agents").main(users=2).set_index("agent")
    assert scores.loc["bounded_optimal", "time_lost_s"] == 0.0
    assert scores.loc["always_menu", "time_lost_s"] > 0.0
    assert scores.loc["always_menu", "hotkey_share"] == 0.0


def test_tutorial_3_trains_saves_reloads_ppo() -> None:
    out = _load("tutorial_03_train_ppo").main(total_timesteps=2_000)
    assert np.isfinite(out["ppo_s"]) and out["ppo_s"] > 0
    assert out["menu_s"] == pytest.approx(270.3, abs=0.05)  # always-menu total on seeds 100..109 (deterministic)


def test_tutorial_4_each_model_wins_its_own_participants() -> None:
    out = _load("tutorial_04_fit_and_compare").main()  # the defaults the tutorial text describes
    fits = out["fits"].pivot(index="participant", columns="model", values="bic")
    rw_better = fits["rescorla_wagner"] < fits["static_softmax"]
    assert rw_better[[p for p in fits.index if p.startswith("p1")]].all()
    assert not rw_better[[p for p in fits.index if p.startswith("p0")]].any()
    assert out["bms"]["expected_frequency"].sum() == pytest.approx(1.0)


def test_tutorial_5_sweep_writes_map_and_resumes(tmp_path: Path, capsys) -> None:
    summary = _load("tutorial_05_sweep").main(tmp_path / "sweep")
    assert len(summary) == 3 * 2 * 3  # grid points x agents
    assert (tmp_path / "sweep" / "plots" / "break_even.png").stat().st_size > 1000
    assert "second call kept 18 of 18 runs and computed 0" in capsys.readouterr().out
    menu = summary[summary["agent"] == "always_menu"]
    assert (menu["time_saved_vs_menu_s"] == 0).all()


# ---- the CLI and every command quoted in the Markdown --------------------------------------
def test_every_cli_subcommand_has_help() -> None:
    from shortcut_gym.lab.cli import build_parser

    parser = build_parser()
    subs = next(a for a in parser._actions if a.dest == "command").choices
    assert {"simulate", "fit", "compare", "recover", "report", "sweep"} <= set(subs)
    exe = ROOT / ".venv" / "bin" / "shortcut-gym"
    for name in subs:
        res = subprocess.run([str(exe), name, "--help"], capture_output=True, text=True, timeout=120)
        assert res.returncode == 0 and f"usage: shortcut-gym {name}" in res.stdout, res.stderr


def _first_column(section: str, header: str) -> set[str]:
    """The backquoted names in the first column of the README table under ``section`` headed ``header``."""
    text = (ROOT / "README.md").read_text().split(f"### {section}\n", 1)[1].split("\n### ", 1)[0]
    rows = text.split(header, 1)[1].split("\n\n", 1)[0].splitlines()[2:]
    return {name for row in rows for name in re.findall(r"`([^`]+)`", row.split("|")[1])}


def test_the_readme_tables_list_every_subcommand_and_every_registered_agent() -> None:
    from shortcut_gym.agents.registry import AGENTS
    from shortcut_gym.lab.cli import build_parser

    subs = next(a for a in build_parser()._actions if a.dest == "command").choices
    assert _first_column("Command line", "| subcommand | job |") == set(subs)
    assert _first_column("Agents and mechanisms", "| name | what it is | free parameters |") == set(AGENTS)


def test_the_score_limitation_is_documented_where_score_is_and_holds(capsys) -> None:
    """README and ``score --help`` say pavlik_anderson memory is refused; score does refuse it (exit 2)."""
    from shortcut_gym.lab.cli import build_parser, main

    row = next(line for line in (ROOT / "README.md").read_text().splitlines() if line.startswith("| `score` |"))
    subs = next(a for a in build_parser()._actions if a.dest == "command").choices
    for text in (row, " ".join(subs["score"].format_help().split())):
        assert "pavlik_anderson" in text and "two numbers" in text, text
    memory = ROOT / "configs" / "memory" / "spacing.yaml"
    assert "kind: pavlik_anderson" in memory.read_text()
    assert main(["score", "--memory", str(memory), "--sessions", "1", "--users", "1"]) == 2
    assert "'pavlik_anderson'" in capsys.readouterr().err


@pytest.mark.parametrize(("doc", "commands"), _command_blocks())
def test_quoted_commands_run(doc: str, commands: tuple[str, ...]) -> None:
    """Run as the docs say: from the project folder, each block's lines in order."""
    for command in commands:
        res = subprocess.run(shlex.split(command), capture_output=True, text=True, cwd=ROOT, timeout=600,
                             env={**os.environ, "MPLBACKEND": "Agg"})
        assert res.returncode == 0, f"{doc}: {command}\n{res.stdout[-2000:]}\n{res.stderr[-2000:]}"


def test_the_quick_start_commands_are_exactly_make_demo_and_make_test() -> None:
    readme = (ROOT / "README.md").read_text()
    quick = readme.split("## Quick start", 1)[1].split("## ", 1)[0]
    block = re.findall(r"```bash\n(.*?)```", quick, re.S)[0]
    assert [ln.split("#")[0].strip() for ln in block.splitlines()] == ["make demo", "make test"]


@pytest.mark.parametrize(("doc", "code"), _blocks("python"), ids=lambda v: getattr(v, "name", "code"))
def test_quoted_python_runs(doc: Path, code: str, tmp_path: Path) -> None:
    script = tmp_path / "snippet.py"
    script.write_text(code)
    res = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, cwd=tmp_path, timeout=600)
    assert res.returncode == 0, f"{doc.name}:\n{code}\n{res.stderr[-2000:]}"


def test_make_demo_runs(tmp_path: Path) -> None:
    res = subprocess.run(["make", "-C", str(ROOT), "demo", f"OUT={tmp_path / 'demo'}"], capture_output=True,
                         text=True, timeout=1200, env={**os.environ, "MPLBACKEND": "Agg"})
    assert res.returncode == 0, res.stdout[-3000:] + res.stderr[-3000:]
    assert f"demo outputs in {tmp_path / 'demo'}" in res.stdout


# ---- the API reference ---------------------------------------------------------------------
def test_api_reference_builds_without_warnings(tmp_path: Path) -> None:
    res = subprocess.run([sys.executable, str(ROOT / "scripts" / "build_api_docs.py"), str(tmp_path / "api")],
                         capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    assert "pdoc warning" not in res.stderr
    pages = {p.relative_to(tmp_path / "api").as_posix() for p in (tmp_path / "api").rglob("*.html")}
    assert {"shortcut_gym/envs/env.html", "shortcut_gym/agents/learning.html", "shortcut_gym/lab/fitting.html",
            "shortcut_gym/lab/sweep/store.html"} <= pages
