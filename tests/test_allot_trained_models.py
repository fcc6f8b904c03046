"""``allot`` with a trained model: every world it tries gives the commands other hotkeys, so the
refusal says to give allow_other_world=true (retraining on the base world cannot help)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from shortcut_gym.envs import make_world
from shortcut_gym.envs.errors import WorldMismatchError
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.design.assignment import population_savings

ONE = ["--sessions", "1"]
ALLOT = ["allot", "--budget", "1", "--pool", "1,1,0", "--users", "2", *ONE]
ADVICE = "allot tries other hotkey assignments: give allow_other_world=true"
TRAIN = {"q_learning": ("q.npz", ["--trials", "40"]), "sarsa": ("s.npz", ["--trials", "40"]),
         "ppo": ("p.zip", ["--trials", "64", "--envs", "2"])}
AGENT = {"q_learning": "q_learning", "sarsa": "sarsa", "ppo": "ppo:n_steps=32,batch_size=64,n_epochs=1"}


@pytest.fixture(scope="module")
def models(tmp_path_factory) -> dict[str, Path]:
    d = tmp_path_factory.mktemp("allot_models")
    out = {}
    for name, (file, extra) in TRAIN.items():
        assert main(["train", "--agent", AGENT[name], *ONE, *extra, "--out", str(d / file), "--quiet",
                     "--eval-users", "0"]) == 0
        out[name] = d / file
    with np.load(out["q_learning"]) as z:  # as written before world records: no record to check
        np.savez(d / "old.npz", q=z["q"], name=z["name"])
    out["old"] = d / "old.npz"
    return out


@pytest.mark.parametrize("name", ["q_learning", "sarsa", "ppo", "old"])
def test_allot_refuses_a_model_with_the_advice_that_helps(models, capsys, name) -> None:
    agent = "q_learning" if name == "old" else name
    path = models[name]
    assert main([*ALLOT, "--agent", f"{agent}:model_path={path}"]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err, err
    assert f"{agent}: the model {path}" in err
    assert ("keeps no record" in err) == (name == "old")
    if name != "old":  # the finding is kept: trained on the base world, run on one with other hotkeys
        assert "scenario commands differ" in err and make_world(schedule={"sessions": 1}).problem_digest()[:12] in err
    assert err.endswith(ADVICE) and "retrain" not in err


def test_with_allow_other_world_allot_runs_and_the_library_names_its_caller(models, capsys) -> None:
    spec = f"q_learning:model_path={models['q_learning']}"
    assert main([*ALLOT, "--agent", f"{spec},allow_other_world=true"]) == 0
    assert "exact" in capsys.readouterr().out
    with pytest.raises(WorldMismatchError) as err:
        population_savings(make_world(schedule={"sessions": 1}),
                           [{"name": "q_learning", "model_path": str(models["q_learning"])}], (1,), seeds=[0])
    assert str(err.value).endswith("population_savings tries other hotkey assignments: give allow_other_world=true")


def test_other_subcommands_still_advise_retraining(models, capsys, tmp_path) -> None:
    assert main(["simulate", "--agent", f"q_learning:model_path={models['q_learning']}", "--users", "1",
                 "--out", str(tmp_path / "sim")]) == 2  # all sessions: another schedule
    err = capsys.readouterr().err
    assert "(schedule differ" in err and "retrain it on this world, or give allow_other_world=true" in err
