"""Saved models keep the record of the world they were trained on and refuse another world.

World A is the demo scenario's first session; B_costs has other costs, B_commands the same number of
commands with two hotkeys swapped (so other key counts). Both have A's sizes, so only the record can
tell them apart.
"""

from __future__ import annotations

import copy
import json
import logging
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.rollout import context_of_world
from shortcut_gym.agents.sb3.files import RECORD_MEMBER
from shortcut_gym.agents.world_record import check_model_world, parts_differ, world_record
from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.envs.config import bundled_config_dir, read_yaml
from shortcut_gym.envs.errors import ConfigError, WorldMismatchError

SCENARIO = read_yaml(bundled_config_dir() / "scenarios" / "tidepool_logbook.yaml")


def _swapped_hotkeys() -> dict:
    sc = copy.deepcopy(SCENARIO)
    items = sc["menus"][0]["items"]
    items[0]["hotkey"], items[2]["hotkey"] = items[2]["hotkey"], items[0]["hotkey"]
    return sc


A = make_world(schedule={"sessions": 1})
B_COSTS = make_world(costs="fast_typist_mouse", schedule={"sessions": 1})
B_COMMANDS = make_world(scenario=_swapped_hotkeys(), schedule={"sessions": 1})
OTHER_WORLDS = [(B_COSTS, "costs"), (B_COMMANDS, "scenario commands")]
SB3_TINY = {
    "ppo": {"n_steps": 32, "batch_size": 64, "n_epochs": 1},
    "a2c": {"n_steps": 8},
    "dqn": {"buffer_size": 2000, "learning_starts": 50},
}
LOG = "shortcut_gym.agents.world_record"


def _simulator_inputs(world) -> dict:
    """What the simulator reads of a world (envs/simulator.py, envs/env.py), as comparable values."""
    par, ipar = world.parameters()
    cs = world.commands
    return {"par": par.tolist(), "ipar": ipar.tolist(), "constants": world.command_constants().tolist(),
            "names": cs.names, "hotkeys": cs.hotkeys, "probability": cs.probability.tolist(),
            "schedule": world.schedule.model_dump(), "noise": world.costs.noise.model_dump(),
            "memory": world.memory.model_dump(), "obs": world.observation_names()}


def test_problem_digest_is_equal_exactly_when_the_simulator_reads_the_same_world() -> None:
    spelled_out = {**read_yaml(bundled_config_dir() / "costs" / "average_skilled_mouse.yaml"), "name": "mine"}
    spelled_out["klm"] = {**spelled_out.get("klm", {}), "keystroke_s": 0.2}  # the average skilled typist's K
    described = {**SCENARIO, "description": "another description"}
    worlds = [
        A, B_COSTS, B_COMMANDS,
        make_world(costs=spelled_out, schedule={"sessions": 1}),
        make_world(scenario=described, schedule={"sessions": 1}),
        make_world(schedule={"sessions": 1, "trial_interval_s": 50.0}),
        make_world(schedule={"sessions": 1}, memory={"decay": 0.4}),
        make_world(schedule={"sessions": 1}, observe_recall=True),
        make_world(scenario={**SCENARIO, "zipf_exponent": 1.3}, schedule={"sessions": 1}),
        make_world(schedule={"sessions": 1}, costs={"name": "x", "menu": {"search_slope_s_per_item": 0.12}}),
    ]
    inputs = [json.dumps(_simulator_inputs(w), sort_keys=True, default=str) for w in worlds]
    for i, wi in enumerate(worlds):
        for j, wj in enumerate(worlds):
            assert (wi.problem_digest() == wj.problem_digest()) == (inputs[i] == inputs[j]), (i, j)
    assert worlds[3].problem_digest() == A.problem_digest() != worlds[3].digest()  # spelling only
    assert worlds[4].problem_digest() == A.problem_digest()


def _trained(name: str, world, path: Path) -> Path:
    if name in SB3_TINY:
        agent = make_agent(name, hyperparameters=SB3_TINY[name])
        agent.train(world, 128, seed=0, progress_bar=False, n_envs=2)
    else:
        agent = make_agent(name)
        agent.train(CommandSelectionEnv(world=world), 3, seed=0, progress_bar=False)
    return agent.save(path)


