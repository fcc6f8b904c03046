"""The CLI keeps results and talk apart: tables on stdout, status lines ("wrote ...") and progress bars
on stderr; the global -q leaves stderr empty on a successful run, -v adds INFO lines of what is done."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from shortcut_gym.lab.cli import main

#: Lines that report on the run rather than give its results.
STATUS_LINE = re.compile(r"(?:^|\r)\s*(wrote |trained |load it with |report in |=== bench \S+ took |sweep folder )",
                         re.M)
#: What a tqdm bar writes.
BAR = "%|"
SWEEP = ("name: tiny\nbase:\n  schedule: {sessions: 1, trials_per_session: 5}\n"
         "vary: {design: grid, parameters: {costs.klm.keystroke_s: {values: [0.2]}}}\n"
         "agents: [{name: always_menu}]\nseeds: {first: 0, count: 1}\n")
ONE = ["--sessions", "1"]


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> dict[str, Path]:
    """Small inputs the subcommands read: trial logs, a fits table, a finished sweep folder."""
    root = tmp_path_factory.mktemp("inputs")
    paths = {"menu": root / "menu.csv", "mixed": root / "mixed.csv", "full": root / "full.csv",
             "fits": root / "fits" / "fits.csv", "spec": root / "tiny.yaml", "sweep": root / "sweep"}
    paths["spec"].write_text(SWEEP)
    runs = [["simulate", "--agent", "always_menu", "--users", "2", *ONE, "--log", str(paths["menu"])],
            ["simulate", "--agent", "rescorla_wagner", "--agent", "learn_first_k:k=1", "--users", "1", *ONE,
             "--log", str(paths["mixed"])],
            ["simulate", "--agent", "rescorla_wagner", "--users", "1", "--log", str(paths["full"])],
            ["fit", str(paths["mixed"]), "--model", "static_softmax", "--model", "rescorla_wagner", *ONE,
             "--starts", "1", "--out", str(paths["fits"].parent), "--quiet"],
            ["sweep", str(paths["spec"]), "--out", str(paths["sweep"]), "--workers", "1", "--quiet"]]
    for argv in runs:
        assert main(["-q", *argv]) == 0, argv
    return paths


def _cases(p: dict[str, Path], out: Path) -> dict[str, tuple[list[str], str]]:
    """Subcommand -> (argv of a cheap run, a status phrase it must write on stderr)."""
    return {
        "simulate --out": (["simulate", "--agent", "always_menu", "--users", "1", *ONE, "--out", str(out)], "wrote"),
        "simulate --log": (["simulate", "--agent", "always_menu", "--users", "1", *ONE, "--log",
                            str(out / "log.csv")], "wrote trial log"),
        "simulate --population": (["simulate", "--population", str(p["population"]), *ONE, "--log",
                                   str(out / "pop.csv")], "wrote true parameters"),
        "train": (["train", "--agent", "q_learning", *ONE, "--trials", "200", "--eval-users", "1", "--out",
                   str(out / "q.npz"), "--quiet"], "load it with --agent q_learning:model_path="),
        "score": (["score", "--agent", "always_menu", *ONE, "--users", "1", "--out", str(out / "score.csv")],
                  "wrote"),
        "fit": (["fit", str(p["menu"]), "--model", "static_softmax", *ONE, "--starts", "1", "--out", str(out),
                 "--quiet"], "wrote"),
        "compare": (["compare", str(p["fits"]), "--out", str(out)], "wrote"),
        "recover": (["recover", "--model", "static_softmax", "--participants", "2", "--study", "parameters",
                     "--starts", "1", *ONE, "--out", str(out), "--quiet"], "wrote"),
        "report": (["report", str(p["mixed"]), "--model", "static_softmax", "--model", "rescorla_wagner", *ONE,
                    "--starts", "1", "--sims", "1", "--out", str(out), "--quiet"], "report in"),
        "yardstick": (["yardstick", str(p["full"]), "--starts", "1", "--plan-bins", "4", "--plan-weight-bins", "1",
                       "--optimum-sims", "1", "--out", str(out), "--quiet"], "report in"),
        "allot": (["allot", "--budget", "1", "--pool", "1,1,0", "--bins", "4", *ONE, "--out", str(out)], "wrote"),
        "aids": (["aids", "tidepool_aids", "--users", "1", "--agent", "always_menu", "--out", str(out)], "wrote"),
        "sweep": (["sweep", str(p["spec"]), "--out", str(out), "--workers", "1", "--quiet"], "wrote summary"),
        "audit": (["audit", str(p["sweep"])], ""),
        "bench": (["bench", "--suite", "env", "--quick"], "=== bench env took"),
    }


CASES = list(_cases({k: Path(k) for k in ("menu", "mixed", "full", "fits", "spec", "sweep", "population")},
                    Path("x")))
#: Subcommands whose results are files only: nothing for stdout.
FILES_ONLY = {"train", "sweep"}


@pytest.mark.parametrize("case", CASES)
def test_stdout_holds_results_and_status_goes_to_stderr(case: str, inputs, tmp_path: Path, capsys) -> None:
    population = tmp_path / "population.yaml"
    population.write_text("models:\n  rw:\n    agent: rescorla_wagner\n    participants: 2\n"
                          "    parameters: {alpha: {dist: uniform, low: 0.2, high: 0.4}}\n")
    argv, phrase = _cases({**inputs, "population": population}, tmp_path / "out")[case]
    capsys.readouterr()
    assert main(argv) == 0
    captured = capsys.readouterr()
    assert STATUS_LINE.search(captured.out) is None, captured.out
    assert phrase in captured.err
    if case == "audit":
        assert "intact" in captured.out and captured.err == ""
    elif case == "train":  # the one result line: the trained agent against always-menu
        assert captured.out.startswith("time per user over 1 new users") and captured.out.count("\n") == 1
    elif case in FILES_ONLY:
        assert captured.out == ""
    else:
        assert captured.out.strip()  # the results are still printed
    if case == "fit":  # nothing but the table
        lines = captured.out.splitlines()
        assert lines[0].split() == ["participant", "model", "loglik", "n_params", "aic", "bic", "fit_ok"]
        assert len(lines) == 1 + 2


def _quiet_runs(p: dict[str, Path], out: Path) -> dict[str, list[str]]:
    """Runs that draw progress bars or write status lines unless silenced (no subcommand --quiet)."""
    return {
        "simulate": ["simulate", "--agent", "always_menu", "--users", "1", *ONE, "--log", str(out / "log.csv")],
        "train": ["train", "--agent", "q_learning", *ONE, "--trials", "200", "--eval-users", "1",
                  "--out", str(out / "q.npz")],
        "fit": ["fit", str(p["menu"]), "--model", "static_softmax", *ONE, "--starts", "1", "--out", str(out / "f")],
        "sweep": ["sweep", str(p["spec"]), "--out", str(out / "sw"), "--workers", "1"],
    }


@pytest.mark.parametrize("name", ["simulate", "train", "fit", "sweep"])
def test_global_quiet_leaves_stderr_empty_and_implies_the_subcommands_quiet(name, inputs, tmp_path, capsys) -> None:
    capsys.readouterr()
    assert main(_quiet_runs(inputs, tmp_path / "loud")[name]) == 0
    loud = capsys.readouterr().err
    assert STATUS_LINE.search(loud)  # unsilenced, the run does talk on stderr
    if name != "simulate":
        assert BAR in loud  # and draws its progress bar
    assert main(["-q", *_quiet_runs(inputs, tmp_path / "hushed")[name]]) == 0
    assert capsys.readouterr().err == ""
    if name != "simulate":  # the subcommand's own --quiet still hides the bar and keeps the status lines
        assert main([*_quiet_runs(inputs, tmp_path / "own")[name], "--quiet"]) == 0
        err = capsys.readouterr().err
        assert BAR not in err and STATUS_LINE.search(err)


def test_verbose_says_what_is_being_done(tmp_path: Path, capsys) -> None:
    log = tmp_path / "log.csv"
    argv = ["simulate", "--agent", "always_menu", "--users", "3", "--seed", "4", *ONE, "--log", str(log)]
    assert main(argv[:-1] + [str(tmp_path / "plain.csv")]) == 0
    plain = capsys.readouterr()
    assert "INFO" not in plain.err
    assert main(["-v", *argv]) == 0
    verbose = capsys.readouterr()
    info = [line for line in verbose.err.splitlines() if line.startswith("INFO: ")]
    assert any(line.startswith("INFO: World: scenario ") for line in info)
    assert any("name=always_menu" in line for line in info)
    assert any("3 users per agent, seeds 4..6" in line and str(log) in line for line in info)
    assert any(f"wrote trial log {log}" in line for line in info)
    assert verbose.out == plain.out  # -v changes only stderr


@pytest.mark.parametrize(("users", "agents", "words"), [
    (1, ["always_menu"], "(1 participant)"), (2, ["always_menu"], "(2 participants)"),
    (1, ["always_menu", "always_hotkey"], "(2 participants)"),
])
def test_the_log_line_counts_participants_in_words(tmp_path: Path, capsys, users, agents, words) -> None:
    log = tmp_path / "log.csv"
    given = [a for name in agents for a in ("--agent", name)]
    assert main(["simulate", *ONE, *given, "--users", str(users), "--log", str(log)]) == 0
    line = [x for x in capsys.readouterr().err.splitlines() if x.startswith("wrote trial log")]
    assert line == [f"wrote trial log {log} {words}"]


def test_a_reader_that_closes_the_pipe_ends_the_command_quietly(tmp_path, monkeypatch, capsys) -> None:
    # `shortcut-gym simulate ... | head -1`: the pipe closes under the results; no traceback
    import io
    import os
    import sys

    from shortcut_gym.lab.cli import main

    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader has gone
    saved = os.dup(1)
    try:
        os.dup2(write_end, 1)
        monkeypatch.setattr(sys, "stdout", io.TextIOWrapper(os.fdopen(1, "wb", closefd=False), write_through=False))
        schedule = tmp_path / "s.yaml"
        schedule.write_text("sessions: 1\ntrials_per_session: 4\n")
        code = main(["-q", "simulate", "--agent", "always_menu", "--users", "1", "--schedule", str(schedule)])
    finally:
        os.dup2(saved, 1)
        os.close(saved)
        os.close(write_end)
    assert code == 141
    assert "Traceback" not in capsys.readouterr().err


def test_a_multi_line_fault_reads_as_one_sentence() -> None:
    from shortcut_gym.lab.cli import one_line

    assert one_line(ValueError("2 fault(s) in trial log:\n  a.csv, row 1: x\n  a.csv, row 2: y")) == (
        "2 fault(s) in trial log: a.csv, row 1: x; a.csv, row 2: y")
    assert one_line(ValueError("first\n\n second ")) == "first; second"
    assert one_line(ValueError("")) == "ValueError"


def test_a_global_flag_after_the_subcommand_says_where_it_goes(tmp_path, capsys) -> None:
    from shortcut_gym.lab.cli import main

    for flag in ("-v", "--verbose", "-q"):
        assert main(["simulate", "--agent", "always_menu", "--users", "1", flag]) == 2
        err = capsys.readouterr().err
        assert f"unrecognized arguments: {flag}" in err and "go before the subcommand" in err, err
    assert main(["simulate", "--agent", "always_menu", "--bogus"]) == 2
    assert "go before the subcommand" not in capsys.readouterr().err
