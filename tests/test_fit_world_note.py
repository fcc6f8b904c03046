"""fit says which models read the world (and which read none, for which the world options change
nothing), writes the world of its fits into world.json beside fits.csv, and compare checks the world
it is given against that note: refused when a model of the fits reads the world, warned otherwise."""

from __future__ import annotations

import json
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest

from shortcut_gym.envs import make_world
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.cli.world_note import reads_world

ONE = ["--sessions", "1"]
OTHER = ["--costs", "fast_typist_mouse"]
PLANNED = "pc=planned_choice:n_bins=4,n_weight_bins=1"
LEARNERS = ["rescorla_wagner", "choice_kernel", "rw_choice_kernel", "static_softmax", "random",
            "cl=composed_learner:mechanisms=[value, memory_aware, lapse]"]
LEARNER_LABELS = ["rescorla_wagner", "choice_kernel", "rw_choice_kernel", "static_softmax", "random", "cl"]


@pytest.fixture(scope="module")
def log(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("log") / "log.csv"
    assert main(["-q", "simulate", *ONE, "--agent", "rescorla_wagner", "--users", "2", "--log", str(path)]) == 0
    return path


def _fit(log: Path, out: Path, models: list[str], world: list[str], capsys) -> tuple[pd.DataFrame, str]:
    capsys.readouterr()
    models_args = [a for m in models for a in ("--model", m)]
    assert main(["fit", str(log), *world, *models_args, "--starts", "1", "--intervals", "none", "--quiet",
                 "--out", str(out)]) == 0
    err = capsys.readouterr().err
    return pd.read_csv(out / "fits.csv").set_index(["participant", "model"])["loglik"], err


def test_learning_models_read_no_world_and_the_line_says_so(log: Path, tmp_path: Path, capsys) -> None:
    base, err = _fit(log, tmp_path / "a", LEARNERS, ONE, capsys)
    line = [x for x in err.splitlines() if x.startswith("world:")]
    assert line == ["world: no model reads it: rescorla_wagner, choice_kernel, rw_choice_kernel, static_softmax, "
                    "random, cl (composed_learner) read none (they learn from the logged trials alone); the world "
                    "options change no fit"]
    other, _ = _fit(log, tmp_path / "b", LEARNERS, [*ONE, *OTHER, "--memory", "spacing"], capsys)
    pd.testing.assert_series_equal(base, other)  # what the line claims: the fits are the same in another world


def test_a_world_reading_model_is_named_and_its_fit_depends_on_the_world(log: Path, tmp_path: Path, capsys) -> None:
    base, err = _fit(log, tmp_path / "a", [PLANNED, "rescorla_wagner"], ONE, capsys)
    assert ("world: read by pc (planned_choice); rescorla_wagner reads none (it learns from the logged trials "
            "alone)") in err.splitlines()
    other, _ = _fit(log, tmp_path / "b", [PLANNED, "rescorla_wagner"], [*ONE, *OTHER], capsys)
    assert base.xs("rescorla_wagner", level="model").equals(other.xs("rescorla_wagner", level="model"))
    assert (base.xs("pc", level="model") - other.xs("pc", level="model")).abs().min() > 1e-6


def test_without_world_options_the_line_makes_no_claim_about_them(log: Path, tmp_path: Path, capsys) -> None:
    _, err = _fit(log, tmp_path / "a", ["rescorla_wagner"], [], capsys)
    assert ("world: no model reads it: rescorla_wagner reads none (it learns from the logged trials alone)"
            in err.splitlines())


def test_world_note_records_the_fits_world(log: Path, tmp_path: Path, capsys) -> None:
    _fit(log, tmp_path / "a", [PLANNED, "rescorla_wagner"], [*ONE, *OTHER], capsys)
    note = json.loads((tmp_path / "a" / "world.json").read_text())
    assert note["problem_digest"] == make_world(costs="fast_typist_mouse", schedule={"sessions": 1}).problem_digest()
    assert note["models_reading_world"] == ["pc"] and note["models_reading_none"] == ["rescorla_wagner"]
    assert "costs fast_typist_mouse" in note["words"] and "1 session " in note["words"]


@pytest.mark.parametrize(("name", "options", "reads"), [
    ("planned_choice", {}, True), ("bounded_optimal", {}, True), ("q_learning", {"model_path": "q.npz"}, True),
    ("q_learning", {}, False), ("ppo", {"model_path": "p.zip"}, True),
    *[(n, {}, False) for n in ("rescorla_wagner", "choice_kernel", "rw_choice_kernel", "static_softmax", "random",
                               "always_menu", "learn_first_k", "composed_learner")],
])
def test_which_models_read_the_world(name: str, options: dict, reads: bool) -> None:
    # reads_world looks at the registered class and the options only (a model file need not exist)
    assert reads_world(SimpleNamespace(name=name, options=options)) is reads  # type: ignore[arg-type]


@pytest.fixture
def fitted(log: Path, tmp_path: Path, capsys) -> dict[str, Path]:
    """fits.csv of a world-reading model and of learning models only, both fitted with OTHER costs."""
    out = {"planned": tmp_path / "planned", "learning": tmp_path / "learning"}
    _fit(log, out["planned"], [PLANNED, "rescorla_wagner"], [*ONE, *OTHER], capsys)
    _fit(log, out["learning"], ["rescorla_wagner", "choice_kernel"], [*ONE, *OTHER], capsys)
    return out


def _compare(fits: Path, world: list[str], out: Path, capsys) -> tuple[int, str]:
    capsys.readouterr()
    rc = main(["compare", str(fits / "fits.csv"), *world, "--out", str(out)])
    return rc, capsys.readouterr().err


def _study_world(out: Path) -> str:
    return (out / "index.md").read_text().split("Study world", 1)[1]


def test_compare_takes_the_fits_world_when_given_none(fitted, tmp_path: Path, capsys) -> None:
    rc, _ = _compare(fitted["planned"], [], tmp_path / "c", capsys)
    assert rc == 0
    words = _study_world(tmp_path / "c")
    assert "costs fast_typist_mouse" in words and "the world the fits were made in, read from their world.json" in words


def test_compare_accepts_the_fits_own_world(fitted, tmp_path: Path, capsys) -> None:
    rc, err = _compare(fitted["planned"], [*ONE, *OTHER], tmp_path / "c", capsys)
    assert rc == 0 and "world" not in err.replace("wrote", "")
    assert "costs fast_typist_mouse" in _study_world(tmp_path / "c")


@pytest.mark.parametrize("world", [ONE, [*ONE, "--costs", "slow_typist_mouse"], [*OTHER], [*ONE, *OTHER,
                                                                                            "--memory", "spacing"]])
def test_compare_refuses_another_world_when_a_model_read_its_world(fitted, tmp_path, capsys, world) -> None:
    rc, err = _compare(fitted["planned"], world, tmp_path / "c", capsys)
    assert rc == 2 and err.count("\n") == 1, err
    fit_digest = make_world(costs="fast_typist_mouse", schedule={"sessions": 1}).problem_digest()[:12]
    assert f"(world {fit_digest}, {fitted['planned'] / 'world.json'})" in err
    assert "the fits of pc depend on their world" in err and not (tmp_path / "c").exists()


def test_compare_warns_of_another_world_when_no_model_read_it(fitted, tmp_path: Path, capsys) -> None:
    rc, err = _compare(fitted["learning"], ONE, tmp_path / "c", capsys)
    assert rc == 0
    fit_digest = make_world(costs="fast_typist_mouse", schedule={"sessions": 1}).problem_digest()[:12]
    used_digest = make_world(schedule={"sessions": 1}).problem_digest()[:12]
    warned = [x for x in err.splitlines() if "no model of these fits reads the world" in x]
    assert len(warned) == 1 and fit_digest in warned[0] and used_digest in warned[0]
    assert "costs default" in _study_world(tmp_path / "c")


def test_compare_refuses_a_malformed_note_naming_it(fitted, tmp_path: Path, capsys) -> None:
    note = fitted["planned"] / "world.json"
    note.write_text('{"format": 1}')
    rc, err = _compare(fitted["planned"], [], tmp_path / "c", capsys)
    assert rc == 2 and f"{note}: a world note must hold" in err
    note.write_text("not json")
    rc, err = _compare(fitted["planned"], [], tmp_path / "c", capsys)
    assert rc == 2 and f"{note}: not a world note written by fit" in err
    note.unlink()  # a folder without a note (as older fits wrote) compares as before, unchecked
    rc, _ = _compare(fitted["planned"], ONE, tmp_path / "c", capsys)
    assert rc == 0 and "costs default" in _study_world(tmp_path / "c")


def test_report_says_which_models_read_the_world_and_writes_the_note(log: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "r"
    capsys.readouterr()
    assert main(["report", str(log), *ONE, "--model", "rescorla_wagner", "--model", "choice_kernel", "--starts", "1",
                 "--sims", "1", "--intervals", "none", "--quiet", "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert ("world: no model reads it: rescorla_wagner, choice_kernel read none (they learn from the logged trials "
            "alone); the world options change no fit; the posterior-predictive simulations run in it") in err
    note = json.loads((out / "world.json").read_text())
    assert note["problem_digest"] == make_world(schedule={"sessions": 1}).problem_digest()
    assert "world.json" in (out / "index.md").read_text()