class _Models(dict):
    """Model files trained on A, each trained on first use (so a run of some tests trains only theirs)."""

    def __init__(self, folder: Path) -> None:
        super().__init__()
        self.folder = folder

    def __missing__(self, name: str) -> Path:
        self[name] = _trained(name, A, self.folder / (f"{name}.npz" if name not in SB3_TINY else f"{name}.zip"))
        return self[name]


@pytest.fixture(scope="module")
def models(tmp_path_factory) -> _Models:
    return _Models(tmp_path_factory.mktemp("models"))


ALL = ["q_learning", "ppo", "a2c", "dqn"]


def _actions(world, agent, seed: int = 3) -> list[str]:
    return run_episode(CommandSelectionEnv(world=world), agent, seed=seed)["action"].tolist()


@pytest.mark.parametrize("name", ALL)
def test_model_runs_on_its_own_world_and_records_it(models, name) -> None:
    agent = make_agent(name, model_path=models[name])
    assert agent.trained_for is not None and agent.trained_for["digest"] == A.problem_digest()
    assert agent.trained_for["scenario"] == "tidepool_logbook" and agent.trained_for["horizon"] == A.horizon
    assert agent.trained_for["n_commands"] == A.commands.n_commands
    assert len(_actions(A, agent)) == A.horizon
    assert not list(models[name].parent.glob(".*.tmp"))  # the atomic write left nothing behind


@pytest.mark.parametrize("name", ALL)
@pytest.mark.parametrize(("other", "part"), OTHER_WORLDS, ids=["costs", "commands"])
def test_model_is_refused_on_another_world_of_the_same_sizes(models, name, other, part) -> None:
    with pytest.raises(WorldMismatchError) as err:  # loaded fresh, bound on first use
        _actions(other, make_agent(name, model_path=models[name]))
    text = str(err.value)
    assert "\n" not in text and str(models[name]) in text
    assert A.problem_digest()[:12] in text and other.problem_digest()[:12] in text
    assert f"({part} differ)" in text and "allow_other_world=true" in text
    bound = make_agent(name, model_path=models[name])  # bound to A first, then run on the other world
    _actions(A, bound)
    with pytest.raises(WorldMismatchError):
        _actions(other, bound)
    late = make_agent(name)  # bound to the other world, then loaded
    late.bind(context_of_world(other))
    with pytest.raises(WorldMismatchError):
        late.load(models[name])
    assert not late.has_model()


@pytest.mark.parametrize("name", ALL)
def test_override_runs_on_another_world_and_warns(models, name, caplog) -> None:
    agent = make_agent(name, model_path=models[name], allow_other_world=True)
    with caplog.at_level(logging.WARNING, logger=LOG):
        assert len(_actions(B_COSTS, agent)) == B_COSTS.horizon
        _actions(B_COSTS, agent, seed=4)
    warned = [r for r in caplog.records if r.name == LOG and r.levelno == logging.WARNING]
    assert len(warned) == 1 and str(models[name]) in warned[0].getMessage()
    assert "costs differ" in warned[0].getMessage() and "used anyway" in warned[0].getMessage()
    assert agent.spec()["allow_other_world"] is True
    with pytest.raises(ConfigError, match="allow_other_world must be true or false"):
        make_agent(name, model_path=models[name], allow_other_world="yes")


def _without_record(name: str, path: Path, out: Path) -> Path:
    """A copy of a saved model as versions before world records wrote it."""
    if path.suffix == ".npz":
        with np.load(path) as d:
            np.savez(out.with_suffix(".npz"), q=d["q"], name=d["name"])
        return out.with_suffix(".npz")
    target = out.with_suffix(".zip")
    with zipfile.ZipFile(path) as src, zipfile.ZipFile(target, "w") as dst:
        for member in src.namelist():
            if member != RECORD_MEMBER:
                dst.writestr(member, src.read(member))
    norm = path.with_suffix(".obs_norm.npz")
    target.with_suffix(".obs_norm.npz").write_bytes(norm.read_bytes())
    return target


