"""An SB3 model file records whether its observations were normalised in training, and loading
refuses a ``normalize`` setting that does not match, whatever statistics file lies beside the model:
statistics from another training run are never applied. Real (tiny) trainings."""

from __future__ import annotations

import json
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pytest

from shortcut_gym.agents.model_files import RECORD_MEMBER
from shortcut_gym.agents.registry import agent_from_spec
from shortcut_gym.agents.sb3.files import NORMALIZED_KEY, norm_path
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import make_world

WORLD = make_world(schedule={"sessions": 1, "trials_per_session": 12})
SMALL = {"n_steps": 32, "batch_size": 32}
STEPS = {"ppo": 256, "a2c": 128}


def _trained(name: str, normalize: bool, path: Path, seed: int = 0):
    hyper = SMALL if name == "ppo" else {"n_steps": 8}
    agent = agent_from_spec({"name": name, "normalize": normalize, "hyperparameters": hyper})
    agent.train(WORLD, total_timesteps=STEPS[name], seed=seed, progress_bar=False, n_envs=2)
    agent.save(path)
    return agent


def _observations(n: int = 12) -> np.ndarray:
    env = CommandSelectionEnv(world=WORLD)
    obs, _ = env.reset(seed=3)
    rows = [obs]
    rng = np.random.default_rng(0)
    for _ in range(n - 1):
        obs, _, done, cut, _ = env.step(int(rng.integers(3)))
        rows.append(obs)
        if done or cut:
            obs, _ = env.reset()
    return np.asarray(rows)


def _load(name: str, path: Path, normalize: bool):
    return agent_from_spec({"name": name, "model_path": str(path), "normalize": normalize})


def _member(path: Path) -> dict:
    with zipfile.ZipFile(path) as z:
        return json.loads(z.read(RECORD_MEMBER).decode())


@pytest.fixture(scope="module")
def models(tmp_path_factory) -> dict[tuple[str, bool], tuple[Path, object]]:
    """(algorithm, normalize) -> (model zip, the agent that trained it), each in its own folder."""
    out = {}
    for name in STEPS:
        for normalize in (False, True):
            folder = tmp_path_factory.mktemp(f"{name}_{normalize}")
            path = folder / "m.zip"
            out[name, normalize] = (path, _trained(name, normalize, path))
    return out


@pytest.mark.parametrize("name", list(STEPS))
@pytest.mark.parametrize("normalize", [False, True])
def test_the_file_records_the_training_setting(models, name: str, normalize: bool) -> None:
    path, _ = models[name, normalize]
    assert _member(path)[NORMALIZED_KEY] is normalize
    assert norm_path(path).is_file() is normalize


@pytest.mark.parametrize("name", list(STEPS))
@pytest.mark.parametrize("normalize", [False, True])
def test_the_matching_setting_loads_the_trained_policy(models, name: str, normalize: bool) -> None:
    path, trained = models[name, normalize]
    loaded = _load(name, path, normalize)
    obs = _observations()
    np.testing.assert_allclose(loaded.probability_rows(obs), trained.probability_rows(obs), atol=1e-6)


@pytest.mark.parametrize("name", list(STEPS))
def test_a_stale_statistics_file_beside_an_unnormalised_model_is_not_applied(models, tmp_path: Path,
                                                                              name: str) -> None:
    plain, trained = models[name, False]
    path = tmp_path / "m.zip"
    shutil.copy(plain, path)
    shutil.copy(norm_path(models[name, True][0]), norm_path(path))  # another run's statistics beside it
    with pytest.raises(ConfigError) as err:
        _load(name, path, normalize=True)
    text = str(err.value)
    assert str(path) in text and "normalize" in text and str(norm_path(path)) in text, text
    obs = _observations()  # with normalize off, the file's own policy on raw observations
    np.testing.assert_allclose(_load(name, path, False).probability_rows(obs), trained.probability_rows(obs),
                               atol=1e-6)


@pytest.mark.parametrize("name", list(STEPS))
def test_an_unnormalised_model_without_statistics_is_refused_with_normalize_on(models, name: str) -> None:
    path, _ = models[name, False]
    with pytest.raises(ConfigError) as err:
        _load(name, path, normalize=True)
    text = str(err.value)
    assert str(path) in text and "normalize=false" in text and "without" in text, text


@pytest.mark.parametrize("name", list(STEPS))
def test_a_normalised_model_is_refused_with_normalize_off(models, name: str) -> None:
    path, _ = models[name, True]
    with pytest.raises(ConfigError) as err:
        _load(name, path, normalize=False)
    text = str(err.value)
    assert str(path) in text and "normalize" in text and str(norm_path(path)) in text, text


def test_a_file_saved_before_the_record_reads_as_before(models, tmp_path: Path) -> None:
    """A zip whose record lacks the entry (written by an earlier version): normalize on reads the
    statistics beside it, as it always did."""
    source, trained = models["ppo", True]
    path = tmp_path / "old.zip"
    with zipfile.ZipFile(source) as old, zipfile.ZipFile(path, "w") as new:
        for item in old.infolist():
            data = old.read(item)
            if item.filename == RECORD_MEMBER:
                record = json.loads(data.decode())
                del record[NORMALIZED_KEY]
                data = json.dumps(record).encode()
            new.writestr(item, data)
    shutil.copy(norm_path(source), norm_path(path))
    obs = _observations()
    np.testing.assert_allclose(_load("ppo", path, True).probability_rows(obs), trained.probability_rows(obs),
                               atol=1e-6)


@pytest.mark.parametrize("normalize", ["false", "true"])
def test_the_train_commands_load_hint_loads_the_model(tmp_path: Path, capsys, normalize: str) -> None:
    """``train`` ends by saying how to load what it wrote; that line loads it (with normalize=false
    when the model was trained so), and ``score`` runs it."""
    import re

    from shortcut_gym.lab.cli import main

    out = tmp_path / "m.zip"
    assert main(["train", "--agent", f"ppo:normalize={normalize},n_steps=32,batch_size=32", "--trials", "128",
                 "--envs", "2", "--sessions", "1", "--eval-users", "0", "--quiet", "--out", str(out)]) == 0
    hint = re.search(r"load it with --agent (\S+)", capsys.readouterr().err)
    assert hint is not None
    assert ("normalize=false" in hint.group(1)) is (normalize == "false")
    assert main(["-q", "score", "--agent", hint.group(1), "--sessions", "1", "--users", "1"]) == 0, \
        capsys.readouterr().err
