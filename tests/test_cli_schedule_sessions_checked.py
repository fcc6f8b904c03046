"""A ``--schedule`` file's own ``sessions:`` value is checked even when ``--sessions`` overrides it: a
bad value in the file is refused naming the file, the same fault as without the override; a good one
is replaced by ``--sessions``."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.lab.cli import main

REST = "trials_per_session: 3\ngap_h: 5.0\n"
BAD = {"negative": "-2", "zero": "0", "not whole": "2.5", "text": "ten", "boolean": "true", "a list": "[3]",
       "empty": "null", "a mapping": "{n: 3}"}


def _simulate(tmp_path: Path, schedule: Path, *extra: str) -> list[str]:
    return ["-q", "simulate", "--agent", "always_menu", "--users", "1", "--schedule", str(schedule),
            "--out", str(tmp_path / "out"), "--overwrite", *extra]


def _refusal(argv: list[str], capsys) -> str:
    assert main(argv) == 2, argv
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    return err


@pytest.mark.parametrize("override", ["1", "4"])
@pytest.mark.parametrize("value", list(BAD.values()), ids=list(BAD))
def test_a_bad_file_value_is_refused_despite_sessions(value: str, override: str, tmp_path, capsys) -> None:
    schedule = tmp_path / "sched.yaml"
    schedule.write_text(f"sessions: {value}\n{REST}")
    alone = _refusal(_simulate(tmp_path, schedule), capsys)  # the file's fault without the override
    assert str(schedule) in alone and "sessions" in alone
    err = _refusal(_simulate(tmp_path, schedule, "--sessions", override), capsys)
    assert str(schedule) in err and "sessions" in err, err
    assert err.split(str(schedule), 1)[1] == alone.split(str(schedule), 1)[1]  # the same words for the fault


@pytest.mark.parametrize("file_sessions", [1, 2, 7])
@pytest.mark.parametrize("override", [1, 3])
def test_a_good_file_value_is_overridden(file_sessions: int, override: int, tmp_path, capsys) -> None:
    schedule = tmp_path / "sched.yaml"
    schedule.write_text(f"sessions: {file_sessions}\n{REST}")
    assert main(_simulate(tmp_path, schedule, "--sessions", str(override))) == 0, capsys.readouterr().err
    trials = pd.read_parquet(tmp_path / "out" / "trials.parquet")
    assert trials["session"].nunique() == override and len(trials) == 3 * override
