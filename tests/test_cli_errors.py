"""The command line tells a user's mistake (exit 2, one line naming it) from a bug (traceback)."""

from __future__ import annotations

import argparse
import inspect

import pytest

import shortcut_gym.envs.errors as errors
from shortcut_gym.lab.cli import CLIError, main
from shortcut_gym.lab.cli.sweep import SweepArgumentError
from shortcut_gym.lab.data.logs import LogError
from shortcut_gym.lab.sweep.backends import BackendError
from shortcut_gym.lab.sweep.spec import SweepSpecError


@pytest.mark.parametrize("cls", [errors.ConfigError, errors.ActionError, errors.InputFileError, errors.UsageError,
                                 LogError, SweepSpecError, BackendError, CLIError, SweepArgumentError])
def test_every_error_type_of_the_package_derives_from_the_base(cls) -> None:
    assert issubclass(cls, errors.ShortcutGymError)


def test_errors_module_defines_only_subclasses_of_the_base() -> None:
    classes = [c for _, c in inspect.getmembers(errors, inspect.isclass) if c.__module__ == errors.__name__]
    assert len(classes) >= 5 and all(issubclass(c, errors.ShortcutGymError) for c in classes)


def _one_line_exit_2(argv: list[str], capsys, expected: str) -> str:
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.endswith("\n"), err
    assert "Traceback" not in err and expected in err, err
    return err


@pytest.mark.parametrize(("argv", "expected"), [
    (["simulate", "--users", "0"], "--users: must be a whole number in 1..100000, got 0"),
    (["simulate", "--users", "many"], "--users: 'many' is not a whole number"),
    (["simulate", "--seed", "-1"], "--seed: must be a whole number in 0..9223372036854775807, got -1"),
    (["simulate", "--seed", str(2**63)], "--seed"),
    (["simulate", "--agent", "no_such_agent"], "unknown agent 'no_such_agent'"),
    (["simulate", "--agent", "learn_first_k:k=1.5"], "k must be a whole number"),
    (["simulate", "--agent", "learn_first_k:k=.nan"], "k must be a finite number"),
    (["simulate", "--agent", "learn_first_k:k=nan"], "parameter k must be a number, got 'nan'"),
    (["simulate", "--agent", "learn_first_k:zz=1"], "--agent 'learn_first_k:zz=1' (command line): unknown key 'zz'"),
    (["simulate", "--scenario", "no_such_scenario"],
     "unknown scenario preset 'no_such_scenario', and no file 'no_such_scenario' either"),
    (["sweep", "no_such_spec"], "no such file"),
    (["sweep", "demo", "--workers", "0"], "--workers: must be a whole number >= 1, got 0"),
    (["compare", "no_such_fits.csv", "--out", "x"], "no_such_fits.csv: no such file"),
    (["compare", __file__, "--out", "x", "--prior-count", "inf"], "--prior-count: must be a finite number > 0"),
    (["fit", "no_such_log.csv", "--model", "static_softmax", "--out", "x"], "no_such_log.csv: no such file"),
    (["report", __file__, "--model", "static_softmax", "--out", "x", "--block", "0"], "--block: must be 'session'"),
    (["recover", "--model", "static_softmax", "--out", "x", "--participants", "-3"], "--participants"),
    (["recover", "--model", "static_softmax", "--out", "x", "--study", "models"], "needs at least two models"),
    (["bench", "--suite", "warp"], "unknown suite 'warp'"),
    (["allot", "--budget", "1000"], "--budget 1000 is more than can be handed out"),
    (["allot", "--budget", "-1"], "--budget: must be a whole number >= 0, got -1"),
    (["simulate", "--agent", "learn_first_k:k"], "'k' must look like key=value"),
    (["simulate", "--log", "trials.txt"], "unknown file type '.txt'"),
    (["audit", "no_such_folder"], "no such folder"),
    (["no_such_subcommand"], "invalid choice"),
])
def test_a_users_mistake_exits_2_with_one_line(argv, expected, capsys, tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    _one_line_exit_2(argv, capsys, expected)


@pytest.mark.parametrize("exc", [ValueError("bug"), KeyError("bug"), FileNotFoundError("bug"), TypeError("bug")])
def test_an_internal_error_propagates_with_its_traceback(exc, monkeypatch) -> None:
    import shortcut_gym.lab.cli.simulate as simulate

    def broken(args: argparse.Namespace) -> int:
        raise exc

    monkeypatch.setattr(simulate, "run", broken)
    with pytest.raises(type(exc)):
        main(["simulate"])
