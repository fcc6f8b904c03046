"""The env step's info and reward as plain Python values, read on the fast path (no numpy scalars,
the upcoming trial passed in rather than read back), equal to reading the simulator's state."""

import gymnasium as gym
import numpy as np
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.envs import ENV_ID
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.info import simulator_upcoming_info


def test_operator_names_cover_every_operator_column() -> None:
    assert len(k.OPERATOR_NAMES) == k.N_OPS
    assert len(set(k.OPERATOR_NAMES)) == k.N_OPS


@pytest.mark.parametrize("aids", [None, {"menu_delay": {"commands": "all", "delay_s": 0.4}}])
def test_step_info_is_plain_python_and_matches_the_simulator(aids: dict | None) -> None:
    kwargs = {"schedule": {"sessions": 2, "trials_per_session": 15}}
    if aids is not None:
        kwargs["aids"] = aids
    env = gym.make(ENV_ID, **kwargs)
    env.reset(seed=3)
    sim = env.unwrapped._sim
    names = env.unwrapped.world.commands.names
    rng = np.random.default_rng(0)
    for t in range(30):
        a = int(rng.integers(0, 3))
        _, reward, terminated, _, info = env.step(a)
        assert type(reward) is float and reward == float(sim.reward[0])
        assert type(info["trial"]) is int and info["trial"] == t
        assert tuple(info["time_s"]) == k.OPERATOR_NAMES
        assert [info["time_s"][op] for op in k.OPERATOR_NAMES] == sim.operator_time_s[0].tolist()
        assert info["duration_s"] == pytest.approx(sum(info["time_s"].values()), rel=1e-12, abs=1e-12)
        # the upcoming part given the known next trial equals the one read from the simulator
        read_back = simulator_upcoming_info(sim, 0, names)
        assert {key: info[key] for key in read_back} == read_back
        assert terminated == (t == 29)
