"""A tabular agent never trained nor loaded acts with its initial table: every path that simulates
it warns once, naming the agent; a trained or loaded table, or training itself, warns nothing."""

from __future__ import annotations

import warnings
from collections.abc import Callable
from typing import Any

import gymnasium as gym
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.agents.registry import make_agent
from shortcut_gym.agents.rollout import evaluate_agent, run_episode
from shortcut_gym.agents.tabular import UntrainedTableWarning, forget_warned_tables
from shortcut_gym.envs import ENV_ID, CommandSelectionEnv, make_world
from shortcut_gym.lab.simulate import simulate_agents
from shortcut_gym.lab.sweep.batch import simulate_users

SCHEDULE = {"sessions": 2, "trials_per_session": 6, "gap_h": 20.0}
SEEDS = [1, 2, 3, 4, 5]


def _world() -> Any:
    return make_world(schedule=SCHEDULE)


PATHS: dict[str, Callable[[Any], Any]] = {
    "simulate_users": lambda a: simulate_users(_world(), a, SEEDS),
    "simulate_users trials": lambda a: simulate_users(_world(), a, SEEDS, record="trials"),
    "simulate_users per object": lambda a: simulate_users(_world(), a, SEEDS, use_batch_policy=False),
    "simulate_users chunks on threads": lambda a: simulate_users(_world(), a, SEEDS, chunk_users=2, threads=2),
    "simulate_agents": lambda a: simulate_agents(_world(), [a], SEEDS),
    "evaluate_agent": lambda a: evaluate_agent(CommandSelectionEnv(world=_world()), a, SEEDS),
    "run_episode on gymnasium.make": lambda a: [run_episode(gym.make(ENV_ID, schedule=SCHEDULE), a, s) for s in SEEDS],
}


@pytest.fixture(autouse=True)
def _fresh() -> None:
    forget_warned_tables()


def _caught(run: Callable[[], Any]) -> list[warnings.WarningMessage]:
    with warnings.catch_warnings(record=True) as got:
        warnings.simplefilter("always")
        run()
    return [w for w in got if issubclass(w.category, UntrainedTableWarning)]


@pytest.mark.parametrize("name", ["q_learning", "sarsa"])
@pytest.mark.parametrize("path", sorted(PATHS))
def test_untrained_table_warns_once_on_every_path(name: str, path: str) -> None:
    agent = make_agent(name, epsilon=0.2)
    got = _caught(lambda: PATHS[path](agent))
    assert len(got) == 1, [str(w.message) for w in got]
    text = str(got[0].message)
    assert text.startswith(f"{name}: ") and "initial" in text and "model_path" in text
    assert _caught(lambda: PATHS[path](agent)) == []  # once


def test_spec_dict_warns_once_across_chunks() -> None:
    got = _caught(lambda: simulate_users(_world(), {"name": "q_learning"}, range(9), chunk_users=2))
    assert len(got) == 1


@pytest.mark.parametrize("path", sorted(PATHS))
def test_trained_or_loaded_table_warns_nothing(path: str, tmp_path: Any) -> None:
    agent = make_agent("q_learning", epsilon=0.2)
    assert _caught(lambda: agent.train(CommandSelectionEnv(world=_world()), episodes=3, progress_bar=False)) == []
    assert _caught(lambda: PATHS[path](agent)) == []
    saved = agent.save(tmp_path / "q")
    loaded = make_agent("q_learning", model_path=saved)
    assert _caught(lambda: PATHS[path](loaded)) == []


def test_cleared_table_is_initial_again() -> None:
    agent = make_agent("q_learning")
    agent.train(CommandSelectionEnv(world=_world()), episodes=2, progress_bar=False)
    agent.clear()
    assert not agent.has_model()
    assert len(_caught(lambda: simulate_users(_world(), agent, SEEDS))) == 1
