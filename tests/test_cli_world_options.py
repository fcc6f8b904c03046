"""Every world option a subcommand accepts reaches its computation: the same tiny run in the default
world and in a world differing only in that option gives other figures, and the option spelled with
its default value gives the same figures (so the change is the option's, not the draw's). Which
subcommands take which world options is read from the parser, so a subcommand that gains one
without a case here fails."""

from __future__ import annotations

import argparse
import re
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from shortcut_gym.envs.config import bundled_config_dir
from shortcut_gym.lab.cli import build_parser, main

#: The options of ``add_world_options``.
WORLD_OPTIONS = ("--scenario", "--costs", "--memory", "--schedule", "--sessions")
#: Subcommands that build no world of their own from options (a sweep or an aid study names its
#: world in its spec; audit and bench compute none).
NO_WORLD = {"sweep", "aids", "audit", "bench"}
#: Subcommands that take the world options to record the study's world only: compare reads a fits
#: table and names the world the fits were made in (index.md's "Study world").
RECORD_ONLY = {"compare"}
#: The base schedule of every run: one short session (12 trials).
TINY = {"sessions": 1, "trials_per_session": 12, "trial_interval_s": 45.0, "gap_h": 24.0}
#: A cheap planned-choice model (world-reading: its likelihood depends on every part of the world).
PLANNED = "pc=planned_choice:n_bins=4,n_weight_bins=1"


def world_options_of_parser() -> dict[str, set[str]]:
    """Subcommand -> the world options its parser accepts."""
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return {name: {o for a in p._actions for o in a.option_strings if o in WORLD_OPTIONS}
            for name, p in sub.choices.items()}


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    """The world files (default-valued and changed ones) and a small trial log simulated in the base world."""
    root = tmp_path_factory.mktemp("world_options")
    config = bundled_config_dir()
    paths = {name: root / f"{name}.yaml" for name in
             ("tiny", "other_schedule", "scenario", "default_scenario", "costs", "default_costs",
              "memory", "default_memory")}
    paths["tiny"].write_text(yaml.safe_dump(TINY))
    # two sessions of 7 trials, further apart: a longer horizon, and memory decays more between uses
    paths["other_schedule"].write_text(yaml.safe_dump({"sessions": 2, "trials_per_session": 7,
                                                       "trial_interval_s": 600.0, "gap_h": 2.0}))
    scenario = yaml.safe_load((config / "scenarios" / "tidepool_logbook.yaml").read_text())
    paths["default_scenario"].write_text(yaml.safe_dump(scenario))
    # the same commands and hotkeys, use concentrated on the first commands
    paths["scenario"].write_text(yaml.safe_dump({**scenario, "zipf_exponent": 3.0}))
    costs = yaml.safe_load((config / "costs" / "average_skilled_mouse.yaml").read_text())
    paths["default_costs"].write_text(yaml.safe_dump(costs))
    # a slow typist who points slowly too (hotkeys and menus both dearer)
    slow = {**costs, "klm": {**costs["klm"], "keystroke_s": 1.5, "point_s": 2.2},
            "errors": {**costs["errors"], "undo_keystrokes": 6}}
    paths["costs"].write_text(yaml.safe_dump(slow))
    memory = yaml.safe_load((config / "memory" / "actr_default.yaml").read_text())
    paths["default_memory"].write_text(yaml.safe_dump(memory))
    paths["memory"].write_text(yaml.safe_dump({**memory, "decay": 0.9, "threshold": -1.0}))
    paths["log"] = root / "log.csv"
    assert main(["-q", "simulate", "--agent", "rescorla_wagner:beta=3", "--agent", "learn_first_k:k=2",
                 "--users", "1", "--seed", "3", "--schedule", str(paths["tiny"]), "--log", str(paths["log"])]) == 0
    return paths


def _numbers(frame: pd.DataFrame) -> np.ndarray:
    """The numeric cells of a results table, in a fixed order."""
    return frame.select_dtypes("number").to_numpy(dtype=float).ravel()


def _csv(name: str) -> Callable[[Path, str], np.ndarray]:
    return lambda out, stdout: _numbers(pd.read_csv(out / name))


def _stdout_numbers(out: Path, stdout: str) -> np.ndarray:
    return np.array([float(x) for x in re.findall(r"[-+]?\d+\.\d+", stdout)])


