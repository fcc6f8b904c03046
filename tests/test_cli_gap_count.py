"""A gap_h list whose length does not fit the number of sessions, once the scenario, --schedule and
--sessions are combined, is refused in one line naming the list's file, what set the sessions and the
fixes; the fixes it names then run."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from shortcut_gym.envs.config import bundled_config_dir
from shortcut_gym.lab.cli import main

SCENARIO = bundled_config_dir() / "scenarios" / "tidepool_logbook.yaml"
TRIALS = "trials_per_session: 4\n"


def _scenario_with(folder: Path, schedule: str) -> Path:
    """The demo scenario with its schedule block replaced (indented ``schedule`` lines)."""
    text = SCENARIO.read_text()
    head = text[: text.index("schedule:")]
    path = folder / "scenario.yaml"
    path.write_text(head + "schedule:\n" + "".join(f"  {line}\n" for line in schedule.splitlines()))
    return path


def _write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text)
    return path


def _refusal(argv: list[str], capsys) -> str:
    assert main(argv) == 2, argv
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    return err


@pytest.fixture(scope="module")
def log(tmp_path_factory) -> Path:
    """A small trial log of three sessions of four trials (the schedule the fit cases fix)."""
    root = tmp_path_factory.mktemp("gaplog")
    schedule = _write(root, "ok.yaml", f"sessions: 3\n{TRIALS}gap_h: [2, 30]\n")
    path = root / "log.csv"
    assert main(["-q", "simulate", "--agent", "rescorla_wagner", "--users", "2", "--schedule", str(schedule),
                 "--log", str(path)]) == 0
    return path


def _command(kind: str, log: Path, out: Path) -> list[str]:
    if kind == "simulate":
        return ["-q", "simulate", "--agent", "always_menu", "--users", "1", "--out", str(out), "--overwrite"]
    return ["-q", "fit", str(log), "--model", "static_softmax", "--starts", "1", "--intervals", "none",
            "--out", str(out), "--overwrite", "--quiet"]


#: (case, files to write {name: text}, extra argv, gaps listed, sessions, where the list is, what set sessions)
CASES = [
    ("--sessions above the --schedule list", {"s.yaml": f"{TRIALS}gap_h: [2, 30]\n"},
     ["--schedule", "s.yaml", "--sessions", "5"], 2, 5, "--schedule s.yaml", "--sessions 5"),
    ("--sessions below the --schedule list", {"s.yaml": f"{TRIALS}gap_h: [2, 30, 5, 7]\n"},
     ["--schedule", "s.yaml", "--sessions", "2"], 4, 2, "--schedule s.yaml", "--sessions 2"),
    ("--schedule file's own sessions", {"s.yaml": f"sessions: 6\n{TRIALS}gap_h: [2, 30]\n"},
     ["--schedule", "s.yaml"], 2, 6, "--schedule s.yaml", "sessions: 6 in --schedule s.yaml"),
    ("scenario file's list, --sessions", {"scenario": f"sessions: 3\n{TRIALS}gap_h: [2, 30]"},
     ["--scenario", "scenario.yaml", "--sessions", "4"], 2, 4, "--scenario scenario.yaml", "--sessions 4"),
    ("scenario file's list, --schedule sessions", {"scenario": f"sessions: 3\n{TRIALS}gap_h: [2, 30]",
                                                   "s.yaml": "sessions: 2\n"},
     ["--scenario", "scenario.yaml", "--schedule", "s.yaml"], 2, 2, "--scenario scenario.yaml",
     "sessions: 2 in --schedule s.yaml"),
    ("--schedule list, the preset's sessions", {"s.yaml": f"{TRIALS}gap_h: [2, 30]\n"},
     ["--schedule", "s.yaml"], 2, 10, "--schedule s.yaml", "sessions: 10 in the schedule of the scenario preset"),
]


@pytest.mark.parametrize("kind", ["simulate", "fit"])
@pytest.mark.parametrize(("case", "files", "extra", "listed", "sessions", "list_from", "sessions_from"), CASES,
                         ids=[c[0] for c in CASES])
def test_a_gap_list_that_does_not_fit_is_named_with_its_fixes(
        kind, case, files, extra, listed, sessions, list_from, sessions_from, log, tmp_path, capsys,
        monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    for name, text in files.items():
        _scenario_with(tmp_path, text) if name == "scenario" else _write(tmp_path, name, text)
    err = _refusal(_command(kind, log, tmp_path / "out") + extra, capsys)
    assert f"gap_h in {'the schedule of ' if 'scenario' in list_from else ''}{list_from} lists {listed} gap" in err
    assert f"but {sessions_from}" in err and f"which need {sessions - 1} gap" in err, err
    fix = re.search(r"give --sessions (\d+)", err)
    assert fix is not None and int(fix.group(1)) == listed + 1, err
    list_file = list_from.split()[-1]
    if list_from.startswith("--schedule"):
        assert f"edit gap_h in {list_file} to list {sessions - 1} gap" in err, err
    else:
        assert f"give --schedule with a gap_h of {sessions - 1} gap" in err, err
        assert (f"edit the schedule in {list_file} to sessions: {sessions} with a gap_h of {sessions - 1} gap"
                in err), err

    if kind == "fit" and listed + 1 != 3:
        return  # the log has three sessions: only the fix that yields three can be fitted
    # the first fix: the sessions the list fits (replacing any --sessions given)
    argv = [a for a in extra]
    if "--sessions" in argv:
        del argv[argv.index("--sessions"): argv.index("--sessions") + 2]
    assert main(_command(kind, log, tmp_path / "out") + argv + ["--sessions", fix.group(1)]) == 0
    if kind == "simulate":  # and the world it ran on has that many sessions
        import pandas as pd

        trials = pd.read_parquet(tmp_path / "out" / "trials.parquet")
        assert trials["session"].nunique() == listed + 1


@pytest.mark.parametrize(("case", "files", "extra", "listed", "sessions", "list_from", "sessions_from"), CASES,
                         ids=[c[0] for c in CASES])
def test_the_other_fix_editing_the_list_runs(case, files, extra, listed, sessions, list_from, sessions_from,
                                             tmp_path, monkeypatch, capsys) -> None:
    monkeypatch.chdir(tmp_path)
    gaps = "[" + ", ".join(str(1 + i) for i in range(sessions - 1)) + "]"
    for name, text in files.items():
        if name == list_from.split()[-1]:  # the --schedule file: the list alone
            text = re.sub(r"gap_h: \[[^]]*\]", f"gap_h: {gaps}", text)
        elif name == "scenario":  # the scenario's schedule: sessions and list together
            text = re.sub(r"gap_h: \[[^]]*\]", f"gap_h: {gaps}", re.sub(r"sessions: \d+", f"sessions: {sessions}",
                                                                          text))
        _scenario_with(tmp_path, text) if name == "scenario" else _write(tmp_path, name, text)
    assert main(_command("simulate", Path(), tmp_path / "out") + extra) == 0, capsys.readouterr().err
    import pandas as pd

    assert pd.read_parquet(tmp_path / "out" / "trials.parquet")["session"].nunique() == sessions


@pytest.mark.parametrize("argv", [
    ["score", "--users", "1"],
    ["allot", "--budget", "1"],
    ["train", "--agent", "q_learning", "--out", "trained"],
    ["recover", "--model", "static_softmax", "--out", "rec"],
])
def test_every_subcommand_with_sessions_names_the_mismatch(argv, tmp_path, monkeypatch, capsys) -> None:
    monkeypatch.chdir(tmp_path)
    _write(tmp_path, "s.yaml", f"{TRIALS}gap_h: [2, 30]\n")
    err = _refusal([*argv, "--schedule", "s.yaml", "--sessions", "7"], capsys)
    assert "gap_h in --schedule s.yaml lists 2 gaps" in err and "but --sessions 7" in err, err
    assert "give --sessions 3" in err and "edit gap_h in s.yaml to list 6 gaps" in err, err


def test_a_scenario_file_whose_own_list_does_not_fit_names_the_file_and_both_fixes(tmp_path, capsys) -> None:
    path = _scenario_with(tmp_path, f"sessions: 5\n{TRIALS}gap_h: [2, 30]")
    err = _refusal(["simulate", "--scenario", str(path), "--users", "1", "--out", str(tmp_path / "o")], capsys)
    assert str(path) in err and "gap_h lists 2 gaps but 5 sessions need 4" in err, err
    assert "give a list of 4 gaps or one number for every gap, or set sessions to 3" in err, err
