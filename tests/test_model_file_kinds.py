"""A model file of the wrong kind is refused in one line naming the file, what it holds and what was asked.

Every kind of file (Q tables of both tabular agents, zips of the three SB3 algorithms as saved now
and as saved before the record named the algorithm, a zip without a model, an .npz without a Q
table, a YAML file, a bare .npy) is given to every loading agent: the agent it was made for loads
it, every other refuses it naming what the test itself wrote into the file.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import numpy as np
import pytest

from shortcut_gym.agents import make_agent
from shortcut_gym.agents.model_files import RECORD_MEMBER, algorithm_from_data, file_contents
from shortcut_gym.envs import CommandSelectionEnv, make_world
from shortcut_gym.envs.errors import DataError
from shortcut_gym.lab.cli import main

WORLD = make_world(schedule={"sessions": 1})
SB3_TINY = {"ppo": {"n_steps": 32, "batch_size": 64, "n_epochs": 1}, "a2c": {"n_steps": 8},
            "dqn": {"buffer_size": 2000, "learning_starts": 50}}
TABULAR = ["q_learning", "sarsa"]
LOADERS = [*TABULAR, *SB3_TINY]
TITLE = {"ppo": "a PPO model", "a2c": "an A2C model", "dqn": "a DQN model",
         "q_learning": "a q_learning Q table", "sarsa": "a sarsa Q table"}


def _without_record(src: Path, out: Path) -> Path:
    """A copy of an SB3 zip as versions before the record wrote it (SB3's members only)."""
    with zipfile.ZipFile(src) as a, zipfile.ZipFile(out, "w") as b:
        for member in a.namelist():
            if member != RECORD_MEMBER:
                b.writestr(member, a.read(member))
    out.with_suffix(".obs_norm.npz").write_bytes(src.with_suffix(".obs_norm.npz").read_bytes())
    return out


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, tuple[Path, str | None, str]]:
    """name -> (path, the agent that loads it or None, what the refusal must say it holds)."""
    d = tmp_path_factory.mktemp("kinds")
    out: dict[str, tuple[Path, str | None, str]] = {}
    for name in TABULAR:
        agent = make_agent(name)
        agent.train(CommandSelectionEnv(world=WORLD), 2, seed=0, progress_bar=False)
        out[name] = (agent.save(d / f"{name}.npz"), name, TITLE[name])
    for name, hyper in SB3_TINY.items():
        agent = make_agent(name, hyperparameters=hyper)
        agent.train(WORLD, 64, seed=0, progress_bar=False, n_envs=2)
        path = agent.save(d / f"{name}.zip")
        out[name] = (path, name, TITLE[name])
        out[f"old_{name}"] = (_without_record(path, d / f"old_{name}.zip"), name, TITLE[name])
    with zipfile.ZipFile(d / "notes.zip", "w") as z:
        z.writestr("notes.txt", "hive 3 queenless")
        z.writestr("frames.csv", "frame,brood\n1,0.4\n")
    out["plain_zip"] = (d / "notes.zip", None, "no model (a zip with the members notes.txt, frames.csv)")
    np.savez(d / "weights.npz", frame_kg=np.ones(4), hive=np.arange(3))
    out["other_npz"] = (d / "weights.npz", None, "no Q table (an .npz with the arrays frame_kg, hive)")
    (d / "apiary.yaml").write_text("name: apiary\nmenus: []\n")
    out["yaml"] = (d / "apiary.yaml", None, "no model (it is not a zip file")
    np.save(d / "q.npy", np.zeros((2, 3)))
    out["npy"] = (d / "q.npy", None, "no model (it is not a zip file")
    return out


KINDS = [*TABULAR, *SB3_TINY, *(f"old_{n}" for n in SB3_TINY), "plain_zip", "other_npz", "yaml", "npy"]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("loader", LOADERS)
def test_each_loader_takes_its_own_files_and_refuses_every_other_kind(files, kind, loader) -> None:
    path, owner, holds = files[kind]
    if owner == loader:
        agent = make_agent(loader, model_path=str(path), allow_other_world=True)
        assert agent.has_model()
        return
    with pytest.raises(DataError) as err:
        make_agent(loader, model_path=str(path))
    message = str(err.value)
    asked = f"not a {loader} Q table" if loader in TABULAR else f"not {TITLE[loader]}"
    assert "\n" not in message
    assert message.startswith(f"{loader}: {path} holds {holds}"), message
    assert asked in message
    if owner is not None:  # the file's own agent is named, with the spec that loads it
        assert message.endswith(f"(load it with {owner}:model_path={path})")
    else:
        assert "load it with" not in message


@pytest.mark.parametrize("name", list(SB3_TINY))
def test_the_algorithm_is_told_from_sb3_settings_alone(files, name) -> None:
    path = files[f"old_{name}"][0]
    with zipfile.ZipFile(path) as z:
        assert RECORD_MEMBER not in z.namelist()
        assert algorithm_from_data(z.read("data").decode()) == name
    assert file_contents(path).name == name


@pytest.mark.parametrize(("kind", "strip", "loader"), [
    ("old_dqn", ["exploration_rate"], "ppo"), ("old_ppo", ["n_epochs", "clip_range", "vf_coef"], "dqn"),
])
def test_an_sb3_zip_of_an_untold_algorithm_fails_in_one_line(files, tmp_path, kind, strip, loader) -> None:
    """A zip whose settings were stripped of what tells its algorithm apart, given to another
    algorithm: SB3 cannot build the policy, and that comes back as one line."""
    out = tmp_path / "stripped.zip"
    with zipfile.ZipFile(files[kind][0]) as a, zipfile.ZipFile(out, "w") as b:
        for member in a.namelist():
            body = a.read(member)
            if member == "data":
                data = json.loads(body)
                for key in strip:
                    del data[key]
                body = json.dumps(data).encode()
            b.writestr(member, body)
    assert file_contents(out).kind == "sb3" and file_contents(out).name is None
    with pytest.raises(DataError) as err:
        make_agent(loader, model_path=str(out))
    message, title = str(err.value), TITLE[loader]
    assert "\n" not in message and message.startswith(f"{loader}: {out} holds an SB3 model of an algorithm it does")
    assert "could not read" in message and f"is it {title} written by save?" in message


def test_the_record_names_the_algorithm_but_the_world_record_stays_the_worlds(files) -> None:
    path = files["a2c"][0]
    with zipfile.ZipFile(path) as z:
        member = json.loads(z.read(RECORD_MEMBER))
    assert member["algorithm"] == "a2c"
    loaded = make_agent("a2c", model_path=str(path))
    assert loaded.trained_for is not None and "algorithm" not in loaded.trained_for
    assert loaded.trained_for["digest"] == WORLD.problem_digest()


@pytest.mark.parametrize(("loader", "kind"), [
    ("ppo", "q_learning"), ("a2c", "q_learning"), ("dqn", "q_learning"), ("dqn", "ppo"), ("a2c", "ppo"),
    ("ppo", "a2c"), ("ppo", "plain_zip"), ("q_learning", "other_npz"), ("q_learning", "ppo"),
])
def test_cli_refuses_a_wrong_kind_in_one_line(files, capsys, loader, kind) -> None:
    path, owner, holds = files[kind]
    assert main(["simulate", "--agent", f"{loader}:model_path={path}", "--sessions", "1", "--users", "1"]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err
    assert err.startswith("shortcut-gym simulate: error: ") and f"{path} holds {holds}" in err