#: Subcommand -> (argv of a tiny run writing into OUT, how to read its figures from (OUT, stdout)).
CASES: dict[str, tuple[list[str], Callable[[Path, str], np.ndarray]]] = {
    "simulate": (["simulate", "--agent", "rescorla_wagner:beta=3", "--agent", "learn_first_k:k=2", "--users", "1",
                  "--out", "OUT"], _csv("summary.csv")),
    "train": (["train", "--agent", "q_learning", "--trials", "24", "--eval-users", "1", "--out", "OUT/q.npz",
               "--quiet"], _stdout_numbers),
    "score": (["score", "--agent", "learn_first_k:k=2", "--users", "1", "--out", "OUT/score.csv"],
              _csv("score.csv")),
    # in 12 trials a hotkey pays only with the hand already on the keyboard (so memory matters)
    "allot": (["allot", "--budget", "1", "--pool", "1,1,0", "--bins", "4", "--keyboard-share", "1", "--out", "OUT"],
              _csv("savings.csv")),
    "fit": (["fit", "LOG", "--model", PLANNED, "--starts", "1", "--intervals", "none", "--out", "OUT", "--quiet"],
            _csv("fits.csv")),
    "recover": (["recover", "--model", PLANNED, "--participants", "2", "--study", "parameters", "--starts", "1",
                 "--out", "OUT", "--quiet"], _csv("parameter_pairs_pc.csv")),
    "report": (["report", "LOG", "--model", PLANNED, "--model", "static_softmax", "--starts", "1", "--sims", "1",
                "--intervals", "none", "--out", "OUT", "--quiet"], _csv("fits.csv")),
    "yardstick": (["yardstick", "LOG", "--starts", "1", "--plan-bins", "4", "--plan-weight-bins", "1",
                   "--optimum-sims", "1", "--out", "OUT", "--quiet"], _csv("rationality_participants.csv")),
}

#: World option -> (its value for the changed world, the same option spelled with its default value).
#: ``--sessions`` goes with the base schedule of one session: 2 sessions against 1.
CHANGES: dict[str, tuple[str, str]] = {
    "--scenario": ("scenario", "default_scenario"),
    "--costs": ("costs", "default_costs"),
    "--memory": ("memory", "default_memory"),
    "--schedule": ("other_schedule", "tiny"),
    "--sessions": ("2", "1"),
}


def test_every_world_option_of_every_subcommand_has_a_case() -> None:
    accepted = world_options_of_parser()
    takers = {name for name, options in accepted.items() if options}
    assert takers == set(CASES) | RECORD_ONLY, "a subcommand gained or lost world options: update CASES (or NO_WORLD)"
    assert set(accepted) == takers | NO_WORLD, "a new subcommand: list it in CASES or NO_WORLD"
    for name in takers:
        assert accepted[name] == set(CHANGES), f"{name} takes only {sorted(accepted[name])} of the world options"


def test_subcommands_without_a_world_refuse_world_options(files, capsys) -> None:
    argv = {"audit": ["audit", str(files["log"].parent)],
            "bench": ["bench", "--quick"], "sweep": ["sweep", "tiny", "--plan-only"],
            "aids": ["aids", "tidepool_aids"]}
    assert set(argv) == NO_WORLD
    for name, args in argv.items():
        for option in WORLD_OPTIONS:
            capsys.readouterr()
            assert main([*args, option, "1"]) == 2, (name, option)
            assert f"unrecognized arguments: {option} 1" in capsys.readouterr().err


def _run(name: str, world: list[str], files: dict[str, Path], out: Path, capsys) -> np.ndarray:
    argv, read = CASES[name]
    argv = [str(out) + a[3:] if a.startswith("OUT") else str(files["log"]) if a == "LOG" else a for a in argv]
    out.mkdir(parents=True)
    capsys.readouterr()
    assert main(["-q", *argv, "--schedule", str(files["tiny"]), *world]) == 0, (argv, world)
    figures = read(out, capsys.readouterr().out)
    assert figures.size and np.isfinite(figures).any(), (name, world)
    return figures


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    return a.shape == b.shape and np.allclose(a, b, rtol=1e-9, atol=1e-12, equal_nan=True)


@pytest.mark.parametrize("name", list(CASES))
def test_each_world_option_reaches_the_computation(name: str, files, tmp_path: Path, capsys) -> None:
    base = _run(name, [], files, tmp_path / "base", capsys)
    for option, (changed, default) in CHANGES.items():
        value = {k: str(files[v]) if v in files else v for k, v in (("changed", changed), ("default", default))}
        # the schedule case replaces the base schedule: the later --schedule wins
        spelled = _run(name, [option, value["default"]], files, tmp_path / f"default{option}", capsys)
        assert _same(spelled, base), f"{name} {option} {default} (the default) changed the figures"
        other = _run(name, [option, value["changed"]], files, tmp_path / f"changed{option}", capsys)
        assert not _same(other, base), f"{name} {option} {changed}: the figures did not change"


def _study_world(out: Path) -> str:
    """The "Study world" section of an index.md."""
    text = (out / "index.md").read_text()
    return text.split("Study world", 1)[1]


def test_compare_records_each_world_option_in_its_index(files, tmp_path: Path, capsys) -> None:
    fits = tmp_path / "fits"
    assert main(["-q", "fit", str(files["log"]), "--model", "static_softmax", "--model", "random", "--starts", "1",
                 "--intervals", "none",
                 "--schedule", str(files["tiny"]), "--out", str(fits), "--quiet"]) == 0

    def compare(out: Path, world: list[str]) -> str:
        assert main(["-q", "compare", str(fits / "fits.csv"), "--schedule", str(files["tiny"]), *world,
                     "--out", str(out)]) == 0
        return _study_world(out)

    base = compare(tmp_path / "base", [])
    assert "1 sessions" not in base and "(12 trials per simulated participant)" in base
    for option, (changed, _) in CHANGES.items():
        value = str(files[changed]) if changed in files else changed
        words = compare(tmp_path / f"changed{option}", [option, value])
        assert words != base, option
        assert (value if option != "--sessions" else f"{value} sessions") in words, (option, words)
