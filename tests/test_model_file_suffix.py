"""Saving and loading a model names the file the user gave: a path ending in the agent kind's suffix
(.zip for SB3 models, .npz for Q tables) is written and read as it is, a path without a suffix gets
it added (the path written is returned), any other suffix is refused naming the path and the suffix
expected, with no file written (before, ``run.v2`` was silently written as ``run.zip``)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from shortcut_gym.agents.model_files import model_file_path
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import make_world

WORLD = make_world(schedule={"sessions": 1, "trials_per_session": 12})
SB3_HYPER = {"ppo": {"n_steps": 32, "batch_size": 32}, "a2c": {"n_steps": 8},
             "dqn": {"learning_starts": 0, "buffer_size": 500, "train_freq": 4}}


@pytest.mark.parametrize(("given", "suffix", "written"), [
    ("m", ".zip", "m"), ("m.zip", ".zip", "m.zip"), ("q", ".npz", "q"), ("q.npz", ".npz", "q.npz"),
    ("dir.v1/q", ".npz", "dir.v1/q"), ("m.", ".zip", "m")])
def test_the_path_given_or_the_suffix_added(tmp_path: Path, given: str, suffix: str, written: str) -> None:
    expected = tmp_path / written
    expected = expected if expected.suffix == suffix else expected.with_name(expected.name + suffix)
    assert model_file_path("agent", tmp_path / given, suffix) == expected


@pytest.mark.parametrize(("given", "suffix"), [("run.v2", ".zip"), ("m.npz", ".zip"), ("q.zip", ".npz"),
                                               ("table.npy", ".npz"), ("agent_1.5", ".zip")])
def test_another_suffix_is_refused_naming_path_and_suffix(tmp_path: Path, given: str, suffix: str) -> None:
    with pytest.raises(ConfigError) as err:
        model_file_path("ppo", tmp_path / given, suffix)
    text = str(err.value)
    assert str(tmp_path / given) in text and f"must end in {suffix}" in text and text.startswith("ppo:")


def _tabular(name: str):
    agent = agent_from_spec({"name": name})
    agent.train(CommandSelectionEnv(world=WORLD), episodes=3, seed=0, progress_bar=False)
    return agent


def _sb3(name: str):
    agent = agent_from_spec({"name": name, "hyperparameters": SB3_HYPER[name]})
    agent.train(WORLD, total_timesteps=64, seed=0, progress_bar=False, n_envs=2)
    return agent


KINDS = [("q_learning", _tabular, ".npz"), ("sarsa", _tabular, ".npz"), ("ppo", _sb3, ".zip"),
         ("a2c", _sb3, ".zip"), ("dqn", _sb3, ".zip")]


@pytest.mark.parametrize(("name", "make", "suffix"), KINDS, ids=[k[0] for k in KINDS])
def test_every_saving_agent_follows_the_rule(tmp_path: Path, name: str, make, suffix: str) -> None:
    agent = make(name)
    bare = agent.save(tmp_path / "bare")
    assert bare == tmp_path / f"bare{suffix}" and bare.is_file()
    exact = agent.save(tmp_path / f"exact{suffix}")
    assert exact == tmp_path / f"exact{suffix}" and exact.is_file()
    with pytest.raises(ConfigError, match=f"must end in {suffix}"):
        agent.save(tmp_path / "run.v2")
    assert sorted(p.name for p in tmp_path.iterdir() if "run" in p.name) == []  # nothing written
    # loading by the bare name reads the file save wrote; the loaded agent acts as the saved one
    loaded = agent_from_spec({"name": name}).load(tmp_path / "bare")
    if name in ("q_learning", "sarsa"):
        np.testing.assert_array_equal(loaded.q, agent.q)
    else:
        a = agent.model.policy.state_dict()
        b = loaded.model.policy.state_dict()
        assert all(np.array_equal(a[k].cpu().numpy(), b[k].cpu().numpy()) for k in a)
