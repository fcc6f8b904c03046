"""``--model-file``: the file form of ``--model`` on fit, recover, report and yardstick, read and
checked as ``--agent-file`` is, giving the same fits as the line form."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.lab.cli import main

#: The bundled composed spec (configs/agents/composed_myopic.yaml) as a line.
MYOPIC_LINE = "composed_learner:mechanisms=[value, memory_aware, incidental, forgetting, perseveration, lapse]"
#: A published learning model with one parameter held fixed, as a line and as a file.
RW_LINE = "rw=rescorla_wagner:alpha=0.3"
RW_FILE = "name: rescorla_wagner\nlabel: rw\nparams: {alpha: 0.3}\n"
#: A small composed learner of our own, as a line and as a file.
SMALL_LINE = "m=composed_learner:mechanisms=[value, lapse],lapse=0.05"
SMALL_FILE = "name: composed_learner\nlabel: m\nmechanisms: [value, lapse]\nparams: {lapse: 0.05}\n"
WORLD = ["--sessions", "2"]


@pytest.fixture(scope="module")
def log(tmp_path_factory) -> Path:
    """Two simulated participants, two sessions of the default scenario."""
    folder = tmp_path_factory.mktemp("log")
    path = folder / "log.csv"
    assert main(["-q", "simulate", *WORLD, "--agent", "rw=rescorla_wagner:alpha=0.3,beta=2", "--users", "2",
                 "--log", str(path), "--out", str(folder / "sim")]) == 0
    return path


def _files(tmp_path: Path) -> dict[str, str]:
    (tmp_path / "rw.yaml").write_text(RW_FILE)
    (tmp_path / "m.yaml").write_text(SMALL_FILE)
    return {"rw": str(tmp_path / "rw.yaml"), "m": str(tmp_path / "m.yaml")}


def _run(argv: list[str], out: Path) -> None:
    assert main(["-q", *argv, "--out", str(out), "--quiet", "--seed", "3"]) == 0


def _same_tables(a: Path, b: Path, names: list[str]) -> None:
    for name in names:
        left, right = pd.read_csv(a / name), pd.read_csv(b / name)
        assert len(left) > 0
        pd.testing.assert_frame_equal(left, right)


def test_fit_with_model_files_gives_the_line_forms_fits(tmp_path: Path, log: Path) -> None:
    files = _files(tmp_path)
    line = ["fit", str(log), *WORLD, "--starts", "1", "--model", RW_LINE, "--model", MYOPIC_LINE]
    mixed = ["fit", str(log), *WORLD, "--starts", "1", "--model-file", files["rw"], "--model-file", "composed_myopic"]
    _run(line, tmp_path / "line")
    _run(mixed, tmp_path / "file")
    _same_tables(tmp_path / "line", tmp_path / "file", ["fits.csv", "parameters.csv"])
    fits = pd.read_csv(tmp_path / "file" / "fits.csv")
    assert list(dict.fromkeys(fits["model"])) == ["rw", "composed_learner"]
    rw = fits[fits["model"] == "rw"]
    assert (rw["n_params"] == 1).all() and (rw["param_alpha"] == 0.3).all()  # alpha held fixed by the file
    assert rw["se_alpha"].isna().all() and rw["se_beta"].notna().all()
    # mixing the two options: --model first, then --model-file
    _run(["fit", str(log), *WORLD, "--starts", "1", "--model", RW_LINE, "--model-file", "composed_myopic"],
         tmp_path / "both")
    _same_tables(tmp_path / "line", tmp_path / "both", ["fits.csv"])


def test_recover_with_model_files_gives_the_line_forms_recovery(tmp_path: Path) -> None:
    files = _files(tmp_path)
    common = ["recover", *WORLD, "--starts", "1", "--participants", "2", "--study", "both"]
    _run([*common, "--model", RW_LINE, "--model", SMALL_LINE], tmp_path / "line")
    _run([*common, "--model", RW_LINE, "--model-file", files["m"]], tmp_path / "file")
    tables = sorted(p.name for p in (tmp_path / "line").glob("*.csv"))
    assert "model_confusion.csv" in tables and len(tables) >= 3
    _same_tables(tmp_path / "line", tmp_path / "file", tables)


def test_report_with_model_files_gives_the_line_forms_report(tmp_path: Path, log: Path) -> None:
    files = _files(tmp_path)
    common = ["report", str(log), *WORLD, "--starts", "1", "--sims", "2"]
    _run([*common, "--model", RW_LINE, "--model", SMALL_LINE], tmp_path / "line")
    _run([*common, "--model-file", files["rw"], "--model-file", files["m"]], tmp_path / "file")
    tables = sorted(p.name for p in (tmp_path / "line").glob("*.csv"))
    assert "fits.csv" in tables and len(tables) >= 3
    _same_tables(tmp_path / "line", tmp_path / "file", tables)


def test_yardstick_with_model_files_gives_the_line_forms_tables(tmp_path: Path, log: Path) -> None:
    files = _files(tmp_path)
    common = ["yardstick", str(log), *WORLD, "--starts", "1", "--optimum-sims", "2", "--plan-bins", "6",
              "--plan-weight-bins", "2"]
    _run([*common, "--model", RW_LINE], tmp_path / "line")
    _run([*common, "--model-file", files["rw"]], tmp_path / "file")
    tables = sorted(p.name for p in (tmp_path / "line").glob("*.csv"))
    assert len(tables) >= 2
    _same_tables(tmp_path / "line", tmp_path / "file", tables)
    _run([*common], tmp_path / "default")  # no model option: the default learning model still applies
    assert (tmp_path / "default" / "index.md").is_file()


BAD = {
    "parms.yaml": "name: rescorla_wagner\nparms: {alpha: 0.3}\n",
    "value.yaml": "name: rescorla_wagner\nparams: {alpha: two}\n",
    "range.yaml": "name: rescorla_wagner\nparams: {alpha: 3}\n",
    "mech.yaml": "name: composed_learner\nmechanisms: [value, lapsee]\n",
    "hyper.yaml": "name: rescorla_wagner\nhyperparameters: {n_steps: 8}\n",
}


@pytest.mark.parametrize("command", ["fit", "recover", "report", "yardstick"])
@pytest.mark.parametrize("bad", sorted(BAD))
def test_a_bad_model_file_is_refused_naming_it_as_agent_file_does(tmp_path: Path, capsys, command: str,
                                                                  bad: str) -> None:
    path = tmp_path / bad
    path.write_text(BAD[bad])
    assert main(["simulate", "--agent-file", str(path)]) == 2
    agent_error = capsys.readouterr().err.split("error: ", 1)[1]
    argv = [command, *([] if command == "recover" else [str(tmp_path / "log.csv")]), "--model", "random",
            "--model-file", str(path), "--out", str(tmp_path / "out")]
    (tmp_path / "log.csv").write_text("participant\n")
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(f"shortcut-gym {command}: error: {path}: "), err
    assert err.split("error: ", 1)[1] == agent_error  # the same wording as --agent-file
    assert not (tmp_path / "out").exists()


def test_a_folder_or_missing_model_file_is_named(tmp_path: Path, capsys) -> None:
    for given, words in ((tmp_path, "is a folder"), (tmp_path / "nope.yaml", "no such agent spec file")):
        assert main(["recover", "--model-file", str(given), "--out", str(tmp_path / "out")]) == 2
        err = capsys.readouterr().err
        assert f"error: {given}: {words}" in err and err.count("\n") == 1


def test_fit_needs_a_model_of_either_form(tmp_path: Path, capsys, log: Path) -> None:
    assert main(["fit", str(log), "--out", str(tmp_path / "out")]) == 2
    assert "give at least one --model or --model-file" in capsys.readouterr().err
    (tmp_path / "rw.yaml").write_text(RW_FILE)
    assert main(["fit", str(log), "--model", RW_LINE, "--model-file", str(tmp_path / "rw.yaml"),
                 "--out", str(tmp_path / "out")]) == 2
    assert "model labels repeat: ['rw']" in capsys.readouterr().err
