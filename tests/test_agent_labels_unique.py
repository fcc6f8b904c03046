"""Two agents under one label would be merged into one in every table keyed by label (the session
summary added their times, the log made one participant of both): refused, naming both sources."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.rollout import labelled_trial_table
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.cli import main

TINY = {"sessions": 1, "trials_per_session": 6}


@pytest.fixture()
def schedule(tmp_path: Path) -> Path:
    path = tmp_path / "tiny.yaml"
    path.write_text(yaml.safe_dump(TINY))
    return path


def _file(tmp_path: Path, name: str, spec: dict) -> Path:
    path = tmp_path / name
    path.write_text(yaml.safe_dump(spec))
    return path


@pytest.mark.parametrize("command", ["simulate", "score"])
def test_two_agents_with_one_label_are_refused_naming_both(command, tmp_path, schedule, capsys) -> None:
    out = ["--out", str(tmp_path / "o")] if command == "simulate" else []
    same_file = _file(tmp_path, "k2.yaml", {"name": "learn_first_k", "params": {"k": 2}})
    labelled = _file(tmp_path, "lab.yaml", {"name": "always_menu", "label": "fast"})
    cases = [
        (["--agent", "learn_first_k:k=2", "--agent-file", str(same_file)], "learn_first_k(k=2)"),
        (["--agent", "always_menu", "--agent", "always_menu"], "always_menu"),
        (["--agent", "fast=always_hotkey", "--agent-file", str(labelled)], "fast"),
    ]
    for agents, label in cases:
        capsys.readouterr()
        assert main([command, *agents, "--users", "1", "--schedule", str(schedule), *out]) == 2, agents
        err = capsys.readouterr().err
        assert f"both give the agent label {label!r}" in err, err
        first, second = agents[1], agents[3]
        assert first in err and second in err, err
    # distinct labels run
    assert main([command, "--agent", "learn_first_k:k=2", "--agent", "k2=learn_first_k:k=2", "--users", "1",
                 "--schedule", str(schedule), *out]) == 0


def test_the_library_refuses_repeated_labels() -> None:
    env = CommandSelectionEnv(world=make_world(schedule=TINY))
    with pytest.raises(ConfigError, match=r"agent labels repeat: \['a'\]"):
        labelled_trial_table(env, [("a", make_agent("always_menu")), ("a", make_agent("always_hotkey"))], [1])
    table = labelled_trial_table(env, [("a", make_agent("always_menu")), ("b", make_agent("always_hotkey"))], [1])
    assert sorted(table["agent"].unique()) == ["a", "b"]


def test_the_session_summary_keeps_the_agents_in_the_order_given() -> None:
    from shortcut_gym.lab.simulate import session_summary, simulate_agents

    world = make_world(schedule={"sessions": 2, "trials_per_session": 4})
    trials = simulate_agents(world, [{"name": "learn_first_k", "label": "zeta"}, {"name": "always_menu",
                                                                               "label": "alpha"}], [1, 2])
    summary = session_summary(trials)
    assert list(summary["agent"]) == ["zeta", "zeta", "alpha", "alpha"]
    assert list(summary["session"]) == [1, 2, 1, 2]
    # the figures are the per-user means, whatever the order
    zeta = trials[(trials["agent"] == "zeta") & (trials["session"] == 0)]
    assert summary.loc[0, "total_time_s"] == pytest.approx(zeta.groupby("user")["duration_s"].sum().mean())
