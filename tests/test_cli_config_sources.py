"""A settings option's faults name where the settings came from: a --schedule file's faults name the
file, as the scenario, costs and memory files' do; a name that is neither a bundled preset nor a file
says both were looked for, in the option's own words (scenario, costs, memory)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.envs.config import bundled_names
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.task import ScenarioSettings
from shortcut_gym.lab.cli import main

#: (schedule file text, the fault the message must give after the file's name)
BAD_SCHEDULES = [
    ("trials_per_sesion: 5\n", "trials_per_sesion: unknown key (got 5)"),
    ("sessions: 0\n", "sessions: Input should be greater than or equal to 1 (got 0)"),
    ("trials_per_session: many\n", "trials_per_session: "),
    ("sessions: 2\ntrial_interval_s: -3\n", "trial_interval_s: "),
]
#: subcommands that read the world options, with what else they need to get as far as the world
COMMANDS = {
    "simulate": ["simulate", "--users", "1"],
    "score": ["score", "--users", "1"],
    "train": ["train", "--agent", "q_learning", "--trials", "10", "--eval-users", "0"],
}


def _one_line(argv: list[str], capsys) -> str:
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    return err


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize(("text", "fault"), BAD_SCHEDULES, ids=[f for _, f in BAD_SCHEDULES])
def test_a_schedule_files_fault_names_the_file(tmp_path: Path, capsys, command: str, text: str, fault: str) -> None:
    path = tmp_path / "sub" / "my_schedule.yaml"
    path.parent.mkdir()
    path.write_text(text)
    argv = [*COMMANDS[command], "--schedule", str(path)]
    if command == "train":
        argv += ["--out", str(tmp_path / "q.npz")]
    err = _one_line(argv, capsys)
    assert f"error: {path}: {fault}" in err, err
    assert not (tmp_path / "q.npz").exists()


def test_a_good_schedule_file_still_sets_the_schedule(tmp_path: Path, capsys) -> None:
    path = tmp_path / "short.yaml"
    path.write_text("sessions: 2\ntrials_per_session: 3\ngap_h: 5\n")
    assert main(["simulate", "--users", "1", "--agent", "always_menu", "--schedule", str(path),
                 "--out", str(tmp_path / "sim")]) == 0
    trials = pd.read_parquet(tmp_path / "sim" / "trials.parquet")
    assert len(trials) == 6 and sorted(trials["session"].unique().tolist()) == [0, 1]


@pytest.mark.parametrize(("option", "kind", "model"), [
    ("--scenario", "scenario", ScenarioSettings), ("--costs", "costs", CostSettings),
    ("--memory", "memory", MemorySettings),
])
def test_a_name_neither_preset_nor_file_says_both_were_looked_up(tmp_path: Path, capsys, option, kind, model) -> None:
    missing = str(tmp_path / "sub" / "mine")  # a path without a suffix, and no such file
    err = _one_line(["simulate", "--users", "1", option, missing], capsys)
    assert f"unknown {kind} preset {missing!r}, and no file {missing!r} either" in err, err
    assert f"bundled presets: {bundled_names(model)}" in err
    assert "Settings" not in err  # the user's words, not the class's


def test_a_file_without_a_suffix_is_read_as_a_file(tmp_path: Path, capsys) -> None:
    costs = tmp_path / "slow_keys"
    costs.write_text("klm: {keystroke_s: 0.9}\nnot_a_key: 1\n")
    err = _one_line(["simulate", "--users", "1", "--costs", str(costs)], capsys)
    assert f"{costs}: not_a_key: unknown key" in err  # it was read, as a file