@pytest.mark.parametrize("name", ALL)
def test_model_without_record_is_refused_unless_allowed(models, name, tmp_path, caplog) -> None:
    old = _without_record(name, models[name], tmp_path / "old")
    with pytest.raises(WorldMismatchError) as err:
        _actions(A, make_agent(name, model_path=old))  # not even on the world it came from
    assert str(old) in str(err.value) and "keeps no record" in str(err.value)
    assert A.problem_digest()[:12] in str(err.value)
    with caplog.at_level(logging.WARNING, logger=LOG):
        assert len(_actions(A, make_agent(name, model_path=old, allow_other_world=True))) == A.horizon
    assert any("keeps no record" in r.getMessage() for r in caplog.records if r.name == LOG)


def test_consumers_refuse_through_the_spec(models) -> None:
    from shortcut_gym.agents.scoring import time_lost_vs_planner
    from shortcut_gym.lab.fitting import ModelSpec
    from shortcut_gym.lab.rationality import rationality_analysis
    from shortcut_gym.lab.simulate import simulate_agents
    from shortcut_gym.lab.sweep.batch import simulate_users

    spec = {"name": "q_learning", "model_path": str(models["q_learning"])}
    for run in (lambda w, s: simulate_agents(w, [s], [0]), lambda w, s: simulate_users(w, s, [0, 1]),
                lambda w, s: time_lost_vs_planner(w, {"m": make_agent(**s)}, [0])):
        with pytest.raises(WorldMismatchError, match="costs differ"):
            run(B_COSTS, spec)
    assert len(simulate_agents(A, [spec], [0])) == A.horizon
    assert len(simulate_agents(B_COSTS, [{**spec, "allow_other_world": True}], [0])) == B_COSTS.horizon
    learning = [ModelSpec("q_learning", "mine", {"model_path": spec["model_path"]})]
    with pytest.raises(WorldMismatchError, match="costs differ"):  # refused before any participant is fitted
        rationality_analysis(pd.DataFrame(), B_COSTS, learning)


def test_continued_training_on_another_world_is_refused_unless_allowed(models) -> None:
    agent = make_agent("q_learning", model_path=models["q_learning"])
    with pytest.raises(WorldMismatchError):
        agent.train(CommandSelectionEnv(world=B_COSTS), 1, progress_bar=False)
    allowed = make_agent("q_learning", model_path=models["q_learning"], allow_other_world=True)
    allowed.train(CommandSelectionEnv(world=B_COSTS), 1, progress_bar=False)
    assert allowed.trained_for is not None and allowed.trained_for["digest"] == B_COSTS.problem_digest()


#: Worlds each differing from A in the parts named, with the words the refusal must use for them.
WORDED = [
    (make_world(memory="spacing", schedule={"sessions": 1}), "(memory differs)"),
    (make_world(schedule={"sessions": 1, "trials_per_session": 7}), "(schedule differs)"),
    (B_COSTS, "(costs differ)"),
    (B_COMMANDS, "(scenario commands differ)"),
    (make_world(costs="fast_typist_mouse", memory="spacing", schedule={"sessions": 1}), "(costs and memory differ)"),
    (make_world(costs="fast_typist_mouse", memory="spacing", schedule={"sessions": 1, "trials_per_session": 7}),
     "(costs, memory and schedule differ)"),
]


@pytest.mark.parametrize(("other", "words"), WORDED, ids=[w for _, w in WORDED])
def test_the_refusal_names_the_differing_parts_in_words_that_agree(other, words) -> None:
    with pytest.raises(WorldMismatchError) as err:
        check_model_world("q_learning", "q.npz", world_record(A), other, allow_other_world=False)
    assert words in str(err.value)


def test_parts_in_words_for_none_one_and_many() -> None:
    assert parts_differ([]) == "their contents differ"
    assert parts_differ(["memory"]) == "memory differs" and parts_differ(["interface aids"]) == "interface aids differ"
    assert parts_differ(["a", "b"]) == "a and b differ" and parts_differ(["a", "b", "c", "d"]) == "a, b, c and d differ"
