"""The Gymnasium VectorEnv and the SB3 VecEnv over the batched simulator match looped single envs."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest

import shortcut_gym.envs  # noqa: F401 - registers the env
from shortcut_gym.envs import ENV_ID, ActionError, make_world
from shortcut_gym.envs.info import StepInfo, UpcomingInfo
from shortcut_gym.envs.vector import CommandSelectionVectorEnv, make_sb3_vec_env

SHORT = {"sessions": 2, "trials_per_session": 6}
N = 3


def _sync(mode: str) -> gym.vector.SyncVectorEnv:
    return gym.vector.SyncVectorEnv([lambda: gym.make(ENV_ID, schedule=SHORT) for _ in range(N)],
                                    autoreset_mode=mode)


def _compare_info(mine: dict, ref: dict, keys: tuple[str, ...]) -> None:
    for key in keys:
        assert key in mine, key
        np.testing.assert_array_equal(np.asarray(mine[key]), np.asarray(ref[key]), err_msg=key)


@pytest.mark.parametrize("mode", ["NextStep", "SameStep"])
def test_vector_env_equals_sync_vector_of_single_envs(mode: str) -> None:
    ref = _sync(mode)
    mine = CommandSelectionVectorEnv(N, schedule=SHORT, autoreset_mode=mode)
    assert mine.observation_space == ref.observation_space and mine.action_space == ref.action_space
    o1, i1 = mine.reset(seed=11)
    o2, i2 = ref.reset(seed=11)
    np.testing.assert_array_equal(o1, o2)
    _compare_info(i1, i2, ("target", "target_name", "next_trial", "next_onset_s", "next_session"))
    rng = np.random.default_rng(0)
    horizon = SHORT["sessions"] * SHORT["trials_per_session"]
    saw_end = 0
    for _ in range(3 * horizon + 2):  # three users each, through the autoresets
        acts = rng.integers(0, 3, size=N)
        a, b = mine.step(acts), ref.step(acts)
        for x, y in zip(a[:4], b[:4], strict=True):
            np.testing.assert_array_equal(x, y)
        if "trial" in b[4]:
            _compare_info(a[4], b[4], ("trial", "session", "onset_s", "command", "command_name", "action",
                                       "outcome", "duration_s", "p_recall", "target", "next_onset_s", "next_session"))
            for op in b[4]["time_s"]:
                if op.startswith("_"):
                    continue
                np.testing.assert_array_equal(a[4]["time_s"][op], b[4]["time_s"][op])
        if "final_obs" in b[4]:
            np.testing.assert_array_equal(np.stack(a[4]["final_obs"]), np.stack(b[4]["final_obs"]))
            _compare_info(a[4]["final_info"], b[4]["final_info"], ("trial", "outcome", "duration_s"))
        saw_end += int(b[2].all())
        assert not a[3].any()  # the schedule's end terminates; nothing truncates
    assert saw_end >= 2


def test_vector_env_rejects_bad_actions_and_sizes() -> None:
    env = CommandSelectionVectorEnv(2, schedule=SHORT)
    with pytest.raises(RuntimeError, match="reset"):
        env.step(np.zeros(2, dtype=np.int64))
    env.reset(seed=0)
    with pytest.raises(ActionError, match="2 integer actions"):
        env.step(np.zeros(3, dtype=np.int64))
    with pytest.raises(ActionError, match="user 1"):
        env.step(np.array([0, 5]))
    with pytest.raises(ValueError, match="num_envs"):
        CommandSelectionVectorEnv(0)
    with pytest.raises(ValueError, match="3 seeds"):
        env.reset(seed=[1, 2, 3])


def test_sb3_vec_env_equals_dummy_vec_env_and_trains() -> None:
    from stable_baselines3 import PPO
    from stable_baselines3.common.vec_env import DummyVecEnv

    world = make_world(schedule=SHORT)
    mine = make_sb3_vec_env(N, world=world, seed=5)
    ref = DummyVecEnv([lambda: gym.make(ENV_ID, schedule=SHORT) for _ in range(N)])
    ref.seed(5)
    np.testing.assert_array_equal(mine.reset(), ref.reset())
    assert mine.reset_infos == ref.reset_infos
    assert all(set(i) == set(UpcomingInfo.__annotations__) for i in mine.reset_infos)
    sb3_keys = {"TimeLimit.truncated", "terminal_observation"}
    rng = np.random.default_rng(1)
    dones = 0
    for _ in range(30):
        acts = rng.integers(0, 3, size=N)
        a, b = mine.step(acts), ref.step(acts)
        for x, y in zip(a[:3], b[:3], strict=True):
            np.testing.assert_array_equal(x, y)
        for ia, ib in zip(a[3], b[3], strict=True):
            assert set(ia) - sb3_keys == set(StepInfo.__annotations__)  # the whole contract, optional keys too
            assert set(ia) == set(ib)
            if "terminal_observation" in ib:
                np.testing.assert_array_equal(ia["terminal_observation"], ib["terminal_observation"])
            assert {k: v for k, v in ia.items() if k != "terminal_observation"} == \
                {k: v for k, v in ib.items() if k != "terminal_observation"}
        assert mine.reset_infos == ref.reset_infos
        dones += int(b[2].all())
    assert dones == 2
    model = PPO("MlpPolicy", make_sb3_vec_env(4, world=world, seed=0), n_steps=16, batch_size=32, n_epochs=1,
                seed=0, device="cpu")
    model.learn(total_timesteps=128)
    assert model.num_timesteps >= 128


def test_make_vec_uses_the_native_vector_env():
    import gymnasium as gym

    from shortcut_gym.envs.vector import CommandSelectionVectorEnv

    venv = gym.make_vec("shortcut_gym/CommandSelection-v0", num_envs=3, vectorization_mode="vector_entry_point",
                        schedule={"sessions": 1, "trials_per_session": 10})
    assert isinstance(venv.unwrapped, CommandSelectionVectorEnv) and venv.num_envs == 3
    obs, _ = venv.reset(seed=0)
    assert obs.shape == (3, venv.single_observation_space.shape[0])
